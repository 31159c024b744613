"""Tests of ``cavity profile`` through click's CliRunner (sources of expected values named beside each)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import profiles
from cavity.cli import main

DATA = Path(__file__).parent / "data"


def run(*args):
    return CliRunner().invoke(main, ["profile", *map(str, args)])


def error_lines(result):
    return [line for line in result.stderr.splitlines() if line.startswith("Error")]


def table_row(output: str, first_cell: str) -> list[str]:
    for line in output.splitlines():
        cells = line.split()
        if cells and cells[0] == first_cell:
            return cells
    raise AssertionError(f"no row {first_cell!r} in:\n{output}")


def test_preset_day_prints_reflection_height_and_table():
    result = run("--preset", "day")
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "71.8" in out and "0.335" in out and "A03310" in out
    # Wait-Spies closed form with the published constant 2.506e5 /s: 71.8 + ln(2 pi 20e3/2.506e5)/0.335.
    expected_km = 71.8 + math.log(2 * math.pi * 20e3 / 2.506e5) / 0.335
    assert float(table_row(out, "20")[1]) == pytest.approx(expected_km, abs=0.01)
    # nu(70 km) = 5.0e6 /s (Wait and Spies 1964; docs/physics.md 9.1).
    row = table_row(out, "70")
    assert float(row[2]) == pytest.approx(5.0e6, rel=1e-3)
    # Ne(60 km) for h' = 71.8, beta = 0.335 from the Wait-Spies formula: 3.388e7 m^-3.
    assert float(table_row(out, "60")[1]) == pytest.approx(3.388e7, rel=1e-3)
    for height in ("60", "80", "90"):
        table_row(out, height)


def test_hprime_beta_and_repeated_options():
    result = run("--hprime", 74, "--beta", 0.3, "--frequency", 10, "--frequency", 39.88, "--at", 74)
    assert result.exit_code == 0, result.output
    # omega_r(h') = 2.506e5 /s (Wait and Spies 1964): f = 2.506e5/(2 pi) = 39.88 kHz reflects at h'.
    assert float(table_row(result.stdout, "39.88")[1]) == pytest.approx(74.0, abs=0.01)
    assert float(table_row(result.stdout, "74")[3]) == pytest.approx(2.506e5, rel=2e-4)
    assert float(table_row(result.stdout, "10")[1]) < 74.0


@pytest.mark.parametrize("name", sorted(profiles.PRESETS))
def test_every_preset_runs(name):
    result = run("--preset", name)
    assert result.exit_code == 0, result.output
    assert profiles.PRESETS[name].reference in result.stdout


def test_file_profile():
    result = run("--file", DATA / "profile_night_invented.csv", "--at", 65, "--at", 30, "--frequency", 1e6)
    assert result.exit_code == 0, result.output
    assert "6 levels" in result.stdout
    row = table_row(result.stdout, "65")
    # Log-linear interpolation of nu between 60 km (2.2e7) and 70 km (5.0e6): geometric mean.
    assert float(row[2]) == pytest.approx(math.sqrt(2.2e7 * 5.0e6), rel=1e-3)
    assert float(table_row(result.stdout, "30")[1]) == 0.0  # below the bottom level: no electrons
    assert "not reached" in result.stdout


@pytest.mark.parametrize(
    "args, code, fragment",
    [
        ([], 2, "no profile given"),
        (["--hprime", "74"], 2, "--beta is missing"),
        (["--beta", "0.3"], 2, "--hprime is missing"),
        (["--hprime", "74", "--beta", "0.3", "--preset", "day"], 2, "given together"),
        (["--preset", "day", "--file", "x.csv"], 2, "given together"),
        (["--hprime", "174", "--beta", "0.3"], 2, "--hprime"),
        (["--hprime", "74", "--beta", "-1"], 2, "--beta"),
        (["--preset", "nigth"], 2, "did you mean 'night'"),
        (["--preset", "day", "--frequency", "0"], 2, "--frequency"),
        (["--preset", "day", "--at", "-3"], 2, "--at"),
        (["--preset", "day", "-o", "plot.jpg"], 2, "allowed: .png, .pdf, .nc, .csv"),
        (["--file", "no-such-file.csv"], 1, "does not exist"),
        (["--file", str(DATA / "profile_unordered.csv")], 1, "line 5: altitude_km = 65"),
        (["--preset", "day", "-o", "no-such-folder/plot.png"], 1, "does not exist"),
    ],
)
def test_bad_arguments_give_one_line_errors(args, code, fragment):
    result = CliRunner().invoke(main, ["profile", *args])
    assert result.exit_code == code, result.output
    lines = error_lines(result)
    assert len(lines) == 1, result.stderr
    assert fragment in lines[0]
    assert "Traceback" not in result.output


def test_png_written_and_not_blank(tmp_path):
    from matplotlib.image import imread

    out = tmp_path / "night.png"
    result = run("--preset", "night", "--frequency", 10, "--frequency", 24, "-o", out)
    assert result.exit_code == 0, result.output
    assert f"wrote {out}" in result.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    image = imread(out)
    assert image.shape[0] > 300 and image.shape[1] > 400
    rgb = image[..., :3].reshape(-1, 3)
    # Not blank: many pixels differ from the background and both curve colours are present.
    background = np.median(rgb, axis=0)
    assert np.mean(np.any(np.abs(rgb - background) > 0.1, axis=1)) > 0.01
    blue_ish = (rgb[:, 2] > 0.55) & (rgb[:, 0] < 0.3)
    red_ish = (rgb[:, 0] > 0.7) & (rgb[:, 1] < 0.3) & (rgb[:, 2] < 0.3)
    assert blue_ish.sum() > 200 and red_ish.sum() > 200
    assert sorted(p.name for p in tmp_path.iterdir()) == ["night.png"]  # no temporary file left


def test_pdf_written(tmp_path):
    out = tmp_path / "day.pdf"
    result = run("--file", DATA / "profile_night_invented.csv", "-o", out)
    assert result.exit_code == 0, result.output
    assert out.read_bytes()[:5] == b"%PDF-"


def test_netcdf_written_and_read_back(tmp_path):
    out = tmp_path / "day.nc"
    result = run("--hprime", 74, "--beta", 0.3, "-o", out)
    assert result.exit_code == 0, result.output
    assert f"wrote {out}" in result.stderr
    back = profiles.read_profile(out)
    expected = profiles.wait_spies_profile(74.0, 0.3)
    np.testing.assert_allclose(back["electron_density"].values, expected["electron_density"].values, rtol=1e-12)
    np.testing.assert_allclose(back["collision_frequency"].values, expected["collision_frequency"].values, rtol=1e-12)
    import xarray as xr

    with xr.open_dataset(out) as ds:
        assert ds.attrs["Conventions"] == "CF-1.10"
        assert ds.attrs["hprime_km"] == 74.0 and ds["altitude"].attrs["units"] == "km"


def test_existing_output_needs_overwrite(tmp_path):
    out = tmp_path / "keep.nc"
    out.write_bytes(b"precious")
    result = run("--preset", "day", "-o", out)
    assert result.exit_code == 1
    assert "--overwrite" in error_lines(result)[0]
    assert out.read_bytes() == b"precious"
    result = run("--preset", "day", "-o", out, "--overwrite")
    assert result.exit_code == 0, result.output
    assert profiles.read_profile(out).attrs["source"] == "keep.nc"


def test_csv_output_round_trip(tmp_path):
    out = tmp_path / "copy.csv"
    result = run("--file", DATA / "profile_night_invented.csv", "-o", out)
    assert result.exit_code == 0, result.output
    back = profiles.read_profile(out)
    original = profiles.read_profile(DATA / "profile_night_invented.csv")
    np.testing.assert_allclose(back["electron_density"].values, original["electron_density"].values)


def test_help_has_example():
    result = CliRunner().invoke(main, ["profile", "--help"])
    assert result.exit_code == 0
    assert "Example" in result.output and "cavity profile --preset night" in result.output
    assert "profile" in CliRunner().invoke(main, ["--help"]).output


def test_profile_and_scenario_refuse_the_same_hprime_and_beta(tmp_path):
    # One source of the allowed ranges: what a scenario refuses, `cavity profile` refuses too.
    from cavity.errors import ScenarioError
    from cavity.scenario import BETA_RANGE_PER_KM, HPRIME_RANGE_KM, load_scenario

    text = (
        'title = "Invented range check"\n[transmitter]\nname = "T"\nfrequency_khz = 20.0\n'
        'radiated_power_kw = 1.0\n[[receiver]]\nname = "R"\nrange_km = 500.0\n'
        '[ionosphere]\nhprime_km = {h}\nbeta_per_km = {b}\n[ground]\nkind = "sea"\n'
    )
    for h, b, bad in ((45.0, 0.5, "--hprime"), (74.0, 1.8, "--beta")):
        with pytest.raises(ScenarioError):
            load_scenario(text.format(h=h, b=b))
        result = run("--hprime", h, "--beta", b)
        assert result.exit_code == 2 and bad in result.output
        low, high = HPRIME_RANGE_KM if bad == "--hprime" else BETA_RANGE_PER_KM
        assert f"{low}" in result.output and f"{high}" in result.output
    assert run("--hprime", HPRIME_RANGE_KM[1], "--beta", BETA_RANGE_PER_KM[1]).exit_code == 0
