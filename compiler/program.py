"""The expanded program: concrete steps with SI values, one list per run.

Produced by :mod:`compiler.expand` from the parsed tree (parameters
evaluated, sweeps split into runs, repeats and blocks unrolled, includes
inlined); checked against the device by :mod:`compiler.check`; placed in
time by :mod:`compiler.schedule`.  Every step keeps the span of the statement
it came from and, when it came from a block call, the chain of calls.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Union

from .errors import Span
from .units import Dim


@dataclass(frozen=True, slots=True)
class Rotation:
    """A rotation by ``angle`` (rad, signed) about the xy-plane axis at azimuth
    ``phase`` (rad; 0 = x, π/2 = y), played as a microwave burst."""
    qubit: str
    phase: float
    angle: float
    shape: str | None          # None: the device default
    duration: float | None     # s, None: from the device default / angle
    amplitude: float | None    # V, None: from the device default / angle
    span: Span
    via: tuple[str, ...] = ()
    qubit_spans: tuple[Span, ...] = ()   # where each qubit is named
    detuning: float = 0.0      # Hz, the burst's tone minus the dot's Larmor frequency
    kind = "rot"


@dataclass(frozen=True, slots=True)
class FrameRotation:
    """A z rotation by ``angle`` (rad): a frame update, no waveform, no time."""
    qubit: str
    angle: float
    span: Span
    via: tuple[str, ...] = ()
    qubit_spans: tuple[Span, ...] = ()
    kind = "zrot"


@dataclass(frozen=True, slots=True)
class ExchangeGate:
    """√SWAP, its inverse, SWAP, CZ or CPHASE(angle) between two coupled dots."""
    gate: str                  # a key of compiler.steps.EXCHANGE_GATES
    a: str
    b: str
    duration: float | None     # s
    amplitude: float | None    # V, barrier level during the pulse
    span: Span
    via: tuple[str, ...] = ()
    qubit_spans: tuple[Span, ...] = ()
    angle: float = 0.0         # rad, conditional phase of cz (π) and cphase; 0 otherwise

    @property
    def kind(self) -> str:
        return self.gate


@dataclass(frozen=True, slots=True)
class Idle:
    """Wait ``duration`` seconds on ``qubits`` (empty: on every dot)."""
    duration: float
    qubits: tuple[str, ...]
    span: Span
    via: tuple[str, ...] = ()
    qubit_spans: tuple[Span, ...] = ()
    kind = "wait"


@dataclass(frozen=True, slots=True)
class Readout:
    qubits: tuple[str, ...]
    span: Span
    via: tuple[str, ...] = ()
    qubit_spans: tuple[Span, ...] = ()
    kind = "read"


@dataclass(frozen=True, slots=True)
class Trigger:
    label: str
    span: Span
    via: tuple[str, ...] = ()
    kind = "trigger"


@dataclass(frozen=True, slots=True)
class Move:
    """Take the gates to a named voltage point of the device: at once
    (``ramp`` 0) or linearly over ``ramp`` seconds; they stay there until the
    next move."""
    point: str
    ramp: float                # s, 0: a jump
    span: Span
    via: tuple[str, ...] = ()
    point_span: Span | None = None   # where the point is named
    kind = "move"


@dataclass(frozen=True, slots=True)
class Parallel:
    """Steps on different qubits that start together."""
    steps: tuple["Step", ...]
    span: Span
    via: tuple[str, ...] = ()
    kind = "together"


Step = Union[Rotation, FrameRotation, ExchangeGate, Idle, Readout, Trigger, Move, Parallel]


@dataclass(frozen=True, slots=True)
class SweepAxis:
    name: str
    values: tuple[float, ...]  # SI
    dim: Dim
    span: Span


@dataclass(frozen=True, slots=True)
class Run:
    """One concrete experiment: a point of the sweep grid."""
    index: int
    sweep: tuple[tuple[str, float], ...]   # (name, SI value) per axis
    prepare: tuple[tuple[str, str, Span], ...]   # (qubit, state, span) as declared
    steps: tuple[Step, ...]
    sweep_dims: tuple[Dim, ...] = ()       # the dimension of each sweep value (for printing)

    def sweep_text(self) -> str:
        """``tau = 400 ns, amp = 20 mV``: this run's sweep point with units."""
        from .units import format_quantity
        dims = self.sweep_dims if len(self.sweep_dims) == len(self.sweep) else ()
        return ", ".join(f"{n} = {format_quantity(v, dims[i])}" if dims else f"{n} = {v:g}"
                         for i, (n, v) in enumerate(self.sweep))


@dataclass(frozen=True, slots=True)
class Expanded:
    """The whole file after expansion; ``runs`` is one Run per sweep point,
    in row-major order (first declared sweep outermost)."""
    file: str
    device_path: str | None    # resolved path, None: the bundled default
    device_span: Span | None
    axes: tuple[SweepAxis, ...]
    runs: tuple[Run, ...]


def leaf_steps(steps):
    """Iterate over steps with Parallel groups opened."""
    for s in steps:
        if isinstance(s, Parallel):
            yield from s.steps
        else:
            yield s


def step_qubits(s: Step) -> tuple[str, ...]:
    """The dots a step acts on (a trigger: none)."""
    return STEP_QUBITS[type(s)](s)


# The dots each kind of step acts on.
STEP_QUBITS = {
    Rotation: lambda s: (s.qubit,),
    FrameRotation: lambda s: (s.qubit,),
    ExchangeGate: lambda s: (s.a, s.b),
    Idle: lambda s: s.qubits,
    Readout: lambda s: s.qubits,
    Trigger: lambda s: (),
    Move: lambda s: (),
    Parallel: lambda s: tuple(q for x in s.steps for q in step_qubits(x)),
}
