"""Estimators under column units, extreme magnitudes, degenerate fits and seeds.

The reference for every angle is ``scipy.linalg.subspace_angles``. The
equivariance checks rest on a fact of the methods themselves: SIR, SAVE,
pHd and ADE work in whitened coordinates ``z = W (x - mean)`` and OPG in
standardised ones, and rescaling a column leaves both unchanged, so the
subspace estimated from ``X S`` (S diagonal, invertible) is
``S^{-1}`` times the one estimated from ``X``.
"""

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.linalg import subspace_angles

import splitlift as sl
from splitlift.estimators._base import EstimationWarning

ESTIMATORS = {
    "SIR": lambda: sl.SlicedInverse(dim=2),
    "SAVE": lambda: sl.SlicedAverageVariance(dim=2),
    "pHd": lambda: sl.HessianDirections(dim=2),
    "OPG": lambda: sl.GradientOuterProduct(dim=2, random_state=0),
    "ADE": lambda: sl.AverageDerivative(dim=2, n_slices=5),
}


def ridge_data(seed, n=600, d=5):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, d))
    y = X[:, 0] + (X[:, 1] ** 2) + 0.1 * rng.standard_normal(n)
    return X, y, np.eye(d)[:, :2]


def largest_angle(U, V) -> float:
    return float(np.max(subspace_angles(U, V)))


def quiet_fit(estimator, X, y):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return estimator.fit(X, y)


SHARED_DATA = {seed: ridge_data(seed) for seed in range(3)}


@pytest.mark.parametrize("name", sorted(ESTIMATORS))
@settings(max_examples=40, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(exponents=st.lists(st.floats(-6, 6), min_size=5, max_size=5),
       seed=st.sampled_from([0, 1, 2]))
def test_equivariant_under_column_scaling(name, exponents, seed):
    X, y, _ = SHARED_DATA[seed]
    scales = 10.0 ** np.asarray(exponents)
    plain = quiet_fit(ESTIMATORS[name](), X, y)
    scaled = quiet_fit(ESTIMATORS[name](), X * scales, y)
    # span(basis of X S) must equal span(S^-1 basis of X); tolerance 1e-6 rad
    expected = np.linalg.qr(plain.basis_ / scales[:, None])[0]
    assert largest_angle(scaled.basis_, expected) < 1e-6
    np.testing.assert_allclose(scaled.eigenvalues_, plain.eigenvalues_, rtol=1e-6, atol=1e-12)


@pytest.mark.parametrize("cls", [sl.SlicedInverse, sl.SlicedAverageVariance,
                                 sl.HessianDirections, sl.AverageDerivative])
def test_a_huge_irrelevant_column_does_not_hide_the_relevant_ones(cls):
    # The failure this guards against: a tolerance relative to the raw
    # covariance dropped every ordinary column once one column was 1e5 times
    # larger, and the estimate ended 86-90 degrees off. y = t + t^2 with
    # t = b'x has a linear part (SIR, ADE) and a curved one (SAVE, pHd).
    rng = np.random.default_rng(7)
    X = rng.standard_normal((2000, 5))
    b = np.array([1.0, 0.5, 0.0, 0.0, 0.0]) / np.sqrt(1.25)
    t = X @ b
    y = t + t**2 + 0.1 * rng.standard_normal(2000)
    X[:, 4] *= 1e5
    with warnings.catch_warnings():
        warnings.simplefilter("error", sl.CollinearityWarning)  # no false alarm either
        estimate = cls(dim=1).fit(X, y)
    assert np.degrees(largest_angle(estimate.basis_, b[:, None])) < 10


def test_opg_ignores_the_units_of_an_irrelevant_column():
    X, y, truth = ridge_data(8, n=1500)
    baseline = sl.GradientOuterProduct(dim=2, random_state=0).fit(X, y)
    assert np.degrees(largest_angle(baseline.basis_, truth)) < 10
    scales = np.array([1.0, 1.0, 1.0, 0.01, 1.0])
    shrunk = sl.GradientOuterProduct(dim=2, random_state=0).fit(X * scales, y)
    # The input-coordinate estimate used to be that column (84.6 degrees off).
    # Angles are compared where units do not matter, on the standardised scale
    # (a direction beta acts there as scales * beta): in input coordinates a
    # column in tiny units magnifies its noise coefficient, for any method.
    assert np.degrees(largest_angle(scales[:, None] * shrunk.basis_, truth)) < 10
    assert np.max(np.abs(np.linalg.qr(scales[:, None] * shrunk.basis_)[0][3])) < 0.1
    expected = np.linalg.qr(baseline.basis_ / scales[:, None])[0]
    assert largest_angle(shrunk.basis_, expected) < 1e-6


@pytest.mark.parametrize("magnitude", [1e-300, 1e300])
@pytest.mark.parametrize("name", sorted(ESTIMATORS))
def test_data_near_the_float_limits_is_neither_constant_nor_lost(name, magnitude):
    X, y, truth = ridge_data(3)
    plain = quiet_fit(ESTIMATORS[name](), X, y)
    extreme = quiet_fit(ESTIMATORS[name](), X * magnitude, y)
    assert np.all(np.isfinite(extreme.basis_))
    assert largest_angle(extreme.basis_, plain.basis_) < 1e-6
    assert not np.all(extreme.column_scale_ == 1.0)


def test_ade_in_high_dimension_fails_with_the_fix_instead_of_returning_column_one():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((60, 50))
    y = X[:, 0] + 0.1 * rng.standard_normal(60)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", EstimationWarning)
        with pytest.raises(ValueError, match="degenerate.*larger bandwidth"):
            sl.AverageDerivative().fit(X, y)


def test_rare_class_message_names_the_label_for_object_labels():
    # A bootstrap resample of a six-class problem can hold a class once; the
    # message used to crash with "'str' object has no attribute 'item'".
    rng = np.random.default_rng(1)
    X = rng.standard_normal((40, 3))
    labels = np.array(["a", "b"] * 19 + ["c", "a"], dtype=object)
    with pytest.raises(ValueError, match="response value 'c' occurs in a single row"):
        sl.SlicedAverageVariance(dim=1).fit(X, labels)


@pytest.mark.parametrize("rule", ["ladle", "permutation"])
def test_one_seed_makes_automatic_dimension_reproducible(rule):
    X, y, _ = ridge_data(4, n=300)
    make = {"ladle": lambda: sl.SlicedAverageVariance(dim="auto", random_state=5),
            "permutation": lambda: sl.SlicedInverse(dim="auto", dim_rule="permutation",
                                                    random_state=5)}[rule]
    first, second = quiet_fit(make(), X, y), quiet_fit(make(), X, y)
    assert first.dim_test_.rows == second.dim_test_.rows
    assert first.dim_ == second.dim_


def test_direction_lift_seed_reaches_the_estimator_and_its_rule():
    X, y, _ = ridge_data(5, n=300)

    def fitted():
        lift = sl.DirectionLift(sl.GradientOuterProduct(dim="auto", n_anchors=100),
                                random_state=3)
        return quiet_fit(lift, X, y)

    first, second = fitted(), fitted()
    assert first.estimator_.random_state == 3
    np.testing.assert_array_equal(first.estimator_.anchor_indices_,
                                  second.estimator_.anchor_indices_)
    assert first.estimator_.dim_test_.rows == second.estimator_.dim_test_.rows
    np.testing.assert_array_equal(first.transform(X), second.transform(X))


def test_a_given_rule_seed_is_kept():
    rule = sl.dimension.LadleEstimator(n_boot=5, random_state=11)
    X, y, _ = ridge_data(6, n=200)
    estimate = quiet_fit(sl.SlicedAverageVariance(dim="auto", dim_rule=rule, random_state=2),
                         X, y)
    assert rule.random_state == 11 and estimate.dim_test_ is not None


# Quiet degradation made loud: each case below ended 30-90 degrees off
# without a word before.
def test_few_rows_per_feature_warn():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((60, 20))
    with pytest.warns(EstimationWarning, match="only 60 rows for 20 features"):
        estimate = sl.SlicedInverse(dim=1, n_slices=5).fit(X, X[:, 0])
    assert "only 60 rows" in estimate.fit_warnings_[0]


@pytest.mark.parametrize("cls", [sl.HessianDirections, sl.GradientOuterProduct,
                                 sl.AverageDerivative])
def test_heavy_tailed_response_warns_methods_that_weight_by_it(cls):
    rng = np.random.default_rng(0)
    X = rng.standard_normal((800, 4))
    y = X[:, 0] + rng.standard_cauchy(800)
    with pytest.warns(EstimationWarning, match="heavy-tailed"):
        cls(dim=1).fit(X, y)


def test_heavy_tailed_response_does_not_warn_sliced_methods():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((800, 4))
    y = X[:, 0] + rng.standard_cauchy(800)
    with warnings.catch_warnings():
        warnings.simplefilter("error", EstimationWarning)
        sl.SlicedInverse(dim=1).fit(X, y)


def test_a_dominant_response_value_warns():
    rng = np.random.default_rng(0)
    X = rng.standard_normal((1000, 4))
    y = np.where(rng.random(1000) < 0.9, 0.0, X[:, 0] ** 2)
    with pytest.warns(EstimationWarning, match=r"holds (89|9[0-9])% of the rows"):
        sl.SlicedAverageVariance(dim=1).fit(X, y)


def test_ill_conditioned_inputs_warn_opg():
    rng = np.random.default_rng(0)
    base = rng.standard_normal((800, 3))
    X = np.column_stack([base, base[:, 0] + 1e-3 * rng.standard_normal(800)])
    with pytest.warns(EstimationWarning, match="condition index"):
        sl.GradientOuterProduct(dim=1).fit(X, base[:, 1])


def test_ordinary_data_fit_without_warnings():
    X, y, _ = ridge_data(0, n=1000)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for make in ESTIMATORS.values():
            assert make().fit(X, y).fit_warnings_ == []


@settings(max_examples=200, deadline=None)
@given(values=st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=4, max_size=80,
                       unique=True),
       n_slices=st.integers(2, 8))
def test_equal_count_slices_follow_array_split(values, n_slices):
    # DESIGN.md: sort the response and split it as numpy.array_split would
    # (numpy is the reference); distinct values, so no tie moves a boundary.
    from splitlift.moments import slice_response

    y = np.asarray(values)
    if y.size < n_slices:
        with pytest.raises(ValueError, match="too few for"):
            slice_response(y, n_slices, "count")
        return
    slices = slice_response(y, n_slices, "count")
    expected = np.empty(y.size, dtype=int)
    for label, rows in enumerate(np.array_split(np.argsort(y), n_slices)):
        expected[rows] = label
    np.testing.assert_array_equal(slices.labels, expected)


@settings(max_examples=150, deadline=None)
@given(exponent=st.integers(-300, 300), seed=st.integers(0, 2**16))
def test_direction_lift_gives_finite_output_for_finite_input_at_any_magnitude(exponent, seed):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((80, 3))
    y = X[:, 0] + 0.1 * rng.standard_normal(80)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lift = sl.DirectionLift(sl.SlicedInverse(dim=1, n_slices=4)).fit(X * 10.0**exponent, y)
    assert np.all(np.isfinite(lift.transform(X * 10.0**exponent)))
    # standardised inputs: the lifted features do not depend on the units
    reference = sl.DirectionLift(sl.SlicedInverse(dim=1, n_slices=4)).fit(X, y).transform(X)
    np.testing.assert_allclose(np.abs(lift.transform(X * 10.0**exponent)), np.abs(reference),
                               rtol=1e-6, atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**31 - 1))
def test_same_seed_same_lift(seed):
    X, y, _ = SHARED_DATA[0]

    def fitted():
        return quiet_fit(sl.DirectionLift(sl.GradientOuterProduct(dim=2, n_anchors=60),
                                          random_state=seed), X[:200], y[:200])

    np.testing.assert_array_equal(fitted().transform(X), fitted().transform(X))
