"""Model selection: everything that cross-validates a forest on lifted features.

This layer sits above the estimators and the transformer. It holds the folds
and seeded forests that candidate scoring (:mod:`splitlift.scoring`) shares,
the cross-validation dimension rule (``dim_rule="cv"``, registered with
:mod:`splitlift.dimension`), and :class:`DirectionLiftCV`, the choice between
the raw inputs and lifts.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from numbers import Integral, Real

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin, clone, is_classifier
from sklearn.ensemble import (
    ExtraTreesClassifier,
    ExtraTreesRegressor,
    HistGradientBoostingClassifier,
    HistGradientBoostingRegressor,
    RandomForestClassifier,
    RandomForestRegressor,
)
from sklearn.metrics import get_scorer, get_scorer_names
from sklearn.model_selection import (
    KFold,
    RepeatedKFold,
    RepeatedStratifiedKFold,
    StratifiedKFold,
    check_cv,
)
from sklearn.preprocessing import FunctionTransformer
from sklearn.utils import check_random_state
from sklearn.utils._param_validation import HasMethods, Interval, StrOptions
from sklearn.utils.validation import _check_feature_names_in, check_is_fitted, validate_data

from . import dimension
from ._progress import parallel_map
from .estimators import AverageDerivative, SlicedInverse
from .forest import StitForestClassifier, StitForestRegressor
from .lift import LiftMatrix
from .moments import _is_discrete
from .transformer import ApplyLift, DirectionLift

__all__ = ["CrossValidatedDimension", "DirectionLiftCV"]

_SEED_BOUND = np.iinfo(np.int32).max

#: Forests known by name: (regressor, classifier).
FORESTS = {
    "random_forest": (RandomForestRegressor, RandomForestClassifier),
    "extra_trees": (ExtraTreesRegressor, ExtraTreesClassifier),
    "hist_gradient_boosting": (HistGradientBoostingRegressor, HistGradientBoostingClassifier),
    "stit": (StitForestRegressor, StitForestClassifier),
}

#: Published acronyms used to name candidates.
ACRONYMS = {
    "SlicedInverse": "SIR",
    "SlicedAverageVariance": "SAVE",
    "HessianDirections": "pHd",
    "GradientOuterProduct": "OPG",
    "AverageDerivative": "ADE",
}

RAW_INPUTS = "raw inputs"

#: Repeats of an integer ``cv`` in DirectionLiftCV when ``n_repeats`` is None.
DEFAULT_REPEATS = 2


# --------------------------------------------------------------- shared helpers
def named_forest(name: str, classify: bool, random_state=None):
    """A forest by name (``FORESTS``), regressor or classifier, with its defaults."""
    if name not in FORESTS:
        raise ValueError(f"unknown forest {name!r}; choose one of {sorted(FORESTS)}.")
    model = FORESTS[name][int(classify)]()
    if "random_state" in model.get_params():
        model.set_params(random_state=random_state)
    return model


def seeded_clone(forest, seed: int):
    """An unfitted clone of ``forest``, seeded with ``seed`` when its own seed is None."""
    model = clone(forest)
    if model.get_params().get("random_state", 0) is None:
        model.set_params(random_state=seed)
    return model


def make_folds(cv, X, y, classify: bool, seed: int, n_repeats: int = 1) -> list:
    """Train/test index pairs shared by every candidate.

    An integer gives shuffled ``KFold`` (``StratifiedKFold`` for class labels)
    seeded with ``seed``, repeated ``n_repeats`` times with fresh shuffles
    (scikit-learn's repeated splitters, whose first repeat is that shuffled
    split); a splitter or an iterable of pairs is used as given.
    """
    n_samples = X.shape[0]
    if isinstance(cv, Integral) and not isinstance(cv, bool):
        if cv < 2:
            raise ValueError(f"cv must be at least 2, got {cv}.")
        if n_samples < 2 * cv:
            raise ValueError(
                f"X has n_samples = {n_samples}, too few for cv = {cv} folds (at least two "
                f"rows per fold, {2 * cv} in all); lower cv or add rows."
            )
        splitter = (RepeatedStratifiedKFold if classify else RepeatedKFold)(
            n_splits=int(cv), n_repeats=n_repeats, random_state=seed)
    elif (hasattr(cv, "split") or np.iterable(cv)) and not isinstance(cv, str | bytes):
        splitter = check_cv(cv, y, classifier=classify)
    else:
        raise ValueError(
            f"cv must be an integer >= 2 or a cross-validation splitter, got {cv!r}."
        )
    return list(splitter.split(X, y))


def prediction_error(model, X, y, classify: bool) -> float:
    """Misclassification rate of a classifier, else mean squared error."""
    predicted = model.predict(X)
    if classify:
        return float(np.mean(predicted != y))
    return float(np.mean((predicted - y.astype(float)) ** 2))


def cross_validated_error(features, y, forest, folds, classify: bool) -> tuple[float, float]:
    """Mean and standard deviation (``ddof=0``) over folds of a forest's test error."""
    errors = [prediction_error(clone(forest).fit(features[train], y[train]),
                               features[test], y[test], classify)
              for train, test in folds]
    return float(np.mean(errors)), float(np.std(errors))


# ------------------------------------------------------ dimension by CV (rule)
class CrossValidatedDimension(BaseEstimator):
    """Choose the dimension by the cross-validated error of a downstream forest.

    For each k in ``0 .. max_dim`` a ``DirectionLift`` with the estimator at
    ``dim = k`` feeds ``forest``; the k with the lowest mean error is chosen
    (``k = 0`` uses the even-spread lift, no subspace). This costs
    ``(max_dim + 1) * cv`` forest fits, hence the modest defaults. Used by
    ``dim="auto", dim_rule="cv"``; to choose between the raw inputs, several
    estimators and dimensions, use :class:`DirectionLiftCV`.

    Parameters
    ----------
    forest : scikit-learn estimator, optional
        Default: ``RandomForestRegressor(n_estimators=50)`` for a numeric
        response, ``RandomForestClassifier`` for class labels.
    cv : int or cross-validation splitter, default 5
    max_dim : int, optional
        Default ``min(default_max_dim(d), 5)``.
    complement_weight : float, default 0.05
    random_state : int or None, default None
        Seeds the default forest and the fold split.
    """

    def __init__(self, forest=None, cv=5, max_dim=None, complement_weight=0.05,
                 random_state=None):
        self.forest = forest
        self.cv = cv
        self.max_dim = max_dim
        self.complement_weight = complement_weight
        self.random_state = random_state

    def select(self, estimator, X, y) -> tuple[int, dimension.DimensionTest]:
        from sklearn.model_selection import cross_val_score
        from sklearn.pipeline import make_pipeline

        d = X.shape[1]
        top = dimension._largest_candidate(
            estimator, d, min(dimension.default_max_dim(d), 5)
            if self.max_dim is None else self.max_dim)
        classify = _is_discrete(np.asarray(y))
        forest = self.forest
        if forest is None:
            forest = named_forest("random_forest", classify, self.random_state).set_params(
                n_estimators=50, n_jobs=-1)
        cv = self.cv
        if isinstance(cv, Integral):
            splitter = StratifiedKFold if classify else KFold
            cv = splitter(int(cv), shuffle=True, random_state=self.random_state)
        rows, means = [], []
        for k in range(top + 1):
            lift = ApplyLift(LiftMatrix.even_spread(d)) if k == 0 else DirectionLift(
                dimension._fixed_dim(estimator, k), complement_weight=self.complement_weight,
                standardize=False)
            scores = cross_val_score(make_pipeline(lift, clone(forest)), X, y, cv=cv)
            # scores are "higher is better": report the error as 1 - accuracy or -R^2 + 1
            error = 1.0 - scores
            means.append(error.mean())
            rows.append({"k": k, "criterion": float(error.mean()), "std": float(error.std())})
        chosen = int(np.argmin(means))
        metric = "1 - accuracy" if classify else "1 - R^2"
        return chosen, dimension.DimensionTest(f"cross-validation ({metric})", chosen, rows)


dimension.register_rule("cv", CrossValidatedDimension)


# ------------------------------------------------------------ DirectionLiftCV
@dataclass(frozen=True)
class _Candidate:
    """One row of the search: the raw inputs, or one lift in one output form."""

    name: str
    label: str | None  # estimator label; None for the raw inputs
    dim: int | None
    keep_inputs: bool | None
    group: int  # index of the fitted lift it shares (-1: raw inputs)

    @property
    def complexity(self) -> tuple:
        # the one-standard-error rule prefers the raw inputs, then small
        # dimensions, then the lift alone over the lift with inputs kept
        if self.label is None:
            return (0, 0, 0)
        return (1, self.dim, int(self.keep_inputs))


@dataclass(frozen=True)
class _Metric:
    """How fold scores (higher is better) become errors, and what they are called."""

    scorer: object
    name: str
    relative: bool  # relative changes make sense (a non-negative error)
    offset: float  # error = offset - score

    def error(self, scores: np.ndarray) -> np.ndarray:
        return self.offset - scores


def _metric(scoring, classify: bool) -> _Metric:
    if scoring is None:
        scoring = "accuracy" if classify else "neg_mean_squared_error"
        name = "misclassification rate" if classify else "mean squared error"
    else:
        name = scoring if isinstance(scoring, str) else getattr(scoring, "__name__", "score")
    scorer = get_scorer(scoring)
    if isinstance(scoring, str) and scoring in ("accuracy", "balanced_accuracy"):
        return _Metric(scorer, name if name != scoring else f"1 - {scoring}", True, 1.0)
    if isinstance(scoring, str) and scoring.startswith("neg_"):
        return _Metric(scorer, name if name != scoring else scoring[4:].replace("_", " "),
                       True, 0.0)
    return _Metric(scorer, f"-{name}", False, 0.0)


class DirectionLiftCV(TransformerMixin, BaseEstimator):
    """Choose between the raw inputs and lifts by cross-validating the downstream forest.

    Every candidate — the raw inputs, and a :class:`DirectionLift` for each
    estimator, dimension and output form (lifted directions alone, or after
    the inputs) — is scored by K-fold cross-validation of ``forest`` on the
    same folds with the same forest seed (common random numbers). A paired
    one-standard-error rule then picks the simplest candidate whose error is
    within one standard error of the best; the raw inputs are the simplest,
    and a lift qualifies only when it beats them by more than ``margin``
    paired standard errors, so a lift is chosen only when it beats them
    clearly. The chosen
    candidate is refitted on all rows and applied by ``transform``; when no
    lift wins, the inputs pass through unchanged, so trying costs nothing
    but time.

    Parameters
    ----------
    forest : estimator or {"random_forest", "extra_trees", "hist_gradient_boosting", \
"stit"}, default None
        The model the lifted features will feed, cross-validated on each
        candidate (a clone each time). A name gives that forest with its
        defaults, regressor or classifier after the target; None means
        ``"random_forest"``. A classifier is used for class labels; give one
        when numeric codes are class labels. Put the same forest after this
        transformer in a pipeline. A forest whose ``random_state`` is None is
        seeded from ``random_state``.
    estimators : list or dict of estimators, default None
        Subspace estimators (fitted at each dimension in ``dims``) or
        :class:`DirectionLift` objects (their settings kept, their
        estimator's ``dim`` and ``keep_inputs`` set per candidate). A dict
        names them; otherwise they are named by their published acronyms
        (SIR, SAVE, pHd, OPG, ADE). None means ``[AverageDerivative()]``
        for a numeric response: on the real-data suite (``splitlift bench
        --suite real``) its single direction, the average gradient, helped
        most often, and every further candidate added more selection noise
        than gain (see Notes). For class labels None means
        ``[AverageDerivative(), SlicedInverse()]``: SIR then slices by class,
        with nothing to tune, and its leading direction is the classical
        discriminant direction (Li 1991, Sec. 5); on the suite's class-label
        sets it lowered the error where ADE alone did not (see Notes).
    dims : sequence of int, default None
        Subspace dimensions tried; those above the number of features are
        skipped. None means ``(1,)``: at a few hundred rows a second
        direction was rarely worth its estimation noise on the real-data
        suite. Pass ``(1, 2)`` or more when n is large.
    keep_inputs : bool or sequence of bool, default (False, True)
        Output forms tried: lifted directions alone (False), after the
        inputs (True).
    cv : int, cross-validation splitter or iterable, default 5
        An integer gives shuffled ``KFold`` (``StratifiedKFold`` for class
        labels) seeded from ``random_state``, repeated ``n_repeats`` times.
    scoring : str or callable, default None
        A scikit-learn scorer (higher is better). None scores by mean squared
        error for a numeric response and by misclassification rate for class
        labels.
    n_jobs : int, default None
        Folds and candidates evaluated in parallel by joblib. Results do not
        depend on it.
    random_state : int, RandomState or None, default None
        Seeds the folds, the forest and randomised estimators; one value
        reproduces the whole search.
    margin : float, default 1.0
        How many paired standard errors a lift's CV error must lie below the
        raw inputs' to be chosen (0 accepts any lift that is lower). A
        stricter guard is not safer on small data: on the real-data suite
        (one unrepeated split, plain standard errors) ``margin=2`` kept the
        raw inputs more often, yet lost more than one standard error against
        them on 2 of 11 data sets with random forests (none at
        ``margin=1``) and won on fewer (see the guide). Standard errors are
        corrected for the training rows that splits share (see Notes).
    n_repeats : int or None, default None
        Repeats of an integer ``cv``, each with a fresh shuffle (scikit-learn's
        ``RepeatedKFold``): every candidate is scored on ``cv * n_repeats``
        splits. None means 2. One split's luck otherwise decides: a lift that
        wins on the inner folds by chance loses on new data. Only an integer
        ``cv`` is repeated; with a splitter leave None (or 1) and repeat
        inside the splitter.
    progress : bool, default True
        Show a progress bar (tqdm) on stderr when it is a terminal.

    Attributes
    ----------
    cv_results_ : dict of arrays
        One entry per candidate, readable as ``pandas.DataFrame(cv_results_)``:
        ``candidate``, ``param_estimator``, ``param_dim``,
        ``param_keep_inputs``, ``params``, ``n_output_features``,
        ``split{k}_test_score``, ``mean_test_score``, ``std_test_score``,
        ``rank_test_score`` (scikit-learn's names; higher is better),
        ``mean_test_error``, ``std_test_error`` (the error the verdict speaks
        of), ``sem_test_error`` (standard error of the mean error, corrected
        as in Notes), ``change_vs_raw`` and ``change_vs_raw_se`` (relative
        change of the mean error against the raw inputs and its corrected
        paired standard error, NaN for errors that can be negative),
        ``within_one_se``,
        ``status`` (``"ok"`` or why the candidate failed), ``mean_fit_time``.
    best_index_ : int
        Row of ``cv_results_`` chosen by the one-standard-error rule.
    best_params_ : dict
        ``{"estimator": label or None, "dim": int or None, "keep_inputs":
        bool or None}``; None values mean the raw inputs.
    best_score_ : float
        ``mean_test_score`` of the chosen candidate.
    best_lift_ : DirectionLift or FunctionTransformer
        The chosen lift refitted on all rows, or a pass-through.
    verdict_ : str
        One sentence: what was chosen and by how much it changes the CV error
        against the raw inputs.
    forest_ : estimator
        The unfitted, seeded forest used in every fold.
    n_splits_ : int
        Train/test splits every candidate was scored on (``cv * n_repeats``
        for an integer ``cv``).
    refit_time_ : float
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Present when ``X`` had string column names.

    See Also
    --------
    DirectionLift : one lift with fixed settings.
    splitlift.scoring.score_candidates : rank given direction matrices.

    Notes
    -----
    The rule (common practice for model choice by cross-validation, after
    Breiman et al. 1984 and Hastie, Tibshirani & Friedman 2009, Sec. 7.10)
    is applied to paired split-by-split differences: with ``e_c`` the
    errors of candidate c on the J splits and b the best mean, c qualifies
    when ``mean(e_c - e_b) <= se(e_c - e_b)``; a lift qualifies only when it
    also beats the raw inputs r by the margin m,
    ``mean(e_c - e_r) < -m se(e_c - e_r)``. The standard error is the
    corrected one of Nadeau & Bengio (2003),
    ``se(d) = sd(d) sqrt(1/J + n_test/n_train)``, which Bouckaert & Frank
    (2004) recommend for repeated K-fold: splits share training rows, so the
    plain ``sd(d) / sqrt(J)`` is too small, and the more so the more
    repeats. Among those
    that qualify the simplest wins: raw inputs, then smaller ``dim``, then
    the lift alone before the lift with inputs kept. Cross-validation error
    of the chosen candidate is optimistic (it won a selection); judge it on
    held-out data or by nesting this transformer in an outer
    cross-validation, as ``splitlift bench --suite real`` does.

    Every candidate is another chance for a lift to win by luck on the inner
    folds and lose on new data, so the defaults are lean. In an exploration
    on the real-data suite (11 data sets, 5 outer folds, 40-tree forests),
    nine candidates (SIR and OPG at dimensions 1 and 2, alone and with the
    inputs kept) lost against the raw inputs by more than one standard error
    on 5 of 11 data sets with extra trees; the three default candidates (the
    raw inputs, the ADE direction alone and with the inputs kept) did so on
    none with extra trees and on one (by 2.9%) with random forests. Those
    figures chose the defaults, so they are in-sample. ``splitlift bench
    --suite real`` measures the defaults again on fresh outer folds (100-tree
    forests, 2 x 5 folds). With one unrepeated 5-fold split and the plain
    standard error, the choice lost by more than one standard error on
    none of the 11 data sets with random forests and on 2 with extra trees
    (star98 +1.2% ± 0.9%, anes96 vote +3.2% ± 1.9%). Replaying the choice
    offline on three repeats of the inner folds, that rule lost so on 0.5
    data sets per forest and draw of inner folds on average (and lowered
    the error on 7.0 of 11); two repeats with the corrected standard error
    lost so on 0.17 to 0.33 (margin 0 to 1) and lowered the error on 6.0 to
    6.2, so these are the defaults. With them the suite measured no such loss with
    extra trees (lower on 7 of 11) and one with random forests (breast
    cancer +4.9% ± 3.2%, lower on 6). Every such figure moves by one or two
    data sets from one draw of inner folds to the next. Choosing by the
    Brier score instead of the misclassification rate (a smoother, proper
    score) picked lifts more often and lost more on two class-label data
    sets with extra trees, in the same offline replay.

    SIR joined ADE among the default candidates for class labels after the
    suite's four class-label data sets showed ADE alone lowering the random
    forest's error on none of them (breast cancer +4.9% ± 3.2%). On those
    same outer folds ADE and SIR together gave breast cancer -24.3% ±
    12.6% with random forests and -16.3% ± 6.0% with extra trees, and
    equalled ADE alone within one fold's difference elsewhere. Because
    those folds chose it, it was checked on fresh outer folds (2 x 5,
    another seed): against ADE alone, breast cancer -9.5% instead of 0.0%
    (random forest) and -10.5% instead of 0.0% (extra trees), mode choice
    -7.1% instead of -3.6% (random forest), the other six pairs equal, and
    no loss beyond one standard error against the raw inputs with either.

    Split-searching forests (random forests and extra trees with their
    default ``max_features`` for regression, gradient boosting) ignore the
    lift's weights, so only its directions are compared; see
    :class:`DirectionLift`.

    References
    ----------
    Breiman, L., Friedman, J. H., Olshen, R. A. and Stone, C. J. (1984).
    Classification and Regression Trees. Wadsworth, Sec. 3.4.3.

    Hastie, T., Tibshirani, R. and Friedman, J. (2009). The Elements of
    Statistical Learning, 2nd ed. Springer, Sec. 7.10.

    Nadeau, C. and Bengio, Y. (2003). Inference for the generalization
    error. Machine Learning 52, 239-281.

    Bouckaert, R. R. and Frank, E. (2004). Evaluating the replicability of
    significance tests for comparing learning algorithms. Advances in
    Knowledge Discovery and Data Mining (PAKDD), LNCS 3056, 3-12.

    Examples
    --------
    >>> import numpy as np
    >>> from splitlift import DirectionLiftCV
    >>> rng = np.random.default_rng(0)
    >>> X = rng.standard_normal((300, 5))
    >>> y = np.sin(X @ np.ones(5)) + 0.05 * rng.standard_normal(300)
    >>> search = DirectionLiftCV(forest="extra_trees", cv=3, random_state=0).fit(X, y)
    >>> search.best_params_["estimator"] is not None   # a lift beats the raw inputs
    True
    >>> search.transform(X).shape[0]
    300
    """

    _parameter_constraints: dict = {
        "forest": [HasMethods(["fit", "predict"]), StrOptions(set(FORESTS)), None],
        "estimators": [list, tuple, dict, None],
        "dims": ["array-like", None],
        "keep_inputs": ["boolean", list, tuple],
        "cv": ["cv_object"],
        "scoring": [StrOptions(set(get_scorer_names())), callable, None],
        "n_jobs": [Integral, None],
        "random_state": ["random_state"],
        "margin": [Interval(Real, 0, None, closed="left")],
        "n_repeats": [Interval(Integral, 1, None, closed="left"), None],
        "progress": ["boolean"],
    }

    def __init__(self, forest=None, estimators=None, dims=None, keep_inputs=(False, True),
                 cv=5, scoring=None, n_jobs=None, random_state=None, margin=1.0,
                 n_repeats=None, progress=True):
        self.forest = forest
        self.estimators = estimators
        self.dims = dims
        self.keep_inputs = keep_inputs
        self.cv = cv
        self.scoring = scoring
        self.n_jobs = n_jobs
        self.random_state = random_state
        self.margin = margin
        self.n_repeats = n_repeats
        self.progress = progress

    # ------------------------------------------------------------------ fit
    def fit(self, X, y):
        """Cross-validate every candidate, choose one, refit it on all rows.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
            Numeric response, or class labels of any dtype.

        Returns
        -------
        self
        """
        self._validate_params()
        original = X
        X, y = validate_data(self, X, y, dtype=float)
        generator = check_random_state(self.random_state)
        fold_seed, forest_seed, estimator_seed = (
            int(seed) for seed in generator.randint(_SEED_BOUND, size=3))
        classify = self._classification(y)
        self.forest_ = self._forest_template(classify, forest_seed)
        metric = _metric(self.scoring, classify)
        n_repeats = self._repeats()
        folds = make_folds(self.cv, X, y, classify, fold_seed, n_repeats)
        self.n_splits_ = len(folds)
        test_share = float(np.mean([len(test) / len(train) for train, test in folds]))
        lifts, candidates = self._candidates(X.shape[1], estimator_seed, classify)

        units = [(fold, group) for fold in range(len(folds)) for group in range(-1, len(lifts))]
        results = parallel_map(
            lambda unit: _evaluate_unit(X, y, folds[unit[0]], unit[1], lifts, candidates,
                                        self.forest_, metric.scorer),
            units, len(units), "DirectionLiftCV", self.n_jobs, self.progress)
        scores, seconds, widths, messages = _collect(units, results, len(candidates),
                                                     len(folds))
        self._check_estimators_ran(candidates, scores, messages)
        errors = metric.error(scores)
        self.best_index_, within = _one_standard_error_choice(candidates, errors, self.margin,
                                                              test_share)
        self.cv_results_ = _results_table(candidates, scores, errors, seconds, widths,
                                          messages, within, metric.relative, test_share)
        chosen = candidates[self.best_index_]
        self.best_params_ = {"estimator": chosen.label, "dim": chosen.dim,
                             "keep_inputs": chosen.keep_inputs}
        self.best_score_ = float(self.cv_results_["mean_test_score"][self.best_index_])
        if n_repeats > 1:
            design = f"{self.cv}-fold CV repeated {n_repeats} times"
        elif isinstance(self.cv, Integral):
            design = f"{self.cv}-fold CV"
        else:
            design = f"CV over {len(folds)} train/test splits"
        self.verdict_ = _verdict(self.cv_results_, self.best_index_, metric, design,
                                 self.margin, type(self.forest_).__name__)
        started = time.perf_counter()
        if chosen.label is None:
            self.best_lift_ = FunctionTransformer(feature_names_out="one-to-one").fit(original)
        else:
            self.best_lift_ = clone(lifts[chosen.group][1]).set_params(
                keep_inputs=chosen.keep_inputs).fit(original, y)
        self.refit_time_ = time.perf_counter() - started
        return self

    def _repeats(self) -> int:
        integer_cv = isinstance(self.cv, Integral) and not isinstance(self.cv, bool)
        if self.n_repeats is None:
            return DEFAULT_REPEATS if integer_cv else 1
        if not integer_cv and self.n_repeats != 1:
            raise ValueError(
                f"n_repeats={self.n_repeats} repeats an integer cv, but cv is {self.cv!r}; "
                "pass cv as a number of folds, or leave n_repeats None and repeat inside "
                "the splitter (for example sklearn.model_selection.RepeatedKFold)."
            )
        return int(self.n_repeats)

    def _classification(self, y: np.ndarray) -> bool:
        if self.forest is not None and not isinstance(self.forest, str):
            return is_classifier(self.forest)
        return _is_discrete(y)

    def _forest_template(self, classify: bool, seed: int):
        forest = "random_forest" if self.forest is None else self.forest
        if isinstance(forest, str):
            return named_forest(forest, classify, seed)
        return seeded_clone(forest, seed)

    def _candidates(self, n_features: int, seed: int, classify: bool):
        """The lifts to fit ((label, template) per estimator and dimension) and all rows."""
        dims = self._dims(n_features)
        forms = ([bool(self.keep_inputs)] if isinstance(self.keep_inputs, bool | np.bool_)
                 else [bool(form) for form in self.keep_inputs])
        if not forms:
            raise ValueError("keep_inputs is empty; pass True, False or (False, True).")
        candidates = [_Candidate(RAW_INPUTS, None, None, None, -1)]
        lifts = []
        for label, template in self._named_templates(classify):
            for dim in dims:
                lift = _with_dimension(template, dim, seed)
                lifts.append((label, lift))
                for keep in dict.fromkeys(forms):
                    name = f"{label} dim {dim}" + (" + inputs" if keep else "")
                    candidates.append(_Candidate(name, label, dim, keep, len(lifts) - 1))
        return lifts, candidates

    def _dims(self, n_features: int) -> list[int]:
        dims = (1,) if self.dims is None else self.dims
        values = []
        for value in np.atleast_1d(np.asarray(dims, dtype=object)):
            if isinstance(value, bool) or not isinstance(value, Integral) or value < 1:
                raise ValueError(f"dims must hold positive integers, got {value!r}.")
            values.append(int(value))
        usable = sorted({value for value in values if value <= n_features})
        if not usable:
            raise ValueError(
                f"every dimension in dims={list(values)} exceeds the {n_features} features; "
                f"choose dims between 1 and {n_features}."
            )
        return usable

    def _named_templates(self, classify: bool) -> list[tuple[str, DirectionLift]]:
        estimators = self.estimators
        if estimators is None:
            estimators = [AverageDerivative(), SlicedInverse()] if classify else [
                AverageDerivative()]
        items = (list(estimators.items()) if isinstance(estimators, dict)
                 else [(None, item) for item in estimators])
        if not items:
            raise ValueError("estimators is empty; pass at least one subspace estimator.")
        named, seen = [], set()
        for name, item in items:
            template = item if isinstance(item, DirectionLift) else DirectionLift(item)
            inner = template.estimator if template.estimator is not None else SlicedInverse()
            if not (hasattr(inner, "fit") and "dim" in inner.get_params()):
                raise ValueError(
                    f"estimators holds {inner!r}, which is not a subspace estimator with a "
                    "dim parameter; pass splitlift estimators such as SlicedInverse()."
                )
            label = str(name) if name is not None else ACRONYMS.get(
                type(inner).__name__, type(inner).__name__)
            base, count = label, 2
            while label in seen:  # two SIRs with different settings stay apart
                label, count = f"{base} ({count})", count + 1
            seen.add(label)
            named.append((label, template.set_params(estimator=inner)))
        return named

    def _check_estimators_ran(self, candidates, scores, messages) -> None:
        for label in dict.fromkeys(c.label for c in candidates if c.label is not None):
            rows = [i for i, c in enumerate(candidates) if c.label == label]
            if np.all(np.isnan(scores[rows])):
                raise ValueError(
                    f"the estimator {label} failed on every fold ({messages.get(rows[0])}); "
                    "remove it from estimators or fix the cause (for instance fewer slices, "
                    "fewer folds or more rows)."
                )

    def summary(self):
        """The comparison as a compact pandas DataFrame, one row per candidate.

        Columns: ``candidate``, ``output_columns``, ``cv_error`` and
        ``cv_error_sd`` (mean and standard deviation over splits),
        ``change_vs_raw`` and ``change_se`` (relative change against the raw
        inputs and its paired standard error), ``within_one_se``, ``chosen``
        and ``status``. ``DataFrame.attrs["verdict"]`` holds :attr:`verdict_`.

        Returns
        -------
        pandas.DataFrame
        """
        import pandas as pd

        check_is_fitted(self, "cv_results_")
        results = self.cv_results_
        table = pd.DataFrame({
            "candidate": results["candidate"],
            "output_columns": results["n_output_features"],
            "cv_error": results["mean_test_error"],
            "cv_error_sd": results["std_test_error"],
            "change_vs_raw": results["change_vs_raw"],
            "change_se": results["change_vs_raw_se"],
            "within_one_se": results["within_one_se"],
            "chosen": np.arange(len(results["candidate"])) == self.best_index_,
            "status": results["status"],
        })
        table.attrs["verdict"] = self.verdict_
        return table

    # ------------------------------------------------------------ transform
    def transform(self, X):
        """Apply the chosen lift (or pass the inputs through).

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, n_output)
        """
        check_is_fitted(self, "best_lift_")
        checked = validate_data(self, X, dtype=float, reset=False)
        if self.best_params_["estimator"] is None:
            return checked
        return self.best_lift_.transform(X)

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        """Output names: the input names (pass-through or kept), then the lifted columns.

        Parameters
        ----------
        input_features : array-like of str, optional

        Returns
        -------
        ndarray of str
        """
        check_is_fitted(self, "best_lift_")
        inputs = _check_feature_names_in(self, input_features)
        if self.best_params_["estimator"] is None:
            return np.asarray(inputs, dtype=object)
        return self.best_lift_.get_feature_names_out(inputs)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.required = True
        return tags


def _with_dimension(template: DirectionLift, dim: int, seed: int) -> DirectionLift:
    """A clone of the template whose estimator estimates ``dim`` directions, seeded."""
    estimator = clone(template.estimator).set_params(dim=dim)
    if estimator.get_params().get("random_state", 0) is None:
        estimator.set_params(random_state=seed)
    return clone(template).set_params(estimator=estimator, keep_inputs=True)


def _evaluate_unit(X, y, fold, group: int, lifts, candidates, forest, scorer) -> list:
    """Score the raw inputs (group -1) or every output form of one lift on one fold.

    Returns ``(candidate index, score, seconds, output columns, message)``
    tuples; a failure gives a NaN score and the error as message. The raw inputs are not
    guarded: if the forest cannot fit them, that error is the user's answer.
    """
    train, test = fold
    rows = [i for i, c in enumerate(candidates) if c.group == group]
    if group < 0:
        started = time.perf_counter()
        model = clone(forest).fit(X[train], y[train])
        return [(rows[0], float(scorer(model, X[test], y[test])),
                 time.perf_counter() - started, X.shape[1], "")]
    started = time.perf_counter()
    try:
        lift = clone(lifts[group][1]).fit(X[train], y[train])
        lifted_train, lifted_test = lift.transform(X[train]), lift.transform(X[test])
    except Exception as error:  # a failed estimator fails this fold for its rows only
        message = f"{type(error).__name__}: {error}"
        return [(index, np.nan, 0.0, 0, message) for index in rows]
    lift_seconds = time.perf_counter() - started
    outcome = []
    width = X.shape[1]
    for index in rows:
        columns = slice(None) if candidates[index].keep_inputs else slice(width, None)
        started = time.perf_counter()
        try:
            model = clone(forest).fit(lifted_train[:, columns], y[train])
            score = float(scorer(model, lifted_test[:, columns], y[test]))
        except Exception as error:
            outcome.append((index, np.nan, 0.0, 0, f"{type(error).__name__}: {error}"))
            continue
        outcome.append((index, score, lift_seconds + time.perf_counter() - started,
                        lifted_train[:, columns].shape[1], ""))
    return outcome


def _collect(units, results, n_candidates: int, n_folds: int):
    """Fold scores, fit seconds, output widths and first error message per candidate."""
    scores = np.full((n_candidates, n_folds), np.nan)
    seconds = np.zeros((n_candidates, n_folds))
    widths = np.zeros(n_candidates, dtype=int)
    messages: dict[int, str] = {}
    for (fold, _), outcome in zip(units, results, strict=True):
        for index, score, elapsed, width, message in outcome:
            scores[index, fold], seconds[index, fold] = score, elapsed
            widths[index] = max(widths[index], width)
            if message and index not in messages:
                messages[index] = message
    return scores, seconds, widths, messages


def _raw_index(candidates) -> int:
    return next(i for i, c in enumerate(candidates) if c.label is None)


def _standard_error(values: np.ndarray, test_share: float) -> np.ndarray:
    """Corrected standard error of the mean over splits of each row (NaN with one split).

    ``sd sqrt(1/J + n_test/n_train)`` (Nadeau & Bengio 2003); ``test_share``
    is ``n_test/n_train``, and zero gives the plain ``sd / sqrt(J)``.
    """
    n_splits = values.shape[1]
    if n_splits < 2:
        return np.full(len(values), np.nan)
    return np.std(values, axis=1, ddof=1) * np.sqrt(1.0 / n_splits + test_share)


def _paired_differences(errors: np.ndarray, reference: int,
                        test_share: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Mean split-by-split difference of every row from row ``reference``, and its
    corrected standard error (:func:`_standard_error`)."""
    differences = errors - errors[reference]
    return np.mean(differences, axis=1), _standard_error(differences, test_share)


def _one_standard_error_choice(candidates, errors: np.ndarray, margin: float,
                               test_share: float = 0.0) -> tuple[int, np.ndarray]:
    """The simplest candidate within one paired standard error of the best (see Notes).

    A lift must also beat the raw inputs by ``margin`` paired standard errors;
    ``test_share`` (``n_test/n_train``) corrects them for shared training rows.
    """
    valid = ~np.isnan(errors).any(axis=1)
    means = np.where(valid, np.nanmean(errors, axis=1), np.inf)
    best = int(np.argmin(means))  # the raw inputs come first, so they win ties
    behind_best, spread = _paired_differences(errors, best, test_share)
    # a relative tolerance so that identical candidates count as within
    tolerance = 1e-12 * max(abs(means[best]), 1e-300)
    within = valid & (behind_best <= np.nan_to_num(spread) + tolerance)
    raw = _raw_index(candidates)
    lifts = np.array([c.label is not None for c in candidates])
    behind_raw, raw_spread = _paired_differences(errors, raw, test_share)
    within &= ~lifts | (behind_raw < -margin * np.nan_to_num(raw_spread))
    eligible = np.flatnonzero(within)
    if eligible.size == 0:  # the best lift missed the margin and raw is not within of it
        return raw, within
    order = sorted(eligible, key=lambda i: (candidates[i].complexity, means[i], i))
    return int(order[0]), within


def _results_table(candidates, scores, errors, seconds, widths, messages, within,
                   relative: bool, test_share: float) -> dict:
    """``cv_results_``: one entry per candidate, scikit-learn's names where they exist."""
    from scipy.stats import rankdata

    n_candidates, n_folds = scores.shape
    failed_folds = np.isnan(scores).sum(axis=1)
    ok = failed_folds == 0
    mean_score = np.where(ok, np.nanmean(np.where(ok[:, None], scores, 0.0), axis=1), np.nan)
    raw = _raw_index(candidates)
    behind_raw, raw_spread = _paired_differences(errors, raw, test_share)
    baseline = float(np.mean(errors[raw]))
    relative = relative and baseline > 0
    scale = baseline if relative else np.nan
    change, change_se = behind_raw / scale, raw_spread / scale
    results = {
        "candidate": np.array([c.name for c in candidates], dtype=object),
        "param_estimator": np.array([c.label for c in candidates], dtype=object),
        "param_dim": np.array([c.dim for c in candidates], dtype=object),
        "param_keep_inputs": np.array([c.keep_inputs for c in candidates], dtype=object),
        "params": [{"estimator": c.label, "dim": c.dim, "keep_inputs": c.keep_inputs}
                   for c in candidates],
        "n_output_features": widths,
    }
    for fold in range(n_folds):
        results[f"split{fold}_test_score"] = scores[:, fold]
    results.update({
        "mean_test_score": mean_score,
        "std_test_score": np.where(ok, np.nanstd(scores, axis=1), np.nan),
        "rank_test_score": rankdata(np.where(ok, -mean_score, np.inf), method="min").astype(
            np.int32),
        "mean_test_error": np.where(ok, np.nanmean(errors, axis=1), np.nan),
        "std_test_error": np.where(ok, np.nanstd(errors, axis=1), np.nan),
        "sem_test_error": np.where(ok, _standard_error(errors, test_share), np.nan),
        "change_vs_raw": np.where(ok, change, np.nan),
        "change_vs_raw_se": np.where(ok, change_se, np.nan),
        "within_one_se": within,
        "status": np.array(["ok" if ok[i] else
                            f"failed on {failed_folds[i]} of {n_folds} folds: {messages[i]}"
                            for i in range(n_candidates)], dtype=object),
        "mean_fit_time": np.nanmean(seconds, axis=1),
    })
    return results


def _change_text(results: dict, index: int, metric_name: str) -> str:
    """``-6.2% ± 2.0%`` (relative to the raw inputs) or an absolute difference."""
    change, se = results["change_vs_raw"][index], results["change_vs_raw_se"][index]
    if np.isfinite(change):
        spread = f" ± {100 * se:.1f}%" if np.isfinite(se) else ""
        return f"{100 * change:+.1f}%{spread} CV {metric_name}"
    difference = results["mean_test_error"][index] - results["mean_test_error"][0]
    return f"{difference:+.4g} CV {metric_name}"


def _verdict(results: dict, best: int, metric: _Metric, design: str, margin: float,
             forest: str) -> str:
    """One sentence for people: what was chosen, and what it changes against the raw inputs."""
    where = f"{design} of {forest}"
    failed = int(np.sum(results["status"] != "ok"))
    tail = (f"; {failed} candidate{'s' if failed > 1 else ''} failed, see "
            "cv_results_['status']" if failed else "")
    label = results["param_estimator"][best]
    if label is not None:
        form = f"dim {results['param_dim'][best]}" + (
            ", inputs kept" if results["param_keep_inputs"][best] else "")
        change, se = results["change_vs_raw"][best], results["change_vs_raw_se"][best]
        if np.isfinite(change):
            spread = f" ± {100 * se:.1f}%" if np.isfinite(se) else ""
            effect = f"lowers CV {metric.name} by {-100 * change:.1f}%{spread}"
        else:
            effect = f"changes CV {metric.name} by {_change_text(results, best, metric.name)}"
        return f"the {label} lift ({form}) {effect} against the raw inputs ({where}){tail}."
    lifts = [i for i in range(len(results["candidate"]))
             if results["param_estimator"][i] is not None and results["status"][i] == "ok"]
    if not lifts:
        return f"no lift could be evaluated; the inputs pass through unchanged ({where}){tail}."
    top = min(lifts, key=lambda i: results["mean_test_error"][i])
    beaten = results["mean_test_error"][top] < results["mean_test_error"][0]
    claim = (f"no lift beats the raw inputs by more than {margin:g} standard "
             f"error{'' if margin == 1 else 's'}" if beaten else "no lift beats the raw inputs")
    return (f"{claim} (best lift: {results['candidate'][top]}, "
            f"{_change_text(results, top, metric.name)}); the inputs pass through unchanged "
            f"({where}){tail}.")
