"""Several networks of one shape trained together, with the answers of separate fits.

:class:`NetworkStack` runs one epoch of ``K`` networks (same layer widths, hidden
activations, head and float type; e.g. the folds x repeats of one configuration)
in lockstep: their parameters, gradients and optimiser states are stacked into
``(K, ...)`` arrays, so that each batch step is one NumPy call per operation for all
``K`` networks instead of one per network. It performs, for every network, exactly
the operations :meth:`workbench.nets.network.Network.train_epoch` performs, on
memory of the same layout (each network's slice of a stacked array is a contiguous
block shaped like its own buffer), so the results are the same to the last bit:
element-wise operations act on each element alone; each matrix product runs on
each network's slice (``np.matmul`` on a stack calls the same BLAS routine per
slice as on a single matrix; the products ``np.dot`` computes in the single path are
computed here with ``np.dot`` on each slice); the sums that mix values of one
network -- its L2 norm, its epoch loss -- are taken per network by the same
function on a slice of the same layout (the epoch losses by the loss's
``stacked_value``, which gives each network's single value bit for bit, see
:mod:`workbench.nets.losses`). ``tests/test_engine_speed_paths.py``
checks the equality on every hidden activation and head in float64 and float32.

Two conditions: the networks train on the same number of rows with the same
batch size and ``alpha`` (so their batches line up), and their optimisers are of
one kind with the same settings and the same step count (so one stacked step is
each network's step). :meth:`NetworkStack.train_epoch` refuses anything else with
a ``ValueError``; callers group by :func:`stack_key` first.
"""

from __future__ import annotations

import threading
from collections import deque
from typing import NamedTuple

import numpy as np

from workbench.nets.health import SATURATION_THRESHOLD
from workbench.nets.network import LOCKSTEP, PREDICT_CHUNK, Network
from workbench.nets.optimizers import AdamOptimizer, SGDOptimizer

__all__ = ["NetworkStack", "run_in_lockstep", "stack_key", "train_epoch_together"]


def stack_key(net: Network, optimizer, rows: int, batch_size: int, alpha: float) -> tuple:
    """What must be equal for networks to train in one stack."""
    shape = net.__dict__.get("_stack_shape")
    if shape is None:  # a network's widths, activations, head and dtype are set when built
        shape = net._stack_shape = (
            tuple(net.units), tuple(net.hidden_names), net.head.key, np.dtype(net.dtype).str,
            tuple(tuple(sorted(layer.params.items())) for layer in net.layers))
    return (*shape, rows, batch_size, float(alpha), _optimizer_key(optimizer))


def _optimizer_key(opt) -> tuple:
    if isinstance(opt, AdamOptimizer):
        return ("adam", opt.learning_rate_init, opt.beta_1, opt.beta_2, opt.epsilon, opt.t)
    if isinstance(opt, SGDOptimizer):
        return ("sgd", opt.learning_rate, opt.momentum, opt.nesterov)
    raise ValueError(f"cannot stack the optimiser {type(opt).__name__}")


class NetworkStack:
    """Buffers for training ``K`` networks of one shape together (see the module docstring).

    Parameters
    ----------
    template : Network
        Any one of the networks (its widths, activations, head and float type).
    k : int
        How many networks the stack holds.
    batch_size : int
        The largest batch.
    """

    def __init__(self, template: Network, k: int, batch_size: int):
        self.template, self.k, self.batch_size = template, k, batch_size
        net, dtype = template, template.dtype
        size = net.theta.size
        self.theta = np.zeros((k, size), dtype=dtype)
        self.grad = np.zeros((k, size), dtype=dtype)
        self._l2_buf = np.empty_like(self.theta)
        # per layer: the (K, fan_in + 1, fan_out) views of the stacked parameters and
        # gradients, at the offsets the network's own layers have in its theta
        base = net.theta.__array_interface__["data"][0]
        itemsize = net.theta.itemsize
        self.blocks, self.grad_blocks = [], []
        for layer in net.layers:
            start = (layer.block.__array_interface__["data"][0] - base) // itemsize
            shape = layer.block.shape
            stop = start + shape[0] * shape[1]
            self.blocks.append(self.theta[:, start:stop].reshape(k, *shape))
            self.grad_blocks.append(self.grad[:, start:stop].reshape(k, *shape))
        # work buffers shaped as the network's (Network.ensure), one per network
        self._outputs, self._pres, self._deltas, self._scratch = self._work_buffers(batch_size)
        self._pred = None
        self._probe_views: dict[int, list] = {}
        self._adam, self._adam_settings = None, None
        # each network's rows of the parameters and of the L2 buffer (views, made once)
        self._theta_rows = list(self.theta)
        self._l2_rows = list(self._l2_buf)

    def _work_buffers(self, rows):
        """Per layer: outputs (with the ones column of a hidden layer), pre-activations
        (where needed), deltas and scratch, ``(K, rows, width)``, as ``Network.ensure``."""
        net, k, dtype = self.template, self.k, self.template.dtype
        n_hidden = len(net.hidden)
        outputs, pres, deltas, scratch = [], [], [], []
        for i, width in enumerate(net.units[1:]):
            hidden = i < n_hidden
            output = np.empty((k, rows, width + 1 if hidden else width), dtype=dtype)
            if hidden:
                output[:, :, width] = 1
            needs_pre = net.hidden[i].needs_z if hidden else not net.head.canonical
            outputs.append(output)
            pres.append(np.empty_like(output) if needs_pre else None)
            deltas.append(np.empty_like(output))
            scratch.append(np.empty_like(output) if hidden else None)
        return outputs, pres, deltas, scratch

    # -- state in and out ---------------------------------------------------------
    def _gather(self, nets, optimizers):
        for i, net in enumerate(nets):
            self.theta[i] = net.theta
        first = optimizers[0]
        size = self.theta.size
        if isinstance(first, AdamOptimizer):
            settings = (first.learning_rate_init, first.beta_1, first.beta_2, first.epsilon)
            opt = self._adam if self._adam_settings == settings else None
            if opt is None:  # the stacked optimiser is kept while its settings are the same:
                # every round sets all its state (moments, step) before its first step
                opt = self._adam = AdamOptimizer(size, self.theta.dtype, *settings)
                self._adam_settings = settings
            opt.t, opt.learning_rate = first.t, opt.learning_rate_init
            per = self.theta.shape[1]
            for i, o in enumerate(optimizers):
                opt._moments[:, i * per:(i + 1) * per] = o._moments
        else:
            opt = SGDOptimizer(size, self.theta.dtype, first.learning_rate_init,
                               first.lr_schedule, first.momentum, first.nesterov, first.power_t)
            opt.learning_rate = first.learning_rate
            opt.velocity.reshape(self.k, -1)[...] = [o.velocity for o in optimizers]
        return opt

    def _scatter(self, nets, optimizers, opt):
        per = self.theta.shape[1]
        for i, (net, o) in enumerate(zip(nets, optimizers)):
            net.theta[...] = self.theta[i]
            net.grad[...] = self.grad[i]
            if isinstance(o, AdamOptimizer):
                o._moments[...] = opt._moments[:, i * per:(i + 1) * per]
                o.t, o.learning_rate = opt.t, opt.learning_rate
            else:
                o.velocity[...] = opt.velocity[i * per:(i + 1) * per]

    # -- one epoch ------------------------------------------------------------------
    def _views(self, rows, buffers=None):
        """Per layer, the ``(outputs, pre-activations, deltas, scratch)`` of batches of
        ``rows`` rows, and the arguments of the backward pass's per-network products
        (:meth:`_per_network_products`)."""
        outputs, pres, deltas, scratch = buffers or (self._outputs, self._pres, self._deltas,
                                                     self._scratch)
        views = [(out[:, :rows], None if pre is None else pre[:, :rows], delta[:, :rows],
                  None if sc is None else sc[:, :rows])
                 for out, pre, delta, sc in zip(outputs, pres, deltas, scratch)]
        return views, self._per_network_products(views)

    def _per_network_products(self, views):
        """For each layer ``i >= 1``: ``[(delta_j, block_j.T, below_delta_j)]``, the views
        ``np.dot(delta[j], block[j].T, out=delta_ones[j])`` of the backward pass takes, made
        once (the output layer's delta is its delta buffer; a hidden layer's, its delta
        buffer without the ones column)."""
        products = [None]
        last = len(views) - 1
        for i in range(1, last + 1):
            delta = views[i][2] if i == last else views[i][2][..., :-1]
            products.append([(delta[j], self.blocks[i][j].T, views[i - 1][2][j])
                             for j in range(self.k)])
        return products

    def train_epoch(self, nets, optimizers, X, y, batch_size, alpha,
                    grouped: bool = False) -> list[float]:
        """One epoch of each network on its own rows; returns each network's epoch loss.

        Parameters
        ----------
        nets : list of Network
            ``K`` networks of the stack's shape.
        optimizers : list
            Each network's optimiser (all Adam or all SGD, same settings and steps).
        X : ndarray (K, n, n_features + 1) or list of K arrays (n, n_features + 1)
            Each network's epoch rows (with the ones column), in batch order.
        y : ndarray (K, n, n_outputs) or list of K arrays
        batch_size : int
        alpha : float
        grouped : bool
            The caller grouped the networks by :func:`stack_key` for these rows, batch
            size and alpha (the lockstep group does, every round): the check is skipped.

        The networks' parameters, gradients and optimiser states end as
        ``[net.train_epoch(opt, X[i], y[i], batch_size, alpha) for ...]`` leaves them.
        """
        k = len(nets)
        if k != self.k or len(optimizers) != k:
            raise ValueError(f"the stack holds {self.k} networks, got {k} networks and "
                             f"{len(optimizers)} optimisers")
        X = np.ascontiguousarray(np.asarray(X) if not isinstance(X, np.ndarray) else X)
        y = np.ascontiguousarray(np.asarray(y) if not isinstance(y, np.ndarray) else y)
        n = X.shape[1]
        if batch_size > self.batch_size:
            raise ValueError(f"batch_size {batch_size} exceeds the stack's {self.batch_size}")
        keys = {stack_key(net, o, n, batch_size, alpha) for net, o in zip(nets, optimizers)} \
            if not grouped else None
        if not grouped and (len(keys) != 1 or next(iter(keys))[:5] != stack_key(
                self.template, optimizers[0], n, batch_size, alpha)[:5]):
            raise ValueError("these networks cannot train in one stack (different shapes, "
                             "rows, batch size, alpha or optimiser states); group them by "
                             "stack_key")
        opt = self._gather(nets, optimizers)
        template, head = self.template, self.template.head
        if self._pred is None or self._pred.shape[1] < n:
            self._pred = np.empty((k, n, template.units[-1]), dtype=template.dtype)
        predictions = self._pred[:, :n]
        theta, grad, l2_buf = self.theta, self.grad, self._l2_buf
        flat_theta, flat_grad = theta.reshape(-1), grad.reshape(-1)
        mask = template._mask_for(alpha) if alpha else None
        squares = [0.0] * k
        views_by_rows = {}
        for start in range(0, n, batch_size):
            stop = min(start + batch_size, n)
            rows = stop - start
            views = views_by_rows.get(rows)
            if views is None:
                views = views_by_rows[rows] = self._views(rows)
            self._forward_backward(X[:, start:stop], y[:, start:stop], views,
                                   predictions[:, start:stop])
            if alpha:
                np.multiply(theta, mask, out=l2_buf)
                for j, (theta_j, l2_j) in enumerate(zip(self._theta_rows, self._l2_rows)):
                    squares[j] += float(np.dot(theta_j, l2_j))
                grad += l2_buf
            opt.update(flat_theta, flat_grad, rows)
        self._scatter(nets, optimizers, opt)
        # each network's loss as its own epoch takes it, in one call for the stack
        # (Loss.stacked_value: the single call's value of each network, bit for bit)
        losses = head.loss_fn.stacked_value(y, predictions)
        if alpha:
            losses = [loss + 0.5 * squares[j] / n for j, loss in enumerate(losses)]
        return losses

    def _forward_backward(self, X_batch, y_batch, views, top):
        """The forward pass (:meth:`Network.forward`) of a batch, its predictions into
        ``top``, and the backward pass (:meth:`Network._backpropagate`): the data loss's
        gradient, summed over the batch's rows, into the stack's gradients."""
        template, head = self.template, self.template.head
        layers = template.layers
        last = len(layers) - 1
        views, products = views
        # forward (Network.forward)
        below = X_batch
        for i, layer in enumerate(layers):
            output_ones, pre, _, _ = views[i]
            activation = layer.activation
            if activation is None:
                np.matmul(below, self.blocks[i], out=top)
                if pre is not None:
                    np.copyto(pre, top)
                head.apply_(top)
                break
            np.matmul(below, self.blocks[i], out=output_ones[..., :-1])
            if pre is not None:
                np.copyto(pre, output_ones)
            activation.apply_(output_ones, **layer.params)
            if not activation.keeps_one:
                output_ones[..., -1] = 1
            below = output_ones
        # backward (Network._backpropagate)
        _, top_pre, top_delta, _ = views[last]
        delta = head.output_delta(y_batch, top, top_pre, top_delta)
        for i in range(last, -1, -1):
            below = X_batch if i == 0 else views[i - 1][0]
            np.matmul(below.transpose(0, 2, 1), delta, out=self.grad_blocks[i])
            if i == 0:
                break
            output_ones, pre, delta_ones, scratch = views[i - 1]
            if i < last or delta is top_delta:  # the views made for these buffers
                for delta_j, block_t, out in products[i]:
                    np.dot(delta_j, block_t, out=out)
            else:
                block = self.blocks[i]
                for j in range(self.k):
                    np.dot(delta[j], block[j].T, out=delta_ones[j])
            under = layers[i - 1]
            slope = under.activation.derivative(pre, output_ones, out=scratch, **under.params)
            np.multiply(delta_ones, slope, out=delta_ones)
            delta = delta_ones[..., :-1]

    def measure_health(self, X_ones, y) -> list[tuple]:
        """Each network's :func:`workbench.nets.health.measure` on its own probe rows, from
        the stack's parameters (as the last :meth:`train_epoch` left them): ``K`` tuples
        ``(dead, saturated, grad_norm)``, and the probe's mean gradients in
        :attr:`grad` (what ``measure`` leaves in ``net.grad``).

        ``X_ones`` is ``(K, rows, n_features + 1)``, ``y`` ``(K, rows, n_outputs)``. The
        same arithmetic on each network's slice as ``measure``: the stacked forward and
        backward pass of :meth:`train_epoch`, the division by ``rows`` element by
        element, each gradient norm by ``numpy.linalg.norm`` on the network's own block;
        the dead and saturated shares are counts of units and rows (sums of 0s and 1s,
        exact in any order, here the rows' counted by one matrix product) divided as
        ``measure`` divides them (``numpy.mean`` of booleans: the count over their number,
        in float64).
        """
        template = self.template
        rows = X_ones.shape[1]
        views = self._probe_views.get(rows)
        if views is None:
            views = self._probe_views[rows] = self._views(rows, self._work_buffers(rows))
        top = views[0][-1][0]
        self._forward_backward(X_ones, y, views, top)
        self.grad /= rows
        norms = [[float(np.linalg.norm(block[j, :layer.weights.shape[0]]))
                  for block, layer in zip(self.grad_blocks, template.layers)]
                 for j in range(self.k)]
        dead = [[] for _ in range(self.k)]
        saturated = [[] for _ in range(self.k)]
        tiny = np.finfo(template.dtype).tiny * 1e6
        # counts over the rows as one product with a row of ones: sums of 0s and 1s, exact
        # in float32 up to 2**24 rows (measure's mean over rows is the count / rows)
        if rows > 2**24:  # pragma: no cover - probes are at most PROBE_ROWS rows
            raise ValueError("too many probe rows to count exactly in float32")
        ones = np.ones((1, rows), dtype=np.float32)
        for layer, (out, pre, _, _) in zip(template.layers, views[0]):
            activation = layer.activation
            if activation is None:
                break
            slope = np.abs(activation.derivative(None if pre is None else pre[..., :-1],
                                                 out[..., :-1], **layer.params))
            off = np.matmul(ones, (slope <= tiny).astype(np.float32))[:, 0]
            dead_units = off == rows  # the derivative is zero on every row
            dead_share = dead_units.mean(axis=1)
            if activation.saturates:
                low = np.matmul(ones, (slope < SATURATION_THRESHOLD).astype(np.float32))[:, 0]
                flat = low.astype(np.float64) / rows > 0.5
                saturated_share = (flat & ~dead_units).mean(axis=1)
            else:
                saturated_share = np.zeros(self.k)
            for j in range(self.k):
                dead[j].append(float(dead_share[j]))
                saturated[j].append(float(saturated_share[j]))
        return [(dead[j], saturated[j], norms[j]) for j in range(self.k)]

    def predict_raw(self, X, chunk: int = PREDICT_CHUNK) -> np.ndarray:
        """Each network's :meth:`workbench.nets.network.Network.predict_raw` of its own rows,
        from the stack's parameters (as the last :meth:`train_epoch` left them).

        ``X`` is ``(K, n, n_features)`` (no ones column), in the networks' float type;
        returns ``(K, n, n_outputs)``. The same arithmetic on each network's slice as
        the single network's pass, chunk by chunk: each layer's product per slice
        (``np.matmul`` on a stack calls the single product's BLAS routine on each
        slice), the intercept added, the activation applied element by element.
        """
        template = self.template
        parts = []
        for start in range(0, X.shape[1], chunk):
            values = X[:, start:start + chunk]
            for layer, block in zip(template.layers, self.blocks):
                fan_in = layer.weights.shape[0]
                pre = np.matmul(values, block[:, :fan_in])
                pre += block[:, fan_in][:, None, :]
                if layer.activation is None:
                    values = template.head.apply_(pre)
                else:
                    values = layer.activation.apply_(pre, **layer.params)
            parts.append(values)
        return parts[0] if len(parts) == 1 else np.concatenate(parts, axis=1)


def train_epoch_together(nets, optimizers, X, y, batch_size, alpha,
                         stack: NetworkStack | None = None) -> list[float]:
    """One epoch of ``K`` networks in one :class:`NetworkStack` (built when not given);
    each network's loss, as ``Network.train_epoch`` would return it."""
    if stack is None:
        stack = NetworkStack(nets[0], len(nets), batch_size)
    return stack.train_epoch(nets, optimizers, X, y, batch_size, alpha)


# --------------------------------------------------------------------------- lockstep


class _Lockstep:
    """Runs several fits, each in its own thread, one at a time in a fixed order (a
    baton passed by locks), and their epochs together.

    Only the thread holding the baton runs; it runs until its fit hands in its next
    epoch (:meth:`submit`) or ends (:meth:`leave`), then passes the baton to the next
    fit in line. When every fit still running has handed in its epoch, the thread
    holding the baton runs them in stacks (grouped by :func:`stack_key`) and the fits
    continue in index order. One thread running at a time means no contention for
    the interpreter lock and a schedule that is the same on every run.

    After a stacked epoch the stack also computes, for all its networks at once, what
    each fit asks for after every epoch: the predictions of the rows it watches
    (held-out and validation rows) and their targets' loss (:meth:`predicted`), and its
    layer health on the probe it announced with the epoch (:meth:`measured`). Each is
    handed out only when the fit asks with the same rows, targets and parameters, bit
    for bit; otherwise the fit computes it alone. The fits' shuffled epoch rows live in
    one array of the group (:meth:`epoch_array`), which a stack of consecutive members
    trains on in place.
    """

    def __init__(self, members: int):
        # one lock per member, held while the member must wait (a lock, unlike a
        # semaphore, is one C call to release from another thread)
        self.members = members
        self._baton = [threading.Lock() for _ in range(members)]
        for lock in self._baton:
            lock.acquire()
        self._waiting: deque[int] = deque()  # members ready to run, in order
        self._pending: dict[int, tuple] = {}
        self._results: dict[int, object] = {}
        self._stacks: dict[tuple, NetworkStack] = {}
        self.rounds = 0
        self.stacked_epochs = 0
        self.single_epochs = 0
        # repeated predictions (Network.predict_raw) each member asks for every epoch, and
        # the loss of their targets (Network.predict_with_loss): member -> [rows, targets
        # or None] (at most two: held-out rows, validation rows), and member ->
        # {id(rows): _Prefetched} computed in the stack
        self._watched: dict[int, list] = {}
        self._training: set[int] = set()  # members that have handed in an epoch
        self._prefetched: dict[int, dict] = {}
        self._inputs: dict[tuple, tuple] = {}
        self._targets: dict[tuple, tuple] = {}
        # layer health a member announced it measures after its epoch (its probe rows),
        # measured in the stack: member -> _Measured
        self._measured: dict[int, _Measured] = {}
        self._probes: dict[tuple, tuple] = {}
        self.health_stacked = 0
        # per stack: the (K, rows, width) arrays its members' epoch rows and targets are
        # copied into every round, kept from one round to the next
        self._epoch_inputs: dict[tuple, list] = {}
        # the members' epoch rows (Network.epoch_array): for the first shape asked for, one
        # (members, *shape) array whose slices they get in the order they ask, so that a
        # stack of consecutive slices is trained on in place; id(slice) -> (slice, array,
        # position)
        self._epoch_arrays: dict[tuple, list] = {}
        self._epoch_slices: dict[int, tuple] = {}
        self._epoch_owner = None
        self.epochs_in_place = 0
        self.predictions_stacked = 0
        self.losses_stacked = 0
        self.handed_out = 0  # predictions, losses and health handed out from a stack

    def epoch_array(self, shape, dtype) -> np.ndarray:
        """An array for a member's epoch rows (see :func:`workbench.nets.network.epoch_array`):
        the next free slice of the group's array for ``shape`` and ``dtype`` when the first
        member to ask asked for that shape (its rows and its targets); other shapes, and
        more requests than members, get an array of their own."""
        key = (tuple(int(d) for d in shape), np.dtype(dtype).str)
        me = getattr(LOCKSTEP, "member", None)
        if self._epoch_owner is None:
            self._epoch_owner = me
        if key not in self._epoch_arrays and me == self._epoch_owner:
            self._epoch_arrays[key] = [np.empty((self.members, *key[0]), dtype=dtype), 0]
        held = self._epoch_arrays.get(key)
        if held is None or held[1] >= self.members:
            return np.empty(shape, dtype=dtype)
        whole, position = held
        held[1] += 1
        piece = whole[position]
        self._epoch_slices[id(piece)] = (piece, whole, position)
        return piece

    def _in_place(self, arrays):
        """The group's array of the members' epoch rows when ``arrays`` are consecutive
        slices of it (the stack then trains on them where they are), else None."""
        found = [self._epoch_slices.get(id(a)) for a in arrays]
        if any(f is None or f[0] is not a for f, a in zip(found, arrays)):
            return None
        whole, first = found[0][1], found[0][2]
        if any(f[1] is not whole or f[2] != first + j for j, f in enumerate(found)):
            return None
        return whole[first:first + len(arrays)]

    def start(self, members: int):
        """Line the members up and give the first one the baton."""
        self._waiting.extend(range(1, members))
        self._baton[0].release()

    def wait_turn(self, me: int):
        self._baton[me].acquire()

    def submit(self, net, optimizer, X, y, batch_size, alpha, probe=None):
        me = LOCKSTEP.member
        self._training.add(me)
        self._pending[me] = (net, optimizer, X, y, batch_size, alpha, probe)
        self._pass(me, wait=True)
        result = self._results.pop(me)
        if isinstance(result, BaseException):
            raise result
        return result

    def leave(self, me: int):
        self._watched.pop(me, None)
        self._prefetched.pop(me, None)
        self._measured.pop(me, None)
        self._training.discard(me)
        self._pass(me, wait=False)

    def predicted(self, net, X, y=None):
        """The member's prediction of ``X`` computed in its stack after the last epoch, if
        its network's parameters are still those it was computed with, and with ``y``
        the loss of that prediction against ``y`` when the stack computed it too (the
        same targets, same values), else None: ``(prediction, loss or None)``; None
        when there is no prediction (the caller computes it alone). ``X`` (and ``y``)
        are noted for the next epochs when the member is training (rows of the
        network's float type, at most two arrays per member)."""
        me = getattr(LOCKSTEP, "member", None)
        got = self._prefetched.get(me)
        hit = None
        if got:
            entry = got.pop(id(X), None)
            # the same rows (same array, same bytes as when the stack copied them) and
            # the same parameters: the prediction the network would make alone
            if entry is not None and entry.X is X and entry.net is net \
                    and _same_bits(entry.theta, net.theta):
                if _same_bits(entry.rows, X):
                    loss = None
                    if entry.loss is not None and isinstance(y, np.ndarray):
                        if _same_bits(entry.targets, y):
                            loss = entry.loss  # these targets' loss (same values), from the stack
                            self.handed_out += 1
                        else:
                            self._targets.pop(entry.key, None)  # stacked anew next round
                    hit = (entry.prediction, loss)
                    self.handed_out += 1
                else:
                    self._inputs.pop(entry.key, None)  # the rows changed: stacked anew
        if me in self._training and isinstance(X, np.ndarray) and X.ndim == 2 \
                and X.dtype == net.dtype and X.flags.c_contiguous:
            watched = self._watched.setdefault(me, [])
            slot = next((w for w in watched if w[0] is X), None)
            if slot is None and len(watched) < 2:
                slot = [X, None]
                watched.append(slot)
            if slot is not None and y is not None and slot[1] is not y:
                fits = isinstance(y, np.ndarray) and y.ndim == 2 and y.dtype == X.dtype \
                    and y.flags.c_contiguous and y.shape[0] == X.shape[0] \
                    and y.shape[1] == net.units[-1]
                slot[1] = y if fits else None
        return hit

    def _prefetch(self, stack, members, nets):
        """Predict every member's watched rows in the stack, and the loss of each member's
        targets for them (see :meth:`predicted`)."""
        lists = [self._watched.get(m, []) for m in members]
        for m in members:
            self._prefetched[m] = {}
        n = len(lists[0])
        if n == 0 or any(len(rows) != n for rows in lists):
            return
        theta = None
        for slot in range(n):
            arrays = [rows[slot][0] for rows in lists]
            shape = arrays[0].shape
            if shape[0] == 0 or any(a.shape != shape for a in arrays):
                continue
            key = (slot, tuple(members))
            kept = _kept_stack(self._inputs, key, arrays)
            predictions = stack.predict_raw(kept[1])
            # the targets' losses, when every member has targets of one shape: the loss
            # of each member's prediction alone (Loss.stacked_value, bit for bit)
            targets = [rows[slot][1] for rows in lists]
            losses = [None] * len(members)
            kept_y = None
            if all(t is not None and t.shape == targets[0].shape for t in targets):
                kept_y = _kept_stack(self._targets, key, targets)
                losses = stack.template.head.loss_fn.stacked_value(kept_y[1], predictions)
                self.losses_stacked += len(members)
            if theta is None:
                theta = stack.theta.copy()  # each member's parameters after the epoch
            for j, (m, net, X) in enumerate(zip(members, nets, arrays)):
                self._prefetched[m][id(X)] = _Prefetched(
                    X, net, theta[j], predictions[j], kept[1][j],
                    None if kept_y is None else kept_y[1][j], losses[j], key)
            self.predictions_stacked += len(members)

    def measured(self, net, X_ones, y):
        """The member's layer health on the probe rows ``X_ones``, ``y`` measured in its
        stack after the last epoch (``(dead, saturated, grad_norm)``, and the probe's
        gradients written into ``net.grad`` as :func:`workbench.nets.health.measure`
        leaves them), if the rows, targets and parameters are those it was measured with
        (same values); else None (the caller measures alone)."""
        entry = self._measured.pop(getattr(LOCKSTEP, "member", None), None)
        if entry is None or entry.net is not net or not isinstance(X_ones, np.ndarray) \
                or not isinstance(y, np.ndarray) or not _same_bits(entry.theta, net.theta):
            return None
        if not (_same_bits(entry.rows, X_ones) and _same_bits(entry.targets, y)):
            # the probe's rows or targets changed: stacked anew next round
            self._probes.pop(("rows", entry.key), None)
            self._probes.pop(("targets", entry.key), None)
            return None
        net.grad[...] = entry.grad
        self.handed_out += 1
        return entry.health

    def _measure(self, stack, members, nets, probes):
        """Measure the layer health of the members that announced their probe rows (all
        of the stack's, of one shape), in the stack (see :meth:`measured`)."""
        for m in members:
            self._measured.pop(m, None)
        if any(p is None for p in probes):
            return
        X = [p[0] for p in probes]
        y = [p[1] for p in probes]
        if not all(isinstance(a, np.ndarray) and a.ndim == 2 and a.dtype == stack.theta.dtype
                   and a.shape == X[0].shape for a in X) \
                or not all(isinstance(a, np.ndarray) and a.ndim == 2 and a.shape == y[0].shape
                           and a.shape[0] == X[0].shape[0] for a in y) or X[0].shape[0] == 0:
            return
        key = tuple(members)
        kept_X = _kept_stack(self._probes, ("rows", key), X)
        kept_y = _kept_stack(self._probes, ("targets", key), y)
        health = stack.measure_health(kept_X[1], kept_y[1])
        grad, theta = stack.grad.copy(), stack.theta.copy()
        for j, (m, net) in enumerate(zip(members, nets)):
            self._measured[m] = _Measured(net, theta[j], kept_X[1][j], kept_y[1][j],
                                          health[j], grad[j], key)
        self.health_stacked += len(members)

    def _pass(self, me: int, wait: bool):
        if not self._waiting and self._pending:
            self._run_round()
        if not self._waiting:
            return  # the last member has ended
        nxt = self._waiting.popleft()
        if nxt == me:
            return
        self._baton[nxt].release()
        if wait:
            self._baton[me].acquire()

    def _run_round(self):
        pending, self._pending = self._pending, {}
        groups: dict[tuple, list[int]] = {}
        for member, (net, opt, X, _, batch_size, alpha, _) in sorted(pending.items()):
            try:
                key = stack_key(net, opt, X.shape[0], batch_size, alpha)
            except ValueError:
                key = ("alone", member)
            groups.setdefault(key, []).append(member)
        self.rounds += 1
        for key, members in groups.items():
            try:
                if len(members) == 1:
                    net, opt, X, y, batch_size, alpha, _ = pending[members[0]]
                    self._results[members[0]] = net.train_epoch_alone(opt, X, y, batch_size,
                                                                      alpha)
                    self.single_epochs += 1
                    continue
                items = [pending[m] for m in members]
                nets, opts = [it[0] for it in items], [it[1] for it in items]
                batch_size, alpha = items[0][4], items[0][5]
                # the stack (its buffers) and its input arrays serve every round of these
                # networks: keyed by what fixes their shapes, not by the optimisers' step
                # count, which the last part of the key holds and every round changes
                skey = (key[:-1], len(items))
                stack = self._stacks.get(skey)
                if stack is None:
                    stack = self._stacks[skey] = NetworkStack(nets[0], len(items), batch_size)
                kept = self._epoch_inputs.setdefault(skey, [None, None])
                rows, targets = [it[2] for it in items], [it[3] for it in items]
                X = self._in_place(rows)
                y = self._in_place(targets)
                self.epochs_in_place += 0 if X is None else len(items)
                losses = stack.train_epoch(nets, opts,
                                           _stack_into(kept, 0, rows) if X is None else X,
                                           _stack_into(kept, 1, targets) if y is None else y,
                                           batch_size, alpha, grouped=True)
                self._results.update(zip(members, losses))
                try:
                    self._prefetch(stack, members, nets)
                except Exception:  # a prediction the stack cannot make is made alone
                    for m in members:
                        self._prefetched.pop(m, None)
                try:
                    self._measure(stack, members, nets, [it[6] for it in items])
                except Exception:  # health the stack cannot measure is measured alone
                    for m in members:
                        self._measured.pop(m, None)
                self.stacked_epochs += len(items)
            except Exception as exc:  # handed to each fit of the group, raised in its thread
                for member in members:
                    self._results[member] = exc
        self._waiting.extend(sorted(pending))


class _Measured(NamedTuple):
    """A member's layer health on its probe rows, measured in its stack after an epoch."""

    net: Network
    theta: np.ndarray  # the parameters it was measured with
    rows: np.ndarray  # the stack's copy of the probe rows (with the ones column)
    targets: np.ndarray  # ... and of their targets
    health: tuple  # (dead, saturated, grad_norm), as health.measure returns them
    grad: np.ndarray  # the probe's mean gradient (what measure leaves in net.grad)
    key: tuple  # where the stack keeps its copies (_Lockstep._probes)


class _Prefetched(NamedTuple):
    """A member's prediction of rows it watches, made in its stack after an epoch."""

    X: np.ndarray  # the member's rows (the array it asks with)
    net: Network
    theta: np.ndarray  # the network's parameters the prediction is of
    prediction: np.ndarray
    rows: np.ndarray  # the stack's copy of X's values
    targets: np.ndarray | None  # the stack's copy of the member's targets of the rows
    loss: float | None  # the loss of the prediction against them (Loss.value's)
    key: tuple  # where the stack keeps its copies (_Lockstep._inputs, _targets)


def _same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    """Whether two arrays hold the same values bit for bit (same shape and dtype): what a
    computation on one gives, it gives on the other. Stricter than ``numpy.array_equal``
    (which calls -0.0 and 0.0 equal) and, for a network's parameters, a fifth of its time;
    large arrays are compared as unsigned integers of the same width, without copies."""
    if a.shape != b.shape or a.dtype != b.dtype:
        return False
    if a.nbytes <= 1 << 16 or a.dtype.itemsize not in (1, 2, 4, 8):
        return a.tobytes() == b.tobytes()
    bits = np.dtype(f"u{a.dtype.itemsize}")
    return bool(np.equal(a.view(bits), b.view(bits)).all())


def _kept_stack(store: dict, key, arrays) -> tuple:
    """``(arrays, numpy.stack(arrays))``, kept in ``store[key]`` from round to round while
    the arrays are the same objects (else stacked anew). Their values are not compared
    here: whatever is computed from the kept stack is handed out only after the member's
    array is compared with its copy (:meth:`_Lockstep.predicted`, :meth:`_Lockstep.measured`),
    which drops the kept stack when they differ, so the next round stacks them anew."""
    kept = store.get(key)
    if kept is None or any(a is not b for a, b in zip(arrays, kept[0])):
        kept = store[key] = (arrays, np.stack(arrays))
    return kept


def _stack_into(kept: list, slot: int, arrays) -> np.ndarray:
    """``numpy.stack(arrays)``, written into ``kept[slot]`` when that array from an earlier
    round has the shape and dtype (else a new one, kept there). The same values; but an
    epoch's stack of a kiln task (5 x 2,000 x 17 float32, 680 kB) is above the size the C
    allocator takes from the operating system afresh, so a new one each round cost its
    page faults as well as the copy (about 160 against 30 microseconds on a busy machine).
    Arrays of unequal shapes or dtypes go to ``numpy.stack`` itself (which refuses the
    shapes as before)."""
    first = arrays[0]
    if any(a.shape != first.shape or a.dtype != first.dtype for a in arrays):
        return np.stack(arrays)
    shape = (len(arrays), *first.shape)
    out = kept[slot]
    if out is None or out.shape != shape or out.dtype != first.dtype:
        out = kept[slot] = np.empty(shape, dtype=first.dtype)
    for j, a in enumerate(arrays):
        out[j] = a
    return out


def run_in_lockstep(functions) -> tuple[list, dict]:
    """Call each function (no arguments) in its own thread, with the epochs of the
    networks they fit (:meth:`workbench.nets.network.Network.train_epoch`) run together
    in stacks; returns their results in order and counts of what was stacked.

    Each function may be any code that fits the engine's estimators, e.g. a whole
    trial (preprocessing pipeline, fit, scoring) of one fold of a configuration; the
    fits of the same shape (:func:`stack_key`) share their epochs' stacks. Every
    function's result is what it would be alone: the stacked epoch is the single
    epoch's arithmetic (see the module docstring), and each fit keeps its own
    random state, stopping rule and bookkeeping. A function's exception is raised
    here after all have ended (the first one, in order).

    Returns
    -------
    results : list
    counts : dict
        ``rounds`` (lockstep rounds), ``stacked_epochs`` (network epochs run in a
        stack of two or more), ``single_epochs`` (run alone), ``predictions_stacked``
        (watched rows predicted in a stack, per network), ``losses_stacked`` (the
        loss of their targets computed there too), ``health_stacked`` (layer health
        measured there, per network), ``handed_out`` (how many of these the fits
        received: those whose rows, targets and parameters had not changed) and
        ``epochs_in_place`` (stacked epochs trained on the fits' own epoch rows, without
        copying them into the stack).
    """
    functions = list(functions)
    group = _Lockstep(len(functions))
    results: list = [None] * len(functions)
    errors: list = [None] * len(functions)

    def member(i, fn):
        group.wait_turn(i)
        LOCKSTEP.group, LOCKSTEP.member = group, i
        try:
            results[i] = fn()
        except BaseException as exc:  # noqa: BLE001 - re-raised in the caller's thread
            errors[i] = exc
        finally:
            LOCKSTEP.group = None
            group.leave(i)

    threads = [threading.Thread(target=member, args=(i, fn), name=f"lockstep-{i}", daemon=True)
               for i, fn in enumerate(functions)]
    for t in threads:
        t.start()
    if functions:
        group.start(len(functions))
    for t in threads:
        t.join()
    for exc in errors:
        if exc is not None:
            raise exc
    return results, {"rounds": group.rounds, "stacked_epochs": group.stacked_epochs,
                     "single_epochs": group.single_epochs,
                     "predictions_stacked": group.predictions_stacked,
                     "losses_stacked": group.losses_stacked,
                     "health_stacked": group.health_stacked, "handed_out": group.handed_out,
                     "epochs_in_place": group.epochs_in_place}
