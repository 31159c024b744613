"""Figures and tables of sweep files (result files with a ``time`` dimension).

:func:`plot_diurnal` draws the field at each receiver against UTC, one panel per frequency, with the
geometric sunrise and sunset at the midpoint of each receiver's path marked (solar zenith angle
crossing 90 deg, Michalsky 1988 through :func:`cavity.geo.solar_zenith_deg`), and below it the level
each path carries to its far half (:func:`path_levels`); :func:`table_diurnal` gives the minimum,
median and maximum per receiver and frequency, and the median by day and by night. ``cavity plot``
and ``cavity table`` call them for a dataset that has a ``time`` dimension.
"""

from __future__ import annotations

import math
import tomllib
import warnings
from datetime import datetime, timedelta, timezone
from typing import TYPE_CHECKING, Any

import numpy as np

from cavity.errors import ResultFileError

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd
    import xarray as xr

#: Sampling of the solar zenith angle when looking for its 90 deg crossings.
SUN_SAMPLE = timedelta(minutes=2)
#: Most samples of the zenith angle per receiver (a long window is sampled more coarsely).
MAX_SUN_SAMPLES = 20_000
#: The far part of a path whose level :func:`path_levels` follows starts at this fraction of the
#: farthest receiver's range and ends at that receiver.
FAR_FRACTION = 0.5


def _require_sweep(ds: xr.Dataset) -> None:
    if "time" not in ds.dims:
        raise ResultFileError("the dataset has no time dimension; it is not a sweep file (see cavity sweep)")
    for name in ("receiver_name", "receiver_ez_amplitude"):
        if name not in ds.variables:
            raise ResultFileError(f"the sweep dataset has no {name} variable")


def _utc(value) -> datetime:
    """numpy datetime64 (UTC, naive) -> aware datetime."""
    seconds = (np.datetime64(value, "ns") - np.datetime64("1970-01-01T00:00:00", "ns")) / np.timedelta64(1, "s")
    return datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(seconds=float(seconds))


def _transmitter_position(ds: xr.Dataset) -> tuple[float, float] | None:
    """The transmitter's (latitude, longitude) from the scenario text the file embeds, if given."""
    try:
        tx = tomllib.loads(str(ds.attrs.get("scenario", ""))).get("transmitter", {})
    except tomllib.TOMLDecodeError:
        return None
    lat, lon = tx.get("latitude_deg"), tx.get("longitude_deg")
    if isinstance(lat, (int, float)) and isinstance(lon, (int, float)):
        return float(lat), float(lon)
    return None


def path_midpoints(ds: xr.Dataset) -> list[tuple[float, float] | None]:
    """Midpoint (latitude, longitude) of the geodesic from the transmitter to each receiver.

    None for a receiver given by range only, or when the transmitter has no position. Uses the
    WGS84 geodesic (:func:`cavity.geo.distance_bearing`, :func:`cavity.geo.points_along`).
    """
    from cavity.geo import distance_bearing, points_along

    tx = _transmitter_position(ds)
    n = ds.sizes.get("receiver", 0)
    if tx is None or "receiver_latitude" not in ds or "receiver_longitude" not in ds:
        return [None] * n
    out: list[tuple[float, float] | None] = []
    for lat, lon in zip(ds["receiver_latitude"].values, ds["receiver_longitude"].values):
        if not (np.isfinite(lat) and np.isfinite(lon)):
            out.append(None)
            continue
        distance, bearing = distance_bearing(tx[0], tx[1], float(lat), float(lon))
        mlat, mlon = points_along(tx[0], tx[1], bearing, [distance / 2.0])
        out.append((float(mlat[0]), float(mlon[0])))
    return out


def sun_crossings(lat_deg: float, lon_deg: float, start: datetime, stop: datetime) -> list[tuple[datetime, str]]:
    """Geometric sunrises and sunsets (solar zenith angle through 90 deg) at a place, in a window.

    Returns
    -------
    list of (datetime, "sunrise" | "sunset")
        In time order; the instant is interpolated linearly between samples a few minutes apart
        (error well under a minute: the zenith angle is smooth).
    """
    from cavity.geo import solar_zenith_deg

    span = stop - start
    step = max(SUN_SAMPLE, span / MAX_SUN_SAMPLES)
    n = int(span / step) + 2
    instants = [start + k * step for k in range(n)]
    chi = np.array([solar_zenith_deg(t, lat_deg, lon_deg) for t in instants]) - 90.0
    out = []
    for k in range(n - 1):
        a, b = chi[k], chi[k + 1]
        if a == 0.0 or (a > 0) == (b > 0):
            continue
        when = instants[k] + (instants[k + 1] - instants[k]) * (a / (a - b))
        if start <= when <= stop:
            out.append((when, "sunrise" if b < a else "sunset"))
    return out


def path_levels(ds: xr.Dataset) -> tuple[xr.DataArray, list[str]] | None:
    """Median Ez over the far half of each path against time, and a label per path.

    The far half runs from :data:`FAR_FRACTION` of the farthest receiver's range on the path to that
    receiver. A receiver's own value depends on where the modal interference pattern puts its
    minima, and these move with h' (about 85 km per km of h' near 3,000 km on the example's night
    path); the median over a stretch of the path longer than the pattern's minima shows the level the
    guide carries that far (night above day at long range is common practice) without that
    sensitivity.

    Returns
    -------
    (xarray.DataArray, list of str) or None
        Levels in dB re 1 uV/m on (path, frequency, time) (NaN for a path without receivers) and
        labels such as ``"to Oryx Hollow, 1493-2986 km"``; None when the dataset holds no field
        along range (a file reduced to receiver values).
    """
    import xarray as xr

    needed = ("ez_amplitude", "receiver_path", "receiver_range", "range")
    if any(name not in ds.variables for name in needed) or "path" not in ds.dims:
        return None
    r = ds["range"].values
    amp = ds["ez_amplitude"].transpose("path", "frequency", "range", "time").values
    names = [str(x) for x in ds["receiver_name"].values]
    rx_path = ds["receiver_path"].values.astype(int)
    rx_range = ds["receiver_range"].values.astype(float)
    levels = np.full((ds.sizes["path"], ds.sizes["frequency"], ds.sizes["time"]), np.nan)
    labels = []
    for p in range(ds.sizes["path"]):
        on = [i for i in range(len(names)) if rx_path[i] == p and np.isfinite(rx_range[i])]
        if not on:
            labels.append(f"path {p}: no receiver")
            continue
        far = max(on, key=lambda i: rx_range[i])
        lo, hi = FAR_FRACTION * rx_range[far], rx_range[far]
        band = (r >= lo) & (r <= hi)
        if band.any():
            with warnings.catch_warnings():  # an instant that was not solved is all NaN: NaN level
                warnings.simplefilter("ignore", RuntimeWarning)
                levels[p] = np.nanmedian(amp[p][:, band, :], axis=1)
        labels.append(f"to {names[far]}, {lo:.0f}-{hi:.0f} km")
    da = xr.DataArray(
        levels,
        dims=("path", "frequency", "time"),
        coords={"time": ds["time"].values, "frequency": ds["frequency"].values},
        attrs={"units": "dB re 1 uV/m", "long_name": "median Ez over the far half of the path"},
    )
    return da, labels


def daylight_at_receivers(ds: xr.Dataset) -> np.ndarray | None:
    """ "day", "night" or "transition" per (receiver, time): the state of the path up to the receiver.

    A receiver is in day (night) at an instant when every sample of its path from the transmitter to
    it is in day (night) by the tool's rule (solar zenith angle <= 90 deg, >= 99 deg:
    :func:`profiles.daynight.daylight_class`); otherwise the terminator lies across it. None when the
    dataset holds no solar zenith angles.
    """
    from profiles.daynight import daylight_class

    needed = ("solar_zenith_angle", "receiver_path", "receiver_range", "range")
    if any(name not in ds.variables for name in needed):
        return None
    chi = ds["solar_zenith_angle"].transpose("path", "range", "time").values
    r = ds["range"].values
    out = np.full((ds.sizes["receiver"], ds.sizes["time"]), "transition", dtype=object)
    for i, (p, rr) in enumerate(zip(ds["receiver_path"].values.astype(int), ds["receiver_range"].values)):
        if not np.isfinite(rr):
            continue
        upto = chi[p][r <= rr]
        if upto.size == 0 or not np.isfinite(upto).all():
            continue
        state = daylight_class(upto)
        out[i] = np.where(
            (state == "day").all(axis=0), "day", np.where((state == "night").all(axis=0), "night", "transition")
        )
    return out


def plot_diurnal(ds: xr.Dataset, output_path, *, quantity: str = "ez") -> list[str]:
    """Draw amplitude against UTC per receiver, one panel per frequency, and save the figure.

    Parameters
    ----------
    ds : xarray.Dataset
        A sweep dataset (from :func:`cavity.sweeps.sweep` or a sweep file).
    output_path : str or os.PathLike
        Figure file, .png or .pdf (written atomically).
    quantity : {"ez", "b"}
        Vertical electric field (dB re 1 uV/m) or horizontal flux density (dB re 1 fT).

    Returns
    -------
    list of str
        The files written (one).

    Notes
    -----
    Dotted vertical lines mark the geometric sunrise and dashed lines the sunset at the midpoint of
    each receiver's path, in the receiver's colour: the ionosphere over the middle of a path sets
    much of the field there, so fades cluster around these instants.
    """
    from matplotlib.dates import AutoDateLocator, ConciseDateFormatter
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    _require_sweep(ds)
    if quantity not in ("ez", "b"):
        raise ValueError(f"quantity = {quantity!r} must be 'ez' or 'b'")
    name = f"receiver_{quantity}_amplitude"
    if name not in ds:
        raise ResultFileError(f"the sweep dataset has no {name} variable")
    unit = "dB re 1 uV/m" if quantity == "ez" else "dB re 1 fT"
    label = "Ez" if quantity == "ez" else "B"
    times = ds["time"].values
    freqs = np.atleast_1d(ds["frequency"].values)
    names = [str(x) for x in ds["receiver_name"].values]
    ranges = ds["receiver_range"].values if "receiver_range" in ds else [math.nan] * len(names)
    t0, t1 = _utc(times.min()), _utc(times.max())
    crossings = [sun_crossings(m[0], m[1], t0, t1) if m is not None else [] for m in path_midpoints(ds)]

    levels = path_levels(ds) if quantity == "ez" else None
    rows = 2 if levels is not None else 1
    fig = Figure(figsize=(10, 2.2 + 2.8 * rows * len(freqs)), layout="constrained")
    grid = fig.subplots(rows * len(freqs), 1, sharex=True, squeeze=False)[:, 0]
    axes = grid[::rows]
    colours = [f"C{i % 10}" for i in range(len(names))]

    def mark_sun(ax, i):
        for when, kind in crossings[i]:
            ax.axvline(
                np.datetime64(when.replace(tzinfo=None), "ns"),
                color=colours[i],
                linestyle=":" if kind == "sunrise" else "--",
                linewidth=1.0,
                alpha=0.8,
            )

    for k, (ax, f) in enumerate(zip(axes, freqs)):
        for i, rx in enumerate(names):
            amp = ds[name].isel(frequency=k, receiver=i).transpose("time").values
            ax.plot(times, amp, marker=".", color=colours[i], label=f"{rx} ({ranges[i]:.0f} km)")
            mark_sun(ax, i)
        ax.set_title(f"{f:g} kHz: at the receivers", loc="left", fontsize="medium")
        ax.set_ylabel(f"{label}, {unit}")
        ax.grid(True, alpha=0.3)
        if levels is not None:
            lax = grid[rows * k + 1]
            values, path_labels = levels
            rx_path = ds["receiver_path"].values.astype(int)
            for p, text in enumerate(path_labels):
                curve = values.isel(path=p, frequency=k).values
                if not np.isfinite(curve).any():
                    continue
                # colour of the path's farthest receiver, so a path and its receiver read together
                on = [i for i in range(len(names)) if rx_path[i] == p]
                far = max(on, key=lambda i: ranges[i])
                lax.plot(times, curve, marker=".", color=colours[far], label=f"path {text}")
                mark_sun(lax, far)
            lax.set_title(
                f"{f:g} kHz: median along the far half of each path (less sensitive to where the modal minima fall)",
                loc="left",
                fontsize="medium",
            )
            lax.set_ylabel(f"{label}, {unit}")
            lax.grid(True, alpha=0.3)
            lax.legend(fontsize="small", loc="best")
    locator = AutoDateLocator()
    grid[-1].xaxis.set_major_locator(locator)
    grid[-1].xaxis.set_major_formatter(ConciseDateFormatter(locator))
    grid[-1].set_xlabel("UTC")
    handles, labels = axes[0].get_legend_handles_labels()
    if any(crossings):
        handles += [Line2D([], [], color="0.3", linestyle=":"), Line2D([], [], color="0.3", linestyle="--")]
        labels += ["sunrise at path midpoint", "sunset at path midpoint"]
    axes[0].legend(handles, labels, fontsize="small", loc="best")
    fig.suptitle(str(ds.attrs.get("title", "sweep")))
    from cavity.files import save_figure

    return [str(save_figure(fig, output_path))]


def table_diurnal(ds: xr.Dataset) -> pd.DataFrame:
    """Minimum, median and maximum field per receiver and frequency over a sweep's instants.

    Returns
    -------
    pandas.DataFrame
        One row per (receiver, frequency): ``receiver``, ``range_km``, ``frequency_khz``,
        ``instants`` (solved, not NaN), ``ez_min_db``, ``ez_median_db``, ``ez_max_db`` (dB re
        1 uV/m), ``utc_of_min`` and ``utc_of_max`` (ISO 8601 text); NaN statistics where no instant
        was solved. With the sun along the paths in the file: ``day_instants``, ``ez_day_median_db``,
        ``night_instants``, ``ez_night_median_db`` and ``night_minus_day_db`` (day and night as in
        :func:`daylight_at_receivers`; NaN without such instants).
    """
    import pandas as pd

    _require_sweep(ds)
    amp = ds["receiver_ez_amplitude"].transpose("receiver", "frequency", "time").values
    times = ds["time"].values
    names = [str(x) for x in ds["receiver_name"].values]
    ranges = ds["receiver_range"].values if "receiver_range" in ds else [math.nan] * len(names)
    state = daylight_at_receivers(ds)
    rows = []
    for i, rx in enumerate(names):
        for k, f in enumerate(np.atleast_1d(ds["frequency"].values)):
            a = amp[i, k]
            ok = np.isfinite(a)
            row: dict[str, Any] = {
                "receiver": rx,
                "range_km": float(ranges[i]),
                "frequency_khz": float(f),
                "instants": int(ok.sum()),
            }
            if ok.any():
                lo, hi = int(np.nanargmin(a)), int(np.nanargmax(a))
                row.update(
                    ez_min_db=float(a[lo]),
                    ez_median_db=float(np.median(a[ok])),
                    ez_max_db=float(a[hi]),
                    utc_of_min=_utc(times[lo]).strftime("%Y-%m-%dT%H:%M:%SZ"),
                    utc_of_max=_utc(times[hi]).strftime("%Y-%m-%dT%H:%M:%SZ"),
                )
            else:
                row.update(ez_min_db=math.nan, ez_median_db=math.nan, ez_max_db=math.nan, utc_of_min="", utc_of_max="")
            if state is not None:
                for kind in ("day", "night"):
                    pick = ok & (state[i] == kind)
                    row[f"{kind}_instants"] = int(pick.sum())
                    row[f"ez_{kind}_median_db"] = float(np.median(a[pick])) if pick.any() else math.nan
                row["night_minus_day_db"] = row["ez_night_median_db"] - row["ez_day_median_db"]
            rows.append(row)
    columns = [
        "receiver",
        "range_km",
        "frequency_khz",
        "instants",
        "ez_min_db",
        "ez_median_db",
        "ez_max_db",
        "utc_of_min",
        "utc_of_max",
    ]
    if state is not None:
        columns += ["day_instants", "ez_day_median_db", "night_instants", "ez_night_median_db", "night_minus_day_db"]
    return pd.DataFrame(rows, columns=columns)


def format_diurnal_table(table: pd.DataFrame, fmt: str = "markdown") -> str:
    """The :func:`table_diurnal` rows as Markdown (padded, as the receiver table) or CSV, dB to 0.1 dB.

    Parameters
    ----------
    table : pandas.DataFrame
        From :func:`table_diurnal`.
    fmt : {"markdown", "csv"}
    """
    if fmt not in ("markdown", "csv"):
        raise ValueError(f"fmt = {fmt!r} must be 'markdown' or 'csv'")
    if fmt == "csv":
        return table.to_csv(index=False, float_format="%.2f", lineterminator="\n")
    from cavity.reports.tables import Column, format_table

    columns = [
        Column("receiver", "Receiver", "receiver"),
        Column("range_km", "Range (km)", "range_km", 2, 1),
        Column("frequency_khz", "Frequency (kHz)", "frequency_khz", 4, 2),
        Column("instants", "Instants", "instants", 0, 0),
        Column("ez_min_db", "Min Ez (dB re 1 uV/m)", "ez_min_db", 2, 1),
        Column("ez_median_db", "Median Ez (dB re 1 uV/m)", "ez_median_db", 2, 1),
        Column("ez_max_db", "Max Ez (dB re 1 uV/m)", "ez_max_db", 2, 1),
        Column("utc_of_min", "UTC of min", "utc_of_min"),
        Column("utc_of_max", "UTC of max", "utc_of_max"),
    ]
    if "night_minus_day_db" in table.columns:
        columns += [
            Column("day_instants", "Day instants", "day_instants", 0, 0),
            Column("ez_day_median_db", "Day median (dB re 1 uV/m)", "ez_day_median_db", 2, 1),
            Column("night_instants", "Night instants", "night_instants", 0, 0),
            Column("ez_night_median_db", "Night median (dB re 1 uV/m)", "ez_night_median_db", 2, 1),
            Column("night_minus_day_db", "Night - day (dB)", "night_minus_day_db", 2, 1),
        ]
    # the receiver table's style: unit in brackets, columns padded, numbers right-aligned
    return format_table(table.to_dict("records"), columns, "markdown")
