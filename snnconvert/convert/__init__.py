"""Frame CNN -> single-spike integer network (fold, calibrate, quantize, thresholds).

Recipe section [convert]: every key below carries the reason for its default.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from snnconvert import arith
from snnconvert.convert.calibrate import activation_ranges, calibration_subset
from snnconvert.convert.fold import fold, folded_forward
from snnconvert.convert.quantize import build_network
from snnconvert.errors import (UsageError, check_bool, check_choice, check_int, check_str,
                               unknown_key_message)
from snnconvert.files import fingerprint
from snnconvert.intnet import IntNetwork
from snnconvert.schema import Key


def parse_range_rule(value, key: str = "calibration", section: str = "convert") -> tuple[str, float]:
    """Parse a range statistic: "max" -> ("max", 100.0); "percentile:Q" -> ("percentile", Q), 0 < Q <= 100."""
    check_str(value, key, section)
    text = value.strip()
    if text == "max":
        return "max", 100.0
    head, sep, tail = text.partition(":")
    if head == "percentile" and sep:
        try:
            q = float(tail)
        except ValueError:
            q = float("nan")
        if 0.0 < q <= 100.0:
            return "percentile", q
    raise UsageError(f"The '{key}' parameter of {section} must be 'max' or 'percentile:Q' with Q in (0, 100]. "
                     f"Got {value!r} instead.")


def _rule_validator(value, key, section):
    parse_range_rule(value, key, section)
    return value


SCHEMA: dict[str, Key] = {
    "weight_bits": Key(4, "int", "4-bit weights keep the digits model within tolerance and fit small on-chip memories",
                       lo=2, hi=16),
    "payload_bits": Key(4, "int", "4-bit payloads (16 ttfs steps) keep accuracy close to the frame model", lo=1, hi=8),
    "coding": Key("payload", "choice", "a graded single spike needs the fewest time steps per layer",
                  choices=("payload", "ttfs", "binary")),
    "per_channel": Key(False, "bool", "one scale per layer is the simplest hardware; per-channel is opt-in"),
    "calibration": Key("percentile:99.9", "any", "the 99.9th percentile ignores rare outliers (Rueckauer et al. 2017)",
                       validator=_rule_validator),
    "weight_scale": Key("max", "any", "max-abs keeps every weight representable without clipping",
                        validator=_rule_validator),
    "calib_samples": Key(512, "int", "512 training samples give stable percentiles in about a second", lo=1),
    "multiplier_bits": Key(16, "int", "a 16-bit multiplier mantissa keeps requantization error below 2^-16",
                           lo=2, hi=31),
    "accumulator_bits": Key(0, "int", "0 = unlimited: use the worst-case width so nothing overflows", lo=0, hi=62),
    "overflow": Key("saturate", "choice", "saturation degrades gracefully where wrap-around flips signs",
                    choices=("saturate", "wrap")),
    "input_clip": Key(True, "bool", "input events carry p-bit payloads like every other layer, so one datapath width "
                      "serves all; false keeps count frames at their own width (clipping 15-count frames "
                      "to p = 3 cost 15 pp, measured)"),
    "tolerance_pp": Key(0.5, "float", "half a percentage point is within test-set noise of the digits split",
                        lo=0.0, hi=100.0),
}


def _check_settings(weight_bits, payload_bits, coding, per_channel, calibration, weight_scale, input_q,
                    multiplier_bits, acc_limit_bits, overflow, input_clip):
    o = "convert"
    check_int(weight_bits, "weight_bits", o, 2, 16)
    check_int(payload_bits, "payload_bits", o, 1, 8)
    check_choice(coding, "coding", o, ["payload", "ttfs", "binary"])
    check_bool(per_channel, "per_channel", o)
    check_bool(input_clip, "input_clip", o)
    check_int(input_q, "input_q", o, 1, 255)
    check_int(multiplier_bits, "multiplier_bits", o, 2, 31)
    check_int(acc_limit_bits, "accumulator_bits", o, 0, 62)
    check_choice(overflow, "overflow", o, ["saturate", "wrap"])
    check_binary_payload(coding, payload_bits)
    return parse_range_rule(calibration, "calibration", o), parse_range_rule(weight_scale, "weight_scale", o)


def check_binary_payload(coding, payload_bits) -> None:
    """A binary spike carries no payload: coding "binary" needs payload_bits = 1 (refused otherwise)."""
    if coding == "binary" and payload_bits != 1:
        raise UsageError(f"The 'payload_bits' parameter of convert must be 1 with coding 'binary' (a binary spike "
                         f"carries no payload). Got {payload_bits!r} instead.")


def convert(model, calib_x, *, weight_bits: int, payload_bits: int, coding: str, per_channel: bool = False,
            calibration: str = "percentile:99.9", weight_scale: str = "max", input_q: int = 1,
            multiplier_bits: int = 16, acc_limit_bits: int = 0, overflow: str = "saturate",
            act_max=None, input_clip: bool = True, quiet: bool = True) -> IntNetwork:
    """Frame model -> single-spike integer network: a_l = clamp((V * M0 + 2^(n-1)) >> n, 0, 2^p - 1).

    `calib_x` (N, C, H, W) float frames are used whole (pick the subset with
    `calibrate.calibration_subset`). Binary coding is the p = 1 case: it needs `payload_bits` = 1
    and refuses any other width. Input payloads are clamp(round(frame), 0, Q_in). By default Q_in = input_q: the input
    events carry the frame's counts at their own width (ceil(log2(input_q + 1)) bits, at most 8;
    ttfs: an input window of input_q steps). With input_clip=True, Q_in = min(input_q, 2^p - 1), so
    every event of the network carries p bits, at the price of clipping counts the frame model saw.
    """
    cal, wrule = _check_settings(weight_bits, payload_bits, coding, per_channel, calibration, weight_scale,
                                 input_q, multiplier_bits, acc_limit_bits, overflow, input_clip)
    ops = fold(model)                       # validates every layer before any work
    calib_x = np.asarray(calib_x, dtype=np.float32)
    if calib_x.ndim != 4 or calib_x.shape[0] == 0:
        raise UsageError(f"calibration frames must have shape (N, C, H, W) with N >= 1; got {calib_x.shape}")
    p = int(payload_bits)
    ranges = activation_ranges(ops, calib_x, cal[0], cal[1], act_max=act_max, quiet=quiet)
    q_in = min(int(input_q), arith.payload_max(p)) if input_clip else int(input_q)
    net = build_network(ops, ranges, input_shape=calib_x.shape[1:], input_q=q_in,
                        weight_bits=weight_bits, payload_bits=p, coding=coding, per_channel=per_channel,
                        weight_rule=wrule, multiplier_bits=multiplier_bits, acc_limit_bits=acc_limit_bits,
                        overflow=overflow)
    net.meta.update(calibration=calibration, weight_scale=weight_scale, calib_samples=int(calib_x.shape[0]),
                    calib_fingerprint=fingerprint(calib_x), frame_input_q=int(input_q),
                    act_max=None if act_max is None else [float(a) for a in act_max])
    return net


def settings_from(settings: dict) -> dict:
    """[convert] section (defaults filled in) -> keyword arguments of `convert`."""
    s = {k: key.default for k, key in SCHEMA.items()}
    unknown = set(settings) - set(SCHEMA)
    if unknown:
        raise UsageError(unknown_key_message(sorted(unknown)[0], "convert", SCHEMA))
    s.update(settings)
    for k, key in SCHEMA.items():
        s[k] = key.check(s[k], k, "convert")
    check_binary_payload(s["coding"], s["payload_bits"])
    return s


def convert_and_measure(model, dataset, settings: dict, act_max=None, quiet: bool = False,
                        float_accuracy: float | None = None):
    """Convert with the [convert] `settings`, calibrate on the training split, measure on the test split.

    Deterministic: the calibration subset is evenly spaced, and nothing draws random numbers.
    `float_accuracy`: the test accuracy of the float model an aware `model` was fine-tuned from.
    Returns (net, metrics dict).
    """
    from snnconvert.sim.metrics import measure
    s = settings_from(dict(settings))
    Xtr = np.asarray(dataset.train[0])
    idx = calibration_subset(len(Xtr), s["calib_samples"])
    net = convert(model, Xtr[idx], weight_bits=s["weight_bits"], payload_bits=s["payload_bits"], coding=s["coding"],
                  per_channel=s["per_channel"], calibration=s["calibration"], weight_scale=s["weight_scale"],
                  input_q=int(dataset.input_q), multiplier_bits=s["multiplier_bits"],
                  acc_limit_bits=s["accumulator_bits"], overflow=s["overflow"], act_max=act_max,
                  input_clip=s["input_clip"], quiet=quiet)
    net.meta.update(data_fingerprint=getattr(dataset, "fingerprint", None), classes=list(getattr(dataset, "classes", [])),
                    convert=s)
    Xte, yte = dataset.test
    metrics = measure(model, net, Xte, yte, tolerance_pp=s["tolerance_pp"], quiet=quiet, float_accuracy=float_accuracy)
    return net, metrics


def convert_checkpoint(train_dir, settings: dict, quiet: bool = False):
    """Load `train_dir/model.pt` and its dataset, then `convert_and_measure`. Returns (net, metrics)."""
    from snnconvert.data import load_dataset
    from snnconvert.train import check_checkpoint_fits, load_checkpoint
    model, ckpt = load_checkpoint(Path(train_dir) / "model.pt")
    dataset = load_dataset(ckpt["recipe"], progress=not quiet)
    check_checkpoint_fits(model, ckpt, dataset, Path(train_dir) / "model.pt")
    # an aware checkpoint keeps the test accuracy of the float model it was fine-tuned from
    net, metrics = convert_and_measure(model, dataset, settings, act_max=ckpt.get("act_max"), quiet=quiet,
                                       float_accuracy=(ckpt.get("metrics") or {}).get("float_frame_accuracy"))
    net.meta.update(recipe={k: v for k, v in ckpt["recipe"].items() if k != "_embedded"},
                    train_fingerprint=ckpt.get("data_fingerprint"))
    return net, metrics


__all__ = ["SCHEMA", "parse_range_rule", "convert", "convert_and_measure", "convert_checkpoint", "settings_from",
           "fold", "folded_forward", "calibration_subset"]
