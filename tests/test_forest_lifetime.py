"""Lifetime: the theory's scaling helpers, the tuning grid, and nesting of trees in λ."""

import numpy as np
import pytest

from splitlift.forest import leakage_threshold, theory_lifetime, theory_risk_rate
from splitlift.forest._lifetime import GRID_SIZE, lifetime_grid
from splitlift.forest._tree import (
    apply_tree,
    grow_from_data,
    predict_along_lifetimes,
    prune,
)


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


def test_trees_are_nested_in_the_lifetime():
    # A Mondrian tree at lifetime t is the tree grown further, pruned at t
    # (Lakshminarayanan, Roy & Teh 2014): the one-pass grid predictions, routing with a
    # lifetime, and the explicitly pruned tree must agree.
    rng = np.random.default_rng(0)
    lifted = rng.normal(size=(300, 4))
    targets = rng.normal(size=(300, 2))
    tree = grow_from_data(lifted, targets, np.inf, np.random.default_rng(1))
    grid = np.array([0.05, 0.2, 0.7, 2.0, 9.0, np.inf])
    probes = rng.normal(size=(100, 4))
    along = predict_along_lifetimes(tree, probes, grid)
    for index, lifetime in enumerate(grid):
        pruned = prune(tree, lifetime)
        leaves = apply_tree(pruned, probes)
        np.testing.assert_array_equal(along[:, index], pruned.value[leaves])
        np.testing.assert_array_equal(along[:, index], tree.value[apply_tree(tree, probes,
                                                                             lifetime)])
        assert np.all(pruned.birth_time <= lifetime)
        # the pruned tree holds the same counts as a tree of that lifetime would
        assert pruned.n_node_samples[0] == 300
        assert pruned.n_leaves == np.count_nonzero(
            (tree.birth_time <= lifetime) & ~((tree.direction >= 0) & (tree.split_time <= lifetime))
        )
