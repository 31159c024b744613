"""Sferics: a lightning stroke's pulse through the waveguide, its waveforms and spectra at receivers.

A scenario whose ``[source]`` has ``kind = "lightning"`` puts a return stroke
(:class:`cavity.fdtd.lightning.HeidlerStroke`) at the transmitter's place. :func:`simulate_sferic`
runs the engine once per path for a fixed record (``record_ms`` from the stroke's onset) and returns
the result dataset of the file contract, plus:

- ``receiver_ez_time_series`` / ``receiver_b_time_series`` (receiver, lag): Ez (V/m) and the
  horizontal flux density B = mu0 Hphi (T) at each receiver, low-passed at the band's upper edge
  (zero-phase Butterworth, -6 dB at the edge) and sampled at four times that edge;
- ``receiver_ez_spectrum`` / ``receiver_b_spectrum`` (receiver, spectrum_frequency): |X(f)| of the
  unfiltered waveforms over the band, dB re 1 uV/m/Hz and dB re 1 fT/Hz (the record's last 10 % is
  tapered to zero with a half cosine so a tail still ringing at the end does not leak);
- ``receiver_cutoff_frequency`` (receiver): the lowest waveguide cutoff read from the sferic's tail
  (:func:`estimate_cutoff`), kHz;
- ``source_current`` and ``source_current_moment`` (lag) as injected.

The frequency-domain variables of every result file (``ez_amplitude`` ...) hold, at the
``[transmitter]`` frequencies, the waveguide's response to a carrier of ``radiated_power_kw`` at the
same place, obtained from the same impulsive run (field spectrum over current-moment spectrum, then
the carrier calibration of :mod:`cavity.solve`).

Band and grid: the grid passes what it resolves. The band's upper edge sets the range cell (the
scenario's ``cells_per_wavelength`` at that frequency, unless ``cell_m`` is given); the stroke's
1.8 us front (content up to about 90 kHz) is not resolved by a time step near 1 us and cells of
hundreds of metres, so the waveforms are meaningful only low-passed at that edge, which is what the
file holds.
"""

from __future__ import annotations

import logging
import math

import numpy as np

from cavity.constants import C0, MU0

log = logging.getLogger(__name__)

#: Search band of the lowest cutoff: reflection heights from about 50 to 125 km (c / 2h).
CUTOFF_SEARCH_HZ = (1.2e3, 3.0e3)
#: Stored waveforms are sampled at this multiple of the band's upper edge.
SAMPLES_PER_BAND_EDGE = 4.0
#: Fraction of the record tapered (half cosine) before the spectra are taken.
SPECTRUM_TAPER_FRACTION = 0.1
#: The record counts as complete when its last 10 % stays this far below the waveform's peak (dB).
TAIL_LIMIT_DB = -40.0


# --------------------------------------------------------------------------------------------------
# Source
# --------------------------------------------------------------------------------------------------


def stroke_for(source):
    """The engine waveform (:class:`~cavity.fdtd.lightning.HeidlerStroke`) of a scenario's ``source``."""
    from cavity.fdtd.lightning import HeidlerStroke

    return HeidlerStroke(
        peak_current_a=source.peak_current_a,
        rise_time_constant_s=source.rise_time_constant_s,
        decay_time_constant_s=source.decay_time_constant_s,
        exponent=source.heidler_exponent,
        channel_speed_m_per_s=source.channel_speed_fraction * C0,
        channel_height_m=source.channel_height_m,
    )


def source_group_delay_s(stroke, frequency_hz: float) -> float:
    """Group delay -d(arg M)/d(omega) of the stroke's current moment at ``frequency_hz``, s.

    A narrow band of the sferic near a cutoff leaves the source this much after the onset; it is the
    time origin of the tail analysis (:func:`estimate_cutoff`).
    """
    df = 1e-3 * frequency_hz
    phase = np.unwrap(np.angle(stroke.moment_spectrum([frequency_hz - df, frequency_hz + df])))
    return float(-(phase[1] - phase[0]) / (2 * math.pi * 2 * df))


# --------------------------------------------------------------------------------------------------
# Waveform analysis
# --------------------------------------------------------------------------------------------------


def estimate_cutoff(
    time_s,
    field,
    range_m: float,
    *,
    origin_s: float = 0.0,
    search_hz: tuple[float, float] = CUTOFF_SEARCH_HZ,
    start_s: float = 0.3e-3,
    envelope_power: float = 2.0,
    min_prominence: float = 4.0,
    max_width: float = 0.15,
) -> float:
    """The lowest waveguide cutoff frequency read from a sferic's tail at one receiver, Hz.

    Near its cutoff f_c a waveguide mode carries energy slowly: the component at f reaches range r at
    t = r / (c sqrt(1 - (f_c/f)^2)), so the tail after the direct pulse rings ever closer to f_c (the
    tweek). Between perfectly conducting plates this is exact: a TM mode's time-domain Green's
    function is the 2-D Klein-Gordon one, cos(omega_c tau)/tau with tau = sqrt(t^2 - (r/c)^2), and
    the ground-level Hphi = -dG/dr goes as sin(omega_c tau)/tau^2. The estimator therefore

    1. measures time from ``origin_s`` (the source's group delay near the cutoff,
       :func:`source_group_delay_s`) and resamples the waveform on a uniform grid of
       tau = sqrt(t^2 - (r/c)^2) from ``start_s`` to the record's end (this removes the dispersion:
       every mode's tail becomes a steady oscillation at its own cutoff),
    2. multiplies by tau^``envelope_power`` (2 flattens the magnetic tail's envelope), removes the
       mean, applies a Hann window, zero-pads 16 times and takes the amplitude spectrum,
    3. returns the strongest peak in ``search_hz`` refined by a parabola through the logarithms of
       the three largest bins; NaN if it lies on the band's edge, stands less than ``min_prominence``
       times above the band's median, or is broader (half-power width) than ``max_width`` of its
       frequency: a tail that rings for several cycles gives a narrow peak, a guide that damps the
       tail within a cycle or two (by day, far out) only a broad hump with no cutoff to read.

    Used on the magnetic field it errs by less than 0.05 % between perfect plates with 20 ms of tail
    (tested against the exact mode sum); on Ez, whose tail carries an extra quadrature term of
    relative size about tau/(omega_c (r/c)^2), the bias is a few tenths of a per cent. In a lossy
    guide the tail rings at the frequency where the lowest mode's Re(k^2) passes zero.

    Parameters
    ----------
    time_s : (T,) array
        Uniformly spaced sample times since the stroke's onset, s.
    field : (T,) array
        The waveform (any unit).
    range_m : float
        Ground range of the receiver, m.
    """
    t = np.asarray(time_s, dtype=float) - origin_s
    x = np.asarray(field, dtype=float)
    lo, hi = map(float, search_hz)
    t0 = range_m / C0
    dt = float(t[1] - t[0])
    if t[-1] <= t0:
        return math.nan
    tau_end = math.sqrt(t[-1] ** 2 - t0**2)
    step = min(dt, 1.0 / (8.0 * hi))
    tau = np.arange(start_s, tau_end, step)
    if tau.size < 16 or tau_end - start_s < 8.0 / lo:
        return math.nan  # fewer than 8 cycles of the lowest frequency searched
    s = np.interp(np.sqrt(tau**2 + t0**2), t, x) * tau**envelope_power
    s = (s - s.mean()) * np.hanning(s.size)
    n = 1 << int(math.ceil(math.log2(16 * s.size)))
    spectrum = np.abs(np.fft.rfft(s, n))
    f = np.fft.rfftfreq(n, step)
    inside = np.nonzero((f >= lo) & (f <= hi))[0]
    if inside.size < 5:
        return math.nan
    k = int(inside[np.argmax(spectrum[inside])])
    if k in (inside[0], inside[-1]) or spectrum[k] < min_prominence * np.median(spectrum[inside]):
        return math.nan
    half = spectrum[k] / math.sqrt(2.0)
    below = np.nonzero(spectrum[:k] <= half)[0]
    above = np.nonzero(spectrum[k:] <= half)[0]
    if below.size == 0 or above.size == 0 or (above[0] + k - below[-1]) * (f[1] - f[0]) > max_width * f[k]:
        return math.nan
    a, b, c = np.log(spectrum[k - 1 : k + 2])
    shift = 0.5 * (a - c) / (a - 2 * b + c)
    return float(f[k] + shift * (f[1] - f[0]))


def lowpass(time_s, values, edge_hz: float) -> np.ndarray:
    """Zero-phase Butterworth low-pass (order 4, run forward and back: -6 dB at ``edge_hz``) along axis 0."""
    from scipy.signal import butter, sosfiltfilt

    fs = 1.0 / float(time_s[1] - time_s[0])
    if edge_hz >= 0.45 * fs:
        return np.asarray(values, float).copy()
    # one pass is -3 dB at the design edge; forward and back squares the response: -6 dB there
    sos = butter(4, edge_hz, fs=fs, output="sos")
    return sosfiltfilt(sos, np.asarray(values, float), axis=0)


def amplitude_spectrum(time_s, values, frequency_hz, taper_fraction: float = SPECTRUM_TAPER_FRACTION) -> np.ndarray:
    """|X(f)| = |int x(t) exp(-j 2 pi f t) dt| on ``frequency_hz`` (evenly spaced), per column of ``values``.

    The last ``taper_fraction`` of the record is tapered to zero with a half cosine. Evaluated by the
    chirp z-transform (scipy.signal.zoom_fft), so the frequencies need not fall on FFT bins.
    """
    from scipy.signal import zoom_fft

    t = np.asarray(time_s, float)
    x = np.asarray(values, float)
    if x.ndim == 1:
        x = x[:, None]
    dt = float(t[1] - t[0])
    n = t.size
    w = np.ones(n)
    m = int(round(taper_fraction * n))
    if m > 1:
        w[n - m :] = 0.5 * (1 + np.cos(np.pi * np.arange(m) / (m - 1)))
    f = np.asarray(frequency_hz, float)
    out = np.empty((f.size, x.shape[1]))
    for j in range(x.shape[1]):
        if f.size == 1:
            spec = np.array([np.sum(x[:, j] * w * np.exp(-2j * np.pi * f[0] * t))])
        else:
            spec = zoom_fft(x[:, j] * w, [f[0], f[-1]], m=f.size, fs=1.0 / dt, endpoint=True)
        out[:, j] = np.abs(spec) * dt
    return out[:, 0] if np.ndim(values) == 1 else out


def tail_level_db(values) -> float:
    """RMS of the record's last 10 % relative to its peak, dB (is the sferic over by the end?)."""
    x = np.asarray(values, float)
    peak = float(np.max(np.abs(x)))
    if peak == 0:
        return -math.inf
    tail = x[int(0.9 * x.size) :]
    return float(20 * np.log10(max(np.sqrt(np.mean(tail**2)), 1e-300) / peak))


# --------------------------------------------------------------------------------------------------
# Sferic variables of a result
# --------------------------------------------------------------------------------------------------


def record_settings(scenario) -> dict:
    """Engine settings a lightning run needs beyond a carrier's: range cell from the band's top, fixed record.

    The band's upper edge (or the highest carrier, if above) sets the range cell at the scenario's
    ``cells_per_wavelength`` unless ``cell_m`` is given; every step is recorded at the receivers (the
    low-pass and resampling happen in :func:`sferic_variables`) and the run never stops early.
    """
    sv, src = scenario.solver, scenario.source
    f_top = max(src.band_hz[1], max(scenario.transmitter.frequencies_hz))
    return {
        "dr_m": sv.cell_m or C0 / f_top / sv.cells_per_wavelength,
        "record_time_series": True,
        "time_series_rate_hz": None,  # every step: the low-pass and resampling happen here
        "convergence_db": 0.0,  # never stop early: the record has a fixed length
        "max_duration_s": float(src.record_s),
    }


def sferic_variables(ds, scenario, stroke, solutions, raws, *, earth_curvature: bool):
    """Add the waveforms, spectra and cutoffs at the receivers to a lightning run's result dataset.

    Parameters
    ----------
    ds : xarray.Dataset
        The result dataset of the run's carrier response (the file contract).
    scenario : cavity.scenario.Scenario
        With ``source.kind == "lightning"``.
    stroke : cavity.fdtd.lightning.HeidlerStroke
        The waveform the engine ran (:func:`stroke_for`).
    solutions : sequence
        Per path, an object with ``path`` (its ``receiver_indices``).
    raws : sequence of cavity.fdtd.engine.EngineResult
        Per path, the engine's result with the probe time series at the receivers.
    earth_curvature : bool
        Whether the fields are corrected from flat to spherical spreading.

    Returns
    -------
    xarray.Dataset
        ``ds`` with the sferic variables listed in this module's docstring.
    """
    from cavity.fdtd import media

    src = scenario.source
    curved = earth_curvature
    # waveforms on one lag axis, spectra on one frequency axis
    f_lo, f_hi = src.band_hz
    lag_step = 1.0 / (SAMPLES_PER_BAND_EDGE * f_hi)
    lag = np.arange(0.0, src.record_s + 0.5 * lag_step, lag_step)
    df = 1.0 / (2.0 * src.record_s)
    spec_f = np.arange(f_lo, f_hi + 0.5 * df, df)
    n_rx = len(scenario.receivers)
    ez_t = np.zeros((n_rx, lag.size))
    b_t = np.zeros((n_rx, lag.size))
    ez_s = np.zeros((n_rx, spec_f.size))
    b_s = np.zeros((n_rx, spec_f.size))
    cutoff = np.full(n_rx, np.nan)
    notes = []
    for sol, res in zip(solutions, raws):
        t = np.concatenate([[0.0], res.time_s])  # the fields are zero at the onset
        keep = t <= src.record_s + 1e-12
        t = t[keep]
        ez = np.vstack([np.zeros((1, res.ez_series.shape[1])), res.ez_series])[keep]
        b = MU0 * np.vstack([np.zeros((1, res.hphi_series.shape[1])), res.hphi_series])[keep]
        if curved:
            factor = media.spherical_spreading_correction(res.probe_ranges_m)[None, :]
            ez, b = ez * factor, b * factor
        ez_low, b_low = lowpass(t, ez, f_hi), lowpass(t, b, f_hi)
        ez_spec = amplitude_spectrum(t, ez, spec_f)
        b_spec = amplitude_spectrum(t, b, spec_f)
        t_b = t - 0.5 * (t[2] - t[1])  # Hphi is stepped half a step before the Ez instants it is recorded at
        for j, i_rx in enumerate(sol.path.receiver_indices):
            ez_t[i_rx] = np.interp(lag, t, ez_low[:, j])
            b_t[i_rx] = np.interp(lag, t_b, b_low[:, j])
            ez_s[i_rx] = ez_spec[:, j]
            b_s[i_rx] = b_spec[:, j]
            r = float(res.probe_ranges_m[j])
            fc = estimate_cutoff(t_b, b[:, j], r, origin_s=source_group_delay_s(stroke, 1.8e3))
            if math.isfinite(fc):
                fc = estimate_cutoff(t_b, b[:, j], r, origin_s=source_group_delay_s(stroke, fc))
            cutoff[i_rx] = fc
            level = tail_level_db(ez[:, j])
            if level > TAIL_LIMIT_DB:
                notes.append(
                    f"{scenario.receivers[i_rx].name}: the sferic still rings at the end of the record "
                    f"({level:.0f} dB below its peak); lengthen record_ms"
                )
    first = raws[0]
    t_src = np.concatenate([[0.0], first.time_s])
    current = np.interp(lag, t_src, np.concatenate([[0.0], first.source_current]))
    moment = np.interp(lag, t_src, np.concatenate([[0.0], first.source_moment]))

    ds = ds.assign_coords(lag=("lag", lag), spectrum_frequency=("spectrum_frequency", spec_f / 1e3))
    with np.errstate(divide="ignore"):
        ds["receiver_ez_time_series"] = (("receiver", "lag"), ez_t)
        ds["receiver_b_time_series"] = (("receiver", "lag"), b_t)
        ds["receiver_ez_spectrum"] = (
            ("receiver", "spectrum_frequency"),
            20 * np.log10(np.maximum(ez_s, 1e-300) / 1e-6),
        )
        ds["receiver_b_spectrum"] = (("receiver", "spectrum_frequency"), 20 * np.log10(np.maximum(b_s, 1e-300) / 1e-15))
    ds["receiver_cutoff_frequency"] = (("receiver",), cutoff / 1e3)
    ds["source_current"] = (("lag",), current)
    ds["source_current_moment"] = (("lag",), moment)
    ds.attrs["sferic_source"] = stroke.describe()
    ds.attrs["sferic_band_khz"] = np.array([f_lo, f_hi]) / 1e3
    ds.attrs["sferic_record_ms"] = src.record_s * 1e3
    ds.attrs["sferic_waveform_filter"] = (
        f"zero-phase Butterworth low-pass, -6 dB at {f_hi / 1e3:g} kHz (the band's upper edge); "
        f"sampled every {lag_step * 1e6:.3g} us"
    )
    ds.attrs["sferic_spectrum_method"] = (
        "magnitude of the Fourier transform of the unfiltered waveform (chirp z-transform), last "
        f"{SPECTRUM_TAPER_FRACTION:.0%} of the record tapered with a half cosine"
    )
    ds.attrs["sferic_cutoff_method"] = (
        "strongest peak in 1.2-3 kHz of the magnetic tail's spectrum after dispersion removal "
        "(tau = sqrt(t^2 - (r/c)^2), time from the source's group delay; cavity.sferic.estimate_cutoff)"
    )
    ds.attrs["solver_converged"] = "no" if notes else "yes"
    if notes:
        ds.attrs["solver_notes"] = "; ".join(notes)
    elif "solver_notes" in ds.attrs:
        del ds.attrs["solver_notes"]
    return ds
