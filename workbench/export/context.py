"""What every export writer reads, gathered once by :func:`workbench.export.bundle.export_configuration`."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass
class ExportContext:
    """Everything the format writers read.

    Attributes
    ----------
    results : dict
        The sweep's results document (:meth:`workbench.sweep.store.Store.results`).
    chosen : dict
        The exported configuration, one entry of ``results["configurations"]``.
    plan : workbench.sweep.plan.SweepPlan
    data : workbench.sweep.runner.TrialData
        The table as the sweep saw it (features, target, profile with the user's roles).
    fingerprint : dict
        SHA-256, shape and column names of the table (checked against the sweep's).
    folds : dict
        ``{(repeat, fold): (train_rows, test_rows)}`` of the sweep's cross-validation.
    trials : list of dict
        Every stored trial of the sweep, with its history.
    configuration : dict, optional
        The ``configuration.json`` document.
    pipeline : sklearn.pipeline.Pipeline, optional
        The configuration refitted on every row (only when a model format is written).
    profile : dict, optional
        The table profile as a dict (for the report).
    table_path : str
        Absolute path of the table.
    """

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
