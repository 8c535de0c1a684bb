"""The device description as plain frozen data (SI floats everywhere).

Produced by :func:`compiler.device.load_device`; consumed by the checker,
the scheduler and (later) waveform synthesis and simulation.  Every record
keeps ``span`` pointing at its place in the YAML file for error messages.
Exchange strengths are frequencies J/h in Hz; energies in the file (eV) are
converted with E/h.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property

from ..errors import Problem, Span
from .exchange import ExchangeModel

# What a generator channel can be (checked when loading; docs/device.md).
# DAC widths: arbitrary waveform generators have 8 to 16 bits, precision DC
# sources for gates up to 20 (common practice, no source); 24 bits leave
# margin and every code 0 … 2^24 − 1 is held exactly by the bundle's int32
# codes and by the float64 arithmetic that computes them.
MAX_BITS = 24
# Padding: generators' minimum waveform lengths are tens to a few thousand
# samples and their length granularities 1 to 64 samples (common practice, no
# source).  The bounds are far above both and keep padding alone below
# 2^24 + 2^16 samples a run (about 17 ms at 1 GS/s).
MAX_MIN_LENGTH = 2 ** 24       # samples
MAX_GRANULARITY = 2 ** 16      # samples, also for the common multiple of all channels


@dataclass(frozen=True)
class Drive:
    """How a dot is driven by ESR: microwave line and calibration."""

    line: str                 # name of an IQ channel pair
    rabi_per_volt: float      # Hz/V of microwave amplitude (from B1/V if given so)
    span: Span | None = None


@dataclass(frozen=True)
class SpinReadout:
    """A dot's single-spin readout and preparation (docs/device.md,
    "Readout and preparation"; the physics is :mod:`compiler.readout`).

    Either the assignment fidelities are given, or ``tunnel_out`` (and the
    integration time, optionally the relaxation time during the readout and
    the sensor's signal-to-noise ratio) from which they follow."""

    kind: str = "energy_selective"
    fidelity_up: float = 1.0        # P(record up | spin up)
    fidelity_down: float = 1.0      # P(record down | spin down)
    tunnel_out: float | None = None  # 1/s, spin-up tunnel-out rate (then fidelities derived)
    relaxation: float | None = None  # s, T1 during the readout (None: the dot's t1)
    integration_time: float = 0.0   # s
    snr: float = math.inf           # sensor signal over noise in the integration time
    preparation: str = "thermal"    # "thermal" or "given"
    preparation_error: float = 0.0  # P(start flipped) when "given"
    span: Span | None = None


@dataclass(frozen=True)
class PairReadout:
    """A coupled pair's readout: Pauli spin blockade (records singlet or
    not) or parity (records even or odd)."""

    kind: str = "blockade"          # "blockade" or "parity"
    fidelity_yes: float = 1.0       # P(record singlet | singlet) / P(record even | even)
    fidelity_no: float = 1.0        # P(record triplet | triplet) / P(record odd | odd)
    span: Span | None = None


@dataclass(frozen=True)
class Dot:
    name: str
    g: float
    t1: float                 # s
    t2: float                 # s  (Hahn echo)
    t2_star: float            # s
    drive: Drive
    plunger: str              # gate channel name
    preset: str = ""          # material preset the values came from, if any
    sources: tuple[str, ...] = ()  # where each preset value came from
    span: Span | None = None
    # spectrum of the Larmor frequency's fluctuations (compiler.spectra.Spectrum,
    # Hz²/Hz); when given, t2 and t2_star hold the times it implies
    zeeman_noise: object = None
    readout: SpinReadout | None = None   # single-spin readout and preparation errors


@dataclass(frozen=True)
class Coupling:
    """Exchange between two dots (any pair: the couplings form a graph)."""

    dots: tuple[str, str]
    barrier: str              # gate channel name
    exchange: ExchangeModel
    idle_voltage: float = 0.0       # V  barrier level between gates
    pulse_voltage: float | None = None  # V default barrier level during exchange
    charge_noise: float = 0.0       # V rms voltage noise on the barrier
    detune: tuple[tuple[str, float], ...] = ()  # intermediate dot -> plunger offset (V)
    span: Span | None = None
    barrier_noise: object = None    # spectrum of the barrier voltage (Spectrum, V²/Hz)
    readout: PairReadout | None = None   # blockade or parity readout of the pair

    @property
    def key(self) -> frozenset[str]:
        return frozenset(self.dots)


@dataclass(frozen=True)
class Channel:
    """One generator output, or an I/Q pair for microwave lines."""

    name: str
    kind: str                 # "iq", "gate" or "marker"
    sample_rate: float        # Hz
    bits: int = 1
    v_min: float = 0.0        # V
    v_max: float = 1.0        # V
    rise_time: float = 0.0    # s (10-90 %); 0 = ideal
    min_length: int = 1       # samples
    granularity: int = 1      # samples
    lo: float = 0.0           # Hz   (iq)
    if_min: float = 0.0       # Hz   (iq, signed)
    if_max: float = 0.0       # Hz   (iq, signed)
    bias_tee: float = 0.0     # s, high-pass time constant; 0 = DC coupled
    span: Span | None = None

    @property
    def bandwidth(self) -> float:
        """-3 dB bandwidth of a first-order response with this rise time:
        f = 0.35/t_rise (common practice, no source); inf when ideal."""
        return 0.35 / self.rise_time if self.rise_time > 0 else float("inf")


@dataclass(frozen=True)
class RotationDefaults:
    """How a rotation becomes a burst unless a step overrides it."""

    mode: str = "amplitude"   # "amplitude": fixed amplitude, duration from angle
                              # "duration": fixed duration, amplitude from angle
    shape: str = "square"     # "square", "gauss", "flattop"
    amplitude: float = 0.1    # V   (mode amplitude)
    duration: float = 0.0     # s   (mode duration)
    sigmas: float = 4.0       # gauss: total length in standard deviations
    edge: float = 0.0         # s   flattop: length of each cosine edge


@dataclass(frozen=True)
class Readout:
    marker: str = ""          # marker channel for readout windows
    duration: float = 0.0     # s
    trigger_marker: str = ""  # marker channel for trigger steps


@dataclass(frozen=True)
class Device:
    name: str
    path: str                 # file it was loaded from
    field: float              # T
    temperature: float        # K
    dots: dict[str, Dot]
    couplings: tuple[Coupling, ...]
    channels: dict[str, Channel]
    rotation: RotationDefaults = RotationDefaults()
    readout: Readout = Readout()
    notes: str = ""
    acquisition_time: float = 0.0   # s, total time a measurement averages over (0: not given)
    # Physically doubtful but legal settings (large idle exchange, weak
    # thermal polarisation, ...): positioned like errors, never raised.
    warnings: tuple[Problem, ...] = ()

    def coupling(self, a: str, b: str) -> Coupling | None:
        key = frozenset((a, b))
        for c in self.couplings:
            if c.key == key:
                return c
        return None

    @property
    def sample_rate(self) -> float:
        """The sample rate all channels share (Hz); checked when loading."""
        return next(iter(self.channels.values())).sample_rate

    @property
    def min_length(self) -> int:
        """Samples every run must have at least: the longest channel minimum."""
        return max([c.min_length for c in self.channels.values()] + [1])

    @property
    def granularity(self) -> int:
        """Samples a run's length must be a multiple of: the least common
        multiple of the channels' granularities (at most MAX_GRANULARITY,
        checked when loading)."""
        return granularity_of(c.granularity for c in self.channels.values())

    def padded_samples(self, n: int) -> int:
        """Samples the generators play for a timeline of ``n`` samples: at
        least ``min_length``, rounded up to a multiple of ``granularity``.
        Every memory estimate before synthesis uses this length."""
        g = self.granularity
        return -(-max(int(n), self.min_length) // g) * g

    def larmor(self, dot: str) -> float:
        """Larmor frequency of a dot (Hz)."""
        return self.larmor_table[dot]

    @cached_property
    def larmor_table(self) -> dict[str, float]:
        from ..physics import larmor_frequency
        return {name: larmor_frequency(d.g, self.field) for name, d in self.dots.items()}


def granularity_of(values) -> int:
    """Least common multiple of channel granularities (each at least 1)."""
    g = 1
    for v in values:
        v = max(1, int(v))
        g = g * v // math.gcd(g, v)
    return g
