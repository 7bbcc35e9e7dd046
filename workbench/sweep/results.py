"""The results document of a stored sweep: what ``sweep --json`` and ``show --json`` print.

:func:`sweep_results` reads a sweep's configurations and finished trials from
the :class:`workbench.sweep.store.Store`, decides each configuration's status,
hands the fold scores and fold sizes (``n_train``, ``n_test`` as each trial
recorded them) to :func:`workbench.sweep.statistics.rank` (the corrected
resampled t-test of Nadeau & Bengio, 2003, against the best, Holm's 1979
correction and the tie rule), and lays the answer out as one JSON-able dict.
README.md documents the dict (section "Sweep results as JSON"); the window,
the export and the report read the same dict.

The practitioner's question -- do the rules of thumb hold on this table, and
if not, what instead? -- is answered on the configurations whose every trial
is done, by the pure pieces of the sweep package, wired here:

- every configuration against the best by the Bayesian correlated t-test with
  a region of practical equivalence (:mod:`workbench.sweep.bayes`; ``rho =
  n_test / n_total`` from the stored fold sizes): ``p_better``,
  ``p_equivalent``, ``p_worse``, ``decision``;
- the verdict on the two rules of thumb, the per-candidate view and the
  recommended configuration (:mod:`workbench.sweep.verdict`);
- the winner's selection-corrected score by BBC-CV over the stored
  out-of-fold predictions (:mod:`workbench.sweep.bbc`);
- the share of the spread explained by each swept factor
  (:mod:`workbench.sweep.factors`);
- each baseline against the best network by the same two tests, whether a
  training score is poor (``underfit``), and the ``warnings``.

:func:`verdict_heading` and :func:`verdict_statements` turn the document into
the words every view shows (command line, window, report), so the views
cannot disagree.

Choices made here
-----------------
**The region of practical equivalence** is given by the caller (``--rope``
on ``sweep`` and ``show``; it is not stored with the sweep) or else the
default of :func:`workbench.sweep.bayes.default_rope` for the metric: 0.01
for unit-free scores, 1 % of the constant baseline's score for error scores.
When an error score has no constant baseline to scale it (a sweep run
without baselines), 1 % of the best network's score magnitude is used and
``rope_basis`` says so.

**Underfit.** A configuration is flagged ``underfit`` when its mean
*training* score is below the linear baseline's mean *test* score by more
than the ROPE (the constant baseline's when no linear one finished): the
network does not even fit the rows it learnt from as well as a linear model
predicts rows it never saw, so its train-test gap says nothing about
overfitting. No flag (None) without a baseline.

**Too few test rows.** :data:`MIN_TEST_ROWS` = 30 test rows per fold is the
threshold of the ``few_test_rows`` warning. It is common practice, the usual
"n >= 30" rule for trusting the normal approximation behind t-tests (here:
of a fold score as an average over its rows); below it one row moves an
accuracy-type fold score by more than 1/30 = 0.033, over three times the
default ROPE of 0.01, so no difference the ROPE counts as practical can be
resolved within a fold.

**A baseline "is beaten"** when at least one network is decided practically
better than it (Bayesian correlated t-test, P(better) >= 0.95 with the
ROPE). ``no_network_beats_linear`` and the stronger
``no_network_beats_constant`` warn when none is.

**Most of the grid undecided.** The ``mostly_undecided`` warning fires when
more than half of the configurations compared with the best are undecided
(the text also counts the Nadeau-Bengio tie group). Tied configurations that
the Bayesian test shows practically *equivalent* to the best are a decided
answer -- their differences do not matter -- so they do not count. The
warning quotes the median, over the undecided ones, of the repeats that
would decide a difference of the observed size
(:func:`workbench.sweep.verdict.repeats_needed`; unreachable counts as
infinitely many).

**Parameter counts** (the recommendation's "fewest parameters") need the
number of input columns after preprocessing: the table is read again and
the sweep's preprocessing fitted on it (its SHA-256 must match the sweep's).
When the table is not found, the count of the table's feature columns is
used instead (one-hot and date columns not expanded) and
``verdict.recommended.n_inputs_basis`` says so.

**Configurations racing stopped** (:mod:`workbench.sweep.racing`) keep their stored
trials as partial scores: status ``stopped (racing)``, a ``stopped`` field saying
after which repeat and fold and why, no rank among the ranked ones, no p-value or
decision, and never the recommendation; the ``racing`` statement of
:func:`verdict_statements` names them in every view.

**Cost.** BBC-CV runs once per distinct set of configurations (all of them,
each hidden activation's, each head's, each pair's; equal sets share one
run), each with :data:`N_BOOT` bootstrap samples.
"""

from __future__ import annotations

import math

import numpy as np

from workbench.errors import InputError
from workbench.sweep import bayes, bbc, calibration, diagnosis, factors, verdict
from workbench.sweep.statistics import ALPHA, corrected_ttest, is_tied, rank

#: bootstrap samples of every BBC-CV estimate
N_BOOT = 1000

#: fewer test rows per fold than this draws the few_test_rows warning (common practice,
#: see the module docstring)
MIN_TEST_ROWS = 30

#: the decisions a configuration can have against the best, in display order
DECISIONS = ("best", "equivalent", "undecided", "worse")

#: the status of a configuration racing stopped (:mod:`workbench.sweep.racing`): its scores
#: are partial, it is not ranked and never recommended (its ``stopped`` field says when and
#: why); in words, so that every table that shows the status says it as it is
STOPPED = "stopped (racing)"

#: the warnings' codes, in the order they are listed
WARNING_CODES = ("no_network_beats_constant", "no_network_beats_linear", "few_test_rows",
                 "mostly_undecided")


def sweep_results(store, sweep_id: str, *, alpha: float = ALPHA, holm: bool = False,
                  rope=None, n_boot: int = N_BOOT, seed: int = 0, n_inputs: int | None = None
                  ) -> dict:
    """A stored sweep's ranked results (the ``workbench sweep --json`` object).

    Parameters
    ----------
    store : Store
        The store holding the sweep.
    sweep_id : str
        The sweep's id.
    alpha : float
        Significance level of the tie group.
    holm : bool
        Judge ties on Holm-adjusted p-values.
    rope : float, optional
        Half-width of the region of practical equivalence (checked with
        :func:`workbench.sweep.bayes.check_rope`); default per metric.
    n_boot, seed : int
        Bootstrap samples and seed of every BBC-CV estimate.
    n_inputs : int, optional
        Input columns after preprocessing, when the caller knows them (else
        the table is read again; see the module docstring).

    Returns
    -------
    dict
        ``sweep_id, state, metric, table, target, task, target_kind, created,
        finished, n_configurations, n_trials, n_stored, significance_level,
        correction ("none" or "holm"), n_comparisons, fingerprint, versions,
        plan`` and ``configurations``: a list ordered by rank of dicts with
        ``rank, index, hidden, head, layers, learning_rate, alpha, engine,
        status, mean, sd, n_scores, p_value, p_value_holm, tied_with_best,
        p_better, p_equivalent, p_worse, decision, mean_fit_seconds,
        train_mean, train_test_gap, underfit, dead, saturated`` and
        ``trials`` (``repeat, fold, test_score, train_score, fit_seconds,
        epochs, status, error, engine``), and ``mean_epochs`` (epochs run,
        mean over the done trials), ``diagnosis`` (``{codes, text, findings}``,
        :func:`workbench.sweep.diagnosis.add_diagnoses`) and ``calibration``
        (:func:`workbench.sweep.calibration.add_summaries`; None without stored
        predictions) and ``stopped`` (None, or for a configuration racing stopped
        ``{config_index, after_repeat, after_fold, n_scores, best_index,
        difference, p_worse, rope, reason}``: its status is ``stopped``, its
        scores partial, and it is neither ranked nor recommended; ``racing``
        sums them up: ``{race, threshold, n_stopped, n_trials, n_stored,
        stopped}``). Configurations that are not
        rankable (a trial diverged or failed, or none is stored yet) follow
        the ranked ones with ``mean`` over their done trials and no p-value;
        only configurations whose every trial is done get a decision.
        ``baselines``: the reference configurations run on the same folds
        (kept out of the ranking), each ``{name, estimator, status, mean, sd,
        scores}`` with ``scores`` the done trials' test scores in (repeat,
        fold) order, plus their comparison with the best network
        (``difference, interval, p_value, tied_with_best, p_better,
        p_equivalent, p_worse, decision, n_networks_better``).
        The judgement: ``rope``, ``rope_basis``, ``decision_threshold``,
        ``rho``, ``corrected_best`` ``{estimate, low, high, method, ...}``,
        ``factors`` ``[{factor, share}]``, ``factors_sentence``,
        ``factors_rest``, ``factors_noise``, ``verdict`` ``{output, hidden,
        recommended}``, ``candidates`` ``{hidden, head, hidden_head}`` and
        ``warnings`` ``[{code, text}]`` (README.md documents each).
    """
    rope = None if rope is None else bayes.check_rope(rope)
    sweep = store.get_sweep(sweep_id)
    plan = sweep["plan"]
    configs = store.configurations(sweep_id)
    by_cfg: dict[int, list[dict]] = {c["index"]: [] for c in configs}
    for t in store.trials(sweep_id, with_history=False):
        by_cfg.setdefault(t["config_index"], []).append(t)
    expected = int(plan["folds"]) * int(plan["repeats"])
    stopped = store.stopped(sweep_id)
    status = {c["index"]: _status(by_cfg[c["index"]], expected, sweep["state"],
                                  stopped=c["index"] in stopped) for c in configs}
    # a configuration racing stopped has partial scores: shown, never ranked or recommended
    scores, n_train, n_test = _fold_scores({c["index"]: by_cfg[c["index"]] for c in configs
                                            if c["index"] not in stopped})
    ranked = rank(scores, n_train, n_test, alpha=alpha, use_holm=holm)
    rest = sorted((c["index"] for c in configs if c["index"] not in scores),
                  key=lambda i: (_mean(t["test_score"] for t in by_cfg[i]) is None,
                                 -(_mean(t["test_score"] for t in by_cfg[i]) or 0.0), i))
    cfg_by_index = {c["index"]: c for c in configs}
    out_cfgs = [_configuration_entry(pos, cfg_by_index[i], by_cfg[i], status[i],
                                     ranked["stats"].get(i, {}), stopped.get(i))
                for pos, i in enumerate(ranked["order"] + rest, start=1)]
    doc = {
        "sweep_id": sweep_id,
        "state": sweep["state"],
        "metric": plan["metric"],
        "table": plan["table"],
        "target": plan["target"],
        "task": plan["task"],
        "target_kind": plan["target_kind"],
        "created": sweep["created"],
        "finished": sweep["finished"],
        "n_configurations": sweep["n_configurations"],
        "n_trials": sweep["n_trials"],
        "n_stored": sweep["n_stored"],
        "significance_level": alpha,
        "correction": "holm" if holm else "none",
        "n_comparisons": ranked["n_comparisons"],
        "fingerprint": sweep["fingerprint"],
        "versions": sweep["versions"],
        "plan": plan,
        "configurations": out_cfgs,
        "baselines": _baselines(store, sweep_id, expected, sweep["state"]),
        "racing": _racing(plan, stopped, sweep["n_trials"], sweep["n_stored"]),
    }
    _judge(doc, store, n_train, n_test, rope=rope, n_boot=n_boot, seed=seed, n_inputs=n_inputs)
    diagnosis.add_diagnoses(doc, store)
    calibration.add_summaries(doc, store)
    return doc


def _baselines(store, sweep_id: str, expected: int, sweep_state: str) -> list[dict]:
    """The reference configurations' entries: scores in (repeat, fold) order."""
    by_index: dict[int, list[dict]] = {}
    for t in store.baseline_trials(sweep_id):
        by_index.setdefault(t["config_index"], []).append(t)
    out = []
    for b in store.baselines(sweep_id):
        ts = sorted(by_index.get(b["index"], []), key=lambda t: (t["repeat"], t["fold"]))
        scores = [t["test_score"] for t in ts if t["status"] == "done"]
        out.append({"name": b["name"], "estimator": b["estimator"],
                    "status": _status(ts, expected, sweep_state),
                    "mean": float(np.mean(scores)) if scores else None,
                    "sd": float(np.std(scores, ddof=1)) if len(scores) > 1 else None,
                    "scores": scores})
    return out


def _racing(plan: dict, stopped: dict, n_trials: int, n_stored: int) -> dict:
    """The ``racing`` entry: whether the sweep raced, and what racing stopped."""
    from workbench.sweep.racing import check_rule

    rule = check_rule(dict(plan.get("race_rule") or {}))  # the plan's own (else this version's)
    return _plain({"race": bool(plan.get("race", False)), "threshold": rule["threshold"],
                   "rule": rule if plan.get("race") else {},
                   "n_stopped": len(stopped), "n_trials": n_trials, "n_stored": n_stored,
                   "stopped": [_stopped_entry(r) for r in stopped.values()]})


def _stopped_entry(r: dict) -> dict:
    """A configuration's ``stopped`` field: when and why racing stopped it (repeat and
    fold count from 0, as the trials')."""
    return _plain({"config_index": r["config_index"], "after_repeat": r["after_repeat"],
                   "after_fold": r["after_fold"], "n_scores": r["n_scores"],
                   "best_index": r["best_index"], "difference": r["difference"],
                   "p_worse": r["p_worse"], "rope": r["rope"], "reason": r["reason"]})


def _status(trials: list[dict], expected: int, sweep_state: str, stopped: bool = False) -> str:
    """A configuration's status from its stored trials and the sweep's state
    (``stopped``: racing stopped it, so its scores are partial)."""
    statuses = {t["status"] for t in trials}
    if "failed" in statuses:
        return "failed"
    if "diverged" in statuses:
        return "diverged"
    if stopped:
        return STOPPED
    if len(trials) < expected:
        return {"running": "running", "interrupted": "cancelled"}.get(sweep_state, "incomplete")
    return "done"


def _fold_scores(by_cfg: dict[int, list[dict]]):
    """What :func:`workbench.sweep.statistics.rank` takes, from the stored trials.

    Only configurations whose every stored trial is done are rankable.

    Returns
    -------
    scores : dict
        ``{config_index: {(repeat, fold): test_score}}``.
    n_train, n_test : dict
        ``{(repeat, fold): rows}``: the training and test rows each trial recorded.
    """
    scores, n_train, n_test = {}, {}, {}
    for i, ts in by_cfg.items():
        if ts and {t["status"] for t in ts} == {"done"}:
            scores[i] = {(t["repeat"], t["fold"]): t["test_score"] for t in ts}
            for t in ts:
                n_train[(t["repeat"], t["fold"])] = t["n_train"]
                n_test[(t["repeat"], t["fold"])] = t["n_test"]
    return scores, n_train, n_test


def _configuration_entry(rank_: int, c: dict, ts: list[dict], status: str, st: dict,
                         stopped: dict | None = None) -> dict:
    """One configuration of the document: its grid point, scores, comparison and trials
    (``stopped``: the racing record of a configuration racing stopped)."""
    done = [t for t in ts if t["status"] == "done"]
    train_mean = _mean(t["train_score"] for t in done)
    done_test = _mean(t["test_score"] for t in done)
    vals = [t["test_score"] for t in done]
    sd = st.get("sd") if st else (float(np.std(vals, ddof=1)) if len(vals) > 1 else None)
    return {
        "rank": rank_,
        "index": c["index"],
        "hidden": c["hidden"],
        "head": c["head"],
        "layers": c["layers"],
        "learning_rate": c["learning_rate"],
        "alpha": c["alpha"],
        "engine": c["engine"],
        "status": status,
        "mean": st.get("mean", _mean(t["test_score"] for t in ts)),
        "sd": sd,
        "n_scores": len(vals),
        "p_value": st.get("p_value"),
        "p_value_holm": st.get("p_value_holm"),
        "tied_with_best": bool(st.get("tied_with_best", False)),
        "p_better": None,  # p_better .. decision and underfit: filled in by _judge
        "p_equivalent": None,
        "p_worse": None,
        "decision": None,
        "mean_fit_seconds": _mean(t["fit_seconds"] for t in ts),
        "train_mean": train_mean,
        "train_test_gap": (train_mean - done_test
                           if train_mean is not None and done_test is not None else None),
        "underfit": None,
        "mean_epochs": _mean(t["epochs"] for t in done if t["epochs"] is not None),
        "dead": _health_share(ts, "dead"),
        "saturated": _health_share(ts, "saturated"),
        "stopped": _stopped_entry(stopped) if stopped is not None else None,
        "trials": [{"repeat": t["repeat"], "fold": t["fold"], "test_score": t["test_score"],
                    "train_score": t["train_score"], "fit_seconds": t["fit_seconds"],
                    "epochs": t["epochs"], "status": t["status"], "error": t["error"],
                    "engine": t["engine"]}
                   for t in sorted(ts, key=lambda t: (t["repeat"], t["fold"]))],
    }


def _mean(values):
    vals = [v for v in values if v is not None and math.isfinite(v)]
    return float(np.mean(vals)) if vals else None


def _health_share(trials, key):
    """Mean over trials of the mean over hidden layers of a health share (dead, saturated)."""
    shares = []
    for t in trials:
        layer = (t.get("health") or {}).get(key) or []
        layer = [v for v in layer if v is not None]
        if layer:
            shares.append(float(np.mean(layer)))
    return float(np.mean(shares)) if shares else None


# --------------------------------------------------------------------------- the judgement
def _judge(doc: dict, store, n_train: dict, n_test: dict, *, rope, n_boot: int, seed: int,
           n_inputs) -> None:
    """Add the decisions, the verdict, the honest score, the factors, the baselines'
    comparisons and the warnings to ``doc`` (in place)."""
    plan, metric = doc["plan"], doc["metric"]
    folds, repeats = int(plan["folds"]), int(plan["repeats"])
    cfgs = doc["configurations"]
    done = [c for c in cfgs if c["status"] == "done" and c["mean"] is not None]
    named = {b["name"]: b for b in doc["baselines"]}
    value, basis = _rope(metric, rope, named.get("constant"), done[0]["mean"] if done else None)
    doc.update(rope=value, rope_basis=basis, decision_threshold=bayes.THRESHOLD)
    reference = _underfit_reference(named)
    for c in cfgs:
        if c["train_mean"] is not None and reference is not None:
            c["underfit"] = bool(c["train_mean"] < reference["mean"] - value)
    if not done:
        doc.update(rho=None, corrected_best=_unavailable(
            "not available: no configuration has finished its cross-validation"),
            factors=[], factors_sentence="No configuration has finished yet.",
            factors_rest=None, factors_noise=None, verdict=None, candidates=None)
        for b in doc["baselines"]:
            b.update(_no_comparison())
        doc["warnings"] = _warnings(doc, [], None, n_test, None, value)
        return
    per = [{(t["repeat"], t["fold"]): t["test_score"] for t in c["trials"]} for c in done]
    keys = sorted(set.intersection(*(set(p) for p in per)))
    x = np.array([[p[k] for k in keys] for p in per], dtype=float)
    ntr = [n_train[k] for k in keys]
    nte = [n_test[k] for k in keys]
    rho = bayes.rho_from_sizes(ntr, nte)
    facts = _table_facts(store, doc, n_inputs)
    oof, why = _out_of_fold(store, doc["sweep_id"], metric, [c["index"] for c in done])
    settings = [{k: c[k] for k in ("index", "rank", "hidden", "head", "layers",
                                   "learning_rate", "alpha")} for c in done]
    outputs = {c["head"]: _output_units(doc["task"], c["head"], facts["n_classes"])
               for c in done}
    judged = verdict.verdict(settings, x, advised_head=facts["advised_head"], rho=rho,
                             rope=value, folds=folds, repeats=repeats,
                             n_inputs=facts["n_inputs"], n_outputs=outputs, oof=oof,
                             n_boot=n_boot, seed=seed)
    for c, cmp in zip(done, judged["comparisons"]):
        c.update(p_better=cmp["p_better"], p_equivalent=cmp["p_equivalent"],
                 p_worse=cmp["p_worse"], decision=cmp["decision"])
    rank_of = {c["index"]: c["rank"] for c in cfgs}
    shares = factors.factor_shares([c["mean"] for c in done], settings, fold_scores=x,
                                   n_train=ntr, n_test=nte)
    recommended = dict(judged["recommended"], n_inputs=facts["n_inputs"],
                       n_inputs_basis=facts["n_inputs_basis"])
    doc.update(
        rho=rho,
        corrected_best=_plain(judged["corrected_best"]) or _unavailable(why),
        factors=[{"factor": f["factor"], "share": f["share"]} for f in shares["factors"]],
        factors_sentence=factors.factors_sentence(shares),
        factors_rest={"label": "interactions" if shares["balanced"] else "the rest",
                      "share": shares["rest"]["share"]},
        factors_noise=(None if shares["noise"] is None else
                       _plain({"share": shares["noise"]["share"],
                               "sd": shares["noise"]["sd"]})),
        verdict=_plain({"output": judged["output"], "hidden": judged["hidden"],
                        "recommended": recommended}),
        candidates=_plain({key: [dict(cand, best_rank=rank_of[cand["best_index"]])
                                 for cand in cands]
                           for key, cands in judged["candidates"].items()}),
    )
    for c in done:
        for k in ("p_better", "p_equivalent", "p_worse"):
            c[k] = _finite(c[k])
    for b in doc["baselines"]:
        b.update(_compare_baseline(b, x, ntr, nte, rho=rho, rope=value,
                                   alpha=doc["significance_level"]))
    doc["warnings"] = _warnings(doc, done, x, n_test, rho, value)


class _OncePerColumns:
    """Out-of-fold predictions for :func:`workbench.sweep.verdict.verdict` that run BBC-CV
    once per distinct set of columns (a grid with one head has the same configurations
    per hidden activation as per hidden x head pair, and per head as overall)."""

    def __init__(self, oof: bbc.OutOfFold):
        self.oof = oof
        self.n_columns = oof.predictions[0].shape[1]
        self.runs: dict = {}

    def bbc(self, columns=None, *, n_boot: int = N_BOOT, level: float = 0.95, seed: int = 0):
        cols = tuple(range(self.n_columns)) if columns is None else tuple(int(c) for c in columns)
        key = (cols, int(n_boot), float(level), int(seed))
        if key not in self.runs:
            try:
                self.runs[key] = self.oof.bbc(list(cols), n_boot=n_boot, level=level,
                                              seed=seed)
            except ValueError as exc:  # predictions BBC-CV cannot score: say why, go on
                self.runs[key] = _NotCorrected(f"not available: {exc}")
        return self.runs[key]


class _NotCorrected:
    """Stands for a BBC-CV result that could not be computed (``to_dict`` says why)."""

    def __init__(self, method: str):
        self.method = method

    def to_dict(self) -> dict:
        return _unavailable(self.method)


def _out_of_fold(store, sweep_id: str, metric: str, indices: list[int]):
    """``(predictions for BBC-CV, None)`` or ``(None, why the estimate is not available)``."""
    if not bbc.supports(metric):
        return None, (f"not available: BBC-CV cannot score {metric} from stored predictions "
                      f"(it scores {', '.join(bbc.SUPPORTED)})")
    stored = store.out_of_fold(sweep_id, configurations=indices)
    if stored is None:
        return None, ("not available: this sweep was stored before out-of-fold predictions "
                      "were kept")
    if not bool(np.all(stored.complete)):
        return None, ("not available: out-of-fold predictions are missing for some finished "
                      "configurations")
    return _OncePerColumns(bbc.OutOfFold(stored.y, stored.predictions, stored.folds,
                                         metric)), None


def _unavailable(method: str) -> dict:
    return {"estimate": None, "low": None, "high": None, "method": method}


def _rope(metric: str, given, constant: dict | None, best_mean) -> tuple[float, str]:
    """The ROPE half-width and, in words, where it comes from."""
    if given is not None:
        return float(given), "set by the user"
    if bayes.rope_kind(metric) == "fraction":
        return (bayes.default_rope(metric),
                "the default for unit-free scores: 0.01 (Benavoli et al. 2017)")
    base = constant["mean"] if constant is not None and constant["status"] == "done" else None
    if base is not None and math.isfinite(base) and base != 0:
        return (bayes.default_rope(metric, base),
                f"the default for error scores: 1% of the constant baseline's score "
                f"({_num(base)})")
    if best_mean is not None and math.isfinite(best_mean) and best_mean != 0:
        return (bayes.default_rope(metric, best_mean),
                f"1% of the best network's score ({_num(best_mean)}); no constant baseline "
                "finished to give the error score a scale")
    return 0.0, "0: nothing gives this error score a scale"


def _underfit_reference(named: dict) -> dict | None:
    """The baseline a training score is held against: the linear one, else the constant."""
    for name in ("linear", "constant"):
        b = named.get(name)
        if b is not None and b["status"] == "done" and b["mean"] is not None:
            return b
    return None


def _output_units(task: str, head: str, n_classes) -> int:
    """Output units of a head: 1 for regression and the logistic head, one per class for
    softmax (as :class:`workbench.nets.engine.NetClassifier` builds them)."""
    if task != "classification" or head == "logistic":
        return 1
    return int(n_classes or 2)


def _load_table(doc: dict):
    """The sweep's table as the sweep saw it (TrialData), or None when it cannot be read
    or its SHA-256 no longer matches the sweep's."""
    from workbench.sweep.plan import SweepPlan
    from workbench.sweep.runner import load_data

    try:
        data, fingerprint = load_data(SweepPlan.from_dict(doc["plan"]))
    except (InputError, OSError, ValueError, KeyError, TypeError):
        return None
    if fingerprint.get("sha256") != (doc.get("fingerprint") or {}).get("sha256"):
        return None
    return data


def _table_facts(store, doc: dict, n_inputs) -> dict:
    """The advised head, the input width (with its basis) and the number of classes."""
    from workbench.data.profiling import TargetInfo, advise, analyse_target

    target = width = basis = None
    classes = None
    if n_inputs is not None:
        width, basis = int(n_inputs), "given by the caller"
    else:
        data = _load_table(doc)
        if data is not None:
            from workbench.data.preprocessing import build_preprocessor

            target = data.target
            classes = target.classes
            width = int(build_preprocessor(data.profile, target).fit_transform(data.X).shape[1])
            basis = "the preprocessed table"
    rows = store.sweep_rows(doc["sweep_id"])
    if rows is not None and classes is None:
        classes = rows["classes"]
    if target is None and rows is not None:
        import pandas as pd

        try:
            target = analyse_target(pd.DataFrame({doc["target"]: rows["target"]}),
                                    doc["target"], kind=doc["target_kind"])
        except InputError:
            target = None
    if target is None:  # the kind alone (a non-negative target then gets softplus)
        target = TargetInfo(name=doc["target"], kind=doc["target_kind"], task=doc["task"],
                            evidence={}, classes=classes)
    if width is None:
        roles = (doc["plan"].get("roles") or {})
        cols = (doc.get("fingerprint") or {}).get("columns") or []
        width = sum(1 for c in cols if c != doc["target"] and roles.get(c) != "ignore")
        basis = ("the table's feature columns (the table was not found, so one-hot and date "
                 "columns are not expanded)")
    return {"advised_head": advise(target).output_head, "n_inputs": width,
            "n_inputs_basis": basis, "n_classes": len(classes) if classes else None}


def _no_comparison() -> dict:
    return {"difference": None, "interval": None, "p_value": None, "tied_with_best": False,
            "p_better": None, "p_equivalent": None, "p_worse": None, "decision": None,
            "n_networks_better": None}


def _compare_baseline(b: dict, x: np.ndarray, n_train, n_test, *, rho: float, rope: float,
                      alpha: float) -> dict:
    """A baseline against the best network (row 0 of ``x``) by the corrected t-test and the
    Bayesian correlated t-test, and how many networks are practically better than it."""
    if b["status"] != "done" or len(b["scores"]) != x.shape[1]:
        return _no_comparison()
    s = np.asarray(b["scores"], dtype=float)  # (repeat, fold) order, as the rows of x
    cmp = bayes.correlated_ttest(s, x[0], rho=rho, rope=rope)
    _, p = corrected_ttest(x[0], s, float(np.mean(n_train)), float(np.mean(n_test)))
    p = _finite(p)
    better = sum(bayes.decide(bayes.correlated_ttest(row, s, rho=rho, rope=rope)) == "better"
                 for row in x)
    return _plain({"difference": cmp.mean, "interval": list(cmp.interval(0.95)),
                   "p_value": p, "tied_with_best": is_tied(p, alpha),
                   "p_better": cmp.p_better, "p_equivalent": cmp.p_equivalent,
                   "p_worse": cmp.p_worse, "decision": bayes.decide(cmp),
                   "n_networks_better": int(better)})


def _warnings(doc: dict, done: list[dict], x, n_test: dict, rho, rope: float) -> list[dict]:
    """The ``warnings`` list: ``[{code, text}]`` in :data:`WARNING_CODES` order."""
    out = []
    best = done[0] if done else None
    for name, code, tail in (
            ("constant", "no_network_beats_constant",
             "the networks may have learnt nothing from this table"),
            ("linear", "no_network_beats_linear",
             "a linear model does as well on this table")):
        b = next((b for b in doc["baselines"] if b["name"] == name), None)
        if best is None or b is None or b.get("n_networks_better") is None:
            continue
        if b["n_networks_better"] == 0:
            d = -b["difference"]
            lo, hi = (-v if v is not None else None for v in reversed(b["interval"]))
            out.append({"code": code, "text": (
                f"No network beats the {name} baseline ({b['estimator']}): the best network "
                f"scores {_num(best['mean'])} against its {_num(b['mean'])}, a difference of "
                f"{_num(d)} ({_num(lo)} to {_num(hi)}), and no network is practically better "
                f"than it (P(better) >= {bayes.THRESHOLD:g} with the region of practical "
                f"equivalence ±{_num(rope)}); {tail}.")})
    sizes = list(n_test.values())
    if sizes and min(sizes) < MIN_TEST_ROWS:
        n = int(min(sizes))
        out.append({"code": "few_test_rows", "text": (
            f"Only {n} test rows per fold (fewer than {MIN_TEST_ROWS}, a common-practice "
            "minimum): each fold score rests on so few rows that differences between "
            "configurations are mostly noise; use fewer folds (with more repeats) or more "
            "rows.")})
    others = done[1:]
    if len(others) >= 2:
        undecided = [i for i, c in enumerate(others, start=1) if c["decision"] == "undecided"]
        tied = sum(1 for c in others if c["tied_with_best"])
        if len(undecided) > len(others) / 2:
            text = (f"{len(undecided)} of the {len(others)} configurations compared with the "
                    f"best are undecided (neither practically equivalent nor worse at "
                    f"P >= {bayes.THRESHOLD:g}) and {tied} are tied with it at alpha "
                    f"{doc['significance_level']:g}: the folds cannot rank most of the grid.")
            if undecided:
                plan = doc["plan"]
                more = []
                for i in undecided:
                    need = verdict.repeats_needed(x[i] - x[0], folds=int(plan["folds"]),
                                                  repeats=int(plan["repeats"]), rho=rho,
                                                  rope=rope)
                    more.append(need["more"] if need["reachable"] else math.inf)
                median = float(np.median(more))
                if math.isfinite(median):
                    n = max(1, math.ceil(median))
                    text += (f" About {n} more repeat{'s' if n != 1 else ''} would decide "
                             "a difference of the median size among the undecided ones.")
                else:
                    text += (" More repeats alone would not decide most of the undecided "
                             "ones: their differences are smaller than the noise that "
                             "overlapping training sets leave.")
            out.append({"code": "mostly_undecided", "text": text})
    return out


def _finite(v):
    return float(v) if v is not None and math.isfinite(float(v)) else None


def _plain(obj):
    """JSON-able: NumPy scalars and tuples made plain, non-finite floats None."""
    if isinstance(obj, dict):
        return {k: _plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_plain(v) for v in obj]
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, int | np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        return _finite(obj)
    return obj


def _num(v) -> str:
    """A score for the words: four decimals, four significant digits for a runaway one."""
    if v is None or not math.isfinite(v):
        return "n/a"
    return f"{v:.4g}" if abs(v) >= 1e4 else f"{v:.4f}"


def recommended_rank(res: dict) -> int:
    """The rank of the verdict's recommended configuration (what ``export`` takes by default).

    Raises
    ------
    InputError
        (setting ``config``) when no configuration has finished, so there is
        nothing to recommend.
    """
    rec = (res.get("verdict") or {}).get("recommended")
    if rec is None or rec.get("rank") is None:
        raise InputError(f"sweep {res['sweep_id']} has no configuration whose every trial is "
                         "done, so none can be recommended; resume the sweep to finish it",
                         setting="config")
    return int(rec["rank"])


# --------------------------------------------------------------------------- the words
def configuration_label(c: dict) -> str:
    """``relu/identity [64,32] lr 0.001 alpha 0.0001``: a configuration in one phrase."""
    layers = ",".join(str(s) for s in c["layers"])
    return (f"{c['hidden']}/{c['head']} [{layers}] lr {c['learning_rate']:g} "
            f"alpha {c['alpha']:g}")


def honest_score_text(res: dict) -> str:
    """"CV mean X; selection-corrected Y (low–high), BBC-CV": the winner's honest score."""
    best = next((c for c in res["configurations"] if c.get("decision") == "best"), None)
    if best is None:
        return "no configuration has finished its cross-validation yet"
    cb = res["corrected_best"]
    head = f"CV mean {_num(best['mean'])}"
    if cb.get("estimate") is None:
        return f"{head}; no selection-corrected estimate ({cb['method']})"
    level = f", {cb['level']:.0%} interval" if cb.get("level") else ""
    return (f"{head}; selection-corrected {_num(cb['estimate'])} ({_num(cb['low'])}–"
            f"{_num(cb['high'])}), {cb['method']}{level}")


def verdict_heading(res: dict) -> str:
    """The line above the verdict: how configurations are judged."""
    return (f"Verdict on the rules of thumb for {res['target']} ({res['target_kind']}): "
            f"Bayesian correlated t-test, practically equivalent within "
            f"±{res['rope']:.4g} {res['metric']} ({res['rope_basis']}); a decision needs "
            f"P >= {res['decision_threshold']:g}.")


def verdict_statements(res: dict) -> list[dict]:
    """The verdict in words, the same in every view (command line, window, report).

    Returns
    -------
    list of dict
        ``{key, label, text}``: ``output`` and ``hidden`` (each rule of thumb:
        ``"<rule>: <words>"``), ``recommended`` (rank, configuration and the
        reason), ``score`` (:func:`honest_score_text`), ``factors`` (the
        sentence), then one per warning (key = its code, label "Warning").
    """
    out = []
    v = res.get("verdict")
    if v is None:
        out.append({"key": "verdict", "label": "Verdict",
                    "text": "no configuration has finished its cross-validation yet, so "
                            "there is nothing to judge"})
    else:
        for key, label in (("output", "Output head"), ("hidden", "Hidden layers")):
            rule = v[key]
            text = f"{rule['rule']}: {rule['words']}"
            tried = any(c[rule["factor"]] == rule["advised"] for c in res["configurations"])
            if rule.get("outcome") == "not_tested" and tried:
                text += "; sweep others beside it to test the rule"
            out.append({"key": key, "label": label, "text": text})
        rec = v["recommended"]
        chosen = next(c for c in res["configurations"] if c["index"] == rec["index"])
        out.append({"key": "recommended", "label": "Recommended",
                    "text": f"rank {rec['rank']}, {configuration_label(chosen)}: "
                            f"{rec['reason']}"})
        out.append({"key": "score", "label": "Winner's score", "text": honest_score_text(res)})
        out.append({"key": "factors", "label": "What matters", "text": res["factors_sentence"]})
    text = racing_text(res)
    if text:
        out.append({"key": "racing", "label": "Racing", "text": text})
    for w in res.get("warnings") or []:
        out.append({"key": w["code"], "label": "Warning", "text": w["text"]})
    return out


def racing_text(res: dict) -> str | None:
    """Which configurations racing stopped and when, in words (None when none was)."""
    stopped = [c for c in res["configurations"] if c.get("stopped")]
    if not stopped:
        return None
    parts = []
    for c in stopped:
        s = c["stopped"]
        parts.append(f"rank {c['rank']} {configuration_label(c)} after repeat "
                     f"{s['after_repeat'] + 1}, fold {s['after_fold'] + 1} "
                     f"({s['n_scores']} scores; {len(c['trials'])} trials run)")
    from workbench.sweep.racing import rule_text

    racing = res.get("racing") or {}
    saved = (racing.get("n_trials") or 0) - (racing.get("n_stored") or 0)
    return (f"{len(stopped)} configuration{'s' if len(stopped) != 1 else ''} {STOPPED}, "
            f"behind the best beyond doubt ({rule_text()}), "
            f"{saved} trial{'s' if saved != 1 else ''} not run; their scores are partial and "
            f"they are not eligible for the recommendation: " + "; ".join(parts) + ".")
