"""Property tests (hypothesis) of the geometry, the lift and its files, and stability.

Magnitudes range over the whole float scale (1e-300 to 1e300): a result must not
depend on the units a matrix happens to be written in, and must stay inside its
mathematical range. Every check names its reference beside it.
"""

from datetime import timedelta
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.linalg import orth, subspace_angles

import splitlift as sl
from splitlift.lift import lifted_features

FAST = settings(deadline=timedelta(seconds=2), max_examples=150)
FLOAT_MAX = Fraction(np.finfo(float).max)
EPS = np.finfo(float).eps

seeds = st.integers(0, 2**32 - 1)
magnitudes = st.integers(-300, 300)  # decimal exponents of an overall scale


@st.composite
def direction_matrices(draw, max_rows=6, max_features=5):
    """A Gaussian (m, d) matrix with rows spread over 1e-20..1e20 and some rows zero."""
    m = draw(st.integers(1, max_rows))
    d = draw(st.integers(1, max_features))
    generator = np.random.default_rng(draw(seeds))
    matrix = generator.standard_normal((m, d)) * 10.0 ** generator.integers(-20, 21, (m, 1))
    zero_rows = generator.random(m) < 0.15
    zero_rows[generator.integers(m)] = False  # never all zero
    matrix[zero_rows] = 0.0
    return matrix


def at_magnitude(matrix, exponent):
    """Every row moved by 10**exponent, each kept within 1e-300..1e300 (zero rows stay zero).

    Rows pushed past either end are clipped there, so compare with
    ``at_magnitude(...) * 10.0**-exponent``, the same matrix at unit scale.
    """
    largest = np.max(np.abs(matrix), axis=1, keepdims=True)
    row_exponent = np.floor(np.log10(np.where(largest > 0, largest, 1.0)))
    target = np.clip(row_exponent + exponent, -300, 300)
    return matrix * 10.0**-row_exponent * 10.0**target


@st.composite
def subspace_bases(draw, d, allow_empty=True):
    """A random (d, s) spanning set, s from 0 (or 1) to d, at a random magnitude."""
    s = draw(st.integers(0 if allow_empty else 1, d))
    generator = np.random.default_rng(draw(seeds))
    return generator.standard_normal((d, s)) * 10.0 ** draw(st.integers(-150, 150))


def reference_leakage(matrix, basis):
    """ε = Σ‖(I - QQᵀ) a_i‖ / Σ‖a_i‖ with Q = scipy.linalg.orth(basis) (DESIGN's definition).

    Plain numpy norms: only called on matrices whose entries lie within 1e±150.
    """
    outside = matrix if basis.shape[1] == 0 else matrix - (matrix @ orth(basis)) @ orth(basis).T
    return np.linalg.norm(outside, axis=1).sum() / np.linalg.norm(matrix, axis=1).sum()


# ------------------------------------------------------------------- leakage
@FAST
@given(st.data(), direction_matrices(), magnitudes)
def test_leakage_lies_in_unit_interval_and_ignores_magnitude(data, matrix, exponent):
    basis = data.draw(subspace_bases(matrix.shape[1]))
    scaled = at_magnitude(matrix, exponent)
    value = sl.leakage(scaled, basis)
    assert 0.0 <= value <= 1.0
    # the definition evaluated at unit scale with scipy.linalg.orth's basis is the reference
    unit = scaled * 10.0**-exponent
    assert value == pytest.approx(reference_leakage(unit, basis), abs=1e-9)


@settings(deadline=timedelta(seconds=2), max_examples=60)
@given(st.data(), direction_matrices(), magnitudes, magnitudes)
def test_rescaling_matrix_or_basis_changes_neither_leakage_nor_conditioning(
        data, matrix, matrix_exponent, basis_exponent):
    # leakage and σ_min(A U_S) of the normalised lift are invariant under A -> cA, B -> cB
    # (DESIGN: rows normalised to Σ‖a_i‖ = 1; U_S depends on span(B) only)
    basis = data.draw(subspace_bases(matrix.shape[1], allow_empty=False))
    scaled_matrix = at_magnitude(matrix, matrix_exponent)
    unit = scaled_matrix * 10.0**-matrix_exponent
    plain_leakage = sl.leakage(unit, basis)
    plain_conditioning = sl.restricted_singular_value(unit, basis)
    scaled_basis = (basis / np.max(np.abs(basis))) * 10.0**basis_exponent
    assert sl.leakage(scaled_matrix, scaled_basis) == pytest.approx(plain_leakage, abs=1e-12)
    assert sl.restricted_singular_value(scaled_matrix, scaled_basis) == pytest.approx(
        plain_conditioning, abs=1e-12)


# ---------------------------------------------------------- principal angles
@st.composite
def subspace_pairs(draw, meeting_allowed):
    d = draw(st.integers(2, 7))
    k = draw(st.integers(1, d - 1))
    l_max = d if meeting_allowed else d - k
    l_count = draw(st.integers(1, max(1, l_max)))
    generator = np.random.default_rng(draw(seeds))
    return generator.standard_normal((d, k)), generator.standard_normal((d, l_count))


@settings(deadline=timedelta(seconds=2), max_examples=100)
@given(subspace_pairs(meeting_allowed=False), magnitudes, magnitudes)
def test_principal_angles_match_scipy_at_any_magnitude(pair, exponent_u, exponent_v):
    # Reference: scipy.linalg.subspace_angles on the unscaled bases. Pairs with k + l <= d
    # only: when the subspaces must meet, scipy reports the zero angles via arccos, good
    # to about 1e-8 only (see test_geometry.test_principal_angles_match_scipy).
    U, V = pair
    angles = sl.principal_angles(U * 10.0**exponent_u, V * 10.0**exponent_v)
    np.testing.assert_allclose(angles, subspace_angles(U, V), atol=1e-10)
    assert np.all((angles >= 0) & (angles <= np.pi / 2)) and np.all(np.diff(angles) <= 0)


@settings(deadline=timedelta(seconds=2), max_examples=60)
@given(subspace_pairs(meeting_allowed=True), magnitudes, magnitudes)
def test_principal_angles_ignore_the_scale_of_either_basis(pair, exponent_u, exponent_v):
    # Angles depend on the spans only (Björck & Golub 1973), so scaling either basis by any
    # power of ten leaves them unchanged; k + l - d of them are exactly 0 (dimension count).
    U, V = pair
    plain = sl.principal_angles(U, V)
    scaled = sl.principal_angles(U * 10.0**exponent_u, V * 10.0**exponent_v)
    # Angles below 45 degrees come from sines and the others from cosines, both accurate
    # to rounding (Knyazev & Argentati 2002); tolerance 1e-12 rad.
    tolerance = 1e-12
    np.testing.assert_allclose(scaled, plain, atol=tolerance)
    meeting = max(0, U.shape[1] + V.shape[1] - U.shape[0])
    if meeting:
        assert np.all(scaled[-meeting:] < tolerance)


# ---------------------------------------------------------------- LiftMatrix
@settings(deadline=timedelta(seconds=2), max_examples=60)
@given(st.integers(2, 6), st.data(), st.floats(-300, np.log10(0.999)))
def test_every_complement_weight_gives_a_full_rank_lift_with_that_leakage(d, data, log_weight):
    # DESIGN: from_subspace puts exactly complement_weight outside S, and rank(A) = d.
    basis = data.draw(subspace_bases(d, allow_empty=False))
    weight = 10.0**log_weight
    lift = sl.LiftMatrix.from_subspace(basis, complement_weight=weight)
    s = basis.shape[1]
    assert lift.rank() == d
    assert lift.weights.sum() == pytest.approx(1.0, abs=1e-12)
    assert lift.leakage(basis) == pytest.approx(weight if s < d else 0.0, abs=1e-12)
    assert lift.restricted_singular_value(basis) > 0


@settings(deadline=timedelta(seconds=2), max_examples=60)
@given(direction_matrices(max_rows=8, max_features=4), magnitudes)
def test_lift_normalisation_ignores_magnitude(matrix, exponent):
    # the normalised matrix A / Σ‖a_i‖ is the same for cA (DESIGN's normalisation)
    scaled = at_magnitude(matrix, exponent)
    unit = scaled * 10.0**-exponent
    present = np.any(matrix != 0, axis=1)
    units = unit[present] / np.linalg.norm(unit[present], axis=1, keepdims=True)
    # numpy.linalg.matrix_rank of the unit directions is the reference for the rank rule
    if np.linalg.matrix_rank(units) < matrix.shape[1] or not np.all(present):
        with pytest.raises(ValueError, match="rank|zero"):
            sl.LiftMatrix(scaled)
        return
    np.testing.assert_allclose(sl.LiftMatrix(scaled).matrix, sl.LiftMatrix(unit).matrix,
                               rtol=1e-12, atol=1e-300)


# ------------------------------------------------------------ finite transform
@st.composite
def standardised_lifts_and_data(draw):
    """A lift, with or without standardisation, and rows of X at any finite magnitude.

    In the "edge" mode X sits near ±1.7e308 and the mean on the other side, so
    ``X - mean`` overflows although the standardised, lifted values may not.
    """
    d = draw(st.integers(1, 4))
    n = draw(st.integers(1, 3))
    generator = np.random.default_rng(draw(seeds))
    basis = generator.standard_normal((d, draw(st.integers(1, d))))
    if draw(st.sampled_from(["spread", "edge"])) == "edge":
        signs = generator.choice([-1.0, 1.0], d)
        X = signs * generator.uniform(0.5, 1.7, (n, d)) * 1e308
        mean = -signs * generator.uniform(0.5, 1.7, d) * 1e308
        scale = generator.uniform(1.0, 10.0 ** draw(st.integers(0, 3)), d)
    else:
        X = generator.uniform(-1.7, 1.7, (n, d)) * 10.0 ** generator.integers(-300, 308, (n, d))
        mean = scale = None
        if draw(st.booleans()):
            mean = generator.standard_normal(d) * 10.0 ** draw(st.integers(-300, 307))
            scale = generator.uniform(0.5, 2.0, d) * 10.0 ** draw(st.integers(-300, 300))
    lift = sl.LiftMatrix.from_subspace(basis, complement_weight=0.1, input_mean=mean,
                                       input_scale=scale)
    return lift, X


def exact_lift(X, matrix, mean, scale):
    """``((x - mean) / scale) · a_j`` and ``Σ|terms|`` in exact rational arithmetic (fractions)."""
    d = X.shape[1]
    mean = np.zeros(d) if mean is None else mean
    scale = np.ones(d) if scale is None else scale
    values, sizes = [], []
    for row in X:
        z = [(Fraction(x) - Fraction(m)) / Fraction(s) for x, m, s in zip(row, mean, scale,
                                                                          strict=True)]
        terms = [[Fraction(a) * v for a, v in zip(direction, z, strict=True)]
                 for direction in matrix]
        values.append([sum(t) for t in terms])
        sizes.append([sum(abs(x) for x in t) for t in terms])
    return values, sizes


@settings(deadline=timedelta(seconds=2), max_examples=120)
@given(standardised_lifts_and_data())
def test_transform_of_finite_rows_is_finite_and_exact_or_refused(case):
    # Reference: the same formula in exact rational arithmetic (fractions.Fraction).
    lift, X = case
    matrix = lift.output_matrix()
    exact, sizes = exact_lift(X, matrix, lift.input_mean, lift.input_scale)
    largest = max(abs(value) for row in exact for value in row)
    if largest > FLOAT_MAX * (1 + Fraction(1, 10**10)):
        with pytest.raises(ValueError, match="exceed the float range"):
            lift.apply(X)
        return
    if largest > FLOAT_MAX * (1 - Fraction(1, 10**10)):
        return  # at the very edge of the range either answer is honest
    lifted = lift.apply(X)
    assert np.all(np.isfinite(lifted))
    # error bound: a few d·eps of Σ|terms| (dot-product rounding, Higham 2002, ch. 3),
    # plus the subnormal floor of the exact power-of-two rescaling, plus half the
    # subnormal spacing 2^-1074 for each of the 2 d + 2 operations, since a result
    # below the normal range is rounded on that absolute grid (gradual underflow,
    # Higham 2002, sec. 2.1)
    bound_scale = max(np.max(np.abs(X)), 0.0 if lift.input_mean is None
                      else np.max(np.abs(lift.input_mean)))
    inverse_scale = 1 if lift.input_scale is None else 1 / Fraction(np.min(lift.input_scale))
    floor = (64 * Fraction(2) ** -1070 * Fraction(bound_scale) * inverse_scale
             + (2 * X.shape[1] + 2) * Fraction(2) ** -1075)
    for got_row, exact_row, size_row in zip(lifted, exact, sizes, strict=True):
        for got, want, size in zip(got_row, exact_row, size_row, strict=True):
            assert abs(Fraction(got) - want) <= 16 * X.shape[1] * Fraction(EPS) * size + floor


@settings(deadline=timedelta(seconds=2), max_examples=40)
@given(st.integers(1, 5), seeds, st.integers(-300, 300))
def test_transform_matches_the_direct_formula_on_ordinary_data(d, seed, exponent):
    # where the direct formula does not overflow, the lift returns exactly what it gives
    generator = np.random.default_rng(seed)
    matrix = sl.LiftMatrix(generator.standard_normal((d + 2, d))).matrix
    X = generator.standard_normal((5, d)) * 10.0 ** min(exponent, 300)
    np.testing.assert_array_equal(lifted_features(X, matrix), X @ matrix.T)


# ----------------------------------------------------------------- save/load
names = st.text(min_size=1, max_size=8)
json_values = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6),
                        st.floats(allow_nan=False, allow_infinity=False), st.text(max_size=6))
reserved = {"weight_form", "n_columns"}  # keys the lift reads back (tested elsewhere)


@st.composite
def lifts(draw):
    d = draw(st.integers(1, 5))
    generator = np.random.default_rng(draw(seeds))
    feature_names = draw(st.none() | st.lists(names, min_size=d, max_size=d, unique=True))
    metadata = draw(st.dictionaries(st.text(max_size=6).filter(lambda k: k not in reserved),
                                    json_values, max_size=3))
    mean = scale = None
    if draw(st.booleans()):
        mean = generator.standard_normal(d) * 10.0 ** draw(magnitudes)
        scale = generator.uniform(0.1, 10, d) * 10.0 ** draw(magnitudes)
    if draw(st.booleans()):  # around a subspace, with any complement weight
        basis = generator.standard_normal((d, draw(st.integers(0, d))))
        weight = 10.0 ** draw(st.floats(-300, np.log10(0.999)))
        return sl.LiftMatrix.from_subspace(basis, complement_weight=weight,
                                           feature_names=feature_names, metadata=metadata,
                                           input_mean=mean, input_scale=scale,
                                           random_state=draw(st.none() | seeds))
    matrix = generator.standard_normal((d + draw(st.integers(0, 3)), d))
    return sl.LiftMatrix(matrix * 10.0 ** draw(magnitudes), feature_names=feature_names,
                         metadata=metadata, input_mean=mean, input_scale=scale)


@settings(deadline=timedelta(seconds=5), max_examples=40,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(lifts())
def test_save_then_load_gives_the_same_lift(tmp_path, lift):
    # the file is rewritten by every example, so one tmp_path serves them all
    path = tmp_path / "lift.npz"
    lift.save(path)
    loaded = sl.LiftMatrix.load(path)
    np.testing.assert_array_equal(loaded.matrix, lift.matrix)
    for name in ("subspace_basis", "input_mean", "input_scale"):
        if getattr(lift, name) is None:
            assert getattr(loaded, name) is None
        else:
            np.testing.assert_array_equal(getattr(loaded, name), getattr(lift, name))
    assert loaded.feature_names == lift.feature_names
    assert loaded.metadata == lift.metadata
    X = np.random.default_rng(0).standard_normal((3, lift.n_features))
    if lift.input_scale is not None:  # data in the units the lift was standardised with
        X = lift.input_mean + lift.input_scale * X
    np.testing.assert_array_equal(loaded.apply(X), lift.apply(X))
    assert [p.name for p in tmp_path.iterdir()] == ["lift.npz"]  # no temporaries left


# ----------------------------------------------------------------- stability
@settings(deadline=timedelta(seconds=20), max_examples=15)
@given(seeds, seeds)
def test_stability_with_the_same_seed_gives_the_same_result(data_seed, boot_seed):
    generator = np.random.default_rng(data_seed)
    X = generator.standard_normal((80, 3))
    y = X[:, 0] + 0.3 * generator.standard_normal(80)
    estimator = sl.SlicedInverse(dim=1, n_slices=4)
    first = sl.stability(estimator, X, y, n_boot=4, random_state=boot_seed, progress=False)
    second = sl.stability(estimator, X, y, n_boot=4, random_state=boot_seed, progress=False)
    np.testing.assert_array_equal(first.angles, second.angles)
    np.testing.assert_array_equal(first.leakage, second.leakage)
    assert first.n_failed == second.n_failed
    assert np.all((first.angles >= 0) & (first.angles <= np.pi / 2))
    assert np.all((first.leakage >= 0) & (first.leakage <= 1))
