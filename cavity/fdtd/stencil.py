"""Spatial difference stencils of the (r, z) scheme as coefficient tables, their dispersion relation
and a plain-numpy form of the curl operators.

The engine offers two spatial schemes on the same staggered (Yee) grid:

- order 2: the Yee scheme, d/dx f at x = (f(x + dx/2) - f(x - dx/2)) / dx;
- order 4 (default): the staggered fourth-order difference of the (2,4) scheme (Fang 1989;
  Taflove and Hagness 2005, ch. 4: c1 = 9/8, c2 = 1/24),

      d/dx f  =  [c1 (f(x + dx/2) - f(x - dx/2)) - c2 (f(x + 3dx/2) - f(x - 3dx/2))] / dx,

  in the interior, in range and in height. Next to the ground (two rows), in the absorbers and one
  cell before them, and under a conducting ceiling, where the wide stencil would read across a
  boundary, the rows fall back to second order. At the axis Ez is even and H_phi odd in r, so the
  fourth-order stencil reads their mirror values there; the axis cell itself keeps the Yee rule
  eps dEz(0)/dt = 4 H(dr/2)/dr - Jz (Ampere's law on the disc of radius dr/2).

The kernels (:mod:`cavity.fdtd.kernels`) read these tables; they do not know which order is in use.
Every table holds the dispersion factor ``gamma`` (:func:`dispersion_factor`).

Tables (float32 as the kernels take them):

- ``ar1``, ``ar2`` (column i): dEz/dr at r_(i+1/2) = ar1 (Ez_(i+1) - Ez_i) + ar2 (Ez_(i+2) - Ez_(i-1)),
  with Ez_(-1) read as Ez_1 on the axis (``ar2`` = 0 where the stencil is second order);
- ``er_coef`` (column, 4): the Ez curl (1/r) d(r H)/dr at r_i = sum of the four coefficients times
  H_(i+1), H_i, H_(i-1), H_(i-2) (H_k at r_(k+1/2); indices below zero folded in);
- ``kz1``, ``kz2`` (row j of H): dEr/dz at z_(j+1/2) = kz1 (Er_(j+1) - Er_j) + kz2 (Er_(j+2) - Er_(j-1));
- ``ke1``, ``ke2`` (row j of Er): dH/dz at z_j = ke1 (H_j - H_(j-1)) + ke2 (H_(j+1) - H_(j-2)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Fourth-order staggered difference weights (Taflove and Hagness 2005, ch. 4).
C1, C2 = 9.0 / 8.0, 1.0 / 24.0
#: Columns a time step (H then E) can carry a nonzero value outward, per order (kernels reach:
#: H_i reads Ez_(i-1)..Ez_(i+2), Ez_i reads H_(i-2)..H_(i+1)).
REACH_COLUMNS = {2: 1, 4: 3}
#: Angles from grazing over which :func:`dispersion_factor` balances the phase error, deg.
DESIGN_ANGLES_DEG = (0.0, 60.0)


@dataclass(frozen=True)
class Stencil:
    """Coefficient tables of one grid (see the module docstring)."""

    order: int
    gamma: float
    ar1: np.ndarray
    ar2: np.ndarray
    er_coef: np.ndarray  # (nr, 4): H_(i+1), H_i, H_(i-1), H_(i-2)
    kz1: np.ndarray
    kz2: np.ndarray
    ke1: np.ndarray
    ke2: np.ndarray
    axis_area_m2: float  # area of the axis cell that carries the source current
    te_e: np.ndarray  # (nr, 4): dHz/dr at r_i from Hz_(i+1), Hz_i, Hz_(i-1), Hz_(i-2) (TE set, Ephi update)
    te_h: np.ndarray  # (nr, 4): (1/r) d(r Ephi)/dr at r_(i+1/2) from Ephi_(i+2), Ephi_(i+1), Ephi_i, Ephi_(i-1)

    @property
    def reach_columns(self) -> int:
        return REACH_COLUMNS[self.order]


def spatial_symbol(k: np.ndarray | float, d: float, order: int) -> np.ndarray:
    """Discrete counterpart of k/2 for a plane wave exp(-j k x): the difference operator's symbol.

    Order 2: sin(k d/2)/d. Order 4: (c1 sin(k d/2) - c2 sin(3 k d/2))/d.
    """
    k = np.asarray(k, float)
    if order == 2:
        return np.sin(k * d / 2) / d
    return (C1 * np.sin(k * d / 2) - C2 * np.sin(3 * k * d / 2)) / d


def numerical_wavenumber(
    f_hz: float,
    angle_deg,
    dr: float,
    dz: float,
    dt: float,
    order: int,
    gamma: float = 1.0,
    c: float = 299_792_458.0,
    vertical_order: int | None = None,
) -> np.ndarray:
    """Wavenumber k of a plane wave at ``angle_deg`` from grazing that the interior scheme propagates.

    Discrete dispersion relation of leapfrog in time with the spatial symbols S (Taflove and Hagness
    2005, ch. 4): sin^2(w dt/2)/(c dt)^2 = gamma^2 [S_r(k cos a)^2 + S_z(k sin a)^2], solved for k by
    Newton's method from the exact k = w/c. ``order`` is the radial order, ``vertical_order`` (default
    the same) the vertical one.
    """
    vo = order if vertical_order is None else vertical_order
    w = 2 * math.pi * f_hz
    lhs = (math.sin(w * dt / 2) / (c * dt)) ** 2
    a = np.radians(np.asarray(angle_deg, float))
    ca, sa = np.cos(a), np.sin(a)
    k = np.full(a.shape, w / c)
    for _ in range(30):
        g = gamma**2 * (spatial_symbol(k * ca, dr, order) ** 2 + spatial_symbol(k * sa, dz, vo) ** 2) - lhs
        h = 1e-7 * k
        gp = gamma**2 * (spatial_symbol((k + h) * ca, dr, order) ** 2 + spatial_symbol((k + h) * sa, dz, vo) ** 2) - lhs
        k = k - g * h / (gp - g)
    return k


def phase_velocity_error(f_hz, angle_deg, dr, dz, dt, order, gamma=1.0, c=299_792_458.0):
    """Relative phase velocity error v/c - 1 = k_exact/k_numerical - 1 of the interior scheme."""
    return (2 * math.pi * f_hz / c) / numerical_wavenumber(f_hz, angle_deg, dr, dz, dt, order, gamma, c) - 1.0


def dispersion_factor(
    frequencies_hz,
    dr: float,
    dz: float,
    dt: float,
    order: int,
    c: float = 299_792_458.0,
    angles_deg=DESIGN_ANGLES_DEG,
    vertical_order: int | None = None,
) -> float:
    """Factor gamma on every spatial difference that balances the phase error over a band of angles.

    With gamma = 1 a wave at the design frequency (the RMS of the requested frequencies) and angle a
    from grazing has the relation sin^2(w dt/2)/(c dt)^2 = S_r^2 + S_z^2 at its numerical k. gamma^2
    is the mean, over angles spread evenly across ``angles_deg``, of the exact-k ratio of the two
    sides, so that the phase velocity error is balanced across the band rather than zero at one
    angle: the modified-coefficient (dispersion-optimised) FDTD at a design frequency (Taflove and
    Hagness 2005, ch. 4; Shlager and Schneider 2003, IEEE TAP 51(3) 642). For the fourth-order
    stencil the spatial error is nearly isotropic and small, and gamma mainly removes the time
    step's own (isotropic) lag; for the Yee stencil the error depends strongly on the angle.
    ``order`` is the radial order, ``vertical_order`` (default the same) the vertical one.
    """
    vo = order if vertical_order is None else vertical_order
    f = float(np.sqrt(np.mean(np.square(np.asarray(frequencies_hz, float)))))
    w = 2 * math.pi * f
    k = w / c
    a = np.radians(np.linspace(angles_deg[0], angles_deg[1], 13))
    lhs = (math.sin(w * dt / 2) / (c * dt)) ** 2
    rhs = spatial_symbol(k * np.cos(a), dr, order) ** 2 + spatial_symbol(k * np.sin(a), dz, vo) ** 2
    return float(math.sqrt(np.mean(lhs / rhs)))


def edge_factor(
    frequencies_hz,
    dr: float,
    dz: float,
    dt: float,
    gamma: float,
    c: float = 299_792_458.0,
    vertical_order: int = 4,
) -> float:
    """Factor on the second-order radial differences of the far end that matches the interior.

    Where the fourth-order rows fall back to second order (the cell before the far absorber and the
    absorber itself), the same ``gamma`` would leave a grazing wave there about 0.5 % slower than in
    the interior at 16 cells per wavelength: a step in the numerical wavenumber that reflects about
    -50 dB back along the guide, which the DFTs then take a millisecond or more to shed (measured:
    the settling tail of the 3,000 km day path). Choosing the edge factor so that the second-order
    scheme's grazing wavenumber at the design frequency equals the interior's (same discrete
    dispersion relation, :func:`numerical_wavenumber`) makes the interface transparent there to first
    order in the wavenumber step: the transition-region matching of hybrid-order FDTD grids
    (Taflove and Hagness 2005, ch. 4 on dispersion-matched coefficients).
    """
    f = float(np.sqrt(np.mean(np.square(np.asarray(frequencies_hz, float)))))
    w = 2 * math.pi * f
    k4 = float(numerical_wavenumber(f, 0.0, dr, dz, dt, 4, gamma, c, vertical_order))
    lhs = (math.sin(w * dt / 2) / (c * dt)) ** 2
    return float(math.sqrt(lhs) / spatial_symbol(k4, dr, 2))


def build(
    nr: int,
    nz: int,
    dr: float,
    dz: float,
    *,
    order: int,
    gamma: float,
    ir0: int,
    jz0: int,
    radial_gamma_only: bool = False,
    edge_gamma: float | None = None,
    vertical_order: int | None = None,
) -> Stencil:
    """Coefficient tables of one grid: ``nr`` Ez columns (axis first), ``nz`` H rows, the far-end
    absorber from column ``ir0`` and the top absorber (or a conducting ceiling, ``jz0 = nz``) from
    row ``jz0``.

    ``radial_gamma_only`` applies gamma to the radial differences only (the Yee scheme's
    former grazing correction); used for comparisons. ``edge_gamma`` (order 4 only) replaces gamma
    in the second-order radial differences from the cell before the far absorber on
    (:func:`edge_factor`). ``order`` is the radial order; ``vertical_order`` (default the same) the
    vertical one (fourth order in both by default, with or without the geomagnetic field; second
    order in height when the six-component scheme keeps the former whistler rule,
    ``whistler_cap_index`` = inf).

    The tables of the TE set (``te_e``, ``te_h``) are built like those of the TM set with the roles
    of E and H exchanged: Ephi sits where Ez does and Hz where H_phi does, but Hz is even in r and
    Ephi odd (r Ephi even), so the axis folds take the other signs.
    """
    vo = order if vertical_order is None else int(vertical_order)
    if order not in (2, 4) or vo not in (2, 4):
        raise ValueError(f"stencil order = ({order!r}, {vo!r}): each must be 2 or 4")
    gr = gamma
    gz = 1.0 if radial_gamma_only else gamma
    r_ez = np.arange(nr) * dr
    # ---- radial, H update (columns i: H at r_(i+1/2))
    ar1 = np.full(nr, gr / dr)
    ar2 = np.zeros(nr)
    # ---- radial, Ez update: coefficients of H_(i+1), H_i, H_(i-1), H_(i-2)
    ec = np.zeros((nr, 4))
    inv_r = np.zeros(nr)
    inv_r[1:] = 1.0 / r_ez[1:]
    # second order everywhere first: (H_i - H_(i-1)) gr/dr + (H_i + H_(i-1)) / (2 r_i)
    ec[1:, 1] = gr / dr + 0.5 * inv_r[1:]
    ec[1:, 2] = -(gr / dr - 0.5 * inv_r[1:])
    ec[0, 1] = 4.0 * gr / dr  # Yee axis: Ampere's law on the disc of radius dr/2
    axis_area = math.pi * (dr / 2) ** 2
    kz1 = np.full(nz, gz / dz)
    kz2 = np.zeros(nz)
    ke1 = np.full(nz + 1, gz / dz)
    ke1[0] = ke1[nz] = 0.0  # Er rows 0 (ground) and nz (wall) are not stepped
    ke2 = np.zeros(nz + 1)
    r_h = (np.arange(nr) + 0.5) * dr
    # TE set, second order everywhere first: dHz/dr at r_i = (Hz_i - Hz_(i-1)) gr/dr (row 0 unused,
    # Ephi is zero on the axis); (1/r) d(r E)/dr at r_(i+1/2) = (E_(i+1) - E_i) gr/dr + (E_(i+1) + E_i)/(2 r)
    te_e = np.zeros((nr, 4))
    te_e[1:, 1], te_e[1:, 2] = gr / dr, -gr / dr
    te_h = np.zeros((nr, 4))
    te_h[:, 1] = gr / dr + 0.5 / r_h
    te_h[:, 2] = -(gr / dr - 0.5 / r_h)
    if order == 4:
        # H columns 0 .. ir0-2 read Ez up to i+2 <= ir0 (the absorber and the cell before it are second order)
        hi = max(0, ir0 - 1)
        if edge_gamma is not None:
            ge = float(edge_gamma)
            ar1[hi:] = ge / dr
            edge = np.arange(max(1, hi), nr)
            ec[edge, 1] = ge / dr + 0.5 * inv_r[edge]
            ec[edge, 2] = -(ge / dr - 0.5 * inv_r[edge])
            te_e[edge, 1], te_e[edge, 2] = ge / dr, -ge / dr
            te_h[hi:, 1] = ge / dr + 0.5 / r_h[hi:]
            te_h[hi:, 2] = -(ge / dr - 0.5 / r_h[hi:])
        ar1[:hi] = C1 * gr / dr
        ar2[:hi] = -C2 * gr / dr
        # Ez columns 1 .. ir0-2: (1/r) d(rH)/dr = D4 H + I4 H / r, I4 the fourth-order midpoint value
        i = np.arange(1, max(1, ir0 - 1))
        d1, d2 = C1 * gr / dr, C2 * gr / dr
        w1, w2 = 9.0 / 16.0, 1.0 / 16.0
        ec[i, 0] = -d2 - w2 * inv_r[i]  # H_(i+1)
        ec[i, 1] = d1 + w1 * inv_r[i]  # H_i
        ec[i, 2] = -d1 + w1 * inv_r[i]  # H_(i-1)
        ec[i, 3] = d2 - w2 * inv_r[i]  # H_(i-2)
        if i.size and i[0] == 1:
            # H_(-1) = -H_0 (H_phi is odd in r): fold the H_(i-2) coefficient of column 1 into H_0
            ec[1, 2] -= ec[1, 3]
            ec[1, 3] = 0.0
        # TE: Ephi columns 1 .. ir0-2 (dHz/dr, fourth order; Hz_(-1) = +Hz_0, Hz being even in r)
        te_e[i, 0], te_e[i, 1], te_e[i, 2], te_e[i, 3] = -d2, d1, -d1, d2
        if i.size and i[0] == 1:
            te_e[1, 2] += te_e[1, 3]
            te_e[1, 3] = 0.0
        # Hz columns 0 .. ir0-2, reading Ephi up to i+2 <= ir0: (1/r) d(rE)/dr = D4 E + I4 E / r;
        # Ephi_(-1) = -Ephi_1 (odd in r): column 0's Ephi_(i-1) coefficient folds into Ephi_1
        k = np.arange(0, hi)
        te_h[k, 0] = -d2 - w2 / r_h[k]  # E_(i+2)
        te_h[k, 1] = d1 + w1 / r_h[k]  # E_(i+1)
        te_h[k, 2] = -d1 + w1 / r_h[k]  # E_i
        te_h[k, 3] = d2 - w2 / r_h[k]  # E_(i-1)
        if k.size:
            te_h[0, 1] -= te_h[0, 3]
            te_h[0, 3] = 0.0
        # axis: the Yee disc rule stays (ec[0] above). Its adjoint partner, (6 H_0 - (2/3) H_1)/dr on
        # a cell of weight 3 dr^2/32, would lower the stability limit from 0.594 to 0.547 dz/c
        # (dr = dz, power iteration): the axis cell, not the interior, sets the limit.
    if vo == 4:
        # vertical: H rows 2 .. jz0-1 with Er_(j+2) <= nz; Er rows 2 .. min(jz0-1, nz-2)
        j = np.arange(2, min(jz0, nz - 1))
        kz1[j], kz2[j] = C1 * gz / dz, -C2 * gz / dz
        j = np.arange(2, min(jz0, nz - 1))
        ke1[j], ke2[j] = C1 * gz / dz, -C2 * gz / dz
    f32 = np.float32
    return Stencil(
        order,
        float(gamma),
        ar1.astype(f32),
        ar2.astype(f32),
        np.ascontiguousarray(ec, dtype=f32),
        kz1.astype(f32),
        kz2.astype(f32),
        ke1.astype(f32),
        ke2.astype(f32),
        axis_area,
        np.ascontiguousarray(te_e, dtype=f32),
        np.ascontiguousarray(te_h, dtype=f32),
    )


# --------------------------------------------------------------------------- plain-numpy operators
def curl_e(st: Stencil, ez: np.ndarray, er: np.ndarray) -> np.ndarray:
    """dEz/dr - dEr/dz at the H points (nr, nz), Ez = 0 beyond the last column, ground row as a
    conducting plane (Er row 0 read as stored)."""
    nr, nz = ez.shape
    pad = np.zeros((nr + 3, nz))
    pad[1 : nr + 1] = ez
    pad[0] = ez[1] if nr > 1 else 0.0  # Ez_(-1) = Ez_1
    e_m1, e_0, e_p1, e_p2 = pad[0:nr], pad[1 : nr + 1], pad[2 : nr + 2], pad[3 : nr + 3]
    dez = st.ar1[:, None] * (e_p1 - e_0) + st.ar2[:, None] * (e_p2 - e_m1)
    erp = np.zeros((nr, nz + 3))
    erp[:, 1 : nz + 2] = er
    # Er_(-1) never enters (kz2 = 0 in the rows next to the ground); Er_(nz+1) neither
    d_er = st.kz1[None, :] * (erp[:, 2 : nz + 2] - erp[:, 1 : nz + 1]) + st.kz2[None, :] * (
        erp[:, 3 : nz + 3] - erp[:, 0:nz]
    )
    return dez - d_er


def curl_h(st: Stencil, hp: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """((1/r) d(r H)/dr at the Ez points (nr, nz), -dH/dz at the Er points (nr, nz + 1), rows 0 and nz zero)."""
    nr, nz = hp.shape
    pad = np.zeros((nr + 3, nz))
    pad[2 : nr + 2] = hp  # pad[k + 2] = H_k; H_(-1), H_(-2) enter with zero coefficients
    c = st.er_coef
    cz = c[:, 0:1] * pad[3 : nr + 3] + c[:, 1:2] * pad[2 : nr + 2] + c[:, 2:3] * pad[1 : nr + 1] + c[:, 3:4] * pad[0:nr]
    hz = np.zeros((nr, nz + 2))
    hz[:, 1 : nz + 1] = hp  # hz[:, j + 1] = H_j
    j = np.arange(1, nz)
    cr = np.zeros((nr, nz + 1))
    cr[:, j] = -(
        st.ke1[j] * (hz[:, j + 1] - hz[:, j])
        + st.ke2[j] * (hz[:, np.minimum(j + 2, nz + 1)] - hz[:, np.maximum(j - 1, 0)])
    )
    return cz, cr
