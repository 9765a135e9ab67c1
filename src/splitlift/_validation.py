"""Input checks shared by every public entry point.

Each check raises ``ValueError`` with a message that names the problem and
the fix, so that a user's mistake never surfaces as a numerical traceback.
"""

from __future__ import annotations

from numbers import Integral, Real

import numpy as np


def check_finite_matrix(matrix, name: str, *, ndim: int = 2) -> np.ndarray:
    """Return ``matrix`` as a float array of ``ndim`` dimensions with finite entries."""
    try:
        array = np.asarray(matrix, dtype=float)
    except (TypeError, ValueError) as error:
        raise ValueError(
            f"{name} must be numeric; could not convert it to floats ({error})."
        ) from None
    if array.ndim != ndim:
        raise ValueError(
            f"{name} must be a {ndim}-D array, got shape {array.shape}; "
            + ("reshape a single column with .reshape(-1, 1)." if ndim == 2 else "flatten it.")
        )
    if array.size == 0:
        raise ValueError(f"{name} is empty (shape {array.shape}); pass at least one entry.")
    if not np.all(np.isfinite(array)):
        raise ValueError(
            f"{name} contains NaN or infinite values; remove or impute them before fitting."
        )
    return array


def check_basis(basis, name: str = "basis", n_features: int | None = None,
                allow_empty: bool = False) -> np.ndarray:
    """Return an orthonormal basis (d, k) for the column span of ``basis``.

    A 1-D input is read as a single direction; with ``allow_empty`` a
    (d, 0) array stands for the zero subspace. Columns are orthonormalised
    (Gram-Schmidt order, so an orthonormal input comes back unchanged up to
    rounding); a rank-deficient set is an error.
    """
    array = np.asarray(basis, dtype=float)
    if array.ndim == 1:
        array = array[:, None]
    if allow_empty and array.ndim == 2 and array.shape[1] == 0 and array.shape[0] > 0:
        if n_features is not None and array.shape[0] != n_features:
            raise ValueError(f"{name} has {array.shape[0]} rows for {n_features} features.")
        return array  # the zero subspace
    array = check_finite_matrix(array, name)
    if n_features is not None and array.shape[0] != n_features:
        raise ValueError(
            f"{name} has {array.shape[0]} rows but the data or lift has {n_features} features; "
            f"pass a (n_features, k) matrix whose columns span the subspace."
        )
    if array.shape[1] > array.shape[0]:
        raise ValueError(
            f"{name} has more columns ({array.shape[1]}) than rows ({array.shape[0]}); "
            "pass the subspace as columns of a (n_features, k) matrix."
        )
    singular = np.linalg.svd(array, compute_uv=False)
    tolerance = max(array.shape) * np.finfo(float).eps * max(singular[0], 1e-300)
    if singular[-1] <= tolerance:
        raise ValueError(
            f"the columns of {name} are linearly dependent (rank "
            f"{int(np.sum(singular > tolerance))} < {array.shape[1]}); drop the redundant columns."
        )
    if np.allclose(array.T @ array, np.eye(array.shape[1]), rtol=0, atol=1e-12):
        return array  # already orthonormal: keep it bit for bit (saved files round-trip)
    # QR with a positive diagonal is unique, so rotating the input rotates the basis
    orthonormal, triangular = np.linalg.qr(array)
    return orthonormal * np.sign(np.diag(triangular))


def check_fraction(value, name: str) -> float:
    """Check that ``value`` is a real number strictly between 0 and 1."""
    if isinstance(value, bool) or not isinstance(value, Real) or not 0.0 < float(value) < 1.0:
        raise ValueError(f"{name} must be a number strictly between 0 and 1, got {value!r}.")
    return float(value)


def check_dim(dim, n_features: int, name: str = "dim") -> int:
    """Check an integer subspace dimension against the number of features."""
    if isinstance(dim, bool) or not isinstance(dim, Integral):
        raise ValueError(f"{name} must be a positive integer, got {dim!r}.")
    if dim < 1:
        raise ValueError(f"{name} must be at least 1, got {dim}.")
    if dim > n_features:
        raise ValueError(
            f"{name}={dim} exceeds the number of features (n_features = {n_features}); "
            f"choose {name} <= {n_features}."
        )
    return int(dim)


def check_sample_count(n_samples: int, minimum: int = 2) -> None:
    """Refuse data sets too small to estimate anything."""
    if n_samples < minimum:
        raise ValueError(
            f"n_samples = {n_samples} is too few: at least {minimum} rows are needed; "
            "pass more data."
        )
