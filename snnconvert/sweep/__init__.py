"""Bit-width sweep: convert + simulate the trained model at every (coding, weight bits, payload bits).

    loss_pp(point)   = 100 * (frame_accuracy - spike_accuracy(point))
    recommendation   = argmin over {points with loss_pp <= tolerance_pp} of
                       (weight_memory_bits, sops_per_sample)

One job per module, in the order a sweep runs:

    snnconvert.settings.sweep   the [sweep] keys, the grid syntax and SweepSettings (torch-free)
    grid        the points of the grid, in a fixed order, each with a stable key
    point       one point: convert and measure (PointTask: what an executor runs)
    executor    where points run: this process or a local process pool (the seam for other engines)
    cluster     the Dask back-end of the seam (scheduler = "local:N" or "tcp://HOST:PORT")
    log         results.jsonl: append, read with every field checked, resume
    front       the Pareto front, the reference accuracy and the recommendation
    tables      rows, sweep.csv and the printed table
    figures     heatmap.png, pareto.png, codings.png
    run         run_sweep and the pipeline's entry run_from_recipe

- Parallel: points run in worker processes, one torch thread each. A point's metrics depend only
  on the point, the recipe (seed included) and the checkpoint, never on the worker.
- Resumable: each finished point is appended to results.jsonl at once (flush + fsync); a rerun
  skips the points already there. Lines made from another model, data set or [convert] settings
  (fingerprints) are refused rather than mixed.
"""

from snnconvert.settings.sweep import (KEYS, PAYLOAD_BITS_RANGE, WEIGHT_BITS_RANGE, SweepSettings, parse_codings,
                                       parse_grid)
from snnconvert.sweep.executor import (Executor, LocalPool, Serial, available_memory, close_executor, executor_for,
                                       local_executor, resolve_jobs, usable_cpus)
from snnconvert.sweep.figures import codings_figure, heatmap_figure, pareto_figure
from snnconvert.sweep.front import (METRIC_COLUMNS, RECOMMENDATION_FORMAT, checkpoint_info, loss_pp, pareto_front,
                                    recommend)
from snnconvert.sweep.grid import PARAM_COLUMNS, make_points, point_key
from snnconvert.sweep.log import RESULTS_FORMAT, ResultsLog, check_record, read_results
from snnconvert.sweep.point import PointTask, evaluate_point
from snnconvert.sweep.run import Inputs, SweepResult, load_inputs, run_from_recipe, run_sweep
from snnconvert.sweep.tables import csv_text, format_table, table_rows

__all__ = ['KEYS', 'PAYLOAD_BITS_RANGE', 'WEIGHT_BITS_RANGE', 'SweepSettings', 'parse_codings', 'parse_grid', 'Executor', 'LocalPool', 'Serial', 'available_memory', 'close_executor', 'executor_for', 'local_executor', 'resolve_jobs', 'usable_cpus', 'codings_figure', 'heatmap_figure', 'pareto_figure', 'METRIC_COLUMNS', 'RECOMMENDATION_FORMAT', 'checkpoint_info', 'loss_pp', 'pareto_front', 'recommend', 'PARAM_COLUMNS', 'make_points', 'point_key', 'RESULTS_FORMAT', 'ResultsLog', 'check_record', 'read_results', 'PointTask', 'evaluate_point', 'Inputs', 'SweepResult', 'load_inputs', 'run_from_recipe', 'run_sweep', 'csv_text', 'format_table', 'table_rows']
