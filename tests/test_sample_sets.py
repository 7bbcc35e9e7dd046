"""The sample sets: `workbench inspect` reports what sample_sets/README.md promises.

The expectations are read from the README's table itself, so the README and the
program cannot drift apart. The generator is re-run into a temporary folder and
must reproduce the committed files byte for byte.
"""

from __future__ import annotations

import importlib.util
import json
import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from workbench.cli import main

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_sets"


def _promises() -> list[dict]:
    rows = []
    for line in (SAMPLES / "README.md").read_text(encoding="utf-8").splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) != 6 or not cells[0].startswith("`") or not cells[0].endswith(".csv`"):
            continue
        file, n_rows, _scenario, target, kind, advice = cells
        head, loss = re.findall(r"`([a-z_]+)`", advice)[:2]
        rows.append({"file": file.strip("`"), "rows": int(n_rows),
                     "target": target.strip("`"), "kind": re.findall(r"`([a-z_]+)`", kind)[0],
                     "head": head, "loss": loss})
    return rows


PROMISES = _promises()
REQUIRED = {"orchard_water.csv": "non_negative", "greenhouse_temp.csv": "signed",
            "kiln_batches.csv": "binary", "coffee_roast.csv": "multiclass",
            "seed_germination.csv": "bounded"}


def test_readme_lists_every_required_set_and_every_csv():
    listed = {p["file"]: p["kind"] for p in PROMISES}
    for name, kind in REQUIRED.items():
        assert listed.get(name) == kind
    assert set(listed) == {p.name for p in SAMPLES.glob("*.csv")}


@pytest.mark.parametrize("promise", PROMISES, ids=[p["file"] for p in PROMISES])
def test_inspect_reports_the_promised_kind_and_advice(promise, capsys):
    path = SAMPLES / promise["file"]
    assert main(["inspect", str(path), "--json"]) == 0
    out = capsys.readouterr().out
    d = json.loads(out)
    assert d["rows"] == promise["rows"] and 1000 <= d["rows"] <= 5000
    assert d["suggested_target"] == promise["target"]
    assert d["target"]["name"] == promise["target"] and d["target"]["source"] == "suggested"
    assert d["target"]["kind"] == promise["kind"]
    assert d["advice"]["output_head"] == promise["head"]
    assert d["advice"]["loss"] == promise["loss"]
    assert d["advice"]["basis"] == "common practice"
    # naming the target explicitly gives the same answer
    assert main(["inspect", str(path), "--json", "--target", promise["target"]]) == 0
    d2 = json.loads(capsys.readouterr().out)
    assert d2["target"]["kind"] == promise["kind"] and d2["target"]["source"] == "given"
    # the README's promises about the tables' make-up
    cols = {c["name"]: c for c in d["columns"]}
    ignored = [c for c in cols.values() if c["role"] == "ignore"]
    assert any(c["type"] == "id" for c in ignored)
    assert sum(c["type"] == "categorical" and c["role"] == "feature" for c in cols.values()) >= 2
    assert any(c["missing"] > 0 for c in cols.values())
    assert list(cols)[-1] == promise["target"]
    # the text report says the same
    assert main(["inspect", str(path)]) == 0
    text = capsys.readouterr().out
    assert f": {promise['kind']} (" in text and f"output head {promise['head']}" in text


def test_orchard_water_has_many_zero_days_and_ignores_the_constant():
    df = pd.read_csv(SAMPLES / "orchard_water.csv")
    assert (df["water_drawn_litres"] == 0).mean() > 0.25
    assert main(["inspect", str(SAMPLES / "orchard_water.csv"), "--json"]) == 0


def test_generator_reproduces_the_committed_files(tmp_path):
    spec = importlib.util.spec_from_file_location("make_samples", SAMPLES / "make_samples.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    written = mod.make_all(tmp_path)
    assert sorted(p.name for p in written) == sorted(p.name for p in SAMPLES.glob("*.csv"))
    for p in written:
        assert p.read_bytes() == (SAMPLES / p.name).read_bytes(), p.name


def test_inspect_json_in_a_real_process():
    res = subprocess.run([sys.executable, "-m", "workbench", "inspect",
                          str(SAMPLES / "kiln_batches.csv"), "--json"],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0 and res.stderr == ""
    d = json.loads(res.stdout)
    assert d["target"]["kind"] == "binary" and d["advice"]["output_head"] == "logistic"
    assert d["target"]["classes"] == ["no", "yes"]
