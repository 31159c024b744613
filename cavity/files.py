"""Atomic file writing: the one way every artefact (result, sweep, part, figure, table) reaches disk.

A file is written under a temporary name in its target folder and renamed over the target
(:func:`os.replace`, atomic on one file system), so a reader sees the old file or the new one, never
half of one; on any failure the temporary file is removed and an existing target is left intact.
New files get the usual permissions (0666 less the umask), not the private ones of a temporary file.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

from cavity.errors import CavityError

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

#: Figure formats by file suffix.
FIGURE_FORMATS = {".png": "png", ".pdf": "pdf"}


def _default_mode() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


@contextmanager
def replacing(target: str | os.PathLike, *, suffix: str = ".tmp", fsync: bool = False) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; on a normal exit it replaces ``target`` atomically.

    Parameters
    ----------
    target : str or os.PathLike
        The file to write (its folder must exist).
    suffix : str
        Suffix of the temporary name (some writers choose the format from it).
    fsync : bool
        Flush the temporary file to disk before the rename (result files).

    Raises
    ------
    OSError
        The folder is missing or not writable, or the writer failed; the temporary file is removed.
    """
    path = Path(os.fspath(target))
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix, dir=path.parent)
    os.close(fd)
    tmp = Path(name)
    try:
        yield tmp
        if fsync:
            with open(tmp, "rb") as handle:
                os.fsync(handle.fileno())
        os.chmod(tmp, _default_mode())
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def _check_output(path: Path) -> None:
    if path.is_dir():
        raise CavityError(f"output = {str(path)!r} is a folder; give a file name")
    if not path.parent.exists():
        raise CavityError(f"output folder {str(path.parent)!r} does not exist")


def write_text(text: str, output: str | os.PathLike) -> Path:
    """Write a text file atomically (UTF-8, newlines as given); returns the path written."""
    path = Path(os.fspath(output)).expanduser()
    _check_output(path)
    with replacing(path) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
    return path


def check_figure_output(output: str | os.PathLike) -> tuple[Path, str]:
    """The figure's path and format (from its suffix), or a one-line error naming the allowed ones."""
    path = Path(os.fspath(output)).expanduser()
    fmt = FIGURE_FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise CavityError(f"output = {str(path)!r} has suffix {path.suffix or '(none)'!r}; write .png or .pdf")
    if path.is_dir():
        raise CavityError(f"output = {str(path)!r} is a folder; give a file name ending in .png or .pdf")
    if not path.parent.exists():
        raise CavityError(f"output folder {str(path.parent)!r} does not exist")
    return path, fmt


def save_figure(fig: Figure, output: str | os.PathLike, *, dpi: int = 150) -> Path:
    """Write a matplotlib figure to PNG or PDF atomically; returns the path written."""
    path, fmt = check_figure_output(output)
    with replacing(path, suffix=path.suffix) as tmp:
        fig.savefig(tmp, format=fmt, dpi=dpi)
    return path
