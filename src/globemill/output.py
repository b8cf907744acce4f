"""Turn a bake into files: `<name>.glb` (every level and chunk), `<name>.collision.glb`,
`<name>.report.json` and, when asked, `<name>.lod<k>.obj|ply`, all written atomically.

glTF layout (docs/gltf.md): one root node per chunk holding its finest level; the node's
`MSFT_lod` extension lists the nodes of its coarser levels (finest to coarsest), with
`extras.MSFT_screencoverage` hints. Each level mesh has one triangle primitive with POSITION,
NORMAL (analytic), COLOR_0 (layer colour), _SLOPE, _ALTITUDE, _LAYER and one morph target: the
displacement to the vertex's position on the next coarser level. Stitched borders are index
accessors named in the mesh's `extras.seams` by edge mask.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from ._atomic import write_files_atomically
from .attributes import NO_LAYER, layer_table
from .bake import BakeResult
from .export_gltf import GltfBuilder
from .provenance import provenance


def report_json(report: dict[str, Any]) -> bytes:
    return (json.dumps(report, indent=2) + "\n").encode("utf-8")


# MSFT_screencoverage hints are worked out for this screen and on-screen error (common practice:
# a level may be drawn while its tolerance projects to at most about one pixel)
REFERENCE_SCREEN_PX = (1920, 1080)
REFERENCE_PIXEL_ERROR = 1.0

GROUND_MATERIAL: dict[str, Any] = {
    "name": "ground",
    # COLOR_0 carries the layer colours; ground is a dielectric (metallic 0), fully rough
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


def glb_for(result: BakeResult) -> bytes:
    b = GltfBuilder()
    material = b.add_material(GROUND_MATERIAL)
    nlev = len(result.levels)
    tolerances = [lv.tolerance_m for lv in result.levels]
    roots: list[int] = []
    nchunks = len(result.levels[0].chunks)
    for c in range(nchunks):
        node_ids = []
        for lv in result.levels:
            ch = lv.chunks[c]
            tris = ch.triangles if len(ch.skirt) == 0 else _concat(ch.triangles, ch.skirt)
            seams = {
                str(mask): b.index_accessor(t, len(ch.positions)) for mask, t in ch.stitched.items()
            }
            attributes = {
                "COLOR_0": b.color_attribute(ch.color),
                "_SLOPE": b.scalar_attribute(ch.slope_deg),
                "_ALTITUDE": b.scalar_attribute(ch.altitude_m),
                "_LAYER": b.scalar_attribute(ch.layer),
            }
            extras: dict[str, Any] = {
                "chunk": c,
                "level": lv.level,
                "tolerance_m": lv.tolerance_m,
                "interior_triangles": ch.interior,
                "neighbors": [int(x) for x in result.chunk_neighbors[c]],
            }
            if len(ch.skirt):
                extras["skirt_triangles"] = int(len(ch.skirt))
            if seams:
                extras["seams"] = seams
            morph = ch.morph if lv.level + 1 < nlev else None
            if morph is not None:
                # the name engines and DCC tools show for the target (common practice)
                extras["targetNames"] = ["coarser"]
            mesh = b.add_mesh(
                f"chunk{c}.lod{lv.level}",
                ch.positions,
                tris,
                normals=ch.normals,
                morph_positions=morph,
                attributes=attributes,
                material=material,
                extras=extras,
            )
            node_ids.append(b.add_node(f"chunk{c}.lod{lv.level}", mesh))
        if nlev > 1:
            ch0 = result.levels[0].chunks[c]
            hints = screen_coverage(_area(ch0.positions, ch0.triangles), tolerances)
            b.nodes[node_ids[0]]["extensions"] = {"MSFT_lod": {"ids": node_ids[1:]}}
            b.nodes[node_ids[0]]["extras"] = {"MSFT_screencoverage": hints}
            b.extensions_used.add("MSFT_lod")
        roots.append(node_ids[0])
    return b.to_glb(
        roots,
        scene_name=result.spec.name,
        extras={
            **provenance(result.spec),
            "radius_m": result.spec.radius_m,
            "chunks": nchunks,
            "levels": nlev,
            "tolerances_m": tolerances,
            "seams": result.report.get("seams", result.spec.lod.seams),
            "layers": layer_table(result.spec),
            "no_layer": NO_LAYER,
            "attributes": ATTRIBUTE_UNITS,
        },
    )


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


def write_outputs(
    result: BakeResult,
    outdir: Path,
    *,
    formats: Sequence[str] = (),
    level: int = 0,
) -> dict[str, Path]:
    """Write every output of `result` into `outdir` (all or nothing); return their paths.

    formats : any of "obj", "ply": level `level` also as OUTDIR/<name>.lod<level>.<fmt>.
    """
    from .export_mesh import mesh_bytes, mesh_path

    name = result.spec.name
    paths = {
        "glb": outdir / f"{name}.glb",
        "report": outdir / f"{name}.report.json",
    }
    files = {paths["glb"]: glb_for(result)}
    if result.colliders:
        paths["collision"] = outdir / f"{name}.collision.glb"
        files[paths["collision"]] = collision_glb_for(result)
    files[paths["report"]] = report_json({**result.report, **provenance(result.spec)})
    for fmt in dict.fromkeys(formats):
        paths[fmt] = mesh_path(outdir, name, level, fmt)
        files[paths[fmt]] = mesh_bytes(result, level, fmt)
    write_files_atomically(files)
    return paths
