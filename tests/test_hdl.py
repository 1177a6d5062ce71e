"""A real HDL simulator (Icarus Verilog) reads every exported memory file with $readmemh."""

import json
import shutil
import subprocess

import numpy as np
import pytest

from snnconvert.export import export_network
from test_export import small_inputs, small_net

IVERILOG, VVP = shutil.which("iverilog"), shutil.which("vvp")
pytestmark = pytest.mark.skipif(
    IVERILOG is None or VVP is None,
    reason="Icarus Verilog (iverilog, vvp) is not installed; .ci/run installs the Debian package iverilog")


def make_testbench(folder, tables) -> str:
    """One module that declares each table as `reg [signed] [bits-1:0] mem [0:depth-1]`, loads it with
    $readmemh and prints `T<k> <address> <decimal> <hex>` for every word. A signed reg prints its
    sign-extended value in %d (IEEE 1364-2005 17.1.1.2, from memory)."""
    lines = ["module tb;", "  integer i;"]
    for k, spec in enumerate(tables):
        sign = "signed " if spec["signed"] else ""
        lines.append(f"  reg {sign}[{spec['bits'] - 1}:0] mem{k} [0:{spec['depth'] - 1}];")
    lines.append("  initial begin")
    for k, spec in enumerate(tables):
        lines.append(f'    $readmemh("{(folder / spec["file"]).as_posix()}", mem{k});')
        lines.append(f'    for (i = 0; i < {spec["depth"]}; i = i + 1) $display("T{k} %0d %0d %h", i, mem{k}[i], mem{k}[i]);')
    lines += ["    $finish;", "  end", "endmodule", ""]
    return "\n".join(lines)


def run_testbench(tmp_path, source: str) -> str:
    (tmp_path / "tb.v").write_text(source)
    subprocess.run([IVERILOG, "-o", str(tmp_path / "tb.vvp"), str(tmp_path / "tb.v")], check=True,
                   capture_output=True, text=True, timeout=120)
    done = subprocess.run([VVP, "-n", str(tmp_path / "tb.vvp")], check=True, capture_output=True, text=True, timeout=120)
    return done.stdout + done.stderr


@pytest.mark.parametrize("weight_bits,coding", [(4, "payload"), (5, "ttfs"), (8, "payload"), (2, "binary")])
def test_iverilog_reads_every_table_as_exported(tmp_path, weight_bits, coding):
    x, y = small_inputs(4)
    out = tmp_path / "export"
    export_network(small_net(coding, payload_bits=1 if coding == "binary" else 3, weight_bits=weight_bits),
                   out, x, y, vectors=0, progress=False)
    man = json.loads((out / "manifest.json").read_text())
    tables = [spec for d in man["layers"] for spec in d.get("tables", {}).values()]
    assert len(tables) == 12                        # 3 weighted layers x (weight, bias, m0, shift) tables
    log = run_testbench(tmp_path, make_testbench(out, tables))
    assert "warning" not in log.lower(), log        # e.g. "Not enough words in the file"
    npz = np.load(out / "tables.npz", allow_pickle=False)
    printed = {}
    for row in log.split("\n"):
        if row.startswith("T"):
            k, addr, dec, hx = row.split()
            printed.setdefault(int(k[1:]), []).append((int(addr), dec, hx))
    for k, spec in enumerate(tables):
        want = npz[spec["npz_key"]].reshape(-1)       # row-major: word address = flat index
        rows = printed[k]
        assert [a for a, _, _ in rows] == list(range(spec["depth"]))
        assert [int(d) for _, d, _ in rows] == want.tolist(), spec["file"]
        words = [w for w in (out / spec["file"]).read_text().split("\n") if w and not w.startswith("//")]
        # %h prints ceil(bits/4) digits, the same digits the file holds
        assert [h for _, _, h in rows] == words, spec["file"]


def test_iverilog_sees_a_corrupt_word(tmp_path):
    """The check can fail: a word changed in the file shows up in the simulator's printout."""
    x, y = small_inputs(4)
    out = tmp_path / "export"
    export_network(small_net(), out, x, y, vectors=0, progress=False)
    man = json.loads((out / "manifest.json").read_text())
    spec = man["layers"][0]["tables"]["weight"]
    path = out / spec["file"]
    lines = path.read_text().split("\n")
    lines[4] = "8"                                   # word 0 (after the 4 header lines) becomes 4-bit 1000 = -8
                                                     # (two's complement, common practice)
    path.write_text("\n".join(lines))
    log = run_testbench(tmp_path, make_testbench(out, [spec]))
    # a signed reg prints -8 with %d and its digit 8 with %h (IEEE 1364-2005 17.1.1.2, from memory)
    assert "T0 0 -8 8" in log.split("\n")
