"""Update coefficients: plasma current, earth flattening, CPML grading and the impedance ground.

Each physics ingredient is one function returning plain arrays the kernels consume; each is tested
against an outside reference (tests/test_media.py) before it joins the engine.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from scipy.optimize import nnls

from cavity.constants import EARTH_RADIUS_M, ELECTRON_CHARGE, ELECTRON_MASS, EPS0, ETA0, MU0


def flattening_factor(altitude_m, earth_curvature: bool = True, earth_radius_m: float = EARTH_RADIUS_M):
    """Earth-flattening permittivity factor (1 + z/a)^2 (Richter 1966, Radio Science 1(12)).

    Multiplies eps0 and eps0*omega_p^2 alike (mu unchanged) so that a flat (r, z) guide carries the
    modes of the curved one. Returns ones when ``earth_curvature`` is false.
    """
    z = np.asarray(altitude_m, dtype=float)
    if not earth_curvature:
        return np.ones_like(z)
    return (1.0 + z / earth_radius_m) ** 2


def spherical_spreading_correction(range_m, earth_radius_m: float = EARTH_RADIUS_M):
    """Amplitude factor sqrt(d / (a sin(d/a))) turning flat 1/sqrt(r) spreading into spherical.

    docs/physics.md 7; +0.5 dB at 5 Mm and +2 dB at 10 Mm.
    """
    d = np.asarray(range_m, dtype=float)
    x = d / earth_radius_m
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.sqrt(np.where(x > 1e-9, x / np.sin(x), 1.0))
    return out


def plasma_coefficients(eps_eff, omega_p2, nu, dt):
    """E-J collocated trapezoidal update of an isotropic collisional cold plasma.

    Yu and Simpson 2010, IEEE TAP 58(2) 469 (docs/physics.md 3). With eps the (flattened) permittivity
    of the host, dJ/dt + nu J = eps omega_p^2 E and eps dE/dt = curl H - J give

        a = (1 - nu dt/2)/(1 + nu dt/2),  b = (eps omega_p^2 dt/2)/(1 + nu dt/2)
        E(n+1) = [(eps/dt - b/2) E(n) + curlH - (1+a)/2 J(n)] / (eps/dt + b/2)
        J(n+1) = a J(n) + b (E(n+1) + E(n))

    Returns ``(pa, pb, pc, qa, qb)`` with E(n+1) = pa E + pb curlH - pc J, J(n+1) = qa J + qb (E+E).
    Stable for any omega_p dt and nu dt.
    """
    eps_eff = np.asarray(eps_eff, dtype=float)
    omega_p2 = np.asarray(omega_p2, dtype=float)
    nu = np.asarray(nu, dtype=float)
    half = 0.5 * nu * dt
    qa = (1.0 - half) / (1.0 + half)
    qb = eps_eff * omega_p2 * (0.5 * dt) / (1.0 + half)
    denom = eps_eff / dt + 0.5 * qb
    pa = (eps_eff / dt - 0.5 * qb) / denom
    pb = 1.0 / denom
    pc = 0.5 * (1.0 + qa) * pb
    return pa, pb, pc, qa, qb


def sigma_optimal(cell_m: float, grading_order: float = 3.0, eps_r: float = 1.0) -> float:
    """Optimal peak conductivity of a polynomially graded PML (Taflove and Hagness 2005, eq. 7.66)."""
    return 0.8 * (grading_order + 1.0) / (ETA0 * cell_m * math.sqrt(eps_r))


def cpml_coefficients(
    n_cells: int,
    cell_m: float,
    dt: float,
    *,
    offset: float = 0.0,
    grading_order: float = 3.0,
    sigma_scale: float = 1.0,
    kappa_max: float = 1.0,
    alpha_max: float = 0.0,
):
    """Recursive-convolution CPML coefficients (Roden and Gedney 2000, MOTL 27(5) 334).

    Depth x = (k + offset) cell for k = 0..n-1 over a layer of n cells:
    sigma = sigma_max (x/d)^m, kappa = 1 + (kappa_max - 1)(x/d)^m, alpha = alpha_max (1 - x/d)^m,
    b = exp(-(sigma/kappa + alpha) dt/eps0), c = sigma (b - 1)/(sigma kappa + kappa^2 alpha).
    At VLF alpha must stay far below 5.6e-8 S/m per kHz (docs/physics.md 4); the default is 0.
    Returns ``(b, c, kappa)`` arrays of length n.
    """
    d = n_cells * cell_m
    x = (np.arange(n_cells) + offset) * cell_m
    g = np.clip(x / d, 0.0, 1.0) ** grading_order
    sigma = sigma_scale * sigma_optimal(cell_m, grading_order) * g
    kappa = 1.0 + (kappa_max - 1.0) * g
    alpha = alpha_max * (1.0 - np.clip(x / d, 0.0, 1.0)) ** grading_order
    b = np.exp(-(sigma / kappa + alpha) * dt / EPS0)
    denom = sigma * kappa + kappa**2 * alpha
    with np.errstate(invalid="ignore", divide="ignore"):
        c = np.where(denom > 0, sigma * (b - 1.0) / np.where(denom > 0, denom, 1.0), 0.0)
    return b, c, kappa


def leontovich_impedance(omega, conductivity: float, relative_permittivity: float):
    """Surface impedance of a homogeneous ground, Zs = sqrt(j omega mu0 / (sigma + j omega eps)).

    Leontovich boundary condition (docs/physics.md 5), time convention exp(+j omega t).
    """
    omega = np.asarray(omega, dtype=float)
    return np.sqrt(1j * omega * MU0 / (conductivity + 1j * omega * EPS0 * relative_permittivity))


@functools.lru_cache(maxsize=256)
def impedance_fit(conductivity: float, relative_permittivity: float, dt: float, f_low_hz: float, f_high_hz: float):
    """Recursive surface-impedance ground: the discrete impedance fitted to the Leontovich one.

    The ground field is Er(0) = -eta (H(n+1/2) + H(n-1/2))/2 + sum_k psi_k(n) with
    psi_k(n) = q_k psi_k(n-1) + w_k H(n-1/2), q_k = exp(-p_k dt): a sum of decaying exponentials
    that makes the convolution Er = -Zs * H recursive (Maloney and Smith 1992, IEEE TAP 40(1);
    Oh and Schutt-Aine 1995, IEEE TAP 43(7) 660). Its z-transform is

        Z_d(omega) = eta cos(omega dt/2) - sum_k w_k z^(-1/2) / (1 - q_k z^(-1)),  z = exp(j omega dt),

    linear in (eta, w_k). Poles are fixed, log-spaced (4 per decade) beyond both ends of the band;
    (eta, w_k) come from linear least squares on the relative error over [1 Hz, 3 f_high].
    The fit is accepted only if Re Z_d >= 0 up to the Nyquist frequency (passive, hence stable);
    otherwise non-negative least squares gives a passive Stieltjes-type fit. Fitting the discrete
    form also removes the time-discretisation error of the recursion.

    Returns ``(eta, q, w, max_rel_error_in_band)``; perfect ground gives eta = 0 and no poles.
    """
    if math.isinf(conductivity):
        return 0.0, np.zeros(0), np.zeros(0), 0.0
    # fit from far below the band (1 Hz) so the realised impedance stays passive there too
    w_lo = 2 * math.pi * min(1.0, f_low_hz / 100.0)
    w_hi = min(2 * math.pi * f_high_hz * 3.0, 0.5 * math.pi / dt)
    omega = np.geomspace(w_lo, w_hi, 400)
    z_exact = leontovich_impedance(omega, conductivity, relative_permittivity)
    p_max = max(w_hi * 30.0, 2.0 / dt)
    poles = np.geomspace(w_lo / 30.0, p_max, int(np.log10(p_max * 30.0 / w_lo) * 4) + 1)
    q = np.exp(-poles * dt)
    zinv = np.exp(-1j * omega * dt)
    basis = np.stack([np.cos(omega * dt / 2)] + [-np.sqrt(zinv) / (1 - qk * zinv) for qk in q], axis=1)
    m = basis / np.abs(z_exact)[:, None]
    rhs = z_exact / np.abs(z_exact)
    a = np.vstack([m.real, m.imag])
    y = np.concatenate([rhs.real, rhs.imag])
    scale = np.linalg.norm(a, axis=0)
    x = np.linalg.lstsq(a / scale, y, rcond=1e-12)[0] / scale
    check = np.linspace(0.0, math.pi / dt, 4001)
    if discrete_impedance(check, dt, x[0], q, x[1:]).real.min() < -1e-9 * abs(x[0]):
        # not passive: fall back to the non-negative (Stieltjes) form, slightly less accurate
        x = nnls(a / scale, y, maxiter=100 * a.shape[1])[0] / scale
    eta, w = float(x[0]), x[1:]
    z_fit = discrete_impedance(omega, dt, eta, q, w)
    band = (omega >= 2 * math.pi * f_low_hz * 0.5) & (omega <= 2 * math.pi * f_high_hz * 2.0)
    err = float(np.max(np.abs(z_fit[band] / z_exact[band] - 1.0))) if band.any() else 0.0
    return eta, q, w, err


def discrete_impedance(omega, dt: float, eta: float, q, w):
    """The impedance Z_d(omega) realised by the recursive ground update (see :func:`impedance_fit`)."""
    omega = np.asarray(omega, dtype=float)
    zinv = np.exp(-1j * omega * dt)
    out = eta * np.cos(omega * dt / 2) + 0j
    for qk, wk in zip(np.atleast_1d(q), np.atleast_1d(w)):
        out = out - wk * np.sqrt(zinv) / (1 - qk * zinv)
    return out


def gyro_matrix(omega_b):
    """[omega_b x] in (r, phi, z) components (a right-handed frame): ``gyro_matrix(w) @ J = w x J``."""
    w = np.asarray(omega_b, dtype=float)
    wr, wp, wz = w[..., 0], w[..., 1], w[..., 2]
    zero = np.zeros_like(wr)
    return np.stack([np.stack([zero, -wz, wp], -1), np.stack([wz, zero, -wr], -1), np.stack([-wp, wr, zero], -1)], -2)


def _inverse3(a):
    """Inverses of stacked 3x3 matrices by the adjugate, element by element (bit-reproducible,
    unlike LAPACK or matmul paths that depend on memory alignment and threads)."""
    c = np.empty_like(a)
    for i in range(3):
        for j in range(3):
            r = [k for k in range(3) if k != j]
            q = [k for k in range(3) if k != i]
            minor = a[..., r[0], q[0]] * a[..., r[1], q[1]] - a[..., r[0], q[1]] * a[..., r[1], q[0]]
            c[..., i, j] = minor if (i + j) % 2 == 0 else -minor
    det = a[..., 0, 0] * c[..., 0, 0] + a[..., 0, 1] * c[..., 1, 0] + a[..., 0, 2] * c[..., 2, 0]
    return c / det[..., None, None]


def _product3(a, b):
    """Products of stacked 3x3 matrices, element by element (see :func:`_inverse3`)."""
    out = np.empty(np.broadcast_shapes(a.shape, b.shape))
    for i in range(3):
        for j in range(3):
            out[..., i, j] = a[..., i, 0] * b[..., 0, j] + a[..., i, 1] * b[..., 1, j] + a[..., i, 2] * b[..., 2, j]
    return out


def magnetised_coefficients(eps_eff, omega_p2, nu, omega_b, present, dt):
    """E-J collocated trapezoidal update of a magnetised collisional cold plasma, per triple.

    The electron current obeys dJ/dt = eps omega_p^2 E - nu J + omega_b x J (physics of the cold
    magnetoplasma, e.g. Budden 1985, The Propagation of Radio Waves, ch. 3; omega_b = e B0 / m_e
    along B0). With the current scaled as u = J / d, d = sqrt(eps omega_p^2), and the trapezoidal
    rule for E and u together (Yu and Simpson 2010, IEEE TAP 58(2) 469):

        eps (E' - E)/dt = C - d (u' + u)/2
        (u' - u)/dt = d (E' + E)/2 - M (u' + u)/2,   M = diag(nu) - [omega_b x]

    Eliminating E' gives u' = T u + W (E + e C/2) and E' = E + e C - g (u' + u) with e = dt/eps,
    g = e d/2, P = (dt/2) M + diag(omega_p^2 dt^2/4), T = (I + P)^-1 (I - P), W = (I + P)^-1 diag(dt d).
    The symmetric part of P is non-negative, so T is a contraction and the update is stable for
    any omega_p dt, nu dt and omega_b dt. Each component's d, nu and eps are its own node's, so
    with omega_b = 0 this is exactly :func:`plasma_coefficients` per component; the gyration acts
    on u (skew-symmetric in u), i.e. at the geometric mean density of the triple's nodes.

    Parameters
    ----------
    eps_eff, omega_p2, nu : array (..., 3)
        Per triple and component (r, phi, z): permittivity (F/m), omega_p^2 (s^-2), nu (s^-1).
    omega_b : array (..., 3)
        Gyro vector e B0 / m_e (rad/s) in (r, phi, z).
    present : array (..., 3) of bool
        Components that exist in the triple (an absent one is left out of the update).
    dt : float

    Returns
    -------
    array (..., 21): T (9, row-major), W (9), g (3), the layout of ``kernels._triple``.
    """
    eps = np.asarray(eps_eff, dtype=float)
    wp2 = np.where(present, np.asarray(omega_p2, dtype=float), 0.0)
    nu = np.asarray(nu, dtype=float)
    pres = np.asarray(present, dtype=bool)
    d = np.sqrt(eps * wp2)
    omega = gyro_matrix(np.broadcast_to(np.asarray(omega_b, float), wp2.shape))
    omega = omega * pres[..., :, None] * pres[..., None, :]
    eye = np.broadcast_to(np.eye(3), omega.shape)
    diag = np.where(pres, 0.5 * dt * nu + 0.25 * dt**2 * wp2, 0.0)
    p = -0.5 * dt * omega + eye * diag[..., None, :]
    inv = _inverse3(eye + p)
    t = _product3(inv, eye - p)
    w = inv * (dt * d)[..., None, :]
    t = t * pres[..., :, None] * pres[..., None, :]
    w = w * pres[..., :, None] * pres[..., None, :]
    g = np.where(pres, 0.5 * (dt / eps) * d, 0.0)
    shape = wp2.shape[:-1]
    return np.concatenate([t.reshape(shape + (9,)), w.reshape(shape + (9,)), g], axis=-1)


#: Smallest |cos| of the angle between the vertical and B0 used by :func:`whistler_vertical_index`
#: (a dip of about 6 deg): for a nearly horizontal field the quasi-longitudinal form no longer holds.
MIN_VERTICAL_FIELD_SHARE = 0.1


def whistler_cap_omega_p2(b_t, frequency_hz: float, index: float, flattening: float = 1.0) -> np.ndarray:
    """omega_p^2 (rad^2/s^2) at which the vertical whistler-mode index of
    :func:`whistler_vertical_index` reaches ``index``, per field row (T, shape (3,) or (n, 3) in
    (r, phi, z)): X = (index^2 / flattening - 1)(Y |cos theta| - 1). ``inf`` where no whistler-mode
    wave travels vertically (no field, or Y |cos theta| <= 1) or ``index`` is infinite.

    The engine holds the plasma at this value above the height where a column reaches it
    (:class:`cavity.fdtd.engine.Simulation`): what the wave meets above that height only carries the
    whistler-mode wave up and away, so how much denser the plasma gets there hardly changes the
    field at the ground (docs/physics.md 11), and the vertical cell then needs to carry the index
    ``index``, not that of the densest plasma.
    """
    b = np.asarray(b_t, dtype=float).reshape(-1, 3)
    omega = 2.0 * math.pi * float(frequency_hz)
    out = np.full(b.shape[0], np.inf)
    if not math.isfinite(index):
        return out
    strength = np.linalg.norm(b, axis=1)
    ok = strength > 0
    share = np.ones_like(strength)
    share[ok] = np.maximum(np.abs(b[ok, 2]) / strength[ok], MIN_VERTICAL_FIELD_SHARE)
    y_l = ELECTRON_CHARGE * strength / (ELECTRON_MASS * omega) * share
    ok &= y_l > 1.0
    x = max(index**2 / flattening - 1.0, 0.0) * (y_l[ok] - 1.0)
    out[ok] = x * omega**2
    return out


def whistler_vertical_index(omega_p2_max: float, b_t, frequency_hz: float, flattening: float = 1.0) -> float:
    """Refractive index of the whistler-mode wave travelling vertically in the densest plasma.

    With the geomagnetic field, the wave that leaks up through the night D region is the whistler
    mode, whose index grows with the electron density. For a wave along the vertical at angle theta
    to B0, the quasi-longitudinal form of the Appleton-Hartree formula (Budden 1961, Radio Waves in
    the Ionosphere; Ratcliffe 1959, The Magneto-Ionic Theory) without collisions gives

        n^2 = 1 + X / (Y |cos theta| - 1),   X = omega_p^2 / omega^2,  Y = e |B0| / (m_e omega)

    for Y |cos theta| > 1, always the case at VLF (Y is about 70 at 20 kHz for 50,000 nT).
    |cos theta| = |B_z| / |B0| is held at least :data:`MIN_VERTICAL_FIELD_SHARE`. Returns the largest
    index over the given fields (T, shape (3,) or (n, 3) in (r, phi, z)), times sqrt(``flattening``)
    (the earth-flattening factor of the permittivity at the top); 1 without a field or plasma.
    """
    b = np.asarray(b_t, dtype=float).reshape(-1, 3)
    omega = 2.0 * math.pi * float(frequency_hz)
    x = max(float(omega_p2_max), 0.0) / omega**2
    best = 1.0
    for row in b:
        strength = float(np.linalg.norm(row))
        if strength == 0.0 or x == 0.0:
            continue
        y_l = (
            ELECTRON_CHARGE * strength / (ELECTRON_MASS * omega) * max(abs(row[2]) / strength, MIN_VERTICAL_FIELD_SHARE)
        )
        if y_l <= 1.0:
            continue
        best = max(best, math.sqrt((1.0 + x / (y_l - 1.0)) * flattening))
    return best
