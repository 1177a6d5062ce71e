"""Event-by-event reference simulator: the ground truth of the golden vectors.

Each emitted event (addr, t, payload) is delivered to its fan-out neighbourhood through
precomputed index tables, as event-driven convolution does:

    V[o, target(addr, k)] += W[o, column(addr, k)] * payload      for every valid kernel tap k

Events of one batch (payload coding: the whole window; ttfs: one time step) are delivered
together with numpy; there is no Python loop per synapse.

Codings (Q = 2^p - 1, windows of T = 2^p steps):
    payload  every neuron fires once at its window's end: a = requantize(V); a = 0 sends nothing.
    ttfs     an input spike at step t injects a constant current W from t to the end of the input
             window (steps t..Q_in-1), so the potential at the window's end is exactly
             V = B + sum W * (Q_in - t) = B + sum W * a. During its own window the neuron compares V
             with a falling threshold (arith.ttfs_crosses) and fires at the first crossing, t = Q - a:
             the time-to-first-spike conversion with a dynamic threshold (Rueckauer & Liu 2018),
             in the exact form of Stanojevic et al. 2023, so ttfs carries the same integer as payload.
             Max pooling passes the first spike of its pool and blocks the later ones.
    binary   payload coding with p = 1.

Golden order of every layer's events: payload coding by address (t = 0); ttfs by step t, then
by address. Addresses are c*H*W + y*W + x of the layer's output (dense: the unit index).
Potentials, |V| and overflows are taken at window close, after the declared accumulator width
(arith.limit_accumulator) is applied; max_abs_v is the |V| before that limit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from snnconvert import arith, console
from snnconvert.intnet import IntLayer, IntNetwork

EVENT_FIELDS = [("addr", "<i8"), ("t", "<i8"), ("payload", "<i8")]


@dataclass
class RefTrace:
    input_events: np.ndarray        # EVENT_FIELDS, the input layer's events in golden order
    layer_events: list              # aligned with net.layers: EVENT_FIELDS array per layer (sumpool layers: None)
    potentials: np.ndarray          # (n_classes,) int64 output potentials at window close
    decision: int                   # argmax, ties -> lowest index
    early_decision: int             # ttfs: class of the first output spike; -1 if none or not ttfs
    max_abs_v: list                 # per layer, largest |V| seen (0 for pools)
    overflows: list                 # per layer, neurons whose potential overflowed the declared width
    sops: int = 0                   # synaptic operations: delivered (event, weight) pairs
    layer_potentials: list | None = None  # per layer: (neurons,) int64 potentials at window close (pools: None)


def _events(addr, t, payload) -> np.ndarray:
    ev = np.empty(len(addr), dtype=EVENT_FIELDS)
    ev["addr"], ev["t"], ev["payload"] = addr, t, payload
    return ev


def _golden(ev: np.ndarray) -> np.ndarray:
    return ev[np.lexsort((ev["addr"], ev["t"]))]


def _taps(L: IntLayer):
    """For every input address and kernel tap: output spatial index (or -1) and kernel tap index."""
    C, H, W = L.in_shape
    Ho, Wo = L.out_shape[1], L.out_shape[2]
    (kh, kw), (sh, sw), (ph, pw) = L.kernel, L.stride, L.padding
    y = np.arange(H)[:, None, None, None]
    x = np.arange(W)[None, :, None, None]
    ky = np.arange(kh)[None, None, :, None]
    kx = np.arange(kw)[None, None, None, :]
    oy, ox = y + ph - ky, x + pw - kx                                                # (H, W, kh, kw)
    ok = (oy % sh == 0) & (ox % sw == 0) & (oy >= 0) & (ox >= 0) & (oy // sh < Ho) & (ox // sw < Wo)
    sp = np.where(ok, (oy // sh) * Wo + ox // sw, -1).reshape(H * W, kh * kw)        # (H*W, K)
    tap = np.broadcast_to(ky * kw + kx, ok.shape).reshape(H * W, kh * kw)            # (H*W, K)
    return np.tile(sp, (C, 1)), np.tile(tap, (C, 1)), np.repeat(np.arange(C), H * W)


class Tables:
    """Fan-out index tables of one network (built once, reused for every sample)."""

    def __init__(self, net: IntNetwork):
        self.net = net
        self.per_layer = []
        for L in net.layers:
            if L.kind == "conv":
                sp, tap, ch = _taps(L)
                kk = L.kernel[0] * L.kernel[1]
                col = np.where(sp >= 0, ch[:, None] * kk + tap, -1)                  # (C*H*W, K) column in W2
                self.per_layer.append({"sp": sp, "col": col, "W2": L.weight.reshape(L.weight.shape[0], -1)})
            elif L.kind in ("maxpool", "sumpool"):
                sp, _, ch = _taps(L)
                S = L.out_shape[1] * L.out_shape[2]
                self.per_layer.append({"route": np.where(sp >= 0, ch[:, None] * S + sp, -1)})  # (C*H*W, K)
            else:
                self.per_layer.append({"W2": L.weight})
        self.fanout = self._fanout_counts()

    def _fanout_counts(self) -> list[np.ndarray]:
        """Synaptic operations caused by one event of each emitter (input = index 0, layer i = i + 1).

        Only weighted synapses count; events entering a max pool cost a comparison, not a SOP,
        and a sum pool multiplies the events it routes.
        """
        n = len(self.net.layers)
        into = [None] * (n + 1)                     # SOPs of one event arriving at layer i's input
        into[n] = np.zeros(0, dtype=np.int64)
        for i in range(n - 1, -1, -1):
            L, T = self.net.layers[i], self.per_layer[i]
            if L.kind == "conv":
                into[i] = (T["sp"] >= 0).sum(1) * L.weight.shape[0]
            elif L.kind == "dense":
                into[i] = np.full(int(np.prod(L.in_shape)), L.weight.shape[0], dtype=np.int64)
            elif L.kind == "maxpool":
                into[i] = np.zeros(int(np.prod(L.in_shape)), dtype=np.int64)
            else:
                nxt = np.append(into[i + 1], 0)                                    # -1 -> 0 SOPs
                into[i] = nxt[T["route"]].sum(1)
        out = [into[0]]
        for i, L in enumerate(self.net.layers):
            out.append(into[i + 1] if L.kind != "sumpool" else np.zeros(0, dtype=np.int64))
        out[-1] = np.zeros(int(self.net.layers[-1].out_shape[0]), dtype=np.int64)
        return out


def _route(route: np.ndarray, ev: np.ndarray) -> np.ndarray:
    """Copy every event to each pool unit its address belongs to (overlapping pools: several)."""
    tgt = route[ev["addr"]]                                                       # (E, K)
    e, k = np.nonzero(tgt >= 0)
    return _events(tgt[e, k], ev["t"][e], ev["payload"][e])


def _deliver(L: IntLayer, T: dict, addr: np.ndarray, weight: np.ndarray) -> tuple[np.ndarray, int]:
    """Summed contribution sum W * weight of a batch of events to every neuron, flat (O*S,), and its SOPs."""
    O = L.weight.shape[0]
    if L.kind == "dense":
        return T["W2"][:, addr] @ weight, O * len(addr)                                  # (O,)
    S = L.out_shape[1] * L.out_shape[2]
    sp, col = T["sp"][addr], T["col"][addr]                                           # (E, K)
    e, k = np.nonzero(sp >= 0)
    vals = T["W2"][:, col[e, k]] * weight[e]                                          # (O, M)
    tgt = np.arange(O)[:, None] * S + sp[e, k]                                        # (O, M)
    if L.acc_bits <= 52:   # float64 bincount sums integers exactly below 2^53
        acc = np.bincount(tgt.ravel(), weights=vals.ravel(), minlength=O * S)
        return np.rint(acc).astype(np.int64), vals.size
    acc = np.zeros(O * S, dtype=np.int64)
    np.add.at(acc, tgt.ravel(), vals.ravel())
    return acc, vals.size


def _fire(net: IntNetwork, L: IntLayer, v: np.ndarray) -> np.ndarray:
    """Window close: payload coding fires a = requantize(V) now; ttfs steps the falling threshold."""
    O = L.out_shape[0]
    v2 = v.reshape(O, -1)                                                             # (O, S)
    if net.coding != "ttfs":
        a = arith.requantize(v2, L.m0, L.shift, L.q_out, channel_axis=0).reshape(-1)
        idx = np.nonzero(a)[0]
        return _events(idx, np.zeros_like(idx), a[idx])
    t_fire = np.full(v2.shape, -1, dtype=np.int64)
    for t in range(L.q_out):
        new = arith.ttfs_crosses(v2, L.m0, L.shift, L.q_out, t, channel_axis=0) & (t_fire < 0)
        t_fire[new] = t
    t_fire = t_fire.reshape(-1)
    idx = np.nonzero(t_fire >= 0)[0]
    return _golden(_events(idx, t_fire[idx], L.q_out - t_fire[idx]))


def _integrate(net: IntNetwork, L: IntLayer, T: dict, ev: np.ndarray, q_window: int) -> tuple[np.ndarray, int]:
    """Potential at window close, V = B + sum W * a, and the SOPs spent."""
    S = int(np.prod(L.out_shape[1:])) if L.kind == "conv" else 1
    bias = np.repeat(L.bias.astype(np.int64), S)                                      # (O*S,)
    if net.coding != "ttfs":
        acc, sops = _deliver(L, T, ev["addr"], ev["payload"])
        return bias + acc, sops
    v, current, sops = bias.copy(), np.zeros_like(bias), 0
    for s in range(q_window):   # a spike at step t adds its weight to the current for steps t..Q_in-1
        at = ev[ev["t"] == s]
        if len(at):
            acc, n = _deliver(L, T, at["addr"], np.ones(len(at), dtype=np.int64))
            current += acc
            sops += n
        v += current
    return v, sops


def input_events(net: IntNetwork, x_int_sample: np.ndarray) -> np.ndarray:
    """The input layer's events: one per non-zero pixel; ttfs puts payload a at step Q_in - a."""
    a = np.asarray(x_int_sample, dtype=np.int64).reshape(-1)
    idx = np.nonzero(a)[0]
    if net.coding == "ttfs":
        return _golden(_events(idx, net.input_q - a[idx], a[idx]))
    return _events(idx, np.zeros_like(idx), a[idx])


def _check_once(ev: np.ndarray, name: str) -> None:
    if len(ev) and np.bincount(ev["addr"]).max() > 1:
        raise RuntimeError(f"layer {name}: a neuron fired more than once in one window")


def run_sample(net: IntNetwork, x_int_sample, tables: Tables | None = None, keep_potentials: bool = False) -> RefTrace:
    """Simulate one sample event by event. `x_int_sample` (C, H, W) int payloads in 0..input_q.
    keep_potentials: also keep every weighted layer's potentials (RefTrace.layer_potentials)."""
    T = tables if tables is not None else Tables(net)
    x = np.asarray(x_int_sample)
    if tuple(x.shape) != tuple(net.input_shape):
        raise ValueError(f"sample shape {x.shape} does not match the network input {tuple(net.input_shape)}")
    if x.size and (x.min() < 0 or x.max() > net.input_q):
        raise ValueError(f"input payloads must lie in 0..{net.input_q}; got {x.min()}..{x.max()}")
    ev = input_events(net, x)
    inp, q_window = ev, net.input_q
    layer_events, max_abs_v, overflows, sops, layer_v = [], [], [], 0, []
    potentials, early = None, -1
    for L, tab in zip(net.layers, T.per_layer):
        if L.kind == "sumpool":
            ev = _route(tab["route"], ev)
            layer_events.append(None)
            layer_v.append(None)
            max_abs_v.append(0)
            overflows.append(0)
            continue
        if L.kind == "maxpool":
            routed = _route(tab["route"], ev)
            n_out = int(np.prod(L.out_shape))
            if net.coding == "ttfs":   # the first spike in the pool passes; later ones are blocked
                first = np.full(n_out, np.iinfo(np.int64).max)
                np.minimum.at(first, routed["addr"], routed["t"])
                idx = np.nonzero(first < np.iinfo(np.int64).max)[0]
                ev = _golden(_events(idx, first[idx], q_window - first[idx]))
            else:
                best = np.zeros(n_out, dtype=np.int64)
                np.maximum.at(best, routed["addr"], routed["payload"])
                idx = np.nonzero(best)[0]
                ev = _events(idx, np.zeros_like(idx), best[idx])
            _check_once(ev, L.name)
            layer_events.append(ev)
            layer_v.append(None)
            max_abs_v.append(0)
            overflows.append(0)
            continue
        v, n = _integrate(net, L, tab, ev, q_window)
        sops += n
        max_abs_v.append(int(np.abs(v).max(initial=0)))
        if net.acc_limit_bits:
            v, over = arith.limit_accumulator(v, net.acc_limit_bits, net.overflow)
            overflows.append(int(over.sum()))
        else:
            overflows.append(0)
        layer_v.append(np.asarray(v, dtype=np.int64).reshape(-1) if keep_potentials else None)
        if L.is_output:
            potentials = v.astype(np.int64)
            if net.coding == "ttfs":
                ev = _fire(net, L, v)
                early = int(ev["addr"][0]) if len(ev) else -1
            else:
                ev = _events(*(np.zeros(0, dtype=np.int64),) * 3)
        else:
            ev = _fire(net, L, v)
        _check_once(ev, L.name)
        layer_events.append(ev)
        q_window = L.q_out
    return RefTrace(input_events=inp, layer_events=layer_events, potentials=potentials,
                    decision=int(arith.argmax_first(potentials)), early_decision=early,
                    max_abs_v=max_abs_v, overflows=overflows, sops=sops, layer_potentials=layer_v)


def run_batch(net: IntNetwork, x_int, progress: bool = True) -> list[RefTrace]:
    """run_sample over the first axis of `x_int` (N, C, H, W), sharing one set of fan-out tables."""
    T = Tables(net)
    return [run_sample(net, xs, T) for xs in console.bar(np.asarray(x_int), desc="reference", enabled=progress)]
