"""Bootstrap stability of an estimated subspace and of the lift built on it."""

from __future__ import annotations

from dataclasses import dataclass
from numbers import Integral

import numpy as np
from sklearn.base import clone
from sklearn.utils import check_random_state
from sklearn.utils.validation import check_is_fitted

from . import geometry
from ._progress import parallel_map
from ._tables import html_table, text_table
from ._validation import check_finite_matrix, check_n_features, check_response
from .dimension import uses_local_resampling
from .lift import LiftMatrix

QUANTILES = (0.05, 0.25, 0.5, 0.75, 0.95)


@dataclass
class SubspaceStability:
    """Bootstrap variability of a subspace estimate.

    Attributes
    ----------
    angles : ndarray of shape (n_boot, dim)
        Principal angles (radians, largest first) between the full-data
        subspace and each bootstrap subspace.
    leakage : ndarray of shape (n_boot,)
        Leakage of the full-data lift with respect to each bootstrap subspace.
    dim : int
    n_failed : int
        Bootstrap fits that raised (for instance a resample that lost a rare
        class); they are left out.
    """

    angles: np.ndarray
    leakage: np.ndarray
    dim: int
    n_failed: int = 0

    @property
    def n_boot(self) -> int:
        return int(self.angles.shape[0])

    def largest_angle_quantiles(self) -> dict[str, float]:
        """Quantiles of the largest principal angle, in degrees."""
        largest = np.degrees(self.angles[:, 0]) if self.dim else np.zeros(self.n_boot)
        return {f"q{int(100 * q):02d}": float(np.quantile(largest, q)) for q in QUANTILES}

    def leakage_quantiles(self) -> dict[str, float]:
        return {f"q{int(100 * q):02d}": float(np.quantile(self.leakage, q)) for q in QUANTILES}

    def to_dict(self) -> dict:
        return {
            "n_boot": self.n_boot,
            "n_failed": self.n_failed,
            "dim": self.dim,
            "largest_angle_degrees": self.largest_angle_quantiles(),
            "leakage": self.leakage_quantiles(),
        }

    def _table(self):
        rows = [{"measure": "largest angle (degrees)", **self.largest_angle_quantiles()},
                {"measure": "off-subspace weight of the lift", **self.leakage_quantiles()}]
        quantiles = [(key, key, ".4g") for key in self.largest_angle_quantiles()]
        return rows, [("measure", "across resamples", "s"), *quantiles]

    def _caption(self) -> str:
        return f"bootstrap stability ({self.n_boot} resamples, {self.n_failed} failed)"

    def __str__(self) -> str:
        return self._caption() + "\n" + text_table(*self._table())

    def __repr__(self) -> str:
        median = self.largest_angle_quantiles()["q50"]
        return (f"<SubspaceStability: dim {self.dim}, {self.n_boot} resamples, median largest "
                f"angle {median:.2f} degrees>")

    def _repr_html_(self) -> str:
        return html_table(*self._table(), caption=self._caption())


def stability(estimator, X, y, n_boot: int = 200, random_state=None, n_jobs=None,
              progress: bool = True, resample: str = "auto") -> SubspaceStability:
    """Refit on bootstrap resamples and compare each subspace with the full-data one.

    Parameters
    ----------
    estimator : subspace estimator or DirectionLift
        Fitted or not (an unfitted one is fitted on ``(X, y)`` first). For a
        ``DirectionLift`` the resamples are standardised with the full-data
        mean and scale, so every subspace lives in the lift's coordinates;
        its ``lift_`` is the lift whose leakage is measured. For a bare
        estimator the lift is ``LiftMatrix.from_subspace(basis_)``.
        Bootstrap fits use the full-data dimension ``dim_``.
    X : array-like of shape (n_samples, n_features)
    y : array-like of shape (n_samples,)
    n_boot : int >= 2, default 200
    random_state : int, RandomState or None
        Seeds are drawn once up front, so results do not depend on ``n_jobs``.
    n_jobs : int or None
        Parallel workers (joblib).
    progress : bool, default True
        A progress line on stderr, shown only when stderr is a terminal.
    resample : {"auto", "refit", "local"}, default "auto"
        ``"refit"``: refit on each bootstrap resample. ``"local"``: for
        estimators built from one term per anchor or row (OPG, ADE), redraw
        the fitted estimator's terms instead of refitting, which costs one
        small eigen-decomposition per replicate; it reflects the variation of
        the average over anchors or rows, not that of each local fit, so it
        can understate the spread. ``"auto"``: local above
        :data:`splitlift.dimension.LOCAL_RESAMPLING_MIN_ROWS` rows where the
        estimator offers it, refit otherwise (as ``dim="auto"``'s ladle).

    Returns
    -------
    SubspaceStability

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import SlicedInverse, stability
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((300, 4))
    >>> y = X[:, 0] + 0.1 * rng.standard_normal(300)
    >>> result = stability(SlicedInverse(dim=1), X, y, n_boot=20, random_state=0)
    >>> result.angles.shape, bool(result.largest_angle_quantiles()["q95"] < 10)
    ((20, 1), True)
    """
    if isinstance(n_boot, bool) or not isinstance(n_boot, Integral) or n_boot < 2:
        raise ValueError(f"n_boot must be an integer >= 2, got {n_boot!r}.")
    if not hasattr(estimator, "fit"):
        raise ValueError(
            "estimator must be a splitlift subspace estimator or a DirectionLift (with a fit "
            f"method), got {type(estimator).__name__}."
        )
    X, y = _check_data(estimator, X, y)
    coordinates, inner, lift = _full_data_fit(estimator, X, y)
    dim = inner.dim_
    reference = inner.basis_
    template = clone(inner).set_params(dim=dim) if dim else None
    seeds = check_random_state(random_state).randint(0, 2**31 - 1, size=n_boot)

    local = uses_local_resampling(resample, inner, X.shape[0])

    def one(seed):
        if template is None:
            return None
        if local:
            redrawn = inner._resampled_directions(np.random.RandomState(seed))[:, :dim]
            return np.linalg.qr(redrawn)[0]
        rows = np.random.RandomState(seed).randint(0, X.shape[0], X.shape[0])
        try:
            return clone(template).fit(coordinates[rows], y[rows]).basis_
        except ValueError:
            return None

    # local replicates are cheap: workers would cost more than they save
    results = parallel_map(one, seeds, n_boot, "bootstrap", 1 if local else n_jobs, progress)
    fitted = [b for b in results if b is not None] if dim else []
    if dim and len(fitted) < n_boot / 2:
        raise ValueError(
            f"{n_boot - len(fitted)} of {n_boot} bootstrap fits failed; the estimator is too "
            "fragile on resamples of this data (rare classes or tiny slices): use fewer slices."
        )
    if not dim:  # the zero subspace: every resample agrees trivially
        return SubspaceStability(np.zeros((n_boot, 0)), np.ones(n_boot), 0, 0)
    angles = np.array([geometry.principal_angles(reference, b) for b in fitted])
    leakage = np.array([lift.leakage(b) for b in fitted])
    return SubspaceStability(angles, leakage, dim, n_boot - len(fitted))


def _check_data(estimator, X, y) -> tuple[np.ndarray, np.ndarray]:
    """X and y as arrays, checked against each other and against a fitted estimator."""
    fitted_names = getattr(estimator, "feature_names_in_", None)
    if fitted_names is not None and hasattr(X, "columns"):
        if [str(name) for name in X.columns] != [str(name) for name in fitted_names]:
            raise ValueError(
                f"the columns of X {list(map(str, X.columns))} differ from those the "
                f"{type(estimator).__name__} was fitted on {list(map(str, fitted_names))}; "
                "pass the same columns, in the same order."
            )
    data = check_finite_matrix(X, "X")
    expected = getattr(estimator, "n_features_in_", None)
    if expected is None and hasattr(estimator, "basis_"):
        expected = np.shape(estimator.basis_)[0]
    if expected is not None:
        check_n_features(data.shape[1], int(expected), "X",
                         f"the {type(estimator).__name__} was fitted on")
    response = check_response(y, data.shape[0])
    return data, response


def _full_data_fit(estimator, X, y):
    """Coordinates for the resamples, the fitted subspace estimator and the lift."""
    from .transformer import DirectionLift, _standardise

    if isinstance(estimator, DirectionLift):
        if not hasattr(estimator, "lift_"):
            estimator = clone(estimator).fit(X, y)
        check_is_fitted(estimator, "lift_")
        coordinates = _standardise(X, estimator.mean_, estimator.scale_)  # as at fit time
        return coordinates, estimator.estimator_, estimator.lift_
    if not hasattr(estimator, "basis_"):
        estimator = clone(estimator).fit(X, y)
    lift = LiftMatrix.from_subspace(estimator.basis_)
    return X, estimator, lift
