"""Recipe section [train]: optimizer, schedule, augmentation and conversion-aware fine-tuning (torch-free)."""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.schema import Key
from snnconvert.settings import Section

# keys that were renamed: old name -> new name (recipe.from_dict reads the old name with a note);
# "shift" also named the requantization shift n
RENAMED = {"shift": "jitter_px"}

KEYS: dict[str, Key] = {
    "optimizer": Key("adam", "choice", "Adam needs no learning-rate search for small CNNs", choices=("adam", "sgd")),
    "lr": Key(0.003, "float", "a little above Adam's usual 1e-3: small batches of binary frames train stably at it",
              lo=0.0, hi=10.0),
    "momentum": Key(0.9, "float", "the usual SGD momentum (common practice); unused by Adam", lo=0.0, hi=0.999),
    "weight_decay": Key(0.0001, "float", "light L2 keeps weights small, which helps low-bit quantization",
                        lo=0.0, hi=1.0),
    "schedule": Key("cosine", "choice", "cosine decay to zero ends training at a flat, quantization-friendly point",
                    choices=("constant", "step", "cosine")),
    "step_epochs": Key(10, "int", "step schedule: decay every 10 epochs (common practice)", lo=1),
    "step_gamma": Key(0.1, "float", "step schedule: divide by 10 at each step (common practice)", lo=0.0, hi=1.0),
    "batch_size": Key(32, "int", "small batches give more updates per second on 2 CPU cores", lo=1, hi=65536),
    "epochs": Key(30, "int", "the digits frames stop improving after about 30 epochs; ~7 s on one CPU thread",
                  lo=1, hi=10000),
    "patience": Key(0, "int", "0 = no early stop: with a cosine schedule the last epochs are the best; "
                    "the best-validation model is kept either way", lo=0),
    "jitter_px": Key(1, "int", "moving frames by up to 1 pixel mimics small fixation changes", lo=0, hi=8),
    "event_dropout": Key(0.05, "float", "removing 5% of input events mimics sensor noise; 10-20% cost accuracy on digits",
                         lo=0.0, hi=0.9),
    "activity_l1": Key(0.0, "float", "0 = off: the fan-out weighted L1 penalty on hidden activations (ramped in "
                       "over the first quarter of the steps) trades accuracy for fewer synaptic operations, "
                       "so it is opt-in", lo=0.0, hi=100.0),
    "threads": Key(0, "int", "0 = auto: 1 thread below 1e9 multiply-accumulates per step (a second thread was 4-8x "
                   "slower on a loaded 2-core machine), else up to 2 cores; never chosen by load",
                   lo=0, hi=256),
    "memory_format": Key("contiguous", "choice", "bench/train.py: channels_last trained 9-31 % faster at batch "
                         "32 on one thread in three runs, but its float rounding differs, so it is opt-in and "
                         "the default recipe's figures stay as measured", choices=("contiguous", "channels_last")),
    "aware": Key(False, "bool", "conversion-aware fine-tuning is opt-in: plain float training is the baseline"),
    "aware_epochs": Key(3, "int", "a few epochs recover most accuracy lost to low-bit weights and payloads",
                        lo=1, hi=1000),
    "aware_lr": Key(0.0003, "float", "a tenth of lr: at 3-4-bit budgets it kept 98-99% on digits where 0.003 "
                    "gave 96-97% (1-bit payloads prefer ~0.003)", lo=0.0, hi=10.0),
    "learn_act_max": Key(True, "bool", "a trainable clip range adapts to the quantized grid (PACT-style clipping)"),
    "act_percentile": Key(99.9, "float", "start each clip range at the 99.9th percentile, the converter's default "
                          "calibration (Rueckauer et al. 2017)",
                          lo=50.0, hi=100.0),
}


@dataclass(frozen=True)
class TrainSettings(Section):
    """The [train] section, checked."""

    SECTION = "train"
    KEYS = KEYS

    optimizer: str
    lr: float
    momentum: float
    weight_decay: float
    schedule: str
    step_epochs: int
    step_gamma: float
    batch_size: int
    epochs: int
    patience: int
    jitter_px: int
    event_dropout: float
    activity_l1: float
    threads: int
    memory_format: str
    aware: bool
    aware_epochs: int
    aware_lr: float
    learn_act_max: bool
    act_percentile: float
