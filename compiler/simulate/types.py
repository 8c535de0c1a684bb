"""What a simulation produces: the engines' :class:`Evolution` (consumed by
:mod:`.run`) and the results the report reads (plain frozen data)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass
class Evolution:
    """What an engine returns for one model (averaged over quadrature points)."""
    superop: np.ndarray | None      # d²×d² channel (column stacking), rotating frames
    rho: np.ndarray | None          # final density matrix, rotating frames
    traces: dict                    # {"t": times (s, from the run start), dot index: P(up)(t)}
    stats: dict
    ptm: np.ndarray | None = None   # the channel as a Pauli transfer matrix (fast engine)
    pauli: np.ndarray | None = None  # the state's Pauli coefficients (fast engine)


@dataclass(frozen=True)
class StepFidelity:
    """Average gate fidelity of one timeline entry (a step or a together group),
    simulated alone on the whole register against its ideal operation."""
    index: int                 # timeline entry index (first entry of a group)
    kind: str                  # rot, sqrtswap, ..., or "together"
    qubits: tuple[str, ...]
    label: str                 # short text, e.g. "rot A x 90°"
    source: str                # "file:line:col"
    start: float               # s
    duration: float            # s
    fidelity: float            # average gate fidelity (Nielsen 2002)
    leakage: float = 0.0       # population leaving the qubit levels, from the maximally mixed qubit state


@dataclass(frozen=True)
class Observable:
    """What one readout of a ``read`` at the end of a run records
    (docs/report.md, "Observables"): the probability of its outcome "yes"
    (spin up, singlet, even parity)."""
    label: str                 # "P(up) A", "P(singlet) A-B", "P(even) A-B"
    kind: str                  # "spin", "singlet" or "parity"
    qubits: tuple[str, ...]
    ideal: float               # a perfect readout of the simulated state
    measured: float            # with the device's preparation and readout errors
    target: float              # a perfect readout of the ideal circuit's state
    shots: int = 0             # repetitions given (0: none)
    counts: float | None = None    # expected number of "yes" outcomes, shots·measured
    error: float | None = None     # binomial 1σ of the recorded probability, √(p(1−p)/N)


@dataclass(frozen=True)
class SpectrumBand:
    """One band a noise spectrum was split into for the detail run's window
    (docs/simulate.md, "Noise spectra")."""
    name: str                  # "quasi-static", "gate", "fast" or "white"
    f_from: float              # Hz
    f_to: float                # Hz (inf: no upper cut-off)
    variance: float            # unit², ∫S df over the band (inf where it diverges)
    treatment: str             # how the simulation takes it


@dataclass(frozen=True)
class SpectrumSummary:
    """A noise spectrum of the device as simulated: S(f) = at_1hz/f^exponent
    + white on [f_low, f_high] (one-sided), its bands for the detail run and,
    for Zeeman noise, the coherence times it implies (1/e times of the
    filter-function integrals, :func:`compiler.spectra.implied_times`)."""
    target: str                # dot name, or coupling "A-B"
    quantity: str              # "zeeman" (qubit frequency) or "barrier" (barrier voltage)
    unit: str                  # of at_1hz and white: "Hz^2/Hz" or "V^2/Hz"
    at_1hz: float
    exponent: float
    white: float
    f_low: float               # Hz
    f_high: float              # Hz (inf: none)
    window: float              # s, the detail run's simulated window the bands are for
    bands: tuple[SpectrumBand, ...] = ()
    t2_star_s: float | None = None
    t2_s: float | None = None              # Hahn echo
    t2_cpmg_s: dict = field(default_factory=dict)   # N -> T2 (s)


@dataclass(frozen=True)
class BudgetLine:
    source: str                # "T1", "T2", "T2*", "charge noise", ...
    infidelity: float          # contribution: total infidelity minus infidelity with it off
    note: str = ""


@dataclass(frozen=True)
class RunResult:
    """One run (sweep point) simulated."""
    run_index: int
    sweep: tuple[tuple[str, float], ...]
    dots: tuple[str, ...]                    # register order
    duration: float                          # s, simulated span (to the start of the final readout)
    process_fidelity: float | None           # against the ideal circuit (None above 5 qubits)
    average_fidelity: float | None           # (d·F_pro + 1)/(d + 1)
    state_fidelity: float                    # from the declared initial state
    populations: dict[str, float]            # P(spin up) per dot at the end, in the qubit frames
    steps: tuple[StepFidelity, ...] = ()
    budget: tuple[BudgetLine, ...] = ()
    budget_total: float = 0.0                # infidelity with everything on
    budget_floor: float = 0.0                # infidelity with every listed source off
    budget_remainder: float = 0.0            # total − floor − Σ contributions (interaction)
    traces: dict = field(default_factory=dict)   # {"t": array, dot: P_up(t) array} for plots
    stats: dict = field(default_factory=dict)    # wall time, solver calls, ...
    # |F(n) − F(m)| of the last two quadrature rules (fidelity; n = nodes,
    # m = compared_nodes); 0 without quasi-static noise, None when not averaged
    averaging_error: float | None = 0.0
    nodes: int = 1                           # Gauss–Hermite nodes per noise variable used
    # numerical error of the budget's floor: sub-step model (Richardson, twice the
    # sub-steps) plus the fast engine's bound on dropped exchange
    budget_numerical_error: float = 0.0
    compared_nodes: int = 0                  # nodes of the coarser rule it was compared with
    leakage: float = 0.0                     # population outside the qubit levels at the end
                                             # (from the declared initial state; spin–valley dots)
    observables: tuple[Observable, ...] = ()     # what each trailing read records
    # the qubits the whole-run fidelities are of (register order): those the
    # program acts on by default, every dot with the whole-register option
    fidelity_qubits: tuple[str, ...] = ()


@dataclass(frozen=True)
class SimulationResult:
    sequence: str
    device_name: str
    engine: str                                # "reference" (qutip mesolve) or "fast"
    rwa: bool
    runs: tuple[RunResult, ...]
    axes: tuple[tuple[str, tuple[float, ...], str], ...]   # sweep name, values (SI), unit symbol
    coherence: tuple[tuple[str, float, float, float, bool], ...]  # dot, T2, longest gate, ratio, flagged
    settings: dict = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    stats: dict = field(default_factory=dict)
    # per dot with a Zeeman-noise spectrum: (dot, Spectrum, ((label, length s,
    # π-pulse times s), ...)): the filter functions the report's spectra.png overlays
    noise_spectra: tuple = ()
    # every noise spectrum of the device: parameters, bands of the detail run,
    # implied coherence times (results.json "spectra")
    spectra: tuple[SpectrumSummary, ...] = ()
