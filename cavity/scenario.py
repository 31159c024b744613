"""Scenario files: TOML in, a validated, frozen :class:`Scenario` in SI units out.

A scenario is one transmitter, its receivers, one ionosphere description, one ground description and
optional solver settings (the contract is the "Scenario file" section of the design conventions and
the README's scenario reference). The loader is strict: an unknown key (with a "did you mean" hint),
a value of the wrong type, a missing required key, NaN/inf or a value out of range raises
:class:`cavity.errors.ScenarioError` with ONE line naming the key path (receivers and segments are
numbered from 1 in file order: ``receiver[2].range_km``), the value and the allowed range. A file is
never half-accepted.

Units: the file speaks km, kHz, kW and degrees; the dataclasses hold m, Hz, W, S/m and degrees.
:meth:`Scenario.to_toml` writes the file form back so that loading it gives an equal scenario.

The optional ``[source]`` section (:func:`_parse_source`, :class:`Source`) replaces the continuous
carrier by an impulsive lightning return stroke at the transmitter's place (``kind = "lightning"``);
without it, or with ``kind = "carrier"``, the scenario's ``source`` is None (the carrier).
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import os
import tomllib
from dataclasses import dataclass, field
from datetime import date, datetime
from pathlib import Path

from cavity.constants import C0
from cavity.errors import ScenarioError
from cavity.fdtd.grid import DEFAULT_CELLS_PER_WAVELENGTH
from cavity.ground import GROUND_CLASSES
from cavity.ionosphere_forms import (  # noqa: F401  (the forms' ranges and tops: public here too)
    BETA_RANGE_PER_KM,
    CEILING_RANGE_KM,
    DEFAULT_TOP_KM,
    FORMS,
    HPRIME_RANGE_KM,
    IONOSPHERE_KEYS,
    NO_IONOSPHERE_TOP_KM,
    Ionosphere,
    form_of,
    parse_ionosphere,
)
from cavity.tomltable import Table as _Table
from cavity.tomltable import exact_quotient as _edge
from cavity.tomltable import number_text as _number_text
from cavity.tomltable import shortest_quotient as _edge_short
from cavity.tomltable import show as _show
from cavity.tomltable import toml_lines as _lines
from cavity.tomltable import toml_value as _toml_value

# Allowed ranges, in the file's units (km, kHz, kW, degrees).
FREQUENCY_RANGE_KHZ = (0.3, 60.0)
POWER_MAX_KW = 5000.0
LATITUDE_RANGE_DEG = (-90.0, 90.0)
LONGITUDE_RANGE_DEG = (-180.0, 360.0)  # upper end excluded
RANGE_LIMITS_KM = (1.0, 15000.0)
MIN_RECEIVER_DISTANCE_KM = 1.0
CELL_RANGE_M = (10.0, 5000.0)
TOP_RANGE_KM = (60.0, 600.0)
PML_CELLS_RANGE = (5, 100)
CELLS_PER_WAVELENGTH_RANGE = (8.0, 200.0)
CONDUCTIVITY_RANGE_S_PER_M = (1e-6, 1e3)
PERMITTIVITY_RANGE = (1.0, 100.0)
# [source] with kind = "lightning" (Heidler current on a transmission-line channel)
SOURCE_KINDS: tuple[str, ...] = ("carrier", "lightning")
PEAK_CURRENT_RANGE_KA = (0.1, 500.0)
RISE_TIME_CONSTANT_RANGE_US = (0.05, 50.0)
DECAY_TIME_CONSTANT_RANGE_US = (1.0, 5000.0)
HEIDLER_EXPONENT_RANGE = (1.0, 20.0)
# [geomagnetic]
GEOMAGNETIC_MODELS: tuple[str, ...] = ("igrf", "none", "uniform")
FIELD_STRENGTH_RANGE_NT = (0.0, 100000.0)
DIP_RANGE_DEG = (-90.0, 90.0)
AZIMUTH_RANGE_DEG = (0.0, 360.0)  # upper end excluded
FIELD_ALTITUDE_RANGE_KM = (50.0, 150.0)
CHANNEL_SPEED_FRACTION_RANGE = (0.0, 1.0)  # lower end excluded
CHANNEL_HEIGHT_RANGE_KM = (0.5, 20.0)
RECORD_RANGE_MS = (1.0, 200.0)
#: The record must last this long after the pulse reaches the farthest receiver.
RECORD_MARGIN_MS = 2.0

#: The ionosphere forms and the keys that select each (every form lives in :mod:`cavity.ionosphere_forms`).
IONOSPHERE_FORMS: dict[str, tuple[str, ...]] = {name: form.keys for name, form in FORMS.items()}
GROUND_KINDS: tuple[str, ...] = (*GROUND_CLASSES, "custom", "auto")

_TOP_KEYS = ("title", "transmitter", "receiver", "ionosphere", "ground", "geomagnetic", "solver", "source")
_GEOMAGNETIC_KEYS = ("model", "date", "altitude_km", "strength_nt", "dip_deg", "azimuth_deg")
_TRANSMITTER_KEYS = ("name", "latitude_deg", "longitude_deg", "frequency_khz", "radiated_power_kw")
_RECEIVER_KEYS = ("name", "latitude_deg", "longitude_deg", "range_km")
_IONOSPHERE_KEYS = IONOSPHERE_KEYS
_GROUND_KEYS = ("kind", "conductivity_s_per_m", "relative_permittivity", "segment")
_SEGMENT_KEYS = ("from_km", "to_km", "kind", "conductivity_s_per_m", "relative_permittivity")
_SOURCE_KEYS = (
    "kind",
    "peak_current_ka",
    "rise_time_constant_us",
    "decay_time_constant_us",
    "heidler_exponent",
    "channel_speed_fraction",
    "channel_height_km",
    "record_ms",
    "band_khz",
)
_SOLVER_KEYS = (
    "max_range_km",
    "cell_m",
    "top_km",
    "earth_curvature",
    "pml_cells",
    "cells_per_wavelength",
    "receiver_time_series",
    "uncertainty",
)


# --------------------------------------------------------------------------------------------------
# The data model (SI units)
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Transmitter:
    """The continuous-wave transmitter: a short vertical monopole at the axis of the grid.

    ``frequencies_hz`` is sorted and unique; ``radiated_power_w`` is the radiated power over
    perfectly conducting ground (1 kW gives 300 mV/m at 1 km, ITU-R P.368 calibration). The position
    is None when every receiver is given by range only.
    """

    name: str
    latitude_deg: float | None
    longitude_deg: float | None
    frequencies_hz: tuple[float, ...]
    radiated_power_w: float


@dataclass(frozen=True)
class Receiver:
    """A receiving site: a position (latitude, longitude) or a ground range from the transmitter."""

    name: str
    latitude_deg: float | None = None
    longitude_deg: float | None = None
    range_m: float | None = None


@dataclass(frozen=True)
class GroundSegment:
    """A stretch of ground range ``from_m``..``to_m`` with its own electrical constants."""

    from_m: float
    to_m: float
    kind: str
    conductivity_s_per_m: float
    relative_permittivity: float


@dataclass(frozen=True)
class Ground:
    """Ground under every path.

    Named kinds carry the class values of :data:`cavity.ground.GROUND_CLASSES` ("perfect" has an
    infinite conductivity); ``"auto"`` leaves them None, to be filled along each path from a
    land/sea mask. ``segments`` override the ground over ranges of every path.
    """

    kind: str
    conductivity_s_per_m: float | None
    relative_permittivity: float | None
    segments: tuple[GroundSegment, ...] = ()


@dataclass(frozen=True)
class Geomagnetic:
    """The earth's magnetic field seen by the ionosphere (see :mod:`cavity.geomag`).

    ``model``: "igrf" (the IAGA reference field along each path at ``epoch``, evaluated at
    ``altitude_km``), "none" (isotropic ionosphere) or "uniform" (``strength_nt``, ``dip_deg``
    positive downward, ``azimuth_deg`` the direction of travel clockwise from magnetic north, the
    same on every path). ``epoch`` is the date of ``ionosphere.utc``, else the ``date`` key, else
    :data:`cavity.geomag.DEFAULT_EPOCH`; ``epoch_source`` says which. ``given`` records whether the
    file had a ``[geomagnetic]`` section (without one the model follows from the geometry).
    """

    model: str = "none"
    epoch: date | None = None
    epoch_source: str = ""
    date: date | None = None
    altitude_km: float = 80.0
    strength_nt: float | None = None
    dip_deg: float | None = None
    azimuth_deg: float | None = None
    given: bool = False


@dataclass(frozen=True)
class Solver:
    """Solver settings; None means "choose from frequency and receivers"."""

    max_range_m: float | None = None
    cell_m: float | None = None
    top_m: float | None = None
    earth_curvature: bool = True
    pml_cells: int = 20
    cells_per_wavelength: float = DEFAULT_CELLS_PER_WAVELENGTH
    receiver_time_series: bool = False
    uncertainty: bool = True  # companion solve on a coarser grid for receiver_ez_uncertainty


@dataclass(frozen=True)
class Source:
    """A lightning return stroke at the transmitter's place, in place of the carrier (SI units).

    Channel-base current after Heidler, Cvetic and Stanic (1999, IEEE Trans. Power Delivery 14(2)
    399) with peak ``peak_current_a``, time constants ``rise_time_constant_s`` (tau1) and
    ``decay_time_constant_s`` (tau2) and exponent n; a transmission-line channel of height
    ``channel_height_m`` climbed at ``channel_speed_fraction`` of the speed of light. Defaults are
    the first-stroke values 28 kA, 1.8 us, 95 us, n = 2. ``record_s`` is the length of the recorded
    waveforms from the stroke's onset; ``band_hz`` the band of the spectra, whose upper edge also
    sets the grid (see :mod:`cavity.sferic`).
    """

    # written as the loader converts the file's units, so that the defaults round-trip exactly
    kind: str = "lightning"
    peak_current_a: float = 28.0 * 1e3
    rise_time_constant_s: float = 1.8 * 1e-6
    decay_time_constant_s: float = 95.0 * 1e-6
    heidler_exponent: float = 2.0
    channel_speed_fraction: float = 0.5
    channel_height_m: float = 7.5 * 1e3
    record_s: float = 20.0 * 1e-3
    band_hz: tuple[float, float] = (0.5 * 1e3, 30.0 * 1e3)


@dataclass(frozen=True)
class ReceiverGeometry:
    """Where a receiver lies as seen from the transmitter (bearing None for a range-only receiver)."""

    name: str
    range_m: float
    bearing_deg: float | None


@dataclass(frozen=True)
class Scenario:
    """A validated scenario. Immutable: change it with :meth:`replace`, which validates again.

    ``text`` is the TOML as loaded (or as regenerated by :meth:`replace`) and ``path`` the file it
    came from (None for text); neither takes part in equality.
    """

    title: str
    transmitter: Transmitter
    receivers: tuple[Receiver, ...]
    ionosphere: Ionosphere
    ground: Ground
    solver: Solver
    source: Source | None = None  # None: the carrier of [transmitter]
    geomagnetic: Geomagnetic = Geomagnetic()
    text: str = field(default="", compare=False, repr=False)
    path: str | None = field(default=None, compare=False)

    def replace(self, **changes) -> Scenario:
        """A copy with some fields changed, validated like a file (ScenarioError on a bad value)."""
        changed = dataclasses.replace(self, **changes)
        loaded = load_scenario(changed.to_toml())
        return dataclasses.replace(loaded, path=self.path)

    def to_toml(self) -> str:
        """The scenario as TOML text in the file's units; :func:`load_scenario` reads it back equal."""
        return _to_toml(self)

    def receiver_geometry(self) -> tuple[ReceiverGeometry, ...]:
        """Range (m) and bearing (deg clockwise from true north) of each receiver, WGS84 geodesics."""
        tx = self.transmitter
        out = []
        for rx in self.receivers:
            if rx.range_m is not None:
                out.append(ReceiverGeometry(rx.name, rx.range_m, None))
            else:
                distance_m, bearing = _geodesic(tx.latitude_deg, tx.longitude_deg, rx.latitude_deg, rx.longitude_deg)
                out.append(ReceiverGeometry(rx.name, distance_m, bearing))
        return tuple(out)

    def planned_top_m(self) -> float:
        """Top of the physical domain: ``solver.top_m``, the ceiling, or a default by ionosphere form."""
        return form_of(self.ionosphere).top_m(self.ionosphere, self.solver.top_m)


# --------------------------------------------------------------------------------------------------
# Loading
# --------------------------------------------------------------------------------------------------


def load_scenario(source: str | os.PathLike) -> Scenario:
    """Load and validate a scenario.

    Parameters
    ----------
    source : str or os.PathLike
        A path to a ``.toml`` file, or TOML text (a string containing a newline, or an ``=`` while
        naming neither a ``.toml`` file nor an existing file: ``h=74.toml`` is a path).

    Returns
    -------
    Scenario
        Validated, in SI units; relative ``profile_file`` paths are resolved against the scenario
        file's folder (against the working folder for text).

    Raises
    ------
    ScenarioError
        One line naming the file, the key path, the value and the allowed range.
    """
    is_text = isinstance(source, str) and (
        "\n" in source
        or (
            "=" in source
            and not source.rstrip().lower().endswith(".toml")
            and not os.path.isfile(os.path.expanduser(source))
        )
    )
    if is_text:
        text, path, label, base = str(source), None, None, Path.cwd()
    else:
        file = Path(os.fspath(source))
        label = file.name or str(file)
        try:
            file = file.expanduser()
            raw = file.read_bytes()
        except FileNotFoundError:
            raise ScenarioError(f"scenario file {str(file)!r} not found") from None
        except IsADirectoryError:
            raise ScenarioError(f"{str(file)!r} is a folder, not a scenario file") from None
        except OSError as exc:
            raise ScenarioError(f"cannot read scenario file {str(file)!r}: {exc.strerror or exc}") from None
        except (ValueError, RuntimeError) as exc:  # a NUL character; ~user of an unknown user
            raise ScenarioError(f"scenario file name {str(file)!r} is not usable ({exc})") from None
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise ScenarioError(f"{label}: not UTF-8 text (bad byte at offset {exc.start})") from None
        path, base = str(file.resolve()), file.resolve().parent
    try:
        try:
            document = tomllib.loads(text)
        except ValueError as exc:  # TOMLDecodeError, or an integer of more than 4300 digits
            raise ScenarioError(f"invalid TOML: {str(exc).splitlines()[0]}") from None
        scenario = _parse_document(document, base)
    except ScenarioError as exc:
        if label:
            raise ScenarioError(f"{label}: {exc}") from None
        raise
    return dataclasses.replace(scenario, text=text, path=path)


def _parse_document(doc: dict, base: Path) -> Scenario:
    top = _Table(doc, "")
    top.finish(_TOP_KEYS)
    title = top.string("title", required=True)
    transmitter = _parse_transmitter(top.table("transmitter", required=True))
    receivers = _parse_receivers(top)
    ionosphere = parse_ionosphere(top.table("ionosphere", required=True), base)
    ground = _parse_ground(top.table("ground", required=True))
    solver = _parse_solver(top.table("solver", required=False) or _Table({}, "solver"), ionosphere)
    source = _parse_source(top.table("source", required=False))
    geomagnetic = _parse_geomagnetic(top.table("geomagnetic", required=False), transmitter, receivers, ionosphere)
    scenario = Scenario(title, transmitter, receivers, ionosphere, ground, solver, source, geomagnetic)
    _check_geometry(scenario)
    _check_source(scenario)
    return scenario


def _km(x: float | None) -> float | None:
    return None if x is None else x * 1e3


def _parse_transmitter(t: _Table) -> Transmitter:
    t.finish(_TRANSMITTER_KEYS)
    name = t.string("name", required=True)
    lat = t.number("latitude_deg", *LATITUDE_RANGE_DEG, "deg")
    lon = t.number("longitude_deg", *LONGITUDE_RANGE_DEG, "deg", high_open=True)
    if (lat is None) != (lon is None):
        given, other = ("latitude_deg", "longitude_deg") if lat is not None else ("longitude_deg", "latitude_deg")
        raise ScenarioError(f"{t.key(other)} is missing (needed with {t.key(given)})")
    band = f"supported band {_number_text(FREQUENCY_RANGE_KHZ[0])}-{_number_text(FREQUENCY_RANGE_KHZ[1])} kHz"
    raw = t.raw("frequency_khz")
    if raw is None:
        raise t.missing("frequency_khz", f"a number or a list of numbers in the {band}")
    if isinstance(raw, list):
        if not raw:
            raise t.fail("frequency_khz", raw, f"must list at least one frequency ({band})")
        values = [
            t.number(
                "frequency_khz",
                *FREQUENCY_RANGE_KHZ,
                "kHz",
                required=True,
                allowed=band,
                value=v,
                label=f"frequency_khz[{i}]",
            )
            for i, v in enumerate(raw, 1)
        ]
    else:
        values = [t.number("frequency_khz", *FREQUENCY_RANGE_KHZ, "kHz", required=True, allowed=band, value=raw)]
    frequencies = tuple(sorted({v * 1e3 for v in values}))
    power_kw = t.number(
        "radiated_power_kw",
        0.0,
        POWER_MAX_KW,
        "kW",
        required=True,
        low_open=True,
        allowed=f"allowed range > 0 to {_number_text(POWER_MAX_KW)} kW",
    )
    return Transmitter(name, lat, lon, frequencies, power_kw * 1e3)


def _each_table(raw: list, name: str, syntax: str, keys: tuple[str, ...]):
    """Yield (1-based index, checked _Table) for each entry of an array of tables such as [[receiver]]."""
    for i, item in enumerate(raw, 1):
        prefix = f"{name}[{i}]"
        if not isinstance(item, dict):
            raise ScenarioError(f"{prefix} = {_show(item)} must be a {syntax} table")
        table = _Table(item, prefix)
        table.finish(keys)
        yield i, table


def _parse_receivers(top: _Table) -> tuple[Receiver, ...]:
    raw = top.raw("receiver")
    if raw is None:
        raise ScenarioError("receiver is missing (at least one [[receiver]] table)")
    if isinstance(raw, dict):
        raise ScenarioError("receiver: write each receiver as a [[receiver]] table (double brackets)")
    if not isinstance(raw, list) or not raw:
        raise top.fail("receiver", raw, "must be one or more [[receiver]] tables")
    receivers: list[Receiver] = []
    first_index: dict[str, int] = {}
    for i, t in _each_table(raw, "receiver", "[[receiver]]", _RECEIVER_KEYS):
        name = t.string("name", required=True)
        if name in first_index:
            raise t.fail("name", name, f"is already used by receiver[{first_index[name]}]; names must be unique")
        first_index[name] = i
        lat = t.number("latitude_deg", *LATITUDE_RANGE_DEG, "deg")
        lon = t.number("longitude_deg", *LONGITUDE_RANGE_DEG, "deg", high_open=True)
        range_km = t.number("range_km", *RANGE_LIMITS_KM, "km")
        if (lat is None) != (lon is None):
            given, other = ("latitude_deg", "longitude_deg") if lat is not None else ("longitude_deg", "latitude_deg")
            raise ScenarioError(f"{t.key(other)} is missing (needed with {t.key(given)})")
        if range_km is not None and lat is not None:
            raise t.fail(
                "range_km",
                t.raw("range_km"),
                "given together with a position; give either latitude_deg and longitude_deg or range_km",
            )
        if range_km is None and lat is None:
            raise ScenarioError(f"{t.prefix} has no location: give latitude_deg and longitude_deg, or range_km")
        receivers.append(Receiver(name, lat, lon, _km(range_km)))
    return tuple(receivers)


def _ground_constants(t: _Table, kind: str, what: str) -> tuple[float | None, float | None]:
    """Conductivity and permittivity: given for custom, from the class table for named kinds."""
    sigma_given, eps_given = t.has("conductivity_s_per_m"), t.has("relative_permittivity")
    if kind == "custom":
        sigma = t.number("conductivity_s_per_m", *CONDUCTIVITY_RANGE_S_PER_M, "S/m", required=True)
        eps = t.number("relative_permittivity", *PERMITTIVITY_RANGE, "", required=True)
        return sigma, eps
    if sigma_given or eps_given:
        name = "conductivity_s_per_m" if sigma_given else "relative_permittivity"
        raise t.fail(name, t.data[name], f"is only allowed {what}; kind {_show(kind)} fixes it")
    if kind == "auto":
        return None, None
    cls = GROUND_CLASSES[kind]
    return cls.conductivity_s_per_m, cls.relative_permittivity


def _parse_geomagnetic(t: _Table | None, transmitter: Transmitter, receivers, ionosphere: Ionosphere) -> Geomagnetic:
    """The [geomagnetic] section. Without ``model`` (or without the section): "igrf" when every
    position is given (the field along each path needs directions), else "none" (isotropic: a
    receiver given by range has no direction)."""
    from cavity.geomag import DEFAULT_EPOCH, EPOCH_RANGE, REFERENCE_ALTITUDE_KM

    positioned = transmitter.latitude_deg is not None and all(rx.range_m is None for rx in receivers)
    given = t is not None
    t = t or _Table({}, "geomagnetic")
    t.finish(_GEOMAGNETIC_KEYS)
    model = t.string("model", default="igrf" if positioned else "none")
    if model not in GEOMAGNETIC_MODELS:
        raise t.fail("model", model, f"is not a field model (choose from {', '.join(GEOMAGNETIC_MODELS)})")
    uniform_keys = ("strength_nt", "dip_deg", "azimuth_deg")
    for name in uniform_keys:
        if t.has(name) and model != "uniform":
            raise t.fail(name, t.raw(name), 'is only used with model = "uniform"')
    for name in ("date", "altitude_km"):
        if t.has(name) and model != "igrf":
            raise t.fail(name, t.raw(name), 'is only used with model = "igrf"')
    if model == "none":
        return Geomagnetic("none", given=given)
    if model == "uniform":
        return Geomagnetic(
            "uniform",
            strength_nt=t.number("strength_nt", *FIELD_STRENGTH_RANGE_NT, "nT", required=True),
            dip_deg=t.number("dip_deg", *DIP_RANGE_DEG, "deg (positive downward)", required=True),
            azimuth_deg=t.number(
                "azimuth_deg", *AZIMUTH_RANGE_DEG, "deg clockwise from magnetic north", required=True, high_open=True
            ),
            given=given,
        )
    if not positioned:
        for i, rx in enumerate(receivers, 1):
            if rx.range_m is not None:
                raise ScenarioError(
                    f"receiver[{i}].range_km = {_show(_edge(rx.range_m, 1e3))} gives no direction, but "
                    'geomagnetic model = "igrf" (the field along each path) needs one; give latitude_deg and '
                    'longitude_deg, or use model = "uniform" or "none"'
                )
        raise ScenarioError('transmitter.latitude_deg is missing (geomagnetic model = "igrf" needs positions)')
    raw = t.raw("date")
    day = None
    if raw is not None:
        example = "e.g. date = 2026-12-01, no quotes"
        if isinstance(raw, datetime):
            raise t.fail("date", raw, f"must be a date without a time ({example})")
        if not isinstance(raw, date):
            raise t.fail("date", raw, f"must be a date ({example})")
        if not EPOCH_RANGE[0] <= raw <= EPOCH_RANGE[1]:
            raise t.fail("date", raw, f"is outside the allowed range {EPOCH_RANGE[0]} to {EPOCH_RANGE[1]} (IGRF-14)")
        day = raw
    instant = form_of(ionosphere).instant(ionosphere)
    if instant is not None:
        if day is not None:
            raise t.fail("date", raw, "is not used when ionosphere.utc gives the date; remove one of them")
        epoch, source = instant.date(), "ionosphere.utc"
        if not EPOCH_RANGE[0] <= epoch <= EPOCH_RANGE[1]:
            raise ScenarioError(
                f"ionosphere.utc = {_show(instant)} is outside the geomagnetic field's epochs "
                f'{EPOCH_RANGE[0]} to {EPOCH_RANGE[1]} (IGRF-14); give [geomagnetic] model = "none" or "uniform"'
            )
    elif day is not None:
        epoch, source = day, "geomagnetic.date"
    else:
        epoch, source = DEFAULT_EPOCH, "default"
    altitude = t.number("altitude_km", *FIELD_ALTITUDE_RANGE_KM, "km")
    return Geomagnetic(
        "igrf",
        epoch=epoch,
        epoch_source=source,
        date=day,
        altitude_km=REFERENCE_ALTITUDE_KM if altitude is None else altitude,
        given=given,
    )


def _parse_ground(t: _Table) -> Ground:
    t.finish(_GROUND_KEYS)
    kind = t.string("kind", required=True, what=f"choose from {', '.join(GROUND_KINDS)}")
    if kind not in GROUND_KINDS:
        close = difflib.get_close_matches(kind, GROUND_KINDS, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise t.fail("kind", kind, f"is not a ground kind (choose from {', '.join(GROUND_KINDS)}){hint}")
    sigma, eps = _ground_constants(t, kind, 'with kind = "custom"')
    raw = t.raw("segment")
    segments: list[GroundSegment] = []
    if raw is not None:
        if isinstance(raw, dict):
            raise ScenarioError(
                f"{t.key('segment')}: write each segment as a [[ground.segment]] table (double brackets)"
            )
        if not isinstance(raw, list):
            raise t.fail("segment", raw, "must be [[ground.segment]] tables")
        for i, s in _each_table(raw, "ground.segment", "[[ground.segment]]", _SEGMENT_KEYS):
            from_km = s.number("from_km", 0.0, RANGE_LIMITS_KM[1], "km", required=True, high_open=True)
            to_km = s.number("to_km", 0.0, RANGE_LIMITS_KM[1], "km", required=True, low_open=True)
            if to_km <= from_km:
                raise s.fail("to_km", s.raw("to_km"), f"must be greater than from_km = {_show(s.raw('from_km'))}")
            if segments and from_km * 1e3 < segments[-1].to_m:
                raise s.fail(
                    "from_km",
                    s.raw("from_km"),
                    f"overlaps ground.segment[{i - 1}], which ends at {_number_text(segments[-1].to_m / 1e3)} km; "
                    "segments must be in order of range and must not overlap",
                )
            if s.has("kind"):
                seg_kind = s.string("kind")
                named = tuple(GROUND_CLASSES)
                if seg_kind not in named:
                    close = difflib.get_close_matches(seg_kind, named, n=1)
                    hint = f"; did you mean {close[0]!r}?" if close else ""
                    raise s.fail(
                        "kind",
                        seg_kind,
                        f"is not a ground class (choose from {', '.join(named)}, or give "
                        f"conductivity_s_per_m and relative_permittivity instead){hint}",
                    )
                seg_sigma, seg_eps = _ground_constants(s, seg_kind, "without kind")
            else:
                seg_kind = "custom"
                seg_sigma, seg_eps = _ground_constants(s, "custom", "without kind")
            assert seg_sigma is not None and seg_eps is not None  # a segment is never "auto"
            segments.append(GroundSegment(from_km * 1e3, to_km * 1e3, seg_kind, seg_sigma, seg_eps))
    return Ground(kind, sigma, eps, tuple(segments))


def _parse_solver(t: _Table, ionosphere: Ionosphere) -> Solver:
    t.finish(_SOLVER_KEYS)
    max_range = t.number("max_range_km", *RANGE_LIMITS_KM, "km")
    raw_cell = t.raw("cell_m")
    cell = None
    if raw_cell is not None and raw_cell != "auto":
        allowed = f'allowed range {_number_text(CELL_RANGE_M[0])} to {_number_text(CELL_RANGE_M[1])} m, or "auto"'
        if isinstance(raw_cell, str):
            raise t.fail("cell_m", raw_cell, f'must be a number or "auto" ({allowed})')
        cell = t.number("cell_m", *CELL_RANGE_M, "m", allowed=allowed)
    top = t.number("top_km", *TOP_RANGE_KM, "km")
    fixed_by = form_of(ionosphere).top_fixed_by()
    if top is not None and fixed_by is not None:
        raise t.fail("top_km", t.data["top_km"], f"cannot be set with {fixed_by} (the ceiling is the top)")
    earth_curvature = t.boolean("earth_curvature", True)
    pml = t.number("pml_cells", *PML_CELLS_RANGE, "cells", integer=True)
    cpw = t.number("cells_per_wavelength", *CELLS_PER_WAVELENGTH_RANGE, "")
    time_series = t.boolean("receiver_time_series", False)
    uncertainty = t.boolean("uncertainty", True)
    defaults = Solver()
    return Solver(
        max_range_m=_km(max_range),
        cell_m=cell,
        top_m=_km(top),
        earth_curvature=earth_curvature,
        pml_cells=defaults.pml_cells if pml is None else int(pml),
        cells_per_wavelength=defaults.cells_per_wavelength if cpw is None else cpw,
        receiver_time_series=time_series,
        uncertainty=uncertainty,
    )


def _parse_source(t: _Table | None) -> Source | None:
    """The optional [source]: None for the carrier (absent or kind = "carrier"), else a lightning stroke."""
    if t is None:
        return None
    t.finish(_SOURCE_KEYS)
    kind = t.string("kind", required=True, what=f"choose from {', '.join(SOURCE_KINDS)}")
    if kind not in SOURCE_KINDS:
        close = difflib.get_close_matches(kind, SOURCE_KINDS, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise t.fail("kind", kind, f"is not a source kind (choose from {', '.join(SOURCE_KINDS)}){hint}")
    if kind == "carrier":
        for name in _SOURCE_KEYS[1:]:
            if t.has(name):
                raise t.fail(name, t.data[name], 'is only used with kind = "lightning"')
        return None
    d = Source()
    peak = t.number("peak_current_ka", *PEAK_CURRENT_RANGE_KA, "kA")
    rise = t.number("rise_time_constant_us", *RISE_TIME_CONSTANT_RANGE_US, "us")
    decay = t.number("decay_time_constant_us", *DECAY_TIME_CONSTANT_RANGE_US, "us")
    exponent = t.number("heidler_exponent", *HEIDLER_EXPONENT_RANGE, "")
    speed = t.number("channel_speed_fraction", *CHANNEL_SPEED_FRACTION_RANGE, "of the speed of light", low_open=True)
    height = t.number("channel_height_km", *CHANNEL_HEIGHT_RANGE_KM, "km")
    record = t.number("record_ms", *RECORD_RANGE_MS, "ms")
    rise_s = d.rise_time_constant_s if rise is None else rise * 1e-6
    decay_s = d.decay_time_constant_s if decay is None else decay * 1e-6
    if decay_s <= rise_s:
        name = "decay_time_constant_us" if decay is not None else "rise_time_constant_us"
        raise t.fail(
            name,
            t.data[name],
            f"leaves the decay ({_number_text(decay_s * 1e6)} us) no longer than "
            f"the rise ({_number_text(rise_s * 1e6)} us); the decay time constant must be the longer",
        )
    band = d.band_hz
    raw = t.raw("band_khz")
    if raw is not None:
        allowed = (
            f"[low, high] within {_number_text(FREQUENCY_RANGE_KHZ[0])}-{_number_text(FREQUENCY_RANGE_KHZ[1])} kHz"
        )
        if not isinstance(raw, list) or len(raw) != 2:
            raise t.fail("band_khz", raw, f"must be two numbers {allowed}")
        low, high = (
            t.number(
                "band_khz",
                *FREQUENCY_RANGE_KHZ,
                "kHz",
                required=True,
                value=v,
                label=f"band_khz[{i}]",
                allowed=f"allowed range {allowed}",
            )
            for i, v in enumerate(raw, 1)
        )
        if high <= low:
            raise t.fail("band_khz", raw, f"must give the low edge first and a higher edge second ({allowed})")
        band = (low * 1e3, high * 1e3)
    return Source(
        kind="lightning",
        peak_current_a=d.peak_current_a if peak is None else peak * 1e3,
        rise_time_constant_s=rise_s,
        decay_time_constant_s=decay_s,
        heidler_exponent=d.heidler_exponent if exponent is None else exponent,
        channel_speed_fraction=d.channel_speed_fraction if speed is None else speed,
        channel_height_m=d.channel_height_m if height is None else height * 1e3,
        record_s=d.record_s if record is None else record * 1e-3,
        band_hz=band,
    )


def _check_source(s: Scenario) -> None:
    """A lightning record must outlast the pulse's arrival at the farthest receiver by RECORD_MARGIN_MS."""
    if s.source is None:
        return
    farthest = max(s.receiver_geometry(), key=lambda g: g.range_m)
    arrival_ms = farthest.range_m / C0 * 1e3
    need_ms = arrival_ms + RECORD_MARGIN_MS
    if s.source.record_s * 1e3 < need_ms:
        raise ScenarioError(
            f"source.record_ms = {_show(_edge(s.source.record_s, 1e-3))} ends before the sferic has passed "
            f"{farthest.name!r} ({farthest.range_m / 1e3:.0f} km, arrival at {arrival_ms:.2f} ms); allowed range "
            f"{math.ceil(need_ms * 10) / 10:g} to {_number_text(RECORD_RANGE_MS[1])} ms"
        )


def _geodesic(lat1, lon1, lat2, lon2) -> tuple[float, float]:
    """WGS84 geodesic distance (m) and forward bearing (deg, 0-360) from point 1 to point 2 (pyproj)."""
    from cavity.geo import distance_bearing

    distance, bearing = distance_bearing(lat1, lon1, lat2, lon2)
    return float(distance), float(bearing)


def _check_geometry(s: Scenario) -> None:
    """Checks that need several sections: positions, distances, and what needs a position."""
    tx = s.transmitter
    has_tx = tx.latitude_deg is not None
    for i, rx in enumerate(s.receivers, 1):
        if rx.range_m is None and not has_tx:
            raise ScenarioError(
                f"transmitter.latitude_deg is missing (receiver[{i}] is given by position, so the "
                "transmitter needs latitude_deg and longitude_deg)"
            )
    form = form_of(s.ionosphere)
    if not has_tx:
        if form.needs_positions:
            raise ScenarioError(f"transmitter.latitude_deg is missing ({form.needs_positions})")
        if s.ground.kind == "auto":
            raise ScenarioError(
                'transmitter.latitude_deg is missing (ground kind = "auto" needs positions for the land/sea map)'
            )
    direction = None
    if s.ground.kind == "auto":
        direction = 'ground kind = "auto" (land/sea along each path)'
    elif form.direction:
        direction = form.direction
    if direction:
        for i, rx in enumerate(s.receivers, 1):
            if rx.range_m is not None:
                raise ScenarioError(
                    f"receiver[{i}].range_km = {_show(_edge(rx.range_m, 1e3))} gives no direction, but {direction} "
                    "needs one; give latitude_deg and longitude_deg instead"
                )
    farthest_km, farthest_name = 0.0, ""
    for i, (rx, geometry) in enumerate(zip(s.receivers, s.receiver_geometry()), 1):
        d_km = geometry.range_m / 1e3
        if rx.range_m is None:
            where = f"receiver[{i}].latitude_deg = {_show(rx.latitude_deg)}, longitude_deg = {_show(rx.longitude_deg)}"
            if d_km < MIN_RECEIVER_DISTANCE_KM:
                raise ScenarioError(
                    f"{where} is {d_km:.3f} km from the transmitter; receivers must be at least "
                    f"{_number_text(MIN_RECEIVER_DISTANCE_KM)} km away (allowed range 1 to 15000 km)"
                )
            if d_km > RANGE_LIMITS_KM[1]:
                raise ScenarioError(
                    f"{where} is {d_km:.0f} km from the transmitter, too near its antipode "
                    "(allowed range 1 to 15000 km)"
                )
        if d_km > farthest_km:
            farthest_km, farthest_name = d_km, rx.name
    if s.solver.max_range_m is not None and s.solver.max_range_m / 1e3 < farthest_km:
        raise ScenarioError(
            f"solver.max_range_km = {_show(_edge(s.solver.max_range_m, 1e3))} is shorter than the farthest "
            f"receiver ({farthest_name!r} at {farthest_km:.1f} km); allowed range {farthest_km:.1f} to 15000 km"
        )


# --------------------------------------------------------------------------------------------------
# Writing back
# --------------------------------------------------------------------------------------------------


def _named_constants_match(kind: str, sigma, eps, where: str) -> None:
    if kind in ("custom", "auto"):
        return
    cls = GROUND_CLASSES.get(kind)
    if cls is None:
        raise ScenarioError(
            f"{where}.kind = {_show(kind)} is not a ground kind (choose from {', '.join(GROUND_KINDS)})"
        )
    for name, given, fixed in (
        ("conductivity_s_per_m", sigma, cls.conductivity_s_per_m),
        ("relative_permittivity", eps, cls.relative_permittivity),
    ):
        if given is not None and given != fixed:
            raise ScenarioError(
                f"{where}.{name} = {_show(given)} differs from kind {_show(kind)} ({_number_text(fixed)}); "
                'use kind = "custom" for other values'
            )


def _to_toml(s: Scenario) -> str:
    tx = s.transmitter
    freqs = [_edge(f, 1e3) for f in tx.frequencies_hz]
    out = [f"title = {_toml_value(s.title)}", "", "[transmitter]"]
    out += _lines(
        [
            ("name", tx.name),
            ("latitude_deg", tx.latitude_deg),
            ("longitude_deg", tx.longitude_deg),
            ("frequency_khz", freqs[0] if len(freqs) == 1 else freqs),
            ("radiated_power_kw", _edge(tx.radiated_power_w, 1e3)),
        ]
    )
    for rx in s.receivers:
        out += ["", "[[receiver]]"]
        out += _lines(
            [
                ("name", rx.name),
                ("latitude_deg", rx.latitude_deg),
                ("longitude_deg", rx.longitude_deg),
                ("range_km", None if rx.range_m is None else _edge(rx.range_m, 1e3)),
            ]
        )
    ion = s.ionosphere
    out += ["", "[ionosphere]"]
    out += _lines(form_of(ion).dump(ion))
    g = s.ground
    out += ["", "[ground]", f"kind = {_toml_value(g.kind)}"]
    _named_constants_match(g.kind, g.conductivity_s_per_m, g.relative_permittivity, "ground")
    if g.kind == "custom":
        out += _lines(
            [("conductivity_s_per_m", g.conductivity_s_per_m), ("relative_permittivity", g.relative_permittivity)]
        )
    for i, seg in enumerate(g.segments, 1):
        out += ["", "[[ground.segment]]"]
        out += _lines([("from_km", _edge(seg.from_m, 1e3)), ("to_km", _edge(seg.to_m, 1e3))])
        _named_constants_match(seg.kind, seg.conductivity_s_per_m, seg.relative_permittivity, f"ground.segment[{i}]")
        if seg.kind == "custom":
            out += _lines(
                [
                    ("conductivity_s_per_m", seg.conductivity_s_per_m),
                    ("relative_permittivity", seg.relative_permittivity),
                ]
            )
        else:
            out += _lines([("kind", seg.kind)])
    gm = s.geomagnetic
    if gm.given:
        out += ["", "[geomagnetic]", f"model = {_toml_value(gm.model)}"]
        if gm.model == "igrf":
            out += [f"date = {gm.date.isoformat()}"] if gm.date is not None else []
            out += _lines([("altitude_km", gm.altitude_km)])
        elif gm.model == "uniform":
            out += _lines([("strength_nt", gm.strength_nt), ("dip_deg", gm.dip_deg), ("azimuth_deg", gm.azimuth_deg)])
    sv = s.solver
    out += ["", "[solver]"]
    out += _lines(
        [
            ("max_range_km", None if sv.max_range_m is None else _edge(sv.max_range_m, 1e3)),
            ("cell_m", "auto" if sv.cell_m is None else sv.cell_m),
            ("top_km", None if sv.top_m is None else _edge(sv.top_m, 1e3)),
            ("earth_curvature", sv.earth_curvature),
            ("pml_cells", sv.pml_cells),
            ("cells_per_wavelength", sv.cells_per_wavelength),
            ("receiver_time_series", sv.receiver_time_series),
            ("uncertainty", sv.uncertainty),
        ]
    )
    src = s.source
    if src is not None:
        out += ["", "[source]"]
        out += _lines(
            [
                ("kind", src.kind),
                ("peak_current_ka", _edge_short(src.peak_current_a, 1e3)),
                ("rise_time_constant_us", _edge_short(src.rise_time_constant_s, 1e-6)),
                ("decay_time_constant_us", _edge_short(src.decay_time_constant_s, 1e-6)),
                ("heidler_exponent", float(src.heidler_exponent)),
                ("channel_speed_fraction", float(src.channel_speed_fraction)),
                ("channel_height_km", _edge_short(src.channel_height_m, 1e3)),
                ("record_ms", _edge_short(src.record_s, 1e-3)),
                ("band_khz", [_edge_short(src.band_hz[0], 1e3), _edge_short(src.band_hz[1], 1e3)]),
            ]
        )
    return "\n".join(out) + "\n"
