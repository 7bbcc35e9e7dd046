"""``workbench predict``: the three model files agree, and bad files are refused.

References: the joblib pipeline's own ``predict`` / ``predict_proba`` (scikit-learn)
are the reference for the skops and ONNX paths (onnxruntime, 1e-4 in float32);
SHA-256 via :mod:`hashlib`; skops' own ``get_untrusted_types`` shows what a forged file asks for.
"""

from __future__ import annotations

import csv
import hashlib
import json

import joblib
import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from export_helpers import CLF_TARGET, REG_TARGET, SCRIPT_COL, make_sweep
from sklearn.base import BaseEstimator

import workbench.commands.predict as predict_command
from workbench.cli import main
from workbench.data.intake import load_table
from workbench.errors import InputError
from workbench.export import model_files as mf
from workbench.export.bundle import export_configuration
from workbench.export.predict import predict_table


class Smuggled(BaseEstimator):
    """A type no allow-list knows: a skops file naming it must be refused."""

    def __init__(self, payload="rm -rf"):
        self.payload = payload


@pytest.fixture(scope="module")
def exports(tmp_path_factory):
    out = {}
    for task in ("regression", "classification"):
        base = tmp_path_factory.mktemp(task)
        store, sweep_id, table = make_sweep(base, task, dtype="float32")
        folder = export_configuration(store, sweep_id, "best", base / "model",
                                      formats="json,skops,joblib,onnx")
        store.close()
        df, _ = load_table(table)
        target = REG_TARGET if task == "regression" else CLF_TARGET
        out[task] = (folder, table, df.drop(columns=[target]))
    return out


def _copy(folder, dest):
    import shutil

    shutil.copytree(folder, dest)
    return dest


def test_regression_files_agree(exports):
    folder, _, X = exports["regression"]
    ref = joblib.load(folder / mf.JOBLIB_NAME).predict(X)
    msgs = []
    by_skops = predict_table(folder, X)
    by_joblib = predict_table(folder, X, "joblib", warn=msgs.append)
    by_onnx = predict_table(folder, X, "onnx")
    np.testing.assert_array_equal(by_skops["prediction"], ref)
    np.testing.assert_array_equal(by_joblib["prediction"], ref)
    np.testing.assert_allclose(by_onnx["prediction"], ref, rtol=1e-4, atol=1e-4)
    assert list(by_skops.columns) == ["prediction", "reason"]
    assert by_skops["reason"].isna().all()
    assert len(msgs) == 1 and "unpickling runs code" in msgs[0]


def test_classifier_gives_probabilities(exports):
    folder, _, X = exports["classification"]
    pipe = joblib.load(folder / mf.JOBLIB_NAME)
    got = predict_table(folder, X)
    classes = list(pipe.classes_)
    assert list(got.columns) == ["prediction"] + [f"probability_{c}" for c in classes] \
        + ["reason"]
    proba = got[[f"probability_{c}" for c in classes]].to_numpy()
    np.testing.assert_allclose(proba, pipe.predict_proba(X))
    np.testing.assert_allclose(proba.sum(axis=1), 1.0)
    onnx_got = predict_table(folder, X, "onnx")
    assert list(onnx_got.columns) == list(got.columns)
    np.testing.assert_allclose(onnx_got.iloc[:, 1:-1].to_numpy(dtype=float), proba, atol=1e-4)
    assert (onnx_got["prediction"].astype(str) == got["prediction"].astype(str)).all()


def test_missing_columns_are_named(exports):
    folder, _, X = exports["regression"]
    short = X.drop(columns=[SCRIPT_COL, "size"])
    for kind in ("skops", "onnx"):
        with pytest.raises(InputError, match="lacks 2 column") as err:
            predict_table(folder, short, kind)
        assert SCRIPT_COL in str(err.value) and "'size'" in str(err.value)


def test_text_in_a_numeric_column_is_reported(exports):
    folder, _, X = exports["regression"]
    bad = X.copy()
    bad["size"] = bad["size"].astype(object)
    bad.loc[4, "size"] = "n/a?"
    with pytest.raises(InputError, match="row 5"):
        predict_table(folder, bad)


@pytest.mark.parametrize("name", [mf.SKOPS_NAME, mf.JOBLIB_NAME, mf.ONNX_NAME])
def test_one_changed_byte_is_refused(exports, tmp_path, monkeypatch, capsys, name):
    folder, table, _ = exports["regression"]
    copy = _copy(folder, tmp_path / "copy")
    data = bytearray((copy / name).read_bytes())
    data[len(data) // 2] ^= 0x01
    (copy / name).write_bytes(bytes(data))

    def never(*a, **k):  # the pickle must not even be opened
        raise AssertionError("joblib.load called on a tampered file")

    monkeypatch.setattr(joblib, "load", never)
    flag = {mf.SKOPS_NAME: [], mf.JOBLIB_NAME: ["--joblib"], mf.ONNX_NAME: ["--onnx"]}[name]
    assert main(["predict", str(copy), str(table), *flag]) == 2
    err = capsys.readouterr().err
    assert "SHA-256" in err and "changed after export" in err and "Traceback" not in err


def test_skops_file_naming_an_untrusted_type_is_refused(exports, tmp_path, capsys):
    folder, table, _ = exports["regression"]
    copy = _copy(folder, tmp_path / "copy")
    pipe = sio.load(copy / mf.SKOPS_NAME, trusted=sio.get_untrusted_types(
        file=copy / mf.SKOPS_NAME))
    pipe.steps.append(("extra", Smuggled()))
    sio.dump(pipe, copy / mf.SKOPS_NAME)
    asked = sio.get_untrusted_types(file=copy / mf.SKOPS_NAME)
    assert any(n.endswith("Smuggled") for n in asked)
    # a consistent manifest, so that the refusal comes from the type check
    manifest = json.loads((copy / mf.MANIFEST_NAME).read_text())
    manifest["files"][mf.SKOPS_NAME]["sha256"] = hashlib.sha256(
        (copy / mf.SKOPS_NAME).read_bytes()).hexdigest()
    (copy / mf.MANIFEST_NAME).write_text(json.dumps(manifest))
    assert main(["predict", str(copy), str(table)]) == 2
    err = capsys.readouterr().err
    assert "no exported pipeline holds" in err and "Smuggled" in err
    assert err.count("\n") == 1 and "Traceback" not in err


def test_cli_writes_a_spreadsheet_safe_csv(exports, tmp_path, capsys):
    folder, table, X = exports["classification"]
    out = tmp_path / "pred.csv"
    assert main(["predict", str(folder), str(table), "--out", str(out)]) == 0
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert len(rows) == len(X) + 1
    # the class "-yes" is user text: neutralised in the header and in the cells
    assert "'probability_-yes" not in rows[0] and "probability_-yes" in rows[0]
    assert all(not r[0].startswith(("-", "=", "+", "@")) for r in rows[1:])
    assert {r[0] for r in rows[1:]} <= {"'-yes", "<b>no</b>"}
    pd.read_csv(out)  # a plain CSV


def test_cli_standard_output_is_the_same_safe_csv(exports, tmp_path, capsys):
    folder, table, X = exports["classification"]
    out = tmp_path / "pred.csv"
    assert main(["predict", str(folder), str(table), "--out", str(out)]) == 0
    capsys.readouterr()
    assert main(["predict", str(folder), str(table)]) == 0
    printed = capsys.readouterr().out
    assert printed == out.read_bytes().decode("utf-8")  # one writer for both
    rows = list(csv.reader(printed.splitlines()))
    assert {r[0] for r in rows[1:]} <= {"'-yes", "<b>no</b>"} and len(rows) == len(X) + 1


@pytest.mark.parametrize("trigger", ["=", "+", "-", "@"])
def test_cli_standard_output_neutralises_formula_cells(exports, monkeypatch, capsys, trigger):
    """Class labels and cells that a spreadsheet would run as formulas (OWASP "CSV
    Injection": =, +, -, @) reach standard output quoted; numbers stay numbers."""
    folder, table, _ = exports["classification"]
    label = trigger + 'HYPERLINK("http://evil.example","x")'
    hostile = pd.DataFrame({"prediction": [label, "plain", trigger + "1+2"],
                            f"probability_{label}": [0.25, -0.5, 1.0],
                            "reason": [None, None, None]})
    monkeypatch.setattr(predict_command, "predict_table", lambda *a, **k: hostile)
    assert main(["predict", str(folder), str(table)]) == 0
    rows = list(csv.reader(capsys.readouterr().out.splitlines()))
    assert rows == [["prediction", f"probability_{label}", "reason"],
                    ["'" + label, "0.25", ""], ["plain", "-0.5", ""],
                    ["'" + trigger + "1+2", "1.0", ""]]


def test_not_an_export_folder(tmp_path, capsys):
    table = tmp_path / "t.csv"
    table.write_text("a,b\n1,2\n3,4\n")
    assert main(["predict", str(tmp_path), str(table)]) == 2
    assert "manifest.json" in capsys.readouterr().err


def test_a_missing_model_file_names_the_setting(exports, tmp_path, capsys):
    folder, table, X = exports["regression"]
    copy = _copy(folder, tmp_path / "copy")
    (copy / mf.SKOPS_NAME).unlink()
    with pytest.raises(InputError) as err:
        predict_table(copy, X)
    assert err.value.setting == "model" and "--" not in str(err.value)
    assert mf.JOBLIB_NAME in str(err.value) and mf.ONNX_NAME in str(err.value)
    assert main(["predict", str(copy), str(table)]) == 2
    assert capsys.readouterr().err.rstrip().endswith("(set with --joblib or --onnx)")
    for where in (tmp_path / "absent", tmp_path / "copy" / mf.MANIFEST_NAME):
        with pytest.raises(InputError) as err:
            predict_table(where, X)
        assert "--" not in str(err.value) and "`" not in str(err.value)


# --------------------------------------------------------------------------- no row is dropped

EMPTY_ROWS = [2, 5, 9]


def _ten_rows_three_empty(X, where, extra_id: bool):
    """The first 10 rows of ``X`` with rows 2, 5 and 9 blank in every model column."""
    rows = X.head(10).copy().astype(object)
    rows.loc[EMPTY_ROWS, :] = np.nan
    if extra_id:  # a column the model does not read, filled in every row
        rows.insert(0, "row_id", [f"r{i}" for i in range(10)])
    rows.to_csv(where, index=False)
    return where


@pytest.mark.parametrize("task", ["regression", "classification"])
@pytest.mark.parametrize("flag", [[], ["--joblib"], ["--onnx"]], ids=["skops", "joblib", "onnx"])
@pytest.mark.parametrize("extra_id", [False, True], ids=["blank-rows", "blank-model-columns"])
def test_predict_keeps_every_row_and_marks_the_blank_ones(exports, tmp_path, capsys, task, flag,
                                                          extra_id):
    folder, _, X = exports[task]
    table = _ten_rows_three_empty(X, tmp_path / "ten.csv", extra_id)
    out = tmp_path / "pred.csv"
    assert main(["predict", str(folder), str(table), "--out", str(out), *flag]) == 0
    err = capsys.readouterr().err
    assert "10 row(s) written" in err and "3 of them without a prediction" in err
    got = pd.read_csv(out, keep_default_na=False, dtype=str)
    assert len(got) == 10 and list(got.columns)[-1] == "reason"
    blank = got.index.isin(EMPTY_ROWS)
    assert (got.loc[blank].drop(columns="reason") == "").all().all()
    assert got.loc[blank, "reason"].str.contains("every column the model reads is empty").all()
    assert (got.loc[~blank, "reason"] == "").all() and (got.loc[~blank, "prediction"] != "").all()
    # the other rows get the predictions they get on their own, in their places
    kept_rows = tmp_path / "seven.csv"
    X.head(10).drop(index=EMPTY_ROWS).to_csv(kept_rows, index=False)
    alone = tmp_path / "alone.csv"
    assert main(["predict", str(folder), str(kept_rows), "--out", str(alone), *flag]) == 0
    alone = pd.read_csv(alone, keep_default_na=False, dtype=str)
    assert (alone["reason"] == "").all()
    pd.testing.assert_frame_equal(got.loc[~blank].reset_index(drop=True), alone)


def test_predict_table_marks_blank_rows_of_a_frame(exports):
    folder, _, X = exports["classification"]
    rows = X.head(6).copy().astype(object)
    rows.loc[[0, 4], :] = np.nan
    pipe = joblib.load(folder / mf.JOBLIB_NAME)
    for kind in ("skops", "joblib", "onnx"):
        got = predict_table(folder, rows, kind, warn=None)
        assert len(got) == 6 and got["reason"].notna().tolist() == [True, False, False, False,
                                                                     True, False]
        assert got.loc[[0, 4]].drop(columns="reason").isna().all().all()
        expected = pipe.predict(X.head(6).drop(index=[0, 4]))
        assert (got.loc[[1, 2, 3, 5], "prediction"].astype(str).to_numpy()
                == expected.astype(str)).all(), kind
