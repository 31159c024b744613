"""Comparing two results (day and night, say): differences at shared receivers, modal nulls, and the
comparison's text with both runs' attenuation rates.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from cavity.errors import CavityError
from cavity.reports.attenuation import ATTENUATION_COLUMNS, attenuation_rows
from cavity.reports.reading import (
    FREQUENCY_TOLERANCE_KHZ,
    attr_text,
    frequencies_khz,
    frequency_index,
    frequency_text,
    receiver_names,
    receiver_paths,
    scenario_document,
)
from cavity.reports.tables import Column, format_table, table_notes

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr


def common_frequencies(ds_a: xr.Dataset, ds_b: xr.Dataset, label_a: str = "A", label_b: str = "B") -> list[float]:
    """Frequencies (kHz) present in both results.

    Raises
    ------
    CavityError
        None in common; the one-line message names both frequency sets.
    """
    fa, fb = frequencies_khz(ds_a), frequencies_khz(ds_b)
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
    names_a, names_b = receiver_names(ds_a), receiver_names(ds_b)
    fa, fb = frequencies_khz(ds_a), frequencies_khz(ds_b)
    amp_a = ds_a["receiver_ez_amplitude"].transpose("receiver", "frequency").values
    amp_b = ds_b["receiver_ez_amplitude"].transpose("receiver", "frequency").values
    ph_a = ds_a["receiver_ez_phase"].transpose("receiver", "frequency").values
    ph_b = ds_b["receiver_ez_phase"].transpose("receiver", "frequency").values
    range_a = np.asarray(ds_a["receiver_range"].values, dtype=float).reshape(len(names_a))
    path_a, path_b = receiver_paths(ds_a), receiver_paths(ds_b)
    rows = []
    for i, name in enumerate(names_a):
        if name not in names_b:
            continue
        j = names_b.index(name)
        for f in freqs:
            ka, kb = frequency_index(fa, f, label_a), frequency_index(fb, f, label_b)
            rows.append(
                {
                    "receiver": name,
                    "frequency_khz": f,
                    "range_km": float(range_a[i]),
                    "a_db": float(amp_a[i, ka]),
                    "b_db": float(amp_b[j, kb]),
                    "difference_db": float(amp_b[j, kb] - amp_a[i, ka]),
                    "phase_difference_deg": float(_wrap_deg(ph_b[j, kb] - ph_a[i, ka])),
                    "note": "; ".join(
                        n
                        for n in (
                            _null_note(ds_a, label_a, ka, int(path_a[i]), float(range_a[i])),
                            _null_note(ds_b, label_b, kb, int(path_b[j]), float(range_a[i])),
                        )
                        if n
                    ),
                }
            )
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


def comparison_report(
    ds_a: xr.Dataset,
    ds_b: xr.Dataset,
    label_a: str = "A",
    label_b: str = "B",
    *,
    start_km: float | None = None,
    stop_km: float | None = None,
    fmt: str = "markdown",
) -> str:
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
        text += (
            '\nRows marked "rough slope": the curve is dominated by modal interference in the window, '
            "so the rate is a rough slope, not the waveguide's attenuation.\n"
        )
    if any(r["note"] for r in rows):
        text += (
            '\nRows marked "near a ... modal null": the receiver lies within '
            f"{NULL_NEIGHBOURHOOD_KM:g} km of a deep minimum of that run's curve, where a small change of "
            "h' moves the field by many dB; plan on the path level, not on that value.\n"
        )
    cautions = table_notes([ds_a, ds_b])[-1:]
    for note in cautions:
        if note.startswith("Cautions"):
            text += f"\n{note}\n"
    return text


def comparison_title(ds_a: xr.Dataset, ds_b: xr.Dataset, label_a: str = "A", label_b: str = "B") -> str:
    """Station, frequency and power from the files' scenarios, then what is compared."""

    def station(ds):
        tx = scenario_document(ds).get("transmitter", {})
        tx = tx if isinstance(tx, dict) else {}
        power = tx.get("radiated_power_kw")
        return f"{tx.get('name', attr_text(ds.attrs.get('title', '?')))}, {frequency_text(frequencies_khz(ds))}" + (
            f", {float(power):g} kW radiated" if power is not None else ""
        )

    sa, sb = station(ds_a), station(ds_b)
    if sa == sb:
        return f"{sa}: {label_a} and {label_b}"
    return f"{label_a}: {sa}; {label_b}: {sb}"
