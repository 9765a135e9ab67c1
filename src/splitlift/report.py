"""Diagnostic report of a fitted lift: readable with ``str``, machine-readable with ``to_dict``."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from . import geometry

_STANDARDISED = "standardised inputs (each column centred, divided by its standard deviation)"
_RAW = "input coordinates as given"


@dataclass
class SubspaceComparison:
    """How a lift relates to one subspace."""

    label: str
    dim: int
    leakage: float
    restricted_singular_value: float
    angles_degrees: list[float] | None = None


@dataclass
class LiftReport:
    """Diagnostics of a fitted :class:`~splitlift.DirectionLift`.

    Attributes
    ----------
    estimator : str
        The estimator with its settings.
    n_samples, n_features, dim : int
    coordinates : str
        The coordinates in which the lift acts and angles and leakage are measured.
    eigenvalues : list of float
    n_directions, rank, n_in_subspace : int
    complement_weight : float
    comparisons : list of SubspaceComparison
        The estimated subspace first, then the reference when given.
    """

    estimator: str
    n_samples: int
    n_features: int
    dim: int
    coordinates: str
    eigenvalues: list[float]
    n_directions: int
    rank: int
    n_in_subspace: int
    complement_weight: float
    comparisons: list[SubspaceComparison] = field(default_factory=list)

    @classmethod
    def from_direction_lift(cls, lift, reference=None) -> LiftReport:
        """Collect the diagnostics of a fitted ``DirectionLift``."""
        from sklearn.utils.validation import check_is_fitted

        check_is_fitted(lift, "lift_")
        matrix = lift.lift_
        estimated = lift.subspace_basis_
        comparisons = [_compare("estimated subspace", matrix.matrix, estimated)]
        if reference is not None:
            in_lift = lift.reference_in_lift_coordinates(reference)
            comparison = _compare("reference subspace", matrix.matrix, in_lift)
            comparison.angles_degrees = np.degrees(
                geometry.principal_angles(estimated, in_lift)
            ).tolist()
            comparisons.append(comparison)
        outside = np.linalg.norm(matrix.matrix - (matrix.matrix @ estimated) @ estimated.T, axis=1)
        return cls(
            estimator=repr(lift.estimator_),
            n_samples=int(lift.n_samples_fit_),
            n_features=int(lift.n_features_in_),
            dim=int(estimated.shape[1]),
            coordinates=_STANDARDISED if lift.standardize else _RAW,
            eigenvalues=[float(v) for v in lift.estimator_.eigenvalues_],
            n_directions=matrix.n_directions,
            rank=matrix.rank(),
            n_in_subspace=int(np.sum(outside < 1e-12)),
            complement_weight=float(matrix.metadata.get("complement_weight", 0.0)),
            comparisons=comparisons,
        )

    def to_dict(self) -> dict:
        """Plain, JSON-serialisable dictionary of every field."""
        return asdict(self)

    def __str__(self) -> str:
        lines = ["splitlift lift report", "=" * 21]
        lines += _pairs(
            [
                ("estimator", self.estimator),
                ("data", f"n = {self.n_samples} rows, d = {self.n_features} features"),
                ("coordinates", self.coordinates),
                ("subspace dim", str(self.dim)),
            ]
        )
        lines += ["", "eigenvalues (* inside the chosen subspace)", "    k        value    share"]
        total = sum(abs(v) for v in self.eigenvalues) or 1.0
        for k, value in enumerate(self.eigenvalues, start=1):
            mark = " *" if k <= self.dim else ""
            lines.append(f"  {k:3d}  {value:11.5g}  {100 * abs(value) / total:6.1f}%{mark}")
        n_complement = self.n_directions - self.n_in_subspace
        lines += [""] + _pairs(
            [
                ("lift", f"{self.n_directions} directions, rank {self.rank} of "
                         f"{self.n_features}"),
                ("", f"{self.n_in_subspace} inside the subspace, weight "
                     f"{1 - self.complement_weight:.4f}"),
                ("", f"{n_complement} on its complement, weight {self.complement_weight:.4f}"),
            ]
        )
        for comparison in self.comparisons:
            lines += [""] + _pairs(
                [
                    (comparison.label, f"dimension {comparison.dim}"),
                    ("  leakage", f"{comparison.leakage:.4f}"),
                    ("  restricted sing. value", f"{comparison.restricted_singular_value:.4f}"),
                ]
            )
            if comparison.angles_degrees is not None:
                angles = ", ".join(f"{a:.2f}" for a in comparison.angles_degrees)
                lines += _pairs([("  angles to estimate", f"{angles} degrees (largest first)")])
        return "\n".join(lines)


def _compare(label: str, matrix: np.ndarray, basis: np.ndarray) -> SubspaceComparison:
    return SubspaceComparison(
        label=label,
        dim=int(basis.shape[1]),
        leakage=geometry.leakage(matrix, basis),
        restricted_singular_value=geometry.restricted_singular_value(matrix, basis),
    )


def _pairs(rows: list[tuple[str, str]]) -> list[str]:
    return [f"{key:<26}{value}" for key, value in rows]
