"""Result files: assembly from phasors, atomic netCDF write, strict reading, CF compliance."""

from __future__ import annotations

import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from cavity.constants import C0
from cavity.errors import ResultFileError
from cavity.results import (
    B_REFERENCE_T,
    CAUTIONS,
    EZ_REFERENCE_V_PER_M,
    REQUIRED_ATTRIBUTES,
    REQUIRED_VARIABLES,
    VARIABLES,
    SolverRecord,
    apply_metadata,
    assemble_dataset,
    db_phase_to_phasor,
    open_result,
    phasor_to_db_phase,
    write_result,
)
from cavity.scenario import load_scenario

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
RECORD = SolverRecord(
    cells=4000 * 260, time_steps=12000, cell_r_m=765.0, cell_z_m=250.0, time_step_s=5.6e-7, wall_time_s=12.5
)


def far_field(range_m, frequency_hz, power_w=1e3):
    """Far-zone ground-level Ez of a short monopole over perfect ground, RMS phasor (V/m).

    ITU-R P.368 calibration: 1 kW radiated gives 300 mV/m at 1 km (E d = sqrt(90 P)); phase
    exp(-j k d) in the exp(+j omega t) convention.
    """
    k = 2 * np.pi * np.asarray(frequency_hz)[:, None] / C0
    return math.sqrt(90.0 * power_w) / range_m * np.exp(-1j * k * range_m)


def build(scenario_name="quillon_head.toml", paths=3, ground=5.0, **extra):
    s = load_scenario(EXAMPLES / scenario_name)
    r = np.linspace(1e3, 3200e3, 6400)  # 500 m spacing: less than half a wavelength at 31.5 kHz
    f = np.array([14.3e3, 31.5e3])
    z = np.linspace(0.0, 120e3, 61)
    ez = np.broadcast_to(far_field(r, f), (paths, f.size, r.size)).copy()
    if paths > 1:
        ez[0, :, r > 600e3] = np.nan  # a shorter path: not computed beyond its own range
    rx_range = np.array([g.range_m for g in s.receiver_geometry()])
    rx_ez = far_field(rx_range, f).T
    ne = np.broadcast_to(1e8 * np.exp(0.3 * (z / 1e3 - 74.0)), (paths, r.size, z.size))
    nu = np.broadcast_to(1.816e11 * np.exp(-0.15 * z / 1e3), (paths, r.size, z.size))
    kwargs = dict(
        range_m=r,
        frequency_hz=f,
        altitude_m=z,
        path_labels=[f"bearing {b} deg" for b in (268, 266, 258)][:paths],
        ez_v_per_m=ez,
        b_t=ez / C0,
        receiver_names=[x.name for x in s.receivers],
        receiver_range_m=rx_range,
        receiver_ez_v_per_m=rx_ez,
        receiver_b_t=rx_ez / C0,
        electron_density_m3=ne,
        collision_frequency_s=nu,
        ground_conductivity_s_per_m=np.full((paths, r.size), ground),
        solver=RECORD,
    )
    kwargs.update(extra)
    return s, assemble_dataset(s, **kwargs)


@pytest.fixture(scope="module")
def dataset():
    return build(
        receiver_path=[0, 1, 2],
        receiver_bearing_deg=[268.0, 266.3, 258.2],
        receiver_latitude_deg=[-16.46, -16.75, -19.9],
        receiver_longitude_deg=[39.75, 30.5, 16.6],
        path_bearing_deg=[268.0, 266.3, 258.2],
        solar_zenith_angle_deg=np.full((3, 6400), 95.0),
        hprime_km=np.full((3, 6400), 80.0),
        beta_per_km=np.full((3, 6400), 0.5),
        ground_relative_permittivity=np.full((3, 6400), 70.0),
        time_s=np.arange(100) * 1e-6,
        receiver_ez_time_series_v_per_m=np.zeros((3, 100)),
        receiver_ez_uncertainty_db=np.array([[0.2, 0.3], [0.4, np.nan], [1.5, 2.0]]),
    )


def test_calibration_levels_in_db(dataset):
    _, ds = dataset
    at_1km = ds.ez_amplitude.isel(path=0, range=0)
    # ITU-R P.368: 1 kW -> 300 mV/m at 1 km = 109.54 dB re 1 uV/m
    assert np.allclose(at_1km, 20 * math.log10(0.3 / 1e-6), atol=1e-9)
    assert np.allclose(at_1km, 109.54, atol=0.005)
    # B = E / c: 0.3 V/m -> 1.0007e-9 T = 120.0 dB re 1 fT
    assert np.allclose(ds.b_amplitude.isel(path=0, range=0), 20 * math.log10(0.3 / C0 / 1e-15), atol=1e-9)
    assert ds.ez_amplitude.attrs["units"] == "1" and "dB re 1 uV/m" in ds.ez_amplitude.attrs["long_name"]
    assert ds.b_amplitude.attrs["units"] == "1" and "dB re 1 fT" in ds.b_amplitude.attrs["long_name"]


def test_phase_unwrapped_along_range(dataset):
    _, ds = dataset
    r_m = ds.range.values * 1e3
    for k, f_khz in enumerate(ds.frequency.values):
        phase = ds.ez_phase.isel(path=1, frequency=k).values
        expected = -360.0 * f_khz * 1e3 * r_m / C0  # exp(-j k r): phase falls 360 deg per wavelength
        offset = phase[0] - expected[0]
        assert abs(offset - 360 * round(offset / 360)) < 1e-9
        assert np.allclose(phase - offset, expected, atol=1e-6)
        assert np.all(np.diff(phase) < 0)


def test_receiver_phase_on_path_branch(dataset):
    _, ds = dataset
    for i, r_km in enumerate(ds.receiver_range.values):
        for k in range(ds.sizes["frequency"]):
            on_path = np.interp(
                r_km, ds.range.values, ds.ez_phase.isel(path=int(ds.receiver_path[i]), frequency=k).values
            )
            assert abs(ds.receiver_ez_phase[i, k] - on_path) < 1.0  # same branch, 500 m sampling
    assert np.allclose(
        ds.receiver_ez_amplitude, 20 * np.log10(math.sqrt(90e3) / (ds.receiver_range.values[:, None] * 1e3) / 1e-6)
    )


def test_shorter_path_is_nan_beyond_its_range(dataset):
    _, ds = dataset
    beyond = ds.range.values > 600.0
    for name in ("ez_amplitude", "ez_phase", "b_amplitude", "b_phase"):
        values = ds[name].isel(path=0).values
        assert np.all(np.isnan(values[:, beyond])) and np.all(np.isfinite(values[:, ~beyond]))
    assert np.array_equal(ds.ez_phase.values[0][:, ~beyond], ds.ez_phase.values[1][:, ~beyond])


def test_unwrap_skips_missing_values():
    # a phase falling 40 deg per sample, with a gap narrower than half a turn: the unwrapped line
    # continues across the gap
    true = -np.radians(40.0) * np.arange(24)
    z = np.exp(1j * true)
    z[5:7] = np.nan
    _, deg = phasor_to_db_phase(z, 1.0, unwrap_axis=-1)
    assert np.all(np.isnan(deg[5:7]))
    keep = np.isfinite(deg)
    assert np.allclose(deg[keep], np.degrees(true[keep]))


def test_conversion_round_trip():
    rng = np.random.default_rng(3)
    z = (rng.standard_normal((4, 5)) + 1j * rng.standard_normal((4, 5))) * 1e-4
    db, deg = phasor_to_db_phase(z, EZ_REFERENCE_V_PER_M)
    assert np.all((deg > -180) & (deg <= 180))
    assert np.allclose(db_phase_to_phasor(db, deg, EZ_REFERENCE_V_PER_M), z, rtol=1e-12)
    db, deg = phasor_to_db_phase(z, B_REFERENCE_T, unwrap_axis=-1)
    assert np.allclose(db_phase_to_phasor(db, deg, B_REFERENCE_T), z, rtol=1e-12)
    assert phasor_to_db_phase(np.array([0j]), 1e-6)[0][0] == -np.inf


def test_metadata_and_attributes(dataset):
    s, ds = dataset
    for name in REQUIRED_VARIABLES:
        assert name in ds.variables
    for name, variable in ds.variables.items():
        for key, value in VARIABLES[name].items():
            assert variable.attrs[key] == value
    assert ds.altitude.attrs["positive"] == "up"
    for name in REQUIRED_ATTRIBUTES:
        assert name in ds.attrs
    assert ds.attrs["Conventions"] == "CF-1.10"
    assert ds.attrs["source"].startswith("cavity ")
    assert ds.attrs["cautions"] == CAUTIONS
    assert ds.attrs["scenario"] == s.text and load_scenario(ds.attrs["scenario"]) == s
    assert ds.attrs["solver_cells"] == RECORD.cells and ds.attrs["solver_time_step_s"] == RECORD.time_step_s
    assert all(not np.iscomplexobj(v.values) for v in ds.variables.values())


def test_receiver_uncertainty_variable(dataset):
    _, dataset = dataset
    # issue 15: dB on the dims of receiver_ez_amplitude, units "1", NaN where not computed
    v = dataset["receiver_ez_uncertainty"]
    assert v.dims == dataset["receiver_ez_amplitude"].dims
    assert v.attrs["units"] == "1" and "numerical uncertainty" in v.attrs["long_name"] and "dB" in v.attrs["long_name"]
    assert np.isnan(v.values[1, 1]) and v.values[2, 0] == 1.5


def test_assemble_rejects_bad_shapes():
    with pytest.raises(ValueError, match=r"ez_v_per_m has shape"):
        build(ez_v_per_m=np.zeros((2, 2, 10), complex))
    with pytest.raises(ValueError, match="NaN"):
        build(electron_density_m3=np.full((3, 6400, 61), np.nan))


def test_write_and_read_round_trip(dataset, tmp_path):
    _, ds = dataset
    written = write_result(ds, tmp_path / "run.nc")
    assert written == tmp_path / "run.nc"
    back = open_result(written)
    xr.testing.assert_equal(back, ds)  # values, dims and coordinates
    for name in ds.variables:
        assert (
            np.array_equal(back[name].values, ds[name].values, equal_nan=back[name].dtype.kind == "f")
            or back[name].dtype.kind == "O"
        )
        for key, value in ds[name].attrs.items():
            assert back[name].attrs[key] == value
    assert list(back.receiver_name.values) == list(ds.receiver_name.values)
    assert back.attrs["history"].startswith(ds.attrs["history"])
    assert back.attrs["history"].splitlines()[-1].endswith("written to run.nc")
    assert back.attrs["scenario"] == ds.attrs["scenario"]
    # coordinates have no fill value; data variables are compressed
    import netCDF4

    with netCDF4.Dataset(written) as nc:
        assert "_FillValue" not in nc["range"].ncattrs()
        assert nc["ez_amplitude"].filters()["zlib"] and nc["ez_amplitude"].filters()["complevel"] == 2
    assert sorted(os.listdir(tmp_path)) == ["run.nc"]  # no temporary file left behind


def test_refuses_to_overwrite(dataset, tmp_path):
    _, ds = dataset
    target = tmp_path / "run.nc"
    target.write_bytes(b"precious")
    with pytest.raises(ResultFileError, match=r"run\.nc already exists; use --overwrite to replace it$"):
        write_result(ds, target)
    assert target.read_bytes() == b"precious"
    write_result(ds, target, overwrite=True)
    assert open_result(target).sizes["path"] == 3


def test_missing_folder_and_file_as_folder(dataset, tmp_path):
    _, ds = dataset
    with pytest.raises(ResultFileError, match=r"folder .*no_such_folder does not exist"):
        write_result(ds, tmp_path / "no_such_folder" / "run.nc")
    (tmp_path / "plain").write_text("x")
    with pytest.raises(ResultFileError, match="plain does not exist"):
        write_result(ds, tmp_path / "plain" / "run.nc")
    with pytest.raises(ResultFileError, match="is a folder"):
        write_result(ds, tmp_path)


@pytest.mark.parametrize("error", [OSError(28, "No space left on device"), RuntimeError("HDF error")])
def test_failed_write_leaves_existing_file_intact(dataset, tmp_path, monkeypatch, error):
    _, ds = dataset
    target = tmp_path / "run.nc"
    write_result(ds, target)
    before = target.read_bytes()

    def half_write(self, path, *args, **kwargs):
        Path(path).write_bytes(b"CDF\x01 half-written")
        raise error

    monkeypatch.setattr(xr.Dataset, "to_netcdf", half_write)
    expected = ResultFileError if isinstance(error, OSError) else RuntimeError
    with pytest.raises(expected):
        write_result(ds, target, overwrite=True)
    assert target.read_bytes() == before
    assert sorted(os.listdir(tmp_path)) == ["run.nc"]


def test_complex_variables_refused(dataset, tmp_path):
    _, ds = dataset
    bad = ds.assign(ez_complex=ds.ez_amplitude * (1 + 1j))
    with pytest.raises(ValueError, match="complex"):
        write_result(bad, tmp_path / "x.nc")


def test_unknown_variable_needs_metadata(dataset):
    _, ds = dataset
    with pytest.raises(ValueError, match="'mystery'"):
        apply_metadata(ds.assign(mystery=xr.DataArray(np.arange(3.0), dims="receiver")))
    ok = ds.assign(
        mystery=xr.DataArray(np.arange(3.0), dims="receiver", attrs={"units": "km", "long_name": "mystery range"})
    )
    assert apply_metadata(ok).mystery.attrs["units"] == "km"


def test_foreign_and_corrupt_files_rejected(dataset, tmp_path):
    _, ds = dataset
    foreign = tmp_path / "foreign.nc"
    xr.Dataset({"t": ("x", np.arange(3.0))}, attrs={"source": "some other model"}).to_netcdf(foreign)
    with pytest.raises(
        ResultFileError,
        match=r"foreign\.nc is not a cavity result file \(its source attribute is 'some other model'\)$",
    ):
        open_result(foreign)
    partial = tmp_path / "partial.nc"
    write_result(ds.drop_vars(["electron_density", "collision_frequency"]), partial)
    with pytest.raises(ResultFileError, match=r"missing variables: electron_density, collision_frequency\)$"):
        open_result(partial)
    corrupt = tmp_path / "corrupt.nc"
    good = tmp_path / "good.nc"
    write_result(ds, good)
    corrupt.write_bytes(good.read_bytes()[:2000])  # truncated copy of a real file
    for bad in (corrupt, tmp_path / "text.nc"):
        if bad.name == "text.nc":
            bad.write_text("not netcdf at all\n")
        with pytest.raises(ResultFileError) as info:
            open_result(bad)
        message = str(info.value)
        assert "\n" not in message and f"{bad.name} is not a cavity result file (cannot read it as netCDF" in message
    with pytest.raises(ResultFileError, match="not found"):
        open_result(tmp_path / "absent.nc")


def _checker() -> str:
    beside = Path(sys.executable).parent / "compliance-checker"
    found = str(beside) if beside.exists() else shutil.which("compliance-checker")
    if not found:
        pytest.fail("compliance-checker is not installed (pip install '.[test]')")
    return found


def test_cf_compliance_checker_passes(dataset, tmp_path):
    # IOOS compliance checker, CF-1.10 suite: the result-file contract requires no errors.
    _, ds = dataset
    _, single = build("uniform_day.toml", paths=1, ground=math.inf)  # one path, perfect ground (inf)
    files = [write_result(ds, tmp_path / "full.nc"), write_result(single, tmp_path / "single.nc")]
    for file in files:
        report = tmp_path / f"{file.stem}.json"
        done = subprocess.run(
            [_checker(), "--test", "cf:1.10", "-f", "json", "-o", str(report), str(file)],
            capture_output=True,
            text=True,
            timeout=300,
        )
        result = json.loads(report.read_text())["cf:1.10"]
        failed = [(p["name"], p["msgs"]) for p in result["all_priorities"] if p["value"][0] < p["value"][1]]
        assert result["high_count"] == 0, failed
        assert done.returncode == 0, (done.stdout, done.stderr, failed)
