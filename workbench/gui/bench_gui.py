"""Window speed: sorting 10,000 results rows, and the event loop's longest stall in a sweep.

Called by ``workbench bench --gui`` through :func:`run`. Three figures:

1. Sorting: a :class:`~workbench.gui.models.ResultsModel` of 10,000 rows behind
   the :class:`~workbench.gui.models.ResultsProxy` in a shown table view;
   ``sortByColumn`` on several columns in both orders, including the repaint
   that follows. Goal: under 100 ms. Beside it, a repaint of the table's visible
   rows (what every update of a sweep's ranking costs the event loop).
2. Responsiveness: the real window runs a small sweep on a sample set while a
   10 ms ``QTimer`` heartbeat records the gaps between its ticks. The longest
   gap minus the interval is the longest stall of the event loop. Goal: at most
   50 ms. Beside it, the GUI thread's CPU time between two heartbeats (the window's
   own work, which other programs on a shared machine do not lengthen). It is
   measured with one worker per core (the window's default) and,
   on machines with two or more cores, with one core left to the window: on a
   small machine the worker processes compete with the window for the CPU. It is
   measured again on the window's default plan for the table (what a user runs
   first; 300 trials on the kiln sample), with the clicks after it.
3. A full pass of the garbage collector in the open window, with its objects
   unfrozen and frozen (:mod:`workbench.gui.heap`).
"""

from __future__ import annotations

import os
import statistics
import tempfile
import time
from pathlib import Path

HEARTBEAT_MS = 10


def _rows(n: int, seed: int = 0) -> list[dict]:
    import numpy as np

    from workbench.nets.activations import HIDDEN

    rng = np.random.default_rng(seed)
    hidden = list(HIDDEN)
    heads = ["identity", "relu", "softplus", "exp", "logistic"]
    out = []
    for i in range(n):
        m = float(rng.normal(0.7, 0.1))
        out.append({
            "key": f"bench:{i}", "index": i, "rank": i + 1,
            "hidden": hidden[i % len(hidden)], "head": heads[(i // 7) % len(heads)],
            "layers": ("32", "64", "64,32")[i % 3], "learning_rate": float(10 ** rng.uniform(-4, -1)),
            "alpha": float(10 ** rng.uniform(-6, -2)), "mean": m, "sd": float(abs(rng.normal(0.02, 0.01))),
            "p_value": float(rng.uniform()), "tied_with_best": bool(rng.uniform() < 0.1),
            "fit_seconds": float(rng.uniform(0.1, 5)), "dead_pct": float(rng.uniform(0, 100)),
            "saturated_pct": float(rng.uniform(0, 100)), "engine": ("numpy", "sklearn")[i % 2],
            "status": "done", "n_done": 10, "n_total": 10, "message": "", "series": {},
        })
    return out


def _time(fn, repeats: int) -> list[float]:
    out = []
    for _ in range(repeats):
        t = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t)
    return out


def bench_sort(n: int = 10_000, repeats: int = 3) -> dict:
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QApplication, QTableView

    from workbench.gui.models import COLUMN_KEYS, ResultsModel, ResultsProxy

    app = QApplication.instance() or QApplication([])
    rows = _rows(n)
    model = ResultsModel()
    model.set_rows(rows)
    proxy = ResultsProxy()
    proxy.setSourceModel(model)
    view = QTableView()
    view.setModel(proxy)
    view.setSortingEnabled(True)
    view.resize(1000, 600)
    view.show()
    app.processEvents()
    times = []
    for key in ("mean", "hidden", "fit_seconds", "dead_pct"):
        col = COLUMN_KEYS.index(key)
        for order in (Qt.AscendingOrder, Qt.DescendingOrder):
            def once(col=col, order=order):
                view.sortByColumn(col, order)
                app.processEvents()
            model._keys = {}  # time the cold path: key column rebuilt from the rows
            times += _time(once, repeats)
    paint = _time(view.viewport().repaint, 5 * repeats)
    view.close()
    return {"rows": n, "median_s": statistics.median(times), "max_s": max(times),
            "repaint_s": statistics.median(paint)}


def _sample_table(folder: Path) -> Path:
    here = Path(__file__).resolve().parents[2] / "sample_sets" / "kiln_batches.csv"
    if here.is_file():
        return here
    import numpy as np

    rng = np.random.default_rng(0)
    p = folder / "bench_table.csv"
    x = rng.normal(size=(600, 4))
    y = (x[:, 0] + 0.5 * x[:, 1] + rng.normal(scale=0.5, size=600) > 0).astype(int)
    lines = ["a,b,c,d,label"] + [",".join(f"{v:.4f}" for v in r) + f",{'yes' if t else 'no'}"
                                 for r, t in zip(x, y)]
    p.write_text("\n".join(lines) + "\n")
    return p


def bench_clicks(win, app, n: int = 12) -> dict:
    """Seconds from a click on a results row to the window having drawn its plots.

    A real mouse click on the row (QTest), then every event the click queued is
    processed (the plots, legend and diagnosis redraw, the repaint of what changed);
    the window is idle otherwise (after the sweep)."""
    from PySide6.QtCore import Qt
    from PySide6.QtTest import QTest

    view = win.results_view
    rows = min(n, win.proxy.rowCount())
    times = []
    app.processEvents()
    for i in list(range(rows)) + [0]:
        rect = view.visualRect(win.proxy.index(i, 1))
        if not rect.isValid():
            view.scrollTo(win.proxy.index(i, 1))
            app.processEvents()
            rect = view.visualRect(win.proxy.index(i, 1))
        t = time.perf_counter()
        QTest.mouseClick(view.viewport(), Qt.LeftButton, Qt.NoModifier, rect.center())
        # every event the click queued, the repaints of what changed among them (a forced
        # repaint of the whole window would time more than a click costs)
        app.processEvents()
        times.append(time.perf_counter() - t)
    times = times[1:]  # the first click also lays out the plots for the first time
    return {"n": len(times), "median_s": statistics.median(times) if times else float("nan"),
            "max_s": max(times) if times else float("nan")}


def bench_collection(repeats: int = 3) -> dict:
    """Seconds of a full garbage collection in the process as it is now (a window open),
    with every object unfrozen (as before :mod:`workbench.gui.heap`) and then frozen as
    the window freezes them. Medians of ``repeats``."""
    import gc

    from workbench.gui import heap

    gc.unfreeze()
    tracked = len(gc.get_objects())
    unfrozen = statistics.median(_time(gc.collect, repeats))
    heap.freeze()
    frozen = statistics.median(_time(gc.collect, repeats))
    return {"tracked": tracked, "unfrozen_s": unfrozen, "frozen_s": frozen}


def bench_stall(quick: bool = False, timeout_s: float = 300.0, jobs: int | None = None,
                default_plan: bool = False, collection: bool = False) -> dict:
    """Run a small sweep in the window and record the event loop's heartbeat gaps.

    With ``default_plan``, the sweep is the window's default plan for the table (what
    ``workbench open FILE --run`` runs) instead of the small fixed one; with
    ``collection``, a full garbage collection is timed after it (:func:`bench_collection`,
    ``None`` otherwise)."""
    from PySide6.QtCore import QElapsedTimer, QEventLoop, QTimer
    from PySide6.QtWidgets import QApplication

    from workbench.gui.main_window import MainWindow
    from workbench.gui.settings import Settings

    app = QApplication.instance() or QApplication([])
    tmp = Path(tempfile.mkdtemp(prefix="wb-bench-gui-"))
    win = MainWindow(settings=Settings(tmp / "settings"), store_path=str(tmp / "store.sqlite"))
    win.resize(1280, 800)
    win.show()
    loop = QEventLoop()
    state: dict = {"result": None}

    def wait_for(signal, ms):
        timer = QTimer()
        timer.setSingleShot(True)
        timer.timeout.connect(loop.quit)

        def got(*a):
            state["result"] = a
            loop.quit()

        signal.connect(got)
        timer.start(int(ms))
        loop.exec()
        signal.disconnect(got)
        return state["result"]

    win.open_path(str(_sample_table(tmp)))
    if wait_for(win.targetReady, 30_000) is None:
        raise RuntimeError("the sample table did not load in time")
    s = win.setup
    if default_plan:
        from workbench.gui.app import default_choices

        default_choices(win)
    else:
        s.hidden_grid.set_checked(["relu", "tanh"] if quick else ["relu", "tanh", "gelu", "silu"])
        s.head_grid.set_checked(["logistic"])  # the advised head (the sweep of earlier figures)
        s.layers_edit.setText("16")
        s.folds_spin.setValue(3)
        s.repeats_spin.setValue(1 if quick else 2)
        s.epochs_spin.setValue(20 if quick else 60)
        s.jobs_spin.setValue(jobs or min(2, os.cpu_count() or 1))

    load_before = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    gaps: list[float] = []
    clock = QElapsedTimer()
    beat = QTimer()
    beat.setInterval(HEARTBEAT_MS)

    cpu: list[float] = []

    def tick():
        gaps.append(clock.restart() / 1000.0)
        cpu.append(time.thread_time())

    beat.timeout.connect(tick)
    clock.start()
    beat.start()
    t0 = time.perf_counter()
    win.run_sweep()
    summary = wait_for(win.sweepEnded, timeout_s * 1000)
    seconds = time.perf_counter() - t0
    beat.stop()
    clicks = bench_clicks(win, app)
    collected = bench_collection() if collection else None
    win.close()
    app.processEvents()
    trials = win.results_model.rows()
    n_trials = sum(r.get("n_done", 0) for r in trials)
    jobs_used = s.jobs_spin.value()
    return {**heartbeat_figures(gaps, cpu), "load_before": load_before, "jobs": jobs_used,
            "trials": n_trials, "seconds": seconds, "click_median_s": clicks["median_s"],
            "click_max_s": clicks["max_s"], "clicks": clicks["n"], "collection": collected,
            "state": (summary[0] if summary else {}).get("state", "timeout")}


def _p99(values: list[float]) -> float:
    """The 99th percentile by rank (the lower of the two values around it)."""
    return sorted(values)[int(0.99 * (len(values) - 1))] if values else float("nan")


def heartbeat_figures(gaps: list[float], cpu: list[float]) -> dict:
    """Figures of a heartbeat run (seconds).

    ``gaps[i]`` is the wall time before tick ``i`` (the first, which includes the set-up,
    is left out); ``cpu[i]`` the GUI thread's CPU clock at tick ``i``. The longest stall
    is the longest gap minus the interval; the busy figures are the GUI thread's CPU time
    between two ticks: the window's own work (on a shared machine the longest gap also
    holds the time other programs had the core)."""
    gaps = gaps[1:]
    busy = [b - a for a, b in zip(cpu, cpu[1:])]
    worst = max(gaps) if gaps else float("nan")
    return {"stall_s": max(0.0, worst - HEARTBEAT_MS / 1000.0),
            "median_gap_s": statistics.median(gaps) if gaps else float("nan"),
            "p99_gap_s": _p99(gaps), "ticks": len(gaps),
            "busy_max_s": max(busy) if busy else float("nan"), "busy_p99_s": _p99(busy)}


def run(quick: bool = False) -> dict:
    """The window's figures for ``workbench bench --gui``.

    Returns
    -------
    dict
        ``{"title", "lines", "figures"}``; times in seconds, ratios plain.
    """
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    sort = bench_sort(n=10_000, repeats=2 if quick else 3)
    stall = bench_stall(quick=quick, collection=True)
    cores = os.cpu_count() or 1
    spare = bench_stall(quick=quick, jobs=cores - 1) if cores >= 2 and not quick else None
    default = None if quick else bench_stall(default_plan=True)
    lines = [
        f"sort {sort['rows']:,} rows through the proxy: median {sort['median_s'] * 1e3:.1f} ms, "
        f"worst {sort['max_s'] * 1e3:.1f} ms (goal < 100 ms)",
        f"  a repaint of the table's visible rows: median {sort['repaint_s'] * 1e3:.1f} ms",
        f"longest event-loop stall during a sweep of {stall['trials']} trials "
        f"({stall['seconds']:.1f} s, {stall['ticks']} heartbeats of {HEARTBEAT_MS} ms): "
        f"{stall['stall_s'] * 1e3:.1f} ms (goal <= 50 ms); median gap "
        f"{stall['median_gap_s'] * 1e3:.1f} ms, 99th percentile {stall['p99_gap_s'] * 1e3:.1f} ms; "
        f"load average before the sweep {stall['load_before']:.2f} on {os.cpu_count()} cores "
        "(other programs competing for the cores lengthen stalls)",
        f"  the window's own work (GUI-thread CPU time) between two heartbeats: longest "
        f"{stall['busy_max_s'] * 1e3:.1f} ms, 99th percentile {stall['busy_p99_s'] * 1e3:.1f} ms",
        f"a click on a results row until its plots are drawn: median "
        f"{stall['click_median_s'] * 1e3:.0f} ms, worst {stall['click_max_s'] * 1e3:.0f} ms "
        f"over {stall['clicks']} clicks (goal <= 100 ms)",
        f"a full garbage collection in the window ({stall['collection']['tracked']:,} objects "
        f"tracked): {stall['collection']['unfrozen_s'] * 1e3:.1f} ms; with the window's objects "
        f"frozen (workbench.gui.heap): {stall['collection']['frozen_s'] * 1e3:.2f} ms",
    ]
    if spare is not None:
        lines.append(f"  with {spare['jobs']} worker(s), leaving a core to the window: longest stall "
                     f"{spare['stall_s'] * 1e3:.1f} ms, 99th percentile gap "
                     f"{spare['p99_gap_s'] * 1e3:.1f} ms (load average before "
                     f"{spare['load_before']:.2f})")
    if default is not None:
        lines.append(f"the window's default plan on the same table ({default['trials']} trials, "
                     f"{default['seconds']:.1f} s): longest stall {default['stall_s'] * 1e3:.1f} ms, "
                     f"99th percentile gap {default['p99_gap_s'] * 1e3:.1f} ms; a click: median "
                     f"{default['click_median_s'] * 1e3:.0f} ms, worst "
                     f"{default['click_max_s'] * 1e3:.0f} ms (load average before "
                     f"{default['load_before']:.2f})")
    figures = {
        "sort_rows": sort["rows"],
        "sort_median_s": sort["median_s"],
        "sort_max_s": sort["max_s"],
        "table_repaint_s": sort["repaint_s"],
        "stall_max_s": stall["stall_s"],
        "heartbeat_median_gap_s": stall["median_gap_s"],
        "heartbeat_p99_gap_s": stall["p99_gap_s"],
        "gui_cpu_max_s": stall["busy_max_s"],
        "gui_cpu_p99_s": stall["busy_p99_s"],
        "load_average_before": stall["load_before"],
        "sweep_trials": stall["trials"],
        "sweep_seconds": stall["seconds"],
        "sweep_state": stall["state"],
        "sweep_jobs": stall["jobs"],
        "click_median_s": stall["click_median_s"],
        "click_max_s": stall["click_max_s"],
        "gc_full_unfrozen_s": stall["collection"]["unfrozen_s"],
        "gc_full_frozen_s": stall["collection"]["frozen_s"],
        "stall_max_s_default_plan": None if default is None else default["stall_s"],
        "click_median_s_default_plan": None if default is None else default["click_median_s"],
        "stall_max_s_spare_core": None if spare is None else spare["stall_s"],
        "heartbeat_p99_gap_s_spare_core": None if spare is None else spare["p99_gap_s"],
    }
    return {"title": "Window (PySide6 + pyqtgraph)", "lines": lines, "figures": figures}


if __name__ == "__main__":  # pragma: no cover
    res = run(quick=True)
    print(res["title"])
    for line in res["lines"]:
        print(" ", line)
