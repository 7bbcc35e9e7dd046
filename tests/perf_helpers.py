"""Measurements behind the held-out curves, the health schedule and the workers' memory.

Not a test module (pytest does not collect it) and never run by the suite: speed and
memory are measured, not asserted. Each function prints its figures; run e.g.

    python tests/perf_helpers.py curves      # a default kiln trial with / without curves
    python tests/perf_helpers.py health      # health every epoch against the schedule
    python tests/perf_helpers.py labels      # the classifier's label columns per fit
    python tests/perf_helpers.py memory [FOLDER [PACKAGE_ROOT]]  # a worker's memory,
                                             # 200,000 x 22 table (made in FOLDER)
    python tests/perf_helpers.py memory-shared [FOLDER [PACKAGE_ROOT [BASELINES]]]  # the
                                             # same as a sweep's worker on this table
                                             # does: fold features prepared once, mapped

Timings are medians of interleaved runs in one process, in CPU seconds of this process
(``time.process_time``; BLAS is held to one thread, so on a shared, loaded machine the
CPU time is not inflated by waiting for a core as the wall time is); quote them with
``uptime``'s load average.
"""

from __future__ import annotations

import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"


def trial(table, target, config=0, fold=0, **options):
    """``(plan, data, spec)`` of one trial of the plan ``build_plan(table, target, **options)``."""
    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import load_data

    plan = build_plan(table, target, **options)
    data, _ = load_data(plan)
    tr, te = plan.fold_indices(data.y)[(0, fold)]
    c = plan.configurations()[config]
    spec = {"config": c.to_dict(), "repeat": 0, "fold": fold, "train": tr.astype(np.int32),
            "test": te.astype(np.int32), "random_state": plan.model_seed(0, fold),
            "task": plan.task, "metric": plan.metric, "epochs": plan.epochs,
            "early_stopping": plan.early_stopping, "batch_size": plan.batch_size,
            "dtype": plan.dtype}
    return plan, data, spec


def _cpu(f, *args):
    t = time.process_time()
    f(*args)
    return time.process_time() - t


def curves_cost(runs: int = 15) -> dict:
    """Fit seconds of the default kiln trial (relu/logistic [64], 200 epochs, ROC AUC) with
    and without the held-out curves, interleaved; the extra share of the fit time."""
    from workbench.sweep.trials import run_trial

    _, data, spec = trial(SAMPLES / "kiln_batches.csv", "passes_inspection")
    off = dict(spec, curves=False)
    run_trial(data, spec)
    run_trial(data, off)
    on_s, off_s, on_fit, off_fit = [], [], [], []

    def timed(s, cpu, fit):
        t = time.process_time()
        fit.append(run_trial(data, s)["fit_seconds"])
        cpu.append(time.process_time() - t)

    for _ in range(runs):
        timed(off, off_s, off_fit)
        timed(spec, on_s, on_fit)
    a, b = statistics.median(on_s), statistics.median(off_s)
    fa, fb = statistics.median(on_fit), statistics.median(off_fit)
    out = {"with_curves_ms": a * 1e3, "without_ms": b * 1e3, "extra_share": a / b - 1,
           "fit_with_ms": fa * 1e3, "fit_without_ms": fb * 1e3}
    print(f"default kiln trial, median of {runs} interleaved: whole trial (CPU) with curves "
          f"{a * 1e3:.1f} ms, without {b * 1e3:.1f} ms, extra {100 * (a / b - 1):.1f}%; fit "
          f"seconds (wall) {fa * 1e3:.1f} / {fb * 1e3:.1f} ms, extra {100 * (fa / fb - 1):.1f}%")
    return out


def health_cost(runs: int = 15) -> dict:
    """A typical small fit (2,000 x 15, one layer of 32, batch 200, 100 epochs, tanh):
    health every epoch (the former rule) against the schedule, and no health at all."""
    from sklearn.datasets import make_regression

    from workbench.nets import engine

    X, y = make_regression(2000, 15, noise=10.0, random_state=0)
    y = (y - y.mean()) / y.std()
    kw = dict(hidden_layer_sizes=(32,), activation="tanh", batch_size=200, max_iter=100,
              tol=0.0, random_state=0)

    def fit(rule, monitor=True):
        saved = engine.health_due
        if rule is not None:
            engine.health_due = rule
        try:
            return _cpu(engine.NetRegressor(monitor_health=monitor, **kw).fit, X, y)
        finally:
            engine.health_due = saved

    import warnings

    warnings.simplefilter("ignore")
    every, sched, none = [], [], []
    for _ in range(2):
        fit(lambda e: True), fit(None), fit(None, False)
    for _ in range(runs):
        every.append(fit(lambda e: True))
        sched.append(fit(None))
        none.append(fit(None, False))
    a, b, c = (statistics.median(v) for v in (every, sched, none))
    print(f"2000x15, [32] tanh, batch 200, 100 epochs (CPU), median of {runs} interleaved: health "
          f"every epoch {a * 1e3:.1f} ms, on the schedule {b * 1e3:.1f} ms, none "
          f"{c * 1e3:.1f} ms; schedule saves {100 * (1 - b / a):.1f}% of the fit")
    return {"every_ms": a * 1e3, "schedule_ms": b * 1e3, "none_ms": c * 1e3}


def labels_cost(runs: int = 9) -> dict:
    """The classifier's label columns for the 2,000 training rows of a kiln fold (string
    labels): scikit-learn's LabelBinarizer fit + transform (the former way) against the
    engine's (type check, classes with codes, one-hot)."""
    from sklearn.preprocessing import LabelBinarizer

    from workbench.nets.engine import NetClassifier

    _, data, spec = trial(SAMPLES / "kiln_batches.csv", "passes_inspection")
    y = np.asarray(data.y)[spec["train"]]
    clf = NetClassifier((3,), max_iter=1).fit(np.zeros((len(y), 1)), y)

    def old():
        return LabelBinarizer().fit(y).transform(y)

    def new():
        return clf._prepare_y(y, True)

    np.testing.assert_array_equal(old(), new())
    a, b = [], []
    for _ in range(runs):
        a.append(_cpu(lambda: [old() for _ in range(20)]) / 20)
        b.append(_cpu(lambda: [new() for _ in range(20)]) / 20)
    a, b = statistics.median(a), statistics.median(b)
    print(f"label columns of 2,000 kiln rows (CPU), median of {runs}: LabelBinarizer "
          f"{a * 1e3:.2f} ms, the engine's {b * 1e3:.2f} ms per fit")
    return {"label_binarizer_ms": a * 1e3, "engine_ms": b * 1e3}


def synthetic_table(path, rows: int = 200_000, seed: int = 0) -> Path:
    """A 200,000 x 22 table (about 32 MB of CSV): 18 numeric columns, 3 categorical,
    and a numeric target."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    cols = {f"x{i}": np.round(rng.normal(size=rows), 4) for i in range(18)}
    cols["site"] = rng.choice(["north", "south", "east", "west"], rows)
    cols["kind"] = rng.choice(["a", "b", "c"], rows)
    cols["shift"] = rng.choice(["early", "late"], rows)
    z = sum(cols[f"x{i}"] * (i % 3 - 1) for i in range(18))
    cols["target"] = np.round(z + rng.normal(size=rows), 4)
    path = Path(path)
    pd.DataFrame(cols).to_csv(path, index=False)
    return path


_WORKER = r"""
import json, pickle, resource, sys, threading, time
import psutil
from workbench.sweep import trials
import workbench.nets.engine, workbench.data.preprocessing, sklearn.compose, pandas
me = psutil.Process()
def now():
    m = me.memory_full_info()
    return m.rss, m.uss
base_rss, base_uss = now()
def hwm():
    try:
        with open("/proc/self/status") as fh:
            return next(int(l.split()[1]) * 1024 for l in fh if l.startswith("VmHWM"))
    except (OSError, StopIteration):
        return None
try:  # Linux: reset the peak RSS (VmHWM) to the current RSS, so it is this run's exact peak
    with open("/proc/self/clear_refs", "w") as fh:
        fh.write("5")
except OSError:
    pass
peak = {"rss": base_rss, "uss": base_uss}
stop = False
def sample():
    while not stop:
        rss, uss = now()
        peak["rss"], peak["uss"] = max(peak["rss"], rss), max(peak["uss"], uss)
        time.sleep(0.01)
th = threading.Thread(target=sample, daemon=True)
th.start()
with open(sys.argv[1], "rb") as fh:
    specs = pickle.load(fh)
out = []
for spec in specs:
    token, path, light = spec.pop("_token"), spec.pop("_path"), spec.pop("_light", None)
    res = trials.run_trials_from_file(token, path, [spec], *([light] if light else []))[0]
    out.append((res["status"], res["test_score"], res["error"]))
stop = True
th.join()
print(json.dumps({"base_rss": base_rss, "base_uss": base_uss, "peak_rss": peak["rss"],
                  "peak_uss": peak["uss"], "hwm": hwm(),
                  "maxrss": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024,
                  "trials": out}))
"""


def _median_worker(code, spec_path, workers, package_root, data) -> dict:
    """Run ``workers`` processes of ``code`` on the pickled specs at ``spec_path``; the
    median one's figures (by USS peak), in MB, with the table's numeric size."""
    import json
    import subprocess

    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1")
    if package_root:
        env["PYTHONPATH"] = str(package_root)
    procs = [subprocess.Popen([sys.executable, "-c", code, spec_path], text=True,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env,
                              cwd=package_root or None) for _ in range(workers)]
    runs = []
    for proc in procs:
        stdout, stderr = proc.communicate(timeout=900)
        if proc.returncode:
            raise RuntimeError(stderr[-2000:])
        runs.append(json.loads(stdout.strip().splitlines()[-1]))
    got = sorted(runs, key=lambda r: r["peak_uss"])[len(runs) // 2]
    mb = 2 ** 20
    numeric = data.X.select_dtypes("number").to_numpy().nbytes + np.asarray(data.y).nbytes
    got["numeric_mb"] = numeric / mb
    for key in ("base_rss", "base_uss", "peak_rss", "peak_uss", "maxrss"):
        got[key] = got[key] / mb
    got["peak_rss"] = max(got["peak_rss"], (got["hwm"] or 0) / mb)
    return got


def worker_peak(csv, folder, epochs: int = 2, folds_run: int = 3, package_root=None,
                workers: int = 2) -> dict:
    """Memory of a fresh worker process that runs one trial on each of ``folds_run`` folds
    (a worker keeps the features of up to three folds) of ``csv``, reading the table from
    the file the parent writes (:func:`workbench.sweep.trials.save_worker_data`).
    ``package_root``: a folder holding another version of the ``workbench`` package for
    the worker (e.g. ``git archive <commit> workbench | tar -x -C DIR``), to compare.
    ``workers`` such processes run at once, as a sweep's pool does: pages of the mapped
    table that several workers map count as shared, not in each one's USS (with one
    worker alone they would count as its own). The figures are the median worker's.

    Sampled every 10 ms with psutil: RSS (every page the process maps, shared ones
    included) and USS (the pages only this process holds: what each extra worker costs),
    after the imports (base) and at their peak; the table's numeric size for scale. On
    Linux the RSS peak is exact: the kernel's high-water mark (``VmHWM``), reset at the
    base through ``/proc/self/clear_refs``, catches what the sampling misses.
    (``ru_maxrss``, still returned as ``maxrss``, is not quoted: a child process starts
    with its parent's, here the parent that read the CSV.)
    """
    import pickle

    from workbench.sweep.trials import save_worker_data

    plan, data, _ = trial(csv, "target", layers=["32"], epochs=epochs, folds=5, repeats=1,
                          hidden="relu", learning_rates=["0.001"])
    path = os.path.join(folder, "table.bin")
    t = time.perf_counter()
    save_worker_data(data, path)
    write_s = time.perf_counter() - t
    specs = [dict(trial(csv, "target", fold=k, layers=["32"], epochs=epochs, folds=5,
                        repeats=1, hidden="relu", learning_rates=["0.001"])[2],
                  _token=data.token, _path=path) for k in range(folds_run)]
    spec_path = os.path.join(folder, "spec.pkl")
    with open(spec_path, "wb") as fh:
        pickle.dump(specs, fh)
    got = _median_worker(_WORKER, spec_path, workers, package_root, data)
    got.update(write_s=write_s, file_mb=sum(f.stat().st_size
                                            for f in Path(folder).glob("table.bin*")) / 2 ** 20)
    rss, uss = got["peak_rss"] - got["base_rss"], got["peak_uss"] - got["base_uss"]
    print(f"table {csv}: numeric size {got['numeric_mb']:.1f} MB; {workers} workers, each running "
          f"{folds_run} trials on {folds_run} folds: RSS {got['base_rss']:.0f} MB after imports, "
          f"peak {got['peak_rss']:.0f} MB (+{rss:.0f} MB = {rss / got['numeric_mb']:.2f} x); "
          f"USS {got['base_uss']:.0f} MB after imports, peak {got['peak_uss']:.0f} MB "
          f"(+{uss:.0f} MB = {uss / got['numeric_mb']:.2f} x); "
          f"copy written in {write_s:.2f} s, {got['file_mb']:.1f} MB on disk; "
          f"{[t[0] for t in got['trials']]}")
    return got


def shared_fold_peak(csv, folder, epochs: int = 2, folds_run: int = 3, workers: int = 2,
                     package_root=None, baselines: bool = False) -> dict:
    """What a sweep's local worker does on a large table (:mod:`workbench.sweep.fold_files`):
    each fold's features are prepared once by this process, as the runner's thread does
    (:func:`workbench.sweep.fold_files.write_fold`), and the worker process of
    :func:`worker_peak` runs the same trials reading them mapped from the ``.npy`` files
    and the table without its features (:func:`workbench.sweep.trials.light_data`), never
    the table copy; same figures. ``baselines``: the fold's linear baseline (float64
    features, scikit-learn's Ridge) runs after each network trial."""
    import pickle

    from workbench.sweep import fold_files
    from workbench.sweep.trials import light_data, save_worker_data

    opts = dict(layers=["32"], epochs=epochs, folds=5, repeats=1, hidden="relu",
                learning_rates=["0.001"])
    plan, data, _ = trial(csv, "target", **opts)
    path = os.path.join(folder, "table.bin")
    light = os.path.join(folder, "light.bin")
    save_worker_data(data, path)
    save_worker_data(light_data(data), light)
    linear = [b for b in plan.baseline_configurations() if b.name == "linear"]
    specs = []
    for k in range(folds_run):
        spec = trial(csv, "target", fold=k, **opts)[2]
        runs = [spec] + ([dict(spec, config=linear[0].to_dict())] if baselines else [])
        kinds = {fold_files.feature_kind(s) for s in runs}
        t = time.perf_counter()
        files = fold_files.write_fold(folder, data, 0, k, spec["train"], spec["test"], kinds)
        prep_s = time.perf_counter() - t
        for s in runs:
            specs.append(dict(s, _token=data.token, _path=path, _light=light,
                              features=files[fold_files.feature_kind(s)]))
    spec_path = os.path.join(folder, "spec_shared.pkl")
    with open(spec_path, "wb") as fh:
        pickle.dump(specs, fh)
    got = _median_worker(_WORKER, spec_path, workers, package_root, data)
    got["prepare_s"] = prep_s
    rss, uss = got["peak_rss"] - got["base_rss"], got["peak_uss"] - got["base_uss"]
    print(f"table {csv}: numeric size {got['numeric_mb']:.1f} MB; shared mapped fold features"
          f"{' (+ linear baseline)' if baselines else ''}; {workers} workers, each running "
          f"{len(specs)} trials on {folds_run} folds: RSS "
          f"{got['base_rss']:.0f} MB after imports, peak {got['peak_rss']:.0f} MB (+{rss:.0f} MB "
          f"= {rss / got['numeric_mb']:.2f} x); USS {got['base_uss']:.0f} MB after imports, peak "
          f"{got['peak_uss']:.0f} MB (+{uss:.0f} MB = {uss / got['numeric_mb']:.2f} x); "
          f"a fold prepared in {prep_s:.2f} s; {[t[0] for t in got['trials']]}")
    return got


def memory(folder=None, package_root=None) -> dict:
    import tempfile

    folder = folder or tempfile.mkdtemp(prefix="wb-mem-")
    csv = Path(folder) / "big.csv"
    if not csv.exists():
        synthetic_table(csv)
    return worker_peak(csv, folder, package_root=package_root)


def memory_shared(folder=None, package_root=None, baselines=False) -> dict:
    """:func:`shared_fold_peak` on the table of :func:`memory` (``baselines``: any
    non-empty text turns the linear baseline on, from the command line)."""
    import tempfile

    folder = folder or tempfile.mkdtemp(prefix="wb-mem-")
    csv = Path(folder) / "big.csv"
    if not csv.exists():
        synthetic_table(csv)
    return shared_fold_peak(csv, folder, package_root=package_root, baselines=bool(baselines))


if __name__ == "__main__":
    what = sys.argv[1] if len(sys.argv) > 1 else "curves"
    {"curves": curves_cost, "health": health_cost, "labels": labels_cost,
     "memory": memory, "memory-shared": memory_shared}[what](*sys.argv[2:])
