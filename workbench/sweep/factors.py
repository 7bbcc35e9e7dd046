"""What matters on this table: the share of the spread explained by each swept factor.

Pure functions of the configurations' mean scores and their settings; nothing
here reads the store or builds documents.

A sweep's grid crosses the *factors* hidden activation, output head, layer
shape, learning rate and L2 strength. The spread of the configurations' mean
scores, ``SS_total = sum_c (m_c - m̄)²``, is split into one part per factor --
its *main effect* -- and a rest, the interactions between factors.

Balanced grids (every combination of levels present, equally often -- the
sweep's full grid): the main effect of factor A is

    SS_A = sum_levels n_l * (m̄_l - m̄)²,

with ``m̄_l`` the mean over the ``n_l`` configurations at level ``l``. This is
the functional-ANOVA main effect of Hutter, Hoos & Leyton-Brown (2014) on a
grid with uniform weights (the variance of the marginal mean, times C), and
it equals the classical ANOVA sum of squares of a main-effects model; the
main effects and the rest ``SS_rest = SS_total - sum_A SS_A`` add up to
``SS_total`` exactly, so the shares ``SS_A / SS_total`` and the interaction
share add up to 1.

Unbalanced grids (configurations missing, e.g. failed or diverged ones): the
shares are type-II sums of squares of the least-squares main-effects model
(Langsrud 2003): ``SS_A`` is the rise in the residual sum of squares when A's
dummy columns are dropped from the model with every factor. On a balanced
grid these equal the formula above (so one computation serves both). On an
unbalanced grid the factors overlap and the shares need not add up to 1; the
result says ``balanced: False`` and the rest is the main-effects model's
residual. A factor with a single level explains nothing and is not listed.

Fold-to-fold noise, for scale. The fold scores of all configurations are
paired (same folds), so the noise that separates configuration means is the
configuration-by-fold interaction of the two-way layout (configurations x
folds): ``MS_cf = sum (x_cj - x̄_c - x̄_j + x̄)² / ((C - 1)(J - 1))``. A
configuration mean then carries noise of variance ``MS_cf * (1/J + n_test /
n_train)`` (the Nadeau & Bengio 2003 correction for overlapping training
sets; ``1/J`` alone when the fold sizes are not given), and if every
configuration were truly equal the spread of the means would be about
``(C - 1)`` times that. ``noise.share`` is that expected spread over
``SS_total``: near or above 1, the differences between configurations are no
larger than the folds' own noise.

Interface
---------
:func:`factor_shares` (means, configs, fold_scores=None, n_train=None,
n_test=None) -> dict with ``factors`` (``[{factor, share, sum_sq, df,
levels}]``, largest first), ``rest``, ``total_sum_sq``, ``balanced``,
``noise`` and ``n_configurations``; its ``factors`` list, reduced to
``{factor, share}``, is the ``factors`` entry of the results document.
:func:`factors_sentence` gives the one plain sentence.

References
----------
- Hutter, F., Hoos, H. & Leyton-Brown, K. (2014). An efficient approach for
  assessing hyperparameter importance. ICML 2014, PMLR 32(1), 754-762.
- Langsrud, Ø. (2003). ANOVA for unbalanced data: use type II instead of
  type III sums of squares. Statistics and Computing 13, 163-167.
- Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error.
  Machine Learning 52(3), 239-281.

Examples
--------
>>> configs = [{"hidden": h, "learning_rate": lr} for h in ("relu", "tanh")
...            for lr in (0.001, 0.01)]
>>> out = factor_shares([0.80, 0.90, 0.81, 0.91], configs)
>>> [(f["factor"], round(f["share"], 3)) for f in out["factors"]]
[('learning_rate', 0.99), ('hidden', 0.01)]
>>> factors_sentence(out)
'On this table the learning rate explains 99% of the spread between configurations, the hidden activation 1%.'
"""

from __future__ import annotations

import itertools
import math
from collections import Counter

import numpy as np

#: the swept factors, in the plan's order, and the words the sentence uses for them
FACTORS = ("hidden", "head", "layers", "learning_rate", "alpha")
FACTOR_WORDS = {
    "hidden": "the hidden activation",
    "head": "the output head",
    "layers": "the layer shape",
    "learning_rate": "the learning rate",
    "alpha": "the L2 strength",
}


def _level(value):
    """A hashable level label: lists (layer shapes) become tuples."""
    if isinstance(value, list | tuple | np.ndarray):
        return tuple(_level(v) for v in value)
    return value


def _rss(y: np.ndarray, columns: list[np.ndarray]) -> float:
    """Residual sum of squares of the least-squares fit of y on an intercept and columns."""
    X = np.column_stack([np.ones_like(y)] + columns)
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    r = y - X @ coef
    return float(r @ r)


def _dummies(levels: list) -> tuple[list[np.ndarray], list]:
    """Treatment-coded dummy columns (the first level is the reference)."""
    uniq = list(dict.fromkeys(levels))
    cols = [np.array([lv == u for lv in levels], dtype=float) for u in uniq[1:]]
    return cols, uniq


def is_balanced(level_lists: dict) -> bool:
    """Every combination of the factors' levels present equally often."""
    if not level_lists:
        return True
    n = len(next(iter(level_lists.values())))
    combos = Counter(zip(*level_lists.values()))
    n_cells = math.prod(len(set(v)) for v in level_lists.values())
    return len(combos) == n_cells and len(set(combos.values())) == 1 and \
        n == n_cells * next(iter(combos.values()))


def interaction_noise(fold_scores) -> tuple[float, int]:
    """Configuration-by-fold interaction mean square of paired fold scores.

    Parameters
    ----------
    fold_scores : array-like of shape (C, J)
        Row c: configuration c's scores on the J folds (same folds for every row).

    Returns
    -------
    (mean_square, df)
        ``sum (x_cj - x̄_c - x̄_j + x̄)² / ((C-1)(J-1))`` and its degrees of freedom.
    """
    x = np.asarray(fold_scores, dtype=float)
    if x.ndim != 2 or x.shape[0] < 2 or x.shape[1] < 2:
        return math.nan, 0
    r = x - x.mean(axis=1, keepdims=True) - x.mean(axis=0, keepdims=True) + x.mean()
    df = (x.shape[0] - 1) * (x.shape[1] - 1)
    return float((r ** 2).sum() / df), df


def factor_shares(means, configs, *, factors=FACTORS, fold_scores=None, n_train=None,
                  n_test=None) -> dict:
    """Share of the spread of configuration means explained by each factor's main effect.

    Parameters
    ----------
    means : array-like of shape (C,)
        Mean score of each configuration (finite).
    configs : sequence of mappings
        ``configs[c][factor]`` is configuration c's level of each factor in
        ``factors`` (layer shapes as lists or tuples).
    factors : sequence of str
        The factors to consider (default :data:`FACTORS`); those with one
        level, or named by no configuration, are left out.
    fold_scores : array-like of shape (C, J), optional
        The fold scores behind the means, for the noise scale.
    n_train, n_test : float or array-like, optional
        Training and test rows per fold (means over folds), for the
        Nadeau-Bengio factor of the noise.

    Returns
    -------
    dict
        ``factors``: list of ``{factor, share, sum_sq, df, levels}``, largest
        share first; ``rest``: ``{share, sum_sq, df}`` (interactions on a
        balanced grid, the main-effects model's residual otherwise);
        ``total_sum_sq``; ``balanced``; ``n_configurations``; ``noise``:
        ``{sd, share, mean_square, df}`` or None without fold scores. All
        shares are 0 when every mean is equal.
    """
    y = np.asarray(means, dtype=float).ravel()
    if y.size != len(configs):
        raise ValueError(f"{y.size} means but {len(configs)} configurations")
    if not np.all(np.isfinite(y)):
        raise ValueError("the configuration means must be finite")
    n = y.size
    present = [f for f in factors if any(f in c for c in configs)]
    missing = [f for f in present if not all(f in c for c in configs)]
    if missing:
        raise ValueError(f"some configurations do not say their {', '.join(missing)}")
    levels = {f: [_level(c[f]) for c in configs] for f in present}
    varying = {f: lv for f, lv in levels.items() if len(set(lv)) > 1}
    total = float(((y - y.mean()) ** 2).sum()) if n else 0.0
    dummies = {f: _dummies(lv)[0] for f, lv in varying.items()}
    full_cols = list(itertools.chain.from_iterable(dummies.values()))
    rss_full = _rss(y, full_cols) if n else 0.0
    if rss_full <= 1e-12 * total:  # an exactly additive grid, up to rounding
        rss_full = 0.0
    rows = []
    for f in varying:
        others = list(itertools.chain.from_iterable(d for g, d in dummies.items() if g != f))
        ss = max(0.0, _rss(y, others) - rss_full)
        rows.append({"factor": f, "sum_sq": ss, "df": len(dummies[f]),
                     "levels": len(set(varying[f]))})
    rank = np.linalg.matrix_rank(np.column_stack([np.ones(n)] + full_cols)) if n else 0
    for r in rows:
        r["share"] = r["sum_sq"] / total if total > 0 else 0.0
    rows.sort(key=lambda r: (-r["share"], FACTORS.index(r["factor"])
                             if r["factor"] in FACTORS else 99))
    out = {
        "factors": [{"factor": r["factor"], "share": r["share"], "sum_sq": r["sum_sq"],
                     "df": r["df"], "levels": r["levels"]} for r in rows],
        "rest": {"share": rss_full / total if total > 0 else 0.0, "sum_sq": rss_full,
                 "df": int(n - rank)},
        "total_sum_sq": total,
        "balanced": is_balanced(varying),
        "n_configurations": n,
        "noise": None,
    }
    if fold_scores is not None:
        x = np.asarray(fold_scores, dtype=float)
        if x.shape[0] != n:
            raise ValueError(f"fold scores for {x.shape[0]} configurations, means for {n}")
        ms, df = interaction_noise(x)
        if df:
            J = x.shape[1]
            ratio = (float(np.mean(n_test)) / float(np.mean(n_train))
                     if n_train is not None and n_test is not None else 0.0)
            var_mean = ms * (1.0 / J + ratio)
            out["noise"] = {"sd": math.sqrt(var_mean),
                            "share": (n - 1) * var_mean / total if total > 0 else math.inf,
                            "mean_square": ms, "df": df}
    return out


def _pct(share: float) -> str:
    p = 100.0 * share
    return "<1%" if 0 < p < 0.5 else f"{p:.0f}%"


def factors_sentence(result: dict) -> str:
    """One plain sentence: which factor explains how much of the spread.

    For example "On this table the learning rate explains 80% of the spread
    between configurations, the hidden activation 3%; interactions 12%; the
    folds' own noise would give about 5%."
    """
    rows = result["factors"]
    if not rows:
        return "Only one setting of each factor was tried, so nothing can be said about what matters."
    if result["total_sum_sq"] <= 0:
        return "Every configuration scored the same, so no factor made a difference."
    words = [FACTOR_WORDS.get(r["factor"], r["factor"]) for r in rows]
    parts = [f"{words[0]} explains {_pct(rows[0]['share'])} of the spread between configurations"]
    parts += [f"{w} {_pct(r['share'])}" for w, r in zip(words[1:], rows[1:])]
    text = "On this table " + ", ".join(parts)
    rest = result["rest"]
    if rest["df"] > 0 and rest["share"] > 0:
        label = "interactions" if result["balanced"] else "the rest"
        text += f"; {label} {_pct(rest['share'])}"
    noise = result.get("noise")
    if noise is not None and math.isfinite(noise["share"]):
        if noise["share"] >= 1:
            text += "; the folds' own noise alone would give as much spread"
        else:
            text += f"; the folds' own noise would give about {_pct(noise['share'])}"
    return text + "."
