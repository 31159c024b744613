"""Shared test helpers: a non-interactive matplotlib backend and a scenario-file writer.

Kept generic on purpose; subfolders may add their own conftest.py for their own fixtures.
"""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import pytest

# Before anything imports matplotlib: draw to files only, never to a screen.
os.environ.setdefault("MPLBACKEND", "Agg")


@pytest.fixture
def write_scenario(tmp_path: Path):
    """Return ``write(text, name="scenario.toml") -> Path``: writes dedented TOML into ``tmp_path``."""

    def write(text: str, name: str = "scenario.toml") -> Path:
        path = tmp_path / name
        path.write_text(textwrap.dedent(text), encoding="utf-8")
        return path

    return write
