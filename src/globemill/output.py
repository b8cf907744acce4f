"""Turn a bake into the files on disk: `<name>.glb` and `<name>.report.json`, written atomically."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from . import __version__
from ._atomic import write_files_atomically
from .bake import BakeResult
from .export_gltf import Primitive, glb_bytes


def report_json(report: dict[str, Any]) -> bytes:
    return (json.dumps(report, indent=2, sort_keys=False) + "\n").encode("utf-8")


def glb_for(result: BakeResult) -> bytes:
    name = result.spec.name
    prim = Primitive(
        name=f"{name}.lod0",
        positions=result.vertices,
        triangles=result.triangles,
        normals=result.normals,
        extras={"level": 0, "tolerance_m": result.report["tolerance_m"]},
    )
    return glb_bytes(
        [prim],
        scene_name=name,
        extras={"globemill": __version__, "radius_m": result.spec.radius_m},
    )


def write_outputs(result: BakeResult, outdir: Path) -> dict[str, Path]:
    """Write every output of `result` into `outdir` (all or nothing); return their paths."""
    name = result.spec.name
    paths = {
        "glb": outdir / f"{name}.glb",
        "report": outdir / f"{name}.report.json",
    }
    write_files_atomically(
        {paths["glb"]: glb_for(result), paths["report"]: report_json(result.report)}
    )
    return paths
