"""The ``splitlift`` command line: a thin layer over the library.

Exit codes: 0 success, 1 a data or file error, 2 a usage error. A user's
mistake is reported in one line on stderr, never as a traceback, and a
failed run leaves no output file behind.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

EXIT_OK, EXIT_DATA_ERROR, EXIT_USAGE = 0, 1, 2

METHODS = {
    "sir": "SlicedInverse",
    "save": "SlicedAverageVariance",
    "phd": "HessianDirections",
    "opg": "GradientOuterProduct",
    "ade": "AverageDerivative",
}


class UsageError(Exception):
    """A command-line mistake: exit code 2."""


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

    fit = commands.add_parser("fit", help="estimate a subspace and save its lift")
    fit.add_argument("data", metavar="DATA", help="CSV (or Parquet with pyarrow) file")
    fit.add_argument("--target", required=True, metavar="COL", help="response column")
    fit.add_argument("--features", metavar="C1,C2,...",
                     help="feature columns (default: every column but the target)")
    fit.add_argument("--method", choices=sorted(METHODS), default="sir",
                     help="subspace estimator (default: sir)")
    fit.add_argument("--dim", type=_dimension, default="auto", metavar="N|auto",
                     help="subspace dimension (default: auto)")
    fit.add_argument("--complement-weight", type=float, default=0.05, metavar="W",
                     help="weight of the orthogonal complement, in (0, 1) (default 0.05)")
    fit.add_argument("--keep-inputs", action="store_true",
                     help="output the inputs, then the lifted directions")
    fit.add_argument("--out", required=True, metavar="LIFT.npz", help="lift file to write")
    fit.add_argument("--report", metavar="FILE", help="also write the report as text")
    fit.add_argument("--plot", metavar="DIR", help="also write diagnostic PNG plots here")

    transform = commands.add_parser("transform", help="apply a saved lift to data")
    transform.add_argument("lift", metavar="LIFT.npz")
    transform.add_argument("data", metavar="DATA")
    transform.add_argument("--out", required=True, metavar="OUT.csv")

    score = commands.add_parser("score", help="score candidate direction matrices")
    score.add_argument("candidates", nargs="+", metavar="CANDIDATE",
                       help=".npz lift files, .npy or .csv matrices")
    score.add_argument("--data", required=True, metavar="DATA")
    score.add_argument("--target", required=True, metavar="COL")
    score.add_argument("--features", metavar="C1,C2,...")
    score.add_argument("--reference", metavar="REF.npy",
                       help="columns spanning a known subspace (.npy or .csv)")
    score.add_argument("--out", required=True, metavar="TABLE.csv")
    score.add_argument("--plot", metavar="FILE.png", help="also draw the ranking chart")
    score.add_argument("--seed", type=int, default=0, help="seed of the folds and forests")

    report = commands.add_parser("report", help="print the diagnostics of a saved lift")
    report.add_argument("lift", metavar="LIFT.npz")
    report.add_argument("--reference", metavar="REF.npy")

    evaluate = commands.add_parser(
        "evaluate", help="compare raw inputs and lifts by cross-validating a forest")
    evaluate.add_argument("data", metavar="DATA", help="CSV (or Parquet with pyarrow) file")
    evaluate.add_argument("--target", required=True, metavar="COL", help="response column")
    evaluate.add_argument("--features", metavar="C1,C2,...",
                          help="feature columns (default: every column but the target)")
    evaluate.add_argument("--forest", choices=sorted(EVALUATE_FORESTS), default="rf",
                          help="downstream forest (default: rf)")
    evaluate.add_argument("--cv", type=int, default=5, metavar="K", help="folds (default 5)")
    evaluate.add_argument("--classify", action="store_true",
                          help="read a numeric target as class labels")
    evaluate.add_argument("--jobs", type=int, default=1, metavar="N", help="parallel jobs")
    evaluate.add_argument("--seed", type=int, default=0, help="seed of the folds and forests")
    evaluate.add_argument("--out", metavar="FILE.csv|FILE.json", help="write the table")
    evaluate.add_argument("--plot", metavar="FILE.png", help="plot CV error with error bars")

    bench = commands.add_parser("bench", help="time splitlift against reference implementations")
    bench.add_argument("--suite", choices=["speed", "accuracy", "rate", "real", "all"],
                       default="speed")
    bench.add_argument("--quick", action="store_true", help="small sizes, finishes fast")
    bench.add_argument("--json", metavar="FILE", help="also write the results as JSON")
    bench.add_argument("--markdown", metavar="FILE",
                       help="also write the tables as a Markdown page (docs/benchmarks.md)")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``splitlift`` console script."""
    parser = _build_parser()
    try:
        arguments = parser.parse_args(argv)
    except SystemExit as stop:  # argparse exits 2 on usage errors, 0 on --help
        return int(stop.code or 0)
    handler = globals()[f"_run_{arguments.command}"]
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            code = handler(arguments)
        for warning in caught:
            sys.stderr.write(f"splitlift {arguments.command}: warning: {warning.message}\n")
        return code
    except UsageError as error:
        sys.stderr.write(f"splitlift {arguments.command}: error: {error}\n")
        return EXIT_USAGE
    except (ValueError, OSError, ImportError) as error:
        sys.stderr.write(f"splitlift {arguments.command}: error: {error}\n")
        return EXIT_DATA_ERROR


def _feature_list(text: str | None) -> list[str] | None:
    if text is None:
        return None
    names = [name.strip() for name in text.split(",") if name.strip()]
    if not names:
        raise UsageError("--features names no column")
    return names


def _check_output_folder(*paths) -> None:
    for path in paths:
        if path is not None and not Path(path).parent.is_dir():
            raise UsageError(f"the folder of {path} does not exist; create it first")


def _run_demo(arguments) -> int:
    from .demo import run_demo

    for name in ("samples", "folds", "trees"):
        if getattr(arguments, name) < 2:
            raise UsageError(f"--{name} must be at least 2")
    run_demo(arguments.samples, arguments.folds, arguments.trees, arguments.seed)
    return EXIT_OK


def _run_fit(arguments) -> int:
    import pandas as pd

    from . import estimators
    from .data_files import features_and_target, read_table
    from .transformer import DirectionLift

    if not 0 < arguments.complement_weight < 1:
        raise UsageError("--complement-weight must be strictly between 0 and 1")
    _check_output_folder(arguments.out, arguments.report)
    table = read_table(arguments.data)
    X, y, names = features_and_target(table, arguments.target, _feature_list(arguments.features))
    estimator = getattr(estimators, METHODS[arguments.method])(dim=arguments.dim)
    lift = DirectionLift(estimator, complement_weight=arguments.complement_weight,
                         keep_inputs=arguments.keep_inputs)
    lift.fit(pd.DataFrame(X, columns=names), y)
    text = str(lift.report())
    written = []
    try:
        lift.save(arguments.out)
        written.append(Path(arguments.out))
        if arguments.report:
            from .persistence import atomic_write

            written.append(atomic_write(arguments.report,
                                        lambda handle: handle.write(text.encode("utf-8"))))
        if arguments.plot:
            from .plots import write_all_plots

            folder = Path(arguments.plot)
            folder.mkdir(parents=True, exist_ok=True)
            written.extend(write_all_plots(lift, X, y, folder))
    except BaseException:
        for path in written:  # all or nothing: a failed run leaves no output
            Path(path).unlink(missing_ok=True)
        raise
    print(text)
    print(f"\nlift written to {arguments.out}")
    return EXIT_OK


def _run_transform(arguments) -> int:
    from .data_files import read_table, select_columns, write_table
    from .lift import LiftMatrix

    _check_output_folder(arguments.out)
    lift = LiftMatrix.load(arguments.lift)
    table = read_table(arguments.data)
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
    lifted = lift.apply(select_columns(table, lift.feature_names))
    columns = lift.output_feature_names()  # the names DirectionLift gives in Python
    write_table(arguments.out, columns, lifted)
    print(f"{lifted.shape[0]} rows x {lifted.shape[1]} lifted columns written to {arguments.out}")
    return EXIT_OK


def _run_score(arguments) -> int:
    import io

    from .data_files import features_and_target, read_matrix, read_table
    from .persistence import atomic_write
    from .scoring import score_candidates

    _check_output_folder(arguments.out, arguments.plot)
    table = read_table(arguments.data)
    X, y, _ = features_and_target(table, arguments.target, _feature_list(arguments.features))
    reference = None if arguments.reference is None else read_matrix(arguments.reference)
    ranking = score_candidates(arguments.candidates, X, y, reference=reference,
                               random_state=arguments.seed)
    buffer = io.StringIO()
    ranking.to_csv(buffer, index=False)
    data = buffer.getvalue().encode("utf-8")
    atomic_write(arguments.out, lambda handle: handle.write(data))
    if arguments.plot:
        from .plots import plot_candidate_ranking

        try:
            plot_candidate_ranking(ranking, arguments.plot)
        except BaseException:
            Path(arguments.out).unlink(missing_ok=True)  # all or nothing
            raise
    print(ranking.to_string(index=False))
    print(f"\nscore table written to {arguments.out}")
    return EXIT_OK


def _run_report(arguments) -> int:
    import numpy as np

    from .data_files import read_matrix
    from .geometry import principal_angles
    from .lift import LiftMatrix

    lift = LiftMatrix.load(arguments.lift)
    text = lift.metadata.get("report_text")
    if text is None:
        text = (f"lift with {lift.n_directions} directions on {lift.n_features} features, "
                f"rank {lift.rank()} (no stored diagnostics)")
    print(text)
    if arguments.reference is not None:
        reference = lift.reference_in_lift_coordinates(read_matrix(arguments.reference))
        print("\nreference subspace (from " + arguments.reference + ")")
        print(f"  leakage                   {lift.leakage(reference):.4f}")
        print(f"  restricted sing. value    {lift.restricted_singular_value(reference):.4f}")
        if lift.subspace_basis is not None and lift.subspace_basis.shape[1] > 0:
            angles = np.degrees(principal_angles(lift.subspace_basis, reference))
            print("  angles to estimate        "
                  + ", ".join(f"{a:.2f}" for a in angles) + " degrees (largest first)")
    return EXIT_OK


EVALUATE_FORESTS = {"rf": "random_forest", "et": "extra_trees",
                    "hgb": "hist_gradient_boosting", "stit": "stit"}


def _run_evaluate(arguments) -> int:
    import json

    import pandas as pd

    from .data_files import features_and_target, read_table
    from .persistence import atomic_write
    from .selection import DirectionLiftCV

    suffix = Path(arguments.out).suffix.lower() if arguments.out else None
    if suffix not in (None, ".csv", ".json"):
        raise UsageError(f"--out must end in .csv or .json, got {arguments.out}")
    if arguments.cv < 2:
        raise UsageError("--cv must be at least 2")
    _check_output_folder(arguments.out, arguments.plot)
    table = read_table(arguments.data)
    X, y, names = features_and_target(table, arguments.target, _feature_list(arguments.features))
    if arguments.classify:
        y = y.astype(str)
    search = DirectionLiftCV(forest=EVALUATE_FORESTS[arguments.forest], cv=arguments.cv,
                             n_jobs=arguments.jobs, random_state=arguments.seed)
    search.fit(pd.DataFrame(X, columns=names), y)
    summary = search.summary()
    written = []
    try:
        if suffix == ".csv":
            data = summary.to_csv(index=False).encode("utf-8")
        elif suffix == ".json":
            data = json.dumps({"verdict": search.verdict_, "chosen": search.best_params_,
                               "forest": type(search.forest_).__name__,
                               "folds": search.n_splits_,
                               "candidates": json.loads(summary.to_json(orient="records"))},
                              indent=2).encode("utf-8")
        if suffix is not None:
            written.append(atomic_write(arguments.out, lambda handle: handle.write(data)))
        if arguments.plot:
            from .plots import plot_selection

            written.append(plot_selection(search, arguments.plot))
    except BaseException:
        for path in written:  # all or nothing: a failed run leaves no output
            Path(path).unlink(missing_ok=True)
        raise
    shown = summary.assign(**{column: summary[column].map(lambda value: f"{100 * value:+.1f}%")
                              for column in ("change_vs_raw", "change_se")})
    print(shown.to_string(index=False, float_format=lambda value: f"{value:.4g}"))
    print(f"\n{search.verdict_}")
    for path in written:
        print(f"written to {path}")
    return EXIT_OK


def _run_bench(arguments) -> int:
    from .bench import run_bench

    _check_output_folder(arguments.json, arguments.markdown)
    run_bench(arguments.suite, arguments.quick, arguments.json, markdown_path=arguments.markdown)
    return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
