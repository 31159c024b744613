"""Robustness through the real command line: bad input, unstable runs, memory, outputs, overwrites.

Every bad input of the catalogue goes through ``cavity`` itself (click's CliRunner, in-process) and
must end with exit code 1, exactly ONE line on stderr (click's ``Error: ...``) naming the key, the
value and the allowed range, no traceback, no "internal error", and no file written. The scenario
loader's own table of bad values lives in tests/test_scenario.py; the inputs here are different
ones (checked by :func:`test_catalogue_does_not_repeat_the_loader_table`), plus what only the CLI
sees: profile files read during a run, grids too large for memory, output folders, result files
handed to ``table``/``plot``/``compare`` (checked when those commands are registered).

Signals sent to a real process are in tests/test_signals.py.
"""

from __future__ import annotations

import dataclasses
import math
import os
import re
import signal
import sys
import textwrap
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from cavity.cli import COMMANDS, main

BAD_DATA = Path(__file__).resolve().parent / "data" / "bad"

# ----------------------------------------------------------------------------------------------
# A tiny valid scenario (one range-only receiver at 40 km, 1 km cells) and ways to spoil it
# ----------------------------------------------------------------------------------------------
BASE = {
    "top": 'title = "Robustness base (invented)"',
    "transmitter": "",  # filled by tx()
    "receivers": '[[receiver]]\nname = "Marker 40"\nrange_km = 40.0',
    "ionosphere": "[ionosphere]\nhprime_km = 74.0\nbeta_per_km = 0.3",
    "ground": '[ground]\nkind = "sea"',
    "solver": "[solver]\ncell_m = 1000.0\nmax_range_km = 50.0",
}


def tx(**values: str | None) -> str:
    """A [transmitter] table with some keys replaced (TOML value text; None drops the key)."""
    keys = {
        "name": '"Greyhaven Mast"',
        "latitude_deg": "50.0",
        "longitude_deg": "0.0",
        "frequency_khz": "20.0",
        "radiated_power_kw": "10.0",
        **values,
    }
    return "[transmitter]\n" + "\n".join(f"{k} = {v}" for k, v in keys.items() if v is not None)


def rx(**values: str | None) -> str:
    """One [[receiver]] table (TOML value text; None drops the key)."""
    keys = {"name": '"Kestrel"', **values}
    return "[[receiver]]\n" + "\n".join(f"{k} = {v}" for k, v in keys.items() if v is not None)


def scenario(**sections: str) -> str:
    """The base scenario as TOML text with some sections replaced (an empty string drops one)."""
    parts = {**BASE, "transmitter": tx(), **sections}
    return "\n\n".join(textwrap.dedent(t).strip() for t in parts.values() if t) + "\n"


def at_position(lat: str, lon: str) -> str:
    return rx(latitude_deg=lat, longitude_deg=lon)


def profile(name: str) -> str:
    """An [ionosphere] table reading one of the bad profile fixtures."""
    return f'[ionosphere]\nprofile_file = "{(BAD_DATA / name).as_posix()}"'


# ----------------------------------------------------------------------------------------------
# The catalogue
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Case:
    """One bad input: files to write, the command line, the fragments the one-line error must hold."""

    id: str
    category: str
    fragments: tuple[str, ...]
    text: str | bytes | None = None  # written to bad.toml when given
    argv: tuple[str, ...] = ("run", "bad.toml", "-o", "out.nc")
    setup: Callable[[Path], None] | None = None  # more files or folders in the working folder
    also_inspect: bool = True  # scenario problems: `cavity inspect bad.toml` must refuse them too
    extra: dict = field(default_factory=dict)


def _png_bytes() -> bytes:
    return b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(range(256))


CATALOGUE: list[Case] = [
    # --- malformed TOML and unreadable scenario files
    Case(
        "toml-unclosed-string", "malformed TOML", ("invalid TOML", "line 1"), 'title = "Greyhaven\n' + scenario(top="")
    ),
    Case(
        "toml-duplicate-key",
        "malformed TOML",
        ("invalid TOML", "line 9"),
        scenario(transmitter=tx() + "\nfrequency_khz = 30.0"),
    ),
    Case(
        "toml-duplicate-table",
        "malformed TOML",
        ("invalid TOML", "ground", "twice"),
        scenario() + '\n[ground]\nkind = "land"\n',
    ),
    Case(
        "toml-unclosed-array",
        "malformed TOML",
        ("invalid TOML",),
        scenario(transmitter=tx(frequency_khz="[16.0, 20.0")),
    ),
    Case("toml-png-as-scenario", "malformed TOML", ("bad.toml", "not UTF-8"), _png_bytes()),
    Case("toml-empty-file", "malformed TOML", ("bad.toml", "title is missing"), ""),
    Case(
        "scenario-is-a-folder",
        "scenario file",
        ("folder.toml", "is a folder"),
        None,
        ("inspect", "folder.toml"),
        setup=lambda d: (d / "folder.toml").mkdir(),
    ),
    Case(
        "scenario-not-utf8",
        "scenario file",
        ("bad.toml", "not UTF-8", "offset 12"),
        scenario(top="").replace("[transmitter]", 'title = "caf\u00e9"\n[transmitter]', 1).encode("latin-1"),
    ),
    Case(
        "scenario-missing",
        "scenario file",
        ("nowhere.toml", "not found"),
        None,
        ("run", "nowhere.toml", "-o", "out.nc"),
    ),
    # --- unknown or misspelt keys ("did you mean")
    Case(
        "key-power-in-watts",
        "unknown key",
        ("transmitter.radiated_power_w", "unknown key", "'radiated_power_kw'"),
        scenario(transmitter=tx(radiated_power_kw=None, radiated_power_w="1e4")),
    ),
    Case(
        "key-section-misspelt",
        "unknown key",
        ("ionosphre", "unknown key", "'ionosphere'"),
        scenario(ionosphere="[ionosphre]\nhprime_km = 74.0\nbeta_per_km = 0.3"),
    ),
    Case(
        "key-unit-left-off",
        "unknown key",
        ("receiver[1].latitude", "unknown key", "'latitude_deg'"),
        scenario(receivers=rx(latitude="51.0", longitude_deg="1.0")),
    ),
    Case(
        "key-solver-misspelt",
        "unknown key",
        ("solver.cellsize_m", "unknown key", "'cell_m'"),
        scenario(solver="[solver]\ncellsize_m = 500.0"),
    ),
    Case(
        "key-unplanned-section",
        "unknown key",
        ("antenna", "unknown key", "known keys"),
        scenario() + "\n[antenna]\nheight_m = 200.0\n",
    ),
    # --- wrong types
    Case(
        "type-power-with-unit-text",
        "wrong type",
        ("transmitter.radiated_power_kw", '"100 kW"', "must be a number", "> 0 to 5000 kW"),
        scenario(transmitter=tx(radiated_power_kw='"100 kW"')),
    ),
    Case(
        "type-latitude-array",
        "wrong type",
        ("transmitter.latitude_deg", "[50, 0]", "-90 to 90 deg"),
        scenario(transmitter=tx(latitude_deg="[50, 0]")),
    ),
    Case(
        "type-transmitter-text",
        "wrong type",
        ('transmitter = "Greyhaven"', "must be a table"),
        scenario(transmitter="", top='title = "x"\ntransmitter = "Greyhaven"'),
    ),
    Case(
        "type-transmitter-array-of-tables",
        "wrong type",
        ("transmitter", "must be a table"),
        scenario(transmitter=tx().replace("[transmitter]", "[[transmitter]]")),
    ),
    Case(
        "type-receivers-empty-list",
        "wrong type",
        ("receiver = []", "[[receiver]]"),
        scenario(receivers="", top='title = "x"\nreceiver = []'),
    ),
    Case(
        "type-pml-text",
        "wrong type",
        ("solver.pml_cells", '"20"', "integer", "5 to 100 cells"),
        scenario(solver='[solver]\npml_cells = "20"'),
    ),
    Case(
        "type-hprime-date",
        "wrong type",
        ("ionosphere.hprime_km", "1979-05-27", "50 to 100 km"),
        scenario(ionosphere="[ionosphere]\nhprime_km = 1979-05-27\nbeta_per_km = 0.3"),
    ),
    Case(
        "type-receiver-name-bool",
        "wrong type",
        ("receiver[1].name", "true", "text in quotes"),
        scenario(receivers=rx(name="true", range_km="40.0")),
    ),
    Case(
        "type-ground-kind-number",
        "wrong type",
        ("ground.kind", "= 5", "text in quotes"),
        scenario(ground="[ground]\nkind = 5"),
    ),
    Case(
        "type-curvature-integer",
        "wrong type",
        ("solver.earth_curvature", "= 1", "true or false"),
        scenario(solver="[solver]\nearth_curvature = 1"),
    ),
    Case(
        "type-utc-date-only",
        "wrong type",
        ("ionosphere.utc", "2026-06-21", "date and time with offset"),
        scenario(ionosphere="[ionosphere]\nutc = 2026-06-21", receivers=at_position("51.0", "1.0")),
    ),
    # --- NaN and infinity
    Case(
        "nan-latitude",
        "NaN or infinity",
        ("transmitter.latitude_deg", "nan", "finite", "-90 to 90 deg"),
        scenario(transmitter=tx(latitude_deg="nan")),
    ),
    Case(
        "inf-range",
        "NaN or infinity",
        ("receiver[1].range_km", "inf", "finite", "1 to 15000 km"),
        scenario(receivers=rx(range_km="inf")),
    ),
    Case(
        "minus-inf-frequency",
        "NaN or infinity",
        ("transmitter.frequency_khz", "-inf", "finite", "supported band 0.3-60 kHz"),
        scenario(transmitter=tx(frequency_khz="-inf")),
    ),
    Case(
        "nan-cell",
        "NaN or infinity",
        ("solver.cell_m", "nan", "finite", "10 to 5000 m"),
        scenario(solver="[solver]\ncell_m = nan"),
    ),
    Case(
        "minus-nan-hprime",
        "NaN or infinity",
        ("ionosphere.hprime_km", "nan", "finite", "50 to 100 km"),
        scenario(ionosphere="[ionosphere]\nhprime_km = -nan\nbeta_per_km = 0.3"),
    ),
    Case(
        "inf-conductivity",
        "NaN or infinity",
        ("ground.conductivity_s_per_m", "inf", "finite", "1e-06 to 1000 S/m"),
        scenario(ground='[ground]\nkind = "custom"\nconductivity_s_per_m = inf\nrelative_permittivity = 10.0'),
    ),
    Case(
        "overflowing-exponent",
        "NaN or infinity",
        ("transmitter.radiated_power_kw", "inf", "finite"),
        scenario(transmitter=tx(radiated_power_kw="1e400")),
    ),
    # --- zero or negative power
    Case(
        "power-negative",
        "power",
        ("transmitter.radiated_power_kw", "-5.0", "> 0 to 5000 kW"),
        scenario(transmitter=tx(radiated_power_kw="-5.0")),
    ),
    Case(
        "power-zero-float",
        "power",
        ("transmitter.radiated_power_kw", "= 0.0", "> 0 to 5000 kW"),
        scenario(transmitter=tx(radiated_power_kw="0.0")),
    ),
    Case(
        "power-huge",
        "power",
        ("transmitter.radiated_power_kw", "1e+300", "> 0 to 5000 kW"),
        scenario(transmitter=tx(radiated_power_kw="1e300")),
    ),
    Case(
        "power-integer-beyond-float",
        "power",
        ("transmitter.radiated_power_kw", "1" + "0" * 400, "> 0 to 5000 kW"),
        scenario(transmitter=tx(radiated_power_kw="1" + "0" * 400)),
    ),
    # --- frequency outside the supported band
    Case(
        "frequency-zero",
        "frequency band",
        ("transmitter.frequency_khz", "= 0 ", "outside the supported band 0.3-60 kHz"),
        scenario(transmitter=tx(frequency_khz="0")),
    ),
    Case(
        "frequency-in-hz",
        "frequency band",
        ("transmitter.frequency_khz", "20000.0", "supported band 0.3-60 kHz"),
        scenario(transmitter=tx(frequency_khz="20000.0")),
    ),
    Case(
        "frequency-negative-in-list",
        "frequency band",
        ("transmitter.frequency_khz[1]", "-20.0", "supported band 0.3-60 kHz"),
        scenario(transmitter=tx(frequency_khz="[-20.0, 20.0]")),
    ),
    Case(
        "frequency-just-above",
        "frequency band",
        ("transmitter.frequency_khz", "60.0001", "supported band 0.3-60 kHz"),
        scenario(transmitter=tx(frequency_khz="60.0001")),
    ),
    # --- latitude and longitude out of range
    Case(
        "receiver-latitude-south",
        "latitude/longitude",
        ("receiver[1].latitude_deg", "-91.0", "-90 to 90 deg"),
        scenario(receivers=at_position("-91.0", "0.0")),
    ),
    Case(
        "receiver-longitude-west",
        "latitude/longitude",
        ("receiver[1].longitude_deg", "-181.0", "-180 to < 360 deg"),
        scenario(receivers=at_position("50.0", "-181.0")),
    ),
    Case(
        "transmitter-longitude-400",
        "latitude/longitude",
        ("transmitter.longitude_deg", "400.0", "-180 to < 360 deg"),
        scenario(transmitter=tx(longitude_deg="400.0")),
    ),
    # --- receiver at the transmitter or beyond the supported range
    Case(
        "receiver-on-transmitter",
        "receiver range",
        ("receiver[1].latitude_deg = 50.0", "0.000 km", "at least 1 km", "1 to 15000 km"),
        scenario(receivers=at_position("50.0", "0.0")),
    ),
    Case(
        "receiver-range-zero",
        "receiver range",
        ("receiver[1].range_km", "0.0", "1 to 15000 km"),
        scenario(receivers=rx(range_km="0.0")),
    ),
    Case(
        "receiver-range-just-beyond",
        "receiver range",
        ("receiver[1].range_km", "15000.1", "1 to 15000 km"),
        scenario(receivers=rx(range_km="15000.1")),
    ),
    Case(
        "max-range-beyond",
        "receiver range",
        ("solver.max_range_km", "15001.0", "1 to 15000 km"),
        scenario(solver="[solver]\nmax_range_km = 15001.0"),
    ),
    # --- antipodal or near-antipodal paths
    Case(
        "antipode-exact-equator",
        "antipodal path",
        ("receiver[1].latitude_deg = 0.0", "180.0", "antipode", "1 to 15000 km"),
        scenario(transmitter=tx(latitude_deg="0.0"), receivers=at_position("0.0", "180.0")),
    ),
    Case(
        "antipode-near",
        "antipodal path",
        ("receiver[1].latitude_deg = -49.9", "179.9", "antipode", "1 to 15000 km"),
        scenario(receivers=at_position("-49.9", "179.9")),
    ),
    Case(
        "beyond-15000-km",
        "antipodal path",
        ("receiver[1].latitude_deg = -60.0", "120.0", "antipode", "1 to 15000 km"),
        scenario(receivers=at_position("-60.0", "120.0")),
    ),
    # --- contradictory ionosphere forms
    Case(
        "ionosphere-ceiling-and-none",
        "contradictory ionosphere",
        ("ceiling_km", "no_ionosphere", "exactly one"),
        scenario(ionosphere="[ionosphere]\nceiling_km = 80.0\nno_ionosphere = true"),
    ),
    Case(
        "ionosphere-utc-and-preset",
        "contradictory ionosphere",
        ("preset", "utc", "exactly one"),
        scenario(
            ionosphere='[ionosphere]\nutc = 2026-06-21T12:00:00Z\npreset = "day"', receivers=at_position("51.0", "1.0")
        ),
    ),
    Case(
        "ionosphere-file-and-hprime",
        "contradictory ionosphere",
        ("hprime_km", "profile_file", "exactly one"),
        scenario(ionosphere=profile("profile_negative_density.csv") + "\nhprime_km = 74.0"),
    ),
    Case(
        "ionosphere-day-preset-without-utc",
        "contradictory ionosphere",
        ("ionosphere.day_preset", '"day"', "only used with utc"),
        scenario(ionosphere='[ionosphere]\nhprime_km = 74.0\nbeta_per_km = 0.3\nday_preset = "day"'),
    ),
    # --- user profile files (read when the run starts, before the grid is allocated)
    *[
        Case(
            f"profile-{name}",
            "user profile",
            fragments,
            scenario(ionosphere=profile(f"profile_{name}.csv")),
            also_inspect=False,
        )
        for name, fragments in [
            (
                "repeated_altitude",
                ("profile_repeated_altitude.csv", "line 5", "altitude_km = 70", "strictly increasing"),
            ),
            (
                "negative_density",
                ("profile_negative_density.csv", "line 4", "electron_density_m3 = -1e+07", "at least 0 m-3"),
            ),
            ("nan_density", ("profile_nan_density.csv", "line 4", "electron_density_m3 = nan", "at least 0 m-3")),
            ("zero_collisions", ("profile_zero_collisions.csv", "collision_frequency_s = 0", "above 0 s-1")),
            ("metres_as_km", ("profile_metres_as_km.csv", "altitude_km = 60000", "0 to 500 km")),
            ("missing_column", ("profile_missing_column.csv", "collision_frequency_s", "header")),
            ("two_levels", ("profile_two_levels.csv", "2 levels", "at least 3")),
            ("word", ("profile_word.csv", "electron_density_m3 = 'lots'", "not a number")),
            ("empty", ("profile_empty.csv", "is empty", "altitude_km,electron_density_m3,collision_frequency_s")),
        ]
    ],
    # --- grids too large for memory: refused with the estimate before anything is allocated
    Case(
        "grid-tiny-cells-long-range",
        "grid too large",
        ("10 m x 10 m", "needs about", "GB", "solver.cell_m >=", "solver.max_range_km"),
        scenario(receivers=rx(range_km="14000.0"), solver="[solver]\ncell_m = 10.0\nmax_range_km = 15000.0"),
        also_inspect=False,
    ),
    Case(
        "grid-fine-auto-cells",
        "grid too large",
        ("needs about", "GB", "solver.cell_m >="),
        scenario(
            transmitter=tx(frequency_khz="60.0"),
            receivers=rx(range_km="14000.0"),
            solver="[solver]\ncells_per_wavelength = 200.0\nmax_range_km = 15000.0",
        ),
        also_inspect=False,
    ),
    # --- output paths, refused before the run starts
    Case(
        "output-folder-missing",
        "output path",
        ("out.nc", "folder", "no_such_folder", "does not exist"),
        scenario(),
        ("run", "bad.toml", "-o", "no_such_folder/out.nc"),
        also_inspect=False,
    ),
    Case(
        "output-under-a-file",
        "output path",
        ("notes.txt", "is a file, not a folder"),
        scenario(),
        ("run", "bad.toml", "-o", "notes.txt/out.nc"),
        setup=lambda d: (d / "notes.txt").write_text("x"),
        also_inspect=False,
    ),
    Case(
        "output-exists",
        "output path",
        ("previous.nc", "already exists", "--overwrite"),
        scenario(),
        ("run", "bad.toml", "-o", "previous.nc"),
        setup=lambda d: (d / "previous.nc").write_bytes(b"precious"),
        also_inspect=False,
    ),
    Case(
        "output-folder-not-writable",
        "output path",
        ("not writable",),
        scenario(),
        ("run", "bad.toml", "-o", "{locked}/out.nc"),
        also_inspect=False,
        extra={"locked": True},
    ),
]


def _locked_folder(tmp_path: Path) -> Path:
    """A folder this process cannot write in: a read-only folder, or /sys when running as root."""
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    try:
        (locked / "probe").write_text("x")
    except OSError:
        return locked
    (locked / "probe").unlink()  # root writes anywhere: use a kernel folder nobody may create files in
    for candidate in (Path("/sys"), Path("/proc")):
        try:
            (candidate / "cavity-probe").write_text("x")
        except OSError:
            return candidate
    pytest.skip("no unwritable folder available to this user")


def invoke(argv, cwd: Path):
    """Run ``cavity ARGV`` in-process in ``cwd``; return the click Result."""
    old = Path.cwd()
    os.chdir(cwd)
    try:
        return CliRunner().invoke(main, list(argv), catch_exceptions=True)
    finally:
        os.chdir(old)


def assert_one_line_error(result, fragments=(), *, code=1):
    """Exit code, exactly one line on stderr starting 'Error: ', the fragments, and nothing alarming."""
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception)
    assert result.exit_code == code, (result.exit_code, result.stderr)
    lines = [line for line in result.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, result.stderr
    line = lines[0]
    assert line.startswith("Error: "), line
    assert "Traceback" not in result.output and "Traceback" not in result.stderr
    assert "internal error" not in line, line
    for fragment in fragments:
        assert fragment in line, (fragment, line)
    return line


def _files(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


@pytest.mark.parametrize("case", [pytest.param(c, id=c.id) for c in CATALOGUE])
def test_catalogue_through_cavity_run(case: Case, tmp_path):
    """`cavity run` refuses each bad input with one line and writes nothing."""
    argv = list(case.argv)
    if case.extra.get("locked"):
        locked = str(_locked_folder(tmp_path))
        argv = [a.replace("{locked}", locked) for a in argv]
    if case.text is not None:
        data = case.text if isinstance(case.text, bytes) else case.text.encode("utf-8")
        (tmp_path / "bad.toml").write_bytes(data)
    if case.setup:
        case.setup(tmp_path)
    before = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    started = time.perf_counter()
    result = invoke(argv, tmp_path)
    elapsed = time.perf_counter() - started
    assert_one_line_error(result, case.fragments)
    # nothing written, nothing half-written, nothing changed; refused quickly (before any stepping)
    after = {p: p.read_bytes() for p in tmp_path.rglob("*") if p.is_file()}
    assert after == before
    assert elapsed < 30.0, elapsed  # generous: the machine is shared; a run that started would take far longer


@pytest.mark.parametrize(
    "case", [pytest.param(c, id=c.id) for c in CATALOGUE if c.also_inspect and c.argv[1] == "bad.toml"]
)
def test_catalogue_through_cavity_inspect(case: Case, tmp_path):
    """`cavity inspect` refuses the same scenario problems with the same one line."""
    data = case.text if isinstance(case.text, bytes) else case.text.encode("utf-8")
    (tmp_path / "bad.toml").write_bytes(data)
    result = invoke(["inspect", "bad.toml"], tmp_path)
    assert_one_line_error(result, case.fragments)


def test_catalogue_size_and_distinct_inputs():
    """At least 40 distinct bad inputs in at least 14 categories."""
    keys = [repr(c.text) + repr(c.argv) + repr(sorted(c.extra)) + c.id * (c.setup is not None) for c in CATALOGUE]
    assert len(set(keys)) == len(CATALOGUE) >= 40
    assert len({c.category for c in CATALOGUE}) >= 14


def test_catalogue_does_not_repeat_the_loader_table():
    """No scenario text here is one of tests/test_scenario.py's bad inputs (those are tested there)."""
    import importlib.util

    spec = importlib.util.spec_from_file_location("_scenario_tests", Path(__file__).with_name("test_scenario.py"))
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    theirs = {text for _, text, _ in module.BAD}
    ours = {c.text for c in CATALOGUE if isinstance(c.text, str)}
    assert not (theirs & ours)


def test_grid_too_large_is_refused_before_allocation(tmp_path, monkeypatch):
    """The memory check runs on the plan: no field array is allocated and the process stays small."""
    import tracemalloc

    from cavity.fdtd import engine

    built = []
    monkeypatch.setattr(engine.Simulation, "_build", lambda self: built.append(True))
    (tmp_path / "bad.toml").write_text(
        scenario(receivers=rx(range_km="14000.0"), solver="[solver]\ncell_m = 10.0\nmax_range_km = 15000.0")
    )
    tracemalloc.start()
    try:
        result = invoke(["run", "bad.toml", "-o", "out.nc", "-q"], tmp_path)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    line = assert_one_line_error(result, ("needs about",))
    need_gb = float(re.search(r"needs about ([0-9.]+) GB", line).group(1))
    # 1500031 x 12020 cells of 64 bytes (cavity.fdtd.grid.BYTES_PER_CELL) + 64 MiB: about 1154 GB
    assert need_gb == pytest.approx((1500031 * 12020 * 64 + 64 * 1024**2) / 1e9, rel=1e-3)
    assert not built
    assert peak < 300e6, peak  # the 1 TB grid was never touched; path sampling and profiles only
    assert not (tmp_path / "out.nc").exists()


# ----------------------------------------------------------------------------------------------
# A run that goes numerically unstable
# ----------------------------------------------------------------------------------------------
def test_unstable_run_stops_naming_step_and_region(tmp_path, monkeypatch):
    """A time step 1.5 x the stability limit (docs/physics.md 2: the leapfrog scheme diverges above it)
    must be stopped by the engine's guard with the step and region, and no result file written."""
    import cavity.solve  # noqa: F401  (the module, for monkeypatching)

    module = sys.modules["cavity.solve"]
    original = module.engine_settings
    monkeypatch.setattr(
        module, "engine_settings", lambda *a, **k: dataclasses.replace(original(*a, **k), courant_safety=1.5)
    )
    (tmp_path / "tiny.toml").write_text(scenario())
    (tmp_path / "kept.nc").write_bytes(b"an earlier result")
    result = invoke(["run", "tiny.toml", "-o", "kept.nc", "--overwrite", "-q"], tmp_path)
    line = assert_one_line_error(result, ("solver became unstable at step", "no result written"))
    match = re.search(
        r"at step (\d+) \(t = [0-9.]+ ms\): \|Ez\| = \S+ V/m at r = [0-9.]+ km, z = [0-9.]+ km \(([a-z -]+)\)", line
    )
    assert match, line
    assert int(match.group(1)) > 0
    assert match.group(2) in {
        "ground",
        "ionosphere",
        "free space below the ionosphere",
        "top absorber",
        "far-end absorber",
    }
    assert (tmp_path / "kept.nc").read_bytes() == b"an earlier result"
    assert _files(tmp_path) == {"tiny.toml", "kept.nc"}


# ----------------------------------------------------------------------------------------------
# Result files given to table / plot / compare (checked for each command that is registered)
# ----------------------------------------------------------------------------------------------
def _write_result(path: Path, frequency_khz: float) -> Path:
    """A small valid result file: far-zone field of 10 kW over perfect ground (ITU-R P.368 calibration,
    E d = sqrt(90 P)), written by cavity.results.write_result. Not a simulation: only its form matters."""
    from cavity import load_scenario
    from cavity.constants import C0
    from cavity.results import SolverRecord, assemble_dataset, write_result

    s = load_scenario(scenario(transmitter=tx(frequency_khz=repr(frequency_khz))))
    r = np.linspace(1e3, 50e3, 50)
    f = np.array([frequency_khz * 1e3])
    z = np.linspace(0.0, 120e3, 13)
    ez = (math.sqrt(90.0 * 10e3) / r * np.exp(-2j * np.pi * f[:, None] * r / C0))[None]
    rx_ez = ez[0][:, [39]].T
    ne = np.broadcast_to(1e8 * np.exp(0.3 * (z / 1e3 - 74.0)), (1, r.size, z.size))
    nu = np.broadcast_to(1.816e11 * np.exp(-0.15 * z / 1e3), (1, r.size, z.size))
    ds = assemble_dataset(
        s,
        range_m=r,
        frequency_hz=f,
        altitude_m=z,
        path_labels=["uniform"],
        ez_v_per_m=ez,
        b_t=ez / C0,
        receiver_names=["Marker 40"],
        receiver_range_m=[40e3],
        receiver_ez_v_per_m=rx_ez,
        receiver_b_t=rx_ez / C0,
        electron_density_m3=ne,
        collision_frequency_s=nu,
        ground_conductivity_s_per_m=np.full((1, r.size), 5.0),
        solver=SolverRecord(
            cells=1000, time_steps=100, cell_r_m=1000.0, cell_z_m=500.0, time_step_s=1e-6, wall_time_s=0.1
        ),
    )
    return write_result(ds, path)


def _bad_results(folder: Path) -> dict[str, tuple[Path, tuple[str, ...]]]:
    """Files that are not usable result files, with the fragments their refusal must name."""
    import xarray as xr

    good = _write_result(folder / "good.nc", 20.0)
    out = {}
    p = folder / "text.nc"
    p.write_text("range_km,ez_db\n100,60\n")
    out["text-named-nc"] = (p, ("text.nc", "not a cavity result file"))
    p = folder / "truncated.nc"
    p.write_bytes(good.read_bytes()[:2000])
    out["truncated"] = (p, ("truncated.nc", "not a cavity result file"))
    p = folder / "empty.nc"
    p.write_bytes(b"")
    out["empty"] = (p, ("empty.nc", "not a cavity result file"))
    p = folder / "foreign.nc"
    xr.Dataset({"temperature": ("x", np.arange(3.0))}, attrs={"source": "a weather model"}).to_netcdf(p)
    out["foreign"] = (p, ("foreign.nc", "not a cavity result file", "a weather model"))
    p = folder / "stripped.nc"
    with xr.open_dataset(good) as ds:
        ds.load().drop_vars(["ez_amplitude", "ez_phase"]).to_netcdf(p)
    out["missing-variables"] = (p, ("stripped.nc", "missing variables", "ez_amplitude"))
    p = folder / "profile.nc"
    import profiles

    profiles.write_profile(profiles.wait_spies_profile(74.0, 0.3), p)
    out["a-profile-file"] = (p, ("profile.nc", "not a cavity result file"))
    out["missing"] = (folder / "absent.nc", ("absent.nc", "not found"))
    (folder / "adir.nc").mkdir()
    out["a-folder"] = (folder / "adir.nc", ("adir.nc", "folder"))
    return out


BAD_RESULT_IDS = [
    "text-named-nc",
    "truncated",
    "empty",
    "foreign",
    "missing-variables",
    "a-profile-file",
    "missing",
    "a-folder",
]


def _needs(command: str):
    if command not in COMMANDS:
        pytest.skip(f"cavity {command} is not registered yet")


def _argv(command: str, files: list[Path], out_dir: Path) -> list[str]:
    """The command line for a result-reading command; an output option only if the command has one."""
    from cavity.cli import LazyGroup

    cmd = LazyGroup().get_command(None, command)
    argv = [command, *map(str, files)]
    names = {opt for p in cmd.params for opt in getattr(p, "opts", [])}
    if "-o" in names or "--output" in names:
        suffix = ".png" if command in ("plot", "compare") else ".csv"
        argv += ["-o", str(out_dir / f"out{suffix}")]
    return argv


@pytest.mark.parametrize("kind", BAD_RESULT_IDS)
@pytest.mark.parametrize("command", ["table", "plot", "compare"])
def test_bad_result_files(command, kind, tmp_path):
    _needs(command)
    bad, fragments = _bad_results(tmp_path)[kind]
    good = tmp_path / "good.nc"
    orders = [[bad]] if command != "compare" else [[bad, good], [good, bad]]
    for files in orders:
        before = _files(tmp_path)
        result = invoke(_argv(command, files, tmp_path), tmp_path)
        if kind == "a-folder" and result.exit_code == 2:  # click's own path check: a usage error
            assert "Traceback" not in result.stderr
            assert result.stderr.strip().splitlines()[-1].startswith("Error: ") and "adir.nc" in result.stderr
        else:
            assert_one_line_error(result, fragments)
        assert _files(tmp_path) == before


def test_compare_two_frequencies(tmp_path):
    """Two results on different frequencies: refused with one line naming both, or compared with
    both frequencies labelled; never a traceback or a silent difference across frequencies."""
    _needs("compare")
    a = _write_result(tmp_path / "f20.nc", 20.0)
    b = _write_result(tmp_path / "f31.nc", 31.5)
    result = invoke(_argv("compare", [a, b], tmp_path), tmp_path)
    assert "Traceback" not in result.output + result.stderr
    if result.exit_code != 0:
        line = assert_one_line_error(result, ("frequenc",))
        assert "20" in line and "31.5" in line, line
    else:
        assert "20" in result.output and "31.5" in result.output


# ----------------------------------------------------------------------------------------------
# Overwriting needs --overwrite, and every command that writes files says so in --help
# ----------------------------------------------------------------------------------------------
_OUTPUT_PARAMS = {"output", "out", "output_dir", "folder", "outdir", "output_folder"}


def _writes_files(cmd) -> bool:
    return any(p.name in _OUTPUT_PARAMS or "-o" in getattr(p, "opts", []) for p in cmd.params)


@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_writing_commands_state_overwrite_in_help(name):
    from cavity.cli import LazyGroup

    cmd = LazyGroup().get_command(None, name)
    result = CliRunner().invoke(main, [name, "--help"])
    assert result.exit_code == 0, result.output
    if not _writes_files(cmd):
        pytest.skip(f"cavity {name} writes no files")
    text = " ".join(result.output.split())
    if "beside" in text:  # a command that never replaces a file writes beside it instead
        return
    assert any(p.name == "overwrite" for p in cmd.params), f"cavity {name} writes files but has no --overwrite"
    assert "--overwrite" in text and "exist" in text.lower(), text


@pytest.mark.parametrize(
    "argv, existing",
    [
        (["run", "good.toml", "-o", "previous.nc"], "previous.nc"),
        (["map", "good.toml", "-o", "previous.png"], "previous.png"),
        (["profile", "--preset", "day", "-o", "previous.csv"], "previous.csv"),
        (["table", "r.nc", "-o", "previous.csv"], "previous.csv"),
        (["plot", "r.nc", "-o", "previous.png"], "previous.png"),
        (["compare", "r.nc", "r.nc", "-o", "previous.png"], "previous.png"),
        (["sweep", "good.toml", "-o", "previous.nc"], "previous.nc"),
        (["demo", "-o", "memo"], "memo/day.nc"),  # refused before the solves start (they take minutes)
    ],
    ids=["run", "map", "profile", "table", "plot", "compare", "sweep", "demo"],
)
def test_existing_output_is_refused_and_untouched(argv, existing, tmp_path):
    _needs(argv[0])
    (tmp_path / "good.toml").write_text(scenario(receivers=at_position("50.3", "0.2")))  # about 36 km
    if "r.nc" in argv:
        _write_result(tmp_path / "r.nc", 20.0)
    target = tmp_path / existing
    target.parent.mkdir(exist_ok=True)
    target.write_bytes(b"precious earlier output")
    before = _files(tmp_path)
    result = invoke(argv, tmp_path)
    assert_one_line_error(result, (Path(existing).name, "exist", "--overwrite"))
    assert target.read_bytes() == b"precious earlier output"
    assert _files(tmp_path) == before


# ----------------------------------------------------------------------------------------------
# The error translation itself (cavity.cli.common.friendly_errors)
# ----------------------------------------------------------------------------------------------
def _wrapped(exc: BaseException):
    import click

    from cavity.cli.common import friendly_errors

    @click.command()
    @friendly_errors
    def cmd():
        raise exc

    return cmd


@pytest.mark.parametrize(
    "exc, code, fragments",
    [
        (__import__("cavity").errors.SolverError("first line\nsecond line"), 1, ("first line",)),
        (__import__("profiles").errors.ProfileError("p.csv line 3: bad"), 1, ("p.csv line 3: bad",)),
        (FileNotFoundError(2, "No such file or directory", "x.nc"), 1, ("No such file or directory", "x.nc")),
        (PermissionError(13, "Permission denied", "/root/x.nc"), 1, ("Permission denied", "/root/x.nc")),
        (MemoryError(), 1, ("out of memory", "solver.cell_m", "cavity inspect")),
        (KeyboardInterrupt(), 130, ("interrupted by SIGINT",)),
        (ValueError("unexpected\ndetail"), 1, ("internal error", "ValueError: unexpected", "CAVITY_TRACEBACK=1")),
    ],
    ids=["library-error", "profile-error", "missing-file", "permission", "memory", "ctrl-c", "bug"],
)
def test_friendly_errors_one_line(exc, code, fragments, monkeypatch):
    monkeypatch.delenv("CAVITY_TRACEBACK", raising=False)
    result = CliRunner().invoke(_wrapped(exc), [])
    assert result.exit_code == code, (result.exit_code, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: "), result.stderr
    assert "Traceback" not in result.stderr
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])


def test_internal_error_traceback_on_request(monkeypatch):
    monkeypatch.setenv("CAVITY_TRACEBACK", "1")
    result = CliRunner().invoke(_wrapped(ValueError("boom")), [])
    assert isinstance(result.exception, ValueError)


def test_sigterm_handler_is_installed_only_while_a_command_runs():
    """The handler turns SIGTERM into a clean exit during the command and is removed afterwards."""
    import click

    from cavity.cli.common import Interrupted, friendly_errors

    seen = []

    @click.command()
    @friendly_errors
    def cmd():
        seen.append(signal.getsignal(signal.SIGTERM))
        os.kill(os.getpid(), signal.SIGTERM)  # a real signal to this process
        time.sleep(5)  # interrupted at once by the handler
        seen.append("not interrupted")

    before = signal.getsignal(signal.SIGTERM)
    started = time.perf_counter()
    result = CliRunner().invoke(cmd, [])
    assert time.perf_counter() - started < 4
    assert result.exit_code == 143, result.stderr
    assert result.stderr.strip().splitlines() == [
        "Error: interrupted by SIGTERM; the command did not finish "
        "(files are written whole or not at all: nothing partial was left)"
    ]
    assert callable(seen[0]) and seen[0] is not before and len(seen) == 1
    assert signal.getsignal(signal.SIGTERM) is before
    assert issubclass(Interrupted, KeyboardInterrupt)


def test_signal_while_writing_leaves_the_old_file(tmp_path, monkeypatch):
    """SIGTERM arriving while the netCDF is half written: the temporary file is removed, the earlier
    result is intact, exit 143 with one line. The run itself is replaced by a ready dataset."""
    import xarray as xr

    import cavity.solve  # noqa: F401

    ready = xr.open_dataset(_write_result(tmp_path / "ready.nc", 20.0)).load()
    (tmp_path / "ready.nc").unlink()
    monkeypatch.setattr(sys.modules["cavity.solve"], "simulate", lambda scenario, progress=None: ready.copy())
    real_to_netcdf = xr.Dataset.to_netcdf

    def half_written(self, path, *args, **kwargs):
        real_to_netcdf(self, path, *args, **kwargs)
        with open(path, "r+b") as fh:  # leave it truncated, as if cut off mid-write
            fh.truncate(1000)
        assert signal.getsignal(signal.SIGTERM) not in (signal.SIG_DFL, None), "no handler: would kill pytest"
        os.kill(os.getpid(), signal.SIGTERM)
        time.sleep(5)

    monkeypatch.setattr(xr.Dataset, "to_netcdf", half_written)
    (tmp_path / "run.toml").write_text(scenario())
    (tmp_path / "result.nc").write_bytes(b"the earlier result")
    result = invoke(["run", "run.toml", "-o", "result.nc", "--overwrite", "-q"], tmp_path)
    assert result.exit_code == 143, result.stderr
    assert len(result.stderr.strip().splitlines()) == 1 and "SIGTERM" in result.stderr
    assert (tmp_path / "result.nc").read_bytes() == b"the earlier result"
    assert _files(tmp_path) == {"run.toml", "result.nc"}


# ----------------------------------------------------------------------------------------------
# Bad usage: click's own message (exit 2), never a traceback
# ----------------------------------------------------------------------------------------------
@pytest.mark.parametrize(
    "argv",
    [
        ["run", "bad.toml"],
        ["run", "bad.toml", "-o", "x.nc", "--overwrit"],
        ["inspect"],
        ["no-such-command"],
        ["map", "bad.toml", "-o", "map.jpg"],
        ["run", "folder.toml", "-o", "x.nc"],
        ["run", "bad.toml", "-o", "results.nc"],
    ],
    ids=[
        "run-without-output",
        "misspelt-option",
        "missing-argument",
        "unknown-command",
        "map-bad-suffix",
        "scenario-is-a-folder",
        "output-is-a-folder",
    ],
)
def test_bad_usage_exit_2(argv, tmp_path):
    """click checks usage and path kinds itself: usage, a hint and one 'Error:' line, exit 2."""
    (tmp_path / "bad.toml").write_text(scenario())
    (tmp_path / "folder.toml").mkdir()
    (tmp_path / "results.nc").mkdir()
    result = invoke(argv, tmp_path)
    assert result.exit_code == 2, (result.exit_code, result.stderr)
    assert "Traceback" not in result.stderr
    assert result.stderr.strip().splitlines()[-1].startswith("Error: ")


# ----------------------------------------------------------------------------------------------
# Extreme but valid inputs: accepted and planned, never an internal error
# ----------------------------------------------------------------------------------------------
EXTREME_VALID = {
    # top_km up to 600 is allowed while profiles end at 500 km (was refused from inside profiles)
    "top-600-km": scenario(solver="[solver]\ntop_km = 600.0"),
    "lowest-frequency-longest-range": scenario(
        transmitter=tx(frequency_khz="0.3"), receivers=rx(range_km="15000.0"), solver=""
    ),
    "transmitter-at-north-pole": scenario(
        transmitter=tx(latitude_deg="90.0"), receivers=at_position("80.0", "359.99"), solver=""
    ),
    "south-pole-with-sun": scenario(
        transmitter=tx(latitude_deg="-90.0", longitude_deg="-180.0"),
        receivers=at_position("-80.0", "0.0"),
        ionosphere="[ionosphere]\nutc = 2026-06-21T12:00:00Z",
        solver="",
    ),
    "across-the-date-line": scenario(
        transmitter=tx(latitude_deg="0.0", longitude_deg="179.99"), receivers=at_position("0.0", "-179.99"), solver=""
    ),
    "lowest-ceiling-coarsest-cell": scenario(
        ionosphere="[ionosphere]\nceiling_km = 20.0", solver="[solver]\ncell_m = 5000.0"
    ),
    "receiver-at-1-km-largest-cell": scenario(
        receivers=rx(range_km="1.0"), solver="[solver]\ncell_m = 5000.0\nmax_range_km = 1.0"
    ),
    "band-edges-and-duplicates": scenario(transmitter=tx(frequency_khz="[60.0, 0.3, 20.0, 20]"), solver=""),
    "user-profile-under-a-high-top": scenario(
        ionosphere=f'[ionosphere]\nprofile_file = "{(BAD_DATA.parent / "profile_night_invented.csv").as_posix()}"',
        solver="[solver]\ntop_km = 500.0",
    ),
}


@pytest.mark.parametrize("text", list(EXTREME_VALID.values()), ids=list(EXTREME_VALID))
def test_extreme_valid_inputs_are_planned(text, tmp_path):
    """`cavity inspect` plans each one (exit 0), with the engine's grid for every path."""
    (tmp_path / "edge.toml").write_text(text)
    result = invoke(["inspect", "edge.toml"], tmp_path)
    assert result.exit_code == 0, result.stderr
    assert "Traceback" not in result.output + result.stderr
    assert "memory:" in result.output


def test_extreme_user_profile_reaches_the_engine(tmp_path):
    """A top of 500 km over a user profile: the medium handed to the engine stops at 500 km (the
    profiles' range) instead of failing inside profiles."""
    from cavity import load_scenario
    from cavity.paths import build_paths
    from cavity.solve import path_medium

    s = load_scenario(EXTREME_VALID["user-profile-under-a-high-top"])
    medium = path_medium(s, build_paths(s)[0])
    assert medium.altitude_m[-1] == 500e3
    assert np.all(np.isfinite(medium.electron_density)) and np.all(medium.electron_density >= 0)
