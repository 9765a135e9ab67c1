"""Input checks shared by every public entry point.

Each check raises ``ValueError`` with a message that names the problem and
the fix, so that a user's mistake never surfaces as a numerical traceback.
Checks are grouped by what they guard: numeric arrays, subspaces, scalar
parameters, names and metadata.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Mapping
from numbers import Integral, Real

import numpy as np

# ------------------------------------------------------------ numeric arrays


def as_real_array(value, name: str) -> np.ndarray:
    """Return ``value`` as a float array; complex or non-numeric input is refused.

    NumPy would silently drop an imaginary part when casting to float; a
    user who passes complex numbers almost always meant something else, so
    the cast is refused instead.
    """
    try:
        raw = np.asarray(value)
    except (TypeError, ValueError) as error:
        raise _not_numeric(name, error) from None
    if raw.dtype.kind == "c":
        raise _complex(name)
    try:
        return raw.astype(float, copy=False)
    except (TypeError, ValueError) as error:
        # an object array holding Python complex numbers fails the cast
        if raw.dtype == object and any(
                isinstance(entry, complex | np.complexfloating) for entry in raw.ravel()):
            raise _complex(name) from None
        raise _not_numeric(name, error) from None


def _not_numeric(name: str, error: Exception) -> ValueError:
    return ValueError(f"{name} must be numeric; could not convert it to floats ({error}).")


def _complex(name: str) -> ValueError:
    return ValueError(
        f"{name} is complex; splitlift works with real numbers only. Pass the real "
        f"part ({name}.real) or the magnitude (abs({name})) if that is what you mean."
    )


def check_finite_matrix(matrix, name: str, *, ndim: int = 2) -> np.ndarray:
    """Return ``matrix`` as a real float array of ``ndim`` dimensions with finite entries."""
    array = as_real_array(matrix, name)
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


def check_n_features(n_columns: int, n_features: int, name: str = "X",
                     expected_by: str = "the lift was built for") -> None:
    """Refuse data whose number of columns differs from what a fitted object expects.

    ``expected_by`` completes "... but <expected_by> <n_features> features".
    """
    if n_columns != n_features:
        raise ValueError(
            f"{name} has {n_columns} columns but {expected_by} {n_features} features; "
            "pass the same columns, in the same order, as at fit time."
        )


def check_response(y, n_samples: int) -> np.ndarray:
    """Return ``y`` as a 1-D array with one entry per row of the data.

    A numeric response must be real and finite; class labels (strings,
    booleans, other non-numeric values) pass as they are. A single column
    ``(n, 1)`` is flattened.
    """
    response = np.asarray(y)
    if response.ndim == 2 and response.shape[1] == 1:
        response = response.ravel()
    if response.ndim != 1 or response.shape[0] != n_samples:
        raise ValueError(
            f"y must be a 1-D array with one entry per row of X ({n_samples}), got shape "
            f"{response.shape}."
        )
    if response.dtype.kind == "c":
        raise ValueError("y is complex; pass a real response (y.real) or class labels.")
    if response.dtype.kind == "f" and not np.all(np.isfinite(response)):
        raise ValueError("y contains NaN or infinite values; drop or impute those rows.")
    return response


# ----------------------------------------------------------------- subspaces


def check_basis(basis, name: str = "basis", n_features: int | None = None,
                allow_empty: bool = False) -> np.ndarray:
    """Return an orthonormal basis (d, k) for the column span of ``basis``.

    A 1-D input is read as a single direction; with ``allow_empty`` a
    (d, 0) array stands for the zero subspace. Columns are orthonormalised
    (Gram-Schmidt order, so an orthonormal input comes back unchanged up to
    rounding); a rank-deficient set is an error. Rank is judged after
    dividing by the largest entry, so it does not depend on the overall
    magnitude of the columns (entries near 1e300 or 1e-300 work alike).
    """
    array = as_real_array(basis, name)
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
    largest = float(np.max(np.abs(array)))
    if largest == 0:
        raise ValueError(f"{name} is all zeros; pass columns that span the subspace.")
    if largest <= 1.0 and np.allclose(array.T @ array, np.eye(array.shape[1]),
                                      rtol=0, atol=1e-12):
        return array  # already orthonormal: keep it bit for bit (saved files round-trip)
    rescaled = array / largest
    singular = np.linalg.svd(rescaled, compute_uv=False)
    tolerance = max(array.shape) * np.finfo(float).eps * singular[0]
    if singular[-1] <= tolerance:
        raise ValueError(
            f"the columns of {name} are linearly dependent (rank "
            f"{int(np.sum(singular > tolerance))} < {array.shape[1]}); drop the redundant columns."
        )
    # QR with a positive diagonal is unique, so rotating the input rotates the basis
    orthonormal, triangular = np.linalg.qr(rescaled)
    return orthonormal * np.sign(np.diag(triangular))


# --------------------------------------------------------- scalar parameters


def check_fraction(value, name: str) -> float:
    """Check that ``value`` is a real number strictly between 0 and 1."""
    if isinstance(value, bool) or not isinstance(value, Real) or not 0.0 < float(value) < 1.0:
        raise ValueError(f"{name} must be a number strictly between 0 and 1, got {value!r}.")
    return float(value)


def check_finite_real(value, name: str) -> float:
    """Check that ``value`` is a finite real number (not a bool, NaN or infinity)."""
    if isinstance(value, bool) or not isinstance(value, Real) or not np.isfinite(float(value)):
        raise ValueError(f"{name} must be a finite real number, got {value!r}.")
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


# ------------------------------------------------------ names and metadata


def check_feature_names(names, n_features: int, name: str = "feature_names") -> list[str] | None:
    """Return the names of ``n_features`` input columns as a list of unique strings.

    ``None`` passes through (no names). A bare string is refused rather than
    split into letters; so are non-scalar entries, a wrong count and
    duplicates (a name must identify one column, in loadings and when a
    lift picks its columns from a table).
    """
    if names is None:
        return None
    if isinstance(names, str | bytes):
        raise ValueError(
            f"{name} is a single string ({names!r}); pass a list with one name per "
            f"column, e.g. [{names!r}] for one column."
        )
    if isinstance(names, Mapping) or not _is_sequence(names):
        raise ValueError(
            f"{name} must be a list of {n_features} column names, got "
            f"{type(names).__name__}."
        )
    names = list(names)
    bad = [entry for entry in names
           if not isinstance(entry, str | Integral | np.str_) or isinstance(entry, bool)]
    if bad:
        raise ValueError(
            f"{name} must hold strings (one per column), but holds {bad[0]!r} "
            f"({type(bad[0]).__name__})."
        )
    names = [str(entry) for entry in names]
    if len(names) != n_features:
        raise ValueError(
            f"{len(names)} feature names given for {n_features} columns; pass one name per "
            "column."
        )
    repeated = [entry for entry, count in Counter(names).items() if count > 1]
    if repeated:
        shown = ", ".join(repr(entry) for entry in repeated[:5])
        raise ValueError(
            f"{name} must be unique; repeated: {shown}"
            f"{f' and {len(repeated) - 5} more' if len(repeated) > 5 else ''}. "
            "Rename the columns so that each name identifies one column."
        )
    return names


def check_metadata(metadata, name: str = "metadata") -> dict:
    """Return ``metadata`` as a dict with string keys (``None`` gives an empty dict)."""
    if metadata is None:
        return {}
    if not isinstance(metadata, Mapping):
        raise ValueError(
            f"{name} must be a dict of facts (name -> value), got {type(metadata).__name__}."
        )
    bad = [key for key in metadata if not isinstance(key, str)]
    if bad:
        raise ValueError(f"{name} keys must be strings, got {bad[0]!r}.")
    return dict(metadata)


def _is_sequence(value) -> bool:
    if isinstance(value, np.ndarray):
        return value.ndim == 1
    try:
        iter(value)
        len(value)
    except TypeError:
        return False
    return True


def check_sample_weight(sample_weight, n_samples: int) -> np.ndarray | None:
    """Return frequency weights as a float array of length ``n_samples`` (None stays None).

    A scalar applies to every row. Weights count rows (an integer weight is
    that many copies of the row), so they must be finite and non-negative,
    and at least one must be positive.
    """
    if sample_weight is None:
        return None
    try:
        weights = np.asarray(sample_weight, dtype=float)
    except (TypeError, ValueError) as error:
        raise ValueError(
            f"sample_weight must be numeric; could not convert it to floats ({error})."
        ) from None
    if weights.ndim == 0:
        weights = np.full(n_samples, float(weights))
    if weights.ndim != 1 or weights.size != n_samples:
        raise ValueError(
            f"sample_weight has shape {weights.shape} but X has {n_samples} rows; "
            "pass one weight per row (a 1-D array of that length)."
        )
    if not np.all(np.isfinite(weights)):
        raise ValueError("sample_weight contains NaN or infinite values; pass finite weights.")
    if np.any(weights < 0):
        row = int(np.argmax(weights < 0))
        raise ValueError(
            f"sample_weight has negative entries (row {row}: {weights[row]:g}); weights count "
            "rows and must be >= 0. Drop those rows or set their weight to 0."
        )
    if not np.any(weights > 0):
        raise ValueError(
            "every sample weight is zero, so no row would count; give the rows to fit a "
            "positive weight."
        )
    return weights
