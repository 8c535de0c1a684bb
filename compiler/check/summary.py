"""What `dotseq check` tells a physicist about a sequence on a device."""

from __future__ import annotations

from collections import Counter
import dataclasses
from dataclasses import dataclass, field

from .. import program as P
from ..device.model import Device
from ..errors import Span
from ..margin import Margin, coherence_margins
from ..physics import COHERENCE_RULE
from ..runwarnings import merged
from ..schedule import Timeline
from ..steps import GATE_KINDS, KINDS
from .lines import line_warnings
from ..units import FIELD, FREQUENCY, NONE, TEMPERATURE, TIME, Dim, format_quantity as fq

# step counts are printed in the order of the table of step kinds
KIND_ORDER = tuple(KINDS)


@dataclass(frozen=True)
class QubitInfo:
    name: str
    g: float
    larmor: float        # Hz
    t1: float
    t2: float
    t2_star: float
    preset: str
    levels: tuple[float, ...] = ()       # Hz from the ground level (spin–valley dots)
    qubit_levels: tuple[int, int] = (0, 1)
    leakage: tuple | None = None         # nearest leakage transition: (from, to, Hz, element)
    leakage_gap: float | None = None     # Hz between it and the qubit transition
    spectrum: str = ""                           # the Zeeman-noise spectrum, as text
    cpmg: tuple[tuple[int, float], ...] = ()     # (N, CPMG-N T2 in s) it implies

    @property
    def spin_valley(self) -> bool:
        return bool(self.levels)


@dataclass(frozen=True)
class Longest:
    kind: str
    qubits: tuple[str, ...]
    duration: float
    span: Span


@dataclass(frozen=True)
class Summary:
    sequence: str
    device_name: str
    device_path: str
    field: float
    temperature: float
    qubits: tuple[QubitInfo, ...]
    runs: int
    axes: tuple[tuple[str, float, float, int, Dim], ...]
    counts: tuple[tuple[str, int, int], ...]   # kind, min, max over runs
    duration_min: float
    duration_max: float
    longest: Longest | None
    margins: tuple[Margin, ...]
    warnings: tuple[str, ...] = field(default=())

    @property
    def margin(self) -> Margin | None:
        return min(self.margins, key=lambda m: m.ratio) if self.margins else None


def summarize(expanded: P.Expanded, device: Device, timelines: list[Timeline]) -> Summary:
    used = sorted({q for tl in timelines for s in tl.slots
                   for q in s.qubits} | {q for r in expanded.runs for q, *_ in r.prepare},
                  key=list(device.dots).index)
    qubits = tuple(_qubit_info(device, q) for q in (used or list(device.dots)))
    per_run = [Counter(s.kind for s in tl.slots) for tl in timelines]
    kinds = [k for k in KIND_ORDER if any(c[k] for c in per_run)]
    counts = tuple((k, min(c[k] for c in per_run), max(c[k] for c in per_run)) for k in kinds)
    longest: Longest | None = None
    for tl in timelines:
        for s in tl.slots:
            if s.kind in GATE_KINDS and (longest is None or s.duration > longest.duration):
                longest = Longest(s.kind, s.qubits, s.duration, s.span)
    margins = coherence_margins(timelines, device)
    warnings = [w.render("warning") for w in device.warnings]
    warnings += _leakage_warnings(device, qubits, timelines)
    warnings += _valley_gap_warnings(device)
    warnings += merged([tuple(tl.warnings) + tuple(line_warnings(tl, device))
                        for tl in timelines])
    totals = [tl.total for tl in timelines]
    axes = tuple((a.name, a.values[0], a.values[-1], len(a.values), a.dim) for a in expanded.axes)
    return Summary(expanded.file, device.name, device.path, device.field, device.temperature,
                   qubits, len(expanded.runs), axes, counts, min(totals, default=0.0),
                   max(totals, default=0.0), longest, margins, tuple(warnings))


# a burst of length T reaches a transition detuned by Δ when Δ·T < this (its spectrum's
# main lobe and first side lobes; common practice, no source)
BURST_REACH = 3.0


def _qubit_info(device: Device, q: str) -> QubitInfo:
    """A qubit's line; with a Zeeman-noise spectrum, the T2*, Hahn T2 and
    CPMG-N T2 it implies (1/e times of the filter-function integrals,
    compiler/spectra.py); for a spin–valley dot, its level ladder."""
    d = device.dots[q]
    info = QubitInfo(q, d.g, device.larmor(q), d.t1, d.t2, d.t2_star, d.preset)
    if d.zeeman_noise is not None:
        from .. import spectra
        times = spectra.implied_times(d.zeeman_noise)
        info = dataclasses.replace(info, t2=times["t2_s"], t2_star=times["t2_star_s"],
                                   spectrum=spectrum_text(d.zeeman_noise, "Hz^2/Hz"),
                                   cpmg=tuple(sorted(times["t2_cpmg_s"].items())))
    if not d.spin_valley:
        return info
    lad = device.ladders[q]
    lk = lad.leakage()
    return dataclasses.replace(info, levels=lad.energies, qubit_levels=lad.qubit,
                               leakage=lk[0] if lk else None,
                               leakage_gap=lad.leakage_gap if lk else None)


def _leakage_warnings(device: Device, qubits, timelines) -> list[str]:
    """A burst whose spectrum reaches a leakage transition of its qubit."""
    out = []
    for q in qubits:
        if q.leakage is None:
            continue
        shortest = min((s.duration for tl in timelines for s in tl.slots
                        if s.kind == "rot" and q.name in s.qubits and s.duration > 0),
                       default=None)
        if shortest is not None and q.leakage_gap * shortest < BURST_REACH:
            a, b, f, el = q.leakage
            out.append(f"warning: qubit {q.name}: the shortest burst ({fq(shortest, TIME)}) has a "
                       f"spectrum about {fq(1 / shortest, FREQUENCY)} wide, which reaches the leakage "
                       f"transition {a}->{b} at {fq(abs(f), FREQUENCY, 6)}, "
                       f"{fq(q.leakage_gap, FREQUENCY)} from the qubit transition "
                       f"(matrix element {el:.3g})\n  hint: lengthen the bursts (a Gaussian "
                       f"shape narrows the spectrum), or move the field to open the gap")
    return out


VALLEY_J_RATIO = 10.0    # the valley-polarised exchange needs the valley gap this far above J


def _valley_gap_warnings(device: Device) -> list[str]:
    """Exchange is simulated in the valley-polarised limit (J·S1·S2 on the spins,
    identity on the valleys): it needs each spin–valley dot's gap from its
    qubit levels to the other levels well above J and the drive."""
    from ..device import exchange as X
    out = []
    for c in device.couplings:
        v = c.pulse_voltage if c.pulse_voltage is not None else c.idle_voltage
        lo, hi = X.v_range(c.exchange)
        j = float(X.j_of_v(c.exchange, min(max(v, lo), hi)))
        for q in c.dots:
            d = device.dots[q]
            if not d.spin_valley:
                continue
            lad = device.ladders[q]
            gap = min(abs(lad.energies[b] - lad.energies[a]) for a in lad.qubit
                      for b in range(len(lad.energies)) if b not in lad.qubit)
            line = device.channels[d.drive.line]
            rabi = device.rabi_per_volt(q) * max(abs(line.v_min), abs(line.v_max))
            if gap < VALLEY_J_RATIO * max(j, rabi):
                out.append(f"warning: dot {q}: the gap {fq(gap, FREQUENCY)} from its qubit levels "
                           f"to the next level is not well above J = {fq(j, FREQUENCY)} "
                           f"(couplings {c.dots[0]}-{c.dots[1]}) or the full-scale Rabi "
                           f"frequency {fq(rabi, FREQUENCY)}\n  hint: exchange is simulated in "
                           "the valley-polarised limit (spins only); tilt the field or raise the "
                           "valley splitting")
    return out


def _ladder_lines(q: QubitInfo) -> list[str]:
    lo, hi = q.qubit_levels
    out = [f"  {q.name:<7} levels from the ground level: "
           + ", ".join(f"{i}: {fq(e, FREQUENCY, 6)}" for i, e in enumerate(q.levels)),
           f"          qubit: levels {lo}->{hi} at {fq(q.larmor, FREQUENCY, 7)}"]
    if q.leakage is not None:
        a, b, f, el = q.leakage
        out.append(f"          nearest leakage: {a}->{b} at {fq(abs(f), FREQUENCY, 6)} "
                   f"({fq(q.leakage_gap, FREQUENCY)} from the qubit; matrix element {el:.3g})")
    else:
        out.append("          nearest leakage: none the drive connects")
    return out


def spectrum_text(sp, unit: str) -> str:
    """S(f) in one line: '4e+08 Hz^2/Hz/f^1 + white on [1.667 mHz, inf Hz]'."""
    parts = []
    if sp.s1:
        parts.append(f"{sp.s1:.4g} {unit}" + (f"/f^{sp.beta:g}" if sp.beta else ""))
    if sp.white:
        parts.append(f"{sp.white:.4g} {unit} white")
    hi = "inf" if sp.f_high == float("inf") else fq(sp.f_high, FREQUENCY)
    return " + ".join(parts or ["0"]) + f" on [{fq(sp.f_low, FREQUENCY)}, {hi}]"


def _range(lo: int, hi: int) -> str:
    return str(lo) if lo == hi else f"{lo}..{hi}"


def render_text(s: Summary) -> str:
    out = [f"sequence  {s.sequence}",
           f"device    {s.device_name}  ({s.device_path})",
           f"          field {fq(s.field, FIELD)}, temperature {fq(s.temperature, TEMPERATURE)}",
           "",
           "qubits    g          Larmor       T1         T2 (echo)  T2*        preset"]
    for q in s.qubits:
        out.append(f"  {q.name:<7} {q.g:<10.5g} {fq(q.larmor, FREQUENCY, 7):<12} {fq(q.t1, TIME):<10} "
                   f"{fq(q.t2, TIME):<10} {fq(q.t2_star, TIME):<10} {q.preset or '-'}")
    for q in s.qubits:
        if q.spectrum:
            out.append(f"  {q.name:<7} Zeeman noise {q.spectrum}: implies T2* {fq(q.t2_star, TIME)}, "
                       f"Hahn T2 {fq(q.t2, TIME)}")
            out.append(f"  {'':<7} CPMG-N T2: " + ", ".join(f"N={n} {fq(t, TIME)}" for n, t in q.cpmg))
        if q.spin_valley:
            out += _ladder_lines(q)
    out.append("")
    if s.axes:
        for name, a, b, n, dim in s.axes:
            out.append(f"sweep     {name}: {fq(a, dim)} .. {fq(b, dim)}, {n} point{'s' * (n != 1)}")
    out.append(f"runs      {s.runs}")
    dur = fq(s.duration_max, TIME) if s.duration_min == s.duration_max else (
        f"{fq(s.duration_min, TIME)} .. {fq(s.duration_max, TIME)} over the sweep")
    out.append(f"duration  {dur}")
    out.append("steps     " + (", ".join(f"{k} {_range(lo, hi)}" for k, lo, hi in s.counts) or "none"))
    if s.longest:
        L = s.longest
        out.append(f"longest   {L.kind} {' '.join(L.qubits)}: {fq(L.duration, TIME)} (line {L.span.line}"
                   f"{'' if L.span.file == s.sequence else ' of ' + L.span.file})")
    else:
        out.append("longest   no gate in this sequence")
    if s.margins:
        out.append(f"coherence T2 / longest gate on the qubit (rule of thumb: >= {COHERENCE_RULE:.0e})")
        for m in s.margins:
            flag = "  BELOW the rule of thumb" if m.flagged else "  ok"
            out.append(f"  {m.qubit:<7} {fq(m.t2, TIME)} / {fq(m.longest, TIME)} = {m.ratio:.3g}{flag}")
    if s.warnings:
        out.append("")
    for w in s.warnings:
        out.append(w)
    return "\n".join(out)


def to_dict(s: Summary) -> dict:
    return {
        "ok": True,
        "sequence": s.sequence,
        "device": {"name": s.device_name, "path": s.device_path, "field_T": s.field,
                   "temperature_K": s.temperature},
        "qubits": [{"name": q.name, "g": q.g, "larmor_Hz": q.larmor, "t1_s": q.t1, "t2_s": q.t2,
                    "t2_star_s": q.t2_star, "preset": q.preset,
                    "levels_Hz": list(q.levels) if q.spin_valley else [0.0, q.larmor],
                    "qubit_levels": list(q.qubit_levels),
                    "leakage_gap_Hz": q.leakage_gap,
                    "t2_cpmg_s": {str(n): t for n, t in q.cpmg} if q.cpmg else None,
                    "zeeman_noise": q.spectrum or None} for q in s.qubits],
        "runs": s.runs,
        "sweeps": [{"name": n, "first": a, "last": b, "points": k, "unit": d.symbol()}
                   for n, a, b, k, d in s.axes],
        "duration_s": {"min": s.duration_min, "max": s.duration_max},
        "step_counts": {k: {"min": lo, "max": hi} for k, lo, hi in s.counts},
        "longest_gate": None if s.longest is None else {
            "kind": s.longest.kind, "qubits": list(s.longest.qubits),
            "duration_s": s.longest.duration, "file": s.longest.span.file,
            "line": s.longest.span.line, "column": s.longest.span.col},
        "coherence_margin": [{"qubit": m.qubit, "t2_s": m.t2, "longest_gate_s": m.longest,
                              "ratio": m.ratio, "below_rule_of_thumb": m.flagged}
                             for m in s.margins],
        "coherence_rule": COHERENCE_RULE,
        "warnings": list(s.warnings),
    }
