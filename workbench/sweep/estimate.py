"""How long a sweep will take on this computer: measured, not guessed.

The engine gets faster as the project changes and every table and computer
differs, so no constant speed is built in. The estimate is calibrated by timing
the sweep's own trial function (:func:`workbench.sweep.trials.run_trial`, one BLAS
thread, as in a worker) on the plan's own table and first fold:

1. one warm-up trial fits the fold's preprocessing (``prep``: paid once per fold,
   by the sweep's process for all workers (:mod:`workbench.sweep.fold_files`), or by
   every worker when the folds are not shared, see ``_fold_features``);
2. for each distinct (hidden activation, head, layers, engine) of the grid, two
   short trials of ``e1`` and ``e2`` epochs (the smaller time of two runs each)
   give the seconds per epoch (the slope) and per trial beyond the epochs (the
   intercept: scoring, predictions, health). A configuration whose folds the runner
   hands out together to train in lockstep (:func:`workbench.sweep.runner.group_trials`)
   is timed so, on the first repeat's folds (one run: a group is already K trials
   long), each trial counting its share of the group. The learning rate and L2 strength do not change the cost of an epoch, so
   they are not timed;
3. one trial of each baseline.

A sweep's time is then, with ``W`` workers (the runner hands each free worker the
next trial, so the trials' seconds divide among the workers):

    start-up + (folds x prep + sum over trials of intercept + slope x epochs
    + the baselines' trials) / (W x share)

(the folds' preparation counted once more per worker, ``folds x prep / share``, when
every worker fits its own: the window's sweeps on a small table)

where ``share`` is the part of a core each worker gets: the scheduler shares the
cores among the ``W`` workers and the ``busy`` cores other programs keep busy
(measured over half a second before the sweep, :func:`busy_cores`), so
``share = min(1, cores / (W + busy))``. On a quiet machine with no more workers
than cores it is 1.

with every trial counted at the plan's full epoch budget (the stopping rule may end
some earlier: the estimate then errs long, never short by that). Start-up is the
time a new worker process needs to import what a trial needs, measured once by
starting one (:func:`startup_seconds`), and nothing when the runner's pool of that
size is already warm.

:func:`check_estimates` runs the default plan of each sample set (what
``workbench open FILE --run`` runs, :func:`workbench.sweep.defaults.default_plan`)
and sets the estimate beside the measured time; :func:`run` is its
``workbench bench`` entry.
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

#: the epochs of the two timed trials per kind of configuration
CALIBRATION_EPOCHS = (2, 12)
#: the times each timed trial runs (the smallest is kept: others' load only slows it)
CALIBRATION_RUNS = 2

_STARTUP: dict = {}
_STARTUP_LOCK = threading.Lock()


def cost_key(config) -> tuple:
    """What sets a network trial's cost: hidden activation, head, layers, engine."""
    c = config.to_dict() if hasattr(config, "to_dict") else dict(config)
    return (c["hidden"], c["head"], tuple(int(w) for w in c["layers"]), c["engine"])


def data_key(plan) -> tuple:
    """What a calibration's numbers depend on besides the configuration: the table, its
    target and roles, the folds (their size) and the training settings."""
    try:
        mtime = os.stat(plan.table).st_mtime_ns
    except OSError:
        mtime = None
    return (str(plan.table), mtime, plan.target, plan.kind, tuple(sorted(plan.roles.items())),
            plan.sheet, plan.folds, plan.metric, plan.early_stopping, str(plan.batch_size),
            plan.dtype, plan.seed)


@dataclass
class Calibration:
    """Seconds measured on one table with one plan's settings (see the module docstring).

    ``per_epoch`` and ``per_trial`` map :func:`cost_key` to seconds; ``baseline``
    maps a baseline's name to the seconds of one of its trials; ``prep`` is the
    seconds to preprocess one fold.
    """

    key: tuple
    per_epoch: dict = field(default_factory=dict)
    per_trial: dict = field(default_factory=dict)
    baseline: dict = field(default_factory=dict)
    prep: float = 0.0
    seconds: float = 0.0  # what the calibration itself took
    #: the table's features as float64 bytes (rows x feature columns x 8): whether a
    #: sweep that shares only large tables' folds shares this one's
    feature_bytes: int = 0

    def covers(self, plan) -> bool:
        """Every configuration and baseline of ``plan`` has been timed on its data."""
        return (data_key(plan) == self.key
                and all(cost_key(c) in self.per_epoch for c in plan.configurations())
                and all(b in self.baseline for b in plan.baselines))


def _timed(fn, runs: int) -> float:
    best = float("inf")
    for _ in range(runs):
        t = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t)
    return best


def calibrate(plan, data=None, previous: Calibration | None = None,
              epochs: tuple[int, int] = CALIBRATION_EPOCHS,
              runs: int = CALIBRATION_RUNS) -> Calibration:
    """Time short trials of ``plan`` on its own table (the module docstring's steps).

    Parameters
    ----------
    plan : SweepPlan
    data : TrialData, optional
        The plan's table as the runner reads it (:func:`workbench.sweep.runner.load_data`);
        read from the plan's file when not given.
    previous : Calibration, optional
        An earlier calibration: when it was made on the same data, only the
        configurations and baselines it lacks are timed.
    epochs : (int, int)
        The two epoch counts whose difference gives the seconds per epoch.
    runs : int
        Each timed trial runs this often; the smallest time is kept.
    """

    from workbench.sweep import runner
    from workbench.sweep.runner import load_data, trial_spec
    from workbench.sweep.trials import TrialData, run_trial, run_trials

    t_start = time.perf_counter()
    key = data_key(plan)
    cal = previous if previous is not None and previous.key == key else Calibration(key)
    if data is None:
        data, _ = load_data(plan)
    cal.feature_bytes = int(data.X.shape[0]) * int(data.X.shape[1]) * 8
    # a token of its own: the calibration's fold cache never serves a real sweep's trials
    data = TrialData(X=data.X, y=data.y, profile=data.profile, target=data.target)
    folds = plan.fold_indices(data.y)

    def spec(config, n_epochs, fold=0):
        return trial_spec(plan, config, 0, fold, folds, epochs=n_epochs)

    configs = {}
    for c in plan.configurations():
        configs.setdefault(cost_key(c), c)
    todo = {k: c for k, c in configs.items() if k not in cal.per_epoch}
    first = next(iter(configs.values()))
    if todo or not cal.prep:
        # the first trial on the fold fits its preprocessing; the next one reuses it
        cold = _timed(lambda: run_trial(data, spec(first, 1)), 1)
        warm = _timed(lambda: run_trial(data, spec(first, 1)), 1)
        cal.prep = max(0.0, cold - warm)
    else:
        run_trial(data, spec(first, 1))  # the fold's features, for the baselines below
    e1, e2 = epochs
    # the configurations whose folds the runner hands out together, to train in lockstep
    # (:func:`workbench.sweep.runner.group_trials`): timed as such a group, each trial's
    # share of it, since a stacked trial costs less than one alone
    stacks = (runner._stacks(plan, data) if runner.STACK and not plan.race
              and plan.folds > 1 else set())
    if any(c.index in stacks for c in todo.values()):
        for j in range(1, plan.folds):  # each fold's features once, as a worker has them
            run_trial(data, spec(first, 1, fold=j))
    for k, c in todo.items():
        if c.index in stacks:
            def timed(n, c=c):
                specs = [spec(c, n, fold=j) for j in range(plan.folds)]
                # one run: a group is already K trials long (the calibration's own time
                # is part of the user's wait)
                return _timed(lambda: run_trials(data, specs), 1) / len(specs)
        else:
            def timed(n, c=c):
                return _timed(lambda: run_trial(data, spec(c, n)), runs)
        t1, t2 = timed(e1), timed(e2)
        slope = max(0.0, (t2 - t1) / (e2 - e1))
        cal.per_epoch[k] = slope
        cal.per_trial[k] = max(0.0, t1 - slope * e1)
    for b in plan.baseline_configurations():
        if b.name not in cal.baseline:
            cal.baseline[b.name] = _timed(lambda b=b: run_trial(data, spec(b, 1)), 1)
    cal.seconds += time.perf_counter() - t_start
    return cal


def startup_seconds(refresh: bool = False) -> float:
    """Seconds a new worker process takes to start and import a trial's modules
    (measured once by starting one; cached for the life of this process)."""
    with _STARTUP_LOCK:
        if "seconds" in _STARTUP and not refresh:
            return _STARTUP["seconds"]
        t = time.perf_counter()
        subprocess.run([sys.executable, "-c", "import workbench.sweep.trials, "
                        "workbench.nets.engine, sklearn.neural_network"],
                       check=True, capture_output=True, timeout=120)
        _STARTUP["seconds"] = time.perf_counter() - t
        return _STARTUP["seconds"]


def pool_is_warm(jobs: int) -> bool:
    """The runner's pool of ``jobs`` workers is running (its workers need no start-up)."""
    from workbench.sweep import pool as warm
    from workbench.sweep import runner

    pool = getattr(runner, "_POOL", {})
    return pool.get("executor") is not None and pool.get("workers") == jobs \
        and pool.get("niceness", 0) == warm._NICENESS["value"]  # else it is started anew


def busy_cores(seconds: float = 0.5) -> float:
    """Cores other programs keep busy now: the machine's CPU use over ``seconds``
    (psutil), as a number of cores."""
    import psutil

    return psutil.cpu_percent(interval=seconds) / 100.0 * (os.cpu_count() or 1)


def worker_share(workers: int, busy: float, cores: int | None = None) -> float:
    """The share of a core each of ``workers`` processes gets beside ``busy`` busy cores
    (fair sharing of ``cores``)."""
    cores = cores or os.cpu_count() or 1
    return min(1.0, cores / (max(1, workers) + max(0.0, busy)))


@dataclass
class Estimate:
    """A sweep's estimated seconds, and its parts."""

    seconds: float
    trials: float  # the network and baseline trials' seconds on one worker, summed
    prep: float
    startup: float
    workers: int
    share: float = 1.0  # of a core per worker (other programs' load)


def estimate(plan, calibration: Calibration, jobs: int, startup: float | None = None,
             busy: float = 0.0, cores: int | None = None,
             share_folds: str = "always") -> Estimate:
    """The sweep's seconds on ``jobs`` local workers (module docstring's formula);
    ``busy``: cores other programs keep busy (:func:`busy_cores`); ``share_folds``: the
    runner's (:func:`workbench.sweep.runner.run_sweep`). When the sweep's process prepares
    the folds' features once for all workers, their preprocessing is CPU shared among
    the cores like the trials' (``prep / (W x share)``); else every worker fits every
    fold's (``prep / share``)."""
    workers = max(1, int(jobs))
    share = worker_share(workers, busy, cores)
    trials = 0.0
    for c in plan.configurations():
        k = cost_key(c)
        trials += calibration.per_trial[k] + calibration.per_epoch[k] * plan.epochs
    trials *= plan.folds * plan.repeats
    trials += sum(calibration.baseline.get(b, 0.0) for b in plan.baselines) \
        * plan.folds * plan.repeats
    if startup is None:
        startup = 0.0 if pool_is_warm(workers) else startup_seconds()
    prep = calibration.prep * plan.folds * plan.repeats
    from workbench.sweep.fold_files import SHARED_MIN_BYTES

    shared = share_folds == "always" or calibration.feature_bytes >= SHARED_MIN_BYTES
    return Estimate(seconds=startup + prep / (share * (workers if shared else 1))
                    + trials / (workers * share),
                    trials=trials, prep=prep, startup=startup, workers=workers, share=share)


def fmt_seconds(s: float) -> str:
    """Seconds in words: 42 s, 3 min 05 s, 1 h 02 min."""
    s = max(0.0, float(s))
    if s < 60:
        return f"{s:.0f} s"
    m, sec = divmod(int(round(s)), 60)
    if m < 60:
        return f"{m} min {sec:02d} s"
    h, m = divmod(m, 60)
    return f"{h} h {m:02d} min"


# --------------------------------------------------------------------------- the check


def sample_tables() -> list[Path]:
    """The sample sets shipped beside the package (the checkout's ``sample_sets``)."""
    root = Path(__file__).resolve().parents[2] / "sample_sets"
    return sorted(root.glob("*.csv"))


def check_estimates(paths=None, jobs: int = 2, quick: bool = False,
                    on_line=None) -> list[dict]:
    """Estimate, then run, the default plan of each table; the measured and estimated times.

    Each table's default plan (:func:`workbench.sweep.defaults.default_plan`, what
    ``workbench open FILE --run`` runs) is calibrated and estimated, then run to the
    end with :func:`workbench.sweep.runner.run_sweep` on ``jobs`` workers into a
    temporary store. The first sweep starts the worker pool (its estimate includes
    the start-up); later ones find it warm, as in the window.

    Parameters
    ----------
    paths : list of path, optional
        Default: the six sample sets.
    jobs : int
        Worker processes.
    quick : bool
        Cut each plan to relu hidden layers at one learning rate, 2 folds, 1 repeat and
        10 epochs (a smoke test of the check, not the figures to quote).
    on_line : callable, optional
        Receives one line of text per table as it is measured.

    Returns
    -------
    list of dict
        ``table, trials, estimate_s, actual_s, ratio`` (actual / estimate),
        ``calibration_s`` (what calibrating took) per table.
    """
    from workbench.sweep.defaults import default_plan
    from workbench.sweep.runner import load_data, run_sweep
    from workbench.sweep.store import Store

    out = []
    paths = list(paths) if paths is not None else sample_tables()
    with tempfile.TemporaryDirectory(prefix="wb-estimate-") as tmp:
        for path in paths:
            overrides = {"folds": 2, "repeats": 1, "epochs": 10, "hidden": ["relu"],
                         "learning_rates": [0.01]} if quick else {}
            plan = default_plan(path, **overrides)
            data, _ = load_data(plan)
            cal = calibrate(plan, data)
            busy = busy_cores()
            est = estimate(plan, cal, jobs, busy=busy)
            with Store(Path(tmp) / "store.sqlite") as store:
                t = time.perf_counter()
                done = run_sweep(plan, store=store, jobs=jobs)
                actual = time.perf_counter() - t
            row = {"table": Path(path).name, "trials": plan.n_trials,
                   "configurations": plan.n_configurations, "state": done.state,
                   "estimate_s": est.seconds, "actual_s": actual,
                   "ratio": actual / est.seconds if est.seconds > 0 else float("nan"),
                   "startup_s": est.startup, "calibration_s": cal.seconds,
                   "busy_cores": busy, "share": est.share}
            out.append(row)
            if on_line is not None:
                on_line(_line(row))
    return out


def _line(r: dict) -> str:
    return (f"{r['table']}: {r['configurations']} configurations, {r['trials']} trials: "
            f"estimated {r['estimate_s']:.1f} s (start-up {r['startup_s']:.1f} s; calibrating "
            f"took {r['calibration_s']:.1f} s; {r['busy_cores']:.1f} cores busy before, "
            f"{r['share']:.2f} of a core per worker), ran {r['actual_s']:.1f} s, "
            f"actual/estimate {r['ratio']:.2f}")


def run(quick: bool = False) -> dict:
    """``workbench bench`` part: the estimates of the sample sets' default plans vs the
    measured times (goal: every ratio within 1/1.5 .. 1.5)."""
    rows = check_estimates(quick=quick)
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    ratios = [r["ratio"] for r in rows]
    worst = max(ratios, key=lambda x: max(x, 1 / x)) if ratios else float("nan")
    lines = [_line(r) for r in rows]
    lines.append(f"worst actual/estimate {worst:.2f} (goal within 0.67-1.5); load average "
                 f"after {load:.2f} on {os.cpu_count()} cores")
    return {"title": "Time estimates of the sample sets' default plans (2 workers)",
            "lines": lines,
            "figures": {"tables": rows, "worst_ratio": worst, "load_average": load}}
