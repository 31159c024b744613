"""Property-based fuzzing of the scenario loader (hypothesis).

Whatever the document, :func:`cavity.load_scenario` ends in exactly one of two ways: a validated
:class:`~cavity.scenario.Scenario`, or the project's own one-line error (ScenarioError, or
ProfileError from the profiles package). Never a TypeError, OverflowError, KeyError or a traceback
from deep inside, and never a multi-line message. A scenario that loads must also be usable: its
receiver geometry computes and its TOML form loads back equal.

Four generators, from blind to near-valid:

1. any text at all (and any bytes, through a file);
2. documents built from the real section and key names mixed with junk names, holding arbitrary
   TOML values (NaN, infinities, huge and negative numbers, strings, dates, arrays, tables),
   written with ``tomli_w``;
3. a valid scenario with one to three values replaced by arbitrary ones (reaches the checks that
   need several sections: geometry, forms, segments);
4. a valid scenario's text with characters deleted, duplicated or swapped (malformed TOML).

The example counts are kept moderate so that the whole file runs in seconds on 2 cores; set
``HYPOTHESIS_PROFILE=fuzz-long`` for a deeper search.
"""

from __future__ import annotations

import copy
import math
import os
import tomllib
from datetime import timedelta, timezone

import pytest
import tomli_w
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st
from hypothesis.control import currently_in_test_context

from cavity.errors import ScenarioError
from cavity.scenario import (
    _GROUND_KEYS,
    _IONOSPHERE_KEYS,
    _RECEIVER_KEYS,
    _SEGMENT_KEYS,
    _SOLVER_KEYS,
    _TOP_KEYS,
    _TRANSMITTER_KEYS,
    Scenario,
    load_scenario,
)
from profiles.errors import ProfileError

settings.register_profile("fuzz-long", max_examples=5000, deadline=None)
LONG = os.environ.get("HYPOTHESIS_PROFILE") == "fuzz-long"


def examples(n: int) -> settings:
    """Moderate example counts by default (the default suite must stay fast)."""
    return settings(
        max_examples=5000 if LONG else n,
        deadline=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much, HealthCheck.data_too_large],
    )


VALID = {
    "title": "Fuzz base",
    "transmitter": {
        "name": "Tx",
        "latitude_deg": 50.0,
        "longitude_deg": 0.0,
        "frequency_khz": [16.0, 27.6],
        "radiated_power_kw": 50.0,
    },
    "receiver": [
        {"name": "A", "latitude_deg": 52.0, "longitude_deg": 4.0},
        {"name": "B", "latitude_deg": 45.0, "longitude_deg": -10.0},
    ],
    "ionosphere": {"hprime_km": 74.0, "beta_per_km": 0.3},
    "ground": {
        "kind": "sea",
        "segment": [{"from_km": 0.0, "to_km": 100.0, "kind": "land"}],
    },
    "solver": {"max_range_km": 2000.0, "cell_m": 500.0, "top_km": 110.0, "pml_cells": 20},
}

#: Section -> its real keys (what a user would type), for generator 2.
KEYS = {
    "": _TOP_KEYS,
    "transmitter": _TRANSMITTER_KEYS,
    "receiver": _RECEIVER_KEYS,
    "ionosphere": _IONOSPHERE_KEYS,
    "ground": _GROUND_KEYS,
    "segment": _SEGMENT_KEYS,
    "solver": _SOLVER_KEYS,
}
ALL_KEYS = sorted({k for keys in KEYS.values() for k in keys})

# ------------------------------------------------------------------------------------- values
finite_or_not = st.floats(allow_nan=True, allow_infinity=True)
edge_floats = st.sampled_from(
    [
        0.0,
        -0.0,
        1e-320,
        -1.0,
        1e308,
        -1e308,
        math.nan,
        math.inf,
        -math.inf,
        0.3,
        60.0,
        60.000001,
        90.0,
        90.0000001,
        -180.0,
        360.0,
        15000.0,
        15000.0001,
        1.0,
        0.999999,
        5000.0,
        10.0,
        1e-6,
    ]
)
numbers = st.one_of(
    finite_or_not,
    edge_floats,
    st.integers(),
    st.sampled_from([2**63, -(2**63) - 1, 10**20, 10**400, -(10**400)]),
    st.floats(-1e6, 1e6),
)
texts = st.one_of(
    st.text(max_size=30),
    st.sampled_from(
        [
            "",
            " ",
            "auto",
            "sea",
            "land",
            "custom",
            "perfect",
            "day",
            "night",
            "dya",
            "seaa",
            "profile.csv",
            "/",
            ".",
            "..",
            "nan",
            "20",
            "true",
            "\x7f",
            "é",
            "A",
        ]
    ),
)
datetimes = st.one_of(
    st.datetimes(
        timezones=st.none()
        | st.just(timezone.utc)
        | st.builds(lambda h: timezone(timedelta(minutes=h)), st.integers(-1439, 1439))
    ),
    st.dates(),
    st.times(),
)
scalars = st.one_of(numbers, st.booleans(), texts, datetimes)
values = st.recursive(
    scalars,
    lambda inner: st.one_of(
        st.lists(inner, max_size=4),
        st.dictionaries(st.sampled_from(ALL_KEYS) | st.text(min_size=1, max_size=8), inner, max_size=4),
    ),
    max_leaves=5,
)
#: Values near or inside the allowed ranges, so that changed documents often still load.
plausible = st.one_of(
    st.floats(-200.0, 400.0),
    st.floats(0.0, 16000.0),
    st.integers(-5, 200),
    st.sampled_from(["sea", "land", "ice", "perfect", "custom", "auto", "day", "night", "Tx", "C"]),
    st.lists(st.floats(0.0, 70.0), min_size=1, max_size=3),
    st.datetimes(timezones=st.just(timezone.utc)),
    st.booleans(),
)
key_names = st.one_of(
    st.sampled_from(ALL_KEYS),
    st.sampled_from(
        [
            "frequency_hz",
            "latitude",
            "lon",
            "range",
            "power_kw",
            "hprime",
            "beta",
            "cell",
            "segments",
            "source",
            "reciever",
            "Title",
            "kind ",
            "solver.cell_m",
        ]
    ),
    st.text(min_size=1, max_size=12),
)


def section(real_keys) -> st.SearchStrategy[dict]:
    """A table whose keys are mostly the section's own, sometimes junk."""
    return st.dictionaries(st.one_of(st.sampled_from(real_keys), key_names), values, max_size=len(real_keys) + 2)


documents = st.fixed_dictionaries(
    {},
    optional={
        "title": st.one_of(texts, values),
        "transmitter": st.one_of(section(_TRANSMITTER_KEYS), values),
        "receiver": st.one_of(st.lists(section(_RECEIVER_KEYS), max_size=3), values),
        "ionosphere": st.one_of(section(_IONOSPHERE_KEYS), values),
        "ground": st.one_of(
            section(_GROUND_KEYS).map(dict),
            st.builds(
                lambda g, segs: {**g, "segment": segs},
                section(("kind", "conductivity_s_per_m", "relative_permittivity")),
                st.lists(section(_SEGMENT_KEYS), max_size=3),
            ),
            values,
        ),
        "solver": st.one_of(section(_SOLVER_KEYS), values),
    },
).flatmap(lambda doc: st.dictionaries(key_names, values, max_size=2).map(lambda junk: {**doc, **junk}))


def dump(doc: dict) -> str | None:
    """TOML text of a generated document, or None when TOML cannot hold it (tomli_w refuses)."""
    try:
        return tomli_w.dumps(doc)
    except (TypeError, ValueError):  # e.g. an integer of more than 4300 digits
        return None


# ------------------------------------------------------------------------------------- the property
def note(outcome: str) -> None:
    """Count outcomes in hypothesis' statistics (``--hypothesis-show-statistics``)."""
    if currently_in_test_context():
        event(outcome)


def check_outcome(text: str) -> Scenario | None:
    """Load ``text``; a Scenario or one of the project's own one-line errors, nothing else."""
    try:
        scenario = load_scenario(text)
    except (ScenarioError, ProfileError) as exc:
        message = str(exc)
        assert message and "\n" not in message and "\r" not in message, repr(message)
        assert "Traceback" not in message
        note(f"refused: {type(exc).__name__}")
        return None
    assert isinstance(scenario, Scenario)
    geometry = scenario.receiver_geometry()
    assert len(geometry) == len(scenario.receivers) >= 1
    for g in geometry:
        assert 1e3 <= g.range_m <= 15000e3
    assert all(300.0 <= f <= 60e3 for f in scenario.transmitter.frequencies_hz)
    assert 0 < scenario.transmitter.radiated_power_w <= 5e6
    assert load_scenario(scenario.to_toml()) == scenario
    note("loaded")
    return scenario


# ------------------------------------------------------------------------------------- generators
@examples(200)
@given(text=st.text(max_size=400))
def test_any_text(text):
    check_outcome(text)


@examples(60)
@given(data=st.binary(max_size=300))
def test_any_bytes_in_a_file(data, tmp_path_factory):
    path = tmp_path_factory.mktemp("bytes") / "fuzz.toml"
    path.write_bytes(data)
    try:
        load_scenario(path)
    except (ScenarioError, ProfileError) as exc:
        assert "\n" not in str(exc) and str(exc).startswith("fuzz.toml: ")


@examples(200)
@given(doc=documents)
def test_documents_with_real_and_junk_keys(doc):
    text = dump(doc)
    assume(text is not None)
    check_outcome(text)


def _set(doc: dict, path: tuple, value) -> None:
    """Replace (or add) the value at ``path`` (keys and list indices) inside ``doc``."""
    node = doc
    for step in path[:-1]:
        node = node[step]
    node[path[-1]] = value


def _leaves(node, prefix=()):
    """Every (path, value) of a nested document, tables and lists included."""
    if isinstance(node, dict):
        for k, v in node.items():
            yield prefix + (k,), v
            yield from _leaves(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield prefix + (i,), v
            yield from _leaves(v, prefix + (i,))


LEAF_PATHS = [p for p, _ in _leaves(VALID)]
SCALAR_PATHS = [p for p, v in _leaves(VALID) if not isinstance(v, (dict, list))]
TABLE_PATHS = [
    (),
    ("transmitter",),
    ("receiver", 0),
    ("receiver", 1),
    ("ionosphere",),
    ("ground",),
    ("ground", "segment", 0),
    ("solver",),
]

#: Per key, values straddling the allowed range (both ends and a little beyond), so that a changed
#: document loads about as often as it is refused.
NEAR = {
    "latitude_deg": st.floats(-95.0, 95.0),
    "longitude_deg": st.floats(-190.0, 370.0),
    "frequency_khz": st.floats(0.0, 70.0) | st.lists(st.floats(0.0, 70.0), min_size=1, max_size=3),
    "radiated_power_kw": st.floats(-1.0, 6000.0) | st.integers(-1, 6000),
    "range_km": st.floats(-1.0, 16000.0),
    "hprime_km": st.floats(40.0, 110.0),
    "beta_per_km": st.floats(0.0, 2.0),
    "from_km": st.floats(-10.0, 300.0),
    "to_km": st.floats(-10.0, 300.0),
    "max_range_km": st.floats(0.0, 16000.0),
    "cell_m": st.floats(0.0, 6000.0) | st.just("auto"),
    "top_km": st.floats(50.0, 700.0),
    "pml_cells": st.integers(0, 120),
    "kind": st.sampled_from(["sea", "land", "ice", "perfect", "custom", "auto", "wet", "Sea"]),
    "name": st.sampled_from(["A", "B", "Tx", " ", ""]),
    "title": st.text(max_size=10),
}
changes_strategy = st.one_of(
    # a value moved near or over the edge of its allowed range (most common)
    st.sampled_from(SCALAR_PATHS).flatmap(lambda p: st.tuples(st.just(p), NEAR.get(p[-1], plausible))),
    # any value anywhere, tables and lists included
    st.tuples(st.sampled_from(LEAF_PATHS), plausible | values),
    # a key added to a table: a real key of any section (wrong place or a second form) or junk
    st.tuples(
        st.tuples(st.sampled_from(TABLE_PATHS), st.sampled_from(ALL_KEYS) | key_names).map(lambda t: t[0] + (t[1],)),
        plausible | values,
    ),
)


@examples(300)
@given(
    changes=st.lists(changes_strategy, min_size=1, max_size=2),
    drop=st.lists(st.sampled_from(LEAF_PATHS), max_size=1),
)
def test_valid_scenario_with_values_replaced(changes, drop):
    doc = copy.deepcopy(VALID)
    for path, value in changes:
        try:
            _set(doc, path, value)
        except (KeyError, IndexError, TypeError):  # an earlier change replaced the parent
            pass
    for path in drop:
        try:
            node = doc
            for step in path[:-1]:
                node = node[step]
            del node[path[-1]]
        except (KeyError, IndexError, TypeError):
            pass
    text = dump(doc)
    assume(text is not None)
    check_outcome(text)


VALID_TEXT = tomli_w.dumps(VALID)


@examples(150)
@given(
    edits=st.lists(
        st.tuples(
            st.sampled_from(["delete", "duplicate", "insert"]),
            st.integers(0, len(VALID_TEXT) - 1),
            st.sampled_from(list("=\"[]{},.\n #\\'0-+eEx")),
        ),
        min_size=1,
        max_size=4,
    )
)
def test_valid_text_with_characters_mangled(edits):
    text = VALID_TEXT
    for op, at, ch in edits:
        at = min(at, len(text) - 1)
        if op == "delete":
            text = text[:at] + text[at + 1 :]
        elif op == "duplicate":
            text = text[:at] + text[at] + text[at:]
        else:
            text = text[:at] + ch + text[at:]
    check_outcome(text)


# ------------------------------------------------------------------------------------- sanity of the harness
def test_the_valid_base_loads_and_generators_reach_both_outcomes():
    """The base document is valid, and a small replacement makes it invalid: the fuzz can fail."""
    assert tomllib.loads(VALID_TEXT) == VALID
    assert check_outcome(VALID_TEXT) is not None
    broken = copy.deepcopy(VALID)
    broken["transmitter"]["frequency_khz"] = [16.0, math.nan]
    assert check_outcome(tomli_w.dumps(broken)) is None


@pytest.mark.parametrize(
    "text",
    [
        # found by the fuzzing above (fixed in the loader): a latitude of 400 digits overflowed float,
        # an integer of more than 4300 digits escaped tomllib as a plain ValueError
        tomli_w.dumps({**VALID, "transmitter": {**VALID["transmitter"], "latitude_deg": 10**400}}),
        VALID_TEXT.replace("pml_cells = 20", "pml_cells = " + "9" * 4400),
        # a one-line TOML text longer than a file name may be (was stat()ed as a path)
        'title = "' + "x" * 600 + '"',
    ],
    ids=["huge-int-latitude", "int-over-4300-digits", "long-one-line-text"],
)
def test_regressions(text):
    assert check_outcome(text) is None
