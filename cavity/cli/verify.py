"""``cavity verify``: the solver's checks against outside references, run on this machine."""

from __future__ import annotations

import click

from cavity.cli.common import friendly_errors, progress_callback


@click.command("verify")
@click.option("--full", is_flag=True, help="Add the long-range comparisons (tens of minutes).")
@click.option(
    "--only", multiple=True, metavar="NAME", help="Run only the named checks (repeatable), e.g. --only calibration."
)
@click.option("-q", "--quiet", is_flag=True, help="No progress bar.")
@friendly_errors
def command(full, only, quiet):
    """Run the solver's checks and print a table: check, source, expected, obtained, tolerance, result.

    The quick set takes a few minutes on two cores: radiated-power calibration, the two-mode beat and
    the mode sum of a perfectly conducting guide, absorber reflection, plasma stability, the ground
    wave over dry ground and a day guide against the independent normal-mode solution. --full adds
    3,000 km day and night guides over sea and land. Exit code 1 if any check fails.

    Example: cavity verify --only calibration --only two_mode_beat
    """
    from cavity.checks import verify

    names = [n for n, _ in verify.QUICK + verify.FULL]
    unknown = [n for n in only if n not in names]
    if unknown:
        raise click.UsageError(f"unknown check {unknown[0]!r}; known: {', '.join(names)}")
    with progress_callback(quiet, "verifying") as update:
        results = verify.run_checks(
            full=full or any(n in dict(verify.FULL) for n in only), only=list(only) or None, progress=update
        )
    click.echo(verify.format_table(results))
    failed = [r.name for r in results if not r.passed]
    if failed:
        raise click.ClickException(f"{len(failed)} check(s) failed: {', '.join(failed)}")
