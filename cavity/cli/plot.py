"""``cavity plot``: amplitude and phase against range from a result file (PNG or PDF)."""

from __future__ import annotations

from pathlib import Path

import click

from cavity.cli.common import check_output_file, friendly_errors

_SUFFIXES = (".png", ".pdf")


def diurnal_plot(ds, output) -> None:
    """Plot a sweep file with the sweep module's reporter (imported only when needed)."""
    try:
        from cavity.reports.sweep import plot_diurnal
    except ImportError:
        raise click.ClickException(
            "this is a sweep file (it has a time dimension), and the sweep reports (cavity.reports.sweep) "
            "are not installed"
        ) from None
    plot_diurnal(ds, output)


@click.command("plot")
@click.argument("result", type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--output", type=click.Path(dir_okay=False, path_type=Path), metavar="FIGURE",
              default=Path("plot.png"), show_default=True, help="Figure to write: .png or .pdf.")
@click.option("--overwrite", is_flag=True, help="Replace an existing figure.")
@click.option("--phase", type=click.Choice(["relative", "unwrapped"]), default="relative", show_default=True,
              help="relative: phase + 360 f d/c, the speed-of-light delay removed; unwrapped: as in the file.")
@click.option("--dpi", type=click.IntRange(50, 600), default=150, show_default=True,
              help="Resolution of a PNG figure, dots per inch.")
@friendly_errors
def command(result, output, overwrite, phase, dpi):
    """Plot the field against range from a RESULT file: amplitude and phase, receivers marked.

    One pair of panels per path and frequency: the RMS vertical field at the ground in dB re 1 uV/m,
    and its phase in degrees. The phase is shown with the speed-of-light delay removed
    (phase + 360 f d / c; exp(+j omega t) convention), which makes the guided wave's phase velocity
    and modal ripples visible; --phase unwrapped shows the file's phase as it is.

    A sweep file (with a time dimension) gets the sweep's own diurnal figure instead.

    \b
    Examples:
      cavity plot day.nc -o day.png
      cavity plot night.nc -o night.pdf --phase unwrapped
    """
    from cavity.reports.tables import is_sweep, plot_result
    from cavity.results import open_result

    if output.suffix.lower() not in _SUFFIXES:
        raise click.BadParameter(
            f"{str(output)!r} has suffix {output.suffix or '(none)'!r}; write .png or .pdf", param_hint="'-o'"
        )
    check_output_file(output, overwrite, what="figure")
    ds = open_result(result)
    if is_sweep(ds):
        diurnal_plot(ds, output)
    elif "receiver_ez_spectrum" in ds:  # a lightning run: waveforms and spectra per receiver
        from cavity.reports.sferic import plot_sferic

        plot_sferic([ds], output)
    else:
        plot_result(ds, output, phase=phase, dpi=dpi)
    click.echo(f"wrote {output}")
