"""Where the points of a sweep run: the executor seam, in this process or in a local process pool.

An executor has two methods:

    start()                   called before the model and the data set load, so that workers
                              can come up meanwhile; may do nothing
    map_points(task, points)  -> iterator of task(point) for every point

A new engine (another machine, a cluster) must provide the same, with this contract:
- `task` is a picklable `sweep.point.PointTask` (its point function at module level, the float
  model, the frames, the recipe); `task(point)` returns (point, metrics, timing) in any process.
- Results come back in any order, one per point, as soon as each finishes; the caller keys
  them by point["key"] and logs each at once, so a stopped sweep keeps what had finished.
- A failed point raises out of the iterator; closing the iterator cancels the points not started.
- A worker runs one BLAS/OpenMP thread (WORKER_ENV): the parallelism is across points, and the
  metrics of a point do not depend on the process that computed it.
"""

from __future__ import annotations

import collections
import queue
from pathlib import Path
from typing import Callable, Iterator, Protocol

from snnconvert.errors import check_int


class Executor(Protocol):
    def start(self) -> None: ...

    def map_points(self, task: Callable[[dict], tuple], points: list[dict]) -> Iterator[tuple]: ...


# Resident memory of one worker process after a point: torch, scikit-learn's metrics and the data
# set come to about 0.4 GB on the default recipe (measured with ps); the automatic job count keeps
# this much available memory per process.
WORKER_BYTES = 512 * 2**20

# Worker processes: one torch/BLAS thread each, since the parallelism is across points; idle
# workers stay alive a few minutes so a resumed or extended sweep does not pay their start again.
WORKER_ENV = {"OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1"}
WORKER_IDLE_SECONDS = 300
# loky restarts a worker whose resident memory grew by more than 300 MB since its first task, taking it
# for a leak. A point of an MNIST-size set legitimately holds a few hundred MB of simulation chunks that
# the allocator keeps for the next point, so workers were restarted (a torch import each) with a warning
# on stderr after most points. A worker may grow by this much before it counts as leaking.
WORKER_GROWTH_BYTES = 2 * 2**30


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


class Serial:
    """Every point in this process, in the given order."""

    jobs = 1

    def start(self) -> None:
        pass

    def map_points(self, task: Callable[[dict], tuple], points: list[dict]) -> Iterator[tuple]:
        for p in points:
            yield task(p)


def _worker_start() -> None:
    """In each worker, before its first task: the growth loky tolerates (WORKER_GROWTH_BYTES)."""
    from joblib.externals.loky import process_executor
    process_executor._MAX_MEMORY_LEAK_SIZE = WORKER_GROWTH_BYTES


def _warm() -> None:
    """Import what a point needs, so a worker's start overlaps the parent's loading."""
    import sklearn.metrics  # noqa: F401  (about a CPU second on its own)
    import torch  # noqa: F401

    import snnconvert.convert  # noqa: F401
    import snnconvert.sim.metrics  # noqa: F401


class LocalPool:
    """`jobs` processes on this machine: jobs - 1 loky workers and this process.

    Workers take points from the end of the list, this process from the front; once the list is
    empty this process takes back points still queued for a worker, so nobody idles at the end.
    """

    def __init__(self, jobs: int):
        self.jobs = int(jobs)

    def _workers(self):
        from joblib.externals.loky import get_reusable_executor
        return get_reusable_executor(max_workers=self.jobs - 1, timeout=WORKER_IDLE_SECONDS, env=WORKER_ENV,
                                     initializer=_worker_start)

    def start(self) -> None:
        """Start the workers now, without waiting."""
        ex = self._workers()
        for _ in range(self.jobs - 1):
            ex.submit(_warm)

    def map_points(self, task: Callable[[dict], tuple], points: list[dict]) -> Iterator[tuple]:
        if len(points) < 2:
            yield from Serial().map_points(task, points)
            return
        ex = self._workers()
        todo = collections.deque(points)
        finished: queue.Queue = queue.Queue()
        inflight: dict = {}   # future -> point
        closing = False       # points taken back from the workers' queue are never handed out again

        def submit():
            while not closing and todo and len(inflight) < 2 * (self.jobs - 1):
                p = todo.pop()
                f = ex.submit(task, p)
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
                    yield task(todo.popleft())
                elif inflight:
                    # the list is empty: take back what no worker has started, and run it here. Handing it
                    # out again would cancel and resubmit in a loop while a worker is slow to start (each
                    # submit pickles the task: memory grew by gigabytes before this rule)
                    closing = True
                    for f in [f for f in inflight if f.cancel()]:
                        todo.append(inflight.pop(f))
                    if not todo:
                        yield from harvest(block=True)
        finally:  # on Ctrl-C or a failed point: queued points are dropped, finished ones were logged
            for f in inflight:
                f.cancel()


def local_executor(jobs=None) -> Serial | LocalPool:
    """The executor for a job count (0 or None: automatic, see resolve_jobs)."""
    n = resolve_jobs(jobs)
    return Serial() if n == 1 else LocalPool(n)


def executor_for(settings):
    """The executor of a [sweep] section: a Dask cluster when `scheduler` is set (sweep.cluster),
    else the local one for `jobs`. A caller that made it calls `close_executor` when done."""
    if getattr(settings, "scheduler", ""):
        from snnconvert.sweep.cluster import DaskExecutor
        return DaskExecutor(settings.scheduler)
    return local_executor(settings.jobs)


def close_executor(executor) -> None:
    """End what an executor started (a Dask client and its LocalCluster); the local pools keep their
    idle workers for the next sweep."""
    close = getattr(executor, "close", None)
    if close is not None:
        close()
