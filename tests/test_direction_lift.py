"""DirectionLift as a user of scikit-learn would use it."""

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.ensemble import RandomForestRegressor
from sklearn.model_selection import GridSearchCV
from sklearn.pipeline import Pipeline

import splitlift as sl

from .conftest import li_rational_model


@pytest.fixture
def problem(rng):
    return li_rational_model(rng, 1500, 6)


def test_transform_is_the_standardised_data_times_the_lift(problem):
    X, y, _ = problem
    lift = sl.DirectionLift().fit(X, y)
    expected = ((X - X.mean(axis=0)) / X.std(axis=0)) @ lift.lift_.matrix.T
    np.testing.assert_allclose(lift.transform(X), expected, atol=1e-12)
    assert lift.transform(X).shape == (1500, lift.lift_.n_directions)


def test_without_standardisation_the_lift_acts_on_raw_inputs(problem):
    X, y, _ = problem
    lift = sl.DirectionLift(standardize=False).fit(X, y)
    np.testing.assert_allclose(lift.transform(X), X @ lift.lift_.matrix.T, atol=1e-12)


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**31 - 1))
def test_estimated_subspace_is_equivariant_under_affine_maps(seed):
    # X' = X M + c has the subspace M^{-1} S: SIR, SAVE and pHd are affine
    # equivariant (Li 1991; Cook & Weisberg 1991; Li 1992).
    generator = np.random.default_rng(seed)
    X, y, _ = li_rational_model(generator, 600, 5)
    M = generator.standard_normal((5, 5)) + 3 * np.eye(5)
    if np.linalg.cond(M) > 1e3:
        return  # keep the check about equivariance, not about rounding
    shift = generator.standard_normal(5) * 10
    for estimator in (sl.SlicedInverse(), sl.SlicedAverageVariance(), sl.HessianDirections()):
        plain = estimator.fit(X, y).basis_
        mapped = estimator.fit(X @ M + shift, y).basis_
        angles = sl.principal_angles(mapped, np.linalg.solve(M, plain))
        assert angles.max() < 1e-7


def test_pandas_feature_names_are_kept(problem):
    X, y, _ = problem
    frame = pd.DataFrame(X, columns=[f"sensor_{j}" for j in range(6)])
    lift = sl.DirectionLift().fit(frame, y)
    assert list(lift.feature_names_in_) == list(frame.columns)
    assert lift.lift_.feature_names == list(frame.columns)
    names = lift.get_feature_names_out()
    assert len(names) == lift.lift_.n_directions and names[0] == "subspace_0"
    # directions inside the estimated subspace first, then its complement, marked by name
    inside = sum(name.startswith("subspace_") for name in names)
    assert inside + sum(name.startswith("complement_") for name in names) == len(names)
    assert 0 < inside < len(names)


def test_pipeline_and_grid_search_over_lift_and_estimator_parameters(problem):
    X, y, _ = problem
    pipeline = Pipeline([
        ("lift", sl.DirectionLift(sl.SlicedInverse())),
        ("forest", RandomForestRegressor(n_estimators=10, random_state=0)),
    ])
    grid = GridSearchCV(
        pipeline,
        {"lift__complement_weight": [0.02, 0.2], "lift__estimator__n_slices": [5, 10],
         "lift__estimator__dim": [1, 2]},
        cv=3,
    ).fit(X, y)
    assert len(grid.cv_results_["params"]) == 8
    best_lift = grid.best_estimator_.named_steps["lift"]
    assert best_lift.estimator_.dim_ == grid.best_params_["lift__estimator__dim"]
    assert best_lift.lift_.metadata["complement_weight"] == grid.best_params_[
        "lift__complement_weight"]
    assert grid.predict(X[:5]).shape == (5,)


def test_lifted_forest_beats_raw_forest_on_oblique_ridge(rng):
    # y depends on one oblique direction of 10: the lift helps any forest.
    n, d = 2000, 10
    X = rng.standard_normal((n, d))
    b = np.ones(d) / np.sqrt(d)
    y = np.sin(2 * X @ b) + X @ b + 0.1 * rng.standard_normal(n)
    train, test = slice(0, 1500), slice(1500, None)
    forest = RandomForestRegressor(n_estimators=50, random_state=0)
    raw = np.mean((forest.fit(X[train], y[train]).predict(X[test]) - y[test]) ** 2)
    lift = sl.DirectionLift(sl.SlicedInverse(dim=1)).fit(X[train], y[train])
    lifted_forest = forest.fit(lift.transform(X[train]), y[train])
    lifted = np.mean((lifted_forest.predict(lift.transform(X[test])) - y[test]) ** 2)
    assert lifted < 0.5 * raw


def test_repeat_form_repeats_unit_directions(problem):
    X, y, _ = problem
    lift = sl.DirectionLift(weight_form="repeat", n_columns=40).fit(X, y)
    assert lift.output_matrix_.shape == (40, 6)
    np.testing.assert_allclose(np.linalg.norm(lift.output_matrix_, axis=1), 1.0)
    assert np.linalg.matrix_rank(lift.output_matrix_) == 6
    assert lift.transform(X).shape == (1500, 40)


def test_reference_is_mapped_into_standardised_coordinates(rng):
    # x_j = s_j z_j: the direction b in x becomes diag(s) b in z (here e1 stays e1).
    X = rng.standard_normal((800, 3)) * np.array([10.0, 1.0, 0.1])
    y = X[:, 0] + X[:, 2] * 100 + 0.01 * rng.standard_normal(800)
    lift = sl.DirectionLift(sl.SlicedInverse(dim=1)).fit(X, y)
    mapped = lift.reference_in_lift_coordinates(np.array([1.0, 0.0, 100.0]))
    np.testing.assert_allclose(np.abs(mapped[:, 0]), np.abs(lift.scale_ * [1, 0, 100])
                               / np.linalg.norm(lift.scale_ * [1, 0, 100]), atol=1e-12)
    report = lift.report(reference=np.array([1.0, 0.0, 100.0]))
    assert report.comparisons[1].angles_degrees[0] < 2.0


def test_report_reads_and_serialises(problem):
    X, y, truth = problem
    lift = sl.DirectionLift(complement_weight=0.1).fit(X, y)
    report = lift.report(reference=truth)
    text = str(report)
    for needle in ("SlicedInverse", "n = 1500 rows, d = 6 features", "standardised inputs",
                   "eigenvalues", "rank 6 of 6", "off-subspace weight", "coverage sigma_min",
                   "largest angle (deg)"):
        assert needle in text
    as_dict = json.loads(json.dumps(report.to_dict()))
    assert as_dict["comparisons"][0]["leakage"] == pytest.approx(0.1)
    assert len(as_dict["comparisons"][1]["angles_degrees"]) == 2
    assert as_dict["rank"] == 6 and as_dict["dim"] == 2


def test_fit_does_not_touch_the_given_estimator(problem):
    X, y, _ = problem
    estimator = sl.SlicedInverse()
    sl.DirectionLift(estimator).fit(X, y)
    assert not hasattr(estimator, "basis_")
