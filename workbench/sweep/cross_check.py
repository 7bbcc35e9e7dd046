"""Cross-check a stored sweep's recommended configuration on scikit-learn's own MLP.

The sweep trains every configuration on the project's NumPy engine
(:mod:`workbench.nets.engine`) with the fair start (the untrained network
predicts the training mean) and the stopping rule relative to the constant
predictor's loss. In its scikit-learn mode (``output_init="sklearn",
tol_mode="absolute"``, float64) the engine draws the same initial weights,
visits the rows in the same order and stops by the same rule as scikit-learn's
``MLPClassifier`` / ``MLPRegressor``, so the two must give the same network;
``tests/test_engine_parity.py`` holds them to a relative 1e-6.

:func:`cross_check` asks that question of the configuration a user is about to
trust: for the sweep's recommended configuration (or another rank) it refits,
on the sweep's own folds with the sweep's own seeds
(:meth:`workbench.sweep.plan.SweepPlan.model_seed`), the same pipeline
(:func:`workbench.data.preprocessing.build_pipeline`, preprocessing and target
scaling fitted inside each fold) twice -- once with the engine in its
scikit-learn mode, once with scikit-learn's MLP built exactly as ``--engine
sklearn`` builds it (:func:`workbench.sweep.trials.make_estimator`) -- scores
both on the fold's test rows with the sweep's scorer, and says per fold whether
the two scores agree to the parity tolerance, beside the score the sweep stored
(from the fair start, so it is expected to differ: the check is of the
arithmetic, not of the start).

scikit-learn's MLP offers fewer choices (hidden identity, logistic, tanh,
relu; output identity or exp with the Poisson loss for regression, logistic
for a binary and softmax for a multiclass target): for any other configuration
:attr:`CrossCheck.reason` says in one line why it cannot be checked, and no fit
is made.
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field

from workbench.errors import InputError

#: relative tolerance of the parity between the engine and scikit-learn's MLP, that of
#: ``tests/test_engine_parity.py`` (``RTOL``: loss curves, weights and predictions)
PARITY_RTOL = 1e-6
#: absolute tolerance beside it, that test's ``atol`` for predictions near zero
PARITY_ATOL = 1e-9

#: the engine's scikit-learn mode (the parity test's ``PARITY``), in float64
PARITY_MODE = {"output_init": "sklearn", "tol_mode": "absolute", "dtype": "float64"}


@dataclass
class FoldCheck:
    """One fold of the cross-check: the two scores, the stored one and the agreement."""

    repeat: int
    fold: int
    engine_score: float
    sklearn_score: float
    stored_score: float | None
    agree: bool
    engine_epochs: int
    sklearn_epochs: int
    engine_seconds: float
    sklearn_seconds: float

    @property
    def difference(self) -> float:
        """``|engine_score - sklearn_score|`` (inf when either is not finite)."""
        d = abs(self.engine_score - self.sklearn_score)
        return d if math.isfinite(d) else math.inf


@dataclass
class CrossCheck:
    """The answer of :func:`cross_check` (see :meth:`sentence` for it in words)."""

    sweep_id: str
    rank: int
    configuration: dict
    label: str
    metric: str
    expressible: bool
    reason: str | None = None
    estimator: str | None = None
    stored_engine: str = "numpy"
    folds: list[FoldCheck] = field(default_factory=list)
    rtol: float = PARITY_RTOL
    atol: float = PARITY_ATOL

    @property
    def all_agree(self) -> bool | None:
        """Whether every fold agrees (None when nothing was fitted)."""
        return all(f.agree for f in self.folds) if self.folds else None

    @property
    def largest_difference(self) -> float | None:
        return max(f.difference for f in self.folds) if self.folds else None

    def sentence(self) -> str:
        """The cross-check in words, the same in every view."""
        if not self.expressible:
            return (f"The configuration at rank {self.rank} ({self.label}) cannot be "
                    f"cross-checked on scikit-learn's MLP: {self.reason}.")
        n = len(self.folds)
        bad = [f for f in self.folds if not f.agree]
        tol = f"the parity tolerance (relative {self.rtol:g})"
        big = _g(self.largest_difference)
        if not bad:
            head = (f"On {'all ' if n > 1 else ''}{n} fold{'s' if n > 1 else ''} our engine in scikit-learn's mode and scikit-learn's "
                    f"{self.estimator} agree to {tol}, largest difference {big}: the engine "
                    "computes what scikit-learn computes for this configuration.")
        else:
            head = (f"On {len(bad)} of {n} folds our engine in scikit-learn's mode and "
                    f"scikit-learn's {self.estimator} differ by more than {tol} (largest "
                    f"difference {big}); the engine and scikit-learn do not compute the same "
                    "network here, so please report it.")
        stored = [f.stored_score for f in self.folds if f.stored_score is not None]
        if not stored:
            return head + " The sweep stored no score for these folds."
        ours = _mean(f.engine_score for f in self.folds if f.stored_score is not None)
        mean = _mean(stored)
        if self.stored_engine == "sklearn":
            return (head + f" The sweep itself ran scikit-learn's MLP (mean {_num(mean)} "
                    f"stored, {_num(ours)} here).")
        return (head + f" The stored scores come from the sweep's fair start (the untrained "
                f"network predicts the training mean; it stops relative to the constant "
                f"predictor's loss) in {self._stored_dtype()}, so they differ from these by "
                f"design: mean {_num(mean)} stored against {_num(ours)} in scikit-learn's "
                f"mode ({self.metric}, greater is better).")

    def _stored_dtype(self) -> str:
        return self.configuration.get("dtype") or "float32"

    def to_dict(self) -> dict:
        """A JSON-able dict: the fields, ``all_agree``, ``largest_difference`` and ``sentence``."""
        d = asdict(self)
        for f, fd in zip(self.folds, d["folds"]):
            for key in ("engine_score", "sklearn_score", "stored_score"):
                fd[key] = _finite(fd[key])
            fd["difference"] = _finite(f.difference)
        d["all_agree"] = self.all_agree
        d["largest_difference"] = _finite(self.largest_difference)
        d["sentence"] = self.sentence()
        return d


def _mean(values) -> float:
    values = list(values)
    return sum(values) / len(values) if values else math.nan


def _num(v) -> str:
    if v is None or not math.isfinite(v):
        return "n/a"
    return f"{v:.4g}" if abs(v) >= 1e4 else f"{v:.4f}"


def _g(v) -> str:
    return "n/a" if v is None else ("inf" if not math.isfinite(v) else f"{v:.2g}")


def _finite(v):
    return v if v is not None and math.isfinite(v) else None


def not_expressible_reason(task: str, hidden: str, head: str, kind: str | None = None) -> str | None:
    """Why scikit-learn's MLP cannot train this combination, or None when it can.

    Agrees with :func:`workbench.sweep.plan.sklearn_can_express` (tested), in words.
    """
    from workbench.nets.activations import SKLEARN_HIDDEN

    if hidden not in SKLEARN_HIDDEN:
        return (f"it has no {hidden} hidden activation (it offers "
                f"{', '.join(SKLEARN_HIDDEN)})")
    if task == "classification":
        natural = "logistic" if kind == "binary" else "softmax"
        if kind is not None and head != natural:
            target = "binary" if kind == "binary" else "multiclass"
            return (f"its classifier always uses the {natural} output for a {target} target, "
                    f"not {head}")
        if head not in ("logistic", "softmax"):
            return f"its classifier has no {head} output"
        return None
    if head not in ("identity", "exp"):
        return (f"its regressor has no {head} output (only identity with the squared error, "
                "or exp with the Poisson loss)")
    return None


def _estimators(plan, chosen: dict, random_state: int):
    """``(engine in scikit-learn's mode, scikit-learn's MLP)`` with the sweep's settings."""
    from workbench.sweep.trials import make_estimator

    cfg = {k: chosen[k] for k in ("index", "hidden", "head", "layers", "learning_rate",
                                  "alpha")}
    spec = {"task": plan.task, "epochs": plan.epochs, "early_stopping": plan.early_stopping,
            "batch_size": plan.batch_size, "random_state": int(random_state)}
    ref = make_estimator({**spec, "config": {**cfg, "engine": "sklearn"}})
    ours = make_estimator({**spec, "config": {**cfg, "engine": "numpy"},
                           "dtype": PARITY_MODE["dtype"]})
    shared = {k: v for k, v in ref.get_params(deep=False).items()
              if k in ours.get_params(deep=False) and k != "activation"}
    ours.set_params(**shared, output_init=PARITY_MODE["output_init"],
                    tol_mode=PARITY_MODE["tol_mode"])
    return ours, ref


def _fit_score(pipe, data, train, test, scorer):
    """Fit ``pipe`` on the fold's training rows; its test score, epochs and fit seconds."""
    import warnings

    import numpy as np
    from threadpoolctl import threadpool_limits

    y = np.asarray(data.y)
    with threadpool_limits(limits=1), warnings.catch_warnings(), \
            np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
        warnings.simplefilter("ignore")  # ConvergenceWarning: the sweep's epochs are the budget
        t0 = time.perf_counter()
        try:
            pipe.fit(data.X.iloc[train], y[train])
            seconds = time.perf_counter() - t0
            score = float(scorer(pipe, data.X.iloc[test], y[test]))
        except (ValueError, FloatingPointError, OverflowError):  # diverged: no score
            seconds, score = time.perf_counter() - t0, math.nan
    model = pipe.named_steps["model"]
    mlp = getattr(model, "regressor_", model)
    return score, int(getattr(mlp, "n_iter_", 0) or 0), seconds


def _check_folds(store, sweep_id: str, plan, folds) -> None:
    """The folds rebuilt from the plan must be the ones the sweep stored."""
    import numpy as np

    rows = store.sweep_rows(sweep_id)
    if rows is None:  # stored before the rows were kept: the plan's seeds are the record
        return
    stored = rows["folds"]
    for (r, f), (_train, test) in folds.items():
        if r < stored.shape[0] and not np.array_equal(np.flatnonzero(stored[r] == f),
                                                      np.sort(test)):
            raise InputError(f"the folds rebuilt for sweep {sweep_id} (repeat {r + 1}, fold "
                             f"{f + 1}) are not the ones it stored (another scikit-learn "
                             "version splits differently?), so its scores cannot be checked on "
                             "the same folds; run the sweep again", setting="sweep")


def cross_check(store, sweep_id: str, *, rank: int | None = None, results: dict | None = None,
                table=None, repeats: int | None = None, on_fold=None) -> CrossCheck:
    """Refit one configuration of a stored sweep on the engine's scikit-learn mode and on
    scikit-learn's MLP, fold by fold, and compare the scores.

    Parameters
    ----------
    store : workbench.sweep.store.Store
    sweep_id : str
    rank : int, optional
        The configuration's rank in the results (1 = best); default the verdict's
        recommended configuration (:func:`workbench.sweep.results.recommended_rank`).
    results : dict, optional
        The sweep's results document when the caller has it
        (:func:`workbench.sweep.results.sweep_results`), else it is computed.
    table : path, optional
        Where the sweep's table is now, when its stored path no longer reaches it
        (its SHA-256 must match the sweep's).
    repeats : int, optional
        Check only the first ``repeats`` repeats (default all: every stored fold).
    on_fold : callable, optional
        ``on_fold(done, total)`` after each fold (raise from it to stop).

    Returns
    -------
    CrossCheck
        Per fold (repeat-major) both scores, whether they agree to
        :data:`PARITY_RTOL` / :data:`PARITY_ATOL`, the epochs and fit seconds of
        each, and the score the sweep stored; or, for a configuration
        scikit-learn cannot express, ``expressible=False`` and the ``reason``.

    Raises
    ------
    InputError
        for an unknown sweep (setting ``sweep``), a rank out of range or a sweep
        with nothing to recommend (``config``), or a table that is missing or
        changed since the sweep (``table``).
    """
    from workbench.sweep.plan import SweepPlan
    from workbench.sweep.results import configuration_label, recommended_rank, sweep_results

    res = results if results is not None else sweep_results(store, sweep_id)
    cfgs = res["configurations"]
    if rank is None:
        rank = recommended_rank(res)
    if not 1 <= int(rank) <= len(cfgs):
        raise InputError(f"sweep {sweep_id} has {len(cfgs)} configuration(s); choose a rank "
                         f"from 1 to {len(cfgs)}", setting="config")
    rank = int(rank)
    chosen = cfgs[rank - 1]
    plan = SweepPlan.from_dict(res["plan"])
    out = CrossCheck(sweep_id=sweep_id, rank=rank,
                     configuration={**{k: chosen[k] for k in ("index", "hidden", "head",
                                                               "layers", "learning_rate",
                                                               "alpha", "engine")},
                                    "dtype": plan.dtype},
                     label=configuration_label(chosen), metric=res["metric"],
                     expressible=True, stored_engine=chosen["engine"])
    out.reason = not_expressible_reason(plan.task, chosen["hidden"], chosen["head"],
                                        plan.target_kind)
    if out.reason is not None:
        out.expressible = False
        return out
    data, folds = _sweep_data(store, sweep_id, res, plan, table)
    out.estimator = "MLPClassifier" if plan.task == "classification" else "MLPRegressor"
    _run_folds(out, plan, chosen, data, folds, repeats, on_fold)
    return out


def _sweep_data(store, sweep_id: str, res: dict, plan, table):
    """The sweep's table (checked against its fingerprint) and its folds."""
    from pathlib import Path

    from workbench.sweep.runner import load_data

    if table is not None:
        plan.table = str(Path(table).expanduser().resolve())
    if not Path(plan.table).expanduser().is_file():
        raise InputError(f"the sweep's table {plan.table} is not found; give its current path "
                         "(its SHA-256 is checked)", setting="table")
    data, fingerprint = load_data(plan)
    stored = res.get("fingerprint") or {}
    if fingerprint.get("sha256") != stored.get("sha256"):
        raise InputError(f"the table {plan.table} has changed since sweep {sweep_id} ran (its "
                         "SHA-256 no longer matches), so the folds cannot be rebuilt; restore "
                         "the table", setting="table")
    folds = plan.fold_indices(data.y)
    _check_folds(store, sweep_id, plan, folds)
    return data, folds


def _run_folds(out: CrossCheck, plan, chosen: dict, data, folds, repeats, on_fold) -> None:
    from sklearn.metrics import get_scorer

    from workbench.data.preprocessing import build_pipeline

    scorer = get_scorer(plan.metric)
    stored = {(t["repeat"], t["fold"]): t["test_score"] for t in chosen.get("trials", [])
              if t.get("status") == "done"}
    keys = sorted(k for k in folds if repeats is None or k[0] < int(repeats))
    for n, (r, f) in enumerate(keys, start=1):
        train, test = folds[(r, f)]
        ours, ref = _estimators(plan, chosen, plan.model_seed(r, f))
        a, a_ep, a_s = _fit_score(build_pipeline(data.profile, data.target, ours,
                                                 chosen["head"]), data, train, test, scorer)
        b, b_ep, b_s = _fit_score(build_pipeline(data.profile, data.target, ref,
                                                 chosen["head"]), data, train, test, scorer)
        agree = (math.isfinite(a) and math.isfinite(b)
                 and math.isclose(a, b, rel_tol=out.rtol, abs_tol=out.atol))
        out.folds.append(FoldCheck(repeat=r, fold=f, engine_score=a, sklearn_score=b,
                                   stored_score=stored.get((r, f)), agree=agree,
                                   engine_epochs=a_ep, sklearn_epochs=b_ep,
                                   engine_seconds=a_s, sklearn_seconds=b_s))
        if on_fold is not None:
            on_fold(n, len(keys))


def cross_check_stored(store_path, sweep_id: str, *, config_index: int | None = None,
                       table=None, progress_path=None) -> dict:
    """:func:`cross_check` for a process of its own (the window's Cross-check runs it so).

    Opens the store at ``store_path`` (SQLite lets it read while others write), picks the
    configuration by its ``config_index`` (its index in the plan, which does not move with
    the ranking; default the recommended one) and, when ``progress_path`` is given, writes
    ``"done total"`` to that file after each fold, so that another process can follow it.
    Returns :meth:`CrossCheck.to_dict`.
    """
    from pathlib import Path

    from workbench.sweep.results import sweep_results
    from workbench.sweep.store import Store, existing_store_path

    def on_fold(done, total):
        if progress_path is not None:
            tmp = Path(f"{progress_path}.tmp")
            tmp.write_text(f"{done} {total}")
            tmp.replace(progress_path)  # whole lines only: the reader never sees half a write

    with Store(existing_store_path(store_path)) as store:
        res = sweep_results(store, sweep_id)
        rank = None
        if config_index is not None:
            rank = next((n for n, c in enumerate(res["configurations"], start=1)
                         if c["index"] == int(config_index)), None)
            if rank is None:
                raise InputError(f"sweep {sweep_id} has no configuration {config_index}; "
                                 "choose one of its results", setting="config")
        return cross_check(store, sweep_id, rank=rank, results=res, table=table,
                           on_fold=on_fold).to_dict()
