"""Combining a sweep's points along time and frequency into one dataset, and writing it."""

from __future__ import annotations

import logging
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from cavity.sweeps.points import SweepError, utc_text
from cavity.uncertainty import EXTRAPOLATION_METHOD
from cavity.version import __version__

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: CF encoding of the ``time`` coordinate in written files.
TIME_UNITS = "seconds since 1970-01-01 00:00:00"
TIME_CALENDAR = "standard"

#: Variables along range that do not change with the UTC instant: the ground under each path, and
#: the collision frequency, which the exponential profiles of the "utc" form take from altitude alone.
_TIME_INVARIANT = ("ground_conductivity", "ground_relative_permittivity", "collision_frequency")
#: Dimensions a sweep combines; per-run diagnostics on other dimensions (waveforms against time
#: since the source started, spectra) differ in length from point to point and are left out.
_SWEPT_DIMS = frozenset({"path", "frequency", "range", "altitude", "receiver"})


# --------------------------------------------------------------------------------------------------
# Combining the points
# --------------------------------------------------------------------------------------------------


def _common_range(by_frequency: dict[int, np.ndarray]) -> tuple[np.ndarray, bool]:
    """The range axis of the combined dataset and whether any frequency had another one.

    Points at one frequency share their grid (the range cell follows the frequency and the
    scenario, not the ionosphere). When frequencies differ in grid, the coarsest axis is kept.
    """
    axes = list(by_frequency.values())
    first = axes[0]
    if all(a.shape == first.shape and np.array_equal(a, first) for a in axes):
        return first, False
    spacing = [float(np.median(np.diff(a))) if a.size > 1 else 0.0 for a in axes]
    return axes[int(np.argmax(spacing))], True


def _on_range(ds, r: np.ndarray):
    """``ds`` with its range-resolved variables on the range axis ``r``.

    Sampled linearly in dB amplitude and in unwrapped phase (the tool's rule for fields between
    grid points, as at receivers); NaN outside the point's own axis.
    """
    if ds.sizes["range"] == r.size and np.array_equal(ds["range"].values, r):
        return ds
    out = ds.interp(range=r, method="linear", kwargs={"fill_value": np.nan})
    out["range"].attrs = ds["range"].attrs
    return out


def _point_dataset(value):
    """A point's result dataset: held in memory, or read from its part file."""
    if isinstance(value, Path):
        from cavity.results import open_result

        return open_result(value)
    return value


def _range_of(value) -> np.ndarray:
    """The range axis (km) of a point held in memory or in its part file (read alone)."""
    if isinstance(value, Path):
        import xarray as xr

        with xr.open_dataset(value, engine="netcdf4") as handle:
            return handle["range"].values.copy()
    return value["range"].values


def _sweepable(ds):
    """``ds`` without the variables on dimensions a sweep does not combine."""
    return ds.drop_vars([n for n, v in ds.variables.items() if not set(v.dims) <= _SWEPT_DIMS])


def combine(scenario: Scenario, times, freqs, points, results: dict, variants: dict | None = None) -> xr.Dataset:
    """Combine the points' result datasets into one sweep dataset (NaN for missing points).

    Parameters
    ----------
    scenario : Scenario
        The base scenario (title and ``scenario`` attribute).
    times : list of datetime or None
        The instants (None: no time axis).
    freqs : list of float
        Frequencies, Hz, increasing.
    points : list of SweepPoint
    results : dict SweepPoint -> xarray.Dataset or pathlib.Path
        Each point's result dataset (one frequency), or the part file that holds it (read when
        needed, one point at a time).
    variants : dict SweepPoint -> Scenario, optional
        Unused except for the record of which instants and frequencies were run.
    """
    import xarray as xr

    done = [p for p in points if p in results]
    by_f: dict[int, np.ndarray] = {}
    for p in done:  # points at one frequency share their grid: one range axis read per frequency
        if p.frequency_index not in by_f:
            by_f[p.frequency_index] = _range_of(results[p])
    r, regridded = _common_range(by_f)
    ref_f = next(fi for fi, a in by_f.items() if a.shape == r.shape and np.array_equal(a, r))
    first_point = min(done, key=lambda p: (p.frequency_index != ref_f, p.time_index, p.frequency_index))
    template = _on_range(_sweepable(_point_dataset(results[first_point])), r)

    n_t = len(times) if times is not None else 1
    freq_vars = [n for n, v in template.data_vars.items() if "frequency" in v.dims]
    time_vars = [
        n
        for n, v in template.data_vars.items()
        if "frequency" not in v.dims and "range" in v.dims and n not in _TIME_INVARIANT
    ]
    fixed_vars = [n for n in template.data_vars if n not in freq_vars and n not in time_vars]

    # Preallocated arrays filled one point at a time: a point kept as a part file is read, copied in
    # and let go, so memory is that of the combined arrays, not of all the points at once.
    stacked = {}
    for name in freq_vars + time_vars:
        v = template[name]
        if v.dtype.kind != "f":
            raise SweepError(f"variable {name} ({v.dtype}) varies between points and cannot be combined")
        shape = tuple(len(freqs) if d == "frequency" else v.sizes[d] for d in v.dims)
        stacked[name] = (v.dims, np.full((n_t,) + shape, np.nan))
    attrs = {}
    from_ref = set()  # instants whose medium came from the reference frequency's point
    for p in done:
        ti, fi = p.time_index, p.frequency_index
        point_ds = _on_range(_sweepable(_point_dataset(results[p])), r)
        attrs[p] = dict(point_ds.attrs)
        for name in freq_vars:
            dims, arr = stacked[name]
            at = tuple(fi if d == "frequency" else slice(None) for d in dims)
            arr[(ti,) + at] = point_ds[name].isel(frequency=0).values
        if ti not in from_ref:  # the medium along range: the reference frequency's grid wins
            for name in time_vars:
                stacked[name][1][ti] = point_ds[name].values
            if fi == ref_f:
                from_ref.add(ti)
        del point_ds
    freq_coord = xr.DataArray(np.asarray(freqs, float) / 1e3, dims="frequency", attrs=template["frequency"].attrs)
    ds = xr.Dataset({n: template[n] for n in fixed_vars})
    for name, (dims, arr) in stacked.items():
        if times is not None:
            ds[name] = xr.Variable(("time",) + dims, arr, template[name].attrs)
        else:
            ds[name] = xr.Variable(dims, arr[0], template[name].attrs)
    ds = ds.assign_coords(frequency=freq_coord, range=("range", r, template["range"].attrs))
    for name in ("path", "altitude"):
        ds = ds.assign_coords({name: template[name]})
    ds = ds[list(template.data_vars)]

    # per-point record of the solver
    shape = (n_t, len(freqs))
    record = {k: np.full(shape, np.nan) for k in ("wall_time", "time_steps", "cells", "cell_r", "cell_z", "time_step")}
    notes, converged, fit = [], True, 0.0
    for p in done:
        a = attrs[p]
        key = (p.time_index, p.frequency_index)
        record["wall_time"][key] = a.get("solver_wall_time_s", np.nan)
        record["time_steps"][key] = a.get("solver_time_steps", np.nan)
        record["cells"][key] = a.get("solver_cells", np.nan)
        record["cell_r"][key] = a.get("solver_cell_r_m", np.nan)
        record["cell_z"][key] = a.get("solver_cell_z_m", np.nan)
        record["time_step"][key] = a.get("solver_time_step_s", np.nan)
        converged &= a.get("solver_converged", "yes") == "yes"
        if a.get("solver_notes"):
            notes.append(f"{p.name}: {a['solver_notes']}")
        fit = max(fit, float(a.get("solver_impedance_fit_error", 0.0)))
    meta = {
        "wall_time": (
            "s",
            "seconds the solver spent stepping for this point, all paths (a path solve "
            "shared by several points counts at the first of them)",
        ),
        "time_steps": ("1", "time steps taken for this point (per path)"),
        "cells": ("1", "grid cells per path for this point"),
        "cell_r": ("m", "grid cell along range for this point"),
        "cell_z": ("m", "grid cell along altitude for this point"),
        "time_step": ("s", "solver time step for this point"),
    }
    dims = ("time", "frequency") if times is not None else ("frequency",)
    for k, (units, long_name) in meta.items():
        values = record[k] if times is not None else record[k][0]
        ds[f"point_solver_{k}"] = (dims, values, {"units": units, "long_name": long_name})

    if times is not None:
        # CF 2.4: dimensions other than T, Z, Y, X sit left of them, so time goes just before altitude
        for name, v in ds.data_vars.items():
            if "time" in v.dims:
                order = [d for d in v.dims if d not in ("time", "altitude")] + ["time"]
                ds[name] = v.transpose(*order, *(["altitude"] if "altitude" in v.dims else []))
        stamps = np.array([np.datetime64(t.astimezone(timezone.utc).replace(tzinfo=None), "ns") for t in times])
        ds = ds.assign_coords(
            time=(
                "time",
                stamps,
                {
                    "standard_name": "time",
                    "axis": "T",
                    "long_name": "UTC instant that sets the sun's position along the paths",
                },
            )
        )
    missing = [p.name for p in points if p not in results]

    def finite(values, fn, default):
        v = values[np.isfinite(values)]
        return fn(v) if v.size else default

    base_text = scenario.text or scenario.to_toml()
    t_text = (
        f"{utc_text(times[0])} to {utc_text(times[-1])}, {len(times)} instants"
        + (f" every {int((times[1] - times[0]).total_seconds())} s" if len(times) > 1 and _regular(times) else "")
        if times is not None
        else "no time axis"
    )
    first = attrs[done[0]]
    ds.attrs = {
        "title": scenario.title,
        "Conventions": "CF-1.10",
        "history": f"{_now()} cavity {__version__}: swept {scenario.path or 'a scenario given as text'} over {len(points)} points",
        "source": f"cavity {__version__}",
        "scenario": base_text,
        "cautions": first.get("cautions", ""),
        "references": first.get("references", ""),
        "solver_cells": int(finite(record["cells"], np.max, 0)),
        "solver_time_steps": int(finite(record["time_steps"], np.max, 0)),
        "solver_cell_r_m": float(finite(record["cell_r"], np.min, np.nan)),
        "solver_cell_z_m": float(finite(record["cell_z"], np.min, np.nan)),
        "solver_time_step_s": float(finite(record["time_step"], np.min, np.nan)),
        "solver_wall_time_s": float(finite(record["wall_time"], np.sum, 0.0)),
        "solver_converged": "yes" if converged else "no",
        "solver_impedance_fit_error": fit,
        "solver_extrapolation": _extrapolation_text([attrs[p].get("solver_extrapolation", "none") for p in done]),
        "solver_range_only_companion": _range_only_text(
            [attrs[p].get("solver_range_only_companion", "none") for p in done]
        ),
        "sweep_description": (
            "each point is the scenario above with ionosphere utc = time (when there is a time axis) "
            "and transmitter frequency_khz = frequency, solved on its own; the solver_* attributes "
            "give the largest cells and steps, the smallest cells and time step, and the summed "
            "stepping time of all points (per point in point_solver_*)"
        ),
        "sweep_times": t_text,
        "sweep_points": len(points),
    }
    if notes:
        ds.attrs["solver_notes"] = "; ".join(notes)
    if regridded:
        ds.attrs["sweep_range_note"] = (
            "frequencies were solved on different range grids; fields along range are sampled on the "
            "coarsest one, linearly in dB and in unwrapped phase (receiver values are unaffected)"
        )
    if missing:
        ds.attrs["sweep_missing_points"] = "; ".join(missing)
    return ds


def _regular(times) -> bool:
    gaps = {(b - a) for a, b in zip(times[:-1], times[1:])}
    return len(gaps) == 1


def _now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


# --------------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------------


def encode_time(ds: xr.Dataset) -> xr.Dataset:
    """A copy whose ``time`` coordinate holds whole seconds since 1970-01-01 UTC with CF units.

    Readers that decode CF times (xarray, :func:`cavity.open_result`) get datetime64 back.
    """
    if "time" not in ds.coords or ds["time"].dtype.kind != "M":
        return ds
    t = ds["time"]
    seconds = t.values.astype("datetime64[s]").astype(np.int64)
    attrs = {k: v for k, v in t.attrs.items() if k not in ("units", "calendar")}
    attrs.update(units=TIME_UNITS, calendar=TIME_CALENDAR)
    out = ds.assign_coords(time=("time", seconds, attrs))
    out["time"].encoding = {}
    return out


def write_sweep(ds: xr.Dataset, path, *, overwrite: bool = False) -> Path:
    """Write a sweep dataset atomically (:func:`cavity.results.write_result`) with CF time encoding."""
    from cavity.results import write_result

    return write_result(encode_time(ds), path, overwrite=overwrite)


def _points_text(values, text: str) -> str:
    """Per-point attribute values summarised for the sweep file: "none" when every point says
    "none", else ``text`` with ``{n}`` and ``{of}`` the points that do not and all points."""
    n = sum(v != "none" for v in values)
    return text.format(n=n, of=len(values)) if n else "none"


def _extrapolation_text(values) -> str:
    """The points' ``solver_extrapolation`` attributes summarised for the sweep file."""
    return _points_text(values, f"{EXTRAPOLATION_METHOD} on some or all paths of {{n}} of {{of}} points")


def _range_only_text(values) -> str:
    """The points' ``solver_range_only_companion`` attributes summarised for the sweep file: where a
    point's companion kept the vertical cell, its +- leaves out the vertical cell's error."""
    return _points_text(
        values,
        "some or all paths of {n} of {of} points "
        "(their uncertainty companion is coarser in range only; +- leaves out the vertical cell's error)",
    )
