"""The ``dlsim`` command: a thin layer over the Python API.

Every sub-command calls one public function that a notebook can call just as well.  Errors that
dlsim raises on purpose (:class:`dlsim.errors.DlsimError`) print as one line and exit with code 2;
``--traceback`` shows the full stack instead.
"""
from __future__ import annotations

import argparse
import sys

from .errors import DlsimError

EXIT_BAD_INPUT = 2


def _cmd_run(args: argparse.Namespace) -> int:
    from .api import run_case, format_summary

    result = run_case(args.case, out_dir=args.out, progress=not args.quiet)
    print(format_summary(result))
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="dlsim",
        description="Critical resolved shear stress of a dislocation line in an obstacle field.",
    )
    parser.add_argument("--traceback", action="store_true",
                        help="show the full Python traceback on errors")
    sub = parser.add_subparsers(dest="command", required=True)

    run = sub.add_parser("run", help="simulate one case file and write its results")
    run.add_argument("case", help="case file (TOML)")
    run.add_argument("--out", default=None, help="output folder (overrides [output] folder)")
    run.add_argument("--quiet", action="store_true", help="no progress messages")
    run.set_defaults(func=_cmd_run)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except DlsimError as err:
        if args.traceback:
            raise
        print(f"dlsim: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("dlsim: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
