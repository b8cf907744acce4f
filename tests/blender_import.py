"""Run by Blender's Python module (bpy): import each .glb named on the command line into an empty
scene and print, per file, what Blender shows: the mesh objects visible in the view layer and
every mesh object, with vertex and triangle counts (JSON on the last line of stdout)."""

from __future__ import annotations

import json
import sys

import bpy


def bounds(o: object) -> list[list[float]]:
    w = [o.matrix_world @ v.co for v in o.data.vertices]
    return [[min(p[i] for p in w) for i in range(3)], [max(p[i] for p in w) for i in range(3)]]


def counts(objs: list) -> dict:
    out = {}
    for o in objs:
        m = o.data
        m.calc_loop_triangles()
        out[o.name] = {
            "mesh": m.name,
            "vertices": len(m.vertices),
            "triangles": len(m.loop_triangles),
            "shape_keys": len(m.shape_keys.key_blocks) if m.shape_keys else 0,
            "attributes": sorted(a.name for a in m.attributes),
            "uv_layers": [u.name for u in m.uv_layers],
            # world-space bounds (Blender is Z up: its (x, y, z) is glTF's (x, -z, y))
            "bounds": bounds(o),
        }
    return out


def main(paths: list[str]) -> None:
    result = {}
    for path in paths:
        bpy.ops.wm.read_factory_settings(use_empty=True)
        bpy.ops.import_scene.gltf(filepath=path)
        layer = bpy.context.view_layer
        meshes = [o for o in bpy.data.objects if o.type == "MESH"]
        visible = [o for o in meshes if o.name in layer.objects and o.visible_get()]
        result[path] = {
            "blender": bpy.app.version_string,
            "visible": counts(visible),
            "hidden": sorted(o.name for o in meshes if o not in visible),
        }
    print(json.dumps(result))


if __name__ == "__main__":
    argv = sys.argv[sys.argv.index("--") + 1 :] if "--" in sys.argv else sys.argv[1:]
    main(argv)
