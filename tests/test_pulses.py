"""Pulse design internals: the interpolated post-exchange frame phases agree
with the direct search, and the light-shift estimate matches perturbation
theory."""

import math

import numpy as np
import pytest

from compiler import pulses as PU
from compiler.steps import EXCHANGE_GATES
from compiler.device import load_device
from conftest import SEQUENCES

DEV = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
C = DEV.coupling("A", "B")
DELTA = DEV.larmor("A") - DEV.larmor("B")


def _uq(U, xi, s, e):
    post = np.diag([np.exp(-1j * s), np.exp(-1j * e), np.exp(1j * e), np.exp(1j * s)])
    pre = np.diag([1, np.exp(1j * xi), np.exp(-1j * xi), 1])
    return post @ U @ pre


@pytest.mark.parametrize("gate", ["sqrtswap", "sqrtswap_inv", "swap"])
def test_interpolated_post_phases_match_the_direct_search(gate):
    d = PU.design_exchange(gate, C, DEV, 1e-9)
    g = PU.pair_gate(d, C.exchange, DELTA)
    for xi in g.xi_best + np.linspace(-0.2, 0.2, 41) + math.pi * np.array([[0], [1], [-3]]):
        for x in np.atleast_1d(xi):
            a = PU.best_post_phases(d, C.exchange, DELTA, x)
            b = PU._best_post(g.U_mean, EXCHANGE_GATES[gate].target, x)
            same = abs(np.trace(_uq(g.U_mean, x, *a[1:]).conj().T @ _uq(g.U_mean, x, *b[1:]))) / 4
            assert 1 - same < 1e-12
            assert a[0] == pytest.approx(b[0], abs=1e-12)


def test_light_shift_matches_second_order_perturbation():
    # a weak square burst on a spectator detuned by Δ shifts it by Ω²/(2Δ)
    # (AC Stark / light shift; Autler & Townes, Phys. Rev. 100, 703 (1955)),
    # Ω and Δ as angular frequencies; the z angle over time T is −Ω²T/(2Δ)·sign
    from compiler.device.model import RotationDefaults
    rot = RotationDefaults(mode="duration", shape="square", duration=2e-6)
    b = PU.design_burst(math.pi / 4, 0.0, 1e6, 1e-9, rot)
    detuning = 20e6
    alpha = PU.spectator_phase(b, 1e6, detuning, 1e-9, 1)
    omega = 2 * math.pi * 1e6 * b.amplitude
    expected = omega ** 2 / (2 * 2 * math.pi * detuning) * 2e-6
    assert abs(alpha) == pytest.approx(expected, rel=2e-2)


# ---------------------------------------------------------------- long exchange slots

def _per_sample_propagator(design, model, delta):
    """The exchange propagator written out sample by sample and sub-step by
    sub-step (every sample computed, no repeats counted), as a reference for
    PU.pair_propagator; same model: H/h = J(t)·S1·S2 + (δ/2)(σz_a − σz_b)/2
    in the mean-Zeeman frame, J averaged by Gauss-Legendre over each sub-step."""
    from compiler import analog
    from compiler.device import exchange as X
    dt, m = design.dt, PU.SUBSTEPS
    x = design.samples()
    h = dt / m
    nodes = (PU._GL_X + 1.0) * 0.5 * h
    yb = analog.rc_boundaries(x, dt, design.tau, design.idle)[:-1] if design.tau > 0 else x
    U = np.eye(4, dtype=complex)
    sz = np.diag([1, 1, -1, -1]) - np.diag([1, -1, 1, -1])        # σz_a − σz_b
    ss = np.array([[1, 0, 0, 0], [0, -1, 2, 0], [0, 2, -1, 0], [0, 0, 0, 1]]) / 4   # S1·S2
    for k in range(len(x)):
        for j in range(m):
            t = j * h + nodes
            y = x[k] + (yb[k] - x[k]) * np.exp(-t / design.tau) if design.tau > 0 else x[k] + 0 * t
            y = np.clip(y, min(x.min(), design.idle), max(x.max(), design.idle))
            jbar = float((X.j_of_v(model, y) * PU._GL_W).sum() * 0.5)
            H = 2 * np.pi * (jbar * ss + delta / 4 * sz)
            w, v = np.linalg.eigh(H)
            U = (v * np.exp(-1j * w * h)) @ v.conj().T @ U
    return U


@pytest.mark.parametrize("tau", [0.0, 2e-9], ids=["no-rise-time", "rise-time"])
def test_pair_propagator_counts_settled_samples_exactly(tau):
    """Samples whose RC output has settled are raised to their count by
    repeated squaring; the result is the sample-by-sample product."""
    d = PU.design_exchange("sqrtswap", C, DEV, 1e-9)
    d = PU.ExchangeDesign("sqrtswap", 3, 40, 25 if tau else 0, d.level, d.idle, d.j_peak,
                          d.integral, d.target, tau, d.dt)
    U = PU.pair_propagator(d, C.exchange, DELTA)
    ref = _per_sample_propagator(d, C.exchange, DELTA)
    assert np.abs(U - ref).max() < 1e-9


def test_long_exchange_slot_costs_its_edges():
    """A slot of 10^7 samples (the design limit) is integrated and
    propagated without holding 10^7 samples' worth of nodes: ∫J dt is
    J(level)·n·dt up to the edges, and the propagator is unitary."""
    d = PU.design_exchange("sqrtswap", C, DEV, 1e-9)
    n = 10_000_000
    level = d.idle + 0.01                                  # 10 mV above idle: tiny J
    j = PU.j_integral(C.exchange, level, d.idle, 0, n, d.post, d.dt, d.tau)
    from compiler.device import exchange as X
    j_level = float(X.j_of_v(C.exchange, level))
    assert j == pytest.approx(j_level * n * d.dt, rel=1e-4)
    long = PU.ExchangeDesign("sqrtswap", 0, n, d.post, level, d.idle, j_level, j, d.target,
                             d.tau, d.dt)
    U = PU.pair_propagator(long, C.exchange, DELTA)
    # 1.6e8 sub-steps: float64 rounding of ~1e-16 per sub-step adds up to ~1e-8
    assert np.abs(U.conj().T @ U - np.eye(4)).max() < 1e-7
