"""``workbench show SWEEP_ID [--store PATH] [--json] [--holm]``.

Prints one stored sweep's ranked results: the same table as ``workbench sweep``
prints at the end, or with ``--json`` the same JSON object that
``workbench sweep --json`` writes (documented in README.md, section
"Sweep results as JSON"). Exit status 0, or 2 for an unknown sweep or an
unreadable store.
"""

from __future__ import annotations

import json
import math
import sys
import textwrap

from workbench.sweep.results import sweep_results
from workbench.sweep.store import Store, existing_store_path

NAME = "show"
HELP = "Print one stored sweep's ranked results (table or JSON)."


def add_arguments(parser):
    parser.add_argument("sweep_id", metavar="SWEEP_ID", help="a sweep id (see workbench history)")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="the store file (default: the user's data folder)")
    parser.add_argument("--json", action="store_true", help="print the results as one JSON object")
    parser.add_argument("--holm", action="store_true",
                        help="judge ties with Holm's correction for the number of comparisons")


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


def format_results(res: dict, width: int = 100) -> str:
    """The ranked results as a text table that fits ``width`` columns in the usual sweeps.

    The tie group is marked with ``=`` beside the rank. A learning rate or L2
    strength shared by every configuration is named once above the table
    instead of in a column, and the status column appears only when some
    configuration is not ``done``.
    """
    cfgs = res["configurations"]
    lrs = {f"{c['learning_rate']:g}" for c in cfgs}
    alphas = {f"{c['alpha']:g}" for c in cfgs}
    show_status = any(c["status"] != "done" for c in cfgs)
    cols = [("rank", lambda c: f"{c['rank']} =" if c["tied_with_best"] else str(c["rank"])),
            ("hidden", lambda c: c["hidden"]), ("head", lambda c: c["head"]),
            ("layers", lambda c: ",".join(map(str, c["layers"])))]
    if len(lrs) > 1:
        cols.append(("lr", lambda c: f"{c['learning_rate']:g}"))
    if len(alphas) > 1:
        cols.append(("alpha", lambda c: f"{c['alpha']:g}"))
    cols += [("mean ± sd", lambda c: "-" if c["mean"] is None
              else f"{_fmt(c['mean'])} ± {_fmt(c['sd'])}"),
             ("p", lambda c: "<0.001" if c["p_value"] is not None and 0 <= c["p_value"] < 5e-4
              else _fmt(c["p_value"], ".3f")),
             ("gap", lambda c: _fmt(c["train_test_gap"], "+.3f")),
             ("fit s", lambda c: _fmt(c["mean_fit_seconds"], ".2f")),
             ("dead", lambda c: _pct(c["dead"])), ("sat", lambda c: _pct(c["saturated"])),
             ("engine", lambda c: c["engine"])]
    if show_status:
        cols.append(("status", lambda c: c["status"]))
    rows = [[f(c) for _, f in cols] for c in cfgs]

    def wrap(text):
        return textwrap.wrap(text, width=width, break_on_hyphens=False,
                             subsequent_indent="  ")

    shared = []
    if len(lrs) == 1:
        shared.append(f"learning rate {next(iter(lrs))}")
    if len(alphas) == 1:
        shared.append(f"alpha {next(iter(alphas))}")
    lines = [f"sweep {res['sweep_id']} ({res['state']}): {res['n_stored']}/{res['n_trials']} "
             "trials stored"]
    lines += wrap(f"target {res['target']} ({res['target_kind']}) in {res['table']}")
    lines += wrap(f"metric {res['metric']} (greater is better)"
                  + (f"; every configuration: {', '.join(shared)}" if shared else ""))
    lines += _table([h for h, _ in cols], rows)
    n_tied = sum(1 for c in cfgs if c["tied_with_best"])
    corr = " with Holm's correction" if res["correction"] == "holm" else ""
    lines += wrap("mean ± sd of the fold scores; p = Nadeau-Bengio corrected t-test against the "
                  "best; gap = mean training score minus mean test score (overfitting shows as "
                  "a large positive gap); dead / sat = mean share of dead / saturated hidden "
                  "units.")
    lines += wrap(f"= tied with the best: not distinguishable at alpha "
                  f"{res['significance_level']:g}{corr} ({n_tied} configuration(s) in the tie "
                  f"group, {res['n_comparisons']} comparison(s) with the best).")
    return "\n".join(lines)


def run(args) -> int:
    with Store(existing_store_path(args.store)) as store:
        res = sweep_results(store, args.sweep_id, holm=args.holm)
    if args.json:
        json.dump(res, sys.stdout, indent=2, allow_nan=False)
        sys.stdout.write("\n")
    else:
        print(format_results(res))
    return 0
