"""The window's results: the verdict strip, the ranked table, what matters, the candidates,
the ROPE box, the tune default and Export's default -- driven offscreen with pytest-qt.

The window only presents the core, so the references here are the core's own answers
for the same stored sweep, obtained outside the window: ``workbench sweep --json``,
``workbench show --json`` and the exported report (the views must carry the words of
:func:`workbench.sweep.results.verdict_statements`, checked with the shared helper
``tests/verdict_views.py``); the region of practical equivalence given to
:func:`workbench.sweep.results.sweep_results` directly. Colours are judged with the
CIE 1976 L*a*b* colour difference (CIE 15:2004; sRGB of IEC 61966-2-1) and WCAG 2.1's
contrast ratio; the helpers are those of ``tests/test_gui_parts.py``. Waiting is done
with ``qtbot.waitSignal`` / ``waitUntil`` only.
"""

from __future__ import annotations

import io
import json
from contextlib import redirect_stdout
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor
from sklearn.datasets import load_breast_cancer
from test_gui_parts import _contrast, _lab, _linear
from verdict_views import assert_view_shows_verdict, html_text, normalise

from workbench.cli import main
from workbench.gui import theme as th
from workbench.gui.main_window import CANNOT_RUN, COLUMN_KEYS, MainWindow
from workbench.gui.models import DECISION_TEXT
from workbench.gui.settings import Settings
from workbench.sweep.plan import LEARNING_RATE_GRID
from workbench.sweep.results import sweep_results, verdict_statements
from workbench.sweep.store import Store

pytestmark = pytest.mark.gui

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"


# --------------------------------------------------------------------------- fixtures
@pytest.fixture(scope="module")
def cancer(tmp_path_factory):
    """scikit-learn's breast cancer table swept by ``workbench sweep --json`` (2 x 2 grid;
    the same sweep as tests/test_verdict_e2e.py, whose recommendation is not rank 1)."""
    d = tmp_path_factory.mktemp("cancer_gui")
    table = d / "cancer.csv"
    load_breast_cancer(as_frame=True).frame.to_csv(table, index=False)
    store, out = d / "s.sqlite", d / "r.json"
    with redirect_stdout(io.StringIO()):
        rc = main(["sweep", str(table), "--target", "target", "--hidden", "relu,tanh",
                   "--output", "all", "--layers", "4", "--learning-rate", "0.01",
                   "--folds", "3", "--repeats", "2", "--epochs", "30", "--jobs", "1",
                   "--quiet", "--store", str(store), "--json", str(out)])
    assert rc == 0
    return {"dir": d, "store": store, "res": json.loads(out.read_text())}


def make_window(qtbot, tmp_path, store, theme="light") -> MainWindow:
    win = MainWindow(settings=Settings(tmp_path / "settings"), store_path=str(store),
                     theme_choice=theme)
    qtbot.addWidget(win)
    win.resize(1280, 800)
    win.show()
    qtbot.waitExposed(win)
    return win


def reopen(qtbot, win, sweep_id):
    """History's "Show results" for a stored sweep, waiting until the window shows it."""
    with qtbot.waitSignal(win.resultsShown, timeout=60_000):
        win.reopen_sweep(sweep_id)
    win.tabs.setCurrentIndex(1)
    qtbot.waitUntil(lambda: win.verdict.isVisible(), timeout=5_000)


@pytest.fixture
def shown(qtbot, tmp_path, cancer):
    """A window at 1280 x 800 showing the cancer sweep (and a table-loading tail settled)."""
    win = make_window(qtbot, tmp_path, cancer["store"])
    reopen(qtbot, win, cancer["res"]["sweep_id"])
    return win


def _fraction(x) -> str:
    return f"{x:.4f}"


# --------------------------------------------------------------------------- the verdict
def test_the_strip_the_jsons_and_the_report_agree_for_one_sweep(qtbot, shown, cancer,
                                                                 capsys, monkeypatch):
    win, res = shown, cancer["res"]
    # show --json reads the same document sweep --json wrote
    capsys.readouterr()
    assert main(["show", res["sweep_id"], "--store", str(cancer["store"]), "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == res
    # the strip: every statement but the factors' sentence (shown beside its chart)
    assert_view_shows_verdict(win.verdict.text(), res, skip=("factors",))
    assert normalise(win.factors_chart.sentence.text()) == normalise(res["factors_sentence"])
    # each statement in its own row, under its own name (a swap would show wrong words)
    for s in verdict_statements(res):
        if s["key"] != "factors":
            assert win.verdict.labels[s["key"]].text() == s["text"], s["key"]
    # the report exported from the window shows the same words
    folder = cancer["dir"] / "from_window"
    report = _export_through_dialog(qtbot, win, monkeypatch, folder, ["json", "report"])
    assert_view_shows_verdict(html_text((report / "report.html").read_text("utf-8")), res)


def _export_through_dialog(qtbot, win, monkeypatch, folder, formats, pick=None):
    """Press Export in the window; the dialog (not shown) keeps its default configuration
    unless ``pick`` chooses another entry; returns the folder written."""
    from workbench.gui import dialogs

    seen = []

    def accept(dialog):
        seen.append(dialog)
        dialog.folder_edit.setText(str(folder))
        for name, box in dialog.boxes.items():
            box.setChecked(name in formats)
        dialog.open_box.setChecked(False)
        if pick is not None:
            dialog.config_combo.setCurrentIndex(pick)
        return 1

    monkeypatch.setattr(dialogs.ExportDialog, "exec", accept)
    with qtbot.waitSignal(win.exportDone, timeout=120_000) as blocker:
        win.export_action.trigger()
    win._last_dialog = seen[0]
    return Path(blocker.args[0])


def test_export_defaults_to_the_recommended_configuration(qtbot, shown, cancer, monkeypatch):
    win, res = shown, cancer["res"]
    rec = res["verdict"]["recommended"]
    assert rec["rank"] != 1  # this sweep's recommendation is not its best: a real test
    # rank 1 is selected (the window selects the first row after opening a sweep)
    assert [r["rank"] for r in win.selected_rows()] == [1]
    folder = _export_through_dialog(qtbot, win, monkeypatch, cancer["dir"] / "default",
                                    ["json"])
    conf = json.loads((folder / "configuration.json").read_text())
    assert conf["scores"]["rank"] == rec["rank"]
    assert conf["scores"]["recommended"] == {"rank": rec["rank"], "index": rec["index"],
                                             "reason": rec["reason"], "exported": True}
    # the dialog offered the recommended one first, with its reason, then the selected one
    dialog = win._last_dialog
    labels = [dialog.config_combo.itemText(i) for i in range(dialog.config_combo.count())]
    assert labels[0].startswith(f"Recommended: rank {rec['rank']},")
    assert rec["reason"] in labels[0]
    assert labels[1].startswith("Selected: rank 1,")
    # and the selected one is still one choice away
    folder = _export_through_dialog(qtbot, win, monkeypatch, cancer["dir"] / "picked",
                                    ["json"], pick=1)
    conf = json.loads((folder / "configuration.json").read_text())
    assert conf["scores"]["rank"] == 1 and conf["scores"]["recommended"]["exported"] is False


def test_the_table_shows_decisions_epochs_gap_and_baselines_as_the_core_says(shown, cancer):
    win, res = shown, cancer["res"]
    m = win.results_model
    by_index = {c["index"]: c for c in res["configurations"]}
    col = {k: COLUMN_KEYS.index(k) for k in ("rank", "hidden", "mean", "decision", "gap",
                                            "epochs", "p_value")}
    networks = baselines = 0
    for r in range(m.rowCount()):
        row = m.row_at(r)
        text = {k: m.index(r, c).data() for k, c in col.items()}
        if row["kind"] == "baseline":
            baselines += 1
            b = next(b for b in res["baselines"] if b["name"] == row["hidden"])
            assert text["rank"] in ("ref", "ref =")
            assert text["mean"].startswith(_fraction(b["mean"]))
            assert text["decision"] == DECISION_TEXT[b["decision"]]
            # reference rows: visibly different, never selectable
            assert m.index(r, 0).data(Qt.BackgroundRole) == QColor(win.theme.reference)
            assert m.index(r, 0).data(Qt.FontRole).italic()
            assert not (m.flags(m.index(r, 0)) & Qt.ItemIsSelectable)
            continue
        networks += 1
        c = by_index[row["index"]]
        assert text["mean"] == f"{c['mean']:.4f} ± {c['sd']:.4f}"
        assert text["decision"] == DECISION_TEXT[c["decision"]]
        assert text["epochs"] == f"{c['mean_epochs']:.0f}"
        assert text["gap"] == ("underfit" if c["underfit"] else f"{c['train_test_gap']:+.3f}")
        assert text["rank"].split()[0] == str(c["rank"])
        assert text["rank"].endswith("=") == (c["tied_with_best"] and c["rank"] != 1)
    assert networks == len(res["configurations"]) and baselines == len(res["baselines"])
    # selecting everything selects no reference row, so Export can never take one
    win.results_view.selectAll()
    assert all(r["kind"] == "network" for r in win.selected_rows())
    assert len(win.selected_rows()) == networks


def test_what_matters_and_the_candidates_show_the_core_numbers(shown, cancer):
    win, res = shown, cancer["res"]
    words = win.results_meta["factor_words"]
    bars = win.factors_chart.bars.rows
    factors = [(r[0], r[1]) for r in bars if r[2] == "factor"]
    assert factors == [(words[f["factor"]].removeprefix("the "), f["share"])
                       for f in res["factors"]]
    noise = [r[1] for r in bars if r[2] == "noise"]
    assert noise == [res["factors_noise"]["share"]]
    # every candidate with its raw best mean, robustness and corrected interval
    shown_text = win.candidates.text()
    for group in ("hidden", "head", "hidden_head"):
        for c in res["candidates"][group]:
            corr = c["corrected"]
            line = next(ln for ln in shown_text.splitlines()
                        if ln.strip().lstrip("★ ").startswith(f"{c['label']} |"))
            cells = [x.strip() for x in line.split("|")]
            assert cells[1:] == [str(c["best_rank"]), _fraction(c["best_mean"]),
                                 f"{_fraction(corr['estimate'])} ({_fraction(corr['low'])}–"
                                 f"{_fraction(corr['high'])})", _fraction(c["robustness"]),
                                 str(c["n_settings"])]
    # the rule of thumb is marked (relu hidden, the advised head, and the pair)
    marked = {ln.strip().split(" |")[0] for ln in shown_text.splitlines() if "★" in ln}
    head = res["verdict"]["output"]["advised"]
    assert marked == {"★ relu", f"★ {head}", f"★ relu + {head}"}
    # double-clicking a candidate selects its best configuration
    best_tanh = next(c for c in res["candidates"]["hidden"] if c["value"] == "tanh")
    win.candidates.configurationChosen.emit(best_tanh["best_index"])
    assert [r["index"] for r in win.selected_rows()] == [best_tanh["best_index"]]


def test_the_rope_box_reaches_the_core(qtbot, shown, cancer):
    win, res = shown, cancer["res"]
    assert win.rope_edit.placeholderText() == f"default {res['rope']:.4g}"
    win.rope_edit.setText("0.0002")  # narrower than the default: fewer are equivalent
    with qtbot.waitSignal(win.judged, timeout=60_000):
        win.rope_edit.editingFinished.emit()
    with Store(cancer["store"]) as store:
        ref = sweep_results(store, res["sweep_id"], rope=0.0002)
    assert win.results_meta["rope"] == 0.0002 and ref["rope_basis"] == "set by the user"
    decisions = {r["index"]: r["decision"] for r in win.results_model.rows()
                 if r["kind"] == "network"}
    assert decisions == {c["index"]: c["decision"] for c in ref["configurations"]}
    assert decisions != {c["index"]: c["decision"] for c in res["configurations"]}
    assert_view_shows_verdict(win.verdict.text(), ref, skip=("factors",))
    # a ROPE the core refuses: its words, pointing at the box, and nothing judged again
    win.rope_edit.setText("-1")
    win.rope_edit.editingFinished.emit()
    assert "region of practical equivalence" in win.message_text()
    assert "“Equivalence ±”" in win.message_text()
    assert win.results_meta["rope"] == 0.0002


def test_legend_numbers_follow_the_rank(shown, cancer, monkeypatch):
    """Whatever order the rows are selected or sorted in, the plots get them in rank order
    and number each by its rank (the legend's and the fold-score axis's numbers)."""
    win = shown
    drawn = []
    real = win.curves.parts  # (every drawing of the curves goes through its parts)
    monkeypatch.setattr(win.curves, "parts", lambda series: (drawn.append(series),
                                                             real(series))[1])
    # the table sorted against the rank (sorting by name keeps equal names in their places:
    # a stable sort, so it may leave the rank order as it was)
    win.results_view.sortByColumn(COLUMN_KEYS.index("rank"), Qt.DescendingOrder)
    ranked = [win.proxy.row_at(i) for i in range(win.proxy.rowCount())
              if win.proxy.row_at(i)["kind"] == "network"]
    assert [r["rank"] for r in ranked] != sorted(r["rank"] for r in ranked)
    win.select_rows([i for i in range(win.proxy.rowCount())
                     if win.proxy.row_at(i)["kind"] == "network"])
    series = drawn[-1]
    assert [s["number"] for s in series] == sorted(r["rank"] for r in ranked)
    assert [s["color"] for s in series] == list(range(len(series)))
    for s in series:
        row = next(r for r in ranked if r["rank"] == s["number"])
        assert s["key"] == row["key"]


# --------------------------------------------------------------------------- colours
@pytest.mark.parametrize("theme", [th.LIGHT, th.DARK], ids=["light", "dark"])
def test_decision_rows_are_distinct_from_selected_rows(qtbot, tmp_path, theme):
    """In both themes: decided rows and reference rows differ from the selection colour by
    CIE76 dE >= 20 (from memory: about 2.3 is a just-noticeable difference, CIE 15:2004
    gives the formula only), keep WCAG AA contrast with the text (4.5:1), and a rendered
    selected row and an unselected equivalent row really are those colours."""
    def de(a, b):
        return float(np.linalg.norm(_lab(_linear(a)) - _lab(_linear(b))))

    for name in ("best", "equivalent", "reference"):
        colour = getattr(theme, name)
        assert de(colour, theme.selection) >= 20, (theme.name, name)
        assert _contrast(theme.text, colour) >= 4.5, (theme.name, name)
    assert de(theme.best, theme.equivalent) >= 10
    assert de(theme.equivalent, theme.reference) >= 10

    win = make_window(qtbot, tmp_path, tmp_path / "s.sqlite", theme=theme.name)
    win.tabs.setCurrentIndex(1)
    base = {"hidden": "relu", "head": "identity", "layers": "8", "learning_rate": 0.001,
            "alpha": 0.0001, "sd": 0.01, "p_value": 0.5, "tied_with_best": True,
            "status": "done", "n_done": 2, "n_total": 2, "engine": "numpy", "kind": "network"}
    rows = [dict(base, key=f"k{i}", index=i, rank=i + 1, position=i + 1, mean=0.9 - i / 100,
                 decision=d) for i, d in enumerate(("best", "equivalent", "equivalent",
                                                    "undecided"))]
    rows.append(dict(base, key="ref", kind="baseline", index=None, rank=None, mean=0.5,
                     decision="worse", hidden="linear"))
    win.results_model.set_rows(rows)
    win.results_view.sortByColumn(COLUMN_KEYS.index("rank"), Qt.AscendingOrder)
    win.select_rows([1])
    win.results_view.clearFocus()
    qtbot.waitUntil(lambda: win.results_view.viewport().isVisible())
    image = win.results_view.viewport().grab().toImage()
    x = win.results_view.horizontalHeader().sectionViewportPosition(
        COLUMN_KEYS.index("trials")) + 3  # a blank part of a cell (text is right-aligned)

    def pixel(view_row):
        y = win.results_view.rowViewportPosition(view_row) + 2
        return image.pixelColor(x, y).name()

    drawn = [pixel(i) for i in range(5)]
    assert de(drawn[1], theme.selection) < 3  # the selected (equivalent) row: selection
    assert de(drawn[2], theme.equivalent) < 3  # the unselected equivalent row: its colour
    assert de(drawn[0], theme.best) < 3
    assert de(drawn[4], theme.reference) < 3
    assert de(drawn[1], drawn[2]) >= 20


# --------------------------------------------------------------------------- a sweep run here
@pytest.fixture
def kiln_run(qtbot, tmp_path):
    """A real sweep run by the window on the kiln sample with the widest table: the tune
    learning rates (the set-up's default) and two L2 strengths, so every column shows."""
    win = make_window(qtbot, tmp_path, tmp_path / "s.sqlite")
    with qtbot.waitSignal(win.targetReady, timeout=30_000):
        win.open_path(str(SAMPLES / "kiln_batches.csv"), "passes_inspection")
    s = win.setup
    assert s.lr_edit.text() == "tune"  # the default: an equal tuning budget per candidate
    s.hidden_grid.set_checked(["relu", "tanh"])
    s.head_grid.set_checked(["logistic"])
    s.layers_edit.setText("6")
    s.alpha_edit.setText("0.0001 0.001")
    s.folds_spin.setValue(2)
    s.repeats_spin.setValue(1)
    s.epochs_spin.setValue(3)
    s.jobs_spin.setValue(2)
    plan, msg = win._plan()
    assert plan is not None, msg
    assert plan.learning_rates == list(LEARNING_RATE_GRID) and plan.tune_learning_rate
    with qtbot.waitSignal(win.sweepEnded, timeout=180_000) as blocker:
        win.run_sweep()
    assert blocker.args[0]["state"] == "finished", blocker.args[0]
    qtbot.waitUntil(lambda: win.results_model.rowCount() == 12 + 2, timeout=10_000)
    return win


def test_tune_mixed_with_numbers_is_refused_in_the_core_words(qtbot, tmp_path):
    from workbench.gui.messages import phrase
    from workbench.sweep.plan import build_plan

    win = make_window(qtbot, tmp_path, tmp_path / "s.sqlite")
    with qtbot.waitSignal(win.targetReady, timeout=30_000):
        win.open_path(str(SAMPLES / "kiln_batches.csv"), "passes_inspection")
    win.setup.lr_edit.setText("tune 0.01")
    with pytest.raises(Exception) as refused:  # the core's own refusal, for reference
        build_plan(SAMPLES / "kiln_batches.csv", "passes_inspection",
                   learning_rates=["tune", "0.01"])
    assert win.setup.estimate_label.text() == CANNOT_RUN + phrase(refused.value)
    assert not win.run_action.isEnabled()
    win.setup.lr_edit.setText("tune")
    assert win.run_action.isEnabled()
    assert all(f"{v:g}" in win.setup.lr_edit.toolTip() for v in LEARNING_RATE_GRID)


def test_a_window_run_shows_every_column_and_an_unclipped_verdict_at_1280x800(qtbot,
                                                                            kiln_run):
    win = kiln_run
    qtbot.waitUntil(lambda: win.verdict.isVisible(), timeout=5_000)
    with Store(win.store_path) as store:
        res = sweep_results(store, win.sweep_id)
    # the strip shows the core's verdict on the sweep the window just ran
    assert_view_shows_verdict(win.verdict.text(), res, skip=("factors",))
    assert {w["code"] for w in res["warnings"]} <= set(win.verdict.labels)
    # every results column lies inside the table's viewport: no horizontal scrolling
    view = win.results_view
    hh = view.horizontalHeader()
    width = view.viewport().width()
    shown = [i for i in range(len(COLUMN_KEYS)) if not view.isColumnHidden(i)]
    # LR and L2 both vary; every configuration ran its 2 trials: the note says so, and the
    # Trials column gives its room to the numbers
    assert [COLUMN_KEYS[i] for i in shown] == [k for k in COLUMN_KEYS if k != "trials"]
    assert "all: 2/2 trials" in win.results_note.text()
    for i in shown:
        left = hh.sectionViewportPosition(i)
        assert 0 <= left and left + hh.sectionSize(i) <= width, COLUMN_KEYS[i]
    assert view.horizontalScrollBar().maximum() == 0
    # and wide enough for their cells: nothing the table shows is cut short
    for i in shown:
        assert hh.sectionSize(i) >= view.sizeHintForColumn(i) - 1, COLUMN_KEYS[i]
    assert_strip_whole(qtbot, win)


def strip_problems(win) -> list[str]:
    """What of the verdict strip is not wholly shown: a label whose wrapped text is taller
    than the label, a label reaching past the strip, the strip reaching under the filters."""
    out = []
    strip = win.verdict
    top = strip.mapTo(win, strip.rect().topLeft()).y()
    bar = win.head_filter.mapTo(win, win.head_filter.rect().topLeft()).y()
    if not (0 <= top and top + strip.height() <= bar):
        out.append(f"strip from {top} to {top + strip.height()}, filters at {bar}")
    for key, label in strip.labels.items():
        if not label.isVisible():
            out.append(f"{key} hidden")
        if label.heightForWidth(label.width()) > label.height():
            out.append(f"{key} needs {label.heightForWidth(label.width())} px, has "
                       f"{label.height()}")
        if label.mapTo(strip, label.rect().bottomLeft()).y() > strip.contentsRect().bottom():
            out.append(f"{key} reaches past the strip")
    return out


def assert_strip_whole(qtbot, win):
    """Once the layout has settled (it is laid out on the event loop), nothing of the
    verdict strip is cut short at 1280 x 800."""
    assert (win.width(), win.height()) == (1280, 800)
    try:
        qtbot.waitUntil(lambda: not strip_problems(win), timeout=5_000)
    except Exception:
        pass
    assert strip_problems(win) == []
    assert (win.width(), win.height()) == (1280, 800)  # and the window did not grow for it


def test_a_verdict_with_every_warning_is_shown_whole_at_1280x800(qtbot, tmp_path):
    """A table of noise with few rows: no network beats either baseline, too few test rows,
    most of the grid undecided -- four long warnings, all shown whole."""
    rng = np.random.default_rng(1)
    table = tmp_path / "noise.csv"
    import pandas as pd

    pd.DataFrame(rng.normal(size=(60, 4)), columns=["a", "b", "c", "y"]).to_csv(table,
                                                                                index=False)
    store, out = tmp_path / "s.sqlite", tmp_path / "r.json"
    with redirect_stdout(io.StringIO()):
        assert main(["sweep", str(table), "--target", "y", "--hidden", "relu,tanh,gelu",
                     "--output", "identity", "--layers", "4", "--learning-rate", "0.001,0.01",
                     "--folds", "5", "--repeats", "2", "--epochs", "10", "--jobs", "1",
                     "--quiet", "--store", str(store), "--json", str(out)]) == 0
    res = json.loads(out.read_text())
    codes = [w["code"] for w in res["warnings"]]
    assert codes == ["no_network_beats_constant", "no_network_beats_linear", "few_test_rows",
                     "mostly_undecided"]
    win = make_window(qtbot, tmp_path, store)
    reopen(qtbot, win, res["sweep_id"])
    assert_view_shows_verdict(win.verdict.text(), res, skip=("factors",))
    assert_strip_whole(qtbot, win)


def _wide_rows(n: int = 30, done: int = 10) -> list[dict]:
    """Rows as wide as a default kiln sweep's (the widest names and numbers seen at
    1280 x 800: leaky_relu, softmax, a learning rate of 0.0055, a bold best mean)."""
    rows = []
    for i in range(n):
        rows.append({
            "key": f"w:{i}", "index": i, "rank": i + 1, "hidden": ("leaky_relu", "relu")[i % 2],
            "head": ("softmax", "logistic")[i % 2], "layers": "32",
            "learning_rate": (0.0055, 0.03, 0.00017)[i % 3], "alpha": 0.0001,
            "mean": 0.9604 - 0.001 * i, "sd": 0.0087 + 0.0001 * i, "p_value": 0.811,
            "decision": ("best" if i == 0 else ("equivalent", "undecided", "worse")[i % 3]),
            "tied_with_best": i % 4 == 0, "gap": 0.0334, "epochs": 100,
            "fit_seconds": 0.18, "dead_pct": 12.5, "saturated_pct": 0.0, "engine": "numpy",
            "status": "done", "n_done": done - (i % 2 if done < 10 else 0), "n_total": 10,
            "message": "", "series": {}})
    return rows


@pytest.mark.parametrize("done, width", [(10, 1280), (4, 1280), (4, 1160)])
def test_at_1280x800_numbers_are_never_cut_short_words_give_way_first(qtbot, tmp_path, done,
                                                                        width):
    """Every shown column inside the table at 1280 x 800 with rows as wide as a default
    kiln sweep's, and every column of numbers at least as wide as its widest cell (the
    view's own measure, sizeHintForColumn): a cut number ("0.00…") says nothing, while a
    cut name ("softm…") still reads. With every trial run (done=10) the Trials column is
    hidden and the note says how many; with racing's partial rows (done=4) it shows. A
    narrower window (1160 px) squeezes the names and decisions, not the numbers."""
    from workbench.gui.main_window import TEXT_COLUMNS

    win = make_window(qtbot, tmp_path, tmp_path / "s.sqlite")
    win.resize(width, 800)
    qtbot.waitUntil(lambda: win.width() == width, timeout=5_000)
    tabs = win.tabs
    tabs.setCurrentIndex(next(i for i in range(tabs.count())
                              if tabs.widget(i).objectName() == "resultsTab"))
    qtbot.waitUntil(lambda: win.results_view.isVisible(), timeout=5_000)
    qtbot.wait(50)  # laid out at its width
    rows = _wide_rows(done=done)
    win._on_ranked({"meta": {"rope": 0.01}, "rows": rows})
    win._fit_columns()
    view = win.results_view
    hh = view.horizontalHeader()
    shown = [i for i in range(len(COLUMN_KEYS)) if not view.isColumnHidden(i)]
    assert ("trials" in [COLUMN_KEYS[i] for i in shown]) == (done < 10)
    assert ("10/10 trials" in win.results_note.text()) == (done == 10)
    assert view.horizontalScrollBar().maximum() == 0
    for i in shown:
        left = hh.sectionViewportPosition(i)
        assert 0 <= left and left + hh.sectionSize(i) <= view.viewport().width(), COLUMN_KEYS[i]
        if COLUMN_KEYS[i] not in TEXT_COLUMNS and i != shown[-1]:
            assert hh.sectionSize(i) >= view.sizeHintForColumn(i) - 1, COLUMN_KEYS[i]
