"""Sferic figures: waveform and spectrum panels per receiver, several runs overlaid, cutoffs marked."""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from cavity.constants import C0
from cavity.errors import ResultFileError


def plot_sferic(datasets, output, *, labels: Sequence[str] | None = None, component: str = "ez"):
    """Waveform and spectrum panels per receiver; several runs (day and night) overlaid, cutoffs marked.

    Parameters
    ----------
    datasets : xarray.Dataset or sequence of them
        Sferic result datasets (from :func:`simulate_sferic` or :func:`cavity.open_result`). Receivers
        are matched by name; the first dataset sets the rows.
    output : str or os.PathLike
        Figure file; the format follows the extension (png, pdf, svg).
    labels : sequence of str, optional
        Legend labels; default the ionosphere of each run (from its scenario) or its title.
    component : "ez" or "b"
        Vertical electric field or horizontal magnetic flux density.

    Returns
    -------
    pathlib.Path
        The file written.
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    from cavity.files import save_figure
    from cavity.reports.tables import run_labels

    if component not in ("ez", "b"):
        raise ValueError(f"component = {component!r}: choose 'ez' or 'b'")
    runs = [datasets] if hasattr(datasets, "data_vars") else list(datasets)
    for ds in runs:
        if "receiver_ez_time_series" not in ds or "receiver_ez_spectrum" not in ds:
            raise ResultFileError(
                f"{ds.attrs.get('title', 'a dataset')!r} holds no sferic waveforms (write it with cavity sferic run)"
            )
    if labels is None:
        labels = run_labels(runs)  # day/night, the UTC or the title, as every other report labels a run
    names = [str(n) for n in runs[0].receiver_name.values]
    n_rows = len(names)
    fig, axes = plt.subplots(n_rows, 2, figsize=(11, 2.6 * n_rows + 0.8), squeeze=False)
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    series_name, spectrum_name = f"receiver_{component}_time_series", f"receiver_{component}_spectrum"
    scale, unit = (1e3, "mV/m") if component == "ez" else (1e12, "pT")
    quantity = "Ez" if component == "ez" else "B"
    ref = "dB re 1 uV/m/Hz" if component == "ez" else "dB re 1 fT/Hz"
    for row, name in enumerate(names):
        ax_t, ax_f = axes[row]
        r_km = float(runs[0].receiver_range.values[row])
        arrival_ms = r_km * 1e3 / C0 * 1e3
        t_end = arrival_ms
        for k, (ds, label) in enumerate(zip(runs, labels)):
            match = np.nonzero(ds.receiver_name.values.astype(str) == name)[0]
            if match.size == 0:
                continue
            i = int(match[0])
            colour = colours[k % len(colours)]
            lag_ms = ds.lag.values * 1e3
            ax_t.plot(lag_ms, ds[series_name].values[i] * scale, color=colour, lw=0.9, label=label)
            t_end = max(t_end, float(lag_ms[-1]))
            f_khz = ds.spectrum_frequency.values
            ax_f.plot(f_khz, ds[spectrum_name].values[i], color=colour, lw=0.9, label=label)
            fc = float(ds.receiver_cutoff_frequency.values[i]) if "receiver_cutoff_frequency" in ds else math.nan
            if math.isfinite(fc):
                ax_f.axvline(fc, color=colour, ls="--", lw=0.9)
                ax_f.annotate(
                    f"cutoff {fc:.2f} kHz",
                    xy=(fc, 1.0),
                    xycoords=("data", "axes fraction"),
                    xytext=(3, -12 - 11 * k),
                    textcoords="offset points",
                    color=colour,
                    fontsize=8,
                )
        ax_t.set_xlim(max(0.0, arrival_ms - 0.3), min(t_end, arrival_ms + 5.0))
        ax_t.set_ylabel(f"{quantity} ({unit})")
        ax_t.set_title(f"{name}, {r_km:.0f} km: waveform", fontsize=9)
        ax_t.axhline(0.0, color="0.6", lw=0.5)
        ax_f.set_xscale("log")
        ax_f.set_ylabel(f"|{quantity}(f)| ({ref})")
        ax_f.set_title(f"{name}: spectrum", fontsize=9)
        ax_f.grid(True, which="both", lw=0.3, alpha=0.6)
        if row == 0:
            ax_t.legend(fontsize=8, loc="upper right")
    axes[-1][0].set_xlabel("time since the stroke (ms)")
    axes[-1][1].set_xlabel("frequency (kHz)")
    source = str(runs[0].attrs.get("sferic_source", "lightning stroke"))
    filt = str(runs[0].attrs.get("sferic_waveform_filter", "")).split(";")[0]
    fig.suptitle(
        f"Sferic at the receivers\n{source}\nwaveforms: {filt}; dashed: lowest cutoff from the tail", fontsize=9
    )
    fig.tight_layout()
    try:
        return save_figure(fig, output, dpi=120)
    finally:
        plt.close(fig)
