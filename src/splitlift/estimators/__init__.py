"""Subspace estimators: each fits ``basis_``, ``eigenvalues_`` and ``dim_``."""

from ._base import EstimationWarning, MomentEstimator, SubspaceEstimator
from ._derivative import AverageDerivative
from ._gradient import GradientOuterProduct
from ._hessian import HessianDirections
from ._sliced import SlicedAverageVariance, SlicedInverse

__all__ = [
    "AverageDerivative",
    "EstimationWarning",
    "GradientOuterProduct",
    "HessianDirections",
    "MomentEstimator",
    "SlicedAverageVariance",
    "SlicedInverse",
    "SubspaceEstimator",
]
