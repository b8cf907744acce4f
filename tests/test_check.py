"""`globemill check`: the reader, the geometry and topology measures against reference libraries,
the command on a real bake, and broken bakes refused with the failure named."""

from __future__ import annotations

import json
import shutil
import struct
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import trimesh

import globemill
from globemill import _core, load_spec
from globemill.check import (
    CheckInputError,
    _welded_level,
    closest_points,
    ground_distance,
    mesh_to_ground,
    open_border_edges,
    parse_glb,
    point_mesh_distance,
    project_to_ground,
    read_glb,
    read_world,
    seam_pair_mismatch,
    t_junctions,
    topology,
    weld,
)
from globemill.provenance import SPEC_HASH_KEY, canonical_spec, short_hash, spec_hash

DEMO = Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml"
NAME = "pebblemoor"
RIDGE = Path(__file__).resolve().parent / "data" / "knifeback.toml"


def run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "globemill", *args], capture_output=True, text=True, timeout=600
    )


# ---- pure functions on arrays -------------------------------------------------------------------


def test_closest_points_match_trimesh() -> None:
    rng = np.random.default_rng(5)
    n = 4000
    tri = rng.normal(size=(n, 3, 3))
    # points near and far, so every Voronoi region of the triangle is visited
    p = tri.mean(axis=1) + rng.normal(scale=2.0, size=(n, 3))
    mine = closest_points(p, tri[:, 0], tri[:, 1], tri[:, 2])
    # reference library: trimesh's closest point on triangle
    ref = trimesh.triangles.closest_point(tri, p)
    np.testing.assert_allclose(mine, ref, rtol=0, atol=1e-9)


def test_closest_point_of_a_degenerate_triangle_is_on_its_segment() -> None:
    # a triangle collapsed to the segment (0,0,0)-(2,0,0): the nearest point to (1,1,0) is
    # (1,0,0) (the foot of the perpendicular)
    a, b, c = np.zeros((1, 3)), np.array([[2.0, 0, 0]]), np.array([[1.0, 0, 0]])
    q = closest_points(np.array([[1.0, 1.0, 0.0]]), a, b, c)
    np.testing.assert_allclose(q, [[1.0, 0.0, 0.0]], atol=1e-12)


def test_point_mesh_distance_matches_trimesh_near_and_far() -> None:
    sphere = trimesh.creation.icosphere(subdivisions=3, radius=100.0)
    rng = np.random.default_rng(9)
    d = rng.normal(size=(600, 3))
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    # within the reach, a little beyond it and far outside (the search widens until it hits)
    r = np.concatenate([np.full(200, 100.0), np.full(200, 101.5), np.full(200, 400.0)])
    pts = d * r[:, None]
    tris = np.asarray(sphere.vertices)[np.asarray(sphere.faces)]
    mine = point_mesh_distance(
        pts, np.zeros(len(pts), np.int64), tris, np.zeros(len(tris), np.int64), 0.01
    )
    # reference library: trimesh.proximity
    _, ref, _ = trimesh.proximity.closest_point(sphere, pts)
    np.testing.assert_allclose(mine, ref, rtol=0, atol=1e-9)


def test_point_mesh_distance_keeps_to_the_group() -> None:
    # two unit triangles 10 m apart; a point on group 1's triangle is 10 m from group 0's
    tri = np.array([[[0, 0, 0], [1, 0, 0], [0, 1, 0]], [[0, 0, 10], [1, 0, 10], [0, 1, 10]]], float)
    p = np.array([[0.25, 0.25, 10.0], [0.25, 0.25, 10.0]])
    d = point_mesh_distance(p, np.array([0, 1]), tri, np.array([0, 1]), 0.01)
    np.testing.assert_allclose(d, [10.0, 0.0], atol=1e-12)


def test_topology_of_a_closed_sphere() -> None:
    m = trimesh.creation.icosphere(subdivisions=2)
    topo = topology(np.asarray(m.vertices), np.asarray(m.faces, np.int64))
    # Euler's polyhedron formula for a sphere: V - E + F = 2
    assert (topo.vertices, topo.edges, topo.faces) == (162, 480, 320)
    assert topo.euler == 2 and topo.components == 1
    assert topo.ok


def test_topology_finds_a_hole_a_flip_and_a_second_piece() -> None:
    m = trimesh.creation.icosphere(subdivisions=1)
    v, f = np.asarray(m.vertices), np.asarray(m.faces, np.int64)
    holed = topology(v, f[1:])
    # one missing triangle leaves its three edges open; Euler: V - E + F = 2 - 1 = 1
    assert len(holed.open_edges) == 3 and holed.euler == 1 and not holed.ok
    flipped = f.copy()
    flipped[0] = flipped[0, ::-1]
    t = topology(v, flipped)
    assert len(t.flipped_edges) == 3 and not t.ok
    # two spheres: each closed, but two pieces and V - E + F = 4
    two = topology(np.concatenate([v, v + 5]), np.concatenate([f, f + len(v)]))
    assert two.closed_manifold and two.components == 2 and two.euler == 4 and not two.ok


def test_t_junction_is_named() -> None:
    # a unit square split along its diagonal 0-2; the second half also has the diagonal's
    # midpoint 4, the first does not: a T-junction at 4 (hand-built)
    v = np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0], [0.5, 0.5, 0]], float)
    f = np.array([[0, 1, 2], [0, 4, 3], [4, 2, 3]], np.int64)
    topo = topology(v, f)
    tj = t_junctions(v, topo.open_edges)
    assert {tuple(sorted(e)) for e in tj.tolist()} == {(0, 2)}


def test_weld_is_by_exact_bits() -> None:
    p = np.array([[1.0, 2.0, 3.0], [1.0, 2.0, 3.0], [np.nextafter(np.float32(1), 2), 2, 3]])
    uniq, inv = weld(p.astype(np.float32))
    # the same bits weld; one ulp apart does not
    assert len(uniq) == 2 and inv[0] == inv[1] != inv[2]


def test_seam_comparisons_on_a_hand_built_pair() -> None:
    # fine chunk: triangles (0,1,3),(1,2,3) over the edge 0-1-2 with midpoint 1; coarse
    # neighbour below the edge: triangle (2,0,4). The stitched variant drops vertex 1.
    fine = np.array([[0, 1, 3], [1, 2, 3]], np.int64)
    stitched = np.array([[0, 2, 3]], np.int64)
    coarse = np.array([[2, 0, 4]], np.int64)
    v_miss, n_miss, matched, ends = seam_pair_mismatch(stitched, coarse)
    assert (len(v_miss), len(n_miss), matched, sorted(ends)) == (0, 0, 1, [0, 2])
    v_miss, n_miss, matched, _ = seam_pair_mismatch(fine, coarse)
    # the unstitched border keeps 1: the coarse edge 0-2 has no partner (a T-junction)
    assert len(n_miss) == 1 and matched == 0
    # a shared edge 0-1-2-6 on both sides with 2 moved on one side only (now 7): only 0-1
    # matches, so the chain ends at 1 instead of running from corner 0 to corner 6
    one = np.array([[0, 1, 3], [1, 7, 3], [7, 6, 3]], np.int64)
    other = np.array([[6, 2, 4], [2, 1, 4], [1, 0, 4]], np.int64)
    v_miss, n_miss, matched, ends = seam_pair_mismatch(one, other)
    assert (len(v_miss), len(n_miss), matched, sorted(ends)) == (0, 0, 1, [0, 1])
    # with neighbours across the chunk's other two edges (3-2 and 0-3, run the other way)
    around = [coarse, np.array([[3, 2, 6]]), np.array([[0, 3, 7]])]
    assert len(open_border_edges(stitched, around)) == 0
    assert len(open_border_edges(fine, around)) == 3  # 0-1, 1-2 and the coarse 0-2


def _glb_bytes(doc: dict[str, Any], body: bytes) -> bytes:
    # glTF 2.0 specification, GLB file format: header (magic, version 2, total length), JSON
    # chunk padded with spaces, BIN chunk padded with zeros, both to 4 bytes
    js = json.dumps(doc).encode()
    js += b" " * (-len(js) % 4)
    body += b"\0" * (-len(body) % 4)
    total = 12 + 8 + len(js) + 8 + len(body)
    return (
        struct.pack("<4sII", b"glTF", 2, total)
        + struct.pack("<I4s", len(js), b"JSON")
        + js
        + struct.pack("<I4s", len(body), b"BIN\0")
        + body
    )


def test_parse_glb_refuses_broken_files() -> None:
    good = _glb_bytes({"asset": {"version": "2.0"}}, b"")
    assert parse_glb(good).doc["asset"]["version"] == "2.0"
    with pytest.raises(CheckInputError, match="magic"):
        parse_glb(b"glTX" + good[4:])
    with pytest.raises(CheckInputError, match="header says"):
        parse_glb(good[:-4])
    with pytest.raises(CheckInputError, match="version"):
        parse_glb(good[:4] + struct.pack("<I", 1) + good[8:])


def test_strided_accessor_is_read() -> None:
    # byteStride 16 for VEC3 float: 4 bytes of padding after each element (glTF 2.0 spec,
    # bufferView.byteStride)
    rows = np.arange(9, dtype="<f4").reshape(3, 3)
    body = b"".join(r.tobytes() + b"\xff" * 4 for r in rows)
    doc = {
        "asset": {"version": "2.0"},
        "buffers": [{"byteLength": len(body)}],
        "bufferViews": [{"buffer": 0, "byteLength": len(body), "byteStride": 16}],
        "accessors": [{"bufferView": 0, "componentType": 5126, "count": 3, "type": "VEC3"}],
    }
    np.testing.assert_array_equal(parse_glb(_glb_bytes(doc, body)).accessor(0), rows)


# ---- the command on a bake of the demo world ----------------------------------------------------


@pytest.fixture(scope="module")
def baked(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("bake")
    res = run("bake", str(DEMO), "-o", str(out), "--tolerance-m", "2", "--quiet")
    assert res.returncode == 0, res.stderr
    return out


@pytest.fixture(scope="module")
def baseline(baked: Path) -> tuple[int, dict[str, Any]]:
    res = run("check", str(DEMO), str(baked), "--json")
    assert res.returncode in (0, 1), res.stderr
    return res.returncode, json.loads(res.stdout)


def _status(report: dict[str, Any], check: str, level: int | str) -> str:
    (row,) = [c for c in report["checks"] if c["check"] == check and c["level"] == level]
    return str(row["status"])


@pytest.mark.slow
def test_check_passes_on_the_demo(baseline: tuple[int, dict[str, Any]]) -> None:
    code, report = baseline
    assert report["failures"] == [] and report["ok"] is True
    assert code == 0


@pytest.mark.slow
def test_check_reads_a_quantized_bake(tmp_path: Path) -> None:
    # KHR_mesh_quantization: int16 positions put in place by the node's scale and translation
    # (glTF 2.0 spec, KHR_mesh_quantization); check undoes them and allows the morph
    # comparison the two roundings of sqrt(3)/2 grid step each
    out = tmp_path / "q"
    res = run("bake", str(DEMO), "-o", str(out), "--tolerance-m", "2", "--quantize", "--quiet")
    assert res.returncode == 0, res.stderr
    doc = parse_glb((out / f"{NAME}.glb").read_bytes()).doc
    assert "KHR_mesh_quantization" in doc.get("extensionsRequired", [])
    mesh0 = doc["meshes"][doc["nodes"][doc["scenes"][0]["nodes"][0]]["mesh"]]
    position = mesh0["primitives"][0]["attributes"]["POSITION"]
    assert doc["accessors"][position]["componentType"] == 5122  # SHORT (int16)
    res = run("check", str(DEMO), str(out), "--json")
    report = json.loads(res.stdout)
    assert res.returncode == 0 and report["ok"] is True, report["failures"]
    step = json.loads((out / f"{NAME}.report.json").read_text())["export"]["quantization"]["step_m"]
    morph = [c for c in report["checks"] if c["check"] == "morph on coarser"]
    assert morph and all(c["limit"] >= 3**0.5 * step for c in morph)


@pytest.mark.slow
def test_check_json_has_every_measurement(baseline: tuple[int, dict[str, Any]]) -> None:
    _, report = baseline
    for key in ("ok", "planet", "checks", "failures", "float32_allowance_m", "measure_order"):
        assert key in report
    assert report["planet"] == NAME
    # coordinates up to ~1.56 km: IEEE 754 binary32 has a 24-bit significand, so one ulp in
    # [1024, 2048) is 2^(10 - 23) m
    assert report["float32_allowance_m"] == pytest.approx(4 * 2.0**-13)
    levels = load_spec(DEMO).lod.levels
    names = {(c["check"], c["level"]) for c in report["checks"]}
    for k in range(levels):
        assert ("deviation", k) in names and ("watertight", k) in names
    for k in range(levels - 1):
        for check in ("morph on coarser", "seam per edge", "seam every mask"):
            assert (check, k) in names
    assert ("deviation", "collision") in names and ("report matches files", "-") in names
    for c in report["checks"]:
        for key in ("check", "level", "ok", "status", "value", "limit", "where", "failures"):
            assert key in c
    rep = json.loads((Path(report["outdir"]) / f"{NAME}.report.json").read_text())
    for k in range(levels):
        (dev,) = [c for c in report["checks"] if c["check"] == "deviation" and c["level"] == k]
        assert dev["limit"] == rep["lods"][k]["tolerance_m"]
        assert 0 < dev["value"]
    # every stitched variant: 80 chunks x 7 masks per level (20 * 4^chunk_level chunks)
    seams = [c for c in report["checks"] if c["check"] == "seam every mask"]
    assert all(c["details"]["variants"] == 80 * 7 for c in seams)
    (origin,) = [c for c in report["checks"] if c["check"] == "baked from this spec"]
    assert origin["status"] == "ok"
    assert set(origin["details"]["files_spec_sha256"].values()) == {spec_hash(load_spec(DEMO))}


@pytest.mark.slow
def test_reader_agrees_with_trimesh(baked: Path) -> None:
    world = read_world(read_glb(baked / f"{NAME}.glb"))
    # reference library: trimesh's glTF loader; the scene holds each chunk's finest level
    scene = trimesh.load(baked / f"{NAME}.glb", force="scene", process=False)
    meshes = scene.dump()
    assert len(meshes) == len(world.chunks)
    mine = sorted((len(c[0].positions), len(c[0].triangles)) for c in world.chunks)
    ref = sorted((len(m.vertices), len(m.faces)) for m in meshes)
    assert mine == ref
    v0 = np.concatenate([c[0].positions for c in world.chunks]).astype(np.float64)
    vr = np.concatenate([np.asarray(m.vertices) for m in meshes])
    np.testing.assert_array_equal(np.sort(v0, axis=0), np.sort(vr, axis=0))


@pytest.mark.slow
def test_welded_levels_are_closed_by_trimesh_too(baked: Path) -> None:
    world = read_world(read_glb(baked / f"{NAME}.glb"))
    for k in range(world.levels):
        tris = np.concatenate([c[k].gid[c[k].triangles] for c in world.chunks])
        ids, local = np.unique(tris, return_inverse=True)
        mesh = trimesh.Trimesh(
            world.welded[ids].astype(np.float64), local.reshape(-1, 3), process=False
        )
        # reference library: trimesh; Euler's polyhedron formula for a sphere
        assert mesh.is_watertight and mesh.is_winding_consistent
        assert mesh.euler_number == 2
        assert topology(world.welded.astype(np.float64), tris).ok


# ---- broken bakes -------------------------------------------------------------------------------


def _copy(baked: Path, tmp_path: Path) -> Path:
    out = tmp_path / "out"
    shutil.copytree(baked, out)
    return out


def _split(path: Path) -> tuple[dict[str, Any], bytearray]:
    g = read_glb(path)
    return g.doc, bytearray(g.bin)


def _mesh(doc: dict[str, Any], chunk: int, level: int) -> dict[str, Any]:
    (m,) = [
        m for m in doc["meshes"] if m["extras"]["chunk"] == chunk and m["extras"]["level"] == level
    ]
    return m


def _position_offset(doc: dict[str, Any], mesh: dict[str, Any], vertex: int) -> int:
    acc = doc["accessors"][mesh["primitives"][0]["attributes"]["POSITION"]]
    view = doc["bufferViews"][acc["bufferView"]]
    return view.get("byteOffset", 0) + acc.get("byteOffset", 0) + 12 * vertex


def _move_vertex(body: bytearray, offset: int, metres: float, along: np.ndarray) -> None:
    p = np.frombuffer(bytes(body[offset : offset + 12]), "<f4").astype(np.float64)
    body[offset : offset + 12] = (p + metres * along).astype("<f4").tobytes()


def _failure_lines(stdout: str) -> str:
    # the default output is a table (check, level, result, worst value, where), then failures
    header = stdout.splitlines()[1].split()
    assert header[:3] == ["check", "level", "result"] and "where" in header
    return stdout[stdout.index("FAILED:") :]


def _block(fails: str, head: str) -> str:
    """The failure lines of one check (its header line and the indented lines below it)."""
    lines = fails.splitlines()
    start = next(i for i, line in enumerate(lines) if line.strip().startswith(head))
    end = next(
        (i for i in range(start + 1, len(lines)) if not lines[i].startswith("    ")), len(lines)
    )
    return "\n".join(lines[start:end])


@pytest.mark.slow
def test_moved_vertices_are_a_crack_and_a_deviation(
    baked: Path, baseline: tuple[int, dict[str, Any]], tmp_path: Path
) -> None:
    out = _copy(baked, tmp_path)
    world = read_world(read_glb(out / f"{NAME}.glb"))
    doc, body = _split(out / f"{NAME}.glb")
    # 1 m up: a vertex of chunk 0 that its neighbour across edge 0 shares (same float32 bits),
    # at level 0 and at level 1 (so the stitched variant keeps it too)
    c = world.chunks[0][0]
    n = world.chunks[c.neighbors[0]]
    shared = np.flatnonzero(np.isin(c.gid, n[0].gid) & np.isin(c.gid, n[1].gid))
    vertex = int(shared[len(shared) // 2])
    up = c.positions[vertex].astype(np.float64)
    _move_vertex(
        body, _position_offset(doc, _mesh(doc, 0, 0), vertex), 1.0, up / np.linalg.norm(up)
    )
    # 10 m up: an inner vertex of chunk 40 (far from chunk 0) on level ground (its ground
    # normal closest to the radius): 10 m off the ground, five times the 2 m tolerance
    far = 40
    c = world.chunks[far][0]
    others = np.concatenate([world.chunks[n][0].gid for n in c.neighbors])
    inner = np.flatnonzero(~np.isin(c.gid, others))
    mesh = _mesh(doc, far, 0)
    normals = read_glb(out / f"{NAME}.glb").accessor(mesh["primitives"][0]["attributes"]["NORMAL"])
    radial = c.positions / np.linalg.norm(c.positions, axis=1, keepdims=True)
    vertex = int(inner[np.argmax(np.einsum("ij,ij->i", normals[inner], radial[inner]))])
    _move_vertex(body, _position_offset(doc, mesh, vertex), 10.0, radial[vertex])
    (out / f"{NAME}.glb").write_bytes(_glb_bytes(doc, bytes(body)))

    res = run("check", str(DEMO), str(out))
    assert res.returncode == 1, res.stdout + res.stderr
    fails = _failure_lines(res.stdout)
    for check in (
        "watertight",
        "seam per edge",
        "seam every mask",
        "deviation",
        "morph on coarser",
    ):
        assert _status(baseline[1], check, 0) == "ok"
    crack = _block(fails, "watertight level 0")
    assert "open edge" in crack and "chunk 0 at" in crack and f"chunk {far} " not in crack
    assert "chunk 0 at level 0" in _block(fails, "seam every mask level 0")
    assert "chunk 0 edge 0 at level 0" in _block(fails, "seam per edge level 0")
    dev = _block(fails, "deviation level 0")
    assert f"chunk {far}: " in dev
    assert "beyond the tolerance" in dev
    # both morph positions moved with their vertices, off level 1
    morph = _block(fails, "morph on coarser level 0")
    assert "chunk 0 at level 0" in morph and f"chunk {far} at level 0" in morph


@pytest.mark.slow
def test_dropped_triangle_is_a_hole(
    baked: Path, baseline: tuple[int, dict[str, Any]], tmp_path: Path
) -> None:
    out = _copy(baked, tmp_path)
    doc, body = _split(out / f"{NAME}.glb")
    # the first chunk with border triangles; its last triangle goes
    mesh = next(
        m
        for m in doc["meshes"]
        if m["extras"]["level"] == 0
        and doc["accessors"][m["primitives"][0]["indices"]]["count"] // 3
        > m["extras"]["interior_triangles"]
    )
    chunk = mesh["extras"]["chunk"]
    doc["accessors"][mesh["primitives"][0]["indices"]]["count"] -= 3
    (out / f"{NAME}.glb").write_bytes(_glb_bytes(doc, bytes(body)))
    res = run("check", str(DEMO), str(out))
    assert res.returncode == 1
    fails = _failure_lines(res.stdout)
    assert _status(baseline[1], "watertight", 0) == "ok"
    assert "watertight level 0" in fails and f"chunk {chunk} at" in fails
    assert "3 open edge(s)" in fails
    # Euler's polyhedron formula no longer holds: one face fewer, same edges and vertices
    assert "= 1, expected 2" in fails


@pytest.mark.slow
def test_tighter_stated_tolerance_fails(
    baked: Path, baseline: tuple[int, dict[str, Any]], tmp_path: Path
) -> None:
    out = _copy(baked, tmp_path)
    path = out / f"{NAME}.report.json"
    rep = json.loads(path.read_text())
    measured = [c for c in baseline[1]["checks"] if c["check"] == "deviation"]
    # half the deviation the check measured: the level (and the colliders) now exceed it
    rep["lods"][0]["tolerance_m"] = measured[0]["value"] / 2
    rep["collision"]["tolerance_m"] = measured[-1]["value"] / 2
    path.write_text(json.dumps(rep))
    res = run("check", str(DEMO), str(out))
    assert res.returncode == 1
    fails = _failure_lines(res.stdout)
    assert "deviation level 0" in fails and "deviation collision" in fails
    assert "report matches files" in fails and "level 0: report tolerance" in fails


# ---- bad input ----------------------------------------------------------------------------------


def test_missing_outdir_is_bad_input(tmp_path: Path) -> None:
    res = run("check", str(DEMO), str(tmp_path / "nowhere"))
    assert res.returncode == 2
    assert "no such output folder" in res.stderr


@pytest.mark.slow
@pytest.mark.parametrize("victim", [f"{NAME}.glb", f"{NAME}.report.json", f"{NAME}.collision.glb"])
def test_missing_file_is_bad_input(baked: Path, tmp_path: Path, victim: str) -> None:
    out = _copy(baked, tmp_path)
    (out / victim).unlink()
    res = run("check", str(DEMO), str(out))
    assert res.returncode == 2
    assert victim in res.stderr and "missing" in res.stderr


@pytest.mark.slow
def test_truncated_glb_is_bad_input(baked: Path, tmp_path: Path) -> None:
    out = _copy(baked, tmp_path)
    data = (out / f"{NAME}.glb").read_bytes()
    (out / f"{NAME}.glb").write_bytes(data[: len(data) // 2])
    res = run("check", str(DEMO), str(out))
    assert res.returncode == 2
    assert "header says" in res.stderr


def test_missing_spec_is_bad_input(baked: Path, tmp_path: Path) -> None:
    res = run("check", str(tmp_path / "none.toml"), str(baked))
    assert res.returncode == 2


@pytest.mark.slow
def test_a_bake_with_skirts(tmp_path: Path) -> None:
    spec = tmp_path / "skirted.toml"
    spec.write_text(
        'name = "skirted"\nradius_m = 1000.0\ntolerance_m = 4.0\n'
        '[lod]\nlevels = 2\nseams = "skirt"\n'
        '[[features]]\nkind = "hill"\nlat_deg = 10.0\nlon_deg = 20.0\n'
        "amplitude_m = 40.0\nsigma_m = 100.0\n"
    )
    out = tmp_path / "out"
    assert run("bake", str(spec), "-o", str(out), "-q").returncode == 0
    res = run("check", str(spec), str(out), "--json")
    report = json.loads(res.stdout)
    assert res.returncode == 0, report["failures"]
    (skirts,) = [c for c in report["checks"] if c["check"] == "skirts"]
    # a skirt quad (two triangles) hangs from every border edge of every chunk and level
    assert skirts["status"] == "ok" and "skirt triangles" in skirts["summary"]
    assert _status(report, "watertight", 0) == "ok" and _status(report, "seams", 0) == "skipped"


# ---- provenance: the spec's content hash ------------------------------------------------------


def test_spec_hash_ignores_the_file_format_and_key_order(tmp_path: Path) -> None:
    toml = load_spec(DEMO)
    # the same world written as JSON (examples/pebblemoor.json) and as TOML with its top-level
    # keys in another order and 0.5 spelt 5e-1
    json_spec = load_spec(DEMO.with_suffix(".json"))
    text = RIDGE.read_text()
    shuffled = tmp_path / "shuffled.toml"
    shuffled.write_text(
        text.replace('name = "knifeback"\nradius_m = 300.0\ntolerance_m = 0.1\n', "").replace(
            "[lod]", 'tolerance_m = 1e-1\nradius_m = 300\nname = "knifeback"\n\n[lod]'
        )
    )
    assert spec_hash(json_spec) == spec_hash(toml)
    assert spec_hash(load_spec(shuffled)) == spec_hash(load_spec(RIDGE))
    # SHA-256 (FIPS 180-4) of the canonical text, checked with the standard library's hashlib
    import hashlib

    want = hashlib.sha256(canonical_spec(toml).encode("utf-8")).hexdigest()
    assert spec_hash(toml) == want and len(want) == 64
    # any value changed: another hash
    taller = tmp_path / "taller.toml"
    taller.write_text(text.replace("height_m = 24.0", "height_m = 24.5"))
    assert spec_hash(load_spec(taller)) != spec_hash(load_spec(RIDGE))


# ---- the steep sharp ridge (tests/data/knifeback.toml) ------------------------------------------


@pytest.fixture(scope="module")
def ridge_bake(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("ridge")
    res = run("bake", str(RIDGE), "-o", str(out), "--quiet")
    assert res.returncode == 0, res.stderr
    return out


def test_provenance_is_in_every_file(ridge_bake: Path) -> None:
    want = spec_hash(load_spec(RIDGE))
    rep = json.loads((ridge_bake / "knifeback.report.json").read_text())
    assert rep[SPEC_HASH_KEY] == want and rep["globemill"] == globemill.__version__
    for f in ("knifeback.glb", "knifeback.collision.glb"):
        extras = read_glb(ridge_bake / f).doc["scenes"][0]["extras"]
        assert extras[SPEC_HASH_KEY] == want and extras["globemill"] == globemill.__version__


def test_ridge_world_passes_check(ridge_bake: Path) -> None:
    res = run("check", str(RIDGE), str(ridge_bake), "--json")
    report = json.loads(res.stdout)
    assert res.returncode == 0, report["failures"]
    dev0 = [c for c in report["checks"] if c["check"] == "deviation" and c["level"] == 0][0]
    assert dev0["value"] <= 0.1 + report["float32_allowance_m"]


def test_ridge_flank_triangles_measure_what_a_dense_search_finds(ridge_bake: Path) -> None:
    # the triangles the core's own (local) measure puts over the tolerance: on every one the
    # check's search, confirming every point, agrees with the independent measure
    # (tests/independent_error.py: Gauss-Newton plus hierarchical cap search on a grid of
    # step 1/24) to within 1 cm, and stays within the tolerance
    import independent_error as ie

    spec = load_spec(RIDGE)
    fld = globemill.field(spec)
    world = read_world(read_glb(ridge_bake / "knifeback.glb"))
    pos = world.welded.astype(np.float64)
    seen = 0
    for k in range(world.levels):
        tris, _, tol = _welded_level(world, k)
        per = np.asarray(
            _core.measure(fld._core, pos, tris.astype(np.uint32), 4, 1)["per_triangle"]
        )
        over = np.flatnonzero(per > tol)[:4]
        seen += len(over)
        tri = pos[tris[over]]
        _, mine = mesh_to_ground(fld._core, tri, 4, np.zeros(len(over)))
        for i in range(len(over)):
            ref = ie.distance_to_surface(fld, spec.radius_m, ie._grid_points(tri[i : i + 1], 24))
            assert ref.max() - 1e-6 <= mine[i] <= ref.max() + 0.01
            assert mine[i] <= tol[over[i]]
    if seen == 0:
        pytest.skip("the bake has no triangle the core's local measure puts over the tolerance")


def _flank_foot_points(spec_path: Path, n: int) -> tuple[Any, np.ndarray, np.ndarray]:
    """Points 0.1 m above the flat ground just outside the ridge's foot, mid-arc: their nearest
    ground point is on the 60-degree flank, not below them."""
    spec = load_spec(spec_path)
    fld = globemill.field(spec)
    f = spec.features[0]

    def u(lat: float, lon: float) -> np.ndarray:
        a, b = np.radians(lat), np.radians(lon)  # docs/terrain.md: u(lat, lon)
        return np.array([np.cos(a) * np.sin(b), np.sin(a), np.cos(a) * np.cos(b)])

    c0, c1 = u(f.lat0_deg, f.lon0_deg), u(f.lat1_deg, f.lon1_deg)
    pole = np.cross(c0, c1)
    pole /= np.linalg.norm(pole)
    mid = (c0 + c1) / np.linalg.norm(c0 + c1)
    # angles across the arc from the foot (b / R) outwards by 1 mm to 5 cm of ground
    out = (f.half_width_m + np.linspace(0.001, 0.05, n)) / spec.radius_m
    dirs = np.cos(out)[:, None] * mid + np.sin(out)[:, None] * pole
    pts = (spec.radius_m + 0.1) * dirs
    return fld, pts, out


def test_ground_distance_below_a_flank_matches_a_1d_search() -> None:
    # reference: the ridge's cross-section at mid-arc, in the plane of the arc's middle and its
    # pole: directions v(phi) = cos(phi) mid + sin(phi) pole at ground radius
    # r(phi) = R + h max(0, 1 - R |phi| / b) (docs/terrain.md, ridge, sharp profile). The points
    # lie in that plane and the ridge is long, so their nearest ground point does too; the
    # distance (law of cosines) is minimised by scipy's bounded Brent search on each smooth piece
    from scipy.optimize import minimize_scalar

    fld, pts, a = _flank_foot_points(RIDGE, 12)
    spec = load_spec(RIDGE)
    f = spec.features[0]
    R, h, b = spec.radius_m, f.height_m, f.half_width_m
    pr = np.linalg.norm(pts, axis=1)

    def dist(phi: float, i: int) -> float:
        r = R + h * max(0.0, 1.0 - R * abs(phi) / b)
        return float(np.sqrt(max(0.0, r * r + pr[i] ** 2 - 2 * r * pr[i] * np.cos(phi - a[i]))))

    ref = np.array(
        [
            min(
                minimize_scalar(
                    dist, bounds=piece, args=(i,), method="bounded", options={"xatol": 1e-13}
                ).fun
                for piece in ((-b / R, 0.0), (0.0, b / R), (b / R, a[i] + 1.0 / R))
            )
            for i in range(len(pts))
        ]
    )
    # the local projection alone stays on the flat ground below: about the radial 0.1 m
    local, _ = project_to_ground(fld._core, pts)
    assert np.all(local > 0.0999) and np.all(ref < local - 1e-4)
    mine = ground_distance(fld._core, pts, 0.0)
    np.testing.assert_allclose(mine, ref, rtol=0, atol=1e-5)


def _ridge_copy(ridge_bake: Path, tmp_path: Path) -> Path:
    out = tmp_path / "out"
    shutil.copytree(ridge_bake, out)
    return out


def test_lowered_max_error_fails_naming_the_level(ridge_bake: Path, tmp_path: Path) -> None:
    out = _ridge_copy(ridge_bake, tmp_path)
    path = out / "knifeback.report.json"
    rep = json.loads(path.read_text())
    # a tenth of the figure the bake measured: far beyond the 5 % sampling allowance
    rep["lods"][0]["max_error_m"] = rep["lods"][0]["max_error_m"] / 10
    path.write_text(json.dumps(rep))
    res = run("check", str(RIDGE), str(out))
    assert res.returncode == 1, res.stdout
    fails = _failure_lines(res.stdout)
    line = next(x for x in fails.splitlines() if "understates" in x)
    assert "level 0:" in line and f"{rep['lods'][0]['max_error_m']:.4g} m" in line
    # the other levels and the colliders kept their figures: no complaint about them
    assert fails.count("understates") == 1


def test_bake_of_another_spec_fails_naming_both_hashes(ridge_bake: Path, tmp_path: Path) -> None:
    other = tmp_path / "knifeback.toml"
    other.write_text(RIDGE.read_text().replace("height_m = 24.0", "height_m = 25.0"))
    res = run("check", str(other), str(ridge_bake))
    assert res.returncode == 1
    fails = _failure_lines(res.stdout)
    assert "baked from another spec" in fails
    assert short_hash(spec_hash(load_spec(RIDGE))) in fails
    assert short_hash(spec_hash(load_spec(other))) in fails


def test_bake_without_a_spec_hash_fails(ridge_bake: Path, tmp_path: Path) -> None:
    out = _ridge_copy(ridge_bake, tmp_path)
    path = out / "knifeback.report.json"
    rep = json.loads(path.read_text())
    del rep[SPEC_HASH_KEY]
    path.write_text(json.dumps(rep))
    res = run("check", str(RIDGE), str(out))
    assert res.returncode == 1
    assert "knifeback.report.json: no spec hash" in _failure_lines(res.stdout)
