"""What waveform synthesis produces: the sampled arrays every generator
channel plays, and the timeline that explains them.

All channels of a device share one sample rate (checked when the device is
loaded); sample ``i`` of every array is held on [i/fs, (i+1)/fs) (zero-order
hold).  Analog channels hold volts (already quantised to the DAC's codes),
markers hold 0/1.  An I/Q line ``mw`` gives two arrays, ``mw.I`` and ``mw.Q``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import TYPE_CHECKING, Callable

import numpy as np

if TYPE_CHECKING:                                  # annotations only
    from ..device.model import Device
    from ..program import Run
    from ..schedule.timeline import Timeline


@dataclass(frozen=True)
class Output:
    """One generator output (an analog channel, one half of an I/Q pair, or a
    marker) and its samples.

    ``volts`` (float64 V, quantised; markers 0.0/1.0) is derived from the DAC
    codes on first use when it was not stored (v = v_min + code·LSB), and
    ``ideal`` (float64 V before quantisation, what the design asked for) is
    kept only when synthesis was asked to keep it; otherwise it is ``volts``.
    A constant output is a read-only broadcast view."""

    name: str                        # "mw.I", "mw.Q", "P_A", "B_AB", "M1"
    channel: str                     # device channel it belongs to: "mw", "P_A", ...
    kind: str                        # "iq", "gate" or "marker"
    stored_volts: np.ndarray | None  # V, or None: derived from the codes
    codes: np.ndarray | None         # DAC codes (uint16 up to 16 bits, else uint32), None for markers
    stored_ideal: np.ndarray | None  # V before quantisation, or None: not kept
    dc_level: float = 0.0            # V supplied through the bias tee's DC port, not by the generator
    lsb: float = 0.0                 # V per DAC code (0 for markers)
    v_min: float = 0.0               # V of code 0
    marks: np.ndarray | None = None  # markers kept compactly as uint8 0/1
    shift: int = 0                   # samples played later than the timeline (channel delays)
    delay: float = 0.0               # s, the channel's delay to the sample (device file)

    @cached_property
    def volts(self) -> np.ndarray:
        if self.stored_volts is not None:
            return self.stored_volts
        if self.codes is None:
            return self.marks.astype(float)
        v = np.multiply(self.codes, self.lsb, dtype=float)
        v += self.v_min
        return v

    @property
    def ideal(self) -> np.ndarray:
        return self.stored_ideal if self.stored_ideal is not None else self.volts

    def volt_range(self) -> tuple[float, float]:
        """Lowest and highest volts (V) of the output, the same numbers as
        ``volts.min()``, ``volts.max()``, without building the volts array
        when only codes are kept (v = code·LSB + v_min rises with the code)."""
        if self.stored_volts is not None or self.codes is None or "volts" in self.__dict__:
            v = self.volts
            return (float(v.min()), float(v.max())) if len(v) else (0.0, 0.0)
        if not len(self.codes):
            return 0.0, 0.0
        ends = np.array([self.codes.min(), self.codes.max()])
        v = np.multiply(ends, self.lsb, dtype=float)
        v += self.v_min
        return float(v[0]), float(v[1])

    def arrived(self, values: np.ndarray | None = None) -> np.ndarray:
        """The samples (``values``, default :attr:`volts`) on the timeline's
        grid: advanced by :attr:`shift` (the alignment of the channels'
        delays), so that sample t is what reaches the sample at t plus the
        common latency; the end holds the last value.  The simulator takes
        every output this way."""
        v = self.volts if values is None else values
        sh = int(self.shift)
        if not sh or not len(v):
            return v
        return np.concatenate((v[sh:], np.full(min(sh, len(v)), v[-1])))

    def before_run(self, values: np.ndarray | None = None) -> float:
        """The level (V) the output holds before the run starts, for the
        analog path's initial state (``values`` as in :meth:`arrived`): a
        microwave output is silent; a gate output is where the previous run
        left it, its last sample (runs repeat back to back and end in
        padding).  Not its first sample: a pulse may start there, and the line
        still has to rise to it.  The as-played model and the simulator both
        take it from here."""
        v = self.volts if values is None else values
        if self.kind == "iq" or not len(v):
            return 0.0
        return float(v[-1])


@dataclass(frozen=True)
class StepRecord:
    """One entry of the timeline: a step, padding or an inserted phase wait, on the sample grid."""

    index: int                # position in the timeline
    kind: str                 # rot, zrot, sqrtswap, sqrtswap_inv, swap, wait, read, trigger,
                              # phasewait (wait inserted so an exchange starts at the right flip-flop phase), pad (end padding)
    qubits: tuple[str, ...]
    start: int                # first sample
    stop: int                 # one past the last sample
    channels: tuple[str, ...]  # device channels the step writes to
    source: str               # "file:line:col" of the statement, "" for padding
    text: str                 # the statement as written, "" for padding
    params: dict = field(default_factory=dict)  # SI values: angle_rad, phase_rad, amplitude_V,
                                                # level_V, j_Hz, frame_rad, ...


@dataclass(frozen=True)
class Waveforms:
    """Everything one run plays, on a common sample grid."""

    run_index: int
    sweep: tuple[tuple[str, float], ...]     # (name, SI value) of this run's sweep point
    sample_rate: float                       # Hz
    n_samples: int
    outputs: dict[str, Output]               # by output name, in device channel order
    steps: tuple[StepRecord, ...]
    frames: dict[str, float]                 # final frame phase of each dot (rad)
    larmor: dict[str, float]                 # Hz, per dot
    warnings: tuple[str, ...] = ()
    # with synthesize(per_dot=True): each dot's own bursts as a complex baseband
    # (I + iQ, V, before quantisation), for simulations without drive crosstalk
    per_dot: dict = field(default_factory=dict)
    sweep_text: str = ""                     # the sweep point with units: "tau = 400 ns"

    @property
    def duration(self) -> float:
        return self.n_samples / self.sample_rate

    def time(self) -> np.ndarray:
        """Start time (s) of each sample."""
        return np.arange(self.n_samples) / self.sample_rate


@dataclass(frozen=True)
class CompileOptions:
    """How checked runs become samples (one set for export, preview and
    simulation; the error budget's what-if variants change some of them)."""

    predistort: bool = False           # pre-distort gate outputs for their bias tee
    spectator_correction: bool = True  # light-shift frame corrections of undriven dots
    exchange_zeeman: bool = True       # Zeeman-difference model of the exchange gates
    ideal_bandwidth: bool = False      # play on channels without rise time (what-if)
    per_dot: bool = False              # also keep each dot's own bursts (what-if: no crosstalk)
    keep_ideal: bool = False           # also keep the unquantised samples (what-if: no quantisation)
    mixer_correction: bool = True      # pre-distort I/Q for the line's mixer calibration
    frame_log_steps: int = 200         # top-level steps whose frames are logged (per-step fidelities)

    def schedule_key(self) -> tuple:
        """The options that change the schedule (equal keys: one timeline serves both)."""
        return (self.spectator_correction, self.exchange_zeeman, self.ideal_bandwidth,
                self.frame_log_steps)


@dataclass(frozen=True)
class CompiledRun:
    """One run compiled: its timeline and what every channel plays."""

    index: int                         # position among the file's runs
    run: "Run"
    device: "Device"                   # as compiled (no rise times with ideal_bandwidth)
    timeline: "Timeline"
    waveforms: Waveforms
    options: CompileOptions


@dataclass(frozen=True)
class Recompiler:
    """The compiler's functions a later stage calls back, handed in with the
    compiled result (so that stage imports no compiler stage): ``run`` compiles
    the same run under other options (from a run compiled with
    ``ideal_bandwidth=False``); ``part`` renders only some of a run's slots
    (placement order), with the given final frames."""

    run: Callable[[CompiledRun, CompileOptions], CompiledRun]
    part: Callable[[CompiledRun, tuple, dict], Waveforms]
