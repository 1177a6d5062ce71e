"""Golden vectors: the reference simulator's events for a few test samples, as NPZ and CSV.

Every event table has the columns (addr, t, payload) in the reference simulator's emission order
(payload coding: by address at window end, t = 0; ttfs: by time step, then address).
In vectors.npz the tables of all samples are stacked with a leading `sample` column:
    x                 (N, C, H, W) int64   input payloads the vectors were made from
    sample_index      (N,)   position of each sample in the test set it came from
    label             (N,)   true class, -1 when unknown
    input.events      (K, 4) sample, addr, t, payload of the input layer's events
    <layer id>.events (K, 4) same, for every layer that emits events (not sumpool)
    <layer id>.potentials (N, neurons) every conv/dense layer's potentials at window close (after the
                      declared accumulator limit), flat address order
    directed          (N,)   0 for a test sample, else the code of a directed vector (manifest vectors.directed_kinds)
    potentials        (N, n_classes) output potentials at window close
    decision          (N,)   argmax of the potentials, ties to the lowest class
    early_decision    (N,)   ttfs: class of the first output spike; -1 if none or not ttfs
CSV (optional): vectors/sample_0003/<stream>.csv with header addr,t,payload,
vectors/sample_0003/<layer id>.potentials.csv (addr,potential), vectors/sample_0003/potentials.csv
(class,potential) and vectors/summary.csv.
"""

from __future__ import annotations

import io

import numpy as np

from snnconvert import console
from snnconvert.export.manifest import layer_id
from snnconvert.intnet import IntNetwork

EVENT_COLUMNS = ["addr", "t", "payload"]
SUMMARY_COLUMNS = ["sample", "index", "label", "decision", "early_decision", "directed"]
POTENTIAL_COLUMNS = ["addr", "potential"]
INPUT = "input"


def pick_samples(n_total: int, count: int, labels=None) -> np.ndarray:
    """Indices of `count` samples: round-robin over the classes (each class's samples in set order),
    so a handful of vectors still covers every class; without labels, the first `count`.
    The order is by class turn, then by position, and never depends on a random draw.
    """
    count = min(int(count), int(n_total))
    if labels is None:
        return np.arange(count, dtype=np.int64)
    labels = np.asarray(labels).reshape(-1)
    queues = [np.flatnonzero(labels == c) for c in np.unique(labels)]
    picked, turn = [], 0
    while len(picked) < count:
        for queue in queues:
            if turn < queue.size and len(picked) < count:
                picked.append(int(queue[turn]))
        turn += 1
    return np.asarray(picked, dtype=np.int64)


def event_streams(net: IntNetwork) -> list[tuple[str, int | None]]:
    """(stream id, layer index) of every event table in golden order: the input, then each layer with events."""
    return [(INPUT, None)] + [(layer_id(i, L.name), i) for i, L in enumerate(net.layers) if L.kind != "sumpool"]


def _ev3(events) -> np.ndarray:
    """Structured (addr, t, payload) events -> int64 (K, 3)."""
    e = np.asarray(events)
    if e.dtype.names:
        return np.stack([e["addr"], e["t"], e["payload"]], axis=1).astype(np.int64).reshape(-1, 3)
    return np.asarray(e, dtype=np.int64).reshape(-1, 3)


def trace_streams(net: IntNetwork, trace) -> dict[str, np.ndarray]:
    """The event tables of one RefTrace as {stream id: int64 (K, 3)}."""
    out = {INPUT: _ev3(trace.input_events)}
    for sid, i in event_streams(net)[1:]:
        ev = trace.layer_events[i]
        if ev is None:
            raise ValueError(f"reference simulator gave no events for layer {net.layers[i].name!r}")
        out[sid] = _ev3(ev)
    return out


def potential_layers(net: IntNetwork) -> list[tuple[str, int]]:
    """(layer id, layer index) of every layer with potentials (conv, dense) in layer order."""
    return [(layer_id(i, L.name), i) for i, L in enumerate(net.layers) if L.weight is not None]


def simulate(net: IntNetwork, x_int: np.ndarray, progress: bool = True, desc: str = "golden vectors") -> list:
    """Run the event-by-event reference simulator on each sample: one RefTrace per sample (with every
    layer's potentials)."""
    from snnconvert.sim.reference import Tables, run_sample
    tables = Tables(net)  # fan-out index tables, built once for all samples
    return [run_sample(net, x, tables, keep_potentials=True) for x in console.bar(x_int, desc=desc, enabled=progress)]


def golden_vectors(net: IntNetwork, x_int: np.ndarray, sample_index: np.ndarray, labels=None,
                   progress: bool = True, directed=None) -> dict[str, np.ndarray]:
    """The vectors.npz arrays for input payloads `x_int` (N, C, H, W) int64; `directed` (N,) codes
    (0 = test sample)."""
    x_int = np.asarray(x_int, dtype=np.int64)
    n = x_int.shape[0]
    traces = simulate(net, x_int, progress)
    arrays = {"x": x_int, "sample_index": np.asarray(sample_index, dtype=np.int64),
              "label": (np.full(n, -1, dtype=np.int64) if labels is None else np.asarray(labels, dtype=np.int64))}
    per = [trace_streams(net, tr) for tr in traces]
    for sid, _ in event_streams(net):
        rows = [np.column_stack([np.full(len(p[sid]), s, dtype=np.int64), p[sid]]) for s, p in enumerate(per)]
        arrays[f"{sid}.events"] = np.concatenate(rows, axis=0) if rows else np.zeros((0, 4), np.int64)  # (K, 4)
    for lid, i in potential_layers(net):
        arrays[f"{lid}.potentials"] = np.stack([t.layer_potentials[i] for t in traces]).reshape(n, -1)
    arrays["directed"] = np.zeros(n, np.int64) if directed is None else np.asarray(directed, np.int64).reshape(n)
    arrays["potentials"] = np.stack([np.asarray(t.potentials, dtype=np.int64) for t in traces]).reshape(n, -1)
    arrays["decision"] = np.asarray([t.decision for t in traces], dtype=np.int64).reshape(n)
    arrays["early_decision"] = np.asarray([t.early_decision for t in traces], dtype=np.int64).reshape(n)
    return arrays


def sample_folder(s: int) -> str:
    return f"vectors/sample_{s:04d}"


def _csv(header: list[str], rows: np.ndarray) -> bytes:
    buf = io.StringIO()
    buf.write(",".join(header) + "\n")
    for r in np.asarray(rows, dtype=np.int64).tolist():
        buf.write(",".join(map(str, r)) + "\n")
    return buf.getvalue().encode()


def csv_files(net: IntNetwork, arrays: dict[str, np.ndarray]) -> dict[str, bytes]:
    """{relative path: CSV bytes} of every sample's event tables, potentials, and the summary."""
    n = arrays["x"].shape[0]
    out = {}
    for sid, _ in event_streams(net):
        ev = arrays[f"{sid}.events"]
        for s in range(n):
            out[f"{sample_folder(s)}/{sid}.csv"] = _csv(EVENT_COLUMNS, ev[ev[:, 0] == s, 1:])
    for lid, _ in potential_layers(net):
        v = arrays[f"{lid}.potentials"]
        for s in range(n):
            out[f"{sample_folder(s)}/{lid}.potentials.csv"] = _csv(POTENTIAL_COLUMNS,
                                                                   np.column_stack([np.arange(v.shape[1]), v[s]]))
    for s in range(n):
        pot = arrays["potentials"][s]
        out[f"{sample_folder(s)}/potentials.csv"] = _csv(["class", "potential"],
                                                         np.column_stack([np.arange(pot.size), pot]))
    out["vectors/summary.csv"] = _csv(SUMMARY_COLUMNS, np.column_stack(
        [np.arange(n), arrays["sample_index"], arrays["label"], arrays["decision"], arrays["early_decision"],
         arrays["directed"]]))
    return out


def first_difference(expected: np.ndarray, got: np.ndarray) -> int | None:
    """Row index of the first difference between two (K, 3) event tables (a length difference
    counts at the shorter length); None when equal."""
    k = min(len(expected), len(got))
    diff = np.flatnonzero(np.any(expected[:k] != got[:k], axis=1))
    if diff.size:
        return int(diff[0])
    return None if len(expected) == len(got) else k
