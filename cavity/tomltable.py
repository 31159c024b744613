"""TOML tables read strictly and written back exactly: the scenario file's reading and writing helpers.

:class:`Table` wraps one TOML table with its key path and typed, range-checked readers that raise
:class:`cavity.errors.ScenarioError` with one line naming the key path, the value and the allowed range.
:func:`toml_value` / :func:`toml_lines` write values back, and :func:`exact_quotient` picks the value in
the file's unit that converts back to the SI value exactly (so that a scenario round-trips equal).
Used by :mod:`cavity.scenario` and :mod:`cavity.ionosphere_forms`.
"""

from __future__ import annotations

import difflib
import json
import math
from datetime import date, datetime, time, timezone
from typing import Any, Literal, overload

from cavity.errors import ScenarioError


def show(value: Any) -> str:
    """A value as the user wrote it in TOML, on one line."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (datetime, date, time)):
        return value.isoformat()
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, list):
        return "[" + ", ".join(show(v) for v in value) + "]"
    return str(value)


def number_text(x: float) -> str:
    return f"{x:g}"


class Table:
    """One TOML table and its key path, with typed, range-checked readers."""

    def __init__(self, data: dict, prefix: str):
        self.data = data
        self.prefix = prefix

    def key(self, name: str) -> str:
        if not name or not name.isprintable() or any(c.isspace() or c in '."' for c in name):
            name = show(name)  # quoted like a TOML key, control characters escaped: one line
        return f"{self.prefix}.{name}" if self.prefix else name

    def has(self, name: str) -> bool:
        return name in self.data

    def fail(self, name: str, value: Any, problem: str) -> ScenarioError:
        return ScenarioError(f"{self.key(name)} = {show(value)} {problem}")

    def missing(self, name: str, what: str) -> ScenarioError:
        return ScenarioError(f"{self.key(name)} is missing ({what})")

    def raw(self, name: str) -> Any:
        return self.data.get(name)

    def finish(self, allowed: tuple[str, ...]) -> None:
        """Raise on the first key that is not in ``allowed``, with a "did you mean" hint."""
        for name in self.data:
            if name in allowed:
                continue
            close = difflib.get_close_matches(name, allowed, n=1, cutoff=0.6)
            close = close or [k for k in allowed if k.startswith(f"{name}_")][:1]  # unit suffix left off
            hint = f"; did you mean {close[0]!r}?" if close else f" (known keys: {', '.join(allowed)})"
            raise ScenarioError(f"{self.key(name)}: unknown key{hint}")

    @overload
    def table(self, name: str, *, required: Literal[True]) -> Table: ...
    @overload
    def table(self, name: str, *, required: bool) -> Table | None: ...

    def table(self, name: str, *, required: bool) -> Table | None:
        """The sub-table ``name`` (None when absent and not required)."""
        value = self.raw(name)
        if value is None:
            if required:
                raise ScenarioError(f"[{self.key(name)}] section is missing")
            return None
        if not isinstance(value, dict):
            raise self.fail(name, value, f"must be a table [{self.key(name)}]")
        return Table(value, self.key(name))

    @overload
    def string(self, name: str, *, required: Literal[True], default: str | None = None, what: str = ...) -> str: ...
    @overload
    def string(self, name: str, *, required: bool = False, default: str, what: str = ...) -> str: ...
    @overload
    def string(self, name: str, *, required: bool = False, default: None = None, what: str = ...) -> str | None: ...

    def string(
        self, name: str, *, required: bool = False, default: str | None = None, what: str = "a text in quotes"
    ) -> str | None:
        """A non-empty text, stripped; ``default`` when absent (a ScenarioError when absent and required)."""
        value = self.raw(name)
        if value is None:
            if required:
                raise self.missing(name, what)
            return default
        if not isinstance(value, str):
            raise self.fail(name, value, "must be a text in quotes")
        if not value.strip():
            raise self.fail(name, value, "must not be empty")
        return value.strip()

    def boolean(self, name: str, default: bool) -> bool:
        value = self.raw(name)
        if value is None:
            return default
        if not isinstance(value, bool):
            raise self.fail(name, value, "must be true or false")
        return value

    @overload
    def number(
        self,
        name: str,
        low: float,
        high: float,
        unit: str,
        *,
        required: Literal[True],
        low_open: bool = ...,
        high_open: bool = ...,
        allowed: str | None = ...,
        integer: bool = ...,
        value: Any = ...,
        label: str | None = ...,
    ) -> float: ...
    @overload
    def number(
        self,
        name: str,
        low: float,
        high: float,
        unit: str,
        *,
        required: bool = ...,
        low_open: bool = ...,
        high_open: bool = ...,
        allowed: str | None = ...,
        integer: bool = ...,
        value: Any = ...,
        label: str | None = ...,
    ) -> float | None: ...

    def number(
        self,
        name: str,
        low: float,
        high: float,
        unit: str,
        *,
        required: bool = False,
        low_open: bool = False,
        high_open: bool = False,
        allowed: str | None = None,
        integer: bool = False,
        value: Any = None,
        label: str | None = None,
    ) -> float | None:
        """Check a number (never a boolean) is finite and within [low, high] (ends open if asked)."""
        if value is None:
            value = self.raw(name)
        label = label or name
        if allowed is None:
            lo = f"> {number_text(low)}" if low_open else number_text(low)
            hi = f"< {number_text(high)}" if high_open else number_text(high)
            allowed = f"allowed range {lo} to {hi} {unit}".rstrip()
        if value is None:
            if required:
                raise self.missing(label, allowed)
            return None
        kind = "an integer" if integer else "a number"
        if isinstance(value, bool):
            raise self.fail(label, value, f"must be {kind}, not true/false ({allowed})")
        if integer and not isinstance(value, int):
            raise self.fail(label, value, f"must be {kind} ({allowed})")
        if not isinstance(value, (int, float)):
            raise self.fail(label, value, f"must be {kind} ({allowed})")
        if isinstance(value, float) and not math.isfinite(value):  # ints are finite (and may exceed float)
            raise self.fail(label, value, f"must be a finite number ({allowed})")
        too_low = value <= low if low_open else value < low
        too_high = value >= high if high_open else value > high
        if too_low or too_high:
            raise self.fail(label, value, f"is outside the {allowed}")
        return int(value) if integer else float(value)


def exact_quotient(value_si: float, scale: float) -> float:
    """``value_si / scale`` chosen so that multiplying it by ``scale`` gives ``value_si`` back exactly."""
    q = value_si / scale
    if not math.isfinite(q) or q * scale == value_si:
        return q
    up = down = q
    for _ in range(4):
        up, down = math.nextafter(up, math.inf), math.nextafter(down, -math.inf)
        for candidate in (up, down):
            if candidate * scale == value_si:
                return candidate
    return q


def shortest_quotient(value_si: float, scale: float) -> float:
    """Like :func:`exact_quotient`, preferring the shortest decimal that gives ``value_si`` back (95.0, not 95.00000000000001)."""
    for digits in (12, 15):
        q = float(f"{value_si / scale:.{digits}g}")
        if q * scale == value_si:
            return q
    return exact_quotient(value_si, scale)


def toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False).replace("\x7f", "\\u007f")  # TOML escapes DEL too
    if isinstance(value, datetime):
        return value.astimezone(timezone.utc).isoformat().replace("+00:00", "Z")
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} as TOML")


def toml_lines(items: list[tuple[str, Any]]) -> list[str]:
    return [f"{key} = {toml_value(value)}" for key, value in items if value is not None]
