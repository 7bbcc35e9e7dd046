"""The SQLite store: WAL, one transaction per trial, versioned schema, damaged files untouched.

References: SQLite's documentation of ``PRAGMA journal_mode`` (WAL), ``PRAGMA
user_version`` and the database header string "SQLite format 3\\0"; platformdirs'
``user_data_dir`` for the default location.
"""

import hashlib
import os
import sqlite3
import subprocess
import sys

import platformdirs
import pytest

from workbench.errors import InputError
from workbench.sweep import store as store_mod
from workbench.sweep.store import (
    SCHEMA_VERSION,
    Store,
    SweepLock,
    default_store_path,
    lock_held,
    table_fingerprint,
)

PLAN = {"folds": 2, "repeats": 1, "metric": "r2", "table": "t.csv", "target": "y",
        "task": "regression", "target_kind": "signed"}
CONFIGS = [{"index": 0, "hidden": "relu", "head": "identity", "layers": [8],
            "learning_rate": 0.001, "alpha": 0.0001, "engine": "sklearn"}]
FP = {"sha256": "0" * 64, "rows": 10, "cols": 2, "columns": ["x", "y"], "file": "t.csv"}


def _trial(repeat=0, fold=0, score=0.5):
    return {"config_index": 0, "repeat": repeat, "fold": fold, "status": "done",
            "test_score": score, "train_score": score + 0.1, "fit_seconds": 0.01, "epochs": 3,
            "engine": "sklearn", "n_train": 5, "n_test": 5,
            "history": {"loss": [1.0, 0.5, 0.25]}, "health": {"dead": [0.0]}}


def _digest(path):
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


def test_round_trip_wal_and_version(tmp_path):
    path = tmp_path / "s.sqlite"
    with Store(path) as st, SweepLock(path, "a") as lock:
        assert lock.acquire()  # what run_sweep holds while it runs the sweep
        st.create_sweep("a", PLAN, FP, CONFIGS)
        st.add_trial("a", _trial(0, 0, 0.5))
        assert st.schema_version == SCHEMA_VERSION
        mode = st._conn.execute("PRAGMA journal_mode").fetchone()[0]
        assert mode == "wal"
        sweeps = st.list_sweeps()
        assert [s["id"] for s in sweeps] == ["a"] and sweeps[0]["state"] == "running"
        assert sweeps[0]["n_trials"] == 2 and sweeps[0]["n_stored"] == 1
        t = st.trials("a")[0]
        assert t["history"]["loss"] == [1.0, 0.5, 0.25] and t["test_score"] == 0.5
        assert st.finished_keys("a") == {(0, 0, 0)}
        # a trial is stored exactly once: the primary key refuses a second copy
        with pytest.raises(sqlite3.IntegrityError):
            st.add_trial("a", _trial(0, 0, 0.7))
        st.set_state("a", "finished")
        assert st.get_sweep("a")["state"] == "finished"
        with pytest.raises(InputError, match="no sweep 'zz'"):
            st.get_sweep("zz")


def test_committed_trials_are_visible_to_another_connection_at_once(tmp_path):
    path = tmp_path / "s.sqlite"
    writer = Store(path)
    writer.create_sweep("a", PLAN, FP, CONFIGS)
    reader = Store(path)
    assert reader.finished_keys("a") == set()
    writer.add_trial("a", _trial(0, 1))
    assert reader.finished_keys("a") == {(0, 0, 1)}
    writer.close()
    reader.close()


def test_default_location_is_the_platformdirs_user_data_dir():
    expected = platformdirs.user_data_dir("activation-workbench", appauthor=False)
    assert str(default_store_path().parent) == expected
    # conftest points XDG_DATA_HOME at a temporary folder
    assert expected.startswith(os.environ["XDG_DATA_HOME"])
    st = Store()
    assert st.path.exists()
    st.close()


def test_a_damaged_file_is_reported_and_left_untouched(tmp_path):
    path = tmp_path / "junk.sqlite"
    path.write_bytes(b"this is not a database at all\n" * 50)
    before = _digest(path)
    with pytest.raises(InputError, match="left untouched"):
        Store(path)
    assert _digest(path) == before
    # a real SQLite file whose pages were overwritten
    good = tmp_path / "good.sqlite"
    with Store(good) as st:
        st.create_sweep("a", PLAN, FP, CONFIGS)
        st._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    raw = bytearray(good.read_bytes())
    raw[100:4096 * 2] = b"\xff" * (4096 * 2 - 100)
    good.write_bytes(bytes(raw))
    for extra in ("-wal", "-shm"):
        p = good.with_name(good.name + extra)
        if p.exists():
            p.unlink()
    before = _digest(good)
    with pytest.raises(InputError, match="left untouched"):
        Store(good)
    assert _digest(good) == before


def test_foreign_database_and_newer_schema_are_refused(tmp_path):
    other = tmp_path / "other.sqlite"
    con = sqlite3.connect(other)
    con.execute("CREATE TABLE people (name TEXT)")
    con.commit()
    con.close()
    before = _digest(other)
    with pytest.raises(InputError, match="not a workbench store"):
        Store(other)
    assert _digest(other) == before

    newer = tmp_path / "newer.sqlite"
    Store(newer).close()
    con = sqlite3.connect(newer)
    con.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 1}")
    con.commit()
    con.close()
    with pytest.raises(InputError, match="newer workbench"):
        Store(newer)


def test_older_schema_is_migrated_step_by_step(tmp_path, monkeypatch):
    path = tmp_path / "old.sqlite"
    with Store(path) as st:
        st.create_sweep("a", PLAN, FP, CONFIGS)
        st.add_trial("a", _trial())
    # pretend the program moved on to schema version + 1 with one migration step
    monkeypatch.setattr(store_mod, "SCHEMA_VERSION", SCHEMA_VERSION + 1)
    monkeypatch.setattr(store_mod, "MIGRATIONS",
                        {SCHEMA_VERSION: "ALTER TABLE trials ADD COLUMN note TEXT"})
    with Store(path) as st:
        assert st.schema_version == SCHEMA_VERSION + 1
        cols = [r[1] for r in st._conn.execute("PRAGMA table_info(trials)")]
        assert "note" in cols
        assert st.finished_keys("a") == {(0, 0, 0)}
    # without a step for the version found, the store is refused with a message
    monkeypatch.setattr(store_mod, "SCHEMA_VERSION", SCHEMA_VERSION + 2)
    monkeypatch.setattr(store_mod, "MIGRATIONS", {})
    with pytest.raises(InputError, match="cannot migrate"):
        Store(path)


def _hold_lock_in_a_child(path, sweep_id):
    """A child process that takes the sweep's lock, says so, and waits to be killed."""
    code = ("import sys, time; from workbench.sweep.store import SweepLock; "
            f"lock = SweepLock({str(path)!r}, {sweep_id!r}); "
            "print('held' if lock.acquire() else 'refused', flush=True); "
            "sys.stdin.read()")
    proc = subprocess.Popen([sys.executable, "-c", code], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, text=True)
    return proc, proc.stdout.readline().strip()


def test_running_is_judged_by_the_lock_not_by_the_process_id_or_host(tmp_path):
    """A reused process id or another host name cannot keep a sweep 'running' (issue 13,
    item 4): only a process holding the sweep's lock can."""
    path = tmp_path / "s.sqlite"
    with Store(path) as st:
        st.create_sweep("a", PLAN, FP, CONFIGS)
        # the stored process id is alive (this very process) and the host is another one:
        # the former rule said "still running" forever; nobody holds the lock
        st._conn.execute("UPDATE sweeps SET pid=?, host='another-container' WHERE id='a'",
                         (os.getpid(),))
        assert st.get_sweep("a")["state"] == "interrupted"
        assert st.list_sweeps()[0]["state"] == "interrupted"
        proc, said = _hold_lock_in_a_child(path, "a")
        try:
            assert said == "held"
            assert lock_held(path, "a")
            assert st.get_sweep("a")["state"] == "running"
            mine = SweepLock(path, "a")
            assert not mine.acquire()  # taken by the child
        finally:
            proc.kill()
            proc.wait()
        # the kernel dropped the dead child's lock; its file is still there, and taken over
        assert SweepLock(path, "a").path.exists()
        assert st.get_sweep("a")["state"] == "interrupted"
        assert mine.acquire() and lock_held(path, "a")
        assert st.get_sweep("a")["state"] == "running"
        mine.release()
        assert not mine.path.exists() and not lock_held(path, "a")


def test_two_locks_of_one_sweep_exclude_each_other_in_one_process(tmp_path):
    """flock locks belong to the open file: two threads of the window cannot both run it."""
    a, b = SweepLock(tmp_path / "s.sqlite", "x"), SweepLock(tmp_path / "s.sqlite", "x")
    assert a.acquire() and not b.acquire()
    a.release()
    assert b.acquire()
    b.release()
    # an id that is no safe file name gets a hashed one, still beside the store
    odd = SweepLock(tmp_path / "s.sqlite", "../../etc/passwd")
    assert odd.path.parent == tmp_path / "s.sqlite.locks" and odd.path.suffix == ".lock"


def test_fingerprint_is_the_files_sha256_shape_and_columns(tmp_path):
    import pandas as pd

    p = tmp_path / "t.csv"
    p.write_text("x,y\n1,2\n3,4\n")
    df = pd.read_csv(p)
    fp = table_fingerprint(p, df)
    assert fp["sha256"] == hashlib.sha256(p.read_bytes()).hexdigest()
    assert (fp["rows"], fp["cols"], fp["columns"]) == (2, 2, ["x", "y"])


@pytest.mark.parametrize("labels", [["no", "yes"], [3, 7, 11], [False, True]])
def test_rows_round_trip_with_the_labels_json_and_numpy_give(tmp_path, labels):
    """The class labels come back as JSON has them (the json module is the reference), the
    codes and folds as integers, the regression target as float64 bit for bit."""
    import json

    import numpy as np

    from workbench.sweep.trials import target_codes

    y = np.array([labels[i % len(labels)] for i in range(7)], dtype=object
                 if isinstance(labels[0], str) else None)
    classes, codes = target_codes(y)
    folds = np.array([[0, 1, 0, 1, 0, 1, 0], [1, 1, 0, 0, 1, 0, 0]])
    target = np.linspace(-1e300, 3.25, 7)
    with Store(tmp_path / "s.sqlite") as st:
        st.create_sweep("c", PLAN, FP, CONFIGS, rows={"target": codes, "folds": folds,
                                                      "classes": list(classes)})
        st.create_sweep("r", PLAN, FP, CONFIGS)
        st.put_rows("r", target, folds[:1])
        got = st.sweep_rows("c")
        assert got["classes"] == json.loads(json.dumps(labels))
        np.testing.assert_array_equal(np.asarray(got["classes"], dtype=object)[got["target"]], y)
        np.testing.assert_array_equal(got["folds"], folds)
        reg = st.sweep_rows("r")
        assert reg["classes"] is None and reg["target"].tobytes() == target.tobytes()
        assert st.sweep_rows("nope") is None
        with pytest.raises(ValueError, match="the target has 3 rows"):
            st.put_rows("x", target[:3], folds)


def test_a_schema_2_store_gains_the_stopped_table_and_keeps_its_sweeps(tmp_path):
    """Schema 3 adds ``stopped`` (racing); a store written by schema 2 is migrated in place,
    its sweeps and trials kept, and ends with the tables of a new store."""
    old, new = tmp_path / "old.sqlite", tmp_path / "new.sqlite"
    with Store(old) as st:
        st.create_sweep("a", PLAN, FP, CONFIGS)
        st.add_trial("a", _trial())
    con = sqlite3.connect(old)
    con.execute("DROP TABLE stopped")
    con.execute("PRAGMA user_version = 2")
    con.commit()
    con.close()
    with Store(old) as st:
        assert st.schema_version == SCHEMA_VERSION == 3
        assert st.finished_keys("a") == {(0, 0, 0)} and st.stopped("a") == {}
    Store(new).close()

    def schema(path):
        con = sqlite3.connect(path)
        rows = sorted(con.execute("SELECT name, sql FROM sqlite_master WHERE type='table'"))
        con.close()
        return rows

    assert schema(old) == schema(new)


def test_a_stopped_configuration_is_recorded_once(tmp_path):
    record = {"config_index": 0, "after_repeat": 0, "after_fold": 1, "n_scores": 2,
              "best_index": 1, "difference": -0.5, "p_worse": 0.995, "rope": 0.01,
              "threshold": 0.99, "reason": "worse"}
    with Store(tmp_path / "s.sqlite") as st:
        st.create_sweep("a", PLAN, FP, CONFIGS)
        st.add_stopped("a", record)
        st.add_stopped("a", dict(record, after_fold=0, reason="again"))  # the first stays
        (got,) = st.stopped("a").values()
        assert {k: got[k] for k in record} == record
        assert got["stopped"]
        assert st.stopped("b") == {}
