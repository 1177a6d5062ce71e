"""Recipe section [convert]: the bit budget and the rules of the conversion (torch-free)."""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.errors import UsageError, check_str
from snnconvert.intnet import CODINGS
from snnconvert.schema import Key
from snnconvert.settings import Section


def parse_range_rule(value, key: str = "calibration", section: str = "convert",
                     mse: bool = True) -> tuple[str, float]:
    """Parse a range statistic: "max" -> ("max", 100.0); "percentile:Q" -> ("percentile", Q), 0 < Q <= 100;
    "mse" -> ("mse", 100.0), the range whose payload grid fits the calibration activations with the least
    squared error (`convert.calibrate.range_statistic`; activations only: `mse=False` refuses it)."""
    check_str(value, key, section)
    text = value.strip()
    if text == "max":
        return "max", 100.0
    if text == "mse" and mse:
        return "mse", 100.0
    head, sep, tail = text.partition(":")
    if head == "percentile" and sep:
        try:
            pct = float(tail)
        except ValueError:
            pct = float("nan")
        if 0.0 < pct <= 100.0:
            return "percentile", pct
    also = ", 'mse'" if mse else ""
    raise UsageError(f"The '{key}' parameter of {section} must be 'max'{also} or 'percentile:Q' with Q in (0, 100]. "
                     f"Got {value!r} instead.")


def _rule_validator(value, key, section):
    parse_range_rule(value, key, section)
    return value


# the largest c of the weight rule "mean:c": beyond a few mean|w| every grid is the max rule's
MEAN_RULE_MAX = 10.0


def parse_weight_rule(value, key: str = "weight_scale", section: str = "convert") -> tuple[str, float]:
    """Parse a weight scale rule: a range statistic (`parse_range_rule`), or "mean:c" -> ("mean", c),
    0 < c <= 10: the grid's first rounding boundary at c mean|w| (see `arith.weight_scale`; c = 0.7
    is the ternary threshold of Ternary Weight Networks, Li & Liu 2016)."""
    check_str(value, key, section)
    head, sep, tail = value.strip().partition(":")
    if head == "mean" and sep:
        try:
            c = float(tail)
        except ValueError:
            c = float("nan")
        if 0.0 < c <= MEAN_RULE_MAX:
            return "mean", c
    elif head != "mean":
        try:
            return parse_range_rule(value, key, section, mse=False)
        except UsageError:
            pass
    raise UsageError(f"The '{key}' parameter of {section} must be 'max', 'percentile:Q' with Q in (0, 100] or "
                     f"'mean:C' with C in (0, {MEAN_RULE_MAX:g}]. Got {value!r} instead.")


def _weight_rule_validator(value, key, section):
    parse_weight_rule(value, key, section)
    return value


def check_binary_payload(coding, payload_bits) -> None:
    """A binary spike carries no payload: coding "binary" needs payload_bits = 1 (refused otherwise)."""
    if coding == "binary" and payload_bits != 1:
        raise UsageError(f"The 'payload_bits' parameter of convert must be 1 with coding 'binary' (a binary spike "
                         f"carries no payload). Got {payload_bits!r} instead.")


KEYS: dict[str, Key] = {
    "weight_bits": Key(4, "int", "4-bit weights keep the digits model within tolerance and fit small on-chip memories",
                       lo=2, hi=16),
    "payload_bits": Key(4, "int", "4-bit payloads (16 ttfs steps) keep accuracy close to the frame model", lo=1, hi=8),
    "coding": Key("payload", "choice", "a graded single spike needs the fewest time steps per layer",
                  choices=CODINGS),
    "per_channel": Key(False, "bool", "one scale per layer is the simplest hardware; per-channel is opt-in"),
    "calibration": Key("percentile:99.9", "any", "the 99.9th percentile ignores rare outliers (Rueckauer et al. 2017); "
                       "'mse' picks each range by the least squared payload-grid error on the calibration frames",
                       validator=_rule_validator),
    "weight_scale": Key("max", "any", "max-abs keeps every weight representable without clipping; "
                        "'mean:0.7' (ternary threshold from the weight statistics) suits 2-3-bit weights",
                        validator=_weight_rule_validator),
    "bias_correction": Key(False, "bool", "opt-in: shifting each bias by the mean weight-grid error of its "
                           "pre-activation on the calibration frames (Nagel et al. 2019) changes post-training "
                           "figures; aware models are converted without it"),
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


@dataclass(frozen=True)
class ConvertSettings(Section):
    """The [convert] section, checked: what `convert.convert` and the convert stage read."""

    SECTION = "convert"
    KEYS = KEYS

    weight_bits: int
    payload_bits: int
    coding: str
    per_channel: bool
    calibration: str
    weight_scale: str
    bias_correction: bool
    calib_samples: int
    multiplier_bits: int
    accumulator_bits: int
    overflow: str
    input_clip: bool
    tolerance_pp: float

    def check_together(self) -> None:
        check_binary_payload(self.coding, self.payload_bits)

    @property
    def calibration_rule(self) -> tuple[str, float]:
        """The activation range statistic, parsed: ("max", 100.0), ("percentile", Q) or ("mse", 100.0)."""
        return parse_range_rule(self.calibration, "calibration", self.SECTION)

    @property
    def weight_rule(self) -> tuple[str, float]:
        """The weight scale rule, parsed: ("max", 100.0), ("percentile", Q) or ("mean", c)."""
        return parse_weight_rule(self.weight_scale, "weight_scale", self.SECTION)
