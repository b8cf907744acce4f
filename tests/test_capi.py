"""The C ABI (csrc/include/globemill.h) through ctypes, and the host examples in
bindings_examples/ (C, Cython, C#): the same feature rows, problem lines, meshes, attributes and
colliders as the Python API for the same spec, and a status plus a message (never a crash) for
every bad input.

The library is found next to globemill._core (where `pip install .` puts it); set
GLOBEMILL_LIBRARY to test another build.
"""

from __future__ import annotations

import copy
import ctypes as C
import json
import math
import os
import re
import shutil
import subprocess
import sys
import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import globemill
from globemill import _core
from globemill.bake import BakeResult
from globemill.spec import SpecError, json_schema, load_spec, parse_spec

ROOT = Path(__file__).resolve().parents[1]
HEADER = ROOT / "csrc" / "include" / "globemill.h"
DEMO = ROOT / "examples" / "pebblemoor.json"
CORPUS = ROOT / "tests" / "fuzz" / "corpus"
EXAMPLES = ROOT / "bindings_examples"

OK, INVALID_ARGUMENT, PARSE, SPEC, BUDGET, BUFFER_TOO_SMALL = 0, 1, 2, 3, 4, 5
POSITION, DIRECTION, NORMAL, MORPH, SLOPE, ALTITUDE, COLOR = range(7)
MAX_LAYERS: int = json_schema()["properties"]["layers"].get("maxItems", 255)


# --------------------------------------------------------------------------------------------
# ctypes mirror of the header's structs


class Error(C.Structure):
    _fields_ = [("status", C.c_int32), ("truncated", C.c_int32), ("message", C.c_char * 1024)]


class WorldInfo(C.Structure):
    _fields_ = [
        ("radius_m", C.c_double),
        ("tolerance_m", C.c_double),
        ("ratio", C.c_double),
        ("skirt_depth_m", C.c_double),
        ("collision_tolerance_m", C.c_double),
        ("max_triangles", C.c_uint64),
        ("feature_count", C.c_uint32),
        ("layer_count", C.c_uint32),
        ("levels", C.c_uint32),
        ("chunk_level", C.c_uint32),
        ("chunk_count", C.c_uint32),
        ("collision_max_triangles_per_chunk", C.c_uint32),
        ("offset", C.c_int32),
        ("seams", C.c_int32),
        ("collision_bias", C.c_int32),
        ("reserved", C.c_int32),
        ("name", C.c_char * 72),
    ]


PROGRESS = C.CFUNCTYPE(None, C.c_void_p, C.c_int32, C.c_uint64)


class BakeOptions(C.Structure):
    _fields_ = [
        ("struct_size", C.c_uint32),
        ("threads", C.c_int32),
        ("tolerance_m", C.c_double),
        ("ratio", C.c_double),
        ("levels", C.c_int32),
        ("chunk_level", C.c_int32),
        ("offset", C.c_int32),
        ("collision", C.c_int32),
        ("max_triangles", C.c_uint64),
        ("progress", PROGRESS),
        ("progress_user", C.c_void_p),
        ("accept_over_tolerance", C.c_int32),
    ]


class BakeInfo(C.Structure):
    _fields_ = [
        ("vertex_count", C.c_uint64),
        ("level_count", C.c_uint32),
        ("chunk_count", C.c_uint32),
        ("seams", C.c_int32),
        ("has_colliders", C.c_int32),
        ("skirt_depth_m", C.c_double),
        ("collision_tolerance_m", C.c_double),
        ("collision_max_error_m", C.c_double),
        ("collision_triangles", C.c_uint64),
        ("collision_max_triangles_per_chunk", C.c_uint64),
    ]


class LevelInfo(C.Structure):
    _fields_ = [
        ("tolerance_m", C.c_double),
        ("max_error_m", C.c_double),
        ("mesh_to_surface_m", C.c_double),
        ("surface_to_mesh_m", C.c_double),
        ("vertex_count", C.c_uint64),
        ("triangle_count", C.c_uint64),
        ("repaired", C.c_uint64),
        ("stitch_failures", C.c_uint64),
    ]


class ChunkInfo(C.Structure):
    _fields_ = [
        ("vertex_count", C.c_uint64),
        ("surface_vertex_count", C.c_uint64),
        ("triangle_count", C.c_uint64),
        ("interior_count", C.c_uint64),
        ("skirt_triangle_count", C.c_uint64),
        ("stitched_triangle_count", C.c_uint64 * 8),
        ("neighbors", C.c_uint32 * 3),
        ("corners", C.c_uint32 * 3),
    ]


def _library_path() -> Path | None:
    env = os.environ.get("GLOBEMILL_LIBRARY")
    if env:
        return Path(env)
    folders = [Path(_core.__file__).parent, Path(globemill.__file__).parent]
    for folder in folders:
        for name in ("libglobemill.so", "libglobemill.dylib", "globemill.dll"):
            if (folder / name).exists():
                return folder / name
    return None


class Api:
    """Thin ctypes calls; every status-returning function is checked by the caller."""

    def __init__(self, path: Path):
        self.path = path
        self.lib = C.CDLL(str(path))
        self.lib.gm_version.restype = C.c_uint32
        self.lib.gm_version_string.restype = C.c_char_p
        self.lib.gm_status_name.restype = C.c_char_p
        self.lib.gm_vertex_data_components.restype = C.c_uint32
        for name in ("gm_world_destroy", "gm_bake_destroy", "gm_bake_options_init"):
            getattr(self.lib, name).restype = None

    def spec_check(self, text: bytes) -> tuple[int, str]:
        n = C.c_size_t()
        status = self.lib.gm_spec_check(
            None, C.c_size_t(0), C.byref(n), text, C.c_size_t(len(text))
        )
        buf = C.create_string_buffer(n.value + 1)
        again = self.lib.gm_spec_check(buf, C.c_size_t(n.value + 1), C.byref(n), text, len(text))
        assert again == status
        return status, buf.value.decode()

    def warnings(self, world: C.c_void_p) -> list[str]:
        """gm_world_warnings as a size query, then the full text, split into lines."""
        n = C.c_size_t(12345)
        err = Error()
        status = self.lib.gm_world_warnings(None, C.c_size_t(0), C.byref(n), world, C.byref(err))
        assert status == OK, err.message.decode()
        buf = C.create_string_buffer(n.value + 1)
        again = self.lib.gm_world_warnings(buf, C.c_size_t(n.value + 1), None, world, C.byref(err))
        assert again == OK and len(buf.value) == n.value
        return buf.value.decode().split("\n") if n.value else []

    def world(self, text: bytes | str) -> tuple[int, C.c_void_p, str]:
        data = text.encode() if isinstance(text, str) else text
        w = C.c_void_p(1)
        err = Error()
        status = self.lib.gm_world_create(C.byref(w), data, C.c_size_t(len(data)), C.byref(err))
        assert err.status == status
        return status, w, err.message.decode()

    def options(self, **kw: Any) -> BakeOptions:
        o = BakeOptions()
        self.lib.gm_bake_options_init(C.byref(o))
        for k, v in kw.items():
            setattr(o, k, v)
        return o

    def bake(self, world: C.c_void_p, **kw: Any) -> tuple[int, C.c_void_p, str]:
        b = C.c_void_p(1)
        err = Error()
        o = self.options(**kw)
        status = self.lib.gm_bake_create(C.byref(b), world, C.byref(o), C.byref(err))
        assert err.status == status
        return status, b, err.message.decode()

    def array(self, fn: str, count: int, dtype: npt.DTypeLike, *args: Any) -> np.ndarray:
        out = np.zeros(count, dtype)
        err = Error()
        status = getattr(self.lib, fn)(
            out.ctypes.data_as(C.c_void_p), C.c_size_t(count), *args, C.byref(err)
        )
        assert status == OK, err.message.decode()
        return out

    def info(self, fn: str, struct: type[C.Structure], *args: Any) -> Any:
        out = struct()
        err = Error()
        status = getattr(self.lib, fn)(C.byref(out), *args, C.byref(err))
        assert status == OK, err.message.decode()
        return out


@pytest.fixture(scope="module")
def api() -> Api:
    path = _library_path()
    if path is None:
        if os.environ.get("CI"):
            pytest.fail("libglobemill not found next to globemill._core: `pip install .` builds it")
        pytest.skip("libglobemill not built (rebuild with pip install .)")
    return Api(path)


def coarse_demo() -> dict[str, Any]:
    """The demo world at tolerance 4 m (colliders at the default 4x, 16 m): quick to bake."""
    d = json.loads(DEMO.read_text())
    d["tolerance_m"] = 4.0
    return d


@pytest.fixture(scope="module")
def demo_py() -> BakeResult:
    return globemill.bake(parse_spec(coarse_demo()))


@pytest.fixture(scope="module")
def demo_c(api: Api) -> C.c_void_p:
    status, w, msg = api.world(json.dumps(coarse_demo()))
    assert status == OK, msg
    status, b, msg = api.bake(w)
    api.lib.gm_world_destroy(w)
    assert status == OK, msg
    yield b
    api.lib.gm_bake_destroy(b)


def bits(a: np.ndarray) -> bytes:
    return np.ascontiguousarray(a).tobytes()


def same(a: np.ndarray, b: npt.ArrayLike) -> bool:
    """Equal shape, dtype and bytes: bit for bit."""
    b = np.asarray(b)
    return a.shape == b.shape and a.dtype == b.dtype and bits(a) == bits(b)


# --------------------------------------------------------------------------------------------
# version, spec rows, field


def test_version_matches_header_and_package(api: Api) -> None:
    text = HEADER.read_text()
    major, minor, patch = (
        int(re.search(rf"#define GM_VERSION_{k} (\d+)", text).group(1))  # type: ignore[union-attr]
        for k in ("MAJOR", "MINOR", "PATCH")
    )
    assert api.lib.gm_version() == major * 10000 + minor * 100 + patch
    assert api.lib.gm_version_string().decode() == f"{major}.{minor}.{patch}"
    assert api.lib.gm_version_string().decode() == globemill.__version__
    assert "#define GM_ERROR_MESSAGE_SIZE 1024" in text  # the ctypes Error above
    assert api.lib.gm_status_name(3) == b"invalid world spec"


def test_feature_rows_equal_core_features_bit_for_bit_on_demo_world(api: Api) -> None:
    status, w, msg = api.world(DEMO.read_bytes())
    assert status == OK, msg
    info = api.info("gm_world_get_info", WorldInfo, w)
    rows = api.array("gm_world_features", 16 * info.feature_count, np.float64, w).reshape(-1, 16)
    api.lib.gm_world_destroy(w)
    expected = load_spec(DEMO).core_features()
    assert same(rows, expected)


def _random_world(rng: np.random.Generator, n: int) -> dict[str, Any]:
    """Random features of every kind; angles often on multiples of 90° (the exact branch)."""

    def angle(limit: float) -> float:
        if rng.random() < 0.3:
            return float(rng.choice(np.arange(-limit, limit + 1, 90.0)))
        return float(rng.uniform(-limit, limit))

    feats: list[dict[str, Any]] = []
    blends = ["add", "max", "min", "set", "smooth_max", "smooth_min"]
    for _ in range(n):
        kind = rng.choice(["hill", "mesa", "block", "crater", "ridge", "noise"])
        f: dict[str, Any] = {"kind": str(kind), "blend": str(rng.choice(blends))}
        f["blend_width_m"] = float(rng.uniform(0.5, 5))
        if kind != "ridge" and kind != "noise":
            f |= {"lat_deg": angle(90), "lon_deg": angle(180)}
        if kind == "hill":
            f |= {"amplitude_m": float(rng.uniform(0.1, 2)), "sigma_m": float(rng.uniform(1, 9))}
        elif kind == "mesa":
            f |= {"height_m": 1.5, "radius_m": float(rng.uniform(1, 9)), "wall_width_m": 0}
        elif kind == "block":
            f |= {"height_m": -1, "half_x_m": 3, "half_y_m": 2.5, "corner_radius_m": 1}
            f |= {"bearing_deg": angle(360), "wall_width_m": float(rng.uniform(0, 2))}
        elif kind == "crater":
            f |= {"radius_m": 4, "depth_m": 1.25, "rim_height_m": 0.5, "rim_width_m": 2}
        elif kind == "ridge":
            lat, lon = angle(80), angle(170)
            f |= {"lat0_deg": lat, "lon0_deg": lon, "lat1_deg": lat + 5.5, "lon1_deg": lon / 2 + 3}
            f |= {
                "height_m": 1.0,
                "half_width_m": 3.0,
                "profile": str(rng.choice(["round", "sharp"])),
            }
        else:
            f |= {"amplitude_m": 0.5, "frequency_per_m": 0.01, "octaves": int(rng.integers(1, 13))}
            f |= {"gain": float(rng.uniform(0.1, 1)), "seed": int(rng.integers(0, 2**32))}
        feats.append(f)
    return {"name": "random", "radius_m": 5000.0, "tolerance_m": 5.0, "features": feats}


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_feature_rows_equal_core_features_on_random_worlds(api: Api, seed: int) -> None:
    d = _random_world(np.random.default_rng(seed), 300)
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    rows = api.array("gm_world_features", 16 * 300, np.float64, w).reshape(-1, 16)
    api.lib.gm_world_destroy(w)
    assert same(rows, parse_spec(d).core_features())


@settings(
    max_examples=6, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(seed=st.integers(0, 2**31 - 1), skirt=st.booleans())
def test_bake_equals_python_bake_on_random_worlds(api: Api, seed: int, skirt: bool) -> None:
    # random worlds of every feature kind and blend (hypothesis); both sides read the one bake
    # the core made, so every array is equal bit for bit on any CPU
    d = _random_world(np.random.default_rng(seed), 12)
    for f in d["features"]:
        if f["kind"] == "noise":  # fine octaves alone would need a billion triangles at 5 m
            f["octaves"] = min(f["octaves"], 3)
    d["lod"] = {"levels": 3, "chunk_level": 1, "seams": "skirt" if skirt else "stitch"}
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    status, b, msg = api.bake(w)
    assert status == OK, msg
    compare_bake(api, b, globemill.bake(parse_spec(d)))
    api.lib.gm_bake_destroy(b)
    api.lib.gm_world_destroy(w)


def test_height_and_gradient_equal_python_field(api: Api) -> None:
    spec = load_spec(DEMO)
    status, w, msg = api.world(DEMO.read_bytes())
    assert status == OK, msg
    dirs = np.random.default_rng(7).normal(size=(2000, 3))
    ptr = dirs.ctypes.data_as(C.c_void_p)
    h = api.array("gm_world_height", 2000, np.float64, w, ptr, C.c_size_t(2000))
    g = api.array("gm_world_gradient", 6000, np.float64, w, ptr, C.c_size_t(2000))
    fld = globemill.field(spec)
    assert same(h, fld.height(dirs))
    assert same(g.reshape(-1, 3), fld.gradient(dirs))
    # a zero direction is refused, as Field.height refuses it
    dirs[5] = 0
    err = Error()
    out = np.zeros(2000)
    s = api.lib.gm_world_height(
        out.ctypes.data_as(C.c_void_p), C.c_size_t(2000), w, ptr, C.c_size_t(2000), C.byref(err)
    )
    assert s == INVALID_ARGUMENT and b"directions[5]" in err.message
    with pytest.raises(ValueError, match=r"directions\[5\]"):
        fld.height(dirs)
    api.lib.gm_world_destroy(w)


def test_world_info_holds_the_spec_defaults(api: Api) -> None:
    d = {"name": "plain", "radius_m": 300, "tolerance_m": 2}
    spec = parse_spec(d)
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    info = api.info("gm_world_get_info", WorldInfo, w)
    api.lib.gm_world_destroy(w)
    assert info.name == b"plain" and info.radius_m == 300 and info.tolerance_m == 2
    assert (info.levels, info.ratio, info.chunk_level) == (
        spec.lod.levels,
        spec.lod.ratio,
        spec.lod.chunk_level,
    )
    assert info.chunk_count == 20 * 4**spec.lod.chunk_level
    assert info.max_triangles == spec.max_triangles
    assert info.collision_tolerance_m == 4 * spec.tolerance_m  # bake.py's default
    assert info.collision_max_triangles_per_chunk == spec.collision.max_triangles_per_chunk
    assert info.offset == ["radial", "normal", "exact"].index(spec.offset)
    assert info.collision_bias == ["none", "centered"].index(spec.collision.bias)
    assert info.seams == ["stitch", "skirt"].index(spec.lod.seams)


# --------------------------------------------------------------------------------------------
# baking: the same arrays as globemill.bake


def compare_bake(api: Api, b: C.c_void_p, r: BakeResult) -> None:
    """Every array of a C bake equals the Python bake's, bit for bit."""
    bi = api.info("gm_bake_get_info", BakeInfo, b)
    V = bi.vertex_count
    assert V == len(r.vertices) and bi.level_count == len(r.levels)

    def pool(which: int, n: int) -> np.ndarray:
        a = api.array("gm_bake_vertex_data", n * V, np.float64, b, C.c_int32(which))
        return a.reshape(V, 3) if n == 3 else a

    assert same(pool(POSITION, 3), r.vertices)
    assert same(pool(DIRECTION, 3), r.directions)
    assert same(pool(NORMAL, 3), r.normals)
    # the attributes the core stored, read from both sides (one computation, not two agreeing)
    assert same(pool(SLOPE, 1), r.slope_deg)
    assert same(pool(ALTITUDE, 1), r.altitude_m)
    assert same(pool(COLOR, 3), r.color)
    assert same(api.array("gm_bake_vertex_layers", V, np.uint8, b), r.layer)
    for k, lr in enumerate(r.levels):
        lk = C.c_uint32(k)
        li = api.info("gm_bake_level_info", LevelInfo, b, lk)
        T = li.triangle_count
        assert li.vertex_count == lr.report["vertices"] and T == lr.report["triangles"]
        assert li.max_error_m == lr.report["max_error_m"] and li.tolerance_m == lr.tolerance_m
        assert li.repaired == lr.report["repaired"]
        tris = api.array("gm_bake_level_triangles", 3 * T, np.uint32, b, lk).reshape(-1, 3)
        assert same(tris, lr.triangles)
        assert same(api.array("gm_bake_level_triangle_chunks", T, np.uint32, b, lk), lr.chunk)
        assert same(api.array("gm_bake_level_errors", T, np.float32, b, lk), lr.errors)
        morph = api.array("gm_bake_level_morph", 3 * V, np.float64, b, lk).reshape(-1, 3)
        assert same(morph, lr.morph)
        present = api.array("gm_bake_level_present", V, np.uint8, b, lk)
        assert same(present.astype(bool), lr.present)
        for cm in lr.chunks:
            c = C.c_uint32(cm.chunk)
            ci = api.info("gm_chunk_get_info", ChunkInfo, b, lk, c)
            n = ci.vertex_count
            ids = api.array("gm_chunk_vertex_ids", ci.surface_vertex_count, np.uint32, b, lk, c)
            assert same(ids, cm.vertex_ids)
            for which, want in (
                (POSITION, cm.positions),
                (NORMAL, cm.normals),
                (MORPH, cm.morph),
                (COLOR, cm.color),
            ):
                got = api.array("gm_chunk_vertex_data", 3 * n, np.float64, b, lk, c, which)
                assert same(got.reshape(-1, 3), want)
            for which, want in ((SLOPE, cm.slope_deg), (ALTITUDE, cm.altitude_m)):
                assert same(api.array("gm_chunk_vertex_data", n, np.float64, b, lk, c, which), want)
            assert same(api.array("gm_chunk_vertex_layers", n, np.uint8, b, lk, c), cm.layer)
            t = api.array("gm_chunk_triangles", 3 * ci.triangle_count, np.uint32, b, lk, c)
            assert same(t.reshape(-1, 3), cm.triangles)
            assert ci.interior_count == cm.interior
            for mask in range(1, 8):
                m = ci.stitched_triangle_count[mask]
                st = api.array("gm_chunk_stitched", 3 * m, np.uint32, b, lk, c, C.c_uint32(mask))
                want_st = cm.stitched.get(mask, np.zeros((0, 3), np.uint32))
                assert same(st.reshape(-1, 3), want_st)
            sk = api.array("gm_chunk_skirt", 3 * ci.skirt_triangle_count, np.uint32, b, lk, c)
            assert same(sk.reshape(-1, 3), cm.skirt.reshape(-1, 3))
            assert list(ci.neighbors) == list(r.chunk_neighbors[cm.chunk])
            assert list(ci.corners) == list(r.chunk_corners[cm.chunk])
    assert bool(bi.has_colliders) == bool(r.colliders)
    if r.colliders:
        col = r.report["collision"]
        assert bi.collision_tolerance_m == col["tolerance_m"]
        assert bi.collision_max_error_m == col["max_error_m"]
        assert bi.collision_triangles == col["triangles"]
        assert bi.collision_max_triangles_per_chunk == col["max_triangles_per_chunk"]
        for cl in r.colliders:
            c = C.c_uint32(cl.chunk)
            nv, nt = C.c_uint64(), C.c_uint64()
            assert api.lib.gm_collider_counts(C.byref(nv), C.byref(nt), b, c, None) == OK
            pos = api.array("gm_collider_positions", 3 * nv.value, np.float64, b, c)
            assert same(pos.reshape(-1, 3), cl.positions)
            tri = api.array("gm_collider_triangles", 3 * nt.value, np.uint32, b, c)
            assert same(tri.reshape(-1, 3), cl.triangles)


def test_bake_equals_python_bake_on_demo_world(
    api: Api, demo_c: C.c_void_p, demo_py: BakeResult
) -> None:
    # stitched seams, centered collider bias
    assert demo_py.report["collision"]["bias"] == "centered"
    compare_bake(api, demo_c, demo_py)


@pytest.fixture(scope="module")
def small_spec() -> dict[str, Any]:
    return json.loads((CORPUS / "valid_small.json").read_text())


def test_skirt_seams_and_unbiased_colliders_equal_python(
    api: Api, small_spec: dict[str, Any]
) -> None:
    d = copy.deepcopy(small_spec)
    d["lod"]["seams"] = "skirt"
    d["lod"]["skirt_depth_m"] = 0.0  # 0: twice the coarsest tolerance, as bake.py
    d["collision"]["bias"] = "none"
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    status, b, msg = api.bake(w)
    assert status == OK, msg
    r = globemill.bake(parse_spec(d))
    assert any(len(cm.skirt) for cm in r.levels[0].chunks)
    compare_bake(api, b, r)
    api.lib.gm_bake_destroy(b)
    api.lib.gm_world_destroy(w)


def test_bake_options_act_like_python_keywords(api: Api, small_spec: dict[str, Any]) -> None:
    status, w, msg = api.world(json.dumps(small_spec))
    assert status == OK, msg
    opts = {"tolerance_m": 6.0, "levels": 2, "ratio": 3.0, "chunk_level": 1, "offset": 2}
    status, b, msg = api.bake(w, collision=0, **opts)
    assert status == OK, msg
    r = globemill.bake(
        parse_spec(small_spec),
        offset="exact",
        collision=False,
        **{k: v for k, v in opts.items() if k != "offset"},
    )
    compare_bake(api, b, r)
    err = Error()
    assert api.lib.gm_collider_counts(None, None, b, 0, C.byref(err)) == INVALID_ARGUMENT
    assert b"no colliders" in err.message
    api.lib.gm_bake_destroy(b)
    api.lib.gm_world_destroy(w)


def _changed_pairs(api: Api, e: C.c_void_p) -> list[tuple[int, int]]:
    n = C.c_uint64()
    assert api.lib.gm_edit_changed_count(C.byref(n), e, None) == OK
    pairs = api.array("gm_edit_changed", 2 * n.value, np.uint32, e).reshape(-1, 2)
    return [(int(a), int(b)) for a, b in pairs]


def test_edit_session_equals_the_python_session(api: Api) -> None:
    """gm_edit_update gives the arrays and changed list of globemill.EditSession (which equals
    a fresh bake: tests/test_session.py), with colliders."""
    api.lib.gm_edit_bake.restype = C.c_void_p
    api.lib.gm_edit_destroy.restype = None
    d = coarse_demo()
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    e = C.c_void_p(1)
    err = Error()
    o = api.options()
    assert api.lib.gm_edit_create(C.byref(e), w, C.byref(o), C.byref(err)) == OK, err.message
    api.lib.gm_world_destroy(w)
    assert _changed_pairs(api, e) == []
    py = globemill.EditSession(parse_spec(d), collision=True)
    hill = next(i for i, f in enumerate(py.spec.features) if f.kind == "hill")
    mesa = next(i for i, f in enumerate(py.spec.features) if f.kind == "mesa")
    h = py.spec.features[hill]
    edits = [
        lambda: py.move_feature(hill, (h.lat_deg + 0.5, h.lon_deg)),
        lambda: py.set_feature(mesa, radius_m=py.spec.features[mesa].radius_m * 1.2),
        lambda: py.remove_feature(hill),
    ]
    for edit in edits:
        report = edit()
        text = json.dumps(py.spec.model_dump(mode="json", exclude_none=True))
        status, w, msg = api.world(text)
        assert status == OK, msg
        assert api.lib.gm_edit_update(e, w, C.byref(err)) == OK, err.message
        api.lib.gm_world_destroy(w)
        compare_bake(api, C.c_void_p(api.lib.gm_edit_bake(e)), py.result)
        want = [(k, c) for k in sorted(report.changed) for c in report.changed[k]]
        want += [(0xFFFFFFFF, c) for c in report.colliders]
        assert _changed_pairs(api, e) == want
    # a world with other settings is refused and leaves the session as it was
    before = api.lib.gm_edit_bake(e)
    other = dict(d, radius_m=d["radius_m"] + 1)
    status, w, msg = api.world(json.dumps(other))
    assert status == OK, msg
    assert api.lib.gm_edit_update(e, w, C.byref(err)) == INVALID_ARGUMENT
    assert b"only features, layers and name may differ" in err.message
    assert api.lib.gm_edit_bake(e) == before
    api.lib.gm_world_destroy(w)
    assert api.lib.gm_edit_update(None, None, C.byref(err)) == INVALID_ARGUMENT
    api.lib.gm_edit_destroy(e)
    api.lib.gm_edit_destroy(None)


def test_empty_feature_list_bakes_the_bare_sphere_like_python(api: Api) -> None:
    d = {"name": "bare", "radius_m": 100, "tolerance_m": 5, "features": []}
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    assert api.info("gm_world_get_info", WorldInfo, w).feature_count == 0
    status, b, msg = api.bake(w)
    assert status == OK, msg
    compare_bake(api, b, globemill.bake(parse_spec(d)))
    api.lib.gm_bake_destroy(b)
    api.lib.gm_world_destroy(w)


def test_thousands_of_features(api: Api) -> None:
    rng = np.random.default_rng(11)
    feats = [
        {
            "kind": "hill",
            "lat_deg": float(rng.uniform(-90, 90)),
            "lon_deg": float(rng.uniform(-180, 180)),
            "amplitude_m": float(rng.uniform(0.05, 0.2)),
            "sigma_m": float(rng.uniform(5, 40)),
        }
        for _ in range(3000)
    ]
    d = {"name": "many", "radius_m": 1000, "tolerance_m": 4, "features": feats}
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    rows = api.array("gm_world_features", 16 * 3000, np.float64, w).reshape(-1, 16)
    spec = parse_spec(d)
    assert same(rows, spec.core_features())
    status, b, msg = api.bake(w, levels=1, collision=0)
    assert status == OK, msg
    r = globemill.bake(spec, levels=1, collision=False)
    li = api.info("gm_bake_level_info", LevelInfo, b, C.c_uint32(0))
    assert (
        li.triangle_count == len(r.triangles) and li.vertex_count == r.report["lods"][0]["vertices"]
    )
    api.lib.gm_bake_destroy(b)
    api.lib.gm_world_destroy(w)


def test_progress_reports_the_same_rounds_as_python(api: Api, small_spec: dict[str, Any]) -> None:
    seen_c: list[tuple[int, int]] = []
    seen_py: list[tuple[str, int]] = []
    cb = PROGRESS(lambda _user, rnd, tris: seen_c.append((rnd, tris)))
    status, w, msg = api.world(json.dumps(small_spec))
    assert status == OK, msg
    status, b, msg = api.bake(w, progress=cb, collision=0)
    assert status == OK, msg
    globemill.bake(
        parse_spec(small_spec),
        collision=False,
        progress=lambda stage, done, total: seen_py.append((stage, done)),
    )
    # the C callback numbers the core's refinement reports; Python sees them with their stage
    # (Python's last refine report closes the stage at the verified count: not a round)
    refine = [done for stage, done in seen_py if stage == "refine"][:-1]
    assert seen_c and seen_c == [(i + 1, done) for i, done in enumerate(refine)]
    levels = parse_spec(small_spec).lod.levels
    later = [s for s, _ in seen_py if s not in ("refine", "verify")]
    # levels: 0 of n first, then one report per level cut
    assert later == ["levels"] * (levels + 1) + ["seams"] * levels + ["chunks"] * levels
    api.lib.gm_bake_destroy(b)
    api.lib.gm_world_destroy(w)


def test_concurrent_bakes_of_one_world_agree(api: Api, small_spec: dict[str, Any]) -> None:
    # the header: several gm_bake_create calls on one world may run at once (ctypes releases
    # the GIL around each foreign call, so these overlap)
    status, w, msg = api.world(json.dumps(small_spec))
    assert status == OK, msg
    results: list[tuple[int, C.c_void_p, str]] = []
    lock = threading.Lock()

    def run() -> None:
        res = api.bake(w, threads=1)
        with lock:
            results.append(res)

    threads = [threading.Thread(target=run) for _ in range(3)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    api.lib.gm_world_destroy(w)
    arrays = []
    for status, b, msg in results:
        assert status == OK, msg
        li = api.info("gm_bake_level_info", LevelInfo, b, C.c_uint32(0))
        arrays.append(
            api.array("gm_bake_level_triangles", 3 * li.triangle_count, np.uint32, b, C.c_uint32(0))
        )
        api.lib.gm_bake_destroy(b)
    assert len(arrays) == 3 and all(same(a, arrays[0]) for a in arrays)


# --------------------------------------------------------------------------------------------
# failures: a status and a message, the same problems as Python


def _mutations() -> list[tuple[str, Callable[[dict[str, Any]], Any]]]:
    def feat(i: int, **kw: Any) -> Callable[[dict[str, Any]], Any]:
        return lambda d: d["features"][i].update(**kw)

    cases: list[tuple[str, Callable[[dict[str, Any]], Any]]] = [
        ("types and unknown key", lambda d: d.update(zz=1, name=3, radius_m="x")),
        ("name pattern", lambda d: d.update(name="a\n")),
        ("sigma negative", feat(1, sigma_m=-1)),
        ("blend width text", feat(1, blend_width_m="a")),
        ("blend unknown", feat(1, blend="zz")),
        ("blend null", feat(1, blend=None)),
        ("kind unknown", feat(1, kind="volcano")),
        ("kind number", feat(1, kind=5)),
        ("kind object", feat(1, kind={"k": "it's"})),
        ("kind missing", lambda d: d["features"][1].pop("kind") and None),
        ("kind switched", feat(1, kind="mesa")),
        ("feature not a table", lambda d: d["features"].__setitem__(1, 3)),
        ("features not a list", lambda d: d.update(features={})),
        ("lod null", lambda d: d.update(lod=None)),
        ("octaves float", feat(0, octaves=4.0)),
        ("octaves bool", feat(0, octaves=True)),
        ("seed too big", feat(0, seed=2**40)),
        ("amplitude zero", feat(1, amplitude_m=0)),
        ("huge integer for a float", feat(1, sigma_m=10**400)),
        ("huge integer for an integer", lambda d: d.update(max_triangles=-(10**30))),
        ("color short", lambda d: d["layers"][0].update(color=[0.1, 0.2])),
        ("color empty", lambda d: d["layers"][0].update(color=[])),
        ("color long", lambda d: d["layers"][0].update(color=[0.1, 0.2, 0.3, 0.4])),
        ("color items", lambda d: d["layers"][0].update(color=[0.1, "a", 2])),
        ("slope short", lambda d: d["layers"][0].update(slope_deg=[1])),
        ("slope long", lambda d: d["layers"][0].update(slope_deg=[1, 2, 3])),
        ("bands reversed", lambda d: d["layers"][0].update(slope_deg=[50, 10], altitude_m=[5, 1])),
        ("layer name empty", lambda d: d["layers"][0].update(name="")),
        ("tolerance above R/10", lambda d: d.update(tolerance_m=1000)),
        ("corner above half size", feat(4, corner_radius_m=100)),
        ("amplitude sum", feat(1, amplitude_m=5000)),
        ("ridge ends equal", feat(17, lat1_deg=0, lon1_deg=-100)),
        ("ridge ends opposite", feat(17, lat1_deg=0, lon1_deg=80)),
        ("smooth blend without width", feat(1, blend="smooth_max")),
        ("lod fields", lambda d: d.update(lod={"levels": 0, "ratio": 1, "seams": "q", "zz": 1})),
        ("collision fields", lambda d: d.update(collision={"bias": "q", "tolerance_m": 0})),
        ("top level list", lambda d: []),
        ("number formats", lambda d: d.update(tolerance_m=1e16, radius_m=1.5e-7)),
        ("unicode", lambda d: d.update({"ключ": "é", "\U0001f600": [1, 2]})),
        ("block too wide", lambda d: d["features"][14].update(half_x_m=3000, wall_width_m=50)),
        ("too many layers", lambda d: d.update(layers=[d["layers"][0]] * (MAX_LAYERS + 1))),
    ]
    return cases


@pytest.mark.parametrize("label, mutate", _mutations(), ids=[m[0] for m in _mutations()])
def test_invalid_specs_list_the_same_problems_as_python(
    api: Api, label: str, mutate: Callable[[dict[str, Any]], Any]
) -> None:
    d = json.loads(DEMO.read_text())
    out = mutate(d)
    d = d if out is None else out
    with pytest.raises(SpecError) as info:
        parse_spec(d)
    status, message = api.spec_check(json.dumps(d, ensure_ascii=False).encode())
    assert status == SPEC
    assert [problem_key(x) for x in c_problems(message)] == [
        problem_key(x) for x in info.value.problems
    ]
    status, w, short = api.world(json.dumps(d))
    assert status == SPEC and w.value is None
    assert message.startswith(short.rstrip(".")[:200])


_NUMBER = re.compile(r"-?\d+(?:\.\d+)?(?:e[+-]?\d+)?")


# what the Python loader adds for people: the closest key (difflib) and the feature's name
_HINTS = re.compile(r"(; did you mean '[^']*'\?)?( \((feature|layer) '.*'\))?$")


def problem_key(line: str) -> tuple[str, str]:
    """What both loaders must agree on in a problem line: the field path and the allowed range
    (numbers compared by value; each side writes numbers its own way, and the offending value
    after "got" in its own notation). The Python loader's hints are left out."""
    path, _, rest = line.partition(": ")
    rest = _HINTS.sub("", rest)
    for head in (" (allowed: ", " (allowed keys: ", "(allowed: "):
        start = rest.find(head)
        if start >= 0:
            body = rest[start + len(head) :]
            end = body.find("), got ")
            allowed = body[:end] if end >= 0 else body.removesuffix(")")
            return path, _NUMBER.sub(lambda m: repr(float(m.group())), allowed)
    return path, rest


def same_problems(c_lines: list[str], py_lines: list[str]) -> bool:
    return [problem_key(x) for x in c_lines] == [problem_key(x) for x in py_lines]


def c_problems(message: str) -> list[str]:
    """The problem lines of a C message (the same layout as SpecError's)."""
    head = "invalid world spec: "
    if message.startswith(head):
        return [message[len(head) :]]
    first, *rest = message.split("\n")
    assert re.fullmatch(r"invalid world spec \(\d+ problems\):", first)
    return [line[4:] for line in rest]


@pytest.mark.parametrize(
    "text, where",
    [
        ('{"name": "a", }', "line 1, column 15"),
        ('{"name" "a"}', "line 1, column 9"),
        ('{\n  "name": "a",\n  "radius_m": ]', "line 3, column 15"),
        ('{"name": "a"} x', "line 1, column 15"),
        ("", "line 1, column 1"),
        ('{"a": [1, 2,]}', "line 1, column 13"),
    ],
)
def test_malformed_json_names_the_line_and_column_python_does(
    api: Api, text: str, where: str
) -> None:
    # the position Python's json module reports for the same text
    with pytest.raises(json.JSONDecodeError) as info:
        json.loads(text)
    assert where == f"line {info.value.lineno}, column {info.value.colno}"
    status, message = api.spec_check(text.encode())
    assert status == PARSE
    assert message.startswith(f"cannot read world spec: malformed JSON at {where}: ")


@pytest.mark.parametrize(
    "text, what",
    [
        (b'{"radius_m": NaN}', "NaN and Infinity are not JSON numbers"),
        (b'{"radius_m": -Infinity}', "NaN and Infinity are not JSON numbers"),
        (b'{"a": 1, "a": 2}', 'duplicate key "a"'),
        (b"[" * 65 + b"]" * 65, "nested deeper than 64 levels"),
        (b'{"name": "\\ud800"}', "lone UTF-16 surrogate"),
        (b'\xef\xbb\xbf{"name": "a"}', "byte order mark"),
        (b'{"name": "\xc3\x28"}', "not UTF-8"),
        (b'{"name": "a\x01"}', "control character"),
        (b'{"name": "\\x"}', "invalid escape"),
        (b'{"n": 01}', "expecting ',' or '}'"),
        (b'{"n": 1.}', "invalid number"),
        (b'{"n": 1} // comment', "extra data"),
    ],
)
def test_malformed_json_is_a_parse_error_never_a_crash(api: Api, text: bytes, what: str) -> None:
    status, message = api.spec_check(text)
    assert status == PARSE and what in message
    status, w, short = api.world(text)
    assert status == PARSE and w.value is None and what in short


def test_limits_of_the_reader(api: Api) -> None:
    # within the limits: 64 levels of nesting read fine (the spec is then invalid, not malformed)
    status, message = api.spec_check(b"[" * 64 + b"]" * 64)
    assert status == SPEC and "(top level): must be a table" in message
    from globemill.spec import LIMITS  # the rule table's limits, shared by both readers

    big = b'{"name": "' + b"x" * LIMITS["max_bytes"] + b'"}'
    status, message = api.spec_check(big)
    assert status == PARSE and f"more than the limit of {LIMITS['max_bytes']}" in message
    many = b"[" + b"0," * LIMITS["max_values"] + b"0]"
    status, message = api.spec_check(many)
    assert status == PARSE and f"more than {LIMITS['max_values']} values" in message


def test_long_messages_are_cut_cleanly_and_listed_in_full_by_spec_check(api: Api) -> None:
    d = {"name": "x", "radius_m": 100, "tolerance_m": 1, "features": [{"kind": "hill"}] * 1500}
    with pytest.raises(SpecError) as info:
        parse_spec(d)
    status, message = api.spec_check(json.dumps(d).encode())
    assert status == SPEC
    lines = c_problems(message)
    # the first 1000 of Python's 6000 problem lines, then one line counting the rest
    assert same_problems(lines[:1000], info.value.problems[:1000])
    assert lines[1000:] == ["... and 5000 more problems"]
    assert message.startswith("invalid world spec (6000 problems):")
    err = Error()
    w = C.c_void_p()
    text = json.dumps(d).encode()
    assert api.lib.gm_world_create(C.byref(w), text, C.c_size_t(len(text)), C.byref(err)) == SPEC
    assert err.truncated == 1 and message.startswith(err.message.decode())
    # a cut never splits a UTF-8 character: an unknown key of 600 two-byte letters
    d2 = {"name": "x", "radius_m": 100, "tolerance_m": 1, "é" * 600: 1}
    text = json.dumps(d2, ensure_ascii=False).encode()
    assert api.lib.gm_world_create(C.byref(w), text, C.c_size_t(len(text)), C.byref(err)) == SPEC
    cut = err.message.decode()  # raises if a character was split
    assert err.truncated == 1 and cut.startswith("invalid world spec: ééé") and len(cut) > 400


def test_huge_numbers_read_as_python_reads_them(api: Api) -> None:
    text = (CORPUS / "invalid_huge_numbers.json").read_bytes()
    with pytest.raises(SpecError) as info:
        parse_spec(json.loads(text))
    status, message = api.spec_check(text)
    assert status == SPEC and same_problems(c_problems(message), info.value.problems)


def test_bad_options_are_refused_with_python_messages(api: Api) -> None:
    d = coarse_demo()
    status, w, msg = api.world(json.dumps(d))
    assert status == OK, msg
    spec = parse_spec(d)
    with pytest.raises(ValueError) as info:
        globemill.bake(spec, tolerance_m=1e9)
    status, b, message = api.bake(w, tolerance_m=1e9)
    assert status == INVALID_ARGUMENT and b.value is None and message == str(info.value)
    with pytest.raises(ValueError) as info:
        globemill.bake(spec, tolerance_m=float("nan"))
    status, b, message = api.bake(w, tolerance_m=float("nan"))
    assert status == INVALID_ARGUMENT and message == str(info.value)
    for kw, text in [
        ({"levels": 13}, "levels: must be an integer in 1..12"),
        ({"ratio": 17.0}, "ratio: must be > 1 and <= 16"),
        ({"chunk_level": 6}, "chunk_level: must be an integer in 0..5"),
        ({"threads": 5000}, "threads: must be an integer in 0..1024"),
        ({"offset": 3}, "offset: must be 0 (radial), 1 (normal) or 2 (exact)"),
        ({"chunk_level": 5, "max_triangles": 1000}, "chunk_level: 5 makes 20480 chunks"),
    ]:
        status, b, message = api.bake(w, **kw)
        assert status == INVALID_ARGUMENT and message.startswith(text), (kw, message)
    # the triangle budget: the core's own message, as Python raises it (Python adds, after it,
    # the feature that alone needs most of the triangles)
    with pytest.raises(ValueError) as info:
        globemill.bake(spec.model_copy(update={"max_triangles": 1000}))
    status, b, message = api.bake(w, max_triangles=1000)
    assert status == BUDGET
    m = re.match(r"features\[(\d+)\]", message)
    if m:  # the core named the feature; Python adds its name after the index
        name = spec.features[int(m.group(1))].name
        assert str(info.value).startswith(f"{m.group(0)} ({name!r}){message[m.end() :]}")
    else:
        assert str(info.value).startswith(message)
        assert str(info.value)[len(message) :].startswith(" (features[")
    o = api.options()
    o.struct_size = 0
    err = Error()
    assert api.lib.gm_bake_create(C.byref(b), w, C.byref(o), C.byref(err)) == INVALID_ARGUMENT
    api.lib.gm_world_destroy(w)


def test_buffers_handles_and_indices_are_checked(api: Api, demo_c: C.c_void_p) -> None:
    b = demo_c
    li = api.info("gm_bake_level_info", LevelInfo, b, C.c_uint32(0))
    n = 3 * li.triangle_count
    short = np.full(n, 7, np.uint32)
    err = Error()
    s = api.lib.gm_bake_level_triangles(
        short.ctypes.data_as(C.c_void_p), C.c_size_t(n - 1), b, C.c_uint32(0), C.byref(err)
    )
    assert s == BUFFER_TOO_SMALL and f"writes {n} elements".encode() in err.message
    assert np.all(short == 7)  # nothing written
    assert api.lib.gm_bake_level_triangles(None, C.c_size_t(n), b, 0, C.byref(err)) == 1
    bi = api.info("gm_bake_get_info", BakeInfo, b)
    one = C.c_uint32()
    for call in (
        lambda: api.lib.gm_bake_level_triangles(C.byref(one), 0, b, bi.level_count, C.byref(err)),
        lambda: api.lib.gm_chunk_triangles(C.byref(one), 0, b, 0, bi.chunk_count, C.byref(err)),
        lambda: api.lib.gm_chunk_stitched(C.byref(one), 0, b, 0, 0, 8, C.byref(err)),
        lambda: api.lib.gm_chunk_stitched(C.byref(one), 0, b, 0, 0, 0, C.byref(err)),
        lambda: api.lib.gm_bake_vertex_data(C.byref(one), 0, b, 99, C.byref(err)),
        lambda: api.lib.gm_bake_vertex_data(C.byref(one), 0, b, MORPH, C.byref(err)),
        lambda: api.lib.gm_bake_get_info(C.byref(bi), None, C.byref(err)),
        lambda: api.lib.gm_world_get_info(None, None, C.byref(err)),
        lambda: api.lib.gm_world_create(None, b"{}", 2, C.byref(err)),
        lambda: api.lib.gm_bake_create(None, None, None, C.byref(err)),
    ):
        assert call() == INVALID_ARGUMENT and err.status == INVALID_ARGUMENT
        assert err.message
    # err may be NULL; destroy accepts NULL
    assert api.lib.gm_bake_level_triangles(None, 0, b, 99, None) == INVALID_ARGUMENT
    api.lib.gm_world_destroy(None)
    api.lib.gm_bake_destroy(None)
    assert api.lib.gm_vertex_data_components(NORMAL) == 3
    assert api.lib.gm_vertex_data_components(SLOPE) == 1
    assert api.lib.gm_vertex_data_components(42) == 0


def test_fuzz_corpus_agrees_with_the_python_loader(api: Api) -> None:
    """Every corpus file: both loaders accept it, with the same deprecation messages, or both
    refuse it with the same problems; where only the C reader refuses, it is one of its
    documented strict rules."""
    import warnings

    from globemill.spec import SpecDeprecationWarning

    files = sorted(CORPUS.iterdir())
    assert len(files) >= 20
    strict = ("NaN and Infinity", "surrogate", "nested deeper")
    warned = 0
    for path in files:
        status, message = api.spec_check(path.read_bytes())
        with warnings.catch_warnings(record=True) as record:
            warnings.simplefilter("always", SpecDeprecationWarning)
            try:
                load_spec(path)
                py: tuple[str, list[str]] = ("ok", [])
            except SpecError as exc:
                kind = "parse" if str(exc).startswith("cannot read") else "spec"
                py = (kind, exc.problems)
        if status == OK:
            assert py[0] == "ok", path.name
            lines = [str(w.message).removeprefix(f"{path}: ") for w in record]
            created, w, msg = api.world(path.read_bytes())
            assert created == OK, msg
            try:
                assert api.warnings(w) == lines, path.name
            finally:
                api.lib.gm_world_destroy(w)
            warned += bool(lines)
        elif status == SPEC:
            assert py[0] == "spec" and same_problems(c_problems(message), py[1]), path.name
        else:
            assert status == PARSE, path.name
            assert py[0] == "parse" or any(s in message for s in strict), (path.name, message)
    assert warned >= 1  # valid_old_keys.json


# --------------------------------------------------------------------------------------------
# host examples


def summary_expected(r: BakeResult) -> dict[str, Any]:
    """What the examples' summary must say for a Python bake of the same spec."""
    levels = []
    for lr in r.levels:
        levels.append(
            {
                "vertices": lr.report["vertices"],
                "triangles": lr.report["triangles"],
                "chunk_vertices": sum(len(cm.positions) for cm in lr.chunks),
                "chunk_triangles": sum(len(cm.triangles) for cm in lr.chunks),
                "stitched_triangles": sum(len(t) for cm in lr.chunks for t in cm.stitched.values()),
                "tolerance_m": lr.tolerance_m,
            }
        )
    return {
        "pool_vertices": len(r.vertices),
        "chunks": len(r.chunk_corners),
        "levels": levels,
        "collider_vertices": sum(len(c.positions) for c in r.colliders),
        "collider_triangles": r.report["collision"]["triangles"],
        "collider_tolerance_m": r.report["collision"]["tolerance_m"],
    }


def summary_parse(text: str) -> dict[str, Any]:
    out: dict[str, Any] = {"levels": []}
    for line in text.splitlines():
        words = line.split()
        fields = dict(zip(words[::2], words[1::2], strict=False))
        if words[0] == "pool_vertices":
            out["pool_vertices"] = int(fields["pool_vertices"])
            out["chunks"] = int(fields["chunks"])
        elif words[0] == "level":
            lv = {
                k: int(fields[k])
                for k in (
                    "vertices",
                    "triangles",
                    "chunk_vertices",
                    "chunk_triangles",
                    "stitched_triangles",
                )
            }
            lv["tolerance_m"] = float(fields["tolerance_m"])
            out["levels"].append(lv)
        elif words[0] == "colliders":
            fields = dict(zip(words[1::2], words[2::2], strict=False))
            out["collider_vertices"] = int(fields["vertices"])
            out["collider_triangles"] = int(fields["triangles"])
            out["collider_tolerance_m"] = float(fields["tolerance_m"])
    return out


@pytest.fixture(scope="module")
def demo_file(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("spec") / "coarse.json"
    path.write_text(json.dumps(coarse_demo()))
    return path


def test_c_example_summary_equals_python_counts(
    api: Api, demo_py: BakeResult, demo_file: Path, tmp_path: Path
) -> None:
    if not (shutil.which("cmake") and (shutil.which("cc") or shutil.which("gcc"))):
        pytest.skip("cmake and a C compiler are needed to build the C example")
    build = tmp_path / "build"
    subprocess.run(
        [
            "cmake",
            "-S",
            str(EXAMPLES / "c"),
            "-B",
            str(build),
            "-DCMAKE_BUILD_TYPE=Release",
            f"-DGLOBEMILL_ROOT={api.path.parent}",
            f"-DGLOBEMILL_INCLUDE_DIR={HEADER.parent}",
        ],
        check=True,
        capture_output=True,
    )
    subprocess.run(["cmake", "--build", str(build)], check=True, capture_output=True)
    run = subprocess.run(
        [str(build / "globemill_bake_summary"), str(demo_file)],
        capture_output=True,
        text=True,
        check=True,
    )
    assert run.stdout.startswith(f"globemill {globemill.__version__}\n")
    assert summary_parse(run.stdout) == summary_expected(demo_py)
    assert run.stderr == ""  # the demo uses no renamed key
    # a spec in the old spelling: Python's deprecation messages, one "warning: " line each
    old = tmp_path / "old.json"
    old.write_text(json.dumps(OLD_KEYS_WORLD))
    run = subprocess.run(
        [str(build / "globemill_bake_summary"), str(old)], capture_output=True, text=True
    )
    assert run.returncode == 0, run.stderr
    assert run.stderr.splitlines() == [
        f"warning: {line}" for line in python_warnings(OLD_KEYS_WORLD)
    ]
    # a bad spec: exit status 1 and the library's message
    bad = tmp_path / "bad.json"
    bad.write_text('{"name": "x", "radius_m": 10, "tolerance_m": -1}')
    run = subprocess.run(
        [str(build / "globemill_bake_summary"), str(bad)], capture_output=True, text=True
    )
    assert run.returncode == 1
    assert "tolerance_m: must be > 0 (allowed: > 0 and <= radius_m / 10), got -1" in run.stderr


def test_csharp_example_summary_equals_python_counts(
    api: Api, demo_py: BakeResult, demo_file: Path, tmp_path: Path
) -> None:
    if not (shutil.which("mcs") and shutil.which("mono")):
        pytest.skip("mono (Debian: mono-mcs, mono-runtime) is needed for the C# example")
    exe = tmp_path / "BakeSummary.exe"
    subprocess.run(
        [
            "mcs",
            f"-out:{exe}",
            str(EXAMPLES / "csharp" / "Globemill.cs"),
            str(EXAMPLES / "csharp" / "BakeSummary.cs"),
        ],
        check=True,
        capture_output=True,
    )
    env = dict(os.environ, LD_LIBRARY_PATH=str(api.path.parent))
    run = subprocess.run(
        ["mono", str(exe), str(demo_file)], capture_output=True, text=True, env=env, check=True
    )
    assert run.stdout.startswith(f"globemill {globemill.__version__}\n")
    assert summary_parse(run.stdout) == summary_expected(demo_py)
    old = tmp_path / "old.json"
    old.write_text(json.dumps(OLD_KEYS_WORLD))
    run = subprocess.run(
        ["mono", str(exe), str(old)], capture_output=True, text=True, env=env, check=True
    )
    assert run.stderr.splitlines() == [
        f"warning: {line}" for line in python_warnings(OLD_KEYS_WORLD)
    ]


def test_cython_example_arrays_equal_python(api: Api, demo_py: BakeResult, tmp_path: Path) -> None:
    try:
        import Cython  # noqa: F401
    except ImportError:
        pytest.skip("Cython is needed to build the Cython example (pip install cython)")
    for name in ("globemill_cy.pyx", "setup.py"):
        shutil.copy(EXAMPLES / "cython" / name, tmp_path / name)
    # -O0: the generated C is large and only its behaviour is tested here
    env = dict(
        os.environ,
        GLOBEMILL_ROOT=str(api.path.parent),
        GLOBEMILL_INCLUDE=str(HEADER.parent),
        CFLAGS="-O0",
    )
    subprocess.run(
        [sys.executable, "setup.py", "build_ext", "--inplace"],
        cwd=tmp_path,
        env=env,
        check=True,
        capture_output=True,
    )
    sys.path.insert(0, str(tmp_path))
    try:
        import globemill_cy  # type: ignore[import-not-found]
    finally:
        sys.path.remove(str(tmp_path))
    assert globemill_cy.version() == globemill.__version__
    bk = globemill_cy.Bake(json.dumps(coarse_demo()))
    r = demo_py
    assert same(bk.vertices(), r.vertices)
    assert same(bk.directions(), r.directions)
    assert same(bk.normals(), r.normals)
    assert bk.level_count == len(r.levels)
    for k, lr in enumerate(r.levels):
        assert same(bk.level_triangles(k), lr.triangles)
        assert same(bk.level_chunks(k), lr.chunk)
        assert same(bk.level_morph(k), lr.morph)
        for cm in lr.chunks[::7]:
            ch = bk.chunk(k, cm.chunk)
            assert same(ch["vertex_ids"], cm.vertex_ids)
            assert same(ch["positions"], cm.positions) and same(ch["normals"], cm.normals)
            assert same(ch["morph"], cm.morph) and same(ch["triangles"], cm.triangles)
            assert ch["interior"] == cm.interior
            assert sorted(ch["stitched"]) == sorted(cm.stitched)
            assert all(same(ch["stitched"][m], cm.stitched[m]) for m in cm.stitched)
    for cl in r.colliders:
        pos, tris = bk.collider(cl.chunk)
        assert same(pos, cl.positions) and same(tris, cl.triangles)
    with pytest.raises(globemill_cy.GlobemillError, match="invalid world spec") as info:
        globemill_cy.Bake('{"name": "x"}')
    assert info.value.status == SPEC
    assert bk.warnings == []
    old = globemill_cy.Bake(json.dumps(OLD_KEYS_WORLD), tolerance_m=8.0, collision=False)
    assert old.warnings == python_warnings(OLD_KEYS_WORLD)


# --------------------------------------------------------------------------------------------
# the rule table (src/globemill/spec_rules.json): both loaders accept a value just inside each
# bound of every field and refuse one just outside it, naming the same path and allowed range

from globemill.spec import SPEC_RULES  # noqa: E402

BOUND_WORLD: dict[str, Any] = {
    "name": "bounds",
    "radius_m": 1000.0,
    "tolerance_m": 1.0,
    "features": [
        {"kind": "hill", "lat_deg": 0, "lon_deg": 0, "amplitude_m": 1, "sigma_m": 5},
        {
            "kind": "mesa",
            "lat_deg": 10,
            "lon_deg": 0,
            "height_m": 1,
            "radius_m": 5,
            "wall_width_m": 1,
        },
        {
            "kind": "block",
            "lat_deg": 20,
            "lon_deg": 0,
            "height_m": 1,
            "half_x_m": 5,
            "half_y_m": 4,
            "bearing_deg": 90,
            "corner_radius_m": 1,
            "wall_width_m": 1,
        },
        {
            "kind": "crater",
            "lat_deg": 30,
            "lon_deg": 0,
            "radius_m": 5,
            "depth_m": 1,
            "rim_height_m": 1,
            "rim_width_m": 2,
        },
        {
            "kind": "ridge",
            "lat0_deg": 0,
            "lon0_deg": 40,
            "lat1_deg": 0,
            "lon1_deg": 50,
            "height_m": 1,
            "half_width_m": 3,
        },
        {"kind": "noise", "amplitude_m": 0.5, "frequency_per_m": 0.01},
    ],
    "layers": [
        {"name": "moss", "color": [0.2, 0.5, 0.2], "slope_deg": [10, 50], "altitude_m": [-5, 5]}
    ],
}


def _bound_cases() -> list[tuple[str, str, Any, bool]]:
    """(label, path, value, inside) for a value at/just inside and just outside every bound."""

    def values(rule: dict[str, Any], integer: bool) -> list[tuple[str, Any, bool]]:
        out = []
        for name, sign in (("gt", 1), ("ge", 1), ("lt", -1), ("le", -1)):
            if name not in rule:
                continue
            b = rule[name]
            step = (lambda x, d: x + d) if integer else (lambda x, d: math.nextafter(x, x + d))
            closed = name in ("ge", "le")
            inside = b if closed else step(b, sign)
            outside = step(b, -sign) if closed else b
            out += [(f"{name}{b}-in", inside, True), (f"{name}{b}-out", outside, False)]
        if rule.get("nonzero"):
            out.append(("nonzero-out", 0, False))
        return out

    cases = []
    sections = {"": "world", "lod.": "lod", "collision.": "collision"}
    for prefix, name in sections.items():
        for rule in SPEC_RULES["sections"][name]["fields"]:
            if rule["type"] in ("number", "integer"):
                for label, v, ok in values(rule, rule["type"] == "integer"):
                    cases.append((f"{prefix}{rule['key']}:{label}", prefix + rule["key"], v, ok))
    for rule in SPEC_RULES["sections"]["layer"]["fields"]:
        if rule["type"] == "numbers":
            for label, v, ok in values(rule["item"], False):
                i = 0 if label.startswith("g") else rule["count"] - 1  # lower bounds on lo
                item = f"layers[0].{rule['key']}[{i}]"
                cases.append((f"layer.{rule['key']}:{label}", item, v, ok))
    for index, kind in enumerate(SPEC_RULES["kinds"]):
        for rule in SPEC_RULES["sections"]["feature"]["fields"] + kind["fields"]:
            if rule["type"] in ("number", "integer"):
                for label, v, ok in values(rule, rule["type"] == "integer"):
                    path = f"features[{index}].{rule['key']}"
                    cases.append((f"{kind['kind']}.{rule['key']}:{label}", path, v, ok))
    return cases


def _set_path(doc: dict[str, Any], path: str, value: Any) -> None:
    parts = re.findall(r"[^.\[\]]+|\[\d+\]", path)
    node: Any = doc
    for part in parts[:-1]:
        node = node[int(part[1:-1])] if part.startswith("[") else node.setdefault(part, {})
    last = parts[-1]
    if last.startswith("["):
        node[int(last[1:-1])] = value
    else:
        node[last] = value


@pytest.mark.parametrize(
    "label, path, value, inside", _bound_cases(), ids=[c[0] for c in _bound_cases()]
)
def test_both_loaders_agree_on_every_bound_of_the_table(
    api: Api, label: str, path: str, value: Any, inside: bool
) -> None:
    doc = copy.deepcopy(BOUND_WORLD)
    if ".blend_width_m" in path:  # the width is read with a smooth blend only
        _set_path(doc, path.replace("blend_width_m", "blend"), "smooth_max")
    if path == "radius_m":  # keep tolerance_m <= radius_m / 10 and the features small
        doc["tolerance_m"] = 0.05
        doc["features"] = []
    _set_path(doc, path, value)
    text = json.dumps(doc).encode()
    status, message = api.spec_check(text)
    try:
        parse_spec(doc)
        py: list[str] = []
    except SpecError as exc:
        py = exc.problems
    c = c_problems(message) if status == SPEC else []
    assert status in (OK, SPEC), message
    assert [problem_key(x) for x in c] == [problem_key(x) for x in py]
    named = [p for p in py if p.split(": ")[0] == path]
    if inside:
        assert not named, py  # the bound itself (or the value next to an open one) is allowed
    else:
        assert len(named) == 1 and status == SPEC, (py, message)


def test_every_kind_and_section_of_the_table_is_covered() -> None:
    labels = {c[0].split(":")[0] for c in _bound_cases()}
    for kind in SPEC_RULES["kinds"]:
        bounded = [f for f in kind["fields"] if set(f) & {"gt", "ge", "lt", "le", "nonzero"}]
        for f in bounded:
            assert f"{kind['kind']}.{f['key']}" in labels
    assert {"radius_m", "lod.chunk_level", "collision.max_triangles_per_chunk"} <= labels


def test_core_field_refuses_rows_outside_the_table() -> None:
    """Field::init reads the same table: a row value outside its field's range is refused with the
    field's name; the rows of a valid spec are accepted."""
    spec = parse_spec(BOUND_WORLD)
    rows = spec.core_features()
    _core.Field(spec.radius_m, rows)
    for kind_index, kind in enumerate(SPEC_RULES["kinds"]):
        for entry in kind["row"]:
            rule = next((f for f in kind["fields"] if f["key"] == entry.get("key")), None)
            if rule is None or rule["type"] not in ("number", "integer") or entry.get("radians"):
                continue
            away = {"gt": None, "ge": -math.inf, "lt": None, "le": math.inf}
            for name, direction in away.items():
                if name not in rule:
                    continue
                bound = float(rule[name])
                bad = rows.copy()
                bad[kind_index, entry["col"]] = (
                    bound if direction is None else math.nextafter(bound, direction)
                )
                with pytest.raises(ValueError, match=rf"features\[{kind_index}\]\.{rule['key']}"):
                    _core.Field(spec.radius_m, bad)


def test_a_toml_spec_converted_to_json_is_read_by_the_c_abi(api: Api, tmp_path: Path) -> None:
    # `globemill spec convert` exists so engines can feed TOML-authored worlds to gm_world_create
    from globemill.spec_files import convert

    out = tmp_path / "pebblemoor.json"
    convert(ROOT / "examples" / "pebblemoor.toml", out)
    status, msg = api.spec_check(out.read_bytes())
    assert status == OK, msg
    status, w, msg = api.world(out.read_bytes())
    assert status == OK, msg
    try:
        want = load_spec(ROOT / "examples" / "pebblemoor.toml").core_features()
        got = api.array("gm_world_features", want.size, np.float64, w).reshape(want.shape)
        assert same(got, want)
    finally:
        api.lib.gm_world_destroy(w)


def test_the_c_abi_reads_renamed_keys_as_python_does(api: Api) -> None:
    # a JSON spec written before the renames (heading_deg, corner_m, wall_m) still loads for one
    # release and gives the same feature rows as its new spelling
    from globemill.spec import SpecDeprecationWarning

    old = {
        "name": "w",
        "radius_m": 500.0,
        "tolerance_m": 1.0,
        "features": [
            {"kind": "mesa", "lat_deg": 0, "lon_deg": 0, "height_m": 4, "radius_m": 30,
             "wall_m": 3},
            {"kind": "block", "lat_deg": 10, "lon_deg": 30, "height_m": 5, "half_x_m": 30,
             "half_y_m": 20, "heading_deg": -300.5, "corner_m": 4, "wall_m": 2},
        ],
    }  # fmt: skip
    status, w, msg = api.world(json.dumps(old))
    assert status == OK, msg
    rows = api.array("gm_world_features", 32, np.float64, w).reshape(2, 16)
    api.lib.gm_world_destroy(w)
    with pytest.warns(SpecDeprecationWarning):
        expected = parse_spec(old).core_features()
    assert same(rows, expected)


# every renamed key of the rule table in its old spelling, on named and unnamed features; the
# names hold what the quoting escapes (a double quote, a backslash) and what it keeps (non-ASCII)
OLD_KEYS_WORLD: dict[str, Any] = {
    "name": "old_keys",
    "radius_m": 500.0,
    "tolerance_m": 1.0,
    "features": [
        {"kind": "hill", "name": "plain", "lat_deg": 0, "lon_deg": 60, "amplitude_m": 3,
         "sigma_m": 40},
        {"kind": "mesa", "lat_deg": 0, "lon_deg": 0, "height_m": 4, "radius_m": 30, "wall_m": 3},
        {"kind": "mesa", "name": 'Tor "Grey" \\ Öy', "lat_deg": -20, "lon_deg": 10,
         "height_m": 4, "radius_m": 25, "wall_m": 2.5},
        {"kind": "block", "name": "Pen", "lat_deg": 10, "lon_deg": 30, "height_m": 5,
         "half_x_m": 30, "half_y_m": 20, "heading_deg": -300.5, "corner_m": 4, "wall_m": 2},
        {"kind": "block", "lat_deg": 40, "lon_deg": -30, "height_m": 5, "half_x_m": 30,
         "half_y_m": 20, "heading_deg": 30, "corner_m": 4, "wall_m": 2},
    ],
}  # fmt: skip


def python_warnings(world: dict[str, Any]) -> list[str]:
    """The messages of Python's SpecDeprecationWarning for `world`, without "<source>: "."""
    from globemill.spec import SpecDeprecationWarning

    with pytest.warns(SpecDeprecationWarning) as record:
        parse_spec(world, source="S")
    assert all(str(w.message).startswith("S: ") for w in record)
    return [str(w.message)[3:] for w in record]


def test_world_warnings_are_the_python_deprecation_messages(api: Api) -> None:
    used = {(f["kind"], k) for f in OLD_KEYS_WORLD["features"] for k in f}
    table = {(k["kind"], rn["from"]) for k in SPEC_RULES["kinds"] for rn in k.get("renamed", [])}
    assert table and table <= used  # every old spelling the table still reads
    status, w, msg = api.world(json.dumps(OLD_KEYS_WORLD))
    assert status == OK, msg
    try:
        lines = api.warnings(w)
    finally:
        api.lib.gm_world_destroy(w)
    expected = python_warnings(OLD_KEYS_WORLD)
    assert lines == expected
    # one line per old key, in spec order, each naming its feature as Python does
    assert len(lines) == 1 + 1 + 3 + 3
    assert lines[1].startswith('features[2] ("Tor \\"Grey\\" \\\\ Öy"): wall_m is deprecated')
    # heading -300.5 counter-clockwise from east is bearing 90 - (-300.5) = 390.5, the same
    # direction as 390.5 - 360 = 30.5 clockwise from north
    assert "write bearing_deg = 30.5 (clockwise from north)" in lines[2]
    # a spec in the new spelling has none
    status, w, msg = api.world(json.dumps(coarse_demo()))
    assert status == OK, msg
    try:
        assert api.warnings(w) == []
    finally:
        api.lib.gm_world_destroy(w)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    heading=st.one_of(
        st.floats(-360.0, 360.0, allow_nan=False),
        st.sampled_from([89.9999, 89.9995, 90.0 - 1e-12, 89.99999, -270.0, 90.5, 12.25]),
    )
)
def test_converted_bearings_are_written_as_python_writes_them(api: Api, heading: float) -> None:
    world = copy.deepcopy(OLD_KEYS_WORLD)
    world["features"][3]["heading_deg"] = heading  # the block "Pen"
    status, w, msg = api.world(json.dumps(world))
    assert status == OK, msg
    try:
        assert api.warnings(w) == python_warnings(world)
    finally:
        api.lib.gm_world_destroy(w)


def test_world_warnings_size_query_cutting_and_bad_arguments(api: Api) -> None:
    status, w, msg = api.world(json.dumps(OLD_KEYS_WORLD))
    assert status == OK, msg
    try:
        full = "\n".join(api.warnings(w)).encode()
        n = C.c_size_t()
        err = Error()
        # a buffer too small: the text cut at a character boundary (never inside the two bytes
        # of "Ö"), NUL-terminated, and the full length told
        cut_at = full.index("Ö".encode()) + 1  # room up to the middle of Ö
        buf = C.create_string_buffer(b"#" * 64, cut_at + 1)
        assert (
            api.lib.gm_world_warnings(buf, C.c_size_t(cut_at + 1), C.byref(n), w, C.byref(err))
            == OK
        )
        assert n.value == len(full) and err.status == OK and err.message == b""
        assert buf.value == full[: cut_at - 1]
        buf.value.decode()  # whole characters only
        # a NULL world, or a NULL buffer with room claimed: refused, nothing written
        n = C.c_size_t(7)
        status = api.lib.gm_world_warnings(None, C.c_size_t(0), C.byref(n), None, C.byref(err))
        assert status == INVALID_ARGUMENT and "world is NULL" in err.message.decode()
        assert n.value == 7
        status = api.lib.gm_world_warnings(None, C.c_size_t(10), C.byref(n), w, C.byref(err))
        assert status == INVALID_ARGUMENT and n.value == 7
        # err may be NULL, the length pointer too
        assert api.lib.gm_world_warnings(None, C.c_size_t(0), None, w, None) == OK
    finally:
        api.lib.gm_world_destroy(w)


@pytest.mark.parametrize(
    "ratio", [0.0005, 1e-05, -0.0001, 0.25, 1.5e-07, 123.456, 1e22, 1.2345678901234567e17]
)
def test_numbers_in_messages_are_laid_out_as_python_repr(api: Api, ratio: float) -> None:
    # the core writes a number as Python's repr does (shortest round-trip digits; positional
    # for decimal exponents -4 .. 15, else 1e-05 / 1.5e+22), which std::to_chars alone does not
    # (it writes 0.0005 as 5e-04): messages then read the same from C and from Python
    status, w, msg = api.world(json.dumps(coarse_demo()))
    assert status == OK, msg
    try:
        status, b, msg = api.bake(w, ratio=ratio)
    finally:
        api.lib.gm_world_destroy(w)
    assert status == INVALID_ARGUMENT and b.value is None
    assert msg == f"ratio: must be > 1 and <= 16, got {ratio!r}"
