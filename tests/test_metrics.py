"""Metrics of a conversion: counts checked against the reference simulator and hand formulas."""

import sys
from pathlib import Path

import numpy as np
import pytest
import torch

sys.path.insert(0, str(Path(__file__).parent))
from _convert_helpers import accuracy, split, trained  # noqa: E402

from snnconvert import arith  # noqa: E402
from snnconvert.convert import convert  # noqa: E402
from snnconvert.sim import reference as R  # noqa: E402
from snnconvert.sim.metrics import format_table, measure  # noqa: E402

torch.set_num_threads(1)   # small models; a second thread only spins on a shared 2-core machine


@pytest.mark.parametrize("kind,coding,pc", [("mlp", "payload", False), ("conv_avg", "ttfs", True),
                                            ("conv_max", "binary", False)])
def test_counts_match_the_reference_simulator(kind, coding, pc, capsys):
    model = trained(kind)
    (xtr, _), (xte, yte) = split()
    xte, yte = xte[:150], yte[:150]
    net = convert(model, xtr[:256], weight_bits=4, payload_bits=1 if coding == "binary" else 4, coding=coding,
                  per_channel=pc)
    m = measure(model, net, xte, yte)
    traces = R.run_batch(net, arith.quantize_input(xte, 1), progress=False)
    assert m["sops_per_sample"] == pytest.approx(np.mean([t.sops for t in traces]), rel=1e-12)
    n_events = [len(t.input_events) + sum(len(e) for e in t.layer_events if e is not None) for t in traces]
    assert m["spikes_per_sample"] == pytest.approx(np.mean(n_events), rel=1e-12)
    assert m["max_spikes_per_neuron"] == 1                          # single-spike code (Stanojevic et al. 2023)
    assert m["spike_accuracy"] == np.mean([t.decision == y for t, y in zip(traces, yte)])
    assert m["quantized_accuracy"] == m["spike_accuracy"]          # no declared accumulator width
    assert m["frame_accuracy"] == accuracy(model, xte, yte)
    assert m["conversion_loss_pp"] == pytest.approx(100 * (m["frame_accuracy"] - m["spike_accuracy"]))
    assert np.sum(m["confusion"]) == len(yte) and np.trace(m["confusion"]) == round(m["spike_accuracy"] * len(yte))
    assert m["energy_is_estimate"] is True and "Horowitz 2014" in m["energy"]["source"]  # source of the pJ table
    for name, bits in m["accumulator_bits"].items():
        assert m["max_abs_potential"][name] < 2 ** (bits - 1)       # the bound holds on data
    if coding == "ttfs":
        assert m["early_accuracy"] == np.mean([t.early_decision == y for t, y in zip(traces, yte)])
        assert m["latency"]["window_steps"] == 2 + 4 * 16           # input window Q_in + 1 = 2, then 4 layer windows of 2^4
    else:
        assert m["early_accuracy"] is None
    assert "spike_accuracy" in capsys.readouterr().out


def test_macs_memory_and_energy_follow_their_formulas():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    net = convert(model, xtr[:256], weight_bits=5, payload_bits=3, coding="payload")
    m = measure(model, net, xte[:50], yte[:50], quiet=True)
    assert m["macs_per_sample"] == 256 * 32 + 32 * 10             # dense MACs: in * out per Linear (common practice)
    assert m["weight_memory_bits"] == (256 * 32 + 32 * 10) * 5      # weights x weight bits (common practice)
    e = m["energy"]
    widest = max(m["accumulator_bits"].values())
    add = 0.03 if widest <= 8 else 0.05 if widest <= 16 else 0.1   # Horowitz 2014: int8 / int16 / int32 add, pJ
    assert e["spike_pj_per_sample"] == pytest.approx(m["sops_per_sample"] * (add + 0.2))  # + int8 mult 0.2 pJ
    assert e["frame_pj_per_sample"] == pytest.approx(m["macs_per_sample"] * (3.7 + 0.9))  # fp32 mult + add, pJ
    assert "energy (estimate)" in format_table(m)                  # Horowitz 2014 figures are labelled estimates


def test_declared_width_separates_spike_from_quantized_accuracy():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    net = convert(model, xtr[:256], weight_bits=6, payload_bits=4, coding="payload", acc_limit_bits=5, overflow="wrap")
    m = measure(model, net, xte, yte, quiet=True)
    assert sum(m["overflows"].values()) > 0
    assert m["spike_accuracy"] < m["quantized_accuracy"]           # wrap-around flips signs of large potentials
    assert m["declared_accumulator_bits"] == 5


def test_measure_rejects_mismatched_labels():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    net = convert(model, xtr[:64], weight_bits=4, payload_bits=4, coding="payload")
    with pytest.raises(ValueError, match="one label per sample"):
        measure(model, net, xte[:10], yte[:9], quiet=True)
