"""The network's arithmetic: a flat parameter buffer, the forward and the backward pass.

:class:`Network` holds every weight and intercept in one contiguous vector
(``theta``), so that an optimiser step is a handful of vector operations over it,
and preallocated per-layer buffers that the passes write into (``out=``). Each
hidden activation and the output head come from
:mod:`workbench.nets.activations`; the network looks their functions up once,
when it is built, and never branches on their names.

Training runs an epoch at a time (:meth:`Network.train_epoch`): per batch a forward
pass that writes its predictions into an epoch-sized buffer, the backward pass and
the optimiser's step; the epoch's loss is taken once at the end from the kept
predictions, not per batch. :mod:`workbench.nets.stacked` runs the epochs of
several networks of one shape together with the same results.

Layer ``i`` is stored as one block of shape ``(fan_in + 1, fan_out)``: its first
``fan_in`` rows are the weights and its last row is the intercept. Training inputs
and hidden activations carry a trailing column of ones, so one matrix product
gives ``a @ W + b`` and, backwards, ``a.T @ delta`` gives the weight and intercept
gradients together.

References
----------
- Rumelhart, Hinton & Williams (1986), "Learning representations by
  back-propagating errors" (the backward pass).
- scikit-learn, ``sklearn.neural_network.MLPRegressor`` (the L2 term
  ``0.5 * alpha * ||W||^2 / n_rows``, weights only).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from workbench.nets import activations as act

#: rows per forward pass of :meth:`Network.predict_raw` (bounds its temporary arrays)
PREDICT_CHUNK = 8192

#: per thread: the lockstep group (:mod:`workbench.nets.stacked`) this thread's fits
#: hand their epochs to, if any
LOCKSTEP = threading.local()


def epoch_array(shape, dtype) -> np.ndarray:
    """A new, uninitialised array for a fit's epoch rows (written again every epoch).

    Inside :func:`workbench.nets.stacked.run_in_lockstep` it is a slice of an array the
    thread's lockstep group holds for the fits' epoch rows of this shape, so that a stack
    of these fits trains on their rows where they are, without copying them each epoch.
    """
    group = getattr(LOCKSTEP, "group", None)
    if group is not None:
        return group.epoch_array(shape, dtype)
    return np.empty(shape, dtype=dtype)


def with_ones(X):
    """``X`` with a trailing column of ones (C-contiguous)."""
    out = np.empty((X.shape[0], X.shape[1] + 1), dtype=X.dtype)
    out[:, :-1] = X
    out[:, -1] = 1
    return out


@dataclass(frozen=True, slots=True)
class Layer:
    """One layer's parameters (views into ``Network.theta``) and its activation.

    ``activation`` is the registry entry of a hidden layer's activation, or None
    for the output layer (whose activation is the network's head); ``params`` are
    the activation's parameters (e.g. the leaky slope).
    """

    block: np.ndarray  # (fan_in + 1, fan_out): weights, then the intercept row
    grad_block: np.ndarray  # the same shape, in Network.grad
    weights: np.ndarray
    intercept: np.ndarray
    weight_grad: np.ndarray
    activation: act.Activation | None
    params: dict


@dataclass(frozen=True, slots=True)
class LayerBuffers:
    """One layer's work buffers for a batch of ``m`` rows (views, no copies).

    ``output`` is the layer's activation; ``output_ones`` the same buffer with the
    trailing column of ones (hidden layers; the output layer has none, so both are
    the same array). ``pre`` keeps the pre-activation when the activation's
    derivative needs it (else None). ``delta_ones`` is the error at the
    pre-activation, as wide as ``output_ones``; ``delta`` is it without the ones
    column, the width the layer below multiplies. ``scratch`` holds a hidden
    layer's derivative.
    """

    output: np.ndarray
    output_ones: np.ndarray
    pre: np.ndarray | None
    delta_ones: np.ndarray
    delta: np.ndarray
    scratch: np.ndarray | None


class Network:
    """Flat parameters, per-layer views and buffers, and the forward/backward passes.

    Parameters
    ----------
    units : list of int
        Input width, each hidden layer's width, output width.
    hidden : list of str
        Canonical hidden activation name per hidden layer.
    head : :class:`workbench.nets.activations.Head`
    dtype : numpy dtype
    leaky_slope : float
        The ``slope`` parameter of the activations that have one.
    """

    def __init__(self, units, hidden, head, dtype, leaky_slope=act.LEAKY_SLOPE):
        self.units = list(units)
        self.hidden_names = list(hidden)
        self.hidden = [act.HIDDEN[name] for name in hidden]
        self.head = head
        self.dtype = dtype
        shapes = list(zip(self.units[:-1], self.units[1:]))
        total = sum((fan_in + 1) * fan_out for fan_in, fan_out in shapes)
        self.theta = np.zeros(total, dtype=dtype)
        self.grad = np.zeros(total, dtype=dtype)
        # 1 on weight entries, 0 on intercepts: the L2 penalty as one fused vector op
        self.coef_mask = np.zeros_like(self.theta)
        self.layers: list[Layer] = []
        pos = 0
        for i, (fan_in, fan_out) in enumerate(shapes):
            size = (fan_in + 1) * fan_out
            block = self.theta[pos:pos + size].reshape(fan_in + 1, fan_out)
            grad_block = self.grad[pos:pos + size].reshape(fan_in + 1, fan_out)
            activation = self.hidden[i] if i < len(self.hidden) else None
            params = activation.with_params(slope=leaky_slope) if activation else {}
            self.layers.append(Layer(block, grad_block, block[:fan_in], block[fan_in],
                                     grad_block[:fan_in], activation, params))
            self.coef_mask[pos:pos + fan_in * fan_out] = 1
            pos += size
        self.weights = [layer.weights for layer in self.layers]
        self.intercepts = [layer.intercept for layer in self.layers]
        self.weight_grads = [layer.weight_grad for layer in self.layers]
        self._l2_buf = np.empty_like(self.theta)
        self._l2_alpha = None
        self._alpha_mask = None
        self._buffers_for = 0
        self._views_by_rows: dict[int, list[LayerBuffers]] = {}
        self._epoch_pred = None

    # buffers ----------------------------------------------------------------
    def ensure(self, rows):
        """Allocate the work buffers for batches of up to ``rows`` rows."""
        if self._buffers_for >= rows:
            return
        n_hidden = len(self.hidden)
        self._outputs, self._pres, self._deltas, self._scratch = [], [], [], []
        for i, width in enumerate(self.units[1:]):
            hidden = i < n_hidden
            # hidden activations carry a trailing ones column; the output does not
            output = np.empty((rows, width + 1 if hidden else width), dtype=self.dtype)
            if hidden:
                output[:, width] = 1
            needs_pre = self.hidden[i].needs_z if hidden else not self.head.canonical
            # pre-activation copies, deltas and scratch are as wide as the outputs, so
            # elementwise work runs on contiguous memory
            self._outputs.append(output)
            self._pres.append(np.empty_like(output) if needs_pre else None)
            self._deltas.append(np.empty_like(output))
            self._scratch.append(np.empty_like(output) if hidden else None)
        self._views_by_rows = {}
        self._buffers_for = rows

    def buffers(self, rows) -> list[LayerBuffers]:
        """Per-layer views of the work buffers for batches of ``rows`` rows (cached)."""
        views = self._views_by_rows.get(rows)
        if views is None:
            self.ensure(rows)
            views = []
            for i, width in enumerate(self.units[1:]):
                output_ones = self._outputs[i][:rows]
                pre = self._pres[i]
                delta_ones = self._deltas[i][:rows]
                scratch = self._scratch[i]
                views.append(LayerBuffers(
                    output=output_ones[:, :width], output_ones=output_ones,
                    pre=None if pre is None else pre[:rows], delta_ones=delta_ones,
                    delta=delta_ones[:, :width],
                    scratch=None if scratch is None else scratch[:rows]))
            self._views_by_rows[rows] = views
        return views

    # passes -----------------------------------------------------------------
    def forward(self, X_ones, rows, out=None, views=None):
        """Every layer's output for the ``rows`` rows of ``X_ones`` (inputs + ones column);
        returns the prediction: ``out`` when given (``rows`` x outputs, e.g. a slice of
        an epoch's prediction buffer), else a view into the output layer's buffer.
        ``views`` are :meth:`buffers` for ``rows`` when the caller has them."""
        below = X_ones
        if views is None:
            views = self.buffers(rows)
        head = self.head
        for layer, buf in zip(self.layers, views):
            activation = layer.activation
            if activation is None:
                top = buf.output if out is None else out
                np.matmul(below, layer.block, out=top)
                if buf.pre is not None:
                    np.copyto(buf.pre, top)
                head.apply_(top)
                return top
            np.matmul(below, layer.block, out=buf.output)
            if buf.pre is not None:
                np.copyto(buf.pre, buf.output_ones)
            # apply on the whole contiguous buffer, then restore the ones column
            # where the activation does not map 1 to 1
            activation.apply_(buf.output_ones, **layer.params)
            if not activation.keeps_one:
                buf.output_ones[:, -1] = 1
            below = buf.output_ones
        raise ValueError("a network needs at least one layer")  # pragma: no cover

    def predict_raw(self, X, chunk=PREDICT_CHUNK):
        """Forward pass allocating fresh arrays (used for predict / validation).

        Inside :func:`workbench.nets.stacked.run_in_lockstep` a fit's repeated predictions
        of the same rows (its held-out or validation rows, once per epoch) are computed
        for every network of the stack at once, right after their stacked epoch, and
        handed out here when the network's parameters are still those they were
        computed with; the same values (:meth:`predict_raw_alone`'s arithmetic)."""
        group = getattr(LOCKSTEP, "group", None)
        if group is not None and chunk == PREDICT_CHUNK:
            hit = group.predicted(self, X)
            if hit is not None:
                return hit[0]
        return self.predict_raw_alone(X, chunk)

    def predict_with_loss(self, X, y):
        """``(predict_raw(X), data_loss(y, that prediction))``.

        Inside :func:`workbench.nets.stacked.run_in_lockstep` the loss, too, is computed
        for every network of the stack at once right after their stacked epoch (the
        same targets, the same values: the single call's value, see
        ``Loss.stacked_value``)."""
        group = getattr(LOCKSTEP, "group", None)
        if group is not None:
            hit = group.predicted(self, X, y)
            if hit is not None:
                prediction, loss = hit
                return prediction, self.data_loss(y, prediction) if loss is None else loss
        prediction = self.predict_raw_alone(X)
        return prediction, self.data_loss(y, prediction)

    def predict_raw_alone(self, X, chunk=PREDICT_CHUNK):
        """:meth:`predict_raw` for this network alone."""
        parts = []
        for start in range(0, X.shape[0], chunk):
            values = X[start:start + chunk]
            for layer in self.layers:
                pre = values @ layer.weights
                pre += layer.intercept
                if layer.activation is None:
                    values = self.head.apply_(pre)
                else:
                    values = layer.activation.apply_(pre, **layer.params)
            parts.append(values)
        if not parts:
            return np.empty((0, self.units[-1]), dtype=self.dtype)
        return parts[0] if len(parts) == 1 else np.concatenate(parts)

    def data_loss(self, y, prediction):
        """The head's matched loss (:mod:`workbench.nets.losses`), without the L2 term."""
        return self.head.loss_fn.value(y, prediction)

    def _mask_for(self, alpha):
        """``alpha`` on the weight entries, 0 on the intercepts (kept for the last alpha)."""
        if self._l2_alpha != alpha:
            self._alpha_mask = self.coef_mask * alpha
            self._l2_alpha = alpha
        return self._alpha_mask

    def _l2(self, alpha, rows):
        """``alpha * W`` (zeros at the intercepts) into a buffer; returns its loss term."""
        np.multiply(self.theta, self._mask_for(alpha), out=self._l2_buf)
        return 0.5 * float(np.dot(self.theta, self._l2_buf)) / rows

    def backward(self, X_ones, y, rows, alpha, scale=True):
        """Forward + backward on ``rows`` rows; fills ``self.grad``; returns the batch loss.

        The loss is the head's data loss plus ``0.5 * alpha * sum ||W||^2 / rows``
        (scikit-learn's MLP). ``self.grad`` receives its gradient; with
        ``scale=False`` the gradient is left multiplied by ``rows`` (the optimisers
        fold the division into their own step, see :mod:`workbench.nets.optimizers`).
        """
        prediction = self.forward(X_ones, rows)
        delta = self._backpropagate(X_ones, y, rows, prediction)
        head = self.head
        # a canonical head's delta is the residual p - y, which the loss may reuse
        loss = head.loss_fn.value(y, prediction, delta if head.canonical else None)
        if alpha:
            loss += self._l2(alpha, rows)
            self.grad += self._l2_buf
        if scale:
            self.grad /= rows
        return loss

    def data_gradient(self, X_ones, y, rows):
        """The data loss's mean gradient on ``rows`` rows into ``self.grad`` (no L2 term),
        without evaluating the loss: :meth:`backward` with ``alpha=0`` minus the loss
        value, for callers that need only the gradient (the health probe's norms)."""
        prediction = self.forward(X_ones, rows)
        self._backpropagate(X_ones, y, rows, prediction)
        self.grad /= rows

    def _backpropagate(self, X_ones, y, rows, prediction, views=None):
        """The data loss's gradient, summed over the ``rows`` rows, into ``self.grad``
        (after :meth:`forward` on the same rows); returns the output layer's delta."""
        if views is None:
            views = self.buffers(rows)
        top = views[-1]
        delta = self.head.output_delta(y, prediction, top.pre, top.delta)
        out_delta = delta
        for i in range(len(self.layers) - 1, -1, -1):
            layer = self.layers[i]
            below = X_ones if i == 0 else views[i - 1].output_ones
            np.matmul(below.T, delta, out=layer.grad_block)
            if i == 0:
                break
            buf, under = views[i - 1], self.layers[i - 1]
            # full width: the column for the ones is computed and then ignored.
            # np.dot, not np.matmul: matmul takes a slow non-BLAS path when the
            # inner dimension is 1 (a single-output layer); dot calls sgemm/dgemm
            np.dot(delta, layer.block.T, out=buf.delta_ones)
            slope = under.activation.derivative(buf.pre, buf.output_ones, out=buf.scratch,
                                                **under.params)
            np.multiply(buf.delta_ones, slope, out=buf.delta_ones)
            delta = buf.delta
        return out_delta

    # training ----------------------------------------------------------------
    def _epoch_predictions(self, n):
        """A preallocated (``n`` x outputs) buffer for one epoch's batch predictions."""
        buf = self._epoch_pred
        if buf is None or buf.shape[0] < n:
            buf = self._epoch_pred = np.empty((n, self.units[-1]), dtype=self.dtype)
        return buf[:n]

    def train_epoch(self, optimizer, X_ones, y, batch_size, alpha, probe=None):
        """One pass over the rows in batches of ``batch_size``: forward, backward and
        ``optimizer.update`` per batch; returns the epoch's loss.

        The loss is the row-weighted mean of the batch losses, each taken on the
        batch's predictions before its update (scikit-learn's MLP reports
        ``sum(batch_loss * rows) / n``), plus the L2 term of each batch
        (``0.5 * alpha * ||W||^2 / rows``, weighted by ``rows``: the sum of
        ``0.5 * alpha * ||W||^2`` over the batches, divided by ``n``). It is computed
        once per epoch: each batch's predictions are written into one epoch-sized
        buffer as the forward pass makes them, and the head's loss is taken over the
        whole buffer at the end -- the same sum, without a loss evaluation per batch.
        (The mean over all rows equals the row-weighted mean of the batch means up
        to rounding.)

        Inside :func:`workbench.nets.stacked.run_in_lockstep` the epoch is handed to
        the thread's lockstep group, which runs it in a stack with the other fits'
        epochs and returns the same result. ``probe``: the rows ``(X_ones, y)`` whose
        layer health (:func:`workbench.nets.health.measure`) the caller measures right
        after this epoch, if it does; the group then measures it in the stack, with the
        same results. Alone it is not used.
        """
        group = getattr(LOCKSTEP, "group", None)
        if group is not None:
            return group.submit(self, optimizer, X_ones, y, batch_size, alpha, probe)
        return self.train_epoch_alone(optimizer, X_ones, y, batch_size, alpha)

    def train_epoch_alone(self, optimizer, X_ones, y, batch_size, alpha):
        """:meth:`train_epoch` for this network alone (never handed to a lockstep group)."""
        n = X_ones.shape[0]
        predictions = self._epoch_predictions(n)
        theta, grad, update = self.theta, self.grad, optimizer.update
        forward, backpropagate = self.forward, self._backpropagate
        squares = 0.0
        mask, l2_buf = (self._mask_for(alpha), self._l2_buf) if alpha else (None, None)
        full = self.buffers(batch_size) if n >= batch_size else None
        for start in range(0, n, batch_size):
            stop = start + batch_size
            if stop <= n:
                rows, views = batch_size, full
            else:
                stop = n
                rows = n - start
                views = self.buffers(rows)
            X_batch = X_ones[start:stop]
            prediction = forward(X_batch, rows, predictions[start:stop], views)
            backpropagate(X_batch, y[start:stop], rows, prediction, views)
            if alpha:
                # alpha * W into the gradient; alpha * ||W||^2 for the loss
                np.multiply(theta, mask, out=l2_buf)
                squares += float(np.dot(theta, l2_buf))
                grad += l2_buf
            update(theta, grad, rows)
        loss = float(self.head.loss_fn.value(y, predictions))
        return loss + 0.5 * squares / n if alpha else loss
