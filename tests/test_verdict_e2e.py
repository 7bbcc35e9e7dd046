"""The verdict end to end: real sweeps, every number recomputed from the JSON's fold scores.

Outside references used here:

- ``baycomp.CorrelatedTTest`` (Benavoli, Corani, Demšar & Zaffalon 2017; their own
  package): P(worse), P(equivalent), P(better) of every comparison, recomputed from
  the fold scores the JSON lists, with ``runs`` = repeats (so rho = 1/K);
- SciPy's Student t (``scipy.stats.t``): the 95 % interval with the Nadeau & Bengio
  (2003) corrected variance ``(1/J + n_test/n_train) s²`` and the corrected t-test's
  p-value of each baseline against the best network;
- statsmodels' ``ols`` + ``anova_lm(typ=2)``: the factors' shares of the spread of
  the configuration means (type-II sums of squares over the total);
- the sample table ``sample_sets/orchard_water.csv`` (its target and advised head
  read from ``sample_sets/README.md``) and scikit-learn's ``load_breast_cancer``;
- the decision rule and thresholds of Benavoli et al. (2017, section 3.1): a
  decision needs a probability of at least 0.95.

The words are checked piece by piece: the outcome, the other value's name, the
difference and its interval to a hundredth of the ROPE, the probability.
"""

from __future__ import annotations

import io
import json
import math
import re
from contextlib import redirect_stdout
from pathlib import Path

import baycomp
import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer
from verdict_views import assert_view_shows_verdict, html_text

from workbench.cli import main
from workbench.sweep.plan import build_plan
from workbench.sweep.results import sweep_results
from workbench.sweep.runner import run_sweep
from workbench.sweep.store import Store

SAMPLES = Path(__file__).resolve().parents[1] / "sample_sets"
THRESHOLD = 0.95  # Benavoli et al. (2017), section 3.1


def _sample_row(file_name: str) -> dict:
    """The sample's row of the table in sample_sets/README.md: its target and advised head."""
    for line in (SAMPLES / "README.md").read_text(encoding="utf-8").splitlines():
        if line.startswith(f"| `{file_name}`"):
            cells = [c.strip() for c in line.strip("|").split("|")]
            return {"target": cells[3].strip("`"), "head": cells[5].split("/")[0].strip(" `")}
    raise AssertionError(f"{file_name} is not described in sample_sets/README.md")


# --------------------------------------------------------------------------- references
def fold_matrix(res: dict):
    """The configurations whose every trial is done (rank order) and their (C, J) fold
    scores in (repeat, fold) order, read from the JSON's trials."""
    done = [c for c in res["configurations"] if c["status"] == "done"]
    keys = sorted((t["repeat"], t["fold"]) for t in done[0]["trials"])
    x = np.array([[{(t["repeat"], t["fold"]): t["test_score"] for t in c["trials"]}[k]
                   for k in keys] for c in done])
    return done, x


def probabilities(a, b, rope: float, runs: int):
    """baycomp's (P(a worse), P(equivalent), P(a better)) for paired fold scores."""
    probs = baycomp.CorrelatedTTest(np.asarray(b), np.asarray(a), rope=rope, runs=runs).probs()
    if rope == 0:  # baycomp gives (left, right) only: no region of equivalence
        return probs[0], 0.0, probs[1]
    return probs


def decision(pw: float, pe: float, pb: float) -> str:
    if pe >= THRESHOLD:
        return "equivalent"
    if pw >= THRESHOLD:
        return "worse"
    if pb >= THRESHOLD:
        return "better"
    return "undecided"


def nb_interval(a, b, folds: int):
    """Mean paired difference, its 95 % interval and the two-sided p-value with the
    Nadeau-Bengio corrected variance (n_test/n_train = 1/(K-1) for K-fold)."""
    d = np.asarray(a) - np.asarray(b)
    scale = math.sqrt((1 / d.size + 1 / (folds - 1)) * d.var(ddof=1))
    lo, hi = stats.t.interval(0.95, d.size - 1, loc=d.mean(), scale=scale)
    p = 2 * stats.t.sf(abs(d.mean()) / scale, d.size - 1)
    return d.mean(), lo, hi, p


def check_rule(res, done, x, key: str, factor: str, advised: str):
    """One rule statement against baycomp, SciPy and its own words."""
    rule = res["verdict"][key]
    plan = res["plan"]
    K, R, rope = int(plan["folds"]), int(plan["repeats"]), res["rope"]
    means = x.mean(axis=1)
    mine = [i for i, c in enumerate(done) if c[factor] == advised]
    others = [i for i, c in enumerate(done) if c[factor] != advised]
    assert rule["advised"] == advised
    if not mine or not others:
        assert rule["outcome"] == "not_tested" and rule["words"].startswith("not tested")
        return None
    a = mine[int(np.argmax(means[mine]))]
    b = others[int(np.argmax(means[others]))]
    other = done[b][factor]
    pw, pe, pb = probabilities(x[a], x[b], rope, R)
    assert (rule["p_worse"], rule["p_equivalent"], rule["p_better"]) == \
        pytest.approx((pw, pe, pb), abs=1e-6)
    mean, lo, hi, _ = nb_interval(x[a], x[b], K)
    assert rule["difference"] == pytest.approx(mean, abs=1e-12)
    assert rule["interval"] == pytest.approx([lo, hi], abs=1e-6)
    assert rule["best_other"] == other
    assert (rule["advised_index"], rule["best_other_index"]) == (done[a]["index"],
                                                                  done[b]["index"])
    dec = max(0, 2 - math.floor(math.log10(rope)))  # a hundredth of the ROPE

    def f(v):
        return f"{v:.{dec}f}"

    def p_text(p):
        return "P > 0.99" if p >= 0.995 else ("P < 0.01" if p < 0.005 else f"P = {p:.2f}")

    outcome = decision(pw, pe, pb)
    words = rule["words"]
    if outcome == "better":
        assert rule["outcome"] == "holds"
        assert words.startswith(f"holds: {advised} beats")
        assert f"{other}, by {f(mean)} ({f(lo)} to {f(hi)}), {p_text(pb)}" in words
    elif outcome == "equivalent":
        assert rule["outcome"] == "equivalent"
        assert words.startswith(f"equivalent: {advised} and {other} differ by {f(mean)} "
                                f"({f(lo)} to {f(hi)})")
        assert p_text(pe) in words
    elif outcome == "worse":
        assert rule["outcome"] == "beaten"
        assert words == f"beaten by {other} by {f(-mean)} ({f(-hi)} to {f(-lo)}), {p_text(pw)}"
    else:
        assert rule["outcome"] == "undecided"
        assert words.startswith("undecided: ")
        assert f"{advised} vs {other}: {f(mean)} ({f(lo)} to {f(hi)})" in words
        assert f"P better {pb:.2f}, equivalent {pe:.2f}, worse {pw:.2f}" in words
    return outcome


def check_document(res: dict, advised_head: str):
    """Every judged number of a results document against the outside references."""
    done, x = fold_matrix(res)
    plan = res["plan"]
    K, R, rope = int(plan["folds"]), int(plan["repeats"]), res["rope"]
    assert res["rho"] == pytest.approx(1 / K, abs=1e-12)  # equal folds: n_test / N = 1/K
    # every configuration against the best
    assert done[0]["decision"] == "best" and done[0]["p_better"] is None
    for c, row in zip(done[1:], x[1:]):
        pw, pe, pb = probabilities(row, x[0], rope, R)
        assert (c["p_worse"], c["p_equivalent"], c["p_better"]) == \
            pytest.approx((pw, pe, pb), abs=1e-6), c["index"]
        assert c["decision"] == decision(pw, pe, pb)
    # the two rules of thumb
    outcomes = {"output": check_rule(res, done, x, "output", "head", advised_head),
                "hidden": check_rule(res, done, x, "hidden", "hidden", "relu")}
    # recommended: the rule-of-thumb configuration in the best's group, else (one layer
    # shape, one output width per head here) the best itself
    group = [c for c in done if c["decision"] in ("best", "equivalent")]
    rot = [c for c in group if c["hidden"] == "relu" and c["head"] == advised_head]
    rec = res["verdict"]["recommended"]
    expected = max(rot, key=lambda c: c["mean"]) if rot else done[0]
    assert (rec["index"], rec["rank"]) == (expected["index"], expected["rank"])
    assert ("follows the rule of thumb" in rec["reason"]) == bool(rot)
    # baselines against the best network
    for b in res["baselines"]:
        s = np.asarray(b["scores"])
        pw, pe, pb = probabilities(s, x[0], rope, R)
        assert (b["p_worse"], b["p_equivalent"], b["p_better"]) == \
            pytest.approx((pw, pe, pb), abs=1e-6)
        mean, lo, hi, p = nb_interval(s, x[0], K)
        assert b["difference"] == pytest.approx(mean, abs=1e-12)
        assert b["interval"] == pytest.approx([lo, hi], abs=1e-6)
        assert b["p_value"] == pytest.approx(p, rel=1e-6, abs=1e-12)
        assert b["decision"] == decision(pw, pe, pb)
        better = sum(decision(*probabilities(row, s, rope, R)) == "better" for row in x)
        assert b["n_networks_better"] == better
        code = f"no_network_beats_{b['name']}"
        assert (code in {w["code"] for w in res["warnings"]}) == (better == 0)
    # underfit: the training score more than the ROPE below the linear baseline's test score
    linear = next(b for b in res["baselines"] if b["name"] == "linear")
    for c in res["configurations"]:
        assert c["underfit"] == (c["train_mean"] < linear["mean"] - rope)
    # the factors: statsmodels' type-II sums of squares over the total
    from statsmodels.formula.api import ols
    from statsmodels.stats.anova import anova_lm

    factors = ("hidden", "head", "learning_rate")
    frame = pd.DataFrame({"m": x.mean(axis=1), **{f: [str(c[f]) for c in done]
                                                   for f in factors}})
    varying = [f for f in factors if frame[f].nunique() > 1]
    table = anova_lm(ols("m ~ " + " + ".join(f"C({f})" for f in varying), frame).fit(), typ=2)
    total = float(((frame["m"] - frame["m"].mean()) ** 2).sum())
    shares = {f["factor"]: f["share"] for f in res["factors"]}
    assert set(shares) == set(varying)
    for f in varying:
        assert shares[f] == pytest.approx(table.loc[f"C({f})", "sum_sq"] / total, abs=1e-9)
    # the honest score quotes the winner's mean and the corrected estimate
    cb = res["corrected_best"]
    assert cb["method"] == "BBC-CV" and cb["low"] <= cb["estimate"] <= cb["high"]
    return outcomes


# --------------------------------------------------------------------------- sweeps
@pytest.fixture(scope="module")
def cancer(tmp_path_factory):
    """scikit-learn's breast cancer table swept through the command line (2 x 2 grid)."""
    d = tmp_path_factory.mktemp("cancer")
    table = d / "cancer.csv"
    load_breast_cancer(as_frame=True).frame.to_csv(table, index=False)
    store, out = d / "s.sqlite", d / "r.json"
    printed = io.StringIO()
    with redirect_stdout(printed):
        rc = main(["sweep", str(table), "--target", "target", "--hidden", "relu,tanh",
                   "--output", "all", "--layers", "4", "--learning-rate", "0.01",
                   "--folds", "3", "--repeats", "2", "--epochs", "30", "--jobs", "1",
                   "--quiet", "--store", str(store), "--json", str(out)])
    assert rc == 0
    return {"dir": d, "store": store, "res": json.loads(out.read_text()),
            "printed": printed.getvalue()}


@pytest.fixture(scope="module")
def orchard(tmp_path_factory):
    """The orchard sample: its advised relu head against softplus, relu vs tanh hidden."""
    row = _sample_row("orchard_water.csv")
    plan = build_plan(SAMPLES / "orchard_water.csv", row["target"], hidden="relu,tanh",
                      output="relu,softplus", layers=["8"], learning_rates=["0.01"], folds=3,
                      repeats=2, epochs=15)
    with Store(tmp_path_factory.mktemp("orchard") / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        res = json.loads(json.dumps(sweep_results(st, out.sweep_id), allow_nan=False))
    return row, res


def test_orchard_verdict_matches_the_fold_scores(orchard):
    row, res = orchard
    assert (row["target"], row["head"]) == ("water_drawn_litres", "relu")
    assert res["target"] == row["target"] and res["metric"] == "r2"
    assert res["rope"] == 0.01  # R² is a fraction: Benavoli et al.'s 0.01
    outcomes = check_document(res, advised_head="relu")
    assert set(outcomes) == {"output", "hidden"} and None not in outcomes.values()


def test_breast_cancer_verdict_matches_the_fold_scores(cancer):
    res = cancer["res"]
    assert res["metric"] == "roc_auc" and res["target_kind"] == "binary"
    assert {c["head"] for c in res["configurations"]} == {"logistic", "softmax"}
    outcomes = check_document(res, advised_head="logistic")
    assert None not in outcomes.values()


def test_sweep_json_show_json_the_table_and_the_report_agree(cancer, capsys):
    res, store = cancer["res"], cancer["store"]
    capsys.readouterr()
    assert main(["show", res["sweep_id"], "--store", str(store), "--json"]) == 0
    assert json.loads(capsys.readouterr().out) == res
    # the table printed by sweep, and show's, carry the same words
    assert_view_shows_verdict(cancer["printed"], res)
    assert main(["show", res["sweep_id"], "--store", str(store)]) == 0
    shown = capsys.readouterr().out
    assert_view_shows_verdict(shown, res)
    assert shown.strip() in cancer["printed"]
    # export takes the recommended configuration by default and records why
    folder = cancer["dir"] / "export"
    assert main(["export", res["sweep_id"], "--to", str(folder), "--formats", "json,report",
                 "--store", str(store), "--quiet"]) == 0
    conf = json.loads((folder / "configuration.json").read_text())
    rec = res["verdict"]["recommended"]
    assert rec["rank"] != 1  # on this sweep the recommendation is not the best, so the
    assert conf["scores"]["rank"] == rec["rank"]  # default export shows which was taken
    assert conf["scores"]["recommended"] == {"rank": rec["rank"], "index": rec["index"],
                                             "reason": rec["reason"], "exported": True}
    assert conf["scores"]["corrected_best"] == res["corrected_best"]
    assert conf["scores"]["decision"] == next(c["decision"] for c in res["configurations"]
                                              if c["index"] == rec["index"])
    report = html_text((folder / "report.html").read_text(encoding="utf-8"))
    assert_view_shows_verdict(report, res)
    assert "is the recommended one" in " ".join(report.split())
    # the report lists the verdict before the table and target
    at = " ".join(report.split())
    assert at.index("Verdict on the rules of thumb") < at.index("Table and target")


def test_export_by_rank_still_works_and_says_it_is_not_the_recommended_one(cancer):
    res, store = cancer["res"], cancer["store"]
    rec = res["verdict"]["recommended"]
    other = next(c["rank"] for c in res["configurations"] if c["index"] != rec["index"])
    folder = cancer["dir"] / f"rank{other}"
    assert main(["export", res["sweep_id"], "--config", str(other), "--to", str(folder),
                 "--formats", "json", "--store", str(store), "--quiet"]) == 0
    conf = json.loads((folder / "configuration.json").read_text())
    assert conf["scores"]["rank"] == other
    assert conf["scores"]["recommended"]["exported"] is False
    assert conf["scores"]["recommended"]["rank"] == rec["rank"]


def test_rope_given_to_show_reaches_every_decision(cancer, capsys):
    res, store = cancer["res"], cancer["store"]
    done, x = fold_matrix(res)
    R = int(res["plan"]["repeats"])
    for rope in ("0", "0.5"):
        capsys.readouterr()
        assert main(["show", res["sweep_id"], "--store", str(store), "--json",
                     "--rope", rope]) == 0
        shown = json.loads(capsys.readouterr().out)
        assert shown["rope"] == float(rope) and shown["rope_basis"] == "set by the user"
        for c, row in zip([c for c in shown["configurations"] if c["status"] == "done"][1:],
                          x[1:]):
            pw, pe, pb = probabilities(row, x[0], float(rope), R)
            assert c["p_equivalent"] == pytest.approx(pe, abs=1e-6)
            assert c["decision"] == decision(pw, pe, pb)
        if rope == "0":  # no region of equivalence: nothing can be equivalent
            assert all(c["decision"] != "equivalent" for c in shown["configurations"])
        else:  # AUC differences here are far below 0.5: everything is equivalent
            assert {c["decision"] for c in shown["configurations"]} == {"best", "equivalent"}
    assert main(["show", res["sweep_id"], "--store", str(store), "--rope", "-1"]) == 2
    assert "--rope" in capsys.readouterr().err


def test_rope_given_to_sweep_reaches_the_json(tmp_path):
    rng = np.random.default_rng(5)
    frame = pd.DataFrame({"a": rng.normal(size=60), "b": rng.normal(size=60)})
    frame["y"] = frame["a"] - frame["b"] + rng.normal(scale=0.3, size=60)
    frame.to_csv(tmp_path / "t.csv", index=False)
    out = tmp_path / "r.json"
    assert main(["sweep", str(tmp_path / "t.csv"), "--target", "y", "--hidden", "relu,tanh",
                 "--layers", "4", "--folds", "2", "--repeats", "2", "--epochs", "3",
                 "--jobs", "1", "--quiet", "--rope", "0.25", "--store",
                 str(tmp_path / "s.sqlite"), "--json", str(out)]) == 0
    res = json.loads(out.read_text())
    assert res["rope"] == 0.25
    done, x = fold_matrix(res)
    pw, pe, pb = probabilities(x[1], x[0], 0.25, 2)
    assert done[1]["p_equivalent"] == pytest.approx(pe, abs=1e-6)
    assert done[1]["decision"] == decision(pw, pe, pb)


def test_a_bad_rope_is_refused_before_any_trial(tmp_path, capsys):
    store = tmp_path / "s.sqlite"
    assert main(["sweep", str(SAMPLES / "kiln_batches.csv"), "--target", "passes_inspection",
                 "--rope", "wide", "--store", str(store)]) == 2
    err = capsys.readouterr().err
    assert "region of practical equivalence" in err and "--rope" in err
    assert "Traceback" not in err and not store.exists()


def test_a_table_of_pure_noise_warns_that_no_network_beats_the_baselines(tmp_path):
    """Features independent of the target: neither baseline is beaten."""
    rng = np.random.default_rng(11)
    n = 300
    frame = pd.DataFrame({f"x{i}": rng.normal(size=n) for i in range(4)})
    frame["y"] = rng.normal(size=n)
    frame.to_csv(tmp_path / "noise.csv", index=False)
    plan = build_plan(tmp_path / "noise.csv", "y", hidden="relu,tanh", layers=["8"],
                      learning_rates=["0.003,0.01"], folds=3, repeats=2, epochs=30)
    with Store(tmp_path / "s.sqlite") as st:
        out = run_sweep(plan, store=st, backend="inline")
        res = sweep_results(st, out.sweep_id)
    codes = [w["code"] for w in res["warnings"]]
    assert "no_network_beats_constant" in codes and "no_network_beats_linear" in codes
    assert all(b["n_networks_better"] == 0 for b in res["baselines"])
    text = next(w["text"] for w in res["warnings"] if w["code"] == "no_network_beats_constant")
    assert "No network beats the constant baseline" in text
    assert "few_test_rows" not in codes  # 100 test rows per fold
    check_document(json.loads(json.dumps(res)), advised_head="identity")


def test_too_few_test_rows_per_fold_are_warned_about(tmp_path):
    rng = np.random.default_rng(2)
    frame = pd.DataFrame({"a": rng.normal(size=36)})
    frame["y"] = 2 * frame["a"] + rng.normal(scale=0.1, size=36)
    frame.to_csv(tmp_path / "t.csv", index=False)
    plan = build_plan(tmp_path / "t.csv", "y", hidden="relu", layers=["4"], folds=3,
                      repeats=1, epochs=3)
    with Store(tmp_path / "s.sqlite") as st:
        res = sweep_results(st, run_sweep(plan, store=st, backend="inline").sweep_id)
    few = [w for w in res["warnings"] if w["code"] == "few_test_rows"]
    assert len(few) == 1 and re.search(r"\bOnly 12 test rows per fold \(fewer than 30", few[0]["text"])


def test_candidates_and_the_honest_score_come_from_their_own_configurations(cancer):
    """Each candidate's best configuration, robustness and BBC-CV estimate are over the
    configurations with its value only; the winner's over all (bbc_cv on the stored
    out-of-fold predictions, the columns picked here by the JSON's settings)."""
    from workbench.sweep.bbc import bbc_cv

    res = cancer["res"]
    done, _ = fold_matrix(res)
    with Store(cancer["store"]) as st:
        oof = st.out_of_fold(res["sweep_id"])  # columns in index order
    column = {int(c): j for j, c in enumerate(oof.columns)}

    def corrected(members):
        cols = [column[c["index"]] for c in members]
        return bbc_cv(oof.y, [p[:, cols] for p in oof.predictions], oof.folds, res["metric"],
                      n_boot=1000, seed=0).estimate

    for key, factor in (("hidden", ["hidden"]), ("head", ["head"]),
                        ("hidden_head", ["hidden", "head"])):
        assert len(res["candidates"][key]) == len({tuple(c[f] for f in factor) for c in done})
        for cand in res["candidates"][key]:
            value = cand["value"] if isinstance(cand["value"], list) else [cand["value"]]
            members = [c for c in done if [c[f] for f in factor] == value]
            best = max(members, key=lambda c: c["mean"])
            assert (cand["best_index"], cand["best_rank"]) == (best["index"], best["rank"])
            assert cand["best_mean"] == pytest.approx(best["mean"], abs=1e-12)
            assert cand["robustness"] == pytest.approx(np.mean([c["mean"] for c in members]),
                                                       abs=1e-12)
            assert cand["n_settings"] == len(members)
            assert cand["corrected"]["estimate"] == pytest.approx(corrected(members), abs=1e-12)
    assert res["corrected_best"]["estimate"] == pytest.approx(corrected(done), abs=1e-12)
