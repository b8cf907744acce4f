"""The build farm: bake every world of a game, on this machine or on a Dask cluster, incrementally.

``farm(specs, outdir)`` bakes each world spec into ``outdir`` exactly as ``globemill bake`` does
(``<name>.glb``, ``<name>.collision.glb``, ``<name>.report.json``, written atomically), then writes
``outdir/farm.json``, a summary with one row per world.

- Where: a local process pool by default (``jobs`` processes); with ``scheduler="tcp://host:port"``
  the same tasks go to an existing Dask distributed cluster (the ``farm`` extra:
  ``pip install 'globemill[farm]'``). Dask workers write the outputs themselves, so ``outdir``
  must be a folder every worker sees at the same path (a shared filesystem).
- Incremental: a world's content hash covers its canonical spec (``model_dump(mode="json")``
  serialised with sorted keys), the bake options that change the output (tolerance, offset,
  levels, ratio, chunk level, seams, colliders on or off) and the globemill version. A world is
  skipped and reported as cached only when its cache record,
  ``outdir/.globemill-cache/<name>.json``, holds the same hash and every output it lists holds
  the bytes whose SHA-256 was recorded when they were written (sizes alone would take a bake of
  a spec with one color changed as current). The record is removed before a world is re-baked
  and written (atomically) only after its outputs are in place and checked, so a crash in
  between only costs a re-bake.
- One farm per folder: a farm holds ``outdir/.globemill-farm.lock`` (flock) while it runs; a
  second farm into the same folder waits, then also waits until every local worker process of
  the first has exited (they hold ``.globemill-workers.lock`` shared). Then it finishes output
  sets a killed process left half renamed and removes temporary files that no live process
  holds.
- A farm that dies takes its workers with it: each local worker watches the farm process (a
  pidfd on Linux) and ends itself with SIGTERM when it is gone, and asks for SIGTERM on its
  parent's death (prctl PR_SET_PDEATHSIG). SIGTERM to the farm stops it like Ctrl-C
  (FarmTerminated).
- Failures stay local: an unreadable or invalid spec, a duplicate world name, a world whose
  estimated memory exceeds the limit, a failed bake or a failed write is reported for that world
  with its error (the file named) while every other world still bakes. A Dask worker that
  dies mid-bake has its task rescheduled on another worker by the scheduler (up to the cluster's
  ``distributed.scheduler.allowed-failures``); a local worker process that dies breaks its pool, so
  the pool is restarted and the unfinished worlds are baked again, the ones that were running at
  the time each on its own, until one kills its process twice and is reported as failed.
- Progress per world: each bake reports its stages (refine, verify, levels, seams, chunks,
  colliders, write) as one fraction of the whole (globemill.progress.BakeProgress). A local
  worker keeps it in a file beside its job marker, which the farm reads about twice a second; a
  Dask worker sends it as Dask events (``Worker.log_event`` under the topic
  ``globemill-progress-<run>``, which the client subscribes to). The bar (``progress=True``)
  counts finished worlds whole and running ones by their fraction, naming each running world's
  percentage and stage; ``on_progress`` gets the same as WorldProgress values.
- Before the work: the output folder is probe-written (an unwritable one raises WriteError, and
  each bake checks the free space against its estimated files before it refines), and a world
  whose triangle budget (`max_triangles`) could need more memory than the limit is estimated from
  its spec (estimate_bake) and refused when over it; every other world takes its estimate from its
  own bake's budget survey (`bake(on_estimate=)`), so no survey runs twice.
- Ctrl-C (KeyboardInterrupt) stops cleanly: queued worlds are cancelled, local worker processes are
  terminated, finished worlds keep their outputs and cache records, temporary files of this run's
  worlds are removed, ``farm.json`` records the unfinished worlds as interrupted, and the
  KeyboardInterrupt is raised again. Bakes already running on a Dask cluster cannot be stopped
  from the client; they finish and replace their outputs atomically, uncached.
"""

from __future__ import annotations

import contextlib
import ctypes
import glob
import hashlib
import json
import math
import multiprocessing
import os
import queue
import signal
import socket
import sys
import tempfile
import threading
import time
import uuid
from collections.abc import Callable, Iterable, Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from . import __version__
from ._atomic import (
    WriteError,
    finish_interrupted_sets,
    probe_folder,
    recorded,
    sweep_temporaries,
    write_files_atomically,
)
from .bake import check_overrides
from .provenance import canonical_spec
from .spec import SpecError, WorldSpec, load_spec, parse_spec

try:
    import fcntl
except ImportError:  # not POSIX: farms into one folder are not kept apart
    fcntl = None  # type: ignore[assignment]

__all__ = [
    "CACHE_DIR",
    "SUMMARY_NAME",
    "BakeEstimate",
    "FarmError",
    "FarmSummary",
    "FarmTerminated",
    "MemoryLimitError",
    "WorldOutcome",
    "WorldProgress",
    "available_memory",
    "canonical_spec",
    "collect_specs",
    "estimate_bake",
    "farm",
    "world_hash",
]

SUMMARY_NAME = "farm.json"
CACHE_DIR = ".globemill-cache"
# bump when the cache record or the hashed document changes shape (2: files named by sha256;
# 3: the options hold the level table: levels, ratio, chunk_level, seams, collision)
CACHE_FORMAT = 3
# held by the farm writing into a folder, and (shared) by its local worker processes
LOCK_NAME = ".globemill-farm.lock"
WORKERS_LOCK_NAME = ".globemill-workers.lock"
SPEC_SUFFIXES = (".toml", ".json")
OUTPUT_SUFFIXES = {"glb": ".glb", "collision": ".collision.glb", "report": ".report.json"}
# a local world is reported as failed after its worker process died this often while it ran alone
LOCAL_DEATHS = 2
# pool restarts in a row without any bake having started before the remaining worlds are failed
LOCAL_STALLS = 3
CONNECT_TIMEOUT_S = 20.0

Spec = str | os.PathLike[str] | WorldSpec
OnWorld = Callable[["WorldOutcome"], None]
OnProgress = Callable[["WorldProgress"], None]


class FarmError(RuntimeError):
    """The farm cannot run at all: no specs, Dask missing, scheduler unreachable."""


class FarmTerminated(KeyboardInterrupt):
    """SIGTERM reached the farm: it stopped as cleanly as for Ctrl-C."""


class MemoryLimitError(RuntimeError):
    """A bake's estimate exceeds the memory it may use; the message gives the figures."""


# --------------------------------------------------------------------------------------------
# results


@dataclass
class WorldOutcome:
    """One world of a farm run.

    status : "baked", "cached", "failed" or "interrupted"
    world : the spec's name, or the file's stem when the spec could not be read
    triangles, collision_triangles : level 0 and collider triangle counts (None when failed)
    seconds : time spent on the world in this run (a cached world: 0)
    error_kind : "input" (spec unreadable, invalid, duplicate name) or "bake"; None when fine
    attempts : bakes started for it in this run (local pool; Dask retries are the scheduler's)
    worker : "host:pid" of the process that baked it
    outputs : {"glb" | "collision" | "report": file name inside the output folder}
    """

    world: str
    source: str
    status: str
    cached: bool = False
    triangles: int | None = None
    collision_triangles: int | None = None
    seconds: float = 0.0
    hash: str | None = None
    error: str | None = None
    error_kind: str | None = None
    attempts: int = 0
    worker: str | None = None
    outputs: dict[str, str] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return self.status in ("baked", "cached")


@dataclass(frozen=True)
class WorldProgress:
    """How far the bake of one world in a farm run has come (farm's on_progress payload).

    world : the spec's name; source : where the spec came from (as WorldOutcome.source)
    fraction : 0..1 of the world's bake and write, every stage weighted by its measured share
        of a bake's time (globemill.progress.STAGES); it never decreases for a world in a run
    stage : what the bake is doing, in its own unit, e.g. "verify 81,920/163,840 triangles
        measured" (as `globemill bake`'s bar shows it); "done" on the last call, when the world's
        outputs and cache record are written (fraction 1.0)
    """

    world: str
    source: str
    fraction: float
    stage: str


@dataclass
class FarmSummary:
    """Every world of a farm run, in the order the specs were given."""

    outdir: Path
    backend: str
    workers: int | None
    scheduler: str | None
    worlds: list[WorldOutcome]
    seconds_total: float
    started: str
    interrupted: bool = False

    @property
    def ok(self) -> bool:
        """True when every world was baked or found cached."""
        return not self.interrupted and all(w.ok for w in self.worlds)

    @property
    def failed(self) -> list[WorldOutcome]:
        return [w for w in self.worlds if w.status == "failed"]

    def counts(self) -> dict[str, int]:
        out = {"baked": 0, "cached": 0, "failed": 0, "interrupted": 0}
        for w in self.worlds:
            out[w.status] += 1
        return out

    def to_dict(self) -> dict[str, Any]:
        return {
            "globemill": __version__,
            "outdir": str(self.outdir),
            "backend": self.backend,
            "workers": self.workers,
            "scheduler": self.scheduler,
            "started": self.started,
            "seconds_total": self.seconds_total,
            "interrupted": self.interrupted,
            "ok": self.ok,
            "counts": self.counts(),
            "worlds": [asdict(w) for w in self.worlds],
        }

    def table(self) -> str:
        """World, status, triangles, seconds and cached, one row per world, and a total line."""
        rows = [("world", "status", "triangles", "seconds", "cached")]
        for w in self.worlds:
            tris = "" if w.triangles is None else f"{w.triangles:,}"
            rows.append((w.world, w.status, tris, f"{w.seconds:.2f}", "yes" if w.cached else "no"))
        widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
        right = (False, False, True, True, False)
        lines = []
        for r in rows:
            cells = [
                c.rjust(wd) if rj else c.ljust(wd)
                for c, wd, rj in zip(r, widths, right, strict=True)
            ]
            lines.append("  ".join(cells).rstrip())
        counts = ", ".join(f"{n} {k}" for k, n in self.counts().items() if n)
        if self.backend == "dask":
            where = f"Dask cluster at {self.scheduler}"
            if self.workers is not None:
                where += f", {self.workers} worker{'s' if self.workers != 1 else ''}"
        elif self.workers:
            where = f"local pool of {self.workers} process{'es' if self.workers != 1 else ''}"
        else:
            where = "nothing to bake"
        lines.append(f"{counts} in {self.seconds_total:.2f} s ({where})")
        return "\n".join(lines)


# --------------------------------------------------------------------------------------------
# hashing


def bake_options(
    spec: WorldSpec,
    *,
    tolerance_m: float | None = None,
    offset: str | None = None,
    levels: int | None = None,
    ratio: float | None = None,
    chunk_level: int | None = None,
    seams: str | None = None,
    collision: bool = True,
) -> dict[str, Any]:
    """The options of a farm bake that change its output, resolved against the spec (an override
    equal to the spec's own value hashes the same as no override). Threads do not change it."""
    lod = spec.lod
    return {
        "tolerance_m": float(spec.tolerance_m if tolerance_m is None else tolerance_m),
        "offset": spec.offset if offset is None else offset,
        "levels": int(lod.levels if levels is None else levels),
        "ratio": float(lod.ratio if ratio is None else ratio),
        "chunk_level": int(lod.chunk_level if chunk_level is None else chunk_level),
        "seams": lod.seams if seams is None else seams,
        "collision": bool(collision),
    }


def world_hash(spec: WorldSpec, **overrides: Any) -> str:
    """SHA-256 (hex) of the canonical spec, the bake options (`overrides`: the keyword arguments
    of bake_options, resolved by it) and the globemill version."""
    doc = {
        "format": CACHE_FORMAT,
        "globemill": __version__,
        "options": bake_options(spec, **overrides),
        "spec": json.loads(canonical_spec(spec)),
    }
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------------------------
# estimates before the work

# Calibrated on this project's 2-core build machine from bakes of examples/pebblemoor.toml at
# tolerances 2, 1 and 0.5 m with one thread (54,914 / 162,328 / 564,632 triangles at the finest
# level; bake 4.1 / 7.6 / 27.9 s; peak resident memory 87 / 140 / 345 MB over a 46 MB
# interpreter; outputs 4.9 / 10.8 / 30.8 MB) and from loading a spec of 100,000 hills (1.5 s,
# 240 MB). The core's triangle estimate (its budget survey) is within 1.5x of the real count
# (0.82-1.17x measured on smooth, rough, walled, crowded and demo worlds). Memory and time are the
# largest of those runs per real triangle (750 B, 75 us), times 1.2 for an estimate that falls
# short, rounded up, so they are meant as upper bounds; on tiny worlds (a few thousand triangles)
# the fixed part dominates (a `globemill bake` of a 6,800-triangle world peaked at 54 MB
# resident, so 64 MB). Time is divided by the threads used. File bytes are a LOW estimate (the
# smallest ratio seen, 55 B per real triangle at 0.5 m, over 1.2 for an estimate that runs high):
# a folder with less free space than that cannot hold the files, and is refused before the bake.
BYTES_PER_TRIANGLE = 900
SECONDS_PER_TRIANGLE = 90e-6  # one thread
OUTPUT_BYTES_PER_TRIANGLE = 45
BYTES_PER_FEATURE = 2500
SECONDS_PER_FEATURE = 16e-6
BASE_BYTES = 64_000_000
SURVEY_CAP = 1_000_000  # leaves: the survey's memory stays near 200 MB
# the CLI prints the estimate of a bake above either of these
LARGE_SECONDS = 10.0
LARGE_BYTES = 1_000_000_000


@dataclass(frozen=True)
class BakeEstimate:
    """What a bake will cost, from its spec, before it starts (see the calibration above)."""

    world: str
    features: int
    tolerance_m: float
    triangles: int
    memory_bytes: int
    seconds: float
    output_bytes: int  # a low estimate: the files need at least about this much
    threads: int

    @property
    def large(self) -> bool:
        return self.seconds > LARGE_SECONDS or self.memory_bytes > LARGE_BYTES

    def describe(self) -> str:
        return (
            f"{self.world}: {self.features:,} features, about {self.triangles:,} triangles at "
            f"{self.tolerance_m:g} m: estimated {_duration(self.seconds)} and "
            f"{self.memory_bytes / 1e9:.2f} GB of memory ({self.threads} thread"
            f"{'s' if self.threads != 1 else ''}), at least "
            f"{self.output_bytes / 1e6:,.1f} MB of files"
        )


def _duration(seconds: float) -> str:
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def _cores() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def estimate_bake(
    spec: WorldSpec,
    *,
    tolerance_m: float | None = None,
    threads: int = 0,
    chunk_level: int | None = None,
) -> BakeEstimate:
    """Estimate the triangles, memory, time and file size of baking `spec` (threads: 0 = all
    cores; chunk_level: None for the spec's), from the core's triangle estimate for the tolerance
    and the feature count.

    The triangle estimate is the core's budget survey (the refinement run to four times the
    tolerance, see docs/meshing.md): it costs about a quarter of the bake's refinement on smooth
    ground and up to all of it on noise and walls, and stops at a million leaves (beyond, it
    extrapolates and is rougher)."""
    from . import _core
    from .bake import OFFSET_MODES
    from .field import Field

    tol = float(spec.tolerance_m if tolerance_m is None else tolerance_m)
    if not tol > 0:
        raise ValueError(f"tolerance_m: must be > 0, got {tol!r}")
    tris = int(
        _core.estimate_triangles(
            Field(spec)._core,
            tol,
            offset=OFFSET_MODES[spec.offset],
            chunk_level=int(spec.lod.chunk_level if chunk_level is None else chunk_level),
            survey_cap=SURVEY_CAP,
            threads=threads,
        )
    )
    return estimate_from_triangles(spec, tol, tris, threads=threads)


def estimate_from_triangles(
    spec: WorldSpec, tolerance_m: float, triangles: int, *, threads: int = 0
) -> BakeEstimate:
    """The memory, time and file size of a bake of `spec` at `tolerance_m` whose finest level
    has about `triangles` (capped at the spec's budget, where the bake stops), as estimate_bake
    gives them (for a count the caller has already, e.g. the bake's own survey)."""
    tol = float(tolerance_m)
    nfeat = len(spec.features)
    tris = min(int(triangles), int(spec.max_triangles))  # the bake stops at its budget
    used = min(threads, _cores()) if threads > 0 else _cores()
    return BakeEstimate(
        world=spec.name,
        features=nfeat,
        tolerance_m=tol,
        triangles=tris,
        memory_bytes=int(BASE_BYTES + BYTES_PER_TRIANGLE * tris + BYTES_PER_FEATURE * nfeat),
        seconds=SECONDS_PER_TRIANGLE * tris / used + SECONDS_PER_FEATURE * nfeat,
        output_bytes=int(OUTPUT_BYTES_PER_TRIANGLE * tris),
        threads=used,
    )


def available_memory() -> int | None:
    """Bytes of memory available to new work now (Linux MemAvailable), None when unknown."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    try:
        return int(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return None


def check_memory(est: BakeEstimate, max_memory_bytes: int | None) -> None:
    """Raise MemoryLimitError when the estimate exceeds `max_memory_bytes` (None: no limit)."""
    if max_memory_bytes is None or est.memory_bytes <= max_memory_bytes:
        return
    raise MemoryLimitError(
        f"{est.world}: the bake would need about {est.memory_bytes / 1e9:.2f} GB of memory "
        f"({est.triangles:,} triangles estimated at {est.tolerance_m:g} m, {est.features:,} "
        f"features), more than the limit of {max_memory_bytes / 1e9:.2f} GB (--max-memory); "
        "raise the limit or the tolerance"
    )


def _sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _file_matches(path: Path, entry: Any) -> bool:
    """`path` holds exactly the bytes `entry` ({"bytes", "sha256"}) names."""
    try:
        return (
            path.stat().st_size == entry["bytes"]
            and isinstance(entry["sha256"], str)
            and _sha256_of(path) == entry["sha256"]
        )
    except (OSError, KeyError, TypeError):
        return False


# --------------------------------------------------------------------------------------------
# finding the specs


@dataclass
class _Input:
    source: str
    path: Path | None = None
    spec: WorldSpec | None = None
    error: str | None = None


def _is_spec_file(path: Path, summary: Path) -> bool:
    """A file a folder or glob contributes: .toml/.json, not hidden, not one of our outputs."""
    name = path.name
    return (
        path.is_file()
        and path.suffix.lower() in SPEC_SUFFIXES
        and not name.startswith(".")
        and not name.endswith(".report.json")
        and path.resolve() != summary
    )


def collect_specs(specs: Spec | Iterable[Spec], outdir: Path | None = None) -> list[_Input]:
    """Expand files, folders (their .toml and .json files, not recursive) and glob patterns
    (``**`` recursive) into spec inputs, in the order given, each file once. A missing file, or a
    folder or pattern that yields nothing, becomes an input with an error."""
    items: list[Spec]
    if isinstance(specs, (str, os.PathLike, WorldSpec)):
        items = [specs]
    else:
        items = list(specs)
    summary = (outdir / SUMMARY_NAME).resolve() if outdir is not None else Path("/nonexistent")
    out: list[_Input] = []
    seen: set[Path] = set()
    for item in items:
        if isinstance(item, WorldSpec):
            out.append(_Input(source=f"<WorldSpec {item.name}>", spec=item))
            continue
        text = os.fspath(item)
        path = Path(text)
        if path.is_dir():
            found = sorted(p for p in path.iterdir() if _is_spec_file(p, summary))
            if not found:
                out.append(_Input(text, error=f"no .toml or .json world specs in folder {text}"))
        elif not path.exists() and any(c in text for c in "*?["):
            matches = (Path(m) for m in glob.glob(text, recursive=True))
            found = sorted(p for p in matches if _is_spec_file(p, summary))
            if not found:
                out.append(_Input(text, error=f"no .toml or .json world specs match {text!r}"))
        elif not path.exists():
            out.append(_Input(text, error=f"{text}: no such file or folder"))
            continue
        else:
            found = [path]  # a wrong suffix is reported by load_spec
        for p in found:
            key = p.resolve()
            if key not in seen:
                seen.add(key)
                out.append(_Input(str(p), path=p))
    return out


# --------------------------------------------------------------------------------------------
# the task that runs in a worker process (local pool or Dask worker)


PR_SET_PDEATHSIG = 1  # <linux/prctl.h>
_worker_lock_fd: int | None = None


def _die_with_parent() -> None:
    """Ask Linux to send this process SIGTERM when its parent dies (prctl PR_SET_PDEATHSIG).
    That covers a pool started with spawn, whose parent is the farm; a fork server's children
    keep the server alive, so for them the farm is watched by _die_with_farm."""
    if not sys.platform.startswith("linux"):
        return
    parent = os.getppid()
    with contextlib.suppress(OSError, AttributeError):
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(PR_SET_PDEATHSIG, int(signal.SIGTERM), 0, 0, 0)
    if os.getppid() != parent:  # the parent died before the request was made
        os._exit(1)


def _wait_for_exit(pid: int) -> None:
    """Return when process `pid` has exited (a pidfd where Linux has one, else polling)."""
    import select

    opener = getattr(os, "pidfd_open", None)
    if opener is not None:
        try:
            fd = opener(pid)
        except ProcessLookupError:
            return
        except OSError:
            fd = None
        if fd is not None:
            try:
                select.select([fd], [], [])  # readable once the process has exited
            finally:
                os.close(fd)
            return
    while True:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return
        except PermissionError:
            pass
        time.sleep(0.2)


def _die_with_farm(farm_pid: int) -> None:
    """A thread that sends this worker SIGTERM as soon as the farm process is gone (SIGKILL,
    crash), so no bake of a dead farm goes on writing. SIGTERM, not SIGKILL: the atomic writer
    holds it back while an output set is written and renamed."""

    def watch() -> None:
        if hasattr(signal, "pthread_sigmask"):  # the signal must go to the main thread
            signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGTERM, signal.SIGINT})
        _wait_for_exit(farm_pid)
        os.kill(os.getpid(), signal.SIGTERM)

    threading.Thread(target=watch, name="globemill-farm-watch", daemon=True).start()


def _init_local_worker(workers_lock: str | None = None, farm_pid: int | None = None) -> None:
    # Ctrl-C reaches the whole process group; the farm process decides what happens to the bakes
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _die_with_parent()
    if farm_pid is not None:
        _die_with_farm(farm_pid)
    global _worker_lock_fd
    if workers_lock and fcntl is not None:
        # held (shared) for the life of this process: a later farm into the same folder waits
        # for it, so a bake of an earlier farm can never land after the later farm's
        with contextlib.suppress(OSError):
            _worker_lock_fd = os.open(workers_lock, os.O_RDONLY)
            fcntl.flock(_worker_lock_fd, fcntl.LOCK_SH)


def _error_text(exc: BaseException) -> str:
    if isinstance(exc, (SpecError, ValueError, WriteError, MemoryLimitError)):
        return str(exc)
    if isinstance(exc, OSError) and exc.filename:
        return f"{exc.filename}: {exc.strerror or exc}"
    return f"{type(exc).__name__}: {exc}"


def _error_kind(exc: BaseException) -> str:
    if isinstance(exc, OSError):
        return "io"
    if isinstance(exc, MemoryLimitError):
        return "refused"
    return "bake"


PROGRESS_SUFFIX = ".progress"  # beside a local job's marker: "<fraction> <stage text>"


def _progress_sender(
    send: Callable[[float, str], None], collision: bool = True
) -> Callable[[str, int, int], None]:
    """A bake progress callback that passes the bake's fraction done (of the whole bake and its
    write, globemill.progress.BakeProgress) and its stage text to `send` whenever the fraction
    has moved by a percent, and at the end."""
    from .progress import BakeProgress, bake_stages

    bp = BakeProgress(bake_stages(collision))
    last = [-1.0]

    def progress(stage: str, done: int, total: int) -> None:
        f = bp.update(stage, done, total)
        if f - last[0] >= 0.01 or f >= 1.0:
            last[0] = f
            send(f, bp.text)

    progress.estimated = bp.estimated  # type: ignore[attr-defined]  # the bake's on_estimate
    return progress


def _progress_file(path: str, collision: bool = True) -> Callable[[str, int, int], None]:
    """A bake progress callback that keeps `path` holding the bake's fraction done and its stage
    (rewritten when the fraction moves by a percent), for the local farm to read."""

    def send(f: float, text: str) -> None:
        with contextlib.suppress(OSError):
            Path(path).write_text(f"{f:.4f} {text}", encoding="utf-8")

    return _progress_sender(send, collision)


def _progress_event(
    topic: str, index: int, collision: bool = True
) -> Callable[[str, int, int], None] | None:
    """On a Dask worker: a bake progress callback that logs {"index", "fraction", "stage"} as an
    event under `topic` (Worker.log_event), which the farm's client subscribes to. None when not
    on a Dask worker."""
    try:
        from distributed import get_worker

        worker = get_worker()
    except (ImportError, ValueError):
        return None

    def send(f: float, text: str) -> None:
        with contextlib.suppress(Exception):  # progress is never worth a failed bake
            worker.log_event(topic, {"index": index, "fraction": f, "stage": text})

    return _progress_sender(send, collision)


def read_progress(path: str) -> tuple[float, str] | None:
    """(fraction, stage text) a running local bake left in `path`, None when there is none yet."""
    try:
        head, _, text = Path(path).read_text(encoding="utf-8").partition(" ")
        return min(max(float(head), 0.0), 1.0), text
    except (OSError, ValueError):
        return None


def _bake_task(task: dict[str, Any]) -> dict[str, Any]:
    """Bake one world and write its outputs (atomically). Never raises for a failed bake: returns
    ``{"ok": False, "error": ...}`` so the farm reports it and carries on."""
    t0 = time.perf_counter()
    worker = f"{socket.gethostname()}:{os.getpid()}"
    if task.get("marker"):
        Path(task["marker"]).touch()  # tells the local farm which bakes were running
    try:
        if task["globemill"] != __version__:
            raise RuntimeError(
                f"this worker runs globemill {__version__}, the farm client {task['globemill']}; "
                "install the same version on every worker"
            )
        from .bake import bake
        from .output import write_outputs

        spec = parse_spec(task["spec"], source=task["source"])
        outdir = Path(task["outdir"])
        need = int(task.get("need_bytes", 0))
        probe_folder(outdir, need)  # a full disk before, not after
        tol = spec.tolerance_m if task["tolerance_m"] is None else task["tolerance_m"]

        def on_estimate(triangles: int) -> None:
            if progress is not None:  # refinement's total is known from here on
                progress.estimated(triangles)  # type: ignore[attr-defined]
            # no estimate before the bake: its own survey's, before the refinement goes on
            if need == 0:
                probe_folder(outdir, estimate_from_triangles(spec, tol, triangles).output_bytes)

        collision = bool(task["lod"]["collision"])
        progress = None
        if task.get("marker"):  # a local worker: beside its marker
            progress = _progress_file(task["marker"] + PROGRESS_SUFFIX, collision)
        elif task.get("progress_topic"):  # a Dask worker: as events
            progress = _progress_event(task["progress_topic"], int(task["index"]), collision)
        result = bake(
            spec,
            tolerance_m=task["tolerance_m"],
            offset=task["offset"],
            **task["lod"],
            threads=task["threads"],
            progress=progress,
            on_estimate=on_estimate,
        )
        with recorded() as sums:  # sizes and SHA-256 of the bytes as written
            paths = write_outputs(result, outdir, progress=progress)
        files = {
            kind: {"name": p.name, "bytes": sums[p][0], "sha256": sums[p][1]}
            for kind, p in paths.items()
        }
        col = result.report.get("collision") or {}
        return {
            "ok": True,
            "triangles": int(result.report["lods"][0]["triangles"]),
            "collision_triangles": col.get("triangles"),
            "files": files,
            "seconds": time.perf_counter() - t0,
            "worker": worker,
        }
    except Exception as exc:
        return {
            "ok": False,
            "error": _error_text(exc),
            "kind": _error_kind(exc),
            "seconds": time.perf_counter() - t0,
            "worker": worker,
        }


# --------------------------------------------------------------------------------------------
# cache records


def _record_path(outdir: Path, name: str) -> Path:
    return outdir / CACHE_DIR / f"{name}.json"


def _cached(outdir: Path, name: str, digest: str) -> dict[str, Any] | None:
    """The cache record of `name` if it matches `digest` and every output it lists is there
    with the SHA-256 of the bytes written for that digest."""
    try:
        record = json.loads(_record_path(outdir, name).read_text("utf-8"))
    except (OSError, ValueError):
        return None
    if (
        not isinstance(record, dict)
        or record.get("hash") != digest
        or record.get("format") != CACHE_FORMAT
    ):
        return None
    files = record.get("files")
    if not isinstance(files, dict) or "glb" not in files:
        return None
    for entry in files.values():
        if not isinstance(entry, dict) or not isinstance(entry.get("name"), str):
            return None
        if not _file_matches(outdir / entry["name"], entry):
            return None
    return record


def _write_record(outdir: Path, name: str, record: dict[str, Any]) -> None:
    data = (json.dumps(record, indent=2, sort_keys=True) + "\n").encode("utf-8")
    write_files_atomically({_record_path(outdir, name): data})


def _clean_folder(outdir: Path, older_than: float | None = None) -> None:
    """Finish output sets a killed process left half renamed, then remove temporary files of
    ours that no live process holds (and, when given, last changed before `older_than`)."""
    for folder in (outdir, outdir / CACHE_DIR):
        finish_interrupted_sets(folder)
        sweep_temporaries(folder, older_than=older_than)


def _open_locked(path: Path, flags: int, busy: str, log: Callable[[str], None]) -> int:
    """Open (or create) `path` and take an exclusive flock on it, saying `busy` (a format with
    {holder}: the file's text) once when it has to wait."""
    assert fcntl is not None
    try:
        fd = os.open(path, flags | os.O_CREAT, 0o666)
    except OSError as exc:
        raise WriteError(exc.errno or 5, exc.strerror or str(exc), str(path)) from None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        holder = os.pread(fd, 200, 0).decode("utf-8", "replace").strip() or "another farm"
        log(busy.format(holder=holder))
        try:
            fcntl.flock(fd, fcntl.LOCK_EX)
        except BaseException:
            os.close(fd)
            raise
    return fd


@contextlib.contextmanager
def _folder_lock(outdir: Path, log: Callable[[str], None]) -> Iterator[None]:
    """Hold `outdir` for this farm: a second farm into it waits here until the first is done,
    then until every worker process of the first has exited."""
    if fcntl is None:
        yield
        return
    fd = _open_locked(
        outdir / LOCK_NAME, os.O_RDWR, f"waiting for the farm {{holder}} writing to {outdir}", log
    )
    try:
        with contextlib.suppress(OSError):
            os.ftruncate(fd, 0)
            os.pwrite(fd, f"{socket.gethostname()}:{os.getpid()}\n".encode(), 0)
        busy = f"waiting for worker processes of an earlier farm into {outdir} to exit"
        # released at once: our own workers take it shared
        os.close(_open_locked(outdir / WORKERS_LOCK_NAME, os.O_RDONLY, busy, log))
        yield
    finally:
        os.close(fd)


# --------------------------------------------------------------------------------------------
# backends


@dataclass
class _Job:
    index: int
    name: str
    digest: str
    task: dict[str, Any]
    attempts: int = 0
    deaths: int = 0


Finish = Callable[[_Job, dict[str, Any]], None]
Tick = Callable[[dict[int, tuple[float, str]]], None]
TICK_SECONDS = 0.5


def _mp_context() -> multiprocessing.context.BaseContext:
    # forkserver: workers start from a clean server process that has globemill imported already
    # (fork from a process with threads is unsafe; spawn re-imports everything per worker)
    if "forkserver" in multiprocessing.get_all_start_methods():
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["globemill.farm", "globemill.bake", "globemill.output"])
        return ctx
    return multiprocessing.get_context("spawn")


def _terminate_pool(pool: ProcessPoolExecutor) -> None:
    """Stop the pool's running bakes now (a shutdown alone waits for them to finish)."""
    stop = getattr(pool, "terminate_workers", None)  # Python >= 3.14
    if callable(stop):
        with contextlib.suppress(Exception):
            stop()
        return
    processes = getattr(pool, "_processes", None) or {}
    for proc in list(processes.values()):
        with contextlib.suppress(Exception):
            proc.terminate()


def _local_batch(
    ctx: multiprocessing.context.BaseContext,
    batch: list[_Job],
    workers: int,
    finish: Finish,
    tick: Tick | None = None,
) -> list[tuple[_Job, bool]]:
    """Run `batch` on a fresh pool; return the jobs lost to a broken pool, each with whether its
    bake had started. `tick({job index: (fraction, stage)})` is called about twice a second with
    the bakes running."""
    broken: list[tuple[_Job, bool]] = []
    with tempfile.TemporaryDirectory(prefix="globemill-farm-") as marks:
        pool = ProcessPoolExecutor(
            max_workers=workers,
            mp_context=ctx,
            initializer=_init_local_worker,
            initargs=(os.path.join(batch[0].task["outdir"], WORKERS_LOCK_NAME), os.getpid()),
        )
        try:
            futures = {}
            for job in batch:
                job.attempts += 1
                task = dict(job.task, marker=os.path.join(marks, str(job.index)))
                futures[pool.submit(_bake_task, task)] = job
            for fut in _completed(futures, marks, tick):
                job = futures[fut]
                try:
                    res = fut.result()
                except BrokenProcessPool:
                    started = os.path.exists(os.path.join(marks, str(job.index)))
                    if not started:
                        job.attempts -= 1
                    broken.append((job, started))
                    continue
                except Exception as exc:  # the task could not be sent or its result not read
                    res = {"ok": False, "error": _error_text(exc), "seconds": 0.0}
                finish(job, res)
        except BaseException:
            _terminate_pool(pool)
            raise
        finally:
            pool.shutdown(wait=True, cancel_futures=True)
    return broken


def _completed(futures: dict[Any, _Job], marks: str, tick: Tick | None) -> Iterator[Any]:
    """The futures as they complete (as concurrent.futures.as_completed), calling `tick` with
    the progress the running bakes leave beside their markers while waiting."""
    pending = set(futures)
    while pending:
        done, pending = wait(pending, timeout=TICK_SECONDS, return_when=FIRST_COMPLETED)
        yield from done
        if tick is not None and pending:
            running = {}
            for fut in pending:
                job = futures[fut]
                got = read_progress(os.path.join(marks, str(job.index)) + PROGRESS_SUFFIX)
                if got is not None:
                    running[job.index] = got
            tick(running)


def _run_local(jobs: list[_Job], workers: int, finish: Finish, tick: Tick | None = None) -> None:
    ctx = _mp_context()
    queue = list(jobs)
    alone: list[_Job] = []  # suspects of a broken pool, retried one at a time
    stalls = 0
    while queue or alone:
        if alone:
            batch, n = [alone.pop(0)], 1
        else:
            batch, queue = queue, []
            n = min(workers, len(batch))
        broken = _local_batch(ctx, batch, n, finish, tick)
        started = [job for job, s in broken if s]
        queue.extend(job for job, s in broken if not s)
        if not broken:
            stalls = 0
            continue
        if not started:
            stalls += 1
            if stalls >= LOCAL_STALLS:
                for job in queue + alone:
                    finish(
                        job,
                        {
                            "ok": False,
                            "error": "the local worker processes keep dying before any bake "
                            f"starts ({stalls} pools in a row)",
                            "seconds": 0.0,
                        },
                    )
                return
            continue
        stalls = 0
        if len(started) == 1:  # it was the only bake running: its process died with it
            job = started[0]
            job.deaths += 1
            if job.deaths >= LOCAL_DEATHS:
                finish(
                    job,
                    {
                        "ok": False,
                        "error": f"the worker process died while baking this world "
                        f"({job.deaths} times)",
                        "seconds": 0.0,
                    },
                )
            else:
                alone.append(job)
        else:
            alone.extend(started)


def _run_dask(
    jobs: list[_Job],
    scheduler: str,
    finish: Finish,
    started: Callable[[int], None],
    tick: Tick | None = None,
) -> None:
    """Bake `jobs` on the cluster at `scheduler`. With `tick`, each bake sends its progress as
    Dask events (topic globemill-progress-<run>, Worker.log_event) that the client receives on
    its own thread; they are queued and `tick({job index: (fraction, stage)})` is called here,
    on the calling thread, about every TICK_SECONDS with the bakes running."""
    try:
        from distributed import Client, KilledWorker
        from distributed import as_completed as dask_completed
    except ImportError as exc:
        raise FarmError(
            "a Dask scheduler needs the 'farm' extra (dask and distributed): "
            "pip install 'globemill[farm]'"
        ) from exc
    from distributed.comm import get_address_host_port

    try:
        get_address_host_port(scheduler)
    except ValueError as exc:  # checked first: a Client that fails on it hangs at exit
        raise FarmError(f"bad Dask scheduler address {scheduler!r}: {exc}") from exc
    try:
        client = Client(scheduler, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise FarmError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from exc
    futures: dict[Any, _Job] = {}
    try:
        started(len(client.nthreads()))  # the workers there now (more may join)
        run = uuid.uuid4().hex[:8]
        events: queue.SimpleQueue[Any] = queue.SimpleQueue()
        topic = f"globemill-progress-{run}"
        if tick is not None:
            client.subscribe_topic(topic, lambda event: events.put(event[1]))
        for job in jobs:
            job.attempts = 1
            key = f"globemill-bake-{job.name}-{job.digest[:12]}-{run}"
            task = job.task
            if tick is not None:
                task = dict(task, index=job.index, progress_topic=topic)
            futures[client.submit(_bake_task, task, key=key, pure=False, retries=0)] = job
        ac = dask_completed(list(futures), loop=client.loop)
        for fut in _dask_completed(ac, events, tick, lambda f: futures[f].index):
            job = futures[fut]
            try:
                res = fut.result()
            except KilledWorker as exc:
                res = {
                    "ok": False,
                    "error": f"every Dask worker that tried to bake it died ({exc}); the "
                    "scheduler gave up (distributed.scheduler.allowed-failures)",
                    "seconds": 0.0,
                }
            except Exception as exc:
                res = {"ok": False, "error": _error_text(exc), "seconds": 0.0}
            finish(job, res)
    except BaseException:
        with contextlib.suppress(Exception):
            client.cancel(list(futures), force=True)
        raise
    finally:
        with contextlib.suppress(Exception):
            client.close()


def _dask_completed(
    ac: Any, events: queue.SimpleQueue[Any], tick: Tick | None, index_of: Callable[[Any], int]
) -> Iterator[Any]:
    """The futures of Dask's as_completed `ac` as they complete, calling `tick` with the progress
    events the running bakes sent (the newest of each job; a finished job's late ones are
    dropped). `index_of(future)` is its job's index."""
    running: dict[int, tuple[float, str]] = {}
    finished: set[int] = set()
    last_tick = 0.0
    while not ac.is_empty():
        batch = ac.next_batch(block=False)
        for fut in batch:
            finished.add(index_of(fut))
            running.pop(index_of(fut), None)
            yield fut
        if batch:
            continue
        with contextlib.suppress(queue.Empty):  # wait a little for an event (or a result)
            msg = events.get(timeout=min(TICK_SECONDS, 0.1))
            while True:
                with contextlib.suppress(KeyError, TypeError, ValueError):
                    index = int(msg["index"])
                    if index not in finished:
                        f = min(max(float(msg["fraction"]), 0.0), 1.0)
                        running[index] = (f, str(msg["stage"]))
                msg = events.get_nowait()
        now = time.monotonic()
        if tick is not None and running and now - last_tick >= TICK_SECONDS:
            last_tick = now
            tick(dict(running))


# --------------------------------------------------------------------------------------------
# the farm


def _default_jobs() -> int:
    return _cores()


@contextlib.contextmanager
def _sigterm_stops() -> Iterator[None]:
    """SIGTERM raises FarmTerminated here (main thread only), so it stops the farm as cleanly
    as Ctrl-C does: the pool's workers are terminated, farm.json says what was left."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def stop(signum: int, frame: Any) -> None:
        raise FarmTerminated()

    old = signal.signal(signal.SIGTERM, stop)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old)


def farm(
    specs: Spec | Sequence[Spec],
    outdir: str | os.PathLike[str],
    *,
    jobs: int | None = None,
    scheduler: str | None = None,
    tolerance_m: float | None = None,
    offset: str | None = None,
    levels: int | None = None,
    ratio: float | None = None,
    chunk_level: int | None = None,
    seams: str | None = None,
    collision: bool = True,
    threads: int | None = None,
    force: bool = False,
    progress: bool = False,
    on_world: OnWorld | None = None,
    on_progress: OnProgress | None = None,
    max_memory_bytes: int | None = None,
    log: Callable[[str], None] | None = None,
) -> FarmSummary:
    """Bake every world in `specs` into `outdir`; return the summary (also in outdir/farm.json).

    specs : spec files, folders, glob patterns or WorldSpec objects (one or a sequence)
    jobs : local worker processes (default: the cores this process may use); ignored with a
        scheduler, where the cluster's workers decide
    scheduler : a Dask scheduler address, e.g. "tcp://10.0.0.5:8786" (default: local pool)
    tolerance_m, offset, levels, ratio, chunk_level, seams, collision : bake overrides for every
        world, as the keyword arguments of `globemill.bake` (None: each spec's own); they are
        part of each world's cache key, so changing one re-bakes
    threads : core threads per bake (default: 1 when several bakes run at once, else all cores)
    force : bake every world even when its cache record says it is up to date
    progress : show a progress bar across worlds on stderr
    on_world : called with each world's outcome as it is known (cached and failed ones first)
    on_progress : called with a WorldProgress for each world being baked, on the calling
        thread: about every TICK_SECONDS (0.5 s) for each running world whose fraction moved,
        then once with fraction 1.0 and stage "done" when it is baked. Cached and failed worlds
        get none (on_world reports them). Local pools and Dask clusters alike: a Dask worker
        sends its bake's progress as Dask events (Worker.log_event), which this client
        subscribes to; a bake retried on another worker is reported from the highest
        fraction already reached (fractions never go back).
    max_memory_bytes : a world whose estimated memory exceeds it is refused (reported failed,
        error_kind "refused"); default: the memory this machine has available now
    log : called with one-line notes (waiting for another farm, estimates of long work)

    One farm at a time writes into a folder: a second one waits for the first (and its worker
    processes) to finish. A world counts as cached only when every output holds the bytes
    (SHA-256) the farm recorded when it wrote them for the same content hash.

    The local pool starts its processes from a fork server that imports the calling script's
    main module again, so a script calling farm() must do so under
    ``if __name__ == "__main__":`` (as for any multiprocessing pool).

    A failed world does not raise: check ``summary.ok`` / ``summary.failed``. Raises FarmError
    when nothing can run (no specs, Dask missing, scheduler unreachable), WriteError (an
    OSError naming the file) when `outdir` cannot be written, ValueError for bad options, and
    KeyboardInterrupt (FarmTerminated for SIGTERM) again after a clean stop.
    """
    t_start = time.perf_counter()
    started = datetime.now(timezone.utc).isoformat(timespec="seconds")
    if jobs is not None and (not isinstance(jobs, int) or isinstance(jobs, bool) or jobs < 1):
        raise ValueError(f"jobs: must be an integer >= 1, got {jobs!r}")
    # the bake's own ranges (csrc/bake.cpp, check_settings; the C ABI's gm_bake_settings), checked
    # here before any work so that a value no world can bake with writes nothing, not a failed
    # farm.json (tests/test_farm.py holds the two messages equal)
    if threads is not None and (
        not isinstance(threads, int) or isinstance(threads, bool) or not 0 <= threads <= 1024
    ):
        raise ValueError(f"threads: must be an integer in 0..1024 (0 = all cores), got {threads}")
    if tolerance_m is not None and (
        isinstance(tolerance_m, bool)
        or not isinstance(tolerance_m, (int, float))
        or not (math.isfinite(tolerance_m) and tolerance_m > 0)
    ):
        raise ValueError(
            f"tolerance_m: must be > 0 and <= each world's radius_m/10, got {tolerance_m!r}"
        )
    if max_memory_bytes is not None and not (
        isinstance(max_memory_bytes, int) and max_memory_bytes > 0
    ):
        raise ValueError(f"max_memory_bytes: must be an integer > 0, got {max_memory_bytes!r}")
    lod: dict[str, Any] = {
        "levels": levels,
        "ratio": ratio,
        "chunk_level": chunk_level,
        "seams": seams,
        "collision": collision,
    }
    check_overrides(**lod)  # a value no world can bake with: nothing is written
    note = log or (lambda _msg: None)
    out = Path(outdir).resolve()
    inputs = collect_specs(specs, out)
    if not inputs:
        raise FarmError("no world specs given")
    if all(inp.error is not None for inp in inputs):  # nothing to bake: write nothing
        raise FarmError("no world specs found: " + "; ".join(str(i.error) for i in inputs))
    probe_folder(out)  # an unwritable or full output folder is found before any work
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise WriteError(exc.errno or 5, exc.strerror or str(exc), str(out)) from None
    limit = max_memory_bytes if max_memory_bytes is not None else available_memory()
    with _sigterm_stops(), _folder_lock(out, note):
        _clean_folder(out, older_than=time.time())
        return _farm_locked(
            inputs,
            out,
            jobs=jobs,
            scheduler=scheduler,
            tolerance_m=tolerance_m,
            offset=offset,
            lod=lod,
            threads=threads,
            force=force,
            progress=progress,
            on_world=on_world,
            on_progress=on_progress,
            limit=limit,
            note=note,
            t_start=t_start,
            started=started,
        )


def _farm_locked(
    inputs: list[_Input],
    out: Path,
    *,
    jobs: int | None,
    scheduler: str | None,
    tolerance_m: float | None,
    offset: str | None,
    lod: dict[str, Any],
    threads: int | None,
    force: bool,
    progress: bool,
    on_world: OnWorld | None,
    on_progress: OnProgress | None,
    limit: int | None,
    note: Callable[[str], None],
    t_start: float,
    started: str,
) -> FarmSummary:
    backend = "dask" if scheduler else "local"
    outcomes: list[WorldOutcome | None] = [None] * len(inputs)
    bar = None
    if progress:
        from .progress import stage_bar

        bar = stage_bar(total=len(inputs), desc="farm", counts="{n:.1f}/{total} worlds ")
    finished = [0]

    def report(i: int, outcome: WorldOutcome) -> None:
        outcomes[i] = outcome
        finished[0] += 1
        if bar is not None:
            bar.n = finished[0]
            bar.set_stage(f"{outcome.world} {outcome.status}")
            bar.refresh()
        if on_world is not None:
            on_world(outcome)

    def label_of(inp: _Input) -> str:
        return Path(inp.source).stem if inp.path is not None else inp.source

    # read, validate and hash every spec; skip the cached ones. Anything a file holds ends as
    # that world's failure, never as the farm's.
    pending: list[tuple[int, WorldSpec, str]] = []
    names: dict[str, str] = {}
    for i, inp in enumerate(inputs):
        spec = inp.spec
        error = inp.error
        try:
            if spec is None and error is None and inp.path is not None:
                spec = load_spec(inp.path)
        except SpecError as exc:
            error = str(exc)
        except Exception as exc:  # a reader's limit (nesting depth, encoding) is still input
            error = f"cannot read world spec {inp.source}: {_error_text(exc)}"
        if spec is None:
            report(
                i,
                WorldOutcome(label_of(inp), inp.source, "failed", error=error, error_kind="input"),
            )
            continue
        try:
            digest = world_hash(spec, tolerance_m=tolerance_m, offset=offset, **lod)
        except Exception as exc:
            error = f"world spec {inp.source} cannot be hashed: {_error_text(exc)}"
            report(
                i,
                WorldOutcome(label_of(inp), inp.source, "failed", error=error, error_kind="input"),
            )
            continue
        key = spec.name.casefold()  # case-insensitive file systems would merge the outputs too
        if key in names:
            error = (
                f"world name {spec.name!r} is also used by {names[key]}: their outputs would "
                "overwrite each other; rename one"
            )
            report(
                i, WorldOutcome(spec.name, inp.source, "failed", error=error, error_kind="input")
            )
            continue
        names[key] = inp.source
        record = None if force else _cached(out, spec.name, digest)
        if record is not None:
            outcome = WorldOutcome(
                spec.name,
                inp.source,
                "cached",
                cached=True,
                triangles=record.get("triangles"),
                collision_triangles=record.get("collision_triangles"),
                hash=digest,
                outputs={k: v["name"] for k, v in record["files"].items()},
            )
            report(i, outcome)
            continue
        pending.append((i, spec, digest))

    several = backend == "dask" or min(jobs or _default_jobs(), len(pending)) > 1
    bake_threads = threads if threads is not None else (1 if several else 0)

    # estimates first: a world that cannot fit is refused before anything bakes. a world whose
    # triangle budget fits in the memory limit cannot exceed it: it runs no survey here, its bake
    # checks the free space against its own survey's estimate (on_estimate, in _bake_task)
    estimates: dict[int, BakeEstimate] = {}
    accepted: list[tuple[int, WorldSpec, str]] = []
    for i, spec, digest in pending:
        try:
            tol = spec.tolerance_m if tolerance_m is None else tolerance_m
            most = estimate_from_triangles(spec, tol, spec.max_triangles, threads=bake_threads)
            if limit is None or most.memory_bytes <= limit:
                accepted.append((i, spec, digest))
                continue
            est = estimate_bake(
                spec, tolerance_m=tolerance_m, threads=bake_threads, chunk_level=lod["chunk_level"]
            )
            check_memory(est, limit)
        except MemoryLimitError as exc:
            outcome = WorldOutcome(
                spec.name,
                inputs[i].source,
                "failed",
                hash=digest,
                error=str(exc),
                error_kind="refused",
            )
            report(i, outcome)
            continue
        except Exception:  # the bake itself reports what is wrong with the options
            est = None
        if est is not None:
            estimates[i] = est
        accepted.append((i, spec, digest))
    pending = accepted
    workers: int | None = None
    if backend == "local":
        workers = min(jobs or _default_jobs(), len(pending))
    if estimates:
        total = sum(e.seconds for e in estimates.values()) / max(1, workers or 1)
        big = max(estimates.values(), key=lambda e: e.memory_bytes)
        if total > LARGE_SECONDS or big.memory_bytes > LARGE_BYTES:
            note(
                f"{len(pending)} world{'s' if len(pending) != 1 else ''} to bake: estimated "
                f"{_duration(total)} in all; the largest, {big.describe()}"
            )
    jobs_list = [
        _Job(
            index=i,
            name=spec.name,
            digest=digest,
            task={
                "spec": spec.model_dump(mode="json"),
                "source": inputs[i].source,
                "outdir": str(out),
                "tolerance_m": tolerance_m,
                "offset": offset,
                "lod": lod,
                "threads": bake_threads,
                "globemill": __version__,
                "need_bytes": estimates[i].output_bytes if i in estimates else 0,
            },
        )
        for i, spec, digest in pending
    ]

    names_of = {i: spec.name for i, spec, _ in pending}
    reached: dict[int, float] = {}  # the fraction on_progress was last told, per world

    def moved(i: int, fraction: float, stage: str, last: bool = False) -> None:
        before = reached.get(i, -1.0)
        if on_progress is None or (fraction <= before and not last):
            return
        reached[i] = max(fraction, before)
        on_progress(WorldProgress(names_of[i], inputs[i].source, reached[i], stage))

    def tick(running: dict[int, tuple[float, str]]) -> None:
        for i, (f, text) in sorted(running.items()):
            moved(i, f, text)
        # finished worlds count whole, running ones by the share of their bake done
        if bar is None:
            return
        bar.n = finished[0] + sum(f for f, _ in running.values())
        shown = [
            f"{names_of[i]} {100 * f:.0f}% {text.split(' ')[0]}"
            for i, (f, text) in sorted(running.items())
        ]
        bar.set_stage(", ".join(shown[:4]) + (" ..." if len(shown) > 4 else ""))
        bar.refresh()

    ticking = tick if bar is not None or on_progress is not None else None

    def finish(job: _Job, res: dict[str, Any]) -> None:
        source = inputs[job.index].source
        outcome = WorldOutcome(
            job.name,
            source,
            "failed",
            seconds=float(res.get("seconds", 0.0)),
            hash=job.digest,
            attempts=job.attempts,
            worker=res.get("worker"),
        )
        if not res.get("ok"):
            outcome.error = str(res.get("error"))
            outcome.error_kind = str(res.get("kind") or "bake")
            report(job.index, outcome)
            return
        files: dict[str, dict[str, Any]] = res["files"]
        for entry in files.values():
            if not _file_matches(out / entry["name"], entry):
                outcome.error = (
                    f"worker {res.get('worker')} wrote {entry['name']} but {out} here does not "
                    "hold those bytes: the output folder must be shared by the farm and every "
                    "worker, and nothing else may write into it while the farm runs"
                )
                outcome.error_kind = "io"
                report(job.index, outcome)
                return
        record = {
            "format": CACHE_FORMAT,
            "hash": job.digest,
            "globemill": __version__,
            "source": source,
            "files": files,
            "triangles": res["triangles"],
            "collision_triangles": res["collision_triangles"],
            "seconds": res["seconds"],
            "baked": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        }
        try:
            _write_record(out, job.name, record)
        except OSError as exc:
            outcome.error = f"outputs written, but not the cache record: {_error_text(exc)}"
            outcome.error_kind = "io"
            report(job.index, outcome)
            return
        outcome.status = "baked"
        outcome.triangles = res["triangles"]
        outcome.collision_triangles = res["collision_triangles"]
        outcome.outputs = {k: v["name"] for k, v in files.items()}
        moved(job.index, 1.0, "done", last=True)
        report(job.index, outcome)

    interrupted = False
    try:
        for job in jobs_list:  # a world being re-baked is not cached until it is done
            _record_path(out, job.name).unlink(missing_ok=True)
        if jobs_list and scheduler:

            def connected(n: int) -> None:
                nonlocal workers
                workers = n

            _run_dask(jobs_list, scheduler, finish, connected, ticking)
        elif jobs_list and workers:
            _run_local(jobs_list, workers, finish, ticking)
    except KeyboardInterrupt:
        interrupted = True
        raise
    finally:
        if bar is not None:
            bar.close()
        _clean_folder(out)
        worlds = []
        for i, inp in enumerate(inputs):
            got = outcomes[i]
            job = next((j for j in jobs_list if j.index == i), None)
            record = _cached(out, job.name, job.digest) if got is None and job else None
            if job and record is not None:  # done, stopped just before it was reported
                got = WorldOutcome(
                    job.name,
                    inp.source,
                    "baked",
                    triangles=record.get("triangles"),
                    collision_triangles=record.get("collision_triangles"),
                    seconds=float(record.get("seconds", 0.0)),
                    hash=job.digest,
                    attempts=job.attempts,
                    outputs={k: v["name"] for k, v in record["files"].items()},
                )
            elif got is None:  # interrupted, or the backend could not start
                got = WorldOutcome(
                    job.name if job else label_of(inp),
                    inp.source,
                    "interrupted" if interrupted else "failed",
                    hash=job.digest if job else None,
                    error="interrupted" if interrupted else "the farm stopped before baking it",
                    error_kind=None if interrupted else "bake",
                )
            worlds.append(got)
        summary = FarmSummary(
            outdir=out,
            backend=backend,
            workers=workers,
            scheduler=scheduler,
            worlds=worlds,
            seconds_total=time.perf_counter() - t_start,
            started=started,
            interrupted=interrupted,
        )
        text = (json.dumps(summary.to_dict(), indent=2) + "\n").encode("utf-8")
        write_files_atomically({out / SUMMARY_NAME: text})
    return summary
