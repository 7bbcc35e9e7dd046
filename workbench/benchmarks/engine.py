"""Engine speed: the NumPy engine vs scikit-learn's MLP vs the bare matrix products.

Two workloads, each measured in the same process with one BLAS thread
(threadpoolctl), interleaved over several rounds, medians reported:

- the *standard workload* (issue "Foundation and the network engine", section 5):
  20,000 rows x 32 features, two hidden layers of 128 ReLU units, batch 200,
  20 epochs of Adam, float32, ``NetRegressor`` vs ``MLPRegressor``;
- the *small-trial workload* (issue 14: the typical sweep trial): 2,000 rows x 15
  features, a binary target, one hidden layer of 32 ReLU units, batch 200,
  50 epochs of Adam, float32, ``NetClassifier`` vs ``MLPClassifier``.

The engine is timed as the sweep's trials run it (``NetRegressor`` /
``NetClassifier`` with its defaults, the per-epoch health probe included) and, for
the small trial, also without the probe and as the bare epoch loop
(:meth:`workbench.nets.network.Network.train_epoch`, no estimator around it).

Each run is timed twice: wall clock and the process's CPU time. With one BLAS
thread the work is single-threaded, so CPU time is the steadier figure on a shared
machine (other processes steal wall time, not CPU time); both are printed.

The *matrix-product floor* is the sequence of matrix products the engine's
training step performs per batch (per layer one forward and one weight-gradient
product, and one delta product per layer below the output, see
:meth:`workbench.nets.network.Network.backward`) on buffers of the same shapes,
with nothing else: no activation, loss, optimiser or Python bookkeeping. Per batch
the figures are given in microseconds and as multiples of that floor. Beside it,
the *arithmetic floor*: the products' floating-point operations (``2 m k n`` each)
at the single-thread SGEMM rate measured on 1024 x 1024 matrices, the best any
implementation could do with this BLAS.
"""

from __future__ import annotations

import statistics
import time
import warnings

import numpy as np
from threadpoolctl import threadpool_limits

ROWS, FEATURES, WIDTH, BATCH, EPOCHS = 20_000, 32, 128, 200, 20
#: the small-trial workload: a typical sweep trial (issue 14)
SMALL_ROWS, SMALL_FEATURES, SMALL_WIDTH, SMALL_EPOCHS = 2_000, 15, 32, 50
#: goals (issue 14, benchmarks only): small trial <= 5x the product floor per batch;
#: standard workload <= 0.35x scikit-learn's time and >= 0.60 of the product floor
SMALL_GOAL, SKLEARN_GOAL, FLOOR_GOAL = 5.0, 0.35, 0.60


def _data(rows, features, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((rows, features)).astype(np.float32)
    y = (np.sin(X[:, 0]) + X[:, 1] * X[:, 2] + 0.1 * rng.standard_normal(rows)).astype(np.float32)
    return X, y


def _params(epochs, layers=(WIDTH, WIDTH)):
    return dict(hidden_layer_sizes=layers, activation="relu", batch_size=BATCH,
                max_iter=epochs, tol=0.0, n_iter_no_change=10**9, random_state=0, shuffle=True,
                learning_rate_init=1e-3)


def _timed(fn):
    t, c = time.perf_counter(), time.process_time()
    fn()
    return time.perf_counter() - t, time.process_time() - c


def _time_engine(X, y, epochs):
    from workbench.nets.engine import NetRegressor

    return _timed(lambda: NetRegressor(**_params(epochs), dtype="float32").fit(X, y))


def _time_sklearn(X, y, epochs):
    from sklearn.neural_network import MLPRegressor

    return _timed(lambda: MLPRegressor(**_params(epochs)).fit(X, y))


def _products(units, rows, batch=BATCH):
    """The floor's matrix products for a network of ``units`` on ``rows`` rows, as a
    function of the number of epochs; and the products' floating-point operations per
    full batch."""
    f = np.float32
    rng = np.random.default_rng(1)
    depth = len(units) - 1
    P = [(0.05 * rng.standard_normal((a + 1, b))).astype(f) for a, b in zip(units[:-1], units[1:])]
    G = [np.empty_like(p) for p in P]
    A = [np.ones((batch, u + 1), f) for u in units[1:-1]] + [np.empty((batch, units[-1]), f)]
    D = [np.empty_like(a) for a in A]
    Xa = np.ones((rows, units[0] + 1), f)
    Xa[:, :-1] = rng.standard_normal((rows, units[0]))

    def run(epochs):
        for _ in range(epochs):
            for s in range(0, rows, batch):
                xb = Xa[s:s + batch]
                m = xb.shape[0]
                a = xb
                for i in range(depth):
                    np.matmul(a, P[i], out=A[i][:m, :units[i + 1]])
                    a = A[i][:m]
                delta = D[-1][:m]
                np.subtract(A[-1][:m], 0.5, out=delta)
                for i in range(depth - 1, -1, -1):
                    np.matmul((xb if i == 0 else A[i - 1][:m]).T, delta, out=G[i])
                    if i:
                        np.dot(delta, P[i].T, out=D[i - 1][:m])
                        D[i - 1][:m] *= 0.01
                        delta = D[i - 1][:m, :-1]

    flops = 0
    for i, (a, b) in enumerate(zip(units[:-1], units[1:])):
        flops += 2 * batch * (a + 1) * b * 2  # forward and weight gradient
        if i:
            flops += 2 * batch * b * (a + 1)  # delta to the layer below
    return run, flops


def _time_floor(X, epochs):
    """The engine's matrix products alone, for the same number of batches."""
    run, _ = _products([X.shape[1], WIDTH, WIDTH, 1], X.shape[0])
    return _timed(lambda: run(epochs))


def sgemm_gflops(size: int = 1024, repeats: int = 3) -> float:
    """Single-call SGEMM rate (GFLOP/s) on ``size`` x ``size`` float32 matrices, best of
    ``repeats`` (call it under the thread limit you mean to measure)."""
    rng = np.random.default_rng(2)
    a = rng.standard_normal((size, size)).astype(np.float32)
    b = rng.standard_normal((size, size)).astype(np.float32)
    out = np.empty_like(a)
    np.matmul(a, b, out=out)
    best = min(_timed(lambda: np.matmul(a, b, out=out))[0] for _ in range(repeats))
    return 2.0 * size ** 3 / best / 1e9


def _medians(samples):
    return {k: statistics.median(v) for k, v in samples.items()}


def _interleaved(rounds, runners):
    """Run each (name, fn) once per round, in turn; wall and CPU medians per name."""
    wall = {name: [] for name, _ in runners}
    cpu = {name: [] for name, _ in runners}
    for _ in range(rounds):  # interleaved, so a burst of load hits all alike
        for name, fn in runners:
            w, c = fn()
            wall[name].append(w)
            cpu[name].append(c)
    return _medians(wall), _medians(cpu)


def _standard(quick, rounds, threads):
    rows = 2_000 if quick else ROWS
    epochs = 2 if quick else EPOCHS
    X, y = _data(rows, FEATURES)
    _time_engine(X[:400], y[:400], 1)  # warm caches and imports
    mw, mc = _interleaved(rounds, (("engine", lambda: _time_engine(X, y, epochs)),
                                   ("sklearn", lambda: _time_sklearn(X, y, epochs)),
                                   ("floor", lambda: _time_floor(X, epochs))))
    batches = epochs * -(-rows // BATCH)
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
        "engine_us_per_batch_cpu": mc["engine"] / batches * 1e6,
        "floor_us_per_batch_cpu": mc["floor"] / batches * 1e6,
        "rounds": rounds,
    }
    lines = [
        f"standard workload: {rows} rows x {FEATURES} features, 2 x {WIDTH} relu, batch "
        f"{BATCH}, {epochs} epochs adam, float32, {threads} BLAS thread(s), median of {rounds}",
        "                               wall s    cpu s   cpu us/batch",
        f"  engine (NetRegressor)      {mw['engine']:8.3f} {mc['engine']:8.3f} "
        f"{mc['engine'] / batches * 1e6:10.1f}",
        f"  scikit-learn MLPRegressor  {mw['sklearn']:8.3f} {mc['sklearn']:8.3f} "
        f"{mc['sklearn'] / batches * 1e6:10.1f}",
        f"  matrix products alone      {mw['floor']:8.3f} {mc['floor']:8.3f} "
        f"{mc['floor'] / batches * 1e6:10.1f}",
        f"  engine / scikit-learn      {figures['engine_over_sklearn']:8.3f} "
        f"{figures['engine_over_sklearn_cpu']:8.3f}   (goal <= {SKLEARN_GOAL})",
        f"  floor / engine             {figures['floor_over_engine']:8.3f} "
        f"{figures['floor_over_engine_cpu']:8.3f}   (goal >= {FLOOR_GOAL})",
    ]
    return lines, figures


def _small_data(rows):
    rng = np.random.default_rng(3)
    X = rng.standard_normal((rows, SMALL_FEATURES)).astype(np.float32)
    score = X[:, 0] - 0.5 * X[:, 1] * X[:, 2] + 0.5 * rng.standard_normal(rows)
    return X, (score > 0).astype(int)


def _small_params(epochs):
    return dict(hidden_layer_sizes=(SMALL_WIDTH,), activation="relu", batch_size=BATCH,
                max_iter=epochs, tol=0.0, n_iter_no_change=10**9, random_state=0,
                learning_rate_init=1e-3)


def _epoch_loop(X, y, epochs):
    """``Network.train_epoch`` alone: the engine's batches without the estimator
    (validation, shuffling, stopping rule, health probe)."""
    from workbench.nets import activations as act
    from workbench.nets.network import Network, with_ones
    from workbench.nets.optimizers import AdamOptimizer

    head = act.resolve_head("logistic", "classification")
    net = Network([X.shape[1], SMALL_WIDTH, 1], ["relu"], head, np.dtype(np.float32))
    net.theta[...] = np.random.default_rng(0).uniform(-0.3, 0.3, net.theta.size)
    net.ensure(BATCH)
    X_ones = with_ones(X)
    y2 = y.astype(np.float32).reshape(-1, 1)
    opt = AdamOptimizer(net.theta.size, net.dtype, 1e-3)

    def run():
        for _ in range(epochs):
            net.train_epoch(opt, X_ones, y2, BATCH, 1e-4)

    return _timed(run)


def _small(quick, rounds, threads, gflops):
    from sklearn.neural_network import MLPClassifier

    from workbench.nets.engine import NetClassifier

    rows = SMALL_ROWS
    epochs = 5 if quick else SMALL_EPOCHS
    X, y = _small_data(rows)
    floor_run, flops = _products([SMALL_FEATURES, SMALL_WIDTH, 1], rows)
    batches = epochs * -(-rows // BATCH)
    NetClassifier(**_small_params(1)).fit(X, y)  # warm caches and imports
    runners = (
        ("engine", lambda: _timed(lambda: NetClassifier(**_small_params(epochs)).fit(X, y))),
        ("engine_no_probe", lambda: _timed(lambda: NetClassifier(
            **_small_params(epochs), monitor_health=False).fit(X, y))),
        ("epoch_loop", lambda: _epoch_loop(X, y, epochs)),
        ("sklearn", lambda: _timed(lambda: MLPClassifier(**_small_params(epochs)).fit(X, y))),
        ("floor", lambda: _timed(lambda: floor_run(epochs))),
    )
    mw, mc = _interleaved(rounds, runners)
    per = {k: v / batches * 1e6 for k, v in mc.items()}
    arithmetic = flops / (gflops * 1e9) * 1e6
    figures = {f"small_{k}_us_per_batch_cpu": v for k, v in per.items()}
    figures.update({f"small_{k}_us_per_batch_wall": v / batches * 1e6 for k, v in mw.items()})
    figures.update({
        "small_engine_over_floor": per["engine"] / per["floor"],
        "small_engine_no_probe_over_floor": per["engine_no_probe"] / per["floor"],
        "small_epoch_loop_over_floor": per["epoch_loop"] / per["floor"],
        "small_engine_over_sklearn": per["engine"] / per["sklearn"],
        "small_arithmetic_floor_us": arithmetic,
        "sgemm_gflops": gflops,
    })
    labels = (("engine", "engine (NetClassifier, health probe on)"),
              ("engine_no_probe", "engine, monitor_health=False"),
              ("epoch_loop", "Network.train_epoch alone"),
              ("sklearn", "scikit-learn MLPClassifier"),
              ("floor", "matrix products alone (floor)"))
    lines = [
        f"small-trial workload: {rows} rows x {SMALL_FEATURES} features, binary, 1 x "
        f"{SMALL_WIDTH} relu, batch {BATCH}, {epochs} epochs adam, float32, {threads} BLAS "
        f"thread(s), median of {rounds}",
        "                                          cpu us/batch  wall us/batch  x floor",
    ]
    for key, label in labels:
        lines.append(f"  {label:<38} {per[key]:10.1f} {mw[key] / batches * 1e6:12.1f} "
                     f"{per[key] / per['floor']:8.2f}")
    lines += [
        f"  engine / scikit-learn                  {per['engine'] / per['sklearn']:10.3f}",
        f"  goal: engine <= {SMALL_GOAL:g}x the product floor per batch "
        f"(now {per['engine'] / per['floor']:.2f}x; without the probe "
        f"{per['engine_no_probe'] / per['floor']:.2f}x)",
        f"  arithmetic floor: {flops / 1e6:.2f} MFLOP per batch at {gflops:.0f} GFLOP/s "
        f"(1024^2 SGEMM) = {arithmetic:.1f} us; engine {per['engine'] / arithmetic:.1f}x it",
    ]
    return lines, figures


#: networks trained together in the stacked measurement (the folds of one configuration)
STACK = 5


def _stack_nets(X, y, k):
    from workbench.nets import activations as act
    from workbench.nets.network import Network, with_ones
    from workbench.nets.optimizers import AdamOptimizer

    head = act.resolve_head("logistic", "classification")
    nets, opts = [], []
    for i in range(k):
        net = Network([X.shape[1], SMALL_WIDTH, 1], ["relu"], head, np.dtype(np.float32))
        net.theta[...] = np.random.default_rng(i).uniform(-0.3, 0.3, net.theta.size)
        net.ensure(BATCH)
        nets.append(net)
        opts.append(AdamOptimizer(net.theta.size, net.dtype, 1e-3))
    rows = np.array_split(np.random.default_rng(7).permutation(X.shape[0]), k)
    keep = min(X.shape[0] - len(r) for r in rows)
    Xs = np.stack([with_ones(np.delete(X, r, axis=0)[:keep]) for r in rows])
    ys = np.stack([np.delete(y, r)[:keep].astype(np.float32).reshape(-1, 1) for r in rows])
    return nets, opts, Xs, ys


def _stacked(quick, rounds):
    """K = 5 fold networks of the small trial: K separate epoch loops against one
    NetworkStack (per batch and network), and K whole NetClassifier fits one after
    another against the same fits in lockstep (run_in_lockstep)."""
    from workbench.nets.engine import NetClassifier
    from workbench.nets.stacked import NetworkStack, run_in_lockstep

    epochs = 5 if quick else SMALL_EPOCHS
    X, y = _small_data(SMALL_ROWS)
    k = STACK

    def alone():
        nets, opts, Xs, ys = _stack_nets(X, y, k)
        return _timed(lambda: [[n.train_epoch(o, Xs[i], ys[i], BATCH, 1e-4) for _ in range(epochs)]
                               for i, (n, o) in enumerate(zip(nets, opts))])

    def stacked():
        nets, opts, Xs, ys = _stack_nets(X, y, k)
        stack = NetworkStack(nets[0], k, BATCH)
        return _timed(lambda: [stack.train_epoch(nets, opts, Xs, ys, BATCH, 1e-4)
                               for _ in range(epochs)])

    folds = np.array_split(np.random.default_rng(7).permutation(X.shape[0]), k)
    fits = [lambda i=i, f=f: NetClassifier(**dict(_small_params(epochs), random_state=i)).fit(
        np.delete(X, f, axis=0), np.delete(y, f)) for i, f in enumerate(folds)]
    counts = {}

    def lockstep():
        def go():
            counts.update(run_in_lockstep(fits)[1])
        return _timed(go)

    mw, mc = _interleaved(rounds, (("alone", alone), ("stacked", stacked),
                                   ("fits", lambda: _timed(lambda: [f() for f in fits])),
                                   ("lockstep", lockstep)))
    n_train = SMALL_ROWS - max(len(f) for f in folds)
    batches = epochs * -(-n_train // BATCH) * k
    figures = {"stack_k": k,
               "stack_alone_us_per_batch_cpu": mc["alone"] / batches * 1e6,
               "stack_stacked_us_per_batch_cpu": mc["stacked"] / batches * 1e6,
               "stack_speedup_cpu": mc["alone"] / mc["stacked"],
               "lockstep_fit_speedup_cpu": mc["fits"] / mc["lockstep"],
               "lockstep_stacked_epochs": counts.get("stacked_epochs", 0)}
    routed = counts.get("stacked_epochs", 0) > 0
    lines = [
        f"{k} fold networks of the small trial together (median of {rounds}, cpu):",
        f"  {k} x Network.train_epoch        {figures['stack_alone_us_per_batch_cpu']:8.1f} "
        "us per batch and network",
        f"  NetworkStack({k}).train_epoch    {figures['stack_stacked_us_per_batch_cpu']:8.1f} "
        f"us per batch and network   ({figures['stack_speedup_cpu']:.2f}x faster, "
        "bit-identical results)",
        f"  {k} whole NetClassifier fits: in lockstep {mc['lockstep']:.3f} s vs one after "
        f"another {mc['fits']:.3f} s ({figures['lockstep_fit_speedup_cpu']:.2f}x; "
        + (f"{counts['stacked_epochs']} epochs stacked)" if routed else
           "no epoch stacked: the engine does not run its epochs through "
           "Network.train_epoch yet)"),
    ]
    return lines, figures


def run(quick: bool = False, rounds: int | None = None, threads: int = 1) -> dict:
    """Measure the standard and the small-trial workloads; ``quick`` shrinks them."""
    rounds = rounds or (1 if quick else 5)
    with threadpool_limits(limits=threads), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gflops = sgemm_gflops()
        lines, figures = _standard(quick, rounds, threads)
        small_lines, small_figures = _small(quick, rounds + 2, threads, gflops)
        stack_lines, stack_figures = _stacked(quick, rounds)
    figures.update(small_figures)
    figures.update(stack_figures)
    return {"title": "engine", "lines": lines + small_lines + stack_lines, "figures": figures}
