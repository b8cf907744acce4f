"""The share of a bake's time each progress stage takes: the weights of globemill/progress.py.

    python benchmarks/stages.py [SPEC] [--tolerance-m T]

Bakes SPEC (default: the demo world at its own tolerance) through the Python API and writes its
files to a temporary folder, noting when each stage first reports; a stage lasts from its first
report to the next stage's (refine from the start of the bake, write to the end of the writing).
Prints each stage's seconds and share, and the weights progress.py uses beside them.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import globemill
from globemill.output import write_outputs
from globemill.progress import STAGES

DEMO = Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("spec", nargs="?", default=str(DEMO))
    ap.add_argument("--tolerance-m", type=float, default=None)
    args = ap.parse_args()
    spec = globemill.load_spec(args.spec)
    first: dict[str, float] = {}

    def seen(stage: str, done: int, total: int) -> None:
        first.setdefault(stage, time.perf_counter())

    start = time.perf_counter()
    result = globemill.bake(spec, tolerance_m=args.tolerance_m, progress=seen)
    with tempfile.TemporaryDirectory() as out:
        write_outputs(result, Path(out), progress=seen)
    end = time.perf_counter()
    names = list(first)
    marks = [start] + [first[n] for n in names[1:]] + [end]
    whole = end - start
    print(f"{spec.name} at {result.report['tolerance_m']:g} m: {whole:.2f} s")
    print("stage        seconds   share   weight in progress.py")
    for name, a, b in zip(names, marks[:-1], marks[1:], strict=True):
        print(f"{name:10s} {b - a:9.2f} {100 * (b - a) / whole:6.1f} % {STAGES[name][0]:8.2f}")


if __name__ == "__main__":
    main()
