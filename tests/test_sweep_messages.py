"""The sweep's error messages speak of settings, and the command line adds its flags.

The rule (workbench.errors): a core message names the setting it is about in
words ("the number of folds") and in ``setting=``; only the front ends know
flags or controls. These tests check the sweep's messages for flags and
command names, and that a few real refusals carry the right setting.
"""

import ast
import re
from pathlib import Path

import numpy as np
import pytest

import workbench.sweep
from workbench.cli import phrase_error
from workbench.errors import SETTINGS, InputError
from workbench.sweep.plan import SweepPlan, parse_layers
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store, existing_store_path

SWEEP_DIR = Path(workbench.sweep.__file__).parent
BASE = dict(table="t.csv", target="y", task="classification", target_kind="binary",
            hidden=["relu"], heads=["logistic"])
#: a command-line flag (--folds) or a sub-command (workbench show) in a message
CLI_WORDS = re.compile(r"(?<![\w-])--[a-z]|workbench (sweep|show|history|export|inspect)\b")


def _message_parts(call: ast.Call):
    for node in ast.walk(call):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            yield node.value


def _input_errors(path: Path):
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Call) and getattr(node.func, "id", None) == "InputError":
            yield node


@pytest.mark.parametrize("path", sorted(SWEEP_DIR.glob("*.py")), ids=lambda p: p.name)
def test_no_sweep_message_names_a_flag_or_a_command(path):
    for call in _input_errors(path):
        for text in _message_parts(call):
            assert not CLI_WORDS.search(text), f"{path.name}:{call.lineno}: {text!r}"
        for kw in call.keywords:
            if kw.arg == "setting" and isinstance(kw.value, ast.Constant):
                assert kw.value.value in SETTINGS, f"{path.name}:{call.lineno}"


@pytest.mark.parametrize("change, setting, words", [
    (dict(folds=1), "folds", "the number of folds must be at least 2, got 1"),
    (dict(repeats=0), "repeats", "the number of repeats must be at least 1, got 0"),
    (dict(epochs=0), "epochs", "the number of epochs must be at least 1, got 0"),
    (dict(metric="r2"), "metric", "is for regression"),
    (dict(hidden=["relux"]), "hidden", "unknown hidden activation"),
    (dict(learning_rates=[-1.0]), "learning_rate", "learning rates must be positive"),
    (dict(alphas=[-1.0]), "alpha", "L2 strengths"),
    (dict(engine="sklearn", hidden=["gelu"]), "engine", "choose the engine auto or numpy"),
    (dict(roles={"y": "feature"}), "roles", "not for the target"),
])
def test_plan_refusals_name_their_setting(change, setting, words):
    with pytest.raises(InputError) as info:
        SweepPlan(**{**BASE, **change})
    assert info.value.setting == setting and words in str(info.value)


def test_the_command_line_adds_the_flag():
    with pytest.raises(InputError) as info:
        SweepPlan(**BASE, folds=1)
    assert phrase_error(info.value) == ("the number of folds must be at least 2, got 1 "
                                        "(set with --folds)")
    with pytest.raises(InputError) as info:
        parse_layers("8,a")
    assert info.value.setting == "layers"


def test_fold_and_store_refusals_name_their_setting(tmp_path):
    plan = SweepPlan(**BASE, folds=3)
    with pytest.raises(InputError, match="use 2 folds") as info:
        plan.fold_indices(np.array([0] * 30 + [1] * 2))
    assert info.value.setting == "folds"
    with pytest.raises(InputError, match="there is no store") as info:
        existing_store_path(tmp_path / "none.sqlite")
    assert info.value.setting == "store"
    with Store(tmp_path / "s.sqlite") as st:
        with pytest.raises(InputError, match="no sweep 'nope'") as info:
            st.get_sweep("nope")
        assert info.value.setting == "sweep"
        with pytest.raises(InputError, match="number of worker processes") as info:
            run_sweep(SweepPlan(**{**BASE, "table": str(tmp_path / "missing.csv")}), store=st,
                      jobs=0)
    assert info.value.setting == "jobs"  # refused before the table is read
