"""Whole-sweep speed on the kiln grid, time to first trial, memory per worker.

The *kiln grid* (issue 14): ``sample_sets/kiln_batches.csv`` (2,500 rows, target
``passes_inspection``), hidden activations relu, tanh, logistic and identity (the
four scikit-learn's MLP has), the advised head (logistic), one hidden layer of
32 units, learning rates 0.001, 0.003 and 0.01: 12 configurations x 5 folds x 2
repeats = 120 trials of 100 epochs, metric ROC AUC (the plan's default for a
binary target). Parts, in this order:

1. **Whole sweep vs GridSearchCV.** Our sweep (``run_sweep``, the default engine,
   2 jobs, no baselines so that both sides fit the same 120 models) against a
   hand-written ``GridSearchCV(n_jobs=2)`` with scikit-learn's ``MLPClassifier``
   (``max_iter=100``) in the same preprocessing pipeline
   (:func:`workbench.data.preprocessing.build_pipeline`), the same folds (the
   plan's) and the same metric, ``refit=False``; both timed from reading the
   table. The two are run alternately, ``rounds`` times each (default once: the
   search alone takes one to two minutes), and the fastest of each kept. Whether GridSearchCV's
   best configuration is ours (or tied with ours) is reported. Beside the wall clock, each
   run's CPU seconds (this process and its workers, from ``/proc``): the work each did.
   (Measured on the shared 2-core machine at load averages 2-4, two rounds each way: the
   CPU ratio varied between rounds about as much as the wall-clock ratio, 0.29-0.53 against
   0.27-0.45; neither is a substitute for a quiet machine.)
2. **Time to first trial.** ``python -m workbench sweep`` on the kiln table (one
   configuration, 2 folds, 5 epochs, 2 jobs) in a fresh process: seconds from
   starting the process until the store holds its first trial (the store file is
   polled every 10 ms). And ``python -m workbench --help``'s time. Medians of 3.
3. **Peak memory per worker.** A fresh process sweeps a generated table of
   200,000 rows x 22 columns (20 numbers, one category, a binary target; quick:
   20,000) with one configuration, 2 folds, 1 epoch, 2 jobs; a thread reads each
   descendant process's peak resident size (``VmHWM`` in ``/proc``) every 20 ms.
   Reported: the parent's peak, the largest worker peak, the table's numeric size
   (rows x numeric columns x 8 bytes) and the peak of a bare interpreter that
   imported the trial code (the worker's base). Every peak is ``VmHWM``, the peak
   of the process's own address space: ``ru_maxrss`` is not used because Linux
   carries it over from the parent process across ``exec``, so a child started
   by a large process would report the parent's size.
4. **Optional hooks, run only when another part of the program provides them:**
   racing (:func:`workbench.sweep.racing.measure_racing` on the kiln grid: trials
   saved and whether it recommends the same configuration) and the time estimate
   of :mod:`workbench.sweep.estimate` (``calibrate``, ``busy_cores`` and
   ``estimate``, made before the sweep of part 1 runs, set beside its measured
   time). When a hook is absent the section says so; the estimates of the six
   sample sets' default plans are ``workbench bench --estimates``.

Between parts 1 and 2, :func:`stacked_group`: one task of the sweep (a configuration's
folds of one repeat) as whole trials one after another and together in lockstep
stacks (:func:`workbench.sweep.trials.run_trials`), CPU time, and whether the results
are identical.
"""

from __future__ import annotations

import importlib
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np

SAMPLES = Path(__file__).resolve().parents[2] / "sample_sets"
KILN, KILN_TARGET = SAMPLES / "kiln_batches.csv", "passes_inspection"
HIDDEN = "relu,tanh,logistic,identity"
LEARNING_RATES = ["0.001", "0.003", "0.01"]
LAYERS = ["32"]
FOLDS, REPEATS, EPOCHS = 5, 2, 100
MEMORY_ROWS, QUICK_MEMORY_ROWS = 200_000, 20_000
#: goal (issue 14, a benchmark, never a test): our whole sweep <= 0.3x GridSearchCV
SWEEP_GOAL = 0.3


def grid_options(quick: bool = False) -> dict:
    """The kiln grid as :func:`workbench.sweep.plan.build_plan` options."""
    return dict(hidden=HIDDEN, layers=LAYERS, learning_rates=LEARNING_RATES,
                folds=2 if quick else FOLDS, repeats=1 if quick else REPEATS,
                epochs=10 if quick else EPOCHS, seed=0)


def _plan(quick, engine="auto"):
    from workbench.sweep.plan import build_plan

    return build_plan(KILN, KILN_TARGET, engine=engine, baselines=[], **grid_options(quick))


def grid_search(plan, jobs=2):
    """A hand-written ``GridSearchCV`` over the plan's grid with scikit-learn's MLP, in the
    sweep's preprocessing pipeline, on the plan's folds and metric (``refit=False``).

    Returns ``(seconds from reading the table, best_params_)``.
    """
    from sklearn.model_selection import GridSearchCV
    from sklearn.neural_network import MLPClassifier

    from workbench.data.preprocessing import build_pipeline
    from workbench.sweep.runner import load_data

    t = time.perf_counter()  # reading the table is part of the job, as in our sweep
    data, _ = load_data(plan)
    pipe = build_pipeline(data.profile, data.target,
                          MLPClassifier(max_iter=plan.epochs, random_state=0), "logistic")
    grid = {"model__activation": list(plan.hidden),
            "model__hidden_layer_sizes": [tuple(s) for s in plan.layers],
            "model__learning_rate_init": list(plan.learning_rates),
            "model__alpha": list(plan.alphas)}
    folds = plan.fold_indices(data.y)
    cv = [folds[(r, f)] for r in range(plan.repeats) for f in range(plan.folds)]
    search = GridSearchCV(pipe, grid, scoring=plan.metric, cv=cv, n_jobs=jobs, refit=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        search.fit(data.X, data.y)
    return time.perf_counter() - t, search.best_params_


def _sweep(plan, store, jobs=2):
    from workbench.sweep.runner import run_sweep

    t = time.perf_counter()
    out = run_sweep(plan, store=store, jobs=jobs)
    return time.perf_counter() - t, out.sweep_id


def descendants(pid: int) -> list[int]:
    """The pids of every living descendant of process ``pid``, from ``/proc`` (Linux)."""
    found, todo = [], [pid]
    while todo:
        p = todo.pop()
        try:
            with open(f"/proc/{p}/task/{p}/children") as fh:
                kids = [int(k) for k in fh.read().split()]
        except OSError:
            kids = []
        found += kids
        todo += kids
    return found


def _descendants_cpu() -> dict:
    """CPU seconds (user + system) of every living descendant of this process, by pid, read
    from ``/proc`` (Linux; empty elsewhere): the worker processes of both contenders."""
    if not sys.platform.startswith("linux"):
        return {}
    tick = os.sysconf("SC_CLK_TCK")
    cpu = {}
    for pid in descendants(os.getpid()):
        try:
            with open(f"/proc/{pid}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
            cpu[pid] = (int(fields[11]) + int(fields[12])) / tick  # utime + stime
        except (OSError, IndexError, ValueError):
            pass
    return cpu


def _with_cpu(fn, *args):
    """``(fn(*args), CPU seconds)``: this process's CPU time during the call plus what its
    descendants (workers started before or during it) used meanwhile (a worker that exits
    during the call is not counted: neither contender's workers do)."""
    before, own = _descendants_cpu(), time.process_time()
    out = fn(*args)
    own = time.process_time() - own
    used = sum(max(0.0, v - before.get(pid, 0.0)) for pid, v in _descendants_cpu().items())
    return out, own + used


def _agreement(res, best_params) -> tuple[str, bool]:
    key = (best_params["model__activation"], float(best_params["model__learning_rate_init"]))
    ours = {(c["hidden"], float(c["learning_rate"])): c for c in res["configurations"]}
    mine = ours.get(key)
    if mine is None:
        return f"GridSearchCV's best {key} is not in our results", False
    if mine["rank"] == 1:
        return f"same winner ({key[0]}, lr={key[1]:g})", True
    if mine.get("tied_with_best"):
        return (f"GridSearchCV's best ({key[0]}, lr={key[1]:g}) is our rank {mine['rank']}, "
                "tied with our best"), True
    return (f"GridSearchCV's best ({key[0]}, lr={key[1]:g}) is our rank {mine['rank']}, NOT "
            "tied with our best"), False


def whole_sweep(quick: bool = False, rounds: int | None = None, store_path=None) -> dict:
    """Part 1: our sweep vs GridSearchCV(n_jobs=2) on the kiln grid."""
    from workbench.sweep.results import sweep_results
    from workbench.sweep.store import Store

    rounds = rounds or 1
    plan = _plan(quick)
    made = estimate_before(plan)
    with tempfile.TemporaryDirectory(prefix="workbench-bench-") as tmp:
        store = Store(Path(store_path or Path(tmp) / "kiln.sqlite"))
        try:
            grid_runs, our_runs, grid_cpu, our_cpu = [], [], [], []
            for _ in range(rounds):  # alternate, so a burst of load hits both alike
                run, cpu = _with_cpu(grid_search, plan)
                grid_runs.append(run)
                grid_cpu.append(cpu)
                run, cpu = _with_cpu(_sweep, plan, store)
                our_runs.append(run)
                our_cpu.append(cpu)
            t_grid, best_params = min(grid_runs, key=lambda r: r[0])
            t_ours, sweep_id = min(our_runs, key=lambda r: r[0])
            c_grid, c_ours = min(grid_cpu), min(our_cpu)
            res = sweep_results(store, sweep_id)
        finally:
            store.close()
    agreement, agrees = _agreement(res, best_params)
    best = res["configurations"][0]
    engines = sorted({c.engine for c in plan.configurations()})
    figures = {"sweep_seconds": t_ours, "gridsearch_seconds": t_grid,
               "sweep_over_gridsearch": t_ours / t_grid, "same_winner": agrees,
               "n_trials": plan.n_trials, "rounds": rounds}
    if c_grid > 0:
        figures.update({"sweep_cpu_seconds": c_ours, "gridsearch_cpu_seconds": c_grid,
                        "sweep_over_gridsearch_cpu": c_ours / c_grid})
    lines = [
        f"kiln grid: {KILN.name}, hidden {HIDDEN.replace(',', '/')} x logistic head x [32] x "
        f"lr {'/'.join(LEARNING_RATES)}: {plan.n_configurations} configurations x "
        f"{plan.folds} folds x {plan.repeats} repeats = {plan.n_trials} trials, "
        f"{plan.epochs} epochs, metric {plan.metric}",
        f"  (fastest of {rounds} alternating runs each, 2 jobs, wall clock from reading the table"
        + (f"; our engine: {', '.join(engines)}" if engines else "") + ")",
        f"  GridSearchCV(n_jobs=2), MLPClassifier   {t_grid:8.2f} s",
        f"  our sweep (default engine), 2 jobs      {t_ours:8.2f} s",
        f"  ours / GridSearchCV                     {t_ours / t_grid:8.3f}   "
        f"(goal <= {SWEEP_GOAL})",
        (f"  cpu seconds, process + workers (least of each): GridSearchCV {c_grid:.1f}, ours "
         f"{c_ours:.1f}, ratio {c_ours / c_grid:.3f}" if c_grid > 0
         else "  cpu seconds: not measured (reads /proc)"),
        f"  winner: {agreement}; our best {best['hidden']}/{best['head']} "
        f"lr={best['learning_rate']:g} {plan.metric} {best['mean']:.4f} ± {best['sd']:.4f}",
    ]
    estimated = estimate_lines(made, t_ours)
    figures.update(estimated["figures"])
    return {"lines": lines + estimated["lines"], "figures": figures}


# --------------------------------------------------------------------------- a group of folds

def _group_specs(plan, config: int = 0, repeat: int = 0):
    """The trial descriptions of one configuration's folds of one repeat, as the runner
    sends them."""
    from workbench.sweep.runner import load_data, trial_spec

    data, _ = load_data(plan)
    folds = plan.fold_indices(data.y)
    c = plan.configurations()[config]
    return data, [trial_spec(plan, c, repeat, f, folds) for f in range(plan.folds)]


def stacked_group(quick: bool = False, rounds: int | None = None) -> dict:
    """Part 1b: one kiln configuration's folds of a repeat (a runner task), as whole
    trials (preprocessing from the worker's fold cache, fit with held-out curves and
    health, scoring, out-of-fold predictions) one after another (``run_trial``) and
    together (``run_trials``: lockstep stacks); CPU seconds of this process, medians of
    interleaved rounds, and whether every result is the same."""
    from workbench.sweep.trials import run_trial, run_trials

    rounds = rounds or (2 if quick else 5)
    plan = _plan(quick)
    data, specs = _group_specs(plan)
    first = [run_trial(data, dict(s)) for s in specs]  # fills the fold cache, imports
    alone, together, same = [], [], True
    for _ in range(rounds):
        t = time.process_time()
        a = [run_trial(data, dict(s)) for s in specs]
        alone.append(time.process_time() - t)
        t = time.process_time()
        b = run_trials(data, [dict(s) for s in specs])
        together.append(time.process_time() - t)
        same = same and all(x["test_score"] == y["test_score"] and x["history"] == y["history"]
                            and np.array_equal(x["predictions"], y["predictions"])
                            for x, y in zip(a + b, first + first))
    m_alone, m_together = statistics.median(alone), statistics.median(together)
    figures = {"group_alone_cpu_seconds": m_alone, "group_stacked_cpu_seconds": m_together,
               "group_speedup_cpu": m_alone / m_together, "group_identical": same}
    lines = [
        f"one task of the kiln sweep: {len(specs)} folds of {plan.configurations()[0].label}, "
        f"{plan.epochs} epochs, whole trials (median of {rounds}, cpu seconds)",
        f"  one after another (run_trial)           {m_alone:8.3f} s",
        f"  together in lockstep (run_trials)       {m_together:8.3f} s   "
        f"({m_alone / m_together:.2f}x; results {'identical' if same else 'DIFFERENT'})",
    ]
    return {"lines": lines, "figures": figures}


# --------------------------------------------------------------------------- first trial

def _count_trials(path: Path) -> int:
    import sqlite3

    if not path.exists():
        return 0
    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=0.05)
        try:
            return int(con.execute("SELECT COUNT(*) FROM trials").fetchone()[0])
        finally:
            con.close()
    except sqlite3.Error:
        return 0


def _first_trial_once(tmp: Path, epochs: int) -> float:
    store = tmp / f"first-{time.monotonic_ns()}.sqlite"
    cmd = [sys.executable, "-m", "workbench", "sweep", str(KILN), "--target", KILN_TARGET,
           "--store", str(store), "--quiet", "--hidden", "relu", "--folds", "2",
           "--repeats", "1", "--epochs", str(epochs), "--jobs", "2"]
    t = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    first = None
    while proc.poll() is None:
        if first is None and _count_trials(store) > 0:
            first = time.perf_counter() - t
        time.sleep(0.01)
    if first is None and _count_trials(store) > 0:
        first = time.perf_counter() - t  # finished between two polls
    if proc.returncode != 0:
        raise RuntimeError(f"the sweep command failed (exit {proc.returncode})")
    return float("nan") if first is None else first


def _help_once() -> float:
    t = time.perf_counter()
    subprocess.run([sys.executable, "-m", "workbench", "--help"], check=True,
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


#: what every process that runs a trial must import before it can: a fresh interpreter
#: importing these is the floor under the time to the first trial (the sweep's parent needs
#: scikit-learn for the metric and the folds, each worker for the preprocessing)
FLOOR_IMPORTS = "import numpy, pandas, sklearn.pipeline, sklearn.metrics"


def _floor_once() -> float:
    t = time.perf_counter()
    subprocess.run([sys.executable, "-c", FLOOR_IMPORTS], check=True,
                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


def first_trial(quick: bool = False, runs: int | None = None) -> dict:
    """Part 2: seconds from starting ``workbench sweep`` to its first stored trial, beside
    the import floor (:data:`FLOOR_IMPORTS` in a fresh interpreter) measured in the same
    rounds, interleaved, so that the ratio holds on a loaded machine."""
    runs = runs or (1 if quick else 3)
    firsts, floors = [], []
    with tempfile.TemporaryDirectory(prefix="workbench-bench-") as tmp:
        for _ in range(runs):
            floors.append(_floor_once())
            firsts.append(_first_trial_once(Path(tmp), 5))
    helps = [_help_once() for _ in range(runs)]
    first, help_s = statistics.median(firsts), statistics.median(helps)
    floor = statistics.median(floors)
    lines = [
        f"start-up (median of {runs}, fresh processes):",
        f"  workbench sweep -> first trial stored   {first:8.2f} s   (goal <= 1.5)",
        f"  floor: a fresh python importing numpy, pandas, scikit-learn  {floor:8.2f} s "
        f"(first trial = {first / floor:.2f} x the floor)",
        f"  workbench --help                        {help_s:8.2f} s   (goal <= 0.3)",
    ]
    return {"lines": lines, "figures": {"first_trial_seconds": first, "help_seconds": help_s,
                                        "import_floor_seconds": floor}}


# --------------------------------------------------------------------------- memory

_MEMORY_CHILD = r"""
import json, os, sys, threading, time
from pathlib import Path

def hwm(pid):
    try:
        with open(f"/proc/{pid}/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        return None
    return None

from workbench.benchmarks.kiln import descendants

def is_worker(pid):
    # a worker process once it runs loky's worker code: a child caught between its
    # fork and its exec still carries this process's size and command line
    try:
        with open(f"/proc/{pid}/cmdline", "rb") as fh:
            return b"loky" in fh.read()
    except OSError:
        return False

peaks, done = {}, threading.Event()
def watch():
    me = os.getpid()
    while not done.is_set():
        for pid in descendants(me):
            if not is_worker(pid):
                continue
            v = hwm(pid)
            if v is not None:
                peaks[pid] = max(peaks.get(pid, 0), v)
        time.sleep(0.02)

threading.Thread(target=watch, daemon=True).start()
from workbench.sweep.plan import build_plan, read_table
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store
table, store = sys.argv[1], sys.argv[2]
frame = read_table(table)  # read once, as the sweep command does
plan = build_plan(table, "outcome", df=frame, hidden="relu", layers=["32"], folds=2,
                  repeats=1, epochs=1, seed=0, baselines=[])
t = time.perf_counter()
with Store(store) as st:
    run_sweep(plan, store=st, jobs=2, frame=frame)
seconds = time.perf_counter() - t
time.sleep(0.1)
done.set()
print(json.dumps({"parent": hwm(os.getpid()),
                  "workers": sorted(peaks.values(), reverse=True), "seconds": seconds}))
"""

_BASE_CHILD = r"""
import json
# what a worker has imported when its first trial starts
import pandas, sklearn.compose, workbench.data.preprocessing, workbench.nets.engine  # noqa
import workbench.sweep.trials  # noqa: F401
with open("/proc/self/status") as fh:
    peak = next(int(line.split()[1]) * 1024 for line in fh if line.startswith("VmHWM:"))
print(json.dumps({"base": peak}))
"""


def _memory_table(path: Path, rows: int) -> int:
    """A 200,000 x 22 style table: 20 numbers, one category, a binary target; returns
    its numeric size in bytes (rows x numeric columns x 8)."""
    import pandas as pd

    rng = np.random.default_rng(5)
    X = rng.standard_normal((rows, 20)).round(4)
    df = pd.DataFrame(X, columns=[f"x{i}" for i in range(20)])
    df["site"] = rng.choice(["north", "south", "east", "west"], size=rows)
    df["outcome"] = np.where(X[:, 0] + 0.5 * X[:, 1] + rng.standard_normal(rows) > 0,
                             "pass", "fail")
    df.to_csv(path, index=False)
    return rows * 20 * 8


def _child_json(code, *args) -> dict:
    env = dict(os.environ)
    out = subprocess.run([sys.executable, "-c", code, *map(str, args)], check=True,
                         capture_output=True, text=True, env=env, timeout=900)
    return json.loads(out.stdout.strip().splitlines()[-1])


def memory(quick: bool = False) -> dict:
    """Part 3: peak resident memory of the parent and of each worker during a sweep."""
    if not sys.platform.startswith("linux"):
        return {"lines": ["memory: skipped (reads /proc, Linux only)"], "figures": {}}
    rows = QUICK_MEMORY_ROWS if quick else MEMORY_ROWS
    with tempfile.TemporaryDirectory(prefix="workbench-bench-") as tmp:
        table = Path(tmp) / "memory.csv"
        numeric = _memory_table(table, rows)
        csv_mb = table.stat().st_size / 1e6
        got = _child_json(_MEMORY_CHILD, table, Path(tmp) / "memory.sqlite")
    base = _child_json(_BASE_CHILD)["base"]
    worker = max(got["workers"]) if got["workers"] else float("nan")
    mb = 1e6
    figures = {"memory_rows": rows, "parent_peak_mb": got["parent"] / mb,
               "worker_peak_mb": worker / mb, "table_numeric_mb": numeric / mb,
               "interpreter_base_mb": base / mb,
               "worker_over_budget": (worker - base) / (3 * numeric)}
    lines = [
        f"memory: a {rows:,} x 22 table ({csv_mb:.0f} MB CSV, numeric {numeric / mb:.0f} MB), "
        "1 configuration x 2 folds, 1 epoch, 2 jobs:",
        f"  parent peak                             {got['parent'] / mb:8.0f} MB",
        f"  largest worker peak                     {worker / mb:8.0f} MB   "
        f"({len(got['workers'])} descendant processes seen)",
        f"  a worker's base (interpreter + imports) {base / mb:8.0f} MB",
        f"  (worker - base) / (3 x numeric size)    {figures['worker_over_budget']:8.2f}   "
        "(goal < 1)",
    ]
    return {"lines": lines, "figures": figures}


# --------------------------------------------------------------------------- optional hooks

def _optional(module: str, name: str):
    """``module.name`` when another part of the program provides it, else None."""
    try:
        mod = importlib.import_module(module)
    except ImportError:
        return None
    return getattr(mod, name, None)


def racing_hook(quick: bool = False) -> dict:
    """Optional part: racing on the kiln grid, via ``workbench.sweep.racing.measure_racing``."""
    measure = _optional("workbench.sweep.racing", "measure_racing")
    if measure is None:
        return {"lines": ["racing: not available (no workbench.sweep.racing.measure_racing)"],
                "figures": {}}
    opts = grid_options(quick)
    folds, repeats = opts.pop("folds"), opts.pop("repeats")
    res = measure(KILN, KILN_TARGET, jobs=2, folds=folds, repeats=max(repeats, 2), **opts)
    saved = 1.0 - res["share"]
    figures = {"racing_trials_full": res["full"]["trials_run"],
               "racing_trials_raced": res["race"]["trials_run"], "racing_saved": saved,
               "racing_same_recommendation": bool(res["same_recommendation"]),
               "racing_same_group": bool(res["same_group"])}
    lines = [
        f"racing on the kiln grid ({res['n_configurations']} configurations, "
        f"{res['n_trials']} trials planned):",
        f"  trials run: full {res['full']['trials_run']}, racing {res['race']['trials_run']} "
        f"(saved {saved:.0%}); seconds {res['full']['seconds']:.1f} vs "
        f"{res['race']['seconds']:.1f}",
        f"  recommendation: {'same' if res['same_recommendation'] else 'different'} "
        f"({res['race']['recommended_label']}); in the full sweep's equivalence group: "
        f"{'yes' if res['same_group'] else 'NO'}; stopped {len(res['stopped'])}",
    ]
    return {"lines": lines, "figures": figures}


def estimate_before(plan, jobs: int = 2) -> dict | None:
    """Optional part: the time estimate of ``workbench.sweep.estimate`` for ``plan``,
    made before the sweep runs (calibration on the plan's table, the cores other
    programs keep busy, the pool's state), as the window makes it; None when absent."""
    try:
        mod = importlib.import_module("workbench.sweep.estimate")
    except ImportError:
        mod = None
    needed = ("calibrate", "estimate", "busy_cores")
    if mod is None or not all(hasattr(mod, name) for name in needed):
        return None
    try:
        cal = mod.calibrate(plan)
        busy = mod.busy_cores()
        got = mod.estimate(plan, cal, jobs=jobs, busy=busy)
    except Exception as exc:  # an optional part must not stop the benchmark
        return {"error": f"{type(exc).__name__}: {exc}"}
    return {"seconds": float(got.seconds), "busy": busy}


def estimate_lines(made: dict | None, measured_seconds: float) -> dict:
    """The estimate made before the sweep against the sweep's measured time."""
    if made is None:
        return {"lines": ["time estimate: not available (no workbench.sweep.estimate with "
                          "calibrate, estimate and busy_cores)"], "figures": {}}
    if "error" in made:
        return {"lines": [f"time estimate: failed ({made['error']})"], "figures": {}}
    ratio = measured_seconds / made["seconds"]
    return {"lines": [f"time estimate of the kiln sweep, made before it ran: "
                      f"{made['seconds']:.1f} s; measured {measured_seconds:.1f} s; "
                      f"actual/estimate {ratio:.2f} (goal 0.67-1.5; {made['busy']:.1f} cores "
                      "busy before)"],
            "figures": {"estimate_seconds": made["seconds"], "actual_over_estimate": ratio}}


def run(quick: bool = False, rounds: int | None = None) -> dict:
    """Every part above; ``quick`` shrinks each (a smoke test, a minute or so)."""
    lines, figures = [], {}
    parts = [whole_sweep(quick, rounds), stacked_group(quick), first_trial(quick), memory(quick),
             racing_hook(quick)]
    for part in parts:
        lines += part["lines"]
        figures.update(part["figures"])
    return {"title": "sweep on the kiln grid", "lines": lines, "figures": figures}
