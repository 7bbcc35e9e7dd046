"""``workbench export``: the bundle, its schema, reproduce.py, CSV safety, atomic writing.

References: SHA-256 via :mod:`hashlib` (FIPS 180-4); JSON Schema draft 2020-12 via
the ``jsonschema`` library; formula-injection triggers from OWASP's "CSV Injection"
page (=, +, -, @, tab, carriage return); CSV parsing with :mod:`csv` (RFC 4180);
the fitted ColumnTransformer's own ``get_feature_names_out`` (scikit-learn) says
which columns reach the model.
"""

from __future__ import annotations

import csv
import hashlib
import importlib.util
import json
import re
import subprocess
import sys
from pathlib import Path

import joblib
import jsonschema
import numpy as np
import pytest
from export_helpers import FORMULA_COL, ID_COL, REG_TARGET, SCRIPT_COL, make_sweep

from workbench.cli import main
from workbench.errors import InputError
from workbench.export import configuration as conf_doc
from workbench.export.bundle import export_configuration
from workbench.export.configuration import CONFIGURATION_NAME, SCHEMA_NAME
from workbench.export.formats import (
    FORMATS,
    REPRODUCE_SOURCE,
    SCRIPT_NAME,
    ExportFormat,
    format_choices,
    parse_formats,
)
from workbench.export.model_files import JOBLIB_NAME, MANIFEST_NAME
from workbench.export.report import REPORT_NAME
from workbench.export.results_csv import CONFIGURATIONS_CSV, TRIALS_CSV
from workbench.export.safe_csv import neutralise_cell
from workbench.sweep.results import sweep_results


@pytest.fixture(scope="module")
def sweep(tmp_path_factory):
    base = tmp_path_factory.mktemp("export")
    # the user set one column to "ignore" and made the identifier-like ID_COL a feature:
    # the sweep, the export's refit and reproduce.py must all honour both
    store, sweep_id, table = make_sweep(base, "regression", dtype="float64",
                                        roles={"size": "ignore", ID_COL: "feature"},
                                        with_id=True)
    folder = base / "winner"
    export_configuration(store, sweep_id, "best", folder)
    yield store, sweep_id, table, folder, base
    store.close()


def test_every_format_is_written_with_a_manifest(sweep):
    _, _, _, folder, _ = sweep
    expected = {f for fmt in FORMATS.values() for f in fmt.files} | {MANIFEST_NAME}
    assert {p.name for p in folder.iterdir()} == expected
    manifest = json.loads((folder / MANIFEST_NAME).read_text())
    assert set(manifest["files"]) == expected - {MANIFEST_NAME}
    for name, entry in manifest["files"].items():
        data = (folder / name).read_bytes()
        assert entry["sha256"] == hashlib.sha256(data).hexdigest()
        assert entry["bytes"] == len(data)
    for lib in ("numpy", "scikit-learn", "skops", "onnx", "onnxruntime"):
        assert manifest["libraries"][lib]


def test_configuration_validates_against_the_shipped_schema(sweep):
    store, sweep_id, table, folder, _ = sweep
    conf = json.loads((folder / CONFIGURATION_NAME).read_text())
    schema = json.loads((conf_doc.SCHEMA_PATH).read_text())
    jsonschema.Draft202012Validator.check_schema(schema)
    jsonschema.Draft202012Validator(schema).validate(conf)  # raises on any violation
    # the copy next to the configuration is the shipped schema
    assert json.loads((folder / SCHEMA_NAME).read_text()) == schema
    # contents that the issue lists
    assert conf["table"]["sha256"] == hashlib.sha256(table.read_bytes()).hexdigest()
    assert conf["target"]["name"] == REG_TARGET and conf["target"]["kind"] == "signed"
    groups = conf["preprocessing"]["groups"]
    assert SCRIPT_COL in groups["numeric"]["columns"]
    assert FORMULA_COL in groups["categorical"]["columns"]
    assert groups["numeric"]["steps"] == ["SimpleImputer(strategy='median')", "StandardScaler()"]
    assert "when" in groups["datetime"]["columns"]
    assert all("size" not in g["columns"] for g in groups.values())
    assert conf["preprocessing"]["ignored"] == [
        {"column": "size", "type": "numeric", "reason": "ignored by the user"}]
    assert conf["model"]["output_head"] == "identity" and conf["model"]["loss"] == "squared_error"
    shapes = conf["model"]["layer_shapes"]
    assert shapes[-1][1] == 1 and all(a[1] == b[0] for a, b in zip(shapes, shapes[1:]))
    res = sweep_results(store, sweep_id)
    best = res["configurations"][0]
    assert conf["scores"]["mean"] == pytest.approx(best["mean"], abs=1e-12)
    assert np.mean([s["test_score"] for s in conf["scores"]["fold_scores"]]) == \
        pytest.approx(best["mean"], abs=1e-12)
    assert len(conf["evaluation"]["splits"]) == 6
    assert {r["index"] for r in conf["scores"]["tie_group"]} == \
        {c["index"] for c in res["configurations"] if c["tied_with_best"]}


def test_schema_rejects_a_broken_configuration(sweep):
    folder = sweep[3]
    conf = json.loads((folder / CONFIGURATION_NAME).read_text())
    bad = json.loads(json.dumps(conf))
    bad["model"]["output_head"] = "cubic"
    with pytest.raises(InputError, match="model/output_head"):
        conf_doc.validate_configuration(bad)
    bad = json.loads(json.dumps(conf))
    del bad["scores"]["fold_scores"]
    with pytest.raises(InputError, match="fold_scores"):
        conf_doc.validate_configuration(bad)
    bad = json.loads(json.dumps(conf))
    bad["table"]["sha256"] = "not-a-hash"
    with pytest.raises(InputError, match="sha256"):
        conf_doc.validate_configuration(bad)


def test_reproduce_script_prints_the_stored_fold_scores(sweep):
    store, sweep_id, _, folder, _ = sweep
    proc = subprocess.run([sys.executable, str(folder / SCRIPT_NAME)], capture_output=True,
                          text=True, timeout=120, cwd=str(folder.parent))
    assert proc.returncode == 0, proc.stdout + proc.stderr
    printed = {(int(m[1]), int(m[2])): float(m[3]) for m in re.finditer(
        r"^repeat (\d+) fold (\d+): (\S+)", proc.stdout, re.M)}
    best = sweep_results(store, sweep_id)["configurations"][0]
    stored = {(t["repeat"], t["fold"]): t["test_score"] for t in best["trials"]}
    assert set(printed) == set(stored) and len(stored) == 6
    for key, value in stored.items():
        assert abs(printed[key] - value) <= 1e-9, key
    # float64, same seeds, same rows, same code: the scores are the stored ones exactly
    differences = [float(d) for d in re.findall(r"difference (\S+)$", proc.stdout, re.M)]
    assert differences == [0.0] * 6


def test_reproduce_script_is_the_shipped_module(sweep):
    folder = sweep[3]
    assert (folder / SCRIPT_NAME).read_bytes() == REPRODUCE_SOURCE.read_bytes()
    assert REPRODUCE_SOURCE.parent == Path(conf_doc.__file__).parent  # inside the package


def _load_copied_script(folder):
    spec = importlib.util.spec_from_file_location("copied_reproduce", folder / SCRIPT_NAME)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _model_inputs(pipe) -> set[str]:
    """Columns the fitted preprocessing passes on (scikit-learn's ``group__column`` names)."""
    return {name.split("__", 1)[1] for name in pipe.named_steps["prep"].get_feature_names_out()}


def test_column_made_a_feature_reaches_the_refitted_pipeline(sweep):
    folder = sweep[3]
    pipe = joblib.load(folder / JOBLIB_NAME)
    inputs = _model_inputs(pipe)
    assert ID_COL in inputs  # typed as its base type (integer), not dropped as an id
    assert "size" not in inputs  # and the column the user ignored stays out
    conf = json.loads((folder / CONFIGURATION_NAME).read_text())
    assert ID_COL in conf["preprocessing"]["groups"]["numeric"]["columns"]
    assert conf["model"]["layer_shapes"][0][0] == len(pipe.named_steps["prep"]
                                                      .get_feature_names_out())


@pytest.mark.filterwarnings("ignore:Stochastic Optimizer")  # 12 epochs: a smoke fit
def test_column_made_a_feature_reaches_the_reproduce_pipeline(sweep):
    _, _, table, folder, _ = sweep
    script = _load_copied_script(folder)
    conf = json.loads((folder / CONFIGURATION_NAME).read_text())
    assert conf["plan"]["roles"] == {"size": "ignore", ID_COL: "feature"}
    profile, target, X, y = script.load_inputs(conf, table)
    pipe = script.fold_pipeline(conf, profile, target, seed=0).fit(X, y)
    assert _model_inputs(pipe) == _model_inputs(joblib.load(folder / JOBLIB_NAME))
    assert ID_COL in _model_inputs(pipe) and "size" not in _model_inputs(pipe)


@pytest.mark.parametrize("engine", ["numpy", "sklearn"])
@pytest.mark.parametrize("task, head", [("regression", "identity"),
                                        ("classification", "logistic")])
def test_reproduce_rebuilds_the_estimator_the_sweep_used(engine, task, head):
    from workbench.sweep.trials import estimator_for

    script = _load_copied_script(REPRODUCE_SOURCE.parent)
    plan = {"task": task, "epochs": 7, "dtype": "float64", "batch_size": 16}
    chosen = {"hidden": "tanh", "head": head, "layers": [4, 3], "learning_rate": 0.02,
              "alpha": 1e-3, "engine": engine}
    name, params = conf_doc.estimator_description(plan, chosen)
    rebuilt = script.make_estimator({"estimator": name, "hyperparameters": params}, seed=11)
    used = estimator_for(plan, chosen, random_state=11)
    assert type(rebuilt) is type(used)
    assert rebuilt.get_params() == used.get_params()


def test_reproduce_script_reports_a_mismatch(sweep, tmp_path):
    folder = sweep[3]
    conf = json.loads((folder / CONFIGURATION_NAME).read_text())
    conf["scores"]["fold_scores"][0]["test_score"] += 1e-6  # far above the 1e-9 tolerance
    edited = tmp_path / "configuration.json"
    edited.write_text(json.dumps(conf))
    proc = subprocess.run([sys.executable, str(folder / SCRIPT_NAME), "--config",
                           str(edited)], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 1 and "MISMATCH" in proc.stdout


def test_reproduce_script_refuses_a_changed_table(sweep, tmp_path):
    _, _, table, folder, _ = sweep
    changed = tmp_path / "changed.csv"
    changed.write_bytes(table.read_bytes() + b"\n")
    proc = subprocess.run([sys.executable, str(folder / SCRIPT_NAME), "--table",
                           str(changed)], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 2 and "SHA-256" in proc.stderr


@pytest.mark.parametrize("trigger", ["=", "+", "-", "@", "\t", "\r"])
def test_neutralise_cell_quotes_every_owasp_trigger(trigger):
    assert neutralise_cell(trigger + "cmd|' /C calc'!A0") == "'" + trigger + "cmd|' /C calc'!A0"
    assert neutralise_cell("plain " + trigger) == "plain " + trigger
    # numbers are written as numbers, never quoted
    assert neutralise_cell(-0.5) == "-0.5" and neutralise_cell(3) == "3"


def _cells(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return [cell for row in csv.reader(fh) for cell in row]


def test_csv_has_no_live_formula(sweep):
    folder = sweep[3]
    for name in (CONFIGURATIONS_CSV, TRIALS_CSV):
        for cell in _cells(folder / name):
            if cell[:1] in ("=", "+", "@", "\t", "\r"):
                pytest.fail(f"live formula cell {cell!r} in {name}")
            if cell.startswith("-"):  # only numbers may start with a minus sign
                float(cell)
    cells = _cells(folder / CONFIGURATIONS_CSV)
    assert "'" + REG_TARGET in cells  # the hostile target name is there, neutralised
    with open(folder / CONFIGURATIONS_CSV, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert sum(r["exported"] == "true" for r in rows) == 1
    assert [int(r["rank"]) for r in rows] == list(range(1, len(rows) + 1))


def test_formats_registry_for_the_dialog():
    keys = [k for k, _ in format_choices()]
    assert keys == ["json", "skops", "joblib", "onnx", "script", "csv", "report"]
    assert all(label for _, label in format_choices())
    assert parse_formats("script") == ["json", "script"]  # the script reads the JSON
    assert parse_formats(None) == keys
    with pytest.raises(InputError, match="pdf"):
        parse_formats("json,pdf")


def test_partial_export_and_rank_choice(sweep, tmp_path):
    store, sweep_id, *_ = sweep
    out = export_configuration(store, sweep_id, 2, tmp_path / "second", formats="csv,json")
    names = {p.name for p in out.iterdir()}
    assert names == {CONFIGURATIONS_CSV, TRIALS_CSV, CONFIGURATION_NAME,
                     SCHEMA_NAME, MANIFEST_NAME}
    conf = json.loads((out / CONFIGURATION_NAME).read_text())
    assert conf["scores"]["rank"] == 2
    with pytest.raises(InputError, match="rank from 1 to"):
        export_configuration(store, sweep_id, 9, tmp_path / "nine", formats="json")
    assert not (tmp_path / "nine").exists()


def test_existing_export_is_replaced_whole_or_not_at_all(sweep, tmp_path, monkeypatch):
    store, sweep_id, *_ = sweep
    folder = tmp_path / "exp"
    export_configuration(store, sweep_id, "best", folder, formats="json,csv")
    before = {p.name: p.read_bytes() for p in folder.iterdir()}

    def broken(ctx, dest):
        (dest / REPORT_NAME).write_text("half a report")
        raise RuntimeError("disk trouble")

    fmt = FORMATS["report"]
    monkeypatch.setitem(FORMATS, "report", ExportFormat(
        fmt.key, fmt.label, fmt.description, fmt.files, fmt.needs_model, broken))
    with pytest.raises(RuntimeError):
        export_configuration(store, sweep_id, "best", folder, formats="json,csv,report")
    after = {p.name: p.read_bytes() for p in folder.iterdir()}
    assert after == before  # the old export, untouched
    assert [p.name for p in tmp_path.iterdir()] == ["exp"]  # no temporary folder left
    monkeypatch.undo()
    export_configuration(store, sweep_id, 2, folder, formats="json")
    assert {p.name for p in folder.iterdir()} == {CONFIGURATION_NAME, SCHEMA_NAME,
                                                  MANIFEST_NAME}


def test_a_folder_that_is_not_an_export_is_refused(sweep, tmp_path):
    store, sweep_id, *_ = sweep
    mine = tmp_path / "my documents"
    mine.mkdir()
    (mine / "thesis.txt").write_text("precious")
    with pytest.raises(InputError, match="not a workbench export"):
        export_configuration(store, sweep_id, "best", mine, formats="json")
    assert (mine / "thesis.txt").read_text() == "precious"
    assert [p.name for p in mine.iterdir()] == ["thesis.txt"]


def test_changed_table_is_refused(tmp_path):
    store, sweep_id, table = make_sweep(tmp_path, "classification")
    table.write_text(table.read_text() + table.read_text().splitlines()[1] + "\n")
    with pytest.raises(InputError, match="changed since sweep"):
        export_configuration(store, sweep_id, "best", tmp_path / "out", formats="json")
    store.close()


def test_core_messages_name_settings_not_flags(sweep, tmp_path):
    """The core names the setting (``workbench.errors.SETTINGS``); only the front ends
    know how their users set it."""
    store, sweep_id, *_ = sweep
    (tmp_path / "file").write_text("x")
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("mine")
    cases = [
        (dict(formats="json,pdf"), "formats"),
        (dict(rank_or_best="first"), "config"),
        (dict(rank_or_best=99), "config"),
        (dict(folder=None), "folder"),
        (dict(folder=tmp_path / "file"), "folder"),
        (dict(folder=tmp_path / "mine"), "folder"),
        (dict(table=tmp_path / "nowhere.csv"), "table"),
    ]
    for change, setting in cases:
        kwargs = dict(rank_or_best="best", folder=tmp_path / "out", formats="json") | change
        with pytest.raises(InputError) as err:
            export_configuration(store, sweep_id, **kwargs)
        assert err.value.setting == setting, change
        assert "--" not in str(err.value), str(err.value)


def test_cli_adds_the_flag_of_the_setting(sweep, tmp_path, capsys):
    store, sweep_id, *_ = sweep
    db = str(store.path)
    for args, flag in [(["--formats", "pdf"], "--formats"), (["--config", "first"], "--config"),
                       (["--table", str(tmp_path / "nowhere.csv")], "--table")]:
        assert main(["export", sweep_id, "--to", str(tmp_path / "x"), "--store", db,
                     "--quiet", *args]) == 2
        err = capsys.readouterr().err
        assert err.startswith("workbench: ") and err.count("\n") == 1, err
        assert err.rstrip().endswith(f"(set with {flag})"), err


def test_cli_exit_status(sweep, tmp_path, capsys):
    store, sweep_id, table, *_ = sweep
    db = str(store.path)
    assert main(["export", sweep_id, "--to", str(tmp_path / "a"), "--formats", "json",
                 "--store", db, "--quiet"]) == 0
    assert capsys.readouterr().out.strip() == str(tmp_path / "a")
    assert main(["export", "no-such-sweep", "--to", str(tmp_path / "b"), "--store", db]) == 2
    assert main(["export", sweep_id, "--config", "first", "--to", str(tmp_path / "c"),
                 "--store", db]) == 2
    assert main(["export", sweep_id, "--formats", "pdf", "--to", str(tmp_path / "d"),
                 "--store", db]) == 2
    (tmp_path / "file").write_text("x")
    assert main(["export", sweep_id, "--to", str(tmp_path / "file"), "--store", db]) == 2
    assert main(["export", sweep_id, "--to", str(tmp_path / "file" / "sub"), "--store", db]) == 2
    err = capsys.readouterr().err
    assert err.count("workbench: ") >= 4 and "Traceback" not in err
    # the table moved: --table names its new place, and its SHA-256 is checked
    moved = tmp_path / "moved.csv"
    moved.write_bytes(table.read_bytes())
    table.rename(tmp_path / "hidden.csv")
    try:
        assert main(["export", sweep_id, "--to", str(tmp_path / "e"), "--store", db,
                     "--formats", "json"]) == 2
        assert "--table" in capsys.readouterr().err
        assert main(["export", sweep_id, "--to", str(tmp_path / "e"), "--store", db,
                     "--formats", "json", "--table", str(moved), "--quiet"]) == 0
        conf = json.loads((tmp_path / "e" / CONFIGURATION_NAME).read_text())
        assert conf["table"]["path"] == str(moved)
    finally:
        (tmp_path / "hidden.csv").rename(table)
