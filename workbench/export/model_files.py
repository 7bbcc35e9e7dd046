"""Saving and loading fitted pipelines: skops, joblib, and a manifest of checksums.

An exported model folder holds the same fitted pipeline twice:

``model.skops``
    skops' format (:mod:`skops.io`): a zip whose ``schema.json`` describes
    every object to rebuild. :func:`load_skops` reads that description first
    and refuses a file holding anything an exported pipeline never holds
    (:data:`SKOPS_CONTENTS`, an exact list; no functions at all), so nothing
    of a forged file's choosing is built or called.
``model.joblib``
    joblib's pickle, the ecosystem's habit. **Unpickling runs code**: a
    pickle can do anything the loading user can do, so load only folders you
    trust. :func:`load_joblib` checks the file's SHA-256 against the manifest
    first, which catches a changed file, though not a forged manifest.
``manifest.json``
    SHA-256 and size of every file of the export and the versions of the
    libraries that wrote it (a pickle is only guaranteed to load with the same
    versions).
"""

from __future__ import annotations

import json
import platform
from datetime import UTC, datetime
from pathlib import Path

from workbench import __version__
from workbench.data.hashing import sha256_of
from workbench.errors import InputError

SKOPS_NAME = "model.skops"
JOBLIB_NAME = "model.joblib"
ONNX_NAME = "model.onnx"
MANIFEST_NAME = "manifest.json"
MANIFEST_FORMAT = "activation-workbench-export"
MANIFEST_VERSION = 1

#: the libraries whose versions a manifest records
LIBRARIES = ("numpy", "scipy", "scikit-learn", "pandas", "joblib", "skops", "onnx",
             "onnxruntime", "skl2onnx", "jsonschema", "matplotlib")

_PICKLE_WARNING = ("unpickling runs code: load a joblib file only from a folder you trust "
                   "(the skops file, the default, is the safe choice)")


# --------------------------------------------------------------------------- checksums


def library_versions() -> dict[str, str]:
    """Versions of Python, the project and the libraries an export depends on."""
    from importlib.metadata import PackageNotFoundError, version

    out = {"python": platform.python_version(), "activation-workbench": __version__}
    for lib in LIBRARIES:
        try:
            out[lib] = version(lib)
        except PackageNotFoundError:  # pragma: no cover - all are dependencies
            out[lib] = "not installed"
    return out


def write_manifest(folder: str | Path, files: list[str] | None = None,
                   extra: dict | None = None) -> Path:
    """Write ``manifest.json`` listing every file of ``folder`` with its SHA-256.

    Parameters
    ----------
    folder : path
    files : list of str, optional
        Names (relative to ``folder``) to record; default: every regular file
        except the manifest itself.
    extra : dict, optional
        More top-level fields (e.g. the sweep and configuration exported).
    """
    folder = Path(folder)
    if files is None:
        files = sorted(p.name for p in folder.iterdir()
                       if p.is_file() and p.name != MANIFEST_NAME)
    manifest = {
        "format": MANIFEST_FORMAT,
        "version": MANIFEST_VERSION,
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "libraries": library_versions(),
        "files": {name: {"sha256": sha256_of(folder / name),
                         "bytes": (folder / name).stat().st_size} for name in files},
    }
    if extra:
        manifest.update(extra)
    path = folder / MANIFEST_NAME
    path.write_text(json.dumps(manifest, indent=2, sort_keys=False) + "\n", encoding="utf-8")
    return path


def manifest_problem(manifest) -> str | None:
    """Why ``manifest`` (parsed JSON) does not prove a folder is an export, or None.

    A workbench manifest is an object with ``"format"`` equal to
    :data:`MANIFEST_FORMAT`, an integer ``"version"`` from 1 to
    :data:`MANIFEST_VERSION` and ``"files"``: the plain names (no folder part)
    of the files the export wrote, each with its 64-digit SHA-256 and its size.
    Export (what it may replace) and predict (what it may load) both ask this.
    """
    if not isinstance(manifest, dict) or manifest.get("format") != MANIFEST_FORMAT:
        return f"its format is not {MANIFEST_FORMAT!r}"
    version = manifest.get("version")
    if type(version) is not int or not 1 <= version <= MANIFEST_VERSION:
        return f"its version {version!r} is not one this program knows (1 to {MANIFEST_VERSION})"
    files = manifest.get("files")
    if not isinstance(files, dict):
        return "it has no list of the files the export wrote"
    for name, entry in files.items():
        if not is_plain_name(name) or name == MANIFEST_NAME:
            return f"it lists {name!r}, which is not a file name inside the folder"
        if not isinstance(entry, dict) or not _is_sha256(entry.get("sha256")) \
                or type(entry.get("bytes")) is not int or entry["bytes"] < 0:
            return f"its entry for {name!r} has no valid SHA-256 and size"
    return None


def is_plain_name(name) -> bool:
    """Whether ``name`` is one entry of a folder (no separator, not ``.`` or ``..``)."""
    return isinstance(name, str) and name not in ("", ".", "..") \
        and not any(sep in name for sep in ("/", "\\", "\0"))


def _is_sha256(value) -> bool:
    return isinstance(value, str) and len(value) == 64 \
        and all(ch in "0123456789abcdef" for ch in value)


def parse_manifest(data: bytes) -> dict:
    """Parse and check the bytes of one ``manifest.json`` (:func:`manifest_problem`).

    Raises
    ------
    ValueError
        with the reason, when the bytes are not a workbench manifest.
    """
    try:
        manifest = json.loads(data.decode("utf-8"))
    except (ValueError, RecursionError):  # bad UTF-8, bad JSON, absurd nesting
        raise ValueError("it is not valid JSON") from None
    problem = manifest_problem(manifest)
    if problem:
        raise ValueError(problem)
    return manifest


def load_manifest(path: str | Path) -> dict:
    """Read, parse and check one ``manifest.json`` (:func:`parse_manifest`).

    Raises
    ------
    ValueError
        with the reason, when the file cannot be read or is not a workbench manifest.
    """
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        raise ValueError(exc.strerror or str(exc)) from None
    return parse_manifest(data)


def read_manifest(folder: str | Path) -> dict:
    """Read and check ``manifest.json`` of an export folder (:func:`manifest_problem`).

    Raises
    ------
    InputError
        when the folder has no manifest, or one that is damaged or not a workbench one.
    """
    path = Path(folder) / MANIFEST_NAME
    if not Path(folder).exists():
        raise InputError(f"{folder} does not exist; give a folder written by the workbench's "
                         "export")
    if not path.is_file():
        raise InputError(f"{path.parent} has no {MANIFEST_NAME}; "
                         "give a folder written by the workbench's export")
    try:
        return load_manifest(path)
    except ValueError as exc:
        raise InputError(f"{path} is damaged or not a workbench export manifest ({exc}); "
                         "re-export the model") from None


def verify_file(folder: str | Path, name: str, manifest: dict | None = None) -> Path:
    """Check one file of an export against the SHA-256 its manifest records.

    Returns
    -------
    Path
        The checked file.

    Raises
    ------
    InputError
        when the file is missing, not listed, or its checksum differs (the file
        was changed after export).
    """
    folder = Path(folder)
    manifest = read_manifest(folder) if manifest is None else manifest
    path = folder / name
    if not path.is_file():
        other = [f for f in (SKOPS_NAME, JOBLIB_NAME, ONNX_NAME)
                 if f != name and (folder / f).is_file()]
        hint = (f"it has {' and '.join(other)}: use that model file instead, or export "
                "again with this format" if other else "export the model again with this format")
        raise InputError(f"{path} is missing from this export; {hint}", setting="model")
    entry = manifest["files"].get(name)
    if not isinstance(entry, dict) or "sha256" not in entry:
        raise InputError(f"{name} is not listed in {MANIFEST_NAME}, so it cannot be checked; "
                         "re-export the model")
    actual = sha256_of(path)
    if actual != entry["sha256"]:
        raise InputError(
            f"{path} does not match the SHA-256 recorded in {MANIFEST_NAME} "
            f"(expected {entry['sha256'][:12]}..., found {actual[:12]}...): the file was "
            "changed after export; refusing to load it, re-export the model")
    return path


# --------------------------------------------------------------------------- trust


#: Everything a skops file written by the export contains, as ``(node kind, type)``
#: pairs of its ``schema.json``: the pipelines of every output head, hidden activation,
#: engine and preprocessing kind (numbers, integers, categories, booleans with and
#: without gaps, dates) hold these and nothing else. A test rebuilds the set by
#: exporting every combination and checks that it equals this one, so a change in
#: the pipelines or in scikit-learn's module layout shows up as a failing test, not
#: as a refused model. skops' own defaults trust far more (every scikit-learn
#: estimator, ``FunctionTransformer`` included, and NumPy functions such as
#: ``numpy.log``); :func:`load_skops` refuses a file holding anything outside this set.
SKOPS_CONTENTS = frozenset({
    ("DictNode", "builtins.dict"),
    ("JsonNode", "builtins.str"),
    ("ListNode", "builtins.list"),
    ("SliceNode", "builtins.slice"),
    ("TupleNode", "builtins.tuple"),
    ("TypeNode", "builtins.str"),
    ("TypeNode", "numpy.float64"),
    ("DTypeNode", "numpy.dtype"),
    ("NdArrayNode", "numpy.float64"),
    ("NdArrayNode", "numpy.ndarray"),
    ("RandomStateNode", "numpy.random.mtrand.RandomState"),
    ("ObjectNode", "sklearn.compose._column_transformer.ColumnTransformer"),
    ("ObjectNode", "sklearn.compose._target.TransformedTargetRegressor"),
    ("ObjectNode", "sklearn.impute._base.SimpleImputer"),
    ("ObjectNode", "sklearn.neural_network._multilayer_perceptron.MLPClassifier"),
    ("ObjectNode", "sklearn.neural_network._multilayer_perceptron.MLPRegressor"),
    ("ObjectNode", "sklearn.neural_network._stochastic_optimizers.AdamOptimizer"),
    ("ObjectNode", "sklearn.pipeline.Pipeline"),
    ("ObjectNode", "sklearn.preprocessing._data.StandardScaler"),
    ("ObjectNode", "sklearn.preprocessing._encoders.OneHotEncoder"),
    ("ObjectNode", "sklearn.preprocessing._label.LabelBinarizer"),
    ("ObjectNode", "workbench.data.preprocessing.DateParts"),
    ("ObjectNode", "workbench.data.preprocessing.TargetScaler"),
    ("ObjectNode", "workbench.nets.engine.NetClassifier"),
    ("ObjectNode", "workbench.nets.engine.NetRegressor"),
})

#: the largest ``schema.json`` read from a skops file (ours are well under 1 MB)
MAX_SCHEMA_BYTES = 64 << 20


def skops_contents(path: str | Path) -> set[tuple[str, str]]:
    """Every ``(node kind, type)`` pair in a skops file's ``schema.json``, nothing loaded.

    The schema is the description skops rebuilds objects from: each node names
    how it is loaded (``__loader__``: an object, a type given as a value, a
    function, an array, ...) and the type or function (``__module__`` and
    ``__class__``). It is read as skops reads it (the zip member of that name)
    and walked without recursion, so no nesting depth can break the walk.

    Raises
    ------
    ValueError
        when the file is not a zip with a readable ``schema.json``.
    """
    import zipfile

    try:
        with zipfile.ZipFile(path) as zf, zf.open("schema.json") as fh:
            raw = fh.read(MAX_SCHEMA_BYTES + 1)
    except (OSError, KeyError, RuntimeError, zipfile.BadZipFile, EOFError) as exc:
        raise ValueError(f"not a skops archive ({type(exc).__name__})") from None
    if len(raw) > MAX_SCHEMA_BYTES:
        raise ValueError("its schema is far larger than any exported pipeline's")
    try:
        schema = json.loads(raw.decode("utf-8"))
    except (ValueError, RecursionError):
        raise ValueError("its schema is not valid JSON") from None
    found, todo = set(), [schema]
    while todo:
        node = todo.pop()
        if isinstance(node, dict):
            if "__loader__" in node:
                found.add((str(node.get("__loader__")),
                           f"{node.get('__module__')}.{node.get('__class__')}"))
            todo.extend(node.values())
        elif isinstance(node, list):
            todo.extend(node)
    return found


def foreign_contents(found) -> list[str]:
    """The pairs of ``found`` outside :data:`SKOPS_CONTENTS`, as ``"type (node kind)"``."""
    return sorted(f"{name} ({kind})" for kind, name in found if (kind, name) not in SKOPS_CONTENTS)


# --------------------------------------------------------------------------- save / load


def save_skops(pipeline, path: str | Path) -> Path:
    """Save a fitted pipeline in skops' format."""
    import zipfile

    import skops.io as sio

    path = Path(path)
    sio.dump(pipeline, path, compression=zipfile.ZIP_DEFLATED)
    return path


def save_joblib(pipeline, path: str | Path) -> Path:
    """Save a fitted pipeline with joblib (a pickle: loading it runs code)."""
    import joblib

    path = Path(path)
    joblib.dump(pipeline, path)
    return path


def load_skops(path: str | Path):
    """Load a skops file holding only what exported pipelines hold (:data:`SKOPS_CONTENTS`).

    The whole schema is checked before skops rebuilds anything, so a file
    naming any other type or any function (``FunctionTransformer(numpy.memmap)``,
    even ``numpy.log``, which skops trusts by default) is refused and nothing
    of it runs. skops is then told to trust exactly the types it asks about,
    all of them in the set.

    Raises
    ------
    InputError
        naming what the file holds beyond an exported pipeline, or when the file
        is not a readable skops file.
    """
    import skops.io as sio

    path = Path(path)
    try:
        found = skops_contents(path)
    except ValueError as exc:
        raise InputError(f"{path} is not a readable skops file ({exc}); re-export the model") \
            from None
    foreign = foreign_contents(found)
    if foreign:
        shown = ", ".join(foreign[:5]) + (f" and {len(foreign) - 5} more" if len(foreign) > 5
                                          else "")
        raise InputError(
            f"{path} holds what no exported pipeline holds: {shown}; refusing to load it "
            "(the file was not written by the workbench's export, or was changed)")
    try:
        asked = sio.get_untrusted_types(file=path)
        names = {name for _, name in SKOPS_CONTENTS}
        if any(n not in names for n in asked):  # pragma: no cover - the schema check came first
            raise InputError(f"{path} asks skops to trust {asked}; refusing to load it")
        return sio.load(path, trusted=asked)
    except InputError:
        raise
    except Exception as exc:  # skops' and NumPy's own errors on a damaged file
        raise InputError(f"{path} could not be loaded ({type(exc).__name__}: "
                         f"{str(exc)[:200]}); re-export the model") from None


def load_joblib(path: str | Path, manifest: dict | None = None, warn=print):
    """Load a joblib file after checking its SHA-256 against the folder's manifest.

    Parameters
    ----------
    path : path
        ``model.joblib`` inside an export folder.
    manifest : dict, optional
        The folder's manifest (read when not given).
    warn : callable
        Receives the one-line warning that unpickling runs code.
    """
    import joblib

    path = Path(path)
    verify_file(path.parent, path.name, manifest)
    if warn is not None:
        warn(f"warning: {_PICKLE_WARNING}")
    try:
        return joblib.load(path)
    except Exception as exc:
        raise InputError(f"{path} could not be unpickled ({type(exc).__name__}: {exc}); "
                         "the library versions may differ from those in the manifest") from None


def load_model(folder: str | Path, kind: str = "skops", warn=print, manifest: dict | None = None):
    """Load the pipeline of an export folder, checking the manifest first.

    Parameters
    ----------
    folder : path
    kind : {"skops", "joblib"}
    warn : callable
        Receives warnings (the pickle warning for joblib).
    manifest : dict, optional
        The folder's manifest, already read (and perhaps verified against its signature).
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder} is not a folder; give the folder written by the "
                         "workbench's export")
    manifest = read_manifest(folder) if manifest is None else manifest
    if kind == "skops":
        return load_skops(verify_file(folder, SKOPS_NAME, manifest))
    if kind == "joblib":
        return load_joblib(folder / JOBLIB_NAME, manifest, warn=warn)
    raise ValueError(f"kind must be 'skops' or 'joblib', not {kind!r}")
