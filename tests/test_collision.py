"""Colliders in a real physics engine: spheres dropped on the per-chunk collision meshes in Bullet
(pybullet, from the package index; the drop itself is described in bullet_drops.py) come to rest on
the true surface, within the collision tolerance plus a stated solver margin; plus the colliders'
own guarantees (no degenerate triangles, every chunk under the triangle cap).

Why the bound is the collider tolerance t plus the solver margin: every collider point lies within
t of the true surface and every surface point within t of the collider (two-sided tolerance). The
sphere touches the collider at some point q, |c - q| = r (less any solver penetration), and q is
within t of the surface, so the distance from the centre to the surface is at most r + t; no
collider point is nearer than r - penetration to c, so no surface point is nearer than
r - penetration - t (triangle inequality).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import numpy.typing as npt
import pybullet as pb
import pytest
import trimesh
from bullet_drops import (
    DROP_HEIGHT_M,
    F64,
    REST_SPEED_M_S,
    SPHERE_RADIUS_M,
    Drop,
    away,
    drop_all,
    settle_sphere,
    static_mesh,
    unit,
)

import globemill
from globemill.bake import COLLIDER_MIN_ANGLE_DEG, BakeResult

RADIUS_M = 400.0
TOLERANCE_M = 0.2
COLLISION_TOLERANCE_M = 0.4
TRIANGLE_CAP = 4096  # roomy: the colliders below must not need their tolerance raised

# Bullet solver margin allowed on top of the collider tolerance. 0.04 m is Bullet's default
# split-impulse penetration threshold (btContactSolverInfo.h, m_splitImpulsePenetrationThreshold
# = -0.04; the same value as CONVEX_DISTANCE_MARGIN in btCollisionMargin.h): penetrations shallower
# than this are left to the solver's soft position correction. The shapes themselves add no
# margin: a concave triangle mesh has collision margin 0 (btConcaveShape.cpp) and a sphere uses its
# radius as its whole margin (btSphereShape.h, getMargin returns the radius), so the contact is
# against the exact sphere and the exact triangles. test_bullet_rests_on_exact_planes measures what
# this engine build really leaves on exact planes and checks it is within this margin.
SOLVER_MARGIN_M = 0.04
# keep the chunks with a triangle centroid this close to the ground point under the drop:
# colliders at 0.4 m on a 400 m sphere have edges of a few tens of metres, and a settled sphere
# moves at most a few metres
CHUNK_REACH_M = 60.0
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


def _drop_places() -> list[tuple[str, F64]]:
    """Where to drop: mesa top, hill flanks and tops, valley floor, crater bowl, random."""
    places: list[tuple[str, F64]] = []
    mesa = unit(*MESA[:2])
    places.append(("mesa top centre", mesa))
    # on the flat top (radius 30 m), well inside its edge
    places += [(f"mesa top {k}", away(mesa, RADIUS_M, 8.0 + 3.0 * k, 1.3 * k)) for k in range(5)]
    for i, (la, lo, _, sigma) in enumerate(HILLS):
        top = unit(la, lo)
        places.append((f"hill {i} top", top))
        # at d = sigma a Gaussian is at its steepest (inflection point)
        places += [
            (f"hill {i} flank {k}", away(top, RADIUS_M, sigma, 0.3 * i + k * np.pi / 2))
            for k in range(4)
        ]
    places.append(("valley floor", unit(*VALLEY[:2])))
    crater = unit(*CRATER[:2])
    # the bowl spans d <= 40 m; stay on its inner slope
    places += [(f"crater bowl {k}", away(crater, RADIUS_M, 7.5 * k, 1.1 * k)) for k in range(5)]
    rng = np.random.default_rng(20240611)
    for k in range(12):
        v = rng.normal(size=3)  # normal vectors give uniform directions (Muller 1959)
        places.append((f"random {k}", v / np.linalg.norm(v)))
    return places


def _drop_all(res: BakeResult) -> list[Drop]:
    return drop_all(res, _drop_places(), CHUNK_REACH_M)


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
            static_mesh(cid, corners, np.array([[0, 1, 2], [0, 2, 3]]))
            centre, speed, contacts = settle_sphere(cid, n * (DROP_HEIGHT_M + SPHERE_RADIUS_M))
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


# ---- the collider angle pass (csrc/collider_angles.cpp) -------------------------------------

DEMO = Path(__file__).resolve().parent.parent / "examples" / "pebblemoor.toml"


def _angles_deg(positions: F64, triangles: npt.NDArray[np.uint32]) -> F64:
    """(t,) smallest interior angle of each triangle, from the law of cosines on edge lengths
    (a different formula from the core's atan2 of cross and dot products)."""
    p = positions[triangles]
    a = np.linalg.norm(p[:, 1] - p[:, 2], axis=1)
    b = np.linalg.norm(p[:, 2] - p[:, 0], axis=1)
    c = np.linalg.norm(p[:, 0] - p[:, 1], axis=1)
    # the smallest angle is opposite the shortest edge: cos = (long1^2 + long2^2 - short^2) / ...
    s = np.sort(np.stack([a, b, c], axis=1), axis=1)
    cos = (s[:, 1] ** 2 + s[:, 2] ** 2 - s[:, 0] ** 2) / (2 * s[:, 1] * s[:, 2])
    return np.degrees(np.arccos(np.clip(cos, -1.0, 1.0)))


def _collider_angles(res: BakeResult) -> F64:
    return np.concatenate([_angles_deg(c.positions, c.triangles) for c in res.colliders])


def _bake_angle_target(spec: globemill.WorldSpec, target: float | None, threads: int) -> BakeResult:
    # the core's optional setting collider_min_angle_deg (0: no angle pass) is not part of the
    # spec: the peer without the pass is today's plain cut of the hierarchy
    from globemill import _core
    from globemill.bake import _wrap, named_features, settings
    from globemill.field import Field

    s = settings(spec, threads=threads)
    if target is not None:
        s["collider_min_angle_deg"] = target
    with named_features(spec):
        return _wrap(spec, s, _core.bake(Field(spec)._core, s, None))


def _walled_world() -> globemill.WorldSpec:
    # a mesa with a vertical 10 m wall (wall_width_m = 0) and a block with vertical walls: ground
    # where a height field over well-shaped directions makes slivers in space
    return globemill.parse_spec(
        {
            "name": "sheerstone",
            "radius_m": RADIUS_M,
            "tolerance_m": 0.25,
            "lod": {"levels": 1},
            "collision": {"tolerance_m": 1.0},
            "features": [
                {
                    "kind": "mesa",
                    "lat_deg": 10,
                    "lon_deg": 20,
                    "height_m": 10.0,
                    "radius_m": 25.0,
                    "wall_width_m": 0.0,
                },
                {
                    "kind": "block",
                    "lat_deg": -20,
                    "lon_deg": -40,
                    "height_m": 6.0,
                    "half_x_m": 12.0,
                    "half_y_m": 5.0,
                    "bearing_deg": 60.0,
                    "corner_radius_m": 0.0,
                    "wall_width_m": 0.0,
                },
            ],
        }
    )


@pytest.fixture(scope="module")
def walled() -> dict[str, BakeResult]:
    spec = _walled_world()
    return {
        "pass": _bake_angle_target(spec, None, threads=2),
        "pass 1 thread": _bake_angle_target(spec, None, threads=1),
        "no pass": _bake_angle_target(spec, 0.0, threads=2),
    }


def test_angle_pass_removes_slivers_on_vertical_walls(walled: dict[str, BakeResult]) -> None:
    on, off = walled["pass"], walled["no pass"]
    a_on, a_off = _collider_angles(on), _collider_angles(off)
    # the plain cut has slivers on the walls (a foot edge of about the tolerance under a 10 m
    # wall: about atan(1 / 10) = 6 degrees or less)
    assert a_off.min() < 5.0
    assert a_on.min() > a_off.min()
    assert (a_on < 10).sum() < (a_off < 10).sum() / 2, ((a_on < 10).sum(), (a_off < 10).sum())
    for res in (on, off):
        col = res.report["collision"]
        # the report's smallest angle is the one of the triangles written out
        assert col["min_angle_deg"] == pytest.approx(_collider_angles(res).min(), abs=1e-6)
        assert col["max_error_m"] <= col["tolerance_m"]
        _triangle_checks(res)
    assert on.report["collision"]["min_angle_target_deg"] == COLLIDER_MIN_ANGLE_DEG
    assert off.report["collision"]["min_angle_target_deg"] == 0


def test_angle_pass_keeps_colliders_closed_and_on_the_surface(
    walled: dict[str, BakeResult],
) -> None:
    res = walled["pass"]
    # reference library: the welded colliders of all chunks are one closed, consistently wound
    # surface (trimesh's watertight and winding checks)
    pos = np.concatenate([c.positions for c in res.colliders])
    starts = np.cumsum([0] + [len(c.positions) for c in res.colliders])
    tris = np.concatenate([c.triangles + s for c, s in zip(res.colliders, starts, strict=False)])
    mesh = trimesh.Trimesh(pos, tris, process=True)  # process=True merges equal vertices
    assert mesh.is_watertight and mesh.is_winding_consistent
    # outward: the enclosed volume is positive and near the sphere's (4/3 pi R^3)
    assert mesh.volume > 0
    assert mesh.volume == pytest.approx(4 / 3 * np.pi * RADIUS_M**3, rel=0.01)
    # the independent measure of docs/lod.md agrees with the report (globemill check)
    fld = globemill.field(res.spec)
    tol = res.report["collision"]["tolerance_m"]
    on_walls = 0
    for c in res.colliders:
        g = fld.surface(c.positions)
        # vertices moved by the centered bias by at most a third of the tolerance, radially
        shift = np.abs(np.linalg.norm(c.positions, axis=1) - np.linalg.norm(g, axis=1))
        # ... but for the Steiner points on the vertical walls, partway up: within the tolerance
        # (horizontally) of such a point the ground passes below and above the point's height,
        # so a wall face, part of the surface, crosses that circle (intermediate value theorem)
        far = np.flatnonzero(shift > tol / 3 + 1e-9)
        on_walls += len(far)
        for p in c.positions[far]:
            h = _ground_heights_around(fld, p, tol, res.spec.radius_m)
            r = float(np.linalg.norm(p))
            assert h.min() - tol / 3 <= r <= h.max() + tol / 3, (c.chunk, r, h.min(), h.max())
    # only the Steiner points are off the ground, and some are (the walls need them)
    assert 0 < on_walls <= res.report["collision"]["angle_moves"]["steiner_points"]


def _ground_heights_around(fld: globemill.Field, p: F64, d: float, radius_m: float) -> F64:
    """(32,) radii of the ground at 32 points on the circle of d metres (along the sphere) around
    the direction of p."""
    u = p / np.linalg.norm(p)
    a = np.array([1.0, 0.0, 0.0]) if abs(u[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    e1 = np.cross(u, a)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(u, e1)
    phi = np.linspace(0.0, 2 * np.pi, 32, endpoint=False)[:, None]
    t = d / radius_m
    dirs = np.cos(t) * u + np.sin(t) * (np.cos(phi) * e1 + np.sin(phi) * e2)
    return np.linalg.norm(fld.surface(dirs), axis=1)


def test_angle_pass_does_not_depend_on_the_thread_count(walled: dict[str, BakeResult]) -> None:
    a, b = walled["pass"], walled["pass 1 thread"]
    assert len(a.colliders) == len(b.colliders)
    for x, y in zip(a.colliders, b.colliders, strict=True):
        assert x.positions.tobytes() == y.positions.tobytes()
        assert x.triangles.tobytes() == y.triangles.tobytes()


@pytest.fixture(scope="module")
def demo() -> BakeResult:
    return globemill.bake(globemill.load_spec(DEMO), threads=2)


@pytest.mark.slow
def test_demo_collider_angles_match_the_report(demo: BakeResult) -> None:
    angles = _collider_angles(demo)
    col = demo.report["collision"]
    assert col["min_angle_deg"] == pytest.approx(angles.min(), abs=1e-6)
    # reference library: trimesh's face angles (radians, arccos of normalised dot products)
    worst = min(
        float(trimesh.Trimesh(c.positions, c.triangles, process=False).face_angles.min())
        for c in demo.colliders
    )
    assert np.degrees(worst) == pytest.approx(angles.min(), abs=1e-4)
    assert col["max_error_m"] <= col["tolerance_m"]
    # measured on this world (docs/lod.md): the plain cut had 0.90 degrees and 2093 triangles
    # under 10 degrees; collapses and flips alone left 1.93 degrees and 201 under 10 degrees on
    # the 28 m vertical walls; with the Steiner points on the wall faces 4.92 degrees and 66, and
    # 2.91 degrees and 96 once the levels beside walls were held within tolerance (a different
    # hierarchy under the collider)
    assert angles.min() > 2.5
    assert (angles < 10).sum() < 120
    assert col["angle_moves"]["steiner_points"] > 0


@pytest.mark.slow
@pytest.mark.xfail(
    strict=True,
    reason="not reached: the Steiner points on the 28 m vertical walls take the smallest angle "
    "to 3-5 degrees; the refinement stops where a point's triangles leave the tolerance or "
    "no point raises the smallest angle it touches (docs/lod.md, Collider angles)",
)
def test_demo_collider_min_angle_is_at_least_10_degrees(demo: BakeResult) -> None:
    assert _collider_angles(demo).min() >= 10.0
