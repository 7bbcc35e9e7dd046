"""The main window: drop a table, tick activations, watch the sweep, read the results.

Layout (our own): a set-up column on the left (four numbered cards: table and
target, activations, training and evaluation, where to run), and on the right
a message banner, a progress strip, and two tabs: *Data* (preview and column
profile) and *Results* (filter bar, the ranked table, and three plot panels
side by side: learning curves, fold scores, layer health).

All work happens off the GUI thread: loading and profiling through
:mod:`workbench.gui.tasks`, the sweep through :mod:`workbench.gui.bridge`.
"""

from __future__ import annotations

import time
from pathlib import Path

import shiboken6
from PySide6.QtCore import (
    QItemSelection,
    QItemSelectionModel,
    QRect,
    QSize,
    Qt,
    QTimer,
    QUrl,
    Signal,
)
from PySide6.QtGui import QAction, QDesktopServices, QKeySequence
from PySide6.QtWidgets import (
    QAbstractItemView,
    QApplication,
    QCheckBox,
    QComboBox,
    QFileDialog,
    QFrame,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QLineEdit,
    QMainWindow,
    QMessageBox,
    QProgressBar,
    QScrollArea,
    QSplitter,
    QStyledItemDelegate,
    QTableView,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from workbench.gui import core_adapter as core
from workbench.gui import heap
from workbench.gui import theme as th
from workbench.gui.bridge import SweepThread
from workbench.gui.candidates import CandidatesView
from workbench.gui.factors_chart import FactorsChart
from workbench.gui.messages import phrase
from workbench.gui.models import (
    COLUMN_KEYS,
    DECISION_TEXT,
    ROLES,
    FrameModel,
    ProfileModel,
    ResultsModel,
    ResultsProxy,
    fmt_prob,
)
from workbench.gui.plot_area import PlotArea
from workbench.gui.settings import Settings
from workbench.gui.setup_pane import SetupPane
from workbench.gui.tasks import run_task
from workbench.gui.turns import after_paint
from workbench.gui.verdict_strip import VerdictStrip
from workbench.gui.widgets import Banner, ElidedLabel, WrappingLabel
from workbench.sweep.defaults import WINDOW_DEFAULTS as DEFAULTS

TABLE_FILTER = "Tables (*.csv *.tsv *.txt *.xlsx *.parquet *.pq);;All files (*)"
#: what the set-up column's footer puts before the core's reason when Run is off
CANNOT_RUN = "Cannot run yet: "
#: milliseconds the plan must stay unchanged before its configurations are timed
CALIBRATE_DELAY_MS = 500
#: the most configurations drawn at once in the plots
MAX_PLOTTED = 8
#: the modules a sweep imports on its thread (sklearn's parts among them), imported in the
#: background as soon as the window opens (while the user picks a table)
SWEEP_MODULES = ("workbench.sweep.runner", "workbench.sweep.trials",
                 "workbench.data.preprocessing", "joblib", "sklearn.dummy",
                 "sklearn.discriminant_analysis")
WARM_UP_DELAY_MS = 0
#: least milliseconds between two updates of the results from a running sweep's rankings
#: (a ranking that arrives sooner waits, and only the newest waiting one is shown)
RANKED_INTERVAL_MS = 250
#: the ROPE box's label (messages.SETTING_LABELS names it) and tooltip
ROPE_LABEL = "Equivalence ±"
ROPE_TIP = ("Half-width of the region of practical equivalence: differences smaller than "
            "this do not matter. Empty: the default for the metric (0.01 for scores that are "
            "fractions, 1% of the constant baseline's score for error scores). The decisions, "
            "the verdict and the recommendation are judged again when it changes.")
#: least heights of the results table (header and three rows) and of the tabs below it
#: (their tab bar and a sliver of the page, which scrolls): what a verdict with many
#: warnings leaves them at worst (the splitter between them gives the user more)
TABLE_MIN_HEIGHT = 24 + 3 * 21
DETAIL_MIN_HEIGHT = 40
#: starting widths of the results columns, pixels (then fitted to their contents and to
#: the view, see MainWindow._fit_columns)
COLUMN_WIDTHS = {"rank": 46, "hidden": 84, "head": 66, "layers": 54, "learning_rate": 54,
                 "alpha": 54, "mean": 124, "decision": 100, "p_value": 50, "gap": 62,
                 "epochs": 40, "dead_pct": 42, "saturated_pct": 40, "fit_seconds": 44,
                 "trials": 48}
#: the least width of a column when the table is squeezed to fit its view
COLUMN_MIN = {"rank": 34, "hidden": 56, "head": 52, "layers": 40, "learning_rate": 44,
              "alpha": 44, "mean": 100, "decision": 84, "p_value": 40, "gap": 52,
              "epochs": 34, "dead_pct": 34, "saturated_pct": 34, "fit_seconds": 36,
              "trials": 40}

#: columns of words (names, decisions): squeezed before the numbers when the table is narrow
TEXT_COLUMNS = {"hidden", "head", "decision"}


def _all_trials(rows: list[dict]) -> int | None:
    """The trials every configuration finished, when each finished all its planned trials
    and they are as many (a sweep that racing stopped nothing in, ended): the Trials column
    then says nothing a note cannot, and gives its room to the numbers. None otherwise."""
    counts = {(r.get("n_done"), r.get("n_total")) for r in rows}
    if len(counts) != 1:
        return None
    done, total = next(iter(counts))
    return int(done) if done and done == total else None


class RoleDelegate(QStyledItemDelegate):
    """A combo box editor for the profile's role column."""

    def createEditor(self, parent, option, index):
        box = QComboBox(parent)
        box.addItems(list(ROLES))
        return box

    def setEditorData(self, editor, index):
        editor.setCurrentText(str(index.data(Qt.EditRole)))

    def setModelData(self, editor, model, index):
        model.setData(index, editor.currentText(), Qt.EditRole)


class SteadyTabWidget(QTabWidget):
    """A tab widget that lays itself out again only when something it places changed.

    Any label whose text changes on a page (the progress line in the corner, the note
    under the results, the verdict) asks its parents to lay out again, up to the tab
    widget; Qt's tab widget then places its tab bar, corner and pages anew and repaints
    itself whole: the whole results page, 60-100 ms, for every progress tick and ranking.
    Here that request is answered only when the tab bar's or a corner widget's size
    hint, or the widget's own size, changed (nothing else moves what it places); the
    request still goes on to the window (its least size may have changed)."""

    def __init__(self, parent=None):
        super().__init__(parent)
        self._placed = None

    def _layout_key(self):
        corners = tuple(w.sizeHint().toTuple() if w is not None and w.isVisible() else None
                        for w in (self.cornerWidget(Qt.TopLeftCorner),
                                  self.cornerWidget(Qt.TopRightCorner)))
        return (self.size().toTuple(), self.tabBar().sizeHint().toTuple(), corners,
                self.currentIndex(), self.count())

    def event(self, event) -> bool:
        from PySide6.QtCore import QEvent

        if event.type() == QEvent.LayoutRequest:
            key = self._layout_key()
            if key == self._placed:
                self.updateGeometry()
                return True
            self._placed = key
        return super().event(event)

    def resizeEvent(self, event) -> None:  # noqa: N802 - Qt override
        self._placed = None
        super().resizeEvent(event)


class MainWindow(QMainWindow):
    """The Activation Workbench window.

    Parameters
    ----------
    settings : Settings, optional
        Where geometry, the last folder and recent files are kept.
    store_path : str, optional
        The sweep store (default: the core's default store).
    """

    #: a table finished loading (its path)
    tableLoaded = Signal(str)
    #: a table failed to load (the loader's one-line message)
    loadFailed = Signal(str)
    #: the target summary for the current target is shown
    targetReady = Signal(str)
    #: no target could be analysed: the InputError that says why (a target that names no
    #: column, a table with no clear target, a column that cannot be a target)
    targetFailed = Signal(object)
    #: a sweep ended: {"state": "finished" | "cancelled" | "failed", "sweep_id", "message"}
    sweepEnded = Signal(dict)
    #: an export finished (its folder) or failed (message)
    exportDone = Signal(str)
    exportFailed = Signal(str)
    #: progress of an export (message, fraction); emitted from the export's thread
    exportProgress = Signal(str, float)
    #: a stored sweep's results are shown (its id), after History's "Show results"
    resultsShown = Signal(str)
    #: the shown results were judged again with a new region of practical equivalence
    judged = Signal()

    def __init__(self, settings: Settings | None = None, store_path: str | None = None,
                 theme_choice: str | None = None):
        super().__init__()
        self.settings = settings or Settings()
        self.store_path = store_path
        self.table: core.LoadedTable | None = None
        self.summary: core.TargetSummary | None = None
        self.sweep_id: str | None = None
        self.results_meta: dict = {}
        self._natural: dict[str, int] = {}  # results columns' widths fitted to contents
        self._sweep: SweepThread | None = None
        self._load_generation = 0
        self._target_generation = 0
        self._progress = {"done": 0, "total": 0, "best": None, "t0": None, "running": 0}
        self._close_after_stop = False
        self._plots_then = None
        # the time estimate: the core's calibration on the current table (made in the
        # background, a short while after the plan last changed) and the workers' start-up
        self._calibration = None
        self._calibrating = False
        self._startup: float | None = None
        self._busy = 0.0
        self._last_sweep: tuple[int, float] | None = None  # (trials run, seconds) here
        self._calibrate_timer = QTimer(self)
        self._calibrate_timer.setSingleShot(True)
        self._calibrate_timer.setInterval(CALIBRATE_DELAY_MS)
        self._calibrate_timer.timeout.connect(self._calibrate)
        self._plan_ok = False
        self._plan_message = ""  # the banner's message about a plan that could not run
        self._theme_choice = theme_choice or self.settings.theme()
        self.theme = th.resolve(self._theme_choice)

        self.setWindowTitle("Activation Workbench")
        self.setWindowIcon(th.icon("app", "#000000"))
        self.setAcceptDrops(True)
        self._build_actions()
        self._build_ui()
        self._build_menus()
        self.apply_theme(self._theme_choice)
        self._restore_geometry()
        self._tick = QTimer(self)
        self._tick.setInterval(500)
        self._tick.timeout.connect(self._update_progress_text)
        # a running sweep's rankings, shown at most every RANKED_INTERVAL_MS
        self._pending_ranked = None
        self._last_ranked = 0.0
        self._ranked_timer = QTimer(self)
        self._ranked_timer.setSingleShot(True)
        self._ranked_timer.timeout.connect(self._apply_ranked)
        self._update_actions()
        self._update_estimate()
        self.exportProgress.connect(self._export_progress)
        hints = QApplication.styleHints()
        if hasattr(hints, "colorSchemeChanged"):
            hints.colorSchemeChanged.connect(self._system_scheme_changed)
        # the sweep's own modules, imported in the background once the window is up: first
        # imported by the sweep's thread when Run is pressed, they held the interpreter
        # (and the window's event loop) for hundreds of milliseconds as the sweep started
        QTimer.singleShot(WARM_UP_DELAY_MS, self._warm_up)

    @staticmethod
    def _warm_up() -> None:
        import importlib

        def job():
            for name in SWEEP_MODULES:
                importlib.import_module(name)

        # the modules' objects left out of the collector's later passes (gui.heap)
        run_task(job, lambda _result: heap.freeze(), lambda _msg: None)

    def _system_scheme_changed(self, *_):
        if self._theme_choice == "system":
            self.apply_theme("system")

    def _export_progress(self, message: str, fraction: float) -> None:
        self.status.showMessage(f"Exporting: {message} ({100 * fraction:.0f} %)")

    def _calibrate(self) -> None:
        """Time the current plan's configurations on its table, in the background."""
        plan, _ = self._plan()
        if plan is None or self.sweep_running() or self.setup.choices().get("cluster"):
            return
        if self._calibrating:
            self._calibrate_timer.start()  # again once the running one has landed
            return
        from workbench.gui.bridge import calibrate_in_process
        from workbench.gui.core_adapter import busy_cores, startup_seconds

        self._calibrating = True
        previous, known_startup = self._calibration, self._startup

        def job():  # off the GUI thread: touches no Qt object (the window may close)
            busy = busy_cores()  # before our own calibration adds to it
            cal = calibrate_in_process(plan, previous)
            return cal, (startup_seconds() if known_startup is None else known_startup), busy

        def done(result):
            if not shiboken6.isValid(self.setup):
                return  # the window closed meanwhile
            self._calibrating = False
            self._calibration, self._startup, self._busy = result
            self._update_estimate()

        def failed(msg):
            if shiboken6.isValid(self.setup):
                self._calibrating = False

        run_task(job, done, failed)

    # ================================================================== building
    def _build_actions(self) -> None:
        def act(text, shortcut, slot, tip, icon=None):
            a = QAction(text, self)
            if shortcut is not None:
                a.setShortcuts(shortcut if isinstance(shortcut, list) else [shortcut])
            a.setToolTip(tip)
            a.setStatusTip(tip)
            a.triggered.connect(slot)
            a._icon_name = icon
            self.addAction(a)
            return a

        self.open_action = act("&Open table…", QKeySequence.Open, self.choose_file,
                               "Open a table (Ctrl+O)", "open")
        self.run_action = act("&Run sweep", [QKeySequence("Ctrl+R"), QKeySequence("F5")],
                              self.run_sweep, "Run the sweep (Ctrl+R)", "run")
        self.stop_action = act("&Stop", [QKeySequence("Ctrl+."), QKeySequence("Shift+F5")],
                               self.stop_sweep, "Stop the sweep; finished trials stay (Ctrl+.)",
                               "stop")
        self.export_action = act("&Export…", QKeySequence("Ctrl+E"), self.show_export_dialog,
                                 "Export the recommended configuration, or another (Ctrl+E)", "export")
        self.cross_check_action = act(
            "&Cross-check on scikit-learn…", QKeySequence("Ctrl+K"), self.show_cross_check_dialog,
            "Refit a configuration on scikit-learn's own MLP and compare the scores fold by "
            "fold (Ctrl+K)")
        self.history_action = act("&History…", QKeySequence("Ctrl+H"), self.show_history,
                                  "Reopen or resume an earlier sweep (Ctrl+H)", "history")
        self.quit_action = act("&Quit", QKeySequence.Quit, self.close, "Quit (Ctrl+Q)")
        self.theme_actions = {}
        for name, label in (("system", "Follow the system"), ("light", "Light"),
                            ("dark", "Dark")):
            a = QAction(label, self, checkable=True)
            a.triggered.connect(lambda *_, n=name: self.apply_theme(n))
            self.theme_actions[name] = a

    def _build_menus(self) -> None:
        mb = self.menuBar()
        m = mb.addMenu("&File")
        m.addAction(self.open_action)
        self.recent_menu = m.addMenu("Open &recent")
        self.recent_menu.aboutToShow.connect(self._fill_recent_menu)
        m.addSeparator()
        m.addAction(self.export_action)
        m.addSeparator()
        m.addAction(self.quit_action)
        m = mb.addMenu("&Sweep")
        m.addAction(self.run_action)
        m.addAction(self.stop_action)
        m.addSeparator()
        m.addAction(self.cross_check_action)
        m.addAction(self.history_action)
        m = mb.addMenu("&View")
        tm = m.addMenu("&Theme")
        for a in self.theme_actions.values():
            tm.addAction(a)
        m = mb.addMenu("&Help")
        m.addAction("&Keyboard shortcuts", self.show_shortcuts)
        m.addAction("&About Activation Workbench", self.show_about)

        tb = self.addToolBar("Main")
        tb.setObjectName("mainToolbar")
        tb.setMovable(False)
        tb.setIconSize(QSize(20, 20))
        tb.setToolButtonStyle(Qt.ToolButtonTextBesideIcon)
        for a in (self.open_action, self.run_action, self.stop_action, self.export_action,
                  self.history_action):
            tb.addAction(a)
        self.toolbar = tb

    def _build_ui(self) -> None:
        root = QSplitter(Qt.Horizontal)
        root.setChildrenCollapsible(False)
        root.setHandleWidth(6)

        # left: set-up column in a scroll area
        self.setup = SetupPane()
        scroll = QScrollArea()
        scroll.setObjectName("setupScroll")
        scroll.setWidgetResizable(True)
        scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        scroll.setWidget(self.setup)
        left = QWidget()
        left.setMinimumWidth(280)
        left.setMaximumWidth(460)
        ll = QVBoxLayout(left)
        ll.setContentsMargins(0, 0, 0, 0)
        ll.setSpacing(0)
        ll.addWidget(scroll, 1)
        ll.addWidget(self.setup.footer)
        root.addWidget(left)
        # the learning rates default to the core's tune grid: an equal budget per candidate
        self.setup.lr_edit.setText(" ".join(DEFAULTS["learning_rates"]))
        self.setup.lr_edit.setToolTip(core.learning_rate_tooltip())
        self.setup.targetChosen.connect(self.set_target)
        self.setup.kindChosen.connect(self._kind_chosen)
        self.setup.planChanged.connect(self._update_estimate)
        self.setup.runRequested.connect(self.run_sweep)

        # right: banner, progress strip, tabs
        right = QWidget()
        rl = QVBoxLayout(right)
        rl.setContentsMargins(4, 8, 8, 8)
        rl.setSpacing(6)
        self.banner = Banner()
        rl.addWidget(self.banner)

        # the progress line shares the row of the tabs (beside "Data" and "Results"), so
        # the results keep the window's height; its whole text is its tooltip
        strip = QFrame()
        strip.setObjectName("progressStrip")
        sl = QHBoxLayout(strip)
        sl.setContentsMargins(12, 0, 2, 0)
        sl.setSpacing(8)
        self.progress = QProgressBar()
        self.progress.setRange(0, 1)
        self.progress.setValue(0)
        self.progress.setTextVisible(False)
        self.progress.setFixedWidth(150)
        self.progress.hide()
        self.progress_label = ElidedLabel("")
        self.progress_label.setText("No sweep yet: load a table, tick what to sweep, then "
                                    "Run sweep (Ctrl+R).")
        self.progress_label.setObjectName("muted")
        sl.addWidget(self.progress, 0)
        sl.addWidget(self.progress_label, 1)

        self.tabs = SteadyTabWidget()
        self.tabs.setDocumentMode(False)
        self.tabs.setCornerWidget(strip, Qt.TopRightCorner)
        rl.addWidget(self.tabs, 1)

        # data tab
        data = QSplitter(Qt.Vertical)
        self.frame_model = FrameModel(self)
        self.preview = QTableView()
        self.preview.setModel(self.frame_model)
        self.preview.setAlternatingRowColors(True)
        self.preview.verticalHeader().setDefaultSectionSize(22)
        self.preview.horizontalHeader().setDefaultSectionSize(110)
        # fit columns to the first rows only: measuring all 200 took a second on wide tables
        self.preview.horizontalHeader().setResizeContentsPrecision(25)
        self.profile_model = ProfileModel(self)
        self.profile_model.roleChanged.connect(self._role_changed)
        self.profile_view = QTableView()
        self.profile_view.setModel(self.profile_model)
        self.profile_view.setItemDelegateForColumn(4, RoleDelegate(self.profile_view))
        self.profile_view.setEditTriggers(QAbstractItemView.AllEditTriggers)
        self.profile_view.verticalHeader().hide()
        self.profile_view.verticalHeader().setDefaultSectionSize(22)
        ph = self.profile_view.horizontalHeader()
        ph.setSectionResizeMode(QHeaderView.ResizeToContents)
        ph.setStretchLastSection(True)
        self.profile_view.setAlternatingRowColors(True)
        data.addWidget(self._titled("First rows", self.preview))
        data.addWidget(self._titled(
            "Column profile (double-click a role to change it)", self.profile_view))
        self.tabs.addTab(data, "Data")

        # results tab: the verdict, the filter bar, the ranked table, and below it the
        # curves and health, what matters, and each candidate at its best settings
        res = QWidget()
        res.setObjectName("resultsTab")
        rv = QVBoxLayout(res)
        rv.setContentsMargins(6, 6, 6, 6)
        rv.setSpacing(4)
        self.verdict = VerdictStrip()
        rv.addWidget(self.verdict)
        bar = QHBoxLayout()
        self.head_filter = QComboBox()
        self.head_filter.addItem("all heads", "")
        self.head_filter.setToolTip("Show only the configurations with this output head")
        self.hidden_filter = QComboBox()
        self.hidden_filter.addItem("all hidden", "")
        self.hidden_filter.setToolTip("Show only the configurations with this hidden activation")
        for combo in (self.head_filter, self.hidden_filter):
            combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
            combo.setMinimumContentsLength(5)
        self.text_filter = QLineEdit()
        self.text_filter.setPlaceholderText("filter…")
        self.text_filter.setClearButtonEnabled(True)
        self.tied_filter = QCheckBox("tie group only")
        for w in (self.head_filter, self.hidden_filter):
            w.currentIndexChanged.connect(self._apply_filters)
        self.text_filter.textChanged.connect(self._apply_filters)
        self.tied_filter.toggled.connect(self._apply_filters)
        bar.addWidget(self.head_filter)
        bar.addWidget(self.hidden_filter)
        bar.addWidget(self.text_filter, 1)
        bar.addWidget(self.tied_filter)
        rope_label = QLabel(ROPE_LABEL)
        rope_label.setToolTip(ROPE_TIP)
        self.rope_edit = QLineEdit()
        self.rope_edit.setObjectName("ropeEdit")
        self.rope_edit.setToolTip(ROPE_TIP)
        self.rope_edit.setClearButtonEnabled(True)
        self.rope_edit.setMaximumWidth(130)
        self.rope_edit.setMinimumWidth(60)
        self.rope_edit.setPlaceholderText("default")
        self.rope_edit.editingFinished.connect(self._rope_changed)
        rope_label.setBuddy(self.rope_edit)
        self._rope: float | None = None
        self.results_note = WrappingLabel("")
        self.results_note.setObjectName("muted")
        self.selection_note = WrappingLabel("")
        self.selection_note.setObjectName("selectionNote")
        self.selection_note.setTextInteractionFlags(Qt.TextSelectableByMouse)
        # in a box of fixed height (two lines, more only when the text needs it): a label's
        # new text asks its parent's layout again, and from the note that re-laid out the
        # table, the verdict and the plots and repainted the whole window on every click;
        # a widget of fixed size does not ask its parent
        # (and the note is placed in the box by hand: a layout in the box would still ask
        # the box's parent again after each text)
        self.selection_box = QWidget()
        self.selection_note.setParent(self.selection_box)
        self.selection_box.installEventFilter(self)
        rv.addLayout(bar)

        self.results_model = ResultsModel(self)
        self.proxy = ResultsProxy(self)
        self.proxy.setSourceModel(self.results_model)
        self.results_view = QTableView()
        self.results_view.setModel(self.proxy)
        self.results_view.setSortingEnabled(True)
        self.results_view.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.results_view.setSelectionMode(QAbstractItemView.ExtendedSelection)
        self.results_view.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.results_view.verticalHeader().hide()
        self.results_view.verticalHeader().setDefaultSectionSize(21)
        self.results_view.setWordWrap(False)
        self.results_view.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.results_view.setTextElideMode(Qt.ElideRight)
        hh = self.results_view.horizontalHeader()
        hh.setSectionResizeMode(QHeaderView.Interactive)
        hh.setStretchLastSection(True)
        hh.setMinimumSectionSize(24)
        hh.setTextElideMode(Qt.ElideRight)
        # columns are fitted to their first rows only: measuring every row of a large sweep
        # held the event loop for tens of milliseconds
        hh.setResizeContentsPrecision(40)
        for i, k in enumerate(COLUMN_KEYS):
            hh.resizeSection(i, COLUMN_WIDTHS.get(k, 60))
        hh.setSortIndicator(0, Qt.AscendingOrder)
        hh.sortIndicatorChanged.connect(lambda *_: self._fit_columns())
        self.results_view.selectionModel().selectionChanged.connect(self._selection_changed)
        self.results_view.setContextMenuPolicy(Qt.ActionsContextMenu)
        self.results_view.addAction(self.export_action)
        self.results_view.addAction(self.cross_check_action)
        self.results_view.viewport().installEventFilter(self)
        self.results_model.rowsUpdated.connect(self._rows_updated)

        self.plot_area = plots = PlotArea(
            lambda indices: core.calibration_points(self.store_path, self.sweep_id, indices))
        self.curves, self.spread, self.health = plots.curves, plots.spread, plots.health
        self.factors_chart = FactorsChart()
        self.candidates = CandidatesView()
        self.candidates.configurationChosen.connect(self.select_configuration)
        self.detail_tabs = QTabWidget()
        self.detail_tabs.setObjectName("detailTabs")
        # each page in a scroll area: the pages keep their least height and scroll when the
        # verdict (never cut short) leaves them little room
        self.detail_tabs.addTab(self._scrolling(plots), "Curves and health")
        self.detail_tabs.addTab(plots.calibration_page, "Calibration")
        self.detail_tabs.addTab(plots.diagnosis, "Diagnosis")
        plots.watch_tabs(self.detail_tabs)
        self.detail_tabs.addTab(self._scrolling(self.factors_chart), "What matters")
        self.detail_tabs.addTab(self._scrolling(self.candidates), "Candidates")
        self.detail_tabs.setMinimumHeight(DETAIL_MIN_HEIGHT)
        vs = QSplitter(Qt.Vertical)
        vs.setChildrenCollapsible(False)
        tablebox = QWidget()
        tl = QVBoxLayout(tablebox)
        tl.setContentsMargins(0, 0, 0, 0)
        tl.setSpacing(2)
        tl.addWidget(self.results_view, 1)
        legend = QHBoxLayout()  # the legend, and beside it the ROPE it is judged with
        legend.setContentsMargins(0, 0, 0, 0)
        legend.addWidget(self.results_note, 1)
        legend.addWidget(rope_label, 0, Qt.AlignTop)
        legend.addWidget(self.rope_edit, 0, Qt.AlignTop)
        tl.addLayout(legend)
        tl.addWidget(self.selection_box)
        self.results_view.setMinimumHeight(TABLE_MIN_HEIGHT)
        vs.addWidget(tablebox)
        vs.addWidget(self.detail_tabs)
        vs.setStretchFactor(0, 1)
        vs.setStretchFactor(1, 1)
        vs.setSizes([250, 300])  # the plots below get the room their axis titles need
        rv.addWidget(vs, 1)
        self.results_split = vs
        self.tabs.addTab(res, "Results")

        root.addWidget(right)
        root.setStretchFactor(0, 0)
        root.setStretchFactor(1, 1)
        root.setSizes([370, 910])
        self.setCentralWidget(root)
        self.status = self.statusBar()
        self.status.showMessage("Ready. Drop a table onto the window to begin.")

    @staticmethod
    def _scrolling(widget: QWidget) -> QScrollArea:
        area = QScrollArea()
        area.setWidgetResizable(True)
        area.setFrameShape(QFrame.NoFrame)
        area.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        area.setWidget(widget)
        return area

    @staticmethod
    def _titled(title: str, widget: QWidget) -> QWidget:
        w = QWidget()
        lay = QVBoxLayout(w)
        lay.setContentsMargins(6, 6, 6, 2)
        lay.setSpacing(2)
        lab = QLabel(title)
        lab.setObjectName("plotTitle")
        lay.addWidget(lab)
        lay.addWidget(widget, 1)
        return w

    # ================================================================== look
    def apply_theme(self, choice: str) -> None:
        self._theme_choice = choice
        self.theme = th.resolve(choice)
        app = QApplication.instance()
        if app is not None:
            th.apply(app, self.theme)
        for name, a in self.theme_actions.items():
            a.setChecked(name == choice)
        icon_color = self.theme.text
        for a in (self.open_action, self.run_action, self.stop_action, self.export_action,
                  self.history_action):
            a.setIcon(th.icon(a._icon_name, icon_color))
        self.banner.icon.setPixmap(th.icon("warning", self.theme.warn).pixmap(18, 18))
        self.banner.close_btn.setIcon(th.icon("close", self.theme.banner_text))
        from PySide6.QtGui import QColor

        t = self.theme
        self.results_model.set_colors({"best": QColor(t.best), "equivalent": QColor(t.equivalent)},
                                      QColor(t.reference), QColor(t.muted))
        self.plot_area.set_theme(self.theme)
        self.factors_chart.set_theme(self.theme)
        self.settings.set_theme(choice)

    # ================================================================== settings
    def _restore_geometry(self) -> None:
        g = self.settings.geometry()
        if g is not None:
            self.restoreGeometry(g)
        else:
            self.resize(1280, 800)

    def _save_settings(self) -> None:
        self.settings.set_geometry(self.saveGeometry())
        self.settings.sync()

    def _fill_recent_menu(self) -> None:
        self.recent_menu.clear()
        files = self.settings.recent_files()
        if not files:
            a = self.recent_menu.addAction("(no recent files)")
            a.setEnabled(False)
            return
        for i, path in enumerate(files, start=1):
            a = self.recent_menu.addAction(f"&{i} {Path(path).name}")
            a.setToolTip(path)
            a.triggered.connect(lambda *_, p=path: self.open_path(p))
        self.recent_menu.addSeparator()
        self.recent_menu.addAction("Clear list", self.settings.clear_recent_files)

    # ================================================================== messages
    def show_message(self, text: str) -> None:
        """Show a one-line message in the banner above the work area."""
        self.banner.show_message(text)
        self.status.showMessage(text, 8000)

    def message_text(self) -> str:
        return self.banner.label.text() if not self.banner.isHidden() else ""

    # ================================================================== opening
    def choose_file(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Open a table", self.settings.last_folder(),
                                              TABLE_FILTER)
        if path:
            self.open_path(path)

    def dragEnterEvent(self, event) -> None:
        md = event.mimeData()
        files = [u for u in md.urls() if u.isLocalFile()] if md.hasUrls() else []
        if files:
            event.acceptProposedAction()
            self.status.showMessage(f"Drop to open {Path(files[0].toLocalFile()).name}", 3000)
        else:
            event.ignore()

    def dragMoveEvent(self, event) -> None:
        if event.mimeData().hasUrls():
            event.acceptProposedAction()

    def dropEvent(self, event) -> None:
        urls = [u for u in event.mimeData().urls() if u.isLocalFile()]
        if not urls:
            event.ignore()
            return
        event.acceptProposedAction()
        if len(urls) > 1:
            self.status.showMessage(f"{len(urls)} files dropped; opening the first, "
                                    f"{Path(urls[0].toLocalFile()).name}.", 6000)
        self.open_path(urls[0].toLocalFile())

    def open_path(self, path: str, target: str | None = None) -> None:
        """Load a table in the background; keep the current one if it fails."""
        self._load_generation += 1
        gen = self._load_generation
        self.status.showMessage(f"Loading {Path(path).name}…")

        def done(table):
            if gen == self._load_generation:
                self._table_loaded(table, target)

        def failed(msg):
            if gen == self._load_generation:
                self.show_message(msg)
                self.loadFailed.emit(msg)

        run_task(lambda: core.load(path), done, failed)

    def _table_loaded(self, table: core.LoadedTable, target: str | None) -> None:
        self.banner.hide_message()
        self.table = table
        self.summary = None
        self.setup.set_target_summary(None)
        self.settings.add_recent_file(table.path)
        self.settings.set_last_folder(str(Path(table.path).resolve().parent))
        self.frame_model.set_frame(table.df)
        self.preview.resizeColumnsToContents()
        hh = self.preview.horizontalHeader()
        for i in range(self.frame_model.columnCount()):
            hh.resizeSection(i, min(max(hh.sectionSize(i), 60), 220))
        self.profile_model.set_columns(table.columns)
        self.setup.set_table(table, target)
        self.setWindowTitle(f"{table.name} – Activation Workbench")
        self.tabs.setCurrentIndex(0)
        self.status.showMessage(
            f"Loaded {table.name}: {table.report.rows:,} rows, {table.report.columns} columns "
            f"in {getattr(table.report, 'seconds', 0.0):.2f} s.", 6000)
        self.tableLoaded.emit(table.path)
        if target is not None:
            try:
                core.check_target(table, target)
            except core.InputError as exc:  # refused as on the command line: no sweep
                self.profile_model.set_target("")
                self.setup.ask_for_target(phrase(exc))
                self.show_message(phrase(exc))
                self._update_estimate()
                self.targetFailed.emit(exc)
                return
        if not self.setup.target():  # no column is clearly the target: ask
            self.setup.ask_for_target(core.suggestion_text(table))
            self._update_estimate()
            self.targetFailed.emit(core.no_target_error(table))
            return
        self.set_target(self.setup.target())

    def _kind_chosen(self, kind: str | None) -> None:
        """The user set the target kind (None: the detected one): analyse the target again."""
        if self.summary is not None:
            self.set_target(self.summary.target.name, kind)

    def set_target(self, name: str, kind: str | None = None) -> None:
        """Analyse ``name`` as the target (in the background) and show its kind and advice.

        ``kind`` is a target kind set by the user (None: the detected kind). A kind the
        values cannot have is refused with the core's message, and the target keeps the
        kind it had.
        """
        if self.table is None or not name:
            return
        if self.setup.target() != name:
            self.setup.target_combo.blockSignals(True)
            self.setup.target_combo.setCurrentText(name)
            self.setup.target_combo.blockSignals(False)
        self.setup.set_attention(False)
        self.profile_model.set_target(name)
        self._target_generation += 1
        gen = self._target_generation
        df = self.table.df
        previous = self.summary if (self.summary is not None
                                    and self.summary.target.name == name) else None

        def done(result):
            if gen != self._target_generation:
                return
            if isinstance(result, core.InputError):
                self.show_message(phrase(result))
                if result.setting == "kind" and previous is not None:
                    self.setup.set_target_summary(previous)  # the “Kind” box goes back
                    return
                failed_with(result)
                return
            self.summary = result
            self.setup.set_target_summary(result)
            self._update_estimate()
            self._update_actions()
            heap.freeze()  # the table's objects too (gui.heap)
            self.targetReady.emit(name)

        def failed_with(exc):
            self.summary = None
            self.setup.set_target_summary(None)
            self._update_estimate()
            self._update_actions()
            self.targetFailed.emit(exc)

        def failed(msg):  # an unexpected problem (the core's InputError comes back in done)
            if gen != self._target_generation:
                return
            self.show_message(msg)
            failed_with(core.InputError(msg))

        run_task(lambda: core.summarise_or_refuse(df, name, kind), done, failed)

    def _role_changed(self, column: str, role: str, previous: str) -> None:
        """The user picked a role in the column profile: the core applies it or refuses it."""
        if role == "target":
            self.set_target(column)
        elif self.table is not None:
            try:
                rows = core.apply_roles(self.table, self.profile_model.roles(),
                                        self.setup.target())
            except core.InputError as exc:
                self.profile_model.set_role(column, previous)
                self.show_message(phrase(exc))
                return
            self.profile_model.refresh(rows)
        self._update_estimate()

    # ================================================================== plan
    def _plan(self, quiet: bool = True):
        if self.table is None or self.summary is None:
            return None, "Load a table and pick a target first."
        try:
            plan = core.build_plan(self.table, self.summary, self.setup.choices(),
                                   self.profile_model.roles())
        except core.InputError as exc:
            return None, phrase(exc)
        return plan, ""

    def _update_estimate(self) -> None:
        self._show_rope_default()
        if self.sweep_running():
            return  # the set-up column is locked; the running plan's estimate stays
        plan, msg = self._plan()
        self._plan_ok = plan is not None
        if plan is None:
            self.setup.set_estimate(msg if self.table is None or self.summary is None
                                    else CANNOT_RUN + msg, False)
        else:
            # a message about an earlier plan the user has since fixed goes away
            if self._plan_message and self.message_text() == self._plan_message:
                self.banner.hide_message()
            self._plan_message = ""
            choices = self.setup.choices()
            est = core.estimate(plan, self._calibration, choices.get("jobs") or 1,
                                self._startup, self._busy)
            if est is None and not choices.get("cluster"):
                self._calibrate_timer.start()  # (re)started: calibrate once the user pauses
            text = core.plan_summary(plan, choices, est)
            last = self._last_sweep
            if last is not None and not choices.get("cluster"):
                # what the machine really did, beside the estimate
                text += (f"\nThe last sweep ran {last[0]} trials in "
                         f"{core.fmt_seconds(last[1])}.")
            self.setup.set_estimate(text, True)
        self._update_actions()

    # ================================================================== sweep
    def sweep_running(self) -> bool:
        return self._sweep is not None and self._sweep.running()

    def run_sweep(self) -> None:
        if self.sweep_running():
            return
        plan, msg = self._plan()
        if plan is None:
            self.show_message(msg)
            self._plan_message = msg
            return
        choices = self.setup.choices()
        session = core.StoreSession(self.store_path)

        def job(on_event, cancel):
            return core.run_plan(plan, choices, session, on_event, cancel)

        made = None if choices.get("cluster") else core.estimate(
            plan, self._calibration, choices.get("jobs") or 1, self._startup, self._busy)
        self._start(job, session, total=plan.n_trials,
                    estimate=made.seconds if made is not None else None)

    def resume_sweep(self, sweep_id: str) -> None:
        if self.sweep_running():
            return
        session = core.StoreSession(self.store_path)
        jobs = self.setup.choices()["jobs"]

        def job(on_event, cancel):
            return core.resume(sweep_id, session, jobs, on_event, cancel)

        self.sweep_id = sweep_id
        self._start(job, session, total=0, keep_rows=True)

    def _start(self, job, session, total: int, keep_rows: bool = False,
               estimate: float | None = None) -> None:
        self.banner.hide_message()
        self._ranked_timer.stop()
        self._pending_ranked = None
        if not keep_rows:
            self.results_model.clear()
            self.results_meta = {}
            self._show_judgement({})
            self._plot_selection([])
        from workbench.gui.bridge import rank_in_process

        store_path = self.store_path
        # ranked in a process of its own (the window's event loop never waits behind it)
        self._sweep = SweepThread(job, ranker=lambda sid: rank_in_process(store_path, sid,
                                                                          self._rope),
                                  parent=self, cleanup=session.close)
        b = self._sweep.bridge
        b.sweepStarted.connect(self._on_sweep_started)
        b.trialFinished.connect(self._on_trial_finished)
        b.trialStarted.connect(self._on_trial_started)
        b.ranked.connect(self._ranked_later)
        self._sweep.finished.connect(self._on_sweep_done)
        choices = self.setup.choices()
        self._progress = {"done": 0, "total": total, "best": None, "t0": time.monotonic(),
                          "workers": int(choices.get("jobs") or 1), "estimate": estimate,
                          "running": 0, "stored": 0}
        self.progress.setRange(0, max(1, total))
        self.progress.setValue(0)
        self.progress.show()
        # the results page at once: shown a turn later, the data page under it (its
        # preview and profile tables, their cells from Python) was painted first, for
        # nothing (measured: 65-114 ms of the event loop's CPU)
        self.tabs.setCurrentIndex(1)
        self._tick.start()
        # what the window holds now, left out of the collector's passes during the sweep:
        # a full pass over it held the event loop ~140 ms (gui.heap)
        heap.freeze()
        self._sweep.start()
        self._update_actions()
        self._update_progress_text()

    def stop_sweep(self) -> None:
        if self.sweep_running():
            self._sweep.stop()
            self.progress_label.setText("Stopping… finished trials are kept.")
            self.stop_action.setEnabled(False)

    def _on_sweep_started(self, ev: dict) -> None:
        self.sweep_id = ev.get("sweep_id", self.sweep_id)
        total = int(ev.get("n_trials") or self._progress["total"] or 0)
        stored = int(ev.get("n_stored") or 0)
        self._progress.update(total=total, done=stored, stored=stored)
        if ev.get("metric"):
            self.results_meta.setdefault("metric", ev["metric"])
        self.progress.setRange(0, max(1, total))
        self.progress.setValue(stored)

    def _on_trial_started(self, ev: dict) -> None:
        self._progress["running"] += 1

    def _on_trial_finished(self, ev: dict) -> None:
        p = self._progress
        if ev.get("n_finished") is not None:
            p["done"] = p.get("stored", 0) + int(ev["n_finished"])
        else:
            p["done"] += 1
        p["running"] = max(0, p["running"] - 1)
        if ev.get("best_mean") is not None:
            p["best"] = ev["best_mean"]
            p["best_label"] = ev.get("best_label") or ""
        self.progress.setValue(min(p["done"], self.progress.maximum()))

    def _update_progress_text(self) -> None:
        p = self._progress
        if p["t0"] is None:
            return
        elapsed = time.monotonic() - p["t0"]
        parts = [f"{p['done']} / {p['total']} trials", f"elapsed {core.fmt_seconds(elapsed)}"]
        remaining = p["total"] - p["done"]
        new = p["done"] - p.get("stored", 0)
        if self.sweep_running() and remaining > 0:
            # the finished trials' pace once enough have finished to mean something (every
            # worker's second trial); before that the estimate timed on the table, if any
            if new >= 2 * max(1, p.get("workers", 1)):
                parts.append(f"about {core.fmt_seconds(elapsed / new * remaining)} left")
            elif p.get("estimate") is not None:
                parts.append(f"about {core.fmt_seconds(max(0.0, p['estimate'] - elapsed))} "
                             "left (estimated)")
        if p["best"] is not None:
            metric = self.results_meta.get("metric", "")
            label = p.get("best_label") or ""
            parts.append(f"best so far {p['best']:.4f} {metric}".rstrip()
                         + (f" ({label})" if label and self.sweep_running() else ""))
        if not self.sweep_running():
            self._tick.stop()
        self.progress_label.setText(" · ".join(parts))

    def _ranked_later(self, payload) -> None:
        """A running sweep's ranking: shown now, or, when the last was shown less than
        RANKED_INTERVAL_MS ago, then (a newer one arriving meanwhile replaces it)."""
        self._pending_ranked = payload
        if not self._ranked_timer.isActive():
            since = int((time.monotonic() - self._last_ranked) * 1000)
            self._ranked_timer.start(max(0, RANKED_INTERVAL_MS - since))

    def _apply_ranked(self) -> None:
        self._ranked_timer.stop()
        payload, self._pending_ranked = self._pending_ranked, None
        if payload is not None:
            self._last_ranked = time.monotonic()
            self._on_ranked(payload)

    def _on_ranked(self, payload) -> None:
        if not payload:
            return
        self.results_meta = payload.get("meta", {})
        self.sweep_id = self.results_meta.get("sweep_id", self.sweep_id)
        rows = payload.get("rows", [])
        best = next((r for r in rows if r.get("rank") == 1), None)
        if best is not None and best.get("mean") is not None:
            self._progress["best"] = best["mean"]
        first = self.results_model.rowCount() == 0
        self.results_model.upsert(rows)
        self._refresh_filters(rows)
        if first and rows:
            self._fit_columns()
        if self.sweep_running():
            # during a sweep the verdict, what matters and the candidates follow on the
            # event loop's next turn: the table and they, updated and painted in one turn,
            # held the loop for 50-60 ms; each alone is painted in about half that
            after_paint(self, self._show_latest_judgement)
        else:
            self._show_judgement(self.results_meta)

    def _show_latest_judgement(self) -> None:
        if shiboken6.isValid(self.verdict):
            self._show_judgement(self.results_meta)

    def _show_judgement(self, meta: dict) -> None:
        """The verdict strip, what matters and the candidates for a results document."""
        self.verdict.set_results(meta)
        self.factors_chart.set_results(meta)
        self.candidates.set_results(meta)
        self._show_rope_default()
        self._rows_updated()

    def _show_rope_default(self) -> None:
        """The ROPE box's placeholder: the value the core uses when the box is empty."""
        meta = self.results_meta or {}
        rope = meta.get("rope")
        if rope is not None and self._rope is None:
            self.rope_edit.setPlaceholderText(f"default {rope:.4g}")
            self.rope_edit.setToolTip(f"{ROPE_TIP}\nNow: ±{rope:.4g} {meta.get('metric', '')} "
                                      f"({meta.get('rope_basis') or 'the default'}).")
        elif rope is None:
            metric = self.setup.metric_combo.currentText() or None
            self.rope_edit.setPlaceholderText(f"default {core.default_rope_text(metric)}"
                                              if metric else "default")
            self.rope_edit.setToolTip(ROPE_TIP)

    def _on_sweep_done(self, summary: dict) -> None:
        self._tick.stop()
        self._apply_ranked()  # the last ranking, if it is still waiting
        self.sweep_id = summary.get("sweep_id") or self.sweep_id
        state = summary.get("state")
        p = self._progress
        if state == "failed":
            self.show_message(summary.get("message") or "the sweep stopped with an error")
        elif state == "cancelled":
            self.status.showMessage(f"Stopped: {p['done']} trials finished and kept; "
                                    "resume it from History.", 10000)
        else:
            self.status.showMessage("Sweep finished.", 8000)
        self._update_progress_text()
        state_word = {"finished": "Finished", "cancelled": "Stopped", "failed": "Failed"}
        self.progress_label.setText(f"{state_word.get(state, state)} · "
                                    + self.progress_label.text())
        self._sweep = None
        if p.get("t0") is not None and state == "finished":
            self._last_sweep = (p["done"] - p.get("stored", 0), time.monotonic() - p["t0"])
        self._update_actions()
        self._update_estimate()
        # the rest on the event loop's next turn: the last ranking shown (above) and the
        # first row's plots drawn (below) in one go held the loop ~140 ms; sweepEnded still
        # comes after both
        after_paint(self, lambda: self._sweep_done_rest(summary))

    def _sweep_done_rest(self, summary: dict) -> None:
        """The end of a sweep, second part: columns fitted, the best row shown, then
        :attr:`sweepEnded`."""
        if not shiboken6.isValid(self.results_view):
            return
        self._fit_columns()
        if self.results_view.selectionModel().selectedRows() == [] \
                and self.proxy.rowCount() > 0 and not self.sweep_running():
            # the best row's plots one panel per turn (shown from their empty state, the
            # three laid out and painted in one turn held the loop 60-100 ms), then the end
            self._plots_then = lambda: self._sweep_ended(summary)
            self.select_rows([0])
            if self._plots_then is not None:  # (the selection drew nothing: no new rows)
                self._plots_then = None
                self._sweep_ended(summary)
        else:
            self._sweep_ended(summary)

    def _sweep_ended(self, summary: dict) -> None:
        if not shiboken6.isValid(self.results_view):
            return
        self.sweepEnded.emit(summary)
        if self._close_after_stop:
            self.close()

    # ================================================================== results
    def _rows_updated(self) -> None:
        meta = self.results_meta
        n = self.results_model.rowCount()
        if not n:
            self.results_note.setText("")
            self._set_selection_note("")
            return
        rows = [r for r in self.results_model.rows() if r.get("kind") != "baseline"]
        shared = []
        for key, label in (("learning_rate", "learning rate"), ("alpha", "L2")):
            vals = {r.get(key) for r in rows}
            if len(vals) == 1 and None not in vals:
                shared.append(f"{label} {next(iter(vals)):g}")
        every = _all_trials(rows)
        if every is not None:
            shared.append(f"{every}/{every} trials")
        note = self._note_text(rows, shared, meta)
        if self.results_note.text() != note:  # (a new text re-lays out the results)
            self.results_note.setText(note)
        # redraw the plots only when a selected configuration changed
        selected = {r["key"] for r in self.selected_rows()}
        if selected & self.results_model.last_changed:
            self._selection_changed()
        else:
            self._show_selection_note()

    @staticmethod
    def _note_text(rows, shared, meta) -> str:
        """The legend under the table: what the marks mean, with this sweep's numbers (the
        rule behind them is in the Decision header's tooltip and the verdict's)."""
        tied = sum(1 for r in rows if r.get("tied_with_best") and r.get("rank") != 1)
        counts = {d: sum(1 for r in rows if r.get("decision") == d)
                  for d in ("equivalent", "undecided", "worse")}
        rope = meta.get("rope")
        within = f" ±{rope:.4g}" if rope is not None else ""
        note = (f"{len(rows)} configurations · against the best{within}: "
                f"{counts['equivalent']} ≈ equivalent, {counts['undecided']} ? undecided, "
                f"{counts['worse']} ▼ worse · {tied} “=” tied (alpha "
                f"{meta.get('significance_level', 0.05):g}) · ref: baselines"
                + (f" · all: {', '.join(shared)}" if shared else ""))
        return note

    def _show_selection_note(self) -> None:
        """One line on the first selected configuration: what the columns leave out."""
        sel = self.selected_rows()
        if not sel:
            self._set_selection_note("Select rows to compare their curves, fold scores and "
                                     "layer health below.")
            return
        r = sel[0]
        parts = [f"Selected: rank {r.get('rank') or '–'}, {r['hidden']} / {r['head']} "
                 f"[{r['layers']}]"]
        if r.get("decision"):
            text = DECISION_TEXT.get(r["decision"], r["decision"])
            if r.get("p_equivalent") is not None:
                text += (f" (P better {fmt_prob(r.get('p_better'))}, equivalent "
                         f"{fmt_prob(r.get('p_equivalent'))}, worse "
                         f"{fmt_prob(r.get('p_worse'))})")
            parts.append(text)
        if r.get("train_mean") is not None:
            parts.append(f"training score {r['train_mean']:.4f}"
                         + (" (underfit)" if r.get("underfit") else ""))
        parts.append(f"engine {r.get('engine')}")
        if r.get("status") not in ("done", None):
            parts.append(str(r["status"]) + (f": {r['message']}" if r.get("message") else ""))
        if len(sel) > 1:
            parts.append(f"{len(sel)} rows selected")
        self._set_selection_note(" · ".join(parts))

    def _set_selection_note(self, text: str) -> None:
        if self.selection_note.text() != text:
            self.selection_note.setText(text)
            self._fit_selection_box()

    def _fit_selection_box(self) -> None:
        """The note's box: two lines high, or the height the note needs at its width."""
        note = self.selection_note
        m = note.contentsMargins()
        width = self.selection_box.width()
        # two lines measured as the label measures its plain text
        two = note.fontMetrics().boundingRect(QRect(0, 0, max(width, 10), 10_000),
                                              int(Qt.TextWordWrap), "x\nx").height() \
            + m.top() + m.bottom()
        need = note.heightForWidth(width) if width > 0 and note.text() else 0
        height = max(two, need)
        if height != self.selection_box.minimumHeight() or \
                self.selection_box.minimumHeight() != self.selection_box.maximumHeight():
            self.selection_box.setFixedHeight(height)
        # the note fills its box (placed here, not by a layout: see _build_ui)
        box = self.selection_box.size()
        if note.size() != box:
            note.setGeometry(0, 0, box.width(), box.height())

    def eventFilter(self, obj, event) -> bool:  # noqa: N802 - Qt override
        from PySide6.QtCore import QEvent

        if obj is self.results_view.viewport() and event.type() == QEvent.Resize:
            self._squeeze_columns()
        elif obj is getattr(self, "selection_box", None) and event.type() in (QEvent.Resize,
                                                                               QEvent.Show):
            self._fit_selection_box()
        return super().eventFilter(obj, event)

    def _fit_columns(self) -> None:
        """Fit columns to their contents, then squeeze them into the view; hide learning
        rate / L2 when one value is shared (the note under the table names it)."""
        view = self.results_view
        rows = [r for r in self.results_model.rows() if r.get("kind") != "baseline"]
        for key in ("learning_rate", "alpha"):
            col = COLUMN_KEYS.index(key)
            view.setColumnHidden(col, len({r.get(key) for r in rows}) <= 1)
        view.setColumnHidden(COLUMN_KEYS.index("trials"), _all_trials(rows) is not None)
        hh = view.horizontalHeader()
        fm = hh.fontMetrics()
        widths = self._content_widths()
        for i, key in enumerate(COLUMN_KEYS):
            if view.isColumnHidden(i):
                continue
            content = max(widths[i], COLUMN_MIN.get(key, 34))
            # the header's text and padding (style sheet: 6 px each side), and the sort
            # arrow's room on the sorted column (refitted when the sort changes)
            header = fm.horizontalAdvance(self.results_model.headerData(i, Qt.Horizontal)) \
                + 16 + (16 if i == hh.sortIndicatorSection() else 0)
            natural = min(max(content, header), 180)
            self._natural[key] = (natural, min(content, natural))
        self._squeeze_columns()

    def _content_widths(self) -> list[int]:
        """Each shown column's widest cell among the first rows (as many as the header's
        resize precision), as the view's delegate measures it (``sizeHintForColumn``: the
        cell's own font, the style sheet's padding). The cells live in Qt's items, so this
        calls no Python: about 4 ms for every column. (A measure of our own, with the font
        metrics and a margin taken from one column, fell a few pixels short on numbers,
        and the squeezed learning rates read "0.00…".)"""
        view = self.results_view
        if self.proxy.rowCount() == 0:
            return [0] * len(COLUMN_KEYS)
        return [0 if view.isColumnHidden(i) else max(0, view.sizeHintForColumn(i))
                for i in range(len(COLUMN_KEYS))]

    def _squeeze_columns(self) -> None:
        """Every shown column inside the view. Headers wider than their cells give way
        first (they elide; each header's tooltip names it), then cells, down to the least
        widths of :data:`COLUMN_MIN` (elided cells keep their whole text in tooltips)."""
        view = self.results_view
        hh = view.horizontalHeader()
        shown = [k for i, k in enumerate(COLUMN_KEYS) if not view.isColumnHidden(i)]
        if not shown:
            return
        default = {k: (COLUMN_WIDTHS.get(k, 60), COLUMN_WIDTHS.get(k, 60)) for k in shown}
        width = {k: self._natural.get(k, default[k])[0] for k in shown}
        # (2 pixels to spare: the stretched last section keeps at least the size it had)
        excess = sum(width.values()) - (view.viewport().width() - 2)
        content = {k: self._natural.get(k, default[k])[1] for k in shown}
        least = {k: COLUMN_MIN.get(k, 34) for k in shown}
        # words give way before numbers: "softm…" still reads, "0.00…" does not
        words = {k: least[k] if k in TEXT_COLUMNS else content[k] for k in shown}
        for floor in (content, words, least):
            while excess > 0:  # a pixel at a time from the column with the most to give
                k = max(shown, key=lambda k: width[k] - floor[k])
                if width[k] <= floor[k]:
                    break
                width[k] -= 1
                excess -= 1
        hh.blockSignals(True)
        # the last section too: stretched to fill the view, it never gets narrower than the
        # size it was last given (measured: a Trials column kept 48 px and the table
        # scrolled by a pixel at 1160 px)
        for k in shown:
            hh.resizeSection(COLUMN_KEYS.index(k), width[k])
        hh.blockSignals(False)

    def _refresh_filters(self, rows) -> None:
        for combo, key in ((self.head_filter, "head"), (self.hidden_filter, "hidden")):
            have = {combo.itemData(i) for i in range(combo.count())}
            for r in rows:
                v = r.get(key)
                if v and v not in have:
                    combo.addItem(v, v)
                    have.add(v)

    def _apply_filters(self) -> None:
        self.proxy.set_filters(head=self.head_filter.currentData() or "",
                               hidden=self.hidden_filter.currentData() or "",
                               text=self.text_filter.text(),
                               tied_only=self.tied_filter.isChecked())

    def select_rows(self, proxy_rows: list[int]) -> None:
        """Select these rows of the table (one selection change: the plots draw once)."""
        sm = self.results_view.selectionModel()
        selection = QItemSelection()
        for r in proxy_rows:
            selection.select(self.proxy.index(r, 0), self.proxy.index(r, 0))
        sm.select(selection, QItemSelectionModel.ClearAndSelect | QItemSelectionModel.Rows)

    def selected_rows(self) -> list[dict]:
        sm = self.results_view.selectionModel()
        rows = sorted(i.row() for i in sm.selectedRows())
        return [self.proxy.row_at(r) for r in rows]

    def select_configuration(self, index: int) -> None:
        """Select the row of the configuration with grid index ``index`` (and show it)."""
        for r in range(self.proxy.rowCount()):
            if self.proxy.row_at(r).get("index") == index \
                    and self.proxy.row_at(r).get("kind") != "baseline":
                self.select_rows([r])
                self.results_view.scrollTo(self.proxy.index(r, 0))
                self.detail_tabs.setCurrentIndex(0)
                return
        self.status.showMessage("That configuration is hidden by the filters.", 5000)

    def _selection_changed(self, *args) -> None:
        self._plot_selection(self.selected_rows()[:MAX_PLOTTED])
        self._show_selection_note()

    def _plot_selection(self, rows: list[dict]) -> None:
        n_sel = len(self.results_view.selectionModel().selectedRows())
        if n_sel > MAX_PLOTTED:
            self.status.showMessage(f"{n_sel} rows selected; the plots show the first "
                                    f"{MAX_PLOTTED}.", 5000)
        # in rank order, numbered by rank (the plot area); at the end of a sweep one panel
        # per turn of the event loop, then the sweep's end (_sweep_done_rest)
        then, self._plots_then = self._plots_then, None
        self.plot_area.show_rows(rows, then=then)

    def show_shortcuts(self) -> None:
        rows = []
        for a in (self.open_action, self.run_action, self.stop_action, self.export_action,
                  self.cross_check_action, self.history_action, self.quit_action):
            keys = ", ".join(k.toString(QKeySequence.NativeText) for k in a.shortcuts())
            rows.append(f"<tr><td>{a.text().replace('&', '').rstrip('…')}</td>"
                        f"<td>&nbsp;&nbsp;<b>{keys}</b></td></tr>")
        QMessageBox.information(self, "Keyboard shortcuts", "<table>" + "".join(rows) + "</table>")

    def show_about(self) -> None:
        from workbench import __version__

        QMessageBox.about(
            self, "About Activation Workbench",
            f"<b>Activation Workbench {__version__}</b><p>Test hidden-layer and output-layer "
            "activation choices for small networks on your own table, under repeated "
            "cross-validation.</p><p>Scores are cross-validated estimates: check the winner "
            "on fresh data before it drives decisions.</p>")

    # ================================================================== export, history
    def recommended_row(self) -> dict | None:
        """The verdict's recommended configuration's row (None before any has finished)."""
        rec = ((self.results_meta or {}).get("verdict") or {}).get("recommended") or {}
        if rec.get("index") is None:
            return None
        return next((r for r in self.results_model.rows()
                     if r.get("kind") != "baseline" and r.get("index") == rec["index"]), None)

    def export_choices(self) -> list[tuple[str, dict]]:
        """What the export dialog offers, the default first: the recommended configuration,
        then the selected one and the best when they differ from it."""
        out = []
        seen = set()
        rec = self.recommended_row()
        reason = ((self.results_meta.get("verdict") or {}).get("recommended") or {}).get(
            "reason", "")
        best = next((r for r in self.results_model.rows() if r.get("rank") == 1), None)
        sel = [r for r in self.selected_rows() if r.get("kind") != "baseline"]
        for label, row in (("Recommended", rec), ("Selected", sel[0] if sel else None),
                           ("Best", best)):
            if row is None or row["key"] in seen:
                continue
            seen.add(row["key"])
            text = f"{label}: rank {row.get('rank') or '–'}, {row['hidden']} / {row['head']} " \
                   f"[{row['layers']}]"
            if label == "Recommended" and reason:
                text += f" ({reason})"
            out.append((text, row))
        return out

    def export_target_row(self) -> dict | None:
        """The configuration Export takes by default: the recommended one (else the best)."""
        choices = self.export_choices()
        return choices[0][1] if choices else None

    def show_export_dialog(self) -> None:
        from workbench.gui.dialogs import ExportDialog

        choices = self.export_choices()
        if self.sweep_id is None or not choices:
            self.show_message("Run or reopen a sweep first; then export its recommended "
                              "configuration.")
            return
        dlg = ExportDialog(self, choices[0][1], self.settings.last_folder(), choices=choices)
        if dlg.exec():
            self.export_configuration(dlg.row(), dlg.folder(), dlg.formats(),
                                      dlg.open_when_done())

    def export_configuration(self, row: dict, folder: str, formats: list[str],
                             open_folder: bool = False) -> None:
        """Export one configuration of the current sweep in the background."""
        sweep_id, store = self.sweep_id, self.store_path
        self.status.showMessage(f"Exporting rank {row.get('rank')} to {folder}…")

        def done(path):
            self.status.showMessage(f"Exported to {path}", 10000)
            if open_folder:
                QDesktopServices.openUrl(QUrl.fromLocalFile(str(path)))
            self.exportDone.emit(str(path))

        def failed(msg):
            self.show_message(msg)
            self.exportFailed.emit(msg)

        progress = self.exportProgress.emit
        run_task(lambda: core.export(store, sweep_id, row, folder, formats, progress),
                 done, failed)

    def show_cross_check_dialog(self) -> None:
        """Refit a configuration of the shown sweep on scikit-learn's MLP (the recommended
        one first, as Export offers them) and compare the scores fold by fold."""
        from workbench.gui.cross_check_dialog import CrossCheckDialog

        choices = self.export_choices()
        if self.sweep_id is None or not choices:
            self.show_message("Run or reopen a sweep first; then cross-check its recommended "
                              "configuration.")
            return
        plan = self.results_meta.get("plan") or {}
        dlg = CrossCheckDialog(self, self.store_path, self.sweep_id, choices,
                               plan.get("task", "classification"), plan.get("target_kind"))
        dlg.exec()

    def show_history(self) -> None:
        from workbench.gui.dialogs import HistoryDialog

        dlg = HistoryDialog(self, self.store_path)
        dlg.reopenRequested.connect(self.reopen_sweep)
        dlg.resumeRequested.connect(self.resume_sweep)
        dlg.exec()

    def reopen_sweep(self, sweep_id: str) -> None:
        """Show a stored sweep's results (read in the background)."""
        store = self.store_path

        def done(payload):
            self.results_model.clear()
            self.sweep_id = sweep_id
            self._on_ranked(payload)
            self._show_plan(payload["meta"].get("plan") or {})
            self.tabs.setCurrentIndex(1)
            self.progress_label.setText(
                f"Sweep {sweep_id}: {payload['meta'].get('state', '')}, "
                f"{payload['meta'].get('n_stored', 0)} of {payload['meta'].get('n_trials', 0)} "
                "trials stored")
            self._fit_columns()
            self._update_actions()
            if self.proxy.rowCount():
                self.select_rows([0])
            self.resultsShown.emit(sweep_id)

        rope = self._rope
        run_task(lambda: core.ranked_rows(store, sweep_id, rope), done, self.show_message)

    def _rope_changed(self) -> None:
        """The user set (or cleared) the ROPE: the core judges the shown sweep again."""
        try:
            rope = core.check_rope(self.rope_edit.text())
        except core.InputError as exc:
            self.show_message(phrase(exc))
            return
        if rope == self._rope:
            return
        self._rope = rope
        self.banner.hide_message()
        if self.sweep_id is None or self.sweep_running():
            return  # a running sweep's next ranking uses it
        store, sweep_id = self.store_path, self.sweep_id
        self.status.showMessage("Judging the results again…")

        def done(payload):
            if payload.get("meta", {}).get("sweep_id") == self.sweep_id:
                self._on_ranked(payload)
                self.status.showMessage(
                    f"Judged within ±{payload['meta'].get('rope', 0):.4g}.", 5000)
                self.judged.emit()

        run_task(lambda: core.ranked_rows(store, sweep_id, rope), done, self.show_message)

    def _show_plan(self, plan: dict) -> None:
        """Show a stored sweep's plan in the set-up column (loading its table if needed)."""
        table = plan.get("table")
        if not table:
            return
        same = self.table is not None and \
            Path(self.table.path).resolve() == Path(table).resolve()
        if same and self._summary_matches(plan):
            self.setup.apply_plan(plan)
            return
        if not same and not Path(table).is_file():
            self.show_message(f"the table of this sweep, {table}, is no longer there; its "
                              "results are shown, but it cannot be resumed from here")
            return

        def apply(_name=None, plan=plan):
            self.targetReady.disconnect(apply)
            self.setup.apply_plan(plan)

        def with_kind(_name=None, plan=plan):  # the table is shown: now the plan's kind
            self.targetReady.disconnect(with_kind)
            self.tabs.setCurrentIndex(1)  # loading showed the data; the results were asked for
            if self._summary_matches(plan):
                self.setup.apply_plan(plan)
                return
            self.targetReady.connect(apply)
            self.set_target(plan.get("target"), plan.get("kind"))

        if same:
            with_kind()
        else:
            self.targetReady.connect(with_kind)
            self.open_path(table, plan.get("target"))

    def _summary_matches(self, plan: dict) -> bool:
        """The shown target is the plan's, with the plan's kind (set by the user or not)."""
        s = self.summary
        if s is None or s.target.name != plan.get("target"):
            return False
        if plan.get("kind") is None:
            return not s.target.kind_set_by_user
        return s.target.kind_set_by_user and s.target.kind == plan["kind"]

    # ================================================================== state
    def _update_actions(self) -> None:
        running = self.sweep_running()
        # Run only for a plan the core accepts (the estimate shows why not)
        plan_ok = self.table is not None and self.summary is not None and self._plan_ok
        self.run_action.setEnabled(plan_ok and not running)
        self.setup.run_button.setEnabled(plan_ok and not running)
        # the set-up column (and the roles in the column profile) show the running plan
        self.setup.set_locked(running)
        self.profile_view.setEditTriggers(QAbstractItemView.NoEditTriggers if running
                                          else QAbstractItemView.AllEditTriggers)
        self.stop_action.setEnabled(running)
        self.export_action.setEnabled(not running and self.results_model.rowCount() > 0)
        self.cross_check_action.setEnabled(not running and self.results_model.rowCount() > 0)
        self.open_action.setEnabled(not running)

    def closeEvent(self, event) -> None:
        if self.sweep_running():
            if not self._close_after_stop:
                ans = QMessageBox.question(
                    self, "Stop the sweep?",
                    "A sweep is running. Stop it and close? Finished trials are kept and "
                    "the sweep can be resumed later from History.",
                    QMessageBox.Yes | QMessageBox.No, QMessageBox.No)
                if ans != QMessageBox.Yes:
                    event.ignore()
                    return
                self._close_after_stop = True
                self.stop_sweep()
            event.ignore()  # closes itself when the bridge reports the end
            return
        self._save_settings()
        super().closeEvent(event)
