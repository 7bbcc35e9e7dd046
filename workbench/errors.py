"""The project's own error types and exit codes.

Every problem caused by the user's input (a file, a column name, a setting) is
raised as :class:`InputError` with a one-line message that says what is wrong
and what to do. The core speaks of *settings* ("the number of folds", "the store
path"), never of command-line flags or window widgets: it names the setting it
is about in ``setting`` (one of :data:`SETTINGS`), and each front end phrases
that for its own users. The command line prints the line, adds the flag that
sets it and exits with status 2; the window shows it in its message bar beside
the control's own label.
"""

EXIT_OK = 0
EXIT_BAD_INPUT = 2
EXIT_CANCELLED = 130

#: The settings a core message may be about, with the words the core uses for them.
#: The command line maps each to its flag (``workbench.cli.SETTING_FLAGS``), the window
#: to its control (``workbench.gui.messages.SETTING_LABELS``); a test checks both cover
#: every key, so a new setting cannot be left unphrased.
SETTINGS = {
    "table": "the table file",
    "sheet": "the worksheet",
    "target": "the target column",
    "kind": "the target kind",
    "roles": "the column roles",
    "hidden": "the hidden activations",
    "heads": "the output heads",
    "layers": "the layer sizes",
    "learning_rate": "the learning rates",
    "alpha": "the L2 strengths",
    "folds": "the number of folds",
    "repeats": "the number of repeats",
    "epochs": "the number of epochs",
    "metric": "the metric",
    "engine": "the engine",
    "seed": "the seed",
    "jobs": "the number of worker processes",
    "cluster": "the Dask scheduler address",
    "store": "the store path",
    "sweep": "the sweep",
    "config": "the configuration",
    "formats": "the export formats",
    "folder": "the export folder",
    "model": "the model file",
    "rope": "the region of practical equivalence",
}


class InputError(Exception):
    """A problem with the user's input, explained in one line.

    Parameters
    ----------
    message : str
        What is wrong and what to do about it, on one line, in the core's words
        (settings by name, no command-line flags).
    setting : str, optional
        The key in :data:`SETTINGS` of the setting the message is about, so a
        front end can point at its own flag or control.
    """

    def __init__(self, message: str, *, setting: str | None = None):
        message = " ".join(str(message).split())  # always a single line
        if setting is not None and setting not in SETTINGS:
            raise ValueError(f"unknown setting {setting!r}; add it to workbench.errors.SETTINGS")
        super().__init__(message)
        self.message = message
        self.setting = setting

    def __str__(self) -> str:
        return self.message
