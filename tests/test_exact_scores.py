"""A trial's scores from its predictions equal scikit-learn's scorers bit for bit.

Reference: scikit-learn's ``sklearn.metrics.roc_auc_score`` and ``get_scorer(metric)(model,
X, y)`` (the value a trial stored before :mod:`workbench.sweep.exact_scores`); the
comparison is exact (``==``), not within a tolerance.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import get_scorer, roc_auc_score

from workbench.nets.engine import NetClassifier, NetRegressor
from workbench.sweep.exact_scores import binary_roc_auc, trial_score


def _same(a, b) -> bool:
    return (np.isnan(a) and np.isnan(b)) or a == b


def test_binary_roc_auc_is_roc_auc_score_to_the_last_bit():
    """Random labels and scores: continuous, rounded (many ties), float32, all tied, perfectly
    separated, two rows, heavily imbalanced."""
    rng = np.random.default_rng(0)
    cases = []
    for i in range(400):
        n = int(rng.integers(2, 400))
        y = rng.random(n) < rng.uniform(0.02, 0.98)
        y[0], y[-1] = True, False  # both classes
        s = rng.standard_normal(n) + y * rng.uniform(0, 3)
        if i % 3 == 0:
            s = np.round(s, 1)
        if i % 4 == 0:
            s = s.astype(np.float32)
        cases.append((y, s))
    y = np.arange(50) % 2 == 0
    cases += [(y, np.zeros(50)), (y, y.astype(float)), (y, -y.astype(float)),
              (np.array([True, False]), np.array([0.3, 0.3])),
              (np.arange(1000) < 3, rng.random(1000).astype(np.float32))]
    for y, s in cases:
        assert binary_roc_auc(y, s) == roc_auc_score(y, s)


def _fitted_classifier(labels, rows=300, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((rows, 4))
    code = (X[:, 0] + 0.5 * rng.standard_normal(rows) > 0.3).astype(int)
    y = np.asarray(labels)[code]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        net = NetClassifier((8,), "tanh", max_iter=20, random_state=seed).fit(X[:200], y[:200])
    return net, X[200:], y[200:], X[:200], y[:200]


@pytest.mark.parametrize("labels", [("no", "yes"), (0, 1), (3, 7), (False, True)])
@pytest.mark.parametrize("metric", ["roc_auc", "accuracy", "balanced_accuracy", "neg_log_loss"])
def test_trial_score_is_the_scorers_value(metric, labels):
    """Test and training rows of a fitted classifier, string / integer / boolean labels, with
    and without the probabilities handed in: exactly ``get_scorer(metric)(model, X, y)``."""
    net, X_te, y_te, X_tr, y_tr = _fitted_classifier(labels)
    rows = [(X_te, y_te), (X_tr, y_tr)]
    if isinstance(labels[0], str):  # a table's labels come as Python strings (object dtype)
        rows.append((X_te, y_te.astype(object)))
    for X, y in rows:
        want = get_scorer(metric)(net, X, y)
        assert trial_score(metric, net, X, y) == want
        assert trial_score(metric, net, X, y, proba=net.predict_proba(X)) == want


def test_trial_score_uses_the_probabilities_it_is_given():
    """Wiring: the roc_auc path reads the given probabilities (reversed scores give 1 - AUC),
    not a prediction of its own."""
    net, X, y, _, _ = _fitted_classifier(("no", "yes"))
    proba = net.predict_proba(X)
    auc = trial_score("roc_auc", net, X, y, proba=proba)
    flipped = trial_score("roc_auc", net, X, y, proba=proba[:, ::-1].copy())
    assert flipped == pytest.approx(1 - auc, abs=1e-12)
    assert auc != flipped


def test_cases_the_fast_path_leaves_to_the_scorer():
    """One class among the labels (the scorer warns and gives NaN), a label the model never
    saw (the scorer's own outcome), a model with ``decision_function`` (the scorer uses it),
    a regressor, non-finite probabilities (the scorer predicts and checks for itself): all the
    scorer's."""
    net, X, y, _, _ = _fitted_classifier(("no", "yes"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = np.full(len(y), "yes", dtype=object)
        assert _same(trial_score("roc_auc", net, X, one), get_scorer("roc_auc")(net, X, one))
        odd = y.copy()
        odd[0] = "maybe"
        try:
            want = get_scorer("roc_auc")(net, X, odd)
        except ValueError as exc:
            with pytest.raises(ValueError, match=str(exc)[:20]):
                trial_score("roc_auc", net, X, odd)
        else:
            assert _same(trial_score("roc_auc", net, X, odd), want)
    logit = LogisticRegression().fit(X, y)
    assert trial_score("roc_auc", logit, X, y) == get_scorer("roc_auc")(logit, X, y)
    bad = net.predict_proba(X)
    bad[0, 1] = np.nan  # left to the scorer, which predicts (and checks) for itself
    assert trial_score("roc_auc", net, X, y, proba=bad) == get_scorer("roc_auc")(net, X, y)
    rng = np.random.default_rng(3)
    Xr = rng.standard_normal((120, 3))
    yr = Xr @ [1.0, -2.0, 0.5] + rng.standard_normal(120)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        reg = NetRegressor((8,), max_iter=10, random_state=0).fit(Xr, yr)
    for metric in ("r2", "neg_root_mean_squared_error", "neg_mean_absolute_error"):
        assert trial_score(metric, reg, Xr, yr) == get_scorer(metric)(reg, Xr, yr)


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
@pytest.mark.parametrize("metric", ["roc_auc", "neg_log_loss"])
def test_a_trials_stored_scores_are_the_scorers_on_its_own_model(metric):
    """Wiring of a sweep trial (``workbench.sweep.trials.run_trial``, kiln table, one fold):
    its ``test_score`` is ``get_scorer(metric)`` of the same fitted network on the fold's
    test rows, its ``train_score`` on the training rows, and its out-of-fold predictions are
    that network's ``predict_proba`` of the test rows, to the last bit. The network is
    fitted again here from the trial's description (a trial is a pure function of it)."""
    from pathlib import Path

    from workbench.data.preprocessing import build_preprocessor
    from workbench.sweep import trials as T
    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import load_data

    samples = Path(__file__).resolve().parents[1] / "sample_sets"
    plan = build_plan(samples / "kiln_batches.csv", "passes_inspection", hidden="relu",
                      layers=["8"], folds=3, repeats=1, epochs=12, seed=0, baselines=[],
                      metric=metric)
    data, _ = load_data(plan)
    tr, te = plan.fold_indices(data.y)[(0, 1)]
    spec = {"config": plan.configurations()[0].to_dict(), "repeat": 0, "fold": 1,
            "train": tr.astype(np.int32), "test": te.astype(np.int32),
            "random_state": plan.model_seed(0, 1), "task": plan.task, "metric": metric,
            "epochs": plan.epochs, "early_stopping": plan.early_stopping,
            "batch_size": plan.batch_size, "dtype": plan.dtype}
    res = T.run_trial(data, dict(spec))
    assert res["status"] == "done"
    prep = build_preprocessor(data.profile, data.target, columnwise_medians=True)
    X_tr = np.asarray(prep.fit_transform(data.X.iloc[tr], np.asarray(data.y)[tr]))
    X_te = np.asarray(prep.transform(data.X.iloc[te]))
    y = np.asarray(data.y)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        net = T.make_estimator(spec).fit(X_tr, y[tr])
    scorer = get_scorer(metric)
    assert res["test_score"] == scorer(net, X_te, y[te])
    assert res["train_score"] == scorer(net, X_tr, y[tr])
    assert res["test_score"] != res["train_score"]
    order = np.argsort(te, kind="stable")
    np.testing.assert_array_equal(res["predictions"],
                                  net.predict_proba(X_te)[order].astype(np.float32))
