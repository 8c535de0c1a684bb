"""Every kind of step, in one table, and the exchange gates' targets.

A step kind is the string a :class:`~compiler.schedule.timeline.Slot`, a
:class:`~compiler.synth.types.StepRecord`, a bundle's ``steps.json`` and a
report's per-step table carry as ``kind``.  :data:`KINDS` says for each one:

* ``keyword``: that string (for a program step, also the sequence keyword);
* ``step_type``: the :mod:`compiler.program` class it comes from (None for
  what the compiler inserts: ``phasewait``/``zcorrect`` before an exchange,
  ``pad`` at the end of the waveforms);
* ``ideal``: which ideal operation it stands for in a fidelity
  (``rotation``, ``frame``, ``exchange``, ``identity``, ``product``; None
  for inserted time, which belongs to the exchange it prepares);
* ``gate``: whether it counts as a gate for the coherence margin
  (T2 / longest gate);
* ``name`` and ``labels``: the short display name and the fixed labels of
  a timeline box (longest first); ``label`` says how the preview adds the
  step's parameters (``rotation``, ``frame``, ``exchange``, ``trigger``,
  ``point``, ``fixed``);
* ``face``, ``hatch``, ``dense``: its preview style (box colour, hatch, and
  colour in a dense lane).

Every stage that treats kinds differently keeps its own handlers in a
table keyed by kind (or by ``ideal``/``label``/``step_type``);
``tests/test_steps.py`` checks each such table covers every kind, so a new
kind missing from a stage fails there, not silently.

:data:`EXCHANGE_GATES` defines each exchange gate once: the exchange
integral ∫(J/h)dt it needs (1/4 for √SWAP: a phase ∫J dt/ħ of π/2; Loss &
DiVincenzo, PRA 57, 120 (1998)) and its target unitary on the pair; the
controlled-phase gates (``cz``, ``cphase``) take both from their angle.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import program as P


@dataclass(frozen=True)
class StepKind:
    keyword: str
    step_type: type | None     # program class; None: inserted by the compiler
    ideal: str | None          # "rotation", "frame", "exchange", "identity", "product"
    gate: bool                 # counts for the coherence margin
    name: str                  # short display name (legends of merged boxes)
    labels: tuple[str, ...]    # fixed labels of a timeline box, longest first
    label: str                 # how parameters enter the label (preview)
    face: str                  # preview box colour
    hatch: str = ""            # preview box hatch
    dense: str = ""            # colour in a dense lane ("" = face)

    @property
    def inserted(self) -> bool:
        """Time the compiler inserts, not a step of the file."""
        return self.step_type is None

    @property
    def dense_colour(self) -> str:
        return self.dense or self.face


_EXCHANGE_FACES = {"sqrtswap": "#d9a47a", "sqrtswap_inv": "#c99068", "swap": "#b97c55",  # clays
                   "cz": "#c7a0b4", "cphase": "#b48aa1"}                          # mauves
_EXCHANGE_NAMES = {"sqrtswap": "√SWAP", "sqrtswap_inv": "√SWAP⁻¹", "swap": "SWAP",
                   "cz": "CZ", "cphase": "CPHASE"}

KINDS: dict[str, StepKind] = {k.keyword: k for k in (
    StepKind("rot", P.Rotation, "rotation", True, "rot", (), "rotation",
             "#7fb3a6"),                                          # sage teal
    StepKind("zrot", P.FrameRotation, "frame", False, "z", ("z",), "frame",
             "#9d8fc4"),                                          # soft lavender (zero length)
    *(StepKind(g, P.ExchangeGate, "exchange", True, _EXCHANGE_NAMES[g],
               (_EXCHANGE_NAMES[g], "ex"), "exchange", _EXCHANGE_FACES[g])
      for g in ("sqrtswap", "sqrtswap_inv", "swap", "cz", "cphase")),
    StepKind("wait", P.Idle, "identity", False, "wait", ("wait", "w"), "fixed",
             "#e4e6ea"),                                          # pale grey
    StepKind("read", P.Readout, "identity", False, "read", ("read", "r"), "fixed",
             "#8fa9d6"),                                          # periwinkle
    StepKind("trigger", P.Trigger, "identity", False, "trigger", ("trigger", "trig", "t"),
             "trigger", "#c8bf7a"),                               # straw
    StepKind("move", P.Move, "identity", False, "move", ("move", "mv"), "point",
             "#a9c29a"),                                          # moss (a voltage point)
    StepKind("together", P.Parallel, "product", False, "together", ("together",), "fixed",
             "#cfcfcf"),
    # inserted by the compiler: hatched
    StepKind("phasewait", None, None, False, "phase wait",
             ("phase wait (inserted)", "phasewait", "pw"), "fixed", "#ffffff", "///", "#b6bac3"),
    StepKind("zcorrect", None, None, True, "z-corr", ("z-correct (inserted)", "zcorrect", "zc"),
             "fixed", "#e9d8c8", "\\\\", "#d9bfa6"),             # pale clay, back-hatched
    StepKind("pad", None, None, False, "pad", ("padding (end)", "pad", "p"), "fixed",
             "#ffffff", "xx", "#d3d6dc"),
)}

# kinds that count as gates for the coherence margin, in table order
GATE_KINDS = tuple(k for k, v in KINDS.items() if v.gate)
# the program's step classes, each with the kinds it can have
STEP_TYPES: dict[type, tuple[str, ...]] = {}
for _k in KINDS.values():
    if _k.step_type is not None:
        STEP_TYPES[_k.step_type] = STEP_TYPES.get(_k.step_type, ()) + (_k.keyword,)
del _k


def kind(keyword: str) -> StepKind:
    """The table entry of a step kind; ``KeyError`` naming the known kinds."""
    try:
        return KINDS[keyword]
    except KeyError:
        raise KeyError(f"unknown step kind {keyword!r}; known: {', '.join(KINDS)}") from None


# ------------------------------------------------------------------ exchange gates

# Basis |↑↑>, |↑↓>, |↓↑>, |↓↓> of the pair (first dot first).
SQRT_SWAP = np.array([[1, 0, 0, 0],
                      [0, (1 + 1j) / 2, (1 - 1j) / 2, 0],
                      [0, (1 - 1j) / 2, (1 + 1j) / 2, 0],
                      [0, 0, 0, 1]], dtype=complex)
SWAP = np.array([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]], dtype=complex)


def cphase_matrix(theta: float) -> np.ndarray:
    """CPHASE(θ) = diag(1, 1, 1, e^{iθ}) on |↑↑>, |↑↓>, |↓↑>, |↓↓> (|0> = spin
    up: the phase sits on ↓↓); CZ is θ = π."""
    return np.diag([1, 1, 1, complex(math.cos(theta), math.sin(theta))])


def phase_integral(theta: float) -> float:
    """∫(J/h)dt of an adiabatic exchange pulse that gives the conditional phase
    θ (rad).  With J ≪ ΔEz the flip-flop is suppressed and the anti-parallel
    states, whose energies sum to −J/2, move against the parallel ones (+J/4
    each): the conditional phase φ↑↑ + φ↓↓ − φ↑↓ − φ↓↑ is −2π∫(J/h)dt
    (Meunier, Calado & Vandersypen, PRB 83, 121403 (2011); Russ et al.,
    PRB 97, 085421 (2018)).  J ≥ 0, so θ is reached as −θ mod 2π: CZ needs
    1/2, CPHASE(π/2) 3/4, CPHASE(−π/2) 1/4; 0 for θ ≡ 0."""
    x = (-theta / (2 * math.pi)) % 1.0
    return 0.0 if x > 1 - 1e-12 else x


@dataclass(frozen=True)
class ExchangeGateKind:
    """An exchange gate.  ``regime`` says which limit it is played in:
    ``swap`` (J ≫ ΔEz: the spins swap; ∫(J/h)dt and the target are fixed) or
    ``phase`` (J ≪ ΔEz, a shaped adiabatic pulse: a controlled phase, local
    z phases compensated in the frames; ∫(J/h)dt from the angle, see
    :func:`phase_integral`).  ``angle`` is the fixed conditional phase of a
    phase gate (CZ: π), None when the step gives it (``cphase A B ANGLE``)."""
    keyword: str
    regime: str                # "swap" or "phase"
    integral: float | None = None   # ∫(J/h) dt of a swap-regime gate (dimensionless)
    target: np.ndarray | None = None  # 4x4 unitary of a swap-regime gate, up to a phase
    angle: float | None = None      # conditional phase of a phase gate with a fixed one

    def integral_for(self, angle: float = 0.0) -> float:
        """∫(J/h)dt the gate needs (``angle``: the step's conditional phase)."""
        if self.regime == "swap":
            return self.integral
        return phase_integral(self.angle if self.angle is not None else angle)

    def target_for(self, angle: float = 0.0) -> np.ndarray:
        """The 4×4 target on the pair (first dot first)."""
        if self.regime == "swap":
            return self.target
        return cphase_matrix(self.angle if self.angle is not None else angle)

    @property
    def aligned(self) -> bool:
        """Whether the differential frame phase before the gate matters: for
        a swap it decides the single-qubit phases the swap exchanges; a
        controlled phase is diagonal and commutes with every z phase."""
        return self.regime == "swap"


EXCHANGE_GATES: dict[str, ExchangeGateKind] = {g.keyword: g for g in (
    ExchangeGateKind("sqrtswap", "swap", 0.25, SQRT_SWAP),
    ExchangeGateKind("sqrtswap_inv", "swap", 0.75, SQRT_SWAP.conj().T),
    ExchangeGateKind("swap", "swap", 0.5, SWAP),
    ExchangeGateKind("cz", "phase", angle=math.pi),
    ExchangeGateKind("cphase", "phase"),
)}
for _g in EXCHANGE_GATES.values():
    if _g.target is not None:
        _g.target.flags.writeable = False
del _g
