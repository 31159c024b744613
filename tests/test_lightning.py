"""Lightning source: Heidler channel-base current on a transmission-line channel.

Every check recomputes the published formulas here, independently of the module: the Heidler
function (Heidler, Cvetic and Stanic 1999, IEEE Trans. Power Delivery 14(2) 399) integrated with
scipy.integrate.quad and maximised/solved with scipy.optimize, and the transmission-line channel
(Uman and McLain 1969, J. Geophys. Res. 74(28) 6899) integrated along the channel.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import brentq, minimize_scalar

from cavity.constants import C0
from cavity.fdtd.lightning import HeidlerStroke

# docs/physics.md 6: first return stroke, channel-base current
I0, TAU1, TAU2, N = 28e3, 1.8e-6, 95e-6, 2.0


def heidler(t, i0=I0, tau1=TAU1, tau2=TAU2, n=N):
    """The published formula, written out again: (I0/eta) x^n/(1+x^n) exp(-t/tau2), x = t/tau1."""
    eta = math.exp(-(tau1 / tau2) * (n * tau2 / tau1) ** (1.0 / n))
    if t <= 0:
        return 0.0
    x = (t / tau1) ** n
    return i0 / eta * x / (1.0 + x) * math.exp(-t / tau2)


def heidler_vec(t):
    return np.array([heidler(x) for x in np.atleast_1d(t)])


def formula_peak(**kw):
    t_guess = TAU1 * 10
    res = minimize_scalar(
        lambda t: -heidler(t, **kw), bounds=(0.1 * TAU1, 100 * TAU1), method="bounded", options={"xatol": 1e-14}
    )
    assert res.x > 0.1 * TAU1 and t_guess > 0
    return res.x, -res.fun


@pytest.fixture(scope="module")
def stroke():
    return HeidlerStroke()


def test_peak_current_matches_the_heidler_formula(stroke):
    # Heidler et al. 1999: the maximum of the formula, found here by bounded scalar minimisation
    t_peak, peak = formula_peak()
    assert stroke.peak_a == pytest.approx(peak, rel=1e-9)
    assert stroke.peak_time_s == pytest.approx(t_peak, rel=1e-4)
    # eta puts the peak close to I0: 6 % above it for n = 2 (the correction is exact only as n grows)
    assert 1.0 < peak / I0 < 1.07
    _, peak10 = formula_peak(n=10.0)
    assert abs(peak10 / I0 - 1.0) < 0.01
    assert stroke(t_peak) == pytest.approx(peak, rel=1e-9)


def test_rise_time_10_90_matches_the_formula(stroke):
    # 10 % and 90 % crossings of the formula's front, solved independently with brentq
    t_peak, peak = formula_peak()
    t10 = brentq(lambda t: heidler(t) - 0.1 * peak, 1e-12, t_peak, xtol=1e-16)
    t90 = brentq(lambda t: heidler(t) - 0.9 * peak, 1e-12, t_peak, xtol=1e-16)
    assert stroke.rise_time_10_90_s == pytest.approx(t90 - t10, rel=1e-6)
    assert 2e-6 < t90 - t10 < 5e-6  # a few microseconds for the first-stroke values


def test_charge_transferred_matches_quad(stroke):
    # Total charge int_0^inf i dt by adaptive quadrature (scipy.integrate.quad), split at the front
    q_front, _ = quad(heidler, 0.0, 50 * TAU1, limit=200, epsabs=0, epsrel=1e-12)
    q_tail, _ = quad(heidler, 50 * TAU1, np.inf, limit=200, epsabs=0, epsrel=1e-12)
    q = q_front + q_tail
    assert stroke.charge_transferred_c == pytest.approx(q, rel=2e-6)
    assert 2.5 < q < 3.5  # about I0 tau2 / eta ~ 3.2 C less the slow front
    # charge through the base up to 200 us, also by quad
    q200, _ = quad(heidler, 0.0, 200e-6, limit=200, epsrel=1e-12)
    assert float(stroke.charge(200e-6)) == pytest.approx(q200, rel=1e-5)


def test_current_spectrum_matches_the_fourier_integral(stroke):
    # I(f) = int i(t) exp(-j 2 pi f t) dt, real and imaginary parts by quad (weight='cos'/'sin')
    for f in (300.0, 3e3, 30e3):
        w = 2 * math.pi * f
        re = quad(heidler, 0, 3e-3, weight="cos", wvar=w, limit=400)[0]
        im = -quad(heidler, 0, 3e-3, weight="sin", wvar=w, limit=400)[0]
        got = stroke.current_spectrum(f)[0]
        assert abs(got - (re + 1j * im)) < 2e-5 * abs(re + 1j * im)
    assert stroke.current_spectrum(0.0)[0].real == pytest.approx(stroke.charge_transferred_c, rel=1e-9)


@functools.cache
def _current_ft(f):
    w = 2 * math.pi * f
    re = quad(heidler, 0, 3e-3, weight="cos", wvar=w, limit=400)[0]
    im = -quad(heidler, 0, 3e-3, weight="sin", wvar=w, limit=400)[0]
    return re + 1j * im


def _radiation_spectrum_peak(height_m, speed):
    """Peak of |v I(f) (1 - exp(-j w H/v))| (the TL channel's dM/dt), I(f) from quad, bounded search."""

    def magnitude(f):
        w = 2 * math.pi * f
        return abs(speed * _current_ft(float(f)) * (1 - np.exp(-1j * w * height_m / speed)))

    grid = np.geomspace(1e3, 20e3, 40)
    k = int(np.argmax([magnitude(f) for f in grid]))
    res = minimize_scalar(
        lambda f: -magnitude(f), bounds=(grid[k - 1], grid[k + 1]), method="bounded", options={"xatol": 0.5}
    )
    return res.x


def test_moment_spectrum_peaks_at_a_few_khz():
    # The radiated field follows dM/dt = v (i(t) - i(t - H/v)) (transmission-line model); its spectrum
    # peaks at a few kHz: about 3-4 kHz for a 5-10 km channel with the first-stroke values (issue;
    # the composite lightning spectrum peaks near 5 kHz, Le Vine 1987, from memory).
    peaks = {}
    for height in (5e3, 7.5e3, 10e3):
        s = HeidlerStroke(channel_height_m=height, channel_speed_m_per_s=0.5 * C0)
        independent = _radiation_spectrum_peak(height, 0.5 * C0)
        peaks[height] = s.radiation_spectrum_peak_hz()
        assert peaks[height] == pytest.approx(independent, rel=0.005)
    assert 3.0e3 < peaks[10e3] < 4.0e3
    assert 3.5e3 < peaks[7.5e3] < 4.5e3
    assert 4.5e3 < peaks[5e3] < 5.5e3
    assert peaks[5e3] > peaks[7.5e3] > peaks[10e3]  # a taller channel radiates lower


def test_transmission_line_channel(stroke):
    v, h = stroke.channel_speed_m_per_s, stroke.channel_height_m
    t = 30e-6
    z = np.array([0.0, 1e3, 4e3, 7.4e3, 7.5e3, 9e3])
    expected = [heidler(t - zz / v) if zz < h else 0.0 for zz in z]
    assert np.allclose(stroke.axis_currents(t, z), expected, rtol=1e-12, atol=0)
    # moment = int_0^H I(z, t) dz, by quad along the channel
    for t in (5e-6, 20e-6, 80e-6, 300e-6):
        m, _ = quad(lambda zz: heidler(t - zz / v), 0, h, limit=200, epsrel=1e-10)
        assert float(stroke.current_moment(t)) == pytest.approx(m, rel=1e-5)
        # dM/dt = v (i(t) - i(t - H/v)), against a centred difference of the moment
        dt = 1e-9
        num = (float(stroke.current_moment(t + dt)) - float(stroke.current_moment(t - dt))) / (2 * dt)
        assert float(stroke.moment_derivative(t)) == pytest.approx(num, rel=2e-3)


def test_end_of_the_waveform(stroke):
    # end_s: the current at the channel top has fallen to 1e-3 of I0 (and stays below)
    top = stroke.channel_height_m * 0.999
    for t in (stroke.end_s, 1.5 * stroke.end_s):
        assert float(stroke.axis_currents(t, [top])[0]) <= 1.0001e-3 * I0
    assert float(stroke.axis_currents(0.9 * stroke.end_s, [0.0])[0]) > 1e-3 * I0
    assert stroke.end_s == pytest.approx(stroke.decay_end_s + stroke.channel_height_m / stroke.channel_speed_m_per_s)


@pytest.mark.parametrize(
    "kw",
    [
        {"peak_current_a": -1.0},
        {"rise_time_constant_s": 0.0},
        {"decay_time_constant_s": 1e-6},
        {"channel_speed_m_per_s": 2 * C0},
        {"channel_height_m": float("nan")},
        {"exponent": 0.5},
    ],
)
def test_bad_parameters_are_refused(kw):
    with pytest.raises(ValueError, match=next(iter(kw))):
        HeidlerStroke(**kw)


def test_engine_drives_the_channel_and_records_its_moment():
    # A tiny run between plates: the engine drives every axis cell below H with i(t - z_j/v) and records
    # the moment sum(I_j) dz; once the front has reached the top the sum is the channel's moment
    # int_0^H I dz to the midpoint rule's accuracy (0.1 %); its recorded base current is the waveform.
    from cavity.fdtd import engine as eng

    stroke = HeidlerStroke(channel_height_m=6e3)
    settings = eng.Settings(
        frequencies_hz=(5e3,),
        max_range_m=20e3,
        dr_m=500.0,
        dz_m=500.0,
        earth_curvature=False,
        waveform=stroke,
        probe_ranges_m=(10e3,),
        record_time_series=True,
        convergence_db=0.0,
        max_duration_s=0.3e-3,
    )
    res = eng.run(eng.Medium.uniform(ceiling_m=20e3), settings)
    t = res.time_s
    assert np.allclose(res.source_current, stroke(t), rtol=1e-12)
    z_cells = (np.arange(12) + 0.5) * 500.0  # cell centres below H = 6 km
    midpoint = np.array([np.sum(heidler_vec(tk - z_cells / stroke.channel_speed_m_per_s)) * 500.0 for tk in t])
    assert np.allclose(res.source_moment, midpoint, rtol=1e-9, atol=0)
    exact = stroke.current_moment(t)
    after = (t > 1.2 * stroke.transit_time_s) & (exact > 1e-3 * exact.max())
    assert np.max(np.abs(res.source_moment[after] / exact[after] - 1)) < 1e-3
    assert np.all(np.isfinite(res.ez_series)) and np.max(np.abs(res.ez_series)) > 0
