"""compare: check a trace from a hardware run or an RTL simulation against the golden vectors.

A trace folder uses the layout of the export's `vectors/` folder (numpy only, nothing else read):

    TRACE_DIR/sample_NNNN/input.csv                 addr,t,payload   (optional: the events fed in)
    TRACE_DIR/sample_NNNN/<layer id>.csv            addr,t,payload   events a layer emitted
    TRACE_DIR/sample_NNNN/<layer id>.potentials.csv addr,potential   a conv/dense layer's potentials at window close
    TRACE_DIR/sample_NNNN/potentials.csv            class,potential  output potentials
    TRACE_DIR/summary.csv                           sample,decision,early_decision (other columns ignored)

With front-end vectors in the export, also the front end's tables (the export's own layout):

    TRACE_DIR/frontend/stream_NNNN/<table>.csv      bins, windows, gated, input (headers as in the export)

compared row by row with frontend.npz (gated and input as sets with `unordered`); they come first in
golden order (the front end feeds the network). NNNN is the golden sample number (4 digits). Any file may be missing: what is missing is not compared
and is shown as such; a trace with nothing to compare, a file with a wrong header, a non-integer cell
or a sample number outside the vectors is malformed (FormatError). Events are compared in order, or
as sets with `unordered` (hardware may emit one window's events in another order). The first
divergence is reported in golden order: sample by sample, and within a sample the input, then each
layer's potentials and events, then the output potentials and the decisions.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from snnconvert.errors import FormatError, UsageError
from snnconvert.export import frontvec as FV
from snnconvert.export.memfile import parse_csv_rows
from snnconvert.export.vectors import first_difference
from snnconvert.files import load_json, load_npz, resolve_inside

EVENT_HEADER = ["addr", "t", "payload"]
POTENTIAL_HEADER = ["addr", "potential"]
OUTPUT_HEADER = ["class", "potential"]
SUMMARY_NEEDS = ["sample", "decision", "early_decision"]


@dataclass
class Divergence:
    sample: int
    layer: str            # layer id, "input" or "output"
    what: str             # events | potentials | decision | early_decision
    neuron: int | None
    index: list | None
    expected: str
    got: str
    file: str
    window: int | None = None     # front end: the row's window

    def message(self) -> str:
        if self.layer == "frontend":
            from snnconvert.export.verify import frontend_place
            return (f"first mismatch: {frontend_place(self.sample, self.what, self.window, self.neuron)}: "
                    f"expected {self.expected}, got {self.got} [{self.file}]")
        at = f", neuron {self.neuron}" + (f" {tuple(self.index)}" if self.index else "") if self.neuron is not None else ""
        what = {"events": "event", "potentials": "potential"}.get(self.what, self.what)
        return (f"first mismatch: sample {self.sample}, layer {self.layer}, {what}{at}: expected {self.expected}, "
                f"got {self.got} [{self.file}]")


@dataclass
class CompareResult:
    samples: int
    rows: list = field(default_factory=list)       # [layer, what, compared, matching, first mismatching sample]
    first: Divergence | None = None
    unordered: bool = False

    @property
    def passed(self) -> bool:
        return self.first is None

    def table(self) -> str:
        head = ["layer", "what", "compared", "match", "first bad sample"]
        body = [[r[0], r[1], "missing" if r[2] == 0 else str(r[2]), str(r[3]), "-" if r[4] is None else str(r[4])]
                for r in self.rows]
        width = [max(len(x) for x in col) for col in zip(head, *body)]
        return "\n".join("  ".join(c.ljust(w) for c, w in zip(r, width)).rstrip() for r in [head] + body)

    def summary(self) -> str:
        compared = sum(r[2] for r in self.rows)
        order = "as sets" if self.unordered else "in order"
        if self.passed:
            return f"compare: passed: {compared} tables of {self.samples} samples match the golden vectors ({order})"
        return f"compare: FAILED: {self.first.message()}"


def _read_csv(path: Path, header: list[str], exact: bool = True) -> tuple[list[str], np.ndarray]:
    try:
        lines = path.read_text(encoding="utf-8").split("\n")
    except UnicodeDecodeError:
        raise FormatError(f"{path}: not UTF-8 text") from None
    cols = [c.strip() for c in lines[0].split(",")] if lines else []
    if (cols != header) if exact else not set(header) <= set(cols):
        raise FormatError(f"{path} line 1: header must be {','.join(header)!r}" + ("" if exact else " (at least)"))
    rows, _ = parse_csv_rows("\n".join([",".join(cols)] + lines[1:]), cols, str(path))
    return cols, rows


def _ev(e) -> str:
    return "no event" if e is None else f"(addr {int(e[0])}, t {int(e[1])}, payload {int(e[2])})"


def _index(shape, addr):
    if shape is not None and len(shape) == 3 and 0 <= addr < int(np.prod(shape)):
        return [int(i) for i in np.unravel_index(addr, shape)]
    return None


def _diff_events(exp: np.ndarray, got: np.ndarray, unordered: bool):
    """(neuron, expected, got) of the first differing event, or None."""
    if unordered:
        exp = exp[np.lexsort(exp.T[::-1])] if len(exp) else exp
        got = got[np.lexsort(got.T[::-1])] if len(got) else got
    k = min(len(exp), len(got))
    bad = np.flatnonzero(np.any(exp[:k] != got[:k], axis=1))
    if bad.size:
        k = int(bad[0])
        if unordered:   # name the lower address of the two: the event missing on one side
            e, g = exp[k], got[k]
            return (int(e[0]), _ev(e), "no event") if tuple(e) < tuple(g) else (int(g[0]), "no event", _ev(g))
    elif len(exp) == len(got):
        return None
    e = exp[k] if k < len(exp) else None
    g = got[k] if k < len(got) else None
    return int((e if e is not None else g)[0]), _ev(e), _ev(g)


def _diff_values(exp: np.ndarray, got: np.ndarray):
    if len(got) != len(exp):
        k = min(len(exp), len(got))
        bad = np.flatnonzero(exp[:k] != got[:k])
        k = int(bad[0]) if bad.size else k
    else:
        bad = np.flatnonzero(exp != got)
        if not bad.size:
            return None
        k = int(bad[0])
    return k, (str(int(exp[k])) if k < len(exp) else "nothing"), (str(int(got[k])) if k < len(got) else "nothing")


def _compare_frontend(folder: Path, trace: Path, fe: dict, unordered: bool, note) -> None:
    """The front end's tables of the trace (TRACE_DIR/frontend/stream_NNNN/<table>.csv) against frontend.npz."""
    root = trace / FV.FOLDER
    if not root.is_dir():
        return
    fz = load_npz(resolve_inside(folder, fe["npz"], "file"))
    n = len(fz["t0"])
    known = {f"stream_{s:04d}" for s in range(n)}
    extra = sorted(p.name for p in root.iterdir() if p.is_dir() and p.name not in known)
    if extra:
        raise FormatError(f"{root / extra[0]}: no golden front-end stream of that name (the export holds {n})")
    for s in range(n):
        for name in FV.CHECKED:
            path = root / f"stream_{s:04d}" / f"{name}.csv"
            if not path.is_file():
                continue
            _, got = _read_csv(path, FV.COLUMNS[name])
            exp = FV.rows_of(fz, name, s)
            if unordered and name in ("gated", "input"):
                exp = exp[np.lexsort(exp.T[::-1])] if len(exp) else exp
                got = got[np.lexsort(got.T[::-1])] if len(got) else got
            k = first_difference(exp, got)
            div = None
            if k is not None:
                window, pos = FV.locate(name, exp if k < len(exp) else got, k)
                div = Divergence(s, "frontend", name, pos, None, FV.fmt_row(name, exp[k] if k < len(exp) else None),
                                 FV.fmt_row(name, got[k] if k < len(got) else None),
                                 path.relative_to(trace).as_posix(), window)
            note(("frontend", name), s, div)


def compare(export_dir, trace_dir, unordered: bool = False) -> CompareResult:
    """Compare the trace in `trace_dir` with the golden vectors of `export_dir` (see the module docstring)."""
    folder, trace = Path(export_dir), Path(trace_dir)
    if not (folder / "manifest.json").is_file():
        raise UsageError(f"export folder {folder} holds no manifest.json (run `snnconvert export` first)")
    if not trace.is_dir():
        raise UsageError(f"trace folder not found: {trace}")
    man = load_json(folder / "manifest.json")
    try:
        vec, layers, fe = man["vectors"], man["layers"], man.get("frontend")
        if not vec.get("count") and not fe:
            raise UsageError(f"{folder / 'manifest.json'}: the export holds no golden vectors to compare with")
        z = load_npz(resolve_inside(folder, vec["npz"], "file")) if vec.get("count") else {}
        n = int(vec.get("count") or 0)
        plan = [("input", "events", "input", tuple(man["input"]["shape"]))]
        for d in layers:
            shape = tuple(d["output_shape"])
            if d.get("tables"):
                plan.append((d["id"], "potentials", f"{d['id']}.potentials", shape))
            if d["type"] != "sumpool":
                plan.append((d["id"], "events", d["id"], shape))
        out_id = layers[-1]["id"]
    except (KeyError, TypeError, AttributeError) as exc:
        raise FormatError(f"{folder / 'manifest.json'}: missing or invalid field ({type(exc).__name__}: {exc})") from None
    plan = [p for p in plan if p[1] == "events" and f"{p[2]}.events" in z or p[1] == "potentials" and p[2] in z]
    if n:
        plan.append(("output", "potentials", "potentials", None))
    known = {f"sample_{s:04d}" for s in range(n)}
    extra = sorted(p.name for p in trace.iterdir() if p.is_dir() and p.name.startswith("sample_") and p.name not in known)
    if extra:
        raise FormatError(f"{trace / extra[0]}: no golden sample of that number (the export holds {n})")
    summary = None
    if (trace / "summary.csv").is_file():
        cols, rows = _read_csv(trace / "summary.csv", SUMMARY_NEEDS, exact=False)
        summary = {int(r[cols.index("sample")]): (int(r[cols.index("decision")]), int(r[cols.index("early_decision")]))
                   for r in rows}
        if any(s < 0 or s >= n for s in summary):
            raise FormatError(f"{trace / 'summary.csv'}: sample numbers must lie in 0..{n - 1}")
    stats = {("frontend", t): [0, 0, None] for t in (FV.CHECKED if fe else ())}
    stats.update({(p[0], p[1]): [0, 0, None] for p in plan})
    if n:
        stats[("output", "decision")] = [0, 0, None]
        stats[("output", "early_decision")] = [0, 0, None]
    res = CompareResult(samples=n, unordered=unordered)

    def note(key, s, div):
        st = stats[key]
        st[0] += 1
        if div is None:
            st[1] += 1
        elif st[2] is None:
            st[2] = s
        if div is not None and res.first is None:
            res.first = div

    if fe:
        _compare_frontend(folder, trace, fe, unordered, note)
    for s in range(n):
        sdir = trace / f"sample_{s:04d}"
        for layer, what, key, shape in plan:
            if layer == "output":
                path, header, exp = sdir / "potentials.csv", OUTPUT_HEADER, np.asarray(z["potentials"][s]).reshape(-1)
            elif what == "potentials":
                path, header, exp = sdir / f"{key}.csv", POTENTIAL_HEADER, np.asarray(z[key][s]).reshape(-1)
            else:
                ev = np.asarray(z[f"{key}.events"], dtype=np.int64)
                path, header, exp = sdir / f"{key}.csv", EVENT_HEADER, ev[ev[:, 0] == s, 1:]
            if not path.is_file():
                continue
            _, rows = _read_csv(path, header)
            rel = path.relative_to(trace).as_posix()
            div = None
            if what == "events":
                d = _diff_events(exp, rows, unordered)
                if d is not None:
                    div = Divergence(s, layer, what, d[0], _index(shape, d[0]), d[1], d[2], rel)
            else:
                if not np.array_equal(rows[:, 0], np.arange(len(rows))):
                    raise FormatError(f"{path}: column {header[0]} must run 0, 1, 2, ...")
                d = _diff_values(exp.astype(np.int64), rows[:, 1])
                if d is not None:
                    div = Divergence(s, layer if layer != "output" else out_id, what, d[0], _index(shape, d[0]),
                                     d[1], d[2], rel)
            note((layer, what), s, div)
        if summary is not None and s in summary:
            for j, what in enumerate(("decision", "early_decision")):
                e, g = int(z[what][s]), summary[s][j]
                note(("output", what), s,
                     None if e == g else Divergence(s, "output", what, None, None, str(e), str(g), "summary.csv"))
    res.rows = [[layer, what, st[0], st[1], st[2]] for (layer, what), st in stats.items()]
    if not any(r[2] for r in res.rows):
        raise FormatError(f"{trace}: the trace holds nothing to compare (expected sample_NNNN/<layer id>.csv files "
                          "or summary.csv in the golden-vector layout)")
    return res
