"""Sweeps on dask.distributed: points, equality with one-by-one solves, resuming, failures, dead
workers, the combined file's CF time coordinate, and the ``cavity sweep`` command.

Every solve here is a tiny scenario (receivers near 100 km, 2.5 km cells, 10-12 kHz, top at 100 km)
that takes about a second, so the checks of the machinery stay fast.
"""

from __future__ import annotations

import dataclasses
import functools
import json
import os
import shutil
import signal
import subprocess
import sys
import time
import uuid
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

import cavity
from cavity.cli import main
from cavity.errors import ScenarioError, SolverError
from cavity.results import REQUIRED_ATTRIBUTES, REQUIRED_VARIABLES, open_result
from cavity.solve import simulate
from cavity.sweeps import (
    SweepError,
    SweepPoint,
    default_parts_dir,
    parse_step,
    parse_utc,
    sweep,
    sweep_points,
    sweep_times,
    write_sweep,
)
from cavity.sweeps.cluster import local_cluster_size, solve_path
from cavity.sweeps.combine import TIME_CALENDAR, TIME_UNITS
from cavity.sweeps.points import point_scenario
from cavity.sweeps.run import plan_jobs
from cavity.sweeps.store import SOLVES_SUBDIR

# Invented places: a mast and two listening posts about 100 km east and north of it.
TINY = """
title = "Invented tiny sweep: Larkmoor to two posts"

[transmitter]
name = "Larkmoor"
latitude_deg = 45.0
longitude_deg = 10.0
frequency_khz = 10.0
radiated_power_kw = 100.0

[[receiver]]
name = "Alder Post"
latitude_deg = 45.0
longitude_deg = 11.3

[[receiver]]
name = "Birch Post"
latitude_deg = 45.9
longitude_deg = 10.0

[ionosphere]
utc = 2026-03-20T06:00:00Z

[ground]
kind = "sea"

[solver]
cell_m = 2500
top_km = 100.0
"""

#: The instants of the small sweep: before, across and after sunrise along the paths.
TIMES = ["2026-03-20T04:00Z", "2026-03-20T05:20Z"]
FREQS_KHZ = [10.0, 12.0]


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    path = tmp_path_factory.mktemp("scenario") / "tiny.toml"
    path.write_text(TINY, encoding="utf-8")
    return cavity.load_scenario(path)


def _local_cluster():
    """Two single-threaded process workers, no dashboard, the HTTP service on a free loopback port."""
    from distributed import LocalCluster

    return LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
        env={"NUMBA_NUM_THREADS": "1"},
    )


@pytest.fixture(scope="module")
def cluster():
    """The cluster shared by the tests of this module."""
    with _local_cluster() as c:
        yield c


@pytest.fixture(scope="module", autouse=True)
def _one_numba_thread():
    # In-process solves of tiny grids: threads only add overhead on a busy machine (the numbers
    # do not depend on it: the kernels update each cell independently).
    import numba

    before = numba.get_num_threads()
    numba.set_num_threads(1)
    yield
    numba.set_num_threads(before)


@pytest.fixture(scope="module")
def swept(tiny, cluster):
    """The small sweep (2 instants x 2 frequencies) on the shared cluster, and its duration."""
    t0 = time.perf_counter()
    ds = sweep(tiny, times=TIMES, frequencies_khz=FREQS_KHZ, scheduler=cluster.scheduler_address)
    return ds, time.perf_counter() - t0


def counting_solve(scenario, path, marker_dir):
    """Solve a path and leave one marker file per attempt (how tests count solves on workers)."""
    Path(marker_dir, uuid.uuid4().hex).write_text(scenario.title)
    return solve_path(scenario, path)


def failing_solve(scenario, path, marker_dir, bad_hz):
    """Like :func:`counting_solve`, but every attempt at ``bad_hz`` raises."""
    Path(marker_dir, f"{scenario.transmitter.frequencies_hz[0]:.0f}-{uuid.uuid4().hex}").write_text("")
    if scenario.transmitter.frequencies_hz[0] == bad_hz:
        raise SolverError("invented failure for a test")
    return solve_path(scenario, path)


@pytest.fixture(autouse=True, scope="module")
def _helpers_by_value():
    # The workers cannot import this test module; ship its helper functions by value.
    import cloudpickle

    module = sys.modules[__name__]
    cloudpickle.register_pickle_by_value(module)
    yield
    cloudpickle.unregister_pickle_by_value(module)


# --------------------------------------------------------------------------------------------------
# Points, instants and steps (no solving)
# --------------------------------------------------------------------------------------------------


def test_parse_utc_accepts_offsets_and_refuses_naive_times():
    assert parse_utc("2026-03-20T06:00Z") == datetime(2026, 3, 20, 6, tzinfo=timezone.utc)
    assert parse_utc("2026-03-20T08:00+02:00") == datetime(2026, 3, 20, 6, tzinfo=timezone.utc)
    assert parse_utc("2026-03-20") == datetime(2026, 3, 20, tzinfo=timezone.utc)
    with pytest.raises(ScenarioError, match="start = '2026-03-20T06:00' has no time zone"):
        parse_utc("2026-03-20T06:00")
    with pytest.raises(ScenarioError, match="stop = 'noon' is not a date and time"):
        parse_utc("noon", "stop")


def test_parse_step():
    assert parse_step("15min") == timedelta(minutes=15)
    assert parse_step("1h30min") == timedelta(minutes=90)
    assert parse_step("90s") == timedelta(seconds=90)
    for bad, why in [
        ("15", "has no unit"),
        ("soon", "is not a duration"),
        ("0s", "at least 1 s"),
        ("1.5s", "whole number of seconds"),
        ("-5min", "at least 1 s"),
    ]:
        with pytest.raises(ScenarioError, match=why):
            parse_step(bad)


def test_sweep_times_include_stop_on_the_grid_and_refuse_bad_ranges():
    t = sweep_times("2026-03-20T00:00Z", "2026-03-21T00:00Z", "15min")
    assert len(t) == 97 and t[0].hour == 0 and t[-1] == datetime(2026, 3, 21, tzinfo=timezone.utc)
    assert len(sweep_times("2026-03-20T00:00Z", "2026-03-20T00:40Z", "15min")) == 3  # 00:00, 00:15, 00:30
    with pytest.raises(ScenarioError, match="stop = 2026-03-19T00:00:00Z is before start"):
        sweep_times("2026-03-20", "2026-03-19", "1h")
    with pytest.raises(ScenarioError, match="gives 86401 instants; the limit is 10000"):
        sweep_times("2026-03-20", "2026-03-21", "1s")


def test_points_are_instants_times_frequencies(tiny):
    times, freqs, points = sweep_points(tiny, TIMES, FREQS_KHZ)
    assert freqs == [10e3, 12e3] and len(times) == 2 and len(points) == 4
    assert points[1].name == "2026-03-20T04:00:00Z 12 kHz"
    assert points[1].key == "t20260320T040000Z_f12kHz"
    # without instants, form "utc" keeps its own instant (a time axis of length 1)
    times, freqs, points = sweep_points(tiny)
    assert times == [tiny.ionosphere.utc] and freqs == [10e3] and len(points) == 1


def test_point_scenario_replaces_instant_and_frequency_and_validates(tiny):
    p = SweepPoint(0, 0, parse_utc("2026-03-20T05:20Z"), 12e3)
    v = point_scenario(tiny, p)
    assert v.ionosphere.utc == datetime(2026, 3, 20, 5, 20, tzinfo=timezone.utc)
    assert v.transmitter.frequencies_hz == (12e3,)
    assert v.receivers == tiny.receivers and v.ground == tiny.ground
    assert "frequency_khz = 12" in v.text
    with pytest.raises(ScenarioError, match="frequency_khz"):
        point_scenario(tiny, SweepPoint(0, 0, None, 100e3))


def test_instants_need_the_utc_form(write_scenario):
    text = TINY.replace("utc = 2026-03-20T06:00:00Z", 'preset = "night"')
    sc = cavity.load_scenario(write_scenario(text))
    with pytest.raises(ScenarioError, match="form 'preset' does not change with time"):
        sweep_points(sc, TIMES)
    times, freqs, points = sweep_points(sc, None, [12.0, 10.0, 12.0])
    assert times is None and freqs == [10e3, 12e3] and [p.name for p in points] == ["10 kHz", "12 kHz"]


def test_a_lightning_source_is_not_swept():
    sc = cavity.load_scenario(TINY + '\n[source]\nkind = "lightning"\n')
    with pytest.raises(ScenarioError, match=r"\[source\]: a sweep solves the continuous transmitter"):
        sweep_points(sc, TIMES)


def test_local_cluster_size_keeps_workers_times_threads_within_cores():
    assert local_cluster_size(100, cores=8) == (8, 1)
    assert local_cluster_size(3, cores=8) == (3, 2)  # fewer points than cores: threads for each
    gb = 1024**3
    assert local_cluster_size(100, memory_per_point=6 * gb, cores=8, available_bytes=20 * gb) == (2, 4)
    assert local_cluster_size(100, memory_per_point=60 * gb, cores=8, available_bytes=20 * gb) == (1, 8)
    assert local_cluster_size(100, workers=3, cores=8) == (3, 2)
    for n, threads in [local_cluster_size(k, cores=c) for k in (1, 5, 50) for c in (1, 2, 6)]:
        assert n >= 1 and threads >= 1
    with pytest.raises(ScenarioError, match="workers = 0"):
        local_cluster_size(10, workers=0)


def test_cavity_sweep_is_the_sweep_function_and_the_package_has_another_name(tiny):
    import cavity.sweeps  # the package's name differs from the function's, so importing it rebinds nothing

    assert cavity.sweep is not cavity.sweeps and callable(cavity.sweep)
    assert not callable(cavity.sweeps)
    with pytest.raises(ScenarioError, match="frequency_khz"):
        cavity.sweep(tiny, frequencies_khz=[99.0])


# --------------------------------------------------------------------------------------------------
# Sweeps on a cluster
# --------------------------------------------------------------------------------------------------


def test_sweep_equals_points_solved_one_by_one(tiny, swept):
    ds, _ = swept
    assert dict(ds.sizes)["time"] == 2 and list(ds["frequency"].values) == FREQS_KHZ
    assert ds["time"].dtype.kind == "M"
    for ti, when in enumerate(TIMES):
        for fi, f in enumerate(FREQS_KHZ):
            one = simulate(point_scenario(tiny, SweepPoint(ti, fi, parse_utc(when), f * 1e3)))
            at = {"time": ti, "frequency": fi}
            for name in (
                "receiver_ez_amplitude",
                "receiver_ez_phase",
                "receiver_b_amplitude",
                "ez_amplitude",
                "ez_phase",
            ):
                np.testing.assert_array_equal(
                    ds[name].isel(at).values, one[name].isel(frequency=0).values, err_msg=name
                )
            for name in ("electron_density", "solar_zenith_angle", "hprime"):
                np.testing.assert_array_equal(
                    ds[name].isel(time=ti).transpose(*one[name].dims).values, one[name].values
                )
            assert ds["point_solver_time_steps"].isel(at).item() == one.attrs["solver_time_steps"]
    # the instants differ in ionosphere: before sunrise the paths are in night, later partly in day
    h = ds["hprime"].max(["path", "range"]).values
    assert h[0] > h[1]


def test_instants_with_the_same_ionosphere_share_one_solve_per_path(tiny, cluster, tmp_path):
    # 00:00 and 01:00 UTC on 2026-03-20 at 45 N, 10-11.3 E: local midnight, the sun far below the
    # horizon (zenith > 99 deg) along both paths, so both instants have the whole-night medium;
    # 12:00 UTC is midday (zenith < 90 deg). Expected: 2 paths x 2 distinct media = 4 solves, not 6.
    times = ["2026-03-20T00:00Z", "2026-03-20T01:00Z", "2026-03-20T12:00Z"]
    markers = tmp_path / "markers"
    markers.mkdir()
    _, _, points = sweep_points(tiny, times, [10.0])
    jobs, needs, failures = plan_jobs(points, {p: point_scenario(tiny, p) for p in points})
    assert len(jobs) == 4 and not failures
    ds = sweep(
        tiny,
        times,
        [10.0],
        scheduler=cluster.scheduler_address,
        solve=functools.partial(counting_solve, marker_dir=str(markers)),
    )
    assert len(list(markers.iterdir())) == 4
    zenith = ds["solar_zenith_angle"]
    assert float(zenith.isel(time=[0, 1]).min()) > 99.0 and float(zenith.isel(time=2).max()) < 90.0
    # the shared solve gives the later instant exactly what solving it on its own gives ...
    one = simulate(point_scenario(tiny, points[1]))
    for name in ("receiver_ez_amplitude", "receiver_ez_phase", "ez_amplitude", "electron_density"):
        np.testing.assert_array_equal(ds[name].isel(time=1).squeeze().values, one[name].squeeze().values, err_msg=name)
    # ... with its own sun, and its stepping time counted once (at the first instant)
    assert not np.array_equal(zenith.isel(time=0).values, zenith.isel(time=1).values)
    assert ds["point_solver_wall_time"].isel(time=1).item() == 0.0
    assert ds["point_solver_wall_time"].isel(time=0).item() > 0.0
    # midday has its own medium, hence its own solve and field
    assert not np.array_equal(
        ds["receiver_ez_amplitude"].isel(time=2).values, ds["receiver_ez_amplitude"].isel(time=1).values
    )


def test_combined_file_follows_the_contract_with_a_cf_time(swept, tmp_path):
    ds, _ = swept
    path = write_sweep(ds, tmp_path / "sweep.nc")
    import netCDF4

    with netCDF4.Dataset(path) as nc:
        t = nc["time"]
        assert t.units == TIME_UNITS == "seconds since 1970-01-01 00:00:00"
        assert t.calendar == TIME_CALENDAR == "standard"
        assert t.standard_name == "time" and t.axis == "T"
        # 2026-03-20T04:00Z = 1773979200 s after 1970-01-01 (date arithmetic, Python datetime)
        expected = (
            datetime(2026, 3, 20, 4, tzinfo=timezone.utc) - datetime(1970, 1, 1, tzinfo=timezone.utc)
        ).total_seconds()
        assert list(t[:]) == [expected, expected + 80 * 60]
        assert nc["receiver_ez_amplitude"].dimensions == ("receiver", "frequency", "time")
    back = open_result(path)
    assert all(name in back.variables for name in REQUIRED_VARIABLES)
    assert all(name in back.attrs for name in REQUIRED_ATTRIBUTES)
    assert back.attrs["Conventions"] == "CF-1.10" and back.attrs["sweep_points"] == 4
    # which points' companions kept the vertical cell (their +- leaves out its error), as in a result file
    per_point = back.attrs["solver_range_only_companion"]
    assert per_point == "none" or per_point.startswith("some or all paths of ")
    np.testing.assert_array_equal(back["time"].values, ds["time"].values)
    np.testing.assert_array_equal(back["receiver_ez_amplitude"].values, ds["receiver_ez_amplitude"].values)
    assert cavity.load_scenario(back.attrs["scenario"]).title.startswith("Invented tiny sweep")
    # IOOS compliance checker, CF-1.10 suite: no errors (the result-file contract)
    beside = Path(sys.executable).parent / "compliance-checker"
    checker = str(beside) if beside.exists() else shutil.which("compliance-checker")
    assert checker, "compliance-checker is not installed (pip install '.[test]')"
    report = tmp_path / "report.json"
    done = subprocess.run(
        [checker, "--test", "cf:1.10", "-f", "json", "-o", str(report), str(path)],
        capture_output=True,
        text=True,
        timeout=300,
    )
    result = json.loads(report.read_text())["cf:1.10"]
    failed = [(p["name"], p["msgs"]) for p in result["all_priorities"] if p["value"][0] < p["value"][1]]
    assert result["high_count"] == 0, failed
    assert done.returncode == 0, (done.stdout, done.stderr, failed)


class _Stop(Exception):
    pass


def test_interrupted_sweep_resumes_with_only_the_missing_points(tiny, swept, cluster, tmp_path):
    parts = tmp_path / "parts"
    markers = tmp_path / "markers"
    markers.mkdir()
    solve = functools.partial(counting_solve, marker_dir=str(markers))

    def stop_after_two_points(fraction, text):
        if len(list(parts.glob("*.nc"))) >= 2:
            raise _Stop()

    with pytest.raises(_Stop):
        sweep(
            tiny,
            TIMES,
            FREQS_KHZ,
            scheduler=cluster.scheduler_address,
            parts_dir=parts,
            progress=stop_after_two_points,
            solve=solve,
        )
    kept = {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in parts.glob("*.nc")}
    assert len(kept) == 2
    time.sleep(1.5)  # let cancelled in-flight solves finish leaving their markers
    before = len(list(markers.iterdir()))

    # 8 distinct path solves in all (2 points x 2 paths at each of 2 instants, none shared: the
    # instants differ in sun); those of the finished points, and any other solve that had come in,
    # are kept in the parts folder
    solves_kept = len(list((parts / SOLVES_SUBDIR).glob("*.npz")))
    assert 4 <= solves_kept < 8

    calls = []
    ds = sweep(
        tiny,
        TIMES,
        FREQS_KHZ,
        scheduler=cluster.scheduler_address,
        parts_dir=parts,
        progress=lambda f, text: calls.append(text),
        solve=solve,
    )
    assert len(calls) == 8 - solves_kept  # the driver collected only the path solves not kept ...
    assert len(list(markers.iterdir())) - before == 8 - solves_kept  # ... and the workers solved only those
    assert {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in parts.glob("*.nc") if p.name in kept} == kept
    assert len(list(parts.glob("*.nc"))) == 4
    for name in ("receiver_ez_amplitude", "ez_amplitude", "electron_density"):
        np.testing.assert_array_equal(ds[name].values, swept[0][name].values)
    # a third run solves nothing and needs no cluster at all
    again = sweep(tiny, TIMES, FREQS_KHZ, scheduler="tcp://127.0.0.1:1", parts_dir=parts, solve=solve)
    np.testing.assert_array_equal(again["receiver_ez_phase"].values, swept[0]["receiver_ez_phase"].values)


def test_kept_path_solves_are_reused_when_points_are_missing(tiny, swept, cluster, tmp_path):
    parts = tmp_path / "parts"
    markers = tmp_path / "markers"
    markers.mkdir()
    solve = functools.partial(counting_solve, marker_dir=str(markers))
    sweep(tiny, TIMES, FREQS_KHZ, scheduler=cluster.scheduler_address, parts_dir=parts, solve=solve)
    assert len(list(markers.iterdir())) == 8
    for part in parts.glob("*.nc"):  # every point lost, every path solve kept
        part.unlink()
    kept = sorted((parts / SOLVES_SUBDIR).glob("*.npz"))
    kept[0].write_bytes(b"not a kept solve")  # a damaged one is solved again, with a warning
    again = sweep(tiny, TIMES, FREQS_KHZ, scheduler=cluster.scheduler_address, parts_dir=parts, solve=solve)
    assert len(list(markers.iterdir())) == 9
    for name in ("receiver_ez_amplitude", "receiver_ez_phase", "ez_amplitude", "electron_density", "hprime"):
        np.testing.assert_array_equal(again[name].values, swept[0][name].values, err_msg=name)


def test_parts_of_another_scenario_are_solved_again(tiny, cluster, tmp_path):
    parts = tmp_path / "parts"
    one = sweep(tiny, TIMES[:1], [10.0], scheduler=cluster.scheduler_address, parts_dir=parts)
    louder = tiny.replace(
        transmitter=dataclasses.replace(tiny.transmitter, radiated_power_w=4 * tiny.transmitter.radiated_power_w)
    )
    calls = []
    two = sweep(
        louder,
        TIMES[:1],
        [10.0],
        scheduler=cluster.scheduler_address,
        parts_dir=parts,
        progress=lambda f, t: calls.append(t),
    )
    assert len(calls) == 2  # the part on disk was made for 100 kW, so both paths were solved again
    # four times the power: +6.02 dB (10 log10 4) at every receiver
    np.testing.assert_allclose(two["receiver_ez_amplitude"] - one["receiver_ez_amplitude"], 10 * np.log10(4), atol=1e-9)


def test_failed_point_is_retried_reported_by_name_and_the_rest_complete(tiny, cluster, tmp_path):
    parts = tmp_path / "parts"
    markers = tmp_path / "markers"
    markers.mkdir()
    solve = functools.partial(failing_solve, marker_dir=str(markers), bad_hz=12e3)
    with pytest.raises(SweepError) as info:
        sweep(tiny, TIMES, FREQS_KHZ, scheduler=cluster.scheduler_address, parts_dir=parts, solve=solve)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith("2 of 4 points failed (first: 2026-03-20T04:00:00Z 12 kHz: path bearing ")
    assert "SolverError: invented failure" in message
    assert "the 2 finished points are kept in" in message
    assert [name for name, _ in info.value.failures] == ["2026-03-20T04:00:00Z 12 kHz", "2026-03-20T05:20:00Z 12 kHz"]
    assert sorted(p.name for p in parts.glob("*.nc")) == ["t20260320T040000Z_f10kHz.nc", "t20260320T052000Z_f10kHz.nc"]
    attempts = [m.name.split("-")[0] for m in markers.iterdir()]
    assert attempts.count("12000") == 8  # each failing path solve (2 points x 2 paths) tried twice (retries=1)
    assert attempts.count("10000") == 4

    # with allow_missing the combined dataset has NaN where the points failed, and says which
    ds = sweep(
        tiny, TIMES, FREQS_KHZ, scheduler=cluster.scheduler_address, parts_dir=parts, solve=solve, allow_missing=True
    )
    assert np.isnan(ds["receiver_ez_amplitude"].sel(frequency=12.0)).all()
    assert np.isfinite(ds["receiver_ez_amplitude"].sel(frequency=10.0)).all()
    assert ds.attrs["sweep_missing_points"] == "2026-03-20T04:00:00Z 12 kHz; 2026-03-20T05:20:00Z 12 kHz"
    write_sweep(ds, tmp_path / "partial.nc")


def test_frequency_only_sweep_of_a_fixed_ionosphere(write_scenario, cluster):
    text = TINY.replace("utc = 2026-03-20T06:00:00Z", 'preset = "night"')
    sc = cavity.load_scenario(write_scenario(text))
    ds = sweep(sc, frequencies_khz=FREQS_KHZ, scheduler=cluster)  # a cluster object also works
    assert "time" not in ds.dims and list(ds["frequency"].values) == FREQS_KHZ
    assert ds["receiver_ez_amplitude"].dims == ("receiver", "frequency")
    one = simulate(point_scenario(sc, SweepPoint(0, 1, None, 12e3)))
    np.testing.assert_array_equal(
        ds["receiver_ez_amplitude"].isel(frequency=1).values, one["receiver_ez_amplitude"].isel(frequency=0).values
    )


def test_frequencies_on_different_grids_share_the_coarsest_range_axis(write_scenario, cluster):
    # cell_m left to the tool: 16 cells per wavelength, so 10 and 12 kHz are solved on different
    # range grids (1.87 and 1.56 km cells); without the geomagnetic field, whose whistler rule
    # would make the vertical cells (and the test) several times finer without bearing on the range axes
    text = TINY.replace("cell_m = 2500\n", "").replace("utc = 2026-03-20T06:00:00Z", 'preset = "day"')
    text += '\n[geomagnetic]\nmodel = "none"\n'
    text = text.replace("longitude_deg = 11.3", "longitude_deg = 10.6").replace(
        "latitude_deg = 45.9", "latitude_deg = 45.4"
    )
    sc = cavity.load_scenario(write_scenario(text))
    ds = sweep(sc, frequencies_khz=FREQS_KHZ, scheduler=cluster)
    assert "coarsest" in ds.attrs["sweep_range_note"]
    ten = simulate(point_scenario(sc, SweepPoint(0, 0, None, 10e3)))
    twelve = simulate(point_scenario(sc, SweepPoint(0, 1, None, 12e3)))
    assert np.median(np.diff(twelve["range"].values)) < np.median(np.diff(ten["range"].values))
    np.testing.assert_array_equal(ds["range"].values, ten["range"].values)
    np.testing.assert_array_equal(
        ds["ez_amplitude"].isel(frequency=0).values, ten["ez_amplitude"].isel(frequency=0).values
    )
    for name in ("receiver_ez_amplitude", "receiver_ez_phase"):  # receivers: from each solve's own grid
        np.testing.assert_array_equal(ds[name].isel(frequency=1).values, twelve[name].isel(frequency=0).values)
    # fields along range at 12 kHz: linear in dB between the 12 kHz grid's points (numpy.interp)
    for p in range(ds.sizes["path"]):
        expected = np.interp(
            ds["range"].values,
            twelve["range"].values,
            twelve["ez_amplitude"].isel(path=p, frequency=0).values,
            right=np.nan,
        )
        np.testing.assert_allclose(ds["ez_amplitude"].isel(path=p, frequency=1).values, expected, rtol=1e-12)


def test_a_sweep_whose_combined_arrays_cannot_fit_is_refused_before_solving(tiny, monkeypatch, tmp_path):
    from cavity.sweeps.cluster import combined_memory_bytes

    # per instant: 2 paths x range samples x (81 altitudes + h', beta, zenith + 4 fields) x 8 bytes
    assert combined_memory_bytes(1, 1, 2, 100) == 2 * 100 * (81 + 3 + 4) * 8
    assert combined_memory_bytes(10, 2, 2, 100) == 10 * 2 * 100 * (81 + 3 + 8) * 8
    from cavity.paths import build_paths
    from cavity.solve import plan_path

    # one instant of the tiny sweep at its highest frequency, from its own grid
    _, _, points = sweep_points(tiny, TIMES, FREQS_KHZ)
    variant = point_scenario(tiny, points[-1])
    paths = build_paths(variant)
    grid = max((plan_path(variant, p).grid for p in paths), key=lambda g: g.nr)
    one = combined_memory_bytes(1, 2, len(paths), grid.range_columns)
    for available, advice in (
        (one * 1.5 / 0.8, r"sweep at most 1 instant per file"),
        (one / 2, r"not even one instant fits"),
    ):
        monkeypatch.setattr("cavity.fdtd.grid.available_memory_bytes", lambda a=available: int(a))
        with pytest.raises(SweepError, match=r"would need about .* GB of memory \(2 instants x .*; " + advice):
            sweep(tiny, TIMES, FREQS_KHZ, scheduler="tcp://127.0.0.1:1", parts_dir=tmp_path / "parts")
    assert not list((tmp_path / "parts").iterdir())  # nothing solved, nothing written


def test_unreachable_scheduler_is_a_one_line_error(tiny, monkeypatch):
    monkeypatch.setattr("cavity.sweeps.run.CONNECT_TIMEOUT_S", 2)
    with pytest.raises(SweepError, match=r"scheduler = 'tcp://127.0.0.1:9': cannot connect"):
        sweep(tiny, TIMES[:1], [10.0], scheduler="tcp://127.0.0.1:9")


def test_sweep_report_reads_the_real_sweep(swept, tmp_path):
    from cavity.reports.sweep import plot_diurnal, table_diurnal

    ds, _ = swept
    table = table_diurnal(ds)
    assert len(table) == 4 and set(table["receiver"]) == {"Alder Post", "Birch Post"}
    row = table[(table["receiver"] == "Alder Post") & (table["frequency_khz"] == 12.0)].iloc[0]
    values = ds["receiver_ez_amplitude"].sel(frequency=12.0).isel(receiver=0).values
    assert row["ez_min_db"] == values.min() and row["ez_max_db"] == values.max()
    files = plot_diurnal(ds, tmp_path / "diurnal.png")
    assert files == [str(tmp_path / "diurnal.png")] and Path(files[0]).stat().st_size > 10_000


def test_worker_killed_mid_sweep_does_not_lose_the_sweep(tiny, swept, cluster, tmp_path):
    from distributed import Client

    times = TIMES + ["2026-03-20T04:40Z"]
    with Client(cluster) as client:
        killed = []

        def kill_a_busy_worker(fraction, text):
            if killed:
                return
            busy = [w for w, keys in client.processing().items() if keys]
            pid = client.run(os.getpid, workers=busy[:1])[busy[0]]
            os.kill(pid, signal.SIGKILL)  # the worker dies in the middle of a solve
            killed.append(pid)

        ds = sweep(tiny, times, FREQS_KHZ, scheduler=client, progress=kill_a_busy_worker, parts_dir=tmp_path / "parts")
        assert killed and killed[0] not in client.run(os.getpid).values()
    assert len(list((tmp_path / "parts").glob("*.nc"))) == 6
    assert np.isfinite(ds["receiver_ez_amplitude"].values).all()
    np.testing.assert_array_equal(
        ds["receiver_ez_amplitude"].sel(time=swept[0]["time"]).values, swept[0]["receiver_ez_amplitude"].values
    )


# --------------------------------------------------------------------------------------------------
# The command
# --------------------------------------------------------------------------------------------------


def test_cli_sweep_local_cluster_then_resume(tmp_path):
    scenario = tmp_path / "tiny.toml"
    scenario.write_text(TINY, encoding="utf-8")
    out = tmp_path / "day.nc"
    runner = CliRunner()
    args = [
        "sweep",
        str(scenario),
        "--start",
        TIMES[0],
        "--stop",
        TIMES[1],
        "--step",
        "80min",
        "--frequency",
        "10",
        "--workers",
        "1",
        "-o",
        str(out),
    ]
    result = runner.invoke(main, args)
    assert result.exit_code == 0, result.output
    assert f"wrote {out}" in result.output
    assert "2 points (2 instants x 1 frequency); 0 already solved" in result.output
    parts = default_parts_dir(out)
    assert parts == tmp_path / "day.nc.parts" and len(list(parts.glob("*.nc"))) == 2
    ds = open_result(out)
    assert ds.sizes["time"] == 2 and ds["time"].dtype.kind == "M"

    # the same command again: refused without --overwrite, then served from the parts folder
    again = runner.invoke(main, args)
    assert again.exit_code == 1 and "exists; use --overwrite" in again.output
    again = runner.invoke(main, [*args, "--overwrite"])
    assert again.exit_code == 0, again.output
    assert "2 already solved" in again.output and "0 to solve" in again.output


def test_cli_usage_errors(tmp_path, write_scenario):
    tiny = write_scenario(TINY, "tiny.toml")
    fixed = write_scenario(TINY.replace("utc = 2026-03-20T06:00:00Z", 'preset = "day"'), "fixed.toml")
    out = str(tmp_path / "x.nc")
    runner = CliRunner()
    cases = [
        ([str(tiny), "--start", TIMES[0], "-o", out], 2, "--start and --stop go together"),
        (
            [str(fixed), "--start", TIMES[0], "--stop", TIMES[1], "-o", out],
            1,
            "form 'preset' does not change with time",
        ),
        (
            [str(tiny), "--start", TIMES[0], "--stop", TIMES[1], "--step", "fast", "-o", out],
            1,
            "step = 'fast' is not a duration",
        ),
        ([str(tiny), "--start", "2026-03-20T06:00", "--stop", TIMES[1], "-o", out], 1, "has no time zone"),
        ([str(tiny), "--frequency", "ten", "-o", out], 2, "'ten' is not a number of kHz"),
        ([str(tiny), "--frequency", "99", "-o", out], 1, "frequency_khz"),
        ([str(tiny), "--workers", "0", "-o", out], 2, "--workers"),
        ([str(tiny), "-o", str(tmp_path / "missing" / "x.nc")], 1, "does not exist"),
    ]
    for args, code, text in cases:
        result = runner.invoke(main, ["sweep", *args])
        assert result.exit_code == code, (args, result.output)
        assert text in result.output, (args, result.output)
        if code == 1:
            assert result.output.count("\n") <= 2, result.output
    assert not (tmp_path / "x.nc").exists()


@pytest.mark.slow
def test_cli_killed_sweep_resumes(tmp_path):
    # A real interruption: Ctrl-C (SIGINT) to the command while it runs, then the same command again.
    scenario = tmp_path / "tiny.toml"
    scenario.write_text(TINY, encoding="utf-8")
    out = tmp_path / "day.nc"
    command = [
        sys.executable,
        "-c",
        "import sys; from cavity.cli import main; sys.exit(main())",
        "sweep",
        str(scenario),
        "--start",
        "2026-03-20T03:00Z",
        "--stop",
        "2026-03-20T07:00Z",
        "--step",
        "20min",
        "--workers",
        "2",
        "-o",
        str(out),
    ]
    # SIGINT as a terminal sends it (a shell may have left it ignored for background jobs)
    proc = subprocess.Popen(
        [*command, "-q"],
        stderr=subprocess.PIPE,
        text=True,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL),
    )
    parts = default_parts_dir(out)
    deadline = time.time() + 300
    while time.time() < deadline and len(list(parts.glob("*.nc"))) < 3:
        time.sleep(0.2)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "finished points are kept in" in err
    assert not out.exists()
    done = len(list(parts.glob("*.nc")))
    assert 3 <= done < 13
    again = subprocess.run(command, capture_output=True, text=True, timeout=600)
    assert again.returncode == 0, again.stderr
    assert f"{done} already solved" in again.stderr and f"{13 - done} to solve" in again.stderr
    assert open_result(out).sizes["time"] == 13


def test_sweep_names_how_many_points_have_a_range_only_companion():
    from cavity.sweeps.combine import _range_only_text

    assert _range_only_text(["none", "none"]) == "none"
    text = _range_only_text(["none", "night-path", "a, b"])
    assert text.startswith("some or all paths of 2 of 3 points") and "vertical cell" in text
