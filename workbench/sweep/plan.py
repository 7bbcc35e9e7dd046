"""SweepPlan: the grid of configurations and the trials that evaluate them.

A *plan* says what to try on which table: the hidden activations, the output
heads, the hidden-layer shapes, the learning rates and L2 strengths, and how to
evaluate them (K folds, stratified for classification, repeated R times with a
seed per repeat, a number of epochs, early stopping or not, a scikit-learn
scorer name).

A *configuration* is one point of the grid (hidden x head x layers x learning
rate x alpha). A *trial* is one configuration on one fold of one repeat, so a
plan has ``n_configurations * K * R`` trials. Every configuration sees the same
folds and, on a given fold, the same weight-initialisation seed, so that the
fold scores of two configurations are paired (the corrected t-test of
:mod:`workbench.sweep.statistics` relies on it).

Each configuration names the engine that trains it. ``engine="auto"`` (the
default) and ``"numpy"`` train every configuration on the project's NumPy engine
(:mod:`workbench.nets.engine`), which gives every head the same fair start (the
untrained network predicts the training mean) and the same stopping rule (relative
to the constant predictor's loss), and is 3-4x faster per fit than scikit-learn's
MLP, with which it agrees to float64 round-off in its scikit-learn mode.
``engine="sklearn"`` trains on scikit-learn's own ``MLPRegressor`` /
``MLPClassifier`` where it can express the combination (hidden activation in
:data:`workbench.nets.activations.SKLEARN_HIDDEN` and the head scikit-learn uses
for the task: identity or exp with the Poisson loss for regression, logistic /
softmax for classification), with scikit-learn's own initialisation and stopping
rule: its output layer cannot be started elsewhere without its private hooks
(``_init_coef``). ``"sklearn"`` for a combination it cannot express is an
:class:`InputError`.

A plan is plain data: :meth:`SweepPlan.to_dict` gives a JSON-able dict and
:meth:`SweepPlan.from_dict` reads it back (the store keeps it in the sweep row,
``--resume`` rebuilds the sweep from it).

Baselines
---------
Beside the networks every plan (by default) evaluates two *reference
configurations* on the same folds, with the same preprocessing and metric
(:data:`BASELINES`): ``constant``, scikit-learn's ``DummyRegressor(strategy="mean")``
/ ``DummyClassifier(strategy="prior")``, and ``linear``, ``Ridge`` /
``LogisticRegression`` (see :func:`workbench.sweep.trials.make_baseline`). They are
trials like the networks' (stored, resumed, run on Dask, with out-of-fold
predictions) but are not configurations of the grid: :meth:`SweepPlan.configurations`,
:attr:`SweepPlan.n_configurations`, :attr:`SweepPlan.n_trials` and
:meth:`SweepPlan.trials` count the networks only; :meth:`SweepPlan.baseline_configurations`
and :meth:`SweepPlan.baseline_trials` give the references, indexed after the
grid (``n_configurations + j``), so that no network index changes.

Learning rates
--------------
``learning_rates=["tune"]`` (``--learning-rate tune``; or ``tune_learning_rate=True``)
puts :data:`LEARNING_RATE_GRID` in the grid, so that every hidden activation x
head is tried at the same learning rates -- an equal tuning budget per
candidate.

Examples
--------
>>> plan = SweepPlan(table="t.csv", target="y", task="regression",
...                  target_kind="signed", hidden=["relu", "gelu"],
...                  heads=["identity"], layers=[(16,)], folds=3, repeats=2)
>>> len(plan.configurations()), len(plan.trials())
(2, 12)
>>> [c.engine for c in plan.configurations()]
['numpy', 'numpy']
"""

from __future__ import annotations

import itertools
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from workbench.errors import InputError
from workbench.nets.activations import SKLEARN_HEADS, SKLEARN_HIDDEN, resolve_head, resolve_hidden

#: 2: ``baselines`` and ``tune_learning_rate`` (plans of version 1 had no baselines)
PLAN_VERSION = 2

#: the reference configurations a plan can run beside the networks, in this order
BASELINES = ("constant", "linear")

#: the learning rates ``"tune"`` stands for (Adam's initial step size).
#:
#: Three values evenly spaced on a log scale from 1e-3 to 3e-2:
#:
#: - 1e-3 is Adam's default step size (Kingma & Ba 2015, Algorithm 1; also
#:   scikit-learn's ``learning_rate_init`` default), the usual starting point;
#: - 3e-2 is about the largest rate at which Adam still trains small networks on
#:   standardised tabular inputs without diverging, in the batch sizes used here
#:   (common practice; from memory, not from a cited study);
#: - 5.5e-3 is their geometric mean sqrt(1e-3 x 3e-2) = 5.48e-3 rounded to two
#:   significant figures, so the ratio between neighbours is about 5.5 both ways.
#:
#: Searching a learning rate on a log scale rather than a linear one is common
#: practice (Bergstra & Bengio 2012, "Random search for hyper-parameter
#: optimization", JMLR 13, sample it log-uniformly). Every hidden activation x
#: head gets the same three values, so a ranking does not reflect which
#: activation one shared rate happens to suit (Choi et al. 2019; Dodge et al. 2019).
LEARNING_RATE_GRID = (0.001, 0.0055, 0.03)

#: the word that stands for :data:`LEARNING_RATE_GRID` in a list of learning rates
TUNE = "tune"

#: the most repeats a plan may have. Nadeau & Bengio's (2003) corrected variance of the
#: mean fold difference (:mod:`workbench.sweep.statistics`) is s^2 (1/(k r) + n2/n1) with
#: n2/n1 = 1/(k-1) for k folds; the second term does not shrink with r, and
#: (1/(k r)) / (1/(k-1)) < 1/r, so at r = 100 the corrected standard error is within
#: sqrt(1.01) = 1.005 of its limit for endless repeats, whatever k: more repeats narrow it
#: by under 0.5 %, while each costs a full k-fold run and the plan's fold assignment
#: grows by one row of the table per repeat.
MAX_REPEATS = 100

#: the most network trials (configurations x folds x repeats) a plan may have: at one
#: second a trial (a small network on a few thousand rows) this is over half a day on
#: two cores, beyond which a grid is better narrowed first (a design choice, not a
#: cited figure); planning and storing such a sweep stay quick (one store row per trial)
MAX_TRIALS = 100_000

#: scikit-learn scorer names the sweep offers, per task
CLASSIFICATION_METRICS = ("accuracy", "balanced_accuracy", "roc_auc", "neg_log_loss")
REGRESSION_METRICS = ("r2", "neg_root_mean_squared_error", "neg_mean_absolute_error",
                      "neg_mean_poisson_deviance")

#: the default metric per target kind (see :func:`default_metric`)
DEFAULT_METRIC = {
    "binary": "roc_auc",
    "multiclass": "balanced_accuracy",
    "signed": "r2",
    "non_negative": "r2",
    "bounded": "r2",
    "count": "neg_mean_poisson_deviance",
}

ENGINES = ("auto", "numpy", "sklearn")

#: heads whose predictions are always > 0, so the Poisson deviance is defined
_POSITIVE_HEADS = {"exp"}

#: scikit-learn scorers that are undefined unless every prediction is > 0
_POSITIVE_PREDICTION_METRICS = {"neg_mean_poisson_deviance", "neg_mean_gamma_deviance"}


def default_metric(kind: str, heads=None) -> str:
    """The metric a sweep uses when the user names none.

    Binary targets use ``roc_auc`` (threshold-free, insensitive to class
    imbalance), multiclass targets ``balanced_accuracy``, continuous targets
    ``r2``. Count targets use ``neg_mean_poisson_deviance`` when every head
    tried gives strictly positive predictions (the deviance is undefined
    otherwise), else ``r2``. These are common-practice choices, not rules.

    Parameters
    ----------
    kind : str
        Target kind from the intake (binary, multiclass, signed, non_negative,
        count, bounded).
    heads : iterable of str, optional
        The heads the sweep will try.
    """
    if kind not in DEFAULT_METRIC:
        raise InputError(f"unknown target kind {kind!r}; expected one of: "
                         f"{', '.join(DEFAULT_METRIC)}", setting="kind")
    metric = DEFAULT_METRIC[kind]
    if metric == "neg_mean_poisson_deviance" and heads is not None:
        if not set(heads) <= _POSITIVE_HEADS:
            metric = "r2"
    return metric


def check_metric(metric: str, task: str, kind: str | None = None) -> str:
    """Validate a scorer name for a task; return it.

    Raises
    ------
    InputError
        when the name is not a scikit-learn scorer or does not suit the task.
    """
    from sklearn.metrics import get_scorer_names

    name = str(metric).strip()
    if name not in get_scorer_names():
        offered = ", ".join(CLASSIFICATION_METRICS if task == "classification" else REGRESSION_METRICS)
        raise InputError(f"unknown metric {metric!r}; choose a scikit-learn scorer name such as: "
                         f"{offered}", setting="metric")
    if task == "classification" and name in REGRESSION_METRICS:
        raise InputError(f"metric {name!r} is for regression but the target is a classification "
                         f"target; choose one of: {', '.join(CLASSIFICATION_METRICS)}", setting="metric")
    if task == "regression" and name in CLASSIFICATION_METRICS:
        raise InputError(f"metric {name!r} is for classification but the target is a regression "
                         f"target; choose one of: {', '.join(REGRESSION_METRICS)}", setting="metric")
    if name == "roc_auc" and kind == "multiclass":
        raise InputError("metric 'roc_auc' needs a binary target; for a multiclass target use "
                         "'roc_auc_ovr' or 'balanced_accuracy'", setting="metric")
    return name


def sklearn_can_express(task: str, hidden: str, head: str, kind: str | None = None) -> bool:
    """Whether scikit-learn's own MLP implements this combination.

    scikit-learn's MLP offers the hidden activations identity, logistic, tanh
    and relu; its regressor's output is the identity (squared error) or, with
    ``loss="poisson"``, the exponential; its classifier's output is logistic
    for a binary target and softmax for a multiclass one, both with log-loss
    (so a softmax head on a binary target needs the NumPy engine).
    """
    if hidden not in SKLEARN_HIDDEN or (task, head) not in SKLEARN_HEADS:
        return False
    if task == "classification" and kind is not None:
        return head == ("logistic" if kind == "binary" else "softmax")
    return True


def choose_engine(requested: str, task: str, hidden: str, head: str,
                  kind: str | None = None) -> str:
    """The engine that trains one configuration ("numpy" or "sklearn").

    ``auto`` is the NumPy engine for every configuration (see the module docstring:
    the fair start and the relative stopping rule); ``sklearn`` only where
    :func:`sklearn_can_express` says so.
    """
    if requested not in ENGINES:
        raise InputError(f"unknown engine {requested!r}; choose one of: {', '.join(ENGINES)}",
                         setting="engine")
    if requested == "auto":
        return "numpy"
    if requested == "sklearn" and not sklearn_can_express(task, hidden, head, kind):
        raise InputError(
            f"scikit-learn's MLP cannot express hidden {hidden!r} with head {head!r} for "
            f"{task}; choose the engine auto or numpy (it offers hidden "
            f"{', '.join(SKLEARN_HIDDEN)} with its own output layer)", setting="engine")
    return requested


def parse_layers(text) -> tuple[int, ...]:
    """Hidden-layer shape from ``"64"``, ``"64,32"``, an int or a sequence of ints."""
    if isinstance(text, int | np.integer):
        sizes = (int(text),)
    elif isinstance(text, str):
        parts = text.replace("x", ",").split(",")
        if any(not p.strip() for p in parts) and text.strip():
            raise InputError(f"hidden-layer shape {text!r} has an empty width (two commas in a "
                             "row, or one at an end); write e.g. 64 or 64,32", setting="layers")
        parts = [p for p in parts if p.strip()]
        try:
            sizes = tuple(int(p) for p in parts)
        except ValueError:
            raise InputError(f"hidden-layer shape {text!r} is not a list of integers; "
                             "write e.g. 64 or 64,32", setting="layers") from None
    else:
        sizes = tuple(int(s) for s in text)
    if not sizes or any(s < 1 for s in sizes):
        raise InputError(f"hidden-layer shape {text!r} needs one or more positive widths, e.g. "
                         "64,32", setting="layers")
    return sizes


def layers_text(layers) -> str:
    return ",".join(str(s) for s in layers)


def derived_seed(*parts: int) -> int:
    """A 31-bit seed derived from integers with NumPy's SeedSequence."""
    return int(np.random.SeedSequence([int(p) for p in parts]).generate_state(1)[0] >> 1)


@dataclass(frozen=True)
class Configuration:
    """One point of the grid."""

    index: int
    hidden: str
    head: str
    layers: tuple[int, ...]
    learning_rate: float
    alpha: float
    engine: str

    @property
    def label(self) -> str:
        return (f"{self.hidden}/{self.head} [{layers_text(self.layers)}] "
                f"lr={self.learning_rate:g} alpha={self.alpha:g}")

    def to_dict(self) -> dict:
        d = asdict(self)
        d["layers"] = list(self.layers)
        return d

    @classmethod
    def from_dict(cls, d: dict) -> Configuration:
        return cls(index=int(d["index"]), hidden=d["hidden"], head=d["head"],
                   layers=tuple(int(s) for s in d["layers"]),
                   learning_rate=float(d["learning_rate"]), alpha=float(d["alpha"]),
                   engine=d["engine"])


@dataclass(frozen=True)
class Baseline:
    """A reference configuration: a constant predictor or a linear model.

    ``index`` follows the grid's (``n_configurations + j``); ``name`` is one of
    :data:`BASELINES`. The estimator itself is made by
    :func:`workbench.sweep.trials.make_baseline`.
    """

    index: int
    name: str
    kind: str = "baseline"
    engine: str = "sklearn"

    @property
    def label(self) -> str:
        return f"baseline {self.name}"

    def to_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> Baseline:
        return cls(index=int(d["index"]), name=d["name"])


@dataclass(frozen=True)
class Trial:
    """One configuration on one fold of one repeat."""

    config_index: int
    repeat: int
    fold: int

    @property
    def key(self) -> tuple[int, int, int]:
        return (self.config_index, self.repeat, self.fold)


@dataclass
class SweepPlan:
    """Everything a sweep needs to run, as plain data.

    Parameters
    ----------
    table : str
        Path of the table file.
    target : str
        Name of the target column.
    task : {"regression", "classification"}
    target_kind : str
        The intake's target kind (binary, multiclass, signed, non_negative,
        count, bounded).
    hidden : list of str
        Hidden activations to try (names from :data:`workbench.nets.activations.HIDDEN`).
    heads : list of str
        Output heads to try, already resolved (no ``"auto"``) and accepted by
        the compatibility guard.
    layers : list of tuple of int
        Hidden-layer shapes, e.g. ``[(64,), (64, 32)]``.
    learning_rates, alphas : list of float
        Adam's initial learning rates and L2 strengths to try. The word
        ``"tune"`` among the learning rates stands for :data:`LEARNING_RATE_GRID`
        (and sets ``tune_learning_rate``); it cannot be mixed with numbers.
    tune_learning_rate : bool
        Try every configuration at each rate of :data:`LEARNING_RATE_GRID`;
        it replaces ``learning_rates`` (what the window's "tune" choice sets).
    baselines : list of str
        Reference configurations run on the same folds (names from
        :data:`BASELINES`; default both, ``[]`` for none).
    folds, repeats : int
        K and R of the repeated (stratified) K-fold cross-validation.
    epochs : int
        Maximum epochs (``max_iter``).
    early_stopping : bool
        Hold out 10 % of each training fold and stop when its score stalls.
    metric : str or None
        scikit-learn scorer name; None picks :func:`default_metric`.
    engine : {"auto", "numpy", "sklearn"}
        ``auto`` and ``numpy``: the NumPy engine for every configuration;
        ``sklearn``: scikit-learn's MLP (see :func:`choose_engine`).
    seed : int
        Seeds the folds of every repeat and the weight initialisation of every trial.
    batch_size : int or "auto"
    dtype : {"float32", "float64"}
        Precision of the NumPy engine (scikit-learn's MLP trains in float64).
    sheet : str or None
        Sheet name for Excel tables.
    requested_output : str
        What the user asked for as output heads (``auto``, ``all`` or a list),
        kept for the record.
    refused_heads, head_warnings : dict
        ``{head: reason}`` from the intake's compatibility guard: heads left out
        of the grid, and heads kept with a warning.
    roles : dict
        ``{column: "feature" | "ignore"}``: the user's changes to the profile's
        column roles (the window's profile table, ``--role``); applied by
        :func:`workbench.sweep.runner.load_data` before the preprocessing is built.
    kind : str or None
        The target kind set by the user (``--kind``, the window's kind box), or
        None when the detected kind is used; :func:`workbench.sweep.runner.load_data`
        analyses the target with it, so resume and export read the target alike.
    race : bool
        Racing (``--race``, the window's racing check box): after each block of
        folds, from the second on, stop the configurations that the full sweep
        would rank below the current best, beyond doubt, so that none of their
        remaining trials run (:mod:`workbench.sweep.racing` gives the rule
        and why it protects the winner). Default False: every trial runs.
    race_rule : dict
        The racing rule the sweep is raced by (:func:`workbench.sweep.racing.current_rule`:
        threshold, first look, test, stop, moderation), recorded when the plan is made,
        so that a sweep resumed by a later version with another rule keeps its own.
        Empty without racing.
    """

    table: str
    target: str
    task: str
    target_kind: str
    hidden: list[str]
    heads: list[str]
    layers: list[tuple[int, ...]] = field(default_factory=lambda: [(64,)])
    learning_rates: list[float] = field(default_factory=lambda: [0.001])
    alphas: list[float] = field(default_factory=lambda: [0.0001])
    folds: int = 5
    repeats: int = 2
    epochs: int = 200
    early_stopping: bool = False
    metric: str | None = None
    engine: str = "auto"
    seed: int = 0
    batch_size: int | str = "auto"
    dtype: str = "float32"
    sheet: str | None = None
    requested_output: str = "auto"
    refused_heads: dict = field(default_factory=dict)
    head_warnings: dict = field(default_factory=dict)
    roles: dict = field(default_factory=dict)
    kind: str | None = None
    tune_learning_rate: bool = False
    baselines: list[str] = field(default_factory=lambda: list(BASELINES))
    race: bool = False
    race_rule: dict = field(default_factory=dict)

    def __post_init__(self):
        self.validate()

    # ------------------------------------------------------------------ checks
    def validate(self) -> None:
        """Check the plan; raise :class:`InputError` naming the first problem."""
        if self.task not in ("regression", "classification"):
            raise InputError(f"task must be regression or classification, not {self.task!r}")
        try:
            self.hidden = list(dict.fromkeys(resolve_hidden(h) for h in self.hidden))
        except ValueError as exc:
            raise InputError(str(exc), setting="hidden") from None
        try:
            self.heads = list(dict.fromkeys(resolve_head(h, self.task).name for h in self.heads))
        except ValueError as exc:
            raise InputError(str(exc), setting="heads") from None
        if self.kind is not None and self.kind != self.target_kind:
            raise InputError(f"the target kind set by the user ({self.kind}) differs from the "
                             f"plan's target kind ({self.target_kind})", setting="kind")
        bad_roles = {c: r for c, r in dict(self.roles).items() if r not in ("feature", "ignore")}
        if bad_roles or self.target in self.roles:
            raise InputError(f"column roles must be feature or ignore (and not for the target), "
                             f"got {bad_roles or {self.target: self.roles[self.target]}}", setting="roles")
        if not self.hidden:
            raise InputError("the plan has no hidden activation to try; name at least one",
                             setting="hidden")
        if not self.heads:
            raise InputError("the plan has no output head to try; name at least one",
                             setting="heads")
        self.layers = list(dict.fromkeys(parse_layers(s) for s in self.layers))
        rates = _split_list(self.learning_rates) if isinstance(self.learning_rates, str) \
            else list(self.learning_rates)
        words = [isinstance(v, str) and v.strip().lower() == TUNE for v in rates]
        if any(words):
            if not all(words):
                raise InputError(f"give either {TUNE!r} or a list of learning rates, not both",
                                 setting="learning_rate")
            self.tune_learning_rate = True
        self.tune_learning_rate = bool(self.tune_learning_rate)
        if self.tune_learning_rate:
            rates = list(LEARNING_RATE_GRID)
        try:
            self.learning_rates = list(dict.fromkeys(float(v) for v in rates))
        except (TypeError, ValueError):
            raise InputError(f"learning rates must be positive numbers or {TUNE!r}, e.g. 0.001",
                             setting="learning_rate") from None
        self.alphas = list(dict.fromkeys(float(v) for v in self.alphas))
        if not self.learning_rates or any(not np.isfinite(v) or v <= 0 for v in self.learning_rates):
            raise InputError("learning rates must be positive numbers, e.g. 0.001",
                             setting="learning_rate")
        if not self.alphas or any(not np.isfinite(v) or v < 0 for v in self.alphas):
            raise InputError("L2 strengths (alpha) must be numbers >= 0, e.g. 0.0001", setting="alpha")
        if int(self.folds) < 2:
            raise InputError(f"the number of folds must be at least 2, got {self.folds}",
                             setting="folds")
        if int(self.repeats) < 1:
            raise InputError(f"the number of repeats must be at least 1, got {self.repeats}",
                             setting="repeats")
        if int(self.epochs) < 1:
            raise InputError(f"the number of epochs must be at least 1, got {self.epochs}",
                             setting="epochs")
        self.folds, self.repeats, self.epochs = int(self.folds), int(self.repeats), int(self.epochs)
        if self.repeats > MAX_REPEATS:
            raise InputError(f"the number of repeats is at most {MAX_REPEATS} (got {self.repeats}): "
                             "beyond that, more repeats narrow the corrected t-test's standard "
                             "error by under 0.5 %, at the cost of a full cross-validation each",
                             setting="repeats")
        if self.n_trials > MAX_TRIALS:
            raise InputError(f"the plan has {self.n_configurations:,} configurations x "
                             f"{self.folds} folds x {self.repeats} repeats = {self.n_trials:,} "
                             f"trials, over the {MAX_TRIALS:,} a sweep may have; try fewer "
                             "configurations, folds or repeats, or narrow the grid in two "
                             "sweeps")
        try:
            self.seed = int(self.seed)
        except (TypeError, ValueError):
            raise InputError(f"the seed must be a whole number from 0 up, got {self.seed!r}",
                             setting="seed") from None
        if self.seed < 0:
            raise InputError(f"the seed must be a whole number from 0 up, got {self.seed}",
                             setting="seed")
        baselines = [str(b).strip().lower() for b in _split_list(self.baselines)]
        unknown = [b for b in baselines if b not in BASELINES]
        if unknown:
            raise InputError(f"unknown baseline {unknown[0]!r}; choose from: "
                             f"{', '.join(BASELINES)}")
        self.baselines = [b for b in BASELINES if b in baselines]  # fixed order, no repeats
        if not isinstance(self.race, bool | np.bool_):
            raise InputError(f"racing is on or off (true or false), not {self.race!r}")
        self.race = bool(self.race)
        if self.race:
            from workbench.sweep.racing import check_rule

            try:
                self.race_rule = check_rule(dict(self.race_rule or {}))
            except (TypeError, ValueError) as exc:
                raise InputError(f"racing rule: {exc}", setting="sweep") from None
        else:
            self.race_rule = {}
        if self.dtype not in ("float32", "float64"):
            raise InputError(f"dtype must be float32 or float64, not {self.dtype!r}")
        if self.batch_size != "auto":
            self.batch_size = int(self.batch_size)
            if self.batch_size < 1:
                raise InputError("batch size must be a positive integer or 'auto'")
        if self.metric is None:
            self.metric = default_metric(self.target_kind, self.heads)
        self.metric = check_metric(self.metric, self.task, self.target_kind)
        if self.metric in _POSITIVE_PREDICTION_METRICS:
            if self.target_kind == "signed":
                raise InputError(f"metric {self.metric!r} is undefined for a target with negative "
                                 "values; choose r2, neg_root_mean_squared_error or "
                                 "neg_mean_absolute_error", setting="metric")
            unsafe = [h for h in self.heads if h not in _POSITIVE_HEADS]
            if unsafe:
                raise InputError(f"metric {self.metric!r} is undefined for predictions of 0 or "
                                 f"below, which the head(s) {', '.join(unsafe)} can give; use it "
                                 "with the exp output head only, or choose another metric such "
                                 "as r2", setting="metric")
        # raises for an engine that cannot express a combination
        self.configurations()

    # ------------------------------------------------------------------ grid
    def configurations(self) -> list[Configuration]:
        """The grid, in a fixed order (hidden, head, layers, learning rate, alpha)."""
        out = []
        grid = itertools.product(self.hidden, self.heads, self.layers, self.learning_rates,
                                 self.alphas)
        for i, (h, o, lay, lr, a) in enumerate(grid):
            out.append(Configuration(i, h, o, tuple(lay), float(lr), float(a),
                                     choose_engine(self.engine, self.task, h, o,
                                                   self.target_kind)))
        return out

    def baseline_configurations(self) -> list[Baseline]:
        """The reference configurations, indexed after the grid (module docstring)."""
        n = self.n_configurations
        return [Baseline(n + j, name) for j, name in enumerate(self.baselines)]

    def baseline_trials(self) -> list[Trial]:
        """Every baseline trial, ordered repeat-major then fold then baseline."""
        return [Trial(b.index, r, f) for r in range(self.repeats) for f in range(self.folds)
                for b in self.baseline_configurations()]

    @property
    def n_configurations(self) -> int:
        return (len(self.hidden) * len(self.heads) * len(self.layers)
                * len(self.learning_rates) * len(self.alphas))

    @property
    def n_trials(self) -> int:
        """Trials of the networks (the baselines' trials are not counted)."""
        return self.n_configurations * self.folds * self.repeats

    def trials(self) -> list[Trial]:
        """Every trial, ordered repeat-major then fold then configuration.

        This order spreads each configuration over the whole sweep, so that an
        interrupted sweep has seen every configuration on its first folds.
        """
        return [Trial(c, r, f) for r in range(self.repeats) for f in range(self.folds)
                for c in range(self.n_configurations)]

    # ------------------------------------------------------------------ seeds, folds
    def split_seed(self, repeat: int) -> int:
        """The shuffling seed of the folds of one repeat."""
        return derived_seed(self.seed, repeat, 0)

    def model_seed(self, repeat: int, fold: int) -> int:
        """The weight-initialisation / batch-shuffling seed of every trial on a fold.

        The same for every configuration, so paired trials differ only in the
        configuration (common random numbers).
        """
        return derived_seed(self.seed, repeat, fold + 1, 1)

    def splitter(self, repeat: int):
        """The scikit-learn splitter of one repeat (StratifiedKFold for classification)."""
        from sklearn.model_selection import KFold, StratifiedKFold

        cls = StratifiedKFold if self.task == "classification" else KFold
        return cls(n_splits=self.folds, shuffle=True, random_state=self.split_seed(repeat))

    def fold_indices(self, y) -> dict[tuple[int, int], tuple[np.ndarray, np.ndarray]]:
        """``{(repeat, fold): (train_rows, test_rows)}`` for a target vector ``y``.

        Raises
        ------
        InputError
            when the table is too small for K folds (or a class has fewer than
            K rows, for stratified folds).
        """
        y = np.asarray(y)
        n = len(y)
        if n < 4:  # two folds of two rows: the least that trains and tests on each side
            raise InputError(f"the table has {n} usable row{'s' if n != 1 else ''} (with a "
                             "target); cross-validation needs at least 4 (two folds of two "
                             "rows); add rows", setting="table")
        if n < 2 * self.folds:
            raise InputError(f"the table has {n} usable rows, too few for {self.folds} folds of "
                             f"at least two rows; use at most {n // 2} folds, or more rows",
                             setting="folds")
        if self.task == "classification":
            labels, counts = np.unique(y.astype(str), return_counts=True)
            rarest = int(counts.min())
            name = str(labels[int(np.argmin(counts))])
            if rarest < 2:
                raise InputError(f"class {name!r} of the target has only 1 row; stratified folds "
                                 "need at least 2 rows of every class (one to train on, one to "
                                 "test); add rows of that class, merge it with another, or "
                                 "remove its row", setting="target")
            if rarest < self.folds:
                raise InputError(f"the rarest class ({name!r}) has {rarest} rows, fewer than "
                                 f"the {self.folds} folds; use {rarest} folds, or merge "
                                 "rare classes", setting="folds")
        out = {}
        for r in range(self.repeats):
            ys = y.astype(str) if self.task == "classification" else y
            for f, (tr, te) in enumerate(self.splitter(r).split(np.zeros((n, 1)), ys)):
                out[(r, f)] = (tr, te)
        return out

    # ------------------------------------------------------------------ JSON
    def to_dict(self) -> dict:
        """A JSON-able dict (layers as lists)."""
        d = asdict(self)
        d["layers"] = [list(s) for s in self.layers]
        d["plan_version"] = PLAN_VERSION
        return d

    @classmethod
    def from_dict(cls, d: dict) -> SweepPlan:
        """Rebuild a plan from :meth:`to_dict`'s output."""
        d = dict(d)
        version = d.pop("plan_version", PLAN_VERSION)
        if version > PLAN_VERSION:
            raise InputError(f"this plan was written by a newer workbench (plan version {version}); "
                             "upgrade the workbench to read it")
        if version < 2:  # sweeps stored before baselines existed ran none
            d.setdefault("baselines", [])
        d["layers"] = [tuple(s) for s in d.get("layers", [(64,)])]
        known = set(cls.__dataclass_fields__)
        return cls(**{k: v for k, v in d.items() if k in known})


# --------------------------------------------------------------------------- building a plan


def _split_list(value) -> list[str]:
    if value is None:
        return []
    if isinstance(value, str):
        value = [value]
    out = []
    for v in value:
        out.extend(p.strip() for p in str(v).split(",") if p.strip())
    return out


def _refuse_empty(value, what: str, setting: str, example: str) -> None:
    """Refuse a list the user gave with nothing in it, or with an empty item
    (``''``, ``'relu,,gelu'``, ``'64,'``): None means "the default", an empty list
    never does."""
    if value is None:
        return
    items = [value] if isinstance(value, str) else list(value)
    if not items:
        raise InputError(f"the {what} list is empty; name at least one, or leave the setting "
                         "out for the default", setting=setting)
    for item in items:
        if not isinstance(item, str):
            continue
        if not item.strip():
            raise InputError(f"the {what} are given as an empty text; name at least one, or "
                             "leave the setting out for the default", setting=setting)
        if any(not part.strip() for part in item.split(",")):
            raise InputError(f"the {what} {item!r} have an empty item (nothing between two "
                             f"commas, or at an end); name each one, e.g. {example}",
                             setting=setting)


def _numbers(value, what: str, setting: str) -> list[float]:
    out = []
    for p in _split_list(value):
        try:
            out.append(float(p))
        except ValueError:
            hint = f"0.001 (or {TUNE})" if setting == "learning_rate" else "0.001"
            raise InputError(f"{what} {p!r} is not a number; write e.g. {hint}",
                             setting=setting) from None
    return out


def resolve_heads(target, output="auto") -> tuple[list[str], dict, dict]:
    """The heads to try for ``output`` (``auto``, ``all`` or names), guarded.

    Returns
    -------
    heads : list of str
        Accepted heads, in the requested order (``auto``: the advised head).
    refused : dict
        ``{head: reason}`` for heads the compatibility guard refused.
    warnings : dict
        ``{head: reason}`` for heads accepted with a warning.

    Raises
    ------
    InputError
        when every requested head is refused, naming each and why.
    """
    from workbench.data.profiling import advise, check_head
    from workbench.nets.activations import head_names

    names = _split_list(output) or ["auto"]
    wanted = []
    for n in names:
        key = n.lower()
        if key == "auto":
            wanted.append(advise(target).output_head)
        elif key == "all":
            wanted.extend(head_names(target.task))
        else:
            wanted.append(key)
    heads, refused, warns = [], {}, {}
    for n in dict.fromkeys(wanted):
        chk = check_head(target, n)
        name = chk.head or n
        if not chk.allowed:
            refused[name] = chk.reason
        elif name not in heads:
            heads.append(name)
            if chk.warning:
                warns[name] = chk.reason
    if not heads:
        why = "; ".join(f"{h}: {r}" for h, r in refused.items())
        raise InputError(f"every requested output head is refused for target {target.name!r} "
                         f"({target.kind}): {why}", setting="heads")
    return heads, refused, warns


def read_table(table, sheet=None):
    """The table a plan is built from (:func:`workbench.data.intake.load_table`), with a
    named worksheet refused for a table that has none. The sweep command reads it once
    and hands the frame to :func:`build_plan` and to the runner
    (:func:`workbench.sweep.runner.run_sweep`'s ``frame``), so the table is not read and
    parsed twice."""
    from workbench.data.intake import load_table

    df, report = load_table(table, sheet=sheet)
    if sheet is not None and report.format != "xlsx":
        # refused rather than ignored: a sweep is long and its plan keeps the sheet, and
        # naming a sheet for a text or Parquet table most likely means another file
        raise InputError(f"a worksheet ({sheet!r}) was named, but {Path(table).name} is a "
                         f"{report.format} table, which has no worksheets; name none, or "
                         "give the .xlsx workbook", setting="sheet")
    return df


def build_plan(table, target: str, *, hidden="default", output="auto", layers=None,
               learning_rates=None, alphas=None, folds=5, repeats=2, epochs=200,
               early_stopping=False, metric=None, engine="auto", seed=0, batch_size="auto",
               dtype="float32", sheet=None, df=None, target_info=None,
               baselines=BASELINES, kind=None, roles=None, profile=None,
               race=False) -> SweepPlan:
    """A :class:`SweepPlan` from command-line style choices.

    Parameters
    ----------
    table : str
        The table's path (loaded with :func:`workbench.data.intake.load_table`
        unless ``df`` is given).
    target : str
        Target column.
    hidden : str or list of str
        Hidden activations (comma-separated names allowed), ``"all"`` or
        ``"default"`` (the intake's advice: relu, tanh, leaky_relu, gelu, silu).
    output : str or list of str
        ``"auto"`` (the advised head), ``"all"`` (every head the guard accepts)
        or head names.
    layers : list of str or tuple, optional
        Hidden-layer shapes, e.g. ``["64", "64,32"]``; default ``[(64,)]``.
    learning_rates, alphas : list, optional
        Defaults ``[0.001]`` and ``[0.0001]`` (scikit-learn's defaults). The
        learning rates may be ``"tune"`` (:data:`LEARNING_RATE_GRID`).
    baselines : list of str, optional
        Reference configurations (default :data:`BASELINES`; ``[]`` for none).
    kind : str, optional
        The target kind set by the user (one of
        :data:`workbench.data.profiling.KINDS`), checked against the values; kept in
        the plan's ``kind`` (None: detected). With ``target_info``, its kind is used.
    roles : dict, optional
        ``{column: "feature" | "ignore"}``, applied with
        :meth:`~workbench.data.profiling.TableProfile.with_roles`; a table left with
        no feature column is refused here, before any trial.
    profile : TableProfile, optional
        The table's profile, when the caller has it (else it is computed).
    race : bool
        Stop configurations that are worse than the best beyond doubt (racing).
    Other parameters are those of :class:`SweepPlan`.

    Raises
    ------
    InputError
        for a bad table, target or option, or when every requested head is refused.
    """
    from workbench.data.profiling import HIDDEN_TO_SWEEP, analyse_target
    from workbench.nets.activations import hidden_names

    for value, what, setting, example in (
            (hidden, "hidden activations", "hidden", "relu,gelu"),
            (output, "output heads", "heads", "auto"),
            (layers, "hidden-layer shapes", "layers", "64,32"),
            (learning_rates, "learning rates", "learning_rate", "0.001,0.01"),
            (alphas, "L2 strengths", "alpha", "0.0001,0.001")):
        _refuse_empty(value, what, setting, example)  # before the table is read
    if df is None:
        df = read_table(table, sheet)
    info = target_info if target_info is not None else analyse_target(df, target, kind=kind)
    names = _split_list(hidden) or ["default"]
    hid = []
    for n in names:
        key = n.lower()
        if key == "all":
            hid.extend(hidden_names())
        elif key == "default":
            hid.extend(HIDDEN_TO_SWEEP)
        else:
            hid.append(n)
    heads, refused, warns = resolve_heads(info, output)
    lays = [parse_layers(v) for v in (layers or ["64"])]
    words = _split_list(learning_rates)
    tune = any(w.lower() == TUNE for w in words)
    if tune and any(w.lower() != TUNE for w in words):
        raise InputError(f"give either {TUNE!r} or a list of learning rates, not both",
                         setting="learning_rate")
    lrs = list(LEARNING_RATE_GRID) if tune else \
        (_numbers(words, "learning rate", "learning_rate") or [0.001])
    als = _numbers(alphas, "alpha", "alpha") or [0.0001]
    # the absolute path, so that --resume works from any folder
    plan = SweepPlan(table=str(Path(table).resolve()), target=target, task=info.task, target_kind=info.kind,
                     hidden=hid, heads=heads, layers=lays, learning_rates=lrs, alphas=als,
                     folds=folds, repeats=repeats, epochs=epochs, early_stopping=early_stopping,
                     metric=metric, engine=engine, seed=seed, batch_size=batch_size, dtype=dtype,
                     sheet=sheet, requested_output=",".join(_split_list(output)) or "auto",
                     refused_heads=refused, head_warnings=warns, tune_learning_rate=tune,
                     baselines=list(baselines), roles=dict(roles or {}),
                     kind=info.kind if info.kind_set_by_user else None, race=race)
    _usable_profile(df, target, roles, profile)  # no sweep whose every trial would fail
    return plan


def _usable_profile(df, target: str, roles=None, profile=None):
    """The table's profile with the user's roles applied
    (:meth:`~workbench.data.profiling.TableProfile.with_roles`), refused when no
    column is left to use as a feature."""
    from dataclasses import replace

    from workbench.data.profiling import profile_table

    prof = profile if profile is not None else profile_table(df, target=target)
    prof = replace(prof, target=target).with_roles(dict(roles or {}))
    prof.require_features(target)
    return prof
