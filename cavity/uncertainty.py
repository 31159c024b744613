"""Numerical uncertainty of a predicted field from a companion solve on a coarser grid.

Method: the grid convergence index (GCI) of Roache (1994, J. Fluids Eng. 116, 405; 1998,
Verification and Validation in Computational Science and Engineering, ch. 5). Two solutions of the
same problem, f1 on the solver's grid (cells h) and f2 on a grid ``r`` times coarser in range, height
and time, give by Richardson extrapolation the fine solution's discretisation error
(f1 - f2) / (r^p - 1) for a scheme of order p. The GCI states |f1 - f2| / (r^p - 1) times a safety
factor Fs; Roache recommends Fs = 3 when only two grids are available, because the observed order
cannot be checked.

Applied here to the field in dB along each path:

- p = 2: the fourth-order interior stencil converges faster, but the ground rows, the axis, the
  absorbers, the time step and the sampling of the ionosphere profile are second order; the lower
  order gives the larger (safer) estimate.
- r = 1.5: the companion grid has 1/2.25 of the cells and 2/3 of the steps, so it costs about
  30 % of the main solve; at r = 2 the coarse grid leaves the range where the error falls as h^p.
- The estimate is taken as its running maximum over +-``ENVELOPE_KM`` (5 km, a third of a wavelength
  at 20 kHz): the two solutions' difference oscillates with the modal interference and passes
  through zero where the true error need not. Wider windows (10, 25 km) gave the same coverage in
  the checks and up to three times larger values between plates; none (0 km) left 1-4 % of the
  ranges uncovered.
- With the geomagnetic field the engine holds the plasma above the height where the whistler-mode
  index reaches what the vertical cell carries (:func:`cavity.fdtd.engine.whistler_capacity_index`),
  so a companion 1.5 times coarser in height simply holds it lower, where its own cells carry the
  wave, and the estimate includes the vertical cell's error. Before (the plasma never held, as with
  ``whistler_cap_index`` = inf), the whistler rule set the vertical cell to four cells per vertical
  wavelength of that wave in the densest plasma; a companion 1.5 times coarser in height would fall
  below the Yee scheme's cut-off (pi cells per wavelength) and reflect the wave (2.0 dB median on a
  night path whose true error was 0.5 dB: 5.4 dB stated), so the companion kept the vertical cell
  (:func:`cavity.fdtd.engine.whistler_sets_vertical_cell`) and the estimate left out that cell's
  error: it covered only 74-76 % of the ranges of two night paths at dip 60 (README, "Numerical
  uncertainty").
- A floor of ``FLOOR_DB`` covers what no grid refinement reveals (the recursive ground-impedance fit,
  the absorbers), of order a few hundredths of a dB in the checks of ``cavity verify``.

The coverage of the stated value (|solver - reference| <= uncertainty) is measured against the
independent references in ``tests/test_uncertainty.py`` and reported in the README.

The same two solutions also improve the field itself where the scheme is second order throughout
(the six-component scheme of the geomagnetic field run with ``stencil_order = 2``; by default its
range differences are fourth order, as the isotropic scheme's) and the companion differs from the
solve in range only: Richardson's extrapolation (Richardson 1911, Phil. Trans. R. Soc. A 210, 307; Roache
1998, ch. 5) f1 + (f1 - f2) / (r^p - 1), applied to the complex phasors so that each mode's phase
error is removed before the modes interfere (:func:`richardson_extrapolate`). It is not applied
to fourth-order runs: their error does not fall as h^2, and extrapolating with p = 2
would add about 2.25 times their error instead of removing it. The stated uncertainty stays the
fine solution's GCI: a conservative bound for the extrapolated value.
"""

from __future__ import annotations

import numpy as np

#: Companion grid: cells this many times larger in range and height (and a time step as large).
COMPANION_CELL_RATIO = 1.5
#: Order of accuracy assumed in the Richardson estimate (the lowest order present in the scheme).
ASSUMED_ORDER = 2.0
#: Roache's safety factor for a two-grid study.
SAFETY_FACTOR = 3.0
#: Half-width of the running maximum taken over range, km.
ENVELOPE_KM = 5.0
#: Smallest uncertainty stated, dB.
FLOOR_DB = 0.05


def grid_convergence_index_db(
    range_m,
    fine,
    coarse_range_m,
    coarse,
    *,
    ratio: float = COMPANION_CELL_RATIO,
    order: float = ASSUMED_ORDER,
    safety: float = SAFETY_FACTOR,
    envelope_km: float = ENVELOPE_KM,
    floor_db: float = FLOOR_DB,
) -> np.ndarray:
    """Uncertainty in dB of the fine-grid field at ``range_m`` from the coarse-grid field.

    Parameters
    ----------
    range_m : (R,) ranges of the fine solution, m, increasing.
    fine : (..., R) complex fine-grid field.
    coarse_range_m, coarse : ranges and (..., R2) complex field of the companion solve; its dB
        amplitude is interpolated linearly onto ``range_m``.

    Returns
    -------
    (..., R) array: safety * max over +-envelope_km of |dB1 - dB2| / (ratio^order - 1), at least
    ``floor_db``.
    """
    from scipy.ndimage import maximum_filter1d

    range_m = np.asarray(range_m, float)
    fine = np.atleast_2d(np.asarray(fine))
    coarse = np.atleast_2d(np.asarray(coarse))
    db_fine = 20.0 * np.log10(np.maximum(np.abs(fine), 1e-300))
    db_coarse_own = 20.0 * np.log10(np.maximum(np.abs(coarse), 1e-300))
    db_coarse = np.stack([np.interp(range_m, coarse_range_m, row) for row in db_coarse_own])
    error = np.abs(db_fine - db_coarse) / (ratio**order - 1.0)
    step = float(np.median(np.diff(range_m))) if range_m.size > 1 else 1.0
    size = max(1, int(round(2 * envelope_km * 1e3 / step)) + 1)
    envelope = maximum_filter1d(error, size=size, axis=-1, mode="nearest")
    return np.maximum(safety * envelope, floor_db)


#: How an extrapolated field was obtained, as the result files record it (``solver_extrapolation``).
EXTRAPOLATION_METHOD = f"Richardson (companion {COMPANION_CELL_RATIO:g} x coarser in range, order {ASSUMED_ORDER:g})"

#: Companion cells per wavelength below which the extrapolation is not trusted (the two solutions
#: must be in the range where the error falls as h^p; the default 16-cell solve has a 10.7-cell
#: companion).
RICHARDSON_MIN_COMPANION_CELLS = 8.0


def richardson_extrapolate(
    range_m,
    fine,
    coarse_range_m,
    coarse,
    frequencies_hz,
    *,
    ratio: float = COMPANION_CELL_RATIO,
    order: float = ASSUMED_ORDER,
    min_range_m: float = 0.0,
) -> np.ndarray:
    """Richardson-extrapolated complex field f1 + (f1 - f2) / (ratio^order - 1) at ``range_m``.

    The companion's phasors are brought onto the fine ranges by a cubic spline of the field with
    the free-space phase exp(-j k r) taken out (k = 2 pi f / c per frequency), so that the spline
    follows the slow envelope of the modes rather than their carrier; the phasor convention is
    exp(+j omega t), outgoing waves exp(-j k r). Ranges below ``min_range_m`` or beyond the
    companion's last range keep the fine solution.

    Parameters
    ----------
    range_m : (R,) fine ranges, m, increasing.
    fine : (F, R) complex fine-grid field.
    coarse_range_m, coarse : (R2,) ranges and (F, R2) complex field of the companion.
    frequencies_hz : (F,) frequencies of the rows.
    """
    from scipy.interpolate import CubicSpline

    from cavity.constants import C0

    range_m = np.asarray(range_m, float)
    coarse_range_m = np.asarray(coarse_range_m, float)
    fine = np.atleast_2d(np.asarray(fine))
    coarse = np.atleast_2d(np.asarray(coarse))
    out = fine.astype(complex)
    inside = (range_m >= max(min_range_m, coarse_range_m[0])) & (range_m <= coarse_range_m[-1])
    factor = 1.0 / (ratio**order - 1.0)
    for row, f_hz in enumerate(np.atleast_1d(np.asarray(frequencies_hz, float))):
        k = 2.0 * np.pi * f_hz / C0
        slow = CubicSpline(coarse_range_m, coarse[row] * np.exp(1j * k * coarse_range_m))
        r = range_m[inside]
        c = slow(r) * np.exp(-1j * k * r)
        out[row, inside] = fine[row, inside] + (fine[row, inside] - c) * factor
    return out


def companion_settings(medium, settings, plan):
    """Engine settings of the uncertainty companion of a solve planned as ``plan`` (a GridPlan).

    :data:`COMPANION_CELL_RATIO` times coarser in range and height; a vertical cell set by the
    whistler rule is kept (1.5 times coarser the companion would reflect the whistler-mode wave;
    see the module's notes). No probes or time series.
    """
    import dataclasses

    from cavity.fdtd import engine as eng

    r = COMPANION_CELL_RATIO
    r_z = 1.0 if eng.whistler_sets_vertical_cell(medium, settings, plan.dz_m) else r
    return dataclasses.replace(
        settings, dr_m=r * plan.dr_m, dz_m=r_z * plan.dz_m, probe_ranges_m=(), record_time_series=False
    )


def extrapolation_applies(medium, plan, coarse) -> bool:
    """Whether a solve (planned as ``plan``) and its companion (settings ``coarse``) give a
    Richardson-extrapolated field.

    Only where the scheme is second order throughout (the six-component scheme of the geomagnetic
    field with ``stencil_order = 2``; by default its range differences are fourth order, and
    extrapolating with p = 2 would add error), the companion differs in range only (the whistler
    rule set the vertical cell; a coarser vertical cell is an error of another kind) and the
    companion still has :data:`RICHARDSON_MIN_COMPANION_CELLS` per wavelength along range.
    """
    from cavity.constants import C0

    if medium.magnetic_field_t is None or coarse.dz_m != plan.dz_m or coarse.stencil_order != 2:
        return False
    wavelength_m = C0 / float(np.max(coarse.frequencies_hz))
    return wavelength_m / coarse.dr_m >= RICHARDSON_MIN_COMPANION_CELLS


def extrapolated_result(res, companion):
    """The engine result (cavity.fdtd.engine.EngineResult) with every ground field replaced by
    its Richardson extrapolation from the companion's (:func:`richardson_extrapolate`); ranges
    within three companion cells of the source keep the solve's field."""
    import dataclasses

    lead_m = 3.0 * float(np.median(np.diff(companion.range_m)))

    def ext(fine, coarse):
        if fine is None or coarse is None:
            return fine
        return richardson_extrapolate(
            res.range_m, fine, companion.range_m, coarse, res.frequencies_hz, min_range_m=lead_m
        )

    return dataclasses.replace(
        res,
        ez=ext(res.ez, companion.ez),
        hphi=ext(res.hphi, companion.hphi),
        hr=ext(res.hr, companion.hr),
        ephi=ext(res.ephi, companion.ephi),
    )


def run_with_companion(medium, settings):
    """(solve, companion, field as the tool reports it) for an engine medium and settings: the
    third is the extrapolated result where :func:`extrapolation_applies`, else the solve. What
    :func:`cavity.solve.solve_path` does, without calibration or progress (for checks)."""
    from cavity.fdtd import engine as eng

    sim = eng.Simulation(medium, settings)
    plan = sim.plan
    res = sim.run()
    del sim
    coarse = companion_settings(medium, settings, plan)
    companion = eng.run(medium, coarse)
    best = extrapolated_result(res, companion) if extrapolation_applies(medium, plan, coarse) else res
    return res, companion, best
