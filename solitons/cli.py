"""The ``solitons`` command.  Thin: parses arguments, calls the API, maps failures to
exit codes.

Exit codes: 0 converged and stable; 1 finished without meeting the stopping rule (or
charge lost); 2 bad input (configuration, arguments, files, output directory); 3 energy
became non-finite; 130 interrupted by Ctrl-C (SIGINT), 143 by SIGTERM: the run stops after
its current step and writes a checkpoint for --resume (solitons.interrupts).
"""

from __future__ import annotations

import argparse
import sys
from importlib import resources
from pathlib import Path

# Exit codes (README, "Reading a result"): a script can rely on these.
EXIT_OK = 0            # converged, whatever the verdict (the verdict is in the output and summary.json)
EXIT_UNCONVERGED = 1   # finished without meeting the stopping rule (or a campaign with failed runs)
EXIT_INPUT = 2         # refused before any work: configuration, arguments, output place, memory
EXIT_NON_FINITE = 3    # the energy became non-finite, or a flow blew up numerically
EXIT_CHARGE_LOST = 4   # the relaxed state lost its Hopf charge (by more than 1/2)
# interrupted by a signal: 128 + its number (130 SIGINT, 143 SIGTERM)


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="solitons", allow_abbrev=False,
        description="Relax knotted solitons of corrected sigma models on a 3D lattice.",
    )
    sub = parser.add_subparsers(dest="command", required=True)
    relax = sub.add_parser("relax", allow_abbrev=False, help="relax one configuration described by a TOML file")
    relax.add_argument("config", help="TOML configuration file")
    relax.add_argument("--out", help="output directory (default runs/<config name>)")
    demo = sub.add_parser("demo", allow_abbrev=False, help="relax the built-in example: the charge-1 Hopf soliton")
    demo.add_argument("--out", default="runs/demo", help="output directory (default runs/demo)")
    for p in (relax, demo):
        p.add_argument("overrides", nargs="*", metavar="dotted.key=value",
                       help="override configuration entries, e.g. grid.points=48 (anywhere "
                            "on the line)")
        p.add_argument("--resume", action="store_true", help="continue from DIR/checkpoint.h5")
        p.add_argument("--overwrite", action="store_true",
                       help="replace an existing result (and delete an unfinished run's checkpoint)")
        p.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
        p.add_argument("--no-figures", dest="figures", action="store_false",
                       help="skip the PNG figures at the end of the run")
    scan = sub.add_parser("scan", allow_abbrev=False, help="relax a configuration over a range of couplings ([scan] table)")
    scan.add_argument("config", help="TOML configuration with a [scan] table")
    scan.add_argument("--out", help="output directory (default runs/<config name>)")
    scan.add_argument("overrides", nargs="*", metavar="dotted.key=value")
    survey = sub.add_parser("survey", allow_abbrev=False, help="energy against Hopf charge over families of initial data "
                                           "([survey] table)")
    survey.add_argument("config", help="TOML configuration with a [survey] table")
    survey.add_argument("--out", help="output directory (default runs/<config name>)")
    survey.add_argument("overrides", nargs="*", metavar="dotted.key=value")
    survey.add_argument("--table-only", action="store_true",
                        help="relax nothing: tabulate the runs the catalogue already holds")
    for p in (scan, survey):
        p.add_argument("--quiet", action="store_true", help="no progress bar")
        p.add_argument("--no-figures", dest="figures", action="store_false")
        p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                       help="a running dask scheduler (tcp://host:port); default: a local cluster "
                            "with one single-threaded worker per core; 'inline' runs in this process")
        p.add_argument("--workers", type=int, default=None, help="local cluster size (default: cores)")
    continuum = sub.add_parser("continuum", allow_abbrev=False, help="relax one configuration at three or more spacings "
                               "([continuum] table) and extrapolate to h -> 0")
    continuum.add_argument("config", help="TOML configuration with a [continuum] table")
    continuum.add_argument("--out", help="output directory (default runs/<config name>)")
    continuum.add_argument("overrides", nargs="*", metavar="dotted.key=value")
    continuum.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    show = sub.add_parser("show", allow_abbrev=False, help="write PNG figures of a result file, or with --html "
                          "one interactive 3D page")
    show.add_argument("result", help="a result.h5 written by relax (or the run directory holding it)")
    show.add_argument("--out", help="directory for the figures (default: next to the result)")
    show.add_argument("--html", action="store_true",
                      help="write only view.html: a self-contained interactive page (rotatable isosurface "
                           "coloured by the phase, position curves, the run's numbers); works offline")
    show.add_argument("--level", type=float, default=None,
                      help="isosurface level of n3 (default -0.8, a tube around n = -e3)")
    gallery = sub.add_parser("gallery", allow_abbrev=False, help="one figure with the isosurface of every result")
    gallery.add_argument("results", nargs="+", help="result.h5 files")
    gallery.add_argument("--out", required=True, help="PNG file to write")
    gallery.add_argument("--level", type=float, default=None)
    return parser


def demo_config_text() -> str:
    return resources.files("solitons").joinpath("examples/demo.toml").read_text()


def _figures(out: Path, level=None, stream=None):
    from solitons.io.results import read_result
    from solitons.views.plots import DEFAULT_LEVEL, write_figures

    paths = write_figures(read_result(out / "result.h5"), out,
                          DEFAULT_LEVEL if level is None else level)
    print("figures       " + "  ".join(str(p) for p in paths), file=stream or sys.stdout)


def main(argv: list[str] | None = None) -> int:
    try:
        return _main(argv)
    except KeyboardInterrupt:  # before the handler was installed or after it was removed
        print("solitons: interrupted by SIGINT (Ctrl-C); nothing was written", file=sys.stderr, flush=True)
        return 128 + 2


def _main(argv: list[str] | None) -> int:
    parser = _parser()
    args, extra = parser.parse_known_args(argv)
    if args.command in ("relax", "demo", "scan", "survey", "continuum"):
        unknown = [item for item in extra if item.startswith("-") or "=" not in item]
        if unknown:
            parser.error(f"unrecognised arguments: {' '.join(unknown)}")
        args.overrides = list(args.overrides) + extra
    elif extra:
        parser.error(f"unrecognised arguments: {' '.join(extra)}")
    refusal = _refusal(args)
    if refusal:
        print(f"solitons: error: {refusal}", file=sys.stderr)
        return EXIT_INPUT
    from solitons import interrupts

    try:
        with interrupts.handling():
            return _run(args)
    except interrupts.Interrupted as stop:
        if getattr(stop, "campaign", None) is not None:
            hint = (f"; the runs that finished are kept in {stop.campaign}: rerun the same command to go on "
                    "(finished runs are skipped, a run stopped midway resumes from its checkpoint if it wrote one)")
        elif stop.checkpoint is not None and Path(stop.checkpoint).exists():
            hint = (f" after step {stop.step}; its state is in {stop.checkpoint}: rerun the same command "
                    "with --resume to continue exactly where it stopped")
        else:
            hint = "; no checkpoint was written (the relaxation had not started)"
        print(f"solitons: interrupted by {stop}{hint}", file=sys.stderr, flush=True)
        return stop.exit_code


def _refusal(args) -> str | None:
    """What is wrong with the command line, checked before any import or work (one line
    naming the option and its value), or None."""
    if getattr(args, "resume", False) and getattr(args, "overwrite", False):
        return "--resume and --overwrite contradict each other: continue the run, or start it again"
    workers = getattr(args, "workers", None)
    if workers is not None and workers < 1:
        return f"--workers {workers}: must be a positive number of worker processes"
    level = getattr(args, "level", None)
    if level is not None and not -1.0 < level < 1.0:
        return f"--level {level}: the isosurface level of n3 must lie strictly between -1 and 1"
    scheduler = getattr(args, "scheduler", None)
    if scheduler not in (None, "inline"):
        return _scheduler_refusal(scheduler)
    return None


SCHEDULER_PROBE_SECONDS = 5.0


def _scheduler_refusal(address: str) -> str | None:
    """A dask scheduler address that nothing answers at is refused at once (dask itself
    waits 30 s and then raises)."""
    import socket
    from urllib.parse import urlsplit

    parts = urlsplit(address)
    try:
        port = parts.port
    except ValueError:
        port = None
    if parts.scheme != "tcp" or not parts.hostname or port is None:
        return f"--scheduler {address}: expected tcp://host:port (or 'inline')"
    try:
        with socket.create_connection((parts.hostname, port), timeout=SCHEDULER_PROBE_SECONDS):
            return None
    except OSError as error:
        return f"--scheduler {address}: no dask scheduler answers there ({error.strerror or error})"


def _run(args) -> int:
    from solitons import interrupts

    # Imports after parsing so that --help answers without loading numba; a signal during
    # them is recorded and acted on after (some imports swallow a KeyboardInterrupt).
    with interrupts.deferred():
        import solitons.campaigns.scan  # noqa: F401  (the modules every command needs)
        import solitons.run  # noqa: F401
    interrupts.check()

    try:
        return _command(args)
    except interrupts.Interrupted as stop:
        stop.campaign = _campaign_dir(args)
        raise


def _campaign_dir(args):
    if args.command in ("scan", "survey", "continuum"):
        return Path(args.out) if args.out else Path("runs") / Path(args.config).stem
    return None


def _command(args) -> int:
    from solitons.config import ConfigError, load
    from solitons.io.results import OutputError, ResultFileError, check_output_dir
    from solitons.model.userterms import UserTermError
    from solitons.run import RunError, relax, report

    try:
        if args.command == "show":
            from solitons.io.results import read_result
            from solitons.views.plots import DEFAULT_LEVEL, write_figures

            source = Path(args.result)
            if source.is_dir():
                source = source / "result.h5"
            result = read_result(source)
            out = check_output_dir(Path(args.out) if args.out else source.parent)
            level = DEFAULT_LEVEL if args.level is None else args.level
            if args.html:
                from solitons.views.html_view import write_view

                print(write_view(result, out / "view.html", level))
                return EXIT_OK
            paths = write_figures(result, out, level)
            print("\n".join(str(p) for p in paths))
            return EXIT_OK
        if args.command == "gallery":
            from solitons.io.results import read_result
            from solitons.views.plots import DEFAULT_LEVEL, plot_gallery

            entries = []
            for path in args.results:
                result = read_result(path)
                summary = result["summary"]
                entries.append({"field": result["field"], "grid": result["grid"],
                                "label": summary.get("label") or Path(path).parent.name,
                                "hopf_charge": summary.get("hopf_charge"),
                                "energy": summary.get("energy"), "model": summary.get("model")})
            print(plot_gallery(entries, args.out, level=DEFAULT_LEVEL if args.level is None else args.level))
            return EXIT_OK
        if args.command == "scan":
            from solitons.campaigns.scan import format_table, read_scan_table, run_scan

            out = check_output_dir(Path(args.out) if args.out else Path("runs") / Path(args.config).stem)
            rows = run_scan(args.config, out, args.overrides, stream=None if args.quiet else sys.stderr,
                            figures=args.figures, scheduler=args.scheduler, workers=args.workers)
            key = read_scan_table(args.config)["keys"][0]
            print(format_table(rows, key))
            print(f"files         {out / 'scan.csv'}" + (f"  {out / 'scan.png'}" if args.figures else ""))
            return EXIT_OK
        if args.command == "survey":
            from solitons.campaigns.survey import run_survey, summary_lines

            out = check_output_dir(Path(args.out) if args.out else Path("runs") / Path(args.config).stem)
            rows = run_survey(args.config, out, args.overrides, scheduler=args.scheduler, workers=args.workers,
                              stream=None if args.quiet else sys.stderr, figure=args.figures,
                              table_only=args.table_only)
            print(summary_lines(rows))
            print(f"files         {out / 'survey.md'}  {out / 'survey.csv'}"
                  + (f"  {out / 'survey.png'}" if args.figures else "") + f"  {out / 'catalogue.sqlite'}")
            failed = [r for r in rows if r["status"] == "failed" or (r["status"] != "finished" and not args.table_only)]
            return EXIT_UNCONVERGED if failed else EXIT_OK
        if args.command == "continuum":
            from solitons.campaigns.continuum import format_markdown, run_continuum

            out = check_output_dir(Path(args.out) if args.out else Path("runs") / Path(args.config).stem)
            report_ = run_continuum(args.config, out, args.overrides, stream=None if args.quiet else sys.stderr)
            print(format_markdown(report_), end="")
            print(f"files         {out / 'continuum.md'}  {out / 'continuum.csv'}  {out / 'continuum.json'}  "
                  f"{out / 'continuum.png'}")
            return EXIT_UNCONVERGED if report_["warnings"] else EXIT_OK
        if args.command == "demo":
            spec = load(None, args.overrides, text=demo_config_text())
            out = check_output_dir(args.out)
        else:
            spec = load(args.config, args.overrides)
            out = check_output_dir(Path(args.out) if args.out else Path("runs") / Path(args.config).stem)
        summary = relax(spec, out, resume=args.resume, overwrite=args.overwrite,
                        stream=None if args.quiet else sys.stderr)
    except (ConfigError, RunError, ResultFileError, UserTermError, OutputError) as error:
        print(f"solitons: error: {error}", file=sys.stderr)
        return EXIT_INPUT
    report(summary, out)
    if args.figures:
        _figures(out)
    return exit_code(summary)


def exit_code(summary: dict) -> int:
    """The exit code of a finished relaxation (see the table at the top)."""
    from solitons.judge.outcomes import Outcome

    if summary["status"] in (Outcome.NON_FINITE, Outcome.NUMERICAL_BLOWUP):
        return EXIT_NON_FINITE
    if abs(summary["hopf_charge"] - summary["expected_charge"]) > 0.5:
        return EXIT_CHARGE_LOST
    if not summary["converged"]:
        return EXIT_UNCONVERGED
    return EXIT_OK


if __name__ == "__main__":
    sys.exit(main())
