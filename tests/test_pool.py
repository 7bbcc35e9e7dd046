"""The warm pool of local workers: started early, imports done in the worker."""

import subprocess
import sys
from pathlib import Path

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
