"""The parts store of a sweep: finished points and path solves kept on disk so a sweep resumes."""

from __future__ import annotations

import dataclasses
import logging
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from cavity.files import replacing
from cavity.sweeps.points import SweepPoint, one_line
from cavity.version import __version__

if TYPE_CHECKING:  # pragma: no cover
    from cavity.scenario import Scenario

log = logging.getLogger(__name__)

#: Suffix of the default parts folder beside the combined file.
PARTS_SUFFIX = ".parts"


# --------------------------------------------------------------------------------------------------
# Parts folder
# --------------------------------------------------------------------------------------------------


def default_parts_dir(output) -> Path:
    """The parts folder of a combined file: ``OUT.nc.parts`` beside it."""
    out = Path(os.fspath(output)).expanduser()
    return out.with_name(out.name + PARTS_SUFFIX)


def part_path(parts_dir: Path, point: SweepPoint) -> Path:
    """Where a finished point is kept in the parts folder."""
    return parts_dir / f"{point.key}.nc"


#: Subfolder of the parts folder that keeps each distinct path solve, by its key.
SOLVES_SUBDIR = "path-solves"
_SOLUTION_ARRAYS = (
    "range_m",
    "ez",
    "b",
    "receiver_ez",
    "receiver_b",
    "electron_density",
    "collision_frequency",
    "ez_uncertainty_db",
    "receiver_ez_uncertainty_db",
    "b_radial",  # this and the next three: with a geomagnetic field
    "ephi",
    "receiver_b_radial",
    "receiver_ephi",
)
_ENGINE_ARRAYS = ("range_m", "frequencies_hz", "ez", "hphi", "probe_ranges_m")


def _solution_path(parts_dir: Path, key: str) -> Path:
    return parts_dir / SOLVES_SUBDIR / f"{key}.npz"


def save_solution(parts_dir: Path, key: str, sol) -> Path:
    """Keep one path solve (a :class:`cavity.solve.PathSolution`) as ``path-solves/KEY.npz``, atomically.

    Plain arrays and a JSON record (no pickle), so that a resumed or widened sweep takes the solve
    from disk instead of solving it again. The path model is not stored: every point that uses the
    solve supplies its own.
    """
    import json

    if sol.engine.time_s is not None:
        raise ValueError("a solve with receiver time series is not kept (sweeps switch them off)")
    target = _solution_path(parts_dir, key)
    target.parent.mkdir(parents=True, exist_ok=True)
    arrays = {f"sol_{n}": getattr(sol, n) for n in _SOLUTION_ARRAYS if getattr(sol, n) is not None}
    arrays.update({f"eng_{n}": getattr(sol.engine, n) for n in _ENGINE_ARRAYS})
    record = {
        "version": __version__,
        "key": key,
        "plan": dataclasses.asdict(sol.engine.plan),
        "steps": sol.engine.steps,
        "wall_time_s": sol.engine.wall_time_s,
        "converged": sol.engine.converged,
        "notes": list(sol.engine.notes),
        "engine_fit_error": sol.engine_fit_error,
    }
    with replacing(target, suffix=".npz") as tmp, open(tmp, "wb") as handle:
        np.savez(handle, record=np.array(json.dumps(record)), **arrays)
    return target


def load_solution(parts_dir: Path, key: str, path):
    """A path solve kept by :func:`save_solution` for this key and tool version, on ``path``; else None."""
    import json

    from cavity.fdtd.engine import EngineResult
    from cavity.fdtd.grid import GridPlan
    from cavity.solve import PathSolution

    file = _solution_path(parts_dir, key)
    if not file.is_file():
        return None
    try:
        with np.load(file, allow_pickle=False) as data:
            record = json.loads(str(data["record"]))
            if record.get("version") != __version__ or record.get("key") != key:
                return None
            arrays: dict[str, Any] = {
                n: data[f"sol_{n}"] if f"sol_{n}" in data.files else None for n in _SOLUTION_ARRAYS
            }
            engine = EngineResult(
                plan=GridPlan(**record["plan"]),
                steps=int(record["steps"]),
                wall_time_s=float(record["wall_time_s"]),
                converged=bool(record["converged"]),
                notes=list(record["notes"]),
                **{n: data[f"eng_{n}"] for n in _ENGINE_ARRAYS},
            )
            return PathSolution(path=path, engine=engine, engine_fit_error=float(record["engine_fit_error"]), **arrays)
    except (OSError, ValueError, KeyError, TypeError) as exc:  # unreadable or from another layout
        log.warning("ignoring kept path solve %s (%s)", file.name, one_line(exc))
        return None


def load_part(path: Path, variant: Scenario):
    """A finished part that belongs to this point (same scenario text, same tool version), or None."""
    from cavity.errors import ResultFileError
    from cavity.results import open_result

    if not path.is_file():
        return None
    try:
        ds = open_result(path)
    except ResultFileError as exc:
        log.warning("ignoring unreadable part %s (%s)", path.name, exc)
        return None
    if ds.attrs.get("scenario") != variant.text or ds.attrs.get("source") != f"cavity {__version__}":
        log.info("part %s belongs to another scenario or version; solving it again", path.name)
        return None
    return ds


def kept_parts(parts_dir, points, variants) -> tuple[Path | None, dict]:
    """Open (create) the parts folder and find the points already solved there.

    Returns the folder (None without one) and {point: part file} for every point whose kept part
    still matches its scenario; those are read again, one at a time, when combining.
    """
    if parts_dir is None:
        return None, {}
    folder = Path(os.fspath(parts_dir)).expanduser()
    folder.mkdir(parents=True, exist_ok=True)
    found = {p: part_path(folder, p) for p in points if load_part(part_path(folder, p), variants[p]) is not None}
    return folder, found
