"""The register model the engines integrate, as data.

A :class:`Model` lists everything an engine needs and nothing else (no
device, no waveforms): the dots and their number of levels, the Hamiltonian
terms, the dissipators and the quasi-static noise variables.  It is built
from what is played by :func:`.build.build_model`; the noise sources it holds
come from the registry (:mod:`.sources`).  Frequencies in Hz; the
Schrödinger equation is dψ/dt = −i·2π·H·ψ; the Hamiltonian is piecewise
constant on ``k`` sub-steps of length ``h``.

Hamiltonian terms (operators of each dot by name, :func:`dot_operator`):

* drive on dot q: ``drive[q]`` is the complex coefficient c_k of the dot's
  ``raise`` operator per sub-step; the term is c·raise + c*·lower (the two
  quadratures);
* exchange on a pair (a, b) (:class:`Pair`): J·z_a z_b/4 + ½(F·raise_a lower_b + h.c.)
  with J the mean exchange and F the mean of J·e^{i2πδt} over each
  sub-step (Loss & DiVincenzo, PRA 57, 120 (1998));
* detuning on dot q: δf·z_q/2, with δf set by the quasi-static noise
  variables that move ``detuning`` (zero without noise).

Dissipators: √rate·operator on one dot (:class:`Dissipator`).  Quasi-static
noise: Gaussian variables (:class:`NoiseVariable`) averaged by quadrature
(:func:`noise_points`), each moving one dot's detuning (Hz) or one pair's
barrier voltage (V).

Levels: every dot declares its number of levels: 2 for a spin-1/2 in its
rotating frame, 4 for a spin–valley dot (:mod:`compiler.device.levels`) in
the interaction picture of its own levels, with its operators given by the
dot (:class:`DotSpec` ``ops``; index 0 the upper and 1 the lower qubit level,
so ``raise``, ``z`` and ``up`` mean what they mean for a spin-1/2).  Such a
dot is driven through every transition the drive connects
(``drive_terms``: c·O + c*·O† per term) and coupled by a :class:`LevelPair`.
The reference engine works for any number of levels; the fast engine's
Pauli representation is its fast path for two levels and a general path
(:mod:`.engines.levels`) takes clusters with other level counts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..device import exchange as X

SPIN_HALF_LEVELS = 2             # every dot today: a spin-1/2 (spin–valley dots come later)
GL_NODES = 6
GL_X, GL_W = np.polynomial.legendre.leggauss(GL_NODES)

# basis |0> = spin up (σz = +1): raise = σ+ = |↑><↓|
_SPIN_HALF = {
    "raise": np.array([[0, 1], [0, 0]], dtype=complex),
    "lower": np.array([[0, 0], [1, 0]], dtype=complex),
    "z": np.diag([1.0, -1.0]).astype(complex),
    "up": np.diag([1.0, 0.0]).astype(complex),          # projector on spin up
}
OPERATORS = {2: _SPIN_HALF}


@dataclass(frozen=True)
class DotSpec:
    name: str
    levels: int = 2
    ground_up: bool = False        # True when the ground state is spin up (g < 0)
    # dots with their own operators (spin–valley): (name, matrix as nested tuples)
    ops: tuple = ()
    energies: tuple[float, ...] = ()   # Hz, level energies in the dot's basis order
    qubit: tuple[int, int] = (0, 1)    # indices of the qubit levels in the dot's basis


def freeze(matrix: np.ndarray) -> tuple:
    """A matrix as nested tuples of complex numbers (hashable, for DotSpec.ops)."""
    return tuple(tuple(complex(x) for x in row) for row in np.asarray(matrix))


def dot_operator(dot: DotSpec, name: str) -> np.ndarray:
    """A named operator of one dot (``raise``, ``lower``, ``z``, ``up``,
    ``to_ground``, ``from_ground``, and a spin–valley dot's own: ``sx``,
    ``sy``, ``sz``, ``t_i_j`` = |i⟩⟨j|), a levels × levels matrix."""
    if dot.ops:
        for nm, m in dot.ops:
            if nm == name:
                return np.array(m, dtype=complex)
        if name in ("to_ground", "from_ground"):
            return dot_operator(dot, "lower" if name == "to_ground" else "raise")
        if name.startswith("t_"):
            i, j = (int(x) for x in name[2:].split("_"))
            out = np.zeros((dot.levels, dot.levels), dtype=complex)
            out[i, j] = 1.0
            return out
        raise KeyError(f"dot {dot.name}: no operator '{name}'")
    ops = OPERATORS.get(dot.levels)
    if ops is None:
        raise NotImplementedError(f"dot {dot.name}: no operators for {dot.levels} levels yet")
    if name == "to_ground":
        name = "raise" if dot.ground_up else "lower"
    elif name == "from_ground":
        name = "lower" if dot.ground_up else "raise"
    return ops[name]


def embed(matrix: np.ndarray, k: int, levels: tuple[int, ...]) -> np.ndarray:
    """A one-dot operator placed at register position k (identity on the
    other dots, dot 0 the most significant factor)."""
    out = np.eye(1, dtype=complex)
    for i, lv in enumerate(levels):
        out = np.kron(out, matrix if i == k else np.eye(lv, dtype=complex))
    return out


def embed_pair(matrix: np.ndarray, a: int, b: int, levels: tuple[int, ...]) -> np.ndarray:
    """An operator on dots (a, b) (a dA·dB square matrix, a the more significant
    factor) placed on the whole register (identity on the other dots)."""
    n = len(levels)
    da, db = levels[a], levels[b]
    rest = [i for i in range(n) if i not in (a, b)]
    full = np.kron(matrix, np.eye(math.prod(levels[i] for i in rest), dtype=complex))
    order = [a, b] + rest                       # axes of `full`
    dims = [levels[i] for i in order]
    t = full.reshape(dims + dims)
    perm = [order.index(i) for i in range(n)]
    t = t.transpose(perm + [n + p for p in perm])
    d = math.prod(levels)
    return t.reshape(d, d)


@dataclass(frozen=True, eq=False)
class Pair:
    """An exchange term between dots ``a`` and ``b`` (register indices)."""
    a: int
    b: int
    name: str                    # "A-B"
    volts: np.ndarray            # (K, GL_NODES) barrier voltage at the quadrature nodes, V
    phase: np.ndarray            # (K, GL_NODES) e^{i2πδ t} at the nodes
    exchange: object             # ExchangeModel of the coupling: J(V)
    v_lo: float
    v_hi: float
    delta: float = 0.0           # Hz, frequency δ of the flip-flop phase e^{i2πδt}

    def coefficients(self, dv: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
        """(J mean, mean of J·e^{i2πδt}) per sub-step, Hz, with a voltage offset."""
        v = np.clip(self.volts + dv, self.v_lo, self.v_hi)
        j = X.j_of_v(self.exchange, v)
        w = GL_W / 2
        return (j * w).sum(axis=1), (j * self.phase * w).sum(axis=1)


@dataclass(frozen=True, eq=False)
class LevelPair:
    """Exchange J·S_a·S_b between dots with their own operators (spin–valley
    dots: spin operators ⊗ identity on the valleys, the valley-polarised
    limit), in the interaction picture of both dots' levels: the operator
    splits into parts O_ν turning at frequencies ν (Hz), each with the
    coefficient J·e^{i2πνt} averaged over the sub-step at the Gauss–Legendre
    nodes; the ν = 0 part is Hermitian, the others come with their adjoint.
    Parts turning faster than ``cutoff`` are left out (secular limit)."""
    a: int
    b: int
    name: str
    volts: np.ndarray            # (K, GL_NODES) barrier voltage at the nodes, V
    times: np.ndarray            # (K, GL_NODES) s, times of the nodes
    exchange: object
    v_lo: float
    v_hi: float
    parts: tuple = ()            # ((ν Hz, operator on (a, b) as dA·dB square matrix), ...), ν ≥ 0
    dropped: float = 0.0         # largest |operator| norm left out (secular limit)

    def coefficients(self, dv: float = 0.0) -> tuple[np.ndarray, list]:
        """(J mean, [mean of J·e^{i2πνt} per part]) per sub-step, Hz."""
        v = np.clip(self.volts + dv, self.v_lo, self.v_hi)
        j = X.j_of_v(self.exchange, v)
        w = GL_W / 2
        out = []
        for nu, _ in self.parts:
            if nu == 0:
                out.append((j * w).sum(axis=1).astype(complex))
            else:
                out.append((j * np.exp(2j * math.pi * nu * self.times) * w).sum(axis=1))
        return (j * w).sum(axis=1), out


@dataclass(frozen=True)
class Dissipator:
    source: str                  # registry key
    dot: int                     # register index
    operator: str                # dot_operator name
    rate: float                  # 1/s: the collapse operator is √rate·operator


@dataclass(frozen=True)
class NoiseVariable:
    source: str                  # registry key
    moves: str                   # "detuning" (Hz, of a dot) or "barrier" (V, of a pair)
    target: int                  # dot or pair index
    rms: float
    # correlated detunings: the variable moves every dot k by weights[k]·x
    # (a unit vector over the register; target is then its largest entry)
    weights: tuple[float, ...] = ()


@dataclass(frozen=True, eq=False)
class Profile:
    """A noise variable with a shape in time (a gate-band mode of a noise
    spectrum): the detuning of ``dot`` is x·shape[k] on sub-step k, x the
    variable's value at a quadrature point (:attr:`NoisePoint.modes`),
    Gaussian with unit variance (the rms is in the shape)."""
    source: str                  # registry key
    dot: int                     # register index
    shape: np.ndarray            # (K,) Hz per unit of the variable


@dataclass(frozen=True, eq=False)
class GateBand:
    """The gate band of a noise spectrum on one target, integrated as a
    filter-function correction (:mod:`.toggling`; the engines do not read
    it): ``moves`` "detuning" (a dot's σz/2, spectrum in Hz²/Hz) or
    "barrier" (a pair's ∂H/∂V on the played barrier pulse, V²/Hz)."""
    source: str                  # registry key
    moves: str
    target: int                  # dot or pair index
    spectrum: object             # compiler.spectra.Spectrum
    f_lo: float                  # Hz, band edges
    f_hi: float
    # correlated Zeeman noise: ((other dot, correlation coefficient), ...)
    partners: tuple = ()


@dataclass(frozen=True, eq=False)
class Model:
    dots: tuple[DotSpec, ...]
    h: float                     # s, sub-step
    t0: float                    # s, window start (from the start of the run)
    k: int                       # number of sub-steps
    drive: dict = field(default_factory=dict)   # register index -> complex coefficient per sub-step (Hz)
    pairs: tuple = ()                           # Pair (spin-1/2 dots) or LevelPair
    dissipators: tuple[Dissipator, ...] = ()
    noise: tuple[NoiseVariable, ...] = ()
    # dots with their own operators: register index -> ((operator name, coefficient per
    # sub-step), ...), each term c·O + c*·O†
    drive_terms: dict = field(default_factory=dict)
    profiles: tuple[Profile, ...] = ()
    gate_bands: tuple[GateBand, ...] = ()      # read by .toggling, not by the engines

    def detuning_profile(self, dot: int, modes) -> np.ndarray | None:
        """Σ x_j·shape_j over the profiles on ``dot`` (Hz per sub-step), or
        None when every one of them is zero at this point."""
        out = None
        for x, p in zip(modes, self.profiles):
            if x and p.dot == dot:
                out = x * p.shape if out is None else out + x * p.shape
        return out

    @property
    def n(self) -> int:
        return len(self.dots)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(d.name for d in self.dots)

    @property
    def levels(self) -> tuple[int, ...]:
        return tuple(d.levels for d in self.dots)

    @property
    def dim(self) -> int:
        return math.prod(self.levels)

    @property
    def ground_up(self) -> tuple[bool, ...]:
        return tuple(d.ground_up for d in self.dots)

    @property
    def duration(self) -> float:
        return self.k * self.h

    def dissipators_of(self, dot: int) -> tuple[Dissipator, ...]:
        return tuple(d for d in self.dissipators if d.dot == dot)


# ------------------------------------------------------------------ quadrature

def gauss_hermite(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights for E[f(X)], X ~ N(0, 1): x = √2·t_i, w = w_i/√π
    (Gauss–Hermite quadrature; Abramowitz & Stegun 25.4.46)."""
    t, w = np.polynomial.hermite.hermgauss(n)
    return math.sqrt(2) * t, w / math.sqrt(math.pi)


TRAPEZOID_FROM = 17     # rules of this many nodes or more are equispaced (normal_rule)
TRAPEZOID_HALF_WIDTH = 5.0
# weight of N(0, 1) beyond ±TRAPEZOID_HALF_WIDTH, cut off by those rules: a fidelity moves by
# at most twice it (added to the stated averaging error of an equispaced rule)
TRAPEZOID_TAIL = math.erfc(TRAPEZOID_HALF_WIDTH / math.sqrt(2))


def normal_rule(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights for E[f(X)], X ~ N(0, 1), with ``n`` nodes.

    Below :data:`TRAPEZOID_FROM` nodes: Gauss–Hermite (:func:`gauss_hermite`),
    the best rule for smooth integrands.  From there on: the trapezoidal rule
    on [−5, 5] with weights ∝ exp(−x²/2) (normalised).  A run of free
    precession t under a quasi-static detuning of rms σ (Hz) makes the
    integrand oscillate as e^{i·a·x}, a = 2π·σ·t; Gauss–Hermite needs about
    e·a²/2 nodes for it, the trapezoidal rule only 2π/Δ ≳ a + 4.3 (spacing Δ:
    its error is the aliased term e^{−(2π/Δ − a)²/2}, by Poisson summation,
    plus the cut tails, :data:`TRAPEZOID_TAIL` = 5.7e-7 of the weight, which
    moves a fidelity by at most twice that and is added to the stated
    averaging error), i.e. about 1.6·(a + 4.3) nodes: linear in the free
    time instead of quadratic (17 nodes: a ≤ 5.8; 33: a ≤ 15.8; 65: a ≤ 36;
    129: a ≤ 76).  Measured on the
    GaAs Rabi example (a ≈ 15): 33 trapezoidal nodes agree with 129 to 1e-6,
    while 81 Gauss–Hermite nodes are still 0.1 off.  The rules of 2^k + 1
    nodes are nested, so a refined rule reuses the channels of the coarser
    one (the engines' caches)."""
    if n < TRAPEZOID_FROM:
        return gauss_hermite(n)
    x = np.linspace(-TRAPEZOID_HALF_WIDTH, TRAPEZOID_HALF_WIDTH, n)
    w = np.exp(-x ** 2 / 2)
    return x, w / w.sum()


@dataclass(frozen=True)
class NoisePoint:
    detuning: tuple[float, ...]          # Hz per dot
    dv: tuple[float, ...]                # V per pair
    weight: float
    modes: tuple[float, ...] = ()        # value of each of the model's profiles (unit variance)
    variable: int = -1                   # the one variable it moves (one-at-a-time rule), else -1


def noise_points(model: Model, nodes: int, mode: str = "auto", max_tensor: int = 27) -> list[NoisePoint]:
    """Quadrature points over the model's quasi-static noise variables
    (detuning per dot, voltage offset per barrier), in the model's order.

    ``tensor``: the full product grid (exact for the quadrature order).
    ``additive``: one variable at a time around zero, ρ ≈ ρ(0) + Σ_i (E_i[ρ] − ρ(0)),
    exact to second order in the noise amplitudes (cross terms between
    independent noises are of fourth order); used when the product grid is
    larger than ``max_tensor`` points (``auto``)."""
    pts = _constant_points(model, nodes, mode, max_tensor)
    return pts + _mode_points(model) if model.profiles else pts


MODE_NODES = 2       # Gauss–Hermite nodes per profiled variable (x = ±1: exact to third order)


def _mode_points(model: Model) -> list[NoisePoint]:
    """The gate-band modes, one variable at a time around zero (added to the
    constant variables' rule): Σ_j Σ_i w_i (ρ(x_i e_j) − ρ(0)); cross terms
    between independent variables are of fourth order in the amplitudes."""
    x, w = gauss_hermite(MODE_NODES)
    nd, npair, M = model.n, len(model.pairs), len(model.profiles)
    zero = (0.0,) * M
    pts = [NoisePoint((0.0,) * nd, (0.0,) * npair, -float(M), zero)]
    for j in range(M):
        for xv, wv in zip(x, w):
            modes = [0.0] * M
            modes[j] = float(xv)
            pts.append(NoisePoint((0.0,) * nd, (0.0,) * npair, float(wv), tuple(modes)))
    return pts


def _constant_points(model: Model, nodes: int, mode: str, max_tensor: int) -> list[NoisePoint]:
    x, w = normal_rule(nodes) if nodes > 1 else (np.zeros(1), np.ones(1))
    vars_ = [("d" if v.moves == "detuning" else "v", v.target, v.rms, v.weights)
             for v in model.noise if v.rms > 0]
    nd, npair = model.n, len(model.pairs)
    if not vars_ or nodes <= 1:
        return [NoisePoint((0.0,) * nd, (0.0,) * npair, 1.0)]
    if mode == "auto":
        mode = "tensor" if len(x) ** len(vars_) <= max_tensor else "additive"
    pts: list[NoisePoint] = []
    if mode == "tensor":
        import itertools
        for combo in itertools.product(range(len(x)), repeat=len(vars_)):
            det, dv, wt = [0.0] * nd, [0.0] * npair, 1.0
            for (kind, i, s, wv), c in zip(vars_, combo):
                _place(det, dv, kind, i, s * x[c], wv)
                wt *= w[c]
            pts.append(NoisePoint(tuple(det), tuple(dv), wt))
        return pts
    # additive: ρ(0) + Σ_i Σ_j w_ij (ρ(x_ij) − ρ(0)); nodes at zero fold into the centre
    centre_w = 1.0 - len(vars_)
    for k, (kind, i, s, vec) in enumerate(vars_):
        for xv, wv in zip(x, w):
            if abs(xv) < 1e-12:
                centre_w += float(wv)
                continue
            det, dv = [0.0] * nd, [0.0] * npair
            _place(det, dv, kind, i, s * xv, vec)
            pts.append(NoisePoint(tuple(det), tuple(dv), float(wv), (), k))
    centre_w += 0.0
    return [NoisePoint((0.0,) * nd, (0.0,) * npair, centre_w)] + pts


def _place(det: list, dv: list, kind: str, i: int, value: float, weights: tuple) -> None:
    """Add a noise variable's value to a point: one dot's detuning or one
    pair's barrier offset, or (``weights``) correlated detunings of several dots."""
    if kind == "d" and weights:
        for k, wk in enumerate(weights):
            det[k] += value * wk
    elif kind == "d":
        det[i] += value
    else:
        dv[i] += value
