"""The study plan: the list of independent work units a study is made of.

One work unit is one disorder realization at one Fermi energy, one gate potential and one
dephasing length; it computes G(B) on the whole field grid for every temperature of the study
(the temperatures share the energy points of the thermal window, so they belong together).
Units carry stable ids such as ``"r0003-e00-g01-d00"`` (indices into the study's axes), so a
checkpoint written by one run is understood by the next run of the same study.

API
---
WorkUnit
    Frozen description of one unit (``uid``, indices, seed and the outer parameter values).
StudyPlan
    Axes of the study (SI) and the units in execution order; ``plan.unit(uid)``.
make_plan(config) -> StudyPlan
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from ringkit.study.config import StudyConfig

__all__ = ["WorkUnit", "StudyPlan", "make_plan", "AXES"]

#: Names of the outer axes of a study, in the order of the unit-id fields.
AXES: tuple[str, ...] = ("realization", "fermi_energy", "gate_potential", "l_phi")


@dataclass(frozen=True)
class WorkUnit:
    """One independent piece of a study.

    Attributes
    ----------
    uid : str
        Stable id ``"r{realization}-e{energy}-g{gate}-d{dephasing}"`` (zero-padded indices).
    index : tuple of int
        Position on the axes :data:`AXES`.
    seed : int
        Disorder seed of the realization.
    fermi_energy : float or None
        Fermi energy in J (``None``: the material's own value).
    gate_potential : float
        Potential energy of the arm gate in J.
    l_phi : float
        Phase-coherence length L_phi in m (``inf``: coherent, no probes).
    """

    uid: str
    index: tuple[int, int, int, int]
    seed: int
    fermi_energy: float | None
    gate_potential: float
    l_phi: float


@dataclass(frozen=True)
class StudyPlan:
    """All work units of a study and the axes of its result.

    Attributes
    ----------
    config : StudyConfig
        The validated study.
    field : numpy.ndarray
        Inner sweep values (T in ``uniform`` mode, Wb in ``flux_tube`` mode).
    seeds : tuple of int
        Disorder seed of each realization.
    fermi_energies : tuple of float or None
        Fermi energies in J; ``(None,)`` when the material's value is used.
    gate_potentials, temperatures, l_phi_values : tuple of float
        Outer axes in J, K and m.
    units : tuple of WorkUnit
        In execution order (realization-major, so each worker reuses one built system).
    """

    config: StudyConfig
    field: np.ndarray
    seeds: tuple[int, ...]
    fermi_energies: tuple[float | None, ...]
    gate_potentials: tuple[float, ...]
    temperatures: tuple[float, ...]
    l_phi_values: tuple[float, ...]
    units: tuple[WorkUnit, ...]

    @property
    def field_name(self) -> str:
        """``"B"`` (uniform field, T) or ``"flux"`` (flux tube, Wb)."""
        return "flux" if self.config["field"]["mode"] == "flux_tube" else "B"

    @property
    def shape(self) -> tuple[int, ...]:
        """Shape of the outer grid on :data:`AXES`."""
        return (
            len(self.seeds),
            len(self.fermi_energies),
            len(self.gate_potentials),
            len(self.l_phi_values),
        )

    @property
    def uids(self) -> tuple[str, ...]:
        return tuple(u.uid for u in self.units)

    def unit(self, uid: str) -> WorkUnit:
        """The unit with id ``uid`` (KeyError if it is not part of this plan)."""
        for u in self.units:
            if u.uid == uid:
                return u
        raise KeyError(uid)

    def swept_axes(self) -> list[str]:
        """Outer parameters with more than one value (temperature included)."""
        out = []
        if len(self.fermi_energies) > 1:
            out.append("fermi_energy")
        if len(self.gate_potentials) > 1:
            out.append("gate_potential")
        if len(self.temperatures) > 1:
            out.append("temperature")
        if len(self.l_phi_values) > 1:
            out.append("l_phi")
        return out


def _uid(idx: tuple[int, ...], widths: tuple[int, ...]) -> str:
    tags = ("r", "e", "g", "d")
    return "-".join(f"{t}{i:0{w}d}" for t, i, w in zip(tags, idx, widths, strict=True))


def make_plan(config: StudyConfig) -> StudyPlan:
    """Expand a validated study into its work units.

    Parameters
    ----------
    config : StudyConfig
        Validated study.

    Returns
    -------
    StudyPlan
        ``len(units) = realizations * n_fermi_energy * n_gate_potential * n_l_phi``.
    """
    f = config["field"]
    field = np.linspace(f["start"], f["stop"], f["points"])
    ens = config["ensemble"]
    seeds = tuple(ens["seed"] + i for i in range(ens["realizations"]))
    sw = config["sweep"]
    energies: tuple[float | None, ...] = sw["fermi_energy"] or (None,)
    gates = tuple(sw["gate_potential"])
    l_phis = tuple(sw["l_phi"])
    sizes = (len(seeds), len(energies), len(gates), len(l_phis))
    widths = tuple(max(2, len(str(n - 1))) for n in sizes)
    widths = (max(4, widths[0]), *widths[1:])
    units = []
    for idx in itertools.product(*(range(n) for n in sizes)):
        r, e, g, d = idx
        units.append(
            WorkUnit(
                uid=_uid(idx, widths),
                index=idx,
                seed=seeds[r],
                fermi_energy=energies[e],
                gate_potential=gates[g],
                l_phi=l_phis[d],
            )
        )
    return StudyPlan(
        config=config,
        field=field,
        seeds=seeds,
        fermi_energies=energies,
        gate_potentials=gates,
        temperatures=tuple(sw["temperature"]),
        l_phi_values=l_phis,
        units=tuple(units),
    )
