"""``cavity coverage``: the field over an area, from paths solved at a set of bearings on dask workers."""

from __future__ import annotations

import logging
import math
import sys
import time
from pathlib import Path

import click

from cavity.cli.common import check_output_file, friendly_errors, one_line, progress_callback


def _finite(ctx, param, value):
    if value is not None and not math.isfinite(value):
        raise click.BadParameter(f"{value!r} is not a finite number")
    return value


@click.command("coverage")
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    required=True,
    help="Coverage file to write (netCDF).",
)
@click.option(
    "--bearing-step",
    "bearing_step",
    type=float,
    metavar="DEG",
    help="Angle between solved bearings, degrees; must divide 360 [default: 10; 30 with --preview].",
)
@click.option("--range-km", "range_km", type=float, metavar="KM", help="Range of the map, km [default: 1000].")
@click.option(
    "--preview",
    is_flag=True,
    help="A quick coarse look: bearings every 30 deg and 12 cells per wavelength (when cell_m is auto).",
)
@click.option(
    "--refine-to",
    "refine_to",
    type=float,
    metavar="DEG",
    help="Finest bearing step where neighbouring paths cross different ground (coasts); the bearing step "
    "turns the refinement off [default: a quarter of the bearing step].",
)
@click.option(
    "--grid-deg",
    "grid_deg",
    type=float,
    metavar="DEG",
    help="Latitude/longitude step of the map, degrees [default: about 300 steps across the map].",
)
@click.option(
    "--required",
    "required_db",
    type=float,
    callback=_finite,
    metavar="DB",
    help="Required field, dB re 1 uV/m: drawn as a contour and summarised.",
)
@click.option(
    "--noise",
    "noise_db",
    type=float,
    callback=_finite,
    metavar="DB",
    help="Noise density, dB re 1 uV/m per sqrt(Hz); with --bandwidth the SNR contour is drawn instead.",
)
@click.option(
    "--bandwidth",
    "bandwidth_hz",
    type=click.FloatRange(min=0.0, min_open=True),
    metavar="HZ",
    help="Receiver bandwidth, Hz (with --noise).",
)
@click.option(
    "--snr",
    "snr_db",
    type=float,
    default=0.0,
    show_default=True,
    callback=_finite,
    metavar="DB",
    help="Required signal-to-noise ratio with --noise/--bandwidth, dB.",
)
@click.option(
    "--sector-deg",
    "sector_deg",
    type=float,
    default=45.0,
    show_default=True,
    metavar="DEG",
    help="Width of the summary's bearing sectors, degrees.",
)
@click.option(
    "--figure",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="FILE",
    help="Map figure, .png or .pdf [default: OUTPUT with .png].",
)
@click.option(
    "--summary",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="FILE",
    help="Summary file; Markdown and CSV are both written (NAME.md, NAME.csv) [default: OUTPUT with .md; only with a level].",
)
@click.option(
    "--scheduler",
    metavar="ADDRESS",
    help="Use an existing dask scheduler, e.g. tcp://scheduler-host:8786 (default: local workers).",
)
@click.option(
    "--workers",
    type=click.IntRange(min=1),
    metavar="N",
    help="Local worker processes (default: as many as cores and memory allow).",
)
@click.option(
    "--parts",
    type=click.Path(file_okay=False, path_type=Path),
    metavar="DIR",
    help="Folder keeping one file per finished bearing [default: OUTPUT.parts beside the output].",
)
@click.option("--overwrite", is_flag=True, help="Replace existing output files (otherwise refused).")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar or messages, only errors.")
@friendly_errors
def command(
    scenario,
    output,
    bearing_step,
    range_km,
    preview,
    refine_to,
    grid_deg,
    required_db,
    noise_db,
    bandwidth_hz,
    snr_db,
    sector_deg,
    figure,
    summary,
    scheduler,
    workers,
    parts,
    overwrite,
    quiet,
):
    """Map the field of SCENARIO's transmitter over an area: paths solved at a set of bearings.

    Each bearing (every --bearing-step degrees from north, plus bisectors down to --refine-to where
    neighbouring paths cross different ground) is the scenario with one receiver at --range-km on
    that bearing: its own ground, sun and ionosphere along it, solved on a dask worker. Finished
    bearings are kept in a parts folder beside the output, so a stopped map resumes when the same
    command is run again. The field is interpolated between bearings (in dB,
    along range then in angle) onto a regular latitude/longitude grid.

    Writes the coverage file (netCDF, CF-1.10), the map figure and, with --required or
    --noise/--bandwidth, the summary (area at or above the level; farthest range per sector) as
    Markdown and CSV. A planning aid, not a guarantee of service.

    \b
    Examples:
      cavity coverage examples/coverage.toml -o coverage.nc --required 70
      cavity coverage examples/coverage.toml -o quick.nc --preview
      cavity coverage day.toml -o day.nc --noise 10 --bandwidth 100 --snr 6
    """
    import cavity
    from cavity.files import write_text
    from cavity.reports.coverage import check_sector, coverage_summary, make_level, plot_coverage
    from cavity.sweeps.coverage import CoverageError, CoverageSettings, coverage, default_parts_dir, write_coverage

    if scheduler and workers:
        raise click.UsageError("--workers sizes the local cluster; it does not apply with --scheduler")
    level = make_level(required_db, noise_db, bandwidth_hz, snr_db)
    check_sector(sector_deg)
    CoverageSettings.make(  # check before work
        bearing_step, range_km, preview=preview, grid_deg=grid_deg, refine_to_deg=refine_to
    )
    target = check_output_file(output, overwrite, what="coverage file")
    figure = figure or target.with_suffix(".png")
    if figure.suffix.lower() not in (".png", ".pdf"):
        raise click.BadParameter(f"{str(figure)!r} must end in .png or .pdf", param_hint="'--figure'")
    check_output_file(figure, overwrite, what="figure")
    tables = []
    if level is not None:
        summary = summary or target.with_suffix(".md")
        if summary.suffix.lower() == ".csv":  # the CSV named, the Markdown beside it
            tables = [(summary.with_suffix(".md"), "markdown"), (summary, "csv")]
        else:
            tables = [(summary, "markdown"), (summary.with_suffix(".csv"), "csv")]
        for path, _ in tables:
            check_output_file(path, overwrite, what="summary")
    elif summary is not None:
        raise click.UsageError("--summary needs a level: give --required DB or --noise DB --bandwidth HZ")
    sc = cavity.load_scenario(scenario)
    parts_dir = parts if parts else default_parts_dir(target)

    handlers = []
    if not quiet:
        for name in ("cavity.sweeps.coverage", "cavity.sweeps.run"):
            handler = logging.StreamHandler(sys.stderr)
            handler.setFormatter(logging.Formatter("%(message)s"))
            logger = logging.getLogger(name)
            logger.addHandler(handler)
            logger.setLevel(logging.INFO)
            handlers.append((logger, handler))
    t0 = time.perf_counter()
    try:
        with progress_callback(quiet, "solving bearings") as update:
            ds = coverage(
                sc,
                bearing_step,
                range_km,
                preview=preview,
                grid_deg=grid_deg,
                refine_to_deg=refine_to,
                scheduler=scheduler,
                workers=workers,
                parts_dir=parts_dir,
                progress=update,
            )
    except CoverageError as exc:
        for name, message in exc.failures:
            click.echo(f"failed: {name}: {message}", err=True)
        raise click.ClickException(one_line(exc)) from None
    except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM through cavity.cli.common (exit 143)
        click.echo(
            f"Error: interrupted; finished bearings are kept in {parts_dir}; run the same command "
            "again to solve only the rest",
            err=True,
        )
        sys.exit(128 + getattr(exc, "signum", 2))
    finally:
        for logger, handler in handlers:
            logger.removeHandler(handler)
    solved = time.perf_counter() - t0
    written = [write_coverage(ds, target, overwrite=overwrite)]
    written.append(plot_coverage(ds, figure, level=level))
    for path, fmt in tables:
        written.append(write_text(coverage_summary(ds, level, fmt, sector_deg=sector_deg), path))
    if ds.attrs.get("solver_converged") == "no":
        click.echo(f"warning: {ds.attrs.get('solver_notes', 'some bearings did not converge')}", err=True)
    if not quiet:
        click.echo(
            f"{ds.sizes['bearing']} bearings solved and mapped in {solved:.1f} s; "
            f"all files in {time.perf_counter() - t0:.1f} s",
            err=True,
        )
    for path in written:
        click.echo(f"wrote {path}")
