"""Hostile input, killed farms and full disks (issue 16): no crash, no stale output called fresh,
one clear line with its own exit code.

Each case runs through the command line (a subprocess, as a build script runs it), the Python
API or the farm, asserts the exit code and the one-line message, and compares the output folder
byte for byte before and after. Full and read-only folders are small tmpfs mounts (root only;
skipped elsewhere) or an injected write failure in the atomic writer.
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import json
import os
import random
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import psutil
import pytest
from test_farm import without_timings

from globemill import _atomic
from globemill.bake import bake
from globemill.cli import EXIT_BAD_INPUT, EXIT_IO, EXIT_OK, EXIT_REFUSED
from globemill.cli import main as cli_main
from globemill.farm import (
    LOCK_NAME,
    WORKERS_LOCK_NAME,
    estimate_bake,
    estimate_from_triangles,
    farm,
)
from globemill.spec import load_spec

HOSTILE = Path(__file__).parent / "data" / "hostile"
OUTPUTS = ("{}.glb", "{}.collision.glb", "{}.report.json")
# the seed of every "random moment" below: the number, so a failure replays
SEED = 16


# --------------------------------------------------------------------------------------------
# small worlds and helpers


def world(i: int, *, color: float = 0.4, tolerance_m: float = 1.0) -> dict[str, Any]:
    """A small world of our own: two hills and a crater, one material layer of color `color`
    (a color changes only COLOR_0's bytes, never a file's size)."""
    return {
        "name": f"knoll_{i}",
        "radius_m": 300.0 + 40.0 * i,
        "tolerance_m": tolerance_m,
        "lod": {"levels": 2, "chunk_level": 0},
        "layers": [{"name": "turf", "color": [color, 0.5, 0.25]}],
        "features": [
            {"kind": "hill", "lat_deg": 10.0 + 9 * i, "lon_deg": 20.0 * i, "amplitude_m": 20.0,
             "sigma_m": 50.0},
            {"kind": "hill", "lat_deg": -30.0, "lon_deg": 100.0 - 15 * i, "amplitude_m": 12.0,
             "sigma_m": 35.0},
            {"kind": "crater", "lat_deg": 40.0, "lon_deg": -60.0, "radius_m": 40.0,
             "depth_m": 8.0, "rim_height_m": 3.0, "rim_width_m": 15.0},
        ],
    }  # fmt: skip


def write_worlds(folder: Path, n: int, **kw: Any) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for i in range(n):
        path = folder / f"knoll_{i}.json"
        path.write_text(json.dumps(world(i, **kw)))
        paths.append(path)
    return paths


def run(*args: str, timeout: float = 300) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "globemill", *args], capture_output=True, text=True, timeout=timeout
    )


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under `folder` (hidden ones too) with its bytes."""
    if not folder.exists():
        return {}
    return {
        str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()
    }


def outputs_of(folder: Path, names: list[str]) -> dict[str, bytes]:
    return {p.format(n): (folder / p.format(n)).read_bytes() for n in names for p in OUTPUTS}


def same_world(name: str, got: Path, ref: Path) -> bool:
    """`got` holds the bake `ref` holds: .glb files byte for byte (same spec, same bytes), the
    report up to its timings."""
    for p in OUTPUTS[:2]:
        if (got / p.format(name)).read_bytes() != (ref / p.format(name)).read_bytes():
            return False
    a = json.loads((got / f"{name}.report.json").read_text())
    b = json.loads((ref / f"{name}.report.json").read_text())
    return without_timings(a) == without_timings(b)


def leftovers(folder: Path) -> list[str]:
    """Temporaries and set journals of ours anywhere under `folder`."""
    return sorted(
        str(p.relative_to(folder))
        for p in folder.rglob(".*")
        if p.name.endswith(".tmp") or p.name.endswith(".journal")
    )


def one_error_line(stderr: str) -> str:
    lines = [ln for ln in stderr.splitlines() if ln.startswith("globemill: error:")]
    assert len(lines) == 1, stderr
    assert "Traceback" not in stderr
    return lines[0]


@contextlib.contextmanager
def tmpfs(path: Path, size: str, *, read_only: bool = False) -> Iterator[Path]:
    """A tmpfs of `size` mounted at `path` (root only; the test is skipped where it cannot)."""
    path.mkdir(parents=True, exist_ok=True)
    opts = f"size={size}" + (",ro" if read_only else "")
    res = subprocess.run(["mount", "-t", "tmpfs", "-o", opts, "tmpfs", str(path)],
                         capture_output=True, text=True)  # fmt: skip
    if res.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {res.stderr.strip() or res.returncode}")
    try:
        yield path
    finally:
        subprocess.run(["umount", "-l", str(path)], capture_output=True)


def remount(path: Path, opts: str) -> None:
    subprocess.run(["mount", "-o", f"remount,{opts}", str(path)], check=True)


def fill(folder: Path, leave_bytes: int) -> None:
    """Fill the file system of `folder` until about `leave_bytes` are free."""
    free = os.statvfs(folder).f_bavail * os.statvfs(folder).f_frsize
    with open(folder / "ballast", "wb") as fh:
        with contextlib.suppress(OSError):
            fh.write(b"\0" * max(0, free - leave_bytes))


@pytest.fixture(scope="module")
def refs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """Three worlds in two versions (A: color 0.4, B: color 0.6) and single bakes of each."""
    root = tmp_path_factory.mktemp("hostile_refs")
    specs_a = write_worlds(root / "a", 3)
    specs_b = write_worlds(root / "b", 3, color=0.6)
    for specs, out in ((specs_a, root / "ref_a"), (specs_b, root / "ref_b")):
        for spec in specs:
            assert cli_main(["bake", str(spec), "-o", str(out), "-q"]) == 0
    names = [f"knoll_{i}" for i in range(3)]
    return {"a": specs_a, "b": specs_b, "ref_a": root / "ref_a", "ref_b": root / "ref_b",
            "names": names}  # fmt: skip


# --------------------------------------------------------------------------------------------
# hostile specs


def test_every_hostile_spec_fails_alone_in_a_farm(tmp_path: Path, refs: dict[str, Any]) -> None:
    specs = tmp_path / "specs"
    specs.mkdir()
    hostile = sorted(p.name for p in HOSTILE.iterdir() if p.suffix in (".json", ".toml"))
    for name in hostile:
        (specs / name).write_bytes((HOSTILE / name).read_bytes())
    good = specs / "knoll_0.json"
    good.write_bytes(refs["a"][0].read_bytes())
    out = tmp_path / "out"
    res = run("farm", str(specs), "-o", str(out), "--jobs", "2")
    assert res.returncode == EXIT_BAD_INPUT, res.stderr  # only bad specs failed
    assert "Traceback" not in res.stderr
    errors = [ln for ln in res.stderr.splitlines() if ln.startswith("globemill: error:")]
    # one line per hostile file, each naming it
    assert len(errors) == len(hostile), res.stderr
    for name in hostile:
        assert sum(name in ln for ln in errors) == 1, (name, res.stderr)
    rows = {
        Path(w["source"]).name: w for w in json.loads((out / "farm.json").read_text())["worlds"]
    }
    assert rows.pop("knoll_0.json")["status"] == "baked"
    assert sorted(rows) == hostile
    for name, row in rows.items():
        assert row["status"] == "failed" and row["error_kind"] == "input"
        assert name in row["error"]
    assert same_world("knoll_0", out, refs["ref_a"])
    assert leftovers(out) == []

    # the Python API says the same without a process of its own
    summary = farm([specs / n for n in hostile], tmp_path / "api", jobs=1)
    assert [w.status for w in summary.worlds] == ["failed"] * len(hostile)
    assert all(Path(w.source).name in str(w.error) for w in summary.worlds)


@pytest.mark.parametrize("given", ["empty", "missing"])
def test_a_farm_without_specs_is_one_error_and_writes_nothing(tmp_path: Path, given: str) -> None:
    folder = tmp_path / given
    if given == "empty":
        folder.mkdir()
    out = tmp_path / "out"
    res = run("farm", f"{folder}/", "-o", str(out))
    assert res.returncode == EXIT_BAD_INPUT
    line = one_error_line(res.stderr)
    assert "no world specs found" in line and str(folder) in line
    assert "unsupported file type" not in line
    assert not out.exists()


# --------------------------------------------------------------------------------------------
# full and read-only folders


def test_disk_full_mid_write_keeps_the_old_set_and_names_the_file(
    tmp_path: Path, refs: dict[str, Any], monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
) -> None:  # fmt: skip
    out = tmp_path / "out"
    assert cli_main(["bake", str(refs["a"][0]), "-o", str(out), "-q"]) == EXIT_OK
    before = snapshot(out)
    real_write = os.write

    def full_at_collider(fd: int, data: Any) -> int:
        # the disk fills while the second file of the set, the collider, is written
        if "collision.glb" in os.readlink(f"/proc/self/fd/{fd}"):
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real_write(fd, data)

    monkeypatch.setattr(_atomic.os, "write", full_at_collider)
    code = cli_main(["bake", str(refs["b"][0]), "-o", str(out), "-q"])
    monkeypatch.undo()
    assert code == EXIT_IO
    line = one_error_line(capsys.readouterr().err)
    assert line == (
        f"globemill: error: cannot write {out / 'knoll_0.collision.glb'}: No space left on device"
    )
    assert snapshot(out) == before  # the old set, whole, and nothing else


def test_full_tmpfs_is_found_before_the_bake(tmp_path: Path, refs: dict[str, Any]) -> None:
    with tmpfs(tmp_path / "disk", "4m") as disk:
        out = disk / "out"
        res = run("farm", *map(str, refs["a"]), "-o", str(out), "--jobs", "2", "-q")
        assert res.returncode == EXIT_OK, res.stderr
        fill(disk, 64 * 1024)  # room for farm.json, not for a world
        before = outputs_of(out, refs["names"])
        # a changed world: the farm starts, but its bake is refused for space before it runs
        res = run("farm", str(refs["b"][0]), *map(str, refs["a"][1:]), "-o", str(out), "-q")
        assert res.returncode == EXIT_IO, res.stderr
        line = one_error_line(res.stderr)
        assert "knoll_0" in line and "No space left on device" in line and "MB free" in line
        rows = json.loads((out / "farm.json").read_text())["worlds"]
        assert [(w["status"], w["error_kind"]) for w in rows] == [
            ("failed", "io"), ("cached", None), ("cached", None)
        ]  # fmt: skip
        # "MB free, the outputs need about": the check before a bake, not a failed write after it
        assert "the outputs need about" in rows[0]["error"]
        assert outputs_of(out, refs["names"]) == before  # the old outputs survive
        assert leftovers(out) == []
        # completely full: `globemill bake` stops before the bake, naming the folder
        (disk / "ballast").unlink()
        fill(disk, 0)
        res = run("bake", str(refs["b"][1]), "-o", str(out))
        assert res.returncode == EXIT_IO
        assert one_error_line(res.stderr).startswith(f"globemill: error: cannot write {out}: ")
        assert res.stdout == ""  # no bake table: nothing was baked
        assert outputs_of(out, refs["names"]) == before


def test_read_only_folder(tmp_path: Path, refs: dict[str, Any]) -> None:
    with tmpfs(tmp_path / "disk", "4m") as disk:
        out = disk / "out"
        assert run("bake", str(refs["a"][0]), "-o", str(out), "-q").returncode == EXIT_OK
        remount(disk, "ro")
        before = snapshot(out)
        for args in (("bake", str(refs["b"][0])), ("farm", str(refs["b"][0]))):
            res = run(*args, "-o", str(out))
            assert res.returncode == EXIT_IO, res.stderr
            line = one_error_line(res.stderr)
            assert line == f"globemill: error: cannot write {out}: Read-only file system"
            assert snapshot(out) == before
        # a folder that would have to be made inside the read-only one
        res = run("bake", str(refs["b"][0]), "-o", str(out / "deeper"))
        assert res.returncode == EXIT_IO and "Read-only file system" in res.stderr
        remount(disk, "rw")


def test_an_output_path_that_is_a_file(tmp_path: Path, refs: dict[str, Any]) -> None:
    blocker = tmp_path / "taken"
    blocker.write_text("not a folder")
    for cmd in ("bake", "farm"):
        res = run(cmd, str(refs["a"][0]), "-o", str(blocker / "out"))
        assert res.returncode == EXIT_IO
        assert one_error_line(res.stderr) == (
            f"globemill: error: cannot write {blocker}: it is a file, not a folder"
        )
    assert blocker.read_text() == "not a folder"


# --------------------------------------------------------------------------------------------
# a set is replaced as a set


KILL_BETWEEN_RENAMES = """
import os, sys
from pathlib import Path
from globemill import _atomic
real, done = os.replace, []
def replace(a, b):
    if len(done) == 1:
        os._exit(9)  # dies like a SIGKILL between the renames of one set
    done.append(b)
    real(a, b)
os.replace = replace
out = Path(sys.argv[1])
_atomic.write_files_atomically({out / f"w{i}.bin": b"new %d" % i * 1000 for i in range(3)})
"""


def test_a_set_killed_between_its_renames_is_finished_by_the_next_write(tmp_path: Path) -> None:
    out = tmp_path / "out"
    old = {out / f"w{i}.bin": b"old %d" % i * 10 for i in range(3)}
    new = {p: b"new %d" % i * 1000 for i, p in enumerate(old)}
    _atomic.write_files_atomically(old)
    res = subprocess.run([sys.executable, "-c", KILL_BETWEEN_RENAMES, str(out)])
    assert res.returncode == 9
    # killed with one file renamed: a mix on disk, and the journal that can finish it
    assert [p.read_bytes() == new[p] for p in old] == [True, False, False]
    assert len(list(out.glob(".globemill-set.*.journal"))) == 1
    # a write to other files leaves it alone; a write to any file of the set finishes it first
    _atomic.write_files_atomically({out / "other.bin": b"x"})
    assert len(list(out.glob(".globemill-set.*.journal"))) == 1
    _atomic.write_files_atomically({out / "w2.bin": b"newer"})
    assert [p.read_bytes() for p in old] == [new[out / "w0.bin"], new[out / "w1.bin"], b"newer"]
    assert leftovers(out) == []

    # the farm's folder clean-up finishes such a set too (and nothing else is touched)
    _atomic.write_files_atomically(old)
    subprocess.run([sys.executable, "-c", KILL_BETWEEN_RENAMES, str(out)], check=False)
    _atomic.finish_interrupted_sets(out)
    assert {p: p.read_bytes() for p in old} == new
    assert leftovers(out) == []


def test_a_temporary_held_by_a_live_writer_is_never_swept(tmp_path: Path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    dead = out / ".moor.glb.abcd1234.tmp"  # left by a killed process: nobody holds it
    dead.write_bytes(b"half")
    live = out / ".moor.glb.wxyz5678.tmp"
    live.write_bytes(b"being written")
    fd = os.open(live, os.O_RDONLY)
    fcntl.flock(fd, fcntl.LOCK_EX)  # as a live writer holds its temporary
    try:
        other = out / ".notes.txt.abcd1234.tmp.keep"  # not our pattern
        other.write_bytes(b"x")
        assert _atomic.sweep_temporaries(out) == [dead]
        assert live.exists() and other.exists()
        # a bake of that world removes the dead ones of its own files, never a live one
        dead.write_bytes(b"half")
        _atomic.write_files_atomically({out / "moor.glb": b"glb"})
        assert not dead.exists() and live.exists()
    finally:
        os.close(fd)


# --------------------------------------------------------------------------------------------
# killed bakes and farms


def wait_gone(procs: list[psutil.Process], timeout: float = 20.0) -> None:
    _, alive = psutil.wait_procs(procs, timeout=timeout)
    assert alive == [], f"processes outlived their farm: {alive}"


def test_a_bake_killed_at_a_random_moment(tmp_path: Path, refs: dict[str, Any]) -> None:
    rng = random.Random(SEED)
    out = tmp_path / "out"
    spec_a, spec_b = refs["a"][2], refs["b"][2]
    t0 = time.monotonic()
    assert run("bake", str(spec_a), "-o", str(out), "-q").returncode == EXIT_OK
    took = time.monotonic() - t0
    for _ in range(2):
        proc = subprocess.Popen([sys.executable, "-m", "globemill", "bake", str(spec_b), "-o",
                                 str(out), "-q"], stderr=subprocess.DEVNULL)  # fmt: skip
        time.sleep(rng.uniform(0.3, 1.1) * took)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        _atomic.finish_interrupted_sets(out)
        # the whole old set or the whole new one
        assert same_world("knoll_2", out, refs["ref_a"]) or same_world(
            "knoll_2", out, refs["ref_b"]
        )
        # a new bake removes what the killed one left and writes the new set
        assert run("bake", str(spec_b), "-o", str(out), "-q").returncode == EXIT_OK
        assert same_world("knoll_2", out, refs["ref_b"])
        assert leftovers(out) == []
        assert run("bake", str(spec_a), "-o", str(out), "-q").returncode == EXIT_OK


@pytest.mark.slow
def test_a_farm_killed_at_a_random_moment_leaves_nothing_called_fresh(
    tmp_path: Path, refs: dict[str, Any]
) -> None:
    rng = random.Random(SEED)
    names = refs["names"]
    out = tmp_path / "out"
    # slower versions of the worlds, so a kill lands while bakes run
    slow_a = write_worlds(tmp_path / "slow_a", 3, tolerance_m=0.35)
    slow_b = write_worlds(tmp_path / "slow_b", 3, color=0.6, tolerance_m=0.35)
    ref_b = tmp_path / "ref_b"
    for spec in slow_b:
        assert cli_main(["bake", str(spec), "-o", str(ref_b), "-q"]) == EXIT_OK
    t0 = time.monotonic()
    cmd = [sys.executable, "-m", "globemill", "farm", "-o", str(out), "--jobs", "2", "-q"]
    assert subprocess.run([*cmd, "--force", *map(str, slow_a)]).returncode == EXIT_OK
    took = time.monotonic() - t0
    for how in (signal.SIGKILL, signal.SIGTERM):
        killed = subprocess.Popen([*cmd, "--force", *map(str, slow_a)], stderr=subprocess.PIPE)
        time.sleep(rng.uniform(0.3, 0.8) * took)
        family = psutil.Process(killed.pid).children(recursive=True)
        killed.send_signal(how)
        _, err = killed.communicate(timeout=60)
        if how == signal.SIGTERM:
            assert killed.returncode in (143, EXIT_OK), err  # 0: it had just finished
        # at once, a farm with other settings: what it calls baked or cached must be in OUTDIR
        # after every process of the killed farm is gone
        res = subprocess.run([*cmd, *map(str, slow_b)], capture_output=True, text=True)
        assert res.returncode == EXIT_OK, res.stderr
        wait_gone(family)
        time.sleep(0.5)  # an orphan that was still writing would have landed by now
        rows = json.loads((out / "farm.json").read_text())["worlds"]
        assert {w["status"] for w in rows} <= {"baked", "cached"}
        for name in names:
            assert same_world(name, out, ref_b), name
        assert leftovers(out) == []
        # and the next run finds every world current, by the bytes
        again = farm(slow_b, out, jobs=2)
        assert [w.status for w in again.worlds] == ["cached"] * 3


def test_cache_compares_bytes_not_sizes(tmp_path: Path, refs: dict[str, Any]) -> None:
    out = tmp_path / "out"
    assert farm(refs["a"], out, jobs=2).ok
    # another color: the same sizes, other bytes (the case a size check took as current)
    sizes = {p.name: p.stat().st_size for p in refs["ref_a"].glob("knoll_0*.glb")}
    assert sizes == {p.name: p.stat().st_size for p in refs["ref_b"].glob("knoll_0*.glb")}
    assert cli_main(["bake", str(refs["b"][0]), "-o", str(out), "-q"]) == EXIT_OK
    summary = farm(refs["a"], out, jobs=2)
    assert [w.status for w in summary.worlds] == ["baked", "cached", "cached"]
    for name in refs["names"]:
        assert same_world(name, out, refs["ref_a"])


# --------------------------------------------------------------------------------------------
# two farms into one folder


def test_a_second_farm_waits_for_the_first_and_its_workers(
    tmp_path: Path, refs: dict[str, Any]
) -> None:
    out = tmp_path / "out"
    out.mkdir()
    # the test holds the folder as a running farm would, then as its live workers would
    lock = os.open(out / LOCK_NAME, os.O_RDWR | os.O_CREAT)
    fcntl.flock(lock, fcntl.LOCK_EX)
    os.write(lock, b"testhost:4242\n")
    workers = os.open(out / WORKERS_LOCK_NAME, os.O_RDONLY | os.O_CREAT)
    fcntl.flock(workers, fcntl.LOCK_SH)
    proc = subprocess.Popen([sys.executable, "-m", "globemill", "farm", *map(str, refs["a"]),
                             "-o", str(out), "--jobs", "2"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)  # fmt: skip
    try:
        assert proc.stderr is not None
        line = proc.stderr.readline()
        assert line == f"globemill: waiting for the farm testhost:4242 writing to {out}\n"
        assert sorted(os.listdir(out)) == [LOCK_NAME, WORKERS_LOCK_NAME]  # nothing written
        os.close(lock)
        line = proc.stderr.readline()
        assert "waiting for worker processes of an earlier farm" in line
        assert not (out / "farm.json").exists()
        os.close(workers)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == EXIT_OK, err
    for name in refs["names"]:
        assert same_world(name, out, refs["ref_a"])


def test_two_farms_at_once_into_one_folder(tmp_path: Path, refs: dict[str, Any]) -> None:
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "globemill", "farm", "-o", str(out), "--jobs", "1", "-q"]
    first = subprocess.Popen([*cmd, *map(str, refs["a"])], stderr=subprocess.PIPE, text=True)
    second = subprocess.Popen([*cmd, *map(str, refs["b"])], stderr=subprocess.PIPE, text=True)
    for proc in (first, second):
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == EXIT_OK, err
    # one ran after the other: the folder holds one whole version, and the last run's report
    # (every world baked, none taken from the other version) describes it
    version = "ref_a" if same_world("knoll_0", out, refs["ref_a"]) else "ref_b"
    for name in refs["names"]:
        assert same_world(name, out, refs[version])
    rows = json.loads((out / "farm.json").read_text())["worlds"]
    assert [w["status"] for w in rows] == ["baked"] * 3
    assert leftovers(out) == []


# --------------------------------------------------------------------------------------------
# estimates before long work


PEAK_MEMORY = """
import resource, subprocess, sys
subprocess.run([sys.executable, "-m", "globemill", "bake", *sys.argv[1:]], check=True)
print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024)  # Linux: KiB
"""


def test_estimates_against_measured_bakes(tmp_path: Path, refs: dict[str, Any]) -> None:
    # what the calibration claims: the file bytes are a low estimate, the memory a high one
    for spec_path in refs["a"]:
        spec = load_spec(spec_path)
        est = estimate_bake(spec, threads=1)
        files = sum((refs["ref_a"] / p.format(spec.name)).stat().st_size for p in OUTPUTS)
        assert 0 < est.output_bytes <= files
        assert est.features == 3 and not est.large
    spec = load_spec(refs["a"][2])
    res = subprocess.run(
        [sys.executable, "-c", PEAK_MEMORY, str(refs["a"][2]), "-o", str(tmp_path), "-q",
         "--threads", "1"], capture_output=True, text=True, check=True,
    )  # fmt: skip
    peak = int(res.stdout)  # the bake process's peak resident memory, measured by the kernel
    assert estimate_bake(spec, threads=1).memory_bytes >= peak


def test_a_bake_over_the_memory_limit_is_refused_before_it_starts(
    tmp_path: Path, refs: dict[str, Any]
) -> None:
    out = tmp_path / "out"
    res = run("bake", str(refs["a"][0]), "-o", str(out), "--max-memory", "0.01")
    assert res.returncode == EXIT_REFUSED
    line = one_error_line(res.stderr)
    assert "knoll_0: the bake would need about" in line
    assert "GB of memory" in line and "triangles estimated at 1 m" in line
    assert "more than the limit of 0.01 GB (--max-memory)" in line
    assert not out.exists()
    # the farm refuses that world alone, with the same figures
    res = run("farm", *map(str, refs["a"]), "-o", str(out), "--max-memory", "0.01", "-q")
    assert res.returncode == EXIT_REFUSED
    rows = json.loads((out / "farm.json").read_text())["worlds"]
    assert {(w["status"], w["error_kind"]) for w in rows} == {("failed", "refused")}
    assert not list(out.glob("*.glb"))
    res = run("bake", str(refs["a"][0]), "-o", str(out), "--max-memory", "-3")
    assert res.returncode == EXIT_BAD_INPUT and "--max-memory" in res.stderr


def test_a_bake_within_its_memory_takes_the_estimate_from_its_own_survey(
    tmp_path: Path,
    refs: dict[str, Any],
    monkeypatch: pytest.MonkeyPatch,
    capsys: pytest.CaptureFixture[str],
) -> None:
    # the budget survey is the refinement's first phase: when the spec's triangle budget fits
    # in the memory limit, the CLI checks the bake's own estimate (on_estimate) and runs no
    # second survey before it
    from globemill import _core

    farm_module = sys.modules["globemill.farm"]

    calls: list[int] = []
    real = _core.estimate_triangles

    def counted(*a: Any, **k: Any) -> int:
        calls.append(1)
        return int(real(*a, **k))

    monkeypatch.setattr(_core, "estimate_triangles", counted)
    monkeypatch.setattr(farm_module, "LARGE_SECONDS", 0.0)  # every estimate is printed
    spec_path = refs["a"][0]
    spec = load_spec(spec_path)
    code = cli_main(["bake", str(spec_path), "-o", str(tmp_path / "a"), "--max-memory", "1000"])
    assert code == EXIT_OK
    assert calls == []
    seen: list[int] = []
    bake(spec, on_estimate=seen.append)
    assert len(seen) == 1 and calls == []
    note = f"globemill: {estimate_from_triangles(spec, spec.tolerance_m, seen[0]).describe()}"
    assert note in capsys.readouterr().err.splitlines()
    # a limit below what the budget allows: the capped survey runs first and refuses (exit 5)
    # before any bake; its estimate is the bake's
    code = cli_main(["bake", str(spec_path), "-o", str(tmp_path / "b"), "--max-memory", "0.01"])
    assert code == EXIT_REFUSED and calls == [1] and not (tmp_path / "b").exists()
    assert estimate_bake(spec).triangles == seen[0]


def test_an_exception_in_on_estimate_stops_the_bake(refs: dict[str, Any]) -> None:
    spec = load_spec(refs["a"][0])

    class Enough(Exception):
        pass

    def refuse(triangles: int) -> None:
        raise Enough(triangles)

    with pytest.raises(Enough) as info:
        bake(spec, on_estimate=refuse)
    assert info.value.args[0] == estimate_bake(spec).triangles


def test_a_world_of_100000_features_shows_its_estimate_first(tmp_path: Path) -> None:
    rng = random.Random(SEED)
    hills = [
        {"kind": "hill", "lat_deg": rng.uniform(-80, 80), "lon_deg": rng.uniform(-180, 180),
         "amplitude_m": rng.uniform(0.005, 0.04), "sigma_m": rng.uniform(20.0, 60.0)}
        for _ in range(100_000)
    ]  # fmt: skip
    spec = tmp_path / "crowd.json"
    spec.write_text(json.dumps({"name": "crowd", "radius_m": 5000.0, "tolerance_m": 0.05,
                                "features": hills}))  # fmt: skip
    res = run("bake", str(spec), "-o", str(tmp_path / "out"), "--max-memory", "0.2")
    assert res.returncode == EXIT_REFUSED
    first = res.stderr.splitlines()[0]
    assert first.startswith("globemill: crowd: 100,000 features, about ")
    assert "estimated" in first and "GB of memory" in first
    assert "more than the limit of 0.20 GB" in one_error_line(res.stderr)
    assert not (tmp_path / "out").exists()
