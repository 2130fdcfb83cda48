"""Device description in SI units: material, ring geometry, arm gate, discretisation.

API
---
Material
    Effective mass, Fermi sea, disorder (mobility / mean free path / Anderson W), temperature,
    phase-coherence length; presets ``Material.preset("GaAs" | "InAs" | "Au")``.
RingGeometry
    ``circular``, ``from_mean_radius``, ``rectangular``, ``chain`` constructors.
ArmGate
    Potential energy offset on one arm.
RingDevice
    Material + geometry + gate + field mode + lattice choices; ``site_estimate()``.
SiteEstimate, DiscretisationWarning, DeviceTooLargeError, dispersion_error
    Size estimate, coarse-lattice warning, build refusal, lattice dispersion error.
PublishedRing, published_ring
    Published ring experiments (geometry and observed period).
"""

from __future__ import annotations

from ringkit.device.device import (
    FIELD_MODES,
    DeviceTooLargeError,
    DiscretisationWarning,
    RingDevice,
    SiteEstimate,
    dispersion_error,
)
from ringkit.device.gate import ARMS, ArmGate
from ringkit.device.geometry import SHAPES, LeadSpec, RingGeometry
from ringkit.device.material import PRESET_NAMES, Material
from ringkit.device.presets import PUBLISHED_RINGS, PublishedRing, published_ring

__all__ = [
    "Material",
    "PRESET_NAMES",
    "RingGeometry",
    "LeadSpec",
    "SHAPES",
    "ArmGate",
    "ARMS",
    "RingDevice",
    "SiteEstimate",
    "DiscretisationWarning",
    "DeviceTooLargeError",
    "FIELD_MODES",
    "dispersion_error",
    "PublishedRing",
    "published_ring",
    "PUBLISHED_RINGS",
]
