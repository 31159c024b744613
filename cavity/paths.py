"""Paths on the globe: which receivers share a great circle, and the ground and sun along each path.

The axisymmetric solver models one medium per bearing: the ground and the ionosphere may change with
range but not with direction. :func:`build_paths` therefore groups the receivers by bearing from the
transmitter, one :class:`PathModel` per group, and samples along each path's geodesic the ground
class (land/sea mask or the scenario's ground), the solar zenith angle and the D-region parameters
that follow from it. When nothing in the scenario depends on direction, one path serves every
receiver.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from cavity.errors import ScenarioError
from cavity.ground import GROUND_CLASSES
from cavity.ionosphere_forms import form_of
from cavity.medium import ionosphere_along

#: Margin beyond the farthest receiver of a path: ``farthest * (1 + fraction) + extra``.
RANGE_MARGIN_FRACTION = 0.05
RANGE_MARGIN_EXTRA_M = 50e3


@dataclass(frozen=True, eq=False)
class PathModel:
    """One great-circle path from the transmitter and the medium sampled along it.

    Attributes
    ----------
    label : str
        "bearing 123.4 deg" for a path on the globe; "uniform" (or "all bearings" when ground
        segments vary the ground with range) for a path that serves every direction.
    bearing_deg : float or None
        Bearing of the solved path, degrees clockwise from true north; None when the medium does not
        depend on direction.
    receiver_indices : tuple of int
        Indices into ``scenario.receivers`` solved on this path, in file order.
    receiver_ranges_m : tuple of float
        Their ground ranges from the transmitter (WGS84 geodesic distance, or ``range_m``), m.
    max_range_m : float
        Range the path extends to, m: the farthest receiver times 1.05 plus 50 km, or
        ``solver.max_range_m`` if that is larger.
    range_m : numpy.ndarray
        Sample ranges 0 .. ``max_range_m``, evenly spaced at most ``sample_km`` apart, m.
    latitude_deg, longitude_deg : numpy.ndarray or None
        Position of each sample (None for a direction-free path).
    ground_conductivity_s_per_m, ground_relative_permittivity : numpy.ndarray
        Ground constants per sample (``math.inf`` conductivity for perfect ground).
    ground_kind : numpy.ndarray of str
        Ground class name per sample ("custom" for user constants).
    solar_zenith_deg : numpy.ndarray or None
        Geometric solar zenith angle per sample (ionosphere form "utc" only).
    hprime_km, beta_per_km : numpy.ndarray or None
        Wait-Spies h' (km) and beta (1/km) per sample (forms "exponential", "preset", "utc").
    daylight : numpy.ndarray of str or None
        "day", "night" or "transition" per sample (form "utc" only).
    heading_deg : numpy.ndarray or None
        Local direction of travel per sample, degrees clockwise from true north (None for a
        direction-free path).
    geomagnetic : cavity.geomag.FieldAlong or None
        The geomagnetic field per sample in the path frame (None for model "none").
    """

    label: str
    bearing_deg: float | None
    receiver_indices: tuple[int, ...]
    receiver_ranges_m: tuple[float, ...]
    max_range_m: float
    range_m: np.ndarray
    latitude_deg: np.ndarray | None
    longitude_deg: np.ndarray | None
    ground_conductivity_s_per_m: np.ndarray
    ground_relative_permittivity: np.ndarray
    ground_kind: np.ndarray
    solar_zenith_deg: np.ndarray | None
    hprime_km: np.ndarray | None
    beta_per_km: np.ndarray | None
    daylight: np.ndarray | None
    heading_deg: np.ndarray | None = None
    geomagnetic: object | None = None  # cavity.geomag.FieldAlong

    def __post_init__(self):
        for name in (
            "range_m",
            "latitude_deg",
            "longitude_deg",
            "ground_conductivity_s_per_m",
            "ground_relative_permittivity",
            "ground_kind",
            "solar_zenith_deg",
            "hprime_km",
            "beta_per_km",
            "daylight",
            "heading_deg",
        ):
            value = getattr(self, name)
            if isinstance(value, np.ndarray):
                value.setflags(write=False)  # the model is frozen; so are its arrays

    @property
    def n_samples(self) -> int:
        """Number of range samples."""
        return int(self.range_m.size)


def direction_dependent(scenario) -> str | None:
    """Why the medium depends on direction (a short phrase), or None when it does not.

    The land/sea map (ground kind "auto") and the sun's position (ionosphere form "utc") differ from
    one bearing to the next; every other ground and ionosphere description, ground segments
    included, is the same on every bearing.
    """
    if scenario.ground.kind == "auto":
        return 'ground kind = "auto" (land/sea map along each path)'
    ion_direction = form_of(scenario.ionosphere).direction
    if ion_direction:
        return ion_direction
    if scenario.geomagnetic.model == "igrf":
        return 'geomagnetic model = "igrf" (the field along each path)'
    return None


def _receiver_geometry(scenario) -> tuple[list[float], list[float | None]]:
    """Range (m) and bearing (deg or None) of each receiver from the transmitter."""
    from cavity.geo import distance_bearing

    tx = scenario.transmitter
    ranges: list[float] = []
    bearings: list[float | None] = []
    for rx in scenario.receivers:
        if rx.range_m is not None:
            ranges.append(float(rx.range_m))
            bearings.append(None)
        else:
            if tx.latitude_deg is None or tx.longitude_deg is None:
                raise ScenarioError(f"transmitter.latitude_deg is missing (receiver {rx.name!r} is given by position)")
            d, b = distance_bearing(tx.latitude_deg, tx.longitude_deg, rx.latitude_deg, rx.longitude_deg)
            ranges.append(d)
            bearings.append(b)
    return ranges, bearings


def _angle_gap(a: float, b: float) -> float:
    """Clockwise angle from bearing a to bearing b, in [0, 360)."""
    return (b - a) % 360.0


def group_bearings(bearings_deg, tolerance_deg: float) -> list[list[int]]:
    """Group bearings so that all bearings of a group lie within ``tolerance_deg`` of each other.

    The bearings are walked clockwise, starting after the widest empty sector (so a group may
    straddle north); a group takes the next bearing while it stays within the tolerance of the
    group's first bearing. Groups come back sorted by their circular mean bearing, members in input
    order.

    Parameters
    ----------
    bearings_deg : sequence of float
        Bearings, degrees clockwise from true north.
    tolerance_deg : float
        Largest spread of bearings within a group, degrees (>= 0).

    Returns
    -------
    list of list of int
        Indices into ``bearings_deg``.
    """
    b = [float(x) % 360.0 for x in bearings_deg]
    if not b:
        return []
    order = sorted(range(len(b)), key=lambda i: b[i])
    # Start after the widest gap between neighbours on the circle.
    gaps = [_angle_gap(b[order[k]], b[order[(k + 1) % len(order)]]) for k in range(len(order))]
    if len(order) == 1:
        start = 0
    else:
        widest = max(range(len(order)), key=lambda k: (gaps[k], -k))
        start = (widest + 1) % len(order)
    walk = order[start:] + order[:start]
    groups: list[list[int]] = []
    for i in walk:
        if groups and _angle_gap(b[groups[-1][0]], b[i]) <= tolerance_deg + 1e-9:
            groups[-1].append(i)
        else:
            groups.append([i])
    groups = [sorted(g) for g in groups]
    return sorted(groups, key=lambda g: circular_mean_deg([b[i] for i in g]))


def circular_mean_deg(bearings_deg) -> float:
    """Mean direction of bearings (degrees in [0, 360)), correct across north."""
    r = np.radians(np.asarray(bearings_deg, dtype=float))
    mean = math.degrees(math.atan2(float(np.sin(r).mean()), float(np.cos(r).mean()))) % 360.0
    return 0.0 if mean >= 360.0 else mean


def sample_ranges_m(max_range_m: float, sample_km: float) -> np.ndarray:
    """Ranges 0 .. ``max_range_m`` inclusive, evenly spaced at most ``sample_km`` apart (m)."""
    step = sample_km * 1e3
    n = max(2, int(math.ceil(max_range_m / step - 1e-9)) + 1)
    return np.linspace(0.0, max_range_m, n)


def _ground_along(scenario, range_m, lats, lons):
    """Ground class name, conductivity and permittivity per sample; segments override."""
    ground = scenario.ground
    n = range_m.size
    if ground.kind == "auto":
        from cavity.geo import ground_kind_along

        kinds = ground_kind_along(lats, lons).astype(object)
        sigma = np.array([GROUND_CLASSES[k].conductivity_s_per_m for k in kinds], dtype=float)
        eps = np.array([GROUND_CLASSES[k].relative_permittivity for k in kinds], dtype=float)
    else:
        kinds = np.full(n, ground.kind, dtype=object)
        sigma = np.full(n, ground.conductivity_s_per_m, dtype=float)
        eps = np.full(n, ground.relative_permittivity, dtype=float)
    for seg in ground.segments:
        inside = (range_m >= seg.from_m) & (range_m < seg.to_m)
        kinds[inside] = seg.kind
        sigma[inside] = seg.conductivity_s_per_m
        eps[inside] = seg.relative_permittivity
    return kinds.astype(str), sigma, eps


def _max_range(farthest_m: float, scenario) -> float:
    planned = farthest_m * (1.0 + RANGE_MARGIN_FRACTION) + RANGE_MARGIN_EXTRA_M
    if scenario.solver.max_range_m is not None:
        planned = max(planned, float(scenario.solver.max_range_m))
    return planned


def build_paths(scenario, *, sample_km: float = 10.0, bearing_tolerance_deg: float = 1.0) -> list[PathModel]:
    """Group the receivers into paths and sample the ground and ionosphere along each.

    Parameters
    ----------
    scenario : cavity.scenario.Scenario
        A validated scenario.
    sample_km : float
        Largest spacing of the range samples, km (> 0).
    bearing_tolerance_deg : float
        Receivers whose bearings from the transmitter agree within this angle share one path,
        solved at their mean bearing, degrees (0 to 180).

    Returns
    -------
    list of PathModel
        One path when the medium does not depend on direction (bearing None), else one per bearing
        group, sorted by bearing.

    Raises
    ------
    ScenarioError
        A receiver given by range only while the medium depends on direction (ground "auto" or
        ionosphere "utc"), or a bad ``sample_km`` / ``bearing_tolerance_deg``.

    Notes
    -----
    Ground "auto" samples the land/sea mask at each sample point (see
    :func:`cavity.geo.ground_kind_along`); ``[[ground.segment]]`` entries then override the ground
    for ranges from_m <= r < to_m on every path. Ionosphere "utc" takes the geometric solar zenith
    angle at each sample (Michalsky 1988) and the day/night rule
    :func:`profiles.daynight.linear_transition` (day for chi <= 90 deg, night for chi >= 99 deg,
    linear between: common practice).
    """
    if not (isinstance(sample_km, (int, float)) and math.isfinite(sample_km) and 0.01 <= sample_km <= 1000.0):
        raise ScenarioError(f"sample_km = {sample_km!r} is outside the allowed range 0.01 to 1000 km")
    if not (isinstance(bearing_tolerance_deg, (int, float)) and 0.0 <= bearing_tolerance_deg <= 180.0):
        raise ScenarioError(
            f"bearing_tolerance_deg = {bearing_tolerance_deg!r} is outside the allowed range 0 to 180 deg"
        )
    ranges, bearings = _receiver_geometry(scenario)
    why = direction_dependent(scenario)

    if why is None:
        max_range = _max_range(max(ranges), scenario)
        r = sample_ranges_m(max_range, sample_km)
        kinds, sigma, eps = _ground_along(scenario, r, None, None)
        chi, hprime, beta, daylight = ionosphere_along(scenario, None, None, r.size)
        label = "all bearings" if scenario.ground.segments else "uniform"
        from cavity.geomag import field_along

        field = field_along(scenario.geomagnetic, None, r.size)
        return [
            PathModel(
                label=label,
                bearing_deg=None,
                receiver_indices=tuple(range(len(ranges))),
                receiver_ranges_m=tuple(ranges),
                max_range_m=max_range,
                range_m=r,
                latitude_deg=None,
                longitude_deg=None,
                ground_conductivity_s_per_m=sigma,
                ground_relative_permittivity=eps,
                ground_kind=kinds,
                solar_zenith_deg=chi,
                hprime_km=hprime,
                beta_per_km=beta,
                daylight=daylight,
                geomagnetic=field,
            )
        ]

    for i, (rx, b) in enumerate(zip(scenario.receivers, bearings), 1):
        if b is None:
            raise ScenarioError(
                f"receiver[{i}].range_km = {rx.range_m / 1e3:g} gives no direction, but {why} needs one; "
                "give latitude_deg and longitude_deg instead"
            )

    from cavity.geo import headings_along, points_along
    from cavity.geomag import field_along

    tx = scenario.transmitter
    paths = []
    for group in group_bearings(bearings, bearing_tolerance_deg):
        bearing = circular_mean_deg([bearings[i] for i in group])
        group_ranges = tuple(ranges[i] for i in group)
        max_range = _max_range(max(group_ranges), scenario)
        r = sample_ranges_m(max_range, sample_km)
        lats, lons = points_along(tx.latitude_deg, tx.longitude_deg, bearing, r)
        kinds, sigma, eps = _ground_along(scenario, r, lats, lons)
        chi, hprime, beta, daylight = ionosphere_along(scenario, lats, lons, r.size)
        heading = headings_along(tx.latitude_deg, tx.longitude_deg, bearing, r)
        path = PathModel(
            label=f"bearing {bearing:.1f} deg",
            bearing_deg=bearing,
            receiver_indices=tuple(group),
            receiver_ranges_m=group_ranges,
            max_range_m=max_range,
            range_m=r,
            latitude_deg=lats,
            longitude_deg=lons,
            ground_conductivity_s_per_m=sigma,
            ground_relative_permittivity=eps,
            ground_kind=kinds,
            solar_zenith_deg=chi,
            hprime_km=hprime,
            beta_per_km=beta,
            daylight=daylight,
            heading_deg=heading,
        )
        field = field_along(scenario.geomagnetic, path, r.size)
        paths.append(dataclasses.replace(path, geomagnetic=field) if field is not None else path)
    return paths
