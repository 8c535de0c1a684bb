"""The sweep table as files: ``sweep.csv`` and ``sweep.json``, one writer for
``dotseq sweep`` (``--vary``) and the report of a sequence with its own
sweep.

Both list every grid point in row-major order (the first axis outermost)
with its parameter values in SI units (the unit in the column name or next
to the value), its status (``ok``, ``invalid`` with the reason, or
``missing`` in a partial table), the whole-run fidelities, the P(spin up)
of each dot at the end, what each read records (``observables``: ideal and
with the readout and preparation errors, and with shots the binomial error),
the coherence margin T2 / longest gate of each dot, the error budget when it
was computed, and the wall time of the point.  A partial table says so:
``"complete": false`` in the JSON, a first comment line ``# PARTIAL ...`` in
the CSV.
"""

from __future__ import annotations

import csv
import io
import itertools
import json
import math

from ..jsontext import jsonable
from ..physics import COHERENCE_RULE
from ..units import format_quantity
from .types import MISSING, OK, PointResult, SweepTable

FORMAT_NAME = "dotseq-sweep"
# 3: per-point warnings (CSV columns warnings, worst_warning)
# 4: per-point observables (what each read records), the fidelity scope, the axes' source
FORMAT_VERSION = 4
METRIC_TEXT = {
    "average gate fidelity": "average gate fidelity of the whole run (up to the start of its "
                             "final readout) against the ideal circuit",
    "state fidelity": "state fidelity of the whole run from the declared initial state (the "
                      "process is not computed above five dots)",
}


def best_point(table: SweepTable) -> PointResult | None:
    """The computed point with the highest fidelity (the first of equals)."""
    best = None
    for p in table.points:
        if p.status == OK and p.fidelity is not None and math.isfinite(p.fidelity):
            if best is None or p.fidelity > best.fidelity:
                best = p
    return best


def values_text(table: SweepTable, coords) -> str:
    return ", ".join(f"{a.name} = {format_quantity(v, a.dim)}" for a, v in zip(table.axes, coords))


def _dots(table: SweepTable) -> list[str]:
    dots: dict[str, None] = {}
    for p in table.points:
        for q, _ in p.populations:
            dots.setdefault(q, None)
        for c in p.coherence:
            dots.setdefault(c[0], None)
    return list(dots)


def _sources(table: SweepTable) -> list[str]:
    src: dict[str, None] = {}
    for p in table.points:
        for s, _ in p.budget:
            src.setdefault(s, None)
    return list(src)


def grid(table: SweepTable):
    """Every grid point: (index, coords, PointResult or None)."""
    have = {p.index: p for p in table.points}
    for i, coords in enumerate(itertools.product(*[a.values for a in table.axes])):
        yield i, coords, have.get(i)


def observable_labels(table: SweepTable) -> list[str]:
    """The labels of every observable of the table's points, first seen first."""
    out: dict[str, None] = {}
    for p in table.points:
        for o in p.observables:
            out.setdefault(o.label, None)
    return list(out)


def _shots(table: SweepTable) -> bool:
    return any(o.shots for p in table.points for o in p.observables)


def _head_line(table: SweepTable) -> str:
    done = len(table.points)
    state = "complete" if table.complete else "PARTIAL"
    return (f"dotseq sweep of {table.sequence} on {table.device_name}: {state}, {done} of "
            f"{table.n_points} points; fidelity = {table.metric} of the whole run"
            + (f" (of {table.scope})" if table.scope else "")
            + ("; budget = infidelity contribution of each source" if table.budget else
               "; no error budget (--budget adds it)"))


def csv_text(table: SweepTable) -> str:
    """The table as CSV: comment lines starting with '#', then a header row
    and one row per grid point (read it with e.g. ``pandas.read_csv(path,
    comment='#')``)."""
    dots = _dots(table)
    sources = _sources(table)
    buf = io.StringIO()
    buf.write(f"# {_head_line(table)}\n")
    if not table.complete:
        buf.write(f"# PARTIAL: {len(table.missing)} of {table.n_points} points missing "
                  "(status 'missing'); continue the sweep with the same arguments and --resume\n")
    w = csv.writer(buf, lineterminator="\n")
    head = ["index"] + [f"{a.name} [{a.unit}]" if a.unit else a.name for a in table.axes]
    head += ["status", "fidelity", "infidelity", "process_fidelity", "average_gate_fidelity",
             "state_fidelity"]
    labels = observable_labels(table)
    shots = _shots(table)
    head += [f"P_up {q}" for q in dots]
    for lab in labels:
        head += [f"{lab} measured", f"{lab} ideal"] + ([f"{lab} error"] if shots else [])
    head += ["duration [s]", "coherence_margin"]
    head += [f"margin {q}" for q in dots]
    if table.budget:
        head += [f"budget {s}" for s in sources] + ["budget floor", "budget remainder"]
    head += ["wall [s]", "message", "warnings", "worst_warning"]
    w.writerow(head)

    def num(x):
        return "" if x is None else repr(float(x))

    for i, coords, p in grid(table):
        row = [str(i)] + [repr(float(v)) for v in coords]
        warns = table.point_warnings.get(i, ())
        if p is None:
            row += [MISSING] + [""] * (len(head) - len(row) - 3)
            row += [str(len(warns)), warns[0][1] if warns else ""]
            w.writerow(row)
            continue
        pops = dict(p.populations)
        margins = {c[0]: c[3] for c in p.coherence}
        row += [p.status, num(p.fidelity), num(p.infidelity), num(p.process_fidelity),
                num(p.average_fidelity), num(p.state_fidelity)]
        row += [num(pops.get(q)) for q in dots]
        obs = {o.label: o for o in p.observables}
        for lab in labels:
            o = obs.get(lab)
            row += [num(o.measured if o else None), num(o.ideal if o else None)]
            if shots:
                row += [num(o.error if o else None)]
        row += [num(p.duration), num(p.margin)]
        row += [num(margins.get(q)) for q in dots]
        if table.budget:
            b = dict(p.budget)
            row += [num(b.get(s)) for s in sources] + [num(p.budget_floor),
                                                       num(p.budget_remainder)]
        row += [f"{p.wall_s:.4f}", p.message, str(len(warns)), warns[0][1] if warns else ""]
        w.writerow(row)
    return buf.getvalue()


def axis_record(a) -> dict:
    return {"name": a.name, "kind": a.kind, "unit": a.unit, "values": list(a.values),
            "spacing": a.spacing, "source": a.source, "argument": a.text,
            "text": [format_quantity(v, a.dim) for v in a.values]}


def document(table: SweepTable, *, figure: str | None = None,
             observables_figure: str | None = None) -> dict:
    """``sweep.json`` as a plain dict (every number SI); ``figure`` and
    ``observables_figure`` name the figures written beside it."""
    best = best_point(table)
    points = []
    for i, coords, p in grid(table):
        d = {"index": i, "values": {a.name: v for a, v in zip(table.axes, coords)},
             "values_text": values_text(table, coords),
             "warnings": [t for _, t in table.point_warnings.get(i, ())]}
        if p is None:
            d["status"] = MISSING
            points.append(d)
            continue
        d.update(status=p.status, message=p.message, fidelity=p.fidelity, infidelity=p.infidelity,
                 process_fidelity=p.process_fidelity, average_gate_fidelity=p.average_fidelity,
                 state_fidelity=p.state_fidelity, populations=dict(p.populations),
                 duration_s=p.duration, coherence_margin=p.margin, wall_s=p.wall_s,
                 averaging_error=p.averaging_error,
                 coherence=[{"dot": q, "t2_s": t2, "longest_gate_s": g, "ratio": r,
                             "below_rule": r < COHERENCE_RULE} for q, t2, g, r in p.coherence],
                 observables=list(p.observables))
        if table.budget:
            d.update(budget=[{"source": s, "infidelity": v} for s, v in p.budget],
                     budget_floor=p.budget_floor, budget_remainder=p.budget_remainder)
        points.append(d)
    return {
        "format": FORMAT_NAME, "format_version": FORMAT_VERSION,
        "complete": table.complete, "points_total": table.n_points,
        "points_done": len(table.points), "missing": list(table.missing),
        "sequence": table.sequence, "device": table.device_name,
        "metric": table.metric, "metric_text": METRIC_TEXT[table.metric],
        "scope": table.scope,
        "budget": table.budget, "settings": table.options,
        "axes": [axis_record(a) for a in table.axes],
        "fixed": [axis_record(a) for a in table.fixed],
        "best": None if best is None else {"index": best.index, "fidelity": best.fidelity,
                                           "values": {a.name: v for a, v in
                                                      zip(table.axes, best.coords)},
                                           "values_text": values_text(table, best.coords)},
        "coherence_rule": COHERENCE_RULE,
        "points": points, "warnings": list(table.warnings), "stats": table.stats,
        "figure": figure, "observables_figure": observables_figure, "key": table.plan_key,
    }


def json_text(table: SweepTable, *, figure: str | None = None,
              observables_figure: str | None = None) -> str:
    """The text of ``sweep.json``: sorted keys, two-space indent, newline at the end."""
    doc = document(table, figure=figure, observables_figure=observables_figure)
    return json.dumps(jsonable(doc), indent=2, sort_keys=True,
                      allow_nan=False, ensure_ascii=False) + "\n"
