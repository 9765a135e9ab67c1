"""The ``splitlift`` command line: a thin layer over the library.

Exit codes: 0 success, 1 a data or file error, 2 a usage error. A user's
mistake is reported in one line on stderr, never as a traceback.
"""

from __future__ import annotations

import argparse
import sys

EXIT_OK, EXIT_DATA_ERROR, EXIT_USAGE = 0, 1, 2


def _build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="splitlift",
        description="Learn split directions for random forests (supervised dimension reduction).",
    )
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    demo = commands.add_parser("demo", help="run the whole job on bundled synthetic data")
    demo.add_argument("--samples", type=int, default=1500, help="rows of synthetic data")
    demo.add_argument("--folds", type=int, default=5, help="cross-validation folds")
    demo.add_argument("--trees", type=int, default=100, help="trees per forest")
    demo.add_argument("--seed", type=int, default=0, help="random seed")

    bench = commands.add_parser("bench", help="time splitlift against reference implementations")
    bench.add_argument("--suite", choices=["speed", "all"], default="speed")
    bench.add_argument("--quick", action="store_true", help="small sizes, finishes fast")
    bench.add_argument("--json", metavar="FILE", help="also write the results as JSON")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``splitlift`` console script."""
    parser = _build_parser()
    try:
        arguments = parser.parse_args(argv)
    except SystemExit as stop:  # argparse exits 2 on usage errors, 0 on --help
        return int(stop.code or 0)
    try:
        return _dispatch(arguments)
    except (ValueError, OSError) as error:
        sys.stderr.write(f"splitlift {arguments.command}: error: {error}\n")
        return EXIT_DATA_ERROR


def _dispatch(arguments: argparse.Namespace) -> int:
    if arguments.command == "demo":
        from .demo import run_demo

        for name in ("samples", "folds", "trees"):
            if getattr(arguments, name) < 2:
                sys.stderr.write(f"splitlift demo: error: --{name} must be at least 2\n")
                return EXIT_USAGE
        run_demo(arguments.samples, arguments.folds, arguments.trees, arguments.seed)
        return EXIT_OK
    if arguments.command == "bench":
        from .bench import run_bench

        run_bench(arguments.suite, arguments.quick, arguments.json)
        return EXIT_OK
    return EXIT_USAGE  # pragma: no cover - argparse rejects unknown commands


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
