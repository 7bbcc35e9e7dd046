"""Ranking configurations honestly: mean ± sd and the corrected resampled t-test.

Per configuration: the mean and standard deviation of the metric over its
K x R fold scores, the mean fit time and the train-test gap (mean training
score minus mean test score, in the metric's greater-is-better convention).

Every configuration is compared with the best (highest mean) by the corrected
resampled t-test of Nadeau & Bengio (2003). The J = K x R fold scores of two
configurations are paired (same folds, same seeds); with ``d_j`` the
differences, ``d̄`` their mean and ``s²`` their sample variance (ddof 1),

    t = d̄ / sqrt((1/J + n_test/n_train) * s²),    df = J - 1,

and the two-sided p-value is ``2 * (1 - T_{J-1}(|t|))``. The term
``n_test/n_train`` inflates the naive variance ``s²/J`` because the training
sets of the resamples overlap, so their scores are correlated; without it the
naive paired t-test declares differences far too often. Bouckaert & Frank
(2004) apply the same correction to repeated K-fold cross-validation with
J = K x R, as here.

A configuration whose p-value is at least ``alpha`` (0.05) cannot be told apart
from the best and is marked *tied with the best*; the ranking shows the tie
group so that users do not chase noise. ``m`` configurations compared with the
best make ``m`` comparisons; Holm's (1979) step-down correction of the
p-values is offered for them (``holm=True``).

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
from scipy import stats

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
        p = st["p_value_holm"] if use_holm else st["p_value"]
        st["tied_with_best"] = bool(p is not None and p >= alpha)
    return out


def _mean(values):
    vals = [v for v in values if v is not None and math.isfinite(v)]
    return float(np.mean(vals)) if vals else None


def _health_share(trials, key):
    shares = []
    for t in trials:
        layer = (t.get("health") or {}).get(key) or []
        layer = [v for v in layer if v is not None]
        if layer:
            shares.append(float(np.mean(layer)))
    return float(np.mean(shares)) if shares else None


def sweep_results(store, sweep_id: str, *, alpha: float = ALPHA, holm: bool = False) -> dict:
    """A stored sweep's ranked results (the ``workbench sweep --json`` object).

    Returns
    -------
    dict
        ``sweep_id, state, metric, table, target, task, target_kind, created,
        finished, n_configurations, n_trials, n_stored, significance_level,
        correction ("none" or "holm"), n_comparisons, fingerprint, versions,
        plan`` and ``configurations``: a list ordered by rank of dicts with
        ``rank, index, hidden, head, layers, learning_rate, alpha, engine,
        status, mean, sd, n_scores, p_value, p_value_holm, tied_with_best,
        mean_fit_seconds, train_mean, train_test_gap, dead, saturated`` and
        ``trials`` (``repeat, fold, test_score, train_score, fit_seconds,
        epochs, status, error, engine``). Configurations that are not
        rankable (a trial diverged or failed, or none is stored yet) follow
        the ranked ones with ``mean`` over their done trials and no p-value.
    """
    sweep = store.get_sweep(sweep_id)
    plan = sweep["plan"]
    configs = store.configurations(sweep_id)
    trials = store.trials(sweep_id, with_history=False)
    by_cfg: dict[int, list[dict]] = {c["index"]: [] for c in configs}
    for t in trials:
        by_cfg.setdefault(t["config_index"], []).append(t)
    per_cfg_expected = int(plan["folds"]) * int(plan["repeats"])
    scores, n_train, n_test, status = {}, {}, {}, {}
    for c in configs:
        ts = by_cfg[c["index"]]
        statuses = {t["status"] for t in ts}
        if "failed" in statuses:
            status[c["index"]] = "failed"
        elif "diverged" in statuses:
            status[c["index"]] = "diverged"
        elif len(ts) < per_cfg_expected:
            status[c["index"]] = "running" if sweep["state"] == "running" else (
                "cancelled" if sweep["state"] == "interrupted" else "incomplete")
        else:
            status[c["index"]] = "done"
        if ts and statuses == {"done"}:
            scores[c["index"]] = {(t["repeat"], t["fold"]): t["test_score"] for t in ts}
            for t in ts:
                n_train[(t["repeat"], t["fold"])] = t["n_train"]
                n_test[(t["repeat"], t["fold"])] = t["n_test"]
    ranked = rank(scores, n_train, n_test, alpha=alpha, use_holm=holm)
    rest = sorted((c["index"] for c in configs if c["index"] not in scores),
                  key=lambda i: (_mean(t["test_score"] for t in by_cfg[i]) is None,
                                 -(_mean(t["test_score"] for t in by_cfg[i]) or 0.0), i))
    order = ranked["order"] + rest
    cfg_by_index = {c["index"]: c for c in configs}
    out_cfgs = []
    for pos, i in enumerate(order, start=1):
        c = cfg_by_index[i]
        ts = by_cfg[i]
        st = ranked["stats"].get(i, {})
        test_mean = st.get("mean", _mean(t["test_score"] for t in ts))
        train_mean = _mean(t["train_score"] for t in ts if t["status"] == "done")
        done_test = _mean(t["test_score"] for t in ts if t["status"] == "done")
        vals = [t["test_score"] for t in ts if t["status"] == "done"]
        sd = st.get("sd") if st else (float(np.std(vals, ddof=1)) if len(vals) > 1 else None)
        out_cfgs.append({
            "rank": pos,
            "index": i,
            "hidden": c["hidden"],
            "head": c["head"],
            "layers": c["layers"],
            "learning_rate": c["learning_rate"],
            "alpha": c["alpha"],
            "engine": c["engine"],
            "status": status[i],
            "mean": test_mean,
            "sd": sd,
            "n_scores": len(vals),
            "p_value": st.get("p_value"),
            "p_value_holm": st.get("p_value_holm"),
            "tied_with_best": bool(st.get("tied_with_best", False)),
            "mean_fit_seconds": _mean(t["fit_seconds"] for t in ts),
            "train_mean": train_mean,
            "train_test_gap": (train_mean - done_test
                               if train_mean is not None and done_test is not None else None),
            "dead": _health_share(ts, "dead"),
            "saturated": _health_share(ts, "saturated"),
            "trials": [{"repeat": t["repeat"], "fold": t["fold"], "test_score": t["test_score"],
                        "train_score": t["train_score"], "fit_seconds": t["fit_seconds"],
                        "epochs": t["epochs"], "status": t["status"], "error": t["error"],
                        "engine": t["engine"]} for t in sorted(ts, key=lambda t: (t["repeat"],
                                                                                   t["fold"]))],
        })
    return {
        "sweep_id": sweep_id,
        "state": sweep["state"],
        "metric": plan["metric"],
        "table": plan["table"],
        "target": plan["target"],
        "task": plan["task"],
        "target_kind": plan["target_kind"],
        "created": sweep["created"],
        "finished": sweep["finished"],
        "n_configurations": sweep["n_configurations"],
        "n_trials": sweep["n_trials"],
        "n_stored": sweep["n_stored"],
        "significance_level": alpha,
        "correction": "holm" if holm else "none",
        "n_comparisons": ranked["n_comparisons"],
        "fingerprint": sweep["fingerprint"],
        "versions": sweep["versions"],
        "plan": plan,
        "configurations": out_cfgs,
    }
