"""Cost model of the event-driven datapath: memory, block RAMs, cycles, latency and energy (an ESTIMATE).

A stated model, not a synthesis result. Every figure it gives is an estimate and is labelled so.

    stages       one per conv/dense layer. A pool has no stage of its own: a max pool is applied
                 by the scan of the layer before it (it emits the pooled events); a sum pool
                 re-addresses events on their way to the next stage.
    lanes L      accumulate lanes of a stage (default one per output channel); each input event
                 reads its fan-out weights and updates each target potential (read, add, write):
                     event cycles = sum over the stage's input events e of ceil(fan_out(e) / L)
    scan S       at window close the stage reads its neurons S at a time, requantizes each and emits
                 an event for every non-zero value:  scan cycles = ceil(neurons / S)
    ttfs         + 2^p cycles per stage (one per time step of its window)
    latency      cycles per sample = sum over stages; latency = cycles / f_clock
    throughput   pipelined = false: f / mean cycles;  pipelined = true (stages overlap on
                 successive samples): f / mean over samples of the slowest stage's cycles
    memories of a stage (width x depth):
      input FIFO   (address + payload bits of its input events) x peak events in one window
      weights      (L * k) x ceil(O * fan_in / L)          L weights read per cycle
      potentials   (L * acc) x ceil(neurons / L)           L potentials updated per cycle
      constants    bias (acc bits) + M0 + shift (multiplier bits + 6) per output channel: registers
                   beside their lane, counted in bits, never in blocks
    block RAMs   a memory of at most `register_bits` bits is built from registers or LUT RAM (no
                 block); otherwise min over the block configurations (w, d) of
                 ceil(width / w) * ceil(depth / d). The weights and potentials of L lanes take the
                 cheaper of one memory L words wide and L banks one word wide (each bank judged alone,
                 so a lane's few potentials may be registers)
    energy per sample, Horowitz 2014 (ISSCC, 45 nm): adds at the stage's accumulator width; SRAM
                 per bit = the 64-bit read figure / 64 of the smallest listed size holding the
                 memory (8 KB: 10 pJ, 32 KB: 20 pJ, 1 MB and larger: 100 pJ); a write costs a read.
      spike      per SOP: add + weight read (k bits) + potential read and write (2 * acc bits)
                 [+ a k x p multiply in payload coding with p > 1]; per neuron at window close one
                 scan read (acc bits); per input event one FIFO write and one read
                 [+ ttfs: neurons * input steps adds, the per-step integration]
      dense int  per MAC: multiply k x input bits (none for 1-bit inputs) + add at acc + weight read
                 (k bits) + input read (input bits); per neuron one output write (payload bits)
      float      per MAC: fp32 multiply + add + 32-bit weight read + 32-bit input read; per neuron
                 one 32-bit write
    spike vs dense int shows the gain of sparsity; dense int vs float the gain of fewer bits.

Edge cases: a stage with no input events costs only its scan; a memory of zero bits takes no block.
"""

from __future__ import annotations

import math

import numpy as np

# Block RAM configurations (depth, width) of one 18 Kbit block, simple dual port.
# From memory (vendor user guides of 7-series FPGAs); the 9-, 18- and 36-bit widths include parity bits.
BLOCK_18K = ((16384, 1), (8192, 2), (4096, 4), (2048, 9), (1024, 18), (512, 36))
# SRAM read energy of 64 bits by memory size (Horowitz 2014, ISSCC; memory figures from memory).
SRAM_64BIT_PJ = ((8 * 1024, 10.0), (32 * 1024, 20.0), (1024 * 1024, 100.0))
ESTIMATE_NOTE = ("estimate from a stated datapath model (not a synthesis result): see the README, "
                 "'Hardware cost model'")
SHIFT_FIELD_BITS = 6      # a 6-bit shift field covers n <= 63


def address_bits(units: int) -> int:
    """Width of an address bus over `units` neurons: bits of (units - 1), at least 1."""
    return max(1, (int(units) - 1).bit_length())


def block_configs(block_kbits: int = 18) -> tuple[tuple[int, int], ...]:
    """(depth, width) configurations of one block of `block_kbits` Kbit: the 18 Kbit table with
    depths scaled by block_kbits / 18 (at least 1 word)."""
    return tuple((max(1, depth * int(block_kbits) // 18), width) for depth, width in BLOCK_18K)


def blocks(width: int, depth: int, configs=BLOCK_18K, register_bits: int = 0) -> int:
    """min over configurations (d, w) of ceil(width / w) * ceil(depth / d); 0 for an empty memory
    or one of at most `register_bits` bits (registers or LUT RAM)."""
    width, depth = int(width), int(depth)
    if width <= 0 or depth <= 0 or width * depth <= register_bits:
        return 0
    return min(math.ceil(width / w) * math.ceil(depth / d) for d, w in configs)


def lane_blocks(word_bits: int, depth: int, lanes: int, configs=BLOCK_18K, register_bits: int = 0) -> int:
    """Blocks of a memory of `lanes` words of `word_bits` read together, `depth` deep: the cheaper of
    one memory (lanes * word_bits) x depth and `lanes` banks word_bits x depth."""
    return min(blocks(lanes * word_bits, depth, configs, register_bits),
               lanes * blocks(word_bits, depth, configs, register_bits))


def sram_pj_per_bit(bits: int) -> float:
    """Energy of reading one bit from an SRAM of `bits` bits: 64-bit read figure / 64 of the smallest
    listed size that holds it (the largest, 1 MB, for anything bigger: a lower bound)."""
    size = math.ceil(int(bits) / 8)
    for limit, pj in SRAM_64BIT_PJ:
        if size <= limit:
            return pj / 64.0
    return SRAM_64BIT_PJ[-1][1] / 64.0


def stage_indices(net) -> list[int]:
    """Indices of the layers that form stages (conv and dense)."""
    return [i for i, L in enumerate(net.layers) if L.kind in ("conv", "dense")]


def _emitter(net, i: int) -> int:
    """Emitter index (0 = input, j + 1 = layer j) of the events entering layer i: the layer before
    it, skipping sum pools (they only re-address events)."""
    j = i - 1
    while j >= 0 and net.layers[j].kind == "sumpool":
        j -= 1
    return j + 1


def _per_layer(value, n: int, name: str) -> list[int]:
    if isinstance(value, (list, tuple)):
        if len(value) != n:
            raise ValueError(f"{name} lists {len(value)} values for {n} conv/dense layers")
        return [int(v) for v in value]
    return [int(value)] * n


def estimate(net, events: list[np.ndarray], fanout: list[np.ndarray], hw: dict | None = None) -> dict:
    """The datapath estimate of `net` (module docstring) from measured events.

    events[e]: (N, units) bool, which addresses of emitter e (0 = input, j + 1 = layer j) sent an
    event in each of N samples; fanout[e]: (units,) SOPs one event of that address causes (the
    simulator's fan-out tables). hw: the [hardware] section (defaults from settings.hardware).
    Large test sets: `EventTally` takes the events chunk by chunk (same result).
    """
    tally = EventTally(net, fanout, hw)
    tally.add(events)
    return tally.estimate()


class EventTally:
    """The per-sample figures the estimate needs, gathered chunk by chunk of samples: per stage, the
    input events, SOPs and event cycles of each sample (three int64 per sample and stage), so the
    memory does not grow with the events of a whole test set."""

    def __init__(self, net, fanout: list[np.ndarray], hw: dict | None = None):
        from snnconvert.settings.hardware import HardwareSettings
        self.net, self.fanout = net, [np.asarray(f, dtype=np.int64) for f in fanout]
        self.s = hw if isinstance(hw, HardwareSettings) else HardwareSettings.from_section(hw)
        self.idx = stage_indices(net)
        self.lanes = _per_layer(self.s.lanes, len(self.idx), "lanes")
        self.scan = _per_layer(self.s.scan_lanes, len(self.idx), "scan_lanes")
        self.parts: list[list[np.ndarray]] = [[] for _ in self.idx]     # per stage: (3, n) chunks

    def add(self, events: list[np.ndarray]) -> None:
        """events[e]: (n, units) bool of this chunk's n samples, as in `estimate`."""
        n = len(events[0])
        for si, i in enumerate(self.idx):
            lane = self.lanes[si] or int(self.net.layers[i].weight.shape[0])
            e = _emitter(self.net, i)
            ev = np.asarray(events[e]).reshape(n, -1).astype(np.int64)
            fan = self.fanout[e]
            self.parts[si].append(np.stack([ev.sum(1), ev @ fan, ev @ -(-fan // lane)]))   # ceil(fan / L) per event

    def estimate(self) -> dict:
        net, s = self.net, self.s
        configs = block_configs(s.block_kbits)
        per = [np.concatenate(p, axis=1) if p else np.zeros((3, 0), np.int64) for p in self.parts]
        n = per[0].shape[1] if per else 0
        ttfs_steps = net.time_steps if net.coding == "ttfs" else 0
        layers, cyc = [], []
        for si, i in enumerate(self.idx):
            L = net.layers[i]
            O = int(L.weight.shape[0])
            lane = self.lanes[si] or O
            slane = self.scan[si] or lane
            neurons = int(np.prod(L.out_shape))
            e = _emitter(net, i)
            n_ev, sops, ev_cycles = per[si]                               # (N,) each
            scan_cycles = -(-neurons // slane)
            cycles = ev_cycles + scan_cycles + ttfs_steps
            cyc.append(cycles)
            acc = int(L.acc_bits) if not net.acc_limit_bits else min(int(L.acc_bits), int(net.acc_limit_bits))
            q_src = net.input_q if e == 0 else int(net.layers[e - 1].q_out)
            units_in = int(np.prod(L.in_shape))
            fifo_w = address_bits(units_in) + int(q_src).bit_length()
            fifo_d = int(n_ev.max(initial=0))
            words = int(L.weight.size)
            mem = {"fifo": (fifo_w, fifo_d),
                   "weights": (lane * net.weight_bits, -(-words // lane)),
                   "potentials": (lane * acc, -(-neurons // lane))}
            bits = {k: w * d for k, (w, d) in mem.items()}
            bits["weights"] = words * net.weight_bits                     # unused lanes of the last row: not bits
            bits["potentials"] = neurons * acc
            bits["bias"] = O * acc
            bits["multipliers"] = O * (net.multiplier_bits + SHIFT_FIELD_BITS)
            blk = {"fifo": blocks(fifo_w, fifo_d, configs, s.register_bits),
                   "weights": lane_blocks(net.weight_bits, mem["weights"][1], lane, configs, s.register_bits),
                   "potentials": lane_blocks(acc, mem["potentials"][1], lane, configs, s.register_bits)}
            layers.append({
                "name": L.name, "kind": L.kind, "lanes": lane, "scan_lanes": slane, "neurons": neurons,
                "fan_in": int(L.fan_in), "accumulator_bits": acc,
                "input_events_mean": float(n_ev.mean()), "input_events_peak": fifo_d,
                "sops_mean": float(sops.mean()),
                "event_cycles_mean": float(ev_cycles.mean()), "scan_cycles": int(scan_cycles),
                "ttfs_cycles": int(ttfs_steps),
                "cycles_mean": float(cycles.mean()), "cycles_worst": int(cycles.max(initial=0)),
                "bus": {"address_bits": address_bits(units_in), "payload_bits": int(q_src).bit_length()},
                "memory_shape": {k: {"width": w, "depth": d} for k, (w, d) in mem.items()},
                "memory_bits": {**bits, "total": int(sum(bits.values()))},
                "block_rams": {**blk, "total": int(sum(blk.values()))},
                "_sops": sops, "_events": n_ev})
        total_cycles = np.sum(cyc, axis=0) if cyc else np.zeros(n, dtype=np.int64)
        slowest = np.max(cyc, axis=0) if cyc else np.zeros(n, dtype=np.int64)
        f = s.clock_mhz * 1e6
        per_sample = slowest if s.pipelined else total_cycles
        mean_cycles = float(total_cycles.mean())
        total = {
            "cycles_mean": mean_cycles, "cycles_worst": int(total_cycles.max(initial=0)),
            "latency_us_mean": mean_cycles / s.clock_mhz, "latency_us_worst": float(total_cycles.max(initial=0)) / s.clock_mhz,
            "samples_per_s": float(f / per_sample.mean()) if per_sample.mean() > 0 else None,
            "bottleneck": layers[int(np.argmax([x["cycles_mean"] for x in layers]))]["name"] if layers else None,
            "memory_bits": {k: int(sum(x["memory_bits"][k] for x in layers))
                            for k in ("fifo", "weights", "bias", "multipliers", "potentials", "total")},
            "block_rams": int(sum(x["block_rams"]["total"] for x in layers)),
            "sops_mean": float(sum(x["sops_mean"] for x in layers)),
        }
        energy = _energy(net, layers)
        for x in layers:
            del x["_sops"], x["_events"]
        return {"is_estimate": True, "note": ESTIMATE_NOTE, "hardware": s.as_dict(), "samples": int(n),
                "block_configs": [list(c) for c in configs], "layers": layers, "total": total, "energy": energy,
                "assumptions": ASSUMPTIONS}


ASSUMPTIONS = [
    "one stage per conv/dense layer; a max pool is applied by the scan of the layer before it, a sum pool "
    "re-addresses events (neither has memory or cycles of its own)",
    "each input event costs ceil(fan_out / lanes) cycles (weight read, potential read, add, write)",
    "at window close a stage scans its neurons with scan_lanes per cycle; ttfs adds 2^p cycles per stage",
    "the input events arrive in the first stage's FIFO (no cycles charged for the sensor side)",
    "biases, M0 and shifts are registers beside their lane (bits counted, no block RAM)",
    "memories of at most register_bits bits are registers or LUT RAM (no block RAM)",
    "FIFO depth = the most events one window sent into the stage over the measured samples",
    "SRAM energy per bit = Horowitz 2014 64-bit read / 64 by memory size; a write costs a read",
]


def _energy(net, layers: list[dict]) -> dict:
    """Per-sample energy estimates (pJ) of the spike, dense integer and float datapaths (module docstring)."""
    from snnconvert.sim.metrics import E_PJ, _add_class, _mult_class
    spike_arith = spike_mem = dense_arith = dense_mem = float_arith = float_mem = 0.0
    per_layer = []
    k = net.weight_bits
    for x, i in zip(layers, stage_indices(net)):
        L = net.layers[i]
        acc = x["accumulator_bits"]
        add = E_PJ[_add_class(acc)]
        sops = float(x["_sops"].mean())
        events = float(x["_events"].mean())
        in_bits = int(L.q_in).bit_length()
        b = x["memory_bits"]
        a = sops * add
        if net.coding == "payload":
            m = _mult_class(k, in_bits)
            a += sops * (E_PJ[m] if m else 0.0)
        if net.coding == "ttfs":
            a += x["neurons"] * (L.q_in // int(L.info.get("pool_divisor", 1))) * add
        mem = (sops * (k * sram_pj_per_bit(b["weights"]) + 2 * acc * sram_pj_per_bit(b["potentials"]))
               + x["neurons"] * acc * sram_pj_per_bit(b["potentials"])
               + events * 2 * x["memory_shape"]["fifo"]["width"] * sram_pj_per_bit(b["fifo"]))
        n_macs = x["neurons"] * x["fan_in"]
        m = _mult_class(k, in_bits)
        da = n_macs * ((E_PJ[m] if m else 0.0) + add)
        in_units = int(np.prod(L.in_shape))
        out_bits = max(1, int(L.q_out).bit_length())
        dm = (n_macs * (k * sram_pj_per_bit(b["weights"]) + in_bits * sram_pj_per_bit(in_units * in_bits))
              + x["neurons"] * out_bits * sram_pj_per_bit(x["neurons"] * out_bits))
        fa = n_macs * (E_PJ["fp32_mult"] + E_PJ["fp32_add"])
        fm = (n_macs * 32 * (sram_pj_per_bit(L.weight.size * 32) + sram_pj_per_bit(in_units * 32))
              + x["neurons"] * 32 * sram_pj_per_bit(x["neurons"] * 32))
        per_layer.append({"name": x["name"], "spike_pj": a + mem, "dense_int_pj": da + dm, "float_pj": fa + fm})
        spike_arith += a
        spike_mem += mem
        dense_arith += da
        dense_mem += dm
        float_arith += fa
        float_mem += fm

    def part(ar, me):
        return {"arithmetic_pj": float(ar), "memory_pj": float(me), "total_pj": float(ar + me)}
    out = {"spike": part(spike_arith, spike_mem), "dense_int": part(dense_arith, dense_mem),
           "float": part(float_arith, float_mem), "per_layer": per_layer, "is_estimate": True,
           "source": "Horowitz 2014, 'Computing's energy problem', ISSCC, 45 nm (adds; SRAM per bit from the "
                     "64-bit read figures, from memory)"}
    sp, de, fl = out["spike"]["total_pj"], out["dense_int"]["total_pj"], out["float"]["total_pj"]
    out["sparsity_gain"] = de / sp if sp else None           # dense int / spike: events instead of every MAC
    out["bit_width_gain"] = fl / de if de else None          # float / dense int: fewer bits
    return out


def summary(est: dict) -> dict:
    """The scalar figures a sweep row and the run summary carry (all estimates)."""
    t = est["total"]
    return {"block_rams": t["block_rams"], "memory_bits": t["memory_bits"]["total"],
            "cycles_mean": t["cycles_mean"], "cycles_worst": t["cycles_worst"],
            "latency_us": t["latency_us_worst"], "latency_us_mean": t["latency_us_mean"],
            "samples_per_s": t["samples_per_s"], "energy_nj": est["energy"]["spike"]["total_pj"] / 1e3}


def format_table(est: dict) -> str:
    """Per-layer and total figures as an aligned text table, headed as an estimate."""
    head = (f"{'layer':<10} {'lanes':>5} {'events':>8} {'cycles':>9} {'worst':>7} {'mem kbit':>9} "
            f"{'blocks':>6} {'addr+payload':>12}")
    lines = [f"hardware estimate ({est['hardware']['clock_mhz']:g} MHz, "
             f"{'pipelined' if est['hardware']['pipelined'] else 'one sample at a time'}, "
             f"{est['hardware']['block_kbits']} Kbit blocks; a stated model, not a synthesis result)", head]
    for x in est["layers"]:
        lines.append(f"{x['name']:<10} {x['lanes']:>5} {x['input_events_mean']:>8.1f} {x['cycles_mean']:>9.1f} "
                     f"{x['cycles_worst']:>7} {x['memory_bits']['total'] / 1000:>9.2f} {x['block_rams']['total']:>6} "
                     f"{x['bus']['address_bits']:>7}+{x['bus']['payload_bits']:<4}")
    t, e = est["total"], est["energy"]
    lines.append(f"{'total':<10} {'':>5} {'':>8} {t['cycles_mean']:>9.1f} {t['cycles_worst']:>7} "
                 f"{t['memory_bits']['total'] / 1000:>9.2f} {t['block_rams']:>6}")
    sps = "-" if t["samples_per_s"] is None else f"{t['samples_per_s']:,.0f}"
    lines.append(f"latency {t['latency_us_mean']:.2f} us mean, {t['latency_us_worst']:.2f} us worst; "
                 f"{sps} samples/s; energy {e['spike']['total_pj'] / 1e3:.2f} nJ spike, "
                 f"{e['dense_int']['total_pj'] / 1e3:.2f} nJ dense integer, {e['float']['total_pj'] / 1e3:.2f} nJ float "
                 f"per sample (estimates)")
    return "\n".join(lines)


# ---------------------------------------------------------------- budgets

# budget key -> (figure it limits, how the figure is read from the metrics, unit, direction)
BUDGET_FIGURES = {
    "weight_memory_bits": ("weight memory bits", lambda m, hw: m.get("weight_memory_bits"), "bits", "max"),
    "block_rams": ("block RAMs (estimate)", lambda m, hw: hw.get("block_rams"), "", "max"),
    "latency_us": ("worst latency (estimate)", lambda m, hw: hw.get("latency_us"), "us", "max"),
    "energy_nj": ("energy per sample (estimate)", lambda m, hw: hw.get("energy_nj"), "nJ", "max"),
    "sops_per_sample": ("SOPs per sample", lambda m, hw: m.get("sops_per_sample"), "", "max"),
    "min_accuracy": ("spike accuracy", lambda m, hw: m.get("spike_accuracy"), "", "min"),
    "max_loss_pp": ("loss against the frame model", lambda m, hw: m.get("conversion_loss_pp"), "pp", "max"),
}


def active_limits(budget: dict) -> dict:
    """The limits a [budget] section sets: 0 means no limit (100 pp for max_loss_pp, 0 for min_accuracy)."""
    out = {}
    for k in BUDGET_FIGURES:
        if k not in budget:
            continue
        v = budget[k]
        if (k == "max_loss_pp" and v >= 100.0) or (k != "max_loss_pp" and not v):
            continue
        out[k] = v
    return out


def _fmt(v, unit: str) -> str:
    if isinstance(v, float) and not v.is_integer():
        s = f"{v:,.4g}" if abs(v) < 1000 else f"{v:,.0f}"
    else:
        s = f"{int(v):,}"
    return f"{s} {unit}".strip()


def check_budget(metrics: dict, budget: dict | None) -> dict:
    """Whether a conversion fits the [budget] limits: every broken limit with its figure.

    A figure over a maximum (or under a minimum) breaks it; `over_by` is figure - limit (limit -
    figure for a minimum). With no limits set, fits is True and nothing is checked.
    """
    budget = budget.as_dict() if hasattr(budget, "as_dict") else dict(budget or {})
    hw = metrics.get("hardware_summary") or {}
    checked, broken = [], []
    for k, limit in active_limits(budget).items():
        what, get, unit, direction = BUDGET_FIGURES[k]
        v = get(metrics, hw)
        if v is None:
            continue
        ok = v <= limit + 1e-9 if direction == "max" else v >= limit - 1e-9
        item = {"limit": k, "what": what, "value": v, "budget": limit, "unit": unit, "direction": direction,
                "fits": bool(ok), "over_by": float(v - limit if direction == "max" else limit - v)}
        checked.append(item)
        if not ok:
            broken.append(item)
    return {"fits": not broken, "checked": checked, "broken": broken, "message": budget_message(checked, broken)}


def _broken_text(b: dict) -> str:
    op = ">" if b["direction"] == "max" else "<"
    return f"{b['limit']} {_fmt(b['value'], b['unit'])} {op} {_fmt(b['budget'], b['unit'])}"


def budget_message(checked: list[dict], broken: list[dict]) -> str:
    """'fits the budget (3 limits)', 'no budget set' or 'does not fit: block_rams 8 > 5; ...'."""
    if not checked:
        return "no budget set"
    if not broken:
        return f"fits the budget ({len(checked)} limit{'s' if len(checked) != 1 else ''})"
    return "does not fit: " + "; ".join(_broken_text(b) for b in broken)


def binding_limit(rows_checks: list[dict]) -> dict | None:
    """Where no point fits: the limit that binds, with the best figure any point reached on it.

    rows_checks: one check_budget result per point. For each limit, the best value over the points
    (least for a maximum, most for a minimum); the binding limit is the one whose best value misses
    its budget by the largest relative margin.
    """
    best: dict[str, dict] = {}
    for c in rows_checks:
        for item in c["checked"]:
            cur = best.get(item["limit"])
            if cur is None or item["over_by"] < cur["over_by"]:
                best[item["limit"]] = item
    missed = [b for b in best.values() if not b["fits"]]
    if not missed:
        return None

    def margin(b):
        return b["over_by"] / abs(b["budget"]) if b["budget"] else float("inf")
    b = max(missed, key=margin)
    return {**b, "message": f"{b['limit']} binds: the best point reaches {_fmt(b['value'], b['unit'])} against a "
                            f"budget of {_fmt(b['budget'], b['unit'])} (off by {_fmt(b['over_by'], b['unit'])})",
            "missed": [{k: m[k] for k in ("limit", "value", "budget", "over_by")} for m in missed]}


def layers_figure(est: dict, title: str = ""):
    """Per-layer bars of the estimate: cycles per sample (event, scan, ttfs steps; mean over the test
    split) and memory (FIFO, weights, potentials, constants in kbit, block RAMs written above)."""
    from snnconvert import plots
    plt = plots.pyplot()
    names = [x["name"] for x in est["layers"]]
    pos = np.arange(len(names))
    fig, (a, b) = plt.subplots(1, 2, figsize=(11, 4))
    bottom = np.zeros(len(names))
    for key, label in (("event_cycles_mean", "input events: ceil(fan-out / lanes) each"),
                       ("scan_cycles", "scan at window close: ceil(neurons / scan lanes)"),
                       ("ttfs_cycles", "ttfs window steps")):
        v = np.array([float(x[key]) for x in est["layers"]])
        if v.any():
            a.bar(pos, v, bottom=bottom, label=label)
            bottom += v
    for p_, x in zip(pos, est["layers"]):
        a.text(p_, bottom[p_], f"{x['cycles_mean']:,.0f}\n(worst {x['cycles_worst']:,})", ha="center",
               va="bottom", fontsize=7)
    a.set_ylim(0, max(bottom.max(initial=0), 1) * 1.25)
    a.set_xticks(pos, names)
    a.set_ylabel("cycles per sample (mean)")
    t = est["total"]
    a.set_title(f"cycles: {t['cycles_mean']:,.0f} mean = {t['latency_us_mean']:.2f} µs at "
                f"{est['hardware']['clock_mhz']:g} MHz", fontsize=9)
    a.legend(fontsize=7, loc="upper right")
    bottom = np.zeros(len(names))
    for key, label in (("fifo", "input FIFO"), ("weights", "weights"), ("potentials", "potentials"),
                       ("bias", "bias"), ("multipliers", "M0 + shift")):
        v = np.array([x["memory_bits"][key] / 1000 for x in est["layers"]])
        b.bar(pos, v, bottom=bottom, label=label)
        bottom += v
    for p_, x in zip(pos, est["layers"]):
        b.text(p_, bottom[p_], f"{x['block_rams']['total']} blocks", ha="center", va="bottom", fontsize=7)
    b.set_ylim(0, max(bottom.max(initial=0), 1e-3) * 1.2)
    b.set_xticks(pos, names)
    b.set_ylabel("memory (kbit)")
    b.set_title(f"memory: {t['memory_bits']['total'] / 1000:,.1f} kbit, {t['block_rams']} block RAMs of "
                f"{est['hardware']['block_kbits']} Kbit", fontsize=9)
    b.legend(fontsize=7, loc="upper right")
    fig.suptitle(title or "Hardware cost per layer: an estimate from a stated datapath model, not a synthesis result",
                 fontsize=10)
    fig.tight_layout()
    return fig
