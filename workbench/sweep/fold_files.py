"""The fold features the local workers share: prepared once by the sweep's process, mapped
read-only by every worker.

Without them each worker reads the table and fits the fold's ColumnTransformer itself,
holding the table's columns, the transformer's parts and its output at once (on a
200,000 x 22 table that is most of a worker's peak). With them
(:class:`SharedFolds`, used by the runner's local pool when the table is large enough,
:func:`worth_sharing`) the sweep's process computes each (repeat, fold)'s training and
test features exactly as the trial would (:func:`workbench.sweep.trials.compute_fold_features`,
the same fitted preprocessor and calls) and writes them as ``.npy`` files into the
sweep's scratch folder (the temporary folder of the table copy, never the user's
folder); each trial then maps its two files (``numpy.load(mmap_mode="r")``, in
:func:`workbench.sweep.trials.shared_features`) and drops the mapping when it ends.
The operating system keeps one copy in its page cache, shared by the workers.

What a trial gets (:func:`feature_kind`): the NumPy engine's float32 trials read the
features cast to float32 -- what the engine itself computes from the float64 features
(the same rounding, ``astype``), so the fit, its curves and predictions are bit for
bit those of today's path and the mapped file is half the size; every other trial
(scikit-learn's MLP, the baselines, a float64 plan) reads the float64 features
themselves. A fold whose float32 cast is not finite everywhere gets no float32 file:
its float32 trials read the float64 one, and the engine refuses it as before.

Order and first trial: a thread of the sweep's process prepares the folds one at a
time in the order the trials are handed out (``order``); handing out a trial waits
only for its own fold. A fold whose preparation fails is not shared: its trials take
the worker's own path and record its error as before. Small tables are not shared at
all (:data:`SHARED_MIN_BYTES`): their features are small next to a worker's base and
the sweep's process would first have to import scikit-learn's preprocessing.

Files: ``fold-R-F-{train,test}-{float32,float64}.npy``, each written under a temporary
name in the same folder and renamed (``os.replace``) when complete, so that no reader
ever sees half a file; they go with the folder when the sweep ends (finished, failed
or interrupted; :meth:`workbench.sweep.runner._TableCopy.remove`), or with the next
sweep's clean-up after a kill (:func:`workbench.sweep.runner.clean_abandoned_copies`,
which knows these names: :func:`is_fold_file`).
"""

from __future__ import annotations

import os
import re
import threading

import numpy as np

#: share the fold features when the table's feature columns take at least this many
#: bytes as float64 (rows x feature columns x 8): below it a worker's own copy is small
#: next to its base (~150 MB of interpreter and imports) and the sweep's process would
#: first import scikit-learn's preprocessing before the first trial. A choice (the
#: 200,000 x 21 table of the memory benchmark: 34 MB; the sample sets: under 1 MB).
SHARED_MIN_BYTES = 16 * 2**20

FLOAT32, FLOAT64 = "float32", "float64"
#: rows cast to float32 and written per step (bounds the cast's transient copy)
CHUNK_ROWS = 16_384

_NAME = re.compile(r"^fold-\d+-\d+-(train|test)-(float32|float64)\.npy(\.tmp-\d+-[0-9a-f]+)?$")


def is_fold_file(name: str) -> bool:
    """Whether a file name is one of this module's (final or temporary) fold files."""
    return bool(_NAME.match(name))


def feature_kind(spec: dict) -> str:
    """Which features a trial reads: :data:`FLOAT32` for the NumPy engine in float32,
    else :data:`FLOAT64` (scikit-learn's MLP, the baselines, a float64 network)."""
    cfg = spec["config"]
    if cfg.get("kind") != "baseline" and cfg.get("engine") != "sklearn" \
            and str(spec.get("dtype", "float32")) == FLOAT32:
        return FLOAT32
    return FLOAT64


def worth_sharing(data, min_bytes: int | None = None) -> bool:
    """Whether the sweep shares its fold features (:data:`SHARED_MIN_BYTES`)."""
    rows, columns = data.X.shape
    limit = SHARED_MIN_BYTES if min_bytes is None else int(min_bytes)
    return rows * columns * 8 >= limit


def file_name(repeat: int, fold: int, part: str, kind: str) -> str:
    return f"fold-{int(repeat)}-{int(fold)}-{part}-{kind}.npy"


def write_array(path: str, X: np.ndarray, dtype) -> None:
    """Write ``X`` as ``dtype`` to the ``.npy`` file ``path``, whole or not at all: into a
    temporary file of the same folder (cast :data:`CHUNK_ROWS` rows at a time), then
    renamed; on any error the temporary file is removed and nothing is at ``path``."""
    tmp = f"{path}.tmp-{os.getpid()}-{os.urandom(4).hex()}"
    try:
        out = np.lib.format.open_memmap(tmp, mode="w+", dtype=np.dtype(dtype), shape=X.shape)
        try:
            for start in range(0, X.shape[0], CHUNK_ROWS):
                out[start:start + CHUNK_ROWS] = X[start:start + CHUNK_ROWS]
            out.flush()
        finally:
            del out
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def _fits_float32(X: np.ndarray) -> bool:
    """Whether ``X`` cast to float32 is finite wherever ``X`` is (checked in chunks)."""
    with np.errstate(over="ignore"):
        for start in range(0, X.shape[0], CHUNK_ROWS):
            part = X[start:start + CHUNK_ROWS]
            if not np.array_equal(np.isfinite(part.astype(np.float32)), np.isfinite(part)):
                return False
    return True


def write_fold(folder, data, repeat: int, fold: int, train, test, kinds) -> dict:
    """Compute one fold's features as its trials would and write the ``kinds`` asked for;
    ``{kind: {"train": path, "test": path}}`` (a float32 request answered with the float64
    files when the cast does not fit, see the module docstring)."""
    from workbench.sweep.trials import compute_fold_features, fold_preprocessor

    X_tr, X_te = compute_fold_features(data, fold_preprocessor(data), np.asarray(train),
                                       np.asarray(test))
    kinds = set(kinds)
    if FLOAT32 in kinds and not (_fits_float32(X_tr) and _fits_float32(X_te)):
        kinds = (kinds - {FLOAT32}) | {FLOAT64}
        cast = False
    else:
        cast = True
    out = {}
    for kind in sorted(kinds):
        files = {}
        for part, X in (("train", X_tr), ("test", X_te)):
            path = os.path.join(str(folder), file_name(repeat, fold, part, kind))
            write_array(path, X, kind)
            files[part] = path
        out[kind] = files
    if not cast:
        out[FLOAT32] = out[FLOAT64]
    return out


class SharedFolds:
    """The sweep's shared fold features, prepared by a thread of this process.

    Parameters
    ----------
    data : TrialData
        The sweep's table.
    folder : path
        The sweep's scratch folder (the table copy's).
    folds : dict
        ``{(repeat, fold): (train_rows, test_rows)}`` (the plan's).
    needs : dict
        ``{(repeat, fold): {kind: number of trials}}`` for the trials to run, in the order
        they are handed out (:func:`needs_in_order`; the folds are prepared in this order).
        A fold's files of one kind are removed as soon as that many of its trials have
        come back (:meth:`done`): a sweep holds on disk only the folds still in use.
    """

    def __init__(self, data, folder, folds: dict, needs: dict):
        self._data, self._folder, self._folds = data, str(folder), folds
        self._needs, self._left = {}, {}
        for key, kinds in needs.items():
            self._needs[key] = set(kinds)
            if isinstance(kinds, dict):  # counted: released when done (a plain set: kept)
                for kind, n in kinds.items():
                    self._left[(key, kind)] = int(n)
        self._lock = threading.Lock()
        self._ready = {key: threading.Event() for key in self._needs}
        self._files: dict = {}
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._prepare_all, daemon=True,
                                        name="workbench-fold-files")
        self._thread.start()

    def _prepare_all(self):
        from workbench.sweep.pool import mark

        try:
            for key, kinds in self._needs.items():
                if self._stop.is_set():
                    break
                try:
                    train, test = self._folds[key]
                    self._files[key] = write_fold(self._folder, self._data, key[0], key[1],
                                                  train, test, kinds)
                    mark(f"fold {key[0]}/{key[1]} shared")
                except Exception:  # the fold's trials compute it themselves (and record why)
                    self._files[key] = None
                finally:
                    self._ready[key].set()
        finally:
            for event in self._ready.values():  # stopped: nobody waits for good
                event.set()

    def files(self, repeat: int, fold: int, kind: str):
        """``{"train": path, "test": path}`` of a fold's features of ``kind`` once written
        (waits for them), or None when the fold is not shared."""
        key = (int(repeat), int(fold))
        event = self._ready.get(key)
        if event is None:
            return None
        event.wait()
        got = self._files.get(key)
        return None if got is None else got.get(kind)

    def attach(self, specs) -> list:
        """The trials' specs, each with its ``features`` when its fold is shared."""
        out = []
        for spec in specs:
            files = self.files(spec["repeat"], spec["fold"], feature_kind(spec))
            out.append(dict(spec, features=files) if files else spec)
        return out

    def done(self, specs) -> None:
        """Note that these trials came back with their results; remove each fold file no
        trial still needs (never a file whose count was not given)."""
        gone = []
        with self._lock:
            for spec in specs:
                key = (int(spec["repeat"]), int(spec["fold"]))
                left = self._left.get((key, feature_kind(spec)))
                if not left:
                    continue
                self._left[(key, feature_kind(spec))] = left - 1
                if left == 1:
                    gone.append(key)
            for key in gone:
                files = self._files.get(key) or {}
                used = {p for kind, paths in files.items() if self._left.get((key, kind))
                        for p in paths.values()}
                for kind, paths in files.items():
                    if not self._left.get((key, kind)):
                        for path in paths.values():
                            if path not in used:
                                try:
                                    os.unlink(path)
                                except OSError:  # gone already, or held (Windows): the folder
                                    pass  # goes at the end of the sweep anyway

    def close(self, timeout: float = 60.0) -> None:
        """Stop preparing (after the fold under way) and wait for the thread."""
        self._stop.set()
        if self._thread.is_alive() and self._thread is not threading.current_thread():
            self._thread.join(timeout)


def needs_in_order(tasks, configs, dtype) -> dict:
    """``{(repeat, fold): {kind: number of trials}}`` of ``tasks`` (tuples of trials, in
    hand-out order), the folds in the order of their first trial."""
    out: dict = {}
    for task in tasks:
        for t in task:
            kind = feature_kind({"config": configs[t.config_index].to_dict(), "dtype": dtype})
            counts = out.setdefault((int(t.repeat), int(t.fold)), {})
            counts[kind] = counts.get(kind, 0) + 1
    return out
