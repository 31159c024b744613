"""The geomagnetic field along a path: IGRF values against published figures, and the path frame."""

import math

import numpy as np
import pytest

from cavity.geomag import dip_declination, igrf_enu, path_azimuth_deg, to_path_frame, uniform_field


def test_igrf_at_a_measured_place_and_date():
    # ppigrf (IGRF-14) at 44.65 N, 67.28 W, 2026-12-01, ground level, measured with the package
    # outside this project: Be -5353, Bn 19360, Bu -47541 nT, |B| 51.6 uT. The dip follows from
    # those components: atan(47541 / hypot(5353, 19360)) = 67.1 deg.
    from datetime import date

    be, bn, bu = igrf_enu(44.65, -67.28, 0.0, date(2026, 12, 1))
    assert float(be) == pytest.approx(-5353, abs=2)
    assert float(bn) == pytest.approx(19360, abs=2)
    assert float(bu) == pytest.approx(-47541, abs=2)
    f, dip, _ = dip_declination(be, bn, bu)
    assert float(dip) == pytest.approx(67.1, abs=0.1)
    assert float(f) == pytest.approx(51.6e3, abs=100)


@pytest.mark.parametrize(
    "lat, lon, year, total_nt, dip_deg, decl_deg",
    [
        # NOAA/BGS online IGRF calculators, values from memory (tolerances match the memory):
        (40.0, -105.25, 2020, 51900.0, 65.6, 8.0),  # Boulder, Colorado: F ~51.9 uT, I ~65.6 deg, D ~8 deg E
        (51.5, -0.1, 2020, 48900.0, 66.4, -0.1),  # London: D crossed zero around 2019
        (-23.5, -46.6, 2020, 22900.0, -39.0, -21.5),  # Sao Paulo, in the South Atlantic anomaly
    ],
)
def test_igrf_against_published_values_from_memory(lat, lon, year, total_nt, dip_deg, decl_deg):
    from datetime import date

    f, dip, decl = dip_declination(*igrf_enu(lat, lon, 0.0, date(year, 1, 1)))
    assert float(f) == pytest.approx(total_nt, rel=0.03)
    assert float(dip) == pytest.approx(dip_deg, abs=2.5)
    assert float(decl) == pytest.approx(decl_deg, abs=2.0)


def test_field_weakens_with_height_like_a_dipole():
    # A dipole field falls as (a / (a + h))^3 (Chapman and Bartels 1940); the IGRF's dipole part
    # dominates, so 80 km up the strength is lower by about 3.7 % (within 1 %).
    from datetime import date

    f0 = dip_declination(*igrf_enu(30.0, 20.0, 0.0, date(2025, 1, 1)))[0]
    f80 = dip_declination(*igrf_enu(30.0, 20.0, 80.0, date(2025, 1, 1)))[0]
    a = 6371.2
    assert float(f80 / f0) == pytest.approx((a / (a + 80.0)) ** 3, abs=0.01)


def test_path_frame_axes():
    # r along the travel, z up, phi = z x r to the left of the travel (right-handed r, phi, z)
    north = (0.0, 1.0, 0.0)
    assert to_path_frame(*north, 0.0) == pytest.approx((1.0, 0.0, 0.0))  # travel north: B along r
    assert to_path_frame(*north, 90.0) == pytest.approx((0.0, 1.0, 0.0))  # travel east: north is to the left
    assert to_path_frame(*north, 270.0) == pytest.approx((0.0, -1.0, 0.0))  # travel west: north is to the right
    east = (1.0, 0.0, 0.0)
    assert to_path_frame(*east, 90.0) == pytest.approx((1.0, 0.0, 0.0))
    assert to_path_frame(*east, 0.0) == pytest.approx((0.0, -1.0, 0.0))  # travel north: east is to the right
    assert to_path_frame(0.0, 0.0, -5.0, 123.0)[2] == pytest.approx(-5.0)


def test_path_frame_is_a_rotation():
    rng = np.random.default_rng(3)
    b = rng.normal(size=(3, 50)) * 3e4
    heading = rng.uniform(0, 360, 50)
    r, p, z = to_path_frame(*b, heading)
    assert np.allclose(r**2 + p**2 + z**2, (b**2).sum(axis=0))


def test_uniform_field_strength_dip_and_azimuth_round_trip():
    for dip in (-60.0, 0.0, 20.0, 89.0):
        for az in (0.0, 45.0, 90.0, 200.0, 270.0):
            br, bp, bz = uniform_field(50000.0, dip, az)
            assert math.sqrt(br**2 + bp**2 + bz**2) == pytest.approx(50000.0)
            assert math.degrees(math.atan2(-bz, math.hypot(br, bp))) == pytest.approx(dip)
            if abs(dip) < 89.5:
                assert float(path_azimuth_deg(br, bp)) == pytest.approx(az, abs=1e-9)
    # eastward in the northern hemisphere: the horizontal field points to the left (phi), downward dip
    br, bp, bz = uniform_field(50000.0, 60.0, 90.0)
    assert bp > 0 and abs(br) < 1e-9 and bz < 0


# ---------------------------------------------------------------------------------------------
# the [geomagnetic] section
# ---------------------------------------------------------------------------------------------

_POSITIONED = """title = "t"
[transmitter]
name = "Tx"
latitude_deg = 30.0
longitude_deg = -20.0
frequency_khz = 17.3
radiated_power_kw = 10.0
[[receiver]]
name = "R"
latitude_deg = 30.0
longitude_deg = -10.0
[ionosphere]
preset = "night"
[ground]
kind = "sea"
"""
_BY_RANGE = _POSITIONED.replace("latitude_deg = 30.0\nlongitude_deg = -10.0", "range_km = 900.0")


def _load(text):
    from cavity.scenario import load_scenario

    return load_scenario(text)


def test_default_model_follows_the_geometry():
    from cavity.geomag import DEFAULT_EPOCH

    # README, "[geomagnetic]": with positions the IGRF (section or not), by range only isotropic
    for text in (_POSITIONED, _POSITIONED + "\n[geomagnetic]\n"):
        s = _load(text)
        assert s.geomagnetic.model == "igrf" and s.geomagnetic.epoch == DEFAULT_EPOCH
        assert s.geomagnetic.epoch_source == "default" and s.geomagnetic.altitude_km == 80.0
        assert s.geomagnetic.given == text.endswith("[geomagnetic]\n")
    assert _load(_BY_RANGE).geomagnetic.model == "none"
    assert _load(_BY_RANGE + "\n[geomagnetic]\n").geomagnetic.model == "none"


def test_epoch_from_utc_then_date():
    from datetime import date

    s = _load(_POSITIONED.replace('preset = "night"', "utc = 2026-07-01T23:30:00Z") + "\n[geomagnetic]\n")
    assert s.geomagnetic.epoch == date(2026, 7, 1) and s.geomagnetic.epoch_source == "ionosphere.utc"
    s = _load(_POSITIONED + "[geomagnetic]\ndate = 2024-03-05\n")
    assert s.geomagnetic.epoch == date(2024, 3, 5) and s.geomagnetic.epoch_source == "geomagnetic.date"
    assert _load(s.to_toml()) == s


def test_uniform_round_trip_and_frame():
    s = _load(
        _BY_RANGE + '[geomagnetic]\nmodel = "uniform"\nstrength_nt = 40000.0\ndip_deg = 20.0\nazimuth_deg = 90.0\n'
    )
    assert _load(s.to_toml()) == s
    from cavity.paths import build_paths

    (path,) = build_paths(s)
    f = path.geomagnetic
    assert f.b_phi_nt[0] == pytest.approx(40000 * math.cos(math.radians(20)))
    assert f.b_z_nt[0] == pytest.approx(-40000 * math.sin(math.radians(20)))


@pytest.mark.parametrize(
    "section, message",
    [
        ('[geomagnetic]\nmodel = "dipole"\n', 'geomagnetic.model = "dipole" is not a field model'),
        (
            '[geomagnetic]\nmodel = "uniform"\nstrength_nt = 40000.0\ndip_deg = 95.0\nazimuth_deg = 0.0\n',
            "geomagnetic.dip_deg = 95.0 is outside the allowed range -90 to 90",
        ),
        ('[geomagnetic]\nmodel = "uniform"\ndip_deg = 10.0\nazimuth_deg = 0.0\n', "geomagnetic.strength_nt is missing"),
        (
            '[geomagnetic]\nmodel = "uniform"\nstrength_nt = 1.0\ndip_deg = 10.0\nazimuth_deg = 360.0\n',
            "geomagnetic.azimuth_deg = 360.0 is outside",
        ),
        ("[geomagnetic]\nstrength_nt = 40000.0\n", 'is only used with model = "uniform"'),
        ("[geomagnetic]\ndate = 2031-01-01\n", "geomagnetic.date = 2031-01-01 is outside the allowed range"),
        ('[geomagnetic]\ndate = "2026-01-01"\n', 'geomagnetic.date = "2026-01-01" must be a date'),
        (
            "[geomagnetic]\naltitude_km = 20.0\n",
            "geomagnetic.altitude_km = 20.0 is outside the allowed range 50 to 150 km",
        ),
        ('[geomagnetic]\nmodle = "igrf"\n', "geomagnetic.modle: unknown key; did you mean 'model'?"),
    ],
)
def test_bad_sections_give_one_line(section, message):
    from cavity.errors import ScenarioError

    with pytest.raises(ScenarioError) as info:
        _load(_POSITIONED + section)
    assert message in str(info.value) and "\n" not in str(info.value)


def test_igrf_needs_directions():
    from cavity.errors import ScenarioError

    with pytest.raises(
        ScenarioError, match=r'receiver\[1\].range_km = 900.0 gives no direction, but geomagnetic model = "igrf"'
    ):
        _load(_BY_RANGE + '[geomagnetic]\nmodel = "igrf"\n')


def test_solve_key_changes_with_the_field():
    from cavity.paths import build_paths
    from cavity.solve import solve_key

    keys = set()
    for az in (90.0, 270.0):
        s = _load(
            _BY_RANGE + f'[geomagnetic]\nmodel = "uniform"\nstrength_nt = 40000.0\ndip_deg = 20.0\nazimuth_deg = {az}\n'
        )
        keys.add(solve_key(s, build_paths(s)[0]))
    s = _load(_BY_RANGE)
    keys.add(solve_key(s, build_paths(s)[0]))
    assert len(keys) == 3
