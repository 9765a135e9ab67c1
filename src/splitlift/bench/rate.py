"""Rate suite: excess test risk against n, with fitted log-log slopes.

The theory for oblique STIT forests on a Lipschitz ridge function predicts
risk of order ``n^{-2/(s+2)}`` for a lift whose leakage falls fast enough,
against ``n^{-2/(d+2)}`` for axis-aligned cuts. Slopes fitted on a short
grid of n are rough; the suite prints them beside both exponents.
"""

from __future__ import annotations

import warnings

import numpy as np
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from ..estimators import GradientOuterProduct
from ..forest import StitForestRegressor
from ..lift import LiftMatrix
from ..transformer import DirectionLift
from ._timing import table
from .problems import ridge

N_FEATURES, SUBSPACE_DIM, N_TEST = 10, 2, 4000


def _models(problem, n_trees: int) -> dict:
    stit = StitForestRegressor(n_trees=n_trees, random_state=0, n_jobs=-1)
    scale = problem.X_train.std(axis=0)
    true_lift = LiftMatrix.from_subspace(problem.true_basis * scale[:, None])
    return {
        "learned lift (OPG)": make_pipeline(
            DirectionLift(GradientOuterProduct(dim=SUBSPACE_DIM, random_state=0)), stit),
        "axis": make_pipeline(StandardScaler(), StitForestRegressor(
            n_trees=n_trees, random_state=0, n_jobs=-1)),
        "true lift": make_pipeline(StandardScaler(), StitForestRegressor(
            n_trees=n_trees, lift=true_lift, random_state=0, n_jobs=-1)),
    }


def run_rate(quick: bool, out) -> dict:
    sizes = (250, 500, 1000, 2000) if quick else (250, 500, 1000, 2000, 4000, 8000)
    repeats, n_trees = (1, 20) if quick else (3, 50)
    risks: dict[str, list[list[float]]] = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for n in sizes:
            for repeat in range(repeats):
                problem = ridge(n, N_TEST, N_FEATURES, SUBSPACE_DIM, seed=100 + repeat)
                for name, model in _models(problem, n_trees).items():
                    model.fit(problem.X_train, problem.y_train)
                    mse = np.mean((model.predict(problem.X_test) - problem.y_test) ** 2)
                    excess = max(mse - problem.noise_variance, 1e-12)
                    risks.setdefault(name, [[] for _ in sizes])[sizes.index(n)].append(excess)
    rows, slopes = [], {}
    for name, per_size in risks.items():
        means = np.array([np.mean(values) for values in per_size])
        slope = float(np.polyfit(np.log(sizes), np.log(means), 1)[0])
        slopes[name] = slope
        rows.append({"lift": name, **{f"n={n}": m for n, m in zip(sizes, means, strict=True)},
                     "slope": slope})
    theory = {"subspace_rate": -2 / (SUBSPACE_DIM + 2), "axis_rate": -2 / (N_FEATURES + 2)}
    out.write(f"\nrate: excess test risk of STIT forests, ridge function d = {N_FEATURES}, "
              f"s = {SUBSPACE_DIM} (mean of {repeats} data sets per n)\n")
    columns = [("lift", "lift", "s")] + [(f"n={n}", f"n={n}", ".4f") for n in sizes]
    out.write(table(rows, columns + [("slope", "slope", ".3f")]) + "\n")
    out.write(f"  theory: -2/(s+2) = {theory['subspace_rate']:.3f}, "
              f"-2/(d+2) = {theory['axis_rate']:.3f}\n")
    return {"sizes": list(sizes), "rows": rows, "slopes": slopes, "theory": theory}
