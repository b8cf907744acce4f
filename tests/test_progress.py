"""Progress of a bake: every stage reported in order, in its own unit, and one fraction of the
whole that only moves forward and ends at 100 %."""

from __future__ import annotations

import io
from pathlib import Path

import pytest

import globemill
from globemill.output import write_outputs
from globemill.progress import ORDER, STAGES, BakeProgress, ProgressBar, bake_stages

DEMO = Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml"


@pytest.fixture(scope="module")
def reports(tmp_path_factory: pytest.TempPathFactory) -> list[tuple[str, int, int]]:
    calls: list[tuple[str, int, int]] = []
    spec = globemill.load_spec(DEMO)
    result = globemill.bake(spec, tolerance_m=4.0, progress=lambda *a: calls.append(a))
    write_outputs(result, tmp_path_factory.mktemp("out"), progress=lambda *a: calls.append(a))
    return calls


def test_every_stage_is_reported_in_order(reports: list[tuple[str, int, int]]) -> None:
    stages = list(dict.fromkeys(s for s, _, _ in reports))
    assert stages == ORDER  # refine, verify, levels, seams, chunks, colliders, write
    for stage in ORDER:
        mine = [(d, t) for s, d, t in reports if s == stage]
        assert all(0 <= d <= t for d, t in mine), stage
        assert mine[-1][0] == mine[-1][1], stage  # each stage ends complete
        assert [d for d, _ in mine] == sorted(d for d, _ in mine), stage
    # verification, the longest stage, reports more than once on the demo (slices of 32768)
    verify = [d for s, d, _ in reports if s == "verify"]
    assert len(verify) >= 2


def test_the_whole_only_moves_forward_to_one(reports: list[tuple[str, int, int]]) -> None:
    p = BakeProgress()
    seen = [p.update(*r) for r in reports]
    assert seen == sorted(seen) and seen[-1] == pytest.approx(1.0)
    # no stage jumps the whole by more than its share
    assert max(b - a for a, b in zip(seen, seen[1:], strict=False)) < 0.6


def test_refinement_is_not_shown_done_before_its_total_is_known() -> None:
    # the core reports refine's leaves as their own total until the bake's budget survey has
    # estimated it (on_estimate): until then the whole stays at 0, not at refine's full share
    events: list[tuple[str, int, int]] = []
    spec = globemill.load_spec(DEMO)
    globemill.bake(
        spec,
        tolerance_m=4.0,
        collision=False,
        progress=lambda *a: events.append(a),
        on_estimate=lambda n: events.append(("estimate", n, n)),
    )
    cut = events.index(next(e for e in events if e[0] == "estimate"))
    before = [e for e in events[:cut] if e[0] == "refine"]
    assert before and all(d == t for _, d, t in before)  # no total yet
    p = BakeProgress(bake_stages(False))
    assert all(p.update(*e) == 0.0 for e in before)
    assert "estimating the total" in p.text and "/" not in p.text
    p.estimated(events[cut][1])
    after = [p.update(*e) for e in events[cut + 1 :] if e[0] == "refine"]
    share = STAGES["refine"][0] / sum(STAGES[s][0] for s in bake_stages(False))
    assert 0.0 < after[0] <= after[-1] == pytest.approx(share)


def test_the_bar_shows_percent_stage_and_eta(reports: list[tuple[str, int, int]]) -> None:
    out = io.StringIO()
    bar = ProgressBar("pebblemoor", file=out)
    for r in reports:
        bar(*r)
    bar.bar.refresh()
    text = out.getvalue()
    bar.close()
    assert "100%" in text and "write" in text and "triangles measured" in text
    assert "<" in text  # elapsed<remaining
    # the stage follows the bar as it is (tqdm's postfix would draw "|, refine ...")
    assert "| refine " in text and "| verify " in text and "|, " not in text


def test_progress_does_not_change_the_result() -> None:
    spec = globemill.load_spec(DEMO)
    a = globemill.bake(spec, tolerance_m=6.0, collision=False)
    b = globemill.bake(spec, tolerance_m=6.0, collision=False, progress=lambda *x: None)
    assert a.vertices.tobytes() == b.vertices.tobytes()
    assert a.triangles.tobytes() == b.triangles.tobytes()
