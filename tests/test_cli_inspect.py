"""``cavity inspect``: prints the plan of a run; bad input gives one line and exit code 1."""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

import pytest
from click.testing import CliRunner
from pyproj import Geod

from cavity.cli import main
from cavity.paths import build_paths
from cavity.scenario import load_scenario
from cavity.solve import plan_path

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def run(*args):
    return CliRunner().invoke(main, ["inspect", *map(str, args)])


def test_bundled_example_prints_receivers_and_grid():
    with resources.as_file(resources.files("cavity") / "data" / "quillon_head.toml") as path:
        result = run(path)
    assert result.exit_code == 0, result.output
    out = result.stdout
    assert "Quillon Head" in out and "14.3 kHz" in out and "200 kW radiated" in out
    # ranges and bearings against pyproj's WGS84 geodesic (reference library)
    geod = Geod(ellps="WGS84")
    for name, lat, lon in (
        ("Ember Ridge", -16.46, 39.75),
        ("Saltreed Flats", -16.75, 30.5),
        ("Oryx Hollow", -19.9, 16.6),
    ):
        azimuth, _, distance = geod.inv(44.6, -16.35, lon, lat)
        row = next(line for line in out.splitlines() if line.strip().startswith(name))
        assert f"{distance / 1e3:.1f}" in row and f"{azimuth % 360:.1f}" in row
    assert "Paths        3, one per bearing" in out
    for word in ("dr_m", "dz_m", "dt_us", "nr x nz", "time_steps", "memory_GB"):
        assert word in out
    grid_rows = [line for line in out.splitlines() if re.match(r"\s+bearing [\d.]+ deg\s+\d+\s+\d+", line)]
    assert len(grid_rows) == 3
    assert "memory: fits" in out
    assert result.stderr == ""


def test_uniform_grid_is_the_engines_plan():
    result = run(EXAMPLES / "uniform_day.toml")
    assert result.exit_code == 0, result.output
    row = next(line for line in result.stdout.splitlines() if line.strip().startswith("uniform "))
    cells = row.split()
    scenario = load_scenario(EXAMPLES / "uniform_day.toml")
    (path,) = build_paths(scenario)
    plan = plan_path(scenario, path).grid
    assert cells[1] == "3200"  # solver.max_range_km
    assert cells[2] == f"{plan.dr_m:.0f}" and cells[3] == f"{plan.dz_m:.0f}"
    assert cells[4] == f"{plan.dt_s * 1e6:.3f}"
    assert cells[5:8] == [str(plan.nr), "x", str(plan.nz)]
    assert cells[9] == f"{plan.n_steps:,}"
    # the default cells per wavelength at 14.3 kHz: dr = c / f / 16 = 1310.3 m (16 with the fourth-order
    # stencil: README, "Accuracy in three kinds of guide")
    assert cells[2] == "1310"
    # Courant: dt must stay below the 2-D Cartesian limit of the (2,4) scheme, 6/7 of the Yee one,
    # dz / (c sqrt(1 + (dz/dr)^2)) (Taflove and Hagness 2005, ch. 4); the axis lowers it further
    assert plan.dt_s < (6 / 7) * plan.dz_m / (299_792_458.0 * (1 + (plan.dz_m / plan.dr_m) ** 2) ** 0.5)
    assert "Marker 3000" in result.stdout and "by range" in result.stdout


def test_ceiling_and_free_space_tops(write_scenario):
    base = """
        title = "t"
        [transmitter]
        name = "T"
        frequency_khz = 10.0
        radiated_power_kw = 1.0
        [[receiver]]
        name = "R"
        range_km = 300.0
        [ground]
        kind = "perfect"
    """
    out = run(write_scenario(base + "[ionosphere]\nceiling_km = 70.0\n")).stdout
    assert "top 70 km, perfectly conducting ceiling" in out
    out = run(write_scenario(base + "[ionosphere]\nno_ionosphere = true\n")).stdout
    assert "top 400 km, then a 20-cell absorber" in out


@pytest.mark.parametrize(
    "text, fragment",
    [
        (
            'title = "t"\n[transmitter]\nname = "T"\nfrequency_khz = 75.0\n',
            "transmitter.frequency_khz = 75.0 is outside the supported band 0.3-60 kHz",
        ),
        ('title = "t"\n[transmitter\n', "invalid TOML"),
    ],
)
def test_bad_scenario_one_line_exit_1(text, fragment, write_scenario):
    result = run(write_scenario(text, "bad.toml"))
    assert result.exit_code == 1
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: bad.toml: ") and fragment in lines[0]
    assert "Traceback" not in result.output


def test_missing_file_one_line(tmp_path):
    result = run(tmp_path / "absent.toml")
    assert result.exit_code == 1
    assert result.stderr.strip().splitlines() == [f"Error: scenario file '{tmp_path / 'absent.toml'}' not found"]


def test_help_has_example():
    result = CliRunner().invoke(main, ["inspect", "--help"])
    assert result.exit_code == 0 and "Example: cavity inspect examples/quillon_head.toml" in result.output


def test_inspect_estimates_the_run_time_from_the_cost_model():
    # The estimate is the cost model (grid.expected_cell_updates) over the reference engine rates
    # that `cavity bench` measured, and says so.
    from cavity import load_scenario
    from cavity.checks.bench import REFERENCE_ENGINE_RATES
    from cavity.cli.inspect import describe
    from cavity.paths import build_paths
    from cavity.solve import plan_path

    scenario = load_scenario(Path(__file__).resolve().parent.parent / "examples" / "uniform_night.toml")
    line = next(x for x in describe(scenario) if "run time" in x)
    assert "estimate" in line and "cavity bench" in line
    updates = sum(plan_path(scenario, p).grid.expected_cell_updates for p in build_paths(scenario))
    fast, slow = updates / max(REFERENCE_ENGINE_RATES), updates / min(REFERENCE_ENGINE_RATES)
    shown = [float(w) for w in line.replace("min", " min").split() if w.replace(".", "").isdigit()]
    assert shown[0] == pytest.approx(fast if fast < 120 else fast / 60, abs=0.6)
    assert shown[1] == pytest.approx(slow if slow < 120 else slow / 60, abs=0.6)
