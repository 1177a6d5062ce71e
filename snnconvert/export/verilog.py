"""Behavioural Verilog-2005 model of the exported network and a self-checking testbench.

Generated from the export folder alone (manifest, `.mem` tables, vectors.npz; numpy only), or by
`export --verilog` while the folder is written. Files, under `verilog/` of the export folder:
    snn_model.v        module snn_model: the network, event by event (tasks start_window, input_event,
                       close_window), every layer's events and potentials in plain arrays
    snn_tb.v           module snn_tb: streams each golden vector's input events into snn_model and
                       compares every layer's events, the potentials and the decisions; prints PASS or
                       the first mismatch (sample, layer, neuron, expected, got)
    tb_<stream>_events.mem, tb_<stream>_count.mem, tb_potentials.mem, tb_decision.mem
                       the golden vectors as $readmemh files (see `testbench_data`)
    trace/sample_NNNN/ empty folders, one per vector, for the trace (Verilog cannot create folders)
Both read their files by paths relative to the export folder: run the simulator there, e.g.
    cd EXPORT && iverilog -g2005 -o snn_tb.vvp verilog/snn_tb.v verilog/snn_model.v && vvp snn_tb.vvp
`vvp snn_tb.vvp +trace` also writes what the model computed for every vector to verilog/trace in the
golden-vector layout that `snnconvert compare` reads (`+trace=DIR`: to DIR, whose sample_NNNN folders
must exist); with a trace the testbench still names the first mismatch but runs every vector.

What the model computes (the manifest's rules, written out once in Verilog):
    V = B + sum W * a                 each input event adds W * payload to its fan-out (ttfs: adds W to a
                                      current that is added to V once per step, so V = B + sum W * (Q_in - t))
    V = limit(V)                      at window close: clip (saturate) or wrap the full-width potential to the
                                      declared accumulator width
    a = clamp((V*M0 + 2^(n-1)) >>> n, 0, Q)     exact halves round up (towards +infinity)
    ttfs: fire at the first step t with V*M0 + 2^(n-1) >= (Q - t) * 2^n, payload Q - t
Events leave a layer in golden order: payload coding by address at window close, ttfs by step then
address. Max pools pass the largest payload (ttfs: the first spike); sum pools route each event to
their pool unit's address, keeping its step and payload, so the next layer adds W * payload (ttfs:
W * (Q - t) with the Q of the layer that sent it). The output layer emits no events in payload coding.
All potentials are 64-bit signed: exact for every network the exporter accepts (V * M0 + 2^(n-1) < 2^63).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from snnconvert.errors import FormatError, UsageError
from snnconvert.intnet import IntNetwork

FOLDER = "verilog"
MODEL = "snn_model.v"
TESTBENCH = "snn_tb.v"
INPUT = "input"
EVENT_WORD = 96          # testbench event word: {addr[95:64], t[63:32], payload[31:0]}
TRACE = "trace"          # default trace folder of the testbench, under the verilog folder
# the two lines that hold the rounding rule and the accumulation (each written once in snn_model.v)
ROUND_LINE = "      biased = v * m + (64'sd1 <<< (n - 1));   // V * M0 + 2^(n-1)"
ACC_LINE = "      acc = v + x;"


def _stream_ids(net: IntNetwork, ids: list[str]) -> list[tuple[str, int | None]]:
    """(golden stream id, layer index) of the input and of every layer that emits events (not sum pools)."""
    return [(INPUT, None)] + [(ids[i], i) for i, L in enumerate(net.layers) if L.kind != "sumpool"]


def _windows(net: IntNetwork) -> list[int]:
    """Q of the window each layer receives: that of the last layer that emitted (a pool keeps it)."""
    q, out = int(net.input_q), []
    for L in net.layers:
        out.append(q)
        if L.kind in ("conv", "dense"):
            q = int(L.q_out)
    return out


# ------------------------------------------------------------------ the model

def _decl_layer(i: int, L, lid: str, specs: dict, ttfs: bool) -> list[str]:
    n_out = int(np.prod(L.out_shape))
    out = [f"  // ---- layer {i}: {lid} ({L.kind}), input {list(L.in_shape)} -> output {list(L.out_shape)}"]
    if L.kind in ("conv", "dense"):
        t = specs[i]
        for kind, name in (("weight", "w"), ("bias", "b"), ("m0", "m0"), ("shift", "sh")):
            sg = "signed " if t[kind]["signed"] else ""
            out.append(f"  reg {sg}[{t[kind]['bits'] - 1}:0] {name}_l{i} [0:{t[kind]['depth'] - 1}];"
                       f"   // {t[kind]['file']}")
        out.append(f"  reg signed [63:0] v_l{i} [0:{n_out - 1}];   // potential of each neuron (flat address)")
        if ttfs:
            out.append(f"  reg signed [63:0] i_l{i} [0:{n_out - 1}];   // ttfs: input current, added to v once per step")
            out.append(f"  integer step_l{i};                        // ttfs: steps of the input window integrated so far")
    elif L.kind == "maxpool":
        what = "earliest step seen (ttfs)" if ttfs else "largest payload seen"
        out.append(f"  integer pool_l{i} [0:{n_out - 1}];   // {what} per pool unit")
    if L.kind != "sumpool":
        out += [f"  integer n_l{i};   // events emitted",
                f"  integer ea_l{i} [0:{n_out - 1}], et_l{i} [0:{n_out - 1}], ep_l{i} [0:{n_out - 1}];"
                f"   // addr, t, payload of each event in golden order"]
    return out


def _fanout_loop(L, body: list[str], ind: str) -> list[str]:
    """Loop over the output units (oy, ox) that input pixel (y, x) reaches through kernel tap (ky, kx)."""
    _, H, W = L.in_shape
    _, Ho, Wo = L.out_shape
    (kh, kw), (sy, sx), (py, px) = L.kernel, L.stride, L.padding
    return [f"{ind}c = addr / {H * W}; y = (addr / {W}) % {H}; x = addr % {W};",
            f"{ind}for (ky = 0; ky < {kh}; ky = ky + 1)",
            f"{ind}  for (kx = 0; kx < {kw}; kx = kx + 1) begin",
            f"{ind}    oy = y + {py} - ky; ox = x + {px} - kx;   // output row/column times the stride",
            f"{ind}    if (oy >= 0 && ox >= 0 && oy % {sy} == 0 && ox % {sx} == 0 && oy / {sy} < {Ho} && ox / {sx} < {Wo}) begin"
            ] + [f"{ind}      {b}" for b in body] + [f"{ind}    end", f"{ind}  end"]


def _task_receive(net: IntNetwork, i: int, ids: list[str]) -> list[str]:
    """task recv_l<i>(addr, t, payload): one event arrives at layer i's input."""
    L, ttfs = net.layers[i], net.coding == "ttfs"
    out = [f"  // layer {i} ({ids[i]}): one event arrives", f"  task recv_l{i};",
           "    input integer addr, t, payload;",
           "    integer c, y, x, ky, kx, oy, ox, o, n, k;", "    begin"]
    add = (f"i_l{i}[n] = acc(i_l{i}[n], w_l{i}[k]);" if ttfs else f"v_l{i}[n] = acc(v_l{i}[n], w_l{i}[k] * payload);")
    if ttfs and L.kind in ("conv", "dense"):
        out.append(f"      advance_l{i}(t);   // integrate the steps before this event")
    if L.kind == "dense":
        F = int(np.prod(L.in_shape))
        out += [f"      for (o = 0; o < {L.out_shape[0]}; o = o + 1) begin",
                f"        n = o; k = o * {F} + addr;   // weight [o][addr]", f"        {add}", "      end"]
    elif L.kind == "conv":
        C = L.in_shape[0]
        (kh, kw), (Ho, Wo) = L.kernel, L.out_shape[1:]
        body = [f"for (o = 0; o < {L.out_shape[0]}; o = o + 1) begin",
                f"  n = o * {Ho * Wo} + (oy / {L.stride[0]}) * {Wo} + ox / {L.stride[1]};",
                f"  k = ((o * {C} + c) * {kh} + ky) * {kw} + kx;   // weight [o][c][ky][kx]", f"  {add}", "end"]
        out += _fanout_loop(L, body, "      ")
    else:
        Ho, Wo = L.out_shape[1:]
        unit = [f"n = c * {Ho * Wo} + (oy / {L.stride[0]}) * {Wo} + ox / {L.stride[1]};"]
        if L.kind == "sumpool":
            unit.append(f"recv_l{i + 1}(n, t, payload);   // routed on: the next layer sums the pool")
        elif ttfs:
            unit.append(f"if (t < pool_l{i}[n]) pool_l{i}[n] = t;   // the first spike passes")
        else:
            unit.append(f"if (payload > pool_l{i}[n]) pool_l{i}[n] = payload;")
        out += _fanout_loop(L, unit, "      ")
    out += ["    end", "  endtask", ""]
    return out


def _task_close(net: IntNetwork, i: int, ids: list[str], windows: list[int]) -> list[str]:
    """task close_l<i>: window close of layer i - limit, requantize/fire, list the events."""
    L, ttfs = net.layers[i], net.coding == "ttfs"
    n_out = int(np.prod(L.out_shape))
    S = n_out // int(L.out_shape[0])
    out = [f"  // layer {i} ({ids[i]}): window close", f"  task close_l{i};", "    integer n, t, a;", "    begin",
           f"      n_l{i} = 0;"]
    if L.kind in ("conv", "dense"):
        if ttfs:
            out.append(f"      advance_l{i}({windows[i]});   // the rest of the {windows[i]}-step input window")
        if net.acc_limit_bits:
            out.append(f"      for (n = 0; n < {n_out}; n = n + 1) v_l{i}[n] = limit(v_l{i}[n]);")
        if L.is_output and not ttfs:
            out.append("      // output layer: the potentials are read out; no events in payload coding")
        elif ttfs:
            out += [f"      for (t = 0; t < {L.q_out}; t = t + 1)      // falling threshold, step by step",
                    f"        for (n = 0; n < {n_out}; n = n + 1)",
                    "          // fires at the first crossing: the threshold only falls, so a neuron that crossed",
                    "          // at step t - 1 has fired already (each neuron fires at most once)",
                    f"          if (crosses(v_l{i}[n], m0_l{i}[n / {S}], sh_l{i}[n / {S}], {L.q_out}, t) &&",
                    f"              (t == 0 || !crosses(v_l{i}[n], m0_l{i}[n / {S}], sh_l{i}[n / {S}], {L.q_out}, t - 1)))",
                    f"            emit_l{i}(n, t, {L.q_out} - t);"]
        else:
            out += [f"      for (n = 0; n < {n_out}; n = n + 1) begin",
                    f"        a = requantize(v_l{i}[n], m0_l{i}[n / {S}], sh_l{i}[n / {S}], {L.q_out});",
                    f"        if (a > 0) emit_l{i}(n, 0, a);", "      end"]
    elif L.kind == "maxpool":
        if ttfs:
            out += [f"      for (t = 0; t < {windows[i]}; t = t + 1)",
                    f"        for (n = 0; n < {n_out}; n = n + 1)",
                    f"          if (pool_l{i}[n] == t) emit_l{i}(n, t, {windows[i]} - t);"]
        else:
            out += [f"      for (n = 0; n < {n_out}; n = n + 1)",
                    f"        if (pool_l{i}[n] > 0) emit_l{i}(n, 0, pool_l{i}[n]);"]
    out += ["    end", "  endtask", ""]
    return out


def _helpers(net: IntNetwork, i: int, ttfs: bool) -> list[str]:
    L = net.layers[i]
    out = [f"  task emit_l{i};", "    input integer addr, t, payload;", "    begin",
           f"      ea_l{i}[n_l{i}] = addr; et_l{i}[n_l{i}] = t; ep_l{i}[n_l{i}] = payload; n_l{i} = n_l{i} + 1;",
           "    end", "  endtask", ""]
    if ttfs and L.kind in ("conv", "dense"):
        n_out = int(np.prod(L.out_shape))
        out += [f"  task advance_l{i};   // add the current to the potential once per step, up to step `upto`",
                "    input integer upto;", "    integer n;", "    begin",
                f"      while (step_l{i} < upto) begin",
                f"        for (n = 0; n < {n_out}; n = n + 1) v_l{i}[n] = acc(v_l{i}[n], i_l{i}[n]);",
                f"        step_l{i} = step_l{i} + 1;", "      end", "    end", "  endtask", ""]
    return out


def _start(net: IntNetwork, ttfs: bool) -> list[str]:
    out = ["  // a new window: potentials start at the bias, no events, pools empty",
           "  task start_window;", "    integer n;", "    begin", "      n_in = 0;"]
    for i, L in enumerate(net.layers):
        n_out = int(np.prod(L.out_shape))
        if L.kind in ("conv", "dense"):
            S = n_out // int(L.out_shape[0])
            out.append(f"      for (n = 0; n < {n_out}; n = n + 1) v_l{i}[n] = b_l{i}[n / {S}];")
            if ttfs:
                out += [f"      for (n = 0; n < {n_out}; n = n + 1) i_l{i}[n] = 0;", f"      step_l{i} = 0;"]
        elif L.kind == "maxpool":
            init = "1 << 30;   // later than any step" if ttfs else "0;"
            out.append(f"      for (n = 0; n < {n_out}; n = n + 1) pool_l{i}[n] = {init}")
        if L.kind != "sumpool":
            out.append(f"      n_l{i} = 0;")
    out += ["    end", "  endtask", ""]
    return out


def model_source(net: IntNetwork, ids: list[str], specs: dict) -> str:
    """snn_model.v. ids: layer id per layer; specs: {layer index: {kind: table spec with file, bits, signed, depth}}."""
    ttfs = net.coding == "ttfs"
    windows = _windows(net)
    n_in = int(np.prod(net.input_shape))
    out_i = len(net.layers) - 1
    lim = int(net.acc_limit_bits)
    lines = ["// Behavioural model of the exported single-spike network (Verilog-2005, not synthesizable).",
             "// Generated from the export folder; the tables are its .mem files, read with $readmemh by paths",
             "// relative to the export folder. Use: start_window; input_event(addr, t, payload) per input event",
             "// (golden order); close_window. Then n_l<i>/ea_l<i>/et_l<i>/ep_l<i> hold layer i's events,",
             f"// v_l<i> its potentials, and decision/early_decision the readout. Coding: {net.coding}.",
             "`timescale 1ns/1ps", "module snn_model;", "",
             f"  // input layer {list(net.input_shape)}, payloads 0..{net.input_q}",
             "  integer n_in;", f"  integer ea_in [0:{n_in - 1}], et_in [0:{n_in - 1}], ep_in [0:{n_in - 1}];",
             "  integer decision, early_decision;   // argmax of the output potentials (ties: lowest class); "
             "ttfs: class of the first output spike, -1 if none", ""]
    for i, L in enumerate(net.layers):
        lines += _decl_layer(i, L, ids[i], specs, ttfs)
    lines += ["", "  initial begin"]
    for i in specs:
        for kind, name in (("weight", "w"), ("bias", "b"), ("m0", "m0"), ("shift", "sh")):
            lines.append(f'    $readmemh("{specs[i][kind]["file"]}", {name}_l{i});')
    lines += ["  end", ""]
    lines += ["  // the manifest's rounding rule, written once: V*M0 + 2^(n-1), then an arithmetic shift >>> n",
              "  // (floor), so exact halves round up (towards +infinity)",
              "  function signed [63:0] biased;", "    input signed [63:0] v;", "    input [63:0] m0;",
              "    input integer n;", "    reg signed [63:0] m;", "    begin",
              "      m = m0;                                   // zero-extended: M0 is unsigned",
              ROUND_LINE, "    end", "  endfunction", "",
              "  // requantization: a = clamp((V*M0 + 2^(n-1)) >>> n, 0, Q)",
              "  function integer requantize;", "    input signed [63:0] v;", "    input [63:0] m0;",
              "    input integer n, q;", "    reg signed [63:0] r;", "    begin",
              "      r = biased(v, m0, n) >>> n;",
              "      requantize = r < 0 ? 0 : (r > q ? q : r);", "    end", "  endfunction", "",
              "  // ttfs falling threshold at step t: V*M0 + 2^(n-1) >= (Q - t) * 2^n",
              "  function crosses;", "    input signed [63:0] v;", "    input [63:0] m0;", "    input integer n, q, t;",
              "    reg signed [63:0] qt;", "    begin", "      qt = q - t;",
              "      crosses = biased(v, m0, n) >= (qt <<< n);", "    end", "  endfunction", "",
              "  // the accumulation of a potential (or a ttfs current), written once: full width, no clip here;",
              "  // the declared accumulator limit applies at window close",
              "  function signed [63:0] acc;", "    input signed [63:0] v, x;", "    begin", ACC_LINE, "    end",
              "  endfunction", ""]
    if lim:
        lo, hi = -(1 << (lim - 1)), (1 << (lim - 1)) - 1
        if net.overflow == "saturate":
            body = [f"      limit = v < -64'sd{-lo} ? -64'sd{-lo} : (v > 64'sd{hi} ? 64'sd{hi} : v);"]
        else:
            body = [f"      limit = (v <<< {64 - lim}) >>> {64 - lim};   // keep the low {lim} bits, sign-extended"]
        lines += [f"  // declared accumulator limit: {lim} bits, {net.overflow}, applied to the full-width potential",
                  "  // at window close (not a saturating adder)",
                  "  function signed [63:0] limit;", "    input signed [63:0] v;", "    begin"] + body + [
                  "    end", "  endfunction", ""]
    for i, L in enumerate(net.layers):
        if L.kind != "sumpool":
            lines += _helpers(net, i, ttfs)
        lines += _task_receive(net, i, ids)
        if L.kind != "sumpool":
            lines += _task_close(net, i, ids, windows)
    lines += _start(net, ttfs)
    lines += ["  // one input event: recorded, then delivered to the first layer",
              "  task input_event;", "    input integer addr, t, payload;", "    begin",
              "      ea_in[n_in] = addr; et_in[n_in] = t; ep_in[n_in] = payload; n_in = n_in + 1;",
              "      recv_l0(addr, t, payload);", "    end", "  endtask", ""]
    lines += ["  // window close: each layer in turn closes and streams its events into the next",
              "  task close_window;", "    integer k, c;", "    begin"]
    for i, L in enumerate(net.layers):
        if L.kind == "sumpool":
            continue
        lines.append(f"      close_l{i};")
        nxt = i + 1
        if nxt < len(net.layers):
            lines.append(f"      for (k = 0; k < n_l{i}; k = k + 1) recv_l{nxt}(ea_l{i}[k], et_l{i}[k], ep_l{i}[k]);")
    lines += ["      decision = 0;",
              f"      for (c = 1; c < {net.n_classes}; c = c + 1) if (v_l{out_i}[c] > v_l{out_i}[decision]) decision = c;",
              f"      early_decision = {'n_l%d > 0 ? ea_l%d[0] : -1' % (out_i, out_i) if ttfs else '-1'};",
              "    end", "  endtask", "", "endmodule", ""]
    return "\n".join(lines)


# ------------------------------------------------------------------ the testbench and its data

def _hex(values, bits: int) -> list[str]:
    d = -(-bits // 4)
    return [format(int(v) & ((1 << bits) - 1), f"0{d}x") for v in values]


def _memfile(title: str, words: list[str]) -> bytes:
    return ("\n".join([f"// {title}"] + (words or ["0"])) + "\n").encode()


def testbench_data(net: IntNetwork, ids: list[str], arrays: dict) -> tuple[dict[str, bytes], dict]:
    """The golden vectors as $readmemh files (names relative to the verilog folder) and their sizes.

    tb_<stream>_events.mem: one 96-bit word {addr, t, payload} (32 bits each) per event, samples in turn;
    tb_<stream>_count.mem: events of each sample; tb_potentials.mem: 64-bit two's complement potentials,
    sample-major; tb_decision.mem: {decision, early_decision} as two 32-bit two's complement halves;
    tb_<layer>_potentials.mem when the vectors hold that layer's potentials (`<layer id>.potentials`).
    An empty table holds one 0 word, so that $readmemh always finds as many words as declared."""
    x = np.asarray(arrays["x"])
    n = int(x.shape[0])
    files, sizes = {}, {"samples": n, "events": {}, "layer_potentials": {}}
    for sid, _ in _stream_ids(net, ids):
        ev = np.asarray(arrays[f"{sid}.events"], dtype=np.int64).reshape(-1, 4)
        if ev.size and (np.any(ev[:, 0] < 0) or np.any(ev[:, 0] >= n) or np.any(np.diff(ev[:, 0]) < 0)
                        or ev[:, 1:].min() < 0 or ev[:, 1:].max() >= 1 << 31):
            raise FormatError(f"golden events of {sid}: samples must be in order and values in 0..2^31-1")
        counts = np.bincount(ev[:, 0], minlength=n) if ev.size else np.zeros(n, dtype=np.int64)
        words = [format((int(a) << 64) | (int(t) << 32) | int(p), "024x") for _, a, t, p in ev.tolist()]
        files[f"tb_{sid}_events.mem"] = _memfile(f"{sid}: {{addr, t, payload}} per event, 32 bits each", words)
        files[f"tb_{sid}_count.mem"] = _memfile(f"{sid}: events per sample", _hex(counts, 32))
        sizes["events"][sid] = max(1, len(words))
    pot = np.asarray(arrays["potentials"], dtype=np.int64).reshape(n, -1)
    files["tb_potentials.mem"] = _memfile("output potentials, sample-major, 64-bit two's complement",
                                          _hex(pot.ravel(), 64))
    dec = np.column_stack([np.asarray(arrays["decision"]).reshape(n), np.asarray(arrays["early_decision"]).reshape(n)])
    files["tb_decision.mem"] = _memfile("{decision, early_decision}, 32-bit two's complement each",
                                        [a + b for a, b in zip(_hex(dec[:, 0], 32), _hex(dec[:, 1], 32))])
    for sid, i in _stream_ids(net, ids)[1:]:
        key = f"{sid}.potentials"
        if key in arrays and net.layers[i].kind in ("conv", "dense"):
            v = np.asarray(arrays[key], dtype=np.int64).reshape(n, -1)
            if v.shape[1] != int(np.prod(net.layers[i].out_shape)):
                raise FormatError(f"golden potentials of {sid}: {v.shape[1]} per sample, expected "
                                  f"{int(np.prod(net.layers[i].out_shape))}")
            files[f"tb_{sid}_potentials.mem"] = _memfile(f"{sid} potentials, sample-major", _hex(v.ravel(), 64))
            sizes["layer_potentials"][sid] = v.shape[1]
    return files, sizes


def _trace_tasks(net: IntNetwork, streams, out_i: int) -> list[str]:
    """Tasks of the testbench that write one vector's trace in the golden-vector layout (see compare):
    TRACE/sample_NNNN/input.csv, <layer id>.csv, <layer id>.potentials.csv, potentials.csv."""
    L = ["  task open_trace;   // f = TRACE/sample_NNNN/<name> opened for writing",
         "    input integer s; input [8*96:1] name;", "    begin",
         '      $sformat(path, "%0s/sample_%04d/%0s", trace_dir, s, name);', '      f = $fopen(path, "w");',
         "      if (f == 0) begin",
         '        $display("error: cannot write %0s (the trace folder needs a sample_NNNN folder per vector)", path);',
         "        $finish;", "      end", "    end", "  endtask", "",
         "  task write_trace;   // one vector's trace: every layer's events and potentials, the decisions",
         "    input integer s;", "    integer k;", "    begin",
         '      $fdisplay(fs, "%0d,%0d,%0d", s, dut.decision, dut.early_decision);']
    for sid, i in streams:
        n_, a, t, p = (("dut.n_in", "dut.ea_in", "dut.et_in", "dut.ep_in") if i is None else
                       (f"dut.n_l{i}", f"dut.ea_l{i}", f"dut.et_l{i}", f"dut.ep_l{i}"))
        L += [f'      open_trace(s, "{sid}.csv"); $fdisplay(f, "addr,t,payload");',
              f'      for (k = 0; k < {n_}; k = k + 1) $fdisplay(f, "%0d,%0d,%0d", {a}[k], {t}[k], {p}[k]);',
              "      $fclose(f);"]
    ids = dict((i, sid) for sid, i in streams if i is not None)
    for i, layer in enumerate(net.layers):
        if layer.kind in ("conv", "dense"):
            L += [f'      open_trace(s, "{ids[i]}.potentials.csv"); $fdisplay(f, "addr,potential");',
                  f"      for (k = 0; k < {int(np.prod(layer.out_shape))}; k = k + 1)",
                  f'        $fdisplay(f, "%0d,%0d", k, dut.v_l{i}[k]);', "      $fclose(f);"]
    L += ['      open_trace(s, "potentials.csv"); $fdisplay(f, "class,potential");',
          f'      for (k = 0; k < {int(net.n_classes)}; k = k + 1) $fdisplay(f, "%0d,%0d", k, dut.v_l{out_i}[k]);',
          "      $fclose(f);", "    end", "  endtask", ""]
    return L


def trace_folders(verilog_dir, samples: int) -> Path:
    """Create the testbench's default trace folder verilog_dir/trace with one sample_NNNN folder per
    vector (Verilog's $fopen cannot create folders); returns it."""
    root = Path(verilog_dir) / TRACE
    for s in range(int(samples)):
        (root / f"sample_{s:04d}").mkdir(parents=True, exist_ok=True)
    return root


def testbench_source(net: IntNetwork, ids: list[str], sizes: dict, data_dir: str) -> str:
    """snn_tb.v: stream, compare, print PASS or the first mismatch and stop."""
    n, C = sizes["samples"], int(net.n_classes)
    out_i = len(net.layers) - 1
    streams = _stream_ids(net, ids)
    L = ["// Self-checking testbench of snn_model: every golden vector's input events go in one at a time;",
         "// every layer's events, the potentials and the decisions are compared. Ends with PASS or the",
         "// first mismatch (sample, layer, neuron, expected, got). Run in the export folder.",
         "`timescale 1ns/1ps", "module snn_tb;", "  snn_model dut();", ""]
    for k, (sid, _) in enumerate(streams):
        L += [f"  reg [{EVENT_WORD - 1}:0] ev{k} [0:{sizes['events'][sid] - 1}];   // {sid}",
              f"  reg [31:0] cnt{k} [0:{n - 1}];", f"  integer base{k};"]
    L += [f"  reg [63:0] pot [0:{n * C - 1}];", f"  reg [63:0] dec [0:{n - 1}];"]
    for sid, npl in sizes["layer_potentials"].items():
        L.append(f"  reg [63:0] pot_{sid} [0:{n * npl - 1}];")
    L += ["  integer s, k, c, got_n, exp_n, checked, failed;", f"  reg [{EVENT_WORD - 1}:0] e;",
          "  integer tracing, f, fs;            // +trace[=DIR]: also write a trace of every vector",
          "  reg [8*512:1] trace_dir, path;", "",
          "  task stop;   // after the first mismatch: stop, unless a trace is being written",
          "    begin", "      failed = 1;", "      if (!tracing) $finish;", "    end", "  endtask", "",
          "  task fail_event;   // the first differing event of a layer",
          "    input integer s; input [8*64:1] layer; input has_exp; input [95:0] e;",
          "    input has_got; input integer ga, gt, gp;", "    begin", "      if (!failed) begin",
          "        $write(\"FAIL: first mismatch: sample %0d, layer %0s, neuron %0d: expected \", s, layer,",
          "               has_exp ? e[95:64] : ga);",
          "        if (has_exp) $write(\"(addr %0d, t %0d, payload %0d)\", e[95:64], e[63:32], e[31:0]);",
          "        else $write(\"no event\");",
          "        if (has_got) $display(\", got (addr %0d, t %0d, payload %0d)\", ga, gt, gp);",
          "        else $display(\", got no event\");", "      end", "      stop;", "    end", "  endtask", "",
          "  task fail_value;   // a potential or decision that differs",
          "    input integer s; input [8*64:1] layer; input [8*24:1] what; input integer neuron;",
          "    input signed [63:0] expected, got;", "    begin",
          "      if (!failed)",
          "        $display(\"FAIL: first mismatch: sample %0d, layer %0s, %0s %0d: expected %0d, got %0d\",",
          "                 s, layer, what, neuron, expected, got);", "      stop;", "    end", "  endtask", ""]
    L += _trace_tasks(net, streams, out_i)
    L += ["  initial begin"]
    for k, (sid, _) in enumerate(streams):
        L += [f'    $readmemh("{data_dir}/tb_{sid}_events.mem", ev{k});',
              f'    $readmemh("{data_dir}/tb_{sid}_count.mem", cnt{k});', f"    base{k} = 0;"]
    L += [f'    $readmemh("{data_dir}/tb_potentials.mem", pot);', f'    $readmemh("{data_dir}/tb_decision.mem", dec);']
    for sid in sizes["layer_potentials"]:
        L.append(f'    $readmemh("{data_dir}/tb_{sid}_potentials.mem", pot_{sid});')
    L += ["    checked = 0; failed = 0; tracing = 0;", f'    trace_dir = "{data_dir}/{TRACE}";',
          '    if ($value$plusargs("trace=%s", trace_dir)) tracing = 1;',
          '    else if ($test$plusargs("trace")) tracing = 1;',
          "    if (tracing) begin",
          '      $sformat(path, "%0s/summary.csv", trace_dir);', '      fs = $fopen(path, "w");',
          "      if (fs == 0) begin",
          '        $display("error: cannot write %0s (the trace folder must exist)", path);', "        $finish;",
          "      end", '      $fdisplay(fs, "sample,decision,early_decision");', "    end",
          f"    for (s = 0; s < {n}; s = s + 1) begin", "      dut.start_window;",
          "      for (k = 0; k < cnt0[s]; k = k + 1) begin",
          "        e = ev0[base0 + k];", "        dut.input_event(e[95:64], e[63:32], e[31:0]);", "      end",
          "      base0 = base0 + cnt0[s];", "      dut.close_window;",
          "      if (tracing) write_trace(s);"]
    for k, (sid, i) in enumerate(streams[1:], start=1):
        L += [f"      // {sid}: events", f"      got_n = dut.n_l{i}; exp_n = cnt{k}[s];",
              "      for (c = 0; c < (got_n > exp_n ? got_n : exp_n); c = c + 1) begin",
              f"        e = c < exp_n ? ev{k}[base{k} + c] : 0;",
              f"        if (c >= exp_n || c >= got_n || dut.ea_l{i}[c] != e[95:64] || dut.et_l{i}[c] != e[63:32] ||"
              f" dut.ep_l{i}[c] != e[31:0])",
              f'          fail_event(s, "{sid}", c < exp_n, e, c < got_n, dut.ea_l{i}[c], dut.et_l{i}[c], dut.ep_l{i}[c]);',
              "      end", f"      base{k} = base{k} + exp_n; checked = checked + exp_n;"]
        if sid in sizes["layer_potentials"]:
            npl = sizes["layer_potentials"][sid]
            L += [f"      for (c = 0; c < {npl}; c = c + 1)",
                  f"        if ($signed(pot_{sid}[s * {npl} + c]) != dut.v_l{i}[c])",
                  f'          fail_value(s, "{sid}", "potential of neuron", c, pot_{sid}[s * {npl} + c], dut.v_l{i}[c]);']
    L += [f"      for (c = 0; c < {C}; c = c + 1)",
          f"        if ($signed(pot[s * {C} + c]) != dut.v_l{out_i}[c])",
          f'          fail_value(s, "{ids[out_i]}", "potential of class", c, pot[s * {C} + c], dut.v_l{out_i}[c]);',
          "      if ($signed(dec[s][63:32]) != dut.decision)",
          f'        fail_value(s, "{ids[out_i]}", "decision", 0, $signed(dec[s][63:32]), dut.decision);',
          "      if ($signed(dec[s][31:0]) != dut.early_decision)",
          f'        fail_value(s, "{ids[out_i]}", "early_decision", 0, $signed(dec[s][31:0]), dut.early_decision);',
          "    end",
          "    if (tracing) begin",
          "      $fclose(fs);", f'      $display("trace: {n} samples -> %0s", trace_dir);', "    end",
          "    if (!failed)",
          f'      $display("PASS: %0d samples, {len(streams) - 1} layers, %0d events, the potentials and decisions '
          f'match", {n}, checked);',
          "    $finish;", "  end", "endmodule", ""]
    return "\n".join(L)


def sources(net: IntNetwork, ids: list[str], specs: dict, arrays: dict, folder: str = FOLDER) -> dict[str, bytes]:
    """{path relative to the export folder: bytes} of the model, the testbench and its data under `folder`."""
    if not int(np.asarray(arrays.get("x", np.zeros((0,)))).shape[0]):
        raise UsageError("the Verilog testbench needs golden vectors; export with vectors >= 1")
    data, sizes = testbench_data(net, ids, arrays)
    files = {f"{folder}/{k}": v for k, v in data.items()}
    files[f"{folder}/{MODEL}"] = model_source(net, ids, specs).encode()
    files[f"{folder}/{TESTBENCH}"] = testbench_source(net, ids, sizes, folder).encode()
    return files


def read_export(export_dir) -> tuple[IntNetwork, list[str], dict, dict]:
    """(network, layer ids, table specs, vector arrays) read from an export folder alone: the manifest
    and the memory files are checked as `verify` checks them, and the network is rebuilt from them."""
    from snnconvert.export import manifest as M
    from snnconvert.export.verify import _Checker, _check_tables, read_manifest
    from snnconvert.export.writer import MANIFEST
    from snnconvert.files import load_npz, resolve_inside

    folder, man = read_manifest(export_dir)
    try:
        tables = _check_tables(_Checker(folder), man)
        net = M.network_from_manifest(man, tables, name=str(folder / MANIFEST),
                                      tables_name=f"the memory files of {folder}")
        ids = [d["id"] for d in man["layers"]]
        specs = {i: d["tables"] for i, d in enumerate(man["layers"]) if d.get("tables")}
        vec = man["vectors"]
        if not isinstance(vec, dict) or not vec.get("npz"):
            raise UsageError(f"{folder}: the export holds no golden vectors; export with vectors >= 1")
        arrays = load_npz(resolve_inside(folder, vec["npz"], "file"))
    except (KeyError, TypeError, IndexError) as exc:
        raise FormatError(f"{folder / MANIFEST}: missing or invalid field ({type(exc).__name__}: {exc})") from None
    for key in ["x", "potentials", "decision", "early_decision"] + [f"{sid}.events" for sid, _ in _stream_ids(net, ids)]:
        if key not in arrays:
            raise FormatError(f"{folder / vec['npz']}: array {key!r} is missing")
    return net, ids, specs, arrays


def write_verilog(export_dir, out_dir=None) -> Path:
    """Generate the Verilog model and testbench from the export folder alone into `out_dir`
    (default EXPORT/verilog); returns the testbench path. The testbench names its data by the path of
    `out_dir` relative to the export folder, so run the simulator in the export folder."""
    import os

    from snnconvert.files import atomic_write_bytes

    folder = Path(export_dir)
    out = folder / FOLDER if out_dir is None else Path(out_dir)
    net, ids, specs, arrays = read_export(folder)
    rel = Path(os.path.relpath(out.resolve(), folder.resolve())).as_posix()
    files = sources(net, ids, specs, arrays, folder=rel)
    for path, data in files.items():
        atomic_write_bytes(folder / path, data)
    trace_folders(folder / rel, int(np.asarray(arrays["x"]).shape[0]))
    return folder / rel / TESTBENCH
