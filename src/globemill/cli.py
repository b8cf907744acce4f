"""The `globemill` command line.

Exit codes: 0 success; 1 a check found a guarantee broken; 2 bad input (spec, options, files);
3 the bake could not be done (e.g. the triangle budget); 130 interrupted.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from . import __version__

EXIT_OK, EXIT_CHECK_FAILED, EXIT_BAD_INPUT, EXIT_BAKE_FAILED, EXIT_INTERRUPTED = 0, 1, 2, 3, 130

EPILOG = """examples:
  globemill bake examples/pebblemoor.toml -o out/
  globemill bake examples/pebblemoor.toml -o out/ --tolerance-m 0.1 --threads 2
  globemill schema > globemill.schema.json
"""


def _err(msg: str) -> None:
    print(f"globemill: error: {msg}", file=sys.stderr)


def _cmd_bake(args: argparse.Namespace) -> int:
    from .bake import bake
    from .output import write_outputs
    from .spec import load_spec

    spec = load_spec(args.spec)
    show = not args.quiet and sys.stderr.isatty()
    bar = None
    if show:
        from tqdm import tqdm

        bar = tqdm(total=None, unit=" rounds", desc=f"baking {spec.name}", leave=False)

    def progress(round_: int, triangles: int) -> None:
        if bar is not None:
            bar.update(1)
            bar.set_postfix(triangles=triangles)

    try:
        result = bake(
            spec,
            tolerance_m=args.tolerance_m,
            offset=args.offset,
            threads=args.threads,
            progress=progress,
        )
    finally:
        if bar is not None:
            bar.close()
    paths = write_outputs(result, Path(args.output))
    if not args.quiet:
        print(summary_table(result.report))
        for p in paths.values():
            print(f"  wrote {p}")
    return EXIT_OK


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


def _cmd_schema(args: argparse.Namespace) -> int:
    from .spec import json_schema

    print(json.dumps(json_schema(), indent=2))
    return EXIT_OK


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
    b.add_argument("--tolerance-m", type=float, default=None, help="override the spec's tolerance")
    b.add_argument(
        "--offset",
        choices=["radial", "normal", "exact"],
        default=None,
        help="how the mesher measures offset (default: the spec's)",
    )
    b.add_argument("--threads", type=int, default=0, help="worker threads (0 = all cores)")
    b.add_argument("-q", "--quiet", action="store_true", help="print nothing but errors")
    b.set_defaults(func=_cmd_bake)

    s = sub.add_parser("schema", help="print the JSON Schema of world spec files")
    s.set_defaults(func=_cmd_schema)
    return p


def main(argv: list[str] | None = None) -> int:
    from .spec import SpecError

    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args))
    except SpecError as exc:
        _err(str(exc))
        return EXIT_BAD_INPUT
    except ValueError as exc:
        msg = str(exc)
        _err(msg)
        return EXIT_BAKE_FAILED if "max_triangles" in msg else EXIT_BAD_INPUT
    except OSError as exc:
        _err(f"{exc.filename or ''}: {exc.strerror or exc}")
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        _err("interrupted; no partial output was written")
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
