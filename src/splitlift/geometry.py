"""Geometry of subspaces and lift matrices: angles, leakage, conditioning.

Small pure functions with their input checks at the top and no state.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, stats

from ._validation import check_basis, check_finite_matrix


def orthonormal_complement(basis: np.ndarray) -> np.ndarray:
    """Orthonormal basis (d, d - k) of the orthogonal complement of ``span(basis)``.

    Parameters
    ----------
    basis : array-like of shape (d, k)

    Examples
    --------
    >>> import numpy as np
    >>> orthonormal_complement(np.array([[1.0], [0.0]])).round(6).ravel().tolist()
    [0.0, 1.0]
    """
    orthonormal = check_basis(basis)
    d, k = orthonormal.shape
    # a canonical basis, so that equal subspaces give equal complements bit for bit
    # (up to rounding), whatever basis of them was passed
    return canonical_basis(np.eye(d) - orthonormal @ orthonormal.T, d - k)


def canonical_basis(projector: np.ndarray, rank: int) -> np.ndarray:
    """A reproducible orthonormal basis (d, rank) of the range of an orthogonal projector.

    Gram-Schmidt of the projector's columns, longest first (lengths compared
    to 12 digits, ties by index), with positive diagonal: the result depends
    only on the subspace, not on any basis of it, so two computations of one
    subspace that differ by rounding give the same basis up to rounding.

    Parameters
    ----------
    projector : ndarray of shape (d, d)
    rank : int
        Dimension of the range.
    """
    if rank == 0:
        return np.zeros((projector.shape[0], 0))
    order = np.argsort(-np.round(np.diag(projector), 12), kind="stable")
    basis, triangular = np.linalg.qr(projector[:, order[:rank]])
    diagonal = np.abs(np.diag(triangular))
    if diagonal.min() <= 1e-8 * diagonal.max():  # leading columns dependent: pivot fully
        from scipy.linalg import qr

        basis, triangular, _ = qr(projector, pivoting=True)
        basis, triangular = basis[:, :rank], triangular[:rank, :rank]
    return basis * np.sign(np.diag(triangular)) + 0.0  # + 0.0: no negative zeros


def random_rotation(dim: int, generator) -> np.ndarray:
    """A Haar-distributed orthogonal (dim, dim) matrix, from :data:`scipy.stats.ortho_group`.

    ``generator`` is a numpy ``Generator`` or ``RandomState``.

    Examples
    --------
    >>> import numpy as np
    >>> Q = random_rotation(3, np.random.default_rng(0))
    >>> bool(np.allclose(Q @ Q.T, np.eye(3)))
    True
    """
    if dim == 1:  # ortho_group needs dim >= 2; the Haar measure on O(1) is a random sign
        return np.array([[1.0 if generator.random() < 0.5 else -1.0]])
    return stats.ortho_group.rvs(dim, random_state=generator)


def principal_angles(U, V) -> np.ndarray:
    """Principal angles between ``span(U)`` and ``span(V)``, in radians, largest first.

    Parameters
    ----------
    U : array-like of shape (d, k) or (d,)
    V : array-like of shape (d, l) or (d,)
        Any spanning sets; columns are orthonormalised first.

    Returns
    -------
    ndarray of shape (min(k, l),)
        Angles in ``[0, pi/2]``, as :func:`scipy.linalg.subspace_angles`.

    Notes
    -----
    The inputs are checked and orthonormalised here (safely at any
    magnitude, refusing complex or rank-deficient sets). The cosines are the
    singular values of ``Q_U^T Q_V`` and the sines those of the part of one
    basis outside the other's span (Björck & Golub 1973); each angle is
    taken from its sine when below 45 degrees and from its cosine above, so
    small and large angles alike are accurate to rounding (Knyazev &
    Argentati 2002). This is the algorithm of
    :func:`scipy.linalg.subspace_angles`, except that scipy 1.17 matches the
    sine-or-cosine choice to the angles in reverse order, so there an angle
    near 0 beside larger ones comes from an arccos and is good to about
    1e-8 rad only.

    References
    ----------
    Björck, Å. and Golub, G. H. (1973). Numerical methods for computing angles
    between linear subspaces. Mathematics of Computation 27, 579-594.

    Knyazev, A. V. and Argentati, M. E. (2002). Principal angles between
    subspaces in an A-based scalar product: algorithms and perturbation
    estimates. SIAM Journal on Scientific Computing 23, 2008-2040.

    Examples
    --------
    >>> import numpy as np
    >>> angles = principal_angles(np.eye(3)[:, :2], np.array([[1.0], [0.0], [1.0]]))
    >>> float(np.degrees(angles[0])).__round__(6)
    45.0
    """
    left = check_basis(U, "U")
    right = check_basis(V, "V", n_features=left.shape[0])
    if left.shape[1] < right.shape[1]:
        left, right = right, left  # angles are symmetric; project the narrower basis
    overlap = left.T @ right
    cosines = linalg.svdvals(overlap)  # descending: smallest angle first
    sines = linalg.svdvals(right - left @ overlap)  # descending: largest angle first
    from_cosines = np.arccos(np.clip(cosines[::-1], -1.0, 1.0))
    from_sines = np.arcsin(np.clip(sines, -1.0, 1.0))
    return np.where(from_sines < np.pi / 4, from_sines, from_cosines)


#: Relative singular-value tolerance below which unit directions count as dependent.
RANK_TOLERANCE = 1e-10


def row_norms(matrix: np.ndarray) -> np.ndarray:
    """Euclidean norms of the rows, safe from overflow and underflow.

    Each row is divided by its largest absolute entry before squaring
    (the scaling behind ``hypot``), so rows with entries near 1e300 or
    1e-300 get their true norm instead of ``inf`` or 0.

    Parameters
    ----------
    matrix : ndarray of shape (m, d), finite

    Returns
    -------
    ndarray of shape (m,)
        ``inf`` only where the true norm lies beyond the float range.

    Examples
    --------
    >>> import numpy as np
    >>> row_norms(np.array([[3e300, 4e300], [3e-300, 4e-300]])).tolist()
    [5e+300, 5e-300]
    """
    largest = np.max(np.abs(matrix), axis=1)
    safe = np.where(largest > 0, largest, 1.0)
    with np.errstate(over="ignore"):
        return largest * np.linalg.norm(matrix / safe[:, None], axis=1)


def normalise_rows(matrix, name: str = "matrix") -> np.ndarray:
    """Scale a direction matrix so that its row norms sum to one.

    The matrix is first divided by its largest absolute entry, so the result
    does not depend on the overall magnitude (entries near 1e300 or 1e-300
    give the same rows as entries near 1). Rows below about 1e-308 of the
    largest entry cannot be represented after scaling and become zero.

    Parameters
    ----------
    matrix : array-like of shape (m, d)
    name : str, default "matrix"
        How error messages call the matrix.

    Returns
    -------
    ndarray of shape (m, d)

    Examples
    --------
    >>> import numpy as np
    >>> normalise_rows(np.array([[3e300, 4e300], [0.0, 5e300]])).tolist()
    [[0.3, 0.4], [0.0, 0.5]]
    """
    array = check_finite_matrix(matrix, name)
    largest = float(np.max(np.abs(array)))
    if largest == 0:
        raise ValueError(f"the {name} is all zeros; pass at least one non-zero row.")
    rescaled = array / largest
    return rescaled / row_norms(rescaled).sum()


def direction_rank(matrix, tolerance: float = RANK_TOLERANCE) -> int:
    """Numerical rank of the unit directions ``a_i / ‖a_i‖`` of the non-zero rows.

    Rank is a property of the directions, not of their weights: a direction
    with weight 1e-12 spans its line as well as one with weight 1. Judging
    singular values of the unit rows, relative to the largest, keeps tiny
    but deliberate weights (a small ``complement_weight``) from being
    mistaken for dependence, at any overall magnitude.

    Parameters
    ----------
    matrix : ndarray of shape (m, d), finite
    tolerance : float, default 1e-10
        Relative singular-value tolerance.

    Returns
    -------
    int

    Examples
    --------
    >>> import numpy as np
    >>> direction_rank(np.array([[1.0, 0.0], [0.0, 1e-200]]))
    2
    >>> direction_rank(np.array([[1.0, 0.0], [2.0, 0.0]]))
    1
    """
    norms = row_norms(matrix)
    present = (norms > 0) & np.isfinite(norms)
    if not np.any(present):
        return 0
    scaled = matrix[present] / np.max(np.abs(matrix[present]), axis=1, keepdims=True)
    units = scaled / np.linalg.norm(scaled, axis=1, keepdims=True)
    singular = np.linalg.svd(units, compute_uv=False)
    return int(np.sum(singular > tolerance * singular[0]))


def leakage(matrix, reference_basis) -> float:
    """Weight of a direction matrix outside a subspace, ``ε(A, S) = Σ_i ‖P_{S⊥} a_i‖``.

    Parameters
    ----------
    matrix : array-like of shape (m, d)
        Rows are directions. An un-normalised matrix is first scaled so that
        its row norms sum to one (the lift normalisation), which makes the
        leakage scale-free and puts it in ``[0, 1]`` at any magnitude of
        the entries.
    reference_basis : array-like of shape (d, s)
        Columns spanning the subspace ``S``; with no columns (the zero
        subspace) the leakage is 1.

    Returns
    -------
    float

    Examples
    --------
    >>> import numpy as np
    >>> A = np.array([[0.9, 0.0], [0.0, 0.1]])
    >>> round(leakage(A, np.array([1.0, 0.0])), 12)
    0.1
    """
    rows = normalise_rows(matrix)
    basis = check_basis(reference_basis, "reference_basis", n_features=rows.shape[1],
                        allow_empty=True)
    if basis.shape[1] == 0:
        return 1.0
    # a convex combination of per-direction leakages in [0, 1]: scale-free and
    # inside [0, 1] whatever the magnitude of the rows
    weights = row_norms(rows)
    present = weights > 0
    units = rows[present] / weights[present, None]
    outside = np.minimum(row_norms(units - (units @ basis) @ basis.T), 1.0)
    value = np.dot(weights[present], outside) / weights.sum()
    return float(np.clip(value, 0.0, 1.0))


def restricted_singular_value(matrix, reference_basis) -> float:
    """Smallest singular value ``σ_min(A U_S)`` of a normalised lift on a subspace.

    Parameters
    ----------
    matrix : array-like of shape (m, d)
        Scaled first so that its row norms sum to one, as in :func:`leakage`.
    reference_basis : array-like of shape (d, s)
        Columns spanning ``S``; orthonormalised to ``U_S``.

    Returns
    -------
    float
        Zero when some direction of ``S`` is never cut by the lift; NaN for
        the zero subspace (no columns), which has nothing to cut.

    Examples
    --------
    >>> import numpy as np
    >>> round(restricted_singular_value(np.eye(2), np.array([1.0, 0.0])), 12)
    0.5
    """
    rows = normalise_rows(matrix)
    basis = check_basis(reference_basis, "reference_basis", n_features=rows.shape[1],
                        allow_empty=True)
    if basis.shape[1] == 0:
        return float("nan")
    return float(np.linalg.svd(rows @ basis, compute_uv=False)[-1])
