"""How the window phrases the core's one-line messages for its users.

The core raises :class:`workbench.errors.InputError` with a message in words and,
in ``setting``, the key (one of :data:`workbench.errors.SETTINGS`) of the setting
the message is about. The command line adds the flag that sets it
(:func:`workbench.cli.phrase_error`); the window adds, through :func:`phrase`,
where *it* sets that setting: the label of its own control, or a short note when
the window has no control for it. Every place the window shows an ``InputError``
(the message bar, the plan estimate, a failed background task or sweep) goes
through :func:`phrase`.

This module imports no Qt, so its mapping can be checked without a display.
"""

from __future__ import annotations

#: Where the window sets each setting a core message may name, as the words that follow
#: the message in brackets. Controls are named by their own labels (a test finds each
#: quoted label in the window). Keys: exactly those of workbench.errors.SETTINGS.
SETTING_LABELS = {
    "table": "choose the table with File ▸ “Open table…” (Ctrl+O) or drop it on the window",
    "sheet": "the window reads the first worksheet of a workbook",
    "target": "set with the “Target” box in the set-up column",
    "kind": "set with the “Kind” box under “Target”",
    "roles": "set in the “Role” column of the column profile, on the “Data” tab",
    "hidden": "set with the “Hidden layers” boxes in the set-up column",
    "heads": "set with the “Output heads” boxes in the set-up column",
    "layers": "set with the “Layers” box in the set-up column",
    "learning_rate": "set with the “Learning rates” box in the set-up column",
    "alpha": "set with the “L2” box in the set-up column",
    "folds": "set with the “Folds” box in the set-up column",
    "repeats": "set with the “Repeats” box in the set-up column",
    "epochs": "set with the “Epochs” box in the set-up column",
    "metric": "set with the “Metric” box in the set-up column",
    "engine": "the window chooses the engine for each configuration",
    "seed": "the window uses the default seed",
    "jobs": "set with the “workers” box under “Where to run”",
    "cluster": "set with the “Dask scheduler” box under “Where to run”",
    "store": "the store the window was started with",
    "sweep": "choose a sweep with Sweep ▸ “History…” (Ctrl+H)",
    "config": "choose a configuration by selecting its row in the results table",
    "formats": "set with the “Formats” boxes of the export dialog",
    "folder": "set with the “Folder” box of the export dialog",
    "model": "the window does not read model files; an export's own predict does",
    "rope": "set with the “Equivalence ±” box under the results table",
}


def phrase(exc: BaseException) -> str:
    """The message the window shows for ``exc``: the core's line, then where to change it.

    Parameters
    ----------
    exc : Exception
        Usually a :class:`workbench.errors.InputError`; its ``setting`` (when set) picks
        the words from :data:`SETTING_LABELS`. Any other exception gives its text only.

    Returns
    -------
    str
        One line.
    """
    text = " ".join(str(exc).split())
    where = SETTING_LABELS.get(getattr(exc, "setting", None) or "")
    return f"{text} ({where})" if where else text
