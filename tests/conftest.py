import os

# Two cores: keep torch from oversubscribing when pytest runs several heavy tests in one process.
os.environ.setdefault("OMP_NUM_THREADS", "2")
os.environ.setdefault("MPLBACKEND", "Agg")
# The suite's memory must not depend on how many CPUs the machine shows. Sweeps with the automatic
# job count (recipe default jobs = 0) start one worker process per usable CPU, each about 0.4 GB
# resident; on a container that shows 32 host CPUs that was over 10 GB. joblib's CPU count, which
# the sweep uses, honours this variable; subprocesses inherit it.
os.environ.setdefault("LOKY_MAX_CPU_COUNT", "2")


# --- the suite's memory is checked on every run -----------------------------------------------------
# DEVELOPERS.md "Test-suite memory": the pytest process must stay under a few GB. The peak resident set
# (VmHWM, Linux /proc) is read after every test; a run above the limit fails and names the tests during
# which the peak grew most, so a regression shows where it came from.
PEAK_LIMIT_MIB = 3072
_peak_steps: list[tuple[int, str]] = []


def _peak_mib() -> int | None:
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) // 1024
    except OSError:
        return None
    return None


def pytest_runtest_logstart(nodeid, location):
    _peak_steps.append((_peak_mib() or 0, nodeid))


def pytest_runtest_logfinish(nodeid, location):
    before, _ = _peak_steps.pop()
    after = _peak_mib() or 0
    if after > before:
        _peak_steps.append((after - before, nodeid))
        _peak_steps.sort(reverse=True)
        del _peak_steps[5:]


def pytest_sessionfinish(session, exitstatus):
    peak = _peak_mib()
    if peak is not None and peak > PEAK_LIMIT_MIB:
        grew = "; ".join(f"{node} +{mib} MiB" for mib, node in _peak_steps)
        tw = session.config.get_terminal_writer()
        tw.line()
        tw.line(
            f"test-suite memory: peak {peak} MiB is over the {PEAK_LIMIT_MIB} MiB limit; grew most in: {grew}",
            red=True)
        session.exitstatus = 1
