"""The window's parts without a sweep: palette, settings, models, hints, the bridge, `open`.

Outside references: the colour-vision-deficiency simulation matrices of
Machado, Oliveira & Fernandes (2009, severity 1.0), the sRGB transfer function
of IEC 61966-2-1 and the CIE 1976 L*a*b* colour difference (CIE 15:2004);
WCAG 2.1's contrast-ratio definition for text; Python's ``sorted`` for sorting.
"""

from __future__ import annotations

import itertools
import threading
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import QByteArray, QObject, Qt, Signal

from workbench.gui import theme as th
from workbench.gui.bridge import SweepThread
from workbench.gui.models import COLUMN_KEYS, ResultsModel, ResultsProxy
from workbench.gui.settings import APPLICATION, ORGANISATION, Settings
from workbench.sweep.diagnosis import health_hints

pytestmark = pytest.mark.gui

# Machado, Oliveira & Fernandes (2009), Table 1, severity 1.0 (linear RGB)
MACHADO_2009 = {
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}
# sRGB (D65) to XYZ, IEC 61966-2-1
SRGB_TO_XYZ = np.array([[0.4124564, 0.3575761, 0.1804375],
                        [0.2126729, 0.7151522, 0.0721750],
                        [0.0193339, 0.1191920, 0.9503041]])
WHITE_D65 = np.array([0.95047, 1.0, 1.08883])


def _linear(hex_colour: str) -> np.ndarray:
    c = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)], float) / 255.0
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _lab(linear_rgb: np.ndarray) -> np.ndarray:
    xyz = SRGB_TO_XYZ @ np.clip(linear_rgb, 0, 1) / WHITE_D65
    d = 6 / 29
    f = np.where(xyz > d ** 3, np.cbrt(xyz), xyz / (3 * d * d) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def _relative_luminance(hex_colour: str) -> float:
    return float(np.array([0.2126, 0.7152, 0.0722]) @ _linear(hex_colour))


def _contrast(a: str, b: str) -> float:
    la, lb = sorted((_relative_luminance(a), _relative_luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def test_lab_conversion_matches_the_cie_white_and_black():
    # CIE 15:2004: the white point has L* = 100, a* = b* = 0; black L* = 0
    assert np.allclose(_lab(_linear("#ffffff")), [100, 0, 0], atol=0.05)
    assert np.allclose(_lab(_linear("#000000")), [0, 0, 0], atol=1e-9)


@pytest.mark.parametrize("theme", [th.LIGHT, th.DARK], ids=["light", "dark"])
def test_series_colours_stay_apart_under_colour_vision_deficiency(theme):
    """The first four series colours (the common case) differ by CIE76 dE >= 12 for
    normal vision and under all three simulated dichromacies; all eight by >= 8."""
    for vision in (None, *MACHADO_2009):
        labs = []
        for c in theme.series:
            lin = _linear(c)
            if vision is not None:
                lin = MACHADO_2009[vision] @ lin
            labs.append(_lab(lin))
        for (i, a), (j, b) in itertools.combinations(enumerate(labs), 2):
            de = float(np.linalg.norm(a - b))
            need = 12.0 if max(i, j) < 4 else 8.0
            assert de >= need, (theme.name, vision, theme.series[i], theme.series[j], de)


@pytest.mark.parametrize("theme", [th.LIGHT, th.DARK], ids=["light", "dark"])
def test_text_contrast_meets_wcag_aa(theme):
    # WCAG 2.1 success criterion 1.4.3: 4.5:1 for normal text
    pairs = [(theme.text, theme.window), (theme.text, theme.base), (theme.muted, theme.window),
             (theme.muted, theme.base), (theme.text, theme.selection), (theme.text, theme.tie),
             (theme.banner_text, theme.banner_bg), (theme.accent_text, theme.accent),
             (theme.plot_fg, theme.plot_bg), (theme.warn, theme.base)]
    for fg, bg in pairs:
        assert _contrast(fg, bg) >= 4.5, (theme.name, fg, bg, _contrast(fg, bg))


def test_style_sheet_fills_every_token():
    for t in (th.LIGHT, th.DARK):
        css = th.style_sheet(t)
        assert css and "@" not in css.replace("@@", "")


def test_icons_are_our_svgs_and_render(qapp):
    for name in ("open", "run", "stop", "export", "history", "close", "warning", "app"):
        ico = th.icon(name, "#123456")
        assert not ico.isNull(), name
        assert not ico.pixmap(24, 24).toImage().isNull()


# --------------------------------------------------------------------------- settings


def test_settings_live_in_the_folder_given_and_round_trip(qapp, tmp_path):
    s = Settings(tmp_path / "cfg")
    assert s.path.startswith(str(tmp_path))
    assert APPLICATION in s.path
    assert ORGANISATION not in ("", "QtProject")
    s.set_geometry(QByteArray(b"\x01\x02geometry"))
    s.set_last_folder(str(tmp_path))
    for i in range(12):
        (tmp_path / f"t{i}.csv").write_text("a,b\n1,2\n")
        s.add_recent_file(str(tmp_path / f"t{i}.csv"))
    s.add_recent_file(str(tmp_path / "t5.csv"))  # reopening moves it to the top
    s.set_theme("dark")
    s.sync()
    again = Settings(tmp_path / "cfg")
    assert bytes(again.geometry()) == b"\x01\x02geometry"
    assert again.last_folder() == str(tmp_path)
    recent = again.recent_files()
    assert len(recent) == 8 and recent[0].endswith("t5.csv") and recent[1].endswith("t11.csv")
    assert again.theme() == "dark"


def test_window_remembers_its_geometry(qtbot, tmp_path):
    from workbench.gui.main_window import MainWindow

    folder = tmp_path / "cfg"
    win = MainWindow(settings=Settings(folder), store_path=str(tmp_path / "s.sqlite"))
    qtbot.addWidget(win)
    win.show()
    win.resize(770, 590)  # inside the offscreen platform's 800 x 600 screen
    qtbot.waitUntil(lambda: win.width() == 770)
    win.close()
    win2 = MainWindow(settings=Settings(folder), store_path=str(tmp_path / "s.sqlite"))
    qtbot.addWidget(win2)
    assert (win2.width(), win2.height()) == (770, 590)


def test_standard_shortcuts(qtbot, tmp_path):
    from PySide6.QtGui import QKeySequence

    from workbench.gui.main_window import MainWindow

    win = MainWindow(settings=Settings(tmp_path / "cfg"), store_path=str(tmp_path / "s.sqlite"))
    qtbot.addWidget(win)
    assert QKeySequence(QKeySequence.Open) in win.open_action.shortcuts()
    assert QKeySequence(QKeySequence.Quit) in win.quit_action.shortcuts()
    assert QKeySequence("Ctrl+R") in win.run_action.shortcuts()
    assert QKeySequence("Ctrl+E") in win.export_action.shortcuts()
    assert win.stop_action.shortcuts()


# --------------------------------------------------------------------------- models


def _rows(n, seed=0):
    rng = np.random.default_rng(seed)
    names = ["relu", "tanh", "gelu", "elu"]
    out = []
    for i in range(n):
        mean = float(rng.normal()) if i % 7 else None  # some configurations have no score yet
        out.append({"key": f"k{i}", "rank": i + 1, "hidden": names[i % 4], "head": "identity",
                    "layers": "8", "learning_rate": 0.001, "alpha": 0.0001, "mean": mean,
                    "sd": 0.1, "p_value": float(rng.uniform()), "tied_with_best": i < 3,
                    "fit_seconds": float(rng.uniform()), "dead_pct": float(rng.uniform(0, 100)),
                    "saturated_pct": 0.0, "engine": "numpy", "status": "done", "n_done": 2,
                    "n_total": 2})
    return out


@pytest.mark.parametrize("key", ["mean", "hidden", "fit_seconds", "dead_pct", "rank"])
@pytest.mark.parametrize("order", [Qt.AscendingOrder, Qt.DescendingOrder])
def test_proxy_sort_matches_python_sorted(qapp, key, order):
    m = ResultsModel()
    rows = _rows(300)
    m.set_rows(rows)
    p = ResultsProxy()
    p.setSourceModel(m)
    p.sort(COLUMN_KEYS.index(key), order)
    got = [p.row_at(i)[key] for i in range(p.rowCount())]
    present = [r[key] for r in rows if r[key] is not None]
    if isinstance(present[0], str):
        expect = sorted(present, reverse=order == Qt.DescendingOrder)
        assert got == expect
    else:
        expect = sorted(present, reverse=order == Qt.DescendingOrder)
        n_missing = sum(r[key] is None for r in rows)
        assert got[:len(expect)] == expect
        assert got[len(expect):] == [None] * n_missing  # missing scores always last


def test_upsert_keeps_the_selection_and_the_sort(qapp):
    from PySide6.QtCore import QItemSelectionModel

    m = ResultsModel()
    m.set_rows(_rows(20))
    p = ResultsProxy()
    p.setSourceModel(m)
    sm = QItemSelectionModel(p)
    col = COLUMN_KEYS.index("fit_seconds")
    p.sort(col, Qt.DescendingOrder)
    sm.select(p.index(0, 0), QItemSelectionModel.Select | QItemSelectionModel.Rows)
    chosen = p.row_at(0)["key"]
    changed = dict(_rows(20)[5], fit_seconds=99.0)
    new = dict(_rows(21)[20], key="new", fit_seconds=50.0)
    m.upsert([changed, new])
    assert m.rowCount() == 21
    assert p.row_at(0)["key"] == changed["key"]  # the updated row moved to the top
    assert p.row_at(1)["key"] == "new"
    assert [p.row_at(i.row())["key"] for i in sm.selectedRows()] == [chosen]


def test_filters(qapp):
    m = ResultsModel()
    rows = _rows(40)
    m.set_rows(rows)
    p = ResultsProxy()
    p.setSourceModel(m)
    p.set_filters(hidden="gelu")
    assert p.rowCount() == sum(r["hidden"] == "gelu" for r in rows)
    p.set_filters(tied_only=True)
    assert p.rowCount() == 3
    p.set_filters(text="ELU")
    assert p.rowCount() == sum("elu" in r["hidden"] for r in rows)
    p.set_filters()
    assert p.rowCount() == 40


def test_display_marks_the_tie_group_and_decision_in_words_not_only_colour(qapp):
    m = ResultsModel()
    rows = _rows(5)
    for r, d in zip(rows, ("best", "equivalent", "equivalent", "undecided", "worse")):
        r["decision"] = d
    m.set_rows(rows)
    ranks = [m.index(i, COLUMN_KEYS.index("rank")).data() for i in range(5)]
    assert ranks == ["1", "2 =", "3 =", "4", "5"]  # "=": tied with the best (rows 0-2)
    words = [m.index(i, COLUMN_KEYS.index("decision")).data() for i in range(5)]
    assert words == ["◆ best", "≈ equivalent", "≈ equivalent", "? undecided", "▼ worse"]
    assert m.index(1, 0).data(Qt.BackgroundRole) is not None
    assert m.index(3, 0).data(Qt.BackgroundRole) is None


# --------------------------------------------------------------------------- hints


def test_health_panel_shows_the_hint(qtbot):
    from workbench.gui.plots import HealthPanel

    panel = HealthPanel()
    qtbot.addWidget(panel)
    health = {"dead": [0.8], "saturated": [0.0], "grad_norm": [0.5, 0.1]}
    panel.set_series([{"key": "a", "label": "a", "color": 0, "health": health,
                       "hints": health_hints("a", "relu", health)}])
    assert not panel.hint.isHidden()
    assert "mostly dead" in panel.hint.text()
    assert len(panel.bar_items()) == 2


# --------------------------------------------------------------------------- bridge


def test_bridge_turns_events_into_signals_and_cancels(qtbot):
    """A job that emits the core's events from the bridge thread; the GUI thread receives them."""
    seen = []
    main = threading.get_ident()

    def job(on_event, cancel):
        on_event({"type": "sweep_started", "sweep_id": "s1", "n_trials": 100})
        for i in range(100):
            if cancel.is_set():
                return {"sweep_id": "s1", "state": "cancelled"}
            on_event({"type": "trial_started", "sweep_id": "s1"})
            on_event({"type": "trial_finished", "sweep_id": "s1", "n_finished": i + 1})
            cancel.wait(0.01)
        return {"sweep_id": "s1"}

    class Receiver(QObject):  # a GUI-thread object, as the window is
        def on_trial(self, ev):
            seen.append((threading.get_ident(), ev))

    receiver = Receiver()
    ranked_in = []
    sweep = SweepThread(job, ranker=lambda sid: ranked_in.append(threading.get_ident()) or sid,
                        rank_interval=0.0)
    sweep.bridge.trialFinished.connect(receiver.on_trial)
    with qtbot.waitSignal(sweep.finished, timeout=10_000) as blocker:
        sweep.start()
        qtbot.waitUntil(lambda: len(seen) >= 3, timeout=5_000)
        sweep.stop()
    assert blocker.args[0]["state"] == "cancelled"
    assert all(tid == main for tid, _ in seen)  # slots ran on the GUI thread
    assert ranked_in and all(tid != main for tid in ranked_in)  # ranking ran off it
    assert len(seen) < 100


def test_a_slow_ranking_never_holds_the_sweep_and_the_last_one_follows_the_end(qtbot):
    """The runner calls the bridge on every finished trial; a ranking under way must not
    keep it from going on (it ran on the runner's thread once), and the last ranking
    handed over is made after the job's end, never a stale one after it."""
    gate = threading.Event()
    log = []

    def job(on_event, cancel):
        on_event({"type": "sweep_started", "sweep_id": "s1", "n_trials": 20})
        for i in range(20):
            on_event({"type": "trial_finished", "sweep_id": "s1", "n_finished": i + 1})
        log.append("job done")
        gate.set()
        return {"sweep_id": "s1"}

    def ranker(sid):
        n = sum(1 for x in log if x != "job done")
        log.append(f"rank {n}")
        if n == 0:
            gate.wait(10)  # the first ranking lasts until the job has ended
        return "done" in " ".join(log) and log.index("job done") < len(log) - 1

    got = []

    class Receiver(QObject):  # a slot on the GUI thread, as the window's own is
        def take(self, rows):
            got.append(rows)

    receiver = Receiver()
    sweep = SweepThread(job, ranker=ranker, rank_interval=0.0)
    sweep.bridge.ranked.connect(receiver.take)
    with qtbot.waitSignal(sweep.finished, timeout=20_000):
        sweep.start()
    assert log[0] == "rank 0" and log[1] == "job done"  # the job went on meanwhile
    assert got and got[-1] is True, (got, log)  # the last rows were ranked after the job ended


def test_bridge_reports_a_failed_job_in_one_line(qtbot):
    from workbench.errors import InputError

    def job(on_event, cancel):
        raise InputError("the table has 3 rows, too few for 5 folds; use fewer folds",
                         setting="folds")

    sweep = SweepThread(job)
    with qtbot.waitSignal(sweep.finished, timeout=5_000) as blocker:
        sweep.start()
    assert blocker.args[0]["state"] == "failed"
    # phrased for the window: the core's line, then the control that sets the folds
    assert blocker.args[0]["message"] == ("the table has 3 rows, too few for 5 folds; use fewer "
                                          "folds (set with the “Folds” box in the set-up column)")


def test_the_job_waits_the_start_delay_or_a_cancel(qtbot, monkeypatch):
    """SweepBridge: the job starts START_DELAY after the thread (the window paints its
    results page meanwhile); a cancel lets it start at once (and see the cancel)."""
    import time

    from workbench.gui.bridge import SweepBridge

    started = []

    def job(on_event, cancel):
        started.append((time.monotonic(), cancel.is_set()))
        return {"state": "finished"}

    monkeypatch.setattr(SweepBridge, "START_DELAY", 0.3)
    t = time.monotonic()
    sweep = SweepThread(job)
    with qtbot.waitSignal(sweep.finished, timeout=5_000):
        sweep.start()
    assert started[0][0] - t >= 0.25 and started[0][1] is False

    monkeypatch.setattr(SweepBridge, "START_DELAY", 30.0)
    started.clear()
    other = SweepThread(job)
    other.start()
    with qtbot.waitSignal(other.finished, timeout=5_000):
        other.stop()
    assert started[0][1] is True


# --------------------------------------------------------------------------- open command


def test_open_command_needs_a_file_for_run():
    from workbench.cli import main

    assert main(["open", "--run"]) == 2


def test_snapshot_of_a_bad_file_exits_2(tmp_path, capsys, monkeypatch):
    from workbench.cli import main

    monkeypatch.setenv("WORKBENCH_SETTINGS_DIR", str(tmp_path / "cfg"))
    bad = tmp_path / "empty.csv"
    bad.write_bytes(b"")
    code = main(["open", str(bad), "--snapshot", str(tmp_path / "x.png"),
                 "--store", str(tmp_path / "s.sqlite")])
    assert code == 2
    assert "empty" in capsys.readouterr().err.lower()


def test_gui_bench_sort_part_runs_small(qapp):
    # a smoke test of the benchmark's sorting part (figures, not assertions on time)
    from workbench.gui.bench_gui import bench_sort

    res = bench_sort(n=300, repeats=1)
    assert res["rows"] == 300 and res["median_s"] > 0 and res["repaint_s"] > 0


def test_plan_summary_counts_configurations_and_trials(qapp, tmp_path):
    from workbench.gui import core_adapter as core

    table = core.load(str(Path(__file__).resolve().parents[1] / "sample_sets"
                          / "greenhouse_temp.csv"))
    summary = core.summarise_target(table.df, table.profile.suggested_target)
    choices = {"hidden": ["relu", "tanh", "gelu"], "heads": ["identity"],
               "layers": ["8", "16,8"], "learning_rates": [0.001, 0.01], "alphas": [0.0001],
               "folds": 3, "repeats": 2, "epochs": 5, "jobs": 2, "metric": "r2"}
    plan = core.build_plan(table, summary, choices)
    # the grid is the product of the choices (3 x 1 x 2 x 2 x 1), each on 3 folds x 2 repeats
    assert plan.n_configurations == 12 and plan.n_trials == 72
    text = core.plan_summary(plan, choices, None)
    assert "12 configurations × 3 folds × 2 repeats = 72 trials" in text
    assert "timing" in text
    # a calibration on one epoch count per configuration: the estimate adds up its parts
    # (no warm pool left by an earlier test's sweep: its workers would need no start-up)
    from workbench.sweep.pool import stop_pool

    stop_pool()
    cal = core.calibrate(plan)
    assert cal.covers(plan) and core.estimate(plan, cal, 2, None) is None
    est = core.estimate(plan, cal, 2, 1.5)
    assert "About" in core.plan_summary(plan, choices, est)
    assert est.seconds == pytest.approx(1.5 + est.prep + est.trials / 2)
    assert "cluster" in core.plan_summary(plan, dict(choices, cluster="tcp://h:1"), est)


def test_the_windows_calibration_runs_in_a_process_of_its_own(tmp_path, monkeypatch):
    """bridge.calibrate_in_process times the plan in a process of its own, not on a thread of
    the window's (where it held the interpreter beside the event loop) nor in the ranking
    process (a sweep's rankings would wait behind it): with the window process's own
    calibrate made to fail, the result still comes, from that process."""
    import os

    from workbench.gui import bridge
    from workbench.gui import core_adapter as core
    from workbench.sweep.plan import build_plan

    samples = Path(__file__).resolve().parents[1] / "sample_sets"
    plan = build_plan(samples / "kiln_batches.csv", "passes_inspection", hidden="relu",
                      layers=["8"], folds=2, repeats=1, epochs=5, baselines=[])

    def here(*a, **k):
        raise AssertionError("calibrated on the window's own process")

    monkeypatch.setattr(core, "calibrate", here)
    cal = bridge.calibrate_in_process(plan)
    assert cal.covers(plan) and cal.feature_bytes > 0
    there = bridge.calibration_pids()
    assert there and os.getpid() not in there and not there & bridge.ranker_pids()


def test_theme_switch_recolours_the_window_and_is_remembered(qtbot, tmp_path):
    from PySide6.QtGui import QPalette
    from PySide6.QtWidgets import QApplication

    from workbench.gui.main_window import MainWindow

    win = MainWindow(settings=Settings(tmp_path / "cfg"), store_path=str(tmp_path / "s.sqlite"),
                     theme_choice="light")
    qtbot.addWidget(win)
    win.apply_theme("dark")
    app = QApplication.instance()
    assert app.property("workbenchTheme") == "dark"
    assert app.palette().color(QPalette.Window).name() == th.DARK.window
    assert win.curves.loss_plot.backgroundBrush().color().name() == th.DARK.plot_bg
    assert win.theme_actions["dark"].isChecked() and not win.theme_actions["light"].isChecked()
    assert Settings(tmp_path / "cfg").theme() == "dark"
    win.apply_theme("light")
    assert app.palette().color(QPalette.Window).name() == th.LIGHT.window


def test_curve_band_is_mean_and_sd_over_the_folds_that_reached_each_epoch():
    from workbench.gui.core_adapter import _band

    band = _band([[1.0, 2.0, 3.0], [3.0, 4.0], [5.0]])
    # epoch 3 is reached by one fold only and is left out (a band needs two)
    assert band["x"] == [1, 2]
    np.testing.assert_allclose(band["mean"], [np.mean([1, 3, 5]), np.mean([2, 4])])
    sd = np.array([np.std([1, 3, 5]), np.std([2, 4])])
    np.testing.assert_allclose(band["lo"], np.array(band["mean"]) - sd)
    np.testing.assert_allclose(band["hi"], np.array(band["mean"]) + sd)
    assert _band([]) is None and _band([[], []]) is None
    single = _band([[0.5, 0.25]])
    assert single["mean"] == [0.5, 0.25] and single["lo"] == single["hi"] == [0.5, 0.25]


def test_upsert_of_unchanged_rows_touches_nothing(qapp):
    m = ResultsModel()
    rows = _rows(10)
    rows[2]["mean"] = float("nan")  # NaN != NaN must not count as a change
    m.set_rows(rows)
    seen = []
    m.dataChanged.connect(lambda *a: seen.append(a))
    assert m.upsert([dict(r) for r in rows]) == []
    assert not seen
    assert m.upsert([dict(rows[4], n_done=3)]) == [rows[4]["key"]]
    assert len(seen) == 1 and m.last_changed == {rows[4]["key"]}


def test_signal_emits_keep_the_bool_refcounts(qapp):
    """PySide6 6.12.0 under CPython 3.11 dropped a reference to True on every Signal.emit(),
    which aborted the window after a few thousand signals; pyproject excludes that release."""
    import sys

    class Emitter(QObject):
        sig = Signal(object)

    e = Emitter()
    e.sig.connect(lambda *_: None)
    before = sys.getrefcount(True), sys.getrefcount(False)
    for _ in range(2000):
        e.sig.emit(True)
    assert (sys.getrefcount(True), sys.getrefcount(False)) == before


def test_open_run_snapshot_flow(qapp, tmp_path, monkeypatch):
    """`workbench open FILE --run --snapshot PNG`: load, run the default sweep (made tiny here),
    save a picture of the window and exit 0."""
    from PySide6.QtGui import QImage

    from workbench.gui.app import run_app

    monkeypatch.setenv("WORKBENCH_SETTINGS_DIR", str(tmp_path / "cfg"))
    png = tmp_path / "shot.png"
    code = run_app(str(Path(__file__).resolve().parents[1] / "sample_sets" / "kiln_batches.csv"),
                   run=True, snapshot=str(png), store=str(tmp_path / "s.sqlite"),
                   sweep_overrides={"folds_spin": 2, "repeats_spin": 1, "epochs_spin": 3})
    assert code == 0
    img = QImage(str(png))
    assert (img.width(), img.height()) == (1280, 800)
    from workbench.sweep.store import Store

    with Store(tmp_path / "s.sqlite") as store:
        sweeps = store.list_sweeps()
    assert len(sweeps) == 1 and sweeps[0]["state"] == "finished"
    assert sweeps[0]["n_stored"] == sweeps[0]["n_trials"]


def test_heartbeat_figures_from_gaps_and_the_gui_threads_cpu_clock():
    # by hand: ticks every 10 ms but one 70 ms gap, during which the GUI thread worked 25 ms
    from workbench.gui.bench_gui import HEARTBEAT_MS, heartbeat_figures

    gaps = [0.5] + [0.010] * 200 + [0.070] + [0.010] * 100  # the first (set-up) left out
    cpu = [0.001 * i for i in range(150)] + [0.149 + 0.025] + \
        [0.174 + 0.001 * i for i in range(1, 152)]
    f = heartbeat_figures(gaps, cpu)
    assert f["ticks"] == 301
    assert f["stall_s"] == pytest.approx(0.070 - HEARTBEAT_MS / 1000)
    assert f["median_gap_s"] == pytest.approx(0.010)
    # 99th percentile by rank: 301 gaps, the one long gap is above it
    assert f["p99_gap_s"] == pytest.approx(0.010)
    assert f["busy_max_s"] == pytest.approx(0.025)
    assert f["busy_p99_s"] == pytest.approx(0.001)


def test_the_window_bench_sweeps_the_default_plan_when_asked(qapp, monkeypatch):
    """Wiring: ``bench_stall(default_plan=True)`` sweeps what the window's default plan
    ticks (``workbench.gui.app.default_choices``: the advice's hidden activations and
    heads); without it, the bench's small fixed sweep. The sweep itself is left out here
    (its end is signalled at once): the figures are the bench's, not a test's."""
    from PySide6.QtCore import QTimer

    from workbench.gui import bench_gui
    from workbench.gui import core_adapter as core
    from workbench.gui.main_window import MainWindow

    seen = []

    def run_sweep(self):
        seen.append((sorted(self.setup.hidden_grid.checked()),
                     sorted(self.setup.head_grid.checked()),
                     sorted(core.default_hidden(self.summary)),
                     sorted(core.default_heads(self.summary))))
        QTimer.singleShot(0, lambda: self.sweepEnded.emit({"state": "finished"}))

    monkeypatch.setattr(MainWindow, "run_sweep", run_sweep)
    bench_gui.bench_stall(default_plan=True, timeout_s=20)
    bench_gui.bench_stall(timeout_s=20)
    (hidden, heads, want_hidden, want_heads), (fixed_hidden, fixed_heads, *_) = seen
    assert (hidden, heads) == (want_hidden, want_heads)
    assert (fixed_hidden, fixed_heads) == (["gelu", "relu", "silu", "tanh"], ["logistic"])
    assert (hidden, heads) != (fixed_hidden, fixed_heads)  # (the test can tell them apart)
