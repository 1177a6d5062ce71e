"""Frame CNN -> single-spike integer network (fold, calibrate, quantize, thresholds).

Recipe section [convert]: its keys, each with the reason for its default, and the checked
`ConvertSettings` live in `snnconvert.settings.convert`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from snnconvert import arith
from snnconvert.convert.calibrate import activation_ranges, calibration_subset, input_means
from snnconvert.convert.fold import fold, folded_forward
from snnconvert.convert.quantize import build_network
from snnconvert.errors import UsageError, check_int
from snnconvert.files import fingerprint
from snnconvert.intnet import IntNetwork
from snnconvert.settings.convert import ConvertSettings, parse_range_rule

# keys the keyword form of `convert_model` needs: the bit budget and the coding have no neutral default
_REQUIRED = ("weight_bits", "payload_bits", "coding")


def convert_model(model, calib_x, settings: ConvertSettings | None = None, *, input_q: int = 1, act_max=None,
                  quiet: bool = True, **keys) -> IntNetwork:
    """Frame model -> single-spike integer network: a_l = clamp((V * M0 + 2^(n-1)) >> n, 0, 2^p - 1).

    `settings`: the checked [convert] settings. The keyword form `convert_model(model, x, weight_bits=4,
    payload_bits=4, coding="payload", ...)` takes the same keys instead (weight_bits, payload_bits and
    coding required, the rest default) and checks them by building the same `ConvertSettings`.
    `calib_x` (N, C, H, W) float frames are used whole (pick the subset with
    `calibrate.calibration_subset`). Binary coding is the p = 1 case: it needs `payload_bits` = 1
    and refuses any other width. Input payloads are clamp(round(frame), 0, Q_in). By default Q_in = input_q: the input
    events carry the frame's counts at their own width (ceil(log2(input_q + 1)) bits, at most 8;
    ttfs: an input window of input_q steps). With input_clip=True, Q_in = min(input_q, 2^p - 1), so
    every event of the network carries p bits, at the price of clipping counts the frame model saw.
    With bias_correction=True each weighted layer's bias absorbs the mean error of its weight grid over
    `calib_x` (`calibrate.bias_shift`); a conversion-aware model (ClipQuant activations or `act_max`) trained
    on its grids already and is converted without it.
    """
    if settings is None:
        missing = [k for k in _REQUIRED if k not in keys]
        if missing:
            raise TypeError(f"convert_model() needs a ConvertSettings or the keys {', '.join(missing)}")
        settings = ConvertSettings.from_section(keys)
    elif keys:
        raise TypeError(f"convert_model() takes a ConvertSettings or keys, not both (got {', '.join(sorted(keys))})")
    elif not isinstance(settings, ConvertSettings):
        raise TypeError(f"convert_model() settings must be a ConvertSettings. Got {type(settings).__name__} instead.")
    s = settings
    check_int(input_q, "input_q", "convert", 1, 255)
    ops = fold(model)                       # validates every layer before any work
    calib_x = np.asarray(calib_x, dtype=np.float32)
    if calib_x.ndim != 4 or calib_x.shape[0] == 0:
        raise UsageError(f"calibration frames must have shape (N, C, H, W) with N >= 1; got {calib_x.shape}")
    p = s.payload_bits
    ranges = activation_ranges(ops, calib_x, *s.calibration_rule, act_max=act_max, quiet=quiet,
                               levels=arith.payload_max(p))
    q_in = min(int(input_q), arith.payload_max(p)) if s.input_clip else int(input_q)
    # an aware model trained on its quantized weights: the grid error is part of what it learned
    aware = act_max is not None or any(op.a_max is not None for op in ops)
    correct = s.bias_correction and not aware
    net = build_network(ops, ranges, input_shape=calib_x.shape[1:], input_q=q_in,
                        weight_bits=s.weight_bits, payload_bits=p, coding=s.coding, per_channel=s.per_channel,
                        weight_rule=s.weight_rule, multiplier_bits=s.multiplier_bits,
                        acc_limit_bits=s.accumulator_bits, overflow=s.overflow,
                        input_means=input_means(ops, calib_x) if correct else None)
    net.meta.update(bias_correction=correct, calibration=s.calibration, weight_scale=s.weight_scale, calib_samples=int(calib_x.shape[0]),
                    calib_fingerprint=fingerprint(calib_x), frame_input_q=int(input_q),
                    act_max=None if act_max is None else [float(a) for a in act_max])
    return net


def convert_and_measure(model, dataset, settings: ConvertSettings | dict, act_max=None, quiet: bool = False,
                        float_accuracy: float | None = None, hardware=None, budget=None):
    """Convert with the [convert] `settings`, calibrate on the training split, measure on the test split.

    `settings`: a `ConvertSettings`, or a [convert] section (dict) that is checked by building one.
    Deterministic: the calibration subset is evenly spaced, and nothing draws random numbers.
    `float_accuracy`: the test accuracy of the float model an aware `model` was fine-tuned from.
    `hardware`, `budget`: the [hardware] and [budget] sections for the cost estimate and the fit.
    Returns (net, metrics dict).
    """
    from snnconvert.sim.metrics import measure
    s = settings if isinstance(settings, ConvertSettings) else ConvertSettings.from_section(settings)
    Xtr = np.asarray(dataset.train[0])
    idx = calibration_subset(len(Xtr), s.calib_samples)
    net = convert_model(model, Xtr[idx], s, input_q=int(dataset.input_q), act_max=act_max, quiet=quiet)
    net.meta.update(data_fingerprint=getattr(dataset, "fingerprint", None), classes=list(getattr(dataset, "classes", [])),
                    convert=s.as_dict())
    Xte, yte = dataset.test
    metrics = measure(model, net, Xte, yte, tolerance_pp=s.tolerance_pp, quiet=quiet, float_accuracy=float_accuracy,
                      hardware=hardware, budget=budget)
    return net, metrics


def convert_checkpoint(train_dir, settings: ConvertSettings | dict, quiet: bool = False, dataset=None,
                       loaded=None, hardware=None, budget=None):
    """Load `train_dir/model.pt`, then `convert_and_measure` on `dataset` (default: the data set of the
    checkpoint's recipe, loaded here). `loaded`: the (model, ckpt) pair `checkpoint.load_checkpoint` already
    returned for that file, so a caller that read it first does not read it again. `hardware`, `budget`:
    default the checkpoint recipe's sections. Returns (net, metrics)."""
    path = Path(train_dir) / "model.pt"
    if loaded is None:
        from snnconvert.checkpoint import load_checkpoint
        loaded = load_checkpoint(path)
    model, ckpt = loaded
    if dataset is None:
        from snnconvert.data import load_dataset
        dataset = load_dataset(ckpt["recipe"], progress=not quiet)
    from snnconvert.checkpoint import check_checkpoint_fits
    check_checkpoint_fits(model, ckpt, dataset, path)
    # an aware checkpoint keeps the test accuracy of the float model it was fine-tuned from
    net, metrics = convert_and_measure(model, dataset, settings, act_max=ckpt.get("act_max"), quiet=quiet,
                                       float_accuracy=(ckpt.get("metrics") or {}).get("float_frame_accuracy"),
                                       hardware=hardware if hardware is not None else ckpt["recipe"].get("hardware"),
                                       budget=budget if budget is not None else ckpt["recipe"].get("budget"))
    net.meta.update(recipe={k: v for k, v in ckpt["recipe"].items() if k != "_embedded"},
                    train_fingerprint=ckpt.get("data_fingerprint"))
    return net, metrics


def write_outputs(net, metrics: dict, recipe: dict, out: Path) -> None:
    """network.json/.npz, metrics.json, recipe.toml and confusion.png of one conversion, each atomic."""
    from snnconvert import files
    from snnconvert import recipe as recipe_mod
    from snnconvert.plots import save_confusion
    net.save(out)
    files.atomic_write_json(out / "metrics.json", metrics)
    recipe_mod.save(recipe, out)
    classes = net.meta.get("classes") or [str(i) for i in range(net.n_classes)]
    save_confusion(metrics["confusion"], classes, out / "confusion.png",
                   title=f"spike model ({net.coding}, k={net.weight_bits}, p={net.payload_bits}): "
                         f"{100 * metrics['spike_accuracy']:.2f}%")


__all__ = ["ConvertSettings", "parse_range_rule", "convert_model", "convert_and_measure", "convert_checkpoint", "write_outputs",
           "fold", "folded_forward", "calibration_subset"]
