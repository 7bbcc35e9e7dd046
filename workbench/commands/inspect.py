"""``workbench inspect FILE [--target COL] [--kind KIND] [--role COL=ROLE]... [--json]``.

Prints the load report, the column profile, the target's kind with its evidence
(and, for integer codes that could be classes or a count, that it is ambiguous
and why) and the advised output head. Without ``--target`` the suggested target
is analysed (the reason for the suggestion, or for none, is printed). ``--kind``
sets the target's kind (refused when the values cannot have it); ``--role``
makes a column a feature or ignores it, through
:meth:`workbench.data.profiling.TableProfile.with_roles`. ``--json`` prints one
JSON object instead (documented in README.md, section "`workbench inspect --json`").
Exit status 0 on success, 2 on bad input.
"""

from __future__ import annotations

import json
import sys
from dataclasses import replace

from workbench.data.intake import DEFAULT_MAX_CELLS, load_table
from workbench.data.profiling import (
    KINDS,
    advise,
    analyse_target,
    check_head,
    parse_roles,
    profile_table,
    to_jsonable,
)
from workbench.errors import InputError

NAME = "inspect"
HELP = "Load a table, profile its columns, detect the target kind and advise the output head."


def add_arguments(parser):
    parser.add_argument("file", metavar="FILE", help="a .csv, .tsv, .txt, .xlsx or .parquet table")
    parser.add_argument("--target", metavar="COL", default=None,
                        help="target column (default: the suggested one)")
    parser.add_argument("--kind", choices=KINDS, default=None,
                        help="the target's kind, instead of the detected one (refused when the "
                             "values cannot have it)")
    parser.add_argument("--role", metavar="COLUMN=ROLE", action="append", default=None,
                        help="make a column a feature or ignore it (ROLE feature or ignore); "
                             "repeat for several columns")
    parser.add_argument("--sheet", metavar="NAME", default=None,
                        help="sheet of an .xlsx workbook (default: the first)")
    parser.add_argument("--max-cells", metavar="N", type=int, default=DEFAULT_MAX_CELLS,
                        help=f"size limit in cells, rows x columns (default {DEFAULT_MAX_CELLS:,})")
    parser.add_argument("--json", action="store_true", help="print one JSON object")


def inspect_table(path, target: str | None = None, sheet: str | None = None,
                  max_cells: int = DEFAULT_MAX_CELLS, kind: str | None = None,
                  roles: dict | None = None) -> dict:
    """Everything ``inspect`` reports, as the JSON-ready dict documented in README.md.

    ``kind`` is the target kind set by the user; ``roles`` (``{column: "feature" |
    "ignore"}``) are applied with :meth:`TableProfile.with_roles`.
    """
    df, report = load_table(path, sheet=sheet, max_cells=max_cells)
    profile = profile_table(df, target=target)
    name = target if target is not None else profile.suggested_target
    if roles:
        # the analysed target (given or suggested) takes no role
        profile = replace(profile, target=name).with_roles(roles)
    out = {
        "file": str(path),
        "format": report.format,
        "rows": report.rows,
        "n_columns": report.columns,
        "load": {k: v for k, v in report.to_dict().items()
                 if k not in ("path", "format", "rows", "columns")},
        "columns": [c.to_dict() for c in profile.columns],
        "suggested_target": profile.suggested_target,
        "suggestion_reason": profile.suggestion_reason,
        "roles_set_by_user": dict(roles or {}),
        "target": None,
        "advice": None,
    }
    if name is None:
        out["note"] = f"{profile.suggestion_reason} with --target COL"
        return to_jsonable(out)
    try:
        info = analyse_target(df, name, kind=kind)
    except InputError as exc:
        if target is not None or exc.setting == "kind":
            raise
        out["note"] = f"suggested target {name!r} cannot be used: {exc}"
        return to_jsonable(out)
    tdict = info.to_dict()
    tdict["source"] = "given" if target is not None else "suggested"
    adv = advise(info)
    heads = {}
    for h in adv.heads_to_sweep:
        chk = check_head(info, h)
        heads[h] = {"allowed": chk.allowed, "warning": chk.warning, "reason": chk.reason}
    out["target"] = tdict
    out["advice"] = adv.to_dict()
    out["advice"]["head_checks"] = heads
    feats = profile.feature_columns(name)
    out["n_features"] = len(feats)
    if not feats:
        try:
            replace(profile, target=name).require_features(name)
        except InputError as exc:
            out["note"] = f"a sweep would be refused: {exc}"
    return to_jsonable(out)


def _fmt(v) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.4g}"
    return str(v)


def _pct(v) -> str:
    return "-" if v is None else f"{v:.1%}"


def _print_text(d: dict, fh) -> None:
    ld = d["load"]
    w = fh.write
    w(f"{d['file']}: {d['rows']:,} rows x {d['n_columns']} columns ({d['format']}")
    if ld.get("delimiter") is not None:
        names = {",": "comma", ";": "semicolon", "\t": "tab", "|": "pipe"}
        w(f", {names.get(ld['delimiter'], ld['delimiter'])}-separated, {ld['encoding']}")
        if ld.get("decimal") == ",":
            w(", decimal comma")
    if ld.get("sheet"):
        w(f", sheet {ld['sheet']!r}")
    w(f"; loaded in {ld['seconds']:.2f} s)\n")
    for r in ld["drop_reasons"]:
        w(f"  dropped: {r}\n")
    for r in ld["warnings"]:
        w(f"  warning: {r}\n")
    w("\nColumns\n")
    width = max(len(c["name"]) for c in d["columns"])
    width = min(max(width, 6), 32)
    w(f"  {'name':<{width}}  {'type':<11}  {'role':<7}  {'missing':>7}  {'distinct':>8}  "
      f"{'min':>10}  {'max':>10}  note\n")
    for c in d["columns"]:
        lo, hi = c["min"], c["max"]
        if isinstance(lo, str):
            lo, hi = lo[:10], hi[:10]
        w(f"  {c['name'][:width]:<{width}}  {c['type']:<11}  {c['role']:<7}  "
          f"{c['missing_share']:>7.1%}  {c['distinct']:>8}  {_fmt(lo):>10}  {_fmt(hi):>10}  "
          f"{c['reason']}\n")
    if d.get("note"):
        w(f"\n{d['note']}\n")
    t = d["target"]
    if t is None:
        return
    ev = t["evidence"]
    src = "given" if t["source"] == "given" else "suggested"
    w(f"\nTarget {t['name']!r} ({src}): {t['kind']} ({t['task']})\n")
    if t["source"] == "suggested" and d.get("suggestion_reason"):
        w(f"  {d['suggestion_reason']}\n")
    w(f"  because: {ev['rule']}\n")
    if t.get("ambiguous"):
        w(f"  {t['ambiguity']}\n")
        w(f"  other kinds the values fit: {', '.join(t['alternatives'])} (use --kind)\n")
    w(f"  evidence: dtype {ev['dtype']}, min {_fmt(ev['min'])}, max {_fmt(ev['max'])}, "
      f"distinct {ev['distinct']}, zeros {_pct(ev['zero_share'])}, "
      f"missing {ev['missing_share']:.1%}\n")
    if t["rows_dropped"]:
        w(f"  {t['rows_dropped']} row(s) with a missing target will be dropped\n")
    if t.get("classes") is not None:
        counts = ev.get("class_counts", {})
        w("  classes: " + ", ".join(f"{k} ({v})" for k, v in counts.items()) + "\n")
    if t.get("interval") is not None:
        w(f"  interval: [{t['interval'][0]:g}, {t['interval'][1]:g}]\n")
    a = d["advice"]
    w(f"\nAdvice ({a['basis']}): output head {a['output_head']} with {a['loss']} loss; "
      f"hidden layers {a['hidden']}\n")
    w(f"  {a['reason']}\n")
    w(f"  worth sweeping: hidden {', '.join(a['hidden_to_sweep'])}; "
      f"heads {', '.join(a['heads_to_sweep'])}\n")
    for h, chk in a["head_checks"].items():
        if not chk["allowed"]:
            w(f"  head {h}: refused - {chk['reason']}\n")
        elif chk["warning"]:
            w(f"  head {h}: allowed with a warning - {chk['reason']}\n")


def run(args) -> int:
    if args.max_cells < 1:
        raise InputError(f"--max-cells must be a positive number of cells, got {args.max_cells}")
    d = inspect_table(args.file, target=args.target, sheet=args.sheet, max_cells=args.max_cells,
                      kind=args.kind, roles=parse_roles(args.role))
    if args.json:
        json.dump(d, sys.stdout, indent=2, allow_nan=False)
        sys.stdout.write("\n")
    else:
        _print_text(d, sys.stdout)
    return 0
