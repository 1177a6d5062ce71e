"""The generated Verilog model, run by a real HDL simulator (Icarus Verilog, `iverilog -g2005`), matches the
golden vectors of the reference simulator event for event, and its testbench names the first mismatch."""

import dataclasses
import json
import os
import shutil
import subprocess
import sys

import numpy as np
import pytest

from snnconvert import arith
from snnconvert.cli import main
from snnconvert.export import export_network
from snnconvert.export.compare import compare
from snnconvert.export.vectors import simulate
from snnconvert.export.verilog import ACC_LINE, ROUND_LINE
from test_export import small_inputs, small_net

IVERILOG, VVP = shutil.which("iverilog"), shutil.which("vvp")
pytestmark = pytest.mark.skipif(
    IVERILOG is None or VVP is None,
    reason="Icarus Verilog (iverilog, vvp) is not installed; .ci/run installs the Debian package iverilog")


def run_tb(export_dir, tmp_path, tb_dir="verilog", plusargs=()) -> str:
    """Compile the testbench and the model with `iverilog -g2005` and run them in the export folder."""
    vvp = tmp_path / "snn_tb.vvp"
    subprocess.run([IVERILOG, "-g2005", "-Wall", "-o", str(vvp), f"{tb_dir}/snn_tb.v", f"{tb_dir}/snn_model.v"],
                   cwd=export_dir, check=True, capture_output=True, text=True, timeout=300)
    done = subprocess.run([VVP, "-n", str(vvp), *plusargs], cwd=export_dir, check=True, capture_output=True, text=True,
                          timeout=600)
    return done.stdout + done.stderr


def pass_line(export_dir, test_samples: int) -> str:
    """The testbench's PASS line: the test samples plus the directed vectors the manifest lists."""
    vec = json.loads((export_dir / "manifest.json").read_text())["vectors"]
    assert vec["count"] == test_samples + len(vec.get("directed", []))
    return f"PASS: {vec['count']} samples"


def limited(net, bits, mode):
    return dataclasses.replace(net, acc_limit_bits=bits, overflow=mode)


# (id, network, input payload maximum); small hand-built networks with per-channel scales
CASES = [
    ("payload-maxpool", lambda: small_net("payload"), 1),
    ("ttfs-maxpool", lambda: small_net("ttfs"), 1),
    ("payload-sumpool", lambda: small_net("payload", pool="sumpool"), 1),
    ("ttfs-sumpool", lambda: small_net("ttfs", pool="sumpool"), 1),
    ("binary", lambda: small_net("binary", payload_bits=1), 1),
    ("payload-counts", lambda: small_net("payload", input_q=3), 3),      # input payloads above 1
    ("ttfs-counts", lambda: small_net("ttfs", pool="sumpool", input_q=3), 3),   # input steps above 0
    ("saturate-6bit", lambda: limited(small_net("payload"), 6, "saturate"), 1),
    ("wrap-6bit", lambda: limited(small_net("payload"), 6, "wrap"), 1),
    ("ttfs-wrap-7bit", lambda: limited(small_net("ttfs", pool="sumpool"), 7, "wrap"), 1),
]


@pytest.mark.parametrize("name,make,qin", CASES, ids=[c[0] for c in CASES])
def test_verilog_model_passes_the_golden_vectors(tmp_path, name, make, qin):
    net = make()
    x, y = small_inputs(4, input_q=qin)
    out = tmp_path / "export"
    export_network(net, out, x, y, vectors=4, progress=False, verilog=True)
    if net.acc_limit_bits:       # the declared width is really exceeded on these vectors
        assert sum(sum(t.overflows) for t in simulate(net, x, progress=False)) > 0
    if qin > 1:
        assert x.max() > 1
    log = run_tb(out, tmp_path)
    assert pass_line(out, 4) in log, log
    assert "FAIL" not in log and "warning" not in log.lower(), log


@pytest.fixture(scope="module")
def trained_exports(tmp_path_factory):
    """Networks converted from CNNs trained on scikit-learn's digits (Alpaydin & Kaynak 1998), 3 vectors each."""
    from _convert_helpers import split, trained
    from snnconvert.convert import convert_model
    out = {}
    for kind, coding, binary in (("conv_max", "payload", True), ("conv_avg", "ttfs", False)):
        (xtr, _), (xte, yte) = split(binary)
        qin = 1 if binary else 3                                  # count frames: payloads 0..3
        net = convert_model(trained(kind, binary), xtr[::10], weight_bits=4, payload_bits=3, coding=coding,
                            per_channel=True, input_q=qin)
        folder = tmp_path_factory.mktemp(kind) / "export"
        export_network(net, folder, arith.quantize_input(xte, qin), yte, vectors=3, progress=False, verilog=True)
        out[kind] = folder
    return out


@pytest.mark.parametrize("kind", ["conv_max", "conv_avg"])
def test_verilog_model_passes_trained_networks(trained_exports, tmp_path, kind):
    log = run_tb(trained_exports[kind], tmp_path)
    assert pass_line(trained_exports[kind], 3) in log, log


def test_testbench_names_the_first_mismatch(trained_exports, tmp_path):
    """A weight word flipped in a .mem file: the model disagrees with the golden vectors at that layer."""
    src = trained_exports["conv_max"]
    out = tmp_path / "export"
    shutil.copytree(src, out)
    mem = out / "L0_conv0_weights.mem" if (out / "L0_conv0_weights.mem").exists() else next(out.glob("L0_*_weights.mem"))
    lines = mem.read_text().split("\n")
    k = next(i for i, w in enumerate(lines) if w and not w.startswith("//"))
    lines[k] = "7" if lines[k] != "7" else "9"                   # 4-bit word 0111 = 7 or 1001 = -7
    mem.write_text("\n".join(lines))
    log = run_tb(out, tmp_path)
    assert "PASS" not in log
    line = next(r for r in log.split("\n") if r.startswith("FAIL"))
    assert line.startswith(f"FAIL: first mismatch: sample 0, layer {mem.name[:-len('_weights.mem')]}, neuron "), line
    assert "expected" in line and "got" in line


def test_generated_from_the_folder_alone_without_torch(trained_exports, tmp_path):
    """The model is generated from the export folder by a Python without torch, and passes."""
    src = trained_exports["conv_avg"]
    out = tmp_path / "export"
    shutil.copytree(src, out, ignore=shutil.ignore_patterns("verilog"))
    code = ("import sys; sys.modules['torch'] = None\n"
            "from snnconvert.export.verilog import write_verilog\n"
            f"write_verilog({str(out)!r}, {str(out / 'hdl')!r})\n"
            "assert 'torch' not in [m.split('.')[0] for m in sys.modules if sys.modules[m] is not None]\n")
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(p for p in sys.path if p))
    subprocess.run([sys.executable, "-c", code], check=True, env=env, timeout=120)
    for f in ("snn_model.v", "snn_tb.v"):                      # the same sources as export --verilog wrote
        assert (out / "hdl" / f).read_text().replace('"hdl/', '"verilog/') == (src / "verilog" / f).read_text()
    log = run_tb(out, tmp_path, tb_dir="hdl")
    assert pass_line(out, 3) in log, log


def test_model_rounds_exact_halves_up(tmp_path):
    """A dense layer whose potentials hit exact halves of the requantization: V*M0/2^n = k + 1/2.

    M0 = 1, n = 1: a = (V + 1) >> 1, so V = 3 gives 2 (halves up; half-to-even gives 2 too), V = 5 gives 3
    (half-to-even would give 2), V = 1 gives 1 (half-down/to-even give 0) - by the manifest's rule."""
    from snnconvert.intnet import IntLayer, IntNetwork
    w = np.array([[1, 1, 1, 1, 1, 1], [1, 1, 1, 0, 0, 0], [1, 0, 0, 0, 0, 0], [2, 2, 1, 0, 0, 0]])  # (4, 6)
    layers = [IntLayer("hid", "dense", (6,), (4,), weight=w, bias=np.array([-1, 0, 0, 0]), m0=np.ones(4, np.int64),
                       shift=np.ones(4, np.int64), q_in=1, q_out=7, acc_bits=arith.accumulator_bits(6, 2, 1, 1)),
              IntLayer("out", "dense", (4,), (2,), weight=np.array([[1, 0, 0, 0], [0, 1, 1, 1]]), bias=np.zeros(2, np.int64),
                       m0=np.ones(2, np.int64), shift=np.ones(2, np.int64), q_in=7, q_out=7, is_output=True,
                       acc_bits=arith.accumulator_bits(4, 1, 7, 0))]
    net = IntNetwork(layers, (6, 1, 1), 1, "payload", 3, 3, True, 2, multiplier_bits=2)
    x = np.ones((1, 6, 1, 1), dtype=np.int64)                 # V = 5, 3, 1, 5 in the hidden layer
    out = tmp_path / "export"
    export_network(net, out, x, np.array([0]), vectors=1, progress=False, verilog=True)
    ev = np.load(out / "vectors.npz")["L0_hid.events"]          # sample 0; the directed vectors follow it
    assert ev[ev[:, 0] == 0, 3].tolist() == [3, 2, 1, 3]       # halves up, by hand: (5+1)>>1, (3+1)>>1, (1+1)>>1
    assert pass_line(out, 1) in run_tb(out, tmp_path)


def test_cli_export_verilog_and_packing(tmp_path, capsys):
    from snnconvert.cli import main
    net = small_net("ttfs")
    net.save(tmp_path / "net")
    x, y = small_inputs(3)
    np.savez(tmp_path / "in.npz", x=x, y=y)
    args = ["export", str(tmp_path / "net"), str(tmp_path / "out"), "--inputs", str(tmp_path / "in.npz"),
            "--vectors", "2", "--no-csv", "--quiet"]
    assert main(args + ["--pack-bits", "-1"]) == 2
    assert capsys.readouterr().err == ("error: The 'pack_bits' parameter of export must be an int in [0, 4096]. "
                                       "Got -1 instead.\n")
    assert main(args + ["--verilog", "--pack-bits", "32"]) == 0
    man = json.loads((tmp_path / "out" / "manifest.json").read_text())
    assert man["layers"][0]["tables"]["weight"]["packing"]["lanes"] == 8          # 32 // 4-bit weights
    assert {"verilog/snn_model.v", "verilog/snn_tb.v"} <= set(man["files"])      # listed with their sha256
    assert pass_line(tmp_path / "out", 2) in run_tb(tmp_path / "out", tmp_path)


# --------------------------------------------------------------------------------------- traces + compare

def faulty_trace(src, tmp_path, edit=None):
    """Copy the export `src`, apply `edit(copy)` (a fault in its tables or in the generated model), run the
    testbench with +trace and return (log, compare of the trace with the golden vectors of `src`)."""
    work = tmp_path / "faulty"
    shutil.copytree(src, work)
    if edit is not None:
        edit(work)
    log = run_tb(work, tmp_path, plusargs=["+trace"])
    return log, compare(src, work / "verilog" / "trace")


def _replace(path, old, new):
    text = path.read_text()
    assert text.count(old) == 1, old                            # written once in the model
    path.write_text(text.replace(old, new))


@pytest.fixture(scope="module")
def tie_export(tmp_path_factory):
    """small_net with exact halves reachable in its first layer (see test_cmodel._tie_net), 12 samples."""
    from test_cmodel import _tie_net
    net, x, y = _tie_net("payload")
    out = tmp_path_factory.mktemp("ties") / "export"
    export_network(net, out, x, y, vectors=3, progress=False, verilog=True)
    return net, out


def test_trace_of_the_model_matches_and_verify_passes(tie_export, tmp_path):
    from snnconvert.export.verify import verify
    net, src = tie_export
    log, res = faulty_trace(src, tmp_path)
    n = json.loads((src / "manifest.json").read_text())["vectors"]["count"]
    assert pass_line(src, 3) in log and f"trace: {n} samples -> verilog/trace" in log, log
    assert res.passed, res.summary()
    # every golden table is compared: the input, conv1/conv2/fc potentials and events, pool1 events, the
    # output potentials and both decisions
    assert len(res.rows) == 1 + 3 * 2 + 1 + 3 and all(r[2] == r[3] == n for r in res.rows), res.table()
    assert verify(tmp_path / "faulty", progress=False).passed     # the trace beside the export does not disturb it


def test_compare_finds_a_flipped_weight_word_in_the_verilog_trace(trained_exports, tmp_path):
    src = trained_exports["conv_max"]
    man = json.loads((src / "manifest.json").read_text())
    spec = man["layers"][0]["tables"]["weight"]                # first layer, word 0: output channel 0

    def edit(work):
        lines = (work / spec["file"]).read_text().split("\n")
        k = next(i for i, w in enumerate(lines) if w and not w.startswith("//"))
        lines[k] = format((int(lines[k], 16) ^ 1), "x")           # W -> W xor 1 in the 4-bit word
        (work / spec["file"]).write_text("\n".join(lines))
    log, res = faulty_trace(src, tmp_path, edit)
    lid = man["layers"][0]["id"]
    assert "PASS" not in log and "trace: " in log
    assert (res.first.sample, res.first.layer, res.first.what) == (0, lid, "potentials"), res.summary()
    assert res.first.index[0] == 0
    assert main(["compare", str(src), str(tmp_path / "faulty" / "verilog" / "trace"), "--quiet"]) == 1


def test_compare_finds_a_rounding_unit_that_rounds_halves_down_in_the_verilog_trace(tie_export, tmp_path):
    net, src = tie_export
    half_down = ROUND_LINE.replace("(64'sd1 <<< (n - 1))", "(64'sd1 <<< (n - 1)) - 1")
    log, res = faulty_trace(src, tmp_path, lambda w: _replace(w / "verilog" / "snn_model.v", ROUND_LINE, half_down))
    man = json.loads((src / "manifest.json").read_text())
    tie = next(d for d in man["vectors"]["directed"] if d["kind"] == "tie")
    assert "PASS" not in log
    assert (res.first.layer, res.first.what) == (tie["layer"], "events"), res.summary()
    row = next(r for r in res.rows if r[:2] == [tie["layer"], "events"])
    assert row[3] < row[2]
    z = np.load(src / "vectors.npz")
    ev = z[f"{tie['layer']}.events"]
    text = (tmp_path / "faulty" / "verilog" / "trace" / f"sample_{tie['sample']:04d}" / f"{tie['layer']}.csv").read_text()
    got = np.asarray([[int(v) for v in r.split(",")] for r in text.split("\n")[1:] if r], np.int64).reshape(-1, 3)
    assert not np.array_equal(got, ev[ev[:, 0] == tie["sample"], 1:])   # the tie vector fails


def test_compare_finds_a_saturating_adder_in_the_verilog_trace(tmp_path):
    from test_cmodel import check_saturating_adder
    net = limited(small_net("payload"), 6, "saturate")
    x, y = small_inputs(4)
    src = tmp_path / "export"
    export_network(net, src, x, y, vectors=4, progress=False, verilog=True)
    hi = (1 << 5) - 1                                          # 6-bit two's complement: -32..31
    sat = f"      acc = v + x > {hi} ? {hi} : (v + x < {-hi - 1} ? {-hi - 1} : v + x);"
    log, res = faulty_trace(src, tmp_path, lambda w: _replace(w / "verilog" / "snn_model.v", ACC_LINE, sat))
    assert "PASS" not in log
    check_saturating_adder(net, src, res)


def test_compare_orders_verilog_events_unless_unordered(tie_export, tmp_path):
    net, src = tie_export
    _, res = faulty_trace(src, tmp_path)
    trace = tmp_path / "faulty" / "verilog" / "trace"
    assert res.passed
    path = next(p for p in sorted(trace.glob("sample_*/L0_*.csv")) if ".potentials" not in p.name
                and len(p.read_text().split("\n")) > 4)
    lines = [r for r in path.read_text().split("\n") if r]
    path.write_text("\n".join([lines[0]] + lines[1:][::-1]) + "\n")   # the same events, reversed
    res = compare(src, trace)
    assert (res.first.sample, res.first.layer, res.first.what) == (int(path.parent.name[7:]), path.stem, "events")
    assert compare(src, trace, unordered=True).passed
    assert main(["compare", str(src), str(trace), "--unordered", "--quiet"]) == 0
