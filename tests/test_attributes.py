"""Per-vertex surface attributes: slope, altitude, material layer and color.

Expectations come from outside the code under test: the Gaussian hill formula of docs/terrain.md
worked by hand, the plain-numpy reference terrain (tests/reference_terrain.py, written from
docs/terrain.md alone), central differences of the height, and the first-match rule as the spec
states it.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from reference_terrain import random_directions, reference_from_spec

import globemill
from globemill.attributes import (
    NO_LAYER,
    NO_LAYER_COLOR,
    assign_layers,
    layer_palette,
    layer_table,
    slope_and_altitude,
    vertex_attributes,
)

R = 1000.0
A = 40.0  # hill amplitude, metres
SIGMA = 50.0  # hill width, metres
E4 = math.exp(-8.0)  # docs/terrain.md: truncated Gaussian offset

HILL_WORLD = {
    "name": "knoll",
    "radius_m": R,
    "tolerance_m": 1.0,
    "features": [
        {"kind": "hill", "lat_deg": 0.0, "lon_deg": 0.0, "amplitude_m": A, "sigma_m": SIGMA}
    ],
    "layers": [
        {"name": "cliff", "color": [0.3, 0.3, 0.3], "slope_deg": [20.0, 90.0]},
        {"name": "snow", "color": [0.9, 0.9, 0.95], "altitude_m": [30.0, 1e9]},
        {"name": "grass", "color": [0.2, 0.5, 0.1], "altitude_m": [0.5, 30.0]},
        {"name": "shore", "color": [0.8, 0.7, 0.5], "altitude_m": [-1e9, 0.5]},
    ],
}


def hand_hill(d: float) -> tuple[float, float]:
    """Altitude and slope (degrees) of the hill at geodesic distance d from its centre, worked
    by hand from docs/terrain.md: H = A G(d), G = (exp(-d^2/2s^2) - e4) / (1 - e4) for d < 4s;
    |grad H| = |dH/dtheta| = A R |G'(d)|, G' = -(d / s^2) exp(-d^2/2s^2) / (1 - e4); slope =
    atan(|grad H| / (R + H))."""
    if d >= 4 * SIGMA:
        return 0.0, 0.0
    g = math.exp(-(d**2) / (2 * SIGMA**2))
    h = A * (g - E4) / (1 - E4)
    dh = A * R * (d / SIGMA**2) * g / (1 - E4)
    return h, math.degrees(math.atan(dh / (R + h)))


def direction_at(d: float) -> np.ndarray:
    """The direction d metres (along the surface at R) east of (0 deg, 0 deg), i.e. of +Z."""
    t = d / R
    return np.array([math.sin(t), 0.0, math.cos(t)])


@pytest.fixture(scope="module")
def spec() -> globemill.WorldSpec:
    return globemill.parse_spec(HILL_WORLD)


DISTANCES = [0.0, 20.0, SIGMA, 80.0, 2.5 * SIGMA, 150.0, 190.0, 5 * SIGMA]


def test_slope_and_altitude_match_the_hand_worked_hill(spec: globemill.WorldSpec) -> None:
    dirs = np.array([direction_at(d) for d in DISTANCES])
    slope, alt = slope_and_altitude(globemill.field(spec), dirs)
    for i, d in enumerate(DISTANCES):
        h, s = hand_hill(d)
        assert alt[i] == pytest.approx(h, abs=1e-9)
        assert slope[i] == pytest.approx(s, abs=1e-7)


def expected_layer(h: float, s: float) -> int:
    """The spec's rule, spelled out: the first layer whose closed bands hold (slope, altitude)."""
    for i, rule in enumerate(HILL_WORLD["layers"]):
        slo, shi = rule.get("slope_deg", (0.0, 90.0))
        alo, ahi = rule.get("altitude_m", (-1e9, 1e9))
        if slo <= s <= shi and alo <= h <= ahi:
            return i
    return NO_LAYER


def test_layers_match_hand_computed_expectations(spec: globemill.WorldSpec) -> None:
    dirs = np.array([direction_at(d) for d in DISTANCES])
    att = vertex_attributes(spec, dirs)
    expected = [expected_layer(*hand_hill(d)) for d in DISTANCES]
    assert att.layer.tolist() == expected
    # and by name, worked by hand: the top is snow, the steep flank a cliff, the foot grass,
    # the plain beyond the footprint shore
    names = [HILL_WORLD["layers"][i]["name"] for i in att.layer]
    assert names[0] == "snow"  # slope 0, altitude 40
    assert names[2] == "cliff"  # d = sigma: slope ~ 25.9 degrees > 20
    assert names[4] == "grass"  # d = 2.5 sigma: altitude ~ 1.7 m, slope ~ 5 degrees
    assert names[-1] == "shore"  # outside the footprint: altitude 0
    colors = np.array([HILL_WORLD["layers"][i]["color"] for i in att.layer])
    np.testing.assert_array_equal(att.color, colors)


def test_first_match_wins_and_bands_are_closed() -> None:
    spec = globemill.parse_spec(
        {
            "name": "bands",
            "radius_m": 100.0,
            "tolerance_m": 1.0,
            "layers": [
                {"name": "low", "color": [0, 0, 1], "altitude_m": [-5.0, 0.0]},
                {"name": "high", "color": [1, 0, 0], "altitude_m": [0.0, 5.0]},
                {"name": "never", "color": [0, 1, 0], "altitude_m": [-5.0, 5.0]},
                {"name": "steep", "color": [1, 1, 0], "slope_deg": [45.0, 90.0]},
            ],
        }
    )
    slope = np.array([0.0, 0.0, 0.0, 10.0, 45.0, 89.0, 0.0])
    alt = np.array([-5.0, 0.0, 5.0, 3.0, 7.0, 100.0, -6.0])
    got = assign_layers(spec.layers, slope, alt)
    # altitude 0 lies in both "low" and "high": the first listed wins; "never" is shadowed;
    # the slope band [45, 90] holds 45 itself; nothing holds (0 deg, -6 m)
    assert got.tolist() == [0, 0, 1, 1, 3, 3, NO_LAYER]
    assert got.dtype == np.uint8


def test_no_rules_means_no_layer_and_the_fallback_color() -> None:
    spec = globemill.parse_spec({"name": "bare", "radius_m": 100.0, "tolerance_m": 1.0})
    att = vertex_attributes(spec, random_directions(np.random.default_rng(1), 20))
    assert np.all(att.layer == NO_LAYER)
    np.testing.assert_array_equal(att.color, np.tile(NO_LAYER_COLOR, (20, 1)))
    assert layer_palette([]).shape == (256, 3)


def test_too_many_rules_for_the_8_bit_layer_are_refused() -> None:
    # layer 255 means "no rule matched", so a spec holds at most 255 rules (0..254)
    layers = [{"name": f"l{i}", "color": [0, 0, 0]} for i in range(256)]
    with pytest.raises(globemill.SpecError, match="layers"):
        globemill.parse_spec(
            {"name": "many", "radius_m": 100.0, "tolerance_m": 1.0, "layers": layers}
        )
    ok = globemill.parse_spec(
        {"name": "many", "radius_m": 100.0, "tolerance_m": 1.0, "layers": layers[:255]}
    )
    assert assign_layers(ok.layers, np.zeros(1), np.zeros(1))[0] == 0


DEMO = globemill.load_spec(Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml")


def test_demo_slope_and_altitude_agree_with_the_reference_terrain() -> None:
    # tests/reference_terrain.py evaluates H and grad H from docs/terrain.md in plain numpy;
    # slope = atan(|grad H| / (R + H)) (docs/terrain.md, "Gradient")
    ref = reference_from_spec(DEMO.model_dump())
    rng = np.random.default_rng(7)
    dirs = random_directions(rng, 3000)
    dirs = dirs[ref.smooth_mask(dirs, margin=1e-5)]
    ev = ref.evaluate(dirs)
    slope_ref = np.degrees(
        np.arctan(np.linalg.norm(ev.gradient, axis=1) / (DEMO.radius_m + ev.height))
    )
    att = vertex_attributes(DEMO, dirs)
    np.testing.assert_allclose(att.altitude_m, ev.height, atol=1e-6)
    np.testing.assert_allclose(att.slope_deg, slope_ref, atol=1e-6)
    # layers from the reference's values with the rule spelled out independently
    want = np.full(len(dirs), NO_LAYER)
    for i in reversed(range(len(DEMO.layers))):
        rule = DEMO.layers[i]
        hit = (
            (slope_ref >= rule.slope_deg[0])
            & (slope_ref <= rule.slope_deg[1])
            & (ev.height >= rule.altitude_m[0])
            & (ev.height <= rule.altitude_m[1])
        )
        want[hit] = i
    # points within rounding of a band edge may fall either way
    edges = np.concatenate([[r.altitude_m[0], r.altitude_m[1]] for r in DEMO.layers]).reshape(-1, 1)
    sedges = np.concatenate([[r.slope_deg[0], r.slope_deg[1]] for r in DEMO.layers]).reshape(-1, 1)
    clear = (np.abs(ev.height[None, :] - edges).min(axis=0) > 1e-6) & (
        np.abs(slope_ref[None, :] - sedges).min(axis=0) > 1e-6
    )
    np.testing.assert_array_equal(att.layer[clear], want[clear])
    assert len(set(att.layer.tolist())) >= 3  # the demo shows several layers


def test_demo_slope_agrees_with_central_differences_of_the_height() -> None:
    # independent of the analytic gradient: |grad H| from central differences of H along two
    # tangent directions (common practice), step 1e-6 rad
    fld = globemill.field(DEMO)
    ref = reference_from_spec(DEMO.model_dump())
    rng = np.random.default_rng(11)
    u = random_directions(rng, 400)
    u = u[ref.smooth_mask(u, margin=1e-4)]
    a = np.cross(u, rng.normal(size=u.shape))
    a /= np.linalg.norm(a, axis=1, keepdims=True)
    b = np.cross(u, a)
    step = 1e-6

    def deriv(t: np.ndarray) -> np.ndarray:
        up = u * math.cos(step) + t * math.sin(step)
        dn = u * math.cos(step) - t * math.sin(step)
        return (fld.height(up) - fld.height(dn)) / (2 * step)

    g = np.hypot(deriv(a), deriv(b))
    h = fld.height(u)
    slope_fd = np.degrees(np.arctan(g / (DEMO.radius_m + h)))
    slope, _ = slope_and_altitude(fld, u)
    np.testing.assert_allclose(slope, slope_fd, atol=1e-3)


def test_bake_vertices_sit_at_their_altitude() -> None:
    # the mesher puts every vertex on the surface: |p| = R + H(p/|p|) (docs/terrain.md)
    spec = globemill.parse_spec(HILL_WORLD)
    res = globemill.bake(spec, tolerance_m=2.0, levels=1, collision=False)
    att = vertex_attributes(spec, res.directions)
    np.testing.assert_allclose(
        np.linalg.norm(res.vertices, axis=1) - R, att.altitude_m, atol=1e-9 * R
    )
    assert set(att.layer.tolist()) <= {0, 1, 2, 3}


def test_layer_table_lists_every_rule_in_order(spec: globemill.WorldSpec) -> None:
    table = layer_table(spec)
    assert [t["name"] for t in table] == [r["name"] for r in HILL_WORLD["layers"]]
    assert [t["index"] for t in table] == list(range(len(HILL_WORLD["layers"])))
    assert table[1]["altitude_m"] == [30.0, 1e9]
