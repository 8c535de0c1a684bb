"""The text of a simulation report: the summary printed on the terminal and
``report.md``.

Both are rendered from the same sections (:func:`sections`): a title, a few
lines, an optional table and notes.  The terminal gets plain aligned columns
(ASCII apart from what the result itself holds); Markdown gets headings and
pipe tables.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any, Sequence

from ..preview.style import CAUTION_TEXT
from ..simulate.run import MAX_REFINED_NODES
from ..simulate.types import RunResult, SimulationResult
from .data import jsonable
from ..numfmt import (fmt_fidelity, fmt_infidelity, fmt_percent, fmt_population, fmt_ratio,
                      fmt_sci, fmt_time_number, fmt_value, time_unit)
from .fmt import (COHERENCE_RULE, budget_mismatch, budget_rows, best_index, detail_index,
                  has_budget, is_below, sweep_metric)

MAX_DOTS_IN_SWEEP_TABLE = 6   # P(up) columns of the sweep table
ENGINES = {"reference": "reference (qutip mesolve)", "fast": "fast"}

# Unit suffixes of settings and statistics keys: wall_time_s -> "wall time", seconds.
_SUFFIX_UNITS = (("_Hz", "Hz"), ("_s", "s"), ("_V", "V"), ("_T", "T"), ("_K", "K"),
                 ("_rad", "rad"))


@dataclass(frozen=True)
class Table:
    """Rows of text cells; ``justify`` holds ``l`` or ``r`` per column."""

    headers: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    justify: str


@dataclass(frozen=True)
class Section:
    """One part of the report.  ``lines`` are sentences, ``items`` short
    entries (bullets in Markdown), ``notes`` come after the table."""

    title: str
    lines: tuple[str, ...] = ()
    items: tuple[str, ...] = ()
    table: Table | None = None
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class _Look:
    md: bool
    micro: str
    minus_f: str       # header "1 − F"
    arrow: str


_TEXT = _Look(False, "u", "1 - F", "->")
_MD = _Look(True, "µ", "1 − F", "→")


# ---------------------------------------------------------------- values

def _key_and_unit(key: str) -> tuple[str, str]:
    for suffix, unit in _SUFFIX_UNITS:
        if key.endswith(suffix) and len(key) > len(suffix):
            return key[: -len(suffix)], unit
    return key, ""


def fmt_entry(key: str, value: Any, micro: str = "µ") -> tuple[str, str]:
    """A settings or statistics entry as ``(name, value)`` text.

    Keys ending in ``_s``, ``_Hz``, ``_V``, ``_T``, ``_K``, ``_rad`` are
    read as SI values of that unit and printed with a prefix
    (``wall_time_s: 12.3`` -> ``("wall time", "12.3 s")``); underscores
    become spaces.
    """
    name, unit = _key_and_unit(str(key))
    name = name.replace("_", " ")
    if isinstance(value, bool):
        return name, "yes" if value else "no"
    if isinstance(value, int):
        return name, str(value) + (f" {unit}" if unit else "")
    if isinstance(value, float):
        if unit and math.isfinite(value):
            return name, fmt_value(value, unit, 4, micro)
        return name, f"{value:.4g}" + (f" {unit}" if unit else "")
    if isinstance(value, str):
        return name, value
    if isinstance(value, (list, tuple)) and all(isinstance(v, (str, int, float)) for v in value):
        return name, ", ".join(str(v) if not isinstance(v, float) else f"{v:.4g}" for v in value)
    try:
        return name, json.dumps(jsonable(value), sort_keys=True, ensure_ascii=False)
    except (TypeError, ValueError):
        return name, str(value)


def _run_title(result: SimulationResult, i: int, look: _Look) -> str:
    run = result.runs[i]
    where = ", ".join(f"{n} = {fmt_value(v, _unit_of(result, n), 4, look.micro)}"
                      for n, v in run.sweep)
    return f"run {run.run_index}" + (f" ({where})" if where else "")


def _unit_of(result: SimulationResult, name: str) -> str:
    for n, _, unit in result.axes:
        if n == name:
            return unit
    return ""


def _esc(text: str) -> str:
    out = str(text).replace("\\", "\\\\")
    for ch in "|*_`":
        out = out.replace(ch, "\\" + ch)
    return out.replace("<", "&lt;").replace("\n", " ")


# ---------------------------------------------------------------- sections

def _header(result: SimulationResult, look: _Look) -> Section:
    items = [f"sequence: {result.sequence}",
             f"device: {result.device_name}",
             f"engine: {ENGINES.get(result.engine, result.engine)}, rotating-wave "
             f"approximation {'on' if result.rwa else 'off'}",
             f"runs: {len(result.runs)}"]
    for name, values, unit in result.axes:
        vals = list(values)
        if vals:
            rng = fmt_value(vals[0], unit, 4, look.micro)
            if len(vals) > 1:
                rng += f" .. {fmt_value(vals[-1], unit, 4, look.micro)}"
            items.append(f"sweep {name}: {rng}, {len(vals)} point{'s' * (len(vals) != 1)}")
    if result.settings and not look.md:
        items.append("settings: " + ", ".join(
            f"{k} {v}" for k, v in (fmt_entry(k, result.settings[k], look.micro)
                                    for k in sorted(result.settings))))
    return Section("simulation", items=tuple(items))


def _settings(result: SimulationResult, look: _Look) -> Section | None:
    if not result.settings:
        return None
    rows = tuple(fmt_entry(k, result.settings[k], look.micro) for k in sorted(result.settings))
    return Section("settings", table=Table(("setting", "value"), rows, "ll"))


def _whole_run(result: SimulationResult, i: int, look: _Look) -> Section:
    run = result.runs[i]
    rows = [("process fidelity", fmt_fidelity(run.process_fidelity),
             fmt_infidelity(run.process_fidelity)),
            ("average gate fidelity", fmt_fidelity(run.average_fidelity),
             fmt_infidelity(run.average_fidelity)),
            ("state fidelity", fmt_fidelity(run.state_fidelity),
             fmt_infidelity(run.state_fidelity))]
    for dot, p in _populations(run):
        rows.append((f"P(up) of dot {dot} at readout", fmt_population(p), ""))
    lines = [f"simulated span {fmt_value(run.duration, 's', 4, look.micro)} (to the start of "
             "the final readout)", scope_line(result, i)]
    lines.append(averaging_line(result, run))
    lines.append(substep_line(result, run))
    notes = []
    if run.process_fidelity is None:
        notes.append("process fidelity not computed (more than five qubits)")
    return Section(f"whole run: {_run_title(result, i, look)}", lines=tuple(lines),
                   table=Table(("quantity", "value", look.minus_f), tuple(rows), "lrr"),
                   notes=tuple(notes))


def scope_line(result: SimulationResult, i: int) -> str:
    """Which qubits the whole-run fidelities of run ``i`` are of."""
    run = result.runs[i]
    q = tuple(run.fidelity_qubits)
    if not q or set(q) >= set(run.dots):
        return "fidelities of the whole register (" + ", ".join(run.dots) + ")"
    idle = [d for d in run.dots if d not in q]
    return (f"fidelities of the qubit{'s' * (len(q) != 1)} the program acts on ({', '.join(q)}); "
            f"idle spectator{'s' * (len(idle) != 1)} {', '.join(idle)} traced out "
            "(--whole-register counts them)")


def _observables(result: SimulationResult, look: _Look, max_rows: int | None) -> Section | None:
    """What each trailing read records, per run: ideal (a perfect readout of
    the simulated state), measured (with the readout and preparation errors),
    and with shots the binomial error and the expected counts."""
    runs = [r for r in result.runs if r.observables]
    if not runs:
        return None
    sweep = len(result.runs) > 1
    shots = any(o.shots for r in runs for o in r.observables)
    names = []
    for r in runs:
        for n, _ in r.sweep:
            if n not in names:
                names.append(n)
    headers = (("run",) + tuple(names) if sweep else ()) + (
        "observable", "ideal", "measured") + (("± 1σ", "counts") if shots else ()) + ("target",)
    rows = []
    for r in runs:
        sw = dict(r.sweep)
        for o in r.observables:
            lead = ((str(r.run_index),) + tuple(
                fmt_value(sw[n], _unit_of(result, n), 4, look.micro) if n in sw else ""
                for n in names)) if sweep else ()
            extra = ((fmt_population(o.error) if o.error is not None else "",
                      f"{o.counts:.1f} of {o.shots}" if o.counts is not None else "")
                     if shots else ())
            rows.append(lead + (_esc(o.label) if look.md else o.label, fmt_population(o.ideal),
                                fmt_population(o.measured)) + extra
                        + (fmt_population(o.target),))
    notes = []
    if max_rows is not None and len(rows) > max_rows:
        notes.append(f"{len(rows) - max_rows} more lines in results.json (observables)")
        rows = rows[:max_rows]
    lines = ("what each read at the end of a run records: ideal = a perfect readout of the "
             "simulated state; measured = with the device's preparation and readout errors; "
             "target = the ideal circuit" + ("; ± 1σ: binomial, counts: expected" if shots else ""),)
    lead_j = ("r" + "r" * len(names)) if sweep else ""
    return Section("observables", lines=lines,
                   table=Table(headers, tuple(rows), lead_j + "lrr" + ("rr" if shots else "") + "r"),
                   notes=tuple(notes))


def substep_line(result: SimulationResult, run: RunResult) -> str:
    """The stated error of the piecewise-constant sub-step model (from the
    error budget's floor run with twice the sub-steps), beside the
    fidelities it affects."""
    num = float(getattr(run, "budget_numerical_error", 0.0) or 0.0)
    m = result.settings.get("substeps_per_sample")
    if num <= 0:
        return ("sub-step model error not estimated for this run (only a run with its budget "
                "gets the floor run at twice the sub-steps that estimates it)")
    tol = result.settings.get("averaging_tolerance")
    more = ""
    if tol is not None and num > tol and m:
        more = (f"; above the averaging tolerance {tol:.1e}: --substeps {2 * int(m)} should "
                "lower it about fourfold")
    return (f"sub-step model error about {num:.1e} in fidelity ({m} sub-steps per sample; "
            f"4/3·|F(m) - F(2m)| of the error budget's floor run, plus the bound on residual "
            f"exchange){more}")


def averaging_line(result: SimulationResult, run: RunResult) -> str:
    """The stated accuracy of the average over quasi-static noise."""
    tol = result.settings.get("averaging_tolerance")
    err = run.averaging_error
    if err is None:
        return "quasi-static noise not averaged (one quadrature node): its share is not in these figures"
    if err == 0 and run.nodes <= 1:
        return "no quasi-static noise to average"
    m = run.compared_nodes
    if tol is not None and err > tol:
        over = (f"; ABOVE the tolerance {tol:.1e}: even {run.nodes} nodes (the most) do not "
                "average this run to it (free evolution long against T2*, or exchange long "
                "against its charge noise): the figures are uncertain by about this much"
                if run.nodes >= MAX_REFINED_NODES else
                f"; ABOVE the tolerance {tol:.1e}: give --nodes higher")
    else:
        over = f" (tolerance {tol:.1e})" if tol is not None else ""
    return (f"averaging error {err:.1e} in fidelity (|F({run.nodes}) - F({m})| of "
            f"the rules of {run.nodes} and {m} nodes per noise variable: Gauss-Hermite "
            f"below 17 nodes, equispaced from 17){over}; with several variables averaged "
            "one at a time (as a product of corrections: exact to second order in the noise, "
            "and exactly when the corrections commute) their higher cross terms are not in it")


def _populations(run: RunResult) -> list[tuple[str, float]]:
    pops = dict(run.populations or {})
    order = [d for d in run.dots if d in pops] + sorted(k for k in pops if k not in run.dots)
    return [(d, float(pops[d])) for d in order]


def _sweep(result: SimulationResult, look: _Look, max_rows: int | None) -> Section:
    runs = result.runs
    best = best_index(result)
    metric, _ = sweep_metric(result)
    names = []
    for r in runs:
        for n, _ in r.sweep:
            if n not in names:
                names.append(n)
    dots: list[str] = []
    for r in runs:
        for d, _ in _populations(r):
            if d not in dots:
                dots.append(d)
    shown_dots = dots[:MAX_DOTS_IN_SWEEP_TABLE]
    headers = (("run",) + tuple(names) + ("F process", "F average", "F state", "avg. error")
               + tuple(f"P(up) {d}" for d in shown_dots) + ("",))
    order = list(range(len(runs)))
    notes = []
    if max_rows is not None and len(order) > max_rows:
        keep = set(order[: max(max_rows - 1, 1)])
        if best is not None:
            keep.add(best)
        notes.append(f"{len(order) - len(keep)} more runs are in results.json")
        order = sorted(keep)
    rows = []
    for i in order:
        r = runs[i]
        sw = dict(r.sweep)
        pops = dict(_populations(r))
        rows.append((str(r.run_index),)
                    + tuple(fmt_value(sw[n], _unit_of(result, n), 4, look.micro) if n in sw else ""
                            for n in names)
                    + (fmt_fidelity(r.process_fidelity), fmt_fidelity(r.average_fidelity),
                       fmt_fidelity(r.state_fidelity),
                       "n/a" if r.averaging_error is None else f"{r.averaging_error:.1e}")
                    + tuple(fmt_population(pops[d]) if d in pops else "" for d in shown_dots)
                    + (("best" if not look.md else "**best**") if i == best else "",))
    if len(dots) > len(shown_dots):
        notes.append(f"P(up) of {len(dots) - len(shown_dots)} more dots in results.json")
    lines = (f"one line per run; best = highest {metric} fidelity",
             scope_line(result, best if best is not None else 0))
    return Section("runs", lines=lines,
                   table=Table(headers, tuple(rows), "r" + "r" * len(names) + "rrrr"
                               + "r" * len(shown_dots) + "l"),
                   notes=tuple(notes))


def _steps(result: SimulationResult, i: int, look: _Look, max_rows: int | None) -> Section | None:
    run = result.runs[i]
    if not run.steps:
        return None
    steps = list(run.steps)
    ts, tu = time_unit(max((s.start + s.duration for s in steps), default=0.0), look.micro)
    ds, du = time_unit(max((s.duration for s in steps), default=0.0), look.micro)
    notes = []
    if max_rows is not None and len(steps) > max_rows:
        worst = sorted(range(len(steps)), key=lambda k: (steps[k].fidelity, k))[:max_rows]
        notes.append(f"showing the {max_rows} steps with the largest infidelity of {len(steps)}; "
                     "all are in results.json")
        steps = [steps[k] for k in sorted(worst)]
    headers = ("#", "step", "qubits", f"start ({tu})", f"duration ({du})", "fidelity",
               look.minus_f)
    justify = "rllrrrr"
    rows = []
    for s in steps:
        row = (str(s.index), s.label or s.kind, " ".join(s.qubits),
               fmt_time_number(s.start, ts), fmt_time_number(s.duration, ds),
               fmt_fidelity(s.fidelity), fmt_infidelity(s.fidelity))
        if look.md:
            row = row + (s.source,)
        rows.append(row)
    if look.md:
        headers += ("source",)
        justify += "l"
    worst = min(run.steps, key=lambda s: s.fidelity)
    lines = ("average gate fidelity of each step simulated alone on the whole register "
             "against its ideal operation",)
    notes.insert(0, f"worst step: #{worst.index} {worst.label or worst.kind} "
                    f"({look.minus_f} = {fmt_infidelity(worst.fidelity)})")
    return Section(f"steps: {_run_title(result, i, look)}", lines=lines,
                   table=Table(headers, tuple(rows), justify), notes=tuple(notes))


def _budget(result: SimulationResult, i: int, look: _Look, top: int | None) -> Section | None:
    run = result.runs[i]
    if not has_budget(run):
        return None
    rows = budget_rows(run, top)
    table_rows = []
    for b in rows:
        row = (b.label, fmt_sci(b.value), fmt_percent(b.share))
        if look.md:
            row = row + (b.note,)             # table_markdown escapes every cell
        table_rows.append(row)
    total_row = ("total", fmt_sci(run.budget_total),
                 fmt_percent(100.0 if run.budget_total != 0.0 else None))
    table_rows.append(total_row + (("infidelity with every source on",) if look.md else ()))
    headers = ("source", "infidelity", "share") + (("what it is",) if look.md else ())
    lines = (f"total infidelity {fmt_sci(run.budget_total)} with every source on; a source's "
             "contribution is the total minus the infidelity with that source off",)
    notes = []
    mismatch = budget_mismatch(run)
    if abs(mismatch) > 1e-9 * max(abs(run.budget_total), 1e-12) + 1e-15:
        notes.append(f"the lines do not add up to the total: difference {fmt_sci(mismatch)}")
    num = float(getattr(run, "budget_numerical_error", 0.0) or 0.0)
    if num > 0:
        # with nothing else acting the floor *is* the sub-step error, which the
        # estimate matches to its rounding (+-1 %, measured): only a floor
        # below twice the estimate is past what the estimate can explain
        state = ("; the negative floor is within twice it (a fidelity above 1 is not claimed)"
                 if run.budget_floor < 0 and -run.budget_floor <= 2 * num else
                 ("; the floor is NEGATIVE BEYOND twice it: worth reporting with the input files"
                  if run.budget_floor < 0 else ""))
        notes.append(f"numerical error of the floor and of each line: about {fmt_sci(num)} "
                     f"(sub-step model, from the floor run with twice the sub-steps, plus the "
                     f"bound on residual exchange, dropped or treated as weak){state}")
    if any(b.value < 0 for b in rows):
        notes.append("a negative contribution means the run is better with that source on "
                     "(or, for the remainder, that sources partly cancel)")
    return Section(f"error budget: {_run_title(result, i, look)}", lines=lines,
                   table=Table(headers, tuple(table_rows), "lrr" + ("l" if look.md else "")),
                   notes=tuple(notes))


def _coherence(result: SimulationResult, look: _Look) -> Section | None:
    if not result.coherence:
        return None
    rows = []
    for dot, t2, gate, ratio, flagged in result.coherence:
        rows.append((str(dot), fmt_value(t2, "s", 4, look.micro),
                     fmt_value(gate, "s", 4, look.micro), fmt_ratio(ratio),
                     "BELOW" if is_below(ratio, flagged) else "ok"))
    return Section("coherence margin",
                   lines=(f"T2 / longest gate on the dot; rule of thumb: at least "
                          f"{fmt_ratio(COHERENCE_RULE)} (common practice)",),
                   table=Table(("dot", "T2", "longest gate", "T2 / gate", "check"), tuple(rows),
                               "lrrrl"))


def _warnings(result: SimulationResult) -> Section | None:
    if not result.warnings:
        return None
    return Section("warnings", items=tuple(str(w) for w in result.warnings))


def _stats(result: SimulationResult, i: int | None, look: _Look) -> Section | None:
    items = [": ".join(fmt_entry(k, result.stats[k], look.micro)) for k in sorted(result.stats)]
    if i is not None and result.runs[i].stats:
        st = result.runs[i].stats
        label = f"run {result.runs[i].run_index}"
        items += [f"{label} {': '.join(fmt_entry(k, st[k], look.micro))}" for k in sorted(st)]
    if not items:
        return None
    return Section("run statistics", items=tuple(items))


def sections(result: SimulationResult, *, top: int | None = 5, markdown: bool = False,
             max_rows: int | None = None) -> tuple[Section, ...]:
    """The parts of a report, in order.

    Parameters
    ----------
    result : SimulationResult
    top : int, optional
        Error sources listed one by one (the rest are merged); None: all.
    markdown : bool
        Markdown look (micro sign, an extra source column, settings table)
        rather than the terminal's.
    max_rows : int, optional
        Longest sweep and step tables; longer ones are cut (the best run and
        the worst steps kept) with a note.  None: no limit.

    Returns
    -------
    tuple of Section
    """
    look = _MD if markdown else _TEXT
    out: list[Section | None] = [None if markdown else _header(result, look)]
    if markdown:
        out.append(_settings(result, look))
    d = detail_index(result)
    if d is None:
        out.append(Section("runs", lines=("no runs were simulated",)))
    elif len(result.runs) == 1:
        out.append(_whole_run(result, d, look))
    else:
        out.append(_sweep(result, look, max_rows))
    out.append(_observables(result, look, max_rows))
    if d is not None:
        out.append(_steps(result, d, look, max_rows))
        out.append(_budget(result, d, look, top))
    out.append(_coherence(result, look))
    out.append(_warnings(result))
    out.append(_stats(result, d, look))
    return tuple(s for s in out if s is not None)


# ---------------------------------------------------------------- rendering

def table_text(t: Table, indent: str = "  ") -> list[str]:
    """A table as aligned plain-text lines (header, rule, rows)."""
    cols = len(t.headers)
    widths = [max([len(t.headers[c])] + [len(r[c]) for r in t.rows]) for c in range(cols)]

    def line(cells: Sequence[str]) -> str:
        parts = [c.rjust(w) if a == "r" else c.ljust(w)
                 for c, w, a in zip(cells, widths, t.justify)]
        return (indent + "  ".join(parts)).rstrip()

    return [line(t.headers), (indent + "  ".join("-" * w for w in widths)).rstrip()] + \
        [line(r) for r in t.rows]


def table_markdown(t: Table) -> list[str]:
    """A table as Markdown pipe-table lines."""
    rule = {"l": ":---", "r": "---:"}
    out = ["| " + " | ".join(_esc(h) for h in t.headers) + " |",
           "|" + "|".join(rule.get(a, "---") for a in t.justify) + "|"]
    for r in t.rows:
        out.append("| " + " | ".join(c if c.startswith("**") else _esc(c) for c in r) + " |")
    return out


def render_text(parts: Sequence[Section]) -> str:
    """Sections as terminal text."""
    out: list[str] = []
    for s in parts:
        if out:
            out.append("")
        out.append(s.title)
        out += [f"  {x}" for x in s.lines]
        out += [f"  {x}" for x in s.items]
        if s.table is not None:
            out += table_text(s.table)
        out += [f"  {x}" for x in s.notes]
    return "\n".join(out) + "\n"


def summary_text(result: SimulationResult, *, top: int = 5, max_rows: int | None = 100) -> str:
    """What ``dotseq simulate`` prints: the run's (or sweep's) fidelities, the
    per-step table, the top error sources, the coherence margins, warnings
    and run statistics.

    Parameters
    ----------
    result : SimulationResult
    top : int
        Error sources listed one by one, by contribution; the others are
        merged into one ``other`` line.  The floor and the interaction
        remainder are always listed.
    max_rows : int, optional
        Longest sweep and step tables (the best run and the worst steps are
        kept); None: no limit.

    Returns
    -------
    str
        Plain text ending in a newline.

    Notes
    -----
    For a sweep there is one line per run (process, average gate and state
    fidelity, P(up) per dot, the best run marked), then the steps and the
    budget of the run that holds a budget (else the first run).
    """
    return render_text(sections(result, top=top, markdown=False, max_rows=max_rows))


def render_markdown(result: SimulationResult, *, figures: Sequence[tuple[str, str]] = ()) -> str:
    """The text of ``report.md``.

    Parameters
    ----------
    result : SimulationResult
    figures : sequence of (str, str)
        ``(file name, caption)`` of every figure written beside it.

    Returns
    -------
    str
        Markdown ending in a newline.
    """
    look = _MD
    out = [f"# Simulation report: {_esc(result.sequence)}", ""]
    head = [f"- device: {_esc(result.device_name)}",
            f"- engine: {_esc(ENGINES.get(result.engine, result.engine))}; rotating-wave "
            f"approximation {'on' if result.rwa else 'off'}",
            f"- runs: {len(result.runs)}"]
    for name, values, unit in result.axes:
        vals = list(values)
        if vals:
            rng = fmt_value(vals[0], unit, 4, look.micro) + (
                f" .. {fmt_value(vals[-1], unit, 4, look.micro)}" if len(vals) > 1 else "")
            head.append(f"- sweep {_esc(name)}: {rng}, {len(vals)} point{'s' * (len(vals) != 1)}")
    out += head + ["", f"> **Caution.** This is a simulation of the compiled sequence on the "
                       f"device model, not a measurement. {CAUTION_TEXT}", ""]
    for s in sections(result, top=None, markdown=True, max_rows=None):
        out += [f"## {_esc(s.title[0].upper() + s.title[1:])}", ""]
        if s.lines:
            out += [" ".join(_esc(x) for x in s.lines), ""]
        if s.items:
            out += [f"- {_esc(x)}" for x in s.items] + [""]
        if s.table is not None:
            out += table_markdown(s.table) + [""]
        for x in s.notes:
            out += [f"*{_esc(x)}*", ""]
    out += ["## Figures", ""]
    if figures:
        for name, caption in figures:
            out += [f"### {_esc(caption)}", "", f"![{_esc(caption)}]({name})", ""]
    else:
        out += ["No figures: this result holds no budget, steps, traces or sweep.", ""]
    out += ["All numbers, with full precision, are in [results.json](results.json).", ""]
    return "\n".join(out)
