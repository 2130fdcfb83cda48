"""Private: kwant's scattering linear system with a fixed sparsity pattern, solved by MUMPS.

The system is the one ``kwant.solvers.common.SparseSolver._make_linear_sys`` builds (same lead
blocks and right-hand sides, written here with numpy), laid out once per energy so that a field
point only rewrites the field-dependent Hamiltonian entries in place. Two solvers share it:

* ``"schur"``: MUMPS computes the Schur complement onto the few "terminal" variables (lead
  interface orbitals, lead-mode variables, probe orbitals), with the symbolic analysis reused.
  All right-hand sides and all wanted outputs live on these variables, so the small dense
  Schur block gives every S-matrix and Green's function element needed.
* ``"lu"``: MUMPS numeric LU (analysis reused) and a solve for the requested columns.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from kwant.linalg import _mumps

from ringkit._validation import ParameterError

__all__ = [
    "LeadData",
    "compute_lead_data",
    "TerminalLayout",
    "PatternSystem",
    "MumpsKernel",
    "SingularSystemError",
]


class SingularSystemError(RuntimeError):
    """The full scattering system is numerically singular at this energy and field.

    This happens only when the energy coincides with a bound state in the continuum of the
    open system (kwant's own solver fails there too).
    """


_ORDERINGS = {"amd": 0, "amf": 2, "scotch": 3, "pord": 4, "metis": 5, "qamd": 6, "auto": 7}


@dataclass(frozen=True)
class LeadData:
    """Field-independent data of one lead at one energy (kwant's ``modes``)."""

    energy: float
    prop: object  # kwant.physics.PropagatingModes
    nprop: int
    iface_orbs: np.ndarray
    v_block: np.ndarray  # (k, n_iface): rows of the new variables, columns at the interface
    vdag_out: np.ndarray  # (n_iface, k): interface rows, new-variable columns
    lead_mat: np.ndarray  # (k, k)
    rhs_iface: np.ndarray  # (n_iface, nprop)
    rhs_vars: np.ndarray  # (k, nprop)


def compute_lead_data(lead, energy: float, params: dict, iface_orbs: np.ndarray) -> LeadData:
    """Mode data of ``lead`` at ``energy`` in the form of kwant's linear system."""
    prop, stab = lead.modes(energy, params=params)
    u, ulinv, nprop, svd_v = stab.vecs, stab.vecslmbdainv, stab.nmodes, stab.sqrt_hop
    if len(u) == 0:
        k = 0
        z = np.zeros((0, 0), complex)
        return LeadData(
            float(energy),
            prop,
            0,
            iface_orbs,
            z,
            np.zeros((len(iface_orbs), 0)),
            z,
            np.zeros((len(iface_orbs), 0)),
            z,
        )
    if svd_v.shape[0] != len(iface_orbs):
        raise ParameterError("fsyst", "lead", "lead hopping does not match its interface")
    k = u.shape[0]
    u_out, ulinv_out = u[:, nprop:], ulinv[:, nprop:]
    u_in, ulinv_in = u[:, :nprop], ulinv[:, :nprop]
    if u_out.shape[1] != k or svd_v.shape[1] != k:
        raise ParameterError("fsyst", "lead", "unexpected shape of the stabilized lead modes")
    return LeadData(
        energy=float(energy),
        prop=prop,
        nprop=int(nprop),
        iface_orbs=np.asarray(iface_orbs, dtype=np.int64),
        v_block=np.ascontiguousarray(svd_v.conj().T),
        vdag_out=svd_v @ u_out,
        lead_mat=-ulinv_out,
        rhs_iface=-(svd_v @ u_in),
        rhs_vars=np.asarray(ulinv_in),
    )


@dataclass(frozen=True)
class TerminalLayout:
    """Where every lead's variables and every probe orbital sit in the linear system."""

    n_orb: int  # orbitals of the scattering region
    n_total: int  # matrix dimension
    var_start: tuple[int, ...]  # first new variable of each lead
    nprop: tuple[int, ...]
    probe_orbs: tuple[np.ndarray, ...]  # orbitals of each probe


def _block_coo(r0: np.ndarray, c0: np.ndarray, block: np.ndarray):
    rr, cc = np.meshgrid(r0, c0, indexing="ij")
    return rr.ravel(), cc.ravel(), block.ravel()


class PatternSystem:
    """Assembled COO of the full linear system at one energy with in-place field updates.

    Parameters
    ----------
    model : PeierlsModel
        Field dependence of the scattering-region Hamiltonian.
    leads : list of LeadData
        Lead data at ``energy`` (all leads must have modes).
    energy : float
        Energy in the units of the system Hamiltonian.
    probe_orbs : list of ndarray
        Orbitals of each self-energy probe.
    probe_eta : ndarray
        Coupling Gamma of each probe (self-energy -i Gamma/2 on each of its orbitals).
    """

    def __init__(self, model, leads, energy, probe_orbs=(), probe_eta=()):
        self.energy = float(energy)
        self.model = model
        self.leads = list(leads)
        for ld in self.leads:
            if ld.energy != self.energy:
                raise RuntimeError("lead data computed at another energy")  # never reused
        n = model.shape
        rows = [model.rows]
        cols = [model.cols]
        data = [model.base.astype(complex)]
        # -E on the diagonal and the probe self-energies
        diag = np.full(n, -self.energy, dtype=complex)
        probe_orbs = [np.asarray(p, dtype=np.int64) for p in probe_orbs]
        for orbs, eta in zip(
            probe_orbs, np.broadcast_to(probe_eta, (len(probe_orbs),)), strict=True
        ):
            diag[orbs] += -0.5j * float(eta)
        rows.append(np.arange(n))
        cols.append(np.arange(n))
        data.append(diag)
        var_start, nprop = [], []
        pos = n
        for ld in self.leads:
            k = ld.lead_mat.shape[0]
            var_start.append(pos)
            nprop.append(ld.nprop)
            new = np.arange(pos, pos + k)
            for r0, c0, blk in (
                (new, ld.iface_orbs, ld.v_block),
                (ld.iface_orbs, new, ld.vdag_out),
                (new, new, ld.lead_mat),
            ):
                r, c, d = _block_coo(r0, c0, blk)
                rows.append(r)
                cols.append(c)
                data.append(d.astype(complex))
            pos += k
        self.layout = TerminalLayout(n, pos, tuple(var_start), tuple(nprop), tuple(probe_orbs))
        self.rows = np.asfortranarray(np.concatenate(rows).astype(_mumps.int_dtype) + 1)
        self.cols = np.asfortranarray(np.concatenate(cols).astype(_mumps.int_dtype) + 1)
        self.data = np.asfortranarray(np.concatenate(data))
        self._dep = model.dep  # field-dependent entries sit at the start, same positions
        self._dep_base = model.base[model.dep].copy()
        self._coef = model.coef
        self.value = 0.0

    def set_field(self, value: float) -> None:
        """Rewrite the field-dependent entries in place for field ``value``."""
        self.data[self._dep] = self._dep_base * np.exp(1j * float(value) * self._coef)
        self.value = float(value)

    # right-hand sides and outputs -------------------------------------------------------
    def terminal_vars(self) -> np.ndarray:
        """Variables carrying every right-hand side and every output (Schur set)."""
        parts = [ld.iface_orbs for ld in self.leads]
        parts += [
            np.arange(s, s + ld.lead_mat.shape[0])
            for s, ld in zip(self.layout.var_start, self.leads, strict=True)
        ]
        parts += list(self.layout.probe_orbs)
        allv = np.concatenate(parts) if parts else np.zeros(0, np.int64)
        uniq, first = np.unique(allv, return_index=True)
        return uniq[np.argsort(first)]

    def lead_rhs(self, lead: int, index_of: np.ndarray | None = None, nrow: int | None = None):
        """Dense right-hand side of ``lead`` (rows: all variables, or ``index_of`` positions
        in a vector of length ``nrow``)."""
        ld = self.leads[lead]
        s = self.layout.var_start[lead]
        k = ld.lead_mat.shape[0]
        if nrow is None:
            nrow = self.layout.n_total
        b = np.zeros((nrow, ld.nprop), dtype=complex)
        rows_if = ld.iface_orbs if index_of is None else index_of[ld.iface_orbs]
        rows_v = np.arange(s, s + k) if index_of is None else index_of[s : s + k]
        np.add.at(b, rows_if, ld.rhs_iface)
        b[rows_v] += ld.rhs_vars
        return b

    def out_vars(self, lead: int) -> np.ndarray:
        s = self.layout.var_start[lead]
        return np.arange(s, s + self.leads[lead].nprop)


NULL_PIVOT_THRESHOLD = 1e-9
"""Absolute pivot size (energies in the system's unit, ~t) below which MUMPS reports a null
pivot during the Schur elimination (ICNTL(24) = 1, CNTL(3))."""


class MumpsKernel:
    """MUMPS on a :class:`PatternSystem` with the symbolic analysis done once.

    Parameters
    ----------
    system : PatternSystem
    method : {"schur", "lu"}
    ordering : str
        MUMPS fill-reducing ordering; AMD gives half the LU fill of SCOTCH on quasi-1D rings
        (docs/engine.md §2.2).
    schur_vars : ndarray, optional
        Variables of the Schur complement (``method="schur"``).
    """

    def __init__(
        self,
        system: PatternSystem,
        method: str = "schur",
        ordering: str = "amd",
        schur_vars: np.ndarray | None = None,
    ):
        if method not in ("schur", "lu"):
            raise ParameterError("method", method, "must be 'schur' or 'lu'")
        if ordering not in _ORDERINGS:
            raise ParameterError("ordering", ordering, f"must be one of {sorted(_ORDERINGS)}")
        self.system = system
        self.method = method
        inst = _mumps.zmumps(False)
        n = system.layout.n_total
        inst.set_assembled_matrix(n, system.rows, system.cols, system.data)
        inst.icntl[7] = _ORDERINGS[ordering]
        # no row/column scaling: the entries are all O(t) here, and the default (77: scaling
        # chosen and computed at every numeric factorization) costs ~10 % per field point for
        # no measurable gain (agreement with kwant stays ~1e-13)
        inst.icntl[8] = 0
        if method == "schur":
            if schur_vars is None:
                schur_vars = system.terminal_vars()
            self.schur_vars = np.asarray(schur_vars, dtype=np.int64)
            self._schur_idx = np.asfortranarray(self.schur_vars.astype(_mumps.int_dtype) + 1)
            m = len(self.schur_vars)
            self.schur = np.zeros((m, m), order="C", dtype=complex)
            inst.icntl[19] = 1  # centralized Schur complement
            inst.icntl[31] = 1  # the factors themselves are not needed: discard them
            # Null-pivot detection: when the energy sits exactly on an eigenvalue of the closed
            # interior, the elimination onto the terminal variables is singular and MUMPS would
            # return a Schur complement that is wrong by O(1e-3) while still conserving current
            # (found with a side-coupled loop). Detected pivots (INFOG(28) > 0) make the caller
            # fall back to a pivoting LU of the full system.
            inst.icntl[24] = 1
            inst.cntl[3] = NULL_PIVOT_THRESHOLD
            inst.set_schur(self.schur, self._schur_idx)
        inst.job = 1
        inst.call()
        self._check(inst)
        self.inst = inst
        self.n_factorizations = 0
        self.null_pivots = 0

    @staticmethod
    def _check(inst) -> None:
        if inst.infog[1] < 0:
            raise RuntimeError(f"MUMPS failed with error {inst.infog[1]} (info2={inst.infog[2]})")

    def factor(self) -> None:
        """Numeric factorization (or Schur complement) of the current matrix values."""
        inst = self.inst
        inst.job = 2
        while True:
            inst.call()
            if inst.infog[1] in (-8, -9):  # workspace too small: enlarge and retry
                inst.icntl[14] = max(2 * inst.icntl[14], 40)
                continue
            break
        self.n_factorizations += 1
        if self.method == "schur" and inst.infog[1] == -10:
            # numerically singular elimination (null pivots): the caller falls back to LU
            self.null_pivots = max(1, int(inst.infog[28]))
            return
        if inst.infog[1] == -10:
            raise SingularSystemError("MUMPS: the scattering system is numerically singular")
        self._check(inst)
        self.null_pivots = int(inst.infog[28]) if self.method == "schur" else 0

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """Solve with the LU factors (``method="lu"``); ``rhs`` has all variables as rows."""
        b = np.asfortranarray(rhs, dtype=complex).copy(order="F")
        if b.ndim == 2 and b.shape[1] == 0:  # no open channel: nothing to solve (MUMPS -45)
            return b
        self.inst.set_dense_rhs(b)
        self.inst.job = 3
        self.inst.call()
        self._check(self.inst)
        return b
