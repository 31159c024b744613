"""profiles: ionosphere altitude profiles for VLF/ELF earth-ionosphere waveguide work.

Usable on its own (it never imports ``cavity``):

- :mod:`profiles.exponential` - the Wait and Spies (1964) exponential D region: electron density,
  collision frequency, plasma frequency, conductivity parameter, permittivity, reflection height,
  and :func:`wait_spies_profile` as an :class:`xarray.Dataset`.
- :mod:`profiles.daynight` - published day and night parameters (:data:`PRESETS`) and a
  replaceable day/night transition rule against solar zenith angle.
- :mod:`profiles.userfile` - read, validate, sample and write measured or modelled profiles (CSV
  or netCDF).

Example
-------
>>> import profiles
>>> day = profiles.preset("day")
>>> round(float(profiles.reflection_height_m(20e3, day.hprime_km, day.beta_per_km)) / 1e3, 1)
69.7
"""

from profiles.daynight import (
    PRESETS,
    ExponentialParameters,
    TransitionRule,
    daylight_class,
    linear_transition,
    parameters_for_zenith,
    preset,
    terminator_zenith_deg,
)
from profiles.errors import ProfileError
from profiles.exponential import (
    collision_frequency,
    conductivity_parameter,
    electron_density,
    plasma_frequency_squared,
    reflection_height_m,
    relative_permittivity,
    wait_spies_profile,
)
from profiles.userfile import read_profile, sample_profile, sampled_reflection_height_m, write_profile

__all__ = [
    "PRESETS",
    "ExponentialParameters",
    "ProfileError",
    "TransitionRule",
    "collision_frequency",
    "conductivity_parameter",
    "daylight_class",
    "electron_density",
    "linear_transition",
    "parameters_for_zenith",
    "plasma_frequency_squared",
    "preset",
    "read_profile",
    "reflection_height_m",
    "relative_permittivity",
    "sample_profile",
    "sampled_reflection_height_m",
    "terminator_zenith_deg",
    "wait_spies_profile",
    "write_profile",
]
