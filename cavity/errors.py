"""Typed exceptions of the library; only the CLI turns them into one-line messages."""


class CavityError(Exception):
    """Base class of every error the tool raises on purpose."""


class ScenarioError(CavityError):
    """A scenario file or value is malformed, unknown or out of range."""


class ResultFileError(CavityError):
    """A result file is missing, corrupt or not written by this tool."""


class SolverError(CavityError):
    """The time-domain solver cannot start or stopped on an unstable run."""


class ResourceError(CavityError):
    """A run would not fit in the machine (memory, disk)."""
