"""The exported configuration document (``configuration.json``) and its schema check.

:func:`build_configuration` writes down everything needed to rebuild and
re-evaluate the exported configuration: the table's fingerprint, the target and
its kind, the preprocessing groups, the activation, head and loss, the layer
shapes and hyperparameters, the seeds and test rows of every fold, the fold
scores with mean, sd and the tie group, the advice, the plan and the library
versions. :func:`validate_configuration` checks a document against the JSON
Schema shipped in ``schemas/configuration.schema.json`` (draft 2020-12, with
the ``jsonschema`` library).
"""

from __future__ import annotations

import json
import math
from datetime import UTC, datetime
from pathlib import Path

from workbench import __version__
from workbench.errors import InputError
from workbench.export.context import ExportContext
from workbench.export.model_files import library_versions
from workbench.export.refit import final_fit_seed

CONFIGURATION_NAME = "configuration.json"
SCHEMA_NAME = "configuration.schema.json"
SCHEMA_PATH = Path(__file__).with_name("schemas") / SCHEMA_NAME

CONFIGURATION_FORMAT = "activation-workbench-configuration"
CONFIGURATION_VERSION = 1


def jsonable(obj):
    """``obj`` with NumPy scalars and arrays made plain JSON values (NaN and inf become None)."""
    import numpy as np  # here, not at the top: the format registry imports this module

    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        v = float(obj)
        return v if math.isfinite(v) else None
    return obj


def estimator_description(plan, chosen: dict) -> tuple[str, dict]:
    """The estimator a configuration trains, as ``(qualified class name, parameters)``.

    The name is what :data:`workbench.export.reproduce.ESTIMATORS` looks up; the
    parameters (without ``random_state``, which is per fold) rebuild it there.
    """
    from workbench.sweep.trials import estimator_for

    est = estimator_for(plan, chosen)
    params = est.get_params(deep=False)
    params.pop("random_state", None)
    cls = type(est)
    return f"{cls.__module__.split('._')[0]}.{cls.__name__}", jsonable(params)


def _layer_shapes(ctx: ExportContext) -> list[list[int]]:
    import numpy as np

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
    estimator, params = estimator_description(plan, chosen)
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
    recommended = (res.get("verdict") or {}).get("recommended") or {}
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
                   "classes": jsonable(target.classes),
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
            "roles_set_by_user": jsonable(res["plan"].get("roles") or {}),
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
            "decision": chosen.get("decision"), "p_equivalent": chosen.get("p_equivalent"),
            "rope": res.get("rope"), "corrected_best": res.get("corrected_best"),
            "recommended": {**{k: recommended.get(k) for k in ("rank", "index", "reason")},
                            "exported": recommended.get("index") == chosen["index"]},
        },
        "advice": {"output_head": advice.output_head, "loss": advice.loss,
                   "reason": advice.reason, "basis": advice.basis,
                   "followed": head.name == advice.output_head,
                   "hidden_default": advice.hidden,
                   "hidden_followed": chosen["hidden"] == advice.hidden},
        "plan": jsonable(res["plan"]),
        "libraries": library_versions(),
        "sweep_libraries": jsonable(res.get("versions") or {}),
    }
    return jsonable(conf)


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
