"""Contact configurations of multi-terminal measurements and R_mn,kl from a conductance matrix.

Shared by the model (:mod:`ringkit.transport.multiterminal`) and the analysis of measured data
(:mod:`ringkit.analysis.fourterminal`); numpy only.

API
---
Contacts(current=(m, n), voltage=(k, l))
    Current from contact m to contact n, voltage measured as V_k - V_l; ``Contacts.parse``
    reads ``"0,1,2,3"`` / ``"I01V23"`` style strings; ``reversed()`` is the reciprocal
    configuration (k, l; m, n).
resistance_from_conductance(G, contacts, *, allow_shared=False)
    ``R_mn,kl = (V_k - V_l)/I`` in the inverse unit of ``G`` (h/e^2 for G in e^2/h).

Convention (M. Büttiker, Phys. Rev. Lett. 57, 1761 (1986); docs/multiterminal.md)
-------------------------------------------------------------------------------
``I_i = sum_j G_ij V_j`` (currents into the sample counted positive at contact i); rows and
columns of G sum to zero. A current I enters at m and leaves at n; every other contact is
floating (zero net current). Grounding n (V_n = 0) and deleting its row and column leaves a
regular matrix G' whenever every contact is connected to n; ``V = G'^-1 e_m I`` and
``R_mn,kl = (G'^-1)_km - (G'^-1)_lm`` (terms with k or l = n are zero); contacts not used by
the configuration whose row and column vanish (no open channel) are left out. Reciprocity:
``R_mn,kl(B) = R_kl,mn(-B)``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError

__all__ = ["Contacts", "resistance_from_conductance", "SINGULAR_RCOND"]

SINGULAR_RCOND = 1e-12
"""Reduced conductance matrices with reciprocal condition number below this are singular."""


@dataclass(frozen=True)
class Contacts:
    """A four- (or three-, two-) terminal contact configuration.

    Attributes
    ----------
    current : (int, int)
        Current source m and drain n (current flows m -> n through the sample).
    voltage : (int, int)
        Voltage contacts (k, l): the measured voltage is V_k - V_l.
    """

    current: tuple[int, int]
    voltage: tuple[int, int]

    def __post_init__(self) -> None:
        for name in ("current", "voltage"):
            pair = getattr(self, name)
            try:
                a, b = (int(x) for x in pair)
            except (TypeError, ValueError):
                raise ParameterError(name, pair, "must be a pair of contact indices") from None
            if a < 0 or b < 0 or a != pair[0] or b != pair[1]:
                raise ParameterError(name, pair, "must be a pair of contact indices >= 0")
            if a == b:
                raise ParameterError(name, pair, "must name two different contacts")
            object.__setattr__(self, name, (a, b))

    @classmethod
    def parse(cls, text: str | Contacts | tuple) -> Contacts:
        """From ``"0,1,2,3"``, ``"0 1 2 3"``, ``"I01V23"``, ``"I0-1,V2-3"`` or (m, n, k, l).

        The four numbers are m, n (current from m to n) and k, l (voltage V_k - V_l).
        """
        if isinstance(text, Contacts):
            return text
        if isinstance(text, (tuple, list)):
            nums = list(text)
        else:
            nums = re.findall(r"\d+", str(text))
            if len(nums) != 4 and len("".join(nums)) == 4:  # "I01V23": one digit per contact
                nums = list("".join(nums))
        if len(nums) != 4:
            raise ParameterError(
                "contacts",
                text,
                "must give four contact numbers m, n, k, l (current m -> n, voltage V_k - V_l), "
                "e.g. '0,1,2,3'",
            )
        m, n, k, l_ = (int(x) for x in nums)
        return cls((m, n), (k, l_))

    @property
    def label(self) -> str:
        """Compact label ``"R_mn,kl"``."""
        (m, n), (k, l_) = self.current, self.voltage
        return f"R_{m}{n},{k}{l_}"

    def __str__(self) -> str:
        return f"{self.current[0]},{self.current[1]},{self.voltage[0]},{self.voltage[1]}"

    def reversed(self) -> Contacts:
        """The reciprocal configuration R_kl,mn (current and voltage contacts swapped)."""
        return Contacts(self.voltage, self.current)

    @property
    def shared(self) -> bool:
        """True if a voltage contact is also a current contact (two/three-terminal)."""
        return bool(set(self.current) & set(self.voltage))

    def check(self, n_terminals: int, *, allow_shared: bool = False) -> None:
        """Raise :class:`ParameterError` unless valid for ``n_terminals`` contacts."""
        for name, pair in (("current", self.current), ("voltage", self.voltage)):
            if max(pair) >= n_terminals:
                raise ParameterError(
                    f"contacts.{name}", pair, f"contacts must lie in 0..{n_terminals - 1}"
                )
        if self.shared and not allow_shared:
            raise ParameterError(
                "contacts.voltage",
                self.voltage,
                f"must not repeat a current contact {self.current}: a four-terminal "
                f"resistance needs four distinct contacts out of 0..{n_terminals - 1} "
                "(pass allow_shared=True for a two- or three-terminal resistance)",
            )


def resistance_from_conductance(
    G: np.ndarray, contacts: Contacts | str | tuple, *, allow_shared: bool = False
) -> np.ndarray:
    """Multi-terminal resistance R_mn,kl from conductance matrices.

    Parameters
    ----------
    G : ndarray (..., N, N)
        Conductance matrices (``I = G V``, rows and columns summing to zero), e.g. in e^2/h.
    contacts : Contacts or str
        Configuration (see :meth:`Contacts.parse`).
    allow_shared : bool
        Allow a voltage contact equal to a current contact (two/three-terminal resistance).

    Returns
    -------
    ndarray (...)
        R_mn,kl in the inverse unit of G (h/e^2 for G in e^2/h); may be negative.

    Raises
    ------
    ParameterError
        Bad contacts; a singular reduced matrix (some contact not connected to the drain n:
        the resistance is undefined), naming the configuration and the allowed choices.
    """
    c = Contacts.parse(contacts)
    g = np.asarray(G, dtype=float)
    if g.ndim < 2 or g.shape[-1] != g.shape[-2]:
        raise ParameterError("G", g.shape, "must be square in its last two axes")
    n_t = g.shape[-1]
    c.check(n_t, allow_shared=allow_shared)
    (m, n), (k, l_) = c.current, c.voltage
    # contacts with an all-zero row and column (e.g. a lead without an open channel) carry no
    # current and do not affect the others; they matter only if the configuration uses them
    flat_g = g.reshape(-1, n_t, n_t)
    decoupled = ~(np.any(flat_g != 0, axis=(0, 2)) | np.any(flat_g != 0, axis=(0, 1)))
    used = {m, n, k, l_}
    keep = [i for i in range(n_t) if i != n and (i in used or not decoupled[i])]
    gr = g[..., keep, :][..., :, keep]
    flat = gr.reshape(-1, len(keep), len(keep))
    rcond = np.array([1.0 / np.linalg.cond(x) if np.all(np.isfinite(x)) else 0.0 for x in flat])
    if flat.size and (not np.all(np.isfinite(rcond)) or rcond.min() < SINGULAR_RCOND):
        bad = int(np.argmin(np.nan_to_num(rcond, nan=0.0)))
        raise ParameterError(
            "contacts",
            str(c),
            f"the conductance matrix reduced to the drain {n} is singular (reciprocal condition "
            f"{rcond[bad]:.2g} at point {bad}): some contact is not connected to contact {n}, "
            "so R_mn,kl is undefined; allowed: contacts that are all coupled to the sample "
            f"(choose among the connected contacts of 0..{n_t - 1})",
        )
    e_m = np.zeros(len(keep))
    e_m[keep.index(m)] = 1.0
    v = np.linalg.solve(gr, np.broadcast_to(e_m, gr.shape[:-1])[..., None])[..., 0]
    vk = v[..., keep.index(k)] if k != n else 0.0
    vl = v[..., keep.index(l_)] if l_ != n else 0.0
    return np.asarray(vk - vl)
