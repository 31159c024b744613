"""The medium along a path: the one home of what each ionosphere form puts into a solve.

Two steps, both here: :func:`ionosphere_along` gives the per-sample description a path carries
(solar zenith angle, Wait-Spies h' and beta, day/night class) for the forms that vary along a path,
and :func:`path_medium` turns a path into the engine's :class:`~cavity.fdtd.engine.Medium` (ground per
sample, electron density and collision frequency per sample and altitude, or a ceiling). A new
ionosphere form, or a new quantity of the medium (a geomagnetic field per column), is added here and
in the scenario's parser (:mod:`cavity.scenario`); see DEVELOPERS.md.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from cavity.fdtd.engine import Medium

#: Altitude sampling of the profile handed to the engine (the engine interpolates onto its grid).
PROFILE_STEP_M = 250.0


def ionosphere_along(scenario, lats, lons, n):
    """(chi, h', beta, daylight) per path sample for the scenario's ionosphere form.

    ``lats``/``lons`` are the samples' positions (None for a path given by range only); forms without
    a per-sample description (ceiling, file, none) give four Nones and are built in :func:`path_medium`.
    """
    from profiles.daynight import daylight_class, linear_transition, preset

    ion = scenario.ionosphere
    if ion.form == "exponential":
        return None, np.full(n, ion.hprime_km, dtype=float), np.full(n, ion.beta_per_km, dtype=float), None
    if ion.form == "preset":
        p = preset(ion.preset)
        return None, np.full(n, p.hprime_km, dtype=float), np.full(n, p.beta_per_km, dtype=float), None
    if ion.form == "utc":
        from cavity.geo import solar_zenith_deg

        chi = np.asarray(solar_zenith_deg(ion.utc, lats, lons), dtype=float)
        hprime, beta = linear_transition(chi, day=preset(ion.day_preset), night=preset(ion.night_preset))
        return (
            chi,
            np.asarray(hprime, dtype=float),
            np.asarray(beta, dtype=float),
            np.asarray(daylight_class(chi)).astype(str),
        )
    return None, None, None, None


def path_medium(scenario, path) -> Medium:
    """The engine's medium for one path: ground per sample and the ionosphere profile per sample."""
    import profiles
    from cavity.fdtd import engine as eng
    from profiles.exponential import ALTITUDE_RANGE_M

    ion = scenario.ionosphere
    top = scenario.planned_top_m()
    z = np.arange(0.0, top + 40e3 + PROFILE_STEP_M, PROFILE_STEP_M)
    z = z[z <= ALTITUDE_RANGE_M[1]]  # profiles end at 500 km; the engine holds the top value above
    ne = nu = None
    if path.hprime_km is not None:
        ne = profiles.electron_density(z[None, :], path.hprime_km[:, None], path.beta_per_km[:, None])
        nu = np.broadcast_to(profiles.collision_frequency(z)[None, :], ne.shape).copy()
    elif ion.form == "file":
        ds = profiles.read_profile(ion.profile_path)
        ne1, nu1 = profiles.sample_profile(ds, z)
        ne = np.broadcast_to(np.asarray(ne1, float)[None, :], (path.n_samples, z.size)).copy()
        nu = np.broadcast_to(np.asarray(nu1, float)[None, :], (path.n_samples, z.size)).copy()
    # the geomagnetic field per sample in the path frame (tesla): six components in the engine
    field = getattr(path, "geomagnetic", None)
    b0 = None
    if field is not None and ne is not None:
        b0 = np.stack([field.b_r_nt, field.b_phi_nt, field.b_z_nt], axis=1) * 1e-9
    return eng.Medium(
        range_m=np.asarray(path.range_m, float),
        ground_conductivity=np.asarray(path.ground_conductivity_s_per_m, float),
        ground_permittivity=np.asarray(path.ground_relative_permittivity, float),
        altitude_m=z if ne is not None else None,
        electron_density=ne,
        collision_frequency=nu,
        ceiling_m=ion.ceiling_m if ion.form == "ceiling" else None,
        magnetic_field_t=b0,
    )
