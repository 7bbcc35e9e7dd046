"""The trust model of an export folder: what a forged or damaged folder can and cannot do.

References: skops' own loader (:func:`skops.io.load`, :func:`skops.io.get_untrusted_types`)
shows what its defaults would trust; the ONNX model's ``metadata_props`` (ONNX IR
specification, "Metadata") carry the class labels; HMAC-SHA256 is checked against
the test vectors of RFC 4231 (section 4) and against Python's :mod:`hmac` (RFC 2104).
"""

from __future__ import annotations

import hashlib
import json
import shutil
import warnings
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import skops.io as sio
from export_helpers import CLF_TARGET, make_sweep
from sklearn.preprocessing import FunctionTransformer

from workbench.cli import main
from workbench.data.intake import load_table
from workbench.export import model_files as mf
from workbench.export.bundle import export_configuration
from workbench.export.formats import FORMATS
from workbench.export.refit import fit_final_pipeline
from workbench.nets.activations import HEADS, HIDDEN, SKLEARN_HEADS, SKLEARN_HIDDEN
from workbench.sweep.plan import build_plan
from workbench.sweep.runner import load_data


def one_line(err: str) -> str:
    assert err.startswith("workbench: ") and err.count("\n") == 1, err
    assert "Traceback" not in err
    return err


def rehash(folder: Path, name: str) -> None:
    """What a forger does: record the changed file's SHA-256 in the manifest."""
    manifest = json.loads((folder / mf.MANIFEST_NAME).read_text())
    manifest["files"][name]["sha256"] = hashlib.sha256((folder / name).read_bytes()).hexdigest()
    manifest["files"][name]["bytes"] = (folder / name).stat().st_size
    (folder / mf.MANIFEST_NAME).write_text(json.dumps(manifest, indent=2))


# --------------------------------------------------------------------------- skops: the exact contents


def _kinds_table(n: int = 24) -> pd.DataFrame:
    """Every preprocessing kind: numbers, integers, categories (with a gap), booleans
    without gaps (NumPy bool) and with gaps (object), dates."""
    rng = np.random.default_rng(0)
    df = pd.DataFrame({
        "num": rng.normal(size=n).round(3),
        "count": rng.integers(0, 50, n),
        "shade": rng.choice(["pale", "mid", "dark"], n),
        "flag": rng.choice([True, False], n),
        "maybe": pd.Series(rng.choice([True, False], n)).astype(object),
        "when": pd.date_range("2020-01-01", periods=n, freq="36h").strftime("%Y-%m-%d %H:%M"),
    })
    df.loc[3, "shade"] = None
    df.loc[5, "maybe"] = None
    return df


#: target name: (its values from the table's "num", the hidden activations, both engines?);
#: every hidden activation meets every head of each task on both targets marked True
TARGETS = {
    "amount": (lambda s: (s - s.min() + 0.1).round(3), "all", True),  # every regression head
    "label": (lambda s: np.where(s > 0, "x", "y"), "all", True),  # binary: logistic, softmax
    "grade": (lambda s: np.digitize(s, [-0.5, 0.5]), "relu,gelu", False),  # 3 integer classes
    "truth": (lambda s: s > 0, "relu,gelu", False),  # boolean labels
}


@pytest.fixture(scope="module")
def every_skops_file(tmp_path_factory):
    """The skops file of every head x hidden activation x engine x preprocessing kind,
    written by the export's own refit and skops writer (1 layer of 3 units, 2 epochs)."""
    base = tmp_path_factory.mktemp("kinds")
    df = _kinds_table()
    files, seen = [], set()
    for name, (make, hidden, both) in TARGETS.items():
        table = df.assign(**{name: make(df["num"])})
        path = base / f"{name}.csv"
        table.to_csv(path, index=False)
        runs = [("auto", hidden)] + ([("numpy", ",".join(SKLEARN_HIDDEN))] if both else [])
        for engine, hid in runs:
            plan = build_plan(str(path), name, hidden=hid, output="all", layers=["3"],
                              epochs=2, folds=2, repeats=1, engine=engine)
            data, _ = load_data(plan)
            for cfg in plan.configurations():
                pipe = fit_final_pipeline(plan, cfg.to_dict(), data)
                folder = base / f"{name}-{engine}-{cfg.index}"
                folder.mkdir()
                FORMATS["skops"].write(SimpleNamespace(pipeline=pipe), folder)
                files.append((folder / mf.SKOPS_NAME, pipe, data.X))
                seen.add((cfg.engine, plan.task, cfg.hidden, cfg.head))
    return files, seen


def test_the_trusted_contents_are_exactly_what_every_export_holds(every_skops_file):
    files, seen = every_skops_file
    # every hidden activation with every head of its task on the NumPy engine, and every
    # head scikit-learn's MLPs offer on theirs (softmax: on the three-class target)
    for task, head in HEADS:
        for hidden in HIDDEN:
            assert ("numpy", task, hidden, head) in seen, (task, head, hidden)
    for task, head in SKLEARN_HEADS:
        assert any(("sklearn", task, hidden, head) in seen for hidden in SKLEARN_HIDDEN), head
    found = set().union(*(mf.skops_contents(path) for path, _, _ in files))
    assert found == set(mf.SKOPS_CONTENTS), (
        f"exports now hold {sorted(found - mf.SKOPS_CONTENTS)} and no longer hold "
        f"{sorted(mf.SKOPS_CONTENTS - found)}: update workbench.export.model_files.SKOPS_CONTENTS")


def test_every_export_loads_and_predicts_as_the_fitted_pipeline(every_skops_file):
    files, _ = every_skops_file
    for path, pipe, X in files[::9]:  # a spread of heads, engines and targets
        loaded = mf.load_skops(path)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            np.testing.assert_array_equal(loaded.predict(X), pipe.predict(X))


# --------------------------------------------------------------------------- forged skops files


@pytest.fixture(scope="module")
def export(tmp_path_factory):
    base = tmp_path_factory.mktemp("trusted")
    store, sweep_id, table = make_sweep(base, "classification", dtype="float32")
    folder = export_configuration(store, sweep_id, "best", base / "model",
                                  formats="json,skops,joblib,onnx")
    store.close()
    df, _ = load_table(table)
    return folder, table, df.drop(columns=[CLF_TARGET])


def _forge_skops(export, tmp_path, step) -> Path:
    folder = shutil.copytree(export[0], tmp_path / "forged")
    path = folder / mf.SKOPS_NAME
    pipe = sio.load(path, trusted=sio.get_untrusted_types(file=path))
    pipe.steps.insert(0, ("armed", step))
    sio.dump(pipe, path)
    rehash(folder, mf.SKOPS_NAME)
    return folder


def test_a_function_transformer_with_numpy_memmap_is_refused(export, tmp_path, monkeypatch,
                                                             capsys):
    kw = {"mode": "w+", "shape": (64,), "dtype": "uint8"}
    folder = _forge_skops(export, tmp_path, FunctionTransformer(np.memmap, kw_args=kw))
    path = folder / mf.SKOPS_NAME
    # what the forged file carries: skops' defaults trust FunctionTransformer, and
    # numpy.memmap is a NumPy class; trusting what it asks hands over an armed callable
    asked = sio.get_untrusted_types(file=path)
    assert set(asked) - {name for _, name in mf.SKOPS_CONTENTS} == {"numpy.memmap"}
    armed = sio.load(path, trusted=asked).steps[0][1]
    assert armed.func is np.memmap
    armed.func(tmp_path / "proof.bin", **armed.kw_args)
    assert (tmp_path / "proof.bin").stat().st_size == 64  # it writes files when called
    # predict refuses before skops rebuilds anything: one line, exit 2, no file made
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    out = work / "pred.csv"
    before = sorted(p.name for p in folder.iterdir())
    assert main(["predict", str(folder), str(export[1]), "--out", str(out)]) == 2
    err = one_line(capsys.readouterr().err)
    assert "numpy.memmap (TypeNode)" in err and "FunctionTransformer" in err
    assert list(work.iterdir()) == [] and sorted(p.name for p in folder.iterdir()) == before


def test_a_numpy_function_skops_trusts_by_default_is_refused(export, tmp_path, capsys):
    folder = _forge_skops(export, tmp_path, FunctionTransformer(np.log))
    path = folder / mf.SKOPS_NAME
    # skops' defaults trust both FunctionTransformer and numpy.log: it asks only about ours
    ours = {name for _, name in mf.SKOPS_CONTENTS}
    assert set(sio.get_untrusted_types(file=path)) <= ours
    assert main(["predict", str(folder), str(export[1])]) == 2
    err = one_line(capsys.readouterr().err)
    assert "numpy.log (FunctionNode)" in err


@pytest.mark.parametrize("damage", ["truncated", "not-a-zip", "no-schema", "schema-not-json",
                                    "deep-schema"])
def test_a_damaged_skops_file_is_one_line(export, tmp_path, capsys, damage):
    import zipfile

    folder = shutil.copytree(export[0], tmp_path / "damaged")
    path = folder / mf.SKOPS_NAME
    data = path.read_bytes()
    if damage == "truncated":
        path.write_bytes(data[: len(data) // 2])
    elif damage == "not-a-zip":
        path.write_bytes(b"\x00" * 100)
    else:
        members = {}
        with zipfile.ZipFile(path) as zf:
            members = {n: zf.read(n) for n in zf.namelist() if n != "schema.json"}
        with zipfile.ZipFile(path, "w") as zf:
            for n, b in members.items():
                zf.writestr(n, b)
            if damage == "schema-not-json":
                zf.writestr("schema.json", b"{not json")
            elif damage == "deep-schema":
                zf.writestr("schema.json", b"[" * 100000 + b"]" * 100000)
    rehash(folder, mf.SKOPS_NAME)
    assert main(["predict", str(folder), str(export[1])]) == 2
    err = one_line(capsys.readouterr().err)
    assert mf.SKOPS_NAME in err
