"""Speed measurements: memory bandwidth, a minimal compiled stencil and the full engine, side by side.

``cavity bench`` runs them on one grid in one process so the ratio engine/minimal says how close the
engine comes to what this machine can do; ``--whole`` adds the 3,000 km day-path run with its
accuracy against the independent normal-mode reference, its wall time and peak memory.
"""

from __future__ import annotations

import math
import resource
import time
from dataclasses import dataclass

import numpy as np

from cavity.constants import C0, EPS0, MU0


@dataclass(frozen=True)
class Rates:
    """Measured throughputs on one grid."""

    nr: int
    nz: int
    copy_gb_per_s: float
    minimal_cells_per_s: float
    engine_cells_per_s: float
    threads: int

    @property
    def ratio(self) -> float:
        return self.engine_cells_per_s / self.minimal_cells_per_s


def memory_bandwidth_gb_per_s(n_bytes: int = 256 * 1024**2, repeats: int = 5) -> float:
    """Copy bandwidth of numpy (read + write bytes per second), best of ``repeats``."""
    a = np.ones(n_bytes // 8)
    b = np.empty_like(a)
    best = math.inf
    for _ in range(repeats):
        t = time.perf_counter()
        np.copyto(b, a)
        best = min(best, time.perf_counter() - t)
    return 2 * n_bytes / best / 1e9


def _day_simulation(max_range_m: float, frequency_hz: float):
    import profiles
    from cavity.fdtd import engine as eng

    z = np.arange(0.0, 200e3, 250.0)
    medium = eng.Medium.uniform(
        5.0, 70.0, z, profiles.electron_density(z, 71.8, 0.335), profiles.collision_frequency(z)
    )
    return eng.Simulation(medium, eng.Settings(frequencies_hz=(frequency_hz,), max_range_m=max_range_m))


def measure_rates(max_range_m: float = 3000e3, frequency_hz: float = 20e3, steps: int = 300) -> Rates:
    """Cell updates per second of the minimal stencil and of the full engine on one grid.

    The grid is that of a day path of ``max_range_m`` at ``frequency_hz`` (default: the 3,000 km,
    20 kHz path of the whole-run benchmark): rates depend on the grid's size through the processor
    caches, so the grid measured is the grid predicted.
    """
    import numba

    from cavity.fdtd import kernels as K

    sim = _day_simulation(max_range_m, frequency_hz)
    p = sim.plan
    nr, nz = p.nr, p.nz
    f32 = np.float32
    ez = np.zeros((nr, nz), f32)
    er = np.zeros((nr, nz + 1), f32)
    hp = np.zeros((nr, nz), f32)
    z = (np.arange(nz) + 0.5) * p.dz_m
    sigma = 1e-6 * np.exp((z - 90e3) / 5e3)  # a conductivity that varies with altitude only
    x = sigma * p.dt_s / (2 * EPS0)
    ca = ((1 - x) / (1 + x)).astype(f32)
    cb = (p.dt_s / EPS0 / (1 + x)).astype(f32)
    args_h = (hp, ez, er, f32(1 / p.dr_m), f32(1 / p.dz_m), f32(p.dt_s / MU0))
    rp, rm = sim.stencil.er_coef[:, 1].copy(), (-sim.stencil.er_coef[:, 2]).copy()  # the two central weights
    args_e = (ez, er, hp, rp, rm, f32(1 / p.dz_m), ca, cb)
    K.minimal_h(*args_h)
    K.minimal_e(*args_e)
    t = time.perf_counter()
    for _ in range(steps):
        K.minimal_h(*args_h)
        K.minimal_e(*args_e)
    minimal = nr * nz * steps / (time.perf_counter() - t)
    # the engine: same grid, plasma, absorbers, impedance ground, DFTs. Fields start as small random
    # values everywhere, as in the middle of a real run (zeros ahead of a wave step faster).
    sim.t_min = sim.t_max = 20 * p.dt_s
    sim.run()  # compile / load from cache
    rng = np.random.default_rng(0)
    for field in (sim.ez, sim.er, sim.hp):
        field[...] = (1e-3 * rng.standard_normal(field.shape)).astype(np.float32)
    sim.er[:, 0] = sim.er[:, -1] = 0.0
    sim.t_min = sim.t_max = steps * p.dt_s
    sim.track_front = False  # the rate of stepping the whole grid (runs skip columns ahead of the wave)
    res = sim.run()
    engine = nr * nz * res.steps / res.wall_time_s
    return Rates(nr, nz, memory_bandwidth_gb_per_s(), minimal, engine, numba.get_num_threads())


#: Full-engine rates measured by ``cavity bench`` on the development machine (2 cores, idle, two
#: threads), cell updates per second: the range ``cavity inspect`` uses for its run-time estimate.
REFERENCE_ENGINE_RATES = (0.5e9, 0.7e9)
#: What that reference machine is, for the estimate's label.
REFERENCE_MACHINE = "a 2-core machine like the development one, idle"


#: Cost of a run with the geomagnetic field in isotropic cell updates of its own (finer) grid: on the
#: 3,000 km night path at 20 kHz (dip 60, eastward; 265 m cells, 1/(6 beta)) the run took 214.2 and
#: 241.7 s of processor time for 30.5 G expected updates, against 26.4 and 25.5 s for 9.6 G isotropic
#: (``cavity bench --field --whole``, idle 2-core machine, two threads, interleaved): 2.77 times per
#: update, the vector current and three more components, and 24,650 steps against 18,285 planned.
MAGNETISED_COST_FACTOR = 2.8


def estimate_seconds(grids, rates=REFERENCE_ENGINE_RATES) -> tuple[float, float]:
    """Run time of the solves of ``grids`` (GridPlans) from the cost model, fastest and slowest rate, s."""
    updates = sum(g.expected_cell_updates * (MAGNETISED_COST_FACTOR if g.magnetised else 1.0) for g in grids)
    return updates / max(rates), updates / min(rates)


def predict_wall_time_s(
    rate_cells_per_s: float,
    max_range_km: float,
    frequency_khz: float,
    cell_m: float | None = None,
    top_km: float = 120.0,
) -> tuple[float, object]:
    """Predicted stepping time of a run from a measured engine rate (and its grid plan).

    The run's cell updates are those the engine is expected to make
    (:attr:`cavity.fdtd.grid.GridPlan.expected_cell_updates`: columns ahead of the wave are skipped,
    and the usual steps to convergence are added).
    """
    from cavity.fdtd import engine as eng

    z = np.arange(0.0, 200e3, 250.0)
    import profiles

    medium = eng.Medium.uniform(
        5.0, 70.0, z, profiles.electron_density(z, 71.8, 0.335), profiles.collision_frequency(z)
    )
    plan = eng.make_plan(
        medium,
        eng.Settings(
            frequencies_hz=(frequency_khz * 1e3,),
            max_range_m=max_range_km * 1e3,
            top_m=top_km * 1e3,
            dr_m=cell_m,
            dz_m=cell_m,
        ),
    )
    return plan.grid.expected_cell_updates / rate_cells_per_s, plan.grid


def peak_memory_bytes() -> int:
    """Peak resident memory of this process (Linux ru_maxrss is in kB)."""
    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss) * 1024


def whole_run(max_range_m: float = 3000e3, frequency_hz: float = 20e3, cells_per_wavelength: float | None = None):
    """The 3,000 km day path at 20 kHz over sea with the default grid, against the mode reference.

    Returns a dict: wall time of the solve (compile from cache included), steps, cells, peak memory
    and the error in dB against :func:`cavity.checks.verify.mode_reference` at 500, 1,000, 2,000, 3,000 km.
    """
    from cavity.checks import verify
    from cavity.fdtd import grid as gridmod

    kw = {}
    if cells_per_wavelength:
        kw["cells_per_wavelength"] = cells_per_wavelength
    t = time.perf_counter()
    res = verify.ionosphere_run(frequency_hz, 71.8, 0.335, 5.0, 70.0, max_range_m + 30e3, **kw)
    wall = time.perf_counter() - t
    at = np.array([500e3, 1000e3, 2000e3, 3000e3])
    at = at[at <= max_range_m]
    idx = [int(np.argmin(np.abs(res.range_m - r))) for r in at]
    ref = verify.mode_reference(frequency_hz, 71.8, 0.335, 5.0, 70.0, res.range_m[idx])
    err = 20 * np.log10(np.abs(res.ez[0][idx] / ref))
    phase = np.degrees(np.angle(res.ez[0][idx] / ref))
    return {
        "wall_s": wall,
        "stepping_s": res.wall_time_s,
        "steps": res.steps,
        "cells": res.plan.cells,
        "dr_m": res.plan.dr_m,
        "dz_m": res.plan.dz_m,
        "cells_per_wavelength": C0 / frequency_hz / res.plan.dr_m,
        "rate_cells_per_s": res.plan.cells * res.steps / res.wall_time_s,
        "peak_memory_bytes": peak_memory_bytes(),
        "ranges_km": (at / 1e3).tolist(),
        "error_db": err.tolist(),
        "phase_error_deg": phase.tolist(),
        "default_cells_per_wavelength": gridmod.DEFAULT_CELLS_PER_WAVELENGTH,
    }


#: The geomagnetic field of the speed comparison: 50,000 nT, dip 60 deg, travel toward magnetic east
#: (path frame r, phi, z; tesla).
BENCH_FIELD_T = (0.0, 50e-6 * math.cos(math.radians(60.0)), -50e-6 * math.sin(math.radians(60.0)))


def _night_medium(magnetised: bool):
    import profiles
    from cavity.fdtd import engine as eng

    z = np.arange(0.0, 200e3, 250.0)
    return eng.Medium.uniform(
        5.0,
        70.0,
        z,
        profiles.electron_density(z, 85.1, 0.63),
        profiles.collision_frequency(z),
        magnetic_field_t=BENCH_FIELD_T if magnetised else None,
    )


def field_rates(max_range_m: float = 3000e3, frequency_hz: float = 20e3, steps: int = 200, repeats: int = 2):
    """Whole-grid stepping rates of the isotropic and the magnetised engine on one night-path grid.

    Measured interleaved (isotropic, magnetised, isotropic, ...) so that a shared machine's load
    falls on both alike; returns ``{"isotropic": [...], "magnetised": [...]}`` in cell updates per
    second of wall time, one entry per repeat, the same per second of processor time (all threads;
    ``"isotropic_cpu"``, ``"magnetised_cpu"``: steadier than wall time on a loaded machine) and the
    grid size.
    """
    from cavity.fdtd import engine as eng

    out: dict[str, list[float]] = {"isotropic": [], "magnetised": []}
    sims = {}
    for key in out:
        sim = eng.Simulation(
            _night_medium(key == "magnetised"), eng.Settings(frequencies_hz=(frequency_hz,), max_range_m=max_range_m)
        )
        sim.t_min = sim.t_max = 20 * sim.plan.dt_s
        sim.run()  # compile / load from cache
        rng = np.random.default_rng(0)
        names = ("ez", "er", "hp") + (("ephi", "hr", "hz") if key == "magnetised" else ())
        for name in names:
            field = getattr(sim, name)
            field[...] = (1e-3 * rng.standard_normal(field.shape)).astype(np.float32)
        sim.er[:, 0] = sim.er[:, -1] = 0.0
        if key == "magnetised":
            sim.ephi[:, 0] = sim.ephi[:, -1] = sim.ephi[0] = 0.0
            sim.hz[:, 0] = sim.hz[:, -1] = 0.0
        sim.t_min = sim.t_max = steps * sim.plan.dt_s
        sim.track_front = False
        sims[key] = sim
    cpu: dict[str, list[float]] = {"isotropic_cpu": [], "magnetised_cpu": []}
    for _ in range(repeats):
        for key, sim in sims.items():
            c = time.process_time()
            res = sim.run()
            c = time.process_time() - c
            out[key].append(sim.plan.nr * sim.plan.nz * res.steps / res.wall_time_s)
            cpu[key + "_cpu"].append(sim.plan.nr * sim.plan.nz * res.steps / c)
    p = sims["isotropic"].plan
    return {**out, **cpu, "nr": p.nr, "nz": p.nz}


def night_run(magnetised: bool, max_range_m: float = 3000e3, frequency_hz: float = 20e3) -> dict:
    """The 3,000 km night path over sea at 20 kHz with the default grid, with or without the field.

    Returns wall and processor time (all threads), stepping time, steps, whether the DFTs converged
    and the peak memory of this process (run each case in its own process to read its own peak).
    """
    from cavity.fdtd import engine as eng

    t = time.perf_counter()
    c = time.process_time()
    res = eng.run(
        _night_medium(magnetised), eng.Settings(frequencies_hz=(frequency_hz,), max_range_m=max_range_m + 30e3)
    )
    wall = time.perf_counter() - t
    c = time.process_time() - c
    i = int(np.argmin(np.abs(res.range_m - max_range_m)))
    return {
        "wall_s": wall,
        "cpu_s": c,
        "stepping_s": res.wall_time_s,
        "steps": res.steps,
        "cells": res.plan.cells,
        "converged": res.converged,
        "peak_memory_bytes": peak_memory_bytes(),
        "ez_db_at_end": float(20 * np.log10(abs(res.ez[0, i]))),
    }


def night_runs_interleaved(repeats: int = 1) -> list[tuple[str, dict]]:
    """:func:`night_run` isotropic then magnetised, ``repeats`` times, each in a fresh process."""
    import json
    import subprocess
    import sys

    out = []
    for _ in range(repeats):
        for magnetised in (False, True):
            code = f"import json; from cavity.checks import bench; print(json.dumps(bench.night_run({magnetised})))"
            done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
            out.append(("magnetised" if magnetised else "isotropic", json.loads(done.stdout.strip().splitlines()[-1])))
    return out


def field_time_ratios(runs: list[tuple[str, dict]]) -> dict[str, float]:
    """Magnetised over isotropic means of wall time, processor time and steps of :func:`night_runs_interleaved`."""

    def mean(name: str, key: str) -> float:
        return float(np.mean([w[key] for n, w in runs if n == name]))

    return {
        key: mean("magnetised", field) / mean("isotropic", field)
        for key, field in (("wall", "wall_s"), ("cpu", "cpu_s"), ("steps", "steps"))
    }
