"""Checks of cavity.reports.maps and ``cavity map``: offline rendering, day/night shading, errors."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from cavity.errors import CavityError, ScenarioError
from cavity.paths import build_paths
from cavity.reports.maps import NIGHT_SHADE, TWILIGHT_SHADE, draw_map, ring_step_km
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
    assert not any("coastline" in n for n in notes)


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


def test_coastline_frame_rings_and_title_with_no_network(tmp_path, monkeypatch):
    # No network at all: any socket connection fails, so the coastline must come from data on disk.
    import socket

    def refuse(*args, **kwargs):
        raise OSError("network disabled in this test")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)
    import matplotlib.figure

    figures = []
    original = matplotlib.figure.Figure.savefig

    def keep(self, *args, **kwargs):
        figures.append(self)
        return original(self, *args, **kwargs)

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", keep)
    s = load_scenario(scenario_text())
    paths = build_paths(s)
    draw_map(s, paths, tmp_path / "map.png", dpi=60)
    ax = figures[-1].axes[0]
    # the coastline: a contour of the land/sea mask with many vertices inside the frame
    from matplotlib.contour import ContourSet

    contours = [c for c in ax.collections if isinstance(c, ContourSet)]
    assert contours and sum(len(p.vertices) for c in contours for p in c.get_paths()) > 100
    # the frame fits the paths: their projected extent fills most of it
    import cartopy.crs as ccrs

    proj = ax.projection
    lons = np.concatenate([p.longitude_deg for p in paths if p.longitude_deg is not None])
    lats = np.concatenate([p.latitude_deg for p in paths if p.latitude_deg is not None])
    xy = proj.transform_points(ccrs.Geodetic(), lons, lats)[:, :2]
    x0, x1, y0, y1 = ax.get_extent(crs=proj)
    span = max(np.ptp(xy[:, 0]), np.ptp(xy[:, 1]))
    assert max(x1 - x0, y1 - y0) <= 1.5 * span + 400e3
    assert x0 <= xy[:, 0].min() and xy[:, 0].max() <= x1 and y0 <= xy[:, 1].min() and xy[:, 1].max() <= y1
    # range rings labelled in km, a round step
    rings = [t.get_text() for t in ax.texts if t.get_text().endswith(" km")]
    assert rings and all(t.replace(",", "").removesuffix(" km").isdigit() for t in rings)
    # the title names the transmitter, not a run ("by day") of the scenario
    assert s.transmitter.name in ax.get_title() and s.title not in ax.get_title()


def test_ring_step_gives_three_to_six_rings():
    for reach in (450.0, 1200.0, 3500.0, 9000.0, 19000.0):
        step = ring_step_km(reach)
        assert 1 <= reach / step <= 6.0


def test_twilight_and_night_shades_differ_in_grey():
    # Grey print: luminance 0.299 R + 0.587 G + 0.114 B (ITU-R BT.601) of each shade over a white
    # page, alpha-blended, must differ clearly (here by more than 0.2 of full scale).
    from matplotlib.colors import to_rgb

    def grey(shade):
        rgb = np.array(to_rgb(shade["facecolor"]))
        over_white = shade["alpha"] * rgb + (1 - shade["alpha"])
        return float(over_white @ [0.299, 0.587, 0.114])

    assert grey(TWILIGHT_SHADE) - grey(NIGHT_SHADE) > 0.2
    assert TWILIGHT_SHADE.get("hatch") and not NIGHT_SHADE.get("hatch")


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


def test_cli_map_of_a_result_file_asks_for_the_scenario(tmp_path):
    from cavity.cli import main

    golden = Path(__file__).parent / "data" / "golden_day.nc"
    result = CliRunner().invoke(main, ["map", str(golden), "-o", str(tmp_path / "m.png")])
    assert result.exit_code == 1
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and "is a result file" in lines[0] and "scenario" in lines[0]
