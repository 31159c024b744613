"""cavity: VLF/ELF earth-ionosphere waveguide predictions with an axisymmetric FDTD solver.

Public API (the CLI calls exactly these):

- :func:`load_scenario` - TOML scenario file -> validated, frozen :class:`~cavity.scenario.Scenario`
- :func:`simulate` - Scenario -> :class:`xarray.Dataset` following the result-file contract
- :func:`open_result` - read a result file written by this tool

Heavy modules (numba kernels, matplotlib, cartopy) are imported on first use, so
``import cavity`` stays fast.
"""

from __future__ import annotations

import os
from typing import TYPE_CHECKING, Any

from cavity.errors import (
    CavityError,
    ResourceError,
    ResultFileError,
    ScenarioError,
    SolverError,
)
from cavity.version import __version__

if TYPE_CHECKING:  # pragma: no cover
    import xarray as xr

    from cavity.scenario import Scenario

__all__ = [
    "CavityError",
    "ResourceError",
    "ResultFileError",
    "ScenarioError",
    "SolverError",
    "__version__",
    "load_scenario",
    "open_result",
    "simulate",
    "sweep",
]


def load_scenario(source: str | os.PathLike) -> Scenario:
    """Load and validate a scenario from a TOML file path (or TOML text); see :mod:`cavity.scenario`."""
    from cavity.scenario import load_scenario as _load

    return _load(source)


def simulate(scenario: Scenario, **kwargs: Any) -> xr.Dataset:
    """Run the waveguide solver for a scenario and return the result dataset; see :mod:`cavity.solve`."""
    from cavity.solve import simulate as _simulate

    return _simulate(scenario, **kwargs)


def open_result(path: str | os.PathLike) -> xr.Dataset:
    """Open a result file written by this tool; see :mod:`cavity.results`."""
    from cavity.results import open_result as _open

    return _open(path)


def sweep(scenario: Scenario, **kwargs: Any) -> xr.Dataset:
    """Solve many variants of a scenario (hours, frequencies) on dask workers; see :mod:`cavity.sweeps`."""
    from cavity.sweeps import sweep as _sweep

    return _sweep(scenario, **kwargs)
