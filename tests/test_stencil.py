"""The spatial stencil: its dispersion, derived and measured, and its stability limit.

Sources: the discrete dispersion relation of leapfrog time stepping with staggered differences and
the (2,4) weights 9/8, -1/24 (Taflove and Hagness 2005, Computational Electrodynamics, 3rd ed.,
ch. 4); the mode wavenumbers of a parallel-plate guide, k_n = sqrt(k^2 - (n pi/h)^2) (Wait 1960, J.
Res. NBS 64D(2) 153); the (2,4) scheme's 2-D Cartesian Courant limit, 6/7 of the Yee limit
(Taflove and Hagness 2005, ch. 4).
"""

import math

import numpy as np
import pytest

from cavity.constants import C0
from cavity.fdtd import engine as eng
from cavity.fdtd import grid, stencil

F_HZ = 20e3
LAMBDA = C0 / F_HZ


def _default_grid():
    dr, dz = grid.default_cells(F_HZ)
    dt = grid.COURANT_SAFETY * grid.stability_factor(round(dr / dz, 4), order=4) * dz / C0
    return dr, dz, dt


def test_fourth_order_symbol_matches_its_taylor_series():
    # (c1 sin(x/2) - c2 sin(3x/2)) = (x/2)(1 - 3 x^4/640 + ...) for x = k d (Taflove and Hagness ch. 4):
    # the leading error is fourth order, the second-order term cancels.
    for x in (0.05, 0.1, 0.2):
        s = stencil.spatial_symbol(x, 1.0, 4)
        assert s / (x / 2) - 1 == pytest.approx(-3 * x**4 / 640, rel=0.02)
        yee = stencil.spatial_symbol(x, 1.0, 2)
        assert yee / (x / 2) - 1 == pytest.approx(-(x**2) / 24, rel=0.02)


def test_tables_act_on_a_plane_wave_as_the_derived_symbol():
    """The engine's own curl operators (the tables) applied to a discrete plane wave in the interior
    give the eigenvalue of the derived relation, -4 gamma^2 (S_r^2 + S_z^2)."""
    dr, dz = 600.0, 500.0
    nr = nz = 60
    st = stencil.build(nr, nz, dr, dz, order=4, gamma=1.0, ir0=nr - 8, jz0=nz - 8)
    k = 2 * math.pi / (16 * dr)
    for angle in (0.0, 30.0, 60.0):
        kr, kz = k * math.cos(math.radians(angle)), k * math.sin(math.radians(angle))
        # Cartesian plane wave: check far from the axis, where 1/r terms are small, on dEz/dr - dEr/dz
        # then (d/dr, d/dz) again: apply curl_e to Ez = exp(-j(kr r + kz z)) with Er = 0 and read the
        # r-derivative symbol, and to Er = exp(...) with Ez = 0 for the z one.
        r = np.arange(nr)[:, None] * dr
        z = (np.arange(nz)[None, :] + 0.5) * dz
        ez = np.exp(-1j * (kr * r + kz * z))
        h_from_ez = stencil.curl_e(st, ez.real, np.zeros((nr, nz + 1))) + 1j * stencil.curl_e(
            st, ez.imag, np.zeros((nr, nz + 1))
        )
        i, j = 30, 30
        ratio = h_from_ez[i, j] / np.exp(-1j * (kr * (i + 0.5) * dr + kz * (j + 0.5) * dz))
        assert ratio == pytest.approx(-2j * stencil.spatial_symbol(kr, dr, 4), rel=1e-6)  # float32 tables
        ze = np.arange(nz + 1)[None, :] * dz
        er = np.exp(-1j * (kr * (r + dr / 2) + kz * ze))
        h_from_er = stencil.curl_e(st, np.zeros((nr, nz)), er.real) + 1j * stencil.curl_e(
            st, np.zeros((nr, nz)), er.imag
        )
        ratio = -h_from_er[i, j] / np.exp(-1j * (kr * (i + 0.5) * dr + kz * (j + 0.5) * dz))
        assert ratio == pytest.approx(-2j * stencil.spatial_symbol(kz, dz, 4), rel=1e-6)  # float32 tables


def _yee_grazing_error(angle_deg, dr, dz):
    """v/c - 1 of the Yee stencil with the former correction (radial differences only, exact at grazing)."""
    from scipy.optimize import brentq

    dt = grid.COURANT_SAFETY * grid.stability_factor(round(dr / dz, 4), order=2) * dz / C0
    g = eng.radial_dispersion_factor([F_HZ], dr, dt)
    k = 2 * math.pi * F_HZ / C0
    lhs = (math.sin(math.pi * F_HZ * dt) / (C0 * dt)) ** 2
    a = math.radians(angle_deg)

    def relation(kk):
        return (
            g**2 * stencil.spatial_symbol(kk * math.cos(a), dr, 2) ** 2
            + stencil.spatial_symbol(kk * math.sin(a), dz, 2) ** 2
            - lhs
        )

    return k / brentq(relation, 0.9 * k, 1.1 * k) - 1


@pytest.mark.parametrize("angle_deg", [0.0, 15.0, 30.0, 45.0, 60.0])
def test_derived_phase_velocity_error_is_small_at_every_angle(angle_deg):
    """Default grid at 20 kHz (16 cells per wavelength): the (2,4) stencil with its dispersion
    factor is within 1e-4 of c at 0-60 deg from grazing (derived: 6e-5 at most); the Yee stencil
    with the former grazing correction on the same grid is exact at 0 deg only and 5e-4 to 1.8e-3
    off at 15-45 deg."""
    dr, dz, dt = _default_grid()
    gamma = stencil.dispersion_factor([F_HZ], dr, dz, dt, 4)
    err4 = float(stencil.phase_velocity_error(F_HZ, angle_deg, dr, dz, dt, 4, gamma))
    assert abs(err4) < 1e-4
    yee = _yee_grazing_error(angle_deg, dr, dz)
    if angle_deg == 0.0:
        assert abs(yee) < 1e-9
    elif angle_deg <= 45.0:
        assert abs(yee) > 2e-4 and abs(yee) > 10 * abs(err4)


def _fit_mode_wavenumbers(r, field, k_start):
    """Least-squares wavenumbers of a sum of outgoing cylindrical modes a_n H0(k_n r) ~ exp(-j k_n r)/sqrt(r)."""
    from scipy.optimize import least_squares

    def residual(k):
        basis = np.exp(-1j * np.outer(r, k)) / np.sqrt(r)[:, None]
        amp, *_ = np.linalg.lstsq(basis, field, rcond=None)
        res = field - basis @ amp
        return np.r_[res.real, res.imag] / np.abs(field).max()

    sol = least_squares(residual, k_start, x_scale=1e-7, xtol=1e-15, ftol=1e-15, gtol=1e-15)
    return sol.x


@pytest.mark.parametrize("angle_deg", [20.0, 40.0, 60.0])
def test_measured_mode_speeds_in_a_plate_guide(angle_deg):
    """Measured from a run: the modes of a conducting plate guide about 30 km high whose height puts
    mode TM_n exactly at angle_deg from grazing, sin a = n lambda/(2h) (Wait 1960). Every propagating
    mode's wavenumber, fitted to the ground field 150-600 km out, matches sqrt(k^2 - (m pi/h)^2):
    the plane waves that make up each mode travel within 1e-4 of c (TEM, grazing, and TM_n, at
    angle_deg, among them; measured 1e-5 to 6e-5, the largest for the steepest mode, where the
    second-order rows at ground and ceiling weigh most)."""
    n = max(1, round(2 * 30e3 * math.sin(math.radians(angle_deg)) / LAMBDA))
    h = n * LAMBDA / (2 * math.sin(math.radians(angle_deg)))
    res = eng.run(
        eng.Medium.uniform(ceiling_m=h), eng.Settings(frequencies_hz=(F_HZ,), max_range_m=650e3, earth_curvature=False)
    )
    r = res.range_m
    sel = (r > 150e3) & (r < 600e3)
    k = 2 * math.pi * F_HZ / C0
    m = np.arange(0, int(2 * h / LAMBDA - 1e-9) + 1)
    m = m[m * LAMBDA / (2 * h) < 0.95]  # modes right at cutoff barely travel; leave them out
    k_exact = np.sqrt(k**2 - (m * math.pi / h) ** 2)
    k_fit = _fit_mode_wavenumbers(r[sel], res.ez[0][sel], k_exact * 1.00002)
    cos2 = (k_exact / k) ** 2
    err = (k_exact / k_fit - 1) * cos2  # delta k_m / k_m = (delta k / k) / cos^2 a_m
    print(f"angle {angle_deg}: h {h / 1e3:.2f} km, modes {m.tolist()}, plane-wave phase velocity errors {err}")
    assert np.all(np.abs(err) < 1e-4), err
    # the grazing mode agrees with the derived relation at the run's own grid
    p = res.plan
    predicted = float(
        stencil.phase_velocity_error(
            F_HZ, 0.0, p.dr_m, p.dz_m, p.dt_s, 4, stencil.dispersion_factor([F_HZ], p.dr_m, p.dz_m, p.dt_s, 4)
        )
    )
    assert abs(err[0] - predicted) < 2e-5


@pytest.mark.parametrize("aspect", [1.0, 1.25, 2.0])
def test_fourth_order_stability_limit_below_cartesian_and_sharp(aspect):
    """Power iteration gives a limit below the Cartesian (2,4) bound (6/7 of Yee's), and leapfrog
    stepping of the same operators is bounded just below it and grows just above it."""
    limit = grid.stability_factor(aspect, order=4)
    cartesian = (6.0 / 7.0) / math.sqrt(1.0 + 1.0 / aspect**2)
    assert limit < cartesian
    assert limit > 0.85 * cartesian  # the axis costs some, not most
    n = 40
    st = stencil.build(n, n, aspect, 1.0, order=4, gamma=1.0, ir0=n - 8, jz0=n - 8)
    rng = np.random.default_rng(3)

    def growth(cdt):
        ez = rng.standard_normal((n, n))
        er = rng.standard_normal((n, n + 1))
        er[:, 0] = er[:, -1] = 0
        h = np.zeros((n, n))
        start = math.sqrt(np.sum(ez**2) + np.sum(er**2))
        with np.errstate(all="ignore"):  # above the limit the fields overflow
            return _leapfrog(st, ez, er, h, cdt) / start

    assert growth(0.99 * limit) < 1e3
    above = growth(1.02 * limit)
    assert not math.isfinite(above) or above > 1e6  # grows without bound (overflow gives inf or NaN)


def _leapfrog(st, ez, er, h, cdt, steps=3000):
    """Leapfrog time stepping (c = 1) of the stencil's curl operators; the final field norm."""
    for _ in range(steps):
        h += cdt * stencil.curl_e(st, ez, er)
        cz, cr = stencil.curl_h(st, h)
        ez += cdt * cz
        er += cdt * cr
    return math.sqrt(np.sum(ez**2) + np.sum(er**2))


def test_edge_factor_gives_the_far_end_the_interior_grazing_wavenumber():
    """Derived from the discrete dispersion relation (Taflove and Hagness 2005, ch. 4): with the edge
    factor the second-order radial scheme of the far end propagates a grazing wave at the design
    frequency with the interior fourth-order scheme's wavenumber, so the stencil interface before the
    absorber is transparent to it; with the interior's factor it would be about 0.5 % slower."""
    dr, dz, dt = _default_grid()
    g = stencil.dispersion_factor([F_HZ], dr, dz, dt, 4)
    ge = stencil.edge_factor([F_HZ], dr, dz, dt, g)
    k4 = stencil.numerical_wavenumber(F_HZ, 0.0, dr, dz, dt, 4, g)
    k2_matched = stencil.numerical_wavenumber(F_HZ, 0.0, dr, dz, dt, 2, ge)
    k2_plain = stencil.numerical_wavenumber(F_HZ, 0.0, dr, dz, dt, 2, g)
    assert float(k2_matched / k4) == pytest.approx(1.0, abs=1e-9)
    assert float(k2_plain / k4) - 1 > 3e-3  # the step the factor removes
    # the tables carry it from the cell before the absorber on, the interior keeps gamma
    nr, nz, ir0 = 60, 40, 40
    st = stencil.build(nr, nz, dr, dz, order=4, gamma=g, ir0=ir0, jz0=30, edge_gamma=ge)
    assert st.ar1[ir0 - 1 :] == pytest.approx(np.float32(ge / dr), rel=1e-6)
    assert st.ar1[ir0 - 3] == pytest.approx(np.float32(stencil.C1 * g / dr), rel=1e-6)


def test_far_end_reflects_little_in_a_day_guide():
    """Reflection of the far end (stencil interface + CPML) in a day guide at 20 kHz: the field of a
    250 km grid against that of a 500 km grid over 100-230 km. The CPML alone reflects about -60 dB
    or less at VLF (Roden and Gedney 2000; docs/physics.md section 4); without the edge factor the
    stencil interface reflected -54 dB (measured), with it the far end stays below -58 dB."""
    from cavity.checks import verify

    a = verify.ionosphere_run(20e3, 71.8, 0.335, 5.0, 70.0, 250e3)
    b = verify.ionosphere_run(20e3, 71.8, 0.335, 5.0, 70.0, 500e3)
    n = a.range_m.size
    sel = (a.range_m > 100e3) & (a.range_m < 230e3)
    rel = np.abs(a.ez[0][sel] - b.ez[0][:n][sel]) / np.abs(b.ez[0][:n][sel])
    assert 20 * np.log10(rel.max()) < -58.0
