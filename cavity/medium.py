"""The medium along a path: what a path hands to the engine.

Two steps, both here: :func:`ionosphere_along` gives the per-sample description a path carries
(solar zenith angle, Wait-Spies h' and beta, day/night class), and :func:`path_medium` turns a path
into the engine's :class:`~cavity.fdtd.engine.Medium` (ground per sample, electron density and
collision frequency per sample and altitude, or a ceiling, and the geomagnetic field). What each
ionosphere form contributes is asked of the form (:mod:`cavity.ionosphere_forms`); a new quantity of
the medium (a geomagnetic field per column) is added here; see DEVELOPERS.md.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from cavity.ionosphere_forms import form_of

if TYPE_CHECKING:  # pragma: no cover
    from cavity.fdtd.engine import Medium

#: Altitude sampling of the profile handed to the engine (the engine interpolates onto its grid).
PROFILE_STEP_M = 250.0


def ionosphere_along(scenario, lats, lons, n):
    """(chi, h', beta, daylight) per path sample for the scenario's ionosphere form.

    ``lats``/``lons`` are the samples' positions (None for a path given by range only); forms without
    a per-sample description (ceiling, file, none) give four Nones (see
    :meth:`cavity.ionosphere_forms.IonosphereForm.along`).
    """
    ion = scenario.ionosphere
    return form_of(ion).along(ion, lats, lons, n)


def path_medium(scenario, path) -> Medium:
    """The engine's medium for one path: ground per sample and the ionosphere profile per sample."""
    from cavity.fdtd import engine as eng
    from profiles.exponential import ALTITUDE_RANGE_M

    ion = scenario.ionosphere
    form = form_of(ion)
    top = scenario.planned_top_m()
    z = np.arange(0.0, top + 40e3 + PROFILE_STEP_M, PROFILE_STEP_M)
    z = z[z <= ALTITUDE_RANGE_M[1]]  # profiles end at 500 km; the engine holds the top value above
    ne, nu = form.profiles(ion, path, z)
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
        ceiling_m=form.ceiling_m(ion),
        magnetic_field_t=b0,
    )
