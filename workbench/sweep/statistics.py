"""The statistics of the ranking: the corrected resampled t-test, Holm, the tie rule.

Pure functions of fold scores and fold sizes; nothing here reads the store or
builds documents (:mod:`workbench.sweep.results` does that).

Per configuration: the mean and standard deviation (ddof 1) of the metric
over its J = K x R fold scores. Every configuration is compared with the best
(highest mean) by the corrected resampled t-test of Nadeau & Bengio (2003).
The fold scores of two configurations are paired (same folds, same seeds);
with ``d_j`` the differences, ``d̄`` their mean and ``s²`` their sample
variance (ddof 1),

    t = d̄ / sqrt((1/J + n_test/n_train) * s²),    df = J - 1,

and the two-sided p-value is ``2 * (1 - T_{J-1}(|t|))``. The term
``n_test/n_train`` inflates the naive variance ``s²/J`` because the training
sets of the resamples overlap, so their scores are correlated; without it the
naive paired t-test declares differences far too often. Bouckaert & Frank
(2004) apply the same correction to repeated K-fold cross-validation with
J = K x R, as here. When the folds differ in size by a row (the row count is
not a multiple of K), ``n_train`` and ``n_test`` are the means over the J
resamples.

The tie rule (:func:`is_tied`): a configuration whose p-value is at least
``alpha`` (:data:`ALPHA`, 0.05, the conventional level) cannot be told apart
from the best and is *tied with the best*; the ranking shows the tie group so
that users do not chase noise. ``m`` configurations compared with the best
make ``m`` comparisons; Holm's (1979) step-down correction of the p-values is
offered for them (``use_holm=True``).

References
----------
- Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error.
  Machine Learning 52(3), 239-281.
- Bouckaert, R. & Frank, E. (2004). Evaluating the replicability of
  significance tests for comparing learning algorithms. PAKDD 2004.
- Holm, S. (1979). A simple sequentially rejective multiple test procedure.
  Scandinavian Journal of Statistics 6(2), 65-70.
"""

from __future__ import annotations

import math

import numpy as np

#: significance level of the tie group (the conventional 5 %; common practice)
ALPHA = 0.05


def corrected_ttest(a, b, n_train: float, n_test: float) -> tuple[float, float]:
    """Nadeau & Bengio's (2003) corrected resampled t-test of paired scores.

    Parameters
    ----------
    a, b : array-like of shape (J,)
        Scores of two configurations on the same J resamples.
    n_train, n_test : float
        Rows in the training and the test part of a resample (the mean over
        resamples when folds differ by a row).

    Returns
    -------
    t : float
        The corrected t statistic of ``mean(a - b)``.
    p : float
        Its two-sided p-value with J - 1 degrees of freedom.
    """
    d = np.asarray(a, dtype=float) - np.asarray(b, dtype=float)
    J = d.size
    if J < 2:
        return math.nan, math.nan
    mean = float(d.mean())
    var = float(d.var(ddof=1))
    if var <= 0.0 or not math.isfinite(var):
        if mean == 0.0:
            return 0.0, 1.0
        return math.copysign(math.inf, mean), 0.0
    t = mean / math.sqrt((1.0 / J + n_test / n_train) * var)
    from scipy import stats  # here, not at the top: scipy.stats takes ~0.5 s to import

    p = float(2.0 * stats.t.sf(abs(t), J - 1))
    return float(t), p


def holm(pvalues) -> np.ndarray:
    """Holm's (1979) step-down adjusted p-values (same order as the input)."""
    p = np.asarray(pvalues, dtype=float)
    m = p.size
    if m == 0:
        return p.copy()
    order = np.argsort(p, kind="stable")
    adj = np.empty(m)
    running = 0.0
    for rank, i in enumerate(order):
        running = max(running, min(1.0, (m - rank) * p[i]))
        adj[i] = running
    return adj


def is_tied(p_value: float | None, alpha: float = ALPHA) -> bool:
    """The tie rule: a comparison with the best whose p-value is at least ``alpha``.

    ``p >= alpha`` means the test does not reject "same expected score" at
    level ``alpha`` (a p-value equal to ``alpha`` does not reject), so the
    configuration cannot be told apart from the best. No p-value (no
    comparison could be made) is no tie.
    """
    return bool(p_value is not None and p_value >= alpha)


def rank(scores: dict, n_train: dict, n_test: dict, *, alpha: float = ALPHA,
         use_holm: bool = False) -> dict:
    """Rank configurations by mean score and test each against the best.

    Parameters
    ----------
    scores : dict
        ``{config: {(repeat, fold): test_score}}`` for every rankable
        configuration (all of whose stored trials are done).
    n_train, n_test : dict
        ``{(repeat, fold): rows}``.
    alpha : float
        Significance level of the tie group.
    use_holm : bool
        Judge ties on Holm-adjusted p-values.

    Returns
    -------
    dict
        ``order`` (configs, best first), ``best``, ``n_comparisons`` and per
        config ``stats[config] = {mean, sd, n, t, p_value, p_value_holm,
        tied_with_best}``.
    """
    means = {c: float(np.mean(list(s.values()))) for c, s in scores.items() if s}
    order = sorted(means, key=lambda c: (-means[c], c))
    out = {"order": order, "best": order[0] if order else None, "n_comparisons": 0,
           "stats": {}}
    if not order:
        return out
    best = order[0]
    raw = {}
    for c in order:
        vals = np.array(list(scores[c].values()), dtype=float)
        st = {"mean": means[c], "sd": float(vals.std(ddof=1)) if vals.size > 1 else None,
              "n": int(vals.size), "t": None, "p_value": None, "p_value_holm": None}
        if c != best:
            keys = sorted(set(scores[c]) & set(scores[best]))
            a = [scores[best][k] for k in keys]
            b = [scores[c][k] for k in keys]
            ntr = float(np.mean([n_train[k] for k in keys])) if keys else math.nan
            nte = float(np.mean([n_test[k] for k in keys])) if keys else math.nan
            t, p = corrected_ttest(a, b, ntr, nte) if keys else (math.nan, math.nan)
            st["t"], st["p_value"] = (None if math.isnan(t) else t), (None if math.isnan(p) else p)
            if not math.isnan(p):
                raw[c] = p
        out["stats"][c] = st
    cs = list(raw)
    adj = holm([raw[c] for c in cs])
    for c, pa in zip(cs, adj):
        out["stats"][c]["p_value_holm"] = float(pa)
    out["n_comparisons"] = len(cs)
    for c in order:
        st = out["stats"][c]
        if c == best:
            st["tied_with_best"] = True
            continue
        st["tied_with_best"] = is_tied(st["p_value_holm"] if use_holm else st["p_value"], alpha)
    return out
