"""Reference propagation for the tests, written out independently of the
compiler's own pulse design: a pure state of the register in each dot's
rotating frame, driven by what the channels play, integrated with dense
matrix exponentials on a fine time grid.

Model (Hz; H/h):
    drive on dot q (g > 0):  r_q·(Re b σx + Im b σy)/2,   b = c(t)·e^{−i2π·IF_q·t}
    drive on dot q (g < 0): −r_q·(Re b σx − Im b σy)/2
    (linear drive under the rotating-wave approximation; Abragam 1961)
    exchange:  J(t)·[Sz Sz + ½(S+ S− e^{i2πδt} + S− S+ e^{−i2πδt})],
               δ = s_a f_a − s_b f_b  (Loss & DiVincenzo, PRA 57, 120 (1998))
Basis: dot order of the device, |↑> = |0> (σz = +1) first.
"""

from __future__ import annotations

import math
from functools import reduce

import numpy as np
from scipy.linalg import expm

from compiler import analog
from compiler.device.exchange import j_of_v
from compiler.physics import precession_sign

SX = np.array([[0, 1], [1, 0]], dtype=complex)
SY = np.array([[0, -1j], [1j, 0]], dtype=complex)
SZ = np.diag([1.0, -1.0]).astype(complex)
SP = np.array([[0, 1], [0, 0]], dtype=complex)     # σ+ = |↑><↓|
SM = SP.T.copy()
I2 = np.eye(2, dtype=complex)


def op(single: np.ndarray, k: int, n: int) -> np.ndarray:
    return reduce(np.kron, [single if i == k else I2 for i in range(n)])


def rz(angles) -> np.ndarray:
    """⊗ exp(−i F_q σz/2)."""
    return reduce(np.kron, [np.diag([np.exp(-0.5j * f), np.exp(0.5j * f)]) for f in angles])


def propagate(wf, device, *, stop: int | None = None, m: int = 8, ideal: bool = False,
              filtered: bool = True) -> np.ndarray:
    """Unitary of samples [0, stop) in the dots' rotating frames.

    ideal: use the unquantised design values; filtered: apply the channels'
    RC response (else the held samples as they are)."""
    dots = list(device.dots)
    n = len(dots)
    dt = 1.0 / wf.sample_rate
    stop = wf.n_samples if stop is None else stop
    h = dt / m
    t = (np.arange(stop * m) + 0.5) * h

    def played(name):
        out = wf.outputs[name]
        full = out.ideal if ideal else out.volts
        x = full[:stop]
        ch = device.channels[out.channel]
        tau = analog.rc_tau(ch.rise_time) if filtered else 0.0
        # silent line; a gate where the previous run left it (its last sample)
        y0 = 0.0 if out.kind == "iq" else full[-1]
        y = analog.rc_oversampled(x, dt, tau, m, y0=y0)
        if ch.bias_tee > 0 and not ideal:
            y = analog.bias_tee(y, h, ch.bias_tee)
        return y + out.dc_level

    terms = []   # list of (coefficient array over time [Hz], operator)
    for k, q in enumerate(dots):
        dot = device.dots[q]
        line = device.channels[dot.drive.line]
        c = played(f"{line.name}.I") + 1j * played(f"{line.name}.Q")
        b = c * np.exp(-2j * math.pi * (device.larmor(q) - line.lo) * t)
        r = dot.drive.rabi_per_volt
        s = precession_sign(dot.g)
        terms.append((s * r * b.real / 2, op(SX, k, n)))
        terms.append((r * b.imag / 2, op(SY, k, n)))
    for cpl in device.couplings:
        a, bq = (dots.index(x) for x in cpl.dots)
        v = np.clip(played(cpl.barrier), *_vrange(cpl.exchange))
        J = j_of_v(cpl.exchange, v)
        da, db = device.dots[cpl.dots[0]], device.dots[cpl.dots[1]]
        delta = (precession_sign(da.g) * device.larmor(cpl.dots[0])
                 - precession_sign(db.g) * device.larmor(cpl.dots[1]))
        zz = op(SZ, a, n) @ op(SZ, bq, n) / 4
        pm = op(SP, a, n) @ op(SM, bq, n)
        rot = np.exp(2j * math.pi * delta * t)
        terms.append((J, zz))
        terms.append((J * rot / 2, pm))
        terms.append((J * np.conj(rot) / 2, pm.conj().T))
    U = np.eye(2 ** n, dtype=complex)
    for i in range(stop * m):
        H = sum(coef[i] * o for coef, o in terms)
        U = expm(-2j * math.pi * h * H) @ U
    return U


def _vrange(model):
    from compiler.device.exchange import v_range
    lo, hi = v_range(model)
    return lo, hi


def gate_fidelity(U: np.ndarray, T: np.ndarray) -> float:
    """Average gate fidelity of unitary U against T (Horodecki et al., PRA 60,
    1888 (1999); Nielsen, Phys. Lett. A 303, 249 (2002)):
    F = (d·|Tr(T†U)|²/d² + 1)/(d + 1)."""
    d = U.shape[0]
    f_pro = abs(np.trace(T.conj().T @ U)) ** 2 / d ** 2
    return (d * f_pro + 1) / (d + 1)


def rotation(axis_phase: float, angle: float) -> np.ndarray:
    """exp(−iθ(cos φ σx + sin φ σy)/2)."""
    n = math.cos(axis_phase) * SX + math.sin(axis_phase) * SY
    return math.cos(angle / 2) * I2 - 1j * math.sin(angle / 2) * n
