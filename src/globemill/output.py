"""Turn a bake into files: `<name>.glb` (every level and chunk), `<name>.collision.glb`,
`<name>.report.json` and, when asked, `<name>.lod<k>.obj|ply`, all written atomically. Files
the world's previous bake in that folder wrote (its report's `export.files`) that this one does
not write are removed after it (a bake without colliders leaves no old `.collision.glb`).

glTF layout (docs/gltf.md): one root node per chunk holding its finest level; the node's
`MSFT_lod` extension lists the nodes of its coarser levels (finest to coarsest), with
`extras.MSFT_screencoverage` hints. Each level mesh has one triangle primitive with POSITION,
NORMAL (analytic), COLOR_0 (layer color), _SLOPE, _ALTITUDE, _LAYER and one morph target: the
displacement to the vertex's position on the next coarser level. Stitched borders are index
accessors named in the mesh's `extras.seams` by edge mask.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from ._atomic import write_files_atomically
from .attributes import NO_LAYER, layer_table
from .bake import BakeResult, Progress
from .export_gltf import GltfBuilder
from .gpu_buffers import CACHE_SIZES, DrawBuffers, draw_buffers, misses
from .provenance import provenance
from .quantize import (
    QUANTIZE_SHARE,
    QuantizedMesh,
    grid_step,
    normal_error_deg,
    position_error,
    quantize,
)


def report_json(report: dict[str, Any]) -> bytes:
    return (json.dumps(report, indent=2) + "\n").encode("utf-8")


# MSFT_screencoverage hints are worked out for this screen and on-screen error (common practice:
# a level may be drawn while its tolerance projects to at most about one pixel)
REFERENCE_SCREEN_PX = (1920, 1080)
REFERENCE_PIXEL_ERROR = 1.0

GROUND_MATERIAL: dict[str, Any] = {
    "name": "ground",
    # COLOR_0 carries the layer colors; ground is a dielectric (metallic 0), fully rough
    "pbrMetallicRoughness": {
        "baseColorFactor": [1.0, 1.0, 1.0, 1.0],
        "metallicFactor": 0.0,
        "roughnessFactor": 1.0,
    },
}

ATTRIBUTE_UNITS = {
    "_SLOPE": "degrees, atan(|grad H| / (R + H)) of the true surface",
    "_ALTITUDE": "metres above radius_m, H of the true surface at the vertex direction",
    "_LAYER": f"index into scene extras layers, {NO_LAYER} where no rule matches",
}


def screen_coverage(area_m2: float, tolerances_m: list[float]) -> list[float]:
    """MSFT_screencoverage hints of one chunk: entry k is the screen coverage (projected area /
    screen area) below which level k + 1 may replace level k; the last entry is 0 (the coarsest
    level is never culled).

    On a screen of S pixels a chunk of area A covering a fraction c of it is seen at a scale of
    sqrt(c S / A) pixels per metre, so level j's tolerance shows as eps_j sqrt(c S / A) pixels.
    Level k + 1 is good enough (at most p pixels) while c <= A p^2 / (eps_{k+1}^2 S); the hints
    are those bounds (clipped to 1) for the reference screen and p = REFERENCE_PIXEL_ERROR.
    """
    s = float(REFERENCE_SCREEN_PX[0] * REFERENCE_SCREEN_PX[1])
    p2 = REFERENCE_PIXEL_ERROR**2
    hints = [min(1.0, area_m2 * p2 / (eps**2 * s)) for eps in tolerances_m[1:]]
    return hints + [0.0]


def _area(positions: npt.NDArray[np.float64], tris: npt.NDArray[np.uint32]) -> float:
    p = positions[tris]
    return float(0.5 * np.linalg.norm(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), axis=1).sum())


@dataclass(frozen=True)
class GlbOptions:
    """How the .glb files are laid out (docs/gltf.md, "Layouts").

    level_files : also write one complete `<name>.lod<k>.glb` per level (no MSFT_lod)
    uv_attributes : also carry slope and altitude in TEXCOORD_0 and the layer in TEXCOORD_1
    gpu_order : triangles in vertex cache order, vertices in fetch order (False: the core's order)
    quantize : KHR_mesh_quantization positions (int16) and normals (int8), applied only when the
        worst position rounding error is within `quantize_share` of every level's tolerance
    """

    level_files: bool = False
    uv_attributes: bool = False
    gpu_order: bool = True
    quantize: bool = False
    quantize_share: float = QUANTIZE_SHARE

    def __post_init__(self) -> None:
        for name in ("level_files", "uv_attributes", "gpu_order", "quantize"):
            if not isinstance(getattr(self, name), bool):
                raise ValueError(f"{name}: must be true or false, got {getattr(self, name)!r}")
        share = self.quantize_share
        if isinstance(share, bool) or not isinstance(share, (int, float)) or not 0 < share <= 1:
            raise ValueError(f"quantize_share: must be a number in (0, 1], got {share!r}")


# what the standard channels hold with uv_attributes (scene extras, docs/gltf.md)
UV_CHANNELS = {"TEXCOORD_0": ["_SLOPE", "_ALTITUDE"], "TEXCOORD_1": ["_LAYER", "0"]}


@dataclass
class Prepared:
    """Every chunk level's draw buffers, the quantization decision and the export figures."""

    buffers: list[list[DrawBuffers]]
    step_m: float | None
    quantized: list[list[QuantizedMesh]] | None
    stats: dict[str, Any]


def prepare(
    result: BakeResult, options: GlbOptions | None = None, progress: Progress | None = None
) -> Prepared:
    """Order every chunk level's buffers, decide on quantization and measure the vertex cache
    (ACMR before and after, for FIFO caches of CACHE_SIZES entries). progress("write", done,
    total) is called per level (total: chunk levels, plus one for the files)."""
    opts = options or GlbOptions()
    nchunks = len(result.levels[0].chunks) if result.levels else 0
    total = nchunks * len(result.levels) + 1
    bufs = []
    for k, lv in enumerate(result.levels):
        bufs.append([draw_buffers(ch, optimize=opts.gpu_order) for ch in lv.chunks])
        if progress is not None:
            progress("write", (k + 1) * nchunks, total)
    acmr: list[dict[str, Any]] = []
    for lv, row in zip(result.levels, bufs, strict=True):
        tris = sum(len(b.triangles) for b in row)
        # vertices as the files hold them: each chunk its own buffer (border vertices repeated)
        verts = sum(len(b.positions) for b in row)
        entry: dict[str, Any] = {"level": lv.level, "triangles": tris, "chunk_vertices": verts}
        for size in CACHE_SIZES:
            before = sum(
                misses(_concat(ch.triangles, ch.skirt), len(ch.positions), size) for ch in lv.chunks
            )
            after = sum(misses(b.triangles, len(b.positions), size) for b in row)
            entry[f"fifo{size}"] = {"before": before / max(tris, 1), "after": after / max(tris, 1)}
        acmr.append(entry)
    stats: dict[str, Any] = {"gpu_order": opts.gpu_order, "acmr": acmr}
    step = None
    quantized = None
    if opts.quantize:
        step = grid_step([b.positions for row in bufs for b in row])
        quantized = [[quantize(b.positions, b.normals, step) for b in row] for row in bufs]
        levels = []
        applied = True
        for lv, row, qrow in zip(result.levels, bufs, quantized, strict=True):
            err = max(position_error(b.positions, q, step) for b, q in zip(row, qrow, strict=True))
            nerr = max(normal_error_deg(b.normals, q) for b, q in zip(row, qrow, strict=True))
            ok = err <= opts.quantize_share * lv.tolerance_m
            applied = applied and ok
            levels.append(
                {
                    "level": lv.level,
                    "max_position_error_m": err,
                    "share_of_tolerance": err / lv.tolerance_m,
                    "max_normal_error_deg": nerr,
                    "within": ok,
                }
            )
        stats["quantization"] = {
            "applied": applied,
            "step_m": step,
            "allowed_share": opts.quantize_share,
            "levels": levels,
        }
        if not applied:
            # all or nothing: a level left in float32 would not meet a quantized neighbour's
            # seam vertices exactly
            stats["quantization"]["reason"] = (
                "the rounding error exceeds quantize_share of a level's tolerance; "
                "positions and normals written as float32"
            )
            quantized = None
    return Prepared(bufs, step if quantized is not None else None, quantized, stats)


def glb_for(
    result: BakeResult,
    options: GlbOptions | None = None,
    *,
    level: int | None = None,
    prepared: Prepared | None = None,
) -> bytes:
    """The .glb of `result`: every level, coarser ones declared with MSFT_lod (level None), or
    level `level` alone as a complete file (GlbOptions.level_files). `prepared`: from `prepare`
    with the same options (made here when None)."""
    opts = options or GlbOptions()
    prep = prepared or prepare(result, opts)
    nlev = len(result.levels)
    if level is not None and not (isinstance(level, int) and 0 <= level < nlev):
        raise ValueError(f"level: must be an integer in 0..{nlev - 1}, got {level!r}")
    b = GltfBuilder()
    material = b.add_material(GROUND_MATERIAL)
    tolerances = [lv.tolerance_m for lv in result.levels]
    wanted = range(nlev) if level is None else [level]
    roots: list[int] = []
    nchunks = len(result.levels[0].chunks)
    for c in range(nchunks):
        node_ids = []
        for k in wanted:
            node_ids.append(_chunk_node(b, result, prep, opts, k, c, material))
        if level is None and nlev > 1:
            ch0 = result.levels[0].chunks[c]
            hints = screen_coverage(_area(ch0.positions, ch0.triangles), tolerances)
            b.nodes[node_ids[0]]["extensions"] = {"MSFT_lod": {"ids": node_ids[1:]}}
            b.nodes[node_ids[0]]["extras"] = {"MSFT_screencoverage": hints}
            b.extensions_used.add("MSFT_lod")
        roots.append(node_ids[0])
    extras: dict[str, Any] = {
        **provenance(result.spec),
        "radius_m": result.spec.radius_m,
        "chunks": nchunks,
        "levels": nlev,
        "tolerances_m": tolerances,
        "seams": result.report.get("seams", result.spec.lod.seams),
        "layers": layer_table(result.spec),
        "no_layer": NO_LAYER,
        "attributes": ATTRIBUTE_UNITS,
    }
    if level is not None:
        extras["level_file"] = level
    if opts.uv_attributes:
        extras["standard_channels"] = UV_CHANNELS
    if prep.step_m is not None:
        extras["quantization"] = {"step_m": prep.step_m, **_quant_summary(prep)}
    return b.to_glb(roots, scene_name=result.spec.name, extras=extras)


def _quant_summary(prep: Prepared) -> dict[str, Any]:
    q = prep.stats["quantization"]["levels"]
    return {
        "max_position_error_m": [x["max_position_error_m"] for x in q],
        "max_normal_error_deg": [x["max_normal_error_deg"] for x in q],
    }


def _chunk_node(
    b: GltfBuilder,
    result: BakeResult,
    prep: Prepared,
    opts: GlbOptions,
    k: int,
    c: int,
    material: int,
) -> int:
    """The mesh and node of chunk c at level k."""
    nlev = len(result.levels)
    lv = result.levels[k]
    ch = lv.chunks[c]
    d = prep.buffers[k][c]
    n = len(d.positions)
    seams = {str(mask): b.index_accessor(t, n) for mask, t in d.stitched.items()}
    attributes = {
        "COLOR_0": b.color_attribute(d.color),
        "_SLOPE": b.scalar_attribute(d.slope_deg),
        "_ALTITUDE": b.scalar_attribute(d.altitude_m),
        "_LAYER": b.scalar_attribute(d.layer),
    }
    if opts.uv_attributes:
        attributes["TEXCOORD_0"] = b.vec2_attribute(np.stack([d.slope_deg, d.altitude_m], axis=1))
        attributes["TEXCOORD_1"] = b.vec2_attribute(
            np.stack([d.layer.astype(np.float64), np.zeros(n)], axis=1)
        )
    extras: dict[str, Any] = {
        "chunk": c,
        "level": lv.level,
        "tolerance_m": lv.tolerance_m,
        "interior_triangles": ch.interior,
        "neighbors": [int(x) for x in result.chunk_neighbors[c]],
    }
    if d.skirt:
        extras["skirt_triangles"] = d.skirt
    if seams:
        extras["seams"] = seams
    morph = d.morph if lv.level + 1 < nlev else None
    if morph is not None:
        # the name engines and DCC tools show for the target (common practice)
        extras["targetNames"] = ["coarser"]
    name = f"chunk{c}.lod{lv.level}"
    node_args: dict[str, Any] = {}
    displacement = None
    if prep.quantized is not None and prep.step_m is not None:
        q = prep.quantized[k][c]
        s = prep.step_m
        attributes["POSITION"] = b.quantized_attribute(q.positions, normalized=False)
        attributes["NORMAL"] = b.quantized_attribute(q.normals, normalized=True)
        if morph is not None:
            # the target in the mesh's own units: (morph - s c) / s - q, stored as float32
            local = morph / s - q.origin
            displacement = local.astype("<f4").astype(np.float64) - q.positions
        node_args = {"translation": [float(s * x) for x in q.origin], "scale": [s, s, s]}
    mesh = b.add_mesh(
        name,
        d.positions,
        d.triangles,
        normals=d.normals,
        morph_positions=morph,
        morph_displacement=displacement,
        attributes=attributes,
        material=material,
        extras=extras,
    )
    return b.add_node(name, mesh, **node_args)


def collision_glb_for(result: BakeResult) -> bytes:
    b = GltfBuilder()
    roots = []
    for col in result.colliders:
        mesh = b.add_mesh(f"collider{col.chunk}", col.positions, col.triangles)
        roots.append(b.add_node(f"collider{col.chunk}", mesh, extras={"chunk": col.chunk}))
    # the collision report without its timings, so the same spec gives the same bytes
    report = {k: v for k, v in (result.report.get("collision") or {}).items() if "seconds" not in k}
    return b.to_glb(
        roots,
        scene_name=f"{result.spec.name}.collision",
        extras={**provenance(result.spec), "collision": report},
    )


def _concat(a: Any, b: Any) -> Any:
    return np.concatenate([a, b]).astype(np.uint32)


def _previous_outputs(outdir: Path, name: str) -> list[Path]:
    """The files the previous bake of world `name` wrote into `outdir`, as its report lists them
    (plain file names of that world's outputs only; none when there is no readable report)."""
    try:
        report = json.loads((outdir / f"{name}.report.json").read_text(encoding="utf-8"))
        names = list(report["export"]["files"])
    except (OSError, ValueError, KeyError, TypeError):
        return []
    out = []
    for n in names:
        if (
            isinstance(n, str)
            and n == Path(n).name
            and n.startswith(f"{name}.")
            and n.endswith((".glb", ".obj", ".ply", ".json"))
        ):
            out.append(outdir / n)
    return out


def write_outputs(
    result: BakeResult,
    outdir: Path,
    *,
    formats: Sequence[str] = (),
    level: int = 0,
    options: GlbOptions | None = None,
    progress: Progress | None = None,
) -> dict[str, Path]:
    """Write every output of `result` into `outdir` (all or nothing); return their paths.

    formats : any of "obj", "ply": level `level` also as OUTDIR/<name>.lod<level>.<fmt>.
    options : the .glb layout (GlbOptions); with `level_files`, also OUTDIR/<name>.lod<k>.glb
        for every level k (paths key "glb_lod<k>").
    progress : called as the files are prepared and written (stage "write", see `prepare`).
    Files the previous bake of this world in `outdir` wrote and this one does not are removed
    once the new set is in place (the report's export entry names them: "removed").
    The report gains an "export" entry (also set in result.report): file sizes, the vertex cache
    miss ratio before and after ordering and, when asked, the quantization's errors.
    """
    from .export_mesh import mesh_bytes, mesh_path

    opts = options or GlbOptions()
    name = result.spec.name
    prep = prepare(result, opts, progress)
    paths = {
        "glb": outdir / f"{name}.glb",
        "report": outdir / f"{name}.report.json",
    }
    files = {paths["glb"]: glb_for(result, opts, prepared=prep)}
    if opts.level_files:
        for k in range(len(result.levels)):
            paths[f"glb_lod{k}"] = outdir / f"{name}.lod{k}.glb"
            files[paths[f"glb_lod{k}"]] = glb_for(result, opts, level=k, prepared=prep)
    if result.colliders:
        paths["collision"] = outdir / f"{name}.collision.glb"
        files[paths["collision"]] = collision_glb_for(result)
    for fmt in dict.fromkeys(formats):
        paths[fmt] = mesh_path(outdir, name, level, fmt)
        files[paths[fmt]] = mesh_bytes(result, level, fmt)
    export = {
        **prep.stats,
        "uv_attributes": opts.uv_attributes,
        "files": {p.name: len(data) for p, data in files.items()},
    }
    stale = [p for p in _previous_outputs(outdir, name) if p not in files and p != paths["report"]]
    if stale:
        export["removed"] = [p.name for p in stale]
    result.report["export"] = export
    files[paths["report"]] = report_json({**result.report, **provenance(result.spec)})
    write_files_atomically(files)
    for p in stale:
        p.unlink(missing_ok=True)
    if progress is not None:
        done = sum(len(lv.chunks) for lv in result.levels) + 1
        progress("write", done, done)
    return paths
