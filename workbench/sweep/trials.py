"""Run one trial: one configuration on one fold of one repeat.

:func:`run_trial` is a pure function of the table, the trial's description and
its seed, so the same trial gives the same numbers in any worker process, on
any Dask worker, serially or in parallel. It

1. builds the pipeline with :func:`workbench.data.preprocessing.build_pipeline`
   (leak-free preprocessing and target scaling, fitted inside the fold),
2. fits it on the fold's training rows with a single BLAS thread
   (threadpoolctl), timing the network's fit (``fit_seconds``: the model
   step, target scaling included; the fold's preprocessing is fitted once per
   fold and worker and shared by every configuration, see
   :func:`_fold_features`; or, on a large table, once by the sweep's process and
   mapped from its files, :func:`shared_features` and :mod:`workbench.sweep.fold_files`),
3. scores the fold's test rows and its training rows with scikit-learn's
   scorer (``sklearn.metrics.get_scorer``; greater is better) applied to the
   fitted pipeline's steps,
4. predicts the fold's test rows once more for the record: the *out-of-fold
   predictions* (``predictions``, float32, in ascending row order of the test
   rows; class probabilities, one column per class in the order of
   :func:`target_classes` -- scikit-learn's ``classes_`` order -- for
   classifiers; predictions in the user's units for regressors),
5. returns a plain dict: scores, fit seconds, epochs run (the estimator's
   ``n_iter_``), the per-epoch history (below) and the last epoch's health, the
   predictions, and a status: ``done``, ``diverged`` (non-finite loss) or
   ``failed`` (with the error message). Only a ``done`` trial carries predictions.

The history (``result["history"]``, keys :data:`HISTORY_KEYS`; lists, one entry
per epoch unless said otherwise, JSON numbers with None for a non-finite value):

- ``loss``: the training loss (the head's matched loss plus the L2 term);
- ``test_loss``: the test fold's loss, the head's matched loss without the L2 term
  in the network's units (the scaled target, the 0/1 label columns), so that it
  shares an axis with ``loss``; ``test_score``: the sweep's metric on the test
  fold in the user's units, computed as the stored ``test_score`` is (its last
  entry equals it). Both are for display: the test rows are handed to the
  network's ``fit`` as ``held_out`` (their features through the fold's fitted
  preprocessing, :func:`_fold_features`) and nothing in training or stopping
  reads them. scikit-learn's MLP has no public per-epoch hook: its trials get them
  through a subclass that reads the parameters in scikit-learn's per-epoch method
  (:func:`_watched_class`); baselines have none;
- ``val_loss``, ``val_score``: early stopping's own validation rows (split off
  the training rows), the head's loss and R^2 / accuracy;
- ``dead``, ``saturated`` (one share per hidden layer) and ``grad_norm`` (one
  norm per weight matrix), measured on a schedule (each of the first 10 epochs,
  then every 5th, and the last: :func:`workbench.nets.engine.health_due`);
  ``health_epoch``: the epochs (1-based) they were measured after.

Trials together (:func:`run_trials`): the runner hands a worker the folds of one
repeat of a configuration as one task; when their networks can stack (the NumPy
engine, within :data:`STACK_BYTES`) they train in lockstep stacks
(:mod:`workbench.nets.stacked`) with the results of single trials, else one after
another. Every trial's result is its own dict, as :func:`run_trial` returns it.

Baselines (:func:`make_baseline`, :func:`baseline_pipeline`): a trial whose
configuration has ``kind: "baseline"`` fits a reference model instead of a
network, on the same fold's preprocessed features (the same fitted
ColumnTransformer, :func:`workbench.data.preprocessing.build_preprocessor`),
and is scored and recorded the same way (no epochs, history or health).

Health for scikit-learn's engine: scikit-learn does not record per-epoch
health, so its trials carry only the final ``health`` (dead and saturated
shares measured on the first training rows with the same definitions as the
NumPy engine; no gradient norms) and empty per-epoch health lists.
"""

from __future__ import annotations

import collections
import math
import os
import secrets
import socket
import threading
import time
import traceback
import warnings
from dataclasses import dataclass, field

import numpy as np

#: trial statuses (a cancelled trial is never stored)
DONE, DIVERGED, FAILED, CANCELLED = "done", "diverged", "failed", "cancelled"


@dataclass
class TrialData:
    """What every trial of a sweep reads: the table and the intake's findings.

    Sent to each worker once (a file each local worker reads on its first
    trial, a scattered future on a Dask cluster), never with every trial.
    """

    X: object  # pandas DataFrame of the feature columns
    y: object  # target values (numpy array)
    profile: object  # the intake's TableProfile
    target: object  # the intake's TargetInfo
    token: str = field(default_factory=lambda: secrets.token_hex(8))  # names this table


# --------------------------------------------------------------------------- estimators


def make_estimator(spec: dict):
    """The unfitted MLP for a trial description (see :func:`run_trial`).

    The NumPy engine gets the fair start (``output_init="mean"``: the untrained
    network predicts the training mean, whatever the head) and the stopping rule
    relative to the constant predictor's loss (``tol_mode="relative"``), so that every
    head starts and stops alike; scikit-learn's MLP keeps its own initialisation and
    absolute rule (it has no public way to set its output layer's start).
    """
    cfg = spec["config"]
    common = dict(
        hidden_layer_sizes=tuple(cfg["layers"]),
        solver="adam",
        alpha=float(cfg["alpha"]),
        batch_size=spec.get("batch_size", "auto"),
        learning_rate_init=float(cfg["learning_rate"]),
        max_iter=int(spec["epochs"]),
        shuffle=True,
        random_state=int(spec["random_state"]),
        early_stopping=bool(spec.get("early_stopping", False)),
    )
    task = spec["task"]
    if cfg["engine"] == "sklearn":
        from sklearn.neural_network import MLPClassifier, MLPRegressor

        if task == "classification":
            return MLPClassifier(activation=cfg["hidden"], **common)
        loss = "poisson" if cfg["head"] == "exp" else "squared_error"
        return MLPRegressor(loss=loss, activation=cfg["hidden"], **common)
    from workbench.nets.engine import NetClassifier, NetRegressor

    cls = NetClassifier if task == "classification" else NetRegressor
    return cls(activation=cfg["hidden"], output_activation=cfg["head"],
               dtype=spec.get("dtype", "float32"), output_init="mean", tol_mode="relative",
               **common)


def estimator_for(plan, config, random_state: int = 0):
    """The unfitted MLP a sweep uses for one configuration (for refits and export).

    Parameters
    ----------
    plan : SweepPlan or dict
        The sweep's plan (``SweepPlan.to_dict()`` form accepted, as stored).
    config : Configuration or dict
        One configuration of the plan (as stored by the store).
    random_state : int
        Seed of the weight initialisation and batch order.

    Returns
    -------
    estimator
        ``MLPClassifier``/``MLPRegressor`` or ``NetClassifier``/``NetRegressor``
        with the configuration's parameters; hand it to
        :func:`workbench.data.preprocessing.build_pipeline` with the configuration's head.
    """
    p = plan.to_dict() if hasattr(plan, "to_dict") else dict(plan)
    c = config.to_dict() if hasattr(config, "to_dict") else dict(config)
    return make_estimator({"config": c, "task": p["task"], "epochs": p["epochs"],
                           "early_stopping": p.get("early_stopping", False),
                           "batch_size": p.get("batch_size", "auto"),
                           "dtype": p.get("dtype", "float32"), "random_state": random_state})


# --------------------------------------------------------------------------- baselines

#: L2 strength of the Poisson baseline: the networks' default (scikit-learn's MLP
#: ``alpha``); common practice, since both average the loss over rows
POISSON_BASELINE_ALPHA = 1e-4

#: scorers that need every prediction > 0 (the linear baseline is then a Poisson GLM)
_POSITIVE_PREDICTION_METRICS = {"neg_mean_poisson_deviance", "neg_mean_gamma_deviance"}


def make_baseline(task: str, name: str, metric: str | None = None):
    """The unfitted model step of a baseline (the preprocessing comes first).

    ``constant``: ``DummyRegressor(strategy="mean")`` (the training fold's mean)
    or ``DummyClassifier(strategy="prior")`` (its class shares). ``linear``:
    ``Ridge()`` (scikit-learn's default ``alpha=1.0``) on the target scaled as
    for the identity head (``TargetScaler("standard")``, inverted for scoring,
    through ``TransformedTargetRegressor``) or ``LogisticRegression(max_iter=1000)``
    (scikit-learn's defaults, L2 with ``C=1``; more iterations than the default
    100 so that lbfgs converges on standardised features). When ``metric``
    needs predictions > 0 (the Poisson deviance), a linear model can predict 0
    or less, so the linear baseline is then scikit-learn's ``PoissonRegressor``
    (a linear model with a log link, the exp head's linear counterpart) on the
    exp head's target scaling, with :data:`POISSON_BASELINE_ALPHA`.
    """
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.dummy import DummyClassifier, DummyRegressor
    from sklearn.linear_model import LogisticRegression, PoissonRegressor, Ridge

    from workbench.data.preprocessing import TargetScaler

    if task == "classification":
        if name == "constant":
            return DummyClassifier(strategy="prior")
        if name == "linear":
            return LogisticRegression(max_iter=1000)
    elif name == "constant":
        return DummyRegressor(strategy="mean")
    elif name == "linear":
        if metric in _POSITIVE_PREDICTION_METRICS:
            return TransformedTargetRegressor(
                regressor=PoissonRegressor(alpha=POISSON_BASELINE_ALPHA, max_iter=1000),
                transformer=TargetScaler("scale"), check_inverse=False)
        return TransformedTargetRegressor(regressor=Ridge(), transformer=TargetScaler("standard"),
                                          check_inverse=False)
    raise ValueError(f"unknown baseline {name!r} for {task}")


def describe_baseline(task: str, name: str, metric: str | None = None) -> str:
    """One line naming a baseline's estimator, e.g. ``Ridge(alpha=1.0), target standardised``."""
    model = make_baseline(task, name, metric)
    if hasattr(model, "regressor"):
        mode = model.transformer.mode
        scaling = {"standard": "target standardised", "scale": "target divided by its sd"}[mode]
        return f"{type(model.regressor).__name__}({_params(model.regressor)}), {scaling}"
    return f"{type(model).__name__}({_params(model)})"


def _params(est) -> str:
    p = est.get_params(deep=False)
    return ", ".join(f"{k}={p[k]!r}" for k in ("strategy", "alpha", "C", "max_iter")
                     if p.get(k) is not None)


def baseline_pipeline(profile, target, name: str, metric: str | None = None):
    """``Pipeline([("prep", ColumnTransformer), ("model", baseline)])``, unfitted.

    The ColumnTransformer is the networks' own
    (:func:`workbench.data.preprocessing.build_preprocessor` for the same profile
    and target); the model step is :func:`make_baseline`.
    """
    from sklearn.pipeline import Pipeline

    from workbench.data.preprocessing import build_preprocessor

    # a trial's pipeline is never saved: its median imputers may be fitted column by column
    return Pipeline([("prep", build_preprocessor(profile, target, columnwise_medians=True)),
                     ("model", make_baseline(target.task, name, metric))])


# --------------------------------------------------------------------------- the target's classes


def target_classes(y) -> np.ndarray:
    """The class labels in scikit-learn's ``classes_`` order (sorted, as ``numpy.unique``)."""
    return np.unique(np.asarray(y))


def target_codes(y) -> tuple[np.ndarray, np.ndarray]:
    """``(classes, codes)``: :func:`target_classes` and each row's position in it."""
    classes, codes = np.unique(np.asarray(y), return_inverse=True)
    return classes, codes.reshape(-1)


#: the classes of the current sweep's target in this worker: {token: classes}
_CLASSES: dict = {}


def _sweep_classes(data: TrialData) -> np.ndarray:
    with _FOLD_LOCK:
        hit = _CLASSES.get(data.token)
    if hit is None:
        hit = target_classes(data.y)
        with _FOLD_LOCK:
            _CLASSES.clear()
            _CLASSES[data.token] = hit
    return hit


def _predictions(data: TrialData, model, X_te, test: np.ndarray, proba=None) -> np.ndarray:
    """The test rows' predictions as float32, in ascending row order.

    Classifiers: ``predict_proba`` with one column per class of the whole
    target (:func:`target_classes`); a class the model never saw gets 0. ``proba``:
    ``model.predict_proba(X_te)`` when the caller already has it.
    Regressors: ``predict`` (user units; target scaling inverted), one value per row.
    """
    order = np.argsort(test, kind="stable")
    if data.target.task == "classification":
        proba = np.asarray(model.predict_proba(X_te) if proba is None else proba,
                           dtype=np.float64)
        classes = _sweep_classes(data)
        seen = np.asarray(model.classes_)
        cols = np.searchsorted(classes, seen)
        if np.any(cols >= classes.size) or np.any(classes[np.minimum(cols, classes.size - 1)]
                                                   != seen):
            raise ValueError(f"the model's classes {seen.tolist()} are not among the "
                             f"target's {classes.tolist()}")
        out = np.zeros((proba.shape[0], classes.size), dtype=np.float32)
        out[:, cols] = proba
        return np.ascontiguousarray(out[order])
    pred = np.asarray(model.predict(X_te), dtype=np.float64).reshape(-1)
    return np.ascontiguousarray(pred[order].astype(np.float32))


def _unwrap(model, X):
    """The fitted MLP inside a pipeline / target wrapper, and its input features."""
    for _ in range(10):
        if hasattr(model, "coefs_"):
            return model, X
        if hasattr(model, "steps"):  # a Pipeline
            if len(model.steps) > 1:
                X = model[:-1].transform(X)
            model = model.steps[-1][1]
        elif hasattr(model, "regressor_"):  # TransformedTargetRegressor
            model = model.regressor_
        elif hasattr(model, "estimator_"):
            model = model.estimator_
        else:
            break
    return None, X


def _network_targets(model, mlp, y):
    """``y`` as the network inside ``model`` saw it: scaled target or 0/1 label columns."""
    y = np.asarray(y)
    for _ in range(10):
        if hasattr(model, "coefs_"):
            break
        if hasattr(model, "steps"):
            model = model.steps[-1][1]
        elif hasattr(model, "regressor_"):  # TransformedTargetRegressor: its scaler
            y = model.transformer_.transform(y.reshape(-1, 1)) if hasattr(
                model, "transformer_") and model.transformer_ is not None else y
            model = model.regressor_
        else:
            break
    if hasattr(mlp, "classes_"):
        from sklearn.preprocessing import LabelBinarizer

        Y = LabelBinarizer().fit(mlp.classes_).transform(y)
        if Y.shape[1] == 1 and mlp.coefs_[-1].shape[1] == 2:
            Y = np.hstack([1 - Y, Y])
        return Y
    return np.asarray(y, dtype=np.float64).reshape(len(y), -1)


def _final_health(model, mlp, X, y, hidden: str) -> dict:
    """Dead / saturated share and gradient norm per hidden layer of a fitted
    scikit-learn MLP, measured after training with the NumPy engine's own
    definitions (:func:`workbench.nets.engine.network_health`); scikit-learn records
    no per-epoch health, so only the final state is known.
    """
    from workbench.nets.engine import network_health

    head = getattr(mlp, "out_activation_", "identity")
    task = "classification" if hasattr(mlp, "classes_") else "regression"
    return network_health(mlp.coefs_, mlp.intercepts_, hidden, head, task, X,
                          _network_targets(model, mlp, y))


def _clean_health(health: dict) -> dict:
    return {k: _clean(health.get(k, [])) for k in ("dead", "saturated", "grad_norm")}


def _clean(values):
    """Floats for JSON: non-finite numbers become None, nested lists kept."""
    out = []
    for v in values:
        if isinstance(v, list | tuple):
            out.append(_clean(v))
        else:
            v = float(v)
            out.append(v if math.isfinite(v) else None)
    return out


#: the per-epoch history a trial stores (see the module docstring)
HISTORY_KEYS = ("loss", "test_loss", "test_score", "val_loss", "val_score", "dead",
                "saturated", "grad_norm", "health_epoch")


def _empty_history() -> dict:
    return {k: [] for k in HISTORY_KEYS}


def _history(mlp) -> dict:
    hist = getattr(mlp, "history_", None)
    if hist is not None:
        out = {k: _clean(hist.get(k, [])) for k in HISTORY_KEYS}
        out["health_epoch"] = [int(e) for e in hist.get("health_epoch", [])]
        return out
    out = _empty_history()
    out["loss"] = _clean(getattr(mlp, "loss_curve_", []) or [])
    out["val_score"] = _clean(getattr(mlp, "validation_scores_", None) or [])
    return out


# --------------------------------------------------------------------------- held-out curves


def _regression_score(metric: str, y):
    """``f(predictions) -> score`` for a regression scorer, from the formulas
    scikit-learn's metrics use (tests compare them with ``get_scorer``)."""
    y = np.asarray(y, dtype=np.float64).reshape(-1)
    if metric == "r2":
        total = float(np.sum((y - np.mean(y)) ** 2))

        def r2(p):
            resid = float(np.sum((y - p) ** 2))
            if total == 0.0:  # scikit-learn's force_finite rule
                return 1.0 if resid == 0.0 else 0.0
            return 1.0 - resid / total
        return r2
    if metric == "neg_root_mean_squared_error":
        return lambda p: -float(np.sqrt(np.mean((y - p) ** 2)))
    if metric == "neg_mean_absolute_error":
        return lambda p: -float(np.mean(np.abs(y - p)))
    if metric == "neg_mean_poisson_deviance":
        from scipy.special import xlogy

        def poisson(p):
            if not np.all(p > 0):  # undefined: scikit-learn refuses to score it
                return math.nan
            return -float(np.mean(2 * (xlogy(y, y / p) - y + p)))
        return poisson
    return None


def _classification_score(metric: str, classes, y):
    """``f(probabilities) -> score`` for a classification scorer: the labels as the
    classifier's ``predict`` decodes them (binary: positive class above 0.5; else the
    most probable class), the positive class's probability as the scorer takes it."""
    classes = np.asarray(classes)
    y = np.asarray(y)
    pos = np.searchsorted(classes, y)
    known = (pos < classes.size) & (classes[np.minimum(pos, classes.size - 1)] == y)
    codes = np.where(known, pos, -1)
    binary = classes.size == 2

    def labels(proba):
        return (proba[:, 1] > 0.5).astype(int) if binary else np.argmax(proba, axis=1)

    if metric == "accuracy":
        return lambda proba: float(np.mean(labels(proba) == codes))
    if metric == "balanced_accuracy":
        groups = [codes == c for c in np.unique(codes)]
        return lambda proba: float(np.mean([np.mean(labels(proba)[g] == codes[g])
                                            for g in groups]))
    both = binary and known.all() and np.unique(codes).size == 2
    if metric == "roc_auc":
        if not both:
            return None  # scikit-learn's scorer cannot score it either
        positive = codes == 1
        n_pos = int(positive.sum())
        n_neg = positive.size - n_pos

        def auc(proba):  # the Mann-Whitney statistic, ties counted half
            s = proba[:, 1]
            order = np.argsort(s)
            ranked = s[order]
            new = np.empty(ranked.size, dtype=bool)
            new[0] = True
            np.not_equal(ranked[1:], ranked[:-1], out=new[1:])
            hits = positive[order]
            if new.all():  # no ties: the ranks are 1..n
                r_pos = float(np.flatnonzero(hits).sum() + n_pos)
            else:
                starts = np.flatnonzero(new)
                ends = np.append(starts[1:], ranked.size)
                ranks = np.repeat((starts + ends + 1) / 2.0, ends - starts)  # mean rank of ties
                r_pos = float(ranks[hits].sum())
            return (r_pos - n_pos * (n_pos + 1) / 2) / (n_pos * n_neg)
        return auc
    if metric == "neg_log_loss":
        if not (known.all() and np.unique(codes).size == classes.size):
            return None
        from scipy.special import xlogy

        def log_loss(proba):  # in the probabilities' dtype, as scikit-learn computes it
            p = proba[:, 1:2] if binary else proba
            if binary:
                p = np.concatenate([1 - p, p], axis=1)
            eps = np.finfo(p.dtype).eps
            p = np.clip(p, eps, 1 - eps)
            onehot = np.zeros(p.shape, dtype=p.dtype)
            onehot[np.arange(codes.size), codes] = 1
            return -float(np.mean(-np.sum(xlogy(onehot, p), axis=1)))  # neg_log_loss
        return log_loss
    return None


#: scikit-learn MLP class -> its watched subclass (:func:`_watched_class`)
_WATCHED: dict = {}


def _watched_class(cls):
    """A subclass of scikit-learn's ``MLPRegressor``/``MLPClassifier`` whose ``fit`` takes
    the NumPy engine's ``held_out`` and ``held_out_score`` and records
    ``history_["test_loss"]`` and ``history_["test_score"]`` the same way.

    scikit-learn has no public per-epoch callback (and ``partial_fit`` is not the same
    training), so it reads the parameters in ``_update_no_improvement_count``, the
    method scikit-learn's training loop calls once after every epoch's updates. It
    only reads: the fitted parameters are those of the class itself. The loss is the
    workbench head's matched loss, which equals scikit-learn's MLP loss for the same
    head (the parity tests); with early stopping the last point is of the restored
    best parameters. None when the class has no such method (another scikit-learn):
    the trial then records no held-out curves.
    """
    if cls in _WATCHED:
        return _WATCHED[cls]
    if not hasattr(cls, "_update_no_improvement_count"):
        _WATCHED[cls] = None
        return None

    class Watched(cls):
        def fit(self, X, y, sample_weight=None, held_out=None, held_out_score=None):
            self._watch = None
            self._curves = {"test_loss": [], "test_score": []}
            if held_out is not None:
                self._watch = (held_out[0], np.asarray(held_out[1]), held_out_score)
            super().fit(X, y, sample_weight=sample_weight)
            if self._watch is not None and self.early_stopping and self._curves["test_loss"]:
                self._watch_now(replace=True)  # the best epoch's parameters were restored
            self._watch = None
            self.history_ = {"loss": list(self.loss_curve_),
                             "val_score": list(self.validation_scores_ or []), **self._curves}
            return self

        def _update_no_improvement_count(self, *args, **kwargs):
            super()._update_no_improvement_count(*args, **kwargs)
            if getattr(self, "_watch", None) is not None:
                self._watch_now()

        def _watch_now(self, replace=False):
            from workbench.nets.activations import resolve_head

            X_ho, y_ho, score = self._watch
            if hasattr(self, "classes_"):
                out = self.predict_proba(X_ho)
                raw = out[:, 1:] if self.out_activation_ == "logistic" else out
                y_net = self._label_binarizer.transform(y_ho)
                task = "classification"
            else:
                out = self.predict(X_ho)
                raw = np.reshape(out, (len(out), -1))
                y_net = np.reshape(y_ho, raw.shape)
                task = "regression"
            head = resolve_head(self.out_activation_, task)
            values = {"test_loss": float(head.loss_fn.value(np.asarray(y_net, raw.dtype), raw))}
            if score is not None:
                values["test_score"] = float(score(out))
            for key, value in values.items():
                if replace:
                    self._curves[key][-1] = value
                else:
                    self._curves[key].append(value)

    Watched.__name__ = Watched.__qualname__ = cls.__name__
    _WATCHED[cls] = Watched
    return Watched


def _watch_sklearn(pipe):
    """Swap the scikit-learn MLP inside the pipeline for its watched subclass (same
    parameters); the model step to hand the held-out rows to, or None if it cannot be."""
    step, watched = _watch_sklearn_model(pipe.named_steps["model"])
    pipe.steps[-1] = ("model", step)
    return watched


def _watch_sklearn_model(model):
    """The model step with its scikit-learn MLP swapped for the watched subclass (same
    parameters), and the step to hand the held-out rows to: ``(step, step)``, or
    ``(model, None)`` when it cannot be watched."""
    inner = getattr(model, "regressor", model)
    watched = _watched_class(type(inner))
    if watched is None:
        return model, None
    twin = watched(**inner.get_params(deep=False))
    if inner is model:
        return twin, twin
    model.set_params(regressor=twin)
    return model, model


def _held_out_watch(spec: dict, model, y_tr, y_te):
    """``fit`` arguments that make the NumPy engine record the test fold's curves.

    ``held_out``: the test rows (their features are passed by the caller, already
    through the fold's fitted preprocessing) with the target as the network sees it --
    class labels, or for a regressor the target scaled by the same scaler the
    ``TransformedTargetRegressor`` fits on the training rows (a deterministic fit, so
    the same offset and scale). ``held_out_score``: the sweep's metric in the user's
    units from the network's predictions, computed the way the trial's ``test_score``
    is (the regressor's predictions through the scaler's inverse; the scorer's
    formula); None for a metric without a per-epoch formula here.
    """
    metric = spec["metric"]
    if spec["task"] == "classification":
        holder = {}

        def score(proba):
            if "f" not in holder:  # the classes are known once fit has seen the labels
                holder["f"] = _classification_score(metric, model.classes_, y_te)
            f = holder["f"]
            return math.nan if f is None else f(proba)
        return y_te, score
    from sklearn.base import clone

    y_tr = np.asarray(y_tr, dtype=np.float64).reshape(len(y_tr), -1)
    scaler = clone(model.transformer).fit(y_tr)
    y_net = scaler.transform(np.asarray(y_te, dtype=np.float64).reshape(len(y_te), -1))
    f = _regression_score(metric, y_te)
    if f is None:
        return y_net, None

    def score(pred):
        user = scaler.inverse_transform(np.reshape(pred, (-1, 1)))
        return f(user.reshape(-1))
    return y_net, score


def _looks_diverged(exc: Exception) -> bool:
    text = str(exc).lower()
    return any(w in text for w in ("non-finite", "nan", "infinity", "overflow"))


# --------------------------------------------------------------------------- one trial


def run_trial(data: TrialData, spec: dict) -> dict:
    """Fit and score one trial; never raises.

    Parameters
    ----------
    data : TrialData
    spec : dict
        ``config`` (a :class:`workbench.sweep.plan.Configuration` as a dict),
        ``repeat``, ``fold``, ``train`` and ``test`` (row positions),
        ``random_state``, ``task``, ``metric``, ``epochs``, ``early_stopping``,
        ``batch_size``, ``dtype``; optional ``curves`` (default True: record the
        held-out curves; False only to measure their cost).

    Returns
    -------
    dict
        ``config_index, repeat, fold, status, test_score, train_score,
        fit_seconds, epochs, engine, error, history, health, n_train, n_test,
        worker, predictions`` (``predictions``: the out-of-fold predictions,
        see the module docstring; None unless the status is ``done``).
    """
    result = _new_result(spec)
    with one_blas_thread(), warnings.catch_warnings(), \
            np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        warnings.simplefilter("ignore")
        _guarded(data, spec, result)
    return result


def _new_result(spec: dict) -> dict:
    """A trial's result before it runs (a failure until it succeeds)."""
    cfg = spec["config"]
    return {
        "config_index": int(cfg["index"]), "repeat": int(spec["repeat"]),
        "fold": int(spec["fold"]), "status": FAILED, "test_score": None,
        "train_score": None, "fit_seconds": None, "epochs": None, "engine": cfg["engine"],
        "error": None, "history": _empty_history(),
        "health": {"dead": [], "saturated": [], "grad_norm": []},
        "n_train": len(spec["train"]), "n_test": len(spec["test"]),
        "worker": f"{socket.gethostname()}:{os.getpid()}", "predictions": None,
    }


def _guarded(data: TrialData, spec: dict, result: dict) -> None:
    """:func:`_fit_and_score` with any error recorded in ``result``, never raised."""
    try:
        _fit_and_score(data, spec, result)
    except Exception as exc:  # recorded, never raised: one trial must not end the sweep
        result["status"] = FAILED
        result["error"] = f"{type(exc).__name__}: {exc}".strip()
        result["traceback"] = traceback.format_exc(limit=6)


#: this process's threadpoolctl controller (finding the loaded BLAS / OpenMP libraries
#: takes about 10 ms, once instead of once per trial)
_CONTROLLER: list = []


def one_blas_thread():
    """A context in which BLAS and OpenMP use one thread (threadpoolctl), as every trial runs.

    The libraries are looked up once per process, after scikit-learn's metrics (and
    with them SciPy and the OpenMP runtime) are imported, so that every library a trial
    uses is loaded by then."""
    import sklearn.metrics  # noqa: F401 - loads what trials use before the lookup
    from threadpoolctl import ThreadpoolController

    if not _CONTROLLER:
        _CONTROLLER.append(ThreadpoolController())
    return _CONTROLLER[0].limit(limits=1)


# --------------------------------------------------------------------------- trials together

#: a group's stacked training copies may take at most this many bytes (each member's
#: rows with the ones column in the network's float type, held by its fit, by its
#: epoch's shuffled rows and by the stack, plus its float64 fold features); above it
#: the group's trials run one after another. A choice: it keeps stacking to tables
#: where a fit's arrays are small next to a worker's base (the kiln table needs 4 MB),
#: so that a worker's peak on a large table is that of one fit.
STACK_BYTES = 32 * 2**20


def stack_bytes(rows: int, features: int, k: int, dtype="float32") -> int:
    """The memory :data:`STACK_BYTES` bounds for ``k`` fits of ``rows`` x ``features``."""
    item = np.dtype(dtype).itemsize
    return int(k) * int(rows) * (int(features) + 1) * (8 + 3 * item)


def stackable(spec: dict) -> bool:
    """Whether a trial's network can train in a stack (the NumPy engine's networks; not
    scikit-learn's MLP, not a baseline)."""
    cfg = spec["config"]
    return cfg.get("kind") != "baseline" and cfg.get("engine") != "sklearn"


def run_trials(data: TrialData, specs) -> list[dict]:
    """Run a group of trials of one configuration (e.g. the folds of one repeat) together;
    their results in order, each exactly what :func:`run_trial` returns for it alone.

    When every trial can stack (:func:`stackable`) and the group fits
    :data:`STACK_BYTES`, the trials run in lockstep
    (:func:`workbench.nets.stacked.run_in_lockstep`): each in a thread of its own, one
    thread at a time, their networks' epochs trained in one stack and their per-epoch
    held-out predictions computed for all of them at once; everything else each trial
    does as alone, with its own seed, stopping rule and bookkeeping, so the scores,
    histories, health and out-of-fold predictions are those of separate runs
    (``tests/test_sweep_stacked.py``). ``fit_seconds`` is then the group's fitting time
    shared equally among its trials (their fits interleave). Otherwise the trials run
    one after another.
    """
    specs = list(specs)
    if len(specs) < 2 or not all(stackable(s) for s in specs) or \
            len({int(s["config"]["index"]) for s in specs}) != 1:
        return [run_trial(data, s) for s in specs]
    results = [_new_result(s) for s in specs]
    with one_blas_thread(), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # process-wide: set once here, not in each thread
        if not _fits_stack_budget(data, specs):
            for spec, result in zip(specs, results):
                with np.errstate(over="ignore", invalid="ignore", divide="ignore",
                                 under="ignore"):
                    _guarded(data, spec, result)
            return results
        from workbench.nets.stacked import run_in_lockstep

        def member(spec, result):
            def run():
                # NumPy's error state is per thread: each member sets its own
                with np.errstate(over="ignore", invalid="ignore", divide="ignore",
                                 under="ignore"):
                    _guarded(data, spec, result)
            return run

        run_in_lockstep([member(s, r) for s, r in zip(specs, results)])
    for result in results:
        if result["fit_seconds"] is not None:
            result["fit_seconds"] /= len(results)
    return results


def _fits_stack_budget(data: TrialData, specs) -> bool:
    """Whether the group's fits fit :data:`STACK_BYTES` (the fold features' width read
    from the first trial's fold, which its trial then takes from the cache)."""
    spec = specs[0]
    try:
        shared = shared_features(spec)
        if shared is not None:
            X_tr = shared[0]
        else:
            X_tr, _ = _fold_features(data, spec, fold_preprocessor(data),
                                     np.asarray(spec["train"]), np.asarray(spec["test"]))
    except Exception:  # the trials will meet it (and record it) themselves
        return False
    rows = max(len(s["train"]) for s in specs)
    return stack_bytes(rows, X_tr.shape[1], len(specs), spec.get("dtype", "float32")) \
        <= STACK_BYTES


#: fitted fold features kept per worker: {(token, repeat, fold): (X_train, X_test)}
_FOLD_CACHE: collections.OrderedDict = collections.OrderedDict()
#: how many folds' features a worker keeps: every fold of a repeat, since a group of
#: trials (:func:`run_trials`) runs one configuration on each fold of a repeat and the
#: next group the next configuration on the same folds (the plan's folds are at most 20)
FOLD_CACHE_SIZE = 20
#: ... and how many bytes: beyond the most recent fold, older folds are kept only while
#: all of them (and the next one, judged by the last one's size) fit in this budget. On
#: a large table a worker then holds one fold's features, not three; a fold's
#: preprocessing is cheap next to a network's fit on that many rows. (A choice.)
FOLD_CACHE_BYTES = 64 * 2**20
_FOLD_LOCK = threading.Lock()


def _cached_bytes() -> int:
    return sum(a.nbytes + b.nbytes for a, b in _FOLD_CACHE.values())


def _make_room(incoming: int) -> None:
    """Evict the oldest folds (lock held) until ``incoming`` more bytes fit the budget."""
    while _FOLD_CACHE and (len(_FOLD_CACHE) >= FOLD_CACHE_SIZE
                           or _cached_bytes() + incoming > FOLD_CACHE_BYTES):
        _FOLD_CACHE.popitem(last=False)


def _fold_features(data: TrialData, spec: dict, prep, train, test):
    """The preprocessed training and test features of a fold, fitted on its training part.

    The preprocessor does not depend on the configuration (target scaling lives
    in the model step), so every configuration on a fold reuses the same fitted
    features: exactly what ``Pipeline.fit`` would compute (``fit_transform`` on
    the training rows, ``transform`` on the test rows), done once per fold and
    worker. The arrays are read-only so that no estimator can alter them.
    """
    key = (data.token, int(spec["repeat"]), int(spec["fold"]))
    with _FOLD_LOCK:  # Dask runs several trials per worker process, in threads
        hit = _FOLD_CACHE.get(key)
        if hit is not None:
            _FOLD_CACHE.move_to_end(key)
            return hit
        for k in [k for k in _FOLD_CACHE if k[0] != data.token]:
            del _FOLD_CACHE[k]
        if _FOLD_CACHE:  # room for this fold first, so that no more folds are held meanwhile
            _make_room(sum(a.nbytes for a in next(reversed(_FOLD_CACHE.values()))))
    Xt_tr, Xt_te = compute_fold_features(data, prep, train, test)
    Xt_tr.flags.writeable = False
    Xt_te.flags.writeable = False
    with _FOLD_LOCK:
        _make_room(Xt_tr.nbytes + Xt_te.nbytes)
        _FOLD_CACHE[key] = (Xt_tr, Xt_te)
    return Xt_tr, Xt_te


def shared_features(spec: dict):
    """``(X_train, X_test)`` of a trial whose fold features the parent prepared
    (``spec["features"]``: the two ``.npy`` files, see :mod:`workbench.sweep.fold_files`),
    memory-mapped read-only (``numpy.load(mmap_mode="r")``); None without them.

    A baseline's are mapped copy-on-write instead (``mmap_mode="c"``: the file is opened
    read-only and never changes; a page written would become this process's own):
    scikit-learn's ``Ridge`` copies a read-only array before its own centring copy
    (``validate_data(force_writeable=True)``), so a writeable mapping saves a whole copy
    of the training rows -- the same values, so the same fit."""
    files = spec.get("features")
    if not files:
        return None
    mode = "c" if spec["config"].get("kind") == "baseline" else "r"
    return (np.load(files["train"], mmap_mode=mode, allow_pickle=False),
            np.load(files["test"], mmap_mode=mode, allow_pickle=False))


def fold_preprocessor(data: TrialData):
    """The unfitted ColumnTransformer of every trial of the sweep (networks and baselines
    alike): :func:`workbench.data.preprocessing.build_preprocessor` with the median
    imputers fitted column by column (a trial's pipeline is never saved)."""
    from workbench.data.preprocessing import build_preprocessor

    return build_preprocessor(data.profile, data.target, columnwise_medians=True)


def compute_fold_features(data: TrialData, prep, train, test):
    """A fold's features as its trial's pipeline would compute them: ``fit_transform``
    of ``prep`` on the training rows, then ``transform`` of the test rows (float64).
    The one definition, for the worker's own features (:func:`_fold_features`) and the
    parent's shared ones (:mod:`workbench.sweep.fold_files`)."""
    X_tr = np.asarray(prep.fit_transform(data.X.iloc[train], np.asarray(data.y)[train]))
    X_te = np.asarray(prep.transform(data.X.iloc[test]))
    return X_tr, X_te


def _fit_and_score(data: TrialData, spec: dict, result: dict) -> None:
    from sklearn.metrics import get_scorer

    cfg = spec["config"]
    train = np.asarray(spec["train"])
    test = np.asarray(spec["test"])
    y = np.asarray(data.y)
    y_tr, y_te = y[train], y[test]
    baseline = cfg.get("kind") == "baseline"
    shared = shared_features(spec)
    if shared is not None:
        # the parent's prepared features (mapped): the model step alone, no ColumnTransformer
        from workbench.data.preprocessing import build_model

        X_tr, X_te = shared
        model = make_baseline(data.target.task, cfg["name"], spec["metric"]) if baseline \
            else build_model(data.target, make_estimator(spec), cfg["head"])
    else:
        from workbench.data.preprocessing import build_pipeline

        if baseline:
            pipe = baseline_pipeline(data.profile, data.target, cfg["name"], spec["metric"])
        else:
            pipe = build_pipeline(data.profile, data.target, make_estimator(spec), cfg["head"],
                                  columnwise_medians=True)  # never saved (see baseline_pipeline)
        prep, model = pipe.named_steps["prep"], pipe.named_steps["model"]
        X_tr, X_te = _fold_features(data, spec, prep, train, test)
        del pipe, prep  # the fitted preprocessor lives on in the fold cache only
    fit_params = {}
    if not baseline and spec.get("curves", True):
        watched = model
        if cfg["engine"] == "sklearn":
            model, watched = _watch_sklearn_model(model)
        if watched is not None:
            y_held, score = _held_out_watch(spec, watched, y_tr, y_te)
            fit_params = {"held_out": (X_te, y_held), "held_out_score": score}
    t0 = time.perf_counter()
    try:
        model.fit(X_tr, y_tr, **fit_params)
    except (ValueError, FloatingPointError, OverflowError) as exc:
        result["fit_seconds"] = time.perf_counter() - t0
        if _looks_diverged(exc):
            result["status"] = DIVERGED
            result["error"] = f"training diverged: {exc}"
            try:  # keep the epochs and losses up to the blow-up
                mlp, _ = _unwrap(model, X_tr)
                if mlp is not None:
                    result["epochs"] = int(getattr(mlp, "n_iter_", 0)) or None
                    result["history"] = _history(mlp)
            except Exception:  # the partial model may be unusable; the status says enough
                pass
            return
        raise
    result["fit_seconds"] = time.perf_counter() - t0
    mlp, feats = _unwrap(model, X_tr)
    if mlp is not None:
        result["epochs"] = int(getattr(mlp, "n_iter_", 0))
        result["history"] = _history(mlp)
        health = getattr(mlp, "health_", None)
        if health is not None:
            result["health"] = _clean_health(health)
        elif cfg["engine"] == "sklearn":
            result["health"] = _clean_health(_final_health(model, mlp, feats, y_tr,
                                                           cfg["hidden"]))
        losses = getattr(mlp, "loss_curve_", None) or []
        if getattr(mlp, "diverged_", False) or any(not math.isfinite(v) for v in losses):
            result["status"] = DIVERGED
            result["error"] = (f"training diverged at epoch {result['epochs']} (non-finite loss); "
                               "lower the learning rate")
            return
    scorer = get_scorer(spec["metric"])
    try:
        # the scorer's values, bit for bit, without predicting the test rows twice or
        # validating the labels again (exact_scores); the probabilities also make the
        # out-of-fold predictions
        from workbench.sweep.exact_scores import trial_score

        proba = model.predict_proba(X_te) if data.target.task == "classification" else None
        test_score = trial_score(spec["metric"], model, X_te, y_te, proba, scorer)
        train_score = trial_score(spec["metric"], model, X_tr, y_tr, scorer=scorer)
    except ValueError as exc:
        if _looks_diverged(exc):
            result["status"] = DIVERGED
            result["error"] = f"predictions are not finite: {exc}"
            return
        raise
    if not (math.isfinite(test_score) and math.isfinite(train_score)):
        result["status"] = DIVERGED
        result["error"] = "the score is not finite (the network's predictions blew up)"
        return
    result["predictions"] = _predictions(data, model, X_te, test, proba)
    result["test_score"] = test_score
    result["train_score"] = train_score
    result["status"] = DONE


# --------------------------------------------------------------------------- worker-process glue

#: the table of the current sweep in this worker process: {token: TrialData}
_WORKER_DATA: dict = {}


def save_worker_data(data: TrialData, path: str) -> None:
    """Write the sweep's table for the local workers (read back by :func:`run_trial_from_file`).

    ``joblib.dump`` without compression: every NumPy array inside the
    :class:`TrialData` -- the DataFrame's numeric column blocks, the target -- is
    written as a raw buffer that the workers map read-only instead of copying.
    """
    import joblib

    joblib.dump(data, path)


def load_worker_data(path: str) -> TrialData:
    """The :class:`TrialData` written by :func:`save_worker_data`, its arrays memory-mapped
    read-only (``joblib.load(mmap_mode="r")``): the operating system keeps one copy of
    the table's numeric columns in its page cache, shared by every worker, instead of
    one copy per worker. Trials only read the table (each fold's rows are taken into
    new arrays), so the values and the results are those of an in-memory copy."""
    import joblib

    return joblib.load(path, mmap_mode="r")


def run_trial_from_file(token: str, path: str, spec: dict) -> dict:
    """Run a trial in a pool worker, reading the sweep's table once per worker.

    The parent writes the :class:`TrialData` to ``path`` once per sweep
    (:func:`save_worker_data`); each worker maps it on its first trial of the
    sweep (:func:`load_worker_data`) and keeps it (one sweep's table at a time),
    so the table crosses to each worker once however many trials it runs, the
    workers share one copy of its numeric columns, and the worker pool can stay
    alive from one sweep to the next.
    """
    return run_trial(_worker_data(token, path), spec)


def _worker_data(token: str, path: str, light: str | None = None) -> TrialData:
    """This worker's :class:`TrialData` of the sweep ``token``: the table (``path``), or
    with ``light`` the sweep's table without its feature columns (for trials whose fold
    features come from the parent's files); each read once and kept while the sweep
    lasts, another sweep's dropped."""
    key = (token, "light") if light else token
    data = _WORKER_DATA.get(key)
    if data is None:
        for k in [k for k in _WORKER_DATA if (k[0] if isinstance(k, tuple) else k) != token]:
            del _WORKER_DATA[k]
        data = _WORKER_DATA[key] = load_worker_data(light or path)
    return data


def light_data(data: TrialData) -> TrialData:
    """``data`` without the feature columns (``X=None``): what a trial whose fold features
    are shared reads (its target rows, the target's description and classes)."""
    return TrialData(X=None, y=data.y, profile=data.profile, target=data.target,
                     token=data.token)


def run_trials_from_file(token: str, path: str, specs, light: str | None = None) -> list[dict]:
    """:func:`run_trials` in a pool worker (the table read as by :func:`run_trial_from_file`).

    ``light``: the file of :func:`light_data`, written by the parent when it shares the
    fold features; a task whose every trial has its features (``spec["features"]``,
    :func:`shared_features`) reads it instead of the table, so the worker never loads
    the table's columns nor builds a ColumnTransformer."""
    specs = list(specs)
    if not (light and all(s.get("features") for s in specs)):
        light = None
    try:
        return run_trials(_worker_data(token, path, light), specs)
    finally:
        _release_heap()


def _release_heap() -> None:
    """Hand the heap's free memory back to the operating system after a task (glibc's
    ``malloc_trim(0)``; nothing elsewhere): a trial's many mid-sized arrays, freed, would
    otherwise stay in this worker's resident memory under the next trial's peak
    (measured: +25 MB under a Ridge baseline that follows a network's trial on the
    200,000-row table)."""
    if not _TRIM:
        try:
            import ctypes
            import ctypes.util

            libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
            _TRIM.append(getattr(libc, "malloc_trim", None))
        except (OSError, AttributeError):
            _TRIM.append(None)
    if _TRIM[0] is not None:
        _TRIM[0](0)


#: glibc's malloc_trim, looked up once (None where there is none)
_TRIM: list = []
