"""The export manifest: every fact an implementer needs, and the way back to an IntNetwork.

`build_manifest` describes an IntNetwork and its tables; `network_from_manifest` rebuilds the
IntNetwork from a manifest plus the tables read from the memory files, so `verify` never needs
the checkpoint. MANIFEST_FIELDS, LAYER_FIELDS and TABLE_FIELDS document every field.
"""

from __future__ import annotations

import re

import numpy as np

from snnconvert import arith
from snnconvert.errors import FormatError, fail
from snnconvert.export.hwfacts import FIELDS as HW_FIELDS
from snnconvert.export.hwfacts import layer_facts
from snnconvert.export.memfile import hex_digits, signed_bits, unsigned_bits
from snnconvert.intnet import LAYER_ATTRS, NETWORK_ATTRS, IntLayer, IntNetwork, network_from_fields

FORMAT = "snnconvert-export"
VERSION = 2
READS = (1, 2)   # version 1: no front-end vectors (field `frontend` absent)

MANIFEST_FIELDS = {
    "format": "always \"snnconvert-export\": what this folder is",
    "version": "manifest format version (this build writes 2 and reads 1 and 2; 2 added `frontend`)",
    "created": "UTC time of the export (ISO 8601); the only field that differs between two exports of the same network",
    "coding": "spike coding: payload (one event carries a p-bit value), ttfs (the value is carried by the spike's time step) or binary (p = 1)",
    "coding_words": "the coding in one sentence",
    "payload_bits": "p: bits of a payload; hidden neurons emit values 0..2^p-1 (0 sends nothing)",
    "weight_bits": "k: weights are signed integers in [-(2^(k-1)-1), 2^(k-1)-1], stored as k-bit two's complement words",
    "per_channel": "true when each output channel has its own weight scale (and so its own M0, n)",
    "multiplier_bits": "width of the requantization multiplier M0 (unsigned)",
    "time_steps": "ttfs only: steps T = 2^p of each layer's window (null otherwise)",
    "n_classes": "number of output neurons (classes)",
    "input": "the input layer: shape [C, H, W], largest payload q, payload bits, address formula, address bus bits, "
             "peak events in one window over the vectors, and how its events are coded",
    "addressing": "how a neuron (channel c, row y, column x) of a (C, H, W) map maps to a flat address; dense layers use the index",
    "rounding": "the requantization rule in words and as formulas (payload and ttfs forms), identical in every layer",
    "accumulator_limit": "declared accumulator width (0 = unlimited) and the overflow mode (saturate or wrap) applied to the potential at window close",
    "decision": "how the class is read out of the output layer",
    "event_order": "the order in which golden events are listed (the reference simulator's emission order)",
    "event_columns": "columns of every event table: addr (flat neuron address), t (time step; 0 in payload coding), payload (value carried)",
    "layers": "the layers in execution order; each entry's fields are described in LAYER_FIELDS",
    "tables_npz": "NPZ holding every table (keys '<id>.weight', '<id>.bias', '<id>.m0', '<id>.shift'), same values as the memory files",
    "vectors": "golden vectors: count (test samples then directed vectors), test_samples, directed (one entry per "
               "directed vector: sample, kind, layer, neuron, words), directed_kinds (code in the summary's "
               "directed column; 0 = test sample), peak_events per stream, NPZ file and its keys, columns of the "
               "NPZ event tables, CSV folder; each layer's golden file names are in its golden field",
    "files": "sha256 of every file the export wrote, keyed by path relative to the folder; the C and Verilog "
             "models under c/ and verilog/ are listed when export wrote them (--c, --verilog), not when "
             "`snnconvert cmodel` or `snnconvert verilog` generated them later; trace folders are never listed",
    "hardware_estimate": "the datapath cost model's ESTIMATE (not a synthesis result) measured on the test split at "
                         "conversion: per layer and total memory bits, block RAMs, bus widths, cycles, latency, "
                         "samples/s and energy, with the [hardware] settings and the model's assumptions (null when "
                         "the network folder holds no metrics.json)",
    "frontend": "the front end and its golden vectors (null when the export has none): version, the integer "
                "parameters (params), the rules in words, counts, source, NPZ and CSV names and columns; the fields "
                "are described in the `frontend` tables",
}

LAYER_FIELDS = {
    "index": "position in the layer order (0 = first layer after the input)",
    "id": "file stem of this layer: L<index>_<name>",
    "name": "layer name",
    "type": "conv | dense | maxpool | sumpool",
    "rule": "what the layer computes, in words",
    "input_shape": "shape of the layer's input: [C, H, W] or [F]",
    "output_shape": "shape of the layer's output",
    "neurons": "number of output neurons (addresses 0..neurons-1); 0 for a sumpool, which has no neurons: each "
               "event entering it is re-addressed to the pool unit c*Ho*Wo + y*Wo + x it falls in (several units "
               "when pools overlap) with its payload and step unchanged, and the next layer adds W * payload for "
               "each, which sums the pool",
    "address": "flat output address formula with this layer's sizes",
    "kernel": "[kh, kw] (conv, pools)",
    "stride": "[sy, sx] (conv, pools)",
    "padding": "[py, px] zero padding on each side (conv)",
    "q_in": "largest input value this layer receives (after a sumpool: n * Q)",
    "q_out": "largest payload this layer emits (0: a sumpool emits nothing, it routes sums)",
    "payload_bits": "bits of an emitted payload (enough for q_out)",
    "is_output": "true for the output layer, whose potentials are read out (it emits events only in ttfs; see emits_events)",
    "weight_bits": "width of a weight word (two's complement)",
    "bias": "bias B per output channel, added once to the potential",
    "bias_bits": "two's complement width of the bias words",
    "m0": "requantization multiplier mantissa M0 per output channel (unsigned)",
    "shift": "requantization right shift n per output channel",
    "threshold": "equivalent threshold theta = 2^n / M0 per output channel (information only; null where M0 = 0)",
    "accumulator_bits": "signed width that can never overflow: ceil(log2(F * max|W| * Q_in + |B| + 1)) + 1",
    **HW_FIELDS,
    "time_steps": "ttfs only: steps of this layer's output window",
    "tables": "memory tables of this layer (weight, bias, m0, shift); each entry's fields are in TABLE_FIELDS",
}

TABLE_FIELDS = {
    "file": "Verilog memory file for $readmemh: one word per line, hex_digits digits, two's complement if signed",
    "csv": "the same values as CSV, the indices as columns then value (null when CSV output is off)",
    "intel_hex": "the same words as Intel HEX (one data record per word, record address = word address, type 04 records "
                 "for address bits 31..16, ceil(bits/8) bytes most significant first); null when not written",
    "coe": "the same words as a Xilinx block-RAM coefficient file (radix 16, comma-separated, packed as `packing` "
           "states); null when not written",
    "mif": "the same words as an Intel memory initialisation file (DEPTH, WIDTH, hex address : data lines, packed as "
           "`packing` states); null when not written",
    "packing": "memory words of the .coe/.mif files: word_bits, lanes (table words per memory word; 1 = unpacked), "
               "depth (memory words) and lane_order (lane 0 = least significant bits); null when not written",
    "npz_key": "key of the same array in tables.npz",
    "shape": "array shape; word address k is the row-major (last index fastest) position",
    "layout": "index order written out, e.g. [out_channel][in_channel][ky][kx]",
    "index_names": "CSV index column names, in layout order",
    "bits": "word width in bits (declare the Verilog memory as reg [bits-1:0] mem [0:depth-1])",
    "signed": "true: two's complement, sign-extend bit bits-1; false: unsigned",
    "depth": "number of words",
    "hex_digits": "ceil(bits / 4) hex digits per word",
}

_CODING_WORDS = {
    "payload": "each active neuron (value a > 0) emits one event carrying a; zero sends nothing",
    "binary": "each active neuron emits one event (payload 1); p = 1 so the value is 0 or 1",
    "ttfs": "each active neuron emits one spike at step t = Q - a of its window, so larger values come earlier; "
            "zero sends nothing; the payload column repeats the decoded value a. An input spike at step t "
            "injects a constant current W on steps t..Q_s-1 of the window it was sent in, where Q_s is the Q "
            "of the layer that sent it (after a sumpool: still the sending layer's Q, not the sumpool's q_in "
            "n * Q), so at the window's end V = B + sum W * (Q_s - t) = B + sum W * a; the neuron then fires "
            "at the first step where the falling threshold of rounding.ttfs_formula is crossed",
}


_LIMIT_WORDS = {"saturate": "saturation (a clip to [-2^(b-1), 2^(b-1)-1])", "wrap": "two's complement wrap-around"}


def fields_markdown() -> str:
    """The three field tables as markdown, for the README."""
    parts = []
    from snnconvert.export.frontvec import FRONTEND_FIELDS, PARAM_FIELDS
    for title, fields in (("manifest.json", MANIFEST_FIELDS), ("each entry of `layers`", LAYER_FIELDS),
                          ("each entry of a layer's `tables`", TABLE_FIELDS), ("`frontend`", FRONTEND_FIELDS),
                          ("`frontend.params`", PARAM_FIELDS)):
        parts.append(f"Fields of {title}:\n\n| field | meaning |\n|---|---|")
        parts += [f"| `{k}` | {v.replace('|', '/')} |" for k, v in fields.items()]
        parts.append("")
    return "\n".join(parts)


def layer_id(index: int, name: str) -> str:
    """File stem of a layer: L<index>_<name>, with anything but [A-Za-z0-9_] replaced by '_'."""
    return f"L{index}_{re.sub(r'[^A-Za-z0-9_]', '_', name)}"


def address_formula(shape) -> str:
    if len(shape) == 3:
        c, h, w = shape
        return f"addr = c*{h * w} + y*{w} + x  (c < {c}, y < {h}, x < {w})"
    return f"addr = i  (i < {int(np.prod(shape))})"


def layer_tables(net: IntNetwork) -> list[tuple[int, dict]]:
    """For each layer with weights: (layer index, {table kind: (spec without file names, int64 array)})."""
    out = []
    for i, L in enumerate(net.layers):
        if L.weight is None:
            continue
        w = np.asarray(L.weight, dtype=np.int64)
        if w.ndim == 4:
            names = ["out_channel", "in_channel", "ky", "kx"]
        elif w.ndim == 2:
            names = ["out_channel", "in_index"]
        else:
            raise ValueError(f"layer {L.name!r}: weight of shape {w.shape} is neither conv (O, I, kh, kw) nor dense (O, I)")
        o = w.shape[0]
        arrays = {
            "weight": (w, names, int(net.weight_bits), True),
            "bias": (_per_out(L.bias, o, L.name, "bias"), ["out_channel"], None, True),
            "m0": (_per_out(L.m0, o, L.name, "m0"), ["out_channel"], None, False),
            "shift": (_per_out(L.shift, o, L.name, "shift"), ["out_channel"], None, False),
        }
        tables = {}
        for kind, (a, idx, bits, signed) in arrays.items():
            if bits is None:
                bits = signed_bits(a) if signed else unsigned_bits(a)
                if kind == "m0":
                    bits = max(bits, int(net.multiplier_bits))
            tables[kind] = ({"shape": list(a.shape), "layout": "".join(f"[{n}]" for n in idx),
                             "index_names": idx, "bits": bits, "signed": signed,
                             "depth": int(a.size), "hex_digits": hex_digits(bits)}, a)
        out.append((i, tables))
    return out


def _per_out(a, o, name, what) -> np.ndarray:
    if a is None:
        raise ValueError(f"layer {name!r} has weights but no {what}")
    a = np.asarray(a, dtype=np.int64).reshape(-1)
    if a.size != o:
        raise ValueError(f"layer {name!r}: {what} has {a.size} values for {o} output channels")
    return a


def _rule(L: IntLayer, coding: str) -> str:
    if L.kind in ("conv", "dense"):
        what = "2-d convolution (cross-correlation, zero padding)" if L.kind == "conv" else "fully connected"
        out = ("potential V is read out (argmax); the requantized value gives the ttfs early decision"
               if L.is_output else "emits a = requantize(V) by the coding")
        return f"{what}: V = sum(W * input payloads) + B over the window; {out}"
    if L.kind == "maxpool":
        first = "the first spike in the pool passes, later ones are blocked" if coding == "ttfs" else "passes the largest payload in the pool"
        return f"max pool, no weights: {first}"
    return ("sum pool, routing only: each event is re-addressed to its pool unit (c*Ho*Wo + y*Wo + x) with payload "
            "and step unchanged; the next layer adds W * payload for each, i.e. receives the integer sum of the "
            "pool's payloads (no neurons, no events of its own)")


def build_manifest(net: IntNetwork, tables: dict, files: dict[str, str], vectors: dict,
                   tables_npz: str, created: str, hardware_estimate: dict | None = None,
                   frontend: dict | None = None) -> dict:
    """The manifest dict. `tables`: {layer index: {kind: spec with file names}}; `files`: path -> sha256;
    `frontend`: frontvec.manifest_entry of the front-end vectors, or None."""
    ttfs = net.coding == "ttfs"
    layers = []
    facts = layer_facts(net, [layer_id(i, L.name) for i, L in enumerate(net.layers)], vectors.get("peak_events"),
                        bool(vectors.get("csv_folder")))
    for i, L in enumerate(net.layers):
        d = {"index": i, "id": layer_id(i, L.name), "name": L.name, "type": L.kind, "rule": _rule(L, net.coding),
             "input_shape": list(L.in_shape), "output_shape": list(L.out_shape),
             "neurons": int(np.prod(L.out_shape)) if L.kind != "sumpool" else 0,
             "address": address_formula(L.out_shape),
             "kernel": list(L.kernel), "stride": list(L.stride), "padding": list(L.padding),
             "q_in": int(L.q_in), "q_out": int(L.q_out),
             "payload_bits": int(L.q_out).bit_length(), "is_output": bool(L.is_output),
             "time_steps": net.time_steps if ttfs and L.has_neurons else None}
        if i in tables:
            t = tables[i]
            m0 = np.asarray(L.m0, dtype=np.int64)
            sh = np.asarray(L.shift, dtype=np.int64)
            d.update(weight_bits=t["weight"]["bits"], bias=np.asarray(L.bias, dtype=np.int64).tolist(),
                     bias_bits=t["bias"]["bits"], m0=m0.tolist(), shift=sh.tolist(),
                     threshold=[float(2.0 ** int(n) / int(m)) if m > 0 else None for m, n in zip(m0, sh)],
                     accumulator_bits=int(L.acc_bits), tables=t)
        d.update(facts[i])
        layers.append(d)
    c, h, w = net.input_shape
    return {
        "format": FORMAT, "version": VERSION, "created": created,
        "coding": net.coding, "coding_words": _CODING_WORDS[net.coding],
        "payload_bits": int(net.payload_bits), "weight_bits": int(net.weight_bits),
        "per_channel": bool(net.per_channel), "multiplier_bits": int(net.multiplier_bits),
        "time_steps": net.time_steps if ttfs else None, "n_classes": int(net.n_classes),
        "input": {"shape": list(net.input_shape), "q": int(net.input_q), "payload_bits": int(net.input_q).bit_length(),
                  "address": address_formula(net.input_shape),
                  "address_bits": max(1, (int(np.prod(net.input_shape)) - 1).bit_length()),
                  "peak_events": (vectors.get("peak_events") or {}).get("input"),
                  "events": ("one spike per nonzero input at step t = q - a" if ttfs
                             else "one event per nonzero input carrying its value a")},
        "addressing": "flat address of neuron (c, y, x) in a (C, H, W) map: c*H*W + y*W + x (the order of a "
                      "row-major flatten, which is also the input index of a following dense layer)",
        "rounding": {"words": arith.ROUNDING_WORDS, "formula": arith.ROUNDING_FORMULA, "ttfs_formula": arith.TTFS_FORMULA},
        "accumulator_limit": {"bits": int(net.acc_limit_bits), "overflow": net.overflow,
                              "words": ("unlimited: the potential never overflows (see each layer's accumulator_bits)"
                                        if not net.acc_limit_bits else
                                        f"the full-width potential at window close is limited to {net.acc_limit_bits} "
                                        f"bits by {_LIMIT_WORDS[net.overflow]}, applied once after the last addition; "
                                        "not a saturating adder: partial sums may leave the range and come back; "
                                        "every overflow is counted")},
        "decision": "argmax of the output layer's potentials V at window close (bias included, after the declared "
                    "accumulator limit, before requantization); "
                    "ties go to the lowest class index"
                    + ("; early decision: the class of the first output spike (ties: lowest address); "
                       "early_decision = -1 in the golden vectors means no output neuron spiked in the window"
                       if ttfs else "; payload coding has no early decision: early_decision is always -1 in the "
                       "golden vectors"),
        "event_order": ("by time step, then by address" if ttfs else "by address, all at window end (t = 0)"),
        "event_columns": ["addr", "t", "payload"],
        "layers": layers, "tables_npz": tables_npz, "vectors": vectors, "files": files,
        "hardware_estimate": hardware_estimate, "frontend": frontend,
    }


# network.json field -> the manifest's spelling of it (check_network names fields as the file does)
_TOP_NAMES = {"input_shape": "input.shape", "input_q": "input.q", "acc_limit_bits": "accumulator_limit.bits",
              "overflow": "accumulator_limit.overflow"}
_LAYER_NAMES = {"kind": "type", "in_shape": "input_shape", "out_shape": "output_shape", "acc_bits": "accumulator_bits"}


def _field_name(field: str, layer: int | None) -> str:
    if layer is None:
        return _TOP_NAMES.get(field, field)
    return f"layers[{layer}].{_LAYER_NAMES.get(field, field)}"


def _dict(value, field: str, name: str) -> dict:
    if not isinstance(value, dict):
        fail(field, name, "an object", repr(value), "field", FormatError)
    return value


def network_from_manifest(man: dict, arrays: dict, name: str = "manifest.json", tables_name: str = "the tables"
                          ) -> IntNetwork:
    """Rebuild the IntNetwork from the manifest and {layer id: {kind: int64 array}} read from the tables.

    Every field goes through intnet.check_network (types, ranges, shapes against the tables, layer
    chaining), so a manifest that disagrees with itself or its tables is a FormatError naming the field.
    """
    try:
        if man.get("format") != FORMAT:
            raise FormatError(f"{name}: not an snnconvert export (format={man.get('format')!r})")
        if man.get("version") not in READS:
            raise FormatError(f"{name}: format version {man.get('version')!r} is not supported "
                              f"(this build reads {' and '.join(map(str, READS))})")
        if not isinstance(man["layers"], list):
            fail("layers", name, "a list of layer objects", repr(man["layers"]), "field", FormatError)
        layers, tables, ids = [], [], []
        for i, d in enumerate(man["layers"]):
            _dict(d, f"layers[{i}]", name)
            ids.append(d["id"])
            tables.append(arrays.get(d["id"], {}))
            layers.append({k: d.get("accumulator_bits", 0) if k == "acc_bits" else d[_LAYER_NAMES.get(k, k)]
                           for k in LAYER_ATTRS})
        lim = _dict(man["accumulator_limit"], "accumulator_limit", name)
        inp = _dict(man["input"], "input", name)
        fields = {k: man[k] for k in NETWORK_ATTRS if k not in _TOP_NAMES}
        fields.update(input_shape=inp["shape"], input_q=inp["q"], acc_limit_bits=lim["bits"], overflow=lim["overflow"])
        return network_from_fields(fields, layers, tables, name, tables_name, _field_name,
                                   lambda i, kind: f"{ids[i]}.{kind}")
    except (KeyError, TypeError, ValueError) as exc:
        if isinstance(exc, FormatError):
            raise
        raise FormatError(f"{name}: missing or invalid field ({type(exc).__name__}: {exc})") from None
