"""Geometry on the real globe: geodesics, the sun's zenith angle and the ground class at a point.

Distances and bearings are on the WGS84 ellipsoid through pyproj's geodesic routines (Karney 2013,
J. Geodesy 87, 43), never a spherical haversine. The solar zenith angle follows Michalsky (1988).
Land and sea come from the 1 km ``global_land_mask`` grid; polar ice sheets are added by the rule in
:func:`ground_kind_along`.

Latitudes are north positive, longitudes east positive, bearings clockwise from true north, all in
degrees; distances in metres.
"""

from __future__ import annotations

import functools
import math
from datetime import datetime, timedelta, timezone

import numpy as np

from cavity.errors import ScenarioError

#: Ellipsoid used for every path of the tool (docs/physics.md 11).
ELLIPSOID = "WGS84"

#: Latitude south of which land is the Antarctic ice sheet (the continent lies south of about
#: 63 S; no other land lies south of 60 S except small sub-Antarctic islands, which are ice-clad).
ANTARCTIC_ICE_LATITUDE_DEG = -60.0

#: A simple polygon (latitude_deg, longitude_deg) around Greenland. Its western edge runs along the
#: middle of Davis Strait, Baffin Bay and Nares Strait (between Greenland and Baffin and Ellesmere
#: Islands), its eastern edge along the middle of Denmark Strait (west of Iceland) and through the
#: Greenland Sea (west of Svalbard and Jan Mayen). Land inside it counts as ice sheet; the ice-free
#: coastal strip (a few tens of km) is treated as ice too, a deliberate simplification.
GREENLAND_POLYGON_DEG: tuple[tuple[float, float], ...] = (
    (59.0, -44.0),
    (60.5, -52.0),
    (66.5, -57.5),
    (70.0, -60.0),
    (74.0, -65.0),
    (76.0, -74.0),
    (78.2, -74.2),
    (79.3, -73.5),
    (80.6, -67.5),
    (81.5, -63.5),
    (82.0, -61.0),
    (82.5, -59.5),
    (84.0, -59.0),
    (84.0, -10.0),
    (81.5, -8.5),
    (78.0, -14.5),
    (74.0, -16.5),
    (70.0, -20.0),
    (67.0, -28.0),
    (65.0, -33.0),
    (62.0, -40.5),
)


@functools.lru_cache(maxsize=4)
def _geod(ellipsoid: str):
    from pyproj import Geod

    return Geod(ellps=ellipsoid)


def _check_latitudes(lat, field: str) -> np.ndarray:
    lat = np.asarray(lat, dtype=float)
    if not np.all(np.isfinite(lat)) or np.any(np.abs(lat) > 90.0):
        bad = lat[~(np.isfinite(lat) & (np.abs(lat) <= 90.0))].ravel()[0]
        raise ScenarioError(f"{field} = {bad} is outside the allowed range -90 to 90 deg")
    return lat


def _check_longitudes(lon, field: str) -> np.ndarray:
    lon = np.asarray(lon, dtype=float)
    if not np.all(np.isfinite(lon)):
        bad = lon[~np.isfinite(lon)].ravel()[0]
        raise ScenarioError(f"{field} = {bad} is not a finite longitude (deg)")
    return lon


def wrap_longitude(lon_deg):
    """Longitudes folded into [-180, 180) degrees."""
    return (np.asarray(lon_deg, dtype=float) + 180.0) % 360.0 - 180.0


def distance_bearing(lat1, lon1, lat2, lon2, *, ellipsoid: str = ELLIPSOID):
    """Geodesic distance and initial bearing from point 1 to point 2.

    Parameters
    ----------
    lat1, lon1, lat2, lon2 : float or array_like
        Positions in degrees (north and east positive); arrays broadcast.
    ellipsoid : str
        A pyproj ellipsoid name; WGS84 for every path of the tool (others serve the published
        test lines, which use older ellipsoids).

    Returns
    -------
    distance_m, initial_bearing_deg
        Floats for scalar input, arrays otherwise; the bearing is clockwise from true north in
        [0, 360).

    Notes
    -----
    The inverse geodesic problem is solved by pyproj (Karney 2013, J. Geodesy 87, 43), accurate to
    nanometres on the ellipsoid.
    """
    lat1 = _check_latitudes(lat1, "latitude_deg")
    lat2 = _check_latitudes(lat2, "latitude_deg")
    lon1 = _check_longitudes(lon1, "longitude_deg")
    lon2 = _check_longitudes(lon2, "longitude_deg")
    scalar = all(np.ndim(x) == 0 for x in (lat1, lon1, lat2, lon2))
    lat1, lon1, lat2, lon2 = np.broadcast_arrays(lat1, lon1, lat2, lon2)
    az12, _az21, dist = _geod(ellipsoid).inv(
        np.array(lon1, dtype=float),
        np.array(lat1, dtype=float),
        np.array(lon2, dtype=float),
        np.array(lat2, dtype=float),
    )
    bearing = np.mod(np.asarray(az12, dtype=float), 360.0)
    bearing = np.where(bearing >= 360.0, 0.0, bearing)  # -1e-17 mod 360 rounds to 360.0
    dist = np.asarray(dist, dtype=float)
    if scalar:
        return float(dist), float(bearing)
    return dist, bearing


def points_along(lat_deg: float, lon_deg: float, bearing_deg: float, ranges_m, *, ellipsoid: str = ELLIPSOID):
    """Positions at the given ranges along the geodesic leaving a point at a bearing.

    Parameters
    ----------
    lat_deg, lon_deg : float
        Start point in degrees.
    bearing_deg : float
        Initial bearing, degrees clockwise from true north.
    ranges_m : array_like
        Distances along the geodesic (m, >= 0).

    Returns
    -------
    lats_deg, lons_deg : numpy.ndarray
        Latitudes and longitudes (longitudes in [-180, 180)), one per range.

    Notes
    -----
    The direct geodesic problem, solved by pyproj (Karney 2013).
    """
    lons, lats, _, _ = _direct(lat_deg, lon_deg, bearing_deg, ranges_m, ellipsoid)
    return np.asarray(lats, dtype=float), wrap_longitude(lons)


def _direct(lat_deg, lon_deg, bearing_deg, ranges_m, ellipsoid):
    """The direct geodesic problem at several ranges (checked inputs): lons, lats, back azimuths, ranges."""
    _check_latitudes(lat_deg, "latitude_deg")
    _check_longitudes(lon_deg, "longitude_deg")
    ranges = np.atleast_1d(np.asarray(ranges_m, dtype=float))
    if not np.all(np.isfinite(ranges)) or np.any(ranges < 0.0):
        raise ScenarioError("range along a path must be finite and >= 0 m")
    n = ranges.size
    lons, lats, back = _geod(ellipsoid).fwd(
        np.full(n, float(lon_deg)), np.full(n, float(lat_deg)), np.full(n, float(bearing_deg)), ranges
    )
    return lons, lats, back, ranges


def headings_along(
    lat_deg: float, lon_deg: float, bearing_deg: float, ranges_m, *, ellipsoid: str = ELLIPSOID
) -> np.ndarray:
    """Local direction of travel (degrees clockwise from true north, in [0, 360)) at the given ranges
    along the geodesic leaving a point at a bearing.

    A great circle's heading changes along it; the path frame of the geomagnetic field
    (:mod:`cavity.geomag`) uses the local heading. It is the back azimuth of the direct problem
    turned by 180 deg (pyproj, Karney 2013).
    """
    _, _, back, ranges = _direct(lat_deg, lon_deg, bearing_deg, ranges_m, ellipsoid)
    heading = (np.asarray(back, dtype=float) + 180.0) % 360.0
    heading[ranges == 0.0] = float(bearing_deg) % 360.0
    return heading


_J2000 = datetime(2000, 1, 1, 12, 0, 0, tzinfo=timezone.utc)


def _days_since_j2000(when_utc: datetime) -> float:
    if not isinstance(when_utc, datetime):
        raise ScenarioError(f"utc = {when_utc!r} is not a date and time")
    if when_utc.tzinfo is None or when_utc.utcoffset() is None:
        raise ScenarioError(f"utc = {when_utc.isoformat()} has no time zone; write it with Z (UTC)")
    return (when_utc - _J2000) / timedelta(days=1)


def solar_zenith_deg(when_utc: datetime, lat_deg, lon_deg):
    """Geometric solar zenith angle (degrees, no refraction) at a time, for many positions.

    Parameters
    ----------
    when_utc : datetime.datetime
        A time-zone-aware instant.
    lat_deg, lon_deg : float or array_like
        Positions in degrees; arrays broadcast.

    Returns
    -------
    float or numpy.ndarray
        Zenith angle chi in [0, 180] degrees (90 at the geometric horizon).

    Notes
    -----
    Michalsky's version of the Astronomical Almanac's low-precision solar position: mean longitude
    and anomaly linear in time from J2000.0, a two-term equation of centre, ecliptic to equatorial
    coordinates, and the hour angle from Greenwich mean sidereal time. Accurate to about 0.01 deg
    from 1950 to 2050; usable with slowly growing error outside. Universal time stands in for
    terrestrial time (a 69 s difference moves the sun 0.0003 deg along its path), as in the paper.

    References
    ----------
    Michalsky, J. J. (1988). The Astronomical Almanac's algorithm for approximate solar position
    (1950-2050). Solar Energy 40(3), 227-235.
    """
    lat = _check_latitudes(lat_deg, "latitude_deg")
    lon = _check_longitudes(lon_deg, "longitude_deg")
    n = _days_since_j2000(when_utc)
    utc = when_utc.astimezone(timezone.utc)
    hour = utc.hour + utc.minute / 60.0 + (utc.second + utc.microsecond * 1e-6) / 3600.0

    mean_longitude = math.radians((280.460 + 0.9856474 * n) % 360.0)
    mean_anomaly = math.radians((357.528 + 0.9856003 * n) % 360.0)
    ecliptic_longitude = (
        mean_longitude
        + math.radians(1.915) * math.sin(mean_anomaly)
        + math.radians(0.020) * math.sin(2.0 * mean_anomaly)
    )
    obliquity = math.radians(23.439 - 0.0000004 * n)
    right_ascension = math.atan2(math.cos(obliquity) * math.sin(ecliptic_longitude), math.cos(ecliptic_longitude))
    declination = math.asin(math.sin(obliquity) * math.sin(ecliptic_longitude))
    # Greenwich mean sidereal time in hours: n already holds the fraction of the day, so the UT hour
    # plus n's 0.0657098242 h/day drift advance GMST by 1.0027379 h per UT hour; at J2000.0 (n = 0,
    # 12 h UT) it gives the standard 18.697375 h.
    gmst_h = (6.697375 + 0.0657098242 * n + hour) % 24.0
    local_sidereal = np.radians(((gmst_h + lon / 15.0) % 24.0) * 15.0)
    hour_angle = local_sidereal - right_ascension
    hour_angle = (hour_angle + np.pi) % (2.0 * np.pi) - np.pi

    lat_r = np.radians(lat)
    cos_chi = np.sin(declination) * np.sin(lat_r) + np.cos(declination) * np.cos(lat_r) * np.cos(hour_angle)
    chi = np.degrees(np.arccos(np.clip(cos_chi, -1.0, 1.0)))
    if np.ndim(chi) == 0:
        return float(chi)
    return chi


def _inside_polygon(lats: np.ndarray, lons: np.ndarray, polygon) -> np.ndarray:
    """Even-odd ray-casting test in the (longitude, latitude) plane (no antimeridian crossing)."""
    poly = np.asarray(polygon, dtype=float)
    py, px = poly[:, 0], poly[:, 1]
    qy, qx = np.roll(py, -1), np.roll(px, -1)
    y = lats[..., None]
    x = lons[..., None]
    crosses = (py > y) != (qy > y)
    with np.errstate(divide="ignore", invalid="ignore"):
        x_at = px + (y - py) * (qx - px) / (qy - py)
    hits = crosses & (x < x_at)
    return np.count_nonzero(hits, axis=-1) % 2 == 1


def is_land(lats, lons) -> np.ndarray:
    """Land (True) or sea (False) from the 1 km ``global_land_mask`` grid (lakes count as land).

    The mask package loads a large grid on first use (several seconds), so it is imported here.
    """
    from global_land_mask import globe

    lats = _check_latitudes(lats, "latitude_deg")
    lons = wrap_longitude(_check_longitudes(lons, "longitude_deg"))
    return np.asarray(globe.is_land(np.array(lats, dtype=float), np.array(lons, dtype=float)), dtype=bool)


def ground_kind_along(lats, lons) -> np.ndarray:
    """Ground class name (a key of :data:`cavity.ground.GROUND_CLASSES`) at each position.

    Rule: sea where the land mask says water ("sea"); land south of 60 S is the Antarctic ice
    sheet ("ice"); land inside :data:`GREENLAND_POLYGON_DEG` is the Greenland ice sheet ("ice");
    all other land is "land" (medium dry ground). Lakes count as land. Each position is a point
    sample of the 1 km mask: a path sampled every 10 km sees islands and coasts to that accuracy.

    Parameters
    ----------
    lats, lons : array_like
        Positions in degrees.

    Returns
    -------
    numpy.ndarray of str
        "sea", "land" or "ice" per position.
    """
    lats = np.atleast_1d(_check_latitudes(lats, "latitude_deg"))
    lons = np.atleast_1d(wrap_longitude(_check_longitudes(lons, "longitude_deg")))
    lats, lons = np.broadcast_arrays(lats, lons)
    land = is_land(lats, lons)
    ice = land & ((lats < ANTARCTIC_ICE_LATITUDE_DEG) | _inside_polygon(lats, lons, GREENLAND_POLYGON_DEG))
    kinds = np.where(land, "land", "sea").astype("<U8")
    kinds[ice] = "ice"
    return kinds
