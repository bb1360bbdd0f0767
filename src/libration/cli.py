"""The ``libration`` command.

Exit codes: 0 success; 1 the integration ended early (failure status, stopping event);
2 invalid usage or input (bad arguments, scenario or file); 130 interrupted by Ctrl-C or
SIGTERM after writing a checkpoint.
"""
from __future__ import annotations

import argparse
import sys

from ._version import __version__
from .exceptions import LibrationError

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_USAGE = 2
EXIT_INTERRUPTED = 130


def _cmd_demo(args: argparse.Namespace) -> int:
    if args.write:
        from .io.commands import write_demo

        return write_demo(args.write)
    from .demo import run_demo

    bar = None
    if sys.stderr.isatty():  # a progress bar on a terminal, nothing in logs
        from tqdm import tqdm

        bar = tqdm(total=100, desc="demo", unit="%", leave=False, file=sys.stderr)
    done = [0]

    def progress(fraction: float) -> None:
        if bar is not None:
            step = int(round(100 * fraction)) - done[0]
            bar.update(step)
            done[0] += step

    try:
        result = run_demo(span_days=args.years * 365.25, step_days=args.step, method=args.method,
                          belt_count=args.particles, progress=progress)
    finally:
        if bar is not None:
            bar.close()
    print(result.summary())
    return EXIT_OK


def _cmd_bench(args: argparse.Namespace) -> int:
    from .bench import format_table, quick_bench

    print(format_table(quick_bench()))
    return EXIT_OK


def _cmd_ensemble(args: argparse.Namespace) -> int:
    from .ensemble import cli_command

    return cli_command(args)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``libration`` command (one sub-parser per command)."""
    parser = argparse.ArgumentParser(
        prog="libration", description="n-body propagation for long-term planetary and stellar dynamics "
                                      "(research use only).")
    parser.add_argument("--version", action="version", version=f"libration {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")

    demo = commands.add_parser("demo", help="propagate the embedded invented planetary system and summarise")
    demo.add_argument("--years", type=float, default=400.0,
                      help="simulated span in years (default 400: about ten seconds on one core)")
    demo.add_argument("--step", type=float, default=2.0, help="step in days (default 2)")
    demo.add_argument("--method", default=None, help="stepping method (default: wisdom-holman)")
    demo.add_argument("--particles", type=int, default=None, help="belt test particles (default 3000)")
    demo.add_argument("--write", metavar="FILE", default=None,
                      help="write the demo scenario (TOML) to FILE as a starting point, and stop")
    demo.set_defaults(func=_cmd_demo)

    from .io.commands import add_commands

    add_commands(commands)  # run, resume, info, plot

    from .ensemble import extend_plot_command

    extend_plot_command(commands)  # `libration plot ENSEMBLE_DIR` draws its stability map

    bench = commands.add_parser("bench", help="quick throughput benchmark of the gravity kernel")
    bench.set_defaults(func=_cmd_bench)

    from .ensemble import add_cli_arguments

    ensemble = commands.add_parser("ensemble", help="run or resume an ensemble (a scenario's [ensemble] table)")
    add_cli_arguments(ensemble)
    ensemble.set_defaults(func=_cmd_ensemble)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``libration`` console script; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "func", None) is None:
        parser.print_help()
        return EXIT_USAGE
    try:
        return int(args.func(args))
    except LibrationError as exc:
        print(f"libration: error: {exc}", file=sys.stderr)
        return EXIT_USAGE if isinstance(exc, ValueError) else EXIT_FAILED


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
