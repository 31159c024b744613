"""The compiled kernels against short plain-numpy twins of the same update equations.

The twins restate the equations of cavity.fdtd.kernels (Yee r-z scheme with the axis rule, E-J
plasma update of Yu and Simpson 2010, CPML of Roden and Gedney 2000, recursive impedance ground)
in array form; a few steps from random fields on a small grid must agree to float32 round-off.
"""

import numpy as np
import pytest

from cavity.fdtd import kernels as K

RNG = np.random.default_rng(7)
F32 = np.float32


def _dez_dr(ez, ar1, ar2):
    """dEz/dr at the H columns from the stencil tables: Ez = 0 beyond the last column, Ez(-1) = Ez(1)."""
    nr, nz = ez.shape
    pad = np.zeros((nr + 3, nz), ez.dtype)
    pad[1 : nr + 1] = ez
    pad[0] = ez[1]
    return ar1[:, None] * (pad[2 : nr + 2] - pad[1 : nr + 1]) + ar2[:, None] * (pad[3 : nr + 3] - pad[0:nr])


def np_step_h(
    hp,
    ez,
    er,
    inv_dr,
    inv_dz,
    ar1,
    ar2,
    kz1,
    kz2,
    ch,
    ha,
    hb,
    sib_q,
    sib_w,
    sib_psi,
    jz0,
    b_zh,
    c_zh,
    kd_zh,
    psi_zh,
    ir0,
    b_rh,
    c_rh,
    kd_rh,
    psi_rh,
    ch_far,
    acc_re,
    acc_im,
    cos_h,
    sin_h,
    n_cols,
):
    nr, nz = hp.shape
    assert n_cols == nr  # the twin steps the whole grid
    ez_pad = np.vstack([ez, np.zeros((1, nz), ez.dtype)])  # Ez = 0 beyond the last column
    dez2 = (ez_pad[1:] - ez_pad[:-1]) * inv_dr  # second order: the far-end layer's derivative
    dez = _dez_dr(ez, ar1, ar2)
    der2 = (er[:, 1:] - er[:, :-1]) * inv_dz
    er_pad = np.zeros((nr, nz + 3), er.dtype)
    er_pad[:, 1 : nz + 2] = er  # er_pad[:, j + 1] = Er_j
    der = kz1 * (er_pad[:, 2 : nz + 2] - er_pad[:, 1 : nz + 1]) + kz2 * (er_pad[:, 3 : nz + 3] - er_pad[:, 0:nz])
    sib_psi[:] = sib_q[None, :] * sib_psi + sib_w * hp[:, 0][:, None]
    ground = ha * hp[:, 0] + hb * (dez[:, 0] - er[:, 1] * inv_dz + sib_psi.sum(axis=1) * inv_dz)
    hp[:, 1:] += ch * (dez[:, 1:] - der[:, 1:])
    hp[:, 0] = ground
    d = -der2[:, jz0:]
    psi_zh[:] = b_zh * psi_zh + c_zh * d
    hp[:, jz0:] += ch * (kd_zh * d + psi_zh)
    d = dez2[ir0:]
    psi_rh[:] = b_rh[:, None] * psi_rh + c_rh[:, None] * d
    hp[ir0:] += ch_far * (kd_rh[:, None] * d + psi_rh)
    acc_re += hp[:, 0][None, :] * cos_h[:, None]
    acc_im -= hp[:, 0][None, :] * sin_h[:, None]


def np_step_e(
    ez,
    er,
    hp,
    ecoef,
    ke1,
    ke2,
    cez,
    cer,
    jp0,
    ed_z,
    qa_z,
    qb_z,
    prof_z,
    jz,
    ed_r,
    qa_r,
    qb_r,
    prof_r,
    jr,
    jz0,
    b_ze,
    c_ze,
    kd_ze,
    psi_ze,
    ce_top,
    ir0,
    b_re,
    c_re,
    kd_re,
    psi_re,
    ce_far,
    src,
    acc_re,
    acc_im,
    cos_e,
    sin_e,
    n_cols,
):
    nr, nz = ez.shape
    assert n_cols == nr
    qb_z, qb_r = qb_z[prof_z], qb_r[prof_r]  # each column's row of the distinct profiles
    pad = np.zeros((nr + 3, nz), hp.dtype)
    pad[2 : nr + 2] = hp  # pad[k + 2] = H_k
    curl_z = (
        ecoef[:, 0:1] * pad[3 : nr + 3]
        + ecoef[:, 1:2] * pad[2 : nr + 2]
        + ecoef[:, 2:3] * pad[1 : nr + 1]
        + ecoef[:, 3:4] * pad[0:nr]
    )
    hz = np.zeros((nr, nz + 3), hp.dtype)
    hz[:, 2 : nz + 2] = hp  # hz[:, j + 2] = H_j
    j = np.arange(1, nz)
    curl_r = np.zeros_like(er)
    curl_r[:, j] = -(ke1[j] * (hz[:, j + 2] - hz[:, j + 1]) + ke2[j] * (hz[:, j + 3] - hz[:, j]))
    ez[:, :jp0] += cez[:jp0] * curl_z[:, :jp0]
    er[:, 1:jp0] += cer[1:jp0] * curl_r[:, 1:jp0]
    for e, curl, ed, qa, qb, jc in ((ez, curl_z, ed_z, qa_z, qb_z, jz), (er, curl_r, ed_r, qa_r, qb_r, jr)):
        old = e[:, jp0:nz].copy()
        new = old + (curl[:, jp0:nz] - qb * old - 0.5 * (1 + qa) * jc) / (ed + 0.5 * qb)
        jc[:] = qa * jc + qb * (new + old)
        e[:, jp0:nz] = new
    d = curl_r[:, jz0:nz]
    psi_ze[:] = b_ze * psi_ze + c_ze * d
    de = ce_top * (kd_ze * d + psi_ze)
    er[:, jz0:nz] += de
    jr[:, jz0 - jp0 :] += qb_r[:, jz0 - jp0 :] * de
    d = curl_z[ir0:]
    psi_re[:] = b_re[:, None] * psi_re + c_re[:, None] * d
    de = ce_far * (kd_re[:, None] * d + psi_re)
    ez[ir0:] += de
    jz[ir0:] += qb_z[ir0:] * de[:, jp0:]
    ez[0, : src.size] -= src
    acc_re += ez[:, 0][None, :] * cos_e[:, None]
    acc_im -= ez[:, 0][None, :] * sin_e[:, None]


def _state(nr=24, nz=18, jp0=6, jz0=12, ir0=17, nk=3, nf=2):
    r = lambda *shape: (RNG.standard_normal(shape) * 0.1).astype(F32)  # noqa: E731
    pos = lambda *shape: RNG.uniform(0.2, 0.9, shape).astype(F32)  # noqa: E731
    kd = lambda n: 1.0 / (1 + pos(n)).astype(np.float64) - 1.0  # noqa: E731  (1/kappa - 1, kappa > 1)
    n_pl, n_top, n_far = nz - jp0, nz - jz0, nr - ir0
    fields = dict(ez=r(nr, nz), er=r(nr, nz + 1), hp=r(nr, nz), jz=r(nr, n_pl), jr=r(nr, n_pl))
    fields["er"][:, 0] = fields["er"][:, -1] = 0
    # fourth-order tables in the interior, second order (equal to inv_dr, inv_dz) near the edges,
    # as cavity.fdtd.stencil builds them; random values so that every coefficient is exercised
    ar1 = np.full(nr, F32(1.3))
    ar1[: ir0 - 1] = pos(ir0 - 1) + F32(1.0)
    ar2 = np.zeros(nr, F32)
    ar2[: ir0 - 1] = -pos(ir0 - 1) * F32(0.1)
    kz1 = np.full(nz, F32(1.7))
    kz2 = np.zeros(nz, F32)
    kz1[2:jz0] = pos(jz0 - 2) + F32(1.0)
    kz2[2:jz0] = -pos(jz0 - 2) * F32(0.1)
    h = dict(
        inv_dr=F32(1.3),
        inv_dz=F32(1.7),
        ar1=ar1,
        ar2=ar2,
        kz1=kz1,
        kz2=kz2,
        ch=F32(0.3),
        ha=pos(nr),
        hb=pos(nr) * F32(0.3),
        sib_q=RNG.uniform(0.1, 0.99, nk),
        sib_w=RNG.standard_normal((nr, nk)) * 0.1,
        sib_psi=RNG.standard_normal((nr, nk)) * 0.01,
        jz0=jz0,
        b_zh=pos(n_top),
        c_zh=-pos(n_top) * F32(0.1),
        kd_zh=kd(n_top),
        psi_zh=r(nr, n_top),
        ir0=ir0,
        b_rh=pos(n_far),
        c_rh=-pos(n_far) * F32(0.1),
        kd_rh=kd(n_far),
        psi_rh=r(n_far, nz),
        ch_far=pos(n_far, nz) * F32(0.3),
        acc_re=np.zeros((nf, nr)),
        acc_im=np.zeros((nf, nr)),
        cos_h=RNG.standard_normal(nf),
        sin_h=RNG.standard_normal(nf),
        n_cols=nr,
    )
    ecoef = pos(nr, 4)
    ecoef[:, [0, 2]] *= -1
    ecoef[0, 2:] = 0  # the axis reads H_0 and H_1 only
    ecoef[1, 3] = 0  # H_(-1) folded into H_0
    ecoef[ir0 - 1 :, 0] = ecoef[ir0 - 1 :, 3] = 0  # second order from the cell before the absorber on
    ke1 = np.full(nz + 1, F32(1.7))
    ke2 = np.zeros(nz + 1, F32)
    ke1[2:jz0] = pos(jz0 - 2) + F32(1.0)
    ke2[2:jz0] = -pos(jz0 - 2) * F32(0.1)
    ke1[0] = ke1[nz] = 0
    e = dict(
        ecoef=ecoef,
        ke1=ke1,
        ke2=ke2,
        cez=pos(nz) * F32(0.3),
        cer=pos(nz + 1) * F32(0.3),
        jp0=jp0,
        ed_z=1 + pos(n_pl) * 3,
        qa_z=pos(n_pl),
        qb_z=pos(5, n_pl),
        prof_z=RNG.integers(0, 5, nr).astype(np.int32),
        ed_r=1 + pos(n_pl) * 3,
        qa_r=pos(n_pl),
        qb_r=pos(4, n_pl),
        prof_r=RNG.integers(0, 4, nr).astype(np.int32),
        jz0=jz0,
        b_ze=pos(n_top),
        c_ze=-pos(n_top) * F32(0.1),
        kd_ze=kd(n_top),
        psi_ze=r(nr, n_top),
        ce_top=pos(nr, n_top) * F32(0.3),
        ir0=ir0,
        b_re=pos(n_far),
        c_re=-pos(n_far) * F32(0.1),
        kd_re=kd(n_far),
        psi_re=r(n_far, nz),
        ce_far=pos(n_far, nz) * F32(0.3),
        src=np.array([0.05, -0.02, 0.01], F32),
        acc_re=np.zeros((nf, nr)),
        acc_im=np.zeros((nf, nr)),
        cos_e=RNG.standard_normal(nf),
        sin_e=RNG.standard_normal(nf),
    )
    return fields, h, e


def _h_groups(f, h):
    """The H step's argument groups (kernels.Fields ...) over the same arrays as the flat twin's."""
    fields = K.Fields(f["ez"], f["er"], f["hp"], f["jz"], f["jr"])
    return (
        fields,
        K.HCurl(h["inv_dr"], h["inv_dz"], h["ar1"], h["ar2"], h["kz1"], h["kz2"], h["ch"], h["ha"], h["hb"]),
        K.GroundMemory(h["sib_q"], h["sib_w"], h["sib_psi"]),
        K.Absorber(h["jz0"], h["b_zh"], h["c_zh"], h["kd_zh"], h["psi_zh"], np.zeros((0, 0), F32)),
        K.Absorber(h["ir0"], h["b_rh"], h["c_rh"], h["kd_rh"], h["psi_rh"], h["ch_far"]),
        K.Dft(h["acc_re"], h["acc_im"], h["cos_h"], h["sin_h"]),
    )


def _e_groups(f, e):
    """The E step's argument groups over the same arrays as the flat twin's."""
    fields = K.Fields(f["ez"], f["er"], f["hp"], f["jz"], f["jr"])
    return (
        fields,
        K.ECurl(e["ecoef"], e["ke1"], e["ke2"], e["cez"], e["cer"], e["jp0"]),
        K.Plasma(e["ed_z"], e["qa_z"], e["qb_z"], e["prof_z"]),
        K.Plasma(e["ed_r"], e["qa_r"], e["qb_r"], e["prof_r"]),
        K.Absorber(e["jz0"], e["b_ze"], e["c_ze"], e["kd_ze"], e["psi_ze"], e["ce_top"]),
        K.Absorber(e["ir0"], e["b_re"], e["c_re"], e["kd_re"], e["psi_re"], e["ce_far"]),
        e["src"],
        K.Dft(e["acc_re"], e["acc_im"], e["cos_e"], e["sin_e"]),
    )


def test_groups_are_named_not_counted():
    # a group of the wrong kind cannot stand in for another: numba types NamedTuples by class
    fields, h, e = _state()
    groups = list(_h_groups(fields, h))
    groups[1], groups[2] = groups[2], groups[1]  # HCurl and GroundMemory swapped
    from numba.core.errors import TypingError

    with pytest.raises(TypingError, match="inv_dr|q"):  # the H step reads curl.inv_dr from a GroundMemory
        K.step_h(*groups, h["n_cols"])


def _copy(d):
    return {k: (v.copy() if isinstance(v, np.ndarray) else v) for k, v in d.items()}


@pytest.mark.parametrize("steps", [1, 5])
def test_fused_kernels_match_their_numpy_twins(steps):
    fields, h, e = _state()
    f_k, h_k, e_k = _copy(fields), _copy(h), _copy(e)
    f_n, h_n, e_n = _copy(fields), _copy(h), _copy(e)
    for _ in range(steps):
        K.step_h(*_h_groups(f_k, h_k), h_k["n_cols"])
        K.step_e(*_e_groups(f_k, e_k), f_k["ez"].shape[0])
        np_step_h(f_n["hp"], f_n["ez"], f_n["er"], **h_n)
        np_step_e(
            f_n["ez"],
            f_n["er"],
            f_n["hp"],
            e_n["ecoef"],
            e_n["ke1"],
            e_n["ke2"],
            e_n["cez"],
            e_n["cer"],
            e_n["jp0"],
            e_n["ed_z"],
            e_n["qa_z"],
            e_n["qb_z"],
            e_n["prof_z"],
            f_n["jz"],
            e_n["ed_r"],
            e_n["qa_r"],
            e_n["qb_r"],
            e_n["prof_r"],
            f_n["jr"],
            *[
                e_n[k]
                for k in (
                    "jz0",
                    "b_ze",
                    "c_ze",
                    "kd_ze",
                    "psi_ze",
                    "ce_top",
                    "ir0",
                    "b_re",
                    "c_re",
                    "kd_re",
                    "psi_re",
                    "ce_far",
                    "src",
                    "acc_re",
                    "acc_im",
                    "cos_e",
                    "sin_e",
                )
            ],
            f_n["ez"].shape[0],
        )
    for name in ("ez", "er", "hp", "jz", "jr"):
        np.testing.assert_allclose(f_k[name], f_n[name], rtol=2e-4, atol=2e-6, err_msg=name)
    for name in ("sib_psi", "psi_zh", "psi_rh", "acc_re", "acc_im"):
        np.testing.assert_allclose(h_k[name], h_n[name], rtol=2e-4, atol=2e-6, err_msg=name)
    for name in ("psi_ze", "psi_re", "acc_re", "acc_im"):
        np.testing.assert_allclose(e_k[name], e_n[name], rtol=2e-4, atol=2e-6, err_msg=name)


def test_max_abs_finds_the_largest_and_nan():
    a = np.zeros((5, 7), F32)
    a[3, 4] = -2.5
    peak, flat = K.max_abs(a)
    assert peak == 2.5 and divmod(int(flat), 7) == (3, 4)
    a[1, 2] = np.nan
    peak, _ = K.max_abs(a)
    assert np.isnan(peak)


def test_last_active_column_sees_every_kind_of_state():
    fields, h, e = _state()
    nr = fields["ez"].shape[0]
    arrays = {
        name: np.zeros_like(a)
        for name, a in (
            ("ez", fields["ez"]),
            ("er", fields["er"]),
            ("hp", fields["hp"]),
            ("jz", fields["jz"]),
            ("jr", fields["jr"]),
            ("psi_zh", h["psi_zh"]),
            ("psi_ze", e["psi_ze"]),
            ("sib_psi", h["sib_psi"]),
            ("psi_rh", h["psi_rh"]),
            ("psi_re", e["psi_re"]),
        )
    }
    ir0 = h["ir0"]

    # the same groups the engine hands to step_h / step_e, over the arrays set one by one below
    groups_h = _h_groups(arrays, {**h, **{k: arrays[k] for k in ("sib_psi", "psi_zh", "psi_rh")}})
    groups_e = _e_groups(arrays, {**e, **{k: arrays[k] for k in ("psi_ze", "psi_re")}})
    fields_g, _, ground, top_h, far_h, _ = groups_h
    _, _, _, _, top_e, far_e, _, _ = groups_e

    def last(start=nr - 1):
        return K.last_active_column(start, fields_g, ground, top_h, far_h, top_e, far_e)

    assert last() == -1
    for name, col in (("hp", 3), ("sib_psi", 5), ("jr", 7), ("psi_ze", 9), ("psi_rh", ir0 + 2), ("psi_re", ir0 + 4)):
        row = col - ir0 if name in ("psi_rh", "psi_re") else col
        arrays[name][row, -1] = np.float32(1e-38)  # a subnormal counts: only exact zeros are empty
        assert last() == col, name
    assert last(start=ir0 + 3) == ir0 + 2  # the search starts where it is told


def test_stepping_only_the_reached_columns_changes_nothing():
    """The same solve with and without skipping the columns ahead of the wave: identical numbers."""
    import profiles
    from cavity.fdtd import engine as eng

    z = np.arange(0.0, 160e3, 250.0)
    medium = eng.Medium.uniform(
        1e-3, 10.0, z, profiles.electron_density(z, 85.1, 0.63), profiles.collision_frequency(z)
    )
    settings = eng.Settings(frequencies_hz=(20e3,), max_range_m=400e3, dr_m=1000.0, dz_m=1000.0)
    tracked = eng.Simulation(medium, settings)
    whole = eng.Simulation(medium, settings)
    whole.track_front = False
    a, b = tracked.run(), whole.run()
    assert a.steps == b.steps
    np.testing.assert_array_equal(a.ez, b.ez)
    np.testing.assert_array_equal(a.hphi, b.hphi)
    for name in ("ez", "er", "hp", "jz", "jr", "psi_zh", "psi_ze", "psi_rh", "psi_re", "sib_psi"):
        np.testing.assert_array_equal(getattr(tracked, name), getattr(whole, name), err_msg=name)
