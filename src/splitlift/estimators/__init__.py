"""Subspace estimators: each fits ``basis_``, ``eigenvalues_`` and ``dim_``."""

from ._base import MomentEstimator, SubspaceEstimator
from ._hessian import HessianDirections
from ._sliced import SlicedAverageVariance, SlicedInverse

__all__ = [
    "HessianDirections",
    "MomentEstimator",
    "SlicedAverageVariance",
    "SlicedInverse",
    "SubspaceEstimator",
]
