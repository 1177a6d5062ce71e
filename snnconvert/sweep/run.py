"""Running a sweep: what is swept, the points not yet logged, the outputs.

Outputs in the sweep folder: results.jsonl (one line per finished point, see log.py), sweep.csv,
recommendation.json, heatmap.png, pareto.png, codings.png (several codings only) and recipe.toml,
the recipe the sweep was given, unchanged.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

from snnconvert import console, files, plots
from snnconvert.errors import UsageError
from snnconvert.settings.sweep import SweepSettings
from snnconvert.sweep.executor import Executor, close_executor, executor_for
from snnconvert.sweep.figures import codings_figure, plot_heatmap, plot_pareto
from snnconvert.sweep.front import checkpoint_info, recommend, reference_accuracy
from snnconvert.sweep.grid import make_points
from snnconvert.sweep.log import ResultsLog, make_record
from snnconvert.sweep.point import PointTask, evaluate_point, lean
from snnconvert.sweep.tables import csv_text, table_rows


@dataclass
class Inputs:
    """What a sweep converts: the float model, its checkpoint record, the data set and the recipe
    (its [convert] settings and seed apply to every point)."""

    train_dir: Path
    model: Any
    checkpoint: dict
    dataset: Any
    recipe: dict


def load_inputs(train_dir, *, checkpoint=None, recipe: dict | None = None, dataset=None,
                progress: bool = True) -> Inputs:
    """The checkpoint in `train_dir` (a folder or its model.pt) and what goes with it.

    checkpoint: (model, ckpt) when the caller has loaded it; recipe: default the checkpoint's;
    dataset: default loaded from the recipe (a caller that holds it passes it, so it loads once).
    """
    from snnconvert import data, train
    train_dir = Path(train_dir)
    model, ckpt = checkpoint if checkpoint is not None else train.load_checkpoint(train_dir)
    recipe = recipe if recipe is not None else ckpt["recipe"]
    if dataset is None:
        dataset = data.load_dataset(recipe, progress=progress)
    train.check_checkpoint_fits(model, ckpt, dataset, train_dir)
    return Inputs(train_dir, model, ckpt, dataset, recipe)


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
    per_seed: dict = field(default_factory=dict)  # several seeds: {seed: that seed's SweepResult}
    summary: list = field(default_factory=list)   # several seeds: mean, std and range per point (seeds.csv)


def fingerprints(model, dataset, recipe: dict) -> dict:
    """What a results.jsonl line must have been made from: the model, the data, the [convert]
    settings the grid does not vary, the seed and the [hardware] of the cost estimate ([budget]
    changes no point: the recommendation applies it)."""
    swept = {"coding", "weight_bits", "payload_bits", "per_channel", "tolerance_pp"}  # the last changes no metric
    settings = {k: v for k, v in recipe["convert"].items() if k not in swept}
    return {"model": files.fingerprint({k: v for k, v in model.state_dict().items()}),
            "data": str(dataset.fingerprint),
            "settings": files.fingerprint(settings, recipe.get("seed"), recipe.get("hardware"))}


def run_points(points: list[dict], task: Callable, log: ResultsLog, executor: Executor,
               progress: bool = True) -> tuple[list[dict], int]:
    """Evaluate every point not yet in the log; return (records in grid order, number computed).

    Each point is logged as soon as this process has it, in the order points finish; a point's
    metrics do not depend on the process that computed it.
    """
    done = log.load()
    pending = [p for p in points if p["key"] not in done]
    results = executor.map_points(task, pending)
    bar = console.bar(results, total=len(pending), desc="sweep", unit="point", enabled=progress and bool(pending))
    status = getattr(executor, "status", None)   # engines that know it: points running and failed
    for point, metrics, timing in bar:
        rec = make_record(point, metrics, timing, log.fingerprints)
        log.append(rec)
        done[point["key"]] = rec
        bar.set_postfix_str((f"running {status['running']}, failed {status['failed']}, " if status else "")
                            + point["key"])
    return [done[p["key"]] for p in points], len(pending)


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
        from snnconvert import recipe as recipes
        recipes.save(recipe, out)


def run_sweep(source, settings: SweepSettings, out_dir=None, *, executor: Executor | None = None,
              point_fn: Callable | None = None, progress: bool = True) -> SweepResult:
    """Convert and measure every point of the grid in `settings`; resumable.

    source: an `Inputs`, or a training folder (loaded with its checkpoint's recipe). The recipe
    supplies the [convert] settings, the seed, and the [convert] coding when `settings.codings` is
    empty; it is saved beside the outputs as given. out_dir: default the folder `sweep` beside the
    training folder. executor: where the points run (default `executor_for(settings)`, closed at
    the end; an executor passed in is left open for its owner).
    point_fn(model, dataset, recipe, act_max, point) -> metrics replaces the real conversion (tests).
    """
    owned = executor is None
    executor = executor if executor is not None else executor_for(settings)
    try:
        return _run_sweep(source, settings, out_dir, executor, point_fn, progress)
    finally:
        if owned:
            close_executor(executor)


def _run_sweep(source, settings: SweepSettings, out_dir, executor: Executor, point_fn, progress: bool) -> SweepResult:
    t0 = time.perf_counter()
    if not isinstance(source, Inputs):
        executor.start()  # workers come up while the model and the data set load
        source = load_inputs(source, progress=progress)
    if settings.seeds and settings.seeds != [int(source.recipe.get("seed", 0))]:
        return _run_seeds(source, settings, out_dir, executor, point_fn, progress)
    model, ckpt, recipe = source.model, source.checkpoint, source.recipe
    dataset = test_subset(source.dataset, settings.test_samples)
    if settings.aware and ckpt.get("aware"):
        raise UsageError(f"{source.train_dir} holds a conversion-aware checkpoint; an aware sweep fine-tunes each "
                         "point from a float checkpoint: pass the float model's training folder")
    points = make_points(settings, recipe["convert"]["coding"])
    out = _out_dir(source, out_dir)
    log = ResultsLog(out / "results.jsonl", fingerprints(model, dataset, recipe))
    t1 = time.perf_counter()
    calib = None if settings.aware or point_fn is not None else int(recipe["convert"]["calib_samples"])
    task = PointTask(point_fn or evaluate_point, model, lean(dataset, calib), recipe, ckpt.get("act_max"))
    records, computed = run_points(points, task, log, executor, progress)
    t2 = time.perf_counter()
    frame = reference_accuracy(records, model, dataset)
    rec = recommend(records, frame, settings.tolerance_pp, recipe.get("budget"))
    rec["checkpoint"] = checkpoint_info(ckpt.get("aware"), settings.aware, settings.aware_epochs)
    result = SweepResult(out, records, frame, settings.tolerance_pp, rec, computed, len(points) - computed,
                         log.fingerprints)
    write_outputs(result, recipe)
    result.seconds = {"load": round(t1 - t0, 3), "points": round(t2 - t1, 3),
                      "outputs": round(time.perf_counter() - t2, 3)}
    return result


def test_subset(dataset, n: int):
    """The data set with n evenly spaced test samples (the calibration-subset rule: deterministic, every
    class kept in proportion on a shuffled split); n = 0 or n >= the split keeps it whole. The subset's
    fingerprint names its size, so results of another size are never reused."""
    import copy
    import dataclasses

    from snnconvert.convert.calibrate import calibration_subset
    X, y = dataset.test
    if n == 0 or n >= len(y):
        return dataset
    idx = calibration_subset(len(y), n)
    test, fp = (X[idx], y[idx]), f"{dataset.fingerprint}-test{len(idx)}"
    if dataclasses.is_dataclass(dataset):
        return dataclasses.replace(dataset, test=test, fingerprint=fp)
    sub = copy.copy(dataset)
    sub.test, sub.fingerprint = test, fp
    return sub


def _out_dir(source: Inputs, out_dir) -> Path:
    base = source.train_dir if source.train_dir.is_dir() else source.train_dir.parent
    return Path(out_dir) if out_dir is not None else base.parent / "sweep"


def _run_seeds(source: Inputs, settings: SweepSettings, out_dir, executor, point_fn, progress) -> SweepResult:
    """The sweep over several training seeds (sweep.seeds): one sub-sweep per seed in seed-N/, then
    the per-seed table, the summary and the recommendation on the means in the sweep folder."""
    import dataclasses

    from snnconvert.sweep import seeds as S
    out = _out_dir(source, out_dir)
    one = dataclasses.replace(settings, seeds=[])
    per = {}
    for s in settings.seeds:
        d = out / f"seed-{s}"
        per[s] = _run_sweep(S.seed_inputs(source, s, d, progress), one, d, executor, point_fn, progress)
    rows, summary, frame, rec, means = S.combine(per, settings.tolerance_pp, source.recipe.get("budget"))
    rec["checkpoint"] = per[settings.seeds[0]].recommendation.get("checkpoint")
    result = SweepResult(out, means, frame, settings.tolerance_pp, rec, sum(r.computed for r in per.values()),
                         sum(r.reused for r in per.values()), per_seed=per, summary=summary)
    write_outputs(result, source.recipe)
    files.atomic_write_text(out / "sweep.csv", csv_text(rows))       # one row per point and seed
    S.write_summary(out, summary)
    return result


def run_from_recipe(train_dir, recipe: dict, out_dir, progress: bool = True, *, dataset=None) -> SweepResult:
    """The sweep of a pipeline run: grid and options from the recipe's [sweep] section; `dataset`,
    when the caller holds it, is used instead of loading it again."""
    settings = SweepSettings.from_section(recipe["sweep"])
    executor = executor_for(settings)
    try:
        executor.start()
        inputs = load_inputs(train_dir, recipe=recipe, dataset=dataset, progress=progress)
        return run_sweep(inputs, settings, out_dir, executor=executor, progress=progress)
    finally:
        close_executor(executor)
