"""Per-layer facts a hardware implementer needs beyond the tables: bus widths, intermediate widths,
ttfs window timing, FIFO depth seen on the vectors, golden file names, and what emits events.

Every field is documented in FIELDS (merged into the manifest's LAYER_FIELDS) and computed here from
the network and the golden vectors only.
"""

from __future__ import annotations

import numpy as np

from snnconvert.export.directed import tie_values

FIELDS = {
    "emits_events": "true when the layer sends events to the next layer or the readout. The output layer emits "
                    "none in payload coding (its potentials are read out) and emits its spikes in ttfs (the "
                    "first one is the early decision). A sumpool emits none of its own: it re-addresses events",
    "address_bits": "width of this layer's output address bus: bits of neurons - 1 (a sumpool: of its pool units, "
                    "the addresses its routed events carry)",
    "time_bits": "ttfs only: width of the step t of an emitted spike (t < Q); null otherwise",
    "requantize_bits": "signed width that V * M0 + 2^(n-1) needs for every potential the accumulator can hold "
                       "(accumulator_bits, or the declared accumulator_limit.bits when narrower)",
    "window_start": "ttfs only: steps from the start of the window of the events this layer receives to the start "
                    "of its own output window (conv, dense: the Q of those events, i.e. their integration window; "
                    "pools pass spikes within the same window: 0); null in payload coding",
    "window_start_absolute": "ttfs only: start of this layer's output window in steps from the start of the input "
                             "window (step 0 of the input spikes): the sum of window_start up to here",
    "peak_events": "most events this layer emitted in one window over all golden vectors: the FIFO depth those "
                   "vectors need; null without vectors and for a sumpool",
    "ties_possible": "true when some channel has an exact rounding half V * M0 / 2^n = k + 1/2 with payload k + 1 "
                     "<= Q and |V| inside the accumulator width, so the tie rule matters here (see directed "
                     "vectors of kind tie); false: no potential can be an exact half that changes a payload",
    "golden": "where this layer's golden values are: events (vectors.npz key and CSV file, null for a sumpool) "
              "and potentials (conv, dense; null otherwise); NNNN = sample, 4 digits",
}


def signed_width(lo: int, hi: int) -> int:
    """Least b with -2^(b-1) <= lo and hi <= 2^(b-1) - 1."""
    return max(int(hi), -1 - int(lo), 0).bit_length() + 1


def _requantize_bits(L, acc: int) -> int:
    vmax, vmin = (1 << (acc - 1)) - 1, -(1 << (acc - 1))
    top = bot = 0
    for m0, n in zip(np.asarray(L.m0).tolist(), np.asarray(L.shift).tolist()):
        half = 1 << (int(n) - 1)
        top, bot = max(top, vmax * int(m0) + half), min(bot, vmin * int(m0) + half)
    return signed_width(bot, top)


def layer_facts(net, ids: list[str], peak: dict | None, csv: bool) -> list[dict]:
    """The FIELDS of each layer, in layer order."""
    ttfs = net.coding == "ttfs"
    out, window, absolute = [], int(net.input_q), 0
    for i, L in enumerate(net.layers):
        lid = ids[i]
        units = int(np.prod(L.out_shape))
        d = {"emits_events": L.kind in ("conv", "dense", "maxpool") and (ttfs or not L.is_output),
             "address_bits": max(1, (units - 1).bit_length()),
             "time_bits": max(1, (int(L.q_out) - 1).bit_length()) if ttfs and L.has_neurons else None,
             "window_start": None, "window_start_absolute": None,
             "peak_events": None if peak is None or L.kind == "sumpool" else int(peak.get(lid, 0)),
             "golden": {"events_npz": None if L.kind == "sumpool" else f"{lid}.events",
                        "events_csv": None if L.kind == "sumpool" or not csv else f"vectors/sample_NNNN/{lid}.csv",
                        "potentials_npz": f"{lid}.potentials" if L.weight is not None else None,
                        "potentials_csv": (f"vectors/sample_NNNN/{lid}.potentials.csv" if L.weight is not None and csv
                                           else None)}}
        if ttfs:
            start = window if L.kind in ("conv", "dense") else 0
            absolute += start
            d.update(window_start=start, window_start_absolute=absolute)
        if L.weight is not None:
            acc = int(L.acc_bits)
            if net.acc_limit_bits:
                acc = min(acc, int(net.acc_limit_bits))
            d["requantize_bits"] = _requantize_bits(L, acc)
            d["ties_possible"] = any(tie_values(m, n, int(L.q_out), acc)
                                     for m, n in zip(np.asarray(L.m0).tolist(), np.asarray(L.shift).tolist()))
        if L.kind in ("conv", "dense"):
            window = int(L.q_out)
        out.append(d)
    return out


def peak_events(arrays: dict, streams: list[str], n: int) -> dict:
    """{stream id: most events in one sample} over the golden vectors (`<id>.events` tables)."""
    out = {}
    for sid in streams:
        ev = np.asarray(arrays[f"{sid}.events"])
        out[sid] = int(np.bincount(ev[:, 0], minlength=n).max(initial=0)) if len(ev) else 0
    return out
