"""results.jsonl: the sweep's resumable log, one checked JSON line per finished point.

A point is appended (flushed and fsynced) as soon as it is finished, so a killed sweep loses
nothing that had finished and a rerun skips those points. Lines made from another model, data
set or [convert] settings (fingerprints) are refused rather than mixed.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from snnconvert import files
from snnconvert.errors import FormatError, UsageError, check_bool, check_choice, check_float, check_int, fail
from snnconvert.intnet import CODINGS
from snnconvert.settings.sweep import PAYLOAD_BITS_RANGE, WEIGHT_BITS_RANGE
from snnconvert.sweep.grid import PARAM_COLUMNS, point_key

RESULTS_FORMAT = "snnconvert-sweep-point"
VERSION = 1

# Metrics every result record holds, with their range; other metrics are free-form.
_RECORD_METRICS = {"spike_accuracy": (0.0, 1.0), "weight_memory_bits": (0, None), "sops_per_sample": (0.0, None)}
_OPTIONAL_METRICS = {"frame_accuracy": (0.0, 1.0), "quantized_accuracy": (0.0, 1.0), "agreement": (0.0, 1.0),
                     "spikes_per_sample": (0.0, None), "macs_per_sample": (0.0, None),
                     "conversion_loss_pp": (-100.0, 100.0), "conversion_loss_p": (0.0, 1.0)}


def make_record(point: dict, metrics: dict, timing: dict, fingerprints: dict) -> dict:
    """The results.jsonl line of a finished point."""
    return {"format": RESULTS_FORMAT, "version": VERSION, "key": point["key"],
            "params": {k: point[k] for k in PARAM_COLUMNS}, "metrics": metrics,
            "fingerprints": fingerprints, **timing}


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
        """{point key: record} of the finished points; drops a torn last line from the file."""
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
