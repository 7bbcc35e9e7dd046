"""The workers' copy of the table: memory-mapped, read-only, and results bit-identical.

References: ``numpy.memmap`` and ``joblib.load(mmap_mode="r")`` (joblib's documented
persistence: arrays written raw by ``joblib.dump`` come back mapped from the file);
``numpy.ndarray.flags.writeable``. The results are compared with those of the same trial
on the in-memory table (``run_trial``), value for value and byte for byte.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest

from workbench.nets.engine import NetRegressor
from workbench.sweep import trials as T
from workbench.sweep.plan import build_plan
from workbench.sweep.runner import load_data

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _specs(table, target, **options):
    options.setdefault("layers", ["8"])
    plan = build_plan(SAMPLES / table, target, folds=3, repeats=1, epochs=5, **options)
    data, _ = load_data(plan)
    folds = plan.fold_indices(data.y)
    configs = plan.configurations() + plan.baseline_configurations()
    specs = []
    for c in configs:
        for (r, k), (tr, te) in sorted(folds.items())[:2]:
            specs.append({"config": c.to_dict(), "repeat": r, "fold": k,
                          "train": tr.astype(np.int32), "test": te.astype(np.int32),
                          "random_state": plan.model_seed(r, k), "task": plan.task,
                          "metric": plan.metric, "epochs": plan.epochs,
                          "early_stopping": plan.early_stopping,
                          "batch_size": plan.batch_size, "dtype": plan.dtype})
    return data, specs


def _digest(res):
    pred = res["predictions"]
    return (res["status"], res["test_score"], res["train_score"], res["epochs"],
            res["history"]["loss"], res["history"]["test_score"],
            None if pred is None else hashlib.sha1(pred.tobytes()).hexdigest())


def _mapped(values) -> bool:
    """Whether an array is a view of a numpy.memmap (the file), not a copy."""
    while not isinstance(values, np.memmap) and getattr(values, "base", None) is not None:
        values = values.base
    return isinstance(values, np.memmap)


def test_workers_map_the_tables_arrays_read_only(tmp_path):
    data, _ = _specs("seed_germination.csv", "germinated_share")
    path = tmp_path / "table.bin"
    T.save_worker_data(data, str(path))
    mapped = T.load_worker_data(str(path))
    numeric = [c for c in mapped.X.columns if mapped.X[c].dtype.kind == "f"]
    assert numeric
    for name in numeric:
        values = mapped.X[name].to_numpy()
        assert _mapped(values), name  # backed by the file, not a copy
        assert not values.flags.writeable
        np.testing.assert_array_equal(values, data.X[name].to_numpy())
    assert isinstance(mapped.y, np.memmap) and not mapped.y.flags.writeable
    np.testing.assert_array_equal(mapped.y, data.y)
    assert mapped.token == data.token


@pytest.mark.parametrize("table,target,extra", [
    ("seed_germination.csv", "germinated_share", {"hidden": "relu,tanh"}),
    ("coffee_roast.csv", "roast_grade", {"hidden": "relu", "engine": "sklearn"}),
    ("kiln_batches.csv", "passes_inspection", {"hidden": "gelu"}),
])
def test_trials_on_the_mapped_table_are_bit_identical(tmp_path, table, target, extra):
    """Networks (both engines) and the baselines: the same scores, epochs, curves and
    predictions from the worker's mapped copy as from the table in memory."""
    data, specs = _specs(table, target, **extra)
    path = tmp_path / "table.bin"
    T.save_worker_data(data, str(path))
    T._WORKER_DATA.clear()
    T._FOLD_CACHE.clear()
    mapped = [T.run_trial_from_file(data.token, str(path), dict(s)) for s in specs]
    kept = T._WORKER_DATA[data.token].X
    column = kept[[c for c in kept.columns if kept[c].dtype.kind == "f"][0]].to_numpy()
    assert _mapped(column)  # the mapped copy was used
    T._FOLD_CACHE.clear()
    memory = [T.run_trial(data, dict(s)) for s in specs]
    assert any(s["config"].get("kind") == "baseline" for s in specs)
    for a, b in zip(mapped, memory):
        assert a["status"] == "done", a["error"]
        assert _digest(a) == _digest(b)
    T._WORKER_DATA.clear()


def test_fold_cache_keeps_older_folds_only_within_its_byte_budget(monkeypatch):
    data, specs = _specs("kiln_batches.csv", "passes_inspection", hidden="relu")
    nets = [s for s in specs if s["config"].get("kind") != "baseline"]
    T._FOLD_CACHE.clear()
    first = [T.run_trial(data, dict(s)) for s in nets]
    assert len(T._FOLD_CACHE) == 2  # two small folds fit the default budget
    monkeypatch.setattr(T, "FOLD_CACHE_BYTES", 1)
    T._FOLD_CACHE.clear()
    again = [T.run_trial(data, dict(s)) for s in nets]
    assert len(T._FOLD_CACHE) == 1  # only the most recent fold is kept
    assert [_digest(a) for a in first] == [_digest(b) for b in again]
    T._FOLD_CACHE.clear()


def test_the_engine_casts_float64_rows_once_with_the_same_result():
    """float64 rows are cast to float32 as the ones column is added: the same fit as on
    rows cast beforehand; a value beyond float32's range is refused in both places it can
    appear (training rows and early stopping's validation rows)."""
    rng = np.random.default_rng(0)
    X = rng.standard_normal((300, 4))
    y = X @ [1.0, -2.0, 0.5, 0.0]
    kw = dict(hidden_layer_sizes=(6,), max_iter=5, random_state=0)
    a = NetRegressor(**kw).fit(X, y)
    b = NetRegressor(**kw).fit(X.astype(np.float32), y)
    for wa, wb in zip(a.coefs_, b.coefs_):
        np.testing.assert_array_equal(wa, wb)
    X[3, 1] = 1e39  # finite in float64, infinite in float32
    for early in (False, True):
        with pytest.raises(ValueError, match="too large for dtype='float32'"):
            NetRegressor(early_stopping=early, **kw).fit(X, y)


def test_a_large_fold_is_released_before_the_next_is_computed(monkeypatch):
    """Over the budget, the previous fold's features are dropped before the next fold's
    preprocessing runs, so a worker never holds two large folds at once."""
    import gc
    import weakref

    from workbench.data.preprocessing import build_preprocessor

    data, specs = _specs("kiln_batches.csv", "passes_inspection", hidden="relu")
    first, second = [s for s in specs if s["config"].get("kind") != "baseline"][:2]
    assert first["fold"] != second["fold"]
    monkeypatch.setattr(T, "FOLD_CACHE_BYTES", 1)
    T._FOLD_CACHE.clear()

    def features(spec, check=None):
        prep = build_preprocessor(data.profile, data.target)
        if check is not None:
            fit_transform = prep.fit_transform
            monkeypatch.setattr(prep, "fit_transform", lambda *a: (check(), fit_transform(*a))[1],
                                raising=False)
        return T._fold_features(data, spec, prep, np.asarray(spec["train"]),
                                np.asarray(spec["test"]))

    old = weakref.ref(features(first)[0])
    seen = []

    def check():
        gc.collect()
        seen.append(old() is None)

    features(second, check)
    assert seen == [True]
    T._FOLD_CACHE.clear()
