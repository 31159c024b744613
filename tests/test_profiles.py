"""Tests of the profiles package against published formulas and values (source named beside each)."""

from __future__ import annotations

import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc
import xarray as xr

import profiles
from profiles import ProfileError
from profiles.daynight import ExponentialParameters

DATA = Path(__file__).parent / "data"
PAIRS = [(71.8, 0.335), (85.1, 0.63), (74.0, 0.30), (60.0, 1.5), (95.0, 0.2)]


# ---------------------------------------------------------------- exponential (Wait-Spies) profile


@pytest.mark.parametrize("hprime_km, beta_per_km", PAIRS)
def test_conductivity_parameter_at_hprime_is_2506e5(hprime_km, beta_per_km):
    # Wait and Spies 1964 (NBS TN 300); docs/physics.md 9.1: omega_r(h') = 2.506e5 /s for any h', beta.
    omega_r = profiles.conductivity_parameter(hprime_km * 1e3, hprime_km, beta_per_km)
    assert omega_r == pytest.approx(2.506e5, rel=2e-4)


@pytest.mark.parametrize("hprime_km, beta_per_km", PAIRS)
def test_conductivity_parameter_grows_as_exp_beta(hprime_km, beta_per_km):
    # Wait and Spies 1964: omega_r = 2.506e5 exp(beta (z - h')), from the Ne and nu formulas.
    z_km = np.linspace(hprime_km - 15.0, hprime_km + 10.0, 11)
    omega_r = profiles.conductivity_parameter(z_km * 1e3, hprime_km, beta_per_km)
    np.testing.assert_allclose(omega_r, 2.506e5 * np.exp(beta_per_km * (z_km - hprime_km)), rtol=2e-4)


def test_collision_frequency_at_70_km():
    # Wait and Spies 1964; docs/physics.md 9.1: nu(70 km) = 5.0e6 /s.
    assert profiles.collision_frequency(70e3) == pytest.approx(5.0e6, rel=1e-3)


def test_collision_frequency_scale_height():
    # Wait and Spies 1964: nu falls by a factor e every 1/0.15 km = 6.67 km.
    ratio = profiles.collision_frequency(60e3) / profiles.collision_frequency(60e3 + 1e3 / 0.15)
    assert ratio == pytest.approx(math.e, rel=1e-12)


@pytest.mark.parametrize("hprime_km, beta_per_km", PAIRS)
def test_electron_density_at_hprime(hprime_km, beta_per_km):
    # Wait and Spies 1964: Ne(h') = 1.43e13 exp(-0.15 h') m^-3, independent of beta.
    ne = profiles.electron_density(hprime_km * 1e3, hprime_km, beta_per_km)
    assert ne == pytest.approx(1.43e13 * math.exp(-0.15 * hprime_km), rel=1e-12)


def test_electron_density_gradient_is_beta_minus_015():
    # Wait and Spies 1964: d ln Ne / dz = beta - 0.15 per km.
    ne = profiles.electron_density(np.array([70e3, 80e3]), 85.1, 0.63)
    assert math.log(ne[1] / ne[0]) / 10.0 == pytest.approx(0.63 - 0.15, rel=1e-12)


def test_electron_density_known_values():
    # Wait and Spies 1964 formula evaluated by hand (day preset, 60 km):
    # 1.43e13 * exp(-0.15*71.8) * exp(0.185*(-11.8)) = 3.388e7 m^-3.
    assert profiles.electron_density(60e3, 71.8, 0.335) == pytest.approx(3.388e7, rel=1e-3)


def test_plasma_frequency_constant_against_scipy():
    # e^2 / (eps0 m_e) from scipy.constants (CODATA 2022) = 3182.6 rad^2 s^-2 m^3 (docs/physics.md 1).
    expected = sc.e**2 / (sc.epsilon_0 * sc.m_e)
    assert profiles.plasma_frequency_squared(1.0) == pytest.approx(expected, rel=1e-8)
    assert round(float(profiles.plasma_frequency_squared(1.0)), 1) == 3182.6


def test_plasma_frequency_of_ionosphere_example():
    # f_p = 8.98 sqrt(Ne) Hz (handbook rule, Ne in m^-3): 1e10 m^-3 -> 898 kHz.
    fp_hz = np.sqrt(profiles.plasma_frequency_squared(1e10)) / (2 * np.pi)
    assert fp_hz == pytest.approx(898e3, rel=1e-3)


def test_electron_density_cap():
    # Documented taper: held at the 100 km value above the cap; None leaves the exponential.
    z = np.array([100e3, 110e3, 150e3])
    capped = profiles.electron_density(z, 71.8, 0.335)
    np.testing.assert_array_equal(capped, capped[0])
    uncapped = profiles.electron_density(z, 71.8, 0.335, cap_altitude_m=None)
    assert uncapped[1] / uncapped[0] == pytest.approx(math.exp((0.335 - 0.15) * 10.0), rel=1e-12)
    low = profiles.electron_density(np.array([60e3, 90e3]), 71.8, 0.335, cap_altitude_m=80e3)
    assert low[1] == pytest.approx(profiles.electron_density(80e3, 71.8, 0.335), rel=1e-14)


def test_broadcasting_per_range_column():
    # Per-column parameters (ncol, 1) against altitudes (nz,) give (ncol, nz), equal to column loops.
    z = np.linspace(50e3, 110e3, 7)
    hprime = np.array([[71.8], [78.0], [85.1]])
    beta = np.array([[0.335], [0.5], [0.63]])
    ne = profiles.electron_density(z, hprime, beta)
    wr = profiles.conductivity_parameter(z, hprime, beta)
    assert ne.shape == wr.shape == (3, 7)
    for k in range(3):
        np.testing.assert_array_equal(ne[k], profiles.electron_density(z, hprime[k, 0], beta[k, 0]))
        np.testing.assert_array_equal(wr[k], profiles.conductivity_parameter(z, hprime[k, 0], beta[k, 0]))


def test_relative_permittivity_limits():
    # Cold-plasma theory (any plasma text): nu = 0 gives 1 - wp^2/w^2; with exp(+j w t) losses make
    # Im(eps_r) negative; nu >> w gives the Drude conductor eps_r ~ 1 - j sigma/(w eps0),
    # sigma = eps0 wp^2 / nu.
    f, ne = 20e3, 1e8
    w = 2 * np.pi * f
    wp2 = sc.e**2 * ne / (sc.epsilon_0 * sc.m_e)
    assert profiles.relative_permittivity(f, ne, 0.0) == pytest.approx(1 - wp2 / w**2, rel=1e-8)
    eps = profiles.relative_permittivity(f, ne, 5e6)
    assert eps.imag < 0
    nu = 1e12
    sigma = sc.epsilon_0 * wp2 / nu
    assert profiles.relative_permittivity(f, ne, nu).imag == pytest.approx(-sigma / (w * sc.epsilon_0), rel=1e-6)


@pytest.mark.parametrize("hprime_km, beta_per_km", PAIRS)
@pytest.mark.parametrize("frequency_hz", [300.0, 3e3, 20e3, 40e3])
def test_reflection_height_solves_omega_r_equals_omega(frequency_hz, hprime_km, beta_per_km):
    # Wait and Spies 1964 criterion: omega_r(z) = 2 pi f; checked by evaluating omega_r at the height.
    z_m = profiles.reflection_height_m(frequency_hz, hprime_km, beta_per_km)
    if z_m < 0:  # formal heights below ground are out of the checkable range
        pytest.skip("formal reflection height below ground")
    omega_r = profiles.conductivity_parameter(z_m, hprime_km, beta_per_km)
    assert omega_r == pytest.approx(2 * np.pi * frequency_hz, rel=1e-9)


def test_reflection_height_day_20_khz():
    # Wait-Spies closed form with the published constant 2.506e5 /s: h' + ln(2 pi 20e3 / 2.506e5)/beta.
    expected_km = 71.8 + math.log(2 * math.pi * 20e3 / 2.506e5) / 0.335
    assert profiles.reflection_height_m(20e3, 71.8, 0.335) / 1e3 == pytest.approx(expected_km, abs=1e-3)


def test_reflection_height_vectorised():
    f = np.array([5e3, 10e3, 20e3])
    z = profiles.reflection_height_m(f, 85.1, 0.63)
    assert z.shape == (3,) and np.all(np.diff(z) > 0)


@pytest.mark.parametrize(
    "call, field",
    [
        (lambda: profiles.electron_density(70e3, 150.0, 0.3), "hprime_km"),
        (lambda: profiles.electron_density(70e3, 74.0, 0.0), "beta_per_km"),
        (lambda: profiles.electron_density(-1.0, 74.0, 0.3), "altitude_m"),
        (lambda: profiles.electron_density([70e3, np.nan], 74.0, 0.3), "altitude_m"),
        (lambda: profiles.collision_frequency(600e3), "altitude_m"),
        (lambda: profiles.plasma_frequency_squared(-1.0), "electron_density_m3"),
        (lambda: profiles.relative_permittivity(0.0, 1e8, 1e6), "frequency_hz"),
        (lambda: profiles.relative_permittivity(1e3, 1e8, -1.0), "collision_frequency_s"),
        (lambda: profiles.reflection_height_m(-20e3, 74.0, 0.3), "frequency_hz"),
        (lambda: profiles.electron_density("high", 74.0, 0.3), "altitude_m"),
    ],
)
def test_bad_inputs_raise_one_line_profile_error(call, field):
    with pytest.raises(ProfileError) as info:
        call()
    message = str(info.value)
    assert field in message and "\n" not in message
    assert isinstance(info.value, ValueError)


def test_wait_spies_profile_dataset_layout():
    ds = profiles.wait_spies_profile(71.8, 0.335)
    alt = ds["altitude"]
    assert alt.size == 321 and alt[0] == 40.0 and alt[-1] == 120.0
    assert np.allclose(np.diff(alt.values), 0.25)
    assert alt.attrs["units"] == "km" and alt.attrs["positive"] == "up" and alt.attrs["standard_name"] == "altitude"
    assert ds["electron_density"].attrs["units"] == "m-3"
    assert ds["collision_frequency"].attrs["units"] == "s-1"
    assert ds.attrs["hprime_km"] == 71.8 and ds.attrs["beta_per_km"] == 0.335
    assert "Wait and Spies" in ds.attrs["source"] and "Technical Note 300" in ds.attrs["source"]
    np.testing.assert_array_equal(
        ds["electron_density"].values, profiles.electron_density(alt.values * 1e3, 71.8, 0.335)
    )
    custom = profiles.wait_spies_profile(85.1, 0.63, altitude_m=[60e3, 70e3, 80e3], cap_altitude_m=None)
    assert custom["altitude"].values.tolist() == [60.0, 70.0, 80.0] and "cap_altitude_km" not in custom.attrs
    with pytest.raises(ProfileError, match="strictly increasing"):
        profiles.wait_spies_profile(85.1, 0.63, altitude_m=[70e3, 60e3])
    with pytest.raises(ProfileError, match="hprime_km"):
        profiles.wait_spies_profile([70.0, 80.0], 0.63)


# ---------------------------------------------------------------- day/night presets and transition


def test_presets_values_and_references():
    # Published values (docs/physics.md 1): Thomson et al. 2011, 2017, 2007; textbook values from memory.
    expected = {
        "day": (71.8, 0.335, ["Thomson", "Clilverd", "Rodger", "2011", "116", "A03310"]),
        "day-2017": (72.8, 0.345, ["Thomson", "Clilverd", "Rodger", "2017", "Space Physics", "122"]),
        "night": (85.1, 0.63, ["Thomson", "Clilverd", "McRae", "2007", "112"]),
        "textbook-day": (74.0, 0.30, ["from memory"]),
        "textbook-night": (85.0, 0.50, ["from memory"]),
    }
    for name, (hprime, beta, words) in expected.items():
        p = profiles.PRESETS[name]
        assert (p.hprime_km, p.beta_per_km) == (hprime, beta)
        for word in words:
            assert word in p.reference, (name, word)
        assert profiles.preset(name.upper()) is p


def test_preset_unknown_suggests_closest():
    with pytest.raises(ProfileError, match="did you mean 'night'"):
        profiles.preset("nigth")
    with pytest.raises(ProfileError, match="choose from"):
        profiles.preset("zzz")


def test_exponential_parameters_frozen_and_checked():
    p = profiles.PRESETS["day"]
    with pytest.raises(AttributeError):
        p.hprime_km = 70.0
    with pytest.raises(ProfileError, match="beta_per_km"):
        ExponentialParameters(70.0, 5.0, "bad", "none")


def test_linear_transition_at_reference_angles():
    # Common practice (docs/physics.md 1): day values for chi <= 90, night for chi >= 99, linear between;
    # 94.5 deg is the midpoint.
    chi = np.array([80.0, 90.0, 94.5, 99.0, 120.0])
    hprime, beta = profiles.linear_transition(chi)
    day, night = profiles.PRESETS["day"], profiles.PRESETS["night"]
    np.testing.assert_allclose(
        hprime, [day.hprime_km, day.hprime_km, (day.hprime_km + night.hprime_km) / 2, night.hprime_km, night.hprime_km]
    )
    np.testing.assert_allclose(
        beta,
        [
            day.beta_per_km,
            day.beta_per_km,
            (day.beta_per_km + night.beta_per_km) / 2,
            night.beta_per_km,
            night.beta_per_km,
        ],
    )
    assert profiles.daylight_class(chi).tolist() == ["day", "day", "transition", "night", "night"]


def test_transition_shape_and_options():
    chi = np.full((2, 3), 95.0)
    hprime, beta = profiles.linear_transition(chi, day=profiles.PRESETS["textbook-day"], night_limit_deg=100.0)
    assert hprime.shape == beta.shape == (2, 3)
    assert np.allclose(hprime, 74.0 + 0.5 * (85.1 - 74.0))
    with pytest.raises(ProfileError, match="night_limit_deg"):
        profiles.linear_transition(95.0, day_limit_deg=99.0, night_limit_deg=90.0)
    with pytest.raises(ProfileError, match="solar_zenith_deg"):
        profiles.linear_transition(200.0)


def test_parameters_for_zenith_with_a_user_rule():
    def step_rule(solar_zenith_deg, threshold_deg=96.0):
        night = solar_zenith_deg >= threshold_deg
        return np.where(night, 87.0, 70.0), np.where(night, 0.5, 0.4)

    chi = np.array([50.0, 97.0])
    hprime, beta = profiles.parameters_for_zenith(chi, rule=step_rule, threshold_deg=98.0)
    assert hprime.tolist() == [70.0, 70.0] and beta.tolist() == [0.4, 0.4]
    default = profiles.parameters_for_zenith(chi)
    np.testing.assert_array_equal(default[0], profiles.linear_transition(chi)[0])
    with pytest.raises(ProfileError, match="hprime_km"):
        profiles.parameters_for_zenith(chi, rule=lambda c: (np.full(c.shape, 500.0), np.full(c.shape, 0.5)))
    with pytest.raises(ProfileError, match="shapes"):
        profiles.parameters_for_zenith(chi, rule=lambda c: (np.array(80.0), np.array(0.5)))


def test_terminator_zenith():
    # docs/physics.md 1: geometry chi = 90 + arccos(a / (a + h)): 97.8 deg at 60 km, 100.1 deg at 100 km.
    chi = profiles.terminator_zenith_deg(np.array([60e3, 100e3]))
    np.testing.assert_allclose(chi, [97.8, 100.1], atol=0.05)
    # Independent form (tangent-line geometry): the horizon dip angle satisfies tan = sqrt(2 a h + h^2)/a.
    a, h = 6371e3, 80e3
    assert profiles.terminator_zenith_deg(h) == pytest.approx(
        90 + math.degrees(math.atan(math.sqrt(2 * a * h + h * h) / a))
    )
    assert profiles.terminator_zenith_deg(0.0) == 90.0


# ---------------------------------------------------------------- profile files


def test_read_fixture_csv():
    ds = profiles.read_profile(DATA / "profile_night_invented.csv")
    assert ds["altitude"].values.tolist() == [50.0, 60.0, 70.0, 80.0, 90.0, 100.0]
    assert ds["electron_density"].values[2] == 1.0e5
    assert ds["collision_frequency"].values[-1] == 5.5e4
    assert ds.attrs["source"] == "profile_night_invented.csv"
    assert ds["altitude"].attrs == profiles.wait_spies_profile(71.8, 0.335)["altitude"].attrs


@pytest.mark.parametrize("suffix", [".csv", ".nc"])
def test_round_trip(tmp_path, suffix):
    original = profiles.wait_spies_profile(85.1, 0.63)
    path = profiles.write_profile(original, tmp_path / f"night{suffix}")
    back = profiles.read_profile(path)
    np.testing.assert_allclose(back["altitude"].values, original["altitude"].values, rtol=1e-12)
    np.testing.assert_allclose(back["electron_density"].values, original["electron_density"].values, rtol=1e-9)
    np.testing.assert_allclose(back["collision_frequency"].values, original["collision_frequency"].values, rtol=1e-9)
    assert back.attrs["source"] == f"night{suffix}"
    assert [p.name for p in tmp_path.iterdir()] == [f"night{suffix}"]  # no temporary file left
    with pytest.raises(ProfileError, match="exists"):
        profiles.write_profile(original, path)
    profiles.write_profile(original, path, overwrite=True)


def test_read_netcdf_units_and_layouts(tmp_path):
    z_m = np.array([60e3, 70e3, 80e3])
    ds = xr.Dataset(
        {
            "electron_density": ("altitude", [1.0, 10.0, 100.0], {"units": "cm-3"}),
            "collision_frequency": ("altitude", [2e7, 5e6, 1e6]),
        },
        coords={"altitude": ("altitude", z_m, {"units": "m"})},
    )
    ds.to_netcdf(tmp_path / "a.nc")
    back = profiles.read_profile(tmp_path / "a.nc")
    assert back["altitude"].values.tolist() == [60.0, 70.0, 80.0]
    assert back["electron_density"].values.tolist() == [1e6, 1e7, 1e8]  # 1 cm^-3 = 1e6 m^-3

    ds["altitude"].attrs = {}
    ds.to_netcdf(tmp_path / "b.nc")
    with pytest.raises(ProfileError, match="altitude has no units"):
        profiles.read_profile(tmp_path / "b.nc")

    ds["altitude"].attrs = {"units": "furlong"}
    ds.to_netcdf(tmp_path / "c.nc")
    with pytest.raises(ProfileError, match="furlong"):
        profiles.read_profile(tmp_path / "c.nc")

    ds.rename({"collision_frequency": "collision_freq"}).assign_coords(
        altitude=("altitude", z_m, {"units": "m"})
    ).to_netcdf(tmp_path / "d.nc")
    with pytest.raises(ProfileError, match="missing variable.*collision_frequency"):
        profiles.read_profile(tmp_path / "d.nc")

    wide = xr.Dataset(
        {
            "electron_density": (("range", "altitude"), np.ones((2, 3))),
            "collision_frequency": (("range", "altitude"), np.ones((2, 3))),
        },
        coords={"altitude": ("altitude", [60.0, 70.0, 80.0], {"units": "km"})},
    )
    wide.to_netcdf(tmp_path / "e.nc")
    with pytest.raises(ProfileError, match="single column"):
        profiles.read_profile(tmp_path / "e.nc")


HEADER = "altitude_km,electron_density_m3,collision_frequency_s\n"


@pytest.mark.parametrize(
    "text, expected",
    [
        ("", "is empty"),
        ("# only a comment\n\n", "no header"),
        ("altitude_km,electron_density,collision_frequency_s\n60,1,1\n", "missing column(s) electron_density_m3"),
        ("height,ne\n60,1\n", "missing column(s) altitude_km, electron_density_m3, collision_frequency_s"),
        (HEADER + "60,1e6,2e7\n70,abc,5e6\n80,1e8,1e6\n", "line 3: electron_density_m3 = 'abc' is not a number"),
        (HEADER + "60,1e6,2e7\n70,nan,5e6\n80,1e8,1e6\n", "line 3: electron_density_m3 = nan"),
        (HEADER + "60,1e6,2e7\n70,1e7,inf\n80,1e8,1e6\n", "line 3: collision_frequency_s = inf"),
        (HEADER + "60,1e6,2e7\n60,1e7,5e6\n80,1e8,1e6\n", "strictly increasing"),
        (HEADER + "60,1e6,2e7\n70,-1e7,5e6\n80,1e8,1e6\n", "electron_density_m3 = -1e+07 is outside the allowed range"),
        (
            HEADER + "60,1e6,2e7\n70,1e7,-5e6\n80,1e8,1e6\n",
            "collision_frequency_s = -5e+06 is outside the allowed range",
        ),
        (HEADER + "60,1e6,2e7\n70,1e7,0\n80,1e8,1e6\n", "collision_frequency_s = 0 is outside the allowed range"),
        (HEADER + "60,1e6,2e7\n70,1e7,5e6\n", "has 2 levels; at least 3"),
        (
            HEADER + "60,1e6,2e7\n70,1e7,5e6\n600,1e8,1e6\n",
            "altitude_km = 600 is outside the allowed range (0 to 500 km)",
        ),
        (HEADER + "-5,1e6,2e7\n70,1e7,5e6\n80,1e8,1e6\n", "altitude_km = -5 is outside"),
        (HEADER + "60,1e6,2e7\n70,1e7\n80,1e8,1e6\n", "line 3: 2 fields"),
    ],
)
def test_csv_validation_errors(tmp_path, text, expected):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(ProfileError) as info:
        profiles.read_profile(path)
    message = str(info.value)
    assert expected in message, message
    assert "\n" not in message


def test_unordered_fixture_names_the_line():
    with pytest.raises(ProfileError, match="profile_unordered.csv line 5: altitude_km = 65"):
        profiles.read_profile(DATA / "profile_unordered.csv")


def test_unreadable_files(tmp_path):
    with pytest.raises(ProfileError, match="does not exist"):
        profiles.read_profile(tmp_path / "missing.csv")
    with pytest.raises(ProfileError, match="is a folder"):
        profiles.read_profile(tmp_path)
    binary = tmp_path / "binary.csv"
    binary.write_bytes(b"\xff\xfe\x00\x81garbage")
    with pytest.raises(ProfileError, match="neither UTF-8"):
        profiles.read_profile(binary)
    broken = tmp_path / "broken.nc"
    broken.write_bytes(b"\x89HDF\r\n\x1a\n" + b"\x00" * 40)
    with pytest.raises(ProfileError, match="cannot be read as netCDF"):
        profiles.read_profile(broken)


def test_sample_profile_exact_for_exponential():
    # Log-linear interpolation reproduces an exponential exactly (Wait-Spies profile on 0.25 km levels).
    ds = profiles.wait_spies_profile(71.8, 0.335, cap_altitude_m=None)
    z = np.array([40e3, 55.13e3, 70.01e3, 89.9e3, 120e3])
    ne, nu = profiles.sample_profile(ds, z)
    np.testing.assert_allclose(ne, profiles.electron_density(z, 71.8, 0.335, cap_altitude_m=None), rtol=1e-9)
    np.testing.assert_allclose(nu, profiles.collision_frequency(z), rtol=1e-9)


def test_sample_profile_outside_and_zero_levels():
    ds = profiles.read_profile(DATA / "profile_night_invented.csv")
    ne, nu = profiles.sample_profile(ds, np.array([[20e3, 50e3, 55e3], [65e3, 100e3, 150e3]]))
    assert ne.shape == nu.shape == (2, 3)
    # Below the bottom: no electrons; nu continues the log-linear trend of the two lowest levels.
    assert ne[0, 0] == 0.0
    assert nu[0, 0] == pytest.approx(3.0e8 * (3.0e8 / 2.2e7) ** 3, rel=1e-9)
    # Zero density between two zero levels stays zero; interval 60-70 km (0 -> 1e5) is linear.
    assert ne[0, 1] == 0.0 and ne[0, 2] == 0.0
    assert ne[1, 0] == pytest.approx(0.5e5)
    assert nu[1, 0] == pytest.approx(math.sqrt(2.2e7 * 5.0e6), rel=1e-12)  # log-linear midpoint
    # Above the top: held.
    assert ne[1, 2] == 3.0e9 and nu[1, 2] == 5.5e4 and ne[1, 1] == 3.0e9


def test_sampled_reflection_height_matches_closed_form():
    # Numerical crossing on a sampled profile against the Wait-Spies closed form.
    f = np.array([1e3, 10e3, 20e3, 30e3])
    for hprime, beta in [(71.8, 0.335), (85.1, 0.63)]:
        ds = profiles.wait_spies_profile(hprime, beta)
        got = profiles.sampled_reflection_height_m(ds, f)
        np.testing.assert_allclose(got, profiles.reflection_height_m(f, hprime, beta), atol=1.0)
    fixture = profiles.read_profile(DATA / "profile_night_invented.csv")
    z = profiles.sampled_reflection_height_m(fixture, [20e3, 1e9])
    ne, nu = profiles.sample_profile(fixture, z[:1])
    assert profiles.plasma_frequency_squared(ne[0]) / nu[0] == pytest.approx(2 * np.pi * 20e3, rel=1e-6)
    assert np.isnan(z[1])


def test_profiles_does_not_import_cavity_or_matplotlib():
    # Architecture rule: profiles stands alone and imports no heavy plotting package.
    code = (
        "import sys, profiles; "
        "bad = [m for m in sys.modules if m.split('.')[0] in ('cavity', 'matplotlib', 'cartopy', 'numba')]; "
        "assert not bad, bad"
    )
    subprocess.run([sys.executable, "-c", code], check=True)
