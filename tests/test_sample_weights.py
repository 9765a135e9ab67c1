"""sample_weight: integer weights give exactly the fit on repeated rows, for every estimator.

The reference is the same estimator fitted on the rows repeated as often as
their weight says (``np.repeat``), the definition of frequency weights that
scikit-learn's own check uses; a zero weight equals dropping the row.
"""

import warnings

import numpy as np
import pytest
import sklearn
from scipy.linalg import subspace_angles
from sklearn.ensemble import RandomForestRegressor
from sklearn.pipeline import make_pipeline

import splitlift as sl

RNG = np.random.default_rng(20261205)
N = 700
X = RNG.standard_normal((N, 4)) @ RNG.standard_normal((4, 4))
Y = X[:, 0] + 0.5 * X[:, 1] ** 2 + 0.1 * RNG.standard_normal(N)
W = RNG.integers(0, 4, N)
X_REPEATED, Y_REPEATED = X.repeat(W, axis=0), Y.repeat(W)

ESTIMATORS = {
    "SIR": lambda: sl.SlicedInverse(dim=2),
    "SAVE": lambda: sl.SlicedAverageVariance(dim=2),
    "pHd": lambda: sl.HessianDirections(dim=2),
    "pHd-residuals": lambda: sl.HessianDirections(dim=2, residuals=True),
    "OPG": lambda: sl.GradientOuterProduct(dim=2, random_state=0),
    "ADE": lambda: sl.AverageDerivative(dim=1),
    "ADE-score-sliced": lambda: sl.AverageDerivative(dim=2, density_weighted=False, n_slices=4),
    "SIR-weighted-chi2": lambda: sl.SlicedInverse(dim="auto", dim_rule="weighted_chi2"),
    "pHd-chi2": lambda: sl.HessianDirections(dim="auto"),
}


def quiet(action):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return action()


@pytest.mark.parametrize("name", sorted(ESTIMATORS))
def test_integer_weights_equal_repeated_rows(name):
    weighted = quiet(lambda: ESTIMATORS[name]().fit(X, Y, sample_weight=W))
    repeated = quiet(lambda: ESTIMATORS[name]().fit(X_REPEATED, Y_REPEATED))
    assert weighted.dim_ == repeated.dim_
    assert subspace_angles(weighted.basis_, repeated.basis_).max() < 1e-8
    np.testing.assert_allclose(weighted.eigenvalues_, repeated.eigenvalues_, rtol=1e-8,
                               atol=1e-12)
    np.testing.assert_allclose(weighted.transform(X), repeated.transform(X), rtol=1e-7,
                               atol=1e-9)
    if weighted.dim_test_ is not None:  # the chi-square statistics count rows by weight
        np.testing.assert_allclose([r["statistic"] for r in weighted.dim_test_.rows],
                                   [r["statistic"] for r in repeated.dim_test_.rows], rtol=1e-8)


def test_zero_weights_equal_dropping_rows():
    weighted = sl.SlicedAverageVariance(dim=2).fit(X, Y, sample_weight=(W > 0).astype(float))
    dropped = sl.SlicedAverageVariance(dim=2).fit(X[W > 0], Y[W > 0])
    np.testing.assert_allclose(weighted.transform(X), dropped.transform(X), atol=1e-12)


def test_direction_lift_weights_equal_repeated_rows():
    weighted = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(X, Y, sample_weight=W)
    repeated = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(X_REPEATED, Y_REPEATED)
    np.testing.assert_allclose(weighted.mean_, repeated.mean_, rtol=1e-12)
    np.testing.assert_allclose(weighted.scale_, repeated.scale_, rtol=1e-12)
    np.testing.assert_allclose(weighted.transform(X), repeated.transform(X), atol=1e-10)


def test_weights_reach_direction_lift_through_metadata_routing():
    with sklearn.config_context(enable_metadata_routing=True):
        model = make_pipeline(
            sl.DirectionLift(sl.SlicedInverse(dim=2)).set_fit_request(sample_weight=True),
            RandomForestRegressor(n_estimators=5, random_state=0)
            .set_fit_request(sample_weight=True))
        model.fit(X, Y, sample_weight=W)
    repeated = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(X_REPEATED, Y_REPEATED)
    np.testing.assert_allclose(model[0].transform(X), repeated.transform(X), atol=1e-10)


def test_estimators_request_weights_through_metadata_routing():
    with sklearn.config_context(enable_metadata_routing=True):
        request = sl.SlicedInverse().set_fit_request(sample_weight=True).get_metadata_routing()
    assert request.fit.requests["sample_weight"] is True


BAD_WEIGHTS = [
    ("negative", np.where(np.arange(N) == 3, -1.0, 1.0), r"negative entries \(row 3: -1\)"),
    ("all zero", np.zeros(N), "every sample weight is zero"),
    ("nan", np.where(np.arange(N) == 5, np.nan, 1.0), "NaN or infinite"),
    ("wrong length", np.ones(N - 1), f"shape \\({N - 1},\\) but X has {N} rows"),
    ("two columns", np.ones((N, 2)), "one weight per row"),
    ("text", np.array(["heavy"] * N), "must be numeric"),
]


@pytest.mark.parametrize("name", ["SIR", "OPG", "ADE"])
@pytest.mark.parametrize("case", BAD_WEIGHTS, ids=[case[0] for case in BAD_WEIGHTS])
def test_bad_weights_are_refused_with_the_fix(name, case):
    _, weights, words = case
    with pytest.raises(ValueError, match=words):
        ESTIMATORS[name]().fit(X, Y, sample_weight=weights)


@pytest.mark.parametrize("case", BAD_WEIGHTS[:2], ids=[case[0] for case in BAD_WEIGHTS[:2]])
def test_direction_lift_refuses_bad_weights(case):
    _, weights, words = case
    with pytest.raises(ValueError, match=words):
        sl.DirectionLift().fit(X, Y, sample_weight=weights)


def test_fractional_weights_too_small_for_a_slice_are_explained():
    labels = np.where(Y > 0, "up", "down")
    up = labels == "up"
    weights = np.where(up, 0.5 / up.sum(), 1.0)  # all "up" rows together weigh half a row
    with pytest.raises(ValueError, match="'up' carries a total sample weight of 0.5,.*scale "
                                         "the weights"):
        sl.SlicedAverageVariance(dim=1).fit(X, labels, sample_weight=weights)


def test_resampling_rules_keep_each_row_with_its_weight():
    weighted = quiet(lambda: sl.SlicedAverageVariance(dim="auto", random_state=0).fit(
        X, Y, sample_weight=W))
    assert weighted.dim_ in (1, 2, 3) and "ladle" in weighted.dim_test_.rule


def test_a_rule_without_weights_refuses_them():
    class Unweighted:
        def select(self, estimator, X, y):  # pragma: no cover - never called
            return 1, None

    with pytest.raises(ValueError, match="takes no sample weights"):
        sl.SlicedInverse(dim="auto", dim_rule=Unweighted()).fit(X, Y, sample_weight=W)
