"""The diagnosis and calibration in every view: the results JSON, the printed table and the
HTML report say what the core computed, for the configuration it computed it for.

References: the results document itself (each view must repeat its words and numbers
for the right configuration); the standard library's :class:`html.parser.HTMLParser`
for the report's tags; scikit-learn's ``brier_score_loss`` for the classifier's
numbers shown in the report.
"""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import brier_score_loss

from workbench.commands.show import format_results
from workbench.export.report import render_report
from workbench.sweep.plan import build_plan
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store

ALLOWED_TAGS = {"html", "head", "meta", "title", "style", "body", "h1", "h2", "p", "b", "i",
                "div", "ul", "li", "table", "tr", "th", "td", "img", "code"}


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.rows, self._row, self._cell = [], [], None, None

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "tr":
            self._row = []
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._row is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        elif tag == "tr" and self._row is not None:
            self.rows.append(self._row)
            self._row = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _parse(text):
    p = _Tags()
    p.feed(text)
    p.close()
    return p


@pytest.fixture(scope="module")
def regression(tmp_path_factory):
    d = tmp_path_factory.mktemp("views")
    rng = np.random.default_rng(0)
    X = rng.standard_normal((150, 5))
    y = X[:, 0] - 0.5 * X[:, 1] + 0.3 * X[:, 2] ** 2 + 0.1 * rng.standard_normal(150)
    pd.DataFrame(X, columns=[f"x{i}" for i in range(5)]).assign(target=y).to_csv(
        d / "t.csv", index=False)
    plan = build_plan(d / "t.csv", "target", hidden="relu", output="identity", layers=["16"],
                      learning_rates=["0.01", "0.00001", "8"], folds=3, repeats=1, epochs=40)
    st = Store(d / "s.sqlite")
    sid = run_sweep(plan, store=st, backend="inline").sweep_id
    res = sweep_results(st, sid, n_boot=50)
    trials = st.trials(sid)
    yield res, trials
    st.close()


@pytest.fixture(scope="module")
def binary(tmp_path_factory):
    d = tmp_path_factory.mktemp("cancer")
    load_breast_cancer(as_frame=True).frame.to_csv(d / "c.csv", index=False)
    plan = build_plan(d / "c.csv", "target", hidden="relu,tanh", layers=["4"], folds=3,
                      repeats=1, epochs=8, learning_rates=["0.01"], metric="roc_auc")
    st = Store(d / "s.sqlite")
    sid = run_sweep(plan, store=st, backend="inline").sweep_id
    res = sweep_results(st, sid, n_boot=50)
    oof = st.out_of_fold(sid)
    yield res, st.trials(sid), oof
    st.close()


def test_the_json_carries_a_diagnosis_and_calibration_for_every_configuration(regression):
    res, _ = regression
    text = json.dumps(res, allow_nan=False)  # plain JSON, as sweep --json writes it
    back = json.loads(text)
    for c in back["configurations"]:
        d = c["diagnosis"]
        assert d["codes"] and d["text"] and len(d["findings"]) == len(d["codes"])
        assert c["calibration"]["kind"] == "regression"
    by_lr = {c["learning_rate"]: c for c in back["configurations"]}
    assert by_lr[8.0]["diagnosis"]["codes"][0] == "diverged"
    assert by_lr[0.01]["diagnosis"]["text"] == "trains normally"


def test_the_printed_table_gives_each_rank_its_own_diagnosis(regression):
    res, _ = regression
    text = format_results(res)
    assert max(len(line) for line in text.splitlines()) <= 100
    words = {c["rank"]: c["diagnosis"]["text"] for c in res["configurations"]}
    header = next(line for line in text.splitlines() if line.startswith("rank"))
    if "diagnosis" in header:  # in the table: the last column of each configuration's row
        start = header.index("diagnosis")
        rows = [line for line in text.splitlines() if re.match(r"^\d+ ", line)]
        assert {int(r.split()[0]): r[start:].strip() for r in rows} == words
    else:  # below it
        for rank, w in words.items():
            assert f"  rank {rank}: {w}" in text.splitlines()
    narrow = format_results(res, width=70)
    for rank, w in words.items():
        assert f"  rank {rank}: {w}" in narrow.splitlines()


def test_the_report_has_a_diagnosis_column_the_findings_and_the_residuals(regression):
    res, trials = regression
    ranked = res["configurations"]
    chosen = ranked[0]
    html_text = render_report(res, chosen, None, trials)
    p = _parse(html_text)
    assert set(p.tags) <= ALLOWED_TAGS
    header = next(r for r in p.rows if r and r[0] == "rank" and "status" in r)  # the ranking
    col = header.index("diagnosis")
    body = [r for r in p.rows if len(r) == len(header) and r[0].isdigit()]
    assert {int(r[0]): r[col] for r in body} == {c["rank"]: c["diagnosis"]["text"]
                                                 for c in ranked}
    for c in ranked:
        for f in c["diagnosis"]["findings"]:
            if c is chosen or c["diagnosis"]["codes"] != ["normal"]:
                assert f["text"] in html_text.replace("&#x27;", "'")
    assert "<h2>Residuals</h2>" in html_text
    table = next(i for i, r in enumerate(p.rows) if r[:3] == ["configuration", "rows", "RMSE"])
    first = p.rows[table + 1]
    assert float(first[2]) == pytest.approx(chosen["calibration"]["rmse"], rel=1e-3)
    assert float(first[4]) == pytest.approx(chosen["calibration"]["bias"], rel=1e-3, abs=1e-4)
    # the diverged configuration is named, not drawn
    wild = next(c for c in ranked if c["learning_rate"] == 8.0)
    assert "Left out as diverged" in html_text and f"lr {wild['learning_rate']:g}" in html_text


def test_the_report_shows_the_classifiers_calibration(binary):
    res, trials, oof = binary
    chosen = res["configurations"][-1]
    html_text = render_report(res, chosen, None, trials)
    assert "<h2>Calibration</h2>" in html_text
    p = _parse(html_text)
    table = next(i for i, r in enumerate(p.rows) if r[:3] == ["configuration", "rows",
                                                               "Brier score"])
    first = p.rows[table + 1]  # the exported configuration comes first
    j = list(oof.columns).index(chosen["index"])
    proba = np.concatenate([pred[:, j, :] for pred in oof.predictions]).astype(float)
    y = np.concatenate([oof.y for _ in oof.predictions])
    assert float(first[2]) == pytest.approx(brier_score_loss(y, proba[:, 1]), abs=1e-4)
    assert int(first[1]) == len(y)


def test_the_results_csv_has_the_diagnosis_column(regression, tmp_path):
    import csv

    from workbench.export.results_csv import CONFIGURATIONS_CSV, write_results_csv

    res, trials = regression
    write_results_csv(res, trials, res["configurations"][0]["index"], tmp_path)
    with open(tmp_path / CONFIGURATIONS_CSV, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert {int(r["index"]): r["diagnosis"] for r in rows} == {
        c["index"]: c["diagnosis"]["text"] for c in res["configurations"]}
