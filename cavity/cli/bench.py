"""``cavity bench``: how fast this machine runs the solver, and what a run will cost."""

from __future__ import annotations

import click

from cavity.cli.common import friendly_errors


@click.command("bench")
@click.option("--whole", is_flag=True, help="Also run the 3,000 km day path at 20 kHz (minutes) with its accuracy.")
@click.option(
    "--range-km",
    "range_km",
    type=click.FloatRange(10, 15000),
    default=3000.0,
    show_default=True,
    help="Range of the run whose wall time is predicted.",
)
@click.option(
    "--frequency-khz",
    "frequency_khz",
    type=click.FloatRange(0.3, 60),
    default=20.0,
    show_default=True,
    help="Frequency of the run whose wall time is predicted.",
)
@click.option(
    "--cell-m",
    "cell_m",
    type=click.FloatRange(10, 5000),
    default=None,
    help="Cell size of the predicted run (default: automatic).",
)
@friendly_errors
@click.option(
    "--field",
    is_flag=True,
    help="Also compare the magnetised (six-component) engine with the isotropic one "
    "on the 3,000 km night path at 20 kHz (stepping rates; with --whole, whole runs in turn).",
)
def command(whole, range_km, frequency_khz, cell_m, field):
    """Measure memory bandwidth, a minimal compiled stencil and the full engine on one grid
    (the grid of a day path at --range-km and --frequency-khz).

    Prints cell updates per second for each, the ratio engine/minimal, and the predicted stepping
    time of a run at --range-km and --frequency-khz on this machine. With --whole, runs the 3,000 km
    day path over sea at 20 kHz and reports wall time, peak memory and the error against the
    independent normal-mode reference.

    With --field, measures the magnetised engine (geomagnetic field on: six components and the
    vector plasma current) against the isotropic one on the 3,000 km night path at 20 kHz,
    interleaved; with --whole too, the two whole night runs in turn with their peak memory.

    Example: cavity bench --range-km 5000 --frequency-khz 16
    """
    from cavity.checks import bench

    r = bench.measure_rates(range_km * 1e3, frequency_khz * 1e3)
    click.echo(f"grid                      {r.nr} x {r.nz} cells, {r.threads} threads")
    click.echo(f"memory copy bandwidth     {r.copy_gb_per_s:8.1f} GB/s")
    click.echo(f"minimal stencil           {r.minimal_cells_per_s / 1e9:8.3f} G cell-updates/s")
    click.echo(f"full engine, whole grid   {r.engine_cells_per_s / 1e9:8.3f} G cell-updates/s")
    click.echo(f"engine / minimal          {r.ratio:8.2f}")
    seconds, plan = bench.predict_wall_time_s(r.engine_cells_per_s, range_km, frequency_khz, cell_m)
    click.echo(
        f"predicted: {range_km:g} km at {frequency_khz:g} kHz: {plan.nr} x {plan.nz} cells, "
        f">= {plan.n_steps} steps, about {seconds:.0f} s of stepping, {plan.memory_bytes / 1e9:.2f} GB"
    )
    if whole:
        w = bench.whole_run()
        click.echo(
            f"whole run: 3000 km day path, 20 kHz, sea: {w['wall_s']:.1f} s wall "
            f"({w['stepping_s']:.1f} s stepping, {w['steps']} steps, {w['cells']} cells, "
            f"dr {w['dr_m']:.0f} m, dz {w['dz_m']:.0f} m), peak memory {w['peak_memory_bytes'] / 1e9:.2f} GB"
        )
        click.echo(
            f"  effective rate over the whole run: {w['rate_cells_per_s'] / 1e9:.3f} G cell-updates/s "
            "(grid cells x steps / stepping time; columns the wave has not reached are skipped)"
        )
        for rk, e, ph in zip(w["ranges_km"], w["error_db"], w["phase_error_deg"]):
            click.echo(f"  {rk:6.0f} km: {e:+.2f} dB, {ph:+.0f} deg against the normal-mode reference")
    if field:
        import numpy as np

        rates = bench.field_rates()
        iso, mag = rates["isotropic"], rates["magnetised"]
        click.echo(
            f"field on/off, night grid {rates['nr']} x {rates['nz']}: isotropic "
            + ", ".join(f"{x / 1e9:.3f}" for x in iso)
            + " G cell-updates/s; magnetised "
            + ", ".join(f"{x / 1e9:.3f}" for x in mag)
            + f" (interleaved); time ratio {np.mean(iso) / np.mean(mag):.2f}; processor-time ratio "
            + f"{np.mean(rates['isotropic_cpu']) / np.mean(rates['magnetised_cpu']):.2f}"
        )
        if whole:
            runs = bench.night_runs_interleaved(repeats=2)
            for name, w in runs:
                click.echo(
                    f"  3000 km night path, 20 kHz, {name}: {w['wall_s']:.1f} s wall, {w['cpu_s']:.1f} s "
                    f"processor ({w['stepping_s']:.1f} s stepping, {w['steps']} steps"
                    f"{'' if w['converged'] else ', time cap'}), peak memory "
                    f"{w['peak_memory_bytes'] / 1e9:.2f} GB, Ez at 3000 km {w['ez_db_at_end']:.2f} dB re 1 V/m per A m"
                )
            ratio = bench.field_time_ratios(runs)
            click.echo(
                f"  field on / off (means of the interleaved runs): wall time {ratio['wall']:.2f}, processor time "
                f"{ratio['cpu']:.2f}, steps {ratio['steps']:.2f} (target: wall time at most 2)"
            )
