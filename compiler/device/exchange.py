"""Exchange strength J(V) of a barrier gate: evaluation, slope and inverse.

Pure functions on :class:`~compiler.device.model.ExchangeModel`.  J is the
singlet–triplet splitting of H = J·S1·S2, stored as the frequency J/h in Hz;
barrier voltages V are in volts.  Every model makes J rise with V.

Models
------
exponential
    J(V) = j0·exp(V/v0) (common practice, no single source).
hubbard
    J(V) = 4·t(V)²·U/(U² − ε²) with t(V) = t0·exp(V/vt), valid for
    |ε| < U and t ≪ U − |ε| (Burkard, Loss & DiVincenzo, PRB 59, 2070 (1999)).
table
    Calibration points (V_i, J_i) interpolated by a monotone piecewise cubic
    Hermite polynomial (PCHIP) in log J (Fritsch & Carlson, SIAM J. Numer.
    Anal. 17, 238 (1980)).  Outside [V_0, V_last] the functions raise
    ``ValueError``: a calibration is never extrapolated silently.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq

from .model import ExchangeModel

KINDS = ("exponential", "hubbard", "table")


def _out(x: np.ndarray) -> float | np.ndarray:
    """A 0-d result as a Python float, arrays unchanged."""
    return float(x) if np.ndim(x) == 0 else x


def _hubbard_j(t: np.ndarray | float, u: float, eps: float) -> np.ndarray | float:
    """Exchange J = 4·t²·U/(U² − ε²) of a half-filled double dot.

    Parameters
    ----------
    t : float or ndarray, Hz
        Tunnel coupling t/h.
    u : float, Hz
        On-site charging energy U/h.
    eps : float, Hz
        Detuning ε/h between the two dots; |ε| < U.

    Returns
    -------
    float or ndarray, Hz
        J/h.

    Notes
    -----
    Second order in t/(U ± ε) (Burkard, Loss & DiVincenzo, PRB 59, 2070 (1999));
    at ε = 0 it reduces to 4t²/U.
    """
    return 4.0 * np.square(t) * u / (u * u - eps * eps)


@lru_cache(maxsize=256)
def _table_interp(volts: tuple[float, ...], joules: tuple[float, ...]) -> PchipInterpolator:
    """PCHIP of ln J against V (cached per calibration table)."""
    return PchipInterpolator(np.asarray(volts, float), np.log(np.asarray(joules, float)),
                             extrapolate=False)


def _check_table(model: ExchangeModel) -> None:
    v = np.asarray(model.volts, float)
    j = np.asarray(model.joules, float)
    if v.size < 2 or v.size != j.size:
        raise ValueError("an exchange table needs at least 2 (V, J) points of equal count")
    if not (np.all(np.isfinite(v)) and np.all(np.isfinite(j))):
        raise ValueError("exchange table values must be finite")
    if np.any(np.diff(v) <= 0):
        raise ValueError("exchange table voltages must strictly increase")
    if np.any(j <= 0) or np.any(np.diff(j) <= 0):
        raise ValueError("exchange table J values must be positive and strictly increase")


def _check_params(model: ExchangeModel) -> None:
    if model.kind == "exponential":
        if not (model.j0 > 0 and model.v0 > 0):
            raise ValueError("exponential exchange needs j0 > 0 and v0 > 0")
    elif model.kind == "hubbard":
        if not (model.t0 > 0 and model.vt > 0 and model.u > 0):
            raise ValueError("hubbard exchange needs t0 > 0, vt > 0 and u > 0")
        if not abs(model.detuning) < model.u:
            raise ValueError("hubbard exchange needs |detuning| < u")
    elif model.kind == "table":
        _check_table(model)
    else:
        raise ValueError(f"unknown exchange model '{model.kind}'; known: {', '.join(KINDS)}")


def v_range(model: ExchangeModel) -> tuple[float, float]:
    """Voltages on which J(V) is defined.

    Parameters
    ----------
    model : ExchangeModel

    Returns
    -------
    (float, float), V
        ``(V_first, V_last)`` of a table; ``(-inf, inf)`` for closed forms.
    """
    _check_params(model)
    if model.kind == "table":
        return float(model.volts[0]), float(model.volts[-1])
    return -math.inf, math.inf


def _in_range(model: ExchangeModel, v: np.ndarray) -> None:
    lo, hi = v_range(model)
    if not np.all(np.isfinite(v)):
        raise ValueError("barrier voltage must be finite")
    if np.any(v < lo) or np.any(v > hi):
        bad = float(v[(v < lo) | (v > hi)].flat[0]) if v.ndim else float(v)
        raise ValueError(f"barrier voltage {bad:g} V is outside the exchange table "
                         f"[{lo:g} V, {hi:g} V]; extend the calibration table")


def j_of_v(model: ExchangeModel, v: float | np.ndarray) -> float | np.ndarray:
    """Exchange J/h at barrier voltage V.

    Parameters
    ----------
    model : ExchangeModel
    v : float or array_like, V
        Barrier voltage(s).

    Returns
    -------
    float or ndarray, Hz
        J/h, same shape as ``v``.

    Raises
    ------
    ValueError
        A table is asked outside its voltage range, or the model is invalid.

    Examples
    --------
    >>> m = ExchangeModel("exponential", j0=1e4, v0=0.04)
    >>> round(j_of_v(m, 0.0))
    10000
    """
    _check_params(model)
    v = np.asarray(v, float)
    if model.kind == "exponential":
        return _out(model.j0 * np.exp(v / model.v0))
    if model.kind == "hubbard":
        t = model.t0 * np.exp(v / model.vt)
        return _out(_hubbard_j(t, model.u, model.detuning))
    _in_range(model, v)
    return _out(np.exp(_table_interp(model.volts, model.joules)(v)))


def dj_dv(model: ExchangeModel, v: float | np.ndarray) -> float | np.ndarray:
    """Slope dJ/dV of the exchange, used to turn voltage noise into J noise.

    Parameters
    ----------
    model : ExchangeModel
    v : float or array_like, V

    Returns
    -------
    float or ndarray, Hz/V
        d(J/h)/dV.  Exponential: J/v0; Hubbard: 2J/vt; table: J·d(ln J)/dV
        of the PCHIP interpolant.
    """
    _check_params(model)
    v = np.asarray(v, float)
    j = np.asarray(j_of_v(model, v))
    if model.kind == "exponential":
        return _out(j / model.v0)
    if model.kind == "hubbard":
        return _out(2.0 * j / model.vt)
    return _out(j * _table_interp(model.volts, model.joules).derivative()(v))


def v_of_j(model: ExchangeModel, j: float | np.ndarray) -> float | np.ndarray:
    """Barrier voltage giving exchange J/h (inverse of :func:`j_of_v`).

    Parameters
    ----------
    model : ExchangeModel
    j : float or array_like, Hz
        Target J/h, > 0.

    Returns
    -------
    float or ndarray, V

    Raises
    ------
    ValueError
        ``j`` ≤ 0, or outside the J range of a table.

    Notes
    -----
    Exponential: V = v0·ln(J/j0).  Hubbard: t = √(J(U² − ε²)/(4U)),
    V = vt·ln(t/t0).  Table: the unique root of the monotone interpolant
    (Brent's method, to 1e-15 V).
    """
    _check_params(model)
    j = np.asarray(j, float)
    if not np.all(np.isfinite(j)) or np.any(j <= 0):
        raise ValueError("exchange J must be positive and finite to find its voltage")
    if model.kind == "exponential":
        return _out(model.v0 * np.log(j / model.j0))
    if model.kind == "hubbard":
        u, eps = model.u, model.detuning
        t = np.sqrt(j * (u * u - eps * eps) / (4.0 * u))
        return _out(model.vt * np.log(t / model.t0))
    jmin, jmax = model.joules[0], model.joules[-1]
    # accept the table's end values up to rounding (exp(log J) is not exactly J)
    j = np.where(np.abs(j - jmin) <= 1e-12 * jmin, jmin, j)
    j = np.where(np.abs(j - jmax) <= 1e-12 * jmax, jmax, j)
    if np.any(j < jmin) or np.any(j > jmax):
        bad = float(j[(j < jmin) | (j > jmax)].flat[0]) if j.ndim else float(j)
        raise ValueError(f"exchange {bad:g} Hz is outside the table range "
                         f"[{jmin:g} Hz, {jmax:g} Hz]; extend the calibration table")
    interp = _table_interp(model.volts, model.joules)
    v0, v1 = model.volts[0], model.volts[-1]

    def root(target: float) -> float:
        y = math.log(target)
        if y <= interp(v0):
            return float(v0)
        if y >= interp(v1):
            return float(v1)
        return brentq(lambda x: float(interp(x)) - y, v0, v1, xtol=1e-15)

    flat = np.array([root(float(x)) for x in j.ravel()])
    return _out(flat.reshape(j.shape))
