"""Bake a world: every level of detail and chunk, seams, skirts, morph targets, vertex attributes
and colliders, all made by the C++ core from one bisection hierarchy and measured a posteriori. This
module only maps the spec to the core's settings and wraps the core's arrays (read-only numpy views,
no copies) in dataclasses; it computes nothing itself."""

from __future__ import annotations

import contextlib
import dataclasses
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from dataclasses import field as dc_field
from typing import Any

import numpy as np
import numpy.typing as npt

from . import _core
from .attributes import layer_rows
from .field import Field
from .spec import WorldSpec

OFFSET_MODES = {"radial": 0, "normal": 1, "exact": 2}
SEAM_MODES = ("stitch", "skirt")
# the core's constants (csrc/bake.hpp), read from it
MEASURE_ORDER: int = _core.MEASURE_ORDER
MIN_ANGLE_DEG: float = _core.MIN_ANGLE_DEG
# what the collider angle pass aims for (the report's collision.min_angle_deg: what it reached)
COLLIDER_MIN_ANGLE_DEG: float = _core.COLLIDER_MIN_ANGLE_DEG
NO_LAYER: int = _core.NO_LAYER

Progress = Callable[[str, int, int], None]
"""progress(stage, done, total), called on the calling thread, stages in this order: "refine"
(leaf triangles so far, of about total), "verify" (triangles measured), "levels" and "seams"
(levels cut, levels stitched), "chunks" (levels whose chunk buffers are made), "colliders" (steps
done of 5: the cut, the angle pass, the bias, the angle pass again, the measure);
`output.write_outputs` adds "write" (chunk levels prepared, then the files).
`globemill.progress.BakeProgress` turns these into one fraction of the whole."""
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
    slope_deg, altitude_m : (n,) float64; layer : (n,) uint8 (NO_LAYER: no rule holds it);
    color : (n, 3) float64 linear RGB. A skirt vertex carries its top vertex's normal and
        attributes (the ground it hangs from).

    Every array is a read-only view of the core's buffer; an edit session shares the buffers of
    chunks that did not change.
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
    slope_deg: F64
    altitude_m: F64
    layer: npt.NDArray[np.uint8]
    color: F64


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
    slope_deg, altitude_m : (V,) float64; layer : (V,) uint8; color : (V, 3) float64 linear RGB
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
    slope_deg: F64
    altitude_m: F64
    layer: npt.NDArray[np.uint8]
    color: F64
    report: dict[str, Any] = dc_field(default_factory=dict)
    # the core chunk buffer behind each ChunkMesh (an edit session keeps unchanged ones)
    _chunk_tokens: dict[int, ChunkMesh] = dc_field(default_factory=dict, repr=False, compare=False)

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


def settings(
    spec: WorldSpec,
    *,
    tolerance_m: float | None = None,
    offset: str | None = None,
    levels: int | None = None,
    ratio: float | None = None,
    chunk_level: int | None = None,
    seams: str | None = None,
    collision: bool = True,
    threads: int = 0,
    accept_over_tolerance: bool = False,
) -> dict[str, Any]:
    """The core's bake settings for `spec` with the given overrides (None: the spec's). The core
    checks every range (csrc/bake.cpp, check_settings); here only the types are checked."""
    mode = spec.offset if offset is None else offset
    if mode not in OFFSET_MODES:
        raise ValueError(f"offset: must be one of {', '.join(OFFSET_MODES)}, got {mode!r}")
    seam = spec.lod.seams if seams is None else seams
    _check_seams(seam)
    _check_collision(collision)
    tol = spec.tolerance_m if tolerance_m is None else tolerance_m
    rat = spec.lod.ratio if ratio is None else ratio
    for name, value in (("tolerance_m", tol), ("ratio", rat)):
        _check_number(name, value)
    values = {
        "levels": spec.lod.levels if levels is None else levels,
        "chunk_level": spec.lod.chunk_level if chunk_level is None else chunk_level,
        "threads": threads,
    }
    for name, value in values.items():
        _check_integer(name, value)
    col = spec.collision
    return {
        "radius_m": float(spec.radius_m),
        "tolerance_m": float(tol),
        "offset": OFFSET_MODES[mode],
        "ratio": float(rat),
        **values,
        "max_triangles": int(spec.max_triangles),
        "stitch": seam == "stitch",
        "skirt_depth_m": float(spec.lod.skirt_depth_m),
        "collision": bool(collision),
        "collision_tolerance_m": float(col.tolerance_m or 0.0),
        "collision_centered": col.bias == "centered",
        "collider_cap": int(col.max_triangles_per_chunk),
        "accept_over_tolerance": bool(accept_over_tolerance),
        "layers": layer_rows(spec.layers),
    }


def _check_number(name: str, value: Any) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ValueError(f"{name}: must be a number, got {value!r}")


def _check_integer(name: str, value: Any) -> None:
    if isinstance(value, bool) or not isinstance(value, int) or not -(2**31) < value < 2**31:
        raise ValueError(f"{name}: must be an integer, got {value!r}")


def _check_seams(value: Any) -> None:
    if value not in SEAM_MODES:
        raise ValueError(f"seams: must be one of {', '.join(SEAM_MODES)}, got {value!r}")


def _check_collision(value: Any) -> None:
    if not isinstance(value, bool):
        raise ValueError(f"collision: must be true or false, got {value!r}")


def check_overrides(
    *,
    levels: int | None = None,
    ratio: float | None = None,
    chunk_level: int | None = None,
    seams: str | None = None,
    collision: bool = True,
) -> None:
    """Raise ValueError, naming the option and its allowed range, for an override of the level
    table that no world can be baked with (None: not given). The ranges are the core's own
    (csrc/bake.cpp, check_lod, which every bake applies too); limits that depend on the world
    (20 * 4^chunk_level chunks within its max_triangles) are left to its bake."""
    if seams is not None:
        _check_seams(seams)
    _check_collision(collision)
    if ratio is not None:
        _check_number("ratio", ratio)
    for name, value in (("levels", levels), ("chunk_level", chunk_level)):
        if value is not None:
            _check_integer(name, value)
    _core.check_lod(
        levels=levels, ratio=None if ratio is None else float(ratio), chunk_level=chunk_level
    )


def feature_table(spec: WorldSpec) -> list[dict[str, Any]]:
    """Each feature's index, name, kind and centre (lat_deg, lon_deg; a ridge: the midpoint of
    its arc; noise: none), so a bake's files can be labelled without the spec."""
    rows = []
    for i, f in enumerate(spec.features):
        dirs = f.directions()
        row: dict[str, Any] = {"index": i, "name": f.name, "kind": f.kind}
        if dirs:
            u = np.sum(dirs, axis=0)
            u /= np.linalg.norm(u)
            row["lat_deg"] = float(np.degrees(np.arcsin(np.clip(u[1], -1.0, 1.0))))
            row["lon_deg"] = float(np.degrees(np.arctan2(u[0], u[2])))
        rows.append(row)
    return rows


def _chunk(level: int, c: int, ids: U32, d: dict[str, Any]) -> ChunkMesh:
    offs = d["stitch_offsets"]
    stitched = {
        mask: d["stitched"][offs[mask] : offs[mask + 1]]
        for mask in range(1, 8)
        if offs[mask + 1] > offs[mask]
    }
    return ChunkMesh(
        chunk=c,
        level=level,
        vertex_ids=ids,
        positions=d["positions"],
        normals=d["normals"],
        morph=d["morph"],
        triangles=d["triangles"],
        interior=int(d["interior"]),
        stitched=stitched,
        skirt=d["skirt"],
        slope_deg=d["slope_deg"],
        altitude_m=d["altitude_m"],
        layer=d["layer"],
        color=d["color"],
    )


def _wrap(
    spec: WorldSpec, s: dict[str, Any], core: Any, previous: BakeResult | None = None
) -> BakeResult:
    """The Python view of a core result. Chunks whose core buffers are those of `previous` keep
    previous's ChunkMesh objects (the very same arrays)."""
    pool = core.pool()
    stats = core.stats()
    nchunks = int(core.chunk_count)
    before = previous._chunk_tokens if previous is not None else {}
    tokens: dict[int, ChunkMesh] = {}
    levels: list[LevelResult] = []
    for k in range(core.level_count):
        lv = core.level(k)
        offs, ids = lv["vertex_offsets"], lv["vertex_ids"]
        chunks = []
        for c in range(nchunks):
            d = core.chunk(k, c)
            vid = ids[offs[c] : offs[c + 1]]
            old = before.get(d["token"])
            if old is not None and old.level == k and old.chunk == c:
                ch = dataclasses.replace(old, vertex_ids=vid)
            else:
                ch = _chunk(k, c, vid, d)
            tokens[d["token"]] = ch
            chunks.append(ch)
        rep = {
            "level": k,
            "tolerance_m": float(lv["tolerance_m"]),
            "chunks": nchunks,
            "vertices": int(lv["vertices"]),
            "triangles": int(len(lv["triangles"])),
            "max_error_m": float(lv["max_error_m"]),
            "mesh_to_surface_m": float(lv["mesh_to_surface_m"]),
            "surface_to_mesh_m": float(lv["surface_to_mesh_m"]),
            "repaired": int(lv["repaired"]),
            "stitch_failures": int(lv["stitch_failures"]),
            "seconds": float(lv["seconds"]),
        }
        levels.append(
            LevelResult(
                level=k,
                tolerance_m=float(lv["tolerance_m"]),
                triangles=lv["triangles"],
                chunk=lv["chunk"],
                errors=lv["errors"],
                morph=lv["morph"],
                present=lv["present"].view(np.bool_),
                chunks=chunks,
                report=rep,
            )
        )
    colliders: list[Collider] = []
    col = core.colliders()
    col_report: dict[str, Any] | None = None
    if col is not None:
        colliders = [
            Collider(c, m["positions"], m["triangles"]) for c, m in enumerate(col.pop("chunks"))
        ]
        col_report = {
            "tolerance_m": col["tolerance_m"],
            "requested_tolerance_m": col["requested_tolerance_m"],
            "triangles": int(col["triangles"]),
            "max_triangles_per_chunk": int(col["max_triangles_per_chunk"]),
            "max_error_m": col["max_error_m"],
            "mesh_to_surface_m": col["mesh_to_surface_m"],
            "surface_to_mesh_m": col["surface_to_mesh_m"],
            "bias": spec.collision.bias,
            "min_angle_deg": col["min_angle_deg"],
            "min_angle_target_deg": col["min_angle_target_deg"],
            "angle_moves": {
                "collapses": int(col["angle_collapses"]),
                "flips": int(col["angle_flips"]),
                "steiner_points": int(col["angle_inserts"]),
                "below_target": int(col["angle_stuck"]),
            },
            "degenerate_triangles": int(col["degenerate_triangles"]),
            # triangles whose deviation was searched out where it peaks (the rest cannot reach
            # the published figure)
            "searched_triangles": int(col["tight_triangles"]),
            "seconds": col["seconds"],
        }
    seconds = stats.pop("seconds")
    triangles = sum(lr.report["triangles"] for lr in levels) + (
        col_report["triangles"] if col_report else 0
    )
    evaluations = {
        stage: {"points": int(pts), "point_features": int(terms)}
        for stage, (pts, terms) in stats.pop("evaluations").items()
    }
    # field evaluations per output triangle (every level and the colliders)
    evaluations["per_output_triangle"] = {
        k: v / max(triangles, 1) for k, v in evaluations["total"].items()
    }
    for key in ("tolerances", "collider_m", "skirt_depth_m"):
        stats.pop(key)
    report = {
        "planet": spec.name,
        "radius_m": spec.radius_m,
        "tolerance_m": levels[0].tolerance_m,
        "offset": next(k for k, v in OFFSET_MODES.items() if v == s["offset"]),
        "chunk_level": s["chunk_level"],
        "seams": "stitch" if s["stitch"] else "skirt",
        "lods": [lr.report for lr in levels],
        "collision": col_report,
        "refine": stats,
        "stages_seconds": seconds,
        "evaluations": evaluations,
        "seconds_total": seconds["total"],
        "features": feature_table(spec),
    }
    return BakeResult(
        spec=spec,
        vertices=pool["positions"],
        directions=pool["directions"],
        normals=pool["normals"],
        levels=levels,
        colliders=colliders,
        chunk_corners=pool["chunk_corners"],
        chunk_neighbors=pool["chunk_neighbors"],
        slope_deg=pool["slope_deg"],
        altitude_m=pool["altitude_m"],
        layer=pool["layer"],
        color=pool["color"],
        report=report,
        _chunk_tokens=tokens,
    )


def bake(
    spec: WorldSpec,
    *,
    tolerance_m: float | None = None,
    offset: str | None = None,
    levels: int | None = None,
    ratio: float | None = None,
    chunk_level: int | None = None,
    seams: str | None = None,
    collision: bool = True,
    threads: int = 0,
    accept_over_tolerance: bool = False,
    progress: Progress | None = None,
    on_estimate: Callable[[int], None] | None = None,
) -> BakeResult:
    """Mesh `spec` to within `tolerance_m` (default: the spec's) of the true surface, with every
    level of detail (tolerance_m * ratio^k), chunk, stitched seam and collider.

    levels, ratio, chunk_level, seams ("stitch" or "skirt") override the spec's `lod` table;
    collision=False bakes no colliders.

    The result is deterministic: the same spec gives the same arrays whatever `threads` is.
    `progress(stage, done, total)` is called as the bake goes (see `Progress`).
    `on_estimate(triangles)` is called once, on the calling thread, with the budget survey's
    estimate of the finest level's triangles (the refinement's own first phase, so asking costs
    nothing), before the refinement goes on: an exception it raises stops the bake and propagates.
    Raises ValueError for bad options or a feature too thin to mesh at the tolerance, and
    BakeError (a ValueError) when the bake cannot be done: a tolerance that would exceed
    `spec.max_triangles`, or a level measured beyond its tolerance (unless
    `accept_over_tolerance`).
    """
    s = settings(
        spec,
        tolerance_m=tolerance_m,
        offset=offset,
        levels=levels,
        ratio=ratio,
        chunk_level=chunk_level,
        seams=seams,
        collision=collision,
        threads=threads,
        accept_over_tolerance=accept_over_tolerance,
    )
    with named_features(spec), budget_named(spec):
        core = _core.bake(Field(spec)._core, s, _closing_refine(progress), on_estimate)
        return _wrap(spec, s, core)


def _closing_refine(progress: Progress | None) -> Progress | None:
    """The core's refine reports count against an estimate; verification starts from every
    leaf refinement made, so its first report closes refine at that count."""
    if progress is None:
        return None
    refined = [False]

    def relay(stage: str, done: int, total: int) -> None:
        if stage == "verify" and not refined[0]:
            refined[0] = True
            progress("refine", total, total)
        progress(stage, done, total)

    return relay


BakeError = _core.BakeError

# the key that sets each kind's finest length scale (what drives its triangle count up)
FINEST_KEY = {
    "hill": "sigma_m",
    "mesa": "wall_width_m",
    "block": "wall_width_m",
    "crater": "rim_width_m",
    "ridge": "half_width_m",
    "noise": "frequency_per_m",
}
@contextlib.contextmanager
def budget_named(spec: WorldSpec) -> Iterator[None]:
    """An over-budget error names the feature that drives the count (the core's budget survey
    gives its index, "features[k] drives ..."); this adds its kind and the key that sets its
    finest scale, the one to raise."""
    try:
        yield
    except ValueError as exc:
        msg = str(exc)
        m = re.match(r"features\[(\d+)\]", msg)
        if "max_triangles" not in msg or not m or int(m.group(1)) >= len(spec.features):
            raise
        f = spec.features[int(m.group(1))]
        key = FINEST_KEY.get(f.kind)
        if key is None:
            raise
        raise type(exc)(
            f"{msg} (features[{m.group(1)}] is a {f.kind}; its finest scale is set by "
            f"{key} = {getattr(f, key):g})"
        ) from None


@contextlib.contextmanager
def named_features(spec: WorldSpec) -> Iterator[None]:
    """Core messages name features by index (``features[3]: ...``); add the feature's name."""
    try:
        yield
    except ValueError as exc:
        msg = str(exc)
        m = re.match(r"features\[(\d+)\]", msg)
        if m and int(m.group(1)) < len(spec.features):
            name = getattr(spec.features[int(m.group(1))], "name", None)
            if name:
                raise type(exc)(f"{m.group(0)} ({name!r}){msg[m.end() :]}") from None
        raise
