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
# Waveform memories of generators hold from about 10^5 to a few 10^9 samples
# per channel (common practice, no source); the bound only refuses nonsense.
MAX_MEMORY = 2 ** 40           # samples
# Cable and filter delays are nanoseconds to a few microseconds (common
# practice, no source); the bound keeps the alignment padding bounded like
# MAX_MIN_LENGTH.
MAX_DELAY_SAMPLES = 2 ** 24    # samples


@dataclass(frozen=True)
class Mixer:
    """The calibration of an I/Q line's mixer, as a lab measures it.

    Model (common practice, no source): the mixer's I and Q inputs carry
    their own DC offsets, its Q path has the gain ``gain_imbalance`` relative
    to I and is ``phase_skew`` away from quadrature, so that with the
    local oscillator at ω it plays

        V(t) = (I + offset_i)·cos ωt − g·(Q + offset_q)·sin(ωt + φ)
             = Re[((I + offset_i) + i·g·e^{iφ}·(Q + offset_q))·e^{iωt}].

    An ideal mixer (g = 1, φ = 0, no offsets) plays Re[(I + iQ)·e^{iωt}].
    :func:`compiler.analog.mixer_predistort` inverts the model.
    """

    gain_imbalance: float = 1.0    # Q's gain over I's (plain ratio)
    phase_skew: float = 0.0        # rad, deviation of Q from 90° after I
    offset_i: float = 0.0          # V, DC offset at the mixer's I input
    offset_q: float = 0.0          # V, DC offset at the mixer's Q input
    span: Span | None = None

    @property
    def ideal(self) -> bool:
        return (self.gain_imbalance == 1.0 and self.phase_skew == 0.0
                and self.offset_i == 0.0 and self.offset_q == 0.0)


@dataclass(frozen=True)
class Drive:
    """How a dot is driven by ESR: microwave line and calibration."""

    line: str                 # name of an IQ channel pair
    rabi_per_volt: float      # Hz/V of microwave amplitude (from B1/V if given so)
    span: Span | None = None
    # direction of the drive's oscillating field (x in-plane along the static
    # field's in-plane part, z out of plane); None = the default, in-plane and
    # perpendicular to the static field (levels.default_direction).  Used by
    # spin–valley dots only.
    direction: tuple[float, float, float] | None = None


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
    # spin–valley dot (docs/device.md): present when the file or the preset
    # gives any of spin_orbit, valley_splitting, valley_g; None = a spin-1/2
    spin_orbit: float | None = None        # Hz, Kane–Mele gap Δ_SO/h
    valley_splitting: float | None = None  # Hz, Δ_KK′/h (K–K′ mixing; E_v/h in silicon)
    valley_g: float | None = None          # valley g-factor g_v
    valley_t1: float | None = None         # s, valley relaxation time (None: t1)
    qubit_levels: tuple[int, int] | None = None  # levels of the qubit (None: default rule)

    @property
    def spin_valley(self) -> bool:
        """True for a four-level (spin–valley) dot."""
        return (self.spin_orbit is not None or self.valley_splitting is not None
                or self.valley_g is not None)

    @property
    def levels(self) -> int:
        return 4 if self.spin_valley else 2


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
    memory: int = 0           # samples of waveform memory for one run; 0 = not limited
    delay: float = 0.0        # s, cables and filters from the generator to the sample
    mixer: Mixer | None = None  # iq: the mixer's calibration (None: an ideal mixer)

    @property
    def delay_samples(self) -> int:
        """The delay on the sample grid: rounded to the nearest sample."""
        return int(round(self.delay * self.sample_rate)) if self.delay > 0 else 0

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
class VoltagePoint:
    """A named charge configuration: the levels (V, absolute, as the sample
    sees them) of the gate channels it names.  A ``move`` step takes the
    gates there; gates of other points that this one does not name go back
    to their rest level (a barrier's idle_voltage, else 0 V)."""
    name: str
    levels: tuple[tuple[str, float], ...]   # (gate channel, V), in file order
    span: Span | None = None

    def level(self, channel: str) -> float | None:
        return dict(self.levels).get(channel)


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
    field_tilt: float = 0.0   # rad from the sample plane (0 = in-plane, π/2 = out of plane)
    acquisition_time: float = 0.0   # s, total time a measurement averages over (0: not given)
    points: dict[str, VoltagePoint] = field(default_factory=dict)  # named voltage points
    # correlation coefficients of dots' Zeeman-noise spectra: ((dot A, dot B, c), ...)
    zeeman_correlation: tuple[tuple[str, str, float], ...] = ()
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
        """Samples the generators play for a timeline of ``n`` samples: ``n``
        plus the alignment of the channels' delays, at least ``min_length``,
        rounded up to a multiple of ``granularity``.
        Every memory estimate before synthesis uses this length."""
        g = self.granularity
        return -(-max(int(n) + self.alignment, self.min_length) // g) * g

    @property
    def shifts(self) -> dict[str, int]:
        """Samples by which each channel's output is played later than the
        timeline, so that every channel's pulses reach the sample together:
        the largest delay minus the channel's own (0 for the slowest path)."""
        d = {n: c.delay_samples for n, c in self.channels.items()}
        top = max(d.values(), default=0)
        return {n: top - v for n, v in d.items()}

    @property
    def alignment(self) -> int:
        """Samples the outputs grow by for the delays (the largest shift)."""
        return max(self.shifts.values(), default=0)

    def rest_level(self, channel: str) -> float:
        """The level (V) a gate channel holds when no point names it: its
        coupling's idle_voltage for a barrier, else 0 V."""
        for c in self.couplings:
            if c.barrier == channel:
                return c.idle_voltage
        return 0.0

    @cached_property
    def point_channels(self) -> tuple[str, ...]:
        """The gate channels any voltage point names, in file order."""
        return tuple(dict.fromkeys(ch for p in self.points.values() for ch, _ in p.levels))

    def larmor(self, dot: str) -> float:
        """Larmor frequency of a dot (Hz)."""
        return self.larmor_table[dot]

    def rabi_per_volt(self, dot: str) -> float:
        """Rabi frequency per volt of the qubit transition (Hz/V): the drive's
        calibration for a bare spin times |⟨upper|σ·n̂|lower⟩| (exactly the
        calibration for a spin-1/2)."""
        d = self.dots[dot]
        if not d.spin_valley:
            return d.drive.rabi_per_volt
        return d.drive.rabi_per_volt * self.ladders[dot].element

    @cached_property
    def larmor_table(self) -> dict[str, float]:
        """Qubit frequency per dot: |g|·μB·B/h for a spin-1/2, the qubit
        transition of the level ladder for a spin–valley dot."""
        from ..physics import larmor_frequency
        return {name: (self.ladders[name].larmor if d.spin_valley
                       else larmor_frequency(d.g, self.field))
                for name, d in self.dots.items()}

    @cached_property
    def ladders(self) -> dict:
        """Level ladder (:class:`.levels.Ladder`) of every spin–valley dot."""
        return {name: dot_ladder(d, self.field, self.field_tilt)
                for name, d in self.dots.items() if d.spin_valley}


def dot_ladder(d: Dot, field: float, tilt: float):
    """The :class:`.levels.Ladder` of a spin–valley dot in this field."""
    from .levels import ladder
    return ladder(d.spin_orbit or 0.0, d.valley_splitting or 0.0, d.g, d.valley_g or 0.0,
                  field, tilt, d.drive.direction, d.qubit_levels)


def granularity_of(values) -> int:
    """Least common multiple of channel granularities (each at least 1)."""
    g = 1
    for v in values:
        v = max(1, int(v))
        g = g * v // math.gcd(g, v)
    return g
