"""splitlift: learn split directions for random forests.

Estimate the relevant subspace of a multi-index model, build a full-rank
lift matrix around it, and feed the lifted features to any forest.
"""

from .estimators import (
    AverageDerivative,
    GradientOuterProduct,
    HessianDirections,
    SlicedAverageVariance,
    SlicedInverse,
)
from .geometry import leakage, orthonormal_complement, principal_angles, restricted_singular_value
from .lift import LiftMatrix
from .moments import CollinearityWarning
from .persistence import LiftFileError
from .report import LiftReport
from .scoring import score_candidates
from .stability import SubspaceStability, stability
from .transformer import ApplyLift, DirectionLift

__version__ = "0.1.0"

__all__ = [
    "ApplyLift",
    "AverageDerivative",
    "CollinearityWarning",
    "DirectionLift",
    "GradientOuterProduct",
    "HessianDirections",
    "LiftFileError",
    "LiftMatrix",
    "LiftReport",
    "SlicedAverageVariance",
    "SlicedInverse",
    "SubspaceStability",
    "leakage",
    "orthonormal_complement",
    "principal_angles",
    "restricted_singular_value",
    "score_candidates",
    "stability",
]
