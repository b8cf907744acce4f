"""One level of a bake as a single welded mesh in OBJ or PLY, for DCC tools, written with meshio.

- OBJ (text): `v` positions, `vn` analytic normals, `f a//a b//b c//c` triangles (1-based). meshio
  writes faces without normal references; they are added so tools use the stored normals.
- PLY (binary little-endian): vertex properties x, y, z (float32), nx, ny, nz (float32), red,
  green, blue (uint8, the layer color in linear RGB), slope (degrees), altitude (metres above
  the radius), layer (uint8, 255 = no rule matched); faces as uint8-counted int32 index lists.

Positions are float32, bit-identical to the .glb's, planet centre at the origin, Y up, metres.
Both files start with a comment naming the world, the level and its tolerance instead of
meshio's timestamp, so the same bake always gives the same bytes.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt

from . import __version__
from .attributes import VertexAttributes
from .bake import BakeResult
from .export_gltf import quantize_color
from .field import Field

FORMATS = ("obj", "ply")


def level_mesh(
    result: BakeResult, level: int, fld: Field | None = None
) -> tuple[
    npt.NDArray[np.float64], npt.NDArray[np.uint32], npt.NDArray[np.float64], VertexAttributes
]:
    """Level `level` as one welded mesh: positions, triangles, normals, attributes."""
    if not 0 <= level < len(result.levels):
        raise ValueError(
            f"level: must be an integer in 0..{len(result.levels) - 1} (the bake has "
            f"{len(result.levels)} levels), got {level!r}"
        )
    ids = np.flatnonzero(result.levels[level].present)
    positions, tris = result.mesh(level)
    att = VertexAttributes(
        result.slope_deg[ids], result.altitude_m[ids], result.layer[ids], result.color[ids]
    )
    return positions, tris, result.normals[ids], att


def _header(result: BakeResult, level: int) -> str:
    lv = result.levels[level]
    return (
        f"globemill {__version__} world {result.spec.name} level {level} "
        f"tolerance {lv.tolerance_m:g} m, Y up, metres"
    )


def mesh_bytes(result: BakeResult, level: int, fmt: str, fld: Field | None = None) -> bytes:
    """The bytes of level `level` as `fmt` ('obj' or 'ply')."""
    import meshio

    if fmt not in FORMATS:
        raise ValueError(f"format: must be one of {', '.join(FORMATS)}, got {fmt!r}")
    positions, tris, normals, att = level_mesh(result, level, fld)
    points = positions.astype(np.float32)
    cells = [("triangle", tris.astype(np.int32))]
    point_data: dict[str, Any]
    if fmt == "obj":
        point_data = {"obj:vn": normals.astype(np.float32)}
    else:
        rgb = quantize_color(att.color)
        n32 = normals.astype(np.float32)
        point_data = {
            "nx": n32[:, 0],
            "ny": n32[:, 1],
            "nz": n32[:, 2],
            "red": rgb[:, 0],
            "green": rgb[:, 1],
            "blue": rgb[:, 2],
            "slope": att.slope_deg.astype(np.float32),
            "altitude": att.altitude_m.astype(np.float32),
            "layer": att.layer.astype(np.uint8),
        }
    mesh = meshio.Mesh(points, cells, point_data=point_data)
    with tempfile.TemporaryDirectory(prefix="globemill-") as tmp:
        path = Path(tmp) / f"mesh.{fmt}"
        if fmt == "ply":
            meshio.write(path, mesh, file_format="ply", binary=True)
        else:
            meshio.write(path, mesh, file_format="obj")
        data = path.read_bytes()
    if fmt == "obj":
        return _finish_obj(data, len(tris), _header(result, level))
    return _finish_ply(data, _header(result, level))


def _finish_obj(data: bytes, ntris: int, header: str) -> bytes:
    """Swap meshio's timestamp line for `header`; make faces reference their normals."""
    text = data.decode("ascii")
    first, rest = text.split("\n", 1)
    if not first.startswith("#"):
        raise RuntimeError("meshio's OBJ no longer starts with a comment line")
    at = rest.find("\nf ")
    if ntris == 0 or at < 0:
        return f"# {header}\n{rest}".encode("ascii")
    head, faces = rest[: at + 1], rest[at + 1 :]
    lines = faces.splitlines()
    out = []
    for line in lines:
        _, a, b, c = line.split()
        out.append(f"f {a}//{a} {b}//{b} {c}//{c}\n")
    return (f"# {header}\n" + head + "".join(out)).encode("ascii")


def _finish_ply(data: bytes, header: str) -> bytes:
    """Swap meshio's timestamped comment for `header`; check the byte order is little-endian."""
    end = data.index(b"end_header\n") + len(b"end_header\n")
    lines = data[:end].decode("ascii").split("\n")
    if sys.byteorder != "little":  # pragma: no cover - every supported machine is little-endian
        raise RuntimeError("PLY export needs a little-endian machine")
    lines = [f"comment {header}" if ln.startswith("comment ") else ln for ln in lines]
    return "\n".join(lines).encode("ascii") + data[end:]


def mesh_path(outdir: Path, name: str, level: int, fmt: str) -> Path:
    """Where `bake --format` puts level `level`: OUTDIR/<name>.lod<level>.<fmt>."""
    return outdir / f"{name}.lod{level}.{fmt}"
