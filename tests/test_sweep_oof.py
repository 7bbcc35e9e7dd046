"""Out-of-fold predictions, stored per trial, and placed on the table's rows by the store.

External references used here:

- scikit-learn's ``sklearn.metrics`` (``r2_score``, ``roc_auc_score``,
  ``balanced_accuracy_score``): each stored fold score is recomputed from the
  stored predictions of that fold's rows, so a prediction placed on the wrong
  row, in the wrong column or in the wrong class order changes the score;
- scikit-learn's ``KFold`` / ``StratifiedKFold`` (the plan's folds: their test
  indices are the rows of the stored fold assignment) and its bundled datasets
  (``load_diabetes``, ``load_breast_cancer``, ``load_wine``);
- a refit by hand with scikit-learn's pipeline of the same configuration and
  seed: its ``predict`` on the fold's test rows equals the stored float32 values;
- SQLite's own type of a BLOB (``typeof``, ``length``): 4 bytes per value.
"""

import sqlite3

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes, load_wine
from sklearn.metrics import balanced_accuracy_score, r2_score, roc_auc_score

from workbench.data.preprocessing import build_pipeline
from workbench.sweep import store as store_mod
from workbench.sweep.plan import build_plan
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import load_data, run_sweep
from workbench.sweep.store import SCHEMA_VERSION, Store
from workbench.sweep.trials import estimator_for

FOLDS, REPEATS = 3, 2


def _sweep(tmp_path_factory, frame, name, **options):
    d = tmp_path_factory.mktemp(name)
    frame.to_csv(d / f"{name}.csv", index=False)
    plan = build_plan(d / f"{name}.csv", "target", layers=["4"], folds=FOLDS, repeats=REPEATS,
                      epochs=8, learning_rates=["0.01"], **options)
    st = Store(d / "s.sqlite")
    out = run_sweep(plan, store=st, backend="inline")
    assert out.state == "finished"
    return plan, st, out.sweep_id


@pytest.fixture(scope="module")
def regression(tmp_path_factory):
    """relu on scikit-learn's MLP and gelu on the NumPy engine, KFold (shuffled)."""
    plan, st, sid = _sweep(tmp_path_factory, load_diabetes(as_frame=True).frame, "diabetes",
                           hidden="relu,gelu", output="identity")
    yield plan, st, sid
    st.close()


@pytest.fixture(scope="module")
def binary(tmp_path_factory):
    plan, st, sid = _sweep(tmp_path_factory, load_breast_cancer(as_frame=True).frame, "cancer",
                           hidden="relu,gelu", metric="roc_auc")
    yield plan, st, sid
    st.close()


@pytest.fixture(scope="module")
def multiclass(tmp_path_factory):
    frame = load_wine(as_frame=True).frame
    frame["target"] = frame["target"].map({0: "barolo", 1: "grignolino", 2: "barbera"})
    plan, st, sid = _sweep(tmp_path_factory, frame, "wine", hidden="relu,gelu",
                           metric="balanced_accuracy")
    yield plan, st, sid
    st.close()


def _trials(st, sid):
    return st.trials(sid, with_history=False) + st.baseline_trials(sid)


# --------------------------------------------------------------------------- placed on rows


def test_regression_predictions_rescore_to_every_stored_fold_score(regression):
    plan, st, sid = regression
    oof = st.out_of_fold(sid, baselines=True)
    data, _ = load_data(plan)
    np.testing.assert_array_equal(oof.y, data.y)  # the target in the user's units
    assert oof.classes is None and len(oof.predictions) == len(oof.folds) == REPEATS
    n_cfg = plan.n_configurations
    assert oof.predictions[0].shape == (len(data.y), n_cfg + 2)
    assert oof.predictions[0].dtype == np.float32 and oof.complete.all()
    assert list(oof.columns) == list(range(n_cfg + 2))
    folds = plan.fold_indices(data.y)
    checked = 0
    for t in _trials(st, sid):
        r, f, j = t["repeat"], t["fold"], t["config_index"]
        test = folds[(r, f)][1]
        assert set(np.flatnonzero(oof.folds[r] == f)) == set(test)
        rescored = r2_score(data.y[test], oof.predictions[r][test, j].astype(np.float64))
        # float32 storage: the score agrees to float32 rounding, not exactly
        assert rescored == pytest.approx(t["test_score"], abs=1e-5)
        checked += 1
    assert checked == (n_cfg + 2) * FOLDS * REPEATS


def test_trial_predictions_come_with_their_rows(regression):
    plan, st, sid = regression
    data, _ = load_data(plan)
    folds = plan.fold_indices(data.y)
    # the stored order is ascending: rows come back with trial_predictions
    rows, values = st.trial_predictions(sid, 0, 1, 2)
    np.testing.assert_array_equal(rows, np.sort(folds[(1, 2)][1]))
    assert values.shape == rows.shape and values.dtype == np.float32


@pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")
def test_stored_predictions_equal_a_refit_by_hand(regression):
    plan, st, sid = regression
    data, _ = load_data(plan)
    tr, te = plan.fold_indices(data.y)[(1, 0)]
    for c in st.configurations(sid):
        pipe = build_pipeline(data.profile, data.target,
                              estimator_for(plan, c, plan.model_seed(1, 0)), c["head"])
        pipe.fit(data.X.iloc[tr], data.y[tr])
        order = np.argsort(te)
        expected = pipe.predict(data.X.iloc[te[order]]).astype(np.float32)
        rows, values = st.trial_predictions(sid, c["index"], 1, 0)
        np.testing.assert_array_equal(rows, te[order])
        np.testing.assert_allclose(values, expected, rtol=1e-6, atol=1e-6 * np.abs(
            expected).max())


def test_binary_probabilities_in_classes_order_rescore_to_roc_auc(binary):
    plan, st, sid = binary
    oof = st.out_of_fold(sid, baselines=True)
    data, _ = load_data(plan)
    assert oof.classes == [0, 1]  # scikit-learn's classes_ order (sorted labels)
    np.testing.assert_array_equal(oof.y, data.y)
    p = oof.predictions[0]
    assert p.shape == (len(data.y), plan.n_configurations + 2, 2)
    np.testing.assert_allclose(p.sum(axis=2), 1.0, atol=1e-6)
    for t in _trials(st, sid):
        rows = np.flatnonzero(oof.folds[t["repeat"]] == t["fold"])
        score = oof.predictions[t["repeat"]][rows, t["config_index"], 1]
        # float32 storage can tie two probabilities near 1: agreement to a few ties
        assert roc_auc_score(oof.y[rows], score) == pytest.approx(t["test_score"], abs=1e-3)


def test_multiclass_string_labels_rescore_to_balanced_accuracy(multiclass):
    plan, st, sid = multiclass
    oof = st.out_of_fold(sid, baselines=True)
    data, _ = load_data(plan)
    assert oof.classes == ["barbera", "barolo", "grignolino"]  # sorted, as classes_
    np.testing.assert_array_equal(np.asarray(oof.classes, dtype=object)[oof.y], data.y)
    assert oof.predictions[1].shape[2] == 3
    for t in _trials(st, sid):
        rows = np.flatnonzero(oof.folds[t["repeat"]] == t["fold"])
        labels = oof.predictions[t["repeat"]][rows, t["config_index"]].argmax(axis=1)
        assert balanced_accuracy_score(oof.y[rows], labels) == pytest.approx(t["test_score"],
                                                                            abs=1e-12)


def test_the_out_of_fold_matrix_is_what_bbc_cv_takes(regression, binary):
    """The shape contract with workbench.sweep.bbc: its plain CV means per column equal the
    stored configurations' mean fold scores."""
    from workbench.sweep.bbc import bbc_cv

    for (plan, st, sid), tol in ((regression, 1e-5), (binary, 1e-3)):
        oof = st.out_of_fold(sid).completed()
        res = bbc_cv(oof.y, oof.predictions, oof.folds, plan.metric, n_boot=20, seed=1)
        means = {c["index"]: c["mean"] for c in sweep_results(st, sid)["configurations"]}
        for col, m in zip(res.columns, res.cv_means):
            assert m == pytest.approx(means[int(oof.columns[col])], abs=tol)


def test_columns_follow_the_configurations_asked_for(regression):
    plan, st, sid = regression
    oof = st.out_of_fold(sid, configurations=[1, 0])
    assert list(oof.columns) == [1, 0]
    full = st.out_of_fold(sid)
    np.testing.assert_array_equal(oof.predictions[1][:, 0], full.predictions[1][:, 1])
    sub = full.select([0])
    assert sub.predictions[0].shape == (len(full.y), 1)
    with pytest.raises(ValueError, match="not among the columns"):
        full.select([99])


def test_blobs_are_float32_four_bytes_a_value(regression, binary):
    for plan, st, sid in (regression, binary):
        k = 1 if plan.task == "regression" else 2
        for n_rows, n_cols, kind, size in st._conn.execute(
                "SELECT n_rows, n_columns, typeof(vals), length(vals) FROM predictions "
                "WHERE sweep_id=?", (sid,)):
            assert kind == "blob" and n_cols == k and size == 4 * n_rows * k


# --------------------------------------------------------------------------- the store


def _row(trial, predictions):
    return {"config_index": 0, "repeat": 0, "fold": trial, "status": "done", "test_score": 0.5,
            "train_score": 0.6, "fit_seconds": 0.01, "epochs": 3, "engine": "numpy",
            "n_train": 2, "n_test": 2, "history": {}, "health": {}, "predictions": predictions}


PLAN = {"folds": 2, "repeats": 1, "metric": "r2", "table": "t.csv", "target": "y",
        "task": "regression", "target_kind": "signed"}
CONFIGS = [{"index": 0, "hidden": "relu", "head": "identity", "layers": [8],
            "learning_rate": 0.001, "alpha": 0.0001, "engine": "numpy"}]
FP = {"sha256": "0" * 64, "rows": 4, "cols": 2, "columns": ["x", "y"], "file": "t.csv"}


def test_a_trial_and_its_predictions_commit_together_or_not_at_all(tmp_path):
    with Store(tmp_path / "s.sqlite") as st:
        st.create_sweep("a", PLAN, FP, CONFIGS,
                        rows={"target": [1.0, 2.0, 3.0, 4.0], "folds": [[0, 1, 1, 0]]})
        # a predictions row already there for fold 1: the trial's insert must roll back whole
        st._conn.execute("INSERT INTO predictions VALUES ('a', 0, 0, 1, 2, 1, ?)",
                         (np.zeros(2, "<f4").tobytes(),))
        with pytest.raises(sqlite3.IntegrityError):
            st.add_trial("a", _row(1, np.array([5.0, 6.0])))
        assert st.finished_keys("a") == set()
        st._conn.execute("DELETE FROM predictions")
        st.add_trial("a", _row(0, np.array([7.0, 8.0])))  # fold 0 holds rows 0 and 3
        oof = st.out_of_fold("a")
        np.testing.assert_array_equal(oof.predictions[0][:, 0], [7.0, np.nan, np.nan, 8.0])
        assert not oof.complete[0]  # fold 1 not run yet
        st.add_trial("a", _row(1, np.array([5.0, 6.0])))
        oof = st.out_of_fold("a")
        np.testing.assert_array_equal(oof.predictions[0][:, 0], [7.0, 5.0, 6.0, 8.0])
        assert oof.complete[0] and oof.completed().columns.tolist() == [0]
        np.testing.assert_array_equal(oof.y, [1.0, 2.0, 3.0, 4.0])
        np.testing.assert_array_equal(oof.folds[0], [0, 1, 1, 0])


def _v1_store(path):
    """A store as schema version 1 wrote it, with one sweep and one trial."""
    con = sqlite3.connect(path)
    con.executescript(store_mod._SCHEMA_V1)
    con.execute("PRAGMA user_version = 1")
    con.execute("INSERT INTO sweeps VALUES ('old', 'finished', '{}', '{}', '{}', 't', 't', 't', "
                "'h', 1, 1, 2)")
    con.execute("INSERT INTO configurations VALUES ('old', 0, 'relu', 'identity', '8', 0.001, "
                "0.0001, 'sklearn')")
    con.execute("INSERT INTO trials (sweep_id, config_index, repeat, fold, status, test_score, "
                "finished) VALUES ('old', 0, 0, 0, 'done', 0.25, 't')")
    con.commit()
    con.close()


def test_a_version_1_store_is_migrated_and_keeps_its_trials(tmp_path):
    old, new = tmp_path / "old.sqlite", tmp_path / "new.sqlite"
    _v1_store(old)
    with Store(old) as st:
        assert st.schema_version == SCHEMA_VERSION == 3
        assert [t["test_score"] for t in st.trials("old")] == [0.25]
        assert st.out_of_fold("old") is None  # stored before predictions were kept
        assert st.baselines("old") == [] and st.baseline_trials("old") == []
    Store(new).close()

    def schema(path):
        con = sqlite3.connect(path)
        rows = sorted(con.execute("SELECT name, sql FROM sqlite_master WHERE type='table'"))
        con.close()
        return rows

    assert schema(old) == schema(new)  # a migrated store is a new store


def test_resuming_a_sweep_stored_by_schema_1_stores_rows_and_new_predictions(tmp_path):
    """A sweep interrupted under the old program, resumed under this one: the old trials
    keep no predictions (their configurations are incomplete), the new trials have them."""
    import json
    import threading

    load_diabetes(as_frame=True).frame.iloc[:120].to_csv(tmp_path / "d.csv", index=False)
    plan = build_plan(tmp_path / "d.csv", "target", hidden="relu,tanh", output="identity",
                      layers=["4"], folds=2, repeats=1, epochs=3, baselines=[])
    path = tmp_path / "s.sqlite"
    cancel = threading.Event()
    with Store(path) as st:
        out = run_sweep(plan, store=st, backend="inline", cancel=cancel,
                        on_event=lambda e: cancel.set() if e["type"] == "trial_finished"
                        else None)
        assert len(st.finished_keys(out.sweep_id)) == 1
        kept = next(iter(st.finished_keys(out.sweep_id)))
    # make it a schema-1 store: no new tables, a version-1 plan
    con = sqlite3.connect(path)
    for table in ("predictions", "sweep_rows", "baselines", "stopped"):
        con.execute(f"DROP TABLE {table}")
    stored = json.loads(con.execute("SELECT plan FROM sweeps").fetchone()[0])
    for key in ("baselines", "tune_learning_rate"):
        stored.pop(key)
    stored["plan_version"] = 1
    con.execute("UPDATE sweeps SET plan=?", (json.dumps(stored),))
    con.execute("PRAGMA user_version = 1")
    con.commit()
    con.close()
    with Store(path) as st:
        again = run_sweep(store=st, resume=out.sweep_id, backend="inline")
        assert again.state == "finished" and again.n_todo == plan.n_trials - 1
        oof = st.out_of_fold(out.sweep_id)
        assert oof is not None and len(oof.y) == 120
        assert list(oof.complete) == [c != kept[0] for c in range(2)]
        assert st.trial_predictions(out.sweep_id, *kept) is None
