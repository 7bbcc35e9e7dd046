"""The warm pool of local workers: started early, imports done in the worker."""

import os
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from workbench.sweep import pool, runner


def _loaded(names):
    return [n for n in names if n in sys.modules]


def test_the_pool_module_loads_no_heavy_library():
    # `workbench sweep` calls pool.prestart before it reads the table: importing the pool
    # must not pay for numpy / pandas / scikit-learn in the parent first
    code = ("import sys, workbench.sweep.pool; "
            "print(sorted(m for m in ('numpy', 'pandas', 'sklearn', 'scipy') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_a_prestarted_worker_has_imported_what_trials_need_before_its_first_trial():
    pool.prestart(1)
    ex = runner._warm_pool(1)  # the same pool the sweep then uses (reused, not restarted)
    assert runner._POOL["executor"] is ex
    loaded = ex.submit(_loaded, pool.TRIAL_MODULES).result(timeout=120)
    assert sorted(loaded) == sorted(pool.TRIAL_MODULES)


def test_the_runner_and_the_pool_count_the_same_cores():
    from joblib import cpu_count

    assert pool.default_jobs() == runner.default_jobs() == max(1, cpu_count())


def test_a_sweep_without_its_table_or_target_refuses_before_starting_any_worker():
    # the one-line refusal comes at once: no worker is started (or imported) for it
    code = ("import sys; from workbench.cli import main; "
            "rc = main(sys.argv[1:]); "
            "print(rc, 'workbench.sweep.pool' in sys.modules, 'numpy' in sys.modules)")
    table = str(Path(__file__).resolve().parents[1] / "sample_sets" / "kiln_batches.csv")
    for argv, words in (([table], "name the target column with --target COL"),
                        ([], "name the table: workbench sweep FILE --target COL")):
        out = subprocess.run([sys.executable, "-c", code, "sweep", *argv], capture_output=True,
                             text=True, check=True)
        assert out.stdout.split() == ["2", "False", "False"], out
        assert out.stderr.startswith("workbench: " + words) and out.stderr.count("\n") == 1


_GATE_PROBE = """
import json, os, sys, threading
from workbench.sweep import pool

seen = []

class Gate:  # records what was loaded when the worker waited, and for how long it would
    def wait(self, timeout):
        seen.append({"timeout": timeout,
                     "loaded": [m for m in pool.TRIAL_MODULES if m in sys.modules]})
        return True

first = threading.Semaphore(int(sys.argv[1]))  # 1: this worker is the first, 0: a later one
pool._start_worker(os.getppid(), Gate(), first)  # watches the test process
print(json.dumps({"waits": seen,
                  "loaded": sorted(m for m in pool.TRIAL_MODULES if m in sys.modules)}))
"""


@pytest.mark.parametrize("is_first", [1, 0])
def test_a_staggered_pools_later_workers_wait_for_the_gate_before_importing(is_first):
    import json

    out = subprocess.run([sys.executable, "-c", _GATE_PROBE, str(is_first)], capture_output=True,
                         text=True, check=True, timeout=300)
    got = json.loads(out.stdout)
    assert got["loaded"] == sorted(pool.TRIAL_MODULES)  # imported in the end, either way
    if is_first:
        assert got["waits"] == []  # the first worker imports at once
    else:  # a later one waits for the gate first, with nothing of the trial's loaded yet
        assert got["waits"] == [{"timeout": pool.GATE_SECONDS, "loaded": []}]


def test_open_gate_opens_the_staggered_pools_gate_and_the_first_worker_is_not_held_back():
    if runner._POOL:
        pool._drop_pool(runner._POOL["executor"])
    pool.prestart(2, staggered=True)
    ex = runner._warm_pool(2)  # the sweep's call: the same pool, reused
    gate = pool._POOL["gate"]
    assert runner._POOL["executor"] is ex and not gate.is_set()
    # the first worker is not held back: a job runs (trial modules loaded) before the gate
    assert ex.submit(_loaded, pool.TRIAL_MODULES).result(timeout=120) == list(pool.TRIAL_MODULES)
    pool.open_gate()
    assert gate.is_set()
    pool._drop_pool(ex)


def test_an_unstaggered_pool_has_no_gate():
    if runner._POOL:
        pool._drop_pool(runner._POOL["executor"])
    ex = runner._warm_pool(1)
    assert pool._POOL["gate"] is None
    pool.open_gate()  # nothing to open: no error
    pool._drop_pool(ex)


def test_stop_pool_stops_the_warm_pool_and_forgets_it():
    pool.prestart(2, staggered=True)  # its second worker waits at the gate, never opened
    ex = runner._warm_pool(2)
    pool.stop_pool()
    assert runner._POOL == {}
    for p in list(ex._processes.values()):
        # killed, not left to finish its imports or its gate; loky's manager thread may reap
        # the process first, and then join() can return before is_alive() turns False, so
        # the same 60 s bound is waited out by polling
        deadline = time.monotonic() + 60
        p.join(timeout=60)
        while p.is_alive() and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not p.is_alive()
    pool.stop_pool()  # no pool: nothing to do


def test_the_file_gate_elects_one_first_worker_opens_once_and_is_removed():
    """The staggered pool's gate is two plain files (no named semaphores for loky's resource
    tracker to clean up after killed workers): one ``acquire`` wins, ``wait`` returns False
    until :meth:`set`, the folder goes with :meth:`remove`. Reference: ``threading.Event``
    and ``threading.Semaphore(1).acquire(False)``, whose behaviour it must have."""
    import os

    gate = pool.FileGate()
    ref_event, ref_sem = threading.Event(), threading.Semaphore(1)
    assert [gate.acquire(False), gate.acquire(False)] == [ref_sem.acquire(False),
                                                          ref_sem.acquire(False)] == [True, False]
    assert gate.is_set() == ref_event.is_set() is False
    assert gate.wait(0.05) is ref_event.wait(0.05) is False
    gate.set()
    ref_event.set()
    assert gate.is_set() and gate.wait(0.0) is ref_event.wait(0.0) is True
    gate.remove()
    assert not os.path.exists(gate.folder)


def test_a_refusal_after_a_staggered_start_prints_one_line_only(tmp_path):
    """``workbench sweep`` with two staggered workers, refused on its target after they
    started: its stderr is the one-line message and nothing else (a killed worker once left
    a semaphore for loky's resource tracker, which then warned on the command's stderr), and
    no gate folder is left behind."""
    import glob
    import tempfile
    from pathlib import Path

    before = set(glob.glob(os.path.join(tempfile.gettempdir(), "workbench-gate-*")))
    table = Path(__file__).resolve().parents[1] / "sample_sets" / "kiln_batches.csv"
    for _ in range(2):
        proc = subprocess.run([sys.executable, "-m", "workbench", "sweep", str(table),
                               "--target", "no_such_column", "--jobs", "2", "--store",
                               str(tmp_path / "s.sqlite"), "--quiet"],
                              capture_output=True, text=True, timeout=300)
        assert proc.returncode == 2
        assert proc.stderr.startswith("workbench: no column named")
        assert proc.stderr.count("\n") == 1, proc.stderr
    after = set(glob.glob(os.path.join(tempfile.gettempdir(), "workbench-gate-*")))
    assert after <= before


def test_the_pools_resource_tracker_keeps_its_leak_warnings_off_the_commands_stderr():
    """loky's resource tracker outlives the command and warns on its stderr when a
    semaphore it was told about is gone without word (what killing a prestarted pool can
    leave: one CI run's refusal printed those two warnings after its one line). The
    tracker :func:`pool._quiet_tracker` starts says nothing; one started by loky alone
    says what it said in CI (the control, so that this test can fail), and the
    environment is left as it was."""
    script = ("import os; from joblib.externals.loky.backend import resource_tracker as rt\n"
              "{start}\n"
              "rt.register('/workbench-test-gone-' + str(os.getpid()), 'semlock')\n"
              "print(os.environ.get('PYTHONWARNINGS'))\n")
    env = {k: v for k, v in os.environ.items() if k != "PYTHONWARNINGS"}
    quiet = subprocess.run([sys.executable, "-c", script.format(
        start="from workbench.sweep import pool; pool._quiet_tracker()")],
        capture_output=True, text=True, timeout=120, env=env)
    loud = subprocess.run([sys.executable, "-c", script.format(start="pass")],
                          capture_output=True, text=True, timeout=120, env=env)
    assert quiet.returncode == loud.returncode == 0
    assert quiet.stdout == loud.stdout == "None\n"
    assert quiet.stderr == ""
    assert "leaked semlock" in loud.stderr and "FileNotFoundError" in loud.stderr


def _priority() -> int:
    return os.getpriority(os.PRIO_PROCESS, 0)


def test_workers_start_at_the_niceness_asked_for_and_a_pool_of_another_is_replaced():
    """pool.set_worker_niceness (what the window asks for): the pool's workers run that
    many nice steps below this process from their start (os.getpriority in the worker,
    checked against this process's), the pool started earlier at another niceness is not
    reused, and the estimate no longer counts it as warm."""
    from workbench.sweep.estimate import pool_is_warm

    before = pool._NICENESS["value"]
    try:
        pool.set_worker_niceness(0)
        ex = pool._warm_pool(1)
        assert ex.submit(_priority).result(timeout=120) == _priority()
        pool.set_worker_niceness(3)
        assert not pool_is_warm(1)
        ex3 = pool._warm_pool(1)
        assert ex3 is not ex
        assert ex3.submit(_priority).result(timeout=120) == min(19, _priority() + 3)
        assert pool_is_warm(1)
    finally:
        pool.set_worker_niceness(before)
        pool.stop_pool()
