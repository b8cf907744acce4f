# Godot 3: load every imported .glb named in res://files.txt, instance it and write what the
# engine shows to res://result.json: per file, the MeshInstances visible and hidden by level,
# triangles, the surface arrays present (UV, UV2, color), blend shapes, metadata (extras), the
# value ranges of UV/UV2 and the distance of visible vertices from the centre. With a line
# "shot <file> <png>" in files.txt, that file is also drawn and saved as a picture.
extends SceneTree

var out = {"client": "Godot", "version": Engine.get_version_info()["string"], "files": {}}


func level_of(name):
	var rx = RegEx.new()
	rx.compile("lod(\\d+)")
	var m = rx.search(name)
	return m.get_string(1) if m else "-1"


func widen(ranges, key, lo, hi):
	if ranges.has(key):
		for i in range(lo.size()):
			lo[i] = min(lo[i], ranges[key][0][i])
			hi[i] = max(hi[i], ranges[key][1][i])
	ranges[key] = [lo, hi]


func range_of_v2(arr):
	var lo = [INF, INF]
	var hi = [-INF, -INF]
	for p in arr:
		lo[0] = min(lo[0], p.x)
		lo[1] = min(lo[1], p.y)
		hi[0] = max(hi[0], p.x)
		hi[1] = max(hi[1], p.y)
	return [lo, hi]


func mesh_instances(node, acc):
	if node is MeshInstance:
		acc.append(node)
	for c in node.get_children():
		mesh_instances(c, acc)
	return acc


func measure(path):
	var scene = load(path)
	if scene == null:
		return {"error": "load failed"}
	var root = scene.instance()
	get_root().add_child(root)
	var rec = {"visible": {}, "hidden": {}, "ranges": {}}
	var kept = {"custom": [], "uv_sets": 0, "color": false, "color_in_material": false,
		"morph": 0, "extras": false}
	for mi in mesh_instances(root, []):
		var k = level_of(mi.name)
		if not mi.is_visible_in_tree():
			rec["hidden"][k] = rec["hidden"].get(k, 0) + 1
			continue
		var mesh = mi.mesh
		var arrays = mesh.surface_get_arrays(0)
		var idx = arrays[Mesh.ARRAY_INDEX]
		var verts = arrays[Mesh.ARRAY_VERTEX]
		var lv = rec["visible"].get(k, {"meshes": 0, "triangles": 0})
		lv["meshes"] += 1
		lv["triangles"] += (idx.size() if idx else verts.size()) / 3
		rec["visible"][k] = lv
		var xf = mi.global_transform
		var rlo = INF
		var rhi = -INF
		for v in verts:
			var r = (xf.xform(v)).length()
			rlo = min(rlo, r)
			rhi = max(rhi, r)
		widen(rec["ranges"], "radius", [rlo], [rhi])
		var uvs = 0
		if arrays[Mesh.ARRAY_TEX_UV]:
			uvs = 1
			var r0 = range_of_v2(arrays[Mesh.ARRAY_TEX_UV])
			widen(rec["ranges"], "uv0", r0[0], r0[1])
		if arrays[Mesh.ARRAY_TEX_UV2]:
			uvs = 2
			var r1 = range_of_v2(arrays[Mesh.ARRAY_TEX_UV2])
			widen(rec["ranges"], "uv1", r1[0], r1[1])
		kept["uv_sets"] = max(kept["uv_sets"], uvs)
		if arrays[Mesh.ARRAY_COLOR]:
			kept["color"] = true
		var mat = mi.get_surface_material(0)
		if mat == null:
			mat = mesh.surface_get_material(0)
		if mat is SpatialMaterial and mat.vertex_color_use_as_albedo:
			kept["color_in_material"] = true
		kept["morph"] = max(kept["morph"], mesh.get_blend_shape_count())
		if mi.get_meta_list().size() > 0 or mesh.get_meta_list().size() > 0:
			kept["extras"] = true
	rec["kept"] = kept
	return [rec, root]


func shoot(path, png):
	var root = load(path).instance()
	get_root().add_child(root)
	var cam = Camera.new()
	cam.far = 20000.0
	get_root().add_child(cam)
	cam.look_at_from_position(Vector3(2700, 2100, 5400), Vector3.ZERO, Vector3.UP)
	cam.current = true
	var sun = DirectionalLight.new()
	get_root().add_child(sun)
	sun.look_at_from_position(Vector3(1, 1, 2), Vector3.ZERO, Vector3.UP)
	for i in range(8):
		yield(self, "idle_frame")
	var img = get_root().get_texture().get_data()
	img.flip_y()
	img.save_png(png)


func _init():
	var f = File.new()
	f.open("res://files.txt", File.READ)
	var shots = []
	while not f.eof_reached():
		var line = f.get_line().strip_edges()
		if line.begins_with("shot "):
			shots.append(line.split(" "))
		elif line != "":
			var got = measure("res://" + line)
			out["files"][line] = got[0]
			got[1].queue_free()
	f.close()
	var w = File.new()
	w.open("res://result.json", File.WRITE)
	w.store_string(JSON.print(out, " "))
	w.close()
	for s in shots:
		yield(self, "idle_frame")
		yield(shoot("res://" + s[1], s[2]), "completed")
	quit()
