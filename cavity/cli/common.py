"""Shared pieces of the commands: error translation, progress bars, output paths."""

from __future__ import annotations

import functools
import sys

import click

from cavity.errors import CavityError
from profiles.errors import ProfileError


def one_line(exc: BaseException) -> str:
    """The first line of an exception's message (messages are one line by design)."""
    text = str(exc).strip() or exc.__class__.__name__
    return text.splitlines()[0]


def friendly_errors(func):
    """Turn the library's typed errors (and Ctrl-C) into one-line messages with exit code 1."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except (CavityError, ProfileError) as exc:
            raise click.ClickException(one_line(exc)) from None
        except KeyboardInterrupt:
            click.echo("Error: interrupted; no result file was written", err=True)
            sys.exit(130)
        except OSError as exc:
            where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
            raise click.ClickException(f"{exc.strerror or one_line(exc)}{where}") from None

    return wrapper


def progress_callback(quiet: bool, label: str):
    """A context manager yielding ``update(fraction, text)`` that drives a click progress bar on stderr."""
    import contextlib

    @contextlib.contextmanager
    def manager():
        if quiet:
            yield lambda fraction, text="": None
            return
        with click.progressbar(length=1000, label=label, file=sys.stderr, show_eta=True) as bar:
            done = [0]

            def update(fraction: float, text: str = "") -> None:
                target = int(max(0.0, min(1.0, fraction)) * 1000)
                if target > done[0]:
                    bar.update(target - done[0])
                    done[0] = target

            yield update

    return manager()
