"""What a conversion cost: accuracy, spikes, operations, widths, memory, latency, estimated energy.

    conversion_loss_pp = 100 * (frame_accuracy - spike_accuracy)
    sops_per_sample    = mean over samples of sum over emitted events of the event's fan-out
                         (weighted synapses only; input events included, max-pool comparisons not)
    macs_per_sample    = sum over conv/dense layers of O * H' * W' * I * kh * kw (dense frame model)
    energy (estimate)  = SOPs * E_add(accumulator width) [+ SOPs * E_mult(8-bit) for p > 1 payloads]
                         [+ ttfs: neurons * steps * E_add for the per-step integration]
                         vs MACs * (E_mult + E_add)(fp32); per-operation values from Horowitz 2014,
                         ISSCC, 45 nm. These are estimates of arithmetic energy only (no memory, no
                         control), for comparing the two models, not a chip measurement.

quantized_accuracy comes from the dense integer pass without a declared accumulator width;
spike_accuracy from the simulation with that width (saturate/wrap). They are equal unless the
declared width overflows on some sample.
"""

from __future__ import annotations

import numpy as np
import torch

from snnconvert import arith, console
from snnconvert.intnet import IntNetwork
from snnconvert.sim.reference import Tables
from snnconvert.sim.vectorized import simulate

ENERGY_SOURCE = "Horowitz 2014, 'Computing's energy problem', ISSCC, 45 nm, 0.9 V (per-operation table)"
# pJ per operation (Horowitz 2014, ISSCC; int16 add from the same table's secondary quotes)
E_PJ = {"int8_add": 0.03, "int16_add": 0.05, "int32_add": 0.1, "fp32_add": 0.9, "fp32_mult": 3.7,
        "int8_mult": 0.2, "int32_mult": 3.1}


def _add_class(bits: int) -> str:
    """The adder class an accumulator of `bits` needs; wider than 32 bits is charged as 32 (lower bound)."""
    return "int8_add" if bits <= 8 else "int16_add" if bits <= 16 else "int32_add"


def macs(net: IntNetwork) -> int:
    """Multiply-accumulates of the dense frame model with the same layers (pools not counted)."""
    total = 0
    for L in net.layers:
        if L.kind in ("conv", "dense"):
            total += int(np.prod(L.out_shape)) * L.fan_in
    return total


def weight_memory_bits(net: IntNetwork) -> dict:
    """Weights: words * k bits. Biases at their accumulator width, multipliers as M0 + shift, separately."""
    w = b = m = 0
    for L in net.layers:
        if L.weight is not None:
            w += L.weight.size * net.weight_bits
            b += L.bias.size * L.acc_bits
            m += L.m0.size * (net.multiplier_bits + 6)   # a 6-bit shift field covers n <= 63
    return {"weights": int(w), "biases": int(b), "multipliers": int(m)}


def latency(net: IntNetwork, res) -> dict:
    """payload/binary: one window per weighted layer plus the input window (pipeline stages).
    ttfs: steps from the input window's start to the first output spike, each window 2^p steps
    (the input window has input_q + 1 steps)."""
    n_w = sum(L.kind in ("conv", "dense") for L in net.layers)
    if net.coding != "ttfs":
        return {"pipeline_stages": n_w + 1}
    T = net.time_steps
    start = (net.input_q + 1) + (n_w - 1) * T          # steps before the output window opens
    fired = res.first_spike_step >= 0
    steps = start + res.first_spike_step[fired] + 1
    return {"pipeline_stages": n_w + 1, "window_steps": int(start + T),
            "first_output_spike_steps_mean": float(steps.mean()) if fired.any() else None,
            "samples_without_output_spike": int((~fired).sum())}


def measure(float_model, net: IntNetwork, X_test, y_test, tolerance_pp: float = 0.5, quiet: bool = False) -> dict:
    """All metrics of one conversion on a labelled test set (X float frames (N, C, H, W), y (N,)).

    `float_model` may be None (frame metrics are then left out). Prints the table unless quiet.
    """
    X = np.asarray(X_test, dtype=np.float32)
    y = np.asarray(y_test, dtype=np.int64)
    if len(X) == 0 or len(X) != len(y):
        raise ValueError(f"need a non-empty test set with one label per sample; got {len(X)} frames, {len(y)} labels")
    x_int = arith.quantize_input(X, net.input_q)                                      # (N, C, H, W)
    out: dict = {"samples": int(len(X))}
    if float_model is not None:
        float_model.eval()
        with torch.no_grad():
            frame_pred = np.concatenate([float_model(torch.from_numpy(X[s:s + 1024])).argmax(1).numpy()
                                         for s in range(0, len(X), 1024)])
        out["frame_accuracy"] = float((frame_pred == y).mean())
    quant_pred = arith.argmax_first(simulate(net, x_int, record=False, limit=False).potentials)
    res = simulate(net, x_int, record=True)
    spike_pred = res.decisions
    out["quantized_accuracy"] = float((quant_pred == y).mean())
    out["spike_accuracy"] = float((spike_pred == y).mean())
    if float_model is not None:
        out["conversion_loss_pp"] = 100.0 * (out["frame_accuracy"] - out["spike_accuracy"])
        out["agreement"] = float((frame_pred == spike_pred).mean())
        out["within_tolerance"] = bool(out["conversion_loss_pp"] <= tolerance_pp)
    out["tolerance_pp"] = float(tolerance_pp)
    out["early_accuracy"] = float((res.early_decisions == y).mean()) if net.coding == "ttfs" else None

    names = [L.name for L in net.layers]
    per_layer = res.spike_counts.mean(0)
    out["spikes_per_sample"] = float(res.input_spikes.mean() + per_layer.sum())
    out["spikes_per_layer"] = {"input": float(res.input_spikes.mean()),
                               **{n: float(c) for n, c in zip(names, per_layer) if not n.startswith("sumpool")}}
    # one value per neuron and window, checked to lie in 0..Q by the simulator: at most one spike
    out["max_spikes_per_neuron"] = int(max([int((res.input_payloads > 0).any())] +
                                           [int((p > 0).any()) for p, L in zip(res.payloads, net.layers)
                                            if L.kind != "sumpool"]))
    fan = Tables(net).fanout
    sops = (res.input_payloads.reshape(len(X), -1) > 0) @ fan[0]
    for i, (p, L) in enumerate(zip(res.payloads, net.layers)):
        if L.kind != "sumpool" and not L.is_output:
            sops = sops + (p.reshape(len(X), -1) > 0) @ fan[i + 1]
    out["sops_per_sample"] = float(sops.mean())
    out["macs_per_sample"] = int(macs(net))
    out["sops_per_mac"] = out["sops_per_sample"] / out["macs_per_sample"]
    out["accumulator_bits"] = {L.name: int(L.acc_bits) for L in net.layers if L.weight is not None}
    out["max_abs_potential"] = {n: int(res.max_abs_v[:, i].max()) for i, n in enumerate(names)
                                if net.layers[i].weight is not None}
    out["overflows"] = {n: int(res.overflows[:, i].sum()) for i, n in enumerate(names)
                        if net.layers[i].weight is not None}
    out["declared_accumulator_bits"] = int(net.acc_limit_bits)
    mem = weight_memory_bits(net)
    out["weight_memory_bits"] = mem["weights"]
    out["bias_memory_bits"] = mem["biases"]
    out["multiplier_memory_bits"] = mem["multipliers"]
    out["latency"] = latency(net, res)
    out["energy"] = energy(net, out["sops_per_sample"], out["macs_per_sample"])
    out["energy_is_estimate"] = True
    from sklearn.metrics import confusion_matrix
    out["confusion"] = confusion_matrix(y, spike_pred, labels=list(range(net.n_classes))).tolist()
    out["coding"], out["weight_bits"], out["payload_bits"] = net.coding, net.weight_bits, net.payload_bits
    out["per_channel"] = bool(net.per_channel)
    if not quiet:
        console.echo(format_table(out))
    return out


def energy(net: IntNetwork, sops: float, n_macs: int) -> dict:
    """Arithmetic energy estimate per sample in pJ (see the module docstring)."""
    widest = max(L.acc_bits for L in net.layers if L.weight is not None)
    if net.acc_limit_bits:
        widest = min(widest, net.acc_limit_bits)
    add = E_PJ[_add_class(widest)]
    spike = sops * add
    notes = [f"each SOP is one {_add_class(widest)} ({add} pJ) at the widest accumulator ({widest} bits)"]
    if net.coding == "payload" and net.payload_bits > 1:
        spike += sops * E_PJ["int8_mult"]
        notes.append("payload coding with p > 1 multiplies weight by payload: one int8 multiply per SOP")
    if net.coding == "ttfs":
        steps = sum(int(np.prod(L.out_shape)) * (L.q_in // int(L.info.get("pool_divisor", 1)))
                    for L in net.layers if L.weight is not None)
        spike += steps * add
        notes.append("ttfs integrates its current once per step: neurons * input steps extra adds")
    frame = n_macs * (E_PJ["fp32_mult"] + E_PJ["fp32_add"])
    return {"spike_pj_per_sample": float(spike), "frame_pj_per_sample": float(frame),
            "ratio_spike_to_frame": float(spike / frame) if frame else None, "source": ENERGY_SOURCE,
            "notes": notes, "is_estimate": True}


def latency_text(lat: dict) -> str:
    """`6 pipeline stages`; ttfs adds the window, the mean first output spike and the silent samples."""
    parts = [console.plural(lat["pipeline_stages"], "pipeline stage")]
    if "window_steps" in lat:
        parts.append(f"windows of {console.plural(lat['window_steps'], 'step')} to the output")
        mean = lat.get("first_output_spike_steps_mean")
        parts.append("no output spike" if mean is None else f"first output spike after {mean:.1f} steps (mean)")
        silent = lat.get("samples_without_output_spike", 0)
        if silent:
            parts.append(f"{console.plural(silent, 'sample')} without an output spike")
    return ", ".join(parts)


def format_table(m: dict) -> str:
    """The metrics as an aligned two-column text table."""
    def f(v):
        return "-" if v is None else f"{v:.4f}" if isinstance(v, float) else str(v)
    rows = [("coding", f"{m['coding']} (k={m['weight_bits']}, p={m['payload_bits']}"
                       f"{', per-channel' if m['per_channel'] else ''})")]
    for k in ("frame_accuracy", "quantized_accuracy", "spike_accuracy", "conversion_loss_pp", "agreement",
              "early_accuracy", "spikes_per_sample", "max_spikes_per_neuron", "sops_per_sample", "macs_per_sample",
              "sops_per_mac", "weight_memory_bits"):
        if k in m:
            rows.append((k, f(m[k])))
    rows.append(("accumulator_bits", ", ".join(f"{k}:{v}" for k, v in m["accumulator_bits"].items())))
    rows.append(("max_abs_potential", ", ".join(f"{k}:{v}" for k, v in m["max_abs_potential"].items())))
    if any(m["overflows"].values()):
        rows.append(("overflows", ", ".join(f"{k}:{v}" for k, v in m["overflows"].items() if v)))
    rows.append(("latency", latency_text(m["latency"])))
    e = m["energy"]
    rows.append(("energy (estimate)", f"{e['spike_pj_per_sample'] / 1e3:.2f} nJ spike vs "
                                      f"{e['frame_pj_per_sample'] / 1e3:.2f} nJ frame per sample (Horowitz 2014)"))
    w = max(len(r[0]) for r in rows)
    return "\n".join(f"{k:<{w}}  {v}" for k, v in rows)
