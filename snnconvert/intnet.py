"""The integer single-spike network: the one structure that convert writes and sim/export read.

Saved as two files in a folder (the project's own format, JSON + NPZ, versioned):
    network.json   metadata: format version, codings, bit-widths, layer list (no arrays)
    network.npz    integer arrays: L{i}.weight, L{i}.bias, L{i}.m0, L{i}.shift

Layer kinds (in order; a Flatten is implicit: a dense layer reads the flat address
c*H*W + y*W + x of its (C, H, W) input, the same order as torch's Flatten):
    conv     W (O, I, kh, kw), B (O,), stride, padding; neurons requantize to 0..q_out
    dense    W (O, I), B (O,); neurons requantize to 0..q_out
    maxpool  kernel, stride; a pool unit passes the largest payload (ttfs: the first spike)
    sumpool  kernel, stride; routing only, no neurons: the next layer sees the pooled integer sum
             (an average pool whose 1/n went into the next layer's multiplier)
The last layer is the output layer (dense, is_output): its potentials are read out by argmax;
its m0/shift/q_out give the ttfs early decision (first output spike).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from snnconvert.errors import (FormatError, check_array, check_bool, check_choice, check_int, check_shape,
                               check_str, fail)
from snnconvert.files import atomic_save_npz, atomic_write_json, load_json, load_npz

FORMAT = "snnconvert-intnet"
VERSION = 1
LAYER_KINDS = ("conv", "dense", "maxpool", "sumpool")
CODINGS = ("payload", "ttfs", "binary")


@dataclass
class IntLayer:
    name: str
    kind: str                                   # one of LAYER_KINDS
    in_shape: tuple                             # (C, H, W) or (F,)
    out_shape: tuple
    kernel: tuple = (1, 1)                      # conv / pools
    stride: tuple = (1, 1)
    padding: tuple = (0, 0)
    weight: np.ndarray | None = None            # int64 (O, I, kh, kw) or (O, I)
    bias: np.ndarray | None = None              # int64 (O,)
    m0: np.ndarray | None = None                # int64 (O,) fixed-point multiplier mantissa
    shift: np.ndarray | None = None             # int64 (O,) right shift n
    q_in: int = 1                               # largest input value (after a sumpool: n * Q)
    q_out: int = 0                              # largest payload emitted (0 for sumpool)
    is_output: bool = False
    acc_bits: int = 0                           # worst-case signed accumulator width
    info: dict = field(default_factory=dict)    # float scales etc., informational only

    @property
    def has_neurons(self) -> bool:
        return self.kind in ("conv", "dense", "maxpool")

    @property
    def fan_in(self) -> int:
        if self.weight is None:
            return 0
        return int(np.prod(self.weight.shape[1:]))


@dataclass
class IntNetwork:
    layers: list[IntLayer]
    input_shape: tuple                          # (C, H, W)
    input_q: int                                # largest input payload (1 for binary frames)
    coding: str                                 # payload | ttfs | binary
    payload_bits: int
    weight_bits: int
    per_channel: bool
    n_classes: int
    multiplier_bits: int = 16
    acc_limit_bits: int = 0                     # 0 = unlimited; else declared accumulator width
    overflow: str = "saturate"                  # saturate | wrap (only with acc_limit_bits)
    meta: dict = field(default_factory=dict)    # calibration, source fingerprints, recipe, ...

    @property
    def time_steps(self) -> int:
        return 1 << self.payload_bits

    def save(self, folder) -> Path:
        folder = Path(folder)
        arrays, layers = {}, []
        for i, L in enumerate(self.layers):
            d = {k: getattr(L, k) for k in ("name", "kind", "q_in", "q_out", "is_output", "acc_bits", "info")}
            d.update(in_shape=list(L.in_shape), out_shape=list(L.out_shape), kernel=list(L.kernel),
                     stride=list(L.stride), padding=list(L.padding))
            for k in ("weight", "bias", "m0", "shift"):
                a = getattr(L, k)
                if a is not None:
                    arrays[f"L{i}.{k}"] = np.asarray(a, dtype=np.int64)
            layers.append(d)
        meta = {
            "format": FORMAT, "version": VERSION, "input_shape": list(self.input_shape),
            "input_q": self.input_q, "coding": self.coding, "payload_bits": self.payload_bits,
            "weight_bits": self.weight_bits, "per_channel": self.per_channel, "n_classes": self.n_classes,
            "multiplier_bits": self.multiplier_bits, "acc_limit_bits": self.acc_limit_bits,
            "overflow": self.overflow, "meta": self.meta, "layers": layers,
        }
        atomic_save_npz(folder / "network.npz", **arrays)
        atomic_write_json(folder / "network.json", meta)
        return folder

    @classmethod
    def load(cls, folder) -> "IntNetwork":
        """Read network.json + network.npz; every field and array is checked (`check_network`) before use.

        A missing field, a wrong type or range, or fields that disagree (a declared shape against
        the weights, a layer's input against the previous layer's output) is a FormatError naming
        the file and the field.
        """
        try:
            return cls._load(Path(folder))
        except (KeyError, TypeError, ValueError, IndexError) as exc:
            if isinstance(exc, FormatError):
                raise
            what = f"missing field {exc}" if isinstance(exc, KeyError) else f"{type(exc).__name__}: {exc}"
            raise FormatError(f"{Path(folder) / 'network.json'}: malformed integer network ({what})") from None

    @classmethod
    def _load(cls, folder: Path) -> "IntNetwork":
        path = folder / "network.json"
        meta = load_json(path)
        if not isinstance(meta, dict):
            raise FormatError(f"{path}: not an snnconvert integer network (a JSON {type(meta).__name__}, not an object)")
        if meta.get("format") != FORMAT:
            raise FormatError(f"{path}: not an snnconvert integer network (format={meta.get('format')!r})")
        if meta.get("version") != VERSION:
            raise FormatError(f"{path}: format version {meta.get('version')!r} is not supported (this build reads {VERSION})")
        arrays = load_npz(folder / "network.npz")
        if not isinstance(meta["layers"], list):
            fail("layers", str(path), "a list of layer objects", repr(type(meta["layers"]).__name__), "field", FormatError)
        for i, d in enumerate(meta["layers"]):
            if not isinstance(d, dict):
                fail(f"layers[{i}]", str(path), "a layer object", repr(d), "field", FormatError)
        if not isinstance(meta.get("meta", {}), dict):
            fail("meta", str(path), "an object", repr(meta["meta"]), "field", FormatError)
        layers = meta["layers"]
        net = network_from_fields(meta, layers, [{k: arrays.get(f"L{i}.{k}") for k in ARRAYS} for i in range(len(layers))],
                                  str(path), str(folder / "network.npz"), meta=meta.get("meta", {}))
        unknown = sorted(set(arrays) - {f"L{i}.{k}" for i in range(len(layers)) for k in ARRAYS})
        if unknown:
            raise FormatError(f"{folder / 'network.npz'}: array {unknown[0]!r} belongs to no layer of {path}")
        if "recipe" in net.meta:       # checked like a user's recipe; it never chooses where files go
            from snnconvert.recipe import from_embedded
            net.meta["recipe"] = from_embedded(net.meta["recipe"], path)
        return net


ARRAYS = ("weight", "bias", "m0", "shift")
# Widths the converter can produce: convert checks the same ranges on its parameters.
WEIGHT_BITS = (2, 16)
PAYLOAD_BITS = (1, 8)
MULTIPLIER_BITS = (2, 31)
ACC_LIMIT_BITS = (0, 62)
MAX_SHIFT = 62          # V * M0 + 2^(n-1) stays an int64 shift
MAX_Q = 1 << 24         # largest payload or pooled sum a layer may declare


# The network-wide fields of network.json (and of IntNetwork), and those of each layer.
NETWORK_ATTRS = ("input_shape", "input_q", "coding", "payload_bits", "weight_bits", "per_channel", "n_classes",
                  "multiplier_bits", "acc_limit_bits", "overflow")
LAYER_ATTRS = ("name", "kind", "in_shape", "out_shape", "kernel", "stride", "padding", "q_in", "q_out",
                "is_output", "acc_bits")


def network_from_fields(fields: dict, layers: list[dict], arrays: list[dict], owner: str, arrays_owner: str,
                        name=None, array_name=None, meta: dict | None = None) -> IntNetwork:
    """The one builder of an IntNetwork read from a file: network.json and an export's manifest both
    call it with their fields in network.json's spelling.

    fields: NETWORK_ATTRS; layers: one dict of LAYER_ATTRS (and optionally "info") per layer;
    arrays: one {weight, bias, m0, shift} dict per layer (missing = None). Every value then goes
    through `check_network`, whose messages name fields with `name` and arrays with `array_name`
    (default: network.json's and network.npz's spelling). A missing field raises KeyError; the
    callers turn it into a FormatError naming their file.
    """
    built = [IntLayer(**{k: d[k] for k in LAYER_ATTRS}, info=d.get("info", {}),
                      **{k: a.get(k) for k in ARRAYS}) for d, a in zip(layers, arrays)]
    net = IntNetwork(layers=built, **{k: fields[k] for k in NETWORK_ATTRS}, meta=meta if meta is not None else {})
    return check_network(net, owner, arrays_owner, name or _json_name, array_name or _npz_name)


def _json_name(field: str, layer: int | None) -> str:
    return field if layer is None else f"layers[{layer}].{field}"


def _npz_name(layer: int, kind: str) -> str:
    return f"L{layer}.{kind}"


def check_network(net: IntNetwork, owner: str, arrays_owner: str, name=_json_name, array_name=_npz_name) -> IntNetwork:
    """Check every field of `net` as read from a file, then normalise it in place (ints, tuples, int64 arrays).

    Each scalar: its type and range; each layer: kind, shapes, kernel/stride/padding, and that its
    input is the previous layer's output (a dense layer may read the flattened map); conv and dense
    layers: weight (O, I, kh, kw) / (O, I) agreeing with the declared shapes and within
    +-(2^(k-1)-1), bias/m0/shift (O,), 0 <= m0 < 2^31, 1 <= shift <= 62; pools: no arrays;
    the last layer (and only it) is the dense output layer with n_classes outputs; binary coding
    has p = 1. `name(field, layer)` and `array_name(layer, kind)` give the names the file uses,
    so the message names the field as the file spells it.
    """
    E = FormatError
    net.coding = check_choice(net.coding, name("coding", None), owner, CODINGS, "field", E)
    net.payload_bits = check_int(net.payload_bits, name("payload_bits", None), owner, *PAYLOAD_BITS, "field", E)
    if net.coding == "binary" and net.payload_bits != 1:
        fail(name("payload_bits", None), owner, "1 with coding 'binary'", repr(net.payload_bits), "field", E)
    net.weight_bits = check_int(net.weight_bits, name("weight_bits", None), owner, *WEIGHT_BITS, "field", E)
    net.per_channel = check_bool(net.per_channel, name("per_channel", None), owner, "field", E)
    net.n_classes = check_int(net.n_classes, name("n_classes", None), owner, 1, 1 << 16, "field", E)
    net.multiplier_bits = check_int(net.multiplier_bits, name("multiplier_bits", None), owner, *MULTIPLIER_BITS,
                                    "field", E)
    net.acc_limit_bits = check_int(net.acc_limit_bits, name("acc_limit_bits", None), owner, *ACC_LIMIT_BITS, "field", E)
    if net.acc_limit_bits == 1:
        fail(name("acc_limit_bits", None), owner, "0 (unlimited) or an int in [2, 62]", "1", "field", E)
    net.overflow = check_choice(net.overflow, name("overflow", None), owner, ("saturate", "wrap"), "field", E)
    net.input_shape = check_shape(net.input_shape, name("input_shape", None), owner, 3, 1, "field", E)
    net.input_q = check_int(net.input_q, name("input_q", None), owner, 1, MAX_Q, "field", E)
    if not net.layers:
        fail(name("layers", None), owner, "a non-empty list of layers", "[]", "field", E)
    prev = net.input_shape
    wmax = (1 << (net.weight_bits - 1)) - 1
    for i, L in enumerate(net.layers):
        n = lambda f: name(f, i)  # noqa: E731
        L.name = check_str(L.name, n("name"), owner, "field", E)
        L.kind = check_choice(L.kind, n("kind"), owner, LAYER_KINDS, "field", E)
        L.in_shape = check_shape(L.in_shape, n("in_shape"), owner, None if L.kind == "dense" else 3, 1, "field", E)
        L.out_shape = check_shape(L.out_shape, n("out_shape"), owner, 1 if L.kind == "dense" else 3, 1, "field", E)
        L.kernel = check_shape(L.kernel, n("kernel"), owner, 2, 1, "field", E)
        L.stride = check_shape(L.stride, n("stride"), owner, 2, 1, "field", E)
        L.padding = check_shape(L.padding, n("padding"), owner, 2, 0, "field", E)
        L.q_in = check_int(L.q_in, n("q_in"), owner, 1, MAX_Q, "field", E)
        L.q_out = check_int(L.q_out, n("q_out"), owner, 0, MAX_Q, "field", E)
        L.is_output = check_bool(L.is_output, n("is_output"), owner, "field", E)
        L.acc_bits = check_int(L.acc_bits, n("acc_bits"), owner, 0, 64, "field", E)
        if L.kind == "dense" and int(np.prod(L.in_shape)) == int(np.prod(prev)):
            pass                                   # reads the flattened map (or the previous dense layer)
        elif tuple(L.in_shape) != tuple(prev):
            fail(n("in_shape"), owner, f"the previous layer's output {list(prev)}", repr(list(L.in_shape)), "field", E)
        if L.kind != "dense":
            (c, h, w), (kh, kw), (sy, sx), (py, px) = L.in_shape, L.kernel, L.stride, L.padding
            oc = L.out_shape[0] if L.kind == "conv" else c
            want = [oc, (h + 2 * py - kh) // sy + 1, (w + 2 * px - kw) // sx + 1]
            if want[1] < 1 or want[2] < 1 or list(L.out_shape) != want:
                fail(n("out_shape"), owner, f"{want} (from in_shape, kernel, stride and padding)",
                     repr(list(L.out_shape)), "field", E)
        if L.is_output != (i == len(net.layers) - 1):
            fail(n("is_output"), owner, "true for the last layer only", repr(L.is_output), "field", E)
        if L.kind in ("conv", "dense"):
            o = L.out_shape[0]
            wshape = (o, L.in_shape[0], *L.kernel) if L.kind == "conv" else (o, int(np.prod(L.in_shape)))
            L.weight = _array(L.weight, array_name(i, "weight"), arrays_owner, wshape, -wmax, wmax)
            L.bias = _array(L.bias, array_name(i, "bias"), arrays_owner, (o,), -(1 << 62), 1 << 62)
            L.m0 = _array(L.m0, array_name(i, "m0"), arrays_owner, (o,), 0, (1 << 31) - 1)
            L.shift = _array(L.shift, array_name(i, "shift"), arrays_owner, (o,), 1, MAX_SHIFT)
        else:
            for k in ARRAYS:
                if getattr(L, k) is not None:
                    raise FormatError(f"{arrays_owner}: array {array_name(i, k)!r} given for layer {i}, "
                                      f"a {L.kind} layer, which has no {k}")
        prev = L.out_shape
    last = net.layers[-1]
    if last.kind != "dense" or list(last.out_shape) != [net.n_classes]:
        fail(name("out_shape", len(net.layers) - 1), owner, f"[{net.n_classes}] of a dense output layer (n_classes)",
             repr(list(last.out_shape)) + f" of a {last.kind} layer", "field", E)
    return net


def _array(a, name: str, owner: str, shape, lo, hi) -> np.ndarray:
    if a is None:
        raise FormatError(f"{owner}: array {name!r} is missing")
    return check_array(np.asarray(a), name, owner, shape, lo, hi, FormatError)
