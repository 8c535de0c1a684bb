"""The register :class:`~.model.Model`, built from what is played.

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
  (c the line's I + iQ as they arrive, through the mixer model of the
  line's ``mixer`` calibration, :func:`compiler.analog.mixer_output`: an
  uncorrected imbalance puts the image c* at LO − IF)
Drive on dot q (g < 0): −(r/2)·(b·σ+ + b*·σ−)
Exchange (a, b):  J·σz_a σz_b/4 + ½(J e^{i2πδt}·σ+_a σ−_b + h.c.),
                  δ = s_a f_a − s_b f_b  (Loss & DiVincenzo, PRA 57, 120 (1998))
Quasi-static Zeeman noise: δf_q·σz_q/2 (Gaussian; averaged by quadrature).
Lindblad dissipators and quasi-static noise variables come from the
registry (:mod:`.sources`): every ``lindblad`` source adds its dissipators
to every dot, every ``quasi-static`` source its variables, while its switch
is on.  The ``played`` sources are switched here, by name.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from .. import analog
from ..device import exchange as X
from ..device.model import Device
from ..physics import precession_sign
from ..synth.types import Waveforms
from ..device.levels import SPIN, qubit_basis
from ..errors import UsageError
from . import toggling
from .bands import mode_shapes
from .model import (GL_NODES, GL_W, GL_X, SPIN_HALF_LEVELS, Dissipator, DotSpec, GateBand,
                    LevelPair, Model, NoiseVariable, Pair, Profile, freeze)

CONNECT_TOL = 1e-6     # |matrix element|² below this: the drive does not connect two levels


def valley_spec(device: Device, q: str) -> DotSpec:
    """The four-level :class:`DotSpec` of a spin–valley dot: basis and energies
    from :func:`compiler.device.levels.qubit_basis`, operators ``raise``,
    ``lower``, ``z`` (±1 on the qubit levels), ``up`` (the upper qubit level),
    ``sx``, ``sy``, ``sz`` (σ/2 on the spin, identity on the valley) and
    ``drive`` (σ·n̂ of the drive direction)."""
    lad = device.ladders[q]
    _, v, e = qubit_basis(lad)
    d = device.dots[q]
    n = np.asarray(d.drive.direction if d.drive.direction is not None else (0.0, 1.0, 0.0))
    n = n / np.linalg.norm(n)
    L = len(e)
    one = lambda i, j: np.eye(L)[:, [i]] @ np.eye(L)[[j], :]  # noqa: E731
    ops = {"raise": one(0, 1), "lower": one(1, 0),
           "z": np.diag([1.0, -1.0] + [0.0] * (L - 2)), "up": one(0, 0),
           "sx": v.conj().T @ SPIN[0] @ v / 2, "sy": v.conj().T @ SPIN[1] @ v / 2,
           "sz": v.conj().T @ SPIN[2] @ v / 2,
           "drive": v.conj().T @ sum(c * s for c, s in zip(n, SPIN)) @ v}
    return DotSpec(q, L, False, tuple((k, freeze(m)) for k, m in ops.items()), tuple(e), (0, 1))


def _spin_half_spec(device: Device, q: str) -> DotSpec:
    """A spin-1/2 with the energies of its rotating frame (up, down)."""
    s = precession_sign(device.dots[q].g) * device.larmor(q) / 2
    return DotSpec(q, SPIN_HALF_LEVELS, device.dots[q].g < 0,
                   (("sx", freeze(np.array([[0, 1], [1, 0]]) / 2)),
                    ("sy", freeze(np.array([[0, -1j], [1j, 0]]) / 2)),
                    ("sz", freeze(np.diag([0.5, -0.5])))), (s, -s))


def _level_pair(device: Device, specs: dict, a: int, b: int, qa: str, qb: str, volts, tn,
                cpl, lo_v, hi_v, h: float, zeeman: bool) -> LevelPair:
    """J·S_a·S_b in the interaction picture of both dots' levels, split by frequency."""
    sa, sb = specs[qa], specs[qb]
    ea, eb = np.array(sa.energies), np.array(sb.energies)
    if not zeeman:
        # the Zeeman difference off: both qubits at their mean frequency
        fa, fb = ea[0] - ea[1], eb[0] - eb[1]
        mean = (fa + fb) / 2
        for e, f in ((ea, fa), (eb, fb)):
            mid = (e[0] + e[1]) / 2
            e[0], e[1] = mid + np.sign(f) * abs(mean) / 2, mid - np.sign(f) * abs(mean) / 2
    from .model import dot_operator
    op = sum(np.kron(dot_operator(sa, f"s{c}"), dot_operator(sb, f"s{c}")) for c in "xyz")
    da, db = len(ea), len(eb)
    e = (ea[:, None] + eb[None, :]).reshape(-1)
    nu = e[:, None] - e[None, :]                   # element (r, c) turns at E_r − E_c
    cutoff = 0.5 / h
    groups: dict = {}
    dropped = 0.0
    scale = max(np.abs(nu).max(), 1.0)
    for r, c in zip(*np.nonzero(np.abs(op) > 1e-14)):
        f = nu[r, c]
        if f < 0:
            continue
        if f > cutoff:
            dropped = max(dropped, abs(op[r, c]))
            continue
        key = round(f / scale, 9)
        groups.setdefault(key, []).append((r, c, f))
    parts = []
    for key in sorted(groups):
        m = np.zeros_like(op)
        fs = []
        for r, c, f in groups[key]:
            m[r, c] = op[r, c]
            fs.append(f)
        parts.append((float(np.mean(fs)), m))
    return LevelPair(a, b, f"{qa}-{qb}", volts, tn, cpl.exchange, lo_v, hi_v, tuple(parts), dropped)

from .sources import ALL_ON, SOURCES, Switches


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
    u = (np.arange(m)[:, None] + (GL_X[None, :] + 1) / 2) * h          # (m, nodes) within a sample
    if tau > 0:
        yb = analog.rc_boundaries(x, dt, tau, y0)[:-1]
        v = x[:, None, None] + (yb - x)[:, None, None] * np.exp(-u / tau)[None, :, :]
        v = np.clip(v, min(x.min(), y0), max(x.max(), y0))
    else:
        v = np.broadcast_to(x[:, None, None], (n, m, GL_NODES))
    return np.ascontiguousarray(v).reshape(n * m, GL_NODES)


def build_model(wf: Waveforms, device: Device, *, switches: Switches = ALL_ON,
                m: int = 4, start: int = 0, stop: int | None = None, rwa: bool = True) -> Model:
    """The register model over samples [start, stop) of a compiled run.

    ``rwa=False`` keeps the counter-rotating half of the linear drive: for
    g > 0 the σ+ coefficient gains (r/2)·c·e^{i2π(f_q + LO)t}, for g < 0
    −(r/2)·c*·e^{−i2π(f_q + LO)t}; the sub-steps must then resolve twice the
    Larmor frequency (``m`` large), which makes it slow (Bloch & Siegert,
    Phys. Rev. 57, 522 (1940))."""
    dots = tuple(device.dots)
    four = {q for q in dots if device.dots[q].spin_valley}
    if four and not rwa:
        raise UsageError("the simulation without the rotating-wave approximation is for spin-1/2 "
                         f"dots only; {', '.join(sorted(four))} are spin–valley dots",
                         hint="leave out --no-rwa")
    specs = {q: (valley_spec(device, q) if q in four else
                 DotSpec(q, SPIN_HALF_LEVELS, device.dots[q].g < 0)) for q in dots}
    dt = 1.0 / wf.sample_rate
    stop = wf.n_samples if stop is None else stop
    h = dt / m
    K = (stop - start) * m
    sw = switches
    drive: dict[int, np.ndarray] = {}
    drive_terms: dict[int, tuple] = {}
    for idx, q in enumerate(dots):
        dot = device.dots[q]
        line = device.channels[dot.drive.line]
        tau = analog.rc_tau(line.rise_time) if sw.on("filters") else 0.0
        if sw.on("crosstalk"):
            out_i, out_q = wf.outputs[f"{line.name}.I"], wf.outputs[f"{line.name}.Q"]
            # as they arrive (delay alignment undone), through the line's mixer
            vi = out_i.arrived(out_i.volts if sw.on("quantised") else out_i.ideal)
            vq = out_q.arrived(out_q.volts if sw.on("quantised") else out_q.ideal)
            mx = line.mixer
            if mx is not None and not mx.ideal and sw.on("mixer"):
                c = analog.mixer_output(vi, vq, mx.gain_imbalance, mx.phase_skew,
                                        mx.offset_i, mx.offset_q)
            else:
                c = vi + 1j * vq
        else:
            c = wf.per_dot.get(q)
            if c is None:
                continue
        if q in four:
            terms = _valley_drive(specs[q], np.asarray(c, dtype=complex), dt, tau, m, line.lo,
                                  start, stop, dot.drive.rabi_per_volt, h)
            if terms:
                drive_terms[idx] = terms
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
        x = np.asarray(out.arrived(out.volts if sw.on("quantised") else out.ideal), dtype=float)
        tau = analog.rc_tau(ch.rise_time) if sw.on("filters") else 0.0
        y0 = out.before_run(x)
        v = _node_values(x, dt, tau, m, y0)
        if sw.on("bias_tee") and ch.bias_tee > 0:
            # high-pass of the tee (τ_b ≫ h: its low-pass part is taken per sub-step),
            # capacitor uncharged at the start, as in synth.as_played
            mean = v.mean(axis=1)
            v = v - analog.rc_boundaries(mean, h, ch.bias_tee, 0.0)[:-1, None]
        v = v[start * m:stop * m] + out.dc_level
        a, b = dots.index(cpl.dots[0]), dots.index(cpl.dots[1])
        if cpl.dots[0] in four or cpl.dots[1] in four:
            tn = start * dt + (np.arange(K)[:, None] + (GL_X[None, :] + 1) / 2) * h
            lo_v, hi_v = X.v_range(cpl.exchange)
            sp = {q: specs[q] if q in four else _spin_half_spec(device, q) for q in cpl.dots}
            pairs.append(_level_pair(device, sp, a, b, cpl.dots[0], cpl.dots[1], v, tn, cpl,
                                     lo_v, hi_v, h, sw.on("exchange_zeeman")))
            continue
        da, db = device.dots[cpl.dots[0]], device.dots[cpl.dots[1]]
        delta = (precession_sign(da.g) * device.larmor(cpl.dots[0])
                 - precession_sign(db.g) * device.larmor(cpl.dots[1])) if sw.on("exchange_zeeman") else 0.0
        tn = start * dt + (np.arange(K)[:, None] + (GL_X[None, :] + 1) / 2) * h
        phase = np.exp(2j * math.pi * delta * tn)
        lo_v, hi_v = X.v_range(cpl.exchange)
        pairs.append(Pair(a, b, f"{cpl.dots[0]}-{cpl.dots[1]}", v, phase, cpl.exchange,
                          lo_v, hi_v, delta))
    specs = tuple(specs[q] for q in dots)
    dissipators, noise, profiles, bands = [], [], [], []
    window = K * h
    # a register small enough for the toggling-frame correction takes the gate
    # bands there (.toggling), without the engines' modes
    small = math.prod(s.levels for s in specs) <= toggling.MAX_DIM
    for src in SOURCES.values():
        if not sw.on(src.key):
            continue
        if src.dissipators is not None:
            for idx, q in enumerate(dots):
                for op, rate in src.dissipators(device, q):
                    if rate > 0:
                        dissipators.append(Dissipator(src.key, idx, op, rate))
        if src.noise is not None:
            noise += [NoiseVariable(src.key, moves, target, rms)
                      for moves, target, rms in src.noise(device)]
        if src.window is not None and sw.on(src.key):
            # the bands of a spectrum for this window (sources.py, bands.py)
            nv, ds, pf, gb = window_terms(src.key, src.window(device, window), K, h,
                                          bands=True, modes=not small)
            noise += nv
            dissipators += ds
            profiles += pf
            bands += gb
    # the engines take the dissipators dot by dot, in registry order
    dissipators.sort(key=lambda d: d.dot)
    if not small:
        # larger registers: the Zeeman bands go through the engines' modes; the
        # barrier bands are not simulated there (docs/simulate.md, "Limits")
        bands = []
    return Model(specs, h, start * dt, K, drive, tuple(pairs), tuple(dissipators), tuple(noise),
                 drive_terms, tuple(profiles), tuple(bands))


def _valley_drive(spec: DotSpec, c: np.ndarray, dt: float, tau: float, m: int, lo: float,
                  start: int, stop: int, r: float, h: float) -> tuple:
    """Drive terms of a spin–valley dot: for every transition i ← j (E_i > E_j)
    that σ·n̂ connects and that lies within the sub-step's Nyquist band of the
    qubit transition, the coefficient of |i⟩⟨j| is
    (r/2)·D_ij·conj(mean of c·e^{−i2π(f_ij − LO)t}) (the spin-1/2's rule with
    the transition's own frequency and matrix element; rotating-wave
    approximation)."""
    from .model import dot_operator
    D = dot_operator(spec, "drive")
    e = spec.energies
    f_q = e[0] - e[1]
    out = []
    for i in range(spec.levels):
        for j in range(spec.levels):
            f = e[i] - e[j]
            if f <= 0 or abs(D[i, j]) ** 2 < CONNECT_TOL or abs(f - f_q) > 0.5 / h:
                continue
            b = _exact_means(c, dt, tau, m, f - lo, 0.0)[start * m:stop * m]
            if not np.any(b):
                continue
            out.append((f"t_{i}_{j}", (r / 2) * D[i, j] * np.conj(b)))
    return tuple(out)


MODE_CHUNKS = 1024     # gate-band modes are held on at most this many chunks per window


def window_terms(key: str, items, K: int, h: float, *, bands: bool = False, modes: bool = True):
    """Model terms of a source's band items (:attr:`.sources.Source.window`):
    (noise variables, dissipators, profiles), and with ``bands`` also the
    gate bands (:class:`.model.GateBand`) as a fourth element; without
    ``modes`` the gate-band modes are left out (the band is integrated by
    :mod:`.toggling` instead)."""
    noise, dissipators, profiles, gate = [], [], [], []
    links = []
    chunk = max(1, K // MODE_CHUNKS)
    for item in items:
        if item[0] in ("detuning", "barrier"):
            noise.append(NoiseVariable(key, *item))
        elif item[0] == "detuning_vector":
            noise.append(NoiseVariable(key, "detuning", item[1], item[2], item[3]))
        elif item[0] == "correlation":
            links.append(item[1:])
        elif item[0] == "dissipator":
            dissipators.append(Dissipator(key, item[1], item[2], item[3]))
        elif item[0] == "mode":
            if not modes:
                continue
            c, s = mode_shapes(item[2], item[3], K, h, chunk)
            profiles += [Profile(key, item[1], c), Profile(key, item[1], s)]
        elif item[0] == "band":
            gate.append(GateBand(key, *item[1:]))
        else:
            raise ValueError(f"source {key}: unknown band item {item[0]!r}")
    if links and bands:
        gate = [dataclasses.replace(b, partners=tuple(
            (y if x == b.target else x, c) for x, y, c in links if b.target in (x, y)))
            if b.moves == "detuning" else b for b in gate]
    return (noise, dissipators, profiles, gate) if bands else (noise, dissipators, profiles)
