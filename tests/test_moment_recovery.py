"""Known-truth recovery by the moment methods on Gaussian designs.

Statistical checks with fixed seeds; tolerances are stated per test and set
well above the sampling error at the chosen n (roughly sqrt(d / n) radians).
"""

import numpy as np
import pytest

import splitlift as sl

from .conftest import li_rational_model


def largest_angle_degrees(U, V):
    return float(np.degrees(sl.principal_angles(U, V)[0]))


def test_sir_recovers_li_rational_model(rng):
    # Li (1991) Example 6.3 style, n = 4000, d = 10: SIR finds both directions.
    X, y, truth = li_rational_model(rng, 4000)
    estimate = sl.SlicedInverse(n_slices=10, dim=2).fit(X, y)
    assert largest_angle_degrees(estimate.basis_, truth) < 12.0


def test_sir_recovers_linear_model_under_correlated_design(rng):
    # Gaussian design with correlation; y = b'x + noise, dim 1 (Li 1991, Sec. 5, from memory).
    d = 8
    covariance = 0.5 ** np.abs(np.subtract.outer(np.arange(d), np.arange(d)))
    X = rng.multivariate_normal(np.zeros(d), covariance, size=5000)
    b = np.array([1.0, -1.0, 0.5, 0, 0, 0, 0, 0])
    y = np.exp(0.5 * X @ b) + 0.2 * rng.standard_normal(5000)
    estimate = sl.SlicedInverse(dim=1).fit(X, y)
    assert largest_angle_degrees(estimate.basis_, b) < 5.0


def test_single_index_sir_and_ols_are_both_proportional_to_truth(rng):
    # Brillinger (1983): with Gaussian X the OLS slope of a single-index model
    # y = g(b'x, noise) is proportional to b; the SIR direction lies in
    # span(b) as well (Li 1991).
    n, d = 20000, 6
    X = rng.standard_normal((n, d))
    b = np.array([2.0, 1.0, 0.0, -1.0, 0.0, 0.5])
    y = np.tanh(X @ b / 2) ** 3 + 0.1 * rng.standard_normal(n)
    slope = np.linalg.lstsq(np.column_stack([np.ones(n), X]), y, rcond=None)[0][1:]
    sir = sl.SlicedInverse(dim=1).fit(X, y).directions_[:, 0]
    assert largest_angle_degrees(slope, b) < 2.0
    assert largest_angle_degrees(sir, b) < 2.0
    assert largest_angle_degrees(sir, slope) < 2.5


@pytest.mark.parametrize(
    "estimator", [sl.SlicedAverageVariance(dim=1), sl.HessianDirections(dim=1)],
    ids=["SAVE", "pHd"],
)
def test_symmetric_dependence_is_found_by_save_and_phd(rng, estimator):
    # y = (b'x)^2: E[Z | y] = 0 by symmetry, but Var(b'Z | y) varies with y
    # (Cook & Weisberg 1991) and E[y Z Z^T] = 2 b b^T + const I (Li 1992).
    n, d = 4000, 8
    X = rng.standard_normal((n, d))
    b = np.zeros(d)
    b[[1, 4]] = [1.0, 1.0]
    y = (X @ b) ** 2 + 0.1 * rng.standard_normal(n)
    assert largest_angle_degrees(estimator.fit(X, y).basis_, b) < 6.0


def test_sir_misses_symmetric_dependence(rng):
    # The documented blind spot of SIR: for y = (b'x)^2 the slice means carry
    # no signal, so the SIR direction is close to orthogonal to b on average.
    n, d = 4000, 8
    X = rng.standard_normal((n, d))
    b = np.zeros(d)
    b[[1, 4]] = [1.0, 1.0]
    y = (X @ b) ** 2 + 0.1 * rng.standard_normal(n)
    sir = sl.SlicedInverse(dim=1).fit(X, y)
    assert largest_angle_degrees(sir.basis_, b) > 45.0
    # and its leading eigenvalue is at the noise level (about d / n per slice)
    assert sir.eigenvalues_[0] < 0.02


def test_residual_phd_sees_curvature_hidden_by_linear_trend(rng):
    # y = 3 x1 + x2^2: residual pHd (Li 1992, Sec. 6) removes the linear part.
    n, d = 4000, 6
    X = rng.standard_normal((n, d))
    y = 3 * X[:, 0] + X[:, 1] ** 2 + 0.1 * rng.standard_normal(n)
    estimate = sl.HessianDirections(dim=1, residuals=True).fit(X, y)
    assert largest_angle_degrees(estimate.basis_, np.eye(d)[:, 1]) < 6.0


def test_class_labels_are_sliced_by_value(rng):
    # Two classes separated along b: SIR with by-value slices is Fisher's
    # discriminant direction (Li 1991, Remark), here b itself.
    n, d = 3000, 5
    labels = rng.choice(np.array(["alloy", "ceramic"]), size=n)
    b = np.array([0.0, 1.0, 1.0, 0.0, 0.0])
    X = rng.standard_normal((n, d)) + np.where(labels == "alloy", 1.0, -1.0)[:, None] * b
    estimate = sl.SlicedInverse(dim=1).fit(X, labels)
    assert estimate.n_slices_ == 2
    assert largest_angle_degrees(estimate.basis_, b) < 4.0
