"""Tight-binding rings: lattice discretisation, Peierls phases, Anderson disorder.

API
---
build_ring(device, *, seed=0) -> TightBindingRing
    Finalized kwant system of a :class:`ringkit.device.RingDevice` (leads 0 = left, 1 = right).
TightBindingRing
    ``fsyst``, ``lattice_spacing`` [m], ``hopping`` [J], ``positions`` [m], ``arm_of_site``,
    ``params(B=, flux=, gate=)``, ``to_lattice_energy(E_J)``, ``field_param``, ...
fields
    The single Peierls-phase module (conventions, value functions, field-regime warnings).
disorder
    Counter-based Anderson disorder and Born mean free path.
"""

from __future__ import annotations

from ringkit.tightbinding import disorder, fields
from ringkit.tightbinding.builder import TightBindingRing, build_ring
from ringkit.tightbinding.fields import FieldRegimeWarning

__all__ = ["build_ring", "TightBindingRing", "fields", "disorder", "FieldRegimeWarning"]
