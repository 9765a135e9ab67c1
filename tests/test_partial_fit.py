"""partial_fit: batches equal the fit on their concatenation when the slices agree.

Angles are measured with ``scipy.linalg.subspace_angles`` (the reference);
the issue's agreement threshold is 1e-10 rad.
"""

import warnings

import numpy as np
import pytest
from scipy.linalg import subspace_angles

import splitlift as sl
from splitlift.estimators import EstimationWarning

TOLERANCE_RAD = 1e-10
RNG = np.random.default_rng(20261204)
N = 6000
X = RNG.standard_normal((N, 5)) @ RNG.standard_normal((5, 5)) + [2.0, 0.0, -5.0, 1.0, 30.0]
T = X - X.mean(axis=0)
Y = T[:, 0] + 0.4 * T[:, 1] ** 2 + 0.1 * RNG.standard_normal(N)
BATCHES = np.array_split(RNG.permutation(N), 7)

METHODS = {
    "SIR": lambda **kw: sl.SlicedInverse(dim=2, **kw),
    "SAVE": lambda **kw: sl.SlicedAverageVariance(dim=2, **kw),
    "pHd": lambda **kw: sl.HessianDirections(dim=2, **kw),
}


def angle(a, b) -> float:
    return float(subspace_angles(a.basis_, b.basis_).max())


def streamed(estimator, weights=None):
    for rows in BATCHES:
        estimator.partial_fit(X[rows], Y[rows],
                              sample_weight=None if weights is None else weights[rows])
    return estimator


@pytest.mark.parametrize("name", sorted(METHODS))
def test_batches_equal_the_fit_on_all_rows(name):
    full = METHODS[name]().fit(X, Y)
    edges = {"slice_edges": full.slice_edges_} if name != "pHd" else {}
    batched = streamed(METHODS[name](**edges))
    reference = METHODS[name](**edges).fit(X, Y)
    assert angle(batched, reference) < TOLERANCE_RAD
    np.testing.assert_allclose(batched.eigenvalues_, reference.eigenvalues_, rtol=1e-9,
                               atol=1e-12)
    assert batched.n_samples_seen_ == N
    if name != "pHd":  # same edges as the default fit: the same slices, the same estimate
        assert angle(batched, full) < TOLERANCE_RAD


@pytest.mark.parametrize("name", sorted(METHODS))
def test_weighted_batches_equal_the_weighted_fit(name):
    weights = RNG.integers(0, 4, N).astype(float)
    edges = {"slice_edges": [-1.0, 0.0, 0.5, 1.5]} if name != "pHd" else {}
    batched = streamed(METHODS[name](**edges), weights)
    reference = METHODS[name](**edges).fit(X, Y, sample_weight=weights)
    assert angle(batched, reference) < TOLERANCE_RAD


def test_the_first_batch_fixes_the_slice_edges():
    batched = streamed(sl.SlicedInverse(dim=2, n_slices=6))
    first = sl.SlicedInverse(dim=2, n_slices=6).fit(X[BATCHES[0]], Y[BATCHES[0]])
    np.testing.assert_array_equal(batched.slice_edges_, first.slice_edges_)
    reference = sl.SlicedInverse(dim=2, slice_edges=batched.slice_edges_).fit(X, Y)
    assert angle(batched, reference) < TOLERANCE_RAD


def test_class_labels_are_sliced_by_value_and_new_classes_add_slices():
    labels = np.where(Y > 1.0, "high", np.where(Y < -1.0, "low", "mid"))
    order = np.argsort(labels == "high", kind="stable")  # "high" rows only in later batches
    estimator = sl.SlicedInverse(dim=2)
    seen = []
    for rows in np.array_split(order, 4):
        estimator.partial_fit(X[rows], labels[rows])
        seen.append(estimator.n_slices_)
    assert seen[0] == 2 and seen[-1] == 3
    reference = sl.SlicedInverse(dim=2).fit(X[order], labels[order])
    assert angle(estimator, reference) < TOLERANCE_RAD


def test_partial_fit_continues_a_fit():
    half = N // 2
    continued = sl.SlicedAverageVariance(dim=2, slice_edges=[-1.0, 0.0, 1.0]).fit(X[:half],
                                                                                  Y[:half])
    continued.partial_fit(X[half:], Y[half:])
    reference = sl.SlicedAverageVariance(dim=2, slice_edges=[-1.0, 0.0, 1.0]).fit(X, Y)
    assert angle(continued, reference) < TOLERANCE_RAD


def test_chi_square_dimension_rule_works_from_statistics_alone():
    batched = streamed(sl.SlicedInverse(dim="auto", slice_edges=[-1.0, 0.0, 1.0, 2.0]))
    reference = sl.SlicedInverse(dim="auto", slice_edges=[-1.0, 0.0, 1.0, 2.0]).fit(X, Y)
    assert batched.dim_ == reference.dim_
    statistics = [[row["statistic"] for row in fitted.dim_test_.rows]
                  for fitted in (batched, reference)]
    np.testing.assert_allclose(statistics[0], statistics[1], rtol=1e-9)


def test_rules_that_refit_need_rows_in_memory():
    with pytest.raises(ValueError, match="needs the rows in memory.*dim_rule='chi2'"):
        sl.SlicedAverageVariance(dim="auto").partial_fit(X, Y)


def test_residual_phd_offers_no_partial_fit():
    assert not hasattr(sl.HessianDirections(residuals=True), "partial_fit")
    assert hasattr(sl.HessianDirections(), "partial_fit")


def test_a_batch_with_new_columns_is_refused_and_changes_nothing():
    estimator = sl.SlicedInverse(dim=2).partial_fit(X[:2000], Y[:2000])
    before = estimator.basis_.copy()
    with pytest.raises(ValueError, match="X has 6 features, but SlicedInverse is expecting 5"):
        estimator.partial_fit(np.column_stack([X[2000:], X[2000:, 0]]), Y[2000:])
    import pandas as pd

    named = sl.SlicedInverse(dim=2).partial_fit(pd.DataFrame(X[:2000], columns=list("abcde")),
                                                Y[:2000])
    with pytest.raises(ValueError, match="feature names"):
        named.partial_fit(pd.DataFrame(X[2000:], columns=list("abcdz")), Y[2000:])
    np.testing.assert_array_equal(estimator.basis_, before)
    assert estimator.n_samples_seen_ == 2000


def test_labels_after_numeric_edges_are_refused():
    estimator = sl.SlicedInverse(dim=1).partial_fit(X[:1000], Y[:1000])
    with pytest.raises(ValueError, match="class labels"):
        estimator.partial_fit(X[1000:2000], np.array(["a", "b"] * 500))
    assert estimator.n_samples_seen_ == 1000


def test_short_slices_are_left_out_with_a_warning_until_filled():
    edges = [-1.5, 0.0, 4.0]  # the top slice (y >= 4) is rare
    low = np.flatnonzero(Y < 4.0)
    estimator = sl.SlicedInverse(dim=1, slice_edges=edges)
    with pytest.warns(EstimationWarning, match="left out of the estimate"):
        estimator.partial_fit(X[low[:2000]], Y[low[:2000]])
    assert estimator.n_slices_ == 3
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EstimationWarning)
        estimator.partial_fit(X, Y)
    assert estimator.n_slices_ == 4


def test_fit_refuses_edges_that_leave_a_slice_empty():
    with pytest.raises(ValueError, match=r"slice edges leave slice 3 \(y in \[100, inf\)\) "
                                         r"with 0 rows"):
        sl.SlicedInverse(dim=1, slice_edges=[-1.0, 0.0, 100.0]).fit(X, Y)
    with pytest.raises(ValueError, match="strictly increasing"):
        sl.SlicedInverse(dim=1, slice_edges=[1.0, 0.0]).fit(X, Y)
