"""The build farm: bake every world of a game, on this machine or on a Dask cluster, incrementally.

``farm(specs, outdir)`` bakes each world spec into ``outdir`` exactly as ``globemill bake`` does
(``<name>.glb``, ``<name>.collision.glb``, ``<name>.report.json``, written atomically), then writes
``outdir/farm.json``, a summary with one row per world.

- Where: a local process pool by default (``jobs`` processes); with ``scheduler="tcp://host:port"``
  the same tasks go to an existing Dask distributed cluster (the ``farm`` extra:
  ``pip install 'globemill[farm]'``). Dask workers write the outputs themselves, so ``outdir``
  must be a folder every worker sees at the same path (a shared filesystem).
- Incremental: a world's content hash covers its canonical spec (``model_dump(mode="json")``
  serialised with sorted keys), the bake options that change the output (tolerance, offset) and
  the globemill version. A world whose hash matches its cache record and whose outputs are all in
  place with the recorded sizes is skipped and reported as cached. The record,
  ``outdir/.globemill-cache/<name>.json``, is removed before a world is re-baked and written
  (atomically) only after its outputs are in place, so a crash in between only costs a re-bake.
- Failures stay local: an unreadable or invalid spec, a duplicate world name or a failed bake is
  reported for that world with its error while every other world still bakes. A Dask worker that
  dies mid-bake has its task rescheduled on another worker by the scheduler (up to the cluster's
  ``distributed.scheduler.allowed-failures``); a local worker process that dies breaks its pool, so
  the pool is restarted and the unfinished worlds are baked again, the ones that were running at
  the time each on its own, until one kills its process twice and is reported as failed.
- Ctrl-C (KeyboardInterrupt) stops cleanly: queued worlds are cancelled, local worker processes are
  terminated, finished worlds keep their outputs and cache records, temporary files of this run's
  worlds are removed, ``farm.json`` records the unfinished worlds as interrupted, and the
  KeyboardInterrupt is raised again. Bakes already running on a Dask cluster cannot be stopped
  from the client; they finish and replace their outputs atomically, uncached.
"""

from __future__ import annotations

import contextlib
import glob
import hashlib
import json
import multiprocessing
import os
import signal
import socket
import tempfile
import time
import uuid
from collections.abc import Callable, Iterable, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from . import __version__
from ._atomic import write_files_atomically
from .spec import SpecError, WorldSpec, load_spec, parse_spec

__all__ = [
    "CACHE_DIR",
    "SUMMARY_NAME",
    "FarmError",
    "FarmSummary",
    "WorldOutcome",
    "canonical_spec",
    "collect_specs",
    "farm",
    "world_hash",
]

SUMMARY_NAME = "farm.json"
CACHE_DIR = ".globemill-cache"
# bump when the cache record or the hashed document changes shape
CACHE_FORMAT = 1
SPEC_SUFFIXES = (".toml", ".json")
OUTPUT_SUFFIXES = {"glb": ".glb", "collision": ".collision.glb", "report": ".report.json"}
# a local world is reported as failed after its worker process died this often while it ran alone
LOCAL_DEATHS = 2
# pool restarts in a row without any bake having started before the remaining worlds are failed
LOCAL_STALLS = 3
CONNECT_TIMEOUT_S = 20.0

Spec = str | os.PathLike[str] | WorldSpec
OnWorld = Callable[["WorldOutcome"], None]


class FarmError(RuntimeError):
    """The farm cannot run at all: no specs, Dask missing, scheduler unreachable."""


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


def canonical_spec(spec: WorldSpec) -> str:
    """The spec as canonical JSON: validated values with defaults filled in, keys sorted, no
    spaces. Two files that describe the same world (TOML or JSON, any key order, 400 or 400.0)
    give the same text."""
    return json.dumps(
        spec.model_dump(mode="json"),
        sort_keys=True,
        separators=(",", ":"),
        ensure_ascii=False,
        allow_nan=False,
    )


def bake_options(
    spec: WorldSpec, *, tolerance_m: float | None = None, offset: str | None = None
) -> dict[str, Any]:
    """The options of a farm bake that change its output, resolved against the spec (an override
    equal to the spec's own value hashes the same as no override). Threads do not change it."""
    return {
        "tolerance_m": float(spec.tolerance_m if tolerance_m is None else tolerance_m),
        "offset": spec.offset if offset is None else offset,
        "collision": True,
    }


def world_hash(
    spec: WorldSpec, *, tolerance_m: float | None = None, offset: str | None = None
) -> str:
    """SHA-256 (hex) of the canonical spec, the bake options and the globemill version."""
    doc = {
        "format": CACHE_FORMAT,
        "globemill": __version__,
        "options": bake_options(spec, tolerance_m=tolerance_m, offset=offset),
        "spec": json.loads(canonical_spec(spec)),
    }
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


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
    (``**`` recursive) into spec inputs, in the order given, each file once. A folder or pattern
    that yields nothing becomes an input with an error."""
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
        else:
            found = [path]  # a missing file or a wrong suffix is reported by load_spec
        for p in found:
            key = p.resolve()
            if key not in seen:
                seen.add(key)
                out.append(_Input(str(p), path=p))
    return out


# --------------------------------------------------------------------------------------------
# the task that runs in a worker process (local pool or Dask worker)


def _init_local_worker() -> None:
    # Ctrl-C reaches the whole process group; the farm process decides what happens to the bakes
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _error_text(exc: BaseException) -> str:
    if isinstance(exc, (SpecError, ValueError)):
        return str(exc)
    return f"{type(exc).__name__}: {exc}"


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
        result = bake(
            spec,
            tolerance_m=task["tolerance_m"],
            offset=task["offset"],
            threads=task["threads"],
        )
        paths = write_outputs(result, Path(task["outdir"]))
        files = {kind: {"name": p.name, "bytes": p.stat().st_size} for kind, p in paths.items()}
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
            "seconds": time.perf_counter() - t0,
            "worker": worker,
        }


# --------------------------------------------------------------------------------------------
# cache records


def _record_path(outdir: Path, name: str) -> Path:
    return outdir / CACHE_DIR / f"{name}.json"


def _cached(outdir: Path, name: str, digest: str) -> dict[str, Any] | None:
    """The cache record of `name` if it matches `digest` and every output it lists is there with
    its recorded size."""
    try:
        record = json.loads(_record_path(outdir, name).read_text("utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or record.get("hash") != digest:
        return None
    files = record.get("files")
    if not isinstance(files, dict) or "glb" not in files:
        return None
    for entry in files.values():
        try:
            if (outdir / entry["name"]).stat().st_size != entry["bytes"]:
                return None
        except (OSError, KeyError, TypeError):
            return None
    return record


def _write_record(outdir: Path, name: str, record: dict[str, Any]) -> None:
    data = (json.dumps(record, indent=2, sort_keys=True) + "\n").encode("utf-8")
    write_files_atomically({_record_path(outdir, name): data})


def _sweep_temporaries(outdir: Path, names: Iterable[str]) -> None:
    """Remove temporary files that an atomic write of these worlds left behind (its process was
    killed between writing and renaming); targets are never touched."""
    for name in names:
        for suffix in OUTPUT_SUFFIXES.values():
            for tmp in outdir.glob(f".{name}{suffix}.*.tmp"):
                with contextlib.suppress(OSError):
                    tmp.unlink()


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
    ctx: multiprocessing.context.BaseContext, batch: list[_Job], workers: int, finish: Finish
) -> list[tuple[_Job, bool]]:
    """Run `batch` on a fresh pool; return the jobs lost to a broken pool, each with whether its
    bake had started."""
    broken: list[tuple[_Job, bool]] = []
    with tempfile.TemporaryDirectory(prefix="globemill-farm-") as marks:
        pool = ProcessPoolExecutor(
            max_workers=workers, mp_context=ctx, initializer=_init_local_worker
        )
        try:
            futures = {}
            for job in batch:
                job.attempts += 1
                task = dict(job.task, marker=os.path.join(marks, str(job.index)))
                futures[pool.submit(_bake_task, task)] = job
            for fut in as_completed(futures):
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


def _run_local(jobs: list[_Job], workers: int, finish: Finish) -> None:
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
        broken = _local_batch(ctx, batch, n, finish)
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
    jobs: list[_Job], scheduler: str, finish: Finish, started: Callable[[int], None]
) -> None:
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
        for job in jobs:
            job.attempts = 1
            key = f"globemill-bake-{job.name}-{job.digest[:12]}-{run}"
            futures[client.submit(_bake_task, job.task, key=key, pure=False, retries=0)] = job
        for fut in dask_completed(list(futures), loop=client.loop):
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


# --------------------------------------------------------------------------------------------
# the farm


def _default_jobs() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def farm(
    specs: Spec | Sequence[Spec],
    outdir: str | os.PathLike[str],
    *,
    jobs: int | None = None,
    scheduler: str | None = None,
    tolerance_m: float | None = None,
    offset: str | None = None,
    threads: int | None = None,
    force: bool = False,
    progress: bool = False,
    on_world: OnWorld | None = None,
) -> FarmSummary:
    """Bake every world in `specs` into `outdir`; return the summary (also in outdir/farm.json).

    specs : spec files, folders, glob patterns or WorldSpec objects (one or a sequence)
    jobs : local worker processes (default: the cores this process may use); ignored with a
        scheduler, where the cluster's workers decide
    scheduler : a Dask scheduler address, e.g. "tcp://10.0.0.5:8786" (default: local pool)
    tolerance_m, offset : bake overrides for every world (as `globemill bake`)
    threads : core threads per bake (default: 1 when several bakes run at once, else all cores)
    force : bake every world even when its cache record says it is up to date
    progress : show a progress bar across worlds on stderr
    on_world : called with each world's outcome as it is known (cached and failed ones first)

    The local pool starts its processes from a fork server that imports the calling script's
    main module again, so a script calling farm() must do so under
    ``if __name__ == "__main__":`` (as for any multiprocessing pool).

    A failed world does not raise: check ``summary.ok`` / ``summary.failed``. Raises FarmError
    when nothing can run (no specs, Dask missing, scheduler unreachable), ValueError for bad
    options, and KeyboardInterrupt again after a clean stop.
    """
    t_start = time.perf_counter()
    started = datetime.now(timezone.utc).isoformat(timespec="seconds")
    if jobs is not None and (not isinstance(jobs, int) or isinstance(jobs, bool) or jobs < 1):
        raise ValueError(f"jobs: must be an integer >= 1, got {jobs!r}")
    if threads is not None and (not isinstance(threads, int) or threads < 0):
        raise ValueError(f"threads: must be an integer >= 0 (0 = all cores), got {threads!r}")
    out = Path(outdir).resolve()
    inputs = collect_specs(specs, out)
    if not inputs:
        raise FarmError("no world specs given")
    backend = "dask" if scheduler else "local"
    out.mkdir(parents=True, exist_ok=True)

    outcomes: list[WorldOutcome | None] = [None] * len(inputs)
    bar = None
    if progress:
        from tqdm import tqdm

        bar = tqdm(total=len(inputs), unit="world", desc="farm", leave=False)

    def report(i: int, outcome: WorldOutcome) -> None:
        outcomes[i] = outcome
        if bar is not None:
            bar.update(1)
            bar.set_postfix_str(f"{outcome.world} {outcome.status}")
        if on_world is not None:
            on_world(outcome)

    # read, validate and hash every spec; skip the cached ones
    pending: list[tuple[int, WorldSpec, str]] = []
    names: dict[str, str] = {}
    for i, inp in enumerate(inputs):
        label = Path(inp.source).stem if inp.path is not None else inp.source
        spec = inp.spec
        error = inp.error
        if spec is None and error is None and inp.path is not None:
            try:
                spec = load_spec(inp.path)
            except SpecError as exc:
                error = str(exc)
        if spec is None:
            report(i, WorldOutcome(label, inp.source, "failed", error=error, error_kind="input"))
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
        digest = world_hash(spec, tolerance_m=tolerance_m, offset=offset)
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
    workers: int | None = None
    if backend == "local":
        workers = min(jobs or _default_jobs(), len(pending))
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
                "threads": bake_threads,
                "globemill": __version__,
            },
        )
        for i, spec, digest in pending
    ]

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
            outcome.error_kind = "bake"
            report(job.index, outcome)
            return
        files: dict[str, dict[str, Any]] = res["files"]
        for entry in files.values():
            path = out / entry["name"]
            if not path.is_file() or path.stat().st_size != entry["bytes"]:
                outcome.error = (
                    f"worker {res.get('worker')} wrote {entry['name']} but it is not in {out} "
                    "here: the output folder must be shared by the farm and every worker"
                )
                outcome.error_kind = "bake"
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
            outcome.error = f"outputs written, but the cache record could not be: {exc}"
            outcome.error_kind = "bake"
            report(job.index, outcome)
            return
        outcome.status = "baked"
        outcome.triangles = res["triangles"]
        outcome.collision_triangles = res["collision_triangles"]
        outcome.outputs = {k: v["name"] for k, v in files.items()}
        report(job.index, outcome)

    interrupted = False
    try:
        for job in jobs_list:  # a world being re-baked is not cached until it is done
            _record_path(out, job.name).unlink(missing_ok=True)
        if jobs_list and scheduler:

            def connected(n: int) -> None:
                nonlocal workers
                workers = n

            _run_dask(jobs_list, scheduler, finish, connected)
        elif jobs_list and workers:
            _run_local(jobs_list, workers, finish)
    except KeyboardInterrupt:
        interrupted = True
        raise
    finally:
        if bar is not None:
            bar.close()
        _sweep_temporaries(out, [job.name for job in jobs_list])
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
                label = Path(inp.source).stem if inp.path is not None else inp.source
                got = WorldOutcome(
                    job.name if job else label,
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
