"""``cavity sferic``: run a lightning scenario (``[source] kind = "lightning"``) and plot its sferics."""

from __future__ import annotations

from pathlib import Path

import click

from cavity.cli.common import friendly_errors, progress_callback, solver_log

_FIGURE_SUFFIXES = (".png", ".pdf", ".svg")


@click.group("sferic")
def command():
    """Lightning sferics: waveforms and spectra of a return stroke at the receivers.

    \b
    Examples:
      cavity sferic run examples/sferic_day.toml -o sferic_day.nc
      cavity sferic run examples/sferic_night.toml -o sferic_night.nc
      cavity sferic plot sferic_day.nc sferic_night.nc -o sferics.png
    """


@command.command("run")
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    required=True,
    help="Result file to write (netCDF).",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing result file (otherwise refused).")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar or grid summary.")
@friendly_errors
def run_command(scenario, output, overwrite, quiet):
    """Solve a lightning SCENARIO for its record and write waveforms, spectra and cutoffs.

    The scenario needs a [source] section with kind = "lightning". Nothing is written if the run
    fails or is interrupted.

    \b
    Example:
      cavity sferic run examples/sferic_night.toml -o sferic_night.nc
    """
    import cavity
    from cavity.results import write_result
    from cavity.solve import simulate_sferic

    sc = cavity.load_scenario(scenario)
    if output.exists() and not overwrite:
        raise click.ClickException(f"{output} exists; use --overwrite to replace it")
    with solver_log("cavity.solve", quiet), progress_callback(quiet, "solving") as update:
        ds = simulate_sferic(sc, progress=update)
    path = write_result(ds, output, overwrite=overwrite)
    if ds.attrs.get("solver_converged") == "no":
        click.echo(f"warning: {ds.attrs.get('solver_notes', 'the record ends before the sferic has passed')}", err=True)
    for name, fc in zip(ds.receiver_name.values, ds.receiver_cutoff_frequency.values):
        text = "none found" if fc != fc else f"{fc:.3f} kHz"
        click.echo(f"{name}: lowest cutoff from the tail {text}", err=True)
    click.echo(f"wrote {path}")


@command.command("plot")
@click.argument("results", nargs=-1, required=True, type=click.Path(dir_okay=False))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    required=True,
    help="Figure to write: .png, .pdf or .svg.",
)
@click.option(
    "--label", "labels", multiple=True, help="Legend label of each result file, in order (default: its ionosphere)."
)
@click.option(
    "--component",
    type=click.Choice(["ez", "b"]),
    default="ez",
    show_default=True,
    help="Vertical electric field or horizontal magnetic flux density.",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing figure.")
@friendly_errors
def plot_command(results, output, labels, component, overwrite):
    """Waveform and spectrum per receiver from one or more sferic RESULTS (day and night overlaid).

    Each run's lowest cutoff, read from the sferic's tail, is marked on its spectrum.

    \b
    Example:
      cavity sferic plot sferic_day.nc sferic_night.nc -o sferics.png
    """
    import cavity
    from cavity.reports.sferic import plot_sferic

    if output.suffix.lower() not in _FIGURE_SUFFIXES:
        raise click.BadParameter(f"{str(output)!r}: write .png, .pdf or .svg", param_hint="'-o'")
    if output.exists() and not overwrite:
        raise click.ClickException(f"{output} exists; use --overwrite to replace it")
    if labels and len(labels) != len(results):
        raise click.BadParameter(
            f"{len(labels)} labels for {len(results)} result files; give one per file", param_hint="'--label'"
        )
    runs = [cavity.open_result(r) for r in results]
    path = plot_sferic(runs, output, labels=list(labels) or None, component=component)
    click.echo(f"wrote {path}")
