"""Live editing latency against a full re-bake, measured in the same run.

Run: python -m pytest benchmarks/bench_session.py -p no:cacheprovider -s
World: examples/pebblemoor.toml with its default levels and chunks (0.5 m, 4 levels, 80 chunks),
colliders off in both the session and the re-bake. Edits:

- move: the first Gaussian hill ("Gorse Knoll", sigma 120 m) moved east by a tenth of its width,
  back and forth; the same for the smallest hill ("Tump", sigma 30 m);
- resize: the first mesa's top radius grown by 5 % and back.

Each edit is checked against nothing here (tests/test_session.py holds the bit-for-bit contract);
the table gives median and 95th-percentile seconds per edit and the ratio to one full re-bake of
the same spec. Results go to benchmarks/results/session.json.
"""

from __future__ import annotations

import json
import math
import time
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import globemill

HERE = Path(__file__).resolve().parent
DEMO = HERE.parent / "examples" / "pebblemoor.toml"
ROUNDS = 16
RESULTS: dict[str, Any] = {}


@pytest.fixture(scope="module")
def spec() -> globemill.WorldSpec:
    return globemill.load_spec(DEMO)


@pytest.fixture(scope="module")
def session(spec: globemill.WorldSpec) -> globemill.EditSession:
    t = time.perf_counter()
    s = globemill.EditSession(spec)
    RESULTS["session_start_s"] = time.perf_counter() - t
    return s


def _first(spec: globemill.WorldSpec, kind: str) -> int:
    return next(i for i, f in enumerate(spec.features) if f.kind == kind)


def _record(name: str, benchmark: Any, reports: list[globemill.EditReport]) -> None:
    data = sorted(benchmark.stats.stats.data)
    RESULTS[name] = {
        "rounds": len(data),
        "median_s": float(np.median(data)),
        "p95_s": float(np.percentile(data, 95)),
        "min_s": float(data[0]),
        "chunks_changed_median": float(np.median([r.chunk_count for r in reports])),
        "tests_reused_share": float(np.mean([r.reused / r.tested for r in reports])),
    }


def _move(benchmark: Any, session: globemill.EditSession, i: int, name: str) -> None:
    hill = session.spec.features[i]
    lat, lon = hill.lat_deg, hill.lon_deg
    step = math.degrees(0.1 * hill.sigma_m / (session.spec.radius_m * math.cos(math.radians(lat))))
    reports: list[globemill.EditReport] = []
    state = {"n": 0}

    def edit() -> None:
        state["n"] += 1
        reports.append(session.move_feature(i, (lat, lon + step * (state["n"] % 2))))

    benchmark.pedantic(edit, rounds=ROUNDS, iterations=1, warmup_rounds=1)
    _record(name, benchmark, reports)
    RESULTS[name]["feature"] = f"{hill.name} (sigma {hill.sigma_m:g} m)"


def test_move_hill(benchmark: Any, session: globemill.EditSession) -> None:
    _move(benchmark, session, _first(session.spec, "hill"), "move_hill")


def test_move_small_hill(benchmark: Any, session: globemill.EditSession) -> None:
    hills = [i for i, f in enumerate(session.spec.features) if f.kind == "hill"]
    i = min(hills, key=lambda j: session.spec.features[j].sigma_m)
    _move(benchmark, session, i, "move_small_hill")


def test_resize_mesa(benchmark: Any, session: globemill.EditSession) -> None:
    i = _first(session.spec, "mesa")
    mesa = session.spec.features[i]
    r0 = mesa.radius_m
    reports: list[globemill.EditReport] = []
    state = {"n": 0}

    def edit() -> None:
        state["n"] += 1
        reports.append(session.set_feature(i, radius_m=r0 * (1.05 if state["n"] % 2 else 1.0)))

    benchmark.pedantic(edit, rounds=ROUNDS, iterations=1, warmup_rounds=1)
    _record("resize_mesa", benchmark, reports)
    RESULTS["resize_mesa"]["feature"] = mesa.name


def test_full_rebake(benchmark: Any, spec: globemill.WorldSpec) -> None:
    benchmark.pedantic(
        lambda: globemill.bake(spec, collision=False), rounds=2, iterations=1, warmup_rounds=0
    )
    data = benchmark.stats.stats.data
    RESULTS["full_rebake"] = {"rounds": len(data), "median_s": float(np.median(data))}


def test_zz_table() -> None:
    if not {"move_hill", "move_small_hill", "resize_mesa", "full_rebake"} <= RESULTS.keys():
        pytest.skip("run the whole file")
    full = RESULTS["full_rebake"]["median_s"]
    lines = [f"{'edit':<16} {'median s':>9} {'p95 s':>8} {'x faster':>9} {'chunks':>7}"]
    for name in ("move_hill", "move_small_hill", "resize_mesa"):
        r = RESULTS[name]
        r["speedup_vs_rebake"] = full / r["median_s"]
        lines.append(
            f"{name:<16} {r['median_s']:9.3f} {r['p95_s']:8.3f} {r['speedup_vs_rebake']:9.1f} "
            f"{r['chunks_changed_median']:7.0f}"
        )
    lines.append(f"{'full re-bake':<16} {full:9.3f}")
    print("\n" + "\n".join(lines))
    RESULTS["targets"] = {
        "median_s_one_hill": 0.016,
        "speedup_vs_rebake": 20.0,
        "median_met": RESULTS["move_hill"]["median_s"] <= 0.016,
        "speedup_met": RESULTS["move_hill"]["speedup_vs_rebake"] >= 20.0,
    }
    out = HERE / "results" / "session.json"
    out.write_text(json.dumps(RESULTS, indent=2) + "\n")
