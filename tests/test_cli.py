"""The command line: outputs, report keys, and bad input refused cleanly with nothing written."""

from __future__ import annotations

import json
import struct
import subprocess
import sys
from pathlib import Path
from typing import Any

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


# ---- every bake option of the Python API is a flag ----------------------------------------------

SMALL = """name = "knoll"
radius_m = 1000.0
tolerance_m = 2.0

[[features]]
kind = "hill"
name = "Tor"
lat_deg = 10.0
lon_deg = 0.0
amplitude_m = 40.0
sigma_m = 120.0

[[layers]]
name = "grass"
color = [0.2, 0.5, 0.1]
slope_deg = [0.0, 90.0]
altitude_m = [-100.0, 100.0]
"""


@pytest.fixture()
def small(tmp_path: Path) -> Path:
    spec = tmp_path / "knoll.toml"
    spec.write_text(SMALL)
    return spec


def test_lod_flags_override_the_spec_and_check_agrees(tmp_path: Path, small: Path) -> None:
    out = tmp_path / "out"
    res = run(
        "bake", str(small), "-o", str(out), "-q", "--levels", "2", "--ratio", "3",
        "--chunk-level", "1", "--seams", "skirt", "--no-collision",
    )  # fmt: skip
    assert res.returncode == 0, res.stderr
    assert sorted(p.name for p in out.iterdir()) == ["knoll.glb", "knoll.report.json"]
    rep = json.loads((out / "knoll.report.json").read_text())
    # 20 * 4^c chunks along the subdivided icosahedron (docs/lod.md), tolerances eps_0 * ratio^k
    assert [lv["chunks"] for lv in rep["lods"]] == [80, 80]
    assert [lv["tolerance_m"] for lv in rep["lods"]] == [2.0, 6.0]
    assert rep["seams"] == "skirt" and rep["collision"] is None
    scene = trimesh.load(out / "knoll.glb", force="scene", process=False)
    assert len(scene.geometry) == 80 * 2  # every chunk at both levels (MSFT_lod nodes included)
    # the check reads what the flags made, and every guarantee holds
    chk = run("check", str(small), str(out))
    assert chk.returncode == 0, chk.stdout + chk.stderr


def test_a_rebake_removes_the_outputs_of_the_previous_bake_it_does_not_write(
    tmp_path: Path, small: Path
) -> None:
    out = tmp_path / "out"
    first = run("bake", str(small), "-o", str(out), "-q", "--levels", "2", "--level-files")
    assert first.returncode == 0, first.stderr
    written = {"knoll.glb", "knoll.report.json", "knoll.collision.glb", "knoll.lod0.glb"}
    assert written | {"knoll.lod1.glb"} == {p.name for p in out.iterdir()}
    # files the bake did not write stay, whatever their names
    for other in ("knoll.notes.txt", "other.glb", "knoll.lod7.glb"):
        (out / other).write_text("not the bake's")
    again = run("bake", str(small), "-o", str(out), "--levels", "2", "--no-collision")
    assert again.returncode == 0, again.stderr
    names = {p.name for p in out.iterdir()}
    assert names == {"knoll.glb", "knoll.report.json", "knoll.notes.txt", "other.glb",
                     "knoll.lod7.glb"}  # fmt: skip
    rep = json.loads((out / "knoll.report.json").read_text())
    assert sorted(rep["export"]["removed"]) == [
        "knoll.collision.glb", "knoll.lod0.glb", "knoll.lod1.glb",
    ]  # fmt: skip
    assert "removed" in again.stdout and "knoll.collision.glb" in again.stdout
    chk = run("check", str(small), str(out))
    assert chk.returncode == 0, chk.stdout + chk.stderr


def test_python_api_and_flags_give_the_same_bytes(tmp_path: Path, small: Path) -> None:
    import globemill
    from globemill.output import write_outputs

    spec = globemill.load_spec(small)
    result = globemill.bake(spec, levels=3, ratio=2.5, chunk_level=0, collision=False, threads=1)
    write_outputs(result, tmp_path / "api")
    res = run(
        "bake", str(small), "-o", str(tmp_path / "cli"), "-q", "--levels", "3", "--ratio",
        "2.5", "--chunk-level", "0", "--no-collision", "--threads", "1",
    )  # fmt: skip
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "cli" / "knoll.glb").read_bytes() == (
        tmp_path / "api" / "knoll.glb"
    ).read_bytes()


BAD_OPTIONS = {
    "levels not a number": (["bake", "--levels", "x"], "--levels"),
    # the flag and the core's range (csrc/bake.cpp, check_lod), the same for every command
    "levels 0": (["bake", "--levels", "0"], "--levels: must be an integer in 1..12, got 0"),
    "ratio 1": (["bake", "--ratio", "1"], "--ratio: must be > 1 and <= 16, got 1"),
    "chunk level -1": (["bake", "--chunk-level", "-1"], "--chunk-level: must be an integer in"),
    "chunk level 9": (["bake", "--chunk-level", "9"], "--chunk-level: must be an integer in 0..5"),
    "export levels 13": (["export", "--levels", "13"], "--levels: must be an integer in 1..12"),
    "preview ratio 17": (["preview", "--ratio", "17"], "--ratio: must be > 1 and <= 16, got 17"),
    "farm levels 0": (["farm", "--levels", "0"], "--levels: must be an integer in 1..12, got 0"),
    "farm ratio 1": (["farm", "--ratio", "1"], "--ratio: must be > 1 and <= 16, got 1"),
    "farm chunk level 6": (["farm", "--chunk-level", "6"], "--chunk-level: must be an integer"),
    "farm seams": (["farm", "--seams", "weld"], "--seams"),
    "farm levels not a number": (["farm", "--levels", "two"], "--levels"),
    "seams": (["bake", "--seams", "weld"], "--seams"),
    "threads": (["bake", "--threads", "-3"], "threads"),
    # the core's range (csrc/bake.cpp, check_settings); the farm checks it before any work and
    # says the same, rather than failing every world and writing farm.json
    "threads 1025": (["bake", "--threads", "1025"], "threads: must be an integer in 0..1024"),
    "farm threads 1025": (["farm", "--threads", "1025"], "threads: must be an integer in 0..1024"),
    "tolerance -1": (["bake", "--tolerance-m", "-1"], "tolerance_m: must be > 0 and <="),
    "farm tolerance -1": (["farm", "--tolerance-m", "-1"], "tolerance_m: must be > 0 and <="),
    "farm tolerance nan": (["farm", "--tolerance-m", "nan"], "tolerance_m: must be > 0 and <="),
    "quantize share": (["bake", "--quantize-share", "2"], "--quantize-share"),
    "watch interval": (["bake", "--watch", "--interval", "0"], "--interval"),
    "watch rounds": (["bake", "--watch", "--rounds", "0"], "--rounds"),
    "level past --levels": (["export", "--levels", "2", "--level", "2"], "--levels"),
    "picture type": (["preview", "--size", "200x100"], ".gif"),
    "grid": (["preview", "--grid", "200"], "grid"),
    "view": (["preview", "--views", "sideways"], "view"),
}


@pytest.mark.parametrize("case", sorted(BAD_OPTIONS))
def test_bad_option_values_one_message_exit_2_nothing_written(
    tmp_path: Path, small: Path, case: str
) -> None:
    (cmd, *flags), needle = BAD_OPTIONS[case]
    out = tmp_path / "out"
    target = {"bake": out, "farm": out, "export": out / "k.ply", "preview": out / "k.gif"}[cmd]
    if cmd == "preview" and case != "picture type":
        target = out / "k.png"
    res = run(cmd, str(small), "-o", str(target), *flags)
    assert res.returncode == 2, res.stderr
    lines = res.stderr.strip().splitlines()
    assert len(lines) == 1 and "error:" in lines[0] and needle in lines[0], res.stderr
    assert res.stdout == ""
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["knoll.toml"]


# ---- bake --watch -------------------------------------------------------------------------------


def test_watch_rebakes_each_save_through_the_session(tmp_path: Path, small: Path) -> None:
    import threading
    import time

    from globemill.cli import main

    out = tmp_path / "out"
    codes: list[int] = []
    argv = ["bake", str(small), "-o", str(out), "-q", "--watch", "--rounds", "2"]
    t = threading.Thread(target=lambda: codes.append(main([*argv, "--interval", "0.05"])))
    t.start()
    report, preview = out / "knoll.report.json", out / "knoll.preview.png"
    deadline = time.monotonic() + 300
    while not preview.exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    first = json.loads(report.read_text())
    first_png = preview.read_bytes()
    # a bad save is reported and waited out; the last good bake stays
    small.write_text(SMALL.replace("sigma_m = 120.0", "sigma_m = -5.0"))
    time.sleep(1.0)
    assert json.loads(report.read_text()) == first
    # a good save: the hill grows, the session re-bakes and the picture is drawn again
    edited = SMALL.replace("amplitude_m = 40.0", "amplitude_m = 70.0")
    small.write_text(edited)
    t.join(timeout=300)
    assert codes == [0]
    second = json.loads(report.read_text())
    assert second["spec_sha256"] != first["spec_sha256"]
    assert second["lods"][0]["triangles"] != first["lods"][0]["triangles"]
    assert preview.read_bytes() != first_png
    # the session's result is a fresh bake of the edited spec, byte for byte
    fresh = tmp_path / "fresh"
    assert run("bake", str(small), "-o", str(fresh), "-q").returncode == 0
    for name in ("knoll.glb", "knoll.collision.glb"):
        assert (out / name).read_bytes() == (fresh / name).read_bytes(), name


# ---- globemill spec validate | convert | format -------------------------------------------------


def test_spec_convert_round_trips_toml_and_json(tmp_path: Path) -> None:
    tomllib = pytest.importorskip("tomllib")

    import globemill

    as_json, as_toml = tmp_path / "p.json", tmp_path / "p.toml"
    assert run("spec", "convert", str(DEMO), "-o", str(as_json)).returncode == 0
    assert run("spec", "convert", str(as_json), "-o", str(as_toml)).returncode == 0
    # the standard library's readers take both files; both describe the demo world exactly
    json.loads(as_json.read_text())
    tomllib.loads(as_toml.read_text())
    want = globemill.load_spec(DEMO)
    assert globemill.load_spec(as_json) == want and globemill.load_spec(as_toml) == want
    # formatting a freshly converted file changes nothing
    assert run("spec", "format", str(as_toml), "--check").returncode == 0


def test_spec_validate_and_format(tmp_path: Path, small: Path) -> None:
    ok = run("spec", "validate", str(small))
    assert ok.returncode == 0 and "valid" in ok.stdout
    bad = tmp_path / "bad.toml"
    bad.write_text(SMALL.replace("sigma_m = 120.0", "sigma_m = -5.0"))
    res = run("spec", "validate", str(bad))
    assert res.returncode == 2 and "sigma_m" in res.stderr
    # keys out of order: --check says so and changes nothing; format rewrites in the table's order
    messy = tmp_path / "messy.json"
    messy.write_text(json.dumps({"tolerance_m": 2.0, "radius_m": 1000.0, "name": "m"}))
    before = messy.read_text()
    assert run("spec", "format", str(messy), "--check").returncode == 1
    assert messy.read_text() == before
    assert run("spec", "format", str(messy)).returncode == 0
    assert list(json.loads(messy.read_text())) == ["name", "radius_m", "tolerance_m"]
    # a TOML file with comments is left alone (formatting would drop them)
    commented = tmp_path / "c.toml"
    commented.write_text("# my world\ntolerance_m = 2.0\nname = 'c'\nradius_m = 1000.0\n")
    res = run("spec", "format", str(commented))
    assert res.returncode == 2 and "comments" in res.stderr
    assert commented.read_text().startswith("# my world")
    # a bad spec or suffix: exit 2, nothing written
    res = run("spec", "convert", str(bad), "-o", str(tmp_path / "x.json"))
    assert res.returncode == 2 and not (tmp_path / "x.json").exists()
    res = run("spec", "convert", str(small), "-o", str(tmp_path / "x.yaml"))
    assert res.returncode == 2 and ".yaml" in res.stderr and not (tmp_path / "x.yaml").exists()


def test_uncovered_ground_is_warned_about(tmp_path: Path, small: Path) -> None:
    import globemill
    from globemill.spec_warnings import layer_coverage

    # a single rule for flat ground only: the hill's flanks get no layer
    narrow = tmp_path / "narrow.toml"
    narrow.write_text(SMALL.replace("slope_deg = [0.0, 90.0]", "slope_deg = [0.0, 3.0]"))
    spec = globemill.load_spec(narrow)
    share = layer_coverage(spec)["uncovered"]
    # the same share measured on a bake: each vertex stands for a third of its triangles' area
    result = globemill.bake(spec, tolerance_m=0.5, collision=False)
    pos, tris = result.mesh(0)
    corner = pos[tris]
    area = 0.5 * np.linalg.norm(
        np.cross(corner[:, 1] - corner[:, 0], corner[:, 2] - corner[:, 0]), axis=1
    )
    bare = (result.layer[np.flatnonzero(result.levels[0].present)] == 255)[tris].mean(axis=1)
    assert share > 0.01 and abs(share - float((bare * area).sum() / area.sum())) < 0.01
    res = run("spec", "validate", str(narrow))
    assert res.returncode == 0 and f"no rule covers {100 * share:.0f}% of the ground" in res.stderr
    res = run("bake", str(narrow), "-o", str(tmp_path / "o"))
    assert res.returncode == 0 and "warning:" in res.stderr and "no rule covers" in res.stderr
    # full bands: nothing to say
    res = run("spec", "validate", str(small))
    assert res.returncode == 0 and "warning" not in res.stderr


# ---- the help and the docs tell the truth -------------------------------------------------------


def _subparsers(parser: Any) -> dict[str, Any]:
    import argparse

    out = {}
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                out[name] = sub
                out.update({f"{name} {k}": v for k, v in _subparsers(sub).items()})
    return out


def test_top_level_help_lists_every_option_of_every_command() -> None:
    from globemill.cli import build_parser

    text = run("--help").stdout
    flat = " ".join(text.split())
    for name, sub in _subparsers(build_parser()).items():
        if name == "spec":
            continue  # a group: its actions are listed
        assert f"globemill {name} " in flat, name
        for action in sub._actions:
            # the usage line names each option by its first spelling (-o for -o/--output)
            first = action.option_strings[0] if action.option_strings else None
            if first and first != "-h":
                assert f"[{first}" in flat or f" {first} " in flat, (name, first)


def test_each_command_has_its_own_examples_and_they_parse() -> None:
    import shlex

    from globemill.cli import EXAMPLES, build_parser

    parser = build_parser()
    seen: dict[str, str] = {}
    for cmd in EXAMPLES:
        text = run(cmd, "--help").stdout
        lines = [ln.strip() for ln in text.split("examples:")[1].splitlines() if ln.strip()]
        examples = [ln for ln in lines if ln.startswith("globemill ")]
        assert examples == EXAMPLES[cmd], cmd
        for line in examples:
            assert line not in seen, (line, cmd, seen.get(line))  # no example repeated
            seen[line] = cmd
            args = parser.parse_args(shlex.split(line.split(" > ")[0])[1:])
            assert args.command == cmd


def test_spec_examples_run_as_shown(tmp_path: Path) -> None:
    import shlex
    import shutil

    from globemill.cli import EXAMPLES

    # each example of `globemill spec` run in a copy of the checkout's examples/: all succeed
    # (`format --check` exit 0: the shipped JSON is in the formatter's layout)
    shutil.copytree(DEMO.parent, tmp_path / "examples")
    for line in EXAMPLES["spec"]:
        args = shlex.split(line)[1:]
        res = subprocess.run(
            [sys.executable, "-m", "globemill", *args],
            capture_output=True,
            text=True,
            timeout=600,
            cwd=tmp_path,
        )
        assert res.returncode == 0, (line, res.stderr)
        assert line in run(*args[:2], "--help").stdout  # and its action's --help shows it


def test_tutorial_step_5_starts_from_the_demo_spec() -> None:
    import globemill

    layers = {x.name: x for x in globemill.load_spec(DEMO).layers}
    edge = layers["shingle"].altitude_m[1]
    assert edge == layers["moor grass"].altitude_m[0] == -2.0
    tutorial = (DEMO.parents[1] / "docs" / "tutorial.md").read_text()
    step = tutorial.split("## 5.")[1].split("## 6.")[0]
    assert "from −2 m up to +1 m" in step  # the boundary as the spec has it, moved elsewhere


def test_tutorial_step_5_edits_do_what_it_says(tmp_path: Path) -> None:
    # the step's three edits of the demo spec, each made on a copy and run through
    # `globemill spec validate`: both edges moved, only moor grass's, only shingle's
    text = DEMO.read_text()
    shingle, grass = "altitude_m = [-15.0, -2.0]", "altitude_m = [-2.0, 32.0]"
    assert text.count(shingle) == 1 and text.count(grass) == 1
    edits = {
        "both": text.replace(shingle, "altitude_m = [-15.0, 1.0]").replace(
            grass, "altitude_m = [1.0, 32.0]"
        ),
        "grass": text.replace(grass, "altitude_m = [1.0, 32.0]"),
        "shingle": text.replace(shingle, "altitude_m = [-15.0, 1.0]"),
    }
    said = {}
    for name, body in edits.items():
        path = tmp_path / f"{name}.toml"
        path.write_text(body)
        res = run("spec", "validate", str(path))
        assert res.returncode == 0, res.stderr
        said[name] = res.stderr
    step = (DEMO.parents[1] / "docs" / "tutorial.md").read_text().split("## 5.")[1]
    step = " ".join(step.split("## 6.")[0].split())
    # the gap: warned about with the share the tutorial quotes; the overlap and the full move:
    # nothing to warn about
    share = said["grass"].split("no rule covers ")[1].split("%")[0]
    assert f"warns that no rule covers {share}% of the ground" in step
    assert "no rule covers" not in said["both"] and "no rule covers" not in said["shingle"]
    # first match wins: only shingle's edge moved lays out the ground as both edges moved
    import globemill
    from globemill.spec_warnings import layer_coverage

    cov = {
        name: layer_coverage(globemill.load_spec(tmp_path / f"{name}.toml"))["layers"]
        for name in ("both", "shingle")
    }
    assert cov["shingle"] == cov["both"]
    assert "the picture is the same as with both edges moved" in step


def test_an_over_budget_bake_names_the_feature_and_key_behind_it(tmp_path: Path) -> None:
    # a broad hill and fine noise: the noise alone needs nearly every triangle
    spec = DEMO.parents[1] / "tests" / "data" / "over_budget_noise.toml"
    res = run("bake", str(spec), "-o", str(tmp_path / "out"))
    assert res.returncode == 3
    line = res.stderr.strip()
    assert "max_triangles" in line and "features[1] ('grit') drives" in line
    assert "features[1] is a noise; its finest scale is set by frequency_per_m" in line
    assert "frequency_per_m = 0.2" in line
    assert not (tmp_path / "out").exists()
