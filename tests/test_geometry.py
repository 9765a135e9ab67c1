"""Principal angles, leakage and restricted singular values."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy.linalg import subspace_angles

import splitlift as sl

finite = st.floats(-10, 10, allow_nan=False, allow_infinity=False)


@pytest.mark.parametrize("k,l", [(1, 1), (2, 3), (3, 2), (4, 4)])
def test_principal_angles_match_scipy(k, l):
    # scipy.linalg.subspace_angles is the reference (same definition and order).
    generator = np.random.default_rng(k * 10 + l)
    U, V = generator.standard_normal((7, k)), generator.standard_normal((7, l))
    expected = subspace_angles(U, V)
    # When k + l > d the subspaces meet (dimension count), so the k + l - d smallest
    # angles are exactly 0. Beside larger angles, scipy 1.17 takes those from arccos
    # of a cosine near 1, accurate only to about sqrt(4 eps) = 3e-8 (arccos(1 - 2 eps));
    # the exact value replaces it here.
    meeting = max(0, k + l - 7)
    if meeting:
        assert np.all(expected[-meeting:] < np.sqrt(4 * np.finfo(float).eps))
        expected[-meeting:] = 0.0
    np.testing.assert_allclose(sl.principal_angles(U, V), expected, atol=1e-12)


@pytest.mark.parametrize("t", [1e-7, 0.3, 1.2])
def test_principal_angles_of_subspaces_sharing_a_line(t):
    # span(e1, e2) and span(e1, cos t e2 + sin t e3) share e1 and meet at angle t
    # otherwise (closed form by construction): the angles are exactly (t, 0), the zero
    # one to rounding even beside a large angle.
    U = np.eye(4)[:, :2]
    V = np.column_stack([np.eye(4)[:, 0], [0.0, np.cos(t), np.sin(t), 0.0]])
    angles = sl.principal_angles(U, V)
    np.testing.assert_allclose(angles[0], t, rtol=1e-12)
    assert angles[1] < 1e-15


def test_principal_angles_closed_form_in_the_plane():
    # Two lines at angle t in R^2 have the single principal angle t.
    for t in [0.0, 1e-9, 0.3, np.pi / 4, 1.2, np.pi / 2]:
        angle = sl.principal_angles([1.0, 0.0], [np.cos(t), np.sin(t)])
        assert angle.shape == (1,)
        assert abs(angle[0] - t) < 1e-12


def test_small_angles_keep_full_accuracy():
    # arccos alone would return 0 for an angle of 1e-10; the sine branch does not.
    angle = sl.principal_angles([1.0, 0.0, 0.0], [1.0, 1e-10, 0.0])[0]
    assert abs(angle - 1e-10) < 1e-20


def test_leakage_worked_example():
    # Rows (3, 4) and (0, 1) against the x-axis: total norm 6, outside 4 + 1.
    A = np.array([[3.0, 4.0], [0.0, 1.0]])
    assert sl.leakage(A, [1.0, 0.0]) == pytest.approx(5.0 / 6.0)
    assert sl.leakage(10 * A, [1.0, 0.0]) == pytest.approx(5.0 / 6.0)  # scale-free


def test_restricted_singular_value_worked_example():
    # Normalised A = diag(1, 3)/4; on span(e1) the singular value is 1/4.
    assert sl.restricted_singular_value(np.diag([1.0, 3.0]), [1.0, 0.0]) == pytest.approx(0.25)
    # on the whole space it is the smallest singular value, 1/4 as well
    assert sl.restricted_singular_value(np.diag([1.0, 3.0]), np.eye(2)) == pytest.approx(0.25)


@settings(max_examples=60, deadline=None)
@given(arrays(float, (5, 4), elements=finite), arrays(float, (4, 2), elements=finite))
def test_leakage_is_between_zero_and_one(matrix, basis):
    if np.linalg.norm(matrix) < 1e-6 or np.linalg.matrix_rank(basis) < 2:
        return
    value = sl.leakage(matrix, basis)
    assert -1e-12 <= value <= 1 + 1e-12


def test_orthonormal_complement_is_orthogonal_and_complete():
    generator = np.random.default_rng(3)
    basis = generator.standard_normal((6, 2))
    complement = sl.orthonormal_complement(basis)
    assert complement.shape == (6, 4)
    np.testing.assert_allclose(complement.T @ complement, np.eye(4), atol=1e-12)
    np.testing.assert_allclose(basis.T @ complement, 0, atol=1e-12)


@pytest.mark.parametrize(
    "call",
    [
        lambda: sl.principal_angles(np.ones((3, 1)), np.ones((4, 1))),
        lambda: sl.principal_angles([[1.0, 2.0], [2.0, 4.0]], [1.0, 0.0]),
        lambda: sl.leakage(np.zeros((2, 2)), [1.0, 0.0]),
        lambda: sl.leakage([[np.nan, 1.0]], [1.0, 0.0]),
        lambda: sl.leakage(np.eye(2), [1.0, 0.0, 0.0]),
    ],
    ids=["row-mismatch", "dependent-columns", "zero-matrix", "nan", "basis-rows"],
)
def test_bad_geometry_input_is_a_clear_error(call):
    with pytest.raises(ValueError, match=r"(rows|dependent|zeros|NaN|features)"):
        call()


@pytest.mark.parametrize("magnitude", [1e300, 1e-161, 1e-200, 1e-300, 1e-320])
def test_leakage_of_a_scaled_matrix_is_that_of_the_matrix(magnitude):
    # A = I/2 against span(e1): one of two equal rows lies outside, so ε = 1/2 exactly
    # (the definition in DESIGN); scaling A by any positive factor cannot change it.
    A = np.eye(2) / 2
    assert sl.leakage(A * magnitude, [1.0, 0.0]) == 0.5
    assert sl.restricted_singular_value(A * magnitude, [1.0, 0.0]) == 0.5


def test_principal_angles_of_bases_at_extreme_magnitudes():
    # the 45-degree worked example of the docstring, with the bases at 1e300 and 1e-300
    angles = sl.principal_angles(np.eye(3)[:, :2] * 1e300, np.array([[1.0], [0.0], [1.0]]) * 1e-300)
    assert float(np.degrees(angles[0])) == pytest.approx(45.0, abs=1e-12)
