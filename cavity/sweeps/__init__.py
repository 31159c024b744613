"""Sweeps: one scenario solved at many UTC instants and frequencies on dask workers.

The package is layered (each module imports only those above it):

- :mod:`~cavity.sweeps.points` - the sweep's points (instants x frequencies), the scenario of each,
  :class:`SweepError`;
- :mod:`~cavity.sweeps.cluster` - the solve a worker runs, the numba cache warm-up, worker and memory
  sizing;
- :mod:`~cavity.sweeps.store` - the parts folder (finished points, kept path solves) that makes a
  sweep resumable;
- :mod:`~cavity.sweeps.combine` - points combined along ``time`` and ``frequency``, CF time encoding
  and writing;
- :mod:`~cavity.sweeps.run` - the driver, :func:`sweep` (also :func:`cavity.sweep`).
"""

from cavity.sweeps.combine import combine, encode_time, write_sweep
from cavity.sweeps.points import SweepError, SweepPoint, parse_step, parse_utc, sweep_points, sweep_times
from cavity.sweeps.run import sweep
from cavity.sweeps.store import default_parts_dir

__all__ = [
    "SweepError",
    "SweepPoint",
    "combine",
    "default_parts_dir",
    "encode_time",
    "parse_step",
    "parse_utc",
    "sweep",
    "sweep_points",
    "sweep_times",
    "write_sweep",
]
