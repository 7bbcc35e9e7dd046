"""The sweep store: an embedded SQLite database where nothing is ever lost.

Layout (schema version :data:`SCHEMA_VERSION`, kept in SQLite's ``user_version``):

``sweeps``
    one row per sweep: ``id``, ``state`` (running, finished, interrupted),
    ``plan`` (the :class:`workbench.sweep.plan.SweepPlan` as JSON), ``fingerprint``
    (the table file's SHA-256, its shape and columns, as JSON), ``versions``
    (Python and library versions, as JSON), ``created``, ``updated``,
    ``finished`` (ISO-8601 UTC), ``host`` and ``pid`` of the process running it,
    ``n_configurations``, ``n_trials``.
``configurations``
    the grid of each sweep: ``sweep_id``, ``idx``, ``hidden``, ``head``,
    ``layers`` (text ``"64,32"``), ``learning_rate``, ``alpha``, ``engine``.
``trials``
    one row per *finished* trial (done, diverged or failed), written in its own
    transaction the moment it finishes: ``sweep_id, config_index, repeat, fold``
    (the primary key, so a trial can never be stored twice), ``status``,
    ``test_score``, ``train_score``, ``fit_seconds``, ``epochs``, ``engine``,
    ``error``, ``n_train``, ``n_test``, ``history`` and ``health`` (JSON),
    ``worker``, ``attempts``, ``finished``.

``baselines`` (schema 2)
    the reference configurations of each sweep (constant predictor, linear
    model): ``sweep_id``, ``idx`` (after the grid's: ``n_configurations + j``),
    ``name``, ``estimator`` (one line naming it). Their trials are rows of
    ``trials`` like the networks' but are kept out of :meth:`Store.trials`,
    :meth:`Store.finished_keys` and the counts (``n_trials``, ``n_stored``),
    which are the networks'; :meth:`Store.baseline_trials` reads them.
``sweep_rows`` (schema 2)
    what places out-of-fold predictions on the table's rows, written once per
    sweep: ``sweep_id``, ``n_rows`` (N, the rows with a target), ``repeats``,
    ``target`` (the target of every row: float64 values for regression, int32
    class codes for classification, little-endian), ``classes`` (JSON list of the
    class labels in code order -- scikit-learn's ``classes_`` order -- or NULL)
    and ``folds`` (int32, ``repeats x N``: the test fold of each row in each
    repeat, the plan's reproducible fold assignment).
``predictions`` (schema 2)
    the out-of-fold predictions of each *done* trial, inserted in the same
    transaction as its ``trials`` row: ``sweep_id, config_index, repeat, fold``
    (the same key), ``n_rows``, ``n_columns`` (1 for a regressor, the number of
    classes for a classifier) and ``vals``: float32 little-endian,
    ``n_rows x n_columns`` row-major, the rows being the fold's test rows in
    ascending order (those with ``folds[repeat] == fold``).
``stopped`` (schema 3)
    the configurations a racing sweep stopped (:mod:`workbench.sweep.racing`), one
    row each, written the moment the decision is made: ``sweep_id, config_index``
    (the key: a configuration is stopped once and stays stopped, also on resume),
    ``after_repeat, after_fold`` (the last block of folds the decision saw, from 0),
    ``n_scores`` (the paired fold scores it rested on), ``best_index`` (the best
    configuration it was compared with), ``difference`` (mean paired difference,
    negative: worse), ``p_worse``, ``rope``, ``threshold``, ``reason`` (the decision
    in words) and ``stopped`` (ISO-8601 UTC).

The database runs in WAL mode, so the window and the export can read while a
sweep writes (with their own :class:`Store` on the same file, or sharing one:
its methods are serialised by a lock, so threads may share an instance). A file that is not a workbench store, or is damaged, is reported
with :class:`InputError` and never touched; a store written by a newer program
is refused; an older one is migrated in place (each step in :data:`MIGRATIONS`).

Out-of-fold predictions (:meth:`Store.out_of_fold`) come back as an
:class:`OutOfFold`: per repeat an N x C matrix (N x C x n_classes for a
classifier) over the sweep's configurations, with the target and the fold of
each row -- what :func:`workbench.sweep.bbc.bbc_cv` takes.

Who runs a sweep
----------------
The process running a sweep holds an operating-system lock on it
(:class:`SweepLock`: ``flock`` on ``<store>.locks/<sweep id>.lock`` beside the
store; ``msvcrt.locking`` on Windows). The kernel drops the lock when the process
ends, however it ends (killed, crashed, machine rebooted), so a sweep whose state
is ``running`` but whose lock nobody holds is reported as ``interrupted`` by
:meth:`Store.list_sweeps` and :meth:`Store.get_sweep`, and can be resumed; the
stored ``pid`` and ``host`` are kept for the record only (a reused process id or
a new host name cannot make a sweep look alive). Two processes resuming the same
sweep at once: the one that gets the lock runs it, the other is refused.

Errors
------
SQLite's operational failures (a read-only file or folder, a full disk, a busy
or damaged database) are raised as :class:`InputError` with one line naming the
store; a failed transaction leaves nothing half-written. A store in a read-only
folder is opened read-only (listing and showing work; writing is refused). A
stored text that is not valid UTF-8 is read with U+FFFD in place of the bad
bytes; a stored JSON field that does not parse is reported naming its sweep
(and trial), never as a traceback.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import re
import socket
import sqlite3
import sys
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from workbench.data.hashing import sha256_of
from workbench.errors import InputError

SCHEMA_VERSION = 3
STORE_FILENAME = "sweeps.sqlite"

RUNNING, FINISHED, INTERRUPTED = "running", "finished", "interrupted"

_SCHEMA_V1 = """
CREATE TABLE sweeps (
    id TEXT PRIMARY KEY,
    state TEXT NOT NULL,
    plan TEXT NOT NULL,
    fingerprint TEXT NOT NULL,
    versions TEXT NOT NULL,
    created TEXT NOT NULL,
    updated TEXT NOT NULL,
    finished TEXT,
    host TEXT,
    pid INTEGER,
    n_configurations INTEGER NOT NULL,
    n_trials INTEGER NOT NULL
);
CREATE TABLE configurations (
    sweep_id TEXT NOT NULL REFERENCES sweeps(id),
    idx INTEGER NOT NULL,
    hidden TEXT NOT NULL,
    head TEXT NOT NULL,
    layers TEXT NOT NULL,
    learning_rate REAL NOT NULL,
    alpha REAL NOT NULL,
    engine TEXT NOT NULL,
    PRIMARY KEY (sweep_id, idx)
);
CREATE TABLE trials (
    sweep_id TEXT NOT NULL REFERENCES sweeps(id),
    config_index INTEGER NOT NULL,
    repeat INTEGER NOT NULL,
    fold INTEGER NOT NULL,
    status TEXT NOT NULL,
    test_score REAL,
    train_score REAL,
    fit_seconds REAL,
    epochs INTEGER,
    engine TEXT,
    error TEXT,
    n_train INTEGER,
    n_test INTEGER,
    history TEXT,
    health TEXT,
    worker TEXT,
    attempts INTEGER,
    finished TEXT NOT NULL,
    PRIMARY KEY (sweep_id, config_index, repeat, fold)
);
"""

#: schema 2: baselines, the rows' targets and folds, out-of-fold predictions
_SCHEMA_V2 = """
CREATE TABLE baselines (
    sweep_id TEXT NOT NULL REFERENCES sweeps(id),
    idx INTEGER NOT NULL,
    name TEXT NOT NULL,
    estimator TEXT NOT NULL,
    PRIMARY KEY (sweep_id, idx)
);
CREATE TABLE sweep_rows (
    sweep_id TEXT PRIMARY KEY REFERENCES sweeps(id),
    n_rows INTEGER NOT NULL,
    repeats INTEGER NOT NULL,
    target BLOB NOT NULL,
    classes TEXT,
    folds BLOB NOT NULL
);
CREATE TABLE predictions (
    sweep_id TEXT NOT NULL,
    config_index INTEGER NOT NULL,
    repeat INTEGER NOT NULL,
    fold INTEGER NOT NULL,
    n_rows INTEGER NOT NULL,
    n_columns INTEGER NOT NULL,
    vals BLOB NOT NULL,
    PRIMARY KEY (sweep_id, config_index, repeat, fold),
    FOREIGN KEY (sweep_id, config_index, repeat, fold)
        REFERENCES trials(sweep_id, config_index, repeat, fold)
);
"""

#: schema 3: the configurations a racing sweep stopped
_SCHEMA_V3 = """
CREATE TABLE stopped (
    sweep_id TEXT NOT NULL REFERENCES sweeps(id),
    config_index INTEGER NOT NULL,
    after_repeat INTEGER NOT NULL,
    after_fold INTEGER NOT NULL,
    n_scores INTEGER NOT NULL,
    best_index INTEGER NOT NULL,
    difference REAL,
    p_worse REAL,
    rope REAL,
    threshold REAL,
    reason TEXT NOT NULL,
    stopped TEXT NOT NULL,
    PRIMARY KEY (sweep_id, config_index)
);
"""

#: migration steps: MIGRATIONS[v] upgrades a store from version v to v + 1; a new
#: store is made at version 1 and brought up by the same steps, so a new and a
#: migrated store have the same tables
MIGRATIONS: dict[int, str] = {1: _SCHEMA_V2, 2: _SCHEMA_V3}

#: little-endian storage types of the arrays kept as BLOBs
_F32, _F64, _I32 = "<f4", "<f8", "<i4"

_TABLES = {"sweeps", "configurations", "trials"}


def existing_store_path(path=None) -> Path:
    """The store file a reading command opens, which must already exist.

    Raises
    ------
    InputError
        when there is no file at ``path`` (default :func:`default_store_path`), so
        that reading commands never create an empty store or its folders.
    """
    path = Path(path) if path is not None else default_store_path()
    if not path.exists():
        raise InputError(f"there is no store at {path}; run a sweep first, or choose the store "
                         "file your sweeps were stored in", setting="store")
    return path


def default_store_path() -> Path:
    """``sweeps.sqlite`` in the user's data folder (platformdirs)."""
    import platformdirs

    return Path(platformdirs.user_data_dir("activation-workbench", appauthor=False)) / STORE_FILENAME


def now_iso() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")


def table_fingerprint(path, df) -> dict:
    """SHA-256 of the file, the table's shape and its column names."""
    return {"sha256": sha256_of(path), "rows": int(df.shape[0]), "cols": int(df.shape[1]),
            "columns": [str(c) for c in df.columns], "file": str(Path(path).name)}


def library_versions() -> dict:
    import joblib
    import numpy
    import pandas
    import scipy
    import sklearn

    import workbench

    out = {"python": sys.version.split()[0], "workbench": workbench.__version__,
           "numpy": numpy.__version__, "scipy": scipy.__version__,
           "scikit-learn": sklearn.__version__, "pandas": pandas.__version__,
           "joblib": joblib.__version__}
    # read the installed version without importing the package: importing Dask's
    # distributed pulls in tornado, yaml and more, holding the interpreter for most
    # of a second (the window's event loop would stall while a sweep starts)
    from importlib import metadata

    try:
        out["distributed"] = metadata.version("distributed")
    except metadata.PackageNotFoundError:  # pragma: no cover
        pass
    return out


def _text(raw: bytes) -> str:
    """SQLite TEXT as str; bytes that are not UTF-8 (a damaged row) read as U+FFFD."""
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        return raw.decode("utf-8", "replace")


def _read_only_failure(exc: BaseException) -> bool:
    """Whether SQLite failed because the file or its folder cannot be written."""
    text = str(exc).lower()
    return "readonly" in text or "read-only" in text or "unable to open database file" in text


def _store_error(path, exc: sqlite3.Error) -> InputError:
    """One line for an operational failure of the store (read-only, full, busy, damaged)."""
    text = str(exc)
    low = text.lower()
    if _read_only_failure(exc):
        return InputError(f"the store {path} cannot be written ({text}): the file or its folder "
                          "is read-only; nothing was changed; make it writable or choose another "
                          "store file", setting="store")
    if "full" in low or "disk i/o" in low:
        return InputError(f"the disk holding the store {path} is full ({text}); every trial "
                          "stored before this one is kept; free some space, then resume the "
                          "sweep", setting="store")
    if "locked" in low or "busy" in low:
        return InputError(f"the store {path} is busy ({text}): another program holds it; try "
                          "again when it is done, or choose another store file", setting="store")
    if isinstance(exc, sqlite3.OperationalError):
        return InputError(f"the store {path} failed ({text}); nothing was half-written; check "
                          "the disk, or choose another store file", setting="store")
    return InputError(f"the store {path} is damaged ({text}); it was left as it is; move it "
                      "away or choose another store file", setting="store")


def lock_folder(store_path) -> Path:
    """The folder beside the store that holds the sweeps' lock files."""
    store_path = Path(store_path)
    return store_path.with_name(store_path.name + ".locks")


def _lock_name(sweep_id: str) -> str:
    sid = str(sweep_id)
    if re.fullmatch(r"[A-Za-z0-9_-][A-Za-z0-9._-]{0,99}", sid):
        return sid + ".lock"
    return hashlib.sha256(sid.encode("utf-8", "surrogatepass")).hexdigest()[:32] + ".lock"


def try_file_lock(fd: int, shared: bool = False) -> bool:
    """Take the OS lock on an open file without waiting; False when someone holds it."""
    if os.name == "nt":  # pragma: no cover - Windows: a byte-range lock on byte 0
        import msvcrt

        try:
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
            return True
        except OSError:
            return False
    import fcntl

    try:
        fcntl.flock(fd, (fcntl.LOCK_SH if shared else fcntl.LOCK_EX) | fcntl.LOCK_NB)
        return True
    except (BlockingIOError, PermissionError):
        return False


def file_unlock(fd: int) -> None:
    if os.name == "nt":  # pragma: no cover
        import msvcrt

        try:
            os.lseek(fd, 0, os.SEEK_SET)
            msvcrt.locking(fd, msvcrt.LK_UNLCK, 1)
        except OSError:
            pass
        return
    import fcntl

    fcntl.flock(fd, fcntl.LOCK_UN)


class SweepLock:
    """The lock of one sweep, held by the process that runs it (module docstring).

    ``flock`` locks belong to the open file, not to the process id: the kernel
    releases them when the process ends in any way, they are not inherited by
    the worker processes (Python opens files non-inheritable), and two
    :class:`SweepLock` objects of the same sweep exclude each other even in one
    process (two threads of the window).

    Parameters
    ----------
    store_path : path
        The store file; the lock file is ``<store>.locks/<sweep id>.lock``.
    sweep_id : str
    """

    #: attempts to take a lock that a reader is testing at that very moment
    ATTEMPTS = 20
    #: seconds between two attempts (a reader holds its test lock for microseconds)
    PAUSE = 0.05

    def __init__(self, store_path, sweep_id: str):
        self.sweep_id = str(sweep_id)
        self.path = lock_folder(store_path) / _lock_name(self.sweep_id)
        self._fd: int | None = None

    @property
    def held(self) -> bool:
        """True while this object holds the lock."""
        return self._fd is not None

    def acquire(self) -> bool:
        """Take the lock without waiting for a holder; False when another process
        (or another :class:`SweepLock`) holds it.

        Raises
        ------
        InputError
            when the lock file cannot be made (a read-only folder).
        """
        if self._fd is not None:
            return True
        for _ in range(self.ATTEMPTS):
            try:
                self.path.parent.mkdir(exist_ok=True)
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            except FileNotFoundError:  # the folder was removed by a holder releasing its lock
                continue
            except OSError as exc:
                raise InputError(f"cannot make the lock file {self.path} beside the store "
                                 f"({exc.strerror}); the store's folder must be writable to run "
                                 "a sweep", setting="store") from None
            if try_file_lock(fd):
                # the file may have been removed by a holder releasing it meanwhile:
                # the lock counts only on the file that is still at the path
                try:
                    now = os.stat(self.path)
                    mine = os.fstat(fd)
                    same = (now.st_ino, now.st_dev) == (mine.st_ino, mine.st_dev)
                except FileNotFoundError:
                    same = False
                if same:
                    self._fd = fd
                    try:  # for the record; the lock itself is what counts
                        os.ftruncate(fd, 0)
                        os.write(fd, f"{os.getpid()} {socket.gethostname()}\n".encode())
                    except OSError:
                        pass
                    return True
                os.close(fd)
                continue
            os.close(fd)
            time.sleep(self.PAUSE)  # a holder, or a reader testing the lock this instant
        return False

    def release(self) -> None:
        """Give the lock up (and remove its file)."""
        fd, self._fd = self._fd, None
        if fd is None:
            return
        try:
            os.unlink(self.path)  # while still holding it, so no one locks a removed file
        except OSError:
            pass
        try:
            file_unlock(fd)
        finally:
            os.close(fd)
        try:
            self.path.parent.rmdir()  # only when empty
        except OSError:
            pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.release()


def lock_held(store_path, sweep_id: str) -> bool:
    """Whether a process holds the lock of ``sweep_id`` (i.e. runs it right now).

    Reads only: a missing lock file means nobody holds it, and the test opens
    the file read-only, so it works on a store in a read-only folder. The test
    takes a shared lock for an instant; :meth:`SweepLock.acquire` retries past it.
    """
    path = lock_folder(store_path) / _lock_name(sweep_id)
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return False
    try:
        if try_file_lock(fd, shared=True):
            file_unlock(fd)
            return False
        return True
    finally:
        os.close(fd)


@dataclass(frozen=True)
class OutOfFold:
    """A sweep's out-of-fold predictions, placed on the table's rows.

    Attributes
    ----------
    y : ndarray of shape (N,)
        The target of every row with a target: float64 values (user units) for
        regression, int64 class codes 0..k-1 (positions in ``classes``) for
        classification.
    classes : list or None
        The class labels in code order (scikit-learn's ``classes_`` order);
        None for regression.
    folds : list of R ndarrays of shape (N,)
        Per repeat, the test fold of each row.
    predictions : list of R float32 ndarrays of shape (N, C) or (N, C, k)
        Per repeat, column j holds configuration ``columns[j]``'s prediction for
        each row, made by the trial that held the row out: values for
        regressors, class probabilities (last axis in ``classes`` order) for
        classifiers. NaN where no prediction is stored (a trial not run yet,
        diverged or failed, or stored before predictions were kept).
    columns : ndarray of shape (C,)
        The configuration index of each column (baselines after the grid's).
    complete : ndarray of shape (C,), bool
        True for a column with a finite prediction for every row in every
        repeat: the columns :func:`workbench.sweep.bbc.bbc_cv` can take
        (see :meth:`completed`).
    """

    y: np.ndarray
    classes: list | None
    folds: list
    predictions: list
    columns: np.ndarray
    complete: np.ndarray

    def select(self, columns) -> OutOfFold:
        """The same rows for the configurations ``columns`` (indices), in that order."""
        pos = {int(c): j for j, c in enumerate(self.columns)}
        try:
            take = np.asarray([pos[int(c)] for c in columns], dtype=np.intp)
        except KeyError as exc:
            raise ValueError(f"configuration {exc.args[0]} is not among the columns") from None
        return OutOfFold(self.y, self.classes, self.folds,
                         [np.ascontiguousarray(p[:, take]) for p in self.predictions],
                         self.columns[take], self.complete[take])

    def completed(self) -> OutOfFold:
        """Only the complete columns (every row predicted in every repeat)."""
        return self.select(self.columns[self.complete])


class Store:
    """The SQLite store of sweeps and trials.

    Parameters
    ----------
    path : str or Path, optional
        The database file; created (with its folder) when missing. Default:
        :func:`default_store_path`.

    Raises
    ------
    InputError
        when the file is not a workbench store, is damaged, or was written by
        a newer program. The file is left exactly as it was.
    """

    def __init__(self, path=None):
        self._lock = threading.RLock()
        self.path = Path(path) if path is not None else default_store_path()
        if self.path.is_dir():
            raise InputError(f"the store path {self.path} is a folder; give a file name such as "
                             f"{self.path / STORE_FILENAME}", setting="store")
        existed = self.path.exists() and self.path.stat().st_size > 0
        if existed:
            self._check_header()
        else:
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                blocker = next((p for p in self.path.parents if p.exists()), None)
                why = (f"{blocker} is a file, not a folder" if blocker is not None
                       and not blocker.is_dir() else exc.strerror)
                raise InputError(f"cannot create the folder of the store {self.path} "
                                 f"({why}); choose a writable store path",
                                 setting="store") from None
        self._conn = None
        #: True when the store could only be opened for reading (a read-only file or folder)
        self.read_only = False
        try:
            try:
                self._connect(str(self.path), uri=False)
                self._open(existed)
            except sqlite3.OperationalError as exc:
                if not existed or not _read_only_failure(exc):
                    raise
                self._close_quietly()
                self._open_read_only()
        except sqlite3.OperationalError as exc:
            self._close_quietly()
            raise InputError(f"cannot open the store {self.path} ({exc}); check that it is "
                             "writable and not locked by another program, or choose another "
                             "store file", setting="store") from None
        except sqlite3.DatabaseError as exc:
            self._close_quietly()
            raise InputError(f"the store {self.path} is damaged or not a workbench store "
                             f"({exc}); it was left untouched; move it away or choose another "
                             "store file", setting="store") from None

    def _connect(self, target: str, uri: bool):
        self._conn = sqlite3.connect(target, timeout=30, isolation_level=None,
                                     check_same_thread=False, uri=uri)
        self._conn.row_factory = sqlite3.Row
        self._conn.text_factory = _text

    def _open_read_only(self):
        """Open an existing store that cannot be written (a read-only file or folder).

        ``mode=ro`` reads a WAL database whose ``-wal`` and ``-shm`` files exist or can
        be made; in a read-only folder without them (the store was closed cleanly, so
        the database file holds everything) SQLite needs ``immutable=1``.
        """
        from urllib.parse import quote

        base = "file:" + quote(str(self.path.resolve()))
        wal = self.path.with_name(self.path.name + "-wal")
        modes = ["?mode=ro"] + ([] if wal.exists() and wal.stat().st_size else
                                ["?mode=ro&immutable=1"])
        for i, mode in enumerate(modes):
            try:
                self._connect(base + mode, uri=True)
                self._open(True, read_only=True)
                self.read_only = True
                return
            except sqlite3.OperationalError:
                self._close_quietly()
                if i == len(modes) - 1:
                    raise

    # ------------------------------------------------------------------ opening
    def _check_header(self):
        with open(self.path, "rb") as fh:
            head = fh.read(16)
        if head != b"SQLite format 3\x00":
            raise InputError(f"the store {self.path} is not an SQLite database (damaged or "
                             "another kind of file); it was left untouched; move it away or "
                             "choose another store file", setting="store")

    def _open(self, existed: bool, read_only: bool = False):
        c = self._conn
        c.execute("PRAGMA busy_timeout = 30000")
        version = c.execute("PRAGMA user_version").fetchone()[0]
        tables = {r[0] for r in c.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        # integrity before anything is written
        if existed:
            ok = c.execute("PRAGMA quick_check").fetchone()[0]
            if ok != "ok":
                raise sqlite3.DatabaseError(f"integrity check failed: {ok}")
        if version == 0 and not tables:
            c.execute("PRAGMA journal_mode = WAL")
            self._apply_script(_SCHEMA_V1, 1)
            self._migrate(1)
            return
        if version == 0 or not _TABLES <= tables:
            raise InputError(f"{self.path} is an SQLite database but not a workbench store "
                             f"(tables: {', '.join(sorted(tables)) or 'none'}); it was left "
                             "untouched; choose another store file", setting="store")
        if version > SCHEMA_VERSION:
            raise InputError(f"the store {self.path} was written by a newer workbench (schema "
                             f"version {version}, this program reads up to {SCHEMA_VERSION}); "
                             "upgrade the workbench or choose another store file",
                             setting="store")
        if version < SCHEMA_VERSION:
            self._migrate(version)
        mode = c.execute("PRAGMA journal_mode").fetchone()[0]
        if str(mode).lower() != "wal" and not read_only:
            c.execute("PRAGMA journal_mode = WAL")

    def _migrate(self, version: int):
        while version < SCHEMA_VERSION:
            step = MIGRATIONS.get(version)
            if step is None:
                raise InputError(f"the store {self.path} has schema version {version}, which this "
                                 "program cannot migrate; choose another store file",
                                 setting="store")
            self._apply_script(step, version + 1)
            version += 1

    def _apply_script(self, script: str, new_version: int):
        """Run ``script`` and set the schema version in one transaction (all or nothing)."""
        c = self._conn
        c.execute("BEGIN IMMEDIATE")
        try:
            for statement in script.split(";"):
                if statement.strip():
                    c.execute(statement)
            c.execute(f"PRAGMA user_version = {int(new_version)}")
            c.execute("COMMIT")
        except Exception:
            c.execute("ROLLBACK")
            raise

    def _close_quietly(self):
        try:
            if self._conn is not None:
                self._conn.close()
        except Exception:  # pragma: no cover
            pass

    def close(self) -> None:
        self._conn.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    @property
    def schema_version(self) -> int:
        return int(self._conn.execute("PRAGMA user_version").fetchone()[0])

    # ------------------------------------------------------------------ writing
    def _tx(self, statements):
        """Run ``statements`` in one transaction: all of them or none.

        Raises
        ------
        sqlite3.IntegrityError
            for a row already stored (the caller decides).
        InputError
            for an operational failure (read-only, full disk, busy, damaged).
        """
        c = self._conn
        with self._lock:
            try:
                c.execute("BEGIN IMMEDIATE")
                try:
                    for sql, args in statements:
                        c.execute(sql, args)
                    c.execute("COMMIT")
                except BaseException:
                    # SQLite may have rolled back already (a full disk): roll back only
                    # a transaction still open, and let the first error speak
                    if c.in_transaction:
                        try:
                            c.execute("ROLLBACK")
                        except sqlite3.Error:
                            pass
                    raise
            except sqlite3.IntegrityError:
                raise
            except sqlite3.Error as exc:
                raise _store_error(self.path, exc) from None

    def _rows(self, sql, args=()):
        with self._lock:
            try:
                return self._conn.execute(sql, args).fetchall()
            except sqlite3.Error as exc:
                raise _store_error(self.path, exc) from None

    def check_writable(self) -> None:
        """Refuse a store that cannot be written, before any work is done.

        Raises
        ------
        InputError
            for a read-only file or folder (or a store another program holds).
        """
        if self.read_only:
            raise InputError(f"the store {self.path} cannot be written: the file or its folder "
                             "is read-only; make it writable or choose another store file",
                             setting="store")
        self._tx([])  # BEGIN IMMEDIATE takes the write lock: refused on a read-only file

    def create_sweep(self, sweep_id: str, plan: dict, fingerprint: dict,
                     configurations: list[dict], versions: dict | None = None,
                     baselines: list[dict] | None = None, rows: dict | None = None) -> None:
        """Insert a sweep (state ``running``), its grid, its baselines and rows, in one
        transaction.

        ``baselines``: ``[{"index", "name", "estimator"}]``; ``rows``:
        ``{"target", "folds", "classes"}`` as :meth:`put_rows` takes them.
        """
        t = now_iso()
        n_cfg = len(configurations)
        n_trials = n_cfg * int(plan["folds"]) * int(plan["repeats"])
        stmts = [("INSERT INTO sweeps (id, state, plan, fingerprint, versions, created, updated, "
                  "host, pid, n_configurations, n_trials) VALUES (?,?,?,?,?,?,?,?,?,?,?)",
                  (sweep_id, RUNNING, json.dumps(plan), json.dumps(fingerprint),
                   json.dumps(versions or library_versions()), t, t, socket.gethostname(),
                   os.getpid(), n_cfg, n_trials))]
        for c in configurations:
            stmts.append(("INSERT INTO configurations VALUES (?,?,?,?,?,?,?,?)",
                          (sweep_id, int(c["index"]), c["hidden"], c["head"],
                           ",".join(str(s) for s in c["layers"]), float(c["learning_rate"]),
                           float(c["alpha"]), c["engine"])))
        for b in baselines or []:
            stmts.append(("INSERT INTO baselines VALUES (?,?,?,?)",
                          (sweep_id, int(b["index"]), b["name"], b["estimator"])))
        if rows is not None:
            stmts.append(self._rows_statement(sweep_id, rows["target"], rows["folds"],
                                              rows.get("classes")))
        self._tx(stmts)

    @staticmethod
    def _rows_statement(sweep_id, target, folds, classes):
        folds = np.asarray(folds)
        if folds.ndim != 2:
            raise ValueError("folds must be an array of shape (repeats, N)")
        n = folds.shape[1]
        target = np.asarray(target).reshape(-1)
        if target.shape[0] != n:
            raise ValueError(f"the target has {target.shape[0]} rows, the folds {n}")
        if classes is None:
            blob = target.astype(_F64).tobytes()
            labels = None
        else:
            blob = target.astype(_I32).tobytes()
            labels = json.dumps([c.item() if hasattr(c, "item") else c for c in classes],
                                default=str)
        return ("INSERT INTO sweep_rows (sweep_id, n_rows, repeats, target, classes, folds) "
                "VALUES (?,?,?,?,?,?)",
                (sweep_id, int(n), int(folds.shape[0]), blob, labels,
                 folds.astype(_I32).tobytes()))

    def put_rows(self, sweep_id: str, target, folds, classes=None) -> None:
        """Store what places a sweep's out-of-fold predictions on rows (once per sweep).

        Parameters
        ----------
        target : array of shape (N,)
            Regression: the target values. Classification: class codes 0..k-1.
        folds : array of shape (repeats, N)
            The test fold of each row in each repeat.
        classes : sequence, optional
            The class labels in code order (classification only).
        """
        self._tx([self._rows_statement(sweep_id, target, folds, classes)])
    def set_state(self, sweep_id: str, state: str) -> None:
        """Mark a sweep running (by this process), finished or interrupted."""
        if state not in (RUNNING, FINISHED, INTERRUPTED):
            raise ValueError(f"unknown sweep state {state!r}")
        t = now_iso()
        self._tx([("UPDATE sweeps SET state=?, updated=?, finished=?, host=?, pid=? WHERE id=?",
                   (state, t, t if state == FINISHED else None, socket.gethostname(),
                    os.getpid(), sweep_id))])

    def set_table(self, sweep_id: str, table: str) -> None:
        """Record where a sweep's table is now (a moved table whose fingerprint the
        caller has checked); only the plan's ``table`` changes."""
        plan = self.get_sweep(sweep_id)["plan"]
        plan["table"] = str(table)
        self._tx([("UPDATE sweeps SET plan=?, updated=? WHERE id=?",
                   (json.dumps(plan), now_iso(), sweep_id))])

    def add_trial(self, sweep_id: str, result: dict) -> None:
        """Commit one finished trial in its own transaction.

        ``result["predictions"]`` (when present and not None: an array of the
        fold's test rows in ascending order, shape (n_test,) or (n_test, k)) is
        stored as float32 in the same transaction.
        """
        stmts = [(
            "INSERT INTO trials (sweep_id, config_index, repeat, fold, status, test_score, "
            "train_score, fit_seconds, epochs, engine, error, n_train, n_test, history, health, "
            "worker, attempts, finished) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (sweep_id, int(result["config_index"]), int(result["repeat"]), int(result["fold"]),
             result["status"], result.get("test_score"), result.get("train_score"),
             result.get("fit_seconds"), result.get("epochs"), result.get("engine"),
             result.get("error"), result.get("n_train"), result.get("n_test"),
             json.dumps(result.get("history") or {}), json.dumps(result.get("health") or {}),
             result.get("worker"), int(result.get("attempts", 1)), now_iso()))]
        pred = result.get("predictions")
        if pred is not None:
            pred = np.asarray(pred)
            values = pred.reshape(pred.shape[0], -1)
            stmts.append((
                "INSERT INTO predictions (sweep_id, config_index, repeat, fold, n_rows, "
                "n_columns, vals) VALUES (?,?,?,?,?,?,?)",
                (sweep_id, int(result["config_index"]), int(result["repeat"]),
                 int(result["fold"]), int(values.shape[0]), int(values.shape[1]),
                 np.ascontiguousarray(values, dtype=_F32).tobytes())))
        self._tx(stmts)

    def add_stopped(self, sweep_id: str, record: dict) -> None:
        """Record that racing stopped a configuration (the ``stopped`` table).

        ``record``: ``config_index, after_repeat, after_fold, n_scores, best_index,
        difference, p_worse, rope, threshold, reason``. A configuration already
        recorded keeps its first record (a resumed race that decides it again).
        """
        r = record
        self._tx([(
            "INSERT OR IGNORE INTO stopped (sweep_id, config_index, after_repeat, after_fold, "
            "n_scores, best_index, difference, p_worse, rope, threshold, reason, stopped) "
            "VALUES (?,?,?,?,?,?,?,?,?,?,?,?)",
            (sweep_id, int(r["config_index"]), int(r["after_repeat"]), int(r["after_fold"]),
             int(r["n_scores"]), int(r["best_index"]), _real(r.get("difference")),
             _real(r.get("p_worse")), _real(r.get("rope")), _real(r.get("threshold")),
             str(r["reason"]), now_iso()))])

    def stopped(self, sweep_id: str) -> dict[int, dict]:
        """The configurations racing stopped: ``{config_index: record}`` (see
        :meth:`add_stopped`; plus ``stopped``, the time), empty for a sweep without
        racing."""
        out = {}
        for r in self._rows("SELECT * FROM stopped WHERE sweep_id=? ORDER BY config_index",
                            (sweep_id,)):
            d = dict(r)
            d.pop("sweep_id")
            out[int(d["config_index"])] = d
        return out

    # ------------------------------------------------------------------ reading
    def _sweep_dict(self, row) -> dict:
        d = dict(row)
        for k in ("plan", "fingerprint", "versions"):
            d[k] = _json_field(d[k], f"sweep {d['id']}'s stored {k}", self.path)
        if d["state"] == RUNNING and not lock_held(self.path, d["id"]):
            d["state"] = INTERRUPTED  # its process is gone (nobody holds its lock)
        d["n_stored"] = self._rows("SELECT COUNT(*) FROM trials WHERE sweep_id=? AND "
                                   "config_index < ?", (d["id"], d["n_configurations"]))[0][0]
        return d

    def list_sweeps(self, damaged: bool = False) -> list[dict]:
        """Every sweep, newest first, with its state and the number of stored trials.

        A sweep whose stored plan, fingerprint or versions do not parse is left out,
        or with ``damaged=True`` listed with state ``damaged``, ``plan`` ``{}`` and the
        reason in ``damaged``.
        """
        out = []
        for r in self._rows("SELECT * FROM sweeps ORDER BY created DESC, id DESC"):
            try:
                out.append(self._sweep_dict(r))
            except InputError as exc:
                if damaged:
                    d = {k: r[k] for k in r.keys()}
                    d.update(plan={}, fingerprint={}, versions={}, state="damaged",
                             damaged=str(exc), n_stored=None)
                    out.append(d)
        return out

    def sweep_summaries(self) -> list[dict]:
        """One flat dict per stored sweep, newest first: what ``history`` lists.

        Keys: ``sweep_id, state, created, updated, finished, table, target, metric,
        n_configurations, n_trials, n_stored``.
        """
        out = []
        for s in self.list_sweeps(damaged=True):
            p = s["plan"]
            out.append({"sweep_id": s["id"], "state": s["state"], "created": s["created"],
                        "updated": s["updated"], "finished": s["finished"],
                        "table": p.get("table", "?"), "target": p.get("target", "?"),
                        "metric": p.get("metric", "?"),
                        "n_configurations": s["n_configurations"],
                        "n_trials": s["n_trials"], "n_stored": s["n_stored"]})
        return out

    def get_sweep(self, sweep_id: str) -> dict:
        """One sweep's row (plan, fingerprint, versions as dicts).

        Raises
        ------
        InputError
            naming the stored sweeps when ``sweep_id`` is unknown.
        """
        found = self._rows("SELECT * FROM sweeps WHERE id=?", (sweep_id,))
        row = found[0] if found else None
        if row is None:
            ids = [r[0] for r in self._rows("SELECT id FROM sweeps ORDER BY created DESC LIMIT 5")]
            hint = f"recent sweeps: {', '.join(ids)}" if ids else "the store has no sweeps yet"
            raise InputError(f"no sweep {sweep_id!r} in {self.path}; {hint}", setting="sweep")
        return self._sweep_dict(row)

    def configurations(self, sweep_id: str) -> list[dict]:
        rows = self._rows("SELECT * FROM configurations WHERE sweep_id=? ORDER BY idx",
                          (sweep_id,))
        out = []
        for r in rows:
            out.append({"index": r["idx"], "hidden": r["hidden"], "head": r["head"],
                        "layers": [int(s) for s in r["layers"].split(",")],
                        "learning_rate": r["learning_rate"], "alpha": r["alpha"],
                        "engine": r["engine"]})
        return out

    def _n_configurations(self, sweep_id: str) -> int:
        found = self._rows("SELECT n_configurations FROM sweeps WHERE id=?", (sweep_id,))
        return int(found[0][0]) if found else 0

    def trials(self, sweep_id: str, with_history: bool = True) -> list[dict]:
        """The stored (finished) trials of a sweep's networks, ordered by configuration,
        repeat, fold (the baselines' trials: :meth:`baseline_trials`)."""
        rows = self._rows(
            "SELECT * FROM trials WHERE sweep_id=? AND config_index < ? "
            "ORDER BY config_index, repeat, fold", (sweep_id, self._n_configurations(sweep_id)))
        return self._trial_dicts(rows, with_history)

    def baselines(self, sweep_id: str) -> list[dict]:
        """The sweep's reference configurations: ``[{"index", "name", "estimator"}]``."""
        return [{"index": r["idx"], "name": r["name"], "estimator": r["estimator"]}
                for r in self._rows("SELECT * FROM baselines WHERE sweep_id=? ORDER BY idx",
                                    (sweep_id,))]

    def baseline_trials(self, sweep_id: str) -> list[dict]:
        """The stored trials of the sweep's baselines, as :meth:`trials` gives them plus
        ``name``, ordered by baseline, repeat, fold."""
        rows = self._rows(
            "SELECT t.*, b.name AS name FROM trials t JOIN baselines b ON "
            "b.sweep_id = t.sweep_id AND b.idx = t.config_index WHERE t.sweep_id=? "
            "ORDER BY t.config_index, t.repeat, t.fold", (sweep_id,))
        return self._trial_dicts(rows, with_history=False)

    def _trial_dicts(self, rows, with_history: bool) -> list[dict]:
        out = []
        for r in rows:
            d = dict(r)
            sid = d.pop("sweep_id")
            where = (f"sweep {sid}'s stored trial (configuration {d['config_index']}, repeat "
                     f"{d['repeat']}, fold {d['fold']})")
            history = d.pop("history")
            if with_history:
                d["history"] = _json_field(history or "{}", f"the history of {where}", self.path)
            d["health"] = _json_field(d["health"] or "{}", f"the health of {where}", self.path)
            out.append(d)
        return out

    def finished_keys(self, sweep_id: str, baselines: bool = False) -> set[tuple[int, int, int]]:
        """``(config_index, repeat, fold)`` of every stored network trial (and, with
        ``baselines``, of every stored baseline trial too)."""
        sql, args = "SELECT config_index, repeat, fold FROM trials WHERE sweep_id=?", (sweep_id,)
        if not baselines:
            sql, args = sql + " AND config_index < ?", args + (self._n_configurations(sweep_id),)
        return {(r[0], r[1], r[2]) for r in self._rows(sql, args)}

    # ------------------------------------------------------------------ out-of-fold predictions
    def sweep_rows(self, sweep_id: str) -> dict | None:
        """What places predictions on rows: ``{"target", "classes", "folds"}``.

        ``target`` (N,) float64 values or int64 class codes; ``classes`` the
        labels in code order or None; ``folds`` (repeats, N) int64 test folds.
        None when the sweep was stored before predictions were kept.
        """
        found = self._rows("SELECT * FROM sweep_rows WHERE sweep_id=?", (sweep_id,))
        if not found:
            return None
        r = found[0]
        n, reps = int(r["n_rows"]), int(r["repeats"])
        classes = _json_field(r["classes"], f"sweep {sweep_id}'s stored class labels",
                              self.path) if r["classes"] is not None else None
        target = np.frombuffer(r["target"], dtype=_F64 if classes is None else _I32)
        target = target.astype(np.float64 if classes is None else np.int64)
        folds = np.frombuffer(r["folds"], dtype=_I32).astype(np.int64).reshape(reps, n)
        return {"target": target, "classes": classes, "folds": folds}

    def trial_predictions(self, sweep_id: str, config_index: int, repeat: int,
                          fold: int) -> tuple[np.ndarray, np.ndarray] | None:
        """One trial's out-of-fold predictions: ``(rows, values)`` or None.

        ``rows`` (n_test,) the test rows in ascending order; ``values`` float32
        (n_test,) for a regressor, (n_test, n_classes) for a classifier.
        """
        found = self._rows("SELECT n_rows, n_columns, vals FROM predictions WHERE sweep_id=? "
                           "AND config_index=? AND repeat=? AND fold=?",
                           (sweep_id, int(config_index), int(repeat), int(fold)))
        rows = self.sweep_rows(sweep_id)
        if not found or rows is None:
            return None
        values = _values(found[0])
        if rows["classes"] is None:
            values = values[:, 0]
        return np.flatnonzero(rows["folds"][int(repeat)] == int(fold)), values

    def out_of_fold(self, sweep_id: str, configurations=None, *,
                    baselines: bool = False) -> OutOfFold | None:
        """The sweep's out-of-fold predictions, per repeat, over configurations.

        Parameters
        ----------
        sweep_id : str
        configurations : sequence of int, optional
            Configuration indices, one column each, in this order (default: every
            network configuration of the grid, in index order).
        baselines : bool
            Also the baselines, as columns after those (their indices follow the
            grid's; see :meth:`baselines`).

        Returns
        -------
        OutOfFold or None
            Per repeat an N x C float32 matrix (N x C x n_classes for a
            classifier), with the target and the test fold of each row; None
            when the sweep was stored before predictions were kept.
        """
        rows = self.sweep_rows(sweep_id)
        if rows is None:
            return None
        cols = list(range(self._n_configurations(sweep_id))) if configurations is None \
            else [int(c) for c in configurations]
        if baselines:
            cols += [b["index"] for b in self.baselines(sweep_id)]
        pos = {c: j for j, c in enumerate(cols)}
        folds = rows["folds"]
        reps, n = folds.shape
        k = len(rows["classes"]) if rows["classes"] is not None else None
        shape = (n, len(cols)) if k is None else (n, len(cols), k)
        preds = [np.full(shape, np.nan, dtype=np.float32) for _ in range(reps)]
        where: dict[tuple[int, int], np.ndarray] = {}
        for r in self._rows("SELECT config_index, repeat, fold, n_rows, n_columns, vals FROM "
                            "predictions WHERE sweep_id=?", (sweep_id,)):
            j = pos.get(int(r["config_index"]))
            if j is None:
                continue
            key = (int(r["repeat"]), int(r["fold"]))
            if key not in where:
                where[key] = np.flatnonzero(folds[key[0]] == key[1])
            at = where[key]
            values = _values(r)
            if values.shape[0] != at.size:
                raise ValueError(f"trial {tuple(r)[:3]} stored {values.shape[0]} predictions "
                                 f"for a fold of {at.size} rows")
            if k is None:
                preds[key[0]][at, j] = values[:, 0]
            else:
                preds[key[0]][at, j, :] = values
        finite = [np.isfinite(p).reshape(n, len(cols), -1).all(axis=(0, 2)) for p in preds]
        complete = np.logical_and.reduce(finite) if finite else np.zeros(len(cols), bool)
        return OutOfFold(y=rows["target"], classes=rows["classes"], folds=list(folds),
                         predictions=preds, columns=np.asarray(cols, dtype=np.int64),
                         complete=np.asarray(complete, dtype=bool))


def _json_field(text: str, what: str, path) -> object:
    """A stored JSON field, or one line naming what is damaged."""
    try:
        return json.loads(text)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what} in {path} is damaged (not readable JSON: {exc}); the store "
                         "was left as it is; the other sweeps can still be read",
                         setting="sweep") from None


def _real(v):
    """A float for a REAL column; None for a missing or non-finite value."""
    if v is None:
        return None
    v = float(v)
    return v if np.isfinite(v) else None


def _values(row) -> np.ndarray:
    """A stored prediction BLOB as float32 (n_rows, n_columns)."""
    return np.frombuffer(row["vals"], dtype=_F32).reshape(int(row["n_rows"]),
                                                          int(row["n_columns"]))
