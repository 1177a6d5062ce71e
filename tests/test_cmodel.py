"""The C99 reference model, compiled by the system C compiler, against the golden vectors; `compare`
on its traces with injected faults; directed vectors that separate rounding rules."""

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import torch

sys.path.insert(0, str(Path(__file__).parent))

from _convert_helpers import split, trained  # noqa: E402
from snnconvert import arith  # noqa: E402
from snnconvert.cli import main  # noqa: E402
from snnconvert.convert import convert_model  # noqa: E402
from snnconvert.export import export_network  # noqa: E402
from snnconvert.export import cmodel as C  # noqa: E402
from snnconvert.export.compare import compare  # noqa: E402
from snnconvert.export.directed import KINDS, tie_values  # noqa: E402
from snnconvert.sim.reference import run_sample  # noqa: E402
from test_export import small_inputs, small_net  # noqa: E402

torch.set_num_threads(2)
CC = shutil.which("cc") or shutil.which("gcc")
pytestmark = pytest.mark.skipif(CC is None, reason="no C compiler (cc); the Debian package gcc provides one")
# ISO C99 with every common warning as an error (gcc options, common practice for portable C)
FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic", "-O1"]


def _ubsan() -> list[str]:
    """-fsanitize=undefined (abort on the first report) where the compiler and its runtime support it."""
    if CC is None:
        return []
    flags = ["-fsanitize=undefined", "-fno-sanitize-recover=all"]
    probe = subprocess.run([CC, *flags, "-x", "c", "-", "-o", "/dev/null"], input="int main(void){return 0;}\n",
                           capture_output=True, text=True)
    return flags if probe.returncode == 0 else []


UBSAN = _ubsan()


def build(folder: Path, sources: dict | None = None) -> Path:
    """Write (possibly edited) sources to folder/c, compile once, return the executable."""
    src = sources or C.c_sources(folder)
    cdir = folder / "c"
    cdir.mkdir(exist_ok=True)
    for name, text in src.items():
        (cdir / name).write_text(text)
    exe = cdir / "snn_model"
    done = subprocess.run([CC, *FLAGS, *UBSAN, "-o", str(exe), str(cdir / "snn_model.c"), str(cdir / "snn_main.c")],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr[-3000:]
    return exe


def run(exe: Path, trace: Path | None = None):
    done = subprocess.run([str(exe)] + ([str(trace)] if trace else []), capture_output=True, text=True, timeout=300)
    assert "runtime error" not in done.stderr, done.stderr[-2000:]    # -fsanitize=undefined report
    return done.returncode, done.stdout


# --------------------------------------------------------------------------------------- networks

def _trained(kind, coding, *, binary=True, per_channel=True, acc=0, overflow="saturate", payload_bits=3,
             weight_bits=4, multiplier_bits=16):
    (xtr, _), (xte, yte) = split(binary)
    q_in = 1 if binary else 3                                    # count frames: 0..3 (tests/_convert_helpers.py)
    net = convert_model(trained(kind, binary), xtr[::10], weight_bits=weight_bits, payload_bits=payload_bits,
                        coding=coding, per_channel=per_channel, input_q=q_in, accumulator_bits=acc, overflow=overflow,
                        multiplier_bits=multiplier_bits)
    return net, arith.quantize_input(xte, q_in), yte


def _tie_net(coding):
    """small_net with round multipliers in its first layer, so exact halves are reachable: channel 0
    M = 2048 * 2^-12 = 1/2 (V = 1 is the half 0.5), channel 1 M = 3072 * 2^-12 = 3/4 (V = 6 is 4.5)."""
    net = small_net(coding)
    L = net.layers[0]
    L.m0 = np.array([2048, 3072, int(L.m0[2])])
    L.shift = np.array([12, 12, int(L.shift[2])])
    x, y = small_inputs(12)
    return net, x, y


CASES = {
    "payload-maxpool-per-channel": lambda: _trained("conv_max", "payload"),
    "ttfs-sumpool-count-frames": lambda: _trained("conv_avg", "ttfs", binary=False),
    "payload-sumpool-saturate": lambda: _trained("conv_avg", "payload", binary=False, acc=9),
    "ttfs-maxpool-wrap": lambda: _trained("conv_max", "ttfs", acc=8, overflow="wrap"),
    "binary-per-tensor": lambda: _trained("conv_max", "binary", per_channel=False, payload_bits=1, weight_bits=3),
    "payload-ties": lambda: _tie_net("payload"),
    "ttfs-ties": lambda: _tie_net("ttfs"),
    # trained networks with few multiplier bits: M0 has few significant bits, so exact halves fit in range
    "payload-ties-trained": lambda: _trained("conv_max", "payload", multiplier_bits=6),
    "ttfs-ties-trained": lambda: _trained("conv_avg", "ttfs", binary=False, multiplier_bits=5),
}
# the same trained networks with the default 16-bit multipliers, where no tie fits in range
TIES_OUT_OF_RANGE = {"payload-ties-trained": "payload-maxpool-per-channel",
                     "ttfs-ties-trained": "ttfs-sumpool-count-frames"}


@pytest.fixture(scope="session")
def built(tmp_path_factory):
    """{case: (net, export folder, executable)}, each exported and compiled once."""
    cache = {}

    def get(case):
        if case not in cache:
            net, x, y = CASES[case]()
            out = tmp_path_factory.mktemp(case) / "export"
            export_network(net, out, x, y, vectors=6, csv=False, progress=False)
            cache[case] = (net, out, build(out))
        return cache[case]
    return get


@pytest.mark.parametrize("case", sorted(CASES))
def test_c_model_passes_every_golden_vector(built, case, tmp_path):
    net, out, exe = built(case)
    man = json.loads((out / "manifest.json").read_text())
    code, stdout = run(exe, tmp_path / "trace")
    assert (code, stdout) == (0, f"PASS: {man['vectors']['count']} golden vectors match bit for bit\n")
    kinds = {d["kind"] for d in man["vectors"]["directed"]}
    assert {"max", "min", "zero"} <= kinds
    if net.acc_limit_bits:
        assert "overflow" in kinds                                   # the declared width is reached
    if net.input_q > 1:
        assert "values" in kinds
        z = np.load(out / "vectors.npz")
        ev = z["input.events"]
        assert ev[:, 3].max() == net.input_q and (net.coding != "ttfs" or ev[:, 2].max() > 0)
    if "ties" in case:
        assert "tie" in kinds
    # the C model's own trace agrees with the golden vectors table by table
    res = compare(out, tmp_path / "trace")
    assert res.passed, res.summary()
    assert all(r[2] == r[3] == man["vectors"]["count"] for r in res.rows)


@pytest.mark.slow
def test_c_model_of_the_default_size_network(tmp_path):
    """The default recipe's network (conv 16, conv 16, max pool, conv 32, max pool, dense 64, dense 10 on
    16x16 frames), briefly trained on the simulated-sensor digits."""
    from snnconvert import recipe as R
    from snnconvert.data import load_dataset
    from snnconvert.export.fromrun import test_inputs
    from snnconvert.train import train
    r = R.load(Path(__file__).resolve().parents[1] / "recipes" / "default.toml",
               ["data.limit=300", f"data.cache_dir={tmp_path / 'cache'}", "train.epochs=2"])
    ds = load_dataset(r, progress=False)
    model, _ = train(r, ds, tmp_path / "train", quiet=True)
    net = convert_model(model, np.asarray(ds.train[0][:64]), weight_bits=4, payload_bits=4, coding="payload",
                        per_channel=True, input_q=int(ds.input_q))
    assert sum(L.weight.size for L in net.layers if L.weight is not None) > 30000   # default size, not a toy
    x, y = test_inputs(net, r, progress=False)
    export_network(net, tmp_path / "e", x, y, vectors=4, csv=False, progress=False)
    assert main(["cmodel", str(tmp_path / "e"), "--quiet"]) == 0
    code, stdout = run(build(tmp_path / "e", {n: (tmp_path / "e" / "c" / n).read_text() for n in C.FILES}))
    assert code == 0 and stdout.startswith("PASS: ")


# --------------------------------------------------------------------------------------- ties

def _half_down(v, m0, n, q, channel_axis=1):
    """Halves round down: ceil(V*M - 1/2) = (V*M0 + 2^(n-1) - 1) >> n (a wrong rule, for the test)."""
    m0b, nb = arith._per_channel(v, m0, n, channel_axis)
    return arith.clip((v * m0b + (np.left_shift(np.int64(1), nb - 1) - 1)) >> nb, 0, int(q))


def _half_even(v, m0, n, q, channel_axis=1):
    """Halves to even (a wrong rule, for the test)."""
    m0b, nb = arith._per_channel(v, m0, n, channel_axis)
    p = v * m0b + np.left_shift(np.int64(1), nb - 1)
    r = p >> nb
    tie = (p & (np.left_shift(np.int64(1), nb) - 1)) == 0
    return arith.clip(np.where(tie & (r % 2 == 1), r - 1, r), 0, int(q))


def _crosses(rule):
    def f(v, m0, n, q, t, channel_axis=1):
        return rule(v, m0, n, q, channel_axis) >= int(q) - int(t)
    return f


@pytest.mark.parametrize("m0,n,q,acc,want", [
    (2048, 12, 7, 8, [(1, 1), (3, 2), (5, 3), (7, 4), (9, 5), (11, 6), (13, 7)]),   # M = 1/2: V/2, (V+1)/2
    (3072, 12, 7, 8, [(2, 2), (6, 5)]),      # M = 3/4: V = 2 -> 1.5, V = 6 -> 4.5; V = 10 -> 7.5 rounds past Q
    (3075, 12, 7, 30, []),          # odd M0 of 12 bits: halves need V*M0 = u*3075*2^11, payload u*1537.5 > Q
    (2048, 12, 7, 2, [(1, 1)]),     # |V| < 2^(acc-1) = 2 allows V = 1 only
])
def test_tie_values_by_hand(m0, n, q, acc, want):
    # V * M0 / 2^n = k + 1/2 worked by hand: M0 = m * 2^e, V = u * 2^(n-1-e), payload (u*m + 1)/2
    assert tie_values(m0, n, q, acc) == want


@pytest.mark.parametrize("case", ["payload-ties", "ttfs-ties", "payload-ties-trained", "ttfs-ties-trained"])
@pytest.mark.parametrize("rule", [_half_down, _half_even], ids=["halves-down", "halves-to-even"])
def test_tie_vectors_separate_the_rounding_rules(built, monkeypatch, case, rule):
    net, out, _ = built(case)
    man = json.loads((out / "manifest.json").read_text())
    if case in TIES_OUT_OF_RANGE:
        assert net.multiplier_bits < 8 and man["layers"][0]["ties_possible"] is True
        default = json.loads((built(TIES_OUT_OF_RANGE[case])[1] / "manifest.json").read_text())
        assert default["layers"][0]["ties_possible"] is False
        assert "tie" not in {d["kind"] for d in default["vectors"]["directed"]}
    z = np.load(out / "vectors.npz")
    ties = [d for d in man["vectors"]["directed"] if d["kind"] == "tie"]
    assert ties and all(int(z["directed"][d["sample"]]) == KINDS["tie"] for d in ties)
    lid = ties[0]["layer"]
    layer = int(lid[1:].split("_")[0])
    for d in ties:
        s = d["sample"]
        right = run_sample(net, z["x"][s])
        monkeypatch.setattr(arith, "requantize", rule)
        monkeypatch.setattr(arith, "ttfs_crosses", _crosses(rule))
        wrong = run_sample(net, z["x"][s])
        monkeypatch.undo()
        ev = z[f"{lid}.events"]
        golden = ev[ev[:, 0] == s, 1:]
        got = lambda tr: np.stack([tr.layer_events[layer][k] for k in ("addr", "t", "payload")], 1)  # noqa: E731
        assert np.array_equal(got(right), golden)
        assert not np.array_equal(got(wrong), golden)               # the wrong rule fails the tie vector ...
        assert d["neuron"] in set(golden[:, 0].tolist())            # ... at the named neuron, which fires


# --------------------------------------------------------------------------------------- compare + faults

def _edit_array(text: str, name: str, k: int, fn) -> str:
    m = re.search(rf"{name}\[(\d+)\] = \{{\n(.*?)\n\}};", text, re.S)
    vals = [int(v) for v in m.group(2).replace("\n", " ").split(",")]
    vals[k] = fn(vals[k])
    body = ",\n    ".join(", ".join(map(str, vals[i:i + 16])) for i in range(0, len(vals), 16))
    return text[:m.start(2)] + "    " + body + text[m.end(2):]


def _faulty_trace(built, case, tmp_path, edit):
    net, out, _ = built(case)
    src = C.c_sources(out)
    edit(src)
    work = tmp_path / "faulty"
    shutil.copytree(out, work)
    exe = build(work, src)
    code, stdout = run(exe, tmp_path / "trace")
    return net, out, code, stdout, compare(out, tmp_path / "trace")


def test_compare_finds_a_flipped_weight_word_at_its_layer(built, tmp_path):
    net, out, _ = built("payload-maxpool-per-channel")
    z = np.load(out / "vectors.npz")
    k = next(i for i, L in enumerate(net.layers) if L.weight is not None and i > 0)   # the second weighted layer
    L = net.layers[k]
    src_id = f"L{k - 1}_{net.layers[k - 1].name}"
    e = z[f"{src_id}.events"][0]                                       # the first event it receives (sample 0)
    c, y, x = np.unravel_index(int(e[1]), L.in_shape)
    ky, kx = next((a, b) for a in range(L.kernel[0]) for b in range(L.kernel[1])
                  if (y + L.padding[0] - a) % L.stride[0] == 0 and 0 <= (y + L.padding[0] - a) // L.stride[0] < L.out_shape[1]
                  and (x + L.padding[1] - b) % L.stride[1] == 0 and 0 <= (x + L.padding[1] - b) // L.stride[1] < L.out_shape[2])
    word = ((0 * L.in_shape[0] + c) * L.kernel[0] + ky) * L.kernel[1] + kx

    def edit(src):   # flip the lowest bit of one weight word: W -> W xor 1
        src["snn_tables.h"] = _edit_array(src["snn_tables.h"], f"SNN_L{k}_WEIGHT", int(word), lambda w: w ^ 1)
    _, _, code, stdout, res = _faulty_trace(built, "payload-maxpool-per-channel", tmp_path, edit)
    lid = f"L{k}_{L.name}"
    assert code == 1 and stdout.startswith(f"FAIL: first mismatch: sample 0, layer {lid}, neuron ")
    assert (res.first.sample, res.first.layer, res.first.what) == (0, lid, "potentials")
    assert res.first.index[0] == 0                                     # output channel 0 holds the flipped word
    assert main(["compare", str(out), str(tmp_path / "trace"), "--quiet"]) == 1


def test_compare_finds_a_rounding_unit_that_rounds_halves_down(built, tmp_path):
    def edit(src):
        assert C.ROUND_LINE in src["snn_model.c"]                       # the rule is written once
        src["snn_model.c"] = src["snn_model.c"].replace(
            C.ROUND_LINE, "    const int64_t p = v * (int64_t)m0 + ((int64_t)1 << (n - 1)) - 1;")
    net, out, code, stdout, res = _faulty_trace(built, "payload-ties", tmp_path, edit)
    man = json.loads((out / "manifest.json").read_text())
    tie = next(d for d in man["vectors"]["directed"] if d["kind"] == "tie")
    assert code == 1 and res.first.layer == tie["layer"] and res.first.what == "events"
    row = next(r for r in res.rows if r[:2] == [tie["layer"], "events"])
    assert row[3] < row[2]                                             # the tie vector among the failures
    z = np.load(out / "vectors.npz")
    assert not _sample_matches(tmp_path / "trace", z, tie["layer"], tie["sample"])


def _sample_matches(trace, z, lid, s) -> bool:
    lines = (trace / f"sample_{s:04d}" / f"{lid}.csv").read_text().split("\n")[1:]
    rows = np.asarray([[int(v) for v in r.split(",")] for r in lines if r], dtype=np.int64)
    ev = z[f"{lid}.events"]
    return np.array_equal(rows.reshape(-1, 3), ev[ev[:, 0] == s, 1:])


SAT_ADD = ("#define SNN_HI (((int64_t)1 << (SNN_ACC_LIMIT_BITS - 1)) - 1)\n"
           "#define SNN_ACC(acc, x) ((acc) = (acc) + (x) > SNN_HI ? SNN_HI : "
           "((acc) + (x) < -SNN_HI - 1 ? -SNN_HI - 1 : (acc) + (x)))")


def test_compare_finds_a_saturating_adder_in_place_of_the_clip(built, tmp_path):
    def edit(src):
        assert C.ACC_MACRO in src["snn_model.c"]
        src["snn_model.c"] = src["snn_model.c"].replace(C.ACC_MACRO, SAT_ADD)
    net, out, code, stdout, res = _faulty_trace(built, "payload-sumpool-saturate", tmp_path, edit)
    assert code == 1
    check_saturating_adder(net, out, res)


def check_saturating_adder(net, out, res):
    """The first divergence of a trace from a model with a saturating adder is a potential, at a layer
    whose inputs all matched; the got value is what a saturating adder makes of the golden events the
    neuron receives, in their order, and the expected one the clip of the full sum at window close."""
    assert res.first.what == "potentials", res.summary()
    d = res.first
    k = int(d.layer[1:].split("_")[0])
    L = net.layers[k]
    # every table before this layer's potentials matched in that sample; recompute the named neuron's
    # potential by a saturating adder over the golden events it receives, in their order
    z = np.load(out / "vectors.npz")
    src = next(j for j in range(k - 1, -1, -1) if net.layers[j].kind != "sumpool") if k else None
    ev = (z["input.events"] if src is None else z[f"L{src}_{net.layers[src].name}.events"])
    ev = ev[ev[:, 0] == d.sample, 1:]
    hi = (1 << (net.acc_limit_bits - 1)) - 1
    lo = -hi - 1
    contrib = _contributions(net, k, d.neuron, ev)
    v = int(L.bias[d.neuron // int(np.prod(L.out_shape[1:]) if L.kind == "conv" else 1)])
    for c in contrib:
        v = min(max(v + c, lo), hi)
    assert v == int(d.got) and int(d.expected) == int(z[f"{d.layer}.potentials"][d.sample][d.neuron])
    full = sum(contrib) + int(L.bias[d.neuron // int(np.prod(L.out_shape[1:]) if L.kind == "conv" else 1)])
    assert int(d.expected) == min(max(full, lo), hi)                   # the golden value: clip at window close


def _contributions(net, k, neuron, ev):
    """W * a of each event reaching `neuron` of layer k, in event order; events pass through the
    sum pools in between (each routed event keeps its payload)."""
    L = net.layers[k]
    prev = net.layers[k - 1] if k else None
    rows = [tuple(r) for r in ev]
    if prev is not None and prev.kind == "sumpool":
        C_, H, W = prev.in_shape
        routed = []
        for a, t, p in rows:
            c, y, x = np.unravel_index(a, (C_, H, W))
            for ky in range(prev.kernel[0]):
                for kx in range(prev.kernel[1]):
                    ny, nx = y + prev.padding[0] - ky, x + prev.padding[1] - kx
                    if ny >= 0 and nx >= 0 and ny % prev.stride[0] == 0 and nx % prev.stride[1] == 0 \
                            and ny // prev.stride[0] < prev.out_shape[1] and nx // prev.stride[1] < prev.out_shape[2]:
                        routed.append(((c * prev.out_shape[1] + ny // prev.stride[0]) * prev.out_shape[2]
                                       + nx // prev.stride[1], t, p))
        rows = routed
    out = []
    if L.kind == "dense":
        return [int(L.weight[neuron, a]) * int(p) for a, _, p in rows]
    o, oy, ox = np.unravel_index(neuron, L.out_shape)
    C_, H, W = L.in_shape
    for a, _, p in rows:
        c, y, x = np.unravel_index(a, (C_, H, W))
        ky, kx = y + L.padding[0] - oy * L.stride[0], x + L.padding[1] - ox * L.stride[1]
        if 0 <= ky < L.kernel[0] and 0 <= kx < L.kernel[1]:
            out.append(int(L.weight[o, c, ky, kx]) * int(p))
    return out


def test_compare_orders_events_unless_unordered(built, tmp_path, capsys):
    net, out, exe = built("payload-maxpool-per-channel")
    trace = tmp_path / "trace"
    assert run(exe, trace)[0] == 0
    lid = "L2_conv2" if (trace / "sample_0001" / "L2_conv2.csv").is_file() else None
    lid = lid or next(p.stem for p in sorted((trace / "sample_0001").glob("L*.csv")) if ".potentials" not in p.name)
    path = trace / "sample_0001" / f"{lid}.csv"
    lines = path.read_text().split("\n")
    assert len([x for x in lines[1:] if x]) >= 2
    path.write_text("\n".join([lines[0]] + [x for x in lines[1:] if x][::-1]) + "\n")   # reversed order
    res = compare(out, trace)
    assert (res.first.sample, res.first.layer, res.first.what) == (1, lid, "events")
    assert compare(out, trace, unordered=True).passed
    assert main(["compare", str(out), str(trace), "--quiet"]) == 1
    assert main(["compare", str(out), str(trace), "--unordered", "--quiet"]) == 0
    lines_out = capsys.readouterr().out.split("\n")
    assert lines_out[0].split() == ["layer", "what", "compared", "match", "first", "bad", "sample"]


@pytest.mark.parametrize("write,message", [
    (lambda t: (t / "sample_0000").mkdir() or (t / "sample_0000" / "input.csv").write_text("a,b\n1,2\n"),
     "sample_0000/input.csv line 1: header must be 'addr,t,payload'"),
    (lambda t: (t / "sample_0000").mkdir() or (t / "sample_0000" / "potentials.csv").write_text("class,potential\nx,1\n"),
     "sample_0000/potentials.csv line 2: 'x,1' is not a row of integers"),
    (lambda t: (t / "sample_9999").mkdir(), "sample_9999: no golden sample of that number"),
    (lambda t: None, "the trace holds nothing to compare"),
])
def test_compare_refuses_a_malformed_trace(built, tmp_path, capsys, write, message):
    _, out, _ = built("payload-ties")
    trace = tmp_path / "t"
    trace.mkdir()
    write(trace)
    assert main(["compare", str(out), str(trace), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and message in err and err.count("\n") == 1


# --------------------------------------------------------------------------------------- manifest facts

@pytest.mark.parametrize("coding", ["payload", "ttfs"])
def test_manifest_states_timing_widths_and_event_facts(tmp_path, coding):
    net = small_net(coding)
    x, y = small_inputs(6)
    export_network(net, tmp_path / "e", x, y, vectors=6, progress=False)
    man = json.loads((tmp_path / "e" / "manifest.json").read_text())
    L = man["layers"]
    # small_net: conv1 (3, 6, 6) = 108 neurons, pool1 (3, 3, 3) = 27, conv2 (4, 2, 2) = 16, fc 3 (hand-counted);
    # address bits = bits of neurons - 1: 107 -> 7, 26 -> 5, 15 -> 4, 2 -> 2; input 36 -> 35 -> 6
    assert [d["address_bits"] for d in L] == [7, 5, 4, 2] and man["input"]["address_bits"] == 6
    assert [d["emits_events"] for d in L] == [True, True, True, coding == "ttfs"]
    if coding == "ttfs":
        # input window: Q_in = 1 step; conv1's window follows it; the pool passes spikes in that same window;
        # conv2 and fc each follow their input's window of Q = 7 steps (payload bits 3)
        assert [d["window_start"] for d in L] == [1, 0, 7, 7]
        assert [d["window_start_absolute"] for d in L] == [1, 1, 8, 15]
        assert [d["time_bits"] for d in L] == [3, 3, 3, 3]
    else:
        assert all(d["window_start"] is None and d["time_bits"] is None for d in L)
    z = np.load(tmp_path / "e" / "vectors.npz")
    for d in L:
        if d["golden"]["events_npz"]:
            ev = z[d["golden"]["events_npz"]]
            assert d["peak_events"] == max(int((ev[:, 0] == s).sum()) for s in range(len(z["x"])))
        if d.get("tables"):                          # brute force over every V the accumulator can hold
            vs = np.arange(-(1 << (d["accumulator_bits"] - 1)), 1 << (d["accumulator_bits"] - 1), dtype=np.int64)
            p = vs[:, None] * np.asarray(d["m0"]) + (1 << (np.asarray(d["shift"]) - 1))
            lo, hi = int(p.min()), int(p.max())
            b = d["requantize_bits"]
            assert -(1 << (b - 1)) <= lo and hi < 1 << (b - 1) and not (-(1 << (b - 2)) <= lo and hi < 1 << (b - 2))
            assert z[d["golden"]["potentials_npz"]].shape == (len(z["x"]), int(np.prod(d["output_shape"])))
            assert (tmp_path / "e" / d["golden"]["potentials_csv"].replace("NNNN", "0000")).is_file()
    assert "not a saturating adder" in man["accumulator_limit"]["words"] or not man["accumulator_limit"]["bits"]
    assert "early_decision" in man["decision"] and "-1" in man["decision"]
