"""Writing an export folder atomically: the folder is the old export or the new one, never a mix.

:func:`prepare_folder` refuses a target that is a file, or a folder with
contents that is not an export (no manifest), so nothing of the user's is ever
replaced. :func:`written_atomically` gives a fresh temporary folder next to the
target; when the block finishes, :func:`swap_into_place` moves an existing
export aside, renames the temporary folder into place and removes the old one
(putting it back if the rename fails). When the block fails, the temporary
folder is removed and the target is left as it was. Renames within one folder
are atomic on POSIX file systems (``rename(2)``) and on NTFS, which is why the
temporary folder is a sibling of the target.
"""

from __future__ import annotations

import os
import secrets
import shutil
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from workbench.errors import InputError
from workbench.export.model_files import MANIFEST_NAME


def prepare_folder(folder: Path) -> None:
    """Refuse targets that are files or folders that are not exports; create the parents.

    Raises
    ------
    InputError
        (setting ``folder``) for a file, a non-empty folder without a manifest,
        or a parent that cannot be created or written.
    """
    if folder.exists():
        if not folder.is_dir():
            raise InputError(f"{folder} is a file; give a folder for the export",
                             setting="folder")
        if any(folder.iterdir()) and not (folder / MANIFEST_NAME).is_file():
            raise InputError(f"{folder} exists and is not a workbench export (no {MANIFEST_NAME});"
                             " choose a new or empty folder so nothing of yours is replaced",
                             setting="folder")
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create {folder.parent} ({exc.strerror}); "
                         "choose a folder you can write to", setting="folder") from None
    if not os.access(folder.parent, os.W_OK):
        raise InputError(f"{folder.parent} is not writable; choose a folder you can write to",
                         setting="folder")


def swap_into_place(tmp: Path, folder: Path) -> None:
    """Rename ``tmp`` to ``folder``; an existing ``folder`` is moved aside, then removed."""
    if folder.exists():
        old = folder.with_name(f".{folder.name}.old-{secrets.token_hex(4)}")
        os.replace(folder, old)
        try:
            os.replace(tmp, folder)
        except OSError:
            os.replace(old, folder)
            raise
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(tmp, folder)


@contextmanager
def written_atomically(folder: Path) -> Iterator[Path]:
    """Yield a temporary folder next to ``folder``; swap it into place when the block succeeds.

    Raises
    ------
    InputError
        (setting ``folder``) when the temporary folder cannot be created or a
        write fails with an operating-system error; the target is unchanged.
    """
    try:
        tmp = folder.parent / f".{folder.name}.tmp-{secrets.token_hex(4)}"
        tmp.mkdir()
    except OSError as exc:
        raise InputError(f"cannot write in {folder.parent} ({exc.strerror}); "
                         "choose a folder you can write to", setting="folder") from None
    try:
        yield tmp
        swap_into_place(tmp, folder)
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise InputError(f"writing the export failed ({exc.strerror or exc}); nothing was "
                         f"changed at {folder}", setting="folder") from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
