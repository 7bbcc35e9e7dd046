"""Calibration and residuals from stored out-of-fold predictions (workbench.sweep.calibration).

Outside references: ``sklearn.calibration.calibration_curve`` (uniform strategy),
``sklearn.metrics.brier_score_loss`` and ``sklearn.metrics.log_loss`` for the
classifiers (scikit-learn's bundled ``load_breast_cancer`` and ``load_wine``);
``sklearn.metrics.mean_squared_error`` / ``mean_absolute_error`` and NumPy's
percentiles for the regressors (``load_diabetes``). The stored sweeps' summaries
are recomputed from each trial's own stored predictions
(:meth:`Store.trial_predictions`, a second path to the same numbers), so a
prediction placed in the wrong configuration, row or class column changes them.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.calibration import calibration_curve
from sklearn.datasets import load_breast_cancer, load_diabetes, load_wine
from sklearn.metrics import brier_score_loss, log_loss, mean_absolute_error, mean_squared_error

from workbench.sweep import calibration as cal
from workbench.sweep.plan import build_plan
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store

#: float32 probabilities do not sum to one exactly; scikit-learn says so, and that is expected
pytestmark = pytest.mark.filterwarnings("ignore:The y_prob values do not sum to one")


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_reliability_curve_is_scikit_learns_uniform_calibration_curve(seed):
    rng = np.random.default_rng(seed)
    p = rng.beta(0.7, 0.9, 500)
    p[:7] = [0.0, 0.1, 0.2, 0.5, 0.9, 1.0, 0.3]  # edges fall where scikit-learn puts them
    y = (rng.random(500) < p ** 1.3).astype(int)
    ref_obs, ref_pred = calibration_curve(y, p, n_bins=cal.N_BINS, strategy="uniform")
    pred, obs, counts = cal.reliability_curve(y, p)
    np.testing.assert_allclose(pred, ref_pred, rtol=1e-12)
    np.testing.assert_allclose(obs, ref_obs, rtol=1e-12)
    assert counts.sum() == 500


@pytest.mark.parametrize("k", [2, 3, 5])
def test_brier_and_log_loss_are_scikit_learns(k):
    rng = np.random.default_rng(k)
    proba = rng.dirichlet(np.ones(k), 300).astype(np.float32)  # stored as float32
    codes = rng.integers(0, k, 300)
    codes[:k] = np.arange(k)
    assert cal.brier_score(codes, proba) == pytest.approx(
        brier_score_loss(codes, proba.astype(np.float64) if k > 2 else proba[:, 1],
                         labels=list(range(k)) if k > 2 else None), rel=1e-6)
    p64 = proba.astype(np.float64)
    p64 /= p64.sum(axis=1, keepdims=True)
    assert cal.log_loss(codes, proba) == pytest.approx(
        log_loss(codes, p64, labels=list(range(k))), rel=1e-9)
    # a probability of exactly 0 for the true class is clipped, as scikit-learn clips
    proba[0] = 0.0
    proba[0, (codes[0] + 1) % k] = 1.0
    p64 = proba.astype(np.float64)
    assert cal.log_loss(codes, proba) == pytest.approx(
        log_loss(codes, p64, labels=list(range(k))), rel=1e-9)


def test_multiclass_reliability_is_the_top_label_confidence():
    rng = np.random.default_rng(0)
    proba = rng.dirichlet(np.ones(3), 400)
    codes = rng.integers(0, 3, 400)
    s = cal.classification_summary(codes, proba, classes=["a", "b", "c"])
    top = proba.argmax(axis=1)
    ref_obs, ref_pred = calibration_curve((top == codes).astype(int), proba.max(axis=1),
                                          n_bins=cal.N_BINS)
    assert s["event"] == "top_label"
    np.testing.assert_allclose(s["reliability"]["observed"], ref_obs, rtol=1e-12)
    np.testing.assert_allclose(s["reliability"]["predicted"], ref_pred, rtol=1e-12)
    two = cal.classification_summary(codes % 2, np.c_[1 - proba[:, 0], proba[:, 0]],
                                     classes=["no", "yes"])
    assert two["event"] == "positive" and "class yes" in two["event_words"]


def test_regression_summary_is_numpys_and_scikit_learns():
    rng = np.random.default_rng(3)
    actual = rng.gamma(2.0, 3.0, 1000)
    pred = actual * 0.8 + rng.normal(0, 1, 1000)
    s = cal.regression_summary(actual, pred)
    assert s["rmse"] == pytest.approx(np.sqrt(mean_squared_error(actual, pred)), rel=1e-12)
    assert s["mae"] == pytest.approx(mean_absolute_error(actual, pred), rel=1e-12)
    assert s["bias"] == pytest.approx(np.mean(actual - pred), rel=1e-12)
    assert sum(s["bins"]["count"]) == 1000 and len(s["bins"]["count"]) == cal.N_BINS
    order = np.argsort(pred, kind="stable")
    first = order[:100]
    assert s["bins"]["predicted"][0] == pytest.approx(pred[first].mean(), rel=1e-12)
    assert s["bins"]["actual"][0] == pytest.approx(actual[first].mean(), rel=1e-12)
    resid = actual[first] - pred[first]
    assert s["bins"]["residual_low"][0] == pytest.approx(np.percentile(resid, 10), rel=1e-12)
    assert s["bins"]["residual_high"][0] == pytest.approx(np.percentile(resid, 90), rel=1e-12)
    assert np.all(np.diff(s["bins"]["predicted"]) > 0)


# --------------------------------------------------------------------------- stored sweeps


def _sweep(tmp_path_factory, frame, name, **options):
    d = tmp_path_factory.mktemp(name)
    frame.to_csv(d / f"{name}.csv", index=False)
    plan = build_plan(d / f"{name}.csv", "target", layers=["4"], folds=3, repeats=2,
                      epochs=8, learning_rates=["0.01"], **options)
    st = Store(d / "s.sqlite")
    out = run_sweep(plan, store=st, backend="inline")
    assert out.state == "finished"
    return st, out.sweep_id


def _pooled(st, sid, index):
    """Every stored trial's own predictions and rows, pooled (the second path)."""
    rows_info = st.sweep_rows(sid)
    ys, ps = [], []
    for t in st.trials(sid, with_history=False):
        if t["config_index"] != index:
            continue
        rows, vals = st.trial_predictions(sid, index, t["repeat"], t["fold"])
        ys.append(rows_info["target"][rows])
        ps.append(np.asarray(vals, np.float64))
    return np.concatenate(ys), np.concatenate(ps)


@pytest.mark.parametrize("loader,options", [
    (load_breast_cancer, {"hidden": "relu,tanh", "metric": "roc_auc"}),
    (load_wine, {"hidden": "relu,tanh"}),
])
def test_a_stored_classifiers_calibration_is_recomputed_from_its_trials(tmp_path_factory,
                                                                        loader, options):
    st, sid = _sweep(tmp_path_factory, loader(as_frame=True).frame, loader.__name__, **options)
    with st:
        doc = sweep_results(st, sid, n_boot=50)
        assert len(doc["configurations"]) == 2
        for c in doc["configurations"]:
            y, p = _pooled(st, sid, c["index"])
            s = c["calibration"]
            assert s["kind"] == "classification" and s["rows"] == len(y) == 2 * len(
                st.sweep_rows(sid)["target"])
            k = p.shape[1]
            ref_brier = brier_score_loss(y, p[:, 1]) if k == 2 else brier_score_loss(
                y, p, labels=list(range(k)))
            assert s["brier"] == pytest.approx(ref_brier, rel=1e-6)
            assert s["log_loss"] == pytest.approx(
                log_loss(y, p / p.sum(axis=1, keepdims=True), labels=list(range(k))), rel=1e-6)
            event = (y == 1) if k == 2 else (p.argmax(axis=1) == y)
            conf = p[:, 1] if k == 2 else p.max(axis=1)
            ref_obs, ref_pred = calibration_curve(event.astype(int), conf, n_bins=cal.N_BINS)
            np.testing.assert_allclose(s["reliability"]["observed"], ref_obs, rtol=1e-9)
            np.testing.assert_allclose(s["reliability"]["predicted"], ref_pred, rtol=1e-9)
        # the window's call gives the same summary for a chosen configuration
        last = doc["configurations"][-1]
        got = cal.points(st, sid, [last["index"]])
        assert got["task"] == "classification"
        assert got["configurations"][last["index"]]["summary"] == last["calibration"]


def test_a_stored_regressors_residuals_are_recomputed_from_its_trials(tmp_path_factory):
    st, sid = _sweep(tmp_path_factory, load_diabetes(as_frame=True).frame, "diabetes",
                     hidden="relu,gelu", output="identity")
    with st:
        doc = sweep_results(st, sid, n_boot=50)
        for c in doc["configurations"]:
            y, p = _pooled(st, sid, c["index"])
            s = c["calibration"]
            assert s["kind"] == "regression"
            assert s["rmse"] == pytest.approx(np.sqrt(mean_squared_error(y, p)), rel=1e-9)
            assert s["mae"] == pytest.approx(mean_absolute_error(y, p), rel=1e-9)
            assert s["bias"] == pytest.approx(float(np.mean(y - p)), rel=1e-6, abs=1e-9)
        indices = [c["index"] for c in doc["configurations"]]
        got = cal.points(st, sid, indices, max_points=100)
        assert got["task"] == "regression"
        rows = st.sweep_rows(sid)
        oof = st.out_of_fold(sid, configurations=indices)
        for j, i in enumerate(indices):
            g = got["configurations"][i]
            assert len(g["actual"]) == len(g["predicted"]) == 100
            # every point is a row's first-repeat prediction beside that row's target
            first = oof.predictions[0][:, j].astype(float)
            for a, q in zip(g["actual"], g["predicted"]):
                at = np.flatnonzero(first == q)
                assert len(at) and a in rows["target"][at]


def test_a_sweep_without_stored_predictions_has_no_calibration():
    class Old:
        def out_of_fold(self, sweep_id, configurations=None):
            return None

    assert cal.summaries(Old(), "x", [0, 1]) == {0: None, 1: None}
    assert cal.points(Old(), "x", [3])["configurations"] == {3: None}
    assert "no out-of-fold" in cal.summary_words(None)
