"""The results document of a stored sweep: what ``sweep --json`` and ``show --json`` print.

:func:`sweep_results` reads a sweep's configurations and finished trials from
the :class:`workbench.sweep.store.Store`, decides each configuration's status,
hands the fold scores and fold sizes (``n_train``, ``n_test`` as each trial
recorded them) to :func:`workbench.sweep.statistics.rank` (the corrected
resampled t-test of Nadeau & Bengio, 2003, against the best, Holm's 1979
correction and the tie rule), and lays the answer out as one JSON-able dict.
README.md documents the dict (section "Sweep results as JSON"); the window,
the export and the report read the same dict.
"""

from __future__ import annotations

import math

import numpy as np

from workbench.sweep.statistics import ALPHA, rank


def sweep_results(store, sweep_id: str, *, alpha: float = ALPHA, holm: bool = False) -> dict:
    """A stored sweep's ranked results (the ``workbench sweep --json`` object).

    Parameters
    ----------
    store : Store
        The store holding the sweep.
    sweep_id : str
        The sweep's id.
    alpha : float
        Significance level of the tie group.
    holm : bool
        Judge ties on Holm-adjusted p-values.

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
        epochs, status, error, engine``), and ``mean_epochs`` (epochs run,
        mean over the done trials). Configurations that are not
        rankable (a trial diverged or failed, or none is stored yet) follow
        the ranked ones with ``mean`` over their done trials and no p-value.
        ``baselines``: the reference configurations run on the same folds
        (kept out of the ranking), each ``{name, estimator, status, mean, sd,
        scores}`` with ``scores`` the done trials' test scores in (repeat,
        fold) order.
    """
    sweep = store.get_sweep(sweep_id)
    plan = sweep["plan"]
    configs = store.configurations(sweep_id)
    by_cfg: dict[int, list[dict]] = {c["index"]: [] for c in configs}
    for t in store.trials(sweep_id, with_history=False):
        by_cfg.setdefault(t["config_index"], []).append(t)
    expected = int(plan["folds"]) * int(plan["repeats"])
    status = {c["index"]: _status(by_cfg[c["index"]], expected, sweep["state"]) for c in configs}
    scores, n_train, n_test = _fold_scores({c["index"]: by_cfg[c["index"]] for c in configs})
    ranked = rank(scores, n_train, n_test, alpha=alpha, use_holm=holm)
    rest = sorted((c["index"] for c in configs if c["index"] not in scores),
                  key=lambda i: (_mean(t["test_score"] for t in by_cfg[i]) is None,
                                 -(_mean(t["test_score"] for t in by_cfg[i]) or 0.0), i))
    cfg_by_index = {c["index"]: c for c in configs}
    out_cfgs = [_configuration_entry(pos, cfg_by_index[i], by_cfg[i], status[i],
                                     ranked["stats"].get(i, {}))
                for pos, i in enumerate(ranked["order"] + rest, start=1)]
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
        "baselines": _baselines(store, sweep_id, expected, sweep["state"]),
    }


def _baselines(store, sweep_id: str, expected: int, sweep_state: str) -> list[dict]:
    """The reference configurations' entries: scores in (repeat, fold) order."""
    by_index: dict[int, list[dict]] = {}
    for t in store.baseline_trials(sweep_id):
        by_index.setdefault(t["config_index"], []).append(t)
    out = []
    for b in store.baselines(sweep_id):
        ts = sorted(by_index.get(b["index"], []), key=lambda t: (t["repeat"], t["fold"]))
        scores = [t["test_score"] for t in ts if t["status"] == "done"]
        out.append({"name": b["name"], "estimator": b["estimator"],
                    "status": _status(ts, expected, sweep_state),
                    "mean": float(np.mean(scores)) if scores else None,
                    "sd": float(np.std(scores, ddof=1)) if len(scores) > 1 else None,
                    "scores": scores})
    return out


def _status(trials: list[dict], expected: int, sweep_state: str) -> str:
    """A configuration's status from its stored trials and the sweep's state."""
    statuses = {t["status"] for t in trials}
    if "failed" in statuses:
        return "failed"
    if "diverged" in statuses:
        return "diverged"
    if len(trials) < expected:
        return {"running": "running", "interrupted": "cancelled"}.get(sweep_state, "incomplete")
    return "done"


def _fold_scores(by_cfg: dict[int, list[dict]]):
    """What :func:`workbench.sweep.statistics.rank` takes, from the stored trials.

    Only configurations whose every stored trial is done are rankable.

    Returns
    -------
    scores : dict
        ``{config_index: {(repeat, fold): test_score}}``.
    n_train, n_test : dict
        ``{(repeat, fold): rows}``: the training and test rows each trial recorded.
    """
    scores, n_train, n_test = {}, {}, {}
    for i, ts in by_cfg.items():
        if ts and {t["status"] for t in ts} == {"done"}:
            scores[i] = {(t["repeat"], t["fold"]): t["test_score"] for t in ts}
            for t in ts:
                n_train[(t["repeat"], t["fold"])] = t["n_train"]
                n_test[(t["repeat"], t["fold"])] = t["n_test"]
    return scores, n_train, n_test


def _configuration_entry(rank_: int, c: dict, ts: list[dict], status: str, st: dict) -> dict:
    """One configuration of the document: its grid point, scores, comparison and trials."""
    done = [t for t in ts if t["status"] == "done"]
    train_mean = _mean(t["train_score"] for t in done)
    done_test = _mean(t["test_score"] for t in done)
    vals = [t["test_score"] for t in done]
    sd = st.get("sd") if st else (float(np.std(vals, ddof=1)) if len(vals) > 1 else None)
    return {
        "rank": rank_,
        "index": c["index"],
        "hidden": c["hidden"],
        "head": c["head"],
        "layers": c["layers"],
        "learning_rate": c["learning_rate"],
        "alpha": c["alpha"],
        "engine": c["engine"],
        "status": status,
        "mean": st.get("mean", _mean(t["test_score"] for t in ts)),
        "sd": sd,
        "n_scores": len(vals),
        "p_value": st.get("p_value"),
        "p_value_holm": st.get("p_value_holm"),
        "tied_with_best": bool(st.get("tied_with_best", False)),
        "mean_fit_seconds": _mean(t["fit_seconds"] for t in ts),
        "train_mean": train_mean,
        "train_test_gap": (train_mean - done_test
                           if train_mean is not None and done_test is not None else None),
        "mean_epochs": _mean(t["epochs"] for t in done if t["epochs"] is not None),
        "dead": _health_share(ts, "dead"),
        "saturated": _health_share(ts, "saturated"),
        "trials": [{"repeat": t["repeat"], "fold": t["fold"], "test_score": t["test_score"],
                    "train_score": t["train_score"], "fit_seconds": t["fit_seconds"],
                    "epochs": t["epochs"], "status": t["status"], "error": t["error"],
                    "engine": t["engine"]}
                   for t in sorted(ts, key=lambda t: (t["repeat"], t["fold"]))],
    }


def _mean(values):
    vals = [v for v in values if v is not None and math.isfinite(v)]
    return float(np.mean(vals)) if vals else None


def _health_share(trials, key):
    """Mean over trials of the mean over hidden layers of a health share (dead, saturated)."""
    shares = []
    for t in trials:
        layer = (t.get("health") or {}).get(key) or []
        layer = [v for v in layer if v is not None]
        if layer:
            shares.append(float(np.mean(layer)))
    return float(np.mean(shares)) if shares else None
