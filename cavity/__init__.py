"""cavity: VLF/ELF earth-ionosphere waveguide predictions with an axisymmetric FDTD solver.

Public API (the CLI calls exactly these):

- :func:`load_scenario` - TOML scenario file -> validated, frozen :class:`~cavity.scenario.Scenario`
- :func:`simulate` - Scenario -> :class:`xarray.Dataset` following the result-file contract
- :func:`open_result` - read a result file written by this tool

Heavy modules (numba kernels, matplotlib, cartopy) are imported on first use, so
``import cavity`` stays fast.
"""

from cavity.errors import (
    CavityError,
    ResourceError,
    ResultFileError,
    ScenarioError,
    SolverError,
)

from cavity.version import __version__

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


def load_scenario(source):
    """Load and validate a scenario from a TOML file path (or TOML text); see :mod:`cavity.scenario`."""
    from cavity.scenario import load_scenario as _load

    return _load(source)


def simulate(scenario, **kwargs):
    """Run the waveguide solver for a scenario and return the result dataset; see :mod:`cavity.solve`."""
    from cavity.solve import simulate as _simulate

    return _simulate(scenario, **kwargs)


def open_result(path):
    """Open a result file written by this tool; see :mod:`cavity.results`."""
    from cavity.results import open_result as _open

    return _open(path)


def sweep(scenario, **kwargs):
    """Solve many variants of a scenario (hours, frequencies) on dask workers; see :mod:`cavity.sweeps`."""
    from cavity.sweeps import sweep as _sweep

    return _sweep(scenario, **kwargs)
