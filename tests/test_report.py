"""Checks of cavity.reports (tables, attenuation, compare, plots): receiver tables, attenuation fits, comparisons and figures.

Synthetic results are built with cavity.results.assemble_dataset from fields whose answers are known
in closed form; the golden result files in tests/data (small solver runs, made by tests/data/make_golden.py) guard the
table and plot code against regressions.
"""

from __future__ import annotations

import cmath
import csv
import io
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

from cavity.constants import C0
from cavity.errors import CavityError
from cavity.reports.attenuation import (
    EARTH_RADIUS_KM,
    attenuation_rate,
    attenuation_rows,
    result_attenuation,
    spreading_db,
)
from cavity.reports.compare import common_frequencies, comparison_report, comparison_rows
from cavity.reports.phase import display_phase_deg, relative_phase_deg
from cavity.reports.plots import (
    common_amplitude_limits,
    comparison_figure,
    near_field_km,
    plot_comparison,
    plot_result,
    result_figure,
)
from cavity.reports.tables import noise_in_bandwidth_db, receiver_daylight, receiver_rows, receiver_table
from cavity.results import SolverRecord, assemble_dataset, open_result, write_result
from cavity.scenario import load_scenario

DATA = Path(__file__).parent / "data"
GOLDEN = {name: DATA / f"golden_{name}.nc" for name in ("day", "night", "dawn")}


# --------------------------------------------------------------------------------------------------
# Synthetic results with known answers
# --------------------------------------------------------------------------------------------------


def scenario_text(freqs="20.0", ionosphere='preset = "day"', names=("Site North", "Site | Mid", "Site South")):
    """An invented scenario (made-up names): receivers given by range on a uniform sea path."""
    receivers = "".join(f'[[receiver]]\nname = "{n}"\nrange_km = {d}\n' for n, d in zip(names, (600.0, 1500.0, 2900.0)))
    return (
        'title = "Invented synthetic result"\n'
        f'[transmitter]\nname = "Test mast"\nfrequency_khz = {freqs}\nradiated_power_kw = 10.0\n'
        f'{receivers}[ionosphere]\n{ionosphere}\n[ground]\nkind = "sea"\n'
    )


def synthetic(
    rate_db_per_1000km=2.0,
    freqs_khz=(20.0,),
    *,
    spreading="sphere",
    phase_velocity_ratio=1.003,
    ionosphere='preset = "day"',
    receiver_km=(600.0, 1500.0, 2900.0),
    e0_db=80.0,
    ripple_db=0.0,
    sza=None,
    paths=1,
    bearings=None,
):
    """A result whose field is E0 exp(-alpha d) / sqrt(spreading) exactly (optionally with a ripple).

    The phase is that of a wave travelling at ``phase_velocity_ratio`` times c.
    """
    freqs = np.asarray(freqs_khz, float)
    scenario = load_scenario(scenario_text(", ".join(f"{f:g}" for f in freqs).join("[]"), ionosphere))
    r_km = np.linspace(0.0, 3200.0, 641)
    d = np.maximum(r_km, 1e-3)
    db = (
        e0_db - rate_db_per_1000km * d / 1000.0 - spreading_db(d, spreading) + ripple_db * np.sin(2 * np.pi * d / 700.0)
    )
    ez = np.empty((paths, freqs.size, r_km.size), complex)
    for k, f in enumerate(freqs):
        k0 = 2 * np.pi * f * 1e3 / (C0 * phase_velocity_ratio)
        ez[:, k] = (1e-6 * 10 ** (db / 20.0) * np.exp(-1j * k0 * d * 1e3))[None, :]
    rx_km = np.asarray(receiver_km, float)
    rx = np.stack(
        [
            1e-6
            * 10 ** (np.interp(rx_km, d, db) / 20.0)
            * np.exp(-1j * 2 * np.pi * f * 1e3 / (C0 * phase_velocity_ratio) * rx_km * 1e3)
            for f in freqs
        ],
        axis=1,
    )
    alt = np.arange(40e3, 121e3, 20e3)
    P, R = paths, r_km.size
    return assemble_dataset(
        scenario,
        range_m=r_km * 1e3,
        frequency_hz=freqs * 1e3,
        altitude_m=alt,
        path_labels=[f"path {p}" for p in range(P)] if paths > 1 else ["uniform"],
        ez_v_per_m=ez,
        b_t=ez / C0,
        receiver_names=[rx.name for rx in scenario.receivers],
        receiver_range_m=rx_km * 1e3,
        receiver_ez_v_per_m=rx,
        receiver_b_t=rx / C0,
        electron_density_m3=np.ones((P, R, alt.size)),
        collision_frequency_s=np.ones((P, R, alt.size)),
        ground_conductivity_s_per_m=np.full((P, R), 5.0),
        solver=SolverRecord(cells=1, time_steps=1, cell_r_m=500.0, cell_z_m=500.0, time_step_s=1e-6, wall_time_s=1.0),
        receiver_path=np.zeros(len(rx_km), int),
        receiver_bearing_deg=bearings,
        solar_zenith_angle_deg=None if sza is None else np.broadcast_to(sza, (P, R)),
    )


# --------------------------------------------------------------------------------------------------
# Definitions
# --------------------------------------------------------------------------------------------------


def test_spreading_on_sphere_and_flat():
    # Spherical spreading 1/sqrt(a sin(d/a)) against flat 1/sqrt(d) (docs/physics.md 7: the
    # correction sqrt(d / (a sin(d/a))) is +0.5 dB at 5 Mm, +2 dB at 10 Mm, from memory).
    d = np.array([5000.0, 10000.0])
    extra = spreading_db(d, "flat") - spreading_db(d, "sphere")  # power ratio of the two, dB
    amplitude_correction = extra  # 10 log10 of the power ratio = 20 log10 of the amplitude ratio
    assert amplitude_correction[0] == pytest.approx(
        10 * math.log10(5000 / (EARTH_RADIUS_KM * math.sin(5000 / EARTH_RADIUS_KM)))
    )
    assert amplitude_correction[0] == pytest.approx(0.5, abs=0.1)
    assert amplitude_correction[1] == pytest.approx(2.0, abs=0.4)
    with pytest.raises(ValueError):
        spreading_db(d, "cone")


def test_noise_in_bandwidth_grows_as_10log10_bandwidth():
    # Noise power is proportional to bandwidth (thermal and atmospheric noise densities, common
    # practice), so a field density in dB per sqrt(Hz) gains 10 log10(B) in a bandwidth B.
    assert noise_in_bandwidth_db(10.0, 100.0) == pytest.approx(30.0)
    assert noise_in_bandwidth_db(-5.0, 1.0) == pytest.approx(-5.0)
    assert noise_in_bandwidth_db(0.0, 1000.0) == pytest.approx(30.0)


def test_relative_phase_removes_the_light_delay():
    # With exp(+j omega t) a wave at c has phase -360 f d / c: the relative phase is zero for it.
    d = np.linspace(0, 3000, 7)
    f = 14.3
    phase = -360.0 * f * 1e3 * d * 1e3 / C0
    assert np.allclose(relative_phase_deg(phase, d, f), 0.0, atol=1e-9)
    # A faster wave (phase velocity above c, as in the waveguide) gains phase on it.
    faster = phase / 1.003
    assert np.all(np.diff(relative_phase_deg(faster, d, f)) > 0)


def test_display_phase_is_wrapped_relative_phase():
    # The one phase of tables and plots: phase + 360 f d / c wrapped to (-180, 180]; checked
    # against numpy's angle of the complex exponential, which wraps to (-180, 180] by definition.
    rng = np.random.default_rng(3)
    phase = rng.uniform(-90000.0, 1000.0, 500)
    d = rng.uniform(1.0, 5000.0, 500)
    shown = display_phase_deg(phase, d, 22.3)
    light = 360.0 * 22.3e3 * d * 1e3 / C0
    assert np.allclose(np.exp(1j * np.radians(shown)), np.exp(1j * np.radians(phase + light)), atol=1e-9)
    assert shown.min() > -180.0 and shown.max() <= 180.0
    assert float(display_phase_deg(-180.0, 0.0, 20.0)) == 180.0  # the closed end of (-180, 180]


def test_near_field_band_holds_the_phase_turn():
    # Short vertical dipole on a perfect ground plane, Ez proportional to
    # (1 + 1/(jkd) + 1/(jkd)^2) exp(-jkd) / d (Jackson, Classical Electrodynamics, 3rd ed., 9.2;
    # exp(+j omega t)). Beyond the band the phase is within 10 deg of the far field; inside it the
    # phase turns by up to 180 deg, the steep rise at the start of a plot.
    f = 22.3
    edge = near_field_km(f)
    k = 2 * np.pi * f * 1e3 / C0

    def bracket_phase(d_km):
        kd = k * np.asarray(d_km) * 1e3
        return np.degrees(np.angle(1 + 1 / (1j * kd) + 1 / (1j * kd) ** 2))

    assert np.all(np.abs(bracket_phase(np.linspace(edge, 50 * edge, 400))) < 10.0)
    assert abs(bracket_phase(0.01 * edge)) > 170.0


def test_common_amplitude_limits_cover_both_runs():
    day = synthetic(3.0, e0_db=80.0)
    night = synthetic(1.0, ionosphere='preset = "night"', e0_db=95.0)
    lo, hi = common_amplitude_limits([day, night])
    for ds in (day, night):
        a = ds["ez_amplitude"].values[0, 0, 1:]
        assert lo < np.percentile(a, 1) and hi > np.percentile(a, 99)
    fig_d = result_figure(day, amplitude_limits=(lo, hi))
    fig_n = result_figure(night, amplitude_limits=(lo, hi))
    assert fig_d.axes[0].get_ylim() == fig_n.axes[0].get_ylim() == (lo, hi)
    assert fig_d.axes[1].get_ylim() == fig_n.axes[1].get_ylim() == (-180.0, 180.0)


# --------------------------------------------------------------------------------------------------
# Attenuation fit
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("spreading", ["sphere", "flat"])
@pytest.mark.parametrize("rate", [0.0, 1.5, 2.7])
def test_attenuation_fit_recovers_a_known_rate(rate, spreading):
    d = np.linspace(0.0, 3500.0, 701)
    amp = 90.0 - rate * d / 1000.0 - spreading_db(np.maximum(d, 1e-3), spreading)
    fit = attenuation_rate(d, amp, spreading=spreading)
    assert fit.rate_db_per_1000km == pytest.approx(rate, abs=1e-9)
    assert fit.intercept_db == pytest.approx(90.0, abs=1e-9)
    assert (fit.start_km, fit.stop_km) == (1000.0, 3000.0)
    assert fit.points == 401
    assert fit.rms_residual_db < 1e-9
    assert np.allclose(fit.line_db(d[1:]), amp[1:])


def test_attenuation_fit_needs_the_right_spreading():
    # Removing flat spreading from a field that spread on the sphere leaves a bias: the fit must
    # use the spreading the run had (here 0.07 dB per 1000 km over 1000-3000 km, derived from the two laws).
    d = np.linspace(1.0, 3200.0, 640)
    amp = 70.0 - 2.0 * d / 1000.0 - spreading_db(d, "sphere")
    biased = attenuation_rate(d, amp, spreading="flat").rate_db_per_1000km
    assert abs(biased - 2.0) > 0.05


def test_attenuation_fit_window_and_errors():
    d = np.linspace(0.0, 800.0, 161)
    amp = 90.0 - 3.0 * d / 1000.0 - spreading_db(np.maximum(d, 1e-3))
    fit = attenuation_rate(d, amp)  # default window clipped: under a quarter of 1000-3000 km computed
    assert fit.stop_km == pytest.approx(800.0) and fit.start_km == pytest.approx(800.0 / 3, abs=5.0)
    assert fit.rate_db_per_1000km == pytest.approx(3.0, abs=1e-9)
    fit = attenuation_rate(d, amp, 200.0, 600.0)
    assert (fit.start_km, fit.stop_km) == (200.0, 600.0)
    with pytest.raises(CavityError, match="1000-3000 km holds 0 computed ranges"):
        attenuation_rate(d, amp, 1000.0, 3000.0, what="night.nc")
    with pytest.raises(CavityError, match="is empty"):
        attenuation_rate(d, amp, 600.0, 200.0)


def test_attenuation_of_a_result_uses_its_spreading():
    ds = synthetic(2.4)
    fit = result_attenuation(ds)
    assert fit.spreading == "sphere"
    # exact up to the float32-free dB conversion of the file (assemble_dataset: 20 log10 |E|)
    assert fit.rate_db_per_1000km == pytest.approx(2.4, abs=1e-6)
    with pytest.raises(CavityError, match="frequency 99 kHz is not in"):
        result_attenuation(ds, frequency_khz=99.0)


# --------------------------------------------------------------------------------------------------
# Receiver tables
# --------------------------------------------------------------------------------------------------


def parse_markdown(text):
    """Rows of the first Markdown table in ``text`` as lists of cells (header first)."""
    rows = []
    for line in text.splitlines():
        if not line.startswith("|"):
            if rows:
                break
            continue
        cells = [c.strip().replace("\\|", "|") for c in line.strip().strip("|").replace("\\|", "\0").split("|")]
        rows.append([c.replace("\0", "|") for c in cells])
    return [rows[0]] + rows[2:]


def test_receiver_rows_hold_the_file_numbers():
    ds = synthetic(2.0, (16.0, 31.5), bearings=[10.0, math.nan, 30.0])
    rows = receiver_rows(ds, required_db=40.0, noise_db=5.0, bandwidth_hz=200.0)
    assert len(rows) == 3 * 2
    assert [(r["receiver"], r["frequency_khz"]) for r in rows[:3]] == [
        ("Site North", 16.0),
        ("Site North", 31.5),
        ("Site | Mid", 16.0),
    ]
    for i in range(3):
        for k in range(2):
            row = rows[2 * i + k]
            assert row["ez_db"] == float(ds["receiver_ez_amplitude"].values[i, k])
            assert row["phase_deg"] == float(ds["receiver_ez_phase"].values[i, k])
            assert row["b_db"] == float(ds["receiver_b_amplitude"].values[i, k])
            assert row["range_km"] == float(ds["receiver_range"].values[i])
            # 20 log10 (E / 1 uV/m) inverted
            assert row["ez_uv_per_m"] == pytest.approx(10 ** (row["ez_db"] / 20.0), rel=1e-12)
            assert row["margin_db"] == pytest.approx(row["ez_db"] - 40.0)
            assert row["snr_db"] == pytest.approx(row["ez_db"] - (5.0 + 10 * math.log10(200.0)))
            assert row["daylight"] == "day"
    assert math.isnan(rows[2]["bearing_deg"])
    with pytest.raises(CavityError, match="go together"):
        receiver_rows(ds, noise_db=3.0)
    with pytest.raises(CavityError, match="bandwidth = 0"):
        receiver_rows(ds, noise_db=3.0, bandwidth_hz=0.0)


def test_csv_table_parses_and_equals_the_file():
    ds = synthetic(2.0, (16.0, 31.5), bearings=[10.0, math.nan, 30.0])
    text = receiver_table(ds, "csv", required_db=45.5)
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == 6
    assert "Cautions" not in text
    for n, row in enumerate(rows):
        i, k = divmod(n, 2)
        ez = float(ds["receiver_ez_amplitude"].values[i, k])
        assert row["receiver"] == str(ds["receiver_name"].values[i])
        assert float(row["frequency_khz"]) == float(ds["frequency"].values[k])
        assert abs(float(row["ez_db_re_1uv_per_m"]) - ez) <= 0.0005
        assert abs(float(row["b_db_re_1ft"]) - float(ds["receiver_b_amplitude"].values[i, k])) <= 0.0005
        light = 360.0 * float(ds["frequency"].values[k]) * 1e3 * float(ds["receiver_range"].values[i]) * 1e3 / C0
        expected = math.degrees(
            cmath.phase(cmath.exp(1j * math.radians(float(ds["receiver_ez_phase"].values[i, k]) + light)))
        )
        assert abs((float(row["ez_phase_re_c_delay_deg"]) - expected + 180.0) % 360.0 - 180.0) <= 0.005
        assert abs(float(row["range_km"]) - float(ds["receiver_range"].values[i])) <= 0.005
        assert float(row["ez_uv_per_m"]) == pytest.approx(10 ** (ez / 20), rel=1e-5)
        assert abs(float(row["margin_db"]) - (ez - 45.5)) <= 0.0005
        assert row["day_night"] == "day"
    assert rows[2]["bearing_deg"] == "" and float(rows[0]["bearing_deg"]) == 10.0


def test_markdown_table_parses_escapes_and_ends_with_cautions():
    ds = synthetic(2.0, (16.0,), ionosphere='preset = "night"')
    text = receiver_table(ds, "markdown", noise_db=0.0, bandwidth_hz=1000.0)
    table = parse_markdown(text)
    header, body = table[0], table[1:]
    assert header[:3] == ["Receiver", "Frequency (kHz)", "Range (km)"]
    assert "Bearing (deg)" not in header and "range only" in text.split("\n| ")[0]  # said once, above
    assert "SNR in 1000 Hz (dB)" in header
    assert [r[0] for r in body] == ["Site North", "Site | Mid", "Site South"]  # "|" escaped in the cell
    for i, row in enumerate(body):
        cells = dict(zip(header, row))
        ez = float(ds["receiver_ez_amplitude"].values[i, 0])
        assert abs(float(cells["Ez (dB re 1 uV/m)"]) - ez) <= 0.05
        assert float(cells["SNR in 1000 Hz (dB)"]) == pytest.approx(ez - 30.0, abs=0.05)
        assert cells["Day/night"] == "night"
    lines = text.rstrip("\n").splitlines()
    assert lines[-1].startswith("Cautions: Predictions are planning estimates")
    assert any(line.startswith("SNR = Ez - (N0 + 10 log10(B))") for line in lines)


def test_several_runs_get_a_run_column():
    day, night = synthetic(2.0), synthetic(1.0, ionosphere='preset = "night"')
    rows = list(csv.DictReader(io.StringIO(receiver_table([day, night], "csv", runs=["day", "night"]))))
    assert [r["run"] for r in rows] == ["day"] * 3 + ["night"] * 3
    assert [r["day_night"] for r in rows] == ["day"] * 3 + ["night"] * 3


@pytest.mark.parametrize(
    "ionosphere, expected",
    [
        ('preset = "day"', "day"),
        ('preset = "night"', "night"),
        ('preset = "textbook-night"', "night"),
        ('preset = "day-2017"', "day"),
        ("hprime_km = 75.0\nbeta_per_km = 0.4", "-"),
        ("ceiling_km = 80.0", "-"),
    ],
)
def test_daylight_from_the_scenario_preset(ionosphere, expected):
    assert receiver_daylight(synthetic(ionosphere=ionosphere)) == [expected] * 3


def test_daylight_from_the_solar_zenith_angle():
    # Rule of profiles.daynight.daylight_class: day for chi <= 90, night for chi >= 99 (common practice).
    r = np.linspace(0.0, 3200.0, 641)
    chi = 80.0 + 30.0 * r / 3200.0  # 600 km: 85.6; 1500 km: 94.1; 2900 km: 107.2
    assert receiver_daylight(synthetic(sza=chi)) == ["day", "transition", "night"]


# --------------------------------------------------------------------------------------------------
# Comparison
# --------------------------------------------------------------------------------------------------


def test_comparison_differences_and_rates():
    day = synthetic(2.5, (16.0, 20.0), phase_velocity_ratio=1.003)
    night = synthetic(1.0, (20.0, 31.5), ionosphere='preset = "night"', e0_db=83.0, phase_velocity_ratio=1.001)
    assert common_frequencies(day, night) == [20.0]
    rows = comparison_rows(day, night, "day", "night")
    assert [r["receiver"] for r in rows] == ["Site North", "Site | Mid", "Site South"]
    for i, row in enumerate(rows):
        a = float(day["receiver_ez_amplitude"].values[i, 1])
        b = float(night["receiver_ez_amplitude"].values[i, 0])
        assert row["difference_db"] == pytest.approx(b - a, abs=1e-12)
        # Known in closed form: 3 dB + 1.5 dB per 1000 km.
        assert row["difference_db"] == pytest.approx(3.0 + 1.5 * row["range_km"] / 1000.0, abs=1e-6)
        assert -180.0 <= row["phase_difference_deg"] < 180.0
    text = comparison_report(day, night, "day", "night")
    assert "| Site \\| Mid" in text
    assert "2.50" in text and "1.00" in text  # the two fitted rates, dB per 1000 km
    assert "1/sqrt(a sin(d/a))" in text
    assert text.rstrip().splitlines()[-1].startswith("Cautions:")


def test_comparison_without_a_common_frequency_names_both_sets():
    a, b = synthetic(freqs_khz=(16.0, 20.0)), synthetic(freqs_khz=(31.5,))
    with pytest.raises(CavityError) as info:
        common_frequencies(a, b, "a.nc", "b.nc")
    message = str(info.value)
    assert "\n" not in message
    assert "a.nc has 16, 20 kHz and b.nc has 31.5 kHz" in message


# --------------------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------------------


def read_png(path):
    from matplotlib.image import imread

    return imread(path)[..., :3]


def assert_not_blank(path):
    image = read_png(path)
    assert image.shape[0] > 300 and image.shape[1] > 300
    # A blank canvas has zero variance; drawn curves, labels and markers do not.
    assert float(image.std()) > 0.05
    assert len(np.unique((image * 255).astype(np.uint8).reshape(-1, 3), axis=0)) > 20


def test_result_figure_draws_the_file_values():
    ds = synthetic(2.0, (16.0, 31.5))
    fig = result_figure(ds)
    axes = fig.axes
    assert len(axes) == 4  # one (amplitude, phase) pair per path and frequency
    r = ds["range"].values
    for k in range(2):
        ax_a, ax_p = axes[2 * k], axes[2 * k + 1]
        x, y = ax_a.lines[0].get_data()
        assert np.array_equal(x, r[1:]) and np.array_equal(y, ds["ez_amplitude"].values[0, k, 1:])
        x, y = ax_p.lines[0].get_data()
        expected = relative_phase_deg(ds["ez_phase"].values[0, k, 1:], r[1:], ds["frequency"].values[k])
        # wrapped to (-180, 180], with NaN breaks where it wraps (no vertical lines across the panel)
        drawn = np.isfinite(y)
        assert np.array_equal(x[drawn], r[1:])
        assert np.allclose(np.exp(1j * np.radians(y[drawn])), np.exp(1j * np.radians(expected)))
        assert y[drawn].min() > -180.0 and y[drawn].max() <= 180.0
        assert ax_p.get_ylim() == (-180.0, 180.0)
        assert "dB re 1 uV/m" in ax_a.get_ylabel() and "(km)" in ax_p.get_xlabel()
        assert "(deg)" in ax_p.get_ylabel()
        assert f"{ds['frequency'].values[k]:g} kHz" in ax_a.get_title()
        names = [t.get_text() for t in ax_a.texts]
        assert names == ["Site North", "Site | Mid", "Site South"]


def test_plot_png_and_pdf_are_written(tmp_path):
    ds = synthetic(2.0, (16.0,))
    png = plot_result(ds, tmp_path / "plot.png", dpi=60)
    assert_not_blank(png)
    pdf = plot_result(ds, tmp_path / "plot.pdf")
    assert pdf.read_bytes()[:5] == b"%PDF-" and pdf.stat().st_size > 5000
    assert not list(tmp_path.glob(".plot*"))  # no temporary file left
    with pytest.raises(CavityError, match="write .png or .pdf"):
        plot_result(ds, tmp_path / "plot.jpg")
    with pytest.raises(CavityError, match="does not exist"):
        plot_result(ds, tmp_path / "missing" / "plot.png")


def test_comparison_figure(tmp_path):
    day = synthetic(2.5, (20.0,))
    night = synthetic(1.0, (20.0,), ionosphere='preset = "night"', e0_db=83.0)
    out = plot_comparison(day, night, tmp_path / "cmp.png", "day", "night", dpi=60)
    assert_not_blank(out)
    fig = comparison_figure(day, night, "day", "night")
    labels = [line.get_label() for line in fig.axes[0].lines]
    assert "day" in labels and "night" in labels


def with_null(ds, at_km, depth_db, width_km=15.0):
    """A copy of a result with a Gaussian dip cut into its field curves (a synthetic modal null)."""
    out = ds.copy(deep=True)
    r = out["range"].values
    out["ez_amplitude"].values[...] -= depth_db * np.exp(-0.5 * ((r - at_km) / width_km) ** 2)
    return out


def test_comparison_title_names_station_frequency_and_power():
    day = synthetic(2.5, (20.0,))
    night = synthetic(1.0, (20.0,), ionosphere='preset = "night"', e0_db=83.0)
    doc = tomllib.loads(str(day.attrs["scenario"]))
    title = comparison_figure(day, night, "day", "night")._suptitle.get_text()
    assert doc["transmitter"]["name"] in title and "20 kHz" in title
    assert f"{doc['transmitter']['radiated_power_kw']:g} kW" in title and "day and night" in title


def test_comparison_keeps_a_night_null_in_view_and_marks_a_deeper_one():
    day = synthetic(2.5, (20.0,))
    night = with_null(synthetic(1.0, (20.0,), ionosphere='preset = "night"', e0_db=83.0), 1200.0, 35.0)
    ax = comparison_figure(day, night, "day", "night").axes[0]
    floor = ax.get_ylim()[0]
    r = night["range"].values
    far = r > near_field_km(20.0)
    assert floor <= night["ez_amplitude"].values[0, 0][far].min()  # the whole null is on the axes
    # a null deeper than the axis span is clipped at the floor and marked with its depth
    deep = with_null(night, 2000.0, 120.0)
    ax = comparison_figure(day, deep, "day", "night").axes[0]
    floor = ax.get_ylim()[0]
    assert floor > deep["ez_amplitude"].values[0, 0][far].min()
    marks = [line for line in ax.lines if line.get_marker() == "v"]
    assert marks and all(line.get_ydata()[0] == floor for line in marks)
    assert any(abs(line.get_xdata()[0] - 2000.0) <= 10.0 for line in marks)
    assert any(t.get_text().startswith("null ") for t in ax.texts)


def test_comparison_ground_strip_follows_the_ground_used():
    day = synthetic(2.5, (20.0,))
    night = synthetic(1.0, (20.0,), ionosphere='preset = "night"', e0_db=83.0)
    for ds in (day, night):  # land (1e-3 S/m, ITU-R P.527 medium dry ground) from 1000 to 2000 km
        r = ds["range"].values
        ds["ground_conductivity"].values[:, (r >= 1000) & (r < 2000)] = 1e-3
    from cavity.reports.plots import ground_classes_along

    cls = ground_classes_along(day)
    r = day["range"].values
    assert set(cls[(r >= 1000) & (r < 2000)]) == {"land"} and set(cls[r < 1000]) == {"sea"}
    strip = comparison_figure(day, night, "day", "night").axes[1]
    assert [t.get_text() for t in strip.get_yticklabels()] == ["ground"]  # shared by both runs: one strip
    legend = [t.get_text() for t in strip.get_legend().get_texts()]
    assert legend == ["sea", "land"]


def test_rough_fits_and_receivers_near_nulls_are_marked_on_their_rows():
    # A 6 dB ripple over a 700 km period leaves a residual above 2 dB: common practice reads such a
    # slope as modal interference, not the guide's attenuation.
    day = synthetic(2.5, (20.0,))
    night = with_null(synthetic(1.0, (20.0,), ionosphere='preset = "night"', e0_db=83.0, ripple_db=6.0), 1500.0, 25.0)
    fits = attenuation_rows([day, night], ["day", "night"])
    notes = {row["run"]: row["note"] for row in fits}
    assert notes["day"] == "" and notes["night"].startswith("rough slope")
    legend = [line.get_label() for line in comparison_figure(day, night, "day", "night", fits=fits).axes[0].lines]
    assert any(lbl.startswith("fit night") and "rough" in lbl for lbl in legend)
    assert any(lbl.startswith("fit day") and "rough" not in lbl for lbl in legend)
    rows = comparison_rows(day, night, "day", "night")
    marked = {row["receiver"]: row["note"] for row in rows}
    assert marked["Site | Mid"] == "near a night modal null"  # receiver at 1500 km, the null's centre
    assert marked["Site North"] == "" and marked["Site South"] == ""
    text = comparison_report(day, night, "day", "night")
    assert "near a night modal null" in text and "rough slope" in text


# --------------------------------------------------------------------------------------------------
# Golden result files: small solver runs (tests/data/golden_*.nc, made by tests/data/make_golden.py)
# --------------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def golden():
    return {name: open_result(path) for name, path in GOLDEN.items()}


@pytest.mark.parametrize("name, fmt", [("day", "markdown"), ("day", "csv"), ("dawn", "markdown"), ("night", "csv")])
def test_golden_table_text_is_unchanged(golden, name, fmt):
    suffix = "md" if fmt == "markdown" else "csv"
    expected = (DATA / f"golden_{name}_table.{suffix}").read_text(encoding="utf-8")
    kwargs = dict(required_db=30.0, noise_db=-10.0, bandwidth_hz=100.0) if name == "day" else {}
    assert receiver_table(golden[name], fmt, **kwargs) == expected


def test_table_says_what_the_uncertainty_leaves_out_with_the_field(golden):
    # Where the whistler rule set the vertical cell the companion is coarser in range only
    # (cavity.uncertainty.companion_settings) and the file names those paths; the note then says
    # that +- leaves out the vertical cell's error. A file without such paths has no such note.
    ds = golden["day"].copy()
    assert "receiver_ez_uncertainty" in ds
    ds.attrs["solver_range_only_companion"] = "none"
    assert "leaves out the error of the vertical cell" not in receiver_table(ds, "markdown")
    ds.attrs["solver_range_only_companion"] = str(ds["path_label"].values[0])
    assert "leaves out the error of the vertical cell" in receiver_table(ds, "markdown")


def test_golden_dawn_classifies_day_and_transition(golden):
    # Geometric solar zenith angles of the dawn file at its receivers (cavity.geo, Michalsky 1988):
    # two posts just below the horizon (transition), the southernmost in daylight.
    assert receiver_daylight(golden["dawn"]) == ["transition", "transition", "day"]


def test_golden_figures(golden, tmp_path):
    fig = result_figure(golden["day"])
    ds = golden["day"]
    pairs = ds.sizes["path"] * ds.sizes["frequency"]
    # amplitude and phase per (path, frequency); with the geomagnetic field a twin B axis on each
    twins = pairs if "b_radial_amplitude" in ds else 0
    assert len(fig.axes) == 2 * pairs + twins
    for n, ax in enumerate(fig.axes[: 2 * pairs : 2]):
        p, k = divmod(n, ds.sizes["frequency"])
        y = ax.lines[0].get_ydata()
        ref = ds["ez_amplitude"].values[p, k]
        assert np.array_equal(y, ref[np.isfinite(ref) & (ds["range"].values > 0)])
    assert_not_blank(plot_result(golden["night"], tmp_path / "night.png", dpi=60))
    assert_not_blank(plot_comparison(golden["day"], golden["night"], tmp_path / "cmp.png", "day", "night", dpi=60))


def test_golden_files_show_the_physics(golden):
    """The golden files (regenerated by tests/data/make_golden.py) against outside references."""
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    for name, ds in golden.items():
        # receiver ranges: WGS84 geodesic distances from the transmitter (pyproj, Karney 2013)
        doc = tomllib.loads(str(ds.attrs["scenario"]))
        tx = doc["transmitter"]
        for rx, r_km in zip(doc["receiver"], ds["receiver_range"].values):
            _, _, d = geod.inv(tx["longitude_deg"], tx["latitude_deg"], rx["longitude_deg"], rx["latitude_deg"])
            assert r_km == pytest.approx(d / 1e3, abs=0.01), (name, rx["name"])
        # electron density along the path: the Wait-Spies exponential profile (Wait and Spies 1964,
        # NBS Tech. Note 300): Ne(z) = 1.43e13 exp(-0.15 h') exp((beta - 0.15)(z - h')) m^-3, z and h' in km
        z = ds["altitude"].values
        for p in range(ds.sizes["path"]):
            for k in (0, ds.sizes["range"] // 2):
                h, beta = float(ds["hprime"].values[p, k]), float(ds["beta"].values[p, k])
                expected = 1.43e13 * np.exp(-0.15 * h) * np.exp((beta - 0.15) * (z - h))
                got = ds["electron_density"].values[p, k]
                low = z <= 100.0  # the exponential form's validity range in altitude
                np.testing.assert_allclose(got[low], expected[low], rtol=1e-3, err_msg=f"{name} path {p}")
    # preset h' by day and by night: the day reflection height lies below the night one (Wait and
    # Spies 1964; the presets are 71.8 km by day and 85.1 km by night per README)
    assert float(golden["day"]["hprime"].max()) < float(golden["night"]["hprime"].min())


def test_golden_files_are_small_and_readable(golden):
    for name, path in GOLDEN.items():
        assert path.stat().st_size < 400_000
        assert golden[name].sizes["receiver"] == 3


def test_write_then_table_round_trip(tmp_path):
    ds = synthetic(2.0, (16.0, 31.5))
    path = write_result(ds, tmp_path / "r.nc")
    assert receiver_table(open_result(path), "csv") == receiver_table(ds, "csv")


# --------------------------------------------------------------------------------------------------
# The memo table: header line, bearing once per path, run labels, negative margins
# --------------------------------------------------------------------------------------------------


def test_markdown_table_opens_with_the_run_and_flags_short_margins():
    day = synthetic(2.0, (16.0,), bearings=[171.0, 171.0, 171.0])
    night = synthetic(1.0, (16.0,), ionosphere='preset = "night"', e0_db=60.0, bearings=[171.0, 171.0, 171.0])
    text = receiver_table([day, night], "markdown", required_db=40.0)
    head = text.split("\n| ")[0]
    # the header names transmitter, frequency, power and ionosphere as the embedded scenario gives them
    doc = tomllib.loads(str(day.attrs["scenario"]))
    for fragment in (
        doc["transmitter"]["name"],
        "16 kHz",
        f"{doc['transmitter']['radiated_power_kw']:g} kW",
        'preset "day"',
        'preset "night"',
        "time",
    ):
        assert fragment in head, fragment
    rows = parse_markdown(text)
    header, body = rows[0], rows[1:]
    assert header[0] == "Run" and {r[0] for r in body} == {"day", "night"}  # labels, not file names
    assert "Bearing (deg)" not in header and "range only" in head  # once, in the header
    margin = header.index("Margin over 40 dB (dB)")
    ez = header.index("Ez (dB re 1 uV/m)")
    for r in body:
        short = float(r[ez]) < 40.0
        assert r[margin].endswith("(short)") == short
    assert any(r[margin].endswith("(short)") for r in body)  # the night run falls short far out


def test_bearing_shown_once_per_path():
    ds = open_result(GOLDEN["dawn"])  # two paths: 171.0 deg and 173.7 deg
    rows = parse_markdown(receiver_table(ds, "markdown"))
    header, body = rows[0], rows[1:]
    col = header.index("Path bearing (deg)")
    shown = [r[col] for r in body if r[col]]
    bearings = sorted(float(b) for b in ds["path_bearing"].values)
    assert sorted(float(b) for b in shown) == pytest.approx(bearings, abs=0.05)
    # CSV keeps every receiver's own bearing on every row
    csv_rows = list(csv.DictReader(io.StringIO(receiver_table(ds, "csv"))))
    assert all(r["bearing_deg"] for r in csv_rows)


def test_uncertainty_column_in_markdown_and_csv():
    """issue 15: the receiver table shows receiver_ez_uncertainty as a +- column (empty where NaN)."""
    ds = synthetic(2.0, (16.0, 22.7))
    unc = np.array([[0.21, 0.35], [0.04, np.nan], [1.26, 2.0]])
    ds["receiver_ez_uncertainty"] = (("receiver", "frequency"), unc)
    rows = list(csv.DictReader(io.StringIO(receiver_table(ds, "csv"))))
    assert [r["ez_uncertainty_db"] for r in rows] == ["0.210", "0.350", "0.040", "", "1.260", "2.000"]
    table = parse_markdown(receiver_table(ds, "markdown"))
    header = table[0]
    col = header.index("+- (dB)")
    assert header[col - 1] == "Ez (dB re 1 uV/m)"
    assert [r[col] for r in table[1:]] == ["0.2", "0.3", "0.0", "", "1.3", "2.0"]
    assert "numerical uncertainty" in receiver_table(ds, "markdown")
    # without the variable (older files) the column is absent
    assert "+- (dB)" not in receiver_table(synthetic(2.0, (16.0,)), "markdown")
