"""Test-wide settings: headless MuJoCo rendering through OSMesa."""

import os

# Small matrices under threaded BLAS run many times slower when the 2 cores are
# busy with MuJoCo threads; one BLAS thread keeps tests fast and repeatable.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
# Bit-for-bit reproducible MKL products whatever the memory alignment (as the
# package sets before torch loads; tests may import torch first).
os.environ.setdefault("MKL_CBWR", "AUTO,STRICT")

os.environ.setdefault("MUJOCO_GL", "osmesa")
os.environ.setdefault("PYOPENGL_PLATFORM", "osmesa")
