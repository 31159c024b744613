"""``cavity table``, ``compare``, ``plot`` and ``demo`` through click's CliRunner.

The result files are the golden solver runs in tests/data (small; made by tests/data/make_golden.py); the demo is run
with those results in place of its two solves (fast), with a tiny real scenario, and in full only
under ``-m slow``.
"""

from __future__ import annotations

import contextlib
import csv
import io
import shutil
import sys
import tempfile
import types
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from cavity.cli import main
from cavity.results import open_result

DATA = Path(__file__).parent / "data"
DAY, NIGHT, DAWN = (DATA / f"golden_{n}.nc" for n in ("day", "night", "dawn"))
REPO = Path(__file__).resolve().parent.parent


def invoke(*argv, cwd: Path | None = None):
    runner = CliRunner()
    if cwd is None:
        return runner.invoke(main, [str(a) for a in argv], catch_exceptions=False)
    with contextlib.chdir(tempfile.mkdtemp(dir=cwd)):  # a fresh folder: relative outputs land there
        return runner.invoke(main, [str(a) for a in argv], catch_exceptions=False)


def one_line_error(result, *fragments, code=1) -> str:
    """Exit code, one stderr line starting 'Error:', no traceback; returns the line."""
    assert result.exit_code == code, (result.exit_code, result.output)
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, result.stderr
    assert lines[0].startswith("Error: "), lines[0]
    assert "Traceback" not in result.output
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])
    return lines[0]


def png_not_blank(path: Path):
    from matplotlib.image import imread

    image = imread(path)[..., :3]
    assert image.shape[0] > 300 and image.shape[1] > 300
    assert float(image.std()) > 0.05  # a blank canvas has zero variance


@pytest.fixture
def bad_files(tmp_path):
    """A missing file, a netCDF file from another program, and a corrupt one (a cut result file)."""
    import xarray as xr

    foreign = tmp_path / "foreign.nc"
    xr.Dataset({"salinity": ("x", np.arange(4.0))}, attrs={"source": "an ocean model"}).to_netcdf(foreign)
    corrupt = tmp_path / "corrupt.nc"
    corrupt.write_bytes(DAY.read_bytes()[:3000])
    return {
        "missing": (tmp_path / "absent.nc", ("absent.nc", "not found")),
        "not-a-result": (foreign, ("foreign.nc", "not a cavity result file", "an ocean model")),
        "corrupt": (corrupt, ("corrupt.nc", "not a cavity result file")),
    }


# --------------------------------------------------------------------------------------------------
# cavity table
# --------------------------------------------------------------------------------------------------


def test_table_markdown_equals_the_golden_text():
    result = invoke("table", DAY, "--required", 30, "--noise", -10, "--bandwidth", 100)
    assert result.exit_code == 0, result.output
    assert result.stdout == (DATA / "golden_day_table.md").read_text(encoding="utf-8")
    assert result.stderr == ""


def test_table_csv_file_parses_and_equals_the_result(tmp_path):
    out = tmp_path / "rx.csv"
    result = invoke("table", NIGHT, "--format", "csv", "-o", out)
    assert result.exit_code == 0, result.output
    assert result.stdout == "" and f"wrote {out}" in result.stderr
    rows = list(csv.DictReader(io.StringIO(out.read_text(encoding="utf-8"))))
    ds = open_result(NIGHT)
    names = [str(x) for x in ds["receiver_name"].values]
    freqs = ds["frequency"].values
    assert len(rows) == len(names) * freqs.size
    for n, row in enumerate(rows):
        i, k = divmod(n, freqs.size)
        assert row["receiver"] == names[i]
        assert float(row["frequency_khz"]) == pytest.approx(freqs[k], abs=5e-5)
        assert abs(float(row["ez_db_re_1uv_per_m"]) - ds["receiver_ez_amplitude"].values[i, k]) <= 5e-4
        # phase re c delay: the file's phase + 360 f d / c, wrapped by the complex exponential
        light = 360.0 * freqs[k] * 1e3 * ds["receiver_range"].values[i] * 1e3 / 299792458.0
        expected = np.degrees(np.angle(np.exp(1j * np.radians(ds["receiver_ez_phase"].values[i, k] + light))))
        gap = (float(row["ez_phase_re_c_delay_deg"]) - expected + 180.0) % 360.0 - 180.0
        assert abs(gap) <= 5e-3 and -180.0 < float(row["ez_phase_re_c_delay_deg"]) <= 180.0
        assert abs(float(row["b_db_re_1ft"]) - ds["receiver_b_amplitude"].values[i, k]) <= 5e-4
        assert abs(float(row["range_km"]) - ds["receiver_range"].values[i]) <= 5e-3
        assert abs(float(row["bearing_deg"]) - ds["receiver_bearing"].values[i]) <= 5e-3
        assert row["day_night"] == "night"


def test_table_of_two_runs_and_snr(tmp_path):
    result = invoke("table", DAY, NIGHT, "-f", "csv", "--noise", 0, "--bandwidth", 1000)
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(io.StringIO(result.stdout)))
    assert {r["run"] for r in rows} == {"day", "night"}  # from the files' preset ionospheres
    for row in rows:
        # SNR = field - (N0 + 10 log10 B): 30 dB of noise in 1 kHz for N0 = 0 dB per sqrt(Hz)
        assert float(row["snr_db"]) == pytest.approx(float(row["ez_db_re_1uv_per_m"]) - 30.0, abs=1e-3)


def test_table_help_defines_snr():
    result = invoke("table", "--help")
    text = " ".join(result.output.split())
    assert result.exit_code == 0
    assert "SNR = Ez - (N0 + 10 log10(B / 1 Hz))" in text
    assert "spectral density in dB re 1 uV/m per sqrt(Hz)" in text
    assert "Example" in text


@pytest.mark.parametrize(
    "argv, fragments",
    [
        (["--noise", "3"], ("--noise and --bandwidth",)),
        (["--bandwidth", "100"], ("--noise and --bandwidth",)),
        (["--noise", "3", "--bandwidth", "0"], ("--bandwidth",)),
        (["--required", "nan"], ("not a finite number",)),
        (["--format", "xml"], ("xml",)),
    ],
)
def test_table_bad_options_are_usage_errors(argv, fragments):
    result = invoke("table", DAY, *argv)
    assert result.exit_code == 2
    assert "Traceback" not in result.output
    assert all(f in result.stderr for f in fragments), result.stderr


@pytest.mark.parametrize("kind", ["missing", "not-a-result", "corrupt"])
def test_table_bad_result_files(bad_files, kind):
    path, fragments = bad_files[kind]
    one_line_error(invoke("table", path), *fragments)


def test_table_existing_output_refused(tmp_path):
    out = tmp_path / "t.md"
    out.write_text("keep me")
    one_line_error(invoke("table", DAY, "-o", out), "t.md", "exists", "--overwrite")
    assert out.read_text() == "keep me"
    assert invoke("table", DAY, "-o", out, "--overwrite").exit_code == 0
    text = out.read_text()
    freqs = ", ".join(f"{f:g}" for f in open_result(DAY)["frequency"].values)
    assert text.startswith(f"Merlin Knoll, {freqs} kHz, 80 kW radiated; ionosphere") and "\n| Receiver" in text


# --------------------------------------------------------------------------------------------------
# cavity compare
# --------------------------------------------------------------------------------------------------


def test_compare_writes_figure_and_prints_differences(tmp_path):
    fig = tmp_path / "cmp.png"
    md = tmp_path / "cmp.csv"
    result = invoke("compare", DAY, NIGHT, "-o", fig, "-t", md, "--fit-range", 100, 500)
    assert result.exit_code == 0, result.output
    png_not_blank(fig)
    assert f"wrote {fig}" in result.stderr and f"wrote {md}" in result.stderr
    assert "Differences at the receivers (night - day)" in result.stdout
    assert "dB per 1000 km" in result.stdout and "1/sqrt(a sin(d/a))" in result.stdout
    assert result.stdout.rstrip().splitlines()[-1].startswith("Cautions:")
    rows = list(csv.DictReader(io.StringIO(md.read_text())))
    day, night = open_result(DAY), open_result(NIGHT)
    assert len(rows) == 3 * 2
    for n, row in enumerate(rows):
        i, k = divmod(n, 2)
        diff = night["receiver_ez_amplitude"].values[i, k] - day["receiver_ez_amplitude"].values[i, k]
        assert abs(float(row["difference_db"]) - diff) <= 5e-4


def test_compare_fit_range_shown(tmp_path):
    result = invoke("compare", DAY, NIGHT, "-o", tmp_path / "c.pdf", "--fit-range", 150, 450)
    assert result.exit_code == 0, result.output
    assert (tmp_path / "c.pdf").read_bytes()[:5] == b"%PDF-"
    # the window actually fitted lies inside the one asked for
    table = [line for line in result.stdout.splitlines() if line.startswith(("| day ", "| night "))]
    assert table
    for line in table:
        cells = [c.strip() for c in line.strip("|").split("|")]
        assert 150 <= float(cells[4]) and float(cells[5]) <= 450


def test_compare_different_frequencies_names_both_sets(tmp_path):
    result = invoke("compare", DAWN, DAWN, "-o", tmp_path / "same.png")
    assert result.exit_code == 0, result.output  # same frequency: fine
    single = tmp_path / "f14.nc"
    from cavity.results import write_result

    write_result(open_result(DAY).isel(frequency=[1]), single)
    line = one_line_error(invoke("compare", DAWN, single, "-o", tmp_path / "c.png"))
    assert "golden_dawn has 10.5 kHz and f14 has 14.3 kHz" in line
    assert not (tmp_path / "c.png").exists()


@pytest.mark.parametrize(
    "argv, fragment",
    [
        (["--fit-range", "500", "100"], "START_KM < STOP_KM"),
        (["--fit-range", "-5", "100"], "START_KM < STOP_KM"),
        (["-o", "fig.jpg"], ".png or .pdf"),
    ],
)
def test_compare_bad_options(argv, fragment, tmp_path):
    result = invoke("compare", DAY, NIGHT, *argv, cwd=tmp_path)
    assert result.exit_code == 2 and fragment in result.stderr and "Traceback" not in result.output


def test_compare_fit_range_outside_the_data(tmp_path):
    one_line_error(
        invoke("compare", DAY, NIGHT, "-o", tmp_path / "c.png", "--fit-range", 1000, 3000),
        "fit range 1000-3000 km",
        "computed",
    )


@pytest.mark.parametrize("kind", ["missing", "not-a-result", "corrupt"])
def test_compare_bad_result_files(bad_files, kind, tmp_path):
    path, fragments = bad_files[kind]
    one_line_error(invoke("compare", DAY, path, "-o", tmp_path / "c.png"), *fragments)
    one_line_error(invoke("compare", path, DAY, "-o", tmp_path / "c.png"), *fragments)


# --------------------------------------------------------------------------------------------------
# cavity plot
# --------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["p.png", "p.pdf"])
def test_plot_writes_png_and_pdf(tmp_path, name):
    out = tmp_path / name
    result = invoke("plot", DAWN, "-o", out)
    assert result.exit_code == 0, result.output
    assert f"wrote {out}" in result.stdout
    if name.endswith(".png"):
        png_not_blank(out)
    else:
        assert out.read_bytes()[:5] == b"%PDF-"


def test_plot_unwrapped_phase(tmp_path):
    assert invoke("plot", DAY, "-o", tmp_path / "u.png", "--phase", "unwrapped").exit_code == 0
    png_not_blank(tmp_path / "u.png")


@pytest.mark.parametrize("kind", ["missing", "not-a-result", "corrupt"])
def test_plot_bad_result_files(bad_files, kind, tmp_path):
    path, fragments = bad_files[kind]
    one_line_error(invoke("plot", path, "-o", tmp_path / "p.png"), *fragments)
    assert not (tmp_path / "p.png").exists()


def test_plot_bad_suffix_is_a_usage_error(tmp_path):
    result = invoke("plot", DAY, "-o", tmp_path / "p.svg")
    assert result.exit_code == 2 and ".png or .pdf" in result.stderr


# --------------------------------------------------------------------------------------------------
# Sweep files go to cavity.reports.sweep
# --------------------------------------------------------------------------------------------------


@pytest.fixture
def sweep_file(monkeypatch):
    """Make open_result hand back a dataset with a time dimension (as a sweep file has)."""
    import cavity.results

    base = open_result(DAWN)
    times = np.array(["2026-03-20T05:00", "2026-03-20T06:00"], dtype="datetime64[ns]")
    # as a sweep file: the fields and the ionosphere vary with time, the geometry does not
    varying = [
        n
        for n, v in base.data_vars.items()
        if "frequency" in v.dims or n in ("solar_zenith_angle", "hprime", "beta", "electron_density")
    ]
    ds = base.copy()
    for name in varying:
        ds[name] = base[name].expand_dims(time=times)
    monkeypatch.setattr(cavity.results, "open_result", lambda path: ds)
    return ds


def test_sweep_files_dispatch_to_the_sweep_reports(sweep_file, monkeypatch, tmp_path):
    calls = []
    fake = types.ModuleType("cavity.reports.sweep")
    fake.table_diurnal = lambda ds: calls.append(("table", ds.sizes["time"])) or "diurnal table\n"

    def plot_diurnal(ds, output):
        calls.append(("plot", Path(output).name))
        Path(output).write_bytes(b"figure")

    fake.plot_diurnal = plot_diurnal
    monkeypatch.setitem(sys.modules, "cavity.reports.sweep", fake)
    result = invoke("table", "sweep.nc")
    assert result.exit_code == 0 and result.stdout == "diurnal table\n"
    result = invoke("plot", "sweep.nc", "-o", tmp_path / "d.png")
    assert result.exit_code == 0 and (tmp_path / "d.png").read_bytes() == b"figure"
    assert calls == [("table", 2), ("plot", "d.png")]
    result = invoke("table", "sweep.nc", "--required", "40")
    assert result.exit_code == 2 and "sweep file" in result.stderr


def test_sweep_files_with_the_real_sweep_reports(sweep_file, tmp_path):
    pytest.importorskip("cavity.reports.sweep")
    result = invoke("table", "sweep.nc", "-f", "csv")
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(io.StringIO(result.stdout)))
    assert len(rows) == sweep_file.sizes["receiver"] * sweep_file.sizes["frequency"]
    result = invoke("table", "sweep.nc")
    assert result.exit_code == 0 and result.stdout.rstrip().splitlines()[-1].startswith("Cautions:")
    result = invoke("plot", "sweep.nc", "-o", tmp_path / "d.png")
    assert result.exit_code == 0, result.output
    png_not_blank(tmp_path / "d.png")


def test_sweep_files_without_the_sweep_reports(sweep_file, monkeypatch, tmp_path):
    monkeypatch.setitem(sys.modules, "cavity.reports.sweep", None)  # import fails
    one_line_error(invoke("table", "sweep.nc"), "sweep file", "cavity.reports.sweep")
    one_line_error(invoke("plot", "sweep.nc", "-o", tmp_path / "d.png"), "sweep file", "cavity.reports.sweep")
    one_line_error(invoke("compare", "sweep.nc", "sweep.nc", "-o", tmp_path / "c.png"), "sweep file")


# --------------------------------------------------------------------------------------------------
# cavity demo
# --------------------------------------------------------------------------------------------------


def test_bundled_demo_scenarios_fit_the_budget():
    """One path per run, three receivers at about 500, 1,500 and 3,000 km, mixed ground, day and night."""
    from cavity.cli.demo import demo_scenarios
    from cavity.paths import build_paths

    scenarios = demo_scenarios()
    assert list(scenarios) == ["day", "night"]
    assert scenarios["day"].ionosphere.preset == "day" and scenarios["night"].ionosphere.preset == "night"
    for label, s in scenarios.items():
        assert s.ground.kind == "auto"
        paths = build_paths(s)
        assert len(paths) == 1, [p.label for p in paths]  # receivers within 1 deg of one bearing
        ranges = np.array(paths[0].receiver_ranges_m) / 1e3
        assert np.allclose(ranges, [500, 1500, 3000], atol=50), ranges
        kinds = set(paths[0].ground_kind.tolist())
        assert {"sea", "land"} <= kinds  # a mixed sea and land route
        assert "Invented" in s.title
        # the example files are the bundled ones
        example = (REPO / "examples" / f"demo_{label}.toml").read_text(encoding="utf-8")
        bundled = (REPO / "cavity" / "data" / f"demo_{label}.toml").read_text(encoding="utf-8")
        assert example == bundled
    assert scenarios["day"].receivers == scenarios["night"].receivers


def run_demo_with(monkeypatch, tmp_path, results, *extra):
    import cavity.cli.demo as demo

    monkeypatch.setattr(demo, "_simulate", lambda scenario, quiet, label: results[label])
    return invoke("demo", "-o", tmp_path / "out", *extra)


def test_demo_writes_every_file(monkeypatch, tmp_path):
    from cavity.cli.demo import DEMO_FILES

    results = {"day": open_result(DAY), "night": open_result(NIGHT)}
    result = run_demo_with(monkeypatch, tmp_path, results, "--quiet")
    assert result.exit_code == 0, result.output
    out = tmp_path / "out"
    assert sorted(p.name for p in out.iterdir()) == sorted(DEMO_FILES)
    printed = [line.removeprefix("wrote ") for line in result.stdout.splitlines()]
    assert sorted(Path(p).name for p in printed) == sorted(DEMO_FILES)
    for name in ("comparison.png", "plot_day.png", "plot_night.png", "map.png"):
        png_not_blank(out / name)
    rows = list(csv.DictReader(io.StringIO((out / "receivers.csv").read_text())))
    assert [r["run"] for r in rows] == ["day"] * 6 + ["night"] * 6
    day = open_result(out / "day.nc")
    for n, row in enumerate(rows[:6]):
        i, k = divmod(n, 2)
        assert abs(float(row["ez_db_re_1uv_per_m"]) - day["receiver_ez_amplitude"].values[i, k]) <= 5e-4
    md = (out / "receivers.md").read_text()
    assert md.startswith("**day**: ") and "\n| Run " in md and "Cautions:" in md
    assert "attenuation" in (out / "comparison.md").read_text().lower()
    # a second run refuses to replace them, before any solve
    monkeypatch.setattr("cavity.cli.demo.demo_scenarios", lambda: pytest.fail("solved before checking"))
    again = run_demo_with(monkeypatch, tmp_path, results, "--quiet")
    one_line_error(again, "day.nc", "exists", "--overwrite")


def test_demo_refuses_a_file_as_folder(tmp_path):
    (tmp_path / "out").write_text("x")
    one_line_error(invoke("demo", "-o", tmp_path / "out"))


TINY = """
# Invented tiny demo for tests: made-up names, short ranges, a coarse grid.
title = "Invented tiny demo ({label})"
[transmitter]
name = "Tiny Mast"
latitude_deg = 62.3
longitude_deg = 5.6
frequency_khz = 10.0
radiated_power_kw = 10.0
[[receiver]]
name = "Near Post"
latitude_deg = 62.0
longitude_deg = 5.67
[[receiver]]
name = "Far Post"
latitude_deg = 61.7
longitude_deg = 5.74
[ionosphere]
preset = "{label}"
[ground]
kind = "auto"
[solver]
cells_per_wavelength = 10.0
"""


def test_demo_with_a_tiny_real_scenario(monkeypatch, tmp_path):
    """The whole demo pipeline with the real solver, on a 70 km path instead of 3,000 km."""
    import cavity
    import cavity.cli.demo as demo

    tiny = {label: cavity.load_scenario(TINY.format(label=label)) for label in ("day", "night")}
    monkeypatch.setattr(demo, "demo_scenarios", lambda: tiny)
    result = invoke("demo", "-o", tmp_path / "tiny")
    assert result.exit_code == 0, result.output
    assert "wrote" in result.stdout and (tmp_path / "tiny" / "map.png").exists()
    day = open_result(tmp_path / "tiny" / "day.nc")
    assert [str(x) for x in day["receiver_name"].values] == ["Near Post", "Far Post"]
    # the progress bar and grid summary go to stderr, not into the list of files
    assert all(line.startswith("wrote ") for line in result.stdout.splitlines())


@pytest.mark.slow
def test_full_demo_in_minutes(tmp_path):
    """The real demo as the README runs it: every file, within the budget of minutes on two cores
    (2.5 min measured on a shared 2-core machine), and attenuation rates of a plausible size
    (VLF rates are a few dB per 1000 km by day and less by night over sea: from memory; the
    demo's route crosses land, so the band allowed is wide)."""
    import time

    from cavity.cli.demo import DEMO_FILES
    from cavity.reports.attenuation import attenuation_rows

    started = time.perf_counter()
    result = invoke("demo", "-o", tmp_path / "demo-output", "--quiet")
    elapsed = time.perf_counter() - started
    assert result.exit_code == 0, result.output
    assert sorted(p.name for p in (tmp_path / "demo-output").iterdir()) == sorted(DEMO_FILES)
    assert elapsed < 20 * 60, elapsed
    day = open_result(tmp_path / "demo-output" / "day.nc")
    night = open_result(tmp_path / "demo-output" / "night.nc")
    for ds in (day, night):
        assert np.all(np.isfinite(ds["receiver_ez_amplitude"].values))
    for row in attenuation_rows([day, night], ["day", "night"]):
        assert 0.0 < row["rate_db_per_1000km"] < 15.0, row
    for name in ("comparison.png", "plot_day.png", "map.png"):
        png_not_blank(tmp_path / "demo-output" / name)


# --------------------------------------------------------------------------------------------------
# examples/memo_report.py
# --------------------------------------------------------------------------------------------------


def load_memo_script():
    import importlib.util

    spec = importlib.util.spec_from_file_location("memo_report", REPO / "examples" / "memo_report.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_memo_report_from_day_and_night(tmp_path, capsys):
    memo = load_memo_script()
    day, night = tmp_path / "day.nc", tmp_path / "night.nc"
    shutil.copy(DAY, day)
    shutil.copy(NIGHT, night)
    out = tmp_path / "memo.md"
    assert memo.main([str(day), str(night), "-o", str(out), "--required", "40"]) == 0
    printed = capsys.readouterr().out.splitlines()
    names = sorted(Path(line.removeprefix("wrote ")).name for line in printed)
    assert names == ["memo.md", "memo_comparison.png", "memo_day.png", "memo_map.png", "memo_night.png"]
    text = out.read_text(encoding="utf-8")
    for heading in ("## Job", "## Scenario", "## Map", "## Field against range", "## Receiver table", "## Cautions"):
        assert heading in text
    for figure in ("memo_map.png", "memo_comparison.png", "memo_day.png"):
        assert f"]({figure})" in text
        png_not_blank(tmp_path / figure)
    assert "Margin over 40 dB (dB)" in text and "Predictions are planning estimates" in text
    # the receiver table in the memo carries the file's numbers
    ez = open_result(DAY)["receiver_ez_amplitude"].values
    table = text.split("## Receiver table", 1)[1]
    rows = [
        [c.strip() for c in line.strip().strip("|").split(" | ")]
        for line in table.splitlines()
        if line.startswith("| day ")
    ]
    assert len(rows) == ez.size
    header = next(line for line in table.splitlines() if line.startswith("| Run "))
    header = [c.strip() for c in header.strip().strip("|").split(" | ")]
    column, name, freq = (header.index(h) for h in ("Ez (dB re 1 uV/m)", "Receiver", "Frequency (kHz)"))
    ds = open_result(DAY)
    names = [str(x).replace("|", "\\|") for x in ds["receiver_name"].values]
    for row in rows:  # rows are grouped by path: look each up by receiver and frequency
        i = names.index(row[name])
        k = int(np.argmin(np.abs(ds["frequency"].values - float(row[freq]))))
        assert abs(float(row[column]) - ez[i, k]) <= 0.05
    # a second run refuses to replace the memo
    assert memo.main([str(day), "-o", str(out)]) == 1
    assert "exists already" in capsys.readouterr().err


def test_memo_report_bad_file(tmp_path, capsys):
    memo = load_memo_script()
    assert memo.main([str(tmp_path / "absent.nc"), "-o", str(tmp_path / "m.md")]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "not found" in err[0]
