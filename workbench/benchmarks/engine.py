"""Engine speed: the NumPy engine vs scikit-learn's MLPRegressor vs the bare products.

The standard workload (issue "Foundation and the network engine", section 5):
20,000 rows x 32 features, two hidden layers of 128 ReLU units, batch 200,
20 epochs of Adam, float32. All three are measured in the same process with one
BLAS thread each (threadpoolctl), interleaved over several rounds; medians are
reported, and the two ratios engine/scikit-learn and floor/engine. Each run is
timed twice: wall clock and the process's CPU time. With one BLAS thread the work
is single-threaded, so CPU time is the steadier figure on a shared machine (other
processes steal wall time, not CPU time); both are printed.

The floor is the same sequence of matrix products the engine's backward pass
(:meth:`workbench.nets.network.Network.backward`) performs per batch (three
forward, three weight-gradient and two delta products) on buffers of the same
shapes, with nothing else: no activation, loss, optimiser or Python bookkeeping.
"""

from __future__ import annotations

import statistics
import time
import warnings

import numpy as np
from threadpoolctl import threadpool_limits

ROWS, FEATURES, WIDTH, BATCH, EPOCHS = 20_000, 32, 128, 200, 20


def _data(rows, features, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((rows, features)).astype(np.float32)
    y = (np.sin(X[:, 0]) + X[:, 1] * X[:, 2] + 0.1 * rng.standard_normal(rows)).astype(np.float32)
    return X, y


def _params(epochs):
    return dict(hidden_layer_sizes=(WIDTH, WIDTH), activation="relu", batch_size=BATCH,
                max_iter=epochs, tol=0.0, n_iter_no_change=10**9, random_state=0, shuffle=True,
                learning_rate_init=1e-3)


def _time_engine(X, y, epochs):
    from workbench.nets.engine import NetRegressor

    t, c = time.perf_counter(), time.process_time()
    NetRegressor(**_params(epochs), dtype="float32").fit(X, y)
    return time.perf_counter() - t, time.process_time() - c


def _time_sklearn(X, y, epochs):
    from sklearn.neural_network import MLPRegressor

    t, c = time.perf_counter(), time.process_time()
    MLPRegressor(**_params(epochs)).fit(X, y)
    return time.perf_counter() - t, time.process_time() - c


def _time_floor(X, epochs):
    """The engine's matrix products alone, for the same number of batches."""
    f = np.float32
    rng = np.random.default_rng(1)
    units = [X.shape[1], WIDTH, WIDTH, 1]
    P = [(0.05 * rng.standard_normal((a + 1, b))).astype(f) for a, b in zip(units[:-1], units[1:])]
    G = [np.empty_like(p) for p in P]
    A = [np.ones((BATCH, u + 1), f) for u in units[1:-1]] + [np.empty((BATCH, 1), f)]
    D = [np.empty_like(a) for a in A]
    Xa = np.ones((X.shape[0], X.shape[1] + 1), f)
    Xa[:, :-1] = X
    n = X.shape[0]
    t, c = time.perf_counter(), time.process_time()
    for _ in range(epochs):
        for s in range(0, n, BATCH):
            xb = Xa[s:s + BATCH]
            m = xb.shape[0]
            a = xb
            for i in range(3):
                out = A[i][:m, :units[i + 1]]
                np.matmul(a, P[i], out=out)
                a = A[i][:m]
            delta = D[2][:m]
            np.subtract(A[2][:m], 0.5, out=delta)
            for i in (2, 1, 0):
                np.matmul((xb if i == 0 else A[i - 1][:m]).T, delta, out=G[i])
                if i:
                    np.dot(delta, P[i].T, out=D[i - 1][:m])
                    D[i - 1][:m] *= 0.01
                    delta = D[i - 1][:m, :-1]
    return time.perf_counter() - t, time.process_time() - c


def run(quick: bool = False, rounds: int | None = None, threads: int = 1) -> dict:
    """Measure the standard workload; ``quick`` shrinks it for smoke tests."""
    rows = 2_000 if quick else ROWS
    epochs = 2 if quick else EPOCHS
    rounds = rounds or (1 if quick else 5)
    X, y = _data(rows, FEATURES)
    wall = {"engine": [], "sklearn": [], "floor": []}
    cpu = {"engine": [], "sklearn": [], "floor": []}
    with threadpool_limits(limits=threads), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _time_engine(X[:400], y[:400], 1)  # warm caches and imports
        for _ in range(rounds):  # interleaved, so a burst of load hits all three alike
            for name, fn in (("engine", lambda: _time_engine(X, y, epochs)),
                             ("sklearn", lambda: _time_sklearn(X, y, epochs)),
                             ("floor", lambda: _time_floor(X, epochs))):
                w, c = fn()
                wall[name].append(w)
                cpu[name].append(c)
    mw = {k: statistics.median(v) for k, v in wall.items()}
    mc = {k: statistics.median(v) for k, v in cpu.items()}
    figures = {
        "engine_seconds": mw["engine"],
        "sklearn_seconds": mw["sklearn"],
        "floor_seconds": mw["floor"],
        "engine_over_sklearn": mw["engine"] / mw["sklearn"],
        "floor_over_engine": mw["floor"] / mw["engine"],
        "engine_cpu_seconds": mc["engine"],
        "sklearn_cpu_seconds": mc["sklearn"],
        "floor_cpu_seconds": mc["floor"],
        "engine_over_sklearn_cpu": mc["engine"] / mc["sklearn"],
        "floor_over_engine_cpu": mc["floor"] / mc["engine"],
        "rounds": rounds,
    }
    lines = [
        f"workload: {rows} rows x {FEATURES} features, 2 x {WIDTH} relu, batch {BATCH}, "
        f"{epochs} epochs adam, float32, {threads} BLAS thread(s), median of {rounds}",
        "                               wall s    cpu s",
        f"  engine (NetRegressor)      {mw['engine']:8.3f} {mc['engine']:8.3f}",
        f"  scikit-learn MLPRegressor  {mw['sklearn']:8.3f} {mc['sklearn']:8.3f}",
        f"  matrix products alone      {mw['floor']:8.3f} {mc['floor']:8.3f}",
        f"  engine / scikit-learn      {figures['engine_over_sklearn']:8.3f} "
        f"{figures['engine_over_sklearn_cpu']:8.3f}   (goal <= 0.35)",
        f"  floor / engine             {figures['floor_over_engine']:8.3f} "
        f"{figures['floor_over_engine_cpu']:8.3f}   (goal >= 0.60)",
    ]
    return {"title": "engine", "lines": lines, "figures": figures}
