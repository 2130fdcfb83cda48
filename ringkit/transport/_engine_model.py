"""Private: the field dependence of a finalized kwant system as per-nonzero Peierls phases.

kwant is asked for its own sparse Hamiltonian at a few values of the field parameter; every
nonzero must then satisfy ``H(v)_k = H(0)_k * exp(i v c_k)`` with a real coefficient ``c_k``
(docs/engine.md §2.1). The coefficients are found numerically, so any builder whose hoppings
carry Peierls phases linear in one scalar parameter works unchanged (field in tesla, flux in Wb,
flux per plaquette, ...). The model is verified against kwant at an independent value with
phases beyond pi before it is used.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import kwant
import numpy as np

from ringkit._validation import ParameterError

__all__ = ["PeierlsModel", "build_peierls_model", "lead_depends_on"]

_PHASE_TARGET = 1.0  # rad: largest phase used to read off the coefficients
_TRIAL_SCALES = tuple(10.0**k for k in (0, -3, -6, -9, -12, -15, -18, -21, -24, -27, 3, 6, 9, 12))
_RATIO = 0.7071067811865476  # 1/sqrt(2)


@dataclass(frozen=True)
class PeierlsModel:
    """Sparse Hamiltonian of the scattering region as an explicit function of the field.

    Attributes
    ----------
    rows, cols : ndarray of int
        COO indices of kwant's Hamiltonian (orbital indices).
    base : ndarray of complex
        Values at zero field.
    dep : ndarray of int
        Positions (into ``base``) of the entries that depend on the field.
    coef : ndarray of float
        Phase coefficient per field-dependent entry, in rad per unit of the field parameter.
    shape : int
        Number of orbitals of the scattering region.
    orb_offsets : ndarray of int
        Orbital offset of every site (length n_sites + 1).
    field_param : str
        kwant parameter name of the field.
    params : dict
        The other kwant parameters (fixed).
    """

    rows: np.ndarray
    cols: np.ndarray
    base: np.ndarray
    dep: np.ndarray
    coef: np.ndarray
    shape: int
    orb_offsets: np.ndarray
    field_param: str
    params: dict = field(default_factory=dict)

    def values(self, value: float) -> np.ndarray:
        """Nonzero values of H at field ``value`` (same order as ``rows``/``cols``)."""
        data = self.base.copy()
        data[self.dep] = self.base[self.dep] * np.exp(1j * float(value) * self.coef)
        return data

    def matrix(self, value: float):
        """H at field ``value`` as a scipy COO matrix."""
        import scipy.sparse as sp

        return sp.coo_matrix((self.values(value), (self.rows, self.cols)), (self.shape,) * 2)


def _kwant_h(fsyst, params: dict):
    h, norb = fsyst.hamiltonian_submatrix(sparse=True, return_norb=True, params=params)[:2]
    h = h.tocoo()
    return h.row, h.col, np.asarray(h.data, dtype=complex), np.asarray(norb)


def _phases(d0: np.ndarray, d1: np.ndarray, nz: np.ndarray, field_param: str) -> np.ndarray:
    """Phase of d1/d0 on the nonzeros; raise if a magnitude changed (not a pure phase)."""
    if np.any(d1[~nz] != 0):
        raise ParameterError(
            field_param, "system", "entries that vanish at zero field must stay zero"
        )
    a0, a1 = np.abs(d0[nz]), np.abs(d1[nz])
    if np.any(np.abs(a1 - a0) > 1e-12 * np.maximum(a0, 1e-300) + 1e-15 * a0.max()):
        raise ParameterError(
            field_param,
            "system",
            "the field may only enter through Peierls phases (a matrix element changed "
            "magnitude, e.g. a Zeeman or field-dependent on-site term)",
        )
    return np.angle(d1[nz] / d0[nz])


def build_peierls_model(
    fsyst,
    field_param: str,
    params: dict | None = None,
    *,
    field_scale: float | None = None,
) -> PeierlsModel:
    """Read the per-nonzero phase coefficients of ``fsyst`` from kwant's Hamiltonian.

    Parameters
    ----------
    fsyst : kwant.system.FiniteSystem
        Finalized system with leads.
    field_param : str
        Name of the kwant parameter carrying the field.
    params : dict, optional
        Values of all other kwant parameters (held fixed).
    field_scale : float, optional
        A field value at which the largest Peierls phase is of order 1 rad. Found automatically
        (trying 1, 1e-3, 1e-6, ... and 1e3, ...) when omitted.

    Raises
    ------
    ParameterError
        If the field does not enter as a phase linear in ``field_param``.
    """
    if not isinstance(fsyst, kwant.system.FiniteSystem):
        raise ParameterError("fsyst", type(fsyst).__name__, "must be a finalized kwant system")
    params = dict(params or {})
    params.pop(field_param, None)

    def at(value: float):
        return _kwant_h(fsyst, {**params, field_param: value})

    try:
        rows, cols, d0, norb = at(0.0)
    except TypeError as err:  # kwant: unknown parameter name
        raise ParameterError("field_param", field_param, f"kwant rejected it ({err})") from err
    nz = d0 != 0
    coef_nz = np.zeros(int(nz.sum()))

    def pattern_ok(r, c):
        return np.array_equal(r, rows) and np.array_equal(c, cols)

    if field_scale:
        scales = tuple(abs(float(field_scale)) * 10.0**-k for k in range(0, 13, 2))
    else:
        scales = _TRIAL_SCALES
    chosen = None
    for v in scales:
        r1, c1, d1, _ = at(v)
        if not pattern_ok(r1, c1):
            raise ParameterError("fsyst", "system", "sparsity pattern changed with the field")
        ph = _phases(d0, d1, nz, field_param)
        m = float(np.max(np.abs(ph), initial=0.0))
        if not 1e-7 < m <= 1.0:
            continue
        # Aliasing by multiples of 2 pi would survive a check at 2v or v/2 but not one at an
        # irrational ratio: phases at r v must be r times those at v.
        _, _, dr, _ = at(v * _RATIO)
        if np.max(np.abs(_phases(d0, dr, nz, field_param) - _RATIO * ph)) > 1e-6 * m + 1e-13:
            continue
        chosen = v * _PHASE_TARGET / m
        break
    if chosen is None:
        raise ParameterError(
            "field_param",
            field_param,
            "no Peierls phase found at any field scale tried (the Hamiltonian does not depend "
            "on it, or pass field_scale)",
        )
    _, _, d1, _ = at(chosen)
    coef_nz = _phases(d0, d1, nz, field_param) / chosen
    # verify the linear-phase model at an independent value with phases up to ~3.7 rad
    check_value = 3.7 * chosen
    rc, cc, dc, _ = at(check_value)
    if not pattern_ok(rc, cc):
        raise ParameterError("fsyst", "system", "sparsity pattern changed with the field")
    model_vals = d0.copy()
    model_vals[nz] = d0[nz] * np.exp(1j * check_value * coef_nz)
    err = np.max(np.abs(model_vals - dc), initial=0.0)
    if err > 1e-11 * max(np.abs(d0).max(initial=1.0), 1e-300):
        raise ParameterError(
            field_param,
            "system",
            f"hoppings are not Peierls phases linear in {field_param!r} "
            f"(model misses kwant by {err:.2e})",
        )
    idx_nz = np.flatnonzero(nz)
    keep = coef_nz != 0.0
    offsets = np.zeros(len(norb) + 1, dtype=np.int64)
    offsets[1:] = np.cumsum(norb)
    return PeierlsModel(
        rows=np.asarray(rows, dtype=np.int64),
        cols=np.asarray(cols, dtype=np.int64),
        base=d0,
        dep=idx_nz[keep],
        coef=coef_nz[keep],
        shape=int(offsets[-1]),
        orb_offsets=offsets,
        field_param=field_param,
        params=params,
    )


def lead_depends_on(lead, field_param: str, params: dict, values: tuple[float, ...]) -> bool:
    """True if the lead's Hamiltonian changes with ``field_param`` (field inside the lead)."""
    if field_param not in getattr(lead, "parameters", frozenset()):
        return False

    def mats(v):
        p = {**params, field_param: v}
        return (
            np.asarray(lead.cell_hamiltonian(params=p)),
            np.asarray(lead.inter_cell_hopping(params=p)),
        )

    h0, v0 = mats(0.0)
    for val in values:
        h1, v1 = mats(val)
        if not (np.allclose(h0, h1, rtol=0, atol=0) and np.allclose(v0, v1, rtol=0, atol=0)):
            return True
    return False
