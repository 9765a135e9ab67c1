"""Every public entry refuses bad input with a ValueError that names the problem."""

import numpy as np
import pytest

import splitlift as sl

ESTIMATORS = [sl.SlicedInverse, sl.SlicedAverageVariance, sl.HessianDirections]


@pytest.fixture
def data(rng):
    X = rng.standard_normal((100, 4))
    return X, X[:, 0] + 0.1 * rng.standard_normal(100)


@pytest.mark.parametrize("cls", ESTIMATORS + [sl.DirectionLift])
def test_nan_and_inf_in_X(cls, data):
    X, y = data
    for bad in (np.nan, np.inf):
        X_bad = X.copy()
        X_bad[3, 1] = bad
        with pytest.raises(ValueError, match=r"(?i)(NaN|infinity)"):
            cls().fit(X_bad, y)


@pytest.mark.parametrize("cls", ESTIMATORS)
@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf, "pair"])
@pytest.mark.parametrize("row", [3, 2999])
def test_moment_methods_refuse_non_finite_X_as_scikit_learn_does(cls, bad, row, rng):
    # moment methods check X only on their fallback path (finite sums of squares prove
    # it finite): a bad value after the first rows screened must still get the message
    # of scikit-learn's own check, word for word
    from sklearn.utils import assert_all_finite

    X = rng.standard_normal((3000, 4))
    y = X[:, 0] + 0.1 * rng.standard_normal(3000)
    X_bad = X.copy()
    if bad == "pair":  # +inf and -inf in one column: a sum would be NaN, not inf
        X_bad[row, 1], X_bad[row - 1, 1] = np.inf, -np.inf
    else:
        X_bad[row, 1] = bad
    with pytest.raises(ValueError) as expected:
        assert_all_finite(X_bad, input_name="X", estimator_name=cls.__name__)
    with pytest.raises(ValueError) as refused:
        cls().fit(X_bad, y)
    assert str(refused.value) == str(expected.value)
    with pytest.raises(ValueError) as refused:  # weighted fits take the fallback path
        cls().fit(X_bad, y, sample_weight=np.ones(3000))
    assert str(refused.value) == str(expected.value)


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_nan_in_y(cls, data):
    X, y = data
    y = y.copy()
    y[0] = np.nan
    with pytest.raises(ValueError, match=r"(?i)NaN"):
        cls().fit(X, y)


@pytest.mark.parametrize("cls", [sl.SlicedInverse, sl.SlicedAverageVariance])
def test_too_few_rows_for_the_slices(cls, rng):
    X = rng.standard_normal((19, 3))
    with pytest.raises(ValueError, match="n_samples = 19 is too few for 10 slices"):
        cls(n_slices=10).fit(X, rng.standard_normal(19))


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_constant_response(cls, data):
    X, _ = data
    with pytest.raises(ValueError, match="response y is constant"):
        cls().fit(X, np.full(X.shape[0], 2.5))


@pytest.mark.parametrize("cls", ESTIMATORS)
def test_dim_out_of_range(cls, data):
    X, y = data
    with pytest.raises(ValueError, match="exceeds the number of features"):
        cls(dim=5).fit(X, y)
    with pytest.raises(ValueError, match="dim"):
        cls(dim=0).fit(X, y)


@pytest.mark.parametrize("weight", [0.0, 1.0, -0.1, 2.0])
def test_complement_weight_outside_unit_interval(data, weight):
    X, y = data
    with pytest.raises(ValueError, match="complement_weight"):
        sl.DirectionLift(complement_weight=weight).fit(X, y)


@pytest.mark.parametrize("cls", ESTIMATORS + [sl.DirectionLift])
def test_one_dimensional_X(cls, data):
    X, y = data
    with pytest.raises(ValueError, match=r"(?i)2D array"):
        cls().fit(X[:, 0], y)


@pytest.mark.parametrize("cls", ESTIMATORS + [sl.DirectionLift])
def test_mismatched_lengths(cls, data):
    X, y = data
    with pytest.raises(ValueError, match=r"inconsistent numbers of samples"):
        cls().fit(X, y[:-1])


def test_transform_with_wrong_number_of_features(data):
    X, y = data
    fitted = sl.DirectionLift().fit(X, y)
    with pytest.raises(ValueError, match="features"):
        fitted.transform(X[:, :3])


def test_phd_refuses_string_labels(data):
    X, _ = data
    with pytest.raises(ValueError):
        sl.HessianDirections().fit(X, np.array(["a", "b"] * 50))


def test_single_row_value_slice(rng):
    X = rng.standard_normal((9, 2))
    labels = np.array(["a"] * 4 + ["b"] * 4 + ["c"])
    with pytest.raises(ValueError, match="'c' occurs in a single row"):
        sl.SlicedInverse(dim=1).fit(X, labels)
