"""``cavity table``: the receiver table of one or more result files, as Markdown or CSV."""

from __future__ import annotations

import math
from pathlib import Path

import click

from cavity.cli.common import friendly_errors


def _finite(ctx, param, value):
    if value is not None and not math.isfinite(value):
        raise click.BadParameter(f"{value!r} is not a finite number")
    return value


def open_results(files) -> list:
    """Open result files (one-line ResultFileError for a missing, corrupt or foreign file)."""
    from cavity.results import open_result

    return [open_result(f) for f in files]


def file_labels(files) -> list[str]:
    """Short labels for result files: their stems, or their names when stems repeat."""
    stems = [Path(f).stem for f in files]
    if len(set(stems)) == len(stems):
        return stems
    names = [Path(f).name for f in files]
    return names if len(set(names)) == len(names) else [str(f) for f in files]


def diurnal_table(ds, fmt: str) -> str:
    """The table of a sweep file, from the sweep module's reporter (imported only when needed)."""
    import importlib

    try:
        sweep_report = importlib.import_module("cavity.reports.sweep")
    except ImportError:
        raise click.ClickException(
            "this is a sweep file (it has a time dimension), and the sweep reports (cavity.reports.sweep) "
            "are not installed"
        ) from None
    table = sweep_report.table_diurnal(ds)
    if isinstance(table, str):
        return table
    formatter = getattr(sweep_report, "format_diurnal_table", None)
    text = formatter(table, fmt) if formatter is not None else table.to_csv(index=False)
    if fmt == "markdown":
        from cavity.reports.tables import table_notes

        text += "".join(f"\n{note}\n" for note in table_notes([ds]) if note.startswith("Cautions"))
    return text


@click.command("table")
@click.argument(
    "results", metavar="RESULT...", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path)
)
@click.option(
    "-f",
    "--format",
    "fmt",
    type=click.Choice(["markdown", "csv"]),
    default="markdown",
    show_default=True,
    help="Table format.",
)
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="FILE",
    help="Write the table to FILE instead of standard output.",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
@click.option(
    "--required",
    "required_db",
    type=float,
    callback=_finite,
    metavar="DB",
    help="Required field, dB re 1 uV/m: adds a margin column (field - required).",
)
@click.option(
    "--noise",
    "noise_db",
    type=float,
    callback=_finite,
    metavar="DB",
    help="Noise as a spectral density, dB re 1 uV/m per sqrt(Hz); give with --bandwidth.",
)
@click.option(
    "--bandwidth",
    "bandwidth_hz",
    type=click.FloatRange(min=0.0, min_open=True),
    metavar="HZ",
    help="Receiver bandwidth, Hz; with --noise adds an SNR column.",
)
@click.option(
    "--snr",
    "snr_db",
    type=float,
    default=0.0,
    show_default=True,
    callback=_finite,
    metavar="DB",
    help="Coverage files: the required signal-to-noise ratio with --noise/--bandwidth, dB.",
)
@click.option(
    "--sector-deg",
    "sector_deg",
    type=float,
    default=45.0,
    show_default=True,
    metavar="DEG",
    help="Coverage files: width of the bearing sectors, degrees.",
)
@friendly_errors
def command(results, fmt, output, overwrite, required_db, noise_db, bandwidth_hz, snr_db, sector_deg):
    """Print a table of the field at every receiver and frequency of RESULT file(s).

    One row per receiver and frequency: name, range (km), bearing (deg; blank for a receiver given
    by range only), vertical field Ez (dB re 1 uV/m and uV/m, RMS), flux density B (dB re 1 fT),
    phase re c delay (deg: phase + 360 f d / c wrapped to (-180, 180], as cavity plot draws it)
    and day/night/transition at the receiver (from
    the solar zenith angle along the path, or the day/night preset; "-" when neither applies).
    With several files a first column names the run of each row: day or night (a preset
    ionosphere), its UTC, or the scenario's title. A Markdown table opens with a line per run naming
    transmitter, frequency, power, ionosphere and time, gives each path's bearing once, and marks
    a negative margin "(short)".

    \b
    --required DB adds   margin = Ez - DB.
    --noise N0 --bandwidth B add
                         SNR = Ez - (N0 + 10 log10(B / 1 Hz)),
    where N0 is the noise field as a spectral density in dB re 1 uV/m per sqrt(Hz), so that
    N0 + 10 log10(B) is the noise field in the bandwidth B (noise power grows as the bandwidth).

    A Markdown table ends with the definitions used and the cautions line; CSV holds only the
    table (one header line), with more digits.

    Coverage files (cavity coverage) get their summary instead: the area at or above the level
    (--required, or --noise/--bandwidth with --snr) and per bearing sector the farthest range at
    or above it; several coverage files (e.g. day and night) side by side.

    \b
    Examples:
      cavity table day.nc
      cavity table day.nc night.nc --required 40 --noise 10 --bandwidth 100 -o receivers.md
      cavity table day.nc --format csv -o receivers.csv
    """
    from cavity.files import write_text
    from cavity.reports.reading import is_sweep
    from cavity.reports.tables import receiver_table, run_labels

    if (noise_db is None) != (bandwidth_hz is None):
        raise click.UsageError("--noise and --bandwidth go together: give both, or neither")
    if output is not None:
        if output.exists() and not overwrite:
            raise click.ClickException(f"{output} exists already; pass --overwrite to replace it")
        folder = output.parent if str(output.parent) else Path(".")
        if not folder.is_dir():
            raise click.ClickException(f"output folder {folder} does not exist")
    datasets = open_results(results)
    sweeps = [ds for ds in datasets if is_sweep(ds)]
    from cavity.sweeps.coverage import is_coverage

    maps = [ds for ds in datasets if is_coverage(ds)]
    if maps:
        from cavity.reports.coverage import coverage_summary, make_level

        if len(maps) != len(datasets):
            raise click.UsageError("coverage files are tabulated together, without other result files")
        level = make_level(required_db, noise_db, bandwidth_hz, snr_db)
        if level is None:
            raise click.UsageError("a coverage summary needs a level: give --required DB or --noise DB --bandwidth HZ")
        labels = run_labels(results) if len(results) > 1 else None
        text = coverage_summary(datasets, level, fmt, runs=labels, sector_deg=sector_deg)
    elif sweeps:
        if len(datasets) > 1 or required_db is not None or noise_db is not None:
            raise click.UsageError("a sweep file (time dimension) is tabulated on its own, without --required/--noise")
        text = diurnal_table(sweeps[0], fmt)
    else:
        labels = run_labels(datasets, fallback=file_labels(results)) if len(results) > 1 else None
        text = receiver_table(
            datasets, fmt, runs=labels, required_db=required_db, noise_db=noise_db, bandwidth_hz=bandwidth_hz
        )
    if output is None:
        click.echo(text, nl=False)
    else:
        write_text(text, output)
        click.echo(f"wrote {output}", err=True)
