"""The export formats: which exist, the files each writes, and its writer (one place each).

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

The writers import what they need when they run, so that reading the registry (the
window's dialog, ``workbench export --help``) loads no heavy library and an export
imports only what its chosen formats use (ONNX, skops, matplotlib for the report;
tests/test_fast_start.py checks it). Every export loads scikit-learn (with NumPy, pandas
and the SciPy modules scikit-learn imports itself): the configuration describes the
fitted preprocessing and the model formats refit the pipeline. On top of that, measured
on 2026-12-02 (CPU seconds of a fresh interpreter, medians of 5 interleaved runs, load
average 8 on 2 cores, so above an idle machine's; scikit-learn's own floor was 2.5 s):
``json`` and ``script`` +0.13 (jsonschema); ``skops`` +1.5 (importing ``skops.io``
lists every scikit-learn estimator, which imports most of scikit-learn); ``onnx`` +1.5
(mostly ``ml_dtypes``' extension, which ``onnx`` loads, and skl2onnx); ``report`` +0.45
for matplotlib, and its four figures then take longer to draw than matplotlib to import.

Adding a format means adding one :func:`export_format` entry below: a key, a
label and description for the window's export dialog, the files it writes and
a writer ``write(ctx, folder)`` that reads an
:class:`~workbench.export.context.ExportContext`. ``needs_model`` asks for the
refitted pipeline; ``requires`` names formats written along with it (the
script reads the JSON). :data:`FORMATS` keeps registration order, which is the
dialog's order and the order of writing.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from workbench.errors import InputError
from workbench.export.configuration import CONFIGURATION_NAME, SCHEMA_NAME, SCHEMA_PATH
from workbench.export.context import ExportContext
from workbench.export.model_files import JOBLIB_NAME, ONNX_NAME, SKOPS_NAME
from workbench.export.results_csv import CONFIGURATIONS_CSV, TRIALS_CSV

#: the report's file name, :data:`workbench.export.report.REPORT_NAME` (named here because
#: that module imports NumPy, and this registry is read by ``workbench export --help``,
#: which must stay light; tests/test_fast_start.py checks that the two agree)
REPORT_NAME = "report.html"
#: the name of the reproduce script in the export folder
SCRIPT_NAME = "reproduce.py"
#: its source: a module of this package, copied into the folder as it is
REPRODUCE_SOURCE = Path(__file__).with_name("reproduce.py")


@dataclass(frozen=True)
class ExportFormat:
    """One entry of the export dialog: a key, a label, the files it writes, its writer."""

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

    The formats a chosen one requires are added; the result is in registry order.

    Raises
    ------
    InputError
        (setting ``formats``) naming the valid keys when one is unknown.
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
                         f"choose from: {', '.join(FORMATS)}", setting="formats")
    for k in list(keys):
        for req in FORMATS[k].requires:
            if req not in keys:
                keys.append(req)
    return [k for k in FORMATS if k in keys]  # registry order, no repeats


def files_of(keys) -> set[str]:
    """The names the formats ``keys`` write."""
    return {name for k in keys for name in FORMATS[k].files}


def export_names() -> set[str]:
    """Every name any format writes (what an export folder may hold besides its manifest)."""
    return files_of(FORMATS)


# --------------------------------------------------------------------------- the writers


@export_format("json", "Configuration (JSON, with its schema)",
               "Everything needed to rebuild and re-evaluate the configuration.",
               (CONFIGURATION_NAME, SCHEMA_NAME))
def _write_json(ctx: ExportContext, folder: Path):
    from workbench.export.configuration import validate_configuration

    conf = ctx.configuration
    validate_configuration(conf)
    (folder / CONFIGURATION_NAME).write_text(json.dumps(conf, indent=2, allow_nan=False) + "\n",
                                             encoding="utf-8")
    shutil.copyfile(SCHEMA_PATH, folder / SCHEMA_NAME)


@export_format("skops", "Fitted pipeline (skops, safe to load)",
               "Preprocessing + network refitted on every row; loads only trusted types.",
               (SKOPS_NAME,), needs_model=True)
def _write_skops(ctx: ExportContext, folder: Path):
    from workbench.export.model_files import save_skops

    save_skops(ctx.pipeline, folder / SKOPS_NAME)


@export_format("joblib", "Fitted pipeline (joblib pickle)",
               "The same pipeline as a pickle; loading a pickle runs code, so share it only "
               "with people who trust you.", (JOBLIB_NAME,), needs_model=True)
def _write_joblib(ctx: ExportContext, folder: Path):
    from workbench.export.model_files import save_joblib

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
    shutil.copyfile(REPRODUCE_SOURCE, folder / SCRIPT_NAME)


@export_format("csv", "Sweep results (CSV)",
               "One row per configuration and one per trial, safe to open in a spreadsheet.",
               (CONFIGURATIONS_CSV, TRIALS_CSV))
def _write_csv(ctx: ExportContext, folder: Path):
    from workbench.export.results_csv import write_results_csv

    write_results_csv(ctx.results, ctx.trials, ctx.chosen["index"], folder)


@export_format("report", "Report (HTML, self-contained)",
               "Table, target, advice, ranking with the tie group, learning curves, fold "
               "spread, layer health and cautions, in one file.", (REPORT_NAME,))
def _write_report(ctx: ExportContext, folder: Path):
    from workbench.export.report import render_report

    html_text = render_report(ctx.results, ctx.chosen, ctx.configuration, ctx.trials,
                              profile=ctx.profile)
    (folder / REPORT_NAME).write_text(html_text, encoding="utf-8")
