"""Baselines: a constant predictor and a linear model on the sweep's own folds.

External reference: scikit-learn's ``cross_val_score`` with its own estimators
(``DummyRegressor(strategy="mean")``, ``DummyClassifier(strategy="prior")``,
``Ridge`` on a target standardised by ``StandardScaler`` through
``TransformedTargetRegressor``, ``LogisticRegression``, and for the Poisson
deviance ``PoissonRegressor`` on a target divided by its standard deviation,
``StandardScaler(with_mean=False)``), run on the sweep's folds
(``SweepPlan.fold_indices``, themselves scikit-learn's ``KFold`` /
``StratifiedKFold``) after the same ColumnTransformer: every stored fold score
equals it to 1e-9.
"""

from pathlib import Path

import numpy as np
import pytest
from sklearn.compose import TransformedTargetRegressor
from sklearn.dummy import DummyClassifier, DummyRegressor
from sklearn.linear_model import LogisticRegression, PoissonRegressor, Ridge
from sklearn.model_selection import cross_val_score
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

from workbench.data.intake import load_table
from workbench.data.preprocessing import build_preprocessor
from workbench.sweep.plan import BASELINES, build_plan
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import load_data, run_sweep
from workbench.sweep.store import Store

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
ROWS = 400


def _reference(task, name, metric):
    """The baseline written with scikit-learn's own parts (the preprocessing comes first)."""
    if task == "classification":
        return DummyClassifier(strategy="prior") if name == "constant" else \
            LogisticRegression(max_iter=1000)
    if name == "constant":
        return DummyRegressor(strategy="mean")
    if metric == "neg_mean_poisson_deviance":
        return TransformedTargetRegressor(PoissonRegressor(alpha=1e-4, max_iter=1000),
                                          transformer=StandardScaler(with_mean=False))
    return TransformedTargetRegressor(Ridge(alpha=1.0), transformer=StandardScaler())


CASES = [  # sample set, target, metric: categorical and date columns go through the same prep
    ("orchard_water.csv", "water_drawn_litres", "r2"),
    ("greenhouse_temp.csv", "temp_change_next_hour", "neg_root_mean_squared_error"),
    ("trap_catches.csv", "moths_caught", "neg_mean_poisson_deviance"),
    ("kiln_batches.csv", "passes_inspection", "roc_auc"),
    ("coffee_roast.csv", "roast_grade", "balanced_accuracy"),
    ("coffee_roast.csv", "roast_grade", "neg_log_loss"),
]


@pytest.mark.parametrize("name,target,metric", CASES)
def test_baseline_fold_scores_equal_cross_val_score(tmp_path, name, target, metric):
    df, _ = load_table(SAMPLES / name)
    df.iloc[:ROWS].to_csv(tmp_path / name, index=False)
    output = "exp" if metric == "neg_mean_poisson_deviance" else "auto"
    plan = build_plan(tmp_path / name, target, hidden="relu", output=output, layers=["2"],
                      folds=3, repeats=2, epochs=1, metric=metric)
    events = []
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline", on_event=events.append)
        stored = st.baseline_trials(out.sweep_id)
        res = sweep_results(st, out.sweep_id)
    data, _ = load_data(plan)
    folds = plan.fold_indices(data.y)
    cv = [folds[(r, f)] for r in range(plan.repeats) for f in range(plan.folds)]
    assert [b["name"] for b in res["baselines"]] == list(BASELINES)
    for entry in res["baselines"]:
        pipe = Pipeline([("prep", build_preprocessor(data.profile, data.target)),
                         ("model", _reference(plan.task, entry["name"], metric))])
        expected = cross_val_score(pipe, data.X, data.y, cv=cv, scoring=metric)
        mine = sorted((t for t in stored if t["name"] == entry["name"]),
                      key=lambda t: (t["repeat"], t["fold"]))
        assert [t["status"] for t in mine] == ["done"] * len(cv)
        np.testing.assert_allclose([t["test_score"] for t in mine], expected, rtol=0, atol=1e-9)
        # the results document: the same scores, their mean and sd (ddof 1)
        np.testing.assert_allclose(entry["scores"], expected, rtol=0, atol=1e-9)
        assert entry["mean"] == pytest.approx(expected.mean(), abs=1e-9)
        assert entry["sd"] == pytest.approx(expected.std(ddof=1), abs=1e-9)
        assert entry["status"] == "done"
    # kept out of the ranking and of the networks' counts and events
    assert [c["index"] for c in res["configurations"]] == [0]
    assert res["n_trials"] == res["n_stored"] == plan.n_trials == 6
    kinds = [e["type"] for e in events]
    assert kinds.count("trial_finished") == plan.n_trials
    assert kinds.count("baseline_finished") == len(BASELINES) * len(cv)
    # "best so far" is a network, whatever the baselines score
    assert {e["best_index"] for e in events if e["type"] == "trial_finished"} == {0}


def test_the_constant_baseline_is_the_training_folds_mean(tmp_path):
    """Independent of scikit-learn: the constant's prediction on each test row is the mean
    of the training fold's target (by hand), stored among the out-of-fold predictions."""
    df, _ = load_table(SAMPLES / "greenhouse_temp.csv")
    df.iloc[:90].to_csv(tmp_path / "g.csv", index=False)
    plan = build_plan(tmp_path / "g.csv", "temp_change_next_hour", hidden="relu", layers=["2"],
                      folds=3, repeats=1, epochs=1)
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        constant = next(b["index"] for b in st.baselines(out.sweep_id) if b["name"] == "constant")
        oof = st.out_of_fold(out.sweep_id, [constant])
    y = oof.y
    for f in range(3):
        test = oof.folds[0] == f
        expected = np.float32(sum(y[~test]) / (~test).sum())
        np.testing.assert_array_equal(oof.predictions[0][test, 0], expected)


def test_a_plan_without_baselines_runs_none(tmp_path):
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu",
                      layers=["2"], folds=2, repeats=1, epochs=1, baselines=[])
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        assert st.baselines(out.sweep_id) == [] and st.baseline_trials(out.sweep_id) == []
        assert sweep_results(st, out.sweep_id)["baselines"] == []
        assert len(st.finished_keys(out.sweep_id, baselines=True)) == plan.n_trials


def test_results_read_epochs_and_baselines_from_the_store(tmp_path):
    """A hand-made store: the document's mean_epochs is the mean of the trials' epochs and
    a baseline's entry lists its done scores in (repeat, fold) order."""
    plan = {"folds": 2, "repeats": 1, "epochs": 30, "metric": "r2", "table": "t.csv", "target": "y",
            "task": "regression", "target_kind": "signed"}
    config = {"index": 0, "hidden": "relu", "head": "identity", "layers": [4],
              "learning_rate": 0.001, "alpha": 0.0001, "engine": "numpy"}
    fp = {"sha256": "0" * 64, "rows": 4, "cols": 2, "columns": ["x", "y"], "file": "t.csv"}

    def trial(index, fold, score, epochs, status="done"):
        return {"config_index": index, "repeat": 0, "fold": fold, "status": status,
                "test_score": score if status == "done" else None, "train_score": score,
                "fit_seconds": 0.1, "epochs": epochs, "engine": "numpy", "n_train": 2,
                "n_test": 2, "history": {}, "health": {}}

    with Store(tmp_path / "s.sqlite") as st:
        st.create_sweep("s", plan, fp, [config],
                        baselines=[{"index": 1, "name": "constant", "estimator": "mean"},
                                   {"index": 2, "name": "linear", "estimator": "ridge"}])
        st.add_trial("s", trial(0, 1, 0.5, 10))
        st.add_trial("s", trial(0, 0, 0.7, 4))
        st.add_trial("s", trial(1, 1, -0.02, None))
        st.add_trial("s", trial(1, 0, -0.01, None))
        st.add_trial("s", trial(2, 0, 0.3, None, status="failed"))
        st.set_state("s", "finished")
        res = sweep_results(st, "s")
    assert res["configurations"][0]["mean_epochs"] == 7.0
    assert res["n_stored"] == 2
    constant, linear = res["baselines"]
    assert {k: constant[k] for k in ("name", "estimator", "status", "mean", "sd", "scores")} \
        == {"name": "constant", "estimator": "mean", "status": "done",
            "mean": pytest.approx(-0.015), "sd": pytest.approx(0.01 / np.sqrt(2)),
            "scores": [-0.01, -0.02]}
    assert linear["status"] == "failed" and linear["scores"] == [] and linear["mean"] is None
