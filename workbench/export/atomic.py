"""Writing an export folder atomically, and never losing a file the export did not write.

The target folder is replaced only when it is provably an export
(:func:`inspect_target`): empty, or holding a ``manifest.json`` that passes
:func:`workbench.export.model_files.manifest_problem` (the format marker, a
known version and the list of the files that export wrote; the manifest and
its signature, :mod:`workbench.export.signature`, are the export's too). In such
a folder:

- a listed file whose SHA-256 no longer matches the manifest was changed by
  someone after the export: the export refuses rather than overwrite the change;
- every other entry (a ``new_rows.csv``, a folder of notes) is the user's: it is
  carried into the new export untouched and reported in one line, unless the
  new export writes a file of that very name (then the export refuses).

Anything else (a file, a symbolic link, a folder without a manifest or with
someone else's ``manifest.json``) is refused with one line and left as it was.

:func:`written_atomically` gives a fresh temporary sibling
``.NAME.tmp-<8 hex digits>`` holding a marker file (:data:`MARKER_NAME`) that
the writing process keeps locked (``flock`` on POSIX, ``msvcrt.locking`` on
Windows; the operating system releases the lock when the process ends, however
it ends). When the block finishes, :func:`swap_into_place` moves the user's
entries into the new folder, renames the old export aside under the same
pattern (marked and locked too), renames the new folder into place and removes
the old one. Renames within one folder are atomic on POSIX file systems
(``rename(2)``) and on NTFS, which is why the temporaries are siblings. When
anything fails, the target is left as it was, the user's entries back in it.

A killed export leaves its temporary behind; :func:`remove_abandoned` (run by
the next export to the same parent folder) removes each one that matches the
exact name pattern, carries the marker, is not locked (no live export owns it)
and holds only files an export writes. Any other is kept, and said so.
"""

from __future__ import annotations

import json
import os
import re
import secrets
import shutil
from collections.abc import Callable, Iterator
from contextlib import contextmanager, suppress
from pathlib import Path

from workbench.data.hashing import sha256_of
from workbench.errors import InputError
from workbench.export.model_files import MANIFEST_FORMAT, MANIFEST_NAME, load_manifest
from workbench.export.signature import SIGNATURE_NAME

#: the marker file inside an export's temporary folders (locked while the export runs)
MARKER_NAME = ".workbench-export-in-progress"
#: what an export folder holds besides the files its manifest lists
BESIDE_LISTED = frozenset({MANIFEST_NAME, SIGNATURE_NAME, MARKER_NAME})
#: a temporary sibling of the target: ``.NAME.tmp-`` and 8 lowercase hex digits
TEMPORARY_PATTERN = re.compile(r"^\.(?P<name>.+)\.tmp-[0-9a-f]{8}$")


def temporary_name(folder: Path) -> Path:
    """A fresh temporary sibling of ``folder`` (see :data:`TEMPORARY_PATTERN`)."""
    return folder.parent / f".{folder.name}.tmp-{secrets.token_hex(4)}"


def _refuse(message: str) -> InputError:
    return InputError(message, setting="folder")


# --------------------------------------------------------------------------- what may be replaced


def inspect_target(folder: Path, writes: set[str]) -> list[str]:
    """Check that ``folder`` may be replaced; return the user's entries to carry over.

    Parameters
    ----------
    folder : Path
        The export's target.
    writes : set of str
        The names the new export writes (a user's entry of such a name is refused).

    Returns
    -------
    list of str
        Entries of ``folder`` the earlier export did not write, sorted.

    Raises
    ------
    InputError
        (setting ``folder``) for a file, a symbolic link, a non-empty folder
        that is not provably an export, a file of the export changed since, or
        a user's entry named like a file the new export writes.
    """
    if folder.is_symlink():
        raise _refuse(f"{folder} is a symbolic link; give the folder it points to, or a new "
                      "folder, so that nothing is replaced behind the link")
    if not folder.exists():
        return []
    if not folder.is_dir():
        raise _refuse(f"{folder} is a file; give a folder for the export")
    try:
        entries = sorted(p.name for p in folder.iterdir())
    except OSError as exc:
        raise _refuse(f"cannot read {folder} ({exc.strerror}); choose a folder you can "
                      "write to") from None
    if not entries:
        return []
    manifest_path = folder / MANIFEST_NAME
    if not manifest_path.is_file() or manifest_path.is_symlink():
        raise _refuse(f"{folder} exists and is not a workbench export (no {MANIFEST_NAME}); "
                      "choose a new or empty folder so nothing of yours is replaced")
    try:
        listed = load_manifest(manifest_path)["files"]
    except ValueError as exc:
        raise _refuse(f"{folder} has a {MANIFEST_NAME} that was not written by the workbench's "
                      f"export ({exc}); choose a new or empty folder so nothing of yours is "
                      "replaced") from None
    kept = []
    for name in entries:
        path = folder / name
        if name in listed:
            if path.is_symlink() or not path.is_file() or sha256_of(path) != \
                    listed[name]["sha256"]:
                raise _refuse(f"{path} has changed since the export wrote it (its SHA-256 no "
                              f"longer matches {MANIFEST_NAME}); move it out of the folder or "
                              "export to another folder, so that your change is not lost")
        elif name in BESIDE_LISTED:
            continue
        elif name in writes:
            raise _refuse(f"{path} was not written by the earlier export and this export "
                          "writes a file of that name; move it out of the folder or export "
                          "to another folder")
        else:
            kept.append(name)
    return kept


def prepare_folder(folder: Path, writes: set[str]) -> None:
    """Refuse a target that may not be replaced (:func:`inspect_target`); create the parents.

    Raises
    ------
    InputError
        (setting ``folder``) as :func:`inspect_target`, or for a parent that
        cannot be created or written.
    """
    inspect_target(folder, writes)
    try:
        folder.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise _refuse(f"cannot create {folder.parent} ({exc.strerror}); "
                      "choose a folder you can write to") from None
    if not os.access(folder.parent, os.W_OK):
        raise _refuse(f"{folder.parent} is not writable; choose a folder you can write to")


# --------------------------------------------------------------------------- the marker and its lock


def _try_lock(fh) -> bool:
    """Take an exclusive lock on an open file without waiting; False when another holds it."""
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows
        import msvcrt

        try:
            msvcrt.locking(fh.fileno(), msvcrt.LK_NBLCK, 1)
        except OSError:
            return False
        return True
    try:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        return False
    return True


def _mark(folder: Path):
    """Write and lock the marker in ``folder``; return the open file (closing it unlocks)."""
    fh = open(folder / MARKER_NAME, "a+", encoding="utf-8")  # noqa: SIM115 - held open
    if not _try_lock(fh):
        fh.close()
        raise _refuse(f"another export is writing {folder} right now; wait for it to finish")
    fh.seek(0)
    fh.truncate()
    fh.write(json.dumps({"format": MANIFEST_FORMAT, "in_progress": True}) + "\n")
    fh.flush()
    return fh


def _is_marker(path: Path) -> bool:
    try:
        if path.is_symlink() or not path.is_file() or path.stat().st_size > 4096:
            return False
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(doc, dict) and doc.get("format") == MANIFEST_FORMAT \
        and doc.get("in_progress") is True


# --------------------------------------------------------------------------- abandoned temporaries


def remove_abandoned(parent: Path, ours: set[str]) -> list[str]:
    """Remove the temporaries killed exports left in ``parent``; describe those kept.

    A folder is removed when its name matches :data:`TEMPORARY_PATTERN`, it
    holds the marker (:data:`MARKER_NAME`), no live process holds the marker's
    lock, and every entry is a plain file named in ``ours`` (the files an export
    writes). One that matches the pattern and carries the marker but holds
    anything else is kept and described; folders without the marker are not ours
    and are not mentioned.

    Returns
    -------
    list of str
        One sentence per temporary kept because it holds files an export does not write.
    """
    notes, ours = [], set(ours) | BESIDE_LISTED
    try:
        candidates = sorted(p for p in parent.iterdir() if TEMPORARY_PATTERN.match(p.name))
    except OSError:
        return notes
    for tmp in candidates:
        marker = tmp / MARKER_NAME
        if tmp.is_symlink() or not tmp.is_dir() or not _is_marker(marker):
            continue
        try:
            fh = open(marker, "rb")  # noqa: SIM115 - closed below
        except OSError:
            continue
        try:
            if not _try_lock(fh):
                continue  # a live export is writing it
            foreign = sorted(p.name for p in tmp.iterdir()
                             if p.name not in ours or p.is_symlink() or not p.is_file())
            if foreign:
                notes.append(f"left {tmp.name} in {parent}: a stopped export left it and it "
                             f"holds {len(foreign)} item(s) an export does not write "
                             f"({', '.join(foreign[:5])}); look inside and move them back")
                continue
            shutil.rmtree(tmp, ignore_errors=True)
        finally:
            fh.close()
    return notes


# --------------------------------------------------------------------------- the swap


def _move(names, src: Path, dst: Path) -> list[str]:
    """Rename entries from ``src`` to ``dst`` (never over an existing one); return those moved."""
    moved = []
    try:
        for name in names:
            if (dst / name).exists() or (dst / name).is_symlink():
                raise OSError(17, f"{dst / name} exists")
            os.rename(src / name, dst / name)
            moved.append(name)
    except OSError:
        for name in reversed(moved):
            with suppress(OSError):
                os.rename(dst / name, src / name)
        raise
    return moved


def swap_into_place(tmp: Path, folder: Path, kept=()) -> list[str]:
    """Put the complete export ``tmp`` at ``folder``, carrying the user's entries ``kept``.

    ``kept`` are moved into ``tmp`` first; an existing ``folder`` is marked,
    renamed aside to a temporary name, replaced by ``tmp`` and removed. On an
    operating-system error the target is restored (the user's entries back in
    it) and the error is raised.

    Returns
    -------
    list of str
        Entries that appeared in the old folder while the export ran (neither
        in its manifest nor :data:`BESIDE_LISTED`): carried into the new folder too.
    """
    _move(kept, folder, tmp)
    if not folder.exists():
        try:
            os.replace(tmp, folder)
        except OSError:
            _move(kept, tmp, folder)
            raise
        return []
    old = temporary_name(folder)
    try:
        lock = _mark(folder)
    except (OSError, InputError):
        _move(kept, tmp, folder)
        raise
    try:
        try:
            os.replace(folder, old)
        except OSError:
            (folder / MARKER_NAME).unlink(missing_ok=True)
            raise
        try:
            os.replace(tmp, folder)
        except OSError:
            os.replace(old, folder)
            (folder / MARKER_NAME).unlink(missing_ok=True)
            raise
    except OSError:
        lock.close()
        _move(kept, tmp, folder)
        raise
    # the old export: anything in it that it did not write appeared while this export
    # ran, so it is the user's: carried over first; if that fails, the old folder stays
    # whole (still marked) and the next export names it
    try:
        try:
            listed = set(load_manifest(old / MANIFEST_NAME)["files"]) | BESIDE_LISTED
        except ValueError:
            listed = set(BESIDE_LISTED)
        try:
            entries = sorted(old.iterdir())
            late = [p.name for p in entries
                    if p.name not in listed or p.is_symlink() or not p.is_file()]
            _move(late, old, folder)
        except OSError:
            return []
        for p in entries:
            if p.name not in late:
                with suppress(OSError):
                    p.unlink()
    finally:
        lock.close()
    with suppress(OSError):
        os.rmdir(old)
    return late


def _discard(tmp: Path, ours: set[str]) -> None:
    """Remove a temporary folder of ours; one holding anything else is left whole.

    (Only after a failed swap could it hold an entry of the user's; then the next
    export's :func:`remove_abandoned` names it instead of removing it.)
    """
    ours = set(ours) | BESIDE_LISTED
    try:
        if any(p.name not in ours or p.is_symlink() or not p.is_file() for p in tmp.iterdir()):
            return
    except OSError:
        return
    shutil.rmtree(tmp, ignore_errors=True)


@contextmanager
def written_atomically(folder: Path, ours: set[str],
                       note: Callable[[str], None] | None = None) -> Iterator[Path]:
    """Yield a temporary folder next to ``folder``; swap it into place when the block succeeds.

    Parameters
    ----------
    folder : Path
        The target (checked by :func:`inspect_target` again at the swap).
    ours : set of str
        Every name an export may write (the format files and :data:`BESIDE_LISTED`);
        an abandoned temporary holding anything else is not removed.
    note : callable, optional
        Receives one line for the user's entries kept in the folder and for
        abandoned temporaries that could not be removed.

    Raises
    ------
    InputError
        (setting ``folder``) when the temporary folder cannot be created, a
        write fails with an operating-system error, or the target may no longer
        be replaced; the target is unchanged.
    """
    say = note or (lambda message: None)
    for line in remove_abandoned(folder.parent, ours):
        say(line)
    try:
        tmp = temporary_name(folder)
        tmp.mkdir()
        lock = _mark(tmp)
    except OSError as exc:
        raise _refuse(f"cannot write in {folder.parent} ({exc.strerror}); "
                      "choose a folder you can write to") from None
    try:
        yield tmp
        written = {p.name for p in tmp.iterdir()}
        kept = inspect_target(folder, written)
        kept += swap_into_place(tmp, folder, kept)
        (folder / MARKER_NAME).unlink(missing_ok=True)
    except OSError as exc:
        _discard(tmp, ours)
        raise _refuse(f"writing the export failed ({exc.strerror or exc}); nothing was "
                      f"changed at {folder}") from None
    except BaseException:
        _discard(tmp, ours)
        raise
    finally:
        lock.close()
    if kept:
        say(f"kept {len(kept)} item(s) in {folder} that the export did not write: "
            f"{', '.join(sorted(kept)[:10])}{' and more' if len(kept) > 10 else ''}")
