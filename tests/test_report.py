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

import numpy as np
import pytest
from export_helpers import FORMULA_COL, REG_TARGET, SCRIPT_COL, make_sweep

from workbench.export import report
from workbench.export.bundle import export_configuration
from workbench.nets.activations import LOSS_LABELS

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


def _curve_trials(index, loss, held, score, status="done"):
    return [{"config_index": index, "status": status, "test_score": score[-1] if score else None,
             "history": {"loss": loss, "test_loss": held, "test_score": score}}
            for _ in range(2)]


def test_learning_curves_draw_training_and_held_out_together_with_named_axes():
    """The chosen configuration's mean training loss (solid) and held-out loss (dashed, the
    same values as recorded), the held-out score on the right; the axes carry the loss's
    and the metric's names. A configuration with another loss is left off the loss axis."""
    chosen = {"index": 0, "rank": 1, "hidden": "relu", "head": "logistic", "layers": [8]}
    other = dict(chosen, index=1, rank=2, hidden="tanh")
    by_cfg = {0: _curve_trials(0, [0.7, 0.5, 0.4], [0.69, 0.6, 0.62], [0.6, 0.7, 0.72]),
              1: _curve_trials(1, [0.7, 0.6, 0.55], [0.7, 0.65, 0.6], [0.55, 0.6, 0.66])}
    fig = report.learning_curve_figure(chosen, by_cfg, [chosen, other], "classification",
                                       "roc_auc")
    a1, a2 = fig.axes
    assert a1.get_ylabel() == LOSS_LABELS["log_loss"]  # the registry's name of the loss
    assert a2.get_ylabel() == "roc_auc (greater is better)"
    solid = [ln for ln in a1.get_lines() if ln.get_linestyle() == "-"]
    dashed = [ln for ln in a1.get_lines() if ln.get_linestyle() == "--"]
    assert len(solid) == len(dashed) == 2
    assert list(solid[0].get_ydata()) == [0.7, 0.5, 0.4]
    assert list(dashed[0].get_ydata()) == [0.69, 0.6, 0.62]  # the chosen one's held-out loss
    assert dashed[0].get_color() == solid[0].get_color()
    assert [list(ln.get_ydata()) for ln in a2.get_lines()] == [[0.6, 0.7, 0.72],
                                                              [0.55, 0.6, 0.66]]
    # a regression head on another target scale is not drawn on the classifier's loss axis
    odd = dict(other, head="identity")
    fig = report.learning_curve_figure(chosen, by_cfg, [chosen, odd], "regression", "r2")
    assert fig.axes[0].get_ylabel() == "half squared error, target scaled to [0, 1]"
    assert len(fig.axes[0].get_lines()) == 2


def test_learning_curves_without_held_out_curves_show_every_fold():
    chosen = {"index": 0, "rank": 1, "hidden": "relu", "head": "identity", "layers": [8]}
    by_cfg = {0: _curve_trials(0, [1.0, 0.5], [], [])}
    fig = report.learning_curve_figure(chosen, by_cfg, [chosen], "regression", "r2")
    a1, a2 = fig.axes
    assert [ln.get_linestyle() for ln in a1.get_lines()] == ["-"]
    assert len(a2.get_lines()) == 2  # each fold's training loss
    assert a2.get_ylabel() == "half squared error, target in sd units"


def test_health_curves_sit_at_the_epochs_they_were_measured_after():
    """history["health_epoch"] places each measurement; the mean over folds at an epoch
    only one fold measured is that fold's value (arithmetic mean, NumPy's nanmean)."""
    a = [[0.0], [0.2], [0.4]]  # measured after epochs 1, 2, 5
    b = [[0.1], [0.3], [0.5]]  # after epochs 1, 2, 3
    xs, (curve,) = report._layer_means([a, b], [[1, 2, 5], [1, 2, 3]])
    assert xs.tolist() == [1, 2, 3, 5]
    np.testing.assert_allclose(curve, [0.05, 0.25, 0.5, 0.4])
    xs, (curve,) = report._layer_means([a], [None])  # older stores: every epoch
    assert xs.tolist() == [1, 2, 3]
