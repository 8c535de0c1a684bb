"""Randomized benchmarking (compiler/benchmarking): the Clifford groups, the
native decompositions, the generated sequences, the decay fit and
interleaved RB."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import compiler
from compiler.benchmarking import group as G
from compiler.benchmarking.native import ENTANGLER, decomposition, word_unitary
from compiler.benchmarking.sequences import (interleaved, make_sequence, make_sequences,
                                             sequence_text)
from compiler.simulate import fidelity as F

ROOT = Path(__file__).resolve().parents[1]
DEMO_PAIR = ROOT / "sequences" / "devices" / "demo_pair.yaml"


def _equal_mod_phase(u, v, tol=1e-9):
    d = u.shape[0]
    return abs(abs(np.trace(u.conj().T @ v)) - d) < tol


# ------------------------------------------------------------------ groups

@pytest.mark.parametrize("n, size", [(1, 24), (2, 11520)])
def test_group_size_and_closure(n, size):
    # sizes 24 and 11 520: Barends et al., Nature 508, 500 (2014) (m);
    # closure: every element times every generator (and every pair on one
    # qubit) is again an element, and every element maps Paulis to Paulis
    # up to sign (the definition of the Clifford group).
    g = G.clifford_group(n)
    assert g.size == size
    assert len(g.index) == size
    for gen in G.generators(n):
        prod = np.einsum("ij,njk->nik", gen, g.unitaries)
        assert all(k in g.index for k in G.keys(prod))
    if n == 1:
        for a in range(size):
            for b in range(size):
                g.multiply(a, b)        # raises KeyError if outside the group
    paulis = G.paulis(n)
    pkeys = set(G.keys(paulis))
    conj = np.einsum("nij,pjk,nlk->npil", g.unitaries, paulis, g.unitaries.conj())
    flat = conj.reshape(-1, 2 ** n, 2 ** n)
    assert all(k in pkeys for k in G.keys(flat))
    # unitary
    eye = np.eye(2 ** n)
    assert np.allclose(np.einsum("nji,njk->nik", g.unitaries.conj(), g.unitaries), eye)


def test_inverse_and_identity():
    g = G.clifford_group(2)
    rng = np.random.default_rng(3)
    for i in rng.integers(0, g.size, 50):
        assert g.multiply(g.inverse(int(i)), int(i)) == 0


# ------------------------------------------------------------------ decompositions

@pytest.mark.parametrize("n, name", [(1, "virtual-z"), (1, "xy"), (2, "virtual-z")])
def test_every_word_is_its_clifford(n, name):
    dec = decomposition(n, name)
    for i, w in enumerate(dec.words):
        assert _equal_mod_phase(word_unitary(w, n), dec.group.unitaries[i])


def test_native_counts_single_qubit():
    # z virtual: 4 z rotations need no pulse, the other 20 one pulse each:
    # 20/24 = 5/6 (derived in compiler/benchmarking/native.py).
    vz = decomposition(1, "virtual-z")
    assert np.bincount(vz.physical_counts()).tolist() == [4, 20]
    assert vz.native_per_clifford == pytest.approx(5 / 6, abs=1e-12)
    # xy only: 1 + 6 + 13 + 4 elements need 0, 1, 2, 3 pulses: 44/24 (derived);
    # 45/24 = 1.875 when the identity is played as an idle gate (Epstein et
    # al., PRA 89, 062321 (2014) (m)).
    xy = decomposition(1, "xy")
    counts = xy.physical_counts()
    assert np.bincount(counts).tolist() == [1, 6, 13, 4]
    assert (counts.sum() + 1) / 24 == pytest.approx(1.875, abs=1e-12)


def test_native_counts_two_qubits():
    # 576, 5184, 5184, 576 Cliffords need 0, 1, 2, 3 entanglers (Barends et
    # al., Nature 508, 500 (2014) (m)): 1.5 entanglers = 3.0 √SWAP per Clifford.
    dec = decomposition(2)
    swaps = dec.count(lambda s: s.kind == "sqrtswap")
    assert np.bincount(swaps // 2).tolist() == [576, 5184, 5184, 576]
    assert swaps.mean() == pytest.approx(3.0, abs=1e-12)
    pulses = dec.count(lambda s: s.kind == "rot")
    assert pulses.sum() == 37632              # counted in native.py's docstring
    assert dec.native_per_clifford == pytest.approx(3.0 + 37632 / 11520, abs=1e-12)


def test_entangler_is_controlled_phase():
    # two √SWAP around a z rotation by 180° on A: a controlled phase up to z
    # rotations (Loss & DiVincenzo, PRA 57, 120 (1998))
    # (rot A z 90, rot B z -90 after it make it CZ: sequences/cnot_pair.dotseq)
    e = word_unitary(ENTANGLER, 2)
    s = np.diag([1, 1j])
    assert _equal_mod_phase(e, G.CZ @ np.kron(s.conj(), s))
    assert G.key(e) in G.clifford_group(2).index


# ------------------------------------------------------------------ sequences

def _composed(path: Path, qubits) -> np.ndarray:
    """The ideal operation of a written file on the whole register, from the
    steps as the project parses and expands them (independent of the group
    code: the simulator's ideal operations, compiler/simulate/fidelity.py)."""
    c = compiler.load(path)
    dots = tuple(c.device.dots)
    (run,) = c.expanded.runs
    return F.ideal_unitary(run.steps, dots)


@pytest.mark.parametrize("qubits, lengths", [(("A",), (1, 3, 17)), (("B",), (2, 9)),
                                             (("A", "B"), (1, 4))])
def test_sequences_compose_to_identity(tmp_path, qubits, lengths):
    n = len(qubits)
    dec = decomposition(n)
    inter = interleaved("cz" if n == 2 else "rot A x 90" if "A" in qubits else "rot B y 180",
                        qubits)
    seqs = make_sequences(dec, lengths, 3, seed=11) + make_sequences(dec, lengths, 2, 11, inter)
    for s in seqs:
        p = tmp_path / f"{s.name}.dotseq"
        p.write_text(sequence_text(s, qubits, str(DEMO_PAIR), header="test"))
        u = _composed(p, qubits)
        assert _equal_mod_phase(u, np.eye(4)), s.name      # 1e-9 on the register
        assert len(s.cliffords) == s.length + 1


def test_sequences_reproducible_and_independent_of_other_lengths():
    dec = decomposition(1)
    a = make_sequences(dec, (2, 8), 4, seed=5)
    b = make_sequences(dec, (8,), 6, seed=5)
    assert [s.steps for s in a if s.length == 8] == [s.steps for s in b[:4]]
    c = make_sequences(dec, (8,), 4, seed=6)
    assert [s.steps for s in c] != [s.steps for s in b[:4]]


def test_interleaved_refusals():
    for text in ("rot A x 45", "rot C x 90", "rot A w 90", "cz", "rot A x 360", "swap A"):
        with pytest.raises(ValueError):
            interleaved(text, ("A",))
