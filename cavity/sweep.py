"""Sweeps: many variants of one scenario (UTC instants, frequencies) solved on dask.distributed workers.

A sweep is a grid of *points*, every combination of a UTC instant and a frequency. Each point is the
scenario with ``ionosphere.utc`` set to the instant (form "utc" only) and the transmitter's frequency
list replaced by the one frequency: an ordinary scenario. The driver builds each point's paths and
hands the *distinct* path solves to dask workers: a path whose medium and settings are the same at
several instants (wholly in day, or wholly in night, for hours of a diurnal sweep) is solved once
(:func:`cavity.solve.solve_key`), which is what makes a day of 15-minute steps affordable. A worker
returns the path's small calibrated solution; the driver puts each point together exactly as
:func:`cavity.simulate` would (the same numbers) and is the only writer. The points are combined
along a ``time`` dimension (and ``frequency``) into one dataset that keeps the result-file contract
of the design conventions, with ``time`` a CF time coordinate (seconds since 1970-01-01 UTC,
standard calendar, when written).

Resuming: each finished point is written atomically as its own small result file into a parts
folder (by default ``OUT.nc.parts/`` beside the combined file). A part is reused when its embedded
scenario text and tool version equal those of the point, so a killed sweep run again computes only
what is missing, and a sweep extended to more instants or frequencies reuses what it has.

Failures: a path solve that raises is retried once (dask ``retries=1``; a worker that dies is
replaced and its solve rescheduled by dask itself), then every point that needs it is reported by
name with the error while the other points go on. If any point still failed, no combined dataset is made
(:class:`SweepError`, listing them; the finished points stay in the parts folder and a rerun retries
only the failed ones) unless ``allow_missing`` is true, which fills the failed points with NaN and
names them in the ``sweep_missing_points`` attribute.

Workers: without a scheduler a :class:`distributed.LocalCluster` of process workers is sized to the
machine (workers x numba threads <= cores, and as many solves as fit in memory), with the dashboard
off; with an address (``tcp://host:port``) or a :class:`distributed.Client` an existing cluster is
used (its workers need this package installed). The numba kernels are compiled into their on-disk
cache by a tiny solve in the driver before the fan-out, because numba's cache is not safe when many
processes compile at once.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import os
import sys
import time as _time
import types
import uuid
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from datetime import date, datetime, timedelta, timezone
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from cavity import __version__
from cavity.errors import CavityError, ScenarioError

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: Most points one sweep may hold (a guard against a mistyped step such as 1s over a day).
MAX_POINTS = 10_000
#: CF encoding of the ``time`` coordinate in written files.
TIME_UNITS = "seconds since 1970-01-01 00:00:00"
TIME_CALENDAR = "standard"
#: Automatic retries of a point whose solve raised (a dead worker is handled by dask separately).
RETRIES = 1
#: Suffix of the default parts folder beside the combined file.
PARTS_SUFFIX = ".parts"
#: How long to wait for an existing scheduler to answer.
CONNECT_TIMEOUT_S = 20
#: Share of the available memory the combined arrays of a sweep may take.
COMBINE_MEMORY_SHARE = 0.8

#: Variables along range that do not change with the UTC instant: the ground under each path, and
#: the collision frequency, which the exponential profiles of the "utc" form take from altitude alone.
_TIME_INVARIANT = ("ground_conductivity", "ground_relative_permittivity", "collision_frequency")
#: Dimensions a sweep combines; per-run diagnostics on other dimensions (waveforms against time
#: since the source started, spectra) differ in length from point to point and are left out.
_SWEPT_DIMS = frozenset({"path", "frequency", "range", "altitude", "receiver"})


class SweepError(CavityError):
    """One or more points of a sweep failed after their retry; ``failures`` holds (name, message)."""

    def __init__(self, message: str, failures: Sequence[tuple[str, str]] = ()):
        super().__init__(message)
        self.failures = list(failures)


# --------------------------------------------------------------------------------------------------
# Points
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SweepPoint:
    """One point of a sweep: an instant (None when the sweep has no time axis) and one frequency."""

    time_index: int
    frequency_index: int
    utc: datetime | None
    frequency_hz: float

    @property
    def name(self) -> str:
        """How the point is named to the user, e.g. ``2026-03-20T06:15:00Z 19.6 kHz``."""
        f = f"{self.frequency_hz / 1e3:g} kHz"
        return f"{_utc_text(self.utc)} {f}" if self.utc is not None else f

    @property
    def key(self) -> str:
        """A file-name-safe identity of the point, e.g. ``t20260320T061500Z_f19.6kHz``."""
        f = f"f{self.frequency_hz / 1e3:g}kHz"
        return f"t{self.utc:%Y%m%dT%H%M%SZ}_{f}" if self.utc is not None else f


def _utc_text(when: datetime) -> str:
    return when.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def parse_utc(value, field: str = "start") -> datetime:
    """An ISO 8601 instant with an offset (``2026-03-20T06:00Z``), or a date meaning 00:00 UTC.

    Raises
    ------
    ScenarioError
        Not a date and time, or a time without an offset (the tool never guesses a time zone).
    """
    shown = value.isoformat() if isinstance(value, (datetime, date)) else str(value).strip()
    if isinstance(value, datetime):
        when = value
    elif isinstance(value, date):
        when = datetime(value.year, value.month, value.day, tzinfo=timezone.utc)
    else:
        text = str(value).strip()
        try:
            when = datetime.fromisoformat(text)
        except ValueError:
            raise ScenarioError(
                f"{field} = {text!r} is not a date and time; write e.g. 2026-03-20T06:00Z (UTC)"
            ) from None
        if len(text) == 10:  # a date alone: midnight UTC
            when = when.replace(tzinfo=timezone.utc)
    if when.tzinfo is None or when.utcoffset() is None:
        raise ScenarioError(f"{field} = {shown!r} has no time zone; end it with Z (UTC), e.g. 2026-03-20T06:00Z")
    return when.astimezone(timezone.utc)


def parse_step(value) -> timedelta:
    """A positive whole number of seconds from text such as ``15min``, ``1h``, ``90s`` or ``1h30min``."""
    if isinstance(value, timedelta):
        step = value
    else:
        import pandas as pd

        text = str(value).strip()
        try:
            float(text)
        except ValueError:
            pass
        else:
            raise ScenarioError(f"step = {text!r} has no unit; write e.g. 15min, 1h or 90s")
        try:
            step = pd.Timedelta(text).to_pytimedelta()
        except (ValueError, TypeError):
            raise ScenarioError(f"step = {text!r} is not a duration; write e.g. 15min, 1h or 90s") from None
    seconds = step.total_seconds()
    if not (seconds >= 1.0 and float(seconds).is_integer()):
        raise ScenarioError(f"step = {step} must be a whole number of seconds, at least 1 s")
    return step


def sweep_times(start, stop, step) -> list[datetime]:
    """Instants from ``start`` to ``stop`` (included when it falls on the grid) every ``step``.

    Parameters
    ----------
    start, stop : str, datetime.datetime or datetime.date
        See :func:`parse_utc`.
    step : str or datetime.timedelta
        See :func:`parse_step`.
    """
    t0 = parse_utc(start, "start")
    t1 = parse_utc(stop, "stop")
    dt = parse_step(step)
    if t1 < t0:
        raise ScenarioError(f"stop = {_utc_text(t1)} is before start = {_utc_text(t0)}")
    count = int((t1 - t0) // dt) + 1
    if count > MAX_POINTS:
        raise ScenarioError(f"step = {dt} from {_utc_text(t0)} to {_utc_text(t1)} gives {count} instants; the limit is {MAX_POINTS}")
    return [t0 + k * dt for k in range(count)]


def sweep_points(scenario: Scenario, times=None, frequencies_khz=None) -> tuple[list[datetime] | None, list[float], list[SweepPoint]]:
    """The instants, frequencies (Hz) and points of a sweep, checked against the scenario.

    ``times`` None keeps the scenario's own instant (a time axis of length 1) for ionosphere form
    "utc" and gives no time axis otherwise; ``frequencies_khz`` None keeps the scenario's
    frequencies. Every point becomes its own single-frequency solve.

    Raises
    ------
    ScenarioError
        Instants given for a scenario whose ionosphere does not depend on time, or a bad value.
    """
    if getattr(scenario, "source", None) is not None:
        raise ScenarioError(
            "[source]: a sweep solves the continuous transmitter; a lightning source is not swept "
            "(remove [source], or run each instant on its own)"
        )
    form = scenario.ionosphere.form
    if times is not None:
        times = [parse_utc(t, "time") for t in times]
        if not times:
            raise ScenarioError("times: the sweep needs at least one instant")
        if form != "utc":
            raise ScenarioError(
                f"ionosphere: form {form!r} does not change with time, so it cannot be swept over UTC; "
                "use utc = ... in the scenario, or sweep over frequency only"
            )
        if len(set(times)) != len(times):
            raise ScenarioError("times: an instant appears twice")
        times = sorted(times)
    elif form == "utc":
        times = [scenario.ionosphere.utc]
    if frequencies_khz is None:
        freqs = sorted(scenario.transmitter.frequencies_hz)
    else:
        values = [frequencies_khz] if isinstance(frequencies_khz, (int, float)) else list(frequencies_khz)
        if not values:
            raise ScenarioError("frequency_khz: give at least one frequency")
        freqs = []
        for v in values:
            if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)) or not math.isfinite(v):
                raise ScenarioError(f"frequency_khz = {v!r} must be a number (kHz)")
            freqs.append(float(v) * 1e3)
        freqs = sorted(set(freqs))
    slots = list(range(len(times))) if times is not None else [None]
    points = [
        SweepPoint(ti if ti is not None else 0, fi, None if ti is None else times[ti], f)
        for ti in slots
        for fi, f in enumerate(freqs)
    ]
    if len(points) > MAX_POINTS:
        raise ScenarioError(f"the sweep has {len(points)} points; the limit is {MAX_POINTS}")
    return times, freqs, points


def point_scenario(scenario: Scenario, point: SweepPoint) -> Scenario:
    """The scenario of one point: its instant (form "utc") and its one frequency, validated again.

    Receiver time series are switched off: they are per-run diagnostics that a sweep does not keep.
    """
    changes = {
        "transmitter": dataclasses.replace(scenario.transmitter, frequencies_hz=(float(point.frequency_hz),)),
        "solver": dataclasses.replace(scenario.solver, receiver_time_series=False),
    }
    if point.utc is not None:
        changes["ionosphere"] = dataclasses.replace(scenario.ionosphere, utc=point.utc)
    return scenario.replace(**changes)


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


def local_cluster_size(n_points: int, memory_per_point: int | None = None, workers: int | None = None,
                       cores: int | None = None, available_bytes: int | None = None) -> tuple[int, int]:
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
    n_range = plan.nr - plan.pml_r_cells - 1
    need = combined_memory_bytes(n_t, len(freqs), len(paths), n_range)
    available = gridmod.available_memory_bytes()
    if need > COMBINE_MEMORY_SHARE * available:
        per_instant = combined_memory_bytes(1, len(freqs), len(paths), n_range)
        fit = int(COMBINE_MEMORY_SHARE * available // per_instant)
        advice = (f"sweep at most {fit} instant{'s' if fit > 1 else ''} per file (a shorter time range or a longer --step)" if fit
                  else "not even one instant fits (free memory, or use a coarser solver.cell_m)")
        raise SweepError(
            f"the combined sweep would need about {need / 1e9:.2g} GB of memory ({n_t} instants x "
            f"{per_instant / 1e6:.2g} MB), more than {COMBINE_MEMORY_SHARE:.0%} of the "
            f"{available / 1e9:.2g} GB available; {advice}"
        )


# --------------------------------------------------------------------------------------------------
# Parts folder
# --------------------------------------------------------------------------------------------------


def default_parts_dir(output) -> Path:
    """The parts folder of a combined file: ``OUT.nc.parts`` beside it."""
    out = Path(os.fspath(output)).expanduser()
    return out.with_name(out.name + PARTS_SUFFIX)


def _part_path(parts_dir: Path, point: SweepPoint) -> Path:
    return parts_dir / f"{point.key}.nc"


#: Subfolder of the parts folder that keeps each distinct path solve, by its key.
SOLVES_SUBDIR = "path-solves"
_SOLUTION_ARRAYS = ("range_m", "ez", "b", "receiver_ez", "receiver_b", "electron_density", "collision_frequency",
                    "ez_uncertainty_db", "receiver_ez_uncertainty_db")
_ENGINE_ARRAYS = ("range_m", "frequencies_hz", "ez", "hphi", "probe_ranges_m")


def _solution_path(parts_dir: Path, key: str) -> Path:
    return parts_dir / SOLVES_SUBDIR / f"{key}.npz"


def save_solution(parts_dir: Path, key: str, sol) -> Path:
    """Keep one path solve (a :class:`cavity.solve.PathSolution`) as ``path-solves/KEY.npz``, atomically.

    Plain arrays and a JSON record (no pickle), so that a resumed or widened sweep takes the solve
    from disk instead of solving it again. The path model is not stored: every point that uses the
    solve supplies its own.
    """
    import json
    import tempfile

    if sol.engine.time_s is not None:
        raise ValueError("a solve with receiver time series is not kept (sweeps switch them off)")
    target = _solution_path(parts_dir, key)
    target.parent.mkdir(parents=True, exist_ok=True)
    arrays = {f"sol_{n}": getattr(sol, n) for n in _SOLUTION_ARRAYS if getattr(sol, n) is not None}
    arrays.update({f"eng_{n}": getattr(sol.engine, n) for n in _ENGINE_ARRAYS})
    record = {
        "version": __version__, "key": key, "plan": dataclasses.asdict(sol.engine.plan),
        "steps": sol.engine.steps, "wall_time_s": sol.engine.wall_time_s, "converged": sol.engine.converged,
        "notes": list(sol.engine.notes), "engine_fit_error": sol.engine_fit_error,
    }
    fd, tmp = tempfile.mkstemp(prefix=f".{key[:16]}.", suffix=".npz", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            np.savez(handle, record=np.array(json.dumps(record)), **arrays)
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return target


def load_solution(parts_dir: Path, key: str, path):
    """A path solve kept by :func:`save_solution` for this key and tool version, on ``path``; else None."""
    import json

    from cavity.fdtd.engine import EngineResult
    from cavity.fdtd.grid import GridPlan
    from cavity.solve import PathSolution

    file = _solution_path(parts_dir, key)
    if not file.is_file():
        return None
    try:
        with np.load(file, allow_pickle=False) as data:
            record = json.loads(str(data["record"]))
            if record.get("version") != __version__ or record.get("key") != key:
                return None
            arrays = {n: data[f"sol_{n}"] if f"sol_{n}" in data.files else None for n in _SOLUTION_ARRAYS}
            engine = EngineResult(
                plan=GridPlan(**record["plan"]), steps=int(record["steps"]), wall_time_s=float(record["wall_time_s"]),
                converged=bool(record["converged"]), notes=list(record["notes"]),
                **{n: data[f"eng_{n}"] for n in _ENGINE_ARRAYS},
            )
            return PathSolution(path=path, engine=engine, engine_fit_error=float(record["engine_fit_error"]), **arrays)
    except (OSError, ValueError, KeyError, TypeError) as exc:  # unreadable or from another layout
        log.warning("ignoring kept path solve %s (%s)", file.name, _one_line(exc))
        return None


def _load_part(path: Path, variant: Scenario):
    """A finished part that belongs to this point (same scenario text, same tool version), or None."""
    from cavity.errors import ResultFileError
    from cavity.results import open_result

    if not path.is_file():
        return None
    try:
        ds = open_result(path)
    except ResultFileError as exc:
        log.warning("ignoring unreadable part %s (%s)", path.name, exc)
        return None
    if ds.attrs.get("scenario") != variant.text or ds.attrs.get("source") != f"cavity {__version__}":
        log.info("part %s belongs to another scenario or version; solving it again", path.name)
        return None
    return ds


# --------------------------------------------------------------------------------------------------
# The sweep
# --------------------------------------------------------------------------------------------------


def sweep(
    scenario: Scenario,
    times: Iterable | None = None,
    frequencies_khz: Iterable[float] | float | None = None,
    scheduler=None,
    workers: int | None = None,
    parts_dir=None,
    progress: Callable[[float, str], None] | None = None,
    *,
    allow_missing: bool = False,
    solve: Callable | None = None,
) -> xr.Dataset:
    """Solve every (instant, frequency) variant of a scenario on dask workers and combine them.

    Parameters
    ----------
    scenario : cavity.scenario.Scenario
        The base scenario. Instants need ionosphere form "utc".
    times : iterable of datetime or str, optional
        UTC instants (tz-aware datetimes or ISO 8601 text with an offset); see :func:`sweep_times`
        for a regular grid. Default: the scenario's own instant (form "utc"), else no time axis.
    frequencies_khz : float or iterable of float, optional
        Frequencies, kHz; default the scenario's. Each is solved on its own.
    scheduler : str, distributed.Client or a dask cluster object, optional
        Address of an existing scheduler (``tcp://host:port``), a connected client or a cluster
        (left running); default a local cluster sized to this machine, shut down at the end.
    workers : int, optional
        Worker processes of the local cluster (ignored with ``scheduler``).
    parts_dir : str or os.PathLike, optional
        Folder that keeps one result file per finished point; points already there (same scenario
        text and tool version) are reused, not solved again. Default: none (nothing kept).
    progress : callable(fraction, text), optional
        Called in the driver after each solved point, with the fraction of the points to solve.
    allow_missing : bool
        Combine even if some points failed, with NaN for them (named in ``sweep_missing_points``).
    solve : callable(Scenario, PathModel) -> PathSolution, optional
        What a worker runs for each distinct path solve; default :func:`solve_path` (the solver). It
        must be importable (or picklable by value) on the workers.

    Returns
    -------
    xarray.Dataset
        The result-file contract with a ``time`` dimension (datetime64, UTC; just left of
        ``altitude``, the order CF recommends) on every field, receiver value and ionosphere
        variable (absent when the sweep has no instants), and per-point solver records
        ``point_solver_*``. Write it with :func:`write_sweep`.

    Raises
    ------
    ScenarioError
        A bad instant, step or frequency, or instants for a scenario without form "utc".
    SweepError
        Points failed after their retry (each named with its error), or the scheduler cannot be
        reached.

    Notes
    -----
    A script that starts the local cluster must keep its work under ``if __name__ ==
    "__main__":``: dask's worker processes are spawned and import the script again. Any exception
    in the driver (Ctrl-C, or one raised by ``progress``) cancels the points not yet solved; the
    finished ones stay in ``parts_dir``.
    """
    times, freqs, points = sweep_points(scenario, times, frequencies_khz)
    variants = {p: point_scenario(scenario, p) for p in points}
    results: dict[SweepPoint, object] = {}
    folder = None
    if parts_dir is not None:
        folder = Path(os.fspath(parts_dir)).expanduser()
        folder.mkdir(parents=True, exist_ok=True)
        for p in points:
            if _load_part(_part_path(folder, p), variants[p]) is not None:
                results[p] = _part_path(folder, p)  # read again, one at a time, when combining
    todo = [p for p in points if p not in results]
    log.info(
        "sweep: %d points (%s x %s); %d already solved%s, %d to solve",
        len(points), f"{len(times)} instants" if times is not None else "no time axis",
        f"{len(freqs)} frequencies" if len(freqs) > 1 else "1 frequency",
        len(results), f" in {folder}" if folder is not None else "", len(todo),
    )
    failures: dict[SweepPoint, str] = {}
    if todo:
        check_combine_memory(times, freqs, points, variants)
        failures = _run(todo, variants, results, folder, scheduler, workers, progress, solve or solve_path)
    if failures:
        lines = [(p.name, failures[p]) for p in points if p in failures]
        for name, message in lines:
            log.error("point %s failed: %s", name, message)
        if not allow_missing:
            kept = f"; the {len(results)} finished points are kept in {folder}" if folder is not None and results else ""
            first = f"{lines[0][0]}: {lines[0][1]}"
            raise SweepError(
                f"{len(lines)} of {len(points)} points failed (first: {first}){kept}; "
                "run the sweep again to retry only the missing points",
                lines,
            )
    if not results:
        raise SweepError("no point of the sweep was solved", [(p.name, failures.get(p, "")) for p in points])
    return combine(scenario, times, freqs, points, results, variants)


@dataclass
class _Job:
    """One distinct path solve and the points waiting for it."""

    key: str
    scenario: Scenario  # the first point's scenario that needs it
    path: object  # cavity.paths.PathModel
    points: list[SweepPoint]


def plan_jobs(todo: Sequence[SweepPoint], variants: dict) -> tuple[dict, dict, dict]:
    """The distinct path solves of the points to solve (runs in the driver, no solving).

    Returns ``(jobs, needs, failures)``: jobs by key, in the order of the points; for each point its
    paths and their job keys; and the points whose paths could not be built, with the error.
    A path whose medium and settings equal another's (:func:`cavity.solve.solve_key`) is solved once.
    """
    from cavity.paths import build_paths
    from cavity.solve import solve_key

    jobs: dict[str, _Job] = {}
    needs: dict[SweepPoint, list[tuple[object, str]]] = {}
    failures: dict[SweepPoint, str] = {}
    every = max(1, len(todo) // 10)
    for n, p in enumerate(todo):
        if len(todo) >= 200 and n % every == 0:  # a long sweep takes a while to plan: say so
            log.info("building paths: %d of %d points", n, len(todo))
        try:
            paths = build_paths(variants[p])
        except CavityError as exc:
            failures[p] = _describe(exc)
            continue
        keyed = []
        for path in paths:
            key = solve_key(variants[p], path) or f"{p.key}-{path.label}"
            job = jobs.setdefault(key, _Job(key, variants[p], path, []))
            job.points.append(p)
            keyed.append((path, key))
        needs[p] = keyed
    return jobs, needs, failures


def _assemble(point: SweepPoint, variant: Scenario, keyed, solutions: dict, counted: set):
    """A point's result dataset from its paths' (possibly shared) solutions.

    A shared solution is put on the point's own path model (its sun, h' and beta per sample are the
    point's); its stepping time is counted once, at the first point that uses it.
    """
    from cavity.solve import to_dataset

    parts = []
    for path, key in keyed:
        sol = solutions[key]
        engine = sol.engine if key not in counted else dataclasses.replace(sol.engine, wall_time_s=0.0)
        counted.add(key)
        parts.append(dataclasses.replace(sol, path=path, engine=engine))
    return to_dataset(variant, parts)


def _run(todo, variants, results, folder, scheduler, workers, progress, solve) -> dict:
    """Fan the distinct path solves out on a cluster and assemble each point as soon as its paths are
    in; returns {point: error text}."""
    from contextlib import ExitStack

    from distributed import Client, LocalCluster, as_completed

    from cavity.solve import plan_path

    jobs, needs, failures = plan_jobs(todo, variants)
    n_paths = sum(len(v) for v in needs.values())
    solutions: dict[str, object] = {}
    errors: dict[str, str] = {}
    counted: set[str] = set()
    waiting = {p: {k for _, k in keyed} for p, keyed in needs.items()}
    users = {key: len(set(job.points)) for key, job in jobs.items()}  # points not yet settled

    def settle(job: _Job, solution, error: str | None) -> None:
        """Record one finished path solve; assemble (and keep) every point it completes."""
        if error is None:
            solutions[job.key] = solution
        else:
            errors[job.key] = error
        for p in dict.fromkeys(job.points):
            waiting[p].discard(job.key)
            if waiting[p]:
                continue
            bad = [(path, k) for path, k in needs[p] if k in errors]
            if bad:
                failures[p] = f"path {bad[0][0].label}: {errors[bad[0][1]]}"
            else:
                try:
                    ds = _assemble(p, variants[p], needs[p], solutions, counted)
                except CavityError as exc:
                    failures[p] = _describe(exc)
                else:
                    if folder is not None:
                        from cavity.results import write_result

                        # kept on disk only: a long sweep's points need not fit in memory
                        ds = write_result(ds, _part_path(folder, p), overwrite=True)
                    results[p] = ds
            for key in {k for _, k in needs[p]}:  # drop solutions no unsettled point needs
                users[key] -= 1
                if users[key] == 0:
                    solutions.pop(key, None)

    kept = {}
    if folder is not None:
        for job in jobs.values():
            solution = load_solution(folder, job.key, job.path)
            if solution is not None:
                kept[job.key] = solution
    log.info("%d path solves for %d points (%d shared with another instant%s)", len(jobs), len(todo),
             n_paths - len(jobs), f"; {len(kept)} kept from an earlier run" if kept else "")
    for key, solution in kept.items():
        settle(jobs[key], solution, None)
    to_solve = [job for job in jobs.values() if job.key not in kept]
    if not to_solve:
        return failures
    with ExitStack() as stack:
        t_start = _time.perf_counter()
        if scheduler is None:
            need = None
            try:
                need = max(int(plan_path(j.scenario, j.path).grid.memory_bytes) for j in to_solve)
            except CavityError:
                pass  # the solve itself will report the problem for its points
            n, threads = local_cluster_size(len(to_solve), need, workers)
            warm = warm_numba_cache()
            log.info("numba kernels ready in %.1f s; starting %d local workers x %d numba threads", warm, n, threads)
            cluster = stack.enter_context(
                LocalCluster(
                    n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                    # no dashboard; the scheduler's small HTTP service on a free loopback port
                    scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                    env={"NUMBA_NUM_THREADS": str(threads)}, silence_logs=logging.ERROR,
                )
            )
            client = stack.enter_context(Client(cluster))
        elif isinstance(scheduler, Client):
            client = scheduler
            warm_numba_cache()
        elif hasattr(scheduler, "scheduler_address"):  # a cluster object (LocalCluster, ...)
            warm_numba_cache()
            client = stack.enter_context(Client(scheduler))
        else:
            warm = warm_numba_cache()
            log.info("numba kernels ready in %.1f s; connecting to %s", warm, scheduler)
            try:
                client = stack.enter_context(Client(str(scheduler), timeout=CONNECT_TIMEOUT_S))
            except (OSError, TimeoutError, ValueError) as exc:
                raise SweepError(f"scheduler = {str(scheduler)!r}: cannot connect ({_one_line(exc)})") from None
        try:
            client.wait_for_workers(1, timeout=CONNECT_TIMEOUT_S)
        except (OSError, TimeoutError) as exc:
            raise SweepError(f"scheduler: no worker joined within {CONNECT_TIMEOUT_S} s ({_one_line(exc)})") from None
        log.info("cluster ready in %.1f s", _time.perf_counter() - t_start)

        tag = uuid.uuid4().hex[:8]
        futures = {}
        for job in to_solve:  # in the order of the points, so that points finish early and in turn
            fut = client.submit(solve, job.scenario, job.path, key=f"cavity-sweep-{tag}-{job.key[:20]}",
                                retries=RETRIES, pure=False)
            futures[fut] = job
        done = 0
        try:
            for fut in as_completed(list(futures)):
                job = futures[fut]
                done += 1
                solution, error = None, None
                try:
                    solution = fut.result()
                except Exception as exc:  # the solve raised twice, or its worker died too often
                    error = _describe(exc)
                fut.release()
                if solution is not None and folder is not None:
                    save_solution(folder, job.key, solution)
                settle(job, solution, error)
                shared = len(set(job.points))
                text = (f"{job.path.label} at {job.points[0].name} {'FAILED' if error else 'solved'}"
                        + (f" (for {shared} points)" if shared > 1 else ""))
                log.debug("%s (%d/%d path solves)", text, done, len(to_solve))
                if progress is not None:
                    progress(done / len(to_solve), text)
        except BaseException:
            for fut in futures:
                fut.cancel()
            raise
    return failures


def _one_line(exc: BaseException) -> str:
    text = str(exc).strip() or exc.__class__.__name__
    return text.splitlines()[0]


def _describe(exc: BaseException | None) -> str:
    if exc is None:
        return "unknown error"
    return f"{exc.__class__.__name__}: {_one_line(exc)}"


# --------------------------------------------------------------------------------------------------
# Combining the points
# --------------------------------------------------------------------------------------------------


def _common_range(by_frequency: dict[int, np.ndarray]) -> tuple[np.ndarray, bool]:
    """The range axis of the combined dataset and whether any frequency had another one.

    Points at one frequency share their grid (the range cell follows the frequency and the
    scenario, not the ionosphere). When frequencies differ in grid, the coarsest axis is kept.
    """
    axes = list(by_frequency.values())
    first = axes[0]
    if all(a.shape == first.shape and np.array_equal(a, first) for a in axes):
        return first, False
    spacing = [float(np.median(np.diff(a))) if a.size > 1 else 0.0 for a in axes]
    return axes[int(np.argmax(spacing))], True


def _on_range(ds, r: np.ndarray):
    """``ds`` with its range-resolved variables on the range axis ``r``.

    Sampled linearly in dB amplitude and in unwrapped phase (the tool's rule for fields between
    grid points, as at receivers); NaN outside the point's own axis.
    """
    if ds.sizes["range"] == r.size and np.array_equal(ds["range"].values, r):
        return ds
    out = ds.interp(range=r, method="linear", kwargs={"fill_value": np.nan})
    out["range"].attrs = ds["range"].attrs
    return out


def _point_dataset(value):
    """A point's result dataset: held in memory, or read from its part file."""
    if isinstance(value, Path):
        from cavity.results import open_result

        return open_result(value)
    return value


def _range_of(value) -> np.ndarray:
    """The range axis (km) of a point held in memory or in its part file (read alone)."""
    if isinstance(value, Path):
        import xarray as xr

        with xr.open_dataset(value, engine="netcdf4") as handle:
            return handle["range"].values.copy()
    return value["range"].values


def _sweepable(ds):
    """``ds`` without the variables on dimensions a sweep does not combine."""
    return ds.drop_vars([n for n, v in ds.variables.items() if not set(v.dims) <= _SWEPT_DIMS])


def combine(scenario: Scenario, times, freqs, points, results: dict, variants: dict | None = None) -> xr.Dataset:
    """Combine the points' result datasets into one sweep dataset (NaN for missing points).

    Parameters
    ----------
    scenario : Scenario
        The base scenario (title and ``scenario`` attribute).
    times : list of datetime or None
        The instants (None: no time axis).
    freqs : list of float
        Frequencies, Hz, increasing.
    points : list of SweepPoint
    results : dict SweepPoint -> xarray.Dataset or pathlib.Path
        Each point's result dataset (one frequency), or the part file that holds it (read when
        needed, one point at a time).
    variants : dict SweepPoint -> Scenario, optional
        Unused except for the record of which instants and frequencies were run.
    """
    import xarray as xr

    done = [p for p in points if p in results]
    by_f: dict[int, np.ndarray] = {}
    for p in done:  # points at one frequency share their grid: one range axis read per frequency
        if p.frequency_index not in by_f:
            by_f[p.frequency_index] = _range_of(results[p])
    r, regridded = _common_range(by_f)
    ref_f = next(fi for fi, a in by_f.items() if a.shape == r.shape and np.array_equal(a, r))
    first_point = min(done, key=lambda p: (p.frequency_index != ref_f, p.time_index, p.frequency_index))
    template = _on_range(_sweepable(_point_dataset(results[first_point])), r)

    n_t = len(times) if times is not None else 1
    freq_vars = [n for n, v in template.data_vars.items() if "frequency" in v.dims]
    time_vars = [n for n, v in template.data_vars.items()
                 if "frequency" not in v.dims and "range" in v.dims and n not in _TIME_INVARIANT]
    fixed_vars = [n for n in template.data_vars if n not in freq_vars and n not in time_vars]

    # Preallocated arrays filled one point at a time: a point kept as a part file is read, copied in
    # and let go, so memory is that of the combined arrays, not of all the points at once.
    stacked = {}
    for name in freq_vars + time_vars:
        v = template[name]
        if v.dtype.kind != "f":
            raise SweepError(f"variable {name} ({v.dtype}) varies between points and cannot be combined")
        shape = tuple(len(freqs) if d == "frequency" else v.sizes[d] for d in v.dims)
        stacked[name] = (v.dims, np.full((n_t,) + shape, np.nan))
    attrs = {}
    from_ref = set()  # instants whose medium came from the reference frequency's point
    for p in done:
        ti, fi = p.time_index, p.frequency_index
        point_ds = _on_range(_sweepable(_point_dataset(results[p])), r)
        attrs[p] = dict(point_ds.attrs)
        for name in freq_vars:
            dims, arr = stacked[name]
            at = tuple(fi if d == "frequency" else slice(None) for d in dims)
            arr[(ti,) + at] = point_ds[name].isel(frequency=0).values
        if ti not in from_ref:  # the medium along range: the reference frequency's grid wins
            for name in time_vars:
                stacked[name][1][ti] = point_ds[name].values
            if fi == ref_f:
                from_ref.add(ti)
        del point_ds
    freq_coord = xr.DataArray(np.asarray(freqs, float) / 1e3, dims="frequency", attrs=template["frequency"].attrs)
    ds = xr.Dataset({n: template[n] for n in fixed_vars})
    for name, (dims, arr) in stacked.items():
        if times is not None:
            ds[name] = xr.Variable(("time",) + dims, arr, template[name].attrs)
        else:
            ds[name] = xr.Variable(dims, arr[0], template[name].attrs)
    ds = ds.assign_coords(frequency=freq_coord, range=("range", r, template["range"].attrs))
    for name in ("path", "altitude"):
        ds = ds.assign_coords({name: template[name]})
    ds = ds[list(template.data_vars)]

    # per-point record of the solver
    shape = (n_t, len(freqs))
    record = {k: np.full(shape, np.nan) for k in ("wall_time", "time_steps", "cells", "cell_r", "cell_z", "time_step")}
    notes, converged, fit = [], True, 0.0
    for p in done:
        a = attrs[p]
        key = (p.time_index, p.frequency_index)
        record["wall_time"][key] = a.get("solver_wall_time_s", np.nan)
        record["time_steps"][key] = a.get("solver_time_steps", np.nan)
        record["cells"][key] = a.get("solver_cells", np.nan)
        record["cell_r"][key] = a.get("solver_cell_r_m", np.nan)
        record["cell_z"][key] = a.get("solver_cell_z_m", np.nan)
        record["time_step"][key] = a.get("solver_time_step_s", np.nan)
        converged &= a.get("solver_converged", "yes") == "yes"
        if a.get("solver_notes"):
            notes.append(f"{p.name}: {a['solver_notes']}")
        fit = max(fit, float(a.get("solver_impedance_fit_error", 0.0)))
    meta = {
        "wall_time": ("s", "seconds the solver spent stepping for this point, all paths (a path solve "
                               "shared by several points counts at the first of them)"),
        "time_steps": ("1", "time steps taken for this point (per path)"),
        "cells": ("1", "grid cells per path for this point"),
        "cell_r": ("m", "grid cell along range for this point"),
        "cell_z": ("m", "grid cell along altitude for this point"),
        "time_step": ("s", "solver time step for this point"),
    }
    dims = ("time", "frequency") if times is not None else ("frequency",)
    for k, (units, long_name) in meta.items():
        values = record[k] if times is not None else record[k][0]
        ds[f"point_solver_{k}"] = (dims, values, {"units": units, "long_name": long_name})

    if times is not None:
        # CF 2.4: dimensions other than T, Z, Y, X sit left of them, so time goes just before altitude
        for name, v in ds.data_vars.items():
            if "time" in v.dims:
                order = [d for d in v.dims if d not in ("time", "altitude")] + ["time"]
                ds[name] = v.transpose(*order, *(["altitude"] if "altitude" in v.dims else []))
        stamps = np.array([np.datetime64(t.astimezone(timezone.utc).replace(tzinfo=None), "ns") for t in times])
        ds = ds.assign_coords(time=("time", stamps, {
            "standard_name": "time", "axis": "T",
            "long_name": "UTC instant that sets the sun's position along the paths",
        }))
    missing = [p.name for p in points if p not in results]

    def finite(values, fn, default):
        v = values[np.isfinite(values)]
        return fn(v) if v.size else default

    base_text = scenario.text or scenario.to_toml()
    t_text = (
        f"{_utc_text(times[0])} to {_utc_text(times[-1])}, {len(times)} instants"
        + (f" every {int((times[1] - times[0]).total_seconds())} s" if len(times) > 1 and _regular(times) else "")
        if times is not None else "no time axis"
    )
    first = attrs[done[0]]
    ds.attrs = {
        "title": scenario.title,
        "Conventions": "CF-1.10",
        "history": f"{_now()} cavity {__version__}: swept {scenario.path or 'a scenario given as text'} over {len(points)} points",
        "source": f"cavity {__version__}",
        "scenario": base_text,
        "cautions": first.get("cautions", ""),
        "references": first.get("references", ""),
        "solver_cells": int(finite(record["cells"], np.max, 0)),
        "solver_time_steps": int(finite(record["time_steps"], np.max, 0)),
        "solver_cell_r_m": float(finite(record["cell_r"], np.min, np.nan)),
        "solver_cell_z_m": float(finite(record["cell_z"], np.min, np.nan)),
        "solver_time_step_s": float(finite(record["time_step"], np.min, np.nan)),
        "solver_wall_time_s": float(finite(record["wall_time"], np.sum, 0.0)),
        "solver_converged": "yes" if converged else "no",
        "solver_impedance_fit_error": fit,
        "sweep_description": (
            "each point is the scenario above with ionosphere utc = time (when there is a time axis) "
            "and transmitter frequency_khz = frequency, solved on its own; the solver_* attributes "
            "give the largest cells and steps, the smallest cells and time step, and the summed "
            "stepping time of all points (per point in point_solver_*)"
        ),
        "sweep_times": t_text,
        "sweep_points": len(points),
    }
    if notes:
        ds.attrs["solver_notes"] = "; ".join(notes)
    if regridded:
        ds.attrs["sweep_range_note"] = (
            "frequencies were solved on different range grids; fields along range are sampled on the "
            "coarsest one, linearly in dB and in unwrapped phase (receiver values are unaffected)"
        )
    if missing:
        ds.attrs["sweep_missing_points"] = "; ".join(missing)
    return ds


def _regular(times) -> bool:
    gaps = {(b - a) for a, b in zip(times[:-1], times[1:])}
    return len(gaps) == 1


def _now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


# --------------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------------


def encode_time(ds: xr.Dataset) -> xr.Dataset:
    """A copy whose ``time`` coordinate holds whole seconds since 1970-01-01 UTC with CF units.

    Readers that decode CF times (xarray, :func:`cavity.open_result`) get datetime64 back.
    """
    if "time" not in ds.coords or ds["time"].dtype.kind != "M":
        return ds
    t = ds["time"]
    seconds = (t.values.astype("datetime64[s]").astype(np.int64))
    attrs = {k: v for k, v in t.attrs.items() if k not in ("units", "calendar")}
    attrs.update(units=TIME_UNITS, calendar=TIME_CALENDAR)
    out = ds.assign_coords(time=("time", seconds, attrs))
    out["time"].encoding = {}
    return out


def write_sweep(ds: xr.Dataset, path, *, overwrite: bool = False) -> Path:
    """Write a sweep dataset atomically (:func:`cavity.results.write_result`) with CF time encoding."""
    from cavity.results import write_result

    return write_result(encode_time(ds), path, overwrite=overwrite)


# ``import cavity.sweep`` rebinds the package attribute ``cavity.sweep`` from the function defined in
# cavity/__init__.py to this module; making the module callable keeps ``cavity.sweep(...)`` working.
class _CallableModule(types.ModuleType):
    def __call__(self, *args, **kwargs):
        return sweep(*args, **kwargs)


sys.modules[__name__].__class__ = _CallableModule
