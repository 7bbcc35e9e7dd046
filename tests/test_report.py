"""The HTML report: self-contained, escaped, with the required sections and figures.

References: :class:`html.parser.HTMLParser` (the standard library's HTML tokenizer)
finds every live tag and attribute; :func:`html.escape` is the escaping reference;
PNG files start with the 8-byte signature of RFC 2083 / ISO 15948.
"""

from __future__ import annotations

import base64
import html
import subprocess
import sys
from html.parser import HTMLParser

import pytest
from export_helpers import FORMULA_COL, REG_TARGET, SCRIPT_COL, make_sweep

from workbench.export import report
from workbench.export.bundle import export_configuration

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.attrs, self.text = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend(attrs)

    def handle_data(self, data):
        self.text.append(data)


def _parse(text):
    p = _Tags()
    p.feed(text)
    p.close()
    return p


ALLOWED_TAGS = {"html", "head", "meta", "title", "style", "body", "h1", "h2", "p", "b", "i",
                "div", "ul", "li", "table", "tr", "th", "td", "img", "code"}


def _assert_inert(text):
    p = _parse(text)
    assert set(p.tags) <= ALLOWED_TAGS, set(p.tags) - ALLOWED_TAGS
    assert "script" not in p.tags
    for name, value in p.attrs:
        assert not name.startswith("on"), name
        if name == "src":
            assert value.startswith("data:image/png;base64,")
        assert "javascript:" not in (value or "").lower()
    return p


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    base = tmp_path_factory.mktemp("report")
    store, sweep_id, table = make_sweep(base, "regression", dtype="float32")
    folder = export_configuration(store, sweep_id, "best", base / "out", formats="json,report")
    store.close()
    return (folder / "report.html").read_text(encoding="utf-8")


def test_hostile_column_names_give_no_live_markup(exported):
    p = _assert_inert(exported)
    text = "".join(p.text)
    # the names are shown, as text
    assert SCRIPT_COL in text and FORMULA_COL in text and REG_TARGET in text
    assert html.escape(SCRIPT_COL, quote=True) in exported
    assert "<script" not in exported.lower()


def test_report_sections_and_cautions(exported):
    text = "".join(_parse(exported).text)
    for caution in report.CAUTIONS:
        assert caution in text
    for heading in ("Table and target", "Advice and the exported configuration",
                    "Ranked configurations", "Learning curves", "Fold spread",
                    "Per-layer health", "Reproducibility"):
        assert heading in text
    assert "followed" in text and "Tie group" in text
    assert "Content-Security-Policy" in exported and "default-src 'none'" in exported


def test_figures_are_embedded_pngs(exported):
    p = _parse(exported)
    srcs = [v for n, v in p.attrs if n == "src"]
    assert len(srcs) == 5  # factors, learning curves, fold spread, layer health, residuals
    for s in srcs:
        data = base64.b64decode(s.split(",", 1)[1], validate=True)
        assert data.startswith(PNG_SIGNATURE) and len(data) > 2000
    # nothing is fetched from elsewhere
    assert "http://" not in exported.replace("http://evil.example", "")
    assert "https://" not in exported


def _results(name):
    trial = {"config_index": 0, "repeat": 0, "fold": 0, "test_score": 0.5, "train_score": 0.6,
             "status": "done", "epochs": 2, "error": None, "engine": "numpy",
             "history": {"loss": [1.0, 0.5], "dead": [[0.0], [0.5]],
                         "saturated": [[0.1], [0.2]], "grad_norm": [[1.0, 2.0], [0.5, 1.0]]},
             "health": {"dead": [0.5], "saturated": [0.2], "grad_norm": [0.5, 1.0]}}
    bad = dict(trial, config_index=1, status="failed", test_score=None,
               error=f"ValueError: column {name} could not be read")
    cfg = {"rank": 1, "index": 0, "hidden": "relu", "head": "identity", "layers": [3],
           "learning_rate": 0.001, "alpha": 1e-4, "engine": "numpy", "status": "done",
           "mean": 0.5, "sd": None, "n_scores": 1, "p_value": None, "p_value_holm": None,
           "tied_with_best": True, "mean_fit_seconds": 0.1, "train_mean": 0.6,
           "train_test_gap": 0.1, "dead": 0.5, "saturated": 0.2,
           "trials": [trial]}
    other = dict(cfg, rank=2, index=1, status="failed", mean=None, tied_with_best=False,
                 trials=[bad])
    res = {"sweep_id": "s<1>", "state": "finished", "metric": "r2", "table": f"/tmp/{name}.csv",
           "target": name, "task": "regression", "target_kind": "signed", "created": "now",
           "finished": "now", "significance_level": 0.05, "correction": "none",
           "configurations": [cfg, other]}
    return res, cfg, [trial, bad]


@pytest.mark.parametrize("name", ['<img src=x onerror="alert(1)">', "</table><script>x()</script>",
                                  '" onmouseover="alert(1)', "=HYPERLINK(\"http://e\")", "$x^2$"])
def test_every_user_string_is_escaped(name):
    res, cfg, trials = _results(name)
    profile = {"columns": [{"name": name, "type": "numeric", "role": "feature", "missing": 0,
                            "distinct": 3, "reason": name}]}
    conf = {"table": {"file": name}, "target": {"rule": name, "classes": [name, "b"]},
            "advice": {"output_head": "identity", "loss": "squared_error", "reason": name,
                       "followed": True}}
    out = report.render_report(res, cfg, conf, trials, profile=profile)
    p = _assert_inert(out)
    assert name in "".join(p.text)


def test_report_core_does_not_import_qt():
    code = ("import sys; from workbench.export import bundle, report\n"
            "fig, (ax,) = report._figure(); ax.plot([1, 2]); report._png(fig)\n"
            "bad = [m for m in sys.modules if m.split('.')[0] in "
            "('PySide6', 'pyqtgraph', 'shiboken6') or m == 'matplotlib.pyplot']\n"
            "print(bad); sys.exit(1 if bad else 0)")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=60)
    assert proc.returncode == 0, proc.stdout + proc.stderr
