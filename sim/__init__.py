"""Wheelbench: design checks for reaction-wheel balancing devices.

Data flows one way: scenario file -> validated scenario (SI) -> mass properties ->
engine model (pybullet, DIRECT) -> control loop -> trace -> metrics and verdicts -> files.

The package is laid out in layers, bottom to top: core, strategies, model, physics, media, run,
studies, fit, and cli.py on top; imports flow downward only (DEVELOPERS.md, "Package layout").
"""

import os as _os

# Our matrices are 3x3 to 6x6: BLAS worker threads only add overhead, and their busy-waiting
# steals the cores that parallel sweeps run on (each worker process measured 2-3x slower with
# them). Must be set before numpy loads its BLAS; a value the user set is kept.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_name, "1")

__version__ = "0.1.0"
