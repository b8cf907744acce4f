"""Colliders of the demo world in Bullet, with and without the angle pass, in the same run.

Run: python -m pytest benchmarks/bench_collider.py -p no:cacheprovider -s
World: examples/pebblemoor.toml as shipped (colliders at 2 m, centered bias). Peer: the same bake
with the collider angle pass switched off (core setting `collider_min_angle_deg` = 0), which is
the collider as it was before the pass existed. For each, spheres are dropped
(tests/bullet_drops.py, from above both the ground and the collider) on the plateaus (mesa and
block tops, the lake bed, the quarry floor), at the feet of the walls (touching the vertical wall
of Sheer Tor, the feet of Anvil Tor and the Landing Pad) and at random places, and the table gives
the resting gap to the true surface (max and mean of |gap|), how many came to rest (speed below
1 mm/s), the triangle count and the smallest triangle angle (numpy, from the collider meshes).
Results go to benchmarks/results/collider.json.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
from bullet_drops import F64, REST_SPEED_M_S, SPHERE_RADIUS_M, away, drop_all, unit

import globemill
from globemill import _core
from globemill.bake import _wrap, named_features, settings
from globemill.field import Field

HERE = Path(__file__).resolve().parent
DEMO = HERE.parent / "examples" / "pebblemoor.toml"
# colliders at 2 m on a 1.5 km world have edges of a few metres to tens of metres
CHUNK_REACH_M = 150.0


def _places(radius_m: float) -> list[tuple[str, F64]]:
    places: list[tuple[str, F64]] = []

    def ring(name: str, lat: float, lon: float, d: float, n: int) -> None:
        c = unit(lat, lon)
        places.extend(
            (f"{name} {k}", away(c, radius_m, d, 0.7 + k * 2 * np.pi / n)) for k in range(n)
        )

    # plateaus: mesa tops (top radius a), block tops, the lake bed, the quarry floor
    for name, lat, lon, a in [
        ("Sheer Tor top", 40.0, -55.0, 70.0),
        ("Anvil Tor top", 35.0, -30.0, 120.0),
        ("Landing Pad top", 0.0, -90.0, 30.0),
        ("Mere Water bed", -45.0, 120.0, 90.0),
    ]:
        places.append((f"{name} centre", unit(lat, lon)))
        ring(name, lat, lon, 0.5 * a, 3)
    for name, lat, lon in [
        ("Keep Plinth top", -30.0, -40.0),
        ("Quarry Cut floor", 50.0, 100.0),
        ("Shepherd Terrace top", 31.0, -22.0),
        ("Standing Slab top", -25.0, -60.0),
    ]:
        places.append((name, unit(lat, lon)))
    # wall feet: the sphere touching Sheer Tor's vertical wall (top radius 70 m, wall 0), at the
    # foot of Anvil Tor (120 + 25 m) and of the Landing Pad (30 + 6 m)
    gap = SPHERE_RADIUS_M + 0.1
    ring("Sheer Tor foot", 40.0, -55.0, 70.0 + gap, 8)
    ring("Anvil Tor foot", 35.0, -30.0, 145.0 + gap, 4)
    ring("Landing Pad foot", 0.0, -90.0, 36.0 + gap, 4)
    rng = np.random.default_rng(20261203)
    for k in range(8):
        v = rng.normal(size=3)  # normal vectors give uniform directions (Muller 1959)
        places.append((f"random {k}", v / np.linalg.norm(v)))
    return places


def _min_angle_deg(res: globemill.BakeResult) -> float:
    worst = 180.0
    for c in res.colliders:
        p = c.positions[c.triangles]
        for k in range(3):
            u = p[:, (k + 1) % 3] - p[:, k]
            w = p[:, (k + 2) % 3] - p[:, k]
            ang = np.arctan2(np.linalg.norm(np.cross(u, w), axis=1), np.einsum("ij,ij->i", u, w))
            worst = min(worst, float(np.degrees(ang.min())))
    return worst


def _bake(spec: globemill.WorldSpec, min_angle_deg: float | None) -> globemill.BakeResult:
    s = settings(spec, threads=2)
    if min_angle_deg is not None:
        s["collider_min_angle_deg"] = min_angle_deg
    with named_features(spec):
        return _wrap(spec, s, _core.bake(Field(spec)._core, s, None))


def test_collider_rest_gaps() -> None:
    spec = globemill.load_spec(DEMO)
    places = _places(spec.radius_m)
    rows: dict[str, Any] = {}
    for name, angle in (("angle pass", None), ("no angle pass", 0.0)):
        res = _bake(spec, angle)
        drops = drop_all(res, places, CHUNK_REACH_M, above_collider=True)
        gaps = np.abs([d.gap_m for d in drops])
        rested = sum(d.speed_m_s < REST_SPEED_M_S and d.contacts > 0 for d in drops)
        col = res.report["collision"]
        rows[name] = {
            "drops": len(drops),
            "rested": int(rested),
            "max_gap_m": float(gaps.max()),
            "mean_gap_m": float(gaps.mean()),
            "triangles": int(col["triangles"]),
            "min_angle_deg": _min_angle_deg(res),
            "report_min_angle_deg": col["min_angle_deg"],
            "max_error_m": col["max_error_m"],
            "tolerance_m": col["tolerance_m"],
            "worst": sorted(
                ((d.place, round(d.gap_m, 4)) for d in drops), key=lambda x: -abs(x[1])
            )[:5],
        }
    print(
        f"\n{'collider':<15}{'drops':>6}{'rested':>7}{'max gap':>9}{'mean gap':>9}"
        f"{'triangles':>10}{'min angle':>10}{'error m':>9}"
    )
    for name, r in rows.items():
        print(
            f"{name:<15}{r['drops']:>6}{r['rested']:>7}{r['max_gap_m']:>9.3f}"
            f"{r['mean_gap_m']:>9.3f}{r['triangles']:>10}{r['min_angle_deg']:>10.2f}"
            f"{r['max_error_m']:>9.3f}"
        )
    (HERE / "results" / "collider.json").write_text(json.dumps(rows, indent=2) + "\n")
