"""Growth from data: the stale-box construction has the law of the data-extent Mondrian tree."""

import pickle
from itertools import pairwise

import numpy as np
import pytest
from scipy import stats
from sklearn.ensemble import ExtraTreesRegressor

from splitlift.forest import StitForestRegressor
from splitlift.forest._compiled import (
    EXACT_EXTENT_BELOW,
    _extents,
    squared_errors_over_lifetimes,
)
from splitlift.forest._tree import NodeStore, prune, prune_all


def _cells_near_the_root(tree, X, max_depth):
    """(node, member mask) for every internal node down to ``max_depth``, by following cuts."""
    cells, pending = [], [(0, np.ones(len(X), bool), 0)]
    while pending:
        node, members, depth = pending.pop()
        if tree.direction[node] < 0 or depth > max_depth:
            continue
        cells.append((node, members))
        goes_left = X[:, tree.direction[node]] <= tree.offset[node]
        pending.append((tree.left[node], members & goes_left, depth + 1))
        pending.append((tree.right[node], members & ~goes_left, depth + 1))
    return cells


@pytest.mark.parametrize("scales", [[1.0, 0.3, 2.0], [1.0, 0.3, 2.0, 0.6, 1.4]])
def test_cut_times_directions_and_offsets_follow_the_extent_of_the_points(scales):
    # Mondrian process on the extent of a cell's points (Roy & Teh 2008; Lakshminarayanan,
    # Roy & Teh 2014): the cut comes after Exp(Σ_k w_k) from the cell's birth, along k with
    # probability w_k / Σ w, at a uniform offset in the points' range along k; w_k is the
    # points' extent. The compiled growth draws from stale, larger boxes and tightens them
    # when a cut misses the points; this checks that the result is still that law, on
    # cells large enough to use the stale boxes. Synthetic uniform points; scipy.stats as
    # the reference laws; tests at level 1e-3. Three directions measure extents one at a
    # time, five four at a time.
    rng = np.random.default_rng(0)
    scales = np.array(scales)
    X = rng.uniform(size=(300, scales.size)) * scales
    forest = StitForestRegressor(lifetime=np.inf, n_trees=600, random_state=1)
    forest.fit(X, rng.normal(size=300))
    waits, offsets, chosen, probabilities = [], [], [], []
    for tree in forest.trees_:
        births = tree.birth_time
        for node, members in _cells_near_the_root(tree, X, max_depth=3):
            if members.sum() <= EXACT_EXTENT_BELOW:
                continue
            points = X[members]
            low, widths = points.min(axis=0), np.ptp(points, axis=0)
            k = tree.direction[node]
            waits.append((tree.split_time[node] - births[node]) * widths.sum())
            offsets.append((tree.offset[node] - low[k]) / widths[k])
            chosen.append(k)
            probabilities.append(widths / widths.sum())
    assert len(waits) > 3000
    assert stats.kstest(waits, stats.expon().cdf).pvalue > 1e-3
    assert stats.kstest(offsets, stats.uniform().cdf).pvalue > 1e-3
    # direction counts against their expectation: sums of independent Bernoulli draws,
    # each standardised count within 4.5 standard deviations
    probabilities = np.array(probabilities)
    observed = np.bincount(chosen, minlength=scales.size)
    expected = probabilities.sum(axis=0)
    spread = np.sqrt((probabilities * (1 - probabilities)).sum(axis=0))
    assert np.all(np.abs(observed - expected) < 4.5 * spread)


def test_small_cells_measured_exactly_follow_the_same_law():
    # Cells of at most EXACT_EXTENT_BELOW points measure their extent at once; the same
    # Mondrian law holds for them (here the whole data set is one such cell).
    rng = np.random.default_rng(2)
    X = rng.uniform(size=(EXACT_EXTENT_BELOW, 2))
    forest = StitForestRegressor(lifetime=np.inf, n_trees=3000, random_state=3)
    forest.fit(X, rng.normal(size=len(X)))
    widths = np.ptp(X, axis=0)
    roots = [(tree.split_time[0], tree.direction[0], tree.offset[0]) for tree in forest.trees_]
    times, directions, cuts = (np.array(values) for values in zip(*roots, strict=True))
    assert stats.kstest(times * widths.sum(), stats.expon().cdf).pvalue > 1e-3
    share = np.mean(directions == 0)
    expected = widths[0] / widths.sum()
    assert abs(share - expected) < 4.5 * np.sqrt(expected * (1 - expected) / len(times))
    along_first = directions == 0
    relative = (cuts[along_first] - X[:, 0].min()) / widths[0]
    assert stats.kstest(relative, stats.uniform().cdf).pvalue > 1e-3


@pytest.mark.parametrize("n_points", [2, 5, EXACT_EXTENT_BELOW])
def test_exact_cells_with_many_directions_follow_the_law(n_points):
    # Seven directions: the exact extents run four directions at a time and the rest one
    # at a time; both must give each direction its width. The root is one exact cell:
    # its cut waits Exp(Σ w) (scipy.stats reference), picks k with probability w_k / Σ w
    # (chi-square goodness of fit, level 1e-3) at a uniform offset within the points.
    rng = np.random.default_rng(12)
    scales = np.array([1.0, 0.2, 3.0, 0.5, 1.5, 0.1, 2.0])
    X = rng.uniform(size=(n_points, scales.size)) * scales
    forest = StitForestRegressor(lifetime=np.inf, n_trees=4000, random_state=13)
    forest.fit(X, rng.normal(size=n_points))
    widths = np.ptp(X, axis=0)
    roots = [(tree.split_time[0], tree.direction[0], tree.offset[0]) for tree in forest.trees_]
    times, directions, cuts = (np.array(values) for values in zip(*roots, strict=True))
    assert stats.kstest(times * widths.sum(), stats.expon().cdf).pvalue > 1e-3
    observed = np.bincount(directions, minlength=scales.size)
    expected = len(times) * widths / widths.sum()
    assert stats.chisquare(observed, expected).pvalue > 1e-3
    relative = (cuts - X.min(axis=0)[directions]) / widths[directions]
    assert stats.kstest(relative, stats.uniform().cdf).pvalue > 1e-3


@pytest.mark.parametrize("m", [1, 3, 4, 5, 8, 10, 16, 17, 30, 33])
def test_cell_extents_match_numpy(m):
    # The extents along every direction of a cell's points (its range of positions in one
    # row of the orders), against numpy's min, max and sum; m >= 4 runs in vector
    # registers, sixteen directions a pass, the last register overlapping the one before.
    rng = np.random.default_rng(20 + m)
    rows = rng.normal(size=(40, m))
    orders = np.stack([rng.permutation(40), rng.permutation(40)]).astype(np.uint32)
    lows, highs, widths = np.empty(m), np.empty(m), np.empty(m)
    for buffer, start, end in [(0, 0, 40), (1, 7, 8), (1, 3, 22), (0, 39, 40)]:
        rate = _extents(rows, orders, buffer, start, end, lows, highs, widths)
        members = rows[orders[buffer, start:end]]
        np.testing.assert_array_equal(lows, members.min(axis=0))
        np.testing.assert_array_equal(highs, members.max(axis=0))
        np.testing.assert_array_equal(widths, highs - lows)
        np.testing.assert_allclose(rate, widths.sum(), rtol=1e-14, atol=0)


def test_squared_errors_over_lifetimes_match_numpy():
    # The compiled pass against numpy's cumulative sum over the grid, mean, residual,
    # square and weighted sum over outputs and points.
    rng = np.random.default_rng(14)
    differences = rng.normal(size=(3, 31, 257))
    targets = rng.normal(size=(257, 3))
    weights = rng.uniform(0.5, 2.0, size=257)
    residuals = np.cumsum(differences, axis=1) / 7 - targets.T[:, None, :]
    expected = (weights * residuals**2).sum(axis=(0, 2))
    errors = squared_errors_over_lifetimes(differences, targets, weights, 7)
    np.testing.assert_allclose(errors, expected, rtol=1e-12)


def test_results_do_not_depend_on_n_jobs_for_grown_trees():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(3000, 4))
    y = X[:, 0] + rng.normal(size=3000)
    fits = [StitForestRegressor(lifetime=np.inf, n_trees=9, random_state=5, n_jobs=n_jobs)
            .fit(X, y) for n_jobs in (1, 2)]
    X_new = rng.normal(size=(5000, 4))
    np.testing.assert_array_equal(fits[0].predict(X_new), fits[1].predict(X_new))
    np.testing.assert_array_equal(fits[0].apply(X_new), fits[1].apply(X_new))


def test_batches_run_on_plain_threads_unless_the_caller_configures_a_backend(monkeypatch):
    # With joblib's default threads, batches run on a plain thread pool (joblib's result
    # loop polls in 10 ms sleeps); a backend the caller configures (processes here, Dask
    # in tests/test_dask.py) still receives them through joblib, with the same trees.
    import joblib

    from splitlift.forest import _forest

    rng = np.random.default_rng(8)
    X, y = rng.normal(size=(400, 3)), rng.normal(size=400)
    calls = []
    original = _forest.Parallel

    def counted(*args, **kwargs):
        calls.append(kwargs.get("prefer"))
        return original(*args, **kwargs)

    monkeypatch.setattr(_forest, "Parallel", counted)
    # lifetime="auto" also scores its lifetimes in batches (of 8 trees: 2 batches here)
    default, default_auto = (
        StitForestRegressor(lifetime=lifetime, n_trees=12, n_jobs=2, random_state=1).fit(X, y)
        for lifetime in (np.inf, "auto"))
    assert calls == []
    with joblib.parallel_config(backend="loky"):
        assert not _forest._joblib_would_use_threads()
        configured, configured_auto = (
            StitForestRegressor(lifetime=lifetime, n_trees=12, n_jobs=2, random_state=1)
            .fit(X, y) for lifetime in (np.inf, "auto"))
    assert calls == ["threads", "threads", "threads"]  # growth; growth and scoring
    np.testing.assert_array_equal(default.apply(X), configured.apply(X))
    np.testing.assert_array_equal(default_auto.lifetime_path_, configured_auto.lifetime_path_)
    np.testing.assert_array_equal(default_auto.apply(X), configured_auto.apply(X))


@pytest.mark.parametrize("n_items, n_jobs", [(100, 1), (100, 2), (7, 3), (1, 4), (0, 2)])
def test_batches_shrink_to_single_trees_and_keep_the_order(n_items, n_jobs):
    # guided self-scheduling (Polychronopoulos & Kuck 1987): each batch takes a
    # 1 / (2 n_jobs) share of what is left, rounded up
    from splitlift.forest._forest import _shrinking_batches

    batches = _shrinking_batches(list(range(n_items)), n_jobs)
    assert [item for batch in batches for item in batch] == list(range(n_items))
    sizes = [len(batch) for batch in batches]
    assert all(size >= 1 for size in sizes) and sizes == sorted(sizes, reverse=True)
    left = n_items
    for size in sizes:
        assert size == -(-left // (2 * n_jobs))
        left -= size
    if n_items >= 2 * n_jobs:
        assert sizes[-1] == 1
    if (n_items, n_jobs) == (100, 2):
        assert sizes == [25, 19, 14, 11, 8, 6, 5, 3, 3, 2, 1, 1, 1, 1]  # worked by hand


def test_memory_per_tree_is_below_scikit_learn_for_the_same_leaves():
    # Reference: scikit-learn's own tree storage (node records and values) for fully grown
    # trees on the same data; both have one leaf per distinct training point.
    rng = np.random.default_rng(6)
    X = rng.normal(size=(2000, 5))
    y = rng.normal(size=2000)
    ours = StitForestRegressor(lifetime=np.inf, n_trees=3, random_state=7).fit(X, y)
    theirs = ExtraTreesRegressor(n_estimators=3, max_features=1, random_state=7).fit(X, y)
    for tree, reference in zip(ours.trees_, theirs.estimators_, strict=True):
        assert tree.n_leaves == reference.get_n_leaves() == 2000
        state = reference.tree_.__getstate__()
        reference_bytes = state["nodes"].nbytes + state["values"].nbytes
        our_bytes = sum(getattr(tree, name).nbytes for name in
                        ("routing", "parent", "split_time", "n_node_samples", "value"))
        assert our_bytes <= reference_bytes


def test_trees_sharing_a_node_store_are_independent_and_pickle_alone():
    # Trees of one batch are views into shared arrays: each must hold exactly its own
    # nodes, be unaffected by its neighbours, and pickle without the others' nodes.
    rng = np.random.default_rng(8)
    X = rng.normal(size=(500, 3))
    y = X[:, 0] + rng.normal(size=500)
    forest = StitForestRegressor(lifetime=np.inf, n_trees=6, random_state=9).fit(X, y)
    alone = [StitForestRegressor(lifetime=np.inf, n_trees=6, random_state=9, n_jobs=n_jobs)
             .fit(X, y) for n_jobs in (2, 3)]  # other batchings: other neighbours
    for k, tree in enumerate(forest.trees_):
        assert tree.n_nodes == 2 * 500 - 1  # one leaf per distinct point
        assert tree.nbytes == tree.n_nodes * (16 + 4 + 8 + 4 + 8)
        copy = pickle.loads(pickle.dumps(tree))
        assert len(pickle.dumps(tree)) < 2 * tree.nbytes
        for other in (copy, alone[0].trees_[k], alone[1].trees_[k]):
            for name in ("routing", "parent", "split_time", "n_node_samples", "value"):
                np.testing.assert_array_equal(getattr(other, name), getattr(tree, name))


def test_pruning_a_batch_equals_pruning_each_tree_alone():
    rng = np.random.default_rng(10)
    X = rng.normal(size=(400, 3))
    y = X[:, 1] + rng.normal(size=400)
    trees = StitForestRegressor(lifetime=np.inf, n_trees=5, random_state=11).fit(X, y).trees_
    for lifetime in (0.3, 3.0, np.inf):
        one_by_one = [prune(tree, lifetime) for tree in trees]
        for n_threads in (1, 2):
            batch = prune_all(trees, lifetime, n_threads)
            for single, batched in zip(one_by_one, batch, strict=True):
                assert batched.n_nodes == single.n_nodes
                for name in ("routing", "parent", "split_time", "n_node_samples", "value"):
                    np.testing.assert_array_equal(getattr(batched, name), getattr(single, name))


@pytest.mark.parametrize("view_alive, pickled", [(False, False), (True, False), (False, True)])
def test_pruning_a_store_in_place_equals_pruning_each_tree_alone(view_alive, pickled):
    # Trees packed in one store are pruned in place and packed to its front, the store
    # shrinking to them; with a view of the store still alive it copies instead. A store
    # that travelled between processes (pickled, as under Dask) prunes the same.
    rng = np.random.default_rng(12)
    X = rng.normal(size=(300, 3))
    trees = StitForestRegressor(lifetime=np.inf, n_trees=4, random_state=13).fit(
        X, X[:, 0]).trees_
    names = ("routing", "parent", "split_time", "n_node_samples", "value")
    for lifetime in (0.5, 2.0, 1e9):
        store = NodeStore(sum(tree.n_nodes for tree in trees) + 7, 1)
        for tree in trees:
            for array, name in zip(store.take(tree.n_nodes), names, strict=True):
                array[...] = getattr(tree, name)
        del array  # (the last view taken)
        if pickled:
            store = pickle.loads(pickle.dumps(store))
        alive = store.parent[:3] if view_alive else None
        pruned = store.pruned_trees(lifetime)
        assert store.parent.size == sum(tree.n_nodes for tree in pruned)
        for tree, in_store in zip(trees, pruned, strict=True):
            alone = prune(tree, lifetime)
            assert in_store.lifetime == lifetime
            for name in names:
                np.testing.assert_array_equal(getattr(in_store, name), getattr(alone, name))
        del alive


def test_trees_at_a_finite_lifetime_are_packed_without_gaps():
    # At a finite lifetime trees need far less room than 2 n - 1 nodes: the trees of a
    # batch follow one another in their store, so the room reserved for a tree that
    # could fill it is shared, not left between them.
    rng = np.random.default_rng(15)
    X = rng.normal(size=(2000, 3))
    forest = StitForestRegressor(lifetime=1.0, n_trees=12, random_state=16).fit(X, X[:, 0])
    trees = forest.trees_
    assert all(tree.n_nodes < 2 * 2000 - 1 for tree in trees)
    neighbours = 0
    for before, after in pairwise(trees):
        if after.parent.base is before.parent.base:  # same store: the next tree starts
            end = before.parent.__array_interface__["data"][0] + before.parent.nbytes
            assert after.parent.__array_interface__["data"][0] == end
            neighbours += 1
    assert neighbours >= 4  # 12 trees in 4 batches of 3 on one job


@pytest.mark.parametrize("lifetime", [np.inf, 0.05])
def test_growth_writes_the_subtree_layout_of_its_leaves(lifetime):
    # Scoring reads each node's points as one run of positions, a left child's run first.
    # Growth writes that layout as it goes, on the whole data and on the compact copies
    # of small cells (64 columns: cells under 1024 points are grown from copies); it must
    # be the layout the definition gives from the leaves (_compiled.subtree_layout).
    from splitlift.forest import _forest
    from splitlift.forest._tree import Forest

    rng = np.random.default_rng(12)
    rows = rng.normal(size=(6000, 64))
    rows[5800:] = rows[:200]  # repeated rows share leaves of several points
    columns = np.ascontiguousarray(rows.T)
    root_box = np.concatenate([columns.min(axis=1), columns.max(axis=1)])
    targets, weights = rng.normal(size=(6000, 1)), np.ones(6000)
    grown = _forest._grow_data_batch(rows, columns, root_box, targets, weights, lifetime, 0,
                                     True, [3, 4])
    for tree, (first_position, point_order), _ in grown:
        leaves = Forest([tree]).apply(rows)[:, 0]
        expected_first, expected_order = _forest._layout_of(tree, leaves)
        np.testing.assert_array_equal(first_position, expected_first)
        assert np.array_equal(np.sort(point_order), np.arange(6000))
        left, counts = tree.routing["left"], tree.n_node_samples
        is_leaf = left == np.arange(tree.n_nodes)
        assert is_leaf.sum() < 6000  # some leaves hold several points
        for node in range(tree.n_nodes):
            run = slice(first_position[node], first_position[node] + counts[node])
            if is_leaf[node]:  # the points of the leaf, in any order
                assert set(point_order[run]) == set(np.flatnonzero(leaves == node))
                assert set(expected_order[run]) == set(np.flatnonzero(leaves == node))
            else:
                assert first_position[left[node]] == first_position[node]
                assert first_position[left[node] + 1] == run.start + counts[left[node]]
