"""Figures and summaries of coverage files (``cavity coverage``).

:func:`plot_coverage` draws the field on a map (filled contours in a sequential, perceptually
uniform colour scale that stays ordered in grey print), the coastlines traced from the land/sea
mask the solver itself uses (no download), the transmitter, the receivers, the map's edge, the
day/night zones of a ``utc`` scenario and the required-level (or signal-to-noise) contour.
:func:`coverage_summary` tabulates, for one file or several side by side (day and night), the area
where the field is at or above the required level and, in each bearing sector, the farthest range
at or above it and the range to which the whole sector is covered.

Definitions (those of ``cavity table``):

- required field: ``--required DB`` in dB re 1 uV/m;
- with a noise density N0 (dB re 1 uV/m per sqrt(Hz)) and a bandwidth B (Hz), SNR = Ez - (N0 + 10
  log10(B / 1 Hz)); the level drawn and summarised is SNR = ``snr_db`` (default 0 dB), i.e. the
  field N0 + 10 log10(B) + snr_db.

Areas are integrated in range and bearing from the file's bearing profiles, interpolated exactly as
the map is (:func:`cavity.sweeps.coverage.profile_values`) every :data:`SUMMARY_BEARING_STEP_DEG` or finer,
on a sphere of radius 6371 km: a cell between ranges r1 and r2 and bearings d(theta) apart has area
a^2 d(theta) (cos(r1/a) - cos(r2/a)), exact on the sphere (the solver's own earth model).
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, cast

import numpy as np

from cavity.errors import CavityError, ResultFileError

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

#: Largest bearing step of the summary's integration, degrees.
SUMMARY_BEARING_STEP_DEG = 0.5
#: Default width of the summary's bearing sectors, degrees.
DEFAULT_SECTOR_DEG = 45.0
#: Contour interval of the map, dB.
CONTOUR_STEP_DB = 5.0
#: Colour map: sequential, perceptually uniform, monotonic in lightness (reads in grey print).
COLOUR_MAP = "cividis"
#: Edges of the day/night transition in solar zenith angle, degrees (common practice).
DAY_LIMIT_DEG = 90.0
NIGHT_LIMIT_DEG = 99.0


def _require_coverage(ds: xr.Dataset) -> None:
    from cavity.sweeps.coverage import is_coverage

    if not is_coverage(ds):
        raise ResultFileError(
            "the dataset is not a coverage file (no latitude and bearing dimensions; see cavity coverage)"
        )


@dataclass(frozen=True)
class Level:
    """The level a map is judged by: a field in dB re 1 uV/m, and how to name it."""

    field_db: float
    label: str  # e.g. "required 40 dB re 1 uV/m" or "SNR 0 dB"
    definition: str  # the sentence for the notes
    short: str  # contour label, e.g. "40 dB" or "SNR 0 dB"


def make_level(
    required_db: float | None = None,
    noise_db: float | None = None,
    bandwidth_hz: float | None = None,
    snr_db: float = 0.0,
) -> Level | None:
    """The level from ``--required`` or ``--noise/--bandwidth`` (+ ``--snr``); None when neither is given.

    Raises
    ------
    CavityError
        Noise without bandwidth (or the reverse), both a required field and a noise, a bad number.
    """
    from cavity.reports.tables import noise_in_bandwidth_db

    for name, value in (("required", required_db), ("noise", noise_db), ("snr", snr_db)):
        if value is not None and not math.isfinite(float(value)):
            raise CavityError(f"{name} = {value!r} must be a finite number of dB")
    if (noise_db is None) != (bandwidth_hz is None):
        raise CavityError("noise and bandwidth go together: give both --noise and --bandwidth, or neither")
    if bandwidth_hz is not None and not (math.isfinite(bandwidth_hz) and bandwidth_hz > 0):
        raise CavityError(f"bandwidth = {bandwidth_hz!r} Hz must be a positive number")
    if noise_db is not None and bandwidth_hz is not None:
        if required_db is not None:
            raise CavityError("give --required (a field) or --noise/--bandwidth (a signal-to-noise ratio), not both")
        band = noise_in_bandwidth_db(noise_db, bandwidth_hz)
        return Level(
            field_db=band + float(snr_db),
            label=f"SNR {snr_db:g} dB",
            definition=(
                f"SNR = Ez - (N0 + 10 log10(B)) with N0 = {noise_db:g} dB re 1 uV/m per sqrt(Hz) and "
                f"B = {bandwidth_hz:g} Hz (noise {band:.1f} dB re 1 uV/m in the band); the level is "
                f"SNR = {snr_db:g} dB, a field of {band + snr_db:.1f} dB re 1 uV/m"
            ),
            short=f"SNR {snr_db:g} dB",
        )
    if required_db is None:
        return None
    return Level(
        float(required_db),
        f"required {required_db:g} dB re 1 uV/m",
        f"required field {required_db:g} dB re 1 uV/m",
        f"{required_db:g} dB",
    )


# --------------------------------------------------------------------------------------------------
# Summary
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SectorFigures:
    """Coverage figures of one bearing sector (or of all bearings) at one frequency."""

    sector_from_deg: float
    sector_to_deg: float
    area_km2: float
    farthest_km: float  # NaN: nowhere at or above the level
    unbroken_km: float  # range to which every bearing of the sector is at or above the level


def check_sector(sector_deg) -> None:
    """Refuse a sector width that is not a whole fraction of 360 deg (CavityError, one line)."""
    ok = (
        isinstance(sector_deg, (int, float))
        and not isinstance(sector_deg, bool)
        and math.isfinite(sector_deg)
        and 1.0 <= sector_deg <= 360.0
        and abs(360.0 / sector_deg - round(360.0 / sector_deg)) < 1e-9
    )
    if not ok:
        raise CavityError(
            f"sector_deg = {sector_deg!r} must divide 360 deg into whole sectors, 1 to 360 deg (e.g. 30, 45, 90)"
        )


def _fine_bearings(step_deg: float) -> tuple[np.ndarray, float]:
    """Bearings (deg) at the centres of equal sub-sectors no wider than SUMMARY_BEARING_STEP_DEG."""
    n_sub = max(1, math.ceil(step_deg / SUMMARY_BEARING_STEP_DEG - 1e-9))
    width = step_deg / n_sub
    n = int(round(360.0 / width))
    return (np.arange(n) + 0.5) * width, width


def coverage_figures(
    ds: xr.Dataset, level_db: float, *, frequency_khz: float | None = None, sector_deg: float = DEFAULT_SECTOR_DEG
) -> list[SectorFigures]:
    """Area at or above ``level_db`` and farthest ranges per sector, from the bearing profiles.

    The last entry covers all bearings (0-360). Ranges are km, areas km2 on a sphere of radius
    6371 km (see the module notes).
    """
    from cavity.sweeps.coverage import EARTH_RADIUS_KM, profile_values

    _require_coverage(ds)
    check_sector(sector_deg)
    freqs = np.atleast_1d(np.asarray(ds["frequency"].values, float))
    k = 0 if frequency_khz is None else int(np.argmin(np.abs(freqs - frequency_khz)))
    bearings = np.asarray(ds["bearing"].values, float)
    r = np.asarray(ds["range"].values, float)
    top = float(ds.attrs.get("coverage_range_km", r[-1]))
    amp = np.asarray(ds["bearing_ez_amplitude"].transpose("bearing", "frequency", "range").values, float)[:, k, :]
    step = float(ds.attrs.get("coverage_bearing_step_deg", 360.0 / bearings.size))
    fine, width = _fine_bearings(step)
    values = profile_values(bearings, r, amp, fine[:, None], r[None, :], top)  # (n_fine, R)
    above = np.nan_to_num(values, nan=-np.inf) >= level_db
    edges = np.concatenate([[0.0], 0.5 * (r[1:] + r[:-1]), [min(top, r[-1])]])
    a = EARTH_RADIUS_KM
    ring = a * a * math.radians(width) * (np.cos(edges[:-1] / a) - np.cos(edges[1:] / a))  # (R,)
    cell_area = np.where(above, ring[None, :], 0.0)
    # farthest range at or above, and first range below (unbroken coverage), per fine bearing
    farthest = np.where(above.any(axis=1), r[np.where(above, np.arange(r.size), -1).max(axis=1)], np.nan)
    first_below = np.where(~above, np.arange(r.size), r.size).min(axis=1)
    unbroken = np.where(first_below == 0, 0.0, np.concatenate([r, [r[-1]]])[np.maximum(first_below - 1, 0)])

    out = []
    n_sectors = int(round(360.0 / sector_deg))
    for s in range(n_sectors + 1):
        if s < n_sectors:
            lo, hi = s * sector_deg, (s + 1) * sector_deg
            sel = (fine >= lo) & (fine < hi)
        else:
            lo, hi, sel = 0.0, 360.0, np.ones(fine.size, bool)
        far = farthest[sel]
        out.append(
            SectorFigures(
                sector_from_deg=lo,
                sector_to_deg=hi,
                area_km2=float(cell_area[sel].sum()),
                farthest_km=float(np.nanmax(far)) if np.any(np.isfinite(far)) else math.nan,
                unbroken_km=float(unbroken[sel].min()),
            )
        )
    return out


def coverage_summary(
    datasets: Sequence[xr.Dataset] | xr.Dataset,
    level,
    fmt: str = "markdown",
    *,
    runs: Sequence[str] | None = None,
    sector_deg: float = DEFAULT_SECTOR_DEG,
) -> str:
    """The summary of one or more coverage files side by side, as Markdown (with notes) or CSV.

    Parameters
    ----------
    datasets : coverage dataset or sequence of them (e.g. day and night)
    level : Level
        From :func:`make_level`.
    fmt : {"markdown", "csv"}
    runs : labels of the datasets (default "1", "2", ... when there are several)
    sector_deg : width of the bearing sectors, degrees (dividing 360)
    """
    from cavity.reports.tables import Column, format_table

    datasets = list(datasets) if isinstance(datasets, (list, tuple)) else [cast("xr.Dataset", datasets)]
    for ds in datasets:
        _require_coverage(ds)
    if level is None:
        raise CavityError("a coverage summary needs a level: give --required DB, or --noise DB --bandwidth HZ")
    if runs is None:
        runs = [str(i + 1) for i in range(len(datasets))] if len(datasets) > 1 else [""]
    freqs = sorted({float(f) for ds in datasets for f in np.atleast_1d(ds["frequency"].values)})
    rows = []
    for f in freqs:
        per_run = []
        for ds in datasets:
            have = np.atleast_1d(np.asarray(ds["frequency"].values, float))
            per_run.append(
                coverage_figures(ds, level.field_db, frequency_khz=f, sector_deg=sector_deg)
                if np.any(np.abs(have - f) < 1e-6)
                else None
            )
        n = len(next(x for x in per_run if x is not None))
        for i in range(n):
            base = next(x for x in per_run if x is not None)[i]
            sector = "all bearings" if i == n - 1 else f"{base.sector_from_deg:g}-{base.sector_to_deg:g}"
            row = {
                "frequency_khz": f,
                "sector": sector,
                "sector_from_deg": base.sector_from_deg,
                "sector_to_deg": base.sector_to_deg,
            }
            for run, figs in zip(runs, per_run):
                fig = figs[i] if figs is not None else None
                prefix = f"{run}_" if run else ""
                row[f"{prefix}area_km2"] = fig.area_km2 if fig else math.nan
                row[f"{prefix}farthest_km"] = fig.farthest_km if fig else math.nan
                row[f"{prefix}unbroken_km"] = fig.unbroken_km if fig else math.nan
            rows.append(row)
    columns = [
        Column("frequency_khz", "Frequency (kHz)", "frequency_khz", 4, 2),
        Column("sector", "Bearings (deg)", "sector"),
    ]
    if fmt == "csv":
        columns += [
            Column("sector_from_deg", "", "sector_from_deg", 2),
            Column("sector_to_deg", "", "sector_to_deg", 2),
        ]
    for run in runs:
        prefix = f"{run}_" if run else ""
        name = f"{run}: " if run else ""
        columns += [
            Column(f"{prefix}area_km2", f"{name}area (km2)", f"{prefix}area_km2", 0, 0),
            Column(f"{prefix}farthest_km", f"{name}farthest (km)", f"{prefix}farthest_km", 1, 0),
            Column(f"{prefix}unbroken_km", f"{name}unbroken to (km)", f"{prefix}unbroken_km", 1, 0),
        ]
    notes = summary_notes(datasets, level, sector_deg) if fmt == "markdown" else ()
    return format_table(rows, columns, fmt, notes=notes)


def summary_notes(datasets, level, sector_deg: float) -> list[str]:
    """The lines under a Markdown summary: the level, the definitions, the method and the cautions."""
    ds = datasets[0]
    ranges = sorted({float(d.attrs.get("coverage_range_km", np.nan)) for d in datasets})
    steps = sorted({float(d.attrs.get("coverage_bearing_step_deg", np.nan)) for d in datasets})
    notes = [
        f"Level: {level.definition}. Area: where the field is at or above the level, within "
        f"{', '.join(f'{x:g}' for x in ranges)} km of the transmitter, in km2 on a sphere of radius 6371 km. "
        f"Farthest: the largest range at or above the level on any bearing of the sector; unbroken to: the "
        f"range out to which every bearing of the sector is at or above it (modal minima break coverage "
        f"before the farthest range). Sectors of {sector_deg:g} deg clockwise from true north.",
        f"Solved bearings every {', '.join(f'{x:g}' for x in steps)} deg; between them the field is "
        f"interpolated {ds.attrs.get('coverage_interpolation', '')}; the summary reads it every "
        f"{SUMMARY_BEARING_STEP_DEG:g} deg or finer.",
    ]
    from cavity.reports.reading import attr_text as _text

    cautions = list(dict.fromkeys(_text(d.attrs.get("cautions", "")).strip() for d in datasets))
    cautions = [c for c in cautions if c]
    if cautions:
        notes.append("Cautions: " + " ".join(cautions))
    return notes


# --------------------------------------------------------------------------------------------------
# Figure
# --------------------------------------------------------------------------------------------------


def coverage_figure(ds: xr.Dataset, *, level: Level | None = None, frequency_khz: float | None = None):
    """The coverage map as a matplotlib Figure (one panel per frequency, or the one asked for)."""
    import cartopy.crs as ccrs
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    from cavity.geo import points_along
    from cavity.reports.maps import draw_coastline, land_grid
    from cavity.sweeps.coverage import COVERAGE_CAUTION

    _require_coverage(ds)
    freqs = np.atleast_1d(np.asarray(ds["frequency"].values, float))
    if frequency_khz is not None:
        picks = [int(np.argmin(np.abs(freqs - frequency_khz)))]
        if abs(freqs[picks[0]] - frequency_khz) > 1e-6:
            raise CavityError(
                f"frequency = {frequency_khz:g} kHz is not in the file (it has {', '.join(f'{f:g}' for f in freqs)} kHz)"
            )
    else:
        picks = list(range(freqs.size))
    lat0 = float(ds.attrs["coverage_transmitter_latitude_deg"])
    lon0 = float(ds.attrs["coverage_transmitter_longitude_deg"])
    range_km = float(ds.attrs["coverage_range_km"])
    lat = np.asarray(ds["latitude"].values, float)
    lon = np.asarray(ds["longitude"].values, float)
    amp = np.asarray(ds["ez_amplitude"].transpose("frequency", "latitude", "longitude").values, float)
    finite = amp[np.isfinite(amp)]
    if finite.size == 0:
        raise ResultFileError("the coverage map holds no finite field values")
    lo = CONTOUR_STEP_DB * math.floor(np.percentile(finite, 1.0) / CONTOUR_STEP_DB)
    hi = CONTOUR_STEP_DB * math.ceil(np.percentile(finite, 99.5) / CONTOUR_STEP_DB)
    levels = np.arange(lo, hi + CONTOUR_STEP_DB / 2, CONTOUR_STEP_DB)

    proj = ccrs.AzimuthalEquidistant(central_longitude=lon0, central_latitude=lat0)
    plate = ccrs.PlateCarree()
    n = len(picks)
    fig = Figure(figsize=(8.5 * min(n, 2), 8.8 * math.ceil(n / 2)), layout="constrained")
    half = range_km * 1e3 * 1.06
    frame = (-half, half, -half, half)
    land = land_grid(proj, frame)  # one mask grid for every panel
    edge_b = np.linspace(0.0, 360.0, 721)
    edge = [points_along(lat0, lon0, b, [range_km * 1e3]) for b in edge_b]
    edge_lat = np.array([e[0][0] for e in edge])
    edge_lon = np.array([e[1][0] for e in edge])
    chi = None
    if "map_solar_zenith_angle" in ds:  # shaded within the map's disc only
        chi = np.where(np.isfinite(ds["map_range"].values), ds["map_solar_zenith_angle"].values, np.nan)
    names = [str(x) for x in np.atleast_1d(ds["receiver_name"].values)] if "receiver_name" in ds else []

    for panel, k in enumerate(picks):
        ax = fig.add_subplot(math.ceil(n / 2), min(n, 2), panel + 1, projection=proj)
        ax.set_extent([-half, half, -half, half], crs=proj)
        filled = ax.contourf(lon, lat, amp[k], levels=levels, cmap=COLOUR_MAP, extend="both", transform=plate, zorder=1)
        draw_coastline(ax, proj, frame, colour="#222222", zorder=3, land=land)
        legend: list = []
        if chi is not None:
            # light hatching where the sun is down, denser where the D region is in night
            ax.contourf(
                lon,
                lat,
                chi,
                levels=[DAY_LIMIT_DEG, NIGHT_LIMIT_DEG, 181.0],
                colors="none",
                hatches=["..", "xx"],
                transform=plate,
                zorder=2,
            )
            ax.contour(
                lon,
                lat,
                chi,
                levels=[DAY_LIMIT_DEG, NIGHT_LIMIT_DEG],
                colors="white",
                linestyles=["--", ":"],
                linewidths=1.0,
                transform=plate,
                zorder=3,
            )
            legend += [
                Patch(
                    facecolor="none",
                    hatch="..",
                    edgecolor="#555555",
                    label=f"sun below the horizon (chi > {DAY_LIMIT_DEG:g} deg)",
                ),
                Patch(
                    facecolor="none",
                    hatch="xx",
                    edgecolor="#555555",
                    label=f"D-region night (chi > {NIGHT_LIMIT_DEG:g} deg)",
                ),
            ]
        if level is not None:
            for colour, width in (("white", 3.4), ("black", 1.6)):
                lines = ax.contour(
                    lon,
                    lat,
                    amp[k],
                    levels=[level.field_db],
                    colors=colour,
                    linewidths=width,
                    transform=plate,
                    zorder=4,
                )
            if lines.allsegs and any(len(s) for s in lines.allsegs):
                ax.clabel(lines, fmt={level.field_db: level.short}, fontsize=9, inline=True)
            legend.append(Line2D([], [], color="black", linewidth=1.6, label=f"{level.label}"))
        ax.plot(edge_lon, edge_lat, color="#444444", linewidth=0.8, linestyle="-.", transform=ccrs.Geodetic(), zorder=4)
        ax.gridlines(draw_labels=True, linewidth=0.3, color="#444444", alpha=0.5, linestyle="--")
        style = dict(
            fontsize=8,
            zorder=7,
            transform=plate,
            bbox=dict(boxstyle="round,pad=0.2", facecolor="white", alpha=0.8, linewidth=0),
        )
        ax.plot(lon0, lat0, marker="*", markersize=15, color="white", markeredgecolor="k", transform=plate, zorder=6)
        for i, name in enumerate(names):
            rlat = float(ds["receiver_latitude"].values[i])
            rlon = float(ds["receiver_longitude"].values[i])
            ax.plot(rlon, rlat, marker="o", markersize=6, color="white", markeredgecolor="k", transform=plate, zorder=6)
            ax.text(rlon, rlat, f"  {name}", ha="left", va="top", **style)
        legend += [
            Line2D(
                [],
                [],
                marker="*",
                color="white",
                markeredgecolor="k",
                markersize=11,
                linestyle="none",
                label="transmitter",
            ),
            Line2D(
                [], [], marker="o", color="white", markeredgecolor="k", markersize=6, linestyle="none", label="receiver"
            ),
            Line2D([], [], color="#444444", linewidth=0.8, linestyle="-.", label=f"map edge, {range_km:g} km"),
            Line2D([], [], color="#222222", linewidth=0.6, label="coast (land/sea mask)"),
        ]
        ax.legend(handles=legend, loc="lower left", fontsize=7, framealpha=0.85)
        bar = fig.colorbar(filled, ax=ax, orientation="horizontal", shrink=0.8, pad=0.04)
        bar.set_label("Ez, dB re 1 uV/m (RMS)\n" + textwrap.fill(COVERAGE_CAUTION, 110), fontsize=8)
        when = ""
        if "utc" in str(ds.attrs.get("scenario", "")):
            from cavity.reports.reading import scenario_document

            utc = scenario_document(ds).get("ionosphere", {}).get("utc")
            when = f", {utc:%Y-%m-%d %H:%M} UTC" if hasattr(utc, "strftime") else ""
        ax.set_title(
            f"{ds.attrs.get('title', '')}\n{freqs[k]:g} kHz{when}; bearings every "
            f"{float(ds.attrs.get('coverage_bearing_step_deg', np.nan)):g} deg, interpolated between",
            fontsize=9,
        )
    return fig


def plot_coverage(
    ds: xr.Dataset, output, *, level: Level | None = None, frequency_khz: float | None = None, dpi: int = 150
):
    """Draw :func:`coverage_figure` and write it (PNG or PDF) atomically; returns the path."""
    from cavity.files import save_figure

    return save_figure(coverage_figure(ds, level=level, frequency_khz=frequency_khz), output, dpi=dpi)
