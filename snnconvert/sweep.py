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
- Outputs: sweep.csv, heatmap.png, pareto.png, recommendation.json, recipe.toml.
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

from snnconvert import files
from snnconvert.errors import FormatError, UsageError, check_bool, check_float, check_int
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

class ResultsLog:
    """results.jsonl: one JSON line per finished point, appended, flushed and fsynced at once.

    A line cut short by a kill (no trailing newline) is dropped on the next open; a bad line
    anywhere else is a FormatError. Lines made from another model, data set or conversion
    settings are refused rather than mixed.
    """

    def __init__(self, path, fingerprints: dict):
        self.path = Path(path)
        self.fingerprints = dict(fingerprints)

    def load(self) -> dict[str, dict]:
        if not self.path.is_file():
            return {}
        raw = self.path.read_bytes()
        if raw and not raw.endswith(b"\n"):
            cut = raw.rfind(b"\n") + 1
            with open(self.path, "r+b") as fh:
                fh.truncate(cut)
                fh.flush()
                os.fsync(fh.fileno())
            raw = raw[:cut]
        done: dict[str, dict] = {}
        for i, line in enumerate(raw.decode("utf-8", errors="replace").splitlines(), 1):
            if not line.strip():
                continue
            try:
                rec = json.loads(line)
                key, fps = rec["key"], rec["fingerprints"]
                if rec.get("format") != RESULTS_FORMAT:
                    raise KeyError("format")
            except (json.JSONDecodeError, KeyError, TypeError) as exc:
                raise FormatError(f"{self.path}: line {i} is not a sweep result ({exc}); "
                                  f"delete the file or pass another --out to start a fresh sweep") from None
            for what in ("model", "data", "settings"):
                if fps.get(what) != self.fingerprints.get(what):
                    raise UsageError(
                        f"{self.path} holds results of a different {what} ({what} fingerprint "
                        f"{fps.get(what)} in line {i}, {self.fingerprints.get(what)} now); refusing to mix them: "
                        f"delete the file or pass another --out to start a fresh sweep")
            done[key] = rec
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
    from tqdm import tqdm
    done = log.load()
    pending = [p for p in points if p["key"] not in done]
    n_jobs = resolve_jobs(jobs)
    args = (fn, model, dataset, recipe, act_max)
    if n_jobs == 1 or len(pending) < 2:
        results = (_call(*args, p) for p in pending)
    else:
        results = _in_parallel(pending, n_jobs, args)
    bar = tqdm(results, total=len(pending), desc="sweep", unit="point", disable=not progress or not pending)
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


def format_table(rows: list[dict], recommendation: dict) -> str:
    """The concise end-of-sweep table; '*' marks the memory Pareto front, '<' the recommendation."""
    rec = recommendation.get("point") or {}
    head = f"{'coding':<8} {'W':>2} {'P':>2} {'spike %':>8} {'loss pp':>8} {'weight kbit':>11} {'SOPs/sample':>12}"
    lines = [head, "-" * len(head)]
    for r in rows:
        mark = "*" if r.get("pareto_memory") else " "
        if rec and all(rec.get(k) == r.get(k) for k in PARAM_COLUMNS):
            mark += "<"
        lines.append(f"{r['coding']:<8} {r['weight_bits']:>2} {r['payload_bits']:>2} "
                     f"{100 * r['spike_accuracy']:>8.2f} {r['loss_pp']:>8.2f} "
                     f"{r['weight_memory_bits'] / 1000:>11.2f} {r['sops_per_sample']:>12,.0f} {mark}")
    lines.append("* on the accuracy / weight-memory Pareto front   < recommended")
    return "\n".join(lines)


def _save_png(fig, path: Path) -> None:
    import matplotlib.pyplot as plt
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    plt.close(fig)
    files.atomic_write_bytes(path, buf.getvalue())


def plot_heatmap(rows: list[dict], frame_accuracy: float, path: Path) -> None:
    """Spike accuracy over weight bits x payload bits, one panel per coding."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import numpy as np
    codings = list(dict.fromkeys(r["coding"] for r in rows))
    wb = sorted({r["weight_bits"] for r in rows})
    fig, axes = plt.subplots(1, len(codings), figsize=(1.2 + 0.9 * max(3, len({r['payload_bits'] for r in rows})) *
                                                       len(codings), 0.9 + 0.55 * max(4, len(wb))), squeeze=False,
                             layout="constrained",
                             gridspec_kw={"width_ratios": [max(1.5, len({r["payload_bits"] for r in rows
                                                                          if r["coding"] == c})) for c in codings]})
    lo = min(100 * r["spike_accuracy"] for r in rows)
    for ax, c in zip(axes[0], codings):
        pb = sorted({r["payload_bits"] for r in rows if r["coding"] == c})
        grid = np.full((len(wb), len(pb)), np.nan)  # (weight bits, payload bits)
        for r in rows:
            if r["coding"] == c:
                grid[wb.index(r["weight_bits"]), pb.index(r["payload_bits"])] = 100 * r["spike_accuracy"]
        im = ax.imshow(np.ma.masked_invalid(grid), origin="lower", cmap="viridis", vmin=lo,
                       vmax=max(100 * frame_accuracy, lo + 1e-6), aspect="auto")
        for i in range(len(wb)):
            for j in range(len(pb)):
                if not np.isnan(grid[i, j]):
                    good = grid[i, j] > lo + 0.6 * (100 * frame_accuracy - lo)
                    ax.text(j, i, f"{grid[i, j]:.1f}", ha="center", va="center", fontsize=8,
                            color="black" if good else "white")
        ax.set_xticks(range(len(pb)), [str(p) for p in pb])
        ax.set_yticks(range(len(wb)), [str(w) for w in wb])
        ax.set_xlabel("payload bits")
        ax.set_ylabel("weight bits")
        ax.set_title(f"{c} coding")
    fig.colorbar(im, ax=axes[0].tolist(), label="spike accuracy (%)")
    fig.suptitle(f"Spike accuracy on the test set; frame model: {100 * frame_accuracy:.2f} %")
    _save_png(fig, path)


def plot_pareto(rows: list[dict], frame_accuracy: float, tolerance_pp: float, recommendation: dict,
                path: Path) -> None:
    """Accuracy against weight memory and against SOPs per sample, Pareto fronts drawn."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, axes = plt.subplots(1, 2, figsize=(11, 4.2), sharey=True)
    rec = recommendation.get("point") or {}
    markers = {"payload": "o", "ttfs": "s", "binary": "^"}
    for ax, cost, flag, label in ((axes[0], "weight_memory_bits", "pareto_memory", "weight memory (bits)"),
                                  (axes[1], "sops_per_sample", "pareto_sops", "SOPs per sample")):
        for c in dict.fromkeys(r["coding"] for r in rows):
            pts = [r for r in rows if r["coding"] == c]
            ax.scatter([r[cost] for r in pts], [100 * r["spike_accuracy"] for r in pts], s=22, alpha=0.6,
                       marker=markers.get(c, "o"), label=f"{c} points")
        front = sorted((r for r in rows if r[flag]), key=lambda r: r[cost])
        ax.step([r[cost] for r in front], [100 * r["spike_accuracy"] for r in front], where="post", color="crimson",
                lw=1.4, label="Pareto front")
        ax.scatter([r[cost] for r in front], [100 * r["spike_accuracy"] for r in front], s=40, facecolors="none",
                   edgecolors="crimson")
        ax.axhline(100 * frame_accuracy, color="k", ls="--", lw=1, label=f"frame model {100 * frame_accuracy:.2f} %")
        ax.axhspan(100 * frame_accuracy - tolerance_pp, 100 * frame_accuracy, color="green", alpha=0.08,
                   label=f"within {tolerance_pp:g} pp")
        if rec:
            ax.scatter([rec[cost]], [100 * rec["spike_accuracy"]], marker="*", s=220, color="gold",
                       edgecolors="k", zorder=5, label="recommended")
        if min(r[cost] for r in rows) > 0:
            ax.set_xscale("log")
        ax.set_xlabel(label)
        ax.grid(alpha=0.3)
    axes[0].set_ylabel("spike accuracy (%)")
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower center", ncol=len(labels), fontsize=8, bbox_to_anchor=(0.5, -0.07),
               frameon=False)
    fig.suptitle("Accuracy against hardware cost (cost figures are counts, not measured energy)")
    _save_png(fig, path)


def write_outputs(result: SweepResult, recipe: dict | None = None) -> None:
    """sweep.csv, heatmap.png, pareto.png, recommendation.json and recipe.toml in result.out_dir."""
    out = result.out_dir
    rows = table_rows(result.records, result.frame_accuracy, result.tolerance_pp)
    files.atomic_write_text(out / "sweep.csv", csv_text(rows))
    files.atomic_write_json(out / "recommendation.json", result.recommendation)
    if rows:
        plot_heatmap(rows, result.frame_accuracy, out / "heatmap.png")
        plot_pareto(rows, result.frame_accuracy, result.tolerance_pp, result.recommendation, out / "pareto.png")
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
    result = SweepResult(out, records, frame, tol, recommend(records, frame, tol), computed,
                         len(points) - computed, fps)
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
