"""Blender (its Python module, bpy) imports each .glb of a layout folder and reports what it shows.

    .venv-bpy/bin/python benchmarks/clients/blender_measure.py LAYOUTDIR RESULT.json [SHOT.png]

LAYOUTDIR is the folder make_layouts.py wrote (expected.json names the files). The result holds,
per file, the common record of clients.py (levels visible and hidden, triangles, the value
ranges of the channels the import kept, the distances of visible vertices from the centre).
With SHOT.png, the default single file is rendered (Workbench, vertex colors) to that picture.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import bpy
import numpy as np

LEVEL = re.compile(r"lod(\d+)")


def level_of(obj: object) -> int:
    m = LEVEL.search(obj.name)
    return int(m.group(1)) if m else -1


def values(coll: object, field: str, width: int) -> np.ndarray:
    out = np.empty(len(coll) * width, dtype=np.float64)
    coll.foreach_get(field, out)
    return out.reshape(-1, width)


def widen(ranges: dict, key: str, arr: np.ndarray) -> None:
    if arr.size == 0:
        return
    lo, hi = arr.min(axis=0).tolist(), arr.max(axis=0).tolist()
    if key in ranges:
        lo = np.minimum(lo, ranges[key][0]).tolist()
        hi = np.maximum(hi, ranges[key][1]).tolist()
    ranges[key] = [lo, hi]


def color_in_material(mesh: object) -> bool:
    for mat in mesh.materials:
        if mat and mat.use_nodes:
            for node in mat.node_tree.nodes:
                if node.type in {"VERTEX_COLOR", "ATTRIBUTE"} and any(
                    o.is_linked for o in node.outputs
                ):
                    return True
    return False


def measure(path: str) -> dict:
    bpy.ops.wm.read_factory_settings(use_empty=True)
    bpy.ops.import_scene.gltf(filepath=path)
    layer = bpy.context.view_layer
    meshes = [o for o in bpy.data.objects if o.type == "MESH"]
    visible = [o for o in meshes if o.name in layer.objects and o.visible_get()]
    rec: dict = {"visible": {}, "hidden": {}, "ranges": {}, "kept": {}}
    kept = {
        "custom": set(),
        "uv_sets": 0,
        "color": False,
        "color_in_material": False,
        "morph": 0,
        "extras": False,
    }
    for o in meshes:
        if o not in visible:
            k = str(level_of(o))
            rec["hidden"][k] = rec["hidden"].get(k, 0) + 1
    for o in visible:
        m = o.data
        m.calc_loop_triangles()
        k = str(level_of(o))
        lv = rec["visible"].setdefault(k, {"meshes": 0, "triangles": 0})
        lv["meshes"] += 1
        lv["triangles"] += len(m.loop_triangles)
        co = values(m.vertices, "co", 3)
        mw = np.array(o.matrix_world)
        world = co @ mw[:3, :3].T + mw[:3, 3]
        widen(rec["ranges"], "radius", np.linalg.norm(world, axis=1)[:, None])
        for a in m.attributes:
            if a.name.startswith("_") and a.data_type == "FLOAT":
                kept["custom"].add(a.name)
                widen(rec["ranges"], a.name, values(a.data, "value", 1))
        for i, uv in enumerate(m.uv_layers):
            widen(rec["ranges"], f"uv{i}", values(uv.data, "uv", 2))
        kept["uv_sets"] = max(kept["uv_sets"], len(m.uv_layers))
        kept["color"] |= len(m.color_attributes) > 0
        kept["color_in_material"] |= color_in_material(m)
        kept["morph"] = max(kept["morph"], len(m.shape_keys.key_blocks) - 1 if m.shape_keys else 0)
        # glTF extras become custom properties of the object (node) and of the mesh
        kept["extras"] |= "chunk" in m.keys() or "chunk" in o.keys()
    kept["custom"] = sorted(kept["custom"])
    rec["kept"] = kept
    return rec


def shoot(path: str, png: str) -> None:
    bpy.ops.wm.read_factory_settings(use_empty=True)
    bpy.ops.import_scene.gltf(filepath=path)
    scene = bpy.context.scene
    scene.render.engine = "BLENDER_WORKBENCH"
    scene.display.shading.color_type = "VERTEX"
    scene.render.resolution_x, scene.render.resolution_y = 640, 480
    cam = bpy.data.objects.new("cam", bpy.data.cameras.new("cam"))
    scene.collection.objects.link(cam)
    # the view of the other clients: glTF (2700, 2100, 5400) is Blender's (2700, -5400, 2100)
    cam.location = (2700.0, -5400.0, 2100.0)
    direction = -np.array(cam.location)
    import mathutils

    cam.rotation_euler = mathutils.Vector(direction.tolist()).to_track_quat("-Z", "Y").to_euler()
    cam.data.clip_end = 20000.0
    scene.camera = cam
    scene.render.filepath = png
    bpy.ops.render.render(write_still=True)


def main(argv: list[str]) -> None:
    root = Path(argv[0])
    expected = json.loads((root / "expected.json").read_text())
    out = {"client": "Blender", "version": bpy.app.version_string, "files": {}}
    for rel in expected["files"]:
        out["files"][rel] = measure(str(root / rel))
    Path(argv[1]).write_text(json.dumps(out, indent=1) + "\n")
    if len(argv) > 2:
        shoot(str(root / "float" / Path(rel).name.split(".")[0]) + ".glb", argv[2])


if __name__ == "__main__":
    main(sys.argv[sys.argv.index("--") + 1 :] if "--" in sys.argv else sys.argv[1:])
