"""Running a planned sweep into its output folder: every finished point is
recorded at once (``points.jsonl``), the tables and the figure are written
at the end, complete or not."""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

from ..sweeptable import figure as FIG
from . import store
from .execute import DEFAULT_CLUSTER_TIMEOUT, WorkersLost, connect, run_dask, run_pool, run_serial
from .point import evaluate_point
from .table import csv_text, json_text, make_table
from .types import ERROR, PointResult, SweepPlan, SweepTable

COMPLETE, INTERRUPTED, LOST, FAILED = "complete", "interrupted", "workers lost", "failed"


class _Quiet:
    def start(self, total: int, done: int) -> None: ...
    def advance(self, result: PointResult) -> None: ...
    def close(self) -> None: ...


@dataclass
class SweepOutcome:
    """What :func:`run_sweep` did.

    ``status``: ``complete`` (every point has a result), ``interrupted``
    (Ctrl-C), ``workers lost`` (a local worker died, or points were lost on
    the cluster), ``failed`` (some points raised an internal error: a bug,
    reported in ``errors``; they are not kept and ``--resume`` retries them).
    """
    table: SweepTable
    folder: Path
    files: dict[str, Path]
    status: str
    computed: int                      # points computed in this run
    resumed: int                       # points read back from the state file
    errors: tuple[PointResult, ...] = ()
    lost: tuple[tuple[int, str], ...] = ()
    stats: dict = field(default_factory=dict)


def run_sweep(plan: SweepPlan, out, *, workers: int = 1, cluster: str | None = None,
              resume: bool = False, progress=None, point_fn=evaluate_point,
              command: str = "dotseq sweep",
              cluster_timeout: float = DEFAULT_CLUSTER_TIMEOUT) -> SweepOutcome:
    """Compute the points of ``plan`` that are not yet in the folder ``out``
    and write ``sweep.csv``, ``sweep.json`` and ``sweep.png`` there.

    Parameters
    ----------
    plan : SweepPlan
        From :func:`compiler.sweep.plan_sweep`.
    out : str or Path
        Output folder: absent, empty, an earlier finished sweep (replaced),
        or with ``resume`` the same sweep unfinished.
    workers : int
        1: in this process; more: that many local processes.  Ignored with
        ``cluster``.
    cluster : str, optional
        ``tcp://HOST:PORT`` of a Dask scheduler to compute on.
    cluster_timeout : float
        Seconds to reach the scheduler and hear it answer (default 10).
    resume : bool
        Continue the unfinished sweep in ``out`` (refused when its inputs
        differ from ``plan``'s).
    progress : object, optional
        With ``start(total, done)``, ``advance(point)``, ``close()``.
    point_fn : callable
        The function computing one :class:`PointTask` (tests count calls).

    Returns
    -------
    SweepOutcome
        Also after Ctrl-C (``status == "interrupted"``): the partial table is
        written first.

    Raises
    ------
    SweepError
        Unusable output folder, a state file of another sweep, an
        unreachable cluster.
    UsageError
        ``cluster`` without Dask installed.
    """
    progress = progress or _Quiet()
    connection = connect(cluster, cluster_timeout) if cluster else None     # before anything is written
    try:
        folder = store.Folder(out, plan, resume, command)
    except BaseException:
        if connection is not None:
            connection[0].close()
        raise
    t0 = time.perf_counter()
    done: dict[int, PointResult] = dict(folder.resumed)
    resumed = len(done)
    errors: list[PointResult] = []
    lost: list[tuple[int, str]] = []
    computed = 0
    status = COMPLETE
    stats: dict = {}

    def on_result(r: PointResult) -> None:
        nonlocal computed
        if r.status == ERROR:
            errors.append(r)
        elif r.index not in done:
            folder.record(r)
            done[r.index] = r
            computed += 1
        progress.advance(r)

    def on_failure(index: int, reason: str) -> None:
        lost.append((index, reason))

    pending = [t for t in plan.tasks if t.index not in done]
    try:
        progress.start(plan.n_points, resumed)
        try:
            if not pending:
                stats = {"backend": "none (nothing left to compute)", "workers": 0}
            elif connection is not None:
                stats = run_dask(pending, on_result, on_failure, connection, point_fn)
                connection = None
            elif workers <= 1 or len(pending) == 1:
                stats = run_serial(pending, on_result, point_fn)
            else:
                stats = run_pool(pending, on_result, min(workers, len(pending)), point_fn)
        except KeyboardInterrupt:
            status = INTERRUPTED
        except WorkersLost as e:
            status = LOST
            lost.append((-1, str(e)))
        finally:
            progress.close()
        if status == COMPLETE and lost:
            status = LOST
        if status == COMPLETE and errors:
            status = FAILED
        wall = time.perf_counter() - t0
        walls = [p.wall_s for p in done.values()]
        stats.update(wall_s=wall, points_computed=computed, points_resumed=resumed,
                     point_wall_mean_s=sum(walls) / len(walls) if walls else None)
        if folder.dropped:
            stats["state_lines_dropped"] = folder.dropped
        table = make_table(plan, done.values(), stats)
        files = write_tables(folder, table)
    finally:
        folder.close()
        if connection is not None:
            connection[0].close()
    return SweepOutcome(table, folder.path, files, status, computed, resumed, tuple(errors),
                        tuple(lost), stats)


def write_tables(folder: "store.Folder", table: SweepTable) -> dict[str, Path]:
    """``sweep.png`` (when a point was computed), ``observables.png`` (when
    the points record observables), ``sweep.json``, ``sweep.csv``, each
    written whole and renamed into place (the shared writer and figures of
    :mod:`compiler.sweeptable`)."""
    files: dict[str, Path] = {}
    drawing_error = None
    drawn = {}
    for key, name, build in (("png", store.PNG_NAME, FIG.figure),
                             ("observables", store.OBSERVABLES_NAME, FIG.observables_figure)):
        try:
            png = FIG.png_bytes(table, build)
        except Exception as e:  # noqa: BLE001 - the tables are written first, then it is raised
            png, drawing_error = None, drawing_error or e
        if png is not None:
            files[key] = folder.write(name, png)
            drawn[key] = name
        else:
            try:
                (folder.path / name).unlink()
            except OSError:
                pass
    files["json"] = folder.write(store.JSON_NAME, json_text(
        table, figure=drawn.get("png"), observables_figure=drawn.get("observables")
    ).encode("utf-8"))
    files["csv"] = folder.write(store.CSV_NAME, csv_text(table).encode("utf-8"))
    if drawing_error is not None:
        raise drawing_error
    return files
