"""Exact single-channel two-lead ring as a scattering network (numpy only).

A one-dimensional ring is two three-way junctions joined by two arms. Each junction has the
Büttiker-Imry-Azbel S-matrix (coupling ``epsilon`` = probability lead -> each arm); along an
arm the wave picks up the dynamic phase ``k L_j`` and the Aharonov-Bohm phase; optionally a
scatterer in the middle of an arm backscatters with probability ``R_j`` (a stand-in for disorder
or a pinched-off arm). The amplitudes entering the two junctions from the arms (4 unknowns) are
found by solving the 4x4 linear system of the network numerically, vectorised over any
broadcastable set of parameters. This is the quick-preview model of the device explorer.

Public API
----------
junction_smatrix(coupling)
    3x3 junction S-matrix (channel 0 = lead, 1 and 2 = arms).
ring_scattering(k_L1, k_L2, ab_phase, coupling, *, arm_reflection=(0, 0))
    Complex transmission and reflection amplitudes ``(t, r)``.
ring_transmission(k_L1, k_L2, ab_phase, coupling, *, arm_reflection=(0, 0))
    Transmission probability ``|t|^2``.
classical_transmission(coupling, *, arm_reflection=(0, 0))
    Fully phase-randomised (incoherent) network transmission.
coherent_fraction(path_length, l_phi)
    ``exp(-L/L_phi)``.
thermal_weights(energies, mu, temperature)
    Normalised ``-df/dE`` weights on a uniform grid (kept for comparisons; the ring itself
    uses the thermal policy of :mod:`ringkit.thermal_policy`).
NetworkRing
    Frozen dataclass: a physical ring (SI) -> ``conductance(field)`` in e^2/h with thermal
    energy averaging, a coherent fraction, an arm gate and arm-length asymmetry.

Conventions
-----------
The AB phase ``phi = 2 pi Phi/(h/e)`` is attached to arm 1 (``+phi`` from junction 1 to junction
2, ``-phi`` back); ``|t|^2`` does not depend on this gauge choice. Lead 1 enters at junction 1.

References
----------
M. Büttiker, Y. Imry, M. Ya. Azbel, Phys. Rev. A 30, 1982 (1984) (junction S-matrix);
Y. Gefen, Y. Imry, M. Ya. Azbel, Phys. Rev. Lett. 52, 129 (1984) (two-lead ring).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ringkit._validation import ParameterError, check_positive, check_range
from ringkit.thermal_policy import DEFAULT_TOL, EnergyAverage, energy_average
from ringkit.units import HBAR, K_B, M_E, PHI0

__all__ = [
    "junction_smatrix",
    "ring_scattering",
    "ring_transmission",
    "classical_transmission",
    "coherent_fraction",
    "thermal_weights",
    "NetworkRing",
]


def _junction_ab(coupling: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    eps = np.asarray(coupling, dtype=float)
    if np.any(~np.isfinite(eps)) or np.any(eps < 0) or np.any(eps > 0.5):
        raise ParameterError("coupling", coupling, "must lie in [0, 0.5]")
    root = np.sqrt(1.0 - 2.0 * eps)
    return eps, (root - 1.0) / 2.0, (root + 1.0) / 2.0


def junction_smatrix(coupling: float) -> np.ndarray:
    """Büttiker-Imry-Azbel three-way junction S-matrix.

    Parameters
    ----------
    coupling : float
        ``epsilon`` in [0, 1/2], probability for a wave from the lead to enter each arm.

    Returns
    -------
    ndarray, shape (3, 3)
        Real symmetric unitary matrix; index 0 = lead, 1 and 2 = arms.
    """
    eps, a, b = (float(x) for x in _junction_ab(np.asarray(coupling)))
    s = math.sqrt(eps)
    return np.array([[-(a + b), s, s], [s, a, b], [s, b, a]])


def _arm_amplitudes(reflection: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    r_prob = np.asarray(reflection, dtype=float)
    if np.any(~np.isfinite(r_prob)) or np.any(r_prob < 0) or np.any(r_prob > 1):
        raise ParameterError("arm_reflection", reflection, "must lie in [0, 1]")
    # symmetric scatterer [[rho, tau], [tau, rho]] with tau real, rho imaginary: unitary
    return np.sqrt(1.0 - r_prob), 1j * np.sqrt(r_prob)


def ring_scattering(
    k_L1: np.ndarray | float,
    k_L2: np.ndarray | float,
    ab_phase: np.ndarray | float,
    coupling: np.ndarray | float,
    *,
    arm_reflection: tuple[np.ndarray | float, np.ndarray | float] = (0.0, 0.0),
) -> tuple[np.ndarray, np.ndarray]:
    """Transmission and reflection amplitudes of the two-lead ring (numerical 4x4 solve).

    All arguments broadcast against each other.

    Parameters
    ----------
    k_L1, k_L2 : array_like
        Dynamic phase ``k L_j`` of arm 1 and arm 2 (rad); an arm gate simply changes it.
    ab_phase : array_like
        Aharonov-Bohm phase ``2 pi Phi/(h/e)`` around the ring (rad).
    coupling : array_like
        Junction coupling ``epsilon`` in [0, 1/2].
    arm_reflection : pair of array_like, optional
        Backscattering probability ``R_j`` in [0, 1] of a scatterer in the middle of each arm
        (0 = ideal arm, 1 = arm pinched off).

    Returns
    -------
    t, r : ndarray (complex)
        Amplitudes for a wave coming from lead 1: into lead 2, and back into lead 1.
        ``|t|^2 + |r|^2 = 1``.
    """
    eps, a, b = _junction_ab(np.asarray(coupling))
    tau1, rho1 = _arm_amplitudes(arm_reflection[0])
    tau2, rho2 = _arm_amplitudes(arm_reflection[1])
    th1 = np.asarray(k_L1, dtype=float)
    th2 = np.asarray(k_L2, dtype=float)
    phi = np.asarray(ab_phase, dtype=float)
    shape = np.broadcast_shapes(eps.shape, tau1.shape, tau2.shape, th1.shape, th2.shape, phi.shape)
    e1, e2 = np.exp(1j * th1), np.exp(1j * th2)
    # arm two-ports: forward (junction 1 -> 2), backward, reflection back to either junction
    fw = (tau1 * e1 * np.exp(1j * phi), tau2 * e2)
    bw = (tau1 * e1 * np.exp(-1j * phi), tau2 * e2)
    rf = (rho1 * e1, rho2 * e2)
    s = np.sqrt(eps)
    # unknowns x = (c1, c2, d1, d2): amplitudes arriving at junction 1 (c) and 2 (d) from arm j.
    # outgoing into arm j: at junction 1  o_j = s + sum_m S[j,m] c_m ; at junction 2 p_j = sum S d
    # arm relations: d_j = fw_j o_j + rf_j p_j ;  c_j = bw_j p_j + rf_j o_j
    # i.e. the 4x4 system [[A, B], [C, A]] (c, d) = (rf s, fw s) with 2x2 blocks
    # A = 1 - diag(rf) S, B = -diag(bw) S, C = -diag(fw) S, S = [[a, b], [b, a]].
    x = _solve_network(fw, bw, rf, s, a, b, shape)
    t = s * (x[..., 2] + x[..., 3])
    r = -(a + b) + s * (x[..., 0] + x[..., 1])
    return t, r


def _mul(p: tuple, q: tuple) -> tuple:
    """Product of 2x2 matrices (or matrix x vector) stored as nested tuples of arrays."""
    if isinstance(q[0], tuple):
        return tuple(
            tuple(p[i][0] * q[0][k] + p[i][1] * q[1][k] for k in range(2)) for i in range(2)
        )
    return tuple(p[i][0] * q[0] + p[i][1] * q[1] for i in range(2))


def _inv(m: tuple) -> tuple[tuple, np.ndarray]:
    det = m[0][0] * m[1][1] - m[0][1] * m[1][0]
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = ((m[1][1] / det, -m[0][1] / det), (-m[1][0] / det, m[0][0] / det))
    return inv, det


def _solve_network(fw, bw, rf, s, a, b, shape) -> np.ndarray:
    """Solve the 4x4 network system for every element (vectorised block elimination).

    Gaussian elimination by 2x2 blocks (Schur complement of the junction-1 block), written
    out elementwise so that numpy works on whole arrays (5-10x faster than a batched
    ``numpy.linalg.solve`` of 4x4 matrices). Elements whose pivot blocks are nearly
    singular (|det| < 1e-9, e.g. two pinched arms) are re-solved with ``numpy.linalg.solve``.
    Returns x with shape ``shape + (4,)``.
    """
    s_arm = ((a, b), (b, a))
    blk_a = tuple(tuple((1.0 if j == m else 0.0) - rf[j] * s_arm[j][m] for m in range(2))
                  for j in range(2))  # fmt: skip
    blk_b = tuple(tuple(-bw[j] * s_arm[j][m] for m in range(2)) for j in range(2))
    blk_c = tuple(tuple(-fw[j] * s_arm[j][m] for m in range(2)) for j in range(2))
    r1 = (rf[0] * s, rf[1] * s)
    r2 = (fw[0] * s, fw[1] * s)
    a_inv, det_a = _inv(blk_a)
    xb = _mul(a_inv, blk_b)
    y = _mul(a_inv, r1)
    cx = _mul(blk_c, xb)
    m = tuple(tuple(blk_a[j][k] - cx[j][k] for k in range(2)) for j in range(2))
    cy = _mul(blk_c, y)
    z = (r2[0] - cy[0], r2[1] - cy[1])
    m_inv, det_m = _inv(m)
    d = _mul(m_inv, z)
    xd = _mul(xb, d)
    c = (y[0] - xd[0], y[1] - xd[1])
    x = np.stack([np.broadcast_to(v, shape) for v in (*c, *d)], axis=-1).astype(complex)
    bad = np.broadcast_to((np.abs(det_a) < 1e-9) | (np.abs(det_m) < 1e-9), shape)
    if np.any(bad):
        full = np.zeros((*shape, 4, 4), dtype=complex)
        rhs = np.zeros((*shape, 4), dtype=complex)
        for j in range(2):
            for k in range(2):
                full[..., j, k] = blk_a[j][k]
                full[..., j, 2 + k] = blk_b[j][k]
                full[..., 2 + j, k] = blk_c[j][k]
                full[..., 2 + j, 2 + k] = blk_a[j][k]
            rhs[..., j] = r1[j]
            rhs[..., 2 + j] = r2[j]
        x[bad] = np.linalg.solve(full[bad], rhs[bad][..., None])[..., 0]
    return x


def ring_transmission(
    k_L1: np.ndarray | float,
    k_L2: np.ndarray | float,
    ab_phase: np.ndarray | float,
    coupling: np.ndarray | float,
    *,
    arm_reflection: tuple[np.ndarray | float, np.ndarray | float] = (0.0, 0.0),
) -> np.ndarray:
    """Transmission probability ``|t|^2`` of the two-lead ring (see :func:`ring_scattering`)."""
    t, _ = ring_scattering(k_L1, k_L2, ab_phase, coupling, arm_reflection=arm_reflection)
    return np.abs(t) ** 2


def classical_transmission(
    coupling: float, *, arm_reflection: tuple[float, float] = (0.0, 0.0)
) -> float:
    """Transmission of the same network with all phases randomised (probabilities add).

    Parameters
    ----------
    coupling : float
        Junction coupling ``epsilon`` in [0, 1/2].
    arm_reflection : (float, float)
        Backscattering probability of each arm.

    Returns
    -------
    float
        Incoherent (classical) lead-to-lead transmission; for ideal arms ``2 eps/(2 - eps)``.
    """
    eps, a, b = (float(x) for x in _junction_ab(np.asarray(coupling)))
    if eps == 0.0:
        return 0.0
    p_arm = ((a * a, b * b), (b * b, a * a))
    rp = [check_range("arm_reflection", r, 0.0, 1.0) for r in arm_reflection]
    tp = [1.0 - x for x in rp]
    mat = np.eye(4)
    rhs = np.zeros(4)
    for j in range(2):
        for m in range(2):
            mat[j, m] -= rp[j] * p_arm[j][m]
            mat[j, 2 + m] -= tp[j] * p_arm[j][m]
            mat[2 + j, m] -= tp[j] * p_arm[j][m]
            mat[2 + j, 2 + m] -= rp[j] * p_arm[j][m]
        rhs[j] = rp[j] * eps
        rhs[2 + j] = tp[j] * eps
    x = np.linalg.solve(mat, rhs)
    return float(eps * (x[2] + x[3]))


def coherent_fraction(path_length: float, l_phi: float | None) -> float:
    """Coherent fraction ``exp(-L/L_phi)`` of a path of length L (m); 1 for ``L_phi=None``."""
    if l_phi is None or math.isinf(l_phi):
        return 1.0
    l_phi = check_positive("l_phi", l_phi, "m")
    return math.exp(-check_positive("path_length", path_length, "m") / l_phi)


def thermal_weights(energies: np.ndarray, mu: float, temperature: float) -> np.ndarray:
    """Quadrature weights ``-df/dE * dE`` on a uniform grid, normalised to sum 1.

    Parameters
    ----------
    energies : ndarray
        Uniform energy grid in J.
    mu : float
        Chemical potential in J.
    temperature : float
        Temperature in K (> 0).
    """
    kt = K_B * check_positive("temperature", temperature, "K")
    x = (np.asarray(energies, dtype=float) - mu) / (2.0 * kt)
    w = 1.0 / np.cosh(np.clip(x, -350, 350)) ** 2
    return w / w.sum()


@dataclass(frozen=True)
class NetworkRing:
    """A single-channel ring with physical (SI) parameters, solved with the exact network.

    Parameters
    ----------
    radius : float
        Mean radius in m (enclosed area ``pi radius^2``).
    effective_mass : float
        Effective mass in units of m_e.
    fermi_energy : float
        Fermi energy in J above the band bottom.
    arm_fraction : float
        Length of arm 1 (upper) as a fraction of the circumference, in (0, 1); 0.5 = symmetric.
        Leads at angles ``alpha_l, alpha_r`` give ``((alpha_l - alpha_r) mod 2 pi)/(2 pi)``.
    coupling : float
        Junction coupling ``epsilon`` in (0, 1/2].
    gate_potential : float
        Potential energy in J added in the gated arm (shifts its wavevector); an arm with
        ``E <= gate_potential`` is pinched off (reflection 1).
    gate_arm : {"upper", "lower"}
    mean_free_path : float or None
        Elastic mean free path in m; each arm gets one mid-arm scatterer with backscattering
        probability ``L_j/(L_j + l)`` (1D Ohmic addition, common practice). None = ballistic.
    temperature : float
        Temperature in K; > 0 averages over energy with ``-df/dE``.
    l_phi : float or None
        L_phi in m; the result is ``f G_coherent + (1 - f) G_classical`` with the coherent
        fraction ``f = exp(-(circumference/2)/L_phi)`` (h/e path, common practice; this mixing
        damps h/2e like h/e, a simplification of the preview).
    spin_degeneracy : int
        1 or 2; conductance = ``spin_degeneracy * T`` in e^2/h.
    """

    radius: float
    effective_mass: float
    fermi_energy: float
    arm_fraction: float = 0.5
    coupling: float = 0.5
    gate_potential: float = 0.0
    gate_arm: str = "upper"
    mean_free_path: float | None = None
    temperature: float = 0.0
    l_phi: float | None = None
    spin_degeneracy: int = 2

    def __post_init__(self) -> None:
        check_positive("radius", self.radius, "m")
        check_positive("effective_mass", self.effective_mass, "m_e")
        check_positive("fermi_energy", self.fermi_energy, "J")
        check_range("arm_fraction", self.arm_fraction, 0.0, 1.0, inclusive=(False, False))
        check_range("coupling", self.coupling, 0.0, 0.5, inclusive=(False, True))
        check_range("gate_potential", self.gate_potential, unit="J")
        if self.gate_arm not in ("upper", "lower"):
            raise ParameterError("gate_arm", self.gate_arm, "must be one of 'upper', 'lower'")
        if self.mean_free_path is not None:
            check_positive("mean_free_path", self.mean_free_path, "m")
        check_positive("temperature", self.temperature, "K", allow_zero=True)
        if self.l_phi is not None:
            check_positive("l_phi", self.l_phi, "m")
        if self.spin_degeneracy not in (1, 2):
            raise ParameterError("spin_degeneracy", self.spin_degeneracy, "must be 1 or 2")

    @classmethod
    def from_lead_angles(
        cls, radius: float, lead_angles: tuple[float, float], **kwargs: object
    ) -> NetworkRing:
        """Ring whose leads sit at ``lead_angles = (left, right)`` (rad); arm 1 is the upper
        arm, running counter-clockwise from the right lead to the left lead."""
        frac = ((lead_angles[0] - lead_angles[1]) % (2 * math.pi)) / (2 * math.pi)
        return cls(radius, arm_fraction=frac, **kwargs)  # type: ignore[arg-type]

    @property
    def circumference(self) -> float:
        """Ring circumference in m."""
        return 2 * math.pi * self.radius

    @property
    def arm_lengths(self) -> tuple[float, float]:
        """Lengths (upper, lower) of the two arms in m."""
        c = self.circumference
        return c * self.arm_fraction, c * (1.0 - self.arm_fraction)

    @property
    def area(self) -> float:
        """Enclosed area ``pi radius^2`` in m^2."""
        return math.pi * self.radius**2

    @property
    def fermi_wavevector(self) -> float:
        """k_F in 1/m."""
        return math.sqrt(2 * self.effective_mass * M_E * self.fermi_energy) / HBAR

    @property
    def coherent_fraction(self) -> float:
        """Weight ``f`` of the coherent network result (see class docstring)."""
        return coherent_fraction(self.circumference / 2, self.l_phi)

    def _wavevector(self, energy: np.ndarray) -> np.ndarray:
        return np.sqrt(2 * self.effective_mass * M_E * np.maximum(energy, 0.0)) / HBAR

    def _arm_setup(self, energy: np.ndarray) -> tuple[np.ndarray, np.ndarray, tuple]:
        l1, l2 = self.arm_lengths
        k = self._wavevector(energy)
        gated_e = energy - self.gate_potential
        kg = self._wavevector(gated_e)
        pinched = gated_e <= 0.0
        refl = [0.0, 0.0]
        if self.mean_free_path is not None:
            refl = [lj / (lj + self.mean_free_path) for lj in (l1, l2)]
        g = 0 if self.gate_arm == "upper" else 1
        th = [k * l1, k * l2]
        th[g] = kg * (l1, l2)[g]
        r_arms: list[np.ndarray | float] = list(refl)
        r_arms[g] = np.where(pinched, 1.0, refl[g])
        return th[0], th[1], (r_arms[0], r_arms[1])

    def transmission(self, field: np.ndarray | float, energy: np.ndarray | float) -> np.ndarray:
        """Coherent transmission for fields (T) x energies (J), broadcast as given."""
        energy = np.asarray(energy, dtype=float)
        th1, th2, refl = self._arm_setup(energy)
        phi = 2 * math.pi * np.asarray(field, dtype=float) * self.area / PHI0
        return ring_transmission(th1, th2, phi, self.coupling, arm_reflection=refl)

    def conductance(
        self,
        field: np.ndarray,
        *,
        max_energy_points: int | None = None,
        tol: float = DEFAULT_TOL,
    ) -> np.ndarray:
        """Two-terminal conductance G(B) in e^2/h, thermally averaged, with dephasing mixing.

        Parameters
        ----------
        field : array_like
            Magnetic field values in T.
        max_energy_points : int, optional
            Energy budget of the thermal average (default 4000); when it is not enough for
            ``tol`` a :class:`ringkit.thermal_policy.ThermalToleranceWarning` is issued.
        tol : float
            Absolute error goal of G in e^2/h at every field (default 1e-4), by the thermal
            policy of :mod:`ringkit.thermal_policy` (the same rule as the lattice engine).

        Returns
        -------
        ndarray
            ``spin_degeneracy * [f <T>_E + (1 - f) T_classical]`` with the same shape as field.
        """
        b = np.asarray(field, dtype=float)
        avg = self.thermal_average(b, max_energy_points=max_energy_points, tol=tol)
        trans = avg.value.reshape(b.shape)
        f = self.coherent_fraction
        if f < 1.0:
            trans = f * trans + (1.0 - f) * self._classical_average(avg)
        return self.spin_degeneracy * trans

    def thermal_average(
        self, field: np.ndarray, *, max_energy_points: int | None = None, tol: float = DEFAULT_TOL
    ) -> EnergyAverage:
        """Thermal average of the coherent transmission ``|t|^2`` over ``field`` (T).

        ``value`` has the shape of ``field.ravel()``; ``errors``, ``n_energies`` and
        ``energies`` (J) as in :func:`ringkit.thermal_policy.energy_average` (tolerance
        ``tol / spin_degeneracy`` on the transmission).
        """
        b = np.asarray(field, dtype=float).ravel()

        def trans(energies: np.ndarray) -> np.ndarray:
            return self.transmission(b[None, :], np.asarray(energies)[:, None])

        return energy_average(
            trans,
            self.fermi_energy,
            K_B * self.temperature,
            tol=tol / self.spin_degeneracy,
            bound=1.0,
            batched=True,
            max_energies=4000 if max_energy_points is None else int(max_energy_points),
        )

    def _classical_average(self, avg: EnergyAverage) -> float:
        """Incoherent transmission averaged with the weights of the coherent average."""
        energies = avg.energies
        _, _, refl = self._arm_setup(energies)
        pairs = np.stack([np.broadcast_to(np.asarray(x, float), energies.shape) for x in refl])
        uniq, inverse = np.unique(pairs, axis=1, return_inverse=True)
        vals = np.array(
            [classical_transmission(self.coupling, arm_reflection=tuple(u)) for u in uniq.T]
        )[np.ravel(inverse)]
        return float(vals @ avg.weights)
