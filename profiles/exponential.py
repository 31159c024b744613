"""Exponential D-region profile of Wait and Spies (1964): electron density, collisions, permittivity.

The lower ionosphere is described by two numbers, the reference height h' (km) and the sharpness
beta (1/km). With z and h' in km and beta in 1/km (Wait and Spies 1964, NBS Technical Note 300):

    Ne(z) = 1.43e13 exp(-0.15 h') exp((beta - 0.15)(z - h'))     electrons per m^3
    nu(z) = 1.816e11 exp(-0.15 z)                                 electron collisions per s
    omega_r(z) = omega_p^2 / nu = 2.506e5 exp(beta (z - h'))      1/s

so h' is the height where the conductivity parameter omega_r equals 2.506e5 /s whatever beta is.
Altitudes are given in metres (SI inside); h' and beta keep the trade's km units in their names.

References
----------
Wait, J. R., and Spies, K. P. (1964), Characteristics of the earth-ionosphere waveguide for VLF
radio waves, NBS Technical Note 300, National Bureau of Standards, Boulder.
"""

from __future__ import annotations

import math

import numpy as np
import xarray as xr

from profiles.errors import ProfileError, check_range

# CODATA 2018 values (the same set as cavity.constants; profiles stays independent of cavity).
ELECTRON_CHARGE_C = 1.602176634e-19  # exact
ELECTRON_MASS_KG = 9.1093837015e-31
VACUUM_PERMITTIVITY_F_PER_M = 8.8541878128e-12

#: omega_p^2 / Ne = e^2 / (eps0 m_e), rad^2 s^-2 m^3 (3182.6)
PLASMA_FREQUENCY_SQUARED_PER_DENSITY = ELECTRON_CHARGE_C**2 / (VACUUM_PERMITTIVITY_F_PER_M * ELECTRON_MASS_KG)

# Coefficients of the Wait and Spies (1964) forms.
DENSITY_COEFFICIENT_M3 = 1.43e13
DENSITY_SCALE_PER_KM = 0.15
COLLISION_COEFFICIENT_S = 1.816e11
COLLISION_SCALE_PER_KM = 0.15

#: omega_r at z = h' (about 2.506e5 /s), from the two coefficients above rather than typed in
CONDUCTIVITY_AT_HPRIME_S = PLASMA_FREQUENCY_SQUARED_PER_DENSITY * DENSITY_COEFFICIENT_M3 / COLLISION_COEFFICIENT_S

#: Allowed parameter ranges. Published mid-latitude values lie within about 60-90 km and 0.2-1 /km;
#: the wider bounds leave room for disturbed conditions while catching unit slips (m for km).
HPRIME_RANGE_KM = (40.0, 110.0)
BETA_RANGE_PER_KM = (0.1, 2.0)
ALTITUDE_RANGE_M = (0.0, 500e3)

#: Default altitude grid of :func:`wait_spies_profile`: 40-120 km every 0.25 km.
DEFAULT_ALTITUDE_KM = np.linspace(40.0, 120.0, 321)

#: Attributes of the altitude coordinate of every profile Dataset. The model's z is height above the
#: ground; CF "altitude" (above the geoid) is used because the compliance checker requires that
#: standard name on a dimension called altitude, and the two agree over the sea-level ground.
ALTITUDE_ATTRS = {
    "units": "km",
    "positive": "up",
    "standard_name": "altitude",
    "long_name": "altitude above ground",
    "axis": "Z",
}

SOURCE = "Wait and Spies (1964), NBS Technical Note 300: exponential electron density and collision frequency"


def _altitude_km(altitude_m) -> np.ndarray:
    return check_range("altitude_m", altitude_m, *ALTITUDE_RANGE_M, "m") / 1e3


def _hprime(hprime_km) -> np.ndarray:
    return check_range("hprime_km", hprime_km, *HPRIME_RANGE_KM, "km")


def _beta(beta_per_km) -> np.ndarray:
    return check_range("beta_per_km", beta_per_km, *BETA_RANGE_PER_KM, "per km")


def _angular_frequency(frequency_hz) -> np.ndarray:
    return 2.0 * math.pi * check_range("frequency_hz", frequency_hz, 0.0, np.inf, "Hz", low_open=True)


def electron_density(altitude_m, hprime_km, beta_per_km, cap_altitude_m=100e3) -> np.ndarray:
    """Electron density of the Wait and Spies (1964) exponential profile, in m^-3.

    ``Ne(z) = 1.43e13 exp(-0.15 h') exp((beta - 0.15)(z - h'))`` with z, h' in km and beta in 1/km
    (Wait and Spies 1964, NBS Technical Note 300).

    Parameters
    ----------
    altitude_m : array_like
        Altitudes above ground, m (0-500 km).
    hprime_km, beta_per_km : array_like
        Reference height h' (40-110 km) and sharpness beta (0.1-2 per km). Scalars, or arrays that
        broadcast with ``altitude_m`` - e.g. one value per range column with shape ``(ncol, 1)``
        against altitudes of shape ``(nz,)`` gives ``(ncol, nz)``.
    cap_altitude_m : float or None
        Above this altitude the density is held at its value at the cap. The exponential fits the D
        region (about 50-95 km) and grows without bound above it, so holding it is a deliberately
        simple taper: the wave has been reflected well below 100 km at VLF/ELF and the dense
        constant layer only has to absorb what leaks through. ``None`` leaves it uncapped.

    Returns
    -------
    numpy.ndarray
        Electron density, m^-3, with the broadcast shape of the inputs.

    Raises
    ------
    ProfileError
        An input is not finite or outside its allowed range.
    """
    z_km = _altitude_km(altitude_m)
    h = _hprime(hprime_km)
    beta = _beta(beta_per_km)
    if cap_altitude_m is not None:
        cap_km = check_range("cap_altitude_m", cap_altitude_m, *ALTITUDE_RANGE_M, "m") / 1e3
        z_km = np.minimum(z_km, cap_km)
    return (
        DENSITY_COEFFICIENT_M3 * np.exp(-DENSITY_SCALE_PER_KM * h) * np.exp((beta - DENSITY_SCALE_PER_KM) * (z_km - h))
    )


def collision_frequency(altitude_m) -> np.ndarray:
    """Effective electron collision frequency, s^-1: ``nu = 1.816e11 exp(-0.15 z)``, z in km.

    The standard companion of the exponential density profile (Wait and Spies 1964, NBS Technical
    Note 300); it gives 5.0e6 /s at 70 km.

    Parameters
    ----------
    altitude_m : array_like
        Altitudes above ground, m (0-500 km).

    Returns
    -------
    numpy.ndarray
        Collision frequency, s^-1.
    """
    z_km = _altitude_km(altitude_m)
    return COLLISION_COEFFICIENT_S * np.exp(-COLLISION_SCALE_PER_KM * z_km)


def plasma_frequency_squared(electron_density_m3) -> np.ndarray:
    """Squared angular plasma frequency ``omega_p^2 = Ne e^2 / (eps0 m_e)``, rad^2/s^2 (3182.6 Ne).

    Parameters
    ----------
    electron_density_m3 : array_like
        Electron density, m^-3 (finite, not negative).

    Returns
    -------
    numpy.ndarray
        omega_p^2 in rad^2 s^-2 (CODATA 2018 constants).
    """
    ne = check_range("electron_density_m3", electron_density_m3, 0.0, np.inf, "m-3")
    return PLASMA_FREQUENCY_SQUARED_PER_DENSITY * ne


def conductivity_parameter(altitude_m, hprime_km, beta_per_km) -> np.ndarray:
    """Wait's conductivity parameter ``omega_r = omega_p^2 / nu`` of the uncapped profile, in 1/s.

    Computed from :func:`electron_density` (without the cap) and :func:`collision_frequency`, so
    the identity ``omega_r = 2.506e5 exp(beta (z - h'))`` of Wait and Spies (1964, NBS Technical
    Note 300) is a check on the two formulas rather than an assumption.

    Parameters
    ----------
    altitude_m : array_like
        Altitudes above ground, m.
    hprime_km, beta_per_km : array_like
        Profile parameters, broadcastable with ``altitude_m``.

    Returns
    -------
    numpy.ndarray
        omega_r, s^-1.
    """
    ne = electron_density(altitude_m, hprime_km, beta_per_km, cap_altitude_m=None)
    return plasma_frequency_squared(ne) / collision_frequency(altitude_m)


def relative_permittivity(frequency_hz, electron_density_m3, collision_frequency_s) -> np.ndarray:
    """Complex relative permittivity of an isotropic cold collisional plasma.

    ``eps_r = 1 - omega_p^2 / (omega (omega - j nu))`` for the time convention exp(+j omega t), so a
    lossy plasma has a negative imaginary part (cold-plasma theory without the geomagnetic field).

    Parameters
    ----------
    frequency_hz : array_like
        Wave frequency, Hz (> 0).
    electron_density_m3 : array_like
        Electron density, m^-3.
    collision_frequency_s : array_like
        Collision frequency, s^-1 (not negative).

    Returns
    -------
    numpy.ndarray of complex
        Relative permittivity, broadcast over the inputs.
    """
    omega = _angular_frequency(frequency_hz)
    wp2 = plasma_frequency_squared(electron_density_m3)
    nu = check_range("collision_frequency_s", collision_frequency_s, 0.0, np.inf, "s-1")
    return 1.0 - wp2 / (omega * (omega - 1j * nu))


def reflection_height_m(frequency_hz, hprime_km, beta_per_km) -> np.ndarray:
    """Altitude where the conductivity parameter equals the wave's angular frequency, in m.

    Solving ``omega_r(z) = 2 pi f`` with ``omega_r = omega_r(h') exp(beta (z - h'))`` gives
    ``z = h' + ln(2 pi f / omega_r(h')) / beta`` (Wait and Spies 1964, NBS Technical Note 300), with
    ``omega_r(h')`` computed from the same constants as :func:`conductivity_parameter`. It is the
    customary estimate of where a VLF wave turns back (about 69.7 km at 20 kHz for h' = 71.8 km,
    beta = 0.335 /km). The cap of :func:`electron_density` is ignored: heights above about 100 km
    are formal, as are heights far below the D region at very low frequencies.

    Parameters
    ----------
    frequency_hz : array_like
        Wave frequency, Hz (> 0).
    hprime_km, beta_per_km : array_like
        Profile parameters; all three inputs broadcast together.

    Returns
    -------
    numpy.ndarray
        Reflection height, m.
    """
    omega = _angular_frequency(frequency_hz)
    h = _hprime(hprime_km)
    beta = _beta(beta_per_km)
    return (h + np.log(omega / CONDUCTIVITY_AT_HPRIME_S) / beta) * 1e3


def profile_dataset(altitude_km, ne_m3, nu_s, attrs: dict) -> xr.Dataset:
    """Wrap altitude (km), electron density and collision frequency in the package's Dataset layout.

    Shared by :func:`wait_spies_profile` and :func:`profiles.userfile.read_profile` so every
    profile looks the same: coordinate ``altitude`` in km (CF ``height``, positive up) and the
    variables ``electron_density`` (m-3) and ``collision_frequency`` (s-1).
    """
    altitude = xr.Variable("altitude", np.asarray(altitude_km, dtype=float), attrs=dict(ALTITUDE_ATTRS))
    return xr.Dataset(
        {
            "electron_density": (
                "altitude",
                np.asarray(ne_m3, dtype=float),
                {"units": "m-3", "long_name": "electron number density"},
            ),
            "collision_frequency": (
                "altitude",
                np.asarray(nu_s, dtype=float),
                {"units": "s-1", "long_name": "effective electron collision frequency"},
            ),
        },
        coords={"altitude": altitude},
        attrs=dict(attrs),
    )


def wait_spies_profile(hprime_km, beta_per_km, altitude_m=None, cap_altitude_m=100e3) -> xr.Dataset:
    """An exponential profile (Wait and Spies 1964, NBS Technical Note 300) as an xarray Dataset.

    Parameters
    ----------
    hprime_km, beta_per_km : float
        Reference height h' (km) and sharpness beta (1/km), scalars.
    altitude_m : array_like, optional
        Strictly increasing 1-D altitudes, m. Default 40-120 km every 0.25 km.
    cap_altitude_m : float or None
        Density held constant above this altitude (see :func:`electron_density`).

    Returns
    -------
    xarray.Dataset
        Coordinate ``altitude`` (km, positive up), variables ``electron_density`` (m-3) and
        ``collision_frequency`` (s-1); attributes ``hprime_km``, ``beta_per_km``,
        ``cap_altitude_km`` (when capped) and ``source``.
    """
    for name, value in (("hprime_km", hprime_km), ("beta_per_km", beta_per_km)):
        if np.ndim(value) != 0:
            raise ProfileError(f"{name} must be a single number for a profile dataset, got shape {np.shape(value)}")
    if altitude_m is None:
        z_m = DEFAULT_ALTITUDE_KM * 1e3
    else:
        z_m = check_range("altitude_m", altitude_m, *ALTITUDE_RANGE_M, "m")
        if z_m.ndim != 1 or z_m.size < 2:
            raise ProfileError(f"altitude_m must be a 1-D array of at least 2 levels, got shape {z_m.shape}")
        if np.any(np.diff(z_m) <= 0):
            raise ProfileError("altitude_m must be strictly increasing")
    ne = electron_density(z_m, hprime_km, beta_per_km, cap_altitude_m=cap_altitude_m)
    nu = collision_frequency(z_m)
    attrs = {
        "title": f"Exponential D-region profile h' = {float(hprime_km):g} km, beta = {float(beta_per_km):g} per km",
        "profile_kind": "exponential",
        "hprime_km": float(hprime_km),
        "beta_per_km": float(beta_per_km),
        "source": SOURCE,
    }
    if cap_altitude_m is not None:
        attrs["cap_altitude_km"] = float(cap_altitude_m) / 1e3
    return profile_dataset(z_m / 1e3, ne, nu, attrs)
