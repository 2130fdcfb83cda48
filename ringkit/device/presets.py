"""Published ring experiments as device descriptions (geometry + material + observed period).

API
---
PublishedRing
    Frozen record: citation, geometry, material preset name, observed h/e period, source tags.
published_ring(name)
    Look up one record ("webb1985", "pedersen2000").
PUBLISHED_RINGS
    Names available.

Tags follow docs/physics.md: "V" = seen in the published abstract, "M" = from memory
(use with a loose tolerance), "C" = computed here from the other numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

from ringkit._validation import ParameterError
from ringkit.device.geometry import RingGeometry
from ringkit.device.material import Material
from ringkit.units import PHI0

__all__ = ["PublishedRing", "published_ring", "PUBLISHED_RINGS"]


@dataclass(frozen=True)
class PublishedRing:
    """A measured ring and its observed h/e period.

    Attributes
    ----------
    name, citation : str
    geometry : RingGeometry
        Ring size as published (see ``source_tags`` for reliability).
    material : str
        Name of the :meth:`Material.preset` to use.
    observed_period : float
        Observed h/e period in T.
    source_tags : str
        Which numbers are verified (V) or from memory (M).
    """

    name: str
    citation: str
    geometry: RingGeometry
    material: str
    observed_period: float
    source_tags: str

    @property
    def predicted_period(self) -> float:
        """h/e period ``(h/e)/area_mean`` in T of the published geometry (mean radius)."""
        return PHI0 / self.geometry.area_mean

    @property
    def period_bracket(self) -> tuple[float, float]:
        """Range of h/e periods ``(h/e)/area_outer .. (h/e)/area_inner`` in T."""
        return PHI0 / self.geometry.area_outer, PHI0 / self.geometry.area_inner

    def material_preset(self, **overrides: object) -> Material:
        """The material preset of this experiment."""
        return Material.preset(self.material, **overrides)


def _records() -> dict[str, PublishedRing]:
    return {
        "webb1985": PublishedRing(
            name="webb1985",
            citation=(
                "R. A. Webb, S. Washburn, C. P. Umbach, R. B. Laibowitz, Phys. Rev. Lett. 54, "
                "2696 (1985), doi:10.1103/PhysRevLett.54.2696 (Au ring)"
            ),
            # inside diameter 784 nm, wire width 41 nm [M]
            geometry=RingGeometry.circular(392e-9, 433e-9),
            material="Au",
            observed_period=7.6e-3,  # ~76 G [M]
            source_tags="title/journal V; inside diameter 784 nm, width 41 nm, period 76 G: M",
        ),
        "pedersen2000": PublishedRing(
            name="pedersen2000",
            citation=(
                "S. Pedersen, A. E. Hansen, A. Kristensen, C. B. Sorensen, P. E. Lindelof, "
                "Mater. Sci. Eng. B 74, 234 (2000) (shallow-etched GaAs/GaAlAs ring)"
            ),
            # lithographic radius ~0.65 um [M]; the arm width is not known here (100 nm assumed)
            geometry=RingGeometry.from_mean_radius(0.65e-6, 0.1e-6),
            material="GaAs",
            observed_period=3.3e-3,  # [V: abstract]
            source_tags="period 3.3 mT V (abstract); radius 0.65 um M; width assumed",
        ),
    }


PUBLISHED_RINGS: tuple[str, ...] = ("webb1985", "pedersen2000")


def published_ring(name: str) -> PublishedRing:
    """Return the record ``name`` (one of :data:`PUBLISHED_RINGS`)."""
    records = _records()
    if name not in records:
        raise ParameterError(
            "name", name, "must be one of " + ", ".join(repr(n) for n in PUBLISHED_RINGS)
        )
    return records[name]
