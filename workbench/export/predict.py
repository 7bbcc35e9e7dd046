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
read as such, then returns one row per input row, in order, never fewer:
``prediction``, for classifiers one ``probability_<class>`` column per class,
and ``reason``. A row whose every column the model reads is blank gets no
prediction (the model would answer only with the values it imputes) and
``reason`` says so; for the other rows ``reason`` is empty.
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
from workbench.export.signature import verify_folder

KINDS = ("skops", "joblib", "onnx")
#: the last output column: why a row has no prediction (empty when it has one)
REASON_COLUMN = "reason"
#: the reason given for a row whose every model column is blank
BLANK_REASON = "every column the model reads is empty"


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


def blank_rows(df: pd.DataFrame, columns) -> np.ndarray:
    """Rows whose every cell in ``columns`` is missing or blank text (no prediction for them)."""
    columns = list(columns)
    if not columns:
        return np.zeros(len(df), dtype=bool)
    cells = df[columns]
    blank = cells.isna().to_numpy()
    for j, col in enumerate(columns):
        s = cells[col]
        if s.dtype == object or pd.api.types.is_string_dtype(s):
            blank[:, j] |= s.map(lambda v: isinstance(v, str) and not v.strip()).to_numpy(bool)
    return blank.all(axis=1)


def _result_frame(pred, proba, classes) -> pd.DataFrame:
    out = pd.DataFrame({"prediction": np.asarray(pred).ravel()})
    if proba is not None:
        proba = np.asarray(proba, dtype=float)
        for j, c in enumerate(classes):
            out[f"probability_{c}"] = proba[:, j]
    return out


def _every_row(part: pd.DataFrame | None, blank: np.ndarray, columns: list[str]) -> pd.DataFrame:
    """The predictions of the non-blank rows in their places, blank rows marked."""
    n = len(blank)
    if not blank.any():
        out = part.reset_index(drop=True)
    else:
        if part is None:  # every row is blank
            part = pd.DataFrame({c: pd.Series(dtype=object) for c in columns})
        # object columns, so that labels keep their form (1 stays 1, not 1.0)
        part = part.astype({"prediction": object}).set_axis(np.flatnonzero(~blank))
        out = part.reindex(range(n))
    out[REASON_COLUMN] = np.where(blank, BLANK_REASON, None)
    return out


def predict_table(folder, df: pd.DataFrame, kind: str = "skops", warn=print,
                  key: bytes | None = None) -> pd.DataFrame:
    """Predictions of an exported model for the rows of ``df``, one row per row.

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
    key : bytes, optional
        The key the folder was signed with: its signature is checked first
        (:func:`workbench.export.signature.verify_folder`) and the signed
        manifest's checksums are the ones used.

    Returns
    -------
    pandas.DataFrame
        As many rows as ``df``, in its order: ``prediction``, for classifiers
        ``probability_<class>`` per class, and ``reason``: empty for predicted
        rows; for a row whose every column the model reads is blank,
        :data:`BLANK_REASON` (and no prediction: the model would only answer
        with its imputed values).

    Raises
    ------
    InputError
        for a folder that is not an export, a changed (tampered) model file, a
        skops file holding what no export holds, a damaged ONNX file, a
        signature that does not match ``key``, or a table lacking needed columns.
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {KINDS}, not {kind!r}")
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder} is not a folder; give the folder written by the "
                         "workbench's export")
    manifest = read_manifest(folder) if key is None else verify_folder(folder, key)
    if kind == "onnx":
        from workbench.export.onnx_graph import load_onnx, onnx_classes, onnx_columns, run_onnx

        model = load_onnx(verify_file(folder, ONNX_NAME, manifest))
        kinds = {c["column"]: c["kind"] for c in onnx_columns(model)}
        table = _check_columns(df, kinds)
        blank = blank_rows(df, kinds)
        outputs = {o.name for o in model.graph.output}
        labels = onnx_classes(model)  # from the model itself, never from the manifest
        if (labels is None) != ("probabilities" not in outputs):
            raise InputError(f"{folder / ONNX_NAME} does not record the classes of its "
                             "probabilities (written by an older export, or changed); "
                             "re-export the model")
        names = ["prediction"] + [f"probability_{c}" for c in labels or []]
        part = None
        if not blank.all():
            out = run_onnx(model, table.loc[~blank])
            if labels is not None:
                if out["probabilities"].shape[1] != len(labels):
                    raise InputError(f"{folder / ONNX_NAME} gives {out['probabilities'].shape[1]} "
                                     f"probabilities per row but records {len(labels)} classes "
                                     "(the file was changed); re-export the model")
                part = _result_frame(out["label"], out["probabilities"], labels)
            else:
                part = _result_frame(out["variable"], None, None)
        return _every_row(part, blank, names)

    from sklearn.base import is_classifier

    from workbench.export.onnx_graph import required_column_kinds

    pipe = load_model(folder, kind, warn=warn, manifest=manifest)
    kinds = required_column_kinds(pipe)
    if kinds is None:
        names = getattr(pipe, "feature_names_in_", None)
        kinds = {str(c): "float" for c in names} if names is not None else {}
    table = _check_columns(df, kinds)
    blank = blank_rows(df, kinds)
    labels = list(pipe.classes_) if is_classifier(pipe) else None
    names = ["prediction"] + [f"probability_{c}" for c in labels or []]
    part = None
    if not blank.all():
        rows = table.loc[~blank]
        try:
            pred = pipe.predict(rows)
            proba = pipe.predict_proba(rows) if labels is not None else None
        except (ValueError, TypeError) as exc:
            raise InputError(f"the model could not read the table ({exc}); check that its "
                             "columns hold the same kinds of values as the training table") \
                from None
        part = _result_frame(pred, proba, labels)
    return _every_row(part, blank, names)
