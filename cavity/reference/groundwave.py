"""Ground wave over a flat, homogeneous, finitely conducting ground (no ionosphere).

Two references for a short vertical monopole on the ground, observed on the ground:

- the Sommerfeld-Norton attenuation function F(p) (flat earth), the ratio of the field to the field
  over a perfect ground, valid where k d >> 1;
- the exact field over a Leontovich (surface-impedance) ground, from a numerically evaluated
  Sommerfeld integral, valid at every distance (near field included). It checks the sign
  conventions of F independently.

Convention (exp(+j omega t), stated because published forms differ). With the normalised surface
impedance Delta = Zs / eta0 (Zs from :func:`cavity.reference.dipole.surface_impedance`, so
Delta ~ 1 / n for a ground of complex index n, Delta^2 = 1 / (eps_r - j sigma / (omega eps0))):

    p = -j k d Delta^2 / 2                      (numerical distance; ~ k d / (2 x) e^{-j b})
    F(p) = 1 - j sqrt(pi p) exp(-p) erfc(j sqrt(p))

and, with the Faddeeva function w(z) = exp(-z^2) erfc(-j z) (scipy.special.wofz), taking z = -sqrt(p):

    exp(-p) erfc(j sqrt(p)) = w(-sqrt(p))

(principal square roots). For a good conductor, Delta^2 = j / x with x = sigma / (omega eps0), so p
is real and positive; a permittivity gives p a small negative imaginary part (Norton's phase angle
b > 0). Limits: F -> 1 - j sqrt(pi p) - 2 p for small p, F -> -1/(2p) - 3/(4 p^2) for large p.

References
----------
Norton, K. A. (1937), The propagation of radio waves over the surface of the earth and in the upper
atmosphere, Part II, Proc. IRE 25(9), 1203-1236.
Wait, J. R. (1998), The ancient and modern history of EM ground-wave propagation, IEEE Antennas
Propag. Mag. 40(5), 7-24.
Sommerfeld integral for a vertical dipole over an impedance plane: Wait, J. R. (1970),
Electromagnetic Waves in Stratified Media, 2nd ed., Pergamon.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
from scipy.integrate import IntegrationWarning, quad
from scipy.special import hankel1e, hankel2e, j0, wofz

from cavity.constants import EPS0, ETA0
from cavity.errors import ScenarioError
from cavity.reference.dipole import _check_frequency, _positive, ground_level_field, surface_impedance, wavenumber

__all__ = [
    "attenuation_function",
    "ground_wave_field",
    "impedance_plane_field",
    "norton_function",
    "numerical_distance",
]


def numerical_distance(range_m, frequency_hz: float, conductivity: float, relative_permittivity: float) -> np.ndarray:
    """Complex numerical distance p = -j k d Delta^2 / 2 with Delta = Zs / eta0 (exp(+j omega t))."""
    d = _positive("range_m", range_m, "m")
    k = wavenumber(frequency_hz)
    delta = surface_impedance(frequency_hz, conductivity, relative_permittivity) / ETA0
    return -0.5j * k * d * delta * delta


def norton_function(p) -> np.ndarray:
    """F(p) = 1 - j sqrt(pi p) exp(-p) erfc(j sqrt p), evaluated as 1 - j sqrt(pi p) w(-sqrt p)."""
    p = np.asarray(p, dtype=complex)
    root = np.sqrt(p)
    return 1.0 - 1j * math.sqrt(math.pi) * root * wofz(-root)


def attenuation_function(range_m, frequency_hz: float, conductivity: float, relative_permittivity: float) -> np.ndarray:
    """Sommerfeld-Norton flat-earth attenuation function F (complex, |F| <= 1).

    Ratio of the ground-level field of a vertical monopole over the given homogeneous ground to the
    field over a perfect ground, for k d >> 1 (Norton 1937; Wait 1998). See the module docstring for
    the convention.

    Parameters
    ----------
    range_m : array_like
        Ground distance (m), > 0.
    frequency_hz : float
        Frequency (Hz).
    conductivity : float
        Ground conductivity (S/m), > 0 (``inf``: perfect ground, F = 1).
    relative_permittivity : float
        Ground relative permittivity, >= 1.
    """
    return norton_function(numerical_distance(range_m, frequency_hz, conductivity, relative_permittivity))


def ground_wave_field(
    range_m, frequency_hz: float, moment_am: complex, conductivity: float, relative_permittivity: float
) -> np.ndarray:
    """Ground-level Ez (V/m) over a homogeneous flat ground: the perfect-ground field times F.

    Good where k d >> 1 (within about 0.2 dB of :func:`impedance_plane_field` for k d > 40 at
    VLF over poor ground); use :func:`impedance_plane_field` nearer the source.
    """
    return ground_level_field(range_m, frequency_hz, moment_am) * attenuation_function(
        range_m, frequency_hz, conductivity, relative_permittivity
    )


def _cquad(func, a, b, points=None) -> complex:
    # Relative tolerance near double precision: quadpack may report reaching roundoff, which is
    # the intended stopping point here, not a failure.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IntegrationWarning)
        val, _err = quad(func, a, b, complex_func=True, limit=5000, epsabs=0.0, epsrel=1e-10, points=points)
    return complex(val)


def impedance_plane_field(
    range_m, frequency_hz: float, moment_am: complex, surface_impedance_ohm: complex
) -> np.ndarray:
    """Exact ground-level Ez (V/m) of a vertical monopole on a flat Leontovich ground (no ionosphere).

    From the Hankel transform of the source and the impedance condition U'(0) = j k Delta U(0)
    (Delta = Zs / eta0) the 1-D Green's function at the surface gives

        Ez(r, 0) = -(p / (2 pi omega eps0)) Int_0^inf kappa^3 J0(kappa r) / (kz + k Delta) dkappa,
        kz = sqrt(k^2 - kappa^2), Im kz <= 0,

    which for Delta = 0 is the perfect-ground near+far field of :func:`ground_level_field`. The
    integral is evaluated on [0, T k] with the substitutions kappa = k sin(t) and kappa = k cosh(u)
    (which remove the branch-point singularity at kappa = k), and from T k to infinity with
    J0 = (H0^(1) + H0^(2)) / 2 on vertical rays into the upper and lower half planes, where the Hankel
    functions decay exponentially. The surface-wave pole (kz = -k Delta) lies just below the real
    axis near kappa = k and is passed above, as on the real-axis path.

    Parameters
    ----------
    range_m : array_like
        Ground distance (m), > 0.
    frequency_hz : float
        Frequency (Hz).
    moment_am : complex
        Monopole moment ``I l`` (A m).
    surface_impedance_ohm : complex
        Leontovich impedance Zs of the ground (ohm), Re Zs >= 0 (0 = perfect).
    """
    r_all = _positive("range_m", range_m, "m")
    f = _check_frequency(frequency_hz)
    zs = complex(surface_impedance_ohm)
    if not (math.isfinite(zs.real) and math.isfinite(zs.imag) and zs.real >= 0.0):
        raise ScenarioError(f"surface_impedance_ohm = {zs} is out of range; allowed: finite with real part >= 0")
    k = wavenumber(f)
    omega = 2.0 * math.pi * f
    delta = zs / ETA0
    t_ratio = 1.5 + abs(delta) ** 2
    u_top = math.acosh(t_ratio)
    big_t = t_ratio * k

    def kz_proper(kappa):
        q = np.sqrt(k * k - kappa * kappa + 0j)
        return -q if q.imag > 0 else q

    out = np.empty(r_all.shape, dtype=complex)
    for idx, r in np.ndenumerate(r_all):
        # [0, k]: kappa = k sin t, kz = k cos t, dkappa = k cos t dt
        def seg1(t):
            kap = k * math.sin(t)
            c = math.cos(t)
            return kap**3 * c / (c + delta) * j0(kap * r)

        # [k, T k]: kappa = k cosh u, kz = -j k sinh u, dkappa = k sinh u du
        def seg2(u):
            kap = k * math.cosh(u)
            s = math.sinh(u)
            return kap**3 * s / (-1j * s + delta) * j0(kap * r)

        # Rays kappa = T k +- j v / r; the scaled Hankel functions carry exp(-+ j kappa r).
        def ray_up(v):
            kap = big_t + 1j * v / r
            h1 = hankel1e(0, kap * r) * np.exp(1j * big_t * r - v)
            return 0.5 * h1 * kap**3 / (kz_proper(kap) + k * delta) * (1j / r)

        def ray_down(v):
            kap = big_t - 1j * v / r
            h2 = hankel2e(0, kap * r) * np.exp(-1j * big_t * r - v)
            return 0.5 * h2 * kap**3 / (kz_proper(kap) + k * delta) * (-1j / r)

        knee = 0.5 * math.pi - 4.0 * abs(delta)
        pole = [knee] if 0.0 < knee < 0.5 * math.pi else []
        integral = (
            _cquad(seg1, 0.0, 0.5 * math.pi, points=pole or None)
            + _cquad(seg2, 0.0, u_top)
            + _cquad(ray_up, 0.0, np.inf)
            + _cquad(ray_down, 0.0, np.inf)
        )
        out[idx] = -(moment_am / (2.0 * math.pi * omega * EPS0)) * integral
    return out
