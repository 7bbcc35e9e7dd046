"""A wheel built from the checkout carries every file the program loads at run time.

Built the way ``pip install .`` builds it (setuptools' wheel), from a copy of the tracked
files so the checkout is left untouched.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _tracked_files() -> list[str]:
    try:
        out = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True,
                             check=True, timeout=60).stdout.split("\n")
        return [f for f in out if f and (ROOT / f).is_file()]
    except (OSError, subprocess.CalledProcessError):  # not a git checkout: take the tree
        return [str(p.relative_to(ROOT)) for p in ROOT.rglob("*")
                if p.is_file() and ".git" not in p.parts]


@pytest.fixture(scope="module")
def wheel_names(tmp_path_factory) -> set[str]:
    src = tmp_path_factory.mktemp("src")
    for rel in _tracked_files():
        if rel.startswith(("workbench/", "pyproject.toml", "README.md")):
            (src / rel).parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(ROOT / rel, src / rel)
    out = tmp_path_factory.mktemp("wheel")
    proc = subprocess.run([sys.executable, "-m", "pip", "wheel", str(src), "--no-deps",
                           "--no-build-isolation", "-q", "-w", str(out)],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]
    (whl,) = out.glob("*.whl")
    with zipfile.ZipFile(whl) as z:
        return set(z.namelist())


def test_wheel_carries_every_data_file_of_the_package(wheel_names):
    data = [f for f in _tracked_files()
            if f.startswith("workbench/") and not f.endswith(".py")]
    assert data, "the package has data files (icons, style sheet, schema)"
    missing = [f for f in data if f not in wheel_names]
    assert not missing, f"add these to [tool.setuptools.package-data]: {missing}"


def test_wheel_carries_every_icon_and_style_the_window_loads(wheel_names, qtbot, tmp_path,
                                                              monkeypatch):
    from workbench.gui import theme
    from workbench.gui.main_window import MainWindow
    from workbench.gui.settings import Settings

    loaded: list[Path] = []
    real_icon = theme.icon

    def recording_icon(name, color):
        loaded.append(theme.resources_dir() / "icons" / f"{name}.svg")
        return real_icon(name, color)

    monkeypatch.setattr(theme, "icon", recording_icon)
    win = MainWindow(settings=Settings(tmp_path / "settings"),
                     store_path=str(tmp_path / "store.sqlite"), theme_choice="dark")
    qtbot.addWidget(win)
    loaded.append(theme.resources_dir() / "style.qss")
    assert len(loaded) > 3
    package = ROOT / "workbench"
    for path in loaded:
        assert path.is_file(), f"the window asks for {path}, which does not exist"
        rel = "workbench/" + path.resolve().relative_to(package).as_posix()
        assert rel in wheel_names, f"{rel} is loaded by the window but not in the wheel"
