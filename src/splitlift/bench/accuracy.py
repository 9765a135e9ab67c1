"""Accuracy suite: test error of forests on raw, reduced and lifted features."""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.base import clone
from sklearn.cross_decomposition import PLSRegression
from sklearn.decomposition import PCA
from sklearn.ensemble import RandomForestClassifier, RandomForestRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from ..estimators import (
    AverageDerivative,
    GradientOuterProduct,
    HessianDirections,
    SlicedAverageVariance,
    SlicedInverse,
)
from ..forest import StitForestClassifier, StitForestRegressor
from ..geometry import principal_angles
from ..lift import LiftMatrix
from ..transformer import DirectionLift
from ._timing import table, timed
from .problems import BenchmarkProblem, accuracy_problems


def estimators_for(problem: BenchmarkProblem) -> dict:
    """The subspace estimators compared, at the true dimension s."""
    s = problem.true_basis.shape[1]
    # with two classes SIR and ADE can give one direction only (classes - 1)
    within = 1 if problem.classification else s
    chosen = {
        "SIR": SlicedInverse(dim=within),
        "SAVE": SlicedAverageVariance(dim=s),
        "OPG": GradientOuterProduct(dim=s, random_state=0),
        "ADE": (AverageDerivative(dim=within, n_slices=max(5, s + 1)) if within > 1
                else AverageDerivative()),
    }
    if not problem.classification:
        chosen["pHd"] = HessianDirections(dim=s)
    return chosen


class _PLSFeatures(PLSRegression):
    """PLS scores as features; class labels enter as 0/1 indicators."""

    def fit(self, X, y):
        y = np.asarray(y)
        if y.dtype.kind not in "fiu":
            y = (y == np.unique(y)[0]).astype(float)
        return super().fit(X, y)

    def transform(self, X, y=None, copy=True):
        return super().transform(X, copy=copy)


def _error(model, problem: BenchmarkProblem) -> float:
    model.fit(problem.X_train, problem.y_train)
    predicted = model.predict(problem.X_test)
    if problem.classification:
        return float(np.mean(predicted != problem.y_test))
    return float(np.mean((predicted - problem.y_test) ** 2))


def evaluate(problem: BenchmarkProblem, n_trees: int, stit_trees: int) -> dict:
    """Test errors of every feature set and forest, and the estimators' angles."""
    s = problem.true_basis.shape[1]
    forest = (RandomForestClassifier if problem.classification else RandomForestRegressor)(
        n_estimators=n_trees, n_jobs=-1, random_state=0)
    stit = (StitForestClassifier if problem.classification else StitForestRegressor)(
        n_trees=stit_trees, random_state=0, n_jobs=-1)
    models = {
        "RF raw": clone(forest),
        "RF PCA": make_pipeline(StandardScaler(), PCA(n_components=s), clone(forest)),
        "RF PLS": make_pipeline(StandardScaler(), _PLSFeatures(n_components=s), clone(forest)),
    }
    angles = {}
    for name, estimator in estimators_for(problem).items():
        lift = DirectionLift(estimator).fit(problem.X_train, problem.y_train)
        truth = lift.reference_in_lift_coordinates(problem.true_basis)
        angles[name] = float(np.degrees(principal_angles(lift.subspace_basis_, truth)[0]))
        models[f"RF {name}"] = make_pipeline(DirectionLift(estimator), clone(forest))
    models["STIT axis"] = clone(stit)
    models["STIT OPG lift"] = make_pipeline(
        DirectionLift(GradientOuterProduct(dim=s, random_state=0)), clone(stit))
    # after standardisation z = (x - m) / σ the true subspace is span(diag(σ) B)
    scale = problem.X_train.std(axis=0)
    true_lift = LiftMatrix.from_subspace(problem.true_basis * scale[:, None])
    models["STIT true lift"] = make_pipeline(
        StandardScaler(), clone(stit).set_params(lift=true_lift))
    errors, seconds = {}, {}
    for name, model in models.items():
        seconds[name], errors[name] = timed(lambda model=model: _error(model, problem))
    return {"problem": problem.name, "classification": problem.classification,
            "noise_variance": problem.noise_variance, "errors": errors, "seconds": seconds,
            "largest_angle_degrees": angles}


def run_accuracy(quick: bool, out) -> dict:
    n_trees, stit_trees = (50, 20) if quick else (200, 50)
    rows = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for problem in accuracy_problems(quick):
            rows.append(evaluate(problem, n_trees, stit_trees))
    metric = "test MSE (error rate for classification)"
    out.write(f"\naccuracy: {metric}; estimators at the true dimension\n")
    names = list(rows[0]["errors"])
    flat = [{"problem": r["problem"], **r["errors"]} for r in rows]
    out.write(table(flat, [("problem", "problem", "s")] + [(n, n, ".4g") for n in names]) + "\n")
    out.write("\nlargest principal angle to the truth (degrees)\n")
    estimators = ["SIR", "SAVE", "pHd", "OPG", "ADE"]
    angle_rows = [{"problem": r["problem"], **r["largest_angle_degrees"]} for r in rows]
    out.write(table(angle_rows, [("problem", "problem", "s")]
                    + [(n, n, ".1f") for n in estimators]) + "\n")
    return {"rows": rows}
