#!/usr/bin/env python3
"""Re-run the cross-validation of one exported configuration and compare the scores.

``workbench export`` copies this file into the export folder as ``reproduce.py``.
It reads ``configuration.json`` (next to the script unless ``--config`` says
otherwise), loads the table it names (checking its SHA-256), rebuilds the
pipeline with the workbench's public functions (load_table, profile_table,
TableProfile.with_roles, analyse_target, split_xy, build_pipeline) and the
recorded estimator parameters, fits it on every stored training fold with the
stored seed, scores the stored test fold with scikit-learn's scorer, and prints
each fold's score next to the stored one.

Usage::

    python reproduce.py [--table PATH] [--config configuration.json]

Exit status 0 when every score matches the stored one (within 1e-9 for float64
runs), 1 when one differs, 2 when the table or the configuration is unusable.
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from pathlib import Path

import numpy as np
from sklearn.metrics import get_scorer
from sklearn.neural_network import MLPClassifier, MLPRegressor
from threadpoolctl import threadpool_limits

from workbench.data.hashing import sha256_of
from workbench.data.intake import load_table
from workbench.data.preprocessing import build_pipeline
from workbench.data.profiling import analyse_target, profile_table, split_xy
from workbench.errors import InputError
from workbench.nets.engine import NetClassifier, NetRegressor

#: the only estimators a configuration may name
ESTIMATORS = {
    "workbench.nets.engine.NetRegressor": NetRegressor,
    "workbench.nets.engine.NetClassifier": NetClassifier,
    "sklearn.neural_network.MLPRegressor": MLPRegressor,
    "sklearn.neural_network.MLPClassifier": MLPClassifier,
}


class Unusable(Exception):
    """The table or the configuration cannot be used (exit status 2)."""


def make_estimator(model: dict, seed: int):
    """The unfitted estimator the configuration names, with its recorded parameters."""
    cls = ESTIMATORS.get(model["estimator"])
    if cls is None:
        raise Unusable(f"unknown estimator {model['estimator']!r} in the configuration")
    params = dict(model["hyperparameters"])
    params["hidden_layer_sizes"] = tuple(params["hidden_layer_sizes"])
    if isinstance(params.get("activation"), list):
        params["activation"] = tuple(params["activation"])
    return cls(**params, random_state=seed)


def load_inputs(conf: dict, table: Path):
    """The table as the sweep saw it: ``(profile, target, X, y)``.

    The user's column roles recorded in the plan are applied with
    :meth:`~workbench.data.profiling.TableProfile.with_roles`, as the sweep did.

    Raises
    ------
    Unusable
        for a missing or different table, a target that now reads as another
        kind, or roles that no longer fit the table.
    """
    if not table.is_file():
        raise Unusable(f"table {table} not found; pass --table PATH")
    if sha256_of(table) != conf["table"]["sha256"]:
        raise Unusable(f"{table} is not the table of the sweep (SHA-256 differs)")
    try:
        df, _ = load_table(table, sheet=conf["table"]["sheet"])
        name = conf["target"]["name"]
        target = analyse_target(df, name, kind=conf["plan"].get("kind"))  # the user's kind
        if target.kind != conf["target"]["kind"]:
            raise Unusable(f"target {name!r} now reads as {target.kind}, "
                           f"not {conf['target']['kind']}")
        profile = profile_table(df, target=name).with_roles(conf["plan"].get("roles") or {})
    except InputError as exc:
        raise Unusable(str(exc)) from None
    X, y = split_xy(df, target)
    return profile, target, X, y


def fold_pipeline(conf: dict, profile, target, seed: int):
    """The unfitted pipeline of one fold: preprocessing, the recorded estimator, the head."""
    model = conf["model"]
    return build_pipeline(profile, target, make_estimator(model, seed), model["output_head"])


def fold_scores(conf: dict, profile, target, X, y):
    """Yield ``(repeat, fold, score)`` for every stored split, refitting the pipeline on each."""
    scorer = get_scorer(conf["evaluation"]["metric"])
    rows = np.arange(len(y))
    for split in conf["evaluation"]["splits"]:
        test = np.asarray(split["test_rows"], dtype=int)
        train = np.setdiff1d(rows, test)  # the other rows, in table order (as KFold gives)
        pipe = fold_pipeline(conf, profile, target, split["model_seed"])
        with threadpool_limits(limits=1), warnings.catch_warnings(), \
                np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            warnings.simplefilter("ignore")
            pipe.fit(X.iloc[train], y[train])
            score = float(scorer(pipe, X.iloc[test], y[test]))
        yield split["repeat"], split["fold"], score


def tolerance(model: dict) -> float:
    """How far a score may be from the stored one: 1e-9 in float64, 1e-5 in float32."""
    return 1e-9 if (model["dtype"] == "float64" or model["engine"] == "sklearn") else 1e-5


def main(argv=None) -> int:
    here = Path(__file__).resolve().parent
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--config", default=str(here / "configuration.json"))
    parser.add_argument("--table", default=None, help="the table (default: the recorded path)")
    args = parser.parse_args(argv)
    conf = json.loads(Path(args.config).read_text(encoding="utf-8"))
    model = conf["model"]
    try:
        profile, target, X, y = load_inputs(conf, Path(args.table or conf["table"]["path"]))
        make_estimator(model, 0)  # an unknown estimator is refused before any fitting
    except Unusable as exc:
        print(f"reproduce: {exc}", file=sys.stderr)
        return 2

    stored = {(s["repeat"], s["fold"]): s["test_score"] for s in conf["scores"]["fold_scores"]}
    tol = tolerance(model)
    print(f"configuration: {model['hidden_activation']} hidden, {model['output_head']} head "
          f"({model['loss']}), layers {model['layers']}, engine {model['engine']}")
    print(f"metric: {conf['evaluation']['metric']} (greater is better)")
    scores, worst = [], 0.0
    for r, f, score in fold_scores(conf, profile, target, X, y):
        ref = stored[(r, f)]
        diff = abs(score - ref)
        worst = max(worst, diff)
        scores.append(score)
        print(f"repeat {r} fold {f}: {score:.12f}  stored {ref:.12f}  difference {diff:.1e}")
    sd = float(np.std(scores, ddof=1)) if len(scores) > 1 else float("nan")
    print(f"mean {np.mean(scores):.12f} +/- {sd:.12f} over {len(scores)} folds "
          f"(stored mean {conf['scores']['mean']:.12f})")
    if worst <= tol:
        print(f"every fold score matches the stored one (largest difference {worst:.1e}, "
              f"tolerance {tol:g})")
        return 0
    print(f"MISMATCH: largest difference {worst:.1e} exceeds the tolerance {tol:g}")
    return 1


if __name__ == "__main__":
    sys.exit(main())
