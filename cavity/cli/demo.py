"""``cavity demo``: run the bundled invented scenario by day and by night and write everything a memo needs."""

from __future__ import annotations

from pathlib import Path

import click

from cavity.cli.common import friendly_errors, progress_callback, solver_log

#: The bundled scenarios (package data, cavity/data/), one run each, in this order.
DEMO_SCENARIOS: dict[str, str] = {"day": "demo_day.toml", "night": "demo_night.toml"}

#: Every file the demo writes, in the order written.
DEMO_FILES: tuple[str, ...] = (
    "day.nc",
    "night.nc",
    "receivers.md",
    "receivers.csv",
    "comparison.png",
    "comparison.md",
    "plot_day.png",
    "plot_night.png",
    "map.png",
)


def demo_scenarios() -> dict:
    """The demo's scenarios by run label, loaded from the package data."""
    from importlib.resources import as_file, files

    import cavity

    folder = files("cavity") / "data"
    scenarios = {}
    for label, name in DEMO_SCENARIOS.items():
        with as_file(folder / name) as path:
            scenarios[label] = cavity.load_scenario(path)
    return scenarios


def _simulate(scenario, quiet: bool, label: str):
    from cavity.solve import simulate

    with progress_callback(quiet, f"{label} run") as update:
        return simulate(scenario, progress=update)


@click.command("demo")
@click.option(
    "-o",
    "--output",
    "folder",
    type=click.Path(path_type=Path),
    default=Path("demo-output"),
    show_default=True,
    metavar="FOLDER",
    help="Folder to write into (made if missing).",
)
@click.option("--overwrite", is_flag=True, help="Replace the demo's files if the folder already has them.")
@click.option("-q", "--quiet", is_flag=True, help="No progress bars or grid summaries.")
@friendly_errors
def command(folder, overwrite, quiet):
    """Run the bundled invented demo by day and by night and write a memo's worth of files.

    One transmitter (Velmory Sound, 27.6 kHz, 150 kW) and three listening posts at about 470, 1,500 and
    3,000 km on one great circle over land and sea (ground from the land/sea mask), solved under the
    published midday and night ionospheres. Every name is made up. Written to FOLDER:

    \b
      day.nc, night.nc            result files (netCDF; cavity table/plot/compare read them)
      receivers.md, receivers.csv receiver table, day and night rows
      comparison.png              day and night field against range, receivers marked
      comparison.md               differences at receivers and attenuation rates
      plot_day.png, plot_night.png amplitude and phase against range
      map.png                     transmitter, receivers and the path by ground class

    Takes about 7 min on two cores with the geomagnetic field (measured 6 min 20 s on an idle
    2-core machine, 11 min 5 s of processor time: two solves of 1.8 and 4.5 x 10^10 cell updates
    with six field components, plus their uncertainty companions; cavity inspect estimates a run).
    Existing files are replaced only with --overwrite; nothing is written if the run fails.

    \b
    Example:
      cavity demo -o demo-output
    """
    from cavity.files import write_text
    from cavity.paths import build_paths
    from cavity.reports.attenuation import attenuation_rows
    from cavity.reports.compare import comparison_report
    from cavity.reports.maps import draw_map
    from cavity.reports.plots import common_amplitude_limits, plot_comparison, plot_result
    from cavity.reports.tables import receiver_table
    from cavity.results import write_result

    if folder.exists() and not folder.is_dir():
        raise click.ClickException(f"{folder} is a file; give a folder name")
    targets = {name: folder / name for name in DEMO_FILES}
    existing = [str(p) for p in targets.values() if p.exists()]
    if existing and not overwrite:
        raise click.ClickException(
            f"{existing[0]} exists already ({len(existing)} of the demo's files are there); pass --overwrite "
            "to replace them, or choose another folder"
        )
    scenarios = demo_scenarios()
    results = {}
    with solver_log("cavity.solve", quiet):
        for label, scenario in scenarios.items():
            results[label] = _simulate(scenario, quiet, label)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for label, ds in results.items():
        written.append(write_result(ds, targets[f"{label}.nc"], overwrite=overwrite))
    day, night = results["day"], results["night"]
    labels = list(results)
    written.append(write_text(receiver_table([day, night], "markdown", runs=labels), targets["receivers.md"]))
    written.append(write_text(receiver_table([day, night], "csv", runs=labels), targets["receivers.csv"]))
    written.append(plot_comparison(day, night, targets["comparison.png"], "day", "night"))
    text = comparison_report(day, night, "day", "night")
    written.append(write_text(text, targets["comparison.md"]))
    limits = common_amplitude_limits([day, night])  # day and night on the same axes
    written.append(plot_result(day, targets["plot_day.png"], amplitude_limits=limits))
    written.append(plot_result(night, targets["plot_night.png"], amplitude_limits=limits))
    notes = draw_map(scenarios["day"], build_paths(scenarios["day"]), targets["map.png"])
    written.append(targets["map.png"])
    for note in notes:
        click.echo(f"note: {note}", err=True)
    if not quiet:
        for row in attenuation_rows([day, night], labels):
            click.echo(
                f"{row['run']}: {row['rate_db_per_1000km']:.2f} dB per 1000 km over "
                f"{row['start_km']:.0f}-{row['stop_km']:.0f} km ({row['frequency_khz']:g} kHz)",
                err=True,
            )
    for path in written:
        click.echo(f"wrote {path}")
