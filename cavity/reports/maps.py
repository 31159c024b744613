"""Maps of a scenario: transmitter, receivers, the solved paths and the day/night zones.

The map uses an azimuthal equidistant projection centred on the transmitter, so every path from the
transmitter is a straight line, distances from it are true to scale and range rings are circles.
Everything drawn works offline: land, sea and the coastline come from the 1 km land/sea grid of
``global_land_mask`` (the mask the ground model uses, shipped inside that package), sampled on the
map's frame and contoured; gridlines, geodesic lines and the night shading are computed. Nothing is
ever downloaded.

matplotlib and cartopy are imported inside the functions, so ``import cavity`` stays light.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import numpy as np

from cavity.errors import CavityError, ScenarioError

#: Output formats by file suffix.
MAP_FORMATS = {".png": "png", ".pdf": "pdf"}

#: Colours of the ground classes along the drawn paths.
GROUND_COLOURS = {
    "sea": "#1f4e9c",
    "land": "#8c5a2b",
    "wet_ground": "#2e7d32",
    "dry_ground": "#d4a017",
    "ice": "#7fd3e8",
    "perfect": "#555555",
    "custom": "#8e44ad",
}

#: Land and sea fill and the coastline (pale, so that the paths' colours stand out on either).
LAND_COLOUR = "#ece4cf"
SEA_COLOUR = "#f3f7fb"
COAST_COLOUR = "#4a4a4a"
#: Samples across the frame for the land/sea background (about 5-10 km per sample on a demo map).
BACKGROUND_SAMPLES = 700
#: Shading of the sun zones: twilight (sun below the horizon, D region not yet in night) hatched and
#: light; night dark. Different in grey print too.
TWILIGHT_SHADE: dict[str, Any] = dict(facecolor="#9a9ab8", alpha=0.30, hatch="////", edgecolor="#6a6a90", linewidth=0.0)
NIGHT_SHADE: dict[str, Any] = dict(facecolor="#1c1c40", alpha=0.55, edgecolor="none", linewidth=0.0)

#: Edges of the day/night transition in solar zenith angle, degrees (docs/physics.md, common
#: practice): the ground is in sunlight for chi < 90; the D region is in night from chi >= 99.
DAY_LIMIT_DEG = 90.0
NIGHT_LIMIT_DEG = 99.0


def ring_step_km(reach_km: float) -> float:
    """A round spacing of range rings giving about three to six rings out to ``reach_km``."""
    for step in (100.0, 200.0, 250.0, 500.0, 1000.0, 2000.0, 2500.0, 5000.0):
        if reach_km / step <= 6.0:
            return step
    return 5000.0


def land_grid(proj, extent, samples: int = BACKGROUND_SAMPLES):
    """Land (1) and sea (0) from the land/sea mask on a samples x samples grid of the projected
    ``extent`` (x0, x1, y0, y1); returns the projected X, Y and the mask."""
    import cartopy.crs as ccrs

    from cavity.geo import is_land

    x0, x1, y0, y1 = extent
    x = np.linspace(x0, x1, samples)
    y = np.linspace(y0, y1, samples)
    X, Y = np.meshgrid(x, y)
    lonlat = ccrs.PlateCarree().transform_points(proj, X.ravel(), Y.ravel())
    ok = np.all(np.isfinite(lonlat[:, :2]), axis=1) & (np.abs(lonlat[:, 1]) <= 90.0)
    land = np.zeros(X.size)
    land[ok] = is_land(lonlat[ok, 1], ((lonlat[ok, 0] + 180.0) % 360.0) - 180.0)
    return X, Y, land.reshape(X.shape)


def draw_coastline(
    ax, proj, extent, *, colour: str = COAST_COLOUR, zorder: int = 1, samples: int = BACKGROUND_SAMPLES, land=None
) -> None:
    """The coastline, the 0.5 contour of the land/sea mask (no download: the mask is installed)."""
    X, Y, mask = land if land is not None else land_grid(proj, extent, samples)
    ax.contour(X, Y, mask, levels=[0.5], colors=colour, linewidths=0.6, transform=proj, zorder=zorder)


def land_sea_background(ax, proj, extent, samples: int = BACKGROUND_SAMPLES) -> None:
    """Fill land and sea and draw the coastline from the land/sea mask, in projected coordinates."""
    from matplotlib.colors import ListedColormap

    X, Y, land = land_grid(proj, extent, samples)
    ax.imshow(
        land,
        origin="lower",
        extent=extent,
        transform=proj,
        cmap=ListedColormap([SEA_COLOUR, LAND_COLOUR]),
        vmin=0,
        vmax=1,
        interpolation="nearest",
        zorder=0,
    )
    draw_coastline(ax, proj, extent, land=(X, Y, land))


def _check_output(output_path) -> tuple[Path, str]:
    path = Path(os.fspath(output_path)).expanduser()
    fmt = MAP_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise CavityError(
            f"output = {str(path)!r} has suffix {path.suffix or '(none)'!r}; a map is written as .png or .pdf"
        )
    if path.exists() and path.is_dir():
        raise CavityError(f"output = {str(path)!r} is a folder; give a file name ending in .png or .pdf")
    if not path.parent.exists():
        raise CavityError(f"output folder {str(path.parent)!r} does not exist")
    return path, fmt


def _runs(kinds: np.ndarray):
    """(start, stop) index pairs of runs of equal ground kind; neighbouring runs share one sample."""
    start = 0
    for k in range(1, len(kinds) + 1):
        if k == len(kinds) or kinds[k] != kinds[start]:
            yield start, min(k + 1, len(kinds)), kinds[start]
            start = k


def draw_map(scenario, paths, output_path, *, dpi: int = 150, title: str | None = None) -> list[str]:
    """Draw the transmitter, receivers and paths on a map and write it (PNG or PDF) atomically.

    Parameters
    ----------
    scenario : cavity.scenario.Scenario
        A scenario whose transmitter has a position.
    paths : list of cavity.paths.PathModel
        From :func:`cavity.paths.build_paths`; paths with a bearing are drawn along their samples
        and coloured by ground class; a direction-free path is drawn as the geodesic to each
        receiver with a position.
    output_path : str or os.PathLike
        File to write; ``.png`` or ``.pdf``. Written to a temporary name in the same folder, then
        renamed, so an existing file is replaced whole or not at all.
    dpi : int
        Resolution of a PNG.
    title : str, optional
        First title line; default names the transmitter and frequency (not the scenario's title,
        so that one map serves a day and a night run of the same paths).

    Returns
    -------
    list of str
        Notes for the user (receivers not drawn, no day/night shading).

    Raises
    ------
    ScenarioError
        The transmitter has no position.
    CavityError
        The output name has another suffix or its folder does not exist.
    """
    tx = scenario.transmitter
    if tx.latitude_deg is None or tx.longitude_deg is None:
        raise ScenarioError(
            "transmitter.latitude_deg is missing: a map needs positions (this scenario gives receivers by range only)"
        )
    path, _ = _check_output(output_path)

    import cartopy.crs as ccrs
    from cartopy.feature.nightshade import Nightshade
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    notes: list[str] = []
    geodetic = ccrs.Geodetic()
    plate = ccrs.PlateCarree()
    proj = ccrs.AzimuthalEquidistant(central_longitude=tx.longitude_deg, central_latitude=tx.latitude_deg)

    # Everything that must fit on the map.
    lats = [tx.latitude_deg]
    lons = [tx.longitude_deg]
    placed = [i for i, rx in enumerate(scenario.receivers) if rx.latitude_deg is not None]
    for i in placed:
        lats.append(scenario.receivers[i].latitude_deg)
        lons.append(scenario.receivers[i].longitude_deg)
    for p in paths:
        if p.latitude_deg is not None:
            lats.extend(p.latitude_deg.tolist())
            lons.extend(p.longitude_deg.tolist())
    xy = proj.transform_points(geodetic, np.asarray(lons, float), np.asarray(lats, float))[:, :2]
    xy = xy[np.all(np.isfinite(xy), axis=1)]
    # the frame fits the transmitter, receivers and paths (a margin of 12 % and at least 150 km),
    # made square so that the range rings stay round on the page
    lo, hi = xy.min(axis=0), xy.max(axis=0)
    centre = 0.5 * (lo + hi)
    half = max(float((hi - lo).max()) * 0.5 * 1.12 + 150e3, 300e3)
    limit = 2.0e7  # the projected globe is a disc of radius pi * a (about 20,000 km)
    fig = Figure(figsize=(9.0, 9.0), layout="constrained")
    ax = fig.add_subplot(projection=proj)
    if half >= 0.8 * limit:
        ax.set_global()  # near-antipodal paths: the whole disc (set_extent misbehaves at its rim)
        extent = (-limit, limit, -limit, limit)
    else:
        extent = (centre[0] - half, centre[0] + half, centre[1] - half, centre[1] + half)
        ax.set_extent(list(extent), crs=proj)
    land_sea_background(ax, proj, extent)

    # range rings about the transmitter: circles in this projection, labelled in km
    corners = np.array([[extent[0], extent[2]], [extent[0], extent[3]], [extent[1], extent[2]], [extent[1], extent[3]]])
    reach_km = float(np.hypot(corners[:, 0], corners[:, 1]).max()) / 1e3
    step = ring_step_km(min(reach_km, limit / 1e3))
    theta = np.linspace(0.0, 2.0 * np.pi, 361)
    for radius_km in np.arange(step, min(reach_km, limit / 1e3) + 1e-6, step):
        r_m = radius_km * 1e3
        ax.plot(
            r_m * np.sin(theta),
            r_m * np.cos(theta),
            transform=proj,
            color="#7a5c9e",
            linewidth=0.8,
            linestyle=(0, (6, 3)),
            zorder=3,
        )
        for bearing in (45.0, 225.0):  # a label where the ring crosses two diagonals (one stays in frame)
            bx, by = r_m * np.sin(np.radians(bearing)), r_m * np.cos(np.radians(bearing))
            if extent[0] < bx < extent[1] and extent[2] < by < extent[3]:
                ax.text(
                    bx,
                    by,
                    f"{radius_km:,.0f} km",
                    transform=proj,
                    fontsize=7,
                    color="#5a3c7e",
                    zorder=3,
                    ha="center",
                    va="center",
                    bbox=dict(boxstyle="round,pad=0.1", facecolor="white", alpha=0.75, linewidth=0),
                )

    legend: list[Any] = []  # legend handles: patches and lines
    from cavity.ionosphere_forms import form_of

    instant = form_of(scenario.ionosphere).instant(scenario.ionosphere)
    if instant is not None:
        from datetime import timezone

        when = instant.astimezone(timezone.utc)
        # Nightshade's "refraction" is the sun's elevation (deg) at the shading edge: 0 gives chi > 90,
        # -9 gives chi > 99 (the D region in darkness under the day/night rule).
        ax.add_feature(Nightshade(when, refraction=90.0 - DAY_LIMIT_DEG, delta=0.5, **TWILIGHT_SHADE), zorder=2)
        ax.add_feature(Nightshade(when, refraction=90.0 - NIGHT_LIMIT_DEG, delta=0.5, **NIGHT_SHADE), zorder=2)
        legend += [
            Patch(
                **TWILIGHT_SHADE,
                label=f"twilight: sun below the horizon (chi {DAY_LIMIT_DEG:g}-{NIGHT_LIMIT_DEG:g} deg)",
            ),
            Patch(**NIGHT_SHADE, label=f"D-region night (chi > {NIGHT_LIMIT_DEG:g} deg)"),
        ]
        time_text = f"{when:%Y-%m-%d %H:%M} UTC"
    else:
        notes.append("no day/night shading: the ionosphere is not given by utc = ...")
        time_text = "no time given"

    gl = ax.gridlines(draw_labels=True, linewidth=0.4, color="#444444", alpha=0.5, linestyle="--")
    gl.top_labels = gl.right_labels = False

    kinds_drawn: set[str] = set()
    for p in paths:
        if p.latitude_deg is not None:
            for a, b, kind in _runs(p.ground_kind):
                colour = GROUND_COLOURS.get(str(kind), "#000000")
                ax.plot(
                    p.longitude_deg[a:b],
                    p.latitude_deg[a:b],
                    transform=geodetic,
                    color="white",
                    linewidth=4.0,
                    solid_capstyle="butt",
                    zorder=4,
                )
                ax.plot(
                    p.longitude_deg[a:b],
                    p.latitude_deg[a:b],
                    transform=geodetic,
                    color=colour,
                    linewidth=2.4,
                    solid_capstyle="butt",
                    zorder=5,
                )
                kinds_drawn.add(str(kind))
        else:
            uniform_kind = len(set(p.ground_kind.tolist())) == 1
            kind = str(p.ground_kind[0]) if uniform_kind else "ground varying with range"
            colour = GROUND_COLOURS.get(kind, "#000000")
            drawn = False
            for i in p.receiver_indices:
                rx = scenario.receivers[i]
                if rx.latitude_deg is None:
                    continue
                ax.plot(
                    [tx.longitude_deg, rx.longitude_deg],
                    [tx.latitude_deg, rx.latitude_deg],
                    transform=geodetic,
                    color="white",
                    linewidth=4.0,
                    zorder=4,
                )
                ax.plot(
                    [tx.longitude_deg, rx.longitude_deg],
                    [tx.latitude_deg, rx.latitude_deg],
                    transform=geodetic,
                    color=colour,
                    linewidth=2.4,
                    zorder=5,
                )
                drawn = True
            if drawn:
                kinds_drawn.add(kind)
    for kind in sorted(kinds_drawn):
        legend.append(
            Line2D(
                [],
                [],
                color=GROUND_COLOURS.get(kind, "#000000"),
                linewidth=2.4,
                label=f"path over {kind.replace('_', ' ')}",
            )
        )

    text_style = dict(
        fontsize=9,
        zorder=7,
        transform=plate,
        bbox=dict(boxstyle="round,pad=0.2", facecolor="white", alpha=0.8, linewidth=0),
    )
    ax.plot(
        tx.longitude_deg,
        tx.latitude_deg,
        marker="*",
        markersize=16,
        color="#d62728",
        markeredgecolor="k",
        transform=plate,
        zorder=6,
    )
    ax.text(tx.longitude_deg, tx.latitude_deg, f"  {tx.name}", ha="left", va="bottom", **text_style)
    for i in placed:
        rx = scenario.receivers[i]
        ax.plot(
            rx.longitude_deg,
            rx.latitude_deg,
            marker="o",
            markersize=7,
            color="#ffdd00",
            markeredgecolor="k",
            transform=plate,
            zorder=6,
        )
        ax.text(rx.longitude_deg, rx.latitude_deg, f"  {rx.name}", ha="left", va="top", **text_style)
    unplaced = [rx.name for rx in scenario.receivers if rx.latitude_deg is None]
    if unplaced:
        notes.append(f"not drawn (given by range only): {', '.join(unplaced)}")
    legend += [
        Line2D(
            [],
            [],
            marker="*",
            color="#d62728",
            markeredgecolor="k",
            markersize=12,
            linestyle="none",
            label=f"transmitter {tx.name}",
        ),
        Line2D(
            [], [], marker="o", color="#ffdd00", markeredgecolor="k", markersize=7, linestyle="none", label="receiver"
        ),
    ]
    legend.append(
        Line2D(
            [],
            [],
            color="#7a5c9e",
            linewidth=0.8,
            linestyle=(0, (6, 3)),
            label=f"range from the transmitter, every {step:,.0f} km",
        )
    )
    ax.legend(handles=legend, loc="lower left", fontsize=8, framealpha=0.85)
    freqs = ", ".join(f"{f / 1e3:g}" for f in np.atleast_1d(tx.frequencies_hz)) if hasattr(tx, "frequencies_hz") else ""
    heading = (
        title
        if title is not None
        else f"{tx.name}{f', {freqs} kHz' if freqs else ''}: transmitter, receivers and paths"
    )
    ax.set_title(
        f"{heading}\n{time_text}; azimuthal equidistant about the transmitter; coastline from the 1 km land/sea mask",
        fontsize=10,
    )

    from cavity.files import save_figure  # the one atomic figure writer

    save_figure(fig, path, dpi=dpi)
    return notes
