"""Layer health measured in a stack (``NetworkStack.measure_health``, and handed out to
the fits of a lockstep group) is each network's own ``health.measure``, bit for bit.

Sources: the single network's :func:`workbench.nets.health.measure` (compared with ``==``
on every hidden activation, float32 and float64), and the definition of a dead unit
(Lu, Shin, Su & Karniadakis 2019: a ReLU unit whose pre-activation is <= 0 on every
probe row) counted by hand.
"""

from __future__ import annotations

import numpy as np
import pytest

from workbench.nets import activations as act
from workbench.nets import health
from workbench.nets import stacked as S
from workbench.nets.network import Network, with_ones
from workbench.nets.optimizers import AdamOptimizer

FEATURES, ROWS, PROBE, BATCH = 4, 60, 37, 16


def _nets(hidden, head, dtype, k=3, scale=2.0):
    """``k`` networks of one shape with their own weights (large enough that some ReLU
    units die and some tanh/logistic units saturate)."""
    nets = []
    for i in range(k):
        net = Network([FEATURES, 7, 5, 1], [hidden, hidden], head, np.dtype(dtype), 0.01)
        net.theta[...] = np.random.default_rng(10 + i).uniform(-scale, scale, net.theta.size)
        net.layers[0].intercept[:i + 1] = -30.0  # units off on every row: dead for ReLU
        nets.append(net)
    return nets


def _clone(net):
    twin = Network(net.units, net.hidden_names, net.head, net.dtype, 0.01)
    twin.theta[...] = net.theta
    return twin


def _data(k, dtype, n_out, seed=0):
    rng = np.random.default_rng(seed)
    X = [with_ones(rng.normal(size=(ROWS, FEATURES)).astype(dtype)) for _ in range(k)]
    y = [(rng.random((ROWS, n_out)) < 0.5).astype(dtype) for _ in range(k)]
    probes = [(with_ones(rng.normal(size=(PROBE, FEATURES)).astype(dtype)),
               (rng.random((PROBE, n_out)) < 0.5).astype(dtype)) for _ in range(k)]
    return X, y, probes


@pytest.mark.parametrize("dtype", [np.float64, np.float32], ids=["float64", "float32"])
@pytest.mark.parametrize("head_key", [("classification", "logistic"),
                                      ("regression", "identity")], ids=lambda k: k[1])
@pytest.mark.parametrize("hidden", act.hidden_names())
def test_stack_measures_each_networks_health_as_alone(hidden, head_key, dtype):
    head = act.resolve_head(head_key[1], head_key[0])
    nets = _nets(hidden, head, dtype)
    k = len(nets)
    X, y, probes = _data(k, dtype, 1)
    stack = S.NetworkStack(nets[0], k, BATCH)
    opts = [AdamOptimizer(n.theta.size, n.dtype, 0.01) for n in nets]
    with np.errstate(all="ignore"):
        stack.train_epoch(nets, opts, np.stack(X), np.stack(y), BATCH, 1e-3)
        got = stack.measure_health(np.stack([p[0] for p in probes]),
                                   np.stack([p[1] for p in probes]))
        for j, net in enumerate(nets):
            twin = _clone(net)
            want = health.measure(twin, *probes[j])
            assert got[j] == want, (hidden, j)
            np.testing.assert_array_equal(stack.grad[j], twin.grad)
    if hidden == "relu":  # the definition, by hand: pre-activation <= 0 on every probe row
        for j, net in enumerate(nets):
            pre = probes[j][0] @ net.layers[0].block
            assert got[j][0][0] == np.mean(np.all(pre <= 0, axis=0))
        assert any(g[0][0] > 0 for g in got)  # the case has dead units to count


def test_lockstep_health_follows_changed_probe_rows_targets_and_parameters():
    """Health measured in the stack is handed out only for the announced probe with the
    same rows, targets and parameters; an unannounced epoch or any change after the
    stack measured is measured alone. Each value, and net.grad, equals a measure alone."""
    head = act.resolve_head("logistic", "classification")

    def job(i):
        def run():
            net = _nets("tanh", head, np.float64, k=1, scale=1.0)[0]
            net.theta[...] = np.random.default_rng(i).uniform(-1, 1, net.theta.size)
            opt = AdamOptimizer(net.theta.size, net.dtype, 0.01)
            X, y, probes = _data(1, np.float64, 1, seed=20 + i)
            P, Py = probes[0]
            out = []
            for epoch in range(9):
                announced = epoch != 2
                net.train_epoch(opt, X[0], y[0], 10, 1e-3,
                                probe=(P, Py) if announced else None)
                if epoch == 4:
                    P[0, 0] += 1.0  # the probe rows changed after the stack measured
                if epoch == 5:
                    Py[0, 0] = 1 - Py[0, 0]  # ... the targets
                if epoch == 6:
                    net.theta[1] += 0.1  # ... the parameters
                twin = _clone(net)
                group = S.LOCKSTEP.__dict__.get("group")
                before = group.handed_out if group else 0
                got = health.measure(net, P, Py)  # first: the stack's, if handed out
                if group and epoch >= 7:  # after the last change: from the stack again
                    assert group.handed_out == before + 1
                want = health.measure(twin, P, Py)  # a network the stack does not hold
                assert got == want
                np.testing.assert_array_equal(net.grad, twin.grad)
                out.append(got)
            return out
        return run

    alone = [job(i)() for i in range(3)]
    together, counts = S.run_in_lockstep([job(i) for i in range(3)])
    # measured in the stack after the 8 announced epochs (not after epoch 2); handed out
    # after 0, 1, 3, 7 and 8 (the changes after 4, 5 and 6 are measured alone)
    assert counts["health_stacked"] == 3 * 8
    assert together == alone


@pytest.mark.parametrize("hidden", ["relu", "tanh"])
def test_stack_counts_the_boundary_cases_as_measure(hidden):
    """A unit off on all probe rows but one is not dead; a unit flat on exactly half the
    rows is not saturated ("more than half", the definition measure uses): counted by
    hand, by measure alone and in the stack, on an even number of probe rows."""
    head = act.resolve_head("identity", "regression")
    rows = 40
    nets = [Network([2, 3, 1], [hidden], head, np.dtype(np.float64)) for _ in range(2)]
    X = np.zeros((rows, 2))
    X[:, 0] = -1.0
    X[0, 0] = 1.0  # unit 0 (pre = x0) is on for one row only
    X[: rows // 2, 1] = 5.0  # unit 1 (pre = 10 x1): flat on exactly half of the rows
    for net in nets:
        block = net.layers[0].block
        block[...] = 0
        block[0, 0], block[1, 1] = 1.0, 10.0
        block[2, 2] = -3.0  # unit 2: off on every row (dead for ReLU), flat for tanh
    probe = with_ones(X)
    y = np.zeros((rows, 1))
    stack = S.NetworkStack(nets[0], 2, 8)
    for j, net in enumerate(nets):
        stack.theta[j] = net.theta
    got = stack.measure_health(np.stack([probe, probe]), np.stack([y, y]))
    want = health.measure(_clone(nets[0]), probe, y)
    assert got[0] == got[1] == want
    dead, saturated, _ = want
    if hidden == "relu":
        assert dead == [1 / 3]  # unit 2 only; unit 0 lives on one row, unit 1 on half
    else:
        assert dead == [0.0] and saturated == [1 / 3]  # unit 2 only: unit 1 is flat on half
