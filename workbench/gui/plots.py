"""The plot panels beside the results: learning curves, fold spread, layer health.

Each panel takes a list of *series*, one per selected configuration, in rank
order, as :class:`workbench.gui.plot_area.PlotArea` builds them from the rows
of :func:`workbench.gui.core_adapter.ranked_rows`::

    {"key": str, "label": str, "number": int,          # the rank shown in the legend
     "color": int,                                     # index into the theme's series colours
     "loss": band, "test_loss": band, "val": band, "test_score": band,  # per epoch, or None
     "loss_kind": str, "loss_words": str, "metric": str,
     "fold_scores": [float, ...], "mean": float, "sd": float,
     "health": {"dead": [..], "saturated": [..], "grad_norm": [..]},   # per layer
     "diverged": bool, "diagnosis": {"codes", "text", "findings"},
     "hints": [str, ...]}

with ``band = {"x", "mean", "lo", "hi"}``. Panels draw only; what they decide
is how to show it:

- **Outliers do not flatten the others** (:func:`robust_range`): a series the
  core diagnosed as diverged, or one that would squeeze the others into less
  than :data:`SQUEEZE` of the axis, is left out of the axis range; its part
  outside is marked with a triangle at the edge and named in the note.
- **One loss axis per loss kind**: training losses of heads with different
  losses or target units cannot share an axis; when the selection mixes them,
  a box picks the kind shown and the note says so.
- **Empty state**: with nothing selected a panel shows a sentence, not empty
  axes.
- **Log axes** (gradient norms) are drawn as log10 values with their own ticks:
  decades, or 1-2-5 steps within a decade, never more than a handful.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QBrush, QColor, QPen
from PySide6.QtWidgets import (
    QComboBox,
    QFrame,
    QHBoxLayout,
    QLabel,
    QScrollArea,
    QSizePolicy,
    QVBoxLayout,
    QWidget,
)

from workbench.gui import theme as th
from workbench.gui.widgets import ElidedLabel

pg.setConfigOptions(antialias=True, background="w", foreground="k")

#: a series that would squeeze the others into less than this share of the axis is left
#: out of the range (a display choice: a fifth of a ~110-pixel plot is ~20 pixels)
SQUEEZE = 0.2
#: the least height of a plot (pixels): two plots and their notes fit the ~220 pixels the
#: window leaves under the results table at 1280 x 800
MIN_PLOT_HEIGHT = 48
#: the metrics' names on a plot axis (short enough to run along a short axis)
SHORT_METRIC = {"r2": "R²", "neg_root_mean_squared_error": "−RMSE",
                "neg_mean_absolute_error": "−MAE", "neg_mean_poisson_deviance": "−Poisson",
                "roc_auc": "ROC AUC", "balanced_accuracy": "bal. acc.",
                "neg_log_loss": "−log-loss", "accuracy": "accuracy"}
#: drawn values are held within this many axis spans of the range (Qt paints very large
#: coordinates badly; the part outside is marked as clipped anyway)
DRAW_LIMIT = 20.0


def _pen(color: QColor, width: float = 2.0, style=Qt.SolidLine) -> QPen:
    pen = QPen(color)
    pen.setWidthF(width)
    pen.setStyle(style)
    pen.setCosmetic(True)
    return pen


def _alpha(color: QColor, a: int) -> QColor:
    c = QColor(color)
    c.setAlpha(a)
    return c


def _finite(values) -> np.ndarray:
    a = np.asarray([np.nan if v is None else v for v in values], dtype=float).ravel()
    return a[np.isfinite(a)]


def _span(lo: float, hi: float) -> float:
    return hi - lo


def robust_range(groups: list, flagged: list[bool] | None = None,
                 squeeze: float = SQUEEZE) -> tuple[float, float, list[int]] | None:
    """An axis range that shows the ordinary series whole and leaves the outliers out.

    Parameters
    ----------
    groups : list of array-like
        The values each series puts on this axis (None and non-finite ignored).
    flagged : list of bool, optional
        Series known to be abnormal (diagnosed as diverged): left out of the range
        whenever another series has values.
    squeeze : float
        A series is also left out when, with it, the range of the others would take
        less than this share of the axis; the widest offender goes first, again
        until none is left or one series remains.

    Returns
    -------
    (low, high, clipped) or None
        ``clipped``: the indices of the series with values outside [low, high];
        None when no series has a finite value.
    """
    vals = [_finite(g) for g in groups]
    flagged = list(flagged) if flagged is not None else [False] * len(vals)
    have = [i for i, v in enumerate(vals) if len(v)]
    if not have:
        return None
    keep = [i for i in have if not flagged[i]] or have

    def extent(idx):
        allv = np.concatenate([vals[i] for i in idx])
        return float(allv.min()), float(allv.max())

    while len(keep) > 1:
        lo, hi = extent(keep)
        worst, worst_span = None, None
        for i in keep:
            rest = [j for j in keep if j != i]
            r_lo, r_hi = extent(rest)
            if _span(lo, hi) > 0 and _span(r_lo, r_hi) < squeeze * _span(lo, hi):
                if worst is None or _span(r_lo, r_hi) < worst_span:
                    worst, worst_span = i, _span(r_lo, r_hi)
        if worst is None:
            break
        keep.remove(worst)
    lo, hi = extent(keep)
    if lo == hi:
        pad = abs(lo) * 0.05 or 0.5
        lo, hi = lo - pad, hi + pad
    clipped = [i for i in have if vals[i].min() < lo or vals[i].max() > hi]
    return lo, hi, clipped


def log_ticks(lo: float, hi: float, most: int = 5) -> list[tuple[float, str]]:
    """Ticks for an axis of log10 values from ``lo`` to ``hi``: ``(log10 value, label)``.

    Decades when the range spans at least one (thinned to at most ``most``), else the
    1-2-5 steps inside it; labels in plain notation.
    """
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return []
    lo, hi = min(lo, hi), max(lo, hi)
    first, last = math.floor(lo), math.ceil(hi)
    decades = [d for d in range(first, last + 1) if lo - 1e-9 <= d <= hi + 1e-9]
    if len(decades) >= 2:
        step = max(1, math.ceil(len(decades) / most))
        return [(float(d), _plain(10.0 ** d)) for d in decades[::step]]
    out = []
    for d in range(first - 1, last + 1):
        for m in (1, 2, 5):
            v = math.log10(m) + d
            if lo - 1e-9 <= v <= hi + 1e-9:
                out.append((v, _plain(m * 10.0 ** d)))
    if len(out) < 2:  # a range inside one 1-2-5 step: round values in even steps
        v_lo, v_hi = 10.0 ** lo, 10.0 ** hi
        raw = (v_hi - v_lo) / 3
        mag = 10.0 ** math.floor(math.log10(raw)) if raw > 0 else 1.0
        step = next(m * mag for m in (1, 2, 5, 10) if m * mag >= raw)
        k = math.ceil(v_lo / step)
        out = []
        while k * step <= v_hi and len(out) < most:
            v = k * step
            if v > 0:
                out.append((math.log10(v), _plain(float(f"{v:.6g}"))))
            k += 1
    step = max(1, math.ceil(len(out) / most))
    return out[::step]


def _plain(v: float) -> str:
    if v == 0:
        return "0"
    if 1e-3 <= abs(v) < 1e4:
        return f"{v:.4g}"
    return f"{v:.0e}".replace("e-0", "e-").replace("e+0", "e")


def _num(v: float) -> str:
    if v is None or not math.isfinite(v):
        return "n/a"
    return f"{v:.3g}" if abs(v) >= 1e4 or (v != 0 and abs(v) < 1e-3) else f"{v:.3f}"


class _Pool:
    """Plot items kept and reused: a redraw updates them in place (``setData``, ``setOpts``)
    instead of removing every item and creating new ones. Creating, adding and removing
    pyqtgraph items cost most of a redraw, and a cleared plot re-laid out its axes and was
    painted twice.

    ``begin()``, then ``take()`` for each item to show (made on first need), then ``end()``
    hides the items not taken. :attr:`made` counts the items ever created (a test reads it).
    """

    def __init__(self, plot: pg.PlotWidget, make):
        self.plot = plot
        self.make = make
        self.items: list = []
        self.used = 0
        self.made = 0

    def begin(self) -> None:
        self.used = 0

    def take(self):
        if self.used == len(self.items):
            self.items.append(self.make())
            self.made += 1
        item = self.items[self.used]
        self.used += 1
        if item.parentItem() is None:  # new, or the plot was cleared by its owner
            self.plot.addItem(item)
        if not item.isVisible():
            item.setVisible(True)
        return item

    def end(self) -> None:
        for item in self.items[self.used:]:
            if item.isVisible():
                item.setVisible(False)

    def shown(self) -> list:
        return self.items[:self.used]


class GridAxis(pg.AxisItem):
    """An axis whose grid lines are drawn in opaque colours, under the data.

    pyqtgraph draws grid lines as the axis's ticks with a translucent pen, without
    antialiasing, above the data. Qt's raster engine fills translucent lines that are not
    antialiased very slowly: measured here, 30 lines across a 1258-pixel image took 12 ms
    translucent against 0.3 ms opaque, and each plot's paint spent most of its time in its
    two axes' grids (5 ms per plot in the window; 20 ms per axis at full window size).
    Each tick pen's colour is blended over the plot's background (:attr:`background`)
    once, by the same "source over" rule Qt uses, and the axis sits under the view box, so
    the opaque lines give the same pixels as before on the background (where two grid
    lines cross, the later one shows instead of both darkening the pixel), and no longer
    cover the curves where they cross them.
    """

    def __init__(self, orientation: str, **kwargs):
        super().__init__(orientation, **kwargs)
        self.background = QColor("white")

    def put_under(self, view_box: pg.ViewBox) -> None:
        """Draw under ``view_box`` and its data (pyqtgraph's plot puts its axes above the
        view box: z 0.5 against -100)."""
        self.setZValue(view_box.zValue() - 1)

    def set_background(self, color: QColor) -> None:
        self.background = QColor(color)
        self.picture = None  # drawn again with the new blend
        self.update()

    def generateDrawSpecs(self, p):  # noqa: N802 (pyqtgraph's name)
        specs = super().generateDrawSpecs(p)
        if specs is None:
            return None
        axis, ticks, text = specs
        made: dict = {}
        flat = []
        for pen, a, b in ticks:
            key = pen.color().rgba()
            if key not in made:
                made[key] = opaque_pen(pen, self.background)
            flat.append((made[key], a, b))
        return axis, flat, text


def opaque_pen(pen: QPen, background: QColor) -> QPen:
    """``pen`` with its colour composited over ``background`` ("source over": each channel
    ``a * colour + (1 - a) * background``, Porter & Duff 1984), fully opaque."""
    c = pen.color()
    a = c.alphaF()
    if a >= 1.0:
        return pen
    out = QPen(pen)
    out.setColor(QColor.fromRgbF(a * c.redF() + (1 - a) * background.redF(),
                                 a * c.greenF() + (1 - a) * background.greenF(),
                                 a * c.blueF() + (1 - a) * background.blueF()))
    return out


def _set_label(plot: pg.PlotWidget, side: str, text: str) -> None:
    """An axis title, set only when it changes (each setting re-lays out the plot)."""
    ax = plot.getPlotItem().getAxis(side)
    if ax.labelText != text or not ax.label.isVisible():
        plot.setLabel(side, text)


def _set_ticks(plot: pg.PlotWidget, side: str, ticks) -> None:
    """An axis's ticks, set only when they change (each setting repaints the axis)."""
    ax = plot.getPlotItem().getAxis(side)
    if getattr(ax, "_tickLevels", None) != ticks:
        ax.setTicks(ticks)


def _set_text(label: QLabel, text: str) -> None:
    """A label's text, set only when it changes (Qt re-lays out the label's parent)."""
    if label.text() != text:
        label.setText(text)


class _Panel(QWidget):
    """A titled panel holding pyqtgraph plots, an empty-state sentence and a note line."""

    def __init__(self, title: str, empty_text: str, parent=None):
        super().__init__(parent)
        self.theme = th.LIGHT
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.setSpacing(2)
        self.title = QLabel(title)
        self.title.setObjectName("plotTitle")
        #: the title row: the title, then any control a panel adds on its right
        self.header = QHBoxLayout()
        self.header.setContentsMargins(0, 0, 0, 0)
        self.header.addWidget(self.title, 1)
        lay.addLayout(self.header)
        self.layout_ = lay
        self.empty = QLabel(empty_text)
        self.empty.setObjectName("muted")
        self.empty.setWordWrap(True)
        self.empty.setAlignment(Qt.AlignCenter)
        self.empty.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Expanding)
        lay.addWidget(self.empty, 1)
        self.note = QLabel("")
        self.note.setObjectName("muted")
        self.note.setWordWrap(True)
        self.note.setTextFormat(Qt.PlainText)
        self.note.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Minimum)
        self._series: list[dict] = []
        #: the labels of the series whose values run outside the shown range, per plot
        self.clipped: dict[str, list[str]] = {}

    def _plot(self, y_label: str, x_label: str | None = None, stretch: int = 1,
              into=None) -> pg.PlotWidget:
        w = pg.PlotWidget(axisItems={"left": GridAxis("left"), "bottom": GridAxis("bottom")})
        w.setMinimumHeight(MIN_PLOT_HEIGHT)
        # no preferred height of its own (pyqtgraph asks for 480 pixels): a plot takes the
        # room its panel has, so a scroll area around the panels never grows them past it
        w.setSizePolicy(QSizePolicy.Expanding, QSizePolicy.Ignored)
        w.setMenuEnabled(False)
        w.showGrid(x=True, y=True, alpha=0.18)
        w.setLabel("left", y_label)
        if x_label:
            w.setLabel("bottom", x_label)
        w.getPlotItem().getViewBox().setMouseEnabled(x=True, y=False)
        for name in ("left", "bottom"):
            w.getPlotItem().getAxis(name).put_under(w.getPlotItem().getViewBox())
            w.getPlotItem().getAxis(name).enableAutoSIPrefix(False)
            # the room for tick labels grows when needed but never shrinks back: shrinking
            # and growing with each selection's labels re-laid out the plot while it was
            # painted, and painted it a second time
            w.getPlotItem().getAxis(name).setStyle(autoReduceTextSpace=False)
        (into if into is not None else self.layout_).addWidget(w, stretch)
        return w

    def _finish(self):
        self.layout_.addWidget(self.note)

    def _settle(self, plots=None) -> None:
        """Apply the new ranges to the plots' transforms now (``plots``, else all the
        panel's). pyqtgraph leaves that to the moment it paints; the transform's change then
        asks for a second paint, and every plot was painted twice per selection. A note or
        hint shown or hidden is laid out first, for the same reason (the plots' new size,
        then one paint)."""
        if self.isVisible() and self.layout() is not None:
            self.layout().activate()
        for w in self.plots() if plots is None else plots:
            w.getPlotItem().getViewBox().prepareForPaint()

    def plots(self) -> list[pg.PlotWidget]:
        return []

    def _say(self, note: str, explanation: str = "") -> None:
        """The note under the plots (only what needs saying: it is hidden when empty, so the
        plots keep the room) and the panel's explanation as the tooltip of title and plots."""
        _set_text(self.note, note)
        self.note.setVisible(bool(note))
        for w in [self.title, self.note, *self.plots()]:
            if w.toolTip() != explanation:
                w.setToolTip(explanation)

    def _show_empty(self, empty: bool) -> None:
        self.empty.setVisible(empty)
        for w in self.plots():
            w.setVisible(not empty)

    def set_theme(self, theme: th.Theme) -> None:
        self._style_axes(theme)
        self.set_series(self._series)

    def _style_axes(self, theme: th.Theme) -> None:
        """Background and axis colours of every plot of the panel from ``theme``."""
        self.theme = theme
        for w in self.plots():
            w.setBackground(theme.plot_bg)
            for name in ("left", "bottom"):
                ax = w.getPlotItem().getAxis(name)
                ax.setPen(_pen(QColor(theme.plot_fg), 1))
                ax.setTextPen(QColor(theme.plot_fg))
                if isinstance(ax, GridAxis):
                    ax.set_background(QColor(theme.plot_bg))

    def set_series(self, series: list[dict]) -> None:
        """Draw ``series`` in place: every item pool of the panel (:meth:`_pools`) is
        reused by :meth:`_set_series`, and what it did not reuse is hidden after."""
        for part in self.parts(series):
            part()

    def parts(self, series: list[dict]) -> list:
        """:meth:`set_series` as a list of calls, to be made in order (a caller may leave
        the event loop a turn between them, to paint each part on its own). One here."""
        return [lambda: self._draw_part(series, self._pools(), self._set_series)]

    def _draw_part(self, series, pools, draw, plots=None) -> None:
        """Run ``draw`` with ``pools`` begun before and ended after, then settle ``plots``."""
        self._series = list(series)
        for pool in pools:
            pool.begin()
        try:
            draw()
        finally:
            for pool in pools:
                pool.end()
            self._settle(plots)

    def _pools(self) -> tuple:
        """The panel's item pools (none here: a panel that draws its own way)."""
        return ()

    def _set_series(self) -> None:  # pragma: no cover - overridden
        raise NotImplementedError

    # -- shared drawing ---------------------------------------------------------------
    def _apply_range(self, plot: pg.PlotWidget, name: str, groups, series, flagged,
                     curves=None, padding: float = 0.06) -> str:
        """Set the y range robustly; mark and name what runs outside. Returns a note."""
        found = robust_range(groups, flagged)
        self.clipped[name] = []
        marks = self._marks(plot)
        marks.begin()
        if found is None:
            marks.end()
            return ""
        lo, hi, clipped = found
        plot.enableAutoRange(axis="y", enable=False)
        plot.setYRange(lo, hi, padding=padding)
        if not clipped:
            marks.end()
            return ""
        parts = []
        for i in clipped:
            s = series[i]
            self.clipped[name].append(s["label"])
            v = _finite(groups[i])
            color = self.theme.series_color(s["color"])
            if curves is not None and curves[i] is not None:
                x, y = curves[i]
                out = np.flatnonzero(np.isfinite(y) & ((y > hi) | (y < lo)))
                if len(out):
                    k = out[0]
                    edge = hi if y[k] > hi else lo
                    marks.take().setData([x[k]], [edge], symbol="t1" if edge == hi else "t",
                                         size=11, brush=color, pen=None)
            ext = v.max() if v.max() > hi else v.min()
            parts.append(f"#{s.get('number', i + 1)} (to {_num(float(ext))})")
        marks.end()
        return "Outside the range, marked ▲/▼: " + ", ".join(parts) + "."

    def _marks(self, plot: pg.PlotWidget) -> _Pool:
        """The pool of a plot's clipping markers (▲/▼ at the edge)."""
        pools = self.__dict__.setdefault("_mark_pools", {})
        pool = pools.get(id(plot))
        if pool is None:
            pool = pools[id(plot)] = _Pool(plot, pg.ScatterPlotItem)
        return pool

    def items_made(self) -> int:
        """How many plot items the panel has created so far (kept and reused after)."""
        return sum(p.made for p in self.__dict__.values() if isinstance(p, _Pool)) + sum(
            p.made for p in self.__dict__.get("_mark_pools", {}).values())


def _held(values, lo: float, hi: float) -> np.ndarray:
    """Values held within :data:`DRAW_LIMIT` spans of the range, for drawing only."""
    span = max(hi - lo, 1e-12)
    return np.clip(np.asarray(values, float), lo - DRAW_LIMIT * span, hi + DRAW_LIMIT * span)


def _band_item() -> pg.FillBetweenItem:
    """A ±1 sd band: the fill between two edge curves (not drawn themselves)."""
    return pg.FillBetweenItem(pg.PlotDataItem([0.0, 1.0], [0.0, 0.0], pen=pg.mkPen(None)),
                              pg.PlotDataItem([0.0, 1.0], [0.0, 0.0], pen=pg.mkPen(None)))


class CurvesPanel(_Panel):
    """Training (and held-out) loss per epoch, and the held-out or validation score."""

    #: the loss kind shown changed (its key)
    kindChanged = Signal(str)

    def __init__(self, parent=None):
        super().__init__("Learning curves",
                         "Select one or more rows of the results to see their learning curves.",
                         parent)
        # shortened with "…" when the panel is narrow (the loss's words whole in its
        # tooltip): a plain label was cut off at the panel's edge ("target scale")
        self.loss_label = ElidedLabel("")
        self.loss_label.setObjectName("muted")
        self.kind_box = QComboBox()
        self.kind_box.setToolTip("The selected configurations' heads report different losses; "
                                 "pick the one to draw")
        self.kind_box.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.kind_box.setMinimumContentsLength(24)
        self.kind_box.currentIndexChanged.connect(self._kind_picked)
        self.header.addWidget(self.loss_label)
        self.header.addWidget(self.kind_box)
        # side by side, each the panel's full height: stacked in the short space below the
        # table at 1280 x 800 the held-out plot was a few pixels tall
        row = QHBoxLayout()
        row.setContentsMargins(0, 0, 0, 0)
        row.setSpacing(2)
        self.loss_plot = self._plot("loss", "epoch", stretch=1, into=row)
        self.val_plot = self._plot("score", "epoch", stretch=1, into=row)
        self.val_plot.setXLink(self.loss_plot)
        self.layout_.addLayout(row, 1)
        self._finish()
        self._curves: list[pg.PlotDataItem] = []
        self._kind: str | None = None
        # the items, kept and updated in place: band (fill between two edges), mean line,
        # held-out line (dashed), per plot
        self._loss_bands = _Pool(self.loss_plot, _band_item)
        self._loss_lines = _Pool(self.loss_plot, pg.PlotDataItem)
        self._loss_tests = _Pool(self.loss_plot, pg.PlotDataItem)
        self._val_bands = _Pool(self.val_plot, _band_item)
        self._val_lines = _Pool(self.val_plot, pg.PlotDataItem)
        self.set_series([])

    def plots(self):
        return [self.loss_plot, self.val_plot]

    def curve_items(self) -> list[pg.PlotDataItem]:
        """The mean training-loss curves now drawn, one per configuration shown."""
        return list(self._curves)

    def _kind_picked(self, i: int) -> None:
        key = self.kind_box.itemData(i)
        if key and key != self._kind:
            self._kind = key
            self.set_series(self._series)
            self.kindChanged.emit(key)

    def _draw(self, bands: _Pool | None, lines: _Pool, band, color, rng, dashed=False):
        """One series' mean line (and its ±1 sd band) into items of the pools, in place."""
        x = np.asarray(band["x"], dtype=float)
        mean = _held(band["mean"], *rng)
        if bands is not None and len(x) > 1 and not dashed:
            lo, hi = _held(band["lo"], *rng), _held(band["hi"], *rng)
            fill = bands.take()
            fill.curves[0].setData(x, lo)
            fill.curves[1].setData(x, hi)
            fill.setBrush(QBrush(_alpha(color, 38)))
        style = Qt.DashLine if dashed else Qt.SolidLine
        line = lines.take()
        line.setData(x, mean, pen=_pen(color, 2.0, style),
                     symbol="o" if len(x) == 1 else None, symbolBrush=color,
                     symbolPen=None, symbolSize=6)
        return line

    @staticmethod
    def _values(band):
        if not band:
            return []
        return list(band["mean"]) + list(band["lo"]) + list(band["hi"])

    def _pools(self) -> tuple:
        return self._loss_pools() + self._score_pools()

    def _loss_pools(self) -> tuple:
        return (self._loss_bands, self._loss_lines, self._loss_tests)

    def _score_pools(self) -> tuple:
        return (self._val_bands, self._val_lines)

    def parts(self, series: list[dict]) -> list:
        """Two parts, one per plot: the loss plot (with the loss box and the empty state),
        then the score plot and the note. Each plot's drawing and paint took about half of
        the ~45 ms the two took in one turn (the end of a sweep, when the best row's curves
        appear)."""
        return [lambda: self._draw_part(series, self._loss_pools(), self._set_loss,
                                        [self.loss_plot]),
                lambda: self._draw_part(series, self._score_pools(), self._set_score,
                                        [self.val_plot])]

    def _set_loss(self) -> None:
        self._curves = []
        self.clipped = {}
        self._show_empty(not self._series)
        #: the note's sentences and the tooltip's, from the loss part to the score part
        self._notes: list[str] = []
        self._tips: list[str] = []
        if not self._series:
            for plot in self.plots():
                self._marks(plot).begin()
                self._marks(plot).end()
            _set_text(self.loss_label, "")
            self.kind_box.hide()
            return
        kinds: dict[str, str] = {}
        for s in self._series:
            if s.get("loss") and s.get("loss_kind"):
                kinds.setdefault(s["loss_kind"], s.get("loss_words") or s["loss_kind"])
        if self._kind not in kinds:
            self._kind = next(iter(kinds), None)
        self.kind_box.blockSignals(True)
        if getattr(self, "_box_kinds", None) != kinds:  # refilled only when the kinds change
            self._box_kinds = dict(kinds)
            self.kind_box.clear()
            short = {key: words.split(",")[0] for key, words in kinds.items()}
            for key, words in kinds.items():
                # the loss's name, with its target units only when two kinds share a name
                name = short[key] if list(short.values()).count(short[key]) == 1 else words
                self.kind_box.addItem(name, key)
                self.kind_box.setItemData(self.kind_box.count() - 1, words, Qt.ToolTipRole)
        if self._kind is not None and \
                self.kind_box.currentIndex() != list(kinds).index(self._kind):
            self.kind_box.setCurrentIndex(list(kinds).index(self._kind))
        self.kind_box.blockSignals(False)
        self.kind_box.setVisible(len(kinds) > 1)
        notes = self._notes
        # ---- the loss plot: one kind of loss
        shown = [s for s in self._series if s.get("loss")
                 and (s.get("loss_kind") == self._kind or not s.get("loss_kind"))]
        groups = [self._values(s.get("loss")) + self._values(s.get("test_loss")) for s in shown]
        found = robust_range(groups, [bool(s.get("diverged")) for s in shown])
        rng = found[:2] if found else (0.0, 1.0)
        curves = []
        any_test = False
        for s in shown:
            color = self.theme.series_color(s["color"])
            self._curves.append(self._draw(self._loss_bands, self._loss_lines, s["loss"], color,
                                           rng))
            if s.get("test_loss"):
                any_test = True
                self._draw(None, self._loss_tests, s["test_loss"], color, rng, dashed=True)
            band = s["loss"]
            curves.append((np.asarray(band["x"], float),
                           np.asarray([np.nan if v is None else v for v in band["mean"]],
                                      float)))
        clip = self._apply_range(self.loss_plot, "loss", groups, shown,
                                 [bool(s.get("diverged")) for s in shown], curves)
        # the epochs' range set now (the score plot shares it): left to pyqtgraph's lazy
        # auto-range it was found while painting and every plot was painted twice
        last = max([len(s[k]["x"]) for s in self._series for k in ("loss", "test_score", "val")
                    if s.get(k)] or [1])
        self.loss_plot.enableAutoRange(axis="x", enable=False)
        self.loss_plot.setXRange(1, max(2, last), padding=0.02)
        words = kinds.get(self._kind, "")
        _set_text(self.loss_label, "Loss:" if len(kinds) > 1 else f"Loss: {words}")
        self.loss_label.setToolTip(words)
        tips = self._tips
        tips.append("Left plot: training loss (solid)"
                + (" and the held-out fold's loss (dashed)" if any_test else "")
                + f", {words}. Lines: mean over folds and repeats; band: ±1 sd.")
        if len(kinds) > 1:
            others = [s for s in self._series if s.get("loss") and s not in shown]
            notes.append(f"Heads' losses differ: {len(others)} more under the other kind (the "
                         "box).")
        if clip:
            notes.append("Loss " + clip[0].lower() + clip[1:])

    def _set_score(self) -> None:
        """The score plot: the held-out fold's score per epoch, else early stopping's; then
        the panel's note and tooltip (the loss part's sentences first)."""
        notes, tips = self._notes, self._tips
        if not self._series:
            self._say("")
            return
        metric = next((s.get("metric") for s in self._series if s.get("metric")), "")
        key = "test_score" if any(s.get("test_score") for s in self._series) else "val"
        with_score = [s for s in self._series if s.get(key)]
        sgroups = [self._values(s[key]) for s in with_score]
        found = robust_range(sgroups, [bool(s.get("diverged")) for s in with_score])
        srng = found[:2] if found else (0.0, 1.0)
        scurves = []
        for s in with_score:
            color = self.theme.series_color(s["color"])
            self._draw(self._val_bands, self._val_lines, s[key], color, srng)
            scurves.append((np.asarray(s[key]["x"], float),
                            np.asarray([np.nan if v is None else v for v in s[key]["mean"]],
                                       float)))
        sclip = self._apply_range(self.val_plot, "score", sgroups, with_score,
                                  [bool(s.get("diverged")) for s in with_score], scurves)
        short = SHORT_METRIC.get(metric, metric)
        # the metric along the short left axis (which rows it is on: the panel's tooltip)
        _set_label(self.val_plot, "left", short or "score")
        self.val_plot.setVisible(bool(with_score))
        if not with_score:
            tips.append("No score per epoch was recorded for these configurations (early "
                        "stopping records its validation score).")
        elif key == "val":
            tips.append(f"Right plot: {metric} on early stopping's validation rows, per epoch.")
        else:
            tips.append(f"Right plot: {metric} on the held-out fold, per epoch.")
        if sclip:
            notes.append("Score " + sclip[0].lower() + sclip[1:])
        self._say(" ".join(notes), " ".join(tips))


class SpreadPanel(_Panel):
    """Every fold score of each configuration, with its mean and ±1 sd."""

    def __init__(self, parent=None):
        super().__init__("Fold scores", "Select rows to compare their scores fold by fold.",
                         parent)
        self.plot = self._plot("score", "rank")
        self._finish()
        self._scatters: list[pg.ScatterPlotItem] = []
        # kept and updated in place: fold scores, mean ± sd bar, mean diamond
        self._dots = _Pool(self.plot, pg.ScatterPlotItem)
        self._bars = _Pool(self.plot, lambda: pg.ErrorBarItem(
            x=np.zeros(1), y=np.zeros(1), height=np.zeros(1), beam=0.08))
        self._means = _Pool(self.plot, pg.ScatterPlotItem)
        self.set_series([])

    def plots(self):
        return [self.plot]

    def scatter_items(self) -> list[pg.ScatterPlotItem]:
        return list(self._scatters)

    def _pools(self) -> tuple:
        return (self._dots, self._bars, self._means)

    def _set_series(self) -> None:
        self._scatters = []
        self.clipped = {}
        self._show_empty(not self._series)
        if not self._series:
            self._marks(self.plot).begin()
            self._marks(self.plot).end()
            self._say("")
            return
        groups = [[v for v in s.get("fold_scores", []) if v is not None] for s in self._series]
        flagged = [bool(s.get("diverged")) for s in self._series]
        found = robust_range(groups, flagged)
        rng = found[:2] if found else (0.0, 1.0)
        ticks = []
        fg = QColor(self.theme.plot_fg)
        metric = next((s.get("metric") for s in self._series if s.get("metric")), "")
        _set_label(self.plot, "left", SHORT_METRIC.get(metric, metric) if metric else "score")
        for i, s in enumerate(self._series):
            color = self.theme.series_color(s["color"])
            scores = _finite(groups[i])
            x0 = float(i + 1)
            if len(scores):
                # spread the points sideways in a fixed pattern so equal scores stay visible
                offs = (np.arange(len(scores)) % 5 - 2) * 0.06
                sc = self._dots.take()
                sc.setData(x0 + offs, _held(scores, *rng), size=7, symbol="o",
                           brush=_alpha(color, 170), pen=_pen(color, 1))
                self._scatters.append(sc)
            m, sd = s.get("mean"), s.get("sd")
            if m is not None and math.isfinite(m) and rng[0] <= m <= rng[1]:
                sd = sd if sd is not None and math.isfinite(sd) else 0.0
                self._bars.take().setData(x=np.array([x0 + 0.28]), y=np.array([m]),
                                          height=np.array([2 * sd]), beam=0.08,
                                          pen=_pen(fg, 1.5))
                self._means.take().setData([x0 + 0.28], [m], symbol="d", size=9, brush=fg,
                                           pen=None)
            ticks.append((x0, f"#{s['number']}" if s.get("number") is not None else str(i + 1)))
        _set_ticks(self.plot, "bottom", [ticks])
        self.plot.setXRange(0.4, len(self._series) + 0.7, padding=0)
        curves = [(np.full(len(_finite(g)), float(i + 1)), _finite(g))
                  for i, g in enumerate(groups)]
        clip = self._apply_range(self.plot, "score", groups, self._series, flagged, curves)
        self._say(clip, "One dot per fold and repeat; the diamond and bar are the mean ± 1 sd. "
                        "Labels under the axis are the ranks in the table.")


class HealthPanel(_Panel):
    """Per-layer dead and saturated shares (bars) and gradient norms (markers, log scale)."""

    def __init__(self, parent=None):
        super().__init__("Layer health", "Select rows to see their dead and saturated units "
                                         "and gradient norms.", parent)
        # side by side: stacked, each plot got half of a short panel and its rotated axis
        # title was cut at 1280 x 800; beside each other both keep the panel's height
        row = QHBoxLayout()
        row.setContentsMargins(0, 0, 0, 0)
        row.setSpacing(2)
        self.share_plot = self._plot("% units", "layer", into=row)
        self.share_plot.setYRange(0, 100, padding=0.02)
        self.grad_plot = self._plot("|grad|", "layer", into=row)
        self.layout_.addLayout(row, 1)
        self.hint = QLabel("")
        self.hint.setObjectName("hint")
        self.hint.setWordWrap(True)
        self.hint.setTextFormat(Qt.PlainText)
        self.hint_box = QScrollArea()
        self.hint_box.setWidget(self.hint)
        self.hint_box.setWidgetResizable(True)
        self.hint_box.setFrameShape(QFrame.NoFrame)
        self.hint_box.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.hint_box.setMaximumHeight(38)  # two lines; it scrolls for more
        self.layout_.addWidget(self.hint_box)
        self._finish()
        self._bars: list[pg.BarGraphItem] = []
        # kept and updated in place: dead and saturated bars, gradient-norm markers
        self._bar_pool = _Pool(self.share_plot, lambda: pg.BarGraphItem(
            x=[0.0], height=[0.0], width=0.1))
        self._grad_pool = _Pool(self.grad_plot, pg.PlotDataItem)
        self.set_series([])

    def plots(self):
        return [self.share_plot, self.grad_plot]

    def bar_items(self) -> list[pg.BarGraphItem]:
        return list(self._bars)

    def _pools(self) -> tuple:
        return (self._bar_pool, self._grad_pool)

    def _set_series(self) -> None:
        self._bars = []
        self.clipped = {}
        self._show_empty(not self._series)
        n = max(1, len(self._series))
        width = 0.8 / n
        max_layers = 0
        max_grad = 0
        grads = []
        for i, s in enumerate(self._series):
            color = self.theme.series_color(s["color"])
            h = s.get("health") or {}
            dead = np.asarray([np.nan if v is None else v for v in h.get("dead") or []],
                              float) * 100.0
            sat = np.asarray([np.nan if v is None else v for v in h.get("saturated") or []],
                             float) * 100.0
            layers = max(len(dead), len(sat))
            max_layers = max(max_layers, layers)
            xs = np.arange(1, layers + 1) - 0.4 + width * (i + 0.5)
            if len(dead):
                b = self._bar_pool.take()
                b.setOpts(x=xs[:len(dead)] - width / 4, height=np.nan_to_num(dead),
                          width=width / 2, brush=QBrush(color), pen=_pen(color, 1))
                self._bars.append(b)
            if len(sat):
                b = self._bar_pool.take()
                b.setOpts(x=xs[:len(sat)] + width / 4, height=np.nan_to_num(sat),
                          width=width / 2, brush=QBrush(color, Qt.BDiagPattern),
                          pen=_pen(color, 1))
                self._bars.append(b)
            # gradient norms: one per weight matrix (into each hidden layer, then the output)
            g = np.asarray([np.nan if v is None else v for v in h.get("grad_norm") or []], float)
            gx = np.arange(1, len(g) + 1) - 0.4 + width * (i + 0.5)
            good = np.isfinite(g) & (g > 0)
            grads.append((gx[good], np.log10(g[good])))
            if good.any():
                max_grad = max(max_grad, len(g))
        any_grad = any(len(v) for _, v in grads)
        found = robust_range([v for _, v in grads], [bool(s.get("diverged"))
                                                      for s in self._series])
        if found is not None:
            lo, hi, _ = found
            for s, (gx, gv) in zip(self._series, grads):
                if len(gv):
                    color = self.theme.series_color(s["color"])
                    self._grad_pool.take().setData(gx, _held(gv, lo, hi), pen=None, symbol="s",
                                                   symbolBrush=color, symbolPen=None,
                                                   symbolSize=8)
            # markers are 8 pixels tall on a short plot: room above and below them
            clip = self._apply_range(self.grad_plot, "gradient", [v for _, v in grads],
                                     self._series, [bool(s.get("diverged"))
                                                    for s in self._series], grads,
                                     padding=0.2)
            _set_ticks(self.grad_plot, "left", [log_ticks(lo, hi, 3)])
        else:
            self._marks(self.grad_plot).begin()
            self._marks(self.grad_plot).end()
            clip = ""
        ticks = [(k, f"{k}") for k in range(1, max_layers + 1)]
        _set_ticks(self.share_plot, "bottom", [ticks])
        gticks = [(k, f"{k}" if k <= max_layers else "out")
                  for k in range(1, max(max_grad, max_layers) + 1)]
        _set_ticks(self.grad_plot, "bottom", [gticks])
        if max_layers:
            self.share_plot.setXRange(0.5, max_layers + 0.5, padding=0)
        if max_grad:
            self.grad_plot.setXRange(0.5, max(max_grad, max_layers) + 0.5, padding=0)
        top = max([float(b.opts["height"].max()) for b in self._bars if len(b.opts["height"])]
                  or [0.0])
        # small shares stay visible: the axis ends just above the tallest bar (at least 10 %)
        ceiling = min(100.0, max(10.0, top * 1.2))
        self.share_plot.setYRange(0, ceiling, padding=0.02)
        half = round(ceiling / 2)
        _set_ticks(self.share_plot, "left", [[(0.0, "0"), (float(half), f"{half}")]])
        all_zero = all(not b.opts["height"].any() for b in self._bars) if self._bars else True
        # a plot of nothing but zeros says less than the note does: the room goes to the other
        self.share_plot.setVisible(bool(self._series) and not all_zero)
        self.grad_plot.setVisible(bool(self._series) and any_grad)
        if self._series and all_zero and not any_grad:
            self.share_plot.setVisible(True)
        hints = [h for s in self._series for h in s.get("hints", [])]
        _set_text(self.hint, "\n".join(f"⚠ {h}" for h in hints))
        self.hint_box.setVisible(bool(hints))
        if not self._series:
            self._say("")
            return
        self._say(
            ("No dead or saturated units (last epoch)." if all_zero else "")
            + (" " + clip if clip else ""),
            "Left plot: share of each hidden layer's units that are dead (solid bar: never "
            "active on the probe rows) or saturated (hatched: on a flat part), at the last "
            "epoch, mean over folds. Right plot: the norm of the loss gradient for each layer's "
            "weights (log scale; 'out' is the output layer)."
            + ("" if any_grad else " Gradient norms are recorded by the NumPy engine only."))
