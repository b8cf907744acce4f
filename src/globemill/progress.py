"""One progress figure for a whole bake, from the stages the core and the writer report.

The core reports each stage in its own unit (refine: leaf triangles of about an estimate; verify:
triangles measured; levels, seams, chunks: levels done; colliders: 0 then 1) and the writer
reports `write` (chunk levels put in GPU order, then the files). Each stage counts for a share of
the whole that was measured on the demo world (`globemill bake examples/pebblemoor.toml
--tolerance-m 2`: report `stages_seconds` refine 1.0 s, verify 4.9 s, levels with seams and
chunks 2.6 s; writing about 0.5 s), so the total moves at a roughly even pace and an ETA
computed from it means something.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

# stage: (share of a bake's time, unit shown to people)
STAGES: dict[str, tuple[float, str]] = {
    "refine": (0.11, "triangles"),
    "verify": (0.52, "triangles measured"),
    "levels": (0.16, "levels cut"),
    "seams": (0.08, "levels stitched"),
    "chunks": (0.04, "levels in chunks"),
    "colliders": (0.03, "colliders"),
    "write": (0.06, "chunk levels written"),
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

    def update(self, stage: str, done: int, total: int) -> float:
        if stage not in STAGES:
            return self.fraction
        if stage not in self.seen:
            self.seen.append(stage)
        weights = {s: STAGES[s][0] for s in self.stages if s in STAGES}
        whole = sum(weights.values()) or 1.0
        before = sum(w for s, w in weights.items() if ORDER.index(s) < ORDER.index(stage))
        part = min(max(done / total, 0.0), 1.0) if total > 0 else 0.0
        # never backwards: an estimate that grows can lower done/total
        self.fraction = max(self.fraction, (before + weights.get(stage, 0.0) * part) / whole)
        self.text = f"{stage} {done:,}/{max(total, done):,} {STAGES[stage][1]}"
        return self.fraction


class ProgressBar:
    """A tqdm bar over a BakeProgress: percent of the whole bake, the stage in its units, ETA."""

    def __init__(self, name: str, *, collision: bool = True, file: Any = None) -> None:
        from tqdm import tqdm

        self.progress = BakeProgress(bake_stages(collision))
        self.bar = tqdm(
            total=1000,
            desc=f"baking {name}",
            leave=False,
            file=file,
            bar_format="{desc}: {percentage:3.0f}%|{bar}| {postfix} [{elapsed}<{remaining}]",
        )

    def __call__(self, stage: str, done: int, total: int) -> None:
        f = self.progress.update(stage, done, total)
        self.bar.n = round(1000 * f)
        self.bar.set_postfix_str(self.progress.text, refresh=False)
        self.bar.refresh()

    def write(self, line: str) -> None:
        """Print a line above the bar (the bar is drawn again below it)."""
        self.bar.write(line, file=self.bar.fp)

    def close(self) -> None:
        self.bar.close()
