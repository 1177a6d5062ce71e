"""The seeds axis of a sweep: one model per training seed, every grid point on each.

    per point over the seeds s = 1..S:  mean = sum(a_s) / S,  std = sqrt(sum((a_s - mean)^2) / (S - 1))
                                        (sample standard deviation; 0 for S = 1),  range = [min, max]
    recommendation = the sweep's rules applied to the means: a point is within tolerance when its
                     mean spike accuracy is within tolerance_pp of the mean frame accuracy

Layout in the sweep folder: seed-N/train (the model of seed N, trained here unless it is the
checkpoint's own seed or was trained before) and seed-N/ (that seed's results.jsonl and outputs,
resumable); the folder itself gets sweep.csv (one row per point and seed, column `seed`),
seeds.csv (mean, standard deviation and range per point), recommendation.json and the figures
drawn from the means with the spread as error bars.
"""

from __future__ import annotations

import copy
import math
from pathlib import Path

from snnconvert import console, files
from snnconvert.sweep.front import loss_pp, record_row

_AVERAGED = ("spike_accuracy", "frame_accuracy", "quantized_accuracy", "sops_per_sample", "spikes_per_sample",
             "weight_memory_bits")


def spread(values: list[float]) -> dict:
    """{'mean', 'std', 'min', 'max'} of the values (module docstring; std 0 for a single value)."""
    n = len(values)
    mean = sum(values) / n
    std = math.sqrt(sum((v - mean) ** 2 for v in values) / (n - 1)) if n > 1 else 0.0
    return {"mean": mean, "std": std, "min": min(values), "max": max(values)}


def seed_inputs(inputs, seed: int, folder: Path, progress: bool):
    """The Inputs of one seed: the given checkpoint for its own seed, else a model trained (once) with the
    same recipe and this seed in folder/train."""
    from snnconvert import train
    from snnconvert.sweep.run import Inputs
    if int(inputs.recipe.get("seed", 0)) == seed:
        return inputs
    recipe = copy.deepcopy(inputs.recipe)
    recipe["seed"] = seed
    d = folder / "train"
    if not (d / "model.pt").is_file():
        console.say(f"training the model of seed {seed} in {d}")
        train.train(recipe, inputs.dataset, d, quiet=not progress)
    model, ckpt = train.load_checkpoint(d)
    return Inputs(d, model, ckpt, inputs.dataset, recipe)


def combine(per_seed: dict, tolerance_pp: float, budget=None) -> tuple[list, list, float, dict, list]:
    """(rows per point and seed, summary rows per point with mean/std/min/max, mean frame accuracy,
    recommendation on the means, records of the means) from {seed: SweepResult}."""
    from snnconvert.sweep.front import recommend
    from snnconvert.sweep.tables import table_rows
    seeds = sorted(per_seed)
    frame = sum(per_seed[s].frame_accuracy for s in seeds) / len(seeds)
    rows = []
    for s in seeds:
        for r in table_rows(per_seed[s].records, per_seed[s].frame_accuracy, tolerance_pp):
            rows.append({"seed": s, **r})
    summary, means = [], []
    for i, rec in enumerate(per_seed[seeds[0]].records):
        per = [record_row(per_seed[s].records[i]) for s in seeds]
        acc = spread([r["spike_accuracy"] for r in per])
        loss = spread([loss_pp(per_seed[s].frame_accuracy, r["spike_accuracy"]) for s, r in zip(seeds, per)])
        summary.append({**rec["params"], "seeds": len(seeds),
                        **{f"spike_accuracy_{k}": v for k, v in acc.items()},
                        **{f"loss_pp_{k}": v for k, v in loss.items()}})
        metrics = {k: sum(r[k] for r in per) / len(per) for k in _AVERAGED if all(k in r for r in per)}
        metrics["weight_memory_bits"] = int(round(metrics["weight_memory_bits"]))
        metrics["spike_accuracy_std"] = acc["std"]
        means.append({**rec, "metrics": metrics})
    recommendation = recommend(means, frame, tolerance_pp, budget)
    recommendation["seeds"] = seeds
    recommendation["rule"] += f", on the mean over {len(seeds)} training seeds ({_seeds_text(seeds)})"
    recommendation["message"] = recommendation["message"].replace("spike accuracy", "mean spike accuracy", 1) + \
        f" (means over seeds {_seeds_text(seeds)})"
    return rows, summary, frame, recommendation, means


def _seeds_text(seeds: list[int]) -> str:
    return ", ".join(str(s) for s in seeds)


def write_summary(out: Path, summary: list[dict]) -> None:
    """seeds.csv: one row per point, mean / standard deviation / range of spike accuracy and loss."""
    from snnconvert.sweep.tables import csv_text
    files.atomic_write_text(out / "seeds.csv", csv_text(summary))


def format_summary(summary: list[dict]) -> str:
    """The printed summary over seeds: mean, standard deviation and range of the spike accuracy per point."""
    head = f"{'coding':<8} {'W':>2} {'P':>2} {'mean %':>7} {'std pp':>7} {'range %':>13} {'mean loss pp':>12}"
    lines = [head, "-" * len(head)]
    for r in summary:
        lines.append(f"{r['coding']:<8} {r['weight_bits']:>2} {r['payload_bits']:>2} "
                     f"{100 * r['spike_accuracy_mean']:>7.2f} {100 * r['spike_accuracy_std']:>7.2f} "
                     f"{100 * r['spike_accuracy_min']:>6.2f}-{100 * r['spike_accuracy_max']:<6.2f} "
                     f"{r['loss_pp_mean']:>12.2f}")
    return "\n".join(lines)
