"""The time-domain solver against outside references (docs/physics.md 9), plus engine behaviour.

The checks themselves live in :mod:`cavity.checks.verify` (also run by ``cavity verify``); each names its
source. Long-range comparisons are marked slow (``pytest -m slow``).
"""

import math

import numpy as np
import pytest

from cavity.checks import verify
from cavity.errors import SolverError
from cavity.fdtd import engine as eng


def _assert(result):
    assert result.passed, f"{result.name}: expected {result.expected}, got {result.obtained} ({result.detail})"


def test_calibration_300_mv_per_m_at_1_km():
    # ITU-R P.368: 1 kW from a short monopole over perfect ground gives 300 mV/m at 1 km (1/d beyond).
    _assert(verify.check_calibration())


def test_two_mode_beat_in_a_conducting_guide():
    # docs/physics.md 9.5 / Wait 1960: h = 70 km at 3 kHz, nulls every 333.5 km within 2 %.
    _assert(verify.check_two_mode_beat())


def test_parallel_plates_mode_sum():
    # Wait 1960 exact mode sum (scipy.special.hankel2), within 0.5 dB from 50 km.
    _assert(verify.check_plates(600e3))


def test_absorbers_reflect_less_than_minus_40_db():
    # docs/physics.md 9.6: far-end and top CPML against a larger domain.
    _assert(verify.check_absorbers())


def test_dense_plasma_stays_bounded():
    # docs/physics.md 9.7 / Yu and Simpson 2010: omega_p dt >> 1 bounded for 1e5 steps.
    _assert(verify.check_plasma_stability())


def test_ground_wave_over_dry_ground():
    # Exact Sommerfeld integral for a Leontovich plane (cavity.reference.groundwave), 0.3 dB.
    _assert(verify.check_ground_wave((100e3, 300e3)))


@pytest.mark.slow
def test_day_guide_against_normal_modes_1000_km():
    _assert(verify.check_ionosphere("day over sea", 20e3, 71.8, 0.335, 5.0, 70.0, 1000e3, 1.0))


@pytest.mark.slow
@pytest.mark.parametrize("name", [n for n, _ in verify.FULL])
def test_long_range_checks(name):
    _assert(dict(verify.FULL)[name]())


def _small_guide(**kw):
    # h = 55 km keeps every plate mode away from cutoff at 10 kHz (TM3 8.2 kHz, TM4 10.9 kHz):
    # a mode at cutoff rings for ever and no finite run converges
    settings = dict(frequencies_hz=(10e3,), max_range_m=150e3, dr_m=1000.0, dz_m=1000.0, earth_curvature=False)
    settings.update(kw)
    return eng.Medium.uniform(ceiling_m=55e3), eng.Settings(**settings)


def test_serial_and_parallel_kernels_give_identical_fields():
    # docs/physics.md 11: each column is updated independently, so thread count must not change a bit.
    import numba

    medium, settings = _small_guide(max_duration_s=2e-3)
    old = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = eng.run(medium, settings)
        numba.set_num_threads(max(2, old))
        many = eng.run(medium, settings)
    finally:
        numba.set_num_threads(old)
    assert np.array_equal(one.ez, many.ez)
    assert np.array_equal(one.hphi, many.hphi)


def test_unstable_run_stops_with_step_and_region():
    # A time step above the stability limit (docs/physics.md 2) must end in a clear error, not garbage.
    medium, settings = _small_guide(courant_safety=1.5, max_duration_s=5e-3)
    with pytest.raises(SolverError) as err:
        eng.run(medium, settings)
    msg = str(err.value)
    assert "unstable at step" in msg and "r = " in msg and "z = " in msg and "\n" not in msg


def test_transfer_function_is_independent_of_the_waveform():
    # Linear system: the DFT ratio field/current must not depend on the source waveform.
    from cavity.fdtd.source import GaussianPulse, ToneBursts

    medium, settings = _small_guide()
    a = eng.run(medium, eng.Settings(**{**settings.__dict__, "waveform": ToneBursts((10e3,))}))
    b = eng.run(medium, eng.Settings(**{**settings.__dict__, "waveform": GaussianPulse(6e3, 14e3)}))
    sel = a.range_m > 20e3
    assert np.max(np.abs(20 * np.log10(np.abs(a.ez[0][sel] / b.ez[0][sel])))) < 0.05


def test_source_calibration_formula():
    # ITU-R P.368 / docs/physics.md 6: P = 160 pi^2 (I l / lambda)^2.
    from cavity.fdtd.source import moment_for_power

    m = moment_for_power(1e3, 20e3)
    lam = 299_792_458.0 / 20e3
    assert 160 * math.pi**2 * (m / lam) ** 2 == pytest.approx(1e3)


def test_public_simulate_survives_importing_the_orchestration_module(tmp_path):
    # The package's function `cavity.simulate` must not be replaced by a submodule of that name.
    import cavity
    import cavity.solve  # noqa: F401

    assert callable(cavity.simulate) and cavity.simulate.__module__ == "cavity"


def _two_mode_field(dr_m, n=3200):
    """Two interfering modes with cylindrical spreading: deep nulls every 2 pi / (k1 - k2) (mode beat,
    Wait 1960); amplitudes 1 and 0.9 make the nulls 25.6 dB deep (20 log10(0.1 / 1.9))."""
    r = (np.arange(n) + 1) * dr_m
    k1, k2 = 2 * math.pi / 15.0e3, 2 * math.pi / 15.0e3 - 2 * math.pi / 850e3  # nulls every 850 km
    return r, (np.exp(-1j * k1 * r) + 0.9 * np.exp(-1j * k2 * r)) / np.sqrt(r)


def test_settling_test_judges_changes_against_the_regional_level_not_a_null():
    dr = 937.0
    tol = 10 ** (0.002 / 20) - 1
    r, f = _two_mode_field(dr)
    null = int(np.argmin(np.abs(f[300:900]))) + 300  # the null near 540 km
    level = eng.settling_level(f, dr)
    # the regional level is the modes' sum (1.9 / sqrt(r) within the window), within spreading over +-400 km
    assert level[null] == pytest.approx(1.9 / math.sqrt(r[null]), rel=0.6)
    assert abs(f[null]) / level[null] < 10 ** (-20 / 20)
    # a ringing at the null: 0.3 % of the field there, 1.6e-4 of the level around it, 1.5e-3 of the
    # +-25-column envelope
    ring = f.copy()
    ring[null - 3 : null + 4] += 0.003 * abs(f[null])
    assert not eng.Simulation._converged(ring, f, tol)  # the former +-25-column envelope holds the run
    assert eng.Simulation._converged(ring, f, tol, dr)
    # a change of 3 tol of the field away from the nulls holds it still
    peak = int(np.argmax(np.abs(f[300:900]) * np.sqrt(r[300:900]))) + 300
    moved = f.copy()
    moved[peak] *= 1 + 3 * tol
    assert not eng.Simulation._converged(moved, f, tol, dr)


def test_settling_level_is_not_set_by_the_field_near_the_transmitter():
    dr = 937.0
    tol = 10 ** (0.002 / 20) - 1
    r, f = _two_mode_field(dr)
    f[:5] *= 1e6  # a strong near field in the first columns
    i = 60  # 56 km out: its windows stay beyond half its range
    assert eng.settling_level(f, dr)[i] < 10 * abs(f[i])
    moved = f.copy()
    moved[i] *= 1 + 3 * tol
    assert not eng.Simulation._converged(moved, f, tol, dr)
