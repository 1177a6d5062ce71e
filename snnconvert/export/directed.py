"""Directed golden vectors: inputs built to hit what test samples almost never reach.

Kinds (code in vectors.npz `directed` and summary.csv; 0 is a test sample):
    1 tie        an exact rounding half at a neuron of the first weighted layer:
                 V * M0 + 2^(n-1) = (2j + 1) * 2^(n-1) * ..., i.e. V * M0 / 2^n = u * m / 2 with m the odd
                 part of M0 (M0 = m * 2^e) and u odd, so V = u * 2^(n-1-e). "Halves up" gives (u*m + 1) / 2,
                 "halves down" one less, and "halves to even" the even one of the two; the search prefers a
                 tie whose lower neighbour is even, which separates all three rules.
    2 max        the largest potential the first weighted layer can reach: payload Q_in on every positive weight
                 of the neuron with the largest sum of positive weights
    3 min        the smallest: Q_in on every negative weight
    4 overflow   the first of the other inputs (or a full-scale input) whose potential leaves the declared
                 accumulator width (only with a declared width)
    5 zero       an all-zero window (no input event)
    6 values     every input payload 0..Q_in in turn (c*H*W + y*W + x mod (Q_in + 1)): payloads above 1 and,
                 in ttfs, input steps t = Q_in - a above 0

A tie needs u * m <= 2 Q - 1 (else every rule clamps to Q) and |V| = 2^(n-1-e) * u within the accumulator,
so it can only occur when M0 has few significant bits; `tie_values` tells per layer whether it can.
The input of a tie, max or min vector is found exactly over the neuron's receptive field (a bounded
subset sum over payloads 0..Q_in), so these are hand-built, not sampled.
"""

from __future__ import annotations

import numpy as np

from snnconvert.intnet import IntNetwork

KINDS = {"tie": 1, "max": 2, "min": 3, "overflow": 4, "zero": 5, "values": 6}
KIND_WORDS = {
    "tie": "an exact rounding half (V * M0 / 2^n = k + 1/2) at the named neuron: halves up, down and to even differ",
    "max": "the largest potential the named first-layer neuron can reach",
    "min": "the smallest potential the named first-layer neuron can reach",
    "overflow": "a potential beyond the declared accumulator width (saturated or wrapped at the named layer)",
    "zero": "an all-zero window: no input event",
    "values": "every input payload 0..Q_in in turn (payloads above 1; ttfs input steps above 0)",
}


def tie_values(m0: int, n: int, q: int, acc_bits: int) -> list[tuple[int, int]]:
    """(V, payload under halves up) of every positive tie of one channel with payload in 1..Q and
    |V| < 2^(acc_bits-1): V * M0 = u * m * 2^(n-1) with u odd (see the module docstring)."""
    m0, n = int(m0), int(n)
    if m0 <= 0:
        return []
    e = (m0 & -m0).bit_length() - 1
    m = m0 >> e
    if e > n - 1:
        return []                                    # V * M0 is a multiple of 2^n: never a half
    step = 1 << (n - 1 - e)
    out = []
    for u in range(1, 2 * q + 1, 2):
        if u * m > 2 * q - 1 or u * step >= 1 << (acc_bits - 1):
            break
        out.append((u * step, (u * m + 1) // 2))
    return out


def _first_weighted(net: IntNetwork):
    for i, L in enumerate(net.layers):
        if L.weight is not None:
            return (i, L) if i == 0 else (None, None)   # only a weighted first layer sees the input directly
    return None, None


def _field(L, o_unit: int):
    """Receptive field of output neuron `o_unit` of a conv/dense first layer: (channel o, flat input
    addresses, weights) over the valid taps."""
    if L.kind == "dense":
        return o_unit, np.arange(L.weight.shape[1]), np.asarray(L.weight[o_unit], dtype=np.int64)
    C, H, W = L.in_shape
    _, Ho, Wo = L.out_shape
    o, sp = divmod(o_unit, Ho * Wo)
    oy, ox = divmod(sp, Wo)
    addr, w = [], []
    for c in range(C):
        for ky in range(L.kernel[0]):
            for kx in range(L.kernel[1]):
                y, x = oy * L.stride[0] + ky - L.padding[0], ox * L.stride[1] + kx - L.padding[1]
                if 0 <= y < H and 0 <= x < W:
                    addr.append(c * H * W + y * W + x)
                    w.append(int(L.weight[o, c, ky, kx]))
    return o, np.asarray(addr, dtype=np.int64), np.asarray(w, dtype=np.int64)


def _subset_sum(w: np.ndarray, q: int, target: int, limit: int = 200000):
    """Payloads a in 0..q per weight with sum w * a = target, or None (exact dynamic programme)."""
    reach = {0: ()}
    for wi in w.tolist():
        nxt = {}
        for s, a in reach.items():
            for v in range(q + 1):
                nxt.setdefault(s + wi * v, a + (v,))
        reach = nxt
        if len(reach) > limit:
            return None
    hit = reach.get(target)
    return None if hit is None else np.asarray(hit, dtype=np.int64)


def _center_units(L) -> list[int]:
    """Output neurons to try, the ones with a full receptive field first (per channel)."""
    if L.kind == "dense":
        return list(range(L.weight.shape[0]))
    _, Ho, Wo = L.out_shape
    cy, cx = Ho // 2, Wo // 2
    return [o * Ho * Wo + cy * Wo + cx for o in range(L.out_shape[0])]


def directed_vectors(net: IntNetwork, simulate) -> list[dict]:
    """The directed vectors of `net`: [{kind, x (C, H, W) int64, layer, neuron, words}].

    `simulate(x)` -> RefTrace of one input (used to find an overflowing input)."""
    from snnconvert.export.manifest import layer_id
    shape = tuple(net.input_shape)
    size = int(np.prod(shape))
    q_in = int(net.input_q)
    out = []
    i0, L0 = _first_weighted(net)
    if L0 is not None:
        lid = layer_id(i0, L0.name)
        acc = int(net.acc_limit_bits) or int(L0.acc_bits)
        # ties: first one per channel whose lower neighbour is even (separates all three rules), else any
        for want_even in (True, False):
            if any(v["kind"] == "tie" for v in out):
                break
            for unit in _center_units(L0):
                o, addr, w = _field(L0, unit)
                b = int(np.asarray(L0.bias).reshape(-1)[o])
                found = None
                for v, a in tie_values(int(L0.m0[o]), int(L0.shift[o]), int(L0.q_out), acc):
                    if want_even and (a - 1) % 2:
                        continue
                    pay = _subset_sum(w, q_in, v - b)
                    if pay is not None:
                        found = (v, a, pay)
                        break
                if found:
                    x = np.zeros(size, np.int64)
                    x[addr] = found[2]
                    out.append({"kind": "tie", "x": x.reshape(shape), "layer": lid, "neuron": int(unit),
                                "words": f"{KIND_WORDS['tie']}: V = {found[0]}, M0 = {int(L0.m0[o])}, "
                                         f"n = {int(L0.shift[o])}, payload {found[1]} (halves down: {found[1] - 1})"})
                    break
        best = {}
        for unit in _center_units(L0) if L0.kind == "dense" else range(int(np.prod(L0.out_shape))):
            o, addr, w = _field(L0, unit)
            for kind, sel in (("max", w > 0), ("min", w < 0)):
                val = int(np.abs(w[sel]).sum())
                if kind not in best or val > best[kind][0]:
                    best[kind] = (val, unit, addr[sel])
        for kind in ("max", "min"):
            if kind in best:
                _, unit, addr = best[kind]
                x = np.zeros(size, np.int64)
                x[addr] = q_in
                out.append({"kind": kind, "x": x.reshape(shape), "layer": lid, "neuron": int(unit),
                            "words": KIND_WORDS[kind]})
    if net.acc_limit_bits:
        tries = [v["x"] for v in out] + [np.full(shape, q_in, np.int64)]
        for x in tries:
            tr = simulate(x)
            over = [k for k, c in enumerate(tr.overflows) if c]
            if over:
                k = over[0]
                out.append({"kind": "overflow", "x": x, "layer": layer_id(k, net.layers[k].name), "neuron": None,
                            "words": f"{KIND_WORDS['overflow']} ({net.overflow}, {net.acc_limit_bits} bits, "
                                     f"{tr.overflows[k]} neurons)"})
                break
    out.append({"kind": "zero", "x": np.zeros(shape, np.int64), "layer": None, "neuron": None,
                "words": KIND_WORDS["zero"]})
    if q_in > 1:
        out.append({"kind": "values", "x": (np.arange(size) % (q_in + 1)).reshape(shape).astype(np.int64),
                    "layer": None, "neuron": None, "words": KIND_WORDS["values"]})
    return out
