"""One BLAS/OpenMP thread while dotseq computes (the one place that limits them).

Every matrix dotseq multiplies is small or thin (4×4 to 256×256 transfer
matrices, pulse design, reference propagators): a second BLAS thread only
adds synchronisation.  With two BLAS threads a batch of 4×4 exponentials
took 30× longer on a 2-core machine, and on a busy machine the thread pools
of several sweep workers fighting over the same cores made a point many
times slower.  One thread everywhere also keeps the floating-point order of
operations the same in this process, in a local worker and on a Dask worker.

The command (``compiler.cli.entry``), the engines (around each propagation)
and the sweep workers (around each point) all enter :func:`one_thread`.
"""

from __future__ import annotations

_controller = None


def one_thread():
    """A context manager in which BLAS and OpenMP use one thread
    (``threadpoolctl``).  The scan of loaded libraries is made once per
    process, after numpy and scipy (whose BLAS dotseq uses) are loaded."""
    global _controller
    if _controller is None:
        import numpy  # noqa: F401  (load the BLAS libraries before the scan)
        import scipy.linalg  # noqa: F401
        from threadpoolctl import ThreadpoolController
        _controller = ThreadpoolController()
    return _controller.limit(limits=1)
