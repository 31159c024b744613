"""The README's shell commands work when pasted in order into a fresh shell.

Every ```sh block of the README is read; the quick-start block must be exactly two commands, and
the commands after it must be the activated environment's bare `cavity` / `python` (the README
activates `.venv` once). The quick commands among them (``--help``, ``inspect``, ``table``,
``compare``, ``plot``, the memo script) are run in order in a scratch folder, on small result files
standing in for the demo's (tests/data/golden_*.nc), so the README cannot rot unnoticed. Long ones
(``run``, ``demo``, ``sweep``, ``sferic run``, ``bench``, ``verify``, installs, test runs) are only
parsed.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
README = REPO / "README.md"
DATA = Path(__file__).parent / "data"
QUICK = {"table", "compare", "plot", "inspect", "profile"}


def sh_blocks() -> list[list[str]]:
    """The commands of each ```sh block, comments dropped, in README order."""
    text = README.read_text(encoding="utf-8")
    blocks = []
    for body in re.findall(r"```sh\n(.*?)```", text, re.S):
        commands = [line.split("  #")[0].strip() for line in body.splitlines()]
        blocks.append([c for c in commands if c and not c.startswith("#")])
    return blocks


def test_quick_start_is_two_commands_then_the_venv_is_activated():
    blocks = sh_blocks()
    quick = blocks[0]
    assert len(quick) == 2
    assert "cavity demo" in quick[0] and "pytest" in quick[1]
    assert blocks[1][0] == ". .venv/bin/activate"
    # after activation no command needs a path into .venv, and every bare command is the venv's
    for block in blocks[1:]:
        for command in block:
            first = shlex.split(command)[0]
            assert first in {".", "cavity", "python"}, command


def _is_quick(argv: list[str]) -> bool:
    if argv[0] == "cavity":
        return "--help" in argv or (len(argv) > 1 and argv[1] in QUICK)
    return argv[0] == "python" and len(argv) > 1 and argv[1] == "examples/memo_report.py"


def test_readme_commands_run_in_order(tmp_path):
    # A scratch checkout: examples/ as in the repository, demo-output/ with small stand-in results.
    shutil.copytree(REPO / "examples", tmp_path / "examples")
    (tmp_path / "demo-output").mkdir()
    shutil.copy(DATA / "golden_day.nc", tmp_path / "demo-output" / "day.nc")
    shutil.copy(DATA / "golden_night.nc", tmp_path / "demo-output" / "night.nc")
    env = dict(os.environ, PYTHONPATH=str(REPO), MPLBACKEND="Agg")
    ran, not_made = [], set()
    for block in sh_blocks()[2:]:
        for command in block:
            argv = shlex.split(command)
            if not _is_quick(argv) or not_made.intersection(argv):
                # a long command is not run here: what it writes is not there for the ones after it
                not_made.update(argv[i + 1] for i, a in enumerate(argv[:-1]) if a in ("-o", "--output"))
                continue
            if argv[0] == "cavity":
                argv = [sys.executable, "-m", "cavity", *argv[1:]]
            else:
                argv = [sys.executable, *argv[1:]]
            done = subprocess.run(argv, cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300)
            assert done.returncode == 0, (command, done.stderr[-2000:])
            ran.append(command)
    # the table, comparison and memo examples all ran
    assert any(c.startswith("cavity table") for c in ran)
    assert any(c.startswith("cavity compare") for c in ran)
    assert any("memo_report.py" in c for c in ran)
    for name in ("receivers.md", "receivers.csv", "day-night.png", "comparison.md", "memo.md"):
        assert (tmp_path / name).is_file(), name


def test_demo_time_is_stated_the_same_everywhere():
    from click.testing import CliRunner

    from cavity.cli import main

    text = README.read_text(encoding="utf-8")
    quick_start = text.split("## Using it")[0]
    demo_section = text.split("### The demo")[1].split("###")[0]
    help_text = CliRunner().invoke(main, ["demo", "--help"]).output
    for where in (quick_start, demo_section, help_text):
        assert "about 7 min" in where
    assert "a few minutes" not in help_text and "about a minute" not in quick_start
