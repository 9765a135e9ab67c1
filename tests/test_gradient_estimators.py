"""Gradient-based subspace estimators: outer product of gradients and average derivatives.

Every statistical check uses a fixed seed and a stated tolerance; the source
of each expected value is named beside the check.
"""

from __future__ import annotations

import tracemalloc
import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.linalg import subspace_angles
from sklearn.utils.estimator_checks import parametrize_with_checks
from statsmodels.regression.dimred import SlicedInverseReg

from splitlift import CollinearityWarning, SlicedInverse
from splitlift.estimators._derivative import AverageDerivative, rule_of_thumb_bandwidth
from splitlift.estimators._gradient import GradientOuterProduct, default_n_neighbors
from splitlift.estimators._local import gaussian_weights, local_linear_gradients


def largest_angle_degrees(estimated, truth) -> float:
    # reference: scipy.linalg.subspace_angles (radians, largest first)
    return float(np.degrees(subspace_angles(estimated, truth)[0]))


def random_basis(rng, d, s):
    return np.linalg.qr(rng.standard_normal((d, s)))[0]


def correlated_gaussian(rng, n, d, rho=0.5):
    # AR(1) covariance rho^|i - j|, condition number about 9 for rho = 0.5
    covariance = rho ** np.abs(np.subtract.outer(np.arange(d), np.arange(d)))
    X = rng.standard_normal((n, d)) @ np.linalg.cholesky(covariance).T + 3.0
    return X, covariance


def expected_failures(estimator) -> dict:
    """Checks that cannot hold for a method, with the reason (scikit-learn's mechanism)."""
    if isinstance(estimator, GradientOuterProduct):
        # The check fits 15 rows of 30 columns: every local linear fit is then a
        # degenerate system held solvable by a 1e-9 ridge, which amplifies the
        # rounding difference between a weight and repeated rows to about 3e-7,
        # beyond the check's 1e-7. Integer weights equal repetition to 1e-9 on
        # data with enough rows per neighbourhood: tests/test_sample_weights.py.
        return {"check_sample_weight_equivalence_on_dense_data":
                "degenerate local fits (d > n) amplify rounding beyond the check's 1e-7"}
    return {}


@parametrize_with_checks(
    [
        GradientOuterProduct(),
        GradientOuterProduct(refine=1, n_anchors=8, random_state=0),
        AverageDerivative(),
        AverageDerivative(density_weighted=False, n_slices=3),
    ],
    expected_failed_checks=expected_failures,
)
def test_scikit_learn_conventions(estimator, check):
    # reference: scikit-learn's estimator checks
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CollinearityWarning)
        check(estimator)


# --- outer product of gradients -------------------------------------------------------


def test_opg_matches_closed_form_expected_gradient_outer_product():
    # Closed form (derived by hand, checked by Monte Carlo below): for
    # X ~ N(0, I) and f(x) = sin(b1'x) + (b2'x)^2 with orthonormal b1, b2,
    # grad f = cos(b1'x) b1 + 2 (b2'x) b2 with b1'x, b2'x independent N(0, 1),
    # E[cos^2 t] = (1 + E[cos 2t]) / 2 = (1 + e^-2) / 2 and E[t^2] = 1, so
    # E[grad f grad f'] = 4 b2 b2' + (1 + e^-2)/2 b1 b1' (cross term E[cos t] E[2s] = 0).
    rng = np.random.default_rng(0)
    n, d = 4000, 6
    B = random_basis(rng, d, 2)
    X = rng.standard_normal((n, d))
    t = X @ B
    y = np.sin(t[:, 0]) + t[:, 1] ** 2 + 0.05 * rng.standard_normal(n)
    expected = 4 * np.outer(B[:, 1], B[:, 1]) + (1 + np.exp(-2)) / 2 * np.outer(B[:, 0], B[:, 0])

    exact_gradients = np.cos(t[:, :1]) * B[:, 0] + 2 * t[:, 1:] * B[:, 1]
    monte_carlo = exact_gradients.T @ exact_gradients / n
    assert np.abs(monte_carlo - expected).max() < 0.3  # Monte Carlo error ~ 4 sqrt(2 / n)

    est = GradientOuterProduct(dim=2, refine=1).fit(X, y)
    # order: the quadratic index (eigenvalue 4) first, the sine index (0.568) second
    assert abs(est.directions_[:, 0] @ B[:, 1]) > 0.999
    assert abs(est.directions_[:, 1] @ B[:, 0]) > 0.99
    assert largest_angle_degrees(est.basis_, B) < 1.0
    # local smoothing shrinks and noise inflates gradient norms: eigenvalues within 20 %
    np.testing.assert_allclose(est.eigenvalues_[:2], [4.0, (1 + np.exp(-2)) / 2], rtol=0.2)
    assert est.eigenvalues_[2] < 0.01 * est.eigenvalues_[0]  # no third direction
    # the averaged outer product itself, in the (b2, b1) coordinates, within 20 % of 4
    assert np.abs(est.outer_product_ - expected).max() < 0.8


def test_opg_recovers_symmetric_dependence_that_sir_misses():
    # y = (b'x)^2 with Gaussian X: E[X | y] = 0, so SIR sees nothing (Li 1991,
    # Cook & Weisberg 1991), while every gradient 2 (b'x) b lies along b (Xia et al. 2002).
    rng = np.random.default_rng(1)
    n, d = 1000, 5
    b = random_basis(rng, d, 1)
    X = rng.standard_normal((n, d))
    y = (X @ b)[:, 0] ** 2 + 0.1 * rng.standard_normal(n)

    opg = GradientOuterProduct(dim=1).fit(X, y)
    assert largest_angle_degrees(opg.basis_, b) < 3.0

    # reference: statsmodels' SIR and splitlift's SIR both fail on it. Their leading
    # direction is noise, uniform on the sphere, so it comes within 15 degrees of b
    # with probability well under 1 % in 5 dimensions.
    sir_reference = SlicedInverseReg(y, X).fit(slice_n=100)
    assert largest_angle_degrees(np.asarray(sir_reference.params)[:, :1], b) > 15.0
    assert largest_angle_degrees(SlicedInverse(dim=1).fit(X, y).basis_, b) > 15.0


def test_opg_recovers_three_indices_on_uniform_inputs():
    # Uniform inputs on a cube are far from elliptical; OPG needs no linearity
    # condition (Xia et al. 2002). Tolerance: 5 degrees at n = 3000, d = 6.
    rng = np.random.default_rng(2)
    n, d = 3000, 6
    B = random_basis(rng, d, 3)
    X = rng.uniform(-1.7, 1.7, size=(n, d))
    t = X @ B
    y = t[:, 0] + t[:, 1] ** 2 + np.sin(np.pi * t[:, 2] / 2) + 0.1 * rng.standard_normal(n)
    est = GradientOuterProduct(dim=3).fit(X, y)
    assert largest_angle_degrees(est.basis_, B) < 5.0


def test_refined_opg_sharpens_a_fast_varying_index():
    # Refined OPG (Xia 2007) narrows neighbourhoods only along the current
    # directions, which cuts smoothing bias when f oscillates along them.
    rng = np.random.default_rng(3)
    n, d = 3000, 10
    B = random_basis(rng, d, 2)
    X = rng.standard_normal((n, d))
    t = X @ B
    y = np.sin(2 * t[:, 0]) + 0.5 * t[:, 1] ** 2 + 0.1 * rng.standard_normal(n)
    plain = largest_angle_degrees(GradientOuterProduct(dim=2).fit(X, y).basis_, B)
    refined = largest_angle_degrees(GradientOuterProduct(dim=2, refine=2).fit(X, y).basis_, B)
    assert refined < 0.6 * plain
    assert refined < 3.0


def test_batched_local_fits_match_weighted_least_squares():
    # reference: statsmodels WLS, one anchor at a time; the relative ridge of 1e-9
    # moves O(1) slopes by less than 1e-8
    rng = np.random.default_rng(4)
    n, p, k = 200, 4, 25
    Z = rng.standard_normal((n, p))
    responses = np.column_stack([np.sin(Z[:, 0]) + Z[:, 1] ** 2, Z[:, 2] * Z[:, 3]])
    anchors = np.array([0, 7, 99])
    distances = np.linalg.norm(Z[anchors, None, :] - Z[None, :, :], axis=2)
    indices = np.argsort(distances, axis=1)[:, :k]
    near = np.take_along_axis(distances, indices, axis=1)
    weights = gaussian_weights(near, None)
    batched = local_linear_gradients(Z, responses, anchors, indices, weights)
    for a, anchor in enumerate(anchors):
        design = sm.add_constant(Z[indices[a]] - Z[anchor])
        for column in range(responses.shape[1]):
            fit = sm.WLS(responses[indices[a], column], design, weights=weights[a]).fit()
            np.testing.assert_allclose(batched[a, column], fit.params[1:], rtol=1e-6, atol=1e-8)


def test_opg_class_labels_as_indicators():
    # class labels: one local linear fit per class indicator (Xia et al. 2002 for each
    # indicator's regression function); the class boundary depends on b'x only
    rng = np.random.default_rng(5)
    n, d = 1500, 5
    b = random_basis(rng, d, 1)
    X = rng.standard_normal((n, d))
    index = (X @ b)[:, 0] + 0.2 * rng.standard_normal(n)
    labels = np.where(index > 0.5, "high", np.where(index < -0.5, "low", "mid"))
    est = GradientOuterProduct(dim=1).fit(X, labels)
    assert largest_angle_degrees(est.basis_, b) < 5.0


def test_opg_anchor_subsample():
    rng = np.random.default_rng(6)
    n, d = 3000, 5
    b = random_basis(rng, d, 1)
    X = rng.standard_normal((n, d))
    y = np.tanh((X @ b)[:, 0]) + 0.05 * rng.standard_normal(n)
    first = GradientOuterProduct(dim=1, n_anchors=500, random_state=0).fit(X, y)
    again = GradientOuterProduct(dim=1, n_anchors=500, random_state=0).fit(X, y)
    assert first.anchor_indices_.shape == (500,)
    np.testing.assert_array_equal(first.basis_, again.basis_)
    assert largest_angle_degrees(first.basis_, b) < 3.0
    every = GradientOuterProduct(dim=1, n_anchors=10 * n).fit(X, y)
    np.testing.assert_array_equal(every.anchor_indices_, np.arange(n))


def test_opg_default_neighbourhood_rule_and_small_samples():
    # the documented rule: max(4 (p + 1), ceil(n^(4 / (p + 4)))), capped at n
    assert default_n_neighbors(100_000, 20) == 84
    assert default_n_neighbors(100_000, 2) == int(np.ceil(100_000 ** (2 / 3)))
    assert default_n_neighbors(15, 6) == 15
    rng = np.random.default_rng(7)
    X = rng.standard_normal((12, 3))
    est = GradientOuterProduct(dim=1).fit(X, X[:, 0])
    assert est.n_neighbors_ == 12


def test_opg_memory_is_linear_in_n():
    # n = 20000 rows: an n x n float matrix alone would take 3.2 GB; chunked
    # neighbourhoods keep the peak allocation far below that (bound 120 MB)
    rng = np.random.default_rng(8)
    X = rng.standard_normal((20_000, 5))
    y = X[:, 0] ** 2 + X[:, 1]
    tracemalloc.start()
    GradientOuterProduct(dim=2, n_anchors=2000, random_state=0).fit(X, y)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 120 * 2**20


# --- average derivative estimation ----------------------------------------------------


@pytest.mark.parametrize("density_weighted", [True, False])
def test_ade_single_index_along_least_squares_slope(density_weighted):
    # Stein's lemma (Stein 1981; Brillinger 1983): with Gaussian X the OLS slope
    # is E[grad f]; for f = g(b'x) every (weighted) average gradient is a multiple
    # of b, so both ADE variants point along the OLS slope. Reference slope:
    # statsmodels OLS. Tolerance: 4 degrees at n = 4000, d = 5, AR(1) inputs
    # (over seeds 0-9 the angle stayed below 3.1 degrees for both variants).
    rng = np.random.default_rng(10)
    n, d = 4000, 5
    X, covariance = correlated_gaussian(rng, n, d)
    b = rng.standard_normal(d)
    index = (X - 3.0) @ b / np.sqrt(b @ covariance @ b)
    y = np.exp(0.5 * index) + 0.2 * rng.standard_normal(n)
    slope = sm.OLS(y, sm.add_constant(X)).fit().params[1:]
    est = AverageDerivative(density_weighted=density_weighted).fit(X, y)
    assert largest_angle_degrees(est.average_derivatives_[0][:, None], slope[:, None]) < 4.0
    assert est.directions_[:, 0] @ slope > 0  # sign follows the derivative
    assert est.basis_.shape == (d, 1)


def test_kernel_score_ade_equals_least_squares_slope_for_a_multi_index_model():
    # Stein's lemma gives E[grad f] = OLS slope for any smooth f under Gaussian X
    # (Brillinger 1983), so the classical ADE (Haerdle & Stoker 1989) matches it
    # for a two-index model too. Reference: statsmodels OLS; tolerance 5 degrees at
    # n = 8000 (over eleven other seeds the angle stayed below 3.2 degrees).
    rng = np.random.default_rng(11)
    n, d = 8000, 5
    X, covariance = correlated_gaussian(rng, n, d)
    B = rng.standard_normal((d, 2))
    t = (X - 3.0) @ B / np.sqrt(np.diag(B.T @ covariance @ B))
    y = 2 * np.tanh(t[:, 0]) + (t[:, 1] + 0.5) ** 2 + 0.2 * rng.standard_normal(n)
    slope = sm.OLS(y, sm.add_constant(X)).fit().params[1:]
    est = AverageDerivative(density_weighted=False).fit(X, y)
    assert largest_angle_degrees(est.average_derivatives_[0][:, None], slope[:, None]) < 5.0


def test_score_slicing_reduces_to_sir_for_gaussian_inputs():
    # Babichev & Bach (2018): with Gaussian X the score is Sigma^-1 (x - mu), so
    # score-based slicing estimates the SIR subspace. Reference: statsmodels SIR,
    # Li's (1991) rational model; tolerance 6 degrees between the subspaces and to the truth.
    rng = np.random.default_rng(12)
    n, d = 2000, 5
    B = random_basis(rng, d, 2)
    X = rng.standard_normal((n, d))
    t = X @ B
    y = t[:, 0] / (0.5 + (t[:, 1] + 1.5) ** 2) + 0.1 * rng.standard_normal(n)
    reference = np.asarray(SlicedInverseReg(y, X).fit(slice_n=200).params)[:, :2]
    for density_weighted in (False, True):
        est = AverageDerivative(dim=2, n_slices=10, density_weighted=density_weighted).fit(X, y)
        assert est.n_slices_ == 10
        assert largest_angle_degrees(est.basis_, reference) < 6.0
        assert largest_angle_degrees(est.basis_, B) < 6.0


def test_ade_class_labels_as_indicators():
    # each class indicator is a regression function of b'x, so its average
    # derivative lies along b (Haerdle & Stoker 1989); three classes give up to 2 directions
    rng = np.random.default_rng(13)
    n, d = 1500, 4
    b = random_basis(rng, d, 1)
    X = rng.standard_normal((n, d))
    index = (X @ b)[:, 0] + 0.2 * rng.standard_normal(n)
    labels = np.where(index > 0.5, "high", np.where(index < -0.5, "low", "mid"))
    est = AverageDerivative().fit(X, labels)
    assert est.n_slices_ == 3 and est.average_derivatives_.shape == (3, d)
    assert largest_angle_degrees(est.basis_, b) < 5.0
    assert AverageDerivative(dim=2).fit(X, labels).dim_ == 2
    with pytest.raises(ValueError, match="at most 2"):
        AverageDerivative(dim=3).fit(X, labels)


def test_ade_memory_is_bounded():
    # n = 5000: the pairwise matrix would take 200 MB; row chunks keep the peak under 60 MB
    rng = np.random.default_rng(14)
    X = rng.standard_normal((5000, 5))
    y = X[:, 0] + 0.1 * rng.standard_normal(5000)
    for density_weighted in (True, False):
        tracemalloc.start()
        AverageDerivative(density_weighted=density_weighted).fit(X, y)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        assert peak < 60 * 2**20


def test_ade_rule_of_thumb_bandwidth_and_override():
    # Silverman (1986, eq. 4.14, from memory): h = (4 / ((p + 2) n))^(1 / (p + 4));
    # for p = 1 it is (4/3)^(1/5) n^(-1/5) = 1.06 n^(-1/5), the familiar univariate rule
    assert rule_of_thumb_bandwidth(1000, 1) == pytest.approx(1.0592 * 1000 ** (-0.2), rel=1e-4)
    rng = np.random.default_rng(15)
    X = rng.standard_normal((300, 3))
    y = X[:, 0] + 0.1 * rng.standard_normal(300)
    assert AverageDerivative().fit(X, y).bandwidth_ == pytest.approx(
        rule_of_thumb_bandwidth(300, 3)
    )
    assert AverageDerivative(bandwidth=0.8).fit(X, y).bandwidth_ == 0.8


# --- shared behaviour and bad settings --------------------------------------------------


@pytest.mark.parametrize(
    "estimator",
    [GradientOuterProduct(dim=1), AverageDerivative(), AverageDerivative(density_weighted=False)],
)
def test_constant_column_is_dropped_with_a_warning(estimator):
    rng = np.random.default_rng(16)
    X = rng.standard_normal((800, 4))
    X[:, 2] = 5.0
    y = X[:, 0] - X[:, 1] + 0.05 * rng.standard_normal(800)
    with pytest.warns(CollinearityWarning, match="constant"):
        estimator.fit(X, y)
    assert np.abs(estimator.directions_[2]).max() < 1e-10  # zero up to round-off
    truth = np.array([[1.0], [-1.0], [0.0], [0.0]])
    assert largest_angle_degrees(estimator.basis_, truth) < 5.0
    assert np.all(np.diff(estimator.eigenvalues_) <= 0)


def test_fitted_interface_shapes():
    rng = np.random.default_rng(17)
    X = rng.standard_normal((400, 5))
    y = X[:, 0] * X[:, 1]
    for est in (GradientOuterProduct(), AverageDerivative(n_slices=4, dim=2)):
        est.fit(X, y)
        assert est.basis_.shape == (5, 2) and est.directions_.shape == (5, 5)
        assert est.eigenvalues_.shape == (5,) and est.dim_ == 2
        np.testing.assert_allclose(est.basis_.T @ est.basis_, np.eye(2), atol=1e-12)
        np.testing.assert_allclose(est.transform(X), X @ est.basis_)


@pytest.mark.parametrize(
    ("estimator", "n", "message"),
    [
        (GradientOuterProduct(n_neighbors=50), 30, "n_neighbors=50 exceeds n_samples = 30"),
        (GradientOuterProduct(bandwidth=0.0), 30, "bandwidth"),
        (AverageDerivative(bandwidth=-1.0), 30, "bandwidth"),
        (GradientOuterProduct(dim=7), 30, "n_features = 4"),
        (AverageDerivative(dim=5), 30, "n_features = 4"),
        (AverageDerivative(dim=2), 30, "n_slices"),
        (AverageDerivative(dim=3, n_slices=3), 30, "at most 2"),
        (AverageDerivative(n_slices=8), 12, "too few for 8 slices"),
        (GradientOuterProduct(), 2, "n_samples = 2"),
        (AverageDerivative(), 2, "n_samples = 2"),
        (AverageDerivative(trim=1.0), 30, "trim"),
        (GradientOuterProduct(refine=-1), 30, "refine"),
        (GradientOuterProduct(dim="auto", refine=1), 30, "integer dim"),
    ],
)
def test_bad_settings_give_clear_errors(estimator, n, message):
    rng = np.random.default_rng(18)
    X = rng.standard_normal((n, 4))
    y = X[:, 0] + rng.standard_normal(n)
    with pytest.raises(ValueError, match=message):
        estimator.fit(X, y)


def test_constant_response_is_refused():
    X = np.random.default_rng(19).standard_normal((50, 3))
    for est in (GradientOuterProduct(), AverageDerivative()):
        with pytest.raises(ValueError, match="constant"):
            est.fit(X, np.ones(50))
