"""Coverage maps: the field over an area, from radial paths solved at a set of bearings.

A coverage map is many ordinary paths. For each bearing of a regular set (every
``bearing_step_deg`` from north), refined along coasts (below), the driver makes a copy of the
scenario whose one receiver sits at the map's range on that bearing, so that
:func:`cavity.paths.build_paths` samples the ground, the sun and every other per-column medium along
that bearing exactly as ``cavity run`` would, and :func:`cavity.solve.solve_path` solves it. The
bearings are fanned out on dask workers by the sweep driver (:mod:`cavity.sweeps.run`: local cluster
or ``scheduler``, numba cache warmed first, failed solves retried once and reported by bearing,
equal media solved once), and each finished bearing is kept as a small result file in a parts
folder, so a stopped map resumes with the missing bearings only.

Refinement
----------
The sun's zenith angle, and with it h' and beta, changes smoothly from bearing to bearing; the
ground does not: where a pair of neighbouring bearings straddles a coast, one path runs over sea
where the other runs over land, and no interpolation between their profiles can stand for the
paths between them. Before solving, :func:`refine_bearings` compares the ground class along each
pair (land/sea mask every 10 km out to the map's range) and bisects the pair while they differ on
more than :data:`REFINE_GROUND_SHARE` of the samples, recursively down to ``refine_to_deg``
(default a quarter of the step). Every added bearing is known before the first solve (the progress
bar and the memory check count them) and a pair gains at most ``step / refine_to_deg - 1`` of them,
so the cost stays linear in the number of bearings.

The map
-------
The bearings' Ez profiles (dB re 1 uV/m against range) are put on a regular latitude/longitude grid
by :func:`map_from_profiles`: each grid point's WGS84 geodesic range and bearing from the
transmitter (pyproj, Karney 2013) pick the value

1. along each of the two neighbouring solved bearings, linearly in dB between the solver's own
   range samples;
2. between those two bearings, in dB, with weights set by the ground along the grid point's own
   path (:func:`ground_weights`): its path-integrated log10 conductivity out to its range placed
   between the two bearings' (a point whose path has so far crossed only sea takes the all-sea
   neighbour's field), and linear in bearing angle where the two bearings have crossed the same
   ground. The ground along every 0.25 deg (:class:`GroundTable`) is kept in the file, so that the
   map, the receivers' values and the summary are all read the same way from it.

Amplitudes, not complex phasors, are interpolated between bearings: two bearings a few degrees
apart carry phases that differ by many turns at long range, and a phasor average would put false
nulls between them. A modal null, whose range moves from bearing to bearing, is smoothed over in
angle: inside deep nulls the map is not to be trusted to better than the null's depth.
``tests/test_coverage.py`` compares the map read between solved bearings with direct solves along
the points' own bearings (README, "Coverage maps", for the measured errors).

The summary (area above a level, farthest range per sector) is computed from the same profiles in
range and bearing, on a sphere of radius 6371 km (:mod:`cavity.reports.coverage`).
"""

from __future__ import annotations

import dataclasses
import logging
import math
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from cavity.constants import EARTH_RADIUS_M
from cavity.errors import CavityError, ResourceError, ScenarioError
from cavity.ionosphere_forms import form_of
from cavity.version import __version__

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: Default angle between solved bearings, degrees.
DEFAULT_BEARING_STEP_DEG = 10.0
#: Default range of the map, km.
DEFAULT_RANGE_KM = 1000.0
#: Allowed bearing steps (degrees; the step must divide 360) and ranges (km).
BEARING_STEP_LIMITS_DEG = (0.5, 90.0)
RANGE_LIMITS_KM = (50.0, 10000.0)
#: Bearing refinement: a pair of neighbouring bearings is bisected while the ground class differs
#: between them on more than this share of the range samples out to the map's range ...
REFINE_GROUND_SHARE = 0.05
#: ... down to this share of the bearing step (the finest step, default a quarter: 2.5 deg).
REFINE_STEP_SHARE = 0.25
#: Range samples of the ground compared by the refinement, km (the paths' own sample spacing).
REFINE_SAMPLE_KM = 10.0
#: Bearings of the map's ground table (the ground along every grid point's path), degrees apart.
GROUND_TABLE_STEP_DEG = 0.25
#: Difference of the neighbours' path-integrated log10 conductivity (decade km) from which the
#: ground alone sets the weights between two bearings; below it the weights blend towards the angle's.
GROUND_WEIGHT_FULL_DECADE_KM = 20.0
#: Conductivities are clipped to this range (S/m) before their logarithm (perfect ground is finite).
GROUND_LOG_LIMITS_S_PER_M = (1e-5, 1e3)
#: The quick look (``preview``): fewer bearings and a coarser grid (cells per wavelength).
PREVIEW_BEARING_STEP_DEG = 30.0
PREVIEW_CELLS_PER_WAVELENGTH = 12.0
#: Default number of grid steps across the map's diameter (sets the latitude/longitude step).
MAP_STEPS_ACROSS = 300
#: Latitude/longitude steps the automatic grid picks from, degrees.
NICE_GRID_STEPS_DEG = (0.01, 0.02, 0.05, 0.1, 0.2, 0.25, 0.5, 1.0, 2.0)
#: Share of the available memory the map's arrays may take.
MAP_MEMORY_SHARE = 0.8
#: Mean radius of the earth used for areas and for the solver's curvature model, km.
EARTH_RADIUS_KM = EARTH_RADIUS_M / 1e3

REFINEMENT_METHOD = (
    "each pair of neighbouring bearings is bisected, recursively down to coverage_refine_to_deg, while the "
    f"ground class (land/sea mask, every {REFINE_SAMPLE_KM:g} km out to the map's range) differs between "
    f"the two on more than {REFINE_GROUND_SHARE:.0%} of the range samples"
)

INTERPOLATION_METHOD = (
    "along each solved bearing linearly in dB between the solver's range samples, then between the "
    "two neighbouring bearings in dB (not complex phasors) with weights set by the ground: the grid "
    "point's own path-integrated log10 ground conductivity out to its range (ground_conductivity_along) "
    "placed linearly between the two bearings' (clipped to 0-1), blending to weights linear in bearing "
    f"angle where the two bearings' integrals differ by less than {GROUND_WEIGHT_FULL_DECADE_KM:g} decade km "
    "(the same ground, or ground that does not change with bearing); range and bearing of each grid "
    "point from the transmitter on the WGS84 ellipsoid (geodesics)"
)


class CoverageError(CavityError):
    """Bearings of a coverage map failed after their retry; ``failures`` holds (name, message)."""

    def __init__(self, message: str, failures=()):
        super().__init__(message)
        self.failures = list(failures)


# --------------------------------------------------------------------------------------------------
# Settings and bearings
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CoverageSettings:
    """What a coverage map solves: bearings every ``bearing_step_deg`` out to ``range_km``.

    ``cells_per_wavelength`` None keeps the scenario's; ``grid_deg`` None picks a latitude/longitude
    step of about :data:`MAP_STEPS_ACROSS` steps across the map.
    """

    bearing_step_deg: float = DEFAULT_BEARING_STEP_DEG
    range_km: float = DEFAULT_RANGE_KM
    cells_per_wavelength: float | None = None
    grid_deg: float | None = None
    refine_to_deg: float | None = None

    @classmethod
    def make(
        cls, bearing_step_deg=None, range_km=None, *, preview: bool = False, grid_deg=None, refine_to_deg=None
    ) -> CoverageSettings:
        """Settings from user values (None: the default, or the preview's), checked.

        ``refine_to_deg`` is the finest step of the bearing refinement (:func:`refine_bearings`):
        None for :data:`REFINE_STEP_SHARE` of the step, the step itself for none.

        Raises
        ------
        ScenarioError
            A step that is out of range or does not divide 360 deg, a range, grid step or refinement
            step out of range.
        """
        step = (
            bearing_step_deg
            if bearing_step_deg is not None
            else (PREVIEW_BEARING_STEP_DEG if preview else DEFAULT_BEARING_STEP_DEG)
        )
        rng = range_km if range_km is not None else DEFAULT_RANGE_KM
        lo, hi = BEARING_STEP_LIMITS_DEG
        if not _number(step) or not lo <= step <= hi:
            raise ScenarioError(f"bearing_step_deg = {step!r} is outside the allowed range {lo:g} to {hi:g} deg")
        count = 360.0 / step
        if abs(count - round(count)) > 1e-9:
            raise ScenarioError(
                f"bearing_step_deg = {step:g} does not divide 360 deg into whole steps (e.g. 5, 7.5, 10, 15, 30)"
            )
        lo, hi = RANGE_LIMITS_KM
        if not _number(rng) or not lo <= rng <= hi:
            raise ScenarioError(f"range_km = {rng!r} is outside the allowed range {lo:g} to {hi:g} km")
        if grid_deg is not None and (not _number(grid_deg) or not 0.005 <= grid_deg <= 5.0):
            raise ScenarioError(f"grid_deg = {grid_deg!r} is outside the allowed range 0.005 to 5 deg")
        finest = BEARING_STEP_LIMITS_DEG[0] / 4.0
        if refine_to_deg is not None and (not _number(refine_to_deg) or not finest <= refine_to_deg <= step):
            raise ScenarioError(
                f"refine_to_deg = {refine_to_deg!r} is outside the allowed range {finest:g} to {step:g} deg "
                "(the bearing step: no refinement)"
            )
        return cls(
            float(step),
            float(rng),
            PREVIEW_CELLS_PER_WAVELENGTH if preview else None,
            None if grid_deg is None else float(grid_deg),
            None if refine_to_deg is None else float(refine_to_deg),
        )

    @property
    def finest_step_deg(self) -> float:
        """The finest step the refinement may reach, degrees (the bearing step: no refinement)."""
        if self.refine_to_deg is not None:
            return self.refine_to_deg
        return self.bearing_step_deg * REFINE_STEP_SHARE

    @property
    def bearings_deg(self) -> np.ndarray:
        """The solved bearings, 0 .. 360 - step, degrees clockwise from true north."""
        n = int(round(360.0 / self.bearing_step_deg))
        return np.arange(n) * self.bearing_step_deg


def _number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


@dataclass(frozen=True)
class BearingPoint:
    """One bearing of a coverage map: the unit of work the sweep driver solves and keeps."""

    index: int
    bearing_deg: float

    @property
    def name(self) -> str:
        """How the bearing is named to the user, e.g. ``bearing 40 deg``."""
        return f"bearing {self.bearing_deg:g} deg"

    @property
    def key(self) -> str:
        """A file-name-safe identity, e.g. ``b040.000deg`` (the part file's name)."""
        return f"b{self.bearing_deg:07.3f}deg"


def refine_bearings(
    bearings_deg, ground_of: Callable[[float], np.ndarray], finest_deg: float, max_share: float = REFINE_GROUND_SHARE
) -> np.ndarray:
    """The regular bearings plus bisectors where neighbouring paths cross different ground.

    Each pair of neighbouring bearings (periodic) is bisected while the ground class differs
    between the two on more than ``max_share`` of the range samples, recursively, down to
    ``finest_deg``: a coast that a pair of bearings straddles gets bearings on it, open sea or
    open land none. At most ``step / finest_deg - 1`` bearings are added per pair, so the cost
    stays linear in the number of bearings (at most ``step / finest_deg`` times the regular set).

    Parameters
    ----------
    bearings_deg : (B,) array
        The regular bearings, increasing, within [0, 360).
    ground_of : callable
        ``ground_of(bearing_deg)`` gives the ground class at fixed range samples along that bearing
        (equal-length arrays of labels, compared sample by sample).
    finest_deg : float
        Pairs no wider than this are not bisected, degrees.
    max_share : float
        Largest share (0-1) of range samples with different ground that leaves a pair alone.

    Returns
    -------
    numpy.ndarray
        All bearings, increasing, within [0, 360).
    """
    b = [float(x) % 360.0 for x in bearings_deg]
    seen: dict[float, np.ndarray] = {}

    def ground(x: float) -> np.ndarray:
        key = round(x % 360.0, 9)
        if key not in seen:
            seen[key] = np.asarray(ground_of(key))
        return seen[key]

    def split(lo: float, hi: float) -> list[float]:
        if hi - lo <= finest_deg * (1.0 + 1e-9) or np.mean(ground(lo) != ground(hi)) <= max_share:
            return []
        mid = 0.5 * (lo + hi)
        return split(lo, mid) + [mid] + split(mid, hi)

    out = []
    for i, lo in enumerate(b):
        hi = b[(i + 1) % len(b)] + (360.0 if i + 1 == len(b) else 0.0)
        out += [lo] + (split(lo, hi) if len(b) > 1 else [])
    return np.array(sorted(round(x % 360.0, 9) for x in out))


def ground_along_bearing(scenario: Scenario, bearing_deg: float, settings: CoverageSettings) -> np.ndarray:
    """Ground class along one bearing every :data:`REFINE_SAMPLE_KM` out to the map's range.

    The land/sea mask read as :func:`cavity.paths.build_paths` reads it for the bearing's path
    (:func:`cavity.geo.ground_kind_along` on the WGS84 geodesic), with the scenario's
    ``[[ground.segment]]`` entries laid over it; the same range samples on every bearing.
    """
    from cavity.geo import ground_kind_along, points_along

    lat0, lon0 = _check_scenario(scenario)
    r_m = np.linspace(0.0, settings.range_km * 1e3, int(math.ceil(settings.range_km / REFINE_SAMPLE_KM - 1e-9)) + 1)
    lat, lon = points_along(lat0, lon0, float(bearing_deg), r_m)
    kinds = np.asarray(ground_kind_along(lat, lon)).astype(object)
    for seg in scenario.ground.segments:
        kinds[(r_m >= seg.from_m) & (r_m < seg.to_m)] = seg.kind
    return kinds.astype(str)


def map_bearings(scenario: Scenario, settings: CoverageSettings) -> np.ndarray:
    """The bearings a map solves: the regular set, refined along coasts (:func:`refine_bearings`)."""
    regular = settings.bearings_deg
    if settings.finest_step_deg >= settings.bearing_step_deg * (1 - 1e-9) or scenario.ground.kind != "auto":
        return regular  # ground that does not change with bearing needs no refinement
    return refine_bearings(regular, lambda b: ground_along_bearing(scenario, b, settings), settings.finest_step_deg)


def bearing_scenario(scenario: Scenario, bearing_deg: float, settings: CoverageSettings) -> Scenario:
    """The scenario of one bearing: one receiver at the map's range on that bearing, validated.

    The receiver sits on the WGS84 geodesic leaving the transmitter at ``bearing_deg``, so the path
    that :func:`cavity.paths.build_paths` builds for it is that bearing, with its own ground, sun and
    every other medium sampled along it. ``solver.max_range_km`` is cleared (the path reaches the
    map's range plus the usual margin) and receiver time series are off.
    """
    from cavity.geo import points_along
    from cavity.scenario import Receiver

    lat0, lon0 = _check_scenario(scenario)
    lat, lon = points_along(lat0, lon0, float(bearing_deg), [settings.range_km * 1e3])
    receiver = Receiver(
        name=f"bearing {bearing_deg:g} deg at {settings.range_km:g} km",
        latitude_deg=round(float(lat[0]), 9),
        longitude_deg=round(float(lon[0]), 9),
    )
    # the map keeps the field along each bearing, not receiver uncertainties: no companion solve
    solver = dataclasses.replace(scenario.solver, max_range_m=None, receiver_time_series=False, uncertainty=False)
    if settings.cells_per_wavelength is not None and scenario.solver.cell_m is None:
        solver = dataclasses.replace(solver, cells_per_wavelength=settings.cells_per_wavelength)
    return scenario.replace(receivers=(receiver,), solver=solver)


def _check_scenario(scenario: Scenario) -> tuple[float, float]:
    """The transmitter's (latitude, longitude), degrees; ScenarioError when a map cannot be made."""
    tx = scenario.transmitter
    if tx.latitude_deg is None or tx.longitude_deg is None:
        raise ScenarioError("transmitter.latitude_deg is missing: a coverage map needs the transmitter's position")
    if getattr(scenario, "source", None) is not None:
        raise ScenarioError("[source]: a coverage map is of the continuous transmitter; remove [source]")
    return float(tx.latitude_deg), float(tx.longitude_deg)


# --------------------------------------------------------------------------------------------------
# The latitude/longitude grid
# --------------------------------------------------------------------------------------------------


def map_grid(lat0: float, lon0: float, range_km: float, grid_deg: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Latitudes and longitudes (degrees) of a regular grid covering the disc of ``range_km``.

    Longitudes are continuous about the transmitter (they may pass 180 or -180 when the disc
    crosses the antimeridian); a disc that holds a pole spans every longitude and reaches the pole.
    Grid points are cell centres on multiples of the step.
    """
    from cavity.geo import distance_bearing, points_along

    r_m = range_km * 1e3
    b = np.arange(0.0, 360.0, 0.5)
    lats, lons = np.empty(b.size), np.empty(b.size)
    for i, bearing in enumerate(b):
        la, lo = points_along(lat0, lon0, bearing, [r_m])
        lats[i], lons[i] = la[0], lo[0]
    dlon = (lons - lon0 + 180.0) % 360.0 - 180.0
    lat_lo, lat_hi = float(lats.min()), float(lats.max())
    lon_lo, lon_hi = lon0 + float(dlon.min()), lon0 + float(dlon.max())
    north = distance_bearing(lat0, lon0, 90.0, lon0)[0] <= r_m
    south = distance_bearing(lat0, lon0, -90.0, lon0)[0] <= r_m
    if north or south:
        lon_lo, lon_hi = lon0 - 180.0, lon0 + 180.0
        lat_hi = 90.0 if north else lat_hi
        lat_lo = -90.0 if south else lat_lo
    if grid_deg is None:
        across = max(lat_hi - lat_lo, 2.0 * range_km / 111.2)
        wanted = across / MAP_STEPS_ACROSS
        grid_deg = min(NICE_GRID_STEPS_DEG, key=lambda s: abs(math.log(s / wanted)))
    lat = _centres(lat_lo, lat_hi, grid_deg)
    lat = lat[np.abs(lat) < 90.0]
    lon = _centres(lon_lo, lon_hi, grid_deg)
    if lon[-1] - lon[0] >= 360.0 - 1e-9:
        lon = lon[lon - lon[0] < 360.0 - 1e-9]
    return lat, lon


def _centres(lo: float, hi: float, step: float) -> np.ndarray:
    k0 = math.floor(lo / step - 0.5)
    k1 = math.ceil(hi / step - 0.5)
    return np.round((np.arange(k0, k1 + 1) + 0.5) * step, 10)


# --------------------------------------------------------------------------------------------------
# Interpolation between bearings (the one place where the map's method lives)
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GroundTable:
    """Ground conductivity along paths from the transmitter at many bearings (the map's ground).

    ``conductivity_s_per_m`` is (bearing, range); bearings increasing within [0, 360) and holding
    every solved bearing, ranges in km from 0. :meth:`integral` gives the path-integrated
    log10 conductivity that sets the interpolation's weights between bearings.
    """

    bearing_deg: np.ndarray
    range_km: np.ndarray
    conductivity_s_per_m: np.ndarray

    def integral(self) -> np.ndarray:
        """(bearing, range) integral of log10(sigma / 1 S m-1) from the transmitter, decade km."""
        lo, hi = GROUND_LOG_LIMITS_S_PER_M
        g = np.log10(np.clip(np.asarray(self.conductivity_s_per_m, float), lo, hi))
        dr = np.diff(np.asarray(self.range_km, float))
        steps = 0.5 * (g[:, 1:] + g[:, :-1]) * dr
        return np.concatenate([np.zeros((g.shape[0], 1)), np.cumsum(steps, axis=1)], axis=1)

    def rows(self, bearings_deg) -> np.ndarray:
        """Index of each given bearing in the table (they must be in it)."""
        b = np.asarray(bearings_deg, float) % 360.0
        idx = np.clip(np.searchsorted(self.bearing_deg, b - 1e-7), 0, self.bearing_deg.size - 1)
        if not np.allclose(self.bearing_deg[idx], b, atol=1e-6, rtol=0.0):
            raise ValueError("the ground table does not hold every solved bearing")
        return idx


def ground_table(scenario: Scenario, settings: CoverageSettings, bearings_deg) -> GroundTable | None:
    """The ground along every :data:`GROUND_TABLE_STEP_DEG` and every solved bearing (ground "auto").

    None when the ground does not change with bearing (then the weights are the angle's).
    """
    if scenario.ground.kind != "auto":
        return None
    from cavity.ground import GROUND_CLASSES

    n = int(round(360.0 / GROUND_TABLE_STEP_DEG))
    table = np.unique(
        np.round(np.concatenate([np.arange(n) * GROUND_TABLE_STEP_DEG, np.asarray(bearings_deg, float)]) % 360.0, 9)
    )
    kinds = [ground_along_bearing(scenario, b, settings) for b in table]
    sigma = np.array([[GROUND_CLASSES[k].conductivity_s_per_m for k in row] for row in kinds], float)
    r_km = np.linspace(0.0, settings.range_km, sigma.shape[1])
    return GroundTable(table, r_km, sigma)


def _periodic(table_deg: np.ndarray, at_deg: np.ndarray):
    """Neighbours (k, k2) and weight of ``at_deg`` among periodic increasing bearings."""
    b = table_deg
    ext = np.concatenate([b, [b[0] + 360.0]])
    k = np.clip(np.searchsorted(ext, at_deg, side="right") - 1, 0, b.size - 1)
    if b.size == 1:
        return k, k, np.zeros_like(at_deg)
    w = (at_deg - ext[k]) / (ext[k + 1] - ext[k])
    k2 = (k + 1) % b.size
    below = at_deg < b[0]  # before the first bearing: between the last and the first
    if np.any(below):
        k[below] = b.size - 1
        k2[below] = 0
        w[below] = (at_deg[below] + 360.0 - b[-1]) / (b[0] + 360.0 - b[-1])
    return k, k2, w


def ground_weights(ground: GroundTable, bearings_deg, k, k2, angle_w, at_bearing_deg, at_range_km) -> np.ndarray:
    """Weights of the second neighbour (``k2``) set by the ground along each point's own path.

    With I(theta, r) the path-integrated log10 conductivity (:meth:`GroundTable.integral`), the
    point's I between its neighbours' I1 and I2 gives w = (I - I1) / (I2 - I1), clipped to 0-1: a
    point whose path has so far crossed the same ground as one neighbour takes that neighbour's
    field. Where |I2 - I1| is below :data:`GROUND_WEIGHT_FULL_DECADE_KM` the weight blends linearly
    towards ``angle_w`` (equal ground: the angle's weight).
    """
    integral = ground.integral()
    rg = np.asarray(ground.range_km, float)
    ar = np.clip(np.asarray(at_range_km, float), rg[0], rg[-1])
    j = np.clip(np.searchsorted(rg, ar, side="right") - 1, 0, rg.size - 2)
    wr = (ar - rg[j]) / (rg[j + 1] - rg[j])

    def at(rows):
        return integral[rows, j] + wr * (integral[rows, j + 1] - integral[rows, j])

    rows = ground.rows(bearings_deg)
    i1, i2 = at(rows[k]), at(rows[k2])
    f, f2, wf = _periodic(np.asarray(ground.bearing_deg, float), np.asarray(at_bearing_deg, float) % 360.0)
    i = at(f) * (1.0 - wf) + at(f2) * wf
    di = i2 - i1
    with np.errstate(invalid="ignore", divide="ignore"):
        wg = np.clip(np.where(di != 0.0, (i - i1) / np.where(di != 0.0, di, 1.0), angle_w), 0.0, 1.0)
    share = np.clip(np.abs(di) / GROUND_WEIGHT_FULL_DECADE_KM, 0.0, 1.0)
    return angle_w + share * (wg - angle_w)


def profile_values(bearings_deg, range_km, amplitude_db, at_bearing_deg, at_range_km, max_range_km=None, ground=None):
    """Values of bearing profiles at arbitrary (bearing, range): linear in range, then between bearings.

    Parameters
    ----------
    bearings_deg : (B,) array
        Solved bearings, degrees, increasing, within [0, 360); treated as periodic.
    range_km : (R,) array
        Range samples of the profiles, km, increasing.
    amplitude_db : (B, ..., R) array
        Profiles in dB (any middle dimensions, e.g. frequency); NaN where not solved.
    at_bearing_deg, at_range_km : arrays of one shape S
        Where to read.
    max_range_km : float, optional
        NaN beyond this range (default: the last range sample).
    ground : GroundTable, optional
        The ground along the paths: the weights between bearings follow it (:func:`ground_weights`);
        without it they are linear in bearing angle.

    Returns
    -------
    numpy.ndarray of shape (..., *S)
        NaN beyond the range, or where a neighbouring profile is NaN.
    """
    b = np.asarray(bearings_deg, float)
    r = np.asarray(range_km, float)
    amp = np.asarray(amplitude_db, float)
    ab = np.asarray(at_bearing_deg, float) % 360.0
    ar = np.asarray(at_range_km, float)
    shape = np.broadcast_shapes(ab.shape, ar.shape)
    ab = np.broadcast_to(ab, shape).ravel()
    ar = np.broadcast_to(ar, shape).ravel()
    top = r[-1] if max_range_km is None else min(float(max_range_km), r[-1])
    inside = (ar >= 0.0) & (ar <= top)
    # range: linear weights between samples j and j + 1
    j = np.clip(np.searchsorted(r, ar, side="right") - 1, 0, r.size - 2)
    wr = np.clip((ar - r[j]) / (r[j + 1] - r[j]), 0.0, 1.0)
    # bearing: periodic neighbours k and k + 1 (mod B), weighted by angle or by the ground
    k, k2, wb = _periodic(b, ab)
    if ground is not None and b.size > 1:
        wb = ground_weights(ground, b, k, k2, wb, ab, ar)
    moved = np.moveaxis(amp, 0, -2)  # (..., B, R)

    def along(kk):
        lo = moved[..., kk, j]
        hi = moved[..., kk, j + 1]
        return lo + wr * (hi - lo)

    out = along(k) * (1.0 - wb) + along(k2) * wb
    out = np.where(inside, out, np.nan)
    return out.reshape(out.shape[:-1] + shape)


def map_from_profiles(
    lat0: float, lon0: float, bearings_deg, range_km, amplitude_db, lat, lon, max_range_km, ground=None
):
    """The profiles on a latitude/longitude grid: (values (..., lat, lon), range_km, bearing_deg).

    Each grid point's range and bearing from the transmitter are WGS84 geodesics
    (:func:`cavity.geo.distance_bearing`); the value follows :func:`profile_values` (with the
    ground table ``ground`` when given).
    """
    from cavity.geo import distance_bearing

    lat2, lon2 = np.meshgrid(np.asarray(lat, float), np.asarray(lon, float), indexing="ij")
    dist_m, brg = distance_bearing(lat0, lon0, lat2, ((lon2 + 180.0) % 360.0) - 180.0)
    dist_km = np.asarray(dist_m) / 1e3
    values = profile_values(bearings_deg, range_km, amplitude_db, brg, dist_km, max_range_km, ground)
    return values, dist_km, np.asarray(brg)


def dataset_ground(ds) -> GroundTable | None:
    """The ground table a coverage dataset holds (None for a map whose ground is one everywhere)."""
    if "ground_conductivity_along" not in ds:
        return None
    return GroundTable(
        np.asarray(ds["ground_bearing"].values, float),
        np.asarray(ds["ground_range"].values, float),
        np.asarray(ds["ground_conductivity_along"].transpose("ground_bearing", "ground_range").values, float),
    )


# --------------------------------------------------------------------------------------------------
# Memory
# --------------------------------------------------------------------------------------------------


def map_memory_bytes(n_freqs: int, n_lat: int, n_lon: int, n_bearings: int, n_range: int) -> int:
    """Memory of a map's arrays while it is built, bytes (float64).

    Per grid point: range, bearing, zenith angle and the interpolation's index, weight and ground
    arrays (about 20 numbers) plus 4 per frequency; per bearing the profiles (amplitude, phase, media).
    """
    return int(8 * (n_lat * n_lon * (20 + 4 * n_freqs) + n_bearings * n_range * (2 * n_freqs + 6)))


def check_memory(scenario: Scenario, settings: CoverageSettings, variants: dict) -> None:
    """Refuse, before any solving, a map whose one bearing or whose map arrays would not fit.

    Raises
    ------
    ResourceError
        One line with the size needed and the memory available.
    """
    from cavity.fdtd import grid as gridmod
    from cavity.paths import build_paths
    from cavity.solve import plan_path

    variant = next(iter(variants.values()))
    path = build_paths(variant)[0]
    plan = plan_path(variant, path).grid
    available = gridmod.available_memory_bytes()
    try:
        gridmod.check_memory(plan, available)
    except ResourceError as exc:
        raise ResourceError(f"one bearing's {exc} (or a shorter --range-km)") from None
    lat0, lon0 = _check_scenario(scenario)
    lat, lon = map_grid(lat0, lon0, settings.range_km, settings.grid_deg)
    n_range = plan.range_columns
    need = map_memory_bytes(len(scenario.transmitter.frequencies_hz), lat.size, lon.size, len(variants), n_range)
    if need > MAP_MEMORY_SHARE * available:
        raise ResourceError(
            f"the coverage map of {lat.size} x {lon.size} grid points x {len(scenario.transmitter.frequencies_hz)} "
            f"frequencies and {len(variants)} bearings needs about {need / 1e9:.2g} GB, more than "
            f"{MAP_MEMORY_SHARE:.0%} of the {available / 1e9:.2g} GB available; use a larger --grid-deg "
            "or a shorter --range-km"
        )


# --------------------------------------------------------------------------------------------------
# The driver
# --------------------------------------------------------------------------------------------------


def default_parts_dir(output) -> Path:
    """The parts folder of a coverage file: ``OUT.nc.parts`` beside it (as for sweeps)."""
    from cavity.sweeps.store import default_parts_dir as parts

    return parts(output)


def coverage(
    scenario: Scenario,
    bearing_step_deg: float | None = None,
    range_km: float | None = None,
    *,
    preview: bool = False,
    grid_deg: float | None = None,
    refine_to_deg: float | None = None,
    scheduler=None,
    workers: int | None = None,
    parts_dir=None,
    progress: Callable[[float, str], None] | None = None,
    solve: Callable | None = None,
) -> xr.Dataset:
    """Solve a scenario along bearings around its transmitter and map the field.

    Parameters
    ----------
    scenario : cavity.scenario.Scenario
        Needs the transmitter's position; every frequency is solved in each bearing's one solve.
    bearing_step_deg : float, optional
        Angle between bearings, degrees (0.5-90, dividing 360); default
        :data:`DEFAULT_BEARING_STEP_DEG` (:data:`PREVIEW_BEARING_STEP_DEG` with ``preview``).
    range_km : float, optional
        Range of the map, km (50-10000); default :data:`DEFAULT_RANGE_KM`.
    preview : bool
        A quick coarse look: fewer bearings and :data:`PREVIEW_CELLS_PER_WAVELENGTH` (when the
        scenario leaves ``solver.cell_m`` automatic).
    grid_deg : float, optional
        Latitude/longitude step of the map, degrees (default about 300 steps across).
    refine_to_deg : float, optional
        Finest step of the bearing refinement along coasts (:func:`refine_bearings`), degrees;
        default a quarter of the bearing step; the bearing step itself for no refinement.
    scheduler, workers, progress, solve :
        As for :func:`cavity.sweeps.run.sweep`: an existing cluster (address, client or cluster object)
        or a local one of ``workers`` processes; ``progress(fraction, text)`` after each solved
        bearing; ``solve`` what a worker runs per path.
    parts_dir : str or os.PathLike, optional
        Folder keeping one result file per finished bearing (reused when its scenario text and tool
        version match); default none.

    Returns
    -------
    xarray.Dataset
        The coverage-file contract (README, "Coverage maps"); write it with :func:`write_coverage`.

    Raises
    ------
    ScenarioError
        A bad setting, or a scenario without the transmitter's position or with a lightning source.
    ResourceError
        One bearing's grid or the map's arrays would not fit in memory (before any solving).
    CoverageError
        Bearings failed after their retry (each named with its error); finished ones stay in
        ``parts_dir``.
    """
    from cavity.sweeps.cluster import solve_path
    from cavity.sweeps.run import run_points
    from cavity.sweeps.store import kept_parts

    _check_scenario(scenario)
    settings = CoverageSettings.make(
        bearing_step_deg, range_km, preview=preview, grid_deg=grid_deg, refine_to_deg=refine_to_deg
    )
    # bearings stand in for the sweep driver's points (they have the .key and .name it uses)
    points: list[Any] = [BearingPoint(i, float(b)) for i, b in enumerate(map_bearings(scenario, settings))]
    variants = {p: bearing_scenario(scenario, p.bearing_deg, settings) for p in points}
    folder, finished = kept_parts(parts_dir, points, variants)
    results: dict[BearingPoint, object] = dict(finished)
    todo = [p for p in points if p not in results]
    log.info(
        "coverage: %d bearings (every %g deg, %d more where paths cross different ground) to %g km; "
        "%d already solved%s, %d to solve",
        len(points),
        settings.bearing_step_deg,
        len(points) - settings.bearings_deg.size,
        settings.range_km,
        len(results),
        f" in {folder}" if folder is not None else "",
        len(todo),
    )
    check_memory(scenario, settings, variants)
    failures = {}
    if todo:
        failures = run_points(todo, variants, results, folder, scheduler, workers, progress, solve or solve_path)
    if failures:
        lines = [(p.name, failures[p]) for p in points if p in failures]
        for name, message in lines:
            log.error("%s failed: %s", name, message)
        kept = f"; the {len(results)} finished bearings are kept in {folder}" if folder is not None and results else ""
        raise CoverageError(
            f"{len(lines)} of {len(points)} bearings failed (first: {lines[0][0]}: {lines[0][1]}){kept}; "
            "run the map again to retry only the missing bearings",
            lines,
        )
    return combine(scenario, settings, points, results)


# --------------------------------------------------------------------------------------------------
# Combining the bearings into the coverage dataset
# --------------------------------------------------------------------------------------------------


def _part(value):
    if isinstance(value, Path):
        from cavity.results import open_result

        return open_result(value)
    return value


def combine(scenario: Scenario, settings: CoverageSettings, points, results: dict) -> xr.Dataset:
    """The coverage dataset from every bearing's result (dataset or part file): profiles and map."""
    import xarray as xr

    from cavity.geo import distance_bearing, solar_zenith_deg

    lat0, lon0 = _check_scenario(scenario)
    r = None
    n_b = len(points)
    profiles: dict[str, np.ndarray] = {}
    media_names = ("ground_conductivity", "ground_relative_permittivity", "solar_zenith_angle", "hprime", "beta")
    records = []
    for p in points:
        ds = _part(results[p])
        if r is None:
            r = np.asarray(ds["range"].values, float)
            r = r[r <= settings.range_km * (1 + 1e-12)]
            freqs = np.asarray(ds["frequency"].values, float)
            profiles["ez_amplitude"] = np.full((n_b, freqs.size, r.size), np.nan)
            profiles["ez_phase"] = np.full((n_b, freqs.size, r.size), np.nan)
            for name in media_names:
                if name in ds:
                    profiles[name] = np.full((n_b, r.size), np.nan)
        on = ds.isel(path=0)
        here = np.asarray(ds["range"].values, float)
        for name in ("ez_amplitude", "ez_phase"):
            values = np.asarray(on[name].transpose("frequency", "range").values, float)
            profiles[name][p.index] = np.stack([np.interp(r, here, v) for v in values])
        bad = ~np.isfinite(profiles["ez_amplitude"][p.index])  # e.g. -inf dB on the axis, r = 0
        profiles["ez_amplitude"][p.index][bad] = np.nan
        profiles["ez_phase"][p.index][bad] = np.nan
        for name in media_names:
            if name in profiles and name in on:
                profiles[name][p.index] = np.interp(r, here, np.asarray(on[name].values, float))
        records.append(dict(ds.attrs))
        del ds, on

    bearings = np.array([p.bearing_deg for p in points])
    ground = ground_table(scenario, settings, bearings)
    lat, lon = map_grid(lat0, lon0, settings.range_km, settings.grid_deg)
    amp, dist_km, brg = map_from_profiles(
        lat0, lon0, bearings, r, profiles["ez_amplitude"], lat, lon, settings.range_km, ground
    )
    outside = dist_km > settings.range_km
    dist_km = np.where(outside, np.nan, dist_km)
    brg = np.where(outside, np.nan, brg)

    data = {
        "ez_amplitude": (("frequency", "latitude", "longitude"), amp),
        "map_range": (("latitude", "longitude"), dist_km),
        "map_bearing": (("latitude", "longitude"), brg),
        "bearing_ez_amplitude": (("bearing", "frequency", "range"), profiles["ez_amplitude"]),
        "bearing_ez_phase": (("bearing", "frequency", "range"), profiles["ez_phase"]),
    }
    for name in media_names:
        if name in profiles:
            data[f"bearing_{name}"] = (("bearing", "range"), profiles[name])
    instant = form_of(scenario.ionosphere).instant(scenario.ionosphere)
    if instant is not None:
        lat2, lon2 = np.meshgrid(lat, ((lon + 180.0) % 360.0) - 180.0, indexing="ij")
        data["map_solar_zenith_angle"] = (("latitude", "longitude"), np.asarray(solar_zenith_deg(instant, lat2, lon2)))

    # receivers with a position: the map's value there, by the same interpolation
    placed = [rx for rx in scenario.receivers if rx.latitude_deg is not None]
    if placed:
        rlat = np.array([rx.latitude_deg for rx in placed])
        rlon = np.array([rx.longitude_deg for rx in placed])
        d, b = distance_bearing(lat0, lon0, rlat, rlon)
        d_km = np.asarray(d) / 1e3
        rx_amp = profile_values(bearings, r, profiles["ez_amplitude"], np.asarray(b), d_km, settings.range_km, ground)
        data.update(
            {
                "receiver_name": (("receiver",), np.array([rx.name for rx in placed], dtype=object)),
                "receiver_latitude": (("receiver",), rlat),
                "receiver_longitude": (("receiver",), rlon),
                "receiver_range": (("receiver",), d_km),
                "receiver_bearing": (("receiver",), np.asarray(b, float)),
                "receiver_ez_amplitude": (("receiver", "frequency"), np.asarray(rx_amp).T),
            }
        )
    coords = {
        "frequency": ("frequency", freqs),
        "latitude": ("latitude", lat),
        "longitude": ("longitude", lon),
        "bearing": ("bearing", bearings),
        "range": ("range", r),
    }
    if ground is not None:
        data["ground_conductivity_along"] = (("ground_bearing", "ground_range"), ground.conductivity_s_per_m)
        coords["ground_bearing"] = ("ground_bearing", ground.bearing_deg)
        coords["ground_range"] = ("ground_range", ground.range_km)
    out = xr.Dataset(data, coords=coords)
    if ground is not None:
        out["ground_bearing"].attrs.update(
            units="degree", long_name="bearing of a ground-table path at the transmitter, clockwise from true north"
        )
        out["ground_range"].attrs.update(units="km", long_name="ground range along the ground-table paths")
        out["ground_conductivity_along"].attrs.update(
            units="S m-1",
            long_name="ground conductivity along paths every ground_bearing (land/sea mask), which sets the "
            "interpolation's weights between solved bearings",
        )

    def agg(key, fn, default):
        values = np.array([float(a.get(key, np.nan)) for a in records])
        values = values[np.isfinite(values)]
        return fn(values) if values.size else default

    first = records[0]
    converged = all(a.get("solver_converged", "yes") == "yes" for a in records)
    notes = [f"{p.name}: {a['solver_notes']}" for p, a in zip(points, records) if a.get("solver_notes")]
    out.attrs = {
        "title": scenario.title,
        "Conventions": "CF-1.10",
        "history": f"{_now()} cavity {__version__}: coverage map of {scenario.path or 'a scenario given as text'}",
        "source": f"cavity {__version__}",
        "scenario": scenario.text or scenario.to_toml(),
        "cautions": str(first.get("cautions", "")) + " " + COVERAGE_CAUTION,
        "references": str(first.get("references", "")),
        "solver_cells": int(agg("solver_cells", np.max, 0)),
        "solver_time_steps": int(agg("solver_time_steps", np.max, 0)),
        "solver_cell_r_m": float(agg("solver_cell_r_m", np.min, np.nan)),
        "solver_cell_z_m": float(agg("solver_cell_z_m", np.min, np.nan)),
        "solver_time_step_s": float(agg("solver_time_step_s", np.min, np.nan)),
        "solver_wall_time_s": float(agg("solver_wall_time_s", np.sum, 0.0)),
        "solver_converged": "yes" if converged else "no",
        "coverage_bearing_step_deg": float(settings.bearing_step_deg),
        "coverage_refine_to_deg": float(settings.finest_step_deg),
        "coverage_refinement": (
            f"{n_b - settings.bearings_deg.size} bearings added to the {settings.bearings_deg.size} regular ones: "
            + REFINEMENT_METHOD
        ),
        "coverage_range_km": float(settings.range_km),
        "coverage_grid_deg": float(np.round(lat[1] - lat[0], 10)) if lat.size > 1 else float("nan"),
        "coverage_transmitter_latitude_deg": lat0,
        "coverage_transmitter_longitude_deg": lon0,
        "coverage_interpolation": INTERPOLATION_METHOD,
        "coverage_description": (
            "each bearing is the scenario above with one receiver at coverage_range_km on that bearing "
            "(solver.max_range_km cleared, the path's ground, sun and ionosphere sampled along it), "
            "solved on its own; bearing_* hold each bearing's profiles, from which the map is rebuilt "
            "(cavity.sweeps.coverage.rebuild_map); the solver_* attributes give the largest cells and steps, "
            "the smallest cells and time step and the summed stepping time of all bearings (a solve "
            "shared by bearings of equal medium counted once)"
        ),
    }
    if settings.cells_per_wavelength is not None:
        out.attrs["coverage_preview"] = (
            f"preview: {settings.cells_per_wavelength:g} cells per wavelength where the scenario leaves "
            "solver.cell_m automatic (coarser and less accurate than a full map)"
        )
    if notes:
        out.attrs["solver_notes"] = "; ".join(notes)
    from cavity.results import apply_metadata

    return apply_metadata(out)


#: Added to the cautions of every coverage file, figure and summary.
COVERAGE_CAUTION = (
    "A coverage map is a planning aid, not a guarantee of service: between solved bearings the field "
    "is interpolated, and contours near modal minima move with h' and beta."
)


def rebuild_map(ds: xr.Dataset, grid_deg: float | None = None) -> xr.Dataset:
    """A coverage dataset's map made again from its bearing profiles (optionally on another grid)."""
    lat0 = float(ds.attrs["coverage_transmitter_latitude_deg"])
    lon0 = float(ds.attrs["coverage_transmitter_longitude_deg"])
    range_km = float(ds.attrs["coverage_range_km"])
    if grid_deg is None:
        lat, lon = np.asarray(ds["latitude"].values, float), np.asarray(ds["longitude"].values, float)
    else:
        lat, lon = map_grid(lat0, lon0, range_km, grid_deg)
    amp, _, _ = map_from_profiles(
        lat0,
        lon0,
        ds["bearing"].values,
        ds["range"].values,
        ds["bearing_ez_amplitude"].transpose("bearing", "frequency", "range").values,
        lat,
        lon,
        range_km,
        dataset_ground(ds),
    )
    import xarray as xr

    return xr.DataArray(
        amp,
        dims=("frequency", "latitude", "longitude"),
        coords={"frequency": ds["frequency"].values, "latitude": lat, "longitude": lon},
        attrs=dict(ds["ez_amplitude"].attrs),
    ).to_dataset(name="ez_amplitude")


def is_coverage(ds) -> bool:
    """True for a coverage file (latitude/longitude grid and bearing profiles)."""
    return "latitude" in ds.dims and "bearing" in ds.dims


def write_coverage(ds: xr.Dataset, path, *, overwrite: bool = False) -> Path:
    """Write a coverage dataset atomically (:func:`cavity.results.write_result`)."""
    from cavity.results import write_result

    return write_result(ds, path, overwrite=overwrite)


def _now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
