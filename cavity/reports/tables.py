"""Receiver tables of result files: rows of the file's own numbers, as Markdown or CSV.

Tables come back as text built from rows of plain numbers (:func:`receiver_rows`), rounded only for
printing (:func:`format_table`), with a header line per run (:func:`run_header`) and notes and
cautions below (:func:`table_notes`). Definitions used by the tables:

- margin = Ez - required field, both in dB re 1 uV/m;
- SNR = Ez - (N0 + 10 log10(bandwidth / 1 Hz)), where N0 is the noise field as a spectral density in
  dB re 1 uV/m per sqrt(Hz): the noise power in the bandwidth grows as the bandwidth, so its field in
  dB grows by 10 log10 of it.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from cavity.errors import CavityError
from cavity.ionosphere_forms import document_form
from cavity.reports.phase import PHASE_DEFINITION, PHASE_QUANTITY, display_phase_deg
from cavity.reports.reading import (
    attr_text,
    frequencies_khz,
    frequency_text,
    is_sweep,
    receiver_names,
    receiver_paths,
    scenario_document,
)

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr


#: Table formats.
TABLE_FORMATS = ("markdown", "csv")
#: Mark after a negative margin in Markdown tables.
SHORT_FLAG = "(short)"


def _format_number(value, decimals: int) -> str:
    v = float(value)
    if not math.isfinite(v):
        return ""
    text = f"{v:.{decimals}f}"
    return text[1:] if text.startswith("-") and float(text) == 0.0 else text  # no "-0.0"


def _significant(value, digits: int) -> str:
    """A positive number with ``digits`` significant digits and no exponent (12345 -> "12350")."""
    v = float(value)
    if not math.isfinite(v):
        return ""
    return np.format_float_positional(v, precision=digits, unique=False, fractional=False, trim="-")


def _preset_daylight(name) -> str:
    key = str(name).lower()
    if "night" in key:
        return "night"
    if "day" in key:
        return "day"
    return "-"


def receiver_daylight(ds: xr.Dataset) -> list[str]:
    """ "day", "night", "transition" or "-" for each receiver of a result.

    From the solar zenith angle along the receiver's path at its range when the file holds one
    (ionosphere form "utc"), classified by :func:`profiles.daynight.daylight_class` (day for
    chi <= 90 deg, night for chi >= 99 deg: common practice); otherwise from a named preset of the
    embedded scenario ("day", "night" and the presets whose names contain them); "-" when neither
    says (a fixed h' and beta, a ceiling, a profile file).
    """
    from profiles.daynight import daylight_class

    n = ds.sizes.get("receiver", 0)
    if "solar_zenith_angle" in ds:
        r = np.asarray(ds["range"].values, dtype=float)
        chi_path = np.asarray(ds["solar_zenith_angle"].values, dtype=float).reshape(ds.sizes["path"], r.size)
        ranges = np.asarray(ds["receiver_range"].values, dtype=float).reshape(n)
        out = []
        for p, d in zip(receiver_paths(ds), ranges):
            row = chi_path[p]
            ok = np.isfinite(row)
            if ok.sum() < 1:
                out.append("-")
                continue
            chi = float(np.interp(d, r[ok], row[ok]))
            out.append(str(daylight_class(np.clip(chi, 0.0, 180.0))))
        return out
    ion = scenario_document(ds).get("ionosphere", {})
    label = _preset_daylight(ion["preset"]) if isinstance(ion, dict) and "preset" in ion else "-"
    return [label] * n


@dataclass(frozen=True)
class Column:
    """One table column: row key, Markdown header, CSV header and decimals (None: text)."""

    key: str
    markdown: str
    csv: str
    decimals: int | None = None
    markdown_decimals: int | None = None
    significant: bool = False
    #: Markdown only: text appended to a negative value (a flag a reader cannot miss).
    negative_flag: str | None = None


def noise_in_bandwidth_db(noise_density_db: float, bandwidth_hz: float) -> float:
    """Noise field in a bandwidth, dB re 1 uV/m, from a density in dB re 1 uV/m per sqrt(Hz)."""
    return float(noise_density_db) + 10.0 * math.log10(float(bandwidth_hz))


def receiver_rows(
    ds: xr.Dataset,
    *,
    required_db: float | None = None,
    noise_db: float | None = None,
    bandwidth_hz: float | None = None,
    run: str | None = None,
) -> list[dict]:
    """One row per receiver and frequency of a result, with the result file's own numbers.

    Parameters
    ----------
    ds : xarray.Dataset
        A result (not a sweep: see :func:`is_sweep`).
    required_db : float, optional
        Required field, dB re 1 uV/m; adds ``margin_db`` = Ez - required.
    noise_db : float, optional
        Noise as a spectral density, dB re 1 uV/m per sqrt(Hz); with ``bandwidth_hz`` adds
        ``snr_db`` = Ez - (noise_db + 10 log10(bandwidth_hz)).
    bandwidth_hz : float, optional
        Receiver bandwidth, Hz (> 0); required with ``noise_db``.
    run : str, optional
        A label stored in each row's ``run`` key (which file the row came from).

    Returns
    -------
    list of dict
        Keys: receiver, frequency_khz, range_km, bearing_deg (NaN if given by range only), ez_db,
        ez_uv_per_m, b_db (NaN if absent), phase_deg (the file's unwrapped phase), phase_re_c_deg
        (:func:`display_phase_deg`, the phase tables show), daylight, path (index) and
        path_bearing_deg (NaN for a path serving every bearing), and margin_db / snr_db / run when
        asked for.
    """
    if (noise_db is None) != (bandwidth_hz is None):
        raise CavityError("noise and bandwidth go together: give both --noise and --bandwidth, or neither")
    if bandwidth_hz is not None and not (math.isfinite(bandwidth_hz) and bandwidth_hz > 0):
        raise CavityError(f"bandwidth = {bandwidth_hz!r} Hz must be a positive number")
    if is_sweep(ds):
        raise CavityError("this is a sweep file (it has a time dimension); use cavity.reports.sweep for its tables")
    names = receiver_names(ds)
    n = len(names)
    freqs = frequencies_khz(ds)
    ranges = np.asarray(ds["receiver_range"].values, dtype=float).reshape(n)
    bearings = (
        np.asarray(ds["receiver_bearing"].values, dtype=float).reshape(n)
        if "receiver_bearing" in ds
        else np.full(n, np.nan)
    )
    ez = np.asarray(ds["receiver_ez_amplitude"].transpose("receiver", "frequency").values, dtype=float)
    phase = np.asarray(ds["receiver_ez_phase"].transpose("receiver", "frequency").values, dtype=float)
    b = (
        np.asarray(ds["receiver_b_amplitude"].transpose("receiver", "frequency").values, dtype=float)
        if "receiver_b_amplitude" in ds
        else np.full((n, freqs.size), np.nan)
    )
    # with a geomagnetic field: the other horizontal B component and the azimuthal E at the ground
    extra = {
        key: np.asarray(ds[name].transpose("receiver", "frequency").values, dtype=float)
        for key, name in (("b_radial_db", "receiver_b_radial_amplitude"), ("ephi_db", "receiver_ephi_amplitude"))
        if name in ds
    }
    unc = (
        np.asarray(ds["receiver_ez_uncertainty"].transpose("receiver", "frequency").values, dtype=float)
        if "receiver_ez_uncertainty" in ds
        else None
    )
    daylight = receiver_daylight(ds)
    rx_path = receiver_paths(ds)
    path_bearing = (
        np.asarray(ds["path_bearing"].values, dtype=float).reshape(-1)
        if "path_bearing" in ds
        else np.full(ds.sizes.get("path", 1), np.nan)
    )
    noise_band = None
    if noise_db is not None and bandwidth_hz is not None:  # given together (checked above)
        noise_band = noise_in_bandwidth_db(noise_db, bandwidth_hz)
    rows = []
    for i, name in enumerate(names):
        for k, f in enumerate(freqs):
            row = {
                "receiver": name,
                "frequency_khz": float(f),
                "range_km": float(ranges[i]),
                "bearing_deg": float(bearings[i]),
                "ez_db": float(ez[i, k]),
                "ez_uv_per_m": float(10.0 ** (ez[i, k] / 20.0)),
                "b_db": float(b[i, k]),
                "phase_deg": float(phase[i, k]),
                "phase_re_c_deg": float(display_phase_deg(phase[i, k], ranges[i], f)),
                "daylight": daylight[i],
                "path": int(rx_path[i]),
                "path_bearing_deg": float(path_bearing[rx_path[i]]),
            }
            for key, values in extra.items():
                row[key] = float(values[i, k])
            if unc is not None:
                row["ez_uncertainty_db"] = float(unc[i, k])
            if required_db is not None:
                row["margin_db"] = float(ez[i, k] - required_db)
            if noise_band is not None:
                row["snr_db"] = float(ez[i, k] - noise_band)
            if run is not None:
                row = {"run": run, **row}
            rows.append(row)
    return rows


def receiver_columns(
    rows: Sequence[dict],
    *,
    required_db: float | None = None,
    noise_db: float | None = None,
    bandwidth_hz: float | None = None,
    bearing: str = "receiver",
) -> list[Column]:
    """The columns of a receiver table, for the keys present in ``rows``.

    ``bearing``: "receiver" (each receiver's own bearing, every row: CSV), "path" (the path's
    bearing, shown once per path: Markdown, see :func:`receiver_table`) or "none" (no column).
    """
    keys = set().union(*(r.keys() for r in rows)) if rows else set()
    columns = []
    if "run" in keys:
        columns.append(Column("run", "Run", "run"))
    columns += [
        Column("receiver", "Receiver", "receiver"),
        Column("frequency_khz", "Frequency (kHz)", "frequency_khz", 4, 2),
        Column("range_km", "Range (km)", "range_km", 2, 1),
    ]
    if bearing == "receiver":
        columns.append(Column("bearing_deg", "Bearing (deg)", "bearing_deg", 2, 1))
    elif bearing == "path":
        columns.append(Column("path_bearing_shown", "Path bearing (deg)", "path_bearing_deg", 2, 1))
    columns += [
        Column("ez_db", "Ez (dB re 1 uV/m)", "ez_db_re_1uv_per_m", 3, 1),
    ]
    if "ez_uncertainty_db" in keys:
        columns.append(Column("ez_uncertainty_db", "+- (dB)", "ez_uncertainty_db", 3, 1))
    columns += [
        Column("ez_uv_per_m", "Ez (uV/m)", "ez_uv_per_m", 6, 3, significant=True),
        Column("b_db", "B (dB re 1 fT)", "b_db_re_1ft", 3, 1),
    ]
    if "b_radial_db" in keys:
        columns.append(Column("b_radial_db", "B along path (dB re 1 fT)", "b_radial_db_re_1ft", 3, 1))
    if "ephi_db" in keys:
        columns.append(Column("ephi_db", "E across path (dB re 1 uV/m)", "ephi_db_re_1uv_per_m", 3, 1))
    columns += [
        Column("phase_re_c_deg", f"{PHASE_QUANTITY} (deg)", "ez_phase_re_c_delay_deg", 2, 1),
        Column("daylight", "Day/night", "day_night"),
    ]
    if "margin_db" in keys:
        req = "" if required_db is None else f" over {required_db:g} dB"
        columns.append(Column("margin_db", f"Margin{req} (dB)", "margin_db", 3, 1, negative_flag=SHORT_FLAG))
    if "snr_db" in keys:
        bw = "" if bandwidth_hz is None else f" in {bandwidth_hz:g} Hz"
        columns.append(Column("snr_db", f"SNR{bw} (dB)", "snr_db", 3, 1))
    return columns


def _cell(row: dict, column: Column, markdown: bool) -> str:
    value = row.get(column.key, "")
    if column.decimals is None:
        return attr_text(value)
    digits = column.markdown_decimals if markdown and column.markdown_decimals is not None else column.decimals
    if column.significant:
        return _significant(value, digits + 1 if markdown else digits)
    text = _format_number(value, digits)
    if markdown and column.negative_flag and text and float(value) < 0.0:
        text += f" {column.negative_flag}"
    return text


def _markdown_escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def format_table(
    rows: Sequence[dict], columns: Sequence[Column], fmt: str = "markdown", *, notes: Sequence[str] = ()
) -> str:
    """Rows as a Markdown table (notes as paragraphs below it) or as CSV (no notes, one header line).

    Markdown rounds for reading (0.1 dB, 0.1 deg, 0.1 km, 4 significant uV/m); CSV keeps more digits
    (0.001 dB, 0.01 deg, 0.01 km, 6 significant uV/m). Missing numbers are empty cells in both.
    """
    if fmt not in TABLE_FORMATS:
        raise CavityError(f"format = {fmt!r} is unknown (choose from {', '.join(TABLE_FORMATS)})")
    if fmt == "csv":
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow([c.csv for c in columns])
        for row in rows:
            writer.writerow([_cell(row, c, markdown=False) for c in columns])
        return buffer.getvalue()
    header = [c.markdown for c in columns]
    body = [[_markdown_escape(_cell(row, c, markdown=True)) for c in columns] for row in rows]
    widths = [max(len(x) for x in col) for col in zip(header, *body)] if body else [len(h) for h in header]
    numeric = [c.decimals is not None for c in columns]

    def line(cells):
        return "| " + " | ".join(c.rjust(w) if num else c.ljust(w) for c, w, num in zip(cells, widths, numeric)) + " |"

    rule = "| " + " | ".join(("-" * (w - 1) + ":") if num else "-" * w for w, num in zip(widths, numeric)) + " |"
    lines = [line(header), rule, *(line(cells) for cells in body)]
    text = "\n".join(lines) + "\n"
    for note in notes:
        text += f"\n{note}\n"
    return text


def table_notes(
    datasets: Sequence[xr.Dataset],
    *,
    required_db: float | None = None,
    noise_db: float | None = None,
    bandwidth_hz: float | None = None,
) -> list[str]:
    """The lines printed under a Markdown receiver table: definitions used, then the cautions."""
    notes = []
    if required_db is not None:
        notes.append(
            f"Margin = Ez - {required_db:g} dB re 1 uV/m (the required field); "
            f"{SHORT_FLAG} marks a negative margin: the field falls short of the required level."
        )
    if noise_db is not None and bandwidth_hz is not None:
        band = noise_in_bandwidth_db(noise_db, bandwidth_hz)
        notes.append(
            f"SNR = Ez - (N0 + 10 log10(B)) with noise density N0 = {noise_db:g} dB re 1 uV/m per sqrt(Hz) "
            f"and bandwidth B = {bandwidth_hz:g} Hz: noise {band:.1f} dB re 1 uV/m in the band."
        )
    notes.append(f"Fields are RMS at the ground; {PHASE_DEFINITION}.")
    if any("receiver_ez_uncertainty" in ds for ds in datasets):
        notes.append(
            "+- is the numerical uncertainty of Ez (grid convergence index from a companion solve on a "
            "1.5 times coarser grid); empty when it was not computed. It does not cover the "
            "uncertainty of the ionosphere and ground given."
        )
        if any(attr_text(ds.attrs.get("solver_range_only_companion", "none")) != "none" for ds in datasets):
            notes.append(
                "With the geomagnetic field the companion was coarser in range only (its vertical cell must "
                "still carry the whistler-mode wave), so +- leaves out the error of the vertical cell; by "
                'night that error can exceed +- (README, "Numerical uncertainty").'
            )
    cautions = list(dict.fromkeys(attr_text(ds.attrs.get("cautions", "")).strip() for ds in datasets))
    cautions = [c for c in cautions if c]
    if cautions:
        notes.append("Cautions: " + " ".join(cautions))
    return notes


def run_label(ds: xr.Dataset) -> str:
    """A reader's label for a run: "day" or "night" (a preset ionosphere), "UTC <time>" (sun along
    the paths), otherwise the scenario's title."""
    ion = scenario_document(ds).get("ionosphere", {})
    ion = ion if isinstance(ion, dict) else {}
    if "preset" in ion and _preset_daylight(ion["preset"]) != "-":
        return _preset_daylight(ion["preset"])
    if "utc" in ion:
        utc = ion["utc"]
        return f"UTC {utc:%Y-%m-%d %H:%M}" if hasattr(utc, "strftime") else f"UTC {utc}"
    return attr_text(ds.attrs.get("title", "")).strip() or "run"


def run_labels(datasets: Sequence[xr.Dataset], fallback: Sequence[str] | None = None) -> list[str]:
    """:func:`run_label` of each result; when two coincide, the titles, then ``fallback`` (e.g. file names)."""
    labels = [run_label(ds) for ds in datasets]
    if len(set(labels)) == len(labels):
        return labels
    titles = [attr_text(ds.attrs.get("title", "")).strip() for ds in datasets]
    if all(titles) and len(set(titles)) == len(titles):
        return titles
    if fallback is not None:
        return list(fallback)
    return [f"{label} ({i + 1})" for i, label in enumerate(labels)]


def _ionosphere_text(ion: dict) -> str:
    """The ionosphere of an embedded scenario in one phrase (the form describes itself), "?" if unknown."""
    form = document_form(ion)
    return form.document_text(ion) if form is not None else "?"


def run_header(ds: xr.Dataset) -> str:
    """One line naming a run: transmitter, frequency, power, ionosphere and time."""
    doc = scenario_document(ds)
    tx = doc.get("transmitter", {}) if isinstance(doc.get("transmitter"), dict) else {}
    ion = doc.get("ionosphere", {}) if isinstance(doc.get("ionosphere"), dict) else {}
    power = tx.get("radiated_power_kw")
    parts = [
        f"{tx.get('name', attr_text(ds.attrs.get('title', 'cavity result')))}, {frequency_text(frequencies_khz(ds))}"
        + (f", {float(power):g} kW radiated" if power is not None else "")
    ]
    parts.append(f"ionosphere {_ionosphere_text(ion)}")
    if "utc" in ion:
        utc = ion["utc"]
        parts.append(f"time {utc:%Y-%m-%d %H:%M} UTC" if hasattr(utc, "strftime") else f"time {utc} UTC")
    else:
        parts.append("time not set (one ionosphere on every path)")
    return "; ".join(parts)


def _group_by_path(rows: list[dict]) -> list[dict]:
    """Rows ordered by run, then path, then as given; the path's bearing shown on its first row only."""
    runs = list(dict.fromkeys(r.get("run") for r in rows))
    ordered = sorted(enumerate(rows), key=lambda x: (runs.index(x[1].get("run")), x[1].get("path", 0), x[0]))
    out, seen = [], set()
    for _, row in ordered:
        key = (row.get("run"), row.get("path", 0))
        row = dict(row)
        row["path_bearing_shown"] = row.get("path_bearing_deg", math.nan) if key not in seen else math.nan
        seen.add(key)
        out.append(row)
    return out


def receiver_table(
    datasets: Sequence[xr.Dataset] | xr.Dataset,
    fmt: str = "markdown",
    *,
    runs: Sequence[str] | None = None,
    required_db: float | None = None,
    noise_db: float | None = None,
    bandwidth_hz: float | None = None,
) -> str:
    """The receiver table of one or more results as Markdown (with notes and cautions) or CSV.

    Markdown opens with one line per run naming transmitter, frequency, power, ionosphere and time
    (:func:`run_header`), gives each path's bearing once (in that line when every receiver lies on
    one path, else on the first row of each path), and flags negative margins; CSV has one row per
    receiver and frequency with every value on it.

    Parameters
    ----------
    datasets : xarray.Dataset or sequence of them
        Results; with more than one, each row starts with its ``runs`` label.
    fmt : {"markdown", "csv"}
    runs : sequence of str, optional
        A label per dataset; default :func:`run_labels` (day/night, UTC or the title) when there are several.
    required_db, noise_db, bandwidth_hz : float, optional
        See :func:`receiver_rows`.
    """
    if not isinstance(datasets, (list, tuple)):
        datasets = [datasets]  # type: ignore[list-item]  # one Dataset
    labels: Sequence[str | None]
    if runs is None:
        labels = run_labels(datasets) if len(datasets) > 1 else [None]
    else:
        labels = runs
    rows = []
    for ds, run in zip(datasets, labels):
        rows += receiver_rows(ds, required_db=required_db, noise_db=noise_db, bandwidth_hz=bandwidth_hz, run=run)
    kwargs: dict[str, Any] = dict(required_db=required_db, noise_db=noise_db, bandwidth_hz=bandwidth_hz)
    if fmt != "markdown":
        return format_table(rows, receiver_columns(rows, **kwargs), fmt)
    heads = []
    for ds, run in zip(datasets, labels):
        heads.append(f"**{run}**: {run_header(ds)}." if run is not None else f"{run_header(ds)}.")
    bearings = {round(r["path_bearing_deg"], 6) if math.isfinite(r["path_bearing_deg"]) else None for r in rows}
    paths_per_run = {(r.get("run"), r["path"]) for r in rows}
    if len(bearings) == 1 and len(paths_per_run) == len({r.get("run") for r in rows}):
        (only,) = bearings
        heads.append(
            f"Every receiver on one path, bearing {only:.1f} deg."
            if only is not None
            else "Receivers given by range only (the path serves every bearing)."
        )
        columns = receiver_columns(rows, bearing="none", **kwargs)
    else:
        rows = _group_by_path(rows)
        columns = receiver_columns(rows, bearing="path", **kwargs)
    head = "".join(f"{h}\n\n" for h in heads) if len(heads) > 1 else f"{heads[0]}\n\n"
    return head + format_table(rows, columns, fmt, notes=table_notes(datasets, **kwargs))
