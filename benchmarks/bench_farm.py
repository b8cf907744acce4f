"""Farm throughput: the same 12 demo-sized worlds baked three ways, measured in the same run.

Worlds: ``examples/pebblemoor.toml`` renamed ``pebblemoor_00`` .. ``pebblemoor_11`` (identical
ground, so every bake does the same work), baked at a tolerance of 2 m (``tolerance_m=2.0``).
Every bake is single-threaded (``threads=1``), so the rows compare processes, not threads:

- ``local-1``: ``globemill.farm.farm(specs, out, jobs=1)``, a local pool of one process;
- ``local-2``: the same with ``jobs=2``;
- ``dask-2``: ``farm(specs, out, scheduler=...)`` on a Dask cluster of two single-threaded
  workers on 127.0.0.1 (started before the clock starts; its start-up time is reported apart);
- ``local-2 cached``: ``local-2`` run again over its own output folder: every world is skipped.

Each timed run starts from an empty output folder and includes everything a farm call does
(starting the pool or connecting to the scheduler, reading specs, baking, writing, farm.json).
Both sides are warm, as on a farm that keeps running: the local pool's fork server (which imports
globemill once for all pool processes) is started, and the Dask workers have imported globemill,
before any clock starts.
Reported: seconds, worlds per minute, and the scaling ratio (worlds per minute / local-1's).
All three folders must hold byte-identical .glb files. Results go to
``benchmarks/results/farm.json``.

Run: ``python benchmarks/bench_farm.py`` or ``python -m pytest benchmarks/bench_farm.py``.
"""

from __future__ import annotations

import importlib
import json
import os
import platform
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
TESTS = HERE.parent / "tests"
if str(TESTS) not in sys.path:  # the loopback cluster helper lives beside the farm tests
    sys.path.insert(0, str(TESTS))

from test_farm import loopback_dask_cluster  # noqa: E402

from globemill.farm import FarmSummary, _mp_context, farm  # noqa: E402

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

DEMO = HERE.parent / "examples" / "pebblemoor.toml"
RESULTS_PATH = HERE / "results" / "farm.json"
NWORLDS = 12
TOLERANCE_M = 2.0
THREADS = 1


def write_worlds(folder: Path) -> list[Path]:
    """NWORLDS renamed copies of the demo world, as JSON spec files."""
    data = tomllib.loads(DEMO.read_text())
    folder.mkdir(parents=True)
    paths = []
    for i in range(NWORLDS):
        path = folder / f"pebblemoor_{i:02d}.json"
        path.write_text(json.dumps({**data, "name": f"pebblemoor_{i:02d}"}))
        paths.append(path)
    return paths


def load_average() -> float | None:
    return round(os.getloadavg()[0], 2) if hasattr(os, "getloadavg") else None


def timed(label: str, specs: list[Path], out: Path, **kw: Any) -> dict[str, Any]:
    load_before = load_average()
    t0 = time.perf_counter()
    summary: FarmSummary = farm(specs, out, tolerance_m=TOLERANCE_M, threads=THREADS, **kw)
    seconds = time.perf_counter() - t0
    if not summary.ok:
        raise RuntimeError(f"{label}: some worlds failed\n{summary.table()}")
    counts = summary.counts()
    bake_seconds = sum(w.seconds for w in summary.worlds)
    row = {
        "label": label,
        "seconds": seconds,
        "worlds_per_minute": 60.0 * NWORLDS / seconds,
        "baked": counts["baked"],
        "cached": counts["cached"],
        "bake_seconds_sum": bake_seconds,
        "bake_seconds_mean": bake_seconds / max(1, counts["baked"]),
        "triangles_level0": summary.worlds[0].triangles,
        # the machine is shared: a mean bake time that grows with more processes, or a load
        # average well above the processes we run, means others took CPU from this row
        "load_average_1m": [load_before, load_average()],
    }
    print(
        f"{label:15s} {seconds:7.2f} s  {row['worlds_per_minute']:7.1f} worlds/min  "
        f"({counts['baked']} baked, {counts['cached']} cached; mean bake "
        f"{row['bake_seconds_mean']:.2f} s; load average {row['load_average_1m'][1]})",
        flush=True,
    )
    return row


def warm_local_pool() -> None:
    """Start the fork server that local pools fork their processes from (it imports globemill)."""
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=1, mp_context=_mp_context()) as pool:
        pool.submit(os.getpid).result()


def run() -> dict[str, Any]:
    with tempfile.TemporaryDirectory(prefix="globemill-bench-farm-") as tmp:
        root = Path(tmp)
        specs = write_worlds(root / "specs")
        warm_local_pool()
        rows = [
            timed("local-1", specs, root / "local-1", jobs=1),
            timed("local-2", specs, root / "local-2", jobs=2),
        ]
        t0 = time.perf_counter()
        with loopback_dask_cluster(root / "cluster", nworkers=2) as cluster:
            cluster_start = time.perf_counter() - t0
            from distributed import Client

            with Client(cluster.address, set_as_default=False) as client:
                client.run(importlib.import_module, "globemill.farm")
            rows.append(timed("dask-2", specs, root / "dask-2", scheduler=cluster.address))
        rows.append(timed("local-2 cached", specs, root / "local-2", jobs=2))
        # every output of every run byte for byte against local-1's (a difference here means
        # the code changed under the benchmark, or a determinism bug)
        same = {
            label: all(
                (root / label / pattern.format(i)).read_bytes()
                == (root / "local-1" / pattern.format(i)).read_bytes()
                for i in range(NWORLDS)
                for pattern in ("pebblemoor_{:02d}.glb", "pebblemoor_{:02d}.collision.glb")
            )
            for label in ("local-2", "dask-2")
        }
        identical = all(same.values())
    base = rows[0]["worlds_per_minute"]
    for row in rows:
        row["scaling_vs_local_1"] = row["worlds_per_minute"] / base
    by = {r["label"]: r for r in rows}
    results = {
        "benchmark": "farm throughput",
        "world": "examples/pebblemoor.toml, renamed copies",
        "worlds": NWORLDS,
        "tolerance_m": TOLERANCE_M,
        "threads_per_bake": THREADS,
        "machine": {
            "cpus": os.cpu_count(),
            "python": platform.python_version(),
            "platform": platform.platform(),
            "load_average_1m": load_average(),
        },
        "dask_cluster_start_seconds": cluster_start,
        "outputs_identical": identical,
        "outputs_identical_to_local_1": same,
        "rows": rows,
        "scaling": {
            "local_2_vs_local_1": by["local-2"]["scaling_vs_local_1"],
            "dask_2_vs_local_1": by["dask-2"]["scaling_vs_local_1"],
            "dask_2_vs_local_2": by["dask-2"]["worlds_per_minute"]
            / by["local-2"]["worlds_per_minute"],
        },
    }
    RESULTS_PATH.parent.mkdir(parents=True, exist_ok=True)
    RESULTS_PATH.write_text(json.dumps(results, indent=2) + "\n")
    print(
        f"scaling: local-2 / local-1 = {results['scaling']['local_2_vs_local_1']:.2f}, "
        f"dask-2 / local-1 = {results['scaling']['dask_2_vs_local_1']:.2f}; "
        f"outputs identical: {same}; wrote {RESULTS_PATH}"
    )
    return results


def test_farm_throughput() -> None:
    results = run()
    assert results["outputs_identical"]
    assert [r["baked"] for r in results["rows"]] == [NWORLDS, NWORLDS, NWORLDS, 0]


if __name__ == "__main__":
    run()
