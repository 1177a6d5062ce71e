"""Memory that must not grow with the machine or the data: sweep worker counts, simulator batches."""

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from _convert_helpers import split, trained  # noqa: E402

from snnconvert import arith, sweep  # noqa: E402
from snnconvert.convert import convert_model  # noqa: E402
from snnconvert.sim import vectorized  # noqa: E402

GIB = 2**30


# --- sweep: how many worker processes the automatic job count starts --------------------------

@pytest.mark.parametrize("cpus, memory, want", [
    (64, 4 * GIB, 8),          # a container showing 64 CPUs with 4 GiB free: 4 GiB / 0.5 GiB per process
    (64, None, 64),            # memory unknown (not Linux): the CPU count alone
    (2, 64 * GIB, 2),          # plenty of memory: one process per usable CPU
    (8, 100 * 2**20, 1),       # less than one worker's memory: still one process (this one)
])
def test_automatic_job_count_is_bounded_by_cpus_and_memory(monkeypatch, cpus, memory, want):
    monkeypatch.setattr(sweep.executor, "usable_cpus", lambda: cpus)
    monkeypatch.setattr(sweep.executor, "available_memory", lambda: memory)
    assert sweep.resolve_jobs(0) == sweep.resolve_jobs(None) == want
    assert sweep.resolve_jobs(5) == 5          # an explicit count is the user's choice


def test_usable_cpus_honour_the_loky_limit(monkeypatch):
    # LOKY_MAX_CPU_COUNT caps joblib's CPU count (joblib documentation of cpu_count), the same count
    # that reads cgroup CPU quotas, which a container's affinity mask does not show
    monkeypatch.setenv("LOKY_MAX_CPU_COUNT", "1")
    assert sweep.usable_cpus() == 1 and sweep.resolve_jobs(0) == 1


def test_the_suite_starts_at_most_two_processes_per_sweep():
    # tests/conftest.py: the suite's memory does not depend on the CPUs the machine shows
    assert sweep.resolve_jobs(0) <= 2


@pytest.mark.parametrize("meminfo, limit, current, want", [
    # /proc/meminfo lines are "Name: value kB" (proc(5)); cgroup v2 memory.max is bytes or "max"
    # (Linux admin-guide cgroup-v2)
    ("MemTotal:       24000000 kB\nMemAvailable:    4000000 kB\n", None, None, 4000000 * 1024),
    ("MemAvailable:    4000000 kB\n", "max", "123", 4000000 * 1024),
    ("MemAvailable:    4000000 kB\n", str(2 * GIB), str(GIB), GIB),   # the container's limit is lower
    ("MemTotal:       24000000 kB\n", None, None, None),                # no MemAvailable line (old kernels)
])
def test_available_memory_reads_meminfo_and_cgroup_limit(tmp_path, meminfo, limit, current, want):
    (tmp_path / "meminfo").write_text(meminfo)
    cg = tmp_path / "cg"
    cg.mkdir()
    if limit is not None:
        (cg / "memory.max").write_text(limit + "\n")
        (cg / "memory.current").write_text(current + "\n")
    assert sweep.available_memory(tmp_path / "meminfo", cg) == want


# --- simulator: bounded batches whatever the number of samples -------------------------------

@pytest.fixture(scope="module")
def net_and_inputs():
    (xtr, _), (xte, _) = split(True)
    net = convert_model(trained("conv_max", True), xtr[:300], weight_bits=4, payload_bits=4, coding="payload",
                        per_channel=False, input_q=1)
    return net, arith.quantize_input(xte, net.input_q)


@pytest.mark.parametrize("kernel", ["auto", "int64"])
def test_simulator_batches_hold_a_bounded_number_of_values(net_and_inputs, monkeypatch, kernel):
    net, x = net_and_inputs
    monkeypatch.setattr(vectorized, "BATCH_VALUES", 2**16)        # small budget: 597 samples in several batches
    sizes = []
    run = vectorized._run

    def counting(net_, a, *args, **kw):
        sizes.append(a.shape[0])
        return run(net_, a, *args, **kw)

    monkeypatch.setattr(vectorized, "_run", counting)
    res = vectorized.simulate(net, x, kernel=kernel)
    # the conv_max layout of tests/_convert_helpers.py: widest output 6 x 16 x 16 = 1536 values per
    # sample; on the int64 kernel the first conv's window copy is 16 x 16 positions x 9 taps = 2304
    widest = 2304 if kernel == "int64" else 1536
    assert vectorized.batch_size(net, kernel) == 2**16 // widest
    assert max(sizes) * widest <= 2**16 and sum(sizes) == len(x) and len(sizes) > 1
    whole = vectorized.simulate(net, x, kernel=kernel, batch=len(x))   # one batch: the same integers
    assert np.array_equal(res.potentials, whole.potentials) and np.array_equal(res.spike_counts, whole.spike_counts)
    assert all(np.array_equal(a, b) for a, b in zip(res.payloads, whole.payloads))


def test_points_taken_back_from_a_slow_worker_are_not_handed_out_again(monkeypatch):
    """A worker that has not started any point when the list runs out: this process takes the queued points
    back and runs them itself. Each hand-out pickles the task (model and data), so handing them out again
    while the worker stays slow grew the suite's memory by gigabytes."""
    from concurrent.futures import Future

    from snnconvert.sweep.executor import LocalPool

    class NeverStarts:
        submits = 0

        def submit(self, fn, *args):
            NeverStarts.submits += 1
            if NeverStarts.submits > 50:
                raise AssertionError("points are handed out again and again")
            return Future()                           # pending until cancelled: the worker never takes it

    pool = LocalPool(2)
    monkeypatch.setattr(pool, "_workers", lambda: NeverStarts())
    done = sorted(pool.map_points(lambda p: p, list(range(6))))
    assert done == list(range(6)) and NeverStarts.submits <= 2 * 2


def _leak_limit():
    from joblib.externals.loky import process_executor
    return process_executor._MAX_MEMORY_LEAK_SIZE


def test_workers_tolerate_the_growth_of_a_large_point():
    from snnconvert.sweep.executor import WORKER_GROWTH_BYTES, LocalPool
    # loky's own limit is 300 MB (joblib's loky process_executor); a sweep worker's is WORKER_GROWTH_BYTES
    assert LocalPool(2)._workers().submit(_leak_limit).result(timeout=120) == WORKER_GROWTH_BYTES
