"""Checks of cavity.reports.maps and ``cavity map``: offline rendering, day/night shading, errors."""

from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner

from cavity.errors import CavityError, ScenarioError
from cavity.paths import build_paths
from cavity.reports.maps import coastline_file, draw_map
from cavity.scenario import load_scenario


def scenario_text(utc="2026-06-21T12:00:00Z", *, ionosphere=None, positions=True):
    """An invented scenario: a mast at 50N 10W and two listening sites (made-up names)."""
    ion = ionosphere or f"utc = {utc}"
    tx = "latitude_deg = 50.0\nlongitude_deg = -10.0\n" if positions else ""
    rx1 = "latitude_deg = 44.0\nlongitude_deg = -2.0" if positions else "range_km = 900.0"
    rx2 = "latitude_deg = 58.0\nlongitude_deg = -20.0" if positions else "range_km = 1100.0"
    return (
        'title = "Invented map test"\n'
        f'[transmitter]\nname = "Test mast"\n{tx}frequency_khz = 20.0\nradiated_power_kw = 50.0\n'
        f'[[receiver]]\nname = "Site One"\n{rx1}\n'
        f'[[receiver]]\nname = "Site Two"\n{rx2}\n'
        f"[ionosphere]\n{ion}\n"
        '[ground]\nkind = "sea"\n'
    )


def render(tmp_path, text, name="map.png", **kwargs):
    s = load_scenario(text)
    out = tmp_path / name
    notes = draw_map(s, build_paths(s), out, dpi=60, **kwargs)
    return out, notes


def read_png(path):
    from matplotlib.image import imread

    return imread(path)[..., :3]


def test_map_renders_offline_non_blank_png(tmp_path, monkeypatch):
    # Offline: any attempt by cartopy to download (Natural Earth) fails loudly here.
    import cartopy.io

    def no_network(*args, **kwargs):
        raise AssertionError("the map tried to download data")

    monkeypatch.setattr(cartopy.io, "urlopen", no_network)
    out, notes = render(tmp_path, scenario_text())
    image = read_png(out)
    assert image.shape[0] > 300 and image.shape[1] > 300
    # A blank canvas has (near) zero variance; a drawn map with stock image, paths and labels does not.
    assert float(image.std()) > 0.1
    assert len(np.unique((image * 255).astype(np.uint8).reshape(-1, 3), axis=0)) > 500
    assert not list(tmp_path.glob(".map.*"))  # no temporary file left behind
    if coastline_file() is None:
        assert any("coastlines skipped" in n for n in notes)


def test_night_shading_darkens_the_map(tmp_path):
    # Local noon (12:40 UTC at 10 W) against local midnight (00:40 UTC) at midsummer: the region
    # around 50 N 10 W is in daylight at noon (chi about 27 deg) and in D-region night at midnight
    # (chi about 117 deg; geometry from the solar declination 23.4 deg), so the shaded map is darker.
    noon, _ = render(tmp_path, scenario_text("2026-06-21T12:40:00Z"), "noon.png")
    night, _ = render(tmp_path, scenario_text("2026-06-21T00:40:00Z"), "night.png")
    assert read_png(night).mean() < 0.8 * read_png(noon).mean()


def test_pdf_output_and_uniform_scenario_note(tmp_path):
    out, notes = render(tmp_path, scenario_text(ionosphere="hprime_km = 74.0\nbeta_per_km = 0.3"), "map.pdf")
    assert out.read_bytes()[:5] == b"%PDF-"
    assert any("no day/night shading" in n for n in notes)


def test_map_errors(tmp_path):
    s = load_scenario(scenario_text(ionosphere="hprime_km = 74.0\nbeta_per_km = 0.3", positions=False))
    with pytest.raises(ScenarioError, match="transmitter.latitude_deg is missing"):
        draw_map(s, build_paths(s), tmp_path / "map.png")
    s = load_scenario(scenario_text())
    with pytest.raises(CavityError, match=r"\.png or \.pdf"):
        draw_map(s, build_paths(s), tmp_path / "map.jpg")
    with pytest.raises(CavityError, match="does not exist"):
        draw_map(s, build_paths(s), tmp_path / "missing" / "map.png")


def test_coastlines_drawn_when_shapefile_on_disk(tmp_path, monkeypatch):
    # A stand-in Natural Earth coastline shapefile (one line) in the layout cartopy uses.
    import cartopy
    import shapefile

    folder = tmp_path / "ne" / "shapefiles" / "natural_earth" / "physical"
    folder.mkdir(parents=True)
    with shapefile.Writer(str(folder / "ne_110m_coastline"), shapeType=shapefile.POLYLINE) as w:
        w.field("name", "C")
        w.line([[[-15.0, 45.0], [-5.0, 55.0]]])
        w.record("invented")
    monkeypatch.setitem(cartopy.config, "pre_existing_data_dir", tmp_path / "ne")
    assert coastline_file() == folder / "ne_110m_coastline.shp"
    out, notes = render(tmp_path, scenario_text())
    assert not any("coastlines" in n for n in notes)
    assert read_png(out).std() > 0.1


def test_cli_map(tmp_path):
    from cavity.cli import main

    runner = CliRunner()
    scenario = tmp_path / "demo.toml"
    scenario.write_text(scenario_text())
    out = tmp_path / "demo.png"
    result = runner.invoke(main, ["map", str(scenario), "-o", str(out), "--dpi", "60"])
    assert result.exit_code == 0, result.output
    assert f"wrote {out}" in result.output and out.stat().st_size > 10_000
    again = runner.invoke(main, ["map", str(scenario), "-o", str(out)])
    assert again.exit_code == 1 and "--overwrite" in again.output
    replaced = runner.invoke(main, ["map", str(scenario), "-o", str(out), "--dpi", "60", "--overwrite"])
    assert replaced.exit_code == 0, replaced.output
    bad_suffix = runner.invoke(main, ["map", str(scenario), "-o", str(tmp_path / "demo.gif")])
    assert bad_suffix.exit_code == 2 and ".png or .pdf" in bad_suffix.output
    no_positions = tmp_path / "ranges.toml"
    no_positions.write_text(scenario_text(ionosphere="hprime_km = 74.0\nbeta_per_km = 0.3", positions=False))
    failed = runner.invoke(main, ["map", str(no_positions), "-o", str(tmp_path / "r.png")])
    assert failed.exit_code == 1
    assert failed.output.strip().count("\n") == 0 and "no positions to map" in failed.output
    assert not (tmp_path / "r.png").exists()
