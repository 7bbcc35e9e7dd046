"""Run a sweep: trials in worker processes or on a Dask cluster, stored as they finish.

:func:`run_sweep` runs every trial of a :class:`workbench.sweep.plan.SweepPlan` (or the
missing ones of a stored sweep, with ``resume=``) and commits each finished
trial to the :class:`workbench.sweep.store.Store` the moment it arrives.

Where trials run
----------------
- Locally (default): a loky process pool (the executor joblib is built on;
  the sweep's own, not joblib's shared one) with ``jobs`` workers (default:
  every core), each worker with a single BLAS thread, so nothing is
  oversubscribed. The pool stays warm between sweeps; the table goes to each
  worker once per sweep (a temporary file it reads on its first trial), and
  work goes out one *task* at a time, never more tasks in flight than
  workers, so both cores stay busy to the end and a cancel is prompt. This process
  also prepares each fold's features once, in the order the trials go out, and the
  workers map them read-only instead of each reading the table and fitting the fold's
  preprocessing (:mod:`workbench.sweep.fold_files`; the same results, bit for bit):
  on every table by default (``share_folds="always"``: on the kiln grid every worker
  fitted all ten folds' preprocessing itself, about a tenth of the sweep's CPU), or
  only on a large one (``"large"``, :func:`workbench.sweep.fold_files.worth_sharing`:
  what the window asks for, whose process is the one the event loop runs in).
  ``SHARE_FOLDS = False`` turns it off.
- On a Dask distributed cluster (``cluster="tcp://HOST:PORT"`` or a
  ``distributed.Client``): the table is scattered to the workers once
  (``Client.scatter(..., broadcast=True)``) and trials are submitted as
  futures, as many in flight as the cluster has worker threads. Workers need
  the same workbench installed. Dask workers compute their folds' features
  themselves (they may be on other machines, where this process's files are not).
- ``backend="inline"`` runs the trials one after another in the calling
  process (debugging; no protection against a crashing trial).

A trial is a pure function of the table, its fold and its seed, so the scores
are identical for the same plan whatever the number of jobs or the cluster.

Tasks: trials run together
--------------------------
A task is a tuple of trials one worker runs together
(:func:`workbench.sweep.trials.run_trials`): the folds of one repeat of a
configuration whose networks can train in a stack (the NumPy engine; a table
whose fits fit :data:`workbench.sweep.trials.STACK_BYTES`), else one trial
(scikit-learn's MLP, the baselines, large tables). :func:`group_trials` makes
them; with racing a task ends at every block of folds after which the race may
look (:func:`look_positions`), so the race sees, decides and stops exactly as
with single trials. Each trial of a task is stored (and announced) on its own
as soon as the task returns; the results are those of trials run alone
(``tests/test_sweep_stacked.py``). The first task of each worker is a single
trial (:func:`first_trials`), so the first score shown comes as early as
before. A cancel is seen between tasks; a task whose worker died is retried
trial by trial, each alone. ``STACK = False`` sends every trial alone.

Events
------
``on_event(event)`` is called in the calling process (in the thread that runs
:func:`run_sweep`) with dicts:

``{"type": "sweep_started", "sweep_id", "n_trials", "n_todo", "n_stored",
"n_configurations", "metric", "resumed", "backend", "workers", "time"}``
    once, before the first trial;
``{"type": "trial_started", "sweep_id", "config_index", "repeat", "fold",
"attempt", "label", "time"}``
    when a trial is handed to a worker;
``{"type": "trial_finished", "sweep_id", "config_index", "repeat", "fold",
"status", "test_score", "train_score", "fit_seconds", "epochs", "engine",
"error", "n_finished", "n_todo", "best_index", "best_mean", "best_label",
"time"}``
    when a trial is stored (``status`` done, diverged or failed), or dropped at
    a cancel (``status`` cancelled, not stored); ``best_*`` is the configuration
    with the best mean test score so far among those without a failed trial;
``{"type": "baseline_finished", "sweep_id", "config_index", "name", "repeat",
"fold", "status", "test_score", "time"}``
    when a baseline's trial is stored;
``{"type": "configuration_stopped", "sweep_id", "config_index", "label",
"after_repeat", "after_fold", "n_scores", "best_index", "best_label",
"difference", "p_worse", "rope", "reason", "n_skipped", "n_todo", "time"}``
    with racing (``plan.race``), when a configuration is stopped: ``n_skipped``
    of its trials will not run, and ``n_todo`` is the new number of trials to
    run (the later ``trial_finished`` events carry it too);
``{"type": "sweep_finished", "sweep_id", "state", "n_finished", "n_todo",
"seconds", "time"}``
    once at the end; ``state`` is ``finished`` or ``interrupted``.

Racing
------
With ``plan.race`` the runner keeps a :class:`workbench.sweep.racing.Race`: every
stored trial is noted, and after each one the race makes the looks whose block
of folds is complete; a configuration it stops is recorded in the store
(:meth:`workbench.sweep.store.Store.add_stopped`) and its trials still waiting
are dropped (a trial of it already running finishes and is stored). A resumed
racing sweep reads the stopped configurations, skips their trials and replays
the looks on the stored scores. The same on every backend: the race lives in
the calling process.

Counts (``n_trials``, ``n_todo``, ``n_stored``, ``n_finished``) and the
``trial_*`` events are about the networks' trials; the baselines' trials
(:meth:`workbench.sweep.plan.SweepPlan.baseline_trials`, run right after one
network trial per worker -- the user sees a network's score as early as the
workers allow -- and before the rest: they are quick, and the yardstick is then
there even for an interrupted sweep) are
counted in ``sweep_started``'s ``n_baselines_todo`` and reported by
``baseline_finished`` only.

Stored once per sweep: the target of every row and the plan's fold
assignment (:meth:`workbench.sweep.store.Store.put_rows`), which place each
trial's out-of-fold predictions on the table's rows. A resumed sweep stored
before predictions were kept gets them on resume.

Cancel, crashes, resume
-----------------------
``cancel`` is a :class:`threading.Event`; it is checked between trials (and
while waiting for them): no new trial starts, running trials are abandoned
(their workers stopped), every finished trial stays stored and the sweep is
marked ``interrupted``. A KeyboardInterrupt (Ctrl-C) does the same and is then
re-raised. A worker that dies (killed, out of memory) costs only its trials:
each is retried once, alone, and marked ``failed`` if its worker dies again.
``run_sweep(resume=SWEEP_ID)`` runs exactly the trials that are not stored,
after checking that the table file still has the stored fingerprint (``table=``
gives a moved table's new path; the fingerprint is checked all the same).

Who runs a sweep, and what is left behind
-----------------------------------------
The sweep's process holds its lock (:class:`workbench.sweep.store.SweepLock`) from
before the sweep is stored until it ends; a resume of a sweep whose lock another
process holds is refused, and a dead holder's lock is simply taken. Pool workers
watch the process that started them and end within :data:`PARENT_CHECK_SECONDS`
of its death (:func:`_watch_parent`); the table copy they read lives in a
temporary folder with a lock file of its own, removed when the sweep ends and,
after a kill, by the next sweep (:func:`clean_abandoned_copies`). A store that
cannot be written (read-only, full disk) raises :class:`InputError`: the workers
are stopped first, every trial stored so far stays, and the sweep can be resumed.

Limits
------
At most :func:`default_jobs` worker processes (the cores), and never more trials
in flight than there are trials to run. A scheduler address must be ``tcp://``
and answer as a Dask scheduler within :data:`CONNECT_SECONDS`
(:func:`_probe_scheduler`), else one line says why.
"""

from __future__ import annotations

import collections
import datetime as _dt
import os
import secrets
import sqlite3
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from workbench.errors import InputError
from workbench.sweep.fold_files import SharedFolds, is_fold_file, needs_in_order, worth_sharing
from workbench.sweep.plan import SweepPlan
from workbench.sweep.pool import (  # noqa: F401 - the pool's names, re-exported for tests
    _POOL,
    _POOL_LOCK,
    _THREAD_ENV,
    PARENT_CHECK_SECONDS,
    POOL_IDLE_SECONDS,
    _drop_pool,
    _shutdown,
    _warm_pool,
    _watch_parent,
    default_jobs,
)
from workbench.sweep.store import (
    FINISHED,
    INTERRUPTED,
    RUNNING,
    Store,
    SweepLock,
    table_fingerprint,
)
from workbench.sweep.trials import (
    CANCELLED,
    DONE,
    FAILED,
    TrialData,
    describe_baseline,
    run_trials,
    run_trials_from_file,
    stack_bytes,
    stackable,
    target_codes,
)

#: a worker that dies under a trial costs the trial one attempt; one retry by default
RETRIES = 1
#: seconds between checks of the cancel flag while trials run
POLL_SECONDS = 0.2
#: hand the folds of one configuration to a worker together, to train in a stack
#: (:func:`workbench.sweep.trials.run_trials`); False: every trial alone (the same results)
STACK = True
#: local workers map fold features the sweep's process prepared (``run_sweep``'s
#: ``share_folds``, :mod:`workbench.sweep.fold_files`); False: each worker computes its own
#: (the same results)
SHARE_FOLDS = True


@dataclass
class SweepOutcome:
    """What :func:`run_sweep` returns."""

    sweep_id: str
    state: str
    n_finished: int
    n_todo: int
    seconds: float


def new_sweep_id() -> str:
    return _dt.datetime.now(_dt.UTC).strftime("%Y%m%d-%H%M%S-") + secrets.token_hex(3)


def load_data(plan: SweepPlan, frame=None):
    """Load the plan's table; return ``(TrialData, fingerprint)``.

    ``frame``: the table as the caller already read it from ``plan.table`` (the frame
    it built the plan from, ``build_plan(..., df=frame)``), used instead of reading and
    parsing the file a second time (about 1.3 s for a 32 MB CSV); the fingerprint still
    hashes the file itself.

    The plan's column roles (``plan.roles``) are applied with
    :meth:`workbench.data.profiling.TableProfile.with_roles`, the one rule for
    them: a column typed ``id`` or ``constant`` that the user makes a feature is
    used as its base type.
    """
    from workbench.data.intake import load_table
    from workbench.data.profiling import analyse_target, profile_table, split_xy

    df = frame if frame is not None else load_table(plan.table, sheet=plan.sheet)[0]
    target = analyse_target(df, plan.target, kind=plan.kind)
    if target.task != plan.task:
        raise InputError(f"target {plan.target!r} is now a {target.task} target, but the plan "
                         f"was made for {plan.task}; start a new sweep", setting="target")
    profile = profile_table(df, target=plan.target)
    roles = dict(plan.roles or {})  # the user's role changes (the window's profile table)
    gone = [name for name in roles if name not in {c.name for c in profile.columns}]
    if gone:
        raise InputError(f"column {gone[0]!r} of the plan's column roles is not in "
                         f"{plan.table}; start a new sweep", setting="roles")
    profile = profile.with_roles(roles)
    X, y = split_xy(df, target)
    return TrialData(X=X, y=y, profile=profile, target=target), table_fingerprint(plan.table, df)


def sweep_rows(plan: SweepPlan, y, folds: dict) -> dict:
    """What the store keeps to place predictions on rows (see :meth:`Store.put_rows`).

    ``folds`` is :meth:`SweepPlan.fold_indices`' answer; each row's test fold
    per repeat is read from it, so the stored assignment is the plan's own.
    """
    y = np.asarray(y)
    assignment = np.full((plan.repeats, y.shape[0]), -1, dtype=np.int64)
    for (r, f), (_train, test) in folds.items():
        assignment[r, test] = f
    if plan.task == "classification":
        classes, codes = target_codes(y)
        return {"target": codes, "classes": list(classes), "folds": assignment}
    return {"target": y.astype(np.float64), "classes": None, "folds": assignment}


# --------------------------------------------------------------------------- the sweep


def run_sweep(plan: SweepPlan | None = None, *, store: Store | None = None,
              resume: str | None = None, jobs: int | None = None, cluster=None,
              backend: str = "processes", on_event=None, cancel: threading.Event | None = None,
              retries: int = RETRIES, sweep_id: str | None = None,
              table=None, frame=None, share_folds: str = "always") -> SweepOutcome:
    """Run a sweep (or the missing trials of a stored one) and store every trial.

    Parameters
    ----------
    plan : SweepPlan, optional
        The plan of a new sweep (not with ``resume``).
    store : Store, optional
        Where trials go; default the user's store.
    resume : str, optional
        Id of a stored sweep to finish.
    jobs : int, optional
        Worker processes (default: every core; never more than the cores,
        :func:`default_jobs`).
    cluster : str or distributed.Client, optional
        A Dask scheduler address (``tcp://HOST:PORT``) or a connected client.
    backend : {"processes", "inline"}
        Local execution (ignored with ``cluster``).
    on_event : callable, optional
        Receives the event dicts (module docstring).
    cancel : threading.Event, optional
        Set it to stop the sweep between trials.
    retries : int
        Extra attempts for a trial whose worker died.
    sweep_id : str, optional
        Id for a new sweep (default: time stamp + random suffix).
    table : path, optional
        With ``resume``: where the sweep's table is now, when it was moved. Its
        SHA-256 fingerprint must still match the stored one; the new path is
        then stored in the sweep's plan.
    share_folds : {"always", "large"}
        With local workers: prepare the folds' features in this process for every table,
        or only for a large one (module docstring). The results are the same.
    frame : pandas.DataFrame, optional
        With a new plan: the table as the caller read it from ``plan.table`` to build the
        plan (:func:`load_data`), so that the file is not read and parsed again.

    Returns
    -------
    SweepOutcome

    Raises
    ------
    InputError
        for a bad plan, an unknown sweep, a table that no longer matches the
        stored fingerprint, a sweep being run by another process (it holds the
        sweep's lock, :class:`workbench.sweep.store.SweepLock`), or a store that
        cannot be written (read-only, full).
    """
    t0 = time.perf_counter()
    store = store if store is not None else Store()
    cancel = cancel if cancel is not None else threading.Event()
    emit = on_event if on_event is not None else (lambda event: None)
    if (plan is None) == (resume is None):
        raise InputError("give either a plan for a new sweep or the id of a sweep to resume")
    if frame is not None and resume is not None:
        raise InputError("a resumed sweep reads its table from the store's plan; give no frame")
    if table is not None and resume is None:
        raise InputError("a new location of the table is for resuming a sweep; a new sweep "
                         "reads the plan's table", setting="table")
    if share_folds not in ("always", "large"):
        raise ValueError(f"share_folds is 'always' or 'large', not {share_folds!r}")
    if jobs is not None and int(jobs) < 1:
        raise InputError(f"the number of worker processes must be at least 1, got {jobs}",
                         setting="jobs")
    if backend not in ("processes", "inline") and cluster is None:
        raise InputError(f"unknown backend {backend!r}; use processes or inline")
    if isinstance(cluster, str):
        cluster = _check_scheduler_address(cluster)  # before the table is read
    store.check_writable()  # a read-only store is refused before any work
    clean_abandoned_copies()
    if resume is not None:
        lock = SweepLock(store.path, resume)
        store.get_sweep(resume)  # an unknown sweep is named first
        if not lock.acquire():
            raise InputError(f"sweep {resume} is being run by another process right now (it "
                             "holds the sweep's lock); wait for it to finish, or stop it and "
                             "resume it then", setting="sweep")
    else:
        sweep_id = sweep_id or new_sweep_id()
        lock = SweepLock(store.path, sweep_id)
        if not lock.acquire():
            raise InputError(f"a sweep {sweep_id} is being run by another process; choose "
                             "another sweep id", setting="sweep")
    try:
        return _run_locked(plan, store, resume, sweep_id, jobs, cluster, backend, emit,
                           cancel, retries, table, t0, frame, share_folds)
    finally:
        lock.release()


def _run_locked(plan, store, resume, sweep_id, jobs, cluster, backend, emit, cancel, retries,
                table, t0, frame=None, share_folds="always") -> SweepOutcome:
    """:func:`run_sweep` once the sweep's lock is held."""
    if resume is not None:
        sweep = store.get_sweep(resume)  # read again under the lock
        if sweep["state"] == FINISHED and sweep["n_stored"] >= sweep["n_trials"]:
            raise InputError(f"sweep {resume} is already finished; its results are stored, "
                             "there is nothing left to run", setting="sweep")
        plan = SweepPlan.from_dict(sweep["plan"])
        if table is not None:
            plan.table = str(Path(table).expanduser().resolve())
        if not Path(plan.table).is_file():
            raise InputError(f"the table of sweep {resume} is not found at {plan.table}; give "
                             "its new location (its SHA-256 fingerprint is checked)",
                             setting="table")
        data, fingerprint = load_data(plan)
        stored = sweep["fingerprint"]
        if fingerprint["sha256"] != stored["sha256"] or fingerprint["rows"] != stored["rows"] \
                or fingerprint["columns"] != stored["columns"]:
            raise InputError(f"the table {plan.table} is not the one sweep {resume} started on "
                             "(its SHA-256 fingerprint no longer matches: it changed since, or it "
                             "is another file), so the stored trials cannot be combined with new "
                             "ones; give the sweep's own table or start a new sweep",
                             setting="table")
        sweep_id = resume
        done = store.finished_keys(sweep_id, baselines=True)
        stopped = store.stopped(sweep_id)
    else:
        data, fingerprint = load_data(plan, frame)
        done, stopped = set(), {}
    folds = plan.fold_indices(data.y)  # an impossible split fails before anything is stored
    todo = [t for t in plan.trials() if t.key not in done and t.config_index not in stopped]
    todo_baselines = [t for t in plan.baseline_trials() if t.key not in done]
    if resume is not None and not todo and not todo_baselines and stopped:
        raise InputError(f"sweep {resume} has run every trial that racing left to run; its "
                         "results are stored, there is nothing left to run", setting="sweep")
    tasks = group_trials(plan, todo, _stacks(plan, data)) if STACK else [(t,) for t in todo]
    rows = sweep_rows(plan, data.y, folds)
    configs = plan.configurations() + plan.baseline_configurations()
    if cluster is not None:
        executor = _DaskExecutor(cluster, data)
    elif backend == "inline":
        executor = _InlineExecutor(data)
    else:
        workers = min(int(jobs or default_jobs()), default_jobs())
        executor = _LokyExecutor(workers, data, in_flight=len(tasks) + len(todo_baselines))
    try:
        # one network trial per worker first (the first score the user sees), then the
        # quick baselines, then the rest; the order changes no result (seeds are per trial)
        head, rest = first_trials(tasks, max(1, int(executor.workers)))
        sequence = head + [(t,) for t in todo_baselines] + rest
        if isinstance(executor, _LokyExecutor) and SHARE_FOLDS and (
                share_folds == "always" or worth_sharing(data)):
            executor.share(folds, needs_in_order(sequence, configs, plan.dtype))
        if resume is not None:
            store.set_state(sweep_id, RUNNING)
            if table is not None and str(plan.table) != str(sweep["plan"].get("table")):
                store.set_table(sweep_id, plan.table)
            if store.sweep_rows(sweep_id) is None:  # stored before predictions were kept
                store.put_rows(sweep_id, rows["target"], rows["folds"], rows["classes"])
        else:
            try:
                store.create_sweep(
                    sweep_id, plan.to_dict(), fingerprint,
                    [c.to_dict() for c in plan.configurations()],
                    baselines=[{"index": b.index, "name": b.name,
                                "estimator": describe_baseline(plan.task, b.name, plan.metric)}
                               for b in plan.baseline_configurations()],
                    rows=rows)
            except sqlite3.IntegrityError:
                raise InputError(f"a sweep {sweep_id} is already stored; choose another sweep "
                                 "id", setting="sweep") from None
    except BaseException:
        executor.close(kill=True)
        raise
    run = _Run(plan, configs, folds, sweep_id, store, emit, cancel, len(todo))
    for t in store.trials(sweep_id, with_history=False):
        run.note_score(t)
    if plan.race:
        from workbench.sweep.racing import Race

        run.race = Race(plan, stopped)
        for t in store.trials(sweep_id, with_history=False) + store.baseline_trials(sweep_id):
            run.race.note(t)
    n_stored = sum(1 for key in done if key[0] < plan.n_configurations)
    emit({"type": "sweep_started", "sweep_id": sweep_id, "n_trials": plan.n_trials,
          "n_todo": len(todo), "n_stored": n_stored, "n_configurations": plan.n_configurations,
          "n_baselines_todo": len(todo_baselines),
          "metric": plan.metric, "resumed": resume is not None, "backend": executor.name,
          "workers": executor.workers, "time": time.time()})
    interrupted = False
    try:
        interrupted = run.execute(executor, sequence, retries)
    except KeyboardInterrupt:
        try:
            run.cancel_running()
        finally:  # the workers and the scratch folder go even if an event handler raises
            executor.close(kill=True)
        _mark_interrupted(store, sweep_id)
        emit(run.finished_event(INTERRUPTED, t0))
        raise
    except BaseException:
        # e.g. a full disk: stop the workers first; the state is a courtesy (the lock,
        # released by the caller, is what tells that nobody runs the sweep any more)
        executor.close(kill=True)
        _mark_interrupted(store, sweep_id)
        raise
    state = INTERRUPTED if interrupted else FINISHED
    executor.close(kill=interrupted)
    store.set_state(sweep_id, state)
    emit(run.finished_event(state, t0))
    return SweepOutcome(sweep_id, state, run.n_finished, run.n_todo, time.perf_counter() - t0)


def look_positions(plan: SweepPlan) -> set[int]:
    """The positions (in racing's order of blocks of folds, repeat-major) after which a
    racing sweep may look; none without racing.

    :mod:`workbench.sweep.racing`'s own ``look_positions(plan)`` when it has one; else
    every block from ``Race.first`` (the end of the first repeat) on."""
    if not plan.race:
        return set()
    from workbench.sweep import racing

    own = getattr(racing, "look_positions", None)
    if own is not None:
        return {int(p) for p in own(plan)}
    return set(range(int(racing.Race(plan).first), plan.folds * plan.repeats))


def _stacks(plan: SweepPlan, data) -> set[int]:
    """The configurations whose folds go out together: those that can train in a stack
    (:func:`workbench.sweep.trials.stackable`) on a table whose fits of one repeat fit
    the stacking budget (judged by the table's columns before one-hot encoding; the
    worker checks the exact width and runs a group one trial at a time when it is over)."""
    from workbench.sweep.trials import STACK_BYTES

    rows, columns = data.X.shape
    train_rows = rows - rows // plan.folds
    if plan.folds < 2 or stack_bytes(train_rows, columns, plan.folds, plan.dtype) > STACK_BYTES:
        return set()
    return {c.index for c in plan.configurations()
            if stackable({"config": c.to_dict()})}


def trial_spec(plan: SweepPlan, config, repeat: int, fold: int, folds: dict, *,
               epochs: int | None = None, attempt: int = 1) -> dict:
    """What a worker needs to run one trial (:func:`workbench.sweep.trials.run_trial`):
    ``config`` (a configuration or baseline of ``plan``) on fold ``fold`` of repeat
    ``repeat`` of ``folds`` (:meth:`SweepPlan.fold_indices`), with the plan's seed for
    that fold and the plan's settings; ``epochs`` overrides the plan's (the estimate's
    short timed trials)."""
    tr, te = folds[(repeat, fold)]
    return {"config": config.to_dict(), "repeat": repeat, "fold": fold,
            "train": np.asarray(tr).astype(np.int32), "test": np.asarray(te).astype(np.int32),
            "random_state": plan.model_seed(repeat, fold), "task": plan.task,
            "metric": plan.metric, "epochs": int(plan.epochs if epochs is None else epochs),
            "early_stopping": plan.early_stopping, "batch_size": plan.batch_size,
            "dtype": plan.dtype, "attempt": attempt}


def group_trials(plan: SweepPlan, trials, stacks) -> list[tuple]:
    """``trials`` (in the plan's order) as tasks, each a tuple of trials a worker runs
    together (:func:`workbench.sweep.trials.run_trials`).

    A configuration of ``stacks`` has its trials of one repeat in one task, unless
    racing looks inside the repeat (:func:`look_positions`): a task then ends at each
    look, so no task holds trials on both sides of a look and the race decides, and
    stops, exactly as with one trial per task. Each task takes the place of its first
    trial in the plan's order; every other trial is a task of its own.
    """
    K = plan.folds
    looks = sorted(look_positions(plan))
    tasks: list = []
    open_groups: dict = {}  # (config, repeat, segment) -> the task's list of trials
    for t in trials:
        if t.config_index not in stacks:
            tasks.append([t])
            continue
        pos = t.repeat * K + t.fold
        key = (t.config_index, t.repeat, sum(1 for p in looks if p < pos))
        group = open_groups.get(key)
        if group is None:
            group = open_groups[key] = []
            tasks.append(group)
        group.append(t)
    return [tuple(task) for task in tasks]


def first_trials(tasks, n: int) -> tuple[list, list]:
    """``(head, rest)``: the first trial of each of the first ``n`` tasks as tasks of their
    own (so that each worker's first result comes from one trial; with fewer tasks than
    ``n``, their next trials too), and the rest in order."""
    rest = list(tasks)
    head = []
    while len(head) < n and rest:  # again from the start when there are fewer tasks
        i = 0
        while len(head) < n and i < len(rest):
            task = rest[i]
            head.append(task[:1])
            if len(task) > 1:
                rest[i] = task[1:]
                i += 1
            else:
                rest.pop(i)
    return head, rest


def _mark_interrupted(store: Store, sweep_id: str) -> None:
    """Mark a sweep interrupted if the store can still be written (not on a full disk)."""
    try:
        store.set_state(sweep_id, INTERRUPTED)
    except (InputError, sqlite3.Error):
        pass


class _Run:
    """Book-keeping of one run: specs, retries, events, best so far."""

    def __init__(self, plan, configs, folds, sweep_id, store, emit, cancel, n_todo):
        self.plan, self.configs, self.folds = plan, configs, folds
        self.sweep_id, self.store, self.emit, self.cancel = sweep_id, store, emit, cancel
        self.n_todo, self.n_finished = n_todo, 0
        self.sums = collections.defaultdict(lambda: [0.0, 0])
        self.bad = set()
        self.running = {}  # handle -> (trial, attempt)
        self.race = None  # a workbench.sweep.racing.Race when the plan races
        self.pending = collections.deque()  # (trial, attempt) not handed out yet

    def specs(self, task, attempt):
        return [self.spec(trial, attempt) for trial in task]

    def spec(self, trial, attempt):
        return trial_spec(self.plan, self.configs[trial.config_index], trial.repeat,
                          trial.fold, self.folds, attempt=attempt)

    def is_baseline(self, config_index) -> bool:
        return config_index >= self.plan.n_configurations

    def note_score(self, res):
        c = res["config_index"]
        if self.is_baseline(c):
            return
        if res["status"] == DONE and res.get("test_score") is not None:
            s = self.sums[c]
            s[0] += res["test_score"]
            s[1] += 1
        elif res["status"] != DONE:
            self.bad.add(c)

    def best(self):
        stopped = self.race.stopped if self.race is not None else {}
        means = {c: s[0] / s[1] for c, s in self.sums.items()
                 if s[1] and c not in self.bad and c not in stopped}
        if not means:
            return None, None
        c = max(means, key=lambda k: (means[k], -k))
        return c, means[c]

    def started(self, task, attempt):
        for trial in task:
            if self.is_baseline(trial.config_index):
                continue
            self.emit({"type": "trial_started", "sweep_id": self.sweep_id,
                       "config_index": trial.config_index, "repeat": trial.repeat,
                       "fold": trial.fold, "attempt": attempt,
                       "label": self.configs[trial.config_index].label, "time": time.time()})

    def finished(self, res):
        try:
            self.store.add_trial(self.sweep_id, res)
        except sqlite3.IntegrityError:
            # stored meanwhile by another process resuming the same sweep: keep that copy
            pass
        if self.race is not None:
            self.race.note(res)
        if self.is_baseline(res["config_index"]):
            self.emit({"type": "baseline_finished", "sweep_id": self.sweep_id,
                       "config_index": res["config_index"],
                       "name": self.configs[res["config_index"]].name, "repeat": res["repeat"],
                       "fold": res["fold"], "status": res["status"],
                       "test_score": res.get("test_score"), "time": time.time()})
        else:
            self.n_finished += 1
            self.note_score(res)
        if self.race is not None:
            self.race_look()
        if not self.is_baseline(res["config_index"]):
            self._emit_finished(res)

    def race_look(self):
        """Make the race's due looks; record, announce and drop the trials of each
        configuration it stops."""
        for rec in self.race.look():
            c = rec["config_index"]
            self.store.add_stopped(self.sweep_id, rec)
            before = sum(len(task) for task, _ in self.pending)
            self.pending = collections.deque((task, a) for task, a in self.pending
                                             if task[0].config_index != c)
            skipped = before - sum(len(task) for task, _ in self.pending)
            self.n_todo -= skipped
            self.emit({"type": "configuration_stopped", "sweep_id": self.sweep_id,
                       "config_index": c, "label": self.configs[c].label,
                       "after_repeat": rec["after_repeat"], "after_fold": rec["after_fold"],
                       "n_scores": rec["n_scores"], "best_index": rec["best_index"],
                       "best_label": self.configs[rec["best_index"]].label,
                       "difference": rec["difference"], "p_worse": rec["p_worse"],
                       "rope": rec["rope"], "reason": rec["reason"], "n_skipped": skipped,
                       "n_todo": self.n_todo, "time": time.time()})

    def _emit_finished(self, res):
        b, m = self.best()
        self.emit({"type": "trial_finished", "sweep_id": self.sweep_id,
                   "config_index": res["config_index"], "repeat": res["repeat"],
                   "fold": res["fold"], "status": res["status"],
                   "test_score": res.get("test_score"), "train_score": res.get("train_score"),
                   "fit_seconds": res.get("fit_seconds"), "epochs": res.get("epochs"),
                   "engine": res.get("engine"), "error": res.get("error"),
                   "n_finished": self.n_finished, "n_todo": self.n_todo, "best_index": b,
                   "best_mean": m, "best_label": self.configs[b].label if b is not None else None,
                   "time": time.time()})

    def cancel_running(self):
        for trial in [t for task, _attempt in self.running.values() for t in task]:
            if self.is_baseline(trial.config_index):
                continue
            self._emit_finished({"config_index": trial.config_index, "repeat": trial.repeat,
                                 "fold": trial.fold, "status": CANCELLED,
                                 "engine": self.configs[trial.config_index].engine})
        self.running.clear()

    def finished_event(self, state, t0):
        return {"type": "sweep_finished", "sweep_id": self.sweep_id, "state": state,
                "n_finished": self.n_finished, "n_todo": self.n_todo,
                "seconds": time.perf_counter() - t0, "time": time.time()}

    def lost(self, trial, attempt, error):
        """A trial whose worker died: the stored failure after the last attempt."""
        cfg = self.configs[trial.config_index]
        tr, te = self.folds[(trial.repeat, trial.fold)]
        return {"config_index": trial.config_index, "repeat": trial.repeat, "fold": trial.fold,
                "status": FAILED, "test_score": None, "train_score": None, "fit_seconds": None,
                "epochs": None, "engine": cfg.engine, "n_train": len(tr), "n_test": len(te),
                "error": f"the worker process died {attempt} times running this trial "
                         f"(killed or out of memory?): {error}", "attempts": attempt,
                "history": {}, "health": {}}

    def execute(self, executor, todo, retries) -> bool:
        """Run ``todo`` (tasks: tuples of trials run together); True when cancelled
        before the end."""
        self.pending = collections.deque((tuple(task), 1) for task in todo)
        suspects = collections.deque()  # retries after a worker death, run alone, one by one
        if self.race is not None:
            self.race_look()  # a resumed race: replay the looks, record any not recorded
        while self.pending or suspects or self.running:
            if self.cancel.is_set():
                self.cancel_running()
                return True
            self._fill(executor, suspects)
            # a trial that finished is stored even when a cancel came meanwhile
            to_store = []
            for handle, outcomes, error in executor.wait(list(self.running), POLL_SECONDS):
                task, attempt = self.running.pop(handle)
                if error is None:
                    for outcome in outcomes:
                        outcome["attempts"] = attempt
                        to_store.append(outcome)
                elif attempt <= retries:
                    # each trial of a lost task again, alone (a group may have been too big)
                    suspects.extend(((trial,), attempt + 1) for trial in task)
                else:
                    to_store.extend(self.lost(trial, attempt, error) for trial in task)
            if to_store and executor.asynchronous and not self.cancel.is_set():
                # hand the idle workers new trials before the commit, so they never wait for it
                self._fill(executor, suspects)
            for res in to_store:
                self.finished(res)
        return False

    def _fill(self, executor, suspects):
        """Give free workers trials; a retried trial runs only on an otherwise idle pool."""
        while len(self.running) < executor.workers:
            if suspects:
                if self.running:
                    return
                task, attempt = suspects.popleft()
            elif self.pending:
                task, attempt = self.pending.popleft()
            else:
                return
            handle = executor.submit(self.specs(task, attempt))
            self.running[handle] = (task, attempt)
            self.started(task, attempt)
            if attempt > 1:
                return


# --------------------------------------------------------------------------- executors


class _InlineExecutor:
    name = "inline"
    workers = 1
    asynchronous = False  # submit() runs the trial at once

    def __init__(self, data):
        self.data = data
        self._results = {}
        self._n = 0

    def submit(self, specs):
        self._n += 1
        self._results[self._n] = run_trials(self.data, specs)
        return self._n

    def wait(self, handles, timeout):
        return [(h, self._results.pop(h), None) for h in handles]

    def close(self, kill=False):
        pass


# --------------------------------------------------------------------------- table copies

#: the temporary folders of the table copies the local workers read: <tmp>/PREFIX*
COPY_PREFIX = "workbench-sweep-"
#: in each folder: the table copy, and a lock file its sweep holds while it runs; with shared
#: fold features also the table without its features and the fold files
#: (:mod:`workbench.sweep.fold_files`)
COPY_NAME, COPY_LOCK, LIGHT_NAME = "table.pkl", "in-use.lock", "light.pkl"


def clean_abandoned_copies(root=None) -> list[str]:
    """Remove the table copies left by sweeps whose process is gone.

    Only a folder that is certainly ours and abandoned is removed: named
    ``workbench-sweep-*`` in the temporary folder, owned by this user, holding
    nothing but :data:`COPY_NAME`, :data:`COPY_LOCK`, :data:`LIGHT_NAME` and fold files
    (:func:`workbench.sweep.fold_files.is_fold_file`), and whose lock nobody holds (the process that made it ended without cleaning up: killed, or a
    crash). Returns the folders removed.
    """
    import tempfile

    from workbench.sweep.store import file_unlock, try_file_lock

    root = Path(root if root is not None else tempfile.gettempdir())
    removed = []
    try:
        candidates = list(root.glob(COPY_PREFIX + "*"))
    except OSError:  # pragma: no cover - an unreadable temporary folder
        return removed
    for folder in candidates:
        try:
            if folder.is_symlink() or not folder.is_dir() or \
                    (hasattr(os, "getuid") and folder.stat().st_uid != os.getuid()):
                continue
            names = {p.name for p in folder.iterdir()}
            if COPY_LOCK not in names or not all(
                    n in (COPY_NAME, COPY_LOCK, LIGHT_NAME) or is_fold_file(n) for n in names):
                continue  # not made by this program (or by an older one): not ours to judge
            fd = os.open(folder / COPY_LOCK, os.O_RDONLY)
        except OSError:
            continue
        try:
            if not try_file_lock(fd):
                continue  # its sweep is running
            try:
                for name in sorted(names - {COPY_LOCK}) + [COPY_LOCK]:
                    try:
                        (folder / name).unlink()
                    except FileNotFoundError:
                        pass
                folder.rmdir()
                removed.append(str(folder))
            except OSError:
                pass
            finally:
                file_unlock(fd)
        finally:
            os.close(fd)
    return removed


class _TableCopy:
    """The table written once per sweep for the local workers, in its own temporary
    folder with a lock file held while the sweep runs (see :func:`clean_abandoned_copies`)."""

    def __init__(self, data):
        import tempfile

        from workbench.sweep.store import try_file_lock
        from workbench.sweep.trials import save_worker_data

        self.folder = Path(tempfile.mkdtemp(prefix=COPY_PREFIX))
        self._fd = None
        try:
            self._fd = os.open(self.folder / COPY_LOCK, os.O_RDWR | os.O_CREAT, 0o600)
            try_file_lock(self._fd)
            os.write(self._fd, f"{os.getpid()}\n".encode())  # for the record; the lock counts
            self.path = str(self.folder / COPY_NAME)
            save_worker_data(data, self.path)
        except BaseException:
            self.remove()
            raise

    def remove(self):
        import shutil

        shutil.rmtree(self.folder, ignore_errors=True)
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None


class _LokyExecutor:
    """loky worker processes (the sweep's own pool, kept warm between sweeps).

    The table is written once per sweep to a temporary file that each worker
    reads on its first trial (see :func:`workbench.sweep.trials.run_trial_from_file`);
    the file is removed when the sweep ends, and by the next sweep if this
    process is killed (:func:`clean_abandoned_copies`). ``in_flight`` caps the
    trials handed out at once (no more than there are trials to run).
    """

    name = "processes"
    asynchronous = True

    def __init__(self, jobs, data, in_flight=None):
        self.pool_size = int(jobs)
        self.workers = max(1, min(self.pool_size, int(in_flight))) if in_flight else \
            self.pool_size
        self._copy = _TableCopy(data)
        self._path = self._copy.path
        self._token = data.token
        self._data = data
        self._pool = None
        self._shared = self._light = None
        self._sent = {}  # future -> the specs it carries (with shared features)

    def share(self, folds, needs):
        """From now on, hand out each trial with its fold's features prepared by this
        process (:class:`workbench.sweep.fold_files.SharedFolds`, in the folder of the
        table copy) and the table without its features for the workers to read."""
        from workbench.sweep.trials import light_data, save_worker_data

        light = str(self._copy.folder / LIGHT_NAME)
        save_worker_data(light_data(self._data), light)
        self._light = light
        self._shared = SharedFolds(self._data, self._copy.folder, folds, needs)

    def _ensure(self):
        if self._pool is None:
            self._pool = _warm_pool(self.pool_size)
        return self._pool

    def submit(self, specs):
        if self._shared is not None:
            specs = self._shared.attach(specs)  # waits for the folds' files, if need be
        args = (run_trials_from_file, self._token, self._path, specs, self._light)
        try:
            future = self._ensure().submit(*args)
        except Exception:  # a warm pool broken while idle (a worker killed): start afresh
            self._stop_pool()
            future = self._ensure().submit(*args)
        if self._shared is not None:
            self._sent[future] = specs
        return future

    def wait(self, handles, timeout):
        from concurrent.futures import FIRST_COMPLETED, wait

        done, _ = wait(handles, timeout=timeout, return_when=FIRST_COMPLETED)
        out, broken = [], False
        for f in done:
            exc = f.exception()
            specs = self._sent.pop(f, None)
            if exc is None:
                out.append((f, f.result(), None))
                if specs is not None:  # these trials are over: their fold files may go
                    self._shared.done(specs)
            else:
                out.append((f, None, f"{type(exc).__name__}: {exc}"))
                broken = True
        if broken:
            # the pool is unusable after a worker death: every running trial is lost with it
            for f in handles:
                if f not in done:
                    self._sent.pop(f, None)
                    out.append((f, None, "the worker pool broke while this trial ran"))
            self._stop_pool()
        return out

    def _stop_pool(self):
        if self._pool is not None:
            _drop_pool(self._pool)
            self._pool = None

    def close(self, kill=False):
        if kill:
            self._stop_pool()
        self._pool = None
        self._sent.clear()
        if self._shared is not None:
            self._shared.close()  # no file is written into the folder after this
        self._copy.remove()


#: seconds to reach a Dask scheduler and hear it answer, before giving up with one line
CONNECT_SECONDS = 10
#: the scheduler address schemes a sweep accepts (see :func:`_check_scheduler_address`)
SCHEMES = ("tcp",)


def _check_scheduler_address(address: str) -> str:
    """Refuse a malformed or unsupported scheduler address before any connection; return it
    with its scheme (``tcp://``).

    Only plain TCP is offered: ``tls://`` needs certificates that the sweep does not
    configure, ``inproc://`` reaches only a scheduler inside this very process, and
    ``ucx://`` needs the UCX libraries; each would fail deep inside Dask's client
    (a traceback, then a 40 s wait in its clean-up).
    """
    from distributed.comm import parse_address
    from distributed.comm.addressing import parse_host_port

    text = str(address).strip()
    scheme = text.split("://", 1)[0].lower() if "://" in text else "tcp"
    if scheme not in SCHEMES:
        raise InputError(f"the scheduler address {address!r} uses {scheme}://, which a sweep does "
                         "not offer (only plain TCP: TLS needs certificates, inproc reaches only "
                         "this process, UCX needs its libraries); write it as tcp://HOST:PORT",
                         setting="cluster")
    try:
        scheme, location = parse_address(text if "://" in text else "tcp://" + text)
        parse_host_port(location)
    except (ValueError, TypeError) as exc:
        raise InputError(f"{address!r} is not a Dask scheduler address ({exc}); write it as "
                         "tcp://HOST:PORT, e.g. tcp://10.0.0.5:8786", setting="cluster") from None
    return f"{scheme}://{location}"


def _probe_scheduler(address: str, seconds: float | None = None) -> dict:
    """Connect to ``address`` and ask for its identity, all within ``seconds``.

    Dask's client waits for a scheduler's handshake without a time limit once the
    TCP connection is made, so a port where something else listens (a web
    server) would hold it for good; this asks the question with a deadline first,
    on its own event loop in a thread of its own.

    Raises
    ------
    InputError
        when nothing answers in time, or what answers is not a Dask scheduler.
    """
    import asyncio
    import socket

    from distributed.comm import parse_address
    from distributed.comm.addressing import parse_host_port

    seconds = CONNECT_SECONDS if seconds is None else float(seconds)
    host, port = parse_host_port(parse_address(address)[1])
    try:  # first: does anything accept connections there at all?
        socket.create_connection((host, port), timeout=seconds).close()
    except OSError as exc:
        why = exc.strerror or ("no answer" if isinstance(exc, TimeoutError) else str(exc))
        raise InputError(f"cannot reach the Dask scheduler at {address} within {seconds:g} s "
                         f"({why}); check the address (tcp://HOST:PORT) and that the scheduler "
                         "runs", setting="cluster") from None

    async def ask():
        from distributed.comm import connect

        comm = await asyncio.wait_for(connect(address, timeout=seconds), seconds)
        try:
            await asyncio.wait_for(comm.write({"op": "identity", "reply": True}), seconds)
            return await asyncio.wait_for(comm.read(), seconds)
        finally:
            comm.abort()

    out: dict = {}

    def run():
        try:
            out["reply"] = asyncio.run(ask())
        except BaseException as exc:  # reported below, in the caller's thread
            out["error"] = exc

    worker = threading.Thread(target=run, name="workbench-scheduler-probe", daemon=True)
    worker.start()
    worker.join(3 * seconds + 5)  # the three steps' deadlines, and a margin
    reply = out.get("reply")
    if isinstance(reply, dict) and reply.get("type") == "Scheduler":
        return reply
    raise InputError(f"something answers at {address}, but not as a Dask scheduler (no "
                     f"scheduler handshake within {seconds:g} s: another program on that port?); "
                     "check the port (a scheduler listens on 8786 unless told otherwise)",
                     setting="cluster")


class _DaskExecutor:
    """Futures on a Dask distributed cluster; the table is scattered once."""

    name = "dask"
    asynchronous = True

    def __init__(self, cluster, data):
        from distributed import Client

        if isinstance(cluster, str):
            address = _check_scheduler_address(cluster)
            _probe_scheduler(address)
            try:
                self.client = Client(address, timeout=CONNECT_SECONDS, set_as_default=False)
            except (OSError, TimeoutError) as exc:
                raise InputError(f"cannot reach the Dask scheduler at {cluster} ({exc}); check "
                                 "the address (tcp://HOST:PORT) and that the scheduler runs",
                                 setting="cluster") from None
            self._own = True
        else:
            self.client, self._own = cluster, False
        threads = sum(self.client.nthreads().values())
        if threads < 1:
            self.close()
            raise InputError(f"the Dask cluster at {self.client.scheduler.address} has no "
                             "workers; start some workers first", setting="cluster")
        self.workers = int(threads)
        self.data = data
        self.data_future = self.client.scatter(data, broadcast=True, hash=False)
        self._live = set()

    def submit(self, specs):
        spec = specs[0]
        key = (f"workbench-trials-{spec['config']['index']}-{spec['repeat']}-{spec['fold']}-"
               f"{len(specs)}-{spec['attempt']}-{secrets.token_hex(4)}")
        fut = self.client.submit(run_trials, self.data_future, specs, key=key, pure=False)
        self._live.add(fut)
        return fut

    def wait(self, handles, timeout):
        from distributed import wait

        try:
            with self.client.as_current():
                wait(handles, timeout=timeout, return_when="FIRST_COMPLETED")
        except Exception:  # TimeoutError, or a future cancelled with its lost input
            pass
        done = [f for f in handles if f.status != "pending"]
        out, lost = [], False
        for f in done:
            self._live.discard(f)
            if f.status == "finished":
                out.append((f, f.result(), None))
                continue
            try:
                exc = f.exception()
            except BaseException as err:  # a cancelled future raises instead
                exc = err
            out.append((f, None, f"{type(exc).__name__}: {exc}"))
            lost = True
        if lost and self.data_future.status != "finished":
            # the table went down with the last worker holding it: send it again
            self.data_future = self.client.scatter(self.data, broadcast=True, hash=False)
        return out

    def close(self, kill=False):
        try:
            live = getattr(self, "_live", set())
            if kill and live:
                self.client.cancel(list(live))
            live.clear()
            if getattr(self, "data_future", None) is not None:
                self.data_future.release()
        except Exception:  # pragma: no cover
            pass
        if self._own:
            try:
                self.client.close(timeout=CONNECT_SECONDS)
            except Exception:  # pragma: no cover - a scheduler gone meanwhile
                pass
