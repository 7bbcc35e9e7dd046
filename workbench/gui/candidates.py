"""Each candidate at its own best settings: the results document's ``candidates``.

Three groups -- each hidden activation, each output head, each hidden x head
pair -- and per candidate (as the core gives them, :mod:`workbench.sweep.verdict`):
the rank and raw CV mean of its best configuration, its selection-corrected
estimate with the 95 % interval (BBC-CV over that candidate's own
configurations, Tsamardinos, Greasidou & Borboudakis 2018), its robustness (the
mean over every setting it was tried with) and how many settings that is. The
rule-of-thumb values (the verdict's ``advised`` head, relu hidden layers) are
marked. Double-clicking a candidate selects its best configuration in the table.
"""

from __future__ import annotations

import math

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHeaderView,
    QLabel,
    QTreeWidget,
    QTreeWidgetItem,
    QVBoxLayout,
    QWidget,
)

#: the groups of the document's ``candidates``, in display order
GROUPS = (("hidden", "Hidden activation"), ("head", "Output head"),
          ("hidden_head", "Hidden × head"))
COLUMNS = ("Candidate", "Best rank", "Best mean", "Corrected (95% interval)", "Robustness",
           "Settings")
INDEX_ROLE = Qt.UserRole + 1


def _num(v) -> str:
    if v is None:
        return "–"
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "–"
    if not math.isfinite(v):
        return "–"
    return f"{v:.4g}" if abs(v) >= 1e4 else f"{v:.4f}"


class CandidatesView(QWidget):
    """The per-candidate view: a tree of the three groups."""

    #: the user asked to see a candidate's best configuration (its grid index)
    configurationChosen = Signal(int)

    def __init__(self, parent=None):
        super().__init__(parent)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(6, 6, 6, 6)
        lay.setSpacing(4)
        self.tree = QTreeWidget()
        self.tree.setColumnCount(len(COLUMNS))
        self.tree.setHeaderLabels(list(COLUMNS))
        self.tree.setRootIsDecorated(True)
        self.tree.setUniformRowHeights(True)
        self.tree.setAlternatingRowColors(True)
        self.tree.setSelectionMode(QAbstractItemView.SingleSelection)
        self.tree.setEditTriggers(QAbstractItemView.NoEditTriggers)
        hh = self.tree.header()
        hh.setStretchLastSection(False)
        hh.setSectionResizeMode(QHeaderView.ResizeToContents)
        hh.setSectionResizeMode(0, QHeaderView.Stretch)
        tips = ("Each value at its own best settings; ★ the rule of thumb",
                "Rank of the candidate's best configuration in the table",
                "Raw CV mean of its best configuration (optimistic: the best of its settings)",
                "Selection-corrected estimate and 95% interval: bootstrap bias-corrected CV "
                "over this candidate's own configurations (Tsamardinos et al. 2018)",
                "Mean over every setting the candidate was tried with",
                "Configurations (settings) the candidate was tried with")
        for i, tip in enumerate(tips):
            self.tree.headerItem().setToolTip(i, tip)
        self.tree.itemDoubleClicked.connect(self._chosen)
        lay.addWidget(self.tree, 1)
        self.note = QLabel("")
        self.note.setObjectName("muted")
        self.note.setWordWrap(True)
        lay.addWidget(self.note)
        self.set_results({})

    def _chosen(self, item: QTreeWidgetItem, _column: int) -> None:
        index = item.data(0, INDEX_ROLE)
        if index is not None:
            self.configurationChosen.emit(int(index))

    def set_results(self, meta: dict) -> None:
        """Show a results document's candidates (``ranked_rows(...)["meta"]``)."""
        shown = repr((meta.get("candidates"), meta.get("verdict"), bool(meta)))
        if shown == getattr(self, "_shown", None):
            return  # unchanged since the last ranking
        self._shown = shown
        self.tree.clear()
        cands = meta.get("candidates") or {}
        verdict = meta.get("verdict") or {}
        advised = {"hidden": (verdict.get("hidden") or {}).get("advised"),
                   "head": (verdict.get("output") or {}).get("advised")}
        for key, title in GROUPS:
            entries = cands.get(key) or []
            if not entries:
                continue
            group = QTreeWidgetItem([f"{title} ({len(entries)})"])
            font = group.font(0)
            font.setBold(True)
            group.setFont(0, font)
            group.setFirstColumnSpanned(False)
            self.tree.addTopLevelItem(group)
            for c in entries:
                group.addChild(self._item(key, c, advised))
            group.setExpanded(key != "hidden_head" or len(entries) <= 12)
        if self.tree.topLevelItemCount():
            self.note.setText(
                "Best mean: the raw CV mean of the candidate's best configuration. Corrected: "
                "that candidate's score corrected for having picked its best settings. "
                "Robustness: its mean over every setting it was tried with. Double-click a "
                "candidate to select its best configuration.")
        else:
            self.note.setText("Run or reopen a sweep to compare each hidden activation and "
                              "head at its own best settings." if not meta else
                              "No configuration has finished, so no candidate can be compared.")

    @staticmethod
    def _item(group: str, c: dict, advised: dict) -> QTreeWidgetItem:
        value = c.get("value")
        if group == "hidden_head":
            rule = list(value or []) == [advised.get("hidden"), advised.get("head")]
        else:
            rule = value == advised.get(group)
        corr = c.get("corrected") or {}
        if corr.get("estimate") is not None:
            corrected = f"{_num(corr['estimate'])} ({_num(corr['low'])}–{_num(corr['high'])})"
        else:
            corrected = "n/a"
        item = QTreeWidgetItem([("★ " if rule else "") + str(c.get("label") or value),
                                "" if c.get("best_rank") is None else str(c["best_rank"]),
                                _num(c.get("best_mean")), corrected, _num(c.get("robustness")),
                                str(c.get("n_settings", ""))])
        for col in range(1, len(COLUMNS)):
            item.setTextAlignment(col, Qt.AlignRight | Qt.AlignVCenter)
        if corr and corr.get("estimate") is None:
            item.setToolTip(3, str(corr.get("method") or ""))
        if rule:
            item.setToolTip(0, "the rule of thumb")
        item.setData(0, INDEX_ROLE, c.get("best_index"))
        return item

    def text(self) -> str:
        """Everything the tree shows, one line per item (for tests)."""
        out = []
        for i in range(self.tree.topLevelItemCount()):
            g = self.tree.topLevelItem(i)
            out.append(g.text(0))
            for j in range(g.childCount()):
                it = g.child(j)
                out.append("  " + " | ".join(it.text(k) for k in range(len(COLUMNS))))
        return "\n".join(out)
