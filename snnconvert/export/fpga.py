"""Block-RAM images for FPGA tools: Xilinx coefficient files (.coe) and Intel memory initialisation
files (.mif), optionally with several narrow table words packed into one wide memory word.

Syntax (see the project's hardware-format references):
- .coe (Xilinx UG896): `;` comments, then `memory_initialization_radix=16;` and
  `memory_initialization_vector=` followed by the words separated by commas, the last ended by `;`.
  The file carries no width; the block-RAM configuration gives it.
- .mif (Intel Quartus Memory Initialization File): `--` comments, the header lines `DEPTH = N;`,
  `WIDTH = W;`, `ADDRESS_RADIX = HEX;`, `DATA_RADIX = HEX;`, then `CONTENT BEGIN`, one
  `address : data;` line per word, and `END;`.
Both hold the words in hex, ceil(width/4) digits, negative values as two's complement of the table
word width (common practice), like the `.mem` files.

Packing (lane order): with a memory word of P bits and table words of b bits, L = floor(P / b) lanes
share one memory word. Memory word m holds table words m*L .. m*L + L-1; table word m*L + j sits in
bits [j*b + b-1 : j*b], so lane 0 is the least significant lane:
    memory_word[m] = sum_j (v[m*L + j] mod 2^b) << (j*b)
Lanes past the last table word and the bits above L*b are 0. A table whose word is wider than P/2
(L <= 1) is not packed: one table word per memory word of b bits.
"""

from __future__ import annotations

import numpy as np

from snnconvert.export.memfile import fits, hex_digits, to_words

# Widest packed memory word accepted (a bound on the file size, not a format limit).
MAX_PACK_BITS = 4096
LANE_ORDER = ("lane j of memory word m holds table word m*lanes + j in bits [j*bits + bits-1 : j*bits] "
              "(lane 0 = least significant bits); each lane is the table word mod 2^bits (two's complement); "
              "lanes past the last table word and bits above lanes*bits are 0")


def packing(bits: int, depth: int, pack_bits: int) -> dict:
    """The packed memory shape of a table of `depth` words of `bits` bits: word_bits, lanes, depth.

    pack_bits = 0, or a memory word too narrow for two table words, leaves the table unpacked
    (lanes 1, word_bits = bits)."""
    lanes = int(pack_bits) // int(bits) if pack_bits else 1
    if lanes <= 1:
        return {"word_bits": int(bits), "lanes": 1, "depth": int(depth), "lane_order": LANE_ORDER}
    return {"word_bits": int(pack_bits), "lanes": lanes, "depth": -(-int(depth) // lanes), "lane_order": LANE_ORDER}


def pack_words(values, bits: int, lanes: int) -> list[int]:
    """memory_word[m] = sum_j (v[m*lanes + j] mod 2^bits) << (j*bits); missing lanes are 0.

    Python ints, so a memory word may be wider than 64 bits."""
    w = to_words(values, bits).tolist()
    w += [0] * (-len(w) % lanes)
    return [sum(int(w[m + j]) << (j * bits) for j in range(lanes)) for m in range(0, len(w), lanes)]


def _words(values, bits: int, signed: bool, pack: dict) -> list[int]:
    if not fits(values, bits, signed):
        raise ValueError(f"values do not fit {bits}-bit {'signed' if signed else 'unsigned'} words")
    return pack_words(values, bits, pack["lanes"])


def _header(header: list[str], pack: dict, bits: int) -> list[str]:
    lines = list(header)
    if pack["lanes"] > 1:
        lines.append(f"packed: {pack['lanes']} lanes of {bits} bits per {pack['word_bits']}-bit memory word; "
                     + LANE_ORDER)
    return lines


def format_coe(values, bits: int, signed: bool, pack: dict, header: list[str]) -> str:
    """Xilinx .coe text: `;` comment lines, radix 16, the words comma-separated, the last ended by `;`."""
    words = _words(values, bits, signed, pack)
    d = hex_digits(pack["word_bits"])
    lines = [f"; {h}" for h in _header(header, pack, bits)]
    lines += [f"; {len(words)} words of {pack['word_bits']} bits", "memory_initialization_radix=16;",
              "memory_initialization_vector="]
    lines += [format(w, f"0{d}x") + ("," if k < len(words) - 1 else ";") for k, w in enumerate(words)]
    return "\n".join(lines) + "\n"


def format_mif(values, bits: int, signed: bool, pack: dict, header: list[str]) -> str:
    """Intel .mif text: `--` comment lines, DEPTH/WIDTH/radix header, CONTENT BEGIN, `addr : data;` lines, END;."""
    words = _words(values, bits, signed, pack)
    d, ad = hex_digits(pack["word_bits"]), hex_digits(max(1, (len(words) - 1).bit_length()))
    lines = [f"-- {h}" for h in _header(header, pack, bits)]
    lines += [f"DEPTH = {len(words)};", f"WIDTH = {pack['word_bits']};", "ADDRESS_RADIX = HEX;", "DATA_RADIX = HEX;",
              "CONTENT BEGIN"]
    lines += [f"    {format(k, f'0{ad}x')} : {format(w, f'0{d}x')};" for k, w in enumerate(words)]
    lines.append("END;")
    return "\n".join(lines) + "\n"


def table_images(stem: str, values, spec: dict, header: list[str], pack_bits: int) -> tuple[dict, dict[str, bytes]]:
    """The .coe and .mif files of one table: ({coe, mif, packing} for the manifest, {file: bytes})."""
    a = np.asarray(values, dtype=np.int64)
    pack = packing(spec["bits"], spec["depth"], pack_bits)
    files = {f"{stem}.coe": format_coe(a, spec["bits"], spec["signed"], pack, header).encode(),
             f"{stem}.mif": format_mif(a, spec["bits"], spec["signed"], pack, header).encode()}
    return {"coe": f"{stem}.coe", "mif": f"{stem}.mif", "packing": pack}, files
