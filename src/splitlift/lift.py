"""The lift matrix: split directions with weights, built from a subspace."""

from __future__ import annotations

from numbers import Integral

import numpy as np
from scipy.stats import norm, qmc
from sklearn.utils import check_random_state

from . import geometry
from ._validation import (
    as_real_array,
    check_basis,
    check_feature_names,
    check_finite_matrix,
    check_finite_real,
    check_fraction,
    check_metadata,
    check_n_features,
)
from .persistence import read_lift_file, write_lift_file


class LiftMatrix:
    """A full-rank matrix of split directions, ``z = A x``.

    Rows ``a_i`` are scaled so that ``Σ_i ‖a_i‖ = 1``; they define the
    directional distribution with atoms ``±a_i/‖a_i‖`` and weights ``‖a_i‖``.
    ``rank(A) = d`` is required, since otherwise cells of a partition by
    these directions are unbounded along the null space.

    Parameters
    ----------
    matrix : array-like of shape (m, d)
        Real directions as rows; rescaled to unit total row norm (safely at
        any magnitude, entries near 1e300 or 1e-300 included). Zero rows,
        complex entries and unit directions of rank below d are refused.
    feature_names : sequence of str, optional
        Names of the d input columns the lift acts on, one per column and
        unique (a bare string is refused, not split into letters).
    subspace_basis : array-like of shape (d, s), optional
        The subspace the lift was built around, kept for diagnostics.
    metadata : dict, optional
        JSON-serialisable facts saved with the lift (estimator, settings).
    input_mean, input_scale : array-like of shape (d,), optional
        Standardisation applied before the matrix by :meth:`apply`
        (``z = A (x - mean) / scale``); default none.

    Attributes
    ----------
    matrix : ndarray of shape (m, d)
    weights : ndarray of shape (m,)
        Row norms; they sum to one.
    directions : ndarray of shape (m, d)
        Unit rows ``a_i / ‖a_i‖``.

    See Also
    --------
    LiftMatrix.from_subspace : build a lift around an estimated subspace.

    Examples
    --------
    >>> import numpy as np
    >>> lift = LiftMatrix.from_subspace(np.array([[1.0], [1.0], [0.0]]), complement_weight=0.1)
    >>> lift.matrix.shape, round(lift.leakage(np.array([1.0, 1.0, 0.0])), 12)
    ((3, 3), 0.1)
    """

    def __init__(self, matrix, *, feature_names=None, subspace_basis=None, metadata=None,
                 input_mean=None, input_scale=None):
        rows = check_finite_matrix(matrix, "lift matrix")
        self._matrix = _normalised(rows)
        self._matrix.setflags(write=False)
        rank = self.rank()
        if rank < self.n_features:
            raise ValueError(
                f"lift matrix has rank {rank} < {self.n_features} features, so partition cells "
                "would be unbounded; add directions spanning the rest of the space "
                "(for instance LiftMatrix.from_subspace with complement_weight > 0)."
            )
        self.feature_names = check_feature_names(feature_names, self.n_features)
        self.subspace_basis = (
            None if subspace_basis is None else check_basis(subspace_basis, "subspace_basis",
                                                            n_features=self.n_features)
        )
        self.metadata = check_metadata(metadata)
        if self.metadata.get("weight_form", "scale") not in ("scale", "repeat"):
            raise ValueError(
                f"metadata weight_form must be 'scale' or 'repeat', got "
                f"{self.metadata['weight_form']!r}."
            )
        self.output_matrix()  # a repeated form with a bad n_columns fails here, not at apply
        self.input_mean = _optional_vector(input_mean, "input_mean", self.n_features)
        self.input_scale = _optional_vector(input_scale, "input_scale", self.n_features)
        if self.input_scale is not None and np.any(self.input_scale <= 0):
            raise ValueError("input_scale must be positive; use 1 for constant columns.")

    # ----------------------------------------------------------------- views
    @property
    def matrix(self) -> np.ndarray:
        return self._matrix

    @property
    def n_features(self) -> int:
        return self._matrix.shape[1]

    @property
    def n_directions(self) -> int:
        return self._matrix.shape[0]

    @property
    def weights(self) -> np.ndarray:
        return geometry.row_norms(self._matrix)

    @property
    def directions(self) -> np.ndarray:
        return self._matrix / self.weights[:, None]

    def output_matrix(self) -> np.ndarray:
        """The matrix :meth:`apply` multiplies by: ``matrix``, or its repeated form.

        The repeated form (:meth:`repeated`) is used when the metadata says
        ``weight_form = "repeat"`` (as a ``DirectionLift`` records it), with
        ``n_columns`` from the metadata. When the metadata says
        ``keep_inputs``, the identity comes first, so the inputs pass through
        ahead of the lifted directions.
        """
        matrix = (self.repeated(self.metadata.get("n_columns"))
                  if self.metadata.get("weight_form") == "repeat" else self._matrix)
        if self.metadata.get("keep_inputs"):
            return np.vstack([np.eye(self.n_features), matrix])
        return matrix

    def output_feature_names(self, input_names=None) -> list[str]:
        """Names of the columns :meth:`apply` returns, as ``DirectionLift`` and the CLI give them.

        A lifted column is ``subspace_<i>`` when its direction lies in the
        estimated subspace and ``complement_<i>`` when it lies in its
        orthogonal complement (each counted from 0); a lift built without a
        subspace names them ``direction_<i>``. A lift that keeps its inputs
        (metadata ``keep_inputs``) returns the input columns first, under
        their names (``input_names``, else ``feature_names``, else ``x0``, ...).
        """
        keep = bool(self.metadata.get("keep_inputs"))
        rows = self.output_matrix()[self.n_features if keep else 0:]
        directions = _direction_names(rows, self.subspace_basis)
        if not keep:
            return directions
        names = input_names if input_names is not None else self.feature_names
        if names is None:
            names = [f"x{index}" for index in range(self.n_features)]
        return [str(name) for name in names] + directions

    def apply(self, X) -> np.ndarray:
        """Lifted features ``((X - input_mean) / input_scale) @ output_matrix().T``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)

        Returns
        -------
        ndarray of shape (n_samples, n_directions)

        Raises
        ------
        ValueError
            When a lifted value lies beyond the float range (about 1.8e308);
            intermediate overflow alone is avoided (see :func:`lifted_features`).
        """
        data = check_finite_matrix(X, "X")
        check_n_features(data.shape[1], self.n_features)
        return lifted_features(data, self.output_matrix(), self.input_mean, self.input_scale)

    def reference_in_lift_coordinates(self, reference) -> np.ndarray:
        """Map a subspace given in input coordinates to the coordinates the matrix acts on.

        With ``z = (x - mean) / scale``, ``B^T x = B^T mean + (scale ∘ B)^T z``,
        so ``span(B)`` in input coordinates is ``span(diag(scale) B)`` in lift
        coordinates (unchanged when the lift has no standardisation).

        Parameters
        ----------
        reference : array-like of shape (n_features, k)

        Returns
        -------
        ndarray of shape (n_features, k), orthonormal columns
        """
        basis = check_basis(reference, "reference", n_features=self.n_features)
        if self.input_scale is None:
            return basis
        return check_basis(self.input_scale[:, None] * basis, "reference")

    def with_metadata(self, **entries) -> LiftMatrix:
        """A copy of the lift with ``entries`` added to its metadata."""
        return LiftMatrix(self._matrix, feature_names=self.feature_names,
                          subspace_basis=self.subspace_basis,
                          metadata={**self.metadata, **entries},
                          input_mean=self.input_mean, input_scale=self.input_scale)

    def rank(self) -> int:
        """Numerical rank of the unit directions (relative singular-value tolerance 1e-10).

        Judged on the directions, not on the weighted rows, so a direction
        with a tiny weight still counts (see :func:`geometry.direction_rank`).
        """
        return geometry.direction_rank(self._matrix)

    def leakage(self, reference_basis) -> float:
        """Leakage ``Σ_i ‖P_{S⊥} a_i‖`` with respect to ``span(reference_basis)``."""
        return geometry.leakage(self._matrix, reference_basis)

    def restricted_singular_value(self, reference_basis) -> float:
        """``σ_min(A U_S)`` for an orthonormal basis ``U_S`` of the reference subspace."""
        return geometry.restricted_singular_value(self._matrix, reference_basis)

    def repeated(self, n_columns: int | None = None) -> np.ndarray:
        """Unit directions repeated in proportion to their weights.

        Forests that draw candidate features uniformly at random per split
        ignore column scale but not column multiplicity: a direction present
        k times is drawn k times as often. Counts follow the largest-remainder
        rule with at least one copy of every direction, so the result keeps
        rank d.

        Parameters
        ----------
        n_columns : int, optional
            Total number of rows of the result; default ``4 * n_directions``.

        Returns
        -------
        ndarray of shape (n_columns, d)
        """
        total = 4 * self.n_directions if n_columns is None else n_columns
        if isinstance(total, bool) or not isinstance(total, Integral) or total < self.n_directions:
            raise ValueError(
                f"n_columns must be an integer >= the number of directions "
                f"({self.n_directions}), got {n_columns!r}."
            )
        spare = total - self.n_directions
        share = self.weights * spare
        counts = np.floor(share).astype(int)
        # remainders equal up to rounding (equal weights) go by index, reproducibly
        remainder_order = np.argsort(-np.round(share - counts, 9), kind="stable")
        counts[remainder_order[: spare - counts.sum()]] += 1
        return np.repeat(self.directions, counts + 1, axis=0)

    # ---------------------------------------------------------- construction
    @classmethod
    def axis(cls, n_features: int, feature_names=None) -> LiftMatrix:
        """The axis-aligned lift ``I_d / d`` (every coordinate equally weighted)."""
        return cls(np.eye(n_features), feature_names=feature_names)

    @classmethod
    def even_spread(cls, n_features: int, feature_names=None, metadata=None,
                    input_mean=None, input_scale=None) -> LiftMatrix:
        """Equal weights on ``2 d`` near-uniformly spread directions of ``R^d``.

        The fallback when no relevant subspace was detected (``dim_ = 0``).
        """
        if isinstance(n_features, bool) or not isinstance(n_features, Integral) or n_features < 1:
            raise ValueError(f"n_features must be a positive integer, got {n_features!r}.")
        count = 1 if n_features == 1 else 2 * n_features
        info = {"complement_weight": 1.0, "subspace_dim": 0, "even_spread": True}
        return cls(spread_directions(n_features, count), feature_names=feature_names,
                   metadata={**info, **(metadata or {})}, input_mean=input_mean,
                   input_scale=input_scale)

    @classmethod
    def from_subspace(
        cls,
        basis,
        complement_weight: float = 0.05,
        n_in_subspace: int | None = None,
        eigenvalues=None,
        weight_power: float = 0.0,
        random_state=None,
        feature_names=None,
        metadata=None,
        input_mean=None,
        input_scale=None,
    ) -> LiftMatrix:
        """Build a lift with most weight inside ``span(basis)``.

        Parameters
        ----------
        basis : array-like of shape (d, s)
            Columns spanning the subspace S (orthonormalised here). With no
        columns (dimension 0, no detectable structure) the result is
        :meth:`even_spread`.
        complement_weight : float in (0, 1), default 0.05
            Total weight shared equally by an orthonormal basis of the
            orthogonal complement; it equals the lift's leakage with respect
            to S. Ignored when ``s = d`` (there is no complement). Any value
            works down to ``(d - s) * 2.2e-308`` (each complement direction
            needs a weight of at least the smallest normal float).
        n_in_subspace : int, optional
            Number of directions inside S. Default: 1 when ``s = 1``, else
            ``4 s``. Must be at least s.
        eigenvalues : array-like, optional
            Eigenvalues paired with the basis columns (first s used, by
            absolute value). With ``weight_power = p`` a unit direction
            ``U c`` inside S gets weight ``∝ Σ_k c_k^2 |λ_k|^p``.
        weight_power : float, default 0
            0 gives equal weights inside S. Any finite value; the powers are
            computed relative to the largest, so a large ``|weight_power|``
            cannot overflow (a value so extreme that some weights underflow
            to zero is refused, with the largest usable value).
        random_state : int, RandomState or None
            None gives the deterministic spread; otherwise the spread is
            turned by a random rotation within S (different lifts for an
            ensemble).
        feature_names, metadata, input_mean, input_scale
            Passed to the constructor.

        Notes
        -----
        Inside S the directions are the basis vector (s = 1), equally spaced
        lines on the half circle (s = 2), or for s >= 3 a deterministic
        Halton start spread by repulsion of lines on the sphere (pairs
        ``±u`` count as one line), so splits can be oblique within S.

        Examples
        --------
        >>> import numpy as np
        >>> lift = LiftMatrix.from_subspace(np.eye(4)[:, :2], complement_weight=0.2)
        >>> lift.n_directions, round(float(lift.weights.sum()), 12)
        (10, 1.0)
        """
        complement_weight = check_fraction(complement_weight, "complement_weight")
        if np.ndim(basis) == 2 and np.shape(basis)[1] == 0:
            return cls.even_spread(np.shape(basis)[0], feature_names=feature_names,
                                   metadata=metadata, input_mean=input_mean,
                                   input_scale=input_scale)
        weight_power = check_finite_real(weight_power, "weight_power")
        orthonormal = check_basis(basis, "basis")
        d, s = orthonormal.shape
        if s < d and complement_weight / (d - s) < np.finfo(float).tiny:
            raise ValueError(
                f"complement_weight={complement_weight!r} is too small to store: shared by "
                f"{d - s} complement directions it gives each a weight below the smallest "
                "normal float (about 2.2e-308), so those directions would be lost. Use "
                f"complement_weight >= {(d - s) * np.finfo(float).tiny:.3g}."
            )
        count = (1 if s == 1 else 4 * s) if n_in_subspace is None else n_in_subspace
        if isinstance(count, bool) or not isinstance(count, Integral) or count < s:
            raise ValueError(
                f"n_in_subspace must be an integer >= the subspace dimension {s}, "
                f"got {n_in_subspace!r}."
            )
        coefficients = spread_directions(s, int(count))
        if random_state is not None and s > 1:
            coefficients = coefficients @ geometry.random_rotation(
                s, check_random_state(random_state))
        weights = _eigenvalue_weights(coefficients, eigenvalues, weight_power, s)
        inside_share = 1.0 if s == d else 1.0 - complement_weight
        inside = (weights / weights.sum() * inside_share)[:, None] * (coefficients @ orthonormal.T)
        rows = [inside]
        if s < d:
            complement = geometry.orthonormal_complement(orthonormal)
            rows.append(complement.T * (complement_weight / (d - s)))
        info = {"complement_weight": complement_weight if s < d else 0.0, "subspace_dim": s}
        return cls(
            np.vstack(rows),
            feature_names=feature_names,
            subspace_basis=orthonormal,
            metadata={**info, **(metadata or {})},
            input_mean=input_mean,
            input_scale=input_scale,
        )

    # ------------------------------------------------------------ persistence
    def save(self, path) -> None:
        """Write the lift to ``path`` (.npz with JSON metadata), atomically."""
        arrays = {"matrix": self._matrix}
        for name in ("subspace_basis", "input_mean", "input_scale"):
            if getattr(self, name) is not None:
                arrays[name] = getattr(self, name)
        metadata = {
            "n_features": self.n_features,
            "n_directions": self.n_directions,
            "feature_names": self.feature_names,
            "info": self.metadata,
        }
        write_lift_file(path, arrays, metadata)

    @classmethod
    def load(cls, path) -> LiftMatrix:
        """Read a lift written by :meth:`save`; every part is validated."""
        from .persistence import LiftFileError

        arrays, metadata = read_lift_file(path)
        matrix = arrays["matrix"]
        expected = (metadata.get("n_directions"), metadata.get("n_features"))
        if matrix.ndim != 2 or matrix.shape != expected:
            raise LiftFileError(
                f"{path}: matrix shape {matrix.shape} disagrees with the metadata {expected}; "
                "the file is corrupt. Save the lift again."
            )
        try:
            return cls(
                matrix,
                feature_names=metadata.get("feature_names"),
                subspace_basis=arrays.get("subspace_basis"),
                metadata=metadata.get("info"),
                input_mean=arrays.get("input_mean"),
                input_scale=arrays.get("input_scale"),
            )
        except ValueError as error:
            raise LiftFileError(
                f"{path}: invalid lift ({error.args[0].rstrip('.')}); the file is damaged or "
                "was edited by hand: save the lift again."
            ) from None

    def __repr__(self) -> str:
        return f"LiftMatrix(n_directions={self.n_directions}, n_features={self.n_features})"


def lifted_features(X: np.ndarray, matrix: np.ndarray, input_mean=None,
                    input_scale=None) -> np.ndarray:
    """``((X - input_mean) / input_scale) @ matrix.T`` without spurious overflow.

    The direct formula is tried first (so ordinary data give exactly what it
    gives). Rows where it overflows are recomputed with exact power-of-two
    scalings: each row of ``X`` and the mean by ``2^-k_i``, the columns of
    ``matrix / input_scale`` by ``2^-g``, and the product scaled back by
    ``2^(k_i + g)``. Only a lifted value that truly lies beyond the float
    range remains, and it is refused.

    Parameters
    ----------
    X : ndarray of shape (n_samples, d), finite
    matrix : ndarray of shape (m, d), finite
    input_mean, input_scale : ndarray of shape (d,), optional
        Standardisation applied first (``input_scale`` positive).

    Returns
    -------
    ndarray of shape (n_samples, m), finite

    Raises
    ------
    ValueError
        When some lifted value exceeds the float range (about 1.8e308).

    Examples
    --------
    >>> import numpy as np
    >>> X = np.full((1, 3), 1.5e308)  # the direct product overflows at 0.6 x + 0.6 x
    >>> lifted_features(X, np.array([[0.6, 0.6, -0.5]])).tolist()
    [[1.05e+308]]
    """
    with np.errstate(over="ignore", invalid="ignore"):
        data = X if input_mean is None else X - input_mean
        data = data if input_scale is None else data / input_scale
        lifted = data @ matrix.T
    overflowed = np.flatnonzero(~np.all(np.isfinite(lifted), axis=1))
    if overflowed.size:
        lifted[overflowed] = _lifted_rows_rescaled(X[overflowed], matrix, input_mean,
                                                   input_scale)
        beyond = overflowed[~np.all(np.isfinite(lifted[overflowed]), axis=1)]
        if beyond.size:
            raise ValueError(
                f"the lifted features of {beyond.size} row(s) of X (first: row "
                f"{int(beyond[0])}) exceed the float range (about ±1.8e308), so they cannot "
                "be represented; the inputs are too large for this lift. Express the input "
                "columns in larger units (divide them by a constant) and rebuild the lift on "
                "the rescaled data."
            )
    return lifted


def _lifted_rows_rescaled(rows, matrix, input_mean, input_scale) -> np.ndarray:
    d = rows.shape[1]
    mean = np.zeros(d) if input_mean is None else input_mean
    scale = np.ones(d) if input_scale is None else input_scale
    # 2^k_i bounds row i and the mean, so the centred row stays within [-2, 2]
    bound = np.maximum(np.max(np.abs(rows), axis=1), np.max(np.abs(mean)))
    row_exponent = np.frexp(bound)[1][:, None]
    centred = np.ldexp(rows, -row_exponent) - np.ldexp(mean[None, :], -row_exponent)
    columns, shift = divide_columns(matrix, scale)
    with np.errstate(over="ignore"):
        return np.ldexp(centred @ columns.T, row_exponent + shift)


def divide_columns(matrix: np.ndarray, scale: np.ndarray) -> tuple[np.ndarray, int]:
    """``matrix / scale`` as ``(columns, g)`` with ``matrix / scale = columns * 2**g``.

    ``scale`` is positive; every ``|columns|`` entry is at most twice the
    matching ``|matrix|`` entry, so the division cannot overflow whatever
    the scales (the power of two carries the magnitude exactly).
    """
    mantissa, exponent = np.frexp(scale)
    shift = int(np.max(-exponent))
    return np.ldexp(matrix / mantissa, -exponent - shift), shift


def _normalised(rows: np.ndarray) -> np.ndarray:
    """``rows / Σ‖a_i‖`` computed safely; zero or unrepresentable rows are refused."""
    norms = geometry.row_norms(rows)
    total = norms.sum()
    if abs(total - 1.0) <= 8 * np.finfo(float).eps * rows.shape[0]:
        normalised = rows.copy()  # kept bit for bit: saved lifts round-trip exactly
    else:
        normalised = geometry.normalise_rows(rows, "lift matrix") if total > 0 else rows
    defect = zero_row_defect(norms, geometry.row_norms(normalised))
    if defect:
        raise ValueError(f"lift matrix {defect}; every row must be a direction.")
    return normalised


def zero_row_defect(norms: np.ndarray, normalised_norms: np.ndarray) -> str | None:
    """Describe zero rows of a direction matrix, or None when every row counts.

    A row is zero when its norm is, and negligible when it is non-zero but
    vanishes once the matrix is scaled to ``Σ_i ‖a_i‖ = 1`` (its weight is
    below the smallest float, about 1e-308 of the total).
    """
    zero = np.flatnonzero(norms == 0)
    if zero.size:
        return f"{_rows_named(zero)} zero"
    lost = np.flatnonzero(normalised_norms == 0)
    if lost.size:
        return (f"{_rows_named(lost)} negligible next to the others (weight below 1e-308 of "
                "the total, beyond the float range); drop or rescale them")
    return None


def _rows_named(indices: np.ndarray) -> str:
    if indices.size == 1:
        return f"row {int(indices[0])} is"
    shown = ", ".join(str(int(index)) for index in indices[:5])
    return f"rows {shown}{', ...' if indices.size > 5 else ''} are"


def _optional_vector(value, name: str, length: int):
    if value is None:
        return None
    vector = check_finite_matrix(value, name, ndim=1)
    if vector.size != length:
        raise ValueError(f"{name} has {vector.size} entries for {length} features.")
    return vector


def spread_directions(dim: int, count: int) -> np.ndarray:
    """Deterministic, near-uniform unit directions (lines) in ``R^dim``.

    Returns an array of shape (count, dim) of rank ``dim`` (for ``count >= dim``).
    """
    if dim == 1:
        return np.ones((count, 1))
    if dim == 2:
        angles = np.pi * np.arange(count) / count
        return np.column_stack([np.cos(angles), np.sin(angles)])
    start = qmc.Halton(d=dim, scramble=False).random(count + 1)[1:]
    points = norm.ppf(np.clip(start, 1e-6, 1 - 1e-6))
    points[:dim] = np.eye(dim)  # the basis itself guarantees full rank
    points /= np.linalg.norm(points, axis=1, keepdims=True)
    return _repel_lines(points)


def _repel_lines(points: np.ndarray, n_steps: int = 200, power: int = 8) -> np.ndarray:
    # Gradient steps on Σ_{i≠j} (u_i·u_j)^power: a high even power pushes the
    # most coherent pairs of lines apart and treats ±u alike.
    for _ in range(n_steps):
        gram = points @ points.T
        np.fill_diagonal(gram, 0.0)
        force = (gram ** (power - 1)) @ points
        force -= np.sum(force * points, axis=1, keepdims=True) * points
        points = points - 0.1 * force / max(1.0, np.abs(force).max())
        points /= np.linalg.norm(points, axis=1, keepdims=True)
    return points


def _eigenvalue_weights(coefficients, eigenvalues, weight_power, dim) -> np.ndarray:
    if eigenvalues is None or weight_power == 0:
        return np.ones(coefficients.shape[0])
    values = np.abs(as_real_array(eigenvalues, "eigenvalues").ravel())
    if values.size < dim or not np.all(np.isfinite(values[:dim])):
        raise ValueError(
            f"eigenvalues must hold at least {dim} finite values (one per basis column)."
        )
    values = values[:dim]
    if np.any(values == 0):
        raise ValueError(
            f"eigenvalue weights vanish or blow up for some direction (a zero eigenvalue "
            f"with weight_power={weight_power:g}); use weight_power=0 or a smaller subspace."
        )
    # |λ_k|^p relative to the largest, in logarithms: no |p| can overflow
    logs = weight_power * np.log(values)
    weights = (coefficients**2) @ np.exp(logs - logs.max())
    # below this relative weight the rows of a lift lose precision in the subnormal range
    smallest = np.finfo(float).tiny / np.finfo(float).eps
    if not np.all(weights >= smallest):
        ratio = values.min() / values.max()
        limit = np.log(smallest) / np.log(ratio)
        raise ValueError(
            f"weight_power={weight_power:g} is too extreme for these eigenvalues: "
            f"(smallest / largest) ** |weight_power| = {ratio:.3g} ** {abs(weight_power):g} "
            "underflows, so some directions would get zero weight. Use "
            f"|weight_power| <= {np.floor(limit * 10) / 10:g}."
        )
    return weights


def _direction_names(rows: np.ndarray, subspace_basis) -> list[str]:
    """``subspace_<i>`` / ``complement_<i>`` by where each row points, else ``direction_<i>``."""
    if subspace_basis is None or subspace_basis.shape[1] == 0:
        return [f"direction_{index}" for index in range(rows.shape[0])]
    norms = geometry.row_norms(rows)
    unit = rows / np.where(norms > 0, norms, 1.0)[:, None]
    # mostly inside S (cos^2 > 1/2); rows built by from_subspace are exactly in S or S-perp
    inside = np.linalg.norm(unit @ subspace_basis, axis=1) ** 2 > 0.5
    counts = {"subspace": 0, "complement": 0}
    names = []
    for flag in inside:
        kind = "subspace" if flag else "complement"
        names.append(f"{kind}_{counts[kind]}")
        counts[kind] += 1
    return names
