"""A self-contained HTML report of an exported configuration.

:func:`render_report` returns one HTML document with everything inline: the
style sheet, and the figures as PNG images embedded as ``data:`` URIs, drawn
with Matplotlib's Agg canvas (the core never imports Qt). It holds

- cautions: the scores are cross-validated estimates; check the model on fresh
  data; follow your domain's review rules before it drives decisions;
- the verdict on the rules of thumb, in the words every view shows
  (:func:`workbench.sweep.results.verdict_statements`): the output head and the
  hidden activation against the best alternatives, the recommended
  configuration and why, the winner's honest (selection-corrected) score;
  what matters on this table, as a bar chart of the factors' shares; the
  baselines compared with the best network; the warnings;
- the table (file, fingerprint, columns with their detected type and role) and
  the target (kind and the rule that decided it);
- the intake's advice for the output head and whether the exported
  configuration followed it;
- the ranked configurations with mean ± sd, the corrected t-test p-value,
  the tie group (configurations not distinguishable from the best), the
  Bayesian decision against the best, epochs run and the train-test gap
  (``underfit`` when the training score itself is poor);
- learning curves (training and held-out loss, and the held-out score, per
  epoch, mean over folds; :func:`learning_curve_png`), the fold spread of
  the test scores per configuration, and per-layer health (dead and saturated
  units, gradient norms);
- the diagnosis of every configuration (a column of the ranked table, and the
  findings in sentences) and the calibration (classifiers) or residuals
  (regressors) from the stored out-of-fold predictions
  (:mod:`workbench.export.report_diagnosis`).

Safety: every string that comes from the user's data (column names, category
labels, file names, error messages) passes through :func:`html.escape`, and a
Content-Security-Policy forbids scripts, so the report never carries live
markup whatever the table contains.
"""

from __future__ import annotations

import base64
import html
import io
import math

import numpy as np

#: the report's file name in an export folder
REPORT_NAME = "report.html"

CAUTIONS = (
    "These scores are cross-validated estimates from one table: they say how the "
    "configuration did on held-out folds of that table, not how it will do on tomorrow's data.",
    "Check the model on fresh data (rows collected after the sweep, or a hold-out the sweep "
    "never saw) before relying on it.",
    "Follow the review rules of your domain (validation, documentation, sign-off) before the "
    "model drives decisions.",
)

_STYLE = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;margin:2em auto;max-width:70em;
color:#1d1d1f;line-height:1.45;padding:0 1em}
h1{font-size:1.5em}h2{font-size:1.2em;margin-top:2em;border-bottom:1px solid #ccc}
table{border-collapse:collapse;margin:.5em 0;font-size:.9em}
th,td{border:1px solid #ccc;padding:.25em .6em;text-align:left;vertical-align:top}
th{background:#f2f2f2}tr.chosen td{font-weight:600;background:#eef6ff}
tr.tied td:first-child{border-left:4px solid #2a7ab0}
td.best,td.equivalent{color:#1b6e2a;font-weight:600}td.undecided{color:#8a6d00}
td.worse,td.better{color:#a12a2a}
.warning{background:#fdecea;border:1px solid #d9534f;padding:.6em 1em;border-radius:4px}
.caution{background:#fff6e0;border:1px solid #e0b040;padding:.6em 1em;border-radius:4px}
.num{text-align:right;font-variant-numeric:tabular-nums}
img{max-width:100%;height:auto;border:1px solid #eee}
.muted{color:#666;font-size:.9em}
"""

#: at most this many configurations in the fold-spread and curve plots
MAX_PLOTTED = 12


def esc(value) -> str:
    """HTML-escape any value (quotes included), ``None`` as an en dash."""
    if value is None:
        return "–"
    return html.escape(str(value), quote=True)


def _num(v, fmt=".4f") -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "–"
    return esc(format(v, fmt))


def _pct(v) -> str:
    return "–" if v is None else esc(f"{100 * float(v):.0f}%")


def _p(v) -> str:
    """A p-value as the command line prints it: below 0.0005 reads <0.001."""
    return "&lt;0.001" if v is not None and 0 <= v < 5e-4 else _num(v, ".3f")


def _gap(c: dict) -> str:
    return "underfit" if c.get("underfit") else _num(c.get("train_test_gap"), "+.3f")


def _label(c: dict) -> str:
    layers = ",".join(str(s) for s in c["layers"])
    return f"#{c['rank']} {c['hidden']}/{c['head']} [{layers}]"


# --------------------------------------------------------------------------- figures


def _png(fig) -> str:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=96, bbox_inches="tight")
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _figure(w=8.0, h=3.6, ncols=1):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(w, h))
    axes = [fig.add_subplot(1, ncols, i + 1) for i in range(ncols)]
    return fig, axes


def _plain(text: str) -> str:
    # Matplotlib reads $...$ as mathematics: keep labels literal
    return str(text).replace("$", r"\$")


def _mean_curve(trials: list[dict], key: str) -> np.ndarray | None:
    """The per-epoch mean over the trials of ``history[key]`` (NaN-aware; a trial that
    stopped early leaves its later epochs out), or None when none recorded it."""
    import warnings

    curves = [t["history"][key] for t in trials if (t.get("history") or {}).get(key)]
    if not curves:
        return None
    n = max(len(x) for x in curves)
    m = np.full((len(curves), n), np.nan)
    for i, x in enumerate(curves):
        m[i, :len(x)] = [np.nan if v is None else v for v in x]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmean(m, axis=0)


def _loss_words(task: str | None, head: str) -> tuple[str, str]:
    """``(kind, words)`` of a head's training loss (:func:`workbench.sweep.diagnosis.loss_kind`)."""
    from workbench.sweep.diagnosis import loss_kind

    try:
        return loss_kind(task or "regression", head)
    except (KeyError, ValueError):
        return head, "training loss"


def learning_curve_png(chosen: dict, trials_by_cfg: dict, ranked: list[dict],
                       task: str | None = None, metric: str | None = None) -> str | None:
    """:func:`learning_curve_figure` as an embedded PNG (None when nothing was recorded)."""
    fig = learning_curve_figure(chosen, trials_by_cfg, ranked, task, metric)
    return None if fig is None else _png(fig)


def learning_curve_figure(chosen: dict, trials_by_cfg: dict, ranked: list[dict],
                          task: str | None = None, metric: str | None = None):
    """Training and held-out curves per epoch, mean over folds (a Matplotlib figure).

    Left: the training loss (solid) and the held-out fold's loss (dashed, the same loss
    in the same units) of the exported configuration and the leading ones whose loss
    is comparable (same loss and target scaling), the axis named by the loss. Right:
    the held-out fold's metric per epoch (``history["test_score"]``) of the leading
    configurations, the axis named by the metric; where no held-out curve was recorded
    (scikit-learn's engine, older sweeps) every fold's training loss of the exported
    configuration instead.
    """
    mine = [t for t in trials_by_cfg.get(chosen["index"], [])
            if (t.get("history") or {}).get("loss")]
    if not mine:
        return None
    kind, words = _loss_words(task, chosen["head"])
    leading = [chosen] + [c for c in ranked[:6] if c["index"] != chosen["index"]]
    fig, (a1, a2) = _figure(10, 3.8, 2)
    colours = {}
    any_test = False
    for c in leading:
        if _loss_words(task, c["head"])[0] != kind:
            continue  # another loss or target scale: not on this axis
        ts = trials_by_cfg.get(c["index"], [])
        train = _mean_curve(ts, "loss")
        if train is None:
            continue
        width = 2.2 if c["index"] == chosen["index"] else 1.0
        line, = a1.plot(np.arange(1, train.size + 1), train, lw=width,
                        label=_plain(_label(c)))
        colours[c["index"]] = line.get_color()
        held = _mean_curve([t for t in ts if t.get("status") == "done"], "test_loss")
        if held is not None:
            any_test = True
            a1.plot(np.arange(1, held.size + 1), held, lw=width, ls="--",
                    color=line.get_color())
    a1.set_title("training (solid) and held-out fold (dashed) loss\nmean over folds"
                 if any_test else "training loss, mean over folds", fontsize=9)
    a1.set_xlabel("epoch")
    a1.set_ylabel(_plain(words))
    lo, hi = a1.get_ylim()
    if lo > 0 and hi / lo > 20:
        a1.set_yscale("log")
    a1.legend(fontsize=7)
    scored = [(c, _mean_curve([t for t in trials_by_cfg.get(c["index"], [])
                               if t.get("status") == "done"], "test_score")) for c in leading]
    scored = [(c, v) for c, v in scored if v is not None]
    if scored:
        for c, v in scored:
            a2.plot(np.arange(1, v.size + 1), v, lw=2.2 if c["index"] == chosen["index"] else 1.0,
                    color=colours.get(c["index"]), label=_plain(_label(c)))
        a2.set_title("held-out fold's score, mean over folds\n(the last point is the "
                     "stored score)", fontsize=9)
        a2.set_ylabel(_plain(f"{metric or 'score'} (greater is better)"))
        if len(scored) > len(colours):
            a2.legend(fontsize=7)
    else:
        for t in mine:
            loss = [np.nan if v is None else v for v in t["history"]["loss"]]
            a2.plot(np.arange(1, len(loss) + 1), loss, lw=1, alpha=.7)
        a2.set_title(_plain(f"{_label(chosen)}: every fold's training loss"), fontsize=9)
        a2.set_ylabel(_plain(words))
    a2.set_xlabel("epoch")
    return fig


def fold_spread_png(ranked: list[dict], metric: str, chosen_index: int) -> str | None:
    """Test score of every fold, per configuration (best first); tie group in blue."""
    shown = [c for c in ranked if any(t["test_score"] is not None for t in c["trials"])]
    shown = shown[:MAX_PLOTTED]
    if not shown:
        return None
    fig, (ax,) = _figure(8, 0.9 + 0.35 * len(shown))
    rng = np.random.default_rng(0)
    for row, c in enumerate(shown):
        vals = [t["test_score"] for t in c["trials"] if t["test_score"] is not None]
        y = np.full(len(vals), float(row)) + rng.uniform(-.15, .15, len(vals))
        colour = "#2a7ab0" if c["tied_with_best"] else "#999999"
        ax.scatter(vals, y, s=14, color=colour, alpha=.8)
        if c["mean"] is not None:
            ax.plot([c["mean"]] * 2, [row - .3, row + .3], color="black",
                    lw=2.5 if c["index"] == chosen_index else 1.2)
    ax.set_yticks(range(len(shown)))
    ax.set_yticklabels([_plain(_label(c)) for c in shown], fontsize=8)
    ax.invert_yaxis()
    ax.set_xlabel(_plain(f"{metric} on each test fold (greater is better); bar = mean"))
    return _png(fig)


def _layer_means(series: list, epochs: list | None = None) -> tuple[np.ndarray, list[np.ndarray]]:
    """``series[fold][k][layer]`` measured after epochs ``epochs[fold][k]`` (1-based;
    default 1, 2, ...) -> the epochs any fold measured and one mean curve per layer over
    them (NaN-aware: a fold that did not measure an epoch is left out of its mean)."""
    import warnings

    epochs = [list(e) if e else list(range(1, len(s) + 1))
              for s, e in zip(series, epochs or [None] * len(series))]
    xs = np.array(sorted({int(x) for e in epochs for x in e}), dtype=int)
    where = {x: j for j, x in enumerate(xs)}
    n_layers = max((len(e) for s in series for e in s if e), default=0)
    curves = []
    for layer in range(n_layers):
        m = np.full((len(series), xs.size), np.nan)
        for i, (s, ep) in enumerate(zip(series, epochs)):
            for x, e in zip(ep, s):
                if e and layer < len(e) and e[layer] is not None:
                    m[i, where[int(x)]] = e[layer]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            curves.append(np.nanmean(m, axis=0))
    return xs, curves


def health_png(chosen: dict, trials: list[dict]) -> str | None:
    """Dead and saturated share per hidden layer, and gradient norm per weight layer,
    over the epochs they were measured after (``history["health_epoch"]``; mean over folds)."""
    hists = [t.get("history") or {} for t in trials]
    panels = [(key, [h for h in hists if h.get(key)]) for key in
              ("dead", "saturated", "grad_norm")]
    panels = [(k, s) for k, s in panels if s]
    if not panels:
        return None
    titles = {"dead": "dead units (share of the layer)",
              "saturated": "saturated units (share of the layer)",
              "grad_norm": "weight-gradient norm (probe rows)"}
    fig, axes = _figure(4.2 * len(panels), 3.2, len(panels))
    for ax, (key, hs) in zip(axes, panels):
        xs, curves = _layer_means([h[key] for h in hs], [h.get("health_epoch") for h in hs])
        for i, y in enumerate(curves):
            label = (f"layer {i + 1}" if key != "grad_norm" or i < len(curves) - 1
                     else "output layer")
            ax.plot(xs, y, label=label)
        if key == "grad_norm":
            finite = np.concatenate([c[np.isfinite(c)] for c in curves]) if curves else []
            if len(finite) and np.min(finite) > 0:
                ax.set_yscale("log")
        else:
            ax.set_ylim(-0.02, 1.02)
        ax.set_title(titles[key], fontsize=9)
        ax.set_xlabel("epoch")
        ax.legend(fontsize=7)
    return _png(fig)


def factors_png(results: dict) -> str | None:
    """Share of the spread between configurations explained by each swept factor, with
    the interactions (or rest) and, for scale, the share the folds' noise alone would
    give."""
    from workbench.sweep.factors import FACTOR_WORDS

    rows = [(FACTOR_WORDS.get(f["factor"], str(f["factor"])).removeprefix("the "),
             float(f["share"]), "#2a7ab0") for f in results.get("factors") or []]
    if not rows:
        return None
    rest = results.get("factors_rest")
    if rest and rest.get("share") is not None:
        rows.append((rest["label"], float(rest["share"]), "#999999"))
    noise = results.get("factors_noise")
    if noise and noise.get("share") is not None:
        rows.append(("folds' noise, for scale", float(noise["share"]), "#dddddd"))
    fig, (ax,) = _figure(6.0, 0.6 + 0.35 * len(rows))
    ax.barh(range(len(rows)), [min(100 * r[1], 100) for r in rows], color=[r[2] for r in rows])
    ax.set_yticks(range(len(rows)))
    ax.set_yticklabels([_plain(r[0]) for r in rows], fontsize=8)
    ax.invert_yaxis()
    ax.set_xlim(0, 100)
    ax.set_xlabel("share of the spread between configuration means (%)")
    for i, r in enumerate(rows):
        ax.text(min(100 * r[1], 88) + 1, i, f"{100 * r[1]:.0f}%", va="center", fontsize=8)
    return _png(fig)


# --------------------------------------------------------------------------- sections


def _verdict_sections(results: dict, chosen: dict) -> list[str]:
    """The verdict, the honest score, what matters, the baselines and the warnings."""
    from workbench.sweep.results import WARNING_CODES, verdict_heading, verdict_statements

    out = []
    w = out.append
    statements = verdict_statements(results)
    warnings = [s for s in statements if s["key"] in WARNING_CODES]
    w("<h2>Verdict on the rules of thumb</h2>")
    w(f"<p>{esc(verdict_heading(results))}</p><table>")
    for s in statements:
        if s in warnings or s["key"] == "factors":  # the factors have their own section
            continue
        w(f"<tr><th>{esc(s['label'])}</th><td>{esc(s['text'])}</td></tr>")
    w("</table>")
    rec = (results.get("verdict") or {}).get("recommended")
    if rec is not None:
        same = chosen["index"] == rec["index"]
        w(f"<p>The exported configuration (rank {esc(chosen['rank'])}) <b>"
          f"{'is' if same else 'is not'}</b> the recommended one"
          f"{'' if same else ' (rank ' + esc(rec['rank']) + ')'}.</p>")
    w("<p class=\"muted\">The winner's cross-validated mean is the best of many noisy "
      "estimates, so it is optimistic; the selection-corrected estimate (bootstrap "
      "bias-corrected cross-validation over the stored out-of-fold predictions, Tsamardinos, "
      "Greasidou &amp; Borboudakis 2018) estimates the score of picking the best this way.</p>")

    w("<h2>What matters on this table</h2>")
    w(f"<p>{esc(results.get('factors_sentence') or '')}</p>")
    png = factors_png(results)
    if png is not None:
        w(_img(png, "share of the spread per factor"))

    w("<h2>Baselines</h2>")
    baselines = results.get("baselines") or []
    if baselines:
        w("<p>Reference models on the same folds, preprocessing and metric, each compared "
          "with the best network by the same tests (difference = baseline minus the best "
          "network).</p>")
        w("<table><tr><th>baseline</th><th>model</th><th>mean ± sd</th><th>difference "
          "(95% interval)</th><th>p</th><th>P better / equivalent / worse</th>"
          "<th>decision</th><th>networks practically better</th></tr>")
        for b in baselines:
            iv = b.get("interval") or [None, None]
            probs = " / ".join(_num(b.get(k), ".2f") for k in ("p_better", "p_equivalent",
                                                               "p_worse"))
            dec = b.get("decision")
            w(f"<tr><td>{esc(b['name'])}</td><td>{esc(b['estimator'])}</td>"
              f"<td class=\"num\">{_num(b['mean'])} ± {_num(b['sd'])}</td>"
              f"<td class=\"num\">{_num(b.get('difference'))} ({_num(iv[0])} to "
              f"{_num(iv[1])})</td><td class=\"num\">{_p(b.get('p_value'))}</td>"
              f"<td class=\"num\">{probs}</td><td class=\"{esc(dec or '')}\">{esc(dec)}</td>"
              f"<td class=\"num\">{esc(b.get('n_networks_better'))}</td></tr>")
        w("</table>")
    else:
        w("<p class=\"muted\">This sweep ran no baselines.</p>")

    w("<h2>Warnings</h2>")
    if warnings:
        w("<div class=\"warning\"><ul>")
        for s in warnings:
            w(f"<li>{esc(s['text'])}</li>")
        w("</ul></div>")
    else:
        w("<p>None: a network beats both baselines, the folds have enough test rows and "
          "most configurations are decided.</p>")
    return out



def _layer_health_rows(trials: list[dict]) -> list[tuple]:
    per = {}
    for t in trials:
        h = t.get("health") or {}
        for key in ("dead", "saturated", "grad_norm"):
            for i, v in enumerate(h.get(key) or []):
                if v is not None:
                    per.setdefault(i, {}).setdefault(key, []).append(float(v))
    with_dead = [i for i, d in per.items() if d.get("dead")]
    n_hidden = max(with_dead) + 1 if with_dead else 0
    rows = []
    for i in sorted(per):
        d = per[i]
        # gradient norms cover every weight layer, the output layer last
        name = f"hidden {i + 1}" if i < n_hidden or not n_hidden else "output"
        rows.append((name, *(float(np.mean(d[k])) if d.get(k) else None
                             for k in ("dead", "saturated", "grad_norm"))))
    return rows


def _img(b64: str | None, alt: str) -> str:
    if b64 is None:
        return f'<p class="muted">{esc(alt)}: no per-epoch data was recorded.</p>'
    return f'<p><img alt="{esc(alt)}" src="data:image/png;base64,{b64}"></p>'


def render_report(results: dict, chosen: dict, configuration: dict | None, trials: list[dict],
                  profile: dict | None = None) -> str:
    """The report as one HTML document (string).

    Parameters
    ----------
    results : dict
        The sweep's ranked results (:meth:`workbench.sweep.store.Store.results`).
    chosen : dict
        The exported configuration (an entry of ``results["configurations"]``).
    configuration : dict, optional
        The export's ``configuration.json`` document (table, target, advice).
    trials : list of dict
        The sweep's stored trials with their history (:meth:`Store.trials`).
    profile : dict, optional
        The table's column profile (``TableProfile.to_dict()``).
    """
    conf = configuration or {}
    ranked = results["configurations"]
    by_cfg: dict[int, list[dict]] = {}
    for t in trials:
        by_cfg.setdefault(t["config_index"], []).append(t)
    mine = by_cfg.get(chosen["index"], [])
    table = conf.get("table", {})
    target = conf.get("target", {})
    advice = conf.get("advice")
    model = conf.get("model", {})
    metric = results["metric"]
    out = []
    w = out.append
    w("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">")
    w("<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
      "img-src data:; style-src 'unsafe-inline'\">")
    w(f"<title>{esc('Activation Workbench report: ' + str(results['target']))}</title>")
    w(f"<style>{_STYLE}</style></head><body>")
    w(f"<h1>Report: {esc(results['target'])} in {esc(table.get('file') or results['table'])}</h1>")
    w(f"<p class=\"muted\">Sweep {esc(results['sweep_id'])} ({esc(results['state'])}), created "
      f"{esc(results['created'])}; exported configuration at rank {esc(chosen['rank'])}.</p>")

    w("<h2>Cautions</h2><div class=\"caution\"><ul>")
    for c in CAUTIONS:
        w(f"<li>{esc(c)}</li>")
    w("</ul></div>")
    if "verdict" in results:
        out.extend(_verdict_sections(results, chosen))

    # ---------------------------------------------------------------- table and target
    w("<h2>Table and target</h2><table>")
    for k, v in (("file", table.get("file") or results["table"]), ("SHA-256", table.get("sha256")),
                 ("rows × columns", f"{table.get('rows', '?')} × {table.get('cols', '?')}"),
                 ("target", results["target"]), ("target kind", results["target_kind"]),
                 ("why this kind", target.get("rule")),
                 ("rows used / dropped (missing target)",
                  f"{target.get('rows_used', '?')} / {target.get('rows_dropped', '?')}")):
        w(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>")
    if target.get("classes"):
        w(f"<tr><th>classes</th><td>{esc(', '.join(str(c) for c in target['classes']))}</td></tr>")
    w("</table>")
    if profile and profile.get("columns"):
        w("<table><tr><th>column</th><th>type</th><th>role</th><th>missing</th><th>distinct</th>"
          "<th>note</th></tr>")
        for col in profile["columns"]:
            w(f"<tr><td>{esc(col.get('name'))}</td><td>{esc(col.get('type'))}</td>"
              f"<td>{esc(col.get('role'))}</td><td class=\"num\">{esc(col.get('missing'))}</td>"
              f"<td class=\"num\">{esc(col.get('distinct'))}</td>"
              f"<td>{esc(col.get('reason') or '')}</td></tr>")
        w("</table>")

    # ---------------------------------------------------------------- advice
    w("<h2>Advice and the exported configuration</h2>")
    if advice:
        followed = "followed" if advice.get("followed") else "did not follow"
        w(f"<p>The intake advised the <b>{esc(advice['output_head'])}</b> output head with "
          f"{esc(advice['loss'])} ({esc(advice.get('basis', 'common practice'))}): "
          f"{esc(str(advice['reason']).rstrip('.'))}.</p>")
        w(f"<p>The exported configuration <b>{esc(followed)}</b> the advice: it uses the "
          f"<b>{esc(chosen['head'])}</b> head.</p>")
        if advice.get("hidden_default"):
            same = "the usual default" if chosen["hidden"] == advice["hidden_default"] else (
                f"instead of the usual default, {advice['hidden_default']}")
            w(f"<p>Hidden layers: <b>{esc(chosen['hidden'])}</b>, {esc(same)}.</p>")
    w("<table>")
    rows = (("hidden activation", chosen["hidden"]), ("output head", chosen["head"]),
            ("loss", model.get("loss_label") or model.get("loss")),
            ("hidden layers", ",".join(str(s) for s in chosen["layers"])),
            ("layer shapes", " → ".join(f"{a}×{b}" for a, b in model.get("layer_shapes", []))),
            ("learning rate", f"{chosen['learning_rate']:g}"), ("alpha (L2)", f"{chosen['alpha']:g}"),
            ("engine", chosen["engine"]),
            (f"{metric} (mean ± sd over {chosen['n_scores']} folds)",
             f"{_num(chosen['mean'])} ± {_num(chosen['sd'])}"),
            ("rank", chosen["rank"]),
            ("tied with the best", "yes" if chosen["tied_with_best"] else "no"),
            ("decision against the best", chosen.get("decision")),
            ("epochs run (mean over folds)", None if chosen.get("mean_epochs") is None
             else f"{chosen['mean_epochs']:.0f}"))
    for k, v in rows:
        # _num already escaped its output; everything else is escaped here
        cell = v if k.startswith(metric) else esc(v)
        w(f"<tr><th>{esc(k)}</th><td>{cell}</td></tr>")
    w("</table>")

    # ---------------------------------------------------------------- ranking
    n_tied = sum(1 for c in ranked if c["tied_with_best"])
    corr = " with Holm's correction" if results.get("correction") == "holm" else ""
    w("<h2>Ranked configurations</h2>")
    w(f"<p>{esc(metric)}, greater is better. <b>Tie group</b> (marked ●): configurations the "
      f"Nadeau-Bengio corrected resampled t-test{esc(corr)} cannot tell apart from the best at "
      f"level {esc(results['significance_level'])} — {esc(n_tied)} of {esc(len(ranked))}. "
      "Choosing among them on the mean alone is chasing noise.</p>")
    if results.get("rope") is not None:
        w(f"<p><b>Decision</b>: the Bayesian correlated t-test against the best; "
          f"<i>equivalent</i> (or <i>worse</i>) when P &ge; "
          f"{esc(results['decision_threshold'])} that the difference is within (or below) "
          f"±{esc(format(results['rope'], '.4g'))}, otherwise <i>undecided</i>. "
          "<b>Gap</b>: mean training score minus mean test score; <i>underfit</i> when the "
          "training score itself is more than that region below the linear baseline's test "
          "score.</p>")
    w("<table><tr><th>rank</th><th>tie</th><th>hidden</th><th>head</th><th>layers</th><th>lr</th>"
      "<th>alpha</th><th>mean ± sd</th><th>p</th><th>decision</th><th>gap</th><th>epochs</th>"
      "<th>fit s</th><th>dead</th><th>sat.</th><th>engine</th><th>status</th>"
      "<th>diagnosis</th></tr>")
    from workbench.export.report_diagnosis import (
        calibration_section,
        diagnosis_section,
        diagnosis_words,
    )

    for c in ranked:
        cls = " ".join(x for x in ("chosen" if c["index"] == chosen["index"] else "",
                                   "tied" if c["tied_with_best"] else "") if x)
        w(f"<tr class=\"{cls}\"><td class=\"num\">{esc(c['rank'])}</td>"
          f"<td>{'●' if c['tied_with_best'] else ''}</td><td>{esc(c['hidden'])}</td>"
          f"<td>{esc(c['head'])}</td><td>{esc(','.join(str(s) for s in c['layers']))}</td>"
          f"<td class=\"num\">{esc(format(c['learning_rate'], 'g'))}</td>"
          f"<td class=\"num\">{esc(format(c['alpha'], 'g'))}</td>"
          f"<td class=\"num\">{_num(c['mean'])} ± {_num(c['sd'])}</td>"
          f"<td class=\"num\">{_p(c['p_value'])}</td>"
          f"<td class=\"{esc(c.get('decision') or '')}\">{esc(c.get('decision'))}</td>"
          f"<td class=\"num\">{_gap(c)}</td>"
          f"<td class=\"num\">{_num(c.get('mean_epochs'), '.0f')}</td>"
          f"<td class=\"num\">{_num(c['mean_fit_seconds'], '.2f')}</td>"
          f"<td class=\"num\">{_pct(c['dead'])}</td><td class=\"num\">{_pct(c['saturated'])}</td>"
          f"<td>{esc(c['engine'])}</td><td>{esc(c['status'])}</td>"
          f"<td>{esc(diagnosis_words(c))}</td></tr>")
    w("</table>")
    bad = [t for t in trials if t.get("error")]
    if bad:
        w(f"<p class=\"muted\">{esc(len(bad))} trial(s) diverged or failed; first message: "
          f"{esc(bad[0]['error'])}</p>")

    # ---------------------------------------------------------------- figures
    w("<h2>Learning curves</h2>")
    w("<p class=\"muted\">Left: the training loss (solid) and the held-out fold's loss "
      "(dashed: the rows each fold's model never trained on, the same loss in the same "
      "units), mean over folds, for the exported configuration and the leading ones whose "
      "loss is comparable. Right: the held-out fold's score per epoch. The held-out curves "
      "are shown for information only: nothing chose or stopped a model by them.</p>")
    w(_img(learning_curve_png(chosen, by_cfg, [c for c in ranked if c['mean'] is not None],
                              results.get("task"), metric), "learning curves"))
    w("<h2>Fold spread</h2>")
    w(_img(fold_spread_png(ranked, metric, chosen["index"]), "fold spread"))
    w("<h2>Per-layer health of the exported configuration</h2>")
    w("<p class=\"muted\">A unit is <i>dead</i> when its activation's derivative is zero on "
      "every probe row (it no longer learns); <i>saturated</i> when the derivative is below "
      "0.05 on most rows (it learns very slowly). Values are the last epoch's, averaged over "
      "folds.</p>")
    hrows = _layer_health_rows(mine)
    if hrows:
        w("<table><tr><th>layer</th><th>dead</th><th>saturated</th>"
          "<th>gradient norm</th></tr>")
        for layer, d, s, g in hrows:
            w(f"<tr><td class=\"num\">{esc(layer)}</td><td class=\"num\">{_pct(d)}</td>"
              f"<td class=\"num\">{_pct(s)}</td><td class=\"num\">{_num(g, '.3g')}</td></tr>")
        w("</table>")
    w(_img(health_png(chosen, mine), "layer health over epochs"))
    out.extend(diagnosis_section(results, chosen))
    out.extend(calibration_section(results, chosen))

    # ---------------------------------------------------------------- reproducibility
    ev = conf.get("evaluation", {})
    w("<h2>Reproducibility</h2><table>")
    for k, v in (("cross-validation", f"{ev.get('folds', '?')} folds × {ev.get('repeats', '?')} "
                                      f"repeats{' (stratified)' if ev.get('stratified') else ''}"),
                 ("seed", ev.get("seed")),
                 ("refit on every row with seed", (ev.get("final_fit") or {}).get("random_state"))):
        w(f"<tr><th>{esc(k)}</th><td>{esc(v)}</td></tr>")
    for lib, ver in (conf.get("libraries") or {}).items():
        w(f"<tr><th>{esc(lib)}</th><td>{esc(ver)}</td></tr>")
    w("</table><p class=\"muted\">Run <code>python reproduce.py</code> in the export folder to "
      "re-run the cross-validation and compare every fold score with the stored one.</p>")
    w("</body></html>\n")
    return "\n".join(out)
