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
from .forest import (
    StitForestClassifier,
    StitForestRegressor,
    StitTree,
    leakage_threshold,
    theory_lifetime,
    theory_risk_rate,
)
from .geometry import leakage, orthonormal_complement, principal_angles, restricted_singular_value
from .lift import LiftMatrix
from .moments import CollinearityWarning
from .persistence import LiftFileError
from .report import LiftReport
from .scoring import score_candidates
from .selection import DirectionLiftCV
from .stability import SubspaceStability, stability
from .transformer import ApplyLift, DirectionLift

__version__ = "0.1.0"

__all__ = [
    "ApplyLift",
    "AverageDerivative",
    "CollinearityWarning",
    "DirectionLift",
    "DirectionLiftCV",
    "GradientOuterProduct",
    "HessianDirections",
    "LiftFileError",
    "LiftMatrix",
    "LiftReport",
    "SlicedAverageVariance",
    "SlicedInverse",
    "StitForestClassifier",
    "StitForestRegressor",
    "StitTree",
    "SubspaceStability",
    "leakage",
    "leakage_threshold",
    "orthonormal_complement",
    "principal_angles",
    "restricted_singular_value",
    "score_candidates",
    "stability",
    "theory_lifetime",
    "theory_risk_rate",
]
