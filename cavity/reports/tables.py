"""Reports from result files: receiver tables, day/night comparisons, attenuation rates and plots.

Everything here is a pure function of result datasets (:func:`cavity.open_result`): tables come back
as text (Markdown or CSV) built from rows of plain numbers, figures as matplotlib
:class:`~matplotlib.figure.Figure` objects drawn without pyplot (no screen needed) and saved
atomically by :func:`save_figure`. matplotlib is imported inside the functions, so ``import cavity``
stays light. The numbers in a table are the result file's own, rounded only for printing.

Definitions used by the tables:

- margin = Ez - required field, both in dB re 1 uV/m;
- SNR = Ez - (N0 + 10 log10(bandwidth / 1 Hz)), where N0 is the noise field as a spectral density in
  dB re 1 uV/m per sqrt(Hz): the noise power in the bandwidth grows as the bandwidth, so its field in
  dB grows by 10 log10 of it.

Attenuation rates (:func:`attenuation_rate`) are least-squares slopes of the field in dB against
range after the geometric spreading is removed: 1/sqrt(d) on a flat earth, 1/sqrt(a sin(d/a)) on the
sphere (the solver's spherical correction, docs/physics.md 7), so that what remains is
the waveguide's own loss per 1000 km.
"""

from __future__ import annotations

import csv
import io
import math
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from cavity.constants import C0, EARTH_RADIUS_M
from cavity.errors import CavityError
from cavity.files import FIGURE_FORMATS, check_figure_output, save_figure, write_text  # noqa: F401  (public here too)

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr
    from matplotlib.figure import Figure

#: Earth radius of the solver's curvature model, km (:data:`cavity.constants.EARTH_RADIUS_M`).
EARTH_RADIUS_KM = EARTH_RADIUS_M / 1e3
#: Default range window of the attenuation fit, km.
DEFAULT_FIT_KM = (1000.0, 3000.0)
#: RMS residual above which a fitted rate is flagged as describing modal interference, dB.
SHAKY_FIT_RESIDUAL_DB = 2.0
#: Fewest range samples a fit accepts.
MIN_FIT_POINTS = 5
#: Table formats.
TABLE_FORMATS = ("markdown", "csv")
#: Mark after a negative margin in Markdown tables.
SHORT_FLAG = "(short)"
#: Frequencies closer than this are the same, kHz (files store kHz as float).
FREQUENCY_TOLERANCE_KHZ = 1e-6

# --------------------------------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------------------------------


def is_sweep(ds: xr.Dataset) -> bool:
    """True for a sweep file (a ``time`` dimension: one solve per UTC instant)."""
    return "time" in ds.dims


def _text(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    return str(value)


def _receiver_names(ds: xr.Dataset) -> list[str]:
    return [_text(x) for x in np.atleast_1d(ds["receiver_name"].values)]


def _receiver_paths(ds: xr.Dataset) -> np.ndarray:
    n = ds.sizes.get("receiver", 0)
    if "receiver_path" in ds:
        return np.asarray(ds["receiver_path"].values, dtype=int).reshape(n)
    return np.zeros(n, dtype=int)


def _path_labels(ds: xr.Dataset) -> list[str]:
    if "path_label" in ds:
        return [_text(x) for x in np.atleast_1d(ds["path_label"].values)]
    return [f"path {int(p)}" for p in np.atleast_1d(ds["path"].values)]


def _frequencies(ds: xr.Dataset) -> np.ndarray:
    return np.atleast_1d(np.asarray(ds["frequency"].values, dtype=float))


def frequency_text(freqs_khz) -> str:
    """"16 kHz" or "16, 27.6 kHz": a frequency set for messages."""
    values = [f"{float(f):g}" for f in np.atleast_1d(freqs_khz)]
    return f"{', '.join(values) or 'none'} kHz"


def scenario_document(ds: xr.Dataset) -> dict:
    """The scenario embedded in a result file, parsed as TOML ({} when absent or unreadable)."""
    try:
        return tomllib.loads(_text(ds.attrs.get("scenario", "")))
    except (tomllib.TOMLDecodeError, TypeError, ValueError):
        return {}


def earth_curvature(ds: xr.Dataset) -> bool:
    """Whether the run modelled a spherical earth (the scenario's ``solver.earth_curvature``, default on)."""
    solver = scenario_document(ds).get("solver", {})
    return bool(solver.get("earth_curvature", True)) if isinstance(solver, dict) else True


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


# --------------------------------------------------------------------------------------------------
# Day, night or transition at the receivers
# --------------------------------------------------------------------------------------------------


def _preset_daylight(name) -> str:
    key = str(name).lower()
    if "night" in key:
        return "night"
    if "day" in key:
        return "day"
    return "-"


def receiver_daylight(ds: xr.Dataset) -> list[str]:
    """"day", "night", "transition" or "-" for each receiver of a result.

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
        for p, d in zip(_receiver_paths(ds), ranges):
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


# --------------------------------------------------------------------------------------------------
# Receiver tables
# --------------------------------------------------------------------------------------------------


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
    names = _receiver_names(ds)
    n = len(names)
    freqs = _frequencies(ds)
    ranges = np.asarray(ds["receiver_range"].values, dtype=float).reshape(n)
    bearings = (np.asarray(ds["receiver_bearing"].values, dtype=float).reshape(n)
                if "receiver_bearing" in ds else np.full(n, np.nan))
    ez = np.asarray(ds["receiver_ez_amplitude"].transpose("receiver", "frequency").values, dtype=float)
    phase = np.asarray(ds["receiver_ez_phase"].transpose("receiver", "frequency").values, dtype=float)
    b = (np.asarray(ds["receiver_b_amplitude"].transpose("receiver", "frequency").values, dtype=float)
         if "receiver_b_amplitude" in ds else np.full((n, freqs.size), np.nan))
    # with a geomagnetic field: the other horizontal B component and the azimuthal E at the ground
    extra = {key: np.asarray(ds[name].transpose("receiver", "frequency").values, dtype=float)
             for key, name in (("b_radial_db", "receiver_b_radial_amplitude"), ("ephi_db", "receiver_ephi_amplitude"))
             if name in ds}
    unc = (np.asarray(ds["receiver_ez_uncertainty"].transpose("receiver", "frequency").values, dtype=float)
           if "receiver_ez_uncertainty" in ds else None)
    daylight = receiver_daylight(ds)
    rx_path = _receiver_paths(ds)
    path_bearing = (np.asarray(ds["path_bearing"].values, dtype=float).reshape(-1) if "path_bearing" in ds
                    else np.full(ds.sizes.get("path", 1), np.nan))
    noise_band = None if noise_db is None else noise_in_bandwidth_db(noise_db, bandwidth_hz)
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


def receiver_columns(rows: Sequence[dict], *, required_db: float | None = None,
                     noise_db: float | None = None, bandwidth_hz: float | None = None,
                     bearing: str = "receiver") -> list[Column]:
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
        return _text(value)
    digits = column.markdown_decimals if markdown else column.decimals
    if column.significant:
        return _significant(value, digits + 1 if markdown else digits)
    text = _format_number(value, digits)
    if markdown and column.negative_flag and text and float(value) < 0.0:
        text += f" {column.negative_flag}"
    return text


def _markdown_escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def format_table(rows: Sequence[dict], columns: Sequence[Column], fmt: str = "markdown", *,
                 notes: Sequence[str] = ()) -> str:
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


def table_notes(datasets: Sequence[xr.Dataset], *, required_db: float | None = None,
                noise_db: float | None = None, bandwidth_hz: float | None = None) -> list[str]:
    """The lines printed under a Markdown receiver table: definitions used, then the cautions."""
    notes = []
    if required_db is not None:
        notes.append(f"Margin = Ez - {required_db:g} dB re 1 uV/m (the required field); "
                     f"{SHORT_FLAG} marks a negative margin: the field falls short of the required level.")
    if noise_db is not None and bandwidth_hz is not None:
        band = noise_in_bandwidth_db(noise_db, bandwidth_hz)
        notes.append(
            f"SNR = Ez - (N0 + 10 log10(B)) with noise density N0 = {noise_db:g} dB re 1 uV/m per sqrt(Hz) "
            f"and bandwidth B = {bandwidth_hz:g} Hz: noise {band:.1f} dB re 1 uV/m in the band."
        )
    notes.append(f"Fields are RMS at the ground; {PHASE_DEFINITION}.")
    if any("receiver_ez_uncertainty" in ds for ds in datasets):
        notes.append("+- is the numerical uncertainty of Ez (grid convergence index from a companion solve on a "
                     "1.5 times coarser grid); empty when it was not computed. It does not cover the "
                     "uncertainty of the ionosphere and ground given.")
    cautions = list(dict.fromkeys(_text(ds.attrs.get("cautions", "")).strip() for ds in datasets))
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
    return _text(ds.attrs.get("title", "")).strip() or "run"


def run_labels(datasets: Sequence[xr.Dataset], fallback: Sequence[str] | None = None) -> list[str]:
    """:func:`run_label` of each result; when two coincide, the titles, then ``fallback`` (e.g. file names)."""
    labels = [run_label(ds) for ds in datasets]
    if len(set(labels)) == len(labels):
        return labels
    titles = [_text(ds.attrs.get("title", "")).strip() for ds in datasets]
    if all(titles) and len(set(titles)) == len(titles):
        return titles
    if fallback is not None:
        return list(fallback)
    return [f"{label} ({i + 1})" for i, label in enumerate(labels)]


def _ionosphere_text(ion: dict) -> str:
    from profiles.daynight import PRESETS

    def preset(name):
        p = PRESETS.get(str(name))
        return f'preset "{name}"' + (f" (h' {p.hprime_km:g} km, beta {p.beta_per_km:g} /km)" if p else "")

    if "preset" in ion:
        return preset(ion["preset"])
    if "utc" in ion:
        return (f"{preset(ion.get('day_preset', 'day'))} by day, {preset(ion.get('night_preset', 'night'))} "
                "by night, from the sun along each path")
    if "hprime_km" in ion:
        return f"exponential, h' {float(ion['hprime_km']):g} km, beta {float(ion.get('beta_per_km', math.nan)):g} /km"
    if "ceiling_km" in ion:
        return f"conducting ceiling at {float(ion['ceiling_km']):g} km"
    if "profile_file" in ion:
        return f"profile file {ion['profile_file']}"
    if ion.get("no_ionosphere"):
        return "none (ground wave only)"
    return "?"


def run_header(ds: xr.Dataset) -> str:
    """One line naming a run: transmitter, frequency, power, ionosphere and time."""
    doc = scenario_document(ds)
    tx = doc.get("transmitter", {}) if isinstance(doc.get("transmitter"), dict) else {}
    ion = doc.get("ionosphere", {}) if isinstance(doc.get("ionosphere"), dict) else {}
    power = tx.get("radiated_power_kw")
    parts = [f"{tx.get('name', _text(ds.attrs.get('title', 'cavity result')))}, {frequency_text(_frequencies(ds))}"
             + (f", {float(power):g} kW radiated" if power is not None else "")]
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


def receiver_table(datasets: Sequence[xr.Dataset] | xr.Dataset, fmt: str = "markdown", *,
                   runs: Sequence[str] | None = None, required_db: float | None = None,
                   noise_db: float | None = None, bandwidth_hz: float | None = None) -> str:
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
        datasets = [datasets]
    if runs is None:
        runs = run_labels(datasets) if len(datasets) > 1 else [None]
    rows = []
    for ds, run in zip(datasets, runs):
        rows += receiver_rows(ds, required_db=required_db, noise_db=noise_db, bandwidth_hz=bandwidth_hz, run=run)
    kwargs = dict(required_db=required_db, noise_db=noise_db, bandwidth_hz=bandwidth_hz)
    if fmt != "markdown":
        return format_table(rows, receiver_columns(rows, **kwargs), fmt)
    heads = []
    for ds, run in zip(datasets, runs):
        heads.append(f"**{run}**: {run_header(ds)}." if run is not None else f"{run_header(ds)}.")
    bearings = {round(r["path_bearing_deg"], 6) if math.isfinite(r["path_bearing_deg"]) else None for r in rows}
    paths_per_run = {(r.get("run"), r["path"]) for r in rows}
    if len(bearings) == 1 and len(paths_per_run) == len({r.get("run") for r in rows}):
        (only,) = bearings
        heads.append(f"Every receiver on one path, bearing {only:.1f} deg." if only is not None
                     else "Receivers given by range only (the path serves every bearing).")
        columns = receiver_columns(rows, bearing="none", **kwargs)
    else:
        rows = _group_by_path(rows)
        columns = receiver_columns(rows, bearing="path", **kwargs)
    head = "".join(f"{h}\n\n" for h in heads) if len(heads) > 1 else f"{heads[0]}\n\n"
    return head + format_table(rows, columns, fmt, notes=table_notes(datasets, **kwargs))


# --------------------------------------------------------------------------------------------------
# Attenuation rate
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class AttenuationFit:
    """A least-squares line through the field with geometric spreading removed.

    Attributes
    ----------
    rate_db_per_1000km : float
        Loss per 1000 km (positive: the field falls with range faster than spreading alone).
    intercept_db : float
        The fitted corrected field extrapolated to zero range, dB re 1 uV/m (at 1 km of spreading).
    start_km, stop_km : float
        Range window actually fitted, km.
    points : int
        Range samples used.
    rms_residual_db : float
        RMS of the residuals (modal interference shows up here), dB.
    spreading : str
        "sphere" (1/sqrt(a sin(d/a))) or "flat" (1/sqrt(d)).
    """

    rate_db_per_1000km: float
    intercept_db: float
    start_km: float
    stop_km: float
    points: int
    rms_residual_db: float
    spreading: str

    def spreading_text(self) -> str:
        return "1/sqrt(a sin(d/a)) spherical spreading" if self.spreading == "sphere" else "1/sqrt(d) spreading"

    def line_db(self, range_km) -> np.ndarray:
        """The fitted line put back into field units (spreading restored), dB re 1 uV/m."""
        d = np.asarray(range_km, dtype=float)
        return self.intercept_db - self.rate_db_per_1000km * d / 1000.0 - spreading_db(d, self.spreading)


def spreading_db(range_km, spreading: str = "sphere") -> np.ndarray:
    """Geometric spreading loss of a cylindrical wave relative to 1 km, dB.

    ``10 log10(d / 1 km)`` on a flat earth; on a sphere of radius a the wavefront's circumference is
    2 pi a sin(d/a), so ``10 log10(a sin(d/a) / 1 km)`` (docs/physics.md 7).
    """
    d = np.asarray(range_km, dtype=float)
    if spreading == "sphere":
        effective = EARTH_RADIUS_KM * np.sin(d / EARTH_RADIUS_KM)
    elif spreading == "flat":
        effective = d
    else:
        raise ValueError(f"spreading = {spreading!r}; choose 'sphere' or 'flat'")
    with np.errstate(divide="ignore", invalid="ignore"):
        return 10.0 * np.log10(effective)


def attenuation_rate(range_km, amplitude_db, start_km: float | None = None, stop_km: float | None = None,
                     *, spreading: str = "sphere", what: str = "the result") -> AttenuationFit:
    """Fit the attenuation rate (dB per 1000 km) by least squares over a range window.

    The field in dB plus the spreading loss (:func:`spreading_db`) is fitted by a straight line
    ``intercept - rate * d / 1000``. Default window: 1000-3000 km, clipped to the computed span; if
    less than a quarter of that window is computed, the outer two thirds of the computed span.

    Raises
    ------
    CavityError
        The window is reversed, lies outside the computed ranges, or holds fewer than
        :data:`MIN_FIT_POINTS` samples.
    """
    d = np.asarray(range_km, dtype=float)
    a = np.asarray(amplitude_db, dtype=float)
    ok = np.isfinite(d) & np.isfinite(a) & (d > 0)
    if ok.sum() < MIN_FIT_POINTS:
        raise CavityError(f"{what} has fewer than {MIN_FIT_POINTS} finite field values to fit")
    lo_data, hi_data = float(d[ok].min()), float(d[ok].max())
    if start_km is None and stop_km is None:
        start, stop = DEFAULT_FIT_KM
        start, stop = max(start, lo_data), min(stop, hi_data)
        if stop - start < 0.25 * (DEFAULT_FIT_KM[1] - DEFAULT_FIT_KM[0]):
            start, stop = hi_data / 3.0, hi_data
    else:
        start = lo_data if start_km is None else float(start_km)
        stop = hi_data if stop_km is None else float(stop_km)
    if not (math.isfinite(start) and math.isfinite(stop)) or stop <= start:
        raise CavityError(f"fit range {start:g}-{stop:g} km is empty; give START_KM < STOP_KM")
    window = ok & (d >= start) & (d <= stop)
    if window.sum() < MIN_FIT_POINTS:
        raise CavityError(
            f"fit range {start:g}-{stop:g} km holds {int(window.sum())} computed ranges of {what} "
            f"(computed {lo_data:.0f}-{hi_data:.0f} km; at least {MIN_FIT_POINTS} needed)"
        )
    x = d[window]
    y = a[window] + spreading_db(x, spreading)
    slope, intercept = np.polyfit(x / 1000.0, y, 1)
    residual = y - (intercept + slope * x / 1000.0)
    return AttenuationFit(
        rate_db_per_1000km=float(-slope), intercept_db=float(intercept), start_km=float(x.min()),
        stop_km=float(x.max()), points=int(x.size), rms_residual_db=float(np.sqrt(np.mean(residual**2))),
        spreading=spreading,
    )


def result_attenuation(ds: xr.Dataset, *, path: int = 0, frequency_khz: float | None = None,
                       start_km: float | None = None, stop_km: float | None = None,
                       what: str = "the result") -> AttenuationFit:
    """:func:`attenuation_rate` of one path and frequency of a result (spreading from its scenario)."""
    freqs = _frequencies(ds)
    k = 0 if frequency_khz is None else _frequency_index(freqs, frequency_khz, what)
    amp = ds["ez_amplitude"].transpose("path", "frequency", "range").values[path, k]
    return attenuation_rate(ds["range"].values, amp, start_km, stop_km,
                            spreading="sphere" if earth_curvature(ds) else "flat", what=what)


def _frequency_index(freqs: np.ndarray, frequency_khz: float, what: str) -> int:
    hits = np.flatnonzero(np.abs(freqs - float(frequency_khz)) <= FREQUENCY_TOLERANCE_KHZ)
    if hits.size == 0:
        raise CavityError(f"frequency {frequency_khz:g} kHz is not in {what} (it has {frequency_text(freqs)})")
    return int(hits[0])


# --------------------------------------------------------------------------------------------------
# Comparing two results
# --------------------------------------------------------------------------------------------------


def common_frequencies(ds_a: xr.Dataset, ds_b: xr.Dataset, label_a: str = "A", label_b: str = "B") -> list[float]:
    """Frequencies (kHz) present in both results.

    Raises
    ------
    CavityError
        None in common; the one-line message names both frequency sets.
    """
    fa, fb = _frequencies(ds_a), _frequencies(ds_b)
    common = [float(f) for f in fa if np.any(np.abs(fb - f) <= FREQUENCY_TOLERANCE_KHZ)]
    if not common:
        raise CavityError(
            f"{label_a} has {frequency_text(fa)} and {label_b} has {frequency_text(fb)}: "
            "no frequency in common to compare"
        )
    return common


def _wrap_deg(x):
    return (np.asarray(x, dtype=float) + 180.0) % 360.0 - 180.0


def comparison_rows(ds_a: xr.Dataset, ds_b: xr.Dataset, label_a: str = "A", label_b: str = "B") -> list[dict]:
    """Differences B - A at the receivers the two results share (by name), per common frequency.

    Keys: receiver, frequency_khz, range_km (A's), a_db, b_db, difference_db (B - A),
    phase_difference_deg (B - A wrapped to -180..180 deg), note ("near a <run> modal null" when the
    receiver lies within :data:`NULL_NEIGHBOURHOOD_KM` of a null of that run's curve, else "").
    """
    freqs = common_frequencies(ds_a, ds_b, label_a, label_b)
    names_a, names_b = _receiver_names(ds_a), _receiver_names(ds_b)
    fa, fb = _frequencies(ds_a), _frequencies(ds_b)
    amp_a = ds_a["receiver_ez_amplitude"].transpose("receiver", "frequency").values
    amp_b = ds_b["receiver_ez_amplitude"].transpose("receiver", "frequency").values
    ph_a = ds_a["receiver_ez_phase"].transpose("receiver", "frequency").values
    ph_b = ds_b["receiver_ez_phase"].transpose("receiver", "frequency").values
    range_a = np.asarray(ds_a["receiver_range"].values, dtype=float).reshape(len(names_a))
    path_a, path_b = _receiver_paths(ds_a), _receiver_paths(ds_b)
    rows = []
    for i, name in enumerate(names_a):
        if name not in names_b:
            continue
        j = names_b.index(name)
        for f in freqs:
            ka, kb = _frequency_index(fa, f, label_a), _frequency_index(fb, f, label_b)
            rows.append({
                "receiver": name,
                "frequency_khz": f,
                "range_km": float(range_a[i]),
                "a_db": float(amp_a[i, ka]),
                "b_db": float(amp_b[j, kb]),
                "difference_db": float(amp_b[j, kb] - amp_a[i, ka]),
                "phase_difference_deg": float(_wrap_deg(ph_b[j, kb] - ph_a[i, ka])),
                "note": "; ".join(n for n in (
                    _null_note(ds_a, label_a, ka, int(path_a[i]), float(range_a[i])),
                    _null_note(ds_b, label_b, kb, int(path_b[j]), float(range_a[i]))) if n),
            })
    return rows


#: A receiver within this distance of a modal null is marked, km.
NULL_NEIGHBOURHOOD_KM = 30.0
#: A local minimum this far below the median of the field over +-NULL_WINDOW_KM is a modal null, dB.
NULL_DEPTH_DB = 6.0
NULL_WINDOW_KM = 150.0


def modal_nulls_km(range_km, amplitude_db) -> np.ndarray:
    """Ranges of the modal nulls of a field curve, km.

    A null is a local minimum at least :data:`NULL_DEPTH_DB` below the median of the field over
    +-:data:`NULL_WINDOW_KM` around it: modes cancelling there, where a small change of h' moves the
    minimum and the field by many dB (the cautions' "near modal minima").
    """
    d = np.asarray(range_km, float)
    a = np.asarray(amplitude_db, float)
    ok = np.isfinite(d) & np.isfinite(a) & (d > 0)
    d, a = d[ok], a[ok]
    out = []
    for i in range(1, d.size - 1):
        if not (a[i] <= a[i - 1] and a[i] < a[i + 1]):
            continue
        window = np.abs(d - d[i]) <= NULL_WINDOW_KM
        if float(np.median(a[window])) - a[i] >= NULL_DEPTH_DB:
            out.append(float(d[i]))
    return np.asarray(out)


def _null_note(ds: xr.Dataset, label: str, k: int, path: int, range_km: float) -> str:
    r = np.asarray(ds["range"].values, dtype=float)
    amp = ds["ez_amplitude"].transpose("path", "frequency", "range").values[path, k]
    nulls = modal_nulls_km(r, amp)
    if nulls.size and float(np.min(np.abs(nulls - range_km))) <= NULL_NEIGHBOURHOOD_KM:
        return f"near a {label} modal null"
    return ""


def comparison_columns(label_a: str = "A", label_b: str = "B") -> list[Column]:
    """Columns of :func:`comparison_rows` with the runs' labels in the headers."""
    return [
        Column("receiver", "Receiver", "receiver"),
        Column("frequency_khz", "Frequency (kHz)", "frequency_khz", 4, 2),
        Column("range_km", "Range (km)", "range_km", 2, 1),
        Column("a_db", f"{label_a} Ez (dB re 1 uV/m)", "a_ez_db_re_1uv_per_m", 3, 1),
        Column("b_db", f"{label_b} Ez (dB re 1 uV/m)", "b_ez_db_re_1uv_per_m", 3, 1),
        Column("difference_db", f"{label_b} - {label_a} (dB)", "difference_db", 3, 1),
        Column("phase_difference_deg", f"{label_b} - {label_a} phase (deg)", "phase_difference_deg", 2, 1),
        Column("note", "Note", "note"),
    ]


def fit_caveat(fit: AttenuationFit) -> str:
    """"" for a fit that describes the guide's loss; otherwise why it is only a rough slope."""
    reasons = []
    if fit.rms_residual_db > SHAKY_FIT_RESIDUAL_DB:
        reasons.append(f"residual above {SHAKY_FIT_RESIDUAL_DB:g} dB")
    if fit.stop_km - fit.start_km < 1000.0:
        reasons.append("window under 1000 km")
    return f"rough slope: modal interference ({', '.join(reasons)})" if reasons else ""


def attenuation_rows(datasets: Sequence[xr.Dataset], labels: Sequence[str], *, start_km: float | None = None,
                     stop_km: float | None = None, frequencies: Sequence[float] | None = None) -> list[dict]:
    """Attenuation fits for each result, path and frequency (restricted to ``frequencies`` if given).

    Keys: run, path, frequency_khz, rate_db_per_1000km, start_km, stop_km, rms_residual_db,
    spreading, and ``fit`` (the :class:`AttenuationFit`).
    """
    rows = []
    for ds, label in zip(datasets, labels):
        freqs = _frequencies(ds) if frequencies is None else np.asarray(frequencies, float)
        for p, path_label in enumerate(_path_labels(ds)):
            for f in freqs:
                fit = result_attenuation(ds, path=p, frequency_khz=f, start_km=start_km, stop_km=stop_km,
                                         what=label)
                rows.append({
                    "run": label, "path": path_label, "frequency_khz": float(f),
                    "rate_db_per_1000km": fit.rate_db_per_1000km, "start_km": fit.start_km,
                    "stop_km": fit.stop_km, "rms_residual_db": fit.rms_residual_db,
                    "spreading": fit.spreading_text(), "fit": fit, "note": fit_caveat(fit),
                })
    return rows


ATTENUATION_COLUMNS = [
    Column("run", "Run", "run"),
    Column("path", "Path", "path"),
    Column("frequency_khz", "Frequency (kHz)", "frequency_khz", 4, 2),
    Column("rate_db_per_1000km", "Attenuation (dB per 1000 km)", "attenuation_db_per_1000km", 3, 2),
    Column("start_km", "Fit from (km)", "fit_start_km", 1, 0),
    Column("stop_km", "Fit to (km)", "fit_stop_km", 1, 0),
    Column("rms_residual_db", "RMS residual (dB)", "rms_residual_db", 3, 2),
    Column("spreading", "Spreading removed", "spreading_removed"),
    Column("note", "Note", "note"),
]


def comparison_report(ds_a: xr.Dataset, ds_b: xr.Dataset, label_a: str = "A", label_b: str = "B", *,
                      start_km: float | None = None, stop_km: float | None = None,
                      fmt: str = "markdown") -> str:
    """The text of a comparison: differences at receivers, then attenuation rates (Markdown or CSV).

    In CSV only the differences table is written (one table per file).
    """
    rows = comparison_rows(ds_a, ds_b, label_a, label_b)
    columns = comparison_columns(label_a, label_b)
    if fmt == "csv":
        return format_table(rows, columns, "csv")
    freqs = common_frequencies(ds_a, ds_b, label_a, label_b)
    fits = attenuation_rows([ds_a, ds_b], [label_a, label_b], start_km=start_km, stop_km=stop_km, frequencies=freqs)
    if rows:
        text = f"Differences at the receivers ({label_b} - {label_a}):\n\n" + format_table(rows, columns)
    else:
        text = f"No receiver name appears in both {label_a} and {label_b}; no differences at receivers.\n"
    text += (
        "\nAttenuation rate: least-squares slope of the field after removing the geometric spreading "
        "(1/sqrt(d) on a flat earth, 1/sqrt(a sin(d/a)) on the sphere):\n\n"
    )
    text += format_table(fits, ATTENUATION_COLUMNS)
    if any(f["note"] for f in fits):
        text += ("\nRows marked \"rough slope\": the curve is dominated by modal interference in the window, "
                 "so the rate is a rough slope, not the waveguide's attenuation.\n")
    if any(r["note"] for r in rows):
        text += ("\nRows marked \"near a ... modal null\": the receiver lies within "
                 f"{NULL_NEIGHBOURHOOD_KM:g} km of a deep minimum of that run's curve, where a small change of "
                 "h' moves the field by many dB; plan on the path level, not on that value.\n")
    cautions = table_notes([ds_a, ds_b])[-1:]
    for note in cautions:
        if note.startswith("Cautions"):
            text += f"\n{note}\n"
    return text


# --------------------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------------------

#: Colours of the runs on a comparison (first, second).
RUN_COLOURS = ("#d95f02", "#1b4f9c")
PATH_STYLES = ("-", "--", ":", "-.")
PHASE_MODES = ("relative", "unwrapped")


def _finite_span(r: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Mask of the plotted samples: finite values beyond zero range."""
    return np.isfinite(y) & (r > 0)


def _amplitude_limits(values: list[np.ndarray]) -> tuple[float, float] | None:
    """y-limits that keep the far-field curves readable: the near-field rise and deep nulls clipped."""
    finite = np.concatenate([v[np.isfinite(v)] for v in values]) if values else np.array([])
    if finite.size == 0:
        return None
    lo, hi = np.percentile(finite, [1.0, 99.0])
    return float(lo - 10.0), float(hi + 6.0)


def relative_phase_deg(phase_deg, range_km, frequency_khz):
    """Phase with the speed-of-light delay taken out: ``phase + 360 f d / c`` (deg).

    With the exp(+j omega t) convention a wave at the speed of light has phase -360 f d / c; what
    remains shows how the guided wave's phase velocity differs from c (and its modal ripples).
    """
    return np.asarray(phase_deg, float) + 360.0 * float(frequency_khz) * 1e3 * np.asarray(range_km, float) * 1e3 / C0


def wrap_phase_deg(phase_deg):
    """Phase wrapped to the interval (-180, 180] deg."""
    return 180.0 - np.mod(180.0 - np.asarray(phase_deg, dtype=float), 360.0)


#: Name of the one phase quantity shown in tables and plots (see :func:`display_phase_deg`).
PHASE_QUANTITY = "Ez phase re c delay"
#: Its definition, for table notes and figure captions.
PHASE_DEFINITION = ("phase re c delay = Ez phase + 360 f d / c (the speed-of-light delay removed; "
                    "exp(+j omega t), relative to the transmitter current), wrapped to (-180, 180] deg; "
                    "the result file keeps the unwrapped phase")


def display_phase_deg(phase_deg, range_km, frequency_khz):
    """The phase shown in tables and plots: :func:`relative_phase_deg` wrapped to (-180, 180] deg.

    One quantity everywhere (``cavity table``, ``plot``, ``compare``, the memo), so a number in a
    table can be found on a plot. Result files keep the unwrapped phase.
    """
    return wrap_phase_deg(relative_phase_deg(phase_deg, range_km, frequency_khz))


def _break_at_wraps(x, y):
    """Insert NaN between samples where a wrapped phase jumps by more than 180 deg (no vertical lines)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    if y.size < 2:
        return x, y
    cut = np.flatnonzero(np.abs(np.diff(y)) > 180.0) + 1
    return np.insert(x, cut, np.nan), np.insert(y, cut, np.nan)


def near_field_km(frequency_khz) -> float:
    """Range within which the near field still turns the phase: one wavelength, km.

    On the ground plane a short vertical dipole's Ez is proportional to
    (1 + 1/(jkd) + 1/(jkd)^2) exp(-jkd) / d: at kd << 1 the static term leads the radiation term by
    180 deg, and the phase settles within 10 deg of the far field only beyond d = one wavelength
    (kd = 2 pi). The steep phase rise at the start of a plot is this, not a wrap.
    """
    return C0 / (float(frequency_khz) * 1e3) / 1e3


def _mark_near_field(ax_a, ax_p, frequency_khz) -> None:
    d = near_field_km(frequency_khz)
    for ax in (ax_a, ax_p):
        ax.axvspan(0.0, d, color="#bbbbbb", alpha=0.35, linewidth=0, zorder=0)
    ax_p.annotate(f"near field\n(d < {d:.0f} km)", xy=(d, 0.03), xycoords=("data", "axes fraction"),
                  xytext=(3, 0), textcoords="offset points", fontsize=7, color="#555555", va="bottom")


def _mark_receivers(ax, names, ranges, values, colour, *, label_names: bool, y_text: float | None = None):
    for name, d, v in zip(names, ranges, values):
        ax.axvline(d, color="#777777", linewidth=0.6, linestyle=":", zorder=1)
        if np.isfinite(v):
            ax.plot([d], [v], marker="o", markersize=6, color=colour, markeredgecolor="k", zorder=4, linestyle="none")
        if label_names:
            ax.annotate(name, xy=(d, 1.0), xycoords=("data", "axes fraction"), xytext=(2, -2),
                        textcoords="offset points", ha="left", va="top", fontsize=8, rotation=90,
                        color="#333333")


def result_figure(ds: xr.Dataset, *, phase: str = "relative", title: str | None = None,
                  amplitude_limits: tuple[float, float] | None = None) -> Figure:
    """Amplitude and phase against range: one panel pair per path and frequency, receivers marked.

    Parameters
    ----------
    ds : xarray.Dataset
        A result (not a sweep).
    phase : {"relative", "unwrapped"}
        "relative" plots :func:`display_phase_deg` (the speed-of-light delay removed, wrapped to
        (-180, 180] deg: the quantity of the tables), "unwrapped" the file's unwrapped phase.
    title : str, optional
        Figure title (default: the result's title).
    amplitude_limits : (float, float), optional
        y-limits of the amplitude panels, dB re 1 uV/m; give the same to several figures to draw
        them on common axes (:func:`common_amplitude_limits`).

    Returns
    -------
    matplotlib.figure.Figure
        Axes in pairs (amplitude, phase) in path-major, frequency-minor order.
    """
    from matplotlib.figure import Figure

    if phase not in PHASE_MODES:
        raise CavityError(f"phase = {phase!r} is unknown (choose from {', '.join(PHASE_MODES)})")
    if is_sweep(ds):
        raise CavityError("this is a sweep file (it has a time dimension); use cavity.reports.sweep to plot it")
    r = np.asarray(ds["range"].values, dtype=float)
    freqs = _frequencies(ds)
    labels = _path_labels(ds)
    amp = ds["ez_amplitude"].transpose("path", "frequency", "range").values
    ph = ds["ez_phase"].transpose("path", "frequency", "range").values
    names = _receiver_names(ds)
    rx_path = _receiver_paths(ds)
    rx_range = np.asarray(ds["receiver_range"].values, dtype=float).reshape(len(names))
    rx_amp = ds["receiver_ez_amplitude"].transpose("receiver", "frequency").values
    rx_ph = ds["receiver_ez_phase"].transpose("receiver", "frequency").values
    pairs = [(p, k) for p in range(len(labels)) for k in range(freqs.size)]
    fig = Figure(figsize=(9.0, 1.0 + 5.2 * len(pairs)), layout="constrained")
    axes = fig.subplots(2 * len(pairs), 1, squeeze=False)[:, 0]
    for n, (p, k) in enumerate(pairs):
        ax_a, ax_p = axes[2 * n], axes[2 * n + 1]
        ax_p.sharex(ax_a)
        ok = _finite_span(r, amp[p, k])
        on_path = [i for i in range(len(names)) if rx_path[i] == p]
        rx_n = [names[i] for i in on_path]
        rx_d = rx_range[on_path]
        ax_a.plot(r[ok], amp[p, k][ok], color=RUN_COLOURS[1], linewidth=1.2, label="Ez at the ground")
        limits = amplitude_limits if amplitude_limits is not None else _amplitude_limits([amp[p, k][ok]])
        if limits:
            ax_a.set_ylim(*limits)
        _mark_receivers(ax_a, rx_n, rx_d, rx_amp[on_path, k], RUN_COLOURS[0], label_names=True)
        ax_a.set_ylabel("Ez (dB re 1 uV/m, RMS)")
        if "b_radial_amplitude" in ds:
            # with a geomagnetic field both horizontal B components reach a loop antenna
            ax_b = ax_a.twinx()
            for name, text, style in (("b_amplitude", "B across the path", "--"), ("b_radial_amplitude", "B along the path", ":")):
                values = ds[name].transpose("path", "frequency", "range").values[p, k]
                fine = np.isfinite(values)
                ax_b.plot(r[fine], values[fine], color=RUN_COLOURS[2 % len(RUN_COLOURS)], linestyle=style,
                          linewidth=1.0, label=text)
            ax_b.set_ylabel("B (dB re 1 fT, RMS)")
            ax_b.legend(loc="upper right", fontsize=8)
        ax_a.set_title(f"{labels[p]}, {freqs[k]:g} kHz", fontsize=10)
        ax_a.grid(True, alpha=0.3)
        okp = np.isfinite(ph[p, k]) & (r > 0)
        if phase == "relative":
            y = display_phase_deg(ph[p, k], r, freqs[k])
            y_rx = display_phase_deg(rx_ph[on_path, k], rx_d, freqs[k])
            ax_p.set_ylabel(f"{PHASE_QUANTITY} (deg)\nwrapped to (-180, 180]")
            ax_p.set_ylim(-180.0, 180.0)
            ax_p.set_yticks(np.arange(-180.0, 181.0, 90.0))
            ax_p.plot(*_break_at_wraps(r[okp], y[okp]), color=RUN_COLOURS[1], linewidth=1.2)
        else:
            y = ph[p, k]
            y_rx = rx_ph[on_path, k]
            ax_p.set_ylabel("Ez phase, unwrapped (deg)")
            ax_p.plot(r[okp], y[okp], color=RUN_COLOURS[1], linewidth=1.2)
        _mark_near_field(ax_a, ax_p, freqs[k])
        _mark_receivers(ax_p, rx_n, rx_d, y_rx, RUN_COLOURS[0], label_names=False)
        ax_p.set_xlabel("Ground range from the transmitter (km)")
        ax_p.grid(True, alpha=0.3)
        if ok.any():
            ax_a.set_xlim(0.0, float(r[ok].max()))
    heading = title if title is not None else _text(ds.attrs.get("title", "cavity result"))
    note = ("phase + 360 f d/c (speed-of-light delay removed), wrapped" if phase == "relative"
            else "phase relative to the transmitter current")
    fig.suptitle(f"{heading}\nRMS vertical field at the ground; {note}; dots: receivers", fontsize=10)
    return fig


#: Ground strip colours and names by conductivity (S/m): sea at or above 1 S/m, perfect = inf.
GROUND_STRIP = (("sea", "#2f6fb0"), ("land", "#b08a4e"), ("perfect", "#777777"))
#: A comparison's y-axis spans at most this much below its upper limit, dB; deeper nulls are clipped
#: at the floor and marked with their depth.
COMPARISON_SPAN_DB = 60.0


def ground_classes_along(ds: xr.Dataset, path: int = 0) -> np.ndarray:
    """"sea", "land" or "perfect" at each range of a path, from the ground conductivity the run used."""
    sigma = np.asarray(ds["ground_conductivity"].values, dtype=float).reshape(-1, ds.sizes["range"])[path]
    return np.where(np.isinf(sigma), "perfect", np.where(sigma >= 1.0, "sea", "land"))


def comparison_title(ds_a: xr.Dataset, ds_b: xr.Dataset, label_a: str = "A", label_b: str = "B") -> str:
    """Station, frequency and power from the files' scenarios, then what is compared."""
    def station(ds):
        tx = scenario_document(ds).get("transmitter", {})
        tx = tx if isinstance(tx, dict) else {}
        power = tx.get("radiated_power_kw")
        return (f"{tx.get('name', _text(ds.attrs.get('title', '?')))}, {frequency_text(_frequencies(ds))}"
                + (f", {float(power):g} kW radiated" if power is not None else ""))

    sa, sb = station(ds_a), station(ds_b)
    if sa == sb:
        return f"{sa}: {label_a} and {label_b}"
    return f"{label_a}: {sa}; {label_b}: {sb}"


def _comparison_limits(curves: list[tuple[np.ndarray, np.ndarray]], near_km: float) -> tuple[float, float] | None:
    """y-limits of a comparison: the near-field rise clipped at the top; at the bottom the lowest
    value beyond the near field, unless that lies more than :data:`COMPARISON_SPAN_DB` below the top."""
    far = [a[(r > near_km) & np.isfinite(a)] for r, a in curves]
    far = [v for v in far if v.size]
    if not far:
        return None
    values = np.concatenate(far)
    hi = float(np.percentile(values, 99.0)) + 6.0
    lo = max(float(values.min()) - 3.0, hi - COMPARISON_SPAN_DB)
    return lo, hi


def comparison_figure(ds_a: xr.Dataset, ds_b: xr.Dataset, label_a: str = "A", label_b: str = "B", *,
                      fits: Sequence[dict] | None = None, title: str | None = None) -> Figure:
    """Two results' amplitude against range on one panel per common frequency, receivers marked.

    ``fits`` (rows of :func:`attenuation_rows`) adds each fitted line over its window, thin and
    dashed, labelled with its rate (and "rough" when its residual says modal interference). The
    y-axis keeps every null beyond the near field in view down to :data:`COMPARISON_SPAN_DB` below
    the top; a deeper one is clipped at the floor and marked with its depth. Under each panel a strip
    shows the ground (sea or land) along each run's path, which explains small kinks at coasts.
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    freqs = common_frequencies(ds_a, ds_b, label_a, label_b)
    runs = ((ds_a, label_a, RUN_COLOURS[0]), (ds_b, label_b, RUN_COLOURS[1]))
    strips = []  # (label, range, classes) per run and path; one strip when both runs share the ground
    for ds, label, _ in runs:
        r = np.asarray(ds["range"].values, dtype=float)
        for p, path_label in enumerate(_path_labels(ds)):
            cls = ground_classes_along(ds, p)
            name = label if len(_path_labels(ds)) == 1 else f"{label}, {path_label}"
            if not any(np.array_equal(cls, c) and np.array_equal(r, rr) for _, rr, c in strips):
                strips.append((name, r, cls))
    if len(strips) == 1:
        strips = [("ground", strips[0][1], strips[0][2])]
    fig = Figure(figsize=(9.5, 1.4 + (4.4 + 0.3 * len(strips)) * len(freqs)), layout="constrained")
    axes = fig.subplots(2 * len(freqs), 1, squeeze=False,
                        gridspec_kw={"height_ratios": [12, 0.8 * len(strips)] * len(freqs)})[:, 0]
    for n, f in enumerate(freqs):
        ax, ax_g = axes[2 * n], axes[2 * n + 1]
        ax_g.sharex(ax)
        curves = []
        for ds, label, colour in runs:
            r = np.asarray(ds["range"].values, dtype=float)
            k = _frequency_index(_frequencies(ds), f, label)
            amp = ds["ez_amplitude"].transpose("path", "frequency", "range").values
            labels = _path_labels(ds)
            for p, path_label in enumerate(labels):
                ok = _finite_span(r, amp[p, k])
                text = label if len(labels) == 1 else f"{label}, {path_label}"
                ax.plot(r[ok], amp[p, k][ok], color=colour, linestyle=PATH_STYLES[p % len(PATH_STYLES)],
                        linewidth=1.2, label=text)
                curves.append((r[ok], amp[p, k][ok], colour))
            names = _receiver_names(ds)
            rx_d = np.asarray(ds["receiver_range"].values, dtype=float).reshape(len(names))
            rx_a = ds["receiver_ez_amplitude"].transpose("receiver", "frequency").values[:, k]
            _mark_receivers(ax, names, rx_d, rx_a, colour, label_names=ds is ds_a)
        for row in fits or ():
            if abs(row["frequency_khz"] - f) > FREQUENCY_TOLERANCE_KHZ:
                continue
            fit = row["fit"]
            colour = RUN_COLOURS[0] if row["run"] == label_a else RUN_COLOURS[1]
            d = np.linspace(fit.start_km, fit.stop_km, 50)
            rough = (f" (rough: residual {fit.rms_residual_db:.1f} dB, modal interference)"
                     if fit_caveat(fit) else "")
            ax.plot(d, fit.line_db(d), color=colour, linestyle=(0, (4, 2)), linewidth=0.9, alpha=0.9,
                    label=f"fit {row['run']}: {fit.rate_db_per_1000km:.2f} dB/1000 km{rough}")
        limits = _comparison_limits([(c[0], c[1]) for c in curves], near_field_km(f))
        if limits:
            ax.set_ylim(*limits)
            for r_c, a_c, colour in curves:  # nulls below the floor: a mark at the floor with their depth
                below = (a_c < limits[0]) & (r_c > near_field_km(f))
                if not below.any():
                    continue
                edges = np.flatnonzero(np.diff(np.concatenate([[0], below.astype(int), [0]])))
                for i0, i1 in zip(edges[::2], edges[1::2]):
                    j = i0 + int(np.argmin(a_c[i0:i1]))
                    ax.plot([r_c[j]], [limits[0]], marker="v", color=colour, markersize=7, clip_on=False, zorder=5)
                    ax.annotate(f"null {a_c[j]:.0f} dB", xy=(r_c[j], limits[0]), xytext=(4, 4),
                                textcoords="offset points", fontsize=7, color=colour)
        ax.set_xlim(0.0, max(float(np.nanmax(ds_a["range"].values)), float(np.nanmax(ds_b["range"].values))))
        ax.set_ylabel("Ez (dB re 1 uV/m, RMS)")
        ax.set_title(f"{f:g} kHz", fontsize=10)
        ax.grid(True, alpha=0.3)
        ax.tick_params(labelbottom=False)
        # the field falls with range: near the transmitter the low levels are free of curves and labels
        ax.legend(fontsize=8, loc="lower left", framealpha=0.85)
        colours = dict(GROUND_STRIP)
        for row, (_name, r_s, cls) in enumerate(strips):
            for kind, colour in GROUND_STRIP:
                on = cls == kind
                if on.any():
                    ax_g.fill_between(r_s, row, row + 0.9, where=on, color=colour, step="mid", linewidth=0)
        ax_g.set_ylim(len(strips), 0)
        ax_g.set_yticks(np.arange(len(strips)) + 0.45, [name for name, _, _ in strips], fontsize=7)
        ax_g.set_xlabel("Ground range from the transmitter (km)")
        present = [k for k, _ in GROUND_STRIP if any((c == k).any() for _, _, c in strips)]
        ax_g.legend(handles=[Patch(color=colours[k], label=k) for k in present], fontsize=7, ncol=len(present),
                    loc="center left", bbox_to_anchor=(1.0, 0.5), frameon=False)
    heading = title if title is not None else comparison_title(ds_a, ds_b, label_a, label_b)
    fig.suptitle(f"{heading}\nRMS vertical field at the ground; dots: receivers; "
                 "fits: spreading removed, loss per 1000 km; strip: ground along the path", fontsize=10)
    return fig


def common_amplitude_limits(datasets: Sequence[xr.Dataset]) -> tuple[float, float] | None:
    """Amplitude y-limits shared by several results' plots (so day and night read on one scale)."""
    curves, near = [], 0.0
    for ds in datasets:
        r = np.asarray(ds["range"].values, dtype=float)
        amp = np.asarray(ds["ez_amplitude"].values, dtype=float).reshape(-1, r.size)
        curves += [(r, row) for row in amp]
        near = max(near, near_field_km(float(_frequencies(ds).min())))
    # as on a comparison: every null beyond the near field in view, down to COMPARISON_SPAN_DB
    return _comparison_limits(curves, near)


def plot_result(ds: xr.Dataset, output, *, phase: str = "relative", dpi: int = 150,
                amplitude_limits: tuple[float, float] | None = None) -> Path:
    """Draw :func:`result_figure` and write it (PNG or PDF, atomically); returns the path."""
    check_figure_output(output)
    return save_figure(result_figure(ds, phase=phase, amplitude_limits=amplitude_limits), output, dpi=dpi)


def plot_comparison(ds_a: xr.Dataset, ds_b: xr.Dataset, output, label_a: str = "A", label_b: str = "B", *,
                    start_km: float | None = None, stop_km: float | None = None, dpi: int = 150) -> Path:
    """Draw :func:`comparison_figure` with the attenuation fits and write it; returns the path."""
    check_figure_output(output)
    freqs = common_frequencies(ds_a, ds_b, label_a, label_b)
    fits = attenuation_rows([ds_a, ds_b], [label_a, label_b], start_km=start_km, stop_km=stop_km, frequencies=freqs)
    return save_figure(comparison_figure(ds_a, ds_b, label_a, label_b, fits=fits), output, dpi=dpi)


# --------------------------------------------------------------------------------------------------
# Memo pieces
# --------------------------------------------------------------------------------------------------


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
        lines.append(f"Transmitter: {tx.get('name', '?')}{where}, {frequency_text(_frequencies(ds))}, "
                     f"{float(tx.get('radiated_power_kw', float('nan'))):g} kW radiated")
    names = _receiver_names(ds)
    ranges = np.asarray(ds["receiver_range"].values, dtype=float).reshape(len(names))
    lines.append("Receivers: " + ", ".join(f"{n} ({d:.0f} km)" for n, d in zip(names, ranges)))
    ion = doc.get("ionosphere", {}) if isinstance(doc.get("ionosphere"), dict) else {}
    if ion:
        lines.append("Ionosphere: " + ", ".join(f"{k} = {v}" for k, v in ion.items()))
    ground = doc.get("ground", {}) if isinstance(doc.get("ground"), dict) else {}
    if ground:
        lines.append("Ground: " + ", ".join(f"{k} = {v}" for k, v in ground.items() if k != "segment"))
    lines.append("Paths: " + "; ".join(_path_labels(ds)))
    cells_r, cells_z = ds.attrs.get("solver_cell_r_m"), ds.attrs.get("solver_cell_z_m")
    if cells_r is not None and cells_z is not None:
        wall = float(ds.attrs.get("solver_wall_time_s", float("nan")))
        lines.append(f"Grid: cells {float(cells_r):.0f} m x {float(cells_z):.0f} m, "
                     f"{int(ds.attrs.get('solver_time_steps', 0)):,} time steps, {wall:.0f} s of stepping")
    return lines
