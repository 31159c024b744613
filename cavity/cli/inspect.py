"""``cavity inspect``: what a run of a scenario would do (receivers, media, grid), without running it."""

from __future__ import annotations

import click

from cavity.cli.common import friendly_errors


def _latlon(lat: float, lon: float) -> str:
    lon = (lon + 180.0) % 360.0 - 180.0
    return f"{abs(lat):.3f} {'N' if lat >= 0 else 'S'}, {abs(lon):.3f} {'E' if lon >= 0 else 'W'}"


def _table(header: list[str], rows: list[list[str]], indent: str = "  ") -> list[str]:
    """Columns as wide as their widest cell; the first column left-aligned, the others right-aligned."""
    widths = [max(len(cell) for cell in column) for column in zip(header, *rows)]
    lines = []
    for row in [header, *rows]:
        cells = [row[0].ljust(widths[0])] + [cell.rjust(w) for cell, w in zip(row[1:], widths[1:])]
        lines.append(indent + "  ".join(cells).rstrip())
    return lines


def _runs(labels, range_m) -> str:
    """Share of a path's length in each label ("sea 62 %, land 38 %"), in order of first appearance."""
    import numpy as np

    labels = np.asarray(labels).astype(str)
    r = np.asarray(range_m, dtype=float)
    widths = np.diff(r)
    total = float(r[-1] - r[0]) or 1.0
    order = list(dict.fromkeys(labels[:-1].tolist()))
    shares = [(name, float(widths[labels[:-1] == name].sum()) / total) for name in order]
    changes = int(np.count_nonzero(labels[1:] != labels[:-1]))
    text = ", ".join(f"{name} {100 * share:.0f} %" for name, share in shares)
    return text + (f" ({changes} changes)" if changes > 1 else "")


def _ionosphere_lines(ion) -> list[str]:
    """Description of the ionosphere form and its parameters (the form describes itself)."""
    from cavity.ionosphere_forms import form_of

    return form_of(ion).describe(ion)


def _ground_line(ground) -> str:
    if ground.kind == "auto":
        text = "auto: sea or land along each path from the land/sea mask"
    elif ground.kind == "perfect":
        text = "perfect: perfectly conducting (verification)"
    else:
        text = f"{ground.kind}: conductivity {ground.conductivity_s_per_m:g} S/m, relative permittivity {ground.relative_permittivity:g}"
    for seg in ground.segments:
        text += (
            f"; {seg.from_m / 1e3:g}-{seg.to_m / 1e3:g} km {seg.kind} "
            f"({seg.conductivity_s_per_m:g} S/m, eps_r {seg.relative_permittivity:g})"
        )
    return text


def _geomagnetic_line(s) -> str:
    gm = s.geomagnetic
    if gm.model == "none":
        return "none: isotropic ionosphere (Er, Ez, Hphi only)"
    if gm.model == "uniform":
        return (
            f"uniform: {gm.strength_nt:g} nT, dip {gm.dip_deg:g} deg (positive downward), azimuth of travel "
            f"{gm.azimuth_deg:g} deg from magnetic north; six field components"
        )
    source = "the default epoch" if gm.epoch_source == "default" else f"from {gm.epoch_source}"
    return (
        f"IGRF-14 at {gm.altitude_km:g} km, epoch {gm.epoch.isoformat()} ({source}); "
        "six field components, the field along each path"
    )


def _span(values, fmt: str) -> str:
    lo, hi = float(min(values)), float(max(values))
    return format(lo, fmt) if format(lo, fmt) == format(hi, fmt) else f"{format(lo, fmt)} to {format(hi, fmt)}"


def _field_text(field) -> str:
    """Strength, dip and azimuth of travel from magnetic north along a path (start, end; range)."""
    strength, dip, az = field.strength_nt, field.dip_deg, field.azimuth_deg
    return (
        f"{strength[0]:.0f} nT, dip {dip[0]:.1f} deg, azimuth {az[0]:.0f} deg at the transmitter; "
        f"{strength[-1]:.0f} nT, dip {dip[-1]:.1f} deg, azimuth {az[-1]:.0f} deg at the far end "
        f"(dip {_span(dip, '.1f')} deg along the path)"
    )


def _seconds(s: float) -> str:
    return f"{s:.0f} s" if s < 120 else f"{s / 60:.1f} min"


#: Resident memory of a solving process besides the grid and the land/sea mask, GB: Python, numpy,
#: the compiled kernels and the path data.
PROCESS_BASE_GB = 0.3
#: The 1 km land/sea mask, read when the ground kind is "auto". Together with the line above,
#: measured on the demo (1.7 GB peak with a 0.35 GB grid) and on a sweep's own process of the
#: example scenario (1.3 GB, the mask and no grid).
LAND_MASK_GB = 1.0


def describe(scenario) -> list[str]:
    """Lines that say what a run of ``scenario`` would compute and how big its grid is."""
    from cavity.errors import ResourceError
    from cavity.fdtd.grid import check_memory
    from cavity.paths import build_paths, direction_dependent
    from cavity.solve import plan_path

    s = scenario
    tx = s.transmitter
    lines = [f"Scenario     {s.title}"]
    if s.path:
        lines.append(f"File         {s.path}")
    where = f" at {_latlon(tx.latitude_deg, tx.longitude_deg)}" if tx.latitude_deg is not None else ""
    lines.append(f"Transmitter  {tx.name}{where}, {tx.radiated_power_w / 1e3:g} kW radiated")
    lines.append("Frequencies  " + ", ".join(f"{f / 1e3:g}" for f in tx.frequencies_hz) + " kHz")

    lines.append(f"Receivers    {len(s.receivers)}")
    rows = []
    for rx, geo in zip(s.receivers, s.receiver_geometry()):
        bearing = "-" if geo.bearing_deg is None else f"{geo.bearing_deg:.1f}"
        position = "by range" if rx.range_m is not None else _latlon(rx.latitude_deg, rx.longitude_deg)
        rows.append([rx.name, f"{geo.range_m / 1e3:.1f}", bearing, position])
    lines += _table(["name", "range_km", "bearing_deg", "position"], rows)

    ion_lines = _ionosphere_lines(s.ionosphere)
    lines.append(f"Ionosphere   {ion_lines[0]}")
    lines += [f"             {line}" for line in ion_lines[1:]]
    lines.append(f"Ground       {_ground_line(s.ground)}")
    lines.append(f"Geomagnetic  {_geomagnetic_line(s)}")

    paths = build_paths(s)
    why = direction_dependent(s)
    lines.append(f"Paths        {len(paths)}" + (f", one per bearing: {why}" if why else ", one serves every receiver"))
    for path in paths:
        names = ", ".join(s.receivers[i].name for i in path.receiver_indices)
        lines.append(f"  {path.label}: {names}")
        if s.ground.kind == "auto" or s.ground.segments:
            lines.append(f"    ground: {_runs(path.ground_kind, path.range_m)}")
        if path.daylight is not None:
            lines.append(f"    ionosphere: {_runs(path.daylight, path.range_m)}")
        if path.geomagnetic is not None:
            lines.append(f"    field: {_field_text(path.geomagnetic)}")

    sv = s.solver
    from cavity.ionosphere_forms import form_of

    ceiling = form_of(s.ionosphere).ceiling_m(s.ionosphere) is not None
    top_m = s.planned_top_m()
    rows, plans, windows = [], [], []
    for path in paths:
        run_plan = plan_path(s, path)  # the engine's own plan: grid, time step, simulated time
        plan = run_plan.grid
        plans.append(plan)
        windows.append((run_plan.t_min_s, run_plan.t_max_s))
        rows.append(
            [
                path.label,
                f"{path.max_range_m / 1e3:.0f}",
                f"{plan.dr_m:.0f}",
                f"{plan.dz_m:.0f}",
                f"{plan.dt_s * 1e6:.3f}",
                f"{plan.nr} x {plan.nz}",
                f"{plan.cells / 1e6:.2f}",
                f"{plan.n_steps:,}",
                f"{plan.memory_bytes / 1e9:.2f}",
            ]
        )
    top_text = (
        f"{top_m / 1e3:g} km, perfectly conducting ceiling"
        if ceiling
        else (f"{top_m / 1e3:g} km, then a {sv.pml_cells}-cell absorber")
    )
    lines.append("Grid         axisymmetric (r, z) Yee cells, one solve per path")
    lines.append(
        f"  top {top_text}; far-end absorber {sv.pml_cells} cells; "
        f"earth curvature {'on' if sv.earth_curvature else 'off (flat earth)'}"
    )
    lines += _table(
        ["path", "max_range_km", "dr_m", "dz_m", "dt_us", "nr x nz", "cells_M", "time_steps", "memory_GB"], rows
    )
    updates = sum(p.expected_cell_updates for p in plans)
    t_min = max(w[0] for w in windows)
    t_max = max(w[1] for w in windows)
    lines.append(
        f"  total {updates:.3g} cell updates (columns the wave has not reached are skipped); each solve simulates at least {t_min * 1e3:.1f} ms "
        f"(source, travel to the far end, settling), at most {t_max * 1e3:.1f} ms if not yet converged"
    )
    from cavity.checks.bench import REFERENCE_ENGINE_RATES, REFERENCE_MACHINE, estimate_seconds

    fast, slow = estimate_seconds(plans)
    lines.append(
        f"  run time: about {_seconds(fast)} to {_seconds(slow)} of solving (estimate for {REFERENCE_MACHINE}, "
        f"{REFERENCE_ENGINE_RATES[0] / 1e9:g}-{REFERENCE_ENGINE_RATES[1] / 1e9:g} G cell updates/s; "
        "cavity bench measures this machine)"
    )
    biggest = max(plans, key=lambda p: p.memory_bytes)
    try:
        check_memory(biggest)
        extra = PROCESS_BASE_GB + (LAND_MASK_GB if s.ground.kind == "auto" else 0.0)
        lines.append(
            f"  memory: fits ({biggest.memory_bytes / 1e9:.2f} GB for the largest path's grid; the process adds about "
            f"{extra:.1f} GB" + (" with the land/sea mask" if s.ground.kind == "auto" else "") + ")"
        )
    except ResourceError as exc:
        lines.append(f"  memory: would not fit: {exc}")
    return lines


@click.command("inspect")
@click.argument("scenario", metavar="SCENARIO.toml")
@friendly_errors
def command(scenario: str) -> None:
    """Show what a run of SCENARIO.toml would do, without running it.

    Prints the transmitter, the receivers with range (km) and bearing (deg) from the transmitter,
    the ionosphere and ground, the paths to solve, and the grid of each solve: cell sizes, time
    step, cells, time steps and memory.

    Example: cavity inspect examples/quillon_head.toml
    """
    from cavity import load_scenario

    loaded = load_scenario(scenario)
    for line in describe(loaded):
        click.echo(line)
