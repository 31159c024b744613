"""The progress display of long commands: an honest time left and a clean closing line.

The time left comes from the engine's cost model (columns the wave has reached x steps, and the
usual steps to convergence) and the rate measured so far; it is checked here against the time a
real run actually took.
"""

from __future__ import annotations

import io
import logging
import sys
import time

import pytest

import cavity
from cavity.cli.common import progress_callback, solver_log, time_left_s
from cavity.solve import simulate

SMALL = """
title = "Invented progress check: 17.3 kHz over sea by night"
[transmitter]
name = "Test mast"
frequency_khz = 17.3
radiated_power_kw = 10.0
[[receiver]]
name = "Marker 1200"
range_km = 1200.0
[ionosphere]
preset = "night"
[ground]
kind = "sea"
[solver]
cell_m = 1000
"""


def test_time_left_is_the_rate_so_far_times_the_rest():
    # 10 s for 20 % of the cost after the first report at 10 %: 0.5 s per %, 70 % left -> 35 s
    assert time_left_s(100.0, 0.1, 110.0, 0.3) == pytest.approx(35.0)
    assert time_left_s(100.0, 0.1, 100.0, 0.1) is None  # no rate yet


def test_time_left_predicts_a_real_run():
    # The time left shown at about a quarter of the run, against the time the run then took.
    # Before the cost model the bar counted steps, not cost (later steps reach more columns), and
    # predicted 2-4 times too little. Timed in process CPU time (all threads), which follows the
    # work done even when other jobs share the cores; the bar uses wall time, which equals it on an
    # idle machine.
    scenario = cavity.load_scenario(SMALL)
    simulate(scenario)  # compile the kernels first: compiling in the middle of the timed run is not stepping
    reports = []
    simulate(scenario, progress=lambda f, text="": reports.append((time.process_time(), f)))
    end = time.process_time()
    t0, f0 = reports[0]
    at = next(r for r in reports if r[1] >= 0.25)
    predicted = time_left_s(t0, f0, *at)
    actual = end - at[0]
    assert actual > 1.0, "run too short to time"
    assert 0.5 <= predicted / actual <= 2.0, (predicted, actual)


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_closing_summary_stands_on_its_own_line(monkeypatch):
    terminal = _Terminal()
    monkeypatch.setattr(sys, "stderr", terminal)
    log = logging.getLogger("cavity.solve")
    with solver_log("cavity.solve", False):
        with progress_callback(False, "night run") as update:
            update(0.2)
            log.info("path 2: 100 x 50 cells")  # a second path's grid line, while the bar is drawn
            update(0.6)
            update(1.0)
            log.info("all paths solved in 25.3 s (stepping 25.0 s)")
    lines = terminal.getvalue().split("\n")
    assert any(line.startswith("all paths solved in 25.3 s") for line in lines)
    assert any(line.startswith("path 2: 100 x 50 cells") for line in lines)
    bar_lines = [line for line in lines if "night run" in line]
    assert bar_lines and all("all paths solved" not in line for line in bar_lines)
    assert "left" in terminal.getvalue()


def test_a_log_file_gets_a_line_at_each_tenth(monkeypatch):
    # stderr redirected to a file (nohup, CI): click draws no bar there, so progress comes as lines
    log_file = io.StringIO()
    monkeypatch.setattr(sys, "stderr", log_file)
    with progress_callback(False, "solving points") as update:
        for k in range(1, 41):
            update(k / 40)
    lines = [line for line in log_file.getvalue().split("\n") if "% done" in line]
    assert [line.split(":")[1].split("%")[0].strip() for line in lines] == [str(10 * k) for k in range(1, 10)]
    assert all("left" in line for line in lines)
