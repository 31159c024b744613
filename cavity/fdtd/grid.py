"""Grid sizing for the axisymmetric (r, z) Yee grid: cell sizes, time step, domain and memory.

Layout (Taflove and Hagness 2005, ch. 12 body-of-revolution FDTD, m = 0):

- ``ez[i, j]`` at (r = i dr, z = (j + 1/2) dz), i = 0..nr-1 (i = 0 is the axis);
- ``er[i, j]`` at (r = (i + 1/2) dr, z = j dz), j = 0..nz (j = 0 is the ground, j = nz the top wall);
- ``hphi[i, j]`` at (r = (i + 1/2) dr, z = (j + 1/2) dz).

The stability limit of this scheme is below the 2-D Cartesian one because of the on-axis update
(docs/physics.md 2: c dt = 0.6728 d for dr = dz = d); it is found here by power iteration on the
discrete curl-curl operator, so any aspect ratio dr/dz is handled.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from cavity.constants import C0
from cavity.errors import ResourceError, SolverError

#: Default resolution along range, cells per free-space wavelength at the highest frequency. With
#: the fourth-order stencil, 16 keeps 3,000 km day and several-mode night guides within 0.15 dB of
#: the normal-mode reference and conducting plates within a few tenths of a dB of the mode sum
#: (README, "Accuracy and speed": the measured table for the three kinds of guide).
DEFAULT_CELLS_PER_WAVELENGTH = 16.0
#: Largest vertical cell: resolves the profile scale 1/beta (docs/physics.md 2).
MAX_DZ_M = 500.0
#: Vertical cells per profile scale 1/beta (the steepest d ln(omega_p^2/nu)/dz) of the isotropic runs
#: (docs/physics.md 2); runs with the geomagnetic field use their own (Settings.field_cells_per_scale).
CELLS_PER_PROFILE_SCALE = 3.0
#: Smallest vertical cell any automatic rule chooses (a user's ``dz_m`` may go below it).
MIN_DZ_M = 100.0
#: Fraction of the stability limit used for the time step.
COURANT_SAFETY = 0.95
#: Default absorbing-layer thickness in cells (docs/physics.md 4: 20 cells, m = 3).
DEFAULT_PML_CELLS = 20
#: Bytes per grid cell of the engine (float32 fields, coefficients and auxiliary arrays).
BYTES_PER_CELL = 4 * 16
#: The same with the geomagnetic field: Ephi, Hr, Hz and the azimuthal current of the six-component
#: kernels add seven float32 per cell (with the absorbers' memories and the coefficient tables).
BYTES_PER_CELL_MAGNETISED = 4 * 23
#: Steps between the engine's searches for the wave front; in between it steps that many columns
#: beyond the last active one (:func:`cavity.fdtd.kernels.last_active_column`).
FRONT_SEARCH_STEPS = 64
#: Columns stepped ahead of the front c t on average: the numerical precursor that runs ahead of it
#: until flushed to zero (measured 55-110 columns on the 3,000 km day grid at 625 m with the Yee
#: stencil) and the search margin, three columns per step between searches with the fourth-order
#: stencil (:data:`cavity.fdtd.stencil.REACH_COLUMNS`). Used only to predict run times.
FRONT_LEAD_COLUMNS = 100 + 3 * FRONT_SEARCH_STEPS
#: Steps a run takes beyond its planned minimum before the DFTs converge, as a share of the planned
#: steps, for the cost model. Measured with the fourth-order stencil: +23 % and +63 % (main and
#: uncertainty companion solves of examples/uniform_night.toml), +37 % and +45 % (a 1,200 km night
#: path on 1 km cells), +31 % (the 3,000 km day path of ``cavity bench --whole``); a value inside that
#: spread is used, so a time left is good to about 25 %.
CONVERGENCE_TAIL_SHARE = 0.4


@functools.lru_cache(maxsize=64)
def stability_factor(
    aspect: float, size: int = 48, iterations: int = 2000, order: int = 4, vertical_order: int | None = None
) -> float:
    """Largest stable ``c dt / dz`` for the axisymmetric scheme with ``dr = aspect * dz``.

    Power iteration on K = -curlH(curlE(.)) (fields in units with c = 1, dz = 1) gives its largest
    eigenvalue lambda; the leapfrog scheme is stable for c dt <= 2 / sqrt(lambda). The operators
    are the engine's own stencil tables (:mod:`cavity.fdtd.stencil`) on a small grid with the axis,
    a conducting ground, an 8-cell second-order band at the far end and at the top (as next to the
    absorbers) and conducting walls beyond, so every closure of the stencil is included.
    """
    from cavity.fdtd import stencil

    dr, dz = float(aspect), 1.0
    nr, nz = size, size
    band = 8
    st = stencil.build(
        nr, nz, dr, dz, order=order, gamma=1.0, ir0=nr - band, jz0=nz - band, vertical_order=vertical_order
    )
    rng = np.random.default_rng(1)
    ez = rng.standard_normal((nr, nz))
    er = rng.standard_normal((nr, nz + 1))
    er[:, 0] = er[:, -1] = 0.0
    lam = 0.0
    for _ in range(iterations):
        h = stencil.curl_e(st, ez, er)
        new_ez, new_er = stencil.curl_h(st, h)
        # K = -curlH curlE; power iteration on K
        new_ez, new_er = -new_ez, -new_er
        norm = math.sqrt(float(np.sum(new_ez**2) + np.sum(new_er**2)))
        old = math.sqrt(float(np.sum(ez**2) + np.sum(er**2)))
        lam = norm / old
        ez, er = new_ez / norm, new_er / norm
    return 2.0 / math.sqrt(lam)


@dataclass(frozen=True)
class GridPlan:
    """Sizes of one solve. Lengths in m, times in s."""

    dr_m: float
    dz_m: float
    dt_s: float
    nr: int  # Ez columns including the axis and the far-end absorber
    nz: int  # Ez rows including the top absorber (or up to a perfectly conducting ceiling)
    pml_r_cells: int
    pml_z_cells: int  # 0 under a perfectly conducting ceiling
    max_range_m: float
    top_m: float  # top of the physical domain (below the absorber)
    n_steps: int  # planned number of time steps (the engine may stop earlier once converged)
    magnetised: bool = False  # six components with the geomagnetic field
    taper_r_cells: int = 0  # columns before the far-end absorber where the geomagnetic field fades out

    @property
    def range_columns(self) -> int:
        """Output columns along the ground: every Ez column but the axis, the field's fade-out and the
        far-end absorber."""
        return self.nr - self.pml_r_cells - self.taper_r_cells - 1

    @property
    def cells(self) -> int:
        return self.nr * self.nz

    @property
    def memory_bytes(self) -> int:
        """Estimate of the engine's memory for this grid (fields, coefficients, auxiliaries)."""
        per_cell = BYTES_PER_CELL_MAGNETISED if self.magnetised else BYTES_PER_CELL
        return int(self.cells * per_cell + 64 * 1024**2)

    @property
    def cell_updates(self) -> float:
        """Cell updates of the planned steps over the whole grid."""
        return float(self.cells) * float(self.n_steps)

    @property
    def stepped_cell_updates(self) -> float:
        """Cell updates the engine is expected to make: while the wave first crosses the grid only
        the columns it has reached are stepped (plus :data:`FRONT_LEAD_COLUMNS`)."""
        return self.stepped_columns() * float(self.nz)

    def stepped_columns(self) -> float:
        """Columns stepped over the planned steps (the sum over steps of the columns the wave has reached)."""
        n = np.arange(1, self.n_steps + 1, dtype=float)
        columns = np.minimum(self.nr, np.ceil(n * C0 * self.dt_s / self.dr_m) + FRONT_LEAD_COLUMNS)
        return float(columns.sum())

    @property
    def expected_cell_updates(self) -> float:
        """The cost model of a whole run: :attr:`stepped_cell_updates` plus the steps beyond the
        planned minimum that convergence usually takes (:data:`CONVERGENCE_TAIL_SHARE`), over the
        whole grid."""
        return (self.stepped_columns() + CONVERGENCE_TAIL_SHARE * self.n_steps * self.nr) * float(self.nz)


def default_cells(
    frequency_max_hz: float,
    beta_max_per_m: float | None = None,
    cells_per_wavelength: float = DEFAULT_CELLS_PER_WAVELENGTH,
    cells_per_scale: float = CELLS_PER_PROFILE_SCALE,
) -> tuple[float, float]:
    """Default (dr, dz) in m: range resolves the shortest wavelength, height also the profile scale
    (``cells_per_scale`` cells per 1/beta, not below 100 m)."""
    if not frequency_max_hz > 0:
        raise SolverError(f"frequency = {frequency_max_hz!r} Hz: must be > 0")
    dr = C0 / frequency_max_hz / cells_per_wavelength
    dz = min(dr, MAX_DZ_M)
    if beta_max_per_m:
        dz = min(dz, max(1.0 / (cells_per_scale * beta_max_per_m), MIN_DZ_M))
    return dr, dz


def plan_grid(
    max_range_m: float,
    frequency_max_hz: float,
    top_m: float,
    *,
    duration_s: float,
    dr_m: float | None = None,
    dz_m: float | None = None,
    beta_max_per_m: float | None = None,
    ceiling: bool = False,
    pml_cells: int = DEFAULT_PML_CELLS,
    cells_per_wavelength: float = DEFAULT_CELLS_PER_WAVELENGTH,
    courant_safety: float = COURANT_SAFETY,
    stencil_order: int = 4,
    vertical_order: int | None = None,
    dz_max_m: float | None = None,
    taper_m: float = 0.0,
    cells_per_scale: float = CELLS_PER_PROFILE_SCALE,
) -> GridPlan:
    """Size the grid and the time step for one solve.

    Parameters
    ----------
    max_range_m : farthest range that must be computed (the absorber starts beyond it).
    frequency_max_hz : highest frequency of interest (sets dr).
    top_m : top of the physical domain: a perfectly conducting ceiling if ``ceiling``, else the
        bottom of the top absorber.
    duration_s : simulated time the run needs.
    dr_m, dz_m : user override of the cells; default from :func:`default_cells`.
    stencil_order, vertical_order : orders of the radial and the vertical differences (the latter
        as the former when not given); they set the stability limit of the time step.
    dz_max_m : a further cap on the default vertical cell (not below :data:`MIN_DZ_M`); with the
        geomagnetic field, the whistler-mode rule of :func:`cavity.fdtd.engine.make_plan`.
    taper_m : length beyond the margin and before the far-end absorber over which the engine fades
        the geomagnetic field out (0 without a field); no output lies there.
    cells_per_scale : vertical cells per profile scale 1/beta (:func:`default_cells`).
    """
    dr_auto, dz_auto = default_cells(frequency_max_hz, beta_max_per_m, cells_per_wavelength, cells_per_scale)
    dr = float(dr_m) if dr_m else dr_auto
    if dz_max_m:
        dz_auto = min(dz_auto, max(float(dz_max_m), MIN_DZ_M))
    dz = float(dz_m) if dz_m else (min(dz_auto, dr) if not dr_m else min(dr, dz_auto))
    margin = 10  # cells between the farthest output and the absorber
    taper = int(math.ceil(taper_m / dr)) if taper_m > 0 else 0
    nr = int(math.ceil(max_range_m / dr)) + margin + taper + pml_cells + 1
    pml_z = 0 if ceiling else pml_cells
    nz = int(round(top_m / dz)) + pml_z
    if ceiling and abs(nz * dz - top_m) > 1e-6 * top_m:
        dz = top_m / nz  # the ceiling must sit exactly on an Er row
    dt = (
        courant_safety
        * stability_factor(round(dr / dz, 4), order=int(stencil_order), vertical_order=vertical_order)
        * dz
        / C0
    )
    n_steps = int(math.ceil(duration_s / dt))
    return GridPlan(
        dr_m=dr,
        dz_m=dz,
        dt_s=dt,
        nr=nr,
        nz=nz,
        pml_r_cells=pml_cells,
        pml_z_cells=pml_z,
        max_range_m=float(max_range_m),
        top_m=float(top_m),
        n_steps=n_steps,
        taper_r_cells=taper,
    )


def check_memory(plan: GridPlan, available_bytes: int | None = None) -> None:
    """Refuse a grid that will not fit in available memory, naming a coarser cell that would."""
    if available_bytes is None:
        available_bytes = available_memory_bytes()
    need = plan.memory_bytes
    if need <= 0.8 * available_bytes:
        return
    scale = math.sqrt(need / (0.8 * available_bytes))
    raise ResourceError(
        f"grid of {plan.nr} x {plan.nz} cells of {plan.dr_m:g} m x {plan.dz_m:g} m needs about {need / 1e9:.1f} GB "
        f"but {available_bytes / 1e9:.1f} GB is available; use solver.cell_m >= "
        f"{math.ceil(max(plan.dr_m, plan.dz_m) * scale)} or a shorter solver.max_range_km"
    )


def available_memory_bytes() -> int:
    """Memory available to this process (Linux /proc/meminfo; psutil if present)."""
    try:
        import psutil

        return int(psutil.virtual_memory().available)
    except Exception:  # pragma: no cover - psutil is optional
        pass
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:  # pragma: no cover
        pass
    return 8 * 1024**3
