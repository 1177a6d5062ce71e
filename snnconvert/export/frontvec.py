"""Front-end golden vectors: raw (t, x, y, p) events in; rate bins, window boundaries, gated input events,
frames and the network's input events out (numpy only; the rules are those of snnconvert.frontend).

For each stream s (a recording, t0 = its first event):
    bins     every bin k of the rate counter: t_start = t0 + k*bin_us, count c_k, the opening and
             closing counts hi_k, lo_k, and open_k (1 while a window is open: frontend.scan)
    windows  window w: bins [bin_start, bin_end) and times [t_start, t_end) (frontend.window_bins)
    gated    the window's input events in emission order (frontend.gate): t, grid x, grid y,
             channel c, payload
    input    the network's input events of the window's frame (frame(gated)), as the golden
             vectors' input.csv lists them: addr = (c*size + y)*size + x, t, payload (payload coding:
             t = 0, by address; ttfs: t = q - payload, by step then address)
    frames   the (C, size, size) payload frame of each window (the training frame)

frontend.npz holds every table of every stream with a leading `stream` column (and `window` where
a row belongs to a window); the text copies hold one stream each, one row per line, with a header:
    frontend/stream_NNNN/events.csv   t,x,y,p
    frontend/stream_NNNN/bins.csv     bin,t_start,count,upper,lower,open
    frontend/stream_NNNN/windows.csv  window,bin_start,bin_end,t_start,t_end
    frontend/stream_NNNN/gated.csv    window,t,x,y,c,payload
    frontend/stream_NNNN/input.csv    window,addr,t,payload
    frontend/summary.csv              stream,index,label,t0,events,bins,windows,gated
"""

from __future__ import annotations

import io
from dataclasses import dataclass, fields

import numpy as np

from snnconvert import frontend as FE
from snnconvert.errors import FormatError, UsageError

FOLDER = "frontend"
NPZ = "frontend.npz"
VERSION = 1
COLUMNS = {
    "events": ["t", "x", "y", "p"],
    "bins": ["bin", "t_start", "count", "upper", "lower", "open"],
    "windows": ["window", "bin_start", "bin_end", "t_start", "t_end"],
    "gated": ["window", "t", "x", "y", "c", "payload"],
    "input": ["window", "addr", "t", "payload"],
}
TABLES = tuple(COLUMNS)
CHECKED = ("bins", "windows", "gated", "input")   # the tables a re-run of the front end reproduces
SUMMARY_COLUMNS = ["stream", "index", "label", "t0", "events", "bins", "windows", "gated"]
PARAMS = tuple(f.name for f in fields(FE.FrontEnd))

PARAM_FIELDS = {
    "bin_us": "width of one rate-counter bin in us: bin k holds t0 + k*bin_us <= t < t0 + (k+1)*bin_us",
    "relative": "true: thresholds relative to the background (upper_16, lower_16); false: absolute counts per bin",
    "upper_16": "relative opening threshold U in sixteenths: hi_k = floor(U * S_k / (16 * B)) + 1",
    "lower_16": "relative closing threshold L in sixteenths: lo_k = ceil(L * S_k / (16 * B))",
    "upper_count": "absolute opening count per bin (relative = false): hi_k = upper_count",
    "lower_count": "absolute closing count per bin (relative = false): lo_k = min(lower_count, hi_k)",
    "background_bins": "B: the background S_k = max(sum of the counts of the last B closed bins, B); a bin is "
                       "closed when it ends with no window open (the bin that closes a window is one)",
    "min_bins": "a window shorter than min_bins bins (after merging) is dropped",
    "merge_bins": "windows separated by fewer than merge_bins closed bins are merged (0 or 1: none)",
    "width": "sensor width: x in [0, width)",
    "height": "sensor height: y in [0, height)",
    "size": "grid side: grid column j = x * size // width, grid row i = y * size // height (floor)",
    "mode": "binary (a pixel emits payload 1 at its threshold-th event), count or polarity (every pixel with "
            "n >= 1 events emits min(n, max_count) at the window end, by address; polarity: channel 1 for p < 0)",
    "threshold": "binary mode: events a grid pixel needs in one window to emit",
    "max_count": "count and polarity modes: the largest payload",
}

FRONTEND_FIELDS = {
    "version": f"front-end vector format version (this build reads {VERSION})",
    "params": "the front end's integer parameters; each field is described in the `frontend.params` table",
    "rules": "the front end's rules in words (rate counter, thresholds, hysteresis, merge and minimum duration, "
             "subsample, gate, input events)",
    "streams": "number of front-end streams (recordings)",
    "windows": "windows over all streams",
    "gated_events": "gated input events over all streams",
    "source": "where the streams came from (the test split of the recipe's data set, or an events file)",
    "npz": "NPZ holding every table of every stream (frontend.npz)",
    "npz_columns": "columns of each table in the NPZ (a leading stream column), plus t0, stream_index, label "
                   "(per stream) and frames ((K, C, size, size), one per window row)",
    "csv_folder": "folder of the text copies (frontend/stream_NNNN/<table>.csv, frontend/summary.csv); null "
                  "when CSV output is off",
    "csv_columns": "header of each text table",
}

RULES = {
    "counter": "t0 = the stream's first event; c_k = events with t0 + k*bin_us <= t < t0 + (k+1)*bin_us; the last "
               "bin holds the last event",
    "thresholds": "absolute: hi = upper_count, lo = min(lower_count, hi); relative: S_k = max(sum of the last B "
                  "closed-bin counts, B) (0 for bins before t0), hi_k = floor(upper_16*S_k/(16*B)) + 1, "
                  "lo_k = min(ceil(lower_16*S_k/(16*B)), hi_k)",
    "hysteresis": "closed and c_k >= hi_k: opens at bin k; open and c_k < lo_k: closes at bin k (window [open, k)); "
                  "a bin in which the state ends closed enters the background FIFO; open at the last bin: closes "
                  "after it",
    "merge": "windows with a gap of fewer than merge_bins bins merge; then windows shorter than min_bins bins are "
             "dropped; times t_start = t0 + bin_start*bin_us, t_end = t0 + bin_end*bin_us, half-open",
    "subsample": "j = x*size//width, i = y*size//height; channel 1 for p < 0 in polarity mode, else 0",
    "gate": "binary: a grid pixel emits (its threshold-th event's t, payload 1), later events dropped, in time order; "
            "count/polarity: every pixel with n >= 1 emits (t_end, min(n, max_count)) by address (c, i, j)",
    "input": "the window's frame frame[c, i, j] = payload gives the network's input events as in the golden "
             "vectors' input.csv",
}


@dataclass(frozen=True)
class FrontEndSource:
    """What the front-end vectors are made from: the parameters, the streams (each with t, x, y, p:
    an EventStream or a structured event array), their index in the source and their labels (-1: unknown)."""

    params: FE.FrontEnd
    streams: list
    index: np.ndarray
    labels: np.ndarray
    source: str


def params_dict(params: FE.FrontEnd) -> dict:
    return {k: getattr(params, k) for k in PARAMS}


def params_from_manifest(d, name: str) -> FE.FrontEnd:
    """The FrontEnd of the manifest's frontend.params, every field checked (FormatError naming it)."""
    if not isinstance(d, dict) or set(d) != set(PARAMS):
        missing = sorted(set(PARAMS) - set(d)) if isinstance(d, dict) else list(PARAMS)
        extra = sorted(set(d) - set(PARAMS)) if isinstance(d, dict) else []
        raise FormatError(f"{name}: field 'frontend.params' must hold exactly {', '.join(PARAMS)} "
                          f"(missing {missing}, unknown {extra})")
    try:
        return FE.FrontEnd(**d)
    except (UsageError, TypeError, ValueError) as exc:
        raise FormatError(f"{name}: field 'frontend.params': {exc}") from None


def _cols(stream):
    c = FE.columns(stream)
    return c.t.astype(np.int64), c.x.astype(np.int64), c.y.astype(np.int64), c.p.astype(np.int64)


def input_events(frame: np.ndarray, coding: str, q: int) -> np.ndarray:
    """(K, 3) addr, t, payload of a payload frame, in the golden input order (sim.reference.input_events):
    payload coding t = 0 by address; ttfs t = q - a by step, then address."""
    a = np.asarray(frame, np.int64).reshape(-1)
    idx = np.flatnonzero(a)
    if coding == "ttfs":
        t = q - a[idx]
        order = np.lexsort((idx, t))
        return np.column_stack([idx[order], t[order], a[idx][order]]).reshape(-1, 3)
    return np.column_stack([idx, np.zeros_like(idx), a[idx]]).reshape(-1, 3)


def run_stream(events, params: FE.FrontEnd, coding: str, q: int) -> dict:
    """Every table of one stream (module docstring) without the stream column, plus t0 and frames."""
    t, x, y, p = _cols(events)
    t0, c = FE.rate_counts(t, params)
    hi, lo, is_open = FE.scan(c, params)
    wb = FE.window_bins(c, params)                                          # (K, 2) bins
    k = np.arange(c.size, dtype=np.int64)
    out = {"t0": int(t0), "events": np.column_stack([t, x, y, p]).reshape(-1, 4),
           "bins": np.column_stack([k, t0 + k * params.bin_us, c, hi, lo, is_open.astype(np.int64)]).reshape(-1, 6),
           "windows": np.column_stack([np.arange(len(wb)), wb, t0 + wb * params.bin_us]).reshape(-1, 5)}
    cols = FE.Columns(t, x, y, p)
    gated, inp, frames = [], [], []
    for w, (a, b) in enumerate((t0 + wb * params.bin_us).tolist()):
        g = FE.gate(cols, (a, b), params)
        fr = FE.frame(g, params)                                              # (C, size, size)
        gated.append(np.column_stack([np.full(len(g), w), g["t"], g["x"], g["y"], g["c"], g["payload"]]))
        ev = input_events(fr, coding, q)
        inp.append(np.column_stack([np.full(len(ev), w), ev]))
        frames.append(fr)
    out["gated"] = np.concatenate(gated).astype(np.int64).reshape(-1, 6) if gated else np.zeros((0, 6), np.int64)
    out["input"] = np.concatenate(inp).astype(np.int64).reshape(-1, 4) if inp else np.zeros((0, 4), np.int64)
    out["frames"] = (np.stack(frames) if frames else
                     np.zeros((0, params.channels, params.size, params.size), np.int64))
    return out


def check_network(params: FE.FrontEnd, input_shape, input_q: int) -> None:
    """The front end must feed the network: frames of shape (C, size, size) and payloads up to the input q."""
    want = (params.channels, params.size, params.size)
    if tuple(input_shape) != want or int(input_q) != params.payload_max:
        raise UsageError(f"front-end vectors need a network whose input is one front-end frame {list(want)} with "
                         f"largest payload {params.payload_max}; the network takes {list(input_shape)} with "
                         f"largest payload {input_q} (frames.windows_used = 1 and the [frames] mode of training)")


def frontend_vectors(src: FrontEndSource, coding: str, q: int) -> dict[str, np.ndarray]:
    """The frontend.npz arrays of all streams."""
    per = [run_stream(s, src.params, coding, q) for s in src.streams]
    arrays = {}
    for name in TABLES:
        rows = [np.column_stack([np.full(len(r[name]), s, np.int64), r[name]]) for s, r in enumerate(per)]
        arrays[name] = (np.concatenate(rows) if rows else np.zeros((0, len(COLUMNS[name]) + 1))).astype(np.int64)
    shape = (0, src.params.channels, src.params.size, src.params.size)
    arrays["frames"] = np.concatenate([r["frames"] for r in per] + [np.zeros(shape, np.int64)]).astype(np.int64)
    arrays["t0"] = np.asarray([r["t0"] for r in per], np.int64)
    arrays["stream_index"] = np.asarray(src.index, np.int64).reshape(len(per))
    arrays["label"] = np.asarray(src.labels, np.int64).reshape(len(per))
    return arrays


def stream_folder(s: int) -> str:
    return f"{FOLDER}/stream_{s:04d}"


def csv_bytes(header: list[str], rows) -> bytes:
    buf = io.StringIO()
    buf.write(",".join(header) + "\n")
    for r in np.asarray(rows, dtype=np.int64).reshape(-1, len(header)).tolist():
        buf.write(",".join(map(str, r)) + "\n")
    return buf.getvalue().encode()


def rows_of(arrays: dict, name: str, s: int) -> np.ndarray:
    """Stream s's rows of table `name`, without the stream column."""
    a = np.asarray(arrays[name], np.int64)
    return a[a[:, 0] == s, 1:]


def csv_files(arrays: dict) -> dict[str, bytes]:
    """{relative path: CSV bytes}: every stream's tables and the summary."""
    n = len(arrays["t0"])
    out = {}
    for s in range(n):
        for name in TABLES:
            out[f"{stream_folder(s)}/{name}.csv"] = csv_bytes(COLUMNS[name], rows_of(arrays, name, s))
    counts = [[len(rows_of(arrays, name, s)) for name in ("events", "bins", "windows", "gated")] for s in range(n)]
    summary = np.column_stack([np.arange(n), arrays["stream_index"], arrays["label"], arrays["t0"],
                               np.asarray(counts, np.int64).reshape(n, 4)])
    out[f"{FOLDER}/summary.csv"] = csv_bytes(SUMMARY_COLUMNS, summary)
    return out


def manifest_entry(src: FrontEndSource, arrays: dict, csv: bool) -> dict:
    return {"version": VERSION, "params": params_dict(src.params), "rules": dict(RULES),
            "streams": len(arrays["t0"]), "windows": len(arrays["windows"]),
            "gated_events": len(arrays["gated"]), "source": src.source, "npz": NPZ,
            "npz_columns": {name: ["stream"] + COLUMNS[name] for name in TABLES},
            "csv_folder": FOLDER if csv else None, "csv_columns": dict(COLUMNS)}


def fmt_row(name: str, row) -> str:
    """A table row in words: '(t 5, x 1, ...)', or 'nothing' for a missing row."""
    if row is None:
        return "nothing"
    cols = COLUMNS[name]
    return "(" + ", ".join(f"{c} {int(v)}" for c, v in zip(cols, row) if c != "window") + ")"


def locate(name: str, rows: np.ndarray, k: int) -> tuple[int | None, int]:
    """(window, position within the window) of row k of a stream's table (window None for events, bins)."""
    if name in ("events", "bins") or k >= len(rows):
        return None, k
    if name == "windows":
        return int(rows[k, 0]), k
    w = int(rows[k, 0])
    return w, int(np.count_nonzero(rows[:k, 0] == w))
