"""Timing of the STIT forest against scikit-learn's extremely randomised trees."""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
from sklearn.ensemble import ExtraTreesRegressor

from ..forest import StitForestRegressor
from ..lift import LiftMatrix
from ._timing import best_time, best_timed, table

#: Inputs of the synthetic ridge problem; two of their directions matter.
N_INPUTS = 10


def two_index_ridge(n_train: int, n_test: int, n_inputs: int, seed: int = 0):
    """A simulated two-index ridge function of ``n_inputs`` standard normal inputs.

    ``y = sin(2 b1·x) + (b2·x)^2 / 2 + N(0, 0.1^2)`` with ``b1, b2`` an
    orthonormal pair drawn at random. Returns the training and test inputs
    and responses, and the pair as the columns of an (n_inputs, 2) basis.
    """
    generator = np.random.default_rng(seed)
    basis = np.linalg.qr(generator.standard_normal((n_inputs, 2)))[0]
    X = generator.standard_normal((n_train + n_test, n_inputs))
    index = X @ basis
    y = np.sin(2 * index[:, 0]) + index[:, 1] ** 2 / 2 + 0.1 * generator.standard_normal(len(X))
    return X[:n_train], y[:n_train], X[n_train:], y[n_train:], basis


def ridge_problem(n_train: int, n_test: int, width: int, seed: int = 0):
    """The two-index ridge function in 10 inputs and a lift of ``width`` directions around it.

    The lift puts ``width - 8`` directions in ``span(b1, b2)`` and weight
    0.05 on the 8 complement directions (:func:`two_index_ridge`).
    """
    X, y, X_test, y_test, basis = two_index_ridge(n_train, n_test, N_INPUTS, seed)
    lift = LiftMatrix.from_subspace(basis, complement_weight=0.05, n_in_subspace=width - 8)
    return X, y, X_test, y_test, lift


def benchmark_forest(n_samples: int = 20_000, width: int = 10, n_trees: int = 100,
                     n_jobs: int | None = None, n_test: int = 5_000, repeats: int = 2,
                     raw: bool = False) -> dict:
    """Fit and predict times of a fully grown STIT forest and of the reference forest.

    Both forests grow ``n_trees`` trees to full depth on the same lifted
    features of :func:`ridge_problem`: :class:`StitForestRegressor` with
    ``lifetime=np.inf`` and the lift (it lifts X itself, inside the timing),
    and scikit-learn's ``ExtraTreesRegressor(max_features=1)`` on the lifted
    columns ``lift.apply(X)`` computed beforehand; it also cuts one random
    column at a random threshold per node. With ``raw`` both grow instead on
    ``width`` raw inputs of :func:`two_index_ridge`, with no lift: columns
    that fill all their dimensions, unlike lifted columns around a
    two-dimensional subspace. Timings are the best wall-clock seconds of
    ``repeats`` runs each, taken one after the other in this process (one
    run varied by up to half from run to run).

    Returns
    -------
    dict
        Seconds, ratios (STIT over reference), test mean squared errors,
        mean leaves and node storage per tree of both forests.
    """
    if raw:
        X, y, X_test, y_test, _ = two_index_ridge(n_samples, n_test, width)
        lift, lifted, lifted_test = None, X, X_test
    else:
        X, y, X_test, y_test, lift = ridge_problem(n_samples, n_test, width)
        lifted, lifted_test = lift.apply(X), lift.apply(X_test)
    stit = StitForestRegressor(lifetime=np.inf, n_trees=n_trees, lift=lift, random_state=0,
                               n_jobs=n_jobs)
    reference = ExtraTreesRegressor(n_estimators=n_trees, max_features=1, random_state=0,
                                    n_jobs=n_jobs)
    stit_fit = best_time(lambda: stit.fit(X, y), repeats)
    reference_fit = best_time(lambda: reference.fit(lifted, y), repeats)
    stit_predict, stit_prediction = best_timed(lambda: stit.predict(X_test), repeats)
    reference_predict, reference_prediction = best_timed(
        lambda: reference.predict(lifted_test), repeats)
    reference_bytes = np.mean([
        sum(estimator.tree_.__getstate__()[key].nbytes for key in ("nodes", "values"))
        for estimator in reference.estimators_
    ])
    stit_bytes = np.mean([tree.nbytes for tree in stit.trees_])
    return {
        "n_samples": n_samples, "width": width, "inputs": "raw" if raw else "lifted",
        "n_trees": n_trees, "n_jobs": n_jobs or 1,
        "stit_fit_seconds": stit_fit, "reference_fit_seconds": reference_fit,
        "fit_ratio": stit_fit / reference_fit,
        "stit_predict_seconds": stit_predict, "reference_predict_seconds": reference_predict,
        "predict_ratio": stit_predict / reference_predict,
        "stit_test_mse": float(np.mean((stit_prediction - y_test) ** 2)),
        "reference_test_mse": float(np.mean((reference_prediction - y_test) ** 2)),
        "stit_mean_leaves": float(stit.n_leaves_.mean()),
        "reference_mean_leaves": float(np.mean([e.get_n_leaves() for e in reference.estimators_])),
        "memory_ratio": float(stit_bytes / reference_bytes),
    }


def benchmark_auto_lifetime(n_samples: int = 20_000, width: int = 10, n_trees: int = 100,
                            n_jobs: int | None = None, repeats: int = 3) -> dict:
    """Time of ``lifetime="auto"`` against fixed-lifetime fits of the same forest.

    The fixed fits are the fully grown forest (``lifetime=np.inf``, the
    most expensive fixed lifetime) and the forest at the lifetime that
    ``"auto"`` chose; each time is the best of ``repeats`` fits.
    """
    X, y, X_test, y_test, lift = ridge_problem(n_samples, 5_000, width)

    def forest(lifetime):
        return StitForestRegressor(lifetime=lifetime, n_trees=n_trees, lift=lift,
                                   random_state=0, n_jobs=n_jobs)

    auto_seconds, auto = best_timed(lambda: forest("auto").fit(X, y), repeats)
    grown_seconds, grown = best_timed(lambda: forest(np.inf).fit(X, y), repeats)
    chosen_seconds = best_time(lambda: forest(auto.lifetime_).fit(X, y), repeats)
    return {
        "n_samples": n_samples, "width": width, "n_trees": n_trees, "n_jobs": n_jobs or 1,
        "auto_seconds": auto_seconds, "grown_seconds": grown_seconds,
        "chosen_seconds": chosen_seconds,
        "auto_over_grown": auto_seconds / grown_seconds,
        "auto_over_chosen": auto_seconds / chosen_seconds,
        "auto_test_mse": float(np.mean((auto.predict(X_test) - y_test) ** 2)),
        "grown_test_mse": float(np.mean((grown.predict(X_test) - y_test) ** 2)),
    }


_FIRST_USE = """
import time
import numpy as np
from splitlift.forest import StitForestRegressor
X = np.random.default_rng(0).normal(size=(2000, 5))
y = X[:, 0]
times = []
for _ in range(2):
    started = time.perf_counter()
    StitForestRegressor(n_trees=4, random_state=0).fit(X, y).predict(X)
    StitForestRegressor(n_trees=4, extent="window", lifetime=0.2).fit(X[:50], y[:50]).predict(X)
    times.append(time.perf_counter() - started)
print(times[0] - times[1])
"""


def first_use_cost(cold: bool = True) -> dict:
    """Extra seconds of the first fit and predict in a fresh process, over the second.

    With ``cold``, one process runs on an empty numba cache (a directory of
    its own): the one-time compile cost. Then a process on a filled cache
    (that one, or the usual cache when not ``cold``) measures what every
    later fresh process pays: loading numba and the cached machine code.
    """
    package_root = str(Path(__file__).resolve().parents[2])
    environment = {**os.environ,
                   "PYTHONPATH": os.pathsep.join([package_root, os.environ.get("PYTHONPATH", "")])}

    def extra_seconds(cache: str | None) -> float:
        settings = environment if cache is None else {**environment, "NUMBA_CACHE_DIR": cache}
        run = subprocess.run([sys.executable, "-c", _FIRST_USE], capture_output=True, text=True,
                             env=settings, check=True)
        return float(run.stdout.strip().splitlines()[-1])

    if not cold:
        return {"compile_seconds": None, "cached_first_use_seconds": extra_seconds(None)}
    with tempfile.TemporaryDirectory() as cache:
        compile_seconds = extra_seconds(cache)
        return {"compile_seconds": compile_seconds,
                "cached_first_use_seconds": extra_seconds(cache)}


def run_forest_speed(quick: bool, out) -> dict:
    """The forest rows of the speed suite: tables written to ``out``, results returned."""
    sizes, widths, n_trees = ((5_000,), (10, 30), 20) if quick else ((20_000, 100_000), (10, 30),
                                                                     100)
    benchmark_forest(1_000, 10, 2)  # first use in this process (numba, caches) is timed apart
    benchmark_auto_lifetime(1_000, 10, 2)
    rows = [benchmark_forest(n, width, n_trees, n_jobs)
            for n in sizes for width in widths for n_jobs in (1, 2)]
    # and on columns that fill all their dimensions, where cells keep their points apart
    rows.append(benchmark_forest(sizes[-1], widths[-1], n_trees, 1, raw=True))
    out.write(f"\nSTIT forest (lift of the given width, fully grown) vs "
              f"ExtraTreesRegressor(max_features=1) on the same lifted columns, "
              f"{n_trees} trees; seconds, ratios STIT / ET; the raw row grows both on that "
              f"many raw normal inputs, no lift\n")
    out.write(table(rows, [
        ("n_samples", "n", "d"), ("width", "width", "d"), ("inputs", "inputs", "s"),
        ("n_jobs", "jobs", "d"),
        ("stit_fit_seconds", "STIT fit", ".2f"), ("reference_fit_seconds", "ET fit", ".2f"),
        ("fit_ratio", "fit ratio", ".2f"), ("stit_predict_seconds", "STIT pred", ".2f"),
        ("reference_predict_seconds", "ET pred", ".2f"), ("predict_ratio", "pred ratio", ".2f"),
        ("stit_test_mse", "STIT MSE", ".4f"), ("reference_test_mse", "ET MSE", ".4f"),
        ("memory_ratio", "mem/tree", ".2f")]) + "\n")
    autos = [benchmark_auto_lifetime(sizes[0], 10, n_trees, n_jobs) for n_jobs in (1, 2)]
    out.write(f"\nlifetime='auto' (grow once, score every lifetime by leave-one-out, prune), "
              f"n = {sizes[0]}, width 10, {n_trees} trees, against fixed-lifetime fits of the "
              "same forest: fully grown, and at the lifetime 'auto' chose; seconds\n")
    out.write(table(autos, [
        ("n_jobs", "jobs", "d"), ("auto_seconds", "auto", ".2f"),
        ("grown_seconds", "grown", ".2f"), ("chosen_seconds", "chosen", ".2f"),
        ("auto_over_grown", "auto/grown", ".2f"), ("auto_over_chosen", "auto/chosen", ".2f"),
        ("auto_test_mse", "auto MSE", ".4f"), ("grown_test_mse", "grown MSE", ".4f")]) + "\n")
    first_use = first_use_cost(cold=not quick)
    compiled = first_use["compile_seconds"]
    out.write("\nfirst use: " + ("" if compiled is None else
                                 f"compiling once into an empty cache {compiled:.1f} s; ")
              + f"a fresh process on the cache pays {first_use['cached_first_use_seconds']:.2f} s "
              "more for its first fit and predict than for its second\n")
    return {"rows": rows, "auto_lifetime": autos, "first_use": first_use}
