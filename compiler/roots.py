"""Root finding for the pipeline's one-dimensional design problems (exchange
pulse levels, coherence times of a noise spectrum, calibration tables).

scipy.optimize takes about 0.4 s to import, which every command's start-up
and every sweep worker would pay; only Brent's method is needed, so it is
imported here on first use, for the whole package."""

from __future__ import annotations


def brentq(f, a: float, b: float, **kw) -> float:
    """A root of ``f`` in [a, b] by Brent's method (``scipy.optimize.brentq``,
    same arguments); imported on the first call."""
    from scipy.optimize import brentq as _brentq
    return _brentq(f, a, b, **kw)
