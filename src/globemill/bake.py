"""Bake a world: every level of detail and chunk, seams, morph targets and colliders, all from one
bisection hierarchy built in the C++ core, measured a posteriori."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from dataclasses import field as dc_field
from typing import Any

import numpy as np
import numpy.typing as npt

from . import _core
from .field import Field
from .spec import WorldSpec

OFFSET_MODES = {"radial": 0, "normal": 1, "exact": 2}
# a posteriori verification: a barycentric grid of this order on every triangle
# ((k+1)(k+2)/2 samples), exact projection onto the surface; triangles found beyond the
# tolerance are split until none is
MEASURE_ORDER = 4
# the guaranteed smallest angle of any triangle of directions (the mesh projected onto the unit
# sphere): newest-vertex bisection keeps three planar shape classes with angles >= 30 degrees
# (Mitchell 1989); projecting the first, large triangles onto the sphere bends that to 24.6
MIN_ANGLE_DEG = 24.0
# critical tolerances are computed exactly up to this many times the coarsest tolerance asked
# for, so a raised collider tolerance still finds them
TAU_HEADROOM = 8.0

Progress = Callable[[int, int], None]
U32 = npt.NDArray[np.uint32]
F64 = npt.NDArray[np.float64]


@dataclass
class ChunkMesh:
    """One chunk at one level, with its own vertex buffer.

    vertex_ids : (n,) uint32 ids into BakeResult.vertices (ascending)
    positions : (n, 3) float64; normals : (n, 3) float64 unit
    morph : (n, 3) float64 positions on the next coarser level (equal to positions on the
        coarsest level and for vertices the coarser level keeps)
    triangles : (t, 3) uint32 local indices, counter-clockwise from outside; the first
        `interior` triangles never change, the rest are the border
    stitched : {mask: (s, 3) uint32 local} border to draw instead when the neighbours across the
        chunk edges in `mask` (bit i: edge i, opposite corner i) are one level coarser
    skirt : (k, 3) uint32 local skirt triangles (vertices appended after the surface ones), or
        empty when seams are stitched
    """

    chunk: int
    level: int
    vertex_ids: U32
    positions: F64
    normals: F64
    morph: F64
    triangles: U32
    interior: int
    stitched: dict[int, U32]
    skirt: U32


@dataclass
class LevelResult:
    """One level of detail over the whole world.

    triangles : (T, 3) uint32 ids into BakeResult.vertices, grouped by chunk
    chunk : (T,) uint32 chunk of each triangle; errors : (T,) float32 measured deviation (m)
    morph : (V, 3) float64 every vertex's position on the next coarser level
    present : (V,) bool vertices this level uses
    """

    level: int
    tolerance_m: float
    triangles: U32
    chunk: U32
    errors: npt.NDArray[np.float32]
    morph: F64
    present: npt.NDArray[np.bool_]
    chunks: list[ChunkMesh]
    report: dict[str, Any]


@dataclass
class Collider:
    """Collision mesh of one chunk: positions (n, 3) float64, triangles (t, 3) uint32 local."""

    chunk: int
    positions: F64
    triangles: U32


@dataclass
class BakeResult:
    """The baked ground of one world.

    vertices : (V, 3) float64 metres, planet centre at the origin, Y up (every level's vertices)
    directions : (V, 3) float64 unit directions of the vertices
    normals : (V, 3) float64 analytic unit normals of the true surface at the vertices
    levels : finest first; chunk_corners / chunk_neighbors : (C, 3) uint32
    triangles, errors : level 0's, for convenience
    """

    spec: WorldSpec
    vertices: F64
    directions: F64
    normals: F64
    levels: list[LevelResult]
    colliders: list[Collider]
    chunk_corners: U32
    chunk_neighbors: U32
    report: dict[str, Any] = dc_field(default_factory=dict)

    @property
    def triangles(self) -> U32:
        """Level 0's triangles, ids into `vertices` (which also holds other levels' vertices)."""
        return self.levels[0].triangles

    @property
    def errors(self) -> npt.NDArray[np.float32]:
        return self.levels[0].errors

    def mesh(self, level: int = 0) -> tuple[F64, U32]:
        """One level as a welded mesh of its own: (V_k, 3) float64 positions and (T_k, 3) uint32
        triangles indexing them (vertices in ascending global order)."""
        lv = self.levels[level]
        ids = np.flatnonzero(lv.present)
        remap = np.zeros(len(self.vertices), np.uint32)
        remap[ids] = np.arange(len(ids), dtype=np.uint32)
        return self.vertices[ids], remap[lv.triangles]


def _validate_options(
    tolerance_m: float, offset: str, threads: int, radius_m: float, levels: int, ratio: float
) -> None:
    if not isinstance(tolerance_m, (int, float)) or not np.isfinite(tolerance_m):
        raise ValueError(
            "tolerance_m: must be a finite number (allowed: > 0 and <= radius_m/10), "
            f"got {tolerance_m!r}"
        )
    if not (0 < tolerance_m <= radius_m / 10):
        raise ValueError(
            f"tolerance_m: must be > 0 and <= radius_m/10 = {radius_m / 10:g}, got {tolerance_m:g}"
        )
    if offset not in OFFSET_MODES:
        raise ValueError(f"offset: must be one of {', '.join(OFFSET_MODES)}, got {offset!r}")
    if not isinstance(threads, int) or threads < 0 or threads > 1024:
        raise ValueError(f"threads: must be an integer in 0..1024 (0 = all cores), got {threads!r}")
    if not isinstance(levels, int) or not 1 <= levels <= 12:
        raise ValueError(f"levels: must be an integer in 1..12, got {levels!r}")
    if not isinstance(ratio, (int, float)) or not (1 < ratio <= 16):
        raise ValueError(f"ratio: must be > 1 and <= 16, got {ratio!r}")


def _chunk_pieces(
    tris: U32, chunk: U32, nchunks: int, only: list[int] | None = None
) -> dict[int, tuple[U32, U32]]:
    """Per chunk (all, or those in `only`): its vertex ids (ascending, into the global buffer) and
    its triangles in local indices. tris (T, 3) global ids grouped by chunk; chunk (T,)
    ascending."""
    starts = np.searchsorted(chunk, np.arange(nchunks + 1))
    out = {}
    for c in range(nchunks) if only is None else only:
        t = tris[starts[c] : starts[c + 1]]
        ids = np.unique(t).astype(np.uint32)
        out[c] = (ids, np.searchsorted(ids, t).astype(np.uint32))
    return out


def _split_chunks(
    level: int,
    lv: dict[str, Any],
    vertices: F64,
    normals: F64,
    nchunks: int,
    skirt_depth: float | None,
    only: list[int] | None = None,
) -> dict[int, ChunkMesh]:
    offs = lv["stitch_offsets"]
    stitch = lv["stitch"]
    out = {}
    for c, (ids, local) in _chunk_pieces(lv["triangles"], lv["chunk"], nchunks, only).items():
        stitched: dict[int, U32] = {}
        for mask in range(1, 8):
            a, b = int(offs[c * 8 + mask]), int(offs[c * 8 + mask + 1])
            if b > a:
                stitched[mask] = np.searchsorted(ids, stitch[a:b]).astype(np.uint32)
        pos = vertices[ids]
        nrm = normals[ids]
        morph = lv["morph"][ids]
        skirt = np.zeros((0, 3), np.uint32)
        if skirt_depth is not None:
            pos, nrm, morph, skirt = _add_skirt(local, pos, nrm, morph, skirt_depth)
        out[c] = ChunkMesh(
            chunk=c,
            level=level,
            vertex_ids=ids,
            positions=pos,
            normals=nrm,
            morph=morph,
            triangles=local,
            interior=int(lv["interior"][c]),
            stitched=stitched,
            skirt=skirt,
        )
    return out


def _add_skirt(
    tris: U32, pos: F64, nrm: F64, morph: F64, depth: float
) -> tuple[F64, F64, F64, U32]:
    """Skirts: every boundary edge of the chunk gets a quad hanging `depth` metres down, wound
    as the continuation of the chunk's surface across that edge."""
    e = np.concatenate([tris[:, [0, 1]], tris[:, [1, 2]], tris[:, [2, 0]]])
    key = np.minimum(e[:, 0], e[:, 1]).astype(np.uint64) << np.uint64(32) | np.maximum(
        e[:, 0], e[:, 1]
    ).astype(np.uint64)
    uniq, inv, counts = np.unique(key, return_inverse=True, return_counts=True)
    boundary = e[counts[inv] == 1]
    if len(boundary) == 0:
        return pos, nrm, morph, np.zeros((0, 3), np.uint32)
    verts = np.unique(boundary)
    n = len(pos)
    low = {int(v): n + i for i, v in enumerate(verts)}
    r = np.linalg.norm(pos[verts], axis=1, keepdims=True)
    lowered = pos[verts] * (r - depth) / r
    rm = np.linalg.norm(morph[verts], axis=1, keepdims=True)
    lowered_m = morph[verts] * (rm - depth) / rm
    a, b = boundary[:, 0], boundary[:, 1]
    la = np.array([low[int(x)] for x in a], np.uint32)
    lb = np.array([low[int(x)] for x in b], np.uint32)
    skirt = np.concatenate([np.stack([b, a, la], 1), np.stack([b, la, lb], 1)]).astype(np.uint32)
    return (
        np.concatenate([pos, lowered]),
        np.concatenate([nrm, nrm[verts]]),
        np.concatenate([morph, lowered_m]),
        skirt,
    )


def _bias_vertices(fld: Field, vertices: F64, tris: U32, limit: float) -> F64:
    """Move each collider vertex along its direction by half the mean signed gap (surface minus
    collider, radially, at the centroids of its triangles): the collider then straddles the true
    surface instead of lying under its bumps and over its hollows. Shifts are clipped to
    `limit` metres (steep ground makes radial gaps large)."""
    p = vertices[tris]  # (T, 3, 3)
    samples = [p.mean(axis=1)] + [(p[:, i] + p[:, (i + 1) % 3]) / 2 for i in range(3)]
    gaps = []
    for s in samples:
        r = np.linalg.norm(s, axis=1)
        gaps.append(fld.radius_m + fld.height(s) - r)
    gap = np.mean(gaps, axis=0)
    acc = np.zeros(len(vertices))
    cnt = np.zeros(len(vertices))
    for k in range(3):
        np.add.at(acc, tris[:, k], gap)
        np.add.at(cnt, tris[:, k], 1)
    shift = np.clip(np.where(cnt > 0, 0.5 * acc / np.maximum(cnt, 1), 0.0), -limit, limit)
    r = np.linalg.norm(vertices, axis=1)
    return vertices * ((r + shift) / r)[:, None]


@dataclass(frozen=True)
class _Plan:
    """The resolved options of one bake."""

    tolerance_m: float
    offset: str
    tolerances: list[float]
    chunk_level: int
    collision_m: float
    stitch: bool
    skirt_depth: float | None
    collision: bool
    threads: int

    @property
    def finest(self) -> float:
        return min(self.tolerance_m, self.collision_m)

    @property
    def tau_cap(self) -> float:
        return TAU_HEADROOM * max(self.tolerances[-1], self.collision_m)


def _plan(
    spec: WorldSpec,
    tolerance_m: float | None,
    offset: str | None,
    levels: int | None,
    ratio: float | None,
    chunk_level: int | None,
    collision: bool,
    threads: int,
) -> _Plan:
    tol = float(spec.tolerance_m if tolerance_m is None else tolerance_m)
    mode = spec.offset if offset is None else offset
    nlev = spec.lod.levels if levels is None else levels
    rat = float(spec.lod.ratio if ratio is None else ratio)
    clev = spec.lod.chunk_level if chunk_level is None else chunk_level
    _validate_options(tol, mode, threads, spec.radius_m, nlev, rat)
    if not isinstance(clev, int) or not 0 <= clev <= 5:
        raise ValueError(f"chunk_level: must be an integer in 0..5, got {clev!r}")
    if 20 * 4**clev > spec.max_triangles:
        raise ValueError(
            f"chunk_level: {clev} makes {20 * 4**clev} chunks, more than "
            f"max_triangles={spec.max_triangles}"
        )
    tolerances = [tol * rat**k for k in range(nlev)]
    col_tol = (
        float(spec.collision.tolerance_m) if spec.collision.tolerance_m is not None else 4.0 * tol
    )
    stitch = spec.lod.seams == "stitch"
    skirt_depth = None
    if not stitch:
        skirt_depth = spec.lod.skirt_depth_m or 2.0 * tolerances[-1]
    return _Plan(tol, mode, tolerances, clev, col_tol, stitch, skirt_depth, collision, threads)


def _hierarchy(fld: Field, spec: WorldSpec, plan: _Plan, progress: Progress | None) -> Any:
    return _core.Hierarchy(
        fld._core,
        plan.finest,
        OFFSET_MODES[plan.offset],
        int(spec.max_triangles),
        plan.threads,
        MEASURE_ORDER,
        plan.chunk_level,
        plan.tau_cap,
        progress,
    )


def _level_results(
    plan: _Plan,
    ext: dict[str, Any],
    vertices: F64,
    normals: F64,
    nchunks: int,
    seconds: tuple[float, float],
    reuse: Callable[[int, dict[str, Any]], dict[int, ChunkMesh]] | None = None,
) -> list[LevelResult]:
    """Every level with its chunks. `reuse(level, lv)` may hand back chunks known to be
    unchanged; the others are cut from the level's arrays."""
    t_build, t_extract = seconds
    out: list[LevelResult] = []
    for k, lv in enumerate(ext["levels"]):
        present = lv["present"].astype(bool)
        kept = reuse(k, lv) if reuse is not None else {}
        todo = [c for c in range(nchunks) if c not in kept]
        made = _split_chunks(k, lv, vertices, normals, nchunks, plan.skirt_depth, todo)
        chunks = [kept[c] if c in kept else made[c] for c in range(nchunks)]
        rep = {
            "level": k,
            "tolerance_m": lv["tolerance_m"],
            "chunks": nchunks,
            "vertices": int(present.sum()),
            "triangles": int(len(lv["triangles"])),
            "max_error_m": float(lv["max_error_m"]),
            "mesh_to_surface_m": float(lv["mesh_to_surface_m"]),
            "surface_to_mesh_m": float(lv["surface_to_mesh_m"]),
            "repaired": int(lv["repaired"]),
            "stitch_failures": int(lv["stitch_failures"]),
            "seconds": (t_build if k == 0 else 0.0) + t_extract / len(plan.tolerances),
        }
        out.append(
            LevelResult(
                level=k,
                tolerance_m=float(lv["tolerance_m"]),
                triangles=lv["triangles"],
                chunk=lv["chunk"],
                errors=lv["errors"],
                morph=lv["morph"],
                present=present,
                chunks=chunks,
                report=rep,
            )
        )
    return out


def _report(
    spec: WorldSpec,
    plan: _Plan,
    hier: Any,
    levels: list[LevelResult],
    col_report: dict[str, Any] | None,
    total: float,
) -> dict[str, Any]:
    return {
        "planet": spec.name,
        "radius_m": spec.radius_m,
        "tolerance_m": plan.tolerance_m,
        "offset": plan.offset,
        "chunk_level": plan.chunk_level,
        "seams": spec.lod.seams,
        "lods": [lr.report for lr in levels],
        "collision": col_report,
        "refine": dict(hier.stats()),
        "seconds_total": total,
    }


def bake(
    spec: WorldSpec,
    *,
    tolerance_m: float | None = None,
    offset: str | None = None,
    levels: int | None = None,
    ratio: float | None = None,
    chunk_level: int | None = None,
    collision: bool = True,
    threads: int = 0,
    progress: Progress | None = None,
) -> BakeResult:
    """Mesh `spec` to within `tolerance_m` (default: the spec's) of the true surface, with every
    level of detail (tolerance_m * ratio^k), chunk, stitched seam and collider.

    The result is deterministic: the same spec gives the same arrays whatever `threads` is.
    `progress(round, triangles)` is called between refinement rounds.
    Raises ValueError for bad options or a tolerance that would exceed `spec.max_triangles`.
    """
    plan = _plan(spec, tolerance_m, offset, levels, ratio, chunk_level, collision, threads)
    t0 = time.perf_counter()
    fld = Field(spec)
    hier = _hierarchy(fld, spec, plan, progress)
    vertices, directions, _parents = hier.vertices()
    normals = fld.normals(directions)
    t1 = time.perf_counter()
    ext = hier.extract(plan.tolerances, plan.stitch)
    t_extract = time.perf_counter() - t1
    return _assemble(spec, plan, fld, hier, ext, (vertices, directions, normals), t0, t_extract)


def _assemble(
    spec: WorldSpec,
    plan: _Plan,
    fld: Field,
    hier: Any,
    ext: dict[str, Any],
    verts: tuple[F64, F64, F64],
    t0: float,
    t_extract: float,
    reuse: Callable[[int, dict[str, Any]], dict[int, ChunkMesh]] | None = None,
) -> BakeResult:
    """The result of a bake from its hierarchy and extracted levels: chunks (those `reuse`
    hands back are kept as they are), colliders and the report. t0: when the bake began."""
    vertices, directions, normals = verts
    nchunks = hier.chunk_count
    t_build = float(hier.stats()["refine_seconds"] + hier.stats()["verify_seconds"])
    level_results = _level_results(
        plan, ext, vertices, normals, nchunks, (t_build, t_extract), reuse
    )
    colliders: list[Collider] = []
    col_report: dict[str, Any] | None = None
    if plan.collision:
        colliders, col_report = _colliders(
            spec, fld, hier, vertices, plan.collision_m, nchunks, plan.threads
        )
    return BakeResult(
        spec=spec,
        vertices=vertices,
        directions=directions,
        normals=normals,
        levels=level_results,
        colliders=colliders,
        chunk_corners=ext["chunks"]["corners"],
        chunk_neighbors=ext["chunks"]["neighbors"],
        report=_report(spec, plan, hier, level_results, col_report, time.perf_counter() - t0),
    )


def _colliders(
    spec: WorldSpec,
    fld: Field,
    hier: Any,
    vertices: F64,
    tolerance: float,
    nchunks: int,
    threads: int,
) -> tuple[list[Collider], dict[str, Any]]:
    """One collider per chunk at the collision tolerance, raised until every chunk fits the cap."""
    t0 = time.perf_counter()
    cap = spec.collision.max_triangles_per_chunk
    centered = spec.collision.bias == "centered"
    tol = tolerance
    while True:
        # with the bias, mesh a third tighter and move vertices by at most a third: the
        # collider stays within the tolerance on both sides
        lv = hier.extract([tol / 1.5 if centered else tol], False)["levels"][0]
        counts = np.bincount(lv["chunk"], minlength=nchunks)
        if counts.max() <= cap:
            break
        if tol > spec.radius_m / 4:
            raise ValueError(
                f"collision.max_triangles_per_chunk: {cap} cannot be met (a chunk needs "
                f"{int(counts.max())} triangles even at tolerance {tol:g} m); raise it or "
                "lod.chunk_level"
            )
        tol *= 1.25
    tris = lv["triangles"]
    pos = vertices
    if centered:
        pos = _bias_vertices(fld, vertices, tris, limit=tol / 3)
    dev = _core.measure(fld._core, pos, tris, MEASURE_ORDER, threads)
    out = [
        Collider(c, pos[ids], local)
        for c, (ids, local) in _chunk_pieces(tris, lv["chunk"], nchunks).items()
    ]
    p = pos[tris]
    area2 = np.linalg.norm(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), axis=1)
    angles = []
    for k in range(3):
        a = p[:, (k + 1) % 3] - p[:, k]
        b = p[:, (k + 2) % 3] - p[:, k]
        cos = np.einsum("ij,ij->i", a, b) / (np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1))
        angles.append(np.degrees(np.arccos(np.clip(cos, -1, 1))))
    report = {
        "tolerance_m": tol,
        "requested_tolerance_m": tolerance,
        "triangles": int(len(tris)),
        "max_triangles_per_chunk": int(counts.max()),
        "max_error_m": float(dev["max_m"]),
        "mesh_to_surface_m": float(dev["mesh_to_surface_m"]),
        "surface_to_mesh_m": float(dev["surface_to_mesh_m"]),
        "bias": spec.collision.bias,
        "min_angle_deg": float(np.min(angles)) if len(tris) else 0.0,
        "degenerate_triangles": int(np.sum(area2 <= 1e-12 * spec.radius_m**2)),
        "seconds": time.perf_counter() - t0,
    }
    return out, report
