"""Verilog memory files (`$readmemh`) and CSV tables of integer arrays.

A memory file holds one word per line, exactly ceil(bits/4) hex digits, signed values in two's
complement:  word = v mod 2^bits  (so -1 in 4 bits is `f`, -3 in 6 bits is `3d`).
Words are listed in row-major order of the table (last index fastest), so the word at address
k is `table.ravel()[k]`. The file carries no width of its own: the header comment and the
manifest state it. Reading (`parse_mem`) accepts what IEEE 1364-2005 §17.2.9 allows in a file
(whitespace, `//` and `/* */` comments, `@hhhh` address lines) and refuses anything else.
"""

from __future__ import annotations

import re

import numpy as np

from snnconvert.errors import FormatError

_HEX = re.compile(r"[0-9a-fA-F_]+")


def hex_digits(bits: int) -> int:
    """ceil(bits / 4): the hex digits of one word."""
    return -(-int(bits) // 4)


def signed_bits(values) -> int:
    """Smallest two's complement width b with -2^(b-1) <= v <= 2^(b-1) - 1 for every v (at least 2).

    Two bits minimum so that a table of zeros still has a sign bit, like every other signed table.
    """
    v = np.asarray(values, dtype=np.int64)
    if v.size == 0:
        return 2
    hi, lo = max(int(v.max()), 0), min(int(v.min()), 0)
    return max(2, hi.bit_length() + 1, (-lo - 1).bit_length() + 1)


def unsigned_bits(values) -> int:
    """Smallest width b with 0 <= v <= 2^b - 1 for every v (at least 1)."""
    v = np.asarray(values, dtype=np.int64)
    if v.size and int(v.min()) < 0:
        raise ValueError("unsigned table holds a negative value")
    return max(1, int(v.max()).bit_length() if v.size else 1)


def fits(values, bits: int, signed: bool) -> bool:
    v = np.asarray(values, dtype=np.int64)
    if v.size == 0:
        return True
    lo, hi = (-(1 << (bits - 1)), (1 << (bits - 1)) - 1) if signed else (0, (1 << bits) - 1)
    return bool(v.min() >= lo and v.max() <= hi)


def to_words(values, bits: int) -> np.ndarray:
    """word = v mod 2^bits (two's complement for negatives), as int64 (bits <= 62)."""
    return np.asarray(values, dtype=np.int64).ravel() & ((1 << bits) - 1)


def from_words(words, bits: int, signed: bool) -> np.ndarray:
    """Inverse of `to_words`: sign-extend bit (bits-1) when signed: v = w - 2^bits if w >= 2^(bits-1)."""
    w = np.asarray(words, dtype=np.int64)
    if not signed:
        return w
    return np.where(w >= (1 << (bits - 1)), w - (1 << bits), w)


def format_mem(values, bits: int, signed: bool, header: list[str]) -> str:
    """The text of a memory file: `//` header lines, then one word per line, no address lines.

    Values that do not fit the width are refused (a simulator would silently drop high bits).
    """
    if not 1 <= bits <= 62:
        raise ValueError(f"word width {bits} is outside 1..62 bits")
    if not fits(values, bits, signed):
        kind = "signed" if signed else "unsigned"
        raise ValueError(f"values do not fit {bits}-bit {kind} words")
    d = hex_digits(bits)
    lines = [f"// {h}" for h in header]
    lines += [format(int(w), f"0{d}x") for w in to_words(values, bits)]
    return "\n".join(lines) + "\n"


def parse_mem(text: str, bits: int, signed: bool, depth: int, name: str = "memory file") -> tuple[np.ndarray, np.ndarray]:
    """Read a `$readmemh` file into `depth` words of `bits` bits; returns (values, line_of_word).

    Values are sign-extended when `signed`. `line_of_word[k]` is the 1-based line of word k, so a
    mismatch can be named by file and line. Errors (FormatError, naming file and line): a token
    that is not hex (x/z digits included: hardware tables must be fully defined), a word wider
    than `bits`, an address outside the memory, a word missing or given twice.
    """
    words = np.full(depth, -1, dtype=np.int64)
    lines = np.zeros(depth, dtype=np.int64)
    addr = 0
    text = _strip_block_comments(text)
    for lineno, raw in enumerate(text.split("\n"), start=1):
        for tok in raw.split("//", 1)[0].split():
            if tok.startswith("@"):
                if not _HEX.fullmatch(tok[1:]):
                    raise FormatError(f"{name} line {lineno}: bad address {tok!r}")
                addr = int(tok[1:].replace("_", ""), 16)
                continue
            if not _HEX.fullmatch(tok):
                raise FormatError(f"{name} line {lineno}: {tok!r} is not a hex word")
            w = int(tok.replace("_", ""), 16)
            if w >> bits:
                raise FormatError(f"{name} line {lineno}: word {tok!r} is wider than {bits} bits")
            if addr >= depth:
                raise FormatError(f"{name} line {lineno}: address {addr} is outside the memory of depth {depth}")
            if lines[addr]:
                raise FormatError(f"{name} line {lineno}: address {addr} was already given on line {lines[addr]}")
            words[addr], lines[addr] = w, lineno
            addr += 1
    missing = np.flatnonzero(lines == 0)
    if missing.size:
        raise FormatError(f"{name}: {missing.size} of {depth} words missing (first at address {missing[0]})")
    return from_words(words, bits, signed), lines


def _strip_block_comments(text: str) -> str:
    """Remove /* ... */ comments but keep their newlines, so line numbers stay right."""
    return re.sub(r"/\*.*?\*/", lambda m: "\n" * m.group(0).count("\n"), text, flags=re.S)


def format_csv(values, index_names: list[str]) -> str:
    """One row per element: the indices as columns, then `value`; row-major order (= word address)."""
    a = np.asarray(values, dtype=np.int64)
    if a.ndim != len(index_names):
        raise ValueError(f"{len(index_names)} index names for a {a.ndim}-d table")
    idx = np.indices(a.shape).reshape(a.ndim, -1).T  # (n, ndim)
    rows = [",".join(index_names + ["value"])]
    rows += [",".join(map(str, r)) + f",{v}" for r, v in zip(idx.tolist(), a.ravel().tolist())]
    return "\n".join(rows) + "\n"


def parse_csv_rows(text: str, header: list[str], name: str = "CSV file") -> tuple[np.ndarray, np.ndarray]:
    """Integer rows of a CSV with exactly this header: (int64 (K, len(header)), 1-based line of each row).

    Blank lines are skipped; a non-integer cell or a wrong column count is a FormatError naming the line.
    """
    lines = text.split("\n")
    if not lines or lines[0].strip() != ",".join(header):
        raise FormatError(f"{name} line 1: header must be {','.join(header)!r}")
    rows, where = [], []
    for lineno, row in enumerate(lines[1:], start=2):
        if not row.strip():
            continue
        try:
            nums = [int(p) for p in row.split(",")]
        except ValueError:
            raise FormatError(f"{name} line {lineno}: {row!r} is not a row of integers") from None
        if len(nums) != len(header):
            raise FormatError(f"{name} line {lineno}: expected {len(header)} columns, got {len(nums)}")
        rows.append(nums)
        where.append(lineno)
    return np.asarray(rows, dtype=np.int64).reshape(-1, len(header)), np.asarray(where, dtype=np.int64)


def parse_csv_table(text: str, index_names: list[str], shape: tuple, name: str = "CSV table") -> tuple[np.ndarray, np.ndarray]:
    """Read a table written by `format_csv`; returns (values with `shape`, 1-based line of each element).

    Rows may come in any order but every index must appear exactly once.
    """
    rows, lines = parse_csv_rows(text, index_names + ["value"], name)
    n = int(np.prod(shape)) if shape else 1
    out = np.zeros(n, dtype=np.int64)
    where = np.zeros(n, dtype=np.int64)
    for r, lineno in zip(rows.tolist(), lines.tolist()):
        ix = r[:-1]
        if any(i < 0 or i >= s for i, s in zip(ix, shape)):
            raise FormatError(f"{name} line {lineno}: index {ix} is outside the shape {list(shape)}")
        k = int(np.ravel_multi_index(ix, shape)) if shape else 0
        if where[k]:
            raise FormatError(f"{name} line {lineno}: index {ix} was already given on line {where[k]}")
        out[k], where[k] = r[-1], lineno
    if not where.all():
        k = int(np.flatnonzero(where == 0)[0])
        raise FormatError(f"{name}: index {[int(i) for i in np.unravel_index(k, shape)]} is missing")
    return out.reshape(shape), where.reshape(shape)


# ---------------------------------------------------------------- Intel HEX (optional output)
# Convention of these files: one data record per word; the record address is the word address
# (an extended linear address record, type 04, carries address bits 31..16 when they change);
# the word is ceil(bits/8) bytes, most significant byte first, two's complement when signed.

def hex_record(address: int, rtype: int, data: bytes) -> str:
    """:LLAAAATT<data>CC with CC = two's complement of the 8-bit sum of all other record bytes."""
    body = bytes([len(data), (address >> 8) & 0xFF, address & 0xFF, rtype]) + data
    return ":" + (body + bytes([(-sum(body)) & 0xFF])).hex().upper()


def format_intel_hex(values, bits: int, signed: bool) -> str:
    if not fits(values, bits, signed):
        raise ValueError(f"values do not fit {bits}-bit {'signed' if signed else 'unsigned'} words")
    nbytes = -(-int(bits) // 8)
    out, upper = [], 0
    for addr, w in enumerate(to_words(values, bits).tolist()):
        if addr >> 16 != upper:
            upper = addr >> 16
            out.append(hex_record(0, 0x04, upper.to_bytes(2, "big")))
        out.append(hex_record(addr & 0xFFFF, 0x00, int(w).to_bytes(nbytes, "big")))
    out.append(hex_record(0, 0x01, b""))        # end of file: :00000001FF
    return "\n".join(out) + "\n"


def parse_intel_hex(text: str, bits: int, signed: bool, depth: int, name: str = "Intel HEX file") -> tuple[np.ndarray, np.ndarray]:
    """Read a file written by `format_intel_hex`: (values, 1-based line of each word). Checksums,
    record lengths, the word size and the end record are checked (FormatError naming the line)."""
    nbytes = -(-int(bits) // 8)
    words = np.full(depth, -1, dtype=np.int64)
    lines = np.zeros(depth, dtype=np.int64)
    upper, ended = 0, False
    for lineno, raw in enumerate(text.split("\n"), start=1):
        rec = raw.strip()
        if not rec:
            continue
        if ended:
            raise FormatError(f"{name} line {lineno}: record after the end-of-file record")
        try:
            if not rec.startswith(":"):
                raise ValueError
            b = bytes.fromhex(rec[1:])
        except ValueError:
            raise FormatError(f"{name} line {lineno}: not an Intel HEX record") from None
        if len(b) < 5 or len(b) != b[0] + 5:
            raise FormatError(f"{name} line {lineno}: record length does not match its byte count")
        if sum(b) & 0xFF:
            raise FormatError(f"{name} line {lineno}: checksum mismatch")
        rtype, addr, data = b[3], (b[1] << 8) | b[2], b[4:-1]
        if rtype == 0x04 and len(data) == 2:
            upper = int.from_bytes(data, "big")
        elif rtype == 0x01:
            ended = True
        elif rtype == 0x00 and len(data) == nbytes:
            k = (upper << 16) | addr
            w = int.from_bytes(data, "big")
            if k >= depth or w >> bits:
                raise FormatError(f"{name} line {lineno}: word {data.hex()} at address {k} is outside "
                                  f"the memory of {depth} words of {bits} bits")
            words[k], lines[k] = w, lineno
        else:
            raise FormatError(f"{name} line {lineno}: unexpected record type {rtype:02X} with {len(data)} data bytes")
    if not ended:
        raise FormatError(f"{name}: the end-of-file record :00000001FF is missing")
    missing = np.flatnonzero(lines == 0)
    if missing.size:
        raise FormatError(f"{name}: {missing.size} of {depth} words missing (first at address {missing[0]})")
    return from_words(words, bits, signed), lines
