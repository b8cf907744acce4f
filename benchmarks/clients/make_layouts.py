"""Bake one world once and write it in every .glb layout the clients are measured on:

    OUTDIR/float/      <name>.glb (MSFT_lod) and <name>.lod<k>.glb, float32, no UV channels
    OUTDIR/uv/         the same with slope/altitude in TEXCOORD_0 and the layer in TEXCOORD_1
    OUTDIR/quantized/  the same with KHR_mesh_quantization positions and normals

and OUTDIR/expected.json: what each file holds, read back from the files themselves (levels,
chunk node names, triangles per level, attribute names, the float32 bounds), so a client's view
can be compared with it.

    python benchmarks/clients/make_layouts.py examples/pebblemoor.toml OUTDIR --tolerance-m 2
"""

from __future__ import annotations

import argparse
import json
import struct
from pathlib import Path
from typing import Any

import numpy as np

import globemill
from globemill.output import GlbOptions, write_outputs

LAYOUTS = {
    "float": GlbOptions(level_files=True),
    "uv": GlbOptions(level_files=True, uv_attributes=True),
    "quantized": GlbOptions(level_files=True, quantize=True),
}


def glb_json(path: Path) -> dict[str, Any]:
    data = path.read_bytes()
    magic, _version, _length = struct.unpack_from("<4sII", data, 0)
    if magic != b"glTF":
        raise ValueError(f"{path}: not a .glb")
    size, kind = struct.unpack_from("<I4s", data, 12)
    if kind != b"JSON":
        raise ValueError(f"{path}: first chunk is not JSON")
    return json.loads(data[20 : 20 + size])


def float_positions(g: dict[str, Any], binary: bytes, accessor: int) -> np.ndarray:
    acc = g["accessors"][accessor]
    view = g["bufferViews"][acc["bufferView"]]
    if acc["componentType"] != 5126 or view.get("byteStride", 12) != 12:
        raise ValueError("only tightly packed float32 VEC3 positions are read here")
    start = view.get("byteOffset", 0) + acc.get("byteOffset", 0)
    return np.frombuffer(binary, "<f4", acc["count"] * 3, start).reshape(-1, 3)


def binary_chunk(path: Path) -> bytes:
    data = path.read_bytes()
    (size,) = struct.unpack_from("<I", data, 12)
    at = 20 + size
    bsize, kind = struct.unpack_from("<I4s", data, at)
    if kind != b"BIN\0":
        raise ValueError(f"{path}: second chunk is not BIN")
    return data[at + 8 : at + 8 + bsize]


def widen(old: list[float] | None, lo: float, hi: float) -> list[float]:
    return [lo, hi] if old is None else [min(old[0], lo), max(old[1], hi)]


def describe(path: Path) -> dict[str, Any]:
    """What a file holds, per level: meshes, triangles, attribute names and value ranges (from
    the accessors' min/max) and, for float32 positions, the range of distances from the centre."""
    g = glb_json(path)
    binary = binary_chunk(path)
    levels: dict[int, dict[str, Any]] = {}
    for mesh in g["meshes"]:
        k = mesh["extras"]["level"]
        prim = mesh["primitives"][0]
        tris = g["accessors"][prim["indices"]]["count"] // 3
        lv = levels.setdefault(k, {"meshes": 0, "triangles": 0, "ranges": {}})
        lv["meshes"] += 1
        lv["triangles"] += tris
        lv["attributes"] = sorted(prim["attributes"])
        lv["morph_targets"] = len(prim.get("targets", []))
        for name in ("_SLOPE", "_ALTITUDE", "_LAYER"):
            acc = g["accessors"][prim["attributes"][name]]
            lv["ranges"][name] = widen(lv["ranges"].get(name), acc["min"][0], acc["max"][0])
        pos = g["accessors"][prim["attributes"]["POSITION"]]
        if pos["componentType"] == 5126:
            pos64 = float_positions(g, binary, prim["attributes"]["POSITION"]).astype(np.float64)
            r = np.linalg.norm(pos64, axis=1)
            lv["ranges"]["radius"] = widen(
                lv["ranges"].get("radius"), float(r.min()), float(r.max())
            )
    return {
        "levels": {str(k): v for k, v in sorted(levels.items())},
        "extensions_used": g.get("extensionsUsed", []),
        "extensions_required": g.get("extensionsRequired", []),
        "root_nodes": len(g["scenes"][0]["nodes"]),
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("spec")
    ap.add_argument("outdir", type=Path)
    ap.add_argument("--tolerance-m", type=float, default=2.0)
    args = ap.parse_args()
    spec = globemill.load_spec(args.spec)
    result = globemill.bake(spec, tolerance_m=args.tolerance_m, collision=False)
    expected: dict[str, Any] = {
        "spec": str(args.spec),
        "tolerance_m": args.tolerance_m,
        "globemill": globemill.__version__,
        "files": {},
    }
    for layout, opts in LAYOUTS.items():
        d = args.outdir / layout
        d.mkdir(parents=True, exist_ok=True)
        paths = write_outputs(result, d, options=opts)
        report = json.loads(paths["report"].read_text())
        for key, p in sorted(paths.items()):
            if key.startswith("glb"):
                entry = describe(p)
                entry["layout"] = layout
                entry["quantization"] = report["export"].get("quantization")
                expected["files"][str(p.relative_to(args.outdir))] = entry
        expected.setdefault("lods", report["lods"])
    (args.outdir / "expected.json").write_text(json.dumps(expected, indent=1) + "\n")
    for f, e in expected["files"].items():
        print(f, {k: v["triangles"] for k, v in e["levels"].items()})


if __name__ == "__main__":
    main()
