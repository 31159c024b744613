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
import time as _time
import uuid
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from cavity.errors import CavityError
from cavity.sweeps.cluster import check_combine_memory, local_cluster_size, solve_path, warm_numba_cache
from cavity.sweeps.combine import combine
from cavity.sweeps.points import SweepError, SweepPoint, describe_error, one_line, point_scenario, sweep_points
from cavity.sweeps.store import kept_parts, load_solution, part_path, save_solution

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: Automatic retries of a point whose solve raised (a dead worker is handled by dask separately).
RETRIES = 1
#: How long to wait for an existing scheduler to answer.
CONNECT_TIMEOUT_S = 20


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
    folder, finished = kept_parts(parts_dir, points, variants)
    results: dict[SweepPoint, object] = dict(finished)
    todo = [p for p in points if p not in results]
    log.info(
        "sweep: %d points (%s x %s); %d already solved%s, %d to solve",
        len(points),
        f"{len(times)} instants" if times is not None else "no time axis",
        f"{len(freqs)} frequencies" if len(freqs) > 1 else "1 frequency",
        len(results),
        f" in {folder}" if folder is not None else "",
        len(todo),
    )
    failures: dict[SweepPoint, str] = {}
    if todo:
        check_combine_memory(times, freqs, points, variants)
        failures = run_points(todo, variants, results, folder, scheduler, workers, progress, solve or solve_path)
    if failures:
        lines = [(p.name, failures[p]) for p in points if p in failures]
        for name, message in lines:
            log.error("point %s failed: %s", name, message)
        if not allow_missing:
            kept = (
                f"; the {len(results)} finished points are kept in {folder}" if folder is not None and results else ""
            )
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
            failures[p] = describe_error(exc)
            continue
        keyed: list[tuple[Any, str]] = []
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


def run_points(todo, variants, results, folder, scheduler, workers, progress, solve) -> dict:
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
                    failures[p] = describe_error(exc)
                else:
                    if folder is not None:
                        from cavity.results import write_result

                        # kept on disk only: a long sweep's points need not fit in memory
                        ds = write_result(ds, part_path(folder, p), overwrite=True)
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
    log.info(
        "%d path solves for %d points (%d shared with another instant%s)",
        len(jobs),
        len(todo),
        n_paths - len(jobs),
        f"; {len(kept)} kept from an earlier run" if kept else "",
    )
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
                    n_workers=n,
                    threads_per_worker=1,
                    processes=True,
                    dashboard_address=None,
                    # no dashboard; the scheduler's small HTTP service on a free loopback port
                    scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                    env={"NUMBA_NUM_THREADS": str(threads)},
                    silence_logs=logging.ERROR,
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
                raise SweepError(f"scheduler = {str(scheduler)!r}: cannot connect ({one_line(exc)})") from None
        try:
            client.wait_for_workers(1, timeout=CONNECT_TIMEOUT_S)
        except (OSError, TimeoutError) as exc:
            raise SweepError(f"scheduler: no worker joined within {CONNECT_TIMEOUT_S} s ({one_line(exc)})") from None
        log.info("cluster ready in %.1f s", _time.perf_counter() - t_start)

        tag = uuid.uuid4().hex[:8]
        futures = {}
        for job in to_solve:  # in the order of the points, so that points finish early and in turn
            fut = client.submit(
                solve, job.scenario, job.path, key=f"cavity-sweep-{tag}-{job.key[:20]}", retries=RETRIES, pure=False
            )
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
                    error = describe_error(exc)
                fut.release()
                if solution is not None and folder is not None:
                    save_solution(folder, job.key, solution)
                settle(job, solution, error)
                shared = len(set(job.points))
                text = f"{job.path.label} at {job.points[0].name} {'FAILED' if error else 'solved'}" + (
                    f" (for {shared} points)" if shared > 1 else ""
                )
                log.debug("%s (%d/%d path solves)", text, done, len(to_solve))
                if progress is not None:
                    progress(done / len(to_solve), text)
        except BaseException:
            for fut in futures:
                fut.cancel()
            raise
    return failures
