"""What the sweep concludes: the Pareto front and the recommended point.

    loss_pp(point)   = 100 * (frame_accuracy - spike_accuracy(point))
    recommendation   = argmin over {points with loss_pp <= tolerance_pp} of
                       (weight_memory_bits, sops_per_sample)
    within budget    = argmax over {points that meet every [budget] limit} of spike_accuracy,
                       ties: fewest block RAMs, then least energy (estimates of the cost model);
                       where none fits, the limit that binds and by how much (`cost.binding_limit`)
"""

from __future__ import annotations

from snnconvert.errors import UsageError, check_float
from snnconvert.sweep.grid import PARAM_COLUMNS

RECOMMENDATION_FORMAT = "snnconvert-sweep-recommendation"
RECOMMENDATION_VERSION = 1

# The main metrics of a point: kept in the recommendation, and the columns of sweep.csv after the params.
METRIC_COLUMNS = ["frame_accuracy", "quantized_accuracy", "spike_accuracy", "spike_accuracy_ci_low",
                  "spike_accuracy_ci_high", "conversion_loss_pp", "conversion_loss_p", "agreement", "spikes_per_sample", "sops_per_sample", "macs_per_sample", "weight_memory_bits"]
# Cost-model estimates of a point (sweep.csv columns after the metrics; flattened from hardware_summary).
COST_COLUMNS = ["hardware_summary.block_rams", "hardware_summary.memory_bits", "hardware_summary.latency_us",
                "hardware_summary.samples_per_s", "hardware_summary.energy_nj"]

# The converter's own tolerance verdict; the sweep judges with its own tolerance instead.
_NOT_COPIED = {"tolerance_pp", "within_tolerance", "budget"}


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


def _scalar(v) -> bool:
    return isinstance(v, (bool, int, float, str)) or v is None


def record_row(rec: dict) -> dict:
    """Flatten a result record into params + scalar metrics; a dict of scalars becomes `name.key` columns,
    an interval `name_ci` the columns `name_ci_low` and `name_ci_high`."""
    row = dict(rec["params"])
    for k, v in rec["metrics"].items():
        if k in _NOT_COPIED:
            continue
        if k.endswith("_ci") and isinstance(v, (list, tuple)) and len(v) == 2:
            row[f"{k}_low"], row[f"{k}_high"] = v
        elif _scalar(v):
            row[k] = v
        elif isinstance(v, dict):
            row.update({f"{k}.{k2}": v2 for k2, v2 in v.items() if _scalar(v2)})
    return row


def _label(row: dict) -> str:
    scales = "per-channel" if row["per_channel"] else "per-tensor"
    how = f", aware {row['aware_epochs']} ep" if row["aware"] else ""
    return f"{row['coding']} w{row['weight_bits']} p{row['payload_bits']} ({scales}{how})"


def _summary_point(row: dict, frame_accuracy: float) -> dict:
    keep = PARAM_COLUMNS + [k for k in METRIC_COLUMNS + COST_COLUMNS if k in row]
    out = {k: row[k] for k in keep}
    out["loss_pp"] = loss_pp(frame_accuracy, row["spike_accuracy"])
    return out


def row_budget(row: dict, frame_accuracy: float, budget: dict | None) -> dict:
    """`cost.check_budget` of one sweep row, its loss taken against the sweep's frame accuracy."""
    from snnconvert.cost import check_budget
    m = {k: row.get(k) for k in ("weight_memory_bits", "sops_per_sample", "spike_accuracy")}
    m["conversion_loss_pp"] = loss_pp(frame_accuracy, row["spike_accuracy"])
    m["hardware_summary"] = {k.split(".", 1)[1]: row[k] for k in COST_COLUMNS if k in row}
    return check_budget(m, budget)


def within_budget(rows: list[dict], frame_accuracy: float, budget: dict | None) -> dict:
    """The second rule: the most accurate point that meets every [budget] limit (ties: fewest block
    RAMs, then least energy, then grid order). Where none fits, `binding` names the limit that binds."""
    from snnconvert.cost import active_limits, binding_limit
    budget = budget.as_dict() if hasattr(budget, "as_dict") else dict(budget or {})
    checks = [row_budget(r, frame_accuracy, budget) for r in rows]
    limits = active_limits(budget)
    out = {"rule": "most accurate point within every [budget] limit (block RAMs, latency and energy are "
                   "estimates), then fewest block RAMs, then least energy",
           "limits": limits, "fitting": sum(c["fits"] for c in checks), "point": None, "label": None,
           "binding": None}
    fit = [r for r, c in zip(rows, checks) if c["fits"]]
    if fit:
        best = min(fit, key=lambda r: (-r["spike_accuracy"], r.get("hardware_summary.block_rams", 0),
                                       r.get("hardware_summary.energy_nj", 0.0)))
        out["point"], out["label"] = _summary_point(best, frame_accuracy), _label(best)
        out["message"] = (f"within budget: {_label(best)}: spike accuracy {100 * best['spike_accuracy']:.2f} %"
                          + _cost_words(best) + ("" if limits else " (no [budget] limit set)"))
    elif rows:
        out["binding"] = binding_limit(checks)
        out["label"] = "none within budget"
        out["message"] = "no point fits the budget: " + out["binding"]["message"]
    else:
        out["message"] = "the sweep has no points"
    return out


def _cost_words(row: dict) -> str:
    b, lat, e = (row.get(f"hardware_summary.{k}") for k in ("block_rams", "latency_us", "energy_nj"))
    if b is None:
        return ""
    return f", {b} block RAMs, {lat:.1f} us worst latency, {e:.1f} nJ per sample (estimates)"


def recommend(records: list[dict], frame_accuracy: float, tolerance_pp: float, budget: dict | None = None) -> dict:
    """The cheapest point within `tolerance_pp` of the frame accuracy, and (`within_budget`) the most
    accurate point within the [budget] limits.

    Cheapest = least weight memory bits, then fewest SOPs per sample, then the grid order.
    When no point qualifies, `point` is None and `closest` names the most accurate point.
    """
    tol = check_float(tolerance_pp, "tolerance_pp", "sweep", 0.0, 100.0)
    rows = [record_row(r) for r in records]
    ok = [r for r in rows if loss_pp(frame_accuracy, r["spike_accuracy"]) <= tol + 1e-9]
    rule = ("least weight memory bits, then fewest SOPs per sample, among the points whose spike accuracy "
            f"is within {tol:g} pp of the frame accuracy")
    out = {"format": RECOMMENDATION_FORMAT, "version": RECOMMENDATION_VERSION, "frame_accuracy": frame_accuracy,
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
    out["within_budget"] = within_budget(rows, frame_accuracy, budget)
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
