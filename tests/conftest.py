"""Test-wide settings. No rendering backend is forced: the code picks one (EGL, OSMesa,
else the matplotlib sketch) the way it does for users."""

import os

# Small matrices under threaded BLAS run many times slower when the 2 cores are
# busy with MuJoCo threads; one BLAS thread keeps tests fast and repeatable.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
# Bit-for-bit reproducible MKL products whatever the memory alignment (as the
# package sets before torch loads; tests may import torch first).
os.environ.setdefault("MKL_CBWR", "AUTO,STRICT")
