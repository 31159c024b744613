"""Memo pieces: plain-language lines about a run, for a written summary of result files."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from cavity.reports.reading import frequencies_khz, frequency_text, path_labels, receiver_names, scenario_document

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr


def scenario_summary(ds: xr.Dataset) -> list[str]:
    """Plain-language lines describing the run in a result: transmitter, receivers, media, grid."""
    doc = scenario_document(ds)
    lines = []
    tx = doc.get("transmitter", {}) if isinstance(doc.get("transmitter"), dict) else {}
    if tx:
        where = ""
        if "latitude_deg" in tx and "longitude_deg" in tx:
            lat, lon = float(tx["latitude_deg"]), float(tx["longitude_deg"])
            where = f" at {abs(lat):.2f} {'N' if lat >= 0 else 'S'}, {abs(lon):.2f} {'E' if lon >= 0 else 'W'}"
        lines.append(
            f"Transmitter: {tx.get('name', '?')}{where}, {frequency_text(frequencies_khz(ds))}, "
            f"{float(tx.get('radiated_power_kw', float('nan'))):g} kW radiated"
        )
    names = receiver_names(ds)
    ranges = np.asarray(ds["receiver_range"].values, dtype=float).reshape(len(names))
    lines.append("Receivers: " + ", ".join(f"{n} ({d:.0f} km)" for n, d in zip(names, ranges)))
    ion = doc.get("ionosphere", {}) if isinstance(doc.get("ionosphere"), dict) else {}
    if ion:
        lines.append("Ionosphere: " + ", ".join(f"{k} = {v}" for k, v in ion.items()))
    ground = doc.get("ground", {}) if isinstance(doc.get("ground"), dict) else {}
    if ground:
        lines.append("Ground: " + ", ".join(f"{k} = {v}" for k, v in ground.items() if k != "segment"))
    lines.append("Paths: " + "; ".join(path_labels(ds)))
    cells_r, cells_z = ds.attrs.get("solver_cell_r_m"), ds.attrs.get("solver_cell_z_m")
    if cells_r is not None and cells_z is not None:
        wall = float(ds.attrs.get("solver_wall_time_s", float("nan")))
        lines.append(
            f"Grid: cells {float(cells_r):.0f} m x {float(cells_z):.0f} m, "
            f"{int(ds.attrs.get('solver_time_steps', 0)):,} time steps, {wall:.0f} s of stepping"
        )
    return lines
