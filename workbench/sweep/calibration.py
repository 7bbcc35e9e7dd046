"""Calibration and residuals from a sweep's stored out-of-fold predictions.

Every row of the table is predicted once per repeat by a model that never saw
it (:meth:`workbench.sweep.store.Store.out_of_fold`). Pooling those predictions
over the repeats gives, per configuration:

Classifiers
    - the **reliability curve** (Murphy & Winkler 1977, "Reliability of
      subjective probability forecasts"; DeGroot & Fienberg 1983): the predicted
      probabilities cut into :data:`N_BINS` equal-width bins on [0, 1], and per
      non-empty bin the mean predicted probability against the observed share of
      positives -- the definition of ``sklearn.calibration.calibration_curve``
      with ``strategy="uniform"`` (the tests compare the two). Two classes: the
      probability of the second class in ``classes_`` order (scikit-learn's
      positive class); more classes: the *top-label* confidence, the largest
      probability against whether that class is the true one (Guo, Pleiss, Sun
      & Weinberger 2017, "On calibration of modern neural networks", section 2);
    - the **Brier score** (Brier 1950, "Verification of forecasts expressed in
      terms of probability"): the mean over rows of the squared distance between
      the probability vector and the one-hot truth; for two classes the usual
      half of it, ``mean((p - y)^2)`` on the positive class, as
      ``sklearn.metrics.brier_score_loss`` reports it;
    - the **log-loss** (Good 1952, "Rational decisions"): ``-mean(log p_true)``
      with each row's stored probabilities renormalised to sum to one (they are
      kept as float32) and clipped below at the float64 machine epsilon, as
      ``sklearn.metrics.log_loss`` clips.

Regressors
    - predicted against actual and residuals (actual minus predicted) against
      predicted, as points for the window (:func:`points`) and, for documents,
      summarised in :data:`N_BINS` bins of equal count of the predictions (the
      mean prediction, the mean actual value and the 10th, 50th and 90th
      percentiles of the residuals per bin);
    - the root mean squared error, the mean absolute error and the mean
      residual (``bias``: positive when the model predicts too low on average).

Rows whose prediction is missing (an unfinished or failed trial) are left out.
"""

from __future__ import annotations

import math

import numpy as np

#: bins of the reliability curve and of the regression summary (common practice: ten
#: bins, as in Niculescu-Mizil & Caruana 2005, "Predicting good probabilities with
#: supervised learning")
N_BINS = 10
#: the residual percentiles drawn as a band in the regression summary (common practice:
#: an 80% band)
RESIDUAL_PERCENTILES = (10.0, 50.0, 90.0)
#: at most this many points per configuration are handed to the window for a scatter plot
#: (an even stride through the rows, so the picture stays the table's)
MAX_POINTS = 3000

__all__ = ["N_BINS", "reliability_curve", "brier_score", "log_loss", "classification_summary",
           "regression_summary", "summaries", "points"]


def reliability_curve(y_true, p, n_bins: int = N_BINS):
    """Mean predicted probability and observed frequency per non-empty bin.

    Parameters
    ----------
    y_true : array of 0/1
        Whether each row is a positive (or the predicted class is right).
    p : array of float in [0, 1]
        The predicted probability of that event.
    n_bins : int
        Equal-width bins on [0, 1]; a probability on an inner edge falls in the lower bin.

    Returns
    -------
    predicted, observed : ndarray
        Per non-empty bin, in increasing order.
    counts : ndarray of int
        Rows per non-empty bin.
    """
    y_true = np.asarray(y_true, dtype=float)
    p = np.asarray(p, dtype=float)
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    ids = np.searchsorted(edges[1:-1], p)
    total = np.bincount(ids, minlength=n_bins)
    sum_p = np.bincount(ids, weights=p, minlength=n_bins)
    sum_y = np.bincount(ids, weights=y_true, minlength=n_bins)
    keep = total > 0
    return sum_p[keep] / total[keep], sum_y[keep] / total[keep], total[keep].astype(int)


def _normalised(proba) -> np.ndarray:
    proba = np.asarray(proba, dtype=np.float64)
    sums = proba.sum(axis=1, keepdims=True)
    return proba / np.where(sums > 0, sums, 1.0)


def brier_score(codes, proba) -> float:
    """Brier score of class probabilities (``proba``: one column per class, in code order).

    Two classes: ``mean((p_1 - y)^2)``; more: ``mean(sum_k (p_k - y_k)^2)`` (Brier 1950),
    the convention of ``sklearn.metrics.brier_score_loss``.
    """
    codes = np.asarray(codes, dtype=int)
    proba = np.asarray(proba, dtype=np.float64)
    onehot = np.zeros_like(proba)
    onehot[np.arange(len(codes)), codes] = 1.0
    if proba.shape[1] == 2:
        return float(np.mean((proba[:, 1] - onehot[:, 1]) ** 2))
    return float(np.mean(np.sum((proba - onehot) ** 2, axis=1)))


def log_loss(codes, proba) -> float:
    """``-mean(log p_true)`` with rows renormalised and clipped at the float64 epsilon."""
    codes = np.asarray(codes, dtype=int)
    proba = _normalised(proba)
    eps = np.finfo(np.float64).eps
    p_true = np.clip(proba[np.arange(len(codes)), codes], eps, 1.0)
    return float(-np.mean(np.log(p_true)))


def _event(codes, proba):
    """The event the reliability curve is about, and its predicted probability."""
    codes = np.asarray(codes, dtype=int)
    proba = np.asarray(proba, dtype=np.float64)
    if proba.shape[1] == 2:
        return (codes == 1).astype(float), proba[:, 1], "positive"
    top = np.argmax(proba, axis=1)
    return (top == codes).astype(float), proba[np.arange(len(codes)), top], "top_label"


def classification_summary(codes, proba, classes=None, n_bins: int = N_BINS) -> dict:
    """The calibration of one configuration's pooled out-of-fold probabilities.

    Returns
    -------
    dict
        ``{"kind": "classification", "rows", "brier", "log_loss", "event",
        "event_words", "reliability": {"predicted", "observed", "count"}}``;
        ``event`` is ``"positive"`` (two classes) or ``"top_label"``.
    """
    y, p, event = _event(codes, proba)
    pred, obs, count = reliability_curve(y, p, n_bins)
    if event == "positive":
        positive = classes[1] if classes is not None and len(classes) > 1 else 1
        words = f"probability of class {positive}"
    else:
        words = "probability of the predicted class (top-label confidence)"
    return {"kind": "classification", "rows": int(len(y)), "brier": brier_score(codes, proba),
            "log_loss": log_loss(codes, proba), "event": event, "event_words": words,
            "reliability": {"predicted": pred.tolist(), "observed": obs.tolist(),
                            "count": count.tolist()}}


def regression_summary(actual, predicted, n_bins: int = N_BINS) -> dict:
    """Residual figures and a binned predicted-vs-actual of pooled out-of-fold predictions.

    Returns
    -------
    dict
        ``{"kind": "regression", "rows", "rmse", "mae", "bias", "bins": {"predicted",
        "actual", "residual_low", "residual_median", "residual_high", "count"}}``; bins of
        equal count of the sorted predictions (ties kept together is not attempted).
    """
    actual = np.asarray(actual, dtype=np.float64)
    predicted = np.asarray(predicted, dtype=np.float64)
    resid = actual - predicted
    order = np.argsort(predicted, kind="stable")
    groups = [g for g in np.array_split(order, min(n_bins, len(order))) if len(g)]
    lo, mid, hi = RESIDUAL_PERCENTILES
    bins = {"predicted": [], "actual": [], "residual_low": [], "residual_median": [],
            "residual_high": [], "count": []}
    for g in groups:
        q = np.percentile(resid[g], [lo, mid, hi])
        bins["predicted"].append(float(np.mean(predicted[g])))
        bins["actual"].append(float(np.mean(actual[g])))
        bins["residual_low"].append(float(q[0]))
        bins["residual_median"].append(float(q[1]))
        bins["residual_high"].append(float(q[2]))
        bins["count"].append(int(len(g)))
    return {"kind": "regression", "rows": int(len(actual)),
            "rmse": float(np.sqrt(np.mean(resid ** 2))) if len(resid) else None,
            "mae": float(np.mean(np.abs(resid))) if len(resid) else None,
            "bias": float(np.mean(resid)) if len(resid) else None, "bins": bins}


def _pooled(oof, j: int):
    """Column ``j``'s finite predictions pooled over the repeats, with the row numbers."""
    rows, values = [], []
    for pred in oof.predictions:
        v = np.asarray(pred[:, j], dtype=np.float64)
        ok = np.isfinite(v) if v.ndim == 1 else np.isfinite(v).all(axis=1)
        rows.append(np.flatnonzero(ok))
        values.append(v[ok])
    if not rows:
        return np.zeros(0, int), np.zeros(0)
    return np.concatenate(rows), np.concatenate(values)


def summaries(store, sweep_id: str, indices, n_bins: int = N_BINS) -> dict:
    """``{configuration index: summary or None}`` for a stored sweep.

    The summary is :func:`classification_summary` or :func:`regression_summary` of
    the configuration's out-of-fold predictions pooled over the repeats; None when
    none is stored (a sweep stored before predictions were kept, or no trial done).
    """
    indices = [int(i) for i in indices]
    oof = store.out_of_fold(sweep_id, configurations=indices) if indices else None
    out: dict = {i: None for i in indices}
    if oof is None:
        return out
    for j, i in enumerate(indices):
        rows, values = _pooled(oof, j)
        if not len(rows):
            continue
        if oof.classes is not None:
            out[i] = classification_summary(oof.y[rows], values, oof.classes, n_bins)
        else:
            out[i] = regression_summary(oof.y[rows], values, n_bins)
    return out


def points(store, sweep_id: str, indices, max_points: int = MAX_POINTS,
           n_bins: int = N_BINS) -> dict:
    """What the window's calibration panel draws for the selected configurations.

    Returns
    -------
    dict
        ``{"task": "classification" | "regression" | None, "configurations":
        {index: {"summary": summary or None, "actual", "predicted"}}}``: for a
        regressor the first repeat's out-of-fold predictions (every row once) with
        the actual values, at most ``max_points`` of them (an even stride); for a
        classifier empty lists (the reliability curve is in the summary).
    """
    indices = [int(i) for i in indices]
    oof = store.out_of_fold(sweep_id, configurations=indices) if indices else None
    if oof is None:
        return {"task": None, "configurations": {i: None for i in indices}}
    task = "classification" if oof.classes is not None else "regression"
    out = {}
    for j, i in enumerate(indices):
        rows, values = _pooled(oof, j)
        if not len(rows):
            out[i] = None
            continue
        if task == "classification":
            out[i] = {"summary": classification_summary(oof.y[rows], values, oof.classes, n_bins),
                      "actual": [], "predicted": []}
            continue
        first = np.asarray(oof.predictions[0][:, j], dtype=np.float64)
        shown = np.flatnonzero(np.isfinite(first))
        if len(shown) > max_points:
            shown = shown[np.linspace(0, len(shown) - 1, max_points).astype(int)]
        out[i] = {"summary": regression_summary(oof.y[rows], values, n_bins),
                  "actual": oof.y[shown].astype(float).tolist(),
                  "predicted": first[shown].tolist()}
    return {"task": task, "configurations": out}


def summary_words(summary: dict | None) -> str:
    """One line for a summary: ``Brier 0.123 · log-loss 0.456`` or ``RMSE … · MAE … · bias …``."""
    if not summary:
        return "no out-of-fold predictions stored"

    def num(v):
        if v is None or not math.isfinite(v):
            return "–"
        return f"{v:.4g}" if abs(v) >= 1e4 or (v != 0 and abs(v) < 1e-3) else f"{v:.3f}"

    if summary["kind"] == "classification":
        return f"Brier {num(summary['brier'])} · log-loss {num(summary['log_loss'])}"
    return (f"RMSE {num(summary['rmse'])} · MAE {num(summary['mae'])} · mean residual "
            f"{num(summary['bias'])}")


def add_summaries(doc: dict, store) -> None:
    """Add ``calibration`` (:func:`summaries`; None without stored predictions) to every
    configuration of a results document."""
    cfgs = doc["configurations"]
    found = summaries(store, doc["sweep_id"], [c["index"] for c in cfgs])
    for c in cfgs:
        c["calibration"] = found.get(c["index"])
