"""Measured or modelled profiles from files: read, validate, sample, write.

Two formats are read:

- CSV text with a header line naming the columns ``altitude_km``, ``electron_density_m3`` and
  ``collision_frequency_s`` (other columns are ignored); lines starting with ``#`` and blank lines
  are skipped.
- netCDF with the variables ``electron_density`` and ``collision_frequency`` on an ``altitude``
  coordinate whose ``units`` attribute is km or m (densities may say cm-3; absent units on the two
  variables mean m-3 and s-1). The files written by :func:`write_profile` read back unchanged.

Every problem raises :class:`~profiles.errors.ProfileError` with a one-line message naming the
file, the line or level, the field, the value and the allowed range.
"""

from __future__ import annotations

import csv
import datetime as _dt
import difflib
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from profiles.errors import ProfileError, check_range
from profiles.exponential import ALTITUDE_RANGE_M, profile_dataset

#: CSV column names, in the order written by :func:`write_profile`.
CSV_COLUMNS = ("altitude_km", "electron_density_m3", "collision_frequency_s")
MIN_LEVELS = 3
ALTITUDE_RANGE_KM = (ALTITUDE_RANGE_M[0] / 1e3, ALTITUDE_RANGE_M[1] / 1e3)

_NETCDF_MAGIC = (b"CDF\x01", b"CDF\x02", b"CDF\x05", b"\x89HDF\r\n\x1a\n")
_ALTITUDE_UNITS = {
    "km": 1.0, "kilometer": 1.0, "kilometers": 1.0, "kilometre": 1.0, "kilometres": 1.0,
    "m": 1e-3, "meter": 1e-3, "meters": 1e-3, "metre": 1e-3, "metres": 1e-3,
}  # fmt: skip
_DENSITY_UNITS = {
    "m-3": 1.0, "m^-3": 1.0, "m**-3": 1.0, "1/m3": 1.0, "1/m^3": 1.0, "m3-1": 1.0,
    "cm-3": 1e6, "cm^-3": 1e6, "cm**-3": 1e6, "1/cm3": 1e6, "1/cm^3": 1e6,
}  # fmt: skip
_COLLISION_UNITS = {"s-1": 1.0, "s^-1": 1.0, "s**-1": 1.0, "1/s": 1.0, "hz": 1.0}


def read_profile(path) -> xr.Dataset:
    """Read and validate an altitude profile from a CSV or netCDF file.

    The format is recognised from the file's first bytes (netCDF classic or netCDF-4/HDF5
    signature), otherwise the file is read as CSV text.

    Parameters
    ----------
    path : str or os.PathLike
        The file.

    Returns
    -------
    xarray.Dataset
        The layout of :func:`profiles.wait_spies_profile`: coordinate ``altitude`` (km) and
        variables ``electron_density`` (m-3) and ``collision_frequency`` (s-1); attribute ``source``
        is the file name.

    Raises
    ------
    ProfileError
        Unreadable or empty file, missing columns or variables, non-numeric or non-finite values,
        altitudes outside 0-500 km or not strictly increasing, negative densities, collision
        frequencies not above zero, fewer than 3 levels.
    """
    path = Path(path)
    try:
        with open(path, "rb") as handle:
            head = handle.read(8)
    except FileNotFoundError:
        raise ProfileError(f"profile file {path} does not exist") from None
    except IsADirectoryError:
        raise ProfileError(f"profile file {path} is a folder, not a file") from None
    except OSError as exc:
        raise ProfileError(f"profile file {path} cannot be read: {exc.strerror or exc}") from None
    if not head:
        raise ProfileError(
            f"profile file {path} is empty (expected a CSV header {','.join(CSV_COLUMNS)} or a netCDF file)"
        )
    if head.startswith(_NETCDF_MAGIC):
        altitude_km, ne, nu, where = _read_netcdf(path)
    else:
        altitude_km, ne, nu, where = _read_csv(path)
    _validate(path.name, altitude_km, ne, nu, where)
    attrs = {
        "title": f"Ionosphere profile read from {path.name}",
        "profile_kind": "file",
        "source": path.name,
    }
    return profile_dataset(altitude_km, ne, nu, attrs)


def _read_csv(path: Path):
    """Parse the CSV form; returns the three columns and a function naming the line of level i."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise ProfileError(f"profile file {path} is neither UTF-8 CSV text nor netCDF") from None
    except OSError as exc:
        raise ProfileError(f"profile file {path} cannot be read: {exc.strerror or exc}") from None
    numbered = [
        (number, line)
        for number, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not numbered:
        raise ProfileError(f"profile file {path} has no header or data (expected the header {','.join(CSV_COLUMNS)})")
    rows = list(csv.reader(line for _, line in numbered))
    header = [name.strip() for name in rows[0]]
    header_line = numbered[0][0]
    duplicates = sorted({name for name in header if header.count(name) > 1 and name})
    if duplicates:
        raise ProfileError(f"{path.name} line {header_line}: column {duplicates[0]!r} appears more than once")
    missing = [name for name in CSV_COLUMNS if name not in header]
    if missing:
        hints = []
        for name in missing:
            close = difflib.get_close_matches(name, header, n=1)
            if close:
                hints.append(f"{close[0]!r} -> {name!r}?")
        hint = f" (did you mean {', '.join(hints)})" if hints else ""
        raise ProfileError(
            f"{path.name} line {header_line}: missing column(s) {', '.join(missing)}; "
            f"the header must name {','.join(CSV_COLUMNS)}{hint}"
        )
    index = [header.index(name) for name in CSV_COLUMNS]
    line_numbers = [number for number, _ in numbered[1:]]
    values = np.empty((len(rows) - 1, 3))
    for r, (row, number) in enumerate(zip(rows[1:], line_numbers)):
        if len(row) != len(header):
            raise ProfileError(
                f"{path.name} line {number}: {len(row)} fields, but the header names {len(header)} columns"
            )
        for c, (i, name) in enumerate(zip(index, CSV_COLUMNS)):
            cell = row[i].strip()
            try:
                values[r, c] = float(cell)
            except ValueError:
                raise ProfileError(f"{path.name} line {number}: {name} = {cell!r} is not a number") from None

    def where(level: int) -> str:
        return f"line {line_numbers[level]}"

    return values[:, 0], values[:, 1], values[:, 2], where


def _units_factor(path: Path, name: str, units, table: dict, default: str | None) -> float:
    if units is None:
        if default is None:
            raise ProfileError(f"{path.name}: variable {name} has no units attribute (allowed: km or m)")
        units = default
    key = str(units).strip().lower().replace(" ", "")
    if key not in table:
        allowed = ", ".join(dict.fromkeys(k for k in table if k.isascii()))
        raise ProfileError(f"{path.name}: {name} units = {units!r} is not understood (allowed: {allowed})")
    return table[key]


def _read_netcdf(path: Path):
    """Read the netCDF form; returns the three arrays (SI except km altitude) and a level namer."""
    try:
        with xr.open_dataset(path, decode_times=False) as ds:
            ds.load()
    except Exception as exc:  # netCDF4/HDF5 raise assorted types for corrupt files
        message = str(exc).strip().splitlines()[0] if str(exc).strip() else exc.__class__.__name__
        raise ProfileError(f"profile file {path} cannot be read as netCDF: {message}") from None
    names = {str(name) for name in ds.variables}
    missing = [name for name in ("altitude", "electron_density", "collision_frequency") if name not in names]
    if missing:
        hints = [
            f"{close[0]!r} -> {name!r}?"
            for name in missing
            for close in [difflib.get_close_matches(name, sorted(names), n=1)]
            if close
        ]
        hint = f" (did you mean {', '.join(hints)})" if hints else ""
        raise ProfileError(f"{path.name}: missing variable(s) {', '.join(missing)}{hint}")
    altitude = ds["altitude"]
    if altitude.ndim != 1:
        raise ProfileError(f"{path.name}: altitude must be 1-D, it has dimensions {altitude.dims}")
    arrays = []
    for name in ("electron_density", "collision_frequency"):
        var = ds[name].squeeze(drop=True)
        if var.dims != altitude.dims:
            raise ProfileError(
                f"{path.name}: {name} has dimensions {ds[name].dims}; a profile needs it on {altitude.dims} "
                "only (select a single column first)"
            )
        arrays.append(var)
    scale_alt = _units_factor(path, "altitude", altitude.attrs.get("units"), _ALTITUDE_UNITS, None)
    scale_ne = _units_factor(path, "electron_density", arrays[0].attrs.get("units"), _DENSITY_UNITS, "m-3")
    scale_nu = _units_factor(path, "collision_frequency", arrays[1].attrs.get("units"), _COLLISION_UNITS, "s-1")
    try:
        altitude_km = np.asarray(altitude.values, dtype=float) * scale_alt
        ne = np.asarray(arrays[0].values, dtype=float) * scale_ne
        nu = np.asarray(arrays[1].values, dtype=float) * scale_nu
    except (TypeError, ValueError):
        raise ProfileError(f"{path.name}: altitude, electron_density and collision_frequency must be numeric") from None

    def where(level: int) -> str:
        return f"level {level}"

    return altitude_km, ne, nu, where


def _validate(name: str, altitude_km, ne, nu, where) -> None:
    """Check a profile's three columns; ``where(i)`` names level i in messages."""
    if len(altitude_km) < MIN_LEVELS:
        raise ProfileError(f"{name} has {len(altitude_km)} levels; at least {MIN_LEVELS} are needed")
    checks = (
        ("altitude_km", altitude_km, ALTITUDE_RANGE_KM[0], ALTITUDE_RANGE_KM[1], "km", False),
        ("electron_density_m3", ne, 0.0, np.inf, "m-3", False),
        ("collision_frequency_s", nu, 0.0, np.inf, "s-1", True),
    )
    for field, values, low, high, units, low_open in checks:
        for level, value in enumerate(values):
            try:
                check_range(field, value, low, high, units, low_open=low_open)
            except ProfileError as exc:
                raise ProfileError(f"{name} {where(level)}: {exc}") from None
    steps = np.diff(altitude_km)
    if np.any(steps <= 0):
        level = int(np.argmax(steps <= 0)) + 1
        raise ProfileError(
            f"{name} {where(level)}: altitude_km = {altitude_km[level]:g} is not above the previous level "
            f"{altitude_km[level - 1]:g} km (altitudes must be strictly increasing)"
        )


def _profile_altitude_km(profile: xr.Dataset) -> np.ndarray:
    for name in ("altitude", "electron_density", "collision_frequency"):
        if name not in profile.variables:
            raise ProfileError(f"profile dataset has no {name} variable (expected the layout of wait_spies_profile)")
    altitude = profile["altitude"]
    scale = _ALTITUDE_UNITS.get(str(altitude.attrs.get("units", "km")).strip().lower())
    if scale is None:
        raise ProfileError(
            f"profile altitude units = {altitude.attrs.get('units')!r} is not understood (allowed: km or m)"
        )
    return np.asarray(altitude.values, dtype=float) * scale


def sample_profile(profile: xr.Dataset, altitude_m) -> tuple[np.ndarray, np.ndarray]:
    """Electron density and collision frequency of a profile Dataset at arbitrary altitudes.

    Both quantities vary roughly exponentially with height, so they are interpolated linearly in
    their logarithm between levels (an interval with a zero density at either end is interpolated
    linearly instead, so zero density stays zero). Outside the profile's levels:

    - above the top level both are held at the top value (the wave hardly reaches there);
    - below the bottom level the electron density is zero (no ionisation given, none assumed) and
      the collision frequency continues the log-linear trend of the two lowest levels, as collisions
      keep increasing toward the ground with air density.

    Parameters
    ----------
    profile : xarray.Dataset
        A profile in the layout of :func:`profiles.wait_spies_profile` (altitude in km or m).
    altitude_m : array_like
        Altitudes, m (0-500 km), any shape.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Electron density (m^-3) and collision frequency (s^-1) with the shape of ``altitude_m``.
    """
    z = _profile_altitude_km(profile)
    ne_levels = check_range("electron_density", profile["electron_density"].values, 0.0, np.inf, "m-3")
    nu_levels = check_range(
        "collision_frequency", profile["collision_frequency"].values, 0.0, np.inf, "s-1", low_open=True
    )
    if z.ndim != 1 or z.size < 2 or ne_levels.shape != z.shape or nu_levels.shape != z.shape:
        raise ProfileError("profile dataset must hold 1-D electron_density and collision_frequency on altitude")
    if np.any(np.diff(z) <= 0):
        raise ProfileError("profile dataset altitudes must be strictly increasing")
    q = check_range("altitude_m", altitude_m, *ALTITUDE_RANGE_M, "m") / 1e3

    idx = np.clip(np.searchsorted(z, q, side="right") - 1, 0, z.size - 2)
    t = (q - z[idx]) / (z[idx + 1] - z[idx])  # < 0 below the bottom, > 1 above the top

    log_nu = np.log(nu_levels)
    nu = np.exp(log_nu[idx] + np.minimum(t, 1.0) * (log_nu[idx + 1] - log_nu[idx]))
    nu = np.where(t >= 1.0, nu_levels[idx + 1], np.where(t == 0.0, nu_levels[idx], nu))

    a, b = ne_levels[idx], ne_levels[idx + 1]
    t_in = np.clip(t, 0.0, 1.0)
    positive = (a > 0) & (b > 0)
    with np.errstate(divide="ignore"):
        log_a = np.log(np.where(positive, a, 1.0))
        log_b = np.log(np.where(positive, b, 1.0))
    ne = np.where(positive, np.exp(log_a + t_in * (log_b - log_a)), a + t_in * (b - a))
    ne = np.where(t_in >= 1.0, b, np.where(t_in <= 0.0, a, ne))  # level values exactly at levels
    ne = np.where(q < z[0], 0.0, ne)
    return ne, nu


def sampled_reflection_height_m(profile: xr.Dataset, frequency_hz) -> np.ndarray:
    """Lowest altitude where a profile's conductivity parameter omega_p^2 / nu reaches 2 pi f, in m.

    The same criterion as :func:`profiles.reflection_height_m` (Wait and Spies 1964), found
    numerically for any profile: omega_r is evaluated with :func:`sample_profile` on the profile's
    levels refined to 10 m steps and interpolated log-linearly at the first upward crossing (exact
    for an exponential profile). If omega_r already exceeds 2 pi f at the bottom level, the bottom
    level is returned (the density is taken as zero below it); if it never reaches 2 pi f, NaN.

    Parameters
    ----------
    profile : xarray.Dataset
        A profile in the layout of :func:`profiles.wait_spies_profile`.
    frequency_hz : array_like
        Wave frequencies, Hz (> 0).

    Returns
    -------
    numpy.ndarray
        Heights, m, with the shape of ``frequency_hz``.
    """
    from profiles.exponential import plasma_frequency_squared

    frequency = check_range("frequency_hz", frequency_hz, 0.0, np.inf, "Hz", low_open=True)
    z_levels = _profile_altitude_km(profile)
    steps = [np.arange(lo, hi, 0.01) for lo, hi in zip(z_levels[:-1], z_levels[1:])]
    z_km = np.concatenate(steps + [z_levels[-1:]])
    ne, nu = sample_profile(profile, z_km * 1e3)
    omega_r = plasma_frequency_squared(ne) / nu
    heights = np.full(frequency.shape, np.nan)
    for i, f in np.ndenumerate(frequency):
        omega = 2.0 * np.pi * f
        above = np.flatnonzero(omega_r >= omega)
        if above.size == 0:
            continue
        k = above[0]
        if k == 0:
            heights[i] = z_km[0]
            continue
        lo, hi = omega_r[k - 1], omega_r[k]
        if lo > 0:
            t = np.log(omega / lo) / np.log(hi / lo)
        else:
            t = (omega - lo) / (hi - lo)
        heights[i] = z_km[k - 1] + t * (z_km[k] - z_km[k - 1])
    return heights * 1e3


def write_profile(profile: xr.Dataset, path, overwrite: bool = False) -> Path:
    """Write a profile Dataset to CSV (``.csv``) or netCDF (``.nc``) so that :func:`read_profile` reads it back.

    The file is written under a temporary name in the same folder and then renamed, so an existing
    file is never left half-written.

    Parameters
    ----------
    profile : xarray.Dataset
        A profile in the layout of :func:`profiles.wait_spies_profile`.
    path : str or os.PathLike
        Output file; the suffix chooses the format.
    overwrite : bool
        Replace an existing file (otherwise that is an error).

    Returns
    -------
    pathlib.Path
        The path written.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".nc"):
        raise ProfileError(f"output = {str(path)!r} has suffix {suffix or '(none)'!r} (allowed: .csv, .nc)")
    if path.exists() and not overwrite:
        raise ProfileError(f"output = {str(path)!r} exists already (allow overwrite to replace it)")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise ProfileError(f"output folder {str(folder)!r} does not exist")
    altitude_km = _profile_altitude_km(profile)
    ne = np.asarray(profile["electron_density"].values, dtype=float)
    nu = np.asarray(profile["collision_frequency"].values, dtype=float)

    def write_csv(tmp: str) -> None:
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.write(f"# {profile.attrs.get('title', 'ionosphere profile')}\n")
            if "source" in profile.attrs:
                handle.write(f"# source: {profile.attrs['source']}\n")
            handle.write(",".join(CSV_COLUMNS) + "\n")
            for row in zip(altitude_km, ne, nu):
                handle.write(f"{row[0]:.6g},{row[1]:.9e},{row[2]:.9e}\n")

    def write_netcdf(tmp: str) -> None:
        out = profile_dataset(altitude_km, ne, nu, profile.attrs)
        stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
        history = str(profile.attrs.get("history", "")).strip()
        out.attrs["Conventions"] = "CF-1.10"
        out.attrs["history"] = (history + "\n" if history else "") + f"{stamp} written by profiles.write_profile"
        encoding: dict[str, dict[str, Any]] = {
            "altitude": {"_FillValue": None},
            "electron_density": {"_FillValue": None, "zlib": True, "complevel": 2},
            "collision_frequency": {"_FillValue": None, "zlib": True, "complevel": 2},
        }
        out.to_netcdf(tmp, format="NETCDF4", engine="netcdf4", encoding=encoding)

    atomic_write(path, write_csv if suffix == ".csv" else write_netcdf)
    return path


def atomic_write(path, writer) -> None:
    """Call ``writer(temporary_path)`` for a temporary file beside ``path``, then rename it to ``path``.

    The rename (:func:`os.replace`) is atomic on one file system, so readers see either the old
    file or the complete new one; the temporary file is removed if ``writer`` fails.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent if str(path.parent) else ".")
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    try:
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp's private 0600 would otherwise survive the rename
        writer(tmp)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
