"""Reading result files back for reports: receivers, paths, frequencies and the embedded scenario.

Small accessors shared by the tables, comparisons, figures and memo pieces of :mod:`cavity.reports`;
they read a result :class:`xarray.Dataset` (:func:`cavity.open_result`) and never solve.
"""

from __future__ import annotations

import tomllib
from typing import TYPE_CHECKING

import numpy as np

from cavity.errors import CavityError

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr


#: Frequencies closer than this are the same, kHz (files store kHz as float).
FREQUENCY_TOLERANCE_KHZ = 1e-6


def is_sweep(ds: xr.Dataset) -> bool:
    """True for a sweep file (a ``time`` dimension: one solve per UTC instant)."""
    return "time" in ds.dims


def attr_text(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    return str(value)


def receiver_names(ds: xr.Dataset) -> list[str]:
    return [attr_text(x) for x in np.atleast_1d(ds["receiver_name"].values)]


def receiver_paths(ds: xr.Dataset) -> np.ndarray:
    n = ds.sizes.get("receiver", 0)
    if "receiver_path" in ds:
        return np.asarray(ds["receiver_path"].values, dtype=int).reshape(n)
    return np.zeros(n, dtype=int)


def path_labels(ds: xr.Dataset) -> list[str]:
    if "path_label" in ds:
        return [attr_text(x) for x in np.atleast_1d(ds["path_label"].values)]
    return [f"path {int(p)}" for p in np.atleast_1d(ds["path"].values)]


def frequencies_khz(ds: xr.Dataset) -> np.ndarray:
    return np.atleast_1d(np.asarray(ds["frequency"].values, dtype=float))


def frequency_text(freqs_khz) -> str:
    """ "16 kHz" or "16, 27.6 kHz": a frequency set for messages."""
    values = [f"{float(f):g}" for f in np.atleast_1d(freqs_khz)]
    return f"{', '.join(values) or 'none'} kHz"


def scenario_document(ds: xr.Dataset) -> dict:
    """The scenario embedded in a result file, parsed as TOML ({} when absent or unreadable)."""
    try:
        return tomllib.loads(attr_text(ds.attrs.get("scenario", "")))
    except (tomllib.TOMLDecodeError, TypeError, ValueError):
        return {}


def earth_curvature(ds: xr.Dataset) -> bool:
    """Whether the run modelled a spherical earth (the scenario's ``solver.earth_curvature``, default on)."""
    solver = scenario_document(ds).get("solver", {})
    return bool(solver.get("earth_curvature", True)) if isinstance(solver, dict) else True


def frequency_index(freqs: np.ndarray, frequency_khz: float, what: str) -> int:
    hits = np.flatnonzero(np.abs(freqs - float(frequency_khz)) <= FREQUENCY_TOLERANCE_KHZ)
    if hits.size == 0:
        raise CavityError(f"frequency {frequency_khz:g} kHz is not in {what} (it has {frequency_text(freqs)})")
    return int(hits[0])
