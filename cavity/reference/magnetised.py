"""Normal modes of a flat earth-ionosphere waveguide with a magnetised (anisotropic) ionosphere.

Written apart from the time-domain engine as its reference for the geomagnetic field; nothing here
imports :mod:`cavity.fdtd` or :mod:`cavity.solve`. Conventions as in the rest of
:mod:`cavity.reference`: exp(+j omega t), RMS phasors, moment p = I l of a vertical element standing
on the ground.

Frame. The path frame: x = r along the direction of travel, y = phi = z x r (to the left of the
direction of travel), z up. Plane waves vary as exp(j omega t - j k0 S x); S = sin(theta) and
C = cos(theta) are the sine and cosine of the complex angle of incidence at the ground (z = 0),
C^2 + S^2 = 1. The horizontal wavenumber of a mode is k0 S.

Medium (derived from the electron momentum equation, electrons only). With omega_b = e B0 / m_e
(along B0, |omega_b| / 2 pi = 28.0 Hz per nT), X = omega_p^2 / omega^2, U = 1 - j nu / omega and
Y = omega_b / omega,

    dJ/dt = eps0 omega_p^2 E - nu J + omega_b x J   =>   eps = I - X (U I + j [Y x])^-1

([Y x] the cross-product matrix). For B0 = 0 this is the isotropic permittivity of
:func:`cavity.reference.modes.ionosphere_permittivity`; for a wave along B0 it gives the
magneto-ionic indices n^2 = 1 - X / (U -+ Y) (Budden 1961). Earth flattening multiplies the whole
tensor by (1 + z / a)^2, as the isotropic reference does (Richter 1966).

Reflection matrix (Clemmow and Heading 1954; Budden 1955; Pitteway 1965). With H~ = eta0 H the
column f = (Ex, Ey, H~x, H~y) obeys the first-order system d f / d(k0 z) = A(z) f (four equations,
Ez and H~z eliminated). Above the top level the medium is taken as homogeneous; the two
characteristic waves that decay upward start the integration, which then steps down through thin
homogeneous layers (each the mean tensor of its two bounding levels; f(z - h) = exp(-A h) f(z),
the exponential of each balanced 4 x 4 layer matrix applied by Taylor substeps) to the ground. The two
solutions are re-orthonormalised after every layer, which keeps their span (all that matters)
and avoids the swamping of the less fast-growing one (the purpose of Pitteway's 1965
re-orthogonalisation). At the ground the span is split into free-space up- and downgoing waves with
the amplitudes

    parallel (TM):      a = H~y of the wave  (Ex = +C a upgoing, -C a downgoing; Ez = -S a)
    perpendicular (TE): b = Ey of the wave   (H~x = -C b upgoing, +C b downgoing)

and R maps the upgoing amplitudes (a, b) at z = 0 to the downgoing ones: R = [[ R_pp, R_pt ],
[ R_tp, R_tt ]] with p = parallel, t = perpendicular, first index the reflected wave. In this
convention a perfectly conducting ceiling at height h has R = diag(1, -1) exp(-2 j k0 C h).

Ground. Rg maps downgoing amplitudes at z = 0 to upgoing ones. Leontovich ground (the engine's and the
isotropic reference's ground; Zs from :func:`cavity.reference.dipole.surface_impedance`,
Delta = Zs / eta0): Rg = diag((C - Delta) / (C + Delta), (C Delta - 1) / (C Delta + 1)); or the
exact Fresnel coefficients of the homogeneous ground.

Modes. det(I - Rg R) = 0 (Budden 1962), followed from B0 = 0 as the field is turned on (a
predictor-corrector continuation with trust radii, the mode-following idea of Morfitt and Shellman
1976) and completed and checked by the argument principle: the zeros of the analytic form
det(u - Rg d) inside a region of the S plane are counted from the turns of its phase along the
region's edge (Delves and Lyness 1967), and any root the continuation missed is found by bisecting the region
(:func:`magnetised_modes`). Field of a vertical element on the ground, derived from the
Sommerfeld representation of the source, the plane-wave recursion u = (I - Rg R)^-1 (I + Rg) s,
d = R u, s = (1, 0), and the residues in the lower half of the horizontal-wavenumber plane:

    Ez(r, 0) = -(p / (4 omega eps0)) sum_n Lambda_n k_n^2 H0^(2)(k_n r),
    Lambda_n = j k0 N_pp / (dD/dC),  N = (I + R) adj(I - Rg R) (I + Rg),  D = det(I - Rg R),

the same form and the same Lambda as :class:`cavity.reference.modes.ModeSet` (for B0 = 0 it is the
TM excitation U(0)^2 / (eps(0)^2 Int U^2 / eps dz); for perfect plates Wait's 2 / h). The horizontal
components of a mode follow from the same residue: Ephi = -Ez N_tp / (S N_pp), H~phi = -Ez / S,
H~r = -Ez C [(R - I) adj(I - Rg R)(I + Rg)]_tp / (S N_pp). The cylindrical spreading
of the source is the one of H0^(2); the medium is taken as that of the path's bearing in every
direction (the path-plane approximation of the engine), so the horizontal components use the far
form (H1 ~ j H0).

References
----------
Appleton, E. V. (1932); Hartree, D. R. (1931): the magneto-ionic theory (see Budden 1961).
Budden, K. G. (1955), The numerical solution of differential equations governing reflexion of long
radio waves from the ionosphere, Proc. R. Soc. A 227, 516-537.
Budden, K. G. (1961), Radio Waves in the Ionosphere, Cambridge University Press (reflection
matrices, reciprocity, magneto-ionic theory).
Budden, K. G. (1962), The influence of the earth's magnetic field on radio propagation by
wave-guide modes, Proc. R. Soc. A 265, 538-553 (mode equation det(Rg R - I) = 0).
Clemmow, P. C., and Heading, J. (1954), Coupled forms of the differential equations governing
radio propagation in the ionosphere, Proc. Camb. Phil. Soc. 50, 319-333.
Pitteway, M. L. V. (1965), The numerical calculation of wave-fields, reflexion coefficients and
polarizations for long radio waves in the lower ionosphere, Phil. Trans. R. Soc. A 257, 219-241.
Delves, L. M., and Lyness, J. N. (1967), A numerical method for locating the zeros of an analytic
function, Math. Comp. 21, 543-560 (zeros counted by the argument principle; regions subdivided).
Morfitt, D. G., and Shellman, C. H. (1976), Naval Electronics Laboratory Center Interim Report 77T
(from memory; mode constants followed as a parameter of the guide changes: only the published
method is used).
Richter, J. H. (1966), Radio Science 1(12) (earth flattening).
Wait, J. R. (1960), J. Res. NBS 64D(2), 153-204 (mode sum between plates).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field

import numpy as np
from scipy.special import hankel2e

from cavity.constants import (
    C0,
    EARTH_RADIUS_M,
    ELECTRON_CHARGE,
    ELECTRON_MASS,
    EPS0,
    ETA0,
)
from cavity.errors import ScenarioError, SolverError
from cavity.reference.dipole import _check_frequency, _positive, surface_impedance

__all__ = [
    "GroundFields",
    "MagnetisedModes",
    "enu_to_path_frame",
    "field_from_dip_azimuth",
    "ground_field",
    "ground_reflection",
    "ionosphere_reflection",
    "layer_matrix",
    "magnetised_modes",
    "count_modes",
    "magnetoionic_permittivity",
    "modal_determinant",
]

log = logging.getLogger(__name__)

#: 20 log10(e): dB per neper.
DB_PER_NEPER = 20.0 / math.log(10.0)
#: Gyrofrequency per unit field: e / (2 pi m_e), Hz per tesla (28.0 Hz per nT).
GYRO_HZ_PER_T = ELECTRON_CHARGE / (2.0 * math.pi * ELECTRON_MASS)
#: Largest field accepted (T): ten times the strongest geomagnetic field at the surface.
MAX_FIELD_T = 1e-3


# --------------------------------------------------------------------------------------------------
# Field geometry
# --------------------------------------------------------------------------------------------------


def field_from_dip_azimuth(strength_t: float, dip_deg: float, azimuth_deg: float) -> np.ndarray:
    """Geomagnetic field in the path frame (B_r, B_phi, B_z) in T.

    Parameters
    ----------
    strength_t : float
        |B0| (T), 0 to 1e-3.
    dip_deg : float
        Inclination, positive downward (northern magnetic hemisphere), -90 to 90.
    azimuth_deg : float
        Direction of travel, clockwise from magnetic north.

    The horizontal part points to magnetic north: (east, north, up) = (0, F cos I, -F sin I), then
    :func:`enu_to_path_frame` at bearing ``azimuth_deg``.
    """
    f = float(strength_t)
    if not (math.isfinite(f) and 0.0 <= f <= MAX_FIELD_T):
        raise ScenarioError(f"strength_t = {strength_t} T is out of range; allowed: 0 to {MAX_FIELD_T} T")
    dip = float(dip_deg)
    if not (math.isfinite(dip) and -90.0 <= dip <= 90.0):
        raise ScenarioError(f"dip_deg = {dip_deg} deg is out of range; allowed: -90 to 90 deg")
    az = float(azimuth_deg)
    if not math.isfinite(az):
        raise ScenarioError(f"azimuth_deg = {azimuth_deg} deg is out of range; allowed: a finite angle")
    i = math.radians(dip)
    return enu_to_path_frame(0.0, f * math.cos(i), -f * math.sin(i), az)


def enu_to_path_frame(b_east, b_north, b_up, bearing_deg) -> np.ndarray:
    """(B_r, B_phi, B_z) from east/north/up components at a path bearing (clockwise from north).

    B_r = Be sin b + Bn cos b, B_phi = -Be cos b + Bn sin b, B_z = Bu (phi = z x r, to the left of
    the direction of travel).
    """
    b = math.radians(float(bearing_deg))
    return np.array(
        [b_east * math.sin(b) + b_north * math.cos(b), -b_east * math.cos(b) + b_north * math.sin(b), b_up],
        dtype=float,
    )


def _check_field(b_path_frame_t) -> np.ndarray:
    b = np.asarray(b_path_frame_t, dtype=float)
    if b.shape != (3,) or not np.all(np.isfinite(b)):
        raise ScenarioError(
            f"b_path_frame_t = {b_path_frame_t!r}; allowed: three finite components (B_r, B_phi, B_z) in T"
        )
    if np.linalg.norm(b) > MAX_FIELD_T:
        raise ScenarioError(f"b_path_frame_t has |B| = {np.linalg.norm(b):.3g} T; allowed: 0 to {MAX_FIELD_T} T")
    return b


# --------------------------------------------------------------------------------------------------
# Constitutive tensor
# --------------------------------------------------------------------------------------------------


def _cross_matrix(v) -> np.ndarray:
    """[v x]: the matrix with [v x] w = v x w."""
    return np.array([[0.0, -v[2], v[1]], [v[2], 0.0, -v[0]], [-v[1], v[0], 0.0]])


def magnetoionic_permittivity(
    altitude_m,
    electron_density_m3,
    collision_frequency_s,
    b_path_frame_t,
    frequency_hz: float,
    earth_flattening: bool = True,
    earth_radius_m: float = EARTH_RADIUS_M,
) -> np.ndarray:
    """Relative permittivity tensor (levels, 3, 3) of a cold magnetised collisional electron plasma.

        eps = I - X (U I + j [Y x])^-1,  X = omega_p^2 / omega^2,  U = 1 - j nu / omega,
        Y = e B0 / (m_e omega)

    in the path frame (x = r, y = phi, z up), exp(+j omega t); times (1 + z/a)^2 with earth
    flattening (Richter 1966), as :func:`cavity.reference.modes.ionosphere_permittivity`.
    """
    z = np.asarray(altitude_m, dtype=float)
    ne = np.broadcast_to(np.asarray(electron_density_m3, dtype=float), z.shape)
    nu = np.broadcast_to(np.asarray(collision_frequency_s, dtype=float), z.shape)
    for name, arr, unit in (
        ("altitude_m", z, "m"),
        ("electron_density_m3", ne, "m^-3"),
        ("collision_frequency_s", nu, "1/s"),
    ):
        bad = ~(np.isfinite(arr) & (arr >= 0.0))
        if np.any(bad):
            raise ScenarioError(f"{name} = {arr[bad].flat[0]} {unit} is out of range; allowed: >= 0 and finite")
    b = _check_field(b_path_frame_t)
    omega = 2.0 * math.pi * _check_frequency(frequency_hz)
    x = ne * ELECTRON_CHARGE**2 / (EPS0 * ELECTRON_MASS) / omega**2
    u = 1.0 - 1j * nu / omega
    y = ELECTRON_CHARGE * b / (ELECTRON_MASS * omega)
    m = u[:, None, None] * np.eye(3)[None] + 1j * _cross_matrix(y)[None]
    eps = np.eye(3)[None] - x[:, None, None] * np.linalg.inv(m)
    if earth_flattening:
        a = float(_positive("earth_radius_m", earth_radius_m, "m"))
        eps = eps * ((1.0 + z / a) ** 2)[:, None, None]
    return eps


# --------------------------------------------------------------------------------------------------
# The 4 x 4 first-order system and its integration
# --------------------------------------------------------------------------------------------------


def layer_matrix(eps, s):
    """A with d f / d(k0 z) = A f for f = (Ex, Ey, H~x, H~y), H~ = eta0 H (Clemmow and Heading 1954).

    From curl E = -j k0 H~, curl H~ = j k0 eps E with d/dx = -j k0 S, eliminating
    Ez = -(S H~y + eps_zx Ex + eps_zy Ey) / eps_zz and H~z = S Ey. ``eps`` is (..., 3, 3).
    """
    e = np.asarray(eps, dtype=complex)
    a0 = -e[..., 2, 0] / e[..., 2, 2]
    a1 = -e[..., 2, 1] / e[..., 2, 2]
    a3 = -s / e[..., 2, 2]
    out = np.zeros(e.shape[:-2] + (4, 4), dtype=complex)
    out[..., 0, 0] = -1j * s * a0
    out[..., 0, 1] = -1j * s * a1
    out[..., 0, 3] = -1j - 1j * s * a3
    out[..., 1, 2] = 1j
    out[..., 2, 0] = 1j * (e[..., 1, 0] + e[..., 1, 2] * a0)
    out[..., 2, 1] = 1j * (e[..., 1, 1] + e[..., 1, 2] * a1) - 1j * s * s
    out[..., 2, 3] = 1j * e[..., 1, 2] * a3
    out[..., 3, 0] = -1j * (e[..., 0, 0] + e[..., 0, 2] * a0)
    out[..., 3, 1] = -1j * (e[..., 0, 1] + e[..., 0, 2] * a1)
    out[..., 3, 3] = -1j * e[..., 0, 2] * a3
    return out


def _integrate_down(a_layers, thickness, f):
    """Step the 4 x 2 solution ``f`` down through layers (top first): f <- exp(-A h) f, re-orthonormalised.

    ``a_layers`` (n, 4, 4) are the layer matrices, ``thickness`` (n,) the layer thicknesses in units of
    1 / k0. In a dense plasma A is far from normal (entries ~ |eps| while its eigenvalues are
    ~ sqrt|eps|), so each layer is first balanced, B = D^-1 A D with D = diag(1, 1, d, d) (the H~ rows
    scaled by d ~ the layer's index), exp(-A h) = D exp(-B h) D^-1. exp(-B h) is applied to the columns
    as 2^m substeps of a Taylor polynomial (up to degree 14, stopped when a term falls below 1e-18
    of the column) with ||B h|| / 2^m <= 1/2, i.e. scaling and squaring applied to the vectors. After
    each layer the two columns are made orthonormal (Gram-Schmidt, Hermitian product), which keeps
    their span. Plain Python; compiled by numba on use.
    """
    n = a_layers.shape[0]
    bal = np.empty((4, 4), dtype=np.complex128)
    g = np.empty((4, 2), dtype=np.complex128)
    term = np.empty((4, 2), dtype=np.complex128)
    nxt = np.empty((4, 2), dtype=np.complex128)
    for layer in range(n):
        h = thickness[layer]
        top_right = 0.0
        bottom_left = 0.0
        for i in range(2):
            for j in range(2):
                v = a_layers[layer, i, j + 2]
                top_right = max(top_right, abs(v.real) + abs(v.imag))
                v = a_layers[layer, i + 2, j]
                bottom_left = max(bottom_left, abs(v.real) + abs(v.imag))
        d = 1.0
        if top_right > 0.0 and bottom_left > 0.0:
            d = min(max((bottom_left / top_right) ** 0.5, 1e-3), 1e3)
        norm = 0.0
        for i in range(4):
            row = 0.0
            for j in range(4):
                v = a_layers[layer, i, j]
                if i < 2 and j >= 2:
                    v = v * d
                elif i >= 2 and j < 2:
                    v = v / d
                bal[i, j] = -h * v
                row += abs(v.real) + abs(v.imag)
            norm = max(norm, row)
        norm *= h
        substeps = 1
        while norm > 0.5:
            norm *= 0.5
            substeps *= 2
        for i in range(4):
            for j in range(4):
                bal[i, j] = bal[i, j] / substeps
        # g = D^-1 f
        for c in range(2):
            for i in range(4):
                g[i, c] = f[i, c] / d if i >= 2 else f[i, c]
        for _ in range(substeps):
            for c in range(2):
                size = 0.0
                for i in range(4):
                    term[i, c] = g[i, c]
                    size = max(size, abs(g[i, c].real) + abs(g[i, c].imag))
                for k in range(1, 15):
                    biggest = 0.0
                    for i in range(4):
                        acc = 0j
                        for q in range(4):
                            acc += bal[i, q] * term[q, c]
                        nxt[i, c] = acc / k
                        biggest = max(biggest, abs(nxt[i, c].real) + abs(nxt[i, c].imag))
                    for i in range(4):
                        term[i, c] = nxt[i, c]
                        g[i, c] += nxt[i, c]
                    if biggest < 1e-18 * size:
                        break
        for c in range(2):
            for i in range(2, 4):
                g[i, c] = g[i, c] * d
        # Gram-Schmidt on the two columns (Hermitian inner product).
        n0 = 0.0
        for i in range(4):
            n0 += g[i, 0].real ** 2 + g[i, 0].imag ** 2
        n0 = n0**0.5
        for i in range(4):
            f[i, 0] = g[i, 0] / n0
        proj = 0j
        for i in range(4):
            proj += f[i, 0].conjugate() * g[i, 1]
        n1 = 0.0
        for i in range(4):
            g[i, 1] -= proj * f[i, 0]
            n1 += g[i, 1].real ** 2 + g[i, 1].imag ** 2
        n1 = n1**0.5
        for i in range(4):
            f[i, 1] = g[i, 1] / n1
    return f


_COMPILED: dict = {}


def _compiled_integrator():
    """The numba-compiled integrator (compiled on first use, cached on disk)."""
    if "down" not in _COMPILED:
        import numba

        _COMPILED["down"] = numba.njit(cache=True)(_integrate_down)
    return _COMPILED["down"]


@dataclass(frozen=True)
class _Profile:
    """A stratified medium ready for integration: layer tensors and thicknesses (top layer first)."""

    k0: float
    top_eps: np.ndarray  # (3, 3) medium above the top level
    layer_eps: np.ndarray  # (n, 3, 3) mean tensor of each layer, top first
    thickness: np.ndarray  # (n,) k0 * layer thickness, top first


def _profile(altitude_m, eps_tensor, frequency_hz) -> _Profile:
    z = np.asarray(altitude_m, dtype=float)
    if z.ndim != 1 or z.size < 2:
        raise ScenarioError(f"altitude_m has {z.size} levels; allowed: a 1-D grid of at least 2 levels")
    if not np.all(np.isfinite(z)) or z[0] != 0.0:
        raise ScenarioError(f"altitude_m starts at {z[0]} m; allowed: a finite grid starting at 0 m (the ground)")
    steps = np.diff(z)
    if np.any(steps < 0.0) or np.any((steps[1:] == 0.0) & (steps[:-1] == 0.0)) or steps[0] == 0.0:
        raise ScenarioError(
            "altitude_m must increase; allowed: increasing, with an altitude above the ground given "
            "at most twice (a sharp boundary)"
        )
    eps = np.asarray(eps_tensor, dtype=complex)
    if eps.shape != (z.size, 3, 3) or not np.all(np.isfinite(eps)):
        raise ScenarioError(f"eps_tensor has shape {eps.shape}; allowed: finite, shape ({z.size}, 3, 3)")
    if np.any(np.abs(eps[:, 2, 2]) == 0.0):
        raise ScenarioError("eps_tensor has eps_zz = 0 at some level; allowed: non-zero (collisions > 0)")
    k0 = 2.0 * math.pi * _check_frequency(frequency_hz) / C0
    mean = 0.5 * (eps[1:] + eps[:-1])
    return _Profile(k0, eps[-1].copy(), np.ascontiguousarray(mean[::-1]), np.ascontiguousarray(k0 * steps[::-1]))


def _upgoing_start(a_top):
    """The two characteristic waves of the top medium that decay upward (Re lambda < 0), as a 4 x 2."""
    lam, vec = np.linalg.eig(a_top)
    order = np.argsort(lam.real)
    if not lam.real[order[1]] < 0.0:
        raise SolverError(
            "magnetised reference: the medium above the top level does not have two upward-decaying "
            "waves; put the top in a collisional plasma"
        )
    f = vec[:, order[:2]].astype(complex)
    q, _ = np.linalg.qr(f)
    return np.ascontiguousarray(q)


def _projector_start(a_top):
    """P E: the spectral projector of the top medium onto its two upward-decaying waves applied to
    the (Ex, Ey) unit columns; analytic in S and independent of the eigenvalues' order."""
    lam, vec = np.linalg.eig(a_top)
    up = lam.real < 0.0
    if int(up.sum()) != 2:
        raise SolverError(
            "magnetised reference: the medium above the top level does not have two upward-decaying "
            "waves; put the top in a collisional plasma"
        )
    p = vec[:, up] @ np.linalg.inv(vec)[up, :]
    return np.ascontiguousarray(p[:, :2].astype(complex))


def _split_at_ground(f, c):
    """Up- and downgoing free-space amplitudes (parallel H~y, perpendicular Ey) of the 4 x 2 span at z = 0."""
    ex, ey, hx, hy = f
    up = np.array([0.5 * (hy + ex / c), 0.5 * (ey - hx / c)])
    down = np.array([0.5 * (hy - ex / c), 0.5 * (ey + hx / c)])
    return up, down


def _sine(c):
    """S = sqrt(1 - C^2), principal branch (Re S >= 0)."""
    return np.sqrt(1.0 - complex(c) * complex(c))


def _reflection(profile: _Profile, c: complex, python: bool = False) -> np.ndarray:
    s = _sine(c)
    a_layers = layer_matrix(profile.layer_eps, s)
    f = _upgoing_start(layer_matrix(profile.top_eps, s))
    run = _integrate_down if python else _compiled_integrator()
    f = run(np.ascontiguousarray(a_layers), profile.thickness, f.copy())
    up, down = _split_at_ground(f, c)
    return down @ np.linalg.inv(up)


def ionosphere_reflection(altitude_m, eps_tensor, frequency_hz: float, cos_incidence) -> np.ndarray:
    """2 x 2 reflection matrix R of the stratified medium, referred to the ground (z = 0).

    Parameters
    ----------
    altitude_m : array_like (levels,)
        Altitude grid (m) from 0 (the ground) to the top level, increasing; an altitude given twice
        is a sharp boundary (a layer of zero thickness between the two values). The medium above the
        top level is taken as homogeneous.
    eps_tensor : array_like (levels, 3, 3)
        Relative permittivity tensor at each level, path frame (:func:`magnetoionic_permittivity`).
    frequency_hz : float
    cos_incidence : complex or array_like
        C, the cosine of the complex angle of incidence at the ground.

    Returns
    -------
    ndarray (2, 2) or (..., 2, 2)
        R in the parallel/perpendicular convention of the module docstring.
    """
    profile = _profile(altitude_m, eps_tensor, frequency_hz)
    cs = np.asarray(cos_incidence, dtype=complex)
    out = np.empty(cs.shape + (2, 2), dtype=complex)
    for idx, c in np.ndenumerate(cs):
        out[idx] = _reflection(profile, complex(c))
    return out


def ground_reflection(
    cos_incidence, frequency_hz: float, conductivity, relative_permittivity, model: str = "leontovich"
):
    """2 x 2 reflection matrix Rg of a homogeneous ground (downgoing -> upgoing amplitudes at z = 0).

    ``model = "leontovich"`` (the surface impedance of the engine and the isotropic reference):
    diag((C - Delta) / (C + Delta), (C Delta - 1) / (C Delta + 1)), Delta = Zs / eta0.
    ``model = "fresnel"``: the exact coefficients of the half-space of index n (n^2 = eps_r - j sigma /
    (omega eps0)), diag((n^2 C - g) / (n^2 C + g), (C - g) / (C + g)), g = sqrt(n^2 - S^2).
    An infinite conductivity gives diag(1, -1).
    """
    c = complex(cos_incidence)
    zs = surface_impedance(frequency_hz, conductivity, relative_permittivity)
    if model == "leontovich" or zs == 0:
        d = zs / ETA0
        return np.array([[(c - d) / (c + d), 0.0], [0.0, (c * d - 1.0) / (c * d + 1.0)]], dtype=complex)
    if model == "fresnel":
        n2 = (ETA0 / zs) ** 2
        s = _sine(c)
        g = np.sqrt(n2 - s * s)
        return np.array([[(n2 * c - g) / (n2 * c + g), 0.0], [0.0, (c - g) / (c + g)]], dtype=complex)
    raise ScenarioError(f"model = {model!r} is not known; allowed: 'leontovich', 'fresnel'")


def modal_determinant(r, rg) -> complex:
    """D = det(I - Rg R): zero at a waveguide mode (Budden 1962)."""
    return complex(np.linalg.det(np.eye(2) - rg @ r))


# --------------------------------------------------------------------------------------------------
# Mode search
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MagnetisedModes:
    """Waveguide modes of a stratified magnetised guide, sorted from least to most attenuated.

    Attributes
    ----------
    frequency_hz : float
    b_path_frame_t : ndarray (3,)
        The field used (B_r, B_phi, B_z), T.
    cos_incidence : ndarray, complex (modes,)
        C_n at the ground.
    wavenumber : ndarray, complex (modes,)
        Horizontal wavenumbers k_n = k0 S_n (rad/m), Im <= 0.
    excitation : ndarray, complex (modes,)
        Lambda_n (1/m): Ez(r, 0) = -(p / (4 omega eps0)) sum Lambda_n k_n^2 H0^(2)(k_n r).
    ephi_ratio, hphi_ratio, hr_ratio : ndarray, complex (modes,)
        Ephi / Ez, eta0 Hphi / Ez and eta0 Hr / Ez of each mode at the ground (far form).
    tm_fraction : ndarray (modes,)
        Share of the parallel (TM) wave in the upgoing wave at the ground, |u_p|^2 / (|u_p|^2 +
        |u_t|^2) with u = adj(I - Rg R)(I + Rg) s: 1 for a TM mode at B0 = 0, 0 for a TE mode.
    origin : tuple of str
        Where each mode was started at B0 = 0: "TM<n>" or "TE<n>" (n counts from 1 in order of
        attenuation at B0 = 0 within each kind), or "F<n>" for a mode found only at the full field
        by the lattice search, "A<n>" by the search that the mode count starts.
    earth_flattening : bool
    earth_radius_m : float
    seconds : float
        Wall time of the mode search.
    counted_modes, found_in_count_region : int
        Zeros of the mode equation counted by the argument principle in the counting region (see
        :func:`magnetised_modes`, stage 4) and the modes found there; -1 when not counted. Equal
        when the set is complete.
    continuation : dict
        For each mode started at B0 = 0: (state, field fraction reached), state "ok", "dropped"
        (too lossy or evanescent), "lost" or "merged" (see :func:`_continue`).
    """

    frequency_hz: float
    b_path_frame_t: np.ndarray
    cos_incidence: np.ndarray
    wavenumber: np.ndarray
    excitation: np.ndarray
    ephi_ratio: np.ndarray
    hphi_ratio: np.ndarray
    hr_ratio: np.ndarray
    tm_fraction: np.ndarray
    origin: tuple
    earth_flattening: bool = True
    earth_radius_m: float = EARTH_RADIUS_M
    seconds: float = field(default=0.0)
    counted_modes: int = -1
    found_in_count_region: int = -1
    continuation: dict = field(default_factory=dict)

    @property
    def n_modes(self) -> int:
        return int(self.wavenumber.size)

    @property
    def attenuation_db_per_mm(self) -> np.ndarray:
        """Attenuation rate of each mode, dB per 1000 km."""
        return -DB_PER_NEPER * self.wavenumber.imag * 1e6

    @property
    def phase_velocity_ratio(self) -> np.ndarray:
        """Phase velocity over c, k0 / Re(k_n)."""
        k0 = 2.0 * math.pi * self.frequency_hz / C0
        return k0 / self.wavenumber.real


class _Guide:
    """Ionosphere profile plus ground: evaluates D(C), R and Rg."""

    def __init__(self, profile: _Profile, frequency_hz, ground, ground_model):
        self.profile = profile
        self.frequency_hz = frequency_hz
        self.ground = ground
        self.ground_model = ground_model
        self.evaluations = 0

    def matrices(self, c):
        self.evaluations += 1
        r = _reflection(self.profile, c)
        rg = ground_reflection(c, self.frequency_hz, *self.ground, model=self.ground_model)
        return r, rg

    def det(self, c):
        r, rg = self.matrices(c)
        return modal_determinant(r, rg)

    def det_analytic(self, c):
        """det(u - Rg d) = det(u) D(C): the mode equation without the poles of R, analytic in C.

        u and d are the up- and downgoing amplitudes at the ground of the upward-decaying solutions
        started as P E, P the spectral projector of the top medium onto its two upward-decaying
        waves and E the (Ex, Ey) unit columns (see :func:`count_modes`).
        """
        self.evaluations += 1
        s = _sine(c)
        f = _projector_start(layer_matrix(self.profile.top_eps, s))
        f = _compiled_integrator()(
            np.ascontiguousarray(layer_matrix(self.profile.layer_eps, s)), self.profile.thickness, f
        )
        up, down = _split_at_ground(f, c)
        rg = ground_reflection(c, self.frequency_hz, *self.ground, model=self.ground_model)
        return complex(np.linalg.det(up - rg @ down))

    def scalar(self, c, kind):
        """One factor of D at B0 = 0 (R diagonal): 1 - Rg_pp R_pp (TM) or 1 - Rg_tt R_tt (TE)."""
        r, rg = self.matrices(c)
        i = 0 if kind == "TM" else 1
        return complex(1.0 - rg[i, i] * r[i, i])


def _newton(fun, c, tol=1e-11, max_iter=30, max_step=None, ftol=1e-10):
    """Newton's method with a central-difference derivative; returns (root, converged).

    Converged when the step is below ``tol`` relative or the residual below ``ftol`` (D and its
    factors are of order one away from roots; near C = 0 rounding leaves residuals of ~1e-11).
    """
    for _ in range(max_iter):
        h = 1e-6 * max(abs(c), 1e-2)
        f0 = fun(c)
        if abs(f0) < ftol:
            return c, True
        d = (fun(c + h) - fun(c - h)) / (2.0 * h)
        if d == 0 or not np.isfinite(d):
            return c, False
        step = f0 / d
        if max_step is not None and abs(step) > max_step:
            step *= max_step / abs(step)
        c = c - step
        if abs(step) < tol * max(abs(c), 1e-2):
            return c, True
    return c, False


def _canonical(c):
    """Choose the sign of C so that the mode decays along range: Im S <= 0, Re S > 0 (S = sqrt(1 - C^2)).

    Both signs of C give the same mode; we keep Re C >= 0 for a stable comparison.
    """
    return -c if c.real < 0 else c


def _isotropic_starts(altitude_m, ne, nu, frequency_hz, ground, earth_flattening, earth_radius_m, n_modes):
    """TM starting values from the isotropic reference (cavity.reference.modes.solve_modes)."""
    from cavity.reference import modes as iso

    # A repeated altitude (sharp boundary): the finite elements take the upper value at that level.
    keep = np.append(np.diff(altitude_m) > 0.0, True)
    altitude_m, ne, nu = altitude_m[keep], ne[keep], nu[keep]

    eps = iso.ionosphere_permittivity(
        altitude_m, ne, nu, frequency_hz, earth_flattening=earth_flattening, earth_radius_m=earth_radius_m
    )
    zs = surface_impedance(frequency_hz, *ground)
    ms = iso.solve_modes(altitude_m, eps, frequency_hz, zs, n_functions=0)
    k0 = 2.0 * math.pi * frequency_hz / C0
    s = ms.wavenumber[:n_modes] / k0
    return [complex(np.sqrt(1.0 - si * si)) for si in s]


def magnetised_modes(
    altitude_m,
    electron_density_m3,
    collision_frequency_s,
    b_path_frame_t,
    frequency_hz: float,
    ground=(5.0, 70.0),
    earth_flattening: bool = True,
    earth_radius_m: float = EARTH_RADIUS_M,
    max_attenuation_db_per_mm: float = 30.0,
    start_attenuation_db_per_mm: float | None = None,
    n_tm: int | None = None,
    n_te: int | None = None,
    ground_model: str = "leontovich",
    check_count: bool | None = None,
) -> MagnetisedModes:
    """Modes of a flat (earth-flattened) guide with a magnetised ionosphere, followed from B0 = 0.

    Four stages, each a published or elementary method:

    1. Starts at B0 = 0: the TM modes from the isotropic reference
       (:func:`cavity.reference.modes.solve_modes`), refined by Newton's method on the TM factor of
       D(C); the TE modes are the roots of the TE factor reached by secant iterations from a lattice
       of starting values (0 < Re C < 0.65). Every mode below ``start_attenuation_db_per_mm`` at
       B0 = 0 is followed.
    2. Continuation in the field strength (the idea of following each mode from a known solution as
       a parameter changes, as in Morfitt and Shellman 1976; :func:`_continue`): the field fraction t
       grows geometrically from 1e-3, a linear predictor in log t and a secant corrector; a step is
       accepted only when every corrector lands within a trust radius of its prediction (half the
       predicted move, at most a third of the distance to the nearest other prediction), and is
       halved otherwise. A mode whose attenuation passes four times the window, or that turns
       evanescent, is dropped; one that still fails at the smallest step is given up while the
       others go on (stages 3 and 4 find it again if it matters).
    3. A search from a lattice of starting values at the full field adds modes with no low-loss
       ancestor at B0 = 0 (they come in from high attenuation as the field grows; origin "F<n>").
    4. Completeness (unless ``n_tm``/``n_te`` limit the set, or ``check_count`` is False): the
       argument principle counts the zeros of the analytic form of the mode equation inside the
       region of the S = sin(theta) plane where 0.15 <= Re S <= 1.05 and the attenuation lies
       between 0.005 dB/Mm and the window (:func:`count_modes`). If the count exceeds the modes found
       there, the region is bisected (counting again in each part) until every missing root is
       isolated and found by Newton's method (origin "A<n>"). A root lying on the contour leaves the
       count unresolved; the region's edges then move outward by a few percent and it counts again
       (:func:`_complete_nudged`). The count and the number found are returned (``counted_modes``,
       ``found_in_count_region``): equal when the set is complete.

    A root that two modes reach after stage 2's retry is an error only if stage 4 cannot restore it.

    Parameters
    ----------
    altitude_m : array_like
        Altitude grid (m) from 0 to the top (in a dense collisional plasma, e.g. 120-160 km);
        50-100 m cells give converged values for D-region profiles at VLF.
    electron_density_m3, collision_frequency_s : array_like
        Profiles on ``altitude_m``.
    b_path_frame_t : array_like (3,)
        (B_r, B_phi, B_z) in T (:func:`field_from_dip_azimuth`, :func:`enu_to_path_frame`).
    frequency_hz : float
    ground : (conductivity S/m, relative permittivity)
    max_attenuation_db_per_mm : float
        Modes attenuated more at the full field are left out. A mode of A dB/Mm is A d dB down at
        d Mm, so the default (30) serves from about 1,000 km; for fields from 300 km use 100.
    start_attenuation_db_per_mm : float, optional
        Modes attenuated less at B0 = 0 are followed (default twice ``max_attenuation_db_per_mm``).
    n_tm, n_te : int, optional
        Follow at most this many TM and TE modes (least attenuated at B0 = 0) instead.
    ground_model : {"leontovich", "fresnel"}
        See :func:`ground_reflection`.
    check_count : bool, optional
        Run stage 4 (default: when neither ``n_tm`` nor ``n_te`` is given).
    """
    import time

    t0 = time.perf_counter()
    f = _check_frequency(frequency_hz)
    b = _check_field(b_path_frame_t)
    z = np.asarray(altitude_m, dtype=float)
    ne = np.broadcast_to(np.asarray(electron_density_m3, dtype=float), z.shape)
    nu = np.broadcast_to(np.asarray(collision_frequency_s, dtype=float), z.shape)
    ground = (float(ground[0]), float(ground[1]))
    k0 = 2.0 * math.pi * f / C0
    max_att = float(max_attenuation_db_per_mm)
    window = 2.0 * max_att if start_attenuation_db_per_mm is None else float(start_attenuation_db_per_mm)
    if check_count is None:
        check_count = n_tm is None and n_te is None
    n_tm = 30 if n_tm is None else int(n_tm)
    n_te = 30 if n_te is None else int(n_te)

    def attenuation(c):
        return -DB_PER_NEPER * (k0 * np.sqrt(1 - c * c)).imag * 1e6

    def guide_at(fraction):
        eps = magnetoionic_permittivity(z, ne, nu, b * fraction, f, earth_flattening, earth_radius_m)
        return _Guide(_profile(z, eps, f), f, ground, ground_model)

    iso_guide = guide_at(0.0)
    starts = []
    for n, c in enumerate(_isotropic_starts(z, ne, nu, f, ground, earth_flattening, earth_radius_m, n_tm)):
        if attenuation(c) > 1.5 * window:  # the isotropic values are close: skip the refinement
            continue
        root, ok = _newton(lambda x: iso_guide.scalar(x, "TM"), c, max_iter=60)
        if ok and attenuation(root) <= window:
            starts.append((_canonical(root), f"TM{n + 1}"))
    # TE: secant iterations on the TE factor from a lattice of starting values in the C plane.
    te_roots = _lattice_roots(lambda x: iso_guide.scalar(x, "TE"), attenuation, window) if n_te > 0 else []
    te_roots.sort(key=lambda c: -(k0 * np.sqrt(1 - c * c)).imag)
    starts += [(c, f"TE{n + 1}") for n, c in enumerate(te_roots[:n_te])]

    roots = [c for c, _ in starts]
    names = [name for _, name in starts]
    status = {}
    if np.linalg.norm(b) > 0.0:
        drop = 4.0 * max(window, max_att)
        followed = _continue(guide_at, roots, attenuation, drop)
        kept_roots: list[complex] = []
        kept_names: list[str] = []
        for (c, state, where), name in zip(followed, names):
            status[name] = (state, where)
            if c is None:
                continue
            if any(_same_root(c, other) for other in kept_roots):
                status[name] = ("merged", 1.0)
                continue
            kept_roots.append(_canonical(c))
            kept_names.append(name)
        roots, names = kept_roots, kept_names
    final = guide_at(1.0)
    if np.linalg.norm(b) > 0.0:
        # Modes with no low-loss ancestor at B0 = 0 (they come in from high attenuation as the field
        # grows) are found by a search from a lattice of starting values at the full field.
        extra = 0
        for c in _lattice_roots(final.det, attenuation, max_att):
            if not any(_same_root(c, other) for other in roots):
                roots.append(c)
                extra += 1
                names.append(f"F{extra}")
    counted = found_in_region = -1
    if check_count:
        region, (counted, new) = _complete_nudged(final, _count_region(k0, max_att), roots)
        for n, c in enumerate(new):
            roots.append(c)
            names.append(f"A{n + 1}")
        found_in_region = sum(1 for c in roots if _in_region(c, region))
        if found_in_region != counted:
            log.warning("magnetised reference: %d modes counted in the region, %d found", counted, found_in_region)
    for i in range(len(roots)):
        for j in range(i):
            if _same_root(roots[i], roots[j], 1e-7):
                raise SolverError(
                    f"magnetised reference: modes {names[j]} and {names[i]} converged to one root "
                    f"C = {roots[i]:.6g}; a mode was lost"
                )
    out = [_mode_quantities(final, c, k0) for c in roots]
    kept = [i for i, q in enumerate(out) if -DB_PER_NEPER * q[0].imag * 1e6 <= max_att]
    order = sorted(kept, key=lambda i: -out[i][0].imag)

    def arr(j, dtype=complex):
        return np.array([out[i][j] for i in order], dtype=dtype)

    return MagnetisedModes(
        frequency_hz=f,
        b_path_frame_t=b.copy(),
        cos_incidence=np.array([roots[i] for i in order], dtype=complex),
        wavenumber=arr(0),
        excitation=arr(1),
        ephi_ratio=arr(2),
        hphi_ratio=arr(3),
        hr_ratio=arr(4),
        tm_fraction=arr(5, float),
        origin=tuple(names[i] for i in order),
        earth_flattening=bool(earth_flattening),
        earth_radius_m=float(earth_radius_m),
        seconds=time.perf_counter() - t0,
        counted_modes=int(counted),
        found_in_count_region=int(found_in_region),
        continuation=dict(status),
    )


def _same_root(a, b, rel=1e-6):
    """Whether two values of C are one root (the sign of C is immaterial)."""
    a, b = _canonical(complex(a)), _canonical(complex(b))
    return abs(a - b) < rel * max(abs(a), 1e-2)


def _secant(fun, c, tol=1e-11, max_iter=20, max_move=0.5):
    """Secant iteration from c (second point c (1 + 1e-6)); returns (root, converged).

    Gives up (not converged) as soon as an iterate is farther than ``max_move`` from c.
    """
    c0, c1 = c, c + 1e-6 * max(abs(c), 1e-2)
    f0, f1 = fun(c0), fun(c1)
    for _ in range(max_iter):
        if f1 == f0 or not (np.isfinite(f0) and np.isfinite(f1)):
            return c1, False
        step = f1 * (c1 - c0) / (f1 - f0)
        c0, f0 = c1, f1
        c1 = c1 - step
        if abs(c1 - c) > max_move:
            return c1, False
        if abs(step) < tol * max(abs(c1), 1e-2):
            return c1, True
        f1 = fun(c1)
    return c1, False


#: Field fraction of the first continuation step, and the largest step in log(fraction).
_FIRST_FRACTION = 1e-3
_LOG_STEP = math.log(2.0)
#: Smallest continuation step in log(fraction) before a mode counts as lost.
_MIN_LOG_STEP = _LOG_STEP / 2.0**14


def _lattice_roots(fun, attenuation, max_attenuation):
    """Distinct roots of ``fun`` with 0 <= attenuation <= max reached by secant iterations from a
    lattice of starting values (0.005 <= Re C <= 0.65, Im C = 0, 0.03, 0.08)."""
    found = []
    for re in np.linspace(0.005, 0.65, 14):
        for im in (0.0, 0.03, 0.08):
            try:
                root, ok = _secant(fun, complex(re, im), max_move=0.15)
            except SolverError:  # a start where the top medium's upgoing pair is ambiguous
                continue
            # C = 0 (grazing) is where the free-space split is singular, not a mode of a lossy guide.
            if not ok or abs(root) < 1e-4:
                continue
            root = _canonical(root)
            if 0.0 <= attenuation(root) <= max_attenuation and all(abs(root - o) > 1e-6 for o in found):
                found.append(root)
    return found


def _continue(guide_at, roots, attenuation, drop_db, max_step=_LOG_STEP):
    """Follow every root of D(C) = det(I - Rg R) from B0 = 0 to the full field, all on one ladder of t.

    Returns one (root or None, state, field fraction reached) per start, state "ok", "dropped"
    (attenuation above ``drop_db``, or evanescent: Re S < 0.05) or "lost" (no acceptable step above
    :data:`_MIN_LOG_STEP`; the others go on without it). The field fraction t grows geometrically
    from 1e-3 (where the roots are those of B0 = 0 to a few parts in 1e3) to 1: the gyrofrequency
    passes the wave frequency at a few percent of the geomagnetic field, where the roots move
    fastest. Predictor: linear in log t from the last two accepted points; corrector: secant
    iteration on D. A step is accepted when every root's corrector converges within a trust radius
    of its prediction: half the predicted move (at least 2e-4), and at most a third of the distance
    from its prediction to the nearest other root's prediction. The predictor's error falls as the
    square of the step on a smooth path, so halving the step ends in acceptance unless a root is
    lost; a corrector that jumps to a neighbouring root lands outside the radius. A root still
    failing at the smallest step is given up (and searched for at the full field by the callers).
    """
    n = len(roots)
    result = [(None, "lost", _FIRST_FRACTION)] * n
    log_t = math.log(_FIRST_FRACTION)
    guide = guide_at(_FIRST_FRACTION)
    current = {}
    for i, c in enumerate(roots):
        try:
            root, ok = _secant(guide.det, complex(c), max_move=0.02)
        except SolverError:
            ok = False
        if ok:
            current[i] = root
    history = [(log_t, dict(current))]
    step = max_step
    while log_t < -1e-12 and current:
        new_log_t = min(log_t + step, 0.0)
        if len(history) >= 2:
            (la, ra), (lb, rb) = history[-2], history[-1]
            w = (new_log_t - lb) / (lb - la)
            predicted = {i: rb[i] + w * (rb[i] - ra[i]) if i in ra else rb[i] for i in current}
        else:
            predicted = dict(current)
        guide = guide_at(math.exp(new_log_t))
        new, failed = {}, []
        for i, p in predicted.items():
            radius = max(0.5 * abs(p - current[i]), 2e-4)
            others = [abs(p - q) for j, q in predicted.items() if j != i]
            if others:
                radius = min(radius, min(others) / 3.0)
            try:
                root, ok = _secant(guide.det, p, max_move=3.0 * radius)
            except SolverError:
                ok = False
            if ok and abs(root - p) <= radius:
                new[i] = root
            else:
                failed.append(i)
        if not failed:
            log_t = new_log_t
            current = new
            for i, c in list(current.items()):
                if attenuation(c) > drop_db or _sine(c).real < 0.05:
                    log.debug("continuation: C = %.6g dropped at t = %.4f", c, math.exp(log_t))
                    result[i] = (None, "dropped", math.exp(log_t))
                    del current[i]
            history.append((log_t, dict(current)))
            step = min(1.5 * step, max_step)
            continue
        step /= 2.0
        if step < _MIN_LOG_STEP:
            for i in failed:
                log.info("continuation: root near C = %.6g lost at t = %.4f", current[i], math.exp(log_t))
                result[i] = (None, "lost", math.exp(log_t))
                del current[i]
            history = [(lt, {i: c for i, c in r.items() if i in current}) for lt, r in history]
            step = 64.0 * _MIN_LOG_STEP
    for i, c in current.items():
        result[i] = (c, "ok", 1.0)
    return result


# --------------------------------------------------------------------------------------------------
# Completeness: the argument principle in the S plane
# --------------------------------------------------------------------------------------------------


#: Edges of the counting region: Re S from 0.15 to 1.05 (phase velocities 0.95-6.7 c: up to near cutoff) and attenuation
#: from this value (dB/Mm) to the window.
_COUNT_RE_S = (0.15, 1.05)
_COUNT_MIN_DB_PER_MM = 0.005


def _count_region(k0, max_attenuation_db_per_mm):
    """(Re S min, Re S max, Im S min, Im S max) of the counting region."""
    to_im = lambda db: -db / (DB_PER_NEPER * k0 * 1e6)  # noqa: E731
    return (_COUNT_RE_S[0], _COUNT_RE_S[1], to_im(max_attenuation_db_per_mm), to_im(_COUNT_MIN_DB_PER_MM))


def _cos_of_sine(s):
    """C = sqrt(1 - S^2), principal branch: for Re S > 0 > Im S it lies in the first quadrant."""
    return np.sqrt(1.0 - complex(s) * complex(s))


def _in_region(c, region):
    s = _sine(_canonical(c))
    return region[0] <= s.real <= region[1] and region[2] <= s.imag <= region[3]


class RootOnContourError(SolverError):
    """The argument-principle count met a root on (or within rounding of) its contour."""


def _edge_turn(fun, a, b, fa, fb, depth=0, max_depth=12):
    """Change of arg fun along the segment a -> b, bisected until each piece turns by < pi/4."""
    turn = float(np.angle(fb / fa))
    if abs(turn) <= math.pi / 4.0:
        return turn
    if depth >= max_depth:
        raise RootOnContourError(
            f"magnetised reference: the mode count cannot resolve the phase near S = {a:.6g} "
            "(a root on the counting contour)"
        )
    m = 0.5 * (a + b)
    fm = fun(m)
    return _edge_turn(fun, a, m, fa, fm, depth + 1, max_depth) + _edge_turn(fun, m, b, fm, fb, depth + 1, max_depth)


def _winding(fun, region, phase_rate, points_per_edge=8):
    """Number of zeros of ``fun`` (analytic in S) inside the S rectangle ``region``, by the argument principle.

    ``phase_rate`` bounds |d arg fun / dC| away from the zeros (about 2 k0 times the height of the
    top level: the phase path of a wave up to it and back). Each edge is sampled so that C moves by
    at most pi / 8 of phase between samples, then bisected where the phase still turns by more
    than pi / 4, so that no whole turn hides between two samples.
    """
    x0, x1, y0, y1 = region
    corners = [complex(x0, y0), complex(x1, y0), complex(x1, y1), complex(x0, y1), complex(x0, y0)]
    total = 0.0
    for a, b in zip(corners[:-1], corners[1:]):
        coarse = a + (b - a) * np.linspace(0.0, 1.0, 8 * points_per_edge + 1)
        cs = np.array([_cos_of_sine(p) for p in coarse])
        pieces = np.maximum(1, np.ceil(np.abs(np.diff(cs)) * phase_rate / (math.pi / 8.0)).astype(int))
        pts = np.concatenate(
            [coarse[k] + (coarse[k + 1] - coarse[k]) * np.arange(n) / n for k, n in enumerate(pieces)] + [[b]]
        )
        vals = [fun(p) for p in pts]
        for k in range(pts.size - 1):
            total += _edge_turn(fun, pts[k], pts[k + 1], vals[k], vals[k + 1])
    n = total / (2.0 * math.pi)
    if abs(n - round(n)) > 0.05:
        raise SolverError(f"magnetised reference: the mode count {n:.3f} is not an integer")
    return int(round(n))


def _phase_rate(guide: _Guide) -> float:
    """2 k0 h_top: the phase path (rad per unit C) of a wave from the ground to the top level and back."""
    return 2.0 * float(np.sum(guide.profile.thickness))


def count_modes(guide: _Guide, region) -> int:
    """Zeros of the mode equation inside an S rectangle (Re S min, Re S max, Im S min, Im S max).

    The argument principle: the zeros of an analytic function inside a closed contour number the
    turns of its phase along the contour divided by 2 pi. D(C) = det(I - Rg R) has poles where the
    ionosphere's upgoing-amplitude matrix is singular, so the count uses
    det(u - Rg d) = det(u) D, u and d the up- and downgoing amplitudes of the upward-decaying
    solutions started from the spectral projector of the top medium (analytic in S, whatever the
    ordering of its eigenvalues); the re-orthonormalisations on the way down multiply this
    determinant by positive numbers only, so they do not turn its phase. S rectangles with
    Im S < 0 < Re S map into the first quadrant of C away from C = 0, where C = sqrt(1 - S^2) is
    analytic.
    """
    fun = lambda s: guide.det_analytic(_cos_of_sine(s))  # noqa: E731
    return _winding(fun, region, _phase_rate(guide))


#: Outward moves of the counting region's edges, tried in turn when a root lies on its contour
#: (relative to the edge's value: Re S min, Re S max, Im S min; the low-attenuation edge stays);
#: uneven steps, so that the edges of successive tries do not fall on one lattice of roots.
_NUDGES = (
    (0.0, 0.0, 0.0),
    (-0.013, 0.0117, 0.031),
    (-0.029, 0.0231, 0.053),
    (-0.047, 0.0343, 0.089),
    (-0.061, 0.0457, 0.117),
)


def _complete_nudged(guide: _Guide, region, roots):
    """:func:`_complete` on ``region``, or on a slightly larger one if a root lies on its contour.

    A root on an edge (or on a line the bisection draws) leaves the phase of the mode equation
    unresolved there. Moving the edges outward by a few percent takes the contour off the root; the
    region used is returned with the count, so that the modes are compared with the region counted.
    """
    x0, x1, y0, y1 = region
    parts = [(x0 * (1.0 + dx0), x1 * (1.0 + dx1), y0 * (1.0 + dy0), y1) for dx0, dx1, dy0 in _NUDGES]
    for part in parts[:-1]:
        try:
            return part, _complete(guide, part, roots)
        except RootOnContourError as exc:
            log.info("magnetised reference: %s; counting again on a region nudged outward", exc)
    return parts[-1], _complete(guide, parts[-1], roots)


def _complete(guide: _Guide, region, roots, max_depth=10):
    """Count the zeros in ``region``; find those missing from ``roots`` by bisection of the region.

    Returns (count, new roots). A part whose count exceeds the known roots inside it is searched by
    Newton's method from its centre (the root must land inside the part) and, failing that, halved
    across its longer side (Im S weighted by 10, the shape of the mode pattern) and searched again.
    """
    fun = lambda s: guide.det_analytic(_cos_of_sine(s))  # noqa: E731
    rate = _phase_rate(guide)
    total = _winding(fun, region, rate)
    known = [c for c in roots]
    new = []

    def inside(c, part):
        return _in_region(c, part)

    def search(part, count, depth):
        have = sum(1 for c in known if inside(c, part))
        if count <= have:
            return
        x0, x1, y0, y1 = part
        centre = _cos_of_sine(complex(0.5 * (x0 + x1), 0.5 * (y0 + y1)))
        size = abs(_cos_of_sine(complex(x1, y1)) - _cos_of_sine(complex(x0, y0)))
        if count - have == 1 or depth >= max_depth:
            root, ok = _newton(guide.det, centre, max_step=0.5 * size)
            if ok:
                root = _canonical(root)
                if inside(root, part) and not any(_same_root(root, c) for c in known):
                    known.append(root)
                    new.append(root)
                    if count - have == 1:
                        return
        if depth >= max_depth:
            return
        if (x1 - x0) >= 10.0 * (y1 - y0):
            xm = 0.5 * (x0 + x1)
            halves = [(x0, xm, y0, y1), (xm, x1, y0, y1)]
        else:
            ym = 0.5 * (y0 + y1)
            halves = [(x0, x1, y0, ym), (x0, x1, ym, y1)]
        first = _winding(fun, halves[0], rate, points_per_edge=2)
        search(halves[0], first, depth + 1)
        search(halves[1], count - first, depth + 1)

    search(tuple(region), total, 0)
    return total, new


def _mode_quantities(guide: _Guide, c, k0):
    """Wavenumber, excitation Lambda and the field ratios of the mode at C (module docstring)."""
    h = 1e-6 * max(abs(c), 1e-2)
    d_prime = (guide.det(c + h) - guide.det(c - h)) / (2.0 * h)
    r, rg = guide.matrices(c)
    eye = np.eye(2)
    m = eye - rg @ r
    adj = np.array([[m[1, 1], -m[0, 1]], [-m[1, 0], m[0, 0]]])
    core = adj @ (eye + rg)
    n_sum = (eye + r) @ core
    n_diff = (r - eye) @ core
    s = _sine(c)
    kn = k0 * s
    if kn.imag > 0:
        raise SolverError(f"magnetised reference: mode at C = {c:.6g} grows along range (Im k > 0)")
    lam = 1j * k0 * n_sum[0, 0] / d_prime
    npp, ntp = n_sum[0, 0], n_sum[1, 0]
    ephi = -ntp / (s * npp)
    hphi = -1.0 / s
    hr = -c * n_diff[1, 0] / (s * npp)
    frac = abs(core[0, 0]) ** 2 / (abs(core[0, 0]) ** 2 + abs(core[1, 0]) ** 2)
    return kn, lam, ephi, hphi, hr, frac


# --------------------------------------------------------------------------------------------------
# Field at the ground
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GroundFields:
    """Complex field components at the ground (V/m for E, A/m for H), RMS phasors, exp(+j omega t)."""

    range_m: np.ndarray
    ez: np.ndarray
    ephi: np.ndarray
    hphi: np.ndarray
    hr: np.ndarray


def _hankel2_0(z):
    scale = np.exp(-1j * z)
    return np.where(scale == 0, 0.0, hankel2e(0, z) * scale)


def ground_field(modes: MagnetisedModes, range_m, moment_am: complex = 1.0, spherical_spreading=None) -> GroundFields:
    """Fields at the ground of a vertical element of moment ``moment_am`` (A m) on the ground, by the mode sum.

        Ez(r, 0) = -(p / (4 omega eps0)) sum_n Lambda_n k_n^2 H0^(2)(k_n r)

    and the other components from each mode's ratios. With ``spherical_spreading`` (default: when the
    modes were found with earth flattening) every component is multiplied by sqrt(d / (a sin(d/a)))
    (:func:`cavity.reference.modes.spherical_spreading_correction`), as the tool's calibrated output
    is; pass False to compare with a flat-guide run.
    """
    from cavity.reference.modes import spherical_spreading_correction

    r = _positive("range_m", range_m, "m")
    shape = r.shape
    r = r.ravel()
    omega = 2.0 * math.pi * modes.frequency_hz
    k = modes.wavenumber
    terms = (modes.excitation * k * k)[:, None] * _hankel2_0(k[:, None] * r[None, :])
    terms *= -(moment_am / (4.0 * omega * EPS0))
    ez = terms.sum(axis=0)
    ephi = (modes.ephi_ratio[:, None] * terms).sum(axis=0)
    hphi = (modes.hphi_ratio[:, None] * terms).sum(axis=0) / ETA0
    hr = (modes.hr_ratio[:, None] * terms).sum(axis=0) / ETA0
    spread = modes.earth_flattening if spherical_spreading is None else bool(spherical_spreading)
    if spread:
        g = spherical_spreading_correction(r, modes.earth_radius_m)
        ez, ephi, hphi, hr = ez * g, ephi * g, hphi * g, hr * g
    return GroundFields(
        r.reshape(shape), ez.reshape(shape), ephi.reshape(shape), hphi.reshape(shape), hr.reshape(shape)
    )
