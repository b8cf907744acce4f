"""Live editing: an EditSession after any edits equals a fresh bake of the edited spec, bit for
bit, and reports exactly the chunks whose arrays changed.

The reference is `bake` itself run from scratch on the edited spec: the session shares none of
its state (no hierarchy, no cached test) with that run.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import globemill
from globemill import EditSession, bake, parse_spec
from globemill.bake import BakeResult, ChunkMesh

# a small invented world with one feature of every kind, steep walls and creases included
THIMBLE = {
    "name": "thimble",
    "radius_m": 400.0,
    "tolerance_m": 1.0,
    "max_triangles": 2_000_000,
    "lod": {"levels": 3, "ratio": 2.0, "chunk_level": 1},
    "features": [
        {"kind": "noise", "amplitude_m": 0.6, "frequency_per_m": 0.02, "octaves": 2, "seed": 3},
        {"kind": "hill", "lat_deg": 10.0, "lon_deg": 15.0, "amplitude_m": 14.0, "sigma_m": 30.0},
        {
            "kind": "mesa",
            "lat_deg": -20.0,
            "lon_deg": 40.0,
            "height_m": 8.0,
            "radius_m": 25.0,
            "wall_width_m": 0.0,
        },
        {
            "kind": "crater",
            "lat_deg": 35.0,
            "lon_deg": -60.0,
            "depth_m": 6.0,
            "radius_m": 30.0,
            "rim_height_m": 2.0,
            "rim_width_m": 8.0,
        },
        {
            "kind": "ridge",
            "lat0_deg": -50.0,
            "lon0_deg": -120.0,
            "lat1_deg": -40.0,
            "lon1_deg": -100.0,
            "height_m": 10.0,
            "half_width_m": 20.0,
            "profile": "sharp",
        },
        {
            "kind": "block",
            "blend": "max",
            "lat_deg": 0.0,
            "lon_deg": 150.0,
            "height_m": 5.0,
            "half_x_m": 12.0,
            "half_y_m": 6.0,
            "bearing_deg": 60.0,
            "corner_radius_m": 2.0,
            "wall_width_m": 1.0,
        },
    ],
}
OPTIONS = {"collision": False}


def _spec(**over: object) -> globemill.WorldSpec:
    return parse_spec({**THIMBLE, **over})


def _chunk_arrays(c: ChunkMesh) -> list[np.ndarray]:
    return [c.positions, c.normals, c.morph, c.triangles, c.skirt] + [
        c.stitched[m] for m in sorted(c.stitched)
    ]


def _chunk_equal(a: ChunkMesh, b: ChunkMesh) -> bool:
    if a.interior != b.interior or sorted(a.stitched) != sorted(b.stitched):
        return False
    return all(
        x.dtype == y.dtype and x.shape == y.shape and x.tobytes() == y.tobytes()
        for x, y in zip(_chunk_arrays(a), _chunk_arrays(b), strict=True)
    )


def assert_same(res: BakeResult, ref: BakeResult) -> None:
    """Every array of the session's result is byte for byte the fresh bake's."""
    for name in ("vertices", "directions", "normals", "chunk_corners", "chunk_neighbors"):
        a, b = getattr(res, name), getattr(ref, name)
        assert a.shape == b.shape and a.tobytes() == b.tobytes(), name
    assert len(res.levels) == len(ref.levels)
    for la, lb in zip(res.levels, ref.levels, strict=True):
        for name in ("triangles", "chunk", "errors", "morph", "present"):
            a, b = getattr(la, name), getattr(lb, name)
            assert a.shape == b.shape and a.tobytes() == b.tobytes(), (la.level, name)
        for ca, cb in zip(la.chunks, lb.chunks, strict=True):
            assert ca.vertex_ids.tobytes() == cb.vertex_ids.tobytes(), (la.level, ca.chunk)
            assert _chunk_equal(ca, cb), (la.level, ca.chunk)
    assert len(res.colliders) == len(ref.colliders)
    for a, b in zip(res.colliders, ref.colliders, strict=True):
        assert a.positions.tobytes() == b.positions.tobytes()
        assert a.triangles.tobytes() == b.triangles.tobytes()


def differing(before: BakeResult, after: BakeResult) -> dict[int, list[int]]:
    """Chunks whose arrays differ between two fresh bakes."""
    out = {}
    for la, lb in zip(before.levels, after.levels, strict=True):
        diff = [
            c
            for c, (a, b) in enumerate(zip(la.chunks, lb.chunks, strict=True))
            if not _chunk_equal(a, b)
        ]
        if diff:
            out[la.level] = diff
    return out


@pytest.fixture(scope="module")
def fresh() -> BakeResult:
    return bake(_spec(), **OPTIONS)


def test_a_new_session_is_the_bake(fresh: BakeResult) -> None:
    s = EditSession(_spec())
    assert_same(s.result, fresh)


def test_moving_a_hill_changes_only_nearby_chunks(fresh: BakeResult) -> None:
    s = EditSession(_spec())
    hill = s.spec.features[1]
    # a tenth of its width east (sigma_m / R radians of longitude at its latitude)
    dlon = math.degrees(0.1 * hill.sigma_m / (400.0 * math.cos(math.radians(hill.lat_deg))))
    r = s.move_feature(1, (hill.lat_deg, hill.lon_deg + dlon))
    ref = bake(s.spec, **OPTIONS)
    assert_same(s.result, ref)
    assert r.changed == differing(fresh, ref)
    assert 0 < r.chunk_count < len(fresh.levels) * len(fresh.levels[0].chunks) // 4
    # nearly every test came from the previous hierarchy
    assert r.reused > 0.5 * r.tested


def test_the_thread_count_changes_nothing() -> None:
    # one worker in the session, two in the reference: the same bytes
    s = EditSession(_spec(), threads=1)
    s.move_feature(3, (30.0, -55.0))
    s.set_feature(1, sigma_m=45.0)
    assert_same(s.result, bake(s.spec, threads=2, **OPTIONS))


def test_edited_meshes_are_within_tolerance_by_an_independent_measure() -> None:
    # the deviation measured outside the mesher (tests/independent_error.py: projections onto the
    # true surface and exact closest points among scipy cKDTree candidates), every level
    from independent_error import feature_directions, measure, step_walls

    s = EditSession(_spec())
    s.move_feature(1, (12.0, 18.0))
    s.add_feature(
        {
            "kind": "crater",
            "lat_deg": -5.0,
            "lon_deg": 80.0,
            "depth_m": 5.0,
            "radius_m": 20.0,
            "rim_height_m": 2.0,
            "rim_width_m": 6.0,
        }
    )
    spec = s.spec
    field = globemill.field(spec)
    cf, r = spec.core_features(), float(spec.radius_m)
    for k, lv in enumerate(s.result.levels):
        res = measure(
            field,
            r,
            *s.result.mesh(k),
            surface_samples=40_000,
            extra_directions=feature_directions(cf, r),
            walls=step_walls(cf, field, r),
            refine_worst=32,
        )
        assert res["max"] <= lv.tolerance_m, (k, res["max"])


def test_unchanged_chunks_share_their_arrays() -> None:
    s = EditSession(_spec())
    before = [lv.chunks for lv in s.result.levels]
    r = s.set_feature(2, height_m=9.0)
    for k, lv in enumerate(s.result.levels):
        for c, chunk in enumerate(lv.chunks):
            if c not in r.changed.get(k, []):
                assert chunk.positions is before[k][c].positions  # no copy made


def test_session_with_skirts_and_colliders() -> None:
    spec = _spec(lod={"levels": 2, "ratio": 2.0, "chunk_level": 1, "seams": "skirt"})
    s = EditSession(spec, collision=True)
    r = s.set_feature(3, radius_m=36.0)
    ref = bake(s.spec, collision=True)
    assert_same(s.result, ref)
    assert r.colliders, "the crater grew: some collider changed"


def test_an_edit_that_changes_the_verification_spacing_rebuilds_everything() -> None:
    s = EditSession(_spec())
    r = s.set_feature(0, frequency_per_m=0.05)  # finer noise: denser verification everywhere
    assert_same(s.result, bake(s.spec, **OPTIONS))
    assert r.reused == 0


EDITS = st.one_of(
    st.tuples(
        st.just("move"),
        st.integers(1, 5),
        st.floats(-60, 60),
        st.floats(-170, 170),
    ),
    st.tuples(st.just("hill"), st.integers(1, 1), st.floats(2, 20), st.floats(10, 60)),
    st.tuples(st.just("mesa"), st.integers(2, 2), st.floats(-6, 12), st.floats(10, 40)),
    st.tuples(st.just("add"), st.integers(0, 6), st.floats(-60, 60), st.floats(-170, 170)),
    st.tuples(st.just("remove"), st.integers(1, 6), st.just(0.0), st.just(0.0)),
)


def _apply(s: EditSession, edit: tuple) -> globemill.EditReport | None:
    what, i, a, b = edit
    n = len(s.spec.features)
    kinds = [f.kind for f in s.spec.features]
    if what == "move" and i < n and kinds[i] != "noise":
        return s.move_feature(i, (a, b))
    if what == "hill" and "hill" in kinds:
        return s.set_feature(kinds.index("hill"), amplitude_m=a, sigma_m=b)
    if what == "mesa" and "mesa" in kinds:
        return s.set_feature(kinds.index("mesa"), height_m=a, radius_m=b)
    if what == "add":
        hill = {"kind": "hill", "lat_deg": a, "lon_deg": b, "amplitude_m": 6.0, "sigma_m": 20.0}
        return s.add_feature(hill, index=min(i, n))
    if what == "remove" and 1 < n and i < n:
        return s.remove_feature(i)
    return None


@settings(
    max_examples=10,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow],
)
@given(st.lists(EDITS, min_size=1, max_size=4))
def test_random_edit_sequences_match_a_fresh_bake(edits: list[tuple]) -> None:
    s = EditSession(_spec())
    before = bake(s.spec, **OPTIONS)
    for edit in edits:
        report = _apply(s, edit)
        if report is None:
            continue
        after = bake(s.spec, **OPTIONS)
        # reported chunks are exactly those whose bytes changed between the two fresh bakes
        assert report.changed == differing(before, after)
        before = after
    assert_same(s.result, before)


@pytest.mark.parametrize(
    ("call", "field"),
    [
        (lambda s: s.set_feature(99, sigma_m=1.0), "index"),
        (lambda s: s.set_feature(-1, sigma_m=1.0), "index"),
        (lambda s: s.set_feature(True, sigma_m=1.0), "index"),
        (lambda s: s.set_feature(1, sigma_m=-5.0), "features[1].sigma_m"),
        (lambda s: s.set_feature(1, amplitude_m=float("nan")), "features[1].amplitude_m"),
        (lambda s: s.set_feature(1, color=3), "features[1]"),
        (lambda s: s.set_feature(1), "set_feature"),
        (lambda s: s.remove_feature(6), "index"),
        (lambda s: s.move_feature(0, (10.0, 10.0)), "features[0]"),
        (lambda s: s.move_feature(1, (95.0, 10.0)), "direction"),
        (lambda s: s.move_feature(1, (0.0, 0.0, 0.0)), "direction"),
        (lambda s: s.move_feature(1, "north"), "direction"),
        (lambda s: s.add_feature({"kind": "hill", "lat_deg": 0.0}), "features[6]"),
        (lambda s: s.add_feature({"kind": "volcano"}), "features[6]"),
        (lambda s: s.add_feature({"kind": "hill"}, index=9), "index"),
        (lambda s: s.set_feature(1, amplitude_m=1e6), "features"),
    ],
)
def test_invalid_edits_raise_and_leave_the_session_as_it_was(call, field: str) -> None:
    s = _session()
    spec, result = s.spec, s.result
    with pytest.raises(ValueError) as info:
        call(s)
    assert field in str(info.value)
    assert s.spec is spec and s.result is result


_SESSION: list[EditSession] = []


def _session() -> EditSession:
    # one session serves every invalid-edit case: none of them may change it
    if not _SESSION:
        _SESSION.append(EditSession(_spec()))
    return _SESSION[0]


def test_a_budget_too_small_for_the_edit_leaves_the_session_as_it_was() -> None:
    s = EditSession(_spec(max_triangles=60_000))
    spec, result = s.spec, s.result
    with pytest.raises(ValueError, match="max_triangles"):
        # fine rough ground everywhere needs far more triangles than the budget
        s.add_feature({"kind": "noise", "amplitude_m": 3.0, "frequency_per_m": 0.5})
    assert s.spec is spec and s.result is result


def test_chunk_reader_checks_its_arguments() -> None:
    s = _session()
    assert s.chunk(0, 3) is s.result.levels[0].chunks[3]
    with pytest.raises(ValueError, match="level"):
        s.chunk(7, 0)
    with pytest.raises(ValueError, match="chunk"):
        s.chunk(0, 80)


def test_the_live_edit_example_prints_latencies_and_writes_frames(tmp_path) -> None:
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    out = subprocess.run(
        [sys.executable, str(root / "examples" / "live_edit.py"), "--tolerance-m", "4"]
        + ["--steps", "2", "--out", str(tmp_path)],
        capture_output=True,
        text=True,
        timeout=900,
    )
    assert out.returncode == 0, out.stderr
    steps = [line for line in out.stdout.splitlines() if line.startswith("step ")]
    assert len(steps) == 2 and all(" ms, " in line for line in steps)
    assert "latency per edit: median" in out.stdout
    frames = sorted(tmp_path.glob("frame_*.png"))
    assert [f.name for f in frames] == ["frame_000.png", "frame_001.png"]
    assert all(f.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" for f in frames)


def test_two_threads_editing_one_session_run_one_after_the_other() -> None:
    # the thread contract (session.py, csrc/session.cpp): calls serialise on the session's lock,
    # so concurrent edits neither crash nor interleave; the result is a fresh bake of the spec the
    # last edit left, and every edit saw a consistent spec
    import threading

    s = EditSession(_spec(), **OPTIONS)
    hill = next(i for i, f in enumerate(s.spec.features) if f.kind == "hill")
    errors: list[BaseException] = []

    def edit(dlat: float) -> None:
        try:
            for k in range(3):
                f = s.spec.features[hill]
                s.move_feature(hill, (f.lat_deg + dlat, f.lon_deg + 0.1 * k))
        except BaseException as exc:  # pragma: no cover - the failure is the assertion below
            errors.append(exc)

    threads = [threading.Thread(target=edit, args=(d,)) for d in (0.2, -0.3)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors
    assert_same(s.result, bake(s.spec, **OPTIONS))
