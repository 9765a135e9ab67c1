"""Batch scoring of candidate lift matrices: validity, geometry, theory, forest error.

Every candidate is read, checked and scored on its own; a bad matrix or an
unreadable file becomes a row with ``valid=False`` and a reason, never an
exception, so one broken candidate cannot stop a batch.
"""

from __future__ import annotations

import csv
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from sklearn.base import clone, is_classifier
from sklearn.utils import check_random_state

from . import geometry
from ._progress import parallel_map
from ._validation import (
    as_real_array,
    check_basis,
    check_finite_matrix,
    check_response,
    check_sample_count,
)
from .lift import LiftMatrix, divide_columns, lifted_features, zero_row_defect
from .moments import _is_discrete
from .selection import cross_validated_error, make_folds, seeded_clone

#: Trees of the default forest: enough to rank candidates, few enough for a batch.
DEFAULT_N_TREES = 30
#: Columns of the table returned by :func:`score_candidates`, in order.
COLUMNS = (
    "name", "valid", "reason", "n_directions", "rank", "leakage",
    "restricted_singular_value", "bound_factor", "effective_directions",
    "cv_error", "cv_error_std",
)
_SEED_BOUND = np.iinfo(np.int32).max
_FILE_SUFFIXES = (".npz", ".npy", ".csv")


class _InvalidCandidate(Exception):
    """A candidate that cannot be scored; carries the reason and what is known."""

    def __init__(self, reason: str, n_directions: int | None = None, rank: int | None = None):
        super().__init__(reason)
        self.reason = reason
        self.n_directions = n_directions
        self.rank = rank


@dataclass
class _Context:
    """What every candidate is scored against (shared, read-only)."""

    n_features: int
    basis: np.ndarray  # (d, s) orthonormal, input coordinates; s may be 0
    n_samples: int | None
    X: np.ndarray | None
    y: np.ndarray | None
    forest: object | None
    folds: list | None
    classify: bool


def score_candidates(candidates, X=None, y=None, reference=None, estimator=None, forest=None,
                     cv=5, n_jobs=None, progress=True, random_state=None):
    """Score many candidate lift matrices and rank them, best first.

    Parameters
    ----------
    candidates : dict, list or path
        A dict ``name -> candidate``, a list or tuple of candidates (named
        ``candidate_0``, ``candidate_1``, ... unless they are files, which
        are named by their path), or a single path. A candidate is an
        array-like ``(m, d)`` matrix whose rows are directions, a
        :class:`LiftMatrix`, or a file: ``.npz`` (a lift saved by
        :meth:`LiftMatrix.save`), ``.npy`` (a 2-D array) or ``.csv``
        (comma-separated numbers, optionally with one header row).
    X : array-like of shape (n_samples, n_features), optional
        Inputs, in the coordinates the candidates act on. With ``y`` it
        enables the cross-validated forest error, and it estimates the
        subspace when no ``reference`` is given.
    y : array-like of shape (n_samples,), optional
        Numeric response, or class labels (strings, booleans or other
        non-numeric values; numeric codes are read as a numeric response,
        pass them as strings or pass a classifier as ``forest`` to classify).
    reference : array-like of shape (n_features, s), optional
        Columns spanning the relevant subspace S, in input coordinates.
        Without it, S is estimated on ``(X, y)`` with ``estimator``.
    estimator : subspace estimator, optional
        Used only without ``reference``; default ``SlicedInverse(dim="auto")``.
        A clone is fitted on ``(X, y)``; its ``basis_`` is S.
    forest : scikit-learn estimator, optional
        Fitted on the lifted features ``X @ A.T`` in every fold (a clone
        each time). Default: :class:`~splitlift.forest.StitForestRegressor`
        for a numeric response, :class:`~splitlift.forest.StitForestClassifier`
        for labels, both with ``n_trees=30`` and ``lifetime="auto"``. A
        classifier is scored by its misclassification rate, anything else by
        mean squared error.
    cv : int >= 2 or cross-validation splitter, default 5
        Folds, shared by every candidate: ``KFold`` (``StratifiedKFold`` for a
        classifier) with shuffling, or the folds of a splitter's
        ``split(X, y)``.
    n_jobs : int, optional
        Candidates scored in parallel by joblib. Results do not depend on it.
    progress : bool, default True
        A progress line on stderr, shown only when stderr is a terminal.
    random_state : int, RandomState or None, default None
        Seeds the folds and, when the forest's own ``random_state`` is None,
        the forest. Every candidate sees the same folds and the same forest
        seed (common random numbers), so differences between rows come from
        the directions, not from the draw.

    Returns
    -------
    pandas.DataFrame
        One row per candidate, best first: valid rows by ``cv_error`` (when
        ``X`` and ``y`` are given) or else by ``leakage``, ascending, ties by
        ``restricted_singular_value`` descending, then input order; invalid
        rows last; values equal to 12 significant digits count as ties. Columns:

        - ``name``; ``valid`` (bool); ``reason`` (why a row is invalid, else
          empty);
        - ``n_directions`` m and ``rank`` of the matrix (missing for an
          unreadable file);
        - ``leakage`` ``ε = Σ_i ‖P_{S⊥} a_i‖`` and
          ``restricted_singular_value`` ``σ_min(A U_S)`` of the normalised
          matrix (``Σ_i ‖a_i‖ = 1``);
        - ``bound_factor`` ``ε^{2(d-s)/(d+2)}``, the theory's risk bound
          relative to the axis-aligned rate ``n^{-2/(d+2)}`` (1 when s = d);
        - ``effective_directions`` ``1 / Σ_i w_i²`` of the weights
          ``w_i = ‖a_i‖`` (the inverse Simpson index: m for equal weights,
          near 1 when one direction carries almost all weight);
        - ``cv_error`` and ``cv_error_std``: mean and standard deviation
          (``ddof=0``) over folds of the forest's out-of-fold error; NaN
          without data.

        ``DataFrame.attrs`` records the subspace used (``subspace``,
        ``subspace_dim``), ``n_features``, the ``coordinates``, the
        ``metric`` and what the rows are ``ranked_by``.

    Raises
    ------
    ImportError
        When pandas is not installed.
    ValueError
        For bad top-level input: no candidates, ``X`` without ``y`` (or the
        reverse), a reference of the wrong shape, neither a reference nor
        data, both a reference and an estimator, or bad ``cv``.

    See Also
    --------
    LiftMatrix : the normalisation and rank requirement applied to each candidate.
    splitlift.forest.theory_risk_rate : the error-rate theory behind ``bound_factor``.

    Notes
    -----
    Coordinates: each candidate acts on ``X`` as given, ``z = A x``, and S is
    given or estimated in the same input coordinates. A :class:`LiftMatrix`
    with a standardisation (``input_scale``, as saved by a standardising
    :class:`DirectionLift`) is first folded into input coordinates,
    ``A diag(1 / scale)``; its ``input_mean`` only translates the lifted
    data, which changes neither the leakage nor an axis-split forest.

    A candidate is valid when it is a real 2-D matrix with ``d`` columns,
    finite, with no zero row and unit directions ``a_i / ‖a_i‖`` of rank d
    (relative singular-value tolerance 1e-10, as :class:`LiftMatrix`); it is
    then normalised to ``Σ_i ‖a_i‖ = 1``. Norms, rank and leakage are
    computed after dividing by the largest entry, so a matrix and any
    positive multiple of it (1e-300 or 1e300 times) score alike.

    References
    ----------
    O'Reilly, E. and Tran, N. M. (2024). Minimax rates for high-dimensional
    random tessellation forests. Journal of Machine Learning Research 25(89),
    1-32.

    O'Reilly, E. (2024). Statistical advantages of oblique randomized decision
    trees and forests. arXiv:2407.02458 (risk bounds in terms of the leakage
    of the lift for ridge functions).

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import LiftMatrix
    >>> from splitlift.scoring import score_candidates
    >>> reference = np.array([[1.0], [1.0], [0.0]])
    >>> table = score_candidates(
    ...     {"axis": np.eye(3),
    ...      "around S": LiftMatrix.from_subspace(reference, complement_weight=0.1),
    ...      "flat": np.eye(3)[:2]},
    ...     reference=reference, progress=False)
    >>> table[["name", "valid", "reason"]].values.tolist()
    [['around S', True, ''], ['axis', True, ''], ['flat', False, 'rank 2 < 3']]
    >>> round(float(table["leakage"].iloc[0]), 12)
    0.1
    """
    pandas = _import_pandas()
    named = _named_candidates(candidates)
    context, info = _build_context(X, y, reference, estimator, forest, cv, random_state)

    rows = parallel_map(lambda pair: _score_one(*pair, context), named, len(named),
                        "scoring candidates", n_jobs, progress)

    table = pandas.DataFrame(rows, columns=list(COLUMNS))
    table["n_directions"] = table["n_directions"].astype("Int64")
    table["rank"] = table["rank"].astype("Int64")
    table["valid"] = table["valid"].astype(bool)
    primary = "cv_error" if context.X is not None else "leakage"
    keys = {"_valid": table["valid"], "_primary": _tie_key(table[primary]),
            "_conditioning": _tie_key(table["restricted_singular_value"]),
            "_order": np.arange(len(table))}
    table = table.assign(**keys).sort_values(
        list(keys), ascending=[False, True, False, True], na_position="last", kind="mergesort",
    ).drop(columns=list(keys)).reset_index(drop=True)
    table.attrs.update({**info, "ranked_by": primary})
    return table


def _tie_key(values):
    # values equal to 12 significant digits tie, so rounding noise cannot reorder equal lifts
    return values.map(lambda value: float(f"{value:.12g}"))


# ----------------------------------------------------------------- top level
def _import_pandas():
    try:
        import pandas
    except ImportError as error:
        raise ImportError(
            "score_candidates returns a pandas DataFrame, but pandas is not installed; "
            "install it with pip install pandas (or pip install 'splitlift[all]')."
        ) from error
    return pandas


def _named_candidates(candidates) -> list[tuple[str, object]]:
    if isinstance(candidates, str | Path):
        return [(str(candidates), candidates)]
    if isinstance(candidates, LiftMatrix):
        return [("candidate_0", candidates)]
    if isinstance(candidates, np.ndarray):
        raise ValueError(
            f"candidates is a single array of shape {candidates.shape}; pass a list or dict "
            "of matrices (wrap one matrix as [matrix] or {'name': matrix})."
        )
    if isinstance(candidates, Mapping):
        named = [(str(name), item) for name, item in candidates.items()]
    else:
        try:
            items = list(candidates)
        except TypeError:
            raise ValueError(
                "candidates must be a dict name -> matrix, a list of matrices, LiftMatrix "
                f"objects or file paths, or one path; got {type(candidates).__name__}."
            ) from None
        named = [
            (str(item) if isinstance(item, str | Path) else f"candidate_{index}", item)
            for index, item in enumerate(items)
        ]
    if not named:
        raise ValueError("candidates is empty; pass at least one matrix, lift or file.")
    return named


def _build_context(X, y, reference, estimator, forest, cv, random_state):
    if (X is None) != (y is None):
        given, missing = ("X", "y") if y is None else ("y", "X")
        raise ValueError(
            f"{given} was given without {missing}; pass both X and y to cross-validate a "
            "forest and estimate the subspace, or neither (then pass reference)."
        )
    if reference is None and X is None:
        raise ValueError(
            "score_candidates needs a subspace to measure leakage against: pass reference "
            "(columns spanning S) or data X and y to estimate it."
        )
    if reference is not None and estimator is not None:
        raise ValueError(
            "pass either reference (a known subspace) or estimator (to estimate one from X "
            "and y), not both."
        )
    generator = check_random_state(random_state)
    fold_seed, forest_seed = (int(seed) for seed in generator.randint(_SEED_BOUND, size=2))

    data = response = folds = fitted_forest = None
    classify = False
    if X is not None:
        data = check_finite_matrix(X, "X")
        response = check_response(y, data.shape[0])
        check_sample_count(data.shape[0])
        classify = is_classifier(forest) if forest is not None else _is_discrete(response)
        fitted_forest = _prepare_forest(forest, classify, forest_seed)
        folds = make_folds(cv, data, response, classify, fold_seed)
    n_features = data.shape[1] if data is not None else None

    if reference is not None:
        basis = check_basis(reference, "reference", n_features=n_features)
        source = "reference"
    else:
        from .estimators import SlicedInverse

        template = SlicedInverse(dim="auto") if estimator is None else estimator
        fitted = clone(template).fit(data, response)
        basis = np.asarray(fitted.basis_, dtype=float)
        source = f"estimated by {type(fitted).__name__}"
    context = _Context(
        n_features=basis.shape[0], basis=basis,
        n_samples=None if data is None else data.shape[0], X=data, y=response,
        forest=fitted_forest, folds=folds, classify=classify,
    )
    info = {
        "subspace": source,
        "subspace_dim": int(basis.shape[1]),
        "n_features": int(basis.shape[0]),
        "coordinates": "input coordinates as given (z = A x)",
        "metric": None if data is None else
        ("misclassification rate (1 - accuracy)" if classify else "mean squared error"),
    }
    return context, info


def _prepare_forest(forest, classify: bool, seed: int):
    from .forest import StitForestClassifier, StitForestRegressor

    if forest is None:
        model = StitForestClassifier if classify else StitForestRegressor
        return model(n_trees=DEFAULT_N_TREES, lifetime="auto", random_state=seed)
    if not (hasattr(forest, "fit") and hasattr(forest, "predict")):
        raise ValueError(
            f"forest must be a scikit-learn estimator with fit and predict, got {forest!r}."
        )
    return seeded_clone(forest, seed)


# ------------------------------------------------------------- per candidate
def _score_one(name: str, item, context: _Context) -> dict:
    row = dict.fromkeys(COLUMNS, np.nan)
    row.update(name=name, valid=False, reason="", n_directions=None, rank=None)
    try:
        lift = _valid_lift(_read_candidate(item), context.n_features)
    except _InvalidCandidate as invalid:
        row.update(reason=invalid.reason, n_directions=invalid.n_directions, rank=invalid.rank)
        return row
    eps = geometry.leakage(lift.matrix, context.basis)
    weights = lift.weights
    row.update(
        valid=True,
        n_directions=lift.n_directions,
        rank=lift.rank(),
        leakage=eps,
        restricted_singular_value=geometry.restricted_singular_value(lift.matrix, context.basis),
        bound_factor=_bound_factor(context, eps),
        effective_directions=float(1.0 / np.sum(weights**2)),
    )
    if context.X is not None:
        row["cv_error"], row["cv_error_std"] = cross_validated_error(
            lifted_features(context.X, lift.matrix), context.y, context.forest, context.folds,
            context.classify)
    return row


def _read_candidate(item):
    """The candidate as a LiftMatrix or an array; files are read here."""
    if isinstance(item, LiftMatrix):
        return item
    if isinstance(item, str | Path):
        return _read_file(Path(item))
    try:
        return as_real_array(item, "candidate")
    except ValueError as error:
        raise _InvalidCandidate(str(error).rstrip(".")) from None


def _read_file(path: Path):
    suffix = path.suffix.lower()
    if suffix not in _FILE_SUFFIXES:
        raise _InvalidCandidate(
            f"file {path} unreadable: unknown suffix {path.suffix!r}; use .npz (a saved lift), "
            ".npy or .csv"
        )
    try:
        if suffix == ".npz":
            return LiftMatrix.load(path)
        if suffix == ".npy":
            return np.asarray(np.load(path, allow_pickle=False), dtype=float)
        return _read_csv(path)
    except (OSError, ValueError, EOFError) as error:  # LiftFileError is a ValueError
        raise _InvalidCandidate(f"file {path} unreadable: {error}") from None


def _read_csv(path: Path) -> np.ndarray:
    with open(path, newline="", encoding="utf-8") as handle:
        rows = [row for row in csv.reader(handle) if any(cell.strip() for cell in row)]
    if rows and not all(_is_number(cell) for cell in rows[0]):
        rows = rows[1:]  # a header row
    if not rows:
        raise ValueError("no numeric rows")
    widths = sorted({len(row) for row in rows})
    if len(widths) > 1:
        raise ValueError(f"rows have different numbers of entries {widths}")
    for number, row in enumerate(rows, 1):
        bad = [cell for cell in row if not _is_number(cell)]
        if bad:
            raise ValueError(f"data row {number} holds a non-number {bad[0]!r}")
    return np.array([[float(cell) for cell in row] for row in rows])


def _is_number(cell: str) -> bool:
    try:
        float(cell)
    except ValueError:
        return False
    return True


def _valid_lift(candidate, n_features: int) -> LiftMatrix:
    """Check a candidate against the data's dimension; return it as a normalised LiftMatrix."""
    if isinstance(candidate, LiftMatrix):
        if candidate.n_features != n_features:
            raise _InvalidCandidate(
                f"shape {candidate.matrix.shape} does not match {n_features} features",
                candidate.n_directions, candidate.rank())
        if candidate.input_scale is None:
            return candidate
        # fold the standardisation into input coordinates: A ((x - m) / s) = (A / s) x - const,
        # up to a positive factor (normalisation removes it), without overflow
        candidate = divide_columns(candidate.matrix, candidate.input_scale)[0]
    matrix = candidate
    if matrix.ndim != 2:
        raise _InvalidCandidate(f"not a 2-D matrix (shape {matrix.shape})")
    m = matrix.shape[0]
    if m == 0 or matrix.shape[1] != n_features:
        raise _InvalidCandidate(
            f"shape {matrix.shape} does not match {n_features} features", m or None)
    if not np.all(np.isfinite(matrix)):
        raise _InvalidCandidate("contains NaN or infinite entries", m)
    norms = geometry.row_norms(matrix)
    normalised = geometry.normalise_rows(matrix) if norms.sum() > 0 else matrix
    defect = zero_row_defect(norms, geometry.row_norms(normalised))
    if defect:
        raise _InvalidCandidate(defect, m)
    rank = geometry.direction_rank(normalised)  # LiftMatrix's rule
    if rank < n_features:
        raise _InvalidCandidate(f"rank {rank} < {n_features}", m, rank)
    return LiftMatrix(normalised)


def _bound_factor(context: _Context, eps: float) -> float:
    """``ε^{2(d-s)/(d+2)}``: the theory's risk order over the axis-aligned rate."""
    from .forest import theory_risk_rate

    d, s = context.n_features, context.basis.shape[1]
    if s == 0 or (eps <= 0 and s < d):
        return float("nan")
    n = context.n_samples or 1  # the factor does not depend on n
    axis_rate = n ** (-2.0 / (d + 2))
    return theory_risk_rate(n, d, s, float(min(eps, 1.0))) / axis_rate
