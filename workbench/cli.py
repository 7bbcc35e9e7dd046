"""The ``workbench`` command line.

``workbench`` with no arguments opens the window. Sub-commands live one per
module in :mod:`workbench.commands`; see that package's docstring.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys

from workbench import __version__
from workbench.errors import EXIT_BAD_INPUT, EXIT_CANCELLED, InputError

#: How the command line sets each setting a core message may name (workbench.errors.SETTINGS).
SETTING_FLAGS = {
    "table": "the FILE argument",
    "sheet": "--sheet",
    "target": "--target",
    "kind": "--kind",
    "roles": "--role",
    "hidden": "--hidden",
    "heads": "--output",
    "layers": "--layers",
    "learning_rate": "--learning-rate",
    "alpha": "--alpha",
    "folds": "--folds",
    "repeats": "--repeats",
    "epochs": "--epochs",
    "metric": "--metric",
    "engine": "--engine",
    "seed": "--seed",
    "jobs": "--jobs",
    "cluster": "--cluster",
    "store": "--store",
    "sweep": "the SWEEP_ID argument",
    "config": "--config",
    "formats": "--formats",
    "folder": "--to",
    "model": "--joblib or --onnx",
    "rope": "--rope",
}


def phrase_error(exc: InputError) -> str:
    """The core's one-line message, with the flag that sets what it is about."""
    flag = SETTING_FLAGS.get(exc.setting) if getattr(exc, "setting", None) else None
    return f"{exc} (set with {flag})" if flag else str(exc)


#: the start of NumPy's floating-point RuntimeWarnings (np.errstate's "warn" messages)
NUMERIC_WARNINGS = ("overflow encountered", "invalid value encountered",
                    "divide by zero encountered", "underflow encountered")


class _NumericWarnings:
    """Gather NumPy's floating-point RuntimeWarnings (two lines each, pointing into
    NumPy's own files) and say them once, in one line, when the command ends.

    Values such as 1e300 overflow in a square or a variance; what that does to the
    results is reported where it matters (a diverged trial, a missing score), so
    the terminal gets one note instead of a stack of warnings. Other warnings are
    shown as usual.
    """

    def __enter__(self):
        import warnings

        self._warnings = warnings
        self._old = warnings.showwarning
        self.seen: dict[str, int] = {}

        def show(message, category, filename, lineno, file=None, line=None):
            text = " ".join(str(message).split())
            if issubclass(category, RuntimeWarning) and text.startswith(NUMERIC_WARNINGS):
                self.seen[text] = self.seen.get(text, 0) + 1
                return
            self._old(message, category, filename, lineno, file, line)

        warnings.showwarning = show
        return self

    def __exit__(self, exc_type, *exc):
        self._warnings.showwarning = self._old
        if self.seen and exc_type is None:  # after a refusal, its one line is the word
            what = "; ".join(sorted(self.seen))
            print(f"workbench: note: some values are too large or too small for floating-point "
                  f"arithmetic (NumPy: {what}); statistics that rest on them may be infinite or "
                  "missing; rescaling such columns (e.g. to thousands or millions) avoids it",
                  file=sys.stderr)


def _literal(tree, name):
    """The value of a module-level ``NAME = <literal>`` in a parsed module, or None."""
    import ast

    for node in tree.body:
        if (isinstance(node, ast.Assign) and len(node.targets) == 1
                and isinstance(node.targets[0], ast.Name) and node.targets[0].id == name):
            try:
                return ast.literal_eval(node.value)
            except ValueError:
                return None
    return None


def _command_table(only: str | None = None) -> dict[str, tuple[str, str]]:
    """``{command: (module, one-line help)}``, read from each command module's source.

    The modules are not imported: a command's ``NAME`` and ``HELP`` are literals that
    :func:`ast.literal_eval` reads, so ``workbench --help`` loads none of the heavy
    libraries (NumPy, pandas, scikit-learn, SciPy) that a command's module may import.
    A module whose ``NAME`` or ``HELP`` is not a literal is imported to read them.

    ``only``: the command about to run. When the module of that name is the command of
    that name, only its entry is returned (the other modules' sources are not parsed:
    a sweep's first trial waits for this); otherwise, the whole table.
    """
    import ast
    import importlib.util

    import workbench.commands as pkg

    infos = sorted(pkgutil.iter_modules(pkg.__path__), key=lambda i: i.name)
    if only is not None:
        mine = [i for i in infos if i.name == only and not i.name.startswith("_")]
        if mine:
            table = _command_table_of(mine, ast, importlib.util)
            if list(table) == [only]:
                return table
    return _command_table_of(infos, ast, importlib.util)


def _command_table_of(infos, ast, util) -> dict[str, tuple[str, str]]:
    """:func:`_command_table` for the command modules ``infos`` (pkgutil's ModuleInfo)."""
    table = {}
    for info in infos:
        if info.name.startswith("_"):
            continue
        module = f"workbench.commands.{info.name}"
        spec = util.find_spec(module)
        source = spec.loader.get_source(module) if spec and spec.loader else None
        tree = ast.parse(source) if source else None
        name, text = (_literal(tree, "NAME"), _literal(tree, "HELP")) if tree else (None, None)
        if not (isinstance(name, str) and isinstance(text, str)):
            mod = importlib.import_module(module)
            if not (hasattr(mod, "NAME") and hasattr(mod, "run")):
                continue
            name, text = mod.NAME, mod.HELP
        table[name] = (module, text)
    return table


def _chosen_command(argv: list[str]) -> str | None:
    """The command ``argv`` names: its first word that is not an option (the top level's
    options, ``--help`` and ``--version``, take no value)."""
    return next((a for a in argv if not a.startswith("-")), None)


class _Parser(argparse.ArgumentParser):
    """argparse with a one-line usage error (exit status 2) instead of the usage block."""

    def error(self, message):
        message = " ".join(str(message).split())
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: {message}; see {self.prog} --help\n")


def build_parser(commands=None) -> argparse.ArgumentParser:
    """The ``workbench`` parser.

    Every command is listed (name and help); the options are added for the commands in
    ``commands`` (default: all), whose modules are imported to add them. :func:`main`
    asks only for the command being run, so only its module is imported; asked for one
    command that exists, the parser holds that command alone (a usage error names the
    same command, and ``workbench --help``, which asks for none, lists them all).
    """
    parser = _Parser(
        prog="workbench",
        description=(
            "Test hidden-layer and output-layer activation choices on your own table "
            "under repeated cross-validation. Run without a command to open the window."
        ),
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    only = commands[0] if commands is not None and len(commands) == 1 else None
    for name, (module, text) in _command_table(only).items():
        p = sub.add_parser(name, help=text, description=text)
        if commands is None or name in commands:
            mod = importlib.import_module(module)
            mod.add_arguments(p)
            p.set_defaults(_run=mod.run)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else list(argv)
    chosen = _chosen_command(argv)
    args = build_parser([chosen] if chosen else []).parse_args(argv)
    if args.command is None:  # no command: the window
        args = build_parser(["open"]).parse_args(["open"])
    try:
        with _NumericWarnings():
            return int(args._run(args) or 0)
    except InputError as exc:
        print(f"workbench: {phrase_error(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("workbench: cancelled", file=sys.stderr)
        return EXIT_CANCELLED
    except BrokenPipeError:
        return 0
    except MemoryError:
        print("workbench: not enough memory for this job; use a smaller table, fewer "
              "configurations or fewer --jobs", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OSError as exc:  # a disk, permission or file-system problem the command met
        where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
        print(f"workbench: {exc.strerror or exc}{where}; check the path and free space, "
              "then run the command again", file=sys.stderr)
        return EXIT_BAD_INPUT


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
