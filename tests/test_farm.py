"""The build farm: a local pool and a real Dask cluster on loopback bake the same bytes as single
`globemill bake` runs; the content-hash cache skips unchanged worlds; failures stay local; dead
workers and Ctrl-C lose no work and leave no partial file."""

from __future__ import annotations

import contextlib
import hashlib
import importlib
import json
import os
import signal
import struct
import subprocess
import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import psutil
import pytest

from globemill.cli import main as cli_main
from globemill.farm import FarmError, WorldOutcome, collect_specs, farm, world_hash
from globemill.spec import load_spec, parse_spec

# the module itself (globemill.farm is also the function, re-exported by the package)
farm_module = importlib.import_module("globemill.farm")

NWORLDS = 6
OUTPUT_NAMES = ("{}.glb", "{}.collision.glb", "{}.report.json")


# --------------------------------------------------------------------------------------------
# small worlds of our own (each bakes in well under a second)


def small_world(i: int, *, name: str | None = None, tolerance_m: float | None = None) -> dict:
    """Island i: a hill, a crater, a mesa, a ridge, and noise on the odd ones."""
    features: list[dict[str, Any]] = [
        {
            "kind": "hill",
            "lat_deg": 10.0 + 7 * i,
            "lon_deg": -30.0 + 25 * i,
            "amplitude_m": 18.0 + 4 * i,
            "sigma_m": 45.0 + 5 * i,
        },
        {
            "kind": "crater",
            "lat_deg": -25.0,
            "lon_deg": 60.0 + 11 * i,
            "radius_m": 40.0,
            "depth_m": 8.0,
            "rim_height_m": 3.0,
            "rim_width_m": 15.0,
        },
        {
            "kind": "mesa",
            "blend": "max",
            "lat_deg": 40.0 - 5 * i,
            "lon_deg": 150.0,
            "height_m": 12.0,
            "radius_m": 35.0,
            "wall_width_m": 10.0,
        },
        {
            "kind": "ridge",
            "lat0_deg": -50.0,
            "lon0_deg": -120.0,
            "lat1_deg": -35.0 + i,
            "lon1_deg": -80.0,
            "height_m": 10.0,
            "half_width_m": 25.0,
        },
    ]
    if i % 2:
        features.append(
            {"kind": "noise", "amplitude_m": 1.0, "frequency_per_m": 0.01, "octaves": 2, "seed": i}
        )
    return {
        "name": name or f"isle_{i}",
        "radius_m": 300.0 + 60.0 * i,
        "tolerance_m": tolerance_m or 1.0 + 0.2 * i,
        "lod": {"levels": 2, "chunk_level": 0},
        "features": features,
    }


def write_specs(folder: Path, n: int = NWORLDS, **kw: Any) -> list[Path]:
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for i in range(n):
        spec = small_world(i, **kw)
        path = folder / f"{spec['name']}.json"
        path.write_text(json.dumps(spec, indent=2))
        paths.append(path)
    return paths


def single_bake(spec: Path, out: Path) -> None:
    """The reference: one `globemill bake` run (all cores, as a person would run it)."""
    assert cli_main(["bake", str(spec), "-o", str(out), "-q"]) == 0


@pytest.fixture(scope="module")
def worlds(tmp_path_factory: pytest.TempPathFactory) -> tuple[list[Path], Path]:
    """Six spec files and their outputs from single `globemill bake` runs."""
    root = tmp_path_factory.mktemp("farm_worlds")
    specs = write_specs(root / "specs")
    ref = root / "reference"
    for spec in specs:
        single_bake(spec, ref)
    return specs, ref


# --------------------------------------------------------------------------------------------
# reading outputs back


def glb_parts(data: bytes) -> tuple[dict[str, Any], bytes]:
    """The JSON and BIN chunks of a complete binary glTF file.

    glTF 2.0 spec, "GLB File Format Specification": a 12-byte header (magic "glTF", version 2,
    total length of the file), then chunks of (uint32 length, uint32 type, data), the first JSON,
    the second, optional, BIN. A truncated file fails the length check.
    """
    magic, version, length = struct.unpack_from("<4sII", data, 0)
    assert (magic, version, length) == (b"glTF", 2, len(data))
    pos, chunks = 12, {}
    while pos < len(data):
        size, kind = struct.unpack_from("<I4s", data, pos)
        chunks[kind] = data[pos + 8 : pos + 8 + size]
        pos += 8 + size
    assert pos == len(data)
    return json.loads(chunks[b"JSON"]), chunks.get(b"BIN\x00", b"")


def without_timings(obj: Any) -> Any:
    """`obj` without the keys that hold measured times (they differ from run to run)."""
    if isinstance(obj, dict):
        return {k: without_timings(v) for k, v in obj.items() if "seconds" not in k}
    if isinstance(obj, list):
        return [without_timings(v) for v in obj]
    return obj


def assert_same_outputs(name: str, got: Path, ref: Path) -> None:
    """The farm's outputs of `name` equal the single bake's: both .glb files byte for byte (the
    design's determinism: same spec, same bytes, whatever the thread count), the report up to
    its timings."""
    for pattern in ("{}.glb", "{}.collision.glb"):
        data = (got / pattern.format(name)).read_bytes()
        assert data == (ref / pattern.format(name)).read_bytes(), f"{pattern.format(name)} differs"
        glb_parts(data)
    report = json.loads((got / f"{name}.report.json").read_text())
    ref_report = json.loads((ref / f"{name}.report.json").read_text())
    assert without_timings(report) == without_timings(ref_report)


def assert_no_temporaries(out: Path) -> None:
    leftovers = [p.name for p in out.iterdir() if p.name.endswith(".tmp")]
    assert leftovers == []


def stat_outputs(out: Path, names: list[str]) -> dict[str, tuple[int, int]]:
    """(inode, mtime in ns) of every output: a rewrite, even an atomic one, changes both."""
    got = {}
    for name in names:
        for pattern in OUTPUT_NAMES:
            st = (out / pattern.format(name)).stat()
            got[pattern.format(name)] = (st.st_ino, st.st_mtime_ns)
    return got


def names_of(specs: list[Path]) -> list[str]:
    return [json.loads(p.read_text())["name"] for p in specs]


def pid_of(outcome: WorldOutcome) -> int:
    assert outcome.worker is not None
    return int(outcome.worker.rsplit(":", 1)[1])


# --------------------------------------------------------------------------------------------
# a Dask cluster on loopback


@dataclass
class LoopbackCluster:
    address: str
    scheduler: subprocess.Popen[bytes]
    workers: list[subprocess.Popen[bytes]]


def _stop(proc: subprocess.Popen[bytes]) -> None:
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=15)


@contextlib.contextmanager
def loopback_dask_cluster(
    workdir: Path, nworkers: int = 2, timeout: float = 90.0
) -> Iterator[LoopbackCluster]:
    """`dask scheduler` and `nworkers` single-threaded `dask worker` processes on 127.0.0.1.

    Ports are chosen by the operating system (port 0); the scheduler writes its address to a
    scheduler file, which is awaited. Workers run without a nanny, so a killed worker stays dead
    and its tasks must go elsewhere. Every process started here is stopped on exit, whatever
    happens; their output is in workdir/*.log.
    """
    from distributed import Client

    workdir.mkdir(parents=True, exist_ok=True)
    procs: list[subprocess.Popen[bytes]] = []
    logs = []

    def start(args: list[str], log_name: str) -> subprocess.Popen[bytes]:
        log = open(workdir / log_name, "wb")  # noqa: SIM115 - closed in the finally below
        logs.append(log)
        proc = subprocess.Popen(
            [sys.executable, "-m", "dask", *args],
            stdout=log,
            stderr=subprocess.STDOUT,
            stdin=subprocess.DEVNULL,
            cwd=workdir,
        )
        procs.append(proc)
        return proc

    def fail(what: str) -> None:
        text = "\n".join(
            f"--- {p.name}\n{p.read_text(errors='replace')[-3000:]}"
            for p in sorted(workdir.glob("*.log"))
        )
        raise RuntimeError(f"{what}\n{text}")

    try:
        sched_file = workdir / "scheduler.json"
        scheduler = start(
            [
                "scheduler",
                "--host",
                "127.0.0.1",
                "--port",
                "0",
                "--no-dashboard",
                "--scheduler-file",
                str(sched_file),
            ],
            "scheduler.log",
        )
        # the workers find the scheduler through its file, so all start at once
        workers = [
            start(
                [
                    "worker",
                    "--scheduler-file",
                    str(sched_file),
                    "--nthreads",
                    "1",
                    "--nworkers",
                    "1",
                    "--no-nanny",
                    "--no-dashboard",
                    "--host",
                    "127.0.0.1",
                    "--name",
                    f"w{i}",
                    "--local-directory",
                    str(workdir / f"w{i}"),
                ],
                f"worker{i}.log",
            )
            for i in range(nworkers)
        ]
        deadline = time.monotonic() + timeout
        address = None
        while address is None:
            if scheduler.poll() is not None:
                fail(f"dask scheduler exited with {scheduler.returncode}")
            if time.monotonic() > deadline:
                fail("dask scheduler did not write its scheduler file in time")
            with contextlib.suppress(OSError, ValueError, KeyError):
                address = json.loads(sched_file.read_text())["address"]
            time.sleep(0.05)
        with Client(address, timeout=timeout, set_as_default=False) as client:
            while len(client.scheduler_info()["workers"]) < nworkers:
                dead = [w for w in workers if w.poll() is not None]
                if dead:
                    fail(f"dask worker exited with {dead[0].returncode}")
                if time.monotonic() > deadline:
                    fail("dask workers did not connect in time")
                time.sleep(0.1)
        yield LoopbackCluster(address, scheduler, workers)
    finally:
        for proc in reversed(procs):
            _stop(proc)
        for log in logs:
            log.close()


# --------------------------------------------------------------------------------------------
# local pool


def test_local_pool_bakes_the_same_bytes_as_single_bakes(
    worlds: tuple[list[Path], Path], tmp_path: Path
) -> None:
    specs, ref = worlds
    out = tmp_path / "out"
    seen: list[str] = []
    summary = farm(specs, out, jobs=2, on_world=lambda w: seen.append(w.world))
    names = names_of(specs)
    assert summary.ok, summary.table()
    assert [w.world for w in summary.worlds] == names  # in the order given
    assert sorted(seen) == sorted(names)  # every world reported once as it finished
    assert all(w.status == "baked" and not w.cached for w in summary.worlds)
    for name, w in zip(names, summary.worlds, strict=True):
        assert_same_outputs(name, out, ref)
        report = json.loads((ref / f"{name}.report.json").read_text())
        assert w.triangles == report["lods"][0]["triangles"]
        assert w.collision_triangles == report["collision"]["triangles"]
    assert_no_temporaries(out)
    # farm.json holds the same as the returned summary
    on_disk = json.loads((out / "farm.json").read_text())
    assert on_disk["worlds"] == summary.to_dict()["worlds"]
    assert on_disk["counts"] == {"baked": NWORLDS, "cached": 0, "failed": 0, "interrupted": 0}
    # two bakes ran side by side, so in two processes
    assert len({w.worker for w in summary.worlds}) == 2


def test_second_run_is_cached_and_an_edit_rebakes_one_world(tmp_path: Path) -> None:
    specs = write_specs(tmp_path / "specs")
    names = names_of(specs)
    out = tmp_path / "out"
    first = farm(specs, out, jobs=2)
    assert first.counts()["baked"] == NWORLDS
    before = stat_outputs(out, names)

    second = farm(specs, out, jobs=2)
    assert [w.status for w in second.worlds] == ["cached"] * NWORLDS
    assert all(w.cached and w.seconds == 0.0 for w in second.worlds)
    # cached rows still carry the counts of the bake that made the files
    assert [w.triangles for w in second.worlds] == [w.triangles for w in first.worlds]
    assert stat_outputs(out, names) == before  # not one file rewritten

    # edit one world: only it is baked again, and it matches a single bake of the new spec
    edited = json.loads(specs[3].read_text())
    edited["features"][0]["amplitude_m"] += 7.0
    specs[3].write_text(json.dumps(edited))
    third = farm(tmp_path / "specs", out, jobs=2)  # a folder this time: same worlds
    assert [w.status for w in third.worlds] == [
        "baked" if i == 3 else "cached" for i in range(NWORLDS)
    ]
    after = stat_outputs(out, names)
    changed = sorted(k for k in after if after[k] != before[k])
    assert changed == sorted(p.format(names[3]) for p in OUTPUT_NAMES)
    ref = tmp_path / "ref"
    single_bake(specs[3], ref)
    assert_same_outputs(names[3], out, ref)

    # a deleted or truncated output is noticed: that world is baked again
    (out / f"{names[1]}.collision.glb").unlink()
    with open(out / f"{names[2]}.glb", "r+b") as fh:
        fh.truncate(100)
    fourth = farm(specs, out, jobs=2)
    assert [w.world for w in fourth.worlds if w.status == "baked"] == [names[1], names[2]]
    glb_parts((out / f"{names[2]}.glb").read_bytes())


def test_equivalent_specs_hash_the_same_and_options_change_it(tmp_path: Path) -> None:
    toml = tmp_path / "a.toml"
    toml.write_text(
        "# the same world as b.json, written differently\n"
        'tolerance_m = 2\nname = "twin"\nradius_m = 400\n'
        '[[features]]\nsigma_m = 50\namplitude_m = 20\nlon_deg = 5\nlat_deg = 10\nkind = "hill"\n'
    )
    js = tmp_path / "b.json"
    js.write_text(
        json.dumps(
            {
                "name": "twin",
                "radius_m": 400.0,
                "tolerance_m": 2.0,
                "offset": "normal",  # the default, spelled out
                "features": [
                    {
                        "kind": "hill",
                        "lat_deg": 10.0,
                        "lon_deg": 5.0,
                        "amplitude_m": 20.0,
                        "sigma_m": 50.0,
                    }
                ],
            }
        )
    )
    a, b = load_spec(toml), load_spec(js)
    assert world_hash(a) == world_hash(b)
    # SHA-256 hex digests are 64 hex digits (FIPS 180-4)
    assert len(world_hash(a)) == 64 and int(world_hash(a), 16) >= 0
    # an override equal to the spec's own value is the same bake
    assert world_hash(a, tolerance_m=2.0, offset="normal") == world_hash(a)
    assert world_hash(a, tolerance_m=1.5) != world_hash(a)
    assert world_hash(a, offset="exact") != world_hash(a)
    # so do the level table's overrides, each one, unless equal to the spec's own value
    lod = a.lod
    same = {"levels": lod.levels, "ratio": lod.ratio, "chunk_level": lod.chunk_level}
    assert world_hash(a, **same, seams=lod.seams, collision=True) == world_hash(a)
    changed = [
        {"levels": lod.levels + 1},
        {"ratio": lod.ratio + 1},
        {"chunk_level": lod.chunk_level + 1},
        {"seams": "skirt" if lod.seams == "stitch" else "stitch"},
        {"collision": False},
    ]
    hashes = {world_hash(a, **kw) for kw in changed}
    assert len(hashes) == len(changed) and world_hash(a) not in hashes
    moved = parse_spec({**b.model_dump(mode="json"), "radius_m": 401.0})
    assert world_hash(moved) != world_hash(a)
    h = world_hash(a)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(farm_module, "__version__", "99.0.0")
        assert world_hash(a) != h

    # so a farm over the TOML file finds the bake made from the JSON file up to date
    out = tmp_path / "out"
    assert farm([js], out, jobs=1).worlds[0].status == "baked"
    assert farm([toml], out, jobs=1).worlds[0].status == "cached"
    # and a different tolerance bakes again
    assert farm([toml], out, jobs=1, tolerance_m=3.0).worlds[0].status == "baked"


def test_broken_specs_are_reported_and_the_rest_bake(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    specs = write_specs(tmp_path / "specs", n=3)
    bad_value = tmp_path / "specs" / "bad_value.json"
    world = small_world(3, name="bad_value")
    world["features"][0]["sigma_m"] = -1.0
    bad_value.write_text(json.dumps(world))
    malformed = tmp_path / "specs" / "malformed.toml"
    malformed.write_text('name = "malformed"\nradius_m = = 400\n')
    same_name = tmp_path / "specs" / "zz_same_name.json"
    same_name.write_text(json.dumps(small_world(5, name="isle_0")))
    # valid, but 20 * 4 chunks exceed its triangle budget: the bake itself refuses it
    too_big = tmp_path / "specs" / "too_big.json"
    too_big.write_text(
        json.dumps({**small_world(4, name="too_big"), "max_triangles": 40, "lod": {}})
    )
    out = tmp_path / "out"
    code = cli_main(["farm", str(tmp_path / "specs"), "-o", str(out), "--jobs", "2"])
    cap = capsys.readouterr()
    assert code == 3  # a bake failed (as `globemill bake`: 3 = the bake could not be done)
    rows = {
        Path(w["source"]).name: w for w in json.loads((out / "farm.json").read_text())["worlds"]
    }
    assert {k: v["status"] for k, v in rows.items()} == {
        "bad_value.json": "failed",
        "isle_0.json": "baked",
        "isle_1.json": "baked",
        "isle_2.json": "baked",
        "malformed.toml": "failed",
        "too_big.json": "failed",
        "zz_same_name.json": "failed",
    }
    assert "features[0].sigma_m: must be > 0" in rows["bad_value.json"]["error"]
    assert "malformed TOML at line 2" in rows["malformed.toml"]["error"]
    assert "isle_0" in rows["zz_same_name.json"]["error"]
    assert "also used by" in rows["zz_same_name.json"]["error"]
    assert "max_triangles" in rows["too_big.json"]["error"]
    assert rows["too_big.json"]["error_kind"] == "bake"
    # every error is on stderr, naming its file; the table lists every world
    for name in ("bad_value.json", "malformed.toml", "zz_same_name.json", "too_big.json"):
        assert name in cap.err
    for name in ("isle_0", "isle_1", "isle_2", "bad_value", "malformed", "too_big"):
        assert name in cap.out
    # the good worlds are complete, the broken ones wrote nothing
    for name in ("isle_0", "isle_1", "isle_2"):
        for pattern in OUTPUT_NAMES:
            assert (out / pattern.format(name)).is_file()
    assert not list(out.glob("bad_value*")) and not list(out.glob("too_big*"))
    # the first isle_0 (isle_0.json) won: its outputs are the ones of that spec
    ref = tmp_path / "ref"
    single_bake(specs[0], ref)
    assert_same_outputs("isle_0", out, ref)

    # only bad specs left failing: exit 2, as `globemill bake` for bad input
    code = cli_main(["farm", *map(str, specs), str(bad_value), "-o", str(out), "-q"])
    assert code == 2
    assert "sigma_m" in capsys.readouterr().err


def test_collect_specs_files_folders_and_globs(tmp_path: Path) -> None:
    specs = write_specs(tmp_path / "specs", n=3)
    (tmp_path / "specs" / "notes.txt").write_text("not a spec")
    (tmp_path / "specs" / "isle_0.report.json").write_text("{}")  # an output, not a spec
    (tmp_path / "specs" / "farm.json").write_text("{}")
    sub = tmp_path / "specs" / "more"
    write_specs(sub, n=1, name="deep")
    got = collect_specs(
        [
            tmp_path / "specs",
            str(specs[1]),  # again: listed once
            str(tmp_path / "**" / "deep.json"),
            str(tmp_path / "nothing*.toml"),
        ],
        tmp_path / "specs",
    )
    assert [Path(i.source).name for i in got if i.error is None] == [
        "isle_0.json",
        "isle_1.json",
        "isle_2.json",
        "deep.json",
    ]
    errors = [i.error for i in got if i.error is not None]
    assert len(errors) == 1 and "nothing*.toml" in errors[0]

    with pytest.raises(FarmError, match="no world specs"):
        farm([], tmp_path / "out")
    with pytest.raises(ValueError, match="jobs"):
        farm(specs, tmp_path / "out", jobs=0)


def test_dask_is_optional_and_named_when_missing(tmp_path: Path) -> None:
    specs = write_specs(tmp_path / "specs", n=1)
    with pytest.MonkeyPatch.context() as mp:
        mp.setitem(sys.modules, "distributed", None)  # makes `import distributed` fail
        with pytest.raises(FarmError, match=r"globemill\[farm\]"):
            farm(specs, tmp_path / "out", scheduler="tcp://127.0.0.1:1")
    # nothing was baked, and the summary says why
    row = json.loads((tmp_path / "out" / "farm.json").read_text())["worlds"][0]
    assert row["status"] == "failed"
    assert not (tmp_path / "out" / "isle_0.glb").exists()
    # an address that is not one is refused at once, naming it
    with pytest.raises(FarmError, match="nowhere"):
        farm(specs, tmp_path / "out", scheduler="nowhere")


def test_a_killed_local_worker_loses_no_world(
    worlds: tuple[list[Path], Path], tmp_path: Path
) -> None:
    specs, ref = worlds
    out = tmp_path / "out"
    killed: list[int] = []

    def kill_first_worker(w: WorldOutcome) -> None:
        if not killed and w.status == "baked":
            pid = pid_of(w)
            # a pool worker of this test's farm (a child of the pool's fork server)
            assert pid in {p.pid for p in psutil.Process().children(recursive=True)}
            os.kill(pid, signal.SIGKILL)
            killed.append(pid)

    summary = farm(specs, out, jobs=2, threads=1, on_world=kill_first_worker)
    assert killed
    assert summary.ok, summary.table()
    # some world was lost with the pool and baked again
    assert max(w.attempts for w in summary.worlds) == 2
    for name in names_of(specs):
        assert_same_outputs(name, out, ref)
    assert_no_temporaries(out)


def test_ctrl_c_stops_cleanly(tmp_path: Path) -> None:
    specs = write_specs(tmp_path / "specs", n=6, tolerance_m=0.7)
    out = tmp_path / "out"
    records = out / ".globemill-cache"
    proc = subprocess.Popen(
        [sys.executable, "-m", "globemill", "farm", *map(str, specs), "-o", str(out)]
        + ["--jobs", "2", "--threads", "1"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    try:
        deadline = time.monotonic() + 60
        while not (records.is_dir() and list(records.glob("[!.]*.json"))):  # one world done
            assert proc.poll() is None, proc.communicate()
            assert time.monotonic() < deadline
            time.sleep(0.01)
        family = psutil.Process(proc.pid).children(recursive=True)  # pool, fork server, ...
        assert family
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, err
    assert "interrupted" in err
    _, alive = psutil.wait_procs(family, timeout=15)
    assert alive == []  # no worker process outlives the farm
    summary = json.loads((out / "farm.json").read_text())
    statuses = [w["status"] for w in summary["worlds"]]
    assert summary["interrupted"] is True
    assert "baked" in statuses and "interrupted" in statuses
    assert set(statuses) <= {"baked", "interrupted"}
    assert_no_temporaries(out)
    # what is there is whole: every .glb parses to its full length, every report is JSON, and a
    # baked world has its cache record and all three outputs
    for glb in out.glob("*.glb"):
        glb_parts(glb.read_bytes())
    for rep in out.glob("*.report.json"):
        json.loads(rep.read_text())
    for w in summary["worlds"]:
        if w["status"] == "baked":
            assert (records / f"{w['world']}.json").is_file()
            assert all((out / p.format(w["world"])).is_file() for p in OUTPUT_NAMES)
    # and the next run bakes only what is missing
    again = farm(specs, out, jobs=2)
    assert [w.status for w in again.worlds] == [
        "cached" if s == "baked" else "baked" for s in statuses
    ]


# --------------------------------------------------------------------------------------------
# Dask cluster


def test_dask_cluster_with_a_killed_worker(worlds: tuple[list[Path], Path], tmp_path: Path) -> None:
    from distributed import Client

    specs, ref = worlds
    out = tmp_path / "out"
    with loopback_dask_cluster(tmp_path / "cluster", nworkers=2) as cluster:
        with Client(cluster.address, timeout=60, set_as_default=False) as client:
            by_pid = {pid: addr for addr, pid in client.run(os.getpid).items()}
            pids = {w.pid for w in cluster.workers}
            assert set(by_pid) == pids
            killed: dict[str, Any] = {}

            def kill_busy_worker(w: WorldOutcome) -> None:
                # after the first world, SIGKILL a worker that holds tasks (running or next)
                if killed or w.status != "baked":
                    return
                for pid in sorted(pids, key=lambda p: p != pid_of(w)):
                    held = client.processing(workers=[by_pid[pid]])[by_pid[pid]]
                    if held:
                        os.kill(pid, signal.SIGKILL)
                        killed.update(pid=pid, keys=list(held))
                        return

            summary = farm(specs, out, scheduler=cluster.address, on_world=kill_busy_worker)
            victim = next(p for p in cluster.workers if p.pid == killed.get("pid"))
            assert victim.wait(timeout=15) == -signal.SIGKILL
            survivor = next(p for p in cluster.workers if p.pid != victim.pid)
            assert survivor.poll() is None
    assert summary.ok, summary.table()
    assert summary.backend == "dask"
    # the worlds the dead worker held were baked elsewhere
    names = names_of(specs)
    held = {n for n in names if any(f"-{n}-" in str(k) for k in killed["keys"])}
    assert held
    rows = {w.world: w for w in summary.worlds}
    assert any(pid_of(rows[n]) == survivor.pid for n in held)
    for name in names:
        assert rows[name].status == "baked"
        assert_same_outputs(name, out, ref)
    assert_no_temporaries(out)
    # every process the cluster started has stopped
    assert all(p.poll() is not None for p in [cluster.scheduler, *cluster.workers])


def test_cache_key_is_sha256_of_the_canonical_document() -> None:
    # the cache key is a SHA-256 of the canonical spec text (hashlib, FIPS 180-4): recompute it
    spec = parse_spec(small_world(0))
    # small_world(0) sets lod.levels 2 and chunk_level 0; ratio and seams are the defaults
    options = {"tolerance_m": 1.0, "offset": "normal", "levels": 2, "ratio": 2.0}
    options.update(chunk_level=0, seams="stitch", collision=True)
    doc = {
        "format": farm_module.CACHE_FORMAT,
        "globemill": farm_module.__version__,
        "options": options,
        "spec": spec.model_dump(mode="json"),
    }
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert world_hash(spec) == hashlib.sha256(text.encode()).hexdigest()


# ---- the level table's flags ----------------------------------------------------------------


def test_farm_takes_the_level_flags_of_bake_and_a_change_rebakes(tmp_path: Path) -> None:
    specs = write_specs(tmp_path / "specs", n=2)  # each spec says lod.levels 2, chunk_level 0
    names = names_of(specs)
    out, ref = tmp_path / "out", tmp_path / "ref"
    flags = ["--levels", "3", "--ratio", "3", "--chunk-level", "1", "--seams", "skirt"]
    flags.append("--no-collision")
    assert cli_main(["farm", *map(str, specs), "-o", str(out), "-q", *flags]) == 0
    for spec, name in zip(specs, names, strict=True):
        # the reference: `globemill bake` with the same flags, run on its own
        assert cli_main(["bake", str(spec), "-o", str(ref), "-q", *flags]) == 0
        assert (out / f"{name}.glb").read_bytes() == (ref / f"{name}.glb").read_bytes()
        report = json.loads((out / f"{name}.report.json").read_text())
        tol = json.loads(spec.read_text())["tolerance_m"]
        # 20 * 4^c chunks (docs/lod.md); level k's tolerance is tolerance_m * ratio^k
        assert [lv["chunks"] for lv in report["lods"]] == [80, 80, 80]
        assert [lv["tolerance_m"] for lv in report["lods"]] == pytest.approx(
            [tol, 3 * tol, 9 * tol], rel=1e-12
        )
        assert report["seams"] == "skirt" and report["collision"] is None
        assert not (out / f"{name}.collision.glb").exists()
    rows = json.loads((out / "farm.json").read_text())["worlds"]
    assert [(r["status"], r["collision_triangles"]) for r in rows] == [("baked", None)] * 2
    assert all("collision" not in r["outputs"] for r in rows)

    # the same flags again: cached; a changed flag: every world baked again, as it now says
    again = farm(specs, out, jobs=1, levels=3, ratio=3, chunk_level=1, seams="skirt",
                 collision=False)  # fmt: skip
    assert [w.status for w in again.worlds] == ["cached", "cached"]
    two = farm(specs, out, jobs=1, levels=2, ratio=3, chunk_level=1, seams="skirt",
               collision=False)  # fmt: skip
    assert [w.status for w in two.worlds] == ["baked", "baked"]
    for name in names:
        report = json.loads((out / f"{name}.report.json").read_text())
        assert len(report["lods"]) == 2
    # no flags: the specs' own table, colliders back on
    plain = farm(specs, out, jobs=1)
    assert [w.status for w in plain.worlds] == ["baked", "baked"]
    for name in names:
        report = json.loads((out / f"{name}.report.json").read_text())
        assert [lv["chunks"] for lv in report["lods"]] == [20, 20]
        assert report["collision"]["triangles"] > 0
        glb_parts((out / f"{name}.collision.glb").read_bytes())


@pytest.mark.parametrize(
    ("option", "needle"),
    [
        ({"levels": 0}, "levels: must be an integer in 1..12, got 0"),
        ({"ratio": 1.0}, "ratio: must be > 1 and <= 16, got 1"),
        ({"chunk_level": 6}, "chunk_level: must be an integer in 0..5, got 6"),
        ({"seams": "weld"}, "seams: must be one of stitch, skirt, got 'weld'"),
        ({"levels": 2.5}, "levels: must be an integer, got 2.5"),
    ],
)
def test_bad_level_options_are_refused_before_anything_is_written(
    tmp_path: Path, option: dict[str, Any], needle: str
) -> None:
    specs = write_specs(tmp_path / "specs", n=1)
    out = tmp_path / "out"
    with pytest.raises(ValueError) as exc:
        farm(specs, out, jobs=1, **option)
    assert needle in str(exc.value)
    assert not out.exists()


def test_the_estimate_follows_the_chunk_level_override() -> None:
    from globemill.farm import estimate_bake

    spec = parse_spec(small_world(0, tolerance_m=20.0))  # coarse: few triangles on its own
    coarse = estimate_bake(spec, threads=1)
    # every one of the 20 * 4^c chunks is meshed on its own (docs/lod.md), so at chunk level 4
    # the finest level has at least 20 * 4^4 = 5120 triangles, whatever the tolerance allows
    fine = estimate_bake(spec, threads=1, chunk_level=4)
    assert coarse.triangles < 20 * 4**4 <= fine.triangles
    assert fine.memory_bytes > coarse.memory_bytes
    assert estimate_bake(spec, threads=1, chunk_level=spec.lod.chunk_level) == coarse


# ---- per-world progress --------------------------------------------------------------------------


def test_a_running_bake_leaves_its_progress_for_the_farm_bar(tmp_path: Path) -> None:
    import globemill
    from globemill.farm import _progress_file, read_progress
    from globemill.output import write_outputs

    path = str(tmp_path / "7.progress")
    seen: list[tuple[float, str]] = []
    prog = _progress_file(path)

    def spy(stage: str, done: int, total: int) -> None:
        prog(stage, done, total)
        got = read_progress(path)
        if got is not None:
            seen.append(got)

    spec = globemill.load_spec(Path(__file__).resolve().parents[1] / "examples" / "pebblemoor.toml")
    result = globemill.bake(spec, tolerance_m=6.0, progress=spy)
    write_outputs(result, tmp_path / "out", progress=spy)
    fractions = [f for f, _ in seen]
    assert fractions == sorted(fractions) and fractions[-1] == 1.0
    assert len(set(fractions)) > 5  # it moved through the bake, not only at the end
    assert seen[-1][1].startswith("write")
    assert read_progress(str(tmp_path / "missing.progress")) is None


def test_the_farm_bar_is_told_how_far_running_bakes_are(tmp_path: Path) -> None:
    import threading
    from concurrent.futures import ThreadPoolExecutor

    farm_module = importlib.import_module("globemill.farm")

    release = threading.Event()
    ticks: list[dict[int, tuple[float, str]]] = []

    def slow_bake() -> str:
        (tmp_path / f"3{farm_module.PROGRESS_SUFFIX}").write_text("0.4000 verify 10/25 triangles")
        release.wait(60)
        return "done"

    def tick(running: dict[int, tuple[float, str]]) -> None:
        ticks.append(running)
        if running:
            release.set()

    job = farm_module._Job(index=3, name="knoll", digest="", task={})
    with ThreadPoolExecutor(1) as pool:
        fut = pool.submit(slow_bake)
        done = list(farm_module._completed({fut: job}, str(tmp_path), tick))
    assert done == [fut] and fut.result() == "done"
    assert {3: (0.4, "verify 10/25 triangles")} in ticks


def assert_progress_per_world(calls: list[Any], names: list[str], caller: int) -> None:
    """Each world's WorldProgress calls: on the farm's thread, fractions in 0..1 that never go
    back, the stages in the bake's order (globemill.progress.ORDER), one that came while the
    bake ran, and a last call "done" at 1.0."""
    from globemill.progress import ORDER

    assert {thread for thread, _ in calls} == {caller}
    by_world: dict[str, list[Any]] = {}
    for _, p in calls:
        by_world.setdefault(p.world, []).append(p)
    assert sorted(by_world) == sorted(names)
    for name, seq in by_world.items():
        fractions = [p.fraction for p in seq]
        assert fractions == sorted(fractions) and 0.0 <= fractions[0], (name, fractions)
        assert seq[-1].fraction == 1.0 and seq[-1].stage == "done", (name, seq[-1])
        assert [p.stage for p in seq].count("done") == 1
        assert any(0.0 < f < 1.0 for f in fractions), (name, fractions)
        stages = [ORDER.index(p.stage.split(" ")[0]) for p in seq[:-1]]
        assert stages == sorted(stages), (name, [p.stage for p in seq])


def test_on_progress_follows_each_local_world_to_the_end(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import threading

    # look at the running bakes often, so that even these small ones are seen under way
    monkeypatch.setattr(farm_module, "TICK_SECONDS", 0.02)
    specs = write_specs(tmp_path / "specs", n=2)
    calls: list[tuple[int, Any]] = []
    summary = farm(
        specs,
        tmp_path / "out",
        jobs=2,
        on_progress=lambda p: calls.append((threading.get_ident(), p)),
    )
    assert summary.ok, summary.table()
    assert_progress_per_world(calls, names_of(specs), threading.get_ident())
    assert {p.source for _, p in calls} == {str(p) for p in specs}
    # a second run finds both cached: no bake, no progress
    calls.clear()
    assert [w.status for w in farm(specs, tmp_path / "out", on_progress=calls.append).worlds] == [
        "cached",
        "cached",
    ]
    assert calls == []


def test_on_progress_from_dask_workers_through_events(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import threading

    monkeypatch.setattr(farm_module, "TICK_SECONDS", 0.02)
    specs = write_specs(tmp_path / "specs", n=2)
    calls: list[tuple[int, Any]] = []
    with loopback_dask_cluster(tmp_path / "cluster", nworkers=2) as cluster:
        summary = farm(
            specs,
            tmp_path / "out",
            scheduler=cluster.address,
            on_progress=lambda p: calls.append((threading.get_ident(), p)),
        )
    assert summary.ok and summary.backend == "dask", summary.table()
    assert_progress_per_world(calls, names_of(specs), threading.get_ident())
