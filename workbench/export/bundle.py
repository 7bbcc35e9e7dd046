"""Export the winner: one configuration of a stored sweep, as a folder a colleague can use.

:func:`export_configuration(store, sweep_id, rank_or_best, folder, formats)
<export_configuration>` reads the sweep, picks the configuration
(:func:`choose_configuration`; default the best), reloads the table and checks
its SHA-256 against the sweep's, gathers an
:class:`~workbench.export.context.ExportContext`, refits the pipeline on every
row when a model format is asked for (:mod:`workbench.export.refit`), lets each
format write its files (:mod:`workbench.export.formats`, which lists them) and
adds ``manifest.json`` (SHA-256 of every file and the library versions,
:mod:`workbench.export.model_files`) and, when given a key, its HMAC
(:mod:`workbench.export.signature`). All of it is written into a temporary
folder that replaces the target only when complete
(:mod:`workbench.export.atomic`).

The window's export dialog lists :data:`workbench.export.formats.FORMATS` and
calls :func:`export_configuration` with an ``on_progress(message, fraction)``
callback.
"""

from __future__ import annotations

from pathlib import Path

from workbench.errors import InputError
from workbench.export.atomic import prepare_folder, written_atomically
from workbench.export.configuration import build_configuration
from workbench.export.context import ExportContext
from workbench.export.formats import FORMATS, export_names, files_of, parse_formats
from workbench.export.model_files import MANIFEST_NAME, write_manifest
from workbench.export.refit import fit_final_pipeline
from workbench.export.signature import SIGNATURE_NAME, sign_folder


def choose_configuration(results: dict, rank_or_best="best") -> dict:
    """The configuration of ``results`` at a rank (1 = best) or ``"best"``.

    Raises
    ------
    InputError
        (setting ``config``) when the rank is not a number or out of range, or
        the configuration has no complete, successful cross-validation to export.
    """
    cfgs = results["configurations"]
    key = str(rank_or_best).strip().lower() if rank_or_best is not None else "best"
    if key == "best":
        rank = 1
    else:
        try:
            rank = int(key)
        except ValueError:
            raise InputError(f"the configuration to export must be a rank (1, 2, ...) or "
                             f"'best', not {rank_or_best!r}", setting="config") from None
    if not 1 <= rank <= len(cfgs):
        raise InputError(f"sweep {results['sweep_id']} has {len(cfgs)} configuration(s); "
                         f"choose a rank from 1 to {len(cfgs)} or 'best'", setting="config")
    chosen = cfgs[rank - 1]
    if chosen["status"] != "done":
        raise InputError(f"configuration at rank {rank} ({chosen['hidden']}/{chosen['head']}) is "
                         f"{chosen['status']}, so it has no complete cross-validation to export; "
                         "choose a ranked configuration or resume the sweep to finish it",
                         setting="config")
    return chosen


def export_configuration(store, sweep_id: str, rank_or_best="best", folder=None,
                         formats=None, on_progress=None, table=None, on_note=None,
                         sign_key: bytes | None = None, results: dict | None = None) -> Path:
    """Export one configuration of a stored sweep into ``folder``.

    Parameters
    ----------
    store : workbench.sweep.store.Store
    sweep_id : str
    rank_or_best : int or "best"
        Rank in the sweep's results (1 is the best).
    folder : path
        The export folder: new, empty, or an earlier export (replaced whole;
        entries it did not write are kept and reported through ``on_note``;
        anything else is refused, see :mod:`workbench.export.atomic`).
    formats : str or list of str, optional
        Keys of :data:`~workbench.export.formats.FORMATS` (default: all).
    on_progress : callable, optional
        ``on_progress(message, fraction)`` with ``fraction`` in [0, 1].
    table : path, optional
        Where the sweep's table is now, when the path stored with the sweep does
        not reach it (e.g. a relative path and another working folder); its
        SHA-256 must match the sweep's.
    on_note : callable, optional
        ``on_note(message)`` receives one line for things the user should know
        that are not errors: entries of the user's kept in the folder, abandoned
        temporaries that could not be removed (default: ``on_progress``).
    sign_key : bytes, optional
        A key the user keeps: the folder then also holds the HMAC-SHA256 of its
        manifest (:mod:`workbench.export.signature`), which ``predict`` can check
        with the same key.
    results : dict, optional
        The sweep's results document (:func:`workbench.sweep.results.sweep_results`)
        when the caller has already computed it (it is computed otherwise).

    Returns
    -------
    Path
        The export folder.

    Raises
    ------
    InputError
        for an unknown sweep or rank, a table that changed since the sweep, a
        folder that cannot be written, or an unknown format; ``setting`` names
        which of these it is about.
    """
    from workbench.sweep.plan import SweepPlan
    from workbench.sweep.results import sweep_results
    from workbench.sweep.runner import load_data

    if folder is None:
        raise InputError("give the folder to export to", setting="folder")
    progress = on_progress or (lambda message, fraction: None)
    note = on_note or (lambda message: progress(message, 1.0))
    keys = parse_formats(formats)
    folder = Path(folder).expanduser().absolute()

    # before any work: a folder that may not be replaced is the first and only word
    prepare_folder(folder, writes=files_of(keys) | {MANIFEST_NAME, SIGNATURE_NAME})
    progress("reading the sweep", 0.0)
    if results is None:
        results = sweep_results(store, sweep_id)
    chosen = choose_configuration(results, rank_or_best)
    plan = SweepPlan.from_dict(results["plan"])
    if table is not None:
        plan.table = str(table)
    if not Path(plan.table).expanduser().is_file():
        raise InputError(f"the sweep's table {plan.table} is not found from {Path.cwd()}; "
                         "give its current path (its SHA-256 is checked)", setting="table")
    progress("loading the table", 0.05)
    data, fingerprint = load_data(plan)
    stored = results["fingerprint"]
    if fingerprint["sha256"] != stored["sha256"] or fingerprint["rows"] != stored["rows"]:
        raise InputError(f"the table {plan.table} has changed since sweep {sweep_id} ran (its "
                         "SHA-256 no longer matches), so its scores no longer describe it; "
                         "restore the table or run a new sweep", setting="table")
    ctx = ExportContext(results=results, chosen=chosen, plan=plan, data=data,
                        fingerprint=fingerprint, folds=plan.fold_indices(data.y),
                        trials=store.trials(sweep_id, with_history=True),
                        profile=data.profile.to_dict(),
                        table_path=str(Path(plan.table).expanduser().absolute()))
    ctx.configuration = build_configuration(ctx)
    if any(FORMATS[k].needs_model for k in keys):
        progress("refitting the pipeline on every row", 0.15)
        ctx.pipeline = fit_final_pipeline(plan, chosen, data)

    with written_atomically(folder, export_names(), note=note) as tmp:
        for i, key in enumerate(keys):
            progress(f"writing {FORMATS[key].label}", 0.3 + 0.6 * i / len(keys))
            FORMATS[key].write(ctx, tmp)
        write_manifest(tmp, files=sorted(files_of(keys)), extra={"sweep_id": sweep_id, "configuration_rank": chosen["rank"],
                                   "configuration_index": chosen["index"], "formats": keys,
                                   "task": plan.task})
        if sign_key is not None:
            sign_folder(tmp, sign_key)
    progress("done", 1.0)
    return folder
