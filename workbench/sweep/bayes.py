"""The Bayesian correlated t-test with a region of practical equivalence.

Pure functions of paired fold scores; nothing here reads the store or builds
documents. It answers, for two configurations evaluated on the same J = K x R
folds of repeated K-fold cross-validation, three questions at once: how
probable is it that the first is practically *worse*, practically
*equivalent*, or practically *better* than the second, where "practically"
means "by more than the half-width ``rope`` of the region of practical
equivalence (ROPE)".

The model (Benavoli, Corani, Demšar & Zaffalon 2017, section 3; Corani &
Benavoli 2015). The J differences ``d_j = a_j - b_j`` are taken as draws
from a normal distribution with mean ``mu`` and variance ``sigma²`` whose
draws have pairwise correlation ``rho``, because the training sets of the
folds overlap. Under the prior of that paper the posterior of ``mu`` is a
Student t distribution with

    df       = J - 1,
    location = d̄ = mean(d),
    scale    = sqrt((1/J + rho / (1 - rho)) * s²),    s² = var(d, ddof=1),

and the heuristic ``rho = n_test / n_total`` (the share of rows in a test
fold, 1/K for K-fold) makes ``rho / (1 - rho) = n_test / n_train`` -- the
correction of Nadeau & Bengio (2003), so the posterior's one-sided tail at
0 equals the one-sided p-value of the corrected resampled t-test of
:mod:`workbench.sweep.statistics`. The three probabilities are

    P(worse)      = T(-rope),        T the posterior's CDF,
    P(better)     = 1 - T(rope),
    P(equivalent) = 1 - P(worse) - P(better).

Edge cases (defined here; :func:`correlated_ttest` returns them):

- **Zero variance** (all J differences equal, e.g. two configurations with
  identical fold scores): the posterior is the limit of the t as its scale
  goes to 0, a point mass at ``d̄`` (``scale`` = 0). Then P(worse) = 1 when
  ``d̄ < -rope``, P(better) = 1 when ``d̄ > rope``, and otherwise
  P(equivalent) = 1 (the ROPE is closed). With ``rope = 0`` there is no
  region of equivalence: P(equivalent) is 0 always, and a point mass at
  exactly 0 is split evenly (P(worse) = P(better) = 0.5). Both choices are
  those of ``baycomp`` (Benavoli et al.'s own package), which the tests
  check.
- **Fewer than two folds**: the variance cannot be estimated; the
  probabilities, the scale and the interval are NaN and :func:`decide`
  answers "undecided".

:func:`compare_with_best` applies the test to every configuration of a
sweep against the best one (the ranked table's ``p_better``,
``p_equivalent``, ``p_worse`` and ``decision``).

The decision rule (:func:`decide`, Benavoli et al. 2017, section 3.1, with
their 95 % threshold): *equivalent* when P(equivalent) >= 0.95, *worse*
when P(worse) >= 0.95, *better* when P(better) >= 0.95, otherwise
*undecided* -- the data do not say. Compared with the best configuration the
best itself is *best*.

Default ROPE per scikit-learn scorer (:func:`default_rope`):

- Unit-free scores that are fractions on [0, 1] (or [-1, 1]): accuracy,
  balanced accuracy, ROC AUC, average precision, F1/precision/recall/Jaccard
  in every averaging, top-k accuracy, Matthews' correlation, R², explained
  variance, the D² scores: **0.01**. Benavoli et al. (2017, section 3.1 and
  their experiments) use 0.01 for accuracy: "two classifiers whose mean
  difference of accuracies is less than 1 % are practically equivalent".
  The same 0.01 for ROC AUC, F1-type scores and R² is common practice (they
  are fractions on the same scale); for R² it is one percent of the target's
  variance.
- Error scores in the target's units, or otherwise without a fixed scale
  (every ``neg_*`` scorer: RMSE, MAE, MSE, the deviances, log-loss, Brier
  score, ...): **1 % of the magnitude of the constant baseline's score** on
  the same folds (``DummyRegressor`` mean / ``DummyClassifier`` prior). For
  scores of the *deviance* type -- mean squared error, the Poisson and gamma
  deviances, log-loss, the Brier score -- this is exactly the 0.01 above on
  the matching "share explained" score (R² = 1 - MSE/MSE₀, D² = 1 - D/D₀,
  McFadden's pseudo-R² = 1 - LL/LL₀, the Brier skill score), since a change
  of 1 % of the baseline's loss moves those by 0.01. For RMSE, MAE and the
  other error scores the 1 % relative threshold is common practice.

References
----------
- Benavoli, A., Corani, G., Demšar, J. & Zaffalon, M. (2017). Time for a
  change: a tutorial for comparing multiple classifiers through Bayesian
  analysis. Journal of Machine Learning Research 18(77), 1-36.
- Corani, G. & Benavoli, A. (2015). A Bayesian approach for comparing
  cross-validated algorithms on multiple data sets. Machine Learning
  100(2-3), 285-304.
- Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error.
  Machine Learning 52(3), 239-281.

Examples
--------
>>> c = correlated_ttest([0.91, 0.93, 0.90, 0.94], [0.88, 0.90, 0.89, 0.90],
...                      rho=0.5, rope=0.01)
>>> decide(c)
'undecided'
>>> round(c.p_better, 3)
0.849
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from workbench.errors import InputError

#: probability a decision needs (Benavoli et al. 2017 use 0.95)
THRESHOLD = 0.95

#: the ROPE of unit-free scores that are fractions on [0, 1] or [-1, 1]
FRACTION_ROPE = 0.01

#: the ROPE of error scores, as a share of the constant baseline's score magnitude
RELATIVE_ROPE = 0.01

#: unit-free scorer names (exact) and name prefixes that take :data:`FRACTION_ROPE`
_FRACTION_SCORERS = {
    "accuracy", "balanced_accuracy", "top_k_accuracy", "average_precision",
    "matthews_corrcoef", "r2", "explained_variance", "d2_absolute_error_score",
    "d2_brier_score", "d2_log_loss_score", "adjusted_rand_score", "rand_score",
    "adjusted_mutual_info_score", "normalized_mutual_info_score", "homogeneity_score",
    "completeness_score", "v_measure_score", "fowlkes_mallows_score",
}
_FRACTION_PREFIXES = ("roc_auc", "f1", "precision", "recall", "jaccard")

#: the decisions, in the order a results view lists them
DECISIONS = ("best", "better", "equivalent", "undecided", "worse")


@dataclass(frozen=True)
class Comparison:
    """The posterior of the mean difference ``a - b`` and what it says.

    Attributes
    ----------
    mean : float
        Posterior location: the mean of the J paired differences ``a - b``.
    scale : float
        Posterior scale, ``sqrt((1/J + rho/(1 - rho)) * s²)``; 0 when every
        difference is equal.
    df : int
        Degrees of freedom, J - 1.
    rho : float
        The correlation used (``n_test / n_total``).
    rope : float
        Half-width of the region of practical equivalence.
    p_worse, p_equivalent, p_better : float
        P(mean < -rope), P(-rope <= mean <= rope), P(mean > rope): ``a``
        practically worse than, equivalent to, better than ``b``.
    n : int
        J, the number of paired folds.
    """

    mean: float
    scale: float
    df: int
    rho: float
    rope: float
    p_worse: float
    p_equivalent: float
    p_better: float
    n: int

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """Equal-tailed credible interval of the mean difference.

        With the posterior above this is also the Nadeau-Bengio corrected
        confidence interval ``d̄ ± t_{(1+level)/2, J-1} * scale``.
        """
        if not math.isfinite(self.scale):
            return (math.nan, math.nan)
        if self.scale == 0.0:
            return (self.mean, self.mean)
        from scipy import stats  # here, not at the top: scipy.stats takes ~0.5 s to import

        low, high = stats.t.interval(level, self.df, loc=self.mean, scale=self.scale)
        return (float(low), float(high))

    def to_dict(self, level: float = 0.95) -> dict:
        """Plain JSON-able dict: the attributes plus ``interval`` ([low, high])."""
        d = asdict(self)
        d["interval"] = list(self.interval(level))
        return d


def rho_from_sizes(n_train, n_test) -> float:
    """The correlation heuristic ``rho = n_test / n_total`` of Benavoli et al. (2017).

    Parameters
    ----------
    n_train, n_test : float or array-like
        Rows in the training and test part of each resample; arrays are
        averaged (folds differing by a row).
    """
    tr = float(np.mean(n_train))
    te = float(np.mean(n_test))
    if not (tr > 0 and te > 0):
        raise ValueError(f"fold sizes must be positive, got n_train={tr}, n_test={te}")
    return te / (tr + te)


def posterior(differences, rho: float) -> tuple[float, float, int]:
    """Location, scale and degrees of freedom of the posterior of the mean difference.

    Parameters
    ----------
    differences : array-like of shape (J,)
        Paired fold-score differences.
    rho : float
        Correlation of the differences, ``n_test / n_total``; 0 <= rho < 1.

    Returns
    -------
    (mean, scale, df)
        ``scale`` is NaN when J < 2 and 0 when every difference is equal.
    """
    d = np.asarray(differences, dtype=float).ravel()
    if not 0.0 <= rho < 1.0:
        raise ValueError(f"rho must be in [0, 1), got {rho}")
    if d.size == 0:
        raise ValueError("no differences to test")
    if not np.all(np.isfinite(d)):
        raise ValueError("the fold scores must be finite")
    J = d.size
    mean = float(d.mean())
    if J < 2:
        return mean, math.nan, 0
    var = float(d.var(ddof=1))
    return mean, math.sqrt((1.0 / J + rho / (1.0 - rho)) * var), J - 1


def correlated_ttest(a, b, *, rho: float, rope: float) -> Comparison:
    """Bayesian correlated t-test of paired fold scores ``a`` against ``b``.

    Parameters
    ----------
    a, b : array-like of shape (J,)
        Scores (greater is better) of two configurations on the same J folds.
    rho : float
        ``n_test / n_total`` (see :func:`rho_from_sizes`).
    rope : float
        Half-width of the region of practical equivalence, >= 0.

    Returns
    -------
    Comparison
        ``p_worse``, ``p_equivalent``, ``p_better`` of ``a`` relative to ``b``
        and the posterior (``mean``, ``scale``, ``df``).

    Notes
    -----
    ``baycomp.CorrelatedTTest(x=b, y=a, rope=rope, runs=R)`` computes the
    same posterior for ``rho = 1/K`` (its ``p_left, p_rope, p_right`` are
    our ``p_worse, p_equivalent, p_better``).
    """
    a = np.asarray(a, dtype=float).ravel()
    b = np.asarray(b, dtype=float).ravel()
    if a.shape != b.shape:
        raise ValueError(f"paired scores differ in length: {a.size} and {b.size}")
    rope = float(rope)
    if not (rope >= 0.0 and math.isfinite(rope)):
        raise ValueError(f"rope must be a finite number >= 0, got {rope}")
    mean, scale, df = posterior(a - b, rho)
    if math.isnan(scale):
        pw = pe = pb = math.nan
    elif scale == 0.0:
        if rope == 0.0:
            pw = 1.0 if mean < 0 else (0.5 if mean == 0 else 0.0)
            pb, pe = 1.0 - pw, 0.0
        else:
            pw = float(mean < -rope)
            pb = float(mean > rope)
            pe = 1.0 - pw - pb
    else:
        from scipy import stats

        pw = float(stats.t.cdf(-rope, df, loc=mean, scale=scale))
        pb = float(stats.t.sf(rope, df, loc=mean, scale=scale))
        pe = max(0.0, 1.0 - pw - pb) if rope > 0 else 0.0
    return Comparison(mean=mean, scale=scale, df=df, rho=float(rho), rope=rope,
                      p_worse=pw, p_equivalent=pe, p_better=pb, n=int(a.size))


def decide(comparison: Comparison, *, is_best: bool = False,
           threshold: float = THRESHOLD) -> str:
    """The decision of a comparison: best, better, equivalent, worse or undecided.

    Parameters
    ----------
    comparison : Comparison
        ``a`` against ``b`` (for the ranked table: a configuration against the best).
    is_best : bool
        ``a`` is the best itself: answers "best".
    threshold : float
        Probability a decision needs (0.95, Benavoli et al. 2017).

    Returns
    -------
    str
        "best" if ``is_best``; "equivalent" when P(equivalent) >= threshold;
        "worse" when P(worse) >= threshold; "better" when P(better) >=
        threshold; otherwise "undecided" (also for NaN probabilities).
    """
    if is_best:
        return "best"
    if comparison.p_equivalent >= threshold:
        return "equivalent"
    if comparison.p_worse >= threshold:
        return "worse"
    if comparison.p_better >= threshold:
        return "better"
    return "undecided"


def rope_kind(metric: str) -> str:
    """How :func:`default_rope` scales a scorer: "fraction" or "relative"."""
    name = str(metric)
    if name in _FRACTION_SCORERS or name.startswith(_FRACTION_PREFIXES):
        return "fraction"
    return "relative"


def default_rope(metric: str, baseline_score: float | None = None) -> float:
    """The default half-width of the region of practical equivalence for a scorer.

    Parameters
    ----------
    metric : str
        scikit-learn scorer name (greater is better).
    baseline_score : float, optional
        The constant baseline's mean score on the same folds, in the scorer's
        own (greater-is-better, so negated for errors) convention. Needed for
        error scores; ignored for unit-free fractions.

    Returns
    -------
    float
        0.01 for unit-free fractions (accuracy, ROC AUC, F1-type, R², ...);
        ``0.01 * |baseline_score|`` for error scores (see the module
        docstring for the reasons).

    Raises
    ------
    InputError
        When an error score has no usable baseline score (none given, zero
        or not finite): the region must then be set explicitly.
    """
    if rope_kind(metric) == "fraction":
        return FRACTION_ROPE
    if baseline_score is None or not math.isfinite(baseline_score) or baseline_score == 0:
        raise InputError(f"the metric {metric!r} is in the target's units and the constant "
                         "baseline gives no scale for it; set the region of practical "
                         "equivalence explicitly", setting="rope")
    return RELATIVE_ROPE * abs(float(baseline_score))


def check_rope(value) -> float:
    """A user-given ROPE half-width as a float >= 0, or an :class:`InputError`."""
    try:
        rope = float(value)
    except (TypeError, ValueError):
        raise InputError(f"the region of practical equivalence must be a number >= 0, "
                         f"got {value!r}", setting="rope") from None
    if not (math.isfinite(rope) and rope >= 0):
        raise InputError(f"the region of practical equivalence must be a number >= 0, "
                         f"got {value!r}", setting="rope")
    return rope


def compare_with_best(scores, *, rho: float, rope: float,
                      threshold: float = THRESHOLD) -> list[dict]:
    """Every configuration against the best (highest mean), for the ranked table.

    Parameters
    ----------
    scores : array-like of shape (C, J)
        Row c: configuration c's fold scores, on the same J folds in the same
        order for every row.
    rho, rope, threshold
        As in :func:`correlated_ttest` and :func:`decide`.

    Returns
    -------
    list of dict, one per row
        ``{difference, p_better, p_equivalent, p_worse, decision}`` of the row
        against the best (``difference`` its mean minus the best's). The best
        row (the first on equal means) has ``decision`` "best", difference 0
        and no probabilities (None).
    """
    x = np.asarray(scores, dtype=float)
    if x.ndim != 2 or x.shape[0] == 0:
        raise ValueError("scores must be a (configurations, folds) array")
    best = int(np.argmax(x.mean(axis=1)))
    out = []
    for c in range(x.shape[0]):
        if c == best:
            out.append({"difference": 0.0, "p_better": None, "p_equivalent": None,
                        "p_worse": None, "decision": "best"})
            continue
        cmp = correlated_ttest(x[c], x[best], rho=rho, rope=rope)
        out.append({"difference": cmp.mean, "p_better": cmp.p_better,
                    "p_equivalent": cmp.p_equivalent, "p_worse": cmp.p_worse,
                    "decision": decide(cmp, threshold=threshold)})
    return out
