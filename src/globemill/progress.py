"""One progress figure for a whole bake, from the stages the core and the writer report.

The core reports each stage in its own unit (refine: leaf triangles of about an estimate; verify:
triangles measured; levels, seams, chunks: levels done; colliders: steps done of 5) and the writer
reports `write` (chunk levels put in GPU order, then the files). Each stage counts for the share
of the whole it took on the demo world at its own 0.5 m (`python benchmarks/stages.py` times
each stage from its first report to the next's; two runs on 2 cores, 2026-12-04, 13.5 s and
23.4 s: refine 17.6-17.9 %, verify 31.5-35.0 %, levels 18.9-20.1 %, seams 1 %, chunks 0.2 %,
colliders 23.5-27.0 %, write 2.2-3.9 %), so the total moves at a roughly even pace, and the
time left is the time so far scaled by the share still to do. The colliders report their five
steps (the cut at the collider tolerance, the angle pass, the bias, the angle pass again, the
measure), so the bar moves through that stage too.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

# stage: (share of a bake's time, unit shown to people)
STAGES: dict[str, tuple[float, str]] = {
    "refine": (0.18, "triangles"),
    "verify": (0.33, "triangles measured"),
    "levels": (0.19, "levels cut"),
    "seams": (0.01, "levels stitched"),
    "chunks": (0.01, "levels in chunks"),
    "colliders": (0.25, "collider steps"),
    "write": (0.03, "chunk levels written"),
}
ORDER = list(STAGES)


def bake_stages(collision: bool = True) -> list[str]:
    """The stages a bake goes through, in order (without colliders: no "colliders" stage)."""
    return [s for s in ORDER if collision or s != "colliders"]


@dataclass
class BakeProgress:
    """Turns (stage, done, total) reports into a fraction of the whole bake and a line of text.

    stages : the stages this bake goes through (default: all; without colliders, leave them out)
    """

    stages: list[str] = field(default_factory=lambda: list(ORDER))
    fraction: float = 0.0
    text: str = ""
    seen: list[str] = field(default_factory=list)
    # refine's total is its budget survey's estimate, known only once the survey is done (the
    # core reports the leaves so far as the total until then): `estimated` says it is
    refine_total_known: bool = False

    def estimated(self, triangles: int = 0) -> None:
        """The bake's survey has estimated its triangles (globemill.bake's on_estimate)."""
        self.refine_total_known = True

    def update(self, stage: str, done: int, total: int) -> float:
        if stage not in STAGES:
            return self.fraction
        if stage not in self.seen:
            self.seen.append(stage)
        weights = {s: STAGES[s][0] for s in self.stages if s in STAGES}
        whole = sum(weights.values()) or 1.0
        before = sum(w for s, w in weights.items() if ORDER.index(s) < ORDER.index(stage))
        part = min(max(done / total, 0.0), 1.0) if total > 0 else 0.0
        unit = STAGES[stage][1]
        self.text = f"{stage} {done:,}/{max(total, done):,} {unit}"
        if stage == "refine":
            self.refine_total_known |= total > done
            if not self.refine_total_known:
                part = 0.0  # no total yet: refinement is not done because its leaves are
                self.text = f"{stage} {done:,} {unit}, estimating the total"
        # never backwards: an estimate that grows can lower done/total
        self.fraction = max(self.fraction, (before + weights.get(stage, 0.0) * part) / whole)
        return self.fraction


def stage_bar(*, total: float, desc: str, counts: str, file: Any = None) -> Any:
    """A tqdm bar drawn as `desc: COUNTS|bar| STAGE [elapsed<remaining]`, where `counts` is a
    bar_format piece (e.g. "{percentage:3.0f}%") and STAGE the text set with `set_stage` (as
    it is: tqdm's postfix would put ", " before it). The time left is the time so far times
    the share still to do over the share done (smoothing 0), not a recent rate: stages report
    at uneven paces."""
    from tqdm import tqdm

    class Bar(tqdm):  # type: ignore[misc]
        stage = ""

        @property
        def format_dict(self) -> dict[str, Any]:
            return {**super().format_dict, "stage": self.stage}

        def set_stage(self, text: str) -> None:
            self.stage = text

    return Bar(
        total=total,
        desc=desc,
        leave=False,
        file=file,
        smoothing=0,
        bar_format="{desc}: " + counts + "|{bar}| {stage} [{elapsed}<{remaining}]",
    )


class ProgressBar:
    """A tqdm bar over a BakeProgress: percent of the whole bake, the stage in its units, ETA."""

    def __init__(self, name: str, *, collision: bool = True, file: Any = None) -> None:
        self.progress = BakeProgress(bake_stages(collision))
        self.bar = stage_bar(
            total=1000, desc=f"baking {name}", counts="{percentage:3.0f}%", file=file
        )

    def estimated(self, triangles: int) -> None:
        """The bake's survey has estimated its triangles (globemill.bake's on_estimate)."""
        self.progress.estimated(triangles)

    def __call__(self, stage: str, done: int, total: int) -> None:
        f = self.progress.update(stage, done, total)
        self.bar.n = round(1000 * f)
        self.bar.set_stage(self.progress.text)
        self.bar.refresh()

    def write(self, line: str) -> None:
        """Print a line above the bar (the bar is drawn again below it)."""
        self.bar.write(line, file=self.bar.fp)

    def close(self) -> None:
        self.bar.close()
