"""Exact field of a vertical current element between perfectly conducting parallel plates.

Ground (z = 0) and ceiling (z = h) are perfect conductors; the monopole of moment ``p = I l`` stands
on the ground on the axis. Two independent evaluations of the ground-level field Ez(r, 0):

- the mode sum (Wait 1960), every propagating TM mode plus evanescent ones until they are
  negligible at the requested ranges;
- the image series: the element and its image (moment 2 p) repeated every 2 h along z, each
  evaluated with all distance terms of the free-space dipole (Balanis 2016, eq. 4-10).

Time dependence exp(+j omega t); outgoing waves H0^(2); evanescent modes have Im(k_n) < 0.

References
----------
Wait, J. R. (1960), Terrestrial propagation of very-low-frequency radio waves: a theoretical
investigation, J. Res. NBS 64D(2), 153-204.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.special import hankel2e

from cavity.constants import C0, ETA0
from cavity.errors import ScenarioError
from cavity.reference.dipole import _check_frequency, _positive, free_space_ez, wavenumber

__all__ = [
    "parallel_plate_field",
    "parallel_plate_field_images",
    "plate_mode_wavenumbers",
    "tm_cutoff_hz",
    "two_mode_beat_distance_m",
]

#: The sum stops at the first evanescent mode damped by this many nepers at the nearest range.
EVANESCENT_DECAY_NEPERS = 40.0
#: Hard limit on the number of modes (guards against a range far below the plate spacing).
MAX_MODES = 5_000_000


def _height(height_m) -> float:
    h = float(_positive("height_m", height_m, "m"))
    return h


def tm_cutoff_hz(height_m: float, order: int) -> float:
    """Cutoff frequency n c / (2 h) (Hz) of the TM_n mode between perfect plates ``height_m`` apart."""
    if int(order) != order or order < 0:
        raise ScenarioError(f"order = {order} is out of range; allowed: integer >= 0")
    return int(order) * C0 / (2.0 * _height(height_m))


def plate_mode_wavenumbers(frequency_hz: float, height_m: float, orders) -> np.ndarray:
    """Horizontal wavenumbers k_n = sqrt(k^2 - (n pi / h)^2) (rad/m) on the branch Im(k_n) <= 0.

    Propagating modes (below order k h / pi) are real and positive; evanescent ones are
    -j sqrt((n pi / h)^2 - k^2), which decay along range.
    """
    k = wavenumber(frequency_hz)
    h = _height(height_m)
    kz = np.asarray(orders, dtype=float) * math.pi / h
    k2 = k * k - kz * kz
    return np.where(k2 >= 0.0, np.sqrt(np.abs(k2)) + 0j, -1j * np.sqrt(np.abs(k2)))


def two_mode_beat_distance_m(frequency_hz: float, height_m: float) -> float:
    """Beat distance 2 pi / (k_0 - k_1) (m) of the TM0 and TM1 modes between perfect plates.

    Where only these two modes propagate (c/(2h) < f < c/h) the ground-level amplitude has nulls
    (minima) spaced by this distance.
    """
    f = _check_frequency(frequency_hz)
    h = _height(height_m)
    if f <= tm_cutoff_hz(h, 1):
        raise ScenarioError(
            f"frequency_hz = {f} Hz is out of range for a two-mode beat; allowed: above the TM1 cutoff "
            f"{tm_cutoff_hz(h, 1):.6g} Hz for height_m = {h}"
        )
    k0, k1 = plate_mode_wavenumbers(f, h, [0, 1]).real
    return 2.0 * math.pi / (k0 - k1)


def _hankel2_0(z: np.ndarray) -> np.ndarray:
    """H0^(2)(z) for Im z <= 0 through the scaled form, so large evanescent arguments underflow to 0."""
    scale = np.exp(-1j * z)  # |exp(-j z)| = exp(Im z) <= 1 on this branch
    out = hankel2e(0, z) * scale
    return np.where(scale == 0, 0.0, out)


def parallel_plate_field(range_m, frequency_hz: float, height_m: float, moment_am: complex = 1.0) -> np.ndarray:
    """Ground-level Ez (V/m) between perfectly conducting plates, by the exact mode sum (Wait 1960).

        Ez(r, 0) = -(eta0 p / (4 k h)) sum_n eps_n k_n^2 H0^(2)(k_n r),
        k_n = sqrt(k^2 - (n pi / h)^2), Im(k_n) <= 0, eps_0 = 1, eps_n = 2 (n >= 1)

    Evanescent modes decay like exp(-|k_n| r); the sum runs until the factor at the nearest range is
    below exp(-40), so ranges far below the plate spacing need many modes (about 13 h / r).

    Parameters
    ----------
    range_m : array_like
        Ground distances (m), > 0.
    frequency_hz : float
        Frequency (Hz).
    height_m : float
        Plate spacing h (m).
    moment_am : complex
        Monopole moment ``I l`` (A m).
    """
    r = _positive("range_m", range_m, "m")
    shape = r.shape
    r = r.ravel()
    k = wavenumber(frequency_hz)
    h = _height(height_m)
    # Evanescent mode n decays as exp(-|k_n| r): stop where |k_n| r_min > 40 (exp(-40) = 4e-18).
    n_max = int(math.ceil(h / math.pi * math.hypot(k, EVANESCENT_DECAY_NEPERS / r.min()))) + 2
    if n_max > MAX_MODES:
        raise ScenarioError(
            f"range_m = {r.min()} m is too small for the mode sum with height_m = {h}; allowed: "
            f">= {EVANESCENT_DECAY_NEPERS * h / (math.pi * MAX_MODES):.3g} m"
        )
    total = np.zeros(r.shape, dtype=complex)
    block = max(1, 4_000_000 // r.size)
    for start in range(0, n_max + 1, block):
        orders = np.arange(start, min(start + block, n_max + 1))
        kn = plate_mode_wavenumbers(frequency_hz, h, orders)
        weight = np.where(orders == 0, 1.0, 2.0) * kn * kn
        safe = np.where(kn == 0, 1.0, kn)  # k_n = 0 exactly at cutoff: k_n^2 H0(k_n r) -> 0
        terms = np.where(kn[:, None] == 0, 0.0, weight[:, None] * _hankel2_0(safe[:, None] * r[None, :]))
        total += terms.sum(axis=0)
    return (-(ETA0 * moment_am) / (4.0 * k * h) * total).reshape(shape)


def parallel_plate_field_images(
    range_m, frequency_hz: float, height_m: float, moment_am: complex = 1.0, images: int = 200_000
) -> np.ndarray:
    """Ground-level Ez (V/m) between perfect plates by the method of images (independent of the modes).

    The monopole and its ground image form a dipole of moment 2 p at z = 0; the two plates repeat it
    (same sign for a vertical element) at z = 2 m h, m = -M..M. Each term is the full free-space
    dipole field, so the series converges absolutely (terms fall as 1/m^2); with M images the error
    is about the first omitted term times a few, which the caller controls through ``images``.
    """
    r = _positive("range_m", range_m, "m")
    h = _height(height_m)
    if int(images) < 1:
        raise ScenarioError(f"images = {images} is out of range; allowed: integer >= 1")
    m = np.arange(1, int(images) + 1, dtype=float)
    out = np.empty(r.shape, dtype=complex)
    for idx, rr in np.ndenumerate(r):
        # Images at +2mh and -2mh give the same Ez at z = 0: sum one side twice, in descending
        # order of m so the small terms are added first.
        far = free_space_ez(rr, 2.0 * m * h, frequency_hz, 2.0 * moment_am)[::-1]
        out[idx] = free_space_ez(rr, 0.0, frequency_hz, 2.0 * moment_am) + 2.0 * far.sum()
    return out
