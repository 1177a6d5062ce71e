"""verify: check an export folder bit for bit, reading nothing but the folder.

Checks, in this order (the first failure found is the one reported):
1. every listed file exists and the manifest is readable (else FormatError/UsageError: exit 2);
2. tables: the memory files, tables.npz, the CSV tables, the Intel HEX files (when written) and
   the manifest's bias/m0/shift lists must hold the same values, word for word; the network is
   rebuilt from the memory files;
3. vectors: the network rebuilt from manifest + memory files is re-simulated by the reference
   simulator on every golden input; every stream's events, the potentials and the decisions must
   equal vectors.npz and the CSV files exactly;
4. front-end vectors (when the manifest has `frontend`): the front end (snnconvert.frontend) re-run on
   the raw events of frontend.npz with the manifest's parameters; its rate bins, window boundaries,
   gated input events, input events and frames must equal frontend.npz and the CSV files exactly,
   and the CSV raw events must equal the NPZ's;
5. sha256 of every listed file (a changed file whose values still agree is reported last).
Nothing is written to the folder.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from snnconvert.errors import FormatError, UsageError, check_bool, check_int, check_shape, check_str, fail
from snnconvert.export import fpga
from snnconvert.export import frontvec as FV
from snnconvert.export import manifest as M
from snnconvert.export import vectors as V
from snnconvert.export.memfile import parse_csv_rows, parse_csv_table, parse_intel_hex, parse_mem
from snnconvert.export.writer import MANIFEST
from snnconvert.files import load_json, load_npz, resolve_inside, sha256_bytes


@dataclass
class Mismatch:
    """One disagreement, located in `file` (and `line`).

    events, potentials, decisions: `expected` is the golden file's value, `got` the re-simulation's.
    table: `expected` is the value the other copies of the table agree on, `got` what `file` holds.
    sha256: `expected` is the manifest's digest, `got` the file's.
    """
    kind: str                      # table | event | layer_potential | potential | decision | early_decision | directed | frontend | sha256
    file: str                      # file (relative to the folder) holding the wrong or disagreeing value
    line: int | None = None        # 1-based line in `file`, when it is a text file
    sample: int | None = None
    layer: str | None = None       # layer id (L<i>_<name>) or "input"
    neuron: int | None = None      # flat neuron address (or class index, or word address of a table)
    index: list | None = None      # (c, y, x) of the neuron, or the table index
    expected: object = None
    got: object = None
    window: int | None = None      # frontend: window of the row (layer holds the table, sample the stream, neuron the row)

    def message(self) -> str:
        at = f"{self.file}" + (f" line {self.line}" if self.line else "")
        if self.kind == "frontend":
            return f"first mismatch: {frontend_place(self.sample, self.layer, self.window, self.neuron)}: " \
                   f"expected {self.expected}, got {self.got} [{at}]"
        if self.kind == "table":
            return (f"table mismatch in {at}: layer {self.layer}, word {self.neuron} {self.index}: "
                    f"expected {self.expected}, got {self.got}")
        if self.kind == "sha256":
            return f"sha256 of {self.file} differs from the manifest: expected {self.expected}, got {self.got}"
        where = f"sample {self.sample}, layer {self.layer}"
        if self.kind == "event":
            nidx = f" {tuple(self.index)}" if self.index else ""
            return (f"first mismatch: {where}, neuron {self.neuron}{nidx}: expected {self.expected}, "
                    f"got {self.got} [{at}]")
        if self.kind == "layer_potential":
            nidx = f" {tuple(self.index)}" if self.index else ""
            return (f"first mismatch: {where}, potential of neuron {self.neuron}{nidx}: expected {self.expected}, "
                    f"got {self.got} [{at}]")
        if self.kind == "potential":
            return (f"first mismatch: {where}, potential of class {self.neuron}: expected {self.expected}, "
                    f"got {self.got} [{at}]")
        return f"first mismatch: sample {self.sample}, {self.kind}: expected {self.expected}, got {self.got} [{at}]"


@dataclass
class VerifyResult:
    passed: bool
    samples: int
    layers: int
    events: int                                        # golden events compared (per source file)
    words: int                                         # table words compared
    first_mismatch: Mismatch | None = None
    mismatches: int = 0                                # count of disagreeing places (each counted once per check)
    sha256_failures: list = field(default_factory=list)
    streams: int = 0                                   # front-end streams re-run

    def to_dict(self) -> dict:
        d = asdict(self)
        if self.first_mismatch is not None:
            d["first_mismatch"]["message"] = self.first_mismatch.message()
        return d

    def summary(self) -> str:
        if self.passed:
            fe = f", {self.streams} front-end streams" if self.streams else ""
            return (f"verify: passed: {self.samples} samples{fe}, {self.layers} layers, {self.events} events and "
                    f"{self.words} table words match bit-exactly")
        more = f" ({self.mismatches} mismatching places in all)" if self.mismatches > 1 else ""
        return f"verify: FAILED: {self.first_mismatch.message()}{more}"


class _Checker:
    def __init__(self, folder: Path):
        self.folder = folder
        self.first: Mismatch | None = None
        self.count = 0
        self.events = 0
        self.words = 0

    def fail(self, m: Mismatch):
        self.count += 1
        if self.first is None:
            self.first = m

    def read(self, rel: str) -> bytes:
        path = resolve_inside(self.folder, rel, "file")
        if not path.is_file():
            raise UsageError(f"{path}: file listed in the manifest is missing")
        return path.read_bytes()

    def text(self, rel: str) -> str:
        try:
            return self.read(rel).decode("utf-8")
        except UnicodeDecodeError:
            raise FormatError(f"{self.folder / rel}: not UTF-8 text") from None


def _table_index(spec, k):
    return [int(i) for i in np.unravel_index(k, spec["shape"])] if spec["shape"] else []


def _compare_copies(ck: _Checker, lid: str, spec: dict, copies: list) -> None:
    """Every copy of a table must hold the same words. Where they differ, the value most copies
    agree on is taken as right (ties: the memory file, listed first), and the first copy that
    departs from it is the place named: a corrupt word is found in whichever file holds it."""
    for file, other, _ in copies[1:]:
        if other.shape != copies[0][1].shape:
            raise FormatError(f"{ck.folder / file}: {spec['npz_key']} has {other.size} values, "
                              f"the memory file {copies[0][1].size}")
    stack = np.stack([c[1] for c in copies])                                       # (copies, words)
    bad = np.flatnonzero(np.any(stack != stack[0], axis=0))
    for k in bad.tolist():
        col = stack[:, k].tolist()
        right = max(col, key=lambda v: (col.count(v), v == col[0]))
        for file, other, lines in copies:
            if other[k] != right:
                ck.fail(Mismatch("table", file, int(lines[k]) if lines is not None else None, layer=lid, neuron=k,
                                 index=_table_index(spec, k), expected=int(right), got=int(other[k])))


def _check_tables(ck: _Checker, man: dict) -> dict:
    """Parse every memory file and compare the other copies of its table; returns {layer id: {kind: array}}
    read from the memory files, which are what the network is rebuilt from."""
    npz = load_npz(resolve_inside(ck.folder, man["tables_npz"], "file"))
    arrays = {}
    if not isinstance(man["layers"], list):
        fail("layers", str(ck.folder / MANIFEST), "a list of layer objects", repr(man["layers"]), "field", FormatError)
    for i, d in enumerate(man["layers"]):
        tables = (d.get("tables") or {}) if isinstance(d, dict) else {}
        if not isinstance(tables, dict):
            fail(f"layers[{i}].tables", str(ck.folder / MANIFEST), "an object", repr(tables), "field", FormatError)
        for kind, spec in tables.items():
            spec = _table_spec(ck, spec, f"layers[{i}].tables.{kind}")
            name = spec["file"]
            shape = tuple(spec["shape"])
            vals, lines = parse_mem(ck.text(name), spec["bits"], spec["signed"], spec["depth"],
                                    name=str(ck.folder / name))
            if vals.size != int(np.prod(shape)):
                raise FormatError(f"{ck.folder / name}: depth {vals.size} does not match shape {list(shape)}")
            if kind == "weight" and (d.get("weight_bits") != spec["bits"] or man.get("weight_bits") != spec["bits"]):
                raise FormatError(f"{ck.folder / MANIFEST}: layer {d['id']}: 'weight_bits' {d.get('weight_bits')!r} "
                                  f"(network {man.get('weight_bits')!r}) disagrees with its table's word width {spec['bits']}")
            arrays.setdefault(d["id"], {})[kind] = vals.reshape(shape)
            ck.words += vals.size
            copies = [(name, vals, lines)]
            if spec["npz_key"] not in npz:
                raise FormatError(f"{ck.folder / man['tables_npz']}: array {spec['npz_key']!r} is missing")
            copies.append((man["tables_npz"], np.asarray(npz[spec["npz_key"]]).reshape(-1), None))
            if spec.get("csv"):
                cv, cl = parse_csv_table(ck.text(spec["csv"]), spec["index_names"], shape, name=str(ck.folder / spec["csv"]))
                copies.append((spec["csv"], cv.reshape(-1), cl.reshape(-1)))
            if spec.get("intel_hex"):
                _bounded_depth(ck, spec, spec["intel_hex"], f"layers[{i}].tables.{kind}.depth")
                hv, hl = parse_intel_hex(ck.text(spec["intel_hex"]), spec["bits"], spec["signed"],
                                         spec["depth"], name=str(ck.folder / spec["intel_hex"]))
                copies.append((spec["intel_hex"], hv, hl))
            if spec.get("coe") or spec.get("mif"):
                pack = _packing_spec(spec, f"layers[{i}].tables.{kind}.packing", str(ck.folder / MANIFEST))
                for key, parse in (("coe", fpga.parse_coe), ("mif", fpga.parse_mif)):
                    if spec.get(key):
                        rel = check_str(spec[key], f"layers[{i}].tables.{kind}.{key}", str(ck.folder / MANIFEST),
                                        "field", FormatError)
                        v, lv = parse(ck.text(rel), spec["bits"], spec["signed"], pack, spec["depth"],
                                      name=str(ck.folder / rel))
                        copies.append((rel, v, lv))
            if kind in ("bias", "m0", "shift"):
                copies.append((MANIFEST, np.asarray(d[kind], dtype=np.int64).reshape(-1), None))
            _compare_copies(ck, d["id"], spec, copies)
    return arrays


def _table_spec(ck: _Checker, spec, field: str) -> dict:
    """A table entry of the manifest, checked before anything is allocated from it: the word count
    (`depth`) is bounded by the size of the memory file that must hold one line per word, and the
    shape must hold exactly `depth` words."""
    owner, E = str(ck.folder / MANIFEST), FormatError
    if not isinstance(spec, dict):
        fail(field, owner, "an object", repr(spec), "field", E)
    spec = dict(spec)
    for key in ("file", "npz_key"):
        check_str(spec[key], f"{field}.{key}", owner, "field", E)
    spec["bits"] = check_int(spec["bits"], f"{field}.bits", owner, 1, 62, "field", E)
    spec["signed"] = check_bool(spec["signed"], f"{field}.signed", owner, "field", E)
    spec["shape"] = list(check_shape(spec["shape"], f"{field}.shape", owner, None, 1, "field", E))
    _bounded_depth(ck, spec, spec["file"], f"{field}.depth")
    if int(np.prod(spec["shape"])) != spec["depth"]:
        fail(f"{field}.shape", owner, f"a shape of {spec['depth']} words (its depth)", repr(spec["shape"]), "field", E)
    return spec


def _packing_spec(spec: dict, field: str, owner: str) -> dict:
    """The `packing` of a table's block-RAM images: lanes of `bits` in a memory word (export.fpga)."""
    p = spec.get("packing")
    if not isinstance(p, dict):
        fail(field, owner, "an object", repr(p), "field", FormatError)
    word_bits = check_int(p.get("word_bits"), f"{field}.word_bits", owner, spec["bits"], fpga.MAX_PACK_BITS,
                          "field", FormatError)
    lanes = check_int(p.get("lanes"), f"{field}.lanes", owner, 1, word_bits // spec["bits"], "field", FormatError)
    want = -(-spec["depth"] // lanes)
    depth = check_int(p.get("depth"), f"{field}.depth", owner, want, want, "field", FormatError)
    return {"word_bits": word_bits, "lanes": lanes, "depth": depth}


def _bounded_depth(ck: _Checker, spec: dict, rel, field: str) -> None:
    """depth: an int no larger than the byte size of the file `rel` (every word takes a line)."""
    path = resolve_inside(ck.folder, check_str(rel, field.rsplit(".", 1)[0] + ".file", str(ck.folder / MANIFEST),
                                               "field", FormatError), "file")
    size = path.stat().st_size if path.is_file() else 0
    spec["depth"] = check_int(spec["depth"], field, str(ck.folder / MANIFEST), 0, size, "field", FormatError)


def _neuron_index(shape, addr):
    if len(shape) == 3 and 0 <= addr < int(np.prod(shape)):
        return [int(i) for i in np.unravel_index(addr, shape)]
    return None


def _fmt_event(e) -> str:
    if e is None:
        return "no event"
    return f"(addr {int(e[0])}, t {int(e[1])}, payload {int(e[2])})"


def _compare_stream(ck, s, sid, shape, expected, got, file, lines):
    ck.events += len(expected)
    k = V.first_difference(expected, got)
    if k is None:
        return
    exp = expected[k] if k < len(expected) else None
    gt = got[k] if k < len(got) else None
    addr = int((exp if exp is not None else gt)[0])
    line = int(lines[k]) if lines is not None and k < len(lines) else None
    ck.fail(Mismatch("event", file, line, sample=s, layer=sid, neuron=addr, index=_neuron_index(shape, addr),
                     expected=_fmt_event(exp), got=_fmt_event(gt)))


def _check_layer_potentials(ck, s, lid, shape, golden, got, npz_name, csv) -> None:
    """One sample's potentials of layer `lid`: vectors.npz row (and the CSV file) against the re-simulation."""
    got = np.asarray(got, dtype=np.int64).reshape(-1)
    sources = [(npz_name, np.asarray(golden[s], dtype=np.int64).reshape(-1), None)]
    if csv:
        rel = f"{V.sample_folder(s)}/{lid}.potentials.csv"
        rows, lines = parse_csv_rows(ck.text(rel), V.POTENTIAL_COLUMNS, str(ck.folder / rel))
        if not np.array_equal(rows[:, 0], np.arange(len(rows))):
            raise FormatError(f"{ck.folder / rel}: column addr must run 0, 1, 2, ...")
        sources.append((rel, rows[:, 1], lines))
    for file, exp, lines in sources:
        k = V.first_difference(exp.reshape(-1, 1), got.reshape(-1, 1))
        if k is not None:
            ck.fail(Mismatch("layer_potential", file, int(lines[k]) if lines is not None and k < len(lines) else None,
                             sample=s, layer=lid, neuron=k, index=_neuron_index(shape, k),
                             expected=int(exp[k]) if k < exp.size else None,
                             got=int(got[k]) if k < got.size else None))


def _check_vectors(ck: _Checker, man: dict, net, progress: bool) -> int:
    owner = str(ck.folder / MANIFEST)
    vec = man["vectors"]
    if not isinstance(vec, dict):
        fail("vectors", owner, "an object", repr(vec), "field", FormatError)
    if not vec.get("count"):
        return 0
    check_int(vec["count"], "vectors.count", owner, 0, None, "field", FormatError)
    z = load_npz(resolve_inside(ck.folder, check_str(vec["npz"], "vectors.npz", owner, "field", FormatError), "file"))
    for key in ("x", "potentials", "decision", "early_decision", "sample_index", "label"):
        if key not in z:
            raise FormatError(f"{ck.folder / vec['npz']}: array {key!r} is missing")
    x = np.asarray(z["x"])
    n = int(vec["count"])
    if x.shape != (n,) + tuple(net.input_shape) or x.dtype.kind not in "iu":
        raise FormatError(f"{ck.folder / vec['npz']}: 'x' must be int ({n}, {', '.join(map(str, net.input_shape))}); got {x.dtype} {x.shape}")
    streams = V.event_streams(net)
    shapes = {V.INPUT: tuple(net.input_shape)}
    shapes.update({sid: tuple(net.layers[i].out_shape) for sid, i in streams[1:]})
    for sid, _ in streams:
        if f"{sid}.events" not in z:
            raise FormatError(f"{ck.folder / vec['npz']}: array '{sid}.events' is missing")
    listed = vec.get("npz_keys") or []
    pot_layers = [(lid, i) for lid, i in V.potential_layers(net) if f"{lid}.potentials" in listed]
    shapes_v = {lid: tuple(net.layers[i].out_shape) for lid, i in pot_layers}
    for key in [f"{lid}.potentials" for lid, _ in pot_layers] + (["directed"] if "directed" in listed else []):
        if key not in z:
            raise FormatError(f"{ck.folder / vec['npz']}: array {key!r} is missing")
    for lid, i in pot_layers:
        if np.asarray(z[f"{lid}.potentials"]).shape != (n, int(np.prod(net.layers[i].out_shape))):
            raise FormatError(f"{ck.folder / vec['npz']}: '{lid}.potentials' must have shape "
                              f"({n}, {int(np.prod(net.layers[i].out_shape))})")
    csv = bool(vec.get("csv_folder"))
    summary = None
    if csv:
        text = ck.text("vectors/summary.csv")
        cols = V.SUMMARY_COLUMNS if "directed" in listed else V.SUMMARY_COLUMNS[:-1]   # exports before directed vectors
        summary, summary_lines = parse_csv_rows(text, cols, str(ck.folder / "vectors/summary.csv"))
        if "directed" in listed:
            for s_, (code, line) in enumerate(zip(summary[:, 5].tolist(), summary_lines.tolist())):
                if s_ < n and code != int(z["directed"][s_]):
                    ck.fail(Mismatch("directed", "vectors/summary.csv", int(line), sample=s_,
                                     expected=int(z["directed"][s_]), got=int(code)))
    traces = V.simulate(net, x.astype(np.int64), progress, desc="verify")
    for s, tr in enumerate(traces):
        got = V.trace_streams(net, tr)
        for sid, _ in streams:
            ev = np.asarray(z[f"{sid}.events"], dtype=np.int64)
            _compare_stream(ck, s, sid, shapes[sid], ev[ev[:, 0] == s, 1:], got[sid], vec["npz"], None)
            if csv:
                rel = f"{V.sample_folder(s)}/{sid}.csv"
                rows, lines = parse_csv_rows(ck.text(rel), V.EVENT_COLUMNS, str(ck.folder / rel))
                _compare_stream(ck, s, sid, shapes[sid], rows, got[sid], rel, lines)
        for lid, i in pot_layers:
            _check_layer_potentials(ck, s, lid, shapes_v[lid], z[f"{lid}.potentials"], tr.layer_potentials[i],
                                    vec["npz"], csv)
        pot = np.asarray(tr.potentials, dtype=np.int64).reshape(-1)
        pot_sources = [(vec["npz"], np.asarray(z["potentials"][s], dtype=np.int64).reshape(-1), None)]
        if csv:
            rel = f"{V.sample_folder(s)}/potentials.csv"
            rows, lines = parse_csv_rows(ck.text(rel), ["class", "potential"], str(ck.folder / rel))
            pot_sources.append((rel, rows[:, 1], lines))
        for file, exp, lines in pot_sources:
            k = V.first_difference(exp.reshape(-1, 1), pot.reshape(-1, 1))
            if k is not None:
                ck.fail(Mismatch("potential", file, int(lines[k]) if lines is not None and k < len(lines) else None,
                                 sample=s, layer="output", neuron=k,
                                 expected=int(exp[k]) if k < exp.size else None,
                                 got=int(pot[k]) if k < pot.size else None))
        dec_sources = [(vec["npz"], int(z["decision"][s]), int(z["early_decision"][s]), None)]
        if csv:
            hit = np.flatnonzero(summary[:, 0] == s)
            if hit.size != 1:
                raise FormatError(f"{ck.folder / 'vectors/summary.csv'}: sample {s} must appear exactly once")
            r = summary[hit[0]]
            dec_sources.append(("vectors/summary.csv", int(r[3]), int(r[4]), int(summary_lines[hit[0]])))
        for file, dec, early, line in dec_sources:
            for what, exp, gt in (("decision", dec, int(tr.decision)), ("early_decision", early, int(tr.early_decision))):
                if exp != gt:
                    ck.fail(Mismatch(what, file, line, sample=s, layer="output", expected=exp, got=gt))
    return n


def frontend_place(stream, table, window, k) -> str:
    """'stream 0, front end gated, window 1, event 3' (k: row within the window, or within the stream)."""
    what = {"events": "raw event", "bins": "bin", "gated": "event", "input": "input event", "frames": "pixel"}
    place = f"stream {stream}, front end {table}"
    if window is not None:
        place += f", window {window}"
    return place + (f", {what[table]} {k}" if table in what and k is not None else "")


def _frontend_diff(ck: _Checker, s: int, name: str, exp: np.ndarray, got: np.ndarray, file: str, lines) -> None:
    """First differing row of stream s's table `name` (golden `exp` from `file` against the re-run `got`)."""
    ck.events += len(exp)
    k = V.first_difference(exp, got)
    if k is None:
        return
    side = exp if k < len(exp) else got
    window, pos = FV.locate(name, side, k)
    ck.fail(Mismatch("frontend", file, int(lines[k]) if lines is not None and k < len(lines) else None, sample=s,
                     layer=name, neuron=pos, window=window,
                     expected=FV.fmt_row(name, exp[k] if k < len(exp) else None),
                     got=FV.fmt_row(name, got[k] if k < len(got) else None)))


def _check_frontend(ck: _Checker, man: dict, net) -> int:
    """Re-run the front end on the raw events of frontend.npz; compare every table (module docstring, 4)."""
    fe = man.get("frontend")
    if fe is None:
        return 0
    owner = str(ck.folder / MANIFEST)
    if not isinstance(fe, dict):
        fail("frontend", owner, "an object or null", repr(fe), "field", FormatError)
    if fe.get("version") != FV.VERSION:
        raise FormatError(f"{owner}: front-end vector version {fe.get('version')!r} is not supported "
                          f"(this build reads {FV.VERSION})")
    params = FV.params_from_manifest(fe["params"], owner)
    n = check_int(fe["streams"], "frontend.streams", owner, 0, None, "field", FormatError)
    npz_name = check_str(fe["npz"], "frontend.npz", owner, "field", FormatError)
    z = load_npz(resolve_inside(ck.folder, npz_name, "file"))
    where = ck.folder / npz_name
    for key, width in [(t, len(FV.COLUMNS[t]) + 1) for t in FV.TABLES] + [("t0", None), ("stream_index", None),
                                                                           ("label", None), ("frames", None)]:
        if key not in z:
            raise FormatError(f"{where}: array {key!r} is missing")
        a = np.asarray(z[key])
        if a.dtype.kind not in "iu" or (width and (a.ndim != 2 or a.shape[1] != width)):
            raise FormatError(f"{where}: {key!r} must be an int table of {width} columns; got {a.dtype} {a.shape}")
    if np.asarray(z["t0"]).shape != (n,):
        raise FormatError(f"{where}: 't0' must hold one value per stream ({n})")
    csv = bool(fe.get("csv_folder"))
    frames = np.asarray(z["frames"], np.int64)
    done = 0
    for s in range(n):
        raw = FV.rows_of(z, "events", s)
        if csv:
            rel = f"{FV.stream_folder(s)}/events.csv"
            rows, lines = parse_csv_rows(ck.text(rel), FV.COLUMNS["events"], str(ck.folder / rel))
            _frontend_diff(ck, s, "events", rows, raw, rel, lines)
        ev = np.zeros(len(raw), [("t", "<i8"), ("x", "<i8"), ("y", "<i8"), ("p", "<i8")])
        for j, c in enumerate(FV.COLUMNS["events"]):
            ev[c] = raw[:, j]
        try:
            got = FV.run_stream(ev, params, net.coding, net.input_q)
        except UsageError as exc:
            raise FormatError(f"{where}: the raw events of stream {s}: {exc}") from None
        if int(z["t0"][s]) != got["t0"]:
            ck.fail(Mismatch("frontend", npz_name, sample=s, layer="t0", expected=int(z["t0"][s]), got=got["t0"]))
        for name in FV.CHECKED:
            _frontend_diff(ck, s, name, FV.rows_of(z, name, s), got[name], npz_name, None)
            if csv:
                rel = f"{FV.stream_folder(s)}/{name}.csv"
                rows, lines = parse_csv_rows(ck.text(rel), FV.COLUMNS[name], str(ck.folder / rel))
                _frontend_diff(ck, s, name, rows, got[name], rel, lines)
        mine = frames[done:done + len(got["frames"])]
        if mine.shape != got["frames"].shape:
            raise FormatError(f"{where}: 'frames' must hold one (C, size, size) frame per window row")
        bad = np.argwhere(mine != got["frames"])
        if len(bad):
            w, c, i, j = (int(v) for v in bad[0])
            ck.fail(Mismatch("frontend", npz_name, sample=s, layer="frames", window=w, neuron=None,
                             expected=f"frame[{c}, {i}, {j}] = {int(mine[w, c, i, j])}",
                             got=str(int(got["frames"][w, c, i, j]))))
        done += len(got["frames"])
    return n


def read_manifest(out_dir) -> tuple[Path, dict]:
    """(folder, manifest object) of the export folder `out_dir`; UsageError/FormatError when absent or not an object."""
    folder = Path(out_dir)
    if not folder.is_dir():
        raise UsageError(f"export folder not found: {folder}")
    man = load_json(folder / MANIFEST)
    if not isinstance(man, dict):
        raise FormatError(f"{folder / MANIFEST}: not a manifest object")
    return folder, man


def verify(out_dir, progress: bool = True) -> VerifyResult:
    """Check the export folder `out_dir`; see the module docstring. Raises UsageError/FormatError
    (ValueError subclasses) when a file is missing or unreadable; returns the result otherwise."""
    folder, man = read_manifest(out_dir)
    ck = _Checker(folder)
    files = man.get("files")
    if not isinstance(files, dict):
        raise FormatError(f"{folder / MANIFEST}: field 'files' must map file names to sha256")
    data = {rel: ck.read(rel) for rel in sorted(files)}  # every listed file must exist before anything else
    try:
        arrays = _check_tables(ck, man)
        net = M.network_from_manifest(man, arrays, name=str(folder / MANIFEST),
                                      tables_name=f"the memory files of {folder}")
        n = _check_vectors(ck, man, net, progress)
        streams = _check_frontend(ck, man, net)
    except (KeyError, TypeError, IndexError) as exc:
        raise FormatError(f"{folder / MANIFEST}: missing or invalid field ({type(exc).__name__}: {exc})") from None
    sha_bad = [rel for rel in sorted(files) if sha256_bytes(data[rel]) != files[rel]]
    for rel in sha_bad:
        ck.fail(Mismatch("sha256", rel, expected=files[rel], got=sha256_bytes(data[rel])))
    return VerifyResult(passed=ck.first is None, samples=n, layers=len(net.layers), events=ck.events, words=ck.words,
                        first_mismatch=ck.first, mismatches=ck.count, sha256_failures=sha_bad, streams=streams)
