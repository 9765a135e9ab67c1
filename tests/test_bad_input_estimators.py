"""Catalogue of bad input to the estimators and the transformer.

Each case asserts the error class and the words that name the problem, so a
user's mistake never surfaces as a numerical traceback or a silent result.
"""

import warnings

import numpy as np
import pytest

import splitlift as sl

RNG = np.random.default_rng(20261202)
X_GOOD = RNG.standard_normal((120, 4))
Y_GOOD = X_GOOD[:, 0] + 0.1 * RNG.standard_normal(120)

ESTIMATORS = {
    "SIR": lambda **kw: sl.SlicedInverse(**{"dim": 1, **kw}),
    "SAVE": lambda **kw: sl.SlicedAverageVariance(**{"dim": 1, **kw}),
    "pHd": lambda **kw: sl.HessianDirections(**{"dim": 1, **kw}),
    "OPG": lambda **kw: sl.GradientOuterProduct(**{"dim": 1, **kw}),
    "ADE": lambda **kw: sl.AverageDerivative(**{"dim": 1, **kw}),
}


def with_value(array, index, value):
    changed = np.array(array, dtype=float)
    changed[index] = value
    return changed


# (case name, X, y, estimator keyword arguments, error class, words that name the problem)
SHARED_CASES = [
    ("nan in X", with_value(X_GOOD, (3, 1), np.nan), Y_GOOD, {}, ValueError, r"(?i)nan"),
    ("inf in X", with_value(X_GOOD, (5, 2), np.inf), Y_GOOD, {}, ValueError, r"(?i)infinity"),
    ("nan in y", X_GOOD, with_value(Y_GOOD, 7, np.nan), {}, ValueError, r"(?i)nan"),
    ("inf in y", X_GOOD, with_value(Y_GOOD, 7, -np.inf), {}, ValueError, r"(?i)inf"),
    ("X is 1-D", X_GOOD[:, 0], Y_GOOD, {}, ValueError, r"(?i)2D array|reshape"),
    ("X and y lengths differ", X_GOOD, Y_GOOD[:-3], {}, ValueError,
     r"inconsistent numbers of samples"),
    ("dim zero", X_GOOD, Y_GOOD, {"dim": 0}, ValueError, r"'dim' parameter"),
    ("dim above d", X_GOOD, Y_GOOD, {"dim": 9}, ValueError,
     r"dim=9 exceeds the number of features"),
    ("dim a word", X_GOOD, Y_GOOD, {"dim": "two"}, ValueError, r"'dim' parameter"),
    ("dim a float", X_GOOD, Y_GOOD, {"dim": 1.5}, ValueError, r"'dim' parameter"),
    ("every column constant", np.ones((120, 4)), Y_GOOD, {}, ValueError,
     r"every input column is constant"),
    ("constant y", X_GOOD, np.full(120, 2.5), {}, ValueError, r"response y is constant"),
    ("one row", X_GOOD[:1], Y_GOOD[:1], {}, ValueError, r"(?i)n_samples = 1|minimum of 2"),
    ("no rows", X_GOOD[:0], Y_GOOD[:0], {}, ValueError, r"(?i)0 sample"),
    ("no columns", X_GOOD[:, :0], Y_GOOD, {}, ValueError, r"(?i)0 feature"),
    ("unknown dim rule", X_GOOD, Y_GOOD, {"dim": "auto", "dim_rule": "magic"}, ValueError,
     r"'dim_rule' parameter"),
    ("random_state a word", X_GOOD, Y_GOOD, {"random_state": "seven"}, ValueError,
     r"'random_state' parameter"),
    ("text in X", np.array([["a"] * 4] * 120, dtype=object), Y_GOOD, {}, ValueError,
     r"(?i)could not convert|numeric"),
]


@pytest.mark.parametrize("name", sorted(ESTIMATORS))
@pytest.mark.parametrize("case", SHARED_CASES, ids=[case[0] for case in SHARED_CASES])
def test_every_estimator_refuses_shared_bad_input(name, case):
    _, X, y, params, error, words = case
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(error, match=words):
            ESTIMATORS[name](**params).fit(X, y)


SPECIFIC_CASES = [
    ("SIR fewer rows than slices", lambda: sl.SlicedInverse(n_slices=10).fit(
        X_GOOD[:8], Y_GOOD[:8]), r"n_samples = 8 is too few for 10 slices"),
    ("SAVE fewer rows than slices", lambda: sl.SlicedAverageVariance(n_slices=10).fit(
        X_GOOD[:5], Y_GOOD[:5]), r"n_samples = 5 is too few for 10 slices"),
    ("SIR one slice", lambda: sl.SlicedInverse(n_slices=1).fit(X_GOOD, Y_GOOD),
     r"'n_slices' parameter"),
    ("SIR class seen once", lambda: sl.SlicedInverse(dim=1).fit(
        X_GOOD[:41], np.array(["u", "v"] * 20 + ["w"])), r"response value 'w' occurs in a single"),
    ("SAVE unknown slicing", lambda: sl.SlicedAverageVariance(slicing="quantile").fit(
        X_GOOD, Y_GOOD), r"'slicing' parameter"),
    ("SIR count slicing of labels", lambda: sl.SlicedInverse(slicing="count").fit(
        X_GOOD[:40], np.array(["u", "v"] * 20)), r"slicing='count' needs a numeric response"),
    ("SAVE rule it lacks", lambda: sl.SlicedAverageVariance(dim="auto", dim_rule="chi2").fit(
        X_GOOD, Y_GOOD), r"dim_rule='chi2' is not available for SlicedAverageVariance"),
    ("pHd class labels", lambda: sl.HessianDirections().fit(
        X_GOOD[:40], np.array(["u", "v"] * 20)), r"needs a numeric response"),
    ("pHd weighted chi2", lambda: sl.HessianDirections(dim="auto", dim_rule="weighted_chi2")
     .fit(X_GOOD, Y_GOOD), r"not available for HessianDirections"),
    ("rank tolerance 1", lambda: sl.SlicedInverse(rank_tolerance=1.0).fit(X_GOOD, Y_GOOD),
     r"'rank_tolerance' parameter"),
    ("OPG more neighbours than rows", lambda: sl.GradientOuterProduct(n_neighbors=500).fit(
        X_GOOD, Y_GOOD), r"n_neighbors=500 exceeds n_samples = 120"),
    ("OPG refine with auto dim", lambda: sl.GradientOuterProduct(dim="auto", refine=1).fit(
        X_GOOD, Y_GOOD), r"refine > 0 needs an integer dim"),
    ("OPG negative bandwidth", lambda: sl.GradientOuterProduct(bandwidth=-1.0).fit(
        X_GOOD, Y_GOOD), r"'bandwidth' parameter"),
    ("OPG two rows", lambda: sl.GradientOuterProduct(dim=1).fit(X_GOOD[:2], Y_GOOD[:2]),
     r"n_samples = 2 is too few"),
    ("ADE two directions without slices", lambda: sl.AverageDerivative(dim=2).fit(
        X_GOOD, Y_GOOD), r"dim=2 exceeds the 1 direction"),
    ("ADE trim 1", lambda: sl.AverageDerivative(trim=1.0, density_weighted=False).fit(
        X_GOOD, Y_GOOD), r"'trim' parameter"),
    ("ADE degenerate kernel", lambda: sl.AverageDerivative().fit(
        RNG.standard_normal((60, 50)), RNG.standard_normal(60)), r"degenerate"),
    ("transform before fit", lambda: sl.SlicedInverse().transform(X_GOOD), r"not fitted"),
    ("transform wrong width", lambda: sl.SlicedInverse(dim=1).fit(X_GOOD, Y_GOOD).transform(
        X_GOOD[:, :3]), r"X has 3 features, but SlicedInverse is expecting 4"),
]


@pytest.mark.parametrize("case", SPECIFIC_CASES, ids=[case[0] for case in SPECIFIC_CASES])
def test_specific_bad_input_names_the_problem(case):
    _, action, words = case
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises((ValueError, AttributeError), match=words) as caught:
            action()
    # never an internal error class: ValueError (or sklearn's NotFittedError, a ValueError)
    assert isinstance(caught.value, ValueError)


LIFT_CASES = [
    ("complement weight 0", {"complement_weight": 0.0}, r"'complement_weight' parameter"),
    ("complement weight 1", {"complement_weight": 1.0}, r"'complement_weight' parameter"),
    ("complement weight negative", {"complement_weight": -0.1}, r"'complement_weight'"),
    ("complement weight a word", {"complement_weight": "small"}, r"'complement_weight'"),
    ("unknown weight form", {"weight_form": "stretch"}, r"'weight_form' parameter"),
    ("zero columns", {"n_columns": 0}, r"'n_columns' parameter"),
    ("zero directions in subspace", {"n_in_subspace": 0}, r"'n_in_subspace' parameter"),
    ("estimator without fit", {"estimator": "SIR"}, r"'estimator' parameter"),
    ("standardize a word", {"standardize": "yes"}, r"'standardize' parameter"),
    ("weight power infinite", {"weight_power": np.inf}, r"'weight_power' parameter"),
]


@pytest.mark.parametrize("case", LIFT_CASES, ids=[case[0] for case in LIFT_CASES])
def test_direction_lift_refuses_bad_parameters(case):
    _, params, words = case
    with pytest.raises(ValueError, match=words):
        sl.DirectionLift(**params).fit(X_GOOD, Y_GOOD)


def test_direction_lift_transform_checks_the_columns():
    lift = sl.DirectionLift(sl.SlicedInverse(dim=1)).fit(X_GOOD, Y_GOOD)
    with pytest.raises(ValueError, match="X has 5 features, but DirectionLift is expecting 4"):
        lift.transform(np.column_stack([X_GOOD, X_GOOD[:, 0]]))
    with pytest.raises(ValueError, match=r"(?i)nan"):
        lift.transform(with_value(X_GOOD, (0, 0), np.nan))


def test_direction_lift_passes_estimator_errors_through_unchanged():
    with pytest.raises(ValueError, match="response y is constant"):
        sl.DirectionLift().fit(X_GOOD, np.zeros(120))
