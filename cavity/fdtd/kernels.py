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

import numba as nb
import numpy as np
from numba import prange

_OPTS = dict(cache=True, nogil=True, fastmath=False, error_model="numpy")


@nb.njit(parallel=True, **_OPTS)
def update_h(hp, ez, er, inv_dr, inv_dz, ch, ha, hb, sib_q, sib_w, sib_psi):
    """H_phi from Faraday's law, mu0 dH/dt = dEz/dr - dEr/dz, bottom row with the impedance ground.

    ``ch`` = dt/mu0. Row 0 (z = dz/2) takes the ground's tangential field
    Er(0) = -eta (H(n+1/2) + H(n-1/2))/2 + sum_k psi_k: the instantaneous part averaged in time
    (semi-implicit, unconditionally stable) and the memory part as a sum of recursively updated
    exponentials ``psi_k(n) = q_k psi_k(n-1) + w_k H(n-1/2)``; ``ha``/``hb`` per column fold eta in.
    Perfect ground: eta = 0, w = 0 (ha = 1, hb = dt/mu0).
    """
    nr, nz = hp.shape
    nk = sib_q.shape[0]
    for i in prange(nr):
        has_next = i + 1 < nr
        # ground row: update the impedance memory with H(n-1/2) first
        h_old = hp[i, 0]
        psi_sum = 0.0
        for k in range(nk):
            p = sib_q[k] * sib_psi[k, i] + sib_w[k, i] * h_old
            sib_psi[k, i] = p
            psi_sum += p
        ezn = ez[i + 1, 0] if has_next else np.float32(0.0)
        curl = (ezn - ez[i, 0]) * inv_dr - er[i, 1] * inv_dz + psi_sum * inv_dz
        hp[i, 0] = ha[i] * h_old + hb[i] * curl
        if has_next:
            for j in range(1, nz):
                hp[i, j] += ch * ((ez[i + 1, j] - ez[i, j]) * inv_dr - (er[i, j + 1] - er[i, j]) * inv_dz)
        else:
            for j in range(1, nz):
                hp[i, j] += ch * (-ez[i, j] * inv_dr - (er[i, j + 1] - er[i, j]) * inv_dz)


@nb.njit(parallel=True, **_OPTS)
def update_e(ez, er, hp, rp, rm, inv_dz, cez, cer, jp0, ed_z, qa_z, qb_z, jz, ed_r, qa_r, qb_r, jr):
    """Ez and Er from Ampere's law, with the collisional-plasma current above row ``jp0``.

    Vacuum rows (j < jp0): E += c * curl H with ``cez[j]``/``cer[j]`` = dt/eps(z) (eps includes the
    earth-flattening factor). Plasma rows: the E-J collocated trapezoidal update (Yu and Simpson
    2010, IEEE TAP 58(2) 469), stable for any omega_p dt and nu dt:

        E(n+1) = E(n) + [curlH(n+1/2) - qb E(n) - (1 + qa)/2 J(n)] / (eps/dt + qb/2)
        J(n+1) = qa J(n) + qb (E(n+1) + E(n))

    with ``ed`` = eps/dt and ``qa`` per plasma row (the collision frequency depends on height only)
    and ``qb`` = eps omega_p^2 (dt/2)/(1 + nu dt/2) per cell: the fewest arrays streamed per cell.
    Ez curl: (r_{i+1/2} H_{i+1/2} - r_{i-1/2} H_{i-1/2}) / (r_i dr) = rp[i] H_i - rm[i] H_{i-1};
    on the axis rp[0] = 4/dr, rm[0] = 0 (Ampere's law on the disc of radius dr/2).
    Er curl: -(H_j - H_{j-1})/dz; Er rows 0 and nz are walls (ground handled in :func:`update_h`).
    The plasma never reaches row 0 (``jp0 >= 1``). Inner loops run over row views indexed from
    zero so that the compiler can vectorise them.
    """
    nr, nz = ez.shape
    n = nz - jp0
    half = np.float32(0.5)
    one = np.float32(1.0)
    for i in prange(nr):
        im = i - 1 if i > 0 else 0
        a = rp[i]
        b = rm[i]
        e_z = ez[i]
        e_r = er[i]
        h = hp[i]
        hm = hp[im]
        # vacuum rows
        for j in range(jp0):
            e_z[j] += cez[j] * (a * h[j] - b * hm[j])
        for j in range(1, jp0):
            e_r[j] -= cer[j] * (h[j] - h[j - 1]) * inv_dz
        # plasma rows (views shifted to start at jp0)
        ezp = ez[i, jp0:]
        hp0 = hp[i, jp0:]
        hpm = hp[im, jp0:]
        qb = qb_z[i]
        jj = jz[i]
        for k in range(n):
            e_old = ezp[k]
            g = qb[k]
            e_new = e_old + ((a * hp0[k] - b * hpm[k]) - g * e_old - half * (one + qa_z[k]) * jj[k]) / (ed_z[k] + half * g)
            jj[k] = qa_z[k] * jj[k] + g * (e_new + e_old)
            ezp[k] = e_new
        erp = er[i, jp0:]
        hlo = hp[i, jp0 - 1:]
        qb = qb_r[i]
        jj = jr[i]
        for k in range(n):
            e_old = erp[k]
            g = qb[k]
            curl = -(hp0[k] - hlo[k]) * inv_dz
            e_new = e_old + (curl - g * e_old - half * (one + qa_r[k]) * jj[k]) / (ed_r[k] + half * g)
            jj[k] = qa_r[k] * jj[k] + g * (e_new + e_old)
            erp[k] = e_new


@nb.njit(parallel=True, **_OPTS)
def pml_z_h(hp, er, jz0, inv_dz, ch, b, c, kap, psi):
    """Top convolutional PML (Roden and Gedney 2000, MOTL 27(5) 334): dEr/dz in the H update.

    Called after the ordinary update. For a derivative d the absorber needs (1/kappa) d + psi with
    psi(n) = b psi(n-1) + c d; the ordinary update already applied d, so the correction adds
    coef * ((1/kappa - 1) d + psi). Rows j >= jz0, all columns; ``ch`` = dt/mu0.
    """
    nr = hp.shape[0]
    nrow = psi.shape[1]
    for i in prange(nr):
        for k in range(nrow):
            j = jz0 + k
            d = -(er[i, j + 1] - er[i, j]) * inv_dz
            p = b[k] * psi[i, k] + c[k] * d
            psi[i, k] = p
            hp[i, j] += ch * ((1.0 / kap[k] - 1.0) * d + p)


@nb.njit(parallel=True, **_OPTS)
def pml_z_e(er, hp, jz0, inv_dz, ce, b, c, kap, psi, jp0, jr, qb_r):
    """Top CPML correction of dH/dz in the Er update, rows j >= jz0 (all >= 1).

    ``ce[i, k]`` is the curl coefficient of each absorber cell (dt/eps in vacuum, pb in plasma).
    In plasma cells the current J(n+1) was computed from the uncorrected E(n+1); it receives
    qb * dE so that the pair stays the trapezoidal E-J update of the stretched equations.
    """
    nr = er.shape[0]
    nrow = psi.shape[1]
    for i in prange(nr):
        for k in range(nrow):
            j = jz0 + k
            d = -(hp[i, j] - hp[i, j - 1]) * inv_dz
            p = b[k] * psi[i, k] + c[k] * d
            psi[i, k] = p
            de = ce[i, k] * ((1.0 / kap[k] - 1.0) * d + p)
            er[i, j] += de
            if j >= jp0:
                jr[i, j - jp0] += qb_r[i, j - jp0] * de


@nb.njit(parallel=True, **_OPTS)
def pml_r_h(hp, ez, ir0, inv_dr, ch_col, b, c, kap, psi):
    """Far-end PML correction of dEz/dr in the H_phi update, columns i >= ir0 (all rows).

    ``ch_col[k, j]`` is the H curl coefficient of each cell (dt/mu0, or the ground row's ``hb``).
    """
    nr, nz = hp.shape
    ncol = psi.shape[0]
    for k in prange(ncol):
        i = ir0 + k
        for j in range(nz):
            ezn = ez[i + 1, j] if i + 1 < nr else np.float32(0.0)
            d = (ezn - ez[i, j]) * inv_dr
            p = b[k] * psi[k, j] + c[k] * d
            psi[k, j] = p
            hp[i, j] += ch_col[k, j] * ((1.0 / kap[k] - 1.0) * d + p)


@nb.njit(parallel=True, **_OPTS)
def pml_r_e(ez, hp, ir0, rp, rm, ce, b, c, kap, psi, jp0, jz, qb_z):
    """Far-end PML correction of (1/r) d(r H)/dr in the Ez update, columns i >= ir0 (all rows).

    The radial derivative is stretched as a Cartesian one (error of order layer depth / r,
    negligible at the ranges where the layer sits). ``ce[k, j]`` = Ez curl coefficient; plasma
    currents are kept consistent as in :func:`pml_z_e`.
    """
    nz = ez.shape[1]
    ncol = psi.shape[0]
    for k in prange(ncol):
        i = ir0 + k
        for j in range(nz):
            d = rp[i] * hp[i, j] - rm[i] * hp[i - 1, j]
            p = b[k] * psi[k, j] + c[k] * d
            psi[k, j] = p
            de = ce[k, j] * ((1.0 / kap[k] - 1.0) * d + p)
            ez[i, j] += de
            if j >= jp0:
                jz[i, j - jp0] += qb_z[i, j - jp0] * de


@nb.njit(parallel=True, **_OPTS)
def accumulate_dft(acc_re, acc_im, field, row, cos_k, sin_k):
    """Running DFT of one field row: acc[f, i] += field[i, row] * exp(-j omega_f t)."""
    nf, n = acc_re.shape
    for i in prange(n):
        v = np.float64(field[i, row])
        for f in range(nf):
            acc_re[f, i] += v * cos_k[f]
            acc_im[f, i] -= v * sin_k[f]


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
        if not (best[i] <= best[k]):
            k = i
    return best[k], where[k]


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
