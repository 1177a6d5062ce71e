"""Block-RAM images (.coe, .mif), read back by parsers written here from the published syntax, not the writer.

.coe syntax: Xilinx UG896 (Vivado, designing with IP) - `;` comments, `memory_initialization_radix=R;`,
`memory_initialization_vector=` words separated by commas or whitespace, the last followed by `;`.
.mif syntax: Intel Quartus Prime Memory Initialization File - `DEPTH = N;`, `WIDTH = W;`,
`ADDRESS_RADIX = ...;`, `DATA_RADIX = ...;`, `CONTENT BEGIN`, `address : data;` (or `[a..b] : data;`), `END;`,
`--` and `% ... %` comments. Both as collected in the project's hardware-format references.
"""

import json
import re

import numpy as np
import pytest

from snnconvert.export import export_network
from test_export import small_inputs, small_net

RADIX = {"HEX": 16, "BIN": 2, "OCT": 8, "DEC": 10, "UNS": 10}


def read_coe(text: str) -> tuple[int, list[int]]:
    """(radix, words) of a .coe file."""
    body = "\n".join(line.split(";", 1)[0] if line.lstrip().startswith(";") else line for line in text.split("\n"))
    statements = [s.strip() for s in body.split(";") if s.strip()]
    fields = {}
    for st in statements:
        key, _, value = st.partition("=")
        fields[key.strip().lower()] = value
    radix = int(fields["memory_initialization_radix"])
    words = [int(w, radix) for w in re.split(r"[,\s]+", fields["memory_initialization_vector"]) if w]
    return radix, words


def read_mif(text: str) -> tuple[int, int, dict[int, int]]:
    """(depth, width, {address: word}) of a .mif file."""
    text = re.sub(r"%.*?%", " ", text, flags=re.S)
    text = "\n".join(line.split("--", 1)[0] for line in text.split("\n"))
    head, content = re.split(r"\bCONTENT\s+BEGIN\b", text, maxsplit=1, flags=re.I)
    opts = {k.upper(): v.strip() for k, v in re.findall(r"(\w+)\s*=\s*([^;]+);", head)}
    depth, width = int(opts["DEPTH"]), int(opts["WIDTH"])
    ar, dr = RADIX[opts.get("ADDRESS_RADIX", "UNS").upper()], RADIX[opts.get("DATA_RADIX", "UNS").upper()]
    assert re.search(r"\bEND\s*;\s*$", content.strip(), flags=re.I), "no END;"
    words = {}
    for addr, data in re.findall(r"(\[[^\]]+\]|\w+)\s*:\s*(\w+)\s*;", content.rsplit("END", 1)[0]):
        if addr.startswith("["):
            lo, hi = (int(a, ar) for a in addr[1:-1].split(".."))
            for a in range(lo, hi + 1):
                words[a] = int(data, dr)
        else:
            words[int(addr, ar)] = int(data, dr)
    return depth, width, words


def unpack(words: list[int], lane_bits: int, lanes: int, count: int, signed: bool) -> list[int]:
    """Lane j of memory word m is table word m*lanes + j, in bits [j*b + b-1 : j*b]; sign-extend when signed."""
    out = []
    for w in words:
        for j in range(lanes):
            v = (w >> (j * lane_bits)) & ((1 << lane_bits) - 1)
            if signed and v >> (lane_bits - 1):
                v -= 1 << lane_bits                     # two's complement (common practice)
            out.append(v)
    return out[:count]


@pytest.fixture(scope="module", params=[(0, 4), (32, 4), (36, 5), (8, 3)], ids=lambda p: f"pack{p[0]}-w{p[1]}")
def images(request, tmp_path_factory):
    pack_bits, weight_bits = request.param
    x, y = small_inputs(4)
    out = tmp_path_factory.mktemp("fpga") / "export"
    export_network(small_net(weight_bits=weight_bits), out, x, y, vectors=0, progress=False, pack_bits=pack_bits)
    man = json.loads((out / "manifest.json").read_text())
    return pack_bits, out, man, np.load(out / "tables.npz", allow_pickle=False)


def _tables(man):
    return [spec for d in man["layers"] for spec in d.get("tables", {}).values()]


def test_coe_reads_back_every_table(images):
    pack_bits, out, man, npz = images
    for spec in _tables(man):
        want = npz[spec["npz_key"]].reshape(-1).tolist()
        radix, words = read_coe((out / spec["coe"]).read_text())
        p = spec["packing"]
        assert radix == 16
        assert len(words) == p["depth"] == -(-spec["depth"] // p["lanes"])
        assert all(0 <= w < 1 << p["word_bits"] for w in words)
        assert unpack(words, spec["bits"], p["lanes"], spec["depth"], spec["signed"]) == want, spec["coe"]


def test_mif_reads_back_every_table(images):
    pack_bits, out, man, npz = images
    for spec in _tables(man):
        want = npz[spec["npz_key"]].reshape(-1).tolist()
        depth, width, words = read_mif((out / spec["mif"]).read_text())
        p = spec["packing"]
        assert (depth, width) == (p["depth"], p["word_bits"])
        assert sorted(words) == list(range(depth))
        assert all(0 <= w < 1 << width for w in words.values())
        got = unpack([words[a] for a in range(depth)], spec["bits"], p["lanes"], spec["depth"], spec["signed"])
        assert got == want, spec["mif"]


def test_packing_fills_lanes_as_stated(images):
    pack_bits, out, man, npz = images
    weights = man["layers"][0]["tables"]["weight"]
    p = weights["packing"]
    if pack_bits == 0 or pack_bits // weights["bits"] < 2:
        assert p["lanes"] == 1 and p["word_bits"] == weights["bits"]
    else:
        assert p["lanes"] == pack_bits // weights["bits"] and p["word_bits"] == pack_bits
    assert "lane 0 = least significant bits" in p["lane_order"]
    assert any(v < 0 for v in npz[weights["npz_key"]].reshape(-1))      # the round trip covers negative words


@pytest.mark.parametrize("values,bits,lanes,word", [
    ([-1, 2], 4, 2, 0x2F),        # lane 0 = -1 -> 1111 in the low nibble, lane 1 = 2 -> 0010 (two's complement, common practice)
    ([-8, 7, -1], 4, 3, 0xF78),   # 1000 | 0111 << 4 | 1111 << 8
    ([-3], 3, 4, 0x5),            # -3 in 3 bits is 101 (two's complement, common practice); missing lanes are 0
])
def test_packed_word_by_hand(tmp_path, values, bits, lanes, word):
    from snnconvert.export.fpga import format_coe, format_mif, packing
    pack = packing(bits, len(values), bits * lanes)
    assert pack["lanes"] == lanes
    assert read_coe(format_coe(values, bits, True, pack, ["t"]))[1] == [word]
    assert read_mif(format_mif(values, bits, True, pack, ["t"]))[2] == {0: word}
    assert unpack([word], bits, lanes, len(values), True) == values


def test_a_corrupt_word_is_seen(images):
    """The read-back can fail: one changed digit changes the unpacked table."""
    pack_bits, out, man, npz = images
    spec = man["layers"][0]["tables"]["weight"]
    text = (out / spec["coe"]).read_text()
    i = text.index("memory_initialization_vector=") + len("memory_initialization_vector=\n")
    flipped = text[:i] + ("1" if text[i] != "1" else "2") + text[i + 1:]
    _, words = read_coe(flipped)
    got = unpack(words, spec["bits"], spec["packing"]["lanes"], spec["depth"], spec["signed"])
    assert got != npz[spec["npz_key"]].reshape(-1).tolist()


def test_images_can_be_left_out(tmp_path):
    x, y = small_inputs(4)
    out = tmp_path / "export"
    export_network(small_net(), out, x, y, vectors=0, progress=False, coe_mif=False)
    man = json.loads((out / "manifest.json").read_text())
    assert all(spec["coe"] is None and spec["mif"] is None and spec["packing"] is None for spec in _tables(man))
    assert not list(out.glob("*.coe")) and not list(out.glob("*.mif"))
