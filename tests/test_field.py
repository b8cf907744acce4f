"""The C++ terrain field (`globemill.field(spec)`) against the independent numpy reference
(tests/reference_terrain.py, written from docs/terrain.md alone) and against central differences.

Tolerances: heights agree to 1e-9 · R, gradients to 1e-7 · R (metres per radian).

Directions are skipped where the comparison is ill-posed, not where it is hard:
- for heights, within 1e-6 rad of a step (a wall of width 0): H jumps there by the feature's
  height, so the two implementations may round a direction to opposite sides of the wall;
- for gradients, also within 1e-6 rad of a crease: a max/min tie (docs/terrain.md: the gradient
  follows the winning argument) or a kink of a formula (hill at 4σ, crater rim crest, the crest
  and foot of a sharp ridge, the bisector between a ridge's ends), where ∇H jumps.
Each test also checks that the skipped share stays small, so a skip never hides a whole feature.

Input checking (interface.md: unit vectors of shape (N, 3) in): a wrong shape raises ValueError
naming (N, 3); non-unit directions are normalised, since H and ∇H are defined on x / |x|
(docs/terrain.md "Gradient"); zero vectors, which have no direction, raise ValueError.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from reference_terrain import (
    KIND_CODES,
    ReferenceTerrain,
    difference_mismatch,
    direction,
    directions_near,
    feature_row,
    random_directions,
    sample_directions,
    tangent_directions,
)

import globemill

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10 only
    import tomli as tomllib

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
DEMO = EXAMPLES / "pebblemoor.toml"

HEIGHT_RTOL = 1e-9  # × R
GRADIENT_RTOL = 1e-7  # × R
SKIP_RAD = 1e-6

R = 1000.0
BLENDS = ["add", "max", "min", "set", "smooth_max", "smooth_min"]

# one of each kind (walls of width 0 and both ridge profiles as their own cases), all moderate
KIND_CASES: dict[str, dict[str, Any]] = {
    "hill": {"kind": "hill", "lat_deg": 12, "lon_deg": 20, "amplitude_m": 30.0, "sigma_m": 60.0},
    "valley": {"kind": "hill", "lat_deg": -5, "lon_deg": 3, "amplitude_m": -20.0, "sigma_m": 90.0},
    "mesa": {
        "kind": "mesa",
        "lat_deg": -10,
        "lon_deg": 25,
        "height_m": 20.0,
        "radius_m": 100.0,
        "wall_width_m": 40.0,
    },
    "mesa_step": {
        "kind": "mesa",
        "lat_deg": 30,
        "lon_deg": -40,
        "height_m": 15.0,
        "radius_m": 80.0,
        "wall_width_m": 0.0,
    },
    "block": {
        "kind": "block",
        "lat_deg": 5,
        "lon_deg": -20,
        "height_m": 15.0,
        "half_x_m": 120.0,
        "half_y_m": 70.0,
        "corner_radius_m": 20.0,
        "wall_width_m": 30.0,
        "bearing_deg": 60.0,
    },
    "block_step": {
        "kind": "block",
        "lat_deg": -40,
        "lon_deg": 150,
        "height_m": -12.0,
        "half_x_m": 60.0,
        "half_y_m": 25.0,
        "corner_radius_m": 0.0,
        "wall_width_m": 0.0,
        "bearing_deg": 290.0,
    },
    "block_at_pole": {  # the tangent frame's Ẑ branch (|c_y| > 1 − 1e-9)
        "kind": "block",
        "lat_deg": 90,
        "lon_deg": 0,
        "height_m": 10.0,
        "half_x_m": 50.0,
        "half_y_m": 30.0,
        "corner_radius_m": 30.0,
        "wall_width_m": 10.0,
        "bearing_deg": 45.0,
    },
    "crater": {
        "kind": "crater",
        "lat_deg": 30,
        "lon_deg": 0,
        "depth_m": 20.0,
        "radius_m": 150.0,
        "rim_height_m": 6.0,
        "rim_width_m": 60.0,
    },
    "ridge_round": {
        "kind": "ridge",
        "lat0_deg": -30,
        "lon0_deg": -30,
        "lat1_deg": -20,
        "lon1_deg": 40,
        "height_m": 25.0,
        "half_width_m": 80.0,
        "profile": "round",
    },
    "ridge_sharp": {
        "kind": "ridge",
        "lat0_deg": 10,
        "lon0_deg": 170,
        "lat1_deg": 40,
        "lon1_deg": -160,
        "height_m": -18.0,
        "half_width_m": 50.0,
        "profile": "sharp",
    },
    "noise": {
        "kind": "noise",
        "amplitude_m": 6.0,
        "frequency_per_m": 0.004,
        "octaves": 5,
        "gain": 0.5,
        "seed": 2024,
    },
}

# gentle ground under a feature, so max/min/set/smooth blends have something to act on
BASE = [
    {
        "kind": "noise",
        "amplitude_m": 8.0,
        "frequency_per_m": 0.002,
        "octaves": 3,
        "gain": 0.5,
        "seed": 99,
    },
    {"kind": "hill", "lat_deg": 3, "lon_deg": 7, "amplitude_m": 12.0, "sigma_m": 300.0},
]


def world(features: list[dict[str, Any]], radius: float = R) -> dict[str, Any]:
    return {
        "name": "fieldtest",
        "radius_m": radius,
        "tolerance_m": radius / 1000.0,
        "features": features,
    }


def with_blend(feature: dict[str, Any], blend: str, width: float = 6.0) -> dict[str, Any]:
    out = dict(feature, blend=blend)
    if blend.startswith("smooth"):
        out["blend_width_m"] = width
    return out


def special_directions(terrain: ReferenceTerrain) -> np.ndarray:
    """Feature centres, ridge ends and the poles: places where formulas divide by sin θ."""
    rows = terrain.features
    pts = [np.array([[0.0, 1.0, 0.0], [0.0, -1.0, 0.0]])]
    for row in rows:
        if int(row[0]) != KIND_CODES["noise"]:
            pts.append(row[None, 3:6])
        if int(row[0]) == KIND_CODES["ridge"]:
            pts.append(row[None, 6:9])
    return np.concatenate(pts)


def compare(spec_dict: dict[str, Any], n: int = 1500, seed: int = 0, min_kept: float = 0.9) -> None:
    """Assert field(spec) agrees with the reference at n sampled directions (plus centres)."""
    spec = globemill.parse_spec(spec_dict)
    check_field_against_reference(spec, n, seed, min_kept)


def check_field_against_reference(spec: Any, n: int, seed: int, min_kept: float = 0.9) -> None:
    radius = float(spec.radius_m)
    terrain = ReferenceTerrain(radius, spec.core_features())
    rng = np.random.default_rng(seed)
    dirs = np.concatenate([sample_directions(terrain, rng, n), special_directions(terrain)])
    field = globemill.field(spec)
    assert field.radius_m == radius

    height = field.height(dirs)
    grad = field.gradient(dirs)
    assert height.shape == (len(dirs),) and height.dtype == np.float64
    assert grad.shape == (len(dirs), 3) and grad.dtype == np.float64

    ev = terrain.evaluate(dirs)
    keep_h = ev.step_distance > SKIP_RAD
    keep_g = keep_h & (ev.crease_distance > SKIP_RAD)
    assert keep_h.mean() > 0.95, "too many directions skipped as near a step"
    assert keep_g.mean() >= min_kept, "too many directions skipped as near a crease"

    dh = np.where(keep_h, np.abs(height - ev.height), 0.0)
    worst = int(np.argmax(dh))
    assert dh[worst] <= HEIGHT_RTOL * radius, (
        f"height differs by {dh[worst]:.3g} m at u = {dirs[worst].tolist()!r}: "
        f"field {height[worst]!r}, reference {ev.height[worst]!r}"
    )
    dg = np.where(keep_g, np.linalg.norm(grad - ev.gradient, axis=1), 0.0)
    worst = int(np.argmax(dg))
    assert dg[worst] <= GRADIENT_RTOL * radius, (
        f"gradient differs by {dg[worst]:.3g} m/rad at u = {dirs[worst].tolist()!r}: "
        f"field {grad[worst].tolist()!r}, reference {ev.gradient[worst].tolist()!r}"
    )


# ---------------------------------------------------------------------------------------------
# the spec layer hands the core the documented table
# ---------------------------------------------------------------------------------------------


def test_core_features_follow_the_documented_layout() -> None:
    # notes/interface.md "Core feature array", built here independently from the same dicts
    features = [with_blend(f, b) for f, b in zip(KIND_CASES.values(), BLENDS * 2, strict=False)]
    spec = globemill.parse_spec(world(features))
    table = spec.core_features()
    assert table.shape == (len(features), 16) and table.dtype == np.float64
    assert table.flags.c_contiguous
    expected = np.array([feature_row(f) for f in features])
    np.testing.assert_allclose(table, expected, rtol=0, atol=1e-15)


# ---------------------------------------------------------------------------------------------
# each kind alone and over gentle ground, with each blend mode
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("blend", BLENDS)
@pytest.mark.parametrize("case", sorted(KIND_CASES))
def test_single_feature_matches_reference(case: str, blend: str) -> None:
    compare(world([with_blend(KIND_CASES[case], blend)]), n=800)


@pytest.mark.parametrize("blend", BLENDS)
@pytest.mark.parametrize("case", sorted(KIND_CASES))
def test_feature_over_ground_matches_reference(case: str, blend: str) -> None:
    compare(world([*BASE, with_blend(KIND_CASES[case], blend)]), n=800, seed=1)


@pytest.mark.parametrize("centre", [(0.0, 0.0), (90.0, 0.0), (0.0, -90.0), (20.0, 30.0)])
@pytest.mark.parametrize(
    "feature",
    [
        {"kind": "hill", "amplitude_m": 12.0, "sigma_m": 700.0},
        {"kind": "mesa", "height_m": 12.0, "radius_m": 2000.0, "wall_width_m": 500.0},
        {
            "kind": "crater",
            "depth_m": 12.0,
            "radius_m": 2000.0,
            "rim_height_m": 5.0,
            "rim_width_m": 600.0,
        },
    ],
    ids=["hill", "mesa", "crater"],
)
def test_footprint_beyond_the_hemisphere(
    feature: dict[str, Any], centre: tuple[float, float]
) -> None:
    # footprints may reach past 90° (here 2.3 to 2.8 rad: 4σ/R, (a + w)/R, (a + wr)/R), and
    # every direction within that reach is changed by the feature (docs/terrain.md)
    feature = dict(feature, lat_deg=centre[0], lon_deg=centre[1])
    spec = globemill.parse_spec(world([feature]))
    u = random_directions(np.random.default_rng(12), 4000)
    terrain = ReferenceTerrain(spec.radius_m, spec.core_features())
    height = globemill.field(spec).height(u)
    diff = np.abs(height - terrain.height(u))
    worst = int(np.argmax(diff))
    assert diff[worst] <= HEIGHT_RTOL * R, (
        f"height differs by {diff[worst]:.3g} m at u = {u[worst].tolist()!r}: "
        f"field {height[worst]!r}, reference {terrain.height(u[worst : worst + 1])[0]!r}"
    )


def test_feature_order_matters_and_is_kept() -> None:
    # set then add differs from add then set; both must match the reference in their own order
    a = with_blend(KIND_CASES["hill"], "add")
    b = with_blend(dict(KIND_CASES["mesa"], lat_deg=12, lon_deg=20), "set")
    compare(world([a, b]))
    compare(world([b, a]))
    u = np.array([direction(12, 20)])
    one = globemill.field(globemill.parse_spec(world([a, b]))).height(u)[0]
    two = globemill.field(globemill.parse_spec(world([b, a]))).height(u)[0]
    assert one == pytest.approx(20.0) and two == pytest.approx(50.0)


def test_empty_world_is_the_base_sphere() -> None:
    field = globemill.field(globemill.parse_spec(world([])))
    u = random_directions(np.random.default_rng(0), 100)
    np.testing.assert_array_equal(field.height(u), 0.0)
    np.testing.assert_array_equal(field.gradient(u), 0.0)


# ---------------------------------------------------------------------------------------------
# the demo world
# ---------------------------------------------------------------------------------------------


def test_demo_world_matches_reference() -> None:
    if not DEMO.exists():
        pytest.skip(f"demo world {DEMO} not written yet")
    spec = globemill.load_spec(DEMO)
    with DEMO.open("rb") as fh:
        raw = tomllib.load(fh)
    # the table the core gets is the documented conversion of the file's features
    expected = np.array([feature_row(f) for f in raw["features"]])
    np.testing.assert_allclose(spec.core_features(), expected, rtol=0, atol=1e-15)
    check_field_against_reference(spec, n=6000, seed=7)


# ---------------------------------------------------------------------------------------------
# random worlds
# ---------------------------------------------------------------------------------------------


@st.composite
def feature_dicts(draw: st.DrawFn, radius: float, budget: float) -> dict[str, Any]:
    """One valid feature with sizes as fractions of the radius; |amplitude| within budget."""

    def frac(lo: float, hi: float) -> float:
        return draw(st.floats(lo, hi)) * radius

    def amp(nonzero: bool = False) -> float:
        a = draw(st.floats(-budget, budget))
        if nonzero and abs(a) < 1e-3 * budget:
            a = budget / 2
        return a

    def lat() -> float:
        return draw(st.floats(-90.0, 90.0))

    def lon() -> float:
        return draw(st.floats(-180.0, 180.0))

    kind = draw(st.sampled_from(["hill", "mesa", "block", "crater", "ridge", "noise"]))
    f: dict[str, Any] = {"kind": kind}
    if kind == "hill":
        f |= {"lat_deg": lat(), "lon_deg": lon(), "amplitude_m": amp(True)}
        f["sigma_m"] = frac(0.01, 0.3)
    elif kind == "mesa":
        f |= {"lat_deg": lat(), "lon_deg": lon(), "height_m": amp(), "radius_m": frac(0.01, 0.4)}
        f["wall_width_m"] = draw(st.sampled_from([0.0, 1.0])) * frac(0.002, 0.2)
    elif kind == "block":
        hx, hy = frac(0.005, 0.25), frac(0.005, 0.25)
        f |= {"lat_deg": lat(), "lon_deg": lon(), "height_m": amp(), "half_x_m": hx}
        f |= {"half_y_m": hy, "bearing_deg": draw(st.floats(-360.0, 360.0))}
        f["corner_radius_m"] = draw(st.floats(0.0, 1.0)) * min(hx, hy)
        f["wall_width_m"] = draw(st.sampled_from([0.0, 1.0])) * frac(0.002, 0.1)
    elif kind == "crater":
        half = budget / 2
        f |= {"lat_deg": lat(), "lon_deg": lon(), "radius_m": frac(0.01, 0.3)}
        f |= {"depth_m": draw(st.floats(0.0, half)), "rim_height_m": draw(st.floats(0.0, half))}
        f["rim_width_m"] = frac(0.005, 0.2)
    elif kind == "ridge":
        c0 = (lat(), lon())
        c1 = (lat(), lon())
        arc = np.degrees(np.arccos(np.clip(direction(*c0) @ direction(*c1), -1.0, 1.0)))
        if not 2.0 <= arc <= 170.0:
            c1 = (c0[0] * 0.5, c0[1] + 30.0 if c0[1] < 0 else c0[1] - 30.0)
        f |= {"lat0_deg": c0[0], "lon0_deg": c0[1], "lat1_deg": c1[0], "lon1_deg": c1[1]}
        f |= {"height_m": amp(), "half_width_m": frac(0.005, 0.2)}
        f["profile"] = draw(st.sampled_from(["round", "sharp"]))
    else:
        octaves = draw(st.integers(1, 6))
        gain = draw(st.floats(0.2, 1.0))
        f |= {"octaves": octaves, "gain": gain, "seed": draw(st.integers(0, 2**32 - 1))}
        f["amplitude_m"] = amp(True) / sum(gain**k for k in range(octaves))
        f["frequency_per_m"] = draw(st.floats(0.5, 20.0)) / radius
    blend = draw(st.sampled_from(BLENDS))
    f["blend"] = blend
    if blend.startswith("smooth"):
        f["blend_width_m"] = frac(0.001, 0.05)
    return f


@st.composite
def worlds(draw: st.DrawFn) -> dict[str, Any]:
    radius = draw(st.sampled_from([50.0, 1200.0, 30000.0]))
    n = draw(st.integers(1, 8))
    # each feature's |amplitudes| ≤ 0.1 R, so the sum stays below the 0.9 R validity cap
    budget = 0.1 * radius
    return world([draw(feature_dicts(radius, budget / 2)) for _ in range(n)], radius)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(spec_dict=worlds(), seed=st.integers(0, 2**31 - 1))
def test_random_worlds_match_reference(spec_dict: dict[str, Any], seed: int) -> None:
    # random worlds may tie on purpose (a max of a 0 m mesa over flat ground ties everywhere):
    # heights are still compared there, gradients only off the ties
    compare(spec_dict, n=600, seed=seed, min_kept=0.0)


# ---------------------------------------------------------------------------------------------
# the core's gradient against its own height
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("blend", BLENDS)
def test_gradient_matches_central_differences(blend: str) -> None:
    # central differences on the sphere (tangent-plane steps, error O(h²)), judged with the
    # Richardson estimate of their own error; directions within 10 h of a step or crease skipped
    features = [*BASE, *(with_blend(f, blend) for f in KIND_CASES.values())]
    spec = globemill.parse_spec(world(features))
    field = globemill.field(spec)
    terrain = ReferenceTerrain(spec.radius_m, spec.core_features())
    rng = np.random.default_rng(11)
    u = sample_directions(terrain, rng, 1500)
    h = 1e-5
    ev = terrain.evaluate(u)
    keep = (ev.step_distance > 10 * h) & (ev.crease_distance > 10 * h)
    assert keep.mean() > 0.9
    u = u[keep]
    grad = field.gradient(u)
    for _ in range(2):
        t = tangent_directions(rng, u)
        bad = difference_mismatch(field.height, grad, u, t, h, floor=1e-9 * R)
        assert not bad.any(), f"gradient disagrees with differences at u = {u[bad][:3].tolist()}"


def test_gradient_is_tangent() -> None:
    # docs/terrain.md "Gradient": ∇ of H(x/|x|) is orthogonal to x
    spec = globemill.parse_spec(world([*BASE, *KIND_CASES.values()]))
    u = random_directions(np.random.default_rng(5), 2000)
    grad = globemill.field(spec).gradient(u)
    assert np.abs(np.einsum("ij,ij->i", grad, u)).max() <= 1e-12 * R


# ---------------------------------------------------------------------------------------------
# input checking at the boundary
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def crater_field() -> Any:
    return globemill.field(globemill.parse_spec(world([*BASE, KIND_CASES["crater"]])))


@pytest.mark.parametrize("shape", [(5, 2), (5,), (5, 3, 1), (5, 4)])
def test_wrong_shape_is_rejected_naming_n_by_3(crater_field: Any, shape: tuple[int, ...]) -> None:
    for method in (crater_field.height, crater_field.gradient):
        with pytest.raises(ValueError, match=r"\(N, 3\)"):
            method(np.zeros(shape))


def test_empty_input_gives_empty_output(crater_field: Any) -> None:
    dirs = np.zeros((0, 3))
    assert crater_field.height(dirs).shape == (0,)
    assert crater_field.gradient(dirs).shape == (0, 3)


def test_zero_direction_is_rejected(crater_field: Any) -> None:
    dirs = np.array([[0.0, 0.0, 1.0], [0.0, 0.0, 0.0]])
    for method in (crater_field.height, crater_field.gradient):
        with pytest.raises(ValueError):
            method(dirs)


def test_non_unit_directions_are_normalised(crater_field: Any) -> None:
    # H and ∇H are functions of the direction x / |x| (docs/terrain.md "Gradient"), so scaling
    # the input must not change them
    u = random_directions(np.random.default_rng(6), 200)
    scale = np.random.default_rng(7).uniform(0.01, 100.0, size=(200, 1))
    np.testing.assert_allclose(
        crater_field.height(u * scale), crater_field.height(u), atol=1e-9 * R
    )
    np.testing.assert_allclose(
        crater_field.gradient(u * scale), crater_field.gradient(u), atol=1e-7 * R
    )


# ---------------------------------------------------------------------------------------------
# the footprint index with many features (docs/meshing.md: a point query costs the features at
# that point, not the world's): exact against evaluating only the features that reach
# ---------------------------------------------------------------------------------------------

INDEX_R = 200_000.0


def _hill_rows(centres: np.ndarray, amplitude: np.ndarray, sigma: np.ndarray) -> np.ndarray:
    rows = np.zeros((len(centres), 16))
    rows[:, 0] = KIND_CODES["hill"]
    rows[:, 3:6] = centres
    rows[:, 6:9] = centres
    rows[:, 9] = amplitude
    rows[:, 10] = sigma
    return rows


def test_index_of_100000_features_is_exact_where_few_reach() -> None:
    # 100,000 small hills (4 sigma under 0.3 degrees) anywhere, blends add and max alternating;
    # probes within 3 degrees of +Z. The features whose footprints can reach a probe are picked
    # here by angle alone; the core, with its index, must give bit for bit what the core gives
    # for a world of only those (same arithmetic, same order: the C++ against itself), and that
    # world must match the numpy reference.
    rng = np.random.default_rng(3)
    n = 100_000
    centres = random_directions(rng, n)
    sigma = rng.uniform(20.0, 200.0, n)
    rows = _hill_rows(centres, rng.uniform(-1.0, 1.0, n), sigma)
    rows[1::2, 1] = 1  # blend max
    axis = np.array([0.0, 0.0, 1.0])
    probes = directions_near(rng, axis, math.radians(3.0), 20_000)
    ang = np.arccos(np.clip(centres @ axis, -1.0, 1.0))
    near = ang < math.radians(3.0) + 4.0 * sigma / INDEX_R + 1e-6
    assert 50 < near.sum() < 2_000
    full = globemill._core.Field(INDEX_R, rows)
    sub = globemill._core.Field(INDEX_R, rows[near])
    np.testing.assert_array_equal(full.height(probes), sub.height(probes))
    np.testing.assert_array_equal(full.gradient(probes), sub.gradient(probes))
    ref = ReferenceTerrain(INDEX_R, rows[near])
    np.testing.assert_allclose(
        sub.height(probes[:2000]), ref.height(probes[:2000]), rtol=0, atol=HEIGHT_RTOL * INDEX_R
    )


def test_index_of_10000_features_on_one_spot_is_exact() -> None:
    # every hill centred within 20 m of the middle of a cube face (the worst spot for the index)
    rng = np.random.default_rng(4)
    n = 10_000
    spot = np.array([0.0, 0.0, 1.0])
    c = spot + rng.uniform(-1e-4, 1e-4, (n, 3))
    c /= np.linalg.norm(c, axis=1, keepdims=True)
    rows = _hill_rows(c, rng.uniform(-1.0, 1.0, n), rng.uniform(100.0, 300.0, n))
    fld = globemill._core.Field(INDEX_R, rows)
    dirs = directions_near(rng, spot, 1500.0 / INDEX_R, 400)
    ref = ReferenceTerrain(INDEX_R, rows)
    np.testing.assert_allclose(
        fld.height(dirs), ref.height(dirs), rtol=0, atol=HEIGHT_RTOL * INDEX_R
    )
    # beyond every footprint (4 x 300 m): exactly the base sphere
    far = directions_near(rng, -spot, math.radians(170.0), 2000)
    np.testing.assert_array_equal(fld.height(far), np.zeros(len(far)))
