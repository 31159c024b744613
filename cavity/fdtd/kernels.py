"""Compiled time-stepping kernels of the axisymmetric (r, z) Yee scheme. Hot loops only.

Every kernel takes plain arrays and coefficient tables, updates in place and returns nothing; all
physics decisions (plasma, earth flattening, absorber grading, ground impedance) are folded into the
coefficients by :mod:`cavity.fdtd.media` before the loop. Nothing here imports from the project.
Kernels are compiled on first call (numba ``cache=True``), never at import.

Field layout (see :mod:`cavity.fdtd.grid`): ``ez[i, j]`` at (i dr, (j+1/2) dz); ``er[i, j]`` at
((i+1/2) dr, j dz) with rows 0 (ground) and nz (top wall) never stepped; ``hp[i, j]`` (H_phi) at
((i+1/2) dr, (j+1/2) dz). Beyond the last column Ez = 0 (conducting end wall behind the absorber).

Names: ``dt`` time step, ``dr``/``dz`` cells, ``psi`` CPML auxiliary (Roden and Gedney 2000),
``jz``/``jr`` plasma polarisation current densities (Yu and Simpson 2010), ``sib`` the recursive
surface-impedance ground (Maloney and Smith 1992).
"""

from __future__ import annotations

import os
from typing import Any, NamedTuple

# Idle OpenMP threads sleep instead of spinning: two barriers per time step cost microseconds, while
# spinning threads steal the cores from working ones whenever the machine is shared (measured 2-4x
# slower under load). Set before numba starts its threading layer; a user's own setting wins.
os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

import llvmlite.binding as _llvm  # noqa: E402
import numba as nb  # noqa: E402
import numpy as np
from numba import prange  # noqa: E402

# The compiler vectorises a loop over arrays it cannot prove distinct only behind run-time overlap
# checks, and gives up beyond 128 of them (LLVM's vectorize-memory-check-threshold). The magnetised
# update of :func:`step_e_mag` reads 21 coefficient rows and nine field rows and writes six, which
# needs a few hundred checks: once per column of 100-200 rows, they cost far less than the scalar
# loop they replace (measured 1.8x faster). Process-wide, before the first kernel is compiled.
_llvm.set_option("", "-vectorize-memory-check-threshold=1024")

_OPTS: dict[str, Any] = dict(cache=True, nogil=True, fastmath=False, error_model="numpy")
#: Field values below this are set to zero. Waves decay exponentially into the dense plasma and the
#: absorbers; without a floor they reach float32 subnormals (< 1.2e-38), which the CPU handles
#: hundreds of times more slowly. Fields per unit source current stay above 1e-20 where they matter.
TINY = np.float32(1e-30)


# Argument groups of the fused half-steps. numba takes NamedTuples of arrays and scalars; each kernel
# unpacks them into locals before its loop, so the compiled loops are the ones of flat arguments, and
# a group cannot be passed in another's place (its fields are named, not counted).


class Fields(NamedTuple):
    """The arrays stepped in place: Ez, Er, H_phi and the plasma currents jz, jr (float32)."""

    ez: np.ndarray  # (nr, nz)
    er: np.ndarray  # (nr, nz + 1)
    hp: np.ndarray  # (nr, nz)
    jz: np.ndarray  # (nr, nz - jp0)
    jr: np.ndarray  # (nr, nz - jp0)


class HCurl(NamedTuple):
    """Faraday's-law coefficients: second-order inverse cells (ground row, absorbers), the stencil
    tables (:mod:`cavity.fdtd.stencil`), dt/mu0 and the ground row's (ha, hb) per column."""

    inv_dr: np.float32
    inv_dz: np.float32
    ar1: np.ndarray  # (nr,) dEz/dr = ar1 (Ez[i+1] - Ez[i]) + ar2 (Ez[i+2] - Ez[i-1])
    ar2: np.ndarray  # (nr,)
    kz1: np.ndarray  # (nz,) dEr/dz = kz1 (Er[j+1] - Er[j]) + kz2 (Er[j+2] - Er[j-1])
    kz2: np.ndarray  # (nz,)
    ch: np.float32
    ha: np.ndarray  # (nr,)
    hb: np.ndarray  # (nr,)


class GroundMemory(NamedTuple):
    """The recursive surface-impedance ground (Maloney and Smith 1992): poles q, weights w, memory psi."""

    q: np.ndarray  # (npole,)
    w: np.ndarray  # (nr, npole)
    psi: np.ndarray  # (nr, npole)


class ECurl(NamedTuple):
    """Ampere's-law coefficients: the stencil tables of (1/r) d(r H)/dr and dH/dz
    (:mod:`cavity.fdtd.stencil`), dt/eps per row, first plasma row."""

    ecoef: np.ndarray  # (nr, 4) weights of H[i+1], H[i], H[i-1], H[i-2]
    ke1: np.ndarray  # (nz + 1,) dH/dz = ke1 (H[j] - H[j-1]) + ke2 (H[j+1] - H[j-2])
    ke2: np.ndarray  # (nz + 1,)
    cez: np.ndarray  # (nz,)
    cer: np.ndarray  # (nz + 1,)
    jp0: int


class Plasma(NamedTuple):
    """One component's plasma update: eps/dt and qa per plasma row, qb per profile, profile per column."""

    ed: np.ndarray  # (nz - jp0,)
    qa: np.ndarray  # (nz - jp0,)
    qb: np.ndarray  # (nprofile, nz - jp0)
    prof: np.ndarray  # (nr,) int32


class Absorber(NamedTuple):
    """One CPML layer (Roden and Gedney 2000): first row/column, b, c, 1/kappa - 1, memory, curl coefficient."""

    start: int
    b: np.ndarray
    c: np.ndarray
    kd: np.ndarray
    psi: np.ndarray
    coef: np.ndarray  # per cell; unused (empty) for the top layer of the H step, which uses dt/mu0


class Dft(NamedTuple):
    """Running DFT along the ground row: accumulators (nf, nr) and cos/sin of -omega t this step."""

    acc_re: np.ndarray
    acc_im: np.ndarray
    cos: np.ndarray
    sin: np.ndarray


# Groups of the six-component kernels (geomagnetic field); Fields, Absorber, GroundMemory and Dft serve
# them too: Fields.jz/jr hold the scaled currents uz/ur there, one Absorber per stretched derivative.


class FieldsTE(NamedTuple):
    """The TE set stepped in place with the geomagnetic field: Ephi, Hr, Hz and the scaled azimuthal
    current u_phi (float32)."""

    ephi: np.ndarray  # (nr, nz + 1)
    hr: np.ndarray  # (nr, nz)
    hz: np.ndarray  # (nr, nz + 1)
    jphi: np.ndarray  # (nr, nz - jp0)


class HCurlTE(NamedTuple):
    """Faraday's-law coefficients of the TE set: 1/dz (the ground row and the top absorber), the
    vertical stencil tables of the TM set's H (``kz1``, ``kz2``: Hr sits in H_phi's rows and Ephi in
    Er's), dt/mu0, the stencil table of the radial operator (1/r) d(r Ephi)/dr at Hz column i
    (``te_h``: coefficients of Ephi at columns i+2, i+1, i, i-1; :mod:`cavity.fdtd.stencil`), and
    the ground row's (ha, hb) per column."""

    inv_dz: np.float32
    kz1: np.ndarray  # (nz,) dEphi/dz = kz1 (Ephi[j+1] - Ephi[j]) + kz2 (Ephi[j+2] - Ephi[j-1])
    kz2: np.ndarray  # (nz,)
    ch: np.float32
    te_h: np.ndarray  # (nr, 4)
    ha: np.ndarray  # (nr,)
    hb: np.ndarray  # (nr,)


class ECurlMag(NamedTuple):
    """Ampere's-law coefficients of the six-component scheme: the stencil tables of (1/r) d(r H_phi)/dr
    at Ez column i (``er_coef``: H_phi at columns i+1, i, i-1, i-2) and of dHz/dr at Ephi column i
    (``te_e``: Hz at columns i+1, i, i-1, i-2), 1/dz (the top absorber's corrections), the vertical
    stencil tables of Er (``ke1``, ``ke2``, also those of Ephi), dt/eps per row, first plasma row."""

    er_coef: np.ndarray  # (nr, 4)
    te_e: np.ndarray  # (nr, 4)
    inv_dz: np.float32
    ke1: np.ndarray  # (nz + 1,) dH/dz at Er row j = ke1 (H[j] - H[j-1]) + ke2 (H[j+1] - H[j-2])
    ke2: np.ndarray  # (nz + 1,)
    cez: np.ndarray  # (nz,)
    cer: np.ndarray  # (nz + 1,)
    jp0: int


class Magnetoplasma(NamedTuple):
    """The triples' trapezoidal update (:func:`step_e_mag`): coefficients per key (key, 21, plasma
    row), key of the triple anchored at each Ez column for this step's pairing, the pairing (+1: Er
    after Ez, -1: before) and the square roots of the volume weights (3, nr)."""

    coef: np.ndarray
    tab: np.ndarray  # (nr,) int32
    shift: int
    wsq: np.ndarray


@nb.njit(parallel=True, **_OPTS)
def max_abs(a):
    """Largest |a| and its flat index (NaN propagates as the largest)."""
    nr, nz = a.shape
    best = np.zeros(nr)
    where = np.zeros(nr, dtype=np.int64)
    for i in prange(nr):
        m = 0.0
        w = 0
        for j in range(nz):
            v = abs(np.float64(a[i, j]))
            if not (v <= m):  # also true for NaN
                m = v
                w = j
                if v != v:
                    break
        best[i] = m
        where[i] = i * nz + w
    k = 0
    for i in range(nr):
        if best[i] != best[i]:  # NaN wins: the guard must see it
            return best[i], where[i]
        if best[i] > best[k]:
            k = i
    return best[k], where[k]


@nb.njit(**_OPTS)
def _any_nonzero(row):
    for v in row:
        if v != 0:
            return True
    return False


@nb.njit(**_OPTS)
def last_active_column(start, fields, ground, top_h, far_h, top_e, far_e):
    """Last column, searching down from ``start``, that holds any nonzero field, plasma current or
    absorber/ground memory; -1 if none.

    Takes the argument groups of :func:`step_h` and :func:`step_e` (:class:`Fields`,
    :class:`GroundMemory`, the top and far :class:`Absorber` of each half-step) and searches every
    array among them that a column carries: Ez, Er, H_phi, jz, jr, the ground memory and the four
    absorber memories (the far layers' rows start at ``far_h.start``).

    Ahead of the wave front every one of them is exactly zero, and a time step (H then E) carries
    nonzero values at most ``reach`` columns further out: one for the Yee stencil (H at column i
    reads Ez at i+1, which is still zero; E at i+1 reads H at i), three for the fourth-order one
    (H at i reads Ez at i-1, E at i reads H at i-2). Stepping only the columns up to the last
    active one plus ``reach`` times the steps until the next search is therefore exact, and skips
    the still-empty far part of a long path during the first passage of the wave.
    """
    ez, er, hp, jz, jr = fields.ez, fields.er, fields.hp, fields.jz, fields.jr
    psi_zh, psi_ze, sib_psi = top_h.psi, top_e.psi, ground.psi
    ir0, psi_rh, psi_re = far_h.start, far_h.psi, far_e.psi
    for i in range(start, -1, -1):
        if (
            _any_nonzero(ez[i])
            or _any_nonzero(er[i])
            or _any_nonzero(hp[i])
            or _any_nonzero(jz[i])
            or _any_nonzero(jr[i])
            or _any_nonzero(psi_zh[i])
            or _any_nonzero(psi_ze[i])
            or _any_nonzero(sib_psi[i])
        ):
            return i
        if i >= ir0 and (_any_nonzero(psi_rh[i - ir0]) or _any_nonzero(psi_re[i - ir0])):
            return i
    return -1


@nb.njit(parallel=True, **_OPTS)
def minimal_h(hp, ez, er, inv_dr, inv_dz, ch):
    """Benchmark stencil: H_phi update only (no ground impedance, no absorber)."""
    nr, nz = hp.shape
    for i in prange(nr - 1):
        for j in range(nz):
            hp[i, j] += ch * ((ez[i + 1, j] - ez[i, j]) * inv_dr - (er[i, j + 1] - er[i, j]) * inv_dz)


@nb.njit(parallel=True, **_OPTS)
def minimal_e(ez, er, hp, rp, rm, inv_dz, ca, cb):
    """Benchmark stencil: Ez, Er with a conductivity that varies with altitude only (``ca``, ``cb`` per row)."""
    nr, nz = ez.shape
    for i in prange(1, nr):
        a = rp[i]
        b = rm[i]
        for j in range(nz):
            ez[i, j] = ca[j] * ez[i, j] + cb[j] * (a * hp[i, j] - b * hp[i - 1, j])
        for j in range(1, nz):
            er[i, j] = ca[j] * er[i, j] - cb[j] * (hp[i, j] - hp[i, j - 1]) * inv_dz


@nb.njit(parallel=True, **_OPTS)
def step_h(fields, curl, ground, top, far, dft, n_cols):
    """One H half-step: Faraday's law, mu0 dH/dt = dEz/dr - dEr/dz, with both absorbers and the DFT.

    Everything a column needs is local to it, so one parallel loop over columns with one barrier.
    Only columns ``0 .. n_cols-1`` are stepped: the caller guarantees that every field and memory
    beyond them is zero and would stay zero (see :func:`last_active_column`).

    Differences from the stencil tables (:mod:`cavity.fdtd.stencil`): dEz/dr at column i is
    ``ar1[i] (Ez[i+1] - Ez[i]) + ar2[i] (Ez[i+2] - Ez[i-1])`` (Ez[-1] read as Ez[1], the axis
    mirror), dEr/dz at row j is ``kz1[j] (Er[j+1] - Er[j]) + kz2[j] (Er[j+2] - Er[j-1])``. ``inv_dr``
    and ``inv_dz`` are the second-order factors used by the ground row (vertical) and the absorber
    corrections, where the tables are second order and equal to them.

    Ground row (z = dz/2) with the impedance ground: Er(0) = -eta (H(n+1/2) + H(n-1/2))/2 + sum_k psi_k,
    the instantaneous part averaged in time (semi-implicit, unconditionally stable) and the memory
    part a sum of recursively updated exponentials ``psi_k(n) = q_k psi_k(n-1) + w_k H(n-1/2)``
    (Maloney and Smith 1992; ``sib_w``, ``sib_psi`` are (column, pole), so a column's poles are
    contiguous); ``ha``/``hb`` per column fold eta in (perfect ground: ha = 1, hb = dt/mu0, no
    poles). ``ch`` = dt/mu0.

    Absorbers: convolutional PML by recursive convolution (Roden and Gedney 2000, MOTL 27(5) 334).
    For a derivative d the layer needs (1/kappa) d + psi with psi(n) = b psi(n-1) + c d; the ordinary
    update has applied d, so the correction adds coef (kd d + psi) with ``kd`` = 1/kappa - 1 (float64,
    computed once outside the loop): the top layer on
    dEr/dz (rows >= jz0), the far-end layer on dEz/dr (columns >= ir0; ``ch_far`` holds each cell's
    curl coefficient, the ground row's being ``hb``).

    DFT: ``acc[f, i] += H[i, 0] exp(-j omega_f t)`` with ``cos_h``/``sin_h`` of the current instant.
    """
    hp, ez, er = fields.hp, fields.ez, fields.er
    inv_dr, inv_dz, ch, ha, hb = curl.inv_dr, curl.inv_dz, curl.ch, curl.ha, curl.hb
    ar1, ar2, kz1, kz2 = curl.ar1, curl.ar2, curl.kz1, curl.kz2
    sib_q, sib_w, sib_psi = ground.q, ground.w, ground.psi
    jz0, b_zh, c_zh, kd_zh, psi_zh = top.start, top.b, top.c, top.kd, top.psi
    ir0, b_rh, c_rh, kd_rh, psi_rh, ch_far = far.start, far.b, far.c, far.kd, far.psi, far.coef
    acc_re, acc_im, cos_h, sin_h = dft.acc_re, dft.acc_im, dft.cos, dft.sin
    nr, nz = hp.shape
    nk = sib_q.shape[0]
    n_top = psi_zh.shape[1]
    nf = acc_re.shape[0]
    for i in prange(n_cols):
        has_next = i + 1 < nr
        ic = np.int64(i)
        ip2 = ic + 2 if ic + 2 < nr else ic  # ar2 = 0 there
        im1 = ic - 1 if ic > 0 else np.int64(1 if nr > 1 else 0)  # Ez is even about the axis
        a1 = ar1[i]
        a2 = ar2[i]
        h_old = hp[i, 0]
        psi_sum = 0.0
        for k in range(nk):
            p = sib_q[k] * sib_psi[i, k] + sib_w[i, k] * h_old
            sib_psi[i, k] = p
            psi_sum += p
        ezn = ez[i + 1, 0] if has_next else np.float32(0.0)
        c_g = a1 * (ezn - ez[i, 0]) + a2 * (ez[ip2, 0] - ez[im1, 0]) - er[i, 1] * inv_dz + psi_sum * inv_dz
        hp[i, 0] = ha[i] * h_old + hb[i] * c_g
        h = hp[i]
        e_r = er[i]
        e_z = ez[i]
        if has_next:
            e_n = ez[i + 1]
            e_n2 = ez[ip2]
            e_m = ez[im1]
            for j in range(1, nz - 1):
                v = h[j] + ch * (
                    (a1 * (e_n[j] - e_z[j]) + a2 * (e_n2[j] - e_m[j]))
                    - (kz1[j] * (e_r[j + 1] - e_r[j]) + kz2[j] * (e_r[j + 2] - e_r[j - 1]))
                )
                h[j] = v if abs(v) > TINY else np.float32(0.0)
            j = nz - 1
            v = h[j] + ch * ((a1 * (e_n[j] - e_z[j]) + a2 * (e_n2[j] - e_m[j])) - kz1[j] * (e_r[j + 1] - e_r[j]))
            h[j] = v if abs(v) > TINY else np.float32(0.0)
        else:
            for j in range(1, nz - 1):
                h[j] += ch * (-e_z[j] * a1 - (kz1[j] * (e_r[j + 1] - e_r[j]) + kz2[j] * (e_r[j + 2] - e_r[j - 1])))
            j = nz - 1
            h[j] += ch * (-e_z[j] * a1 - kz1[j] * (e_r[j + 1] - e_r[j]))
        for k in range(n_top):
            j = jz0 + k
            d = -(e_r[j + 1] - e_r[j]) * inv_dz
            p = b_zh[k] * psi_zh[i, k] + c_zh[k] * d
            psi_zh[i, k] = p
            h[j] += ch * (kd_zh[k] * d + p)
        if i >= ir0:
            kk = i - ir0
            for j in range(nz):
                ezn = ez[i + 1, j] if has_next else np.float32(0.0)
                d = (ezn - e_z[j]) * inv_dr
                p = b_rh[kk] * psi_rh[kk, j] + c_rh[kk] * d
                psi_rh[kk, j] = p
                h[j] += ch_far[kk, j] * (kd_rh[kk] * d + p)
        v = np.float64(h[0])
        for f in range(nf):
            acc_re[f, i] += v * cos_h[f]
            acc_im[f, i] -= v * sin_h[f]


@nb.njit(parallel=True, **_OPTS)
def step_e(fields, curl, plasma_z, plasma_r, top, far, src, dft, n_cols):
    """One E half-step: Ampere's law with the plasma current, both absorbers, the source and the DFT.

    Columns ``0 .. n_cols-1`` only, as in :func:`step_h`.

    Curls from the stencil tables (:mod:`cavity.fdtd.stencil`): the Ez curl (1/r) d(r H)/dr at
    column i is ``ecoef[i] . (H[i+1], H[i], H[i-1], H[i-2])`` (axis and mirror values folded into
    the table), the Er curl -dH/dz at row j is ``-(ke1[j] (H[j] - H[j-1]) + ke2[j] (H[j+1] - H[j-2]))``
    (``ke2`` = 0 in rows 1 and nz-1, which the wide stencil would read across).

    Vacuum rows (j < jp0): E += c curl H with ``cez[j]``/``cer[j]`` = dt/eps(z) (eps includes the
    earth-flattening factor). Plasma rows: the E-J collocated trapezoidal update (Yu and Simpson
    2010, IEEE TAP 58(2) 469), stable for any omega_p dt and nu dt:

        E(n+1) = E(n) + [curlH(n+1/2) - qb E(n) - (1 + qa)/2 J(n)] / (eps/dt + qb/2)
        J(n+1) = qa J(n) + qb (E(n+1) + E(n))

    with ``ed`` = eps/dt and ``qa`` per plasma row (nu depends on height only) and
    ``qb`` = eps omega_p^2 (dt/2)/(1 + nu dt/2) per cell, held once per distinct column profile:
    column i uses row ``prof[i]`` of ``qb``, so that a path under one ionosphere reads a single
    cached profile instead of streaming a table the size of the grid.
    Er rows 0 and nz are walls (the ground is handled in :func:`step_h`).
    The plasma never reaches row 0 (``jp0 >= 1``). Inner loops run over row views indexed from zero
    so that the compiler can vectorise them.

    Then the top CPML correction of dH/dz for Er (rows >= jz0) and the far-end correction of
    (1/r) d(rH)/dr for Ez (columns >= ir0, stretched as a Cartesian derivative: error of order the
    layer depth over r); there the stencil is second order. ``ce_top``/``ce_far`` hold each
    absorber cell's curl coefficient. In plasma
    cells J(n+1) was computed from the uncorrected E(n+1); it receives qb dE so that the pair stays
    the trapezoidal E-J update of the stretched equations. Finally ``ez[0, :len(src)] -= src`` (the
    source: current elements in the axis cells from the ground up, one for a point source, one per
    driven cell for a lightning channel) and the ground-row DFT.
    """
    ez, er, hp, jz, jr = fields.ez, fields.er, fields.hp, fields.jz, fields.jr
    ecoef, ke1, ke2, cez, cer, jp0 = curl.ecoef, curl.ke1, curl.ke2, curl.cez, curl.cer, curl.jp0
    ed_z, qa_z, qb_z, prof_z = plasma_z.ed, plasma_z.qa, plasma_z.qb, plasma_z.prof
    ed_r, qa_r, qb_r, prof_r = plasma_r.ed, plasma_r.qa, plasma_r.qb, plasma_r.prof
    jz0, b_ze, c_ze, kd_ze, psi_ze, ce_top = top.start, top.b, top.c, top.kd, top.psi, top.coef
    ir0, b_re, c_re, kd_re, psi_re, ce_far = far.start, far.b, far.c, far.kd, far.psi, far.coef
    acc_re, acc_im, cos_e, sin_e = dft.acc_re, dft.acc_im, dft.cos, dft.sin
    nr, nz = ez.shape
    n = nz - jp0
    n_top = psi_ze.shape[1]
    nf = acc_re.shape[0]
    half = np.float32(0.5)
    one = np.float32(1.0)
    for i in prange(n_cols):
        ic = np.int64(i)
        ip = ic + 1 if ic + 1 < nr else ic  # ecoef[i, 0] = 0 there
        im = ic - 1 if ic > 0 else np.int64(0)
        im2 = ic - 2 if ic > 1 else np.int64(0)
        c0 = ecoef[i, 0]
        c1 = ecoef[i, 1]
        c2 = ecoef[i, 2]
        c3 = ecoef[i, 3]
        e_z = ez[i]
        e_r = er[i]
        h = hp[i]
        hn = hp[ip]
        hm = hp[im]
        hm2 = hp[im2]
        for j in range(jp0):
            e_z[j] += cez[j] * (c0 * hn[j] + c1 * h[j] + c2 * hm[j] + c3 * hm2[j])
        # vacuum Er rows 1 .. jp0-1; the wide stencil in rows 2 .. nz-2
        if jp0 > 1:
            e_r[1] -= cer[1] * ke1[1] * (h[1] - h[0])
        top4 = min(jp0, nz - 1)
        for j in range(2, top4):
            e_r[j] -= cer[j] * (ke1[j] * (h[j] - h[j - 1]) + ke2[j] * (h[j + 1] - h[j - 2]))
        if jp0 == nz and nz - 1 >= 2:
            j = nz - 1
            e_r[j] -= cer[j] * ke1[j] * (h[j] - h[j - 1])
        # plasma Ez rows
        ezp = ez[i, jp0:]
        h0 = hp[i, jp0:]
        hnp = hp[ip, jp0:]
        hmp = hp[im, jp0:]
        hm2p = hp[im2, jp0:]
        qb = qb_z[prof_z[i]]
        jj = jz[i]
        for k in range(n):
            e_old = ezp[k]
            g = qb[k]
            cu = c0 * hnp[k] + c1 * h0[k] + c2 * hmp[k] + c3 * hm2p[k]
            e_new = e_old + (cu - g * e_old - half * (one + qa_z[k]) * jj[k]) / (ed_z[k] + half * g)
            e_new = e_new if abs(e_new) > TINY else np.float32(0.0)
            j_new = qa_z[k] * jj[k] + g * (e_new + e_old)
            jj[k] = j_new if abs(j_new) > TINY else np.float32(0.0)
            ezp[k] = e_new
        # plasma Er rows jp0 .. nz-1: the wide stencil in rows 2 .. nz-2 (k_lo .. n-2), second
        # order in row 1 (when the plasma starts there) and in row nz-1
        erp = er[i, jp0:]
        qb = qb_r[prof_r[i]]
        jj = jr[i]
        k_lo = max(0, 2 - jp0)
        for k in range(n):
            if k >= k_lo:
                k = n - 1  # after the rows below the wide stencil, only the top row
                if k < k_lo:
                    break
            j = jp0 + k
            e_old = erp[k]
            g = qb[k]
            cu = -ke1[j] * (h[j] - h[j - 1])
            e_new = e_old + (cu - g * e_old - half * (one + qa_r[k]) * jj[k]) / (ed_r[k] + half * g)
            e_new = e_new if abs(e_new) > TINY else np.float32(0.0)
            j_new = qa_r[k] * jj[k] + g * (e_new + e_old)
            jj[k] = j_new if abs(j_new) > TINY else np.float32(0.0)
            erp[k] = e_new
            if k == n - 1:
                break
        if n - 1 > k_lo:
            j0 = jp0 + k_lo
            m_n = n - 1 - k_lo
            ew = er[i, j0:]
            jw = jr[i, k_lo:]
            qbw = qb[k_lo:]
            qaw = qa_r[k_lo:]
            edw = ed_r[k_lo:]
            h1 = hp[i, j0:]
            hlo = hp[i, j0 - 1 :]
            hup = hp[i, j0 + 1 :]
            hlo2 = hp[i, j0 - 2 :]
            e1 = ke1[j0:]
            e2 = ke2[j0:]
            for m in range(m_n):
                e_old = ew[m]
                g = qbw[m]
                cu = -(e1[m] * (h1[m] - hlo[m]) + e2[m] * (hup[m] - hlo2[m]))
                e_new = e_old + (cu - g * e_old - half * (one + qaw[m]) * jw[m]) / (edw[m] + half * g)
                e_new = e_new if abs(e_new) > TINY else np.float32(0.0)
                j_new = qaw[m] * jw[m] + g * (e_new + e_old)
                jw[m] = j_new if abs(j_new) > TINY else np.float32(0.0)
                ew[m] = e_new
        for k in range(n_top):
            j = jz0 + k
            d = -ke1[j] * (h[j] - h[j - 1])
            p = b_ze[k] * psi_ze[i, k] + c_ze[k] * d
            psi_ze[i, k] = p
            de = ce_top[i, k] * (kd_ze[k] * d + p)
            e_r[j] += de
            if j >= jp0:
                jr[i, j - jp0] += qb_r[prof_r[i], j - jp0] * de
        if i >= ir0:
            kk = i - ir0
            for j in range(nz):
                d = c0 * hn[j] + c1 * h[j] + c2 * hm[j] + c3 * hm2[j]
                p = b_re[kk] * psi_re[kk, j] + c_re[kk] * d
                psi_re[kk, j] = p
                de = ce_far[kk, j] * (kd_re[kk] * d + p)
                e_z[j] += de
                if j >= jp0:
                    jz[i, j - jp0] += qb_z[prof_z[i], j - jp0] * de
        if i == 0:
            for j in range(src.shape[0]):
                e_z[j] -= src[j]
        v = np.float64(e_z[0])
        for f in range(nf):
            acc_re[f, i] += v * cos_e[f]
            acc_im[f, i] -= v * sin_e[f]


# --------------------------------------------------------------------------------------------------
# Magnetised ionosphere: all six components (Er, Ez, Hphi) + (Ephi, Hr, Hz), d/dphi = 0
# --------------------------------------------------------------------------------------------------
# TE layout: ``ephi[i, j]`` at (i dr, j dz), rows 0 (ground) and nz (top wall) and column 0 (axis)
# never stepped; ``hr[i, j]`` at (i dr, (j+1/2) dz); ``hz[i, j]`` at ((i+1/2) dr, j dz), rows 0 and
# nz never stepped. Beyond the last column Ephi = 0 (conducting end wall), as Ez.


@nb.njit(**_OPTS)
def last_active_column_te(start, te, ground, top_h, far_h, top_e, far_e):
    """:func:`last_active_column` for the arrays of the TE set and the azimuthal plasma current, with
    the memories of its ground row (``ground.psi``) and absorbers (``top_h.psi`` of dEphi/dz for Hr,
    ``top_e.psi`` of dHr/dz for Ephi, ``far_h.psi``/``far_e.psi`` of the radial operators)."""
    ephi, hr, hz, jphi = te.ephi, te.hr, te.hz, te.jphi
    sib_psi, psi_hr, psi_pz, ir0, psi_hz, psi_pr = ground.psi, top_h.psi, top_e.psi, far_h.start, far_h.psi, far_e.psi
    for i in range(start, -1, -1):
        if (
            _any_nonzero(ephi[i])
            or _any_nonzero(hr[i])
            or _any_nonzero(hz[i])
            or _any_nonzero(jphi[i])
            or _any_nonzero(psi_hr[i])
            or _any_nonzero(psi_pz[i])
            or _any_nonzero(sib_psi[i])
        ):
            return i
        if i >= ir0 and (_any_nonzero(psi_hz[i - ir0]) or _any_nonzero(psi_pr[i - ir0])):
            return i
    return -1


@nb.njit(parallel=True, **_OPTS)
def step_h_te(te, curl, ground, top, far, dft, n_cols):
    """H half-step of the TE set: mu0 dHr/dt = dEphi/dz, mu0 dHz/dt = -(1/r) d(r Ephi)/dr.

    Ground row of Hr (z = dz/2) with the impedance ground: Ephi(0) = +Zs Hr (Leontovich,
    E_t = Zs n x H with n up), realised as in :func:`step_h` with the same ``ha``, ``hb`` and
    recursive poles (``sib_psi`` the TE set's own memory). Hz rows 1..nz-1 only (row 0 is never
    read: Ephi at the ground is not stepped). The radial operator of Hz is the stencil's ``te_h``
    (fourth order in the interior, Ephi_(-1) = -Ephi_1 folded in). CPML as in
    :func:`step_h`: the top layer on dEphi/dz (Hr rows >= jz0), the far-end layer on the radial
    operator of Hz (columns >= ir0). DFT of Hr at the ground row.
    """
    hr, hz, ephi = te.hr, te.hz, te.ephi
    inv_dz, kz1, kz2, ch, te_h, ha, hb = curl.inv_dz, curl.kz1, curl.kz2, curl.ch, curl.te_h, curl.ha, curl.hb
    sib_q, sib_w, sib_psi = ground.q, ground.w, ground.psi
    jz0, b_zh, c_zh, kd_zh, psi_hr = top.start, top.b, top.c, top.kd, top.psi
    ir0, b_rh, c_rh, kd_rh, psi_hz = far.start, far.b, far.c, far.kd, far.psi
    acc_re, acc_im, cos_h, sin_h = dft.acc_re, dft.acc_im, dft.cos, dft.sin
    nr, nz = hr.shape
    nk = sib_q.shape[0]
    n_top = psi_hr.shape[1]
    nf = acc_re.shape[0]
    for i in prange(n_cols):
        has_next = i + 1 < nr
        e = ephi[i]
        h = hr[i]
        h_old = h[0]
        psi_sum = 0.0
        for k in range(nk):
            p = sib_q[k] * sib_psi[i, k] + sib_w[i, k] * h_old
            sib_psi[i, k] = p
            psi_sum += p
        h[0] = ha[i] * h_old + hb[i] * (e[1] * inv_dz + psi_sum * inv_dz)
        # kz2 = 0 in rows 1 and from the top absorber on (the stencil's closures)
        for j in range(1, nz - 1):
            v = h[j] + ch * (kz1[j] * (e[j + 1] - e[j]) + kz2[j] * (e[j + 2] - e[j - 1]))
            h[j] = v if abs(v) > TINY else np.float32(0.0)
        j = nz - 1
        v = h[j] + ch * kz1[j] * (e[j + 1] - e[j])
        h[j] = v if abs(v) > TINY else np.float32(0.0)
        for k in range(n_top):
            j = jz0 + k
            d = (e[j + 1] - e[j]) * inv_dz
            p = b_zh[k] * psi_hr[i, k] + c_zh[k] * d
            psi_hr[i, k] = p
            h[j] += ch * (kd_zh[k] * d + p)
        # Ephi at columns i+2, i+1, i, i-1 (beyond the last column zero; at i = 0 the i-1 term is
        # folded into i+1, its coefficient zero); a missing column is read through a zero coefficient
        c0, c1, c2, c3 = te_h[i, 0], te_h[i, 1], te_h[i, 2], te_h[i, 3]
        e2 = ephi[min(i + 2, nr - 1)]
        e1 = ephi[min(i + 1, nr - 1)]
        em = ephi[max(i - 1, 0)]
        if i + 2 >= nr:
            c0 = np.float32(0.0)
        if not has_next:
            c1 = np.float32(0.0)
        g = hz[i]
        for j in range(1, nz):
            v = g[j] - ch * (c0 * e2[j] + c1 * e1[j] + c2 * e[j] + c3 * em[j])
            g[j] = v if abs(v) > TINY else np.float32(0.0)
        if i >= ir0:
            kk = i - ir0
            for j in range(1, nz):
                d = -(c0 * e2[j] + c1 * e1[j] + c2 * e[j] + c3 * em[j])
                p = b_rh[kk] * psi_hz[kk, j] + c_rh[kk] * d
                psi_hz[kk, j] = p
                g[j] += ch * (kd_rh[kk] * d + p)
        v = np.float64(h[0])
        for f in range(nf):
            acc_re[f, i] += v * cos_h[f]
            acc_im[f, i] -= v * sin_h[f]


@nb.njit(inline="always", **_OPTS)
def _triple(c, t, k, ez_old, er_old, ep_old, cz, cr, cp, uz, ur, up, e_z, e_r, e_p, sz, sr, sp):
    """One E-J collocated trapezoidal update of a triple (Ez, Er, Ephi with their currents).

    ``c[t, :, k]`` holds T (9, row-major in (r, phi, z)), W (9) and g (3): v' = T v + W s (E + e C/2),
    E' = E + e C - g (u' + u), with C the (stretched) curls, u the stored scaled currents and
    v = s u; ``s`` = sqrt(r) of each node (the cylindrical volume weight; dr/8 on the axis), so that
    the gyration, skew-symmetric in v, conserves the energy of the grid (see
    :func:`cavity.fdtd.media.magnetised_coefficients`). Returns the new (Ez, Er, Ephi, uz, ur, uphi).
    """
    q = c[t, :, k]
    half = np.float32(0.5)
    vr = sr * ur
    vp = sp * up
    vz = sz * uz
    xr = sr * (er_old + half * e_r * cr)
    xp = sp * (ep_old + half * e_p * cp)
    xz = sz * (ez_old + half * e_z * cz)
    nr_ = (q[0] * vr + q[1] * vp + q[2] * vz + q[9] * xr + q[10] * xp + q[11] * xz) / sr
    np_ = (q[3] * vr + q[4] * vp + q[5] * vz + q[12] * xr + q[13] * xp + q[14] * xz) / sp
    nz_ = (q[6] * vr + q[7] * vp + q[8] * vz + q[15] * xr + q[16] * xp + q[17] * xz) / sz
    er_new = er_old + e_r * cr - q[18] * (nr_ + ur)
    ep_new = ep_old + e_p * cp - q[19] * (np_ + up)
    ez_new = ez_old + e_z * cz - q[20] * (nz_ + uz)
    return ez_new, er_new, ep_new, nz_, nr_, np_


@nb.njit(inline="always", **_OPTS)
def _flush(v):
    return v if abs(v) > TINY else np.float32(0.0)


#: Columns per parallel work item of :func:`step_e_mag` (one curl buffer each).
MAG_CHUNK = 16


@nb.njit(parallel=True, **_OPTS)
def step_e_mag(fields, te, curl, plasma, top_r, top_p, far_z, far_p, src, dft, n_cols):
    """E half-step of the six-component scheme with the magnetised plasma current.

    Ampere's law for Ez, Er (as :func:`step_e`) and eps dEphi/dt = dHr/dz - dHz/dr - Jphi. In the
    plasma rows the current is the vector dJ/dt = eps omega_p^2 E - nu J + omega_b x J, advanced
    with the E-J collocated trapezoidal update of magnetised cold plasma (Yu and Simpson 2010,
    IEEE TAP 58(2) 469), which is stable for any omega_p dt, nu dt and omega_b dt. The three E
    components sit at different Yee positions, so each step groups them in disjoint triples: the
    Ez node (i, j+1/2) with the Ephi node (i, j) below it and the Er node (i + 1/2, j) beside that
    (``shift`` = +1), or with the Ephi node (i, j+1) above it and the Er node (i - 1/2, j+1)
    (``shift`` = -1). The engine alternates the two from step to step, so that the coupling is
    centred in range and in height on average: pairing always below left an error of first order
    in the vertical cell, largest under a low dip where the horizontal field couples Jz to Jr and
    Jphi (night, sea, dip 20, westward, 3,000 km: 3.05 dB at 276 m, 6.76 dB at 500 m). With the
    partners above, the top Ez row (whose upper face is the wall) is updated alone, and the first
    plasma row's Er and Ephi, without a partner, as vacuum (its plasma is below the engine's
    threshold). Each triple is one local implicit update (:func:`_triple`);
    every E node belongs to exactly one triple, so the step is passive and the columns stay
    independent. The currents are stored scaled, u = J / sqrt(eps omega_p^2), at their own E
    nodes (``uz``, ``ur``, ``up``); ``coef[tab[i]]`` (21, plasma rows) holds the coefficients of
    the triples anchored at Ez column i, and ``wsq`` (3, nr) the square roots of the volume weights
    of the Ez, Er and Ephi nodes of each column.

    Absorbers (Roden and Gedney 2000) stretch the curls before the update: the top layer the
    z derivatives of Er and Ephi, the far-end layer the radial operators of Ez and Ephi.
    Finally ``ez[0, :len(src)] -= src`` (current elements in the axis cells from the ground up) and
    the ground-row DFT of Ez. Curls are gathered per column first and the triple loop runs
    branch-free over contiguous rows so that the compiler can vectorise it. Columns are shared out
    in blocks of :data:`MAG_CHUNK`, each block with one small curl buffer that never leaves the
    cache (a whole-grid buffer cost about a tenth of the step in memory traffic).

    Groups: ``fields`` (Ez, Er, H_phi and the scaled currents uz, ur in its jz, jr), ``te`` (Ephi,
    Hr, Hz, u_phi), ``curl`` (:class:`ECurlMag`), ``plasma`` (:class:`Magnetoplasma`), the top
    layer's memories of dH_phi/dz for Er (``top_r``) and of dHr/dz for Ephi (``top_p``), the far
    layer's of the radial operators for Ez (``far_z``) and Ephi (``far_p``).
    """
    ez, er, hp, uz, ur = fields.ez, fields.er, fields.hp, fields.jz, fields.jr
    ephi, hr, hz, up = te.ephi, te.hr, te.hz, te.jphi
    ec, te_e, inv_dz, cez, cer, jp0 = curl.er_coef, curl.te_e, curl.inv_dz, curl.cez, curl.cer, curl.jp0
    ke1, ke2 = curl.ke1, curl.ke2
    coef, tab, shift, wsq = plasma.coef, plasma.tab, plasma.shift, plasma.wsq
    jz0, b_ze, c_ze, kd_ze, psi_ze, psi_pz = top_r.start, top_r.b, top_r.c, top_r.kd, top_r.psi, top_p.psi
    ir0, b_re, c_re, kd_re, psi_re, psi_pr = far_z.start, far_z.b, far_z.c, far_z.kd, far_z.psi, far_p.psi
    acc_re, acc_im, cos_e, sin_e = dft.acc_re, dft.acc_im, dft.cos, dft.sin
    nr, nz = ez.shape
    n = nz - jp0
    n_top = psi_ze.shape[1]
    nf = acc_re.shape[0]
    zero = np.float32(0.0)
    half = np.float32(0.5)
    n_chunks = (n_cols + MAG_CHUNK - 1) // MAG_CHUNK
    for blk in prange(n_chunks):
        # the curls of one column at a time, in a buffer that stays in the first-level cache
        curls = np.empty((3, nz), np.float32)
        for i in range(blk * MAG_CHUNK, min(n_cols, (blk + 1) * MAG_CHUNK)):
            ie = np.int64(i) - (np.int64(1) if shift < 0 else np.int64(0))  # Er column of the triples (-1: none)
            lift = 1 if shift < 0 else 0  # the partners' rows: 0 the Ez node's lower face, 1 its upper face
            # radial stencils read columns i+1 .. i-2; a column outside the grid has a zero coefficient
            ip1 = min(i + 1, nr - 1)
            im1 = max(i - 1, 0)
            im2 = max(i - 2, 0)
            a0, a1, a2, a3 = ec[i, 0], ec[i, 1], ec[i, 2], ec[i, 3]
            t0, t1, t2, t3 = te_e[i, 0], te_e[i, 1], te_e[i, 2], te_e[i, 3]
            if i + 1 >= nr:
                a0 = zero
                t0 = zero
            h1 = hp[ip1]
            h = hp[i]
            hm = hp[im1]
            hm2 = hp[im2]
            far = i >= ir0
            kk = i - ir0
            # curls of every row (vacuum and plasma), stretched in the absorbers
            cz = curls[0]
            cp = curls[1]
            cr = curls[2]
            for j in range(nz):
                cz[j] = a0 * h1[j] + a1 * h[j] + a2 * hm[j] + a3 * hm2[j]
                cp[j] = zero
                cr[j] = zero
            if far:
                for j in range(nz):
                    p = b_re[kk] * psi_re[kk, j] + c_re[kk] * cz[j]
                    psi_re[kk, j] = p
                    cz[j] = cz[j] + kd_re[kk] * cz[j] + p
            if i > 0:
                g_r = hr[i]
                g_z1 = hz[ip1]
                g_z = hz[i]
                g_zm = hz[im1]
                g_zm2 = hz[im2]
                for j in range(1, nz):
                    cp[j] = -(t0 * g_z1[j] + t1 * g_z[j] + t2 * g_zm[j] + t3 * g_zm2[j])
                # dHr/dz: ke2 = 0 in rows 1 and from the top absorber on (the stencil's closures)
                cp[1] += ke1[1] * (g_r[1] - g_r[0])
                for j in range(2, nz - 1):
                    cp[j] += ke1[j] * (g_r[j] - g_r[j - 1]) + ke2[j] * (g_r[j + 1] - g_r[j - 2])
                cp[nz - 1] += ke1[nz - 1] * (g_r[nz - 1] - g_r[nz - 2])
                for k in range(n_top):
                    j = jz0 + k
                    d = (g_r[j] - g_r[j - 1]) * inv_dz
                    p = b_ze[k] * psi_pz[i, k] + c_ze[k] * d
                    psi_pz[i, k] = p
                    cp[j] += kd_ze[k] * d + p
                if far:
                    for j in range(1, nz):
                        d = -(t0 * g_z1[j] + t1 * g_z[j] + t2 * g_zm[j] + t3 * g_zm2[j])
                        p = b_re[kk] * psi_pr[kk, j] + c_re[kk] * d
                        psi_pr[kk, j] = p
                        cp[j] += kd_re[kk] * d + p
            if ie >= 0:
                he = hp[ie]
                cr[1] = -ke1[1] * (he[1] - he[0])
                for j in range(2, nz - 1):
                    cr[j] = -(ke1[j] * (he[j] - he[j - 1]) + ke2[j] * (he[j + 1] - he[j - 2]))
                cr[nz - 1] = -ke1[nz - 1] * (he[nz - 1] - he[nz - 2])
                for k in range(n_top):
                    j = jz0 + k
                    d = cr[j]
                    p = b_ze[k] * psi_ze[ie, k] + c_ze[k] * d
                    psi_ze[ie, k] = p
                    cr[j] += kd_ze[k] * d + p
            # vacuum rows (with the partners above, the first plasma row's Er and Ephi too: the
            # engine keeps that row's plasma below its threshold)
            e_z = ez[i]
            for j in range(jp0):
                e_z[j] += cez[j] * cz[j]
            if i > 0:
                e_p = ephi[i]
                for j in range(1, jp0 + lift):
                    e_p[j] += cer[j] * cp[j]
            if ie >= 0:
                e_r = er[ie]
                for j in range(1, jp0 + lift):
                    e_r[j] += cer[j] * cr[j]
            # plasma rows: one triple per row
            t = tab[i]
            q = coef[t]
            if i > 0 and ie >= 0:
                sz, sr, sp = wsq[0, i], wsq[1, ie], wsq[2, i]
                iz, ir_, ip = np.float32(1.0) / sz, np.float32(1.0) / sr, np.float32(1.0) / sp
                # whole triples: Ez rows jp0 .. jp0+m-1 with the Er and Ephi rows ``lift`` above their
                # lower faces
                m = max(n - lift, 0)
                xz_ = ez[i, jp0 : jp0 + m]
                xr_ = er[ie, jp0 + lift : jp0 + lift + m]
                xp_ = ephi[i, jp0 + lift : jp0 + lift + m]
                wz = uz[i, :m]
                wr = ur[ie, lift : lift + m]
                wp = up[i, lift : lift + m]
                ccz = cz[jp0 : jp0 + m]
                ccr = cr[jp0 + lift : jp0 + lift + m]
                ccp = cp[jp0 + lift : jp0 + lift + m]
                ez_c = cez[jp0 : jp0 + m]
                er_c = cer[jp0 + lift : jp0 + lift + m]
                for k in range(m):
                    e_zo = xz_[k]
                    e_ro = xr_[k]
                    e_po = xp_[k]
                    u_z = wz[k]
                    u_r = wr[k]
                    u_p = wp[k]
                    dz_ = ez_c[k] * ccz[k]
                    dr_ = er_c[k] * ccr[k]
                    dp_ = er_c[k] * ccp[k]
                    vr = sr * u_r
                    vp = sp * u_p
                    vz = sz * u_z
                    yr = sr * (e_ro + half * dr_)
                    yp = sp * (e_po + half * dp_)
                    yz = sz * (e_zo + half * dz_)
                    nr_ = (
                        q[0, k] * vr + q[1, k] * vp + q[2, k] * vz + q[9, k] * yr + q[10, k] * yp + q[11, k] * yz
                    ) * ir_
                    np_ = (
                        q[3, k] * vr + q[4, k] * vp + q[5, k] * vz + q[12, k] * yr + q[13, k] * yp + q[14, k] * yz
                    ) * ip
                    nz_ = (
                        q[6, k] * vr + q[7, k] * vp + q[8, k] * vz + q[15, k] * yr + q[16, k] * yp + q[17, k] * yz
                    ) * iz
                    v1 = e_ro + dr_ - q[18, k] * (nr_ + u_r)
                    v2 = e_po + dp_ - q[19, k] * (np_ + u_p)
                    v3 = e_zo + dz_ - q[20, k] * (nz_ + u_z)
                    xr_[k] = v1 if abs(v1) > TINY else zero
                    xp_[k] = v2 if abs(v2) > TINY else zero
                    xz_[k] = v3 if abs(v3) > TINY else zero
                    wr[k] = nr_ if abs(nr_) > TINY else zero
                    wp[k] = np_ if abs(np_) > TINY else zero
                    wz[k] = nz_ if abs(nz_) > TINY else zero
                if lift and n > 0:
                    # the top Ez row: its upper face is the wall, so it is updated alone
                    k = n - 1
                    j = jp0 + k
                    ez_new, _, _, uz_new, _, _ = _triple(
                        coef,
                        t,
                        k,
                        ez[i, j],
                        zero,
                        zero,
                        cz[j],
                        zero,
                        zero,
                        uz[i, k],
                        zero,
                        zero,
                        cez[j],
                        cer[j],
                        cer[j],
                        sz,
                        np.float32(1.0),
                        np.float32(1.0),
                    )
                    ez[i, j] = _flush(ez_new)
                    uz[i, k] = _flush(uz_new)
            else:
                # the axis column and the column without an Er partner: absent components are zero
                one = np.float32(1.0)
                for k in range(n):
                    j = jp0 + k
                    jj = j + lift  # the partners' row (nz: the wall, no partner)
                    kk = k + lift
                    inside = jj < nz
                    er_old = zero
                    ur_old = zero
                    ep_old = zero
                    up_old = zero
                    c_r = zero
                    c_p = zero
                    sr = one
                    if ie >= 0 and inside:
                        er_old = er[ie, jj]
                        ur_old = ur[ie, kk]
                        c_r = cr[jj]
                        sr = wsq[1, ie]
                    if i > 0 and inside:
                        ep_old = ephi[i, jj]
                        up_old = up[i, kk]
                        c_p = cp[jj]
                    sp = wsq[2, i] if i > 0 else one
                    e_c = cer[jj] if inside else cer[j]
                    ez_new, er_new, ep_new, uz_new, ur_new, up_new = _triple(
                        coef,
                        t,
                        k,
                        ez[i, j],
                        er_old,
                        ep_old,
                        cz[j],
                        c_r,
                        c_p,
                        uz[i, k],
                        ur_old,
                        up_old,
                        cez[j],
                        e_c,
                        e_c,
                        wsq[0, i],
                        sr,
                        sp,
                    )
                    ez[i, j] = _flush(ez_new)
                    uz[i, k] = _flush(uz_new)
                    if i > 0 and inside:
                        ephi[i, jj] = _flush(ep_new)
                        up[i, kk] = _flush(up_new)
                    if ie >= 0 and inside:
                        er[ie, jj] = _flush(er_new)
                        ur[ie, kk] = _flush(ur_new)
            if i == 0:
                for j in range(src.shape[0]):
                    ez[0, j] -= src[j]
            v = np.float64(ez[i, 0])
            for f in range(nf):
                acc_re[f, i] += v * cos_e[f]
                acc_im[f, i] -= v * sin_e[f]


@nb.njit(**_OPTS)
def step_er_alone(fields, curl, plasma, t, top_r, col):
    """The Er column that no triple holds this step (the last one when ``shift`` = -1): its own
    update with its radial current alone (``plasma.coef[t]`` built with Ez and Ephi absent). Groups
    as in :func:`step_e_mag`."""
    er, hp, ur = fields.er, fields.hp, fields.jr
    cer, jp0, ke1, ke2 = curl.cer, curl.jp0, curl.ke1, curl.ke2
    coef, wsq = plasma.coef, plasma.wsq
    jz0, b_ze, c_ze, kd_ze, psi_ze = top_r.start, top_r.b, top_r.c, top_r.kd, top_r.psi
    nz = er.shape[1] - 1
    zero = np.float32(0.0)
    h = hp[col]
    for j in range(1, nz):
        c = -ke1[j] * (h[j] - h[j - 1])
        if 2 <= j < nz - 1:
            c -= ke2[j] * (h[j + 1] - h[j - 2])
        if j >= jz0:
            kt = j - jz0
            p = b_ze[kt] * psi_ze[col, kt] + c_ze[kt] * c
            psi_ze[col, kt] = p
            c = c + kd_ze[kt] * c + p
        if j < jp0:
            er[col, j] += cer[j] * c
        else:
            k = j - jp0
            _, er_new, _, _, ur_new, _ = _triple(
                coef,
                t,
                k,
                zero,
                er[col, j],
                zero,
                zero,
                c,
                zero,
                zero,
                ur[col, k],
                zero,
                cer[j],
                cer[j],
                cer[j],
                np.float32(1.0),
                wsq[1, col],
                np.float32(1.0),
            )
            er[col, j] = _flush(er_new)
            ur[col, k] = _flush(ur_new)
