"""Published day and night exponential parameters and the day/night transition against solar zenith.

The transition between day and night D-region parameters is a rule of thumb, not a law: measured
dawn and dusk behaviour is not symmetric and depends on season and latitude. The rule is therefore a
replaceable function (:class:`TransitionRule`); :func:`linear_transition` is the simple default.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from typing import Any, Protocol

import numpy as np

from profiles.errors import ProfileError, check_range
from profiles.exponential import BETA_RANGE_PER_KM, HPRIME_RANGE_KM


@dataclass(frozen=True)
class ExponentialParameters:
    """One named pair of Wait-Spies parameters with where it comes from.

    Attributes
    ----------
    hprime_km : float
        Reference height h', km.
    beta_per_km : float
        Sharpness beta, 1/km.
    label : str
        Short description (conditions the values stand for).
    reference : str
        Published source, or "from memory" where recalled.
    """

    hprime_km: float
    beta_per_km: float
    label: str
    reference: str

    def __post_init__(self):
        check_range("hprime_km", self.hprime_km, *HPRIME_RANGE_KM, "km")
        check_range("beta_per_km", self.beta_per_km, *BETA_RANGE_PER_KM, "per km")


PRESETS: dict[str, ExponentialParameters] = {
    "day": ExponentialParameters(
        71.8,
        0.335,
        "midday, mid-latitude summer, solar minimum",
        "Thomson, Clilverd and Rodger (2011), J. Geophys. Res. 116, A03310, doi:10.1029/2010JA016248",
    ),
    "day-2017": ExponentialParameters(
        72.8,
        0.345,
        "midday, mid-latitude summer (2015 measurements)",
        "Thomson, Clilverd and Rodger (2017), J. Geophys. Res. Space Physics 122",
    ),
    "night": ExponentialParameters(
        85.1,
        0.63,
        "night, mid-latitude, solar minimum",
        "Thomson, Clilverd and McRae (2007), J. Geophys. Res. 112, doi:10.1029/2007JA012271",
    ),
    "textbook-day": ExponentialParameters(
        74.0,
        0.30,
        "generic daytime values",
        "generic textbook values in the Wait and Spies (1964) lineage (from memory)",
    ),
    "textbook-night": ExponentialParameters(
        85.0,
        0.50,
        "generic night-time values",
        "generic textbook values in the Wait and Spies (1964) lineage (from memory)",
    ),
}


def preset(name: str) -> ExponentialParameters:
    """Look up a preset of :data:`PRESETS` by name.

    Raises
    ------
    ProfileError
        Unknown name; the message lists the choices and suggests the closest one.
    """
    key = str(name).strip().lower()
    if key in PRESETS:
        return PRESETS[key]
    close = difflib.get_close_matches(key, PRESETS, n=1)
    hint = f"; did you mean {close[0]!r}?" if close else ""
    raise ProfileError(f"preset = {name!r} is unknown (choose from {', '.join(sorted(PRESETS))}){hint}")


class TransitionRule(Protocol):
    """Signature of a day/night rule: solar zenith angle (deg) -> (h' in km, beta in 1/km) arrays.

    A rule must accept an array of zenith angles and return two arrays of the same shape; it may
    take further keyword arguments, which :func:`parameters_for_zenith` passes through.
    """

    def __call__(self, solar_zenith_deg: Any, *args: Any, **kwargs: Any) -> tuple[np.ndarray, np.ndarray]: ...


def _zenith(solar_zenith_deg) -> np.ndarray:
    return check_range("solar_zenith_deg", solar_zenith_deg, 0.0, 180.0, "deg")


def _limits(day_limit_deg: float, night_limit_deg: float) -> tuple[float, float]:
    day = float(check_range("day_limit_deg", day_limit_deg, 0.0, 180.0, "deg"))
    night = float(check_range("night_limit_deg", night_limit_deg, 0.0, 180.0, "deg"))
    if night <= day:
        raise ProfileError(
            f"night_limit_deg = {night:g} must be greater than day_limit_deg = {day:g} (allowed range above {day:g} deg)"
        )
    return day, night


def linear_transition(
    solar_zenith_deg,
    day: ExponentialParameters = PRESETS["day"],
    night: ExponentialParameters = PRESETS["night"],
    day_limit_deg: float = 90.0,
    night_limit_deg: float = 99.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Day values up to ``day_limit_deg``, night values from ``night_limit_deg``, linear in between.

    A common-practice rule: the sun leaves the 60-100 km altitudes between zenith angles of about
    97.8 and 100.1 deg (see :func:`terminator_zenith_deg`), so the D region is taken as fully day
    while the sun is above the ground horizon (chi <= 90 deg) and fully night once chi >= 99 deg.
    h' and beta are each interpolated linearly in chi.

    Parameters
    ----------
    solar_zenith_deg : array_like
        Solar zenith angle at the ground, degrees (0-180).
    day, night : ExponentialParameters
        The two end states (default: the "day" and "night" presets).
    day_limit_deg, night_limit_deg : float
        Edges of the transition, degrees (day < night).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        h' (km) and beta (1/km), each with the shape of ``solar_zenith_deg``.
    """
    chi = _zenith(solar_zenith_deg)
    lo, hi = _limits(day_limit_deg, night_limit_deg)
    weight = np.clip((chi - lo) / (hi - lo), 0.0, 1.0)  # 0 by day, 1 by night
    hprime = day.hprime_km + weight * (night.hprime_km - day.hprime_km)
    beta = day.beta_per_km + weight * (night.beta_per_km - day.beta_per_km)
    return hprime, beta


def parameters_for_zenith(solar_zenith_deg, rule: TransitionRule = linear_transition, **kwargs):
    """h' (km) and beta (1/km) for solar zenith angles under a transition rule.

    Parameters
    ----------
    solar_zenith_deg : array_like
        Solar zenith angles, degrees (0-180).
    rule : TransitionRule
        Any callable with the :class:`TransitionRule` signature (default :func:`linear_transition`).
    **kwargs
        Passed to ``rule`` (e.g. ``day=preset("day-2017")``).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        h' and beta with the shape of ``solar_zenith_deg``; checked against the allowed ranges, so a
        faulty user rule fails here with a clear message rather than deep inside a solver.
    """
    chi = _zenith(solar_zenith_deg)
    hprime, beta = rule(chi, **kwargs)
    hprime = check_range("hprime_km", hprime, *HPRIME_RANGE_KM, "km")
    beta = check_range("beta_per_km", beta, *BETA_RANGE_PER_KM, "per km")
    if hprime.shape != chi.shape or beta.shape != chi.shape:
        raise ProfileError(
            f"transition rule returned shapes {hprime.shape} and {beta.shape}; expected {chi.shape} like solar_zenith_deg"
        )
    return hprime, beta


def daylight_class(solar_zenith_deg, day_limit_deg: float = 90.0, night_limit_deg: float = 99.0) -> np.ndarray:
    """Label each zenith angle "day" (chi <= day limit), "night" (chi >= night limit) or "transition".

    Uses the same limits as :func:`linear_transition`.
    """
    chi = _zenith(solar_zenith_deg)
    lo, hi = _limits(day_limit_deg, night_limit_deg)
    return np.where(chi <= lo, "day", np.where(chi >= hi, "night", "transition"))


def terminator_zenith_deg(altitude_m, earth_radius_m: float = 6371e3) -> np.ndarray:
    """Solar zenith angle at the ground when the sun sets at altitude h: ``90 + arccos(a / (a + h))``.

    Geometry of a spherical earth of radius a, without refraction or the solar disc's size: a ray
    grazing the ground reaches height h at an angle arccos(a / (a + h)) beyond the ground horizon.
    The 60-100 km D region goes dark between about 97.8 and 100.1 deg.

    Parameters
    ----------
    altitude_m : array_like
        Altitude, m (0-500 km).
    earth_radius_m : float
        Earth radius, m (default 6371 km, mean radius).

    Returns
    -------
    numpy.ndarray
        Zenith angle, degrees.
    """
    h = check_range("altitude_m", altitude_m, 0.0, 500e3, "m")
    a = float(check_range("earth_radius_m", earth_radius_m, 1e6, 1e8, "m"))
    return 90.0 + np.degrees(np.arccos(a / (a + h)))


__all__ = [
    "ExponentialParameters",
    "PRESETS",
    "TransitionRule",
    "daylight_class",
    "linear_transition",
    "parameters_for_zenith",
    "preset",
    "terminator_zenith_deg",
]
