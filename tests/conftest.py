"""Test-wide settings: headless MuJoCo rendering through OSMesa."""

import os

os.environ.setdefault("MUJOCO_GL", "osmesa")
os.environ.setdefault("PYOPENGL_PLATFORM", "osmesa")
