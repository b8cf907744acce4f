"""Tests for globemill.spec: loading, validation messages, the core feature table, the schema."""

from __future__ import annotations

import json
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from globemill.spec import (
    BLEND_CODES,
    KIND_CODES,
    SpecError,
    WorldSpec,
    json_schema,
    load_spec,
    parse_spec,
    unit_vector,
)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
DEMO_TOML = EXAMPLES / "pebblemoor.toml"
DEMO_JSON = EXAMPLES / "pebblemoor.json"

# one valid feature of every kind (values chosen for hand-checkable core rows below)
FEATURES: dict[str, dict[str, Any]] = {
    "hill": {"kind": "hill", "lat_deg": 30.0, "lon_deg": 45.0, "amplitude_m": -12.5, "sigma_m": 40},
    "mesa": {
        "kind": "mesa",
        "blend": "max",
        "lat_deg": 0,
        "lon_deg": 90,
        "height_m": 20,
        "radius_m": 50,
        "wall_width_m": 0,
    },
    "block": {
        "kind": "block",
        "blend": "smooth_max",
        "blend_width_m": 3.5,
        "lat_deg": 90,
        "lon_deg": 0,
        "height_m": 8,
        "half_x_m": 30,
        "half_y_m": 20,
        "bearing_deg": 0,
        "corner_radius_m": 4,
        "wall_width_m": 2,
    },
    "crater": {
        "kind": "crater",
        "blend": "set",
        "lat_deg": -60,
        "lon_deg": 180,
        "radius_m": 60,
        "depth_m": 15,
        "rim_height_m": 4,
        "rim_width_m": 25,
    },
    "ridge": {
        "kind": "ridge",
        "blend": "smooth_min",
        "blend_width_m": 2,
        "lat0_deg": 0,
        "lon0_deg": 0,
        "lat1_deg": 0,
        "lon1_deg": 90,
        "height_m": 10,
        "half_width_m": 15,
        "profile": "sharp",
    },
    "noise": {"kind": "noise", "amplitude_m": 2, "frequency_per_m": 0.01},
}


def world(features: list[dict[str, Any]] | None = None, **top: Any) -> dict[str, Any]:
    """A small valid world document, with overrides."""
    doc: dict[str, Any] = {"name": "testworld", "radius_m": 100.0, "tolerance_m": 0.5}
    doc["features"] = [dict(FEATURES["hill"])] if features is None else features
    doc.update(top)
    return doc


def feature(kind: str, **changes: Any) -> dict[str, Any]:
    out = dict(FEATURES[kind])
    out.update(changes)
    return out


def problems_of(data: dict[str, Any]) -> str:
    with pytest.raises(SpecError) as info:
        parse_spec(data, source="case.toml")
    return str(info.value)


# ---------------------------------------------------------------------------------------------
# the demo world


def test_demo_toml_and_json_are_the_same_world() -> None:
    with DEMO_TOML.open("rb") as f:
        toml_doc = tomllib.load(f)
    json_doc = json.loads(DEMO_JSON.read_text(encoding="utf-8"))
    # same document once parsed, and the same validated world
    assert toml_doc == json_doc
    from_toml = load_spec(DEMO_TOML)
    from_json = load_spec(str(DEMO_JSON))
    assert from_toml == from_json
    np.testing.assert_array_equal(from_toml.core_features(), from_json.core_features())


def test_demo_world_uses_every_kind_and_blend() -> None:
    spec = load_spec(DEMO_TOML)
    assert spec.name == "pebblemoor"
    assert len(spec.features) >= 30
    assert {f.kind for f in spec.features} == set(KIND_CODES)
    assert {f.blend for f in spec.features} >= {"max", "min", "set", "smooth_max", "smooth_min"}
    assert any(f.kind == "mesa" and f.wall_width_m == 0 for f in spec.features)
    assert any(f.kind == "hill" and f.amplitude_m < 0 for f in spec.features)
    assert {f.profile for f in spec.features if f.kind == "ridge"} == {"round", "sharp"}
    assert 4 <= len(spec.layers) <= 6


# ---------------------------------------------------------------------------------------------
# directions and the core feature table


@pytest.mark.parametrize(
    ("lat", "lon", "expected"),
    [
        # docs/terrain.md: (0°, 0°) is +Z, (0°, 90°) is +X, (90°, ·) is +Y
        (0.0, 0.0, (0.0, 0.0, 1.0)),
        (0.0, 90.0, (1.0, 0.0, 0.0)),
        (90.0, 0.0, (0.0, 1.0, 0.0)),
        (90.0, 137.0, (0.0, 1.0, 0.0)),
        (-90.0, 0.0, (0.0, -1.0, 0.0)),
        (0.0, -90.0, (-1.0, 0.0, 0.0)),
        (0.0, 180.0, (0.0, 0.0, -1.0)),
        # u = (cos30·sin45, sin30, cos30·cos45) = (√6/4, 1/2, √6/4)
        (30.0, 45.0, (math.sqrt(6) / 4, 0.5, math.sqrt(6) / 4)),
        # u = (cos(−60)·sin180, sin(−60), cos(−60)·cos180) = (0, −√3/2, −1/2)
        (-60.0, 180.0, (0.0, -math.sqrt(3) / 2, -0.5)),
    ],
)
def test_unit_vector_matches_hand_values(lat: float, lon: float, expected: tuple) -> None:
    u = unit_vector(lat, lon)
    assert u.shape == (3,)
    assert u.dtype == np.float64
    np.testing.assert_allclose(u, expected, rtol=0, atol=1e-15)


def _expected_row(kind: str) -> np.ndarray:
    """Core rows for FEATURES written out by hand from the interface's column layout."""
    row = np.zeros(16)
    if kind == "hill":  # add, centre u(30, 45)
        row[[0, 1]] = [0, 0]
        row[3:6] = [math.sqrt(6) / 4, 0.5, math.sqrt(6) / 4]
        row[9:11] = [-12.5, 40]
    elif kind == "mesa":  # max, centre u(0, 90) = +X
        row[[0, 1]] = [1, 1]
        row[3:6] = [1, 0, 0]
        row[9:12] = [20, 50, 0]
    elif kind == "block":  # smooth_max k 3.5, centre +Y, heading 90° = π/2 rad
        row[[0, 1, 2]] = [2, 4, 3.5]
        row[3:6] = [0, 1, 0]
        row[9:15] = [8, 30, 20, 4, 2, math.pi / 2]
    elif kind == "crater":  # set, centre u(−60, 180)
        row[[0, 1]] = [3, 3]
        row[3:6] = [0, -math.sqrt(3) / 2, -0.5]
        row[9:13] = [15, 60, 4, 25]
    elif kind == "ridge":  # smooth_min k 2, c0 = +Z, c1 = +X, sharp = 1
        row[[0, 1, 2]] = [4, 5, 2]
        row[3:6] = [0, 0, 1]
        row[6:9] = [1, 0, 0]
        row[9:12] = [10, 15, 1]
    elif kind == "noise":  # add, interface defaults octaves 4, gain 0.5, seed 0
        row[[0, 1]] = [5, 0]
        row[9:14] = [2, 0.01, 4, 0.5, 0]
    return row


@pytest.mark.parametrize("kind", list(FEATURES))
def test_core_row_of_every_kind(kind: str) -> None:
    spec = parse_spec(world([FEATURES[kind]]))
    table = spec.core_features()
    assert table.shape == (1, 16)
    np.testing.assert_allclose(table[0], _expected_row(kind), rtol=1e-15, atol=1e-15)


def test_core_features_table_of_demo_world() -> None:
    spec = load_spec(DEMO_TOML)
    table = spec.core_features()
    assert table.shape == (len(spec.features), 16)
    assert table.dtype == np.float64
    assert table.flags["C_CONTIGUOUS"]
    for row, f in zip(table, spec.features, strict=True):
        assert row[0] == KIND_CODES[f.kind]
        assert row[1] == BLEND_CODES[f.blend]
        assert row[2] == (f.blend_width_m if f.blend.startswith("smooth") else 0.0)
        if f.kind == "noise":
            assert not row[3:9].any()
        else:  # centres (and ridge ends) are unit vectors
            assert np.linalg.norm(row[3:6]) == pytest.approx(1.0, abs=1e-15)
        if f.kind == "ridge":
            assert np.linalg.norm(row[6:9]) == pytest.approx(1.0, abs=1e-15)
        else:
            assert not row[6:9].any()
        # columns past each kind's parameters stay 0 (interface: unused columns 0)
        used = {"hill": 11, "mesa": 12, "block": 15, "crater": 13, "ridge": 12, "noise": 14}
        assert not row[used[f.kind] :].any()


def test_empty_world_gives_empty_table() -> None:
    table = parse_spec(world([])).core_features()
    assert table.shape == (0, 16)
    assert table.dtype == np.float64


def test_blend_width_is_dropped_for_non_smooth_blends() -> None:
    spec = parse_spec(world([feature("hill", blend="max", blend_width_m=4.0)]))
    assert spec.core_features()[0, 2] == 0.0


def test_defaults_follow_the_interface() -> None:
    spec = parse_spec(
        world(
            [
                {
                    k: v
                    for k, v in FEATURES["ridge"].items()
                    if k not in ("profile", "blend", "blend_width_m")
                }
            ],
            layers=[{"name": "any", "color": [0.5, 0.5, 0.5]}],
        )
    )
    assert spec.offset == "normal"
    assert spec.features[0].blend == "add"
    assert spec.features[0].profile == "round"
    assert spec.layers[0].slope_deg == (0.0, 90.0)
    lo, hi = spec.layers[0].altitude_m
    assert lo <= -spec.radius_m and hi >= spec.radius_m


def test_spec_is_immutable_and_copyable() -> None:
    spec = parse_spec(world())
    with pytest.raises(ValueError):
        spec.radius_m = 5.0  # type: ignore[misc]
    assert spec.model_copy(update={"tolerance_m": 1.0}).tolerance_m == 1.0


# ---------------------------------------------------------------------------------------------
# bad inputs: every message names the field path and the allowed range


def test_message_format_matches_the_interface() -> None:
    message = problems_of(world([feature("hill", sigma_m=-1)]))
    assert "case.toml" in message
    assert "features[0].sigma_m: must be > 0 (allowed: > 0), got -1" in message


@pytest.mark.parametrize(
    ("doc", "expected"),
    [
        (world(radius_m=-1), ["radius_m: must be >= 1", "(allowed: 1 to 1000000)", "got -1"]),
        (world(tolerance_m=0), ["tolerance_m: must be > 0", "allowed: > 0 and <= radius_m / 10"]),
        (
            world(tolerance_m=10.5),  # radius 100 → at most 10
            ["tolerance_m: must be <= radius_m / 10 = 10", "(allowed: > 0 and <= 10)", "got 10.5"],
        ),
        (
            world([{"kind": "volcano", "lat_deg": 0}]),
            [
                "features[0].kind: unknown kind",
                "hill, mesa, block, crater, ridge, noise",
                "volcano",
            ],
        ),
        (
            world([{"lat_deg": 0}]),
            ["features[0].kind: is required", "hill, mesa, block, crater, ridge, noise"],
        ),
        (
            world([feature("hill", colour=3)]),
            ["features[0].colour: unknown key", "allowed keys:", "sigma_m", "got 3"],
        ),
        (world(colour=3), ["colour: unknown key", "tolerance_m"]),
        (world([feature("hill", lat_deg=90.5)]), ["features[0].lat_deg:", "(allowed: -90 to 90)"]),
        (world([feature("hill", amplitude_m=0)]), ["features[0].amplitude_m:", "except 0"]),
        (
            world([feature("hill", blend="smooth_max")]),
            ["features[0].blend_width_m: is required when blend is 'smooth_max'", "(allowed: > 0)"],
        ),
        (
            world([feature("hill", blend="blur")]),
            ["features[0].blend: unknown value", "add, max, min, set, smooth_max, smooth_min"],
        ),
        (
            world([feature("block", corner_radius_m=25)]),  # half sizes 30 and 20
            [
                "features[0].corner_radius_m: must be <= min(half_x_m, half_y_m) = 20",
                "(allowed: 0 to 20)",
            ],
        ),
        (
            world([feature("noise", octaves=4.0)]),
            ["features[0].octaves: must be an integer", "(allowed: integer 1 to 12)"],
        ),
        (
            world([feature("noise", octaves=13)]),
            ["features[0].octaves: must be <= 12", "(allowed: integer 1 to 12)", "got 13"],
        ),
        (world([feature("noise", gain=0)]), ["features[0].gain:", "(allowed: > 0 and <= 1)"]),
        (world([feature("noise", seed=2**32)]), ["features[0].seed:", "4294967295"]),
        (world([feature("mesa", height_m=True)]), ["features[0].height_m: must be a number"]),
        (world([feature("mesa", radius_m="5")]), ["features[0].radius_m: must be a number"]),
        (world([feature("ridge", profile="flat")]), ["features[0].profile:", "round, sharp"]),
        (world(name="bad name!"), ["name: does not match", "[A-Za-z0-9_-]{1,64}"]),
        (world(offset="fast"), ["offset: unknown value", "radial, normal, exact"]),
        (world(max_triangles=10), ["max_triangles: must be >= 20", "integer 20 to 200000000"]),
        (world(features=[3]), ["features[0]: must be a table", "kind is one of hill"]),
        (
            world(layers=[{"name": "x", "color": [0.1, 1.5, 0.2]}]),
            ["layers[0].color[1]: must be <= 1", "(allowed: 0 to 1)", "got 1.5"],
        ),
        (
            world(layers=[{"name": "x", "color": [0.1, 0.2]}]),
            ["layers[0].color: must have 3 items", "each 0 to 1", "got [0.1, 0.2]"],
        ),
        (
            world(layers=[{"name": "x", "color": [0, 0, 0], "slope_deg": [50, 10]}]),
            ["layers[0].slope_deg: lo must be <= hi", "got [50.0, 10.0]"],
        ),
        (world(layers=[{"color": [0, 0, 0]}]), ["layers[0].name: is required"]),
    ],
)
def test_bad_values_name_path_and_range(doc: dict[str, Any], expected: list[str]) -> None:
    message = problems_of(doc)
    for part in expected:
        assert part in message


def test_every_problem_is_listed_at_once() -> None:
    doc = world(
        [feature("hill", sigma_m=0), {"kind": "crater"}, feature("noise", octaves=0)],
        radius_m=0,
        layers=[{"name": "x", "color": [0, 0, 2]}],
    )
    with pytest.raises(SpecError) as info:
        parse_spec(doc)
    err = info.value
    assert isinstance(err, ValueError)
    paths = [p.split(":")[0] for p in err.problems]
    # crater misses lat, lon, radius, depth, rim height, rim width: 6 lines
    assert paths.count("features[1].lat_deg") == 1
    assert sum(p.startswith("features[1].") for p in paths) == 6
    for path in ["radius_m", "features[0].sigma_m", "features[2].octaves", "layers[0].color[2]"]:
        assert path in paths
    for problem in err.problems:
        assert problem in str(err)
        assert "(allowed:" in problem or "(allowed keys:" in problem


def test_parse_spec_rejects_non_tables() -> None:
    with pytest.raises(SpecError, match="must be a table"):
        parse_spec([1, 2], source="list.json")  # type: ignore[arg-type]


# ---------------------------------------------------------------------------------------------
# whole-world validity (docs/terrain.md "Validity")


def test_amplitude_sum_must_stay_below_nine_tenths_of_radius() -> None:
    # radius 100 → limit 90. noise 40 · (1 + 0.5) = 60 (Σ gain^k over 2 octaves);
    # crater depth + rim height: 20 + 10 = 30 → total exactly 90, which is not < 90
    noise = feature("noise", amplitude_m=-40, octaves=2, gain=0.5)
    crater = feature("crater", depth_m=20, rim_height_m=10)
    message = problems_of(world([noise, crater]))
    assert "features: sum of |amplitudes|" in message
    assert "(allowed: < 90 m), got 90 m" in message
    parse_spec(world([noise, feature("crater", depth_m=20, rim_height_m=9.9)]))


@pytest.mark.parametrize(("corner", "wall"), [(0.0, 0.0), (5.0, 5.0), (0.0, 12.0)])
def test_block_footprint_limit_at_sixty_degrees(corner: float, wall: float) -> None:
    # Local coordinates x = R·atan2(u·X, u·c), y = R·atan2(u·Y, u·c) (docs/terrain.md) put a
    # point at angle θ from the centre with tan²θ = tan²(x/R) + tan²(y/R). For a square block
    # the farthest footprint point lies on the diagonal, at x = y = h − r + (r + w)/√2, so
    # θ = 60° when tan(x/R) = √3/√2, i.e. x = R·atan(√1.5).
    radius = 1000.0
    x = radius * math.atan(math.sqrt(1.5))
    half = x + corner - (corner + wall) / math.sqrt(2.0)

    def doc(scale: float) -> dict[str, Any]:
        block = feature(
            "block",
            lat_deg=10,
            lon_deg=20,
            half_x_m=half * scale,
            half_y_m=half * scale,
            corner_radius_m=corner,
            wall_width_m=wall,
            blend="add",
        )
        del block["blend_width_m"]
        return world([block], radius_m=radius)

    parse_spec(doc(1 - 1e-6))
    message = problems_of(doc(1 + 1e-6))
    assert "features[0]: block footprint" in message
    assert "within 60° of its centre" in message


@pytest.mark.parametrize(
    ("ends", "ok"),
    [
        ((0, 0, 0, 179), True),  # 179° arc: the largest allowed
        ((-30, 10, 25, 40), True),
        ((0, 0, 0, 179.5), False),
        ((0, -90, 0, 90), False),  # antipodal: 180°
        ((12, 34, 12, 34), False),  # same point
        ((90, 0, 90, 120), False),  # the north pole twice under different longitudes
    ],
)
def test_ridge_arc_must_be_between_zero_and_179_degrees(ends: tuple, ok: bool) -> None:
    keys = ("lat0_deg", "lon0_deg", "lat1_deg", "lon1_deg")
    doc = world([feature("ridge", **dict(zip(keys, ends, strict=True)))])
    if ok:
        parse_spec(doc)
    else:
        message = problems_of(doc)
        assert "features[0]: end points must" in message
        assert "(allowed: arc angle in (0°, 179°])" in message


# ---------------------------------------------------------------------------------------------
# files


def test_missing_file_names_the_path(tmp_path: Path) -> None:
    path = tmp_path / "nowhere.toml"
    with pytest.raises(SpecError) as info:
        load_spec(path)
    assert str(path) in str(info.value)
    assert "not found" in str(info.value)


def test_nan_in_toml_is_rejected(tmp_path: Path) -> None:
    path = tmp_path / "nan.toml"
    path.write_text('name = "w"\nradius_m = nan\ntolerance_m = 0.5\n', encoding="utf-8")
    with pytest.raises(SpecError) as info:
        load_spec(path)
    assert "radius_m: must be a finite number (allowed: 1 to 1000000), got nan" in str(info.value)


def test_infinity_in_json_is_rejected(tmp_path: Path) -> None:
    path = tmp_path / "inf.json"
    path.write_text('{"name": "w", "radius_m": 100, "tolerance_m": Infinity}', encoding="utf-8")
    with pytest.raises(SpecError, match=r"tolerance_m: must be a finite number \(allowed: "):
        load_spec(path)


def test_malformed_toml_gives_line_and_column(tmp_path: Path) -> None:
    path = tmp_path / "broken.toml"
    path.write_text('name = "w"\nradius_m = 100\ntolerance_m 0.5\n', encoding="utf-8")
    with pytest.raises(SpecError) as info:
        load_spec(path)
    message = str(info.value)
    assert str(path) in message
    assert "malformed TOML at line 3, column" in message


def test_malformed_json_gives_line_and_column(tmp_path: Path) -> None:
    path = tmp_path / "broken.json"
    path.write_text('{\n  "name": "w",\n  "radius_m": 100,,\n}\n', encoding="utf-8")
    with pytest.raises(SpecError) as info:
        load_spec(path)
    # line 3 is '  "radius_m": 100,,': the stray second comma is its 19th character
    assert "malformed JSON at line 3, column 19" in str(info.value)


def test_duplicate_json_key_is_rejected(tmp_path: Path) -> None:
    # TOML forbids duplicate keys; JSON parsers keep the last one silently, so we refuse
    path = tmp_path / "dup.json"
    path.write_text('{"name": "w", "radius_m": 100, "radius_m": 200, "tolerance_m": 1}')
    with pytest.raises(SpecError, match="duplicate key 'radius_m'"):
        load_spec(path)


def test_unknown_key_in_file(tmp_path: Path) -> None:
    path = tmp_path / "extra.toml"
    path.write_text(
        'name = "w"\nradius_m = 100\ntolerance_m = 1\n\n[[features]]\nkind = "noise"\n'
        "amplitude_m = 1\nfrequency_per_m = 0.1\nwavelength_m = 10\n",
        encoding="utf-8",
    )
    with pytest.raises(SpecError, match=r"features\[0\]\.wavelength_m: unknown key \(allowed keys"):
        load_spec(path)


def test_unsupported_suffix(tmp_path: Path) -> None:
    path = tmp_path / "world.yaml"
    path.write_text("name: w\n")
    with pytest.raises(SpecError, match=r"unsupported file type \(allowed: \.toml or \.json\)"):
        load_spec(path)


# ---------------------------------------------------------------------------------------------
# JSON schema


def test_json_schema_structure() -> None:
    schema = json_schema()
    json.dumps(schema)  # plain JSON data
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["type"] == "object"
    assert schema["additionalProperties"] is False
    assert set(schema["required"]) == {"name", "radius_m", "tolerance_m"}
    items = schema["properties"]["features"]["items"]
    assert set(items["discriminator"]["mapping"]) == set(KIND_CODES)
    for ref in items["discriminator"]["mapping"].values():
        model = schema["$defs"][ref.rsplit("/", 1)[-1]]
        assert model["additionalProperties"] is False
        assert "kind" in model["required"]
    assert schema["$defs"]["Hill"]["properties"]["sigma_m"]["exclusiveMinimum"] == 0
    json_schema()["title"] = "changed"
    assert json_schema()["title"] != "changed"  # each call returns a fresh copy


def test_json_schema_validates_demo_world() -> None:
    jsonschema = pytest.importorskip("jsonschema")
    schema = json_schema()
    validator_cls = jsonschema.Draft202012Validator
    validator_cls.check_schema(schema)  # a valid draft 2020-12 schema
    validator = validator_cls(schema)
    demo = json.loads(DEMO_JSON.read_text(encoding="utf-8"))
    validator.validate(demo)
    # and it is not vacuous: the errors the loader reports per field are caught here too
    for doc in [
        world([feature("hill", sigma_m=-1)]),
        world([{"kind": "volcano"}]),
        world([feature("hill", amplitude_m=0)]),
        world(colour=1),
        world(layers=[{"name": "x", "color": [0, 0, 2]}]),
    ]:
        assert not validator.is_valid(doc)


def test_spec_round_trips_through_model_dump() -> None:
    spec = load_spec(DEMO_TOML)
    again = parse_spec(json.loads(json.dumps(spec.model_dump(mode="json"))))
    assert again == spec
    assert isinstance(again, WorldSpec)


# ---------------------------------------------------------------------------------------------
# hostile input (tests/data/hostile_*): a SpecError naming the file, the place and the limit,
# never a traceback; the CLI exits 2

HOSTILE = Path(__file__).resolve().parent / "data"


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        ("hostile_deep_nesting.json", "malformed JSON at line 1, column 93: nested deeper than 64"),
        ("hostile_deep_nesting.toml", "malformed TOML at line 4, column 75: nested deeper than 64"),
        ("hostile_deep_inline_tables.toml", "nested deeper than 64 levels"),
        ("hostile_deep_dotted_keys.toml", "nested deeper than 64 levels"),
        ("hostile_lone_surrogate_name.json", "layers[0].name: is not Unicode text: lone surrogate"),
        (
            "hostile_control_character_name.json",
            "features[0].name: has the control character U+0007 at position 4",
        ),
        ("hostile_control_character_layer.toml", "layers[0].name: has the control character"),
        ("hostile_long_layer_name.toml", "layers[0].name: string should have at most 128"),
    ],
)
def test_hostile_files_are_refused_with_place_and_limit(name: str, expected: str) -> None:
    with pytest.raises(SpecError) as info:
        load_spec(HOSTILE / name)
    message = str(info.value)
    assert name in message and expected in message
    assert "(allowed:" in message or "deeper than 64 levels" in message


@pytest.mark.parametrize("name", sorted(p.name for p in HOSTILE.glob("hostile_*")))
def test_cli_exits_2_on_hostile_files(name: str, tmp_path: Path) -> None:
    from globemill.cli import main

    assert main(["bake", str(HOSTILE / name), "-o", str(tmp_path / "out")]) == 2
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_deep_data_given_directly_names_the_path_and_limit() -> None:
    deep: Any = 1
    for _ in range(5000):
        deep = {"k": deep}
    message = problems_of(world(lod=deep))
    assert "lod" + ".k" * 63 + ": nested deeper than 64 levels" in message
    listed: Any = []
    for _ in range(5000):
        listed = [listed]
    assert "features" + "[0]" * 63 + ": nested deeper than 64" in problems_of(world(listed))


def test_nesting_at_the_limit_is_read() -> None:
    # 64 levels: the document, lod, and 62 levels of lists below an unknown key are read (and
    # refused as an unknown key, not as too deep)
    value: Any = 1
    for _ in range(62):
        value = [value]
    message = problems_of(world(lod={"zz": value}))
    assert "lod.zz: unknown key" in message and "deeper" not in message


def test_oversized_file_is_refused_before_parsing(tmp_path: Path) -> None:
    from globemill.spec import LIMITS

    path = tmp_path / "big.json"
    path.write_bytes(b'{"name": "' + b"x" * LIMITS["max_bytes"] + b'"}')
    with pytest.raises(SpecError, match=f"larger than the limit of {LIMITS['max_bytes']} bytes"):
        load_spec(path)


@pytest.mark.parametrize(
    ("where", "text"),
    [
        ("name", "bad\u0000"),  # world names are identifiers
        ("layer", "tab\there"),
        ("layer", "x" * 129),
        ("layer", "del\u007f"),
        ("feature", "c1\u0085"),
        ("feature", "\ud800"),
        ("feature", "x" * 129),
    ],
)
def test_names_outside_their_character_class_are_refused(where: str, text: str) -> None:
    if where == "name":
        doc, path = world(name=text), "name"
    elif where == "layer":
        doc, path = world(layers=[{"name": text, "color": [0, 0, 0]}]), "layers[0].name"
    else:
        doc, path = world([feature("hill", name=text)]), "features[0].name"
    with pytest.raises(SpecError) as info:
        parse_spec(doc)
    assert [p.split(": ")[0] for p in info.value.problems] == [path]


def test_printable_names_of_any_script_are_accepted() -> None:
    spec = parse_spec(
        world([feature("hill", name="Gipfel – 山 ⛰")], layers=[{"name": "мох", "color": [0, 0, 0]}])
    )
    assert spec.features[0].name == "Gipfel – 山 ⛰" and spec.layers[0].name == "мох"


def test_huge_integer_in_toml_is_a_read_error(tmp_path: Path) -> None:
    path = tmp_path / "w.toml"
    path.write_text('name = "w"\nradius_m = ' + "9" * 5000 + "\ntolerance_m = 1\n")
    with pytest.raises(SpecError, match="cannot read world spec .*malformed TOML"):
        load_spec(path)


# ---------------------------------------------------------------------------------------------
# the rule table is the models' single source


def test_models_follow_the_rule_table() -> None:
    from globemill.spec import FEATURE_MODELS, SPEC_RULES

    assert list(FEATURE_MODELS) == [k["kind"] for k in SPEC_RULES["kinds"]]
    schema = json_schema()
    for kind in SPEC_RULES["kinds"]:
        props = schema["$defs"][kind["model"]]["properties"]
        for rule in kind["fields"]:
            node = props[rule["key"]]
            for bound, word in [
                ("gt", "exclusiveMinimum"),
                ("ge", "minimum"),
                ("lt", "exclusiveMaximum"),
                ("le", "maximum"),
            ]:
                assert node.get(word) == rule.get(bound), (kind["kind"], rule["key"], bound)
            assert ("default" in node) == ("default" in rule)
            assert node.get("default") == rule.get("default")


# ---- authoring help ---------------------------------------------------------------------------


def test_problems_name_the_feature_and_layer() -> None:
    doc = world(
        [feature("hill", name="Gorse Knoll", sigma_m=-1), feature("hill", sigma_m=-2)],
        layers=[{"name": "moss", "color": [0, 0, 2]}],
    )
    lines = problems_of(doc).splitlines()
    assert any(
        ln.endswith(
            "features[0].sigma_m: must be > 0 (allowed: > 0), got -1 (feature 'Gorse Knoll')"
        )
        for ln in lines
    )
    # an unnamed feature is named by its index alone
    assert any(
        ln.endswith("features[1].sigma_m: must be > 0 (allowed: > 0), got -2") for ln in lines
    )
    assert any("layers[0].color[2]" in ln and ln.endswith("(layer 'moss')") for ln in lines)


@pytest.mark.parametrize(
    ("doc", "suggestion"),
    [
        (world([feature("hill", sigm_m=3)]), "did you mean 'sigma_m'?"),
        (world(tolerence_m=0.5), "did you mean 'tolerance_m'?"),
        (world(layers=[{"name": "x", "colour": [0, 0, 0]}]), "did you mean 'color'?"),
        (world([{"kind": "crator"}]), "did you mean 'crater'?"),
        (world([feature("hill", blend="smoth_max")]), "did you mean 'smooth_max'?"),
    ],
)
def test_misspelled_keys_and_values_get_a_suggestion(doc: dict[str, Any], suggestion: str) -> None:
    # the suggestion is difflib's closest match (Python standard library, ratio >= 0.6)
    assert suggestion in problems_of(doc)


def test_far_off_keys_get_no_suggestion() -> None:
    assert "did you mean" not in problems_of(world([feature("hill", zzzz=3)]))


# ---- renamed keys: read for one release, with a message ----------------------------------------

OLD_BLOCK = {
    "kind": "block",
    "name": "Pen",
    "lat_deg": 10.0,
    "lon_deg": 20.0,
    "height_m": 5.0,
    "half_x_m": 30.0,
    "half_y_m": 20.0,
    "heading_deg": 30.0,
    "corner_m": 4.0,
    "wall_m": 2.0,
}


def test_old_keys_are_read_with_a_deprecation_message() -> None:
    from globemill.spec import SpecDeprecationWarning

    new = dict(OLD_BLOCK)
    for old, key in (("corner_m", "corner_radius_m"), ("wall_m", "wall_width_m")):
        new[key] = new.pop(old)
    # heading 30° counter-clockwise from east is bearing 60° clockwise from north
    new["bearing_deg"] = 60.0
    del new["heading_deg"]
    with pytest.warns(SpecDeprecationWarning) as record:
        old_spec = parse_spec(world([OLD_BLOCK]), source="old.toml")
    text = " ".join(str(w.message) for w in record)
    assert "bearing_deg = 60" in text and "corner_radius_m" in text and "wall_width_m" in text
    assert 'features[0] ("Pen")' in text
    assert old_spec == parse_spec(world([new]))
    assert np.array_equal(old_spec.core_features(), parse_spec(world([new])).core_features())
    mesa = {k: v for k, v in FEATURES["mesa"].items() if k != "wall_width_m"} | {"wall_m": 1.0}
    with pytest.warns(SpecDeprecationWarning, match="wall_m is deprecated"):
        parse_spec(world([mesa]))


def test_deprecation_messages_in_full() -> None:
    # the wording of spec_rules.json's renamed_messages, filled in (the C ABI's gm_world_warnings
    # returns the same lines): heading 30 counter-clockwise from east is bearing 90 - 30 = 60
    from globemill.spec import SpecDeprecationWarning

    named = dict(OLD_BLOCK, name='Pen "north" \\ 2')
    mesa = {k: v for k, v in FEATURES["mesa"].items() if k != "wall_width_m"} | {"wall_m": 1.0}
    with pytest.warns(SpecDeprecationWarning) as record:
        parse_spec(world([mesa, named]), source="old.json")
    tail = "is deprecated and will not be read after this release; write"
    pen = 'old.json: features[1] ("Pen \\"north\\" \\\\ 2")'
    assert [str(w.message) for w in record] == [
        f"old.json: features[0]: wall_m {tail} wall_width_m instead",
        f"{pen}: heading_deg (counter-clockwise from east) {tail} bearing_deg = 60 (clockwise "
        "from north) instead",
        f"{pen}: corner_m {tail} corner_radius_m instead",
        f"{pen}: wall_m {tail} wall_width_m instead",
    ]


def test_bearing_is_clockwise_from_north() -> None:
    # bearing 0 points local X north, bearing 90 east (the navigator's convention); the core row
    # holds the heading counter-clockwise from east: 90° and 0°
    for bearing, heading in ((0.0, 90.0), (90.0, 0.0), (-90.0, 180.0), (-300.0, 30.0)):
        row = parse_spec(world([feature("block", bearing_deg=bearing)])).core_features()[0]
        assert row[14] == math.radians(heading)


def test_both_spellings_at_once_is_an_error() -> None:
    both = dict(OLD_BLOCK) | {"wall_width_m": 2.0}
    with pytest.warns(Warning):  # the other two old keys
        message = problems_of(world([both]))
    assert "wall_m: unknown key" in message and "did you mean 'wall_width_m'?" in message
