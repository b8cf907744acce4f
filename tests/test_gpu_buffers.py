"""GPU-ready buffers (src/globemill/gpu_buffers.py, csrc/cache_order.cpp, fetch_order.cpp,
cache_stats.cpp): the reorder keeps every triangle, vertex array and stitched border; the cache
figure agrees with meshoptimizer's (the reference library, Debian libmeshoptimizer2d, through
ctypes) and the order Forsyth's method gives is about as good as meshoptimizer's own."""

from __future__ import annotations

import ctypes
import ctypes.util
from pathlib import Path

import numpy as np
import pytest

import globemill
from globemill import _core
from globemill.gpu_buffers import draw_buffers, misses

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "examples" / "pebblemoor.toml"


@pytest.fixture(scope="module")
def demo() -> globemill.BakeResult:
    return globemill.bake(globemill.load_spec(DEMO), tolerance_m=2.0)


def grid(n: int) -> np.ndarray:
    """An n x n grid of quads as triangles, row by row (the order a naive mesher writes)."""
    idx = np.arange((n + 1) * (n + 1)).reshape(n + 1, n + 1)
    a, b, c, d = idx[:-1, :-1], idx[:-1, 1:], idx[1:, :-1], idx[1:, 1:]
    t = np.stack([np.stack([a, c, b], -1), np.stack([b, c, d], -1)], axis=2)
    return t.reshape(-1, 3).astype(np.uint32)


# ---- the FIFO cache count, worked by hand ------------------------------------------------------


def test_fifo_misses_by_hand() -> None:
    # one triangle: three misses; the same triangle again: none (all three still cached)
    assert misses(np.array([[0, 1, 2]]), 3, 16) == 3
    assert misses(np.array([[0, 1, 2], [2, 1, 0]]), 3, 16) == 3
    # a cache of 3 entries fed 0 1 2 | 3 1 2 | 0 ...: 3 pushes 0 out (FIFO: the hits on 1 and 2
    # do not refresh them), so 0 misses again, pushing out 1
    tris = np.array([[0, 1, 2], [3, 1, 2], [0, 1, 3]])
    assert misses(tris, 4, 3) == 3 + 1 + 2
    with pytest.raises(ValueError, match="vertex_count"):
        misses(np.array([[0, 1, 5]]), 3, 16)


def test_cache_order_keeps_every_triangle_and_its_winding() -> None:
    tris = grid(40)
    out = _core.cache_order(tris, int(tris.max()) + 1)

    def canon(t: np.ndarray) -> set[tuple[int, ...]]:
        # a triangle up to rotation of its corners (same winding)
        r = np.argmin(t, axis=1)
        rolled = np.stack([np.roll(row, -k) for row, k in zip(t, r, strict=True)])
        return set(map(tuple, rolled.tolist()))

    assert len(out) == len(tris) and canon(out) == canon(tris)
    # every triangle keeps its corners in the same order as given (rows are permuted only)
    assert {tuple(r) for r in out.tolist()} == {tuple(r) for r in tris.tolist()}
    np.testing.assert_array_equal(out, _core.cache_order(tris, int(tris.max()) + 1))


def test_fetch_order_is_first_use() -> None:
    remap, used = _core.fetch_order(np.array([4, 2, 4, 0], np.uint32), 6)
    # 4 first, then 2, then 0; 1, 3, 5 unused follow in their old order
    assert used == 3
    assert remap.tolist() == [2, 3, 1, 4, 0, 5]


# ---- the reorder of a chunk keeps everything consistent --------------------------------------


def test_draw_buffers_permute_every_array_alike(demo: globemill.BakeResult) -> None:
    checked = 0
    for lv in demo.levels:
        for ch in lv.chunks[::6]:
            d = draw_buffers(ch)
            o = d.order
            assert sorted(o.tolist()) == list(range(len(ch.positions)))
            for name in ("positions", "normals", "morph", "slope_deg", "altitude_m", "layer"):
                np.testing.assert_array_equal(getattr(d, name), getattr(ch, name)[o])
            np.testing.assert_array_equal(d.color, ch.color[o])

            def as_old(t: np.ndarray, o: np.ndarray = o) -> set[tuple[int, ...]]:
                return set(map(tuple, o[t].tolist()))

            # the groups the seam lookup relies on stay where they were, each reordered alone
            i = ch.interior
            assert d.interior == i and d.skirt == len(ch.skirt)
            assert as_old(d.triangles[:i]) == set(map(tuple, ch.triangles[:i].tolist()))
            n = len(ch.triangles)
            assert as_old(d.triangles[i:n]) == set(map(tuple, ch.triangles[i:].tolist()))
            assert as_old(d.triangles[n:]) == set(map(tuple, ch.skirt.tolist()))
            assert set(d.stitched) == set(ch.stitched)
            for mask, t in ch.stitched.items():
                assert as_old(d.stitched[mask]) == set(map(tuple, t.tolist()))
            # vertices in order of first use: the first use of each new index is increasing
            flat = d.triangles.reshape(-1)
            _, first = np.unique(flat, return_index=True)
            assert np.all(np.diff(flat[np.sort(first)].astype(np.int64)) == 1)
            checked += 1
    assert checked > 0


def test_gpu_order_lowers_the_miss_ratio(demo: globemill.BakeResult) -> None:
    before = after = tris = 0
    for lv in demo.levels:
        for ch in lv.chunks:
            d = draw_buffers(ch)
            before += misses(ch.triangles, len(ch.positions), 32)
            after += misses(d.triangles[: len(ch.triangles)], len(d.positions), 32)
            tris += len(ch.triangles)
    # a regular triangulation has about 2 triangles per vertex, so a perfect cache approaches
    # 0.5 misses per triangle; meshoptimizer's and Forsyth's reports give 0.6-0.7 on such meshes
    assert after / tris < 0.75 < before / tris


# ---- the reference library: meshoptimizer ----------------------------------------------------


class CacheStats(ctypes.Structure):
    # meshoptimizer.h (0.18): struct meshopt_VertexCacheStatistics
    _fields_ = [
        ("vertices_transformed", ctypes.c_uint),
        ("warps_executed", ctypes.c_uint),
        ("acmr", ctypes.c_float),
        ("atvr", ctypes.c_float),
    ]


@pytest.fixture(scope="module")
def meshopt() -> ctypes.CDLL:
    name = ctypes.util.find_library("meshoptimizer") or "libmeshoptimizer.so.2d"
    try:
        lib = ctypes.CDLL(name)
    except OSError:
        pytest.skip("meshoptimizer not installed (Debian libmeshoptimizer2d; .ci/run installs it)")
    lib.meshopt_analyzeVertexCache.restype = CacheStats
    lib.meshopt_analyzeVertexCache.argtypes = [
        ctypes.c_void_p,
        ctypes.c_size_t,
        ctypes.c_size_t,
        ctypes.c_uint,
        ctypes.c_uint,
        ctypes.c_uint,
    ]
    lib.meshopt_optimizeVertexCache.restype = None
    lib.meshopt_optimizeVertexCache.argtypes = [ctypes.c_void_p] * 2 + [ctypes.c_size_t] * 2
    return lib


def reference_misses(lib: ctypes.CDLL, tris: np.ndarray, n: int, cache: int) -> int:
    flat = np.ascontiguousarray(tris, dtype=np.uint32).reshape(-1)
    # warp size 0 and primitive group size 0: a plain FIFO cache of `cache` entries
    st = lib.meshopt_analyzeVertexCache(flat.ctypes.data, flat.size, n, cache, 0, 0)
    return int(st.vertices_transformed)


def reference_order(lib: ctypes.CDLL, tris: np.ndarray, n: int) -> np.ndarray:
    flat = np.ascontiguousarray(tris, dtype=np.uint32).reshape(-1)
    out = np.empty_like(flat)
    lib.meshopt_optimizeVertexCache(out.ctypes.data, flat.ctypes.data, flat.size, n)
    return out.reshape(-1, 3)


def test_miss_count_agrees_with_meshoptimizer(
    meshopt: ctypes.CDLL, demo: globemill.BakeResult
) -> None:
    cases = [(grid(30), 31 * 31)]
    for lv in demo.levels:
        for ch in lv.chunks[::9]:
            d = draw_buffers(ch)
            cases += [(ch.triangles, len(ch.positions)), (d.triangles, len(d.positions))]
    for tris, n in cases:
        for cache in (16, 32):
            assert misses(tris, n, cache) == reference_misses(meshopt, tris, n, cache)


def test_forsyth_order_is_as_good_as_meshoptimizers(
    meshopt: ctypes.CDLL, demo: globemill.BakeResult
) -> None:
    # per level, over every chunk's interior: within 5 % of meshoptimizer's own cache order
    # (its optimizeVertexCache, a tuned descendant of Forsyth's method) at 16 and 32 entries
    for lv in demo.levels:
        ours = {16: 0, 32: 0}
        theirs = {16: 0, 32: 0}
        for ch in lv.chunks:
            n = len(ch.positions)
            inner = np.ascontiguousarray(ch.triangles[: ch.interior])
            if len(inner) < 2:
                continue
            mine = _core.cache_order(inner, n)
            ref = reference_order(meshopt, inner, n)
            for cache in (16, 32):
                ours[cache] += misses(mine, n, cache)
                theirs[cache] += reference_misses(meshopt, ref, n, cache)
        for cache in (16, 32):
            assert ours[cache] <= 1.05 * theirs[cache], (lv.level, cache, ours, theirs)
