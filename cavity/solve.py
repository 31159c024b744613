"""Scenario -> paths -> one time-domain solve per path -> result dataset.

The orchestration a notebook and the CLI share: :func:`simulate` turns a validated scenario into the
:class:`xarray.Dataset` of the result-file contract (conventions.md). Calibration: the engine returns
fields per unit current moment; they are scaled here by the RMS moment of a short monopole that
radiates the transmitter's power over perfect ground (physics.md 6), then corrected from flat to
spherical spreading when earth curvature is on (physics.md 7).
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass

import numpy as np

from cavity.constants import MU0
from cavity.fdtd import engine as eng
from cavity.fdtd import media
from cavity.fdtd.source import moment_for_power

log = logging.getLogger(__name__)

#: Altitude sampling of the profile handed to the engine (the engine interpolates onto its grid).
PROFILE_STEP_M = 250.0
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
    b_radial: np.ndarray | None = None  # (nf, nrange) complex T RMS, magnetised runs only
    ephi: np.ndarray | None = None  # (nf, nrange) complex V/m RMS
    receiver_b_radial: np.ndarray | None = None
    receiver_ephi: np.ndarray | None = None


def engine_settings(scenario, path, *, waveform=None) -> eng.Settings:
    """Solver settings for one path of a scenario (cells, top, absorber, probes)."""
    sv = scenario.solver
    probes = tuple(path.receiver_ranges_m) if sv.receiver_time_series else ()
    return eng.Settings(
        frequencies_hz=tuple(scenario.transmitter.frequencies_hz),
        max_range_m=float(path.max_range_m),
        top_m=float(scenario.planned_top_m()),
        dr_m=sv.cell_m,
        dz_m=sv.cell_m,
        cells_per_wavelength=sv.cells_per_wavelength,
        earth_curvature=sv.earth_curvature,
        pml_cells=sv.pml_cells,
        waveform=waveform,
        probe_ranges_m=probes,
        record_time_series=bool(probes),
    )


def path_medium(scenario, path) -> eng.Medium:
    """The engine's medium for one path: ground per sample and the ionosphere profile per sample."""
    import profiles
    from profiles.exponential import ALTITUDE_RANGE_M

    ion = scenario.ionosphere
    top = scenario.planned_top_m()
    z = np.arange(0.0, top + 40e3 + PROFILE_STEP_M, PROFILE_STEP_M)
    z = z[z <= ALTITUDE_RANGE_M[1]]  # profiles end at 500 km; the engine holds the top value above
    ne = nu = None
    if path.hprime_km is not None:
        ne = profiles.electron_density(z[None, :], path.hprime_km[:, None], path.beta_per_km[:, None])
        nu = np.broadcast_to(profiles.collision_frequency(z)[None, :], ne.shape).copy()
    elif ion.form == "file":
        ds = profiles.read_profile(ion.profile_path)
        ne1, nu1 = profiles.sample_profile(ds, z)
        ne = np.broadcast_to(np.asarray(ne1, float)[None, :], (path.n_samples, z.size)).copy()
        nu = np.broadcast_to(np.asarray(nu1, float)[None, :], (path.n_samples, z.size)).copy()
    field = getattr(path, "geomagnetic", None)
    b0 = None
    if field is not None and ne is not None:
        b0 = np.stack([field.b_r_nt, field.b_phi_nt, field.b_z_nt], axis=1) * 1e-9
    return eng.Medium(
        range_m=np.asarray(path.range_m, float),
        ground_conductivity=np.asarray(path.ground_conductivity_s_per_m, float),
        ground_permittivity=np.asarray(path.ground_relative_permittivity, float),
        altitude_m=z if ne is not None else None,
        electron_density=ne,
        collision_frequency=nu,
        ceiling_m=ion.ceiling_m if ion.form == "ceiling" else None,
        magnetic_field_t=b0,
    )


def _is_lightning(scenario) -> bool:
    source = getattr(scenario, "source", None)
    return source is not None and source.kind == "lightning"


def plan_path(scenario, path, *, waveform=None) -> eng.RunPlan:
    """The solve a path would need (grid, time step, steps, memory), without allocating it."""
    if _is_lightning(scenario) and waveform is None:
        from cavity.sferic import plan_path as lightning_plan

        return lightning_plan(scenario, path)
    return eng.make_plan(path_medium(scenario, path), engine_settings(scenario, path, waveform=waveform))


def solve_path(scenario, path, *, progress=None, waveform=None) -> PathSolution:
    """Run the engine on one path and calibrate its output to the transmitter's power."""
    medium = path_medium(scenario, path)
    settings = engine_settings(scenario, path, waveform=waveform)
    sim = eng.Simulation(medium, settings)
    log.info(
        "path %s: %d x %d cells (dr %.0f m, dz %.0f m), dt %.3g s, >= %d steps, ~%.2f GB",
        path.label, sim.plan.nr, sim.plan.nz, sim.plan.dr_m, sim.plan.dz_m, sim.plan.dt_s,
        sim.plan.n_steps, sim.plan.memory_bytes / 1e9,
    )
    res = sim.run(progress)
    f = res.frequencies_hz
    moment = np.array([moment_for_power(scenario.transmitter.radiated_power_w, fk) for fk in f])
    scale = moment[:, None]
    if settings.earth_curvature:
        scale = scale * media.spherical_spreading_correction(res.range_m)[None, :]
    ez = res.ez * scale
    b = MU0 * res.hphi * scale
    rx_r = np.asarray(path.receiver_ranges_m, float)
    rx_ez = np.stack([interpolate_phasor(res.range_m, ez[k], rx_r) for k in range(f.size)], axis=1)
    rx_b = np.stack([interpolate_phasor(res.range_m, b[k], rx_r) for k in range(f.size)], axis=1)
    ne_out = nu_out = None
    if medium.electron_density is not None:
        z_out = RESULT_ALTITUDE_KM * 1e3
        ne_out = np.stack([np.interp(z_out, medium.altitude_m, row) for row in medium.electron_density])
        nu_out = np.stack([np.interp(z_out, medium.altitude_m, row) for row in medium.collision_frequency])
    sol = PathSolution(path, res.range_m, ez, b, rx_ez, rx_b, res, sim.impedance_fit_error, ne_out, nu_out)
    if res.hr is not None:
        sol.b_radial = MU0 * res.hr * scale
        sol.ephi = res.ephi * scale
        sol.receiver_b_radial = np.stack([interpolate_phasor(res.range_m, sol.b_radial[k], rx_r) for k in range(f.size)], axis=1)
        sol.receiver_ephi = np.stack([interpolate_phasor(res.range_m, sol.ephi[k], rx_r) for k in range(f.size)], axis=1)
    return sol


def solve_key(scenario, path, *, waveform=None) -> str | None:
    """A digest of everything one path's solve depends on; equal digests give identical solutions.

    It covers the engine's medium (ground and ionosphere per sample) and settings, the radiated power
    and the receivers' ranges, so instants of a diurnal sweep at which a path lies wholly in day (or
    wholly in night) share one solve. None when the solve cannot be keyed (a custom waveform).
    """
    import hashlib

    if waveform is not None or _is_lightning(scenario):
        return None
    medium = path_medium(scenario, path)
    settings = engine_settings(scenario, path)
    digest = hashlib.sha256()
    for name in ("range_m", "ground_conductivity", "ground_permittivity", "altitude_m", "electron_density",
                 "collision_frequency", "magnetic_field_t"):
        value = getattr(medium, name)
        digest.update(name.encode())
        if value is not None:
            value = np.ascontiguousarray(value, dtype=float)
            digest.update(repr(value.shape).encode() + value.tobytes())
    digest.update(repr((medium.ceiling_m, settings, float(scenario.transmitter.radiated_power_w),
                        tuple(float(x) for x in path.receiver_ranges_m))).encode())
    return digest.hexdigest()


def path_progress(progress, paths) -> list:
    """One progress callback per path, mapping its own 0..1 onto its share (by range) of the whole."""
    weights = np.array([p.max_range_m for p in paths], float)
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


def simulate(scenario, *, progress=None, sample_km: float = 10.0, bearing_tolerance_deg: float = 1.0,
             waveform=None):
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
    xarray.Dataset following the result-file contract (conventions.md), not yet written. A scenario
    whose ``[source]`` is a lightning stroke is solved by :func:`cavity.sferic.simulate_sferic`.
    """
    if _is_lightning(scenario):
        from cavity.sferic import simulate_sferic

        return simulate_sferic(scenario, progress=progress, sample_km=sample_km,
                               bearing_tolerance_deg=bearing_tolerance_deg)
    from cavity.paths import build_paths

    paths = build_paths(scenario, sample_km=sample_km, bearing_tolerance_deg=bearing_tolerance_deg)
    solutions = []
    t0 = time.perf_counter()
    for path, sub in zip(paths, path_progress(progress, paths)):
        solutions.append(solve_path(scenario, path, progress=sub, waveform=waveform))
    wall = sum(s.engine.wall_time_s for s in solutions)
    log.info("all paths solved in %.1f s (stepping %.1f s)", time.perf_counter() - t0, wall)
    return to_dataset(scenario, solutions)


def geomagnetic_attributes(scenario) -> dict:
    """Global attributes naming the geomagnetic model, its epoch and reference altitude."""
    gm = getattr(scenario, "geomagnetic", None)
    if gm is None or gm.model == "none":
        return {"geomagnetic_model": "none (isotropic ionosphere)"}
    if gm.model == "uniform":
        return {"geomagnetic_model": (f"uniform: {gm.strength_nt:g} nT, dip {gm.dip_deg:g} deg (positive downward), "
                                      f"azimuth of travel {gm.azimuth_deg:g} deg from magnetic north")}
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
        receiver_longitude_deg=[math.nan if rx.longitude_deg is None else rx.longitude_deg for rx in scenario.receivers],
        path_bearing_deg=None if any(x is None for x in bearings) else bearings,
        ground_relative_permittivity=extra["ground_relative_permittivity"],
        solar_zenith_angle_deg=extra.get("solar_zenith_deg"),
        hprime_km=extra.get("hprime_km"),
        beta_per_km=extra.get("beta_per_km"),
        geomagnetic_attributes=gm_attrs,
        **magnetised,
        **series,
    )
    notes = [f"{s.path.label}: {n}" for s in solutions for n in s.engine.notes]
    ds.attrs["solver_converged"] = "yes" if all(s.engine.converged for s in solutions) else "no"
    if notes:
        ds.attrs["solver_notes"] = "; ".join(notes)
    ds.attrs["solver_impedance_fit_error"] = float(max(s.engine_fit_error for s in solutions))
    return ds
