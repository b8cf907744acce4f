"""Meshing benchmark: globemill's mesher beside three peers, all measured the same way.

On the demo world ``examples/pebblemoor.toml`` at each tolerance eps:

- ``ours``: ``globemill.bake(spec, tolerance_m=eps)``;
- ``a_uniform``: a uniform icosphere on the ground (benchmarks/textbook.py), the first level whose
  measured error meets eps, searched up to ``UNIFORM_MAX_LEVEL``;
- ``b_simplified``: our bake at eps / 4, then quadric edge-collapse simplification
  (fast-simplification) to the fewest triangles that still measure within eps;
- ``c_textbook``: midpoint-tested red-green refinement (benchmarks/textbook.py).

Every mesh is measured by tests/independent_error.py (two-sided, independent of every mesher),
with the same settings. Then the feature-count scaling of ``field.height``. Results are printed
and written to ``benchmarks/results/mesh.json``. See benchmarks/README.md.
"""

from __future__ import annotations

import json
import math
import os
import platform
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import fast_simplification
import numpy as np
import pytest
from independent_error import cap_directions, feature_directions, measure, step_walls
from textbook import textbook_refine, uniform_icosphere

import globemill

HERE = Path(__file__).resolve().parent
SPEC_PATH = HERE.parent / "examples" / "pebblemoor.toml"
RESULTS_PATH = HERE / "results" / "mesh.json"

TOLERANCES = (0.5, 0.1)
METHODS = ("ours", "a_uniform", "b_simplified", "c_textbook")
MEASURE_SETTINGS: dict[str, Any] = {"samples_per_triangle": 10, "surface_samples": 200_000}
UNIFORM_MAX_LEVEL = 8  # 20 * 4**8 = 1.3 M triangles
SIMPLIFY_FROM = 4.0  # (b) starts from our bake at eps / 4
SIMPLIFY_MAX_START_TRIANGLES = 4_000_000  # skip (b) when that bake would be larger (estimate)
SIMPLIFY_EVALUATIONS = 6  # simplify + measure rounds of the search
SCALING_PROBES = 200_000
SCALING_FAR_COUNTS = (0, 400, 4000)
SCALING_ROUNDS = 15

ROWS: dict[tuple[float, str], dict[str, Any]] = {}
SCALING: dict[int, dict[str, float]] = {}


@dataclass
class World:
    spec: Any
    field: Any
    radius_m: float
    walls: Any
    extra: np.ndarray
    uniform_cache: dict[int, dict[str, Any]]


@pytest.fixture(scope="module")
def world() -> World:
    spec = globemill.load_spec(SPEC_PATH)
    # the benchmark picks its own tolerances; the spec's triangle budget would refuse eps / 4
    spec = spec.model_copy(update={"max_triangles": 200_000_000})
    field = globemill.field(spec)
    cf = spec.core_features()
    R = float(spec.radius_m)
    return World(
        spec=spec,
        field=field,
        radius_m=R,
        walls=step_walls(cf, field, R),
        extra=feature_directions(cf, R),
        uniform_cache={},
    )


def _measure(world: World, vertices: np.ndarray, triangles: np.ndarray) -> dict[str, Any]:
    t0 = time.perf_counter()
    res = measure(
        world.field,
        world.radius_m,
        vertices,
        triangles,
        extra_directions=world.extra,
        walls=world.walls,
        **MEASURE_SETTINGS,
    )
    res["measure_seconds"] = time.perf_counter() - t0
    return res


def _closed(triangles: np.ndarray) -> bool:
    """Closed and consistently oriented: every directed edge appears once, its reverse once."""
    t = np.asarray(triangles, dtype=np.int64)
    a = t.ravel()
    b = np.roll(t, -1, axis=1).ravel()
    n = int(max(a.max(), b.max())) + 1
    fwd = np.sort(a * n + b)
    rev = np.sort(b * n + a)
    return bool(np.all(fwd[1:] != fwd[:-1]) and np.array_equal(fwd, rev))


def _row(
    method: str,
    eps: float,
    vertices: np.ndarray,
    triangles: np.ndarray,
    seconds: float,
    measured: dict[str, Any],
    **extra: Any,
) -> dict[str, Any]:
    return {
        "method": method,
        "tolerance_m": eps,
        "triangles": int(len(triangles)),
        "vertices": int(len(np.unique(triangles))),
        "error_m": measured["max"],
        "mesh_to_surface_m": measured["mesh_to_surface"],
        "surface_to_mesh_m": measured["surface_to_mesh"],
        "meets_tolerance": bool(measured["max"] <= eps),
        "seconds": seconds,
        "closed": _closed(triangles),
        "measure_seconds": measured["measure_seconds"],
        "worst_mesh_point": measured["mesh_to_surface_at"],
        "worst_surface_point": measured["surface_to_mesh_at"],
        **extra,
    }


# --------------------------------------------------------------------------- the methods
def run_ours(world: World, eps: float) -> dict[str, Any]:
    t0 = time.perf_counter()
    res = globemill.bake(world.spec, tolerance_m=eps)
    seconds = time.perf_counter() - t0
    lods = res.report.get("lods") or [{}]
    return _row(
        "ours",
        eps,
        res.vertices,
        res.triangles,
        seconds,
        _measure(world, res.vertices, res.triangles),
        self_reported_error_m=lods[0].get("max_error_m"),
    )


def _uniform_level(world: World, level: int) -> dict[str, Any]:
    if level not in world.uniform_cache:
        t0 = time.perf_counter()
        v, t = uniform_icosphere(world.field, world.radius_m, level)
        seconds = time.perf_counter() - t0
        world.uniform_cache[level] = {
            "v": v,
            "t": t,
            "seconds": seconds,
            "measured": _measure(world, v, t),
        }
    return world.uniform_cache[level]


def run_uniform(world: World, eps: float) -> dict[str, Any]:
    # a level whose edge chords sag more than eps below the base sphere cannot meet eps:
    # sagitta R (1 - cos(theta / 2)) of a chord of angle theta (circle geometry); icosahedron
    # edge angle arccos(1 / sqrt 5), halved per level
    R = world.radius_m
    theta0 = math.acos(1.0 / math.sqrt(5.0))
    first = 0
    while R * (1.0 - math.cos(theta0 / 2 ** (first + 1))) > eps:
        first += 1
    # the error falls with the level, so measure the top level first and walk down while it
    # still meets eps (each level is measured once and shared between tolerances)
    top = _uniform_level(world, UNIFORM_MAX_LEVEL)
    if top["measured"]["max"] > eps:
        chosen, level, met = top, UNIFORM_MAX_LEVEL, False
    else:
        chosen, level, met = top, UNIFORM_MAX_LEVEL, True
        for lower in range(UNIFORM_MAX_LEVEL - 1, first - 1, -1):
            cand = _uniform_level(world, lower)
            if cand["measured"]["max"] > eps:
                break
            chosen, level = cand, lower
    return _row(
        "a_uniform",
        eps,
        chosen["v"],
        chosen["t"],
        chosen["seconds"],
        chosen["measured"],
        level=level,
        met_within_level_cap=met,
        level_cap=UNIFORM_MAX_LEVEL,
        lowest_level_considered=first,
    )


def run_simplified(world: World, eps: float) -> dict[str, Any] | None:
    ours = ROWS.get((eps, "ours"))
    estimate = SIMPLIFY_FROM * (ours["triangles"] if ours else 0)
    if estimate > SIMPLIFY_MAX_START_TRIANGLES:
        return None
    t0 = time.perf_counter()
    base = globemill.bake(world.spec, tolerance_m=eps / SIMPLIFY_FROM)
    bake_seconds = time.perf_counter() - t0
    pts = np.ascontiguousarray(base.vertices, dtype=np.float64)
    tri = np.ascontiguousarray(base.triangles, dtype=np.int32)
    n0 = len(tri)
    tried: dict[int, tuple[float, dict[str, Any], np.ndarray, np.ndarray, float]] = {}

    def evaluate(count: int) -> float:
        t1 = time.perf_counter()
        v, t = fast_simplification.simplify(pts, tri, target_count=count)
        secs = time.perf_counter() - t1
        m = _measure(world, v, t)
        tried[count] = (m["max"], m, v, t, secs)
        return float(m["max"])

    # search on the triangle count: first our own count, then one guess from error ~ 1 / count
    # (second-order approximation error on smooth ground), then bisection of the bracket in
    # log(count)
    lo, hi = 20, n0  # lo is taken to fail, hi (the eps / 4 bake) to pass
    guess = min(n0 - 1, int(ours["triangles"])) if ours else n0 // 4
    t_search = time.perf_counter()
    for step in range(SIMPLIFY_EVALUATIONS):
        if not lo < guess < hi:
            break
        err = evaluate(guess)
        if err <= eps:
            hi = guess
        else:
            lo = guess
        if hi <= lo * 1.02:
            break
        if step == 0:
            guess = int(round(guess * err / eps * (0.95 if err <= eps else 1.05)))
        else:
            guess = int(round(math.sqrt(lo * hi)))
    search_seconds = time.perf_counter() - t_search
    passing = [c for c, rec in tried.items() if rec[0] <= eps]
    if passing:
        best = min(passing)
        err, measured, v, t, simplify_seconds = tried[best]
    else:  # nothing simplified passed: the start mesh itself
        v, t, simplify_seconds = base.vertices, base.triangles, 0.0
        measured = _measure(world, v, t)
    return _row(
        "b_simplified",
        eps,
        v,
        t,
        bake_seconds + simplify_seconds,
        measured,
        start_tolerance_m=eps / SIMPLIFY_FROM,
        start_triangles=n0,
        bake_seconds=bake_seconds,
        simplify_seconds=simplify_seconds,
        search_seconds=search_seconds,
        search_evaluations=len(tried),
        failing_count_above=lo if lo > 20 else None,
        search_trace=[[c, rec[0]] for c, rec in tried.items()],
    )


def run_textbook(world: World, eps: float) -> dict[str, Any]:
    t0 = time.perf_counter()
    v, t, info = textbook_refine(world.field, world.radius_m, eps)
    seconds = time.perf_counter() - t0
    return _row("c_textbook", eps, v, t, seconds, _measure(world, v, t), **info)


RUNNERS: dict[str, Callable[[World, float], dict[str, Any] | None]] = {
    "ours": run_ours,
    "a_uniform": run_uniform,
    "b_simplified": run_simplified,
    "c_textbook": run_textbook,
}


@pytest.mark.parametrize(
    ("eps", "method"),
    [(eps, m) for eps in TOLERANCES for m in METHODS],
    ids=[f"{m}-{eps}" for eps in TOLERANCES for m in METHODS],
)
def test_mesh(benchmark: Any, world: World, eps: float, method: str) -> None:
    row = benchmark.pedantic(RUNNERS[method], args=(world, eps), rounds=1, iterations=1)
    if row is None:
        ROWS[(eps, method)] = {"method": method, "tolerance_m": eps, "skipped": True}
        pytest.skip(f"{method} at {eps} m: the eps/{SIMPLIFY_FROM:g} start mesh is too large")
    ROWS[(eps, method)] = row
    assert row["triangles"] > 0 and math.isfinite(row["error_m"])


# --------------------------------------------------------------------------- feature scaling
def _scaling_spec(base: Any, far: int) -> Any:
    """40 hills within 15 degrees of the probe centre (+Z) plus ``far`` small hills more than
    90 degrees away, whose footprints (4 sigma = 20 m, under 1 degree) never reach the probes."""
    rng = np.random.default_rng(11)
    feats: list[dict[str, Any]] = []
    for i in range(40):
        r, a = math.sqrt(rng.uniform()) * 15.0, rng.uniform(0, 2 * math.pi)
        feats.append(
            {
                "name": f"near{i}",
                "kind": "hill",
                "lat_deg": r * math.sin(a),
                "lon_deg": r * math.cos(a),
                "amplitude_m": float(rng.uniform(2.0, 8.0)),
                "sigma_m": float(rng.uniform(20.0, 60.0)),
            }
        )
    # Validity (docs/terrain.md): the sum of |amplitude| stays below 0.9 R; 40 near hills use at
    # most 320 m, the far ones share 600 m
    amp = min(1.0, 600.0 / max(1, far))
    for i in range(far):
        z = rng.uniform(-1.0, -0.05)  # more than 92 degrees from +Z
        az = rng.uniform(0.0, 2.0 * math.pi)
        x, y = math.sqrt(1 - z * z) * math.cos(az), math.sqrt(1 - z * z) * math.sin(az)
        feats.append(
            {
                "name": f"far{i}",
                "kind": "hill",
                # u(lat, lon) = (cos lat sin lon, sin lat, cos lat cos lon)
                "lat_deg": math.degrees(math.asin(y)),
                "lon_deg": math.degrees(math.atan2(x, z)),
                "amplitude_m": amp,
                "sigma_m": 5.0,
            }
        )
    return globemill.parse_spec(
        {"name": f"scaling{far}", "radius_m": base.radius_m, "tolerance_m": 0.5, "features": feats},
        source="bench_mesh scaling",
    )


def _probes() -> np.ndarray:
    """Directions within 20 degrees of +Z, the probe centre."""
    return cap_directions(np.array([0.0, 0.0, 1.0]), math.radians(20.0), SCALING_PROBES)


def test_feature_scaling(benchmark: Any, world: World) -> None:
    probes = _probes()
    fields = {far: globemill.field(_scaling_spec(world.spec, far)) for far in SCALING_FAR_COUNTS}
    ref = fields[0].height(probes)
    for far, fld in fields.items():
        # far footprints do not reach the probes: identical heights (docs/terrain.md "hill")
        np.testing.assert_array_equal(fld.height(probes), ref, err_msg=f"{far} far hills")
    # interleaved rounds, so a busy moment on the machine hits every world alike; best of N
    best = dict.fromkeys(fields, math.inf)
    for _ in range(SCALING_ROUNDS):
        for far, fld in fields.items():
            t0 = time.perf_counter()
            fld.height(probes)
            best[far] = min(best[far], time.perf_counter() - t0)
    for far in fields:
        SCALING[far] = {"features": 40 + far, "probes": len(probes), "seconds_min": best[far]}
    # pytest-benchmark's own record: the 40 + 400 world
    benchmark.pedantic(fields[400].height, args=(probes,), rounds=5, iterations=1)


# --------------------------------------------------------------------------- report
def _fmt(x: Any, spec: str) -> str:
    return "-" if x is None else format(x, spec)


def test_zz_write_results(capsys: pytest.CaptureFixture[str]) -> None:
    rows = []
    for (eps, _method), row in sorted(ROWS.items(), key=lambda kv: (-kv[0][0], kv[0][1])):
        ours = ROWS.get((eps, "ours"))
        if not row.get("skipped") and ours and not ours.get("skipped"):
            row["triangles_vs_ours"] = row["triangles"] / ours["triangles"]
            row["error_vs_ours"] = row["error_m"] / ours["error_m"]
            row["seconds_vs_ours"] = row["seconds"] / ours["seconds"]
        rows.append(row)
    scaling = dict(sorted(SCALING.items()))
    if 0 in scaling:
        for rec in scaling.values():
            rec["seconds_vs_40_features"] = rec["seconds_min"] / scaling[0]["seconds_min"]
    out = {
        "world": SPEC_PATH.name,
        "measure": {"module": "tests/independent_error.py", **MEASURE_SETTINGS},
        "machine": {
            "cpus": os.cpu_count(),
            "python": platform.python_version(),
            "numpy": np.__version__,
            "globemill": getattr(globemill, "__version__", "?"),
        },
        "meshes": rows,
        "feature_scaling": list(scaling.values()),
    }
    RESULTS_PATH.parent.mkdir(parents=True, exist_ok=True)
    RESULTS_PATH.write_text(json.dumps(out, indent=2) + "\n")
    head = (
        f"{'eps':>5} {'method':<13} {'triangles':>10} {'error m':>9} {'meets':>5} {'s':>7} "
        f"{'tri/ours':>8} {'err/ours':>8} {'s/ours':>7}"
    )
    lines = [head, "-" * len(head)]
    for r in rows:
        if r.get("skipped"):
            lines.append(f"{r['tolerance_m']:>5} {r['method']:<13} skipped (start mesh too large)")
            continue
        lines.append(
            f"{r['tolerance_m']:>5} {r['method']:<13} {r['triangles']:>10} {r['error_m']:>9.3f} "
            f"{'yes' if r['meets_tolerance'] else 'NO':>5} {r['seconds']:>7.1f} "
            f"{_fmt(r.get('triangles_vs_ours'), '8.2f')} {_fmt(r.get('error_vs_ours'), '8.2f')} "
            f"{_fmt(r.get('seconds_vs_ours'), '7.2f')}"
        )
    for rec in scaling.values():
        lines.append(
            f"field.height, {rec['features']:>5} features, {rec['probes']} probes: "
            f"{1e3 * rec['seconds_min']:.1f} ms (x{_fmt(rec.get('seconds_vs_40_features'), '.2f')})"
        )
    with capsys.disabled():
        print("\n" + "\n".join(lines) + f"\nwritten to {RESULTS_PATH}")
    assert RESULTS_PATH.exists()
