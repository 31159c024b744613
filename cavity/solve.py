"""Scenario -> paths -> one time-domain solve per path -> result dataset.

The orchestration a notebook and the CLI share: :func:`simulate` turns a validated scenario into the
:class:`xarray.Dataset` of the result-file contract (README, "Result file reference"). Calibration: the engine returns
fields per unit current moment; they are scaled here by the RMS moment of a short monopole that
radiates the transmitter's power over perfect ground (docs/physics.md 6), then corrected from flat to
spherical spreading when earth curvature is on (docs/physics.md 7).
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from cavity.constants import MU0
from cavity.fdtd import engine as eng
from cavity.fdtd import media
from cavity.fdtd.source import moment_for_power
from cavity.medium import PROFILE_STEP_M, path_medium  # noqa: F401  (PROFILE_STEP_M: public here too)

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: Altitudes recorded in the result file, km (the D region and a margin).
RESULT_ALTITUDE_KM = np.arange(40.0, 120.0 + 1e-9, 1.0)


@dataclass
class PathSolution:
    """One path's calibrated phasors (RMS) and what went into them."""

    path: object  # cavity.paths.PathModel
    range_m: np.ndarray
    ez: np.ndarray  # (nf, nrange) complex V/m RMS, phase relative to the transmitter current
    b: np.ndarray  # (nf, nrange) complex T RMS
    receiver_ez: np.ndarray  # (nrx_on_path, nf)
    receiver_b: np.ndarray
    engine: eng.EngineResult
    engine_fit_error: float  # worst relative error of the recursive ground impedance in band
    electron_density: np.ndarray | None  # (nsample, nalt) on RESULT_ALTITUDE_KM
    collision_frequency: np.ndarray | None
    raw: eng.EngineResult | None = None  # a lightning run's engine result with the probe time series
    ez_uncertainty_db: np.ndarray | None = None  # (nf, nrange) dB, cavity.uncertainty; None: not computed
    receiver_ez_uncertainty_db: np.ndarray | None = None  # (nrx_on_path, nf) dB
    b_radial: np.ndarray | None = None  # (nf, nrange) complex T RMS, magnetised runs only
    ephi: np.ndarray | None = None  # (nf, nrange) complex V/m RMS
    receiver_b_radial: np.ndarray | None = None
    receiver_ephi: np.ndarray | None = None
    extrapolated: bool = False  # the field is Richardson-extrapolated from the solve and its companion
    # the companion kept the solve's vertical cell (the whistler rule set it, with the plasma never
    # held: Settings.whistler_cap_index inf): +- is the range cell's alone
    range_only_companion: bool = False


@dataclass(frozen=True)
class Excitation:
    """How the transmitter's place is driven, decided once per run by :func:`excitation`.

    ``waveform`` is the engine's source waveform (None: tone bursts at the carriers); ``stroke`` is
    set for a lightning ``[source]`` (then ``waveform`` is the stroke too) and makes each path's run a
    fixed record whose time series become the sferic variables (:mod:`cavity.sferic`).
    """

    waveform: Any = None  # a callable of time (cavity.fdtd.source) or None
    stroke: Any = None  # cavity.fdtd.lightning.HeidlerStroke or None


def excitation(scenario, waveform=None) -> Excitation:
    """The scenario's excitation: the one place where a lightning ``[source]`` is told from carriers."""
    source = getattr(scenario, "source", None)
    if source is not None and source.kind == "lightning" and waveform is None:
        from cavity.sferic import stroke_for

        stroke = stroke_for(source)
        return Excitation(waveform=stroke, stroke=stroke)
    return Excitation(waveform=waveform)


def engine_settings(scenario, path, *, waveform=None, drive: Excitation | None = None) -> eng.Settings:
    """Solver settings for one path of a scenario (cells, top, absorber, probes; a lightning run's record)."""
    drive = drive if drive is not None else excitation(scenario, waveform)
    sv = scenario.solver
    common = dict(
        frequencies_hz=tuple(scenario.transmitter.frequencies_hz),
        max_range_m=float(path.max_range_m),
        top_m=float(scenario.planned_top_m()),
        dz_m=sv.cell_m,
        cells_per_wavelength=sv.cells_per_wavelength,
        earth_curvature=sv.earth_curvature,
        pml_cells=sv.pml_cells,
        waveform=drive.waveform,
    )
    if drive.stroke is not None:
        from cavity.sferic import record_settings

        return eng.Settings(
            **common, probe_ranges_m=tuple(float(r) for r in path.receiver_ranges_m), **record_settings(scenario)
        )
    probes = tuple(path.receiver_ranges_m) if sv.receiver_time_series else ()
    return eng.Settings(**common, dr_m=sv.cell_m, probe_ranges_m=probes, record_time_series=bool(probes))


def plan_path(scenario, path, *, waveform=None) -> eng.RunPlan:
    """The solve a path would need (grid, time step, steps, memory), without allocating it."""
    return eng.make_plan(path_medium(scenario, path), engine_settings(scenario, path, waveform=waveform))


def solve_path(scenario, path, *, progress=None, waveform=None, drive: Excitation | None = None) -> PathSolution:
    """Run the engine on one path and calibrate its output to the transmitter's power.

    For a lightning run (``drive.stroke``) the solution's ``engine`` holds no time series (the
    carrier assembly gets none) and ``raw`` holds the engine's full result with the probe series.

    For a carrier with ``solver.uncertainty`` (the default) a companion solve on a grid
    :data:`cavity.uncertainty.COMPANION_CELL_RATIO` times coarser gives the numerical uncertainty
    of the field along the path and at its receivers (:mod:`cavity.uncertainty`).
    """
    from cavity import uncertainty as unc

    drive = drive if drive is not None else excitation(scenario, waveform)
    medium = path_medium(scenario, path)
    settings = engine_settings(scenario, path, drive=drive)
    want_uncertainty = (
        bool(getattr(scenario.solver, "uncertainty", False)) and drive.stroke is None and waveform is None
    )
    sim = eng.Simulation(medium, settings)
    coarse = None
    main_share = 1.0
    if want_uncertainty:
        coarse = unc.companion_settings(medium, settings, sim.plan)
        # progress shares from the engine's cost model, so that the time left counts the companion
        main_cost = sim.plan.expected_cell_updates
        main_share = main_cost / (main_cost + eng.make_plan(medium, coarse).grid.expected_cell_updates)
    main_progress = progress
    if progress is not None and coarse is not None:

        def main_progress(fraction, text=""):
            progress(main_share * fraction, text)

    if drive.stroke is None:
        log.info(
            "path %s: %d x %d cells (dr %.0f m, dz %.0f m), dt %.3g s, >= %d steps, ~%.2f GB",
            path.label,
            sim.plan.nr,
            sim.plan.nz,
            sim.plan.dr_m,
            sim.plan.dz_m,
            sim.plan.dt_s,
            sim.plan.n_steps,
            sim.plan.memory_bytes / 1e9,
        )
    else:
        log.info(
            "path %s: %d x %d cells (dr %.0f m, dz %.0f m), dt %.3g s, %d steps (%.1f ms record), ~%.2f GB",
            path.label,
            sim.plan.nr,
            sim.plan.nz,
            sim.plan.dr_m,
            sim.plan.dz_m,
            sim.plan.dt_s,
            int(math.ceil(sim.t_max / sim.plan.dt_s)),
            sim.t_max * 1e3,
            sim.plan.memory_bytes / 1e9,
        )
    res = sim.run(main_progress)
    fit_error = sim.impedance_fit_error
    plan = sim.plan
    del sim  # the companion solve reuses the memory
    companion = None
    if coarse is not None:
        sub = (
            None
            if progress is None
            else (
                lambda fraction, text="": progress(main_share + (1.0 - main_share) * fraction, f"uncertainty: {text}")
            )
        )
        companion = eng.run(medium, coarse, sub)
        res.wall_time_s += companion.wall_time_s
    raw = None
    if drive.stroke is not None:
        res.notes = []  # the record has a fixed length; completeness is judged from the tail (cavity.sferic)
        raw = res
        # the waveforms are the sferic's (a lightning moment, not a carrier's): the carrier assembly gets none
        res = dataclasses.replace(
            res, time_s=None, ez_series=None, hphi_series=None, source_current=None, source_moment=None
        )
    f = res.frequencies_hz
    moment = np.array([moment_for_power(scenario.transmitter.radiated_power_w, fk) for fk in f])
    scale = moment[:, None]
    if settings.earth_curvature:
        scale = scale * media.spherical_spreading_correction(res.range_m)[None, :]
    rx_r = np.asarray(path.receiver_ranges_m, float)
    ez_unc = rx_unc = None
    extrapolated = range_only_companion = False
    if companion is not None:
        range_only_companion = coarse is not None and coarse.dz_m == plan.dz_m
        # both transfer functions per unit moment, flat: the calibration cancels in the dB difference
        ez_unc = unc.grid_convergence_index_db(res.range_m, res.ez, companion.range_m, companion.ez)
        rx_unc = np.stack([np.interp(rx_r, res.range_m, ez_unc[k]) for k in range(f.size)], axis=1)
        if unc.extrapolation_applies(medium, plan, coarse):
            # a second-order scheme's field, Richardson-extrapolated (cavity.uncertainty)
            res = unc.extrapolated_result(res, companion)
            extrapolated = True
    ez = res.ez * scale
    b = MU0 * res.hphi * scale
    rx_ez = np.stack([interpolate_phasor(res.range_m, ez[k], rx_r) for k in range(f.size)], axis=1)
    rx_b = np.stack([interpolate_phasor(res.range_m, b[k], rx_r) for k in range(f.size)], axis=1)
    ne_out = nu_out = None
    if medium.electron_density is not None:
        assert medium.altitude_m is not None and medium.collision_frequency is not None  # set together
        z_out = RESULT_ALTITUDE_KM * 1e3
        ne_out = np.stack([np.interp(z_out, medium.altitude_m, row) for row in medium.electron_density])
        nu_out = np.stack([np.interp(z_out, medium.altitude_m, row) for row in medium.collision_frequency])
    sol = PathSolution(
        path,
        res.range_m,
        ez,
        b,
        rx_ez,
        rx_b,
        res,
        fit_error,
        ne_out,
        nu_out,
        raw,
        ez_unc,
        rx_unc,
        extrapolated=extrapolated,
        range_only_companion=range_only_companion,
    )
    if res.hr is not None:
        sol.b_radial = MU0 * res.hr * scale
        sol.ephi = res.ephi * scale
        sol.receiver_b_radial = np.stack(
            [interpolate_phasor(res.range_m, sol.b_radial[k], rx_r) for k in range(f.size)], axis=1
        )
        sol.receiver_ephi = np.stack(
            [interpolate_phasor(res.range_m, sol.ephi[k], rx_r) for k in range(f.size)], axis=1
        )
    return sol


def solve_key(scenario, path, *, waveform=None) -> str | None:
    """A digest of everything one path's solve depends on; equal digests give identical solutions.

    It covers the engine's medium (ground and ionosphere per sample) and settings, the radiated power
    and the receivers' ranges, so instants of a diurnal sweep at which a path lies wholly in day (or
    wholly in night) share one solve. None when the solve cannot be keyed (a custom waveform).
    """
    import hashlib

    if excitation(scenario, waveform).waveform is not None:
        return None
    medium = path_medium(scenario, path)
    settings = engine_settings(scenario, path)
    digest = hashlib.sha256()
    for name in (
        "range_m",
        "ground_conductivity",
        "ground_permittivity",
        "altitude_m",
        "electron_density",
        "collision_frequency",
        "magnetic_field_t",
    ):
        value = getattr(medium, name)
        digest.update(name.encode())
        if value is not None:
            value = np.ascontiguousarray(value, dtype=float)
            digest.update(repr(value.shape).encode() + value.tobytes())
    digest.update(
        repr(
            (
                medium.ceiling_m,
                settings,
                bool(getattr(scenario.solver, "uncertainty", False)),
                float(scenario.transmitter.radiated_power_w),
                tuple(float(x) for x in path.receiver_ranges_m),
            )
        ).encode()
    )
    return digest.hexdigest()


def path_progress(progress, paths) -> list:
    """One progress callback per path, mapping its own 0..1 onto its share of the whole.

    A path's share is its cost: columns x steps, both in proportion to its range (same cell and
    frequency), so range squared.
    """
    weights = np.array([p.max_range_m for p in paths], float) ** 2
    weights = weights / weights.sum()
    starts = np.concatenate([[0.0], np.cumsum(weights)[:-1]])

    def make(start, weight, label):
        def update(fraction, text=""):
            if progress is not None:
                progress(start + weight * fraction, f"{label}: {text}")

        return update

    return [make(float(a), float(w), p.label) for a, w, p in zip(starts, weights, paths)]


def interpolate_phasor(range_m, values, at_m):
    """Complex field at arbitrary ranges: linear in dB amplitude and in unwrapped phase."""
    amp = np.log(np.maximum(np.abs(values), 1e-300))
    phase = np.unwrap(np.angle(values))
    a = np.interp(at_m, range_m, amp)
    p = np.interp(at_m, range_m, phase)
    return np.exp(a + 1j * p)


def simulate(
    scenario: Scenario,
    *,
    progress: Callable[[float, str], None] | None = None,
    sample_km: float = 10.0,
    bearing_tolerance_deg: float = 1.0,
    waveform: Callable[..., Any] | None = None,
) -> xr.Dataset:
    """Run the waveguide solver for every path of a scenario and return the result dataset.

    Parameters
    ----------
    scenario : cavity.scenario.Scenario
    progress : callable(fraction, text), optional
        Called as the solves advance (fraction of all paths).
    sample_km, bearing_tolerance_deg : passed to :func:`cavity.paths.build_paths`.
    waveform : callable, optional
        Source current waveform (default: tone bursts at the carriers); see :mod:`cavity.fdtd.source`.

    Returns
    -------
    xarray.Dataset following the result-file contract (README, "Result file reference"), not yet written. A scenario
    whose ``[source]`` is a lightning stroke is run as a fixed record and its dataset also holds the
    sferic's waveforms, spectra and cutoffs at the receivers (:func:`cavity.sferic.sferic_variables`).
    """
    from cavity.paths import build_paths

    drive = excitation(scenario, waveform)
    if drive.stroke is not None:
        log.info("%s", drive.stroke.describe())
    paths = build_paths(scenario, sample_km=sample_km, bearing_tolerance_deg=bearing_tolerance_deg)
    solutions = []
    t0 = time.perf_counter()
    for path, sub in zip(paths, path_progress(progress, paths)):
        solutions.append(solve_path(scenario, path, progress=sub, drive=drive))
    wall = sum(s.engine.wall_time_s for s in solutions)
    log.info("all paths solved in %.1f s (stepping %.1f s)", time.perf_counter() - t0, wall)
    ds = to_dataset(scenario, solutions)
    if drive.stroke is None:
        return ds
    from cavity.results import apply_metadata
    from cavity.sferic import sferic_variables

    ds = sferic_variables(
        ds,
        scenario,
        drive.stroke,
        solutions,
        [s.raw for s in solutions],
        earth_curvature=scenario.solver.earth_curvature,
    )
    return apply_metadata(ds)


def simulate_sferic(
    scenario: Scenario,
    *,
    progress: Callable[[float, str], None] | None = None,
    sample_km: float = 10.0,
    bearing_tolerance_deg: float = 1.0,
) -> xr.Dataset:
    """Run a lightning scenario (:func:`simulate`), refusing a scenario without a lightning ``[source]``.

    Raises
    ------
    ScenarioError
        The scenario has no lightning source.
    """
    from cavity.errors import ScenarioError

    if excitation(scenario).stroke is None:
        raise ScenarioError('the scenario has no [source] with kind = "lightning"; use cavity run for a carrier')
    return simulate(scenario, progress=progress, sample_km=sample_km, bearing_tolerance_deg=bearing_tolerance_deg)


def geomagnetic_attributes(scenario) -> dict:
    """Global attributes naming the geomagnetic model, its epoch and reference altitude."""
    gm = getattr(scenario, "geomagnetic", None)
    if gm is None or gm.model == "none":
        return {"geomagnetic_model": "none (isotropic ionosphere)"}
    if gm.model == "uniform":
        return {
            "geomagnetic_model": (
                f"uniform: {gm.strength_nt:g} nT, dip {gm.dip_deg:g} deg (positive downward), "
                f"azimuth of travel {gm.azimuth_deg:g} deg from magnetic north"
            )
        }
    return {
        "geomagnetic_model": "IGRF-14 (IAGA International Geomagnetic Reference Field, ppigrf)",
        "geomagnetic_epoch": f"{gm.epoch.isoformat()} ({'default epoch' if gm.epoch_source == 'default' else 'from ' + gm.epoch_source})",
        "geomagnetic_altitude_km": float(gm.altitude_km),
    }


def _series_scale(scenario, sol) -> float:
    """Factor from the engine's source current (peak 1 A class) to the transmitter's moment.

    The waveform as run is the engine's; receiver time series are scaled so that the carrier's
    current moment equals the transmitter's RMS moment at the lowest frequency (sqrt 2 for peak).
    """
    f0 = float(sol.engine.frequencies_hz.min())
    return math.sqrt(2.0) * moment_for_power(scenario.transmitter.radiated_power_w, f0) / sol.engine.plan.dz_m


def to_dataset(scenario, solutions):
    """Put path solutions on one range axis (the longest path's) and build the result dataset.

    Fields of shorter paths are NaN beyond their own range; media along them hold their last value.
    """
    from cavity import uncertainty as unc
    from cavity.results import SolverRecord, assemble_dataset

    longest = max(solutions, key=lambda s: s.range_m[-1])
    r = longest.range_m
    nf = longest.ez.shape[0]
    P, R = len(solutions), r.size
    ez = np.full((P, nf, R), np.nan + 0j)
    b = np.full((P, nf, R), np.nan + 0j)
    z_out = RESULT_ALTITUDE_KM * 1e3
    ne = np.zeros((P, R, z_out.size))
    nu = np.zeros((P, R, z_out.size))
    sigma = np.zeros((P, R))
    extra = {"ground_relative_permittivity": np.zeros((P, R))}
    optional = ("solar_zenith_deg", "hprime_km", "beta_per_km")
    for name in optional:
        if all(getattr(s.path, name) is not None for s in solutions):
            extra[name] = np.zeros((P, R))
    n_rx = len(scenario.receivers)
    rx_ez = np.zeros((n_rx, nf), complex)
    rx_b = np.zeros((n_rx, nf), complex)
    rx_path = np.zeros(n_rx, int)
    rx_range = np.zeros(n_rx)
    rx_unc = np.full((n_rx, nf), np.nan)
    for p, sol in enumerate(solutions):
        n = sol.range_m.size
        ez[p, :, :n] = sol.ez
        b[p, :, :n] = sol.b
        samples = np.asarray(sol.path.range_m, float)
        # sample index valid at each output range (ground: piecewise constant from each sample on)
        idx = np.clip(np.searchsorted(samples, r, side="right") - 1, 0, samples.size - 1)
        sigma[p] = np.asarray(sol.path.ground_conductivity_s_per_m, float)[idx]
        extra["ground_relative_permittivity"][p] = np.asarray(sol.path.ground_relative_permittivity, float)[idx]
        for name in optional:
            if name in extra:
                extra[name][p] = np.interp(r, samples, np.asarray(getattr(sol.path, name), float))
        if sol.electron_density is not None:
            for k in range(z_out.size):
                ne[p, :, k] = np.interp(r, samples, sol.electron_density[:, k])
                nu[p, :, k] = np.interp(r, samples, sol.collision_frequency[:, k])
        for j, i_rx in enumerate(sol.path.receiver_indices):
            rx_ez[i_rx] = sol.receiver_ez[j]
            rx_b[i_rx] = sol.receiver_b[j]
            if sol.receiver_ez_uncertainty_db is not None:
                rx_unc[i_rx] = sol.receiver_ez_uncertainty_db[j]
            rx_path[i_rx] = p
            rx_range[i_rx] = sol.path.receiver_ranges_m[j]
    magnetised = {}
    if all(s.b_radial is not None for s in solutions):
        extra_fields = {k: np.full((P, nf, R), np.nan + 0j) for k in ("b_radial_t", "ephi_v_per_m")}
        extra_rx = {k: np.zeros((n_rx, nf), complex) for k in ("receiver_b_radial_t", "receiver_ephi_v_per_m")}
        for p, sol in enumerate(solutions):
            n = sol.range_m.size
            extra_fields["b_radial_t"][p, :, :n] = sol.b_radial
            extra_fields["ephi_v_per_m"][p, :, :n] = sol.ephi
            for j, i_rx in enumerate(sol.path.receiver_indices):
                extra_rx["receiver_b_radial_t"][i_rx] = sol.receiver_b_radial[j]
                extra_rx["receiver_ephi_v_per_m"][i_rx] = sol.receiver_ephi[j]
        magnetised = {**extra_fields, **extra_rx}
    gm_attrs = geomagnetic_attributes(scenario)
    if all(getattr(s.path, "geomagnetic", None) is not None for s in solutions):
        field = np.zeros((P, R, 3))
        for p, sol in enumerate(solutions):
            samples = np.asarray(sol.path.range_m, float)
            g = sol.path.geomagnetic
            for c, comp in enumerate((g.b_r_nt, g.b_phi_nt, g.b_z_nt)):
                field[p, :, c] = np.interp(r, samples, comp)
        magnetised["geomagnetic_field_nt"] = field
    series = {}
    if all(s.engine.time_s is not None for s in solutions):
        # receiver waveforms (probes sit at the receivers, in path order), padded to the longest run
        t = max((s.engine.time_s for s in solutions), key=len)
        wave = np.full((n_rx, t.size), np.nan)
        for sol in solutions:
            scale_t = _series_scale(scenario, sol)
            for j, i_rx in enumerate(sol.path.receiver_indices):
                wave[i_rx, : sol.engine.time_s.size] = sol.engine.ez_series[:, j] * scale_t
        series = {"time_s": t, "receiver_ez_time_series_v_per_m": wave}
    geometry = scenario.receiver_geometry()
    record = SolverRecord(
        cells=int(max(s.engine.plan.cells for s in solutions)),
        time_steps=int(max(s.engine.steps for s in solutions)),
        cell_r_m=float(longest.engine.plan.dr_m),
        cell_z_m=float(longest.engine.plan.dz_m),
        time_step_s=float(longest.engine.plan.dt_s),
        wall_time_s=float(sum(s.engine.wall_time_s for s in solutions)),
    )
    bearings = [s.path.bearing_deg for s in solutions]
    ds = assemble_dataset(
        scenario,
        range_m=r,
        frequency_hz=longest.engine.frequencies_hz,
        altitude_m=z_out,
        path_labels=[s.path.label for s in solutions],
        ez_v_per_m=ez,
        b_t=b,
        receiver_names=[rx.name for rx in scenario.receivers],
        receiver_range_m=rx_range,
        receiver_ez_v_per_m=rx_ez,
        receiver_b_t=rx_b,
        electron_density_m3=ne,
        collision_frequency_s=nu,
        ground_conductivity_s_per_m=sigma,
        solver=record,
        receiver_path=rx_path,
        receiver_bearing_deg=[math.nan if g.bearing_deg is None else g.bearing_deg for g in geometry],
        receiver_latitude_deg=[math.nan if rx.latitude_deg is None else rx.latitude_deg for rx in scenario.receivers],
        receiver_longitude_deg=[
            math.nan if rx.longitude_deg is None else rx.longitude_deg for rx in scenario.receivers
        ],
        path_bearing_deg=None if any(x is None for x in bearings) else bearings,
        ground_relative_permittivity=extra["ground_relative_permittivity"],
        solar_zenith_angle_deg=extra.get("solar_zenith_deg"),
        hprime_km=extra.get("hprime_km"),
        beta_per_km=extra.get("beta_per_km"),
        geomagnetic_attributes=gm_attrs,
        **magnetised,
        receiver_ez_uncertainty_db=rx_unc,
        **series,
    )
    notes = [f"{s.path.label}: {n}" for s in solutions for n in s.engine.notes]
    ds.attrs["solver_converged"] = "yes" if all(s.engine.converged for s in solutions) else "no"
    if notes:
        ds.attrs["solver_notes"] = "; ".join(notes)
    ds.attrs["solver_impedance_fit_error"] = float(max(s.engine_fit_error for s in solutions))
    extrapolated = [s.path.label for s in solutions if s.extrapolated]
    ds.attrs["solver_extrapolation"] = (
        f"{unc.EXTRAPOLATION_METHOD} on paths: " + ", ".join(extrapolated) if extrapolated else "none"
    )
    range_only = [s.path.label for s in solutions if s.range_only_companion]
    ds.attrs["solver_range_only_companion"] = ", ".join(range_only) if range_only else "none"
    return ds
