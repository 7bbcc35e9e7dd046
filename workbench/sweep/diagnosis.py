"""Advice in plain words from a configuration's layer health.

The engine measures, after every epoch, the share of *dead* and *saturated* units
in each hidden layer (see :mod:`workbench.nets.engine`: dead = the derivative is
zero on every probe row; saturated = the derivative is below 0.05 on most probe
rows, smooth activations only). The sweep stores the last epoch's shares per
trial; the results average them over the folds. :func:`health_hints` turns those
averages into sentences a user can act on. It is Qt-free so the window, a report
or the command line can all show the same advice.

Thresholds and the advice given, with where each comes from:

- :data:`MOSTLY` = 0.5: a layer is called *mostly* dead or saturated when more than
  half its units are (common practice: a majority of the layer).
- A mostly dead layer passes little signal, and a dead rectifier unit gets no
  gradient, so it stays dead: Lu, Shin, Su & Karniadakis (2019), "Dying ReLU and
  initialization: theory and numerical examples". Activations with a non-zero slope
  for negative inputs keep a gradient there: leaky_relu (Maas, Hannun & Ng, 2013,
  "Rectifier nonlinearities improve neural network acoustic models"), elu
  (Clevert, Unterthiner & Hochreiter, 2016) and softplus (Dugas et al., 2001). A
  smaller learning rate as a remedy: common practice.
- A mostly saturated layer sits on the flat ends of its activation, where the
  derivative, and with it the gradient, vanishes: Glorot & Bengio (2010),
  "Understanding the difficulty of training deep feedforward neural networks"
  (saturation of logistic units). Scaled inputs as a remedy: LeCun, Bottou, Orr &
  Müller (1998), "Efficient BackProp"; a non-saturating activation or a smaller
  learning rate: common practice.

A later version grows this into a per-configuration diagnosis (learning curves,
fold spread, divergence); the function below is its first part.
"""

from __future__ import annotations

import math

#: above this share of dead or saturated units a layer is called "mostly" so
#: (common practice: a majority of the layer's units)
MOSTLY = 0.5

#: activations suggested for a mostly dead layer: each keeps a gradient for negative
#: inputs (sources in the module docstring); a test checks they are in the registry
DEAD_REMEDIES = ("leaky_relu", "elu", "softplus")


def _shares(values) -> list[tuple[int, float]]:
    """``(layer number from 1, share)`` for the finite shares of a per-layer list."""
    out = []
    for k, share in enumerate(values or [], start=1):
        if share is not None and math.isfinite(share):
            out.append((k, float(share)))
    return out


def health_hints(label: str, hidden: str, health: dict) -> list[str]:
    """Plain-words hints for a configuration whose layers are mostly dead or saturated.

    Parameters
    ----------
    label : str
        How the configuration is named in the sentences (e.g. ``"relu / identity [8,8]"``).
    hidden : str
        Its hidden activation (named in the saturation hint).
    health : dict
        ``{"dead": [share per hidden layer], "saturated": [...]}``; shares in [0, 1],
        ``None`` or NaN where a layer has no measurement (ignored). Other keys are ignored.

    Returns
    -------
    list of str
        One sentence per mostly dead layer, then one per mostly saturated layer; empty
        when no layer has more than :data:`MOSTLY` of its units dead or saturated.
    """
    out = []
    remedies = ", ".join(DEAD_REMEDIES)
    for k, share in _shares(health.get("dead")):
        if share > MOSTLY:
            out.append(f"{label}: layer {k} is mostly dead ({share:.0%} of its units never "
                       "switch on), so it passes little signal; a leaky or smooth activation "
                       f"({remedies}) or a smaller learning rate usually helps.")
    for k, share in _shares(health.get("saturated")):
        if share > MOSTLY:
            out.append(f"{label}: layer {k} is mostly saturated ({share:.0%} of its units sit "
                       f"on the flat ends of {hidden}), so its gradients vanish; scaled inputs, "
                       "a smaller learning rate or a non-saturating activation usually help.")
    return out
