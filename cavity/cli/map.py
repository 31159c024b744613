"""``cavity map``: draw a scenario's transmitter, receivers and paths on a map with day/night zones."""

from __future__ import annotations

from pathlib import Path

import click

from cavity.cli.common import check_output_file, friendly_errors

_SUFFIXES = (".png", ".pdf")


@click.command("map")
@click.argument("scenario_file", metavar="SCENARIO", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="PATH",
    default=Path("map.png"),
    show_default=True,
    help="Map file to write: .png or .pdf.",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
@click.option(
    "--dpi",
    type=click.IntRange(50, 600),
    default=150,
    show_default=True,
    help="Resolution of a PNG map, dots per inch.",
)
@click.option(
    "--bearing-tolerance",
    "bearing_tolerance_deg",
    type=click.FloatRange(0.0, 180.0),
    default=1.0,
    show_default=True,
    metavar="DEG",
    help="Receivers whose bearings agree within this angle share one path.",
)
@friendly_errors
def command(scenario_file, output, overwrite, dpi, bearing_tolerance_deg):
    """Draw the transmitter, receivers and solved paths of a scenario on a map.

    The map is centred on the transmitter (azimuthal equidistant: paths are straight lines, ranges
    true to scale). Paths are coloured by the ground class along them; with ionosphere utc = ... the
    map shades twilight (sun below the horizon, hatched) and D-region night (dark). Range rings
    around the transmitter are labelled in km; the frame fits the paths. It works offline: land,
    sea and the coastline come from the 1 km land/sea mask installed with the tool.

    \b
    Example:
      cavity map examples/quillon_head.toml -o quillon_head-map.png
    """
    from cavity import load_scenario
    from cavity.paths import build_paths
    from cavity.reports.maps import draw_map

    if output.suffix.lower() not in _SUFFIXES:
        raise click.BadParameter(
            f"{str(output)!r} has suffix {output.suffix or '(none)'!r}; write .png or .pdf", param_hint="'-o'"
        )
    check_output_file(output, overwrite, what="map")

    with open(scenario_file, "rb") as handle:
        magic = handle.read(4)
    if magic in (b"\x89HDF", b"CDF\x01", b"CDF\x02"):
        raise click.ClickException(
            f"{scenario_file} is a result file (netCDF), not a scenario; give the scenario .toml it was run from"
        )
    scenario = load_scenario(scenario_file)
    if scenario.transmitter.latitude_deg is None:
        raise click.ClickException(
            f"{scenario_file.name}: no positions to map (the transmitter has no latitude_deg/longitude_deg "
            "and every receiver is given by range_km)"
        )
    paths = build_paths(scenario, bearing_tolerance_deg=bearing_tolerance_deg)
    notes = draw_map(scenario, paths, output, dpi=dpi)
    for note in notes:
        click.echo(f"note: {note}", err=True)
    click.echo(f"wrote {output}", err=True)
