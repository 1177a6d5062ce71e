"""The checkpoint format: `model.pt` written by training, read back by convert, simulate and sweep.

    format, version    "snnconvert-checkpoint", 1
    state_dict         tensors only (torch.load(weights_only=True) safe; finite values checked)
    model_spec         layers, input_shape, n_classes, classes, input_q (rebuilds the model)
    recipe             the resolved recipe (keeps _base_dir so relative data paths still resolve)
    data_fingerprint   the data set the model was trained on
    metrics            training metrics (metrics.json)
    act_max            clip ranges of an aware model (None for a float model)
    aware              {weight_bits, payload_bits, per_channel, learn_act_max, weight_scale} or None

Never unpickles code; every field is validated before a model is built from it.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path

import torch
from torch import nn

from snnconvert import files, models
from snnconvert import recipe as recipe_mod
from snnconvert.errors import FormatError, UsageError, check_bool, check_float, check_int, check_shape, fail

CHECKPOINT_FORMAT = "snnconvert-checkpoint"
CHECKPOINT_VERSION = 1


def make_checkpoint(model: nn.Sequential, dataset, recipe: dict, metrics: dict, act_max, aware_info) -> dict:
    """The checkpoint dict of a trained model (see the module docstring for the fields)."""
    input_shape = tuple(int(s) for s in dataset.input_shape)
    # an aware model has no BN left, so its spec rebuilds the folded float skeleton for make_aware
    spec = {"layers": models.spec_from_model(model), "input_shape": list(input_shape),
            "n_classes": len(dataset.classes), "classes": [str(c) for c in dataset.classes],
            "input_q": int(dataset.input_q)}
    return {
        "format": CHECKPOINT_FORMAT, "version": CHECKPOINT_VERSION,
        "state_dict": {k: v.detach().clone() for k, v in model.state_dict().items()},
        "model_spec": spec,
        "recipe": copy.deepcopy(recipe),  # keeps _base_dir so relative data paths still resolve
        "data_fingerprint": str(dataset.fingerprint),
        "metrics": metrics,
        "act_max": act_max,
        "aware": aware_info,
    }


def load_checkpoint(path) -> tuple[nn.Sequential, dict]:
    """Load `model.pt` (or `folder/model.pt`) and rebuild its model in eval mode.

    Refuses anything but this project's checkpoint format/version; never unpickles code.
    """
    path = Path(path)
    if path.is_dir():
        path = path / "model.pt"
    ckpt = files.load_torch(path)
    if not isinstance(ckpt, dict) or ckpt.get("format") != CHECKPOINT_FORMAT:
        got = ckpt.get("format") if isinstance(ckpt, dict) else type(ckpt).__name__
        raise FormatError(f"{path}: field 'format' must be {CHECKPOINT_FORMAT!r}. Got {got!r} instead.")
    if ckpt.get("version") != CHECKPOINT_VERSION:
        raise FormatError(f"{path}: field 'version' must be {CHECKPOINT_VERSION}. Got {ckpt.get('version')!r} instead.")
    for k in ("state_dict", "model_spec", "recipe", "data_fingerprint", "metrics", "act_max", "aware"):
        if k not in ckpt:
            raise FormatError(f"{path}: checkpoint has no field '{k}'")
    ckpt["recipe"] = recipe_mod.from_embedded(ckpt["recipe"], path)
    _check_checkpoint_fields(ckpt, str(path))
    spec = ckpt["model_spec"]
    try:
        model = models.build_model({"layers": spec["layers"]}, spec["input_shape"], spec["n_classes"], quiet=True)
        if ckpt["aware"]:
            a = ckpt["aware"]
            model = models.make_aware(model, a["weight_bits"], a["payload_bits"], a["per_channel"],
                                      act_max=ckpt["act_max"], learn_act_max=a.get("learn_act_max", True),
                                      weight_rule=aware_weight_rule(a, str(path)))
        model.load_state_dict(ckpt["state_dict"])
    except (UsageError, KeyError, TypeError, RuntimeError) as exc:
        raise FormatError(f"{path}: model_spec does not match state_dict ({type(exc).__name__}: "
                          f"{' '.join(str(exc).split())[:300]})") from None
    model.eval()
    return model, ckpt


def _check_checkpoint_fields(ckpt: dict, owner: str) -> None:
    """model_spec, act_max, aware and every tensor of the state_dict, before a model is built from them.

    Weights must be finite: a NaN or infinite parameter would only surface later as a conversion failure.
    """
    E = FormatError
    spec = ckpt["model_spec"]
    if not isinstance(spec, dict):
        fail("model_spec", owner, "an object", repr(spec), "field", E)
    spec["input_shape"] = list(check_shape(spec.get("input_shape"), "model_spec.input_shape", owner, 3, 1, "field", E))
    check_int(spec.get("n_classes"), "model_spec.n_classes", owner, 1, 1 << 16, "field", E)
    sd = ckpt["state_dict"]
    if not isinstance(sd, dict):
        fail("state_dict", owner, "a map of parameter names to tensors", repr(type(sd).__name__), "field", E)
    for k, v in sd.items():
        if not isinstance(v, torch.Tensor):
            fail(f"state_dict.{k}", owner, "a tensor", repr(type(v).__name__), "field", E)
        if v.is_floating_point() and not bool(torch.isfinite(v).all()):
            bad = v.reshape(-1)[~torch.isfinite(v.reshape(-1))][0].item()
            fail(f"state_dict.{k}", owner, "a tensor of finite numbers", f"{bad} among its {v.numel()} values",
                 "field", E)
    aware = ckpt["aware"]
    if aware is not None:
        if not isinstance(aware, dict):
            fail("aware", owner, "null or an object", repr(aware), "field", E)
        check_int(aware.get("weight_bits"), "aware.weight_bits", owner, 2, 16, "field", E)
        check_int(aware.get("payload_bits"), "aware.payload_bits", owner, 1, 8, "field", E)
        check_bool(aware.get("per_channel"), "aware.per_channel", owner, "field", E)
        aware_weight_rule(aware, owner)
    act = ckpt["act_max"]
    if act is not None:
        if not isinstance(act, (list, tuple)):
            fail("act_max", owner, "null or a list of floats > 0", repr(act), "field", E)
        for i, a in enumerate(act):
            v = check_float(a, f"act_max[{i}]", owner, 0.0, None, lo_open=True, what="field", error=E)
            if not math.isfinite(v):
                fail(f"act_max[{i}]", owner, "a finite float > 0", repr(a), "field", E)


def aware_weight_rule(aware: dict, owner: str) -> tuple[str, float]:
    """The weight scale rule an aware checkpoint trained on, parsed (FormatError if unreadable).
    Checkpoints written before the rule was recorded trained on the max rule."""
    from snnconvert.settings.convert import parse_weight_rule
    rule = aware.get("weight_scale", "max")
    try:
        return parse_weight_rule(rule, "aware.weight_scale", owner)
    except UsageError:
        fail("aware.weight_scale", owner, "'max', 'percentile:Q' with Q in (0, 100] or 'mean:C' with C in (0, 10]",
             repr(rule), "field", FormatError)


def check_model_fits(model: nn.Module, input_shape, n_classes: int, name: str, trained_shape=None) -> None:
    """The one check that a model and the data it is about to see agree: frame shape and class count.

    `trained_shape` (a checkpoint's model_spec.input_shape) is compared first; the model is then run
    on one zero frame, so a model without a spec is checked too. UsageError naming `name` otherwise.
    """
    shape = tuple(int(s) for s in input_shape)
    if trained_shape is not None and tuple(trained_shape) != shape:
        raise UsageError(f"{name} was trained on frames of shape {tuple(trained_shape)}, but its data now gives "
                         f"frames of shape {shape}; use the recipe it was trained with (frames.size, frames.mode)")
    was = model.training
    model.eval()
    try:
        with torch.no_grad():
            out = model(torch.zeros((1, *shape)))  # (1, classes)
    except RuntimeError as exc:
        raise UsageError(f"{name} does not accept frames of shape {shape}: "
                         f"{' '.join(str(exc).split())[:200]}") from None
    finally:
        model.train(was)
    if out.shape[1] != n_classes:
        raise UsageError(f"{name} gives {out.shape[1]} class scores but the data has {n_classes} classes")


def check_checkpoint_fits(model: nn.Module, ckpt: dict, dataset, path) -> None:
    """`check_model_fits` for a loaded checkpoint and the data set about to be used with it."""
    path = Path(path)
    name = str(path / "model.pt" if path.is_dir() else path)
    check_model_fits(model, dataset.input_shape, len(dataset.classes), name, ckpt["model_spec"]["input_shape"])
