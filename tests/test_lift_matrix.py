"""LiftMatrix construction: normalisation, rank, leakage and equivariance."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import splitlift as sl
from splitlift.lift import spread_directions


@st.composite
def subspaces(draw):
    d = draw(st.integers(2, 7))
    s = draw(st.integers(1, d))
    seed = draw(st.integers(0, 2**31 - 1))
    basis = np.random.default_rng(seed).standard_normal((d, s))
    weight = draw(st.floats(0.001, 0.999))
    return basis, weight


@settings(max_examples=60, deadline=None)
@given(subspaces())
def test_lift_is_normalised_full_rank_and_leaks_its_complement_weight(case):
    basis, weight = case
    lift = sl.LiftMatrix.from_subspace(basis, complement_weight=weight)
    d, s = basis.shape
    assert lift.weights.sum() == pytest.approx(1.0, abs=1e-12)
    assert lift.rank() == d
    expected = weight if s < d else 0.0  # no complement when s = d
    assert lift.leakage(basis) == pytest.approx(expected, abs=1e-10)
    assert 0.0 < lift.restricted_singular_value(basis) <= 1.0


@settings(max_examples=40, deadline=None)
@given(subspaces(), st.integers(0, 2**31 - 1))
def test_rotating_the_subspace_rotates_the_rows(case, seed):
    basis, weight = case
    d = basis.shape[0]
    rotation = np.linalg.qr(np.random.default_rng(seed).standard_normal((d, d)))[0]
    plain = sl.LiftMatrix.from_subspace(basis, complement_weight=weight)
    turned = sl.LiftMatrix.from_subspace(rotation @ basis, complement_weight=weight)
    inside = plain.n_directions - (d - basis.shape[1])
    # directions inside the subspace rotate exactly ...
    np.testing.assert_allclose(turned.matrix[:inside], plain.matrix[:inside] @ rotation.T,
                               atol=1e-10)
    # ... the complement basis may turn within the complement, but its second
    # moment, and hence the whole lift's, rotates
    np.testing.assert_allclose(
        turned.matrix.T @ turned.matrix, rotation @ plain.matrix.T @ plain.matrix @ rotation.T,
        atol=1e-10,
    )


@pytest.mark.parametrize("dim,count", [(2, 8), (3, 12), (4, 16), (5, 5)])
def test_spread_directions_are_unit_full_rank_and_spread(dim, count):
    directions = spread_directions(dim, count)
    assert directions.shape == (count, dim)
    np.testing.assert_allclose(np.linalg.norm(directions, axis=1), 1.0)
    assert np.linalg.matrix_rank(directions) == dim
    coherence = np.abs(directions @ directions.T - np.eye(count)).max()
    assert coherence < 0.95  # no two lines nearly coincide
    np.testing.assert_array_equal(directions, spread_directions(dim, count))  # deterministic


def test_two_dimensional_spread_is_equally_spaced_half_circle():
    directions = spread_directions(2, 4)
    angles = np.degrees(np.arctan2(directions[:, 1], directions[:, 0]))
    np.testing.assert_allclose(angles, [0, 45, 90, 135], atol=1e-12)


def test_eigenvalue_weights_follow_the_power():
    basis = np.eye(3)[:, :2]
    lift = sl.LiftMatrix.from_subspace(
        basis, complement_weight=0.1, n_in_subspace=2, eigenvalues=[4.0, 1.0], weight_power=1.0
    )
    # two basis directions with weights 4:1 sharing 0.9
    np.testing.assert_allclose(lift.weights[:2], [0.72, 0.18])


def test_random_state_turns_the_spread_within_the_subspace():
    basis = np.eye(4)[:, :2]
    a = sl.LiftMatrix.from_subspace(basis, random_state=1)
    b = sl.LiftMatrix.from_subspace(basis, random_state=1)
    c = sl.LiftMatrix.from_subspace(basis, random_state=2)
    np.testing.assert_array_equal(a.matrix, b.matrix)
    assert not np.allclose(a.matrix, c.matrix)
    assert a.leakage(basis) == pytest.approx(0.05)


def test_repeated_form_counts_follow_weights():
    lift = sl.LiftMatrix(np.diag([0.6, 0.3, 0.1]))
    repeated = lift.repeated(13)
    assert repeated.shape == (13, 3)
    counts = [int(np.sum(np.all(np.isclose(repeated, row), axis=1))) for row in np.eye(3)]
    # 3 kept copies plus 10 spare shared 6 : 3 : 1
    assert counts == [7, 4, 2]
    assert np.linalg.matrix_rank(repeated) == 3


@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: sl.LiftMatrix(np.array([[1.0, 0.0], [2.0, 0.0]])), "rank 1 < 2"),
        (lambda: sl.LiftMatrix(np.array([[1.0, 0.0], [0.0, 0.0]])), "row 1 is zero"),
        (lambda: sl.LiftMatrix.from_subspace(np.eye(3)[:, :1], complement_weight=0.0),
         "strictly between 0 and 1"),
        (lambda: sl.LiftMatrix.from_subspace(np.eye(3)[:, :1], complement_weight=1.5),
         "strictly between 0 and 1"),
        (lambda: sl.LiftMatrix.from_subspace(np.eye(3)[:, :2], n_in_subspace=1),
         "n_in_subspace"),
        (lambda: sl.LiftMatrix(np.eye(2)).repeated(1), "n_columns"),
    ],
)
def test_bad_lift_input_is_a_clear_error(call, message):
    with pytest.raises(ValueError, match=message):
        call()


@pytest.mark.parametrize("magnitude", [1e300, 1e-200, 1e-300])
def test_lift_matrix_at_extreme_magnitudes_is_the_same_lift(magnitude):
    # normalisation to Σ‖a_i‖ = 1 (DESIGN) removes any positive factor
    A = np.array([[3.0, 4.0], [0.0, 5.0]])
    np.testing.assert_allclose(sl.LiftMatrix(A * magnitude).matrix, A / 10, rtol=1e-15)


@pytest.mark.parametrize("weight", [1e-11, 1e-12, 1e-100, 1e-300])
def test_tiny_complement_weights_give_a_full_rank_lift(weight):
    # the documented range is (0, 1): the complement rows keep their (tiny) weight and the
    # lift stays of rank d; its leakage is the complement weight (DESIGN)
    basis = np.linalg.qr(np.random.default_rng(5).standard_normal((4, 2)))[0]
    lift = sl.LiftMatrix.from_subspace(basis, complement_weight=weight)
    assert lift.rank() == 4
    np.testing.assert_allclose(np.sort(lift.weights)[:2], weight / 2, rtol=1e-12)
    assert lift.leakage(basis) == pytest.approx(weight, abs=1e-15)


def test_extreme_weight_power_has_its_limiting_weights_instead_of_overflowing():
    # weight of u = c1 e1 + c2 e2 is ∝ c1² 10^p + c2² 1^p; at p = 1e5, 10^p overflows, but
    # relative to the largest the limit is exact: ∝ c1² = cos²(πj/8) for the eight lines
    # of the half circle, whose cos² sum to 4 (closed form), sharing 1 - 0.1 = 0.9
    lift = sl.LiftMatrix.from_subspace(np.eye(3)[:, :2], complement_weight=0.1,
                                       eigenvalues=[10.0, 1.0], weight_power=1e5)
    expected = 0.9 * np.cos(np.pi * np.arange(8) / 8) ** 2 / 4
    np.testing.assert_allclose(lift.weights[:8], expected, rtol=1e-12)
    assert np.all(np.isfinite(lift.matrix)) and lift.rank() == 3


def test_apply_near_the_float_limit_is_exact_where_representable():
    # reference value in exact arithmetic: rows (1, 1)/(2√2) and (1, -1)/(2√2) applied to
    # (1.5e308, 1.5e308) - (-1.5e308, -1.5e308), divided by scale 4: (3e308/4)(2/(2√2)) and 0
    lift = sl.LiftMatrix([[1.0, 1.0], [1.0, -1.0]], input_mean=[-1.5e308, -1.5e308],
                         input_scale=[4.0, 4.0])
    lifted = lift.apply([[1.5e308, 1.5e308]])
    # tolerance: a few eps of Σ|terms| = 0.75e308 / √2, the dot-product rounding bound
    np.testing.assert_allclose(lifted, [[0.75e308 / np.sqrt(2), 0.0]], rtol=1e-15,
                               atol=1e-15 * 0.75e308 / np.sqrt(2))
