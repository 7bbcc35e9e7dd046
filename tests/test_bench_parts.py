"""The pieces ``workbench bench`` reports with: the floor's operation count, the winner
comparison with GridSearchCV, the load average line. (Speed itself is measured by the
benchmark, never asserted.)"""

from __future__ import annotations

import os

import numpy as np
import pytest

from workbench.benchmarks import engine as bench_engine
from workbench.benchmarks import kiln as bench_kiln
from workbench.commands import bench as bench_command


def test_floor_flops_count_each_product_of_the_training_step():
    """2 m k n operations per (m x k) @ (k x n) product (the usual count of a GEMM): per
    layer a forward and a weight-gradient product over the inputs and the ones column, and
    per layer above the first a delta product, for a batch of 200 rows."""
    _, flops = bench_engine._products([15, 32, 1], rows=400, batch=200)
    forward = 2 * 200 * 16 * 32 + 2 * 200 * 33 * 1
    weight_grads = 2 * 16 * 200 * 32 + 2 * 33 * 200 * 1
    deltas = 2 * 200 * 1 * 33
    assert flops == forward + weight_grads + deltas


def test_floor_runs_the_products_it_counts():
    run, _ = bench_engine._products([4, 3, 2], rows=10, batch=4)
    run(1)  # 3 batches, the last of 2 rows: the slices must fit the buffers


def _results(*configs):
    return {"configurations": [dict(hidden=h, learning_rate=lr, rank=r, tied_with_best=t)
                               for h, lr, r, t in configs]}


@pytest.mark.parametrize("rank, tied, agrees, words", [
    (1, False, True, "same winner"),
    (3, True, True, "tied with our best"),
    (2, False, False, "NOT tied"),
])
def test_gridsearch_winner_is_compared_with_our_ranking(rank, tied, agrees, words):
    res = _results(("tanh", 0.01, 1 if rank != 1 else 2, False), ("relu", 0.003, rank, tied))
    text, ok = bench_kiln._agreement(res, {"model__activation": "relu",
                                           "model__learning_rate_init": 0.003})
    assert ok is agrees and words in text


def test_load_average_line_reports_uptimes_three_figures():
    line = bench_command.load_average()
    if hasattr(os, "getloadavg"):
        expected = os.getloadavg()
        got = [float(v) for v in line.removeprefix("load average ").split(", ")]
        np.testing.assert_allclose(got, expected, atol=0.5)
    else:  # pragma: no cover
        assert "not available" in line
