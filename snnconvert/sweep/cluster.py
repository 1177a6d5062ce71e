"""The Dask back-end of the executor seam: the points of a sweep on a Dask cluster.

    scheduler = "local:N"          a LocalCluster of N worker processes started by this process
    scheduler = "tcp://HOST:PORT"  a running scheduler (`dask scheduler`, `dask worker tcp://...`)

- Only this process writes results.jsonl: each point comes back as it finishes (as_completed) and
  the caller logs it at once, so killing the caller or a worker loses no finished point.
- The task's inputs (float model, frames, recipe) are shipped once per worker: the PointTask is
  scattered to every worker and each point task refers to it, never carrying the data itself.
- A point whose worker died is re-run by the scheduler on another worker (Dask's own rescheduling;
  a point that kills `distributed.scheduler.allowed-failures` + 1 workers fails).
- A failed point does not stop the others: the points still running finish and are logged, then
  the first failure is raised.
- Workers run one thread each (threads_per_worker=1, WORKER_ENV for a LocalCluster) and PointTask
  runs a point single-threaded with the recipe seed, so results equal the local back-end's bit for bit.
"""

from __future__ import annotations

import importlib.util
import logging
from typing import Callable, Iterator

from snnconvert import console
from snnconvert.errors import UsageError
from snnconvert.settings.sweep import parse_scheduler
from snnconvert.sweep.executor import WORKER_ENV

INSTALL_HINT = 'the Dask back-end needs dask.distributed: pip install "snnconvert[cluster]" (or "dask[distributed]")'


def check_available() -> None:
    """A UsageError naming what to install when dask.distributed is missing."""
    if importlib.util.find_spec("distributed") is None:
        raise UsageError(INSTALL_HINT)


def call_task(task: Callable, point: dict) -> tuple:
    """What a worker runs: the (scattered) PointTask on one point."""
    return task(point)


RETRIES = 3  # a point whose worker dies is run again at most this often: a crash that repeats is a bug, not bad luck

class DaskExecutor:
    """The executor seam on Dask (module docstring). `close()` ends a LocalCluster it started."""

    def __init__(self, scheduler: str):
        self.scheduler = parse_scheduler(scheduler)
        if not self.scheduler:
            raise UsageError("DaskExecutor needs a scheduler: 'local:N' or 'tcp://HOST:PORT'")
        check_available()
        self.client = None
        self.cluster = None
        self.status = {"running": 0, "failed": 0}

    @property
    def jobs(self) -> int:
        if self.client is None:
            return 0
        return len(self.client.scheduler_info(n_workers=-1).get("workers", {}))

    def start(self) -> None:
        """Connect to the scheduler (or start the LocalCluster) and say where its dashboard is."""
        if self.client is not None:
            return
        from distributed import Client, LocalCluster
        if self.scheduler.startswith("local:"):
            self.cluster = LocalCluster(n_workers=int(self.scheduler.split(":")[1]), threads_per_worker=1,
                                        processes=True, env=dict(WORKER_ENV), dashboard_address=":0",   # any free port
                                        silence_logs=logging.ERROR)
            self.client = Client(self.cluster)
        else:
            try:
                self.client = Client(self.scheduler, timeout="20s")
            except OSError as exc:
                raise UsageError(f"cannot reach the Dask scheduler at {self.scheduler}: {exc}") from None
        served = "dashboard" in self.client.scheduler_info(n_workers=0).get("services", {})
        if served and self.cluster is not None and importlib.util.find_spec("bokeh") is None:
            served = False   # the page would only ask for bokeh
        link = self.client.dashboard_link if served else None
        console.say(f"dask scheduler {self.client.scheduler.address}"
                    + (f", dashboard {link}" if link else " (no dashboard: it needs bokeh)"))

    def map_points(self, task: Callable[[dict], tuple], points: list[dict]) -> Iterator[tuple]:
        if not points:
            return
        from distributed import as_completed
        self.start()
        shared = self.client.scatter(task, broadcast=True, hash=False)   # the data travels once per worker
        point_of, tries = {}, {}

        def submit(p, data, attempt=0):
            f = self.client.submit(call_task, data, p, key=f"point-{p['key']}-{data.key}-{attempt}", pure=False)
            point_of[f.key] = p
            return f

        futures = [submit(p, shared) for p in points]
        self.status.update(running=len(futures), failed=0)
        first_error = None
        queue = as_completed(futures)
        try:
            for f in queue:
                p = point_of[f.key]
                if f.status == "cancelled":
                    # a worker died with the point (or its copy of the inputs): the point is run again, up to
                    # RETRIES times, on inputs scattered anew if the cluster lost them
                    tries[p["key"]] = tries.get(p["key"], 0) + 1
                    if tries[p["key"]] <= RETRIES:
                        if shared.status != "finished":
                            shared = self.client.scatter(task, broadcast=True, hash=False)
                        g = submit(p, shared, tries[p["key"]])
                        futures.append(g)
                        queue.add(g)
                        continue
                self.status["running"] -= 1
                if f.status in ("error", "cancelled"):
                    self.status["failed"] += 1
                    if first_error is None:
                        first_error = (f.exception() if f.status == "error" else
                                       RuntimeError(f"point {p['key']} was lost {RETRIES + 1} times with its worker"))
                    continue
                yield f.result()
        finally:  # on Ctrl-C: points not finished are cancelled; finished ones were logged by the caller
            self.client.cancel([f for f in futures if not f.done()])
            self.client.cancel([shared])
        if first_error is not None:
            raise first_error

    def close(self) -> None:
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()
        self.client = self.cluster = None
