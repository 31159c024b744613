"""Sweep reports: the sun's 90 deg crossings at path midpoints, the diurnal figure and table.

Synthetic sweep datasets (no solving) with invented stations; the astronomy and geodesy are checked
against formulas and a library outside the project.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest
import xarray as xr
from pyproj import Geod

from cavity.errors import ResultFileError
from cavity.reports.sweep import (
    format_diurnal_table,
    path_midpoints,
    plot_diurnal,
    sun_crossings,
    table_diurnal,
)

UTC = timezone.utc


def synthetic_sweep(
    tx=(0.0, 0.0),
    receivers=(("Quarry Hill", 0.0, 20.0), ("Saltmarsh", 30.0, 5.0)),
    start=datetime(2026, 3, 20, tzinfo=UTC),
    hours=24,
    step_min=30,
    freqs=(16.0, 27.6),
):
    """A sweep-shaped dataset: receiver amplitudes (receiver, frequency, time), as a sweep file holds."""
    n = hours * 60 // step_min + 1
    times = np.array(
        [np.datetime64((start + timedelta(minutes=step_min * k)).replace(tzinfo=None), "ns") for k in range(n)]
    )
    hours_since = np.arange(n) * step_min / 60.0
    amp = np.empty((len(receivers), len(freqs), n))
    for i in range(len(receivers)):
        for k, f in enumerate(freqs):
            amp[i, k] = 60.0 + 10 * i + f / 10 + 5.0 * np.cos(2 * np.pi * hours_since / 24.0)
    tx_lines = "" if tx is None else f"latitude_deg = {tx[0]}\nlongitude_deg = {tx[1]}\n"
    scenario = (
        f'title = "Invented synthetic sweep"\n[transmitter]\nname = "Tor Beacon"\n{tx_lines}frequency_khz = 16.0\n'
    )
    return xr.Dataset(
        {
            "receiver_name": (("receiver",), np.array([r[0] for r in receivers], dtype=object)),
            "receiver_range": (("receiver",), np.array([1000.0 + 500 * i for i in range(len(receivers))])),
            "receiver_latitude": (("receiver",), np.array([r[1] for r in receivers], float)),
            "receiver_longitude": (("receiver",), np.array([r[2] for r in receivers], float)),
            "receiver_ez_amplitude": (("receiver", "frequency", "time"), amp),
            "receiver_b_amplitude": (("receiver", "frequency", "time"), amp + 50.0),
        },
        coords={"time": ("time", times), "frequency": ("frequency", np.array(freqs))},
        attrs={"title": "Invented synthetic sweep", "scenario": scenario},
    )


def minutes(a: datetime, b: datetime) -> float:
    return abs((a - b).total_seconds()) / 60.0


def test_day_length_at_midsummer_matches_the_sunrise_equation():
    # Sunrise equation for the geometric horizon: cos H0 = -tan(phi) tan(delta) (Meeus 1998,
    # Astronomical Algorithms, ch. 15, with h0 = 0); delta = 23.439 deg at the June solstice
    # (the obliquity; docs/physics.md check value 23.439 deg zenith at 0N 0E, 2024-06-21 12:00 UTC).
    phi, delta = math.radians(51.5), math.radians(23.439)
    expected_h = 2 * math.degrees(math.acos(-math.tan(phi) * math.tan(delta))) / 15.0  # 16.40 h
    events = sun_crossings(51.5, 0.0, datetime(2024, 6, 21, tzinfo=UTC), datetime(2024, 6, 22, tzinfo=UTC))
    assert [kind for _, kind in events] == ["sunrise", "sunset"]
    (rise, _), (sset, _) = events
    assert abs((sset - rise).total_seconds() / 3600 - expected_h) * 60 < 2.0
    # Solar noon at 0 E is 12:00 UTC minus the equation of time, about -1.7 min on 21 June (from
    # memory; NOAA solar calculator): noon near 12:02 UTC.
    noon = rise + (sset - rise) / 2
    assert minutes(noon, datetime(2024, 6, 21, 12, 1, 42, tzinfo=UTC)) < 1.5


def test_equinox_at_the_equator_gives_twelve_hours_around_the_solar_noon():
    # At an equinox the geometric day lasts 12 h everywhere (delta = 0 in the sunrise equation);
    # the equation of time is about -7.5 min on 20 March (from memory; NOAA): noon near 12:07:30 UTC.
    events = sun_crossings(0.0, 0.0, datetime(2026, 3, 20, tzinfo=UTC), datetime(2026, 3, 21, tzinfo=UTC))
    (rise, k1), (sset, k2) = events
    assert (k1, k2) == ("sunrise", "sunset")
    assert abs((sset - rise).total_seconds() / 3600 - 12.0) * 60 < 2.0
    assert minutes(rise + (sset - rise) / 2, datetime(2026, 3, 20, 12, 7, 30, tzinfo=UTC)) < 1.5
    # Moving 90 deg east puts every event 6 h earlier (15 deg per hour of the earth's rotation)
    east = sun_crossings(0.0, 90.0, datetime(2026, 3, 20, tzinfo=UTC), datetime(2026, 3, 21, tzinfo=UTC))
    assert minutes(east[0][0], rise - timedelta(hours=6)) < 1.0


def test_polar_night_has_no_crossing():
    # North of the polar circle (66.56 N = 90 - 23.44) the sun stays below the horizon at the
    # December solstice (geometry of the declination).
    assert sun_crossings(80.0, 15.0, datetime(2024, 12, 21, tzinfo=UTC), datetime(2024, 12, 22, tzinfo=UTC)) == []


def test_path_midpoints_are_halfway_along_the_wgs84_geodesic():
    ds = synthetic_sweep(
        tx=(0.0, 0.0),
        receivers=(("Quarry Hill", 0.0, 20.0), ("Saltmarsh", 30.0, 5.0), ("Range only", math.nan, math.nan)),
    )
    mids = path_midpoints(ds)
    assert mids[0] == pytest.approx((0.0, 10.0), abs=1e-9)  # along the equator, by symmetry
    assert mids[2] is None
    geod = Geod(ellps="WGS84")  # pyproj as the outside reference
    _, _, first = geod.inv(0.0, 0.0, mids[1][1], mids[1][0])
    _, _, second = geod.inv(mids[1][1], mids[1][0], 5.0, 30.0)
    _, _, whole = geod.inv(0.0, 0.0, 5.0, 30.0)
    assert first == pytest.approx(second, abs=1e-3) and first + second == pytest.approx(whole, abs=1e-3)
    assert path_midpoints(synthetic_sweep(tx=None)) == [None, None]


def test_table_gives_min_median_max_and_their_instants():
    ds = synthetic_sweep()
    ds["receiver_ez_amplitude"][0, 1, 5] = np.nan  # a failed point
    table = table_diurnal(ds)
    assert list(table["receiver"]) == ["Quarry Hill", "Quarry Hill", "Saltmarsh", "Saltmarsh"]
    assert list(table["frequency_khz"]) == [16.0, 27.6, 16.0, 27.6]
    row = table.iloc[0]
    # 60 + 1.6 + 5 cos(2 pi t / 24 h): maximum at 00:00 and 24:00, minimum at 12:00
    assert row["ez_max_db"] == pytest.approx(66.6) and row["ez_min_db"] == pytest.approx(56.6)
    assert row["ez_median_db"] == pytest.approx(float(np.median(ds["receiver_ez_amplitude"][0, 0].values)))
    assert row["utc_of_min"] == "2026-03-20T12:00:00Z" and row["utc_of_max"] == "2026-03-20T00:00:00Z"
    assert row["instants"] == 49 and table.iloc[1]["instants"] == 48
    all_nan = synthetic_sweep()
    all_nan["receiver_ez_amplitude"][1, 0, :] = np.nan
    empty = table_diurnal(all_nan).iloc[2]
    assert empty["instants"] == 0 and math.isnan(empty["ez_min_db"]) and empty["utc_of_min"] == ""
    md = format_diurnal_table(table)
    # the receiver table's style: "Name (unit)" headers, cells padded to a common width per column
    lines = md.splitlines()
    cells = [[c.strip() for c in line.strip("|").split("|")] for line in lines]
    assert cells[0][:3] == ["Receiver", "Range (km)", "Frequency (kHz)"]
    assert len({len(line) for line in lines}) == 1  # padded: every line equally long
    # frequency 27.6 kHz: 60 + 2.76 - 5 = 57.76 dB at its minimum (the synthetic formula above)
    assert ["Quarry Hill", "1000.0", "27.60", "48", "57.8"] in [row[:5] for row in cells]
    csv = format_diurnal_table(table, "csv")
    assert csv.splitlines()[1].startswith("Quarry Hill,1000.00,16.00,49,56.60,")
    with pytest.raises(ValueError, match="fmt"):
        format_diurnal_table(table, "html")


def test_plot_writes_png_and_pdf(tmp_path):
    import matplotlib.image as mpimg

    ds = synthetic_sweep()
    files = plot_diurnal(ds, tmp_path / "day.png")
    assert files == [str(tmp_path / "day.png")]
    image = mpimg.imread(files[0])
    assert image.shape[0] > 500 and float(image[..., :3].std()) > 0.05  # drawn, not blank
    pdf = plot_diurnal(ds, tmp_path / "day.pdf", quantity="b")
    assert open(pdf[0], "rb").read(5) == b"%PDF-"
    with pytest.raises(ValueError, match="quantity"):
        plot_diurnal(ds, tmp_path / "x.png", quantity="phase")


def test_reports_refuse_a_dataset_without_time(tmp_path):
    ds = synthetic_sweep().isel(time=0)
    with pytest.raises(ResultFileError, match="no time dimension"):
        table_diurnal(ds)
    with pytest.raises(ResultFileError, match="not a sweep file"):
        plot_diurnal(ds, tmp_path / "x.png")


def sweep_with_paths():
    """A sweep-shaped dataset with fields along two paths and the sun along them (three instants).

    Path 0 carries Ez = 100 - 0.01 r (r in km) at night and 5 dB less by day, with a 30 dB deep
    notch at its receiver's range (a modal minimum); path 1 carries 80 dB everywhere. Instant 0 is
    night along both paths (zenith 120 deg), instant 1 day (40 deg), instant 2 has the terminator
    at 1,000 km along path 0 (zenith 80 deg before it, 110 deg after) and day along path 1.
    """
    r = np.arange(0.0, 3001.0, 10.0)
    times = np.array(["2026-03-20T00:00", "2026-03-20T12:00", "2026-03-20T18:00"], dtype="datetime64[ns]")
    ez = np.empty((2, 1, r.size, 3))
    for t, shift in enumerate((0.0, -5.0, -2.0)):
        ez[0, 0, :, t] = 100.0 - 0.01 * r + shift
        ez[1, 0, :, t] = 80.0
    notch = np.abs(r - 2400.0) <= 10.0
    ez[0, 0, notch, :] -= 30.0
    chi = np.empty((2, r.size, 3))
    chi[:, :, 0] = 120.0
    chi[:, :, 1] = 40.0
    chi[0, :, 2] = np.where(r < 1000.0, 80.0, 110.0)
    chi[1, :, 2] = 40.0
    rx_amp = np.stack([ez[0, :, notch.argmax() + 1, :], ez[1, :, 50, :], ez[0, :, 50, :]])
    return xr.Dataset(
        {
            "receiver_name": (("receiver",), np.array(["Far Mere", "Near Cairn", "Close Weir"], dtype=object)),
            "receiver_range": (("receiver",), np.array([2400.0, 500.0, 500.0])),
            "receiver_path": (("receiver",), np.array([0, 1, 0])),
            "receiver_ez_amplitude": (("receiver", "frequency", "time"), rx_amp),
            "ez_amplitude": (("path", "frequency", "range", "time"), ez),
            "solar_zenith_angle": (("path", "range", "time"), chi),
        },
        coords={"time": ("time", times), "frequency": ("frequency", np.array([14.3])), "range": ("range", r)},
        attrs={"title": "Invented sweep with paths"},
    )


def test_path_levels_are_medians_over_the_far_half_of_each_path():
    from cavity.reports.sweep import path_levels

    levels, labels = path_levels(sweep_with_paths())
    # far half of path 0: 1200-2400 km; the median of the straight line 100 - 0.01 r over an even
    # grid is its value at the middle, 1800 km (82 dB), and a 3-sample notch does not move it
    # beyond one grid step (0.1 dB)
    np.testing.assert_allclose(levels.isel(path=0, frequency=0).values, [82.0, 77.0, 80.0], atol=0.11)
    np.testing.assert_allclose(levels.isel(path=1, frequency=0).values, 80.0)
    assert labels == ["to Far Mere, 1200-2400 km", "to Near Cairn, 250-500 km"]
    assert path_levels(synthetic_sweep()) is None  # receiver values only


def test_day_and_night_medians_follow_the_sun_along_each_receivers_path():
    from cavity.reports.sweep import daylight_at_receivers

    ds = sweep_with_paths()
    state = daylight_at_receivers(ds)
    # Far Mere (2,400 km) has the terminator between it and the transmitter at instant 2; Close Weir
    # (500 km, same path) lies wholly on the day side of it then
    assert state.tolist() == [["night", "day", "transition"], ["night", "day", "day"], ["night", "day", "day"]]
    table = table_diurnal(ds)
    far = table.iloc[0]
    assert far["day_instants"] == 1 and far["night_instants"] == 1
    assert far["night_minus_day_db"] == pytest.approx(5.0)
    close = table.iloc[2]
    assert close["day_instants"] == 2 and close["ez_day_median_db"] == pytest.approx(100.0 - 5.0 - 3.5)
    md = format_diurnal_table(table)
    assert "Night - day (dB)" in md.splitlines()[0] and md.splitlines()[2].rstrip(" |").endswith(" 5.0")
    assert "night_minus_day_db" not in table_diurnal(synthetic_sweep()).columns


def test_plot_has_a_row_of_path_levels(tmp_path):
    import matplotlib.image as mpimg

    ds = sweep_with_paths()
    files = plot_diurnal(ds, tmp_path / "paths.png")
    plain = plot_diurnal(ds.drop_vars("ez_amplitude"), tmp_path / "plain.png")
    taller, shorter = mpimg.imread(files[0]), mpimg.imread(plain[0])
    assert taller.shape[0] > 1.5 * shorter.shape[0]  # the second row of panels was drawn
