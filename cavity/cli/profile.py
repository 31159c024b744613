"""``cavity profile``: summarise an ionosphere altitude profile and optionally save it as a plot or file."""

from __future__ import annotations

from pathlib import Path

import click

from cavity.cli.common import friendly_errors

# Option bounds shown by click on bad input; they mirror the library's allowed ranges.
from cavity.scenario import BETA_RANGE_PER_KM as _BETA_PER_KM  # one source of the allowed ranges
from cavity.scenario import HPRIME_RANGE_KM as _HPRIME_KM

_ALTITUDE_KM = (0.0, 500.0)
_OUTPUT_SUFFIXES = (".png", ".pdf", ".nc", ".csv")


def _choose_profile(hprime_km, beta_per_km, preset_name, file_path):
    """The profile the options describe: (Dataset, description lines, exponential parameters or None)."""
    import profiles

    forms = [
        name
        for name, given in (
            ("--hprime/--beta", hprime_km is not None or beta_per_km is not None),
            ("--preset", preset_name is not None),
            ("--file", file_path is not None),
        )
        if given
    ]
    if len(forms) != 1:
        problem = "no profile given" if not forms else f"{' and '.join(forms)} given together"
        raise click.UsageError(
            f"{problem}: give exactly one of --hprime KM --beta PER_KM, --preset NAME or --file PATH"
        )
    if forms[0] == "--hprime/--beta":
        if hprime_km is None or beta_per_km is None:
            missing = "--beta" if beta_per_km is None else "--hprime"
            raise click.UsageError(f"{missing} is missing: --hprime and --beta go together")
        params = (hprime_km, beta_per_km)
        lines = [f"exponential profile: h' = {hprime_km:g} km, beta = {beta_per_km:g} per km"]
    elif forms[0] == "--preset":
        try:
            chosen = profiles.preset(preset_name)
        except profiles.ProfileError as exc:
            raise click.BadParameter(str(exc), param_hint="'--preset'") from None
        params = (chosen.hprime_km, chosen.beta_per_km)
        lines = [
            f"preset {preset_name.strip().lower()!r}: h' = {chosen.hprime_km:g} km, "
            f"beta = {chosen.beta_per_km:g} per km ({chosen.label})",
            f"reference: {chosen.reference}",
        ]
    else:
        dataset = profiles.read_profile(file_path)
        alt = dataset["altitude"].values
        lines = [f"profile file {file_path}: {alt.size} levels, {alt[0]:g}-{alt[-1]:g} km"]
        return dataset, lines, None
    dataset = profiles.wait_spies_profile(*params)
    lines.append(
        f"Wait-Spies exponential (NBS Technical Note 300); electron density held constant above "
        f"{dataset.attrs['cap_altitude_km']:g} km"
    )
    return dataset, lines, params


def _table(header: list[str], rows: list[list[str]]) -> str:
    """Right-aligned columns, each as wide as its widest cell."""
    widths = [max(len(cell) for cell in column) for column in zip(header, *rows)]
    return "\n".join("  ".join(cell.rjust(w) for cell, w in zip(row, widths)) for row in [header, *rows])


def _plot(dataset, path: Path, title: str, reflections: list[tuple[float, float]], fmt: str) -> None:
    """Log electron density and collision frequency against altitude, two panels, saved to ``path``."""
    import numpy as np
    from matplotlib.figure import Figure  # no pyplot: no global state, no GUI backend

    altitude = dataset["altitude"].values
    ne = dataset["electron_density"].values
    nu = dataset["collision_frequency"].values
    fig = Figure(figsize=(8.0, 5.5), layout="constrained")
    ax_ne, ax_nu = fig.subplots(1, 2, sharey=True)
    marker = "." if altitude.size <= 60 else None
    ax_ne.plot(np.where(ne > 0, ne, np.nan), altitude, color="tab:blue", marker=marker)
    ax_nu.plot(nu, altitude, color="tab:red", marker=marker)
    ax_ne.set_xscale("log")
    ax_nu.set_xscale("log")
    ax_ne.set_xlabel("electron density (m$^{-3}$)")
    ax_nu.set_xlabel("collision frequency (s$^{-1}$)")
    ax_ne.set_ylabel("altitude (km)")
    for ax in (ax_ne, ax_nu):
        ax.grid(True, which="both", alpha=0.3)
    styles = ["--", ":", "-.", (0, (5, 1, 1, 1))]
    for k, (frequency_khz, height_km) in enumerate(reflections):
        if np.isfinite(height_km):
            for ax in (ax_ne, ax_nu):
                ax.axhline(
                    height_km,
                    color="0.35",
                    linestyle=styles[k % len(styles)],
                    linewidth=0.9,
                    label=f"reflection at {frequency_khz:g} kHz: {height_km:.1f} km",
                )
    if any(np.isfinite(h) for _, h in reflections):
        ax_ne.legend(loc="upper left", fontsize=8)
    fig.suptitle(title, fontsize=10)
    fig.savefig(path, format=fmt, dpi=110)


@click.command("profile")
@click.option(
    "--hprime",
    "hprime_km",
    type=click.FloatRange(*_HPRIME_KM),
    metavar="KM",
    help="Reference height h' of an exponential profile, km (with --beta).",
)
@click.option(
    "--beta",
    "beta_per_km",
    type=click.FloatRange(*_BETA_PER_KM),
    metavar="PER_KM",
    help="Sharpness beta of an exponential profile, 1/km (with --hprime).",
)
@click.option(
    "--preset",
    "preset_name",
    metavar="NAME",
    help="Published parameters: day, day-2017, night, textbook-day, textbook-night.",
)
@click.option(
    "--file",
    "file_path",
    type=click.Path(path_type=Path),
    metavar="PATH",
    help="Profile file: CSV (altitude_km, electron_density_m3, collision_frequency_s) or netCDF.",
)
@click.option(
    "--frequency",
    "frequencies_khz",
    type=click.FloatRange(0.0, min_open=True),
    multiple=True,
    default=(20.0,),
    show_default=True,
    metavar="KHZ",
    help="Print the reflection height (omega_r = 2 pi f) at this frequency; repeatable.",
)
@click.option(
    "--at",
    "heights_km",
    type=click.FloatRange(*_ALTITUDE_KM),
    multiple=True,
    default=(60.0, 70.0, 80.0, 90.0),
    show_default=True,
    metavar="KM",
    help="Print electron density, collision frequency and omega_r at this altitude; repeatable.",
)
@click.option(
    "-o",
    "--output",
    type=click.Path(dir_okay=False, path_type=Path),
    metavar="PATH",
    help="Save a plot (.png, .pdf) or the profile itself (.nc netCDF, .csv).",
)
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
@friendly_errors
def command(hprime_km, beta_per_km, preset_name, file_path, frequencies_khz, heights_km, output, overwrite):
    """Summarise an ionosphere altitude profile: reflection heights and values at chosen altitudes.

    The profile is an exponential D region (Wait and Spies 1964) given by --hprime and --beta or by
    a published --preset, or a measured/modelled profile read with --file. The reflection height is
    where Wait's conductivity parameter omega_r = omega_p^2/nu equals the wave's angular frequency.

    \b
    Example:
      cavity profile --preset night --frequency 10 --frequency 30 -o night.png
      cavity profile --hprime 74 --beta 0.3 --at 65 --at 75 -o day.nc
    """
    import numpy as np

    import profiles

    if output is not None:
        suffix = output.suffix.lower()
        if suffix not in _OUTPUT_SUFFIXES:
            raise click.BadParameter(
                f"{str(output)!r} has suffix {suffix or '(none)'!r} (allowed: {', '.join(_OUTPUT_SUFFIXES)})",
                param_hint="'-o' / '--output'",
            )
        if output.exists() and not overwrite:
            raise click.ClickException(f"{output} exists already; pass --overwrite to replace it")
        folder = output.parent if str(output.parent) else Path(".")
        if not folder.is_dir():
            raise click.ClickException(f"output folder {folder} does not exist")

    dataset, lines, params = _choose_profile(hprime_km, beta_per_km, preset_name, file_path)

    frequency_hz = np.asarray(frequencies_khz, dtype=float) * 1e3
    if params is not None:
        heights_m = profiles.reflection_height_m(frequency_hz, *params)
    else:
        heights_m = profiles.sampled_reflection_height_m(dataset, frequency_hz)

    altitude_m = np.asarray(heights_km, dtype=float) * 1e3
    if params is not None:
        ne = profiles.electron_density(altitude_m, *params, cap_altitude_m=dataset.attrs["cap_altitude_km"] * 1e3)
        nu = profiles.collision_frequency(altitude_m)
    else:
        ne, nu = profiles.sample_profile(dataset, altitude_m)
    omega_r = profiles.plasma_frequency_squared(ne) / nu

    out = list(lines)
    out.append("")
    out.append(
        _table(
            ["frequency_khz", "reflection_height_km"],
            [
                [f"{f:g}", f"{h / 1e3:.2f}" if np.isfinite(h) else "not reached"]
                for f, h in zip(frequencies_khz, heights_m)
            ],
        )
    )
    out.append("")
    out.append(
        _table(
            ["altitude_km", "electron_density_m-3", "collision_frequency_s-1", "omega_r_s-1"],
            [[f"{z:g}", f"{a:.3e}", f"{b:.3e}", f"{c:.3e}"] for z, a, b, c in zip(heights_km, ne, nu, omega_r)],
        )
    )
    click.echo("\n".join(out))

    if output is None:
        return
    from profiles.userfile import atomic_write

    suffix = output.suffix.lower()
    if suffix in (".nc", ".csv"):
        profiles.write_profile(dataset, output, overwrite=True)
    else:
        title = lines[0]
        reflections = [(f, h / 1e3) for f, h in zip(frequencies_khz, heights_m)]
        atomic_write(output, lambda tmp: _plot(dataset, Path(tmp), title, reflections, suffix[1:]))
    click.echo(f"wrote {output}", err=True)
