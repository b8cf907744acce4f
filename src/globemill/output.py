"""Turn a bake into files: `<name>.glb` (every level and chunk), `<name>.collision.glb` and
`<name>.report.json`, all written atomically.

glTF layout (docs/gltf.md): one root node per chunk holding its finest level; the node's
`MSFT_lod` extension lists the nodes of its coarser levels (finest to coarsest), with
`extras.MSFT_screencoverage` hints. Each level mesh has one morph target: the displacement to
the vertex's position on the next coarser level. Stitched borders are index accessors named in
the mesh's `extras.seams`.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from . import __version__
from ._atomic import write_files_atomically
from .bake import BakeResult
from .export_gltf import GltfBuilder


def report_json(report: dict[str, Any]) -> bytes:
    return (json.dumps(report, indent=2) + "\n").encode("utf-8")


def screen_coverage(levels: int) -> list[float]:
    """MSFT_lod screen-coverage hints: each coarser level below half the previous coverage
    (common practice), the coarsest down to nothing."""
    return [0.5 ** (k + 1) for k in range(levels - 1)] + [0.0]


def glb_for(result: BakeResult) -> bytes:
    b = GltfBuilder()
    nlev = len(result.levels)
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
            extras: dict[str, Any] = {
                "chunk": c,
                "level": lv.level,
                "tolerance_m": lv.tolerance_m,
                "interior_triangles": ch.interior,
                "neighbors": [int(x) for x in result.chunk_neighbors[c]],
            }
            if seams:
                extras["seams"] = seams
            mesh = b.add_mesh(
                f"chunk{c}.lod{lv.level}",
                ch.positions,
                tris,
                normals=ch.normals,
                morph_positions=ch.morph if lv.level + 1 < nlev else None,
                extras=extras,
            )
            node_ids.append(b.add_node(f"chunk{c}.lod{lv.level}", mesh))
        if nlev > 1:
            b.nodes[node_ids[0]]["extensions"] = {"MSFT_lod": {"ids": node_ids[1:]}}
            b.nodes[node_ids[0]]["extras"] = {"MSFT_screencoverage": screen_coverage(nlev)}
            b.extensions_used.add("MSFT_lod")
        roots.append(node_ids[0])
    return b.to_glb(
        roots,
        scene_name=result.spec.name,
        extras={"globemill": __version__, "radius_m": result.spec.radius_m, "chunks": nchunks},
    )


def collision_glb_for(result: BakeResult) -> bytes:
    b = GltfBuilder()
    roots = []
    for col in result.colliders:
        mesh = b.add_mesh(f"collider{col.chunk}", col.positions, col.triangles)
        roots.append(b.add_node(f"collider{col.chunk}", mesh, extras={"chunk": col.chunk}))
    return b.to_glb(
        roots,
        scene_name=f"{result.spec.name}.collision",
        extras={"globemill": __version__, "collision": result.report.get("collision")},
    )


def _concat(a: Any, b: Any) -> Any:
    import numpy as np

    return np.concatenate([a, b]).astype(np.uint32)


def write_outputs(result: BakeResult, outdir: Path) -> dict[str, Path]:
    """Write every output of `result` into `outdir` (all or nothing); return their paths."""
    name = result.spec.name
    paths = {
        "glb": outdir / f"{name}.glb",
        "report": outdir / f"{name}.report.json",
    }
    files = {paths["glb"]: glb_for(result)}
    if result.colliders:
        paths["collision"] = outdir / f"{name}.collision.glb"
        files[paths["collision"]] = collision_glb_for(result)
    files[paths["report"]] = report_json(result.report)
    write_files_atomically(files)
    return paths
