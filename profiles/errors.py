"""The one exception type of :mod:`profiles`, and the range checks that raise it.

Messages are one line and name the field, the offending value and the allowed range, so that a
command-line front end can print them unchanged.
"""

from __future__ import annotations

import numpy as np


class ProfileError(ValueError):
    """An ionosphere profile input (parameter, array or file) is malformed or out of range."""


def _first_bad(values: np.ndarray, bad: np.ndarray) -> str:
    """Text for the first offending element of ``values`` (and how many there are)."""
    flat_values = values.reshape(-1)
    flat_bad = bad.reshape(-1)
    index = int(np.argmax(flat_bad))
    count = int(flat_bad.sum())
    text = f"{flat_values[index]:g}"
    if values.ndim == 0:
        return f"= {text}"
    return f"contains {text}" + (f" ({count} such values)" if count > 1 else "")


def as_float_array(name: str, value) -> np.ndarray:
    """``value`` as a float array, or a :class:`ProfileError` naming ``name`` if it is not numeric."""
    try:
        array = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ProfileError(f"{name} = {value!r} is not a number") from None
    return array


def check_range(
    name: str,
    value,
    low: float,
    high: float,
    units: str,
    *,
    low_open: bool = False,
    high_open: bool = False,
) -> np.ndarray:
    """Return ``value`` as a float array after checking every element is finite and within range.

    Parameters
    ----------
    name : str
        The field name shown in the message (with its unit suffix, e.g. ``"hprime_km"``).
    value : array_like
        Scalar or array to check.
    low, high : float
        Allowed range; ``numpy.inf`` for an open end.
    units : str
        Unit text for the message.
    low_open, high_open : bool
        Exclude the end point itself.

    Raises
    ------
    ProfileError
        One line: ``"<name> = <value> is outside the allowed range <low> to <high> <units>"``.
    """
    array = as_float_array(name, value)
    with np.errstate(invalid="ignore"):
        too_low = array <= low if low_open else array < low
        too_high = array >= high if high_open else array > high
    bad = ~np.isfinite(array) | too_low | too_high
    if np.any(bad):
        if np.isinf(high):
            allowed = f"{'above' if low_open else 'at least'} {low:g} {units}".rstrip()
        elif np.isinf(low):
            allowed = f"{'below' if high_open else 'at most'} {high:g} {units}".rstrip()
        else:
            allowed = f"{low:g} to {high:g} {units}".rstrip()
        raise ProfileError(f"{name} {_first_bad(array, bad)} is outside the allowed range ({allowed})")
    return array
