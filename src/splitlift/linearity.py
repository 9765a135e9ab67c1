"""How far the inputs are from the linearity condition of the moment methods.

SIR, SAVE and pHd assume that ``E[Z | Bᵀ Z]`` is linear in ``Bᵀ Z``, which
holds for elliptical inputs. Two stated measures:

- **Inverse-mean curvature**: regress every whitened input on the estimated
  summaries ``u = Bᵀ x``, once linearly and once with all quadratic terms;
  the share of the linear fit's residual variance that the quadratic terms
  remove. Under the linearity condition it is of order ``q / n`` (q
  quadratic terms); we flag values above 0.05 (our rule of thumb).
- **Mardia's multivariate skewness** (Mardia 1970), on at most 2000 rows:
  elliptical distributions are symmetric, so ``n b_{1,d} / 6`` should be
  roughly ``χ²(d(d+1)(d+2)/6)``; we flag p-values below 0.001. Mardia's
  kurtosis is reported too; it tests normality (which the chi-square
  dimension tests need), not ellipticity.

References
----------
Mardia, K. V. (1970). Measures of multivariate skewness and kurtosis with
applications. Biometrika 57, 519-530.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
from scipy import stats

from .moments import Whitening

CURVATURE_LIMIT = 0.05
SKEWNESS_P_LIMIT = 1e-3
_MARDIA_ROWS = 2000


@dataclass
class LinearityCheck:
    """Diagnostics of the linearity condition (see the module notes)."""

    curvature: float | None
    mardia_skewness: float
    skewness_p_value: float
    mardia_kurtosis: float
    kurtosis_z: float
    doubtful: bool
    kurtosis_expected: float | None = None

    def to_dict(self) -> dict:
        return asdict(self)

    def message(self) -> str | None:
        """A warning sentence when the condition looks doubtful, else None."""
        if not self.doubtful:
            return None
        reasons = []
        if self.curvature is not None and self.curvature > CURVATURE_LIMIT:
            reasons.append(f"inverse-mean curvature {self.curvature:.3f} > {CURVATURE_LIMIT}")
        if self.skewness_p_value < SKEWNESS_P_LIMIT:
            reasons.append(f"Mardia skewness p = {self.skewness_p_value:.2g}")
        return ("the linearity condition of SIR/SAVE/pHd looks doubtful ("
                + "; ".join(reasons) + "); compare with a gradient method")


def check_linearity(X, basis=None, random_state=0) -> LinearityCheck:
    """Measure departures from the linearity condition.

    Parameters
    ----------
    X : ndarray of shape (n, d)
    basis : ndarray of shape (d, s), optional
        Estimated directions; without it only Mardia's measures are computed.
    random_state : int, default 0
        Row subsample for Mardia's measures when n > 2000.

    Returns
    -------
    LinearityCheck

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> check_linearity(rng.standard_normal((1000, 3)), np.eye(3)[:, :1]).doubtful
    False
    """
    X = np.asarray(X, dtype=float)
    Z = Whitening.fit(X).transform(X)
    n, d = Z.shape
    rows = np.random.default_rng(random_state).permutation(n)[:_MARDIA_ROWS]
    sample = Z[rows]
    m = sample.shape[0]
    skewness = float(np.mean((sample @ sample.T) ** 3))
    skew_df = d * (d + 1) * (d + 2) / 6
    skew_p = float(stats.chi2.sf(m * skewness / 6, skew_df))
    kurtosis = float(np.mean(np.sum(Z**2, axis=1) ** 2))
    # under normality E = d(d+2), Var = 8 d(d+2) / n (Mardia 1970)
    kurtosis_z = float((kurtosis - d * (d + 2)) / np.sqrt(8 * d * (d + 2) / n))
    curvature = None
    if basis is not None and basis.shape[1] > 0:
        curvature = _inverse_mean_curvature(Z, (X - X.mean(axis=0)) @ basis)
    doubtful = (curvature is not None and curvature > CURVATURE_LIMIT) or skew_p < SKEWNESS_P_LIMIT
    return LinearityCheck(curvature, skewness, skew_p, kurtosis, kurtosis_z, bool(doubtful),
                          float(d * (d + 2)))


def _inverse_mean_curvature(Z: np.ndarray, summaries: np.ndarray) -> float:
    u = (summaries - summaries.mean(axis=0)) / np.where(summaries.std(axis=0) > 0,
                                                        summaries.std(axis=0), 1.0)
    s = u.shape[1]
    pairs = [u[:, i] * u[:, j] for i in range(s) for j in range(i, s)]
    linear = np.column_stack([np.ones(len(u)), u])
    quadratic = np.column_stack([linear, *pairs])
    residual_linear = Z - linear @ np.linalg.lstsq(linear, Z, rcond=None)[0]
    residual_quadratic = Z - quadratic @ np.linalg.lstsq(quadratic, Z, rcond=None)[0]
    base = np.sum(residual_linear**2)
    return float(1.0 - np.sum(residual_quadratic**2) / base) if base > 0 else 0.0
