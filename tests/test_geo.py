"""Checks of cavity.geo against published geodesic test lines, published solar positions and an
independent solar-position algorithm written out here."""

from __future__ import annotations

import math
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest

from cavity.errors import ScenarioError
from cavity.geo import distance_bearing, ground_kind_along, points_along, solar_zenith_deg

UTC = timezone.utc


def dms(d, m, s):
    """Degrees, minutes, seconds -> degrees (a minus sign on any part makes the angle negative)."""
    sign = -1.0 if min(d, m, s) < 0 else 1.0
    return sign * (abs(d) + abs(m) / 60.0 + abs(s) / 3600.0)


# Vincenty, T. (1975). Direct and inverse solutions of geodesics on the ellipsoid with application of
# nested equations. Survey Review 23(176), 88-93, test lines (a)-(e): line (a) on the Bessel
# ellipsoid, (b)-(e) on the International (Hayford) ellipsoid. Point 1 at longitude 0; L is the
# longitude of point 2. Columns: ellipsoid, phi1, phi2, L, s (m), alpha1 (forward azimuth).
VINCENTY_1975_LINES = [
    ("bessel", dms(55, 45, 0.0), dms(-33, 26, 0.0), dms(108, 13, 0.0), 14110526.170, dms(96, 36, 8.79960)),
    ("intl", dms(37, 19, 54.95367), dms(26, 7, 42.83946), dms(41, 28, 35.50729), 4085966.703, dms(95, 27, 59.63089)),
    ("intl", dms(35, 16, 11.24862), dms(67, 22, 14.77638), dms(137, 47, 28.31435), 8084823.839, dms(15, 44, 23.74850)),
    ("intl", dms(1, 0, 0.0), dms(0, -59, 53.83076), dms(179, 17, 48.02997), 19960000.000, dms(89, 0, 0.0)),
    ("intl", dms(1, 0, 0.0), dms(1, 1, 15.18952), dms(179, 46, 17.84244), 19780006.558, dms(4, 59, 59.99995)),
]


@pytest.mark.parametrize("ellipsoid, lat1, lat2, lon2, s_m, alpha1_deg", VINCENTY_1975_LINES)
def test_distance_bearing_vincenty_1975_test_lines(ellipsoid, lat1, lat2, lon2, s_m, alpha1_deg):
    # Source: Vincenty (1975) Survey Review 23(176), published distances (mm) and azimuths (1e-5").
    distance_m, bearing_deg = distance_bearing(lat1, 0.0, lat2, lon2, ellipsoid=ellipsoid)
    assert abs(distance_m - s_m) < 2e-3  # measured: at most 0.8 mm
    assert abs(bearing_deg - alpha1_deg) * 3600.0 < 5e-3  # arcseconds; measured at most 0.001"


def test_distance_bearing_wellington_salamanca_wgs84():
    # Source: GeographicLib documentation example (Karney): Wellington, NZ (41.32S, 174.81E) to
    # Salamanca, Spain (40.96N, 5.50W) on WGS84 "prints The distance is 19959679.267 m".
    # The initial azimuth 161.06766998615 deg is from the same example (from memory).
    distance_m, bearing_deg = distance_bearing(-41.32, 174.81, 40.96, -5.50)
    assert distance_m == pytest.approx(19959679.267, abs=1e-3)
    assert bearing_deg == pytest.approx(161.06766998615, abs=1e-8)


def test_points_along_perth_example_wgs84():
    # Source: GeographicLib documentation example (Karney): the point 20000 km SW (azimuth 225) of
    # Perth, Australia (32.06S, 115.74E) is (32.11195529, -63.95925278).
    lats, lons = points_along(-32.06, 115.74, 225.0, [0.0, 20000e3])
    assert lats[0] == pytest.approx(-32.06) and lons[0] == pytest.approx(115.74)
    assert lats[1] == pytest.approx(32.11195529, abs=1e-8)
    assert lons[1] == pytest.approx(-63.95925278, abs=1e-8)


def test_points_along_round_trip_and_bearing_range():
    # Consistency of the direct and inverse problems (derived): each point lies at its range, on
    # the same geodesic; bearings come back in [0, 360).
    ranges = np.linspace(0.0, 9e6, 10)
    lats, lons = points_along(62.1, -7.3, 300.0, ranges)
    d, b = distance_bearing(np.full_like(lats, 62.1), -7.3, lats, lons)
    np.testing.assert_allclose(d, ranges, atol=1e-6)
    assert abs(b[1:] - 300.0).max() < 1e-9
    _, west = distance_bearing(0.0, 0.0, 0.0, -1.0)
    assert west == pytest.approx(270.0)
    _, north = distance_bearing(0.0, 0.0, 1.0, 0.0)
    assert 0.0 <= north < 1e-9


def test_distance_bearing_rejects_bad_latitude():
    with pytest.raises(ScenarioError, match="latitude_deg = 91"):
        distance_bearing(91.0, 0.0, 0.0, 0.0)


# Solar zenith check values of docs/physics.md 8 (geometric, no refraction).
@pytest.mark.parametrize(
    "when, lat, lon, chi",
    [
        (datetime(2024, 6, 21, 12, tzinfo=UTC), 0.0, 0.0, 23.439),
        (datetime(2024, 12, 21, 12, tzinfo=UTC), 51.5, 0.0, 74.936),
    ],
)
def test_solar_zenith_design_check_values(when, lat, lon, chi):
    # Source: docs/physics.md section 8 values (solstice declination about 23.44 deg).
    assert abs(solar_zenith_deg(when, lat, lon) - chi) < 0.02  # measured: 0.0003 deg


def noaa_zenith_deg(when, lat, lon):
    """Solar zenith by the NOAA Global Monitoring Laboratory solar-calculator spreadsheet algorithm
    (after Meeus, Astronomical Algorithms 1991): apparent longitude with nutation and aberration and
    the equation of time; an independent route from Michalsky's sidereal-time formulation."""
    jd = 2451545.0 + (when - datetime(2000, 1, 1, 12, tzinfo=UTC)) / timedelta(days=1)
    jc = (jd - 2451545.0) / 36525.0
    l0 = (280.46646 + jc * (36000.76983 + jc * 0.0003032)) % 360.0
    m = math.radians(357.52911 + jc * (35999.05029 - 0.0001537 * jc))
    e = 0.016708634 - jc * (0.000042037 + 0.0000001267 * jc)
    centre = (
        math.sin(m) * (1.914602 - jc * (0.004817 + 0.000014 * jc))
        + math.sin(2 * m) * (0.019993 - 0.000101 * jc)
        + math.sin(3 * m) * 0.000289
    )
    omega = math.radians(125.04 - 1934.136 * jc)
    apparent_long = math.radians(l0 + centre - 0.00569 - 0.00478 * math.sin(omega))
    mean_obliq = 23 + (26 + (21.448 - jc * (46.815 + jc * (0.00059 - jc * 0.001813))) / 60) / 60
    obliq = math.radians(mean_obliq + 0.00256 * math.cos(omega))
    dec = math.asin(math.sin(obliq) * math.sin(apparent_long))
    y = math.tan(obliq / 2) ** 2
    l0r = math.radians(l0)
    eot_min = 4 * math.degrees(
        y * math.sin(2 * l0r)
        - 2 * e * math.sin(m)
        + 4 * e * y * math.sin(m) * math.cos(2 * l0r)
        - 0.5 * y * y * math.sin(4 * l0r)
        - 1.25 * e * e * math.sin(2 * m)
    )
    u = when.astimezone(UTC)
    minutes = u.hour * 60 + u.minute + (u.second + u.microsecond * 1e-6) / 60
    true_solar_min = (minutes + eot_min + 4 * np.asarray(lon)) % 1440
    hour_angle = np.radians(true_solar_min / 4 - 180)
    latr = np.radians(lat)
    cos_chi = np.sin(latr) * math.sin(dec) + np.cos(latr) * math.cos(dec) * np.cos(hour_angle)
    return np.degrees(np.arccos(np.clip(cos_chi, -1, 1)))


def test_solar_zenith_sweep_against_noaa_algorithm():
    # Source: NOAA solar-calculator algorithm (above; stated accuracy about 0.01 deg) against
    # Michalsky (1988, 0.01 deg for 1950-2050): 300 instants over 1950-2050, 400 positions each.
    rng = np.random.default_rng(1988)
    lat = rng.uniform(-89.0, 89.0, 400)
    lon = rng.uniform(-180.0, 180.0, 400)
    start = datetime(1950, 1, 1, tzinfo=UTC)
    worst = 0.0
    for seconds in rng.uniform(0.0, 100 * 365.25 * 86400.0, 300):
        when = start + timedelta(seconds=float(seconds))
        worst = max(worst, float(np.abs(solar_zenith_deg(when, lat, lon) - noaa_zenith_deg(when, lat, lon)).max()))
    assert worst < 0.02  # measured: 0.012 deg over 2000 instants


def test_solar_zenith_vectorised_and_time_zone_aware():
    when = datetime(2025, 3, 20, 9, 1, tzinfo=UTC)
    lats = np.array([-60.0, 0.0, 45.0])
    lons = np.array([10.0, 100.0, -170.0])
    chi = solar_zenith_deg(when, lats, lons)
    assert chi.shape == (3,)
    singles = [solar_zenith_deg(when, a, b) for a, b in zip(lats, lons)]
    np.testing.assert_allclose(chi, singles)
    # The same instant written with a +02:00 offset gives the same sun (derived).
    other = when.astimezone(timezone(timedelta(hours=2)))
    np.testing.assert_allclose(solar_zenith_deg(other, lats, lons), chi)
    # Antipodes: chi(p) + chi(antipode) = 180 deg exactly (derived from the spherical formula).
    anti = solar_zenith_deg(when, -lats, lons + 180.0)
    np.testing.assert_allclose(chi + anti, 180.0, atol=1e-9)


def test_solar_zenith_rejects_naive_time():
    with pytest.raises(ScenarioError, match="no time zone"):
        solar_zenith_deg(datetime(2024, 6, 21, 12), 0.0, 0.0)


# Points chosen far (hundreds of km) from any coast, so the class is unmistakable on any map.
@pytest.mark.parametrize(
    "lat, lon, kind",
    [
        (0.0, -150.0, "sea"),  # mid-Pacific
        (30.0, -40.0, "sea"),  # mid-Atlantic
        (-20.0, 80.0, "sea"),  # Indian Ocean
        (-65.0, -120.0, "sea"),  # Southern Ocean, south of 60 S but open water
        (45.0, 70.0, "land"),  # central Asia (Kazakhstan)
        (0.0, 22.0, "land"),  # central Africa (Congo basin)
        (-10.0, -55.0, "land"),  # central Brazil
        (-85.0, 45.0, "ice"),  # central Antarctica
        (-75.0, 120.0, "ice"),  # East Antarctic plateau
        (72.0, -40.0, "ice"),  # central Greenland
        (77.0, -45.0, "ice"),  # northern Greenland
        (80.0, -80.0, "land"),  # Ellesmere Island, across Nares Strait: not in the Greenland rule
        (70.0, -72.0, "land"),  # Baffin Island
        (64.9, -18.5, "land"),  # central Iceland
    ],
)
def test_ground_kind_unmistakable_points(lat, lon, kind):
    # Source: any world atlas (common knowledge of geography).
    assert ground_kind_along([lat], [lon])[0] == kind


def test_ground_kind_vectorised_and_longitude_wrap():
    kinds = ground_kind_along([45.0, 0.0], [70.0 + 360.0, -150.0 - 360.0])
    assert list(kinds) == ["land", "sea"]
