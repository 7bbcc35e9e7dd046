"""The report's diagnosis and calibration sections (part of :mod:`workbench.export.report`).

Both read only the results document: each configuration's ``diagnosis``
(:func:`workbench.sweep.diagnosis.add_diagnoses`, the same words the command line
and the window show) and ``calibration``
(:func:`workbench.sweep.calibration.add_summaries`, from the stored out-of-fold
predictions):

- *Diagnosis*: every finding of the exported configuration, then those of each
  other configuration that does not train normally;
- *Calibration* (classifiers): the reliability curves of the exported
  configuration and the leading ones over the diagonal of perfect calibration,
  with a table of Brier score and log-loss;
- *Residuals* (regressors): the binned predicted-vs-actual means over the line
  y = x, and the median residual per bin with its 10th-90th percentile band,
  with a table of RMSE, MAE and mean residual.
"""

from __future__ import annotations

from workbench.export.report import _figure, _img, _label, _num, _plain, _png, esc

#: at most this many configurations in the calibration figures and table
MAX_CALIBRATED = 6
#: at most this many other configurations' findings are listed
MAX_DIAGNOSED = 12


def _diverged(c: dict) -> bool:
    return "diverged" in ((c.get("diagnosis") or {}).get("codes") or [])


def _shown(results: dict, chosen: dict) -> list[dict]:
    """The exported configuration first, then the leading ones with a summary; diverged
    configurations are left out (their predictions would flatten the others' axes)."""
    cfgs = [chosen] + [c for c in results["configurations"]
                       if c["index"] != chosen["index"] and not _diverged(c)]
    return [c for c in cfgs if c.get("calibration")][:MAX_CALIBRATED]


def _name(results: dict, c: dict) -> str:
    """The report's label, with the learning rate and L2 strength when the sweep varies them."""
    cfgs = results["configurations"]
    extra = "".join(f" {w} {c[k]:g}" for k, w in (("learning_rate", "lr"), ("alpha", "L2"))
                    if len({x[k] for x in cfgs}) > 1)
    return _label(c) + extra


def calibration_png(results: dict, chosen: dict) -> str | None:
    """Reliability curves (classifiers) or binned predicted vs actual and residuals
    (regressors) of the exported and leading configurations."""
    shown = _shown(results, chosen)
    if not shown:
        return None
    if shown[0]["calibration"]["kind"] == "classification":
        fig, (ax,) = _figure(5.2, 4.2)
        ax.plot([0, 1], [0, 1], ls="--", color="#999999", lw=1)
        for c in shown:
            rel = c["calibration"]["reliability"]
            ax.plot(rel["predicted"], rel["observed"], marker="o", ms=4,
                    lw=2.2 if c["index"] == chosen["index"] else 1.2, label=_plain(_name(results, c)))
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_xlabel(_plain("mean predicted " + shown[0]["calibration"]["event_words"]))
        ax.set_ylabel("observed frequency")
        ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0)
        return _png(fig)
    fig, (a1, a2) = _figure(10, 3.8, 2)
    lo = min(min(c["calibration"]["bins"]["predicted"] + c["calibration"]["bins"]["actual"])
             for c in shown)
    hi = max(max(c["calibration"]["bins"]["predicted"] + c["calibration"]["bins"]["actual"])
             for c in shown)
    a1.plot([lo, hi], [lo, hi], ls="--", color="#999999", lw=1)
    a2.axhline(0.0, ls="--", color="#999999", lw=1)
    for c in shown:
        b = c["calibration"]["bins"]
        width = 2.2 if c["index"] == chosen["index"] else 1.2
        line, = a1.plot(b["predicted"], b["actual"], marker="o", ms=4, lw=width,
                        label=_plain(_name(results, c)))
        a2.plot(b["predicted"], b["residual_median"], marker="o", ms=3, lw=width,
                color=line.get_color())
        if c["index"] == chosen["index"]:
            a2.fill_between(b["predicted"], b["residual_low"], b["residual_high"],
                            color=line.get_color(), alpha=0.18, lw=0)
    a1.set_xlabel("predicted (mean per bin of equal count)")
    a1.set_ylabel("actual (mean per bin)")
    a2.set_xlabel("predicted (mean per bin)")
    a2.set_ylabel("residual: actual minus predicted")
    a2.set_title("median per bin; band: 10th to 90th percentile (exported)", fontsize=8)
    a1.legend(fontsize=7)
    return _png(fig)


def calibration_section(results: dict, chosen: dict) -> list[str]:
    """The section's HTML: heading, what it shows, the figure and the table."""
    shown = _shown(results, chosen)
    if not shown:
        return ["<h2>Calibration and residuals</h2>",
                "<p class=\"muted\">No out-of-fold predictions are stored for this sweep.</p>"]
    kind = shown[0]["calibration"]["kind"]
    out = []
    w = out.append
    if kind == "classification":
        w("<h2>Calibration</h2>")
        w("<p>From the stored out-of-fold predictions (every row predicted by models that "
          "never saw it, pooled over the repeats): the reliability curve cuts the predicted "
          f"{esc(shown[0]['calibration']['event_words'])} into ten equal bins and compares "
          "each bin's mean prediction with how often the event happened; on the diagonal the "
          "probabilities can be taken at their word. Brier score (Brier 1950) and log-loss: "
          "lower is better.</p>")
        w(_img(calibration_png(results, chosen), "reliability curves"))
        w("<table><tr><th>configuration</th><th>rows</th><th>Brier score</th><th>log-loss</th>"
          "</tr>")
        for c in shown:
            s = c["calibration"]
            w(f"<tr><td>{esc(_name(results, c))}</td><td class=\"num\">{esc(s['rows'])}</td>"
              f"<td class=\"num\">{_num(s['brier'])}</td>"
              f"<td class=\"num\">{_num(s['log_loss'])}</td></tr>")
    else:
        w("<h2>Residuals</h2>")
        w("<p>From the stored out-of-fold predictions (every row predicted by models that "
          "never saw it, pooled over the repeats), in ten bins of equal count of the "
          "predictions: on the dashed line the predictions are right on average; the "
          "residual is the actual value minus the prediction (positive: predicted too "
          "low).</p>")
        w(_img(calibration_png(results, chosen), "predicted against actual, and residuals"))
        w("<table><tr><th>configuration</th><th>rows</th><th>RMSE</th><th>MAE</th>"
          "<th>mean residual</th></tr>")
        for c in shown:
            s = c["calibration"]
            w(f"<tr><td>{esc(_name(results, c))}</td><td class=\"num\">{esc(s['rows'])}</td>"
              f"<td class=\"num\">{_num(s['rmse'], '.4g')}</td>"
              f"<td class=\"num\">{_num(s['mae'], '.4g')}</td>"
              f"<td class=\"num\">{_num(s['bias'], '+.4g')}</td></tr>")
    w("</table>")
    left = [c for c in results["configurations"] if _diverged(c) and c.get("calibration")
            and c["index"] != chosen["index"]]
    if left:
        w(f"<p class=\"muted\">Left out as diverged: "
          f"{esc(', '.join(_name(results, c) for c in left))} (see the diagnosis).</p>")
    return out


def diagnosis_words(c: dict) -> str:
    """A configuration's diagnosis in a few words (the ranked table's column)."""
    return (c.get("diagnosis") or {}).get("text") or "–"


def diagnosis_section(results: dict, chosen: dict) -> list[str]:
    """Every finding of the exported configuration, then the others' that need a look."""
    out = ["<h2>Diagnosis</h2>",
           "<p>Why each configuration trains as it does, from its stored learning curves, "
           "layer health, fold scores and out-of-fold predictions (the rules and where "
           "their thresholds come from are listed in the program's "
           "<code>workbench.sweep.diagnosis</code>).</p>"]
    w = out.append
    d = chosen.get("diagnosis") or {}
    w(f"<p><b>The exported configuration, {esc(_name(results, chosen))}</b>:</p><ul>")
    for f in d.get("findings") or []:
        w(f"<li>{esc(f['text'])}</li>")
    w("</ul>")
    others = [c for c in results["configurations"] if c["index"] != chosen["index"]
              and (c.get("diagnosis") or {}).get("codes") not in (None, ["normal"])]
    if others:
        w("<p><b>Other configurations that do not train normally</b>:</p><ul>")
        for c in others[:MAX_DIAGNOSED]:
            texts = "; ".join(f["text"] for f in c["diagnosis"]["findings"])
            w(f"<li><b>{esc(_name(results, c))}</b>: {esc(texts)}</li>")
        w("</ul>")
        if len(others) > MAX_DIAGNOSED:
            w(f"<p class=\"muted\">and {esc(len(others) - MAX_DIAGNOSED)} more (the ranked "
              "table's diagnosis column names them all).</p>")
    else:
        n = len(results["configurations"]) - 1
        w(f"<p>The other {esc(n)} configuration(s) train normally.</p>" if n > 0 else "")
    return [x for x in out if x]


__all__ = ["calibration_png", "calibration_section", "diagnosis_section", "diagnosis_words"]
