"""The geomagnetic field along a path: IGRF values and the rotation into the path frame.

The magnetised ionosphere (:mod:`cavity.fdtd.media`, :func:`magnetised_coefficients`) needs the
earth's field B0 in the solver's frame at each range sample: r along the direction of travel, z up
and phi = z x r, to the left of the direction of travel. Field values come from the International
Geomagnetic Reference Field of IAGA (IGRF-14, Alken et al. 2021, Earth Planets Space 73:49 for the
13th generation; the 14th generation extends it to 2030) through the ``ppigrf`` package, evaluated at
a reference altitude in the D region (``REFERENCE_ALTITUDE_KM``): the field changes by about 4 % per
100 km of height (its dipole part falls as (a/(a + h))^3), so one altitude for the whole layer is a
small approximation.

Units: nT at the edges (file, tables), tesla inside the solver.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date, datetime, timezone

import numpy as np

#: Altitude at which the field is evaluated for the whole ionosphere, km (the VLF reflection
#: height by night is 85-90 km and by day about 70 km).
REFERENCE_ALTITUDE_KM = 80.0
#: Epoch used when the scenario gives neither ``ionosphere.utc`` nor ``geomagnetic.date``.
#: Recorded in the result file and shown by ``cavity inspect`` so that results are reproducible.
DEFAULT_EPOCH = date(2025, 1, 1)
#: Epochs the IGRF-14 coefficients cover (the last five years are a secular-variation forecast).
EPOCH_RANGE = (date(1900, 1, 1), date(2030, 12, 31))
#: Electron gyrofrequency per tesla, e / m_e (rad s^-1 T^-1): 28.0 Hz per nT times 2 pi.
GYRO_PER_TESLA = 1.602176634e-19 / 9.1093837015e-31

MODELS = ("igrf", "none", "uniform")


@dataclass(frozen=True)
class FieldAlong:
    """The geomagnetic field per range sample of one path, path frame, nT.

    ``b_r`` along the direction of travel, ``b_phi`` to its left (phi = z x r), ``b_z`` up.
    """

    model: str
    epoch: date | None
    b_r_nt: np.ndarray
    b_phi_nt: np.ndarray
    b_z_nt: np.ndarray

    @property
    def strength_nt(self) -> np.ndarray:
        return np.sqrt(self.b_r_nt**2 + self.b_phi_nt**2 + self.b_z_nt**2)

    @property
    def dip_deg(self) -> np.ndarray:
        """Inclination, positive downward (northern magnetic hemisphere)."""
        return np.degrees(np.arctan2(-self.b_z_nt, np.hypot(self.b_r_nt, self.b_phi_nt)))

    @property
    def azimuth_deg(self) -> np.ndarray:
        """Direction of travel clockwise from the horizontal field (magnetic north), [0, 360)."""
        return path_azimuth_deg(self.b_r_nt, self.b_phi_nt)


def igrf_enu(lat_deg, lon_deg, altitude_km, epoch) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """IGRF east, north and up components (nT) at geodetic latitude/longitude (deg) and altitude (km).

    ``epoch`` is a date or datetime. Shapes broadcast; the result has the broadcast shape.
    """
    import ppigrf

    # the spherical-harmonic sums divide by sin(colatitude): step a hair off the poles
    lat = np.clip(np.asarray(lat_deg, dtype=float), -89.9999, 89.9999)
    lon = np.asarray(lon_deg, dtype=float)
    h = np.asarray(altitude_km, dtype=float)
    shape = np.broadcast_shapes(lat.shape, lon.shape, h.shape)
    when = epoch if isinstance(epoch, datetime) else datetime(epoch.year, epoch.month, epoch.day)
    if when.tzinfo is not None:
        when = when.astimezone(timezone.utc).replace(tzinfo=None)
    be, bn, bu = ppigrf.igrf(np.broadcast_to(lon, shape), np.broadcast_to(lat, shape), np.broadcast_to(h, shape), when)
    return (
        np.asarray(be, float).reshape(shape),
        np.asarray(bn, float).reshape(shape),
        np.asarray(bu, float).reshape(shape),
    )


def to_path_frame(be, bn, bu, heading_deg):
    """Rotate east/north/up components into the path frame (r along the heading, phi = z x r, z up).

    With the heading b clockwise from true north, r = (sin b, cos b, 0) and phi = z x r =
    (-cos b, sin b, 0) in (east, north, up), so B_r = Be sin b + Bn cos b,
    B_phi = -Be cos b + Bn sin b, B_z = Bu.
    """
    b = np.radians(np.asarray(heading_deg, dtype=float))
    be, bn, bu = (np.asarray(x, dtype=float) for x in (be, bn, bu))
    return be * np.sin(b) + bn * np.cos(b), -be * np.cos(b) + bn * np.sin(b), bu + 0.0 * b


def dip_declination(be, bn, bu):
    """(|B| nT, dip deg positive downward, declination deg east of true north) from east/north/up."""
    be, bn, bu = (np.asarray(x, dtype=float) for x in (be, bn, bu))
    h = np.hypot(be, bn)
    return np.sqrt(h**2 + bu**2), np.degrees(np.arctan2(-bu, h)), np.degrees(np.arctan2(be, bn))


def path_azimuth_deg(b_r, b_phi):
    """Direction of travel clockwise from magnetic north, [0, 360), from path-frame components.

    Magnetic north is the direction of the horizontal field; with the travel direction at azimuth a
    from it, B_r = Bh cos a and B_phi = Bh sin a (see :func:`uniform_field`).
    """
    return np.degrees(np.arctan2(np.asarray(b_phi, float), np.asarray(b_r, float))) % 360.0


def uniform_field(strength_nt: float, dip_deg: float, azimuth_deg: float):
    """Path-frame components (nT) of a field of given strength, dip (positive downward) and azimuth
    of travel clockwise from magnetic north.

    In a frame whose north is magnetic north (declination 0): Be = 0, Bn = B cos(dip),
    Bu = -B sin(dip); then :func:`to_path_frame` at heading ``azimuth_deg``.
    """
    d = math.radians(dip_deg)
    return to_path_frame(0.0, strength_nt * math.cos(d), -strength_nt * math.sin(d), azimuth_deg)


def field_along(geomagnetic, path, n_samples: int) -> FieldAlong | None:
    """The field per range sample of a path for a scenario's ``[geomagnetic]`` settings.

    ``geomagnetic`` is a :class:`cavity.scenario.Geomagnetic`; ``path`` needs ``latitude_deg``,
    ``longitude_deg`` and ``heading_deg`` per sample for model "igrf". None for model "none".
    """
    if geomagnetic is None or geomagnetic.model == "none":
        return None
    if geomagnetic.model == "uniform":
        br, bp, bz = uniform_field(geomagnetic.strength_nt, geomagnetic.dip_deg, geomagnetic.azimuth_deg)
        full = lambda v: np.full(n_samples, float(v))  # noqa: E731
        return FieldAlong("uniform", None, full(br), full(bp), full(bz))
    be, bn, bu = igrf_enu(path.latitude_deg, path.longitude_deg, geomagnetic.altitude_km, geomagnetic.epoch)
    br, bp, bz = to_path_frame(be, bn, bu, path.heading_deg)
    return FieldAlong("igrf", geomagnetic.epoch, br, bp, bz)
