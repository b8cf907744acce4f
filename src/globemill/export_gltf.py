"""glTF 2.0 binary (.glb) writer: positions, normals, indices, vertex colors, application
attributes and morph targets; planet centre at the origin, Y up, metres. Layout per the glTF 2.0
specification (Khronos): a 12-byte header, a JSON chunk padded with spaces and a BIN chunk padded
with zeros, both to 4-byte boundaries; every buffer view starts on a 4-byte boundary and every
vertex attribute element is 4-byte aligned; every accessor carries min/max of the stored values."""

from __future__ import annotations

import json
import struct
from typing import Any

import numpy as np
import numpy.typing as npt

_ARRAY_BUFFER = 34962
_ELEMENT_ARRAY_BUFFER = 34963
_FLOAT = 5126
_BYTE = 5120
_SHORT = 5122
_UNSIGNED_BYTE = 5121
_UNSIGNED_SHORT = 5123
_UNSIGNED_INT = 5125


class _Buffer:
    def __init__(self) -> None:
        self.parts: list[bytes] = []
        self.size = 0
        self.views: list[dict[str, Any]] = []
        self.accessors: list[dict[str, Any]] = []

    def add(self, data: bytes, target: int | None, stride: int | None = None) -> int:
        pad = (-self.size) % 4
        if pad:
            self.parts.append(b"\0" * pad)
            self.size += pad
        view: dict[str, Any] = {"buffer": 0, "byteOffset": self.size, "byteLength": len(data)}
        if target is not None:
            view["target"] = target
        if stride is not None:
            view["byteStride"] = stride
        self.parts.append(data)
        self.size += len(data)
        self.views.append(view)
        return len(self.views) - 1

    def vec3(self, values: npt.NDArray[np.float64]) -> int:
        arr = np.ascontiguousarray(values, dtype="<f4")
        view = self.add(arr.tobytes(), _ARRAY_BUFFER)
        self.accessors.append(
            {
                "bufferView": view,
                "componentType": _FLOAT,
                "count": int(arr.shape[0]),
                "type": "VEC3",
                # bounds of the stored float32 values, as the specification requires
                "min": [float(x) for x in arr.min(axis=0)] if len(arr) else [0.0, 0.0, 0.0],
                "max": [float(x) for x in arr.max(axis=0)] if len(arr) else [0.0, 0.0, 0.0],
            }
        )
        return len(self.accessors) - 1

    def vec2(self, values: npt.ArrayLike) -> int:
        """A float32 VEC2 vertex attribute (TEXCOORD_n)."""
        arr = np.ascontiguousarray(values, dtype="<f4").reshape(-1, 2)
        view = self.add(arr.tobytes(), _ARRAY_BUFFER)
        self.accessors.append(
            {
                "bufferView": view,
                "componentType": _FLOAT,
                "count": int(arr.shape[0]),
                "type": "VEC2",
                "min": [float(x) for x in arr.min(axis=0)] if len(arr) else [0.0, 0.0],
                "max": [float(x) for x in arr.max(axis=0)] if len(arr) else [0.0, 0.0],
            }
        )
        return len(self.accessors) - 1

    def int_vec3(self, values: npt.NDArray[np.integer], *, normalized: bool) -> int:
        """A VEC3 of int16 (SHORT) or int8 (BYTE) per KHR_mesh_quantization, each element padded
        to a 4-byte stride (8 and 4 bytes) as glTF 2.0 wants vertex elements aligned; min/max hold
        the stored integers."""
        q = np.asarray(values)
        dt, comp = ("<i2", _SHORT) if q.dtype == np.int16 else ("<i1", _BYTE)
        size = np.dtype(dt).itemsize
        stride = 8 if size == 2 else 4
        padded = np.zeros((len(q), stride // size), dtype=dt)
        padded[:, :3] = q
        view = self.add(padded.tobytes(), _ARRAY_BUFFER, stride)
        acc: dict[str, Any] = {
            "bufferView": view,
            "componentType": comp,
            "count": int(q.shape[0]),
            "type": "VEC3",
            "min": [int(x) for x in q.min(axis=0)] if len(q) else [0, 0, 0],
            "max": [int(x) for x in q.max(axis=0)] if len(q) else [0, 0, 0],
        }
        if normalized:
            acc["normalized"] = True
        self.accessors.append(acc)
        return len(self.accessors) - 1

    def scalar(self, values: npt.ArrayLike) -> int:
        """A float32 SCALAR vertex attribute (application attributes such as _SLOPE)."""
        arr = np.ascontiguousarray(values, dtype="<f4").reshape(-1)
        view = self.add(arr.tobytes(), _ARRAY_BUFFER)
        self.accessors.append(
            {
                "bufferView": view,
                "componentType": _FLOAT,
                "count": int(arr.shape[0]),
                "type": "SCALAR",
                "min": [float(arr.min())] if len(arr) else [0.0],
                "max": [float(arr.max())] if len(arr) else [0.0],
            }
        )
        return len(self.accessors) - 1

    def color(self, rgb: npt.NDArray[np.float64]) -> int:
        """COLOR_0 as normalized unsigned byte VEC4 (linear RGB in 0..1, alpha 1): 4 bytes per
        vertex, each element 4-byte aligned. min/max hold the stored integers (the glTF 2.0
        specification: `normalized` has no effect on min/max)."""
        q = quantize_color(rgb)
        view = self.add(q.tobytes(), _ARRAY_BUFFER)
        self.accessors.append(
            {
                "bufferView": view,
                "componentType": _UNSIGNED_BYTE,
                "normalized": True,
                "count": int(q.shape[0]),
                "type": "VEC4",
                "min": [int(x) for x in q.min(axis=0)] if len(q) else [0, 0, 0, 0],
                "max": [int(x) for x in q.max(axis=0)] if len(q) else [0, 0, 0, 0],
            }
        )
        return len(self.accessors) - 1

    def indices(self, triangles: npt.NDArray[np.uint32], vertex_count: int) -> int:
        flat = np.ascontiguousarray(triangles).reshape(-1)
        small = vertex_count <= 65535
        arr = flat.astype("<u2" if small else "<u4")
        view = self.add(arr.tobytes(), _ELEMENT_ARRAY_BUFFER)
        self.accessors.append(
            {
                "bufferView": view,
                "componentType": _UNSIGNED_SHORT if small else _UNSIGNED_INT,
                "count": int(arr.shape[0]),
                "type": "SCALAR",
                "min": [int(arr.min())] if len(arr) else [0],
                "max": [int(arr.max())] if len(arr) else [0],
            }
        )
        return len(self.accessors) - 1


def quantize_color(rgb: npt.ArrayLike) -> npt.NDArray[np.uint8]:
    """(n, 3) linear RGB floats in 0..1 -> (n, 4) uint8 RGBA with alpha 255, rounded to nearest
    (the inverse of the glTF 2.0 normalized-integer rule f = c / 255)."""
    c = np.clip(np.asarray(rgb, dtype=np.float64).reshape(-1, 3), 0.0, 1.0)
    q = np.full((len(c), 4), 255, dtype=np.uint8)
    q[:, :3] = np.rint(c * 255.0).astype(np.uint8)
    return q


class GltfBuilder:
    """Collects meshes and nodes, then encodes one deterministic .glb (sorted JSON keys)."""

    def __init__(self) -> None:
        self.buf = _Buffer()
        self.meshes: list[dict[str, Any]] = []
        self.nodes: list[dict[str, Any]] = []
        self.materials: list[dict[str, Any]] = []
        self.extensions_used: set[str] = set()
        self.extensions_required: set[str] = set()

    def add_material(self, material: dict[str, Any]) -> int:
        self.materials.append(material)
        return len(self.materials) - 1

    def vec2_attribute(self, values: npt.ArrayLike) -> int:
        """Accessor of a float32 VEC2 vertex attribute (TEXCOORD_n)."""
        return self.buf.vec2(values)

    def quantized_attribute(self, values: npt.NDArray[np.integer], *, normalized: bool) -> int:
        """Accessor of an int16 / int8 VEC3 attribute (KHR_mesh_quantization)."""
        self.extensions_used.add("KHR_mesh_quantization")
        self.extensions_required.add("KHR_mesh_quantization")
        return self.buf.int_vec3(values, normalized=normalized)

    def scalar_attribute(self, values: npt.ArrayLike) -> int:
        """Accessor of a float32 SCALAR vertex attribute."""
        return self.buf.scalar(values)

    def color_attribute(self, rgb: npt.NDArray[np.float64]) -> int:
        """Accessor of a COLOR_0 attribute (normalized unsigned byte VEC4)."""
        return self.buf.color(rgb)

    def index_accessor(self, triangles: npt.NDArray[np.uint32], vertex_count: int) -> int:
        return self.buf.indices(triangles, vertex_count)

    def add_mesh(
        self,
        name: str,
        positions: npt.NDArray[np.float64],
        triangles: npt.NDArray[np.uint32],
        *,
        normals: npt.NDArray[np.float64] | None = None,
        morph_positions: npt.NDArray[np.float64] | None = None,
        attributes: dict[str, int] | None = None,
        material: int | None = None,
        extras: dict[str, Any] | None = None,
        morph_displacement: npt.NDArray[np.float64] | None = None,
    ) -> int:
        """A mesh with one triangle primitive; `morph_positions` become one morph target (the
        glTF target stores displacements: morph - position; or give `morph_displacement` as it
        is to be stored). `attributes` adds accessors made beforehand (COLOR_0, _SLOPE, ...) by
        semantic; a POSITION or NORMAL among them (quantized ones) replaces the float32 one."""
        attributes = dict(attributes or {})
        if "POSITION" in attributes:
            attributes_ = {"POSITION": attributes.pop("POSITION")}
        else:
            attributes_ = {"POSITION": self.buf.vec3(positions)}
        if "NORMAL" in attributes:
            attributes_["NORMAL"] = attributes.pop("NORMAL")
        elif normals is not None:
            attributes_["NORMAL"] = self.buf.vec3(normals)
        if attributes:
            attributes_.update(attributes)
        prim: dict[str, Any] = {
            "attributes": attributes_,
            "indices": self.buf.indices(triangles, int(positions.shape[0])),
            "mode": 4,
        }
        if material is not None:
            prim["material"] = material
        mesh: dict[str, Any] = {"name": name, "primitives": [prim]}
        if morph_displacement is not None:
            prim["targets"] = [{"POSITION": self.buf.vec3(morph_displacement)}]
            mesh["weights"] = [0.0]
        elif morph_positions is not None:
            # displacement of the float32 values as stored, so position + target is exact
            d = morph_positions.astype("<f4").astype(np.float64) - positions.astype("<f4").astype(
                np.float64
            )
            prim["targets"] = [{"POSITION": self.buf.vec3(d)}]
            mesh["weights"] = [0.0]
        if extras:
            mesh["extras"] = extras
        self.meshes.append(mesh)
        return len(self.meshes) - 1

    def add_node(
        self,
        name: str,
        mesh: int,
        *,
        extensions: dict[str, Any] | None = None,
        extras: dict[str, Any] | None = None,
        translation: list[float] | None = None,
        scale: list[float] | None = None,
    ) -> int:
        node: dict[str, Any] = {"name": name, "mesh": mesh}
        if translation is not None:
            node["translation"] = translation
        if scale is not None:
            node["scale"] = scale
        if extensions:
            node["extensions"] = extensions
            self.extensions_used.update(extensions)
        if extras:
            node["extras"] = extras
        self.nodes.append(node)
        return len(self.nodes) - 1

    def to_glb(
        self, scene_nodes: list[int], *, scene_name: str, extras: dict[str, Any] | None = None
    ) -> bytes:
        doc: dict[str, Any] = {
            "asset": {"version": "2.0", "generator": "globemill"},
            "scene": 0,
            "scenes": [{"name": scene_name, "nodes": scene_nodes}],
            "nodes": self.nodes,
            "meshes": self.meshes,
            "accessors": self.buf.accessors,
            "bufferViews": self.buf.views,
            "buffers": [{"byteLength": self.buf.size}],
        }
        if self.materials:
            doc["materials"] = self.materials
        if self.extensions_used:
            doc["extensionsUsed"] = sorted(self.extensions_used)
        if self.extensions_required:
            doc["extensionsRequired"] = sorted(self.extensions_required)
        if extras:
            doc["scenes"][0]["extras"] = extras
        body = b"".join(self.buf.parts)
        body += b"\0" * ((-len(body)) % 4)
        js = json.dumps(doc, separators=(",", ":"), sort_keys=True).encode("utf-8")
        js += b" " * ((-len(js)) % 4)
        total = 12 + 8 + len(js) + 8 + len(body)
        return b"".join(
            [
                struct.pack("<4sII", b"glTF", 2, total),
                struct.pack("<I4s", len(js), b"JSON"),
                js,
                struct.pack("<I4s", len(body), b"BIN\0"),
                body,
            ]
        )
