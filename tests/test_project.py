"""Project-level guarantees: style, the Qt-free core contract, the command line.

Outside tools: ``ruff check`` (configuration in pyproject.toml), import-linter's
``lint-imports`` (the forbidden-import contract in pyproject.toml), Python's own
import system (``sys.modules`` after importing every core module) and ``argparse``'s
``--help`` exit status.
"""

from __future__ import annotations

import os
import pkgutil
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

import workbench

ROOT = Path(__file__).resolve().parents[1]
QT_MODULES = ("PySide6", "pyqtgraph", "shiboken6")


def _run(args, timeout=180, env=None):
    return subprocess.run(args, cwd=ROOT, capture_output=True, text=True, timeout=timeout,
                          env=env)


def _headless_env():
    env = dict(os.environ)
    env.setdefault("QT_QPA_PLATFORM", "offscreen")
    return env


def test_ruff_passes():
    """``ruff check workbench tests`` with the project's configuration."""
    res = _run([sys.executable, "-m", "ruff", "check", "workbench", "tests"])
    assert res.returncode == 0, f"ruff found problems:\n{res.stdout}\n{res.stderr}"


def test_import_contract_kept():
    """import-linter: PySide6 / pyqtgraph / shiboken6 only inside workbench.gui."""
    exe = shutil.which("lint-imports", path=str(Path(sys.executable).parent)) or shutil.which(
        "lint-imports")
    if exe is None:
        pytest.fail("lint-imports is not installed; pip install -e '.[test]'")
    res = _run([exe])
    assert res.returncode == 0, f"import contract broken:\n{res.stdout}\n{res.stderr}"
    assert "broken" in res.stdout and "0 broken" in res.stdout


def _core_modules():
    names = []
    for info in pkgutil.walk_packages(workbench.__path__, prefix="workbench."):
        if info.name == "workbench.gui" or info.name.startswith("workbench.gui."):
            continue
        if info.name == "workbench.__main__":
            continue  # running it starts the program; `python -m workbench --help` covers it
        names.append(info.name)
    return names


def test_core_imports_without_qt():
    """Import every module outside workbench/gui in a fresh interpreter: no Qt module may end
    up in sys.modules (the core must stay usable headless)."""
    modules = _core_modules()
    assert "workbench.nets.engine" in modules and "workbench.nets.activations" in modules
    code = (
        "import importlib, sys\n"
        f"mods = {modules!r}\n"
        "for m in mods:\n"
        "    importlib.import_module(m)\n"
        f"bad = [q for q in {QT_MODULES!r} if q in sys.modules]\n"
        "print('LOADED', bad)\n"
        "sys.exit(1 if bad else 0)\n"
    )
    res = _run([sys.executable, "-c", code], env=_headless_env())
    assert res.returncode == 0, f"{res.stdout}\n{res.stderr}"
    assert "LOADED []" in res.stdout


def test_module_help_exits_zero():
    """``python -m workbench --help`` prints the usage and exits with 0."""
    res = _run([sys.executable, "-m", "workbench", "--help"], timeout=120, env=_headless_env())
    assert res.returncode == 0, res.stderr
    assert "usage: workbench" in res.stdout
