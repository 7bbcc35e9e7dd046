"""The sweep's full results as two spreadsheet-safe CSV files.

``configurations.csv`` has one row per configuration in rank order (mean ± sd,
p-values, tie group, health, which one was exported and the diagnosis in a few words); ``trials.csv`` has one
row per stored trial. Both go through :func:`workbench.export.safe_csv.write_safe_csv`.
"""

from __future__ import annotations

from pathlib import Path

from workbench.export.safe_csv import write_safe_csv

CONFIGURATIONS_CSV = "configurations.csv"
TRIALS_CSV = "trials.csv"

CONFIGURATION_COLUMNS = [
    "sweep_id", "table", "target", "target_kind", "metric", "rank", "index", "hidden", "head",
    "layers", "learning_rate", "alpha", "engine", "status", "mean", "sd", "n_scores",
    "p_value", "p_value_holm", "tied_with_best", "mean_fit_seconds", "train_mean",
    "train_test_gap", "dead", "saturated", "exported", "diagnosis"]

TRIAL_COLUMNS = [
    "sweep_id", "config_index", "hidden", "head", "layers", "repeat", "fold", "status",
    "test_score", "train_score", "fit_seconds", "epochs", "n_train", "n_test", "engine",
    "error"]


def _layers_text(layers) -> str:
    return ",".join(str(s) for s in layers)


def configuration_rows(results: dict, exported_index: int) -> list[list]:
    """One row per configuration, in :data:`CONFIGURATION_COLUMNS` order."""
    res = results
    return [[res["sweep_id"], res["table"], res["target"], res["target_kind"], res["metric"],
             c["rank"], c["index"], c["hidden"], c["head"], _layers_text(c["layers"]),
             c["learning_rate"], c["alpha"], c["engine"], c["status"], c["mean"], c["sd"],
             c["n_scores"], c["p_value"], c["p_value_holm"], c["tied_with_best"],
             c["mean_fit_seconds"], c["train_mean"], c["train_test_gap"], c["dead"],
             c["saturated"], c["index"] == exported_index,
             (c.get("diagnosis") or {}).get("text")]
            for c in res["configurations"]]


def trial_rows(results: dict, trials: list[dict]) -> list[list]:
    """One row per stored trial, in :data:`TRIAL_COLUMNS` order."""
    by_index = {c["index"]: c for c in results["configurations"]}
    rows = []
    for t in trials:
        c = by_index.get(t["config_index"], {})
        rows.append([results["sweep_id"], t["config_index"], c.get("hidden"), c.get("head"),
                     _layers_text(c.get("layers", [])), t["repeat"], t["fold"], t["status"],
                     t["test_score"], t["train_score"], t["fit_seconds"], t["epochs"],
                     t["n_train"], t["n_test"], t["engine"], t["error"]])
    return rows


def write_results_csv(results: dict, trials: list[dict], exported_index: int,
                      folder: Path) -> None:
    """Write :data:`CONFIGURATIONS_CSV` and :data:`TRIALS_CSV` into ``folder``."""
    write_safe_csv(folder / CONFIGURATIONS_CSV, CONFIGURATION_COLUMNS,
                   configuration_rows(results, exported_index))
    write_safe_csv(folder / TRIALS_CSV, TRIAL_COLUMNS, trial_rows(results, trials))
