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
from pathlib import Path
from typing import TYPE_CHECKING, Any

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

EPILOG = """examples:
  globemill bake examples/pebblemoor.toml -o out/
  globemill bake examples/pebblemoor.toml -o out/ --tolerance-m 0.1 --threads 2
  globemill check examples/pebblemoor.toml out/
  globemill check examples/pebblemoor.toml out/ --json > check.json
  globemill bake examples/pebblemoor.toml -o out/ --format obj --format ply --level 1
  globemill export examples/pebblemoor.toml -o pebblemoor.lod2.ply --level 2
  globemill preview examples/pebblemoor.toml -o pebblemoor.png --color error --size 1600x640
  globemill preview examples/pebblemoor.toml -o top.png --views north/south --color chunk
  globemill schema > globemill.schema.json

exit codes:
  0 success, 1 a check found a guarantee broken, 2 bad input (spec, options, files),
  3 the bake could not be done (e.g. the triangle budget), 4 a file could not be written or
  read (named, with the cause: disk full, read-only, permission), 5 refused before the work
  (the estimated memory exceeds --max-memory), 130 interrupted, 143 terminated (SIGTERM);
  no partial output in any case
"""


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
    args: argparse.Namespace, levels_needed: int | None = None, outdir: Path | None = None
) -> BakeResult:
    """Load the spec, estimate the work (printed when large, refused over --max-memory), check
    that `outdir` can take the files, then bake with the shared options, a progress bar on a
    terminal."""
    from ._atomic import probe_folder
    from .bake import bake
    from .farm import available_memory, check_memory, estimate_bake
    from .spec import load_spec

    spec = load_spec(args.spec)
    if levels_needed is not None and not 0 <= levels_needed < spec.lod.levels:
        raise ValueError(
            f"level: must be an integer in 0..{spec.lod.levels - 1} (lod.levels of the spec), "
            f"got {levels_needed}"
        )
    est = None
    tol = spec.tolerance_m if args.tolerance_m is None else args.tolerance_m
    if tol > 0:  # else the bake names the bad tolerance
        est = estimate_bake(spec, tolerance_m=tol, threads=max(0, args.threads))
        if est.large and not args.quiet:
            _note(est.describe())
        limit = args.max_memory if args.max_memory is not None else available_memory()
        check_memory(est, limit)
    if outdir is not None:
        probe_folder(outdir, est.output_bytes if est is not None else 0)
    show = not args.quiet and sys.stderr.isatty()
    bar = None
    if show:
        from tqdm import tqdm

        bar = tqdm(total=None, unit="", desc=f"baking {spec.name}", leave=False)

    def progress(stage: str, done: int, total: int) -> None:
        # stages: refine (triangles of about `total`), levels, chunks (levels done), colliders
        if bar is not None:
            bar.set_description(f"baking {spec.name}: {stage}")
            bar.total = total
            bar.n = done
            bar.refresh()

    try:
        return bake(
            spec,
            tolerance_m=args.tolerance_m,
            offset=args.offset,
            threads=args.threads,
            accept_over_tolerance=args.accept_over_tolerance,
            progress=progress,
        )
    finally:
        if bar is not None:
            bar.close()


def _cmd_bake(args: argparse.Namespace) -> int:
    from .output import write_outputs

    formats = args.format or []
    options = _glb_options(args)
    result = _bake_spec(args, args.level if formats else None, Path(args.output))
    paths = write_outputs(
        result, Path(args.output), formats=formats, level=args.level, options=options
    )
    if not args.quiet:
        _out(summary_table(result.report))
        for p in paths.values():
            _out(f"  wrote {p}")
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
    from .preview import parse_size, view_frame, write_preview

    size = parse_size(args.size)
    views = [v.strip() for v in args.views.split("/")]
    for v in views:
        view_frame(v)
    result = _bake_spec(args, args.level, Path(args.output).parent)
    stats = write_preview(
        result, Path(args.output), color=args.color, level=args.level, size=size, views=views
    )
    if not args.quiet:
        print(
            f"{result.spec.name}: {args.color} picture of {stats.triangles:,} triangles, "
            f"{size[0]}x{size[1]} px, rendered in {stats.seconds:.2f} s\n  wrote {stats.path}"
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

    try:
        summary = farm(
            args.specs,
            args.output,
            jobs=args.jobs,
            scheduler=args.scheduler,
            tolerance_m=args.tolerance_m,
            offset=args.offset,
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


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="globemill",
        description="Bake the ground of small round game worlds into triangle meshes.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--version", action="version", version=f"globemill {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    b = sub.add_parser(
        "bake",
        help="mesh a world spec and write .glb + report",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
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
    b.set_defaults(func=_cmd_bake)

    c = sub.add_parser(
        "check",
        help="read a bake back and measure every guarantee (exit 1 if one fails)",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    c.add_argument("spec", help="the world spec the bake was made from (.toml or .json)")
    c.add_argument("outdir", help="folder holding <name>.glb, .collision.glb and .report.json")
    c.add_argument("--json", action="store_true", help="print every measurement as JSON")
    c.add_argument("--threads", type=int, default=0, help="worker threads (0 = all cores)")
    c.set_defaults(func=_cmd_check)

    f = sub.add_parser(
        "farm",
        help="bake many worlds (local processes or a Dask cluster), skipping unchanged ones",
        description="Bake every world spec into OUTDIR, with a local process pool or on an "
        "existing Dask cluster. Unchanged worlds (same spec, options and globemill version) are "
        "skipped; a world that fails is reported while the others bake. Writes OUTDIR/farm.json. "
        "One farm at a time writes into OUTDIR (a second one waits). Exit 0 when every world is "
        "baked or cached; when some failed, the first of: 4 a file could not be written, 3 a "
        "bake failed, 5 a world was refused over --max-memory, 2 a spec is bad; 2 when no spec "
        "is found (nothing written), 130 on Ctrl-C, 143 on SIGTERM.",
        epilog="examples:\n"
        "  globemill farm worlds/ -o out/\n"
        "  globemill farm 'worlds/**/*.toml' -o out/ --jobs 4\n"
        "  globemill farm worlds/ -o /shared/out --scheduler tcp://10.0.0.5:8786\n",
        formatter_class=argparse.RawDescriptionHelpFormatter,
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
    f.add_argument("--force", action="store_true", help="re-bake worlds even when cached")
    _add_memory_option(f)
    f.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    f.set_defaults(func=_cmd_farm)

    e = sub.add_parser(
        "export",
        help="bake a world spec and write one level as OBJ or PLY (for DCC tools)",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    e.add_argument("spec", help="world spec (.toml or .json)")
    e.add_argument("-o", "--output", required=True, help="output file, .obj or .ply")
    e.add_argument(
        "--format", choices=["obj", "ply"], default=None, help="default: from the file suffix"
    )
    e.add_argument("--level", type=int, default=0, help="which level (default 0, finest)")
    _add_bake_options(e)
    e.set_defaults(func=_cmd_export)

    v = sub.add_parser(
        "preview",
        help="bake a world spec and render it as a shaded PNG picture",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    v.add_argument("spec", help="world spec (.toml or .json)")
    v.add_argument("-o", "--output", required=True, help="output picture (.png)")
    v.add_argument(
        "--color",
        choices=["layer", "chunk", "level", "error"],
        default="layer",
        help="layer: material layers; chunk; level: chunks at mixed levels with stitched seams; "
        "error: measured deviation heat map (default: layer)",
    )
    v.add_argument("--level", type=int, default=0, help="which level (default 0, finest)")
    v.add_argument("--size", default="1600x640", help="picture size WIDTHxHEIGHT in pixels")
    v.add_argument(
        "--views",
        default="front/back/north",
        help="views separated by '/': front, back, east, west, north, south or LAT,LON in "
        "degrees (default: front/back/north)",
    )
    _add_bake_options(v)
    v.set_defaults(func=_cmd_preview)

    s = sub.add_parser("schema", help="print the JSON Schema of world spec files")
    s.set_defaults(func=_cmd_schema)
    return p


def main(argv: list[str] | None = None) -> int:
    from ._core import BakeError
    from .farm import FarmTerminated, MemoryLimitError
    from .spec import SpecError

    parser = build_parser()
    args = parser.parse_args(argv)
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
