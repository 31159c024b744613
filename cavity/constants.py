"""Physical constants (SI, CODATA 2018 exact or recommended values) used across the package."""

import math

C0 = 299_792_458.0  # speed of light in vacuum, m/s
MU0 = 1.25663706212e-6  # vacuum permeability, H/m
EPS0 = 1.0 / (MU0 * C0 * C0)  # vacuum permittivity, F/m
ETA0 = MU0 * C0  # impedance of free space, ohm
EARTH_RADIUS_M = 6_371_000.0  # mean earth radius used by earth flattening (docs/physics.md 7)
ELECTRON_CHARGE = 1.602176634e-19  # C
ELECTRON_MASS = 9.1093837015e-31  # kg
TWO_PI = 2.0 * math.pi
