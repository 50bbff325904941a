"""The ``solitons`` command.  Thin: parses arguments, calls the API, maps failures to
exit codes.

Exit codes: 0 converged; 1 finished without meeting the stopping rule (or charge lost);
2 bad input (configuration, arguments, output directory); 3 energy became non-finite.
"""

from __future__ import annotations

import argparse
import sys
from importlib import resources
from pathlib import Path

EXIT_OK, EXIT_UNCONVERGED, EXIT_INPUT, EXIT_NON_FINITE = 0, 1, 2, 3


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="solitons",
        description="Relax knotted solitons of corrected sigma models on a 3D lattice.",
    )
    sub = parser.add_subparsers(dest="command", required=True)
    relax = sub.add_parser("relax", help="relax one configuration described by a TOML file")
    relax.add_argument("config", help="TOML configuration file")
    relax.add_argument("--out", help="output directory (default runs/<config name>)")
    demo = sub.add_parser("demo", help="relax the built-in example: the charge-1 Hopf soliton")
    demo.add_argument("--out", default="runs/demo", help="output directory (default runs/demo)")
    for p in (relax, demo):
        p.add_argument("overrides", nargs="*", metavar="dotted.key=value",
                       help="override configuration entries, e.g. grid.points=48 (anywhere "
                            "on the line)")
        p.add_argument("--resume", action="store_true", help="continue from DIR/checkpoint.h5")
        p.add_argument("--overwrite", action="store_true", help="replace an existing result")
        p.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    return parser


def demo_config_text() -> str:
    return resources.files("solitons").joinpath("examples/demo.toml").read_text()


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    args, extra = parser.parse_known_args(argv)
    unknown = [item for item in extra if item.startswith("-") or "=" not in item]
    if unknown:
        parser.error(f"unrecognised arguments: {' '.join(unknown)}")
    args.overrides = list(args.overrides) + extra
    # Imports after parsing so that --help answers without loading jax.
    from solitons.config import ConfigError, load
    from solitons.driver import RunError, relax, report

    try:
        if args.command == "demo":
            spec = load(None, args.overrides, text=demo_config_text())
            out = Path(args.out)
        else:
            spec = load(args.config, args.overrides)
            out = Path(args.out) if args.out else Path("runs") / Path(args.config).stem
        summary = relax(spec, out, resume=args.resume, overwrite=args.overwrite or args.command == "demo",
                        stream=None if args.quiet else sys.stderr)
    except (ConfigError, RunError) as error:
        print(f"solitons: error: {error}", file=sys.stderr)
        return EXIT_INPUT
    report(summary, out)
    if summary["status"] == "non_finite":
        return EXIT_NON_FINITE
    if summary["verdict"] != "stable":
        return EXIT_UNCONVERGED
    return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
