"""Sweep points: UTC instants and frequencies of a sweep, and the scenario of each point."""

from __future__ import annotations

import dataclasses
import logging
import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, datetime, timedelta, timezone
from typing import TYPE_CHECKING

import numpy as np

from cavity.errors import CavityError, ScenarioError
from cavity.ionosphere_forms import form_of

if TYPE_CHECKING:  # pragma: no cover
    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: Most points one sweep may hold (a guard against a mistyped step such as 1s over a day).
MAX_POINTS = 10_000


class SweepError(CavityError):
    """One or more points of a sweep failed after their retry; ``failures`` holds (name, message)."""

    def __init__(self, message: str, failures: Sequence[tuple[str, str]] = ()):
        super().__init__(message)
        self.failures = list(failures)


def one_line(exc: BaseException) -> str:
    """The first line of an exception's message (its class name when it has none)."""
    text = str(exc).strip() or exc.__class__.__name__
    return text.splitlines()[0]


def describe_error(exc: BaseException | None) -> str:
    """``Class: first line`` of an exception, as failures are listed to the user."""
    if exc is None:
        return "unknown error"
    return f"{exc.__class__.__name__}: {one_line(exc)}"


# --------------------------------------------------------------------------------------------------
# Points
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SweepPoint:
    """One point of a sweep: an instant (None when the sweep has no time axis) and one frequency."""

    time_index: int
    frequency_index: int
    utc: datetime | None
    frequency_hz: float

    @property
    def name(self) -> str:
        """How the point is named to the user, e.g. ``2026-03-20T03:15:00Z 14.3 kHz``."""
        f = f"{self.frequency_hz / 1e3:g} kHz"
        return f"{utc_text(self.utc)} {f}" if self.utc is not None else f

    @property
    def key(self) -> str:
        """A file-name-safe identity of the point, e.g. ``t20260320T031500Z_f14.3kHz``."""
        f = f"f{self.frequency_hz / 1e3:g}kHz"
        return f"t{self.utc:%Y%m%dT%H%M%SZ}_{f}" if self.utc is not None else f


def utc_text(when: datetime) -> str:
    """An instant as ``2026-03-20T06:15:00Z`` (UTC, whole seconds)."""
    return when.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def parse_utc(value, field: str = "start") -> datetime:
    """An ISO 8601 instant with an offset (``2026-03-20T06:00Z``), or a date meaning 00:00 UTC.

    Raises
    ------
    ScenarioError
        Not a date and time, or a time without an offset (the tool never guesses a time zone).
    """
    shown = value.isoformat() if isinstance(value, (datetime, date)) else str(value).strip()
    if isinstance(value, datetime):
        when = value
    elif isinstance(value, date):
        when = datetime(value.year, value.month, value.day, tzinfo=timezone.utc)
    else:
        text = str(value).strip()
        try:
            when = datetime.fromisoformat(text)
        except ValueError:
            raise ScenarioError(
                f"{field} = {text!r} is not a date and time; write e.g. 2026-03-20T06:00Z (UTC)"
            ) from None
        if len(text) == 10:  # a date alone: midnight UTC
            when = when.replace(tzinfo=timezone.utc)
    if when.tzinfo is None or when.utcoffset() is None:
        raise ScenarioError(f"{field} = {shown!r} has no time zone; end it with Z (UTC), e.g. 2026-03-20T06:00Z")
    return when.astimezone(timezone.utc)


def parse_step(value) -> timedelta:
    """A positive whole number of seconds from text such as ``15min``, ``1h``, ``90s`` or ``1h30min``."""
    if isinstance(value, timedelta):
        step = value
    else:
        import pandas as pd

        text = str(value).strip()
        try:
            float(text)
        except ValueError:
            pass
        else:
            raise ScenarioError(f"step = {text!r} has no unit; write e.g. 15min, 1h or 90s")
        try:
            step = pd.Timedelta(text).to_pytimedelta()
        except (ValueError, TypeError):
            raise ScenarioError(f"step = {text!r} is not a duration; write e.g. 15min, 1h or 90s") from None
    seconds = step.total_seconds()
    if not (seconds >= 1.0 and float(seconds).is_integer()):
        raise ScenarioError(f"step = {step} must be a whole number of seconds, at least 1 s")
    return step


def sweep_times(start, stop, step) -> list[datetime]:
    """Instants from ``start`` to ``stop`` (included when it falls on the grid) every ``step``.

    Parameters
    ----------
    start, stop : str, datetime.datetime or datetime.date
        See :func:`parse_utc`.
    step : str or datetime.timedelta
        See :func:`parse_step`.
    """
    t0 = parse_utc(start, "start")
    t1 = parse_utc(stop, "stop")
    dt = parse_step(step)
    if t1 < t0:
        raise ScenarioError(f"stop = {utc_text(t1)} is before start = {utc_text(t0)}")
    count = int((t1 - t0) // dt) + 1
    if count > MAX_POINTS:
        raise ScenarioError(
            f"step = {dt} from {utc_text(t0)} to {utc_text(t1)} gives {count} instants; the limit is {MAX_POINTS}"
        )
    return [t0 + k * dt for k in range(count)]


def sweep_points(
    scenario: Scenario, times=None, frequencies_khz=None
) -> tuple[list[datetime] | None, list[float], list[SweepPoint]]:
    """The instants, frequencies (Hz) and points of a sweep, checked against the scenario.

    ``times`` None keeps the scenario's own instant (a time axis of length 1) for ionosphere form
    "utc" and gives no time axis otherwise; ``frequencies_khz`` None keeps the scenario's
    frequencies. Every point becomes its own single-frequency solve.

    Raises
    ------
    ScenarioError
        Instants given for a scenario whose ionosphere does not depend on time, or a bad value.
    """
    if getattr(scenario, "source", None) is not None:
        raise ScenarioError(
            "[source]: a sweep solves the continuous transmitter; a lightning source is not swept "
            "(remove [source], or run each instant on its own)"
        )
    form = form_of(scenario.ionosphere)
    own_instant = form.instant(scenario.ionosphere)
    if times is not None:
        times = [parse_utc(t, "time") for t in times]
        if not times:
            raise ScenarioError("times: the sweep needs at least one instant")
        if own_instant is None:
            form.at_instant(scenario.ionosphere, times[0])  # a form without an instant raises: no time axis
        if len(set(times)) != len(times):
            raise ScenarioError("times: an instant appears twice")
        times = sorted(times)
    elif own_instant is not None:
        times = [own_instant]
    if frequencies_khz is None:
        freqs = sorted(scenario.transmitter.frequencies_hz)
    else:
        values = [frequencies_khz] if isinstance(frequencies_khz, (int, float)) else list(frequencies_khz)
        if not values:
            raise ScenarioError("frequency_khz: give at least one frequency")
        freqs = []
        for v in values:
            if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)) or not math.isfinite(v):
                raise ScenarioError(f"frequency_khz = {v!r} must be a number (kHz)")
            freqs.append(float(v) * 1e3)
        freqs = sorted(set(freqs))
    slots = list(range(len(times))) if times is not None else [None]
    points = [
        SweepPoint(ti if ti is not None else 0, fi, None if ti is None else times[ti], f)
        for ti in slots
        for fi, f in enumerate(freqs)
    ]
    if len(points) > MAX_POINTS:
        raise ScenarioError(f"the sweep has {len(points)} points; the limit is {MAX_POINTS}")
    return times, freqs, points


def point_scenario(scenario: Scenario, point: SweepPoint) -> Scenario:
    """The scenario of one point: its instant (form "utc") and its one frequency, validated again.

    Receiver time series are switched off: they are per-run diagnostics that a sweep does not keep.
    """
    changes = {
        "transmitter": dataclasses.replace(scenario.transmitter, frequencies_hz=(float(point.frequency_hz),)),
        "solver": dataclasses.replace(scenario.solver, receiver_time_series=False),
    }
    if point.utc is not None:
        changes["ionosphere"] = form_of(scenario.ionosphere).at_instant(scenario.ionosphere, point.utc)
    return scenario.replace(**changes)
