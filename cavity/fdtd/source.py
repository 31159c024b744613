"""Source current waveforms and the radiated-power calibration of the transmitter.

The engine drives a short vertical current element on the axis at ground level with a current
waveform ``I(t)`` (any callable of time in s returning A). Field phasors at a frequency are the DFT of
the field over the whole run divided by the DFT of the current at the same instants, so any waveform
whose spectrum is not negligible at that frequency yields the response: a carrier switched on and
off smoothly (narrow band), a broadband pulse (many frequencies from one run), or a lightning
return stroke (see :mod:`cavity.fdtd.lightning`, when present).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

import numpy as np

from cavity.constants import C0


class Waveform(Protocol):
    """A source current I(t) in A; ``end_s`` is when it has died away (no energy after that).

    A source spread along the axis (a lightning channel) also provides
    ``axis_currents(t_s, z_m) -> array`` (A in each axis cell of height dz centred at ``z_m``) and
    ``channel_height_m``; the engine then drives every axis cell up to that height and normalises by
    the total moment sum(I_j) dz.
    """

    end_s: float

    def __call__(self, t_s: np.ndarray | float) -> np.ndarray | float: ...


def moment_for_power(radiated_power_w: float, frequency_hz: float) -> float:
    """RMS current moment I*l (A m) of a short monopole over perfect ground radiating ``P``.

    P = 160 pi^2 (I l / lambda)^2 (docs/physics.md 6; ITU-R P.368: 1 kW gives 300 mV/m at 1 km,
    a cymomotive force of 300 V).
    """
    wavelength = C0 / frequency_hz
    return wavelength * math.sqrt(radiated_power_w / (160.0 * math.pi**2))


@dataclass(frozen=True)
class ToneBursts:
    """Carriers at one or more frequencies, each switched on and off with a Gaussian envelope.

    I(t) = sum_k exp(-((t - t0)/tau)^2 / 2) sin(2 pi f_k (t - t0)), with tau = ``cycles`` periods
    of the lowest carrier and t0 = 4.5 tau, so the spectrum around each carrier has a width
    of about 1/(2 pi tau) and nothing near the waveguide cutoffs far below.
    """

    frequencies_hz: tuple[float, ...]
    cycles: float = 3.0

    @property
    def tau_s(self) -> float:
        return self.cycles / min(self.frequencies_hz)

    @property
    def t0_s(self) -> float:
        return 4.5 * self.tau_s

    @property
    def end_s(self) -> float:
        return 9.0 * self.tau_s

    def __call__(self, t_s):
        t = np.asarray(t_s, dtype=float) - self.t0_s
        env = np.exp(-0.5 * (t / self.tau_s) ** 2)
        out = np.zeros_like(t)
        for f in self.frequencies_hz:
            out = out + np.sin(2 * math.pi * f * t)
        return env * out


@dataclass(frozen=True)
class GaussianPulse:
    """A broadband pulse covering [f_low, f_high]: a Gaussian-windowed sine at the band centre.

    Its spectrum is a Gaussian around the centre frequency whose width is chosen so that both
    band edges sit at about 1/e^2 of the peak; no DC component (a zero-mean current), so no static
    charge is left on the element.
    """

    f_low_hz: float
    f_high_hz: float

    @property
    def centre_hz(self) -> float:
        return 0.5 * (self.f_low_hz + self.f_high_hz)

    @property
    def tau_s(self) -> float:
        half_band = max(0.5 * (self.f_high_hz - self.f_low_hz), 0.05 * self.centre_hz)
        return 2.0 / (2 * math.pi * half_band)  # spectrum exp(-(2 pi df tau)^2 / 2) = e^-2 at the edges

    @property
    def t0_s(self) -> float:
        return 5.0 * self.tau_s

    @property
    def end_s(self) -> float:
        return 10.0 * self.tau_s

    def __call__(self, t_s):
        t = np.asarray(t_s, dtype=float) - self.t0_s
        return np.exp(-0.5 * (t / self.tau_s) ** 2) * np.sin(2 * math.pi * self.centre_hz * t)


def sampled(waveform: Callable, dt: float, n_steps: int) -> np.ndarray:
    """The waveform at the half steps (n + 1/2) dt, n = 0..n_steps-1, when the E update uses it."""
    return np.asarray(waveform((np.arange(n_steps) + 0.5) * dt), dtype=float)
