"""Export: memory-file format, tables, manifest, golden vectors against torch, determinism, CLI."""

import json

import numpy as np
import pytest
import torch
import torch.nn.functional as F

from snnconvert import arith
from snnconvert.cli import main
from snnconvert.errors import FormatError, UsageError
from snnconvert.export import LAYER_FIELDS, MANIFEST_FIELDS, TABLE_FIELDS, export_network
from snnconvert.export import memfile as MF
from snnconvert.intnet import IntLayer, IntNetwork
from snnconvert.settings.export import KEYS

torch.set_num_threads(2)


def small_net(coding="payload", pool="maxpool", payload_bits=3, weight_bits=4, seed=0, input_q=1):
    """Hand-built seeded network (1, 6, 6) -> conv 3x3 pad 1 -> pool 2 -> conv 2x2 -> dense 3 (output)."""
    rng = np.random.default_rng(seed)
    wm, q = arith.weight_max(weight_bits), arith.payload_max(payload_bits)

    def mult(o, m):
        return arith.fixed_point_multiplier(m * rng.uniform(0.8, 1.2, o), bits=12)

    qin2 = q if pool == "maxpool" else 4 * q       # a sumpool hands on the sum of 4 payloads
    m0a, na = mult(3, 0.5)
    m0b, nb = mult(4, 0.1 if pool == "maxpool" else 0.03)
    m0c, nc = mult(3, 0.2)
    layers = [
        IntLayer("conv1", "conv", (1, 6, 6), (3, 6, 6), (3, 3), (1, 1), (1, 1), rng.integers(-wm, wm + 1, (3, 1, 3, 3)),
                 rng.integers(-2, 3, 3), m0a, na, q_in=input_q, q_out=q, acc_bits=arith.accumulator_bits(9, wm, input_q, 2)),
        IntLayer("pool1", pool, (3, 6, 6), (3, 3, 3), (2, 2), (2, 2), q_in=q, q_out=q if pool == "maxpool" else 0),
        IntLayer("conv2", "conv", (3, 3, 3), (4, 2, 2), (2, 2), (1, 1), (0, 0), rng.integers(-wm, wm + 1, (4, 3, 2, 2)),
                 rng.integers(-3, 4, 4), m0b, nb, q_in=qin2, q_out=q, acc_bits=arith.accumulator_bits(12, wm, qin2, 3)),
        IntLayer("fc", "dense", (16,), (3,), weight=rng.integers(-wm, wm + 1, (3, 16)), bias=rng.integers(-20, 21, 3),
                 m0=m0c, shift=nc, q_in=q, q_out=q, is_output=True, acc_bits=arith.accumulator_bits(16, wm, q, 20)),
    ]
    return IntNetwork(layers, (1, 6, 6), input_q, coding, payload_bits, weight_bits, True, 3, multiplier_bits=12)


def small_inputs(n=12, seed=1, input_q=1):
    rng = np.random.default_rng(seed)
    x = rng.integers(0, input_q + 1, (n, 1, 6, 6)) * (rng.random((n, 1, 6, 6)) < 0.5)   # (N, C, H, W)
    return x.astype(np.int64), rng.integers(0, 3, n)


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    net = small_net()
    x, y = small_inputs()
    out = tmp_path_factory.mktemp("exp") / "export"
    export_network(net, out, x, y, vectors=6, intel_hex=True, progress=False)
    return net, x, y, out


# ---------------------------------------------------------------- memory-file format

@pytest.mark.parametrize("bits,digits", [(1, 1), (4, 1), (5, 2), (8, 2), (9, 3), (16, 4), (17, 5)])
def test_hex_digits_is_ceil_bits_over_4(bits, digits):
    # exactly ceil(bits/4) hex digits per word (common practice for $readmemh tables)
    assert MF.hex_digits(bits) == digits


@pytest.mark.parametrize("values,bits,words", [
    ([-1, 0, 1], 4, ["f", "0", "1"]),              # two's complement of -1 in 4 bits is 1111 (common practice)
    ([-3, 3], 6, ["3d", "03"]),                    # two's complement: -3 -> 2^6 - 3 = 61 = 0x3d (common practice)
    ([-8, 7], 4, ["8", "7"]),                      # full 4-bit range [-2^3, 2^3 - 1]: 1000, 0111 (common practice)
    ([-128, 127, -1], 8, ["80", "7f", "ff"]),      # 8-bit two's complement: 2^8 - 128, 127, 2^8 - 1 (common practice)
    ([-256], 9, ["100"]),                          # 2^9 - 256 = 0x100; 9 bits: ceil(9/4) = 3 digits (common practice)
])
def test_format_mem_twos_complement(values, bits, words):
    text = MF.format_mem(values, bits, True, ["t"])
    assert text.split("\n")[1:-1] == words
    back, lines = MF.parse_mem(text, bits, True, len(values))
    assert back.tolist() == values and lines.tolist() == list(range(2, 2 + len(values)))


@pytest.mark.parametrize("values,bits,signed", [([8], 4, True), ([-9], 4, True), ([16], 4, False), ([-1], 4, False)])
def test_format_mem_refuses_values_wider_than_the_word(values, bits, signed):
    with pytest.raises(ValueError, match="do not fit"):
        MF.format_mem(values, bits, signed, [])


@pytest.mark.parametrize("text,values", [
    ("// c\n1\n2\n3\n", [1, 2, 3]),                # // comments and whitespace (IEEE 1364-2005 17.2.9)
    ("1 2\n3 // tail comment\n", [1, 2, 3]),      # any whitespace separates words (same source)
    ("/* block\n comment */ 1\n2\n3", [1, 2, 3]),  # /* */ comments (same source)
    ("@2 3\n@0 1 2\n", [1, 2, 3]),                 # @hhhh address lines (IEEE 1364-2005 17.2.9)
    ("F\nE\n0_1\n", [-1, -2, 1]),                  # 4-bit two's complement F=-1, E=-2 (common practice);
                                                   # underscores are allowed in Verilog numbers
                                                   # (IEEE 1364-2005 3.5.1, from memory)
])
def test_parse_mem_accepts_what_readmemh_reads(text, values):
    assert MF.parse_mem(text, 4, True, 3)[0].tolist() == values


# the project's own messages; line numbers and addresses hand-counted in each text (depth 3, 4-bit words)
@pytest.mark.parametrize("text,match", [
    ("1\n2\n", "1 of 3 words missing"),
    ("1\n2\n3\n4\n", "line 4: address 3 is outside"),
    ("1\n2\n10\n", "line 3: word '10' is wider than 4 bits"),
    ("1\nx\n3\n", "line 2: 'x' is not a hex word"),
    ("1\n2\n@1 3\n", "line 3: address 1 was already given on line 2"),
    ("@g 1\n", "line 1: bad address"),
])
def test_parse_mem_errors_name_the_line(text, match):
    with pytest.raises(FormatError, match=match):
        MF.parse_mem(text, 4, True, 3)


# formula: smallest b with -2^(b-1) <= v <= 2^(b-1) - 1 (two's complement range, common practice), and at
# least 2 bits so an all-zero table keeps a sign bit (the project's rule); e.g. -129 < -2^7 needs 9 bits
@pytest.mark.parametrize("values,bits", [([0, 0], 2), ([1], 2), ([-2], 2), ([2], 3), ([-129], 9), ([127, -128], 8)])
def test_signed_bits_is_the_smallest_twos_complement_width(values, bits):
    assert MF.signed_bits(values) == bits


def test_csv_table_round_trip_and_errors():
    a = np.arange(-6, 6).reshape(2, 3, 2)
    text = MF.format_csv(a, ["o", "i", "k"])
    assert text.split("\n")[:3] == ["o,i,k,value", "0,0,0,-6", "0,0,1,-5"]
    back, lines = MF.parse_csv_table(text, ["o", "i", "k"], a.shape)
    # hand-computed: row-major flat index of [1, 2, 1] in shape (2, 3, 2) is 1*6 + 2*2 + 1 = 11; +1 header, 1-based
    assert np.array_equal(back, a) and lines[1, 2, 1] == 13
    with pytest.raises(FormatError, match="line 3: index \\[0, 0, 0\\] was already given on line 2"):
        MF.parse_csv_table(text.replace("0,0,1,-5", "0,0,0,-5"), ["o", "i", "k"], a.shape)


@pytest.mark.parametrize("address,rtype,data,record", [
    (0, 0x01, b"", ":00000001FF"),                 # end-of-file record (Intel HEX-86 specification)
    (0, 0x04, b"\xff\xff", ":02000004FFFFFC"),     # extended linear address example (same source)
    (0x0010, 0x00, b"\x3d", ":010010003DB2"),       # 01+00+10+00+3D = 0x4E; 0x100 - 0x4E = 0xB2
])
def test_intel_hex_records(address, rtype, data, record):
    assert MF.hex_record(address, rtype, data) == record


def test_intel_hex_round_trip_with_extended_addresses_and_errors():
    rng = np.random.default_rng(0)
    v = rng.integers(-(2 ** 11), 2 ** 11, 70000)          # 70,000 words of 12 bits: crosses the 64 Ki boundary
    text = MF.format_intel_hex(v, 12, True)
    recs = text.split("\n")
    assert recs[0] == MF.hex_record(0, 0, int(v[0] & 0xFFF).to_bytes(2, "big"))
    # one data record per word with address = word address (README), so record 65536 is the type 04 record for
    # upper address 0x0001: checksum 0x100 - (02+00+00+04+00+01) = 0xF9 (Intel HEX-86 specification)
    assert recs[65536] == ":020000040001F9" and recs[-2] == ":00000001FF"
    back, lines = MF.parse_intel_hex(text, 12, True, v.size)
    # hand-computed: word 65536 follows 65536 data records and the type 04 record -> 1-based line 65538
    assert np.array_equal(back, v) and lines[65536] == 65538
    bad = text.replace(recs[3], recs[3][:-2] + format((int(recs[3][-2:], 16) + 1) & 0xFF, "02X"))
    with pytest.raises(FormatError, match="line 4: checksum mismatch"):
        MF.parse_intel_hex(bad, 12, True, v.size)
    with pytest.raises(FormatError, match="end-of-file record :00000001FF is missing"):
        MF.parse_intel_hex(text.replace(":00000001FF", ""), 12, True, v.size)


# ---------------------------------------------------------------- tables and manifest

def test_tables_hold_the_network_exactly(exported):
    net, _, _, out = exported
    man = json.loads((out / "manifest.json").read_text())
    z = np.load(out / "tables.npz", allow_pickle=False)
    for d in man["layers"]:
        L = net.layers[d["index"]]
        if L.weight is None:
            assert "tables" not in d
            continue
        for kind, spec in d["tables"].items():
            want = np.asarray(getattr(L, kind))
            assert np.array_equal(z[spec["npz_key"]], want)
            vals, _ = MF.parse_mem((out / spec["file"]).read_text(), spec["bits"], spec["signed"], spec["depth"])
            assert np.array_equal(vals.reshape(spec["shape"]), want)
            words = [w for w in (out / spec["file"]).read_text().split("\n") if w and not w.startswith("//")]
            assert {len(w) for w in words} == {MF.hex_digits(spec["bits"])}
            hv, _ = MF.parse_intel_hex((out / spec["intel_hex"]).read_text(), spec["bits"], spec["signed"], spec["depth"])
            assert np.array_equal(hv.reshape(spec["shape"]), want)
        assert d["weight_bits"] == net.weight_bits == d["tables"]["weight"]["bits"]
        assert d["bias"] == L.bias.tolist() and d["m0"] == L.m0.tolist() and d["shift"] == L.shift.tolist()
        assert d["threshold"] == pytest.approx((2.0 ** L.shift / L.m0).tolist())
    conv1 = man["layers"][0]["tables"]["weight"]
    # torch's Conv2d weight order (O, I, kH, kW); depth = 3*1*3*3 = 27 words (hand-computed from small_net)
    assert conv1["layout"] == "[out_channel][in_channel][ky][kx]" and conv1["depth"] == 27
    assert man["layers"][3]["tables"]["weight"]["layout"] == "[out_channel][in_index]"
    head = (out / conv1["file"]).read_text().split("\n")[:4]
    assert head[0] == "// snnconvert export: layer L0_conv1 (conv), table weight"
    # a 4-bit memory of 27 words in Verilog declaration syntax (IEEE 1364-2005 4.9 and 17.2.9, from memory)
    assert head[3] == '// Verilog: reg [3:0] mem [0:26]; initial $readmemh("L0_conv1_weights.mem", mem);'


def test_every_manifest_field_is_documented(exported):
    man = json.loads((exported[3] / "manifest.json").read_text())
    assert set(man) == set(MANIFEST_FIELDS)
    for d in man["layers"]:
        assert set(d) <= set(LAYER_FIELDS)
        for spec in d.get("tables", {}).values():
            assert set(spec) == set(TABLE_FIELDS)
    # row-major (C-order, as numpy) address of conv1's output shape (3, 6, 6): strides 36, 6, 1 (hand-computed)
    assert man["layers"][0]["address"] == "addr = c*36 + y*6 + x  (c < 3, y < 6, x < 6)"
    assert man["rounding"]["formula"] == arith.ROUNDING_FORMULA
    assert man["format"] == "snnconvert-export" and man["version"] == 2     # the project's format name, version 2 (front-end vectors)
    from snnconvert.export.manifest import fields_markdown
    md = fields_markdown()
    assert all(f"| `{k}` |" in md for k in [*MANIFEST_FIELDS, *LAYER_FIELDS, *TABLE_FIELDS])


def test_manifest_lists_every_file_with_its_sha256(exported):
    import hashlib
    out = exported[3]
    man = json.loads((out / "manifest.json").read_text())
    on_disk = {p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file()} - {"manifest.json"}
    assert set(man["files"]) == on_disk
    for rel, digest in man["files"].items():
        assert hashlib.sha256((out / rel).read_bytes()).hexdigest() == digest


# ---------------------------------------------------------------- golden vectors against torch

def _torch_forward(net, x):
    """Per-layer outputs of the integer network computed with torch float64 convolutions (exact here:
    every sum is far below 2^53) and the requantization formula floor(V * M0 / 2^n + 1/2) (round half up)."""
    a = torch.from_numpy(x).double()                                            # (N, C, H, W)
    outs, pot = [], None
    for L in net.layers:
        if L.kind in ("conv", "dense"):
            W, B = torch.from_numpy(L.weight).double(), torch.from_numpy(L.bias).double()
            if L.kind == "conv":
                v = F.conv2d(a, W, B, stride=L.stride, padding=L.padding)       # (N, O, H', W')
                shp = (1, -1, 1, 1)
            else:
                v = F.linear(a.flatten(1), W, B)                                # (N, O)
                shp = (1, -1)
            if L.is_output:
                pot = v.long().numpy()
            m = torch.from_numpy(L.m0 / 2.0 ** L.shift).reshape(shp)
            a = torch.clamp(torch.floor(v * m + 0.5), 0, L.q_out)
        elif L.kind == "maxpool":
            a = F.max_pool2d(a, L.kernel, L.stride)
        else:
            a = F.avg_pool2d(a, L.kernel, L.stride) * (L.kernel[0] * L.kernel[1])
        outs.append(None if L.kind == "sumpool" else a.long().numpy().reshape(len(x), -1))
    return outs, pot


@pytest.mark.parametrize("coding,pool", [("payload", "maxpool"), ("payload", "sumpool"), ("ttfs", "maxpool"),
                                         ("ttfs", "sumpool"), ("binary", "maxpool")])
def test_golden_vectors_match_torch(tmp_path, coding, pool):
    net = small_net(coding, pool, payload_bits=1 if coding == "binary" else 3)
    x, y = small_inputs(8)
    export_network(net, tmp_path / "e", x, y, vectors=8, progress=False)
    z = np.load(tmp_path / "e" / "vectors.npz", allow_pickle=False)
    idx = z["sample_index"]                                         # -1: a directed vector after the test samples
    assert np.array_equal(z["x"][idx >= 0], x[idx[idx >= 0]])
    outs, pot = _torch_forward(net, z["x"])                         # every golden input, directed ones included
    assert np.array_equal(z["potentials"], pot)
    assert np.array_equal(z["decision"], np.argmax(pot, axis=1))    # numpy argmax: first maximum on ties
    for i, L in enumerate(net.layers):
        key = f"L{i}_{L.name}.events"
        if L.kind == "sumpool":
            assert key not in z
            continue
        if L.is_output and coding != "ttfs":
            assert z[key].shape == (0, 4)   # payload coding reads the output potentials, no output events
            continue
        for s in range(len(idx)):
            ev = z[key][z[key][:, 0] == s, 1:]
            addr = np.flatnonzero(outs[i][s])
            val = outs[i][s][addr]
            if coding == "ttfs":          # spike at t = Q - a; golden order: by step, then address
                t = L.q_out - val
                order = np.lexsort((addr, t))
                want = np.column_stack([addr[order], t[order], val[order]])
            else:
                want = np.column_stack([addr, np.zeros_like(addr), val])
            assert np.array_equal(ev, want), (key, s)


def test_vectors_pick_every_class_round_robin(exported):
    _, x, y, out = exported
    z = np.load(out / "vectors.npz", allow_pickle=False)
    # labels of the first 12 seeded samples; 6 vectors take each class's first, then second sample
    test = z["directed"] == 0                                       # the test samples come first, then directed ones
    assert test.sum() == 6 and test[:6].all() and np.all(z["sample_index"][~test] == -1)
    idx = z["sample_index"][test]
    assert sorted(set(y[idx].tolist())) == sorted(set(y.tolist()))
    assert np.array_equal(z["label"][test], y[idx]) and np.array_equal(z["x"][test], x[idx])
    rows = (out / "vectors/sample_0002/L0_conv1.csv").read_text().split("\n")
    ev = z["L0_conv1.events"]
    assert rows[0] == "addr,t,payload" and len(rows) - 2 == int((ev[:, 0] == 2).sum())


# ---------------------------------------------------------------- determinism and folder handling

def test_two_exports_are_byte_identical_but_for_created(tmp_path):
    net = small_net("ttfs")
    x, y = small_inputs()
    for name in ("a", "b"):
        export_network(net, tmp_path / name, x, y, vectors=4, progress=False)
    files = sorted(p.relative_to(tmp_path / "a") for p in (tmp_path / "a").rglob("*") if p.is_file())
    assert files == sorted(p.relative_to(tmp_path / "b") for p in (tmp_path / "b").rglob("*") if p.is_file())
    for rel in files:
        a, b = (tmp_path / "a" / rel).read_bytes(), (tmp_path / "b" / rel).read_bytes()
        if rel.name == "manifest.json":
            ma, mb = json.loads(a), json.loads(b)
            ma.pop("created"), mb.pop("created")
            assert ma == mb
            assert a.replace(json.loads(a)["created"].encode(), b"") == b.replace(json.loads(b)["created"].encode(), b"")
        else:
            assert a == b, rel


def test_reexport_replaces_old_files_and_refuses_foreign_folders(tmp_path):
    x, y = small_inputs()
    export_network(small_net(), tmp_path / "e", x, y, vectors=6, progress=False)
    net2 = small_net()
    net2.layers[0].name = "first"
    export_network(net2, tmp_path / "e", x, y, vectors=0, progress=False)
    names = {p.name for p in (tmp_path / "e").rglob("*")}
    assert "L0_first_weights.mem" in names and "L0_conv1_weights.mem" not in names and "vectors.npz" not in names
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "notes.txt").write_text("mine")
    with pytest.raises(UsageError, match="is not empty and holds no manifest.json"):
        export_network(net2, tmp_path / "other", x, y, progress=False)


def test_reexport_replaces_the_model_folders_and_lists_them(tmp_path):
    """c/ and verilog/ belong to the export: written by it, they are listed with their sha256; a later
    export replaces them (or removes them when not asked for), so no stale model outlives its tables."""
    import hashlib
    from snnconvert.cli import main
    from snnconvert.export.verify import verify
    x, y = small_inputs()
    out = tmp_path / "e"
    export_network(small_net(), out, x, y, vectors=2, progress=False, verilog=True, c_model=True)
    man = json.loads((out / "manifest.json").read_text())
    written = {p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file()} - {"manifest.json"}
    assert set(man["files"]) == written and {"c/snn_model.c", "c/snn_main.c", "verilog/snn_tb.v"} <= written
    for rel in written:
        assert hashlib.sha256((out / rel).read_bytes()).hexdigest() == man["files"][rel]
    n = man["vectors"]["count"]
    assert len(list((out / "verilog" / "trace").iterdir())) == n     # empty folders for the testbench's trace
    (out / "c" / "snn_model").write_bytes(b"an old build")
    (out / "verilog" / "trace" / "sample_0000" / "input.csv").write_text("addr,t,payload\n")
    assert verify(out, progress=False).passed                          # neither the build nor the trace disturbs it
    export_network(small_net("ttfs"), out, x, y, vectors=2, progress=False)
    assert not (out / "c").exists() and not (out / "verilog").exists()
    assert main(["cmodel", str(out), "--quiet"]) == 0 and main(["verilog", str(out), "--quiet"]) == 0
    assert not any(k.startswith(("c/", "verilog/")) for k in json.loads((out / "manifest.json").read_text())["files"])
    assert verify(out, progress=False).passed                          # generated later: present but not listed
    with pytest.raises(UsageError, match="the C model needs golden vectors"):
        export_network(small_net(), out, x, y, vectors=0, progress=False, c_model=True)


@pytest.mark.parametrize("x,labels,vectors,match", [
    (np.zeros((2, 1, 5, 5), np.int64), None, 1, r"must be an int array of shape \(None, 1, 6, 6\)"),
    (np.full((2, 1, 6, 6), 2), None, 1, r"must hold payloads in \[0, 1\]. Got values in \[2, 2\] instead"),
    (np.zeros((2, 1, 6, 6), np.float32), None, 1, "Got float32 of shape"),
    (np.zeros((2, 1, 6, 6), np.int64), np.zeros(3, int), 1, "'labels' parameter of export must be 2 integer labels"),
    (np.zeros((2, 1, 6, 6), np.int64), None, -1, r"'vectors' parameter of export must be an int >= 0. Got -1 instead"),
    # small_net has 3 classes: labels 0..2
    (np.zeros((2, 1, 6, 6), np.int64), np.array([0, 3]), 1, r"must hold class labels in \[0, 2\]. Got 3 at index 1 instead"),
    (np.zeros((2, 1, 6, 6), np.int64), np.array([-1, 0]), 1, r"must hold class labels in \[0, 2\]. Got -1 at index 0 instead"),
])
def test_export_validates_inputs(tmp_path, x, labels, vectors, match):
    with pytest.raises(UsageError, match=match):
        export_network(small_net(), tmp_path / "e", x, labels, vectors=vectors, progress=False)


def test_schema_defaults_carry_reasons():
    # the project's defaults, as the README documents them (`--vectors 16`, CSV on, Intel HEX off)
    assert KEYS["vectors"].default == 16 and KEYS["csv"].default is True and KEYS["intel_hex"].default is False
    assert all(k.reason for k in KEYS.values())


# ---------------------------------------------------------------- CLI

def test_cli_export_with_inputs_file(tmp_path, capsys):
    net = small_net()
    net.save(tmp_path / "net")
    x, y = small_inputs()
    np.savez(tmp_path / "in.npz", x=x, y=y)
    code = main(["export", str(tmp_path / "net"), str(tmp_path / "out"), "--inputs", str(tmp_path / "in.npz"),
                 "--vectors", "3", "--no-csv", "--quiet"])
    assert code == 0
    # 4 tables for each of 3 weighted layers, each as .mem, .coe and .mif, + tables.npz + vectors.npz;
    # small_net (binary input, M0 of 12 significant bits, no declared width) has no reachable tie and no
    # overflow: directed max, min, zero
    assert capsys.readouterr().out == (f"export: 4 layers, 38 files, 3 golden vectors and 3 directed vectors "
                                       f"-> {tmp_path / 'out'}\n")
    assert not (tmp_path / "out" / "vectors").exists()


@pytest.mark.parametrize("args,message", [
    (["export", "{t}/nowhere", "{t}/out"], "error: network folder {t}/nowhere holds no network.json (run `snnconvert convert` first)"),
    (["export", "{t}/net", "{t}/out"], "error: {t}/net/recipe.toml is missing, so the test data is unknown; give --inputs FILE.npz"),
    (["export", "{t}/net", "{t}/out", "--vectors", "-2"], "error: The 'vectors' parameter of export must be an int >= 0. Got -2 instead."),
    (["export", "{t}/net", "{t}/out", "--inputs", "{t}/bad.npz"], "error: {t}/bad.npz: array 'x' (frames as input payloads 0..1, shape (N, 1, 6, 6)) is missing; found ['y'] (a frames file holds the arrays x and y)"),
    (["export", "{t}/net", "{t}/out", "--inputs", "{t}/none.npz"], "error: file not found: {t}/none.npz"),
])
def test_cli_export_usage_errors(tmp_path, capsys, args, message):
    small_net().save(tmp_path / "net")
    np.savez(tmp_path / "bad.npz", y=np.zeros(3, np.int64))
    code = main([a.format(t=tmp_path) for a in args])
    assert code == 2        # usage errors exit 2, as argparse does (common practice; README "exits 0 ... 2")
    assert capsys.readouterr().err == message.format(t=tmp_path) + "\n"


def test_manifest_carries_the_hardware_estimate_of_the_network_folder(tmp_path):
    """export_from_run copies net/metrics.json's cost-model estimate; a malformed one is refused."""
    from snnconvert.errors import FormatError
    from snnconvert.export.fromrun import _hardware_estimate
    assert _hardware_estimate(tmp_path) is None                                    # no metrics.json
    est = {"is_estimate": True, "layers": [], "total": {"block_rams": 5}}
    (tmp_path / "metrics.json").write_text(json.dumps({"hardware_estimate": est}))
    assert _hardware_estimate(tmp_path) == est
    (tmp_path / "metrics.json").write_text(json.dumps({"hardware_estimate": [1, 2]}))
    with pytest.raises(FormatError, match="'hardware_estimate' field"):
        _hardware_estimate(tmp_path)
