"""The map ``x ↦ z`` a STIT forest cuts in, and the rescaling that keeps its clock in range."""

from __future__ import annotations

import numpy as np

from .._validation import check_finite_matrix
from ..lift import LiftMatrix


class Lifting:
    """The lifted coordinates of a forest: ``LiftMatrix.apply``, ``X @ A.T`` or ``X`` itself.

    A :class:`~splitlift.LiftMatrix` acts through its own ``apply`` (with its
    stored standardisation), so a lift gives the same coordinates in a
    forest as in :class:`~splitlift.ApplyLift` or on the command line. An
    array is used as given: its row norms are the directions' weights.
    """

    def __init__(self, lift, n_features: int):
        self.lift = lift
        self.n_features = n_features
        if lift is None:
            self.matrix = np.eye(n_features)
        elif isinstance(lift, LiftMatrix):
            if lift.n_features != n_features:
                raise ValueError(
                    f"lift has {lift.n_features} columns but X has {n_features} features; "
                    "build the lift on the same columns, in the same order."
                )
            self.matrix = None  # read off apply() once a reference point is known
        else:
            self.matrix = _check_direction_matrix(lift, n_features)

    def __call__(self, X: np.ndarray) -> np.ndarray:
        """Lifted coordinates of the rows of X (finite, C order)."""
        if self.lift is None:
            lifted = X
        elif isinstance(self.lift, LiftMatrix):
            with np.errstate(over="ignore", invalid="ignore"):
                lifted = self.lift.apply(X)
        else:
            with np.errstate(over="ignore", invalid="ignore"):
                lifted = X @ self.matrix.T
        if not np.all(np.isfinite(lifted)):
            raise ValueError(
                "the lifted coordinates of X overflow the double range (|z| > 1.8e308); "
                f"the largest |x| is {np.max(np.abs(X)):.3g}. Divide X (or the lift) by a "
                "constant: the forest's partition does not depend on a common scale."
            )
        return np.ascontiguousarray(lifted, dtype=float)

    def affine_form(self, center: np.ndarray, steps: np.ndarray):
        """``(linear, z_center)`` with ``z(x) = linear @ (x - center) + z_center``.

        For a LiftMatrix both are read off its ``apply`` (at ``center`` and
        at ``center + steps_j e_j``), so no part of its standardisation is
        repeated here.
        """
        z_center = self(center[None, :])[0]
        if not isinstance(self.lift, LiftMatrix):
            return self.matrix, z_center
        probes = center + np.diag(steps)
        linear = (self(probes) - z_center).T / steps
        return linear, z_center


def _check_direction_matrix(lift, n_features: int) -> np.ndarray:
    matrix = check_finite_matrix(lift, "lift").copy()  # never an alias of the parameter
    if matrix.shape[1] != n_features:
        raise ValueError(
            f"lift has {matrix.shape[1]} columns but X has {n_features} features; pass a "
            f"(n_directions, {n_features}) matrix whose rows are directions in input "
            "coordinates."
        )
    # rows are compared by their largest entry, so huge or tiny entries neither overflow
    # nor vanish in the checks
    largest = np.max(np.abs(matrix), axis=1)
    if np.any(largest == 0):
        raise ValueError(
            f"lift row {int(np.argmin(largest))} is zero; every row must be a direction."
        )
    rank = int(np.linalg.matrix_rank(matrix / largest[:, None]))
    if rank < n_features:
        raise ValueError(
            f"lift has rank {rank} < {n_features} features, so cells would be unbounded "
            "along its null space; add directions spanning the rest of the space (for "
            "instance LiftMatrix.from_subspace with complement_weight > 0)."
        )
    return matrix


def binary_exponent(largest: float) -> int:
    """The ``e`` with ``largest / 2**e`` in [0.5, 1); 0 for zero.

    Dividing by a power of two is exact, so data rescaled this way give
    bit for bit the same partitions as the original, with every width,
    rate and time far from overflow and underflow.
    """
    return int(np.frexp(largest)[1]) if largest > 0 else 0


def times_power_of_two(values: np.ndarray, exponent: int,
                       out: np.ndarray | None = None) -> np.ndarray:
    """``values * 2**exponent``, exactly (a multiplication where ``2**exponent`` is a double).

    ``out``, as in numpy's ufuncs, receives the result instead of a new array.
    """
    if abs(exponent) <= 1000:
        return np.multiply(values, np.ldexp(1.0, exponent), out=out)
    return np.ldexp(values, exponent, out=out)
