"""Mergeable sufficient statistics: exact merging in any order, against direct formulas.

References: numpy's ``np.cov`` (with ``fweights``: integer frequency
weights) and ``np.average`` for weighted means and covariances, scipy's
``scipy.stats.kurtosis`` (Fisher, population) for the fourth moment; the
third-order co-moment is checked against its definition summed directly.
"""

import itertools
import warnings

import numpy as np
import pytest
import scipy.stats

from splitlift.moments import SliceScheme
from splitlift.sufficient_statistics import (
    MomentStatistics,
    ScalarMoments,
    _unshifted_slice_scatters,
    _unshifted_statistics,
    block_statistics,
    merge_all,
)

RNG = np.random.default_rng(20261203)
X = RNG.standard_normal((900, 4)) @ RNG.standard_normal((4, 4)) + [3.0, -1.0, 0.5, 10.0]
Y = X[:, 0] - X[:, 1] ** 2 + 0.3 * RNG.standard_normal(900)
W = RNG.integers(0, 4, 900).astype(float)
EDGES = np.quantile(Y, [0.25, 0.5, 0.75])
SCHEME = SliceScheme("count", edges=EDGES)


def statistics(rows, weights=None, **kinds):
    return block_statistics(X[rows], Y[rows], None if weights is None else weights[rows],
                            scheme=SCHEME, **kinds)


def assert_same(a: MomentStatistics, b: MomentStatistics, rtol=1e-12):
    def close(u, v):
        np.testing.assert_allclose(u, v, rtol=rtol, atol=rtol * max(1.0, np.abs(v).max()))

    close(a.mean, b.mean)
    close(a.covariance, b.covariance)
    close(a.slices.weight, b.slices.weight)
    close(a.deviations(a.slices), b.deviations(b.slices))
    if a.slices.scatter is not None:
        close(a.slices.scatter, b.slices.scatter)
    if a.response is not None:
        close(a.response.cross, b.response.cross)
        close(a.response.weighted_scatter, b.response.weighted_scatter)


@pytest.mark.parametrize("kinds", [{}, {"slice_scatter": True}, {"response": True}],
                         ids=["SIR", "SAVE", "pHd"])
def test_blocks_merged_in_any_order_equal_one_block(kinds):
    whole = statistics(np.arange(900), **kinds)
    blocks = [statistics(rows, **kinds) for rows in np.array_split(RNG.permutation(900), 5)]
    for order in itertools.islice(itertools.permutations(range(5)), 0, 120, 17):
        sequential = blocks[order[0]]
        for index in order[1:]:
            sequential = sequential.merge(blocks[index])
        assert_same(sequential, whole)
    assert_same(merge_all(blocks), whole)  # the balanced tree Dask uses


def test_weighted_moments_match_numpy_frequency_weights():
    stats = statistics(np.arange(900), W, slice_scatter=True, response=True)
    kept = W > 0
    # numpy reference: np.cov with fweights, divisor sum(w) (bias=True)
    np.testing.assert_allclose(stats.covariance, np.cov(X.T, fweights=W.astype(int), bias=True),
                               rtol=1e-12)
    np.testing.assert_allclose(stats.mean, np.average(X, axis=0, weights=W), rtol=1e-12)
    labels = SCHEME.labels(Y)
    for h in range(SCHEME.n_slices):
        rows = kept & (labels == h)
        np.testing.assert_allclose(stats.slices.absolute_mean[h],
                                   np.average(X[rows], axis=0, weights=W[rows]), rtol=1e-12)
        np.testing.assert_allclose(stats.slices.scatter[h] / W[rows].sum(),
                                   np.cov(X[rows].T, fweights=W[rows].astype(int), bias=True),
                                   rtol=1e-10, atol=1e-12)
    assert stats.n_rows == int(kept.sum()) and stats.weight == W.sum()


def test_integer_weights_equal_repeated_rows():
    weighted = statistics(np.arange(900), W, slice_scatter=True, response=True)
    repeated = block_statistics(X.repeat(W.astype(int), axis=0), Y.repeat(W.astype(int)),
                                scheme=SCHEME, slice_scatter=True, response=True)
    assert_same(weighted, repeated, rtol=1e-11)


def test_response_co_moments_follow_their_definition():
    blocks = [statistics(rows, response=True) for rows in np.array_split(np.arange(900), 7)]
    merged = merge_all(blocks)
    e = Y - Y.mean()
    u = X - X.mean(axis=0)
    np.testing.assert_allclose(merged.response.cross, u.T @ e, rtol=1e-11)
    direct = np.einsum("i,ij,ik->jk", e, u, u)  # Σ e u u^T, summed directly
    np.testing.assert_allclose(merged.response.weighted_scatter, direct, rtol=1e-11)


def test_scalar_moments_merge_matches_scipy_kurtosis():
    values = RNG.standard_exponential(5000) * 7.0 + 100.0
    parts = [ScalarMoments.of(chunk) for chunk in np.array_split(values, 9)]
    merged = parts[0]
    for part in parts[1:]:
        merged = merged.merge(part)
    # scipy.stats.kurtosis: Fisher's excess kurtosis, population (biased) form
    assert merged.excess_kurtosis() == pytest.approx(scipy.stats.kurtosis(values), rel=1e-10)
    assert merged.variance == pytest.approx(values.var(), rel=1e-12)


def test_a_large_offset_does_not_cancel():
    # X + 1e8: raw sums would keep about 0 correct digits of a unit variance;
    # centred blocks and shifted means keep about 8 (the data's own precision)
    offset = X - X.mean(axis=0) + 1e8
    reference = block_statistics(X - X.mean(axis=0), Y, scheme=SCHEME, slice_scatter=True)
    merged = merge_all([block_statistics(offset[rows], Y[rows], scheme=SCHEME, slice_scatter=True)
                        for rows in np.array_split(np.arange(900), 6)])
    np.testing.assert_allclose(merged.covariance, reference.covariance, rtol=1e-6)
    np.testing.assert_allclose(merged.deviations(merged.slices),
                               reference.deviations(reference.slices), rtol=1e-6, atol=1e-7)


def test_float32_blocks_accumulate_in_float64():
    single = block_statistics(X.astype(np.float32), Y, scheme=SCHEME)
    assert single.covariance.dtype == np.float64
    double = block_statistics(X.astype(np.float32).astype(np.float64), Y, scheme=SCHEME)
    np.testing.assert_allclose(single.covariance, double.covariance, rtol=1e-12)


def test_value_slices_merge_by_union_of_values():
    labels = np.array(["a", "b", "c"])[RNG.integers(0, 3, 900)]
    parts = []  # the first batch never saw "c"
    for rows in (np.flatnonzero(labels[:450] != "c"), 450 + np.arange(450)):
        values = np.unique(labels[rows])
        parts.append(block_statistics(X[rows], labels[rows],
                                      scheme=SliceScheme("value", values=values)))
    merged = parts[0].merge(parts[1])
    assert merged.scheme.values.tolist() == ["a", "b", "c"]
    rows = np.concatenate([np.flatnonzero(labels[:450] != "c"), 450 + np.arange(450)])
    whole = block_statistics(X[rows], labels[rows],
                             scheme=SliceScheme("value", values=np.array(["a", "b", "c"])))
    np.testing.assert_allclose(merged.slices.weight, whole.slices.weight)
    np.testing.assert_allclose(merged.deviations(merged.slices), whole.deviations(whole.slices),
                               rtol=1e-12, atol=1e-14)


def test_incompatible_statistics_refuse_to_merge():
    a = statistics(np.arange(300))
    other_edges = block_statistics(X[300:], Y[300:], scheme=SliceScheme("count", edges=EDGES[:2]))
    with pytest.raises(ValueError, match="different slice edges"):
        a.merge(other_edges)
    with pytest.raises(ValueError, match="4 and 3 features"):
        a.merge(block_statistics(X[300:, :3], Y[300:], scheme=SCHEME))
    with pytest.raises(ValueError, match="different methods"):
        a.merge(statistics(np.arange(300, 900), response=True))


# Centred inputs with small offsets: no column's mean dominates its spread, so
# unweighted blocks take the one-product path (_unshifted_statistics).
SMALL_OFFSET = X - X.mean(axis=0) + 0.3 * X.std(axis=0)


@pytest.mark.parametrize("scheme", [SCHEME, None], ids=["sliced", "unsliced"])
def test_one_product_path_matches_numpy_and_the_general_path(scheme):
    assert _unshifted_statistics(SMALL_OFFSET, Y, scheme, None, True) is not None
    fast = block_statistics(SMALL_OFFSET, Y, scheme=scheme, response=True)
    # unit weights take the general (shifted, chunked) path
    general = block_statistics(SMALL_OFFSET, Y, np.ones(900), scheme=scheme, response=True)
    # numpy reference: np.cov (bias=True) and the co-moments' definition summed directly
    np.testing.assert_allclose(fast.covariance, np.cov(SMALL_OFFSET.T, bias=True), rtol=1e-12)
    np.testing.assert_allclose(fast.mean, SMALL_OFFSET.mean(axis=0), rtol=1e-12)
    e, u = Y - Y.mean(), SMALL_OFFSET - SMALL_OFFSET.mean(axis=0)
    np.testing.assert_allclose(fast.response.cross, u.T @ e, rtol=1e-11)
    np.testing.assert_allclose(fast.response.weighted_scatter,
                               np.einsum("i,ij,ik->jk", e, u, u), rtol=1e-11)
    if scheme is not None:
        labels = scheme.labels(Y)
        for h in range(scheme.n_slices):
            np.testing.assert_allclose(fast.slices.absolute_mean[h],
                                       SMALL_OFFSET[labels == h].mean(axis=0), rtol=1e-12)
        np.testing.assert_allclose(fast.deviations(fast.slices),
                                   general.deviations(general.slices), rtol=1e-11, atol=1e-12)
    np.testing.assert_allclose(fast.covariance, general.covariance, rtol=1e-12)
    np.testing.assert_allclose(fast.response.weighted_scatter, general.response.weighted_scatter,
                               rtol=1e-11)


def test_save_slice_scatters_path_matches_numpy_and_the_general_path():
    assert _unshifted_slice_scatters(SMALL_OFFSET, Y, SCHEME, None, False) is not None
    fast = block_statistics(SMALL_OFFSET, Y, scheme=SCHEME, slice_scatter=True)
    general = block_statistics(SMALL_OFFSET, Y, np.ones(900), scheme=SCHEME, slice_scatter=True)
    assert_same(fast, general, rtol=1e-11)
    # numpy reference: np.cov (bias=True) overall and within each slice
    np.testing.assert_allclose(fast.covariance, np.cov(SMALL_OFFSET.T, bias=True), rtol=1e-12)
    labels = SCHEME.labels(Y)
    for h in range(SCHEME.n_slices):
        rows = labels == h
        np.testing.assert_allclose(fast.slices.scatter[h] / rows.sum(),
                                   np.cov(SMALL_OFFSET[rows].T, bias=True), rtol=1e-11)
    assert _unshifted_slice_scatters(X, Y, SCHEME, None, False) is None  # mean 10, sd ~2


def test_large_means_or_extreme_columns_leave_the_one_product_path():
    assert _unshifted_statistics(X, Y, SCHEME, None, False) is None  # column 4: mean 10, sd ~2
    tiny = SMALL_OFFSET * 2.0**-500  # squares underflow the safe range
    assert _unshifted_statistics(tiny, Y, SCHEME, None, False) is None
    huge = SMALL_OFFSET * 2.0**600  # squares overflow: detected after the product, quietly
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert _unshifted_slice_scatters(huge, Y, SCHEME, None, False) is None
        assert _unshifted_statistics(huge, Y, SCHEME, None, False) is None
        assert _unshifted_statistics(huge, Y, None, None, True) is None
    save = block_statistics(huge, Y, scheme=SCHEME, slice_scatter=True)
    unit = save.column_scale * 2.0**-600
    scale = np.outer(unit, unit)
    np.testing.assert_allclose(save.covariance * scale, np.cov(SMALL_OFFSET.T, bias=True),
                               rtol=1e-12)
    stats = block_statistics(tiny, Y, scheme=SCHEME)  # moments of tiny / column_scale
    scale = np.outer(stats.column_scale, stats.column_scale) * 2.0**1000
    np.testing.assert_allclose(stats.covariance * scale, np.cov(SMALL_OFFSET.T, bias=True),
                               rtol=1e-12)


@pytest.mark.parametrize("part_rows", [16, 1 << 16])
def test_compiled_products_match_numpy_over_any_number_of_parts(monkeypatch, part_rows):
    # reference: numpy's einsum and per-group means and centred products
    import splitlift._moment_kernels as kernels

    monkeypatch.setattr(kernels, "_PART_ROWS", part_rows)  # 16: eight parts, in threads
    scale = 8.0
    centre = float(np.mean(Y / scale))
    sums, cross, products, powers = kernels.response_products(X, Y, scale, centre)
    c = Y / scale - centre
    e = c * scale
    np.testing.assert_allclose(sums, X.sum(axis=0), rtol=1e-12)
    np.testing.assert_allclose(cross, e @ X, rtol=1e-11, atol=1e-9)
    np.testing.assert_allclose(products, np.einsum("i,ij,ik->jk", e, X, X), rtol=1e-11,
                               atol=1e-9)
    np.testing.assert_allclose(powers, [c.sum(), c @ c, c**2 @ c, c**2 @ c**2], rtol=1e-11,
                               atol=1e-9)
    labels = np.arange(X.shape[0]) % 3
    shifted = X + 1e6  # means a million spreads away: no digit may be lost to them
    counts, means, scatters = kernels.grouped_scatters(shifted, labels, 4)
    np.testing.assert_array_equal(counts, [np.sum(labels == g) for g in range(3)] + [0])
    for group in range(3):
        rows = shifted[labels == group]
        centred = rows - rows.mean(axis=0)
        np.testing.assert_allclose(means[group], rows.mean(axis=0), rtol=1e-14)
        np.testing.assert_allclose(scatters[group], centred.T @ centred, rtol=1e-9,
                                   atol=1e-9 * np.abs(centred.T @ centred).max())
    assert not means[3].any() and not scatters[3].any()  # an empty group stays zero


def test_compiled_products_do_not_depend_on_the_number_of_cores(monkeypatch):
    import splitlift._moment_kernels as kernels

    monkeypatch.setattr(kernels, "_PART_ROWS", 16)
    labels = np.arange(X.shape[0]) % 5
    threaded = kernels.grouped_scatters(X, labels, 5)
    monkeypatch.setattr(kernels, "cpu_count", lambda: 1)
    for left, right in zip(threaded, kernels.grouped_scatters(X, labels, 5), strict=True):
        np.testing.assert_array_equal(left, right)


def test_large_means_skip_the_one_product_path_without_computing_it(monkeypatch):
    import splitlift.sufficient_statistics as module

    def refuse(*arguments):
        raise AssertionError("the one-product path was tried on data with a dominant mean")

    monkeypatch.setattr(module, "_unshifted_statistics", refuse)
    monkeypatch.setattr(module, "_unshifted_slice_scatters", refuse)
    stats = block_statistics(X, Y, scheme=SCHEME, response=True)  # column 4: mean 10, sd ~2
    np.testing.assert_allclose(stats.covariance, np.cov(X.T, bias=True), rtol=1e-12)
    block_statistics(X, Y, scheme=SCHEME, slice_scatter=True)


def test_thin_product_runs_on_one_blas_thread_and_restores_the_limits():
    # X^T X of a thin X runs on one BLAS thread (threadpoolctl, the reference for the
    # thread counts), inside the product only; the statistics match those computed with
    # BLAS's default threads to rounding (1e-12; only the order of BLAS's sums may differ).
    from contextlib import nullcontext

    from threadpoolctl import threadpool_info

    from splitlift import sufficient_statistics
    from splitlift._blas import one_blas_thread

    seen = []

    def spying():
        context = one_blas_thread()
        seen.append([pool["num_threads"] for pool in threadpool_info()
                     if pool["user_api"] == "blas"])
        return context

    rng = np.random.default_rng(21)
    X = rng.normal(size=(5000, 6))
    y = X[:, 0] ** 2 + rng.normal(size=5000)
    sufficient_statistics.one_blas_thread = nullcontext
    try:
        default = sufficient_statistics._unshifted_statistics(X, y, None, None, True)
        before = [pool["num_threads"] for pool in threadpool_info()
                  if pool["user_api"] == "blas"]
        sufficient_statistics.one_blas_thread = spying
        limited = sufficient_statistics._unshifted_statistics(X, y, None, None, True)
    finally:
        sufficient_statistics.one_blas_thread = one_blas_thread
    assert seen and all(count == 1 for counts in seen for count in counts)
    assert [pool["num_threads"] for pool in threadpool_info()
            if pool["user_api"] == "blas"] == before
    np.testing.assert_allclose(limited.inputs.scatter, default.inputs.scatter, rtol=1e-12)
    np.testing.assert_allclose(limited.response.weighted_scatter,
                               default.response.weighted_scatter, rtol=1e-12)
