"""``cavity run``: solve a scenario and write its result file."""

from __future__ import annotations

import click

from cavity.cli.common import check_output_file, friendly_errors, progress_callback, solver_log


@click.command("run")
@click.argument("scenario", type=click.Path(dir_okay=False))
@click.option(
    "-o", "--output", "output", type=click.Path(dir_okay=False), required=True, help="Result file to write (netCDF)."
)
@click.option("--overwrite", is_flag=True, help="Replace an existing result file (otherwise refused).")
@click.option("-q", "--quiet", is_flag=True, help="No progress bar or grid summary.")
@click.option(
    "--uncertainty/--no-uncertainty",
    default=None,
    help="Compute receiver_ez_uncertainty with a companion solve on a coarser grid (about 30 % more "
    "time); default: the scenario's solver.uncertainty (true unless set).",
)
@friendly_errors
def command(scenario, output, overwrite, quiet, uncertainty):
    """Solve SCENARIO with the time-domain waveguide solver and write a netCDF result.

    The grid, time step and memory are printed before stepping starts; a progress bar shows the
    steps (off with --quiet). An existing OUTPUT is replaced only with --overwrite, and nothing is
    written if the run fails or is interrupted.

    Example: cavity run examples/uniform_day.toml -o day.nc
    """
    import dataclasses

    import cavity
    from cavity.results import write_result
    from cavity.solve import simulate  # not cavity.simulate(): importing the module rebinds that name

    sc = cavity.load_scenario(scenario)
    if uncertainty is not None:
        sc = sc.replace(solver=dataclasses.replace(sc.solver, uncertainty=uncertainty))
    target = check_output_file(output, overwrite, what="result file")  # refused before the run, not after
    with solver_log("cavity.solve", quiet), progress_callback(quiet, "solving") as update:
        ds = simulate(sc, progress=update)
    path = write_result(ds, target, overwrite=overwrite)
    if ds.attrs.get("solver_converged") == "no":
        click.echo(f"warning: {ds.attrs.get('solver_notes', 'the run did not converge')}", err=True)
    click.echo(f"wrote {path}")
