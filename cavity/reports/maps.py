"""Maps of a scenario: transmitter, receivers, the solved paths and the day/night zones.

The map uses an azimuthal equidistant projection centred on the transmitter, so every path from the
transmitter is a straight line and distances from it are true to scale. Everything drawn works
offline: cartopy's bundled stock image, gridlines, geodesic lines and the night shading. Coastlines
need Natural Earth shapefiles; they are drawn only when already on disk (never downloaded).

matplotlib and cartopy are imported inside the functions, so ``import cavity`` stays light.
"""

from __future__ import annotations

import os
from pathlib import Path

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

#: Edges of the day/night transition in solar zenith angle, degrees (physics.md 1, common
#: practice): the ground is in sunlight for chi < 90; the D region is in night from chi >= 99.
DAY_LIMIT_DEG = 90.0
NIGHT_LIMIT_DEG = 99.0


def coastline_file(resolutions=("50m", "110m")) -> Path | None:
    """Path of a Natural Earth coastline shapefile already on disk, or None.

    Looks where cartopy would (``cartopy.config['pre_existing_data_dir']``, then ``data_dir``)
    without calling its downloader, so nothing is ever fetched from the network.
    """
    import cartopy

    roots = []
    for key in ("pre_existing_data_dir", "data_dir"):
        value = cartopy.config.get(key)
        if value and str(value) not in ("", "."):
            roots.append(Path(value))
    env = os.environ.get("CARTOPY_DATA_DIR")
    if env:
        roots.append(Path(env))
    for resolution in resolutions:
        for root in roots:
            candidate = root / "shapefiles" / "natural_earth" / "physical" / f"ne_{resolution}_coastline.shp"
            if candidate.is_file():
                return candidate
    return None


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


def draw_map(scenario, paths, output_path, *, dpi: int = 150) -> list[str]:
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

    Returns
    -------
    list of str
        Notes for the user (coastlines skipped, receivers not drawn, no day/night shading).

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
    from cartopy.feature import ShapelyFeature
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
    half = max(float(np.abs(xy).max()), 300e3)
    limit = 2.0e7  # the projected globe is a disc of radius pi * a (about 20,000 km)
    half = min(half * 1.12 + 200e3, limit)

    fig = Figure(figsize=(9.0, 9.0), layout="constrained")
    ax = fig.add_subplot(projection=proj)
    if half >= 1.6e7:
        ax.set_global()  # near-antipodal paths: the whole disc (set_extent misbehaves at its rim)
    else:
        ax.set_extent([-half, half, -half, half], crs=proj)
    ax.stock_img()

    legend = []
    ion = scenario.ionosphere
    if ion.form == "utc" and ion.utc is not None:
        from datetime import timezone

        when = ion.utc.astimezone(timezone.utc)
        # Nightshade's "refraction" is the sun's elevation (deg) at the shading edge: 0 gives chi > 90,
        # -9 gives chi > 99 (the D region in darkness under the day/night rule).
        ax.add_feature(Nightshade(when, refraction=90.0 - DAY_LIMIT_DEG, alpha=0.25, delta=0.5), zorder=2)
        ax.add_feature(Nightshade(when, refraction=90.0 - NIGHT_LIMIT_DEG, alpha=0.3, delta=0.5), zorder=2)
        legend += [
            Patch(facecolor="k", alpha=0.25, label=f"sun below the horizon (chi > {DAY_LIMIT_DEG:g} deg)"),
            Patch(facecolor="k", alpha=0.475, label=f"D-region night (chi > {NIGHT_LIMIT_DEG:g} deg)"),
        ]
        time_text = f"{when:%Y-%m-%d %H:%M} UTC"
    else:
        notes.append("no day/night shading: the ionosphere is not given by utc = ...")
        time_text = "no time given"

    coast = coastline_file()
    if coast is not None:
        from cartopy.io.shapereader import Reader

        ax.add_feature(ShapelyFeature(Reader(str(coast)).geometries(), plate, facecolor="none",
                                      edgecolor="#333333", linewidth=0.5), zorder=3)
    else:
        notes.append(
            "coastlines skipped: no Natural Earth coastline shapefile on disk "
            "(set CARTOPY_DATA_DIR to a folder holding shapefiles/natural_earth/physical/ne_50m_coastline.shp)"
        )

    gl = ax.gridlines(draw_labels=True, linewidth=0.4, color="#444444", alpha=0.5, linestyle="--")
    gl.top_labels = gl.right_labels = False

    kinds_drawn: set[str] = set()
    for p in paths:
        if p.latitude_deg is not None:
            for a, b, kind in _runs(p.ground_kind):
                colour = GROUND_COLOURS.get(str(kind), "#000000")
                ax.plot(p.longitude_deg[a:b], p.latitude_deg[a:b], transform=geodetic, color="white",
                        linewidth=4.0, solid_capstyle="butt", zorder=4)
                ax.plot(p.longitude_deg[a:b], p.latitude_deg[a:b], transform=geodetic, color=colour,
                        linewidth=2.4, solid_capstyle="butt", zorder=5)
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
                ax.plot([tx.longitude_deg, rx.longitude_deg], [tx.latitude_deg, rx.latitude_deg],
                        transform=geodetic, color="white", linewidth=4.0, zorder=4)
                ax.plot([tx.longitude_deg, rx.longitude_deg], [tx.latitude_deg, rx.latitude_deg],
                        transform=geodetic, color=colour, linewidth=2.4, zorder=5)
                drawn = True
            if drawn:
                kinds_drawn.add(kind)
    for kind in sorted(kinds_drawn):
        legend.append(Line2D([], [], color=GROUND_COLOURS.get(kind, "#000000"), linewidth=2.4,
                             label=f"path over {kind.replace('_', ' ')}"))

    text_style = dict(fontsize=9, zorder=7, transform=plate,
                      bbox=dict(boxstyle="round,pad=0.2", facecolor="white", alpha=0.8, linewidth=0))
    ax.plot(tx.longitude_deg, tx.latitude_deg, marker="*", markersize=16, color="#d62728",
            markeredgecolor="k", transform=plate, zorder=6)
    ax.text(tx.longitude_deg, tx.latitude_deg, f"  {tx.name}", ha="left", va="bottom", **text_style)
    for i in placed:
        rx = scenario.receivers[i]
        ax.plot(rx.longitude_deg, rx.latitude_deg, marker="o", markersize=7, color="#ffdd00",
                markeredgecolor="k", transform=plate, zorder=6)
        ax.text(rx.longitude_deg, rx.latitude_deg, f"  {rx.name}", ha="left", va="top", **text_style)
    unplaced = [rx.name for rx in scenario.receivers if rx.latitude_deg is None]
    if unplaced:
        notes.append(f"not drawn (given by range only): {', '.join(unplaced)}")
    legend += [
        Line2D([], [], marker="*", color="#d62728", markeredgecolor="k", markersize=12, linestyle="none",
               label=f"transmitter {tx.name}"),
        Line2D([], [], marker="o", color="#ffdd00", markeredgecolor="k", markersize=7, linestyle="none",
               label="receiver"),
    ]
    ax.legend(handles=legend, loc="lower left", fontsize=8, framealpha=0.85)
    ax.set_title(f"{scenario.title}\n{time_text}; azimuthal equidistant about the transmitter", fontsize=10)

    from cavity.files import save_figure  # the one atomic figure writer

    save_figure(fig, path, dpi=dpi)
    return notes
