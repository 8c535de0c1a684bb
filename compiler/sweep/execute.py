"""Where the points are computed: in this process, in a pool of local worker
processes, or on an existing Dask distributed cluster.  The three give the
same numbers (every point is a pure function of its task, computed with one
BLAS thread; tests/test_sweep.py compares them exactly).

Each backend calls ``on_result(PointResult)`` in this process as points
finish (in any order).  Ctrl-C raises ``KeyboardInterrupt`` here after the
workers are stopped and every point that had finished was handed over; a
lost local worker raises :class:`WorkersLost` the same way.  On a Dask
cluster a lost worker's tasks are rerun by Dask itself; a point that still
fails (or a lost scheduler) is handed to ``on_failure(index, reason)`` and
left missing.
"""

from __future__ import annotations

import multiprocessing
import multiprocessing.forkserver
import os
import secrets
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager

from ..errors import UsageError
from .errors import fail
from ..threads import one_thread
from .point import THREAD_VARIABLES, evaluate_point, worker_info, worker_started

CLUSTER_VARIABLE = "DOTSEQ_CLUSTER"
DASK_HINT = "install the optional extra: pip install 'dotseq[dask]'"


class WorkersLost(Exception):
    """A local worker process died (killed, out of memory); the finished
    points were handed over before this is raised."""


def local_cores() -> int:
    """Cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


@contextmanager
def child_threads():
    """Make worker processes started inside this block use one BLAS/OpenMP
    thread from their first import of numpy (they inherit the environment)."""
    old = {k: os.environ.get(k) for k in THREAD_VARIABLES}
    os.environ.update({k: "1" for k in THREAD_VARIABLES})
    try:
        yield
    finally:
        for k, v in old.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


# What a local worker needs, imported once by the fork server that starts the
# workers: the sweep's and rb's point functions with what they load, and the
# libraries the stages import on first use (integrate: noise spectra;
# threadpoolctl: one_thread).  A worker is then a
# fork of a process that has it all, ready in milliseconds, instead of a
# fresh interpreter importing numpy, scipy, qutip and dotseq (1 to 1.5 s
# each, on cores the other workers need; the first-use imports were another
# 0.3 s of CPU in every worker).
PRELOAD = ("compiler.sweep.point", "compiler.benchmarking.run", "compiler.simulate.run",
           "compiler.simulate.engines.fast", "scipy.integrate",
           "threadpoolctl")


def pool_context():
    """The ``multiprocessing`` context of the local pool, with its fork
    server started (once per process; the import of :data:`PRELOAD` then
    runs there while this process goes on, e.g. plans the sweep).

    The server starts with one BLAS/OpenMP thread in its environment
    (:func:`child_threads`), so it and every worker forked from it keep
    one; nothing is inherited from this process but what the tasks carry.
    Where there is no fork server (not POSIX), workers are spawned."""
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    ctx = multiprocessing.get_context("forkserver")
    ctx.set_forkserver_preload(list(PRELOAD))
    with child_threads():
        multiprocessing.forkserver.ensure_running()
    return ctx


def run_serial(tasks, on_result, point_fn=evaluate_point) -> dict:
    """Every point in this process, in order."""
    with one_thread():
        for t in tasks:
            on_result(point_fn(t))
    return {"backend": "serial", "workers": 1}


def _stop_pool(ex: ProcessPoolExecutor) -> None:
    """Stop the workers now (a running point is abandoned, not waited for)."""
    procs = list((getattr(ex, "_processes", None) or {}).values())
    for p in procs:
        try:
            p.terminate()
        except Exception:  # noqa: BLE001 - already gone
            pass
    ex.shutdown(wait=False, cancel_futures=True)
    for p in procs:
        try:
            p.join(timeout=5)
        except Exception:  # noqa: BLE001
            pass


def run_pool(tasks, on_result, workers: int, point_fn=evaluate_point) -> dict:
    """The points on ``workers`` local processes (forked from the fork server
    of :func:`pool_context`, one BLAS thread each)."""
    ctx = pool_context()
    handed: set = set()
    with child_threads():
        ex = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=worker_started,
                                 initargs=(os.getpid(),))
        futures = {}

        def harvest() -> None:
            for f in list(futures):
                if f in handed or not f.done() or f.cancelled() or f.exception() is not None:
                    continue
                handed.add(f)
                on_result(f.result())

        try:
            for t in tasks:
                futures[ex.submit(point_fn, t)] = t.index
            pending = set(futures)
            while pending:
                done, pending = wait(pending, return_when=FIRST_COMPLETED)
                for f in sorted(done, key=lambda f: futures[f]):
                    r = f.result()         # BrokenProcessPool when a worker died
                    handed.add(f)
                    on_result(r)
        except KeyboardInterrupt:
            harvest()
            _stop_pool(ex)
            raise
        except BrokenProcessPool as e:
            harvest()
            _stop_pool(ex)
            raise WorkersLost(f"a local worker process stopped unexpectedly ({e})") from None
        except BaseException:
            _stop_pool(ex)
            raise
        ex.shutdown(wait=True)
    return {"backend": "local processes", "workers": workers}


def require_dask():
    """Dask's ``distributed`` module, or a usage error with the install hint."""
    try:
        import distributed
    except ImportError:
        raise UsageError("--cluster needs Dask's distributed scheduler, which is not installed",
                         hint=DASK_HINT) from None
    return distributed


DEFAULT_CLUSTER_TIMEOUT = 10.0      # seconds to reach a Dask scheduler and hear it answer
SCHEMES = ("tcp", "tls")            # Dask's network protocols dotseq accepts in --cluster


def check_address(address: str) -> str:
    """``address`` when it reads as SCHEME://HOST:PORT with a Dask network
    scheme (tcp, tls); a bare HOST:PORT gets tcp://.  Checked before
    anything is planned or written.

    Raises
    ------
    UsageError
        Another scheme (http, ...), no host or no port.
    """
    text = address.strip()
    scheme, sep, rest = text.partition("://")
    if not sep:
        scheme, rest = "tcp", text
    if scheme.lower() not in SCHEMES:
        raise UsageError(f"--cluster '{address}': '{scheme}://' is not an address of a Dask "
                         f"scheduler (it listens on {' or '.join(s + '://' for s in SCHEMES)})",
                         hint="give the scheduler's address as tcp://HOST:PORT, e.g. --cluster "
                              "tcp://10.0.0.5:8786 (not its dashboard's http:// address)")
    host, sep, port = rest.rpartition(":")
    if not sep or not port.isdigit() or not host or not 0 < int(port) < 65536 or "/" in rest:
        raise UsageError(f"--cluster '{address}': give the scheduler as {scheme}://HOST:PORT",
                         hint="e.g. --cluster tcp://10.0.0.5:8786")
    return f"{scheme.lower()}://{rest}"


def _unreachable(address: str, why: str):
    return fail(None, f"cannot reach the Dask scheduler at {address}: {why}",
                "check the address (tcp://HOST:PORT) and that the scheduler runs; without "
                f"--cluster (and with {CLUSTER_VARIABLE} unset) the local cores are used")


def _hello(address: str, timeout: float) -> None:
    """Connect to ``address`` and ask it who it is, all within ``timeout``
    seconds; anything but a Dask scheduler's answer (nothing listening, a
    server that says nothing or sends other data) is refused.  The Dask
    client itself would wait without a limit on a server that accepts and
    stays silent."""
    import asyncio
    import socket
    from distributed.comm import connect as comm_connect
    host, _, port = address.partition("://")[2].rpartition(":")
    try:                             # nothing listening: say so at once (Dask would retry)
        with socket.create_connection((host.strip("[]"), int(port)), timeout=timeout):
            pass
    except socket.timeout:
        raise _unreachable(address, f"no answer within {timeout:g} s") from None
    except OSError as e:
        raise _unreachable(address, e.strerror or str(e)) from None

    async def ask():
        comm = await comm_connect(address, timeout=timeout)
        try:
            await comm.write({"op": "identity", "reply": True})
            return await comm.read()
        finally:
            comm.abort()
    try:
        reply = asyncio.run(asyncio.wait_for(ask(), timeout))
    except (asyncio.TimeoutError, TimeoutError):
        raise _unreachable(address, f"no answer within {timeout:g} s (is a Dask scheduler "
                           "listening there, or another server?)") from None
    except KeyboardInterrupt:
        raise
    except BaseException as e:  # noqa: BLE001 - another server's data can fail in any way
        what = (f"the connection failed ({e.strerror or str(e)[:200]})" if isinstance(e, OSError)
                else f"the answer is not a Dask scheduler's ({type(e).__name__})")
        raise _unreachable(address, what) from None
    if not (isinstance(reply, dict) and reply.get("type") == "Scheduler"):
        raise _unreachable(address, "the server there is not a Dask scheduler")


def connect(address: str, timeout: float = DEFAULT_CLUSTER_TIMEOUT):
    """``(client, worker info, address)``: a Dask client on the scheduler at
    ``address`` (tcp://HOST:PORT), whose workers must run this dotseq
    version; every network step is bounded by ``timeout`` seconds."""
    from .. import __version__
    distributed = require_dask()
    address = check_address(address)
    _hello(address, timeout)
    try:
        client = distributed.Client(address, timeout=timeout, set_as_default=False)
    except KeyboardInterrupt:
        raise
    except Exception as e:  # noqa: BLE001
        raise _unreachable(address, f"{type(e).__name__}: {e}") from None
    try:
        info = client.run(worker_info)
    except Exception as e:  # noqa: BLE001
        client.close(timeout=timeout)
        raise fail(None, f"the Dask workers at {address} did not answer: {e}",
                   "check that the workers run and can import dotseq") from None
    bad = sorted({v.get("dotseq_version") for v in info.values()} - {__version__}, key=str)
    if bad:
        client.close(timeout=timeout)
        raise fail(None, f"the Dask workers at {address} run dotseq {', '.join(map(str, bad))}, "
                         f"this is dotseq {__version__}",
                   "install the same dotseq version on every worker")
    return client, info, address


def run_dask(tasks, on_result, on_failure, connection, point_fn=evaluate_point) -> dict:
    """The points on a Dask cluster; ``connection`` is what :func:`connect`
    returned (the client is closed at the end)."""
    distributed = require_dask()
    client, info, address = connection
    token = secrets.token_hex(4)
    futures = []
    try:
        threads = sum(client.nthreads().values())
    except Exception:  # noqa: BLE001
        threads = None
    try:
        tasks = list(tasks)
        futures = client.map(point_fn, tasks, key=[f"dotseq-point-{token}-{t.index}"
                                                   for t in tasks], pure=False)
        index = {f.key: t.index for f, t in zip(futures, tasks)}
        for f in distributed.as_completed(futures, loop=client.loop):
            try:
                r = f.result()
            except KeyboardInterrupt:
                raise
            except BaseException as e:  # noqa: BLE001 - lost worker/scheduler: the point is missing
                on_failure(index[f.key], f"{type(e).__name__}: {e}")
                continue
            on_result(r)
    except KeyboardInterrupt:
        try:
            client.cancel(futures)
        except Exception:  # noqa: BLE001
            pass
        raise
    finally:
        client.close()
    return {"backend": f"dask cluster {address}", "workers": len(info), "threads": threads}
