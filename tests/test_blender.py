"""A real client: Blender's Python module (bpy, from the package index; it needs Python 3.11)
imports the MSFT_lod layout and the per-level layout, float32 and quantized. Blender shows level 0
of every chunk and keeps the coarser levels out of the view layer; a level file shows its level.
The vertex and triangle counts Blender reports match the bake's report.

bpy is big (about 1 GB installed), so it lives in a venv of its own: set GLOBEMILL_BPY_PYTHON to
its interpreter (.ci/run does where python3.11 exists); skipped when no interpreter with bpy is
found."""

from __future__ import annotations

import importlib.util
import json
import os
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest

import globemill
from globemill.output import GlbOptions, write_outputs

HERE = Path(__file__).resolve().parent
SCRIPT = HERE / "blender_import.py"

WORLD = {
    "name": "tarn",
    "radius_m": 300.0,
    "tolerance_m": 0.6,
    "lod": {"levels": 3, "chunk_level": 1},
    "features": [
        {"kind": "hill", "lat_deg": 10.0, "lon_deg": 20.0, "amplitude_m": 20.0, "sigma_m": 30.0},
        {"kind": "hill", "lat_deg": -30.0, "lon_deg": 100.0, "amplitude_m": -8.0, "sigma_m": 25.0},
        {"kind": "noise", "amplitude_m": 1.0, "frequency_per_m": 0.05, "octaves": 3, "seed": 5},
    ],
    "layers": [{"name": "steep", "color": [0.4, 0.3, 0.2], "slope_deg": [30.0, 90.0]}],
}


def bpy_python() -> str:
    env = os.environ.get("GLOBEMILL_BPY_PYTHON")
    if env:
        if not Path(env).exists():
            pytest.fail(f"GLOBEMILL_BPY_PYTHON={env} does not exist")
        return env
    if importlib.util.find_spec("bpy") is not None:
        return sys.executable
    local = HERE.parent / ".venv-bpy" / "bin" / "python"
    if local.exists():
        return str(local)
    pytest.skip("no Python with bpy (pip install bpy in a Python 3.11 venv, GLOBEMILL_BPY_PYTHON)")


def blender_import(paths: list[Path]) -> dict[str, Any]:
    res = subprocess.run(
        [bpy_python(), str(SCRIPT), *map(str, paths)],
        capture_output=True,
        text=True,
        timeout=900,
    )
    assert res.returncode == 0, res.stderr[-3000:]
    return json.loads(res.stdout.strip().splitlines()[-1])


@pytest.fixture(scope="module")
def bakes(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[Path, dict[str, Any]]]:
    result = globemill.bake(globemill.parse_spec(WORLD))
    out = {}
    for name, opts in (
        ("float", GlbOptions(level_files=True)),
        ("quantized", GlbOptions(level_files=True, uv_attributes=True, quantize=True)),
    ):
        d = tmp_path_factory.mktemp(name)
        write_outputs(result, d, options=opts)
        out[name] = (d, json.loads((d / "tarn.report.json").read_text()))
    return out


@pytest.mark.parametrize("layout", ["float", "quantized"])
def test_blender_shows_level_0_of_the_msft_lod_layout(bakes: Any, layout: str) -> None:
    out, report = bakes[layout]
    if layout == "quantized":
        assert report["export"]["quantization"]["applied"]
    seen = blender_import([out / "tarn.glb"])[str(out / "tarn.glb")]
    chunks = report["export"]["acmr"][0]
    nchunks = report["lods"][0]["chunks"]
    visible = seen["visible"]
    assert sorted(visible) == sorted(f"chunk{c}.lod0" for c in range(nchunks))
    # every coarser level was imported but is not in the view layer
    assert len(seen["hidden"]) == nchunks * (len(report["lods"]) - 1)
    assert all(".lod0" not in h for h in seen["hidden"])
    assert sum(v["triangles"] for v in visible.values()) == report["lods"][0]["triangles"]
    assert sum(v["vertices"] for v in visible.values()) == chunks["chunk_vertices"]
    for v in visible.values():
        assert v["shape_keys"] == 2  # Blender's basis plus the "coarser" morph target
        assert {"_SLOPE", "_ALTITUDE", "_LAYER"} <= set(v["attributes"])
        assert len(v["uv_layers"]) == (2 if layout == "quantized" else 0)


@pytest.mark.parametrize("layout", ["float", "quantized"])
def test_blender_shows_the_level_of_each_level_file(bakes: Any, layout: str) -> None:
    out, report = bakes[layout]
    files = [out / f"tarn.lod{k}.glb" for k in range(len(report["lods"]))]
    seen = blender_import(files)
    for k, path in enumerate(files):
        got = seen[str(path)]
        lv = report["lods"][k]
        assert sorted(got["visible"]) == sorted(f"chunk{c}.lod{k}" for c in range(lv["chunks"]))
        assert got["hidden"] == []
        assert sum(v["triangles"] for v in got["visible"].values()) == lv["triangles"]
        assert (
            sum(v["vertices"] for v in got["visible"].values())
            == report["export"]["acmr"][k]["chunk_vertices"]
        )


def test_blender_places_quantized_chunks_where_the_float_ones_are(bakes: Any) -> None:
    # the node transform of KHR_mesh_quantization applied by Blender puts every chunk within the
    # reported rounding error of its float32 twin
    (fout, _), (qout, report) = bakes["float"], bakes["quantized"]
    a = blender_import([fout / "tarn.glb"])[str(fout / "tarn.glb")]["visible"]
    b = blender_import([qout / "tarn.glb"])[str(qout / "tarn.glb")]["visible"]
    err = report["export"]["quantization"]["levels"][0]["max_position_error_m"]
    assert err > 0
    for name, v in a.items():
        for lo_hi_a, lo_hi_b in zip(v["bounds"], b[name]["bounds"], strict=True):
            assert max(abs(x - y) for x, y in zip(lo_hi_a, lo_hi_b, strict=True)) <= err + 1e-4
