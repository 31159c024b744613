"""``cavity compare``: two results on one figure, differences at receivers, attenuation rates."""

from __future__ import annotations

from pathlib import Path

import click

from cavity.cli.common import friendly_errors

_SUFFIXES = (".png", ".pdf")


@click.command("compare")
@click.argument("result_a", metavar="A", type=click.Path(dir_okay=False, path_type=Path))
@click.argument("result_b", metavar="B", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="FIGURE",
    default=Path("comparison.png"),
    show_default=True,
    help="Figure to write: .png or .pdf.",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing figure (and table file).")
@click.option(
    "--fit-range",
    "fit_range",
    type=(float, float),
    metavar="START_KM STOP_KM",
    default=None,
    help="Range window of the attenuation fit, km  [default: 1000 3000, clipped to the computed span]",
)
@click.option(
    "-t",
    "--table",
    "table_output",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="FILE",
    help="Also write the text (Markdown, or CSV for a .csv name) to FILE.",
)
@click.option(
    "--dpi",
    type=click.IntRange(50, 600),
    default=150,
    show_default=True,
    help="Resolution of a PNG figure, dots per inch.",
)
@friendly_errors
def command(result_a, result_b, output, overwrite, fit_range, table_output, dpi):
    """Compare two result files A and B (day and night, two grounds, two powers...).

    Draws both runs' field against range on one figure (one panel per frequency the two share),
    receivers marked, and prints to standard output the differences B - A at the receivers the two
    files share by name, and the attenuation rate of each run in dB per 1000 km.

    The attenuation rate is the least-squares slope of the field in dB over --fit-range after the
    geometric spreading is removed: 1/sqrt(d) on a flat earth, 1/sqrt(a sin(d/a)) on the sphere
    (a = 6371 km), so only the waveguide's own loss remains. Near modal interference the residual
    shows how far a straight line describes the curve.

    \b
    Examples:
      cavity compare day.nc night.nc -o day-night.png
      cavity compare day.nc night.nc --fit-range 800 2500 -t comparison.md
    """
    from cavity.cli.table import file_labels, open_results
    from cavity.files import write_text
    from cavity.reports.compare import common_frequencies, comparison_report
    from cavity.reports.plots import plot_comparison
    from cavity.reports.reading import is_sweep
    from cavity.reports.tables import run_labels

    if output.suffix.lower() not in _SUFFIXES:
        raise click.BadParameter(
            f"{str(output)!r} has suffix {output.suffix or '(none)'!r}; write .png or .pdf", param_hint="'-o'"
        )
    start_km = stop_km = None
    if fit_range is not None:
        start_km, stop_km = fit_range
        if not (0.0 <= start_km < stop_km):
            raise click.BadParameter(
                f"{start_km:g} {stop_km:g}: give 0 <= START_KM < STOP_KM", param_hint="'--fit-range'"
            )
    for target in [output] + ([table_output] if table_output else []):
        if target.exists() and not overwrite:
            raise click.ClickException(f"{target} exists already; pass --overwrite to replace it")
        folder = target.parent if str(target.parent) else Path(".")
        if not folder.is_dir():
            raise click.ClickException(f"output folder {folder} does not exist")
    ds_a, ds_b = open_results([result_a, result_b])
    names = file_labels([result_a, result_b])
    common_frequencies(ds_a, ds_b, *names)  # refused with the file names when nothing is shared
    label_a, label_b = run_labels([ds_a, ds_b], fallback=names)  # day/night, UTC or title in the output
    for ds, path in ((ds_a, result_a), (ds_b, result_b)):
        if is_sweep(ds):
            raise click.ClickException(
                f"{path} is a sweep file (it has a time dimension); compare takes two single runs"
            )
    fmt = "csv" if table_output is not None and table_output.suffix.lower() == ".csv" else "markdown"
    text = comparison_report(ds_a, ds_b, label_a, label_b, start_km=start_km, stop_km=stop_km)
    written = [plot_comparison(ds_a, ds_b, output, label_a, label_b, start_km=start_km, stop_km=stop_km, dpi=dpi)]
    if table_output is not None:
        file_text = text if fmt == "markdown" else comparison_report(ds_a, ds_b, label_a, label_b, fmt="csv")
        written.append(write_text(file_text, table_output))
    click.echo(text, nl=False)
    for path in written:
        click.echo(f"wrote {path}", err=True)
