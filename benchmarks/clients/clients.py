"""Load every .glb layout in real clients and tabulate what each one gives (docs/gltf.md, Layouts).

    python benchmarks/clients/clients.py OUTDIR [--spec examples/pebblemoor.toml] [--tolerance-m 2]
        [--clients blender,godot,web]

1. make_layouts.py bakes the spec once and writes the float / uv / quantized layouts, each as the
   single MSFT_lod file and one file per level, with OUTDIR/expected.json.
2. Each client present loads every file and writes OUTDIR/<client>.json (one record per file:
   levels visible and hidden, triangles, the channels kept and their value ranges, the distance
   of visible vertices from the centre) and a picture OUTDIR/<client>.png of the single file:
   - Blender: bpy in the interpreter GLOBEMILL_BPY_PYTHON, else .venv-bpy/bin/python;
   - Godot 3: `godot3` under `xvfb-run`: the editor imports the files (once with the default
     import settings, once more for uv/<name>.lod0.glb with meshes/compress off), then
     godot/measure.gd instances them;
   - three.js and Babylon.js: web/ (npm install there) in headless Chromium (CHROMIUM, else
     /usr/bin/chromium) through puppeteer-core, the files served by a local http.server.
   A client that is absent is skipped with a message.
3. The comparison with expected.json is printed as one Markdown table per client and written to
   OUTDIR/clients.json.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[1]
XVFB = ["xvfb-run", "-a", "-s", "-screen 0 1280x720x24"]


def log(msg: str) -> None:
    print(msg, file=sys.stderr, flush=True)


# ---- running the clients ---------------------------------------------------------------------


def run_blender(out: Path) -> None:
    py = os.environ.get("GLOBEMILL_BPY_PYTHON") or str(REPO / ".venv-bpy" / "bin" / "python")
    if not Path(py).exists():
        log(f"blender: skipped, no {py} (a Python 3.11 venv with `pip install bpy`)")
        return
    cmd = [py, str(HERE / "blender_measure.py"), str(out), str(out / "blender.json")]
    subprocess.run([*cmd, str(out / "blender.png")], check=True, capture_output=True)


def godot_import(project: Path, files: list[str], timeout_s: float = 900.0) -> None:
    """The Godot 3 editor imports a project's files and then does not always quit: wait until
    every file has its imported scene, then end the editor (its own process group)."""
    proc = subprocess.Popen(
        [*XVFB, "godot3", "--path", str(project), "--editor", "--quit"],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )
    start = time.monotonic()
    try:
        while time.monotonic() - start < timeout_s:
            if proc.poll() is not None or all(imported(project, f) for f in files):
                break
            time.sleep(2.0)
        else:
            raise RuntimeError(f"godot3 did not import {project} within {timeout_s} s")
        time.sleep(3.0)  # let the editor finish writing
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGTERM)
            proc.wait(timeout=30)
    missing = [f for f in files if not imported(project, f)]
    if missing:
        raise RuntimeError(f"godot3 did not import {missing}")


def imported(project: Path, rel: str) -> bool:
    meta = project / (rel + ".import")
    if not meta.exists():
        return False
    for line in meta.read_text().splitlines():
        if line.startswith("dest_files="):
            dest = line.split('"')[1].replace("res://", "")
            return (project / dest).exists()
    return False


def run_godot(out: Path, files: list[str]) -> None:
    if not (shutil.which("godot3") and shutil.which("xvfb-run")):
        log("godot: skipped, no godot3 or xvfb-run (Debian packages godot3, xvfb)")
        return
    result: dict[str, Any] = {}
    raw = "uv/" + files[0].split("/")[1].replace(".glb", ".lod0.glb")
    for tag, names, defaults in (("default", files, ""), ("nocompress", [raw], NOCOMPRESS)):
        project = out / f"godot-{tag}"
        shutil.rmtree(project, ignore_errors=True)
        project.mkdir()
        (project / "project.godot").write_text(
            (HERE / "godot" / "project.godot").read_text() + defaults
        )
        shutil.copy(HERE / "godot" / "measure.gd", project)
        for rel in names:
            (project / rel).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy(out / rel, project / rel)
        godot_import(project, names)
        lines = list(names)
        if tag == "default":
            lines.append(f"shot {files[0].replace('uv/', 'float/')} {out / 'godot.png'}")
        (project / "files.txt").write_text("\n".join(lines) + "\n")
        subprocess.run(
            [*XVFB, "godot3", "--path", str(project), "-s", "measure.gd"],
            check=True,
            capture_output=True,
            timeout=900,
        )
        got = json.loads((project / "result.json").read_text())
        if tag == "default":
            result = got
        else:
            result["files"][raw + " (meshes/compress off)"] = got["files"][raw]
    (out / "godot.json").write_text(json.dumps(result, indent=1) + "\n")


NOCOMPRESS = '\n[importer_defaults]\n\nscene={\n"meshes/compress": false\n}\n'


def run_web(out: Path) -> None:
    web = HERE / "web"
    chromium = os.environ.get("CHROMIUM", "/usr/bin/chromium")
    if not (web / "node_modules" / "puppeteer-core").exists() or not Path(chromium).exists():
        log(f"web: skipped, run `npm install` in {web} and install chromium")
        return
    link = out / "_web"
    if link.is_symlink() or link.exists():
        link.unlink()
    link.symlink_to(web)
    server = subprocess.Popen(
        [sys.executable, "-u", "-m", "http.server", "0", "--bind", "127.0.0.1"],
        cwd=out,
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
    )
    try:
        assert server.stdout is not None
        port = server.stdout.readline().split("port ")[1].split()[0]
        subprocess.run(
            ["node", str(web / "measure.mjs"), f"http://127.0.0.1:{port}", str(out), str(out)],
            check=True,
            cwd=web,
            capture_output=True,
            timeout=1800,
        )
    finally:
        server.terminate()
        server.wait(timeout=30)


# ---- comparing with what the files hold ------------------------------------------------------


def lo_hi(r: list[Any]) -> tuple[list[float], list[float]]:
    """[lo, hi] with scalars or one-element lists, as [lo...], [hi...]."""
    lo, hi = r
    return (lo if isinstance(lo, list) else [lo]), (hi if isinstance(hi, list) else [hi])


def span(ranges: list[list[float]]) -> list[float]:
    return [min(r[0] for r in ranges), max(r[1] for r in ranges)]


def dev(got: list[Any], want: list[list[float]]) -> float:
    """Largest difference between a measured [lo, hi] (per component) and wanted [lo, hi]s."""
    lo, hi = lo_hi(got)
    return max(max(abs(lo[j] - w[0]), abs(hi[j] - w[1])) for j, w in enumerate(want))


def compare(rec: dict[str, Any], want: dict[str, Any], twin: dict[str, Any]) -> dict[str, Any]:
    """One row: what a client made of one file, against the file itself (`want`) and its float32
    twin (`twin`, for the distances from the centre)."""
    if "error" in rec:
        return {"error": rec["error"][:200]}
    shown = sorted(rec["visible"], key=int)
    tris = sum(v["triangles"] for v in rec["visible"].values())
    expect = sum(want["levels"][k]["triangles"] for k in shown if k in want["levels"])
    lv = [want["levels"][k] for k in shown if k in want["levels"]]
    row: dict[str, Any] = {
        "levels_shown": ",".join(shown),
        "levels_hidden": ",".join(sorted(rec["hidden"], key=int)),
        "triangles": tris,
        "triangles_match": tris == expect,
    }
    if "inward_triangles" in rec:
        row["inward_triangles"] = rec["inward_triangles"]
    if rec.get("loaded_levels") and len(rec["loaded_levels"]) > 1:
        row["levels_loaded"] = ",".join(rec["loaded_levels"])
    custom = rec["kept"]["custom"]
    if custom:
        devs = []
        for name in custom:
            devs.append(dev(rec["ranges"][name], [span([x["ranges"][name.upper()] for x in lv])]))
        row["custom"] = ("kept as " + ", ".join(custom)) if custom[0] != "_SLOPE" else "kept"
        row["custom_max_dev"] = max(devs)
    else:
        row["custom"] = "dropped"
    if "uv0" in rec["ranges"]:
        slope = span([x["ranges"]["_SLOPE"] for x in lv])
        alt = span([x["ranges"]["_ALTITUDE"] for x in lv])
        layer = span([x["ranges"]["_LAYER"] for x in lv])
        straight = dev(rec["ranges"]["uv0"], [slope, alt])
        flipped = dev(rec["ranges"]["uv0"], [slope, [1 - alt[1], 1 - alt[0]]])
        row["uv_v"] = "as written" if straight <= flipped else "1 - v"
        row["uv_max_dev"] = min(straight, flipped)
        if "uv1" in rec["ranges"]:
            lo, hi = lo_hi(rec["ranges"]["uv1"])
            row["uv_max_dev"] = max(row["uv_max_dev"], abs(lo[0] - layer[0]), abs(hi[0] - layer[1]))
    row["uv_sets"] = rec["kept"]["uv_sets"]
    row["color"] = rec["kept"]["color"]
    row["color_in_material"] = rec["kept"]["color_in_material"]
    row["morph_targets"] = rec["kept"]["morph"]
    row["extras"] = rec["kept"]["extras"]
    radius = [twin["levels"][k]["ranges"]["radius"] for k in shown if k in twin["levels"]]
    if radius and "radius" in rec["ranges"]:
        row["radius_max_dev_m"] = dev(rec["ranges"]["radius"], [span(radius)])
    return row


LAYOUT_NAMES = {
    "float/{n}.glb": "single file (MSFT_lod)",
    "float/{n}.lod0.glb": "level file, lod0",
    "float/{n}.lod3.glb": "level file, lod3",
    "uv/{n}.glb": "single file + uv",
    "uv/{n}.lod0.glb": "level file + uv, lod0",
    "uv/{n}.lod0.glb (meshes/compress off)": "level file + uv, lod0, compress off",
    "quantized/{n}.glb": "single file, quantized",
    "quantized/{n}.lod0.glb": "level file, quantized, lod0",
}


def yes(b: bool) -> str:
    return "yes" if b else "no"


def table(client: dict[str, Any], rows: dict[str, dict[str, Any]], name: str) -> str:
    head = (
        "| layout | levels shown | triangles drawn | _SLOPE/_ALTITUDE/_LAYER | TEXCOORD_0/1 "
        "| COLOR_0 | morph target | extras | positions: radius dev m |"
    )
    lines = [f"{client['client']} {client['version']}", "", head, "|" + "---|" * 9]
    for key, label in LAYOUT_NAMES.items():
        r = rows.get(key.format(n=name))
        if r is None:
            continue
        if "error" in r:
            lines.append(f"| {label} | load failed: {r['error']} |" + " |" * 7)
            continue
        shown = r["levels_shown"] + (
            f" (loaded {r['levels_loaded']})" if "levels_loaded" in r else ""
        )
        if r["levels_hidden"]:
            shown += f"; {r['levels_hidden']} hidden"
        custom = r["custom"] + (
            f" (dev {r['custom_max_dev']:.3g})" if "custom_max_dev" in r else ""
        )
        uv = "—"
        if "uv_v" in r:
            uv = f"{r['uv_sets']} sets, v {r['uv_v']}, dev {r['uv_max_dev']:.3g}"
        inward = f", {r['inward_triangles']} facing inward" if "inward_triangles" in r else ""
        color = "kept, " + ("used as albedo" if r["color_in_material"] else "not in material")
        lines.append(
            f"| {label} | {shown} | {r['triangles']}{'' if r['triangles_match'] else ' (MISMATCH)'}"
            f"{inward} "
            f"| {custom} | {uv} | {color if r['color'] else 'dropped'} | {r['morph_targets']} "
            f"| {yes(r['extras'])} | {r.get('radius_max_dev_m', float('nan')):.3g} |"
        )
    return "\n".join(lines)


def summarise(out: Path) -> str:
    expected = json.loads((out / "expected.json").read_text())
    files = expected["files"]
    name = Path(next(iter(files))).name.split(".")[0]
    summary: dict[str, Any] = {
        "expected": {
            "spec": expected["spec"],
            "tolerance_m": expected["tolerance_m"],
            "globemill": expected["globemill"],
        },
        "clients": {},
    }
    tables = []
    for c in ("blender", "godot", "three", "babylon"):
        path = out / f"{c}.json"
        if not path.exists():
            continue
        client = json.loads(path.read_text())
        rows = {}
        for rel, rec in client["files"].items():
            base = rel.split(" ")[0]
            twin = files["float/" + Path(base).name]
            rows[rel] = compare(rec, files[base], twin)
        summary["clients"][c] = {k: client[k] for k in client if k != "files"} | {"rows": rows}
        tables.append(table(client, rows, name))
    (out / "clients.json").write_text(json.dumps(summary, indent=1) + "\n")
    return "\n\n".join(tables)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("outdir", type=Path)
    ap.add_argument("--spec", default=str(REPO / "examples" / "pebblemoor.toml"))
    ap.add_argument("--tolerance-m", default="2")
    ap.add_argument("--clients", default="blender,godot,web")
    ap.add_argument("--summary-only", action="store_true", help="only tabulate OUTDIR's results")
    args = ap.parse_args()
    out = args.outdir.resolve()
    if not args.summary_only:
        out.mkdir(parents=True, exist_ok=True)
        subprocess.run(
            [
                sys.executable,
                str(HERE / "make_layouts.py"),
                args.spec,
                str(out),
                "--tolerance-m",
                args.tolerance_m,
            ],
            check=True,
            stdout=subprocess.DEVNULL,
        )
        files = list(json.loads((out / "expected.json").read_text())["files"])
        chosen = args.clients.split(",")
        for c in chosen:
            if c not in {"blender", "godot", "web"}:
                sys.exit(f"--clients: {c!r} is not one of blender, godot, web")
        for c in chosen:
            log(f"{c} ...")
            {
                "blender": lambda: run_blender(out),
                "godot": lambda: run_godot(out, files),
                "web": lambda: run_web(out),
            }[c]()
    print(summarise(out))


if __name__ == "__main__":
    main()
