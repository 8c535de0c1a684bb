"""The coherence margin, computed in one place: T2 (Hahn echo) of each dot
over the longest gate acting on it, against the rule of thumb
:data:`compiler.physics.COHERENCE_RULE` (10⁴; common practice, no source).

Used by ``dotseq check`` (:mod:`compiler.check.summary`), the simulation's
results (:mod:`compiler.simulate.run`) and every sweep point
(:mod:`compiler.sweep.point`).  What counts as a gate is the ``gate``
column of the table of step kinds (:data:`compiler.steps.KINDS`).
"""

from __future__ import annotations

from dataclasses import dataclass

from .device.model import Device
from .physics import COHERENCE_RULE
from .steps import KINDS


@dataclass(frozen=True)
class Margin:
    qubit: str
    t2: float            # s, Hahn-echo T2 of the dot
    longest: float       # s, longest gate acting on this dot
    ratio: float         # t2 / longest
    flagged: bool        # ratio below COHERENCE_RULE

    def as_tuple(self) -> tuple[str, float, float, float, bool]:
        return (self.qubit, self.t2, self.longest, self.ratio, self.flagged)


def longest_gates(timelines) -> dict[str, float]:
    """Longest gate (s) acting on each dot over the slots of ``timelines``."""
    longest: dict[str, float] = {}
    for tl in timelines:
        for s in tl.slots:
            if KINDS[s.kind].gate:
                for q in s.qubits:
                    longest[q] = max(longest.get(q, 0.0), s.duration)
    return longest


def coherence_margins(timelines, device: Device) -> tuple[Margin, ...]:
    """The margin of every dot a gate acts on, in the device's dot order."""
    longest = longest_gates(timelines)
    out = []
    for q, d in device.dots.items():
        g = longest.get(q, 0.0)
        if g > 0:
            out.append(Margin(q, d.t2, g, d.t2 / g, d.t2 / g < COHERENCE_RULE))
    return tuple(out)
