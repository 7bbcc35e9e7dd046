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
    # name: (target, hidden activations, the heads scikit-learn's MLP also runs or None)
    "amount": (lambda s: (s - s.min() + 0.1).round(3), "all", "identity,exp"),  # every head
    "label": (lambda s: np.where(s > 0, "x", "y"), "all", "logistic"),  # binary: +softmax
    "grade": (lambda s: np.digitize(s, [-0.5, 0.5]), "relu,gelu", "softmax"),  # 3 classes
    "truth": (lambda s: s > 0, "relu,gelu", None),  # boolean labels
}


@pytest.fixture(scope="module")
def every_skops_file(tmp_path_factory):
    """The skops file of every head x hidden activation x engine x preprocessing kind,
    written by the export's own refit and skops writer (1 layer of 3 units, 2 epochs)."""
    base = tmp_path_factory.mktemp("kinds")
    df = _kinds_table()
    files, seen = [], set()
    for name, (make, hidden, sklearn_heads) in TARGETS.items():
        table = df.assign(**{name: make(df["num"])})
        path = base / f"{name}.csv"
        table.to_csv(path, index=False)
        # the default engine (NumPy) for every head, and scikit-learn's MLP where it can
        runs = [("auto", hidden, "all")] + (
            [("sklearn", ",".join(SKLEARN_HIDDEN), sklearn_heads)] if sklearn_heads else [])
        for engine, hid, heads in runs:
            plan = build_plan(str(path), name, hidden=hid, output=heads, layers=["3"],
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


# --------------------------------------------------------------------------- ONNX: labels and damage


def test_onnx_labels_come_from_the_model_not_the_manifest(export, tmp_path, capsys):
    import joblib
    import onnx

    folder, table, X = export
    pipe = joblib.load(folder / mf.JOBLIB_NAME)
    model = onnx.load(str(folder / mf.ONNX_NAME))
    meta = {p.key: p.value for p in model.metadata_props}
    assert json.loads(meta["workbench.classes"]) == [str(c) for c in pipe.classes_]
    out = tmp_path / "honest.csv"
    assert main(["predict", str(folder), str(table), "--onnx", "--out", str(out)]) == 0
    # a manifest claiming one class for this two-class model changes nothing
    forged = shutil.copytree(folder, tmp_path / "forged")
    manifest = json.loads((forged / mf.MANIFEST_NAME).read_text())
    manifest["classes"] = ["a"]
    (forged / mf.MANIFEST_NAME).write_text(json.dumps(manifest))
    out2 = tmp_path / "forged.csv"
    assert main(["predict", str(forged), str(table), "--onnx", "--out", str(out2)]) == 0
    assert out2.read_bytes() == out.read_bytes()
    header = out.read_text().splitlines()[0].split(",")
    assert header == ["prediction"] + [f"probability_{c}" for c in pipe.classes_] + ["reason"]


def _rewrite_onnx(folder: Path, change) -> None:
    import onnx

    model = onnx.load(str(folder / mf.ONNX_NAME))
    change(model)
    onnx.save(model, str(folder / mf.ONNX_NAME))
    rehash(folder, mf.ONNX_NAME)


def _set_meta(key, value):
    def change(model):
        for p in model.metadata_props:
            if p.key == key:
                p.value = value
    return change


def _drop_meta(key):
    def change(model):
        keep = [(p.key, p.value) for p in model.metadata_props if p.key != key]
        del model.metadata_props[:]
        for k, v in keep:
            model.metadata_props.add(key=k, value=v)
    return change


def _drop_first_node(model):
    del model.graph.node[0]


def _external_tensor(model):
    import onnx

    t = model.graph.initializer[0]
    t.data_location = onnx.TensorProto.EXTERNAL
    t.external_data.add(key="location", value="../../secret.bin")


def _truncate(folder: Path) -> None:
    data = (folder / mf.ONNX_NAME).read_bytes()
    (folder / mf.ONNX_NAME).write_bytes(data[: len(data) // 3])
    rehash(folder, mf.ONNX_NAME)


def _garbage(folder: Path) -> None:
    (folder / mf.ONNX_NAME).write_bytes(bytes(range(256)) * 8)
    rehash(folder, mf.ONNX_NAME)


ONNX_DAMAGE = {
    "truncated": _truncate,
    "garbage": _garbage,
    "graph-broken": lambda f: _rewrite_onnx(f, _drop_first_node),
    "external-data": lambda f: _rewrite_onnx(f, _external_tensor),
    "one-class-listed": lambda f: _rewrite_onnx(f, _set_meta("workbench.classes", '["a"]')),
    "classes-not-json": lambda f: _rewrite_onnx(f, _set_meta("workbench.classes", "[a")),
    "classes-missing": lambda f: _rewrite_onnx(f, _drop_meta("workbench.classes")),
    "columns-not-json": lambda f: _rewrite_onnx(f, _set_meta("workbench.columns", "{")),
    "columns-wrong": lambda f: _rewrite_onnx(f, _set_meta("workbench.columns", '[{"x": 1}]')),
}


@pytest.mark.parametrize("damage", list(ONNX_DAMAGE))
def test_a_damaged_onnx_file_is_one_line(export, tmp_path, capsys, damage):
    folder = shutil.copytree(export[0], tmp_path / "damaged")
    ONNX_DAMAGE[damage](folder)
    out = tmp_path / "pred.csv"
    assert main(["predict", str(folder), str(export[1]), "--onnx", "--out", str(out)]) == 2
    err = one_line(capsys.readouterr().err)
    assert "ONNX" in err or mf.ONNX_NAME in err
    if damage == "external-data":  # refused by the check, before onnxruntime sees it
        assert "outside the file" in err
    assert not out.exists()


MANIFEST_DAMAGE = {
    "not-json": b'{"format": "activation-workbench-export", ',
    "not-utf8": b"\xff\xfe\x00garbage",
    "deep": b"[" * 100000 + b"]" * 100000,
    "digest-a-number": None,  # filled below from the real manifest
    "files-a-list": None,
    "no-format": None,
}


@pytest.mark.parametrize("flag", [[], ["--joblib"], ["--onnx"]], ids=["skops", "joblib", "onnx"])
@pytest.mark.parametrize("damage", list(MANIFEST_DAMAGE))
def test_a_damaged_manifest_is_one_line(export, tmp_path, capsys, damage, flag):
    folder = shutil.copytree(export[0], tmp_path / "damaged")
    path = folder / mf.MANIFEST_NAME
    manifest = json.loads(path.read_text())
    if damage == "digest-a-number":
        manifest["files"][mf.SKOPS_NAME]["sha256"] = 5
        manifest["files"][mf.JOBLIB_NAME]["sha256"] = 5
        manifest["files"][mf.ONNX_NAME]["sha256"] = 5
    elif damage == "files-a-list":
        manifest["files"] = list(manifest["files"])
    elif damage == "no-format":
        del manifest["format"]
    data = MANIFEST_DAMAGE[damage]
    path.write_bytes(data if data is not None else json.dumps(manifest).encode())
    assert main(["predict", str(folder), str(export[1]), *flag]) == 2
    err = one_line(capsys.readouterr().err)
    assert mf.MANIFEST_NAME in err


# --------------------------------------------------------------------------- the optional signature

#: RFC 4231, section 4: test cases 1, 2, 3, 4, 6 and 7 (key, data, HMAC-SHA-256)
RFC4231 = [
    (b"\x0b" * 20, b"Hi There",
     "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"),
    (b"Jefe", b"what do ya want for nothing?",
     "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"),
    (b"\xaa" * 20, b"\xdd" * 50,
     "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe"),
    (bytes(range(1, 26)), b"\xcd" * 50,
     "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b"),
    (b"\xaa" * 131, b"Test Using Larger Than Block-Size Key - Hash Key First",
     "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54"),
    (b"\xaa" * 131, b"This is a test using a larger than block-size key and a larger than "
     b"block-size data. The key needs to be hashed before being used by the HMAC algorithm.",
     "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2"),
]


@pytest.mark.parametrize(("key", "data", "expected"), RFC4231)
def test_manifest_hmac_matches_rfc4231(key, data, expected):
    from workbench.export.signature import manifest_hmac

    assert manifest_hmac(key, data) == expected


@pytest.fixture(scope="module")
def signed(tmp_path_factory):
    """A regression sweep exported with a key; the key file lives outside the folder."""
    base = tmp_path_factory.mktemp("signed")
    store, sweep_id, table = make_sweep(base, "regression", dtype="float32")
    key = base / "keys" / "export.key"
    key.parent.mkdir()
    key.write_text("3f" * 32 + "\n")
    folder = base / "model"
    assert main(["export", sweep_id, "--to", str(folder), "--store", str(store.path), "--quiet",
                 "--formats", "json,skops,joblib,onnx", "--sign-key-file", str(key)]) == 0
    store.close()
    return folder, table, key


def test_a_signed_folder_verifies_with_its_key(signed, tmp_path, capsys):
    import hmac as std_hmac

    from workbench.export.signature import SIGNATURE_NAME

    folder, table, key = signed
    doc = json.loads((folder / SIGNATURE_NAME).read_text())
    expected = std_hmac.new(key.read_bytes(), (folder / mf.MANIFEST_NAME).read_bytes(),
                            hashlib.sha256).hexdigest()
    assert doc == {"algorithm": "HMAC-SHA256", "signs": mf.MANIFEST_NAME, "hmac": expected}
    capsys.readouterr()
    for flag in ([], ["--joblib"], ["--onnx"]):
        out = tmp_path / f"pred{len(flag)}{flag[:1]}.csv"
        assert main(["predict", str(folder), str(table), "--out", str(out),
                     "--verify-key-file", str(key), *flag]) == 0
        assert len(out.read_text().splitlines()) > 10
    # without the key, predict says the folder is signed but unchecked
    capsys.readouterr()
    assert main(["predict", str(folder), str(table), "--out", str(tmp_path / "p.csv")]) == 0
    assert "signed" in capsys.readouterr().err


def _negate_first_weight(folder: Path) -> None:
    """The forgery of the hardening issue: a weight of model.onnx negated, manifest re-hashed."""
    import onnx
    import onnx.numpy_helper as nh

    def change(model):
        for init in model.graph.initializer:
            arr = nh.to_array(init)
            if arr.ndim == 2 and arr.size > 1 and np.issubdtype(arr.dtype, np.floating):
                init.CopyFrom(nh.from_array(-arr, init.name))
                return
        raise AssertionError("no weight matrix found")

    model = onnx.load(str(folder / mf.ONNX_NAME))
    change(model)
    onnx.save(model, str(folder / mf.ONNX_NAME))
    rehash(folder, mf.ONNX_NAME)


def test_a_forged_signed_folder_passes_the_checksum_but_not_the_signature(signed, tmp_path,
                                                                          capsys):
    folder, table, key = signed
    forged = shutil.copytree(folder, tmp_path / "forged")
    _negate_first_weight(forged)
    honest, changed = tmp_path / "honest.csv", tmp_path / "changed.csv"
    assert main(["predict", str(folder), str(table), "--onnx", "--out", str(honest)]) == 0
    # the checksum alone cannot tell: exit 0 and different predictions
    assert main(["predict", str(forged), str(table), "--onnx", "--out", str(changed)]) == 0
    assert changed.read_bytes() != honest.read_bytes()
    capsys.readouterr()
    out = tmp_path / "refused.csv"
    for flag in ([], ["--joblib"], ["--onnx"]):
        assert main(["predict", str(forged), str(table), "--out", str(out),
                     "--verify-key-file", str(key), *flag]) == 2
        err = one_line(capsys.readouterr().err)
        assert "does not match the key" in err
        assert not out.exists()
    # the core checks too, for callers other than the command line
    from workbench.errors import InputError
    from workbench.export.predict import predict_table

    X = load_table(table)[0]
    for kind in ("skops", "joblib", "onnx"):
        with pytest.raises(InputError, match="does not match the key"):
            predict_table(forged, X, kind, warn=None, key=key.read_bytes())
        predict_table(folder, X, kind, warn=None, key=key.read_bytes())  # the honest one


@pytest.mark.parametrize("case", ["other-key", "no-signature", "short-key", "key-inside",
                                  "missing-key", "signature-damaged"])
def test_verification_failures_are_one_line(signed, tmp_path, capsys, case):
    from workbench.export.signature import SIGNATURE_NAME

    folder, table, key = signed
    copy = shutil.copytree(folder, tmp_path / "copy")
    use = key
    if case == "other-key":
        use = tmp_path / "other.key"
        use.write_text("40" * 32 + "\n")
    elif case == "no-signature":
        (copy / SIGNATURE_NAME).unlink()
    elif case == "short-key":
        use = tmp_path / "short.key"
        use.write_text("secret")
    elif case == "key-inside":
        use = copy / "export.key"
        shutil.copyfile(key, use)
    elif case == "missing-key":
        use = tmp_path / "nowhere.key"
    elif case == "signature-damaged":
        (copy / SIGNATURE_NAME).write_text("{")
    assert main(["predict", str(copy), str(table), "--verify-key-file", str(use)]) == 2
    err = one_line(capsys.readouterr().err)
    if case in ("short-key", "key-inside", "missing-key"):
        assert err.rstrip().endswith("(set with --verify-key-file)")


def test_export_refuses_a_short_or_inside_key(signed, tmp_path, capsys):
    from workbench.sweep.store import Store

    folder, table, key = signed
    store_path = folder.parent / "store.sqlite"
    with Store(store_path) as store:
        sweep_id = store.list_sweeps()[0]["id"]
    short = tmp_path / "short.key"
    short.write_text("x" * 31)
    inside = tmp_path / "out" / "export.key"
    inside.parent.mkdir()
    inside.write_text("3f" * 32)
    for bad in (short, inside):
        assert main(["export", sweep_id, "--to", str(tmp_path / "out"), "--store",
                     str(store_path), "--sign-key-file", str(bad), "--quiet"]) == 2
        err = one_line(capsys.readouterr().err)
        assert err.rstrip().endswith("(set with --sign-key-file)")
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == ["export.key"]


def test_the_readme_states_the_trust_model():
    """The README's trust model names what this module tests: the checksum's limit, each
    loader, and the signature's options as the commands spell them."""
    text = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")
    section = text[text.index("### Trust model"):]
    section = section[:section.index("\n## ")]
    for needed in ("forged folder", "*skops*", "*joblib*", "*ONNX*", "SKOPS_CONTENTS",
                   "--sign-key-file", "--verify-key-file", "HMAC-SHA256",
                   "only a folder from a source you trust is safe"):
        assert needed in section, needed
    import workbench.commands.export as export_command
    import workbench.commands.predict as predict_command

    assert "--sign-key-file" in Path(export_command.__file__).read_text()
    assert "--verify-key-file" in Path(predict_command.__file__).read_text()


def test_external_tensors_are_found_in_nested_graphs(tmp_path):
    """A tensor pointing outside the file is refused wherever it sits: an initializer of
    the graph or of a subgraph (here an ``If`` branch), or a Constant's value."""
    import onnx
    from onnx import TensorProto, helper

    from workbench.errors import InputError
    from workbench.export.onnx_graph import _all_tensors, load_onnx

    def outside(name):
        t = helper.make_tensor(name, TensorProto.FLOAT, [1], [1.0])
        t.ClearField("float_data")
        t.data_location = TensorProto.EXTERNAL
        t.external_data.add(key="location", value="../../secret.bin")
        return t

    branch = helper.make_graph([helper.make_node("Identity", ["w"], ["y"])], "branch", [],
                               [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1])],
                               initializer=[outside("w")])
    node = helper.make_node("If", ["c"], ["y"], then_branch=branch, else_branch=branch)
    graph = helper.make_graph([node], "g", [helper.make_tensor_value_info("c", TensorProto.BOOL,
                                                                          [])],
                              [helper.make_tensor_value_info("y", TensorProto.FLOAT, [1])])
    model = helper.make_model(graph)
    assert len([t for t in _all_tensors(model.graph)
                if t.data_location == TensorProto.EXTERNAL]) == 2
    path = tmp_path / "nested.onnx"
    onnx.save(model, str(path))
    with pytest.raises(InputError, match="outside the file"):
        load_onnx(path)
