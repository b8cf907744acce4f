"""Spheres dropped on baked colliders in Bullet (pybullet, from the package index), shared by
tests/test_collision.py and benchmarks/bench_collider.py.

How a drop works: pybullet's gravity is uniform, so for each drop place the nearby chunk colliders
are moved so that the ground point under the drop sits at the origin (Bullet works near the origin)
and rotated so that the local up `u` is +Z, making gravity (-Z) point to the planet centre (-u). A
sphere falls from `DROP_HEIGHT_M` above the ground and settles. Its centre is mapped back to the
planet frame and its distance to the analytic surface (`globemill.field(spec)`, itself checked
against the plain-numpy reference of docs/terrain.md in test_field.py), minus the radius, is the
resting gap: the gap between the sphere and the true ground (> 0 floating, < 0 sunk in).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
import pybullet as pb

import globemill
from globemill.bake import BakeResult

F64 = npt.NDArray[np.float64]

SPHERE_RADIUS_M = 0.5
DROP_HEIGHT_M = 2.0  # from the sphere's lowest point to the ground under it
# the dense sample of the true surface: a square of +-1.5 m around the foot of the centre with a
# 1 cm grid. The nearest grid point is at most h/sqrt(2) sideways from the true foot point, which
# overestimates the distance by about (h^2 / 2) / (2 r) = 5e-5 m (Pythagoras): negligible.
SAMPLE_HALF_M = 1.5
SAMPLE_STEP_M = 0.01

TIME_STEP_S = 1.0 / 240.0  # pybullet's default fixedTimeStep (getPhysicsEngineParameters)
SETTLE_STEPS = 1200  # 5 simulated seconds: 0.64 s of fall, the rest to settle
REST_SPEED_M_S = 1e-3
# high friction and rolling friction so the sphere comes to rest on the hill flanks (about 20
# degrees at their steepest) instead of rolling to the foot
FRICTION = 1.0
ROLLING_FRICTION = 0.5
SPINNING_FRICTION = 0.01
LINEAR_DAMPING = 0.1
ANGULAR_DAMPING = 0.5
GRAVITY_M_S2 = 9.81


def unit(lat_deg: float, lon_deg: float) -> F64:
    # u(lat, lon) = (cos lat sin lon, sin lat, cos lat cos lon), docs/terrain.md
    la, lo = np.radians(lat_deg), np.radians(lon_deg)
    return np.array([np.cos(la) * np.sin(lo), np.sin(la), np.cos(la) * np.cos(lo)])


def frame(u: F64) -> F64:
    """(3, 3) rows e1, e2, u: a right-handed orthonormal frame with u as its third axis."""
    a = np.array([0.0, 1.0, 0.0]) if abs(u[1]) < 0.9 else np.array([1.0, 0.0, 0.0])
    e1 = np.cross(a, u)
    e1 /= np.linalg.norm(e1)
    return np.stack([e1, np.cross(u, e1), u])


def away(centre: F64, radius_m: float, distance_m: float, azimuth: float) -> F64:
    """The direction `distance_m` along the base sphere (radius `radius_m`) from `centre`
    towards `azimuth`."""
    f = frame(centre)
    t = np.cos(azimuth) * f[0] + np.sin(azimuth) * f[1]
    theta = distance_m / radius_m  # arc length = R * angle
    return np.cos(theta) * centre + np.sin(theta) * t


@dataclass
class Drop:
    place: str
    gap_m: float  # distance from the centre to the true surface minus the radius
    centre_above_m: float  # radial height of the centre above the ground
    speed_m_s: float
    contacts: int


def static_mesh(cid: int, vertices: F64, triangles: npt.NDArray[np.int64]) -> int:
    """A static concave triangle-mesh body with the drop's ground friction; returns its id."""
    shape = pb.createCollisionShape(
        pb.GEOM_MESH,
        vertices=vertices.tolist(),
        indices=triangles.ravel().tolist(),
        flags=pb.GEOM_FORCE_CONCAVE_TRIMESH,
        physicsClientId=cid,
    )
    body = pb.createMultiBody(0, shape, physicsClientId=cid)
    pb.changeDynamics(
        body,
        -1,
        lateralFriction=FRICTION,
        rollingFriction=ROLLING_FRICTION,
        restitution=0.0,
        physicsClientId=cid,
    )
    return int(body)


def static_chunks(cid: int, res: BakeResult, origin: F64, rot: F64, reach_m: float) -> int:
    """One static concave triangle-mesh body per chunk collider with a triangle centroid within
    `reach_m` of `origin`; returns how many."""
    made = 0
    for col in res.colliders:
        centroids = col.positions[col.triangles].mean(axis=1)
        if np.min(np.linalg.norm(centroids - origin, axis=1)) > reach_m:
            continue
        local = (col.positions - origin) @ rot.T
        static_mesh(cid, local, col.triangles.astype(np.int64))
        made += 1
    return made


def settle_sphere(cid: int, start: F64) -> tuple[F64, float, int]:
    """Drop a sphere with its centre at `start` (local frame, gravity -Z); return its resting
    centre, its speed and its number of contact points."""
    pb.setGravity(0.0, 0.0, -GRAVITY_M_S2, physicsClientId=cid)
    pb.setTimeStep(TIME_STEP_S, physicsClientId=cid)
    shape = pb.createCollisionShape(pb.GEOM_SPHERE, radius=SPHERE_RADIUS_M, physicsClientId=cid)
    sphere = pb.createMultiBody(1.0, shape, basePosition=start.tolist(), physicsClientId=cid)
    pb.changeDynamics(
        sphere,
        -1,
        lateralFriction=FRICTION,
        rollingFriction=ROLLING_FRICTION,
        spinningFriction=SPINNING_FRICTION,
        restitution=0.0,
        linearDamping=LINEAR_DAMPING,
        angularDamping=ANGULAR_DAMPING,
        physicsClientId=cid,
    )
    for _ in range(SETTLE_STEPS):
        pb.stepSimulation(physicsClientId=cid)
    pos, _ = pb.getBasePositionAndOrientation(sphere, physicsClientId=cid)
    vel, _ = pb.getBaseVelocity(sphere, physicsClientId=cid)
    contacts = len(pb.getContactPoints(sphere, physicsClientId=cid))
    return np.array(pos), float(np.linalg.norm(vel)), contacts


def gap_to_surface(fld: globemill.Field, centre: F64) -> tuple[float, float]:
    """Signed distance from `centre` to a dense local sample of the true surface minus the
    sphere radius, and the radial height of the centre above the ground."""
    up = centre / np.linalg.norm(centre)
    f = frame(up)
    g = np.arange(-SAMPLE_HALF_M, SAMPLE_HALF_M + SAMPLE_STEP_M / 2, SAMPLE_STEP_M)
    x, y = (a.reshape(-1, 1) for a in np.meshgrid(g, g))
    dirs = fld.radius_m * up + x * f[0] + y * f[1]
    ground = fld.surface(dirs)
    dist = float(np.min(np.linalg.norm(ground - centre, axis=1)))
    above = float(np.linalg.norm(centre) - fld.radius_m - fld.height(up[None])[0])
    # a centre below the ground (inside the solid) is sunk by its distance plus the radius
    signed = dist if above >= 0 else -dist
    return signed - SPHERE_RADIUS_M, above


def drop_all(
    res: BakeResult,
    places: Sequence[tuple[str, F64]],
    reach_m: float,
    above_collider: bool = False,
) -> list[Drop]:
    """One drop per (name, unit direction) place, each in a fresh Bullet world holding the chunk
    colliders within `reach_m` of the ground point under it. The sphere starts DROP_HEIGHT_M
    above the ground, or with `above_collider` above the higher of the ground and the collider
    (a Bullet ray cast straight down): by a vertical wall the collider may lean out over the foot
    by up to its tolerance, and a sphere started inside it falls through."""
    fld = globemill.field(res.spec)
    cid = pb.connect(pb.DIRECT)
    out = []
    try:
        for place, u in places:
            pb.resetSimulation(physicsClientId=cid)
            origin = fld.surface(u[None])[0]
            rot = frame(u)  # planet frame -> local frame with u as +Z
            assert static_chunks(cid, res, origin, rot, reach_m) > 0, place
            base = 0.0
            if above_collider:
                hit = pb.rayTest([0.0, 0.0, 1e3], [0.0, 0.0, -1e3], physicsClientId=cid)[0]
                if hit[0] >= 0:
                    base = max(base, float(hit[3][2]))
            start = np.array([0.0, 0.0, base + DROP_HEIGHT_M + SPHERE_RADIUS_M])
            local, speed, contacts = settle_sphere(cid, start)
            centre = origin + rot.T @ local
            gap, above = gap_to_surface(fld, centre)
            out.append(Drop(place, gap, above, speed, contacts))
    finally:
        pb.disconnect(physicsClientId=cid)
    return out
