"""Lightning return strokes as impulsive sources: a Heidler current on a transmission-line channel.

Channel-base current (Heidler, Cvetic and Stanic 1999, IEEE Trans. Power Delivery 14(2) 399):

    i(t) = (I0 / eta) x^n / (1 + x^n) exp(-t / tau2),   x = t / tau1,
    eta  = exp(-(tau1 / tau2) (n tau2 / tau1)^(1/n)),

the correction eta putting the peak close to I0. Channel: the transmission-line model (Uman and
McLain 1969, J. Geophys. Res. 74(28) 6899): the base current travels up the straight vertical
channel at speed v without change, I(z, t) = i(t - z/v) for 0 <= z < H, and stops at the top. The
current moment M(t) = int_0^H I(z, t) dz is what a short-dipole view of the channel radiates;
dM/dt = v (i(t) - i(t - H/v)), so the far radiation field follows v (i(t) - i(t - H/v)).

The object is a waveform for :mod:`cavity.fdtd.engine`: ``__call__`` is the channel-base current and
``axis_currents``/``channel_height_m`` spread the channel over the axis cells.

On a VLF grid (dt near 1 us, cells of a few hundred metres) the 1.8 us front is not resolved: the
grid passes what it resolves (up to about the frequency at which it has 10-20 cells per
wavelength) and misrepresents the rest, so waveforms at receivers are meaningful only after a
low-pass at the band's upper edge (:mod:`cavity.sferic` does that). The band of interest of a sferic
(0.5-30 kHz) lies far below 1/(2 pi tau1) = 88 kHz, where the front matters.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from cavity.constants import C0

#: First return stroke, channel-base current (docs/physics.md 6; Heidler, Cvetic and Stanic 1999).
FIRST_STROKE_PEAK_A = 28e3
FIRST_STROKE_TAU1_S = 1.8e-6
FIRST_STROKE_TAU2_S = 95e-6
FIRST_STROKE_EXPONENT = 2.0
#: Transmission-line channel: return-stroke speed and channel height (typical values, common practice).
DEFAULT_SPEED_FRACTION = 0.5
DEFAULT_CHANNEL_HEIGHT_M = 7.5e3
#: The waveform counts as ended when the current at the channel top has fallen to this fraction of the peak.
END_FRACTION = 1e-3


@dataclass(frozen=True)
class HeidlerStroke:
    """A return stroke: Heidler channel-base current on a transmission-line channel (SI units).

    Parameters
    ----------
    peak_current_a : float
        I0, A (the peak of i(t) is close to it; the moment points up).
    rise_time_constant_s, decay_time_constant_s : float
        tau1 (front) and tau2 (decay), s; tau1 < tau2.
    exponent : float
        Heidler steepness n (>= 1).
    channel_speed_m_per_s : float
        Return-stroke speed v along the channel, m/s (0 < v <= c).
    channel_height_m : float
        Channel height H, m.
    """

    peak_current_a: float = FIRST_STROKE_PEAK_A
    rise_time_constant_s: float = FIRST_STROKE_TAU1_S
    decay_time_constant_s: float = FIRST_STROKE_TAU2_S
    exponent: float = FIRST_STROKE_EXPONENT
    channel_speed_m_per_s: float = DEFAULT_SPEED_FRACTION * C0
    channel_height_m: float = DEFAULT_CHANNEL_HEIGHT_M

    def __post_init__(self):
        checks = (
            ("peak_current_a", self.peak_current_a, 0.0, math.inf),
            ("rise_time_constant_s", self.rise_time_constant_s, 0.0, math.inf),
            ("decay_time_constant_s", self.decay_time_constant_s, self.rise_time_constant_s, math.inf),
            ("channel_speed_m_per_s", self.channel_speed_m_per_s, 0.0, C0 * (1 + 1e-12)),
            ("channel_height_m", self.channel_height_m, 0.0, math.inf),
        )
        for name, value, low, high in checks:
            if not (math.isfinite(value) and low < value <= high):
                raise ValueError(f"{name} = {value!r}: must be finite, > {low:g} and <= {high:g}")
        if not (math.isfinite(self.exponent) and self.exponent >= 1.0):
            raise ValueError(f"exponent = {self.exponent!r}: must be >= 1")

    # ------------------------------------------------------------------ the current
    @property
    def eta(self) -> float:
        """Peak correction factor eta of the Heidler function."""
        t1, t2, n = self.rise_time_constant_s, self.decay_time_constant_s, self.exponent
        return math.exp(-(t1 / t2) * (n * t2 / t1) ** (1.0 / n))

    def __call__(self, t_s):
        """Channel-base current i(t), A (zero for t <= 0)."""
        t = np.asarray(t_s, dtype=float)
        tp = np.maximum(t, 0.0)
        xn = (tp / self.rise_time_constant_s) ** self.exponent
        out = (self.peak_current_a / self.eta) * xn / (1.0 + xn) * np.exp(-tp / self.decay_time_constant_s)
        return np.where(t > 0, out, 0.0)

    @property
    def transit_time_s(self) -> float:
        """H / v: the time the front takes to climb the channel."""
        return self.channel_height_m / self.channel_speed_m_per_s

    def axis_currents(self, t_s: float, z_m) -> np.ndarray:
        """Current I(z, t) = i(t - z/v) at heights ``z_m`` (zero at and above the channel top), A."""
        z = np.asarray(z_m, dtype=float)
        return np.where(z < self.channel_height_m, self(t_s - z / self.channel_speed_m_per_s), 0.0)

    def current_moment(self, t_s):
        """Current moment M(t) = int_0^H I(z, t) dz = v (q(t) - q(t - H/v)), A m (q: charge through the base)."""
        v = self.channel_speed_m_per_s
        return v * (self.charge(t_s) - self.charge(np.asarray(t_s, float) - self.transit_time_s))

    def moment_derivative(self, t_s):
        """dM/dt = v (i(t) - i(t - H/v)), A m/s: the far radiation field's time shape (TL model)."""
        return self.channel_speed_m_per_s * (self(t_s) - self(np.asarray(t_s, float) - self.transit_time_s))

    # ------------------------------------------------------------------ derived numbers
    @functools.cached_property
    def _fine(self) -> tuple[np.ndarray, np.ndarray]:
        """The base current on a fine grid (tau1/100 steps) up to the end of the waveform."""
        t_end = self.decay_end_s * 1.5 + 20 * self.rise_time_constant_s
        step = self.rise_time_constant_s / 100.0
        t = np.linspace(0.0, t_end, int(math.ceil(t_end / step)) + 1)
        return t, self(t)

    @functools.cached_property
    def _cumulative_charge(self) -> np.ndarray:
        t, i = self._fine
        # composite trapezoid on a grid 100x finer than tau1 (error far below 1e-6 of the total)
        return np.concatenate([[0.0], np.cumsum(0.5 * (i[1:] + i[:-1]) * np.diff(t))])

    def charge(self, t_s):
        """Charge through the channel base since the onset, q(t) = int_0^t i, C."""
        t, i = self._fine
        ts = np.asarray(t_s, float)
        q = np.interp(ts, t, self._cumulative_charge, left=0.0)
        # beyond the fine grid the current is i(T) exp(-(t - T)/tau2) to relative 1e-9
        late = ts > t[-1]
        tau2 = self.decay_time_constant_s
        return np.where(late, self._cumulative_charge[-1] + i[-1] * tau2 * (1.0 - np.exp(-(ts - t[-1]) / tau2)), q)

    @property
    def charge_transferred_c(self) -> float:
        """Total charge of the stroke, int_0^inf i dt, C (tail beyond the grid added analytically)."""
        t, i = self._fine
        # beyond t_end the current is (I0/eta) exp(-t/tau2) to relative 1e-9: its integral is i tau2
        return float(self._cumulative_charge[-1] + i[-1] * self.decay_time_constant_s)

    @functools.cached_property
    def _peak(self) -> tuple[float, float]:
        from scipy.optimize import minimize_scalar

        t, i = self._fine
        k = int(np.argmax(i))
        lo, hi = t[max(k - 1, 0)], t[min(k + 1, t.size - 1)]
        res = minimize_scalar(
            lambda x: -float(self(x)),
            bounds=(lo, hi),
            method="bounded",
            options={"xatol": 1e-6 * self.rise_time_constant_s},
        )
        return float(res.x), float(self(res.x))

    @property
    def peak_time_s(self) -> float:
        """Time of the current peak, s."""
        return self._peak[0]

    @property
    def peak_a(self) -> float:
        """Largest base current, A (close to ``peak_current_a``)."""
        return self._peak[1]

    def _crossing(self, fraction: float) -> float:
        """First time the rising current reaches ``fraction`` of its peak (bisection on the front)."""
        from scipy.optimize import brentq

        level = fraction * self.peak_a
        return float(brentq(lambda x: float(self(x)) - level, 0.0, self.peak_time_s, xtol=1e-15, rtol=1e-12))

    @property
    def rise_time_10_90_s(self) -> float:
        """10-90 % rise time of the base current, s."""
        return self._crossing(0.9) - self._crossing(0.1)

    @property
    def decay_end_s(self) -> float:
        """When the base current has fallen to END_FRACTION of the peak, s."""
        from scipy.optimize import brentq

        t1, t2 = self.rise_time_constant_s, self.decay_time_constant_s
        target = END_FRACTION * self.peak_current_a
        start = t1 * (self.exponent * t2 / t1) ** (1.0 / self.exponent)  # near the peak
        hi = start
        while float(self(hi)) > target:
            hi = 2.0 * hi + t2
        return float(brentq(lambda x: float(self(x)) - target, start, hi, xtol=1e-12, rtol=1e-10))

    @property
    def end_s(self) -> float:
        """When the current has died away along the whole channel (engine protocol), s."""
        return self.decay_end_s + self.transit_time_s

    # ------------------------------------------------------------------ spectra
    def current_spectrum(self, frequency_hz) -> np.ndarray:
        """Fourier transform I(f) = int i(t) exp(-j 2 pi f t) dt of the base current, A/Hz.

        Direct quadrature on the fine grid (trapezoid, tau1/100 steps), tail beyond it in closed form.
        """
        f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        t, i = self._fine
        w = np.full(t.size, t[1] - t[0])
        w[0] = w[-1] = 0.5 * (t[1] - t[0])
        out = np.empty(f.size, complex)
        for k0 in range(0, f.size, 64):
            fk = f[k0 : k0 + 64]
            out[k0 : k0 + 64] = np.exp(-2j * np.pi * np.outer(fk, t)) @ (w * i)
        # tail t > T: (i(T)) exp(-(t-T)/tau2) -> i(T) exp(-j w T) / (1/tau2 + j w)
        T = t[-1]
        out += i[-1] * np.exp(-2j * np.pi * f * T) / (1.0 / self.decay_time_constant_s + 2j * np.pi * f)
        return out

    def moment_spectrum(self, frequency_hz) -> np.ndarray:
        """Fourier transform of the current moment, M(f) = I(f) v (1 - exp(-j w H/v)) / (j w), A m/Hz."""
        f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        w = 2 * np.pi * f
        v, tau = self.channel_speed_m_per_s, self.transit_time_s
        with np.errstate(invalid="ignore", divide="ignore"):
            factor = np.where(
                w > 0, v * (1.0 - np.exp(-1j * w * tau)) / (1j * np.where(w > 0, w, 1.0)), self.channel_height_m
            )
        return self.current_spectrum(f) * factor

    def radiation_spectrum(self, frequency_hz) -> np.ndarray:
        """Fourier transform of dM/dt, j w M(f), A m: the shape of the far field's spectrum."""
        f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        return 2j * np.pi * f * self.moment_spectrum(f)

    def radiation_spectrum_peak_hz(self, f_low_hz: float = 300.0, f_high_hz: float = 30e3) -> float:
        """Frequency where |j w M(f)| peaks (log-spaced search, then a bounded refinement), Hz."""
        from scipy.optimize import minimize_scalar

        f = np.geomspace(f_low_hz, f_high_hz, 100)
        a = np.abs(self.radiation_spectrum(f))
        k = int(np.argmax(a))
        lo, hi = f[max(k - 1, 0)], f[min(k + 1, f.size - 1)]
        res = minimize_scalar(
            lambda x: -float(np.abs(self.radiation_spectrum(x))[0]),
            bounds=(lo, hi),
            method="bounded",
            options={"xatol": 1e-3},
        )
        return float(res.x)

    def describe(self) -> str:
        """One line for logs and file attributes."""
        return (
            f"Heidler return stroke: I0 = {self.peak_current_a / 1e3:g} kA, tau1 = "
            f"{self.rise_time_constant_s * 1e6:g} us, tau2 = {self.decay_time_constant_s * 1e6:g} us, "
            f"n = {self.exponent:g}; transmission-line channel v = {self.channel_speed_m_per_s / C0:g} c, "
            f"H = {self.channel_height_m / 1e3:g} km"
        )
