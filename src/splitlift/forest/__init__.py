"""STIT forests: Mondrian forests on lifted coordinates, and their tuning."""

from ._forest import StitForestClassifier, StitForestRegressor
from ._lifetime import leakage_threshold, theory_lifetime, theory_risk_rate
from ._tree import StitTree

__all__ = [
    "StitForestClassifier",
    "StitForestRegressor",
    "StitTree",
    "leakage_threshold",
    "theory_lifetime",
    "theory_risk_rate",
]
