"""The four spin–valley levels of a graphene, bilayer-graphene or silicon dot.

Pure functions of a dot's parameters and the static field; no device file,
no waveforms.  Energies are frequencies E/h in Hz.

Basis and signs (docs/device.md, "Spin–valley dots"): |τ, s⟩ with the valley
τ = +1 (K) or −1 (K′) as the more significant factor and the spin s = +1 (↑)
or −1 (↓) along the sample normal z, in the order |K↑⟩, |K↓⟩, |K′↑⟩, |K′↓⟩.
The static field B lies in the x–z plane at the angle ``tilt`` from the
sample plane (x in-plane, z out of plane).  With Pauli matrices s (spin) and
τ (valley):

    H = ½Δ_SO·τz·sz + ½g_s·μB·B·s + ½g_v·μB·B⊥·τz + ½Δ_KK′·τx

(Kane–Mele spin–orbit gap Δ_SO, spin g-factor g_s, valley g-factor g_v,
B⊥ = B·sin(tilt), valley mixing Δ_KK′: Knothe & Fal'ko, PRB 101, 235423
(2020); Banszerus et al., PRL 124, 177701 (2020); Kurzmann et al., PRL 123,
026803 (2019); Trauzettel, Bulaev, Loss & Burkard, Nat. Phys. 3, 192 (2007)
for K–K′ mixing in graphene dots; in silicon Δ_KK′ is the valley splitting
E_v and the Δ_SO·τz·sz term the spin–valley coupling that mixes |v−,↑⟩ and
|v+,↓⟩ at E_Z = E_v: Yang et al., Nat. Commun. 4, 2069 (2013)).

The qubit is a pair of eigenlevels: by default the ground level and the
lowest level the spin operator connects to it (a spin flip: at least half as
strongly as the best connected level, so that a weak connection through
spin–valley mixing does not count).  Without valley
mixing τz commutes with H, so each valley is diagonalised on its own and a
valley-degenerate pair keeps pure valley eigenvectors (K before K′ at equal
energy).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..physics import H as PLANCK, MU_B

LEVELS = 4
_S = (np.array([[0, 1], [1, 0]], dtype=complex), np.array([[0, -1j], [1j, 0]], dtype=complex),
      np.diag([1.0, -1.0]).astype(complex))
_I2 = np.eye(2, dtype=complex)
# spin and valley Pauli operators on the four-level space, kron(valley, spin)
SPIN = tuple(np.kron(_I2, s) for s in _S)
VALLEY = tuple(np.kron(s, _I2) for s in _S)
BASIS_NAMES = ("K↑", "K↓", "K′↑", "K′↓")

DEGENERATE_RATIO = 1e-3     # a level within this fraction of f_q of a qubit level: warn
CONNECT_TOL = 1e-6          # |⟨j|σ|0⟩|² below this: the spin operator does not connect them
HOTSPOT_WINDOW = 0.2        # |B − B_hotspot| below this fraction of B_hotspot: warn


def hamiltonian(spin_orbit: float, valley_splitting: float, g_s: float, g_v: float,
                field: float, tilt: float) -> np.ndarray:
    """The 4×4 Hamiltonian (Hz) in the basis |K↑⟩, |K↓⟩, |K′↑⟩, |K′↓⟩.

    spin_orbit, valley_splitting : Hz (Δ_SO/h, Δ_KK′/h)
    g_s, g_v : spin and valley g-factors
    field : T, magnitude; tilt : rad from the sample plane."""
    zs = g_s * MU_B * field / PLANCK
    zv = g_v * MU_B * field * math.sin(tilt) / PLANCK
    bx, bz = math.cos(tilt), math.sin(tilt)
    return (0.5 * spin_orbit * VALLEY[2] @ SPIN[2]
            + 0.5 * zs * (bx * SPIN[0] + bz * SPIN[2])
            + 0.5 * zv * VALLEY[2]
            + 0.5 * valley_splitting * VALLEY[0])


def _eigen(Hm: np.ndarray, mixed: bool) -> tuple[np.ndarray, np.ndarray]:
    if mixed:
        e, v = np.linalg.eigh(Hm)
        return e, v
    es, vs = [], []
    for blk in (slice(0, 2), slice(2, 4)):              # K, then K′
        e, v = np.linalg.eigh(Hm[blk, blk])
        full = np.zeros((4, 2), dtype=complex)
        full[blk] = v
        es.append(e)
        vs.append(full)
    e = np.concatenate(es)
    v = np.concatenate(vs, axis=1)
    scale = max(np.abs(e).max(), 1.0)
    order = sorted(range(4), key=lambda i: (round(e[i] / scale, 12), i))
    return e[order], v[:, order]


def default_direction(tilt: float) -> tuple[float, float, float]:
    """The drive field's default direction: in the sample plane and
    perpendicular to the static field (y), for every tilt."""
    return (0.0, 1.0, 0.0)


@dataclass(frozen=True, eq=False)
class Ladder:
    """The levels of one spin–valley dot and its qubit.

    energies : Hz, ascending, relative to the ground level
    vectors : columns are the eigenvectors in the basis |K↑⟩ … |K′↓⟩
    qubit : (lower, upper) level indices of the qubit
    drive : σ·n̂ of the drive direction in the eigenbasis (4×4)
    """
    energies: tuple[float, ...]
    vectors: np.ndarray
    qubit: tuple[int, int]
    drive: np.ndarray
    degenerate: tuple[int, ...]      # levels (nearly) degenerate with a qubit level
    zeeman: float                    # Hz, |g_s|·μB·B/h
    hotspot_field: float             # T where E_Z = Δ_KK′ (inf without valley splitting)

    @property
    def larmor(self) -> float:
        """The qubit transition (Hz)."""
        return self.energies[self.qubit[1]] - self.energies[self.qubit[0]]

    @property
    def element(self) -> float:
        """|⟨upper|σ·n̂|lower⟩|: 1 for a bare spin driven perpendicular to B."""
        a, b = self.qubit
        return float(abs(self.drive[b, a]))

    def spin(self, axis: int) -> np.ndarray:
        """σ_axis (0, 1, 2 = x, y, z) on the spin, identity on the valley, in
        the eigenbasis."""
        return self.vectors.conj().T @ SPIN[axis] @ self.vectors

    def valley(self, axis: int) -> np.ndarray:
        return self.vectors.conj().T @ VALLEY[axis] @ self.vectors

    def leakage(self) -> list[tuple[int, int, float, float]]:
        """Transitions out of the qubit pair that the drive connects:
        (qubit level, other level, frequency Hz (signed, E_other − E_qubit),
        |matrix element|), nearest to the qubit frequency first."""
        out = []
        for a in self.qubit:
            for b in range(len(self.energies)):
                if b in self.qubit:
                    continue
                el = float(abs(self.drive[b, a]))
                if el ** 2 > CONNECT_TOL:
                    out.append((a, b, self.energies[b] - self.energies[a], el))
        out.sort(key=lambda t: abs(abs(t[2]) - self.larmor))
        return out

    @property
    def leakage_gap(self) -> float:
        """Hz between the qubit transition and the nearest transition out of
        the qubit pair that the drive connects (inf if none)."""
        lk = self.leakage()
        return abs(abs(lk[0][2]) - self.larmor) if lk else math.inf


def ladder(spin_orbit: float, valley_splitting: float, g_s: float, g_v: float, field: float,
           tilt: float, direction: tuple[float, float, float] | None = None,
           qubit: tuple[int, int] | None = None) -> Ladder:
    """Levels, eigenvectors and qubit of a spin–valley dot (module notes)."""
    Hm = hamiltonian(spin_orbit, valley_splitting, g_s, g_v, field, tilt)
    e, v = _eigen(Hm, valley_splitting != 0.0)
    e = e - e[0]
    n = np.asarray(direction if direction is not None else default_direction(tilt), dtype=float)
    n = n / np.linalg.norm(n)
    d = v.conj().T @ sum(c * s for c, s in zip(n, SPIN)) @ v
    if qubit is None:
        # the lowest level the spin operator connects to the ground level at least half
        # as strongly as the best connected one (a weak connection through spin–valley
        # mixing does not make a spin flip)
        conn = [sum(abs((v[:, j].conj() @ s @ v[:, 0])) ** 2 for s in SPIN) for j in range(LEVELS)]
        best = max(conn[1:])
        upper = next((j for j in range(1, LEVELS) if conn[j] > CONNECT_TOL
                      and conn[j] >= 0.5 * best), 1)
        qubit = (0, upper)
    f_q = e[qubit[1]] - e[qubit[0]]
    tol = DEGENERATE_RATIO * max(abs(f_q), 1.0)
    degenerate = tuple(b for b in range(LEVELS) if b not in qubit
                       and min(abs(e[b] - e[a]) for a in qubit) < tol)
    zeeman = abs(g_s) * MU_B * field / PLANCK
    hot = (abs(valley_splitting) * PLANCK / (abs(g_s) * MU_B)
           if valley_splitting and g_s else math.inf)
    return Ladder(tuple(float(x) for x in e), v, tuple(qubit), d, degenerate, zeeman, hot)


def near_hotspot(lad: Ladder, field: float) -> bool:
    """The operating field within ±HOTSPOT_WINDOW of the field where the
    Zeeman energy equals the valley splitting (Yang et al. 2013)."""
    return math.isfinite(lad.hotspot_field) and \
        abs(field - lad.hotspot_field) < HOTSPOT_WINDOW * lad.hotspot_field


def qubit_basis(lad: Ladder) -> tuple[tuple[int, ...], np.ndarray, tuple[float, ...]]:
    """The simulation's basis of a spin–valley dot: level order (qubit upper,
    qubit lower, then the other levels from below), the eigenvectors in that
    order with the upper qubit vector rephased so that ⟨upper|σ·n̂|lower⟩ is
    real and ≥ 0 (the drive then turns about x at phase 0, as for a spin-1/2
    whose index 0 is spin up), and the energies (Hz from the ground level)."""
    lo, hi = lad.qubit
    order = (hi, lo) + tuple(i for i in range(LEVELS) if i not in lad.qubit)
    v = lad.vectors[:, order].copy()
    el = lad.drive[hi, lo]
    if abs(el) > 0:
        v[:, 0] *= el / abs(el)
    return order, v, tuple(lad.energies[i] for i in order)


def relaxation_rates(lad: Ladder, t1: float, valley_t1: float, temperature: float
                     ) -> list[tuple[int, int, float]]:
    """Transition rates (from, to, 1/s) between the levels in the order of
    :func:`qubit_basis`: downward Γ = (1/T1)·½Σ_a|⟨j|σ_a|i⟩|² + (1/T1_v)·½Σ_a|⟨j|τ_a|i⟩|²
    (a spin flip between pure spin states relaxes at 1/T1, a valley flip at
    1/T1_v; a level that mixes spin and valley, as at the hotspot E_Z = E_v,
    relaxes through both: Yang et al., Nat. Commun. 4, 2069 (2013)), upward
    Γ·e^{−hf/k_BT} (detailed balance)."""
    from ..physics import K_B
    order, v, e = qubit_basis(lad)
    sp = [v.conj().T @ s @ v for s in SPIN]
    va = [v.conj().T @ s @ v for s in VALLEY]
    out = []
    for i in range(LEVELS):
        for j in range(LEVELS):
            if e[i] <= e[j]:
                continue
            down = (0.5 * sum(abs(s[j, i]) ** 2 for s in sp) / t1
                    + 0.5 * sum(abs(s[j, i]) ** 2 for s in va) / valley_t1)
            if down <= 0:
                continue
            x = PLANCK * (e[i] - e[j]) / (K_B * temperature)
            out.append((i, j, down))
            out.append((j, i, down * math.exp(-x)))
    return out
