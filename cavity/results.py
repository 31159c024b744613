"""Result files: assemble the run's Dataset, write it atomically to netCDF-4, read it back.

The contract is the "Result file" section of the design conventions (and the README's result-file
reference): CF-1.10 metadata from ONE table, :data:`VARIABLES`, applied by :func:`apply_metadata`;
no complex numbers on disk (amplitude in dB and phase in degrees, converted in ONE function,
:func:`phasor_to_db_phase`); the scenario text, cautions and the solver's record of the run as
global attributes. :func:`write_result` writes to a temporary name in the target folder and renames
it, so a result file is either complete or absent.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import asdict, dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from cavity.errors import ResultFileError
from cavity.files import replacing
from cavity.version import __version__

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

    from cavity.scenario import Scenario

#: Reference levels of the dB scales (RMS): 1 uV/m for the electric field, 1 fT for flux density.
EZ_REFERENCE_V_PER_M = 1e-6
B_REFERENCE_T = 1e-15

#: What every result file says about the trust to place in it (docs/physics.md 10).
CAUTIONS = (
    "Predictions are planning estimates: h' and beta vary with season, latitude, solar cycle, flares "
    "and particle precipitation; ground maps are coarse; the geomagnetic field is the IGRF at one "
    'height (left out for receivers given by range only or with model "none"), and the axisymmetric '
    "model takes the medium along each path's bearing for the whole ring around the transmitter. Near modal minima errors "
    "reach many dB. Decisions on coverage, interference or "
    "safety-of-life navigation and timing rest on measurements, ITU-R methods and licensed engineers. "
    "Near transmitters, RF exposure limits apply (ICNIRP 2010, Health Physics 99, 818: general public "
    "83 V/m, 27 uT at 3 kHz-10 MHz); follow local regulations."
)

REFERENCES = (
    "Wait and Spies (1964) NBS Technical Note 300 (exponential D region); Yu and Simpson (2010) IEEE "
    "TAP 58(2) 469 (plasma current update, isotropic and magnetised); Alken et al. (2021) Earth Planets "
    "Space 73:49 (IGRF); Roden and Gedney (2000) MOTL 27(5) 334 (CPML); Maloney and "
    "Smith (1992) IEEE TAP 40(1) (surface impedance); Richter (1966) Radio Science (earth flattening)"
)

_DB_E = "dB re 1 uV/m RMS"
_DB_B = "dB re 1 fT RMS"
_PHASE = "relative to the transmitter current, exp(+j omega t) convention"

#: Metadata of every variable a result file may hold: units, long_name, and standard_name only where
#: the CF standard-name table defines one. Decibel quantities have units "1" and name their
#: reference in long_name (UDUNITS knows no decibel).
VARIABLES: dict[str, dict[str, str]] = {
    # coordinates
    "range": {"units": "km", "long_name": "ground range from the transmitter"},
    "frequency": {"units": "kHz", "long_name": "transmitted frequency", "standard_name": "radiation_frequency"},
    # The model's ground is the geoid (no terrain), so height above it is CF's "altitude".
    "altitude": {
        "units": "km",
        "long_name": "altitude above the ground",
        "standard_name": "altitude",
        "positive": "up",
        "axis": "Z",
    },
    "path": {"units": "1", "long_name": "path index, one per distinct bearing solved"},
    # Not named "time": it is elapsed time without a calendar origin, which CF's time axis requires.
    "lag": {
        "units": "s",
        "long_name": "time since the source started (the carrier switched on, or the lightning stroke's onset)",
    },
    "spectrum_frequency": {"units": "kHz", "long_name": "frequency of the waveform spectra"},
    # per path
    "path_label": {"long_name": "path label"},
    "path_bearing": {
        "units": "degree",
        "long_name": "bearing of the path at the transmitter, clockwise from true north (NaN: the path serves every bearing)",
    },
    # fields along each path
    "ez_amplitude": {"units": "1", "long_name": f"vertical electric field at the ground, {_DB_E}"},
    "ez_phase": {
        "units": "degree",
        "long_name": f"phase of the vertical electric field at the ground, {_PHASE}, unwrapped along range",
    },
    "b_amplitude": {"units": "1", "long_name": f"horizontal magnetic flux density at the ground, {_DB_B}"},
    "b_phase": {
        "units": "degree",
        "long_name": f"phase of the horizontal magnetic flux density at the ground, {_PHASE}, unwrapped along range",
    },
    # the other horizontal components (magnetised ionosphere only: [geomagnetic] model other than "none")
    "b_radial_amplitude": {
        "units": "1",
        "long_name": f"horizontal magnetic flux density along the path (radial) at the ground, {_DB_B}",
    },
    "b_radial_phase": {
        "units": "degree",
        "long_name": f"phase of the radial magnetic flux density at the ground, {_PHASE}, unwrapped along range",
    },
    "ephi_amplitude": {
        "units": "1",
        "long_name": f"horizontal electric field across the path (azimuthal) at the ground, {_DB_E}",
    },
    "ephi_phase": {
        "units": "degree",
        "long_name": f"phase of the azimuthal electric field at the ground, {_PHASE}, unwrapped along range",
    },
    # receivers
    "receiver_name": {"long_name": "receiver name"},
    "receiver_range": {"units": "km", "long_name": "ground range of the receiver from the transmitter"},
    "receiver_path": {"units": "1", "long_name": "index of the path the receiver lies on"},
    "receiver_bearing": {
        "units": "degree",
        "long_name": "bearing of the receiver from the transmitter, clockwise from true north (NaN: given by range only)",
    },
    "receiver_latitude": {
        "units": "degrees_north",
        "long_name": "receiver latitude (NaN: given by range only)",
        "standard_name": "latitude",
    },
    "receiver_longitude": {
        "units": "degrees_east",
        "long_name": "receiver longitude (NaN: given by range only)",
        "standard_name": "longitude",
    },
    "receiver_ez_amplitude": {"units": "1", "long_name": f"vertical electric field at the receiver, {_DB_E}"},
    "receiver_ez_phase": {
        "units": "degree",
        "long_name": f"phase of the vertical electric field at the receiver, {_PHASE}, on the branch of the path's unwrapped phase",
    },
    "receiver_ez_uncertainty": {
        "units": "1",
        "long_name": "numerical uncertainty of the vertical electric field at the receiver in dB (grid convergence index from a companion run on a coarser grid; NaN: not computed)",
    },
    "receiver_b_amplitude": {"units": "1", "long_name": f"horizontal magnetic flux density at the receiver, {_DB_B}"},
    "receiver_b_phase": {
        "units": "degree",
        "long_name": f"phase of the horizontal magnetic flux density at the receiver, {_PHASE}, on the branch of the path's unwrapped phase",
    },
    "receiver_b_radial_amplitude": {
        "units": "1",
        "long_name": f"radial horizontal magnetic flux density at the receiver, {_DB_B}",
    },
    "receiver_b_radial_phase": {
        "units": "degree",
        "long_name": f"phase of the radial magnetic flux density at the receiver, {_PHASE}",
    },
    "receiver_ephi_amplitude": {
        "units": "1",
        "long_name": f"azimuthal horizontal electric field at the receiver, {_DB_E}",
    },
    "receiver_ephi_phase": {
        "units": "degree",
        "long_name": f"phase of the azimuthal electric field at the receiver, {_PHASE}",
    },
    "receiver_ez_time_series": {
        "units": "V m-1",
        "long_name": "vertical electric field at the receiver against time (instantaneous value)",
    },
    # sferics (cavity.sferic): waveforms, their spectra and the source
    "receiver_b_time_series": {
        "units": "T",
        "long_name": "horizontal magnetic flux density at the receiver against time (instantaneous value)",
    },
    "receiver_ez_spectrum": {
        "units": "1",
        "long_name": "amplitude spectral density of the vertical electric field waveform at the receiver (magnitude of its Fourier transform), dB re 1 uV/m/Hz",
    },
    "receiver_b_spectrum": {
        "units": "1",
        "long_name": "amplitude spectral density of the horizontal magnetic flux density waveform at the receiver (magnitude of its Fourier transform), dB re 1 fT/Hz",
    },
    "receiver_cutoff_frequency": {
        "units": "kHz",
        "long_name": "lowest waveguide cutoff estimated from the sferic's tail at the receiver (NaN: none found)",
    },
    "source_current": {"units": "A", "long_name": "lightning channel-base current"},
    "source_current_moment": {
        "units": "A m",
        "long_name": "current moment of the lightning channel (current integrated along the channel)",
    },
    # media along each path
    "electron_density": {"units": "m-3", "long_name": "electron density"},
    "collision_frequency": {"units": "s-1", "long_name": "effective electron collision frequency"},
    "ground_conductivity": {"units": "S m-1", "long_name": "ground conductivity"},
    "ground_relative_permittivity": {"units": "1", "long_name": "ground relative permittivity"},
    "solar_zenith_angle": {
        "units": "degree",
        "long_name": "solar zenith angle at the ground",
        "standard_name": "solar_zenith_angle",
    },
    "hprime": {"units": "km", "long_name": "Wait-Spies reference height h'"},
    "beta": {"units": "km-1", "long_name": "Wait-Spies sharpness beta"},
    "geomagnetic_field_r": {
        "units": "nT",
        "long_name": "geomagnetic field in the ionosphere, component along the path (direction of travel)",
    },
    "geomagnetic_field_phi": {
        "units": "nT",
        "long_name": "geomagnetic field in the ionosphere, horizontal component across the path (to the left of the direction of travel)",
    },
    "geomagnetic_field_z": {"units": "nT", "long_name": "geomagnetic field in the ionosphere, upward component"},
    # coverage maps (cavity.sweeps.coverage): the map on a latitude/longitude grid and the bearings behind it
    "latitude": {
        "units": "degrees_north",
        "long_name": "latitude of the map grid point",
        "standard_name": "latitude",
        "axis": "Y",
    },
    "longitude": {
        "units": "degrees_east",
        "long_name": "longitude of the map grid point (continuous about the transmitter)",
        "standard_name": "longitude",
        "axis": "X",
    },
    "bearing": {
        "units": "degree",
        "long_name": "bearing of a solved path at the transmitter, clockwise from true north",
    },
    "map_range": {
        "units": "km",
        "long_name": "ground range of the grid point from the transmitter (WGS84 geodesic; NaN beyond the map's range)",
    },
    "map_bearing": {
        "units": "degree",
        "long_name": "bearing of the grid point from the transmitter, clockwise from true north (NaN beyond the map's range)",
    },
    "map_solar_zenith_angle": {
        "units": "degree",
        "long_name": "solar zenith angle at the grid point",
        "standard_name": "solar_zenith_angle",
    },
    "bearing_ez_amplitude": {
        "units": "1",
        "long_name": f"vertical electric field at the ground along each solved bearing, {_DB_E}",
    },
    "bearing_ez_phase": {
        "units": "degree",
        "long_name": f"phase of the vertical electric field along each solved bearing, {_PHASE}, unwrapped along range",
    },
    "bearing_ground_conductivity": {"units": "S m-1", "long_name": "ground conductivity along each solved bearing"},
    "bearing_ground_relative_permittivity": {
        "units": "1",
        "long_name": "ground relative permittivity along each solved bearing",
    },
    "bearing_solar_zenith_angle": {
        "units": "degree",
        "long_name": "solar zenith angle at the ground along each solved bearing",
        "standard_name": "solar_zenith_angle",
    },
    "bearing_hprime": {"units": "km", "long_name": "Wait-Spies reference height h' along each solved bearing"},
    "bearing_beta": {"units": "km-1", "long_name": "Wait-Spies sharpness beta along each solved bearing"},
}

#: Variables every result file holds (the conventions' minimum).
REQUIRED_VARIABLES: tuple[str, ...] = (
    "range",
    "frequency",
    "altitude",
    "path",
    "ez_amplitude",
    "ez_phase",
    "b_amplitude",
    "receiver_name",
    "receiver_range",
    "receiver_ez_amplitude",
    "receiver_ez_phase",
    "electron_density",
    "collision_frequency",
    "ground_conductivity",
)

#: Variables every coverage file holds (``cavity coverage``; it has latitude and bearing dimensions).
COVERAGE_VARIABLES: tuple[str, ...] = (
    "frequency",
    "latitude",
    "longitude",
    "bearing",
    "range",
    "ez_amplitude",
    "map_range",
    "map_bearing",
    "bearing_ez_amplitude",
    "bearing_ez_phase",
)

#: Global attributes every result file carries.
REQUIRED_ATTRIBUTES: tuple[str, ...] = (
    "title",
    "Conventions",
    "history",
    "source",
    "scenario",
    "cautions",
    "solver_cells",
    "solver_time_steps",
    "solver_cell_r_m",
    "solver_cell_z_m",
    "solver_time_step_s",
    "solver_wall_time_s",
)


@dataclass(frozen=True)
class SolverRecord:
    """The solver's record of a run, stored as the ``solver_*`` global attributes.

    Attributes
    ----------
    cells : int
        Grid cells per path (nr x nz).
    time_steps : int
        Time steps taken (per path).
    cell_r_m, cell_z_m : float
        Cell sizes along range and height, m.
    time_step_s : float
        Time step, s.
    wall_time_s : float
        Seconds spent stepping, all paths together.
    """

    cells: int
    time_steps: int
    cell_r_m: float
    cell_z_m: float
    time_step_s: float
    wall_time_s: float

    def attributes(self) -> dict[str, int | float]:
        return {f"solver_{k}": v for k, v in asdict(self).items()}


# --------------------------------------------------------------------------------------------------
# Complex phasors <-> dB and degrees (the one place where this conversion lives)
# --------------------------------------------------------------------------------------------------


def phasor_to_db_phase(phasor, reference: float, *, unwrap_axis: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Amplitude in dB and phase in degrees of RMS phasors (exp(+j omega t) convention).

    Parameters
    ----------
    phasor : array_like of complex
        RMS phasors, relative to the transmitter current's phase; NaN where not computed.
    reference : float
        Amplitude of 0 dB in the phasor's unit (1e-6 V/m for dB re 1 uV/m, 1e-15 T for dB re 1 fT).
    unwrap_axis : int, optional
        Remove 360 deg jumps along this axis (range), starting from the principal value at its first
        element; None leaves the principal value (-180, 180].

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        ``20 log10(|phasor| / reference)`` (-inf where the phasor is 0) and the phase in degrees.
    """
    z = np.asarray(phasor, dtype=complex)
    with np.errstate(divide="ignore", invalid="ignore"):
        db = 20.0 * np.log10(np.abs(z) / reference)
    phase = np.angle(z)
    if unwrap_axis is not None:
        phase = np.apply_along_axis(_unwrap_finite, unwrap_axis, phase)
    return db, np.degrees(phase)


def _unwrap_finite(phase_rad: np.ndarray) -> np.ndarray:
    """np.unwrap over the finite values of a 1-D array; NaN (not computed) stays NaN in place."""
    out = phase_rad.copy()
    finite = np.isfinite(phase_rad)
    out[finite] = np.unwrap(phase_rad[finite])
    return out


def db_phase_to_phasor(db, phase_deg, reference: float) -> np.ndarray:
    """Inverse of :func:`phasor_to_db_phase`: complex RMS phasors from dB and degrees."""
    return reference * 10.0 ** (np.asarray(db, dtype=float) / 20.0) * np.exp(1j * np.radians(phase_deg))


def _nearest_branch(phase_deg: np.ndarray, target_deg: np.ndarray) -> np.ndarray:
    """Shift each phase by whole turns to lie within 180 deg of ``target_deg``."""
    return phase_deg + 360.0 * np.round((target_deg - phase_deg) / 360.0)


# --------------------------------------------------------------------------------------------------
# Dataset assembly
# --------------------------------------------------------------------------------------------------


def _array(name: str, value, shape: tuple[int, ...], dtype=float, *, allow_nan: bool = False) -> np.ndarray:
    """``value`` as an array of ``shape``; inf is refused, NaN too unless it means "not computed"."""
    array = np.asarray(value, dtype=dtype)
    if array.shape != shape:
        raise ValueError(f"{name} has shape {array.shape}; expected {shape}")
    if np.issubdtype(array.dtype, np.number):
        bad = np.isinf(array) if allow_nan else ~np.isfinite(array)
        if np.any(bad):
            raise ValueError(f"{name} contains {'inf' if allow_nan else 'NaN or inf'} values")
    return array


def assemble_dataset(
    scenario: Scenario,
    *,
    range_m,
    frequency_hz,
    altitude_m,
    path_labels: Sequence[str],
    ez_v_per_m,
    b_t,
    receiver_names: Sequence[str],
    receiver_range_m,
    receiver_ez_v_per_m,
    receiver_b_t,
    electron_density_m3,
    collision_frequency_s,
    ground_conductivity_s_per_m,
    solver: SolverRecord,
    receiver_path=None,
    receiver_bearing_deg=None,
    receiver_latitude_deg=None,
    receiver_longitude_deg=None,
    path_bearing_deg=None,
    ground_relative_permittivity=None,
    solar_zenith_angle_deg=None,
    hprime_km=None,
    beta_per_km=None,
    time_s=None,
    receiver_ez_time_series_v_per_m=None,
    b_radial_t=None,
    ephi_v_per_m=None,
    receiver_b_radial_t=None,
    receiver_ephi_v_per_m=None,
    geomagnetic_field_nt=None,
    geomagnetic_attributes=None,
    receiver_ez_uncertainty_db=None,
) -> xr.Dataset:
    """Build a result Dataset (the file contract) from the solver's plain arrays, SI units in.

    Complex phasors become dB and unwrapped degrees here (:func:`phasor_to_db_phase`); lengths
    become km and frequencies kHz. Dimension sizes: P paths, F frequencies, R ranges, Z altitudes,
    N receivers, T time samples (dimension ``lag``).

    Parameters
    ----------
    scenario : Scenario
        The scenario run: gives ``title`` and the ``scenario`` attribute (its TOML text).
    range_m : (R,) array
        Output ranges, m, increasing.
    frequency_hz : (F,) array
        Frequencies, Hz.
    altitude_m : (Z,) array
        Altitudes of the profile columns, m.
    path_labels : (P,) sequence of str
        One label per path (e.g. "bearing 113.2 deg" or "uniform").
    ez_v_per_m, b_t : (P, F, R) complex arrays
        RMS phasors of Ez (V/m) and of the horizontal flux density B = mu0 Hphi (T) at the ground,
        phase relative to the transmitter current (exp(+j omega t)); NaN beyond a path's own range.
    receiver_names : (N,) sequence of str
    receiver_range_m : (N,) array
        Ground range of each receiver, m.
    receiver_ez_v_per_m, receiver_b_t : (N, F) complex arrays
        RMS phasors at the receivers.
    electron_density_m3, collision_frequency_s : (P, R, Z) arrays
        The ionosphere used along each path (m^-3, s^-1).
    ground_conductivity_s_per_m : (P, R) array
        The ground used along each path (inf for perfect ground).
    solver : SolverRecord
        Grid and timing of the run.
    receiver_path : (N,) int array, optional
        Path of each receiver; default 0 when there is one path. When known, receiver phases are
        put on the branch of that path's unwrapped phase at the receiver's range.
    receiver_bearing_deg, receiver_latitude_deg, receiver_longitude_deg : (N,) arrays, optional
        NaN where a receiver is given by range only.
    path_bearing_deg : (P,) array, optional
        NaN for a path that serves every bearing.
    ground_relative_permittivity, solar_zenith_angle_deg, hprime_km, beta_per_km : (P, R) arrays, optional
        NaN allowed (not defined there).
    time_s : (T,) array, optional
        Sample times of ``receiver_ez_time_series_v_per_m`` ((N, T) array, V/m), given together.
    b_radial_t, ephi_v_per_m : (P, F, R) complex arrays, optional
        Magnetised runs: the radial flux density mu0 Hr (T) and the azimuthal electric field (V/m)
        at the ground; ``receiver_b_radial_t``, ``receiver_ephi_v_per_m`` (N, F) at the receivers.
    geomagnetic_field_nt : (P, R, 3) array, optional
        The geomagnetic field per path and range in the path frame (r, phi, z), nT;
        ``geomagnetic_attributes`` the global attributes naming its model and epoch.

    Returns
    -------
    xarray.Dataset
        With :data:`VARIABLES` metadata and the global attributes of the contract.
    """
    import xarray as xr

    r = _array("range_m", range_m, np.shape(range_m))
    f = _array("frequency_hz", frequency_hz, np.shape(frequency_hz))
    z = _array("altitude_m", altitude_m, np.shape(altitude_m))
    if r.ndim != 1 or f.ndim != 1 or z.ndim != 1:
        raise ValueError("range_m, frequency_hz and altitude_m must be 1-D")
    labels = [str(x) for x in path_labels]
    names = [str(x) for x in receiver_names]
    P, F, R, Z, N = len(labels), f.size, r.size, z.size, len(names)
    ez = _array("ez_v_per_m", ez_v_per_m, (P, F, R), complex, allow_nan=True)
    b = _array("b_t", b_t, (P, F, R), complex, allow_nan=True)
    rx_ez = _array("receiver_ez_v_per_m", receiver_ez_v_per_m, (N, F), complex)
    rx_b = _array("receiver_b_t", receiver_b_t, (N, F), complex)
    rx_range = _array("receiver_range_m", receiver_range_m, (N,))
    ne = _array("electron_density_m3", electron_density_m3, (P, R, Z))
    nu = _array("collision_frequency_s", collision_frequency_s, (P, R, Z))
    sigma = np.asarray(ground_conductivity_s_per_m, dtype=float)
    if sigma.shape != (P, R) or np.any(np.isnan(sigma)) or np.any(sigma <= 0):
        raise ValueError(f"ground_conductivity_s_per_m must be positive with shape {(P, R)}; got {sigma.shape}")

    ez_db, ez_deg = phasor_to_db_phase(ez, EZ_REFERENCE_V_PER_M, unwrap_axis=-1)
    b_db, b_deg = phasor_to_db_phase(b, B_REFERENCE_T, unwrap_axis=-1)
    rx_ez_db, rx_ez_deg = phasor_to_db_phase(rx_ez, EZ_REFERENCE_V_PER_M)
    rx_b_db, rx_b_deg = phasor_to_db_phase(rx_b, B_REFERENCE_T)
    if receiver_path is None and P == 1:
        receiver_path = np.zeros(N, dtype=int)
    if receiver_path is not None:
        rx_path = _array("receiver_path", receiver_path, (N,), int)
        if np.any((rx_path < 0) | (rx_path >= P)):
            raise ValueError(f"receiver_path must lie in 0..{P - 1}")
        for i in range(N):
            for k in range(F):
                p = rx_path[i]
                rx_ez_deg[i, k] = _nearest_branch(rx_ez_deg[i, k], np.interp(rx_range[i], r, ez_deg[p, k]))
                rx_b_deg[i, k] = _nearest_branch(rx_b_deg[i, k], np.interp(rx_range[i], r, b_deg[p, k]))

    data_vars = {
        "path_label": (("path",), np.array(labels, dtype=object)),
        "ez_amplitude": (("path", "frequency", "range"), ez_db),
        "ez_phase": (("path", "frequency", "range"), ez_deg),
        "b_amplitude": (("path", "frequency", "range"), b_db),
        "b_phase": (("path", "frequency", "range"), b_deg),
        "receiver_name": (("receiver",), np.array(names, dtype=object)),
        "receiver_range": (("receiver",), rx_range / 1e3),
        "receiver_ez_amplitude": (("receiver", "frequency"), rx_ez_db),
        "receiver_ez_phase": (("receiver", "frequency"), rx_ez_deg),
        "receiver_b_amplitude": (("receiver", "frequency"), rx_b_db),
        "receiver_b_phase": (("receiver", "frequency"), rx_b_deg),
        "electron_density": (("path", "range", "altitude"), ne),
        "collision_frequency": (("path", "range", "altitude"), nu),
        "ground_conductivity": (("path", "range"), sigma),
    }
    if receiver_ez_uncertainty_db is not None:
        data_vars["receiver_ez_uncertainty"] = (
            ("receiver", "frequency"),
            _array("receiver_ez_uncertainty_db", receiver_ez_uncertainty_db, (N, F), float, allow_nan=True),
        )
    if receiver_path is not None:
        data_vars["receiver_path"] = (("receiver",), rx_path.astype(np.int32))
    optional_receiver = {
        "receiver_bearing": receiver_bearing_deg,
        "receiver_latitude": receiver_latitude_deg,
        "receiver_longitude": receiver_longitude_deg,
    }
    for name, value in optional_receiver.items():
        if value is not None:
            array = np.asarray(value, dtype=float)
            if array.shape != (N,):
                raise ValueError(f"{name} has shape {array.shape}; expected {(N,)}")
            data_vars[name] = (("receiver",), array)
    if path_bearing_deg is not None:
        data_vars["path_bearing"] = (("path",), _array("path_bearing_deg", path_bearing_deg, (P,), allow_nan=True))
    optional_path = {
        "ground_relative_permittivity": ground_relative_permittivity,
        "solar_zenith_angle": solar_zenith_angle_deg,
        "hprime": hprime_km,
        "beta": beta_per_km,
    }
    for name, value in optional_path.items():
        if value is not None:
            data_vars[name] = (("path", "range"), _array(name, value, (P, R), allow_nan=True))
    coords = {
        "path": ("path", np.arange(P, dtype=np.int32)),
        "frequency": ("frequency", f / 1e3),
        "range": ("range", r / 1e3),
        "altitude": ("altitude", z / 1e3),
    }
    if (time_s is None) != (receiver_ez_time_series_v_per_m is None):
        raise ValueError("time_s and receiver_ez_time_series_v_per_m go together")
    if time_s is not None:
        t = _array("time_s", time_s, np.shape(time_s))
        coords["lag"] = ("lag", t)
        data_vars["receiver_ez_time_series"] = (
            ("receiver", "lag"),
            _array("receiver_ez_time_series_v_per_m", receiver_ez_time_series_v_per_m, (N, t.size)),
        )

    extra_fields = (
        ("b_radial", b_radial_t, receiver_b_radial_t, B_REFERENCE_T),
        ("ephi", ephi_v_per_m, receiver_ephi_v_per_m, EZ_REFERENCE_V_PER_M),
    )
    for name, along, at_rx, reference in extra_fields:
        if (along is None) != (at_rx is None):
            raise ValueError(f"{name}: the field along the paths and at the receivers go together")
        if along is None:
            continue
        db, deg = phasor_to_db_phase(_array(name, along, (P, F, R), complex, allow_nan=True), reference, unwrap_axis=-1)
        rx_db, rx_deg = phasor_to_db_phase(
            _array(f"receiver_{name}", at_rx, (N, F), complex, allow_nan=True), reference
        )
        data_vars[f"{name}_amplitude"] = (("path", "frequency", "range"), db)
        data_vars[f"{name}_phase"] = (("path", "frequency", "range"), deg)
        data_vars[f"receiver_{name}_amplitude"] = (("receiver", "frequency"), rx_db)
        data_vars[f"receiver_{name}_phase"] = (("receiver", "frequency"), rx_deg)
    if geomagnetic_field_nt is not None:
        field = _array("geomagnetic_field_nt", geomagnetic_field_nt, (P, R, 3))
        for c, name in enumerate(("r", "phi", "z")):
            data_vars[f"geomagnetic_field_{name}"] = (("path", "range"), field[:, :, c])
    ds = xr.Dataset(data_vars, coords=coords)
    ds.attrs = {
        "title": scenario.title,
        "Conventions": "CF-1.10",
        "history": f"{_now()} cavity {__version__}: simulated {scenario.path or 'a scenario given as text'}",
        "source": f"cavity {__version__}",
        "scenario": scenario.text or scenario.to_toml(),
        "cautions": CAUTIONS,
        "references": REFERENCES,
        **solver.attributes(),
        **(geomagnetic_attributes or {}),
    }
    return apply_metadata(ds)


def _now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def apply_metadata(ds: xr.Dataset) -> xr.Dataset:
    """Set the :data:`VARIABLES` attributes on every variable of ``ds`` (in place; also returned).

    A variable that is not in the table keeps its own attributes but must carry ``units`` (unless it
    holds text) and ``long_name``; otherwise ValueError.
    """
    for name, variable in ds.variables.items():
        meta = VARIABLES.get(str(name))
        if meta is not None:
            variable.attrs.update(meta)
        is_text = variable.dtype.kind in "OSU"
        if "long_name" not in variable.attrs or ("units" not in variable.attrs and not is_text):
            raise ValueError(f"variable {name!r} has no entry in cavity.results.VARIABLES and lacks units/long_name")
    return ds


# --------------------------------------------------------------------------------------------------
# Writing and reading
# --------------------------------------------------------------------------------------------------


def _encoding(ds: xr.Dataset) -> dict[str, dict]:
    encoding: dict[str, dict] = {}
    for name in ds.coords:
        encoding[str(name)] = {"_FillValue": None}
    for name, variable in ds.data_vars.items():
        if variable.dtype.kind in "OSU":
            encoding[str(name)] = {"_FillValue": None}
        else:
            encoding[str(name)] = {"zlib": True, "complevel": 2}
    return encoding


def write_result(ds: xr.Dataset, path: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Write a result Dataset to a netCDF-4 file atomically.

    The file is written under a temporary name in the target folder, then renamed over ``path``: on
    any failure the temporary file is removed and an existing file at ``path`` is left intact. A
    history line is appended.

    Parameters
    ----------
    ds : xarray.Dataset
        A Dataset from :func:`assemble_dataset` (or read by :func:`open_result`); no complex values.
    path : str or os.PathLike
        The file to write.
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    ResultFileError
        The file exists and ``overwrite`` is false; the folder is missing or not writable; the write
        failed.
    """
    target = Path(os.fspath(path)).expanduser()
    folder = target.parent
    if target.is_dir():
        raise ResultFileError(f"{target} is a folder; give a file name such as {target / 'result.nc'}")
    if target.exists() and not overwrite:
        raise ResultFileError(f"{target} already exists; use --overwrite to replace it")
    if not folder.is_dir():
        raise ResultFileError(f"cannot write {target.name}: folder {folder} does not exist")
    complex_vars = [str(n) for n, v in ds.variables.items() if np.iscomplexobj(v.values)]
    if complex_vars:
        raise ValueError(f"complex variables cannot be written ({', '.join(complex_vars)}); use assemble_dataset")
    ds = apply_metadata(ds.copy())
    ds.attrs["history"] = "\n".join(
        line
        for line in (str(ds.attrs.get("history", "")), f"{_now()} cavity {__version__}: written to {target.name}")
        if line
    )
    try:
        with replacing(target, fsync=True) as temporary:
            ds.to_netcdf(temporary, mode="w", format="NETCDF4", engine="netcdf4", encoding=_encoding(ds))
    except PermissionError:
        raise ResultFileError(f"cannot write {target.name}: folder {folder} is not writable") from None
    except OSError as exc:
        raise ResultFileError(f"cannot write {target}: {exc.strerror or exc}") from None
    return target


def open_result(path: str | os.PathLike) -> xr.Dataset:
    """Read a result file written by this tool into memory (the file is closed on return).

    Raises
    ------
    ResultFileError
        One line: the file is missing, unreadable, corrupt, or not a cavity result file (no
        ``source = "cavity ..."`` attribute or missing required variables).
    """
    import xarray as xr

    file = Path(os.fspath(path)).expanduser()
    if not file.exists():
        raise ResultFileError(f"result file {file} not found")
    if file.is_dir():
        raise ResultFileError(f"{file} is a folder, not a result file")
    try:
        with xr.open_dataset(file, engine="netcdf4") as handle:
            ds = handle.load()
    except Exception as exc:  # netCDF4 raises OSError, ValueError, RuntimeError for bad files
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else exc.__class__.__name__
        raise ResultFileError(f"{file} is not a cavity result file (cannot read it as netCDF: {reason})") from None
    source = str(ds.attrs.get("source", ""))
    if not source.startswith("cavity"):
        raise ResultFileError(f"{file} is not a cavity result file (its source attribute is {source!r})")
    coverage = "latitude" in ds.dims and "bearing" in ds.dims
    missing = [name for name in (COVERAGE_VARIABLES if coverage else REQUIRED_VARIABLES) if name not in ds.variables]
    if missing:
        raise ResultFileError(f"{file} is not a cavity result file (missing variables: {', '.join(missing)})")
    return ds
