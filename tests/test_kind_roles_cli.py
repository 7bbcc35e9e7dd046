"""``--kind`` and ``--role`` on ``inspect`` and ``sweep``; the kind kept in the plan for
resume, export and reproduce.py; a table with no usable feature refused before any trial.

Outside reference: statsmodels' ``anes96`` data (1996 American National Election Study):
``PID`` is party identification coded 0..6, a category stored as whole numbers, with
code 3 on 37 of 944 rows. As classes, its default score is scikit-learn's
``balanced_accuracy``; the stored fold scores are recomputed with
``sklearn.metrics.balanced_accuracy_score`` by the exported reproduce.py.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from workbench.cli import main
from workbench.errors import InputError
from workbench.sweep.plan import SweepPlan
from workbench.sweep.runner import load_data
from workbench.sweep.store import Store

TINY = ["--hidden", "relu", "--layers", "4", "--epochs", "3", "--folds", "2", "--repeats", "1",
        "--jobs", "1", "--quiet", "--seed", "1"]


@pytest.fixture(scope="module")
def anes(tmp_path_factory):
    from statsmodels.datasets import anes96

    path = tmp_path_factory.mktemp("anes") / "anes.csv"
    anes96.load_pandas().data.to_csv(path, index=False)
    return path


def _json(capsys):
    return json.loads(capsys.readouterr().out)


def _one_line_error(capsys) -> str:
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err
    return err


# --------------------------------------------------------------------------- inspect


def test_inspect_flags_the_party_code_ambiguous_and_kind_multiclass_makes_classes(anes, capsys):
    assert main(["inspect", str(anes), "--target", "PID", "--json"]) == 0
    t = _json(capsys)["target"]
    assert t["kind"] == "count" and t["ambiguous"] and t["alternatives"] == ["multiclass"]
    assert t["evidence"]["codes"]["rare_code"] == 3 and t["evidence"]["codes"]["rare_rows"] == 37
    assert main(["inspect", str(anes), "--target", "PID"]) == 0
    text = capsys.readouterr().out
    assert "ambiguous: 7 consecutive integer codes 0..6" in text
    assert "other kinds the values fit: multiclass (use --kind)" in text
    assert main(["inspect", str(anes), "--target", "PID", "--kind", "multiclass", "--json"]) == 0
    d = _json(capsys)
    assert d["target"]["kind"] == "multiclass" and d["target"]["task"] == "classification"
    assert d["target"]["kind_set_by_user"] and d["target"]["detected_kind"] == "count"
    assert d["advice"]["output_head"] == "softmax"


@pytest.mark.parametrize("args,fragment", [
    (["--kind", "binary"], "has 7 distinct values, not 2, so it cannot be binary"),
    (["--kind", "bounded", "--role", "PID=ignore"], "is the target"),
    (["--role", "nowhere=feature"], "no column named 'nowhere'"),
    (["--role", "age"], "is not written COLUMN=feature or COLUMN=ignore"),
    (["--role", "age=maybe"], "role 'maybe' for 'age' is not valid"),
])
def test_inspect_refuses_impossible_kinds_and_roles_in_one_line(anes, capsys, args, fragment):
    assert main(["inspect", str(anes), "--target", "PID", *args]) == 2
    err = _one_line_error(capsys)
    assert fragment in err
    assert err.endswith("(set with --kind)" if "kind" in err.split("(set with")[-1]
                        else "(set with --role)")


def test_inspect_applies_roles_through_the_profile(anes, capsys):
    assert main(["inspect", str(anes), "--target", "PID", "--role", "vote=ignore",
                 "--role", "popul=ignore", "--json"]) == 0
    d = _json(capsys)
    roles = {c["name"]: (c["role"], c["reason"]) for c in d["columns"]}
    assert roles["vote"] == ("ignore", "ignored by the user") and roles["popul"][0] == "ignore"
    assert roles["PID"][0] == "target" and roles["age"][0] == "feature"
    assert d["roles_set_by_user"] == {"vote": "ignore", "popul": "ignore"}
    assert d["n_features"] == 8  # 11 columns - target - two ignored


def test_inspect_states_why_it_suggests_a_target_or_none(tmp_path, capsys):
    rng = np.random.default_rng(0)
    n = 30
    path = tmp_path / "t.csv"
    pd.DataFrame({"x": rng.normal(size=n), "yield_kg": rng.gamma(2, 2, n),
                  "year": rng.choice([2019, 2020, 2021], n)}).to_csv(path, index=False)
    assert main(["inspect", str(path), "--json"]) == 0
    d = _json(capsys)
    assert d["suggested_target"] is None and d["target"] is None
    assert "'year'" in d["suggestion_reason"] and d["note"].endswith("with --target COL")
    pd.read_csv(path)[["year", "x", "yield_kg"]].to_csv(path, index=False)
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "Target 'yield_kg' (suggested)" in out
    assert "suggested because it is the table's last column" in out


# --------------------------------------------------------------------------- sweep


def test_sweep_kind_multiclass_scores_balanced_accuracy_and_resume_export_reproduce_keep_it(
        anes, tmp_path, capsys):
    store_path = tmp_path / "s.sqlite"
    out = tmp_path / "res.json"
    assert main(["sweep", str(anes), "--target", "PID", "--kind", "multiclass",
                 "--role", "vote=ignore", "--store", str(store_path), "--json", str(out),
                 *TINY]) == 0
    res = json.loads(out.read_text())
    assert res["metric"] == "balanced_accuracy" and res["task"] == "classification"
    assert res["target_kind"] == "multiclass"
    assert res["plan"]["kind"] == "multiclass" and res["plan"]["roles"] == {"vote": "ignore"}
    assert [c["head"] for c in res["configurations"]] == ["softmax"]
    # the stored plan is what --resume and export rebuild the data from
    plan = SweepPlan.from_dict(res["plan"])
    data, _ = load_data(plan)
    assert data.target.kind == "multiclass" and data.target.kind_set_by_user
    assert data.profile.column("vote").role == "ignore"
    assert sorted(np.unique(data.y)) == [0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0]
    # without the stored kind the table reads as a count, which the plan refuses
    plan.kind = None
    plan.target_kind = "count"
    with pytest.raises(InputError, match="now a regression target"):
        load_data(plan)
    # export, then run the exported reproduce.py: it must read PID as classes too
    folder = tmp_path / "export"
    capsys.readouterr()
    assert main(["export", res["sweep_id"], "--to", str(folder), "--formats", "json,script",
                 "--store", str(store_path), "--quiet"]) == 0
    conf = json.loads((folder / "configuration.json").read_text())
    assert conf["target"]["kind"] == "multiclass" and conf["plan"]["kind"] == "multiclass"
    proc = subprocess.run([sys.executable, str(folder / "reproduce.py")], capture_output=True,
                          text=True, timeout=300, cwd=str(tmp_path))
    assert proc.returncode == 0, proc.stdout + proc.stderr


def test_sweep_refuses_a_kind_the_values_cannot_have_before_any_trial(anes, tmp_path, capsys):
    store_path = tmp_path / "s.sqlite"
    assert main(["sweep", str(anes), "--target", "age", "--kind", "binary",
                 "--store", str(store_path), *TINY]) == 2
    err = _one_line_error(capsys)
    assert "'age' has 71 distinct values, not 2" in err and err.endswith("(set with --kind)")
    with Store(store_path) as st:
        assert st.list_sweeps() == []


def test_sweep_refuses_a_table_with_no_usable_feature_before_any_trial(tmp_path, capsys):
    n = 24
    path = tmp_path / "nofeat.csv"
    pd.DataFrame({"sample_id": [f"s{i:03d}" for i in range(n)], "site": "north",
                  "y": np.linspace(0.5, 9.5, n)}).to_csv(path, index=False)
    store_path = tmp_path / "s.sqlite"
    assert main(["sweep", str(path), "--target", "y", "--store", str(store_path), *TINY]) == 2
    err = _one_line_error(capsys)
    assert "no column can be used as a feature for target 'y'" in err
    assert "'sample_id'" in err and "'site'" in err and err.endswith("(set with --role)")
    with Store(store_path) as st:
        assert st.list_sweeps() == []
    # ignoring the last usable column through --role is refused the same way
    pd.DataFrame({"x": np.arange(n) % 5, "y": np.linspace(0.5, 9.5, n)}).to_csv(path,
                                                                              index=False)
    assert main(["sweep", str(path), "--target", "y", "--role", "x=ignore",
                 "--store", str(store_path), *TINY]) == 2
    assert "no column can be used as a feature" in _one_line_error(capsys)
    # and --role can make the identifier a feature, so the sweep runs
    pd.DataFrame({"sample_id": np.random.default_rng(0).permutation(n) + 100,
                  "y": np.linspace(0.5, 9.5, n)}).to_csv(path, index=False)
    assert main(["sweep", str(path), "--target", "y", "--role", "sample_id=feature",
                 "--store", str(store_path), *TINY]) == 0
    with Store(store_path) as st:
        (sw,) = st.list_sweeps()
        assert sw["n_stored"] == sw["n_trials"]


def test_resume_takes_kind_and_roles_from_the_store(capsys):
    assert main(["sweep", "--resume", "20240101-000000-abcdef", "--kind", "count"]) == 2
    assert "drop FILE, --target, --kind and --role" in _one_line_error(capsys)
