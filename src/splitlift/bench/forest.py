"""Timing of the STIT forest against scikit-learn's extremely randomised trees."""

from __future__ import annotations

import numpy as np
from sklearn.ensemble import ExtraTreesRegressor
from sklearn.utils import check_random_state

from ..forest import StitForestRegressor
from ._timing import timed


def benchmark_forest(
    n_samples: int = 20_000,
    n_features: int = 10,
    n_trees: int = 100,
    random_state=0,
    n_jobs: int | None = None,
) -> dict:
    """Fit and predict times of a fully grown STIT forest and of the reference forest.

    Both forests grow ``n_trees`` trees to full depth on the same synthetic
    ridge-function data: :class:`StitForestRegressor` with
    ``lifetime=np.inf`` on the input axes, and scikit-learn's
    ``ExtraTreesRegressor(max_features=1)``, which also cuts one random
    coordinate at a random threshold per node. Both predict the training
    inputs. Timings come from one run each.

    Parameters
    ----------
    n_samples, n_features, n_trees : int
    random_state : int, RandomState instance or None
    n_jobs : int, optional
        Passed to both forests.

    Returns
    -------
    dict
        ``stit_fit_seconds``, ``stit_predict_seconds``,
        ``reference_fit_seconds``, ``reference_predict_seconds``,
        ``fit_ratio`` and ``predict_ratio`` (STIT over reference), the mean
        number of leaves of each forest, and the settings.
    """
    rng = check_random_state(random_state)
    X = rng.standard_normal((n_samples, n_features))
    direction = np.ones(n_features) / np.sqrt(n_features)
    y = np.sin(2 * X @ direction) + 0.1 * rng.standard_normal(n_samples)  # synthetic

    stit = StitForestRegressor(lifetime=np.inf, n_trees=n_trees, random_state=0, n_jobs=n_jobs)
    reference = ExtraTreesRegressor(
        n_estimators=n_trees, max_features=1, random_state=0, n_jobs=n_jobs
    )
    stit_fit, _ = timed(lambda: stit.fit(X, y))
    stit_predict, _ = timed(lambda: stit.predict(X))
    reference_fit, _ = timed(lambda: reference.fit(X, y))
    reference_predict, _ = timed(lambda: reference.predict(X))
    return {
        "n_samples": n_samples,
        "n_features": n_features,
        "n_trees": n_trees,
        "n_jobs": n_jobs,
        "stit_fit_seconds": stit_fit,
        "stit_predict_seconds": stit_predict,
        "reference_fit_seconds": reference_fit,
        "reference_predict_seconds": reference_predict,
        "fit_ratio": stit_fit / reference_fit,
        "predict_ratio": stit_predict / reference_predict,
        "stit_mean_leaves": float(stit.n_leaves_.mean()),
        "reference_mean_leaves": float(
            np.mean([tree.get_n_leaves() for tree in reference.estimators_])
        ),
    }
