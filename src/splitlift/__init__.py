"""splitlift: learn split directions for random forests.

Estimate the relevant subspace of a multi-index model, build a full-rank
lift matrix around it, and feed the lifted features to any forest.

Names are imported on first use (PEP 562), so that the command line starts
without loading scikit-learn, SciPy and pandas until a command needs them.
"""

from __future__ import annotations

import importlib
import sys
import types

__version__ = "0.2.0"

#: Public name -> the module that defines it.
_EXPORTS = {
    "AverageDerivative": "estimators",
    "GradientOuterProduct": "estimators",
    "HessianDirections": "estimators",
    "SlicedAverageVariance": "estimators",
    "SlicedInverse": "estimators",
    "EstimationWarning": "estimators",
    "StitForestClassifier": "forest",
    "StitForestRegressor": "forest",
    "StitTree": "forest",
    "leakage_threshold": "forest",
    "theory_lifetime": "forest",
    "theory_risk_rate": "forest",
    "leakage": "geometry",
    "orthonormal_complement": "geometry",
    "principal_angles": "geometry",
    "restricted_singular_value": "geometry",
    "LiftMatrix": "lift",
    "CollinearityWarning": "moments",
    "LiftFileError": "persistence",
    "LiftReport": "report",
    "score_candidates": "scoring",
    "DirectionLiftCV": "selection",
    "SubspaceStability": "stability",
    "stability": "stability",
    "ApplyLift": "transformer",
    "DirectionLift": "transformer",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        value = getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
        globals()[name] = value  # later look-ups skip this function
        return value
    try:  # submodules, as after "import splitlift.dimension"
        return importlib.import_module(f".{name}", __name__)
    except ModuleNotFoundError:
        raise AttributeError(f"module 'splitlift' has no attribute {name!r}") from None


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))


class _Package(types.ModuleType):
    """Keeps a public function when a submodule of the same name is imported.

    Importing ``splitlift.stability`` would otherwise rebind the package's
    ``stability`` (the function) to the module; the module stays reachable
    through ``import splitlift.stability`` and ``sys.modules``.
    """

    def __setattr__(self, name, value):
        if name in _EXPORTS and isinstance(value, types.ModuleType):
            return
        super().__setattr__(name, value)


sys.modules[__name__].__class__ = _Package
