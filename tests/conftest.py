import os

# Two cores: keep torch from oversubscribing when pytest runs several heavy tests in one process.
os.environ.setdefault("OMP_NUM_THREADS", "2")
os.environ.setdefault("MPLBACKEND", "Agg")
