"""Wiring of a real sweep: values reach the right place between runner, store and results.

External references used here:

- Nadeau & Bengio (2003), "Inference for the generalization error", Machine
  Learning 52: the corrected resampled t statistic
  t = mean(d) / sqrt((1/J + n_test/n_train) * var(d)), J - 1 degrees of
  freedom, evaluated by hand with ``scipy.stats.t``;
- scikit-learn's ``KFold`` (the test part of each fold, so its size) and its
  bundled diabetes data (442 rows: four folds of 111, 111, 110 and 110 rows);
- scikit-learn's ``ColumnTransformer`` (the columns the fitted pipeline uses).
"""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.datasets import load_diabetes
from sklearn.model_selection import KFold

from workbench.data import preprocessing
from workbench.data.preprocessing import fitted_estimator
from workbench.sweep import statistics
from workbench.sweep.plan import build_plan
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import run_sweep
from workbench.sweep.statistics import ALPHA, corrected_ttest
from workbench.sweep.store import Store

FOLDS, REPEATS = 4, 2


@pytest.fixture(scope="module")
def unequal_sweep(tmp_path_factory):
    """A finished sweep on 442 rows in 4 folds (test parts of 111 and 110 rows)."""
    d = tmp_path_factory.mktemp("unequal")
    load_diabetes(as_frame=True).frame.to_csv(d / "diabetes.csv", index=False)
    plan = build_plan(d / "diabetes.csv", "target", hidden="relu,tanh,identity",
                      output="identity", layers=["8"], folds=FOLDS, repeats=REPEATS,
                      epochs=30, learning_rates=["0.01"])
    with Store(d / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        trials = st.trials(out.sweep_id, with_history=False)
        res = sweep_results(st, out.sweep_id)
    return plan, trials, res, d / "s.sqlite", out.sweep_id


def _by_hand(a, b, n_train, n_test):
    """Nadeau & Bengio's corrected resampled t-test, written out from the paper."""
    d = np.asarray(a) - np.asarray(b)
    J = d.size
    mean = d.sum() / J
    var = ((d - mean) ** 2).sum() / (J - 1)
    t = mean / math.sqrt((1.0 / J + n_test / n_train) * var)
    return 2.0 * stats.t.sf(abs(t), J - 1)


def test_trials_record_the_sizes_of_their_own_folds(unequal_sweep):
    plan, trials, *_ = unequal_sweep
    assert len(trials) == plan.n_trials and all(t["status"] == "done" for t in trials)
    rows = 442
    for t in trials:
        split = KFold(FOLDS, shuffle=True, random_state=plan.split_seed(t["repeat"]))
        _, test = list(split.split(np.zeros((rows, 1))))[t["fold"]]
        assert t["n_test"] == len(test)
        assert t["n_train"] == rows - len(test)
    assert {t["n_test"] for t in trials} == {110, 111}  # the folds differ by a row


def test_reported_p_values_are_the_corrected_ttest_of_the_stored_folds(unequal_sweep):
    _, trials, res, *_ = unequal_sweep
    cfgs = res["configurations"]
    assert [c["status"] for c in cfgs] == ["done"] * 3
    best = cfgs[0]
    stored = {}
    for t in trials:
        stored.setdefault(t["config_index"], {})[(t["repeat"], t["fold"])] = t
    keys = sorted(stored[best["index"]])
    assert len(keys) == FOLDS * REPEATS
    # the mean fold sizes over the J resamples, from the stored rows
    n_train = np.mean([stored[best["index"]][k]["n_train"] for k in keys])
    n_test = np.mean([stored[best["index"]][k]["n_test"] for k in keys])
    assert (n_train, n_test) == (331.5, 110.5)
    a = [stored[best["index"]][k]["test_score"] for k in keys]
    informative = 0
    for c in cfgs[1:]:
        b = [stored[c["index"]][k]["test_score"] for k in keys]
        p = _by_hand(a, b, n_train, n_test)
        assert c["p_value"] == pytest.approx(p, rel=1e-9, abs=1e-300)
        assert c["p_value"] == pytest.approx(corrected_ttest(a, b, n_train, n_test)[1],
                                             rel=1e-12, abs=1e-300)
        # the test can tell the sizes apart: swapped, the same scores give another p
        if abs(_by_hand(a, b, n_test, n_train) - p) > 0.05:
            informative += 1
    assert informative >= 1


@pytest.mark.parametrize("p,tied", [(ALPHA, True), (np.nextafter(ALPHA, 0.0), False)])
def test_the_document_ties_a_configuration_whose_p_value_is_alpha(unequal_sweep, monkeypatch,
                                                                  p, tied):
    """The documented rule (README, statistics): tied with the best when p >= alpha."""
    *_, path, sweep_id = unequal_sweep
    monkeypatch.setattr(statistics, "corrected_ttest", lambda a, b, n_train, n_test: (1.0, p))
    with Store(path) as st:
        res = sweep_results(st, sweep_id)
    others = res["configurations"][1:]
    assert [c["p_value"] for c in others] == [p, p]
    assert [c["tied_with_best"] for c in others] == [tied, tied]


# --------------------------------------------------------------------------- column roles


def _table_with_a_row_number(path):
    rng = np.random.default_rng(0)
    n = 120
    df = pd.DataFrame({"row_no": np.arange(1000, 1000 + n), "x1": rng.normal(size=n),
                       "x2": rng.normal(size=n)})
    df["y"] = df["x1"] - 0.5 * df["x2"] + 0.02 * (df["row_no"] - 1060) + 0.1 * rng.normal(size=n)
    df.to_csv(path, index=False)


def _fitted_pipelines(monkeypatch, plan, store, preprocessors=None):
    """Run ``plan`` inline; return every network pipeline the trials built (fitted by
    them); every ColumnTransformer built (networks' and baselines') goes to
    ``preprocessors``."""
    built = []

    def spy(*args, **kwargs):
        pipe = real(*args, **kwargs)
        built.append(pipe)
        return pipe

    def spy_prep(*args, **kwargs):
        prep = real_prep(*args, **kwargs)
        if preprocessors is not None:
            preprocessors.append(prep)
        return prep

    real, real_prep = preprocessing.build_pipeline, preprocessing.build_preprocessor
    monkeypatch.setattr(preprocessing, "build_pipeline", spy)
    monkeypatch.setattr(preprocessing, "build_preprocessor", spy_prep)
    out = run_sweep(plan, store=store, backend="inline")
    monkeypatch.setattr(preprocessing, "build_pipeline", real)
    monkeypatch.setattr(preprocessing, "build_preprocessor", real_prep)
    assert out.state == "finished" and len(built) == plan.n_trials
    return built


def _last_sweep(store):
    return store.list_sweeps()[0]["id"]


def _listed_columns(pipe):
    return [col for _, _, cols in pipe.named_steps["prep"].transformers for col in cols]


def test_a_column_made_a_feature_reaches_the_fitted_pipeline(tmp_path, monkeypatch):
    path = tmp_path / "t.csv"
    _table_with_a_row_number(path)
    plan = build_plan(path, "y", hidden="relu", output="identity", layers=["4"], folds=2,
                      repeats=1, epochs=3)
    with Store(tmp_path / "s.sqlite") as st:
        # as profiled, the row number is an identifier and stays out of the model
        for pipe in _fitted_pipelines(monkeypatch, plan, st):
            assert "row_no" not in _listed_columns(pipe)
            assert fitted_estimator(pipe).coefs_[0].shape[0] == 2
        plan.roles = {"row_no": "feature"}  # the user's change in the window
        plan.validate()
        preps = []
        pipes = _fitted_pipelines(monkeypatch, plan, st, preps)
        stored_baselines = {t["name"] for t in st.baseline_trials(_last_sweep(st))}
    for pipe in pipes:
        assert "row_no" in _listed_columns(pipe)
        # the network was trained on it: one more input than the two numeric features
        assert fitted_estimator(pipe).coefs_[0].shape[0] == 3
    # the first trial on each fold (a baseline's: they run first) fitted the preprocessor;
    # the later ones reuse its features
    fitted = [p for p in preps if hasattr(p, "transformers_")]
    assert len(fitted) == plan.folds * plan.repeats
    for prep in fitted:
        assert "row_no" in [c for _, _, cols in prep.transformers_ for c in cols]
    assert stored_baselines == {"constant", "linear"}
