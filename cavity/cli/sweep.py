"""``cavity sweep``: solve a scenario at many UTC instants and frequencies on dask workers."""

from __future__ import annotations

import logging
import sys
import time

import click

from cavity.cli.common import check_output_file, friendly_errors, one_line, progress_callback


def _frequencies(values) -> list[float] | None:
    """``--frequency 16 --frequency 27.6`` or ``--frequency 16,27.6`` -> [16.0, 27.6] (kHz)."""
    if not values:
        return None
    out = []
    for value in values:
        for item in str(value).split(","):
            item = item.strip()
            if not item:
                continue
            try:
                out.append(float(item))
            except ValueError:
                raise click.BadParameter(f"{item!r} is not a number of kHz", param_hint="--frequency") from None
    return out


@click.command("sweep")
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option(
    "--start", metavar="UTC", help="First UTC instant, e.g. 2026-03-20T00:00Z (a date alone means 00:00 UTC)."
)
@click.option("--stop", metavar="UTC", help="Last UTC instant (included when it falls on a step).")
@click.option(
    "--step", default="15min", show_default=True, metavar="DURATION", help="Time between instants: 15min, 1h, 90s ..."
)
@click.option(
    "--frequency",
    "frequency",
    multiple=True,
    metavar="KHZ",
    help="Frequency in kHz, repeatable or comma-separated (default: the scenario's).",
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
    "-o",
    "--output",
    "output",
    type=click.Path(dir_okay=False),
    required=True,
    help="Combined sweep file to write (netCDF).",
)
@click.option(
    "--parts",
    "parts",
    type=click.Path(file_okay=False),
    metavar="DIR",
    help="Folder keeping one file per finished point [default: OUTPUT.parts beside the output].",
)
@click.option(
    "--allow-missing",
    is_flag=True,
    help="Write the combined file even if some points failed (NaN there, listed in the file).",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing combined file (otherwise refused).")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar or messages, only errors.")
@friendly_errors
def command(scenario, start, stop, step, frequency, scheduler, workers, output, parts, allow_missing, overwrite, quiet):
    """Solve SCENARIO at every UTC instant from --start to --stop and every --frequency.

    Each (instant, frequency) point is the scenario with ionosphere utc and the transmitter
    frequency replaced, solved on its own by a dask worker. Finished points are kept in a parts
    folder beside the output, so a sweep that was stopped resumes where it was when the same
    command is run again. The combined file has a time dimension and is written once, when every
    point has been solved (with --allow-missing, also when some failed).

    A scenario whose ionosphere is not given by utc can be swept over frequency only (no --start).

    \b
    Example:
      cavity sweep examples/quillon_head.toml --start 2026-03-20T00:00Z \\
          --stop 2026-03-21T00:00Z --step 30min -o quillon_head_day.nc
    """
    from pathlib import Path

    import cavity
    from cavity.ionosphere_forms import form_of
    from cavity.sweeps import SweepError, default_parts_dir, sweep, sweep_times, write_sweep

    if (start is None) != (stop is None):
        raise click.UsageError("--start and --stop go together")
    if scheduler and workers:
        raise click.UsageError("--workers sizes the local cluster; it does not apply with --scheduler")
    target = check_output_file(output, overwrite, what="sweep file")
    sc = cavity.load_scenario(scenario)
    times = sweep_times(start, stop, step) if start is not None else None
    if times is None and form_of(sc.ionosphere).instant(sc.ionosphere) is not None and not quiet:
        click.echo("note: no --start/--stop, so only the scenario's own instant is solved", err=True)
    parts_dir = Path(parts) if parts else default_parts_dir(target)

    handler = None
    if not quiet:
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(logging.Formatter("%(message)s"))
        logger = logging.getLogger("cavity.sweeps")
        logger.addHandler(handler)
        logger.setLevel(logging.INFO)
    t0 = time.perf_counter()
    try:
        with progress_callback(quiet, "solving points") as update:
            ds = sweep(
                sc,
                times=times,
                frequencies_khz=_frequencies(frequency),
                scheduler=scheduler,
                workers=workers,
                parts_dir=parts_dir,
                progress=update,
                allow_missing=allow_missing,
            )
    except SweepError as exc:
        for name, message in exc.failures:
            click.echo(f"failed: {name}: {message}", err=True)
        raise click.ClickException(one_line(exc)) from None
    except KeyboardInterrupt as exc:  # Ctrl-C, or SIGTERM through cavity.cli.common (exit 143)
        click.echo(
            f"Error: interrupted; finished points are kept in {parts_dir}; run the same command "
            "again to solve only the rest",
            err=True,
        )
        sys.exit(128 + getattr(exc, "signum", 2))
    finally:
        if handler is not None:
            logging.getLogger("cavity.sweeps").removeHandler(handler)
    path = write_sweep(ds, target, overwrite=overwrite)
    missing = ds.attrs.get("sweep_missing_points")
    if missing:
        click.echo(f"warning: these points failed and are NaN in {path}: {missing}", err=True)
    if ds.attrs.get("solver_converged") == "no":
        click.echo(f"warning: {ds.attrs.get('solver_notes', 'some points did not converge')}", err=True)
    if not quiet:
        click.echo(f"{ds.attrs['sweep_points']} points in {time.perf_counter() - t0:.1f} s", err=True)
    click.echo(f"wrote {path}")
