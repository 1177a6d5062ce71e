"""C99 reference model of an exported network, generated from the export folder alone.

`write_c_model(EXPORT_DIR)` reads manifest.json, the memory files (checked against the other table
copies, as `verify` does) and vectors.npz - numpy only, no checkpoint - and writes EXPORT_DIR/c/:

    snn_model.h    types, sizes, widths and shifts as macros, the result struct, snn_run()
    snn_tables.h   every table as a `static const` fixed-width integer array (included by snn_model.c)
    snn_model.c    snn_run(): one window, event by event; the rounding rule and the accumulator
                   limit are written once each, as functions
    snn_vectors.h  the golden vectors (included by snn_main.c)
    snn_main.c     runs every golden vector, prints PASS or the first mismatch (sample, layer,
                   neuron, expected, got); `snn_model TRACE_DIR` also writes a trace in the
                   golden-vector layout (see compare.py)

With front-end vectors in the export, also the front end's C model (export.cfront: snn_frontend.h,
snn_frontend.c, snn_frontend_vectors.h, snn_frontend_main.c), built from the manifest's `frontend.params`:
cc -std=c99 -O2 -o snn_frontend snn_frontend.c snn_frontend_main.c.

Build: cc -std=c99 -O2 -o snn_model snn_model.c snn_main.c. The model uses integer arithmetic only
(no floats, no malloc), fixed-width types chosen from the declared widths (int32_t when a layer's
accumulator width is at most 32 bits, else int64_t), static loops with bounds from macros, and
avoids undefined behaviour: no negative value is shifted, and no sum can overflow its type.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from snnconvert.errors import FormatError, UsageError
from snnconvert.files import atomic_write_text, load_json, load_npz, resolve_inside

FOLDER = "c"
FILES = ("snn_model.h", "snn_tables.h", "snn_model.c", "snn_vectors.h", "snn_main.c")

# The two lines a hardware designer most often gets wrong, kept as named strings so that a test can
# swap in a wrong rule and see the golden vectors catch it.
ROUND_LINE = "    const int64_t p = v * (int64_t)m0 + ((int64_t)1 << (n - 1));   /* V * M0 + 2^(n-1) */"
ACC_MACRO = "#define SNN_ACC(acc, x) ((acc) += (x))"


def _ctype(bits: int, signed: bool = True) -> str:
    for w in (8, 16, 32, 64):
        if bits <= w:
            return f"{'' if signed else 'u'}int{w}_t"
    raise ValueError(f"a {bits}-bit word does not fit a C fixed-width type")


def _lit(v: int) -> str:
    """A C integer literal of the value, safe for every fixed-width type (no int overflow in the literal)."""
    v = int(v)
    if -(2 ** 31) < v < 2 ** 31:
        return str(v)
    return f"INT64_C({v})" if v > -(2 ** 63) else "INT64_MIN"


def _array(decl: str, values) -> str:
    vals = [_lit(v) for v in np.asarray(values, dtype=np.int64).reshape(-1).tolist()] or ["0"]
    rows = [", ".join(vals[k:k + 16]) for k in range(0, len(vals), 16)]
    return f"{decl}[{len(vals)}] = {{\n    " + ",\n    ".join(rows) + "\n};\n"


def load_export(folder):
    """(manifest dict, IntNetwork rebuilt from the memory files) of an export folder; FormatError when its
    table copies disagree (the C model must be built from tables that verify accepts)."""
    from snnconvert.export import manifest as M
    from snnconvert.export.verify import _Checker, _check_tables
    from snnconvert.export.writer import MANIFEST
    folder = Path(folder)
    if not (folder / MANIFEST).is_file():
        raise UsageError(f"export folder {folder} holds no {MANIFEST} (run `snnconvert export` first)")
    man = load_json(folder / MANIFEST)
    if not isinstance(man, dict):
        raise FormatError(f"{folder / MANIFEST}: not a manifest object")
    ck = _Checker(folder)
    try:
        arrays = _check_tables(ck, man)
    except (KeyError, TypeError, IndexError) as exc:
        raise FormatError(f"{folder / MANIFEST}: missing or invalid field ({type(exc).__name__}: {exc})") from None
    if ck.first is not None:
        raise FormatError(ck.first.message())
    net = M.network_from_manifest(man, arrays, name=str(folder / MANIFEST), tables_name=f"the memory files of {folder}")
    return man, net


class _Layer:
    """Sizes of one layer as the C code names them."""

    def __init__(self, i, L, lid, window):
        self.i, self.L, self.lid, self.window = i, L, lid, int(window)
        self.p = f"SNN_L{i}"
        self.kind = L.kind
        self.in_neurons = int(np.prod(L.in_shape))
        self.neurons = int(np.prod(L.out_shape))
        self.weighted = L.weight is not None
        if self.weighted:
            w = np.asarray(L.weight, dtype=np.int64)
            b = np.asarray(L.bias, dtype=np.int64)
            bound = int(np.abs(w.reshape(w.shape[0], -1)).sum(1).max(initial=0)) * int(L.q_in) + int(np.abs(b).max(initial=0))
            self.acc_bits = max(int(L.acc_bits), bound.bit_length() + 1)
            self.acc_t = "int32_t" if self.acc_bits <= 32 else "int64_t"


def _layers(man, net) -> list[_Layer]:
    out, window = [], net.input_q
    for i, L in enumerate(net.layers):
        out.append(_Layer(i, L, man["layers"][i]["id"], window))
        if L.kind in ("conv", "dense"):
            window = L.q_out
    return out


# ------------------------------------------------------------------------------------------- header

def _header(man, net, layers) -> str:
    ttfs = net.coding == "ttfs"
    c, h, w = net.input_shape
    m = ["/* snnconvert C reference model: generated from the export folder (manifest.json and memory files).",
         f" * coding {net.coding}, {len(layers)} layers, {net.n_classes} classes. Integer arithmetic only. */",
         "#ifndef SNN_MODEL_H", "#define SNN_MODEL_H", "", "#include <stdint.h>", "",
         f"#define SNN_CODING_TTFS {1 if ttfs else 0}",
         f"#define SNN_N_CLASSES {net.n_classes}",
         f"#define SNN_IN_C {c}", f"#define SNN_IN_H {h}", f"#define SNN_IN_W {w}",
         f"#define SNN_IN_NEURONS {c * h * w}",
         f"#define SNN_IN_Q {net.input_q}              /* largest input payload */",
         f"#define SNN_ACC_LIMIT_BITS {net.acc_limit_bits}   /* declared accumulator width, 0 = unlimited */",
         f"#define SNN_OVERFLOW_WRAP {1 if net.overflow == 'wrap' else 0}    /* 1: wrap at the limit, 0: saturate */", ""]
    for d in layers:
        L, p = d.L, d.p
        m.append(f"/* layer {d.i}: {d.lid} ({L.kind}), input {list(L.in_shape)} -> output {list(L.out_shape)} */")
        m.append(f"#define {p}_IN_NEURONS {d.in_neurons}")
        m.append(f"#define {p}_NEURONS {d.neurons}")
        if len(L.in_shape) == 3:
            m += [f"#define {p}_C {L.in_shape[0]}", f"#define {p}_H {L.in_shape[1]}", f"#define {p}_W {L.in_shape[2]}"]
        if len(L.out_shape) == 3:
            m += [f"#define {p}_O {L.out_shape[0]}", f"#define {p}_HO {L.out_shape[1]}", f"#define {p}_WO {L.out_shape[2]}"]
        else:
            m.append(f"#define {p}_O {L.out_shape[0]}")
        if L.kind != "dense":
            m += [f"#define {p}_KH {L.kernel[0]}", f"#define {p}_KW {L.kernel[1]}", f"#define {p}_SY {L.stride[0]}",
                  f"#define {p}_SX {L.stride[1]}", f"#define {p}_PY {L.padding[0]}", f"#define {p}_PX {L.padding[1]}"]
        m.append(f"#define {p}_WINDOW {d.window}   /* Q of the events this layer receives (ttfs: a = WINDOW - t) */")
        if d.weighted:
            m += [f"#define {p}_Q_OUT {L.q_out}", f"#define {p}_ACC_BITS {d.acc_bits}",
                  f"#define {p}_WEIGHT_BITS {net.weight_bits}",
                  f"typedef {d.acc_t} snn_l{d.i}_acc_t;   /* holds every potential of this layer */"]
        if L.kind == "sumpool":
            m.append(f"#define {p}_ROUTED_MAX ({p}_IN_NEURONS * {p}_KH * {p}_KW)   /* routed events, at most */")
        m.append("")
    m += ["typedef struct snn_event {", "    int32_t addr;      /* flat address c*H*W + y*W + x (dense: index) */",
          "    int32_t t;         /* time step (0 in payload coding) */",
          "    int32_t payload;   /* value carried */", "} snn_event_t;", "",
          "/* Everything one window produces: each layer's events, each weighted layer's potentials at window",
          " * close (after the declared accumulator limit), the decision and the ttfs early decision. */",
          "typedef struct snn_result {"]
    for d in layers:
        if d.kind != "sumpool":
            m.append(f"    snn_event_t l{d.i}_events[{d.p}_NEURONS];   /* {d.lid} */")
            m.append(f"    int32_t l{d.i}_count;")
        if d.weighted:
            m.append(f"    snn_l{d.i}_acc_t l{d.i}_v[{d.p}_NEURONS];")
    m += ["    int32_t decision;         /* argmax of the output potentials, ties to the lowest class */",
          "    int32_t early_decision;   /* ttfs: class of the first output spike; -1 if none or not ttfs */",
          "} snn_result_t;", "",
          "/* Run one window: n_in input events (golden order, each address at most once). Returns the decision. */",
          "int32_t snn_run(const snn_event_t *in, int32_t n_in, snn_result_t *r);", "", "#endif", ""]
    return "\n".join(m)


def _tables(net, layers) -> str:
    out = ["/* snnconvert C reference model: the tables, word for word as the memory files hold them. */", ""]
    for d in layers:
        if not d.weighted:
            continue
        L, p = d.L, d.p
        w = np.asarray(L.weight, dtype=np.int64)
        lay = "[out_channel][in_channel][ky][kx]" if w.ndim == 4 else "[out_channel][in_index]"
        out.append(f"/* {d.lid}: weights {list(w.shape)}, layout {lay}, row-major */")
        out.append(_array(f"static const {_ctype(int(net.weight_bits))} {p}_WEIGHT", w))
        b = np.asarray(L.bias, dtype=np.int64)
        out.append(_array(f"static const {_ctype(max(int(np.abs(b).max(initial=0)).bit_length() + 1, 1))} {p}_BIAS", b))
        m0 = np.asarray(L.m0, dtype=np.int64)
        out.append(_array(f"static const {_ctype(max(int(m0.max(initial=0)).bit_length(), 1), False)} {p}_M0", m0))
        out.append(_array(f"static const uint8_t {p}_SHIFT", np.asarray(L.shift, dtype=np.int64)))
    return "\n".join(out)


# ------------------------------------------------------------------------------------------- model

_COMMON = """
/* The rounding rule, written once: a = clamp((V * M0 + 2^(n-1)) >> n, 0, Q).
 * For p >= 0, p >> n is floor(p / 2^n), so exact halves round up (towards +infinity). A negative p
 * gives a negative quotient, which the clamp maps to 0, so a negative value is never shifted.
 * |V * M0 + 2^(n-1)| < 2^63 holds for every declared width (see requantize_bits in the manifest). */
static int32_t snn_requantize(int64_t v, uint32_t m0, int32_t n, int32_t q)
{
%(round)s
    int64_t a;
    if (p < 0)
        return 0;
    a = p >> n;
    return a > q ? q : (int32_t)a;
}

/* The declared accumulator limit, written once: applied to the full-width potential at window
 * close (a clip, or a two's complement wrap), not to each addition. */
static int64_t snn_limit(int64_t v)
{
%(limit)s
}

/* One accumulation: the full-width potential (no saturation between additions). */
%(acc)s
"""

_LIMIT = {
    "none": "    return v;   /* no declared limit: the potential never overflows its type */",
    "saturate": ("    const int64_t hi = ((int64_t)1 << (SNN_ACC_LIMIT_BITS - 1)) - 1, lo = -hi - 1;\n"
                 "    return v > hi ? hi : (v < lo ? lo : v);"),
    "wrap": ("    const uint64_t span = (uint64_t)1 << SNN_ACC_LIMIT_BITS;\n"
             "    const uint64_t u = (uint64_t)v & (span - 1);   /* v mod 2^bits (unsigned conversion is modular) */\n"
             "    return u >= span / 2 ? (int64_t)u - (int64_t)span : (int64_t)u;"),
}


def _mult(d, ttfs: bool, ev: str) -> str:
    """The value an event carries into the sum: its payload, or in ttfs the steps it stays active."""
    return f"({d.p}_WINDOW - {ev}.t)" if ttfs else f"{ev}.payload"


def _taps(p: str, body: str, unit: str) -> str:
    """Loop over the kernel taps of an input event at (c, y, x) that land on an output unit (oy, ox)."""
    return f"""        for (ky = 0; ky < {p}_KH; ky++) {{
            const int32_t ny = y + {p}_PY - ky;
            if (ny < 0 || ny % {p}_SY != 0 || ny / {p}_SY >= {p}_HO)
                continue;
            for (kx = 0; kx < {p}_KW; kx++) {{
                const int32_t nx = x + {p}_PX - kx;
                int32_t {unit};
                if (nx < 0 || nx % {p}_SX != 0 || nx / {p}_SX >= {p}_WO)
                    continue;
                {unit} = (ny / {p}_SY) * {p}_WO + nx / {p}_SX;
{body}
            }}
        }}"""


def _event_loop(p: str, src_max: str, inner: str, spatial: bool) -> str:
    decode = (f"        const int32_t c = e.addr / ({p}_H * {p}_W), y = (e.addr / {p}_W) % {p}_H, x = e.addr % {p}_W;\n"
              if spatial else "")
    return f"""    for (i = 0; i < {src_max}; i++) {{   /* static bound; the events end at n_in */
        snn_event_t e;
        if (i >= n_in)
            break;
        e = in[i];
{decode}{inner}
    }}"""


def _emit(d, ttfs: bool, value: str, v_decl: str) -> str:
    """Window close: payload coding emits a = value(k) > 0 by address; ttfs at step t = Q - a, by step then address."""
    p = d.p
    if not ttfs:
        return f"""    for (k = 0; k < {p}_NEURONS; k++) {{
{v_decl}        const int32_t a = {value};
        if (a > 0) {{
            out[n].addr = k; out[n].t = 0; out[n].payload = a; n++;
        }}
    }}"""
    return f"""    for (k = 0; k < {p}_NEURONS; k++) {{
{v_decl}        act[k] = {value};
    }}
    for (t = 0; t < {p}_Q_OUT; t++) {{   /* spike at step t = Q - a: larger values first */
        for (k = 0; k < {p}_NEURONS; k++) {{
            if (act[k] > 0 && {p}_Q_OUT - act[k] == t) {{
                out[n].addr = k; out[n].t = t; out[n].payload = act[k]; n++;
            }}
        }}
    }}"""


def _layer_fn(d, net, src_max: str) -> str:
    ttfs = net.coding == "ttfs"
    p, L, i = d.p, d.L, d.i
    head = f"/* layer {i}: {d.lid} ({L.kind}) */\n"
    if d.weighted:
        S = f"({p}_HO * {p}_WO)" if L.kind == "conv" else "1"
        mult = _mult(d, ttfs, "e")
        if L.kind == "conv":
            body = (f"                for (o = 0; o < {p}_O; o++)\n"
                    f"                    SNN_ACC(v[o * {p}_HO * {p}_WO + u], "
                    f"(snn_l{i}_acc_t){p}_WEIGHT[((o * {p}_C + c) * {p}_KH + ky) * {p}_KW + kx] * m);")
            inner = f"        const snn_l{i}_acc_t m = (snn_l{i}_acc_t){mult};\n" + _taps(p, body, "u")
            loops = "int32_t i, k, o, ky, kx"
        else:
            inner = (f"        const snn_l{i}_acc_t m = (snn_l{i}_acc_t){mult};\n"
                     f"        for (o = 0; o < {p}_O; o++)\n"
                     f"            SNN_ACC(v[o], (snn_l{i}_acc_t){p}_WEIGHT[o * {p}_IN_NEURONS + e.addr] * m);")
            loops = "int32_t i, k, o"
        integrate = _event_loop(p, src_max, inner, L.kind == "conv")
        emits = ttfs or not L.is_output
        decl = [f"    snn_l{i}_acc_t *v = r->l{i}_v;",
                f"    {loops}{', t' if ttfs and emits else ''}, n = 0;"]
        if emits:
            decl.insert(0, f"    snn_event_t *out = r->l{i}_events;")
        if ttfs and emits:
            decl.insert(0, f"    static int32_t act[{p}_NEURONS];")
        fire = ""
        if emits:
            fire = _emit(d, ttfs, f"snn_requantize(v[k], {p}_M0[k / {S}], {p}_SHIFT[k / {S}], {p}_Q_OUT)", "")
        return head + f"""static void snn_layer{i}(const snn_event_t *in, int32_t n_in, snn_result_t *r)
{{
{chr(10).join(decl)}
    for (k = 0; k < {p}_NEURONS; k++)   /* V = B, then every event adds W * a to its fan-out */
        v[k] = (snn_l{i}_acc_t){p}_BIAS[k / {S}];
{integrate}
    for (k = 0; k < {p}_NEURONS; k++)   /* window close: the declared limit */
        v[k] = (snn_l{i}_acc_t)snn_limit(v[k]);
{fire}
    r->l{i}_count = n;
}}
"""
    if L.kind == "maxpool":
        if ttfs:   # the first spike in the pool passes; later ones are blocked
            body = (f"                u += c * {p}_HO * {p}_WO;\n"
                    "                if (first[u] < 0 || e.t < first[u])\n                    first[u] = e.t;")
            init = f"    static int32_t first[{p}_NEURONS];\n"
            reset = "        first[k] = -1;"
            fire = f"""    for (t = 0; t < {p}_WINDOW; t++) {{   /* by step, then address */
        for (k = 0; k < {p}_NEURONS; k++) {{
            if (first[k] == t) {{
                out[n].addr = k; out[n].t = t; out[n].payload = {p}_WINDOW - t; n++;
            }}
        }}
    }}"""
        else:      # the largest payload in the pool passes
            body = (f"                u += c * {p}_HO * {p}_WO;\n"
                    "                if (e.payload > best[u])\n                    best[u] = e.payload;")
            init = f"    static int32_t best[{p}_NEURONS];\n"
            reset = "        best[k] = 0;"
            fire = _emit(d, False, "best[k]", "")
        return head + f"""static void snn_layer{i}(const snn_event_t *in, int32_t n_in, snn_result_t *r)
{{
{init}    snn_event_t *out = r->l{i}_events;
    int32_t i, k, ky, kx{', t' if ttfs else ''}, n = 0;
    for (k = 0; k < {p}_NEURONS; k++)
{reset}
{_event_loop(p, src_max, _taps(p, body, "u"), True)}
{fire}
    r->l{i}_count = n;
}}
"""
    # sumpool: routing only; each event is re-addressed to every pool unit it falls in, payload and t unchanged
    body = (f"                routed[n].addr = c * {p}_HO * {p}_WO + u; routed[n].t = e.t; "
            f"routed[n].payload = e.payload; n++;")
    return head + f"""static int32_t snn_layer{i}(const snn_event_t *in, int32_t n_in, snn_event_t *routed)
{{
    int32_t i, ky, kx, n = 0;
{_event_loop(p, src_max, _taps(p, body, "u"), True)}
    return n;
}}
"""


def _model(man, net, layers) -> str:
    ttfs = net.coding == "ttfs"
    limit = "none" if not net.acc_limit_bits else net.overflow
    parts = ['/* snnconvert C reference model: one window of the network, event by event. */',
             '#include "snn_model.h"', '#include "snn_tables.h"',
             _COMMON % {"round": ROUND_LINE, "limit": _LIMIT[limit], "acc": ACC_MACRO}]
    src_max = "SNN_IN_NEURONS"
    for d in layers:
        parts.append(_layer_fn(d, net, src_max))
        src_max = f"{d.p}_ROUTED_MAX" if d.kind == "sumpool" else f"{d.p}_NEURONS"
    out = layers[-1]
    run = ["int32_t snn_run(const snn_event_t *in, int32_t n_in, snn_result_t *r)", "{"]
    bufs = [f"    static snn_event_t routed{d.i}[{d.p}_ROUTED_MAX];" for d in layers if d.kind == "sumpool"]
    run += bufs + ["    const snn_event_t *ev = in;", "    int32_t n = n_in, k, best = 0;"]
    if not bufs:
        pass
    for d in layers:
        if d.kind == "sumpool":
            run += [f"    n = snn_layer{d.i}(ev, n, routed{d.i});", f"    ev = routed{d.i};"]
        else:
            run += [f"    snn_layer{d.i}(ev, n, r);", f"    ev = r->l{d.i}_events;", f"    n = r->l{d.i}_count;"]
    run += ["    (void)ev;", "    for (k = 1; k < SNN_N_CLASSES; k++)   /* argmax, ties to the lowest class */",
            f"        if (r->l{out.i}_v[k] > r->l{out.i}_v[best])", "            best = k;",
            "    r->decision = best;",
            (f"    r->early_decision = r->l{out.i}_count > 0 ? r->l{out.i}_events[0].addr : -1;   /* first output spike */"
             if ttfs else "    r->early_decision = -1;   /* payload coding: no early decision */"),
            "    return best;", "}", ""]
    parts.append("\n".join(run))
    return "\n".join(parts)


# ------------------------------------------------------------------------------------------- vectors + main

def _vectors(man, net, layers, z) -> str:
    n = int(z["x"].shape[0])
    out = [f"/* snnconvert golden vectors ({n} samples), from vectors.npz: events as (addr, t, payload) triples. */",
           f"#define SNN_VEC_COUNT {n}", ""]
    streams = [("input", "IN")] + [(d.lid, f"L{d.i}") for d in layers if d.kind != "sumpool"]
    for sid, name in streams:
        ev = np.asarray(z[f"{sid}.events"], dtype=np.int64)
        starts = np.searchsorted(ev[:, 0], np.arange(n + 1)) if len(ev) else np.zeros(n + 1, np.int64)
        if len(ev) and np.any(np.diff(ev[:, 0]) < 0):
            raise FormatError(f"vectors.npz: '{sid}.events' is not grouped by sample")
        out.append(_array(f"static const int32_t SNN_VEC_{name}_EV", ev[:, 1:]))
        out.append(_array(f"static const int32_t SNN_VEC_{name}_START", starts))
    for d in layers:
        key = f"{d.lid}.potentials"
        if d.weighted and key in z:
            out.append(_array(f"static const {d.acc_t} SNN_VEC_L{d.i}_V", z[key]))
    out.append(_array("static const int64_t SNN_VEC_POTENTIALS", z["potentials"]))
    out.append(_array("static const int32_t SNN_VEC_DECISION", z["decision"]))
    out.append(_array("static const int32_t SNN_VEC_EARLY", z["early_decision"]))
    return "\n".join(out)


_MAIN_TOP = r"""/* snnconvert C reference model: run every golden vector; print PASS or the first mismatch.
 * Usage: snn_model [TRACE_DIR]   (TRACE_DIR: also write a trace in the golden-vector layout) */
#define _POSIX_C_SOURCE 200809L
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include "snn_model.h"
#include "snn_vectors.h"

static int snn_fail(int32_t s, const char *layer, const char *what, int32_t neuron, const char *exp, const char *got)
{
    printf("FAIL: first mismatch: sample %d, layer %s, %s %d: expected %s, got %s\n",
           (int)s, layer, what, (int)neuron, exp, got);
    return 1;
}

static void snn_fmt_event(char *buf, size_t size, const int32_t *e)
{
    if (e == NULL)
        snprintf(buf, size, "no event");
    else
        snprintf(buf, size, "(addr %d, t %d, payload %d)", (int)e[0], (int)e[1], (int)e[2]);
}

/* Events in order: the first differing row (a length difference counts at the shorter length). */
static int snn_check_events(int32_t s, const char *layer, const int32_t *exp, int32_t n_exp,
                            const snn_event_t *got, int32_t n_got)
{
    char a[96], b[96];
    int32_t k, g[3];
    for (k = 0; k < n_exp || k < n_got; k++) {
        const int32_t *e = k < n_exp ? exp + 3 * k : NULL;
        if (k < n_got) {
            g[0] = got[k].addr; g[1] = got[k].t; g[2] = got[k].payload;
        }
        if (e != NULL && k < n_got && e[0] == g[0] && e[1] == g[1] && e[2] == g[2])
            continue;
        snn_fmt_event(a, sizeof a, e);
        snn_fmt_event(b, sizeof b, k < n_got ? g : NULL);
        return snn_fail(s, layer, "neuron", e != NULL ? e[0] : g[0], a, b);
    }
    return 0;
}

static int snn_check_value(int32_t s, const char *layer, const char *what, int32_t k, long long exp, long long got)
{
    char a[32], b[32];
    if (exp == got)
        return 0;
    snprintf(a, sizeof a, "%lld", exp);
    snprintf(b, sizeof b, "%lld", got);
    return snn_fail(s, layer, what, k, a, b);
}

static FILE *snn_open(const char *dir, int32_t s, const char *name)
{
    char path[4096];
    if (s >= 0) {
        snprintf(path, sizeof path, "%s/sample_%04d", dir, (int)s);
        mkdir(path, 0777);
        snprintf(path, sizeof path, "%s/sample_%04d/%s", dir, (int)s, name);
    } else {
        snprintf(path, sizeof path, "%s/%s", dir, name);
    }
    return fopen(path, "w");
}

static int snn_write_events(const char *dir, int32_t s, const char *name, const snn_event_t *ev, int32_t n)
{
    int32_t k;
    FILE *f = snn_open(dir, s, name);
    if (f == NULL)
        return 1;
    fprintf(f, "addr,t,payload\n");
    for (k = 0; k < n; k++)
        fprintf(f, "%d,%d,%d\n", (int)ev[k].addr, (int)ev[k].t, (int)ev[k].payload);
    return fclose(f) != 0;
}
"""


def _main(man, net, layers, z) -> str:
    out = layers[-1]
    has_v = [d for d in layers if d.weighted and f"{d.lid}.potentials" in z]
    check, trace = [], []
    for d in layers:
        if d in has_v:
            check.append(f"""    for (k = 0; k < {d.p}_NEURONS; k++)
        if (snn_check_value(s, "{d.lid}", "neuron", k, (long long)SNN_VEC_L{d.i}_V[s * {d.p}_NEURONS + k],
                            (long long)r->l{d.i}_v[k]))
            return 1;""")
        if d.weighted:
            trace.append(f"""    f = snn_open(dir, s, "{d.lid}.potentials.csv");
    if (f == NULL)
        return 1;
    fprintf(f, "addr,potential\\n");
    for (k = 0; k < {d.p}_NEURONS; k++)
        fprintf(f, "%d,%lld\\n", (int)k, (long long)r->l{d.i}_v[k]);
    if (fclose(f) != 0)
        return 1;""")
        if d.kind != "sumpool":
            check.append(f"""    if (snn_check_events(s, "{d.lid}", SNN_VEC_L{d.i}_EV + 3 * SNN_VEC_L{d.i}_START[s],
                         SNN_VEC_L{d.i}_START[s + 1] - SNN_VEC_L{d.i}_START[s], r->l{d.i}_events, r->l{d.i}_count))
        return 1;""")
            trace.append(f'    if (snn_write_events(dir, s, "{d.lid}.csv", r->l{d.i}_events, r->l{d.i}_count))\n        return 1;')
    return _MAIN_TOP + f"""
static int snn_check(int32_t s, const snn_result_t *r)
{{
    int32_t k;
{chr(10).join(check)}
    for (k = 0; k < SNN_N_CLASSES; k++)
        if (snn_check_value(s, "{out.lid}", "potential of class", k, (long long)SNN_VEC_POTENTIALS[s * SNN_N_CLASSES + k],
                            (long long)r->l{out.i}_v[k]))
            return 1;
    if (snn_check_value(s, "output", "decision", 0, SNN_VEC_DECISION[s], r->decision))
        return 1;
    return snn_check_value(s, "output", "early_decision", 0, SNN_VEC_EARLY[s], r->early_decision);
}}

static int snn_trace(const char *dir, int32_t s, const snn_event_t *in, int32_t n_in, const snn_result_t *r)
{{
    int32_t k;
    FILE *f;
    if (snn_write_events(dir, s, "input.csv", in, n_in))
        return 1;
{chr(10).join(trace)}
    f = snn_open(dir, s, "potentials.csv");
    if (f == NULL)
        return 1;
    fprintf(f, "class,potential\\n");
    for (k = 0; k < SNN_N_CLASSES; k++)
        fprintf(f, "%d,%lld\\n", (int)k, (long long)r->l{out.i}_v[k]);
    return fclose(f) != 0;
}}

int main(int argc, char **argv)
{{
    static snn_event_t in[SNN_IN_NEURONS];
    static snn_result_t r;
    const char *dir = argc > 1 ? argv[1] : NULL;
    FILE *summary = NULL;
    int32_t s, k, failed = 0;
    if (dir != NULL) {{
        mkdir(dir, 0777);
        summary = snn_open(dir, -1, "summary.csv");
        if (summary == NULL) {{
            printf("error: cannot write the trace folder %s\\n", dir);
            return 2;
        }}
        fprintf(summary, "sample,decision,early_decision\\n");
    }}
    for (s = 0; s < SNN_VEC_COUNT; s++) {{
        const int32_t n_in = SNN_VEC_IN_START[s + 1] - SNN_VEC_IN_START[s];
        const int32_t *e = SNN_VEC_IN_EV + 3 * SNN_VEC_IN_START[s];
        for (k = 0; k < n_in; k++) {{
            in[k].addr = e[3 * k]; in[k].t = e[3 * k + 1]; in[k].payload = e[3 * k + 2];
        }}
        snn_run(in, n_in, &r);
        if (!failed)
            failed = snn_check(s, &r);
        if (dir != NULL) {{
            fprintf(summary, "%d,%d,%d\\n", (int)s, (int)r.decision, (int)r.early_decision);
            if (snn_trace(dir, s, in, n_in, &r)) {{
                printf("error: cannot write the trace folder %s\\n", dir);
                return 2;
            }}
        }}
    }}
    if (summary != NULL && fclose(summary) != 0) {{
        printf("error: cannot write the trace folder %s\\n", dir);
        return 2;
    }}
    if (!failed)
        printf("PASS: %d golden vectors match bit for bit\\n", (int)SNN_VEC_COUNT);
    return failed;
}}
"""


def c_sources(folder) -> dict[str, str]:
    """{file name: C source} of the model of the export in `folder` (nothing is written)."""
    from snnconvert.export.writer import MANIFEST
    folder = Path(folder)
    man, net = load_export(folder)
    vec = man.get("vectors") or {}
    if not vec.get("count"):
        raise UsageError(f"{folder / MANIFEST}: the export holds no golden vectors; the C model's main checks them "
                         "(export with --vectors N, N > 0)")
    z = load_npz(resolve_inside(folder, vec["npz"], "file"))
    layers = _layers(man, net)
    out = {"snn_model.h": _header(man, net, layers), "snn_tables.h": _tables(net, layers),
           "snn_model.c": _model(man, net, layers), "snn_vectors.h": _vectors(man, net, layers, z),
           "snn_main.c": _main(man, net, layers, z)}
    if man.get("frontend"):
        from snnconvert.export import cfront
        fz = load_npz(resolve_inside(folder, man["frontend"]["npz"], "file"))
        out.update(cfront.c_sources(man, fz, str(folder / MANIFEST)))
    return out


def write_c_model(folder, out_dir=None) -> Path:
    """Write the C model of the export in `folder` to `out_dir` (default: folder/c); returns the folder."""
    src = c_sources(folder)
    out = Path(out_dir) if out_dir is not None else Path(folder) / FOLDER
    for name, text in src.items():
        atomic_write_text(out / name, text)
    return out
