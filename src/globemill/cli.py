"""The `globemill` command line.

Exit codes: 0 success; 1 a check found a guarantee broken; 2 bad input (spec, options, files);
3 the bake could not be done (e.g. the triangle budget); 4 a file could not be written or read
(the message names it and the cause: disk full, read-only, permission); 5 refused before the
work: the estimate exceeds --max-memory; 130 interrupted (Ctrl-C); 143 terminated (SIGTERM).
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from pathlib import Path
from typing import TYPE_CHECKING, Any, NoReturn

from . import __version__

if TYPE_CHECKING:
    from .bake import BakeResult

EXIT_OK, EXIT_CHECK_FAILED, EXIT_BAD_INPUT, EXIT_BAKE_FAILED = 0, 1, 2, 3
EXIT_IO, EXIT_REFUSED, EXIT_INTERRUPTED, EXIT_TERMINATED = 4, 5, 130, 143
# a farm's exit code when worlds failed: the first kind of failure present, in this order
FARM_FAILURE_CODES = (
    ("io", EXIT_IO),
    ("bake", EXIT_BAKE_FAILED),
    ("refused", EXIT_REFUSED),
    ("input", EXIT_BAD_INPUT),
)

EXIT_CODES = """exit codes:
  0 success, 1 a check found a guarantee broken, 2 bad input (spec, options, files),
  3 the bake could not be done (e.g. the triangle budget), 4 a file could not be written or
  read (named, with the cause: disk full, read-only, permission), 5 refused before the work
  (the estimated memory exceeds --max-memory), 130 interrupted, 143 terminated (SIGTERM);
  no partial output in any case
"""

# each command's own examples (its --help), every one a valid command line
EXAMPLES = {
    "bake": [
        "globemill bake examples/pebblemoor.toml -o out/",
        "globemill bake examples/pebblemoor.toml -o out/ --tolerance-m 0.1 --threads 2",
        "globemill bake examples/pebblemoor.toml -o out/ --levels 3 --ratio 3 --no-collision",
        "globemill bake examples/pebblemoor.toml -o out/ --level-files --uv-attributes",
        "globemill bake examples/pebblemoor.toml -o out/ --format obj --format ply --level 1",
        "globemill bake examples/pebblemoor.toml -o out/ --watch",
    ],
    "check": [
        "globemill check examples/pebblemoor.toml out/",
        "globemill check examples/pebblemoor.toml out/ --json > check.json",
    ],
    "export": ["globemill export examples/pebblemoor.toml -o pebblemoor.lod2.ply --level 2"],
    "preview": [
        "globemill preview examples/pebblemoor.toml -o pebblemoor.png --color error "
        "--size 1600x640",
        "globemill preview examples/pebblemoor.toml -o top.jpg --views north/south --color chunk",
        "globemill preview out/ -o slope.png --color slope --grid 15",
    ],
    "farm": [
        "globemill farm worlds/ -o out/",
        "globemill farm 'worlds/**/*.toml' -o out/ --jobs 4",
        "globemill farm worlds/ -o out/ --levels 3 --chunk-level 2 --no-collision",
        "globemill farm worlds/ -o /shared/out --scheduler tcp://10.0.0.5:8786",
    ],
    "spec": [
        "globemill spec validate examples/pebblemoor.toml",
        "globemill spec convert examples/pebblemoor.toml -o pebblemoor.json",
        "globemill spec format examples/pebblemoor.json --check",
    ],
    "schema": ["globemill schema > globemill.schema.json"],
}


def _examples(command: str, codes: bool = True) -> str:
    text = "examples:\n" + "".join(f"  {line}\n" for line in EXAMPLES[command])
    return text + ("\n" + EXIT_CODES if codes else "")


# the top-level help: one example of each command (each command's --help has its own)
EPILOG = (
    "examples:\n" + "".join(f"  {lines[0]}\n" for lines in EXAMPLES.values()) + "\n" + EXIT_CODES
)


def _printable(text: str, stream: object) -> str:
    """`text` as the stream can encode it (a lone surrogate in a name must not crash a print)."""
    enc = getattr(stream, "encoding", None) or "utf-8"
    return text.encode(enc, "backslashreplace").decode(enc, "replace")


def _err(msg: str) -> None:
    print(_printable(f"globemill: error: {msg}", sys.stderr), file=sys.stderr)


def _note(msg: str) -> None:
    print(_printable(f"globemill: {msg}", sys.stderr), file=sys.stderr)


def _out(text: str) -> None:
    print(_printable(text, sys.stdout))


def _os_message(exc: OSError) -> str:
    from ._atomic import WriteError

    if isinstance(exc, WriteError):
        return str(exc)
    if exc.filename:
        return f"{exc.filename}: {exc.strerror or exc}"
    return str(exc.strerror or exc)


def _max_memory(text: str) -> int:
    """--max-memory GB (decimal gigabytes) as bytes."""
    try:
        gb = float(text)
    except ValueError:
        gb = float("nan")
    if not gb > 0 or gb == float("inf"):
        raise argparse.ArgumentTypeError(f"must be a number of GB > 0, got {text!r}")
    return int(gb * 1e9)


def _bake_spec(
    args: argparse.Namespace,
    levels_needed: int | None = None,
    outdir: Path | None = None,
    keep_bar: bool = False,
) -> BakeResult:
    """Load the spec, estimate the work (printed when large, refused over --max-memory), check
    that `outdir` can take the files, then bake with the shared options, a progress bar on a
    terminal."""
    from ._atomic import probe_folder
    from .bake import bake
    from .farm import available_memory, check_memory, estimate_bake, estimate_from_triangles
    from .spec import load_spec

    overrides = lod_overrides(args)  # a bad flag is named before the spec is even read
    spec = load_spec(args.spec)
    if not args.quiet:
        from .spec_warnings import warnings_for

        for w in warnings_for(spec):
            _note(f"warning: {args.spec}: {w}")
    nlev = spec.lod.levels if args.levels is None else args.levels
    if levels_needed is not None and nlev > 0 and not 0 <= levels_needed < nlev:
        where = "lod.levels of the spec" if args.levels is None else "--levels"
        raise ValueError(
            f"level: must be an integer in 0..{nlev - 1} ({where}), got {levels_needed}"
        )
    # the estimate (printed when large, refused over the memory limit, the output folder's free
    # space checked against it) is the bake's own budget survey, taken through on_estimate. only
    # when the spec's triangle budget would allow a bake larger than the memory limit does a
    # separate, capped survey run first, so that such a bake is refused before it starts
    est = None
    tol = spec.tolerance_m if args.tolerance_m is None else args.tolerance_m
    threads = max(0, args.threads)
    limit = args.max_memory if args.max_memory is not None else available_memory()
    if tol > 0 and limit is not None:  # else the bake names the bad tolerance
        most = estimate_from_triangles(spec, tol, spec.max_triangles, threads=threads)
        if most.memory_bytes > limit:
            est = estimate_bake(
                spec, tolerance_m=tol, threads=threads, chunk_level=overrides["chunk_level"]
            )
            if est.large and not args.quiet:
                _note(est.describe())
            check_memory(est, limit)
    if outdir is not None:
        probe_folder(outdir, est.output_bytes if est is not None else 0)

    def on_estimate(triangles: int) -> None:
        if bar is not None:
            bar.estimated(triangles)  # refinement's total is known from here on
        if est is not None:
            return  # checked before the bake
        e = estimate_from_triangles(spec, tol, triangles, threads=threads)
        if e.large and not args.quiet:
            if bar is not None:
                bar.write(_printable(f"globemill: {e.describe()}", sys.stderr))
            else:
                _note(e.describe())
        check_memory(e, limit)
        if outdir is not None:
            probe_folder(outdir, e.output_bytes)

    show = not args.quiet and sys.stderr.isatty()
    bar = None
    if show:
        from .progress import ProgressBar

        bar = ProgressBar(spec.name, collision=overrides["collision"])
    args.progress_bar = bar  # the writer reports its stage to the same bar
    progress = bar
    ok = False
    try:
        result = bake(spec, **bake_options(args), progress=progress, on_estimate=on_estimate)
        ok = True
        return result
    finally:
        if bar is not None and not (ok and keep_bar):
            bar.close()


def bake_options(args: argparse.Namespace) -> dict[str, Any]:
    """The keyword arguments of `bake` (and of `EditSession`) the shared bake flags give."""
    return {
        "tolerance_m": args.tolerance_m,
        "offset": args.offset,
        **lod_overrides(args),
        "threads": args.threads,
        "accept_over_tolerance": args.accept_over_tolerance,
    }


# ---- level table flags: bake, export, preview and farm (bake.check_overrides) ------------------

# each override of the level table and the flag that sets it
LOD_FLAGS = {
    "levels": "--levels",
    "ratio": "--ratio",
    "chunk_level": "--chunk-level",
    "seams": "--seams",
    "collision": "--no-collision",
}


def _add_lod_options(p: argparse.ArgumentParser, whose: str = "the spec's") -> None:
    """--levels, --ratio, --chunk-level, --seams and --no-collision (read by lod_overrides)."""
    g = p.add_argument_group(f"levels, chunks and colliders (default: {whose} lod table)")
    g.add_argument("--levels", type=int, default=None, metavar="N", help="levels of detail")
    g.add_argument(
        "--ratio",
        type=float,
        default=None,
        metavar="R",
        help="tolerance of level k = tolerance_m * R^k",
    )
    g.add_argument(
        "--chunk-level",
        type=int,
        default=None,
        metavar="C",
        help="20 * 4^C chunks",
    )
    g.add_argument(
        "--seams",
        choices=["stitch", "skirt"],
        default=None,
        help="stitched border variants or skirts where chunks of different levels meet",
    )
    g.add_argument(
        "--no-collision", action="store_true", help="bake no colliders (no .collision.glb)"
    )


def lod_overrides(args: argparse.Namespace) -> dict[str, Any]:
    """The keyword arguments of `bake` (and `farm`) the flags of _add_lod_options give: levels,
    ratio, chunk_level, seams (None: the spec's) and collision. A value no world can be baked
    with raises ValueError naming the flag and its allowed range (the core's check)."""
    from .bake import check_overrides

    over: dict[str, Any] = {
        "levels": args.levels,
        "ratio": args.ratio,
        "chunk_level": args.chunk_level,
        "seams": args.seams,
        "collision": not args.no_collision,
    }
    try:
        check_overrides(**over)
    except ValueError as exc:
        key, sep, rest = str(exc).partition(":")
        if sep and key in LOD_FLAGS:
            raise ValueError(f"{LOD_FLAGS[key]}:{rest}") from None
        raise
    return over


def _cmd_bake(args: argparse.Namespace) -> int:
    from .output import write_outputs

    formats = args.format or []
    options = _glb_options(args)
    if args.watch:
        from .watch import watch

        return watch(args, options, note=_note, out=_out)
    result = _bake_spec(args, args.level if formats else None, Path(args.output), keep_bar=True)
    bar = args.progress_bar
    try:
        paths = write_outputs(
            result,
            Path(args.output),
            formats=formats,
            level=args.level,
            options=options,
            progress=bar,
        )
    finally:
        if bar is not None:
            bar.close()
    if not args.quiet:
        _out(summary_table(result.report))
        for p in paths.values():
            _out(f"  wrote {p}")
        for n in result.report["export"].get("removed", []):
            _out(f"  removed {Path(args.output) / n} (the previous bake's, not made this time)")
    return EXIT_OK


def _cmd_export(args: argparse.Namespace) -> int:
    from ._atomic import write_files_atomically
    from .export_mesh import FORMATS, mesh_bytes

    out = Path(args.output)
    fmt = args.format or out.suffix.lower().lstrip(".")
    if fmt not in FORMATS:
        raise ValueError(
            f"format: must be one of {', '.join(FORMATS)} (from --format or the file suffix), "
            f"got {fmt!r}"
        )
    result = _bake_spec(args, args.level, out.parent)
    write_files_atomically({out: mesh_bytes(result, args.level, fmt)})
    if not args.quiet:
        lv = result.report["lods"][args.level]
        print(
            f"{result.spec.name}: level {args.level}, {lv['triangles']:,} triangles, "
            f"{lv['vertices']:,} vertices, tolerance {lv['tolerance_m']:g} m\n  wrote {out}"
        )
    return EXIT_OK


def _cmd_preview(args: argparse.Namespace) -> int:
    from .preview import (
        GROUND_COLOR_MODES,
        check_views,
        parse_size,
        picture_format,
        write_preview,
    )

    size = parse_size(args.size)
    views = [v.strip() for v in args.views.split("/")]
    check_views(views, args.grid)
    picture_format(args.output)
    src = Path(args.spec)
    picture = {"color": args.color, "level": args.level, "size": size, "views": views}
    picture.update(grid_deg=args.grid, names=not args.no_names)
    if src.is_dir() or src.name.endswith(".report.json"):
        if args.color not in GROUND_COLOR_MODES:
            raise ValueError(
                f"color: a finished bake is drawn by {', '.join(GROUND_COLOR_MODES)} "
                f"(error and level need the spec), got {args.color!r}"
            )
        probe = Path(args.output).parent
        from ._atomic import probe_folder

        probe_folder(probe)
        stats = write_preview(src, Path(args.output), **picture)
        what = f"{src}: {args.color} picture of the finished bake"
    else:
        result = _bake_spec(args, args.level, Path(args.output).parent)
        stats = write_preview(result, Path(args.output), **picture)
        what = f"{result.spec.name}: {args.color} picture"
    if not args.quiet:
        print(
            f"{what}, {stats.triangles:,} triangles, {size[0]}x{size[1]} px, rendered in "
            f"{stats.seconds:.2f} s\n  wrote {stats.path}"
        )
    return EXIT_OK


def _add_bake_options(p: argparse.ArgumentParser) -> None:
    """The options every command that bakes shares, spelled the same everywhere."""
    p.add_argument("--tolerance-m", type=float, default=None, help="override the spec's tolerance")
    p.add_argument(
        "--offset",
        choices=["radial", "normal", "exact"],
        default=None,
        help="how the mesher measures offset (default: the spec's)",
    )
    p.add_argument("--threads", type=int, default=0, help="worker threads (0 = all cores)")
    _add_lod_options(p)
    p.add_argument(
        "--accept-over-tolerance",
        action="store_true",
        help="keep a bake whose level or collider measures beyond its tolerance (by default it "
        "fails with exit 3 and writes nothing)",
    )
    _add_memory_option(p)
    p.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")


# ---- .glb layout flags (output.GlbOptions; docs/gltf.md, "Layouts") ----------------------------


def _share(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not 0 < value <= 1:
        raise argparse.ArgumentTypeError(f"must be a number in (0, 1], got {text!r}")
    return value


def _add_layout_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group(".glb layout (docs/gltf.md, Layouts)")
    g.add_argument(
        "--level-files",
        action="store_true",
        help="also write one complete OUTDIR/<name>.lod<k>.glb per level (for engines that "
        "ignore MSFT_lod)",
    )
    g.add_argument(
        "--uv-attributes",
        action="store_true",
        help="also put slope and altitude in TEXCOORD_0 and the layer in TEXCOORD_1",
    )
    g.add_argument(
        "--no-gpu-order",
        action="store_true",
        help="keep the core's triangle and vertex order (default: vertex cache and fetch order)",
    )
    g.add_argument(
        "--quantize",
        action="store_true",
        help="int16 positions and int8 normals (KHR_mesh_quantization) when the rounding error "
        "stays within --quantize-share of every level's tolerance, else float32",
    )
    g.add_argument(
        "--quantize-share",
        type=_share,
        default=None,
        metavar="SHARE",
        help="largest rounding error allowed, as a share of the level's tolerance (default 0.1)",
    )


def _glb_options(args: argparse.Namespace) -> Any:
    from .output import QUANTIZE_SHARE, GlbOptions

    return GlbOptions(
        level_files=args.level_files,
        uv_attributes=args.uv_attributes,
        gpu_order=not args.no_gpu_order,
        quantize=args.quantize,
        quantize_share=QUANTIZE_SHARE if args.quantize_share is None else args.quantize_share,
    )


# ---- end of .glb layout flags ----------------------------------------------------------------


def _add_memory_option(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--max-memory",
        type=_max_memory,
        default=None,
        metavar="GB",
        help="refuse (exit 5) a bake whose estimated memory exceeds this many GB, before it "
        "starts (default: the memory available now)",
    )


def summary_table(report: dict) -> str:
    """The levels and colliders of a bake report as a small text table."""
    rows = [("level", "tolerance m", "triangles", "vertices", "max error m", "seconds")]
    for lv in report["lods"]:
        rows.append(
            (
                str(lv["level"]),
                f"{lv['tolerance_m']:g}",
                f"{lv['triangles']:,}",
                f"{lv['vertices']:,}",
                f"{lv['max_error_m']:.4g}",
                f"{lv['seconds']:.2f}",
            )
        )
    col = report.get("collision")
    if col:
        rows.append(
            (
                "collision",
                f"{col['tolerance_m']:g}",
                f"{col['triangles']:,}",
                "",
                f"{col['max_error_m']:.4g}",
                f"{col['seconds']:.2f}",
            )
        )
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = [
        f"{report['planet']}: {report['lods'][0]['chunks']} chunks, {report['seconds_total']:.2f} s"
    ]
    for r in rows:
        lines.append("  " + "  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)))
    return "\n".join(lines)


def _cmd_check(args: argparse.Namespace) -> int:
    from .check import CheckInputError, run_check

    try:
        report = run_check(args.spec, args.outdir, threads=args.threads)
    except CheckInputError as exc:
        _err(str(exc))
        return EXIT_BAD_INPUT
    if args.json:
        print(json.dumps(report.to_dict(), indent=2))
    else:
        print(report.table())
    if not report.ok:
        _err(f"{len([c for c in report.checks if not c.ok])} check(s) failed")
        return EXIT_CHECK_FAILED
    return EXIT_OK


def _cmd_schema(args: argparse.Namespace) -> int:
    from .spec import json_schema

    print(json.dumps(json_schema(), indent=2))
    return EXIT_OK


def _cmd_farm(args: argparse.Namespace) -> int:
    from .farm import FarmError, farm

    overrides = lod_overrides(args)  # a bad flag: exit 2 before anything is written
    try:
        summary = farm(
            args.specs,
            args.output,
            jobs=args.jobs,
            scheduler=args.scheduler,
            tolerance_m=args.tolerance_m,
            offset=args.offset,
            **overrides,
            threads=args.threads,
            force=args.force,
            progress=not args.quiet and sys.stderr.isatty(),
            max_memory_bytes=args.max_memory,
            log=None if args.quiet else _note,
        )
    except FarmError as exc:
        _err(str(exc))
        return EXIT_BAD_INPUT
    if not args.quiet:
        _out(summary.table())
        _out(f"  wrote {summary.outdir / 'farm.json'}")
    for w in summary.failed:
        _err(f"{w.world} ({w.source}): {w.error}")
    if summary.ok:
        return EXIT_OK
    kinds = {w.error_kind for w in summary.failed}
    return next((code for kind, code in FARM_FAILURE_CODES if kind in kinds), EXIT_BAKE_FAILED)


class _Parser(argparse.ArgumentParser):
    """Bad options give one line, exit 2 (argparse prints the usage too, a screenful)."""

    def error(self, message: str) -> NoReturn:
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="globemill",
        description="Bake the ground of small round game worlds into triangle meshes.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--version", action="version", version=f"globemill {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    def command(name: str, help: str, codes: bool = True, **kw: Any) -> argparse.ArgumentParser:
        return sub.add_parser(
            name,
            help=help,
            epilog=_examples(name, codes),
            formatter_class=argparse.RawDescriptionHelpFormatter,
            **kw,
        )

    b = command("bake", "mesh a world spec and write .glb + report")
    b.add_argument("spec", help="world spec (.toml or .json)")
    b.add_argument("-o", "--output", required=True, help="output folder")
    _add_bake_options(b)
    b.add_argument(
        "--format",
        action="append",
        choices=["obj", "ply"],
        help="also write level --level as OUTDIR/<name>.lod<level>.<format> (repeatable)",
    )
    b.add_argument("--level", type=int, default=0, help="level for --format (default 0, finest)")
    _add_layout_options(b)
    w = b.add_argument_group("watching (docs/editing.md)")
    w.add_argument(
        "--watch",
        action="store_true",
        help="stay running: re-bake through an edit session on every save of SPEC and "
        "refresh OUTDIR/<name>.preview.png (Ctrl-C stops)",
    )
    w.add_argument(
        "--interval",
        type=_seconds,
        default=0.5,
        metavar="S",
        help="with --watch: seconds between looks at SPEC (default 0.5)",
    )
    w.add_argument(
        "--rounds",
        type=_count,
        default=None,
        metavar="N",
        help="with --watch: stop after N saves have been handled (default: until Ctrl-C)",
    )
    b.set_defaults(func=_cmd_bake)

    c = command("check", "read a bake back and measure every guarantee (exit 1 if one fails)")
    c.add_argument("spec", help="the world spec the bake was made from (.toml or .json)")
    c.add_argument("outdir", help="folder holding <name>.glb, .collision.glb and .report.json")
    c.add_argument("--json", action="store_true", help="print every measurement as JSON")
    c.add_argument("--threads", type=int, default=0, help="worker threads (0 = all cores)")
    c.set_defaults(func=_cmd_check)

    f = command(
        "farm",
        "bake many worlds (local processes or a Dask cluster), skipping unchanged ones",
        codes=False,
        description="Bake every world spec into OUTDIR, with a local process pool or on an "
        "existing Dask cluster. Unchanged worlds (same spec, options and globemill version) are "
        "skipped; a world that fails is reported while the others bake. Writes OUTDIR/farm.json. "
        "One farm at a time writes into OUTDIR (a second one waits). Exit 0 when every world is "
        "baked or cached; when some failed, the first of: 4 a file could not be written, 3 a "
        "bake failed, 5 a world was refused over --max-memory, 2 a spec is bad; 2 when no spec "
        "is found (nothing written), 130 on Ctrl-C, 143 on SIGTERM.",
    )
    f.add_argument("specs", nargs="+", help="world spec files, folders or glob patterns")
    f.add_argument("-o", "--output", required=True, help="output folder")
    f.add_argument(
        "--jobs",
        type=int,
        default=None,
        help="local worker processes (default: all cores; ignored with --scheduler)",
    )
    f.add_argument(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="Dask scheduler, e.g. tcp://host:8786 (needs pip install 'globemill[farm]'); the "
        "output folder must be shared with its workers",
    )
    f.add_argument("--tolerance-m", type=float, default=None, help="override every tolerance")
    f.add_argument(
        "--offset",
        choices=["radial", "normal", "exact"],
        default=None,
        help="how the mesher measures offset (default: each spec's)",
    )
    f.add_argument(
        "--threads",
        type=int,
        default=None,
        help="threads per bake (default: 1 when bakes run side by side, else all cores)",
    )
    _add_lod_options(f, "each spec's")
    f.add_argument("--force", action="store_true", help="re-bake worlds even when cached")
    _add_memory_option(f)
    f.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    f.set_defaults(func=_cmd_farm)

    e = command("export", "bake a world spec and write one level as OBJ or PLY (for DCC tools)")
    e.add_argument("spec", help="world spec (.toml or .json)")
    e.add_argument("-o", "--output", required=True, help="output file, .obj or .ply")
    e.add_argument(
        "--format", choices=["obj", "ply"], default=None, help="default: from the file suffix"
    )
    e.add_argument("--level", type=int, default=0, help="which level (default 0, finest)")
    _add_bake_options(e)
    e.set_defaults(func=_cmd_export)

    v = command(
        "preview",
        "render shaded views of a world spec (baked first) or of a finished bake's files",
    )
    v.add_argument(
        "spec",
        metavar="SPEC|BAKE",
        help="world spec (.toml or .json) to bake and draw, or a bake's folder (or its "
        "<name>.report.json) to draw from its files without baking again",
    )
    v.add_argument("-o", "--output", required=True, help="output picture (.png, .jpg or .jpeg)")
    v.add_argument(
        "--color",
        choices=["layer", "altitude", "slope", "chunk", "level", "error"],
        default="layer",
        help="layer: material layers; altitude; slope; chunk; level: chunks at mixed levels "
        "with stitched seams; error: measured deviation heat map (level and error need a "
        "spec; default: layer)",
    )
    v.add_argument("--level", type=int, default=0, help="which level (default 0, finest)")
    v.add_argument("--size", default="1600x640", help="picture size WIDTHxHEIGHT in pixels")
    v.add_argument(
        "--views",
        default="front/back/north",
        help="views separated by '/': front, back, east, west, north, south or LAT,LON in "
        "degrees (default: front/back/north)",
    )
    v.add_argument(
        "--grid",
        type=float,
        default=30.0,
        metavar="DEG",
        help="latitude/longitude lines every DEG degrees (1..90; 0: none; default 30)",
    )
    v.add_argument("--no-names", action="store_true", help="do not write feature names")
    _add_bake_options(v)
    v.set_defaults(func=_cmd_preview)

    sp = command("spec", "validate world spec files, convert them (TOML <-> JSON), format them")
    spsub = sp.add_subparsers(dest="spec_command", metavar="ACTION")
    spsub.required = True

    def action(name: str, help: str) -> argparse.ArgumentParser:
        # each action's --help ends with its own example from the spec command's list
        mine = [line for line in EXAMPLES["spec"] if line.startswith(f"globemill spec {name} ")]
        return spsub.add_parser(
            name,
            help=help,
            epilog="examples:\n" + "".join(f"  {line}\n" for line in mine),
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )

    sv = action("validate", "check specs (exit 2 naming every problem); print warnings")
    sv.add_argument("specs", nargs="+", metavar="SPEC", help="world spec files")
    sv.set_defaults(func=_cmd_spec_validate)
    sc = action("convert", "write a spec in the other format (by -o's suffix), keys in order")
    sc.add_argument("spec", help="world spec (.toml or .json)")
    sc.add_argument("-o", "--output", required=True, help="the new file (.toml or .json)")
    sc.set_defaults(func=_cmd_spec_convert)
    sf = action("format", "rewrite specs in place with their keys in the documented order")
    sf.add_argument("specs", nargs="+", metavar="SPEC", help="world spec files")
    sf.add_argument(
        "--check",
        action="store_true",
        help="change nothing; exit 1 when a file is not formatted",
    )
    sf.set_defaults(func=_cmd_spec_format)

    s = command("schema", "print the JSON Schema of world spec files", codes=False)
    s.set_defaults(func=_cmd_schema)
    # the top-level help ends with every command's usage: every option, as the README says
    import textwrap

    usages = "".join(
        textwrap.fill(
            " ".join(parser.format_usage().split()[1:]),
            width=96,
            initial_indent="  ",
            subsequent_indent="      ",
            break_on_hyphens=False,
        )
        + "\n"
        for parser in (b, c, e, v, f, sv, sc, sf, s)
    )
    p.epilog = f"every command and option (COMMAND --help explains each):\n{usages}\n{EPILOG}"
    return p


def _seconds(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not 0.01 <= value <= 3600:
        raise argparse.ArgumentTypeError(f"must be a number of seconds in 0.01..3600, got {text!r}")
    return value


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be an integer >= 1, got {text!r}")
    return value


def _cmd_spec_validate(args: argparse.Namespace) -> int:
    from .spec import SpecError, load_spec
    from .spec_warnings import warnings_for

    code = EXIT_OK
    for path in args.specs:
        try:
            spec = load_spec(path)
        except SpecError as exc:
            _err(str(exc))
            code = EXIT_BAD_INPUT
            continue
        warn = warnings_for(spec)
        for w in warn:
            _note(f"warning: {path}: {w}")
        _out(
            f"{path}: valid, world {spec.name!r}, {len(spec.features)} features, "
            f"{len(spec.layers)} layers" + (f", {len(warn)} warning(s)" if warn else "")
        )
    return code


def _cmd_spec_convert(args: argparse.Namespace) -> int:
    from .spec_files import convert

    spec = convert(args.spec, args.output)
    _out(f"{args.spec}: world {spec.name!r}\n  wrote {args.output}")
    return EXIT_OK


def _cmd_spec_format(args: argparse.Namespace) -> int:
    from ._atomic import write_files_atomically
    from .spec import SpecError
    from .spec_files import formatted

    todo: dict[Path, bytes] = {}
    code = EXIT_OK
    for path in args.specs:
        try:
            before, after, _ = formatted(path)
        except SpecError as exc:
            _err(str(exc))
            code = EXIT_BAD_INPUT
            continue
        if before == after:
            continue
        if args.check:
            _out(f"{path}: would be reformatted")
            code = max(code, EXIT_CHECK_FAILED)
        else:
            todo[Path(path)] = after.encode("utf-8")
    if code == EXIT_BAD_INPUT:
        return code  # one bad spec: nothing is rewritten
    if todo:
        write_files_atomically(todo)
        for path in todo:
            _out(f"  reformatted {path}")
    return code


def main(argv: list[str] | None = None) -> int:
    from .spec import SpecDeprecationWarning

    parser = build_parser()
    args = parser.parse_args(argv)
    with warnings.catch_warnings():
        # a renamed spec key: one line, as the other messages
        warnings.simplefilter("always", SpecDeprecationWarning)
        shown = warnings.showwarning

        def show(message: Any, category: Any, *rest: Any, **kw: Any) -> None:
            if issubclass(category, SpecDeprecationWarning):
                if not getattr(args, "quiet", False):
                    _note(f"warning: {message}")
            else:
                shown(message, category, *rest, **kw)

        warnings.showwarning = show
        return _run(args)


def _run(args: argparse.Namespace) -> int:
    from ._core import BakeError
    from .farm import FarmTerminated, MemoryLimitError
    from .spec import SpecError

    try:
        return int(args.func(args))
    except SpecError as exc:
        _err(str(exc))
        return EXIT_BAD_INPUT
    except MemoryLimitError as exc:
        _err(str(exc))
        return EXIT_REFUSED
    except BakeError as exc:
        _err(str(exc))
        return EXIT_BAKE_FAILED
    except ValueError as exc:
        msg = str(exc)
        _err(msg)
        return EXIT_BAKE_FAILED if "max_triangles" in msg else EXIT_BAD_INPUT
    except OSError as exc:
        _err(_os_message(exc))
        return EXIT_IO
    except ImportError as exc:
        extra = {"matplotlib": "preview", "meshio": "formats"}.get(exc.name or "", "")
        hint = f"; install it with: pip install 'globemill[{extra}]'" if extra else ""
        _err(f"{exc.name or exc} is needed for this command{hint}")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt as exc:
        if isinstance(exc, FarmTerminated):
            _err("terminated (SIGTERM); no partial output was written")
            return EXIT_TERMINATED
        _err("interrupted; no partial output was written")
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
