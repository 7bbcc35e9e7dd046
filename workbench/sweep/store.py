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

The database runs in WAL mode, so the window and the export can read while a
sweep writes (with their own :class:`Store` on the same file, or sharing one:
its methods are serialised by a lock, so threads may share an instance). A file that is not a workbench store, or is damaged, is reported
with :class:`InputError` and never touched; a store written by a newer program
is refused; an older one is migrated in place (each step in :data:`MIGRATIONS`).

A sweep whose state is ``running`` but whose process is gone (killed, crashed,
machine rebooted) is reported as ``interrupted`` by :meth:`Store.list_sweeps`
and :meth:`Store.get_sweep`; ``workbench sweep --resume`` finishes it.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import socket
import sqlite3
import sys
import threading
from pathlib import Path

from workbench.data.hashing import sha256_of
from workbench.errors import InputError

SCHEMA_VERSION = 1
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

#: migration steps: MIGRATIONS[v] upgrades a store from version v to v + 1
MIGRATIONS: dict[int, str] = {}

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


def _pid_alive(pid: int | None) -> bool:
    if not pid:
        return False
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # pragma: no cover - someone else's process
        return True
    except OSError:  # pragma: no cover
        return False
    # a zombie (killed child not yet reaped) is not running either
    try:
        with open(f"/proc/{int(pid)}/stat") as fh:
            return fh.read().split(")")[-1].split()[0] != "Z"
    except OSError:
        return True


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
        try:
            self._conn = sqlite3.connect(str(self.path), timeout=30, isolation_level=None,
                                         check_same_thread=False)
            self._conn.row_factory = sqlite3.Row
            self._open(existed)
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

    # ------------------------------------------------------------------ opening
    def _check_header(self):
        with open(self.path, "rb") as fh:
            head = fh.read(16)
        if head != b"SQLite format 3\x00":
            raise InputError(f"the store {self.path} is not an SQLite database (damaged or "
                             "another kind of file); it was left untouched; move it away or "
                             "choose another store file", setting="store")

    def _open(self, existed: bool):
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
            self._apply_script(_SCHEMA_V1, SCHEMA_VERSION)
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
        if str(mode).lower() != "wal":
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
        c = self._conn
        with self._lock:
            c.execute("BEGIN IMMEDIATE")
            try:
                for sql, args in statements:
                    c.execute(sql, args)
                c.execute("COMMIT")
            except BaseException:
                c.execute("ROLLBACK")
                raise

    def _rows(self, sql, args=()):
        with self._lock:
            return self._conn.execute(sql, args).fetchall()

    def create_sweep(self, sweep_id: str, plan: dict, fingerprint: dict,
                     configurations: list[dict], versions: dict | None = None) -> None:
        """Insert a sweep (state ``running``) and its grid, in one transaction."""
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
        self._tx(stmts)

    def set_state(self, sweep_id: str, state: str) -> None:
        """Mark a sweep running (by this process), finished or interrupted."""
        if state not in (RUNNING, FINISHED, INTERRUPTED):
            raise ValueError(f"unknown sweep state {state!r}")
        t = now_iso()
        self._tx([("UPDATE sweeps SET state=?, updated=?, finished=?, host=?, pid=? WHERE id=?",
                   (state, t, t if state == FINISHED else None, socket.gethostname(),
                    os.getpid(), sweep_id))])

    def add_trial(self, sweep_id: str, result: dict) -> None:
        """Commit one finished trial in its own transaction."""
        self._tx([(
            "INSERT INTO trials (sweep_id, config_index, repeat, fold, status, test_score, "
            "train_score, fit_seconds, epochs, engine, error, n_train, n_test, history, health, "
            "worker, attempts, finished) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (sweep_id, int(result["config_index"]), int(result["repeat"]), int(result["fold"]),
             result["status"], result.get("test_score"), result.get("train_score"),
             result.get("fit_seconds"), result.get("epochs"), result.get("engine"),
             result.get("error"), result.get("n_train"), result.get("n_test"),
             json.dumps(result.get("history") or {}), json.dumps(result.get("health") or {}),
             result.get("worker"), int(result.get("attempts", 1)), now_iso()))])

    # ------------------------------------------------------------------ reading
    def _sweep_dict(self, row) -> dict:
        d = dict(row)
        for k in ("plan", "fingerprint", "versions"):
            d[k] = json.loads(d[k])
        if d["state"] == RUNNING and d.get("host") == socket.gethostname() \
                and not _pid_alive(d.get("pid")):
            d["state"] = INTERRUPTED
        d["n_stored"] = self._rows("SELECT COUNT(*) FROM trials WHERE sweep_id=?",
                                   (d["id"],))[0][0]
        return d

    def list_sweeps(self) -> list[dict]:
        """Every sweep, newest first, with its state and the number of stored trials."""
        rows = self._rows("SELECT * FROM sweeps ORDER BY created DESC, id DESC")
        return [self._sweep_dict(r) for r in rows]

    def sweep_summaries(self) -> list[dict]:
        """One flat dict per stored sweep, newest first: what ``history`` lists.

        Keys: ``sweep_id, state, created, updated, finished, table, target, metric,
        n_configurations, n_trials, n_stored``.
        """
        out = []
        for s in self.list_sweeps():
            p = s["plan"]
            out.append({"sweep_id": s["id"], "state": s["state"], "created": s["created"],
                        "updated": s["updated"], "finished": s["finished"],
                        "table": p["table"], "target": p["target"], "metric": p["metric"],
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

    def trials(self, sweep_id: str, with_history: bool = True) -> list[dict]:
        """The stored (finished) trials of a sweep, ordered by configuration, repeat, fold."""
        rows = self._rows(
            "SELECT * FROM trials WHERE sweep_id=? ORDER BY config_index, repeat, fold",
            (sweep_id,))
        out = []
        for r in rows:
            d = dict(r)
            d.pop("sweep_id")
            if with_history:
                d["history"] = json.loads(d["history"] or "{}")
                d["health"] = json.loads(d["health"] or "{}")
            else:
                d.pop("history")
                d["health"] = json.loads(d["health"] or "{}")
            out.append(d)
        return out

    def finished_keys(self, sweep_id: str) -> set[tuple[int, int, int]]:
        """``(config_index, repeat, fold)`` of every stored trial."""
        return {(r[0], r[1], r[2]) for r in self._rows(
            "SELECT config_index, repeat, fold FROM trials WHERE sweep_id=?", (sweep_id,))}
