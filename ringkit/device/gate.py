"""Arm gate: an electrostatic potential energy offset on one arm of the ring.

API
---
ArmGate
    Frozen dataclass ``ArmGate(arm="upper"|"lower", potential [J])``.
ARMS
    Allowed arm names.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from ringkit._validation import check_choice, check_range

__all__ = ["ArmGate", "ARMS"]

ARMS: tuple[str, ...] = ("upper", "lower")


@dataclass(frozen=True)
class ArmGate:
    """Electrostatic potential energy offset on one arm.

    Parameters
    ----------
    arm : {"upper", "lower"}
        Gated arm (see :class:`RingGeometry` for the arm convention).
    potential : float
        Potential energy V in J added on every site of that arm (positive raises the band
        bottom). A potential difference between the arms shifts the interference phase
        (electric Aharonov-Bohm effect).
    """

    arm: Literal["upper", "lower"] = "upper"
    potential: float = 0.0

    def __post_init__(self) -> None:
        check_choice("arm", self.arm, ARMS)
        object.__setattr__(self, "potential", check_range("potential", self.potential, unit="J"))
