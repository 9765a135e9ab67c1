"""Loadings: which features make up each estimated direction, by name."""

from __future__ import annotations

import numpy as np
import pandas as pd


def feature_labels(n_features: int, names=None) -> list[str]:
    """The features' names, or ``x0, x1, ...`` when the data had none."""
    return [str(name) for name in names] if names is not None else [
        f"x{j}" for j in range(n_features)]


def loadings_frame(basis: np.ndarray, names=None, scale=None) -> pd.DataFrame:
    """Directions x features table of a subspace basis.

    Parameters
    ----------
    basis : ndarray of shape (d, k)
        Directions as columns, in the coordinates they act on.
    names : sequence of str, optional
        Feature names; ``x0, x1, ...`` when omitted.
    scale : ndarray of shape (d,), optional
        Divide row j by ``scale[j]`` first: directions found on standardised
        columns then read as coefficients on the inputs as given.

    Returns
    -------
    DataFrame of shape (k, d)
        Row ``direction i`` holds direction i scaled to unit length, with its
        largest loading positive (a direction's sign carries no meaning).
    """
    directions = np.asarray(basis, dtype=float)
    if scale is not None:
        directions = directions / np.asarray(scale, dtype=float)[:, None]
    largest = np.max(np.abs(directions), axis=0) if directions.size else np.ones(0)
    directions = directions / np.where(largest > 0, largest, 1.0)
    norms = np.linalg.norm(directions, axis=0)
    directions = directions / np.where(norms > 0, norms, 1.0)
    if directions.size:
        lead = np.argmax(np.abs(directions), axis=0)
        directions = directions * np.sign(directions[lead, np.arange(directions.shape[1])])
    return pd.DataFrame(directions.T, columns=feature_labels(directions.shape[0], names),
                        index=[f"direction {i + 1}" for i in range(directions.shape[1])])


def leading_features(row: pd.Series, top: int = 3, share: float = 0.8) -> str:
    """``+0.71 age, -0.52 load, +0.31 speed; others 0.12`` for one direction.

    Lists features by decreasing |loading| until ``top`` are named or they
    hold ``share`` of the direction's squared length; the rest is summarised
    as the length of what remains.
    """
    order = np.argsort(-np.abs(row.to_numpy()), kind="stable")
    parts, covered = [], 0.0
    for position in order[:top]:
        value = float(row.iloc[position])
        parts.append(f"{value:+.2f} {row.index[position]}")
        covered += value**2
        if covered >= share:
            break
    rest = max(0.0, 1.0 - covered)
    text = ", ".join(parts)
    return text + (f"; others {np.sqrt(rest):.2f}" if rest > 1e-4 else "")
