"""Ground classes: conductivity and relative permittivity used by the surface-impedance ground.

Values are the usual ITU-R P.527 / P.368 class values (from memory; docs/physics.md 5). "land" is the
medium-dry class, a middle value for continental paths when no better map is at hand.
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class GroundClass:
    name: str
    conductivity_s_per_m: float
    relative_permittivity: float
    description: str


GROUND_CLASSES: dict[str, GroundClass] = {
    g.name: g
    for g in (
        GroundClass("sea", 5.0, 70.0, "average sea water"),
        GroundClass("wet_ground", 1e-2, 30.0, "wet ground"),
        GroundClass("land", 1e-3, 15.0, "medium dry ground"),
        GroundClass("dry_ground", 1e-4, 3.0, "very dry ground"),
        GroundClass("ice", 1e-4, 3.0, "fresh-water ice and polar ice sheet (upper value of 3e-5 to 1e-4)"),
        GroundClass("perfect", math.inf, 1.0, "perfectly conducting ground (verification)"),
    )
}


def ground_class(name: str) -> GroundClass:
    """Look up a ground class by name (KeyError lists the known names)."""
    try:
        return GROUND_CLASSES[name]
    except KeyError:
        raise KeyError(f"unknown ground class {name!r}; known: {', '.join(GROUND_CLASSES)}") from None
