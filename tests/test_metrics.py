"""Metrics of a conversion: counts checked against the reference simulator and hand formulas."""

import sys
from pathlib import Path

import numpy as np
import pytest
import torch

sys.path.insert(0, str(Path(__file__).parent))
from _convert_helpers import accuracy, split, trained  # noqa: E402

from snnconvert import arith  # noqa: E402
from snnconvert.convert import convert_model  # noqa: E402
from snnconvert.sim import reference as R  # noqa: E402
from snnconvert.models import make_aware  # noqa: E402
from snnconvert.sim.metrics import format_table, measure, tolerance_verdict  # noqa: E402

torch.set_num_threads(1)   # small models; a second thread only spins on a shared 2-core machine


@pytest.mark.parametrize("kind,coding,pc", [("mlp", "payload", False), ("conv_avg", "ttfs", True),
                                            ("conv_max", "binary", False)])
def test_counts_match_the_reference_simulator(kind, coding, pc, capsys):
    model = trained(kind)
    (xtr, _), (xte, yte) = split()
    xte, yte = xte[:150], yte[:150]
    net = convert_model(model, xtr[:256], weight_bits=4, payload_bits=1 if coding == "binary" else 4, coding=coding,
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
    # intervals and the paired test, checked against scipy on the counts of this test set
    from scipy.stats import binomtest
    n = len(yte)
    for k in ("frame_accuracy", "quantized_accuracy", "spike_accuracy"):
        ref = binomtest(round(m[k] * n), n).proportion_ci(method="wilson")   # Wilson 1927
        assert m[k + "_ci"] == pytest.approx([ref.low, ref.high], abs=1e-12)
    frame_right = model(torch.from_numpy(xte)).argmax(1).numpy() == yte
    spike_right = np.array([t.decision == y for t, y in zip(traces, yte)])
    b, c = int((frame_right & ~spike_right).sum()), int((spike_right & ~frame_right).sum())
    assert (m["frame_only_correct"], m["spike_only_correct"]) == (b, c)
    assert b - c == round(m["conversion_loss_pp"] * n / 100)                # the loss is the discordant difference
    ref_p = binomtest(b, b + c, 0.5).pvalue if b + c else 1.0               # McNemar 1947, exact form
    assert m["conversion_loss_p"] == pytest.approx(ref_p, rel=1e-9)
    printed = capsys.readouterr().out
    assert "spike_accuracy" in printed and "95 % CI [" in printed and "(McNemar p " in printed


def test_macs_memory_and_energy_follow_their_formulas():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    net = convert_model(model, xtr[:256], weight_bits=5, payload_bits=3, coding="payload")
    m = measure(model, net, xte[:50], yte[:50], quiet=True)
    assert m["macs_per_sample"] == 256 * 32 + 32 * 10             # dense MACs: in * out per Linear (common practice)
    assert m["weight_memory_bits"] == (256 * 32 + 32 * 10) * 5      # weights x weight bits (common practice)
    e = m["energy"]
    widest = max(m["accumulator_bits"].values())
    add = 0.03 if widest <= 8 else 0.05 if widest <= 16 else 0.1   # Horowitz 2014: int8 / int16 / int32 add, pJ
    assert e["spike_pj_per_sample"] == pytest.approx(m["sops_per_sample"] * (add + 0.2))  # + int8 mult 0.2 pJ
    assert e["frame_pj_per_sample"] == pytest.approx(m["macs_per_sample"] * (3.7 + 0.9))  # fp32 mult + add, pJ
    # dense integer baseline at the same widths: the first layer's inputs are 1-bit frame values, so its
    # 256 * 32 MACs are gated adds; the second multiplies 5-bit weights by 3-bit payloads, an int8 multiply
    # (0.2 pJ, Horowitz 2014) per MAC, plus the same add
    assert e["dense_int_pj_per_sample"] == pytest.approx(256 * 32 * add + 32 * 10 * (0.2 + add))
    assert e["ratio_spike_to_dense_int"] == pytest.approx(e["spike_pj_per_sample"] / e["dense_int_pj_per_sample"])
    line = next(r for r in format_table(m).splitlines() if r.startswith("energy (estimate)"))
    assert (f"{e['spike_pj_per_sample'] / 1e3:.2f} nJ spike, {e['dense_int_pj_per_sample'] / 1e3:.2f} nJ dense "
            f"integer (same widths), {e['frame_pj_per_sample'] / 1e3:.2f} nJ float frame model") in line


@pytest.mark.parametrize("loss,tol,text", [(3.6125, 0.5, "no (loss 3.61 pp > 0.50 pp)"),
                                           (0.28, 0.5, "yes (loss 0.28 pp <= 0.50 pp)"),
                                           (0.5, 0.5, "yes (loss 0.50 pp <= 0.50 pp)")])
def test_tolerance_verdict(loss, tol, text):
    assert tolerance_verdict(loss, tol) == text


def test_table_flags_a_point_outside_tolerance():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    net = convert_model(model, xtr[:256], weight_bits=2, payload_bits=1, coding="binary")
    m = measure(model, net, xte, yte, tolerance_pp=0.5, quiet=True)
    assert m["conversion_loss_pp"] > 0.5 and m["within_tolerance"] is False
    rows = {r[:23].strip(): r[23:] for r in format_table(m).splitlines()}
    assert rows["within tolerance"] == f"no (loss {m['conversion_loss_pp']:.2f} pp > 0.50 pp)"


def test_aware_frame_model_is_named_and_the_float_model_is_kept_apart():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    float_acc = accuracy(model, xte, yte)
    aware = make_aware(model, 3, 2, False, act_max=[2.0]).eval()
    net = convert_model(aware, xtr[:256], weight_bits=3, payload_bits=2, coding="payload")
    m = measure(aware, net, xte, yte, quiet=True, float_accuracy=float_acc)
    assert m["frame_model"] == "aware" and m["aware_bits"] == {"weight_bits": 3, "payload_bits": 2}
    assert m["frame_accuracy"] == accuracy(aware, xte, yte)        # the model that was converted
    assert m["float_accuracy"] == float_acc
    assert m["loss_vs_float_pp"] == pytest.approx(100 * (float_acc - m["spike_accuracy"]))
    table = format_table(m)
    assert f"frame model (aware, fine-tuned for k=3 p=2)  {m['frame_accuracy']:.4f}" in table
    assert f"float model before fine-tuning               {float_acc:.4f}" in table
    plain = measure(model, convert_model(model, xtr[:256], weight_bits=3, payload_bits=2, coding="payload"), xte, yte,
                    quiet=True)
    assert plain["frame_model"] == "float" and plain["aware_bits"] is None
    assert plain["float_accuracy"] == plain["frame_accuracy"] and plain["loss_vs_float_pp"] == plain["conversion_loss_pp"]


def test_declared_width_separates_spike_from_quantized_accuracy():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    net = convert_model(model, xtr[:256], weight_bits=6, payload_bits=4, coding="payload", accumulator_bits=5,
                        overflow="wrap")
    m = measure(model, net, xte, yte, quiet=True)
    assert sum(m["overflows"].values()) > 0
    assert m["spike_accuracy"] < m["quantized_accuracy"]           # wrap-around flips signs of large potentials
    assert m["declared_accumulator_bits"] == 5


def test_measure_rejects_mismatched_labels():
    model = trained("mlp")
    (xtr, _), (xte, yte) = split()
    net = convert_model(model, xtr[:64], weight_bits=4, payload_bits=4, coding="payload")
    with pytest.raises(ValueError, match="one label per sample"):
        measure(model, net, xte[:10], yte[:9], quiet=True)
