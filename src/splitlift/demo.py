"""``splitlift demo``: the whole job on bundled synthetic data."""

from __future__ import annotations

import sys
import time
from typing import TextIO

import numpy as np
from sklearn.ensemble import RandomForestRegressor
from sklearn.model_selection import KFold, cross_val_score
from sklearn.pipeline import make_pipeline

from .datasets import make_kiln_problem
from .estimators import HessianDirections, SlicedAverageVariance, SlicedInverse
from .geometry import principal_angles
from .transformer import DirectionLift


def demo_estimators() -> dict:
    """The estimators the demo compares, by display name."""
    return {
        "SIR": SlicedInverse(n_slices=10, dim=2),
        "SAVE": SlicedAverageVariance(n_slices=5, dim=2),
        "pHd": HessianDirections(dim=2),
    }


def run_demo(
    n_samples: int = 1500,
    n_folds: int = 5,
    n_trees: int = 100,
    random_state: int = 0,
    stream: TextIO | None = None,
) -> dict:
    """Estimate the subspace with each method, report, and compare forest CV error.

    Parameters
    ----------
    n_samples, n_folds, n_trees : int
        Size of the synthetic data, cross-validation folds, trees per forest.
    random_state : int
    stream : text stream, default sys.stdout

    Returns
    -------
    dict
        ``angles`` (largest principal angle to the truth in degrees, per
        method) and ``cv_mse`` (mean cross-validated squared error per
        feature set).
    """
    out = stream or sys.stdout
    started = time.perf_counter()
    problem = make_kiln_problem(n_samples, random_state=random_state)
    out.write(f"{problem.description}\n")
    out.write(f"n = {problem.X.shape[0]} rows, d = {problem.X.shape[1]} channels, "
              f"true subspace dimension {problem.true_basis.shape[1]}\n\n")
    angles, pipelines = {}, {"raw features": _forest(n_trees, random_state)}
    for name, estimator in demo_estimators().items():
        lift = DirectionLift(estimator).fit(problem.X, problem.y)
        out.write(f"--- {name} ---\n{lift.report(reference=problem.true_basis)}\n\n")
        truth = lift.reference_in_lift_coordinates(problem.true_basis)
        angles[name] = float(np.degrees(principal_angles(lift.subspace_basis_, truth)[0]))
        pipelines[f"lifted by {name}"] = make_pipeline(
            DirectionLift(estimator), _forest(n_trees, random_state)
        )
    folds = KFold(n_folds, shuffle=True, random_state=random_state)
    out.write(f"{n_folds}-fold cross-validated squared error of RandomForestRegressor "
              f"({n_trees} trees; the lift is refitted inside each fold)\n")
    out.write(f"  {'features':<20}{'mean MSE':>10}{'std':>10}\n")
    cv_mse = {}
    for name, model in pipelines.items():
        scores = -cross_val_score(
            model, problem.X, problem.y, cv=folds, scoring="neg_mean_squared_error"
        )
        cv_mse[name] = float(scores.mean())
        out.write(f"  {name:<20}{scores.mean():>10.4f}{scores.std():>10.4f}\n")
    out.write("\nlargest angle to the true subspace (degrees): "
              + ", ".join(f"{k} {v:.1f}" for k, v in angles.items()) + "\n")
    out.write(f"finished in {time.perf_counter() - started:.1f} s "
              "(synthetic data; validate on your own held-out data)\n")
    return {"angles": angles, "cv_mse": cv_mse}


def _forest(n_trees: int, random_state: int) -> RandomForestRegressor:
    return RandomForestRegressor(n_estimators=n_trees, n_jobs=-1, random_state=random_state)
