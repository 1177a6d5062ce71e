"""Bit-width sweep: convert + simulate the trained model at every (coding, weight bits, payload bits).

    loss_pp(point)   = 100 * (frame_accuracy - spike_accuracy(point))
    recommendation   = argmin over {points with loss_pp <= tolerance_pp} of
                       (weight_memory_bits, sops_per_sample)

- Grids (recipe section [sweep], CLI): ranges "2-8", lists "2,4,8", a mix "2-4,8", TOML int lists.
- Parallel: points run in joblib's loky worker processes, one torch thread each. A point's metrics
  depend only on the point, the recipe (seed included) and the checkpoint, never on the worker.
- Resumable: each finished point is appended to results.jsonl at once (flush + fsync); a rerun
  skips the points already there. Lines made from another model, data set or [convert] settings
  (fingerprints) are refused rather than mixed.
- Outputs: sweep.csv, heatmap.png, pareto.png, recommendation.json, recipe.toml; codings.png when
  several codings are swept.
"""

from __future__ import annotations

import collections
import copy
import csv
import dataclasses
import io
import json
import os
import queue
import re
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable

from snnconvert import console, files, plots
from snnconvert.errors import FormatError, UsageError, check_bool, check_choice, check_float, check_int, fail
from snnconvert.intnet import CODINGS
from snnconvert.schema import Key

# Bounds of the grids; the converter enforces the same ones per point.
WEIGHT_BITS_RANGE = (2, 16)
PAYLOAD_BITS_RANGE = (1, 8)

_ITEM = re.compile(r"^\s*(\d+)\s*(?:-\s*(\d+)\s*)?$")


def parse_grid(value, name: str, owner: str = "sweep", lo: int = 1, hi: int = 64) -> list[int]:
    """Grid text or int list -> sorted unique ints, e.g. "2-4,8" -> [2, 3, 4, 8].

    Edge cases: a single int is a one-point grid; a reversed range ("8-2") or an empty grid is
    an error; duplicates collapse.
    """
    bad = UsageError(
        f"The '{name}' parameter of {owner} must be a grid of ints in [{lo}, {hi}] "
        f"like '2-8', '2,4,8' or [2, 4, 8]. Got {value!r} instead.")
    out: set[int] = set()
    if isinstance(value, bool):
        raise bad
    if isinstance(value, int):
        items = [value]
    elif isinstance(value, (list, tuple)):
        items = list(value)
    elif isinstance(value, str):
        items = [s for s in value.split(",")]
    else:
        raise bad
    for item in items:
        if isinstance(item, bool):
            raise bad
        if isinstance(item, int):
            a = b = int(item)
        elif isinstance(item, str):
            m = _ITEM.match(item)
            if not m:
                raise bad
            a = int(m.group(1))
            b = int(m.group(2)) if m.group(2) is not None else a
        else:
            raise bad
        if a > b or a < lo or b > hi:
            raise bad
        out.update(range(a, b + 1))
    if not out:
        raise bad
    return sorted(out)


def parse_codings(value, name: str = "codings", owner: str = "sweep") -> list[str]:
    """"payload,ttfs" or ["payload", "ttfs"] -> list in the given order; "" or [] -> [] (= the
    coding of [convert])."""
    opts = ", ".join(repr(c) for c in CODINGS)
    bad = UsageError(f"The '{name}' parameter of {owner} must be a list of codings among {opts} "
                     f"(or '' for the coding of [convert]). Got {value!r} instead.")
    if isinstance(value, str):
        items = [s.strip() for s in value.split(",") if s.strip()]
    elif isinstance(value, (list, tuple)) and all(isinstance(s, str) for s in value):
        items = [s.strip() for s in value]
    else:
        raise bad
    out: list[str] = []
    for s in items:
        if s not in CODINGS:
            raise bad
        if s not in out:
            out.append(s)
    return out


def _grid_validator(lo: int, hi: int):
    def check(value, key: str, section: str) -> list[int]:
        return parse_grid(value, key, section, lo, hi)
    return check


def _codings_validator(value, key: str, section: str) -> list[str]:
    return parse_codings(value, key, section)


SCHEMA: dict[str, Key] = {
    "enabled": Key(True, "bool", "the accuracy-vs-bits frontier is what a hardware budget is chosen from"),
    "weight_bits": Key("2-8", "any", "ternary to 8-bit covers the widths small accelerators use",
                       validator=_grid_validator(*WEIGHT_BITS_RANGE)),
    "payload_bits": Key("1-6", "any", "binary spikes to 6-bit payloads (64 ttfs steps) spans the latency range",
                        validator=_grid_validator(*PAYLOAD_BITS_RANGE)),
    "codings": Key("", "any", "empty: sweep only the coding chosen in [convert]; both codings give equal values",
                   validator=_codings_validator),
    "per_channel": Key(False, "bool", "one scale per tensor is what the simplest datapath implements"),
    "aware": Key(False, "bool", "post-training conversion first; aware fine-tuning costs a training run per point"),
    "aware_epochs": Key(2, "int", "a couple of epochs recover most of the loss at low bit-widths", lo=1, hi=1000),
    "jobs": Key(0, "int", "0 = one process per usable core, fewer when memory is short; points are independent",
                lo=0, hi=256),
    "tolerance_pp": Key(0.5, "float", "half a point of accuracy is within run-to-run noise of small test sets",
                        lo=0.0, hi=100.0),
}


# --- points -------------------------------------------------------------------------------

RESULTS_FORMAT = "snnconvert-sweep-point"
RECOMMENDATION_FORMAT = "snnconvert-sweep-recommendation"
VERSION = 1

# Columns of the concise table and the first columns of sweep.csv; other scalar metrics follow.
PARAM_COLUMNS = ["coding", "weight_bits", "payload_bits", "per_channel", "aware", "aware_epochs"]
METRIC_COLUMNS = ["frame_accuracy", "quantized_accuracy", "spike_accuracy", "conversion_loss_pp", "agreement",
                  "spikes_per_sample", "sops_per_sample", "macs_per_sample", "weight_memory_bits"]


def point_key(p: dict) -> str:
    """Stable identity of a grid point: what a rerun compares to skip finished work."""
    scales = "per-channel" if p["per_channel"] else "per-tensor"
    how = f"aware{p['aware_epochs']}" if p["aware"] else "post-training"
    return f"{p['coding']}/w{p['weight_bits']}/p{p['payload_bits']}/{scales}/{how}"


def make_points(weight_bits, payload_bits, codings: Iterable[str], per_channel: bool = False,
                aware: bool = False, aware_epochs: int = 2) -> list[dict]:
    """The grid in a fixed order (coding, weight bits, payload bits).

    Binary coding has one payload bit by definition, so it contributes one point per weight width
    whatever the payload grid says.
    """
    wgrid = parse_grid(weight_bits, "weight_bits", "sweep", *WEIGHT_BITS_RANGE)
    pgrid = parse_grid(payload_bits, "payload_bits", "sweep", *PAYLOAD_BITS_RANGE)
    cods = parse_codings(list(codings) if not isinstance(codings, str) else codings)
    if not cods:
        raise UsageError("The 'codings' parameter of sweep must name at least one coding. Got [] instead.")
    check_bool(per_channel, "per_channel", "sweep")
    check_bool(aware, "aware", "sweep")
    epochs = check_int(aware_epochs, "aware_epochs", "sweep", 1, 1000) if aware else 0
    points = []
    for c in cods:
        for w in wgrid:
            for p in ([1] if c == "binary" else pgrid):
                pt = {"coding": c, "weight_bits": w, "payload_bits": p, "per_channel": per_channel,
                      "aware": aware, "aware_epochs": epochs}
                pt["key"] = point_key(pt)
                points.append(pt)
    return points


# Resident memory of one worker process after a point: torch, scikit-learn's metrics and the data
# set come to about 0.4 GB on the default recipe (measured with ps); the automatic job count keeps
# this much available memory per process.
WORKER_BYTES = 512 * 2**20


def usable_cpus() -> int:
    """CPUs this process may use: the affinity mask, a cgroup CPU quota (containers often show every
    host CPU but grant two) and LOKY_MAX_CPU_COUNT, whichever is smallest (joblib's count)."""
    from joblib.externals.loky import cpu_count
    return max(1, int(cpu_count()))


def available_memory(meminfo="/proc/meminfo", cgroup="/sys/fs/cgroup") -> int | None:
    """Bytes a new process may still use: MemAvailable of `meminfo`, lowered to a cgroup v2 limit
    (memory.max - memory.current) when one is set. None when neither can be read (not Linux)."""
    found = []
    try:
        for line in Path(meminfo).read_text().splitlines():
            if line.startswith("MemAvailable:"):
                found.append(int(line.split()[1]) * 1024)            # the field is in kB
                break
    except (OSError, ValueError, IndexError):
        pass
    try:
        limit = Path(cgroup, "memory.max").read_text().strip()
        if limit != "max":
            found.append(max(0, int(limit) - int(Path(cgroup, "memory.current").read_text().strip())))
    except (OSError, ValueError):
        pass
    return min(found) if found else None


def resolve_jobs(jobs) -> int:
    """None or 0 -> one process per usable CPU (usable_cpus), at most one per WORKER_BYTES of
    available memory, at least 1. An explicit count is taken as given."""
    if jobs is None or jobs == 0:
        n = usable_cpus()
        mem = available_memory()
        if mem is not None:
            n = min(n, mem // WORKER_BYTES)
        return max(1, n)
    return check_int(jobs, "jobs", "sweep", 0, 256)


# --- the point function --------------------------------------------------------------------

def convert_settings(recipe: dict, point: dict) -> dict:
    """The [convert] settings of the recipe with the swept keys replaced by the point's."""
    s = dict(recipe["convert"])
    s.update({k: point[k] for k in ("coding", "weight_bits", "payload_bits", "per_channel")})
    return s


def evaluate_point(model, dataset, recipe: dict, act_max, point: dict) -> dict:
    """Convert (after optional conversion-aware fine-tuning) and measure one grid point.

    Depends only on the point, the recipe (its seed included) and the float model, so the same
    point gives the same metrics in any process.
    """
    from snnconvert import convert as conv
    if point["aware"]:
        from snnconvert import train
        recipe = copy.deepcopy(recipe)
        recipe["train"]["threads"] = 1  # one thread per process: the sweep's parallelism is across points
        model, act_max = train.finetune_aware(model, dataset, recipe, point["weight_bits"], point["payload_bits"],
                                              point["per_channel"], point["aware_epochs"], int(recipe["seed"]))
    else:
        model = copy.deepcopy(model)
    net, metrics = conv.convert_and_measure(model, dataset, convert_settings(recipe, point), act_max=act_max,
                                            quiet=True)
    metrics = dict(metrics)
    metrics["network_fingerprint"] = net_fingerprint(net)
    return metrics


def net_fingerprint(net) -> str:
    """Hash of every integer table of a network: equal hashes mean bit-identical networks."""
    items = []
    for layer in net.layers:
        items.append([layer.name, layer.kind, layer.weight, layer.bias, layer.m0, layer.shift, layer.q_in,
                      layer.q_out])
    return files.fingerprint(items)


def _call(fn: Callable, model, dataset, recipe: dict, act_max, point: dict) -> tuple[dict, dict, dict]:
    """Run one point single-threaded: the same arithmetic order in a worker and in this process.

    Returns (point, metrics, timing) with wall and CPU seconds of this process for the point.
    """
    import torch
    from threadpoolctl import threadpool_limits
    threads = torch.get_num_threads()
    torch.set_num_threads(1)
    torch.manual_seed(int(recipe.get("seed", 0)))
    t0, c0 = time.perf_counter(), time.process_time()
    try:
        with threadpool_limits(limits=1):  # BLAS/OpenMP too: float sums in one fixed order
            metrics = fn(model, dataset, recipe, act_max, point)
    finally:
        torch.set_num_threads(threads)
    return point, metrics, {"seconds": round(time.perf_counter() - t0, 3),
                            "cpu_seconds": round(time.process_time() - c0, 3)}


# --- the results log -----------------------------------------------------------------------

# Metrics every result record holds, with their range; other metrics are free-form.
_RECORD_METRICS = {"spike_accuracy": (0.0, 1.0), "weight_memory_bits": (0, None), "sops_per_sample": (0.0, None)}
_OPTIONAL_METRICS = {"frame_accuracy": (0.0, 1.0), "quantized_accuracy": (0.0, 1.0), "agreement": (0.0, 1.0),
                     "spikes_per_sample": (0.0, None), "macs_per_sample": (0.0, None),
                     "conversion_loss_pp": (-100.0, 100.0)}


def check_record(rec, owner: str) -> dict:
    """One line of results.jsonl, checked field by field (the one message template, FormatError).

    format and version, key (a str equal to the key of its params), params (coding, widths, flags
    in the sweep's ranges), fingerprints (model, data, settings as str), metrics (an object; the
    accuracies in [0, 1], memory bits and SOPs >= 0, finite).
    """
    E = FormatError
    if not isinstance(rec, dict):
        fail("record", owner, "a JSON object", repr(rec)[:80], "field", E)
    if rec.get("format") != RESULTS_FORMAT:
        fail("format", owner, repr(RESULTS_FORMAT), repr(rec.get("format")), "field", E)
    if rec.get("version", VERSION) != VERSION:
        fail("version", owner, repr(VERSION), repr(rec.get("version")), "field", E)
    for k in ("key", "params", "metrics", "fingerprints"):
        if k not in rec:
            fail(k, owner, "present", "a record without it", "field", E)
    params = rec["params"]
    if not isinstance(params, dict):
        fail("params", owner, "an object", repr(params), "field", E)
    for k in PARAM_COLUMNS:
        if k not in params:
            fail(f"params.{k}", owner, "present", "a record without it", "field", E)
    check_choice(params["coding"], "params.coding", owner, CODINGS, "field", E)
    check_int(params["weight_bits"], "params.weight_bits", owner, *WEIGHT_BITS_RANGE, "field", E)
    check_int(params["payload_bits"], "params.payload_bits", owner, *PAYLOAD_BITS_RANGE, "field", E)
    check_bool(params["per_channel"], "params.per_channel", owner, "field", E)
    check_bool(params["aware"], "params.aware", owner, "field", E)
    check_int(params["aware_epochs"], "params.aware_epochs", owner, 0, 1000, "field", E)
    if rec["key"] != point_key(params):
        fail("key", owner, f"{point_key(params)!r} (the key of its params)", repr(rec["key"]), "field", E)
    fps = rec["fingerprints"]
    if not isinstance(fps, dict) or not all(isinstance(fps.get(k), str) for k in ("model", "data", "settings")):
        fail("fingerprints", owner, "an object with str model, data and settings", repr(fps), "field", E)
    metrics = rec["metrics"]
    if not isinstance(metrics, dict):
        fail("metrics", owner, "an object", repr(metrics)[:80], "field", E)
    for table, required in ((_RECORD_METRICS, True), (_OPTIONAL_METRICS, False)):
        for k, (lo, hi) in table.items():
            if k not in metrics:
                if required:
                    fail(f"metrics.{k}", owner, "present", "a record without it", "field", E)
                continue
            if k == "weight_memory_bits":
                check_int(metrics[k], f"metrics.{k}", owner, lo, hi, "field", E)
            else:
                v = check_float(metrics[k], f"metrics.{k}", owner, lo, hi, what="field", error=E)
                if v in (float("inf"), float("-inf")):
                    fail(f"metrics.{k}", owner, "finite", repr(metrics[k]), "field", E)
    return rec


def read_results(path) -> list[tuple[int, dict]]:
    """(line number, record) of every line of a results.jsonl, each checked by `check_record`.

    A damaged line (bad JSON, a missing key, a metric of the wrong type or range) stops the reader
    with a FormatError naming the file and the line: resuming or reporting from a log that cannot
    be trusted would mix bad figures into the table. Empty lines are skipped; a last line cut short
    by a kill (no newline) is ignored here and dropped by `ResultsLog.load`.
    """
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"file not found: {path}")
    raw = path.read_bytes()
    if raw and not raw.endswith(b"\n"):
        raw = raw[:raw.rfind(b"\n") + 1]
    out = []
    for i, line in enumerate(raw.split(b"\n"), 1):
        if not line.strip():
            continue
        owner = f"{path} line {i}"
        try:
            rec = json.loads(line.decode("utf-8"))
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise FormatError(f"{path}: line {i} is not a sweep result (not valid JSON: {exc}); delete the line or "
                              f"the file, or pass another --out to start a fresh sweep") from None
        out.append((i, check_record(rec, owner)))
    return out


class ResultsLog:
    """results.jsonl: one JSON line per finished point, appended, flushed and fsynced at once.

    A line cut short by a kill (no trailing newline) is dropped on the next open; a bad line
    anywhere else is a FormatError naming the file and the line (`read_results`). Lines made from
    another model, data set or conversion settings are refused rather than mixed.
    """

    def __init__(self, path, fingerprints: dict):
        self.path = Path(path)
        self.fingerprints = dict(fingerprints)

    def load(self) -> dict[str, dict]:
        if not self.path.is_file():
            return {}
        records = read_results(self.path)     # checks every line before the file is touched
        raw = self.path.read_bytes()
        if raw and not raw.endswith(b"\n"):
            cut = raw.rfind(b"\n") + 1
            with open(self.path, "r+b") as fh:
                fh.truncate(cut)
                fh.flush()
                os.fsync(fh.fileno())
        done: dict[str, dict] = {}
        for i, rec in records:
            fps = rec["fingerprints"]
            for what in ("model", "data", "settings"):
                if fps.get(what) != self.fingerprints.get(what):
                    raise UsageError(
                        f"{self.path} holds results of a different {what} ({what} fingerprint "
                        f"{fps.get(what)} in line {i}, {self.fingerprints.get(what)} now); refusing to mix them: "
                        f"delete the file or pass another --out to start a fresh sweep")
            done[rec["key"]] = rec
        return done

    def append(self, record: dict) -> None:
        line = json.dumps(record, sort_keys=True, default=files._json_default) + "\n"
        self.path.parent.mkdir(parents=True, exist_ok=True)
        with open(self.path, "a", encoding="utf-8") as fh:
            fh.write(line)
            fh.flush()
            os.fsync(fh.fileno())


# Worker processes: one torch/BLAS thread each, since the parallelism is across points; idle
# workers stay alive a few minutes so a resumed or extended sweep does not pay their start again.
_WORKER_ENV = {"OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1"}
_WORKER_IDLE_SECONDS = 300


def _executor(n_jobs: int):
    from joblib.externals.loky import get_reusable_executor
    return get_reusable_executor(max_workers=n_jobs, timeout=_WORKER_IDLE_SECONDS, env=_WORKER_ENV)


def _warm() -> None:
    """Import what a point needs, so a worker's start overlaps the parent's loading."""
    import sklearn.metrics  # noqa: F401  (about a CPU second on its own)
    import torch  # noqa: F401

    import snnconvert.convert  # noqa: F401
    import snnconvert.sim.metrics  # noqa: F401


def start_workers(jobs=None) -> int:
    """Start the worker processes of a sweep now, without waiting; returns the job count.

    A sweep of n jobs uses n - 1 workers: this process evaluates points too.
    """
    n_jobs = resolve_jobs(jobs)
    if n_jobs > 1:
        ex = _executor(n_jobs - 1)
        for _ in range(n_jobs - 1):
            ex.submit(_warm)
    return n_jobs


def _in_parallel(pending: list[dict], n_jobs: int, args: tuple):
    """Yield `_call` results as points finish, from n_jobs - 1 loky workers and this process.

    Workers take points from the end of the list, this process from the front; once the list is
    empty this process takes back points still queued for a worker, so nobody idles at the end.
    """
    ex = _executor(n_jobs - 1)
    todo = collections.deque(pending)
    finished: queue.Queue = queue.Queue()
    inflight: dict = {}   # future -> point

    def submit():
        while todo and len(inflight) < 2 * (n_jobs - 1):
            p = todo.pop()
            f = ex.submit(_call, *args, p)
            inflight[f] = p
            f.add_done_callback(finished.put)

    def harvest(block: bool):
        while inflight:
            try:
                f = finished.get(block=block)
            except queue.Empty:
                return
            block = False
            if inflight.pop(f, None) is not None and not f.cancelled():
                yield f.result()

    try:
        submit()
        while todo or inflight:
            yield from harvest(block=False)
            submit()
            if todo:
                yield _call(*args, todo.popleft())
            elif inflight:
                for f in [f for f in inflight if f.cancel()]:
                    todo.append(inflight.pop(f))
                if not todo:
                    yield from harvest(block=True)
    finally:  # on Ctrl-C or a failed point: queued points are dropped, finished ones were logged
        for f in inflight:
            f.cancel()


def run_points(points: list[dict], fn: Callable, model, dataset, recipe: dict, act_max, log: ResultsLog,
               jobs=None, progress: bool = True) -> tuple[list[dict], int]:
    """Evaluate every point not yet in the log; return (records in grid order, number computed).

    Each point is logged as soon as this process has it, in the order points finish; a point's
    metrics do not depend on the process that computed it.
    """
    done = log.load()
    pending = [p for p in points if p["key"] not in done]
    n_jobs = resolve_jobs(jobs)
    args = (fn, model, dataset, recipe, act_max)
    if n_jobs == 1 or len(pending) < 2:
        results = (_call(*args, p) for p in pending)
    else:
        results = _in_parallel(pending, n_jobs, args)
    bar = console.bar(results, total=len(pending), desc="sweep", unit="point", enabled=progress and bool(pending))
    for point, metrics, timing in bar:
        rec = {"format": RESULTS_FORMAT, "version": VERSION, "key": point["key"],
               "params": {k: point[k] for k in PARAM_COLUMNS}, "metrics": metrics,
               "fingerprints": log.fingerprints, **timing}
        log.append(rec)
        done[point["key"]] = rec
        bar.set_postfix_str(point["key"])
    return [done[p["key"]] for p in points], len(pending)


# --- analysis ------------------------------------------------------------------------------

def loss_pp(frame_accuracy: float, accuracy: float) -> float:
    """(frame - spike) * 100: accuracy lost by the conversion, in percentage points."""
    return (float(frame_accuracy) - float(accuracy)) * 100.0


def pareto_front(costs: list[float], accuracies: list[float]) -> list[bool]:
    """Mark points no other point beats: none has cost <= and accuracy >= with one strictly better.

    Equal (cost, accuracy) pairs are all on the front.
    """
    flags = []
    for c, a in zip(costs, accuracies):
        dominated = any((c2 <= c and a2 >= a) and (c2 < c or a2 > a) for c2, a2 in zip(costs, accuracies))
        flags.append(not dominated)
    return flags


def recommend(records: list[dict], frame_accuracy: float, tolerance_pp: float) -> dict:
    """The cheapest point within `tolerance_pp` of the frame accuracy.

    Cheapest = least weight memory bits, then fewest SOPs per sample, then the grid order.
    When no point qualifies, `point` is None and `closest` names the most accurate point.
    """
    tol = check_float(tolerance_pp, "tolerance_pp", "sweep", 0.0, 100.0)
    rows = [_row(r) for r in records]
    ok = [r for r in rows if loss_pp(frame_accuracy, r["spike_accuracy"]) <= tol + 1e-9]
    rule = ("least weight memory bits, then fewest SOPs per sample, among the points whose spike accuracy "
            f"is within {tol:g} pp of the frame accuracy")
    out = {"format": RECOMMENDATION_FORMAT, "version": VERSION, "frame_accuracy": frame_accuracy,
           "tolerance_pp": tol, "rule": rule, "points": len(rows), "within_tolerance": len(ok),
           "point": None, "closest": None}
    if ok:
        best = min(ok, key=lambda r: (r["weight_memory_bits"], r["sops_per_sample"]))
        out["point"] = _summary_point(best, frame_accuracy)
        out["label"] = _label(best)
        out["message"] = (f"recommended: {_label(best)}: spike accuracy {100 * best['spike_accuracy']:.2f} % "
                          f"(frame {100 * frame_accuracy:.2f} %, loss {loss_pp(frame_accuracy, best['spike_accuracy']):.2f} pp), "
                          f"{best['weight_memory_bits']:,} weight memory bits, "
                          f"{best['sops_per_sample']:,.0f} SOPs per sample")
    elif rows:
        best = max(rows, key=lambda r: r["spike_accuracy"])
        out["closest"] = _summary_point(best, frame_accuracy)
        out["label"] = "none within tolerance"
        out["message"] = (f"no point is within {tol:g} pp of the frame accuracy {100 * frame_accuracy:.2f} %; "
                          f"the most accurate is {_label(best)} at {100 * best['spike_accuracy']:.2f} % "
                          f"(loss {loss_pp(frame_accuracy, best['spike_accuracy']):.2f} pp): widen the grid, "
                          f"try --aware or raise --tolerance-pp")
    else:
        out["label"] = "no points"
        out["message"] = "the sweep has no points"
    return out


# The converter's own tolerance verdict; the sweep judges with its own tolerance instead.
_NOT_COPIED = {"tolerance_pp", "within_tolerance"}


def _scalar(v) -> bool:
    return isinstance(v, (bool, int, float, str)) or v is None


def _row(rec: dict) -> dict:
    """Flatten a result record into params + scalar metrics; a dict of scalars becomes `name.key` columns."""
    row = dict(rec["params"])
    for k, v in rec["metrics"].items():
        if k in _NOT_COPIED:
            continue
        if _scalar(v):
            row[k] = v
        elif isinstance(v, dict):
            row.update({f"{k}.{k2}": v2 for k2, v2 in v.items() if _scalar(v2)})
    return row


def _label(row: dict) -> str:
    scales = "per-channel" if row["per_channel"] else "per-tensor"
    how = f", aware {row['aware_epochs']} ep" if row["aware"] else ""
    return f"{row['coding']} w{row['weight_bits']} p{row['payload_bits']} ({scales}{how})"


def _summary_point(row: dict, frame_accuracy: float) -> dict:
    keep = PARAM_COLUMNS + [k for k in METRIC_COLUMNS if k in row]
    out = {k: row[k] for k in keep}
    out["loss_pp"] = loss_pp(frame_accuracy, row["spike_accuracy"])
    return out


def reference_accuracy(records: list[dict], model=None, dataset=None) -> float:
    """The frame model's test accuracy every point is compared against.

    Post-training points all measure the same float model, so their value is used; an aware
    sweep fine-tunes per point, so the float checkpoint is evaluated here instead.
    """
    for rec in records:
        if not rec["params"]["aware"] and "frame_accuracy" in rec["metrics"]:
            return float(rec["metrics"]["frame_accuracy"])
    if model is None or dataset is None:
        raise UsageError("the frame accuracy of the sweep is unknown: no post-training point and no model given")
    from snnconvert.train import evaluate
    return float(evaluate(model, *dataset.test)["accuracy"])


# --- outputs -------------------------------------------------------------------------------

@dataclass
class SweepResult:
    out_dir: Path
    records: list[dict]                 # one per requested point, grid order
    frame_accuracy: float
    tolerance_pp: float
    recommendation: dict
    computed: int                       # points evaluated in this call
    reused: int                         # points taken from results.jsonl
    fingerprints: dict = field(default_factory=dict)
    seconds: dict = field(default_factory=dict)   # wall time of "load", "points", "outputs"


def table_rows(records: list[dict], frame_accuracy: float, tolerance_pp: float) -> list[dict]:
    """Rows of sweep.csv: params, the main metrics, Pareto flags, then the other scalar metrics."""
    rows = [_row(r) for r in records]
    mem = pareto_front([r["weight_memory_bits"] for r in rows], [r["spike_accuracy"] for r in rows])
    sops = pareto_front([r["sops_per_sample"] for r in rows], [r["spike_accuracy"] for r in rows])
    for r, a, b in zip(rows, mem, sops):
        r["loss_pp"] = loss_pp(frame_accuracy, r["spike_accuracy"])
        r["within_tolerance"] = r["loss_pp"] <= tolerance_pp + 1e-9
        r["tolerance_pp"] = tolerance_pp
        r["pareto_memory"], r["pareto_sops"] = a, b
    return rows


def csv_text(rows: list[dict]) -> str:
    first = PARAM_COLUMNS + METRIC_COLUMNS + ["loss_pp", "tolerance_pp", "within_tolerance", "pareto_memory",
                                              "pareto_sops"]
    extra = sorted({k for r in rows for k in r} - set(first))
    cols = [c for c in first if any(c in r for r in rows)] + extra
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n", extrasaction="ignore")
    w.writeheader()
    for r in rows:
        w.writerow({c: ("" if r.get(c) is None else r.get(c)) for c in cols})
    return buf.getvalue()


def latency_steps(row: dict):
    """Time steps from the first input event to the decision, or None when not recorded.

    payload/binary: every event of a window is sent at its close, one step per window, so the
    latency is the number of pipeline stages (input window + one per weighted layer);
    ttfs: the steps of every window up to the close of the output window (window_steps).
    """
    v = row.get("latency.window_steps") if row.get("coding") == "ttfs" else row.get("latency.pipeline_stages")
    return v if isinstance(v, (int, float)) and not isinstance(v, bool) else None


def energy_nj(row: dict):
    """The spike network's estimated arithmetic energy per sample in nJ, or None when not recorded."""
    v = row.get("energy.spike_pj_per_sample")
    return v / 1000.0 if isinstance(v, (int, float)) and not isinstance(v, bool) else None


def checkpoint_info(ckpt_aware, aware_sweep: bool = False, aware_epochs: int = 0) -> dict:
    """What the swept model was trained for, with one sentence that says it.

    ckpt_aware: the checkpoint's "aware" field (None for a float checkpoint, else a dict with
    weight_bits, payload_bits, per_channel). An aware checkpoint was fine-tuned for one budget:
    its accuracy at other widths is not what a model trained for them would give.
    """
    if isinstance(ckpt_aware, dict) and "weight_bits" in ckpt_aware and "payload_bits" in ckpt_aware:
        k, p = int(ckpt_aware["weight_bits"]), int(ckpt_aware["payload_bits"])
        scales = "per-channel" if ckpt_aware.get("per_channel") else "per-tensor"
        return {"aware": True, "weight_bits": k, "payload_bits": p, "per_channel": bool(ckpt_aware.get("per_channel")),
                "note": f"checkpoint fine-tuned conversion-aware for weight bits {k}, payload bits {p} ({scales}): "
                        f"points at other widths convert a model trained for {k}/{p}, and the frame model is "
                        f"that fake-quantized model"}
    if aware_sweep:
        return {"aware": False, "note": f"each point fine-tuned conversion-aware for its own widths "
                                        f"({aware_epochs} epochs) from the float checkpoint"}
    return {"aware": False, "note": ""}


def format_table(rows: list[dict], recommendation: dict) -> str:
    """The concise end-of-sweep table; '*' marks the memory Pareto front, '<' the recommendation.

    With more than one coding, two columns show what differs between codings: latency in time
    steps and the estimated energy per sample. A note on the checkpoint (conversion-aware for one
    budget) heads the table.
    """
    rec = recommendation.get("point") or {}
    multi = len({r["coding"] for r in rows}) > 1
    head = f"{'coding':<8} {'W':>2} {'P':>2} {'spike %':>8} {'loss pp':>8} {'weight kbit':>11} {'SOPs/sample':>12}"
    if multi:
        head += f" {'steps':>6} {'nJ (est.)':>10}"
    lines = []
    note = (recommendation.get("checkpoint") or {}).get("note")
    if note:
        lines.append(f"note: {note}")
    lines += [head, "-" * len(head)]
    for r in rows:
        mark = "*" if r.get("pareto_memory") else " "
        if rec and all(rec.get(k) == r.get(k) for k in PARAM_COLUMNS):
            mark += "<"
        line = (f"{r['coding']:<8} {r['weight_bits']:>2} {r['payload_bits']:>2} "
                f"{100 * r['spike_accuracy']:>8.2f} {r['loss_pp']:>8.2f} "
                f"{r['weight_memory_bits'] / 1000:>11.2f} {r['sops_per_sample']:>12,.0f}")
        if multi:
            steps, nj = latency_steps(r), energy_nj(r)
            line += f" {'-' if steps is None else f'{steps:,.0f}':>6} {'-' if nj is None else f'{nj:,.1f}':>10}"
        lines.append(f"{line} {mark}")
    lines.append("* on the accuracy / weight-memory Pareto front   < recommended" +
                 ("   steps: latency in time steps   nJ: energy estimate per sample" if multi else ""))
    return "\n".join(lines)






def loss_scale(losses, tolerance_pp: float):
    """(colour map, norm, bin edges) for losses in pp: a diverging scale that breaks at the tolerance.

    Blues below the tolerance (within it; darker = better than the frame model), reds above it
    (darker = larger loss), in bins [lo, 0, tol] and tol, 1, 2, 5, 10, 20, 50, 100 pp (those above
    tol, up to the largest loss), so 0.3 pp and 3 pp never share a colour.
    """
    import numpy as np
    from matplotlib.colors import BoundaryNorm, ListedColormap
    plt = plots.pyplot()
    vals = [float(v) for v in losses] or [0.0]
    tol, top = float(tolerance_pp), max(vals)
    good = sorted({min(min(vals), -max(tol, 0.5)) - 1e-9, *([0.0] if tol > 0 else []), tol})
    bad = [tol]
    for edge in (1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0):
        if edge > tol and bad[-1] < top:
            bad.append(edge)
    if len(bad) == 1:          # nothing beyond the tolerance: one red bin still shows what red means
        bad.append(max(2 * tol, tol + 1.0))
    elif bad[-1] < top:
        bad.append(top + 1e-9)
    edges = good + bad[1:]
    n_good, n_bad = len(good) - 1, len(bad) - 1
    blues = [plt.cm.Blues(x) for x in np.linspace(0.6, 0.3, n_good)] if n_good else []
    reds = [plt.cm.Reds(x) for x in np.linspace(0.25, 0.9, n_bad)]
    cmap = ListedColormap(blues + reds)
    return cmap, BoundaryNorm(edges, cmap.N), edges


def _grid_groups(rows: list[dict], value):
    """Codings whose grids are equal share one panel: [(codings, {(w, p): value})]."""
    groups: list[tuple[list[str], dict]] = []
    for c in dict.fromkeys(r["coding"] for r in rows):
        grid = {(r["weight_bits"], r["payload_bits"]): value(r) for r in rows if r["coding"] == c}
        for cods, g in groups:
            if g.keys() == grid.keys() and all(abs(g[k] - grid[k]) < 1e-9 for k in g):
                cods.append(c)
                break
        else:
            groups.append(([c], grid))
    return groups


def _is_rec(row: dict, rec: dict) -> bool:
    return bool(rec) and all(rec.get(k) == row.get(k) for k in ("weight_bits", "payload_bits"))


def heatmap_figure(rows: list[dict], frame_accuracy: float, tolerance_pp: float = 0.5,
                   recommendation: dict | None = None, note: str = ""):
    """Loss against the frame model (pp) over weight bits x payload bits on `loss_scale`.

    Cells show spike accuracy and loss; points within tolerance are outlined, the recommended
    point carries a star. Codings with equal accuracy at every point share one panel.
    """
    import numpy as np
    from matplotlib.patches import Rectangle
    plt = plots.pyplot()
    rec = (recommendation or {}).get("point") or {}
    groups = _grid_groups(rows, lambda r: r["loss_pp"])
    acc = {(r["coding"], r["weight_bits"], r["payload_bits"]): 100 * r["spike_accuracy"] for r in rows}
    wb = sorted({r["weight_bits"] for r in rows})
    widths = [max(1.5, len({p for _, p in g})) for _, g in groups]
    cmap, norm, edges = loss_scale([r["loss_pp"] for r in rows], tolerance_pp)
    fig, axes = plt.subplots(1, len(groups), figsize=(2.4 + 1.05 * sum(widths), 1.6 + 0.62 * max(4, len(wb))),
                             squeeze=False, layout="constrained", gridspec_kw={"width_ratios": widths})
    im = None
    for ax, (cods, g) in zip(axes[0], groups):
        pb = sorted({p for _, p in g})
        grid = np.full((len(wb), len(pb)), np.nan)  # (weight bits, payload bits)
        for (w, p), v in g.items():
            grid[wb.index(w), pb.index(p)] = v
        im = ax.imshow(np.ma.masked_invalid(grid), origin="lower", cmap=cmap, norm=norm, aspect="auto")
        for (w, p), v in g.items():
            i, j = wb.index(w), pb.index(p)
            rgb = cmap(norm(v))[:3]
            dark = 0.299 * rgb[0] + 0.587 * rgb[1] + 0.114 * rgb[2] < 0.5
            ax.text(j, i, f"{acc[(cods[0], w, p)]:.1f} %\n{v:+.2f} pp", ha="center", va="center", fontsize=7,
                    color="white" if dark else "black")
            if v <= tolerance_pp + 1e-9:
                ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, ec="black", lw=1.6))
            if rec and rec.get("coding") in cods and _is_rec({"weight_bits": w, "payload_bits": p}, rec):
                ax.add_patch(Rectangle((j - 0.46, i - 0.46), 0.92, 0.92, fill=False, ec="gold", lw=3))
                ax.plot([j + 0.33], [i + 0.3], marker="*", ms=11, color="gold", mec="black", mew=0.8)
        ax.set_xticks(range(len(pb)), [str(p) for p in pb])
        ax.set_yticks(range(len(wb)), [str(w) for w in wb])
        ax.set_xlabel("payload bits")
        ax.set_ylabel("weight bits")
        same = " (equal accuracy at every point)" if len(cods) > 1 else ""
        ax.set_title(" = ".join(cods) + " coding" + same, fontsize=9)
    cb = fig.colorbar(im, ax=axes[0].tolist(), spacing="uniform", ticks=edges[1:-1], shrink=0.9)
    cb.ax.set_yticklabels([f"{e:g}" for e in edges[1:-1]])
    cb.set_label(f"loss against the frame model (pp)\nblue: within {tolerance_pp:g} pp, red: beyond", fontsize=8)
    title = (f"Spike accuracy and loss against the frame model ({100 * frame_accuracy:.2f} %)\n"
             f"outlined: within {tolerance_pp:g} pp;  star: recommended (least weight memory, then fewest SOPs)")
    if note:
        title += "\n" + _wrap(note)
    fig.suptitle(title, fontsize=9)
    return fig


def _wrap(text: str, width: int = 110) -> str:
    import textwrap
    return "\n".join(textwrap.wrap(text, width))


def plot_heatmap(rows: list[dict], frame_accuracy: float, path: Path, tolerance_pp: float = 0.5,
                 recommendation: dict | None = None, note: str = "") -> None:
    """heatmap.png: see heatmap_figure."""
    plots.save_png(heatmap_figure(rows, frame_accuracy, tolerance_pp, recommendation, note), path)


def _si(x, _pos=None) -> str:
    """Tick label without exponents: 30k, 200k, 1.5M."""
    for div, suf in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if abs(x) >= div:
            return f"{x / div:g}{suf}"
    return f"{x:g}"


def label_points(ax, items, fontsize: float = 6.5) -> None:
    """Write text beside points so that no two labels overlap: each (x, y, text) takes the first
    free spot among offsets right/left/above/below at growing distance, with a leader line when
    it lands away from its point. Place it after the axis limits and scales are final."""
    fig = ax.figure
    renderer = fig.canvas.get_renderer()
    taken = []
    offsets = [(4, 2), (4, -9), (-4, 2), (-4, -9)]
    for d in (12, 20, 28, 36, 46, 58):
        offsets += [(6, d), (6, -d - 6), (-6, d), (-6, -d - 6)]
    for x, y, text in sorted(items, key=lambda it: (-it[1], it[0])):
        t = None
        for dx, dy in offsets:
            t = ax.annotate(text, (x, y), xytext=(dx, dy), textcoords="offset points", fontsize=fontsize,
                            color="#333", zorder=4, ha="left" if dx > 0 else "right")
            box = t.get_window_extent(renderer).expanded(1.05, 1.15)
            inside = ax.get_window_extent(renderer).contains(box.x0, box.y0) and \
                ax.get_window_extent(renderer).contains(box.x1, box.y1)
            if inside and not any(box.overlaps(b) for b in taken):
                break
            t.remove()
            t = None
        if t is None:   # no free spot: the nearest, overlapping
            t = ax.annotate(text, (x, y), xytext=offsets[0], textcoords="offset points", fontsize=fontsize,
                            color="#333", zorder=4)
            box = t.get_window_extent(renderer)
        elif abs(t.xyann[1]) > 10:
            t.arrow_patch = None
            t.remove()
            t = ax.annotate(text, (x, y), xytext=t.xyann, textcoords="offset points", fontsize=fontsize,
                            color="#333", zorder=4, ha=t.get_ha(),
                            arrowprops={"arrowstyle": "-", "color": "#999", "lw": 0.5, "shrinkA": 0, "shrinkB": 2})
        taken.append(box)


def _point_label(r: dict, multi: bool) -> str:
    return (r["coding"][0] if multi else "") + f"{r['weight_bits']}/{r['payload_bits']}"


def pareto_figure(rows: list[dict], frame_accuracy: float, tolerance_pp: float, recommendation: dict,
                  note: str = ""):
    """Accuracy against weight memory and against SOPs per sample, zoomed to the band near the
    frame model: from frame - max(5 tol, 2 pp) (lower when even the best point is further down)
    to just above the best point. Points below are left out and counted in the panel titles.
    Each point is labelled weight bits/payload bits."""
    from matplotlib import ticker
    plt = plots.pyplot()
    frame = 100 * frame_accuracy
    tol = float(tolerance_pp)
    accs = [100 * r["spike_accuracy"] for r in rows]
    lo = min(frame - max(5 * tol, 2.0), max(accs) - 1.0)   # the best point is always in view
    hi = max(max(accs), frame) + max(0.4 * tol, 0.3)
    rec = recommendation.get("point") or {}
    multi = len({r["coding"] for r in rows}) > 1
    markers = {"payload": "o", "ttfs": "s", "binary": "^"}
    fig, axes = plt.subplots(1, 2, figsize=(12, 5), sharey=True)
    pending = []   # labels are placed once the layout is final
    for ax, cost, flag, label in ((axes[0], "weight_memory_bits", "pareto_memory", "weight memory (bits)"),
                                  (axes[1], "sops_per_sample", "pareto_sops", "SOPs per sample")):
        ax.axhspan(frame - tol, hi, color="tab:green", alpha=0.13, lw=0, label=f"within {tol:g} pp of the frame model")
        ax.axhline(frame - tol, color="tab:green", lw=1.2)
        ax.axhline(frame, color="k", ls="--", lw=1, label=f"frame model {frame:.2f} %")
        for c in dict.fromkeys(r["coding"] for r in rows):
            pts = [r for r in rows if r["coding"] == c]
            shown = [r for r in pts if 100 * r["spike_accuracy"] >= lo]
            ax.scatter([r[cost] for r in shown], [100 * r["spike_accuracy"] for r in shown], s=26, alpha=0.75,
                       marker=markers.get(c, "o"), label=f"{c} points", zorder=3)
        front = sorted((r for r in rows if r[flag]), key=lambda r: r[cost])
        ax.step([r[cost] for r in front], [100 * r["spike_accuracy"] for r in front], where="post",
                color="crimson", lw=1.3, label="Pareto front", zorder=2)
        if rec:
            ax.scatter([rec[cost]], [100 * rec["spike_accuracy"]], marker="*", s=260, color="gold",
                       edgecolors="k", zorder=5, label="recommended")
        labels: dict = {}
        for r in rows:
            y = 100 * r["spike_accuracy"]
            if y >= lo:
                labels.setdefault((r[cost], round(y, 3)), []).append(_point_label(r, multi))
        ax.set_ylim(lo - 0.03 * (hi - lo), hi)
        xs = [r[cost] for r in rows if 100 * r["spike_accuracy"] >= lo]
        if min(r[cost] for r in rows) > 0:
            ax.set_xscale("log")
            ax.set_xlim(min(xs) / 1.08, max(xs) * 1.12)
        else:
            pad = 0.05 * (max(xs) - min(xs) or 1.0)
            ax.set_xlim(min(xs) - pad, max(xs) + 2 * pad)
        pending.append((ax, [(x, y, ", ".join(names)) for (x, y), names in labels.items()]))
        if min(r[cost] for r in rows) > 0:
            ax.xaxis.set_major_locator(ticker.LogLocator(subs=(1.0, 2.0, 5.0)))
            ax.xaxis.set_major_formatter(ticker.FuncFormatter(_si))
            ax.xaxis.set_minor_formatter(ticker.NullFormatter())
        ax.set_xlabel(label)
        ax.grid(alpha=0.3)
        n_below = sum(a < lo for a in accs)
        if n_below:
            ax.set_title(f"{n_below} of {len(rows)} points lie below {lo:.1f} % and are left out (the heatmap "
                         "shows every point)", fontsize=8, color="dimgrey")
    axes[0].set_ylabel("spike accuracy (%)")
    sec = axes[1].secondary_yaxis("right", functions=(lambda a: frame - a, lambda l: frame - l))
    sec.set_ylabel("loss against the frame model (pp)")
    handles, labels_ = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels_, loc="lower center", ncol=min(len(labels_), 4), fontsize=8,
               bbox_to_anchor=(0.5, -0.1), frameon=False)
    title = ("Accuracy against hardware cost (counts, not measured energy); labels: "
             + ("coding initial + " if multi else "") + "weight bits/payload bits")
    if note:
        title += "\n" + _wrap(note, 130)
    fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    for ax, items in pending:
        label_points(ax, items)
    return fig


def plot_pareto(rows: list[dict], frame_accuracy: float, tolerance_pp: float, recommendation: dict,
                path: Path, note: str = "") -> None:
    """pareto.png: see pareto_figure."""
    plots.save_png(pareto_figure(rows, frame_accuracy, tolerance_pp, recommendation, note), path)


def codings_figure(rows: list[dict], recommendation: dict | None = None, note: str = ""):
    """What differs between codings at equal widths: latency in time steps and estimated energy
    per sample against payload bits, one line per coding, at one weight width (the recommended
    point's, else the widest swept)."""
    from matplotlib import ticker
    plt = plots.pyplot()
    rec = (recommendation or {}).get("point") or {}
    wb = rec.get("weight_bits") or max(r["weight_bits"] for r in rows)
    fig, axes = plt.subplots(1, 2, figsize=(10, 3.6), layout="constrained")
    for c in dict.fromkeys(r["coding"] for r in rows):
        pts = sorted((r for r in rows if r["coding"] == c and r["weight_bits"] == wb), key=lambda r: r["payload_bits"])
        for ax, fn in ((axes[0], latency_steps), (axes[1], energy_nj)):
            xy = [(r["payload_bits"], fn(r)) for r in pts if fn(r) is not None]
            if xy:
                ax.plot(*zip(*xy), marker={"payload": "o", "ttfs": "s", "binary": "^"}.get(c, "o"), label=c)
                for x, y in xy:
                    ax.annotate(f"{y:,.0f}" if ax is axes[0] else f"{y:,.1f}", (x, y), xytext=(5, 3),
                                textcoords="offset points", fontsize=7)
    axes[0].set_ylabel("latency (time steps, input to decision)")
    axes[0].set_yscale("log")
    axes[0].yaxis.set_major_locator(ticker.LogLocator(subs=(1.0, 2.0, 5.0)))
    axes[0].yaxis.set_major_formatter(ticker.FuncFormatter(_si))
    axes[0].yaxis.set_minor_formatter(ticker.NullFormatter())
    axes[1].set_ylabel("energy per sample (nJ, estimate)")
    for ax in axes:
        ax.set_xlabel("payload bits")
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
        ax.xaxis.get_major_locator().set_params(integer=True)
    title = (f"What the codings change at weight bits {wb}: latency and energy (energy: estimate from operation "
             "counts, not a measurement)")
    if note:
        title += "\n" + _wrap(note)
    fig.suptitle(title, fontsize=9)
    return fig


def write_outputs(result: SweepResult, recipe: dict | None = None) -> None:
    """sweep.csv, heatmap.png, pareto.png (codings.png for several codings), recommendation.json and
    recipe.toml in result.out_dir."""
    out = result.out_dir
    rows = table_rows(result.records, result.frame_accuracy, result.tolerance_pp)
    files.atomic_write_text(out / "sweep.csv", csv_text(rows))
    files.atomic_write_json(out / "recommendation.json", result.recommendation)
    if rows:
        note = (result.recommendation.get("checkpoint") or {}).get("note", "")
        plot_heatmap(rows, result.frame_accuracy, out / "heatmap.png", result.tolerance_pp, result.recommendation,
                     note)
        plot_pareto(rows, result.frame_accuracy, result.tolerance_pp, result.recommendation, out / "pareto.png",
                    note)
        if len({r["coding"] for r in rows}) > 1:
            plots.save_png(codings_figure(rows, result.recommendation, note), out / "codings.png")
        elif (out / "codings.png").exists():  # left by an earlier sweep of several codings
            (out / "codings.png").unlink()
    if recipe is not None:
        from snnconvert import recipe as recipe_mod
        recipe_mod.save(recipe, out)


# --- entry points --------------------------------------------------------------------------

def _fingerprints(model, dataset, recipe: dict) -> dict:
    swept = {"coding", "weight_bits", "payload_bits", "per_channel", "tolerance_pp"}  # the last changes no metric
    settings = {k: v for k, v in recipe["convert"].items() if k not in swept}
    return {"model": files.fingerprint({k: v for k, v in model.state_dict().items()}),
            "data": str(dataset.fingerprint),
            "settings": files.fingerprint(settings, recipe.get("seed"))}


def _lean(dataset):
    """The dataset without its raw recordings: workers need the frames only, and every task
    ships its arguments to a worker process."""
    if dataclasses.is_dataclass(dataset):
        drop = {f.name: None for f in dataclasses.fields(dataset) if f.name in ("recordings", "windows")}
        return dataclasses.replace(dataset, **drop) if drop else dataset
    return dataset


def run_sweep(train_dir, weight_bits="2-8", payload_bits="1-6", codings=None, per_channel: bool = False,
              aware: bool = False, aware_epochs: int = 2, jobs=None, out_dir=None, tolerance_pp: float = 0.5,
              progress: bool = True, recipe: dict | None = None, point_fn: Callable | None = None,
              context=None) -> SweepResult:
    """Convert and measure every grid point of the checkpoint in `train_dir`; resumable.

    `recipe` supplies the [convert] settings and the seed (default: the checkpoint's recipe).
    `codings` None or [] sweeps the recipe's [convert] coding. `out_dir` defaults to the folder
    `sweep` beside `train_dir`. `point_fn(model, dataset, recipe, act_max, point) -> metrics`
    replaces the real conversion (tests); `context=(model, ckpt, dataset)` skips loading.
    """
    train_dir = Path(train_dir)
    t0 = time.perf_counter()
    if point_fn is None:
        start_workers(jobs)
    if context is None:
        from snnconvert import data, train
        model, ckpt = train.load_checkpoint(train_dir)
        recipe = copy.deepcopy(recipe if recipe is not None else ckpt["recipe"])
        dataset = data.load_dataset(recipe, progress=progress)
        train.check_checkpoint_fits(model, ckpt, dataset, train_dir)
    else:
        model, ckpt, dataset = context
        recipe = copy.deepcopy(recipe if recipe is not None else ckpt["recipe"])
    tol = check_float(tolerance_pp, "tolerance_pp", "sweep", 0.0, 100.0)
    if aware and ckpt.get("aware"):
        raise UsageError(f"{train_dir} holds a conversion-aware checkpoint; an aware sweep fine-tunes each point "
                         "from a float checkpoint: pass the float model's training folder")
    cods = parse_codings(codings if codings is not None else []) or [recipe["convert"]["coding"]]
    points = make_points(weight_bits, payload_bits, cods, per_channel, aware, aware_epochs)
    jobs = resolve_jobs(jobs)
    base = train_dir if train_dir.is_dir() else train_dir.parent
    out = Path(out_dir) if out_dir is not None else base.parent / "sweep"
    fps = _fingerprints(model, dataset, recipe)
    log = ResultsLog(out / "results.jsonl", fps)
    t1 = time.perf_counter()
    records, computed = run_points(points, point_fn or evaluate_point, model, _lean(dataset), recipe,
                                   ckpt.get("act_max"), log, jobs, progress)
    t2 = time.perf_counter()
    frame = reference_accuracy(records, model, dataset)
    rec = recommend(records, frame, tol)
    rec["checkpoint"] = checkpoint_info(ckpt.get("aware"), aware, aware_epochs)
    result = SweepResult(out, records, frame, tol, rec, computed, len(points) - computed, fps)
    recipe.setdefault("sweep", {}).update({
        "weight_bits": sorted({p["weight_bits"] for p in points}),
        "payload_bits": parse_grid(payload_bits, "payload_bits", "sweep", *PAYLOAD_BITS_RANGE),
        "codings": cods, "per_channel": per_channel, "aware": aware, "aware_epochs": aware_epochs,
        "jobs": jobs, "tolerance_pp": tol})
    write_outputs(result, recipe)
    result.seconds = {"load": round(t1 - t0, 3), "points": round(t2 - t1, 3),
                      "outputs": round(time.perf_counter() - t2, 3)}
    return result


def run_from_recipe(train_dir, recipe: dict, out_dir, progress: bool = True) -> SweepResult:
    """The sweep of a pipeline run: grid and options from the recipe's [sweep] section."""
    s = recipe["sweep"]
    return run_sweep(train_dir, s["weight_bits"], s["payload_bits"], s["codings"], s["per_channel"], s["aware"],
                     s["aware_epochs"], s["jobs"], out_dir, s["tolerance_pp"], progress, recipe=recipe)
