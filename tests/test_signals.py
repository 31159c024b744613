"""Ctrl-C (SIGINT) and SIGTERM sent to a real ``cavity run`` process while it is stepping.

Expected (cavity.cli.common.friendly_errors): exit code 130 for SIGINT and 143 for SIGTERM (the
shell's 128 + signal number), one ``Error: interrupted ...`` line as the last line on stderr, no
traceback, no partial result file, an earlier file of the same name byte-for-byte intact, and no
temporary file left in the folder.

The two processes run side by side (the machine has 2 cores), one started as ``python -m cavity``
and one through the ``cavity`` console script when it is on PATH. "Stepping" is recognised by the
progress bar's label, which the CLI prints only once the engine reports progress (step 200).
"""

from __future__ import annotations

import os
import queue
import shutil
import signal
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import pytest

from cavity.cli import COMMANDS

#: A small but non-trivial solve: about 0.16 M cells and at least 3,600 steps, so that the signal,
#: sent at step 200, always lands while it steps, and step 200 comes soon on a busy machine.
SCENARIO = textwrap.dedent("""\
    title = "Interrupted run (invented)"

    [transmitter]
    name = "Greyhaven Mast"
    frequency_khz = 20.0
    radiated_power_kw = 1.0

    [[receiver]]
    name = "Marker 80"
    range_km = 80.0

    [ionosphere]
    hprime_km = 74.0
    beta_per_km = 0.3

    [ground]
    kind = "sea"

    [solver]
    cell_m = 250.0
    max_range_km = 100.0
    top_km = 90.0
""")

STARTUP_TIMEOUT_S = 240.0  # imports and numba's cache on a busy shared machine


def _default_sigint():
    signal.signal(signal.SIGINT, signal.SIG_DFL)


class Running:
    """A ``cavity`` subprocess whose stderr lines are collected by a thread as they come."""

    def __init__(self, argv: list[str], cwd: Path):
        # one numba thread each: two processes share 2 cores, and parallel kernels on an
        # oversubscribed machine slow the first 200 steps tenfold; signals are handled the same way
        env = {**os.environ, "PYTHONUNBUFFERED": "1", "NUMBA_NUM_THREADS": "1"}
        env.pop("CAVITY_TRACEBACK", None)
        # a process started in the background by a non-interactive shell (as CI may start the suite)
        # inherits SIGINT as ignored; a user's terminal delivers it: restore the default in the child
        self.proc = subprocess.Popen(
            argv,
            cwd=cwd,
            env=env,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            preexec_fn=_default_sigint,
        )
        self.lines: list[str] = []
        self.ended = False
        self._queue: queue.Queue = queue.Queue()
        threading.Thread(target=self._pump, daemon=True).start()

    def _pump(self):
        for line in self.proc.stderr:
            self._queue.put(line.rstrip("\n"))
        self._queue.put(None)

    def wait_for(self, marker: str, timeout: float) -> bool:
        """Collect stderr until a line starts with ``marker``; False on timeout or if stderr closed."""
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            try:
                line = self._queue.get(timeout=min(0.05, timeout))
            except queue.Empty:
                continue
            if line is None:
                self._queue.put(None)
                self.ended = True
                return False
            self.lines.append(line)
            if line.startswith(marker):
                return True
        return False

    def finish(self, timeout: float = 120.0) -> int:
        code = self.proc.wait(timeout=timeout)
        while True:
            try:
                line = self._queue.get(timeout=10)
            except queue.Empty:
                break
            if line is None:
                break
            self.lines.append(line)
        self.proc.stdout.close()
        return code

    def kill(self):
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait()


def _console_script() -> list[str]:
    found = shutil.which("cavity")
    return [found] if found else [sys.executable, "-m", "cavity"]


def test_sigint_and_sigterm_while_stepping(tmp_path):
    folders = {name: tmp_path / name for name in ("sigint", "sigterm")}
    for folder in folders.values():
        folder.mkdir()
        (folder / "run.toml").write_text(SCENARIO)
    # SIGINT: an earlier result of the same name exists and --overwrite is given
    (folders["sigint"] / "result.nc").write_bytes(b"an earlier result, must survive")
    runs = {
        "sigint": Running(
            [sys.executable, "-m", "cavity", "run", "run.toml", "-o", "result.nc", "--overwrite"], folders["sigint"]
        ),
        "sigterm": Running([*_console_script(), "run", "run.toml", "-o", "result.nc"], folders["sigterm"]),
    }
    signals = {"sigint": signal.SIGINT, "sigterm": signal.SIGTERM}
    try:
        waiting = dict(runs)
        deadline = time.monotonic() + STARTUP_TIMEOUT_S
        while waiting and time.monotonic() < deadline:  # signal each one as soon as it steps
            for name, run in list(waiting.items()):
                if run.wait_for("solving", 0.05):
                    assert any(line.startswith("path ") for line in run.lines), run.lines  # grid summary first
                    assert run.proc.poll() is None, f"{name}: ended before the signal"
                    run.proc.send_signal(signals[name])
                    del waiting[name]
                else:
                    assert not run.ended, f"{name}: ended without stepping; stderr: {run.lines}"
        assert not waiting, f"never started stepping: {sorted(waiting)}"
        codes = {name: run.finish() for name, run in runs.items()}
    finally:
        for run in runs.values():
            run.kill()

    assert codes == {"sigint": 130, "sigterm": 143}, {n: (codes[n], r.lines) for n, r in runs.items()}
    for name, run in runs.items():
        errors = [line for line in run.lines if line.startswith("Error:")]
        assert len(errors) == 1 and run.lines[-1] == errors[0], run.lines
        assert not any("Traceback" in line for line in run.lines), run.lines
        what = "SIGINT (Ctrl-C)" if name == "sigint" else "SIGTERM"
        assert errors[0].startswith(f"Error: interrupted by {what}; the command did not finish"), errors[0]
    assert (folders["sigint"] / "result.nc").read_bytes() == b"an earlier result, must survive"
    assert sorted(p.name for p in folders["sigint"].iterdir()) == ["result.nc", "run.toml"]
    assert sorted(p.name for p in folders["sigterm"].iterdir()) == ["run.toml"]


@pytest.mark.slow
@pytest.mark.parametrize("sig, code", [(signal.SIGINT, 130), (signal.SIGTERM, 143)], ids=["sigint", "sigterm"])
def test_signal_during_a_sweep(sig, code, tmp_path):
    """A sweep interrupted by Ctrl-C or SIGTERM: exit 130/143, one line, no combined output file
    (finished points may stay in the parts folder beside it, by design, so that a rerun resumes)."""
    if "sweep" not in COMMANDS:
        pytest.skip("cavity sweep is not registered yet")
    text = SCENARIO.replace(
        'name = "Greyhaven Mast"', 'name = "Greyhaven Mast"\nlatitude_deg = 50.0\nlongitude_deg = 0.0'
    )
    text = text.replace("hprime_km = 74.0\nbeta_per_km = 0.3", "utc = 2026-06-21T12:00:00Z")
    text = text.replace(
        '[[receiver]]\nname = "Marker 80"\nrange_km = 80.0',
        '[[receiver]]\nname = "Kestrel"\nlatitude_deg = 50.7\nlongitude_deg = 0.0',
    )  # 78 km
    (tmp_path / "sweep.toml").write_text(text)
    run = Running(
        [
            sys.executable,
            "-m",
            "cavity",
            "sweep",
            "sweep.toml",
            "--start",
            "2026-06-21T00:00:00Z",
            "--stop",
            "2026-06-21T06:00:00Z",
            "--step",
            "60min",
            "-o",
            "day.nc",
        ],
        tmp_path,
    )
    try:
        # signal once the first point is back (the progress label appears then): the driver waits on
        # its workers, no longer compiling (a signal landing in numba's compile callbacks is lost)
        assert run.wait_for("solving points", 200.0), (run.finish(), run.lines)
        assert run.proc.poll() is None, (run.finish(), run.lines)
        run.proc.send_signal(sig)
        got = run.finish(timeout=180)
    finally:
        run.kill()
    assert got == code, run.lines
    errors = [line for line in run.lines if line.startswith("Error:")]
    assert len(errors) == 1 and run.lines[-1] == errors[0], run.lines
    assert not any("Traceback" in line for line in run.lines), run.lines
    assert not (tmp_path / "day.nc").exists()
