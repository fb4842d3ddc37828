import os

# one OpenMP thread per process for the tight-binding engines (set before they load); this
# file sits at the top so the doctests inside confpop/ get it too
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MPLBACKEND", "Agg")
