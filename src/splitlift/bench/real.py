"""Real-data suite: does a lift help forests on open data sets?

Every data set (:mod:`.real_data`, bundled with scikit-learn or statsmodels)
is split by repeated K-fold; in every outer fold each forest (random forest,
extra trees, histogram gradient boosting, scikit-learn defaults) is fitted
on the raw inputs, after PCA and PLS, after each lift alone and with the
inputs kept, and after the choice :class:`~splitlift.DirectionLiftCV` makes
by inner cross-validation on the training part only. All feature sets of a
fold share its rows and the forest's seed. Errors are mean squared error
(regression) and misclassification rate (classification); changes are
relative to the same forest on the raw inputs, with the standard error of
the paired fold-by-fold differences (approximate: repeated folds reuse rows).
"""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.base import clone
from sklearn.decomposition import PCA
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from .._progress import parallel_map
from ..estimators import (
    AverageDerivative,
    GradientOuterProduct,
    HessianDirections,
    SlicedAverageVariance,
    SlicedInverse,
)
from ..selection import DirectionLiftCV, named_forest, prediction_error
from ..transformer import DirectionLift
from ._timing import table, timed
from .accuracy import _PLSFeatures
from .real_data import RealDataset, real_datasets

#: Downstream forests: short label -> name known to DirectionLiftCV.
FORESTS = {"RF": "random_forest", "ET": "extra_trees", "HGB": "hist_gradient_boosting"}
CHOICE = "CV choice"


def lift_estimators(classification: bool) -> dict:
    """Each estimator at its defaults (pHd needs a numeric response)."""
    chosen = {"SIR": SlicedInverse(), "SAVE": SlicedAverageVariance(),
              "pHd": HessianDirections(), "OPG": GradientOuterProduct(random_state=0),
              "ADE": AverageDerivative()}
    if classification:
        del chosen["pHd"]
    return chosen


def feature_sets(data: RealDataset, forest, quick: bool) -> dict:
    """Name -> transformer put ahead of the forest (None: raw inputs)."""
    k = min(2, data.X.shape[1])
    sets = {"raw": None,
            "PCA": make_pipeline(StandardScaler(), PCA(n_components=k)),
            "PLS": make_pipeline(StandardScaler(), _PLSFeatures(n_components=k))}
    estimators = lift_estimators(data.classification)
    for label, estimator in estimators.items():
        sets[label] = DirectionLift(estimator)
    for label, estimator in estimators.items():
        sets[f"{label}+in"] = DirectionLift(estimator, keep_inputs=True)
    sets[CHOICE] = DirectionLiftCV(forest=forest, cv=3 if quick else 5, random_state=0,
                                   progress=False)
    return sets


def _forest(label: str, classification: bool, quick: bool):
    forest = named_forest(FORESTS[label], classification, random_state=0)
    if quick:
        forest.set_params(**({"max_iter": 20} if label == "HGB" else {"n_estimators": 20}))
    return forest


def _evaluate_fold(data: RealDataset, train, test, forest_label: str, quick: bool) -> dict:
    """Errors of every feature set on one outer fold, the choice made and its fit time."""
    forest = _forest(forest_label, data.classification, quick)
    errors, choice, seconds, failures = {}, None, {}, {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name, transformer in feature_sets(data, forest, quick).items():
            model = clone(forest) if transformer is None else make_pipeline(
                transformer, clone(forest))
            try:
                seconds[name], _ = timed(lambda model=model: model.fit(data.X[train],
                                                                      data.y[train]))
                errors[name] = prediction_error(model, data.X[test], data.y[test],
                                                data.classification)
            except Exception as error:  # missing in the tables, named below them
                errors[name] = np.nan
                failures[name] = f"{type(error).__name__}: {error}"
            if name == CHOICE and np.isfinite(errors[name]):
                choice = model[0].cv_results_["candidate"][model[0].best_index_]
    return {"data": data.name, "forest": forest_label, "errors": errors, "choice": choice,
            "seconds": seconds, "failures": failures}


def _folds(data: RealDataset, quick: bool) -> list:
    splitter = (RepeatedStratifiedKFold if data.classification else RepeatedKFold)(
        n_splits=3 if quick else 5, n_repeats=1 if quick else 2, random_state=0)
    return list(splitter.split(data.X, data.y))


def _summarise(records: list[dict], names: list[str]) -> dict:
    """Mean error of raw inputs, and change (and paired SE) of every set against raw."""
    errors = {name: np.array([r["errors"].get(name, np.nan) for r in records])
              for name in names}
    raw = errors["raw"]
    summary = {"raw_error": float(raw.mean()), "n_folds": len(records), "change": {},
               "change_se": {}}
    for name in names:
        difference = errors[name] - raw
        if np.isnan(difference).any():
            summary["change"][name] = summary["change_se"][name] = np.nan
            continue
        summary["change"][name] = float(difference.mean() / raw.mean())
        summary["change_se"][name] = float(difference.std(ddof=1) / np.sqrt(len(records))
                                           / raw.mean())
    summary["mean_error"] = {name: float(np.mean(errors[name])) for name in names}
    choices = [r["choice"] for r in records if r["choice"] is not None]
    summary["choices"] = {name: choices.count(name) for name in dict.fromkeys(choices)}
    summary["choice_seconds"] = float(np.median([r["seconds"].get(CHOICE, np.nan)
                                                 for r in records]))
    summary["raw_seconds"] = float(np.median([r["seconds"]["raw"] for r in records]))
    return summary


def _percent(value: float) -> str:
    return "-" if not np.isfinite(value) else f"{100 * value:+.1f}%"


def _outcome_counts(changes: np.ndarray, ses: np.ndarray) -> tuple[int, int, int]:
    """(lower, higher within one SE, higher by more than one SE).

    "Within" includes the boundary, up to rounding: when a choice differs
    from the raw inputs on a single fold, its mean difference equals its
    standard error exactly (one value d among J: mean d/J, SE d/J), and the
    two computed numbers may differ in the last bit either way.
    """
    lower = int(np.sum(changes < 0))
    worse = int(np.sum(changes > ses * (1 + 1e-9)))
    return lower, len(changes) - lower - worse, worse


def run_real(quick: bool, out, names=None, n_jobs=-1, forests=tuple(FORESTS)) -> dict:
    """Run the suite, print its tables to ``out`` and return the figures.

    ``names`` picks data sets and ``forests`` labels of :data:`FORESTS` (all by
    default); ``quick`` uses one 3-fold split, 20 trees and, unless named, the
    smallest tables only.
    """
    datasets = real_datasets(names)
    if quick:  # the smallest tables only: a smoke run of the whole harness
        datasets = [d for d in datasets if d.X.shape[0] <= 250] if names is None else datasets
    units = [(data, train, test, label) for data in datasets
             for train, test in _folds(data, quick) for label in forests]
    records = parallel_map(lambda unit: _evaluate_fold(*unit, quick), units, len(units),
                           "real-data suite", n_jobs)

    folds = "1 x 3" if quick else "2 x 5"
    out.write(f"\nreal data: {len(datasets)} open data sets, repeated K-fold ({folds}); "
              "forests with scikit-learn defaults" + (" (20 trees)" if quick else "") + "\n")
    out.write(table([{"data": d.name, "source": d.source, "n": d.X.shape[0],
                      "d": d.X.shape[1], "task": "class" if d.classification else "regr",
                      "target": d.target, "note": d.note} for d in datasets],
                    [("data", "data set", "s"), ("source", "source", "s"), ("n", "n", "d"),
                     ("d", "d", "d"), ("task", "task", "s"), ("target", "target", "s"),
                     ("note", "note", "s")]) + "\n")
    summaries: dict = {}
    for label in forests:
        for data in datasets:
            mine = [r for r in records if r["forest"] == label and r["data"] == data.name]
            order = list(mine[0]["errors"])
            summaries[(label, data.name)] = _summarise(mine, order)
    results = {"datasets": [{"name": d.name, "source": d.source, "n": int(d.X.shape[0]),
                             "d": int(d.X.shape[1]), "classification": d.classification}
                            for d in datasets],
               "summaries": {f"{label}/{name}": value
                             for (label, name), value in summaries.items()}}
    for label in forests:
        _write_forest_table(out, label, datasets, summaries)
    _write_verdict_table(out, datasets, summaries, results, forests)
    failed = [f"  {r['forest']} / {r['data']} / {name}: {message}"
              for r in records for name, message in r["failures"].items()]
    results["failures"] = failed
    if failed:
        out.write(f"\nfailed fits (shown as '-' above), {len(failed)}:\n"
                  + "\n".join(dict.fromkeys(failed)) + "\n")
    return results


def _write_forest_table(out, label: str, datasets, summaries) -> None:
    out.write(f"\n{label} ({FORESTS[label].replace('_', ' ')}): error on raw inputs, "
              "change of the mean error against it\n")
    rows, columns = [], None
    for data in datasets:
        summary = summaries[(label, data.name)]
        names = [n for n in summary["change"] if n != "raw"]
        columns = names if columns is None or len(names) > len(columns) else columns
        top = max(summary["choices"].items(), key=lambda item: item[1], default=("-", 0))
        rows.append({"data": data.name, "raw": summary["raw_error"],
                     **{n: _percent(summary["change"][n]) for n in names},
                     "se": _percent(summary["change_se"][CHOICE]).lstrip("+"),
                     "chosen": f"{top[0]} {top[1]}/{summary['n_folds']}"})
    spec = ([("data", "data set", "s"), ("raw", "raw", ".5g")]
            + [(n, n, "s") for n in columns]
            + [("se", "CV ± se", "s"), ("chosen", "most chosen", "s")])
    out.write(table(rows, spec) + "\n")


def _write_verdict_table(out, datasets, summaries, results, forests) -> None:
    """The targets: the CV choice against the same forest's raw inputs and the best raw forest."""
    out.write("\nthe DirectionLiftCV choice against raw inputs (lower / higher within one SE / "
              "higher by more than one SE; relative change of the mean error)\n")
    rows = []
    for label in forests:
        for reference in ("same forest raw", "best raw forest"):
            changes, ses = [], []
            for data in datasets:
                summary = summaries[(label, data.name)]
                if reference == "same forest raw":
                    change, se = summary["change"][CHOICE], summary["change_se"][CHOICE]
                else:
                    best = min(summaries[(other, data.name)]["raw_error"] for other in forests)
                    change = summary["mean_error"][CHOICE] / best - 1.0
                    se = np.nan
                changes.append(change)
                ses.append(se)
            changes, ses = np.array(changes), np.array(ses)
            lower, within, worse = _outcome_counts(changes, np.nan_to_num(ses, nan=0.0))
            rows.append({"forest": label, "against": reference,
                         "outcome": f"{lower} / {within} / {worse}"
                         if reference == "same forest raw" else f"{lower} lower, "
                         f"{len(changes) - lower} higher",
                         "median": _percent(float(np.median(changes))),
                         "worst": _percent(float(np.max(changes))),
                         "best": _percent(float(np.min(changes))),
                         "seconds": np.median([summaries[(label, d.name)]["choice_seconds"]
                                               for d in datasets])})
    out.write(table(rows, [("forest", "forest", "s"), ("against", "against", "s"),
                           ("outcome", "outcome", "s"), ("median", "median", "s"),
                           ("worst", "worst", "s"), ("best", "best", "s"),
                           ("seconds", "fit s (median)", ".1f")]) + "\n")
    results["verdict"] = rows
    out.write("\nevery fixed feature set against the same forest on raw inputs "
              "(data sets lower / higher by more than one SE; median change)\n")
    names = [n for n in summaries[(forests[0], datasets[0].name)]["change"] if n != "raw"]
    fixed = []
    for name in names:
        row = {"set": name}
        for label in forests:
            changes = np.array([summaries[(label, d.name)]["change"].get(name, np.nan)
                                for d in datasets])
            ses = np.array([summaries[(label, d.name)]["change_se"].get(name, np.nan)
                            for d in datasets])
            known = np.isfinite(changes)
            lower, _, worse = _outcome_counts(changes[known], ses[known])
            row[label] = (f"{lower}/{worse} {_percent(float(np.median(changes[known])))}"
                          if known.any() else "-")
        fixed.append(row)
    out.write(table(fixed, [("set", "feature set", "s")]
                    + [(label, label, "s") for label in forests]) + "\n")
    results["fixed_sets"] = fixed
