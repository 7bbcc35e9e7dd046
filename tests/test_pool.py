"""The warm pool of local workers: started early, imports done in the worker."""

import subprocess
import sys

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
