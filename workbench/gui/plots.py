"""The three plot panels beside the results: learning curves, fold spread, layer health.

Each panel takes a list of *series*, one per selected configuration, as built
by :func:`workbench.gui.core_adapter.ranked_rows` (each row's ``series``)::

    {"key": str, "label": str, "color": int,          # index into the theme's series colours
     "loss": {"x", "mean", "lo", "hi"} or None,        # training loss per epoch, over folds
     "val":  {"x", "mean", "lo", "hi"} or None,        # validation score per epoch
     "fold_scores": [float, ...], "mean": float, "sd": float,
     "health": {"dead": [..], "saturated": [..], "grad_norm": [..] or []},   # per layer, shares
     "hints": [str, ...]}          # plain-words hints (workbench.sweep.diagnosis.health_hints)

Panels draw only: no statistics are computed here.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtGui import QBrush, QColor, QPen
from PySide6.QtWidgets import QLabel, QSizePolicy, QVBoxLayout, QWidget

from workbench.gui import theme as th

pg.setConfigOptions(antialias=True, background="w", foreground="k")


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


class _Panel(QWidget):
    """A titled panel holding one or more pyqtgraph plots and a note line."""

    def __init__(self, title: str, parent=None):
        super().__init__(parent)
        self.theme = th.LIGHT
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.setSpacing(2)
        self.title = QLabel(title)
        self.title.setObjectName("plotTitle")
        lay.addWidget(self.title)
        self.layout_ = lay
        self.note = QLabel("")
        self.note.setObjectName("muted")
        self.note.setWordWrap(True)
        self.note.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Minimum)
        self._series: list[dict] = []

    def _plot(self, y_label: str, x_label: str | None = None) -> pg.PlotWidget:
        w = pg.PlotWidget()
        w.setMinimumHeight(110)
        w.setMenuEnabled(False)
        w.showGrid(x=True, y=True, alpha=0.18)
        w.setLabel("left", y_label)
        if x_label:
            w.setLabel("bottom", x_label)
        w.getPlotItem().getViewBox().setMouseEnabled(x=True, y=False)
        for name in ("left", "bottom"):
            w.getPlotItem().getAxis(name).enableAutoSIPrefix(False)
        self.layout_.addWidget(w, 1)
        return w

    def _finish(self):
        self.layout_.addWidget(self.note)

    def plots(self) -> list[pg.PlotWidget]:
        return []

    def set_theme(self, theme: th.Theme) -> None:
        self.theme = theme
        for w in self.plots():
            w.setBackground(theme.plot_bg)
            for name in ("left", "bottom"):
                ax = w.getPlotItem().getAxis(name)
                ax.setPen(_pen(QColor(theme.plot_fg), 1))
                ax.setTextPen(QColor(theme.plot_fg))
        self.set_series(self._series)

    def set_series(self, series: list[dict]) -> None:  # pragma: no cover - overridden
        raise NotImplementedError


class CurvesPanel(_Panel):
    """Training loss and validation score per epoch: mean over folds with a ±1 sd band."""

    def __init__(self, parent=None):
        super().__init__("Learning curves", parent)
        self.loss_plot = self._plot("training loss")
        self.val_plot = self._plot("validation score", "epoch")
        self.val_plot.setXLink(self.loss_plot)
        self.legend = self.loss_plot.getPlotItem().addLegend(offset=(-8, 8), labelTextSize="8pt")
        self._finish()
        self._curves: list[pg.PlotDataItem] = []
        self.set_series([])

    def plots(self):
        return [self.loss_plot, self.val_plot]

    def curve_items(self) -> list[pg.PlotDataItem]:
        """The mean training-loss curves now drawn, one per configuration."""
        return list(self._curves)

    def _draw(self, plot: pg.PlotWidget, band: dict, color: QColor, label: str | None):
        x = np.asarray(band["x"], dtype=float)
        mean = np.asarray(band["mean"], dtype=float)
        lo = np.asarray(band["lo"], dtype=float)
        hi = np.asarray(band["hi"], dtype=float)
        if len(x) > 1:
            c_lo = pg.PlotDataItem(x, lo, pen=pg.mkPen(None))
            c_hi = pg.PlotDataItem(x, hi, pen=pg.mkPen(None))
            fill = pg.FillBetweenItem(c_lo, c_hi, brush=QBrush(_alpha(color, 38)))
            plot.addItem(fill)
        item = plot.plot(x, mean, pen=_pen(color, 2.0), name=label,
                         symbol="o" if len(x) == 1 else None, symbolBrush=color,
                         symbolPen=None, symbolSize=6)
        return item

    def set_theme(self, theme):
        bg = QColor(theme.plot_bg)
        bg.setAlpha(215)
        self.legend.setBrush(bg)
        self.legend.setPen(_pen(QColor(theme.border), 1))
        self.legend.setLabelTextColor(QColor(theme.plot_fg))
        super().set_theme(theme)

    def set_series(self, series: list[dict]) -> None:
        self._series = list(series)
        self.loss_plot.clear()
        self.val_plot.clear()
        self.legend.clear()
        self._curves = []
        any_val = False
        for s in self._series:
            color = self.theme.series_color(s["color"])
            if s.get("loss"):
                self._curves.append(self._draw(self.loss_plot, s["loss"], color, s["label"]))
            if s.get("val"):
                any_val = True
                self._draw(self.val_plot, s["val"], color, None)
        if not self._series:
            self.note.setText("Select one or more rows of the results to see their curves.")
        elif not any_val:
            self.note.setText("Validation score per epoch is recorded when early stopping is on. "
                              "Band: ±1 sd over folds.")
        else:
            self.note.setText("Lines: mean over folds and repeats; band: ±1 sd.")
        self.val_plot.setVisible(any_val or not self._series)


class SpreadPanel(_Panel):
    """Every fold score of each configuration, with its mean and ±1 sd."""

    def __init__(self, parent=None):
        super().__init__("Fold scores", parent)
        self.plot = self._plot("score")
        self._finish()
        self._scatters: list[pg.ScatterPlotItem] = []
        self.set_series([])

    def plots(self):
        return [self.plot]

    def scatter_items(self) -> list[pg.ScatterPlotItem]:
        return list(self._scatters)

    def set_series(self, series: list[dict]) -> None:
        self._series = list(series)
        self.plot.clear()
        self._scatters = []
        ticks = []
        fg = QColor(self.theme.plot_fg)
        for i, s in enumerate(self._series):
            color = self.theme.series_color(s["color"])
            scores = np.asarray([v for v in s.get("fold_scores", []) if v is not None], float)
            scores = scores[np.isfinite(scores)]
            x0 = float(i + 1)
            if len(scores):
                # spread the points sideways in a fixed pattern so equal scores stay visible
                offs = (np.arange(len(scores)) % 5 - 2) * 0.06
                sc = pg.ScatterPlotItem(x0 + offs, scores, size=7, brush=_alpha(color, 170),
                                        pen=_pen(color, 1))
                self.plot.addItem(sc)
                self._scatters.append(sc)
            m, sd = s.get("mean"), s.get("sd")
            if m is not None and math.isfinite(m):
                sd = sd if sd is not None and math.isfinite(sd) else 0.0
                err = pg.ErrorBarItem(x=np.array([x0 + 0.28]), y=np.array([m]),
                                      height=np.array([2 * sd]), beam=0.08, pen=_pen(fg, 1.5))
                self.plot.addItem(err)
                self.plot.addItem(pg.ScatterPlotItem([x0 + 0.28], [m], symbol="d", size=9,
                                                     brush=fg, pen=None))
            ticks.append((x0, str(i + 1)))
        self.plot.getPlotItem().getAxis("bottom").setTicks([ticks])
        if self._series:
            self.plot.setXRange(0.4, len(self._series) + 0.7, padding=0)
            self.note.setText("Dots: one per fold and repeat. Diamond and bar: mean ± 1 sd. "
                              "Numbers follow the legend order.")
        else:
            self.note.setText("")


class HealthPanel(_Panel):
    """Per-layer dead and saturated shares (bars) and gradient norms (markers)."""

    def __init__(self, parent=None):
        super().__init__("Layer health", parent)
        self.share_plot = self._plot("% of units")
        self.share_plot.setYRange(0, 100, padding=0.02)
        self.grad_plot = self._plot("gradient norm", "hidden layer")
        self.grad_plot.setLogMode(y=True)
        self.hint = QLabel("")
        self.hint.setObjectName("hint")
        self.hint.setWordWrap(True)
        self.layout_.addWidget(self.hint)
        self._finish()
        self._bars: list[pg.BarGraphItem] = []
        self.set_series([])

    def plots(self):
        return [self.share_plot, self.grad_plot]

    def bar_items(self) -> list[pg.BarGraphItem]:
        return list(self._bars)

    def set_series(self, series: list[dict]) -> None:
        self._series = list(series)
        self.share_plot.clear()
        self.grad_plot.clear()
        self._bars = []
        n = max(1, len(self._series))
        width = 0.8 / n
        max_layers = 0
        max_grad = 0
        any_grad = False
        for i, s in enumerate(self._series):
            color = self.theme.series_color(s["color"])
            h = s.get("health") or {}
            dead = np.asarray(h.get("dead") or [], float) * 100.0
            sat = np.asarray(h.get("saturated") or [], float) * 100.0
            layers = max(len(dead), len(sat))
            max_layers = max(max_layers, layers)
            xs = np.arange(1, layers + 1) - 0.4 + width * (i + 0.5)
            if len(dead):
                b = pg.BarGraphItem(x=xs[:len(dead)] - width / 4, height=np.nan_to_num(dead),
                                    width=width / 2, brush=QBrush(color), pen=_pen(color, 1))
                self.share_plot.addItem(b)
                self._bars.append(b)
            if len(sat):
                b = pg.BarGraphItem(x=xs[:len(sat)] + width / 4, height=np.nan_to_num(sat),
                                    width=width / 2, brush=QBrush(color, Qt.BDiagPattern),
                                    pen=_pen(color, 1))
                self.share_plot.addItem(b)
                self._bars.append(b)
            # gradient norms: one per weight matrix (into each hidden layer, then the output)
            g = np.asarray(h.get("grad_norm") or [], float)
            gx = np.arange(1, len(g) + 1) - 0.4 + width * (i + 0.5)
            good = np.isfinite(g) & (g > 0)
            if good.any():
                any_grad = True
                max_grad = max(max_grad, len(g))
                self.grad_plot.plot(gx[good], g[good], pen=None, symbol="s",
                                    symbolBrush=color, symbolPen=None, symbolSize=8)
        ticks = [(k, f"layer {k}") for k in range(1, max_layers + 1)]
        self.share_plot.getPlotItem().getAxis("bottom").setTicks([ticks])
        gticks = [(k, f"layer {k}" if k <= max_layers else "output")
                  for k in range(1, max(max_grad, max_layers) + 1)]
        self.grad_plot.getPlotItem().getAxis("bottom").setTicks([gticks])
        if max_layers:
            self.share_plot.setXRange(0.5, max_layers + 0.5, padding=0)
        if max_grad:
            self.grad_plot.setXRange(0.5, max(max_grad, max_layers) + 0.5, padding=0)
        top = max([float(b.opts["height"].max()) for b in self._bars if len(b.opts["height"])]
                  or [0.0])
        # small shares stay visible: the axis ends just above the tallest bar (at least 10 %)
        self.share_plot.setYRange(0, min(100.0, max(10.0, top * 1.2)), padding=0.02)
        self.grad_plot.setVisible(any_grad or not self._series)
        hints = [h for s in self._series for h in s.get("hints", [])]
        self.hint.setText("\n".join(f"⚠ {h}" for h in hints[:4]))
        self.hint.setVisible(bool(hints))
        all_zero = all(not b.opts["height"].any() for b in self._bars) if self._bars else False
        if not self._series:
            self.note.setText("")
        elif all_zero:
            self.note.setText("No dead or saturated units in the selected configurations "
                              "(last epoch, mean over folds)."
                              + ("" if any_grad else " Gradient norms are recorded by the "
                                 "NumPy engine only."))
        else:
            self.note.setText("Solid bar: dead units (never active). Hatched bar: saturated "
                              "units (stuck on a flat part). Last epoch, mean over folds."
                              + ("" if any_grad else " Gradient norms are recorded by the "
                                 "NumPy engine only."))
