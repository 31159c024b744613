"""Closed forms for a short vertical current element: calibration, ground-level field, ground impedance.

Conventions (README, "Result file reference"): phasors with time dependence exp(+j omega t); RMS amplitudes; the
moment ``p = I l`` (A m) is that of a monopole standing on the ground, whose image in a perfectly
conducting ground doubles it to ``2 p`` in free-space terms.

References
----------
ITU-R Recommendation P.368-9 (2007), Ground-wave propagation curves for frequencies between 10 kHz
and 30 MHz: a short monopole on perfect ground radiating 1 kW gives 300 mV/m at 1 km (cymomotive
force 300 V).
Balanis, C. A. (2016), Antenna Theory, 4th ed., Wiley, chapter 4 (fields of the infinitesimal
dipole, all distance terms).
Leontovich surface impedance: Senior, T. B. A., and Volakis, J. L. (1995), Approximate Boundary
Conditions in Electromagnetics, IEE.
"""

from __future__ import annotations

import math

import numpy as np

from cavity.constants import C0, EPS0, ETA0, MU0
from cavity.errors import ScenarioError

__all__ = [
    "current_moment_for_power",
    "free_space_ez",
    "ground_level_field",
    "surface_impedance",
    "wavenumber",
]


def _positive(name: str, value, unit: str, allow_inf: bool = False) -> np.ndarray:
    arr = np.asarray(value, dtype=float)
    bad = ~(arr > 0) | (~np.isfinite(arr) if not allow_inf else np.isnan(arr))
    if np.any(bad):
        first = arr[bad].flat[0] if arr.ndim else arr
        top = "inf" if allow_inf else "finite"
        raise ScenarioError(f"{name} = {first} {unit} is out of range; allowed: > 0 and {top}")
    return arr


def _check_frequency(frequency_hz) -> float:
    f = float(np.asarray(frequency_hz, dtype=float))
    if not (math.isfinite(f) and f > 0.0):
        raise ScenarioError(f"frequency_hz = {frequency_hz} Hz is out of range; allowed: > 0 and finite")
    return f


def wavenumber(frequency_hz: float) -> float:
    """Free-space wavenumber k = omega / c (rad/m)."""
    return 2.0 * math.pi * _check_frequency(frequency_hz) / C0


def current_moment_for_power(radiated_power_w: float, frequency_hz: float) -> float:
    """RMS current moment ``I l`` (A m) of a short monopole on perfect ground radiating a given power.

    From P = 160 pi^2 (I l / lambda)^2 (radiation resistance of a short monopole over a perfect
    ground, half that of the dipole of length 2 l); with it the ground-level far field is
    E d = sqrt(90 P), i.e. 300 mV/m at 1 km for 1 kW (ITU-R P.368).

    Parameters
    ----------
    radiated_power_w : float
        Radiated power (W), > 0.
    frequency_hz : float
        Frequency (Hz), > 0.

    Returns
    -------
    float
        RMS current moment (A m).
    """
    power = float(_positive("radiated_power_w", radiated_power_w, "W"))
    wavelength = C0 / _check_frequency(frequency_hz)
    return wavelength * math.sqrt(power / (160.0 * math.pi**2))


def ground_level_field(range_m, frequency_hz: float, moment_am: complex) -> np.ndarray:
    """Complex vertical field Ez (V/m) at ground level from a short monopole on a perfect ground.

    All distance terms of the infinitesimal dipole (Balanis 2016, eq. 4-10) at 90 degrees from its
    axis, with the image doubling the moment (docs/physics.md 6):

        Ez = -j eta0 k p / (2 pi d) (1 + 1/(j k d) - 1/(k d)^2) exp(-j k d)

    The far-field part, |Ez| d = eta0 k |p| / (2 pi), is 300 V for the moment of 1 kW.

    Parameters
    ----------
    range_m : array_like
        Ground distance from the element (m), > 0.
    frequency_hz : float
        Frequency (Hz).
    moment_am : complex
        Current moment ``I l`` of the monopole (A m), RMS phasor.
    """
    d = _positive("range_m", range_m, "m")
    k = wavenumber(frequency_hz)
    kd = k * d
    return -1j * ETA0 * k * moment_am / (2.0 * math.pi * d) * (1.0 + 1.0 / (1j * kd) - 1.0 / kd**2) * np.exp(-1j * kd)


def free_space_ez(radial_m, vertical_m, frequency_hz: float, moment_am: complex) -> np.ndarray:
    """Vertical field Ez (V/m) of a vertical current element of moment ``moment_am`` in free space.

    The element sits at the origin; the observer is at horizontal distance ``radial_m`` and height
    ``vertical_m`` above it. Built from the spherical components of the infinitesimal dipole
    (Balanis 2016, eqs. 4-10a,b), Ez = Er cos(theta) - Etheta sin(theta):

        Er     = eta0 M cos(theta) / (2 pi R^2) (1 + 1/(j k R)) exp(-j k R)
        Etheta = j eta0 k M sin(theta) / (4 pi R) (1 + 1/(j k R) - 1/(k R)^2) exp(-j k R)

    Used as the building block of the image series of :mod:`cavity.reference.plates`.
    """
    rho = np.asarray(radial_m, dtype=float)
    z = np.asarray(vertical_m, dtype=float)
    k = wavenumber(frequency_hz)
    big_r = np.hypot(rho, z)
    if np.any(big_r <= 0.0):
        raise ScenarioError("free_space_ez: observer at the element (R = 0 m); allowed: R > 0")
    cos_t = z / big_r
    sin_t = rho / big_r
    kr = k * big_r
    phase = np.exp(-1j * kr)
    e_r = ETA0 * moment_am * cos_t / (2.0 * math.pi * big_r**2) * (1.0 + 1.0 / (1j * kr)) * phase
    e_t = 1j * ETA0 * k * moment_am * sin_t / (4.0 * math.pi * big_r) * (1.0 + 1.0 / (1j * kr) - 1.0 / kr**2) * phase
    return e_r * cos_t - e_t * sin_t


def surface_impedance(frequency_hz: float, conductivity, relative_permittivity) -> complex:
    """Leontovich surface impedance Zs (ohm) of a homogeneous ground, exp(+j omega t).

    Zs = sqrt(j omega mu0 / (sigma + j omega eps0 eps_r)), the principal root (Re Zs >= 0: the
    ground absorbs). An infinite conductivity gives 0 (perfect ground).

    Parameters
    ----------
    frequency_hz : float
        Frequency (Hz).
    conductivity : float
        Ground conductivity (S/m), > 0 (``inf`` for a perfect ground).
    relative_permittivity : float
        Ground relative permittivity, >= 1.
    """
    omega = 2.0 * math.pi * _check_frequency(frequency_hz)
    sigma = float(_positive("conductivity", conductivity, "S/m", allow_inf=True))
    eps_r = float(relative_permittivity)
    if not (math.isfinite(eps_r) and eps_r >= 1.0):
        raise ScenarioError(
            f"relative_permittivity = {relative_permittivity} is out of range; allowed: >= 1 and finite"
        )
    if math.isinf(sigma):
        return 0j
    return complex(np.sqrt(1j * omega * MU0 / (sigma + 1j * omega * EPS0 * eps_r)))
