"""The command line as an analyst meets it: one-line messages, exit codes, readable output.

Regression tests for problems found by using every sub-command by hand. Fast: tiny
tables, a store in tmp_path, `workbench.cli.main(argv)` in-process with capsys.
"""

from __future__ import annotations

import json
import sys

import numpy as np
import pandas as pd
import pytest

from workbench.cli import main
from workbench.commands.show import format_results


def _err_line(capsys) -> str:
    err = capsys.readouterr().err
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    return lines[0]


@pytest.mark.parametrize("argv, words", [
    (["sweep", "t.csv", "--target", "y", "--folds", "abc"], "--folds"),
    (["sweep", "t.csv", "--engine", "gpu"], "--engine"),
    (["export", "SOME_ID"], "--to"),
    (["predict", "a", "b", "--joblib", "--onnx"], "--onnx"),
    (["no-such-command"], "no-such-command"),
])
def test_usage_errors_are_one_line_with_exit_2(capsys, argv, words):
    with pytest.raises(SystemExit) as exc:
        main(argv)
    assert exc.value.code == 2
    line = _err_line(capsys)
    assert words in line and "--help" in line
    assert not line.startswith("usage:")


@pytest.fixture(scope="module")
def swept(tmp_path_factory):
    """One tiny finished sweep (8 configurations, lr varying) in its own store."""
    folder = tmp_path_factory.mktemp("cli_user")
    rng = np.random.default_rng(3)
    n = 80
    x = rng.normal(size=n)
    df = pd.DataFrame({"reading": x.round(3), "site": rng.choice(["north", "south"], n),
                       "passed": np.where(x + 0.3 * rng.normal(size=n) > 0, "yes", "no")})
    table = folder / "t.csv"
    df.to_csv(table, index=False)
    store = folder / "s.sqlite"
    out = folder / "r.json"
    rc = main(["sweep", str(table), "--target", "passed", "--hidden", "relu,leaky_relu",
               "--layers", "8", "--layers", "8,4", "--learning-rate", "0.001,0.01",
               "--folds", "2", "--repeats", "1", "--epochs", "3", "--jobs", "1",
               "--store", str(store), "--json", str(out), "--quiet"])
    assert rc == 0
    res = json.loads(out.read_text())
    return {"folder": folder, "table": table, "store": store, "res": res}


def test_ranked_table_fits_100_columns(swept):
    # leaky_relu is the longest hidden name and the learning rate varies: the widest usual table
    text = format_results(swept["res"])
    lines = text.splitlines()
    assert max(len(line) for line in lines) <= 100, text
    assert all(line == line.rstrip() for line in lines)
    header = next(line for line in lines if line.startswith("rank"))
    assert "lr" in header.split() and "alpha" not in header.split()  # shared alpha: named once
    assert "every configuration: alpha 0.0001" in text
    assert "status" not in header  # every configuration is done
    assert any(line.startswith("1 =") for line in lines)  # the best is in its own tie group


def test_tiny_p_values_read_below_one_in_a_thousand(swept):
    res = json.loads(json.dumps(swept["res"]))
    res["configurations"][1]["p_value"] = 1e-7
    assert "<0.001" in format_results(res) and " 0.000 " not in format_results(res)


def test_history_table_is_compact(swept, capsys):
    assert main(["history", "--store", str(swept["store"])]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split()[:4] == ["sweep", "state", "created", "(UTC)"]
    created = swept["res"]["created"]  # ISO-8601 UTC, e.g. 2026-12-01T23:12:47+00:00
    assert created[:10] + " " + created[11:16] in lines[1] and "+00:00" not in lines[1]
    assert all(line == line.rstrip() for line in lines)
    fixed = lines[1].replace(str(swept["table"]), "")  # all but the table's path
    assert len(fixed) <= 80


def test_every_option_with_a_default_says_it_in_its_help():
    import argparse

    from workbench.cli import build_parser

    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    silent = [(name, a.option_strings) for name, p in sub.choices.items() for a in p._actions
              if a.default not in (None, False, argparse.SUPPRESS)
              and "default" not in (a.help or "")]
    assert silent == []


@pytest.mark.parametrize("backend, workers, words", [
    ("processes", 2, "on 2 worker processes"), ("processes", 1, "on 1 worker process"),
    ("dask", 4, "on 4 dask workers"), ("inline", 1, "in this process")])
def test_progress_says_where_trials_run_in_words(backend, workers, words):
    import io

    from workbench.commands.sweep import Progress

    out = io.StringIO()
    Progress(stream=out)({"type": "sweep_started", "sweep_id": "S", "n_todo": 4, "n_trials": 4,
                          "n_configurations": 2, "resumed": False, "backend": backend,
                          "workers": workers})
    line = out.getvalue().strip()
    assert line.endswith(words) and "(s)" not in line.split(")")[-1]


@pytest.fixture(scope="module")
def onnx_only(swept):
    folder = swept["folder"] / "onnx_only"
    assert main(["export", swept["res"]["sweep_id"], "--to", str(folder), "--formats", "onnx",
                 "--store", str(swept["store"]), "--quiet"]) == 0
    return folder


def test_predict_names_the_model_file_the_export_does_have(swept, onnx_only, capsys):
    capsys.readouterr()
    assert main(["predict", str(onnx_only), str(swept["table"])]) == 2
    line = _err_line(capsys)
    assert "model.skops is missing" in line and "--onnx" in line
    assert main(["predict", str(onnx_only), str(swept["table"]), "--onnx"]) == 0


def test_predict_on_a_folder_that_does_not_exist(swept, capsys):
    missing = swept["folder"] / "no_such_export"
    assert main(["predict", str(missing), str(swept["table"])]) == 2
    assert "does not exist" in _err_line(capsys)


def test_reading_commands_never_create_a_store(tmp_path, capsys):
    store = tmp_path / "new" / "s.sqlite"
    assert main(["history", "--store", str(store)]) == 0
    assert "no sweeps stored" in capsys.readouterr().out
    assert main(["history", "--store", str(store), "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == []
    for argv in (["show", "SOME_ID"], ["export", "SOME_ID", "--to", str(tmp_path / "e")]):
        assert main([*argv, "--store", str(store)]) == 2
        assert "no store at" in _err_line(capsys)
    assert not (tmp_path / "new").exists()


def test_store_under_a_file_says_which_path_is_a_file(tmp_path, capsys):
    blocker = tmp_path / "notes.txt"
    blocker.write_text("not a folder\n")
    table = tmp_path / "t.csv"
    pd.DataFrame({"x": [i % 5 for i in range(12)], "y": ["a", "b"] * 6}).to_csv(table, index=False)
    assert main(["sweep", str(table), "--target", "y", "--store",
                 str(blocker / "s.sqlite")]) == 2
    assert f"{blocker} is a file, not a folder" in _err_line(capsys)


@pytest.mark.parametrize("values, output, words", [
    (np.linspace(-3, 3, 40), "auto", "negative values"),   # signed target
    ((np.arange(40) * 7) % 31, "all", "the exp output head only"),  # count target; heads that reach 0
])
def test_poisson_deviance_refused_where_it_is_undefined(tmp_path, capsys, values, output, words):
    # scikit-learn's mean_poisson_deviance requires y >= 0 and y_pred > 0
    table = tmp_path / "t.csv"
    pd.DataFrame({"x": np.arange(40.0), "y": values}).to_csv(table, index=False)
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(table), "--target", "y", "--output", output, "--metric",
                 "neg_mean_poisson_deviance", "--store", str(store)]) == 2
    assert words in _err_line(capsys)


@pytest.mark.parametrize("address", ["nonsense", "tcp://scheduler:abc"])
def test_malformed_cluster_address_is_one_line(tmp_path, capsys, address):
    table = tmp_path / "t.csv"
    pd.DataFrame({"x": [i % 5 for i in range(12)], "y": ["a", "b"] * 6}).to_csv(table, index=False)
    assert main(["sweep", str(table), "--target", "y", "--cluster", address, "--quiet",
                 "--store", str(tmp_path / "s.sqlite")]) == 2
    assert "tcp://HOST:PORT" in _err_line(capsys)


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the display check is Linux's")
def test_window_without_a_display_is_one_line(monkeypatch, capsys):
    for var in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM"):
        monkeypatch.delenv(var, raising=False)
    assert main([]) == 2  # plain `workbench` opens the window
    assert "no display" in _err_line(capsys)


def test_runaway_scores_keep_the_table_narrow(swept):
    res = json.loads(json.dumps(swept["res"]))
    worst = res["configurations"][-1]
    worst.update(mean=-82106246831161.53, sd=2396889588259.4258, train_test_gap=-1.585e13,
                 underfit=False)  # an underfit configuration's gap reads "underfit"
    text = format_results(res)
    assert "-8.211e+13 ± 2.397e+12" in text and "-1.585e+13" in text
    normal = max(len(line) for line in format_results(swept["res"]).splitlines())
    # only the two widened cells grow: mean ± sd by at most 7, gap by at most 4 characters
    assert max(len(line) for line in text.splitlines()) <= normal + 11


def test_os_errors_reach_the_user_as_one_line(monkeypatch, capsys):
    """A file-system failure deep in a command (here: a full disk) is one line, exit 2."""
    import errno

    from workbench import cli
    from workbench.commands import history

    def boom(args):
        raise OSError(errno.ENOSPC, "No space left on device", "/tmp/store.sqlite")

    monkeypatch.setattr(history, "run", boom)
    code = cli.main(["history"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "No space left on device" in err and "Traceback" not in err


def test_every_setting_a_core_message_can_name_has_a_flag():
    """The core names settings (workbench.errors.SETTINGS); the CLI must phrase every one."""
    from workbench import cli
    from workbench.errors import SETTINGS, InputError

    assert set(cli.SETTING_FLAGS) == set(SETTINGS)
    exc = InputError("the number of folds must be at least 2, got 1", setting="folds")
    assert cli.phrase_error(exc).endswith("(set with --folds)")
    assert "--" not in str(exc)  # the core's own words stay free of flags
    with pytest.raises(ValueError):
        InputError("x", setting="no_such_setting")
