"""Project-level guarantees: style, the Qt-free core contract, the command line.

Outside tools: ``ruff check`` (configuration in pyproject.toml), import-linter's
``lint-imports`` (the forbidden-import contract in pyproject.toml), Python's own
import system (``sys.modules`` after importing every core module) and ``argparse``'s
``--help`` exit status.
"""

from __future__ import annotations

import os
import pkgutil
import re
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


# --------------------------------------------------------------------------- the contributor guide

_FENCE = re.compile(r"^```[^\n]*\n(.*?)^```", re.S | re.M)
_PATHLIKE = re.compile(r"^\.?[\w.*-]+(/[\w.*-]+)*/?$")
_MODULE_REF = re.compile(r"^workbench(\.\w+)+$")


def _layout_paths(block: str) -> list[str]:
    """Paths of a layout tree: two spaces of indent per level, names before the first run
    of two or more spaces, several names on one line separated by ', '."""
    paths, stack = [], []
    for line in block.splitlines():
        if not line.strip():
            continue
        indent = len(line) - len(line.lstrip(" "))
        depth = indent // 2
        names = re.split(r"\s{2,}", line.strip())[0]
        stack = stack[:depth]
        for name in names.split(", "):
            name = name.strip()
            paths.append("".join(stack) + name)
        if names.endswith("/") and ", " not in names:
            stack.append(names)
    return paths


def _guide_references(text: str) -> tuple[list[str], list[str], list[str]]:
    """``(layout paths, other repo paths, workbench.* dotted names)`` a guide names."""
    blocks = _FENCE.findall(text)
    layout_at = text.find("## Layout")
    layout = next((b for b in blocks if text.find(b) > layout_at), "") if layout_at >= 0 else ""
    spans = re.findall(r"`([^`\n]+)`", _FENCE.sub("", text))
    tokens = [t for b in blocks if b is not layout for t in b.split()]
    tokens += [t for s in spans for t in s.split()]
    paths, dotted = [], []
    for tok in tokens:
        tok = tok.strip(",;:()[]\"'")
        if _MODULE_REF.match(tok):
            dotted.append(tok)
        elif ("/" in tok or tok.endswith((".py", ".md", ".toml"))) and _PATHLIKE.match(tok) \
                and not tok.startswith(("-", "/")):
            paths.append(tok)
    return _layout_paths(layout), paths, dotted


def _missing_references(text: str, root: Path) -> list[str]:
    layout, paths, dotted = _guide_references(text)
    missing = [p for p in layout if not (root / p).exists()]
    for p in paths:
        if "/" in p:
            found = any(root.glob(p.rstrip("/"))) if "*" in p else (root / p).exists()
        else:  # a bare file name: somewhere in the repository
            found = any(q for q in root.rglob(p) if ".git" not in q.parts)
        if not found:
            missing.append(p)
    for ref in dotted:
        parts = ref.split(".")
        for cut in range(len(parts), 0, -1):
            base = root.joinpath(*parts[:cut])
            if base.with_suffix(".py").is_file() or (base / "__init__.py").is_file():
                break
        else:
            missing.append(ref)
            continue
        rest = parts[cut:]
        if rest:
            src = base.with_suffix(".py") if base.with_suffix(".py").is_file() \
                else base / "__init__.py"
            name = re.escape(rest[0])
            if not re.search(rf"^\s*(def {name}\b|class {name}\b|{name}\s*[:=])",
                             src.read_text(encoding="utf-8"), re.M):
                missing.append(ref)
    return missing


def test_every_path_the_contributor_guide_names_exists():
    """DEVELOPERS.md's layout tree, the paths in its backticks and code blocks and its
    ``workbench.*`` names all exist in the repository (reference: the file system)."""
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    layout, paths, dotted = _guide_references(text)
    assert len(layout) >= 40 and "workbench/data/profiling.py" in layout
    assert "tests/test_project.py" in paths and "workbench.errors.SETTINGS" in dotted
    assert _missing_references(text, ROOT) == []


def test_the_guide_check_finds_a_wrong_path():
    """The checker itself: names that do not exist are reported, real ones are not."""
    guide = ("# Guide\n\n## Layout\n\n```\nworkbench/   pkg\n  errors.py   ok\n  bench.py   gone\n"
             "  data/   dir\n    intake.py   ok\n```\n\nRun `tests/test_engine.py` and "
             "`tests/test_intake.py`; see `workbench.errors.InputError`, "
             "`workbench.errors.NoSuchThing` and `workbench.nowhere`.\n")
    assert _missing_references(guide, ROOT) == [
        "workbench/bench.py", "tests/test_engine.py", "workbench.errors.NoSuchThing",
        "workbench.nowhere"]


# --------------------------------------------------------------------------- core messages


def _input_error_problems(path: Path) -> list[str]:
    """``InputError(...)`` calls of a module that pass no ``setting=`` or whose text names
    a command-line flag, as ``"line N: ..."``."""
    import ast

    source = path.read_text(encoding="utf-8")
    problems = []
    for node in ast.walk(ast.parse(source)):
        if not (isinstance(node, ast.Call) and getattr(node.func, "id", None) == "InputError"):
            continue
        text = " ".join(c.value for c in ast.walk(node)
                        if isinstance(c, ast.Constant) and isinstance(c.value, str))
        if not any(k.arg == "setting" for k in node.keywords) and "needs the" not in text:
            problems.append(f"line {node.lineno}: no setting")  # a missing package is exempt
        if re.search(r"(^|[\s(])--[a-z]", text):
            problems.append(f"line {node.lineno}: names a flag")
    return problems


@pytest.mark.parametrize("module", ["intake", "profiling", "preprocessing"])
def test_table_messages_name_the_setting_they_are_about(module):
    """Every InputError of workbench/data names its setting (the front ends point at it)
    and no command-line flag (reference: Python's own parser, ``ast``)."""
    assert _input_error_problems(ROOT / "workbench" / "data" / f"{module}.py") == []
