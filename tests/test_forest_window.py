"""Window mode: the exact STIT partition checked against published laws and scipy."""

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import linprog
from scipy.spatial import HalfspaceIntersection

from splitlift.forest import StitForestRegressor
from splitlift.forest._window import WindowCell


def _fit_window_forest(lower, upper, lifetime, n_trees, lift=None, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(lower, upper, size=(20, len(lower)))
    forest = StitForestRegressor(
        lifetime=lifetime, n_trees=n_trees, lift=lift, extent="window",
        window=np.vstack([lower, upper]), random_state=seed,
    )
    return forest.fit(X, rng.standard_normal(20))


def _random_cell(d, n_cuts, rng, vertex_limit=512):
    lower, upper = np.zeros(d), rng.uniform(0.5, 1.5, d)
    cell = WindowCell.box(lower, upper, vertex_limit=vertex_limit)
    for _ in range(n_cuts):
        normal = rng.standard_normal(d)
        low, high = cell.extent(normal[None, :])
        halves = cell.split(normal, low[0] + rng.random() * (high[0] - low[0]))
        cell = halves[rng.integers(2)]
    return cell


@pytest.mark.parametrize("d", [1, 2, 3, 4])
def test_cell_extent_matches_linear_programming(d):
    # Reference: scipy.optimize.linprog (HiGHS) on the cell's half-space form.
    rng = np.random.default_rng(d)
    cell = _random_cell(d, 10, rng)
    directions = rng.standard_normal((5, d))
    low, high = cell.extent(directions)
    bounds = list(zip(cell.lower, cell.upper, strict=True))
    for index, direction in enumerate(directions):
        best_low = linprog(direction, A_ub=cell.normals, b_ub=cell.offsets, bounds=bounds)
        best_high = linprog(-direction, A_ub=cell.normals, b_ub=cell.offsets, bounds=bounds)
        assert low[index] == pytest.approx(best_low.fun, abs=1e-9)
        assert high[index] == pytest.approx(-best_high.fun, abs=1e-9)


@pytest.mark.parametrize("d", [2, 3])
def test_cell_vertices_match_qhull(d):
    # Reference: scipy.spatial.HalfspaceIntersection (Qhull) of the same half-spaces.
    rng = np.random.default_rng(10 + d)
    cell = _random_cell(d, 8, rng)
    identity = np.eye(d)
    normals = np.vstack([cell.normals, identity, -identity])
    offsets = np.concatenate([cell.offsets, cell.upper, -cell.lower])
    interior = cell.vertices.mean(axis=0)
    qhull = HalfspaceIntersection(np.column_stack([normals, -offsets]), interior)
    expected = np.unique(qhull.intersections.round(9), axis=0)
    found = np.unique(cell.vertices.round(9), axis=0)
    np.testing.assert_allclose(found, expected, atol=1e-8)


def test_vertex_and_linear_programming_cells_agree_along_a_tree():
    # The LP fallback (vertex_limit=0) and the vertex list must give the same widths.
    rng = np.random.default_rng(3)
    d = 3
    vertex_cell = WindowCell.box(np.zeros(d), np.ones(d))
    lp_cell = WindowCell.box(np.zeros(d), np.ones(d), vertex_limit=0)
    directions = rng.standard_normal((4, d))
    for _ in range(8):
        normal = directions[rng.integers(4)]
        low, high = vertex_cell.extent(normal[None, :])
        offset = low[0] + rng.random() * (high[0] - low[0])
        side = rng.integers(2)
        vertex_cell = vertex_cell.split(normal, offset)[side]
        lp_cell = lp_cell.split(normal, offset, vertex_limit=0)[side]
        np.testing.assert_allclose(vertex_cell.extent(directions), lp_cell.extent(directions),
                                   atol=1e-9)


@pytest.mark.parametrize(
    "sides, weights, lifetime",
    [
        ((1.0, 1.0), None, 3.0),  # unit cube: (1 + λ)^d, Mourtada, Gaïffas & Scornet 2020
        ((1.0, 2.0, 0.5), None, 2.0),  # box with sides L_j: Π_j (1 + λ L_j)
        ((1.0, 2.0, 0.5), (0.5, 1.5, 1.0), 2.0),  # weighted axes: Π_j (1 + λ w_j L_j)
    ],
)
def test_mean_number_of_cells_of_axis_mondrian(sides, weights, lifetime):
    # E[#cells] of a Mondrian process on a box (Mourtada, Gaïffas & Scornet 2020, unit
    # cube; the box and weighted forms follow by rescaling each axis).
    lower = np.zeros(len(sides))
    upper = np.array(sides)
    lift = None if weights is None else np.diag(weights)
    scale = np.ones(len(sides)) if weights is None else np.array(weights)
    expected = np.prod(1 + lifetime * scale * upper)
    n_trees = 400
    forest = _fit_window_forest(lower, upper, lifetime, n_trees, lift=lift)
    cells = forest.n_leaves_
    standard_error = cells.std(ddof=1) / np.sqrt(n_trees)
    # tolerance: 4.5 Monte Carlo standard errors
    assert abs(cells.mean() - expected) < 4.5 * standard_error


def _segment_crossings(forest, start, direction, length):
    """Cell boundaries met by the segment start + t * direction, 0 < t < length, per tree."""
    matrix = forest.lift_matrix_
    breaks = [np.zeros(1), np.full(1, length)]
    for tree in forest.trees_:
        index, offset = tree.cuts()
        slope = matrix[index] @ direction
        with np.errstate(divide="ignore", invalid="ignore"):
            t = (offset - matrix[index] @ start) / slope
        breaks.append(t[(slope != 0) & (t > 0) & (t < length)])
    # the leaf is constant between consecutive candidate crossings: probe the midpoints
    t = np.unique(np.concatenate(breaks))
    probes = start + ((t[:-1] + t[1:]) / 2)[:, None] * direction
    leaves = forest.apply(probes)
    return np.count_nonzero(np.diff(leaves, axis=0) != 0, axis=0)


def test_segment_cut_count_is_poisson_with_the_line_section_mean():
    # Line sections of a STIT tessellation are Poisson point processes (Nagel & Weiss
    # 2005): a segment of length L in direction u meets Poisson(λ L Σ_i |a_i·u|) cuts.
    angles = np.radians([0.0, 60.0, 120.0])
    weights = np.array([0.5, 0.3, 0.2])
    lift = weights[:, None] * np.column_stack([np.cos(angles), np.sin(angles)])
    lifetime, length = 8.0, 0.8
    direction = np.array([np.cos(np.radians(35.0)), np.sin(np.radians(35.0))])
    start = np.array([0.15, 0.2])
    n_trees = 500
    forest = _fit_window_forest(np.zeros(2), np.ones(2), lifetime, n_trees, lift=lift, seed=1)
    counts = _segment_crossings(forest, start, direction, length)
    mean = lifetime * length * np.abs(lift @ direction).sum()
    # mean within 4.5 standard errors of a Poisson mean, sqrt(mean / N)
    assert abs(counts.mean() - mean) < 4.5 * np.sqrt(mean / n_trees)
    # dispersion index var/mean = 1, standard error about sqrt(2 / (N - 1)); 4.5 of them
    dispersion = counts.var(ddof=1) / counts.mean()
    assert abs(dispersion - 1) < 4.5 * np.sqrt(2 / (n_trees - 1))
    # the whole law: chi-square goodness of fit to Poisson(mean), bins 0..8 and 9+
    support = np.arange(9)
    probabilities = np.append(stats.poisson.pmf(support, mean), stats.poisson.sf(8, mean))
    observed = np.append(np.bincount(np.minimum(counts, 9), minlength=10)[:9],
                         np.count_nonzero(counts >= 9))
    assert stats.chisquare(observed, probabilities * n_trees).pvalue > 1e-3


def test_side_of_axis_mondrian_cell_is_sum_of_two_exponentials():
    # Mourtada, Gaïffas & Scornet 2020: far from the boundary, the cell of an axis Mondrian
    # containing x extends along each axis by two independent Exp(λ) distances.
    lifetime = 5.0
    lower, upper = np.array([0.0, 0.0]), np.array([4.0, 0.05])
    point = np.array([2.0, 0.025])  # P(Exp(5) > 2) = e^-10: boundary effects negligible
    n_trees = 800
    forest = _fit_window_forest(lower, upper, lifetime, n_trees, seed=2)
    left_gap, right_gap = np.empty(n_trees), np.empty(n_trees)
    for k, tree in enumerate(forest.trees_):
        low, high, node = lower[0], upper[0], 0
        while tree.direction[node] >= 0:
            offset = tree.offset[node]
            goes_left = point[tree.direction[node]] <= offset
            if tree.direction[node] == 0:
                low, high = (low, min(high, offset)) if goes_left else (max(low, offset), high)
            node = tree.left[node] if goes_left else tree.right[node]
        left_gap[k], right_gap[k] = point[0] - low, high - point[0]
    exponential = stats.expon(scale=1 / lifetime)
    # Kolmogorov-Smirnov tests at level 1e-3 (scipy.stats as the reference laws)
    assert stats.kstest(left_gap, exponential.cdf).pvalue > 1e-3
    assert stats.kstest(right_gap, exponential.cdf).pvalue > 1e-3
    assert stats.kstest(left_gap + right_gap, stats.gamma(2, scale=1 / lifetime).cdf).pvalue > 1e-3
    # independence: the sample correlation of independent gaps is about N(0, 1/N); 4.5 SE
    assert abs(np.corrcoef(left_gap, right_gap)[0, 1]) < 4.5 / np.sqrt(n_trees)


def test_window_partition_ignores_the_data_and_exposes_cuts():
    lower, upper = np.zeros(2), np.ones(2)
    first = _fit_window_forest(lower, upper, 4.0, 5, seed=7)
    rng = np.random.default_rng(99)
    other = StitForestRegressor(lifetime=4.0, n_trees=5, extent="window",
                                window=np.vstack([lower, upper]), random_state=7)
    other.fit(rng.uniform(size=(50, 2)), rng.standard_normal(50))
    for one, two in zip(first.trees_, other.trees_, strict=True):
        for part_one, part_two in zip(one.cuts(), two.cuts(), strict=True):
            np.testing.assert_array_equal(part_one, part_two)
    direction, offset = first.trees_[0].cuts()
    assert direction.shape == offset.shape == (first.n_leaves_[0] - 1,)
    assert np.all((direction >= 0) & (direction < 2))


def test_empty_cell_falls_back_to_nearest_non_empty_ancestor():
    rng = np.random.default_rng(5)
    X = rng.uniform(0, 1, size=(6, 2))
    y = rng.standard_normal(6)
    forest = StitForestRegressor(lifetime=6.0, n_trees=3, extent="window",
                                 window=[[0, 0], [1, 1]], random_state=0).fit(X, y)
    probes = rng.uniform(0, 1, size=(400, 2))
    leaves = forest.apply(probes)
    checked = 0
    for k, tree in enumerate(forest.trees_):
        for leaf in np.unique(leaves[:, k]):
            node = leaf
            while tree.n_node_samples[node] == 0:
                node = tree.parent[node]
            members = forest.apply(X)[:, k]
            # the ancestor's value is the plain mean of the training points in its cell
            ancestor_points = [_descends_from(tree, member, node) for member in members]
            assert tree.value[leaf, 0] == pytest.approx(y[ancestor_points].mean())
            checked += tree.n_node_samples[leaf] == 0
    assert checked > 0  # some probes did land in empty cells


def _descends_from(tree, node, ancestor):
    while node > ancestor:
        node = tree.parent[node]
    return node == ancestor
