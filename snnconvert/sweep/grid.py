"""The grid of a sweep: its points in a fixed order, each with a stable key."""

from __future__ import annotations

from snnconvert.settings.sweep import SweepSettings

# What identifies a point; the first columns of sweep.csv and the params of a results.jsonl line.
PARAM_COLUMNS = ["coding", "weight_bits", "payload_bits", "per_channel", "aware", "aware_epochs"]


def point_key(p: dict) -> str:
    """Stable identity of a grid point: what a rerun compares to skip finished work."""
    scales = "per-channel" if p["per_channel"] else "per-tensor"
    how = f"aware{p['aware_epochs']}" if p["aware"] else "post-training"
    return f"{p['coding']}/w{p['weight_bits']}/p{p['payload_bits']}/{scales}/{how}"


def make_points(settings: SweepSettings, coding: str = "payload") -> list[dict]:
    """The grid in a fixed order (coding, weight bits, payload bits).

    `coding` is the [convert] coding, swept alone when `settings.codings` is empty. Binary coding
    has one payload bit by definition, so it contributes one point per weight width whatever the
    payload grid says. aware_epochs is 0 for post-training points.
    """
    epochs = settings.aware_epochs if settings.aware else 0
    points = []
    for c in settings.codings or [coding]:
        for w in settings.weight_bits:
            for p in ([1] if c == "binary" else settings.payload_bits):
                pt = {"coding": c, "weight_bits": w, "payload_bits": p, "per_channel": settings.per_channel,
                      "aware": settings.aware, "aware_epochs": epochs}
                pt["key"] = point_key(pt)
                points.append(pt)
    return points
