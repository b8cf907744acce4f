"""Real clients: three.js and Babylon.js (npm, benchmarks/clients/web) load the single, per-level,
uv and quantized layouts of a small world in headless Chromium (benchmarks/clients/clients.py).
Checked against the files themselves: three.js shows level 0 of the single file, no triangle
faces the centre, custom attributes keep their values; both place quantized chunks within the
reported rounding error and read TEXCOORD_0/1 as written. Skipped unless `npm install` was run
in benchmarks/clients/web and Chromium is installed (CHROMIUM, else /usr/bin/chromium)."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest
from test_blender import WORLD  # the same small world as the Blender import

REPO = Path(__file__).resolve().parents[1]
CLIENTS = REPO / "benchmarks" / "clients"


@pytest.fixture(scope="module")
def measured(tmp_path_factory: pytest.TempPathFactory) -> tuple[dict, dict]:
    if not (CLIENTS / "web" / "node_modules" / "puppeteer-core").exists():
        pytest.skip("run `npm install` in benchmarks/clients/web")
    if not Path(os.environ.get("CHROMIUM", "/usr/bin/chromium")).exists():
        pytest.skip("no Chromium (Debian package chromium, or CHROMIUM)")
    out = tmp_path_factory.mktemp("web")
    spec = out / "tarn.json"
    spec.write_text(json.dumps(WORLD))
    res = subprocess.run(
        [
            sys.executable,
            str(CLIENTS / "clients.py"),
            str(out),
            "--spec",
            str(spec),
            "--tolerance-m",
            "0.6",
            "--clients",
            "web",
        ],
        capture_output=True,
        text=True,
        timeout=900,
    )
    assert res.returncode == 0, res.stderr[-3000:]
    summary = json.loads((out / "clients.json").read_text())["clients"]
    report = json.loads((out / "quantized" / "tarn.report.json").read_text())
    return summary, report


def test_three_shows_level_0_of_the_single_file_facing_out(measured: tuple[dict, dict]) -> None:
    rows = measured[0]["three"]["rows"]
    for layout in ("float", "uv", "quantized"):
        r = rows[f"{layout}/tarn.glb"]
        assert r["levels_shown"] == "0" and r["triangles_match"]
        assert r["inward_triangles"] == 0
        assert r["custom"].startswith("kept") and r["custom_max_dev"] == 0
    for k in range(3):
        r = rows[f"float/tarn.lod{k}.glb"]
        assert r["levels_shown"] == str(k) and r["triangles_match"]


@pytest.mark.parametrize("client", ["three", "babylon"])
def test_quantized_positions_and_uv_channels_load(measured: tuple[dict, dict], client: str) -> None:
    summary, report = measured
    rows = summary[client]["rows"]
    assert report["export"]["quantization"]["applied"]
    bound = max(lv["max_position_error_m"] for lv in report["export"]["quantization"]["levels"])
    for k in range(3):
        assert rows[f"float/tarn.lod{k}.glb"]["radius_max_dev_m"] < 1e-9
        assert 0 < rows[f"quantized/tarn.lod{k}.glb"]["radius_max_dev_m"] <= bound + 1e-6
        uv = rows[f"uv/tarn.lod{k}.glb"]
        assert uv["uv_sets"] == 2 and uv["uv_v"] == "as written" and uv["uv_max_dev"] < 1e-5
