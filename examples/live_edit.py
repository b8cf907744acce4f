"""Drag a hill across Pebblemoor and watch only the touched chunks change.

    python examples/live_edit.py                       # 12 steps, frames in out/live/
    python examples/live_edit.py --steps 30 --tolerance-m 0.5 --out out/live
    python examples/live_edit.py --no-frames            # latencies only (no matplotlib needed)

Opens an EditSession on the demo world, moves the hill "Gorse Knoll" east in small steps (a tenth
of its width each, like a designer dragging it) and, after every step, prints the edit's latency
and the chunks it changed, and writes a close-up frame (frame_000.png, ...) looking down on the
hill: ground shaded by its normals, the chunks this edit re-meshed tinted orange.
"""

from __future__ import annotations

import argparse
import math
import time
from pathlib import Path

import numpy as np

import globemill
from globemill.preview import linear_to_srgb, shade_view

HERE = Path(__file__).resolve().parent


def frame(
    session: globemill.EditSession, changed: list[int], view: str, extent: float
) -> np.ndarray:
    """(size, size, 3) sRGB close-up of level 0 with the changed chunks tinted."""
    lv = session.result.levels[0]
    pos, tris = session.result.vertices, lv.triangles
    tint = np.isin(lv.chunk, changed)
    face = np.where(tint[:, None], [0.95, 0.45, 0.10], [0.55, 0.60, 0.50])
    rgb, cover = shade_view(
        pos, session.result.normals, tris, view=view, size=480, extent=extent, face_rgb=face
    )
    back = np.array([0.07, 0.08, 0.11])
    out = rgb * cover[:, :, None] + back * (1 - cover[:, :, None])
    return np.clip(linear_to_srgb(out), 0, 1)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--spec", default=str(HERE / "pebblemoor.toml"))
    ap.add_argument("--feature", default="Gorse Knoll", help="name of the hill to move")
    ap.add_argument("--steps", type=int, default=12)
    ap.add_argument("--tolerance-m", type=float, default=None, help="default: the spec's")
    ap.add_argument("--out", default="out/live", help="folder for the frames")
    ap.add_argument("--no-frames", action="store_true", help="only print the latencies")
    args = ap.parse_args()

    imsave = None
    if not args.no_frames:
        try:
            from matplotlib.image import imsave
        except ImportError:
            raise SystemExit(
                "live_edit: writing frames needs matplotlib: pip install '.[preview]' "
                "(or run with --no-frames)"
            ) from None

    spec = globemill.load_spec(args.spec)
    names = [f.name for f in spec.features]
    if args.feature not in names:
        raise SystemExit(f"live_edit: no feature named {args.feature!r} in {args.spec}")
    i = names.index(args.feature)
    hill = spec.features[i]
    t = time.perf_counter()
    session = globemill.EditSession(spec, tolerance_m=args.tolerance_m)
    nchunks = session.chunk_count
    print(
        f"baked {spec.name} in {time.perf_counter() - t:.1f} s: "
        f"{len(session.result.levels[0].triangles):,} triangles at level 0, {nchunks} chunks, "
        f"{len(session.result.levels)} levels"
    )
    out = Path(args.out)
    if not args.no_frames:
        out.mkdir(parents=True, exist_ok=True)
    lat, lon = hill.lat_deg, hill.lon_deg
    step = math.degrees(0.1 * hill.sigma_m / (spec.radius_m * math.cos(math.radians(lat))))
    extent = 5 * hill.sigma_m
    latencies = []
    for k in range(args.steps):
        lon += step
        report = session.move_feature(i, (lat, lon))
        latencies.append(report.seconds)
        per_level = ", ".join(f"L{lv}: {len(c)}" for lv, c in sorted(report.changed.items()))
        print(
            f"step {k + 1:3d}: {report.seconds * 1000:7.1f} ms, "
            f"{report.chunk_count:3d} of {nchunks * len(session.result.levels)} chunk meshes "
            f"changed ({per_level or 'none'}), {report.reused / report.tested:.1%} of tests reused"
        )
        if imsave is not None:
            img = frame(session, report.changed.get(0, []), f"{lat},{lon}", extent)
            imsave(out / f"frame_{k:03d}.png", img)
    lat_ms = np.array(latencies) * 1000
    print(
        f"latency per edit: median {np.median(lat_ms):.1f} ms, "
        f"95th percentile {np.percentile(lat_ms, 95):.1f} ms"
    )
    if not args.no_frames:
        print(f"frames: {out}/frame_000.png .. frame_{args.steps - 1:03d}.png")


if __name__ == "__main__":
    main()
