"""Scenario loader: strict validation with one-line messages, SI values, round trip."""

from __future__ import annotations

import dataclasses
import math
from datetime import datetime, timezone
from importlib import resources
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from cavity.errors import ScenarioError
from cavity.ground import GROUND_CLASSES
from cavity.scenario import Ground, GroundSegment, Ionosphere, Receiver, Scenario, Solver, load_scenario

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"

SECTIONS = {
    "top": 'title = "Test scenario"',
    "transmitter": """
        [transmitter]
        name = "Tx"
        latitude_deg = 50.0
        longitude_deg = 0.0
        frequency_khz = 20.0
        radiated_power_kw = 100.0
    """,
    "receivers": """
        [[receiver]]
        name = "A"
        range_km = 500.0

        [[receiver]]
        name = "B"
        range_km = 1000.0
    """,
    "ionosphere": """
        [ionosphere]
        hprime_km = 74.0
        beta_per_km = 0.3
    """,
    "ground": """
        [ground]
        kind = "sea"
    """,
    "solver": """
        [solver]
        cell_m = 500.0
    """,
}


def make(**overrides: str) -> str:
    """The base scenario as text with some sections replaced (an empty string drops a section)."""
    import textwrap

    parts = {**SECTIONS, **overrides}
    return "\n".join(textwrap.dedent(text).strip() + "\n" for text in parts.values() if text)


TX_NO_POSITION = """
    [transmitter]
    name = "Tx"
    frequency_khz = 20.0
    radiated_power_kw = 100.0
"""


def tx(**values: str) -> str:
    """A transmitter section with some keys replaced (value text as TOML; None drops the key)."""
    keys = {
        "name": '"Tx"',
        "latitude_deg": "50.0",
        "longitude_deg": "0.0",
        "frequency_khz": "20.0",
        "radiated_power_kw": "100.0",
        **values,
    }
    return "[transmitter]\n" + "\n".join(f"{k} = {v}" for k, v in keys.items() if v is not None)


def rx(*receivers: dict) -> str:
    return "\n".join("[[receiver]]\n" + "\n".join(f"{k} = {v}" for k, v in r.items()) for r in receivers)


POSITIONED = rx(
    {"name": '"A"', "latitude_deg": "50.0", "longitude_deg": "7.0"},
    {"name": '"B"', "latitude_deg": "45.0", "longitude_deg": "-10.0"},
)

# (id, scenario text, fragments that must all appear in the one-line message)
BAD = [
    ("freq-high", make(transmitter=tx(frequency_khz="75.0")), ["transmitter.frequency_khz", "75.0", "0.3-60 kHz"]),
    ("freq-low", make(transmitter=tx(frequency_khz="0.1")), ["transmitter.frequency_khz", "0.1", "0.3-60 kHz"]),
    (
        "freq-list-item",
        make(transmitter=tx(frequency_khz="[20.0, 61.0]")),
        ["transmitter.frequency_khz[2]", "61.0", "0.3-60 kHz"],
    ),
    ("freq-string", make(transmitter=tx(frequency_khz='"20"')), ["transmitter.frequency_khz", '"20"', "0.3-60 kHz"]),
    ("freq-bool", make(transmitter=tx(frequency_khz="true")), ["transmitter.frequency_khz", "true", "not true/false"]),
    ("freq-nan", make(transmitter=tx(frequency_khz="nan")), ["transmitter.frequency_khz", "nan", "finite"]),
    ("freq-empty-list", make(transmitter=tx(frequency_khz="[]")), ["transmitter.frequency_khz", "[]", "0.3-60 kHz"]),
    ("freq-missing", make(transmitter=tx(frequency_khz=None)), ["transmitter.frequency_khz", "missing", "0.3-60 kHz"]),
    (
        "power-zero",
        make(transmitter=tx(radiated_power_kw="0")),
        ["transmitter.radiated_power_kw", "= 0 ", "> 0 to 5000 kW"],
    ),
    (
        "power-high",
        make(transmitter=tx(radiated_power_kw="6000.0")),
        ["transmitter.radiated_power_kw", "6000.0", "5000 kW"],
    ),
    ("power-inf", make(transmitter=tx(radiated_power_kw="inf")), ["transmitter.radiated_power_kw", "inf", "finite"]),
    (
        "power-missing",
        make(transmitter=tx(radiated_power_kw=None)),
        ["transmitter.radiated_power_kw", "missing", "5000 kW"],
    ),
    ("lat-range", make(transmitter=tx(latitude_deg="95.0")), ["transmitter.latitude_deg", "95.0", "-90 to 90 deg"]),
    (
        "lon-range",
        make(transmitter=tx(longitude_deg="360.0")),
        ["transmitter.longitude_deg", "360.0", "-180 to < 360 deg"],
    ),
    ("lon-missing", make(transmitter=tx(longitude_deg=None)), ["transmitter.longitude_deg", "missing", "latitude_deg"]),
    (
        "tx-unknown-key",
        make(transmitter=tx(frequency_hz="20000.0")),
        ["transmitter.frequency_hz", "unknown", "'frequency_khz'"],
    ),
    ("tx-name-number", make(transmitter=tx(name="7")), ["transmitter.name", "= 7", "text"]),
    (
        "top-unknown",
        make(receivers=SECTIONS["receivers"].replace("[[receiver]]", "[[reciever]]")),
        ["reciever", "unknown", "'receiver'"],
    ),
    ("title-missing", make(top=""), ["title", "missing"]),
    ("title-number", make(top="title = 5"), ["title", "= 5", "text"]),
    (
        "rx-range-far",
        make(receivers=rx({"name": '"A"', "range_km": "20000.0"})),
        ["receiver[1].range_km", "20000.0", "1 to 15000 km"],
    ),
    (
        "rx-range-near",
        make(receivers=rx({"name": '"A"', "range_km": "1.0"}, {"name": '"B"', "range_km": "0.5"})),
        ["receiver[2].range_km", "0.5", "1 to 15000 km"],
    ),
    (
        "rx-range-bool",
        make(receivers=rx({"name": '"A"', "range_km": "false"})),
        ["receiver[1].range_km", "false", "not true/false"],
    ),
    (
        "rx-duplicate-name",
        make(receivers=rx({"name": '"A"', "range_km": "100.0"}, {"name": '"A"', "range_km": "200.0"})),
        ["receiver[2].name", '"A"', "receiver[1]"],
    ),
    (
        "rx-position-and-range",
        make(receivers=rx({"name": '"A"', "latitude_deg": "51.0", "longitude_deg": "1.0", "range_km": "100.0"})),
        ["receiver[1].range_km", "100.0", "either"],
    ),
    ("rx-no-location", make(receivers=rx({"name": '"A"'})), ["receiver[1]", "no location", "range_km"]),
    (
        "rx-at-transmitter",
        make(receivers=rx({"name": '"A"', "latitude_deg": "50.0", "longitude_deg": "0.001"})),
        ["receiver[1].latitude_deg = 50.0", "0.001", "at least 1 km"],
    ),
    (
        "rx-antipodal",
        make(receivers=rx({"name": '"A"', "latitude_deg": "-50.0", "longitude_deg": "180.0"})),
        ["receiver[1].latitude_deg = -50.0", "180.0", "antipode", "15000 km"],
    ),
    (
        "rx-unknown-key",
        make(receivers=rx({"name": '"A"', "range": "100.0"})),
        ["receiver[1].range", "unknown", "'range_km'"],
    ),
    ("rx-none", make(receivers=""), ["receiver", "missing", "[[receiver]]"]),
    ("rx-single-table", make(receivers='[receiver]\nname = "A"\nrange_km = 100.0'), ["receiver", "[[receiver]]"]),
    (
        "rx-position-no-tx-position",
        make(transmitter=TX_NO_POSITION, receivers=rx({"name": '"A"', "latitude_deg": "51.0", "longitude_deg": "1.0"})),
        ["transmitter.latitude_deg", "missing", "receiver[1]"],
    ),
    (
        "hprime-low",
        make(ionosphere="[ionosphere]\nhprime_km = 45.0\nbeta_per_km = 0.3"),
        ["ionosphere.hprime_km", "45.0", "50 to 100 km"],
    ),
    (
        "beta-high",
        make(ionosphere="[ionosphere]\nhprime_km = 74.0\nbeta_per_km = 2.0"),
        ["ionosphere.beta_per_km", "2.0", "0.1 to 1.5 per km"],
    ),
    (
        "beta-missing",
        make(ionosphere="[ionosphere]\nhprime_km = 74.0"),
        ["ionosphere.beta_per_km", "missing", "0.1 to 1.5"],
    ),
    (
        "two-forms",
        make(ionosphere='[ionosphere]\nhprime_km = 74.0\nbeta_per_km = 0.3\npreset = "day"'),
        ["ionosphere.preset", "hprime_km", "exactly one"],
    ),
    ("no-form", make(ionosphere="[ionosphere]"), ["[ionosphere]", "no form", "exactly one"]),
    ("no-ionosphere-section", make(ionosphere=""), ["[ionosphere]", "missing"]),
    ("preset-unknown", make(ionosphere='[ionosphere]\npreset = "dya"'), ["ionosphere.preset", '"dya"', "'day'"]),
    (
        "utc-no-offset",
        make(ionosphere="[ionosphere]\nutc = 2026-06-21T12:00:00"),
        ["ionosphere.utc", "2026-06-21T12:00:00", "offset"],
    ),
    ("utc-string", make(ionosphere='[ionosphere]\nutc = "noon"'), ["ionosphere.utc", '"noon"', "2026-06-21T12:00:00Z"]),
    (
        "utc-no-tx-position",
        make(transmitter=TX_NO_POSITION, ionosphere="[ionosphere]\nutc = 2026-06-21T12:00:00Z"),
        ["transmitter.latitude_deg", "missing", "utc"],
    ),
    (
        "night-preset-without-utc",
        make(ionosphere='[ionosphere]\npreset = "day"\nnight_preset = "night"'),
        ["ionosphere.night_preset", '"night"', "utc"],
    ),
    (
        "ceiling-low",
        make(ionosphere="[ionosphere]\nceiling_km = 10.0"),
        ["ionosphere.ceiling_km", "10.0", "20 to 200 km"],
    ),
    (
        "profile-file-missing",
        make(ionosphere='[ionosphere]\nprofile_file = "no_such_profile.csv"'),
        ["ionosphere.profile_file", '"no_such_profile.csv"', "existing file"],
    ),
    (
        "no-ionosphere-false",
        make(ionosphere="[ionosphere]\nno_ionosphere = false"),
        ["ionosphere.no_ionosphere", "false", "true"],
    ),
    (
        "ionosphere-unknown-key",
        make(ionosphere="[ionosphere]\nhprime = 74.0\nbeta_per_km = 0.3"),
        ["ionosphere.hprime", "unknown", "'hprime_km'"],
    ),
    ("ground-kind-typo", make(ground='[ground]\nkind = "seaa"'), ["ground.kind", '"seaa"', "'sea'"]),
    ("ground-kind-missing", make(ground="[ground]"), ["ground.kind", "missing"]),
    (
        "ground-custom-missing-sigma",
        make(ground='[ground]\nkind = "custom"\nrelative_permittivity = 10.0'),
        ["ground.conductivity_s_per_m", "missing", "S/m"],
    ),
    (
        "ground-custom-negative-sigma",
        make(ground='[ground]\nkind = "custom"\nconductivity_s_per_m = -1e-3\nrelative_permittivity = 10.0'),
        ["ground.conductivity_s_per_m", "-0.001", "1e-06 to 1000 S/m"],
    ),
    (
        "ground-sigma-with-named-kind",
        make(ground='[ground]\nkind = "sea"\nconductivity_s_per_m = 4.0'),
        ["ground.conductivity_s_per_m", "4.0", "custom"],
    ),
    (
        "ground-auto-range-receiver",
        make(ground='[ground]\nkind = "auto"'),
        ["receiver[1].range_km", "500.0", "no direction", "auto"],
    ),
    (
        "utc-range-receiver",
        make(ionosphere="[ionosphere]\nutc = 2026-06-21T12:00:00Z"),
        ["receiver[1].range_km", "500.0", "no direction", "utc"],
    ),
    (
        "ground-auto-no-tx-position",
        make(transmitter=TX_NO_POSITION, ground='[ground]\nkind = "auto"'),
        ["transmitter.latitude_deg", "missing", "auto"],
    ),
    (
        "segment-overlap",
        make(
            ground='[ground]\nkind = "sea"\n[[ground.segment]]\nfrom_km = 0.0\nto_km = 300.0\nkind = "land"\n[[ground.segment]]\nfrom_km = 250.0\nto_km = 400.0\nkind = "ice"'
        ),
        ["ground.segment[2].from_km", "250.0", "overlap"],
    ),
    (
        "segment-reversed",
        make(ground='[ground]\nkind = "sea"\n[[ground.segment]]\nfrom_km = 300.0\nto_km = 100.0\nkind = "land"'),
        ["ground.segment[1].to_km", "100.0", "greater than from_km = 300.0"],
    ),
    (
        "segment-kind-auto",
        make(ground='[ground]\nkind = "sea"\n[[ground.segment]]\nfrom_km = 0.0\nto_km = 100.0\nkind = "auto"'),
        ["ground.segment[1].kind", '"auto"', "ground class"],
    ),
    (
        "segment-unknown-key",
        make(ground='[ground]\nkind = "sea"\n[[ground.segment]]\nfrom_km = 0.0\nto = 100.0\nkind = "land"'),
        ["ground.segment[1].to", "unknown", "'to_km'"],
    ),
    (
        "segments-typo",
        make(ground='[ground]\nkind = "sea"\n[[ground.segments]]\nfrom_km = 0.0\nto_km = 100.0\nkind = "land"'),
        ["ground.segments", "unknown", "'segment'"],
    ),
    ("cell-small", make(solver="[solver]\ncell_m = 5.0"), ["solver.cell_m", "5.0", "10 to 5000 m"]),
    ("cell-word", make(solver='[solver]\ncell_m = "fine"'), ["solver.cell_m", '"fine"', '"auto"']),
    ("top-high", make(solver="[solver]\ntop_km = 1000.0"), ["solver.top_km", "1000.0", "60 to 600 km"]),
    (
        "top-with-ceiling",
        make(ionosphere="[ionosphere]\nceiling_km = 80.0", solver="[solver]\ntop_km = 100.0"),
        ["solver.top_km", "100.0", "ceiling"],
    ),
    ("pml-fraction", make(solver="[solver]\npml_cells = 20.5"), ["solver.pml_cells", "20.5", "integer", "5 to 100"]),
    ("pml-few", make(solver="[solver]\npml_cells = 3"), ["solver.pml_cells", "= 3", "5 to 100 cells"]),
    (
        "cpw-low",
        make(solver="[solver]\ncells_per_wavelength = 4.0"),
        ["solver.cells_per_wavelength", "4.0", "8 to 200"],
    ),
    (
        "curvature-string",
        make(solver='[solver]\nearth_curvature = "yes"'),
        ["solver.earth_curvature", '"yes"', "true or false"],
    ),
    (
        "max-range-short",
        make(solver="[solver]\nmax_range_km = 800.0"),
        ["solver.max_range_km", "800.0", "'B'", "1000.0 km"],
    ),
    (
        "solver-unknown",
        make(solver="[solver]\ncells_per_wavelenght = 30.0"),
        ["solver.cells_per_wavelenght", "unknown", "'cells_per_wavelength'"],
    ),
    ("solver-not-table", make(top='title = "Test scenario"\nsolver = 3', solver=""), ["solver", "= 3", "table"]),
    ("malformed-toml", 'title = "x"\n[transmitter]\nname = \n', ["invalid TOML", "line 3"]),
]


@pytest.mark.parametrize("text, fragments", [pytest.param(t, f, id=i) for i, t, f in BAD])
def test_bad_scenario_one_line_message(text, fragments, write_scenario):
    path = write_scenario(text, "bad.toml")
    with pytest.raises(ScenarioError) as info:
        load_scenario(path)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith("bad.toml: ")
    for fragment in fragments:
        assert fragment in message, (fragment, message)


def test_bad_cases_are_distinct():
    assert len({text for _, text, _ in BAD}) == len(BAD) >= 25


def test_base_scenario_is_good(write_scenario):
    s = load_scenario(write_scenario(make()))
    assert s.title == "Test scenario"


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(ScenarioError, match=r"^scenario file .*nope\.toml' not found$"):
        load_scenario(tmp_path / "nope.toml")
    with pytest.raises(ScenarioError, match="is a folder"):
        load_scenario(tmp_path)


def test_not_utf8(tmp_path):
    path = tmp_path / "latin.toml"
    path.write_bytes(b'title = "caf\xe9"\n')
    with pytest.raises(ScenarioError, match="latin.toml: not UTF-8"):
        load_scenario(path)


def test_text_errors_have_no_file_prefix():
    with pytest.raises(ScenarioError) as info:
        load_scenario(make(transmitter=tx(frequency_khz="75.0")))
    assert str(info.value).startswith("transmitter.frequency_khz = 75.0 ")


def test_good_values_in_si(write_scenario):
    text = make(
        transmitter=tx(frequency_khz="[31.5, 16.0, 27.6, 16.0]", radiated_power_kw="250"),
        receivers=POSITIONED,
        ionosphere='[ionosphere]\nutc = 2026-06-21T14:00:00+02:00\nnight_preset = "textbook-night"',
        ground='[ground]\nkind = "custom"\nconductivity_s_per_m = 3e-3\nrelative_permittivity = 15\n'
        '[[ground.segment]]\nfrom_km = 0\nto_km = 40.5\nkind = "sea"\n'
        "[[ground.segment]]\nfrom_km = 100\nto_km = 200\nconductivity_s_per_m = 1e-4\nrelative_permittivity = 3.0",
        solver="[solver]\nmax_range_km = 1600\ncell_m = 250\ntop_km = 150\nearth_curvature = false\npml_cells = 30\n"
        "cells_per_wavelength = 40\nreceiver_time_series = true",
    )
    s = load_scenario(write_scenario(text))
    assert s.transmitter.frequencies_hz == (16000.0, 27600.0, 31500.0)
    assert s.transmitter.radiated_power_w == 250e3
    assert s.receivers[1] == Receiver("B", 45.0, -10.0, None)
    assert s.ionosphere.form == "utc"
    assert s.ionosphere.utc == datetime(2026, 6, 21, 12, 0, tzinfo=timezone.utc)
    assert s.ionosphere.utc.tzinfo == timezone.utc
    assert (s.ionosphere.day_preset, s.ionosphere.night_preset) == ("day", "textbook-night")
    assert s.ground == Ground(
        "custom",
        3e-3,
        15.0,
        (GroundSegment(0.0, 40.5e3, "sea", 5.0, 70.0), GroundSegment(100e3, 200e3, "custom", 1e-4, 3.0)),
    )
    assert s.solver == Solver(1600e3, 250.0, 150e3, False, 30, 40.0, True)
    assert isinstance(s.solver.cell_m, float) and isinstance(s.solver.pml_cells, int)


@pytest.mark.parametrize("kind", sorted(GROUND_CLASSES) + ["auto"])
def test_named_ground_kinds(kind, write_scenario):
    s = load_scenario(write_scenario(make(ground=f'[ground]\nkind = "{kind}"', receivers=POSITIONED)))
    if kind == "auto":
        assert s.ground.conductivity_s_per_m is None and s.ground.relative_permittivity is None
    else:
        cls = GROUND_CLASSES[kind]
        assert s.ground.conductivity_s_per_m == cls.conductivity_s_per_m
        assert s.ground.relative_permittivity == cls.relative_permittivity
    if kind == "perfect":
        assert s.ground.conductivity_s_per_m == math.inf


def test_ionosphere_forms_and_top(write_scenario, tmp_path):
    (tmp_path / "profiles").mkdir()
    (tmp_path / "profiles" / "night.csv").write_text("altitude_km,electron_density_m3\n60,1e6\n")
    cases = {
        "[ionosphere]\nhprime_km = 74\nbeta_per_km = 0.3": (
            Ionosphere("exponential", hprime_km=74.0, beta_per_km=0.3),
            120e3,
        ),
        '[ionosphere]\npreset = "night"': (Ionosphere("preset", preset="night"), 120e3),
        "[ionosphere]\nceiling_km = 70": (Ionosphere("ceiling", ceiling_m=70e3), 70e3),
        "[ionosphere]\nno_ionosphere = true": (Ionosphere("none"), 400e3),
        '[ionosphere]\nprofile_file = "profiles/night.csv"': (
            Ionosphere("file", profile_path=str((tmp_path / "profiles" / "night.csv").resolve())),
            120e3,
        ),
    }
    for section, (expected, top_m) in cases.items():
        s = load_scenario(write_scenario(make(ionosphere=section, solver="")))
        assert s.ionosphere == expected
        assert s.planned_top_m() == top_m
    s = load_scenario(write_scenario(make(solver="[solver]\ntop_km = 200")))
    assert s.planned_top_m() == 200e3


def test_cell_auto_and_defaults(write_scenario):
    s = load_scenario(write_scenario(make(solver='[solver]\ncell_m = "auto"')))
    assert s.solver == Solver()
    assert s.solver.max_range_m is None


def test_receiver_geometry_against_spherical_formula(write_scenario):
    # Great-circle distance and initial bearing on a sphere of radius 6371 km (standard spherical
    # trigonometry); the WGS84 geodesic differs from it by well under 0.5 % and 0.5 deg here.
    s = load_scenario(EXAMPLES / "quillon_head.toml")
    lat1, lon1 = map(math.radians, (s.transmitter.latitude_deg, s.transmitter.longitude_deg))
    for rx_, geo in zip(s.receivers, s.receiver_geometry()):
        lat2, lon2 = map(math.radians, (rx_.latitude_deg, rx_.longitude_deg))
        dlon = lon2 - lon1
        central = math.acos(math.sin(lat1) * math.sin(lat2) + math.cos(lat1) * math.cos(lat2) * math.cos(dlon))
        bearing = (
            math.degrees(
                math.atan2(
                    math.sin(dlon) * math.cos(lat2),
                    math.cos(lat1) * math.sin(lat2) - math.sin(lat1) * math.cos(lat2) * math.cos(dlon),
                )
            )
            % 360
        )
        assert geo.range_m == pytest.approx(6371e3 * central, rel=5e-3)
        assert abs((geo.bearing_deg - bearing + 180) % 360 - 180) < 0.5


def test_examples_load_and_bundled_copy_is_identical():
    bundled = resources.files("cavity") / "data" / "quillon_head.toml"
    assert bundled.read_text(encoding="utf-8") == (EXAMPLES / "quillon_head.toml").read_text(encoding="utf-8")
    s = load_scenario(EXAMPLES / "quillon_head.toml")
    ranges_km = [g.range_m / 1e3 for g in s.receiver_geometry()]
    assert 400 < ranges_km[0] < 600 and 1300 < ranges_km[1] < 1700 and 2700 < ranges_km[2] < 3300
    assert all(10e3 <= f <= 30e3 for f in s.transmitter.frequencies_hz)
    for name, preset in (("uniform_day.toml", "day"), ("uniform_night.toml", "night")):
        u = load_scenario(EXAMPLES / name)
        assert u.ionosphere == Ionosphere("preset", preset=preset)
        assert u.ground.kind == "sea"
        assert all(r.range_m is not None and r.latitude_deg is None for r in u.receivers)


@pytest.mark.parametrize("name", ["quillon_head.toml", "uniform_day.toml", "uniform_night.toml"])
def test_round_trip_examples(name):
    s = load_scenario(EXAMPLES / name)
    again = load_scenario(s.to_toml())
    assert again == s
    assert again.path is None and s.path == str((EXAMPLES / name).resolve())


def test_round_trip_every_feature(write_scenario):
    text = make(
        transmitter=tx(frequency_khz="[16.0, 27.6, 31.5]", longitude_deg="359.5"),
        receivers=rx(
            {"name": '"Far \\"quoted\\" site"', "latitude_deg": "40.0", "longitude_deg": "20.0"},
            {"name": '"Marker"', "latitude_deg": "44.4", "longitude_deg": "10.1"},
        ),
        ionosphere='[ionosphere]\nutc = 2026-12-21T23:59:59.5Z\nday_preset = "day-2017"',
        ground='[ground]\nkind = "auto"\n[[ground.segment]]\nfrom_km = 0.1\nto_km = 33.3\nkind = "ice"\n'
        "[[ground.segment]]\nfrom_km = 33.3\nto_km = 99.9\nconductivity_s_per_m = 2e-5\nrelative_permittivity = 4.5",
        solver="[solver]\nmax_range_km = 2345.6\ncell_m = 333.3\ntop_km = 97.5\npml_cells = 12",
    )
    s = load_scenario(write_scenario(text))
    assert s.receivers[0].name == 'Far "quoted" site'
    assert load_scenario(s.to_toml()) == s


@settings(max_examples=40, deadline=None)
@given(name=st.text(min_size=1, max_size=20).filter(lambda t: t.strip()))
def test_round_trip_any_name(name):
    # TOML basic strings must escape quotes, backslashes and control characters (TOML 1.0 spec)
    s = load_scenario(make())
    renamed = s.replace(title=name, transmitter=dataclasses.replace(s.transmitter, name=name))
    assert renamed.title == name.strip() == renamed.transmitter.name
    assert load_scenario(renamed.to_toml()) == renamed


@settings(max_examples=60, deadline=None)
@given(
    freqs=st.lists(st.floats(0.3, 60.0), min_size=1, max_size=4),
    range_km=st.floats(1.0, 15000.0),
    hprime=st.floats(50.0, 100.0),
    power=st.floats(1e-3, 5000.0),
)
def test_round_trip_is_exact_for_any_values(freqs, range_km, hprime, power):
    text = make(
        transmitter=tx(frequency_khz=repr(freqs), radiated_power_kw=repr(power)),
        receivers=rx({"name": '"A"', "range_km": repr(range_km)}),
        ionosphere=f"[ionosphere]\nhprime_km = {hprime!r}\nbeta_per_km = 0.5",
        solver="",
    )
    s = load_scenario(text)
    assert load_scenario(s.to_toml()) == s


def test_replace_validates_and_regenerates_text(write_scenario):
    s = load_scenario(write_scenario(make()))
    t = s.replace(solver=Solver(cell_m=250.0))
    assert t.solver.cell_m == 250.0 and "cell_m = 250.0" in t.text
    assert t.path == s.path
    bad_tx = dataclasses.replace(s.transmitter, frequencies_hz=(100e3,))
    with pytest.raises(ScenarioError, match=r"transmitter.frequency_khz = 100.0 is outside the supported band"):
        s.replace(transmitter=bad_tx)
    with pytest.raises(ScenarioError, match=r"ground.conductivity_s_per_m = 1.0 differs from kind \"sea\""):
        s.replace(ground=Ground("sea", 1.0, 70.0))


def test_scenario_is_frozen(write_scenario):
    s = load_scenario(write_scenario(make()))
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.title = "changed"  # type: ignore[misc]
    assert isinstance(s, Scenario)
