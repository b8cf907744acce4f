"""The .glb files an engine loads: the Khronos validator's verdict, round trips through trimesh and
pygltflib, the rules of the glTF 2.0 specification (accessor bounds, alignment, index types,
unit normals), the documented layout (MSFT_lod, seams, attributes), OBJ/PLY through meshio, and
atomic output under interruption."""

from __future__ import annotations

import json
import os
import shutil
import signal
import struct
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import trimesh

import globemill
from globemill.attributes import vertex_attributes
from globemill.export_gltf import GltfBuilder, quantize_color
from globemill.gpu_buffers import draw_buffers
from globemill.output import GlbOptions, collision_glb_for, glb_for, write_outputs

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "examples" / "pebblemoor.toml"
VALIDATE = Path(__file__).resolve().parent / "gltf_validate.mjs"

# glTF 2.0 specification, "Accessor data types" and "GLB file format"
COMPONENT = {5120: "<i1", 5121: "<u1", 5122: "<i2", 5123: "<u2", 5125: "<u4", 5126: "<f4"}
WIDTH = {"SCALAR": 1, "VEC2": 2, "VEC3": 3, "VEC4": 4}


# ---- reading a .glb by the specification ---------------------------------------------------


class Glb:
    def __init__(self, data: bytes) -> None:
        magic, version, length = struct.unpack_from("<4sII", data, 0)
        assert (magic, version, length) == (b"glTF", 2, len(data))
        jlen, jtype = struct.unpack_from("<I4s", data, 12)
        assert jtype == b"JSON"
        self.json_length = jlen
        self.doc: dict[str, Any] = json.loads(data[20 : 20 + jlen])
        blen, btype = struct.unpack_from("<I4s", data, 20 + jlen)
        assert btype == b"BIN\0"
        self.bin_length = blen
        self.bin = data[28 + jlen : 28 + jlen + blen]

    def accessor(self, i: int) -> np.ndarray:
        acc = self.doc["accessors"][i]
        view = self.doc["bufferViews"][acc["bufferView"]]
        dt = np.dtype(COMPONENT[acc["componentType"]])
        width = WIDTH[acc["type"]]
        stride = view.get("byteStride", dt.itemsize * width)
        start = view["byteOffset"] + acc.get("byteOffset", 0)
        raw = np.frombuffer(self.bin, np.uint8, count=view["byteLength"], offset=view["byteOffset"])
        rows = np.lib.stride_tricks.as_strided(
            np.frombuffer(
                self.bin, dt, offset=start, count=(acc["count"] - 1) * stride // dt.itemsize + width
            ),
            shape=(acc["count"], width),
            strides=(stride, dt.itemsize),
        )
        assert raw.size >= (acc["count"] - 1) * stride + dt.itemsize * width
        return np.array(rows)


def read(path: Path) -> Glb:
    return Glb(path.read_bytes())


# ---- worlds ----------------------------------------------------------------------------------


def random_world(seed: int) -> dict[str, Any]:
    """A small random world: hills, mesas (some with sheer walls), craters and noise, random
    layer bands, random level and chunk settings, stitched or skirted seams."""
    rng = np.random.default_rng(seed)
    radius = float(rng.uniform(200.0, 400.0))
    features: list[dict[str, Any]] = [
        {"kind": "noise", "amplitude_m": 1.0, "frequency_per_m": 0.02, "octaves": 2, "seed": seed}
    ]
    for _ in range(int(rng.integers(3, 7))):
        lat, lon = float(rng.uniform(-80, 80)), float(rng.uniform(-180, 180))
        kind = rng.choice(["hill", "mesa", "crater"])
        if kind == "hill":
            f = {"amplitude_m": float(rng.uniform(-15, 25)) or 1.0, "sigma_m": 30.0}
        elif kind == "mesa":
            f = {"height_m": 12.0, "radius_m": 25.0, "wall_width_m": float(rng.choice([0.0, 8.0]))}
        else:
            f = {"radius_m": 30.0, "depth_m": 8.0, "rim_height_m": 3.0, "rim_width_m": 12.0}
        features.append({"kind": str(kind), "lat_deg": lat, "lon_deg": lon, **f})
    cut = sorted(rng.uniform(-5, 15, size=2).tolist())
    return {
        "name": f"random{seed}",
        "radius_m": radius,
        "tolerance_m": 1.5,
        "lod": {
            "levels": int(rng.integers(2, 4)),
            "chunk_level": int(rng.integers(0, 2)),
            "seams": "skirt" if seed % 2 else "stitch",
        },
        "features": features,
        "layers": [
            {"name": "wall", "color": rng.uniform(0, 1, 3).tolist(), "slope_deg": [35.0, 90.0]},
            {"name": "low", "color": rng.uniform(0, 1, 3).tolist(), "altitude_m": [-1e9, cut[0]]},
            {"name": "mid", "color": rng.uniform(0, 1, 3).tolist(), "altitude_m": cut},
        ],
    }


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[globemill.BakeResult, Path]:
    spec = globemill.load_spec(DEMO)
    result = globemill.bake(spec, tolerance_m=2.0)
    out = tmp_path_factory.mktemp("demo")
    write_outputs(result, out, formats=("obj", "ply"), level=1)
    return result, out


@pytest.fixture(scope="module")
def randoms(tmp_path_factory: pytest.TempPathFactory) -> list[tuple[globemill.BakeResult, Path]]:
    out = []
    for seed in (3, 8):
        spec = globemill.parse_spec(random_world(seed))
        result = globemill.bake(spec)
        d = tmp_path_factory.mktemp(f"random{seed}")
        write_outputs(result, d)
        out.append((result, d))
    return out


# ---- the Khronos glTF validator ----------------------------------------------------------------


def validator_command() -> list[str]:
    node = shutil.which("node")
    pkg = os.environ.get("GLOBEMILL_GLTF_VALIDATOR") or str(
        ROOT / ".ci" / "node" / "node_modules" / "gltf-validator"
    )
    missing = None
    if node is None:
        missing = "node is not installed"
    elif not Path(pkg).is_dir():
        missing = f"the npm package gltf-validator is not at {pkg} (set GLOBEMILL_GLTF_VALIDATOR)"
    if missing:
        if os.environ.get("CI"):
            pytest.fail(f"glTF validator unavailable in CI: {missing}")
        pytest.skip(f"glTF validator unavailable: {missing}; .ci/run installs it")
    os.environ["GLOBEMILL_GLTF_VALIDATOR"] = pkg
    return [str(node), str(VALIDATE)]


def validate(paths: list[Path]) -> list[dict[str, Any]]:
    cmd = validator_command()
    res = subprocess.run(
        [*cmd, *map(str, paths)], capture_output=True, text=True, timeout=600, env=os.environ
    )
    assert res.returncode == 0, res.stderr
    return json.loads(res.stdout)


# infos the layout produces on purpose: seam index accessors no primitive draws and coarser LOD
# nodes reached only through MSFT_lod (UNUSED_OBJECT), and MSFT_lod itself, a vendor extension
# the validator does not check (UNSUPPORTED_EXTENSION)
EXPECTED_INFOS = {"UNUSED_OBJECT", "UNSUPPORTED_EXTENSION"}


def assert_clean(report: dict[str, Any]) -> None:
    issues = report["issues"]
    bad = [m for m in issues["messages"] if m["severity"] <= 1]
    assert issues["numErrors"] == 0 and issues["numWarnings"] == 0, bad[:10]
    codes = {m["code"] for m in issues["messages"]}
    assert codes <= EXPECTED_INFOS, codes


def test_validator_reports_no_errors_for_the_demo(demo: tuple[globemill.BakeResult, Path]) -> None:
    result, out = demo
    reports = validate([out / "pebblemoor.glb", out / "pebblemoor.collision.glb"])
    for r in reports:
        assert_clean(r)
    main = reports[0]["info"]
    assert main["hasMorphTargets"] is True
    assert main["drawCallCount"] == len(result.levels) * len(result.levels[0].chunks)
    assert main["totalTriangleCount"] == sum(
        len(ch.triangles) for lv in result.levels for ch in lv.chunks
    )


def test_validator_reports_no_errors_for_random_worlds(
    randoms: list[tuple[globemill.BakeResult, Path]],
) -> None:
    paths = [
        d / f"{r.spec.name}{suffix}" for r, d in randoms for suffix in (".glb", ".collision.glb")
    ]
    for r in validate(paths):
        assert_clean(r)


# ---- the glTF 2.0 specification's rules ------------------------------------------------------


def every_glb(demo: Any, randoms: Any) -> list[Path]:
    files = [demo[1] / "pebblemoor.glb", demo[1] / "pebblemoor.collision.glb"]
    return files + [d / f"{r.spec.name}.glb" for r, d in randoms]


def test_accessor_bounds_and_alignment_follow_the_specification(demo: Any, randoms: Any) -> None:
    for path in every_glb(demo, randoms):
        g = read(path)
        # GLB: both chunks padded to 4 bytes (glTF 2.0, "GLB file format specification")
        assert g.json_length % 4 == 0 and g.bin_length % 4 == 0
        for view in g.doc["bufferViews"]:
            assert view["byteOffset"] % 4 == 0
        for i, acc in enumerate(g.doc["accessors"]):
            data = g.accessor(i)
            # accessor.min/max are the true per-component bounds of the stored values
            assert acc["min"] == data.min(axis=0).tolist(), (path.name, i)
            assert acc["max"] == data.max(axis=0).tolist(), (path.name, i)
            view = g.doc["bufferViews"][acc["bufferView"]]
            if view.get("target") == 34962:  # vertex attributes: elements 4-byte aligned
                size = np.dtype(COMPONENT[acc["componentType"]]).itemsize * WIDTH[acc["type"]]
                assert view.get("byteStride", size) % 4 == 0


def test_indices_are_16_bit_where_they_fit() -> None:
    # glTF 2.0: UNSIGNED_SHORT indices address up to 65535 vertices (common practice: use them
    # whenever they fit, half the bytes)
    for n in (3, 65535, 65536, 70000):
        b = GltfBuilder()
        pos = np.zeros((n, 3))
        pos[:, 0] = np.arange(n)
        pos[:, 1] = np.arange(n) % 7
        tris = np.array([[0, 1, 2], [n - 3, n - 2, n - 1]], np.uint32)
        b.add_node("m", b.add_mesh("m", pos, tris))
        g = Glb(b.to_glb([0], scene_name="s"))
        acc = g.doc["accessors"][g.doc["meshes"][0]["primitives"][0]["indices"]]
        assert acc["componentType"] == (5123 if n <= 65535 else 5125)
        np.testing.assert_array_equal(
            g.accessor(g.doc["meshes"][0]["primitives"][0]["indices"]).reshape(-1, 3), tris
        )


def test_demo_uses_16_bit_indices_and_unit_normals(demo: Any) -> None:
    g = read(demo[1] / "pebblemoor.glb")
    for mesh in g.doc["meshes"]:
        prim = mesh["primitives"][0]
        assert g.doc["accessors"][prim["indices"]]["componentType"] == 5123
        n = g.accessor(prim["attributes"]["NORMAL"]).astype(np.float64)
        # glTF 2.0: NORMAL is a unit XYZ vector (the validator allows 5e-4; float32 gives ~1e-7)
        assert np.abs(np.linalg.norm(n, axis=1) - 1).max() < 1e-6


def test_planet_centre_at_origin_y_up_metres(demo: Any) -> None:
    result, out = demo
    g = read(out / "pebblemoor.glb")
    pos = np.concatenate(
        [g.accessor(m["primitives"][0]["attributes"]["POSITION"]) for m in g.doc["meshes"]]
    ).astype(np.float64)
    fld = globemill.field(result.spec)
    # every vertex on the ground: |p| = R + H(p/|p|), planet centre at the origin (float32 grid)
    r = np.linalg.norm(pos, axis=1)
    assert np.abs(r - result.spec.radius_m - fld.height(pos)).max() < 1e-3
    # Y up: docs/terrain.md puts (90 deg, .) on +Y, where the demo's 60 m "Cairn Top" stands
    top = pos[np.argmax(pos[:, 1])]
    assert top[1] == pytest.approx(
        result.spec.radius_m + fld.height(np.array([[0, 1.0, 0]]))[0], abs=2.0
    )


# ---- round trips -------------------------------------------------------------------------------


def test_trimesh_loads_every_chunk_and_level_exactly(demo: Any) -> None:
    result, out = demo
    scene = trimesh.load(out / "pebblemoor.glb", process=False, force="scene")
    every = vertex_attributes(result.spec, result.directions)
    for lv in result.levels:
        for ch in lv.chunks[::7]:
            # the chunk as written: vertex cache and fetch order (tests/test_gpu_buffers.py)
            d = draw_buffers(ch)
            m = scene.geometry[f"chunk{ch.chunk}.lod{lv.level}"]
            np.testing.assert_array_equal(m.vertices, d.positions.astype(np.float32))
            np.testing.assert_array_equal(m.faces, d.triangles[: len(ch.triangles)])
            np.testing.assert_array_equal(
                m.vertex_normals, d.normals.astype(np.float32).astype(np.float64)
            )
            att = every.take(ch.vertex_ids[d.order])
            va = {k: np.asarray(v).reshape(-1) for k, v in m.vertex_attributes.items()}
            np.testing.assert_array_equal(va["_SLOPE"], att.slope_deg.astype(np.float32))
            np.testing.assert_array_equal(va["_ALTITUDE"], att.altitude_m.astype(np.float32))
            np.testing.assert_array_equal(va["_LAYER"], att.layer.astype(np.float32))
            assert m.metadata["chunk"] == ch.chunk and m.metadata["level"] == lv.level


def test_pygltflib_reads_the_layout_back(
    randoms: list[tuple[globemill.BakeResult, Path]],
) -> None:
    # the small random worlds (stitched and skirted seams): pygltflib parses slowly
    pygltflib = pytest.importorskip("pygltflib")
    for result, out in randoms:
        check_layout_with_pygltflib(pygltflib, result, out / f"{result.spec.name}.glb")


def check_layout_with_pygltflib(pygltflib: Any, result: globemill.BakeResult, path: Path) -> None:
    gl = pygltflib.GLTF2().load(str(path))
    g = read(path)
    nlev = len(result.levels)
    assert gl.asset.version == "2.0"
    assert "MSFT_lod" in gl.extensionsUsed and not gl.extensionsRequired
    roots = gl.scenes[gl.scene].nodes
    assert len(roots) == len(result.levels[0].chunks)
    fld = globemill.field(result.spec)
    for c, root in enumerate(roots):
        node = gl.nodes[root]
        chain = [root, *node.extensions["MSFT_lod"]["ids"]]
        assert len(chain) == nlev
        hints = node.extras["MSFT_screencoverage"]
        # MSFT_lod: one coverage per level, decreasing, the last the cull threshold (0: never)
        assert len(hints) == nlev and hints[-1] == 0.0
        assert all(1.0 >= a >= b >= 0.0 for a, b in zip(hints, hints[1:], strict=False))
        for k, n in enumerate(chain):
            mesh = gl.meshes[gl.nodes[n].mesh]
            ch = result.levels[k].chunks[c]
            d = draw_buffers(ch)
            assert mesh.extras["chunk"] == c and mesh.extras["level"] == k
            prim = mesh.primitives[0]
            assert gl.materials[prim.material].pbrMetallicRoughness.metallicFactor == 0.0
            pos = g.accessor(prim.attributes.POSITION)
            np.testing.assert_array_equal(pos, d.positions.astype(np.float32))
            tris = g.accessor(prim.indices).reshape(-1, 3)
            np.testing.assert_array_equal(tris, d.triangles)
            assert mesh.extras.get("skirt_triangles", 0) == len(ch.skirt)
            # skirt vertices hang straight below the ground: same direction, same attributes
            att = vertex_attributes(result.spec, d.positions, fld)
            np.testing.assert_array_equal(
                g.accessor(prim.attributes._SLOPE).reshape(-1), att.slope_deg.astype(np.float32)
            )
            np.testing.assert_array_equal(
                g.accessor(prim.attributes._LAYER).reshape(-1), att.layer.astype(np.float32)
            )
            col = g.accessor(prim.attributes.COLOR_0)
            np.testing.assert_array_equal(col, quantize_color(att.color))
            # normalized unsigned bytes: f = c / 255 (glTF 2.0), so colors within half a step
            assert np.abs(col[:, :3] / 255.0 - att.color).max() <= 0.5 / 255 + 1e-12
            if k + 1 < nlev:
                disp = g.accessor(prim.targets[0]["POSITION"]).astype(np.float64)
                morph = pos.astype(np.float64) + disp
                assert np.abs(morph - d.morph).max() < 1e-3
                assert mesh.extras["targetNames"] == ["coarser"]
            else:
                assert not prim.targets
            for mask, acc in mesh.extras.get("seams", {}).items():
                np.testing.assert_array_equal(g.accessor(acc).reshape(-1, 3), d.stitched[int(mask)])
            assert set(mesh.extras.get("seams", {})) == {str(m) for m in ch.stitched}
    extras = gl.scenes[gl.scene].extras
    assert [t["name"] for t in extras["layers"]] == [lay.name for lay in result.spec.layers]
    assert extras["no_layer"] == 255


def test_demo_colors_and_attributes_read_back(demo: Any) -> None:
    result, out = demo
    g = read(out / "pebblemoor.glb")
    every = vertex_attributes(result.spec, result.directions)
    for mesh in g.doc["meshes"]:
        ch = result.levels[mesh["extras"]["level"]].chunks[mesh["extras"]["chunk"]]
        attrs = mesh["primitives"][0]["attributes"]
        att = every.take(ch.vertex_ids[draw_buffers(ch).order])
        np.testing.assert_array_equal(g.accessor(attrs["COLOR_0"]), quantize_color(att.color))
        np.testing.assert_array_equal(
            g.accessor(attrs["_ALTITUDE"]).reshape(-1), att.altitude_m.astype(np.float32)
        )
        assert mesh["primitives"][0]["material"] == 0
    assert g.doc["materials"][0]["pbrMetallicRoughness"]["metallicFactor"] == 0.0


def test_seam_variants_found_by_chunk_level_and_edge_close_the_border(demo: Any) -> None:
    # the lookup docs/gltf.md documents: chunk c, level k, edge i (opposite corner i, neighbour
    # extras.neighbors[i]) one level coarser -> draw the first interior_triangles indices plus
    # seams[str(1 << i)]; its border along that edge must be the coarser neighbour's border
    # (welded by exact float32 positions, the export's contract), edge for edge
    result, out = demo
    g = read(out / "pebblemoor.glb")
    meshes = {(m["extras"]["chunk"], m["extras"]["level"]): m for m in g.doc["meshes"]}

    def load(c: int, k: int) -> tuple[np.ndarray, np.ndarray, dict[str, Any]]:
        m = meshes[(c, k)]
        prim = m["primitives"][0]
        return (
            g.accessor(prim["attributes"]["POSITION"]),
            g.accessor(prim["indices"]).reshape(-1, 3),
            m["extras"],
        )

    def border(pos: np.ndarray, tris: np.ndarray) -> set[tuple[bytes, bytes]]:
        e = np.concatenate([tris[:, [0, 1]], tris[:, [1, 2]], tris[:, [2, 0]]])
        key = np.sort(e, axis=1)
        _, inv, cnt = np.unique(key, axis=0, return_inverse=True, return_counts=True)
        once = e[cnt[inv.reshape(-1)] == 1]
        return {(pos[a].tobytes(), pos[b].tobytes()) for a, b in once}

    checked = 0
    nlev = len(result.levels)
    for c in range(0, len(result.levels[0].chunks), 5):
        for k in range(nlev - 1):
            pos, tris, ex = load(c, k)
            for i, nb in enumerate(ex["neighbors"]):
                seam = ex.get("seams", {}).get(str(1 << i))
                variant = tris[: ex["interior_triangles"]]
                if seam is not None:
                    variant = np.concatenate([variant, g.accessor(seam).reshape(-1, 3)])
                npos, ntris, _ = load(nb, k + 1)
                mine = border(pos, variant)
                theirs = border(npos, ntris)
                shared = {p.tobytes() for p in npos}
                along = {(a, b) for a, b in mine if a in shared and b in shared}
                # every border edge of the variant on the shared edge is the neighbour's, reversed
                assert along and {(b, a) for a, b in along} <= theirs, (c, k, i)
                checked += 1
    assert checked > 0


def test_colliders_have_their_own_file(demo: Any) -> None:
    result, out = demo
    scene = trimesh.load(out / "pebblemoor.collision.glb", process=False, force="scene")
    g = read(out / "pebblemoor.collision.glb")
    assert len(g.doc["scenes"][0]["nodes"]) == len(result.colliders)
    for col in result.colliders[::9]:
        m = scene.geometry[f"collider{col.chunk}"]
        np.testing.assert_array_equal(m.vertices, col.positions.astype(np.float32))
        np.testing.assert_array_equal(m.faces, col.triangles)


def test_the_same_bake_gives_the_same_bytes(demo: Any) -> None:
    # the design's determinism: same spec, same bytes (timings live in the report only)
    result, out = demo
    assert glb_for(result) == (out / "pebblemoor.glb").read_bytes()
    col = (out / "pebblemoor.collision.glb").read_bytes()
    result.report["collision"]["seconds"] += 1.0
    try:
        assert collision_glb_for(result) == col
    finally:
        result.report["collision"]["seconds"] -= 1.0


# ---- OBJ and PLY through meshio ------------------------------------------------------------


def test_obj_and_ply_of_a_level_round_trip(demo: Any) -> None:
    meshio = pytest.importorskip("meshio")
    result, out = demo
    pos, tris = result.mesh(1)
    ids = np.flatnonzero(result.levels[1].present)
    att = vertex_attributes(result.spec, result.directions[ids])
    ply = meshio.read(out / "pebblemoor.lod1.ply")
    np.testing.assert_array_equal(ply.points, pos.astype(np.float32))
    np.testing.assert_array_equal(ply.cells_dict["triangle"], tris)
    np.testing.assert_array_equal(ply.point_data["layer"], att.layer)
    np.testing.assert_array_equal(ply.point_data["altitude"], att.altitude_m.astype(np.float32))
    rgb = np.stack([ply.point_data[c] for c in ("red", "green", "blue")], axis=1)
    np.testing.assert_array_equal(rgb, quantize_color(att.color)[:, :3])
    # a second, independent reader of PLY
    tm = trimesh.load(out / "pebblemoor.lod1.ply", process=False)
    np.testing.assert_array_equal(tm.vertices, pos.astype(np.float32))
    np.testing.assert_array_equal(tm.faces, tris)
    obj = meshio.read(out / "pebblemoor.lod1.obj")
    np.testing.assert_allclose(obj.points, pos.astype(np.float32), rtol=0, atol=0)
    np.testing.assert_array_equal(obj.cells_dict["triangle"], tris)
    text = (out / "pebblemoor.lod1.obj").read_text()
    assert text.startswith("# globemill")
    # faces reference their normals (Wavefront OBJ: f v//vn)
    first_face = next(line for line in text.splitlines() if line.startswith("f "))
    a, b, c = first_face.split()[1:]
    assert all(x.split("//")[0] == x.split("//")[1] for x in (a, b, c))
    tm_obj = trimesh.load(out / "pebblemoor.lod1.obj", process=False)
    assert len(tm_obj.faces) == len(tris)


def test_a_missing_level_is_refused(demo: Any, tmp_path: Path) -> None:
    result, _ = demo
    with pytest.raises(ValueError, match="level"):
        write_outputs(result, tmp_path, formats=("ply",), level=len(result.levels))
    assert list(tmp_path.iterdir()) == []


# ---- atomic output under interruption --------------------------------------------------------

SMALL = {
    "name": "pip",
    "radius_m": 300.0,
    "tolerance_m": 0.3,
    "features": [
        {"kind": "hill", "lat_deg": 10.0, "lon_deg": 20.0, "amplitude_m": 20.0, "sigma_m": 30.0},
        {"kind": "noise", "amplitude_m": 1.0, "frequency_per_m": 0.05, "octaves": 3, "seed": 5},
    ],
}

# a bake whose process receives `signal` in the middle of writing its outputs: the first
# temporary file is complete, the second is being flushed to disk
MID_WRITE = """
import os, signal, sys
from globemill.cli import main
calls = []
orig = os.fsync
def fsync(fd):
    calls.append(fd)
    if len(calls) == 2:
        os.kill(os.getpid(), getattr(signal, sys.argv[1]))
    return orig(fd)
os.fsync = fsync
sys.exit(main(sys.argv[2:]))
"""


def bake_cmd(spec: Path, out: Path, tolerance: str) -> list[str]:
    return ["bake", str(spec), "-o", str(out), "--tolerance-m", tolerance, "--quiet"]


@pytest.fixture()
def previous(tmp_path: Path) -> tuple[Path, Path, dict[str, bytes]]:
    spec = tmp_path / "pip.json"
    spec.write_text(json.dumps(SMALL))
    out = tmp_path / "out"
    res = subprocess.run(
        [sys.executable, "-m", "globemill", *bake_cmd(spec, out, "3.0")],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert res.returncode == 0, res.stderr
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    assert sorted(before) == ["pip.collision.glb", "pip.glb", "pip.report.json"]
    return spec, out, before


@pytest.mark.parametrize("sig", ["SIGINT", "SIGKILL"])
def test_a_signal_mid_write_leaves_the_previous_outputs(
    previous: tuple[Path, Path, dict[str, bytes]], sig: str
) -> None:
    spec, out, before = previous
    res = subprocess.run(
        [sys.executable, "-c", MID_WRITE, sig, *bake_cmd(spec, out, "2.0")],
        capture_output=True,
        text=True,
        timeout=600,
    )
    if sig == "SIGINT":
        assert res.returncode == 130, res.stderr  # documented exit code for an interruption
    else:
        assert res.returncode == -signal.SIGKILL
    after = {p.name: p.read_bytes() for p in out.iterdir() if not p.name.startswith(".")}
    assert after == before  # every previous output byte-identical, none half-written
    hidden = [p.name for p in out.iterdir() if p.name.startswith(".")]
    if sig == "SIGINT":
        assert hidden == []  # the interrupted writer removed its temporaries
    else:
        # nothing can clean up after SIGKILL: the temporaries remain, hidden and named after
        # their targets (docs/gltf.md, "Atomic output")
        assert 1 <= len(hidden) <= 2 and all(h.endswith(".tmp") for h in hidden)
    # and the next bake goes through
    res = subprocess.run(
        [sys.executable, "-m", "globemill", *bake_cmd(spec, out, "1.5")],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert res.returncode == 0, res.stderr
    assert (out / "pip.glb").read_bytes() != before["pip.glb"]


READY = """
import sys
import globemill.bake, globemill.output, globemill.spec
from globemill.cli import main
print("ready", flush=True)
sys.exit(main(sys.argv[1:]))
"""


def test_ctrl_c_during_the_bake_leaves_the_previous_outputs(
    previous: tuple[Path, Path, dict[str, bytes]],
) -> None:
    spec, out, before = previous
    proc = subprocess.Popen(
        [sys.executable, "-c", READY, *bake_cmd(spec, out, "0.05")],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    assert proc.stdout is not None
    assert proc.stdout.readline().strip() == "ready"
    time.sleep(1.0)  # into the bake: at 0.05 m it runs far longer than this
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=600)
    assert proc.returncode == 130, err  # documented exit code for an interruption
    assert "interrupted" in err
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before


# ---- layouts for engines that ignore MSFT_lod, standard channels, quantization -----------------

ALL_LAYOUTS = GlbOptions(level_files=True, uv_attributes=True, quantize=True)


@pytest.fixture(scope="module")
def layouts(demo: Any, tmp_path_factory: pytest.TempPathFactory) -> tuple[Any, Path, dict]:
    result, _ = demo
    out = tmp_path_factory.mktemp("layouts")
    paths = write_outputs(result, out, options=ALL_LAYOUTS)
    return result, out, paths


@pytest.fixture(scope="module")
def level_files_plain(
    demo: Any, tmp_path_factory: pytest.TempPathFactory
) -> tuple[Any, Path, dict]:
    result, _ = demo
    out = tmp_path_factory.mktemp("levels")
    return result, out, write_outputs(result, out, options=GlbOptions(level_files=True))


def test_validator_reports_no_errors_for_every_layout(layouts: Any, level_files_plain: Any) -> None:
    result, out, paths = layouts
    _, out2, paths2 = level_files_plain
    files = [p for k, p in paths.items() if k.startswith("glb")]
    files += [p for k, p in paths2.items() if k.startswith("glb_lod")]
    assert len(files) == 1 + 2 * len(result.levels)
    reports = validate(files)
    for r in reports:
        assert_clean(r)
    for r in reports[1:]:
        # a level file is complete on its own: every chunk drawn once, no MSFT_lod
        assert r["info"]["drawCallCount"] == len(result.levels[0].chunks)
        assert "MSFT_lod" not in r["info"].get("extensionsUsed", [])


def test_level_files_hold_one_level_with_the_same_nodes_and_extras(
    demo: Any, level_files_plain: Any
) -> None:
    result, out_main = demo
    _, out, paths = level_files_plain
    main = read(out_main / "pebblemoor.glb")
    by_name = {m["name"]: m for m in main.doc["meshes"]}
    report = json.loads((out / "pebblemoor.report.json").read_text())
    for k, lv in enumerate(result.levels):
        g = read(paths[f"glb_lod{k}"])
        assert "MSFT_lod" not in g.doc.get("extensionsUsed", [])
        roots = g.doc["scenes"][0]["nodes"]
        assert [g.doc["nodes"][r]["name"] for r in roots] == [
            f"chunk{c}.lod{k}" for c in range(len(lv.chunks))
        ]
        assert len(g.doc["nodes"]) == len(roots)  # nothing but the level's chunks
        assert g.doc["scenes"][0]["extras"]["level_file"] == k
        tris = 0
        for mesh in g.doc["meshes"]:
            mine, ref_extras = dict(mesh["extras"]), dict(by_name[mesh["name"]]["extras"])
            # the same extras; seam accessors hold the same indices under their own numbers
            seams, ref_seams = mine.pop("seams", {}), ref_extras.pop("seams", {})
            assert mine == ref_extras and set(seams) == set(ref_seams)
            for mask, acc in seams.items():
                np.testing.assert_array_equal(g.accessor(acc), main.accessor(ref_seams[mask]))
            prim = mesh["primitives"][0]
            ref = by_name[mesh["name"]]["primitives"][0]
            np.testing.assert_array_equal(
                g.accessor(prim["attributes"]["POSITION"]),
                main.accessor(ref["attributes"]["POSITION"]),
            )
            np.testing.assert_array_equal(
                g.accessor(prim["indices"]), main.accessor(ref["indices"])
            )
            tris += g.doc["accessors"][prim["indices"]]["count"] // 3
        assert tris == report["lods"][k]["triangles"]


def test_standard_channels_carry_slope_altitude_and_layer(layouts: Any) -> None:
    result, out, _ = layouts
    g = read(out / "pebblemoor.glb")
    assert g.doc["scenes"][0]["extras"]["standard_channels"]["TEXCOORD_0"] == [
        "_SLOPE",
        "_ALTITUDE",
    ]
    for mesh in g.doc["meshes"][::11]:
        a = mesh["primitives"][0]["attributes"]
        uv0, uv1 = g.accessor(a["TEXCOORD_0"]), g.accessor(a["TEXCOORD_1"])
        np.testing.assert_array_equal(uv0[:, 0], g.accessor(a["_SLOPE"])[:, 0])
        np.testing.assert_array_equal(uv0[:, 1], g.accessor(a["_ALTITUDE"])[:, 0])
        np.testing.assert_array_equal(uv1[:, 0], g.accessor(a["_LAYER"])[:, 0])
        assert not uv1[:, 1].any()


def dequantized(g: Glb, node: dict[str, Any]) -> np.ndarray:
    """World positions of a quantized node as a renderer computes them in float32:
    translation + scale * q (KHR_mesh_quantization, SHORT not normalized)."""
    prim = g.doc["meshes"][node["mesh"]]["primitives"][0]
    q = g.accessor(prim["attributes"]["POSITION"]).astype(np.float32)
    s = np.float32(node["scale"][0])
    t = np.array(node["translation"], np.float32)
    return q * s + t


def test_quantized_positions_stay_within_the_stated_share(layouts: Any) -> None:
    result, out, _ = layouts
    report = json.loads((out / "pebblemoor.report.json").read_text())
    q = report["export"]["quantization"]
    assert q["applied"] and q["allowed_share"] == 0.1
    g = read(out / "pebblemoor.glb")
    assert g.doc["extensionsRequired"] == ["KHR_mesh_quantization"]
    nodes = {n["name"]: n for n in g.doc["nodes"]}
    for k, lv in enumerate(result.levels):
        worst = 0.0
        for ch in lv.chunks:
            node = nodes[f"chunk{ch.chunk}.lod{k}"]
            mesh = g.doc["meshes"][node["mesh"]]
            prim = mesh["primitives"][0]
            assert g.doc["accessors"][prim["attributes"]["POSITION"]]["componentType"] == 5122
            nrm = g.doc["accessors"][prim["attributes"]["NORMAL"]]
            assert nrm["componentType"] == 5120 and nrm["normalized"]
            p = dequantized(g, node).astype(np.float64)
            d = draw_buffers(ch)
            worst = max(worst, float(np.linalg.norm(p - d.positions, axis=1).max()))
            if "targets" in prim:
                # the morph target still ends on the coarser level (within float32 of the grid)
                tgt = g.accessor(prim["targets"][0]["POSITION"]).astype(np.float64)
                moved = (g.accessor(prim["attributes"]["POSITION"]) + tgt) * node["scale"][0]
                moved += node["translation"]
                assert np.abs(moved - d.morph).max() < 1e-3
        # the error measured here from the file is the one reported, within float32 rounding
        lvq = q["levels"][k]
        assert worst == pytest.approx(lvq["max_position_error_m"], abs=1e-4)
        assert worst <= 0.1 * lv.tolerance_m + 1e-4
        # an int8 normal is off by at most about half a step of 1/127 per component
        assert lvq["max_normal_error_deg"] < 0.7


def test_quantized_seams_meet_exactly(layouts: Any) -> None:
    # a vertex two neighbouring chunks share lands on the same float32 point in both after the
    # node transforms (the grid is world-wide and the transform exact in float32)
    result, out, _ = layouts
    g = read(out / "pebblemoor.glb")
    nodes = {n["name"]: n for n in g.doc["nodes"]}
    lv = result.levels[0]
    matched = 0
    for c in range(0, len(lv.chunks), 4):
        mine = {tuple(x) for x in draw_buffers(lv.chunks[c]).positions.tolist()}
        p = dequantized(g, nodes[f"chunk{c}.lod0"])
        for nb in result.chunk_neighbors[c]:
            theirs = draw_buffers(lv.chunks[int(nb)])
            shared = [i for i, x in enumerate(theirs.positions.tolist()) if tuple(x) in mine]
            q = dequantized(g, nodes[f"chunk{int(nb)}.lod0"])[shared]
            mine_q = {x.tobytes() for x in p}
            assert shared and all(x.tobytes() in mine_q for x in q), (c, int(nb))
            matched += len(shared)
    assert matched > 0


def test_quantization_beyond_the_share_falls_back_to_float(demo: Any, tmp_path: Path) -> None:
    result, _ = demo
    paths = write_outputs(result, tmp_path, options=GlbOptions(quantize=True, quantize_share=1e-4))
    q = result.report["export"]["quantization"]
    assert q["applied"] is False and "float32" in q["reason"]
    g = read(paths["glb"])
    assert "KHR_mesh_quantization" not in g.doc.get("extensionsUsed", [])
    assert glb_for(result, GlbOptions()) == paths["glb"].read_bytes()


@pytest.mark.parametrize(
    "kwargs, field",
    [
        ({"quantize_share": 0.0}, "quantize_share"),
        ({"quantize_share": 2.0}, "quantize_share"),
        ({"level_files": "yes"}, "level_files"),
        ({"gpu_order": 1}, "gpu_order"),
    ],
)
def test_bad_layout_options_are_refused(kwargs: dict[str, Any], field: str) -> None:
    with pytest.raises(ValueError, match=field):
        GlbOptions(**kwargs)


def test_report_holds_sizes_and_the_cache_miss_ratio(layouts: Any) -> None:
    result, out, paths = layouts
    report = json.loads((out / "pebblemoor.report.json").read_text())
    ex = report["export"]
    assert ex["files"]["pebblemoor.glb"] == paths["glb"].stat().st_size
    assert ex["files"]["pebblemoor.lod0.glb"] == paths["glb_lod0"].stat().st_size
    for entry, lv in zip(ex["acmr"], report["lods"], strict=True):
        assert entry["triangles"] == lv["triangles"]
        for size in ("fifo16", "fifo32"):
            assert entry[size]["after"] < entry[size]["before"] <= 3.0


def test_bake_layout_flags_write_the_level_files(tmp_path: Path) -> None:
    spec = tmp_path / "pip.json"
    spec.write_text(json.dumps(SMALL))
    out = tmp_path / "out"
    flags = ["--level-files", "--uv-attributes", "--quantize", "--quantize-share", "0.2"]
    res = subprocess.run(
        [sys.executable, "-m", "globemill", *bake_cmd(spec, out, "3.0"), *flags],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert res.returncode == 0, res.stderr
    report = json.loads((out / "pip.report.json").read_text())
    names = sorted(p.name for p in out.iterdir())
    assert names == sorted(
        ["pip.glb", "pip.collision.glb", "pip.report.json"]
        + [f"pip.lod{k}.glb" for k in range(len(report["lods"]))]
    )
    assert report["export"]["uv_attributes"] is True
    assert report["export"]["quantization"]["allowed_share"] == 0.2


@pytest.mark.parametrize("value", ["0", "1.5", "abc"])
def test_a_bad_quantize_share_exits_2_and_writes_nothing(tmp_path: Path, value: str) -> None:
    spec = tmp_path / "pip.json"
    spec.write_text(json.dumps(SMALL))
    out = tmp_path / "out"
    res = subprocess.run(
        [sys.executable, "-m", "globemill", *bake_cmd(spec, out, "3.0")]
        + ["--quantize", "--quantize-share", value],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert res.returncode == 2
    assert "--quantize-share" in res.stderr and "(0, 1]" in res.stderr
    assert not out.exists()
