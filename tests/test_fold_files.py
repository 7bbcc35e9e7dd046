"""Shared fold features (:mod:`workbench.sweep.fold_files`): prepared once by the sweep's
process, mapped read-only by the workers, and every stored result bit-identical.

References: the trial's own path -- each worker fitting the fold's ColumnTransformer
(:func:`workbench.sweep.trials.compute_fold_features`) -- is the reference, compared
value for value and byte for byte (scores, epochs, histories, health, out-of-fold
predictions); ``numpy.load(mmap_mode="r")`` and ``os.replace`` (POSIX rename: the final
name appears only when the file is complete) are the documented mechanisms relied on.
"""

from __future__ import annotations

import hashlib
import os
import threading
from pathlib import Path

import numpy as np
import pytest

from workbench.sweep import fold_files as F
from workbench.sweep import runner
from workbench.sweep import trials as T
from workbench.sweep.plan import build_plan
from workbench.sweep.runner import load_data, run_sweep, trial_spec
from workbench.sweep.store import Store

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
pytestmark = pytest.mark.filterwarnings("ignore::sklearn.exceptions.ConvergenceWarning")


def _stored(st, sweep_id):
    """Everything a sweep stores of its trials but timings and workers."""
    keep = ("config_index", "repeat", "fold", "status", "error", "test_score", "train_score",
            "epochs", "history", "health", "n_train", "n_test")
    trials = st.trials(sweep_id, with_history=True)
    rows = sorted(tuple(repr(t.get(k)) for k in keep) for t in trials)
    base = sorted((b["config_index"], b["repeat"], b["fold"], b["status"], repr(b["test_score"]))
                  for b in st.baseline_trials(sweep_id))
    oof = {}
    for t in trials:
        got = st.trial_predictions(sweep_id, t["config_index"], t["repeat"], t["fold"])
        oof[(t["config_index"], t["repeat"], t["fold"])] = None if got is None else \
            hashlib.sha1(np.ascontiguousarray(got[1]).tobytes()).hexdigest()
    return rows, base, oof


def _sweep(tmp_path, monkeypatch, plan, share, name, jobs=2):
    monkeypatch.setattr(runner, "SHARE_FOLDS", share)
    with Store(tmp_path / f"{name}.sqlite") as st:
        out = run_sweep(plan, store=st, jobs=jobs)
        assert out.state == "finished"
        return _stored(st, out.sweep_id)


class _Spy:
    """Records the folds the sweep's process writes, the specs the pool is handed and the
    fold files left in the scratch folder when the sweep closes it."""

    def __init__(self, monkeypatch):
        self.written, self.sent, self.left = [], [], []
        real_write, real_submit = F.write_fold, runner._LokyExecutor.submit
        real_close = runner._LokyExecutor.close

        def close(executor, kill=False):
            if executor._shared is not None:
                self.left.extend(p.name for p in executor._copy.folder.iterdir()
                                 if F.is_fold_file(p.name))
            return real_close(executor, kill)
        monkeypatch.setattr(runner._LokyExecutor, "close", close)

        def write(folder, data, repeat, fold, train, test, kinds):
            self.written.append((repeat, fold, tuple(sorted(kinds))))
            return real_write(folder, data, repeat, fold, train, test, kinds)

        def submit(executor, specs):
            if executor._shared is not None:
                self.sent.extend(executor._shared.attach(specs))
            return real_submit(executor, specs)
        monkeypatch.setattr(F, "write_fold", write)
        monkeypatch.setattr(runner._LokyExecutor, "submit", submit)


@pytest.mark.parametrize("table,target,options", [
    # binary; NumPy engine (float32 files, stacked groups) and the baselines (float64)
    ("kiln_batches.csv", "passes_inspection", {"hidden": "relu,tanh", "folds": 3,
                                                "repeats": 2}),
    # multiclass; scikit-learn's MLP (float64 files, one trial per task), racing on
    ("coffee_roast.csv", "roast_grade", {"hidden": "relu,tanh", "folds": 4, "repeats": 1,
                                         "race": True, "engine": "sklearn"}),
])
def test_a_shared_sweep_stores_what_the_workers_own_features_give(tmp_path, monkeypatch,
                                                                  table, target, options):
    """Two processes: the same stored trials, baselines and out-of-fold predictions with
    the fold features shared as when each worker computes its own."""
    monkeypatch.setattr(F, "SHARED_MIN_BYTES", 0)
    plan = build_plan(SAMPLES / table, target, layers=["8"], epochs=5, **options)
    spy = _Spy(monkeypatch)
    shared = _sweep(tmp_path, monkeypatch, plan, True, "shared")
    assert spy.sent and all(s.get("features") for s in spy.sent)  # every trial was shared
    assert {(r, f) for r, f, _ in spy.written} == {(r, f) for r in range(plan.repeats)
                                                    for f in range(plan.folds)}
    if not plan.race:  # every trial came back: each fold file went when its last one did
        assert spy.left == []
    kinds = {F.feature_kind(s) for s in spy.sent}
    assert kinds == ({F.FLOAT64} if options.get("engine") == "sklearn"
                     else {F.FLOAT32, F.FLOAT64})
    own = _sweep(tmp_path, monkeypatch, plan, False, "own")
    assert len(spy.written) == plan.repeats * plan.folds  # nothing written without sharing
    assert shared == own
    assert len(shared[2]) == plan.n_trials


def test_a_small_table_is_shared_always_but_not_when_only_large_ones_are(tmp_path,
                                                                          monkeypatch):
    """run_sweep's share_folds: "always" (the default: the command line, the benchmark)
    prepares a sample set's folds in the sweep's process; "large" (the window's choice,
    core_adapter.WINDOW_SHARE_FOLDS) leaves a table under SHARED_MIN_BYTES to the
    workers, and the window asks for it."""
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", layers=["8"],
                      hidden="relu", folds=2, repeats=1, epochs=3, baselines=[])
    data, _ = load_data(plan)
    assert not F.worth_sharing(data)  # a sample set is small
    for policy, shared in (("always", True), ("large", False)):
        spy = _Spy(monkeypatch)
        with Store(tmp_path / f"{policy}.sqlite") as st:
            assert run_sweep(plan, store=st, jobs=2, share_folds=policy).state == "finished"
        assert bool(spy.written) is shared, policy
    from workbench.gui import core_adapter

    asked = {}
    monkeypatch.setattr(runner, "run_sweep", lambda *a, **k: asked.update(k) or runner.
                        SweepOutcome(sweep_id="x", state="finished", n_finished=0,
                                     n_todo=0, seconds=0.0))
    core_adapter.run_plan(plan, {"jobs": 2}, core_adapter.StoreSession(tmp_path / "w.sqlite"),
                          None, None)
    assert asked["share_folds"] == core_adapter.WINDOW_SHARE_FOLDS == "large"
    with pytest.raises(ValueError, match="share_folds"):
        run_sweep(plan, store=Store(tmp_path / "bad.sqlite"), share_folds="sometimes")


def test_worth_sharing_counts_the_features_bytes():
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", layers=["8"])
    data, _ = load_data(plan)
    assert F.worth_sharing(data, min_bytes=0)
    rows, cols = data.X.shape
    assert F.worth_sharing(data, min_bytes=rows * cols * 8)
    assert not F.worth_sharing(data, min_bytes=rows * cols * 8 + 1)


def _specs(table, target, **options):
    options.setdefault("layers", ["8"])
    plan = build_plan(SAMPLES / table, target, folds=3, repeats=1, epochs=4, **options)
    data, _ = load_data(plan)
    folds = plan.fold_indices(data.y)
    specs = [trial_spec(plan, c, r, k, folds)
             for c in plan.configurations() + plan.baseline_configurations()
             for (r, k) in sorted(folds)]
    return plan, data, folds, specs


def _digest(res):
    pred = res["predictions"]
    return (res["status"], res["error"], res["test_score"], res["train_score"], res["epochs"],
            repr(res["history"]), repr(res["health"]),
            None if pred is None else hashlib.sha1(pred.tobytes()).hexdigest())


def test_a_worker_given_shared_features_reads_neither_the_table_nor_a_transformer(
        tmp_path, monkeypatch):
    """Wiring: with every trial's features given, the worker reads the light file (no
    feature column), never the table copy, and builds no ColumnTransformer; the results
    equal the worker's own path, and the arrays it trained on are the mapped files."""
    import sklearn.compose

    plan, data, folds, specs = _specs("coffee_roast.csv", "roast_grade", hidden="relu")
    specs += [s for s in _specs("coffee_roast.csv", "roast_grade", hidden="relu",
                                engine="sklearn")[3] if s["config"].get("kind") != "baseline"]
    needs = {key: {F.FLOAT32, F.FLOAT64} for key in sorted(folds)}
    shared = F.SharedFolds(data, tmp_path, folds, needs)
    given = shared.attach(specs)
    shared.close()
    written = {p.name: p.read_bytes() for p in tmp_path.glob("fold-*.npy")}
    light = tmp_path / "light.pkl"
    T.save_worker_data(T.light_data(data), str(light))
    assert T.load_worker_data(str(light)).X is None
    T._WORKER_DATA.clear()
    T._FOLD_CACHE.clear()
    read, fitted = [], []
    real_load = T.load_worker_data
    monkeypatch.setattr(T, "load_worker_data", lambda p: (read.append(p), real_load(p))[1])

    def refuse(*a, **k):
        raise AssertionError("a ColumnTransformer was built")
    monkeypatch.setattr(sklearn.compose.ColumnTransformer, "__init__", refuse)
    real_fit = T._fit_and_score

    def watch(d, spec, result):
        fitted.append(T.shared_features(spec))
        return real_fit(d, spec, result)
    monkeypatch.setattr(T, "_fit_and_score", watch)
    got = [T.run_trials_from_file(data.token, str(tmp_path / "absent-table.pkl"), [dict(s)],
                                  str(light))[0] for s in given]
    assert read == [str(light)]
    assert not T._FOLD_CACHE
    assert {p.name: p.read_bytes() for p in tmp_path.glob("fold-*.npy")} == written
    monkeypatch.undo()
    T._WORKER_DATA.clear()
    own = [T.run_trial(data, dict(s)) for s in specs]
    T._FOLD_CACHE.clear()
    assert any(s["config"].get("kind") == "baseline" for s in specs)
    assert any(s["config"].get("engine") == "sklearn" for s in specs)
    for a, b in zip(got, own):
        assert a["status"] == "done", a["error"]
        assert _digest(a) == _digest(b)
    for spec, (X_tr, X_te) in zip(given, fitted):
        assert isinstance(X_tr, np.memmap) and isinstance(X_te, np.memmap)
        baseline = spec["config"].get("kind") == "baseline"
        # read-only, or for a baseline copy-on-write (the file itself never changes)
        assert X_tr.mode == X_te.mode == ("c" if baseline else "r")
        assert X_tr.flags.writeable == baseline
        assert X_tr.dtype == np.dtype(F.feature_kind(spec))
        assert X_tr.shape[0] == len(spec["train"]) and X_te.shape[0] == len(spec["test"])


def test_the_files_hold_the_trials_own_features_in_each_kind(tmp_path):
    """The float64 file is bit for bit the trial's own ``fit_transform`` / ``transform``;
    the float32 file is that cast by ``astype`` (what the engine does)."""
    plan, data, folds, _ = _specs("seed_germination.csv", "germinated_share")
    for (r, f), (tr, te) in folds.items():
        files = F.write_fold(tmp_path, data, r, f, tr, te, {F.FLOAT32, F.FLOAT64})
        ref_tr, ref_te = T.compute_fold_features(data, T.fold_preprocessor(data), tr, te)
        for part, ref in (("train", ref_tr), ("test", ref_te)):
            got64 = np.load(files[F.FLOAT64][part])
            got32 = np.load(files[F.FLOAT32][part])
            assert got64.dtype == np.float64 and got64.tobytes() == ref.tobytes()
            assert got32.dtype == np.float32 and \
                got32.tobytes() == ref.astype(np.float32).tobytes()


def test_a_fold_whose_float32_cast_overflows_gets_the_float64_file(tmp_path, monkeypatch):
    """A value finite in float64 but not in float32 (beyond 3.4e38): the float32 trials
    read the float64 file and the engine refuses it as it does today."""
    X = np.array([[1.0, 2.0], [3.0, 1e39]])
    assert not F._fits_float32(X) and F._fits_float32(X[:1])
    assert F._fits_float32(np.array([[np.nan, np.inf]]))  # non-finite alike in both
    plan, data, folds, _ = _specs("seed_germination.csv", "germinated_share")
    (tr, te) = folds[(0, 0)]
    monkeypatch.setattr(T, "compute_fold_features", lambda d, p, a, b: (X, X[:1]))
    files = F.write_fold(tmp_path, data, 0, 0, tr, te, {F.FLOAT32})
    assert files[F.FLOAT32] == files[F.FLOAT64]
    assert np.load(files[F.FLOAT32]["train"]).tobytes() == X.tobytes()
    assert sorted(os.listdir(tmp_path)) == ["fold-0-0-test-float64.npy",
                                            "fold-0-0-train-float64.npy"]


def test_a_reader_never_sees_a_partial_file(tmp_path, monkeypatch):
    """While a file is written its final name does not exist (only a temporary name does);
    a write that fails leaves neither."""
    X = np.arange(3 * F.CHUNK_ROWS * 2, dtype=np.float64).reshape(-1, 2)
    path = str(tmp_path / F.file_name(0, 1, "train", F.FLOAT32))
    seen = []
    real = np.lib.format.open_memmap

    class Watched(np.memmap):
        def __setitem__(self, key, value):
            seen.append((os.path.exists(path), sorted(os.listdir(tmp_path))))
            super().__setitem__(key, value)

    monkeypatch.setattr(np.lib.format, "open_memmap",
                        lambda *a, **k: real(*a, **k).view(Watched))
    F.write_array(path, X, np.float32)
    assert len(seen) == 3 and not any(exists for exists, _ in seen)
    assert all(len(names) == 1 and F.is_fold_file(names[0]) and ".tmp-" in names[0]
               for _, names in seen)
    np.testing.assert_array_equal(np.load(path), X.astype(np.float32))
    os.unlink(path)

    class Failing(np.memmap):
        def __setitem__(self, key, value):
            raise OSError("disk full")
    monkeypatch.setattr(np.lib.format, "open_memmap",
                        lambda *a, **k: real(*a, **k).view(Failing))
    with pytest.raises(OSError):
        F.write_array(path, X, np.float32)
    assert os.listdir(tmp_path) == []


@pytest.mark.parametrize("how", ["finished", "failed", "interrupted"])
def test_the_fold_files_go_when_the_sweep_ends(tmp_path, monkeypatch, how):
    """Finished, failed (the store breaks mid-sweep) or interrupted (Ctrl-C): the sweep's
    scratch folder and its fold files are removed."""
    monkeypatch.setattr(F, "SHARED_MIN_BYTES", 0)
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu",
                      layers=["4"], folds=2, repeats=1, epochs=2)
    folders = []
    real_share = runner._LokyExecutor.share

    def share(executor, folds, needs):
        real_share(executor, folds, needs)
        folders.append(executor._copy.folder)
    monkeypatch.setattr(runner._LokyExecutor, "share", share)
    events = []

    def on_event(event):
        events.append(event)
        if event["type"] == "trial_finished" and folders and len(events) < 100:
            events.extend([None] * 100)  # once
            assert any(F.is_fold_file(p.name) for p in folders[0].iterdir())
            if how == "interrupted":
                raise KeyboardInterrupt
            if how == "failed":
                raise RuntimeError("the store broke")
    with Store(tmp_path / "s.sqlite") as st:
        if how == "finished":
            assert run_sweep(plan, store=st, jobs=2, on_event=on_event).state == "finished"
        else:
            with pytest.raises(KeyboardInterrupt if how == "interrupted" else RuntimeError):
                run_sweep(plan, store=st, jobs=2, on_event=on_event)
    assert folders and not folders[0].exists()  # (other processes' sweeps may run meanwhile)
    assert any(e is not None and e["type"] == "trial_finished" for e in events)


def test_an_abandoned_folder_with_fold_files_is_cleaned_and_a_foreign_file_kept(tmp_path):
    def folder(name, files):
        d = tmp_path / (runner.COPY_PREFIX + name)
        d.mkdir()
        for f in files + [runner.COPY_LOCK]:
            (d / f).write_bytes(b"x")
        return d
    ours = folder("a", [runner.COPY_NAME, runner.LIGHT_NAME, F.file_name(0, 2, "test", "float32"),
                        F.file_name(1, 0, "train", "float64") + ".tmp-12-0a1b2c3d"])
    foreign = folder("b", [runner.COPY_NAME, "fold-notes.npy"])
    assert runner.clean_abandoned_copies(tmp_path) == [str(ours)]
    assert foreign.exists()


def test_closing_stops_the_preparation_after_the_fold_under_way(tmp_path, monkeypatch):
    plan, data, folds, _ = _specs("kiln_batches.csv", "passes_inspection")
    gate, started = threading.Event(), []
    real = F.write_fold

    def slow(folder, d, r, f, tr, te, kinds):
        started.append((r, f))
        gate.wait(30)
        return real(folder, d, r, f, tr, te, kinds)
    monkeypatch.setattr(F, "write_fold", slow)
    shared = F.SharedFolds(data, tmp_path, folds, {k: {F.FLOAT32} for k in sorted(folds)})
    while not started:
        threading.Event().wait(0.01)
    threading.Timer(0.2, gate.set).start()
    shared.close()
    assert started == [(0, 0)]  # the folds after it were never begun
    assert shared.files(0, 1, F.FLOAT32) is None  # and nobody waits for them
    assert sorted(os.listdir(tmp_path)) == ["fold-0-0-test-float32.npy",
                                            "fold-0-0-train-float32.npy"]


def test_a_pool_task_hands_the_heap_back_after_it_runs(tmp_path, monkeypatch):
    """Wiring: after each task in a pool worker, glibc's ``malloc_trim`` (where there is
    one) runs once, also when the task raised."""
    calls = []
    monkeypatch.setattr(T, "_release_heap", lambda: calls.append(1))
    monkeypatch.setattr(T, "_worker_data", lambda *a: None)
    monkeypatch.setattr(T, "run_trials", lambda data, specs: [{"ok": 1}])
    assert T.run_trials_from_file("t", "p", [{}]) == [{"ok": 1}]
    monkeypatch.setattr(T, "run_trials", lambda data, specs: 1 / 0)
    with pytest.raises(ZeroDivisionError):
        T.run_trials_from_file("t", "p", [{}])
    assert calls == [1, 1]
    monkeypatch.undo()
    T._release_heap()  # the real one runs on this platform without error
    assert len(T._TRIM) == 1


def test_a_sweep_given_the_frame_its_plan_was_built_from_does_not_read_the_file_again(
        tmp_path, monkeypatch):
    """``run_sweep(plan, frame=df)``: the table is not read again (the file's fingerprint
    is still taken from the file), and the stored sweep is the one read from the file."""
    from workbench.data import intake
    from workbench.data.intake import load_table

    table = SAMPLES / "kiln_batches.csv"
    df, _ = load_table(table)
    plan = build_plan(table, "passes_inspection", hidden="relu", layers=["4"], folds=2,
                      repeats=1, epochs=2, df=df)
    got = {}
    for name, frame in (("file", None), ("frame", df)):
        if frame is not None:
            monkeypatch.setattr(intake, "load_table", lambda *a, **k: 1 / 0)
        with Store(tmp_path / f"{name}.sqlite") as st:
            out = run_sweep(plan, store=st, backend="inline", frame=frame, sweep_id="s")
            got[name] = (_stored(st, out.sweep_id), st.get_sweep("s")["fingerprint"])
    assert got["frame"] == got["file"]
    with Store(tmp_path / "file.sqlite") as st, pytest.raises(Exception, match="give no frame"):
        run_sweep(store=st, resume="s", frame=df)


def test_a_fold_file_goes_when_its_last_trial_is_done(tmp_path):
    """Counted needs: each kind's files are removed when its count of trials came back; a
    float32 request served by the float64 files keeps them while either kind needs them;
    needs given as plain sets are never removed before the folder."""
    plan, data, folds, specs = _specs("kiln_batches.csv", "passes_inspection")
    net = [s for s in specs if s["config"].get("kind") != "baseline" and s["fold"] == 0][0]
    base = [s for s in specs if s["config"].get("kind") == "baseline" and s["fold"] == 0][0]
    shared = F.SharedFolds(data, tmp_path, folds, {(0, 0): {F.FLOAT32: 2, F.FLOAT64: 1},
                                                   (0, 1): {F.FLOAT32}})
    net_files = shared.files(0, 0, F.FLOAT32)
    base_files = shared.files(0, 0, F.FLOAT64)
    assert shared.files(0, 1, F.FLOAT32)
    shared.close()
    shared.done([net])
    assert all(os.path.exists(p) for p in net_files.values())
    shared.done([net, base, dict(net, fold=1)])  # one too many is ignored
    assert not any(os.path.exists(p) for p in (*net_files.values(), *base_files.values()))
    assert sorted(os.listdir(tmp_path)) == ["fold-0-1-test-float32.npy",
                                            "fold-0-1-train-float32.npy"]
    for p in os.listdir(tmp_path):
        os.unlink(tmp_path / p)
    alias = {F.FLOAT32: {"train": str(tmp_path / "a"), "test": str(tmp_path / "b")}}
    alias[F.FLOAT64] = alias[F.FLOAT32]
    for p in alias[F.FLOAT32].values():
        Path(p).write_bytes(b"x")
    shared._files[(0, 0)] = alias
    shared._left.update({((0, 0), F.FLOAT32): 1, ((0, 0), F.FLOAT64): 1})
    shared.done([net])
    assert sorted(os.listdir(tmp_path)) == ["a", "b"]  # the baseline still needs them
    shared.done([base])
    assert os.listdir(tmp_path) == []


def test_a_shared_sweep_cancelled_and_resumed_on_one_process_stores_the_same(tmp_path,
                                                                           monkeypatch):
    """One worker process, shared features, cancelled after a few trials and resumed
    (shared again): the same stored trials as one uninterrupted sweep on the workers'
    own features."""
    monkeypatch.setattr(F, "SHARED_MIN_BYTES", 0)
    plan = build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection", hidden="relu,tanh",
                      layers=["6"], folds=3, repeats=1, epochs=3)
    own = _sweep(tmp_path, monkeypatch, plan, False, "own", jobs=1)
    monkeypatch.setattr(runner, "SHARE_FOLDS", True)
    cancel = threading.Event()
    seen = []

    def on_event(event):
        if event["type"] == "trial_finished":
            seen.append(event)
            if len(seen) == 2:
                cancel.set()
    with Store(tmp_path / "resumed.sqlite") as st:
        out = run_sweep(plan, store=st, jobs=1, on_event=on_event, cancel=cancel)
        assert out.state == "interrupted" and 2 <= out.n_finished < plan.n_trials
        again = run_sweep(store=st, resume=out.sweep_id, jobs=1)
        assert again.state == "finished"
        assert _stored(st, out.sweep_id) == own
