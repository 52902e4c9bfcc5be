"""The ``dlsim`` command: a thin layer over the Python API.

Every sub-command calls one public function that a notebook can call just as well.  Errors that
dlsim raises on purpose (:class:`dlsim.errors.DlsimError`) print as one line and exit with the
error's code (:mod:`dlsim.errors`: 2 bad input, 3 no result, 4 results saved elsewhere);
``--traceback`` shows the full stack instead.  Anything else is a bug: one line, exit code 1.
"""
from __future__ import annotations

import argparse
import json
import sys

from .errors import EXIT_INTERRUPTED, EXIT_NO_RESULT, DlsimError

EXIT_INTERNAL = 1


def _note(text: str) -> None:
    print(f"dlsim: {text}", file=sys.stderr, flush=True)


def _cmd_run(args: argparse.Namespace) -> int:
    from .api import STATUS_NO_CRSS, case_inputs, format_summary, kernels_need_compiling, run_case
    from .case import load_case
    from .output import check_destination

    case = load_case(args.case)
    for warning in case.warnings:
        _note(f"warning: {warning}")
    # a bad destination is the one line a user sees, before any note about compiling
    check_destination(args.out if args.out is not None else case.output.folder,
                      inputs=case_inputs(case))
    if kernels_need_compiling():
        _note("compiling the kernels (first run only, about half a minute)")
    result = run_case(case, out_dir=args.out, progress=not args.quiet)
    print(format_summary(result))
    if result.write_error is not None:
        _note(f"error: {result.write_error}")
        return 4
    return EXIT_NO_RESULT if result.status == STATUS_NO_CRSS else 0


def _cmd_estimate(args: argparse.Namespace) -> int:
    from .api import estimate_case, format_estimates

    estimates = estimate_case(args.case)
    if args.json:
        print(json.dumps(estimates, indent=2, default=float))
    else:
        print(format_estimates(estimates))
    return 0


def _cmd_converge(args: argparse.Namespace) -> int:
    from .case import load_case
    from .converge import converge_case, format_converge

    case = load_case(args.case)
    for warning in case.warnings:
        _note(f"warning: {warning}")
    result = converge_case(case, out_dir=args.out, progress=not args.quiet)
    print(format_converge(result))
    return 0


def _cmd_sweep(args: argparse.Namespace) -> int:
    from .sweep import run_sweep

    outcome = run_sweep(args.sweep, out_dir=args.out, workers=args.workers,
                        scheduler=args.scheduler, progress=not args.quiet, notify=_note)
    print(f"{len(outcome.ran)} runs done, {len(outcome.skipped)} already finished; "
          f"summaries in {outcome.out_dir}")
    return 0


def _cmd_plot(args: argparse.Namespace) -> int:
    from .plots import plot_dir

    for path in plot_dir(args.folder, quantity=args.quantity):
        print(path)
    return 0


def _cmd_report(args: argparse.Namespace) -> int:
    from .report import make_report

    for path in make_report(args.folder):
        print(path)
    return 0


def _cmd_movie(args: argparse.Namespace) -> int:
    from .movie import make_movie

    size = {} if args.width is None else {"width": args.width}
    print(make_movie(args.run_dir, fmt=args.format, max_frames=args.max_frames, fps=args.fps,
                     **size))
    return 0


def _add_sweep_commands(sub) -> None:
    """Sub-commands of the sweep layer: sweep, plot, report, movie."""
    sweep = sub.add_parser("sweep", help="run (or resume) every case of a sweep file")
    sweep.add_argument("sweep", help="sweep file (TOML)")
    sweep.add_argument("--out", default=None, help="sweep folder (overrides [output] folder)")
    sweep.add_argument("--workers", type=int, default=None,
                       help="parallel runs (default: every core)")
    sweep.add_argument("--scheduler", default=None, metavar="ADDRESS|local",
                       help="run on a Dask cluster: a scheduler address or scheduler "
                            "file (.json), or 'local' for a local one")
    sweep.add_argument("--quiet", action="store_true", help="no progress bar")
    sweep.set_defaults(func=_cmd_sweep)

    plot = sub.add_parser("plot", help="figures of a sweep folder or a run folder")
    plot.add_argument("folder", help="sweep folder or run folder")
    plot.add_argument("--quantity", choices=("crss", "delta_sigma", "activation_volume"),
                      default="crss", help="what a sweep figure shows (default: crss, and for "
                                           "thermal runs activation_volume too)")
    plot.set_defaults(func=_cmd_plot)

    report = sub.add_parser("report", help="one-page report (report.png, report.pdf) of a run "
                                           "or a sweep folder")
    report.add_argument("folder", help="run folder or sweep folder")
    report.set_defaults(func=_cmd_report)

    movie = sub.add_parser("movie", help="animate the snapshots of a run folder")
    movie.add_argument("run_dir", help="run folder with snapshots.npz")
    movie.add_argument("--format", choices=("gif", "mp4"), default="gif")
    movie.add_argument("--max-frames", type=int, default=120, help="at most this many frames")
    movie.add_argument("--fps", type=float, default=10.0, help="frames per second")
    # the default lives in dlsim.movie (DEFAULT_WIDTH_PX), not imported here: matplotlib is slow
    movie.add_argument("--width", type=int, default=None,
                       help="frame width in pixels (default 1280; the height follows)")
    movie.set_defaults(func=_cmd_movie)


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
    estimate = sub.add_parser("estimate", help="analytic strength estimates of a case, without "
                                               "simulating")
    estimate.add_argument("case", help="case file (TOML)")
    estimate.add_argument("--json", action="store_true", help="print JSON (for scripts)")
    estimate.set_defaults(func=_cmd_estimate)
    converge = sub.add_parser("converge", help="the infinite-box CRSS of a random field: "
                                                "realizations over box sizes, a finite-size fit")
    converge.add_argument("case", help="case file (TOML)")
    converge.add_argument("--out", default=None,
                          help="folder for converge.json/.csv/.png (default: the case's output "
                               "folder + '-converge')")
    converge.add_argument("--quiet", action="store_true", help="no progress messages")
    converge.set_defaults(func=_cmd_converge)
    _add_sweep_commands(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except DlsimError as err:
        if args.traceback:
            raise
        _note(f"error: {err}")
        return err.exit_code
    except KeyboardInterrupt as err:
        _note(f"interrupted{'; ' + str(err) if str(err) else ''}")
        return EXIT_INTERRUPTED
    except BrokenPipeError:  # output piped into `head` and the like: not an error of the run
        sys.stderr.close()
        return 0
    except Exception as err:  # noqa: BLE001 - a bug: one line, the details on request
        if args.traceback:
            raise
        _note(f"internal error: {type(err).__name__}: {err} (rerun with --traceback and "
              "report it)")
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
