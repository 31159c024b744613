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
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="FIGURE",
    default=Path("plot.png"),
    show_default=True,
    help="Figure to write: .png or .pdf.",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing figure.")
@click.option(
    "--phase",
    type=click.Choice(["relative", "unwrapped"]),
    default="relative",
    show_default=True,
    help="relative: phase + 360 f d/c (speed-of-light delay removed) wrapped to (-180, 180], "
    "as cavity table prints it; unwrapped: as in the file.",
)
@click.option(
    "--dpi",
    type=click.IntRange(50, 600),
    default=150,
    show_default=True,
    help="Resolution of a PNG figure, dots per inch.",
)
@click.option(
    "--required",
    "required_db",
    type=float,
    metavar="DB",
    help="Coverage files: draw and label the contour of this field, dB re 1 uV/m.",
)
@click.option(
    "--noise",
    "noise_db",
    type=float,
    metavar="DB",
    help="Coverage files: noise density, dB re 1 uV/m per sqrt(Hz); with --bandwidth draws the SNR contour.",
)
@click.option(
    "--bandwidth",
    "bandwidth_hz",
    type=click.FloatRange(min=0.0, min_open=True),
    metavar="HZ",
    help="Coverage files: receiver bandwidth, Hz (with --noise).",
)
@click.option(
    "--snr",
    "snr_db",
    type=float,
    default=0.0,
    show_default=True,
    metavar="DB",
    help="Coverage files: the SNR contour drawn with --noise/--bandwidth, dB.",
)
@friendly_errors
def command(result, output, overwrite, phase, dpi, required_db, noise_db, bandwidth_hz, snr_db):
    """Plot the field against range from a RESULT file: amplitude and phase, receivers marked.

    One pair of panels per path and frequency: the RMS vertical field at the ground in dB re 1 uV/m,
    and its phase in degrees. The phase is shown with the speed-of-light delay removed
    (phase + 360 f d / c; exp(+j omega t) convention) and wrapped to (-180, 180] deg, the same
    quantity cavity table prints; the grey band marks the near field (one wavelength), where the
    phase still turns. --phase unwrapped shows the file's phase as it is.

    A sweep file (with a time dimension) gets the sweep's own diurnal figure instead, and a
    coverage file (cavity coverage) its map, with the --required (or SNR) contour.

    \b
    Examples:
      cavity plot day.nc -o day.png
      cavity plot night.nc -o night.pdf --phase unwrapped
    """
    from cavity.reports.plots import plot_result
    from cavity.reports.reading import is_sweep
    from cavity.results import open_result

    if output.suffix.lower() not in _SUFFIXES:
        raise click.BadParameter(
            f"{str(output)!r} has suffix {output.suffix or '(none)'!r}; write .png or .pdf", param_hint="'-o'"
        )
    check_output_file(output, overwrite, what="figure")
    ds = open_result(result)
    from cavity.sweeps.coverage import is_coverage

    if is_coverage(ds):
        from cavity.reports.coverage import make_level, plot_coverage

        plot_coverage(ds, output, level=make_level(required_db, noise_db, bandwidth_hz, snr_db), dpi=dpi)
    elif required_db is not None or noise_db is not None or bandwidth_hz is not None:
        raise click.UsageError("--required, --noise and --bandwidth apply to coverage files only")
    elif is_sweep(ds):
        diurnal_plot(ds, output)
    elif "receiver_ez_spectrum" in ds:  # a lightning run: waveforms and spectra per receiver
        from cavity.reports.sferic import plot_sferic

        plot_sferic([ds], output)
    else:
        plot_result(ds, output, phase=phase, dpi=dpi)
    click.echo(f"wrote {output}")
