"""Attenuation rates of result files: the waveguide's own loss per 1000 km.

Attenuation rates (:func:`attenuation_rate`) are least-squares slopes of the field in dB against
range after the geometric spreading is removed: 1/sqrt(d) on a flat earth, 1/sqrt(a sin(d/a)) on the
sphere (the solver's spherical correction, docs/physics.md 7), so that what remains is
the waveguide's own loss per 1000 km.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from cavity.constants import EARTH_RADIUS_M
from cavity.errors import CavityError
from cavity.reports.reading import earth_curvature, frequencies_khz, frequency_index, path_labels
from cavity.reports.tables import Column

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr


#: Earth radius of the solver's curvature model, km (:data:`cavity.constants.EARTH_RADIUS_M`).
EARTH_RADIUS_KM = EARTH_RADIUS_M / 1e3
#: Default range window of the attenuation fit, km.
DEFAULT_FIT_KM = (1000.0, 3000.0)
#: RMS residual above which a fitted rate is flagged as describing modal interference, dB.
SHAKY_FIT_RESIDUAL_DB = 2.0
#: Fewest range samples a fit accepts.
MIN_FIT_POINTS = 5


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


def attenuation_rate(
    range_km,
    amplitude_db,
    start_km: float | None = None,
    stop_km: float | None = None,
    *,
    spreading: str = "sphere",
    what: str = "the result",
) -> AttenuationFit:
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
        rate_db_per_1000km=float(-slope),
        intercept_db=float(intercept),
        start_km=float(x.min()),
        stop_km=float(x.max()),
        points=int(x.size),
        rms_residual_db=float(np.sqrt(np.mean(residual**2))),
        spreading=spreading,
    )


def result_attenuation(
    ds: xr.Dataset,
    *,
    path: int = 0,
    frequency_khz: float | None = None,
    start_km: float | None = None,
    stop_km: float | None = None,
    what: str = "the result",
) -> AttenuationFit:
    """:func:`attenuation_rate` of one path and frequency of a result (spreading from its scenario)."""
    freqs = frequencies_khz(ds)
    k = 0 if frequency_khz is None else frequency_index(freqs, frequency_khz, what)
    amp = ds["ez_amplitude"].transpose("path", "frequency", "range").values[path, k]
    return attenuation_rate(
        ds["range"].values, amp, start_km, stop_km, spreading="sphere" if earth_curvature(ds) else "flat", what=what
    )


def fit_caveat(fit: AttenuationFit) -> str:
    """ "" for a fit that describes the guide's loss; otherwise why it is only a rough slope."""
    reasons = []
    if fit.rms_residual_db > SHAKY_FIT_RESIDUAL_DB:
        reasons.append(f"residual above {SHAKY_FIT_RESIDUAL_DB:g} dB")
    if fit.stop_km - fit.start_km < 1000.0:
        reasons.append("window under 1000 km")
    return f"rough slope: modal interference ({', '.join(reasons)})" if reasons else ""


def attenuation_rows(
    datasets: Sequence[xr.Dataset],
    labels: Sequence[str],
    *,
    start_km: float | None = None,
    stop_km: float | None = None,
    frequencies: Sequence[float] | None = None,
) -> list[dict]:
    """Attenuation fits for each result, path and frequency (restricted to ``frequencies`` if given).

    Keys: run, path, frequency_khz, rate_db_per_1000km, start_km, stop_km, rms_residual_db,
    spreading, and ``fit`` (the :class:`AttenuationFit`).
    """
    rows = []
    for ds, label in zip(datasets, labels):
        freqs = frequencies_khz(ds) if frequencies is None else np.asarray(frequencies, float)
        for p, path_label in enumerate(path_labels(ds)):
            for f in freqs:
                fit = result_attenuation(ds, path=p, frequency_khz=f, start_km=start_km, stop_km=stop_km, what=label)
                rows.append(
                    {
                        "run": label,
                        "path": path_label,
                        "frequency_khz": float(f),
                        "rate_db_per_1000km": fit.rate_db_per_1000km,
                        "start_km": fit.start_km,
                        "stop_km": fit.stop_km,
                        "rms_residual_db": fit.rms_residual_db,
                        "spreading": fit.spreading_text(),
                        "fit": fit,
                        "note": fit_caveat(fit),
                    }
                )
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
