"""Shared pieces of the commands: error translation, signals, output paths, progress bars.

Every command's callback is wrapped in :func:`friendly_errors`, which is where a failure becomes ONE
line on stderr and a non-zero exit code:

============================================  =========  ==========================================
what happened                                 exit code  message
============================================  =========  ==========================================
the library refused an input or a run         1          the library's one-line message
(CavityError, ProfileError)
a file could not be read or written (OSError)  1          the system's reason and the file name
out of memory (MemoryError)                   1          a hint to use a coarser cell
Ctrl-C (SIGINT)                               130        "interrupted by SIGINT (Ctrl-C) ..."
SIGTERM (kill, a batch system's time limit)   143        "interrupted by SIGTERM ..."
a bug (any other exception)                   1          "internal error (Type: text) ..."; the full
                                                         traceback with CAVITY_TRACEBACK=1
============================================  =========  ==========================================

Results are written under a temporary name and renamed (:func:`cavity.results.write_result`), so an
interrupted command leaves either the complete new file or the old one, never a part of either.
Every SIGINT/SIGTERM raises again, even while the command unwinds: the first one can be lost when it
lands in Python code called back from C (numba compiling and writing its cache runs such callbacks,
and Python ignores exceptions raised there), and the user's second Ctrl-C must then still work. A
second signal during clean-up may leave a hidden temporary file beside the target, never a damaged
target: the rename is atomic.
"""

from __future__ import annotations

import contextlib
import functools
import logging
import os
import signal
import sys
import threading
from pathlib import Path

import click

from cavity.errors import CavityError
from profiles.errors import ProfileError

#: Exit codes after a signal, the shell's convention 128 + signal number.
EXIT_SIGINT = 128 + int(signal.SIGINT)  # 130
EXIT_SIGTERM = 128 + int(signal.SIGTERM)  # 143

#: Set this environment variable to 1 to see the traceback of an internal error.
TRACEBACK_VARIABLE = "CAVITY_TRACEBACK"

#: Help text of every command's ``--overwrite`` flag (the wording the tests look for).
OVERWRITE_HELP = "Replace an existing output file; without it an existing file is refused and left untouched."

_SIGNAL_TEXT = {int(signal.SIGINT): "SIGINT (Ctrl-C)", int(signal.SIGTERM): "SIGTERM"}


class Interrupted(KeyboardInterrupt):
    """Raised in the main thread by SIGINT or SIGTERM while a command runs.

    A subclass of KeyboardInterrupt, so library code that catches ``Exception`` lets it through and
    ``finally`` blocks (temporary-file removal) run on the way out.
    """

    def __init__(self, signum: int):
        super().__init__(f"interrupted by {_SIGNAL_TEXT.get(signum, f'signal {signum}')}")
        self.signum = signum


def one_line(exc: BaseException) -> str:
    """The first line of an exception's message (messages are one line by design)."""
    text = str(exc).strip() or exc.__class__.__name__
    return text.replace("\r", "\n").split("\n")[0]  # not splitlines(): U+2028 in a name is no line end


@contextlib.contextmanager
def _signals_as_exceptions():
    """Turn SIGTERM (and SIGINT, unless the caller ignores it) into :class:`Interrupted` meanwhile.

    Handlers can only be installed from the main thread; elsewhere (a command called from a worker
    thread) this does nothing. The previous handlers come back on exit.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise Interrupted(signum)

    previous = {}
    for sig in (signal.SIGINT, signal.SIGTERM):
        current = signal.getsignal(sig)
        if current is signal.SIG_IGN:  # e.g. SIGINT under nohup or '&': respect it
            continue
        previous[sig] = current
        signal.signal(sig, handler)
    try:
        yield
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old if old is not None else signal.SIG_DFL)


def friendly_errors(func):
    """Run a command's callback; turn failures into one line on stderr and a non-zero exit code.

    The table in this module's docstring lists the cases. ``click`` exceptions (usage errors,
    ``ClickException`` raised by the command itself) pass through unchanged.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            with _signals_as_exceptions():
                return func(*args, **kwargs)
        except (click.exceptions.ClickException, click.exceptions.Exit, click.exceptions.Abort):
            raise
        except (CavityError, ProfileError) as exc:
            raise click.ClickException(one_line(exc)) from None
        except KeyboardInterrupt as exc:
            signum = getattr(exc, "signum", int(signal.SIGINT))
            what = _SIGNAL_TEXT.get(signum, f"signal {signum}")
            click.echo(
                f"Error: interrupted by {what}; the command did not finish "
                "(files are written whole or not at all: nothing partial was left)",
                err=True,
            )
            sys.exit(128 + signum)
        except MemoryError:
            raise click.ClickException(
                "out of memory; use a coarser solver.cell_m or a shorter solver.max_range_km "
                "(cavity inspect shows the memory a run needs)"
            ) from None
        except OSError as exc:
            where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
            raise click.ClickException(f"{exc.strerror or one_line(exc)}{where}") from None
        except Exception as exc:  # a bug: one line for the user, the traceback on request
            if os.environ.get(TRACEBACK_VARIABLE, "") not in ("", "0"):
                raise
            raise click.ClickException(
                f"internal error ({exc.__class__.__name__}: {one_line(exc)}); please report it with "
                f"the command and scenario (set {TRACEBACK_VARIABLE}=1 to see the traceback)"
            ) from None

    return wrapper


def check_output_file(path, overwrite: bool, *, what: str = "output file") -> Path:
    """Refuse an output path BEFORE the work that fills it starts; return it as a Path.

    Raises ``click.ClickException`` (one line) when ``path`` is a folder, exists and ``overwrite`` is
    false, its folder does not exist, or its folder is not writable (tested by creating and removing
    a temporary file there, which also catches read-only file systems and root-owned folders).
    """
    target = Path(os.fspath(path)).expanduser()
    folder = target.parent
    if target.is_dir():
        raise click.ClickException(f"{what} {target} is a folder; give a file name such as {target / 'result.nc'}")
    if target.exists() and not overwrite:
        raise click.ClickException(f"{what} {target} already exists; use --overwrite to replace it")
    if not folder.exists():
        raise click.ClickException(f"cannot write {what} {target}: folder {folder} does not exist")
    if not folder.is_dir():
        raise click.ClickException(f"cannot write {what} {target}: {folder} is a file, not a folder")
    import tempfile

    try:
        with tempfile.NamedTemporaryFile(dir=folder, prefix=f".{target.name}.", suffix=".probe"):
            pass
    except OSError as exc:
        raise click.ClickException(
            f"cannot write {what} {target}: folder {folder} is not writable ({exc.strerror or one_line(exc)})"
        ) from None
    return target


#: The progress bar drawing on stderr, if any: log lines start on a new line while it is open.
_OPEN_BAR: dict = {"bar": None}


def time_left_s(t0: float, f0: float, t: float, f: float) -> float | None:
    """Seconds left from the rate measured so far: (t - t0) / (f - f0) * (1 - f).

    ``f`` is a fraction of the run's cost (the engine reports columns stepped over the cost model's
    total), so the rate so far holds for the rest; t0, f0 is the first report (after start-up and
    compiling, which the rest will not repeat). None until there is a rate to go on.
    """
    if f <= f0 or t <= t0:
        return None
    return (t - t0) / (f - f0) * max(0.0, 1.0 - f)


def _left_text(seconds: float | None) -> str:
    if seconds is None:
        return "time left: measuring"
    if seconds < 90:
        return f"about {max(1, round(seconds / 5) * 5 if seconds > 20 else round(seconds)):.0f} s left"
    return f"about {seconds / 60:.0f} min left"


def _on_terminal(bar) -> bool:
    """Whether a click progress bar redraws itself (its stream is a terminal)."""
    tty = getattr(bar, "_is_atty", None)  # click 8.1+
    return bool(not getattr(bar, "is_hidden", True) if tty is None else tty)


def progress_callback(quiet: bool, label: str):
    """A context manager yielding ``update(fraction, text)`` that drives a click progress bar on stderr.

    The bar shows the time left from the cost model and the rate measured so far
    (:func:`time_left_s`); where stderr is not a terminal (a log file) a plain line is written at each
    tenth of the work instead. The bar ends its line when the work is done, so that the closing summary
    ("all paths solved in N s") stands on a line of its own. The bar is created on the first update,
    so a command that fails before any progress (a bad profile, a grid too large) prints its
    one-line error and nothing else.
    """
    import time

    @contextlib.contextmanager
    def manager():
        if quiet:
            yield lambda fraction, text="": None
            return
        with contextlib.ExitStack() as stack:
            state = {"bar": None, "done": 0, "start": None}

            def close():
                _OPEN_BAR["bar"] = None

            def update(fraction: float, text: str = "") -> None:
                fraction = max(0.0, min(1.0, fraction))
                now = time.perf_counter()
                if state["bar"] is None:
                    if state["done"] >= 1000:
                        return
                    inner = contextlib.ExitStack()  # closed when the work is done, or on the way out
                    state["bar"] = inner.enter_context(
                        click.progressbar(
                            length=1000, label=label, file=sys.stderr, show_eta=False, item_show_func=lambda item: item
                        )
                    )
                    state["inner"] = inner
                    stack.callback(inner.close)
                    stack.callback(close)
                    state["start"] = (now, fraction)
                    _OPEN_BAR["bar"] = state["bar"]
                target = int(fraction * 1000)
                t0, f0 = state["start"]
                left = time_left_s(t0, f0, now, fraction)
                if target > state["done"]:
                    state["bar"].update(target - state["done"], "done" if target >= 1000 else _left_text(left))
                    state["done"] = target
                    # a log file or pipe gets no redrawn bar (click prints only its label there): a plain
                    # line at each tenth of the work instead, so that a long run under nohup shows progress
                    if not _on_terminal(state["bar"]) and target // 100 > state.get("tenths", 0):
                        state["tenths"] = target // 100
                        if target < 1000:
                            sys.stderr.write(f"{label}: {target // 10} % done, {_left_text(left)}\n")
                            sys.stderr.flush()
                if target >= 1000:  # finished: end the bar's line now, before any closing message
                    state["bar"] = None
                    state["inner"].close()
                    close()

            yield update

    return manager()


class _LineAfterBar(logging.StreamHandler):
    """A stderr handler that starts a new line first when a progress bar is on the current one."""

    def emit(self, record):
        bar = _OPEN_BAR.get("bar")
        if bar is not None and _on_terminal(bar) and not getattr(bar, "hidden", False):
            self.stream.write("\n")
            bar._last_line = None  # the bar redraws itself in full on the next line
        super().emit(record)


@contextlib.contextmanager
def solver_log(logger_name: str, quiet: bool):
    """Show a library logger's INFO lines (grid, time step, memory) on stderr for one command.

    The handler is removed afterwards, so commands called again in one process (tests, notebooks)
    do not print each line twice.
    """
    if quiet:
        yield
        return
    handler = _LineAfterBar(sys.stderr)
    handler.setFormatter(logging.Formatter("%(message)s"))
    logger = logging.getLogger(logger_name)
    old_level = logger.level
    logger.addHandler(handler)
    logger.setLevel(logging.INFO)
    try:
        yield
    finally:
        logger.removeHandler(handler)
        logger.setLevel(old_level)
