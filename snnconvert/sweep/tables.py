"""The sweep as a table: one row per point, written as sweep.csv and printed at the end."""

from __future__ import annotations

import csv
import io

from snnconvert.sweep.front import COST_COLUMNS, METRIC_COLUMNS, loss_pp, pareto_front, record_row
from snnconvert.sweep.grid import PARAM_COLUMNS


def table_rows(records: list[dict], frame_accuracy: float, tolerance_pp: float) -> list[dict]:
    """Rows of sweep.csv: params, the main metrics, Pareto flags, then the other scalar metrics."""
    rows = [record_row(r) for r in records]
    mem = pareto_front([r["weight_memory_bits"] for r in rows], [r["spike_accuracy"] for r in rows])
    sops = pareto_front([r["sops_per_sample"] for r in rows], [r["spike_accuracy"] for r in rows])
    for r, a, b in zip(rows, mem, sops):
        r["loss_pp"] = loss_pp(frame_accuracy, r["spike_accuracy"])
        r["within_tolerance"] = r["loss_pp"] <= tolerance_pp + 1e-9
        r["tolerance_pp"] = tolerance_pp
        r["pareto_memory"], r["pareto_sops"] = a, b
    for col, flag in (("hardware_summary.latency_us", "pareto_latency"), ("hardware_summary.energy_nj", "pareto_energy")):
        if rows and all(isinstance(r.get(col), (int, float)) for r in rows):
            for r, f in zip(rows, pareto_front([r[col] for r in rows], [r["spike_accuracy"] for r in rows])):
                r[flag] = f
    return rows


def csv_text(rows: list[dict]) -> str:
    first = PARAM_COLUMNS + METRIC_COLUMNS + COST_COLUMNS + ["loss_pp", "tolerance_pp", "within_tolerance", "pareto_memory",
                                              "pareto_sops", "pareto_latency", "pareto_energy"]
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


def _ci_cell(row: dict) -> str:
    lo, hi = row.get("spike_accuracy_ci_low"), row.get("spike_accuracy_ci_high")
    return "-" if lo is None or hi is None else f"{100 * lo:.1f}-{100 * hi:.1f}"


def _p_cell(row: dict) -> str:
    p = row.get("conversion_loss_p")
    return "-" if p is None else "<0.001" if p < 0.001 else f"{p:.3f}" if p < 0.995 else "1.0"


def format_table(rows: list[dict], recommendation: dict) -> str:
    """The concise end-of-sweep table; '*' marks the memory Pareto front, '<' the recommendation.

    With more than one coding, two columns show what differs between codings: latency in time
    steps and the estimated energy per sample. A note on the checkpoint (conversion-aware for one
    budget) heads the table.
    """
    rec = recommendation.get("point") or {}
    multi = len({r["coding"] for r in rows}) > 1
    head = (f"{'coding':<8} {'W':>2} {'P':>2} {'spike %':>8} {'95 % CI':>13} {'loss pp':>8} {'p':>6} "
            f"{'weight kbit':>11} {'SOPs/sample':>12}")
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
                f"{100 * r['spike_accuracy']:>8.2f} {_ci_cell(r):>13} {r['loss_pp']:>8.2f} {_p_cell(r):>6} "
                f"{r['weight_memory_bits'] / 1000:>11.2f} {r['sops_per_sample']:>12,.0f}")
        if multi:
            steps, nj = latency_steps(r), energy_nj(r)
            line += f" {'-' if steps is None else f'{steps:,.0f}':>6} {'-' if nj is None else f'{nj:,.1f}':>10}"
        lines.append(f"{line} {mark}")
    lines.append("95 % CI: Wilson interval of the spike accuracy   p: McNemar's exact test of the loss (paired samples)")
    lines.append("* on the accuracy / weight-memory Pareto front   < recommended" +
                 ("   steps: latency in time steps   nJ: energy estimate per sample" if multi else ""))
    wb = recommendation.get("within_budget")
    if wb and wb.get("message"):
        lines.append(wb["message"])
    return "\n".join(lines)
