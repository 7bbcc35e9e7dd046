"""Export the winner: one configuration of a stored sweep, as a folder a colleague can use.

:func:`export_configuration(store, sweep_id, rank_or_best, folder, formats)
<export_configuration>` writes, for the chosen configuration (default: the best),

=========  ==============================  ==============================================
format     files                           what
=========  ==============================  ==============================================
json       configuration.json,             table fingerprint, target and kind,
           configuration.schema.json       preprocessing, activation, head and loss,
                                           layer shapes, hyperparameters, seeds, folds,
                                           fold scores with mean ± sd and the tie group,
                                           engine, library versions (validated against
                                           the shipped JSON Schema)
skops      model.skops                     the pipeline refitted on every row, in skops'
                                           format (loads only trusted types)
joblib     model.joblib                    the same pipeline pickled (loading runs code)
onnx       model.onnx                      the same pipeline as ONNX (opset 17+)
script     reproduce.py                    re-runs the cross-validation, prints the scores
csv        configurations.csv, trials.csv  the sweep's full results, spreadsheet-safe
report     report.html                     a self-contained report (see workbench.export.report)
=========  ==============================  ==============================================

plus ``manifest.json`` (SHA-256 of every file and the library versions). The
``script`` format needs ``json`` and brings it along.

Atomic writing: everything goes into a temporary folder next to the target,
which is renamed into place only when complete. An existing export at the
target is moved aside first and removed after the rename, so the folder is at
every moment either the old export or the new one, never a mixture; a folder
that exists but is not an export (no manifest) is refused.

The window's export dialog lists :data:`FORMATS` (key, label, files) and calls
:func:`export_configuration` with an ``on_progress(message, fraction)`` callback.
"""

from __future__ import annotations

import csv
import json
import math
import os
import secrets
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import numpy as np

from workbench import __version__
from workbench.errors import InputError
from workbench.export.model_files import (
    JOBLIB_NAME,
    MANIFEST_NAME,
    ONNX_NAME,
    SKOPS_NAME,
    library_versions,
    save_joblib,
    save_skops,
    write_manifest,
)

CONFIGURATION_NAME = "configuration.json"
SCHEMA_NAME = "configuration.schema.json"
SCRIPT_NAME = "reproduce.py"
CONFIGURATIONS_CSV = "configurations.csv"
TRIALS_CSV = "trials.csv"
REPORT_NAME = "report.html"

CONFIGURATION_FORMAT = "activation-workbench-configuration"
CONFIGURATION_VERSION = 1

SCHEMA_PATH = Path(__file__).with_name("schemas") / SCHEMA_NAME


# --------------------------------------------------------------------------- format registry


@dataclass(frozen=True)
class ExportFormat:
    """One entry of the export dialog: a key, a label, the files it writes."""

    key: str
    label: str
    description: str
    files: tuple[str, ...]
    needs_model: bool
    write: Callable = field(repr=False, compare=False)
    requires: tuple[str, ...] = ()


FORMATS: dict[str, ExportFormat] = {}


def export_format(key: str, label: str, description: str, files: tuple[str, ...], *,
                  needs_model: bool = False, requires: tuple[str, ...] = ()):
    """Register a writer ``write(ctx, folder)`` under ``key`` (decorator)."""

    def deco(fn):
        FORMATS[key] = ExportFormat(key, label, description, tuple(files), needs_model, fn,
                                    tuple(requires))
        return fn

    return deco


def format_choices() -> list[tuple[str, str]]:
    """``[(key, label), ...]`` in dialog order."""
    return [(f.key, f.label) for f in FORMATS.values()]


def parse_formats(value) -> list[str]:
    """Format keys from ``"json,skops"`` / a list; ``None`` or ``"all"`` gives every format.

    Raises
    ------
    InputError
        naming the valid keys when one is unknown.
    """
    if value is None:
        keys = list(FORMATS)
    else:
        parts = value.split(",") if isinstance(value, str) else list(value)
        keys = [str(p).strip().lower() for p in parts if str(p).strip()]
        if keys == ["all"]:
            keys = list(FORMATS)
    unknown = [k for k in keys if k not in FORMATS]
    if unknown or not keys:
        raise InputError(f"unknown export format(s) {', '.join(unknown) or '(none given)'}; "
                         f"choose from: {', '.join(FORMATS)}")
    for k in list(keys):
        for req in FORMATS[k].requires:
            if req not in keys:
                keys.append(req)
    return [k for k in FORMATS if k in keys]  # registry order, no repeats


# --------------------------------------------------------------------------- spreadsheet safety

#: OWASP "CSV Injection": a cell starting with one of these is read as a formula
FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def neutralise_cell(value):
    """Make one CSV cell inert in a spreadsheet (OWASP CSV-injection advice).

    Text that begins with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return
    gets a leading single quote, so a spreadsheet shows it as text instead of
    evaluating it. Numbers are written as numbers (a float's text is never a
    formula); ``None`` becomes an empty cell.
    """
    if value is None:
        return ""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        v = float(value)
        return repr(v) if math.isfinite(v) else ""
    text = str(value)
    if text.startswith(FORMULA_TRIGGERS):
        return "'" + text
    return text


def write_safe_csv(path, header: list[str], rows: list[list]) -> Path:
    """Write a CSV (UTF-8, RFC 4180 quoting) with every cell neutralised."""
    path = Path(path)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, quoting=csv.QUOTE_MINIMAL)
        w.writerow([neutralise_cell(h) for h in header])
        for r in rows:
            w.writerow([neutralise_cell(v) for v in r])
    return path


# --------------------------------------------------------------------------- the export context


@dataclass
class ExportContext:
    """Everything the writers read, gathered once."""

    results: dict
    chosen: dict
    plan: object
    data: object
    fingerprint: dict
    folds: dict
    trials: list
    configuration: dict | None = None
    pipeline: object = None
    profile: dict | None = None
    table_path: str = ""


def _jsonable(obj):
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        v = float(obj)
        return v if math.isfinite(v) else None
    return obj


def choose_configuration(results: dict, rank_or_best="best") -> dict:
    """The configuration of ``results`` at a rank (1 = best) or ``"best"``.

    Raises
    ------
    InputError
        when the rank is out of range or the configuration has no complete,
        successful cross-validation to export.
    """
    cfgs = results["configurations"]
    key = str(rank_or_best).strip().lower() if rank_or_best is not None else "best"
    if key == "best":
        rank = 1
    else:
        try:
            rank = int(key)
        except ValueError:
            raise InputError(f"--config must be a rank (1, 2, ...) or 'best', not "
                             f"{rank_or_best!r}") from None
    if not 1 <= rank <= len(cfgs):
        raise InputError(f"sweep {results['sweep_id']} has {len(cfgs)} configuration(s); "
                         f"choose a rank from 1 to {len(cfgs)} or 'best'")
    chosen = cfgs[rank - 1]
    if chosen["status"] != "done":
        raise InputError(f"configuration at rank {rank} ({chosen['hidden']}/{chosen['head']}) is "
                         f"{chosen['status']}, so it has no complete cross-validation to export; "
                         "choose a ranked configuration or finish the sweep "
                         "(workbench sweep --resume)")
    return chosen


def trial_spec(plan, chosen: dict, repeat: int, fold: int, train, test) -> dict:
    """The trial description the runner gives :func:`workbench.sweep.trials.run_trial`."""
    cfg = {"index": chosen["index"], "hidden": chosen["hidden"], "head": chosen["head"],
           "layers": list(chosen["layers"]), "learning_rate": chosen["learning_rate"],
           "alpha": chosen["alpha"], "engine": chosen["engine"]}
    return {"config": cfg, "repeat": repeat, "fold": fold, "train": train, "test": test,
            "random_state": plan.model_seed(repeat, fold), "task": plan.task,
            "metric": plan.metric, "epochs": plan.epochs, "early_stopping": plan.early_stopping,
            "batch_size": plan.batch_size, "dtype": plan.dtype}


def final_fit_seed(plan) -> int:
    """Seed of the refit on every row: that of repeat 0, fold 0 (recorded in the export)."""
    return plan.model_seed(0, 0)


def _estimator_info(plan, chosen) -> tuple[str, dict]:
    from workbench.sweep.trials import estimator_for

    est = estimator_for(plan, trial_spec(plan, chosen, 0, 0, [], [])["config"])
    params = est.get_params(deep=False)
    params.pop("random_state", None)
    cls = type(est)
    return f"{cls.__module__.split('._')[0]}.{cls.__name__}", _jsonable(params)


def _layer_shapes(ctx: ExportContext) -> list[list[int]]:
    from workbench.data.preprocessing import build_preprocessor

    X = ctx.data.X
    n_in = int(build_preprocessor(ctx.data.profile, ctx.data.target).fit_transform(X).shape[1])
    if ctx.plan.task == "classification":
        k = len(ctx.data.target.classes or np.unique(ctx.data.y))
        n_out = 1 if k == 2 else k
    else:
        n_out = 1
    sizes = [n_in, *[int(s) for s in ctx.chosen["layers"]], n_out]
    return [[a, b] for a, b in zip(sizes[:-1], sizes[1:])]


def preprocessing_groups(profile, target) -> dict:
    """``{group: {"columns": [...], "steps": [...]}}`` of the ColumnTransformer the
    pipeline builds (steps as scikit-learn prints them)."""
    from workbench.data.preprocessing import build_preprocessor

    out = {}
    for name, trans, cols in build_preprocessor(profile, target).transformers:
        steps = trans.steps if hasattr(trans, "steps") else [(name, trans)]
        out[name] = {"columns": [str(c) for c in cols],
                     "steps": [repr(step) for _, step in steps]}
    return out


def build_configuration(ctx: ExportContext) -> dict:
    """The ``configuration.json`` document (see the shipped JSON Schema)."""
    from workbench.data.preprocessing import DATE_PARTS, feature_groups, target_scaling
    from workbench.data.profiling import advise
    from workbench.nets.activations import LOSS_LABELS, resolve_head

    plan, chosen, res, target = ctx.plan, ctx.chosen, ctx.results, ctx.data.target
    head = resolve_head(chosen["head"], plan.task)
    estimator, params = _estimator_info(plan, chosen)
    advice = advise(target)
    scaling = None
    if plan.task == "regression":
        ts = target_scaling(target, chosen["head"])
        scaling = {"mode": ts.mode, "low": ts.low, "high": ts.high}
    groups = feature_groups(ctx.data.profile, target)
    scores = [{"repeat": t["repeat"], "fold": t["fold"], "test_score": t["test_score"],
               "train_score": t["train_score"], "epochs": t["epochs"]}
              for t in chosen["trials"]]
    folds = []
    for (r, f), (_tr, te) in sorted(ctx.folds.items()):
        folds.append({"repeat": r, "fold": f, "split_seed": plan.split_seed(r),
                      "model_seed": plan.model_seed(r, f), "n_train": int(len(_tr)),
                      "test_rows": [int(i) for i in te]})
    tie_group = [{"rank": c["rank"], "index": c["index"], "hidden": c["hidden"],
                  "head": c["head"], "layers": list(c["layers"]),
                  "learning_rate": c["learning_rate"], "alpha": c["alpha"], "mean": c["mean"]}
                 for c in res["configurations"] if c["tied_with_best"]]
    conf = {
        "format": CONFIGURATION_FORMAT,
        "format_version": CONFIGURATION_VERSION,
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "workbench_version": __version__,
        "sweep": {"id": res["sweep_id"], "state": res["state"], "created": res["created"],
                  "finished": res["finished"], "n_configurations": res["n_configurations"],
                  "n_trials": res["n_trials"]},
        "table": {"path": ctx.table_path, "file": ctx.fingerprint.get("file"),
                  "sheet": plan.sheet, "sha256": ctx.fingerprint["sha256"],
                  "rows": ctx.fingerprint["rows"], "cols": ctx.fingerprint["cols"],
                  "columns": list(ctx.fingerprint["columns"])},
        "target": {"name": target.name, "kind": target.kind, "task": target.task,
                   "classes": _jsonable(target.classes),
                   "interval": list(target.interval) if target.interval else None,
                   "rows_used": int(len(ctx.data.y)), "rows_dropped": int(target.rows_dropped),
                   "rule": target.evidence.get("rule")},
        "preprocessing": {
            "groups": preprocessing_groups(ctx.data.profile, target),
            "date_parts": list(DATE_PARTS),
            "target_scaling": scaling,
            "ignored": [{"column": c.name, "type": c.type, "reason": c.reason}
                        for c in ctx.data.profile.columns
                        if c.name != target.name
                        and not any(c.name in cols for cols in groups.values())],
            "roles_set_by_user": _jsonable(res["plan"].get("roles") or {}),
        },
        "model": {
            "engine": chosen["engine"],
            "estimator": estimator,
            "hidden_activation": chosen["hidden"],
            "output_head": head.name,
            "loss": head.loss,
            "loss_label": LOSS_LABELS[head.loss],
            "layers": [int(s) for s in chosen["layers"]],
            "layer_shapes": _layer_shapes(ctx),
            "learning_rate": chosen["learning_rate"],
            "alpha": chosen["alpha"],
            "hyperparameters": params,
            "dtype": plan.dtype,
        },
        "evaluation": {
            "metric": plan.metric, "greater_is_better": True,
            "folds": plan.folds, "repeats": plan.repeats, "seed": plan.seed,
            "stratified": plan.task == "classification",
            "splits": folds,
            "final_fit": {"rows": int(len(ctx.data.y)), "random_state": final_fit_seed(plan)},
        },
        "scores": {
            "fold_scores": scores,
            "mean": chosen["mean"], "sd": chosen["sd"], "n_scores": chosen["n_scores"],
            "rank": chosen["rank"], "p_value": chosen["p_value"],
            "tied_with_best": chosen["tied_with_best"],
            "significance_level": res["significance_level"], "correction": res["correction"],
            "test": "Nadeau-Bengio corrected resampled t-test against the best",
            "tie_group": tie_group,
        },
        "advice": {"output_head": advice.output_head, "loss": advice.loss,
                   "reason": advice.reason, "basis": advice.basis,
                   "followed": head.name == advice.output_head,
                   "hidden_default": advice.hidden,
                   "hidden_followed": chosen["hidden"] == advice.hidden},
        "plan": _jsonable(res["plan"]),
        "libraries": library_versions(),
        "sweep_libraries": _jsonable(res.get("versions") or {}),
    }
    return _jsonable(conf)


def load_schema() -> dict:
    """The shipped JSON Schema of ``configuration.json``."""
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


def validate_configuration(conf: dict) -> None:
    """Validate a configuration document against the shipped schema.

    Raises
    ------
    InputError
        naming the first violation (its JSON path and message).
    """
    import jsonschema

    schema = load_schema()
    validator = jsonschema.Draft202012Validator(schema)
    errors = sorted(validator.iter_errors(conf), key=lambda e: list(e.absolute_path))
    if errors:
        e = errors[0]
        where = "/".join(str(p) for p in e.absolute_path) or "(top level)"
        raise InputError(f"configuration does not match its schema at {where}: {e.message}")


def read_configuration(path) -> dict:
    """Read and validate an exported ``configuration.json``."""
    path = Path(path)
    try:
        conf = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"{path} cannot be read as JSON ({exc}); re-export it") from None
    validate_configuration(conf)
    return conf


# --------------------------------------------------------------------------- writers


@export_format("json", "Configuration (JSON, with its schema)",
               "Everything needed to rebuild and re-evaluate the configuration.",
               (CONFIGURATION_NAME, SCHEMA_NAME))
def _write_json(ctx: ExportContext, folder: Path):
    conf = ctx.configuration
    validate_configuration(conf)
    (folder / CONFIGURATION_NAME).write_text(json.dumps(conf, indent=2, allow_nan=False) + "\n",
                                             encoding="utf-8")
    shutil.copyfile(SCHEMA_PATH, folder / SCHEMA_NAME)


@export_format("skops", "Fitted pipeline (skops, safe to load)",
               "Preprocessing + network refitted on every row; loads only trusted types.",
               (SKOPS_NAME,), needs_model=True)
def _write_skops(ctx: ExportContext, folder: Path):
    save_skops(ctx.pipeline, folder / SKOPS_NAME)


@export_format("joblib", "Fitted pipeline (joblib pickle)",
               "The same pipeline as a pickle; loading a pickle runs code, so share it only "
               "with people who trust you.", (JOBLIB_NAME,), needs_model=True)
def _write_joblib(ctx: ExportContext, folder: Path):
    save_joblib(ctx.pipeline, folder / JOBLIB_NAME)


@export_format("onnx", "Fitted pipeline (ONNX, open standard)",
               "The same pipeline, preprocessing included, for onnxruntime (opset 17+).",
               (ONNX_NAME,), needs_model=True)
def _write_onnx(ctx: ExportContext, folder: Path):
    import onnx

    from workbench.export.onnx_graph import pipeline_to_onnx

    model = pipeline_to_onnx(ctx.pipeline, ctx.data.X.head(50))
    onnx.save(model, str(folder / ONNX_NAME))


@export_format("script", "Reproduce script (Python)",
               "Rebuilds the pipeline from configuration.json, re-runs the cross-validation "
               "and compares the scores with the stored ones.", (SCRIPT_NAME,),
               requires=("json",))
def _write_script(ctx: ExportContext, folder: Path):
    (folder / SCRIPT_NAME).write_text(REPRODUCE_TEMPLATE, encoding="utf-8")


@export_format("csv", "Sweep results (CSV)",
               "One row per configuration and one per trial, safe to open in a spreadsheet.",
               (CONFIGURATIONS_CSV, TRIALS_CSV))
def _write_csv(ctx: ExportContext, folder: Path):
    res = ctx.results
    head = ["sweep_id", "table", "target", "target_kind", "metric", "rank", "index", "hidden",
            "head", "layers", "learning_rate", "alpha", "engine", "status", "mean", "sd",
            "n_scores", "p_value", "p_value_holm", "tied_with_best", "mean_fit_seconds",
            "train_mean", "train_test_gap", "dead", "saturated", "exported"]
    rows = []
    for c in res["configurations"]:
        rows.append([res["sweep_id"], res["table"], res["target"], res["target_kind"],
                     res["metric"], c["rank"], c["index"], c["hidden"], c["head"],
                     ",".join(str(s) for s in c["layers"]), c["learning_rate"], c["alpha"],
                     c["engine"], c["status"], c["mean"], c["sd"], c["n_scores"], c["p_value"],
                     c["p_value_holm"], c["tied_with_best"], c["mean_fit_seconds"],
                     c["train_mean"], c["train_test_gap"], c["dead"], c["saturated"],
                     c["index"] == ctx.chosen["index"]])
    write_safe_csv(folder / CONFIGURATIONS_CSV, head, rows)
    thead = ["sweep_id", "config_index", "hidden", "head", "layers", "repeat", "fold",
             "status", "test_score", "train_score", "fit_seconds", "epochs", "n_train",
             "n_test", "engine", "error"]
    by_index = {c["index"]: c for c in res["configurations"]}
    trows = []
    for t in ctx.trials:
        c = by_index.get(t["config_index"], {})
        trows.append([res["sweep_id"], t["config_index"], c.get("hidden"), c.get("head"),
                      ",".join(str(s) for s in c.get("layers", [])), t["repeat"], t["fold"],
                      t["status"], t["test_score"], t["train_score"], t["fit_seconds"],
                      t["epochs"], t["n_train"], t["n_test"], t["engine"], t["error"]])
    write_safe_csv(folder / TRIALS_CSV, thead, trows)


@export_format("report", "Report (HTML, self-contained)",
               "Table, target, advice, ranking with the tie group, learning curves, fold "
               "spread, layer health and cautions, in one file.", (REPORT_NAME,))
def _write_report(ctx: ExportContext, folder: Path):
    from workbench.export.report import render_report

    html_text = render_report(ctx.results, ctx.chosen, ctx.configuration, ctx.trials,
                              profile=ctx.profile)
    (folder / REPORT_NAME).write_text(html_text, encoding="utf-8")


# --------------------------------------------------------------------------- the export


def fit_final_pipeline(plan, chosen: dict, data):
    """The chosen configuration's pipeline, refitted on every row of the table."""
    import warnings

    from threadpoolctl import threadpool_limits

    from workbench.data.preprocessing import build_pipeline
    from workbench.sweep.trials import estimator_for

    config = trial_spec(plan, chosen, 0, 0, [], [])["config"]
    est = estimator_for(plan, config, random_state=final_fit_seed(plan))
    pipe = build_pipeline(data.profile, data.target, est, chosen["head"])
    with threadpool_limits(limits=1), warnings.catch_warnings(), \
            np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        warnings.simplefilter("ignore")
        pipe.fit(data.X, data.y)
    return pipe


def _prepare_folder(folder: Path) -> None:
    """Refuse targets that are files or folders that are not exports; create parents."""
    if folder.exists():
        if not folder.is_dir():
            raise InputError(f"{folder} is a file; give a folder for the export")
        if any(folder.iterdir()) and not (folder / MANIFEST_NAME).is_file():
            raise InputError(f"{folder} exists and is not a workbench export (no {MANIFEST_NAME});"
                             " choose a new or empty folder so nothing of yours is replaced")
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create {folder.parent} ({exc.strerror}); "
                         "choose a folder you can write to") from None
    if not os.access(folder.parent, os.W_OK):
        raise InputError(f"{folder.parent} is not writable; choose a folder you can write to")


def _swap_into_place(tmp: Path, folder: Path) -> None:
    if folder.exists():
        old = folder.with_name(f".{folder.name}.old-{secrets.token_hex(4)}")
        os.replace(folder, old)
        try:
            os.replace(tmp, folder)
        except OSError:
            os.replace(old, folder)
            raise
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(tmp, folder)


def export_configuration(store, sweep_id: str, rank_or_best="best", folder=None,
                         formats=None, on_progress=None, table=None) -> Path:
    """Export one configuration of a stored sweep into ``folder``.

    Parameters
    ----------
    store : workbench.sweep.store.Store
    sweep_id : str
    rank_or_best : int or "best"
        Rank in the sweep's results (1 is the best).
    folder : path
        The export folder (created; an earlier export there is replaced whole).
    formats : str or list of str, optional
        Keys of :data:`FORMATS` (default: all).
    on_progress : callable, optional
        ``on_progress(message, fraction)`` with ``fraction`` in [0, 1].
    table : path, optional
        Where the sweep's table is now, when the path stored with the sweep does
        not reach it (e.g. a relative path and another working folder); its
        SHA-256 must match the sweep's.

    Returns
    -------
    Path
        The export folder.

    Raises
    ------
    InputError
        for an unknown sweep or rank, a table that changed since the sweep, a
        folder that cannot be written, or an unknown format.
    """
    from workbench.sweep.plan import SweepPlan
    from workbench.sweep.results import sweep_results
    from workbench.sweep.runner import load_data

    if folder is None:
        raise InputError("give the folder to export to (--to FOLDER)")
    progress = on_progress or (lambda message, fraction: None)
    keys = parse_formats(formats)
    folder = Path(folder).expanduser().absolute()

    progress("reading the sweep", 0.0)
    results = sweep_results(store, sweep_id)
    chosen = choose_configuration(results, rank_or_best)
    _prepare_folder(folder)
    plan = SweepPlan.from_dict(results["plan"])
    if table is not None:
        plan.table = str(table)
    if not Path(plan.table).expanduser().is_file():
        raise InputError(f"the sweep's table {plan.table} is not found from {Path.cwd()}; "
                         "give its current path (--table PATH; its SHA-256 is checked)")
    progress("loading the table", 0.05)
    data, fingerprint = load_data(plan)
    stored = results["fingerprint"]
    if fingerprint["sha256"] != stored["sha256"] or fingerprint["rows"] != stored["rows"]:
        raise InputError(f"the table {plan.table} has changed since sweep {sweep_id} ran (its "
                         "SHA-256 no longer matches), so its scores no longer describe it; "
                         "restore the table or run a new sweep")
    ctx = ExportContext(results=results, chosen=chosen, plan=plan, data=data,
                        fingerprint=fingerprint, folds=plan.fold_indices(data.y),
                        trials=store.trials(sweep_id, with_history=True),
                        profile=data.profile.to_dict(),
                        table_path=str(Path(plan.table).expanduser().absolute()))
    ctx.configuration = build_configuration(ctx)
    if any(FORMATS[k].needs_model for k in keys):
        progress("refitting the pipeline on every row", 0.15)
        ctx.pipeline = fit_final_pipeline(plan, chosen, data)

    try:
        tmp = Path(os.path.join(folder.parent, f".{folder.name}.tmp-{secrets.token_hex(4)}"))
        tmp.mkdir()
    except OSError as exc:
        raise InputError(f"cannot write in {folder.parent} ({exc.strerror}); "
                         "choose a folder you can write to") from None
    try:
        for i, key in enumerate(keys):
            progress(f"writing {FORMATS[key].label}", 0.3 + 0.6 * i / len(keys))
            FORMATS[key].write(ctx, tmp)
        write_manifest(tmp, extra={"sweep_id": sweep_id, "configuration_rank": chosen["rank"],
                                   "configuration_index": chosen["index"], "formats": keys,
                                   "task": plan.task,
                                   "classes": _jsonable(data.target.classes)})
        _swap_into_place(tmp, folder)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise InputError(f"writing the export failed ({exc.strerror or exc}); nothing was "
                         f"changed at {folder}") from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    progress("done", 1.0)
    return folder


# --------------------------------------------------------------------------- reproduce.py

REPRODUCE_TEMPLATE = r'''#!/usr/bin/env python3
"""Re-run the cross-validation of one exported configuration and compare the scores.

Written by ``workbench export``. It reads ``configuration.json`` (next to this
script unless ``--config`` says otherwise), loads the table it names (checking
its SHA-256), rebuilds the pipeline with the workbench's public functions
(load_table, profile_table, analyse_target, split_xy, build_pipeline) and the
recorded estimator parameters, fits it on every stored training fold with the
stored seed, scores the stored test fold with scikit-learn's scorer, and prints
each fold's score next to the stored one.

Usage::

    python reproduce.py [--table PATH] [--config configuration.json]

Exit status 0 when every score matches the stored one (within 1e-9 for float64
runs), 1 when one differs, 2 when the table or the configuration is unusable.
"""

import argparse
import hashlib
import json
import sys
import warnings
from pathlib import Path

import numpy as np
from sklearn.metrics import get_scorer
from sklearn.neural_network import MLPClassifier, MLPRegressor
from threadpoolctl import threadpool_limits

from workbench.nets.engine import NetClassifier, NetRegressor
from workbench.data.intake import load_table
from workbench.data.preprocessing import build_pipeline
from workbench.data.profiling import analyse_target, profile_table, split_xy

#: the only estimators a configuration may name
ESTIMATORS = {
    "workbench.nets.engine.NetRegressor": NetRegressor,
    "workbench.nets.engine.NetClassifier": NetClassifier,
    "sklearn.neural_network.MLPRegressor": MLPRegressor,
    "sklearn.neural_network.MLPClassifier": MLPClassifier,
}


def sha256_of(path):
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def make_estimator(model, seed):
    cls = ESTIMATORS.get(model["estimator"])
    if cls is None:
        sys.exit(f"reproduce: unknown estimator {model['estimator']!r} in the configuration")
    params = dict(model["hyperparameters"])
    params["hidden_layer_sizes"] = tuple(params["hidden_layer_sizes"])
    if isinstance(params.get("activation"), list):
        params["activation"] = tuple(params["activation"])
    return cls(**params, random_state=seed)


def main(argv=None):
    here = Path(__file__).resolve().parent
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--config", default=str(here / "configuration.json"))
    parser.add_argument("--table", default=None, help="the table (default: the recorded path)")
    args = parser.parse_args(argv)
    conf = json.loads(Path(args.config).read_text(encoding="utf-8"))
    table = Path(args.table or conf["table"]["path"])
    if not table.is_file():
        print(f"reproduce: table {table} not found; pass --table PATH", file=sys.stderr)
        return 2
    if sha256_of(table) != conf["table"]["sha256"]:
        print(f"reproduce: {table} is not the table of the sweep (SHA-256 differs)",
              file=sys.stderr)
        return 2

    df, _ = load_table(table, sheet=conf["table"]["sheet"])
    name = conf["target"]["name"]
    target = analyse_target(df, name)
    if target.kind != conf["target"]["kind"]:
        print(f"reproduce: target {name!r} now reads as {target.kind}, "
              f"not {conf['target']['kind']}", file=sys.stderr)
        return 2
    profile = profile_table(df, target=name)
    for column, role in (conf["plan"].get("roles") or {}).items():  # the user's choices
        col = profile.column(column)
        col.role, col.reason = role, "set by the user"
    X, y = split_xy(df, target)
    model = conf["model"]
    scorer = get_scorer(conf["evaluation"]["metric"])
    stored = {(s["repeat"], s["fold"]): s["test_score"] for s in conf["scores"]["fold_scores"]}
    tol = 1e-9 if (model["dtype"] == "float64" or model["engine"] == "sklearn") else 1e-5
    rows = np.arange(len(y))
    scores, worst = [], 0.0
    print(f"configuration: {model['hidden_activation']} hidden, {model['output_head']} head "
          f"({model['loss']}), layers {model['layers']}, engine {model['engine']}")
    print(f"metric: {conf['evaluation']['metric']} (greater is better)")
    for split in conf["evaluation"]["splits"]:
        r, f = split["repeat"], split["fold"]
        test = np.asarray(split["test_rows"], dtype=int)
        train = np.setdiff1d(rows, test)  # the other rows, in table order (as KFold gives)
        est = make_estimator(model, split["model_seed"])
        pipe = build_pipeline(profile, target, est, model["output_head"])
        with threadpool_limits(limits=1), warnings.catch_warnings(), \
                np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            warnings.simplefilter("ignore")
            pipe.fit(X.iloc[train], y[train])
            score = float(scorer(pipe, X.iloc[test], y[test]))
        ref = stored[(r, f)]
        diff = abs(score - ref)
        worst = max(worst, diff)
        scores.append(score)
        print(f"repeat {r} fold {f}: {score:.12f}  stored {ref:.12f}  difference {diff:.1e}")
    sd = float(np.std(scores, ddof=1)) if len(scores) > 1 else float("nan")
    print(f"mean {np.mean(scores):.12f} +/- {sd:.12f} over {len(scores)} folds "
          f"(stored mean {conf['scores']['mean']:.12f})")
    if worst <= tol:
        print(f"every fold score matches the stored one (largest difference {worst:.1e}, "
              f"tolerance {tol:g})")
        return 0
    print(f"MISMATCH: largest difference {worst:.1e} exceeds the tolerance {tol:g}")
    return 1


if __name__ == "__main__":
    sys.exit(main())
'''
