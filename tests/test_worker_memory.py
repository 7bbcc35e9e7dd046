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
from workbench.sweep.runner import load_data, trial_spec

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _specs(table, target, **options):
    options.setdefault("layers", ["8"])
    plan = build_plan(SAMPLES / table, target, folds=3, repeats=1, epochs=5, **options)
    data, _ = load_data(plan)
    folds = plan.fold_indices(data.y)
    configs = plan.configurations() + plan.baseline_configurations()
    specs = [trial_spec(plan, c, r, k, folds) for c in configs for (r, k) in sorted(folds)[:2]]
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


# --------------------------------------------------------------------------- fewer copies in a fit


def test_epoch_rows_are_the_cast_rows_in_scikit_learns_order():
    """Each epoch's rows, gathered from the caller's float64 array and cast block by block,
    equal the reference construction: the whole array cast to float32 with a column of
    ones, then indexed by scikit-learn's shuffle order (``sklearn.utils.shuffle`` of the
    previous order, one ``RandomState.shuffle(np.arange(n))`` per epoch). Row positions
    (early stopping's training rows) are honoured, and the blocks' seams (``GATHER_ROWS``)
    are crossed."""
    from sklearn.utils import shuffle as sk_shuffle

    from workbench.nets import engine as E

    rng = np.random.default_rng(0)
    n = E.GATHER_ROWS * 2 + 37
    X = rng.standard_normal((n + 50, 5))
    rows = rng.permutation(n + 50)[:n]
    y = rng.standard_normal((n, 1)).astype(np.float32)
    ref = np.hstack([X.astype(np.float32), np.ones((len(X), 1), np.float32)])[rows]
    got = E._epoch_rows(X, rows, y, np.float32, True, np.random.RandomState(7))
    rs, order = np.random.RandomState(7), np.arange(n)
    for _ in range(3):
        order = sk_shuffle(order, random_state=rs)
        X_epoch, y_epoch = next(got)
        assert X_epoch.dtype == np.float32 and X_epoch.flags.c_contiguous
        np.testing.assert_array_equal(X_epoch, ref[order])
        np.testing.assert_array_equal(y_epoch, y[order])
    X_all, _ = next(E._epoch_rows(X, None, y[:1].repeat(len(X), 0), np.float32, False, None))
    np.testing.assert_array_equal(X_all, np.hstack([X.astype(np.float32),
                                                    np.ones((len(X), 1), np.float32)]))


@pytest.mark.parametrize("stratified", [False, True])
def test_early_stopping_splits_the_rows_as_train_test_split(stratified):
    """Reference: scikit-learn's ``train_test_split(X, y, ...)`` on the arrays, with a
    RandomState in the same state: the engine's training row positions pick the same
    rows in the same order, and its validation rows are the same."""
    from sklearn.model_selection import train_test_split

    from workbench.nets.engine import NetClassifier

    rng = np.random.default_rng(1)
    X = rng.standard_normal((300, 3))
    y = (rng.random(300) < 0.3).astype(np.float32).reshape(-1, 1)
    est = (NetClassifier if stratified else NetRegressor)(early_stopping=True,
                                                          validation_fraction=0.2)
    est._random_state = np.random.RandomState(5)
    data = est._training_data(X, y)
    X_tr, X_val, y_tr, y_val = train_test_split(
        X, y, random_state=np.random.RandomState(5), test_size=0.2,
        stratify=y if stratified else None)
    np.testing.assert_array_equal(X[data.rows], X_tr)
    np.testing.assert_array_equal(data.y, y_tr)
    np.testing.assert_array_equal(data.X_val, X_val.astype(np.float32))
    np.testing.assert_array_equal(data.y_val, y_val)


def test_prediction_casts_chunk_by_chunk_with_the_same_values():
    """float64 rows are cast to float32 one prediction chunk at a time: the same
    predictions, bit for bit, as on rows cast beforehand (more rows than one chunk)."""
    from workbench.nets.network import PREDICT_CHUNK

    rng = np.random.default_rng(2)
    X = rng.standard_normal((PREDICT_CHUNK * 2 + 5, 4))
    est = NetRegressor(hidden_layer_sizes=(5,), max_iter=2, random_state=0).fit(X[:500],
                                                                                X[:500, 0])
    np.testing.assert_array_equal(est.predict(X), est.predict(X.astype(np.float32)))


def test_a_fit_holds_one_float32_copy_of_the_rows():
    """Structural memory check with :mod:`tracemalloc` (allocations, not timings): fitting
    on float64 rows allocates one float32 array of the rows with the ones column (the
    epochs' array) plus smaller arrays -- not also a cast copy to gather from (with it the
    peak was 3.3 times the one array, measured; now 1.7)."""
    import tracemalloc
    import warnings

    rng = np.random.default_rng(3)
    X = rng.standard_normal((40_000, 20))
    y = X[:, 0].copy()
    one = X.shape[0] * (X.shape[1] + 1) * 4
    est = NetRegressor(hidden_layer_sizes=(8,), max_iter=1, random_state=0,
                       monitor_health=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tracemalloc.start()
        try:
            est.fit(X, y)
            peak = tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()
    assert one < peak < 2 * one


def test_the_sweeps_trials_fit_their_medians_column_by_column(monkeypatch):
    """Wiring: a sweep trial's preprocessing fits its median imputers column by column
    (:func:`workbench.data.preprocessing.fit_median_by_column`)."""
    from workbench.data import preprocessing as P

    seen = []
    real = P.fit_median_by_column
    monkeypatch.setattr(P, "fit_median_by_column",
                        lambda imputer, X: (seen.append(X.shape[1]), real(imputer, X))[1])
    data, specs = _specs("seed_germination.csv", "germinated_share")
    T._FOLD_CACHE.clear()
    assert T.run_trial(data, dict(specs[0]))["status"] == "done"
    T._FOLD_CACHE.clear()
    assert seen
