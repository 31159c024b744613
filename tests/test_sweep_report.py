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
from cavity.sweep_report import (
    format_diurnal_table,
    path_midpoints,
    plot_diurnal,
    sun_crossings,
    table_diurnal,
)

UTC = timezone.utc


def synthetic_sweep(tx=(0.0, 0.0), receivers=(("Quarry Hill", 0.0, 20.0), ("Saltmarsh", 30.0, 5.0)),
                    start=datetime(2026, 3, 20, tzinfo=UTC), hours=24, step_min=30, freqs=(16.0, 21.4)):
    """A sweep-shaped dataset: receiver amplitudes (receiver, frequency, time), as a sweep file holds."""
    n = hours * 60 // step_min + 1
    times = np.array([np.datetime64((start + timedelta(minutes=step_min * k)).replace(tzinfo=None), "ns") for k in range(n)])
    hours_since = np.arange(n) * step_min / 60.0
    amp = np.empty((len(receivers), len(freqs), n))
    for i in range(len(receivers)):
        for k, f in enumerate(freqs):
            amp[i, k] = 60.0 + 10 * i + f / 10 + 5.0 * np.cos(2 * np.pi * hours_since / 24.0)
    tx_lines = "" if tx is None else f"latitude_deg = {tx[0]}\nlongitude_deg = {tx[1]}\n"
    scenario = f'title = "Invented synthetic sweep"\n[transmitter]\nname = "Tor Beacon"\n{tx_lines}frequency_khz = 16.0\n'
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
    # (the obliquity; physics.md check value 23.439 deg zenith at 0N 0E, 2024-06-21 12:00 UTC).
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
    ds = synthetic_sweep(tx=(0.0, 0.0), receivers=(("Quarry Hill", 0.0, 20.0), ("Saltmarsh", 30.0, 5.0),
                                                   ("Range only", math.nan, math.nan)))
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
    assert list(table["frequency_khz"]) == [16.0, 21.4, 16.0, 21.4]
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
    assert md.splitlines()[0].startswith("| receiver | range, km | frequency, kHz")
    assert "| Quarry Hill | 1000 | 21.4 | 48 | 57.1 |" in md
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
