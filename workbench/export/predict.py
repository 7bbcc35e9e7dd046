"""Predict with an exported model folder (written by ``workbench export``).

Three ways to load the model, all checked against the folder's manifest first
(SHA-256 of each file, :mod:`workbench.export.model_files`):

``skops`` (default)
    ``model.skops``, loading only scikit-learn, NumPy and workbench types;
    nothing in the file is executed.
``joblib``
    ``model.joblib``. **Unpickling runs code**: only load folders you trust.
    A warning says so every time.
``onnx``
    ``model.onnx`` with onnxruntime: no Python object is rebuilt at all.

:func:`predict_table` checks that the table has every column the model reads
(the message names the missing ones) and that numeric and date columns can be
read as such, then returns one row per input row: ``prediction`` and, for
classifiers, one ``probability_<class>`` column per class.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from workbench.errors import InputError
from workbench.export.model_files import (
    ONNX_NAME,
    load_model,
    read_manifest,
    verify_file,
)

KINDS = ("skops", "joblib", "onnx")


def _check_columns(df: pd.DataFrame, kinds: dict[str, str]) -> pd.DataFrame:
    """Missing-column and type check; returns a copy with numbers and dates parsed."""
    missing = [c for c in kinds if c not in df.columns]
    if missing:
        shown = ", ".join(repr(c) for c in missing[:10])
        more = f" and {len(missing) - 10} more" if len(missing) > 10 else ""
        raise InputError(f"the table lacks {len(missing)} column(s) the model needs: "
                         f"{shown}{more}; add them (missing values are allowed)")
    out = df.copy()
    for col, kind in kinds.items():
        s = out[col]
        if kind == "float" and not (pd.api.types.is_numeric_dtype(s)
                                    or pd.api.types.is_bool_dtype(s)):
            out[col] = _parsed(col, s, pd.to_numeric(s, errors="coerce"), "numbers")
        elif kind == "datetime" and not pd.api.types.is_datetime64_any_dtype(s):
            out[col] = _parsed(col, s, pd.to_datetime(s, errors="coerce"), "dates")
    return out


def _parsed(col, raw, parsed, what: str):
    """``parsed``, unless a filled cell of ``raw`` failed to parse (then a one-line error)."""
    bad = raw.notna() & parsed.isna()
    if bad.any():
        raise InputError(f"column {col!r} must hold {what} but row {int(bad.idxmax()) + 1} "
                         f"has {str(raw[bad].iloc[0])[:40]!r}; fix or blank those cells")
    return parsed


def _result_frame(pred, proba, classes) -> pd.DataFrame:
    out = pd.DataFrame({"prediction": np.asarray(pred).ravel()})
    if proba is not None:
        proba = np.asarray(proba, dtype=float)
        for j, c in enumerate(classes):
            out[f"probability_{c}"] = proba[:, j]
    return out


def predict_table(folder, df: pd.DataFrame, kind: str = "skops", warn=print) -> pd.DataFrame:
    """Predictions of an exported model for the rows of ``df``.

    Parameters
    ----------
    folder : path
        An export folder (written by :func:`workbench.export.bundle.export_configuration`).
    df : pandas.DataFrame
        A table with (at least) the columns the model was trained on.
    kind : {"skops", "joblib", "onnx"}
        Which of the folder's model files to use.
    warn : callable
        Receives warnings (the unpickling warning for ``joblib``).

    Returns
    -------
    pandas.DataFrame
        ``prediction`` and, for classifiers, ``probability_<class>`` per class.

    Raises
    ------
    InputError
        for a folder that is not an export, a changed (tampered) model file, a
        skops file naming untrusted types, or a table lacking needed columns.
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {KINDS}, not {kind!r}")
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder} is not a folder; give the folder written by the "
                         "workbench's export")
    manifest = read_manifest(folder)
    classes = manifest.get("classes")
    if kind == "onnx":
        import onnx

        from workbench.export.onnx_graph import onnx_columns, run_onnx

        path = verify_file(folder, ONNX_NAME, manifest)
        model = onnx.load(str(path))
        kinds = {c["column"]: c["kind"] for c in onnx_columns(model)}
        table = _check_columns(df, kinds)
        out = run_onnx(model, table)
        if "probabilities" in out:
            labels = classes if classes is not None else list(range(out["probabilities"].shape[1]))
            return _result_frame(out["label"], out["probabilities"], labels)
        return _result_frame(out["variable"], None, None)

    from sklearn.base import is_classifier

    from workbench.export.onnx_graph import required_column_kinds

    pipe = load_model(folder, kind, warn=warn)
    kinds = required_column_kinds(pipe)
    if kinds is None:
        names = getattr(pipe, "feature_names_in_", None)
        kinds = {str(c): "float" for c in names} if names is not None else {}
    table = _check_columns(df, kinds)
    try:
        pred = pipe.predict(table)
        proba = pipe.predict_proba(table) if is_classifier(pipe) else None
    except (ValueError, TypeError) as exc:
        raise InputError(f"the model could not read the table ({exc}); check that its columns "
                         "hold the same kinds of values as the training table") from None
    labels = list(getattr(pipe, "classes_", classes or []))
    return _result_frame(pred, proba, labels)
