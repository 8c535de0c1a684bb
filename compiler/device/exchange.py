"""Exchange strength J(V) of a barrier gate: evaluation, slope and inverse.

One frozen class per model, all with the same small interface
(:class:`ExchangeModel`): ``j(v)``, ``dj_dv(v)``, ``v(j)``, ``v_range()``,
``scaled(s)`` (J multiplied by s) and ``check()``; :data:`MODELS` is the
table of them by the name a device file gives (``model: ...``).  J is the
singlet–triplet splitting of H = J·S1·S2, stored as the frequency J/h in Hz;
barrier voltages V are in volts.  Every model makes J rise with V.  A new
model is one class here and one entry in :data:`MODELS`; the loader reads
its keys from the class (``REQUIRED``, ``OPTIONAL``, ``ENERGIES``).

The functions :func:`j_of_v`, :func:`dj_dv`, :func:`v_of_j` and
:func:`v_range` are the same calls written as functions of the model.

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
from dataclasses import dataclass, replace
from functools import lru_cache
from typing import TYPE_CHECKING, ClassVar

import numpy as np

from ..roots import brentq

if TYPE_CHECKING:
    from scipy.interpolate import PchipInterpolator


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
    # imported here: scipy.interpolate brings scipy.optimize (about 0.4 s of the
    # command's start-up), and only calibration tables need it
    from scipy.interpolate import PchipInterpolator
    return PchipInterpolator(np.asarray(volts, float), np.log(np.asarray(joules, float)),
                             extrapolate=False)


class ExchangeModel:
    """J(V) of a barrier gate: J/h in Hz as a function of barrier voltage V.

    The interface every model class implements.  ``kind`` is the name in the
    device file; ``REQUIRED``/``OPTIONAL`` are its keys there, ``ENERGIES``
    the keys given as an energy (eV) or a frequency E/h; ``SWEEPABLE`` the
    parameters a sweep may set directly (besides ``j_scale``, which every
    model takes through :meth:`scaled`).
    """

    kind: ClassVar[str] = ""
    REQUIRED: ClassVar[tuple[str, ...]] = ()
    OPTIONAL: ClassVar[tuple[str, ...]] = ()
    ENERGIES: ClassVar[tuple[str, ...]] = ()
    SWEEPABLE: ClassVar[tuple[str, ...]] = ()

    # ------------------------------------------------ what each model writes
    def check(self) -> None:
        """Raise ``ValueError`` when the parameters make no valid model."""
        raise NotImplementedError

    def v_range(self) -> tuple[float, float]:
        """Voltages (V) on which J(V) is defined: ``(-inf, inf)`` for closed forms."""
        return -math.inf, math.inf

    def positive(self) -> bool:
        """Whether J > 0 on the whole range (False: the parameters are unphysical)."""
        raise NotImplementedError

    def scaled(self, s: float) -> "ExchangeModel":
        """The same model with J multiplied by ``s`` at every voltage."""
        raise NotImplementedError

    def _j(self, v: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def _slope(self, v: np.ndarray, j: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def _v(self, j: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    # ------------------------------------------------ shared
    def j(self, v: float | np.ndarray) -> float | np.ndarray:
        """Exchange J/h (Hz) at barrier voltage(s) ``v`` (V), same shape.

        Raises ``ValueError`` outside :meth:`v_range` or for an invalid model.
        """
        self.check()
        v = np.asarray(v, float)
        self._in_range(v)
        return _out(self._j(v))

    def dj_dv(self, v: float | np.ndarray) -> float | np.ndarray:
        """Slope d(J/h)/dV in Hz/V, used to turn voltage noise into J noise."""
        self.check()
        v = np.asarray(v, float)
        j = np.asarray(self.j(v))
        return _out(self._slope(v, j))

    def v(self, j: float | np.ndarray) -> float | np.ndarray:
        """Barrier voltage (V) giving exchange ``j`` (Hz, > 0); inverse of :meth:`j`."""
        self.check()
        j = np.asarray(j, float)
        if not np.all(np.isfinite(j)) or np.any(j <= 0):
            raise ValueError("exchange J must be positive and finite to find its voltage")
        return _out(self._v(j))

    def _in_range(self, v: np.ndarray) -> None:
        lo, hi = self.v_range()
        if lo == -math.inf and hi == math.inf:
            return
        if not np.all(np.isfinite(v)):
            raise ValueError("barrier voltage must be finite")
        if np.any(v < lo) or np.any(v > hi):
            bad = float(v[(v < lo) | (v > hi)].flat[0]) if v.ndim else float(v)
            raise ValueError(f"barrier voltage {bad:g} V is outside the exchange table "
                             f"[{lo:g} V, {hi:g} V]; extend the calibration table")


@dataclass(frozen=True)
class Exponential(ExchangeModel):
    """J = j0·exp(V/v0) (common practice, no single source)."""

    j0: float                # Hz
    v0: float                # V

    kind: ClassVar[str] = "exponential"
    REQUIRED: ClassVar[tuple[str, ...]] = ("j0", "v0")
    SWEEPABLE: ClassVar[tuple[str, ...]] = ("j0",)

    def check(self) -> None:
        if not (self.j0 > 0 and self.v0 > 0):
            raise ValueError("exponential exchange needs j0 > 0 and v0 > 0")

    def positive(self) -> bool:
        return self.j0 > 0

    def scaled(self, s: float) -> "Exponential":
        return replace(self, j0=self.j0 * s)

    def _j(self, v):
        return self.j0 * np.exp(v / self.v0)

    def _slope(self, v, j):
        return j / self.v0

    def _v(self, j):
        return self.v0 * np.log(j / self.j0)


@dataclass(frozen=True)
class Hubbard(ExchangeModel):
    """J = 4·t(V)²·U/(U² − ε²), t(V) = t0·exp(V/vt) (Burkard, Loss &
    DiVincenzo, PRB 59, 2070 (1999)); t0, U, ε as E/h in Hz."""

    t0: float                # Hz  tunnel coupling at V = 0, t/h
    vt: float                # V   voltage scale of t
    u: float                 # Hz  charging energy U/h
    detuning: float = 0.0    # Hz  ε/h

    kind: ClassVar[str] = "hubbard"
    REQUIRED: ClassVar[tuple[str, ...]] = ("t0", "vt", "u")
    OPTIONAL: ClassVar[tuple[str, ...]] = ("detuning",)
    ENERGIES: ClassVar[tuple[str, ...]] = ("t0", "u", "detuning")

    def check(self) -> None:
        if not (self.t0 > 0 and self.vt > 0 and self.u > 0):
            raise ValueError("hubbard exchange needs t0 > 0, vt > 0 and u > 0")
        if not abs(self.detuning) < self.u:
            raise ValueError("hubbard exchange needs |detuning| < u")

    def positive(self) -> bool:
        return self.t0 > 0

    def scaled(self, s: float) -> "Hubbard":
        return replace(self, t0=self.t0 * math.sqrt(s))     # J ∝ t²

    def tunnel(self, v: float) -> float:
        """Tunnel coupling t/h (Hz) at barrier voltage ``v``."""
        return self.t0 * math.exp(v / self.vt)

    def _j(self, v):
        return _hubbard_j(self.t0 * np.exp(v / self.vt), self.u, self.detuning)

    def _slope(self, v, j):
        return 2.0 * j / self.vt

    def _v(self, j):
        u, eps = self.u, self.detuning
        t = np.sqrt(j * (u * u - eps * eps) / (4.0 * u))
        return self.vt * np.log(t / self.t0)


@dataclass(frozen=True)
class Table(ExchangeModel):
    """Calibration points (V_i, J_i), J interpolated monotonically (PCHIP in
    log J; Fritsch & Carlson 1980) and never extrapolated."""

    volts: tuple[float, ...]     # V
    joules: tuple[float, ...]    # Hz (J/h values; name kept short)

    kind: ClassVar[str] = "table"
    REQUIRED: ClassVar[tuple[str, ...]] = ("points",)

    def check(self) -> None:
        v = np.asarray(self.volts, float)
        j = np.asarray(self.joules, float)
        if v.size < 2 or v.size != j.size:
            raise ValueError("an exchange table needs at least 2 (V, J) points of equal count")
        if not (np.all(np.isfinite(v)) and np.all(np.isfinite(j))):
            raise ValueError("exchange table values must be finite")
        if np.any(np.diff(v) <= 0):
            raise ValueError("exchange table voltages must strictly increase")
        if np.any(j <= 0) or np.any(np.diff(j) <= 0):
            raise ValueError("exchange table J values must be positive and strictly increase")

    def v_range(self) -> tuple[float, float]:
        self.check()
        return float(self.volts[0]), float(self.volts[-1])

    def positive(self) -> bool:
        return all(j > 0 for j in self.joules)

    def scaled(self, s: float) -> "Table":
        return replace(self, joules=tuple(j * s for j in self.joules))

    def _interp(self) -> PchipInterpolator:
        return _table_interp(self.volts, self.joules)

    def _j(self, v):
        return np.exp(self._interp()(v))

    def _slope(self, v, j):
        return j * self._interp().derivative()(v)

    def _v(self, j):
        jmin, jmax = self.joules[0], self.joules[-1]
        # accept the table's end values up to rounding (exp(log J) is not exactly J)
        j = np.where(np.abs(j - jmin) <= 1e-12 * jmin, jmin, j)
        j = np.where(np.abs(j - jmax) <= 1e-12 * jmax, jmax, j)
        if np.any(j < jmin) or np.any(j > jmax):
            bad = float(j[(j < jmin) | (j > jmax)].flat[0]) if j.ndim else float(j)
            raise ValueError(f"exchange {bad:g} Hz is outside the table range "
                             f"[{jmin:g} Hz, {jmax:g} Hz]; extend the calibration table")
        interp = self._interp()
        v0, v1 = self.volts[0], self.volts[-1]

        def root(target: float) -> float:
            y = math.log(target)
            if y <= interp(v0):
                return float(v0)
            if y >= interp(v1):
                return float(v1)
            return brentq(lambda x: float(interp(x)) - y, v0, v1, xtol=1e-15)

        flat = np.array([root(float(x)) for x in j.ravel()])
        return flat.reshape(j.shape)


# The exchange models by the name a device file gives them.
MODELS: dict[str, type[ExchangeModel]] = {m.kind: m for m in (Exponential, Hubbard, Table)}
KINDS = tuple(MODELS)


# ------------------------------------------------------------ the same as functions

def v_range(model: ExchangeModel) -> tuple[float, float]:
    """Voltages on which J(V) is defined: ``(V_first, V_last)`` of a table,
    ``(-inf, inf)`` for closed forms (:meth:`ExchangeModel.v_range`)."""
    model.check()
    return model.v_range()


def j_of_v(model: ExchangeModel, v: float | np.ndarray) -> float | np.ndarray:
    """Exchange J/h (Hz) at barrier voltage V (:meth:`ExchangeModel.j`).

    Examples
    --------
    >>> round(j_of_v(Exponential(j0=1e4, v0=0.04), 0.0))
    10000
    """
    return model.j(v)


def dj_dv(model: ExchangeModel, v: float | np.ndarray) -> float | np.ndarray:
    """Slope d(J/h)/dV in Hz/V (:meth:`ExchangeModel.dj_dv`).  Exponential:
    J/v0; Hubbard: 2J/vt; table: J·d(ln J)/dV of the PCHIP interpolant."""
    return model.dj_dv(v)


def v_of_j(model: ExchangeModel, j: float | np.ndarray) -> float | np.ndarray:
    """Barrier voltage giving exchange J/h (:meth:`ExchangeModel.v`).

    Exponential: V = v0·ln(J/j0).  Hubbard: t = √(J(U² − ε²)/(4U)),
    V = vt·ln(t/t0).  Table: the unique root of the monotone interpolant
    (Brent's method, to 1e-15 V).  Raises ``ValueError`` for J ≤ 0 or outside
    the J range of a table.
    """
    return model.v(j)
