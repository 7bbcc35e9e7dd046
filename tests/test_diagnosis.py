"""The diagnosis per configuration (workbench.sweep.diagnosis), without Qt.

Each constructed case runs through the project's real engine
(:class:`workbench.nets.engine.NetRegressor`, small and fast) and is diagnosed
as what it was built to be:

- a learning rate that diverges (plain SGD with a step of 2: the loss overflows);
- a logistic hidden layer whose weights were multiplied by 40 after the first
  epoch: its units sit on the flat ends (saturated, as the engine measures it);
- a relu output on a target near 30 whose output bias starts at -100: every
  prediction is 0, the head's lower bound (dead output);
- a learning rate of 1e-5: the training score stays below what scikit-learn's
  ``Ridge`` scores on unseen rows (underfit, the results document's rule
  recomputed with scikit-learn as the reference);
- a large network on 40 noisy rows: the held-out loss the engine records per
  epoch (``fit(..., held_out=...)``; checked against half the mean squared error
  computed by hand after every epoch of an SGD run without momentum continued one
  epoch at a time) rises while the training loss falls; and the train-test gap
  (from ``sklearn.metrics.r2_score``) when no curve is recorded; the same from the
  curves real sweep trials store (``run_trial`` on a 60-row noisy table);
- a normal fit: diagnosed as training normally.

Outside references for the rest: the remedies for dead units keep a gradient for
negative inputs (finite differences at x = -2; Maas et al. 2013 leaky_relu,
Clevert et al. 2016 elu, Dugas et al. 2001 softplus; relu's slope there is 0, the
dying-ReLU case of Lu et al. 2019); a straight-line loss brings exactly a tenth of
its fall in its last tenth of epochs and an exponential decay e^(-t/5) over 100
epochs brings e^(-18) of it (arithmetic on the curves' definitions).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from sklearn.linear_model import Ridge
from sklearn.metrics import r2_score
from sklearn.model_selection import KFold

from workbench.nets.activations import HEADS, HIDDEN
from workbench.nets.engine import NetRegressor
from workbench.sweep import diagnosis as dg
from workbench.sweep.diagnosis import (
    DEAD_REMEDIES,
    MOSTLY,
    WARN_SHARE,
    add_diagnoses,
    diagnose,
    health_hints,
    loss_kind,
)

FOLDS = 3
#: the ROPE of a unit-free score (workbench.sweep.bayes.default_rope), for the underfit rule
ROPE = 0.01


def _data(n=240, noise=0.1, seed=0, shift=0.0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((n, 5))
    y = X[:, 0] - 0.5 * X[:, 1] + 0.3 * X[:, 2] ** 2 + noise * rng.standard_normal(n) + shift
    return X, y


def _trial(est, X_tr, y_tr, X_te, y_te):
    """One trial as the sweep stores it (workbench.sweep.trials), from a fitted engine."""
    status = "diverged" if est.diverged_ else "done"
    t = {"status": status, "history": dict(est.history_), "health": dict(est.health_),
         "epochs": est.n_iter_, "train_score": None, "test_score": None}
    out = None
    if status == "done":
        p = est.predict(X_te)
        t["train_score"] = float(r2_score(y_tr, est.predict(X_tr)))
        t["test_score"] = float(r2_score(y_te, p))
        out = (y_te, p)
    return t, out


def _folds(X):
    return list(KFold(FOLDS, shuffle=True, random_state=0).split(X))


def _run(make, X, y, tweak=None, epochs=60):
    """Fit ``make(fold)`` on every fold; ``tweak(est)`` may change it after one epoch (the
    engine starts the output bias at the target's mean, so a start elsewhere is set by hand)."""
    trials, outputs = [], []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for k, (tr, te) in enumerate(_folds(X)):
            est = make(k)
            if tweak is not None:
                est.set_params(warm_start=True, max_iter=1)
                est.fit(X[tr], y[tr])
                tweak(est)
                est.set_params(max_iter=epochs)
            est.fit(X[tr], y[tr])
            t, out = _trial(est, X[tr], y[tr], X[te], y[te])
            if tweak is not None:  # the record starts where the tweaked network starts
                t["history"] = {k: v[1:] for k, v in t["history"].items()}
                t["epochs"] -= 1
            trials.append(t)
            if out is not None:
                outputs.append(out)
    return trials, outputs


def _underfit(trials, X, y) -> bool:
    """The results document's rule: mean training score below the linear baseline's mean
    test score by more than the ROPE (scikit-learn's Ridge as the baseline)."""
    ridge = [r2_score(y[te], Ridge().fit(X[tr], y[tr]).predict(X[te])) for tr, te in _folds(X)]
    train = np.mean([t["train_score"] for t in trials if t["train_score"] is not None])
    return bool(train < np.mean(ridge) - ROPE)


def _final_loss(trials):
    return float(np.median([t["history"]["loss"][-1] for t in trials]))


def _diagnose(trials, outputs, X, y, *, hidden="relu", head="identity", epochs=60,
              reference=None):
    return diagnose(trials, hidden=hidden, head=head, task="regression", epochs=epochs,
                    metric="r2", outputs=outputs, target_sd=float(np.std(y)),
                    underfit=_underfit(trials, X, y) if outputs else None,
                    reference_loss=reference)


@pytest.fixture(scope="module")
def normal():
    X, y = _data()
    trials, outputs = _run(lambda k: NetRegressor((16,), "relu", max_iter=60,
                                                   learning_rate_init=0.01, random_state=k,
                                                   dtype="float64"), X, y)
    return X, y, trials, outputs


# --------------------------------------------------------------------------- constructed cases


def test_a_normal_fit_trains_normally(normal):
    X, y, trials, outputs = normal
    assert min(t["test_score"] for t in trials) > 0.9  # it did learn the function
    d = _diagnose(trials, outputs, X, y, reference=_final_loss(trials))
    assert d["codes"] == ["normal"]
    assert d["text"] == "trains normally"
    assert d["findings"][0]["text"].startswith("trains normally")


def test_a_learning_rate_that_diverges(normal):
    X, y, *_ = normal
    trials, outputs = _run(lambda k: NetRegressor((16,), "relu", solver="sgd",
                                                   learning_rate_init=2.0, max_iter=60,
                                                   random_state=k, dtype="float64"), X, y)
    assert all(t["status"] == "diverged" for t in trials)
    d = _diagnose(trials, outputs, X, y)
    assert d["codes"][0] == "diverged"
    assert "diverged in 3 of 3 trials" in d["findings"][0]["text"]
    assert "smaller learning rate" in d["findings"][0]["text"]


def test_a_loss_that_blows_up_without_overflowing_is_diverged():
    curve = [1.0, 0.5, 0.2, 0.1, 0.3, 2.0, 5.0]  # ends 50x its lowest, above its start
    t = {"status": "done", "history": {"loss": curve}, "health": {}, "train_score": 0.1,
         "test_score": 0.0}
    assert diagnose([t], hidden="relu", head="identity", task="regression",
                    epochs=7)["codes"] == ["diverged"]
    # a loss near zero that wobbles by a factor of ten has not blown up
    wobble = [1.0, 0.1, 0.01, 1e-4, 1e-5, 1e-4]
    t["history"] = {"loss": wobble}
    assert "diverged" not in diagnose([t], hidden="relu", head="identity", task="regression",
                                      epochs=6)["codes"]


def test_a_logistic_layer_with_large_weights_saturates(normal):
    X, y, trials_n, _ = normal

    def blow(est):
        est.coefs_[0][...] *= 40.0
        est.intercepts_[0][...] *= 40.0

    trials, outputs = _run(lambda k: NetRegressor((16,), "logistic", max_iter=1,
                                                   random_state=k, dtype="float64"),
                           X, y, tweak=blow, epochs=40)
    assert all(t["health"]["saturated"][0] > MOSTLY for t in trials)
    d = _diagnose(trials, outputs, X, y, hidden="logistic", epochs=40,
                  reference=_final_loss(trials_n))
    assert "saturated_units" in d["codes"]
    sat = next(f for f in d["findings"] if f["code"] == "saturated_units")
    assert "flat ends of logistic" in sat["text"] and "mostly saturated" in sat["text"]


def test_a_relu_output_started_at_zero_on_a_far_from_zero_target_is_dead():
    X, y = _data(shift=30.0)  # every target is far above zero

    def bury(est):
        est.intercepts_[-1][...] = -100.0  # the output unit's input is negative for every row

    trials, outputs = _run(lambda k: NetRegressor((16,), "relu", output_activation="relu",
                                                   learning_rate_init=1e-12, max_iter=1,
                                                   random_state=k, dtype="float64"),
                           X, y, tweak=lambda est: (bury(est), est.set_params(
                               learning_rate_init=0.001)), epochs=30)
    assert all(np.all(p == 0.0) for _, p in outputs)
    d = _diagnose(trials, outputs, X, y, head="relu", epochs=30)
    assert d["codes"][0] == "dead_output"
    text = d["findings"][0]["text"]
    assert "relu output sits at its lower bound 0 for 100% of the test rows" in text
    assert "the target is there for 0%" in text
    # the same head on a target that is mostly zero predicts zeros rightly: not dead
    zeros = [(np.zeros(10), np.zeros(10))] * 3
    assert "dead_output" not in diagnose(trials, hidden="relu", head="relu", task="regression",
                                         epochs=30, outputs=zeros, target_sd=1.0)["codes"]


def test_a_tiny_learning_rate_underfits(normal):
    X, y, trials_n, _ = normal
    trials, outputs = _run(lambda k: NetRegressor((16,), "relu", max_iter=60,
                                                   learning_rate_init=1e-5, random_state=k,
                                                   dtype="float64"), X, y)
    assert _underfit(trials, X, y)
    d = _diagnose(trials, outputs, X, y, reference=_final_loss(trials_n))
    assert "underfit" in d["codes"] and "overfit" not in d["codes"]
    under = next(f for f in d["findings"] if f["code"] == "underfit")
    assert "more epochs or a higher learning rate" in under["text"]
    assert "linear baseline" in under["text"]


def test_a_loss_still_falling_at_the_last_epoch_is_underfit():
    t = {"status": "done", "history": {"loss": list(np.linspace(1.0, 0.5, 100))},
         "health": {}, "train_score": 0.5, "test_score": 0.45}
    d = diagnose([t], hidden="relu", head="identity", task="regression", epochs=100)
    assert d["codes"] == ["underfit"]
    assert "brought 10% of the whole fall" in d["findings"][0]["text"]
    # an exponential decay has flattened: its last tenth brings almost nothing
    t["history"] = {"loss": list(0.1 + np.exp(-np.arange(100) / 5.0))}
    assert diagnose([t], hidden="relu", head="identity", task="regression",
                    epochs=100)["codes"] == ["normal"]
    # the same straight line stopped before the budget is not "still falling"
    t["history"] = {"loss": list(np.linspace(1.0, 0.5, 100))}
    assert diagnose([t], hidden="relu", head="identity", task="regression",
                    epochs=200)["codes"] == ["normal"]


def _overfit_run():
    """A 64x64 network, plain SGD without momentum, on 40 noisy rows; the held-out loss of
    20 other rows measured after every epoch."""
    rng = np.random.default_rng(1)
    X = rng.standard_normal((60, 8))
    y = X[:, 0] + 2.0 * rng.standard_normal(60)
    X_tr, y_tr, X_te, y_te = X[:40], y[:40], X[40:], y[40:]
    est = NetRegressor((64, 64), "relu", solver="sgd", momentum=0.0, learning_rate_init=0.1,
                       alpha=0.0, batch_size=40, max_iter=1, warm_start=True, random_state=0,
                       dtype="float64")
    held = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(200):
            est.fit(X_tr, y_tr, held_out=(X_te, y_te))  # the engine records test_loss
            held.append(0.5 * float(np.mean((y_te - est.predict(X_te)) ** 2)))
    t, out = _trial(est, X_tr, y_tr, X_te, y_te)
    # the recorded curve is half the mean squared error on the held-out rows (scikit-learn's
    # MLP squared loss), computed here by hand after every epoch
    np.testing.assert_allclose(t["history"]["test_loss"], held, rtol=1e-9)
    return t, out, held


def test_a_huge_network_on_a_small_noisy_table_overfits():
    t_curve, out, held = _overfit_run()
    t = dict(t_curve, history={k: v for k, v in t_curve["history"].items() if k != "test_loss"})
    assert t["train_score"] > 0.9 and t["test_score"] < 0.3
    # from the held-out curve the engine recorded: its minimum comes early, then it rises
    d = diagnose([t_curve], hidden="relu", head="identity", task="regression", epochs=200,
                 metric="r2", outputs=[out], target_sd=1.0)
    assert d["codes"] == ["overfit"]
    f = d["findings"][0]
    assert f["evidence"] == "test_loss"
    low = int(np.argmin(held)) + 1
    assert f"lowest at about epoch {low}" in f["text"]
    assert f"{(held[-1] - min(held)) / min(held):.0%} above" in f["text"]
    # without a held-out curve: the train-test gap, and the sentence says so
    d = diagnose([t], hidden="relu", head="identity", task="regression", epochs=200,
                 metric="r2", outputs=[out], target_sd=1.0)
    assert d["codes"] == ["overfit"] and d["findings"][0]["evidence"] == "gap"
    assert "no held-out curve per epoch was recorded" in d["findings"][0]["text"]
    assert f"{t['train_score'] - t['test_score']:.3f} above" in d["findings"][0]["text"]
    # early stopping's validation score, when that is what was recorded
    val = [1.0 - v for v in held]  # a score: greater is better
    t_val = dict(t, history=dict(t["history"], val_score=val))
    d = diagnose([t_val], hidden="relu", head="identity", task="regression", epochs=200,
                 metric="r2")
    assert d["codes"] == ["overfit"] and d["findings"][0]["evidence"] == "val_score"


def test_the_curves_a_sweep_stores_show_overfitting(tmp_path):
    """End to end: the same kind of table (60 noisy rows, 64x64 relu, Adam, no L2) run as the
    sweep runs its trials (workbench.sweep.trials.run_trial, three folds): the stored
    ``history["test_loss"]`` of the real trials gives the over-fitting finding."""
    import pandas as pd

    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import load_data
    from workbench.sweep.trials import run_trial

    rng = np.random.default_rng(1)
    X = rng.standard_normal((60, 8))
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(8)])
    frame["target"] = X[:, 0] + 2.0 * rng.standard_normal(60)
    frame.to_csv(tmp_path / "noisy.csv", index=False)
    plan = build_plan(tmp_path / "noisy.csv", "target", hidden="relu", output="identity",
                      layers=["64,64"], learning_rates=["0.01"], alphas=["0"], folds=3,
                      repeats=1, epochs=200)
    data, _ = load_data(plan)
    cfg = plan.configurations()[0].to_dict()
    trials = []
    for fold, (tr, te) in sorted(plan.fold_indices(data.y).items()):
        trials.append(run_trial(data, {
            "config": cfg, "repeat": fold[0], "fold": fold[1], "train": tr, "test": te,
            "random_state": plan.model_seed(*fold), "task": plan.task, "metric": plan.metric,
            "epochs": plan.epochs, "early_stopping": False, "batch_size": plan.batch_size,
            "dtype": plan.dtype}))
    for t in trials:
        assert t["status"] == "done"
        assert len(t["history"]["test_loss"]) == len(t["history"]["loss"]) == t["epochs"]
    d = diagnose(trials, hidden="relu", head="identity", task="regression", epochs=200,
                 metric="r2")
    assert d["codes"] == ["overfit"]
    assert d["findings"][0]["evidence"] == "test_loss"
    rises = [(max(h[-1:]) - min(h)) / min(h) for h in (t["history"]["test_loss"]
                                                        for t in trials)]
    assert f"{float(np.median(rises)):.0%} above" in d["findings"][0]["text"]


def test_an_error_score_gap_is_judged_against_the_score_size():
    t = {"status": "done", "history": {"loss": [1.0, 0.5, 0.4]}, "health": {},
         "train_score": -10.0, "test_score": -14.0}  # gap 4 = 29% of 14
    d = diagnose([t], hidden="relu", head="identity", task="regression", epochs=50,
                 metric="neg_mean_squared_error")
    assert d["codes"] == ["overfit"]
    t["test_score"] = -12.0  # gap 2 = 17%: not large
    assert diagnose([t], hidden="relu", head="identity", task="regression", epochs=50,
                    metric="neg_mean_squared_error")["codes"] == ["normal"]


def test_dead_units_from_a_tenth_of_a_layer_and_unstable_folds():
    t = {"status": "done", "history": {"loss": [1.0, 0.5, 0.4]}, "train_score": 0.5,
         "test_score": 0.5, "health": {"dead": [WARN_SHARE, 0.09], "saturated": [0.0, 0.0]}}
    d = diagnose([t], hidden="relu", head="identity", task="regression", epochs=50)
    assert d["codes"] == ["dead_units"]
    assert "layer 1: 10%" in d["findings"][0]["text"] and "layer 2" not in d["findings"][0]["text"]
    assert d["findings"][0]["layers"] == [{"layer": 1, "share": WARN_SHARE}]
    assert d["findings"][0]["label"] == dg.LABELS["dead_units"] == d["text"]
    d = diagnose([t], hidden="relu", head="identity", task="regression", epochs=50,
                 fold_sd=0.05, typical_sd=0.02, rope=0.01)
    assert d["codes"] == ["dead_units", "unstable"]
    assert "2.5 times the sweep's typical" in d["findings"][1]["text"]
    # within the ROPE it is not called unstable, however it compares
    assert "unstable" not in diagnose([t], hidden="relu", head="identity", task="regression",
                                      epochs=50, fold_sd=0.005, typical_sd=0.001,
                                      rope=0.01)["codes"]


def test_a_high_loss_that_stopped_early_and_a_plateau():
    stalled = {"status": "done", "history": {"loss": [2.0, 1.2, 1.0] + [1.0] * 12},
               "health": {}, "train_score": 0.2, "test_score": 0.2}
    d = diagnose([stalled], hidden="tanh", head="identity", task="regression", epochs=200,
                 reference_loss=0.25)
    assert d["codes"] == ["stopped_early"]
    assert "after about 15 of 200 epochs" in d["findings"][0]["text"]
    assert "4.0 times the lowest comparable" in d["findings"][0]["text"]
    flat = dict(stalled, history={"loss": [1.0, 0.98, 0.97] + [0.97] * 12})
    assert diagnose([flat], hidden="tanh", head="identity", task="regression", epochs=200,
                    reference_loss=0.25)["codes"] == ["plateau"]
    # the best and its practical equivalents score as well as anything on held-out rows: a
    # lower training loss elsewhere (perhaps over-fitting) does not make theirs high
    for decision in ("best", "equivalent"):
        for case in (stalled, flat):
            assert diagnose([case], hidden="tanh", head="identity", task="regression",
                            epochs=200, reference_loss=0.25,
                            decision=decision)["codes"] == ["normal"]
    assert diagnose([stalled], hidden="tanh", head="identity", task="regression", epochs=200,
                    reference_loss=0.25, decision="worse")["codes"] == ["stopped_early"]
    # without anything to call the loss high, neither is said
    assert diagnose([flat], hidden="tanh", head="identity", task="regression",
                    epochs=200)["codes"] == ["normal"]


def test_every_configuration_gets_a_line_even_without_trials():
    d = diagnose([], hidden="relu", head="identity", task="regression", epochs=10)
    assert d["codes"] == ["pending"] and d["text"] == dg.LABELS["pending"]
    failed = [{"status": "failed", "error": "ValueError: boom", "history": {}, "health": {}}]
    d = diagnose(failed, hidden="relu", head="identity", task="regression", epochs=10)
    assert d["codes"] == ["failed"] and "boom" in d["findings"][0]["text"]


def test_a_classifier_with_constant_probabilities():
    proba = np.tile([0.3, 0.7], (20, 1)) + 1e-4 * np.arange(20)[:, None]
    t = {"status": "done", "history": {"loss": [0.7, 0.6, 0.6]}, "health": {},
         "train_score": 0.5, "test_score": 0.5}
    d = diagnose([t], hidden="relu", head="logistic", task="classification", epochs=50,
                 outputs=[(np.zeros(20), proba)])
    assert d["codes"] == ["constant_output"]
    proba[:10] = [0.9, 0.1]
    assert diagnose([t], hidden="relu", head="logistic", task="classification", epochs=50,
                    outputs=[(np.zeros(20), proba)])["codes"] == ["normal"]


# --------------------------------------------------------------------------- loss kinds


def test_loss_kinds_follow_the_registry_and_the_target_scaling():
    from workbench.data.preprocessing import target_scaling

    kinds = {h: loss_kind("regression", h)[0] for h in ("identity", "relu", "softplus", "exp",
                                                        "logistic")}
    assert kinds["identity"] == kinds["relu"] == kinds["softplus"]  # one loss, sd units
    assert len({kinds["identity"], kinds["exp"], kinds["logistic"]}) == 3
    for h in kinds:
        assert kinds[h].split(":")[0] == HEADS[("regression", h)].loss
    assert target_scaling(type("T", (), {"interval": None})(), "logistic").mode == "interval"
    assert loss_kind("classification", "softmax")[0] == loss_kind("classification",
                                                                  "logistic")[0]


# --------------------------------------------------------------------------- the hints


def test_health_hints_name_the_layer_in_plain_words():
    hints = health_hints("relu / identity [8,8]", "relu",
                         {"dead": [0.9, 0.1], "saturated": [0.0, 0.0]})
    assert len(hints) == 1 and "layer 1 is mostly dead" in hints[0] and "90%" in hints[0]
    assert hints[0].startswith("relu / identity [8,8]: ")
    hints = health_hints("tanh", "tanh", {"dead": [0.0], "saturated": [MOSTLY + 0.01]})
    assert len(hints) == 1 and "mostly saturated" in hints[0]
    assert "flat ends of tanh" in hints[0]
    assert health_hints("x", "relu", {"dead": [MOSTLY], "saturated": []}) == []


def test_each_layer_gets_its_own_hint_in_order_and_gaps_are_skipped():
    health = {"dead": [0.2, 0.7, None, 0.95], "saturated": [math.nan, 0.6],
              "grad_norm": [1.0, 2.0]}
    hints = health_hints("c", "gelu", health)
    assert [h.split(" is mostly")[0] for h in hints] == ["c: layer 2", "c: layer 4", "c: layer 2"]
    assert "70%" in hints[0] and "95%" in hints[1] and "60%" in hints[2]
    assert health_hints("c", "gelu", {}) == []


def test_the_threshold_is_a_strict_majority():
    assert MOSTLY == 0.5  # common practice: more than half the layer
    assert health_hints("c", "relu", {"dead": [np.nextafter(MOSTLY, 1.0)]}) != []
    assert health_hints("c", "relu", {"dead": [MOSTLY]}) == []


@pytest.mark.parametrize("name", DEAD_REMEDIES)
def test_remedies_for_dead_units_exist_and_keep_a_gradient_for_negative_inputs(name):
    assert name in HIDDEN
    act = HIDDEN[name]
    x, h = np.array([-2.0]), 1e-6
    slope = (act.forward(x + h) - act.forward(x - h)) / (2 * h)
    assert float(slope[0]) > 1e-3
    relu = HIDDEN["relu"]
    assert float(((relu.forward(x + h) - relu.forward(x - h)) / (2 * h))[0]) == 0.0
    assert name in health_hints("c", "relu", {"dead": [1.0]})[0]


# --------------------------------------------------------------------------- a stored sweep


def test_a_stored_sweep_diagnoses_each_configuration_where_it_belongs(tmp_path):
    """Three learning rates on one table through the real runner and store: the results
    document diagnoses the diverging one, the tiny one and the normal one each as such."""
    import pandas as pd

    from workbench.sweep.plan import build_plan
    from workbench.sweep.results import sweep_results
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    X, y = _data(n=180)
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(5)]).assign(target=y)
    frame.to_csv(tmp_path / "t.csv", index=False)
    plan = build_plan(tmp_path / "t.csv", "target", hidden="relu", output="identity",
                      layers=["16"], learning_rates=["0.00001", "0.01", "8"], folds=3,
                      repeats=1, epochs=60)
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        doc = sweep_results(st, out.sweep_id)
        by_lr = {c["learning_rate"]: c for c in doc["configurations"]}
        assert by_lr[0.01]["diagnosis"]["codes"] == ["normal"]
        assert "underfit" in by_lr[1e-05]["diagnosis"]["codes"]
        assert by_lr[1e-05]["underfit"] is True  # the flag the diagnosis read
        assert by_lr[8.0]["diagnosis"]["codes"][0] == "diverged"
        # the same function on the same store gives the same words (one place)
        again = {c["index"]: c.pop("diagnosis") for c in doc["configurations"]}
        add_diagnoses(doc, st)
        assert {c["index"]: c["diagnosis"] for c in doc["configurations"]} == again
        # a plan that does not name its epoch budget: the most epochs any trial ran
        doc["plan"].pop("epochs")
        add_diagnoses(doc, st)
        assert {c["index"]: c["diagnosis"] for c in doc["configurations"]} == again
