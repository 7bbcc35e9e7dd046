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

from workbench.store import Store

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
    return format(v, spec)


def _pct(v):
    return "-" if v is None else f"{100 * v:.0f}%"


def format_results(res: dict) -> str:
    """The ranked results as a text table (tie group marked with ``=``)."""
    head = ["rank", "hidden", "head", "layers", "lr", "alpha", f"{res['metric']} mean ± sd",
            "p", "tied", "gap", "fit s", "dead", "sat", "engine", "status"]
    rows = []
    for c in res["configurations"]:
        ms = "-" if c["mean"] is None else f"{_fmt(c['mean'])} ± {_fmt(c['sd'])}"
        rows.append([str(c["rank"]), c["hidden"], c["head"], ",".join(map(str, c["layers"])),
                     f"{c['learning_rate']:g}", f"{c['alpha']:g}", ms, _fmt(c["p_value"], ".3f"),
                     "=" if c["tied_with_best"] else "", _fmt(c["train_test_gap"], "+.3f"),
                     _fmt(c["mean_fit_seconds"], ".2f"),
                     _pct(c["dead"]), _pct(c["saturated"]), c["engine"], c["status"]])
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h)
              for i, h in enumerate(head)]
    lines = [f"sweep {res['sweep_id']} ({res['state']}): {res['target']} ({res['target_kind']}) "
             f"in {res['table']}, metric {res['metric']} (greater is better), "
             f"{res['n_stored']}/{res['n_trials']} trials"]
    lines.append("  ".join(h.ljust(w) for h, w in zip(head, widths)))
    lines.append("  ".join("-" * w for w in widths))
    for r in rows:
        lines.append("  ".join(v.ljust(w) for v, w in zip(r, widths)))
    n_tied = sum(1 for c in res["configurations"] if c["tied_with_best"])
    corr = " with Holm's correction" if res["correction"] == "holm" else ""
    lines.append("gap = mean training score minus mean test score (overfitting shows as a "
                 "large positive gap); dead / sat = mean share of dead / saturated hidden units.")
    lines.append(f"= tied with the best: not distinguishable at alpha {res['significance_level']:g} "
                 f"by the Nadeau-Bengio corrected t-test{corr} ({n_tied} configuration(s) in the "
                 f"tie group, {res['n_comparisons']} comparison(s) with the best).")
    return "\n".join(lines)


def run(args) -> int:
    with Store(args.store) as store:
        res = store.results(args.sweep_id, holm=args.holm)
    if args.json:
        json.dump(res, sys.stdout, indent=2, allow_nan=False)
        sys.stdout.write("\n")
    else:
        print(format_results(res))
    return 0
