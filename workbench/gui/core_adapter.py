"""Every call the window makes into the core, in one place.

The window never computes: it calls these functions (on a worker thread, see
:mod:`workbench.gui.tasks` and :mod:`workbench.gui.bridge`) and draws what
they return. The functions here only call the core and reshape its answers
into the plain dicts the Qt models and plot panels read.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

# The core is imported here, on the GUI thread, once; worker threads then only call into
# it. (First imports of these modules from several pool threads at once made CPython 3.11
# abort at exit with a refcount error.)
import workbench.data.intake  # noqa: F401
import workbench.data.profiling  # noqa: F401
import workbench.sweep.diagnosis  # noqa: F401
import workbench.sweep.plan  # noqa: F401
import workbench.sweep.results  # noqa: F401
import workbench.sweep.runner  # noqa: F401
import workbench.sweep.store  # noqa: F401
from workbench.errors import InputError
from workbench.nets import activations
from workbench.sweep.plan import LEARNING_RATE_GRID, TUNE

#: what the set-up column's learning-rate box holds by default: the core's "tune" grid,
#: the same learning rates for every hidden activation and head (an equal tuning budget)
DEFAULT_LEARNING_RATES = TUNE


def learning_rate_tooltip() -> str:
    """The learning-rate box's tooltip: numbers, or the core's tune grid."""
    grid = ", ".join(f"{v:g}" for v in LEARNING_RATE_GRID)
    return ("Adam's initial learning rates, separated by ';' or spaces, or "
            f"“{TUNE}”: every hidden activation and head at the same {len(LEARNING_RATE_GRID)} "
            f"rates on a log scale ({grid}), so each gets an equal tuning budget")

# --------------------------------------------------------------------------- table


@dataclass
class LoadedTable:
    """A loaded table and what the intake found in it."""

    path: str
    df: object
    report: object
    profile: object
    columns: list[dict] = field(default_factory=list)

    @property
    def name(self) -> str:
        return Path(self.path).name


def load(path: str) -> LoadedTable:
    """Load and profile a table (raises InputError with the loader's one-line message)."""
    from workbench.data.intake import load_table
    from workbench.data.profiling import profile_table

    df, report = load_table(path)
    profile = profile_table(df)
    return LoadedTable(path=str(path), df=df, report=report, profile=profile,
                       columns=profile_rows(profile))


def profile_rows(profile) -> list[dict]:
    """A profile's columns as the profile table's rows (name, kind, missing, role, note)."""
    return [{"name": c.name, "kind": c.type, "missing": c.missing_share,
             "distinct": c.distinct, "role": c.role, "note": c.reason} for c in profile.columns]


def user_roles(table: LoadedTable, roles: dict[str, str], target: str) -> dict[str, str]:
    """The roles the user changed in the profile table, as ``{column: "feature" | "ignore"}``.

    ``roles`` is the profile table's ``{column: role}``. The target and the columns whose
    role is the intake's are left out; so is the intake's suggested target when another
    column is the target and it is shown as a feature (the core counts it as one already).
    """
    base = {c["name"]: c["role"] for c in table.columns}
    return {n: r for n, r in roles.items()
            if n != target and r != "target" and base.get(n) != r
            and not (base.get(n) == "target" and r == "feature")}


def apply_roles(table: LoadedTable, roles: dict[str, str], target: str) -> list[dict]:
    """The profile table's rows once the core has applied the user's roles.

    The roles go through :meth:`workbench.data.profiling.TableProfile.with_roles`, the
    same rule the sweep's runner and an export's refit apply: an identifier made a
    feature shows (and is used as) its base type; free text or an empty column made a
    feature is refused with an :class:`InputError` (``setting="roles"``).
    """
    return profile_rows(table.profile.with_roles(user_roles(table, roles, target)))


@dataclass
class TargetSummary:
    """The target's kind with its evidence, the advice and the head guard's verdicts."""

    target: object
    advice: object
    heads: list[tuple[str, object]]  # (head name, HeadCheck) for the task's heads

    @property
    def task(self) -> str:
        return self.target.task


@dataclass(frozen=True)
class HeadVerdict:
    """The sweep's guard on one head: allowed, with a warning, or refused (and why)."""

    allowed: bool
    warning: bool
    reason: str


def head_verdict(info, head: str) -> HeadVerdict:
    """What the sweep's plan would do with ``head`` (:func:`workbench.sweep.plan.resolve_heads`)."""
    from workbench.sweep.plan import resolve_heads

    try:
        _, refused, warns = resolve_heads(info, [head])
    except InputError as exc:
        # shown on the head's own box, so the core's words need no pointer to the control
        return HeadVerdict(False, False, str(exc))
    if head in refused:
        return HeadVerdict(False, False, refused[head])
    if head in warns:
        return HeadVerdict(True, True, warns[head])
    return HeadVerdict(True, False, "")


def summarise_target(df, name: str, kind: str | None = None) -> TargetSummary:
    """The target's kind (``kind``: set by the user, else detected), advice and head verdicts."""
    from workbench.data.profiling import advise, analyse_target

    info = analyse_target(df, name, kind=kind)
    adv = advise(info)
    heads = [(h, head_verdict(info, h)) for h in activations.head_names(info.task)]
    return TargetSummary(target=info, advice=adv, heads=heads)


def default_heads(summary: TargetSummary) -> list[str]:
    """The output heads the window ticks by default: the advised head and one alternative
    the guard accepts (:func:`workbench.sweep.defaults.default_heads`)."""
    from workbench.sweep.defaults import default_heads as core_default_heads

    return core_default_heads(summary.advice, summary.heads)


def default_hidden(summary: TargetSummary | None = None) -> list[str]:
    """The hidden activations a default sweep ticks (the advice's ``hidden_to_sweep``)."""
    from workbench.data.profiling import HIDDEN_TO_SWEEP

    return list(summary.advice.hidden_to_sweep if summary is not None else HIDDEN_TO_SWEEP)


def default_metric_for(summary: TargetSummary, heads) -> str:
    """The metric the core picks for the target's kind and the heads ticked."""
    from workbench.sweep.plan import default_metric

    return default_metric(summary.target.kind, list(heads))


def summarise_or_refuse(df, name: str, kind: str | None = None):
    """:func:`summarise_target`, or the :class:`InputError` that refused it (returned, not
    raised, so the window keeps the setting it is about)."""
    try:
        return summarise_target(df, name, kind)
    except InputError as exc:
        return exc


def check_target(table: LoadedTable, name: str) -> None:
    """Refuse a target that names no column of the table, as the command line does."""
    from workbench.data.profiling import check_column

    check_column(table.df, name)


def no_target_error(table: LoadedTable) -> InputError:
    """The table has no suggested target: why, as an error about the target setting."""
    return InputError(table.profile.suggestion_reason or "choose the target", setting="target")


def suggestion_text(table: LoadedTable) -> str:
    """Why the suggested target was suggested, as one sentence for the set-up column."""
    why = table.profile.suggestion_reason
    return (why[:1].upper() + why[1:] + ".") if why else ""


def kind_choices() -> tuple[str, ...]:
    """The target kinds the user may choose (the core's list)."""
    from workbench.data.profiling import KINDS

    return KINDS


def ambiguity_text(info) -> str:
    """The ambiguity note of integer codes (empty when the target is not ambiguous)."""
    if not getattr(info, "ambiguous", False):
        return ""
    text = info.ambiguity[:1].upper() + info.ambiguity[1:]
    other = ", ".join(k.replace("_", "-") for k in info.alternatives)
    return f"⚠ {text} Also fits: {other} (the “Kind” box)."


def evidence_text(info) -> str:
    """The target's evidence as a few short lines."""
    ev = info.evidence or {}
    lines = []
    if ev.get("rule"):
        lines.append(str(ev["rule"]))
    parts = []
    if ev.get("rows") is not None:
        parts.append(f"{ev['rows']} rows")
    if ev.get("distinct") is not None and not ev.get("class_counts"):
        parts.append(f"{ev['distinct']} distinct")
    if ev.get("min") is not None and ev.get("max") is not None:
        try:
            parts.append(f"range {float(ev['min']):.4g} to {float(ev['max']):.4g}")
        except (TypeError, ValueError):
            pass
    if ev.get("missing"):
        parts.append(f"{ev['missing']} missing (dropped)")
    if parts:
        lines.append(", ".join(parts))
    counts = ev.get("class_counts")
    if counts:
        items = list(counts.items())[:6]
        more = "" if len(counts) <= 6 else f", +{len(counts) - 6} more"
        lines.append("classes: " + ", ".join(f"{k} ({v})" for k, v in items) + more)
    return "\n".join(lines)


def hidden_tooltips() -> list[tuple[str, str]]:
    return [(name, act.tooltip) for name, act in activations.HIDDEN.items()]


def head_tooltip(task: str, name: str) -> str:
    h = activations.HEADS.get((task, name))
    return h.tooltip if h is not None else name


def fmt_seconds(s: float | None) -> str:
    """Seconds in words (the core's :func:`workbench.sweep.estimate.fmt_seconds`), or a dash."""
    if s is None or not math.isfinite(s):
        return "–"
    from workbench.sweep.estimate import fmt_seconds as in_words

    return in_words(s)


# --------------------------------------------------------------------------- plan


def build_plan(table: LoadedTable, summary: TargetSummary, choices: dict,
               roles: dict[str, str] | None = None):
    """The core's :class:`SweepPlan` for the window's choices (InputError when impossible).

    ``roles`` is the profile table's ``{column: role}``; the columns whose role
    differs from the intake's profile (:func:`user_roles`) go into the plan's ``roles``
    (the core applies them with ``TableProfile.with_roles`` and refuses a table left
    with no feature). The target kind set in the window is ``summary.target``'s.
    """
    from workbench.sweep.plan import build_plan as core_build_plan

    info = summary.target
    if not choices.get("hidden"):
        raise InputError("tick at least one hidden activation to sweep", setting="hidden")
    if not choices.get("heads"):
        raise InputError("tick at least one output head that the guard allows for this target",
                         setting="heads")
    rates = list(choices.get("learning_rates") or [])
    tune = any(isinstance(v, str) and v.strip().lower() == TUNE for v in rates)
    for key, what, setting in (("learning_rates", "learning rate", "learning_rate"),
                               ("alphas", "L2 strength", "alpha")):
        bad = [v for v in choices.get(key) or [] if isinstance(v, str)
               and not (key == "learning_rates" and v.strip().lower() == TUNE)]
        if bad:
            hint = f"0.001 0.01, or {TUNE}" if key == "learning_rates" else "0.001 0.01"
            raise InputError(f"{what} {bad[0]!r} is not a number; write e.g. {hint}",
                             setting=setting)
    if tune:  # the core's grid (it refuses "tune" mixed with numbers)
        rates = [v if isinstance(v, str) else f"{v:g}" for v in rates]
    changed = user_roles(table, roles, info.name) if roles else {}
    plan = core_build_plan(
        table.path, info.name, hidden=list(choices["hidden"]), output=list(choices["heads"]),
        layers=list(choices.get("layers") or ["32"]),
        learning_rates=rates or None,
        alphas=list(choices.get("alphas") or []) or None,
        folds=int(choices["folds"]), repeats=int(choices["repeats"]),
        epochs=int(choices["epochs"]), early_stopping=bool(choices.get("early_stopping")),
        metric=choices.get("metric") or None, df=table.df, target_info=info,
        roles=changed, profile=table.profile, race=bool(choices.get("race")))
    return plan


def calibrate(plan, previous=None):
    """Time short trials of ``plan`` on its own table (:func:`workbench.sweep.estimate.calibrate`;
    slow: call it off the GUI thread)."""
    from workbench.sweep.estimate import calibrate as core_calibrate

    return core_calibrate(plan, previous=previous)


def calibrate_job(plan, previous=None):
    """:func:`calibrate` looked up when called: what the ranking process runs for the window
    (:func:`workbench.gui.bridge.calibrate_in_process`; this module has no Qt to import)."""
    return calibrate(plan, previous)


def startup_seconds() -> float:
    """Seconds a new worker process needs to start (measured once; off the GUI thread)."""
    from workbench.sweep.estimate import startup_seconds as core_startup

    return core_startup()


def busy_cores() -> float:
    """Cores other programs keep busy now (half a second's measurement; off the GUI thread)."""
    from workbench.sweep.estimate import busy_cores as core_busy

    return core_busy()


#: the window's sweeps prepare shared fold features only for large tables: the preparation
#: runs Python in the window's own process, beside its event loop (on small tables each
#: worker preparing its own folds costs a little CPU and no responsiveness)
WINDOW_SHARE_FOLDS = "large"


def estimate(plan, calibration, jobs: int, startup: float | None, busy: float = 0.0):
    """The plan's estimated time, or None when ``calibration`` does not cover it yet.

    ``startup`` is a measured start-up of the worker pool (None: not measured yet, then
    no estimate); none is counted when the runner's pool of ``jobs`` workers is warm.
    """
    from workbench.sweep.estimate import estimate as core_estimate
    from workbench.sweep.estimate import pool_is_warm

    if calibration is None or not calibration.covers(plan):
        return None
    if pool_is_warm(int(jobs or 1)):
        startup = 0.0
    elif startup is None:
        return None
    return core_estimate(plan, calibration, int(jobs or 1), startup=startup, busy=busy,
                         share_folds=WINDOW_SHARE_FOLDS)


def plan_summary(plan, choices: dict, estimate=None) -> str:
    """Configurations, trials and the estimated duration of a plan.

    ``estimate`` is a :class:`workbench.sweep.estimate.Estimate`, or None while this
    table is being timed.
    """
    n_cfg, n_trials = plan.n_configurations, plan.n_trials
    text = (f"{n_cfg} configuration{'s' if n_cfg != 1 else ''} × {plan.folds} folds × "
            f"{plan.repeats} repeat{'s' if plan.repeats != 1 else ''} = {n_trials} trials")
    if choices.get("cluster"):
        return text + "\nOn a Dask cluster the time depends on its workers."
    if estimate is None:
        return text + "\nTime estimate: timing a few short trials on this table…"
    workers = estimate.workers
    return text + (f"\nAbout {fmt_seconds(estimate.seconds)} on {workers} "
                   f"worker{'s' if workers != 1 else ''} (timed on this table and computer"
                   + (", workers to start" if estimate.startup else "") + ").")


# --------------------------------------------------------------------------- store, sweep

class StoreSession:
    """One :class:`workbench.sweep.store.Store`, opened on first use in the thread that uses it.

    A sweep's job and its ranker share one session on the bridge thread; short
    tasks open their own with ``with StoreSession(path) as store:``.
    """

    def __init__(self, path: str | None):
        self.path = path
        self._store = None

    @property
    def store(self):
        if self._store is None:
            from workbench.sweep.store import Store

            self._store = Store(self.path)
        return self._store

    def close(self) -> None:
        if self._store is not None:
            self._store.close()
            self._store = None

    def __enter__(self):
        return self.store

    def __exit__(self, *exc):
        self.close()


def run_plan(plan, choices: dict, session: StoreSession, on_event, cancel) -> dict:
    """Run a new sweep with the core's runner (blocks; call it on the bridge thread)."""
    from workbench.sweep.runner import run_sweep

    out = run_sweep(plan, store=session.store, jobs=int(choices.get("jobs") or 1),
                    cluster=choices.get("cluster") or None, on_event=on_event, cancel=cancel,
                    share_folds=WINDOW_SHARE_FOLDS)
    return {"sweep_id": out.sweep_id,
            "state": "finished" if out.state == "finished" else "cancelled",
            "n_finished": out.n_finished}


def resume(sweep_id: str, session: StoreSession, jobs: int, on_event, cancel) -> dict:
    """Run the missing trials of a stored sweep."""
    from workbench.sweep.runner import run_sweep

    out = run_sweep(resume=sweep_id, store=session.store, jobs=int(jobs or 1),
                    on_event=on_event, cancel=cancel, share_folds=WINDOW_SHARE_FOLDS)
    return {"sweep_id": out.sweep_id,
            "state": "finished" if out.state == "finished" else "cancelled",
            "n_finished": out.n_finished}


def history(store_path: str | None) -> list[dict]:
    """The stored sweeps, newest first (the ``workbench history --json`` objects)."""
    with StoreSession(store_path) as store:
        return store.sweep_summaries()


def _band(curves: list[list[float]]) -> dict | None:
    """Mean and ±1 sd per epoch over the trials that reached that epoch."""
    import numpy as np

    curves = [np.asarray([np.nan if v is None else v for v in c], float) for c in curves if c]
    if not curves:
        return None
    need = 2 if len(curves) > 1 else 1
    n = max(len(c) for c in curves)
    mat = np.full((len(curves), n), np.nan)
    for i, c in enumerate(curves):
        mat[i, :len(c)] = c
    counts = np.sum(np.isfinite(mat), axis=0)
    keep = int(np.max(np.flatnonzero(counts >= need))) + 1 if np.any(counts >= need) else 0
    if keep == 0:
        return None
    mat = mat[:, :keep]
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            mean = np.nanmean(mat, axis=0)
            sd = np.nanstd(mat, axis=0)
    sd = np.nan_to_num(sd)
    return {"x": list(range(1, keep + 1)), "mean": mean.tolist(), "lo": (mean - sd).tolist(),
            "hi": (mean + sd).tolist()}


def _layer_means(trials: list[dict], key: str) -> list[float]:
    import numpy as np

    rows = [t.get("health", {}).get(key) or [] for t in trials]
    rows = [r for r in rows if r]
    if not rows:
        return []
    n = max(len(r) for r in rows)
    out = []
    for k in range(n):
        vals = [r[k] for r in rows if len(r) > k and r[k] is not None and math.isfinite(r[k])]
        out.append(float(np.mean(vals)) if vals else math.nan)
    return out


def ranked_rows(store, sweep_id: str, rope: float | None = None) -> dict:
    """The ranking of a stored sweep as rows for the results table and series for the plots.

    Parameters
    ----------
    store : Store or str or None
        The store, or its path (opened for this call only).
    sweep_id : str
        The sweep.
    rope : float, optional
        Half-width of the region of practical equivalence the decisions use
        (checked by the core; None: the core's default for the metric).

    Returns
    -------
    dict
        ``{"meta": the sweep's results document without its configurations, plus
        "statements" and "heading" (the verdict in the core's words,
        :func:`workbench.sweep.results.verdict_statements` and
        :func:`~workbench.sweep.results.verdict_heading`) and "factor_words",
        "rows": [row dict per configuration, then one per baseline]}``. A
        baseline's row has ``kind`` "baseline" and no rank; a configuration's has
        ``kind`` "network".
    """
    from workbench.sweep.diagnosis import health_hints
    from workbench.sweep.factors import FACTOR_WORDS
    from workbench.sweep.results import verdict_heading, verdict_statements

    if not hasattr(store, "trials"):  # a path: open the store for this call only
        with StoreSession(store) as opened:
            return ranked_rows(opened, sweep_id, rope)
    res = workbench.sweep.results.sweep_results(store, sweep_id, rope=rope)
    per_cfg = int(res["plan"]["folds"]) * int(res["plan"]["repeats"])
    full = {}
    for t in store.trials(sweep_id, with_history=True):
        full.setdefault(t["config_index"], []).append(t)
    rows = []
    for c in res["configurations"]:
        ranked = bool(c.get("tied_with_best")) or c.get("p_value") is not None
        trials = [t for t in full.get(c["index"], []) if t["status"] == "done"]
        label = f"{c['hidden']} / {c['head']} [{','.join(str(s) for s in c['layers'])}]"
        health = {"dead": _layer_means(trials, "dead"),
                  "saturated": _layer_means(trials, "saturated"),
                  "grad_norm": _layer_means(trials, "grad_norm")}
        errors = sorted({t.get("error") for t in full.get(c["index"], []) if t.get("error")})
        rows.append({
            "key": f"{sweep_id}:{c['index']}",
            "kind": "network",
            "index": c["index"],
            "rank": c["rank"] if ranked and c.get("mean") is not None else None,
            "position": c["rank"],
            "hidden": c["hidden"], "head": c["head"],
            "layers": ",".join(str(s) for s in c["layers"]),
            "learning_rate": c["learning_rate"], "alpha": c["alpha"],
            "mean": c.get("mean"), "sd": c.get("sd"), "p_value": c.get("p_value"),
            "tied_with_best": bool(c.get("tied_with_best")),
            "decision": c.get("decision"),
            "p_better": c.get("p_better"), "p_equivalent": c.get("p_equivalent"),
            "p_worse": c.get("p_worse"),
            "train_mean": c.get("train_mean"), "gap": c.get("train_test_gap"),
            "underfit": c.get("underfit"), "epochs": c.get("mean_epochs"),
            "fit_seconds": c.get("mean_fit_seconds"),
            "dead_pct": None if c.get("dead") is None else 100.0 * c["dead"],
            "saturated_pct": None if c.get("saturated") is None else 100.0 * c["saturated"],
            "engine": c["engine"], "status": c["status"],
            # racing stopped it: its paired difference from the leader at the stop (its
            # mean is over its first folds only, and does not compare with the best's)
            "stop_difference": (c.get("stopped") or {}).get("difference"),
            "stop_reason": (c.get("stopped") or {}).get("reason"),
            "n_done": len(c.get("trials", [])), "n_total": per_cfg,
            "message": "; ".join(errors)[:400] if errors else "",
            "series": {
                "key": f"{sweep_id}:{c['index']}",
                "loss": _band([(t.get("history") or {}).get("loss") or [] for t in trials]),
                "val": _band([(t.get("history") or {}).get("val_score") or [] for t in trials]),
                "fold_scores": [t["test_score"] for t in trials],
                "mean": c.get("mean"), "sd": c.get("sd"),
                "health": health,
                "hints": health_hints(label, c["hidden"], health),
            },
        })
        rows[-1]["series"].update(_series_extras(res, c, full.get(c["index"], []), label))
    for b in res.get("baselines") or []:
        rows.append(baseline_row(sweep_id, b, per_cfg))
    meta = {k: v for k, v in res.items() if k != "configurations"}
    meta["statements"] = verdict_statements(res)
    meta["heading"] = verdict_heading(res) if res.get("rope") is not None else ""
    meta["factor_words"] = dict(FACTOR_WORDS)
    return {"meta": meta, "rows": rows}


def baseline_row(sweep_id: str, b: dict, per_cfg: int) -> dict:
    """A baseline of the results document as a reference row of the results table."""
    return {
        "key": f"{sweep_id}:baseline:{b['name']}", "kind": "baseline", "index": None,
        "rank": None, "position": None, "hidden": b["name"], "head": "", "layers": "",
        "learning_rate": None, "alpha": None, "mean": b.get("mean"), "sd": b.get("sd"),
        "p_value": b.get("p_value"), "tied_with_best": bool(b.get("tied_with_best")),
        "decision": b.get("decision"), "p_better": b.get("p_better"),
        "p_equivalent": b.get("p_equivalent"), "p_worse": b.get("p_worse"),
        "difference": b.get("difference"), "interval": b.get("interval"),
        "n_networks_better": b.get("n_networks_better"),
        "train_mean": None, "gap": None, "underfit": None, "epochs": None,
        "fit_seconds": None, "dead_pct": None, "saturated_pct": None,
        "engine": "", "estimator": b.get("estimator", ""), "status": b.get("status"),
        "n_done": len(b.get("scores") or []), "n_total": per_cfg, "message": "",
        "series": None,
    }


def check_rope(text) -> float | None:
    """The window's ROPE box as the core reads it: empty means the default (None)."""
    from workbench.sweep.bayes import check_rope as core_check_rope

    text = "" if text is None else str(text).strip()
    return None if not text else core_check_rope(text)


def default_rope_text(metric: str | None) -> str:
    """The core's default region of practical equivalence for ``metric``, in a few words."""
    from workbench.sweep.bayes import default_rope, rope_kind

    if not metric:
        return "default"
    if rope_kind(metric) == "fraction":
        return f"{default_rope(metric):g}"
    return "1% of the constant baseline"


__all__ = ["InputError", "LoadedTable", "TargetSummary", "load", "summarise_target",
           "evidence_text", "hidden_tooltips", "head_tooltip", "fmt_seconds"]


# --------------------------------------------------------------------------- export


def export_formats() -> list[tuple[str, str, str, bool]]:
    """``(key, label, tooltip, checked by default)`` for each format of the export registry."""
    from workbench.export.bundle import FORMATS

    out = []
    for f in FORMATS.values():
        tip = f"{f.description}\nFiles: {', '.join(f.files)}"
        out.append((f.key, f.label, tip, True))
    return out


def export(store_path: str | None, sweep_id: str, row: dict, folder: str,
           formats: list[str], on_progress=None) -> str:
    """Export one configuration of a stored sweep; returns the folder written."""
    from workbench.export.bundle import export_configuration

    if not formats:
        raise InputError("tick at least one export format", setting="formats")
    if not str(folder).strip():
        raise InputError("choose a folder to export to", setting="folder")
    rank = row.get("position") or row.get("rank") or "best"
    with StoreSession(store_path) as store:
        out = export_configuration(store, sweep_id, rank, folder, list(formats),
                                   on_progress=on_progress)
    return str(out)


# --------------------------------------------------------------------------- plots' extras


def _series_extras(res: dict, c: dict, trials: list[dict], label: str) -> dict:
    """What the plots draw beyond the basic series: every curve the trials recorded (the
    diverged trials' up to the blow-up), the loss's kind, the metric, the diagnosis."""
    from workbench.sweep.diagnosis import loss_kind

    ran = [t for t in trials if t["status"] in ("done", "diverged")]
    done = [t for t in trials if t["status"] == "done"]
    kind, words = loss_kind(res["task"], c["head"])
    diagnosis = c.get("diagnosis") or {"codes": [], "text": "", "findings": []}

    def band(key, of):
        return _band([(t.get("history") or {}).get(key) or [] for t in of])

    return {
        "index": c["index"], "rank": c["rank"], "metric": res["metric"],
        "loss": band("loss", ran), "test_loss": band("test_loss", done),
        "test_score": band("test_score", done), "val": band("val_score", done),
        "loss_kind": kind, "loss_words": words, "diagnosis": diagnosis,
        "diverged": "diverged" in diagnosis["codes"],
    }


def calibration_points(store_path: str | None, sweep_id: str, indices: list[int]) -> dict:
    """The calibration panel's data for the selected configurations
    (:func:`workbench.sweep.calibration.points`)."""
    from workbench.sweep.calibration import points

    with StoreSession(store_path) as store:
        return points(store, sweep_id, indices)


def calibration_words(summary: dict | None) -> str:
    """One line of a configuration's calibration or residual figures."""
    from workbench.sweep.calibration import summary_words

    return summary_words(summary)
