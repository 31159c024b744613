"""East against west by the independent magnetised mode reference, for the east-west example.

The guide of ``examples/east_west.toml`` made uniform: the night profile (h' = 85.1 km,
beta = 0.63 /km), sea, 17.3 kHz, and one field for each direction taken from the middle of the IGRF
values along its path (38,300 nT, dip 41 deg; travelling 94 deg or 276 deg from magnetic north).
Prints each direction's least attenuated modes and the medians of ground-level Ez (per unit moment)
that the README's east-west table compares. About five minutes on one core.

    python examples/east_west_reference.py
"""

from __future__ import annotations

import numpy as np

from cavity.checks.verify import magnetised_reference
from cavity.reference import magnetised as mg

FREQUENCY_HZ = 17.3e3
NIGHT = (85.1, 0.63)  # h' (km), beta (1/km)
SEA = (5.0, 70.0)  # S/m, relative permittivity
STRENGTH_T, DIP_DEG = 38.3e-6, 41.0
DIRECTIONS = {"east": 94.0, "west": 276.0, "isotropic": None}
RANGES_M = np.arange(300e3, 1800e3 + 1.0, 5e3)
BANDS_KM = ((300, 900), (900, 1800))


def main() -> None:
    level_db = {}
    for name, azimuth_deg in DIRECTIONS.items():
        strength = STRENGTH_T if azimuth_deg is not None else 1e-12  # B0 -> 0: the isotropic guide
        b = mg.field_from_dip_azimuth(strength, DIP_DEG, azimuth_deg if azimuth_deg is not None else 0.0)
        modes = magnetised_reference(FREQUENCY_HZ, *NIGHT, *SEA, b)
        loss_db_per_mm = np.sort(-20.0 * np.log10(np.e) * modes.wavenumber.imag * 1e6)
        print(f"{name:9s} least attenuated modes (dB/Mm):", np.round(loss_db_per_mm[:6], 2))
        level_db[name] = 20.0 * np.log10(np.abs(mg.ground_field(modes, RANGES_M).ez))
    for lo_km, hi_km in BANDS_KM:
        band = (RANGES_M >= lo_km * 1e3) & (RANGES_M <= hi_km * 1e3)
        med = {k: float(np.median(v[band])) for k, v in level_db.items()}
        print(
            f"median {lo_km}-{hi_km} km (dB re 1 V/m per A m): east {med['east']:.1f}, west {med['west']:.1f},"
            f" isotropic {med['isotropic']:.1f}; east - west {med['east'] - med['west']:.1f} dB"
        )


if __name__ == "__main__":
    main()
