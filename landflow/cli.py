"""The ``landflow`` command: a thin shell over the Python API."""

from __future__ import annotations

import argparse
import logging
import sys

from . import __version__
from .errors import LandflowError


def _parser():
    parser = argparse.ArgumentParser(
        prog="landflow",
        description="Connectivity of landscapes as random walks and electric circuits.")
    parser.add_argument("--version", action="version", version=f"landflow {__version__}")
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("-q", "--quiet", action="store_true", help="print only warnings and errors")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    run = commands.add_parser("run", parents=[common], help="run a study and write its outputs")
    run.add_argument("study", help="study file (TOML)")
    check = commands.add_parser("check", parents=[common], help="validate a study and its inputs without solving")
    check.add_argument("study", help="study file (TOML)")
    return parser


def main(argv=None):
    parser = _parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 2
    logging.basicConfig(level=logging.WARNING if args.quiet else logging.INFO,
                        format="%(asctime)s %(levelname)s %(message)s", datefmt="%H:%M:%S", stream=sys.stderr)
    from .study.run import check_study, run_study
    try:
        if args.command == "run":
            manifest = run_study(args.study)
            print(f"landflow: wrote {len(manifest['outputs'])} outputs to {manifest['folder']} "
                  f"in {manifest['timings_seconds']['total']:.1f} s")
        else:
            summary = check_study(args.study)
            print(f"landflow: {args.study} is valid: {summary['cells']:,} landscape cells, "
                  f"{summary['patches']} patches, {summary['pieces']} connected piece(s); "
                  f"analyses: {', '.join(summary['analyses'])}")
    except LandflowError as exc:
        print(f"landflow: error: {exc}", file=sys.stderr)
        return 1
    except OSError as exc:  # the file system refused (permissions, disk full): no traceback either
        print(f"landflow: error: {exc}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
