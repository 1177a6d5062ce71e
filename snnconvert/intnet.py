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

from snnconvert.errors import FormatError
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
        """Read network.json + network.npz; any missing or malformed field is a FormatError naming it."""
        try:
            return cls._load(Path(folder))
        except (KeyError, TypeError, ValueError, IndexError) as exc:
            if isinstance(exc, FormatError):
                raise
            what = f"missing field {exc}" if isinstance(exc, KeyError) else f"{type(exc).__name__}: {exc}"
            raise FormatError(f"{Path(folder) / 'network.json'}: malformed integer network ({what})") from None

    @classmethod
    def _load(cls, folder: Path) -> "IntNetwork":
        meta = load_json(folder / "network.json")
        if meta.get("format") != FORMAT:
            raise FormatError(f"{folder / 'network.json'}: not an snnconvert integer network (format={meta.get('format')!r})")
        if meta.get("version") != VERSION:
            raise FormatError(f"{folder / 'network.json'}: format version {meta.get('version')!r} is not supported (this build reads {VERSION})")
        arrays = load_npz(folder / "network.npz")
        layers = []
        for i, d in enumerate(meta["layers"]):
            if d["kind"] not in LAYER_KINDS:
                raise FormatError(f"{folder / 'network.json'}: layer {i} has unknown kind {d['kind']!r}")
            kw = {k: arrays.get(f"L{i}.{k}") for k in ("weight", "bias", "m0", "shift")}
            layers.append(IntLayer(
                name=d["name"], kind=d["kind"], in_shape=tuple(d["in_shape"]), out_shape=tuple(d["out_shape"]),
                kernel=tuple(d["kernel"]), stride=tuple(d["stride"]), padding=tuple(d["padding"]),
                q_in=int(d["q_in"]), q_out=int(d["q_out"]), is_output=bool(d["is_output"]),
                acc_bits=int(d["acc_bits"]), info=d.get("info", {}), **kw))
        return cls(layers=layers, input_shape=tuple(meta["input_shape"]), input_q=int(meta["input_q"]),
                   coding=meta["coding"], payload_bits=int(meta["payload_bits"]),
                   weight_bits=int(meta["weight_bits"]), per_channel=bool(meta["per_channel"]),
                   n_classes=int(meta["n_classes"]), multiplier_bits=int(meta["multiplier_bits"]),
                   acc_limit_bits=int(meta["acc_limit_bits"]), overflow=meta["overflow"], meta=meta.get("meta", {}))
