"""GPU-ready buffers of one chunk and level, as the .glb stores them: triangles in vertex cache
order and vertices in fetch order, every per-vertex array and every stitched border permuted alike.

The C++ core makes the orders (csrc/cache_order.cpp: Forsyth's "Linear-Speed Vertex Cache
Optimisation", 2006; csrc/fetch_order.cpp: first use) and counts cache misses
(csrc/cache_stats.cpp, a FIFO cache); here the chunk's arrays are only permuted, never recomputed.
The groups the seam lookup relies on stay where docs/gltf.md puts them: the interior triangles
first, then the border, then skirts; each group and each stitched border is ordered on its own.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from . import _core
from .bake import ChunkMesh

U32 = npt.NDArray[np.uint32]
F64 = npt.NDArray[np.float64]

# FIFO cache sizes the ACMR figure is reported for (common practice: 16 and 32 entries)
CACHE_SIZES = (16, 32)


@dataclass
class DrawBuffers:
    """One chunk level ready to draw.

    order : (n,) uint32, the ChunkMesh vertex behind each vertex here (new -> old)
    positions, normals, morph : (n, 3) float64; slope_deg, altitude_m : (n,) float64;
    layer : (n,) uint8; color : (n, 3) float64 (the ChunkMesh's, permuted by `order`)
    triangles : (t, 3) uint32 interior, then border, then the `skirt` skirt triangles
    interior : int; skirt : int; stitched : {mask: (s, 3) uint32}
    """

    order: U32
    positions: F64
    normals: F64
    morph: F64
    slope_deg: F64
    altitude_m: F64
    layer: npt.NDArray[np.uint8]
    color: F64
    triangles: U32
    interior: int
    skirt: int
    stitched: dict[int, U32]


def _cached(tris: U32, n: int) -> U32:
    if len(tris) < 2:
        return np.ascontiguousarray(tris, dtype=np.uint32)
    return _core.cache_order(np.ascontiguousarray(tris, dtype=np.uint32), n)


def draw_buffers(ch: ChunkMesh, *, optimize: bool = True) -> DrawBuffers:
    """`ch` as the .glb writes it: with `optimize`, each triangle group (interior, border, skirt,
    every stitched border) in vertex cache order and the vertices in order of first use over
    interior, border, skirt and the stitched borders by mask; else as the core made it."""
    n = len(ch.positions)
    groups = [ch.triangles[: ch.interior], ch.triangles[ch.interior :], ch.skirt]
    stitched = dict(sorted(ch.stitched.items()))
    if optimize:
        groups = [_cached(g, n) for g in groups]
        stitched = {m: _cached(t, n) for m, t in stitched.items()}
        drawn = np.concatenate([g.reshape(-1) for g in (*groups, *stitched.values())])
        remap, _ = _core.fetch_order(drawn.astype(np.uint32), n)
        order = np.empty(n, np.uint32)
        order[remap] = np.arange(n, dtype=np.uint32)
        groups = [remap[g] for g in groups]
        stitched = {m: remap[t] for m, t in stitched.items()}
    else:
        order = np.arange(n, dtype=np.uint32)
    return DrawBuffers(
        order=order,
        positions=ch.positions[order],
        normals=ch.normals[order],
        morph=ch.morph[order],
        slope_deg=ch.slope_deg[order],
        altitude_m=ch.altitude_m[order],
        layer=ch.layer[order],
        color=ch.color[order],
        triangles=np.concatenate(groups).astype(np.uint32).reshape(-1, 3),
        interior=ch.interior,
        skirt=len(ch.skirt),
        stitched=stitched,
    )


def misses(triangles: U32, vertex_count: int, cache_size: int) -> int:
    """Vertices a FIFO post-transform cache of `cache_size` entries transforms drawing
    `triangles` ((t, 3) uint32); ACMR = misses / t."""
    flat = np.ascontiguousarray(triangles, dtype=np.uint32).reshape(-1)
    return int(_core.fifo_misses(flat, vertex_count, cache_size))
