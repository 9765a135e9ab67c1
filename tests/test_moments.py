"""The shared moments core: slicing semantics, slice statistics, whitening."""

import warnings

import numpy as np
import pytest

import splitlift as sl
from splitlift.moments import (
    CollinearityWarning,
    Whitening,
    centred_cross_product,
    covariance,
    slice_covariances,
    slice_response,
)


@pytest.mark.parametrize("n,n_slices", [(100, 10), (101, 10), (57, 4), (20, 10), (1000, 7)])
def test_equal_count_slices_are_array_split_of_the_sorted_response(rng, n, n_slices):
    # The design brief's definition: sort, then np.array_split (no ties here).
    y = rng.standard_normal(n)
    slices = slice_response(y, n_slices)
    order = np.argsort(y)
    for index, part in enumerate(np.array_split(order, n_slices)):
        assert np.all(slices.labels[part] == index)
    np.testing.assert_array_equal(slices.counts, [len(p) for p in np.array_split(order, n_slices)])


def test_ties_stay_together(rng):
    y = np.repeat(np.arange(6.0), [5, 1, 7, 2, 3, 2])  # float codes, many ties
    rng.shuffle(y)
    slices = slice_response(y, 4)
    for value in np.unique(y):
        assert len(np.unique(slices.labels[y == value])) == 1
    assert slices.counts.sum() == y.size and np.all(slices.counts > 0)
    # slices stay ordered by response
    maxima = [y[slices.labels == h].max() for h in range(slices.n_slices)]
    minima = [y[slices.labels == h].min() for h in range(slices.n_slices)]
    assert all(hi < lo for hi, lo in zip(maxima[:-1], minima[1:], strict=True))


@pytest.mark.parametrize(
    "labels",
    [np.array(["b", "a", "c", "a", "b", "c"]), np.array([3, 1, 3, 1, 2, 2]),
     np.array([True, False, True, False, True, False])],
    ids=["strings", "few-integers", "booleans"],
)
def test_discrete_responses_are_sliced_by_value(labels):
    slices = slice_response(labels, 10)
    assert slices.kind == "value"
    assert slices.n_slices == 3 if labels.dtype != bool else slices.n_slices == 2
    for value, index in zip(slices.values, range(slices.n_slices), strict=True):
        assert np.all(slices.labels[labels == value] == index)


def test_integers_with_many_values_are_sliced_by_count(rng):
    y = rng.integers(0, 1000, size=500)
    assert slice_response(y, 10).kind == "count"


def test_slice_sums_and_means_match_a_direct_computation(rng):
    X = rng.standard_normal((300, 4))
    y = rng.standard_normal(300)
    for n_slices in (5, 100):  # dense and sparse indicator paths
        slices = slice_response(y, n_slices)
        direct = np.array([X[slices.labels == h].mean(axis=0) for h in range(slices.n_slices)])
        np.testing.assert_allclose(slices.means(X), direct, atol=1e-12)


def test_slice_covariances_are_unbiased(rng):
    X = rng.standard_normal((200, 3))
    slices = slice_response(rng.standard_normal(200), 4)
    covariances = slice_covariances(X, slices, X.mean(axis=0))
    for h in range(4):
        np.testing.assert_allclose(covariances[h], np.cov(X[slices.labels == h].T), atol=1e-12)


def test_covariance_fast_and_centred_paths_agree(rng):
    X = rng.standard_normal((500, 3))
    reference = np.cov(X.T, bias=True)  # numpy's divisor-n covariance
    np.testing.assert_allclose(covariance(X, X.mean(axis=0)), reference, atol=1e-13)
    shifted = X + 1e7  # mean dominates: the centred path must keep precision
    np.testing.assert_allclose(covariance(shifted, shifted.mean(axis=0)), reference, atol=1e-6)
    np.testing.assert_allclose(
        centred_cross_product(X, X.mean(axis=0)) / 500, reference, atol=1e-13
    )


def test_whitening_gives_identity_covariance(rng):
    X = rng.standard_normal((400, 4)) @ rng.standard_normal((4, 4))
    whitening = Whitening.fit(X)
    Z = whitening.transform(X)
    np.testing.assert_allclose(Z.T @ Z / 400, np.eye(4), atol=1e-10)


def test_collinear_columns_warn_and_estimation_uses_the_rest(rng):
    n = 2000
    X = rng.standard_normal((n, 4))
    X = np.column_stack([X, X[:, 0] + X[:, 1], np.full(n, 3.0)])  # collinear and constant
    y = X[:, 0] + 0.1 * rng.standard_normal(n)
    with pytest.warns(CollinearityWarning, match="rank 4 < 6"):
        estimate = sl.SlicedInverse(dim=1).fit(X, y)
    assert estimate.whitening_.rank == 4
    # the lost directions are zero columns of directions_, zero eigenvalues
    assert np.count_nonzero(np.linalg.norm(estimate.directions_, axis=0)) == 4
    np.testing.assert_array_equal(estimate.eigenvalues_[4:], 0.0)
    # y depends on x0, which is equivalent to x0 + c (x4 - x0 - x1) for any c:
    # the estimate must predict y as well as x0 does
    summary = X @ estimate.basis_[:, 0]
    assert abs(np.corrcoef(summary, X[:, 0])[0, 1]) > 0.99
    # a lift built on it still spans all of R^d
    lift = sl.LiftMatrix.from_subspace(estimate.basis_)
    assert lift.rank() == 6


def test_no_warning_on_well_conditioned_data(rng):
    X = rng.standard_normal((200, 3))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        sl.SlicedInverse(dim=1).fit(X, X[:, 0])


@pytest.mark.parametrize("n", [3, 17, 1000, 100_001])
@pytest.mark.parametrize("n_slices", [2, 3, 10, 40])
def test_order_statistics_equal_numpy_sort(n, n_slices):
    # Reference: numpy.sort, then the same positions; ties (integer values) included.
    from splitlift.moments import array_split_starts, order_statistics

    generator = np.random.default_rng(n * 100 + n_slices)
    for values in (generator.standard_normal(n), generator.integers(0, 7, n).astype(float)):
        positions = np.unique(np.minimum(array_split_starts(n, n_slices), n - 1))
        np.testing.assert_array_equal(order_statistics(values, positions),
                                      np.sort(values)[positions])


@pytest.mark.parametrize("n_edges", [1, 9, 32, 33, 200])
def test_slice_of_equals_searchsorted(n_edges):
    # Reference: numpy.searchsorted(edges, y, side="right"), values on the edges included.
    from splitlift.moments import slice_of

    generator = np.random.default_rng(n_edges)
    edges = np.unique(generator.standard_normal(n_edges))
    y = np.concatenate([generator.standard_normal(5000), edges, [-np.inf, np.inf]])
    np.testing.assert_array_equal(slice_of(y, edges), np.searchsorted(edges, y, side="right"))
    assert slice_of(y.astype(np.float32), edges).dtype == np.intp
