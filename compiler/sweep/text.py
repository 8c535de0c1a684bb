"""What ``dotseq sweep`` prints: the plan before it runs, the outcome after,
and the progress on stderr while it runs (plain text; no computation)."""

from __future__ import annotations

import os
import sys

from ..limits import human
from ..physics import COHERENCE_RULE
from ..numfmt import fmt_fidelity, fmt_ratio, fmt_sci
from ..units import format_quantity
from .table import best_point, grid, values_text
from .types import INVALID, OK


class Progress:
    """Progress of a sweep on ``stream`` (stderr): a tqdm bar (points done,
    rate, time left) on a terminal; without one a plain line about every
    tenth of the points; nothing when not ``enabled``."""

    def __init__(self, enabled: bool = True, stream=None):
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self.bar = None
        self.done = self.total = self.next_line = 0

    def start(self, total: int, done: int) -> None:
        self.total, self.done = total, done
        if not self.enabled or done >= total:
            return
        if getattr(self.stream, "isatty", lambda: False)():
            from tqdm import tqdm
            try:
                cols = os.get_terminal_size(self.stream.fileno()).columns
            except (OSError, ValueError, AttributeError):
                cols = 0
            # a terminal of unknown size (0 x 0) would hide the bar: give it one
            size = {"dynamic_ncols": True} if cols > 0 else {"ncols": 100, "nrows": 24}
            self.bar = tqdm(total=total, initial=done, unit="pt", desc="sweep", file=self.stream,
                            smoothing=0.1, **size)
        else:
            self.next_line = done + max(1, total // 10)

    def advance(self, point) -> None:
        self.done += 1
        if self.bar is not None:
            self.bar.update(1)
        elif self.enabled and self.done >= self.next_line:
            print(f"sweep: {self.done}/{self.total} points", file=self.stream, flush=True)
            self.next_line = self.done + max(1, self.total // 10)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def range_text(a) -> str:
    """``0 s .. 2 us, 5 points`` (one value: the value)."""
    if a.points == 1:
        return format_quantity(a.values[0], a.dim)
    kind = {"log": ", log spaced", "list": ""}.get(a.spacing, "")
    return (f"{format_quantity(a.values[0], a.dim)} .. {format_quantity(a.values[-1], a.dim)}, "
            f"{a.points} points{kind}")


def plan_lines(plan, file: str, where: str) -> list[str]:
    """The plan: axes, fixed values, points, settings, where it runs, warnings."""
    o = plan.options
    out = [f"sweep     {file} on {plan.device_name} ({plan.device_path})"]
    for a in plan.axes:
        out.append(f"axis      {a.name}: {range_text(a)}"
                   + ("  (the file's sweep)" if a.source == "file" else ""))
    for a in plan.fixed:
        out.append(f"fixed     {a.name} = {format_quantity(a.values[0], a.dim)}")
    out.append(f"points    {plan.n_points}" + (f" ({' x '.join(map(str, plan.shape))})"
                                                if len(plan.shape) > 1 else ""))
    out.append(f"settings  {o.engine} engine, {o.nodes} quadrature node{'s' * (o.nodes != 1)} "
               f"({o.quadrature}), {o.substeps} sub-step{'s' * (o.substeps != 1)} per sample"
               + ("" if o.rwa else ", no RWA") + "; "
               + ("whole-run fidelity and error budget" if plan.budget else
                  "whole-run fidelity (--budget adds the error budget)"))
    out.append(f"workers   {where}")
    mem = plan.memory or {}
    if mem.get("largest_point_bytes") is not None:
        shared = mem.get("points_at_once", 1)
        out.append(f"memory    about {human(mem['largest_point_bytes'])} for the largest point "
                   f"(estimated), limit {human(mem['point_limit_bytes'])} per point"
                   + (f" ({human(mem['limit_bytes'])} shared by {shared} points at once)"
                      if shared > 1 else ""))
    out += [f"warning: {w}" for w in plan.warnings]
    return out


def outcome_lines(outcome) -> list[str]:
    """What was computed: counts, best and worst point, margin, files (stdout)."""
    table, stats = outcome.table, outcome.stats
    per = stats.get("point_wall_mean_s")
    out = [f"done      {len(table.points)} of {table.n_points} points"
           + (f" ({outcome.resumed} from the earlier run)" if outcome.resumed else "")
           + f" in {stats.get('wall_s', 0):.1f} s"
           + (f"; {per:.3g} s per point of compute" if per else "")]
    invalid = [p for p in table.points if p.status == INVALID]
    if invalid:
        out.append(f"invalid   {len(invalid)} point(s), e.g. at "
                   f"{values_text(table, invalid[0].coords)}: {invalid[0].message}")
    best = best_point(table)
    ok = [p for p in table.points if p.status == OK]
    if best is not None:
        worst = min(ok, key=lambda p: p.fidelity)
        out.append(f"best      F = {fmt_fidelity(best.fidelity)} (1 - F = "
                   f"{fmt_sci(best.infidelity)}) at {values_text(table, best.coords)}")
        out.append(f"worst     F = {fmt_fidelity(worst.fidelity)} at "
                   f"{values_text(table, worst.coords)}")
        out.append(f"          F = {table.metric} of the whole run against the ideal circuit"
                   + (f", of {table.scope}" if table.scope else ""))
        margins = [p.margin for p in ok if p.margin is not None]
        if margins:
            lo, hi = min(margins), max(margins)
            out.append(f"margin    T2 / longest gate {fmt_ratio(lo)}"
                       + (f" .. {fmt_ratio(hi)}" if hi != lo else "")
                       + ("  BELOW the rule of thumb of 1e4 at some points"
                          if lo < COHERENCE_RULE else ""))
        if best.budget:
            top = sorted(best.budget, key=lambda b: -b[1])[:3]
            out.append("sources   at the best point: "
                       + ", ".join(f"{s} {fmt_sci(v)}" for s, v in top))
    if table.point_warnings:
        idx = max(table.point_warnings, key=lambda i: table.point_warnings[i][0][0])
        coords = next(c for i, c, _ in grid(table) if i == idx)
        text = table.point_warnings[idx][0][1].replace("warning: ", "", 1)
        out.append(f"warnings  {len(table.point_warnings)} of {table.n_points} points (column "
                   f"'warnings'); the worst, at {values_text(table, coords)}: {text}")
    out += [f"{k:<9} {path}" for k, path in sorted(outcome.files.items())]
    return out


def problem_lines(outcome, command: str) -> list[str]:
    """Internal errors, lost points and, for an unfinished sweep, how to
    continue (stderr)."""
    table = outcome.table
    out = []
    if outcome.errors:
        e = outcome.errors[0]
        out.append(f"dotseq: internal error at {len(outcome.errors)} point(s), e.g. at "
                   f"{values_text(table, e.coords)}: {e.message}. This is a bug in dotseq; those "
                   "points are not in the table (--resume retries them).")
    for idx, why in outcome.lost[:3]:
        out.append(f"dotseq: lost {'point ' + str(idx) if idx >= 0 else 'workers'}: "
                   + " ".join(why.split()))
    if len(outcome.lost) > 3:
        out.append(f"dotseq: ... and {len(outcome.lost) - 3} more lost")
    if outcome.status != "complete":
        what = {"interrupted": "interrupted", "workers lost": "stopped: workers lost",
                "failed": "incomplete"}[outcome.status]
        out.append(f"dotseq: sweep {what}; {len(table.points)} of {table.n_points} points done, "
                   f"{len(table.missing)} missing; the partial table is written (marked partial) "
                   f"in {outcome.folder}\ncontinue with:\n  {command}")
    return out
