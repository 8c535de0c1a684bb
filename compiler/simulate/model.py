"""The register model the simulators integrate, built from what is played.

One physics model, shared with waveform synthesis (:mod:`compiler.analog`,
:func:`compiler.synth.as_played`): each dot is a spin-1/2 in its own rotating
frame (rotating-wave approximation), driven by every burst on its microwave
line (crosstalk comes from the detuning, not from a factor), coupled by
J(V(t))·S1·S2 through the as-played barrier voltages.  Frequencies in Hz;
the Schrödinger equation is dψ/dt = −i·2π·H·ψ.

The Hamiltonian is piecewise constant on a fine grid of ``m`` sub-steps per
sample.  Every coefficient is the exact mean of the continuous as-played
quantity over its sub-step (the RC response of held samples is known in
closed form, and J(V(t)) is averaged with Gauss–Legendre nodes), so time
integrals of the drive and of J are exact; what the fine grid neglects is
the variation of the drive's phase and of J within a sub-step, an error of
order (ω·h)² that tests/test_simulate.py shows falling with m.

Drive on dot q (g > 0):  (r/2)·(b*·σ+ + b·σ−),   b = c(t)·e^{−i2π·IF_q·t}
Drive on dot q (g < 0): −(r/2)·(b·σ+ + b*·σ−)
Exchange (a, b):  J·σz_a σz_b/4 + ½(J e^{i2πδt}·σ+_a σ−_b + h.c.),
                  δ = s_a f_a − s_b f_b  (Loss & DiVincenzo, PRA 57, 120 (1998))
Quasi-static Zeeman noise: δf_q·σz_q/2 (Gaussian; averaged by quadrature).
Lindblad (per dot): relaxation to the ground state at Γ↓ and excitation at
Γ↑ with Γ↓ + Γ↑ = 1/T1 and Γ↑/Γ↓ = e^{−hf/k_BT} (detailed balance);
pure dephasing √(γφ/2)·σz with γφ = 1/T2 − 1/(2T1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from .. import analog
from ..device import exchange as X
from ..device.model import Device
from ..physics import H as PLANCK, K_B, precession_sign
from ..synth.types import Waveforms

GL_NODES = 6
_GX, _GW = np.polynomial.legendre.leggauss(GL_NODES)


@dataclass(frozen=True)
class Switches:
    """Which imperfections are on (the error budget turns them off one by one)."""
    t1: bool = True
    t2: bool = True
    t2_star: bool = True
    charge: bool = True
    crosstalk: bool = True
    filters: bool = True
    quantised: bool = True
    bias_tee: bool = True
    exchange_zeeman: bool = True

    def off(self, *names: str) -> "Switches":
        return replace(self, **{n: False for n in names})


ALL_OFF = Switches(False, False, False, False, False, False, False, False, False)


@dataclass
class Pair:
    a: int                       # register indices
    b: int
    name: str                    # "A-B"
    volts: np.ndarray            # (K, GL_NODES) barrier voltage at the quadrature nodes, V
    phase: np.ndarray            # (K, GL_NODES) e^{i2πδ t} at the nodes
    model: object                # ExchangeModel
    v_lo: float
    v_hi: float
    sigma_v: float               # rms quasi-static charge offset, V (0 when off)
    delta: float = 0.0           # Hz, frequency δ of the flip-flop phase e^{i2πδt}

    def coefficients(self, dv: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """(J mean, mean of J·e^{i2πδt}) per sub-step, Hz, with a voltage offset."""
        v = np.clip(self.volts + dv, self.v_lo, self.v_hi)
        j = X.j_of_v(self.model, v)
        w = _GW / 2
        return (j * w).sum(axis=1), (j * self.phase * w).sum(axis=1)


@dataclass
class Model:
    dots: tuple[str, ...]
    h: float                     # s, sub-step
    t0: float                    # s, window start (from the start of the run)
    k: int                       # number of sub-steps
    drive: dict                  # register index -> complex σ+ coefficient per sub-step (Hz)
    pairs: list = field(default_factory=list)
    relax: tuple = ()            # per dot (Γ_to_ground, Γ_from_ground, γφ) in 1/s
    ground_up: tuple = ()        # per dot: True when the ground state is spin up (g < 0)
    sigma_f: tuple = ()          # per dot rms quasi-static detuning, Hz (0 when off)

    @property
    def n(self) -> int:
        return len(self.dots)

    @property
    def duration(self) -> float:
        return self.k * self.h


def _exact_means(x: np.ndarray, dt: float, tau: float, m: int, rot_hz: float, t_first: float,
                 y0: complex = 0.0) -> np.ndarray:
    """Mean over each of m sub-steps per sample of y(t)·e^{−i2π·rot·t}, y the
    RC output of held samples x (exact: y = x_i + (y_i − x_i)e^{−u/τ})."""
    n = len(x)
    h = dt / m
    w = 2 * math.pi * rot_hz
    j = np.arange(m)
    lo, hi = j * h, (j + 1) * h
    if w != 0:
        A = (np.exp(-1j * w * lo) - np.exp(-1j * w * hi)) / (1j * w * h)
    else:
        A = np.ones(m, dtype=complex)
    if tau > 0:
        lam = 1.0 / tau + 1j * w
        B = (np.exp(-lam * lo) - np.exp(-lam * hi)) / (lam * h)
        yb = analog.rc_boundaries(x, dt, tau, y0)[:-1]
    else:
        B = np.zeros(m, dtype=complex)
        yb = x
    base = np.exp(-1j * w * (t_first + np.arange(n) * dt))
    out = base[:, None] * (x[:, None] * A[None, :] + (yb - x)[:, None] * B[None, :])
    return out.ravel()


def _node_values(x: np.ndarray, dt: float, tau: float, m: int, y0: float) -> np.ndarray:
    """RC output of held samples x at the Gauss–Legendre nodes of every
    sub-step: shape (n·m, GL_NODES)."""
    n = len(x)
    h = dt / m
    u = (np.arange(m)[:, None] + (_GX[None, :] + 1) / 2) * h          # (m, nodes) within a sample
    if tau > 0:
        yb = analog.rc_boundaries(x, dt, tau, y0)[:-1]
        v = x[:, None, None] + (yb - x)[:, None, None] * np.exp(-u / tau)[None, :, :]
        v = np.clip(v, min(x.min(), y0), max(x.max(), y0))
    else:
        v = np.broadcast_to(x[:, None, None], (n, m, GL_NODES))
    return np.ascontiguousarray(v).reshape(n * m, GL_NODES)


def build_model(wf: Waveforms, device: Device, *, switches: Switches = Switches(),
                m: int = 4, start: int = 0, stop: int | None = None, rwa: bool = True) -> Model:
    """The register model over samples [start, stop) of a compiled run.

    ``rwa=False`` keeps the counter-rotating half of the linear drive: for
    g > 0 the σ+ coefficient gains (r/2)·c·e^{i2π(f_q + LO)t}, for g < 0
    −(r/2)·c*·e^{−i2π(f_q + LO)t}; the sub-steps must then resolve twice the
    Larmor frequency (``m`` large), which makes it slow (Bloch & Siegert,
    Phys. Rev. 57, 522 (1940))."""
    dots = tuple(device.dots)
    dt = 1.0 / wf.sample_rate
    stop = wf.n_samples if stop is None else stop
    h = dt / m
    K = (stop - start) * m
    sw = switches
    drive: dict[int, np.ndarray] = {}
    for idx, q in enumerate(dots):
        dot = device.dots[q]
        line = device.channels[dot.drive.line]
        tau = analog.rc_tau(line.rise_time) if sw.filters else 0.0
        if sw.crosstalk:
            out_i, out_q = wf.outputs[f"{line.name}.I"], wf.outputs[f"{line.name}.Q"]
            c = ((out_i.volts if sw.quantised else out_i.ideal)
                 + 1j * (out_q.volts if sw.quantised else out_q.ideal))
        else:
            c = wf.per_dot.get(q)
            if c is None:
                continue
        if_hz = device.larmor(q) - line.lo
        b = _exact_means(np.asarray(c, dtype=complex), dt, tau, m, if_hz, 0.0)[start * m:stop * m]
        if not np.any(b):
            continue
        r = dot.drive.rabi_per_volt
        sign = precession_sign(dot.g)
        coef = (r / 2) * (np.conj(b) if sign > 0 else -b)
        if not rwa:
            w = device.larmor(q) + line.lo
            cr = _exact_means(np.asarray(c, dtype=complex), dt, tau, m, -w, 0.0)[start * m:stop * m]
            coef = coef + ((r / 2) * cr if sign > 0 else -(r / 2) * np.conj(cr))
        drive[idx] = coef
    pairs = []
    for cpl in device.couplings:
        ch = device.channels[cpl.barrier]
        out = wf.outputs[cpl.barrier]
        x = np.asarray(out.volts if sw.quantised else out.ideal, dtype=float)
        tau = analog.rc_tau(ch.rise_time) if sw.filters else 0.0
        y0 = float(x[0]) if len(x) else 0.0
        v = _node_values(x, dt, tau, m, y0)
        if sw.bias_tee and ch.bias_tee > 0:
            # high-pass of the tee (τ_b ≫ h: its low-pass part is taken per sub-step),
            # capacitor uncharged at the start, as in synth.as_played
            mean = v.mean(axis=1)
            v = v - analog.rc_boundaries(mean, h, ch.bias_tee, 0.0)[:-1, None]
        v = v[start * m:stop * m] + out.dc_level
        a, b = dots.index(cpl.dots[0]), dots.index(cpl.dots[1])
        da, db = device.dots[cpl.dots[0]], device.dots[cpl.dots[1]]
        delta = (precession_sign(da.g) * device.larmor(cpl.dots[0])
                 - precession_sign(db.g) * device.larmor(cpl.dots[1])) if sw.exchange_zeeman else 0.0
        tn = start * dt + (np.arange(K)[:, None] + (_GX[None, :] + 1) / 2) * h
        phase = np.exp(2j * math.pi * delta * tn)
        lo_v, hi_v = X.v_range(cpl.exchange)
        pairs.append(Pair(a, b, f"{cpl.dots[0]}-{cpl.dots[1]}", v, phase, cpl.exchange,
                          lo_v, hi_v, cpl.charge_noise if sw.charge else 0.0, delta))
    relax, ground_up, sigma_f = [], [], []
    for q in dots:
        d = device.dots[q]
        f = device.larmor(q)
        x = PLANCK * f / (K_B * device.temperature)
        g1 = 1.0 / d.t1 if sw.t1 else 0.0
        down = g1 / (1 + math.exp(-x))
        up = g1 - down
        gphi = max(1.0 / d.t2 - 1.0 / (2 * d.t1), 0.0) if sw.t2 else 0.0
        relax.append((down, up, gphi))
        ground_up.append(d.g < 0)
        # quasi-static Gaussian detuning with T2* = √2/σ_ω (Merkulov, Efros, Rosen, PRB 65, 205309 (2002))
        sigma_f.append(math.sqrt(2) / d.t2_star / (2 * math.pi) if sw.t2_star else 0.0)
    return Model(dots, h, start * dt, K, drive, pairs, tuple(relax), tuple(ground_up),
                 tuple(sigma_f))


# ------------------------------------------------------------------ quadrature

def gauss_hermite(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights for E[f(X)], X ~ N(0, 1): x = √2·t_i, w = w_i/√π
    (Gauss–Hermite quadrature; Abramowitz & Stegun 25.4.46)."""
    t, w = np.polynomial.hermite.hermgauss(n)
    return math.sqrt(2) * t, w / math.sqrt(math.pi)


@dataclass(frozen=True)
class NoisePoint:
    detuning: tuple[float, ...]          # Hz per dot
    dv: tuple[float, ...]                # V per pair
    weight: float


def noise_points(model: Model, nodes: int, mode: str = "auto", max_tensor: int = 27) -> list[NoisePoint]:
    """Quadrature points over the quasi-static noises (detuning per dot,
    voltage offset per barrier).

    ``tensor``: the full product grid (exact for the quadrature order).
    ``additive``: one variable at a time around zero, ρ ≈ ρ(0) + Σ_i (E_i[ρ] − ρ(0)),
    exact to second order in the noise amplitudes (cross terms between
    independent noises are of fourth order); used when the product grid is
    larger than ``max_tensor`` points (``auto``)."""
    x, w = gauss_hermite(nodes) if nodes > 1 else (np.zeros(1), np.ones(1))
    vars_ = [("d", i, s) for i, s in enumerate(model.sigma_f) if s > 0] + \
            [("v", i, p.sigma_v) for i, p in enumerate(model.pairs) if p.sigma_v > 0]
    nd, npair = len(model.sigma_f), len(model.pairs)
    if not vars_ or nodes <= 1:
        return [NoisePoint((0.0,) * nd, (0.0,) * npair, 1.0)]
    if mode == "auto":
        mode = "tensor" if len(x) ** len(vars_) <= max_tensor else "additive"
    pts: list[NoisePoint] = []
    if mode == "tensor":
        import itertools
        for combo in itertools.product(range(len(x)), repeat=len(vars_)):
            det, dv, wt = [0.0] * nd, [0.0] * npair, 1.0
            for (kind, i, s), c in zip(vars_, combo):
                (det if kind == "d" else dv)[i] = s * x[c]
                wt *= w[c]
            pts.append(NoisePoint(tuple(det), tuple(dv), wt))
        return pts
    # additive: ρ(0) + Σ_i Σ_j w_ij (ρ(x_ij) − ρ(0)); nodes at zero fold into the centre
    centre_w = 1.0 - len(vars_)
    for kind, i, s in vars_:
        for xv, wv in zip(x, w):
            if abs(xv) < 1e-12:
                centre_w += float(wv)
                continue
            det, dv = [0.0] * nd, [0.0] * npair
            (det if kind == "d" else dv)[i] = s * xv
            pts.append(NoisePoint(tuple(det), tuple(dv), float(wv)))
    centre_w += 0.0
    return [NoisePoint((0.0,) * nd, (0.0,) * npair, centre_w)] + pts
