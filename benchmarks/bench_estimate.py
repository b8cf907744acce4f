"""The triangle-count estimate (the budget survey) beside the real count, per kind of world.

Run: python -m pytest benchmarks/bench_estimate.py -p no:cacheprovider -s

Worlds: tests/data/estimate_*.toml/json (smooth hills and a ridge, rough fractal noise, vertical
walls, 3,000 small hills) at their own tolerances. Per world: the real count (triangles of the
finest level of a one-level bake without colliders), the estimate (``_core.estimate_triangles``
with the spec's offset and chunk level, the same survey the bake runs), estimate / real (goal:
within [1/1.5, 1.5]), and the survey's time beside the bake's refinement time measured in the
same run (what a caller pays for asking before the bake).

Results go to benchmarks/results/estimate.json (with the date and a machine note). See
benchmarks/README.md.
"""

from __future__ import annotations

import datetime
import json
import os
import platform
import time
from pathlib import Path
from typing import Any

import pytest

import globemill
from globemill import _core
from globemill.bake import OFFSET_MODES

HERE = Path(__file__).resolve().parent
DATA = HERE.parent / "tests" / "data"
RESULTS_PATH = HERE / "results" / "estimate.json"
WORLDS = {
    "smooth": "estimate_smooth.toml",
    "rough": "estimate_rough.toml",
    "walled": "estimate_walled.toml",
    "crowded": "estimate_crowded.json",
}
RESULTS: list[dict[str, Any]] = []


@pytest.mark.parametrize("kind", list(WORLDS))
def test_estimate_against_real(kind: str) -> None:
    spec = globemill.load_spec(DATA / WORLDS[kind])
    field = globemill.field(spec)._core
    t0 = time.perf_counter()
    est = int(
        _core.estimate_triangles(
            field,
            spec.tolerance_m,
            offset=OFFSET_MODES[spec.offset],
            chunk_level=spec.lod.chunk_level,
        )
    )
    survey_s = time.perf_counter() - t0
    r = globemill.bake(spec, levels=1, collision=False)
    real = len(r.triangles)
    refine_s = r.report["stages_seconds"]["refine"]
    RESULTS.append(
        {
            "world": kind,
            "spec": WORLDS[kind],
            "features": len(spec.features),
            "tolerance_m": spec.tolerance_m,
            "real_triangles": real,
            "estimate": est,
            "estimate_over_real": est / real,
            "survey_seconds": survey_s,
            "bake_refine_seconds": refine_s,
            "survey_over_refine": survey_s / refine_s if refine_s > 0 else None,
        }
    )
    assert real / 1.5 <= est <= 1.5 * real, (kind, est, real)


def test_zz_write_results() -> None:
    out = {
        "date": datetime.date.today().isoformat(),
        "machine": f"{os.cpu_count()} cores ({platform.platform()}), shared: seconds comparable "
        "only within one run; counts do not depend on the machine",
        "worlds": RESULTS,
    }
    RESULTS_PATH.parent.mkdir(parents=True, exist_ok=True)
    RESULTS_PATH.write_text(json.dumps(out, indent=2) + "\n")
    print(f"\n{'world':>8} {'real':>9} {'estimate':>9} {'est/real':>8} {'survey/refine':>13}")
    for w in RESULTS:
        ratio = w["survey_over_refine"]
        print(
            f"{w['world']:>8} {w['real_triangles']:>9,} {w['estimate']:>9,} "
            f"{w['estimate_over_real']:>8.3f} {ratio if ratio is None else f'{ratio:.2f}':>13}"
        )
