"""One sweep point, as a worker computes it: a pure function of its
:class:`PointTask` (no file is read, no global state is kept between points:
a fresh engine per point), so a point gives the same numbers in this
process, in a local worker process or on a Dask worker.

Every point runs with one BLAS/OpenMP thread (:func:`compiler.threads.one_thread`):
the matrices are small, so more threads only add contention, and on a busy
machine the thread pools of several processes fighting over the same cores
make a point many times slower; one thread per worker also keeps the
floating-point operation order the same everywhere.

A point is compiled once: the plan keeps the run it compiled to check the
point in the task (``task.compiled``), within a memory bound.
"""

from __future__ import annotations

import os
import sys
import time
import traceback

from .. import RECOMPILER, compile_run
from ..margin import coherence_margins
from ..errors import DotseqError
from ..simulate.engines import ClusterTooLarge, make_engine
from ..simulate.memory import too_large_error
from ..simulate.run import error_budget, evaluate_whole
from ..simulate.sources import ALL_ON
from ..threads import one_thread
from .types import ERROR, INVALID, OK, PointResult, PointTask

THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                    "BLIS_NUM_THREADS", "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS")

_allocator_checked = False
M_TRIM_THRESHOLD, M_MMAP_THRESHOLD = -1, -3       # glibc mallopt parameters (malloc.h)


def _allocator_for_arrays() -> None:
    """Undo a fixed small trim threshold once per process.

    Dask's nanny starts its workers with ``MALLOC_TRIM_THRESHOLD_=65536``;
    setting it also freezes glibc's mmap threshold at 128 KiB, so every
    array above that is mapped and unmapped again, and each use pays its page
    faults anew: a point ran 30 to 50 % slower on this machine.  When the
    variable is set, the thresholds are raised with ``mallopt`` (arrays up to
    32 MiB are then reused from the heap).  Elsewhere glibc's own adaptive
    thresholds are left alone; other C libraries are not touched."""
    global _allocator_checked
    if _allocator_checked:
        return
    _allocator_checked = True
    if "MALLOC_TRIM_THRESHOLD_" not in os.environ or not sys.platform.startswith("linux"):
        return
    try:
        import ctypes
        libc = ctypes.CDLL(None)
        libc.mallopt(M_MMAP_THRESHOLD, 32 << 20)
        libc.mallopt(M_TRIM_THRESHOLD, 64 << 20)
    except (OSError, AttributeError):   # not glibc
        pass


def coherence(tl, device) -> tuple[tuple[str, float, float, float], ...]:
    """T2 over the longest gate on each dot of one timeline (the margin
    ``dotseq check`` prints)."""
    return tuple(m.as_tuple()[:4] for m in coherence_margins([tl], device))


def _first_line(err: DotseqError) -> str:
    p = err.first
    where = f"{p.span}: " if p.span is not None and p.span.line > 0 else ""
    return f"{err.stage}: {where}{p.message}" + (f" (hint: {p.hint})" if p.hint else "")


def simulate_point(task: PointTask) -> PointResult:
    """The whole-run fidelities (and, with ``task.budget``, the error budget)
    of one point; raises what the stages raise."""
    t0 = time.perf_counter()
    opts = task.options
    crun = task.compiled or compile_run(task.run, task.device)
    tl = crun.timeline
    # the point's share of the sweep's memory limit (plan.py): the plan
    # estimated the first two quadrature rules; a finer one the averaging or
    # the budget asks for is refused here, before it runs (an invalid point)
    engine = make_engine(opts.engine, exchange_accuracy=opts.exchange_accuracy,
                         memory_limit=opts.memory_limit)
    try:
        whole = evaluate_whole(crun, ALL_ON, opts, engine)
        fid = whole.f_avg if whole.f_avg is not None else whole.f_state
        budget = ()
        floor = remainder = None
        if task.budget:
            lines, floor, remainder, _ = error_budget(crun, opts, engine, whole, RECOMPILER.run)
            budget = tuple((b.source, float(b.infidelity)) for b in lines)
            floor, remainder = float(floor), float(remainder)
    except ClusterTooLarge as e:
        raise too_large_error(e.info, subject="this point's simulation",
                              limit_note=" for a point") from None
    return PointResult(
        task.index, task.coords, OK, "", float(fid), float(whole.infidelity),
        None if whole.f_pro is None else float(whole.f_pro),
        None if whole.f_avg is None else float(whole.f_avg), float(whole.f_state),
        tuple((q, float(p)) for q, p in whole.pops.items()), float(whole.duration),
        coherence(tl, task.device), budget, floor, remainder, time.perf_counter() - t0,
        averaging_error=whole.averaging_error, observables=tuple(whole.observables))


def evaluate_point(task: PointTask) -> PointResult:
    """:func:`simulate_point` with one BLAS thread, never raising for a
    point's own trouble: inputs a stage refuses give an ``invalid`` result
    with the reason, anything else (a bug) an ``error`` result with the
    exception, which the sweep reports and does not keep."""
    t0 = time.perf_counter()
    _allocator_for_arrays()
    try:
        with one_thread():
            return simulate_point(task)
    except DotseqError as e:
        return PointResult(task.index, task.coords, INVALID, _first_line(e),
                           wall_s=time.perf_counter() - t0)
    except Exception as e:  # noqa: BLE001 - reported with the point, never lost silently
        tb = traceback.extract_tb(e.__traceback__)
        at = f" at {os.path.basename(tb[-1].filename)}:{tb[-1].lineno}" if tb else ""
        return PointResult(task.index, task.coords, ERROR, f"{type(e).__name__}: {e}{at}",
                           wall_s=time.perf_counter() - t0)


PARENT_POLL_S = 0.2     # how often a local worker looks whether its parent still runs


def worker_started(parent: int | None = None) -> None:
    """Initializer of a local worker process: Ctrl-C is the parent's to
    handle (it stops the workers itself), so the worker ignores SIGINT.

    With ``parent`` (the sweep's process id) a watchdog thread ends this
    worker at once when that process is gone (killed with SIGKILL, it
    cannot stop its workers itself).  The worker waits on the sentinel
    ``multiprocessing`` gives it of the process that started it (the
    sweep's process holds the other end of that pipe, so it reads end of
    file when that process ends, however it ends); a worker forked from the
    fork server is that server's child, so its parent process id says
    nothing.  Without a sentinel it looks every ``PARENT_POLL_S`` whether it
    was re-parented.  Once the sweep's process and every worker have ended,
    the fork server and the multiprocessing resource tracker (which wait for
    the last holder of their pipes) end too."""
    import multiprocessing
    import signal
    import threading
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if parent is None:
        return
    starter = multiprocessing.parent_process()
    if starter is not None and starter.pid == parent:
        from multiprocessing.connection import wait

        def watch() -> None:
            wait([starter.sentinel])
            os._exit(1)
    else:
        def watch() -> None:
            while True:
                time.sleep(PARENT_POLL_S)
                if os.getppid() != parent:
                    os._exit(1)
    threading.Thread(target=watch, name="dotseq-parent-watchdog", daemon=True).start()


def worker_info() -> dict:
    """What a worker reports about itself (version check, thread count)."""
    from .. import __version__
    try:
        threads = len(os.listdir("/proc/self/task"))
    except OSError:
        threads = -1
    return {"dotseq_version": __version__, "pid": os.getpid(), "threads": threads,
            "env": {k: os.environ.get(k, "") for k in THREAD_VARIABLES}}
