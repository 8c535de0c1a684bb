"""Random Clifford sequences and their ``.dotseq`` text.

A sequence of length m is m Cliffords drawn uniformly and independently
from the group, then the one Clifford that inverts their product, so that
the whole sequence is the identity on an ideal device (Magesan, Gambetta,
Emerson, PRL 106, 180504 (2011)).  With an interleaved step G the sequence
is C_1, G, C_2, G, …, C_m, G, then the inverse (Magesan et al., PRL 109,
080505 (2012)).

Each sequence draws from its own generator seeded by (seed, length,
sequence number, interleaved or not), so a sequence does not change when
other lengths or more sequences are asked for.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .group import clifford_group
from .native import ENTANGLER, Decomposition, NativeStep, word_unitary


@dataclass(frozen=True)
class Interleaved:
    """A named native Clifford to interleave: its text and its word."""
    text: str
    word: tuple[NativeStep, ...]
    element: int


@dataclass(frozen=True)
class Sequence:
    """One random sequence: ``cliffords`` (element numbers, the inverse last)
    the native ``steps`` in time order, and ``applied``: every Clifford
    played, in order, the interleaved ones included."""
    length: int
    number: int
    interleaved: bool
    cliffords: tuple[int, ...]
    steps: tuple[NativeStep, ...]
    applied: tuple[int, ...] = ()

    @property
    def name(self) -> str:
        kind = "int" if self.interleaved else "ref"
        return f"{kind}_m{self.length:04d}_s{self.number:03d}"

    @property
    def physical_steps(self) -> int:
        return sum(s.physical for s in self.steps)


def parse_interleaved(text: str, names: tuple[str, ...]) -> tuple[NativeStep, ...]:
    """The word of an interleaved step given as ``rot Q AXIS ANGLE`` (AXIS x,
    y, -x, -y or z, ANGLE in degrees, a multiple of 90) or, on two qubits,
    ``cz`` (the √SWAP entangler of :mod:`.native`).  Raises ValueError with
    the reason."""
    parts = text.replace("deg", " ").split()
    if len(parts) == 1 and parts[0].lower() == "cz":
        if len(names) != 2:
            raise ValueError("'cz' needs two benchmarked qubits")
        return ENTANGLER
    if len(parts) != 4 or parts[0] != "rot":
        raise ValueError(f"'{text}' is not 'rot QUBIT AXIS ANGLE' or 'cz'")
    _, q, axis, angle = parts
    if q not in names:
        raise ValueError(f"qubit '{q}' is not benchmarked (give one of {', '.join(names)})")
    if axis not in ("x", "y", "-x", "-y", "z"):
        raise ValueError(f"axis '{axis}' must be x, y, -x, -y or z")
    try:
        a = float(angle)
    except ValueError:
        raise ValueError(f"angle '{angle}' is not a number of degrees") from None
    if not math.isfinite(a) or a % 90 != 0 or a % 360 == 0:
        raise ValueError(f"angle {angle} deg is not a Clifford rotation (use ±90 or 180 deg)")
    kind = "zrot" if axis == "z" else "rot"
    return (NativeStep(kind, (names.index(q),), axis, a),)


def interleaved(text: str, names: tuple[str, ...]) -> Interleaved:
    word = parse_interleaved(text, names)
    group = clifford_group(len(names))
    return Interleaved(text, word, group.find(word_unitary(word, len(names))))


def _rng(seed: int, length: int, number: int, inter: bool) -> np.random.Generator:
    return np.random.default_rng([seed, length, number, int(inter)])


def make_sequence(dec: Decomposition, length: int, number: int, seed: int,
                  inter: Interleaved | None = None) -> Sequence:
    """Sequence ``number`` of ``length`` random Cliffords (then the inverse)."""
    group = dec.group
    rng = _rng(seed, length, number, inter is not None)
    drawn = rng.integers(0, group.size, size=length)
    elements: list[int] = []
    applied: list[int] = []
    steps: list[NativeStep] = []
    u = np.eye(group.dim, dtype=complex)
    for c in drawn:
        c = int(c)
        elements.append(c)
        applied.append(c)
        steps.extend(dec.words[c])
        u = group.unitaries[c] @ u
        if inter is not None:
            steps.extend(inter.word)
            applied.append(inter.element)
            u = group.unitaries[inter.element] @ u
    last = group.find(u.conj().T)
    elements.append(last)
    applied.append(last)
    steps.extend(dec.words[last])
    return Sequence(length, number, inter is not None, tuple(elements), tuple(steps),
                    tuple(applied))


def make_sequences(dec: Decomposition, lengths, count: int, seed: int,
                   inter: Interleaved | None = None) -> list[Sequence]:
    return [make_sequence(dec, m, k, seed, inter) for m in lengths for k in range(count)]


def sequence_text(seq: Sequence, names: tuple[str, ...], device_ref: str, *,
                  header: str = "") -> str:
    """The ``.dotseq`` file of ``seq`` on the qubits ``names``: a device line,
    the preparation in |0> = spin up on every benchmarked qubit, the steps
    (one Clifford per line group), the readout."""
    lines = []
    if header:
        lines += [f"# {h}" if h else "#" for h in header.splitlines()]
    lines.append(f'device "{device_ref}"')
    lines.append(f"prepare {' '.join(names)} up")
    lines += [s.text(names) for s in seq.steps]
    lines.append(f"read {' '.join(names)}")
    return "\n".join(lines) + "\n"
