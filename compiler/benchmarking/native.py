"""Native steps of the device and the decomposition of every Clifford into them.

Native steps are what a ``.dotseq`` file can say about one or two qubits:
xy rotations (``rot Q x 90 deg``: a microwave burst, a *physical* step),
z rotations (``rot Q z 90 deg``: a frame update, no time, no error) and
the exchange pulse ``sqrtswap A B``.  √SWAP is not a Clifford; two of them
around a z rotation by 180° give a controlled phase up to z rotations,

    E = U_sw^{1/2} · e^{iπ S_z^A} · U_sw^{1/2}   (Loss & DiVincenzo, PRA 57, 120 (1998)),

which is a Clifford (it equals CZ · (S† ⊗ S) up to phase, S = diag(1, i);
tests check it),
so the two-qubit decompositions use E as their entangler, two √SWAPs each.

Each Clifford gets a shortest word in its decomposition table, found by a
shortest-path search over the group (Dijkstra) from the identity, with a
cost that counts entanglers first, then physical single-qubit pulses, then
frame updates.  The averages below follow from the structure of the group.

**Single qubit, z virtual** (``virtual-z``, the default): pulses about ±x
and ±y by 90° and about x and y by 180°, z rotations by ±90° and 180° free.
A Clifford that maps the z axis to itself is a z rotation (4 of the 24:
no pulse); one that maps z to −z needs one 180° pulse (4 of 24); one that
maps z into the equator needs one 90° pulse (16 of 24).  So the average is
(0·4 + 1·4 + 1·16)/24 = 5/6 ≈ 0.833 pulses per Clifford (derived).

**Single qubit, xy only** (``xy``): the same pulses without z rotations.
By the classes of the group: the identity needs none; X, Y, ±X/2, ±Y/2
one each (6); Z = Y·X, the eight 120° rotations about body diagonals and
four of the six Hadamard-like ones two each (13); the z rotations by ±90°
and the two remaining Hadamard-like ones three each (4): 44/24 ≈ 1.833
pulses per Clifford (derived).  The often quoted 1.875 = 45/24 (Epstein et
al., PRA 89, 062321 (2014) (m)) plays the identity as one idle gate.

**Two qubits** (``virtual-z``): by the number of entanglers a Clifford needs,
the 11 520 elements fall into 576 local ones (24², none), 5 184 of the
controlled-NOT kind (one), 5 184 of the iSWAP kind (two) and 576 of the SWAP
kind (three) (Barends et al., Nature 508, 500 (2014) (m); Corcoles et al.,
PRA 87, 030301 (2013) (m)); average (5184 + 2·5184 + 3·576)/11520 = 1.5
entanglers, i.e. 3.0 √SWAP pulses per Clifford (derived).  The single-qubit
pulses of the shortest words average 37 632/11 520 ≈ 3.27 per Clifford
(counted from the table; the tests count them again).
"""

from __future__ import annotations

import heapq
import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from ..simulate import fidelity as F
from .group import CliffordGroup, clifford_group, keys

ROLES = ("A", "B")          # placeholder names of the benchmarked qubits in a word


@dataclass(frozen=True)
class NativeStep:
    """One native step on the benchmarked qubits: ``kind`` is ``rot`` (an xy
    rotation about ``axis`` x, y, -x or -y, a physical pulse), ``zrot`` (a
    frame update) or ``sqrtswap``; ``roles`` index the benchmarked qubits
    (0 = first, 1 = second); ``angle`` in degrees."""
    kind: str
    roles: tuple[int, ...]
    axis: str = ""
    angle: float = 0.0

    @property
    def physical(self) -> bool:
        """A step that takes time and can fail (bursts and exchange pulses)."""
        return self.kind != "zrot"

    def text(self, names) -> str:
        """The statement, with the benchmarked qubits called ``names``."""
        q = [names[r] for r in self.roles]
        if self.kind == "sqrtswap":
            return f"sqrtswap {q[0]} {q[1]}"
        axis = "z" if self.kind == "zrot" else self.axis
        return f"rot {q[0]} {axis} {self.angle:g} deg"

    def label(self) -> str:
        """Name independent of the qubits, e.g. ``rot 0 x 90`` or ``sqrtswap 0 1``."""
        return self.text([str(r) for r in range(2)]).replace(" deg", "")

    def unitary(self, n: int) -> np.ndarray:
        """The ideal operation on ``n`` benchmarked qubits (the simulator's own
        ideal operations, :mod:`compiler.simulate.fidelity`); read-only, cached."""
        return _step_unitary(self, n)

    def _build(self, n: int) -> np.ndarray:
        if self.kind == "sqrtswap":
            return np.array(F.exchange_unitary("sqrtswap", self.roles[0], self.roles[1], n))
        th = math.radians(self.angle)
        if self.kind == "zrot":
            single = np.diag([np.exp(-0.5j * th), np.exp(0.5j * th)])
        else:
            phase = {"x": 0.0, "y": math.pi / 2, "-x": math.pi, "-y": 3 * math.pi / 2}[self.axis]
            single = F.rotation(phase, th)
        return F.op(single, self.roles[0], n)


@lru_cache(maxsize=256)
def _step_unitary(step: NativeStep, n: int) -> np.ndarray:
    u = step._build(n)
    u.flags.writeable = False
    return u


def _pulses(role: int) -> list[NativeStep]:
    return [NativeStep("rot", (role,), ax, ang)
            for ax, ang in (("x", 90), ("-x", 90), ("y", 90), ("-y", 90), ("x", 180), ("y", 180))]


def _frames(role: int) -> list[NativeStep]:
    return [NativeStep("zrot", (role,), "z", a) for a in (90, -90, 180)]


ENTANGLER = (NativeStep("sqrtswap", (0, 1)), NativeStep("zrot", (0,), "z", -180.0),
             NativeStep("sqrtswap", (0, 1)))


def word_unitary(word, n: int) -> np.ndarray:
    u = np.eye(2 ** n, dtype=complex)
    for s in word:
        u = s.unitary(n) @ u
    return u


@dataclass(frozen=True)
class Decomposition:
    """A shortest native word for every element of ``group``
    (``words[i]`` in time order)."""
    name: str
    group: CliffordGroup
    words: tuple[tuple[NativeStep, ...], ...]

    def physical_counts(self) -> np.ndarray:
        """Physical steps (bursts and √SWAP pulses) of each Clifford."""
        return np.array([sum(s.physical for s in w) for w in self.words])

    def count(self, pred) -> np.ndarray:
        return np.array([sum(1 for s in w if pred(s)) for w in self.words])

    @property
    def native_per_clifford(self) -> float:
        """Average number of physical steps per Clifford (frame updates not
        counted: they take no time and are exact)."""
        return float(self.physical_counts().mean())


#: name -> (qubits, moves: list of (cost tuple, steps))
def _moves(name: str, n: int):
    moves = []
    for r in range(n):
        for s in _pulses(r):
            moves.append(((0, 1, 0), (s,)))
        if name == "virtual-z":
            for s in _frames(r):
                moves.append(((0, 0, 1), (s,)))
    if n == 2:
        moves.append(((1, 0, 1), ENTANGLER))
    return moves


DECOMPOSITIONS = {1: ("virtual-z", "xy"), 2: ("virtual-z",)}


@lru_cache(maxsize=4)
def decomposition(n: int, name: str = "virtual-z") -> Decomposition:
    """Shortest words (entanglers, then pulses, then frame updates) for every
    Clifford on ``n`` qubits; ``name`` is ``virtual-z`` or, on one qubit,
    ``xy`` (no frame updates)."""
    if name not in DECOMPOSITIONS.get(n, ()):
        raise ValueError(f"no decomposition '{name}' on {n} qubit(s)")
    group = clifford_group(n)
    moves = _moves(name, n)
    # the group element each move leads to from each element: one batched product
    table = []
    for _, steps in moves:
        u = word_unitary(steps, n)
        prod = np.einsum("ij,njk->nik", u, group.unitaries)
        table.append([group.index[k] for k in keys(prod)])
    best = [None] * group.size
    prev: list = [None] * group.size
    best[0] = (0, 0, 0)
    heap = [((0, 0, 0), 0)]
    while heap:
        cost, i = heapq.heappop(heap)
        if cost != best[i]:
            continue
        for m, (c, _) in enumerate(moves):
            j = table[m][i]
            new = (cost[0] + c[0], cost[1] + c[1], cost[2] + c[2])
            if best[j] is None or new < best[j]:
                best[j] = new
                prev[j] = (i, m)
                heapq.heappush(heap, (new, j))
    if any(b is None for b in best):
        raise AssertionError(f"the moves of '{name}' do not reach every Clifford")
    words = []
    for i in range(group.size):
        parts = []
        while prev[i] is not None:
            i, m = prev[i]
            parts.append(moves[m][1])
        words.append(tuple(s for p in reversed(parts) for s in p))
    return Decomposition(name, group, tuple(words))
