"""`globemill bake --watch`: keep a world in an edit session and re-bake it on every save.

The spec file is looked at every `interval` seconds (its size, modification time and bytes). On
a change the spec is loaded and validated; a bad spec is reported and the last good outputs stay
as they are. A spec that differs only in features, layers or name goes to the session
(`EditSession.replace`: only the footprints of changed features are re-meshed); any other change
(radius, tolerance, lod table, ...) starts a new session. After each bake the outputs and the
picture `OUTDIR/<name>.preview.png` are rewritten, atomically.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

PREVIEW_SIZE = (1200, 480)


def _stamp(path: Path) -> tuple[int, int, str] | None:
    """(size, mtime ns, SHA-256 of the bytes) of the file, None when it cannot be read."""
    try:
        st = os.stat(path)
        digest = hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError:
        return None
    return st.st_size, st.st_mtime_ns, digest


def preview_path(outdir: Path, name: str) -> Path:
    return outdir / f"{name}.preview.png"


def watch(
    args: argparse.Namespace,
    options: Any,
    *,
    note: Callable[[str], None],
    out: Callable[[str], None],
    sleep: Callable[[float], None] = time.sleep,
) -> int:
    """Bake `args.spec` into `args.output`, then re-bake on every change of the file until
    `args.rounds` changes have been handled (None: until interrupted). Returns the exit code:
    0, or that of the first bake when it fails (a later failure is reported and waited out)."""
    from ._atomic import probe_folder
    from .cli import bake_options
    from .output import write_outputs
    from .preview import write_preview
    from .session import EditSession
    from .spec import SpecError, load_spec

    spec_path = Path(args.spec)
    outdir = Path(args.output)
    quiet = args.quiet
    opts = bake_options(args)
    opts.pop("accept_over_tolerance")
    accept = args.accept_over_tolerance

    def write(session: EditSession, what: str) -> None:
        result = session.result
        paths = write_outputs(
            result, outdir, formats=args.format or [], level=args.level, options=options
        )
        pic = preview_path(outdir, result.spec.name)
        write_preview(result, pic, size=PREVIEW_SIZE, views=("front", "back", "north"))
        if not quiet:
            lv = result.report["lods"][0]
            out(
                f"{result.spec.name}: {what}; level 0 {lv['triangles']:,} triangles, max error "
                f"{lv['max_error_m']:.4g} m; wrote {len(paths)} files and {pic.name}"
            )

    def new_session(spec: Any) -> EditSession:
        t0 = time.perf_counter()
        s = EditSession(spec, accept_over_tolerance=accept, **opts)
        write(s, f"baked in {time.perf_counter() - t0:.2f} s")
        return s

    spec = load_spec(spec_path)
    probe_folder(outdir)
    stamp = _stamp(spec_path)
    session = new_session(spec)
    if not quiet:
        note(f"watching {spec_path} (Ctrl-C stops)")
    handled = 0
    try:
        while args.rounds is None or handled < args.rounds:
            sleep(args.interval)
            now = _stamp(spec_path)
            if now is None or now == stamp:
                continue
            if stamp is not None and now[2] == stamp[2]:
                stamp = now  # saved without a change: nothing to bake
                continue
            stamp = now
            handled += 1
            try:
                spec = load_spec(spec_path)
            except SpecError as exc:
                note(f"error: {exc} (the last good bake stays; waiting for the next save)")
                continue
            try:
                if _same_settings(spec, session.spec):
                    rep = session.replace(spec)
                    write(session, f"{rep.chunk_count} chunk meshes changed in {rep.seconds:.3f} s")
                else:
                    session = new_session(spec)
            except ValueError as exc:  # a bake that cannot be done (budget, too thin, ...)
                note(f"error: {exc} (the last good bake stays; waiting for the next save)")
    except KeyboardInterrupt:
        if not quiet:
            note("stopped watching")
    return 0


def _same_settings(a: Any, b: Any) -> bool:
    """Whether an edit session of `b` can take spec `a` (see EditSession.replace)."""
    keep = {"features", "layers", "name"}
    return bool(a.model_dump(exclude=keep) == b.model_dump(exclude=keep))
