"""verify: reads only the export folder and names the first mismatch exactly."""

import json
import shutil

import numpy as np
import pytest
import torch

from snnconvert import arith
from snnconvert.cli import main
from snnconvert.errors import FormatError, UsageError
from snnconvert.export import export_network, verify
from test_export import small_inputs, small_net

torch.set_num_threads(2)

HEADER_LINES = 4   # '//' lines at the top of every exported memory file


@pytest.fixture(scope="module")
def pristine(tmp_path_factory):
    root = tmp_path_factory.mktemp("pristine")
    x, y = small_inputs()
    for coding in ("payload", "ttfs"):
        export_network(small_net(coding), root / coding, x, y, vectors=5, intel_hex=coding == "payload", progress=False)
    return root


@pytest.fixture
def exp(pristine, tmp_path):
    """A fresh copy of the payload-coded export, free to corrupt."""
    return shutil.copytree(pristine / "payload", tmp_path / "export")


def _snapshot(folder):
    return {p.relative_to(folder).as_posix(): (p.read_bytes(), p.stat().st_mtime_ns)
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.mark.parametrize("coding", ["payload", "ttfs"])
def test_clean_export_passes_and_verify_writes_nothing(pristine, coding, capsys):
    folder = pristine / coding
    before = _snapshot(folder)
    res = verify(folder, progress=False)
    # small_net has 4 layers (conv1, pool1, conv2, fc); 5 test vectors were exported, then the directed ones
    directed = json.loads((folder / "manifest.json").read_text())["vectors"]["directed"]
    assert res.passed and res.samples == 5 + len(directed) and res.layers == 4 and res.first_mismatch is None
    # hand-computed from small_net's shapes: weights O*I*kH*kW (3*1*3*3, 4*3*2*2, 3*16) + bias/m0/shift O each
    assert res.words == 3 * 9 + 3 * 3 + 4 * 12 + 4 * 3 + 3 * 16 + 3 * 3
    assert main(["verify", str(folder), "--quiet"]) == 0
    assert capsys.readouterr().out == res.summary() + "\n"
    assert _snapshot(folder) == before


def _rewrite_line(path, lineno, fn):
    lines = path.read_text().split("\n")
    lines[lineno - 1] = fn(lines[lineno - 1])
    path.write_text("\n".join(lines))


@pytest.mark.parametrize("word", [0, 5, 47])
def test_corrupt_table_word_is_named_by_file_line_and_index(exp, capsys, word):
    man = json.loads((exp / "manifest.json").read_text())
    spec = man["layers"][2]["tables"]["weight"]                       # conv2 weights, shape (4, 3, 2, 2)
    orig = int(np.load(exp / "tables.npz")[spec["npz_key"]].reshape(-1)[word])
    new = orig - 1 if orig > -arith.weight_max(4) else orig + 1
    line = HEADER_LINES + word + 1
    _rewrite_line(exp / spec["file"], line, lambda _: format(new & 0xF, "x"))   # 4-bit two's complement
    res = verify(exp, progress=False)
    m = res.first_mismatch
    assert not res.passed
    assert (m.kind, m.file, m.line, m.layer, m.neuron) == ("table", "L2_conv2_weights.mem", line, "L2_conv2", word)
    # row-major index of the word, numpy.unravel_index as reference
    assert m.index == list(np.unravel_index(word, (4, 3, 2, 2))) and (m.expected, m.got) == (orig, new)
    assert res.sha256_failures == ["L2_conv2_weights.mem"]
    assert main(["verify", str(exp), "--quiet"]) == 1
    out = capsys.readouterr().out
    assert out.startswith(f"verify: FAILED: table mismatch in L2_conv2_weights.mem line {line}: layer L2_conv2, "
                          f"word {word} {m.index}: expected {orig}, got {new} (")


def test_corrupt_csv_table_row_is_named(exp):
    path = exp / "L0_conv1_bias.csv"
    lines = path.read_text().split("\n")
    o, v = map(int, lines[2].split(","))                # bias of out channel 1 (line 3)
    lines[2] = f"{o},{v + 1}"
    path.write_text("\n".join(lines))
    m = verify(exp, progress=False).first_mismatch
    assert (m.kind, m.file, m.line, m.layer, m.neuron, m.index) == ("table", "L0_conv1_bias.csv", 3, "L0_conv1", 1, [1])
    assert (m.expected, m.got) == (v, v + 1)


def test_corrupt_intel_hex_word_is_named(exp):
    path = exp / "L3_fc_m0.hex"
    recs = path.read_text().split("\n")
    b = bytearray(bytes.fromhex(recs[1][1:]))          # word 1 of the fc multipliers
    b[4] ^= 0x01                                       # record bytes LL AAAA(2) TT, so b[4] is the first data byte
    b[-1] = (-sum(b[:-1])) & 0xFF                      # keep the checksum valid: only the value is wrong
                                                       # (two's complement of the byte sum, Intel HEX-86 specification)
    recs[1] = ":" + b.hex().upper()
    path.write_text("\n".join(recs))
    m = verify(exp, progress=False).first_mismatch
    assert (m.kind, m.file, m.line, m.layer, m.neuron) == ("table", "L3_fc_m0.hex", 2, "L3_fc", 1)
    # the flipped bit is the lowest bit of the most significant data byte: data bytes are len(b) - 5 (LL, AAAA, TT,
    # CC), words are written most significant byte first (README), so it has weight 2^(8 * (len(b) - 6))
    assert m.got ^ m.expected == 1 << (8 * (len(b) - 6))


@pytest.mark.parametrize("suffix", ["coe", "mif"])
def test_corrupt_block_ram_image_word_is_named(exp, suffix):
    """One word of the fc bias image changed: verify names the .coe/.mif file, its line and the neuron."""
    man = json.loads((exp / "manifest.json").read_text())
    spec = next(d for d in man["layers"] if d["id"] == "L3_fc")["tables"]["bias"]
    path = exp / spec[suffix]
    lines = path.read_text().split("\n")
    # word 2 of the table (unpacked: one table word per memory word); .coe: the 3rd line after the vector key,
    # .mif: the line `  2 : data;` (Xilinx UG896 / Intel Quartus syntax, from the module docstring of export.fpga)
    k = (lines.index("memory_initialization_vector=") + 3 if suffix == "coe"
         else next(i for i, t in enumerate(lines) if t.strip().split(" ")[0].lstrip("0") == "2"))
    head, tail = lines[k].split(":")[0] + ":" if suffix == "mif" else "", lines[k].split(":")[-1]
    digits = tail.strip().rstrip(",;")
    flipped = format((int(digits, 16) ^ 1), f"0{len(digits)}x")
    lines[k] = head + tail.replace(digits, flipped)
    path.write_text("\n".join(lines))
    m = verify(exp, progress=False).first_mismatch
    assert (m.kind, m.file, m.line, m.layer, m.neuron) == ("table", spec[suffix], k + 1, "L3_fc", 2)
    assert abs(m.got - m.expected) == 1          # the lowest bit of a two's complement word (common practice)


def test_block_ram_image_with_a_missing_word_is_refused(exp, capsys):
    man = json.loads((exp / "manifest.json").read_text())
    spec = next(d for d in man["layers"] if d["id"] == "L3_fc")["tables"]["bias"]
    path = exp / spec["mif"]
    lines = [t for t in path.read_text().split("\n") if t.strip().split(" ")[0].lstrip("0") != "2"]
    path.write_text("\n".join(lines))
    assert main(["verify", str(exp)]) == 2
    assert capsys.readouterr().err == f"error: {exp / spec['mif']}: address 2 is not given\n"


def test_corrupt_vector_line_is_named_by_sample_layer_and_neuron(exp, capsys):
    path = exp / "vectors/sample_0003/L0_conv1.csv"
    addr, t, p = map(int, path.read_text().split("\n")[4].split(","))   # line 5 of the file
    _rewrite_line(path, 5, lambda _: f"{addr},{t},{p % 7 + 1 if p % 7 + 1 != p else p - 1}")
    bad = int(path.read_text().split("\n")[4].split(",")[2])
    res = verify(exp, progress=False)
    m = res.first_mismatch
    assert (m.kind, m.file, m.line, m.sample, m.layer, m.neuron) == ("event", "vectors/sample_0003/L0_conv1.csv", 5, 3,
                                                                   "L0_conv1", addr)
    assert m.index == [addr // 36, addr % 36 // 6, addr % 6]        # (c, y, x) of addr = c*36 + y*6 + x
    assert m.expected == f"(addr {addr}, t {t}, payload {bad})" and m.got == f"(addr {addr}, t {t}, payload {p})"
    assert main(["verify", str(exp), "--quiet"]) == 1
    assert capsys.readouterr().out.startswith(
        f"verify: FAILED: first mismatch: sample 3, layer L0_conv1, neuron {addr} {tuple(m.index)}: "
        f"expected (addr {addr}, t {t}, payload {bad}), got (addr {addr}, t {t}, payload {p}) "
        f"[vectors/sample_0003/L0_conv1.csv line 5]")


def test_deleted_vector_line_shows_the_event_that_moved_up(exp):
    path = exp / "vectors/sample_0001/L2_conv2.csv"
    lines = path.read_text().split("\n")
    first, second = (tuple(map(int, r.split(","))) for r in lines[1:3])
    del lines[1]                                                       # the first event of the sample
    path.write_text("\n".join(lines))
    m = verify(exp, progress=False).first_mismatch
    assert (m.file, m.line, m.sample, m.layer, m.neuron) == ("vectors/sample_0001/L2_conv2.csv", 2, 1, "L2_conv2", second[0])
    assert m.expected == "(addr {}, t {}, payload {})".format(*second)
    assert m.got == "(addr {}, t {}, payload {})".format(*first)


@pytest.mark.parametrize("key,change,kind", [
    ("potentials", lambda z: z["potentials"].__setitem__((2, 1), z["potentials"][2, 1] + 1), "potential"),
    ("decision", lambda z: z["decision"].__setitem__(4, (z["decision"][4] + 1) % 3), "decision"),
    ("L2_conv2.events", lambda z: z["L2_conv2.events"].__setitem__((0, 3), z["L2_conv2.events"][0, 3] + 1), "event"),
])
def test_corrupt_npz_vectors(exp, key, change, kind):
    z = dict(np.load(exp / "vectors.npz", allow_pickle=False))
    change(z)
    np.savez(exp / "vectors.npz", **z)
    m = verify(exp, progress=False).first_mismatch
    assert (m.kind, m.file) == (kind, "vectors.npz")
    if kind == "potential":
        assert (m.sample, m.neuron, m.got, m.expected) == (2, 1, z["potentials"][2, 1] - 1, z["potentials"][2, 1])
    if kind == "event":
        assert (m.sample, m.layer) == (int(z["L2_conv2.events"][0, 0]), "L2_conv2")


def test_consistent_weight_change_is_caught_by_resimulation(exp):
    """All copies of a table changed alike (only the sha256 betrays it): the events must disagree."""
    man = json.loads((exp / "manifest.json").read_text())
    spec = man["layers"][0]["tables"]["weight"]
    z = dict(np.load(exp / "tables.npz", allow_pickle=False))
    w = z[spec["npz_key"]].copy()
    w[0] = arith.weight_max(4)                                        # out channel 0: every tap +7
    z[spec["npz_key"]] = w
    np.savez(exp / "tables.npz", **z)
    from snnconvert.export.memfile import format_csv, format_intel_hex, format_mem
    (exp / spec["file"]).write_text(format_mem(w, 4, True, ["changed"]))
    (exp / spec["csv"]).write_text(format_csv(w, spec["index_names"]))
    (exp / spec["intel_hex"]).write_text(format_intel_hex(w, 4, True))
    from snnconvert.export.fpga import format_coe, format_mif
    (exp / spec["coe"]).write_text(format_coe(w, 4, True, spec["packing"], ["changed"]))
    (exp / spec["mif"]).write_text(format_mif(w, 4, True, spec["packing"], ["changed"]))
    res = verify(exp, progress=False)
    m = res.first_mismatch
    assert (m.kind, m.layer) == ("event", "L0_conv1") and m.neuron < 36   # a neuron of channel 0
    assert set(res.sha256_failures) == {spec["file"], spec["csv"], spec["intel_hex"], spec["coe"], spec["mif"],
                                        "tables.npz"}


def test_changed_bytes_with_equal_values_fail_on_sha256(exp, capsys):
    path = exp / "L3_fc_bias.mem"
    path.write_text(path.read_text() + "// an added comment\n")
    res = verify(exp, progress=False)
    assert not res.passed and res.first_mismatch.kind == "sha256" and res.sha256_failures == ["L3_fc_bias.mem"]
    assert main(["verify", str(exp), "--quiet"]) == 1
    assert capsys.readouterr().out.startswith("verify: FAILED: sha256 of L3_fc_bias.mem differs from the manifest: expected ")


@pytest.mark.parametrize("damage,message", [
    (lambda e: (e / "L3_fc_bias.mem").unlink(), "error: {e}/L3_fc_bias.mem: file listed in the manifest is missing"),
    (lambda e: _rewrite_line(e / "L0_conv1_weights.mem", 7, lambda _: "q"),
     "error: {e}/L0_conv1_weights.mem line 7: 'q' is not a hex word"),
    (lambda e: _rewrite_line(e / "L0_conv1_weights.mem", 7, lambda _: "1f"),
     "error: {e}/L0_conv1_weights.mem line 7: word '1f' is wider than 4 bits"),
    (lambda e: _rewrite_line(e / "vectors/sample_0000/input.csv", 2, lambda _: "1,2"),
     "error: {e}/vectors/sample_0000/input.csv line 2: expected 3 columns, got 2"),
    (lambda e: (e / "manifest.json").write_text("{"), "error: {e}/manifest.json: not valid JSON "),
    (lambda e: shutil.rmtree(e), "error: export folder not found: {e}"),
])
def test_unreadable_or_missing_files_exit_2(exp, capsys, damage, message):
    damage(exp)
    # 2 = unreadable input, 1 = a mismatch, 0 = all match (the project's exit codes, README; argparse uses 2 too)
    assert main(["verify", str(exp), "--quiet"]) == 2
    assert capsys.readouterr().err.startswith(message.format(e=exp))


def test_manifest_of_another_format_is_refused(exp):
    man = json.loads((exp / "manifest.json").read_text())
    man["version"] = 99
    (exp / "manifest.json").write_text(json.dumps(man))
    with pytest.raises(FormatError, match="format version 99 is not supported"):
        verify(exp, progress=False)


def test_cli_json_result_outside_the_folder_only(exp, tmp_path, capsys):
    assert main(["verify", str(exp), "--quiet", "--json", str(tmp_path / "verify.json")]) == 0
    d = json.loads((tmp_path / "verify.json").read_text())
    # 5 test vectors + the directed max, min and all-zero windows of small_net
    assert d["passed"] is True and d["samples"] == 5 + 3 and d["first_mismatch"] is None
    assert main(["verify", str(exp), "--json", str(exp / "v.json")]) == 2
    assert "verify writes nothing inside the export folder" in capsys.readouterr().err
    with pytest.raises(UsageError, match="export folder not found"):
        verify(tmp_path / "nothing")
