"""The one phase quantity reports show: Ez phase with the speed-of-light delay removed, wrapped.

Tables (``cavity table``), figures (``cavity plot``, ``compare``) and the memo all show
:func:`display_phase_deg`, so a number in a table can be found on a plot; result files keep the
unwrapped phase.
"""

from __future__ import annotations

import numpy as np

from cavity.constants import C0


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
PHASE_DEFINITION = (
    "phase re c delay = Ez phase + 360 f d / c (the speed-of-light delay removed; "
    "exp(+j omega t), relative to the transmitter current), wrapped to (-180, 180] deg; "
    "the result file keeps the unwrapped phase"
)


def display_phase_deg(phase_deg, range_km, frequency_khz):
    """The phase shown in tables and plots: :func:`relative_phase_deg` wrapped to (-180, 180] deg.

    One quantity everywhere (``cavity table``, ``plot``, ``compare``, the memo), so a number in a
    table can be found on a plot. Result files keep the unwrapped phase.
    """
    return wrap_phase_deg(relative_phase_deg(phase_deg, range_km, frequency_khz))
