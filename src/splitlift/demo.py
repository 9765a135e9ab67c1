"""``splitlift demo``: the whole job on bundled synthetic data, in well under a minute."""

from __future__ import annotations

import sys
import time
from pathlib import Path
from typing import TextIO

import numpy as np
import pandas as pd

from ._tables import text_table
from .datasets import make_kiln_problem
from .dimension import LadleEstimator
from .estimators import GradientOuterProduct, SlicedInverse
from .geometry import principal_angles
from .loadings import leading_features
from .transformer import DirectionLift


def demo_estimators(random_state: int = 0) -> dict:
    """The estimators the demo compares, by display name: one moment, one gradient method.

    OPG's ladle redraws its per-anchor gradients instead of refitting (see
    :class:`splitlift.dimension.LadleEstimator`), which keeps the demo fast.
    """
    return {
        "SIR": SlicedInverse(n_slices=10, dim="auto", random_state=random_state),
        "OPG": GradientOuterProduct(dim="auto", random_state=random_state,
                                    dim_rule=LadleEstimator(resample="local")),
    }


def run_demo(
    n_samples: int = 1500,
    n_folds: int = 3,
    n_trees: int = 60,
    random_state: int = 0,
    stream: TextIO | None = None,
    output_dir=None,
) -> dict:
    """Estimate, choose the dimension, read the report, guard the choice, fit a STIT forest.

    Parameters
    ----------
    n_samples, n_folds, n_trees : int
        Size of the synthetic data, cross-validation folds, trees per forest.
    random_state : int
    stream : text stream, default sys.stdout
    output_dir : str or Path, optional
        Where the saved lift and the plots go; nothing is written when None.

    Returns
    -------
    dict
        ``angles`` (largest principal angle to the truth in degrees, per
        estimator), ``dims`` (the chosen dimensions), ``cv_mse`` (mean
        cross-validated squared error per candidate of the guarded choice),
        ``verdict``, ``stit_mse`` and ``forest_mse`` (held-out squared error of
        the STIT forest on the chosen lift and of a random forest on the raw
        inputs) and ``written`` (paths).
    """
    from sklearn.ensemble import RandomForestRegressor
    from sklearn.model_selection import train_test_split
    from sklearn.pipeline import make_pipeline

    from .forest import StitForestRegressor
    from .selection import DirectionLiftCV

    out = stream or sys.stdout
    started = time.perf_counter()
    problem = make_kiln_problem(n_samples, random_state=random_state)
    X = pd.DataFrame(problem.X, columns=problem.feature_names)
    y = pd.Series(problem.y, name="tile_strength")
    out.write(f"{problem.description}\n")
    out.write(f"n = {X.shape[0]} rows, d = {X.shape[1]} channels, true subspace dimension "
              f"{problem.true_basis.shape[1]} (known here only because the data are invented)\n")

    # 1. two estimators, dimension chosen automatically
    lifts, rows, angles, dims = {}, [], {}, {}
    for name, estimator in demo_estimators(random_state).items():
        lift = DirectionLift(estimator, random_state=random_state).fit(X, y)
        lifts[name] = lift
        truth = lift.reference_in_lift_coordinates(problem.true_basis)
        estimate = lift.subspace_basis_
        angles[name] = (float(np.degrees(principal_angles(estimate, truth)[0]))
                        if estimate.shape[1] else 90.0)
        dims[name] = int(estimate.shape[1])
        loadings = lift.standardised_loadings_
        rows.append({"estimator": name, "dim": dims[name],
                     "rule": lift.estimator_.dim_test_.rule, "angle": angles[name],
                     "lead": leading_features(loadings.iloc[0], top=2) if len(loadings) else "-"})
    out.write("\n1. the relevant subspace, two ways (dimension chosen automatically)\n")
    out.write(text_table(rows, [("estimator", "estimator", "s"), ("dim", "dim", "d"),
                                ("rule", "dimension rule", "s"),
                                ("angle", "largest angle to truth (deg)", ".1f"),
                                ("lead", "direction 1: leading features", "s")]) + "\n")

    best = min(angles, key=angles.get)
    out.write(f"\n2. the full report of the {best} lift\n\n")
    out.write(str(lifts[best].report(reference=problem.true_basis)) + "\n")

    # 3. the guard: raw inputs against lifts, by the forest the user runs
    search = DirectionLiftCV(
        forest=RandomForestRegressor(n_estimators=n_trees, random_state=random_state,
                                     n_jobs=-1),
        estimators={name: est.set_params(dim=2)
                    for name, est in demo_estimators(random_state).items()},
        dims=(2,), cv=n_folds, random_state=random_state,
    ).fit(X, y)
    summary = search.summary()
    out.write(f"\n3. will a lift help? {n_folds}-fold CV of RandomForestRegressor "
              f"({n_trees} trees), raw inputs always a candidate\n")
    shown = summary.assign(change=100 * summary["change_vs_raw"],
                           chosen=np.where(summary["chosen"], "<- chosen", ""))
    out.write(text_table(shown, [("candidate", "candidate", "s"),
                                 ("output_columns", "columns", "d"),
                                 ("cv_error", "CV error", ".4f"), ("cv_error_sd", "sd", ".4f"),
                                 ("change", "vs raw %", "+.1f"), ("chosen", "", "s")]) + "\n")
    out.write(f"verdict: {search.verdict_}\n")

    # 4. the STIT forest on the chosen lift, against a random forest on the raw inputs
    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.3,
                                                        random_state=random_state)
    stit = make_pipeline(DirectionLift(lifts[best].estimator, complement_weight=0.2,
                                       random_state=random_state),
                         StitForestRegressor(n_trees=n_trees, random_state=random_state))
    raw = RandomForestRegressor(n_estimators=n_trees, random_state=random_state, n_jobs=-1)
    stit_mse = float(np.mean((stit.fit(X_train, y_train).predict(X_test) - y_test) ** 2))
    forest_mse = float(np.mean((raw.fit(X_train, y_train).predict(X_test) - y_test) ** 2))
    out.write(f"\n4. held-out squared error (30% of rows): STIT forest on the {best} lift "
              f"{stit_mse:.4f}, random forest on the raw inputs {forest_mse:.4f}\n")

    # 5. production: the lift file and the plots
    written = _write_outputs(lifts[best], X, y, output_dir) if output_dir is not None else []
    for path in written:
        out.write(f"written: {path}\n")
    out.write(f"\nfinished in {time.perf_counter() - started:.1f} s "
              "(synthetic data; validate on your own held-out data)\n")
    cv_mse = {row["candidate"]: float(row["cv_error"]) for _, row in summary.iterrows()} \
        if {"candidate", "cv_error"} <= set(summary.columns) else {}
    return {"angles": angles, "dims": dims, "cv_mse": cv_mse, "verdict": search.verdict_,
            "stit_mse": stit_mse, "forest_mse": forest_mse, "written": written}


def _write_outputs(lift, X, y, output_dir) -> list[Path]:
    """The saved lift and, when matplotlib is installed, the diagnostic plots."""
    folder = Path(output_dir)
    folder.mkdir(parents=True, exist_ok=True)
    lift.save(folder / "kiln_lift.npz")
    written = [folder / "kiln_lift.npz"]
    try:
        from .plots import write_all_plots

        written += write_all_plots(lift, X, y, folder / "plots")
    except ImportError as error:  # plots are an optional extra
        sys.stderr.write(f"note: plots skipped ({error}); pip install 'splitlift[plot]'\n")
    return written
