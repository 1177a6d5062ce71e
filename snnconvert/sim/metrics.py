"""What a conversion cost: accuracy, spikes, operations, widths, memory, latency, estimated energy.

    conversion_loss_pp = 100 * (frame_accuracy - spike_accuracy)   (against the frame model converted)
    *_accuracy_ci      = 95 % Wilson score interval of the accuracy on the test samples (snnconvert.stats)
    conversion_loss_p  = McNemar's exact p-value of the paired decisions of the frame model and the spike
                         network on the same samples (discordant: frame_only_correct, spike_only_correct)
    loss_vs_float_pp   = 100 * (float_accuracy - spike_accuracy)   (against the float model before
                         conversion-aware fine-tuning; equal to conversion_loss_pp for a float model)
    sops_per_sample    = mean over samples of sum over emitted events of the event's fan-out
                         (weighted synapses only; input events included, max-pool comparisons not)
    macs_per_sample    = sum over conv/dense layers of O * H' * W' * I * kh * kw (dense frame model)
    energy (estimate), three figures per sample, per-operation values from Horowitz 2014, ISSCC, 45 nm:
      spike      = SOPs * E_add(acc) [+ SOPs * E_mult(k, p) for payload coding with p > 1]
                   [+ ttfs: neurons * input steps * E_add(acc) for the per-step integration]
      dense int  = sum over conv/dense layers of MACs_l * (E_mult(k, bits(Q_in,l)) + E_add(acc)):
                   the same layers run densely in integers at the same widths, every MAC one
                   multiply of a k-bit weight by the layer's input value (p-bit payloads; the
                   input layer's frame values; sums after a sum pool) and one add at the
                   accumulator width; a 1-bit input makes the multiply a gate (no multiply charged)
      float      = MACs * (E_mult + E_add)(fp32): the frame model
    E_add(acc): int8/int16/int32 add by the widest accumulator (wider than 32 charged as 32);
    E_mult(k, b): int8 multiply when k and b are both <= 8 bits, else int32 multiply (the table has
    no 16-bit multiply, so this is an upper bound). spike vs dense int separates the gain from
    sparsity (events instead of every MAC); dense int vs float the gain from fewer bits. These are
    estimates of arithmetic energy only (no memory, no control), not a chip measurement.

quantized_accuracy comes from the dense integer pass without a declared accumulator width;
spike_accuracy from the simulation with that width (saturate/wrap). They are equal unless the
declared width overflows on some sample.
"""

from __future__ import annotations

import numpy as np
import torch

from snnconvert import arith, console, stats
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


def _mult_class(weight_bits: int, value_bits: int) -> str | None:
    """The multiplier class of a k-bit weight times a b-bit value: None for b = 1 (a gate), int8 when
    both are <= 8 bits, else int32 (the table's next entry: an upper bound for 9-16 bits)."""
    if value_bits <= 1:
        return None
    return "int8_mult" if max(weight_bits, value_bits) <= 8 else "int32_mult"


def tolerance_verdict(loss_pp: float, tolerance_pp: float) -> str:
    """'yes (loss 0.28 pp <= 0.50 pp)' or 'no (loss 3.61 pp > 0.50 pp)': the conversion loss against the tolerance."""
    if loss_pp <= tolerance_pp:
        return f"yes (loss {loss_pp:.2f} pp <= {tolerance_pp:.2f} pp)"
    return f"no (loss {loss_pp:.2f} pp > {tolerance_pp:.2f} pp)"


def frame_model_kind(model) -> tuple[str, dict | None]:
    """("aware", {"weight_bits": k, "payload_bits": p}) for a conversion-aware (fake-quantized) frame
    model, read from its quantizing layers; ("float", None) otherwise."""
    from snnconvert.aware import ClipQuant
    wb = sorted({int(m.weight_bits) for m in model.modules() if hasattr(m, "quantized_weight")})
    levels = sorted({int(m.levels) for m in model.modules() if isinstance(m, ClipQuant)})
    if not wb and not levels:
        return "float", None
    bits = {"weight_bits": wb[-1] if wb else None,
            "payload_bits": int(levels[-1] + 1).bit_length() - 1 if levels else None}
    return "aware", bits


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


def measure(float_model, net: IntNetwork, X_test, y_test, tolerance_pp: float = 0.5, quiet: bool = False,
            float_accuracy: float | None = None, hardware=None, budget=None) -> dict:
    """All metrics of one conversion on a labelled test set (X float frames (N, C, H, W), y (N,)).

    `float_model` is the frame model that was converted; it may be None (frame metrics are then
    left out). frame_accuracy is its accuracy, whether it is a float or a conversion-aware model
    (`frame_model` says which; `aware_bits` gives the widths it was fine-tuned for). For an aware
    model, `float_accuracy` is the accuracy of the float model before fine-tuning (None if the
    caller does not know it); for a float model it is frame_accuracy. Prints the table unless quiet.
    `hardware` ([hardware] section or settings, default its defaults) drives the datapath cost
    estimate (`hardware_estimate`, `snnconvert.cost`); `budget` ([budget]) is checked against it.
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
    res = _simulate_in_chunks(net, x_int, hardware)
    quant_pred, spike_pred = res.quant_pred, res.decisions
    out["quantized_accuracy"] = float((quant_pred == y).mean())
    out["spike_accuracy"] = float((spike_pred == y).mean())
    n = len(y)
    for k, pred in (("frame", frame_pred if float_model is not None else None), ("quantized", quant_pred),
                    ("spike", spike_pred)):
        if pred is not None:
            out[f"{k}_accuracy_ci"] = list(stats.wilson_interval(int((pred == y).sum()), n))
    if float_model is not None:
        out["conversion_loss_pp"] = 100.0 * (out["frame_accuracy"] - out["spike_accuracy"])
        b, c = stats.discordant_pairs(frame_pred == y, spike_pred == y)
        out["frame_only_correct"], out["spike_only_correct"] = b, c
        out["conversion_loss_p"] = stats.mcnemar_exact_p(b, c)
        out["agreement"] = float((frame_pred == spike_pred).mean())
        out["within_tolerance"] = bool(out["conversion_loss_pp"] <= tolerance_pp)
        kind, bits = frame_model_kind(float_model)
        out["frame_model"], out["aware_bits"] = kind, bits
        fa = out["frame_accuracy"] if kind == "float" else float_accuracy
        out["float_accuracy"] = None if fa is None else float(fa)
        out["loss_vs_float_pp"] = None if fa is None else 100.0 * (float(fa) - out["spike_accuracy"])
    out["tolerance_pp"] = float(tolerance_pp)
    out["early_accuracy"] = float((res.early_decisions == y).mean()) if net.coding == "ttfs" else None

    names = [L.name for L in net.layers]
    per_layer = res.spike_counts.mean(0)
    out["spikes_per_sample"] = float(res.input_spikes.mean() + per_layer.sum())
    out["spikes_per_layer"] = {"input": float(res.input_spikes.mean()),
                               **{n: float(c) for n, c in zip(names, per_layer) if not n.startswith("sumpool")}}
    # one value per neuron and window, checked to lie in 0..Q by the simulator: at most one spike
    out["max_spikes_per_neuron"] = int(res.any_spike)
    out["sops_per_sample"] = float(res.sops.mean())
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
    from snnconvert import cost
    out["hardware_estimate"] = res.tally.estimate()
    out["hardware_summary"] = cost.summary(out["hardware_estimate"])
    from sklearn.metrics import confusion_matrix
    out["confusion"] = confusion_matrix(y, spike_pred, labels=list(range(net.n_classes))).tolist()
    out["coding"], out["weight_bits"], out["payload_bits"] = net.coding, net.weight_bits, net.payload_bits
    out["per_channel"] = bool(net.per_channel)
    out["budget"] = cost.check_budget(out, budget)
    if not quiet:
        console.echo(format_table(out))
    return out


def _simulate_in_chunks(net: IntNetwork, x_int: np.ndarray, hardware):
    """Simulate the test set a chunk of samples at a time and keep only per-sample figures: decisions,
    spike counts, SOPs, |V| maxima, overflows, ttfs steps, and the cost model's event tally. Memory is
    bounded by one chunk's events however large the test set (a 28x28 network's events of 12,000
    samples would take gigabytes)."""
    from types import SimpleNamespace

    from snnconvert import cost
    from snnconvert.sim.vectorized import batch_size
    fan = Tables(net).fanout
    tally = cost.EventTally(net, fan, hardware)
    keep = ("decisions", "early_decisions", "first_spike_step", "spike_counts", "input_spikes", "max_abs_v",
            "overflows")
    parts: dict[str, list] = {k: [] for k in (*keep, "quant_pred", "sops")}
    any_spike = False
    chunk = batch_size(net)
    for s0 in range(0, len(x_int), chunk):
        xs = x_int[s0:s0 + chunk]                                                       # (m, C, H, W)
        m = len(xs)
        parts["quant_pred"].append(arith.argmax_first(simulate(net, xs, record=False, limit=False).potentials))
        r = simulate(net, xs, record=True)
        for k in keep:
            parts[k].append(getattr(r, k))
        events = [r.input_payloads.reshape(m, -1) > 0] + [p.reshape(m, -1) > 0 for p in r.payloads]  # (m, units)
        any_spike |= bool(events[0].any()) or any(bool(ev.any()) for ev, L in zip(events[1:], net.layers)
                                                  if L.kind != "sumpool")
        sops = events[0] @ fan[0]
        for i, L in enumerate(net.layers):
            if L.kind != "sumpool" and not L.is_output:
                sops = sops + events[i + 1] @ fan[i + 1]
        parts["sops"].append(sops)
        tally.add(events)
    res = SimpleNamespace(**{k: np.concatenate(v) for k, v in parts.items()})
    res.any_spike, res.tally = any_spike, tally
    return res


def energy(net: IntNetwork, sops: float, n_macs: int) -> dict:
    """Arithmetic energy estimates per sample in pJ: spike, dense integer, float (module docstring)."""
    widest = max(L.acc_bits for L in net.layers if L.weight is not None)
    if net.acc_limit_bits:
        widest = min(widest, net.acc_limit_bits)
    add = E_PJ[_add_class(widest)]
    spike = sops * add
    notes = [f"each SOP is one {_add_class(widest)} ({add} pJ) at the widest accumulator ({widest} bits)"]
    mult = _mult_class(net.weight_bits, net.payload_bits)
    if net.coding == "payload" and mult is not None:
        spike += sops * E_PJ[mult]
        notes.append(f"payload coding with p > 1 multiplies weight by payload: one {mult} per SOP")
    if net.coding == "ttfs":
        steps = sum(int(np.prod(L.out_shape)) * (L.q_in // int(L.info.get("pool_divisor", 1)))
                    for L in net.layers if L.weight is not None)
        spike += steps * add
        notes.append("ttfs integrates its current once per step: neurons * input steps extra adds")
    dense = 0.0
    for L in net.layers:
        if L.weight is not None:
            m = _mult_class(net.weight_bits, int(L.q_in).bit_length())
            dense += int(np.prod(L.out_shape)) * L.fan_in * ((E_PJ[m] if m else 0.0) + add)
    notes.append(f"dense integer: every MAC one k-bit x input-width multiply (none for 1-bit inputs) and one "
                 f"{_add_class(widest)}")
    frame = n_macs * (E_PJ["fp32_mult"] + E_PJ["fp32_add"])
    return {"spike_pj_per_sample": float(spike), "dense_int_pj_per_sample": float(dense),
            "frame_pj_per_sample": float(frame),
            "ratio_spike_to_frame": float(spike / frame) if frame else None,
            "ratio_spike_to_dense_int": float(spike / dense) if dense else None, "source": ENERGY_SOURCE,
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
    aware = m.get("frame_model") == "aware"
    if aware:   # the frame model that was converted is the fake-quantized one: name it, then the float one
        b = m.get("aware_bits") or {}
        rows.append((f"frame model (aware, fine-tuned for k={b.get('weight_bits')} p={b.get('payload_bits')})",
                     f(m.get("frame_accuracy")) + stats.annotation(m, "frame_accuracy")))
        rows.append(("float model before fine-tuning", f(m.get("float_accuracy"))))
    for k in ("frame_accuracy", "quantized_accuracy", "spike_accuracy", "conversion_loss_pp"):
        if k in m and not (aware and k == "frame_accuracy"):
            rows.append((k, f(m[k]) + stats.annotation(m, k)))
    if aware:
        rows.append(("loss vs float model (pp)", f(m.get("loss_vs_float_pp"))))
    if "conversion_loss_pp" in m:
        rows.append(("within tolerance", tolerance_verdict(m["conversion_loss_pp"], m["tolerance_pp"])))
    for k in ("agreement", "early_accuracy", "spikes_per_sample", "max_spikes_per_neuron", "sops_per_sample",
              "macs_per_sample", "sops_per_mac", "weight_memory_bits"):
        if k in m:
            rows.append((k, f(m[k])))
    rows.append(("accumulator_bits", ", ".join(f"{k}:{v}" for k, v in m["accumulator_bits"].items())))
    rows.append(("max_abs_potential", ", ".join(f"{k}:{v}" for k, v in m["max_abs_potential"].items())))
    if any(m["overflows"].values()):
        rows.append(("overflows", ", ".join(f"{k}:{v}" for k, v in m["overflows"].items() if v)))
    rows.append(("latency", latency_text(m["latency"])))
    e = m["energy"]
    dense = e.get("dense_int_pj_per_sample")
    rows.append(("energy (estimate)", f"{e['spike_pj_per_sample'] / 1e3:.2f} nJ spike, "
                                      + ("" if dense is None else f"{dense / 1e3:.2f} nJ dense integer (same widths), ")
                                      + f"{e['frame_pj_per_sample'] / 1e3:.2f} nJ float frame model per sample "
                                        f"(Horowitz 2014)"))
    if "budget" in m:
        rows.append(("budget", m["budget"]["message"]))
    w = max(len(r[0]) for r in rows)
    text = "\n".join(f"{k:<{w}}  {v}" for k, v in rows)
    if "hardware_estimate" in m:
        from snnconvert.cost import format_table as hardware_table
        text += "\n\n" + hardware_table(m["hardware_estimate"])
    return text
