"""Sweep speed: serial vs 2 jobs, and against a hand-written GridSearchCV.

The fixed sweep (issue "The sweep", section 7): a 5,000-row binary table
(``sklearn.datasets.make_classification`` with 10 numeric features plus one
categorical column, written to a temporary CSV), hidden activations relu,
tanh, gelu, silu, the logistic head, one hidden layer of 32 units, learning
rates 0.001 and 0.01, 5 folds x 1 repeat, 50 epochs: 8 configurations, 40
trials.

Measured, in this order, each in a fresh worker pool:

1. ``GridSearchCV(n_jobs=2)`` written by hand with scikit-learn's
   ``MLPClassifier`` in the same preprocessing pipeline, over the
   configurations scikit-learn can express (relu and tanh: 4 of the 8), with
   the sweep's own folds and metric (``refit=False``: only the search), timed
   from reading the table, as our sweep is;
2. our sweep over the same 4 configurations with 2 jobs, once with
   ``engine="sklearn"`` (scikit-learn's MLP, as GridSearchCV) and once with
   ``engine="numpy"`` (the NumPy engine, float32, which ``auto`` now picks);
3. the whole sweep serially (1 job) and with 2 jobs: parallel efficiency
   ``serial / (2 x two_jobs)``, next to the machine's own ceiling measured
   just before and after (:func:`_machine_ceiling`), since a machine shared
   with other work cannot give two jobs two full cores.

Times are wall-clock, fastest of ``rounds`` consecutive runs (see :func:`run`). Whether
GridSearchCV's best configuration is our best or tied with it (corrected
t-test, alpha 0.05) is reported. The sweeps here run without baselines
(``baselines=[]``), so that both sides fit the same models.

:func:`store_size` measures the store's size per 1,000 trials (out-of-fold
predictions, histories and the rest) on a 10,000-row table; it is not part of
``workbench bench`` (it runs a real sweep of a few minutes):
``python -c "from workbench.benchmarks.sweep import store_size; print(*store_size()['lines'], sep='\\n')"``.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np

ROWS, FEATURES, EPOCHS = 5_000, 10, 50


def _table(path: Path, rows: int, seed: int = 0) -> None:
    import pandas as pd
    from sklearn.datasets import make_classification

    X, y = make_classification(n_samples=rows, n_features=FEATURES, n_informative=6,
                               n_redundant=2, flip_y=0.05, class_sep=0.8, random_state=seed)
    df = pd.DataFrame(X, columns=[f"x{i}" for i in range(FEATURES)])
    rng = np.random.default_rng(seed)
    df["site"] = rng.choice(["north", "south", "east", "west"], size=rows)
    df["outcome"] = np.where(y == 1, "pass", "fail")
    df.to_csv(path, index=False)


def _plan(path, hidden, engine, quick):
    from workbench.sweep.plan import build_plan

    return build_plan(path, "outcome", hidden=hidden, output="logistic", layers=["32"],
                      learning_rates=["0.001", "0.01"], folds=2 if quick else 5, repeats=1,
                      epochs=3 if quick else EPOCHS, metric="accuracy", engine=engine, seed=0,
                      baselines=[])


def _sweep(plan, store, jobs):
    from workbench.sweep.runner import run_sweep

    t = time.perf_counter()
    out = run_sweep(plan, store=store, jobs=jobs)
    return time.perf_counter() - t, out.sweep_id


def _grid_search(plan, jobs=2):
    """A hand-written ``GridSearchCV`` over the plan's grid: one definition, in
    :func:`workbench.benchmarks.kiln.grid_search`."""
    from workbench.benchmarks.kiln import grid_search

    return grid_search(plan, jobs)


def _burn(n: int) -> float:
    """A fixed CPU-bound loop (pure Python), timed in the worker."""
    t = time.perf_counter()
    x = 0
    for i in range(n):
        x += i * i
    return time.perf_counter() - t


def _machine_ceiling(n: int = 3_000_000) -> float:
    """The parallel efficiency the machine offers right now, 1.0 = two free cores.

    The same loop timed alone and then twice at once in two worker processes:
    ``alone / mean(concurrent)``. On a machine shared with other work this is
    below 1 and bounds what any 2-job sweep can reach.
    """
    from joblib.externals.loky import get_reusable_executor

    ex = get_reusable_executor(max_workers=2, reuse=True)
    ex.submit(_burn, 1000).result()
    ex.submit(_burn, 1000).result()
    alone = min(ex.submit(_burn, n).result() for _ in range(2))
    futures = [ex.submit(_burn, n) for _ in range(2)]
    together = sum(f.result() for f in futures) / 2
    return alone / together


def _best_of(rounds, fn, *args):
    """Run ``fn`` ``rounds`` times in a row; the fastest time (warm pool) and its result."""
    runs = [fn(*args) for _ in range(rounds)]
    return min(runs, key=lambda r: r[0])


def run(quick: bool = False, rounds: int | None = None) -> dict:
    """Measure the fixed sweep; ``quick`` shrinks it for smoke tests.

    Each measurement is repeated ``rounds`` times in a row (default 3, quick 1)
    and the fastest kept: the first run of a kind may start worker processes
    (the pool is shared by scikit-learn's joblib and the sweep, and is resized
    or restarted when they alternate); later runs find it warm, as repeated
    sweeps in the window do.
    """
    from workbench.sweep.results import sweep_results
    from workbench.sweep.store import Store

    rows = 1_000 if quick else ROWS
    rounds = rounds or (1 if quick else 3)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        table = tmp / "bench_table.csv"
        _table(table, rows)
        store = Store(tmp / "bench.sqlite")
        try:
            sk_plan = _plan(table, "relu,tanh", "sklearn", quick)
            t_grid, best_params = _best_of(rounds, _grid_search, sk_plan)
            t_same_auto, id_auto = _best_of(rounds, _sweep, sk_plan, store, 2)
            np_plan = _plan(table, "relu,tanh", "numpy", quick)
            t_same_numpy, id_numpy = _best_of(rounds, _sweep, np_plan, store, 2)
            full = _plan(table, "relu,tanh,gelu,silu", "auto", quick)
            ceiling_before = _machine_ceiling()
            t_serial, _ = _best_of(rounds, _sweep, full, store, 1)
            t_two, id_full = _best_of(rounds, _sweep, full, store, 2)
            ceiling = min(ceiling_before, _machine_ceiling())
            res_auto = sweep_results(store, id_auto)
            res_full = sweep_results(store, id_full)
        finally:
            store.close()
    gs_key = (best_params["model__activation"], float(best_params["model__learning_rate_init"]))
    ours = {(c["hidden"], c["learning_rate"]): c for c in res_auto["configurations"]}
    g = ours[gs_key]
    agree = "same best" if g["rank"] == 1 else ("tied with our best" if g["tied_with_best"]
                                                else "NOT tied with our best")
    efficiency = t_serial / (2.0 * t_two)
    best_full = res_full["configurations"][0]
    figures = {
        "serial_seconds": t_serial,
        "two_jobs_seconds": t_two,
        "parallel_efficiency": efficiency,
        "machine_ceiling": ceiling,
        "gridsearch_seconds": t_grid,
        "ours_same_configs_auto_seconds": t_same_auto,
        "ours_same_configs_numpy_seconds": t_same_numpy,
        "ours_auto_over_gridsearch": t_same_auto / t_grid,
        "ours_numpy_over_gridsearch": t_same_numpy / t_grid,
        "gridsearch_best_agrees": g["rank"] == 1 or bool(g["tied_with_best"]),
    }
    n_cfg, n_trials = full.n_configurations, full.n_trials
    lines = [
        f"fixed sweep: {rows} rows, hidden relu/tanh/gelu/silu x logistic head x [32] x lr "
        f"0.001/0.01, {full.folds} folds x {full.repeats} repeat, {full.epochs} epochs: "
        f"{n_cfg} configurations, {n_trials} trials",
        f"  (fastest of {rounds} runs each, wall clock including worker start-up)",
        f"  serial (1 job)                    {t_serial:8.2f} s",
        f"  2 jobs                            {t_two:8.2f} s",
        f"  parallel efficiency               {efficiency:8.3f}   (goal >= 0.90)",
        f"  machine ceiling now               {ceiling:8.3f}   (a CPU loop alone vs two at "
        "once; 1.0 = two free cores)",
        f"  best: {best_full['hidden']}/{best_full['head']} lr={best_full['learning_rate']:g} "
        f"accuracy {best_full['mean']:.4f} ± {best_full['sd']:.4f}",
        f"scikit-learn-expressible part: {sk_plan.n_configurations} configurations "
        f"(relu, tanh), same folds and metric",
        f"  GridSearchCV(n_jobs=2)            {t_grid:8.2f} s",
        f"  ours, 2 jobs, engine sklearn      {t_same_auto:8.2f} s   "
        f"ratio {t_same_auto / t_grid:.3f}",
        f"  ours, 2 jobs, engine numpy        {t_same_numpy:8.2f} s   "
        f"ratio {t_same_numpy / t_grid:.3f}   (goal <= 0.5)",
        f"  GridSearchCV's best ({gs_key[0]}, lr={gs_key[1]:g}): {agree}",
    ]
    return {"title": "sweep", "lines": lines, "figures": figures}


def _regression_table(path: Path, rows: int, seed: int = 0) -> None:
    import pandas as pd
    from sklearn.datasets import make_regression

    X, y = make_regression(n_samples=rows, n_features=FEATURES, n_informative=6, noise=10.0,
                           random_state=seed)
    df = pd.DataFrame(X, columns=[f"x{i}" for i in range(FEATURES)])
    df["site"] = np.random.default_rng(seed).choice(["north", "south", "east", "west"],
                                                    size=rows)
    df["amount"] = y
    df.to_csv(path, index=False)


def _file_bytes(store) -> int:
    """The database file's size with every committed page in it (WAL checkpointed)."""
    store._conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    size, count = (store._conn.execute(f"PRAGMA {p}").fetchone()[0]
                   for p in ("page_size", "page_count"))
    return int(size) * int(count)


def store_size(rows: int = 10_000, epochs: int = 200, folds: int = 5, repeats: int = 2,
               hidden: str = "relu,gelu", jobs: int | None = None) -> dict:
    """Bytes the store takes per 1,000 trials, on a regression and a binary table.

    For each task a table of ``rows`` rows (``make_regression`` /
    ``make_classification``, 10 numeric features and one categorical column) is
    swept with the default plan's shape (one layer of 64, ``epochs`` epochs,
    ``folds`` x ``repeats``, the advised head, ``hidden`` activations: relu on
    scikit-learn's MLP, gelu on the NumPy engine, which also stores per-epoch
    health), without baselines, so that every trial measured is a network's (a
    baseline's trial stores the same predictions and no history). The store's
    file size after the sweep minus its size before the first trial, divided by
    the trials stored, is scaled to 1,000 trials; the share taken by the
    out-of-fold predictions (float32: 4 bytes x test rows x columns) and by the
    per-epoch histories is given too.
    """
    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    out = {"rows": rows, "epochs": epochs, "folds": folds, "repeats": repeats}
    lines = [f"store size per 1,000 trials, {rows:,}-row tables, {folds} folds x {repeats} "
             f"repeats, {epochs} epochs, hidden {hidden}, one layer of 64:"]
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for task, maker, target in (("regression", _regression_table, "amount"),
                                    ("binary", _table, "outcome")):
            table = tmp / f"{task}.csv"
            maker(table, rows)
            plan = build_plan(table, target, hidden=hidden, layers=["64"], folds=folds,
                              repeats=repeats, epochs=epochs, seed=0, baselines=[])
            with Store(tmp / f"{task}.sqlite") as st:
                started = {}

                def first(ev, st=st, started=started):
                    if ev["type"] == "sweep_started":
                        started["bytes"] = _file_bytes(st)

                res = run_sweep(plan, store=st, jobs=jobs, on_event=first)
                after = _file_bytes(st)
                n, preds, hist = st._conn.execute(
                    "SELECT COUNT(*), (SELECT SUM(length(vals)) FROM predictions WHERE "
                    "sweep_id=?1), SUM(length(history)) FROM trials WHERE sweep_id=?1",
                    (res.sweep_id,)).fetchone()
            per_1000 = (after - started["bytes"]) / n * 1000
            out[task] = {"trials": int(n), "bytes_per_1000_trials": per_1000,
                         "predictions_bytes_per_1000_trials": preds / n * 1000,
                         "history_bytes_per_1000_trials": hist / n * 1000}
            lines.append(f"  {task:<10} {per_1000 / 1e6:7.1f} MB  (out-of-fold predictions "
                         f"{preds / n * 1000 / 1e6:.1f} MB, histories {hist / n * 1000 / 1e6:.1f}"
                         f" MB; {n} trials measured)")
    out["lines"] = lines
    return out
