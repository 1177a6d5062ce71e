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

import re

import numpy as np

from snnconvert.errors import FormatError
from snnconvert.export.memfile import fits, from_words, hex_digits, to_words

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


# --- reading the images back (verify) ----------------------------------------------------------
_RADIX = {"HEX": 16, "BIN": 2, "OCT": 8, "DEC": 10, "UNS": 10}
_COE_RADIX = (2, 10, 16)


def unpack_words(words: list[int], lines: list[int], bits: int, signed: bool, pack: dict, depth: int,
                 name: str) -> tuple[np.ndarray, np.ndarray]:
    """Inverse of `pack_words`: v[m*lanes + j] = (memory_word[m] >> (j*bits)) mod 2^bits, sign-extended when
    signed; returns (values (depth,), line of each value). Unused lanes and bits above lanes*bits must be 0
    (LANE_ORDER): anything else is a FormatError naming the line."""
    lanes, mask = pack["lanes"], (1 << bits) - 1
    if len(words) != pack["depth"]:
        raise FormatError(f"{name}: {len(words)} memory words, the manifest says {pack['depth']}")
    vals, where = [], []
    for m, (w, line) in enumerate(zip(words, lines)):
        if w >> pack["word_bits"]:
            raise FormatError(f"{name} line {line}: word {w:#x} is wider than {pack['word_bits']} bits")
        used = min(lanes, depth - m * lanes)
        if w >> (used * bits):
            raise FormatError(f"{name} line {line}: bits above lane {used - 1} must be 0 ({LANE_ORDER})")
        vals += [(w >> (j * bits)) & mask for j in range(used)]
        where += [line] * used
    return from_words(vals, bits, signed), np.asarray(where, dtype=np.int64)


def _statements(text: str, comment: str, sep: str) -> list[tuple[str, list[tuple[str, int]]]]:
    """`key = value ... ;` statements as (lowercase key, [(value token, 1-based line)]). Comments run from
    `comment` to the end of the line; value tokens are separated by white space and `sep` characters."""
    toks = []
    for lineno, raw in enumerate(text.split("\n"), start=1):
        code = raw.split(comment, 1)[0]
        toks += [(m.group(0), lineno) for m in re.finditer(rf"[^\s;={re.escape(sep)}]+|=|;", code)]
    out, i = [], 0
    while i < len(toks):
        if i + 1 >= len(toks) or toks[i + 1][0] != "=":
            raise FormatError(f"line {toks[i][1]}: expected 'key = value;', found {toks[i][0]!r}")
        key, values, i = toks[i][0].lower(), [], i + 2
        while i < len(toks) and toks[i][0] != ";":
            values.append(toks[i])
            i += 1
        if i == len(toks):
            raise FormatError(f"line {toks[-1][1]}: the statement {key!r} is not ended by ';'")
        out.append((key, values))
        i += 1
    return out


def parse_coe(text: str, bits: int, signed: bool, pack: dict, depth: int,
              name: str = ".coe file") -> tuple[np.ndarray, np.ndarray]:
    """Read a .coe image (the syntax in the module docstring; radix 2, 10 or 16) back into `depth` table words.

    Returns (values, line of each value). Errors name the file and line: a statement that is not
    `key = value;`, a missing radix or vector, a token that is not a number in the radix, a word wider than
    the memory word, nonzero unused lanes, the wrong number of words."""
    try:
        st = dict(_coe_statements(text))
    except FormatError as exc:
        raise FormatError(f"{name} {exc}") from None
    if "memory_initialization_radix" not in st or "memory_initialization_vector" not in st:
        raise FormatError(f"{name}: needs memory_initialization_radix= and memory_initialization_vector=")
    rtok, rline = (st["memory_initialization_radix"] or [("", 0)])[0]
    if rtok not in ("2", "10", "16") or len(st["memory_initialization_radix"]) != 1:
        raise FormatError(f"{name} line {rline}: radix {rtok!r} (supported: 2, 10, 16)")
    radix, words, lines = int(rtok), [], []
    for tok, line in st["memory_initialization_vector"]:
        try:
            words.append(int(tok, radix))
        except ValueError:
            raise FormatError(f"{name} line {line}: {tok!r} is not a radix-{radix} word") from None
        lines.append(line)
    return unpack_words(words, lines, bits, signed, pack, depth, name)


def _coe_statements(text: str):
    """.coe comments are whole lines that start with ';' (the statement end is ';' too)."""
    lines = ["" if line.lstrip().startswith(";") else line for line in text.split("\n")]
    return _statements("\n".join(lines), "\x00", ",")


def parse_mif(text: str, bits: int, signed: bool, pack: dict, depth: int,
              name: str = ".mif file") -> tuple[np.ndarray, np.ndarray]:
    """Read a .mif image (the syntax in the module docstring, plus `[a..b] : data;` runs and `% ... %`
    comments) back into `depth` table words. Returns (values, line of each value).

    The header must state DEPTH = the packed depth and WIDTH = the memory word; every address from 0 to
    DEPTH-1 must be given exactly once. Errors name the file and line."""
    text = re.sub(r"%.*?%", lambda m: "\n" * m.group(0).count("\n"), text, flags=re.S)
    lines = [line.split("--", 1)[0] for line in text.split("\n")]
    begin = next((k for k, line in enumerate(lines) if re.search(r"\bCONTENT\s+BEGIN\b", line, re.I)), None)
    if begin is None:
        raise FormatError(f"{name}: no CONTENT BEGIN")
    try:
        head = {k.upper(): v for k, v in _statements("\n".join(lines[:begin]), "\x00", "")}
    except FormatError as exc:
        raise FormatError(f"{name} {exc}") from None
    opts = {}
    for key in ("DEPTH", "WIDTH", "ADDRESS_RADIX", "DATA_RADIX"):
        if len(head.get(key, [])) != 1:
            raise FormatError(f"{name}: the header needs '{key} = ...;'")
        opts[key] = head[key][0]
    ar, dr = (_RADIX.get(opts[k][0].upper()) for k in ("ADDRESS_RADIX", "DATA_RADIX"))
    if ar is None or dr is None:
        raise FormatError(f"{name}: radix must be one of {', '.join(_RADIX)}")
    for key, want in (("DEPTH", pack["depth"]), ("WIDTH", pack["word_bits"])):
        if opts[key][0] != str(want):
            raise FormatError(f"{name} line {opts[key][1]}: {key} = {opts[key][0]}, the manifest says {want}")
    words, where = [None] * pack["depth"], [0] * pack["depth"]
    end = False
    for lineno, line in enumerate(lines[begin + 1:], start=begin + 2):
        for m in re.finditer(r"\S[^;]*;", line):
            item = m.group(0)[:-1].strip()
            if re.fullmatch(r"END", item, re.I):
                end = True
                break
            addr, sep, data = item.partition(":")
            try:
                lo, _, hi = addr.strip().strip("[]").partition("..")
                lo = int(lo, ar)
                hi = int(hi, ar) if hi else lo
                value = int(data.strip(), dr)
            except ValueError:
                raise FormatError(f"{name} line {lineno}: expected 'address : data;', found {item!r}") from None
            if not sep or hi < lo or hi >= pack["depth"]:
                raise FormatError(f"{name} line {lineno}: address {addr.strip()} is outside 0..{pack['depth'] - 1}")
            for a in range(lo, hi + 1):
                if words[a] is not None:
                    raise FormatError(f"{name} line {lineno}: address {a} was already given on line {where[a]}")
                words[a], where[a] = value, lineno
        if end:
            break
    if not end:
        raise FormatError(f"{name}: no END;")
    if None in words:
        raise FormatError(f"{name}: address {words.index(None)} is not given")
    return unpack_words(words, where, bits, signed, pack, depth, name)
