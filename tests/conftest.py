import os

# Two cores: keep torch from oversubscribing when pytest runs several heavy tests in one process.
os.environ.setdefault("OMP_NUM_THREADS", "2")
os.environ.setdefault("MPLBACKEND", "Agg")
# The suite's memory must not depend on how many CPUs the machine shows. Sweeps with the automatic
# job count (recipe default jobs = 0) start one worker process per usable CPU, each about 0.4 GB
# resident; on a container that shows 32 host CPUs that was over 10 GB. joblib's CPU count, which
# the sweep uses, honours this variable; subprocesses inherit it.
os.environ.setdefault("LOKY_MAX_CPU_COUNT", "2")
