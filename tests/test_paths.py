"""Checks of cavity.paths: grouping receivers by bearing, and the ground and sun sampled along paths."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from cavity.errors import ScenarioError
from cavity.geo import points_along
from cavity.ground import GROUND_CLASSES
from cavity.paths import build_paths, circular_mean_deg, group_bearings, sample_ranges_m
from cavity.scenario import Receiver, load_scenario
from profiles.daynight import PRESETS


def scenario_text(
    receivers, *, tx=(0.0, 0.0), ionosphere="utc = 2026-03-20T18:00:00Z", ground='kind = "sea"', solver=""
):
    """TOML for an invented scenario with the given receivers (dicts of receiver keys)."""
    lines = [
        'title = "Invented test scenario"',
        "[transmitter]",
        'name = "Test mast"',
        f"latitude_deg = {tx[0]!r}",
        f"longitude_deg = {tx[1]!r}",
        "frequency_khz = 20.0",
        "radiated_power_kw = 100.0",
    ]
    for k, rx in enumerate(receivers, 1):
        lines += ["[[receiver]]", f'name = "Site {k}"']
        lines += [f"{key} = {value!r}" for key, value in rx.items()]
    lines += ["[ionosphere]", ionosphere, "[ground]", ground]
    if solver:
        lines += ["[solver]", solver]
    return "\n".join(lines) + "\n"


def receiver_at(bearing_deg, range_km, tx=(0.0, 0.0)):
    lat, lon = points_along(tx[0], tx[1], bearing_deg, [range_km * 1e3])
    return {"latitude_deg": float(lat[0]), "longitude_deg": float(lon[0])}


def test_terminator_crossing_day_night_columns():
    # A path east along the equator from 0N 0E at 18:00 UTC on the 2026 March equinox day: the
    # sun sets near longitude 2 E, so the path runs from day through the terminator into night. Rule under test (docs/physics.md 1, common practice): day values for
    # chi <= 90 deg, night values for chi >= 99 deg, linear between.
    s = load_scenario(scenario_text([{"latitude_deg": 0.0, "longitude_deg": 40.0}]))
    (path,) = build_paths(s)
    chi = path.solar_zenith_deg
    day, night = PRESETS["day"], PRESETS["night"]
    is_day, is_night = chi <= 90.0, chi >= 99.0
    assert is_day.sum() >= 5 and is_night.sum() >= 100 and (~is_day & ~is_night).sum() >= 5
    np.testing.assert_allclose(path.hprime_km[is_night], night.hprime_km)
    np.testing.assert_allclose(path.beta_per_km[is_night], night.beta_per_km)
    np.testing.assert_allclose(path.hprime_km[is_day], day.hprime_km)
    np.testing.assert_allclose(path.beta_per_km[is_day], day.beta_per_km)
    assert set(path.daylight[is_day]) == {"day"} and set(path.daylight[is_night]) == {"night"}
    between = ~is_day & ~is_night
    assert set(path.daylight[between]) == {"transition"}
    assert np.all((path.hprime_km[between] > day.hprime_km) & (path.hprime_km[between] < night.hprime_km))
    # Derived: on the equator with the sun's declination near 0 (equinox), chi equals the hour angle,
    # which grows one degree per degree of longitude eastwards in the evening.
    lon = path.longitude_deg
    np.testing.assert_allclose(chi - chi[0], lon - lon[0], atol=0.05)
    assert path.bearing_deg == pytest.approx(90.0)
    np.testing.assert_allclose(path.latitude_deg, 0.0, atol=1e-9)


def test_grouping_by_bearing_tolerance():
    # Bearings 100.0, 100.6 and 101.3 deg with a 1 deg tolerance: the first two share a path; the
    # third (1.3 deg from the first) gets its own. 359.7 and 0.4 deg share a path across north.
    rx = [
        receiver_at(100.0, 800.0),
        receiver_at(359.7, 1200.0),
        receiver_at(100.6, 2000.0),
        receiver_at(101.3, 500.0),
        receiver_at(0.4, 300.0),
    ]
    s = load_scenario(scenario_text(rx))
    paths = build_paths(s, bearing_tolerance_deg=1.0)
    assert [p.receiver_indices for p in paths] == [(1, 4), (0, 2), (3,)]
    north, pair, single = paths
    assert north.bearing_deg == pytest.approx(0.05, abs=1e-6)
    assert pair.bearing_deg == pytest.approx(100.3, abs=1e-6)
    assert single.bearing_deg == pytest.approx(101.3, abs=1e-6)
    assert pair.label == "bearing 100.3 deg"
    np.testing.assert_allclose(pair.receiver_ranges_m, [800e3, 2000e3], rtol=1e-9)
    assert pair.max_range_m == pytest.approx(2000e3 * 1.05 + 50e3)
    assert single.max_range_m == pytest.approx(500e3 * 1.05 + 50e3)
    # A wider tolerance merges the three eastern receivers.
    wide = build_paths(s, bearing_tolerance_deg=2.0)
    assert [p.receiver_indices for p in wide] == [(1, 4), (0, 2, 3)]


def test_group_bearings_and_circular_mean():
    assert group_bearings([10.0, 10.5, 11.2, 200.0], 1.0) == [[0, 1], [2], [3]]
    assert group_bearings([359.5, 0.3, 180.0], 1.0) == [[2], [0, 1]]  # means 180 and 359.9 deg
    assert group_bearings([], 1.0) == []
    assert circular_mean_deg([359.0, 1.0]) == pytest.approx(0.0, abs=1e-9)
    assert circular_mean_deg([350.0, 356.0]) == pytest.approx(353.0)


def test_uniform_scenario_single_path_with_range_only_receivers():
    rx = [{"range_km": 1500.0}, receiver_at(45.0, 700.0), receiver_at(200.0, 2500.0)]
    s = load_scenario(
        scenario_text(
            rx, ionosphere="hprime_km = 74.0\nbeta_per_km = 0.3", ground='kind = "land"', solver="max_range_km = 4000.0"
        )
    )
    (path,) = build_paths(s, sample_km=10.0)
    assert path.label == "uniform" and path.bearing_deg is None
    assert path.receiver_indices == (0, 1, 2)
    np.testing.assert_allclose(path.receiver_ranges_m, [1500e3, 700e3, 2500e3], rtol=1e-9)
    assert path.max_range_m == pytest.approx(4000e3)  # solver.max_range_m is larger than 2675 km
    assert path.latitude_deg is None and path.solar_zenith_deg is None and path.daylight is None
    assert path.range_m[0] == 0.0 and path.range_m[-1] == pytest.approx(4000e3)
    assert np.diff(path.range_m).max() <= 10e3 + 1e-6
    assert set(path.ground_kind) == {"land"}
    np.testing.assert_allclose(path.ground_conductivity_s_per_m, GROUND_CLASSES["land"].conductivity_s_per_m)
    np.testing.assert_allclose(path.hprime_km, 74.0)
    np.testing.assert_allclose(path.beta_per_km, 0.3)
    with pytest.raises(ValueError):
        path.hprime_km[0] = 80.0  # the model is frozen, arrays included


def test_preset_and_ceiling_forms():
    rx = [{"range_km": 1000.0}]
    (p,) = build_paths(load_scenario(scenario_text(rx, ionosphere='preset = "night"', ground='kind = "perfect"')))
    np.testing.assert_allclose(p.hprime_km, PRESETS["night"].hprime_km)
    np.testing.assert_allclose(p.beta_per_km, PRESETS["night"].beta_per_km)
    assert np.all(np.isinf(p.ground_conductivity_s_per_m))
    (c,) = build_paths(load_scenario(scenario_text(rx, ionosphere="ceiling_km = 70.0")))
    assert c.hprime_km is None and c.beta_per_km is None
    assert c.max_range_m == pytest.approx(1000e3 * 1.05 + 50e3)


def test_range_only_receiver_rejected_when_direction_matters():
    # The loader refuses such a file; build_paths refuses such a scenario built in code.
    rx = [receiver_at(30.0, 900.0), {"range_km": 1500.0}]
    with pytest.raises(ScenarioError, match=r"receiver\[2\]\.range_km"):
        load_scenario(scenario_text(rx))
    s = load_scenario(scenario_text(rx[:1]))
    s = dataclasses.replace(s, receivers=(*s.receivers, Receiver("Site 2", range_m=1500e3)))
    with pytest.raises(ScenarioError, match=r"receiver\[2\]\.range_km = 1500 .*utc"):
        build_paths(s)


def test_segments_override_ground():
    rx = [{"range_km": 1000.0}]
    ground = (
        'kind = "sea"\n[[ground.segment]]\nfrom_km = 100.0\nto_km = 300.0\nkind = "land"\n'
        "[[ground.segment]]\nfrom_km = 300.0\nto_km = 400.0\nconductivity_s_per_m = 0.002\n"
        "relative_permittivity = 10.0"
    )
    (p,) = build_paths(
        load_scenario(scenario_text(rx, ionosphere="hprime_km = 74.0\nbeta_per_km = 0.3", ground=ground)),
        sample_km=10.0,
    )
    assert p.label == "all bearings" and p.bearing_deg is None
    r_km = p.range_m / 1e3
    expect = np.where((r_km >= 100) & (r_km < 300), "land", np.where((r_km >= 300) & (r_km < 400), "custom", "sea"))
    assert list(p.ground_kind) == list(expect)
    assert p.ground_conductivity_s_per_m[np.searchsorted(r_km, 350.0)] == pytest.approx(0.002)
    assert p.ground_relative_permittivity[np.searchsorted(r_km, 350.0)] == pytest.approx(10.0)
    assert p.ground_conductivity_s_per_m[0] == pytest.approx(GROUND_CLASSES["sea"].conductivity_s_per_m)


def test_auto_ground_across_the_atlantic():
    # Invented path from inland Iberia (40N 4W) to inland Brazil (10S 48W): land at both ends, the
    # open Atlantic between (geography from any atlas).
    rx = [{"latitude_deg": -10.0, "longitude_deg": -48.0}]
    s = load_scenario(scenario_text(rx, tx=(40.0, -4.0), ionosphere='preset = "day"', ground='kind = "auto"'))
    (p,) = build_paths(s)
    assert p.bearing_deg is not None
    kinds = p.ground_kind
    receiver_sample = np.searchsorted(p.range_m, p.receiver_ranges_m[0])
    assert kinds[0] == "land" and kinds[receiver_sample - 1] == "land"
    middle = slice(p.n_samples * 2 // 5, p.n_samples * 3 // 5)
    assert set(kinds[middle]) == {"sea"}
    for kind in set(kinds):
        sel = kinds == kind
        np.testing.assert_allclose(p.ground_conductivity_s_per_m[sel], GROUND_CLASSES[kind].conductivity_s_per_m)
        np.testing.assert_allclose(p.ground_relative_permittivity[sel], GROUND_CLASSES[kind].relative_permittivity)


def test_sample_ranges_and_bad_arguments():
    r = sample_ranges_m(1234e3, 10.0)
    assert r[0] == 0.0 and r[-1] == 1234e3 and np.diff(r).max() <= 10e3
    assert len(r) == math.ceil(123.4) + 1
    s = load_scenario(scenario_text([{"range_km": 100.0}], ionosphere="ceiling_km = 70.0"))
    with pytest.raises(ScenarioError, match="sample_km"):
        build_paths(s, sample_km=0.0)
    with pytest.raises(ScenarioError, match="bearing_tolerance_deg"):
        build_paths(s, bearing_tolerance_deg=-1.0)
