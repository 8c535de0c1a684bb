"""From a sequence file and ``--vary``/``--set`` arguments to a checked
:class:`SweepPlan`: every point is expanded, checked against its device,
scheduled and synthesised before anything is simulated, so a value that breaks a physical
constraint or a channel limit refuses the whole sweep up front, naming the
value (nothing is half computed)."""

from __future__ import annotations

import hashlib
import itertools
from pathlib import Path

from .. import __version__, compile_run
from ..check import check
from ..device import device_of
from ..device.model import Device
from ..errors import MAX_SHOWN, Problem, DotseqError, UsageError
from ..expand import expand
from ..limits import MAX_SOURCE_CHARS, budget as memory_budget, default_limit
from ..parse import parse_path
from ..parse import tree as T
from ..simulate.run import SimOptions
from ..source import Oversize, Unreadable, read_capped
from ..units import format_quantity
from . import memory as MEM
from . import params as PR
from .spec import MAX_POINTS, si_symbol, split_arg, to_spec
from .types import PointTask, SweepPlan, VarySpec

MAX_AXES = 2
# the points' compiled runs are kept in their tasks (each point is compiled
# once, here) while their samples take at most this much memory; beyond it a
# point is compiled again where it is simulated
KEEP_COMPILED_BYTES = 256 * 2 ** 20


def compiled_bytes(crun) -> int:
    """Memory of a compiled run's stored samples (constant outputs are views: 0)."""
    total = 0
    for out in crun.waveforms.outputs.values():
        for a in (out.stored_volts, out.codes, out.stored_ideal, out.marks):
            if a is not None and a.ndim and a.strides[0] != 0:
                total += a.nbytes
    for a in crun.waveforms.per_dot.values():
        total += getattr(a, "nbytes", 0)
    return total


def point_label(axes, coords) -> str:
    """``field = 1.2 T, tau = 200 ns``."""
    return ", ".join(f"{a.name} = {format_quantity(v, a.dim)}" for a, v in zip(axes, coords))


def _includes(body, out: list) -> list:
    for s in body:
        if isinstance(s, T.Include):
            out.append(s.file)
            _includes(s.body, out)
    return out


def _sha256(paths) -> str:
    h = hashlib.sha256()
    for p in paths:
        try:    # files already read once: regular files, within the source cap
            data = read_capped(p, 4 * MAX_SOURCE_CHARS)
        except (Unreadable, Oversize):
            data = b""
        h.update(hashlib.sha256(data).digest())
    return h.hexdigest()


def sim_settings(opts: SimOptions) -> dict:
    return {"engine": opts.engine, "nodes": opts.nodes, "quadrature": opts.quadrature,
            "substeps": opts.substeps, "rwa": opts.rwa,
            "averaging_tolerance": opts.averaging_tolerance,
            "exchange_accuracy": opts.exchange_accuracy,
            # the points' fidelities and observables depend on these too (--resume compares)
            "fidelity_scope": opts.fidelity_scope, "shots": opts.shots}


def _spec_record(s: VarySpec) -> dict:
    return {"name": s.name, "kind": s.kind, "unit": s.unit, "values": list(s.values),
            "spacing": s.spacing, "source": s.source}


def plan_sweep(path: str | Path, vary: list[str] | tuple[str, ...] = (),
               fixed: list[str] | tuple[str, ...] = (), *, device: str | Path | None = None,
               options: SimOptions = SimOptions(), budget: bool = False,
               confine: bool = False, memory_limit: int | None = None,
               processes: int = 1) -> SweepPlan:
    """Read, check and lay out a sweep.

    Parameters
    ----------
    path : str or Path
        The sequence file.
    vary : list of str
        ``--vary`` arguments, e.g. ``"field=0.5T:1.5T:11"`` (docs/sweep.md).
    fixed : list of str
        ``--set`` arguments, e.g. ``"A.t2=40us"``.
    device : str or Path, optional
        Device file instead of the sequence's own.
    options : SimOptions
        Simulation settings used at every point (``budget`` and ``steps``
        inside it are ignored).
    budget : bool
        Compute the error budget of every point (about ten evaluations each).
    memory_limit : int, optional
        Bytes the sweep may take (default ``options.memory_limit`` or, when
        that is 0, half the memory available): it bounds the text read and
        the steps expanded, and every point's simulation is estimated
        against its share (module :mod:`.memory`).
    processes : int
        Points computed at the same time on this machine (the local worker
        processes; 1 in this process or on a Dask cluster): each point gets
        the limit divided by this (by the number of points when fewer).

    Returns
    -------
    SweepPlan
        Axes: every ``--vary`` in the order given, then the file's own
        sweeps that no ``--vary``/``--set`` names; points row-major, the first
        axis outermost.

    Raises
    ------
    UsageError
        Bad argument text, unknown or repeated names, wrong units, more than
        two axes or none, a point that breaks a physical constraint.
    SimulationError
        A point whose simulation would not fit its share of the memory limit
        (the error names the point, the cluster and the fixes).
    DotseqError
        The sequence or device is wrong, or a point cannot be checked or
        scheduled (the error names the point's values).
    """
    options.check()
    limit = int(memory_limit or options.memory_limit or default_limit())
    front = memory_budget(limit)
    raws = [split_arg(t, "--vary") for t in vary] + [split_arg(t, "--set") for t in fixed]
    tree = parse_path(path, budget=front, confine=confine)
    expanded = expand(tree, budget=front)
    dev0 = device_of(expanded, device, confine=confine)
    dev_path = str(dev0.path)
    device_ps = PR.device_params(dev0)
    seq_ps = PR.sequence_params(tree, expanded)

    specs: list[VarySpec] = []
    seen: dict[str, str] = {}
    for raw in raws:
        p = PR.resolve(raw.name, raw.text, raw.flag, dev0, device_ps, seq_ps)
        if p.name in seen:
            raise UsageError(f"{raw.flag} '{raw.text}': {p.name} is already given ({seen[p.name]})",
                             hint="give each parameter once")
        seen[p.name] = f"{raw.flag} {raw.text}"
        if p.dim is None:
            raise UsageError(f"{raw.flag} '{raw.text}': cannot tell the unit of {p.what} "
                             f"({p.where})", hint="give it a plain value in the file")
        specs.append(to_spec(raw, p.name, p.kind, p.dim))
    n_vary = len(vary)
    axes = [s for s in specs[:n_vary]]
    sets = [s for s in specs[n_vary:]]
    for ax in expanded.axes:
        if ax.name not in seen:
            axes.append(VarySpec(ax.name, "sequence", tuple(ax.values), ax.dim, si_symbol(ax.dim),
                                 f"sweep in {Path(str(path)).name}", "list", "file"))
    if not axes:
        raise UsageError(f"nothing to sweep: {path} has no sweep and no --vary is given",
                         hint="add e.g. --vary field=0.5T:1.5T:11 (see: dotseq sweep --help)")
    if len(axes) > MAX_AXES:
        names = ", ".join(f"{a.name} ({'file' if a.source == 'file' else '--vary'}, "
                          f"{a.points} points)" for a in axes)
        file_axes = [a.name for a in axes if a.source == "file"]
        hint = (f"pin the file's sweep with --set {file_axes[0]}=VALUE, or vary fewer "
                "parameters" if file_axes else "vary at most two parameters per sweep")
        raise UsageError(f"a sweep has one or two axes, this one would have {len(axes)}: {names}",
                         hint=hint)
    total = 1
    for a in axes:
        total *= a.points
    if total > MAX_POINTS:
        raise UsageError(f"the sweep has {total} points, above the limit of {MAX_POINTS}",
                         hint="use fewer points per parameter")
    # the points computed at once share the limit; each worker's engine checks
    # its point against its share too (a finer quadrature rule than the
    # estimated one is refused at the point, not run out of memory)
    at_once = max(1, min(processes, total))
    point_limit = MEM.per_point_limit(limit, at_once)
    options = SimOptions(engine=options.engine, rwa=options.rwa, substeps=options.substeps,
                         nodes=options.nodes, quadrature=options.quadrature,
                         averaging_tolerance=options.averaging_tolerance, budget=False,
                         steps=False, fidelity_scope=options.fidelity_scope,
                         shots=options.shots, exchange_accuracy=options.exchange_accuracy,
                         memory_limit=point_limit)

    seq_fixed = {s.name: (s.values[0], s.dim) for s in sets if s.kind == "sequence"}
    dev_fixed = {s.name: s.values[0] for s in sets if s.kind == "device"}
    base_problems = {cid for cid, _, _ in PR.constraints(dev0)}
    base_cautions = {cid for cid, _ in PR.cautions(dev0)}

    expanded_cache: dict[tuple, object] = {}
    device_cache: dict[tuple, tuple[Device, bool]] = {}
    scheduled: dict[tuple, object] = {}        # compiled run, or the error
    kept = 0
    run_warnings: dict[tuple, tuple] = {}
    per_point: dict[int, tuple] = {}
    worst_at: tuple = ()          # (index, severity, point label) of the worst warning
    constraint_fails: dict[str, list[tuple[str, str, str]]] = {}
    caution_hits: dict[str, list[str]] = {}
    stage_errors: list[tuple[DotseqError, str]] = []
    estimates: dict[tuple, dict | None] = {}
    memory_fails: list[tuple[str, dict]] = []
    slow: list[tuple[str, float, str]] = []
    largest = None                # bytes of the largest point estimated
    tasks: list[PointTask] = []
    for index, coords in enumerate(itertools.product(*[a.values for a in axes])):
        label = point_label(axes, coords)
        dev_label = point_label(*zip(*[(a, v) for a, v in zip(axes, coords)
                                       if a.kind == "device"])) if any(
            a.kind == "device" for a in axes) else "the --set values"
        seq_vals = dict(seq_fixed)
        dev_vals = dict(dev_fixed)
        for a, v in zip(axes, coords):
            if a.kind == "sequence":
                seq_vals[a.name] = (v, a.dim)
            else:
                dev_vals[a.name] = v
        skey = tuple(sorted((k, v[0]) for k, v in seq_vals.items()))
        dkey = tuple(sorted(dev_vals.items()))
        if dkey not in device_cache:
            dev = PR.apply_device(dev0, dev_vals)
            bad = [(cid, msg, hint) for cid, msg, hint in PR.constraints(dev)
                   if cid not in base_problems]
            device_cache[dkey] = (dev, bool(bad))
            for cid, msg, hint in bad:
                constraint_fails.setdefault(cid, []).append((dev_label, msg, hint))
            for cid, msg in PR.cautions(dev):
                if cid not in base_cautions:
                    caution_hits.setdefault(cid, []).append(f"{msg} at {dev_label}")
        dev, refused = device_cache[dkey]
        if refused:
            continue
        if skey not in expanded_cache:
            try:
                expanded_cache[skey] = expand(PR.override(tree, seq_vals), budget=front)
            except DotseqError as e:
                expanded_cache[skey] = e
        ex = expanded_cache[skey]
        if isinstance(ex, DotseqError):
            stage_errors.append((ex, label))
            continue
        if len(ex.runs) != 1:  # every file sweep is an axis or pinned: cannot happen
            raise RuntimeError(f"expected one run per sweep point, got {len(ex.runs)}")
        ck = (skey, dkey)
        if ck not in scheduled:
            try:
                check(ex, dev)
                crun = compile_run(ex.runs[0], dev)   # schedule, synthesise: channel limits
                scheduled[ck] = crun
                run_warnings[ck] = point_warnings_of(crun.timeline, dev)
                # before it may be dropped below: the simulation's own estimate
                estimates[ck] = MEM.point_estimate(crun, options, point_limit)
            except DotseqError as e:
                scheduled[ck] = e
        if isinstance(scheduled[ck], DotseqError):
            stage_errors.append((scheduled[ck], label))
            continue
        got = estimates.get(ck)
        if got is not None:
            if got["too_large"] is not None:
                memory_fails.append((label, got["too_large"]))
                continue
            largest = max(largest or 0, got["estimate"]["bytes"])
            if got["slow"]:
                slow.append((label, got["seconds"], got["slow"]))
        crun = scheduled[ck]
        if crun is not True and kept + compiled_bytes(crun) > KEEP_COMPILED_BYTES:
            scheduled[ck] = crun = True            # checked; compiled again at the point
        if crun is True:
            crun = None
        else:
            kept += compiled_bytes(crun)
        tasks.append(PointTask(index, tuple(coords), ex.runs[0], dev, options, budget, crun))
        if run_warnings.get(ck):
            per_point[index] = run_warnings[ck]
            if not worst_at or per_point[index][0][0] > worst_at[1]:
                worst_at = (index, per_point[index][0][0], label)

    if constraint_fails:
        raise _constraint_error(constraint_fails, len(device_cache))
    if stage_errors:
        raise _stage_error(stage_errors, total)
    if memory_fails:
        raise MEM.refusal(memory_fails, total, limit, at_once)

    key = {"format": "dotseq-sweep-key", "dotseq_version": __version__,
           "sequence_sha256": _sha256([tree.file] + _includes(tree.body, [])),
           "device_sha256": _sha256([dev_path]), "device_name": dev0.name,
           "axes": [_spec_record(a) for a in axes], "fixed": [_spec_record(s) for s in sets],
           "options": sim_settings(options), "budget": bool(budget)}
    # no quadrature caution: every point's average over quasi-static noise is
    # refined to the stated tolerance (simulate.run.evaluate_whole)
    warnings = (tuple(_caution_lines(caution_hits)) + _worst_point_warning(per_point, worst_at, total)
                + MEM.slow_warning(slow, total))
    memory = {"limit_bytes": limit, "points_at_once": at_once, "point_limit_bytes": point_limit,
              "largest_point_bytes": largest}
    return SweepPlan(str(path), dev0.name, dev_path, tuple(axes), tuple(sets), tuple(tasks),
                     options, bool(budget), key, warnings, per_point, memory)


def point_warnings_of(tl, device) -> tuple[tuple[float, str], ...]:
    """The warnings `dotseq check` gives for one compiled run (the
    scheduler's and the drive-line checks), worst first: (severity, text)."""
    from ..check.lines import line_warnings
    seen: dict[str, tuple[float, str]] = {}
    for w in tuple(tl.warnings) + tuple(line_warnings(tl, device)):
        text = w.render()
        if w.key not in seen or w.severity > seen[w.key][0]:
            seen[w.key] = (float(w.severity), text)
    return tuple(sorted(seen.values(), key=lambda x: -x[0]))


def _worst_point_warning(per_point: dict, worst_at: tuple, total: int) -> tuple[str, ...]:
    """One line naming the worst warning of any point, and how many points warn."""
    if not per_point:
        return ()
    idx, _, where = worst_at
    text = per_point[idx][0][1].replace("warning: ", "", 1)
    return (f"{len(per_point)} of {total} points have warnings (column 'warnings' of the "
            f"table); the worst, at {where}: {text}",)


def _caution_lines(hits: dict[str, list[str]]) -> list[str]:
    out = []
    for cid, lines in hits.items():
        more = len(lines) - 1
        out.append(lines[0] + (f" (and {more} more point{'s' * (more != 1)})" if more else ""))
    return out


def _constraint_error(fails: dict[str, list[tuple[str, str, str]]], total: int) -> UsageError:
    problems = []
    for cid, items in fails.items():
        label, msg, hint = items[0]
        n = len(items)
        where = (f"at {n} of {total} device settings, the first at {label}" if n > 1 else
                 f"at {label}")
        problems.append(Problem(f"sweep refused before starting: {msg} {where}", None, hint))
    return UsageError(problems)


def _stage_error(errors: list[tuple[DotseqError, str]], total: int) -> DotseqError:
    first, _ = errors[0]
    seen: dict[tuple, list] = {}
    for err, label in errors:
        for p in err.problems:
            seen.setdefault((p.message, p.span), [p, []])[1].append(label)
    problems = []
    for (_, _), (p, labels) in seen.items():
        shown = "; ".join(labels[:3]) + (f"; and {len(labels) - 3} more" if len(labels) > 3 else "")
        ctx = p.context + (f"at {len(labels)} of {total} sweep points: {shown}",)
        problems.append(Problem(p.message, p.span, p.hint, p.source_line, ctx))
        if len(problems) >= MAX_SHOWN:
            break
    return type(first)(problems)
