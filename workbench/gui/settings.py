"""What the window remembers between sessions (QSettings).

The organisation and application names are our own. Tests (and anyone who
wants a portable set-up) point the settings at a folder of their choosing with
the ``WORKBENCH_SETTINGS_DIR`` environment variable or the ``folder`` argument;
the file is then ``<folder>/activation-workbench.ini``.
"""

from __future__ import annotations

import os
from pathlib import Path

from PySide6.QtCore import QByteArray, QSettings

ORGANISATION = "ActivationWorkbenchProject"
APPLICATION = "activation-workbench"
SCHEMA_VERSION = 1
MAX_RECENT = 8


class Settings:
    """A thin, typed wrapper over :class:`QSettings`.

    Parameters
    ----------
    folder : str or Path, optional
        Keep the settings in an INI file in this folder instead of the
        platform's usual place. Defaults to ``$WORKBENCH_SETTINGS_DIR`` when set.
    """

    def __init__(self, folder: str | os.PathLike | None = None):
        folder = folder or os.environ.get("WORKBENCH_SETTINGS_DIR")
        if folder:
            path = Path(folder) / f"{APPLICATION}.ini"
            path.parent.mkdir(parents=True, exist_ok=True)
            self.qs = QSettings(str(path), QSettings.IniFormat)
        else:
            self.qs = QSettings(QSettings.IniFormat, QSettings.UserScope,
                                ORGANISATION, APPLICATION)
        if int(self.qs.value("schema", 0) or 0) != SCHEMA_VERSION:
            # version 1 is the first; older or unknown files start fresh
            self.qs.clear()
            self.qs.setValue("schema", SCHEMA_VERSION)

    @property
    def path(self) -> str:
        return self.qs.fileName()

    # window geometry ---------------------------------------------------------
    def geometry(self) -> QByteArray | None:
        v = self.qs.value("window/geometry")
        return v if isinstance(v, QByteArray) and not v.isEmpty() else None

    def set_geometry(self, data: QByteArray) -> None:
        self.qs.setValue("window/geometry", data)

    # folders and files -------------------------------------------------------
    def last_folder(self) -> str:
        return str(self.qs.value("files/last_folder", "") or "")

    def set_last_folder(self, folder: str) -> None:
        self.qs.setValue("files/last_folder", str(folder))

    def recent_files(self) -> list[str]:
        v = self.qs.value("files/recent", [])
        if isinstance(v, str):
            v = [v]
        return [str(x) for x in (v or []) if x]

    def add_recent_file(self, path: str) -> list[str]:
        path = str(Path(path).resolve())
        items = [p for p in self.recent_files() if p != path]
        items.insert(0, path)
        items = items[:MAX_RECENT]
        self.qs.setValue("files/recent", items)
        return items

    def clear_recent_files(self) -> None:
        self.qs.setValue("files/recent", [])

    # look ---------------------------------------------------------------------
    def theme(self) -> str:
        v = str(self.qs.value("look/theme", "system") or "system")
        return v if v in ("system", "light", "dark") else "system"

    def set_theme(self, name: str) -> None:
        self.qs.setValue("look/theme", name)

    def sync(self) -> None:
        self.qs.sync()
