"""Sweep workers: the solve a worker runs, the numba cache warm-up, cluster and memory sizing."""

from __future__ import annotations

import logging
import os
import time as _time
from typing import TYPE_CHECKING

from cavity.errors import CavityError, ScenarioError
from cavity.sweeps.points import SweepError

if TYPE_CHECKING:  # pragma: no cover
    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: Share of the available memory the combined arrays of a sweep may take.
COMBINE_MEMORY_SHARE = 0.8


# --------------------------------------------------------------------------------------------------
# Work on the workers, and the numba cache
# --------------------------------------------------------------------------------------------------


def solve_path(scenario: Scenario, path):
    """Solve one path of one point (runs on a worker): a :class:`cavity.solve.PathSolution`."""
    from cavity.solve import solve_path as solve

    return solve(scenario, path)


_WARM_UP_SCENARIO = """
title = "numba cache warm-up"
[transmitter]
name = "warm-up"
frequency_khz = 10.0
radiated_power_kw = 1.0
[[receiver]]
name = "near"
range_km = 30.0
[ionosphere]
preset = "day"
[ground]
kind = "sea"
[solver]
cell_m = 2500.0
top_km = 100.0
"""


def warm_numba_cache() -> float:
    """Compile (or load) every solver kernel once in this process by a tiny solve; returns seconds.

    The kernels are compiled with ``cache=True``, so the worker processes started afterwards load
    them from disk instead of compiling them all at the same moment into the same cache files.
    """
    import numba

    from cavity.scenario import load_scenario
    from cavity.solve import simulate

    t0 = _time.perf_counter()
    threads = numba.get_num_threads()
    numba.set_num_threads(1)  # a tiny grid: threads would only add overhead
    try:
        simulate(load_scenario(_WARM_UP_SCENARIO))
    finally:
        numba.set_num_threads(threads)
    return _time.perf_counter() - t0


def machine_cores() -> int:
    """Cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def local_cluster_size(
    n_points: int,
    memory_per_point: int | None = None,
    workers: int | None = None,
    cores: int | None = None,
    available_bytes: int | None = None,
) -> tuple[int, int]:
    """(workers, numba threads per worker) for a local cluster.

    One point at a time per worker process; as many workers as cores, points to solve and solves
    that fit in 80 % of the available memory; the cores left over go to numba threads, so that
    workers x threads <= cores. ``workers`` overrides the count (threads then = cores // workers,
    at least 1).
    """
    cores = cores or machine_cores()
    if workers is None:
        n = min(cores, max(1, n_points))
        if memory_per_point:
            if available_bytes is None:
                from cavity.fdtd.grid import available_memory_bytes

                available_bytes = available_memory_bytes()
            n = min(n, max(1, int(0.8 * available_bytes // memory_per_point)))
    else:
        if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
            raise ScenarioError(f"workers = {workers!r} must be a whole number >= 1")
        n = workers
        if n > cores:
            log.warning("%d workers on %d cores: the solves will share the cores", n, cores)
    return n, max(1, cores // n)


def combined_memory_bytes(n_times: int, n_freqs: int, n_paths: int, n_range: int) -> int:
    """Memory of a sweep's combined arrays (float64), bytes.

    Per instant: the ionosphere along every path (electron density on the result altitudes, h',
    beta, solar zenith angle) and, per frequency, four field variables along range. Receiver values
    and per-point records are small beside them.
    """
    from cavity.solve import RESULT_ALTITUDE_KM

    per_instant = n_paths * n_range * (RESULT_ALTITUDE_KM.size + 3 + 4 * n_freqs)
    return int(8 * max(1, n_times) * per_instant)


def check_combine_memory(times, freqs, points, variants) -> None:
    """Refuse, before any solving, a sweep whose combined arrays would not fit in memory.

    The size follows from the grid of the longest path at the highest frequency. A point whose paths
    cannot be built is left to the solve, which reports it by name.

    Raises
    ------
    SweepError
        The combined arrays need more than :data:`COMBINE_MEMORY_SHARE` of the available memory; the
        message says how many instants would fit.
    """
    from cavity.fdtd import grid as gridmod
    from cavity.paths import build_paths
    from cavity.solve import plan_path

    point = max(points, key=lambda p: (p.frequency_hz, -p.time_index))
    try:
        paths = build_paths(variants[point])
        plan = max((plan_path(variants[point], path).grid for path in paths), key=lambda g: g.nr)
    except CavityError:
        return
    n_t = len(times) if times is not None else 1
    n_range = plan.range_columns
    need = combined_memory_bytes(n_t, len(freqs), len(paths), n_range)
    available = gridmod.available_memory_bytes()
    if need > COMBINE_MEMORY_SHARE * available:
        per_instant = combined_memory_bytes(1, len(freqs), len(paths), n_range)
        fit = int(COMBINE_MEMORY_SHARE * available // per_instant)
        advice = (
            f"sweep at most {fit} instant{'s' if fit > 1 else ''} per file (a shorter time range or a longer --step)"
            if fit
            else "not even one instant fits (free memory, or use a coarser solver.cell_m)"
        )
        raise SweepError(
            f"the combined sweep would need about {need / 1e9:.2g} GB of memory ({n_t} instants x "
            f"{per_instant / 1e6:.2g} MB), more than {COMBINE_MEMORY_SHARE:.0%} of the "
            f"{available / 1e9:.2g} GB available; {advice}"
        )
