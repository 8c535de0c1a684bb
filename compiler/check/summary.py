"""What `dotseq check` tells a physicist about a sequence on a device."""

from __future__ import annotations

from collections import Counter
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
    spectrum: str = ""                           # the Zeeman-noise spectrum, as text
    cpmg: tuple[tuple[int, float], ...] = ()     # (N, CPMG-N T2 in s) it implies


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
    qubits = tuple(_qubit(device, q) for q in (used or list(device.dots)))
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
    warnings += merged([tuple(tl.warnings) + tuple(line_warnings(tl, device))
                        for tl in timelines])
    totals = [tl.total for tl in timelines]
    axes = tuple((a.name, a.values[0], a.values[-1], len(a.values), a.dim) for a in expanded.axes)
    return Summary(expanded.file, device.name, device.path, device.field, device.temperature,
                   qubits, len(expanded.runs), axes, counts, min(totals, default=0.0),
                   max(totals, default=0.0), longest, margins, tuple(warnings))


def _qubit(device: Device, q: str) -> QubitInfo:
    """A qubit's line; with a Zeeman-noise spectrum, the T2*, Hahn T2 and
    CPMG-N T2 it implies (1/e times of the filter-function integrals,
    compiler/spectra.py)."""
    d = device.dots[q]
    if d.zeeman_noise is None:
        return QubitInfo(q, d.g, device.larmor(q), d.t1, d.t2, d.t2_star, d.preset)
    from .. import spectra
    times = spectra.implied_times(d.zeeman_noise)
    return QubitInfo(q, d.g, device.larmor(q), d.t1, times["t2_s"], times["t2_star_s"], d.preset,
                     spectrum_text(d.zeeman_noise, "Hz^2/Hz"),
                     tuple(sorted(times["t2_cpmg_s"].items())))


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
