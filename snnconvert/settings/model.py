"""Recipe section [model]: the layer list of the frame CNN, checked without torch.

Layer tables in `[model] layers` (all other keys are rejected with a did-you-mean hint):
    {type="conv", out=8, kernel=3, stride=1, padding=1, bn=false}   padding defaults to kernel // 2
    {type="maxpool", size=2, stride=2}  /  {type="avgpool", size=2, stride=2}   stride defaults to size
    {type="dense", units=64, bn=false}
    {type="dropout", p=0.1}
The last table must be a dense layer (the class scores); `models.build_model` turns the list into torch.
"""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.errors import UsageError, check_bool, check_choice, check_float, check_int, unknown_key_message
from snnconvert.schema import Key
from snnconvert.settings import Section

LAYER_TYPES = ("conv", "maxpool", "avgpool", "dense", "dropout")

# Per type: key -> (kind, lo, hi, required). Defaults that depend on other keys are filled in _layer.
_LAYER_KEYS = {
    "conv": {"out": ("int", 1, 4096, True), "kernel": ("int", 1, 15, False), "stride": ("int", 1, 8, False),
             "padding": ("int", 0, 7, False), "bn": ("bool", None, None, False)},
    "maxpool": {"size": ("int", 1, 8, True), "stride": ("int", 1, 8, False)},
    "avgpool": {"size": ("int", 1, 8, True), "stride": ("int", 1, 8, False)},
    "dense": {"units": ("int", 1, 65536, False), "bn": ("bool", None, None, False)},
    "dropout": {"p": ("float", 0.0, 0.9, True)},
}

# Two convs with max pooling, dropout, one hidden dense layer: on 16x16 digit frames this trains to
# 97-99% in well under a second per epoch; widths stay small so the integer network stays small.
DEFAULT_LAYERS = [
    {"type": "conv", "out": 16, "kernel": 3, "stride": 1, "padding": 1, "bn": False},
    {"type": "conv", "out": 16, "kernel": 3, "stride": 1, "padding": 1, "bn": False},
    {"type": "maxpool", "size": 2, "stride": 2},
    {"type": "conv", "out": 32, "kernel": 3, "stride": 1, "padding": 1, "bn": False},
    {"type": "maxpool", "size": 2, "stride": 2},
    {"type": "dropout", "p": 0.25},
    {"type": "dense", "units": 64, "bn": False},
    {"type": "dense"},
]


def check_layers(value, key: str = "layers", section: str = "model") -> list[dict]:
    """Validate a layer list; returns it normalised (every optional key filled in)."""
    if not isinstance(value, list) or not value:
        raise UsageError(f"The '{key}' parameter of {section} must be a non-empty list of layer tables. "
                         f"Got {value!r} instead.")
    out = [_layer(item, f"{section}.{key}[{i}]") for i, item in enumerate(value)]
    if out[-1]["type"] != "dense":
        raise UsageError(f"The last layer of {section}.{key} must be a dense layer (the class scores). "
                         f"Got type {out[-1]['type']!r} instead.")
    if out[-1].get("bn"):
        raise UsageError(f"The output layer {section}.{key}[{len(out) - 1}] cannot have bn=true: "
                         f"class scores are not normalised.")
    for i, layer in enumerate(out[:-1]):
        if layer["type"] == "dense" and "units" not in layer:
            raise UsageError(f"The 'units' parameter of {section}.{key}[{i}] is required for a hidden dense layer.")
    return out


def _layer(item, owner: str) -> dict:
    if not isinstance(item, dict):
        raise UsageError(f"The layer {owner} must be a table like {{type=\"conv\", out=8}}. Got {item!r} instead.")
    if "type" not in item:
        raise UsageError(f"The layer {owner} has no 'type'; use one of {', '.join(LAYER_TYPES)}.")
    kind = check_choice(item["type"], "type", owner, LAYER_TYPES)
    spec = _LAYER_KEYS[kind]
    for k in item:
        if k != "type" and k not in spec:
            raise UsageError(unknown_key_message(k, f"{owner} ({kind})", list(spec) + ["type"]))
    layer = {"type": kind}
    for k, (kk, lo, hi, required) in spec.items():
        if k not in item:
            if required:
                raise UsageError(f"The '{k}' parameter of {owner} ({kind}) is required.")
            continue
        v = item[k]
        if kk == "int":
            layer[k] = check_int(v, k, owner, lo, hi)
        elif kk == "float":
            layer[k] = check_float(v, k, owner, lo, hi)
        else:
            layer[k] = check_bool(v, k, owner)
    if kind == "conv":
        layer.setdefault("kernel", 3)
        layer.setdefault("stride", 1)
        layer.setdefault("padding", layer["kernel"] // 2)
        layer.setdefault("bn", False)
    elif kind in ("maxpool", "avgpool"):
        layer.setdefault("stride", layer["size"])
    elif kind == "dense":
        layer.setdefault("bn", False)
    return {k: layer[k] for k in ["type", *spec] if k in layer}


KEYS: dict[str, Key] = {
    "layers": Key(DEFAULT_LAYERS, "any",
                  "3 small conv + 2 maxpool + dropout + 1 hidden dense: 97.22-99.44% on the default 16x16 binary "
                  "digit frames (seeds 0-4, measured) in about 15 s on one CPU thread",
                  validator=check_layers),
}


@dataclass(frozen=True)
class ModelSettings(Section):
    """The [model] section, checked: `layers` normalised (every optional key filled in)."""

    SECTION = "model"
    KEYS = KEYS

    layers: list
