"""Dask input on a real local cluster: fits equal in-memory fits, transforms stay lazy.

A ``distributed.LocalCluster`` with two worker processes is started by the
``dask_client`` fixture (tests/conftest.py) and shut down after the session;
nothing is mocked. Angles are measured with
``scipy.linalg.subspace_angles``; the agreement threshold is 1e-10 rad.
"""

import dask.array as da  # the [dask] extra is part of the test extra: never skipped
import dask.dataframe as dd
import numpy as np
import pandas as pd
import pytest
from scipy.linalg import subspace_angles

import splitlift as sl
from splitlift import dask_support

TOLERANCE_RAD = 1e-10
RNG = np.random.default_rng(20261207)
N, D = 12_000, 5
X = RNG.standard_normal((N, D)) @ RNG.standard_normal((D, D)) + 3.0
T = X - X.mean(axis=0)
Y = T[:, 0] + 0.3 * T[:, 1] ** 2 + 0.1 * RNG.standard_normal(N)
W = RNG.integers(0, 3, N).astype(float)
CHUNKS = (2500, 3500, 1000, 5000)  # uneven on purpose
NAMES = [f"sensor_{i}" for i in range(D)]


@pytest.fixture
def client(dask_client):
    return dask_client


def as_dask(values, chunks=CHUNKS):
    return da.from_array(values, chunks=(chunks,) + values.shape[1:])


def frame():
    table = pd.DataFrame(X, columns=NAMES).assign(target=Y, weight=W)
    return dd.from_pandas(table, npartitions=4)


def angle(a, b) -> float:
    return float(subspace_angles(a.basis_, b.basis_).max())


MOMENT_METHODS = {
    "SIR": lambda **kw: sl.SlicedInverse(dim=2, **kw),
    "SAVE": lambda **kw: sl.SlicedAverageVariance(dim=2, **kw),
    "pHd": lambda **kw: sl.HessianDirections(dim=2, **kw),
    "pHd-residuals": lambda **kw: sl.HessianDirections(dim=2, residuals=True, **kw),
}


@pytest.mark.parametrize("name", sorted(MOMENT_METHODS))
def test_dask_array_fit_equals_the_in_memory_fit(client, name):
    lazy = MOMENT_METHODS[name]().fit(as_dask(X), as_dask(Y))
    memory = MOMENT_METHODS[name]().fit(X, Y)  # small n: slices computed exactly, alike
    assert angle(lazy, memory) < TOLERANCE_RAD
    np.testing.assert_allclose(lazy.eigenvalues_, memory.eigenvalues_, rtol=1e-9, atol=1e-12)
    if name in ("SIR", "SAVE"):
        np.testing.assert_array_equal(lazy.slice_edges_, memory.slice_edges_)
    assert lazy.row_sample_ is None and lazy.n_samples_seen_ == N


def test_weighted_dask_fit_equals_the_weighted_in_memory_fit(client):
    lazy = sl.SlicedAverageVariance(dim=2).fit(as_dask(X), as_dask(Y), sample_weight=as_dask(W))
    memory = sl.SlicedAverageVariance(dim=2).fit(X, Y, sample_weight=W)
    assert angle(lazy, memory) < TOLERANCE_RAD


def test_approximate_slice_edges_for_a_long_response(client, monkeypatch):
    # above EXACT_SLICING_ROWS the edges come from Dask's approximate percentiles
    monkeypatch.setattr(dask_support, "EXACT_SLICING_ROWS", 1000)
    for weights in (None, as_dask(W)):
        lazy = sl.SlicedInverse(dim=2).fit(as_dask(X), as_dask(Y), sample_weight=weights)
        exact = sl.SlicedInverse(dim=2).fit(X, Y, sample_weight=None if weights is None else W)
        assert lazy.n_slices_ == 10
        # near the exact quantiles (sample quantile error ~ 1/sqrt(n) on a unit scale)
        np.testing.assert_allclose(lazy.slice_edges_, exact.slice_edges_, atol=0.05)
        same_slices = sl.SlicedInverse(dim=2, slice_edges=lazy.slice_edges_).fit(
            X, Y, sample_weight=None if weights is None else W)
        assert angle(lazy, same_slices) < TOLERANCE_RAD


def test_class_labels_on_dask_are_sliced_by_value(client):
    labels = np.where(Y > 1.0, "high", np.where(Y < -1.0, "low", "mid"))
    lazy = sl.SlicedInverse(dim=2).fit(as_dask(X), as_dask(labels))
    memory = sl.SlicedInverse(dim=2).fit(X, labels)
    assert lazy.n_slices_ == 3 and angle(lazy, memory) < TOLERANCE_RAD


def test_dask_dataframe_keeps_names_through_fit_and_transform(client):
    table = frame()
    lift = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(table[NAMES], table["target"],
                                                         sample_weight=table["weight"])
    assert list(lift.feature_names_in_) == NAMES
    out = lift.transform(table[NAMES])
    assert isinstance(out, dd.DataFrame)
    assert list(out.columns) == list(lift.get_feature_names_out())
    memory = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(pd.DataFrame(X, columns=NAMES), Y,
                                                           sample_weight=W)
    expected = memory.transform(pd.DataFrame(X, columns=NAMES))
    np.testing.assert_allclose(out.compute().to_numpy(), expected, atol=1e-9)
    assert lift.n_samples_fit_ == memory.n_samples_fit_ == np.count_nonzero(W)


def _marked_block(block, folder, block_info=None):
    """Identity on a block that leaves a file behind: evidence that it was computed."""
    import pathlib

    pathlib.Path(folder, f"block-{block_info[0]['chunk-location'][0]}").touch()
    return block


def test_transform_stays_lazy_until_asked(client, tmp_path):
    lift = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(as_dask(X), as_dask(Y))
    marked = as_dask(X).map_blocks(_marked_block, str(tmp_path), dtype=float)
    lifted = lift.transform(marked)
    projected = lift.estimator_.transform(marked)
    assert isinstance(lifted, da.Array) and isinstance(projected, da.Array)
    assert list(tmp_path.iterdir()) == []  # no block computed yet
    result = lifted.compute()
    assert len(list(tmp_path.iterdir())) == len(CHUNKS)
    np.testing.assert_allclose(result, lift.transform(X), atol=1e-10)


def test_float32_dask_input_stays_float32(client):
    lift = sl.DirectionLift(sl.SlicedInverse(dim=2)).fit(X, Y)
    out = lift.transform(as_dask(X.astype(np.float32)))
    assert out.dtype == np.float32 and out.compute().dtype == np.float32
    applied = sl.ApplyLift(lift.lift_).fit(X).transform(as_dask(X.astype(np.float32)))
    assert applied.compute().dtype == np.float32


def test_gradient_methods_fit_on_a_recorded_row_sample(client):
    lift = sl.DirectionLift(sl.GradientOuterProduct(dim=2, sample_rows=1500),
                            random_state=4).fit(as_dask(X), as_dask(Y))
    sample = lift.estimator_.row_sample_
    assert sample == {"rows_total": N, "rows_used": 1500, "random_state": 4}
    assert "random sample of 1500 of the 12000 rows" in str(lift.report())
    # the sample is documented: uniform rows without replacement, drawn by the seed
    rows = np.sort(np.random.RandomState(4).choice(N, size=1500, replace=False))
    standardised = (X - lift.mean_) / lift.scale_
    memory = sl.GradientOuterProduct(dim=2, random_state=4).fit(standardised[rows], Y[rows])
    assert subspace_angles(lift.estimator_.basis_, memory.basis_).max() < 1e-8


def test_forests_fit_through_the_dask_joblib_backend_match_the_default(client):
    # the recipe of docs/guide.md: a lift, then a scikit-learn forest whose trees
    # are fitted on the cluster through joblib's Dask backend
    import joblib
    from sklearn.ensemble import RandomForestRegressor
    from sklearn.pipeline import make_pipeline

    def model():
        return make_pipeline(sl.DirectionLift(sl.SlicedInverse(dim=2)),
                             RandomForestRegressor(n_estimators=16, n_jobs=-1, random_state=0))

    local = model().fit(X[:3000], Y[:3000])
    with joblib.parallel_backend("dask"):
        on_cluster = model().fit(X[:3000], Y[:3000])
        predicted_on_cluster = on_cluster.predict(X[3000:4000])
    # the same trees, split for split; predictions agree up to the order in which
    # the trees' outputs are summed
    for ours, theirs in zip(on_cluster[-1].estimators_, local[-1].estimators_, strict=True):
        np.testing.assert_array_equal(ours.tree_.threshold, theirs.tree_.threshold)
        np.testing.assert_array_equal(ours.tree_.feature, theirs.tree_.feature)
    np.testing.assert_allclose(predicted_on_cluster, local.predict(X[3000:4000]), rtol=1e-12)


def test_the_stit_forest_fit_through_the_dask_joblib_backend_matches_the_default(client):
    # the same recipe for the project's own forest: its trees are grown in batches on the
    # workers, from seeds drawn before any batch starts, so the backend changes nothing
    import joblib
    from sklearn.pipeline import make_pipeline

    from splitlift.forest import StitForestRegressor

    def model():
        return make_pipeline(sl.DirectionLift(sl.SlicedInverse(dim=2)),
                             StitForestRegressor(n_trees=8, n_jobs=-1, random_state=0))

    weights = np.arange(3000) % 3  # weights travel with the rows (a third are zero)
    local = model().fit(X[:3000], Y[:3000], stitforestregressor__sample_weight=weights)
    with joblib.parallel_backend("dask"):
        from splitlift.forest._forest import _joblib_would_use_threads

        assert not _joblib_would_use_threads()  # the batches go to the workers
        on_cluster = model().fit(X[:3000], Y[:3000],
                                 stitforestregressor__sample_weight=weights)
        predicted_on_cluster = on_cluster.predict(X[3000:4000])
    assert on_cluster[-1].lifetime_ == local[-1].lifetime_
    np.testing.assert_array_equal(predicted_on_cluster, local.predict(X[3000:4000]))


BAD_INPUT = [
    ("chunks of y differ from X", lambda: sl.SlicedInverse().fit(
        as_dask(X), as_dask(Y, (6000, 6000))), r"chunked differently.*rechunk"),
    ("negative weight in a chunk", lambda: sl.SlicedInverse().fit(
        as_dask(X), as_dask(Y), sample_weight=as_dask(np.where(np.arange(N) == 6500, -1.0, 1.0))),
     r"sample_weight has negative.*row chunk 2"),
    ("all weights zero", lambda: sl.SlicedInverse(slice_edges=[0.0]).fit(
        as_dask(X), as_dask(Y), sample_weight=as_dask(np.zeros(N))), "every sample weight is zero"),
    ("nan in a chunk of X", lambda: sl.HessianDirections().fit(
        as_dask(np.where(np.arange(N)[:, None] == 9000, np.nan, X)), as_dask(Y)),
     r"NaN or infinite values \(row chunk 3, counting from 0\)"),
    ("edges leave a slice empty", lambda: sl.SlicedInverse(dim=1, slice_edges=[0.0, 1e6]).fit(
        as_dask(X), as_dask(Y)), r"slice edges leave slice 2 \(y in \[1e\+06, inf\)\) with 0"),
    ("text column", lambda: sl.SlicedInverse().fit(
        frame().assign(site="north")[NAMES + ["site"]], frame()["target"]),
     r"feature column\(s\) \['site'\] are not numeric"),
    ("y missing", lambda: sl.SlicedInverse().fit(as_dask(X), None), "y is required"),
    ("partial_fit of a Dask batch", lambda: sl.SlicedInverse().partial_fit(
        as_dask(X), as_dask(Y)), "partial_fit takes in-memory batches"),
    ("transform with other columns", lambda: sl.DirectionLift().fit(X, Y).transform(
        as_dask(X[:, :4])), "X has 4 features, but DirectionLift is expecting 5"),
]


@pytest.mark.parametrize("case", BAD_INPUT, ids=[case[0] for case in BAD_INPUT])
def test_bad_dask_input_gets_a_clear_error(client, case):
    _, action, words = case
    with pytest.raises(ValueError, match=words):
        action()
