"""Checks of the magnetised normal-mode reference (cavity.reference.magnetised) against outside sources.

This reference is what the engine's geomagnetic field is checked against, so it is checked here
against the magneto-ionic theory, Fresnel's coefficients, the reciprocity theorem, Wait's mode sum
between plates and the isotropic reference of cavity.reference.modes (an independent method: finite
elements on the TM equation instead of the integration of the 4 x 4 system). Each check names its
source. Frequencies are invented values.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from cavity.constants import C0, ELECTRON_CHARGE, ELECTRON_MASS, EPS0, ETA0
from cavity.errors import ScenarioError
from cavity.reference import dipole, modes, plates
from cavity.reference import magnetised as mg

SEA = (5.0, 70.0)  # ITU-R P.527 class values (cavity/ground.py)
LAND = (1e-3, 15.0)
DAY = (71.8, 0.335)  # Thomson, Clilverd and Rodger 2011
NIGHT = (85.1, 0.63)  # Thomson, Clilverd and McRae 2007
FIELD_T = 50e-6


def wait_spies(altitude_m, hprime_km, beta_per_km):
    """Wait and Spies (1964, NBS TN 300) profile, Ne capped above 100 km, written here so the
    reference stays independent of the profiles package."""
    z_km = np.asarray(altitude_m) / 1e3
    ne = 1.43e13 * math.exp(-0.15 * hprime_km) * np.exp((beta_per_km - 0.15) * (np.minimum(z_km, 100.0) - hprime_km))
    nu = 1.816e11 * np.exp(-0.15 * z_km)
    return ne, nu


def grid(top_m=120e3, dz_m=100.0):
    """500 m cells in the neutral air below 40 km, ``dz_m`` above."""
    return np.concatenate([np.arange(0.0, 40e3, 500.0), np.arange(40e3, top_m + 1.0, dz_m)])


def db(x):
    return 20.0 * np.log10(np.abs(x))


# ---------------------------------------------------------------------------------------------
# The medium
# ---------------------------------------------------------------------------------------------


def test_gyrofrequency_and_isotropic_limit():
    # |omega_b| / 2 pi = e B / (2 pi m_e) = 28.0 Hz per nT (CODATA e, m_e).
    assert abs(mg.GYRO_HZ_PER_T * 1e-9 - 28.0) < 0.01
    # B0 = 0: the tensor is the isotropic permittivity of cavity.reference.modes times I, flattening
    # included (Richter 1966).
    z = np.array([0.0, 60e3, 75e3, 90e3])
    ne, nu = wait_spies(z, *NIGHT)
    for flat in (True, False):
        iso = modes.ionosphere_permittivity(z, ne, nu, 13.7e3, earth_flattening=flat)
        ten = mg.magnetoionic_permittivity(z, ne, nu, [0.0, 0.0, 0.0], 13.7e3, earth_flattening=flat)
        assert np.allclose(ten, iso[:, None, None] * np.eye(3)[None], rtol=1e-13, atol=0)


def test_tensor_circular_waves_along_the_field():
    # Magneto-ionic theory (Budden 1961): for a wave along B0 the characteristic polarisations are
    # circular with eps = 1 - X / (U -+ Y). With exp(+j omega t) the field x - j y turns from x to y,
    # i.e. with the electrons' gyration about B0 along +z (right-handed about B0), so it is the one
    # that resonates at Y = 1 (the whistler branch): eps = 1 - X / (U - Y).
    f = 17.3e3
    omega = 2 * math.pi * f
    ne, nu, b = 2e8, 3e4, 40e-6
    eps = mg.magnetoionic_permittivity([0.0], [ne], [nu], [0.0, 0.0, b], f, earth_flattening=False)[0]
    x = ne * ELECTRON_CHARGE**2 / (EPS0 * ELECTRON_MASS) / omega**2
    u = 1 - 1j * nu / omega
    y = ELECTRON_CHARGE * b / (ELECTRON_MASS * omega)
    right = np.array([1.0, -1j, 0.0])
    left = np.array([1.0, 1j, 0.0])
    assert np.allclose(eps @ right, (1 - x / (u - y)) * right, rtol=1e-12)
    assert np.allclose(eps @ left, (1 - x / (u + y)) * left, rtol=1e-12)
    assert np.isclose(eps[2, 2], 1 - x / u, rtol=1e-12)  # along B0: unaffected by the field


def test_booker_quartic_matches_appleton_hartree():
    # The 4 x 4 matrix at normal incidence (S = 0) has eigenvalues -j n with n^2 the two
    # Appleton-Hartree indices (exp(+j omega t), U = 1 - j Z):
    #   n^2 = 1 - X / (U - YT^2 / (2 (U - X)) +- sqrt(YT^4 / (4 (U - X)^2) + YL^2))
    # (Budden 1961). At oblique incidence every eigenvalue q = j lambda is a root of the dispersion
    # relation det(k k^T - k.k I + eps) = 0, k = (S, 0, q) (Maxwell's equations for a plane wave).
    f = 22.7e3
    omega = 2 * math.pi * f
    ne, nu = 3e8, 2e5
    b = np.array([10e-6, 40e-6, -25e-6])
    eps = mg.magnetoionic_permittivity([0.0], [ne], [nu], b, f, earth_flattening=False)[0]
    x = ne * ELECTRON_CHARGE**2 / (EPS0 * ELECTRON_MASS) / omega**2
    u = 1 - 1j * nu / omega
    y = ELECTRON_CHARGE * np.linalg.norm(b) / (ELECTRON_MASS * omega)
    cos_t = b[2] / np.linalg.norm(b)
    yl, yt = y * cos_t, y * math.sqrt(1 - cos_t**2)
    root = np.sqrt(yt**4 / (4 * (u - x) ** 2) + yl**2)
    expected = np.sort_complex(np.array([1 - x / (u - yt**2 / (2 * (u - x)) + sg * root) for sg in (1, -1)]))
    n2 = (1j * np.linalg.eigvals(mg.layer_matrix(eps, 0.0))) ** 2
    n2 = np.sort_complex(n2)
    assert np.allclose(n2[::2], expected, rtol=1e-10) or np.allclose(n2[1::2], expected, rtol=1e-10)
    assert np.allclose(np.sort_complex(n2[[0, 2]]), expected, rtol=1e-10) or np.allclose(
        np.sort_complex(n2[[1, 3]]), expected, rtol=1e-10
    )
    s = 0.6 + 0.01j
    for q in 1j * np.linalg.eigvals(mg.layer_matrix(eps, s)):
        k = np.array([s, 0.0, q])
        m = np.outer(k, k) - (k @ k) * np.eye(3) + eps
        assert abs(np.linalg.det(m)) < 1e-10 * np.abs(eps).max() ** 2


def test_path_frame_of_the_field():
    # Path frame (module docstring): B_r = Be sin b + Bn cos b, B_phi = -Be cos b + Bn sin b, B_z = Bu;
    # phi = z x r is to the left of the direction of travel, so travelling east under a northward
    # horizontal field gives B_phi = +F cos I, and a downward dip gives B_z = -F sin I.
    f, dip = 48e-6, 20.0
    east = mg.field_from_dip_azimuth(f, dip, 90.0)
    assert np.allclose(east, [0.0, f * math.cos(math.radians(dip)), -f * math.sin(math.radians(dip))], atol=1e-18)
    north = mg.field_from_dip_azimuth(f, dip, 0.0)
    assert np.allclose(north, [f * math.cos(math.radians(dip)), 0.0, -f * math.sin(math.radians(dip))], atol=1e-18)
    assert np.allclose(mg.enu_to_path_frame(1.0, 0.0, 0.0, 0.0), [0.0, -1.0, 0.0])  # east is to the right
    with pytest.raises(ScenarioError, match="dip_deg"):
        mg.field_from_dip_azimuth(f, 95.0, 0.0)
    with pytest.raises(ScenarioError, match="strength_t"):
        mg.field_from_dip_azimuth(-1e-6, 10.0, 0.0)
    with pytest.raises(ScenarioError, match="b_path_frame_t"):
        mg.magnetoionic_permittivity([0.0], [1.0], [1.0], [0.0, 1.0], 20e3)


# ---------------------------------------------------------------------------------------------
# Reflection matrices
# ---------------------------------------------------------------------------------------------


def test_sharply_bounded_isotropic_medium_gives_fresnel():
    # Budden (1961): a homogeneous isotropic medium of index n starting at height h reflects with
    # Fresnel's coefficients, referred to the ground by exp(-2 j k0 C h). For H~y (parallel) and Ey
    # (perpendicular): (n^2 C - q) / (n^2 C + q) and (C - q) / (C + q), q = sqrt(n^2 - S^2) with
    # Im q < 0 (decaying upward). A lossy plasma (n^2 = 1 - X / U) and a lossy dielectric.
    f, h = 17.3e3, 70e3
    k0 = 2 * math.pi * f / C0
    # The altitude h given twice: a sharp boundary (vacuum below, the medium above).
    z = np.concatenate([np.arange(0.0, h, 500.0), [h, h, h + 5e3]])
    for n2 in (1 - 60.0 / (1 - 3.0j), 4.0 - 0.5j):
        eps = np.where(np.arange(z.size) >= z.size - 2, n2, 1.0)[:, None, None] * np.eye(3)[None]
        for c in (0.05 + 0.01j, 0.3 - 0.02j, 0.9):
            s = np.sqrt(1 - c * c)
            q = np.sqrt(n2 - s * s)
            q = -q if q.imag > 0 else q
            phase = np.exp(-2j * k0 * c * h)
            r = mg.ionosphere_reflection(z, eps, f, c)
            assert abs(r[0, 0] - (n2 * c - q) / (n2 * c + q) * phase) < 1e-9
            assert abs(r[1, 1] - (c - q) / (c + q) * phase) < 1e-9
            assert abs(r[0, 1]) < 1e-12 and abs(r[1, 0]) < 1e-12


def test_reciprocity_of_the_reflection_matrix():
    # Lorentz reciprocity for stratified media (Budden 1961, reciprocity of reflection coefficients):
    # the medium with B0 reversed is the transposed medium, and W = (E1 x H2 - E2 x H1).z is
    # constant in height for a wave in it travelling the other way (S -> -S); both waves decay
    # upward, so W = 0, which in this module's amplitudes reads R(-B0, -S) = P R(B0, S)^T P with
    # P = diag(1, -1). Turning the frame by 180 deg about z maps (-B0, -S) to (B_r, B_phi, -B_z, S),
    # so: R(B_r, B_phi, -B_z) = P R(B_r, B_phi, B_z)^T P.
    f = 17.3e3
    z = grid(dz_m=200.0)
    ne, nu = wait_spies(z, *NIGHT)
    b = np.array([20e-6, 35e-6, -30e-6])
    p = np.diag([1.0, -1.0])
    for c in (0.25 - 0.02j, 0.5 + 0.01j):
        r1 = mg.ionosphere_reflection(z, mg.magnetoionic_permittivity(z, ne, nu, b, f), f, c)
        r2 = mg.ionosphere_reflection(z, mg.magnetoionic_permittivity(z, ne, nu, b * [1, 1, -1], f), f, c)
        assert np.allclose(r2, p @ r1.T @ p, atol=1e-10)
        assert abs(r1[0, 1]) > 1e-3  # the field couples the polarisations
    # With B0 along phi (dip 0, travel east or west) TM and TE do not couple: Ex, Ez and Hy form a
    # closed set (Budden 1961).
    r = mg.ionosphere_reflection(z, mg.magnetoionic_permittivity(z, ne, nu, [0.0, FIELD_T, 0.0], f), f, 0.3 - 0.01j)
    assert abs(r[0, 1]) < 1e-12 and abs(r[1, 0]) < 1e-12
    r0 = mg.ionosphere_reflection(z, mg.magnetoionic_permittivity(z, ne, nu, [0.0, 0.0, 0.0], f), f, 0.3 - 0.01j)
    assert abs(r[0, 0] - r0[0, 0]) > 1e-2


def test_reflection_converges_with_the_layers_and_ignores_the_top():
    # Midpoint layers are second order: halving the cell quarters the change (derived); the field
    # is negligible at the top, so 120 and 160 km give the same R.
    f, c = 17.3e3, 0.25 - 0.02j
    b = mg.field_from_dip_azimuth(FIELD_T, 20.0, 90.0)
    out = {}
    for dz, top in ((200.0, 120e3), (100.0, 120e3), (50.0, 120e3), (100.0, 160e3)):
        z = grid(top, dz)
        ne, nu = wait_spies(z, *NIGHT)
        out[dz, top] = mg.ionosphere_reflection(z, mg.magnetoionic_permittivity(z, ne, nu, b, f), f, c)
    d1 = np.abs(out[200.0, 120e3] - out[100.0, 120e3]).max()
    d2 = np.abs(out[100.0, 120e3] - out[50.0, 120e3]).max()
    assert 3.0 < d1 / d2 < 5.0
    assert np.abs(out[100.0, 120e3] - out[100.0, 160e3]).max() < 1e-9


def test_ground_reflection():
    # Leontovich impedance boundary Ex = -Zs Hy, Ey = Zs Hx (the isotropic reference's ground):
    # Rg = diag((C - D) / (C + D), (C D - 1) / (C D + 1)), D = Zs / eta0; perfect ground diag(1, -1);
    # and the exact Fresnel coefficients tend to the Leontovich ones for |n| >> 1 (Wait 1970).
    f, c = 13.7e3, 0.2 - 0.01j
    assert np.allclose(mg.ground_reflection(c, f, math.inf, 1.0), np.diag([1.0, -1.0]))
    for sigma, eps_r in (SEA, LAND):
        d = dipole.surface_impedance(f, sigma, eps_r) / ETA0
        lo = mg.ground_reflection(c, f, sigma, eps_r)
        assert np.isclose(lo[0, 0], (c - d) / (c + d), rtol=1e-6)
        fr = mg.ground_reflection(c, f, sigma, eps_r, model="fresnel")
        assert np.abs(fr - lo).max() < 2 * abs(d) ** 2 / abs(c)


# ---------------------------------------------------------------------------------------------
# Modes at B0 = 0 against the isotropic reference, and between plates
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("f_hz", [13.7e3, 17.3e3, 22.7e3])
@pytest.mark.parametrize("ground", [SEA, LAND], ids=["sea", "land"])
@pytest.mark.parametrize("profile", [DAY, NIGHT], ids=["day", "night"])
def test_zero_field_equals_isotropic_reference(profile, ground, f_hz):
    # cavity.reference.modes (finite elements on the TM equation, a wall at 120 km) and this module
    # (4 x 4 integration, open top) at B0 = 0 on the same grid: attenuation within 0.01 dB/Mm, phase
    # velocity within 1e-5, excitation within 1e-3, field at 300-3,000 km within 0.01 dB, for the
    # four least attenuated TM modes (issue 16 tolerance). Uniform 100 m cells: the finite elements
    # are second order in the neutral air too (500 m cells there move the third mode by 0.03 dB/Mm),
    # while homogeneous layers are exact there.
    z = np.arange(0.0, 120e3 + 1.0, 100.0)
    ne, nu = wait_spies(z, *profile)
    eps = modes.ionosphere_permittivity(z, ne, nu, f_hz)
    iso = modes.solve_modes(z, eps, f_hz, dipole.surface_impedance(f_hz, *ground), n_functions=0)
    mag = mg.magnetised_modes(
        z, ne, nu, [0.0, 0.0, 0.0], f_hz, ground=ground, n_tm=4, n_te=0, max_attenuation_db_per_mm=1e3
    )
    assert mag.origin == ("TM1", "TM2", "TM3", "TM4")
    # Modes below 50 dB/Mm (the ones that matter beyond a few hundred km): the tolerances;
    # the steep fourth mode of the day guide (about 95 dB/Mm at 13.7 kHz) to 1e-4 relative (both
    # schemes converge to it as the cell shrinks; 100 m leaves 1.2e-5 in its phase velocity).
    low = iso.attenuation_db_per_mm[:4] < 50.0
    assert np.all(np.abs(mag.attenuation_db_per_mm - iso.attenuation_db_per_mm[:4])[low] < 0.01)
    assert np.all(np.abs(mag.phase_velocity_ratio - iso.phase_velocity_ratio[:4])[low] < 1e-5)
    assert np.all(np.abs(mag.wavenumber / iso.wavenumber[:4] - 1) < 1e-4)
    assert np.all(np.abs(mag.excitation / iso.excitation[:4] - 1) < 1e-3)
    assert np.allclose(mag.tm_fraction, 1.0)
    r = np.linspace(300e3, 3000e3, 28)
    keep = iso.attenuation_db_per_mm[:4].max() + 1e-9
    iso4 = modes.ModeSet(
        iso.frequency_hz,
        iso.altitude_m,
        iso.wavenumber[iso.attenuation_db_per_mm <= keep],
        iso.excitation[iso.attenuation_db_per_mm <= keep],
        iso.functions,
        iso.permittivity,
        iso.surface_impedance_ohm,
    )
    ez = mg.ground_field(mag, r, spherical_spreading=False)
    want = modes.ground_field(iso4, r)
    # 0.01 dB of the modal envelope (sum of the modes' magnitudes), so that a modal null, where
    # any tiny difference moves the minimum, is not read as a large relative error.
    omega = 2 * math.pi * f_hz
    k = iso4.wavenumber[:, None]
    envelope = np.abs(iso4.excitation[:, None] * k * k * modes._hankel2_0(k * r[None, :])).sum(axis=0)
    envelope /= 4 * omega * EPS0
    assert np.all(np.abs(ez.ez - want) < (10 ** (0.01 / 20) - 1) * envelope)
    assert np.all(np.abs(ez.ephi) < 1e-12 * np.abs(ez.ez))  # no TE field without the field


def test_plates_reproduce_wait_mode_sum():
    # Wait (1960) mode sum between perfectly conducting plates h = 70 km apart at 10 kHz: the ceiling
    # is a dense, nearly collisionless plasma above h (n ~ -j 1e5: total reflection with a phase
    # that moves the wall by about 1/(k0 |n|) = 5 cm), the ground perfect, no earth flattening.
    # TM0..TM4 propagate; at 300 km and beyond the evanescent ones are below exp(-70). Within
    # 0.02 dB and 0.2 degree over 300-2,000 km. (A perfect wall would make TM_n and TE_n exactly
    # degenerate, a double root of D; the plasma's TE and TM phases differ and split them.)
    f, h = 10e3, 70e3
    z = np.concatenate([np.arange(0.0, h, 100.0), [h, h]])
    ne = np.where(np.arange(z.size) == z.size - 1, 1.24e16, 0.0)
    nu = np.full(z.shape, 1.0)
    mag = mg.magnetised_modes(
        z, ne, nu, [0.0, 0.0, 0.0], f, ground=(math.inf, 1.0), earth_flattening=False, n_tm=5, n_te=0
    )
    assert mag.n_modes == 5
    r = np.linspace(300e3, 2000e3, 60)
    ratio = mg.ground_field(mag, r).ez / plates.parallel_plate_field(r, f, h)
    assert np.all(np.abs(db(ratio)) < 0.02)
    assert np.all(np.abs(np.angle(ratio, deg=True)) < 0.2)
    # Wait's excitation 2 / h for TM_n, n >= 1, and 1 / h for TM0 (its eps_n / h).
    assert np.allclose(np.sort(mag.excitation.real * h), [1.0, 2.0, 2.0, 2.0, 2.0], rtol=2e-3)


# ---------------------------------------------------------------------------------------------
# The magnetised guide
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def night_east_west():
    f = 17.3e3
    z = grid()
    ne, nu = wait_spies(z, *NIGHT)
    out = {}
    for dip in (20.0, 60.0):
        for name, az in (("east", 90.0), ("west", 270.0)):
            b = mg.field_from_dip_azimuth(FIELD_T, dip, az)
            out[dip, name] = mg.magnetised_modes(z, ne, nu, b, f, ground=SEA, max_attenuation_db_per_mm=20.0)
    return out


@pytest.mark.slow
def test_east_beats_west_at_night(night_east_west):
    # Common practice (from memory): at night at 10-25 kHz and low and middle latitudes eastward
    # propagation is attenuated less than westward, by a few tenths to about 1 dB per 1000 km or
    # more, and the difference fades toward a vertical field. Least attenuated mode among those
    # the vertical element excites well (|Lambda| above a tenth of the largest).
    def least(ms):
        strong = np.abs(ms.excitation) > 0.1 * np.abs(ms.excitation).max()
        return ms.attenuation_db_per_mm[strong].min()

    diff20 = least(night_east_west[20.0, "west"]) - least(night_east_west[20.0, "east"])
    diff60 = least(night_east_west[60.0, "west"]) - least(night_east_west[60.0, "east"])
    assert 0.1 < diff20 < 3.0
    assert 0.0 < diff60 < diff20


@pytest.mark.slow
def test_no_mode_lost_or_duplicated(night_east_west):
    # The modes are distinct, and Newton's method from a finer lattice of starting points at the
    # full field (another route to the roots than the continuation and the module's own secant
    # lattice) finds no root below 6 dB/Mm that is not in the set. Each mode's fields obey the ground's
    # Leontovich condition Ey = Zs Hx (Ephi = Zs Hr), which the field ratios do not use directly.
    f = 17.3e3
    z = grid()
    ne, nu = wait_spies(z, *NIGHT)
    ms = night_east_west[20.0, "west"]
    c = ms.cos_incidence
    assert len(set(np.round(c, 6))) == c.size
    eps = mg.magnetoionic_permittivity(z, ne, nu, ms.b_path_frame_t, f)
    guide = mg._Guide(mg._profile(z, eps, f), f, SEA, "leontovich")
    k0 = 2 * math.pi * f / C0
    found = []
    for re in np.linspace(0.02, 0.5, 25):
        for im in (0.005, 0.02, 0.05):
            root, ok = mg._newton(guide.det, complex(re, im), max_step=0.05)
            if not ok:
                continue
            root = mg._canonical(root)
            att = -mg.DB_PER_NEPER * (k0 * np.sqrt(1 - root * root)).imag * 1e6
            if 0.0 <= att < 6.0 and abs(root) > 1e-3:
                found.append(root)
    assert found
    for root in found:
        assert np.min(np.abs(c - root)) < 1e-6, f"root C = {root:.6f} missed by the mode search"
    zs = dipole.surface_impedance(f, *SEA)
    assert np.allclose(ms.ephi_ratio, zs * ms.hr_ratio / ETA0, rtol=1e-5)


@pytest.mark.slow
def test_vertical_field_same_in_every_direction():
    # A vertical B0 has no preferred horizontal direction: every azimuth gives the same modes (a
    # check of the frame conversion). A dip of 60 deg does not.
    f = 22.7e3
    z = grid(dz_m=200.0)
    ne, nu = wait_spies(z, *NIGHT)
    att = {}
    for dip in (90.0, 60.0):
        for az in (0.0, 90.0, 225.0):
            b = mg.field_from_dip_azimuth(FIELD_T, dip, az)
            ms = mg.magnetised_modes(z, ne, nu, b, f, ground=LAND, n_tm=3, n_te=1)
            att[dip, az] = np.sort(ms.attenuation_db_per_mm)[:3]
    assert np.allclose(att[90.0, 0.0], att[90.0, 90.0], atol=1e-6)
    assert np.allclose(att[90.0, 0.0], att[90.0, 225.0], atol=1e-6)
    assert np.abs(att[60.0, 90.0] - att[60.0, 225.0]).max() > 0.05


def test_ground_field_bad_input():
    z = grid(dz_m=500.0)
    ne, nu = wait_spies(z, *DAY)
    with pytest.raises(ScenarioError, match="b_path_frame_t"):
        mg.magnetised_modes(z, ne, nu, [1.0, 0.0, 0.0], 17.3e3)
    with pytest.raises(ScenarioError, match="frequency_hz"):
        mg.magnetised_modes(z, ne, nu, [0.0, 0.0, 0.0], -1.0)
    with pytest.raises(ScenarioError, match="altitude_m"):
        mg.ionosphere_reflection(z + 1.0, np.ones((z.size, 3, 3)), 17.3e3, 0.3)


# ---------------------------------------------------------------------------------------------
# The mode search: continuation and the mode count
# ---------------------------------------------------------------------------------------------


class _Roots:
    """A stand-in for a guide whose mode equation has known roots a_k(t): D(C) = prod (C - a_k(t))."""

    def __init__(self, roots):
        self.roots = roots

    def det(self, c):
        return complex(np.prod([c - a for a in self.roots]))


def test_continuation_keeps_each_root_through_a_close_pass_and_a_fast_swing():
    # Elementary algebra: the roots of prod (C - a_k(t)) are the a_k(t). Two roots pass within
    # 1e-3 of each other at t = 0.5 while moving in opposite directions, a third swings by 0.05
    # within a few percent of the field (where the gyrofrequency crosses the wave frequency, the
    # real roots move fastest), a fourth runs off to high attenuation. Following each from t = 1e-3,
    # each must end on its own a_k(1), and the fourth must be dropped, not reported.
    k0 = 2 * math.pi * 20e3 / C0

    def attenuation(c):
        return -mg.DB_PER_NEPER * (k0 * np.sqrt(1 - c * c)).imag * 1e6

    def roots_at(t):
        pass_a = 0.30 + 0.02j + 0.1 * (t - 0.5) + 0.0005j
        pass_b = 0.30 + 0.02j - 0.1 * (t - 0.5) - 0.0005j
        swing = 0.15 + 0.015j + 0.025 * (1 + math.tanh((t - 0.014) / 0.003))
        lossy = 0.45 + 0.01j + 0.6j * t
        return [pass_a, pass_b, swing, lossy]

    guide_at = lambda t: _Roots(roots_at(t))  # noqa: E731
    out = mg._continue(guide_at, roots_at(0.0), attenuation, drop_db=400.0)
    end = roots_at(1.0)
    for k in range(3):
        root, state, reached = out[k]
        assert state == "ok" and reached == 1.0
        assert abs(root - end[k]) < 1e-9
    root, state, reached = out[3]
    assert root is None and state == "dropped" and reached < 1.0
    assert attenuation(roots_at(reached)[3]) > 400.0


def test_argument_principle_counts_zeros_under_a_fast_phase():
    # Argument principle (Cauchy): the turns of arg f along a closed contour count the zeros inside.
    # f = (C - c1)(C - c2)(C - c3) exp(-j 100 C) on an S rectangle: c1, c2 inside, c3 outside; the
    # exponential (no zeros) turns the phase by about 100 rad per unit C, as the ionosphere's phase
    # path does, which a sparse sampling would alias.
    rate = 100.0
    region = (0.7, 1.02, -0.02, -1e-6)
    inside = [mg._cos_of_sine(complex(0.95, -0.005)), mg._cos_of_sine(complex(0.8, -0.015))]
    outside = mg._cos_of_sine(complex(0.9, -0.03))
    assert all(mg._in_region(c, region) for c in inside) and not mg._in_region(outside, region)

    def fun(s):
        c = mg._cos_of_sine(s)
        return (c - inside[0]) * (c - inside[1]) * (c - outside) * np.exp(-1j * rate * c)

    assert mg._winding(fun, region, 2 * rate) == 2
    assert mg._winding(fun, (0.7, 0.9, -0.02, -1e-6), 2 * rate) == 1


def test_a_root_on_the_counting_contour_is_counted_on_a_nudged_region():
    # Argument principle (Cauchy), as above: f has zeros at c1, c2 inside and one exactly on the
    # region's lower edge (the attenuation window's bound), where arg f jumps by pi and cannot be
    # followed. The count must move its edges outward and find all three.
    from types import SimpleNamespace

    region = (0.7, 1.02, -0.02, -1e-6)
    zeros = [mg._cos_of_sine(s) for s in (complex(0.95, -0.005), complex(0.8, -0.015), complex(0.9123, -0.02))]

    def fun(c):
        return (c - zeros[0]) * (c - zeros[1]) * (c - zeros[2]) * np.exp(-1j * 50.0 * c)

    guide = SimpleNamespace(det=fun, det_analytic=fun, profile=SimpleNamespace(thickness=np.array([50.0])))
    with pytest.raises(mg.RootOnContourError, match="counting contour"):
        mg._complete(guide, region, [])
    used, (count, found) = mg._complete_nudged(guide, region, [])
    assert used[2] < region[2] and used[3] == region[3]
    assert count == 3 and len(found) == 3
    assert all(min(abs(mg._canonical(f) - mg._canonical(z)) for f in found) < 1e-8 for z in zeros)


@pytest.mark.slow
def test_mirrored_dip_gives_the_same_modes(night_east_west):
    # Reciprocity (Budden 1961; the reflection-matrix test above): R(B_r, B_phi, -B_z) =
    # P R(B_r, B_phi, B_z)^T P, so det(I - Rg R) is unchanged when the vertical component of B0 is
    # reversed (Rg diagonal): eastward at dip +20 deg (northern hemisphere) has the same modes as
    # eastward at dip -20 deg (southern). Every mode found at +20 deg must be a root at -20 deg, and
    # the argument principle must count as many roots there; westward differs.
    f = 17.3e3
    z = grid()
    ne, nu = wait_spies(z, *NIGHT)
    ms = night_east_west[20.0, "east"]
    assert ms.counted_modes == ms.found_in_count_region > 3
    mirrored = mg.field_from_dip_azimuth(FIELD_T, -20.0, 90.0)
    assert np.allclose(mirrored, ms.b_path_frame_t * [1, 1, -1], atol=1e-18)
    eps = mg.magnetoionic_permittivity(z, ne, nu, mirrored, f)
    guide = mg._Guide(mg._profile(z, eps, f), f, SEA, "leontovich")
    for c in ms.cos_incidence:
        h = 1e-6 * abs(c)
        slope = abs(guide.det(c + h) - guide.det(c - h)) / (2 * h)
        assert abs(guide.det(c)) < 1e-7 * slope * abs(c)  # a root to 1e-7 of C
    k0 = 2 * math.pi * f / C0
    assert mg.count_modes(guide, mg._count_region(k0, 20.0)) == ms.found_in_count_region
    west = night_east_west[20.0, "west"]
    assert np.abs(np.sort(west.attenuation_db_per_mm)[:3] - np.sort(ms.attenuation_db_per_mm)[:3]).max() > 0.1


def test_ground_reflection_is_fresnel_for_both_polarisations():
    # Fresnel's coefficients written out from Jackson, Classical Electrodynamics (3rd ed.), sec. 7.3,
    # for a wave from vacuum onto a half-space of index n (n^2 = eps_r - j sigma / (omega eps0),
    # exp(+j omega t)), cos of the refracted angle times n = sqrt(n^2 - S^2):
    # E perpendicular to the plane of incidence (TE, the reference's Ey amplitude)
    #   r_s = (C - sqrt(n^2 - S^2)) / (C + sqrt(n^2 - S^2)),
    # E in the plane (TM; for the tangential H, the reference's H~y amplitude)
    #   r_p = (n^2 C - sqrt(n^2 - S^2)) / (n^2 C + sqrt(n^2 - S^2)).
    # The Leontovich pair is their limit with sqrt(n^2 - S^2) -> n: r_s -> (C/n - 1) / (C/n + 1).
    f = 20e3
    for sigma, eps_r in (SEA, LAND):
        n2 = eps_r - 1j * sigma / (2.0 * math.pi * f * EPS0)
        n = np.sqrt(n2)
        for c in (0.05 + 0.0j, 0.3 - 0.02j, 0.9 + 0.0j):
            s2 = 1.0 - c * c
            g = np.sqrt(n2 - s2)
            fr = mg.ground_reflection(c, f, sigma, eps_r, model="fresnel")
            assert fr[1, 1] == pytest.approx((c - g) / (c + g), rel=1e-9)
            assert fr[0, 0] == pytest.approx((n2 * c - g) / (n2 * c + g), rel=1e-9)
            assert fr[0, 1] == 0 and fr[1, 0] == 0
            lo = mg.ground_reflection(c, f, sigma, eps_r)
            assert lo[1, 1] == pytest.approx((c / n - 1.0) / (c / n + 1.0), rel=1e-6)


def test_normal_incidence_under_a_vertical_field_matches_the_two_circular_waves():
    # With B0 vertical and a vertical wave the characteristic waves are circular, E+- = Ex +- j Ey,
    # each obeying d2E/dz2 + k0^2 n+-^2 E = 0 with n+-^2 = 1 - X / (U -+ Y) (magneto-ionic theory,
    # Budden 1961; Y = e B0z / (m_e omega)). Integrated here with scipy from the top (the wave that
    # decays upward) to the ground and split into up- and downgoing waves, independently of the
    # reference's 4 x 4 system; R = diag(-1, 1) T^-1 diag(rho+, rho-) T in the reference's (H~y, Ey)
    # amplitudes (at normal incidence the parallel wave's Ex is +a up and -a down).
    from scipy.integrate import solve_ivp

    f = 20e3
    omega = 2.0 * math.pi * f
    k0 = omega / C0
    z = grid()
    ne, nu = wait_spies(z, *NIGHT)
    a_earth = 6371e3  # the reference's default earth radius for the flattening (cavity.constants)
    for bz in (-FIELD_T, FIELD_T):
        r_ref = mg.ionosphere_reflection(z, mg.magnetoionic_permittivity(z, ne, nu, (0.0, 0.0, bz), f), f, 1.0)

        def n2(zz, sense, bz=bz):
            x = np.interp(zz, z, ne) * ELECTRON_CHARGE**2 / (EPS0 * ELECTRON_MASS) / omega**2
            u = 1.0 - 1j * np.exp(np.interp(zz, z, np.log(nu))) / omega
            y = ELECTRON_CHARGE * bz / (ELECTRON_MASS * omega)
            return (1.0 - x / (u - sense * y)) * (1.0 + zz / a_earth) ** 2

        rho = {}
        for sense in (1.0, -1.0):
            n_top = np.sqrt(n2(z[-1], sense))
            n_top = -n_top if n_top.imag > 0 else n_top  # exp(-j k0 n z) decays upward
            sol = solve_ivp(
                lambda zz, y, sense=sense: [y[1], -(k0**2) * n2(zz, sense) * y[0]],
                (z[-1], 0.0),
                np.array([1.0 + 0j, -1j * k0 * n_top]),
                method="DOP853",
                rtol=1e-10,
                atol=1e-14,
            )
            e, de = sol.y[0, -1], sol.y[1, -1]
            up, down = 0.5 * (e - de / (1j * k0)), 0.5 * (e + de / (1j * k0))
            rho[sense] = down / up
        t = np.array([[1.0, 1j], [1.0, -1j]])
        r_ind = np.diag([-1.0, 1.0]) @ np.linalg.inv(t) @ np.diag([rho[1.0], rho[-1.0]]) @ t
        assert np.abs(r_ref - r_ind).max() < 2e-3  # the reference's layers hold each 100 m layer's mean
        assert abs(r_ref[0, 1]) > 0.3  # the field couples the polarisations strongly at night
