"""Ionosphere forms: the one home of each way the scenario's ``[ionosphere]`` section can be given.

A form is one subclass of :class:`IonosphereForm`, registered in :data:`FORMS`. It declares the keys
that select it, parses and range-checks them into an :class:`Ionosphere`, writes them back, describes
itself for ``cavity inspect``, result tables and maps, and says what it puts into a solve: the
per-sample Wait-Spies h' and beta a path carries (:meth:`IonosphereForm.along`), the electron density
and collision frequency per sample and altitude (:meth:`IonosphereForm.profiles`), or a perfectly
conducting ceiling (:meth:`IonosphereForm.ceiling_m`). The scenario loader, ``cavity inspect``, the
maps, the sweeps and :mod:`cavity.medium` dispatch through :func:`form_of` and never compare the form's
name, so that adding a form touches this module only (see DEVELOPERS.md, "An ionosphere form").

The forms: ``exponential`` (Wait-Spies h' and beta, Wait and Spies 1964, NBS Tech. Note 300),
``preset`` (a named pair of :data:`profiles.daynight.PRESETS`), ``utc`` (the sun along each path picks
day, night or a linear transition between two presets), ``ceiling`` (a perfect conductor, for
verification), ``file`` (a user profile table) and ``none`` (free space above the ground).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from cavity.errors import ScenarioError
from cavity.tomltable import Table, exact_quotient

#: Top of the physical domain when the scenario does not set ``top_km`` (exponential, preset, utc
#: and file forms; under a ceiling the ceiling is the top; with no ionosphere the open top is high).
DEFAULT_TOP_KM = 120.0
NO_IONOSPHERE_TOP_KM = 400.0

# Allowed ranges, in the file's units
HPRIME_RANGE_KM = (50.0, 100.0)
BETA_RANGE_PER_KM = (0.1, 1.5)
CEILING_RANGE_KM = (20.0, 200.0)

#: (chi, h', beta, daylight) per path sample; four Nones for a form without a per-sample description.
Along = tuple["np.ndarray | None", "np.ndarray | None", "np.ndarray | None", "np.ndarray | None"]
_NOTHING_ALONG: Along = (None, None, None, None)


@dataclass(frozen=True)
class Ionosphere:
    """One ionosphere description; ``form`` (a key of :data:`FORMS`) says which fields are used.

    ``"exponential"``: Wait-Spies h' (km) and beta (1/km); ``"preset"``: a named pair from
    :data:`profiles.daynight.PRESETS`; ``"utc"``: the sun's position along each path at ``utc``
    (tz-aware, UTC) picks between ``day_preset`` and ``night_preset``; ``"ceiling"``: a perfectly
    conducting ceiling at ``ceiling_m`` (verification); ``"file"``: a user profile at
    ``profile_path`` (absolute); ``"none"``: free space above the ground (verification).
    """

    form: str
    hprime_km: float | None = None
    beta_per_km: float | None = None
    preset: str | None = None
    utc: datetime | None = None
    ceiling_m: float | None = None
    profile_path: str | None = None
    day_preset: str = "day"
    night_preset: str = "night"


def _known_presets() -> tuple[str, ...]:
    from profiles.daynight import PRESETS

    return tuple(PRESETS)


def _preset_name(t: Table, name: str, *, required: bool, default: str | None = None) -> str | None:
    """A preset name from the table, checked against :data:`profiles.daynight.PRESETS` ("did you mean")."""
    value = t.string(name, required=required, default=default)
    if value is None or not t.has(name):
        return value
    known = _known_presets()
    if value not in known:
        close = difflib.get_close_matches(value, known, n=1)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        raise t.fail(name, value, f"is not a known preset (choose from {', '.join(known)}){hint}")
    return value


def _preset_text(name: Any) -> str:
    """A preset named in a result file's embedded scenario, with its h' and beta when known."""
    from profiles.daynight import PRESETS

    p = PRESETS.get(str(name))
    return f'preset "{name}"' + (f" (h' {p.hprime_km:g} km, beta {p.beta_per_km:g} /km)" if p else "")


class IonosphereForm:
    """One form of ``[ionosphere]``. Subclasses set the class attributes and override what differs.

    Attributes
    ----------
    name : str
        The form's name (:attr:`Ionosphere.form`).
    keys : tuple of str
        The keys that select this form (any of them present selects it; the first is named in messages).
    optional_keys : tuple of str
        Further keys used only with this form (an error with any other form).
    text : str
        How the form is given, for the "give exactly one of" message.
    direction : str or None
        Why the medium depends on the direction of a path (a phrase), None when it does not.
    needs_positions : str or None
        Why the form needs the transmitter's position (a phrase), None when it does not.
    """

    name: str = ""
    keys: tuple[str, ...] = ()
    optional_keys: tuple[str, ...] = ()
    text: str = ""
    direction: str | None = None
    needs_positions: str | None = None

    # ---------------------------------------------------------------- the scenario file
    def parse(self, t: Table, base: Path) -> Ionosphere:
        """The form's keys, range-checked (one-line ScenarioError); ``base`` resolves relative file names."""
        raise NotImplementedError

    def dump(self, ion: Ionosphere) -> list[tuple[str, Any]]:
        """(key, value) pairs in the file's units; :meth:`parse` reads them back equal."""
        raise NotImplementedError

    def top_m(self, ion: Ionosphere, solver_top_m: float | None) -> float:
        """Top of the physical domain: ``solver_top_m`` when given, else the form's default."""
        return solver_top_m if solver_top_m is not None else DEFAULT_TOP_KM * 1e3

    def top_fixed_by(self) -> str | None:
        """The key that fixes the top of the domain (then ``solver.top_km`` is an error), or None."""
        return None

    def instant(self, ion: Ionosphere) -> datetime | None:
        """The UTC instant the ionosphere depends on, None for a form that does not change with time."""
        return None

    def at_instant(self, ion: Ionosphere, utc: datetime) -> Ionosphere:
        """The same ionosphere at another instant (a sweep's point); only for forms with an instant."""
        raise ScenarioError(
            f"ionosphere: form {self.name!r} does not change with time, so it cannot be swept over UTC; "
            "use utc = ... in the scenario, or sweep over frequency only"
        )

    # ---------------------------------------------------------------- descriptions
    def describe(self, ion: Ionosphere) -> list[str]:
        """Lines describing the form and its parameters (``cavity inspect``)."""
        raise NotImplementedError

    def document_text(self, doc: dict) -> str:
        """One phrase for a result table's header, from the scenario embedded in a result file (file units)."""
        raise NotImplementedError

    # ---------------------------------------------------------------- the medium along a path
    def along(self, ion: Ionosphere, lats, lons, n: int) -> Along:
        """(chi, h', beta, daylight) per path sample (``lats``/``lons`` None for a path by range only).

        Forms without a per-sample description give four Nones and fill :meth:`profiles` instead.
        """
        return _NOTHING_ALONG

    def profiles(self, ion: Ionosphere, path: Any, z: np.ndarray) -> tuple[np.ndarray | None, np.ndarray | None]:
        """Electron density (m-3) and collision frequency (s-1) per sample of ``path`` (a
        :class:`cavity.paths.PathModel`) and altitude ``z`` (m).

        The default builds the Wait-Spies profiles of the h' and beta the path carries (from
        :meth:`along`); (None, None) when the path carries none (no plasma: a ceiling or free space).
        """
        import profiles as profile_models

        if path.hprime_km is None:
            return None, None
        ne = profile_models.electron_density(z[None, :], path.hprime_km[:, None], path.beta_per_km[:, None])
        nu = np.broadcast_to(profile_models.collision_frequency(z)[None, :], ne.shape).copy()
        return ne, nu

    def ceiling_m(self, ion: Ionosphere) -> float | None:
        """Altitude of a perfectly conducting ceiling (m), None for an open top."""
        return None


class Exponential(IonosphereForm):
    name = "exponential"
    keys = ("hprime_km", "beta_per_km")
    text = "hprime_km + beta_per_km"

    def parse(self, t: Table, base: Path) -> Ionosphere:
        hprime = t.number("hprime_km", *HPRIME_RANGE_KM, "km", required=True)
        beta = t.number("beta_per_km", *BETA_RANGE_PER_KM, "per km", required=True)
        return Ionosphere("exponential", hprime_km=hprime, beta_per_km=beta)

    def dump(self, ion: Ionosphere) -> list[tuple[str, Any]]:
        return [("hprime_km", ion.hprime_km), ("beta_per_km", ion.beta_per_km)]

    def describe(self, ion: Ionosphere) -> list[str]:
        return [f"exponential (Wait-Spies): h' = {ion.hprime_km:g} km, beta = {ion.beta_per_km:g} per km"]

    def document_text(self, doc: dict) -> str:
        return f"exponential, h' {float(doc['hprime_km']):g} km, beta {float(doc.get('beta_per_km', np.nan)):g} /km"

    def along(self, ion: Ionosphere, lats, lons, n: int) -> Along:
        return None, np.full(n, ion.hprime_km, dtype=float), np.full(n, ion.beta_per_km, dtype=float), None


class Preset(IonosphereForm):
    name = "preset"
    keys = ("preset",)
    text = "preset"

    def parse(self, t: Table, base: Path) -> Ionosphere:
        return Ionosphere("preset", preset=_preset_name(t, "preset", required=True))

    def dump(self, ion: Ionosphere) -> list[tuple[str, Any]]:
        return [("preset", ion.preset)]

    def describe(self, ion: Ionosphere) -> list[str]:
        from profiles.daynight import PRESETS

        p = PRESETS[str(ion.preset)]
        return [
            f"preset {ion.preset!r}: h' = {p.hprime_km:g} km, beta = {p.beta_per_km:g} per km ({p.label})",
            f"reference: {p.reference}",
        ]

    def document_text(self, doc: dict) -> str:
        return _preset_text(doc["preset"])

    def along(self, ion: Ionosphere, lats, lons, n: int) -> Along:
        from profiles.daynight import preset

        assert ion.preset is not None  # set by parse
        p = preset(ion.preset)
        return None, np.full(n, p.hprime_km, dtype=float), np.full(n, p.beta_per_km, dtype=float), None


class SunAlongPath(IonosphereForm):
    name = "utc"
    keys = ("utc",)
    optional_keys = ("day_preset", "night_preset")
    text = "utc"
    direction = "ionosphere utc = ... (the sun along each path)"
    needs_positions = "ionosphere utc = ... needs positions to place the sun"

    def parse(self, t: Table, base: Path) -> Ionosphere:
        value = t.raw("utc")
        example = "e.g. utc = 2026-06-21T12:00:00Z, no quotes"
        if isinstance(value, datetime):
            if value.tzinfo is None:
                raise t.fail("utc", value, f"has no UTC offset ({example})")
            utc = value.astimezone(timezone.utc)
        else:
            raise t.fail("utc", value, f"must be a date and time with offset ({example})")
        day = _preset_name(t, "day_preset", required=False, default="day")
        night = _preset_name(t, "night_preset", required=False, default="night")
        return Ionosphere("utc", utc=utc, day_preset=str(day), night_preset=str(night))

    def dump(self, ion: Ionosphere) -> list[tuple[str, Any]]:
        return [("utc", ion.utc), ("day_preset", ion.day_preset), ("night_preset", ion.night_preset)]

    def instant(self, ion: Ionosphere) -> datetime | None:
        return ion.utc

    def at_instant(self, ion: Ionosphere, utc: datetime) -> Ionosphere:
        return replace(ion, utc=utc)

    def describe(self, ion: Ionosphere) -> list[str]:
        from profiles.daynight import PRESETS

        day, night = PRESETS[ion.day_preset], PRESETS[ion.night_preset]
        return [
            f"sun along each path at {ion.utc:%Y-%m-%d %H:%M:%S} UTC",
            f"day   {ion.day_preset!r}: h' = {day.hprime_km:g} km, beta = {day.beta_per_km:g} per km",
            f"night {ion.night_preset!r}: h' = {night.hprime_km:g} km, beta = {night.beta_per_km:g} per km",
            "day for solar zenith <= 90 deg, night for >= 99 deg, linear between (common practice)",
        ]

    def document_text(self, doc: dict) -> str:
        return (
            f"{_preset_text(doc.get('day_preset', 'day'))} by day, {_preset_text(doc.get('night_preset', 'night'))} "
            "by night, from the sun along each path"
        )

    def along(self, ion: Ionosphere, lats, lons, n: int) -> Along:
        from cavity.geo import solar_zenith_deg
        from profiles.daynight import daylight_class, linear_transition, preset

        assert ion.utc is not None  # set by parse
        chi = np.asarray(solar_zenith_deg(ion.utc, lats, lons), dtype=float)
        hprime, beta = linear_transition(chi, day=preset(ion.day_preset), night=preset(ion.night_preset))
        return (
            chi,
            np.asarray(hprime, dtype=float),
            np.asarray(beta, dtype=float),
            np.asarray(daylight_class(chi)).astype(str),
        )


class Ceiling(IonosphereForm):
    name = "ceiling"
    keys = ("ceiling_km",)
    text = "ceiling_km"

    def parse(self, t: Table, base: Path) -> Ionosphere:
        ceiling = t.number("ceiling_km", *CEILING_RANGE_KM, "km", required=True)
        return Ionosphere("ceiling", ceiling_m=ceiling * 1e3)

    def dump(self, ion: Ionosphere) -> list[tuple[str, Any]]:
        return [("ceiling_km", None if ion.ceiling_m is None else exact_quotient(ion.ceiling_m, 1e3))]

    def top_m(self, ion: Ionosphere, solver_top_m: float | None) -> float:
        assert ion.ceiling_m is not None  # set by parse
        return ion.ceiling_m

    def top_fixed_by(self) -> str | None:
        return "ceiling_km"

    def describe(self, ion: Ionosphere) -> list[str]:
        assert ion.ceiling_m is not None  # set by parse
        return [f"perfectly conducting ceiling at {ion.ceiling_m / 1e3:g} km (verification)"]

    def document_text(self, doc: dict) -> str:
        return f"conducting ceiling at {float(doc['ceiling_km']):g} km"

    def ceiling_m(self, ion: Ionosphere) -> float | None:
        return ion.ceiling_m


class ProfileFile(IonosphereForm):
    name = "file"
    keys = ("profile_file",)
    text = "profile_file"

    def parse(self, t: Table, base: Path) -> Ionosphere:
        name = str(t.string("profile_file", required=True))
        try:
            resolved = (base / Path(name).expanduser()).resolve()
        except (ValueError, RuntimeError, OSError) as exc:  # NUL, ~unknown-user, name too long
            raise t.fail("profile_file", name, f"is not a usable file name ({exc})") from None
        if not resolved.is_file():
            raise t.fail("profile_file", name, f"is not an existing file (looked for {resolved})")
        return Ionosphere("file", profile_path=str(resolved))

    def dump(self, ion: Ionosphere) -> list[tuple[str, Any]]:
        return [("profile_file", ion.profile_path)]

    def describe(self, ion: Ionosphere) -> list[str]:
        return [f"profile file {ion.profile_path}"]

    def document_text(self, doc: dict) -> str:
        return f"profile file {doc['profile_file']}"

    def profiles(self, ion: Ionosphere, path: Any, z: np.ndarray) -> tuple[np.ndarray | None, np.ndarray | None]:
        """The user's profile sampled at ``z``, the same on every path sample."""
        import profiles as profile_models

        ds = profile_models.read_profile(ion.profile_path)
        ne1, nu1 = profile_models.sample_profile(ds, z)
        ne = np.broadcast_to(np.asarray(ne1, float)[None, :], (path.n_samples, z.size)).copy()
        nu = np.broadcast_to(np.asarray(nu1, float)[None, :], (path.n_samples, z.size)).copy()
        return ne, nu


class NoIonosphere(IonosphereForm):
    name = "none"
    keys = ("no_ionosphere",)
    text = "no_ionosphere = true"

    def parse(self, t: Table, base: Path) -> Ionosphere:
        value = t.raw("no_ionosphere")
        if value is not True:
            raise t.fail("no_ionosphere", value, "must be true when given (remove it to use an ionosphere)")
        return Ionosphere("none")

    def dump(self, ion: Ionosphere) -> list[tuple[str, Any]]:
        return [("no_ionosphere", True)]

    def top_m(self, ion: Ionosphere, solver_top_m: float | None) -> float:
        return solver_top_m if solver_top_m is not None else NO_IONOSPHERE_TOP_KM * 1e3

    def describe(self, ion: Ionosphere) -> list[str]:
        return ["none: free space above the ground (verification)"]

    def document_text(self, doc: dict) -> str:
        return "none (ground wave only)"


#: Every form by name, in the order the loader tries them and the messages list them.
FORMS: dict[str, IonosphereForm] = {
    form.name: form for form in (Exponential(), Preset(), SunAlongPath(), Ceiling(), ProfileFile(), NoIonosphere())
}

#: Every key of [ionosphere] (the forms' selecting and optional keys).
IONOSPHERE_KEYS: tuple[str, ...] = tuple(dict.fromkeys(k for f in FORMS.values() for k in (*f.keys, *f.optional_keys)))

#: How the forms are given, for messages ("give exactly one of ...").
FORMS_TEXT = ", ".join(f.text for f in list(FORMS.values())[:-1]) + f" or {list(FORMS.values())[-1].text}"


def form_of(ion: Ionosphere) -> IonosphereForm:
    """The form object of an :class:`Ionosphere` (ScenarioError for an unknown form name)."""
    form = FORMS.get(ion.form)
    if form is None:
        from cavity.tomltable import show

        raise ScenarioError(f"ionosphere.form = {show(ion.form)} is not a form (choose from {', '.join(FORMS)})")
    return form


def parse_ionosphere(t: Table, base: Path) -> Ionosphere:
    """The [ionosphere] table: exactly one form, its keys checked by the form (one-line ScenarioError)."""
    t.finish(IONOSPHERE_KEYS)
    forms = [form for form in FORMS.values() if any(t.has(k) for k in form.keys)]
    if not forms:
        raise ScenarioError(f"[ionosphere] gives no form; give exactly one of {FORMS_TEXT}")
    if len(forms) > 1:
        keys = [next(k for k in f.keys if t.has(k)) for f in forms]
        raise ScenarioError(
            f"{t.key(keys[1])}: [ionosphere] mixes {keys[0]} and {keys[1]}; give exactly one of {FORMS_TEXT}"
        )
    form = forms[0]
    for other in FORMS.values():
        for extra in other.optional_keys:
            if t.has(extra) and other is not form:
                raise t.fail(extra, t.data[extra], f"is only used with {other.keys[0]} = ...")
    return form.parse(t, base)


def document_form(doc: Any) -> IonosphereForm | None:
    """The form of an ``[ionosphere]`` table read back from a file (a dict), None if none is recognised."""
    if not isinstance(doc, dict):
        return None
    for form in FORMS.values():
        if form.keys[0] in doc:
            return form
    return None
