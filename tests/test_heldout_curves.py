"""Held-out curves: every NumPy-engine trial records, per epoch, the test fold's loss and score.

External references used here:

- scikit-learn's scorers (``sklearn.metrics.get_scorer``) applied to the fitted
  model step, exactly as the trial scores its test fold: the last point of
  ``history["test_score"]`` equals the stored score, and the per-epoch formulas
  (:func:`workbench.sweep.trials._regression_score` / ``_classification_score``)
  equal the scorer on the same model for every metric the sweep offers;
- scikit-learn's ``log_loss`` and ``mean_squared_error`` (halved: the squared-error
  loss of scikit-learn's MLP, ``sklearn.neural_network._base.squared_loss``): the last
  point of ``history["test_loss"]`` is the head's loss on the test rows;
- scikit-learn's ``roc_auc_score`` on data with ties (the Mann-Whitney form counts a
  tie half, as the trapezoid under the ROC curve does).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from sklearn.metrics import get_scorer, log_loss, mean_squared_error, roc_auc_score

from workbench.data.preprocessing import build_pipeline
from workbench.sweep import trials as T
from workbench.sweep.plan import build_plan
from workbench.sweep.runner import load_data

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _trial(table, target, config=0, fold=0, **options):
    options.setdefault("layers", ["8"])
    options.setdefault("epochs", 12)
    options.setdefault("folds", 3)
    options.setdefault("repeats", 1)
    plan = build_plan(SAMPLES / table, target, **options)
    data, _ = load_data(plan)
    tr, te = plan.fold_indices(data.y)[(0, fold)]
    c = plan.configurations()[config]
    spec = {"config": c.to_dict(), "repeat": 0, "fold": fold, "train": tr.astype(np.int32),
            "test": te.astype(np.int32), "random_state": plan.model_seed(0, fold),
            "task": plan.task, "metric": plan.metric, "epochs": plan.epochs,
            "early_stopping": plan.early_stopping, "batch_size": plan.batch_size,
            "dtype": plan.dtype}
    return data, spec


def _fitted(data, spec):
    """The trial's model step fitted as the trial fits it, with its test features."""
    cfg = spec["config"]
    pipe = build_pipeline(data.profile, data.target, T.make_estimator(spec), cfg["head"])
    prep, model = pipe.named_steps["prep"], pipe.named_steps["model"]
    train, test = np.asarray(spec["train"]), np.asarray(spec["test"])
    X_tr, X_te = T._fold_features(data, spec, prep, train, test)
    y = np.asarray(data.y)
    y_held, score = T._held_out_watch(spec, model, y[train], y[test])
    model.fit(X_tr, y[train], held_out=(X_te, y_held), held_out_score=score)
    return model, X_te, y[test], y_held


def _check_curves(res):
    h = res["history"]
    assert res["status"] == "done"
    assert len(h["test_loss"]) == len(h["test_score"]) == len(h["loss"]) == res["epochs"]
    assert all(v is not None and math.isfinite(v) for v in h["test_loss"] + h["test_score"])
    assert h["test_score"][-1] == pytest.approx(res["test_score"], abs=1e-9)
    return h


def test_classification_curves_end_at_the_stored_score():
    """kiln (binary, ROC AUC by default): one point per epoch, the last the stored score."""
    data, spec = _trial("kiln_batches.csv", "passes_inspection", epochs=15)
    h = _check_curves(T.run_trial(data, spec))
    assert h["test_score"][0] != h["test_score"][-1]  # it moves with training
    assert h["test_loss"][-1] < h["test_loss"][0]


def test_regression_curves_end_at_the_stored_score():
    """seed_germination (bounded target, logistic head on the target mapped to [0, 1], R^2)."""
    data, spec = _trial("seed_germination.csv", "germinated_share", epochs=15)
    assert spec["metric"] == "r2" and spec["config"]["head"] == "logistic"
    h = _check_curves(T.run_trial(data, spec))
    assert h["test_loss"][-1] < h["test_loss"][0]


def test_curves_with_early_stopping_end_at_the_kept_parameters():
    """Early stopping keeps the best validation epoch's parameters: the last point is of
    those (the ones the stored score is computed from)."""
    data, spec = _trial("coffee_roast.csv", "roast_grade", epochs=40, early_stopping=True,
                        learning_rates=["0.05"])
    res = T.run_trial(data, spec)
    _check_curves(res)
    assert len(res["history"]["val_score"]) == res["epochs"]


def test_a_diverged_trial_keeps_its_curves_up_to_the_blow_up():
    data, spec = _trial("trap_catches.csv", "moths_caught", epochs=30, learning_rates=["1e3"])
    res = T.run_trial(data, spec)
    h = res["history"]
    assert res["status"] == T.DIVERGED and res["test_score"] is None
    assert len(h["test_loss"]) == len(h["loss"]) == res["epochs"]


def test_curves_change_nothing_that_is_stored():
    """Display only: the same scores, epochs, losses and predictions without them."""
    data, spec = _trial("kiln_batches.csv", "passes_inspection", epochs=10)
    on, off = T.run_trial(data, spec), T.run_trial(data, dict(spec, curves=False))
    assert off["history"]["test_loss"] == off["history"]["test_score"] == []
    for key in ("test_score", "train_score", "epochs"):
        assert on[key] == off[key]
    assert on["history"]["loss"] == off["history"]["loss"]
    np.testing.assert_array_equal(on["predictions"], off["predictions"])


def test_test_loss_is_the_heads_loss_on_the_test_rows():
    """Classifier: scikit-learn's log_loss of predict_proba; regressor (identity head):
    half the mean squared error on the target as scaled for the network."""
    data, spec = _trial("kiln_batches.csv", "passes_inspection")
    model, X_te, y_te, _ = _fitted(data, spec)
    ref = log_loss(y_te, model.predict_proba(X_te), labels=model.classes_)
    assert model.history_["test_loss"][-1] == pytest.approx(ref, rel=1e-5)
    data, spec = _trial("seed_germination.csv", "germinated_share", output="identity")
    model, X_te, y_te, y_net = _fitted(data, spec)
    ref = 0.5 * mean_squared_error(np.ravel(y_net), model.regressor_.predict(X_te))
    assert model.regressor_.history_["test_loss"][-1] == pytest.approx(ref, rel=1e-5)
    # the held-out target is the scaled one: in user units the loss would differ
    assert ref != pytest.approx(0.5 * mean_squared_error(y_te, model.regressor_.predict(X_te)),
                                rel=1e-2)


CASES = [
    ("kiln_batches.csv", "passes_inspection", "accuracy", {}),
    ("kiln_batches.csv", "passes_inspection", "balanced_accuracy", {}),
    ("kiln_batches.csv", "passes_inspection", "roc_auc", {}),
    ("kiln_batches.csv", "passes_inspection", "neg_log_loss", {}),
    ("coffee_roast.csv", "roast_grade", "accuracy", {}),
    ("coffee_roast.csv", "roast_grade", "balanced_accuracy", {}),
    ("coffee_roast.csv", "roast_grade", "neg_log_loss", {}),
    ("kiln_batches.csv", "passes_inspection", "accuracy", {"output": "softmax"}),
    ("seed_germination.csv", "germinated_share", "r2", {}),
    ("seed_germination.csv", "germinated_share", "neg_root_mean_squared_error", {}),
    ("seed_germination.csv", "germinated_share", "neg_mean_absolute_error", {}),
    ("trap_catches.csv", "moths_caught", "neg_mean_poisson_deviance", {"output": "exp"}),
]


@pytest.mark.parametrize("table,target,metric,extra", CASES)
def test_per_epoch_formula_equals_the_scorer(table, target, metric, extra):
    """Every metric the sweep offers: the per-epoch value of the final parameters equals
    ``get_scorer(metric)(model, X_test, y_test)`` -- the stored score's computation."""
    data, spec = _trial(table, target, metric=metric, epochs=6, **extra)
    model, X_te, y_te, _ = _fitted(data, spec)
    net = getattr(model, "regressor_", model)
    stored = get_scorer(metric)(model, X_te, y_te)
    assert net.history_["test_score"][-1] == pytest.approx(stored, abs=1e-9)
    assert len(net.history_["test_score"]) == net.n_iter_


def test_auc_counts_ties_as_scikit_learn_does():
    rng = np.random.default_rng(0)
    y = rng.choice(["no", "yes"], 300)
    p = np.round(rng.random(300), 1).astype(np.float32)  # many ties
    f = T._classification_score("roc_auc", np.array(["no", "yes"]), y)
    proba = np.column_stack([1 - p, p])
    assert f(proba) == pytest.approx(roc_auc_score(y == "yes", p), abs=1e-12)


def test_estimator_held_out_is_display_only():
    """NetClassifier.fit(held_out=...) gives the same parameters as a plain fit; the
    callable receives what predict_proba returns."""
    from sklearn.datasets import load_iris

    from workbench.nets.engine import NetClassifier

    X, y = load_iris(return_X_y=True)
    seen = []
    kw = dict(hidden_layer_sizes=(5,), max_iter=4, random_state=0)
    a = NetClassifier(**kw).fit(X[::2], y[::2])
    b = NetClassifier(**kw).fit(X[::2], y[::2], held_out=(X[1::2], y[1::2]),
                                held_out_score=lambda p: seen.append(p) or 0.0)
    for wa, wb in zip(a.coefs_, b.coefs_):
        np.testing.assert_array_equal(wa, wb)
    np.testing.assert_array_equal(seen[-1], b.predict_proba(X[1::2]))
    assert len(seen) == len(b.history_["test_loss"]) == 4
    with pytest.raises(ValueError, match="held_out_score needs"):
        NetClassifier(**kw).fit(X, y, held_out_score=len)


@pytest.mark.parametrize("table,target,extra", [
    ("kiln_batches.csv", "passes_inspection", {}),
    ("coffee_roast.csv", "roast_grade", {}),
    ("trap_catches.csv", "moths_caught", {"output": "exp"}),
    # stops at epoch 23, its best validation epoch was the 12th (restored at the end)
    ("kiln_batches.csv", "passes_inspection", {"early_stopping": True, "epochs": 60,
                                               "learning_rates": ["0.01"]}),
])
def test_scikit_learn_engine_trials_record_the_same_curves(table, target, extra):
    """scikit-learn's MLP (--engine sklearn): one point per epoch, the last the stored
    score, and nothing else changes (the same scores and predictions without curves)."""
    extra = {"epochs": 12, **extra}
    data, spec = _trial(table, target, engine="sklearn", hidden="relu", **extra)
    on, off = T.run_trial(data, spec), T.run_trial(data, dict(spec, curves=False))
    _check_curves(on)
    assert off["history"]["test_loss"] == []
    assert (on["test_score"], on["train_score"], on["epochs"]) == (
        off["test_score"], off["train_score"], off["epochs"])
    assert on["history"]["loss"] == off["history"]["loss"]
    np.testing.assert_array_equal(on["predictions"], off["predictions"])


def test_scikit_learn_engine_test_loss_is_its_own_loss():
    """The last held-out loss of scikit-learn's MLP: sklearn.metrics.log_loss of its
    predict_proba (classifier); half of sklearn.metrics.mean_poisson_deviance on the scaled
    target (the Poisson MLP's loss)."""
    from sklearn.metrics import mean_poisson_deviance

    data, spec = _trial("kiln_batches.csv", "passes_inspection", engine="sklearn",
                        hidden="relu")
    model, X_te, y_te, _ = _fitted_sklearn(data, spec)
    ref = log_loss(y_te, model.predict_proba(X_te))
    assert model.history_["test_loss"][-1] == pytest.approx(ref, rel=1e-9)
    data, spec = _trial("trap_catches.csv", "moths_caught", engine="sklearn", hidden="relu",
                        output="exp")
    model, X_te, y_te, y_net = _fitted_sklearn(data, spec)
    mlp = model.regressor_
    ref = 0.5 * mean_poisson_deviance(np.ravel(y_net), mlp.predict(X_te))
    assert mlp.history_["test_loss"][-1] == pytest.approx(ref, rel=1e-9)


def _fitted_sklearn(data, spec):
    cfg = spec["config"]
    pipe = build_pipeline(data.profile, data.target, T.make_estimator(spec), cfg["head"])
    prep = pipe.named_steps["prep"]
    model = T._watch_sklearn(pipe)
    train, test = np.asarray(spec["train"]), np.asarray(spec["test"])
    X_tr, X_te = T._fold_features(data, spec, prep, train, test)
    y = np.asarray(data.y)
    y_held, score = T._held_out_watch(spec, model, y[train], y[test])
    model.fit(X_tr, y[train], held_out=(X_te, y_held), held_out_score=score)
    return model, X_te, y[test], y_held
