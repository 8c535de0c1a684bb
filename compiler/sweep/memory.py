"""The memory check of a sweep: every point's simulation is estimated
while the sweep is planned, before any point is simulated, with the fast
engine's own estimate (:func:`compiler.simulate.engines.fast.plan_estimate`,
the one ``dotseq simulate`` makes before it starts), and the whole sweep is
refused when a point would not fit (docs/sweep.md, "Memory").

The limit is the sweep's (``--memory-limit``, default half the memory
available); the local worker processes compute their points at the same
time, so each point gets the limit divided by the number of processes
(:func:`per_point_limit`).  On a Dask cluster every point gets the whole
limit: it is then the memory of one worker."""

from __future__ import annotations

import dataclasses

from ..limits import human
from ..simulate.build import build_model
from ..simulate.engines.fast import plan_estimate
from ..simulate.memory import too_large_error
from ..simulate.model import noise_points
from ..simulate.run import (MAX_PROCESS_QUBITS, SimOptions, end_sample, evaluations,
                            quadrature_rule)
from ..simulate.sources import ALL_ON


def per_point_limit(limit: int, processes: int) -> int:
    """Bytes one point may take when ``processes`` points run at once."""
    return max(1, limit // max(1, processes))


def point_estimate(crun, options: SimOptions, limit: int) -> dict | None:
    """The fast engine's estimate of one point, as
    :func:`compiler.simulate.engines.fast.plan_estimate` gives it: the
    whole-run model (every source on, ``options``' sub-steps and RWA) and
    the evaluations of the first two quadrature rules every point averages
    with (``options.nodes`` − 2 and ``options.nodes`` nodes per variable;
    one rule with one node or without noise), each rule's points as the
    simulation hands them to the engine (:func:`compiler.simulate.run.evaluations`:
    one variable at a time, or all at once), with the process when the
    register has at most ``MAX_PROCESS_QUBITS`` dots (then without the
    gate-band modes, which are evaluated apart).  A finer rule that the
    averaging may ask for later is checked by the point's own engine.
    ``limit``: bytes for the point (0: not checked).  None for the reference
    engine and for dots of more than two levels (``dotseq simulate``
    estimates neither); without couplings every cluster is one dot and the
    model is not built."""
    tl, device = crun.timeline, crun.device
    if options.engine != "fast" or any(d.spin_valley for d in device.dots.values()):
        return None
    n = len(device.dots)
    process = n <= MAX_PROCESS_QUBITS
    if not device.couplings:      # no exchange: every cluster is one dot; the state alone
        state = 8 * 4 ** n * ((4 ** n if process else 0) + 1) * 2
        return {"estimate": {"clusters": 0, "bytes": state, "flops": 0.0, "largest": None,
                             "seconds": 0.0}, "too_large": None, "slow": None, "seconds": 0.0}
    model = build_model(crun.waveforms, device, switches=ALL_ON, m=options.substeps, start=0,
                        stop=end_sample(tl), rwa=options.rwa)
    if any(lv != 2 for lv in model.levels):
        return None
    noisy = any(v.rms > 0 for v in model.noise)
    rules = ({max(1, options.nodes - 2), options.nodes} if noisy and options.nodes > 1
             else {options.nodes})
    sets: list = []
    for nodes in sorted(rules):
        pts = noise_points(model, nodes,
                           quadrature_rule(device, dataclasses.replace(options, nodes=nodes)))
        if process:
            pts = [p for p in pts if not p.modes] or pts
            sets += evaluations(pts)
        else:
            sets.append((pts, True))
    return plan_estimate(model, sets, process=process,
                         exchange_accuracy=options.exchange_accuracy, memory_limit=limit)


def limit_note(limit: int, processes: int) -> str:
    """How the point's limit came about (after "above the limit of X")."""
    if processes <= 1:
        return " for a point"
    return (f" for a point (--memory-limit {human(limit)} shared by the {processes} points "
            "computed at once by the local worker processes)")


def refusal(fails: list[tuple[str, dict]], total: int, limit: int, processes: int):
    """The error refusing a sweep whose points ``fails`` (point label, the
    ``ClusterTooLarge`` info) would not fit, the first named in full."""
    label, info = fails[0]
    n = len(fails)
    others = [lb for lb, _ in fails[1:4]]
    after = ""
    if n > 1:
        after = (f"; {n} of {total} points would not fit (also at " + "; ".join(others)
                 + ("; ..." if n > 4 else "") + ")")
    more = ()
    fit = min(limit // max(1, max(i["bytes"] for _, i in fails)), processes - 1)
    if processes > 1 and fit >= 1:      # fewer points at once would make them fit
        more = (f"compute fewer points at once (--workers {fit}"
                + (", or --workers 1 to give each point the whole limit" if fit > 1 else "")
                + ")",)
    err = too_large_error(info, subject=f"sweep refused before starting: the point at {label}",
                          limit_note=limit_note(limit, processes), after=after,
                          more_fixes=more)
    return err


def slow_warning(slow: list[tuple[str, float, str]], total: int) -> tuple[str, ...]:
    """One line naming the slowest of the points whose evaluation the engine
    estimates at 20 s or more (label, seconds, the engine's text)."""
    if not slow:
        return ()
    label, _, text = max(slow, key=lambda s: s[1])
    text = text.removeprefix("slow: ")
    return (f"{len(slow)} of {total} points are slow to simulate; the slowest, at {label}: "
            f"{text}",)
