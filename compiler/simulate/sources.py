"""The registry of imperfections: one entry per noise source.

Each :class:`Source` says what the error budget prints, what it reads from
the device, what kind of term it puts into the :class:`~.model.Model`, and
how it is switched off for the budget:

* ``lindblad``: per dot, dissipators (operator name, rate) computed by
  ``dissipators(device, dot)``; :func:`~.build.build_model` adds them for
  every dot while the switch is on.  Adding such a source is one device
  field plus one entry here (DEVELOPERS.md has a worked example).
* ``quasi-static``: noise variables (what they move, which dot or pair, rms)
  from ``noise(device)``, averaged by quadrature (:func:`~.model.noise_points`).
* ``played``: an imperfection of what the generators play (crosstalk,
  finite bandwidth, quantisation, bias tee, the Zeeman difference during
  exchange).  :func:`~.build.build_model` reads these switches by name, and
  ``compile_off`` lists the compile options (``CompileOptions`` fields) under
  which the run is recompiled when the source is off.

:class:`Switches` are keyed by the registry's keys: a switch that is not in
the registry is refused, and "everything off" is derived from the registry,
(:func:`all_off`, :func:`floor`), so a new source can never stay on silently.  The budget (:mod:`.run`) walks
the registry: every entry with ``budget="switch"`` is one line (total
infidelity minus the infidelity with it off).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from ..device.model import Device
from ..physics import H as PLANCK, K_B


@dataclass(frozen=True)
class Source:
    key: str                       # switch name
    name: str                      # the error budget's line
    reads: str                     # what it reads from the device
    note: str                      # the budget's explanation
    kind: str                      # "lindblad", "quasi-static", "gate band" or "played"
    # CompileOptions changes under which the run is recompiled while it is off
    compile_off: tuple[tuple[str, object], ...] = ()
    # lindblad: (device, dot name) -> ((operator, rate 1/s), ...); operators by
    # name from model.dot_operator: "to_ground", "from_ground", "z"
    dissipators: Callable[[Device, str], tuple[tuple[str, float], ...]] | None = None
    # quasi-static: device -> ((moves, dot or coupling index, rms), ...);
    # moves "detuning" (Hz, σz/2 of a dot) or "barrier" (V, a coupling's barrier)
    noise: Callable[[Device], tuple[tuple[str, int, float], ...]] | None = None
    budget: str = "switch"         # "switch", or "frame model" (see ZEEMAN in run.py)
    in_floor: bool = True          # switched off for the budget's floor
    # bands of a noise spectrum, which depend on the simulated window T (s):
    # (device, T) -> items ("detuning", dot, rms Hz) | ("barrier", coupling, rms V)
    # | ("mode", dot, f Hz, σ Hz) | ("dissipator", dot, operator, rate 1/s)
    # | ("band", "detuning" or "barrier", dot or coupling, Spectrum, f_from Hz, f_to Hz)
    window: Callable[[Device, float], tuple] | None = None
    # device -> whether the source is present at all; when it is not, its
    # budget line is 0 without an evaluation (None: always present)
    applies: Callable[[Device], bool] | None = None


def _relaxation(device: Device, q: str) -> tuple[tuple[str, float], ...]:
    """Relaxation to the ground state at Γ↓ and excitation at Γ↑ with
    Γ↓ + Γ↑ = 1/T1 and Γ↑/Γ↓ = e^{−hf/k_BT} (detailed balance)."""
    d = device.dots[q]
    if d.spin_valley:
        return _level_relaxation(device, q)
    x = PLANCK * device.larmor(q) / (K_B * device.temperature)
    g1 = 1.0 / d.t1
    down = g1 / (1 + math.exp(-x))
    return (("to_ground", down), ("from_ground", g1 - down))


def _level_relaxation(device: Device, q: str) -> tuple[tuple[str, float], ...]:
    """A spin–valley dot: relaxation among its four levels with detailed
    balance, spin flips at 1/T1, valley flips at 1/valley_t1, mixed levels
    through both (:func:`compiler.device.levels.relaxation_rates`; the
    hotspot of Yang et al., Nat. Commun. 4, 2069 (2013))."""
    from ..device.levels import relaxation_rates
    d = device.dots[q]
    rates = relaxation_rates(device.ladders[q], d.t1, d.valley_t1 or d.t1, device.temperature)
    return tuple((f"t_{j}_{i}", rate) for i, j, rate in rates)


def _dephasing(device: Device, q: str) -> tuple[tuple[str, float], ...]:
    """Pure dephasing √(γφ/2)·σz with γφ = 1/T2 − 1/(2T1)."""
    d = device.dots[q]
    if d.zeeman_noise is not None:
        return ()                  # a spectrum: its white and fast bands instead
    return (("z", max(1.0 / d.t2 - 1.0 / (2 * d.t1), 0.0) / 2),)


def _zeeman_noise(device: Device) -> tuple[tuple[str, int, float], ...]:
    """Quasi-static Gaussian detuning with T2* = √2/σ_ω (Merkulov, Efros &
    Rosen, PRB 65, 205309 (2002))."""
    return tuple(("detuning", i, math.sqrt(2) / d.t2_star / (2 * math.pi))
                 for i, d in enumerate(device.dots.values()) if d.zeeman_noise is None)


def _charge_noise(device: Device) -> tuple[tuple[str, int, float], ...]:
    return tuple(("barrier", i, c.charge_noise) for i, c in enumerate(device.couplings)
                 if c.barrier_noise is None)


def _spectral(device: Device, window: float, band: str) -> tuple:
    """One band (``static``, ``gate``, ``fast``) of every dot's Zeeman-noise
    spectrum for a window of T seconds (:func:`.bands.split`).  Correlated
    dots (``zeeman_correlation``): their quasi-static detunings are
    correlated Gaussians (one variable per eigenvector of their covariance)
    and their gate bands carry the correlation; the fast band stays
    independent per dot (docs/simulate.md)."""
    from .bands import split
    out = []
    names = list(device.dots)
    corr = {frozenset((a, b)): c for a, b, c in device.zeeman_correlation if c}
    linked = {q for k in corr for q in k}
    splits = {q: split(d.zeeman_noise, window) for q, d in device.dots.items()
              if d.zeeman_noise is not None}
    for i, (q, d) in enumerate(device.dots.items()):
        if d.zeeman_noise is None:
            continue
        b = splits[q]
        if band == "static" and b.static_rms > 0 and q not in linked:
            out.append(("detuning", i, b.static_rms))
        elif band == "gate":
            # the band itself (integrated by .toggling) and its modes (the
            # engines' representation, for registers too large for .toggling)
            if b.f_hi > b.f_qs:
                out.append(("band", "detuning", i, d.zeeman_noise, b.f_qs, b.f_hi))
            out += [("mode", i, f, sig) for f, sig in b.modes]
        elif band == "fast" and b.fast_rate > 0:
            out.append(("dissipator", i, "z", b.fast_rate))
    if band == "static" and linked:
        out += _correlated_static(device, splits, corr, sorted(linked, key=names.index))
    if band == "gate":
        out += [("correlation", names.index(a), names.index(b), c)
                for a, b, c in device.zeeman_correlation if c]
    return tuple(out)


def _correlated_static(device: Device, splits: dict, corr: dict, dots: list) -> list:
    """The quasi-static band of correlated dots: covariance
    Σ_ab = c_ab·∫ √(S_a·S_b) df over the band (a frequency-independent
    coherence c), as independent variables along its eigenvectors."""
    import numpy as np
    from ..spectra import Spectrum
    names = list(device.dots)
    n = len(dots)
    cov = np.zeros((n, n))
    for x, a in enumerate(dots):
        for y, b in enumerate(dots):
            sa, sb = device.dots[a].zeeman_noise, device.dots[b].zeeman_noise
            c = 1.0 if a == b else corr.get(frozenset((a, b)), 0.0)
            lo = max(sa.f_low, sb.f_low)
            hi = min(splits[a].f_qs, splits[b].f_qs)
            if c == 0 or not hi > lo or sa.is_white or sb.is_white:
                continue
            gm = Spectrum(math.sqrt(sa.s1 * sb.s1), (sa.beta + sb.beta) / 2, 0.0, lo, hi)
            cov[x, y] = c * gm.band_variance(lo, hi, white=False)
    lam, vec = np.linalg.eigh(cov)
    out = []
    for k in range(n):
        if lam[k] <= 1e-12 * max(lam.max(), 1e-300):
            continue
        w = [0.0] * len(names)
        for x, q in enumerate(dots):
            w[names.index(q)] = float(vec[x, k])
        top = max(range(len(w)), key=lambda j: abs(w[j]))
        out.append(("detuning_vector", top, math.sqrt(lam[k]), tuple(w)))
    return out


def _barrier_static(device: Device, window: float) -> tuple:
    """The barrier-voltage spectra below QS_FRACTION/T as a quasi-static
    offset (the band above it: :func:`_barrier_gate`)."""
    from .bands import split
    out = []
    for i, c in enumerate(device.couplings):
        if c.barrier_noise is not None:
            sp = c.barrier_noise
            b = split(sp, window)
            var = sp.band_variance(sp.f_low, b.f_qs) if not sp.is_white else 0.0
            if var > 0:
                out.append(("barrier", i, math.sqrt(var)))
    return tuple(out)


def _barrier_gate(device: Device, window: float) -> tuple:
    """The barrier-voltage spectra from QS_FRACTION/T to GATE_CYCLES/T (white
    part included) as a gate band: exchange fluctuations δJ = (dJ/dV)·δV on
    the as-played barrier pulses, acting while exchange is on, integrated as
    a filter-function correction (:mod:`.toggling`)."""
    from .bands import GATE_CYCLES, QS_FRACTION
    out = []
    if window <= 0:
        return ()
    for i, c in enumerate(device.couplings):
        sp = c.barrier_noise
        if sp is None:
            continue
        lo = max(sp.f_low, QS_FRACTION / window) if not sp.is_white else sp.f_low
        hi = min(sp.f_high, GATE_CYCLES / window)
        if hi > lo and sp.band_variance(lo, hi) > 0:
            out.append(("band", "barrier", i, sp, lo, hi))
    return tuple(out)


def _has_mixer(device: Device) -> bool:
    """Whether an I/Q line of the device has a mixer that is not ideal."""
    return any(c.mixer is not None and not c.mixer.ideal for c in device.channels.values())


def _has_zeeman_spectrum(device: Device) -> bool:
    """Whether a dot of the device has a Zeeman noise spectrum."""
    return any(d.zeeman_noise is not None for d in device.dots.values())


def _has_barrier_spectrum(device: Device) -> bool:
    """Whether a coupling of the device has a barrier noise spectrum."""
    return any(c.barrier_noise is not None for c in device.couplings)


def _has_bias_tee(device: Device) -> bool:
    """Whether a channel of the device is AC coupled through a bias tee."""
    return any(c.bias_tee > 0 for c in device.channels.values())


SOURCES: dict[str, Source] = {s.key: s for s in (
    Source("t1", "T1 relaxation", "dots.*.t1, temperature",
           "Lindblad relaxation with thermal excitation at the device temperature",
           "lindblad", dissipators=_relaxation),
    Source("t2", "pure dephasing (T2)", "dots.*.t2, dots.*.t1",
           "Markovian dephasing 1/T2 − 1/(2T1)", "lindblad", dissipators=_dephasing),
    Source("t2_star", "quasi-static Zeeman noise (T2*)", "dots.*.t2_star",
           "Gaussian detuning, rms √2/T2*, by quadrature", "quasi-static", noise=_zeeman_noise),
    Source("charge", "charge noise on exchange", "couplings.*.charge_noise",
           "quasi-static barrier offset of the device's rms, through J(V)", "quasi-static",
           noise=_charge_noise),
    Source("zeeman_static", "Zeeman noise spectrum, quasi-static band",
           "dots.*.zeeman_noise, acquisition_time",
           "S(f) below 0.1/T (T the simulated stretch) as a Gaussian detuning held for the "
           "stretch, by quadrature", "quasi-static",
           window=lambda dev, t: _spectral(dev, t, "static"), applies=_has_zeeman_spectrum),
    Source("zeeman_gate", "Zeeman noise spectrum, gate band", "dots.*.zeeman_noise",
           "S(f) from 0.1/T to 64/T on the played waveforms: by its filter function in "
           "the toggling frame (second-order cumulant) up to 16 levels in all, as "
           "random-phase sinusoids (1/(2T) apart up to 10/T, then 4 per decade) above",
           "gate band",
           window=lambda dev, t: _spectral(dev, t, "gate"), applies=_has_zeeman_spectrum),
    Source("zeeman_fast", "Zeeman noise spectrum, white and fast band", "dots.*.zeeman_noise",
           "white part and S(f) above 64/T as Lindblad dephasing", "lindblad",
           window=lambda dev, t: _spectral(dev, t, "fast"), applies=_has_zeeman_spectrum),
    Source("barrier_static", "barrier noise spectrum, quasi-static band",
           "couplings.*.barrier_noise, acquisition_time",
           "barrier-voltage S(f) below 0.1/T as a held offset, through J(V)", "quasi-static",
           window=_barrier_static, applies=_has_barrier_spectrum),
    Source("barrier_gate", "barrier noise spectrum, gate band", "couplings.*.barrier_noise",
           "barrier-voltage S(f) from 0.1/T to 64/T (white part included) as exchange "
           "fluctuations (dJ/dV)·δV on the played barrier pulses, by its filter function",
           "gate band", window=_barrier_gate, applies=_has_barrier_spectrum),
    Source("crosstalk", "drive crosstalk", "the shared microwave lines",
           "each dot driven only by its own bursts (and no light-shift corrections)", "played",
           compile_off=(("spectator_correction", False), ("per_dot", True))),
    Source("filters", "finite bandwidth", "channels.*.rise_time",
           "recompiled and played for channels without rise time", "played",
           compile_off=(("ideal_bandwidth", True),)),
    Source("quantised", "quantisation", "channels.*.bits, v_min, v_max",
           "unquantised samples", "played", compile_off=(("keep_ideal", True),)),
    Source("bias_tee", "bias tee", "channels.*.bias_tee", "no high-pass droop", "played",
           applies=_has_bias_tee),
    Source("mixer", "I/Q mixer imbalance", "channels.*.mixer",
           "an ideal mixer, playing I/Q as designed (with the correction on, what is left of "
           "the image and LO leakage after the pre-distortion)", "played",
           compile_off=(("mixer_correction", False),), applies=_has_mixer),
    Source("exchange_zeeman", "Zeeman difference in exchange", "dots.*.g, field",
           "from the exchange frame model: Σ over exchange gates of the infidelity left "
           "after frame compensation (noise-free), not by switching off", "played",
           budget="frame model", in_floor=False),
)}


@dataclass(frozen=True)
class Switches:
    """Which sources are off (everything else is on).  Keyed by the
    registry's keys; an unknown key is an error, never a switch left on."""
    off_keys: frozenset = frozenset()

    def __post_init__(self):
        unknown = set(self.off_keys) - set(SOURCES)
        if unknown:
            raise KeyError(f"no noise source {sorted(unknown)} in the registry "
                           f"(known: {', '.join(SOURCES)})")

    def on(self, key: str) -> bool:
        if key not in SOURCES:
            raise KeyError(f"no noise source '{key}' in the registry (known: {', '.join(SOURCES)})")
        return key not in self.off_keys

    def off(self, *keys: str) -> "Switches":
        return Switches(self.off_keys | frozenset(keys))

    def back_on(self, *keys: str) -> "Switches":
        for k in keys:
            self.on(k)
        return Switches(self.off_keys - frozenset(keys))


ALL_ON = Switches()


def all_off() -> Switches:
    """Every source of the registry off (read from the registry on each call)."""
    return Switches(frozenset(SOURCES))


def floor() -> Switches:
    """The budget's floor: every source off except those whose share is not
    found by switching (``in_floor=False``)."""
    return Switches(frozenset(k for k, s in SOURCES.items() if s.in_floor))


def compile_changes(switches: Switches) -> dict:
    """The compile options under which a run is played with these switches."""
    out: dict = {}
    for key in sorted(switches.off_keys, key=list(SOURCES).index):
        out.update(SOURCES[key].compile_off)
    return out
