"""Checks of the time-domain solver against references outside it (docs/physics.md 9).

Each check runs the engine on a small, purpose-built waveguide and compares with a closed form or
with the independent frequency-domain solutions of :mod:`cavity.reference`. ``cavity verify`` runs
the quick set (about two minutes on two cores); ``cavity verify --full`` adds the long-range
comparisons. The test suite runs the same functions.
"""

from __future__ import annotations

import functools
import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from cavity.constants import C0, MU0
from cavity.fdtd import engine as eng
from cavity.fdtd import grid as gridmod

#: Frequency of most checks, Hz (the middle of the VLF navigation band).
F_CHECK = 20e3


@dataclass(frozen=True)
class CheckResult:
    """One line of the verification table."""

    name: str
    source: str
    expected: str
    obtained: str
    tolerance: str
    passed: bool
    seconds: float
    detail: str = ""


def _db(x):
    return 20.0 * np.log10(np.abs(x))


def _at(range_m, values, at_m):
    """Values at the grid ranges nearest to ``at_m``."""
    idx = np.array([int(np.argmin(np.abs(range_m - r))) for r in np.atleast_1d(at_m)])
    return values[..., idx]


def _free_space_run(f_hz, max_range_m, top_m, cell_m, conductivity=math.inf, permittivity=1.0):
    medium = eng.Medium.uniform(conductivity, permittivity)
    settings = eng.Settings(
        frequencies_hz=(f_hz,), max_range_m=max_range_m, top_m=top_m, dr_m=cell_m, dz_m=cell_m, earth_curvature=False
    )
    return eng.run(medium, settings)


def _deep_null_mask(range_m, ref, window_m=100e3, depth_db=10.0, guard_m=30e3):
    """True where a range lies farther than ``guard_m`` from every deep null of |ref|.

    A deep null is a local minimum more than ``depth_db`` below the largest |ref| within
    +-``window_m`` (the local envelope).
    """
    from scipy.ndimage import maximum_filter1d

    amp = np.abs(ref)
    step = float(np.median(np.diff(range_m)))
    env = maximum_filter1d(amp, size=max(3, int(2 * window_m / step)))
    is_min = np.r_[False, (amp[1:-1] < amp[:-2]) & (amp[1:-1] < amp[2:]), False]
    deep = is_min & (_db(amp) < _db(env) - depth_db)
    keep = np.ones(range_m.size, bool)
    for r0 in range_m[deep]:
        keep &= np.abs(range_m - r0) > guard_m
    return keep


# ----------------------------------------------------------------------------------------- checks
def check_calibration() -> CheckResult:
    """1 kW over perfect ground, no ionosphere: 300 mV/m at 1 km scaled as 1/d (ITU-R P.368)."""
    from cavity.fdtd.source import moment_for_power
    from cavity.reference.dipole import ground_level_field

    t0 = time.perf_counter()
    res = _free_space_run(F_CHECK, 160e3, 250e3, 500.0)
    m = moment_for_power(1e3, F_CHECK)
    far = np.array([75e3, 100e3, 150e3])
    e = np.abs(_at(res.range_m, res.ez[0], far)) * m
    err_far = _db(e / (0.3 * 1e3 / far))
    near = np.array([5e3, 10e3, 20e3, 40e3])
    e_near = _at(res.range_m, res.ez[0], near) * m
    err_near = _db(
        e_near / ground_level_field(res.range_m[[int(np.argmin(abs(res.range_m - r))) for r in near]], F_CHECK, m)
    )
    worst = float(np.max(np.abs(np.r_[err_far, err_near])))
    return CheckResult(
        "calibration 1 kW",
        "ITU-R P.368 (300 V cymomotive force); near field docs/physics.md 6",
        "300 mV/m x 1 km/d (75-150 km); exact dipole 5-40 km",
        f"worst {worst:.3f} dB",
        "0.2 dB",
        worst <= 0.2,
        time.perf_counter() - t0,
        detail=f"far {np.round(err_far, 3).tolist()} dB, near {np.round(err_near, 3).tolist()} dB",
    )


def _plates_check(max_range_m, f_hz=10e3, h=70e3, cell=500.0, min_range_m=50e3):
    from cavity.reference.plates import parallel_plate_field

    res = eng.run(
        eng.Medium.uniform(ceiling_m=h),
        eng.Settings(frequencies_hz=(f_hz,), max_range_m=max_range_m, dr_m=cell, dz_m=cell, earth_curvature=False),
    )
    r = res.range_m
    ref = parallel_plate_field(r, f_hz, h, 1.0)
    sel = (r >= min_range_m) & (r <= max_range_m) & _deep_null_mask(r, ref)
    err = _db(res.ez[0][sel] / ref[sel])
    return float(np.max(np.abs(err))), res


def check_plates(max_range_m=600e3) -> CheckResult:
    """Perfectly conducting plates, h = 70 km, 10 kHz: the exact mode sum (Wait 1960)."""
    t0 = time.perf_counter()
    worst, _ = _plates_check(max_range_m)
    return CheckResult(
        f"PEC plates to {max_range_m / 1e3:.0f} km",
        "Wait 1960, J. Res. NBS 64D(2) 153 (mode sum)",
        "mode sum, 50 km on (deep nulls +-30 km excluded)",
        f"worst {worst:.2f} dB",
        "0.5 dB",
        worst <= 0.5,
        time.perf_counter() - t0,
    )


def check_plate_guide(f_hz, h_m, max_range_m, tolerance_db) -> CheckResult:
    """A conducting plate guide with several modes on the default grid, 100 km on (Wait 1960)."""
    t0 = time.perf_counter()
    worst, res = _plates_check(max_range_m, f_hz, h_m, cell=None, min_range_m=100e3)
    n_modes = int(2 * h_m * f_hz / C0) + 1
    return CheckResult(
        f"plates h={h_m / 1e3:g} km {f_hz / 1e3:g} kHz to {max_range_m / 1e3:.0f} km",
        "Wait 1960, J. Res. NBS 64D(2) 153 (mode sum)",
        f"mode sum ({n_modes} propagating modes), 100 km on, default grid",
        f"worst {worst:.2f} dB",
        f"{tolerance_db} dB",
        worst <= tolerance_db,
        time.perf_counter() - t0,
    )


def check_two_mode_beat() -> CheckResult:
    """PEC guide h = 70 km at 3 kHz: TEM and TM1 beat, nulls every 2 pi/(k0 - k1) = 333.5 km."""
    from cavity.reference.plates import two_mode_beat_distance_m

    t0 = time.perf_counter()
    h, f = 70e3, 3e3
    res = eng.run(
        eng.Medium.uniform(ceiling_m=h),
        eng.Settings(frequencies_hz=(f,), max_range_m=1500e3, dr_m=1000.0, dz_m=1000.0, earth_curvature=False),
    )
    r = res.range_m
    amp = np.abs(res.ez[0]) * np.sqrt(r)  # remove cylindrical spreading
    sel = r > 150e3
    rs, a = r[sel], amp[sel]
    minima = np.nonzero((a[1:-1] < a[:-2]) & (a[1:-1] < a[2:]))[0] + 1
    # parabolic refinement of each minimum
    pos = []
    for i in minima:
        y0, y1, y2 = a[i - 1], a[i], a[i + 1]
        d = (y0 - y2) / (2 * (y0 - 2 * y1 + y2))
        pos.append(rs[i] + d * (rs[1] - rs[0]))
    spacing = float(np.mean(np.diff(pos))) if len(pos) > 1 else float("nan")
    want = two_mode_beat_distance_m(f, h)
    err = abs(spacing / want - 1)
    return CheckResult(
        "two-mode beat",
        "Wait 1960 mode sum; docs/physics.md 9.5",
        f"{want / 1e3:.1f} km",
        f"{spacing / 1e3:.1f} km ({len(pos)} nulls)",
        "2 %",
        err <= 0.02,
        time.perf_counter() - t0,
    )


def check_absorbers() -> CheckResult:
    """Far-end and top CPML: fields near them differ from a three-times larger domain by < -40 dB."""
    t0 = time.perf_counter()
    f, cell = F_CHECK, 750.0
    # far end: the day guide over sea, where the modes that carry the field meet the layer at
    # near-normal incidence (in a lossless guide, modes at cutoff graze the layer and return)
    small = ionosphere_run(f, 71.8, 0.335, 5.0, 70.0, 300e3, dr_m=cell, dz_m=500.0, earth_curvature=False)
    big = ionosphere_run(f, 71.8, 0.335, 5.0, 70.0, 900e3, dr_m=cell, dz_m=500.0, earth_curvature=False)
    n = small.range_m.size
    sel = (small.range_m > 100e3) & (small.range_m < 290e3)
    far = float(np.max(_db((small.ez[0][:n] - big.ez[0][:n])[sel] / big.ez[0][:n][sel])))
    # top: free space above perfect ground
    small = _free_space_run(f, 150e3, 100e3, cell)
    big = _free_space_run(f, 150e3, 300e3, cell)
    sel = (small.range_m > 20e3) & (small.range_m < 140e3)
    top = float(np.max(_db((small.ez[0] - big.ez[0])[sel] / big.ez[0][sel])))
    worst = max(far, top)
    return CheckResult(
        "absorbers (CPML)",
        "Roden and Gedney 2000; docs/physics.md 9.6",
        "below -40 dB",
        f"far end {far:.1f} dB, top {top:.1f} dB",
        "-40 dB",
        worst <= -40.0,
        time.perf_counter() - t0,
    )


def check_plasma_stability(steps: int = 100_000) -> CheckResult:
    """A dense collisional slab (omega_p dt = 30) stays bounded for 10^5 steps (Yu and Simpson 2010)."""
    t0 = time.perf_counter()
    z = np.array([0.0, 9.9e3, 10e3, 40e3])
    ne = np.array([0.0, 0.0, 1e12, 1e12])  # omega_p ~ 5.6e7 rad/s
    nu = np.full(4, 1e4)
    medium = eng.Medium.uniform(math.inf, 1.0, z, ne, nu)
    settings = eng.Settings(
        frequencies_hz=(50e3,),
        max_range_m=20e3,
        top_m=20e3,
        dr_m=500.0,
        dz_m=500.0,
        earth_curvature=False,
        pml_cells=8,
        max_duration_s=1.0,
        convergence_db=0.0,
    )
    sim = eng.Simulation(medium, settings)
    wp_dt = math.sqrt(sim.wp2_max) * sim.plan.dt_s
    # step directly: the guard inside run() raises on growth; also track the peak afterwards
    sim.t_min = sim.t_max = steps * sim.plan.dt_s
    res = sim.run()
    peak_end = float(np.max(np.abs(sim.ez)))
    ok = res.steps >= steps and math.isfinite(peak_end)
    return CheckResult(
        "plasma stability",
        "Yu and Simpson 2010, IEEE TAP 58(2) 469; docs/physics.md 9.7",
        f"bounded for {steps} steps at omega_p dt = {wp_dt:.0f}",
        f"{res.steps} steps, max |Ez| {peak_end:.2g}",
        "finite, no growth",
        ok,
        time.perf_counter() - t0,
    )


def check_ground_wave(ranges_m=(100e3, 300e3)) -> CheckResult:
    """Ground wave over very dry ground (1e-4 S/m, eps_r 3) at 20 kHz against the exact solution.

    The ratio to the perfect-ground field from the FDTD is compared with the same ratio from the
    exact Sommerfeld integral for a Leontovich plane (:func:`cavity.reference.groundwave.impedance_plane_field`);
    the flat-earth Norton attenuation function (scipy.special.wofz) agrees with it to about 0.1 dB.
    """
    from cavity.reference.dipole import surface_impedance
    from cavity.reference.groundwave import impedance_plane_field

    t0 = time.perf_counter()
    rmax = max(ranges_m)
    top = max(300e3, 0.5 * rmax)
    cell = 750.0
    finite = _free_space_run(F_CHECK, rmax + 50e3, top, cell, 1e-4, 3.0)
    perfect = _free_space_run(F_CHECK, rmax + 50e3, top, cell)
    ratio = _at(finite.range_m, finite.ez[0] / perfect.ez[0], ranges_m)
    r_exact = _at(finite.range_m, finite.range_m, ranges_m)
    zs = surface_impedance(F_CHECK, 1e-4, 3.0)
    want = impedance_plane_field(r_exact, F_CHECK, 1.0, zs) / impedance_plane_field(r_exact, F_CHECK, 1.0, 0.0)
    err = _db(ratio) - _db(want)
    worst = float(np.max(np.abs(err)))
    return CheckResult(
        f"ground wave to {rmax / 1e3:.0f} km",
        "exact Sommerfeld integral; Norton function via scipy.special.wofz",
        ", ".join(f"{x:.2f}" for x in _db(want)) + " dB",
        ", ".join(f"{x:.2f}" for x in _db(ratio)) + " dB",
        "0.3 dB",
        worst <= 0.3,
        time.perf_counter() - t0,
    )


def mode_reference(f_hz, hprime_km, beta_per_km, conductivity, permittivity, range_m, earth_curvature=True):
    """Independent frequency-domain field (per unit moment) of the same range-independent guide."""
    import profiles
    from cavity.reference import dipole, modes

    z = np.arange(0.0, 160e3 + 1.0, 50.0)
    ne = profiles.electron_density(z, hprime_km, beta_per_km)
    nu = profiles.collision_frequency(z)
    eps = modes.ionosphere_permittivity(z, ne, nu, f_hz, earth_flattening=earth_curvature)
    zs = dipole.surface_impedance(f_hz, conductivity, permittivity)
    ms = modes.solve_modes(z, eps, f_hz, surface_impedance_ohm=zs)
    return modes.ground_field(ms, range_m)


@functools.lru_cache(maxsize=8)
def _cached_ionosphere_run(f_hz, hprime_km, beta_per_km, conductivity, permittivity, max_range_m):
    return ionosphere_run(f_hz, hprime_km, beta_per_km, conductivity, permittivity, max_range_m)


def ionosphere_medium(hprime_km, beta_per_km, conductivity, permittivity, magnetic_field_t=None) -> eng.Medium:
    """A uniform Wait-Spies guide for the engine (profile on 250 m steps to 200 km)."""
    import profiles

    z = np.arange(0.0, 200e3, 250.0)
    return eng.Medium.uniform(
        conductivity,
        permittivity,
        z,
        profiles.electron_density(z, hprime_km, beta_per_km),
        profiles.collision_frequency(z),
        magnetic_field_t=magnetic_field_t,
    )


def ionosphere_run(f_hz, hprime_km, beta_per_km, conductivity, permittivity, max_range_m, magnetic_field_t=None, **kw):
    """Engine run of a uniform Wait-Spies guide (flattened earth), fields per unit moment."""
    medium = ionosphere_medium(hprime_km, beta_per_km, conductivity, permittivity, magnetic_field_t)
    return eng.run(medium, eng.Settings(frequencies_hz=(f_hz,), max_range_m=max_range_m, **kw))


def magnetised_reference(
    f_hz, hprime_km, beta_per_km, conductivity, permittivity, b_path_frame_t, max_attenuation_db_per_mm=100.0
):
    """Modes of the same uniform guide with a magnetised ionosphere (cavity.reference.magnetised).

    100 m layers above 40 km, top at 120 km (in the dense collisional plasma); modes to 100 dB/Mm,
    which are 30 dB down at 300 km.
    """
    import profiles
    from cavity.reference import magnetised as mg

    z = np.concatenate([np.arange(0.0, 40e3, 500.0), np.arange(40e3, 120e3 + 1.0, 100.0)])
    return mg.magnetised_modes(
        z,
        profiles.electron_density(z, hprime_km, beta_per_km),
        profiles.collision_frequency(z),
        b_path_frame_t,
        f_hz,
        ground=(conductivity, permittivity),
        max_attenuation_db_per_mm=max_attenuation_db_per_mm,
    )


def check_magnetised(
    label,
    f_hz,
    hprime_km,
    beta_per_km,
    conductivity,
    permittivity,
    dip_deg,
    azimuth_deg,
    max_range_m,
    tolerance_db,
    strength_t=50e-6,
    cells_per_wavelength=gridmod.DEFAULT_CELLS_PER_WAVELENGTH,
) -> CheckResult:
    """The field as the tool reports it with a uniform geomagnetic field (the solve, with its
    uncertainty companion: cavity.uncertainty.run_with_companion) against the magnetised mode
    reference, 300 km on; the solve's own error is shown beside it."""
    from cavity import uncertainty as unc
    from cavity.reference import magnetised as mg

    t0 = time.perf_counter()
    b = mg.field_from_dip_azimuth(strength_t, dip_deg, azimuth_deg)
    medium = ionosphere_medium(hprime_km, beta_per_km, conductivity, permittivity, b)
    settings = eng.Settings(
        frequencies_hz=(f_hz,), max_range_m=max_range_m + 30e3, cells_per_wavelength=cells_per_wavelength
    )
    fine, _, res = unc.run_with_companion(medium, settings)
    modes = magnetised_reference(f_hz, hprime_km, beta_per_km, conductivity, permittivity, b)
    r = res.range_m
    ref = mg.ground_field(modes, r, spherical_spreading=False).ez
    sel = (r >= 300e3) & (r <= max_range_m) & _deep_null_mask(r, ref)
    err = _db(res.ez[0][sel] / ref[sel])
    worst = float(np.max(np.abs(err)))
    solve_worst = float(np.max(np.abs(_db(fine.ez[0][sel] / ref[sel]))))
    return CheckResult(
        f"{label} {f_hz / 1e3:g} kHz to {max_range_m / 1e3:.0f} km",
        "independent magnetised mode solution (cavity.reference.magnetised; Budden 1962, Pitteway 1965)",
        f"h'={hprime_km} km, beta={beta_per_km}/km, sigma={conductivity:g} S/m, {strength_t * 1e9:.0f} nT, "
        f"dip {dip_deg:g}, azimuth {azimuth_deg:g}",
        f"worst {worst:.2f} dB (median {float(np.median(np.abs(err))):.2f}; solve alone {solve_worst:.2f}); "
        f"{modes.n_modes} modes, {modes.counted_modes} counted",
        f"{tolerance_db} dB",
        worst <= tolerance_db and modes.counted_modes == modes.found_in_count_region,
        time.perf_counter() - t0,
    )


def check_ionosphere(
    label, f_hz, hprime_km, beta_per_km, conductivity, permittivity, max_range_m, tolerance_db
) -> CheckResult:
    """FDTD against the normal-mode reference for a uniform day or night guide, 300 km on."""
    t0 = time.perf_counter()
    res = _cached_ionosphere_run(f_hz, hprime_km, beta_per_km, conductivity, permittivity, max_range_m + 30e3)
    r = res.range_m
    ref = mode_reference(f_hz, hprime_km, beta_per_km, conductivity, permittivity, r)
    sel = (r >= 300e3) & (r <= max_range_m) & _deep_null_mask(r, ref)
    err = _db(res.ez[0][sel] / ref[sel])
    worst = float(np.max(np.abs(err)))
    phase = float(np.degrees(np.angle(res.ez[0][sel][-1] / ref[sel][-1])))
    return CheckResult(
        f"{label} {f_hz / 1e3:g} kHz to {max_range_m / 1e3:.0f} km",
        "independent normal-mode solution (cavity.reference.modes)",
        f"h'={hprime_km} km, beta={beta_per_km}/km, sigma={conductivity:g} S/m",
        f"worst {worst:.2f} dB (rms {float(np.sqrt(np.mean(err**2))):.2f}); phase at end {phase:.0f} deg",
        f"{tolerance_db} dB",
        worst <= tolerance_db,
        time.perf_counter() - t0,
    )


def check_day_below_night(f_hz=20e3, conductivity=5.0, permittivity=70.0, max_range_m=3000e3) -> CheckResult:
    """Beyond 1,500 km the day field lies below the night field (common practice; docs/physics.md 9.10).

    Compared as the mean dB level over 1,500 km to the end, so single modal nulls do not decide it.
    """
    t0 = time.perf_counter()
    day = _cached_ionosphere_run(f_hz, 71.8, 0.335, conductivity, permittivity, max_range_m + 30e3)
    night = _cached_ionosphere_run(f_hz, 85.1, 0.63, conductivity, permittivity, max_range_m + 30e3)
    sel = (day.range_m >= 1500e3) & (day.range_m <= max_range_m)
    d, n = float(np.mean(_db(day.ez[0][sel]))), float(np.mean(_db(night.ez[0][sel])))
    share = float(np.mean(_db(day.ez[0][sel]) < _db(night.ez[0][sel])))
    return CheckResult(
        f"day below night {f_hz / 1e3:g} kHz",
        "common practice (docs/physics.md 9.10, from memory)",
        "night mean level above day, 1500 km on",
        f"day {d:.1f} dB, night {n:.1f} dB; day lower at {100 * share:.0f} % of ranges",
        "night > day",
        n > d,
        time.perf_counter() - t0,
    )


QUICK: list[tuple[str, Callable[[], CheckResult]]] = [
    ("calibration", check_calibration),
    ("two_mode_beat", check_two_mode_beat),
    ("plates", check_plates),
    ("absorbers", check_absorbers),
    ("plasma_stability", check_plasma_stability),
    ("ground_wave", check_ground_wave),
    ("day_sea", lambda: check_ionosphere("day over sea", F_CHECK, 71.8, 0.335, 5.0, 70.0, 1000e3, 1.0)),
]

FULL: list[tuple[str, Callable[[], CheckResult]]] = [
    ("plates_2000", lambda: check_plates(2000e3)),
    ("ground_wave_1000", lambda: check_ground_wave((100e3, 300e3, 1000e3))),
    ("day_sea_20", lambda: check_ionosphere("day over sea", 20e3, 71.8, 0.335, 5.0, 70.0, 3000e3, 1.0)),
    ("night_sea_20", lambda: check_ionosphere("night over sea", 20e3, 85.1, 0.63, 5.0, 70.0, 3000e3, 1.5)),
    ("day_below_night_20", check_day_below_night),
    ("day_land_12", lambda: check_ionosphere("day over land", 12e3, 71.8, 0.335, 1e-3, 15.0, 3000e3, 1.0)),
    ("night_land_12", lambda: check_ionosphere("night over land", 12e3, 85.1, 0.63, 1e-3, 15.0, 3000e3, 1.5)),
    # several low-loss modes: a gentle night profile, and a conducting ceiling (issue 15)
    (
        "night_many_modes_21",
        lambda: check_ionosphere("night, several modes, over sea", 21.1e3, 86.0, 0.5, 5.0, 70.0, 3000e3, 1.0),
    ),
    ("plates_80_12", lambda: check_plate_guide(12.2e3, 80e3, 2000e3, 0.5)),
    # the geomagnetic field: night, sea, low dip, westward (the lossier, more coupled direction)
    (
        "magnetised_night_west_20",
        lambda: check_magnetised(
            "night, field west, dip 20, over sea", 20e3, 85.1, 0.63, 5.0, 70.0, 20.0, 270.0, 3000e3, 1.5
        ),
    ),
]


def run_checks(full: bool = False, only: list[str] | None = None, progress=None) -> list[CheckResult]:
    """Run the quick set (and the long set with ``full``); ``only`` selects checks by name."""
    todo = QUICK + (FULL if full else [])
    if only:
        todo = [(n, fn) for n, fn in todo if n in only]
    out = []
    for k, (name, fn) in enumerate(todo):
        if progress is not None:
            progress(k / len(todo), name)
        out.append(fn())
    if progress is not None:
        progress(1.0, "done")
    return out


#: Widest line of :func:`format_table`, characters.
TABLE_WIDTH = 100


def format_table(results: list[CheckResult]) -> str:
    """Plain-text table at most :data:`TABLE_WIDTH` characters wide: check, expected, obtained,
    tolerance, result and time (s), cells wrapped onto more lines; sources numbered below it."""
    import textwrap

    sources = list(dict.fromkeys(r.source for r in results))
    header = ["Check [source]", "Expected", "Obtained", "Tolerance", "Result", "Time (s)"]
    widths = [22, 22, 22, 10, 6, 8]
    rows = [
        [
            f"{r.name} [{sources.index(r.source) + 1}]",
            r.expected,
            r.obtained,
            r.tolerance,
            "pass" if r.passed else "FAIL",
            f"{r.seconds:.0f}",
        ]
        for r in results
    ]
    lines = ["  ".join(h.ljust(w) for h, w in zip(header, widths)).rstrip(), "  ".join("-" * w for w in widths)]
    for row in rows:
        cells = [textwrap.wrap(str(c), w) or [""] for c, w in zip(row, widths)]
        for k in range(max(len(c) for c in cells)):
            parts = [(c[k] if k < len(c) else "").ljust(w) for c, w in zip(cells, widths)]
            lines.append("  ".join(parts).rstrip())
    lines.append("")
    lines.append("Sources:")
    for n, source in enumerate(sources, 1):
        lines += textwrap.wrap(
            source, TABLE_WIDTH - 6, initial_indent=f"[{n}]".ljust(5) + " ", subsequent_indent=" " * 6
        )
    return "\n".join(lines)


__all__ = ["CheckResult", "FULL", "QUICK", "format_table", "run_checks", "mode_reference", "C0", "MU0"]
