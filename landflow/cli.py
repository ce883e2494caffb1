"""The ``landflow`` command: a thin shell over the Python API."""

from __future__ import annotations

import argparse
import logging
import sys
from pathlib import Path

from . import __version__
from . import interrupt
from .errors import LandflowError


def _parser():
    parser = argparse.ArgumentParser(
        prog="landflow",
        description="Connectivity of landscapes as random walks and electric circuits.")
    parser.add_argument("--version", action="version", version=f"landflow {__version__}")
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-q", "--quiet", action="store_true", help="print only warnings and errors")
    common.add_argument("-v", "--verbose", action="store_true", help="also print debugging detail")
    common.add_argument("--debug", action="store_true",
                        help="on an unexpected error, print the full traceback")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    run = commands.add_parser("run", parents=[common], help="run a study and write its outputs")
    run.add_argument("study", help="study file (TOML)")
    run.add_argument("--open", action="store_true", help="open report.html in the default web browser when the run ends")
    run.add_argument("--workers", type=int, default=None, metavar="N",
                     help="regional studies: local worker processes for the tiles (default: the number of CPU "
                          "cores; 0 = this process alone)")
    run.add_argument("--scheduler", metavar="ADDRESS",
                     help="regional studies: solve the tiles on the dask.distributed scheduler at ADDRESS "
                          "(e.g. tls://host:8786; the same security rules as 'landflow batch')")
    report = commands.add_parser("report", parents=[common],
                                 help="remake report.html and report.md of a finished output folder (no solving)")
    report.add_argument("folder", help="output folder of a finished run (it holds manifest.json)")
    report.add_argument("--open", action="store_true", help="open report.html in the default web browser")
    check = commands.add_parser("check", parents=[common], help="validate a study and its inputs without solving")
    check.add_argument("study", help="study file (TOML)")
    batch = commands.add_parser(
        "batch", parents=[common], help="run many studies and sweeps on local processes or a Dask cluster",
        description="Run every study file and every run of its [sweep]. Runs whose outputs are up to date "
                    "(same settings, inputs and landflow version in their manifest.json, every output "
                    "still there) are skipped.")
    batch.add_argument("studies", nargs="+", metavar="STUDY", help="study files (TOML)")
    batch.add_argument("--workers", type=int, default=None, metavar="N",
                       help="local worker processes (default: the number of CPU cores)")
    batch.add_argument("--scheduler", metavar="ADDRESS",
                       help="submit the runs to the dask.distributed scheduler at ADDRESS (e.g. tcp://host:8786) "
                            "instead of local processes")
    batch.add_argument("--summary", metavar="PATH", default="batch_summary.csv",
                       help="where to write the summary table (default: batch_summary.csv in the current folder)")
    batch.add_argument("--force", action="store_true", help="rerun runs whose outputs are up to date")
    verify = commands.add_parser(
        "verify", parents=[common], help="check that a results folder's outputs are those its run wrote",
        description="Compare every output listed in FOLDER/manifest.json with the SHA-256 recorded there.")
    verify.add_argument("folder", help="output folder of a finished run")
    return parser


def _has_sweep(path):
    from .study.config import read_study_file
    return "sweep" in read_study_file(path)


def _is_regional(path):
    from .regional import is_regional_study
    return is_regional_study(path)


def _regional(args):
    from .regional import check_regional, run_regional
    if args.command == "check":
        for line in check_regional(args.study):
            print(f"landflow: {line}")
        return 0
    if args.workers is not None and args.workers < 0:
        print(f"landflow: error: --workers must be 0 or more; got {args.workers}.", file=sys.stderr)
        return 2
    manifest = run_regional(args.study, workers=args.workers, scheduler=args.scheduler)
    r = manifest["regional"]
    print(f"landflow: wrote {len(manifest['outputs'])} outputs to {manifest['folder']} in "
          f"{manifest['timings_seconds']['total']:.1f} s ({r['tiles_solved']} tiles solved, "
          f"{r['tiles_up_to_date']} up to date)")
    return 0


def _batch(args, studies, workers):
    from .study.batch import run_batch
    regional = [s for s in studies if _is_regional(s)]
    if regional:
        print(f"landflow: error: {regional[0]} is a regional study ([analyses.regional_current]); run it with "
              "'landflow run', which spreads its tiles over the workers (--workers N or --scheduler ADDRESS).",
              file=sys.stderr)
        return 2
    if workers is not None and workers < 0:
        print(f"landflow: error: --workers must be 0 or more; got {workers}.", file=sys.stderr)
        return 2
    outcomes = run_batch(studies, workers=workers, scheduler=getattr(args, "scheduler", None),
                         summary=getattr(args, "summary", "batch_summary.csv"), force=getattr(args, "force", False))
    failed = [o for o in outcomes if o.status == "failed"]
    counts = {s: sum(o.status == s for o in outcomes) for s in ("done", "skipped", "failed")}
    print(f"landflow: {len(outcomes)} runs: {counts['done']} done, {counts['skipped']} up to date, "
          f"{counts['failed']} failed; summary in {getattr(args, 'summary', 'batch_summary.csv')}")
    for o in failed:
        print(f"landflow: run {o.run} failed: {o.error}", file=sys.stderr)
    return 1 if failed else 0


def main(argv=None):
    """The ``landflow`` command. Exit codes: 0 done, 1 failed, 2 usage, 130 interrupted, 143 terminated."""
    parser = _parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    level = logging.DEBUG if args.verbose else logging.WARNING if args.quiet else logging.INFO
    logging.basicConfig(level=level, format="%(asctime)s %(levelname)s %(message)s", datefmt="%H:%M:%S",
                        stream=sys.stderr)
    logging.getLogger("landflow").setLevel(level)
    restore = interrupt.install()
    try:
        return _dispatch(args)
    except KeyboardInterrupt:
        print("landflow: interrupted; unfinished outputs were removed and earlier results left as they were.",
              file=sys.stderr)
        return 130
    except interrupt.Terminated:
        print("landflow: terminated; unfinished outputs were removed and earlier results left as they were.",
              file=sys.stderr)
        return 143
    except LandflowError as exc:
        print(f"landflow: error: {exc}", file=sys.stderr)
        return 1
    except OSError as exc:  # the file system refused (permissions, disk full): no traceback either
        where = f" ({exc.filename})" if getattr(exc, "filename", None) and str(exc.filename) not in str(exc) else ""
        print(f"landflow: error: {exc}{where}", file=sys.stderr)
        return 1
    except Exception as exc:  # a fault of landflow's own: one line, the traceback on request
        if args.debug:
            raise
        print(f"landflow: error: {type(exc).__name__}: {exc} (an unexpected error; run with --debug for the "
              "full traceback, and please report it)", file=sys.stderr)
        return 1
    finally:
        restore()


def _open_page(page):
    """Open a report page in the default web browser; a machine without one gets a message, not an error."""
    import webbrowser
    if not webbrowser.open(Path(page).resolve().as_uri()):
        print(f"landflow: no web browser found to open {page}; open it by hand.", file=sys.stderr)
    return 0


def _dispatch(args):
    from .study.run import check_study, run_study
    if args.command == "verify":
        from .study.run import verify_folder
        problems = verify_folder(args.folder)
        for line in problems:
            print(f"landflow: {args.folder}: {line}", file=sys.stderr)
        if problems:
            return 1
        print(f"landflow: every output in {args.folder} is as its run wrote it")
        return 0
    if args.command == "report":
        from .report import rebuild_reports
        page = rebuild_reports(args.folder)
        print(f"landflow: wrote {page} and report.md from the folder's manifest and outputs")
        return _open_page(page) if args.open else 0
    if args.command == "batch":
        # the progress display owns the terminal; each run's details are in its report.md
        if not args.verbose:
            logging.getLogger("landflow").setLevel(logging.WARNING)
        return _batch(args, args.studies, args.workers)
    if args.command in ("run", "check") and _is_regional(args.study):
        return _regional(args)
    if args.command == "run" and (args.workers is not None or args.scheduler is not None):
        print("landflow: error: --workers and --scheduler only apply to regional studies "
              "([analyses.regional_current]); use 'landflow batch' to spread studies over workers.",
              file=sys.stderr)
        return 2
    if args.command in ("run", "check") and _has_sweep(args.study):
        from .study.sweep import expand_study
        runs = expand_study(args.study)
        if args.command == "check":
            for run in runs:
                check_study(run.study)
            print(f"landflow: {args.study} is valid: a sweep of {len(runs)} runs: "
                  f"{', '.join(r.run_name for r in runs)}")
            return 0
        if not args.verbose:
            logging.getLogger("landflow").setLevel(logging.WARNING)
        args.summary = str(runs[0].sweep_folder / "batch_summary.csv")
        return _batch(args, [args.study], 0)
    if args.command == "run":
        manifest = run_study(args.study)
        print(f"landflow: wrote {len(manifest['outputs'])} outputs to {manifest['folder']} "
              f"in {manifest['timings_seconds']['total']:.1f} s")
        if args.open:
            return _open_page(Path(manifest["folder"]) / "report.html")
    else:
        summary = check_study(args.study)
        what = (f"a network of {summary['cells']:,} nodes and {summary['network_edges']:,} edges, "
                f"{summary['patches']} zones" if "network_edges" in summary else
                f"{summary['cells']:,} landscape cells, {summary['patches']} patches")
        print(f"landflow: {args.study} is valid: {what}, {summary['pieces']} connected piece(s); "
              f"analyses: {', '.join(summary['analyses'])}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
