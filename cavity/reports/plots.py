"""Figures of result files: amplitude and phase against range, and two runs compared.

Figures are matplotlib :class:`~matplotlib.figure.Figure` objects drawn without pyplot (no screen
needed) and written atomically by :func:`cavity.files.save_figure`; matplotlib is imported inside the
functions, so ``import cavity`` stays light.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from cavity.constants import C0
from cavity.errors import CavityError
from cavity.files import check_figure_output, save_figure
from cavity.reports.attenuation import attenuation_rows, fit_caveat
from cavity.reports.compare import common_frequencies, comparison_title
from cavity.reports.phase import PHASE_QUANTITY, display_phase_deg
from cavity.reports.reading import (
    FREQUENCY_TOLERANCE_KHZ,
    attr_text,
    frequencies_khz,
    frequency_index,
    is_sweep,
    path_labels,
    receiver_names,
    receiver_paths,
)

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr
    from matplotlib.figure import Figure


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
    ax_p.annotate(
        f"near field\n(d < {d:.0f} km)",
        xy=(d, 0.03),
        xycoords=("data", "axes fraction"),
        xytext=(3, 0),
        textcoords="offset points",
        fontsize=7,
        color="#555555",
        va="bottom",
    )


def _mark_receivers(ax, names, ranges, values, colour, *, label_names: bool, y_text: float | None = None):
    for name, d, v in zip(names, ranges, values):
        ax.axvline(d, color="#777777", linewidth=0.6, linestyle=":", zorder=1)
        if np.isfinite(v):
            ax.plot([d], [v], marker="o", markersize=6, color=colour, markeredgecolor="k", zorder=4, linestyle="none")
        if label_names:
            ax.annotate(
                name,
                xy=(d, 1.0),
                xycoords=("data", "axes fraction"),
                xytext=(2, -2),
                textcoords="offset points",
                ha="left",
                va="top",
                fontsize=8,
                rotation=90,
                color="#333333",
            )


def result_figure(
    ds: xr.Dataset,
    *,
    phase: str = "relative",
    title: str | None = None,
    amplitude_limits: tuple[float, float] | None = None,
) -> Figure:
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
    freqs = frequencies_khz(ds)
    labels = path_labels(ds)
    amp = ds["ez_amplitude"].transpose("path", "frequency", "range").values
    ph = ds["ez_phase"].transpose("path", "frequency", "range").values
    names = receiver_names(ds)
    rx_path = receiver_paths(ds)
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
            for name, text, style in (
                ("b_amplitude", "B across the path", "--"),
                ("b_radial_amplitude", "B along the path", ":"),
            ):
                values = ds[name].transpose("path", "frequency", "range").values[p, k]
                fine = np.isfinite(values)
                ax_b.plot(
                    r[fine],
                    values[fine],
                    color=RUN_COLOURS[2 % len(RUN_COLOURS)],
                    linestyle=style,
                    linewidth=1.0,
                    label=text,
                )
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
    heading = title if title is not None else attr_text(ds.attrs.get("title", "cavity result"))
    note = (
        "phase + 360 f d/c (speed-of-light delay removed), wrapped"
        if phase == "relative"
        else "phase relative to the transmitter current"
    )
    fig.suptitle(f"{heading}\nRMS vertical field at the ground; {note}; dots: receivers", fontsize=10)
    return fig


#: Ground strip colours and names by conductivity (S/m): sea at or above 1 S/m, perfect = inf.
GROUND_STRIP = (("sea", "#2f6fb0"), ("land", "#b08a4e"), ("perfect", "#777777"))
#: A comparison's y-axis spans at most this much below its upper limit, dB; deeper nulls are clipped
#: at the floor and marked with their depth.
COMPARISON_SPAN_DB = 60.0


def ground_classes_along(ds: xr.Dataset, path: int = 0) -> np.ndarray:
    """ "sea", "land" or "perfect" at each range of a path, from the ground conductivity the run used."""
    sigma = np.asarray(ds["ground_conductivity"].values, dtype=float).reshape(-1, ds.sizes["range"])[path]
    return np.where(np.isinf(sigma), "perfect", np.where(sigma >= 1.0, "sea", "land"))


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


def comparison_figure(
    ds_a: xr.Dataset,
    ds_b: xr.Dataset,
    label_a: str = "A",
    label_b: str = "B",
    *,
    fits: Sequence[dict] | None = None,
    title: str | None = None,
) -> Figure:
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
    # (label, range, classes) per run and path; one strip when both runs share the ground
    strips: list[tuple[str, np.ndarray, np.ndarray]] = []
    for ds, label, _ in runs:
        r = np.asarray(ds["range"].values, dtype=float)
        for p, path_label in enumerate(path_labels(ds)):
            cls = ground_classes_along(ds, p)
            name = label if len(path_labels(ds)) == 1 else f"{label}, {path_label}"
            if not any(np.array_equal(cls, c) and np.array_equal(r, rr) for _, rr, c in strips):
                strips.append((name, r, cls))
    if len(strips) == 1:
        strips = [("ground", strips[0][1], strips[0][2])]
    fig = Figure(figsize=(9.5, 1.4 + (4.4 + 0.3 * len(strips)) * len(freqs)), layout="constrained")
    axes = fig.subplots(
        2 * len(freqs), 1, squeeze=False, gridspec_kw={"height_ratios": [12, 0.8 * len(strips)] * len(freqs)}
    )[:, 0]
    for n, f in enumerate(freqs):
        ax, ax_g = axes[2 * n], axes[2 * n + 1]
        ax_g.sharex(ax)
        curves = []
        for ds, label, colour in runs:
            r = np.asarray(ds["range"].values, dtype=float)
            k = frequency_index(frequencies_khz(ds), f, label)
            amp = ds["ez_amplitude"].transpose("path", "frequency", "range").values
            labels = path_labels(ds)
            for p, path_label in enumerate(labels):
                ok = _finite_span(r, amp[p, k])
                text = label if len(labels) == 1 else f"{label}, {path_label}"
                ax.plot(
                    r[ok],
                    amp[p, k][ok],
                    color=colour,
                    linestyle=PATH_STYLES[p % len(PATH_STYLES)],
                    linewidth=1.2,
                    label=text,
                )
                curves.append((r[ok], amp[p, k][ok], colour))
            names = receiver_names(ds)
            rx_d = np.asarray(ds["receiver_range"].values, dtype=float).reshape(len(names))
            rx_a = ds["receiver_ez_amplitude"].transpose("receiver", "frequency").values[:, k]
            _mark_receivers(ax, names, rx_d, rx_a, colour, label_names=ds is ds_a)
        for row in fits or ():
            if abs(row["frequency_khz"] - f) > FREQUENCY_TOLERANCE_KHZ:
                continue
            fit = row["fit"]
            colour = RUN_COLOURS[0] if row["run"] == label_a else RUN_COLOURS[1]
            d = np.linspace(fit.start_km, fit.stop_km, 50)
            rough = f" (rough: residual {fit.rms_residual_db:.1f} dB, modal interference)" if fit_caveat(fit) else ""
            ax.plot(
                d,
                fit.line_db(d),
                color=colour,
                linestyle=(0, (4, 2)),
                linewidth=0.9,
                alpha=0.9,
                label=f"fit {row['run']}: {fit.rate_db_per_1000km:.2f} dB/1000 km{rough}",
            )
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
                    ax.annotate(
                        f"null {a_c[j]:.0f} dB",
                        xy=(r_c[j], limits[0]),
                        xytext=(4, 4),
                        textcoords="offset points",
                        fontsize=7,
                        color=colour,
                    )
        ax.set_xlim(0.0, max(float(np.nanmax(ds_a["range"].values)), float(np.nanmax(ds_b["range"].values))))
        ax.set_ylabel("Ez (dB re 1 uV/m, RMS)")
        ax.set_title(f"{f:g} kHz", fontsize=10)
        ax.grid(True, alpha=0.3)
        ax.tick_params(labelbottom=False)
        # the field falls with range: near the transmitter the low levels are free of curves and labels
        ax.legend(fontsize=8, loc="lower left", framealpha=0.85)
        colours = dict(GROUND_STRIP)
        for level, (_name, r_s, cls) in enumerate(strips):
            for kind, colour in GROUND_STRIP:
                on = cls == kind
                if on.any():
                    ax_g.fill_between(r_s, level, level + 0.9, where=on, color=colour, step="mid", linewidth=0)
        ax_g.set_ylim(len(strips), 0)
        ax_g.set_yticks(np.arange(len(strips)) + 0.45, [name for name, _, _ in strips], fontsize=7)
        ax_g.set_xlabel("Ground range from the transmitter (km)")
        present = [k for k, _ in GROUND_STRIP if any((c == k).any() for _, _, c in strips)]
        ax_g.legend(
            handles=[Patch(color=colours[k], label=k) for k in present],
            fontsize=7,
            ncol=len(present),
            loc="center left",
            bbox_to_anchor=(1.0, 0.5),
            frameon=False,
        )
    heading = title if title is not None else comparison_title(ds_a, ds_b, label_a, label_b)
    fig.suptitle(
        f"{heading}\nRMS vertical field at the ground; dots: receivers; "
        "fits: spreading removed, loss per 1000 km; strip: ground along the path",
        fontsize=10,
    )
    return fig


def common_amplitude_limits(datasets: Sequence[xr.Dataset]) -> tuple[float, float] | None:
    """Amplitude y-limits shared by several results' plots (so day and night read on one scale)."""
    curves, near = [], 0.0
    for ds in datasets:
        r = np.asarray(ds["range"].values, dtype=float)
        amp = np.asarray(ds["ez_amplitude"].values, dtype=float).reshape(-1, r.size)
        curves += [(r, row) for row in amp]
        near = max(near, near_field_km(float(frequencies_khz(ds).min())))
    # as on a comparison: every null beyond the near field in view, down to COMPARISON_SPAN_DB
    return _comparison_limits(curves, near)


def plot_result(
    ds: xr.Dataset,
    output,
    *,
    phase: str = "relative",
    dpi: int = 150,
    amplitude_limits: tuple[float, float] | None = None,
) -> Path:
    """Draw :func:`result_figure` and write it (PNG or PDF, atomically); returns the path."""
    check_figure_output(output)
    return save_figure(result_figure(ds, phase=phase, amplitude_limits=amplitude_limits), output, dpi=dpi)


def plot_comparison(
    ds_a: xr.Dataset,
    ds_b: xr.Dataset,
    output,
    label_a: str = "A",
    label_b: str = "B",
    *,
    start_km: float | None = None,
    stop_km: float | None = None,
    dpi: int = 150,
) -> Path:
    """Draw :func:`comparison_figure` with the attenuation fits and write it; returns the path."""
    check_figure_output(output)
    freqs = common_frequencies(ds_a, ds_b, label_a, label_b)
    fits = attenuation_rows([ds_a, ds_b], [label_a, label_b], start_km=start_km, stop_km=stop_km, frequencies=freqs)
    return save_figure(comparison_figure(ds_a, ds_b, label_a, label_b, fits=fits), output, dpi=dpi)
