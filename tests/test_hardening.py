"""Hostile cases of issue 13 against the sweep: locks, kills, read-only and full stores,
damaged rows, wrong clusters, option limits, leftovers and messages that can be followed.

Each test reproduces one case: bad input gives one line on stderr, exit status 2, and
nothing stored is lost. Subprocesses are waited for with bounded waits on their output
or on psutil, never with sleeps. References: flock(2) (a lock belongs to the open file
and is released when its holder dies); SQLite's result codes SQLITE_READONLY ("attempt
to write a readonly database") and SQLITE_FULL ("database or disk is full"); the
``identity`` operation of Dask's scheduler RPC.
"""

from __future__ import annotations

import decimal
import http.server
import json
import math
import os
import queue
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import tempfile
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import psutil
import pytest

from workbench.cli import main
from workbench.sweep import runner
from workbench.sweep.plan import MAX_REPEATS, SweepPlan, build_plan
from workbench.sweep.runner import COPY_LOCK, COPY_NAME, clean_abandoned_copies, run_sweep
from workbench.sweep.store import Store, SweepLock, lock_held

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
KILN = SAMPLES / "kiln_batches.csv"
TINY = ["--hidden", "relu", "--layers", "4", "--folds", "2", "--repeats", "1", "--epochs", "3"]


# --------------------------------------------------------------------------- helpers


def _one_line(capsys) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    return lines[0]


def _table(folder: Path, n: int = 40, seed: int = 0) -> Path:
    """A small binary table with two real features."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    df = pd.DataFrame({"reading": x.round(3), "site": rng.choice(["north", "south"], n),
                       "passed": np.where(x + 0.3 * rng.normal(size=n) > 0, "yes", "no")})
    path = folder / "t.csv"
    df.to_csv(path, index=False)
    return path


def _scores(store_path, sweep_id) -> dict:
    with Store(store_path) as st:
        return {(t["config_index"], t["repeat"], t["fold"]): t["test_score"]
                for t in st.trials(sweep_id, with_history=False) + st.baseline_trials(sweep_id)}


def _start(argv, store) -> subprocess.Popen:
    """``workbench sweep ARGV`` in a subprocess of its own session, stderr piped."""
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "workbench", "sweep", *argv, "--store",
                             str(store)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            text=True, env=env, start_new_session=True)


def _read_until_stored(proc, n_done=1) -> list[str]:
    """Read progress lines until ``n_done`` trials are stored; return the lines read."""
    lines = []
    for line in proc.stderr:
        lines.append(line)
        m = re.search(r"\] (\d+)/(\d+)", line)
        if m and int(m.group(1)) >= n_done:
            return lines
    raise AssertionError("the sweep ended before a trial was stored: " + "".join(lines))


def _copy_of(pid: int) -> Path | None:
    """The table-copy folder made by process ``pid`` (its lock file names it)."""
    for folder in Path(tempfile.gettempdir()).glob(runner.COPY_PREFIX + "*"):
        try:
            if (folder / COPY_LOCK).read_text().split() == [str(pid)]:
                return folder
        except OSError:
            continue
    return None


def _gone_within(procs, seconds) -> list:
    """psutil's bounded wait for processes to end; return the ones still alive."""
    _, alive = psutil.wait_procs(procs, timeout=seconds)
    return alive


def _kill_group(proc):
    if proc.poll() is None:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()


@pytest.fixture
def tmpfs(tmp_path):
    """Mount a small tmpfs (root only): ``make(size) -> folder``; ``ro(folder)`` remounts
    it read-only (as root, permissions do not stop writes; a read-only mount does)."""
    mounted = []

    def make(size="8m"):
        folder = tmp_path / f"mnt{len(mounted)}"
        folder.mkdir()
        if os.geteuid() != 0:
            pytest.skip("mounting a tmpfs needs root")
        done = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size}", "tmpfs",
                               str(folder)], capture_output=True, text=True)
        if done.returncode != 0:
            pytest.skip(f"cannot mount a tmpfs here: {done.stderr.strip()}")
        mounted.append(folder)
        return folder

    def ro(folder):
        subprocess.run(["mount", "-o", "remount,ro", str(folder)], check=True)

    make.ro = ro
    yield make
    for folder in mounted:
        subprocess.run(["umount", "-l", str(folder)], capture_output=True)


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    """One small finished sweep: ``{"store", "sweep_id", "table"}`` (copy the store to change it)."""
    folder = tmp_path_factory.mktemp("hardening")
    table = _table(folder)
    store = folder / "s.sqlite"
    out = folder / "r.json"
    assert main(["sweep", str(table), "--target", "passed", *TINY, "--jobs", "1", "--store",
                 str(store), "--json", str(out), "--quiet"]) == 0
    return {"store": store, "sweep_id": json.loads(out.read_text())["sweep_id"], "table": table}


def _copy_store(finished, folder: Path) -> Path:
    dst = folder / "s.sqlite"
    shutil.copyfile(finished["store"], dst)
    return dst


# --------------------------------------------------------------------------- item 4: locks


def test_a_lock_left_by_a_killed_sweep_is_taken_over_and_its_workers_and_copy_go(tmp_path,
                                                                                 capsys):
    """SIGKILL of the sweep alone (not its group): its pool workers end with it, its table
    copy is left (nobody ran its clean-up) and removed by the next sweep, its lock is free
    although the stored process id is alive (this very process) on another host."""
    store = tmp_path / "s.sqlite"
    plan = ["--hidden", "relu,tanh", "--layers", "8", "--folds", "3", "--repeats", "3",
            "--epochs", "60", "--jobs", "2"]
    proc = _start([str(KILN), "--target", "passes_inspection", *plan], store)
    try:
        lines = _read_until_stored(proc)
        sweep_id = re.search(r"sweep (\S+): \d+ of", "".join(lines)).group(1)
        workers = psutil.Process(proc.pid).children(recursive=True)
        copy = _copy_of(proc.pid)
        assert workers and copy is not None and (copy / COPY_NAME).exists()
        assert lock_held(store, sweep_id)
        os.kill(proc.pid, signal.SIGKILL)  # the sweep only: its workers are not signalled
        proc.wait()
    finally:
        _kill_group(proc)
    assert _gone_within(workers, 30) == []
    assert copy.exists()  # abandoned: its process could not clean up
    assert SweepLock(store, sweep_id).path.exists() and not lock_held(store, sweep_id)
    with Store(store) as st:
        st._conn.execute("UPDATE sweeps SET pid=?, host='another-container' WHERE id=?",
                         (os.getpid(), sweep_id))
        assert st.get_sweep(sweep_id)["state"] == "interrupted"
        n_trials = st.get_sweep(sweep_id)["n_trials"]
    assert main(["sweep", "--resume", sweep_id, "--store", str(store), "--jobs", "2",
                 "--quiet"]) == 0
    assert not copy.exists()  # the next sweep removed the abandoned copy
    with Store(store) as st:
        keys = [(t["config_index"], t["repeat"], t["fold"])
                for t in st.trials(sweep_id, with_history=False)]
        assert st.get_sweep(sweep_id)["state"] == "finished"
    assert len(keys) == len(set(keys)) == n_trials
    assert not SweepLock(store, sweep_id).path.exists()


def _first_lines(procs) -> list[str]:
    """The first stderr line of each process, read by a thread each (bounded by a queue)."""
    got: queue.Queue = queue.Queue()

    def read(i, proc):
        got.put((i, proc.stderr.readline()))

    for i, proc in enumerate(procs):
        threading.Thread(target=read, args=(i, proc), daemon=True).start()
    first = [None] * len(procs)
    for _ in procs:
        i, line = got.get(timeout=180)
        first[i] = line
    return first


def test_two_resumes_at_once_one_runs_and_sigterm_leaves_nothing_behind(tmp_path):
    """Two --resume of one sweep started together: exactly one runs, the other says so in one
    line (exit 2). SIGTERM then stops the runner like Ctrl-C: exit 130, its workers and its
    table copy gone, the lock free, the sweep resumable."""
    store = tmp_path / "s.sqlite"
    plan = build_plan(KILN, "passes_inspection", hidden="relu,tanh", layers=["8"], folds=5,
                      repeats=20, epochs=60)
    cancel = threading.Event()
    cancel.set()
    with Store(store) as st:
        sweep_id = run_sweep(plan, store=st, backend="inline", cancel=cancel).sweep_id
    procs = [_start(["--resume", sweep_id, "--jobs", "2"], store) for _ in range(2)]
    try:
        first = _first_lines(procs)
        runs = [i for i, line in enumerate(first) if line.startswith(f"resuming {sweep_id}")]
        assert len(runs) == 1, first
        winner, loser = procs[runs[0]], procs[1 - runs[0]]
        assert loser.wait(timeout=120) == 2
        line = first[1 - runs[0]] + loser.stderr.read()
        assert line.count("\n") == 1 and "Traceback" not in line
        assert f"sweep {sweep_id} is being run by another process" in line
        _read_until_stored(winner)
        workers = psutil.Process(winner.pid).children(recursive=True)
        copy = _copy_of(winner.pid)
        assert workers and copy is not None
        os.kill(winner.pid, signal.SIGTERM)  # the process only, as `kill PID` does
        err = winner.stderr.read()
        assert winner.wait(timeout=120) == 130, err
    finally:
        for proc in procs:
            _kill_group(proc)
    assert f"workbench sweep --resume {sweep_id}" in err
    assert _gone_within(workers, 30) == []
    assert not copy.exists() and not lock_held(store, sweep_id)
    with Store(store) as st:
        sw = st.get_sweep(sweep_id)
    assert sw["state"] == "interrupted" and 1 <= sw["n_stored"] < sw["n_trials"]


def test_a_sweep_held_by_another_process_is_refused_in_one_line(finished, tmp_path, capsys):
    store = _copy_store(finished, tmp_path)
    sid = finished["sweep_id"]
    with Store(store) as st:
        st._conn.execute("UPDATE sweeps SET state='running' WHERE id=?", (sid,))
        for table in ("predictions", "trials"):
            st._conn.execute(f"DELETE FROM {table} WHERE sweep_id=? AND fold=1", (sid,))
    with SweepLock(store, sid) as lock:
        assert lock.acquire()  # as a running sweep holds it
        assert main(["sweep", "--resume", sid, "--store", str(store), "--quiet"]) == 2
        assert "is being run by another process" in _one_line(capsys)
    assert main(["sweep", "--resume", sid, "--store", str(store), "--quiet", "--jobs", "1"]) == 0


# --------------------------------------------------------------------------- item 5: stores


def test_a_read_only_store_lists_and_shows_but_a_sweep_is_one_line(finished, tmpfs, tmp_path,
                                                                   capsys):
    folder = tmpfs("4m")
    store = _copy_store(finished, folder)
    before = store.read_bytes()
    tmpfs.ro(folder)
    assert main(["history", "--store", str(store), "--json"]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert [r["sweep_id"] for r in listed] == [finished["sweep_id"]]
    assert main(["show", finished["sweep_id"], "--store", str(store), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["sweep_id"] == finished["sweep_id"]
    assert main(["sweep", str(finished["table"]), "--target", "passed", *TINY, "--store",
                 str(store), "--quiet"]) == 2
    line = _one_line(capsys)
    assert "cannot be written" in line and "read-only" in line and "--store" in line
    assert store.read_bytes() == before


def _fill(path: Path) -> int:
    """Write ``path`` until the disk is full; return the bytes written."""
    written = 0
    block = b"\0" * 65536
    with open(path, "wb") as fh:
        try:
            while True:
                fh.write(block)
                fh.flush()
                written += len(block)
        except OSError:
            pass
    return written


def test_a_full_disk_mid_sweep_is_one_line_and_resume_completes_exactly(tmpfs, tmp_path,
                                                                        capsys, monkeypatch):
    """The disk holding the store fills up after the first network trial: one line, exit 2,
    the stored trials kept; after freeing space --resume gives an uninterrupted run's scores."""
    from workbench.commands import sweep as sweep_command

    folder = tmpfs("8m")
    store = folder / "s.sqlite"
    table = _table(tmp_path)
    filler = folder / "filler"

    class FillingProgress(sweep_command.Progress):
        def __call__(self, ev):
            super().__call__(ev)
            if ev["type"] == "trial_finished" and not filler.exists():
                assert _fill(filler) > 0

    monkeypatch.setattr(sweep_command, "Progress", FillingProgress)
    argv = ["--hidden", "relu,tanh", "--layers", "8", "--folds", "3", "--repeats", "2",
            "--epochs", "5"]
    assert main(["sweep", str(table), "--target", "passed", *argv, "--jobs", "1", "--store",
                 str(store), "--quiet"]) == 2
    line = _one_line(capsys)
    assert "is full" in line and "database or disk is full" in line
    monkeypatch.undo()
    with Store(store) as st:
        (sw,) = st.list_sweeps()
        assert sw["state"] == "interrupted" and 1 <= sw["n_stored"] < sw["n_trials"]
        kept = {k: v for k, v in _scores(store, sw["id"]).items()}
    filler.unlink()
    assert main(["sweep", "--resume", sw["id"], "--store", str(store), "--jobs", "1",
                 "--quiet"]) == 0
    after = _scores(store, sw["id"])
    assert all(after[k] == v for k, v in kept.items())  # nothing stored was lost
    plan = SweepPlan.from_dict(sw["plan"])
    with Store(tmp_path / "ref.sqlite") as ref:
        fresh = run_sweep(plan, store=ref, backend="inline")
    assert after == _scores(tmp_path / "ref.sqlite", fresh.sweep_id)


def _set_raw(store: Path, sql: str, args=()):
    con = sqlite3.connect(store)
    con.execute(sql, args)
    con.commit()
    con.close()


def test_a_non_utf8_byte_in_a_stored_row_shows_what_is_readable(finished, tmp_path, capsys):
    store = _copy_store(finished, tmp_path)
    sid = finished["sweep_id"]
    with Store(store) as st:
        plan = json.dumps(st.get_sweep(sid)["plan"])
    raw = plan.replace('"target": "passed"', '"target": "pass\u00e9d"').encode()
    raw = raw.replace("\u00e9".encode(), b"\xe9")  # Latin-1 byte, not UTF-8
    _set_raw(store, "UPDATE sweeps SET plan = CAST(? AS TEXT) WHERE id=?", (raw, sid))
    _set_raw(store, "UPDATE trials SET error = CAST(? AS TEXT) WHERE sweep_id=? AND fold=0",
             (b"bad \xff byte", sid))
    assert main(["show", sid, "--store", str(store), "--json"]) == 0
    shown = json.loads(capsys.readouterr().out)
    assert shown["target"] == "pass\ufffdd"
    assert main(["history", "--store", str(store)]) == 0
    assert "pass\ufffdd" in capsys.readouterr().out


@pytest.mark.parametrize("column, words", [
    ("plan", "'s stored plan"), ("health", "configuration 0, repeat 0, fold 1")])
def test_damaged_json_in_a_stored_row_is_one_line_naming_it(finished, tmp_path, capsys, column,
                                                            words):
    store = _copy_store(finished, tmp_path)
    sid = finished["sweep_id"]
    if column == "plan":
        _set_raw(store, "UPDATE sweeps SET plan = '{\"table\": ' WHERE id=?", (sid,))
    else:
        _set_raw(store, "UPDATE trials SET health = '[1, 2' WHERE sweep_id=? AND config_index=0 "
                        "AND repeat=0 AND fold=1", (sid,))
    before = store.read_bytes()
    assert main(["show", sid, "--store", str(store)]) == 2
    line = _one_line(capsys)
    assert sid in line and words in line and "damaged" in line
    assert store.read_bytes() == before
    assert main(["history", "--store", str(store), "--json"]) == 0  # the list still reads
    (row,) = json.loads(capsys.readouterr().out)
    assert row["state"] == ("damaged" if column == "plan" else "finished")


# --------------------------------------------------------------------------- item 6: clusters


@pytest.fixture
def http_port():
    """A small HTTP server on the loopback interface: something that is not a scheduler."""
    class Quiet(http.server.BaseHTTPRequestHandler):
        def log_message(self, *args):  # the server's log is not the command's stderr
            pass

    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Quiet)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield server.server_address[1]
    server.shutdown()
    server.server_close()


def _closed_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.parametrize("address, words", [
    ("http", "not as a Dask scheduler"), ("closed", "cannot reach the Dask scheduler"),
    ("tls://127.0.0.1:8786", "uses tls://"), ("inproc://127.0.0.1/1/2", "uses inproc://"),
    ("ucx://127.0.0.1:8786", "uses ucx://")])
def test_a_wrong_cluster_is_one_line(finished, http_port, capsys, monkeypatch, tmp_path,
                                     address, words):
    monkeypatch.setattr(runner, "CONNECT_SECONDS", 2)
    if address == "http":
        address = f"tcp://127.0.0.1:{http_port}"
    elif address == "closed":
        address = f"tcp://127.0.0.1:{_closed_port()}"
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(finished["table"]), "--target", "passed", *TINY, "--cluster",
                 address, "--store", str(store), "--quiet"]) == 2
    line = _one_line(capsys)
    assert words in line and line.endswith("(set with --cluster)")
    with Store(store) as st:
        assert st.list_sweeps() == []  # refused before anything was stored


def test_an_http_server_as_cluster_ends_in_one_line_with_no_hang_on_exit(finished, http_port,
                                                                         tmp_path):
    """The whole command in a subprocess: one line, exit 2, and the process ends (the bound
    on the wait is a safety net for a hang, not a speed check)."""
    done = subprocess.run([sys.executable, "-m", "workbench", "sweep", str(finished["table"]),
                           "--target", "passed", *TINY, "--cluster",
                           f"tcp://127.0.0.1:{http_port}", "--store", str(tmp_path / "s.sqlite"),
                           "--quiet"], capture_output=True, text=True, timeout=150)
    assert done.returncode == 2
    assert done.stderr.count("\n") == 1 and "not as a Dask scheduler" in done.stderr


# --------------------------------------------------------------------------- items 8, 9: limits


@pytest.mark.parametrize("extra, words", [
    (["--layers", "64,,32"], "empty item"),
    (["--layers", "64,"], "empty item"),
    (["--hidden", ""], "empty text"),
    (["--hidden", "relu,,gelu"], "empty item"),
    (["--learning-rate", ""], "empty text"),
    (["--seed", "-1"], "the seed must be a whole number from 0 up"),
    (["--repeats", "1000000"], f"at most {MAX_REPEATS}"),
    (["--hidden", "all", "--learning-rate", "tune", "--layers", "8", "--layers", "16",
      "--layers", "32", "--layers", "64", "--folds", "10", "--repeats", "100"],
     "over the 100,000 a sweep may have"),
    (["--sheet", "Data"], "has no worksheets"),
    (["--table", "elsewhere.csv"], "--table is for --resume"),
])
def test_option_limits_are_checked_before_any_work(finished, tmp_path, capsys, extra, words):
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(finished["table"]), "--target", "passed", *extra, "--store",
                 str(store), "--quiet"]) == 2
    assert words in _one_line(capsys)
    assert not store.exists()  # nothing was started


@pytest.mark.parametrize("k", [2, 3, 5, 10, 20])
def test_the_repeat_limit_is_where_more_repeats_stop_narrowing_the_corrected_test(k):
    """MAX_REPEATS' reason, from Nadeau & Bengio (2003, Machine Learning 52, eq. of the
    corrected resampled t-test): Var = (1/J + n2/n1) s^2 with J = k r resamples and
    n2/n1 = 1/(k-1) for k folds. At r = MAX_REPEATS the standard error is within 0.5 % of
    its limit for endless repeats, and the project's test uses that very factor."""
    from workbench.sweep.statistics import corrected_ttest

    n = 1000.0
    n_test, n_train = n / k, n - n / k
    factor = lambda r: 1.0 / (k * r) + n_test / n_train  # noqa: E731 - the paper's factor
    assert math.sqrt(factor(MAX_REPEATS) / (n_test / n_train)) < 1.005
    assert math.sqrt(factor(MAX_REPEATS // 10) / (n_test / n_train)) > 1.004  # still narrowing
    # the project's corrected t uses the factor: t = mean / sqrt(factor * s^2)
    rng = np.random.default_rng(k)
    d = rng.normal(0.01, 0.05, size=k * MAX_REPEATS)
    t, _ = corrected_ttest(d, np.zeros_like(d), n_train, n_test)
    assert t == pytest.approx(d.mean() / math.sqrt(factor(MAX_REPEATS) * d.var(ddof=1)),
                              rel=1e-12)


def test_jobs_beyond_the_cores_are_capped_with_a_note(finished, tmp_path, capsys):
    cores = runner.default_jobs()
    assert main(["sweep", str(finished["table"]), "--target", "passed", *TINY, "--jobs", "999",
                 "--store", str(tmp_path / "s.sqlite")]) == 0
    err = capsys.readouterr().err
    assert f"--jobs 999 is more than the {cores} cores of this computer; using {cores}" in err
    started = re.search(r"on (\d+) worker process", err)
    assert started and int(started.group(1)) <= cores
    assert runner._POOL["workers"] <= cores
    assert _copy_of(os.getpid()) is None  # the table copy went with the sweep
    # the core caps it too (the window, scripts): never more workers than cores or trials
    plan = build_plan(finished["table"], "passed", hidden="relu", layers=["4"], folds=2,
                      repeats=1, epochs=3, baselines=[])
    events = []
    with Store(tmp_path / "s.sqlite") as st:
        run_sweep(plan, store=st, jobs=999, on_event=events.append)
    assert events[0]["workers"] <= min(cores, plan.n_trials)
    assert runner._POOL["workers"] <= cores


def test_a_table_with_no_usable_feature_is_refused_before_any_trial(tmp_path, capsys):
    """Item 8: an index-like column is not a feature; one line, exit 2, nothing stored."""
    table = tmp_path / "t.csv"
    pd.DataFrame({"row": range(30), "y": ["a", "b", "c"] * 10}).to_csv(table, index=False)
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(table), "--target", "y", *TINY, "--store", str(store)]) == 2
    assert "no column can be used as a feature" in _one_line(capsys)
    assert not store.exists()


# --------------------------------------------------------------------------- item 10: copies


def test_stopping_a_pool_with_trials_queued_leaves_no_thread_traceback(monkeypatch):
    """loky drops pending work on kill_workers=True but keeps the ids queued; its manager
    thread then died on a KeyError (a traceback on stderr after a full disk's one line)."""
    import time as _time

    from joblib.externals.loky import ProcessPoolExecutor

    failures = []
    monkeypatch.setattr(threading, "excepthook", lambda args: failures.append(args.exc_type))
    ex = ProcessPoolExecutor(max_workers=1)
    ex.submit(_time.sleep, 0).result()  # its worker is up
    # one trial running, one in the call queue, one whose id waits in loky's queue of ids
    futures = [ex.submit(_time.sleep, 2) for _ in range(3)]
    manager = ex._executor_manager_thread
    runner._shutdown(ex)
    manager.join(60)
    assert not manager.is_alive() and failures == []
    assert all(f.done() for f in futures)


def test_only_abandoned_copies_of_ours_are_removed(tmp_path):
    def copy(name, files, lock=True):
        folder = tmp_path / (runner.COPY_PREFIX + name)
        folder.mkdir()
        for f in files:
            (folder / f).write_text("x")
        if lock:
            (folder / COPY_LOCK).write_text("1\n")
        return folder

    abandoned = copy("dead", [COPY_NAME])
    running = copy("alive", [COPY_NAME])
    with_user_file = copy("mixed", [COPY_NAME, "notes.txt"])
    older = copy("old", [COPY_NAME], lock=False)  # made before copies carried a lock
    other = tmp_path / "unrelated"
    other.mkdir()
    (other / COPY_LOCK).write_text("1\n")
    code = ("import fcntl, os, sys; fd = os.open(sys.argv[1], os.O_RDONLY); "
            "fcntl.flock(fd, fcntl.LOCK_EX); print('held', flush=True); sys.stdin.read()")
    holder = subprocess.Popen([sys.executable, "-c", code, str(running / COPY_LOCK)],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        assert clean_abandoned_copies(tmp_path) == [str(abandoned)]
    finally:
        holder.kill()
        holder.wait()
    assert not abandoned.exists()
    assert running.exists() and with_user_file.exists() and older.exists() and other.exists()
    assert clean_abandoned_copies(tmp_path) == [str(running)]  # its holder is gone now


# --------------------------------------------------------------------------- item 11: messages


@pytest.mark.parametrize("ys, words, setting", [
    (["a", "b"] * 10 + ["rare"], "class 'rare' of the target has only 1 row", "--target"),
    (["a", "b", "a"], "cross-validation needs at least 4", "FILE"),
])
def test_fold_messages_can_be_followed(tmp_path, capsys, ys, words, setting):
    rng = np.random.default_rng(1)
    table = tmp_path / "t.csv"
    pd.DataFrame({"reading": rng.normal(size=len(ys)).round(3), "y": ys}).to_csv(table,
                                                                              index=False)
    assert main(["sweep", str(table), "--target", "y", *TINY, "--store",
                 str(tmp_path / "s.sqlite"), "--quiet"]) == 2
    line = _one_line(capsys)
    assert words in line and setting in line and "--folds 2" not in line


def test_a_parquet_decimal_column_is_read_as_numbers(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    from workbench.data.intake import load_table

    values = ["12.50", "-3.25", "0.01", "1000.00", None]
    path = tmp_path / "d.parquet"
    pq.write_table(pa.table({
        "price": pa.array([None if v is None else decimal.Decimal(v) for v in values],
                          type=pa.decimal128(10, 2)),
        "y": ["a", "b", "a", "b", "a"]}), path)
    df, report = load_table(path)
    assert df["price"].dtype == np.float64
    expected = [np.nan if v is None else float(decimal.Decimal(v)) for v in values]
    np.testing.assert_array_equal(df["price"].to_numpy(), expected)
    assert not any("mixes numbers and text" in w for w in report.warnings)


def test_overflow_warnings_become_one_note(tmp_path, capsys):
    rng = np.random.default_rng(2)
    x = rng.normal(size=40)
    table = tmp_path / "t.csv"
    pd.DataFrame({"x": x, "z": rng.normal(size=40), "y": x * 1e300}).to_csv(table, index=False)
    assert main(["sweep", str(table), "--target", "y", *TINY, "--jobs", "1", "--store",
                 str(tmp_path / "s.sqlite"), "--quiet"]) == 0
    line = _one_line(capsys)
    assert line.startswith("workbench: note: some values are too large") and "overflow" in line


def test_resume_takes_a_moved_table_and_still_checks_its_fingerprint(tmp_path, capsys):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    table = _table(tmp_path / "a")
    plan = build_plan(table, "passed", hidden="relu", layers=["4"], folds=2, repeats=1, epochs=3)
    cancel = threading.Event()
    cancel.set()
    store = tmp_path / "s.sqlite"
    with Store(store) as st:
        sid = run_sweep(plan, store=st, backend="inline", cancel=cancel).sweep_id
    moved = tmp_path / "b" / "t.csv"
    table.rename(moved)
    base = ["sweep", "--resume", sid, "--store", str(store), "--jobs", "1", "--quiet"]
    assert main(base) == 2
    line = _one_line(capsys)
    assert "is not found" in line and line.endswith("(set with --table)")
    other = _table(tmp_path, seed=5)  # same columns, other rows
    assert main([*base, "--table", str(other)]) == 2
    assert "fingerprint no longer matches" in _one_line(capsys)
    assert main([*base, "--table", str(moved)]) == 0
    with Store(store) as st:
        sw = st.get_sweep(sid)
    assert sw["state"] == "finished" and sw["plan"]["table"] == str(moved.resolve())
