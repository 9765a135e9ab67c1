"""The ``splitlift`` command line: a thin layer over the library.

Exit codes
----------
0
    Success.
1
    A data or file error: an input that is missing, a folder, unreadable,
    empty or unsuitable; an option value that does not fit this data
    (``--dim 20`` with 5 feature columns, more slices than rows allow); a
    missing output folder; a missing extra (matplotlib, pyarrow); a full disk.
2
    A usage error: the command line cannot work whatever the files hold (an
    unknown option, ``--dim 0``, ``--complement-weight 1.5``, an unknown file
    suffix, an output that would overwrite an input or another output).
3
    An internal error: a bug in splitlift (set ``SPLITLIFT_TRACEBACK=1`` to see
    the traceback, and please report it).
130, 143
    Interrupted (Ctrl-C) or terminated (SIGTERM).

Every error is one line on stderr that names the problem and the fix, never
a traceback. Each command checks its options, file suffixes, that no output
would overwrite an input or another output (paths resolved, links followed)
and that plotting is available before any work. The files of one run (lift,
report and plots; score table and chart) are one result: they are staged
beside their targets and moved into place together, or not at all
(:class:`splitlift.persistence.AtomicResult`).
"""

from __future__ import annotations

import argparse
import contextlib
import os
import re
import signal
import sys
import threading
import warnings
from pathlib import Path

from . import large_data

EXIT_OK, EXIT_DATA_ERROR, EXIT_USAGE, EXIT_INTERNAL = 0, 1, 2, 3
EXIT_INTERRUPTED, EXIT_TERMINATED = 130, 143

METHODS = {
    "sir": "SlicedInverse",
    "save": "SlicedAverageVariance",
    "phd": "HessianDirections",
    "opg": "GradientOuterProduct",
    "ade": "AverageDerivative",
}
SLICED_ESTIMATORS = ("SlicedInverse", "SlicedAverageVariance", "AverageDerivative")
LIFT_SUFFIXES = (".npz",)
REPORT_SUFFIXES = (".txt", ".md", ".json")
MATRIX_SUFFIXES = (".npy", ".csv")
CANDIDATE_SUFFIXES = (".npz", ".npy", ".csv")
PLOT_SUFFIXES = (".png",)
_IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".svg", ".pdf")


class UsageError(Exception):
    """A command-line mistake: exit code 2."""


class _Terminated(BaseException):
    """SIGTERM, raised so that staged outputs are removed as for Ctrl-C."""


class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors (exit code 2)."""

    def error(self, message: str):
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message}; see {self.prog} --help\n")


def _dimension(text: str):
    if text == "auto":
        return "auto"
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"must be a positive integer or 'auto', got {text!r}"
        ) from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {value}")
    return value


def _at_least(minimum: int):
    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"must be an integer, got {text!r}") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"must be at least {minimum}, got {value}")
        return value

    return parse


def _separator(text: str) -> str:
    value = {"\\t": "\t", "tab": "\t", "TAB": "\t"}.get(text, text)
    if len(value) != 1 or value in "\"\n\r":
        raise argparse.ArgumentTypeError(
            f"must be one character (or '\\t' / tab), got {text!r}"
        )
    return value


def _add_table_options(command, with_features: bool = True) -> None:
    command.add_argument("--sep", type=_separator, metavar="CHAR",
                         help="column separator of a CSV data file (default ',', tab for .tsv)")
    if with_features:
        command.add_argument("--features", metavar="C1,C2,...",
                             help="feature columns (default: every column but the target)")
        command.add_argument("--keep-index-columns", action="store_true",
                             help="use columns that look like a saved row index as features "
                                  "(by default they are dropped with a note)")


class _HelpFormatter(argparse.ArgumentDefaultsHelpFormatter, argparse.RawDescriptionHelpFormatter):
    """Defaults shown after every option's help; descriptions and examples kept as written."""

    def _get_help_string(self, action):
        if action.default in (None, False) or "(default" in (action.help or ""):
            return action.help  # no value to show, or the help says it already
        return super()._get_help_string(action)


def _command(commands, name: str, summary: str, description: str, example: str):
    command = commands.add_parser(
        name, help=summary, description=f"{summary}.\n\n{description}",
        epilog="example:\n  " + example, formatter_class=_HelpFormatter)
    # also accepted after the command; SUPPRESS keeps a --quiet given before it
    command.add_argument("--quiet", action="store_true", default=argparse.SUPPRESS,
                         help="no progress bars, notes or warnings on stderr")
    return command


def _add_scheduler_option(command) -> None:
    command.add_argument("--scheduler", metavar="threads|processes|ADDRESS",
                         help="where Dask runs the work on folder or glob data: threads "
                              "(default), processes, synchronous, or the address of a running "
                              "cluster (tcp://host:8786)")


def _build_parser() -> argparse.ArgumentParser:
    from . import __version__

    parser = _Parser(
        prog="splitlift",
        description="Learn split directions for random forests (supervised dimension "
                    "reduction): estimate the subspace a response depends on, lift the inputs "
                    "onto it, and check whether that helps your forest.",
        epilog="Exit codes: 0 success, 1 data or file error, 2 usage error, 3 internal error, "
               "130 interrupted.\nexample:\n  splitlift demo\n  splitlift fit data.csv "
               "--target y --out lift.npz",
        formatter_class=_HelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"splitlift {__version__}")
    parser.add_argument("--quiet", action="store_true",
                        help="no progress bars, notes or warnings on stderr")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    demo = _command(commands, "demo", "run the whole job on bundled synthetic data",
                    "Invented kiln data: two estimators with automatic dimension, a full "
                    "report, the guarded comparison with the raw inputs, the STIT forest, and "
                    "a saved lift with its plots.",
                    "splitlift demo --out-dir demo-output")
    demo.add_argument("--samples", type=_at_least(2), default=1500, help="rows of synthetic data")
    demo.add_argument("--folds", type=_at_least(2), default=3, help="cross-validation folds")
    demo.add_argument("--trees", type=_at_least(2), default=60, help="trees per forest")
    demo.add_argument("--out-dir", default="splitlift-demo-output", metavar="DIR",
                      help="where the demo saves its lift file and plots")
    demo.add_argument("--seed", type=int, default=0, help="random seed")

    fit = _command(commands, "fit", "estimate a subspace and save its lift",
                   "Reads DATA, estimates the subspace the target depends on, builds the lift "
                   "and writes it (with its report and plots, all or nothing).",
                   "splitlift fit data.csv --target strength --estimator GradientOuterProduct "
                   "--dim auto --out lift.npz --report report.txt --html report.html")
    fit.add_argument("data", metavar="DATA",
                     help="CSV, Parquet (with pyarrow) or JSON file, or a folder or quoted glob "
                          "pattern of Parquet files read lazily with Dask (larger than memory)")
    fit.add_argument("--target", required=True, metavar="COL", help="response column")
    _add_table_options(fit)
    fit.add_argument("--estimator", type=_estimator_name, default="SlicedInverse",
                     metavar="NAME", help="subspace estimator: " + ", ".join(ESTIMATORS))
    fit.add_argument("--method", type=_deprecated_method, dest="estimator",
                     help=argparse.SUPPRESS)  # old spelling, kept for one release
    fit.add_argument("--dim", type=_dimension, default="auto", metavar="N|auto",
                     help="subspace dimension, or auto for the estimator's rule")
    fit.add_argument("--slices", type=_at_least(2), metavar="N",
                     help="slices of SlicedInverse, SlicedAverageVariance and AverageDerivative "
                          "(default: the estimator's)")
    fit.add_argument("--complement-weight", type=float, default=0.05, metavar="W",
                     help="weight of the orthogonal complement, in (0, 1)")
    fit.add_argument("--seed", type=int, default=0,
                     help="seed of every random choice (dimension rules, bootstrap)")
    fit.add_argument("--keep-inputs", action="store_true",
                     help="output the inputs, then the lifted directions")
    fit.add_argument("--out", required=True, metavar="LIFT.npz", help="lift file to write")
    fit.add_argument("--report", metavar="FILE",
                     help="also write the report: .txt or .md (text) or .json")
    fit.add_argument("--html", metavar="FILE.html",
                     help="also write the report as one self-contained HTML page with plots")
    fit.add_argument("--plot", metavar="DIR", help="also write diagnostic PNG plots here")
    fit.add_argument("--json", action="store_true",
                     help="print the report as JSON on stdout instead of text")
    _add_scheduler_option(fit)

    transform = _command(commands, "transform", "apply a saved lift to data",
                         "Writes the lifted columns (named as in Python: subspace_<i>, "
                         "complement_<i>, after the inputs when the lift keeps them).",
                         "splitlift transform lift.npz new.csv --keep id --out lifted.parquet")
    transform.add_argument("lift", metavar="LIFT.npz", help="lift file written by fit")
    transform.add_argument("data", metavar="DATA", help="table holding the lift's feature columns")
    _add_table_options(transform, with_features=False)
    transform.add_argument("--keep", metavar="C1,C2,...",
                           help="columns to carry through unchanged, before the lifted ones "
                                "(identifiers, the target)")
    transform.add_argument("--out", required=True, metavar="OUT",
                           help="lifted table: .csv, .tsv, .parquet or .json, or a FOLDER (no "
                                "suffix) for partitioned Parquet, one file per partition")
    _add_scheduler_option(transform)

    score = _command(commands, "score", "score candidate direction matrices",
                     "Ranks lifts and matrices by off-subspace weight, coverage and the "
                     "cross-validated error of a forest; rank-deficient candidates are flagged.",
                     "splitlift score lift.npz axes.npy --data data.csv --target y "
                     "--out ranking.csv")
    score.add_argument("candidates", nargs="+", metavar="CANDIDATE",
                       help=".npz lift files, .npy or .csv matrices")
    score.add_argument("--data", required=True, metavar="DATA", help="table with the features")
    score.add_argument("--target", required=True, metavar="COL", help="response column")
    _add_table_options(score)
    score.add_argument("--reference", metavar="REF.npy",
                       help="columns spanning a known subspace (.npy or .csv)")
    score.add_argument("--out", required=True, metavar="TABLE",
                       help="score table: .csv, .tsv, .parquet or .json")
    score.add_argument("--plot", metavar="FILE.png", help="also draw the ranking chart")
    score.add_argument("--seed", type=int, default=0, help="seed of the folds and forests")
    score.add_argument("--jobs", type=int, default=None, metavar="N",
                       help="parallel workers (-1: all cores; default: one)")

    report = _command(commands, "report", "print the diagnostics of a saved lift",
                      "Prints the report stored with the lift, and its relation to a reference "
                      "subspace when one is given.",
                      "splitlift report lift.npz --reference truth.npy")
    report.add_argument("lift", metavar="LIFT.npz", help="lift file written by fit")
    report.add_argument("--reference", metavar="REF.npy",
                        help="columns spanning a known subspace, in input coordinates")
    report.add_argument("--json", action="store_true", help="print the report as JSON")

    evaluate = _command(commands, "evaluate",
                        "compare raw inputs and lifts by cross-validating a forest",
                        "The raw inputs are always a candidate; a one-standard-error rule "
                        "favours the simpler one, a lift must beat the raw inputs by --margin "
                        "standard errors, and the verdict says whether a lift helps.",
                        "splitlift evaluate data.csv --target y --forest et --out table.csv")
    evaluate.add_argument("data", metavar="DATA", help="CSV, Parquet (with pyarrow) or JSON file")
    evaluate.add_argument("--target", required=True, metavar="COL", help="response column")
    evaluate.add_argument("--forest", choices=sorted(EVALUATE_FORESTS), default="rf",
                          help="downstream forest")
    evaluate.add_argument("--cv", type=int, default=5, metavar="K", help="folds")
    evaluate.add_argument("--repeats", type=int, default=2, metavar="R",
                          help="repeats of the K folds, each with a fresh shuffle")
    evaluate.add_argument("--classify", action="store_true",
                          help="read a numeric target as class labels")
    evaluate.add_argument("--jobs", type=int, default=1, metavar="N",
                          help="parallel workers (-1: all cores)")
    evaluate.add_argument("--seed", type=int, default=0, help="seed of the folds and forests")
    evaluate.add_argument("--margin", type=float, default=1.0, metavar="M",
                          help="standard errors by which a lift must beat the raw inputs")
    _add_table_options(evaluate)
    evaluate.add_argument("--out", metavar="FILE",
                          help="write the table (.csv, .tsv, .json, .parquet)")
    evaluate.add_argument("--plot", metavar="FILE.png", help="plot CV error with error bars")

    bench = _command(commands, "bench", "time splitlift against reference implementations",
                     "Speed against statsmodels, X.T @ X and scikit-learn's extra-trees; "
                     "accuracy and rate on synthetic problems; the real-data suite; the "
                     "scale suite (Dask, batches, Parquet output).",
                     "splitlift bench --suite all --quick --markdown bench.md")
    bench.add_argument("--suite", choices=["speed", "accuracy", "rate", "real", "scale", "all"],
                       default="speed", help="which tables to produce")
    bench.add_argument("--quick", action="store_true", help="small sizes, finishes fast")
    bench.add_argument("--json", metavar="FILE", help="also write the results as JSON")
    bench.add_argument("--markdown", metavar="FILE",
                       help="also write the tables as a Markdown page (docs/benchmarks.md)")
    return parser


#: Estimators by class name, as --estimator takes them (case does not matter).
ESTIMATORS = ("SlicedInverse", "SlicedAverageVariance", "HessianDirections",
              "GradientOuterProduct", "AverageDerivative")


def _estimator_name(text: str) -> str:
    for name in ESTIMATORS:
        if text.lower() == name.lower():
            return name
    raise argparse.ArgumentTypeError(
        f"unknown estimator {text!r}; choose one of {', '.join(ESTIMATORS)}")


def _deprecated_method(text: str) -> str:
    if text.lower() not in METHODS:
        raise argparse.ArgumentTypeError(
            f"unknown method {text!r}; use --estimator with one of {', '.join(ESTIMATORS)}")
    _DEPRECATIONS.append(f"--method is deprecated and will be removed in the next release; "
                         f"use --estimator {METHODS[text.lower()]}")
    return METHODS[text.lower()]


_DEPRECATIONS: list[str] = []


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``splitlift`` console script; returns the exit code."""
    _DEPRECATIONS.clear()  # per run: main() may be called many times in one process
    parser = _build_parser()
    try:
        arguments = parser.parse_args(argv)
    except SystemExit as stop:  # argparse exits 2 on usage errors, 0 on --help
        return EXIT_OK if stop.code is None else stop.code if isinstance(stop.code, int) else (
            EXIT_USAGE)
    command = arguments.command
    handler = globals()[f"_run_{command}"]
    _QUIET[0] = arguments.quiet
    for message in _DEPRECATIONS:
        _say(command, "warning", message)
    try:  # from here on, Ctrl-C (even during the first heavy import) ends with one line
        from . import _progress

        _progress.QUIET = arguments.quiet
        with _terminate_as_exception(), warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            code = handler(arguments)
        for message in dict.fromkeys(str(warning.message) for warning in caught):
            _say(command, "warning", message)
        return code
    except UsageError as error:
        _say(command, "error", error)
        return EXIT_USAGE
    except (ValueError, OSError, ImportError) as error:
        _say(command, "error", _in_command_line_terms(str(error)) if command == "fit" else error)
        return EXIT_DATA_ERROR
    except MemoryError:
        _say(command, "error", "out of memory; use fewer rows or features, or a larger machine")
        return EXIT_DATA_ERROR
    except KeyboardInterrupt:
        _say(command, "interrupted", "stopped by Ctrl-C; no partial output was left")
        return EXIT_INTERRUPTED
    except _Terminated:
        _say(command, "terminated", "stopped by SIGTERM; no partial output was left")
        return EXIT_TERMINATED
    except Exception as error:
        if os.environ.get("SPLITLIFT_TRACEBACK"):
            raise
        _say(command, "internal error",
             f"{type(error).__name__}: {error} (a bug in splitlift: please report it with the "
             "command line; SPLITLIFT_TRACEBACK=1 shows the traceback)")
        return EXIT_INTERNAL


#: Library parameter names in fit's messages, and the options that set them.
_OPTION_NAMES = {"n_slices": "--slices", "dim": "--dim", "complement_weight": "--complement-weight"}
_PARAMETER = re.compile(rf"\b({'|'.join(_OPTION_NAMES)})(?:=([^\s,;)]*[^\s,;).]))?(?!\w)")


def _in_command_line_terms(message: str) -> str:
    """A library message with parameter names replaced by the options that set them."""
    def option(match) -> str:
        name, value = match.groups()
        return _OPTION_NAMES[name] + ("" if value is None else f" {value}")

    return _PARAMETER.sub(option, message)


_QUIET = [False]  # --quiet: errors only on stderr


def _say(command: str, kind: str, message) -> None:
    if _QUIET[0] and kind in ("note", "warning"):
        return
    text = " ".join(str(message).split())  # one line, whatever the message holds
    sys.stderr.write(f"splitlift {command}: {kind}: {text}\n")


@contextlib.contextmanager
def _terminate_as_exception():
    """Turn SIGTERM into an exception while a command runs, so staged files are removed."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def terminate(signal_number, frame):
        raise _Terminated

    previous = signal.signal(signal.SIGTERM, terminate)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


# ------------------------------------------------------------------ up-front checks
def _feature_list(text: str | None, option: str = "--features") -> list[str] | None:
    if text is None:
        return None
    names = [name.strip() for name in text.split(",") if name.strip()]
    if not names:
        raise UsageError(f"{option} names no column; list them as {option} a,b,c")
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise UsageError(f"{option} lists {repeated} more than once; name each column once")
    return names


def _check_suffix(option: str, path, accepted: tuple[str, ...], what: str) -> None:
    suffix = Path(path).suffix.lower()
    if suffix not in accepted:
        raise UsageError(
            f"{option} {path}: {what} must end in {' or '.join(accepted)}, not "
            f"{suffix or 'no suffix'!r}; rename it"
        )


def _check_data_suffix(option: str, path, separator: str | None) -> None:
    from .data_files import data_format

    try:
        kind, _ = data_format(path)
    except ValueError as error:
        raise UsageError(f"{option} {error}") from None
    if separator is not None and kind != "csv":
        raise UsageError(f"--sep applies to CSV data, but {path} is a {kind} file; drop --sep")


def _check_table_output(option: str, path) -> None:
    from .data_files import output_table_format, parquet_available

    try:
        kind = output_table_format(path)
    except ValueError as error:
        raise UsageError(f"{option} {error}") from None
    if kind == "parquet" and not parquet_available():
        raise ImportError(f"{option} {path}: writing Parquet needs pyarrow: pip install pyarrow, "
                          "or name the output .csv")


def _same_file(first, second) -> bool:
    if os.path.realpath(first) == os.path.realpath(second):
        return True
    try:
        return os.path.samefile(first, second)  # hard links
    except OSError:
        return False


def _refuse_overwrites(inputs: list[tuple[str, object]], outputs: list[tuple[str, object]]):
    """Refuse an output that is an input or another output (paths resolved, links followed)."""
    claimed: list[tuple[str, object]] = []
    for label, path in outputs:
        if path is None:
            continue
        for input_label, input_path in inputs:
            if input_path is not None and _same_file(path, input_path):
                raise UsageError(
                    f"{label} {path} is the input {input_label} {input_path}; writing it would "
                    f"destroy the input. Give {label.split()[0]} another path"
                )
        for other_label, other_path in claimed:
            if _same_file(path, other_path):
                raise UsageError(f"{label} {path} and {other_label} {other_path} are the same "
                                 "file; give each output its own path")
        claimed.append((label, path))


def _check_input_file(label: str, path) -> None:
    source = Path(path)
    if source.is_dir():
        raise IsADirectoryError(f"{label} {source} is a directory, not a file; give a file's path")
    if not source.is_file():
        raise FileNotFoundError(f"{label} {source} does not exist; check the path")


def _check_output_place(option: str, path) -> None:
    target = Path(path)
    if target.is_dir():
        raise IsADirectoryError(f"{option} {path} is a directory; give a file name (inside it)")
    folder = target.absolute().parent
    if not folder.is_dir():
        raise FileNotFoundError(f"the folder of {option} {path} does not exist; create it first")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise PermissionError(f"the folder of {option} {path} is not writable; choose another")


def _check_plot_folder(path) -> None:
    folder = Path(path)
    if folder.exists() and not folder.is_dir():
        raise NotADirectoryError(f"--plot {path} is a file; give a folder for the plots")
    if not folder.absolute().parent.is_dir():
        raise FileNotFoundError(f"the folder that would hold --plot {path} does not exist; "
                                "create it first")
    from .plots import require_matplotlib

    require_matplotlib()


def _remove_stale_temporaries(*paths) -> None:
    """What killed runs left beside these files (and in plot folders) goes first."""
    from .persistence import remove_stale_temporaries

    folders = set()
    for path in paths:
        if path is not None:
            location = Path(path).absolute()
            folders.add(location.parent)
            if location.is_dir():
                folders.add(location)
    for folder in folders:
        remove_stale_temporaries(folder)


def _read_data(arguments, path):
    from .data_files import read_table

    return read_table(path, sep=arguments.sep)


def _features_and_target(arguments, table):
    """(X, y, names); columns that look like a saved row index are dropped with a note."""
    from .data_files import features_and_target, index_like_columns

    features = _feature_list(arguments.features)
    dropped = []
    if features is None and not arguments.keep_index_columns:
        dropped = [name for name in index_like_columns(table) if name != arguments.target]
    for name in dropped:
        _say(arguments.command, "note",
             f"column {name!r} looks like a saved row index (unnamed or 'index', distinct whole "
             "numbers), so it is not used as a feature; --keep-index-columns keeps it")
    return features_and_target(table, arguments.target, features, exclude=tuple(dropped))


def _check_rows_per_slice(y, estimator, name: str) -> None:
    """Refuse, in command-line terms, fewer rows than the slices of estimator ``name`` need."""
    import numpy as np

    from .moments import slice_response

    n_slices = getattr(estimator, "n_slices", None)
    if n_slices is None or len(y) >= 2 * n_slices or np.unique(y).size < 2:
        return
    try:
        by_count = slice_response(y, n_slices).kind == "count"
    except ValueError:  # equal-count slicing cannot even place one row per slice
        by_count = True
    if by_count:
        fix = (f"pass --slices {len(y) // 2} or fewer, or add rows" if len(y) >= 4
               else "add rows")
        raise ValueError(
            f"the data has {len(y)} rows, too few for the {n_slices} slices of --estimator "
            f"{name} (each slice needs at least 2 rows, so at least {2 * n_slices}); {fix}"
        )


# ------------------------------------------------------------------ commands
def _run_demo(arguments) -> int:
    from .demo import run_demo

    run_demo(arguments.samples, arguments.folds, arguments.trees, arguments.seed,
             output_dir=arguments.out_dir)
    return EXIT_OK


def _run_fit(arguments) -> int:
    # the command line itself (exit 2)
    if not 0 < arguments.complement_weight < 1:
        raise UsageError("--complement-weight must be strictly between 0 and 1")
    if arguments.slices is not None and arguments.estimator not in SLICED_ESTIMATORS:
        raise UsageError(f"--slices applies to --estimator {', '.join(SLICED_ESTIMATORS)}, "
                         f"not {arguments.estimator}; drop --slices")
    dataset = large_data.is_dataset(arguments.data)
    if not dataset:
        _check_data_suffix("DATA", arguments.data, arguments.sep)
    _check_suffix("--out", arguments.out, LIFT_SUFFIXES, "a lift file")
    if arguments.plot and Path(arguments.plot).suffix.lower() in _IMAGE_SUFFIXES:
        raise UsageError(f"--plot {arguments.plot} looks like a file name, but fit writes several "
                         "PNG files into the folder --plot names; give a folder, e.g. --plot plots")
    if arguments.report:
        _check_suffix("--report", arguments.report, REPORT_SUFFIXES, "the report")
    if arguments.html:
        _check_suffix("--html", arguments.html, (".html", ".htm"), "the report page")
    from .plots import PLOT_FILES

    plot_files = ([] if arguments.plot is None else
                  [(f"--plot {arguments.plot} file {name}", Path(arguments.plot) / name)
                   for name in PLOT_FILES])
    _refuse_overwrites([("DATA", arguments.data)],
                       [("--out", arguments.out), ("--report", arguments.report),
                        ("--html", arguments.html),
                        ("--plot", arguments.plot), *plot_files])
    # the files (exit 1), still before any work
    _remove_stale_temporaries(arguments.data, arguments.out, arguments.report, arguments.plot,
                              arguments.html)
    if dataset:
        large_data.dataset_files(arguments.data)
    else:
        _check_input_file("DATA", arguments.data)
    _check_output_place("--out", arguments.out)
    for option in ("report", "html"):
        if getattr(arguments, option):
            _check_output_place(f"--{option}", getattr(arguments, option))
    if arguments.html:
        from .plots import require_matplotlib

        require_matplotlib()  # the page embeds the plots
    if arguments.plot:
        _check_plot_folder(arguments.plot)

    with large_data.scheduler(arguments.scheduler):
        X, y, lift = _fit_lift(arguments)
        report = lift.report()
        _write_fit_result(arguments, lift, report, X, y)
    if arguments.json:
        print(_report_text(report, "report.json").decode("utf-8"))
        return EXIT_OK
    if not arguments.quiet:
        print(report)
    written = [f"lift written to {arguments.out}"]
    if arguments.report:
        written.append(f"report to {arguments.report}")
    if arguments.html:
        written.append(f"page to {arguments.html}")
    if arguments.plot:
        written.append(f"plots to {arguments.plot}")
    print("\n" + ", ".join(written))
    return EXIT_OK


def _fit_lift(arguments):
    import pandas as pd

    from . import estimators
    from .transformer import DirectionLift

    dataset = large_data.is_dataset(arguments.data)
    if dataset:  # lazily, chunk by chunk; plots get a sample of the rows
        X, y, names = large_data.lazy_features_and_target(
            large_data.read_dataset(arguments.data), arguments.target,
            _feature_list(arguments.features))
    else:
        X, y, names = _features_and_target(arguments, _read_data(arguments, arguments.data))
    if arguments.dim != "auto" and arguments.dim > len(names):
        raise ValueError(f"--dim {arguments.dim} is more than the {len(names)} feature columns; "
                         f"choose --dim {len(names)} or less, or --dim auto")
    estimator = getattr(estimators, arguments.estimator)(dim=arguments.dim)
    settings = estimator.get_params()
    if arguments.slices is not None:
        estimator.set_params(n_slices=arguments.slices)
    if "random_state" in settings:
        estimator.set_params(random_state=arguments.seed)
    if not dataset:
        _check_rows_per_slice(y, estimator, arguments.estimator)
    lift = DirectionLift(estimator, complement_weight=arguments.complement_weight,
                         keep_inputs=arguments.keep_inputs, random_state=arguments.seed)
    lift.fit(X if dataset else pd.DataFrame(X, columns=names), y)
    if dataset:
        X, y = large_data.sample_for_plots(X, y) if arguments.plot else (None, None)
    return X, y, lift


def _write_fit_result(arguments, lift, report, X, y) -> None:
    """The lift, report and plots of one run: all of them, or none."""
    from .persistence import AtomicResult, atomic_write

    with AtomicResult() as result:
        lift.save(result.file(arguments.out))
        if arguments.report:
            text = _report_text(report, arguments.report)
            atomic_write(result.file(arguments.report), lambda handle: handle.write(text))
        if arguments.plot:
            from .plots import PLOT_FILES, write_all_plots

            write_all_plots(lift, X, y, result.folder(arguments.plot, owned_names=PLOT_FILES))
        if arguments.html:
            report.to_html(result.file(arguments.html), plots=_plot_images(lift, X, y))


def _plot_images(lift, X, y) -> dict:
    """The diagnostic plots as PNG bytes by title, drawn in a scratch folder."""
    import tempfile

    from .plots import write_all_plots

    with tempfile.TemporaryDirectory(prefix=".splitlift-plots-") as folder:
        return {path.stem.replace("_", " "): path.read_bytes()
                for path in write_all_plots(lift, X, y, folder)}


def _report_text(report, path) -> bytes:
    if Path(path).suffix.lower() == ".json":
        import json

        return json.dumps(report.to_dict(), indent=2, allow_nan=False).encode("utf-8")
    return (str(report) + "\n").encode("utf-8")


def _run_transform(arguments) -> int:
    import pandas as pd

    from .data_files import select_columns, write_table
    from .lift import LiftMatrix

    _check_suffix("LIFT", arguments.lift, LIFT_SUFFIXES,
                  "the lift (written by splitlift fit; LIFT comes before DATA)")
    dataset = large_data.is_dataset(arguments.data)
    partitioned = large_data.is_partitioned_output(arguments.out)
    if not dataset:
        _check_data_suffix("DATA", arguments.data, arguments.sep)
    if not partitioned:
        _check_table_output("--out", arguments.out)
    _refuse_overwrites([("LIFT", arguments.lift), ("DATA", arguments.data)],
                       [("--out", arguments.out)])
    _remove_stale_temporaries(arguments.lift, arguments.data, arguments.out)
    if dataset:
        large_data.dataset_files(arguments.data)
    else:
        _check_input_file("DATA", arguments.data)
    if partitioned:
        large_data.check_output_folder(arguments.out, arguments.data)
    else:
        _check_output_place("--out", arguments.out)

    lift = LiftMatrix.load(arguments.lift)
    if dataset or partitioned:
        with large_data.scheduler(arguments.scheduler):
            source = (large_data.read_dataset(arguments.data) if dataset
                      else _read_data(arguments, arguments.data))
            rows, columns = large_data.transform_to(lift, source, arguments.out, partitioned)
        print(f"{rows} rows x {columns} lifted columns written to {arguments.out}")
        return EXIT_OK
    table = _read_data(arguments, arguments.data)
    if lift.feature_names is None:
        raise ValueError(
            f"{arguments.lift} records no feature names, so the data's columns cannot be "
            "matched; save the lift from a DataFrame or with splitlift fit."
        )
    missing = [name for name in lift.feature_names if name not in table.columns]
    if missing:
        raise ValueError(
            f"the data lacks the column(s) {missing} the lift was fitted on "
            f"(it expects {lift.feature_names})."
        )
    kept = _feature_list(arguments.keep, "--keep") or []
    absent = [name for name in kept if name not in table.columns]
    if absent:
        raise ValueError(f"--keep names column(s) {absent} that the data lacks; the data has "
                         f"{[str(c) for c in table.columns]}")
    lifted = lift.apply(select_columns(table, lift.feature_names))
    columns = lift.output_feature_names()  # the names DirectionLift gives in Python
    clash = sorted(set(kept) & set(columns))
    if clash:
        raise UsageError(f"--keep columns {clash} have the names of lifted columns; rename them")
    output = pd.concat([table[kept].reset_index(drop=True),
                        pd.DataFrame(lifted, columns=columns)], axis=1)
    write_table(arguments.out, output)
    print(f"{lifted.shape[0]} rows x {lifted.shape[1]} lifted columns written to {arguments.out}")
    return EXIT_OK


def _run_score(arguments) -> int:
    from .data_files import read_matrix, table_bytes
    from .persistence import AtomicResult, atomic_write
    from .scoring import score_candidates

    _check_data_suffix("--data", arguments.data, arguments.sep)
    for candidate in arguments.candidates:
        _check_suffix("CANDIDATE", candidate, CANDIDATE_SUFFIXES,
                      "a candidate (a lift or a matrix)")
    if arguments.reference:
        _check_suffix("--reference", arguments.reference, MATRIX_SUFFIXES, "the reference")
    _check_table_output("--out", arguments.out)
    if arguments.plot:
        _check_suffix("--plot", arguments.plot, PLOT_SUFFIXES, "the chart")
    inputs = [("--data", arguments.data), ("--reference", arguments.reference),
              *(("CANDIDATE", candidate) for candidate in arguments.candidates)]
    _refuse_overwrites(inputs, [("--out", arguments.out), ("--plot", arguments.plot)])
    _remove_stale_temporaries(*(path for _, path in inputs), arguments.out, arguments.plot)
    for label, path in inputs:
        if path is not None:
            _check_input_file(label, path)
    _check_output_place("--out", arguments.out)
    if arguments.plot:
        _check_output_place("--plot", arguments.plot)
        from .plots import require_matplotlib

        require_matplotlib()

    table = _read_data(arguments, arguments.data)
    X, y, _ = _features_and_target(arguments, table)
    reference = None if arguments.reference is None else read_matrix(arguments.reference)
    ranking = score_candidates(arguments.candidates, X, y, reference=reference,
                               random_state=arguments.seed, n_jobs=arguments.jobs,
                               progress=not arguments.quiet)
    data = table_bytes(arguments.out, ranking)
    with AtomicResult() as result:  # the table and its chart: both or neither
        atomic_write(result.file(arguments.out), lambda handle: handle.write(data))
        if arguments.plot:
            from .plots import plot_candidate_ranking

            plot_candidate_ranking(ranking, result.file(arguments.plot))
    print(ranking.to_string(index=False))
    print(f"\nscore table written to {arguments.out}"
          + (f", chart to {arguments.plot}" if arguments.plot else ""))
    return EXIT_OK


def _run_report(arguments) -> int:
    import numpy as np

    from .data_files import read_matrix
    from .geometry import principal_angles
    from .lift import LiftMatrix

    _check_suffix("LIFT", arguments.lift, LIFT_SUFFIXES, "the lift (written by splitlift fit)")
    if arguments.reference:
        _check_suffix("--reference", arguments.reference, MATRIX_SUFFIXES, "the reference")
    _remove_stale_temporaries(arguments.lift, arguments.reference)
    lift = LiftMatrix.load(arguments.lift)
    reference = None if arguments.reference is None else read_matrix(arguments.reference)
    if arguments.json:
        import json

        from ._tables import json_ready

        record = {"lift": {"n_directions": lift.n_directions, "n_features": lift.n_features,
                           "rank": lift.rank(), "feature_names": lift.feature_names},
                  "diagnostics": lift.metadata.get("diagnostics")}
        if reference is not None:
            in_lift = lift.reference_in_lift_coordinates(reference)
            record["reference"] = {
                "off_subspace_weight": lift.leakage(in_lift),
                "restricted_singular_value": lift.restricted_singular_value(in_lift),
                "angles_degrees": (np.degrees(principal_angles(lift.subspace_basis, in_lift))
                                   if lift.subspace_basis is not None
                                   and lift.subspace_basis.shape[1] else None)}
        print(json.dumps(json_ready(record), indent=2, allow_nan=False))
        return EXIT_OK
    text = lift.metadata.get("report_text")
    if text is None:
        text = (f"lift with {lift.n_directions} directions on {lift.n_features} features, "
                f"rank {lift.rank()} (no stored diagnostics)")
    print(text)
    if reference is not None:
        reference = lift.reference_in_lift_coordinates(reference)
        print("\nreference subspace (from " + arguments.reference + ")")
        print(f"  off-subspace weight       {lift.leakage(reference):.4f} (share of the lift's "
              "direction weight outside the reference; not data leakage)")
        print(f"  coverage sigma_min        {lift.restricted_singular_value(reference):.4f}")
        if lift.subspace_basis is not None and lift.subspace_basis.shape[1] > 0:
            angles = np.degrees(principal_angles(lift.subspace_basis, reference))
            print("  angles to the estimate    "
                  + ", ".join(f"{a:.2f}" for a in angles) + " degrees (largest first)")
    return EXIT_OK


EVALUATE_FORESTS = {"rf": "random_forest", "et": "extra_trees",
                    "hgb": "hist_gradient_boosting", "stit": "stit"}


def _run_evaluate(arguments) -> int:
    import numpy as np
    import pandas as pd

    from .data_files import table_bytes
    from .persistence import AtomicResult, atomic_write
    from .selection import DirectionLiftCV

    if arguments.cv < 2:
        raise UsageError("--cv must be at least 2")
    if arguments.repeats < 1:
        raise UsageError(f"--repeats must be at least 1, got {arguments.repeats}")
    if not (arguments.margin >= 0 and np.isfinite(arguments.margin)):
        raise UsageError(f"--margin must be a finite number >= 0, got {arguments.margin:g}")
    if arguments.jobs is not None and arguments.jobs == 0:
        raise UsageError("--jobs must be a positive number of workers, or -1 for all cores")
    _check_data_suffix("DATA", arguments.data, arguments.sep)
    if arguments.out:
        _check_table_output("--out", arguments.out)
    if arguments.plot:
        _check_suffix("--plot", arguments.plot, PLOT_SUFFIXES, "the chart")
    _refuse_overwrites([("DATA", arguments.data)],
                       [("--out", arguments.out), ("--plot", arguments.plot)])
    _remove_stale_temporaries(arguments.data, arguments.out, arguments.plot)
    _check_input_file("DATA", arguments.data)
    for option in ("out", "plot"):
        if getattr(arguments, option):
            _check_output_place(f"--{option}", getattr(arguments, option))
    if arguments.plot:
        from .plots import require_matplotlib

        require_matplotlib()

    table = _read_data(arguments, arguments.data)
    X, y, names = _features_and_target(arguments, table)
    if arguments.classify:
        y = y.astype(str)
    search = DirectionLiftCV(forest=EVALUATE_FORESTS[arguments.forest], cv=arguments.cv,
                             n_jobs=arguments.jobs, random_state=arguments.seed,
                             margin=arguments.margin, n_repeats=arguments.repeats)
    search.fit(pd.DataFrame(X, columns=names), y)
    summary = search.summary()
    if arguments.out or arguments.plot:
        with AtomicResult() as result:  # the table and its chart: both or neither
            if arguments.out:
                data = table_bytes(arguments.out, summary.assign(verdict=search.verdict_))
                atomic_write(result.file(arguments.out), lambda handle: handle.write(data))
            if arguments.plot:
                from .plots import plot_selection

                plot_selection(search, result.file(arguments.plot))
    shown = summary.assign(**{column: summary[column].map(lambda value: f"{100 * value:+.1f}%")
                              for column in ("change_vs_raw", "change_se")})
    print(shown.to_string(index=False, float_format=lambda value: f"{value:.4g}"))
    print(f"\n{search.verdict_}")
    for path in (arguments.out, arguments.plot):
        if path:
            print(f"written to {path}")
    return EXIT_OK


def _run_bench(arguments) -> int:
    from .bench import run_bench

    if arguments.json:
        _check_suffix("--json", arguments.json, (".json",), "the results")
    if arguments.markdown:
        _check_suffix("--markdown", arguments.markdown, (".md",), "the page")
    _refuse_overwrites([], [("--json", arguments.json), ("--markdown", arguments.markdown)])
    for option in ("json", "markdown"):
        if getattr(arguments, option):
            _check_output_place(f"--{option}", getattr(arguments, option))
    run_bench(arguments.suite, arguments.quick, arguments.json, markdown_path=arguments.markdown)
    return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
