"""Plain-words advice from layer health (workbench.sweep.diagnosis), without Qt.

Outside references: the remedies named for a mostly dead layer are the activations
that keep a gradient for negative inputs, checked by finite differences at x = -2
against the registry's own functions (Maas et al. 2013 for leaky_relu, Clevert et al.
2016 for elu, Dugas et al. 2001 for softplus); relu's derivative there is 0
(the dying-ReLU case of Lu et al. 2019).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from workbench.nets.activations import HIDDEN
from workbench.sweep.diagnosis import DEAD_REMEDIES, MOSTLY, health_hints


def test_health_hints_name_the_layer_in_plain_words():
    hints = health_hints("relu / identity [8,8]", "relu",
                         {"dead": [0.9, 0.1], "saturated": [0.0, 0.0]})
    assert len(hints) == 1 and "layer 1 is mostly dead" in hints[0] and "90%" in hints[0]
    assert hints[0].startswith("relu / identity [8,8]: ")
    hints = health_hints("tanh", "tanh", {"dead": [0.0], "saturated": [MOSTLY + 0.01]})
    assert len(hints) == 1 and "mostly saturated" in hints[0]
    assert "flat ends of tanh" in hints[0]
    assert health_hints("x", "relu", {"dead": [MOSTLY], "saturated": []}) == []


def test_each_layer_gets_its_own_hint_in_order_and_gaps_are_skipped():
    health = {"dead": [0.2, 0.7, None, 0.95], "saturated": [math.nan, 0.6],
              "grad_norm": [1.0, 2.0]}
    hints = health_hints("c", "gelu", health)
    assert [h.split(" is mostly")[0] for h in hints] == ["c: layer 2", "c: layer 4", "c: layer 2"]
    assert "70%" in hints[0] and "95%" in hints[1] and "60%" in hints[2]
    assert health_hints("c", "gelu", {}) == []


def test_the_threshold_is_a_strict_majority():
    assert MOSTLY == 0.5  # common practice: more than half the layer
    assert health_hints("c", "relu", {"dead": [np.nextafter(MOSTLY, 1.0)]}) != []
    assert health_hints("c", "relu", {"dead": [MOSTLY]}) == []


@pytest.mark.parametrize("name", DEAD_REMEDIES)
def test_remedies_for_dead_units_exist_and_keep_a_gradient_for_negative_inputs(name):
    assert name in HIDDEN
    act = HIDDEN[name]
    x, h = np.array([-2.0]), 1e-6
    slope = (act.forward(x + h) - act.forward(x - h)) / (2 * h)
    assert float(slope[0]) > 1e-3
    relu = HIDDEN["relu"]
    assert float(((relu.forward(x + h) - relu.forward(x - h)) / (2 * h))[0]) == 0.0
    assert name in health_hints("c", "relu", {"dead": [1.0]})[0]
