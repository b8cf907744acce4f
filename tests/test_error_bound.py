"""The tolerance guarantee, measured independently of the mesher (tests/independent_error.py:
mesh -> surface by sampling inside triangles and projecting onto the true surface; surface -> mesh
by exact closest points of a dense surface sample, scipy cKDTree candidates)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st
from independent_error import distance_to_mesh, feature_directions, measure, step_walls

import globemill

DEMO = Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml"
DATA = Path(__file__).resolve().parent / "data"


def _independent(spec: globemill.WorldSpec, level_mesh: tuple) -> float:
    field = globemill.field(spec)
    cf = spec.core_features()
    r = float(spec.radius_m)
    v, t = level_mesh
    res = measure(
        field,
        r,
        v,
        t,
        surface_samples=60_000,
        extra_directions=feature_directions(cf, r),
        walls=step_walls(cf, field, r),
        refine_worst=64,
    )
    return float(res["max"])


def test_demo_world_levels_are_within_tolerance() -> None:
    spec = globemill.load_spec(DEMO)
    result = globemill.bake(spec, tolerance_m=2.0, levels=2, collision=False)
    for k in range(2):
        tol = result.levels[k].tolerance_m
        assert _independent(spec, result.mesh(k)) <= tol


_kinds = st.sampled_from(["hill", "mesa", "crater", "ridge", "block"])


@st.composite
def worlds(draw: st.DrawFn) -> dict:
    feats = []
    for _ in range(draw(st.integers(1, 5))):
        kind = draw(_kinds)
        lat = draw(st.floats(-60, 60))
        lon = draw(st.floats(-170, 170))
        f: dict = {"kind": kind, "blend": draw(st.sampled_from(["add", "max", "min"]))}
        if kind == "hill":
            f.update(
                lat_deg=lat,
                lon_deg=lon,
                amplitude_m=draw(st.floats(-20, 20).filter(lambda a: abs(a) > 0.5)),
                sigma_m=draw(st.floats(5, 60)),
            )
        elif kind == "mesa":
            f.update(
                lat_deg=lat,
                lon_deg=lon,
                height_m=draw(st.floats(-15, 15)),
                radius_m=draw(st.floats(10, 60)),
                wall_width_m=draw(st.sampled_from([0.0, 4.0, 15.0])),
            )
        elif kind == "crater":
            f.update(
                lat_deg=lat,
                lon_deg=lon,
                radius_m=draw(st.floats(10, 50)),
                depth_m=draw(st.floats(0, 10)),
                rim_height_m=draw(st.floats(0, 4)),
                rim_width_m=draw(st.floats(5, 20)),
            )
        elif kind == "block":
            f.update(
                lat_deg=lat,
                lon_deg=lon,
                height_m=draw(st.floats(-10, 10)),
                half_x_m=draw(st.floats(8, 40)),
                half_y_m=draw(st.floats(8, 40)),
                bearing_deg=draw(st.floats(0, 180)),
                corner_radius_m=4.0,
                wall_width_m=draw(st.sampled_from([0.0, 5.0])),
            )
        else:
            f.update(
                lat0_deg=lat,
                lon0_deg=lon,
                lat1_deg=lat + draw(st.floats(2, 10)),
                lon1_deg=lon + draw(st.floats(2, 10)),
                height_m=draw(st.floats(-8, 12)),
                half_width_m=draw(st.floats(8, 30)),
                profile=draw(st.sampled_from(["round", "sharp"])),
            )
        feats.append(f)
    if draw(st.booleans()):
        feats.append(
            {
                "kind": "noise",
                "amplitude_m": draw(st.floats(0.5, 3)),
                "frequency_per_m": draw(st.floats(0.002, 0.02)),
                "octaves": 3,
                "seed": draw(st.integers(0, 1000)),
            }
        )
    return {
        "name": "random",
        "radius_m": 600.0,
        "tolerance_m": 1.0,
        "features": feats,
        "lod": {"levels": 1, "chunk_level": 0},
    }


@settings(
    max_examples=8, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow]
)
@given(worlds())
def test_random_worlds_are_within_tolerance(data: dict) -> None:
    spec = globemill.parse_spec(data)
    result = globemill.bake(spec, collision=False)
    assert np.isfinite(result.report["lods"][0]["max_error_m"])
    assert _independent(spec, result.mesh(0)) <= spec.tolerance_m


def _grid(v: np.ndarray, t: np.ndarray, n: int) -> np.ndarray:
    """Directions of the barycentric grid of step 1/n on each triangle, (triangles, nodes, 3)."""
    a, b, c = (v[t[:, k]] for k in range(3))
    out = []
    for i in range(n + 1):
        for j in range(n + 1 - i):
            p = (1 - (i + j) / n) * a + (i / n) * b + (j / n) * c
            out.append(p / np.linalg.norm(p, axis=1, keepdims=True))
    return np.stack(out, axis=1)


def _surface_peak(field: Any, r: float, v: np.ndarray, t: np.ndarray) -> float:
    """Surface -> mesh where it peaks: the ground above every triangle's grid of step 1/8, each
    point's exact distance to the whole mesh (distance_to_mesh); then the 256 triangles with the
    largest again at step 1/48. Beside steep ground and at creases the peak is narrower than a
    uniform surface sample."""

    def dist(dirs: np.ndarray) -> np.ndarray:
        flat = dirs.reshape(-1, 3)
        ground = (r + np.asarray(field.height(flat)))[:, None] * flat
        return distance_to_mesh(v, t, ground)[0].reshape(dirs.shape[:2])

    coarse = dist(_grid(v, t, 8)).max(axis=1)
    worst = np.argsort(-coarse, kind="stable")[:256]
    return max(float(coarse.max()), float(dist(_grid(v, t[worst], 48)).max()))


def _dense_independent(spec: globemill.WorldSpec, level_mesh: tuple) -> dict:
    """The independent measure with a denser mesh sample than `_independent`: a grid of step 1/6
    on every triangle and the 2048 worst triangles again at step 1/48, which is what finds the
    peak of the distance between grid nodes beside a vertical wall; surface -> mesh also where it
    peaks above the mesh (_surface_peak)."""
    field = globemill.field(spec)
    cf = spec.core_features()
    r = float(spec.radius_m)
    v, t = level_mesh
    res = measure(
        field,
        r,
        v,
        t,
        samples_per_triangle=28,
        surface_samples=200_000,
        extra_directions=feature_directions(cf, r),
        walls=step_walls(cf, field, r),
        refine_worst=2048,
        refine_grid=48,
    )
    res["surface_to_mesh"] = max(res["surface_to_mesh"], _surface_peak(field, r, v, t))
    res["max"] = max(res["mesh_to_surface"], res["surface_to_mesh"])
    return res


def _assert_certified(
    spec: globemill.WorldSpec, result: globemill.BakeResult, tight: float = 1.1
) -> None:
    """Every level within its tolerance by the dense independent search, and its published
    `max_error_m` at least that search's value and at most `tight` times it (issue 13, item 3:
    1.1)."""
    for k, lv in enumerate(result.report["lods"]):
        dense = _dense_independent(spec, result.mesh(k))["max"]
        reported = lv["max_error_m"]
        assert dense <= lv["tolerance_m"], f"level {k}: {dense} beyond {lv['tolerance_m']}"
        assert reported >= dense, f"level {k}: reported {reported} below the dense {dense}"
        assert reported <= tight * dense, f"level {k}: reported {reported} above {tight} x {dense}"


@pytest.mark.slow
def test_demo_world_at_one_metre_holds_beside_vertical_walls() -> None:
    # regression (issue 13, items 2 and 3): at 1 m, 3 levels, chunk level 2, the verification's
    # grid accepted triangles spanning Sheer Tor's vertical wall whose distance to the ground
    # peaks between samples (at the wall's top and foot): the dense search found 1.049 m
    # (level 0) and 2.040 m (level 1) against 1 m and 2 m, where the report said 0.8995 and
    # 1.797 (and 3.599 against 3.793 at level 2)
    spec = globemill.load_spec(DEMO)
    result = globemill.bake(spec, tolerance_m=1.0, levels=3, chunk_level=2, collision=False)
    _assert_certified(spec, result)


@pytest.mark.slow
def test_walled_world_holds_beside_vertical_walls() -> None:
    # regression (issue 13, items 2 and 3): sheer-walled mesas and blocks at 0.4 m; before, the
    # dense search found 0.437 m (level 0) and 0.842 m (level 1, tolerance 0.8 m) where the
    # report said 0.332 m and 0.653 m
    spec = globemill.load_spec(DATA / "bound_walls.toml")
    result = globemill.bake(spec, collision=False)
    _assert_certified(spec, result)


def _collider_mesh(result: globemill.BakeResult) -> tuple[np.ndarray, np.ndarray]:
    """Every chunk's collider as one mesh (border vertices repeated: distances do not care)."""
    vs, ts, off = [], [], 0
    for c in result.colliders:
        vs.append(c.positions)
        ts.append(c.triangles.reshape(-1, 3) + off)
        off += len(c.positions)
    return np.vstack(vs), np.vstack(ts)


def _assert_collider_certified(
    spec: globemill.WorldSpec, result: globemill.BakeResult, tight: float = 1.1
) -> None:
    """The collider's published `max_error_m` at least the independent figure and at most `tight`
    times it (issue 13, item 3: 1.1). Independent figure: the dense search of `_dense_independent`,
    and the vertical walls' faces sampled every 0.25 m (step_walls) against the whole collider
    by exact closest points (distance_to_mesh): where a collider cuts a wall's corner, a point of
    the wall's face is the surface point farthest from it."""
    v, t = _collider_mesh(result)
    dense = _dense_independent(spec, (v, t))["max"]
    field = globemill.field(spec)
    walls = step_walls(spec.core_features(), field, float(spec.radius_m))
    face = 0.0
    if walls is not None:
        pts = walls.sample(0.25)
        for i in range(0, len(pts), 200_000):
            d, _ = distance_to_mesh(v, t, pts[i : i + 200_000])
            face = max(face, float(d.max()))
    independent = max(dense, face)
    col = result.report["collision"]
    reported = col["max_error_m"]
    assert independent <= col["tolerance_m"], f"collider: {independent} beyond {col['tolerance_m']}"
    assert reported >= independent, f"collider: reported {reported} below {independent}"
    assert reported <= tight * independent, (
        f"collider: reported {reported} above {tight} x {independent}"
    )


def test_walled_world_collider_figure_is_certified() -> None:
    # regression (issue 13, item 3): on the sheer-walled world the collider (1.6 m) reported
    # 1.303 m, where the independent search finds 1.129 m (a wall's face): surface -> mesh was
    # taken to the nearest of a triangle and those around it, which beside a wall overstates
    # (a sample at 1.89 m lies 0.38 m from the whole collider), while mesh -> surface, sampled
    # on a fixed grid of order 4, said 1.031 m where the dense search finds 1.121 m
    spec = globemill.load_spec(DATA / "bound_walls.toml")
    result = globemill.bake(spec)
    _assert_collider_certified(spec, result)


@pytest.mark.slow
def test_demo_world_collider_figure_is_certified() -> None:
    # regression (issue 13, item 3): at 1 m the demo's collider (4 m) reported mesh -> surface
    # 2.333 m where the dense search finds 2.529 m
    spec = globemill.load_spec(DEMO)
    result = globemill.bake(spec, tolerance_m=1.0, levels=1)
    _assert_collider_certified(spec, result)


# the icosahedron's vertices (lat, lon): the poles and two rings at +-atan(1/2) = 26.565 deg
# (the regular icosahedron with a vertex at each pole, e.g. Coxeter, "Regular Polytopes" 3.7);
# the base mesh's vertices and edges are where refinement's first triangles meet
_ICO_LAT = float(np.degrees(np.arctan(0.5)))
_PLACES = (
    [(90.0, 0.0), (-90.0, 0.0)]
    + [(_ICO_LAT, -180.0 + 72.0 * i) for i in range(5)]
    + [(-_ICO_LAT, -144.0 + 72.0 * i) for i in range(5)]
    + [(0.5 * _ICO_LAT, -144.0 + 72.0 * i) for i in range(5)]  # near edge midpoints
    + [(0.0, 180.0), (0.0, -179.9), (60.0, 179.95)]  # over the antimeridian
)


@st.composite
def crossed_worlds(draw: st.DrawFn) -> dict:
    """Worlds whose features of every blend mode cross each other's footprints around one place:
    an icosahedron vertex, near an edge, a pole, the antimeridian, or anywhere."""
    if draw(st.booleans()):
        lat0, lon0 = draw(st.sampled_from(_PLACES))
    else:
        lat0, lon0 = draw(st.floats(-89, 89)), draw(st.floats(-180, 180))
    feats = []
    for _ in range(draw(st.integers(2, 4))):
        lat = max(-90.0, min(90.0, lat0 + draw(st.floats(-2, 2))))
        lon = lon0 + draw(st.floats(-2, 2))
        lon = (lon + 180.0) % 360.0 - 180.0
        kind = draw(_kinds)
        f: dict = {"kind": kind, "blend": draw(st.sampled_from(["add", "max", "min", "set"]))}
        if kind == "hill":
            f.update(lat_deg=lat, lon_deg=lon, sigma_m=draw(st.floats(8, 50)),
                     amplitude_m=draw(st.sampled_from([-12.0, 8.0, 20.0])))  # fmt: skip
        elif kind == "mesa":
            f.update(lat_deg=lat, lon_deg=lon, height_m=draw(st.sampled_from([-8.0, 6.0, 12.0])),
                     radius_m=draw(st.floats(10, 40)),
                     wall_width_m=draw(st.sampled_from([0.0, 6.0])))  # fmt: skip
        elif kind == "crater":
            f.update(lat_deg=lat, lon_deg=lon, radius_m=draw(st.floats(10, 40)),
                     depth_m=draw(st.floats(1, 8)), rim_height_m=draw(st.floats(0, 3)),
                     rim_width_m=draw(st.floats(5, 15)))  # fmt: skip
        elif kind == "block":
            f.update(lat_deg=lat, lon_deg=lon, height_m=draw(st.sampled_from([-6.0, 5.0, 10.0])),
                     half_x_m=draw(st.floats(8, 30)), half_y_m=draw(st.floats(8, 30)),
                     bearing_deg=draw(st.floats(0, 180)), corner_radius_m=3.0,
                     wall_width_m=draw(st.sampled_from([0.0, 4.0])))  # fmt: skip
        else:
            f.update(lat0_deg=lat, lon0_deg=lon,
                     lat1_deg=max(-90.0, min(90.0, lat + draw(st.floats(-1.5, 1.5)))),
                     lon1_deg=(lon + draw(st.floats(0.3, 1.5)) + 180.0) % 360.0 - 180.0,
                     height_m=draw(st.sampled_from([-6.0, 9.0])),
                     half_width_m=draw(st.floats(8, 25)),
                     profile=draw(st.sampled_from(["round", "sharp"])))  # fmt: skip
        feats.append(f)
    return {
        "name": "crossed",
        "radius_m": 900.0,
        "tolerance_m": 1.0,
        "features": feats,
        "lod": {"levels": 1, "chunk_level": 0},
    }


@pytest.mark.slow
@settings(
    max_examples=6,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
    phases=[Phase.explicit, Phase.generate],  # a failing world is shown as drawn (no shrinking)
)
@given(crossed_worlds())
def test_random_crossed_worlds_publish_a_certified_figure(data: dict) -> None:
    # issue 13, tests: every blend mode across each other's footprints, sharp profiles, features
    # on the icosahedron's vertices and edges, at the poles and over the antimeridian: the level's
    # and the collider's published figure never below the dense independent search and at most
    # 1.1 times it. A world the refinement cannot mesh within its tolerance (its size floor
    # reached) must be refused, naming the level and the figure, with nothing published
    spec = globemill.parse_spec(data)
    try:
        result = globemill.bake(spec)
    except globemill.BakeError as e:
        assert "beyond its tolerance" in str(e) and "size floor" in str(e), str(e)
        return
    _assert_certified(spec, result)
    _assert_collider_certified(spec, result)


CROSSED_CREASES = {
    "name": "crossed",
    "radius_m": 900.0,
    "tolerance_m": 1.0,
    "features": [
        {"kind": "mesa", "blend": "set", "lat_deg": -85.50569471020526,
         "lon_deg": 179.33333333333337, "height_m": 12.0, "radius_m": 30.665320270723,
         "wall_width_m": 6.0},
        {"kind": "crater", "blend": "max", "lat_deg": -85.08116211765017,
         "lon_deg": 177.149626683211, "radius_m": 39.99999999999999, "depth_m": 6.441035890790692,
         "rim_height_m": 1.3273765356034808, "rim_width_m": 14.558885360518321},
    ],
    "lod": {"levels": 1, "chunk_level": 0},
}  # fmt: skip


@pytest.mark.slow
def test_crossed_blend_creases_are_published_within_ten_percent() -> None:
    # found by test_random_crossed_worlds_publish_a_certified_figure (2026-12-04): a sloped-walled
    # mesa set over a max crater near the south pole and the antimeridian publishes 0.9495 m
    # (surface -> mesh); the dense search said 0.8468 m until it sampled the ground above the
    # mesh where surface -> mesh peaks (_surface_peak): 0.8996 m, the published figure 1.056 x
    spec = globemill.parse_spec(CROSSED_CREASES)
    _assert_certified(spec, globemill.bake(spec, collision=False))


MEETING_WALLS = {
    "name": "crossed",
    "radius_m": 900.0,
    "tolerance_m": 1.0,
    "features": [
        {"kind": "mesa", "blend": "max", "lat_deg": 13.282525588538995,
         "lon_deg": 145.14351194375826, "height_m": 12.0, "radius_m": 11.062631346451822,
         "wall_width_m": 0.0},
        {"kind": "block", "blend": "set", "lat_deg": 13.282525588538995, "lon_deg": 144.0,
         "height_m": 10.0, "half_x_m": 24.84769465735545, "half_y_m": 21.700436881195756,
         "bearing_deg": 50.27237643764783, "corner_radius_m": 3.0, "wall_width_m": 0.0},
        {"kind": "hill", "blend": "max", "lat_deg": 15.163229208582731,
         "lon_deg": 144.00009999999997, "sigma_m": 10.043144396919974, "amplitude_m": -12.0},
        {"kind": "hill", "blend": "add", "lat_deg": 11.829283274178424, "lon_deg": 144.0,
         "sigma_m": 49.801988820653, "amplitude_m": 20.0},
    ],
    "lod": {"levels": 1, "chunk_level": 0},
}  # fmt: skip


def test_meeting_walls_of_max_and_set_features_mesh_within_tolerance() -> None:
    # regression (issue 13, items 1 and 2), found by
    # test_random_crossed_worlds_publish_a_certified_figure (2026-12-04): where the vertical
    # walls of a max mesa and a set block meet, the core's wall distance took one span per rim
    # point and missed the wall's other half at the rims' crossing: it read 4.755 m on a sliver
    # 0.036 m from the walls, refined to its size floor and refused the bake (exit 3), where the
    # dense independent search found that level within 0.789 m of its 1 m
    spec = globemill.parse_spec(MEETING_WALLS)
    _assert_certified(spec, globemill.bake(spec, collision=False))
