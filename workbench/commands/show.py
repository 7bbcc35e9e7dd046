"""``workbench show SWEEP_ID [--store PATH] [--json] [--holm] [--rope R] [--cross-check
[--table PATH]]``.

Prints one stored sweep's results: the verdict on the rules of thumb above the
ranked table and the baselines, the same as ``workbench sweep`` prints at the
end, or with ``--json`` the same JSON object that ``workbench sweep --json``
writes (documented in README.md, section "Sweep results as JSON"). ``--rope``
sets the region of practical equivalence the decisions use (it is not stored
with the sweep; default per metric).

``--cross-check`` refits the recommended configuration on the sweep's folds and
seeds twice, with the engine in its scikit-learn mode and with scikit-learn's own
MLP, and prints per fold both scores, whether they agree to the parity tolerance
and the stored (fair-start) score, then the answer in one sentence
(:func:`workbench.sweep.cross_check.cross_check`); a configuration scikit-learn
cannot express gets one line saying why. With ``--json`` the results object gets
a ``cross_check`` member (:meth:`workbench.sweep.cross_check.CrossCheck.to_dict`).
``--table`` gives the sweep's table when its stored path no longer reaches it.

Exit status 0, or 2 for an unknown sweep, an unreadable store, a bad ``--rope``
or (with ``--cross-check``) a table that is missing or changed.
"""

from __future__ import annotations

import json
import math
import sys
import textwrap

NAME = "show"
HELP = "Print one stored sweep's ranked results (table or JSON)."


def add_arguments(parser):
    parser.add_argument("sweep_id", metavar="SWEEP_ID", help="a sweep id (see workbench history)")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="the store file (default: the user's data folder)")
    parser.add_argument("--json", action="store_true", help="print the results as one JSON object")
    parser.add_argument("--holm", action="store_true",
                        help="judge ties with Holm's correction for the number of comparisons")
    add_rope_argument(parser)
    parser.add_argument("--cross-check", action="store_true",
                        help="refit the recommended configuration on the sweep's folds with our "
                             "engine in scikit-learn's mode and with scikit-learn's MLP, and say "
                             "per fold whether the scores agree")
    parser.add_argument("--table", metavar="PATH", default=None,
                        help="the sweep's table for --cross-check, when its stored path no "
                             "longer reaches it (its SHA-256 must match)")


def add_rope_argument(parser):
    """``--rope R``, shared by ``show`` and ``sweep``."""
    parser.add_argument("--rope", metavar="R", default=None,
                        help="half-width of the region of practical equivalence, in the "
                             "metric's units: differences within it do not matter (default: "
                             "0.01 for accuracy, ROC AUC, R2 and other scores on [0, 1]; 1%% "
                             "of the constant baseline's score for error scores)")


def _fmt(v, spec=".4f"):
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    if spec.endswith("f") and abs(v) >= 1e4:  # a runaway score: 4 significant digits
        spec = spec[:-1].split(".")[0] + ".4g"
    return format(v, spec)


def _pct(v):
    return "-" if v is None else f"{100 * v:.0f}%"


def _table(head: list[str], rows: list[list[str]]) -> list[str]:
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(head)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip(),
             "  ".join("-" * w for w in widths)]
    lines += ["  ".join(v.ljust(w) for v, w in zip(r, widths)).rstrip() for r in rows]
    return lines


def _decision(c):
    stop = c.get("stopped")
    if stop and stop.get("difference") is not None:
        # partial scores: its mean is over other folds than the best's; the paired
        # difference from the best of its stop is what compares
        return f"{stop['difference']:+.4f}*"
    return c.get("decision") or "-"


def _gap(c):
    return "underfit" if c.get("underfit") else _fmt(c["train_test_gap"], "+.3f")


def _epochs(c):
    v = c.get("mean_epochs")
    return "-" if v is None else f"{v:.0f}"


#: optional columns left out, in this order, while the table is wider than asked
_DROPPABLE = ("fit s", "engine", "sat", "dead")


def _columns(cfgs: list[dict]) -> tuple[list, list[str]]:
    """The table's columns ``[(header, cell(config), cell(baseline))]`` and the settings
    shared by every configuration (named once above the table instead)."""
    shared, cols = [], [("rank", lambda c: f"{c['rank']} =" if c["tied_with_best"]
                         else str(c["rank"]),
                         lambda b: "ref =" if b.get("tied_with_best") else "ref"),
                        ("hidden", lambda c: c["hidden"], lambda b: b["name"])]
    columns = (("head", "head", str, "head"),
               ("layers", "layers", lambda v: ",".join(map(str, v)), "layers"),
               ("lr", "learning_rate", lambda v: f"{v:g}", "learning rate"),
               ("alpha", "alpha", lambda v: f"{v:g}", "alpha"))
    for header, key, text, _ in columns:
        if len({text(c[key]) for c in cfgs}) > 1:
            cols.append((header, lambda c, k=key, t=text: t(c[k]), lambda b: "-"))
    # named once above the table: the learning rate and alpha first, then head and layers
    for _, key, text, words in (columns[2], columns[3], columns[0], columns[1]):
        values = {text(c[key]) for c in cfgs}
        if len(values) == 1:
            shared.append(f"{words} {next(iter(values))}")
    cols += [("mean ± sd", lambda c: "-" if c["mean"] is None
              else f"{_fmt(c['mean'])} ± {_fmt(c['sd'])}", None),
             ("p", lambda c: "<0.001" if c["p_value"] is not None and 0 <= c["p_value"] < 5e-4
              else _fmt(c["p_value"], ".3f"), None),
             ("decision", _decision, None),
             ("gap", _gap, lambda b: "-"),
             ("epochs", _epochs, lambda b: "-"),
             ("fit s", lambda c: _fmt(c["mean_fit_seconds"], ".2f"), lambda b: "-"),
             ("dead", lambda c: _pct(c["dead"]), lambda b: "-"),
             ("sat", lambda c: _pct(c["saturated"]), lambda b: "-")]
    engines = {c["engine"] for c in cfgs}
    if len(engines) > 1:
        cols.append(("engine", lambda c: c["engine"], lambda b: "sklearn"))
    elif engines:
        shared.append(f"engine {next(iter(engines))}")
    if any(c["status"] != "done" for c in cfgs):
        cols.append(("status", lambda c: c["status"], None))
    # baselines read the configuration cells unless their own is given
    return [(h, f, g if g is not None else f) for h, f, g in cols], shared


def format_results(res: dict, width: int = 100) -> str:
    """The verdict, the ranked table and the baselines as text that fits ``width`` columns
    in the usual sweeps.

    The verdict's words come from :func:`workbench.sweep.results.verdict_statements`
    (the same in every view). In the table the tie group is marked with ``=``
    beside the rank and the Bayesian decision against the best has its own column;
    the gap says ``underfit`` when the training score itself is poor. A head,
    layer shape, learning rate, L2 strength or engine shared by every
    configuration is named once above the table instead of in a column; the
    status column appears only when some configuration is not ``done``. When
    the table is still too wide, the fit time, engine, saturated and dead
    columns are left out (in that order) and a line says so. The baselines
    follow the configurations as reference rows (``ref``).
    """
    from workbench.sweep.results import verdict_heading, verdict_statements

    cfgs = res["configurations"]
    baselines = [b for b in res.get("baselines") or [] if b.get("mean") is not None]
    cols, shared = _columns(cfgs)

    def wrap(text, indent="  "):
        return textwrap.wrap(text, width=width, break_on_hyphens=False,
                             break_long_words=False, subsequent_indent=indent)

    def render(columns):
        rows = [[f(c) for _, f, _ in columns] for c in cfgs]
        refs = [[g(b) for _, _, g in columns] for b in baselines]
        return _table([h for h, _, _ in columns], rows + refs), len(rows)

    dropped = []
    lines, n_rows = render(cols)
    for name in _DROPPABLE:
        if max(len(line) for line in lines) <= width:
            break
        if any(h == name for h, _, _ in cols):
            cols = [col for col in cols if col[0] != name]
            dropped.append(name)
            lines, n_rows = render(cols)
    below = _diagnosis_column(cfgs, cols, render, width)
    if below is None:  # it fitted: the table now has the column
        lines, n_rows = render(cols)
    if baselines:  # a rule between the configurations and the reference rows
        lines.insert(2 + n_rows, lines[1])

    out = [f"sweep {res['sweep_id']} ({res['state']}): {res['n_stored']}/{res['n_trials']} "
           "trials stored"]
    out += wrap(f"target {res['target']} ({res['target_kind']}) in {res['table']}")
    out += wrap(f"metric {res['metric']} (greater is better)"
                + (f"; every configuration: {', '.join(shared)}" if shared else ""))
    if "verdict" in res:
        out.append("")
        out += wrap(verdict_heading(res), indent="")
        for s in verdict_statements(res):
            out += wrap(f"  {s['label']}: {s['text']}", indent="      ")
    out.append("")
    out += lines
    n_tied = sum(1 for c in cfgs if c["tied_with_best"])
    corr = " with Holm's correction" if res["correction"] == "holm" else ""
    rope = res.get("rope")
    out += wrap("mean ± sd of the fold scores; p = Nadeau-Bengio corrected t-test against the "
                "best; decision = Bayesian correlated t-test against the best: equivalent "
                "(or worse) when P >= 0.95 that the difference is within (or below) "
                + (f"±{rope:.4g}" if rope is not None else "the region of practical "
                   "equivalence") + ", otherwise undecided; gap = mean training score minus "
                "mean test score (overfitting shows as a large positive gap; underfit: the "
                "training score itself is more than that region below the linear baseline's "
                "test score); epochs = epochs run, mean over folds; dead / sat = mean share of "
                "dead / saturated hidden units.")
    out += wrap(f"= tied with the best: not distinguishable at alpha "
                f"{res['significance_level']:g}{corr} ({n_tied} configuration(s) in the tie "
                f"group, {res['n_comparisons']} comparison(s) with the best).")
    if any(c.get("stopped") for c in cfgs):
        out += wrap("* stopped by racing: its mean ± sd is over the first folds only (the "
                    "best's is over all of them), so the two do not compare; the decision "
                    "column gives its mean paired difference, on those first folds, from the "
                    "configuration that led when it was stopped.")
    if baselines:
        out += wrap("ref = baselines on the same folds, preprocessing and metric, compared "
                    "with the best network: "
                    + "; ".join(f"{b['name']} {b['estimator']}" for b in baselines) + ".")
    if dropped:
        out += wrap(f"left out to fit {width} columns: {', '.join(dropped)} (in the JSON "
                    "results).")
    if below:
        out.append("diagnosis (why each configuration trains as it does; the JSON results "
                   "hold every finding in full):")
        out += [f"  {line}" for line in below]
    return "\n".join(out)


def _diagnosis_column(cfgs, cols, render, width):
    """Add each configuration's diagnosis as the table's last column when the table still
    fits ``width`` (returns None; ``cols`` is extended in place); else leave the table as it
    is and return the lines to print below it (``rank N: words``)."""
    def words(c):
        return (c.get("diagnosis") or {}).get("text") or "-"

    trial = cols + [("diagnosis", words, lambda b: "-")]
    lines, _ = render(trial)
    if max(len(line) for line in lines) <= width:
        cols.append(trial[-1])
        return None
    return [f"rank {c['rank']}: {words(c)}" for c in cfgs]


def format_cross_check(cc, width: int = 100) -> str:
    """A :class:`workbench.sweep.cross_check.CrossCheck` as a small table and its sentence."""
    words = textwrap.wrap(cc.sentence(), width=width, break_on_hyphens=False,
                          break_long_words=False)
    if not cc.expressible:
        return "\n".join(words)
    rows = [[str(f.repeat + 1), str(f.fold + 1), _fmt(f.engine_score, ".6f"),
             _fmt(f.sklearn_score, ".6f"), "yes" if f.agree else "NO",
             _fmt(f.difference, ".1e"), _fmt(f.stored_score, ".4f"),
             f"{f.engine_epochs}/{f.sklearn_epochs}",
             f"{f.engine_seconds:.2f}/{f.sklearn_seconds:.2f}"] for f in cc.folds]
    head = ["repeat", "fold", "engine", "scikit-learn", "agree", "difference", "stored",
            "epochs", "fit s"]
    stored = ("the sweep's own score (it ran scikit-learn's MLP)" if cc.stored_engine == "sklearn"
              else f"the sweep's score (fair start, {cc.configuration.get('dtype', 'float32')})")
    out = textwrap.wrap(f"cross-check of rank {cc.rank} ({cc.label}), {cc.metric} on the "
                        "sweep's folds and seeds:", width=width, break_on_hyphens=False,
                        break_long_words=False) + [""]
    out += _table(head, rows)
    out += textwrap.wrap(f"engine = our engine in scikit-learn's mode (its output-layer draw and "
                         f"absolute stopping rule, float64); scikit-learn = its {cc.estimator}; "
                         f"stored = {stored}; epochs and fit s: engine/scikit-learn.",
                         width=width, break_on_hyphens=False, break_long_words=False)
    out += ["", *words]
    return "\n".join(out)


def run(args) -> int:
    from workbench.sweep.results import sweep_results
    from workbench.sweep.store import Store, existing_store_path

    with Store(existing_store_path(args.store)) as store:
        res = sweep_results(store, args.sweep_id, holm=args.holm, rope=args.rope)
        cc = _cross_check(store, args, res) if args.cross_check else None
    if args.json:
        if cc is not None:
            res["cross_check"] = cc.to_dict()
        json.dump(res, sys.stdout, indent=2, allow_nan=False)
        sys.stdout.write("\n")
    elif cc is not None:
        print(format_cross_check(cc))
    else:
        print(format_results(res))
    return 0


def _cross_check(store, args, res):
    from workbench.errors import InputError
    from workbench.sweep.cross_check import cross_check

    def progress(done, total):
        print(f"cross-checked fold {done} of {total}", file=sys.stderr)

    try:
        return cross_check(store, args.sweep_id, results=res, table=args.table,
                           on_fold=progress)
    except InputError as exc:
        if exc.setting == "table":  # here the table is set with --table
            raise InputError(f"{exc} (set with --table)") from None
        raise
