"""Each physics ingredient of the solver against an outside reference, before it joins the engine."""

import math

import numpy as np
import pytest

from cavity.constants import C0, EPS0, ETA0, MU0
from cavity.fdtd import grid, media


def test_stability_limit_matches_axisymmetric_value():
    # docs/physics.md 2 (derived and time-stepped): c dt <= 0.6728 d for dr = dz = d.
    # (the Yee stencil, order 2; the fourth-order stencil's limit is tested in test_stencil.py)
    assert grid.stability_factor(1.0, order=2) == pytest.approx(0.6728, abs=0.002)
    # 2-D Cartesian limit 1/sqrt(2) bounds it from above for any aspect ratio.
    for aspect in (0.5, 1.0, 1.5, 3.0):
        cart = 1.0 / math.sqrt(1.0 + 1.0 / aspect**2)
        assert grid.stability_factor(aspect, order=2) < cart


def _discrete_plasma_permittivity(omega, dt, eps, wp2, nu):
    """Relative permittivity realised by the E-J recursion, from its z-transform."""
    pa, pb, pc, qa, qb = media.plasma_coefficients(eps, wp2, nu, dt)
    z = np.exp(1j * omega * dt)
    # J = qb (z + 1)/(z - qa) E ; E (z - pa) = pb curlH - pc J  ->  curlH = [(z - pa) + pc G] E / pb
    g = qb * (z + 1) / (z - qa)
    curl_over_e = ((z - pa) + pc * g) / pb
    # continuous: curlH = j omega eps0 eps_r E sampled at the half step: curlH = j w~ eps eps_r E with
    # the trapezoidal (bilinear) frequency w~ = 2/dt tan(w dt/2) and a half-step centring factor
    w_tilde = 2.0 / dt * np.tan(omega * dt / 2)
    centring = (z + 1) / 2  # the scheme centres curlH between E(n) and E(n+1)
    return curl_over_e / (1j * w_tilde * eps * centring), w_tilde


@pytest.mark.parametrize("wp_dt, nu_dt", [(0.05, 0.01), (3.0, 0.2), (40.0, 0.05), (200.0, 5.0)])
def test_plasma_update_is_drude_at_the_bilinear_frequency(wp_dt, nu_dt):
    # Drude permittivity eps_r = 1 - wp^2/(w (w - j nu)) (docs/physics.md 3; exp(+j w t)); the trapezoidal
    # E-J update (Yu and Simpson 2010) realises it exactly at the bilinear-warped frequency.
    dt = 1e-6
    wp2, nu = (wp_dt / dt) ** 2, nu_dt / dt
    for f in (3e3, 20e3, 60e3):
        w = 2 * math.pi * f
        got, wt = _discrete_plasma_permittivity(w, dt, EPS0, wp2, nu)
        want = 1 - wp2 / (wt * (wt - 1j * nu))
        assert got == pytest.approx(want, rel=1e-9)
        # and where omega dt is small the warp is tiny: within 1 % of Drude at the true frequency
        if w * dt < 0.15:
            drude = 1 - wp2 / (w * (w - 1j * nu))
            assert abs(got / drude - 1) < 1e-2


def test_plasma_update_is_stable_for_any_density():
    # Amplification factors of the E-J recursion stay on or inside the unit circle
    # (Yu and Simpson 2010: unconditionally stable), checked at omega_p dt up to 1e4.
    dt = 1e-6
    for wp_dt in (0.1, 1.0, 10.0, 1e2, 1e4):
        for nu_dt in (0.0, 1e-3, 1.0, 1e3):
            pa, pb, pc, qa, qb = media.plasma_coefficients(EPS0, (wp_dt / dt) ** 2, nu_dt / dt, dt)
            # local (curl-free) system: E' = pa E - pc J ; J' = qa J + qb (E' + E)
            m = np.array([[pa, -pc], [qb * (1 + pa), qa - qb * pc]])
            assert np.max(np.abs(np.linalg.eigvals(m))) <= 1 + 1e-12


def test_cpml_coefficients_reduce_to_the_plain_recursion():
    # With kappa = 1 and alpha = 0: b = exp(-sigma dt/eps0), c = b - 1 (common practice).
    dt, cell = 1e-6, 500.0
    b, c, kappa = media.cpml_coefficients(20, cell, dt, offset=0.5)
    x = (np.arange(20) + 0.5) / 20
    sigma = media.sigma_optimal(cell) * x**3
    assert np.allclose(kappa, 1.0)
    assert np.allclose(b, np.exp(-sigma * dt / EPS0))
    assert np.allclose(c, b - 1.0)
    # Taflove and Hagness 2005 eq. 7.66: sigma_opt = 0.8 (m + 1)/(eta0 dx)
    assert media.sigma_optimal(cell) == pytest.approx(3.2 / (ETA0 * cell))


def _cpml_1d_reflection(freqs, n_pml=20, cell=500.0, steps=6000):
    """1-D Ex/Hy line with a CPML end (same coefficient builder); reflection by time gating."""
    dt = 0.9 * cell / C0
    n = 1600
    b_e, c_e, k_e = media.cpml_coefficients(n_pml, cell, dt, offset=0.0)
    b_h, c_h, k_h = media.cpml_coefficients(n_pml, cell, dt, offset=0.5)

    def simulate(with_pml):
        size = n + (n_pml if with_pml else 4 * n)
        e = np.zeros(size + 1)
        h = np.zeros(size)
        psi_e = np.zeros(n_pml)
        psi_h = np.zeros(n_pml)
        src, probe = 200, 600
        tau = 3.0 / 3e3
        rec = []
        for step in range(steps):
            t = (step + 0.5) * dt
            d = (e[1:] - e[:-1]) / cell
            h -= dt / MU0 * d
            if with_pml:
                dd = d[n:]
                psi_h[:] = b_h * psi_h + c_h * dd
                h[n:] -= dt / MU0 * ((1 / k_h - 1) * dd + psi_h)
            dh = (h[1:] - h[:-1]) / cell
            e[1:-1] -= dt / EPS0 * dh
            if with_pml:
                dd = dh[n - 1 :]
                psi_e[:] = b_e * psi_e + c_e * dd
                e[n:-1] -= dt / EPS0 * ((1 / k_e - 1) * dd + psi_e)
            e[src] += math.exp(-0.5 * ((t - 5 * tau) / tau) ** 2) * math.sin(2 * math.pi * 12e3 * (t - 5 * tau))
            rec.append(e[probe])
        return np.array(rec)

    ref, got = simulate(False), simulate(True)
    t = np.arange(steps) * dt
    w = 2 * np.pi * np.asarray(freqs)[:, None]
    incident = np.abs((ref * np.exp(-1j * w * t)).sum(axis=1))
    reflected = np.abs(((got - ref) * np.exp(-1j * w * t)).sum(axis=1))
    return 20 * np.log10(reflected / incident)


def test_cpml_reflects_less_than_minus_60_db_at_vlf():
    # docs/physics.md 4 (derived 1-D test): 20 cells, m = 3, alpha = 0 reflect about -80 dB or better
    # at normal incidence; we require -60 dB over 3-30 kHz on a 500 m grid.
    refl = _cpml_1d_reflection([3e3, 6e3, 12e3, 20e3, 30e3])
    assert np.all(refl < -60), refl


@pytest.mark.parametrize(
    "sigma, eps_r",
    [(5.0, 70.0), (1e-2, 30.0), (1e-3, 15.0), (1e-4, 3.0), (3e-5, 3.0)],  # ITU-R P.527 classes
)
def test_recursive_ground_matches_leontovich_impedance(sigma, eps_r):
    # Leontovich surface impedance Zs = sqrt(j w mu0/(sigma + j w eps)) (docs/physics.md 5) against the
    # impedance the recursive update realises (its exact z-transform), over 10-30 kHz.
    dt = 1.2e-6
    eta, q, w, err = media.impedance_fit(sigma, eps_r, dt, 10e3, 30e3)
    omega = 2 * np.pi * np.linspace(5e3, 60e3, 200)
    exact = media.leontovich_impedance(omega, sigma, eps_r)
    realised = media.discrete_impedance(omega, dt, eta, q, w)
    assert np.max(np.abs(realised / exact - 1)) < 1e-3
    assert err < 1e-3
    # passive at every frequency the grid carries (Re Z >= 0 up to Nyquist), hence stable
    check = np.linspace(0, np.pi / dt, 5001)
    assert media.discrete_impedance(check, dt, eta, q, w).real.min() >= -1e-9 * eta


def test_leontovich_good_conductor_limit():
    # For sigma >> w eps: Zs = (1 + j) sqrt(w mu0 / (2 sigma)) (textbook skin-effect impedance).
    w = 2 * np.pi * 20e3
    z = media.leontovich_impedance(w, 5.0, 70.0)
    assert z == pytest.approx((1 + 1j) * math.sqrt(w * MU0 / 10.0), rel=1e-4)


def test_flattening_and_spherical_correction():
    # docs/physics.md 7: sqrt(d/(a sin(d/a))) is +0.5 dB at 5 Mm and +2 dB at 10 Mm (Richter 1966 flattening).
    corr = media.spherical_spreading_correction(np.array([5e6, 10e6]))
    assert 20 * np.log10(corr) == pytest.approx([0.5, 2.0], abs=0.15)
    assert media.flattening_factor(100e3)[()] == pytest.approx((1 + 100e3 / 6371e3) ** 2)
    assert np.all(media.flattening_factor([0, 5e4], earth_curvature=False) == 1)
