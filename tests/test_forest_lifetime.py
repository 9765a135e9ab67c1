"""Lifetime: the theory's scaling helpers, the tuning grid, nesting of trees in λ, tuning."""

import numpy as np
import pytest

from splitlift.forest import (
    StitForestRegressor,
    leakage_threshold,
    theory_lifetime,
    theory_risk_rate,
)
from splitlift.forest._lifetime import GRID_SIZE, lifetime_grid
from splitlift.forest._tree import prune


def test_theory_lifetime_formula():
    # λ_n = c n^{1/(d+2)} ε^{-(d-s)/(d+2)}, the scaling stated in the design brief.
    n, d, s, eps = 5000, 6, 2, 0.03
    assert theory_lifetime(n, d, s, eps, constant=2.5) == pytest.approx(
        2.5 * n ** (1 / 8) * eps ** (-4 / 8), rel=1e-12
    )
    # no complement (s = d): the leakage plays no role
    assert theory_lifetime(n, d, d, 0.0) == pytest.approx(n ** (1 / 8), rel=1e-12)
    # less leakage allows a longer lifetime
    assert theory_lifetime(n, d, s, 0.01) > theory_lifetime(n, d, s, 0.1)


def test_risk_rate_reaches_the_subspace_rate_at_the_leakage_threshold():
    # At ε = n^{-1/(s+2)}: n^{-2/(d+2)} ε^{2(d-s)/(d+2)} = n^{-2/(s+2)}, the s-dimensional
    # minimax rate (closed form, design brief).
    for n, d, s in [(1000, 5, 1), (20000, 10, 3), (50, 4, 4)]:
        eps = leakage_threshold(n, s)
        assert eps == pytest.approx(n ** (-1 / (s + 2)), rel=1e-12)
        assert theory_risk_rate(n, d, s, eps) == pytest.approx(n ** (-2 / (s + 2)), rel=1e-9)


@pytest.mark.parametrize(
    "arguments, message",
    [
        ((0, 5, 2, 0.1), "n_samples"),
        ((100, 5, 6, 0.1), "subspace_dim"),
        ((100, 5, 2, 1.5), "leakage"),
        ((100, 5, 2, 0.0), "rank-deficient"),
    ],
)
def test_theory_helpers_refuse_bad_arguments(arguments, message):
    with pytest.raises(ValueError, match=message):
        theory_lifetime(*arguments)
    with pytest.raises(ValueError, match="constant"):
        theory_lifetime(100, 5, 2, 0.1, constant=0)


def test_grid_is_logarithmic_in_dimensionless_time():
    grid = lifetime_grid(root_rate=4.0, n_samples=1000, n_features=3, extent="data")
    assert grid.size == GRID_SIZE + 1 and np.isinf(grid[-1])
    ratios = grid[1:-1] / grid[:-2]
    np.testing.assert_allclose(ratios, ratios[0])  # constant ratio: log-spaced
    assert grid[-2] * 4.0 == pytest.approx(1000)
    window = lifetime_grid(root_rate=2.0, n_samples=100, n_features=2, extent="window")
    assert np.all(np.isfinite(window)) and window[-1] * 2.0 == pytest.approx(2 * (10 - 1))


def _leaf_at(tree, point, lifetime):
    """Leaf of ``point`` in ``tree`` restricted to cuts made by ``lifetime`` (plain Python)."""
    node = 0
    while tree.direction[node] >= 0 and tree.split_time[node] <= lifetime:
        node = tree.left[node] + (point[tree.direction[node]] > tree.offset[node])
    return node


def test_trees_are_nested_in_the_lifetime():
    # A Mondrian tree at lifetime t is the tree grown further, pruned at t
    # (Lakshminarayanan, Roy & Teh 2014): the pruned tree routes like the full tree
    # stopped at cuts made after t, and keeps the counts of those cells.
    rng = np.random.default_rng(0)
    X = rng.normal(size=(300, 4))
    forest = StitForestRegressor(lifetime=np.inf, n_trees=1, random_state=1)
    tree = forest.fit(X, rng.normal(size=300)).trees_[0]
    probes = rng.normal(size=(100, 4))
    for lifetime in (0.05, 0.2, 0.7, 2.0, 9.0, np.inf):
        pruned = prune(tree, lifetime)
        assert np.all(pruned.birth_time <= lifetime)
        assert pruned.n_node_samples[0] == 300
        assert pruned.n_leaves == np.count_nonzero(
            (tree.birth_time <= lifetime) & ~((tree.direction >= 0) & (tree.split_time <= lifetime))
        )
        for point in probes:
            full_leaf = _leaf_at(tree, point, lifetime)
            pruned_leaf = _leaf_at(pruned, point, np.inf)
            np.testing.assert_array_equal(pruned.value[pruned_leaf], tree.value[full_leaf])
            assert pruned.n_node_samples[pruned_leaf] == tree.n_node_samples[full_leaf]


def test_pruned_trees_have_the_law_of_trees_grown_to_that_lifetime():
    # Nesting in law: leaves of trees grown to lifetime 3 directly, against trees grown
    # without limit and pruned at 3; means within 4.5 standard errors of their difference.
    rng = np.random.default_rng(2)
    X = rng.uniform(size=(150, 3))
    y = rng.normal(size=150)
    direct = StitForestRegressor(lifetime=3.0, n_trees=400, random_state=3).fit(X, y)
    grown = StitForestRegressor(lifetime=np.inf, n_trees=400, random_state=4).fit(X, y)
    pruned = np.array([prune(tree, 3.0).n_leaves for tree in grown.trees_])
    difference = direct.n_leaves_.mean() - pruned.mean()
    standard_error = np.sqrt(direct.n_leaves_.var(ddof=1) / 400 + pruned.var(ddof=1) / 400)
    assert abs(difference) < 4.5 * standard_error


def _leave_one_out_path(trees, X, y, grid):
    """Mean squared leave-one-out error of the forest pruned at each lifetime (plain Python)."""
    path = []
    for lifetime in grid:
        predictions = np.zeros(len(y))
        for tree in trees:
            for i, point in enumerate(X):
                node = _leaf_at(tree, point, lifetime)
                while tree.n_node_samples[node] < 2:  # alone in its cell: nearest ancestor
                    node = tree.parent[node]
                total = tree.value[node, 0] * tree.n_node_samples[node]
                predictions[i] += (total - y[i]) / (tree.n_node_samples[node] - 1) / len(trees)
        path.append(np.mean((predictions - y) ** 2))
    return np.array(path)


def test_auto_lifetime_is_the_leave_one_out_minimum_of_the_pruned_forest():
    # The partition of data mode depends on X only, so the trees grown once score every
    # lifetime by leave-one-out; checked against a direct computation on pruned trees.
    rng = np.random.default_rng(5)
    X = rng.uniform(-1, 1, size=(80, 2))
    y = np.sin(3 * X[:, 0]) + 0.3 * rng.normal(size=80)
    auto = StitForestRegressor(n_trees=6, random_state=6).fit(X, y)
    full = StitForestRegressor(lifetime=np.inf, n_trees=6, random_state=6).fit(X, y)
    expected = _leave_one_out_path(full.trees_, X, y, auto.lifetime_grid_)
    np.testing.assert_allclose(auto.lifetime_path_, expected, rtol=1e-10)
    assert auto.lifetime_ == auto.lifetime_grid_[np.argmin(expected)]
    for chosen, grown in zip(auto.trees_, full.trees_, strict=True):
        pruned = prune(grown, auto.lifetime_)
        np.testing.assert_array_equal(chosen.offset, pruned.offset)
        np.testing.assert_array_equal(chosen.left, pruned.left)
        np.testing.assert_array_equal(chosen.value, pruned.value)


def _weighted_leave_one_out_path(trees, X, y, weights, grid):
    """Weighted leave-one-out error path from the training points of every cell directly
    (plain Python; a cell holding only the point defers to its nearest ancestor)."""
    n = len(y)
    ancestors = []  # per tree, the nodes on every training point's path
    for tree in trees:
        paths = []
        for point in X:
            node, seen = 0, {0}
            while tree.direction[node] >= 0:
                node = tree.left[node] + (point[tree.direction[node]] > tree.offset[node])
                seen.add(node)
            paths.append(seen)
        ancestors.append(paths)
    path = []
    for lifetime in grid:
        predictions = np.zeros(n)
        for tree, paths in zip(trees, ancestors, strict=True):
            for i in range(n):
                node = _leaf_at(tree, X[i], lifetime)
                inside = [j for j in range(n) if node in paths[j]]
                while len(inside) < 2:
                    node = tree.parent[node]
                    inside = [j for j in range(n) if node in paths[j]]
                weight = weights[inside].sum() - weights[i]
                total = (weights[inside] * y[inside]).sum() - weights[i] * y[i]
                predictions[i] += total / weight / len(trees)
        path.append(np.sum(weights * (predictions - y) ** 2) / weights.sum())
    return np.array(path)


@pytest.mark.parametrize("extent", ["data", "window"])
def test_weighted_auto_lifetime_path_matches_the_cells_directly(extent):
    # Unequal weights, and in a window also empty cells, cells of one point that are cut
    # and leaves of many points: the path against sums over each cell's points.
    rng = np.random.default_rng(11)
    X = rng.uniform(-1, 1, size=(40, 2))
    y = np.sin(3 * X[:, 0]) + 0.3 * rng.normal(size=40)
    weights = rng.uniform(0.2, 3.0, size=40)
    settings = dict(n_trees=3, random_state=12, extent=extent)
    if extent == "window":
        settings["window"] = [[-1.5, -1.5], [1.5, 1.5]]
    auto = StitForestRegressor(**settings).fit(X, y, sample_weight=weights)
    grid = auto.lifetime_grid_
    full = StitForestRegressor(lifetime=grid[-1] if extent == "window" else np.inf,
                               **settings).fit(X, y, sample_weight=weights)
    trees = full.trees_  # no lift: the trees cut X itself
    if extent == "window":
        counts = np.concatenate([tree.n_node_samples for tree in trees])
        assert (counts == 0).any() and (counts == 1).any() and (counts[1:] > 2).any()
    expected = _weighted_leave_one_out_path(trees, X, y, weights, grid)
    np.testing.assert_allclose(auto.lifetime_path_, expected, rtol=1e-10)


@pytest.mark.parametrize("scale", [2.0**-900, 1e-300, 2.0**1000, 1e307])
def test_auto_lifetime_does_not_depend_on_the_scale_of_the_data(scale):
    # A common scale changes nothing but the units of λ: the choice is made on data
    # rescaled by a power of two, so a power-of-two scale gives bit-identical forests and
    # any other scale the same forest up to rounding of the lifted values.
    rng = np.random.default_rng(7)
    X = rng.uniform(-1, 1, size=(300, 3))
    y = np.sin(3 * X[:, 0] + X[:, 1]) + 0.3 * rng.normal(size=300)
    X_test = rng.uniform(-1, 1, size=(300, 3))
    y_test = np.sin(3 * X_test[:, 0] + X_test[:, 1])
    unit = StitForestRegressor(n_trees=20, random_state=8).fit(X, y)
    scaled = StitForestRegressor(n_trees=20, random_state=8).fit(X * scale, y)
    assert np.isfinite(scaled.lifetime_grid_[-2]) and not np.isinf(scaled.lifetime_)
    unit_error = np.mean((unit.predict(X_test) - y_test) ** 2)
    scaled_error = np.mean((scaled.predict(X_test * scale) - y_test) ** 2)
    if np.log2(scale).is_integer():
        np.testing.assert_array_equal(scaled.lifetime_path_, unit.lifetime_path_)
        assert scaled.lifetime_ == unit.lifetime_ / scale
        assert scaled_error == unit_error
    else:
        assert scaled.lifetime_ * scale == pytest.approx(unit.lifetime_, rel=1e-9)
        assert scaled_error == pytest.approx(unit_error, rel=0.05)
