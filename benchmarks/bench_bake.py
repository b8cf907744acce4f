"""The whole bake against peers measured in the same run: the stage-by-stage split and the field
evaluations per output triangle.

Run: python -m pytest benchmarks/bench_bake.py -p no:cacheprovider -s
World: examples/pebblemoor.toml at 0.5 m, 4 levels, 80 chunks, colliders on. Rows:

- chain: `globemill.bake` (every level, seams, attributes and colliders), 2 threads and 1 thread;
- finest: the finest level alone (`levels=1`, no colliders), 2 threads;
- icosphere8: the peer of issue 12, a uniform level-8 icosphere (1,310,720 triangles, numpy
  subdivision in `textbook.uniform_icosphere`) whose vertices numpy displaces with the same
  `globemill.field(spec).height`.

Each row is the best of ROUNDS runs. The ratios (chain / finest, chain / icosphere8, 1 thread /
2 threads) are what to compare: seconds depend on the machine and on what else runs on it.
Results go to benchmarks/results/bake.json.
"""

from __future__ import annotations

import json
import os
import time
from datetime import date
from pathlib import Path
from typing import Any

import pytest
import textbook

import globemill

HERE = Path(__file__).resolve().parent
DEMO = HERE.parent / "examples" / "pebblemoor.toml"
TOLERANCE_M = 0.5
ROUNDS = int(os.environ.get("GLOBEMILL_BENCH_ROUNDS", "2"))
RESULTS: dict[str, Any] = {}


@pytest.fixture(scope="module")
def spec() -> globemill.WorldSpec:
    return globemill.load_spec(DEMO)


def _best(run: Any) -> tuple[float, Any]:
    best, out = float("inf"), None
    for _ in range(ROUNDS):
        t = time.perf_counter()
        out = run()
        best = min(best, time.perf_counter() - t)
    return best, out


@pytest.mark.parametrize("threads", [2, 1])
def test_chain(spec: globemill.WorldSpec, threads: int) -> None:
    s, r = _best(lambda: globemill.bake(spec, tolerance_m=TOLERANCE_M, threads=threads))
    RESULTS[f"chain_{threads}t"] = {
        "seconds": s,
        "stages_seconds": r.report["stages_seconds"],
        "levels": [
            {k: lv[k] for k in ("level", "triangles", "max_error_m", "seconds")}
            for lv in r.report["lods"]
        ],
        "collision_triangles": r.report["collision"]["triangles"],
        "evaluations": r.report["evaluations"],
    }


def test_finest(spec: globemill.WorldSpec) -> None:
    s, r = _best(
        lambda: globemill.bake(spec, tolerance_m=TOLERANCE_M, levels=1, collision=False, threads=2)
    )
    RESULTS["finest_2t"] = {"seconds": s, "triangles": r.report["lods"][0]["triangles"]}


def test_icosphere8(spec: globemill.WorldSpec) -> None:
    f = globemill.field(spec)
    s, (v, t) = _best(lambda: textbook.uniform_icosphere(f, spec.radius_m, 8))
    RESULTS["icosphere8"] = {"seconds": s, "triangles": int(len(t))}


def test_zz_write(spec: globemill.WorldSpec) -> None:
    if not {"chain_2t", "chain_1t", "finest_2t", "icosphere8"} <= RESULTS.keys():
        pytest.skip("run the whole file")
    c2, c1 = RESULTS["chain_2t"]["seconds"], RESULTS["chain_1t"]["seconds"]
    RESULTS["ratios"] = {
        "chain_over_finest": c2 / RESULTS["finest_2t"]["seconds"],
        "chain_over_icosphere8": c2 / RESULTS["icosphere8"]["seconds"],
        "threads_1_over_2": c1 / c2,
    }
    RESULTS["date"] = date.today().isoformat()
    RESULTS["machine"] = f"{os.cpu_count()} cores; seconds are best of {ROUNDS}"
    out = HERE / "results" / "bake.json"
    out.write_text(json.dumps(RESULTS, indent=2) + "\n")
    print(json.dumps(RESULTS["ratios"], indent=2))
