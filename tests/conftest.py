import os

# one OpenMP thread per process for the tight-binding engines (set before they load).
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MPLBACKEND", "Agg")
