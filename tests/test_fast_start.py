"""Fast start: the command line's help loads no heavy library, and an export imports only
what its chosen formats use.

These are wiring tests, not timings (speed is measured in benchmarks): each runs the real
entry point (``python -m workbench``) in a fresh interpreter and reads ``sys.modules`` at
its end. The heavy libraries are those the issue measured: NumPy, pandas, SciPy,
scikit-learn and PySide6 (about 1.5 s of imports together), plus matplotlib, ONNX and
skops for the export formats.
"""

from __future__ import annotations

import importlib
import json
import subprocess
import sys
import textwrap

import pytest

from workbench.cli import _command_table, build_parser

HEAVY = ("numpy", "pandas", "scipy", "sklearn", "PySide6", "matplotlib", "onnx", "skops",
         "pyarrow")

#: runs ``python -m workbench ARGS`` (through runpy, as the command does) and prints the
#: heavy top-level packages that were loaded, as JSON after a marker, on stderr
_PROBE = textwrap.dedent("""
    import json, runpy, sys
    args, watched = json.loads(sys.argv[1]), set(json.loads(sys.argv[2]))
    sys.argv = ["workbench", *args]
    try:
        runpy.run_module("workbench", run_name="__main__", alter_sys=True)
    except SystemExit as exc:
        code = exc.code
    else:
        code = 0
    heavy = sorted({m.split(".")[0] for m in sys.modules} & watched)
    print("LOADED=" + json.dumps({"code": code, "heavy": heavy}), file=sys.stderr)
""")


def _run(args: list[str], heavy=HEAVY) -> tuple[dict, str]:
    proc = subprocess.run([sys.executable, "-c", _PROBE, json.dumps(args), json.dumps(heavy)],
                          capture_output=True, text=True, timeout=300)
    line = next(x for x in proc.stderr.splitlines() if x.startswith("LOADED="))
    return json.loads(line[len("LOADED="):]), proc.stdout


@pytest.mark.parametrize("args", [["--help"], ["export", "--help"], ["show", "--help"],
                                  ["history", "--help"], ["sweep", "--help"],
                                  ["--version"]])
def test_help_loads_no_heavy_library(args):
    found, out = _run(args)
    assert found["code"] in (0, None)
    assert found["heavy"] == [], f"workbench {' '.join(args)} imported {found['heavy']}"
    assert out.strip()


def test_top_level_help_lists_every_command_with_its_modules_own_help():
    """The parser reads NAME and HELP from each module's source: they must be the module's."""
    import pkgutil

    import workbench.commands as pkg

    table = _command_table()
    modules = [importlib.import_module(f"workbench.commands.{i.name}")
               for i in pkgutil.iter_modules(pkg.__path__) if not i.name.startswith("_")]
    assert set(table) == {m.NAME for m in modules if hasattr(m, "run")} >= {"sweep", "export"}
    for name, (module, text) in table.items():
        mod = importlib.import_module(module)
        assert (mod.NAME, mod.HELP) == (name, text)
    found, out = _run(["--help"])
    words = " ".join(out.split())
    for name, (_, text) in table.items():
        assert f"{name} {' '.join(text.split())}" in words


def test_the_chosen_command_gets_its_options_and_runs(tmp_path, capsys):
    """Only the chosen command is loaded, with all of its options; a missing store is the
    history command's own answer (so its run function was the one called)."""
    from workbench.cli import main

    assert main(["history", "--store", str(tmp_path / "none.sqlite"), "--json"]) == 0
    assert capsys.readouterr().out.strip() == "[]"
    with pytest.raises(SystemExit) as exc:
        main(["nosuchcommand"])
    assert exc.value.code == 2
    assert "invalid choice: 'nosuchcommand'" in capsys.readouterr().err


def test_the_chosen_commands_parser_reads_only_its_own_module(monkeypatch):
    """`workbench sweep ...` parses sweep.py's source alone; an unknown command, or none,
    reads every module (so the usage error and --help list every command)."""
    import ast

    parsed = []
    real = ast.parse
    monkeypatch.setattr(ast, "parse", lambda source, *a, **k: parsed.append(source) or
                        real(source, *a, **k))
    full = _command_table()
    n_modules = len(parsed)
    parsed.clear()
    assert _command_table("sweep") == {"sweep": full["sweep"]}
    assert len(parsed) == 1 and 'NAME = "sweep"' in parsed[0]
    assert _command_table("nosuchcommand") == full and len(parsed) == 1 + n_modules
    parser = build_parser(["export"])
    assert parser.parse_args(["export", "S1", "--to", "f"]).folder == "f"
    with pytest.raises(SystemExit) as exc:
        parser.parse_args(["export", "S1", "--to", "f", "--bogus"])
    assert exc.value.code == 2


def test_no_command_opens_the_window_with_opens_defaults(monkeypatch):
    from workbench import cli
    from workbench.commands import open as open_command

    seen = []
    monkeypatch.setattr(open_command, "run", lambda args: seen.append(args) or 0)
    assert cli.main([]) == 0
    assert seen[0].command == "open" and seen[0].file is None and seen[0].size == "1280x800"


def test_the_full_parser_still_has_every_commands_options():
    import argparse

    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    options = {name: {o for a in p._actions for o in a.option_strings}
               for name, p in sub.choices.items()}
    assert {"--to", "--formats", "--config"} <= options["export"]
    assert {"--cross-check", "--rope", "--json"} <= options["show"]
    assert "--target" in options["sweep"]


def test_report_file_name_in_the_registry_is_the_reports():
    from workbench.export.formats import FORMATS
    from workbench.export.report import REPORT_NAME

    assert FORMATS["report"].files == (REPORT_NAME,)


@pytest.fixture(scope="module")
def stored(tmp_path_factory):
    import numpy as np
    import pandas as pd

    from workbench.sweep.plan import build_plan
    from workbench.sweep.runner import run_sweep
    from workbench.sweep.store import Store

    d = tmp_path_factory.mktemp("fast")
    rng = np.random.default_rng(0)
    x = rng.normal(size=(80, 2))
    pd.DataFrame({"a": x[:, 0], "b": x[:, 1], "y": x[:, 0] - x[:, 1]}).to_csv(d / "t.csv",
                                                                           index=False)
    plan = build_plan(d / "t.csv", "y", hidden="relu", layers=["3"], folds=2, repeats=1,
                      epochs=5)
    with Store(d / "s.sqlite") as st:
        sid = run_sweep(plan, store=st, backend="inline").sweep_id
    return d, sid


def test_an_export_imports_only_what_its_formats_use(stored):
    d, sid = stored
    found, _ = _run(["export", sid, "--store", str(d / "s.sqlite"), "--to", str(d / "e"),
                     "--formats", "json,csv,script", "--quiet"],
                    heavy=("onnx", "skl2onnx", "onnxruntime", "skops", "matplotlib", "joblib"))
    assert found["code"] in (0, None)
    assert found["heavy"] == ["joblib"]  # scikit-learn's own dependency, not a format's
    found, _ = _run(["export", sid, "--store", str(d / "s.sqlite"), "--to", str(d / "e"),
                     "--formats", "skops", "--quiet"], heavy=("onnx", "skops", "matplotlib"))
    assert found["code"] in (0, None) and found["heavy"] == ["skops"]


@pytest.mark.parametrize("formats, expected", [("joblib,report", ["matplotlib"]),
                                               ("onnx", ["onnx", "skl2onnx"])])
def test_each_export_format_loads_only_its_own_libraries(stored, formats, expected):
    """The ONNX libraries only for onnx, matplotlib only for the report, skops only for skops
    (what each costs to import: the module docstring of workbench.export.formats)."""
    d, sid = stored
    found, out = _run(["export", sid, "--store", str(d / "s.sqlite"), "--to",
                       str(d / formats.replace(",", "-")), "--formats", formats, "--quiet"],
                      heavy=("onnx", "skl2onnx", "onnxruntime", "skops", "matplotlib"))
    assert found["code"] in (0, None) and found["heavy"] == expected
    written = {p.name for p in (d / formats.replace(",", "-")).iterdir()}
    from workbench.export.formats import files_of

    assert files_of(formats.split(",")) <= written  # the formats were written all the same


def test_export_of_the_recommended_configuration_reads_the_results_once(stored, monkeypatch):
    import workbench.sweep.results as results
    from workbench.cli import main

    d, sid = stored
    calls = []
    real = results.sweep_results
    monkeypatch.setattr(results, "sweep_results",
                        lambda *a, **k: calls.append(a[1]) or real(*a, **k))
    assert main(["export", sid, "--store", str(d / "s.sqlite"), "--to", str(d / "once"),
                 "--formats", "json", "--quiet"]) == 0
    assert calls == [sid]


_SWEEP_PROBE = textwrap.dedent("""
    import json, sys
    from workbench.cli import main
    from workbench.errors import InputError
    from workbench.sweep import pool, runner

    calls = []
    pool.prestart = lambda workers, staggered=False: calls.append(["prestart", workers, staggered])
    pool.open_gate = lambda: calls.append(["open_gate"])
    pool.stop_pool = lambda: calls.append(["stop_pool"])

    def run_sweep(plan, **kw):  # the first trial would be handed out from here on
        calls.append(["run_sweep", plan.target,
                      sorted(m for m in ("workbench.sweep.results", "workbench.sweep.bbc",
                                         "workbench.sweep.verdict") if m in sys.modules)])
        raise InputError("stopped by the test")

    runner.run_sweep = run_sweep
    rc = main(sys.argv[1:])
    print(json.dumps({"rc": rc, "calls": calls}))
""")


def test_sweep_starts_a_staggered_pool_and_opens_its_gate_before_the_first_trial(tmp_path):
    """`workbench sweep`: the workers start first (staggered), the gate opens once the plan is
    built and before the sweep runs, and the ranking's modules are not loaded before it."""
    from pathlib import Path

    table = Path(__file__).resolve().parents[1] / "sample_sets" / "kiln_batches.csv"
    proc = subprocess.run([sys.executable, "-c", _SWEEP_PROBE, "sweep", str(table), "--target",
                           "passes_inspection", "--jobs", "1", "--store",
                           str(tmp_path / "s.sqlite"), "--quiet"],
                          capture_output=True, text=True, timeout=300)
    got = json.loads(proc.stdout.strip().splitlines()[-1])
    assert got["rc"] == 2 and "stopped by the test" in proc.stderr
    # the sweep's refusal stops the workers at once (else the exit would wait for them)
    assert got["calls"] == [["prestart", 1, True], ["open_gate"],
                            ["run_sweep", "passes_inspection", []], ["stop_pool"]]


def test_a_sweep_refused_after_its_workers_started_stops_them_at_once(tmp_path):
    """A bad target is found when the table is read, after the workers were started: the
    pool is stopped before the one-line refusal, the gate never opened."""
    from pathlib import Path

    table = Path(__file__).resolve().parents[1] / "sample_sets" / "kiln_batches.csv"
    proc = subprocess.run([sys.executable, "-c", _SWEEP_PROBE, "sweep", str(table), "--target",
                           "no_such_column", "--jobs", "1", "--store",
                           str(tmp_path / "s.sqlite"), "--quiet"],
                          capture_output=True, text=True, timeout=300)
    got = json.loads(proc.stdout.strip().splitlines()[-1])
    assert got["rc"] == 2 and proc.stderr.startswith("workbench: no column named")
    assert got["calls"] == [["prestart", 1, True], ["stop_pool"]]


def test_the_start_up_timeline_is_written_only_when_asked_and_in_order(tmp_path, monkeypatch,
                                                                      capsys):
    """WORKBENCH_TIMELINE=1: the parent's steps in order, on one clock, and the worker's own
    lines (another process); without it, no timeline line at all."""
    import os

    import numpy as np
    import pandas as pd

    from workbench.sweep import pool

    monkeypatch.delenv("WORKBENCH_TIMELINE", raising=False)
    pool.mark("anything")
    assert capsys.readouterr().err == ""
    x = np.random.default_rng(0).normal(size=(60, 2))
    pd.DataFrame({"a": x[:, 0], "b": x[:, 1], "y": x[:, 0] > 0}).to_csv(tmp_path / "t.csv",
                                                                         index=False)
    env = {k: v for k, v in os.environ.items() if not k.startswith("WORKBENCH_TIMELINE")}
    proc = subprocess.run([sys.executable, "-m", "workbench", "sweep", str(tmp_path / "t.csv"),
                           "--target", "y", "--hidden", "relu", "--layers", "2", "--folds", "2",
                           "--repeats", "1", "--epochs", "2", "--jobs", "1", "--quiet",
                           "--store", str(tmp_path / "s.sqlite")],
                          env={**env, "WORKBENCH_TIMELINE": "1"}, capture_output=True, text=True,
                          timeout=300)
    assert proc.returncode == 0, proc.stderr
    lines = [line.split(maxsplit=3)[1:] for line in proc.stderr.splitlines()
             if line.startswith("timeline ")]
    parent = lines[0][1]
    steps = [(float(t), what) for t, pid, what in lines if pid == parent]
    # the folds' shared features (fold_files, on every table by default), prepared by a
    # thread of the parent: the first trial's fold before the first trial goes out
    folds = [what for _, what in steps if what.startswith("fold ")]
    assert folds[:1] == ["fold 0/0 shared"] and sorted(folds) == ["fold 0/0 shared",
                                                                  "fold 0/1 shared"]
    order = [what for _, what in steps]
    assert order.index("fold 0/0 shared") < order.index("first trial handed to a worker")
    steps = [(t, what) for t, what in steps if not what.startswith("fold ")]
    assert [what for _, what in steps] == [
        "sweep command started", "workers started", "parent imports done",
        "plan built (table read)", "sweep stored, trials about to be handed out",
        "first trial handed to a worker", "first trial stored"]
    assert [t for t, _ in steps] == sorted(t for t, _ in steps) and steps[0][0] >= 0
    worker = [what for t, pid, what in lines if pid != parent]
    assert worker[:2] == ["worker started", "worker imports done"]  # alone: no gate to wait at
