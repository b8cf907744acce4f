"""The command line: outputs, report keys, and bad input refused cleanly with nothing written."""

from __future__ import annotations

import json
import struct
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import trimesh

DEMO = Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml"


def run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "globemill", *args], capture_output=True, text=True, timeout=600
    )


@pytest.fixture(scope="module")
def baked(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("bake")
    res = run("bake", str(DEMO), "-o", str(out), "--tolerance-m", "1.0", "--quiet")
    assert res.returncode == 0, res.stderr
    assert res.stdout == ""  # --quiet
    return out


def test_bake_writes_the_named_files(baked: Path) -> None:
    assert sorted(p.name for p in baked.iterdir()) == [
        "pebblemoor.collision.glb",
        "pebblemoor.glb",
        "pebblemoor.report.json",
    ]


def test_report_has_the_documented_keys(baked: Path) -> None:
    rep = json.loads((baked / "pebblemoor.report.json").read_text())
    for key in ("planet", "tolerance_m", "lods", "collision", "seconds_total"):
        assert key in rep
    assert rep["planet"] == "pebblemoor"
    lod = rep["lods"][0]
    for key in (
        "level",
        "tolerance_m",
        "chunks",
        "vertices",
        "triangles",
        "max_error_m",
        "seconds",
    ):
        assert key in lod
    assert lod["tolerance_m"] == 1.0
    assert 0 < lod["max_error_m"] <= 1.0
    # levels: tolerance_m * ratio^k, each measured within its own tolerance
    ratio = 2.0
    for k, lv in enumerate(rep["lods"]):
        assert lv["level"] == k
        assert lv["tolerance_m"] == 1.0 * ratio**k
        assert 0 < lv["max_error_m"] <= lv["tolerance_m"]
    col = rep["collision"]
    for key in ("tolerance_m", "triangles", "max_error_m"):
        assert key in col
    assert col["max_error_m"] <= col["tolerance_m"]


def test_glb_header_and_mesh(baked: Path) -> None:
    data = (baked / "pebblemoor.glb").read_bytes()
    # glTF 2.0 binary header: magic, version 2, total length (Khronos glTF 2.0 spec, 4.4)
    magic, version, length = struct.unpack_from("<4sII", data)
    assert (magic, version, length) == (b"glTF", 2, len(data))
    assert len(data) % 4 == 0
    rep = json.loads((baked / "pebblemoor.report.json").read_text())
    scene = trimesh.load(baked / "pebblemoor.glb", force="scene", process=False)
    # the scene graph holds each chunk's finest level (coarser ones hang off MSFT_lod)
    meshes = scene.dump()
    assert len(meshes) == rep["lods"][0]["chunks"]
    assert sum(len(m.faces) for m in meshes) == rep["lods"][0]["triangles"]
    v = np.concatenate([m.vertices for m in meshes])
    r = np.linalg.norm(v, axis=1)
    # planet centre at the origin: every vertex is within the features' reach of the radius
    assert np.all(np.abs(r - 1500.0) < 200.0)


def test_same_input_same_bytes(tmp_path: Path, baked: Path) -> None:
    res = run(
        "bake", str(DEMO), "-o", str(tmp_path), "--tolerance-m", "1.0", "-q", "--threads", "1"
    )
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "pebblemoor.glb").read_bytes() == (baked / "pebblemoor.glb").read_bytes()


def test_schema_is_json() -> None:
    res = run("schema")
    assert res.returncode == 0
    assert json.loads(res.stdout)["type"] == "object"


def test_version_and_help() -> None:
    assert run("--version").stdout.startswith("globemill ")
    h = run("bake", "--help")
    assert h.returncode == 0 and "examples:" in h.stdout


BAD_SPECS = {
    "negative radius": ('name = "w"\nradius_m = -5.0\ntolerance_m = 0.5\n', "radius_m"),
    "nan": ('name = "w"\nradius_m = nan\ntolerance_m = 0.5\n', "radius_m"),
    "unknown kind": (
        'name = "w"\nradius_m = 1000.0\ntolerance_m = 0.5\n[[features]]\nkind = "volcano"\n',
        "kind",
    ),
    "zero tolerance": ('name = "w"\nradius_m = 1000.0\ntolerance_m = 0.0\n', "tolerance_m"),
    "malformed toml": ('name = "w"\nradius_m = = 3\n', "line"),
    "blown budget": (
        'name = "w"\nradius_m = 1000.0\ntolerance_m = 0.0001\nmax_triangles = 1000\n',
        "max_triangles",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD_SPECS))
def test_bad_input_is_refused_and_nothing_written(tmp_path: Path, case: str) -> None:
    text, needle = BAD_SPECS[case]
    spec = tmp_path / "w.toml"
    spec.write_text(text)
    out = tmp_path / "out"
    res = run("bake", str(spec), "-o", str(out))
    assert res.returncode != 0
    assert needle in res.stderr, res.stderr
    assert res.stderr.startswith("globemill: error:")
    assert "Traceback" not in res.stderr
    assert not out.exists() or not any(out.iterdir())


def test_missing_file(tmp_path: Path) -> None:
    res = run("bake", str(tmp_path / "nope.toml"), "-o", str(tmp_path / "out"))
    assert res.returncode == 2
    assert "nope.toml" in res.stderr and "Traceback" not in res.stderr
    assert not (tmp_path / "out").exists()


def test_bad_option_value(tmp_path: Path) -> None:
    res = run("bake", str(DEMO), "-o", str(tmp_path / "o"), "--tolerance-m", "-1")
    assert res.returncode == 2
    assert "tolerance_m" in res.stderr and "> 0" in res.stderr
    assert not (tmp_path / "o").exists()


def test_help_documents_every_exit_code() -> None:
    for cmd in ("bake", "farm"):
        text = " ".join(run(cmd, "--help").stdout.split())
        for code in ("2 ", "3 ", "4 ", "5 ", "130 ", "143 "):
            assert code in text, (cmd, code)
        assert "--max-memory GB" in text
    text = " ".join(run("bake", "--help").stdout.split())
    assert "4 a file could not be written or read" in text
    assert "5 refused before the work" in text
