"""Recipe section [budget]: optional limits a converted network must meet (torch-free).

Every limit is off by default (0; 100 pp for max_loss_pp). `convert`, the run summary and the
sweep's second recommendation rule check them (`snnconvert.cost.check_budget`). Block RAMs,
latency and energy are estimates of the cost model.
"""

from __future__ import annotations

from dataclasses import dataclass

from snnconvert.schema import Key
from snnconvert.settings import Section

KEYS: dict[str, Key] = {
    "weight_memory_bits": Key(0, "int", "0 = no limit; set it to the weight memory the target device can spare",
                              lo=0, hi=1 << 40),
    "block_rams": Key(0, "int", "0 = no limit; the estimated block RAM count (see [hardware] block_kbits)",
                      lo=0, hi=1 << 20),
    "latency_us": Key(0.0, "float", "0 = no limit; the estimated worst latency per sample on the test split",
                      lo=0.0, hi=1e9),
    "energy_nj": Key(0.0, "float", "0 = no limit; the estimated energy per sample of the spike datapath",
                     lo=0.0, hi=1e12),
    "sops_per_sample": Key(0.0, "float", "0 = no limit; synaptic operations per sample (mean on the test split)",
                           lo=0.0, hi=1e15),
    "min_accuracy": Key(0.0, "float", "0 = no limit; the least spike accuracy (a fraction) the network must reach",
                        lo=0.0, hi=1.0),
    "max_loss_pp": Key(100.0, "float", "100 = no limit; the largest accuracy loss against the frame model, in pp",
                       lo=0.0, hi=100.0),
}


@dataclass(frozen=True)
class BudgetSettings(Section):
    """The [budget] section, checked; 0 (100 for max_loss_pp) switches a limit off."""

    SECTION = "budget"
    KEYS = KEYS

    weight_memory_bits: int
    block_rams: int
    latency_us: float
    energy_nj: float
    sops_per_sample: float
    min_accuracy: float
    max_loss_pp: float
