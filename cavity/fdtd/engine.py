"""The time-domain engine: builds one (r, z) solve from a medium description and steps it.

Orchestration only: grid sizing (:mod:`.grid`), coefficients (:mod:`.media`), waveforms
(:mod:`.source`) and the compiled loops (:mod:`.kernels`) meet here. The engine works per unit
current moment; :mod:`cavity.solve` scales to the transmitter's radiated power.

Outputs are running DFTs of Ez and H_phi along the ground row, divided by the DFT of the source
current at the same instants: the transfer function of the waveguide at each requested frequency.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from cavity.constants import C0, ELECTRON_CHARGE, ELECTRON_MASS, EPS0, MU0
from cavity.errors import SolverError
from cavity.fdtd import grid as gridmod
from cavity.fdtd import media, stencil
from cavity.fdtd.source import GaussianPulse, ToneBursts

log = logging.getLogger(__name__)

#: omega_p^2 per electron density, e^2/(eps0 m_e), rad^2 s^-2 m^3 (docs/physics.md 1: 3182.6)
WP2_PER_NE = ELECTRON_CHARGE**2 / (EPS0 * ELECTRON_MASS)
#: Loss tangent below which a row is stepped as vacuum (see Simulation._build).
PLASMA_THRESHOLD = 1e-6
#: Columns next to the axis, and before the far-end absorber, whose plasma is held isotropic with
#: the geomagnetic field (see Simulation._build_te): the radial stencil's closures there are not
#: energy-conserving.
ISOTROPIC_CLOSURE_COLUMNS = 4
#: Settling test (Simulation._converged): each output's change between two checks is judged against the
#: largest |value| within this many metres of it (never reaching nearer the transmitter than half its
#: range): the level of the field on the scale of the modal interference, not of one null. The deep
#: nulls of the 3,000 km night path at 20 kHz recur every 850 km; +-400 km spans one such period.
SETTLING_HALF_WIDTH_M = 400e3
#: Smallest whistler-mode index at which holding the plasma leaves the field at the ground unchanged:
#: held where the index reaches 4.1, 6.5 or 10.5 the magnetised reference's field moved by at most
#: 0.01, 0.002 or 0.001 dB over 300-3,000 km (night, sea, dip 20, westward); held at 2.7, by 1.1 dB.
#: A run whose vertical cell carries less gets a note.
WHISTLER_INDEX_FLOOR = 4.0
#: With the geomagnetic field and the plasma held (Simulation._plasma): height below the top absorber
#: over which the collision frequency rises to :data:`SPONGE_COLLISION_FREQUENCY` (s^-1), far above
#: the gyrofrequency (about 9e6 rad/s), so that the top absorber lies in a lossy, nearly isotropic plasma
SPONGE_M = 10e3
SPONGE_COLLISION_FREQUENCY = 1e9
#: Smallest window of the settling test, output columns either side (the former local envelope).
SETTLING_HALF_WIDTH_CELLS = 25


@dataclass(frozen=True)
class Medium:
    """The waveguide along one path, sampled at ``range_m`` (SI units).

    ``electron_density`` and ``collision_frequency`` have shape (len(range_m), len(altitude_m));
    ``None`` means no ionosphere (free space above the ground). The ground arrays hold one value
    per range sample, valid from that sample to the next (``inf`` conductivity: perfect ground).
    ``ceiling_m`` puts a perfectly conducting ceiling there instead of the top absorber.
    ``magnetic_field_t`` (len(range_m), 3) is the geomagnetic field B0 per range sample in the path
    frame (r along the path, phi = z x r, z up), tesla; given (even zero), the engine steps all six
    field components with the magnetised plasma current; None keeps the isotropic three-component
    scheme.
    """

    range_m: np.ndarray
    ground_conductivity: np.ndarray
    ground_permittivity: np.ndarray
    altitude_m: np.ndarray | None = None
    electron_density: np.ndarray | None = None
    collision_frequency: np.ndarray | None = None
    ceiling_m: float | None = None
    magnetic_field_t: np.ndarray | None = None

    @classmethod
    def uniform(
        cls,
        conductivity=math.inf,
        permittivity=1.0,
        altitude_m=None,
        electron_density=None,
        collision_frequency=None,
        ceiling_m=None,
        magnetic_field_t=None,
    ):
        """A range-independent medium from one profile (1-D arrays) and one ground."""
        ne = None if electron_density is None else np.asarray(electron_density, float)[None, :]
        nu = None if collision_frequency is None else np.asarray(collision_frequency, float)[None, :]
        return cls(
            range_m=np.array([0.0]),
            ground_conductivity=np.array([float(conductivity)]),
            ground_permittivity=np.array([float(permittivity)]),
            altitude_m=None if altitude_m is None else np.asarray(altitude_m, float),
            electron_density=ne,
            collision_frequency=nu,
            ceiling_m=ceiling_m,
            magnetic_field_t=None if magnetic_field_t is None else np.asarray(magnetic_field_t, float).reshape(1, 3),
        )


@dataclass(frozen=True)
class Settings:
    """What to compute and how finely. Lengths in m, frequencies in Hz, times in s."""

    frequencies_hz: tuple[float, ...]
    max_range_m: float
    top_m: float = 120e3
    dr_m: float | None = None
    dz_m: float | None = None
    cells_per_wavelength: float = gridmod.DEFAULT_CELLS_PER_WAVELENGTH
    earth_curvature: bool = True
    pml_cells: int = gridmod.DEFAULT_PML_CELLS
    pml_order: float = 3.0
    pml_sigma_scale: float = 1.0
    pml_kappa_max: float = 1.0
    courant_safety: float = gridmod.COURANT_SAFETY
    waveform: Any = None  # a callable of t (s) with end_s; default: ToneBursts(frequencies) or a pulse for many
    probe_ranges_m: tuple[float, ...] = ()
    record_time_series: bool = False
    time_series_rate_hz: float | None = None
    convergence_db: float = 0.002
    max_duration_s: float | None = None
    dispersion_correction: bool = True
    stencil_order: int = 4  # 4: (2,4) scheme in the interior; 2: Yee with the grazing correction
    # order of the vertical differences; None: second with the geomagnetic field, else stencil_order
    vertical_stencil_order: int | None = None
    # with the geomagnetic field: cells per vertical wavelength of the whistler-mode wave in the densest
    # plasma (see _whistler_dz_m); 0 leaves the vertical cell to the isotropic rules
    whistler_cells: float = 4.0
    # with the geomagnetic field: the plasma is held above the height where the whistler-mode index
    # reaches what the vertical cell carries (Simulation._plasma), and the vertical cell carries at
    # least this index (or the densest plasma's, if lower); inf never holds the plasma, so the
    # vertical cell must carry the densest plasma's index (the former whistler rule, 2-6 times finer
    # than the range cell) and the scheme keeps the Yee rule in height
    whistler_cap_index: float = 6.0
    # with the geomagnetic field (and the plasma held): vertical cells per profile scale 1/beta, where
    # the isotropic runs take 3 (gridmod.CELLS_PER_PROFILE_SCALE). With the field the vertical error
    # is larger: night, sea, 3,000 km, dip 20 and 60, westward, 1.22 and 0.27 dB worst at 6 (265 m),
    # 3.34 and 1.05 dB at 3 (500 m), against the magnetised reference (README, "The magnetised
    # reference")
    field_cells_per_scale: float = 6.0
    # with the geomagnetic field: wavelengths (at the lowest frequency) beyond the farthest output over
    # which the field fades out before the isotropic far-end absorber (see Simulation); 0 switches to
    # an abrupt change at the absorber
    field_taper_wavelengths: float = 4.0


@dataclass
class EngineResult:
    """Transfer functions per unit current moment (1 A m peak phasor) along the ground."""

    range_m: np.ndarray  # output ranges (Ez columns, axis excluded), m
    frequencies_hz: np.ndarray
    ez: np.ndarray  # (nf, nrange) complex, V/m per A m
    hphi: np.ndarray  # (nf, nrange) complex, A/m per A m
    plan: gridmod.GridPlan
    steps: int
    wall_time_s: float
    converged: bool
    probe_ranges_m: np.ndarray = field(default_factory=lambda: np.zeros(0))
    time_s: np.ndarray | None = None  # (nt,) sample times of the probe series
    ez_series: np.ndarray | None = None  # (nt, nprobe) V/m for the source waveform as run
    hphi_series: np.ndarray | None = None
    source_current: np.ndarray | None = None  # (nt,) A at the series times: waveform(t) (a channel's base current)
    source_moment: np.ndarray | None = None  # (nt,) A m at the series times: sum of I dz over the driven cells
    notes: list[str] = field(default_factory=list)
    hr: np.ndarray | None = None  # (nf, nrange) complex, A/m per A m (six-component runs only)
    ephi: np.ndarray | None = None  # (nf, nrange) complex, V/m per A m: Zs H_r at the ground


def _distinct_rows(table: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(distinct rows, row index of each column) of a per-column coefficient table.

    Columns under the same ionosphere profile share one row, which the kernels then read from cache.
    """
    rows, index = np.unique(table, axis=0, return_inverse=True)
    return np.ascontiguousarray(rows), np.ascontiguousarray(index.reshape(-1), dtype=np.int32)


#: One CPML layer's (b, c, 1/kappa - 1) as the kernels take them (:class:`cavity.fdtd.kernels.Absorber`).
CpmlTables = tuple[np.ndarray, np.ndarray, np.ndarray]


def _kernel_cpml(coefficients) -> CpmlTables:
    """CPML (b, c, kappa) as the kernels take them: b and c in float32, and 1/kappa - 1 in float64
    from the float32 kappa, so that the kernels need no division per absorber cell."""
    b, c, kappa = (np.asarray(a).astype(np.float32) for a in coefficients)
    return b, c, 1.0 / kappa.astype(np.float64) - 1.0


def radial_dispersion_factor(frequencies_hz, dr: float, dt: float) -> float:
    """Factor on the radial differences that makes waves along r travel at c at the design frequency.

    For a wave along r (k_z = 0) the Yee scheme obeys sin(w dt/2)/(c dt) = sin(k dr/2)/dr, so it
    travels slowly (about -0.2 % at 20 cells per wavelength, 55 deg per 1000 km at 20 kHz). Scaling
    the radial difference operators by gamma = (dr/(c dt)) sin(w dt/2)/sin(k dr/2) makes the
    numerical wavenumber exact at the design frequency (the RMS of the requested frequencies): the
    modified-coefficient, dispersion-optimised FDTD at a design frequency (Taflove and Hagness 2005,
    ch. 4; Shlager and Schneider 2003, IEEE TAP 51(3) 642). The grazing, low-order waveguide modes
    that carry the field to long range benefit most; gamma - 1 is a few parts per thousand, well
    inside the time step's stability margin.
    """
    f = float(np.sqrt(np.mean(np.square(np.asarray(frequencies_hz, float)))))
    w = 2 * math.pi * f
    k = w / C0
    return float((dr / (C0 * dt)) * math.sin(w * dt / 2) / math.sin(k * dr / 2))


def default_waveform(frequencies_hz) -> GaussianPulse | ToneBursts:
    """Narrow tone bursts for a few carriers, one broadband pulse for a dense set."""
    f = sorted(frequencies_hz)
    if len(f) > 4:
        return GaussianPulse(f[0], f[-1])
    return ToneBursts(tuple(f))


def _log_interp_columns(z_out, z_in, values):
    """Interpolate positive profiles (ncol, nz_in) to heights z_out, linearly in log; held beyond."""
    floor = 1e-30
    logv = np.log(np.maximum(values, floor))
    out = np.empty((values.shape[0], len(z_out)))
    for c in range(values.shape[0]):
        out[c] = np.interp(z_out, z_in, logv[c])
    res = np.exp(out)
    res[res < 1e-20] = 0.0
    return res


def _on_grid(medium: Medium, r_nodes, z_nodes):
    """(omega_p^2, nu) of the medium at grid nodes (r_nodes x z_nodes); None without plasma."""
    if medium.electron_density is None:
        return None, None
    ne_cols = _log_interp_columns(z_nodes, medium.altitude_m, medium.electron_density)
    nu_cols = _log_interp_columns(z_nodes, medium.altitude_m, medium.collision_frequency)
    rs = np.asarray(medium.range_m, float)
    if len(rs) == 1:
        ne = np.broadcast_to(ne_cols[0], (len(r_nodes), len(z_nodes)))
        nu = np.broadcast_to(nu_cols[0], (len(r_nodes), len(z_nodes)))
    else:
        # linear in log along range between sample columns (smooth day/night transition)
        idx = np.clip(np.searchsorted(rs, r_nodes) - 1, 0, len(rs) - 2)
        w = np.clip((r_nodes - rs[idx]) / (rs[idx + 1] - rs[idx]), 0.0, 1.0)[:, None]
        lne = np.log(np.maximum(ne_cols, 1e-30))
        lnu = np.log(np.maximum(nu_cols, 1e-30))
        # written as a + w (b - a) so that columns between equal samples get exactly equal values
        # (and share one coefficient table in the kernels)
        ne = np.exp(lne[idx] + w * (lne[idx + 1] - lne[idx]))
        nu = np.exp(lnu[idx] + w * (lnu[idx + 1] - lnu[idx]))
        ne[ne < 1e-20] = 0.0
    return WP2_PER_NE * ne, nu


def _nearest_sample(medium: Medium, r_cols) -> np.ndarray:
    """Index of the range sample nearest to each column."""
    rs = np.asarray(medium.range_m, float)
    if rs.size == 1:
        return np.zeros(len(r_cols), int)
    idx = np.clip(np.searchsorted(rs, r_cols), 1, rs.size - 1)
    return np.where(np.abs(r_cols - rs[idx - 1]) <= np.abs(rs[idx] - r_cols), idx - 1, idx)


def _ground_on_columns(medium: Medium, r_cols):
    """Ground conductivity and permittivity per column: the sample whose interval holds r."""
    rs = np.asarray(medium.range_m, float)
    idx = np.clip(np.searchsorted(rs, r_cols, side="right") - 1, 0, len(rs) - 1)
    return np.asarray(medium.ground_conductivity, float)[idx], np.asarray(medium.ground_permittivity, float)[idx]


def _max_log_slope(medium: Medium) -> float | None:
    """Largest d(ln omega_r)/dz (beta for an exponential profile) where the plasma matters."""
    if medium.electron_density is None or medium.altitude_m is None or medium.collision_frequency is None:
        return None
    z = medium.altitude_m
    ne = np.maximum(medium.electron_density, 1e-30)
    omega_r = ne / np.maximum(medium.collision_frequency, 1e-30)
    slope = np.diff(np.log(omega_r), axis=1) / np.diff(z)[None, :]
    relevant = (ne[:, 1:] > 1e5) & (ne[:, 1:] < 1e12)
    if not relevant.any():
        return None
    return float(np.max(slope[relevant]))


@dataclass(frozen=True)
class RunPlan:
    """Everything fixed before allocation: grid, waveform and the simulated-time window."""

    grid: gridmod.GridPlan
    waveform: Any  # a callable of t (s) with end_s (and axis_currents for a lightning channel)
    frequencies_hz: np.ndarray
    t_min_s: float  # shortest run: source, travel to the far end, settling
    t_max_s: float  # cap when the DFTs have not converged by then


def _whistler_dz_m(medium: Medium, settings: Settings, frequency_max_hz: float, top_m: float) -> float | None:
    """Largest vertical cell that carries the whistler-mode wave leaking up through the magnetised
    plasma: ``settings.whistler_cells`` cells per vertical wavelength lambda0 / n, n the index of the
    densest plasma below the top absorber's far side (:func:`cavity.fdtd.media.whistler_vertical_index`)
    or ``settings.whistler_cap_index``, whichever is lower (above the height where a column reaches
    the index its cells carry, the plasma is held: :func:`whistler_capacity_index`).

    At night the wave that leaks through the D region is the whistler mode; above 95 km its vertical
    index reaches 13-22 at 20 kHz (50,000 nT, dip 20-90 deg, density held above 100 km), a wavelength
    of 0.7-1.2 km. With fewer than pi cells per wavelength the Yee grid has no propagating wave of
    that index (its numerical dispersion relation, sin(k dz/2) = pi n dz/lambda0 for a small time
    step: Taflove and Hagness 2005, ch. 4), so it is reflected back into the guide instead of leaving it, and
    the field along the ground is off by several dB (README, "The magnetised reference").
    None without a field, without plasma, or with ``whistler_cells`` = 0.
    """
    if medium.magnetic_field_t is None or medium.electron_density is None or not settings.whistler_cells > 0:
        return None
    z = np.asarray(medium.altitude_m, float)
    reach = top_m + settings.pml_cells * gridmod.MAX_DZ_M
    ne = np.asarray(medium.electron_density, float)[..., z <= reach]
    if ne.size == 0 or not np.max(ne) > 0:
        return None
    flattening = float(media.flattening_factor(reach, settings.earth_curvature))
    n = media.whistler_vertical_index(
        WP2_PER_NE * float(np.max(ne)), medium.magnetic_field_t, frequency_max_hz, flattening
    )
    n = min(n, float(settings.whistler_cap_index))
    return C0 / frequency_max_hz / (settings.whistler_cells * n)


def whistler_capacity_index(settings: Settings, frequency_max_hz: float, dz_m: float) -> float:
    """Whistler-mode index that a vertical cell ``dz_m`` carries: lambda0 / (``whistler_cells`` dz),
    lambda0 at the highest frequency (at lower frequencies the whistler-mode wavelength in the same
    plasma is longer); inf when the plasma is never held (``whistler_cap_index`` inf, or
    ``whistler_cells`` 0)."""
    if not settings.whistler_cells > 0 or not math.isfinite(settings.whistler_cap_index):
        return math.inf
    return C0 / frequency_max_hz / (settings.whistler_cells * dz_m)


def whistler_sets_vertical_cell(medium: Medium, settings: Settings, dz_m: float | None = None) -> bool:
    """Whether an uncertainty companion must keep the solve's vertical cell (``dz_m``, the solve's
    plan's; planned here when not given): when the plasma is never held (``whistler_cap_index``
    inf) and the whistler rule (:func:`_whistler_dz_m`), not the isotropic rules, set the cell, a grid
    1.5 times coarser in height no longer carries the whistler-mode wave (it falls below the Yee
    scheme's cut-off of pi cells per wavelength) and reflects it. With the plasma held, a coarser
    companion holds it lower, where its own cells carry the index (:func:`whistler_capacity_index`)."""
    if medium.magnetic_field_t is None or not settings.whistler_cells > 0 or settings.dz_m:
        return False
    if math.isfinite(settings.whistler_cap_index):
        return False
    if dz_m is None:
        dz_m = make_plan(medium, settings).grid.dz_m
    return dz_m < make_plan(medium, dataclasses.replace(settings, whistler_cells=0.0)).grid.dz_m


def vertical_order(medium: Medium, settings: Settings) -> int:
    """Order of the vertical differences of a solve's interior: ``settings.stencil_order``, with or
    without the geomagnetic field; second with the field when the plasma is never held
    (``whistler_cap_index`` inf: the former whistler rule's vertical cell, 2-6 times finer than the
    range cell, with the Yee rule in height and no collision sponge, whose fourth-order closure
    below the top absorber would sit in a weakly collisional gyrotropic plasma);
    ``settings.vertical_stencil_order`` overrides both."""
    if settings.vertical_stencil_order is not None:
        return int(settings.vertical_stencil_order)
    if medium.magnetic_field_t is not None and not math.isfinite(settings.whistler_cap_index):
        return 2
    return int(settings.stencil_order)


def _cells_per_scale(medium: Medium, settings: Settings) -> float:
    """Vertical cells per profile scale 1/beta: ``settings.field_cells_per_scale`` with the
    geomagnetic field and the plasma held (:func:`whistler_capacity_index`), else the isotropic
    runs' :data:`cavity.fdtd.grid.CELLS_PER_PROFILE_SCALE` (with the plasma never held the whistler
    rule sets a finer cell anyway)."""
    if _has_field(medium) and math.isfinite(settings.whistler_cap_index):
        return float(settings.field_cells_per_scale)
    return gridmod.CELLS_PER_PROFILE_SCALE


def _has_field(medium: Medium) -> bool:
    """Whether the medium holds a geomagnetic field that is not zero everywhere."""
    b = medium.magnetic_field_t
    return b is not None and bool(np.any(np.asarray(b, float) != 0.0))


def make_plan(medium: Medium, settings: Settings) -> RunPlan:
    """Size one solve without allocating it (what ``cavity inspect`` reports)."""
    s = settings
    f = np.asarray(sorted(s.frequencies_hz), float)
    if f.size == 0 or not np.all(f > 0):
        raise SolverError("frequencies: need at least one frequency > 0 Hz")
    waveform = s.waveform or default_waveform(f)
    end = float(waveform.end_s)
    travel = s.max_range_m / C0
    t_min = end + 1.1 * travel + 3.0 / f.min()
    t_max = max(s.max_duration_s or (end + 3.0 * travel + 40.0 / f.min()), t_min)
    ceiling = medium.ceiling_m is not None
    top = float(medium.ceiling_m) if medium.ceiling_m is not None else float(s.top_m)
    grid = gridmod.plan_grid(
        s.max_range_m,
        float(f.max()),
        top,
        duration_s=t_min,
        dr_m=s.dr_m,
        dz_m=s.dz_m,
        beta_max_per_m=_max_log_slope(medium),
        ceiling=ceiling,
        pml_cells=s.pml_cells,
        cells_per_wavelength=s.cells_per_wavelength,
        courant_safety=s.courant_safety,
        stencil_order=int(s.stencil_order),
        vertical_order=vertical_order(medium, s),
        dz_max_m=_whistler_dz_m(medium, s, float(f.max()), top),
        taper_m=s.field_taper_wavelengths * C0 / float(f.min()) if _has_field(medium) else 0.0,
        cells_per_scale=_cells_per_scale(medium, s),
    )
    if medium.magnetic_field_t is not None:
        grid = dataclasses.replace(grid, magnetised=True)
    return RunPlan(grid, waveform, f, t_min, t_max)


class Simulation:
    """One solve: allocated fields and coefficients, stepped by :meth:`run`."""

    #: Step only the columns the wave has reached (exact; see kernels.last_active_column). Tests
    #: switch it off to compare with stepping the whole grid.
    track_front: bool = True

    def __init__(self, medium: Medium, settings: Settings):
        self.medium = medium
        self.settings = settings
        run_plan = make_plan(medium, settings)
        self.plan = run_plan.grid
        self.waveform = run_plan.waveform
        self.frequencies_hz = run_plan.frequencies_hz
        self.t_min, self.t_max = run_plan.t_min_s, run_plan.t_max_s
        gridmod.check_memory(self.plan)
        self._build()

    # ------------------------------------------------------------------ set-up
    @staticmethod
    def _coefficient(values, nr, n):
        """A contiguous float32 (nr, n) coefficient table (contiguous rows let the kernels vectorise)."""
        return np.ascontiguousarray(np.broadcast_to(np.asarray(values, dtype=np.float32), (nr, n)))

    def _plasma(self, r_nodes, z_nodes):
        """(omega_p^2, nu) at grid nodes (:func:`_on_grid`); with the geomagnetic field, omega_p^2 is
        held in each column above the height where the whistler-mode index reaches what the
        vertical cell carries (:func:`whistler_capacity_index`, :func:`cavity.fdtd.media.whistler_cap_omega_p2`),
        with the column's nearest range sample's field."""
        wp2, nu = _on_grid(self.medium, r_nodes, z_nodes)
        b = self.medium.magnetic_field_t
        if wp2 is None or b is None or not _has_field(self.medium):
            return wp2, nu
        f_max = float(self.frequencies_hz.max())
        index = whistler_capacity_index(self.settings, f_max, self.plan.dz_m)
        if not math.isfinite(index):
            return wp2, nu
        flattening = float(media.flattening_factor(self.plan.top_m, self.settings.earth_curvature))
        cap = media.whistler_cap_omega_p2(np.asarray(b, float).reshape(-1, 3), f_max, index, flattening)
        cap_cols = cap[_nearest_sample(self.medium, r_nodes)]
        wp2 = np.minimum(wp2, cap_cols[:, None])
        if self.plan.pml_z_cells == 0:  # under a conducting ceiling nothing leaves through the top
            return wp2, nu
        # the collision frequency rises to SPONGE_COLLISION_FREQUENCY over the physical domain's top
        # SPONGE_M (as the square of the depth into it, in log), and stays there in the top absorber: a
        # CPML in a weakly collisional gyrotropic plasma can amplify waves that travel backward along
        # its stretched axis (Becache, Fauqueux and Joly 2003, J. Comput. Phys. 188(2) 399), as the
        # whistler-mode wave does under a low dip (measured: a 150 km night guide, dip 20, 500 m
        # cells, grew without bound in the top absorber at 16.6 ms; with the plasma fading to vacuum
        # instead, at the far-end absorber's top). With nu far above the gyrofrequency the plasma is
        # lossy and nearly isotropic there; the wave that reaches it has left the guide, and the
        # reference with the same held plasma and sponge differs from the plain one by at most
        # 0.16 dB (docs/physics.md 11)
        x = np.clip((self.plan.top_m - np.asarray(z_nodes, float)) / SPONGE_M, 0.0, 1.0)
        depth = (1.0 - x)[None, :] ** 2
        log_nu = np.log(np.maximum(nu, 1e-30))
        return wp2, np.exp(log_nu + depth * np.maximum(math.log(SPONGE_COLLISION_FREQUENCY) - log_nu, 0.0))

    def _build(self) -> None:
        p, s, m = self.plan, self.settings, self.medium
        nr, nz = p.nr, p.nz
        dr, dz, dt = p.dr_m, p.dz_m, p.dt_s
        f32 = np.float32
        self.r_ez = np.arange(nr) * dr
        self.r_h = (np.arange(nr) + 0.5) * dr
        self.z_ez = (np.arange(nz) + 0.5) * dz
        self.z_er = np.arange(nz + 1) * dz

        # fields
        self.ez = np.zeros((nr, nz), f32)
        self.er = np.zeros((nr, nz + 1), f32)
        self.hp = np.zeros((nr, nz), f32)

        # vacuum (flattened) coefficients
        eps_ez = EPS0 * media.flattening_factor(self.z_ez, s.earth_curvature)
        eps_er = EPS0 * media.flattening_factor(self.z_er, s.earth_curvature)
        self.cez = (dt / eps_ez).astype(f32)
        self.cer = (dt / eps_er).astype(f32)
        self.ch = f32(dt / MU0)
        # spatial stencil (cavity.fdtd.stencil): coefficient tables with the dispersion factor folded in;
        # with the geomagnetic field the vertical differences are second order (vertical_order)
        order, v_order = int(s.stencil_order), vertical_order(m, s)
        if not s.dispersion_correction:
            self.gamma = 1.0
        elif order == 2:
            self.gamma = radial_dispersion_factor(self.frequencies_hz, dr, dt)
        else:
            self.gamma = stencil.dispersion_factor(self.frequencies_hz, dr, dz, dt, order, vertical_order=v_order)
        edge = None
        if order == 4 and s.dispersion_correction:
            edge = stencil.edge_factor(self.frequencies_hz, dr, dz, dt, self.gamma, vertical_order=v_order)
        self.stencil = stencil.build(
            nr,
            nz,
            dr,
            dz,
            order=order,
            gamma=self.gamma,
            ir0=nr - p.pml_r_cells,
            jz0=nz - p.pml_z_cells,
            radial_gamma_only=(order == 2),
            edge_gamma=edge,
            vertical_order=v_order,
        )
        st = self.stencil
        # second-order factors of the ground row and the absorbers (equal to the tables there)
        self.inv_dr, self.inv_dz = f32(st.ar1[-1]), f32(st.kz1[-1])

        # plasma
        wp2_z, nu_z = self._plasma(self.r_ez, self.z_ez)
        # Er nodes on every row up to the top wall (the six-component tables read row nz too)
        wp2_re, nu_re = self._plasma(self.r_h, self.z_er)
        wp2_r, nu_r = wp2_re, nu_re
        if wp2_re is not None:
            wp2_r, nu_r = wp2_re[:, :nz], nu_re[:, :nz]
        self.jp0 = nz
        if wp2_z is not None:
            # rows whose loss tangent omega_p^2/(omega max(nu, omega)) stays below PLASMA_THRESHOLD
            # are stepped as vacuum: a layer that weak adds far less than 0.01 dB per 1000 km
            w_min = 2 * math.pi * self.frequencies_hz.min()
            weight_z = wp2_z / (w_min * np.maximum(nu_z, w_min))
            weight_r = wp2_r / (w_min * np.maximum(nu_r, w_min))
            rows = np.nonzero((weight_z.max(axis=0) > PLASMA_THRESHOLD) | (weight_r.max(axis=0) > PLASMA_THRESHOLD))[0]
            if rows.size:
                # with the field one more row: on alternate steps the triples pair each Ez node with
                # the Er and Ephi nodes above it, and the first plasma row's Er and Ephi, then without
                # a partner, are stepped as vacuum (kernels.step_e_mag); that row's plasma is below
                # PLASMA_THRESHOLD
                below = 1 if m.magnetic_field_t is not None else 0
                self.jp0 = max(int(rows[0]) - below, 1)
        n_pl = nz - self.jp0
        sl = slice(self.jp0, nz)
        if n_pl > 0:
            # the kernel needs eps/dt and qa per plasma row, qb per distinct column profile (kernels.step_e)
            if not (np.allclose(nu_z, nu_z[:1]) and np.allclose(nu_r, nu_r[:1])):
                raise SolverError("collision frequency must not vary along range (one nu(z) per path)")
            cz = media.plasma_coefficients(eps_ez[None, sl], wp2_z[:, sl], nu_z[:, sl], dt)
            cr = media.plasma_coefficients(eps_er[None, sl], wp2_r[:, sl], nu_r[:, sl], dt)
            self.plasma_z = [
                (eps_ez[sl] / dt).astype(f32),
                np.asarray(cz[3], f32)[0].copy(),
                *_distinct_rows(self._coefficient(cz[4], nr, n_pl)),
            ]
            self.plasma_r = [
                (eps_er[sl] / dt).astype(f32),
                np.asarray(cr[3], f32)[0].copy(),
                *_distinct_rows(self._coefficient(cr[4], nr, n_pl)),
            ]
            self.pb_z = self._coefficient(cz[1], nr, n_pl)  # curl coefficients, for the absorber cells
            self.pb_r = self._coefficient(cr[1], nr, n_pl)
        else:
            self.plasma_z = [np.zeros(0, f32), np.zeros(0, f32), np.zeros((1, 0), f32), np.zeros(nr, np.int32)]
            self.plasma_r = [np.zeros(0, f32), np.zeros(0, f32), np.zeros((1, 0), f32), np.zeros(nr, np.int32)]
            self.pb_z = self.pb_r = None
        self.jz = np.zeros((nr, n_pl), f32)
        self.jr = np.zeros((nr, n_pl), f32)
        self.wp2_max = 0.0 if wp2_z is None else float(np.max(wp2_z))

        # ground: recursive surface impedance per column
        sig, epr = _ground_on_columns(m, self.r_h)
        f_lo, f_hi = float(self.frequencies_hz.min()), float(self.frequencies_hz.max())
        eta = np.zeros(nr)
        fits = {}
        for key in set(zip(sig.tolist(), epr.tolist())):
            fits[key] = media.impedance_fit(key[0], key[1], dt, f_lo, f_hi)
        poles = next((fit[1] for fit in fits.values() if fit[1].size), np.zeros(0))
        self.sib_q = poles.astype(np.float64)
        self.sib_w = np.zeros((nr, poles.size))  # (column, pole): a column's poles side by side
        self.impedance_fit_error = max((fit[3] for fit in fits.values()), default=0.0)
        for key, fit in fits.items():
            cols = (sig == key[0]) & (epr == key[1])
            eta[cols] = fit[0]
            if fit[1].size:
                self.sib_w[cols, :] = fit[2][None, :]
        self.sib_psi = np.zeros_like(self.sib_w)
        denom = MU0 / dt + eta / (2 * dz)
        self.ha = ((MU0 / dt - eta / (2 * dz)) / denom).astype(f32)
        self.hb = (1.0 / denom).astype(f32)

        # absorbers
        kw = dict(grading_order=s.pml_order, sigma_scale=s.pml_sigma_scale, kappa_max=s.pml_kappa_max)
        nzp, nrp = p.pml_z_cells, p.pml_r_cells
        self.jz0 = nz - nzp
        self.ir0 = nr - nrp
        zh = media.cpml_coefficients(nzp, dz, dt, offset=0.5, **kw)
        ze = media.cpml_coefficients(nzp, dz, dt, offset=0.0, **kw)
        rh = media.cpml_coefficients(nrp, dr, dt, offset=0.5, **kw)
        re = media.cpml_coefficients(nrp, dr, dt, offset=0.0, **kw)
        self.pz_h: CpmlTables = _kernel_cpml(zh)
        self.pz_e: CpmlTables = _kernel_cpml(ze)
        self.pr_h: CpmlTables = _kernel_cpml(rh)
        self.pr_e: CpmlTables = _kernel_cpml(re)
        self.psi_zh = np.zeros((nr, nzp), f32)
        self.psi_ze = np.zeros((nr, nzp), f32)
        self.psi_rh = np.zeros((nrp, nz), f32)
        self.psi_re = np.zeros((nrp, nz), f32)
        # curl coefficient of each absorber cell (vacuum dt/eps, or the plasma pb)
        ce_top = np.broadcast_to(self.cer[self.jz0 : nz][None, :], (nr, nzp)).copy()
        ce_far = np.broadcast_to(self.cez[None, :], (nrp, nz)).copy()
        if n_pl > 0:
            for k, j in enumerate(range(self.jz0, nz)):
                if j >= self.jp0:
                    ce_top[:, k] = self.pb_r[:, j - self.jp0]
            ce_far[:, self.jp0 :] = self.pb_z[self.ir0 :, :]
        self.ce_top = ce_top.astype(f32)
        self.ce_far = ce_far.astype(f32)
        self.pb_z = self.pb_r = None  # only needed for the absorber cells above
        ch_far = np.full((nrp, nz), self.ch, f32)
        ch_far[:, 0] = self.hb[self.ir0 :]
        self.ch_far = ch_far

        # source: current element I in the axis cell of radius dr/2 and height dz (moment I dz)
        self.src_coef = float(self.cez[0]) / st.axis_area_m2
        self.src_coef_rows = self.cez.astype(float) / st.axis_area_m2

        self.magnetised = m.magnetic_field_t is not None
        if self.magnetised:
            self._build_te(eps_ez, eps_er, wp2_z, nu_z, wp2_re, nu_re, sig, epr)

    def _build_te(self, eps_ez, eps_er, wp2_z, nu_z, wp2_re, nu_re, sig, epr):
        """Arrays and coefficients of the TE set and the magnetised current (kernels.step_e_mag)."""
        p, m = self.plan, self.medium
        nr, nz = p.nr, p.nz
        dr, dt = p.dr_m, p.dt_s
        f32 = np.float32
        self.ephi = np.zeros((nr, nz + 1), f32)
        self.hr = np.zeros((nr, nz), f32)
        self.hz = np.zeros((nr, nz + 1), f32)
        n_pl = nz - self.jp0
        self.jphi = np.zeros((nr, n_pl), f32)
        # the radial operators of Ez, Ephi and Hz are the stencil's tables (er_coef, te_e, te_h)
        self.sib_psi_r = np.zeros_like(self.sib_w)
        # square roots of the cylindrical volume weights (r; dr/8 for the axis Ez cell, whose disc of
        # radius dr/2 has the area 2 pi (dr/8) dr); Ephi is absent on the axis (weight 1, unused)
        wsq = np.empty((3, nr))
        wsq[0] = np.sqrt(np.maximum(self.r_ez, dr / 8))
        wsq[1] = np.sqrt(self.r_h)
        wsq[2] = np.sqrt(np.where(self.r_ez > 0, self.r_ez, 1.0))
        self.wsq = (wsq / math.sqrt(dr)).astype(f32)
        nzp, nrp = p.pml_z_cells, p.pml_r_cells
        self.psi_hr = np.zeros((nr, nzp), f32)
        self.psi_pz = np.zeros((nr, nzp), f32)
        self.psi_hz = np.zeros((nrp, nz + 1), f32)
        self.psi_pr = np.zeros((nrp, nz + 1), f32)
        # ground impedance per output column, for Ephi = Zs Hr at the ground
        self.ground_te = _ground_on_columns(m, self.r_ez)
        # gyro vector e B0 / m_e per Ez column: the nearest range sample's (10 km apart along a globe
        # path), so that the columns between two samples share their coefficient tables; interpolated,
        # every column had its own (9,429 tables, 248 MB on the demo's night path, read every step)
        nearest = _nearest_sample(m, self.r_ez)
        b = np.asarray(m.magnetic_field_t, float).reshape(-1, 3)
        w = b[nearest] * (ELECTRON_CHARGE / ELECTRON_MASS)
        self.gyro_max = float(np.max(np.linalg.norm(w, axis=1))) if w.size else 0.0
        # the far-end absorber holds an isotropic plasma: a CPML is unstable in a gyrotropic medium
        # whose waves travel backward along the stretched axis (Becache, Fauqueux and Joly 2003,
        # J. Comput. Phys. 188(2) 399). An abrupt change to it reflected the night guide's modes at
        # about -27 dB; the field fades out as sin^2 over the taper's columns instead, a change slow
        # on the scale of a wavelength, which reflects below -50 dB (docs/physics.md section 4)
        nt = p.taper_r_cells
        if nt:
            x = np.arange(nt, 0, -1) / nt  # 1 at the taper's start, 1/nt at its last column
            w[self.ir0 - nt : self.ir0] *= (np.sin(0.5 * np.pi * x) ** 2)[:, None]
        # the closures of the radial stencil are isotropic too: next to the axis (the Yee disc rule
        # for Ez and the mirror folds, cavity.fdtd.stencil) and where the fourth-order rows give way
        # to the absorber's second-order ones, the stencil is not the adjoint of its partner in the
        # cylindrical energy norm, as the interior stencil is, and the lossless gyration of a weakly
        # collisional plasma fed those closures (measured, random fields in a dense slab at
        # nu = 1e3 /s: 2,600-fold growth in 20,000 steps at the axis; at nu = 1e2 /s the former Yee
        # scheme grew too, 7-fold in 240,000 steps). Next to the axis these columns span a few km of
        # ionosphere above the transmitter, where the path-plane approximation holds least anyway
        # (that ring spans every bearing); before the absorber the fade-out has left little field
        w[: min(ISOTROPIC_CLOSURE_COLUMNS, nr)] = 0.0
        w[max(self.ir0 - ISOTROPIC_CLOSURE_COLUMNS, 0) :] = 0.0
        if n_pl == 0:
            self.mag_coef = np.zeros((1, 21, 0), f32)
            self.tab_p = self.tab_m = np.zeros(nr, np.int32)
            self.t_left = 0
            return
        sl = slice(self.jp0, nz)
        up = slice(self.jp0 + 1, nz + 1)  # the Er and Ephi rows above the Ez rows (row nz: the top wall)
        # Er (wp2_re, from _build) and Ephi nodes on every row up to the wall; H_phi-column plasma for
        # Er, Ez-column for Ephi
        wp2_p, nu_p = self._plasma(self.r_ez, self.z_er)
        _, prof_z = _distinct_rows(np.ascontiguousarray(wp2_z[:, sl]))
        _, prof_r = _distinct_rows(np.ascontiguousarray(wp2_re[:, self.jp0 :]))
        _, prof_p = _distinct_rows(np.ascontiguousarray(wp2_p[:, self.jp0 :]))
        _, field_idx = _distinct_rows(w)
        cols = np.arange(nr)
        # triple keys (Ez profile, Er profile, Ephi profile, field, presence of r, phi, z, vertical
        # offset of the Er and Ephi partners: 0 the row of the Ez node's lower face, 1 its upper face)
        keys_p = np.stack(
            [prof_z, prof_r, prof_p, field_idx, np.ones(nr), (cols > 0), np.ones(nr), np.zeros(nr)], axis=1
        )
        # the other pairing: the Er column before each Ez column and the rows above (kernels.step_e_mag)
        keys_m = keys_p.copy()
        keys_m[1:, 1] = prof_r[:-1]
        keys_m[0, 1], keys_m[0, 4] = -1, 0
        keys_m[:, 7] = 1
        left = np.array([[-1, prof_r[-1], -1, field_idx[-1], 1, 0, 0, 0]])
        keys, index = np.unique(np.vstack([keys_p, keys_m, left]).astype(np.int64), axis=0, return_inverse=True)
        index = index.reshape(-1)
        self.tab_p = np.ascontiguousarray(index[:nr], dtype=np.int32)
        self.tab_m = np.ascontiguousarray(index[nr : 2 * nr], dtype=np.int32)
        self.t_left = int(index[-1])
        # representative columns of each key
        first = {}
        rep = np.zeros((len(keys), 3), int)  # column of the Ez, Er, Ephi node for each key
        ez_col = np.concatenate([cols, cols, [nr - 1]])
        er_col = np.concatenate([cols, cols - 1, [nr - 1]])
        for row, key_row in enumerate(index):
            if key_row not in first:
                first[key_row] = row
        for key_row, row in first.items():
            rep[key_row] = (ez_col[row], max(er_col[row], 0), ez_col[row])
        nk = len(keys)
        lifted = keys[:, 7] == 1
        eps = np.empty((nk, n_pl, 3))
        wp2 = np.empty((nk, n_pl, 3))
        nu = np.empty((nk, n_pl, 3))
        eps[:, :, 0] = np.where(lifted[:, None], eps_er[None, up], eps_er[None, sl])
        eps[:, :, 1] = eps[:, :, 0]
        eps[:, :, 2] = eps_ez[None, sl]
        for c, (table_wp2, table_nu, col) in enumerate(((wp2_re, nu_re, rep[:, 1]), (wp2_p, nu_p, rep[:, 2]))):
            wp2[:, :, c] = np.where(lifted[:, None], table_wp2[col][:, up], table_wp2[col][:, sl])
            nu[:, :, c] = np.where(lifted[:, None], table_nu[col][:, up], table_nu[col][:, sl])
        wp2[:, :, 2] = wp2_z[rep[:, 0], sl]
        nu[:, :, 2] = nu_z[rep[:, 0], sl]
        present = np.broadcast_to(keys[:, None, 4:7].astype(bool), (nk, n_pl, 3)).copy()
        present[lifted, -1, :2] = False  # the top Ez row's upper face is the wall: Ez alone
        gyro = np.broadcast_to(w[rep[:, 0]][:, None, :], (nk, n_pl, 3)).copy()
        # (key, coefficient, plasma row): each coefficient contiguous along the rows (kernels.step_e_mag)
        self.mag_coef = np.ascontiguousarray(
            media.magnetised_coefficients(eps, wp2, nu, gyro, present, dt).transpose(0, 2, 1).astype(f32)
        )

    # ------------------------------------------------------------------ stepping
    def run(self, progress: Callable[[float, str], None] | None = None) -> EngineResult:
        """Step until the DFTs have converged (or the time cap), then return transfer functions."""
        from cavity.fdtd import kernels as K

        p, s = self.plan, self.settings
        dt, nr = p.dt_s, p.nr
        w = 2 * math.pi * self.frequencies_hz
        nf = w.size
        acc_e = [np.zeros((nf, nr)), np.zeros((nf, nr))]
        acc_h = [np.zeros((nf, nr)), np.zeros((nf, nr))]
        acc_hr = [np.zeros((nf, nr)), np.zeros((nf, nr))]
        acc_i = np.zeros(nf, complex)
        n_min = int(math.ceil(self.t_min / dt))
        n_max = int(math.ceil(self.t_max / dt))
        check_every = max(50, int(round(max(0.5e-3, 2.0 / self.frequencies_hz.min()) / dt)))
        guard_every = 100
        n_out = p.range_columns + 1  # output columns and the axis (no output in the field's taper)
        tol = 10 ** (s.convergence_db / 20) - 1
        probes = np.asarray(s.probe_ranges_m, float)
        probe_cols = np.clip(np.rint(probes / p.dr_m).astype(int), 1, n_out - 1) if probes.size else np.zeros(0, int)
        series_every = 1
        if s.time_series_rate_hz:
            series_every = max(1, int(1.0 / (s.time_series_rate_hz * dt)))
        ez_series, h_series, t_series, i_series, m_series = [], [], [], [], []
        src_peak = 0.0
        last = None
        converged = False
        wave = self.waveform
        line_source = hasattr(wave, "axis_currents")
        n_line = 0
        if line_source:
            height = float(getattr(wave, "channel_height_m", self.plan.dz_m))
            n_line = int(min(self.jz0, max(1, math.ceil(height / self.plan.dz_m))))
        # point source: the whole current record at once (zero after the waveform's end)
        n_src = min(n_max, int(math.ceil(float(wave.end_s) / dt)) + 1)
        src = np.zeros(0) if line_source else np.asarray(wave((np.arange(n_src) + 0.5) * dt), float) * np.ones(n_src)
        src_kick = np.zeros(max(1, n_line), np.float32)  # this step's source term per axis cell (kernels.step_e)
        # DFT kernels exp(-j w t) at the H and E instants, advanced by one rotation per step
        rot_h = np.exp(-0.5j * w * dt)
        rot_step = np.exp(-1j * w * dt)
        rot_half = np.exp(-0.5j * w * dt)
        t0 = time.perf_counter()
        step = 0
        # the kernels' argument groups (kernels.Fields ...): the same arrays every step, named
        fields = K.Fields(self.ez, self.er, self.hp, self.jz, self.jr)
        st = self.stencil
        curl_h = K.HCurl(self.inv_dr, self.inv_dz, st.ar1, st.ar2, st.kz1, st.kz2, self.ch, self.ha, self.hb)
        ground = K.GroundMemory(self.sib_q, self.sib_w, self.sib_psi)
        top_h = K.Absorber(self.jz0, *self.pz_h, self.psi_zh, np.zeros((0, 0), np.float32))
        far_h = K.Absorber(self.ir0, *self.pr_h, self.psi_rh, self.ch_far)
        reach = st.reach_columns * gridmod.FRONT_SEARCH_STEPS + 2  # columns a step can reach outward
        curl_e = K.ECurl(st.er_coef, st.ke1, st.ke2, self.cez, self.cer, self.jp0)
        plasma_z, plasma_r = K.Plasma(*self.plasma_z), K.Plasma(*self.plasma_r)
        top_e = K.Absorber(self.jz0, *self.pz_e, self.psi_ze, self.ce_top)
        far_e = K.Absorber(self.ir0, *self.pr_e, self.psi_re, self.ce_far)
        if self.magnetised:
            # the six-component kernels' groups (kernels.FieldsTE ...); the triples' pairing alternates
            no_coef = np.zeros((0, 0), np.float32)
            te = K.FieldsTE(self.ephi, self.hr, self.hz, self.jphi)
            curl_te = K.HCurlTE(self.inv_dz, st.kz1, st.kz2, self.ch, st.te_h, self.ha, self.hb)
            ground_te = K.GroundMemory(self.sib_q, self.sib_w, self.sib_psi_r)
            top_hr = K.Absorber(self.jz0, *self.pz_h, self.psi_hr, no_coef)
            far_hz = K.Absorber(self.ir0, *self.pr_h, self.psi_hz, no_coef)
            curl_mag = K.ECurlMag(st.er_coef, st.te_e, self.inv_dz, st.ke1, st.ke2, self.cez, self.cer, self.jp0)
            pairing = {
                1: K.Magnetoplasma(self.mag_coef, self.tab_p, 1, self.wsq),
                -1: K.Magnetoplasma(self.mag_coef, self.tab_m, -1, self.wsq),
            }
            top_er = K.Absorber(self.jz0, *self.pz_e, self.psi_ze, no_coef)
            top_ep = K.Absorber(self.jz0, *self.pz_e, self.psi_pz, no_coef)
            far_ez = K.Absorber(self.ir0, *self.pr_e, self.psi_re, no_coef)
            far_ep = K.Absorber(self.ir0, *self.pr_e, self.psi_pr, no_coef)
        n_cols = nr
        # progress in units of the cost model (columns stepped), so that elapsed time / fraction done
        # predicts the time left: steps get dearer as the wave reaches more columns
        expected_cols = p.expected_cell_updates / p.nz
        done_cols = 0.0
        while step < n_max:
            if self.track_front and step % gridmod.FRONT_SEARCH_STEPS == 0:
                # columns beyond the last active one are still empty (kernels.last_active_column):
                # step only as far as the wave can reach before the next search
                last_col = K.last_active_column(n_cols - 1, fields, ground, top_h, far_h, top_e, far_e)
                if self.magnetised:
                    last_col = max(
                        last_col, K.last_active_column_te(n_cols - 1, te, ground_te, top_hr, far_hz, top_ep, far_ep)
                    )
                n_cols = min(nr, last_col + reach)
            t_h = (step + 0.5) * dt
            t_e = (step + 1) * dt
            if step % 1024 == 0:  # re-anchor the rotors against round-off
                rot_h = np.exp(-1j * w * t_h)
            rot_e = rot_h * rot_half
            K.step_h(fields, curl_h, ground, top_h, far_h, K.Dft(acc_h[0], acc_h[1], rot_h.real, -rot_h.imag), n_cols)
            if self.magnetised:
                K.step_h_te(
                    te, curl_te, ground_te, top_hr, far_hz, K.Dft(acc_hr[0], acc_hr[1], rot_h.real, -rot_h.imag), n_cols
                )
            # every source enters the kernel the same way: current elements in the axis cells from
            # the ground up (one cell for a point source, the channel's cells for a lightning stroke)
            if line_source:
                # a vertical channel: currents in the axis cells, moment = sum I_j dz
                currents = np.asarray(wave.axis_currents(t_h, self.z_ez[:n_line]), float)
                src_kick[:] = self.src_coef_rows[:n_line] * currents
                current = float(currents.sum())
            elif step < n_src:
                current = src[step]
                src_kick[0] = self.src_coef * current
            else:
                current = 0.0
                src_kick[0] = 0.0
            if self.magnetised:
                # triples alternate between the Er node after and before each Ez node (kernels.step_e_mag)
                shift = 1 if step % 2 == 0 else -1
                K.step_e_mag(
                    fields,
                    te,
                    curl_mag,
                    pairing[shift],
                    top_er,
                    top_ep,
                    far_ez,
                    far_ep,
                    src_kick,
                    K.Dft(acc_e[0], acc_e[1], rot_e.real, -rot_e.imag),
                    n_cols,
                )
                if shift < 0 and n_cols >= nr:
                    K.step_er_alone(fields, curl_mag, pairing[shift], self.t_left, top_er, nr - 1)
            else:
                K.step_e(
                    fields,
                    curl_e,
                    plasma_z,
                    plasma_r,
                    top_e,
                    far_e,
                    src_kick,
                    K.Dft(acc_e[0], acc_e[1], rot_e.real, -rot_e.imag),
                    n_cols,
                )
            if current != 0.0:
                acc_i += current * rot_h
            rot_h = rot_h * rot_step
            if probe_cols.size and step % series_every == 0:
                t_series.append(t_e)
                ez_series.append(self.ez[probe_cols, 0].copy())
                h_series.append(0.5 * (self.hp[probe_cols, 0] + self.hp[probe_cols - 1, 0]))
                i_series.append(float(wave(t_e)))
                if line_source:
                    m_series.append(float(np.sum(wave.axis_currents(t_e, self.z_ez[:n_line]))) * self.plan.dz_m)
                else:
                    m_series.append(i_series[-1] * self.plan.dz_m)
            step += 1
            done_cols += n_cols

            if step % guard_every == 0:
                src_peak = self._guard(step, t_e, src_peak, wave.end_s)
            if step >= n_min and step % check_every == 0:
                now = (acc_e[0][:, 1:n_out] + 1j * acc_e[1][:, 1:n_out]) / acc_i[:, None]
                if last is not None and self._converged(now, last, tol, p.dr_m):
                    converged = True
                    break
                last = now
            if progress is not None and step % 200 == 0:
                if done_cols > 0.98 * expected_cols:  # converging later than usual: two more checks
                    expected_cols = done_cols + 2.0 * check_every * nr
                progress(min(done_cols / expected_cols, 0.999), f"step {step}")
        wall = time.perf_counter() - t0
        if progress is not None:
            progress(1.0, "done")

        moment = acc_i * self.plan.dz_m  # DFT of the current moment I dz
        ez = (acc_e[0] + 1j * acc_e[1])[:, 1:n_out] / moment[:, None]
        h_c = (acc_h[0] + 1j * acc_h[1]) / moment[:, None]
        hphi = 0.5 * (h_c[:, 0 : n_out - 1] + h_c[:, 1:n_out])  # H at r_i from r_(i-1/2), r_(i+1/2)
        hr = ephi = None
        if self.magnetised:
            hr = ((acc_hr[0] + 1j * acc_hr[1]) / moment[:, None])[:, 1:n_out]  # Hr sits at the Ez columns
            sig, epr = (g[1:n_out] for g in self.ground_te)
            zs = np.stack([media.leontovich_impedance(2 * math.pi * fk, sig, epr) for fk in self.frequencies_hz])
            ephi = zs * hr  # Leontovich: Ephi = +Zs Hr at the ground
        notes = []
        capacity = whistler_capacity_index(s, float(self.frequencies_hz.max()), p.dz_m)
        if self.magnetised and _has_field(self.medium) and capacity < WHISTLER_INDEX_FLOOR:
            notes.append(
                f"vertical cells of {p.dz_m:.0f} m carry the whistler-mode wave only to index {capacity:.1f}: "
                f"the plasma is held from there up, below {WHISTLER_INDEX_FLOOR:g}, where holding it changes "
                "the field at the ground (choose a finer cell_m)"
            )
        if not converged:
            notes.append(
                f"DFTs still changing by more than {s.convergence_db} dB at the time cap ({self.t_max * 1e3:.1f} ms)"
            )
        res = EngineResult(
            range_m=self.r_ez[1:n_out].copy(),
            frequencies_hz=self.frequencies_hz.copy(),
            ez=ez,
            hphi=hphi,
            plan=self.plan,
            steps=step,
            wall_time_s=wall,
            converged=converged,
            notes=notes,
            probe_ranges_m=self.r_ez[probe_cols] if probe_cols.size else np.zeros(0),
            hr=hr,
            ephi=ephi,
        )
        if t_series:
            res.time_s = np.asarray(t_series)
            res.ez_series = np.asarray(ez_series, float)
            res.hphi_series = np.asarray(h_series, float)
            res.source_current = np.asarray(i_series)
            res.source_moment = np.asarray(m_series)
        return res

    @staticmethod
    def _converged(now, last, tol, dr_m=None):
        """Whether every output changed by less than ``tol`` of its settling level since the last check.

        The level is :func:`settling_level`: the field on the scale of the modal interference. Judged
        against the field's own envelope (+-25 columns), a deep modal null holds the run for changes
        several times smaller, against the field around it, than anywhere else; with the geomagnetic
        field the guide carries a weak, slowly decaying ringing that such nulls magnify. Without ``dr_m`` the level is the former local envelope (+-25 columns).
        """
        level = settling_level(now, dr_m)
        ok = level > 1e-12 * np.max(level)
        change = np.abs(now - last)[ok] / level[ok]
        return bool(change.size == 0 or change.max() < tol)

    def _guard(self, step, t, src_peak, src_end):
        """Stop a run whose fields are non-finite or grow without bound after the source ended."""
        from cavity.fdtd import kernels as K

        peak, flat = K.max_abs(self.ez)
        if self.magnetised:
            peak_te, _ = K.max_abs(self.ephi)
            if not peak_te <= peak:  # also a NaN: the TE set's growth or breakdown stops the run too
                peak = peak_te
        if not math.isfinite(peak) or (t > src_end and src_peak > 0 and peak > 1e4 * src_peak):
            i, j = divmod(int(flat), self.plan.nz)
            r_km, z_km = self.r_ez[i] / 1e3, self.z_ez[j] / 1e3
            region = self._region(i, j)
            raise SolverError(
                f"solver became unstable at step {step} (t = {t * 1e3:.3f} ms): |Ez| = {peak:.3g} V/m "
                f"at r = {r_km:.1f} km, z = {z_km:.1f} km ({region}); no result written"
            )
        return max(src_peak, peak) if t <= src_end * 1.5 else src_peak

    def _region(self, i, j):
        if j >= self.jz0:
            return "top absorber"
        if i >= self.ir0:
            return "far-end absorber"
        if j >= self.jp0:
            return "ionosphere"
        if j <= 1:
            return "ground"
        return "free space below the ionosphere"


def settling_level(values, dr_m: float | None, half_width_m: float = SETTLING_HALF_WIDTH_M) -> np.ndarray:
    """The level against which the settling test judges each output's change: the largest |value| near it.

    ``values`` (..., R) are outputs at ranges ``(i + 1) dr_m``. Windows of +-25 columns, then twice, four
    times ... as wide up to +-``half_width_m``; each output takes the widest window that stays beyond half
    its range, so that the strong field near the transmitter never sets the level farther out. Without
    ``dr_m`` only the +-25-column window is used.
    """
    from scipy.ndimage import maximum_filter1d

    a = np.abs(values)
    h = SETTLING_HALF_WIDTH_CELLS
    level = maximum_filter1d(a, size=2 * h + 1, axis=-1)
    if dr_m is None:
        return level
    widest = int(half_width_m // dr_m)
    column = np.arange(1, a.shape[-1] + 1)
    while h < widest:
        h = min(2 * h, widest)
        wide = maximum_filter1d(a, size=2 * h + 1, axis=-1)
        level = np.where(column >= 2 * h, np.maximum(level, wide), level)
    return level


def run(medium: Medium, settings: Settings, progress=None) -> EngineResult:
    """Build and run one solve (see :class:`Simulation`)."""
    return Simulation(medium, settings).run(progress)
