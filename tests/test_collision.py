"""Colliders in a real physics engine: spheres dropped on the per-chunk collision meshes in Bullet
(pybullet, from the package index) come to rest on the true surface, within the collision
tolerance plus a stated solver margin; plus the colliders' own guarantees (no degenerate
triangles, every chunk under the triangle cap).

How a drop works: pybullet's gravity is uniform, so for each drop place the nearby chunk colliders
are moved so that the ground point under the drop sits at the origin (Bullet works near the origin)
and rotated so that the local up `u` is +Z, making gravity (-Z) point to the planet centre (-u). A
sphere falls from 2 m above the ground and settles. Its centre is mapped back to the planet
frame and its distance to the analytic surface (`globemill.field(spec)`, itself checked against
the plain-numpy reference of docs/terrain.md in test_field.py), minus the radius, is the resting
error: the gap between the sphere and the true ground (> 0 floating, < 0 sunk in).

Why the bound is the collider tolerance t plus the solver margin: every collider point lies within
t of the true surface and every surface point within t of the collider (two-sided tolerance). The
sphere touches the collider at some point q, |c - q| = r (less any solver penetration), and q is
within t of the surface, so the distance from the centre to the surface is at most r + t; no
collider point is nearer than r - penetration to c, so no surface point is nearer than
r - penetration - t (triangle inequality).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
import pybullet as pb
import pytest
import trimesh

import globemill
from globemill.bake import BakeResult

F64 = npt.NDArray[np.float64]

RADIUS_M = 400.0
TOLERANCE_M = 0.2
COLLISION_TOLERANCE_M = 0.4
TRIANGLE_CAP = 4096  # roomy: the colliders below must not need their tolerance raised

SPHERE_RADIUS_M = 0.5
DROP_HEIGHT_M = 2.0  # from the sphere's lowest point to the ground under it
# Bullet solver margin allowed on top of the collider tolerance. 0.04 m is Bullet's default
# split-impulse penetration threshold (btContactSolverInfo.h, m_splitImpulsePenetrationThreshold
# = -0.04; the same value as CONVEX_DISTANCE_MARGIN in btCollisionMargin.h): penetrations shallower
# than this are left to the solver's soft position correction. The shapes themselves add no
# margin: a concave triangle mesh has collision margin 0 (btConcaveShape.cpp) and a sphere uses its
# radius as its whole margin (btSphereShape.h, getMargin returns the radius), so the contact is
# against the exact sphere and the exact triangles. test_bullet_rests_on_exact_planes measures what
# this engine build really leaves on exact planes and checks it is within this margin.
SOLVER_MARGIN_M = 0.04
# the dense sample of the true surface: a square of +-1.5 m around the foot of the centre with a
# 1 cm grid. The nearest grid point is at most h/sqrt(2) sideways from the true foot point, which
# overestimates the distance by about (h^2 / 2) / (2 r) = 5e-5 m (Pythagoras): negligible.
SAMPLE_HALF_M = 1.5
SAMPLE_STEP_M = 0.01

TIME_STEP_S = 1.0 / 240.0  # pybullet's default fixedTimeStep (getPhysicsEngineParameters)
SETTLE_STEPS = 1200  # 5 simulated seconds: 0.64 s of fall, the rest to settle
REST_SPEED_M_S = 1e-3
# keep the chunks with a triangle centroid this close to the ground point under the drop:
# colliders at 0.4 m on a 400 m sphere have edges of a few tens of metres, and a settled sphere
# moves at most a few metres
CHUNK_REACH_M = 60.0
# high friction and rolling friction so the sphere comes to rest on the hill flanks (about 20
# degrees at their steepest) instead of rolling to the foot
FRICTION = 1.0
ROLLING_FRICTION = 0.5
SPINNING_FRICTION = 0.01
LINEAR_DAMPING = 0.1
ANGULAR_DAMPING = 0.5
GRAVITY_M_S2 = 9.81

# the world: two hills, a valley, a mesa with a flat top and a 5 m wall, a crater
HILLS = [(20.0, 10.0, 18.0, 30.0), (-15.0, 40.0, 12.0, 22.0)]  # lat, lon, amplitude, sigma
VALLEY = (50.0, -60.0, -8.0, 40.0)
MESA = (0.0, -30.0, 8.0, 30.0, 5.0)  # lat, lon, height, top radius, wall
CRATER = (-40.0, 120.0, 40.0, 6.0, 3.0, 15.0)  # lat, lon, rim radius, depth, rim height, width


def _world(bias: str, cap: int = TRIANGLE_CAP) -> globemill.WorldSpec:
    hills = [
        {"kind": "hill", "lat_deg": la, "lon_deg": lo, "amplitude_m": a, "sigma_m": s}
        for la, lo, a, s in [*HILLS, VALLEY]
    ]
    la, lo, h, a, w = MESA
    mesa = {
        "kind": "mesa",
        "lat_deg": la,
        "lon_deg": lo,
        "height_m": h,
        "radius_m": a,
        "wall_width_m": w,
    }
    la, lo, a, d, rh, rw = CRATER
    crater = {
        "kind": "crater",
        "lat_deg": la,
        "lon_deg": lo,
        "radius_m": a,
        "depth_m": d,
        "rim_height_m": rh,
        "rim_width_m": rw,
    }
    return globemill.parse_spec(
        {
            "name": "tumbledown",
            "radius_m": RADIUS_M,
            "tolerance_m": TOLERANCE_M,
            "lod": {"levels": 1},
            "collision": {
                "tolerance_m": COLLISION_TOLERANCE_M,
                "bias": bias,
                "max_triangles_per_chunk": cap,
            },
            "features": [*hills, mesa, crater],
        }
    )


def _unit(lat_deg: float, lon_deg: float) -> F64:
    # u(lat, lon) = (cos lat sin lon, sin lat, cos lat cos lon), docs/terrain.md
    la, lo = np.radians(lat_deg), np.radians(lon_deg)
    return np.array([np.cos(la) * np.sin(lo), np.sin(la), np.cos(la) * np.cos(lo)])


def _frame(u: F64) -> F64:
    """(3, 3) rows e1, e2, u: a right-handed orthonormal frame with u as its third axis."""
    a = np.array([0.0, 1.0, 0.0]) if abs(u[1]) < 0.9 else np.array([1.0, 0.0, 0.0])
    e1 = np.cross(a, u)
    e1 /= np.linalg.norm(e1)
    return np.stack([e1, np.cross(u, e1), u])


def _away(centre: F64, distance_m: float, azimuth: float) -> F64:
    """The direction `distance_m` along the base sphere from `centre` towards `azimuth`."""
    f = _frame(centre)
    t = np.cos(azimuth) * f[0] + np.sin(azimuth) * f[1]
    theta = distance_m / RADIUS_M  # arc length = R * angle
    return np.cos(theta) * centre + np.sin(theta) * t


def _drop_places() -> list[tuple[str, F64]]:
    """Where to drop: mesa top, hill flanks and tops, valley floor, crater bowl, random."""
    places: list[tuple[str, F64]] = []
    mesa = _unit(*MESA[:2])
    places.append(("mesa top centre", mesa))
    # on the flat top (radius 30 m), well inside its edge
    places += [(f"mesa top {k}", _away(mesa, 8.0 + 3.0 * k, 1.3 * k)) for k in range(5)]
    for i, (la, lo, _, sigma) in enumerate(HILLS):
        top = _unit(la, lo)
        places.append((f"hill {i} top", top))
        # at d = sigma a Gaussian is at its steepest (inflection point)
        places += [
            (f"hill {i} flank {k}", _away(top, sigma, 0.3 * i + k * np.pi / 2)) for k in range(4)
        ]
    places.append(("valley floor", _unit(*VALLEY[:2])))
    crater = _unit(*CRATER[:2])
    # the bowl spans d <= 40 m; stay on its inner slope
    places += [(f"crater bowl {k}", _away(crater, 7.5 * k, 1.1 * k)) for k in range(5)]
    rng = np.random.default_rng(20240611)
    for k in range(12):
        v = rng.normal(size=3)  # normal vectors give uniform directions (Muller 1959)
        places.append((f"random {k}", v / np.linalg.norm(v)))
    return places


@dataclass
class Drop:
    place: str
    gap_m: float  # distance from the centre to the true surface minus the radius
    centre_above_m: float  # radial height of the centre above the ground
    speed_m_s: float
    contacts: int


def _static_chunks(cid: int, res: BakeResult, origin: F64, rot: F64) -> int:
    """One static concave triangle-mesh body per chunk collider near `origin`; returns count."""
    made = 0
    for col in res.colliders:
        centroids = col.positions[col.triangles].mean(axis=1)
        if np.min(np.linalg.norm(centroids - origin, axis=1)) > CHUNK_REACH_M:
            continue
        local = (col.positions - origin) @ rot.T
        shape = pb.createCollisionShape(
            pb.GEOM_MESH,
            vertices=local.tolist(),
            indices=col.triangles.astype(np.int64).ravel().tolist(),
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
        made += 1
    return made


def _settle_sphere(cid: int, start: F64) -> tuple[F64, float, int]:
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


def _gap_to_surface(fld: globemill.Field, centre: F64) -> tuple[float, float]:
    """Signed distance from `centre` to a dense local sample of the true surface minus the
    sphere radius, and the radial height of the centre above the ground."""
    up = centre / np.linalg.norm(centre)
    f = _frame(up)
    g = np.arange(-SAMPLE_HALF_M, SAMPLE_HALF_M + SAMPLE_STEP_M / 2, SAMPLE_STEP_M)
    x, y = (a.reshape(-1, 1) for a in np.meshgrid(g, g))
    dirs = RADIUS_M * up + x * f[0] + y * f[1]
    ground = fld.surface(dirs)
    dist = float(np.min(np.linalg.norm(ground - centre, axis=1)))
    above = float(np.linalg.norm(centre) - RADIUS_M - fld.height(up[None])[0])
    # a centre below the ground (inside the solid) is sunk by its distance plus the radius
    signed = dist if above >= 0 else -dist
    return signed - SPHERE_RADIUS_M, above


def _drop_all(res: BakeResult) -> list[Drop]:
    fld = globemill.field(res.spec)
    cid = pb.connect(pb.DIRECT)
    out = []
    try:
        for place, u in _drop_places():
            pb.resetSimulation(physicsClientId=cid)
            origin = fld.surface(u[None])[0]
            rot = _frame(u)  # planet frame -> local frame with u as +Z
            assert _static_chunks(cid, res, origin, rot) > 0, place
            start = np.array([0.0, 0.0, DROP_HEIGHT_M + SPHERE_RADIUS_M])
            local, speed, contacts = _settle_sphere(cid, start)
            centre = origin + rot.T @ local
            gap, above = _gap_to_surface(fld, centre)
            out.append(Drop(place, gap, above, speed, contacts))
    finally:
        pb.disconnect(physicsClientId=cid)
    return out


@pytest.fixture(scope="module")
def baked() -> dict[str, BakeResult]:
    return {bias: globemill.bake(_world(bias), threads=2) for bias in ("centered", "none")}


@pytest.fixture(scope="module")
def drops(baked: dict[str, BakeResult]) -> dict[str, list[Drop]]:
    return {bias: _drop_all(res) for bias, res in baked.items()}


def test_bullet_rests_on_exact_planes() -> None:
    """Calibrate the solver margin: on exact planes (two triangles, flat and tilted 20 degrees)
    the same sphere, settings and steps must rest at the plane within SOLVER_MARGIN_M."""
    for tilt_deg in (0.0, 20.0):
        t = np.radians(tilt_deg)
        n = np.array([0.0, -np.sin(t), np.cos(t)])
        a = np.array([1.0, 0.0, 0.0])
        b = np.cross(n, a)
        corners = 50.0 * np.array([-a - b, a - b, a + b, -a + b])
        cid = pb.connect(pb.DIRECT)
        try:
            shape = pb.createCollisionShape(
                pb.GEOM_MESH,
                vertices=corners.tolist(),
                indices=[0, 1, 2, 0, 2, 3],
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
            centre, speed, contacts = _settle_sphere(cid, n * (DROP_HEIGHT_M + SPHERE_RADIUS_M))
        finally:
            pb.disconnect(physicsClientId=cid)
        # distance from a point to a plane through the origin with unit normal n: c . n
        gap = float(centre @ n) - SPHERE_RADIUS_M
        assert contacts > 0 and speed < REST_SPEED_M_S, (tilt_deg, speed, contacts)
        assert abs(gap) <= SOLVER_MARGIN_M, (tilt_deg, gap)


@pytest.mark.parametrize("bias", ["centered", "none"])
def test_spheres_rest_on_the_true_surface(
    bias: str, baked: dict[str, BakeResult], drops: dict[str, list[Drop]]
) -> None:
    col = baked[bias].report["collision"]
    assert col["bias"] == bias
    # the cap is roomy, so the collider keeps the tolerance asked for
    assert col["tolerance_m"] == pytest.approx(COLLISION_TOLERANCE_M)
    assert col["max_error_m"] <= col["tolerance_m"]
    limit = col["tolerance_m"] + SOLVER_MARGIN_M
    results = drops[bias]
    assert len(results) >= 30
    for d in results:
        where = f"{bias}: {d.place}: gap {d.gap_m:+.4f} m, speed {d.speed_m_s:.1e} m/s"
        # it came to rest on the ground, not inside it, and did not fall through
        assert d.contacts > 0, where
        assert d.speed_m_s < REST_SPEED_M_S, where
        assert d.centre_above_m > 0, where
        assert abs(d.gap_m) <= limit, f"{where}; allowed {limit:g} m"
    gaps = np.array([d.gap_m for d in results])
    print(
        f"\n{bias}: {len(gaps)} drops, resting error max {np.abs(gaps).max():.4f} m, "
        f"mean |gap| {np.abs(gaps).mean():.4f} m, mean signed {gaps.mean():+.4f} m "
        f"(allowed {limit:g} m)"
    )


def test_centered_bias_rests_closer_to_the_true_surface(drops: dict[str, list[Drop]]) -> None:
    # the point of the bias (DESIGN.md, collision variants): bodies neither float above the true
    # surface nor sink into it, so on average they rest nearer to it than on unbiased colliders
    # whose vertices lie on the surface and whose flat triangles cut under every bump
    mean = {b: float(np.mean([d.gap_m for d in r])) for b, r in drops.items()}
    assert abs(mean["centered"]) < abs(mean["none"]), mean


def _triangle_checks(res: BakeResult) -> None:
    nchunks = len(res.chunk_corners)
    assert [c.chunk for c in res.colliders] == list(range(nchunks))
    total = 0
    for c in res.colliders:
        tris = c.triangles
        assert tris.dtype == np.uint32 and tris.ndim == 2 and tris.shape[1] == 3
        assert c.positions.dtype == np.float64 and c.positions.shape[1] == 3
        assert len(tris) > 0 and int(tris.max()) < len(c.positions)
        # no triangle repeats a vertex index
        assert np.all((tris[:, 0] != tris[:, 1]) & (tris[:, 1] != tris[:, 2])), c.chunk
        assert np.all(tris[:, 0] != tris[:, 2]), c.chunk
        # reference library: trimesh's test for faces of non-zero height
        mesh = trimesh.Trimesh(c.positions, tris, process=False)
        assert mesh.nondegenerate_faces().all(), c.chunk
        # and by hand: twice the area over the longest edge squared is the smallest height over
        # the longest edge, 0 for a collinear triangle; 1e-3 is a sliver of about 0.1 degree
        # (common practice)
        p = c.positions[tris]
        area2 = np.linalg.norm(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), axis=1)
        edges = np.linalg.norm(p - np.roll(p, 1, axis=1), axis=2).max(axis=1)
        assert np.min(area2 / edges**2) > 1e-3, c.chunk
        total += len(tris)
    col = res.report["collision"]
    assert col["degenerate_triangles"] == 0
    assert col["triangles"] == total


@pytest.mark.parametrize("bias", ["centered", "none"])
def test_colliders_have_no_degenerate_triangles(bias: str, baked: dict[str, BakeResult]) -> None:
    _triangle_checks(baked[bias])
    cap = baked[bias].spec.collision.max_triangles_per_chunk
    assert max(len(c.triangles) for c in baked[bias].colliders) <= cap


def test_every_chunk_fits_a_tight_triangle_cap(baked: dict[str, BakeResult]) -> None:
    # a cap below what the centered collider needs at 0.4 m: the tolerance is raised until every
    # chunk fits (CollisionSettings.max_triangles_per_chunk), and the colliders stay sound
    cap = 1000
    assert max(len(c.triangles) for c in baked["centered"].colliders) > cap
    res = globemill.bake(_world("centered", cap=cap), threads=2)
    counts = [len(c.triangles) for c in res.colliders]
    assert max(counts) <= cap, max(counts)
    col = res.report["collision"]
    assert col["max_triangles_per_chunk"] == max(counts)
    assert col["tolerance_m"] > COLLISION_TOLERANCE_M
    assert col["max_error_m"] <= col["tolerance_m"]
    _triangle_checks(res)
