"""One grid point: convert (after optional conversion-aware fine-tuning) and measure it.

`PointTask` is what an executor runs: a picklable callable `task(point) -> (point, metrics,
timing)` holding the float model, the data set (frames only) and the recipe. A point's metrics
depend only on the point, the recipe (seed included) and the model, never on the process.
"""

from __future__ import annotations

import copy
import dataclasses
import time
from typing import Any, Callable

from snnconvert import files


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
    from snnconvert.convert import convert_and_measure
    if point["aware"]:
        from snnconvert import train
        recipe = copy.deepcopy(recipe)
        recipe["train"]["threads"] = 1  # one thread per process: the sweep's parallelism is across points
        model, act_max = train.finetune_aware(model, dataset, recipe, point["weight_bits"], point["payload_bits"],
                                              point["per_channel"], point["aware_epochs"], int(recipe["seed"]))
    else:
        model = copy.deepcopy(model)
    net, metrics = convert_and_measure(model, dataset, convert_settings(recipe, point), act_max=act_max, quiet=True,
                                       hardware=recipe.get("hardware"))
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


def lean(dataset, calib_samples: int | None = None):
    """The dataset without its raw recordings: workers need the frames only, and every task
    ships its arguments to a worker process.

    calib_samples: post-training points read nothing of the training split but the calibration
    subset (convert.calibrate.calibration_subset, evenly spaced); given, the training split is cut
    to exactly that subset and the validation split dropped, so a task of an MNIST-size set ships a
    few MB instead of hundreds. The converter's own subset of the cut split is the whole cut split
    (every index of 0..n-1 when n <= calib_samples), so the networks are identical."""
    import copy

    from snnconvert.convert.calibrate import calibration_subset
    if dataclasses.is_dataclass(dataset):
        drop = {f.name: None for f in dataclasses.fields(dataset) if f.name in ("recordings", "windows")}
        dataset = dataclasses.replace(dataset, **drop) if drop else dataset
    if calib_samples is None or len(dataset.train[1]) <= calib_samples:
        return dataset
    X, y = dataset.train
    idx = calibration_subset(len(y), calib_samples)
    cut = {"train": (X[idx], y[idx]), "val": (X[:0], y[:0])}
    if dataclasses.is_dataclass(dataset):
        return dataclasses.replace(dataset, **cut)
    out = copy.copy(dataset)
    out.train, out.val = cut["train"], cut["val"]
    return out


@dataclasses.dataclass
class PointTask:
    """`fn(model, dataset, recipe, act_max, point) -> metrics` bound to its inputs; calling it with a
    point runs the point single-threaded, so a worker and this process add floats in one order.

    Returns (point, metrics, timing), timing = wall and CPU seconds of the calling process.
    """

    fn: Callable
    model: Any
    dataset: Any
    recipe: dict
    act_max: Any = None

    def __call__(self, point: dict) -> tuple[dict, dict, dict]:
        import torch
        from threadpoolctl import threadpool_limits
        threads = torch.get_num_threads()
        torch.set_num_threads(1)
        torch.manual_seed(int(self.recipe.get("seed", 0)))
        t0, c0 = time.perf_counter(), time.process_time()
        try:
            with threadpool_limits(limits=1):  # BLAS/OpenMP too: float sums in one fixed order
                metrics = self.fn(self.model, self.dataset, self.recipe, self.act_max, point)
        finally:
            torch.set_num_threads(threads)
        return point, metrics, {"seconds": round(time.perf_counter() - t0, 3),
                                "cpu_seconds": round(time.process_time() - c0, 3)}
