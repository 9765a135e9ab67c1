"""STIT forest estimators in data mode: predictions, leaves, tuning, reproducibility."""

import numpy as np
import pytest
from sklearn.ensemble import RandomForestRegressor
from sklearn.pipeline import make_pipeline

from splitlift import LiftMatrix
from splitlift.estimators import SlicedInverse
from splitlift.forest import StitForestClassifier, StitForestRegressor
from splitlift.transformer import ApplyLift, DirectionLift

# synthetic single-index problem: an oblique direction in 8 dimensions
OBLIQUE = np.array([1, -1, 1, -1, 1, 1, -1, 1]) / np.sqrt(8)


def _oblique_data(n, rng, noise=0.1):
    X = rng.uniform(-1, 1, size=(n, OBLIQUE.size))
    signal = np.sin(4 * X @ OBLIQUE)
    return X, signal + noise * rng.standard_normal(n), signal


def test_true_lift_beats_axis_forests_on_an_oblique_ridge():
    # Reference competitor: scikit-learn's RandomForestRegressor on the raw inputs.
    rng = np.random.default_rng(0)
    X, y, _ = _oblique_data(600, rng)
    X_test, _, signal_test = _oblique_data(1000, rng)
    lift = LiftMatrix.from_subspace(OBLIQUE, complement_weight=0.05)
    errors = {}
    for name, model in {
        "true lift": StitForestRegressor(n_trees=20, lift=lift, random_state=0),
        "axis": StitForestRegressor(n_trees=20, random_state=0),
        "scikit-learn": RandomForestRegressor(n_estimators=100, random_state=0),
    }.items():
        errors[name] = np.mean((model.fit(X, y).predict(X_test) - signal_test) ** 2)
    # "wide margin": at most a fifth of the better axis-aligned competitor's error
    assert errors["true lift"] < 0.2 * min(errors["axis"], errors["scikit-learn"])


def test_regression_prediction_is_mean_of_leaf_means():
    # Checked by hand with numpy: leaf means from apply() on the training data.
    rng = np.random.default_rng(1)
    X, y, _ = _oblique_data(200, rng)
    forest = StitForestRegressor(lifetime=3.0, n_trees=7, random_state=1).fit(X, y)
    X_new = rng.uniform(-1, 1, size=(50, X.shape[1]))
    train_leaves, new_leaves = forest.apply(X), forest.apply(X_new)
    expected = np.zeros(len(X_new))
    for k in range(forest.n_trees):
        for i, leaf in enumerate(new_leaves[:, k]):
            expected[i] += y[train_leaves[:, k] == leaf].mean() / forest.n_trees
    np.testing.assert_allclose(forest.predict(X_new), expected, rtol=1e-12)


def test_classifier_probabilities_are_mean_leaf_frequencies():
    rng = np.random.default_rng(2)
    X = rng.normal(size=(150, 3))
    y = np.array(["a", "b", "c"])[(X[:, 0] > 0).astype(int) + (X[:, 0] + X[:, 1] > 1)]
    forest = StitForestClassifier(lifetime=2.0, n_trees=6, random_state=2).fit(X, y)
    X_new = rng.normal(size=(40, 3))
    train_leaves, new_leaves = forest.apply(X), forest.apply(X_new)
    expected = np.zeros((40, 3))
    for k in range(forest.n_trees):
        for i, leaf in enumerate(new_leaves[:, k]):
            labels = y[train_leaves[:, k] == leaf]
            expected[i] += (labels[:, None] == forest.classes_).mean(axis=0) / forest.n_trees
    probabilities = forest.predict_proba(X_new)
    np.testing.assert_allclose(probabilities, expected, rtol=1e-12)
    np.testing.assert_allclose(probabilities.sum(axis=1), 1.0)
    np.testing.assert_array_equal(forest.predict(X_new),
                                  forest.classes_[probabilities.argmax(axis=1)])


@pytest.mark.parametrize("n_points", [1, 7, 8, 9, 203])
def test_routing_matches_a_walk_down_every_tree(n_points):
    # Reference: a plain Python walk from the root with the cut rule of StitTree's docstring
    # (z[direction] <= offset goes left). The compiled router moves eight points at a time
    # and hands a slot to the next point when one arrives at its leaf, so any number of
    # points, with leaves at uneven depths, must reach the same leaves.
    rng = np.random.default_rng(15)
    X = rng.normal(size=(300, 3))
    forest = StitForestRegressor(lifetime=np.inf, n_trees=3, random_state=16)
    forest.fit(X, rng.normal(size=300))
    X_new = 1.5 * rng.normal(size=(n_points, 3))
    lifted = forest._lifted(X_new)
    expected = np.empty((n_points, forest.n_trees), int)
    for k, tree in enumerate(forest.trees_):
        for i, z in enumerate(lifted):
            node = 0
            while tree.direction[node] >= 0:
                goes_left = z[tree.direction[node]] <= tree.offset[node]
                node = tree.left[node] if goes_left else tree.right[node]
            expected[i, k] = node
    np.testing.assert_array_equal(forest.apply(X_new), expected)
    values = np.array([tree.value[expected[:, k], 0] for k, tree in enumerate(forest.trees_)])
    np.testing.assert_allclose(forest.predict(X_new), values.mean(axis=0), rtol=1e-12)


def test_apply_shape_and_leaf_counts():
    rng = np.random.default_rng(3)
    X, y, _ = _oblique_data(120, rng)
    forest = StitForestRegressor(lifetime=5.0, n_trees=4, random_state=3).fit(X, y)
    leaves = forest.apply(X)
    assert leaves.shape == (120, 4) and leaves.dtype.kind == "i"
    # in data mode every leaf holds training points, so apply(X) reaches all of them
    np.testing.assert_array_equal([np.unique(column).size for column in leaves.T],
                                  forest.n_leaves_)


def test_infinite_lifetime_leaves_hold_one_distinct_point():
    rng = np.random.default_rng(4)
    distinct = rng.normal(size=(60, 3))
    X = np.vstack([distinct, distinct[:15]])  # 15 duplicated rows
    y = rng.normal(size=len(X))
    forest = StitForestRegressor(lifetime=np.inf, n_trees=3, random_state=4).fit(X, y)
    np.testing.assert_array_equal(forest.n_leaves_, 60)
    for column in forest.apply(X).T:
        for leaf in np.unique(column):
            assert np.unique(X[column == leaf], axis=0).shape[0] == 1


def test_lift_equals_mondrian_on_lifted_data():
    # The defining identity: a STIT forest with lift A is a Mondrian forest on z = A x.
    rng = np.random.default_rng(5)
    X, y, _ = _oblique_data(150, rng)
    lift = LiftMatrix.from_subspace(OBLIQUE, complement_weight=0.1)
    on_inputs = StitForestRegressor(lifetime=4.0, n_trees=5, lift=lift, random_state=5)
    on_lifted = StitForestRegressor(lifetime=4.0, n_trees=5, random_state=5)
    on_inputs.fit(X, y)
    on_lifted.fit(X @ lift.matrix.T, y)
    X_new = rng.uniform(-1, 1, size=(30, X.shape[1]))
    np.testing.assert_array_equal(
        on_inputs.predict(X_new), on_lifted.predict(X_new @ lift.matrix.T)
    )


@pytest.mark.parametrize("extent", ["data", "window"])
def test_results_do_not_depend_on_n_jobs(extent):
    rng = np.random.default_rng(6)
    X, y, _ = _oblique_data(80, rng)
    lifetime = "auto" if extent == "data" else 0.3
    fits = [
        StitForestRegressor(lifetime=lifetime, n_trees=11, extent=extent, random_state=6,
                            n_jobs=n_jobs).fit(X, y)
        for n_jobs in (1, 2)
    ]
    assert fits[0].lifetime_ == fits[1].lifetime_
    np.testing.assert_array_equal(fits[0].apply(X), fits[1].apply(X))
    np.testing.assert_array_equal(fits[0].predict(X), fits[1].predict(X))


def test_many_query_points_route_in_blocks_with_the_same_result_for_any_n_jobs():
    # 5000 points make 3, 4 or 6 blocks for n_jobs 1, 2, 3: each point's sum over trees
    # runs in tree order whatever its block, so the predictions agree bit for bit
    from threadpoolctl import threadpool_info

    rng = np.random.default_rng(8)
    X, y, _ = _oblique_data(200, rng)
    X_new = rng.uniform(-1, 1, size=(5000, X.shape[1]))
    before = [pool["num_threads"] for pool in threadpool_info()]
    forest = StitForestRegressor(lifetime=np.inf, n_trees=7, random_state=8).fit(X, y)
    predictions = [forest.set_params(n_jobs=n_jobs).predict(X_new) for n_jobs in (1, 2, 3)]
    for other in predictions[1:]:
        np.testing.assert_array_equal(predictions[0], other)
    single = np.mean(_per_tree(forest, X_new), axis=0)
    np.testing.assert_allclose(predictions[0], single, rtol=1e-12, atol=1e-12)
    # the lift ran with BLAS on one thread; the limit is lifted afterwards
    assert [pool["num_threads"] for pool in threadpool_info()] == before


def _per_tree(forest, X):
    leaves = forest.apply(X)
    return [tree.value[leaves[:, k], 0] for k, tree in enumerate(forest.trees_)]


def test_auto_lifetime_picks_the_grid_minimum():
    rng = np.random.default_rng(7)
    X, y, _ = _oblique_data(300, rng, noise=0.5)
    lift = LiftMatrix.from_subspace(OBLIQUE, complement_weight=0.05)
    forest = StitForestRegressor(n_trees=10, lift=lift, random_state=7).fit(X, y)
    grid, path = forest.lifetime_grid_, forest.lifetime_path_
    assert grid.shape == path.shape and np.all(np.diff(grid) > 0) and np.isinf(grid[-1])
    assert forest.lifetime_ == grid[np.argmin(path)]
    # a one-cell forest predicts the mean: its out-of-fold error is about var(y)
    assert path[0] == pytest.approx(np.var(y), rel=0.1)
    assert path.min() < 0.9 * path[0]
    fixed = StitForestRegressor(n_trees=10, lifetime=2.0, lift=lift, random_state=7).fit(X, y)
    assert fixed.lifetime_ == 2.0 and fixed.lifetime_path_ is None


def test_auto_lifetime_in_window_mode():
    rng = np.random.default_rng(8)
    X = rng.uniform(0, 1, size=(60, 2))
    y = np.sin(6 * X[:, 0]) + 0.1 * rng.standard_normal(60)
    forest = StitForestRegressor(n_trees=6, extent="window", window=[[0, 0], [1, 1]],
                                 random_state=8).fit(X, y)
    assert np.all(np.isfinite(forest.lifetime_grid_))
    assert forest.lifetime_ == forest.lifetime_grid_[np.argmin(forest.lifetime_path_)]
    # the final trees are the grown partitions pruned at the chosen lifetime
    for tree in forest.trees_:
        internal = tree.direction >= 0
        assert np.all(tree.split_time[internal] <= forest.lifetime_)
        assert np.all(np.isinf(tree.split_time[~internal]))
        assert np.all(tree.birth_time <= forest.lifetime_)


def test_pipeline_after_direction_lift():
    # DirectionLift's "scale" form feeds z = A x, which a STIT forest reads as its lift.
    rng = np.random.default_rng(9)
    X = rng.normal(size=(400, OBLIQUE.size))  # elliptical inputs suit sliced inverse regression
    y = X @ OBLIQUE + 0.1 * rng.standard_normal(len(X))
    pipeline = make_pipeline(
        DirectionLift(SlicedInverse(dim=1), complement_weight=0.05),
        StitForestRegressor(n_trees=10, random_state=9),
    ).fit(X, y)
    X_test = rng.normal(size=(300, X.shape[1]))
    assert pipeline.score(X_test, X_test @ OBLIQUE) > 0.8


@pytest.mark.parametrize("forest_class", [StitForestRegressor, StitForestClassifier])
def test_lift_with_standardisation_acts_as_in_a_pipeline(forest_class):
    # A lift acts through its own apply() wherever it is used: a forest given the lift
    # and a pipeline ApplyLift(lift) -> forest grow the same trees. Synthetic columns at
    # scales 1, 100 and 0.01; the lift was built in standardised coordinates.
    rng = np.random.default_rng(10)
    scales = np.array([1.0, 100.0, 0.01])
    X = rng.normal(size=(400, 3)) * scales + np.array([5.0, -300.0, 0.2])
    standardised = (X - X.mean(axis=0)) / X.std(axis=0)
    direction = np.array([1.0, 1.0, 0.0]) / np.sqrt(2)
    signal = np.sin(2 * standardised @ direction)
    y = signal + 0.1 * rng.normal(size=400) if forest_class is StitForestRegressor else signal > 0
    lift = LiftMatrix.from_subspace(direction, complement_weight=0.05,
                                    input_mean=X.mean(axis=0), input_scale=X.std(axis=0))
    direct = forest_class(n_trees=10, lift=lift, random_state=10).fit(X, y)
    piped = make_pipeline(ApplyLift(lift), forest_class(n_trees=10, random_state=10)).fit(X, y)
    X_new = rng.normal(size=(200, 3)) * scales + np.array([5.0, -300.0, 0.2])
    np.testing.assert_array_equal(direct.predict(X_new), piped.predict(X_new))
    np.testing.assert_array_equal(direct.apply(X_new), piped[-1].apply(lift.apply(X_new)))
    assert direct.score(X, y) > 0.9
