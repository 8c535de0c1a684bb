"""Pulse design internals: the interpolated post-exchange frame phases agree
with the direct search, and the light-shift estimate matches perturbation
theory."""

import math

import numpy as np
import pytest

from compiler import pulses as PU
from compiler.device import load_device
from conftest import SEQUENCES

DEV = load_device(SEQUENCES / "devices" / "demo_pair.yaml")
C = DEV.coupling("A", "B")
DELTA = DEV.larmor("A") - DEV.larmor("B")


def _uq(U, xi, s, e):
    post = np.diag([np.exp(-1j * s), np.exp(-1j * e), np.exp(1j * e), np.exp(1j * s)])
    pre = np.diag([1, np.exp(1j * xi), np.exp(-1j * xi), 1])
    return post @ U @ pre


@pytest.mark.parametrize("gate", ["sqrtswap", "isqrtswap", "swap"])
def test_interpolated_post_phases_match_the_direct_search(gate):
    d = PU.design_exchange(gate, C, DEV, 1e-9)
    g = PU.pair_gate(d, C.exchange, DELTA)
    for xi in g.xi_best + np.linspace(-0.2, 0.2, 41) + math.pi * np.array([[0], [1], [-3]]):
        for x in np.atleast_1d(xi):
            a = PU.best_post_phases(d, C.exchange, DELTA, x)
            b = PU._best_post(g.U_mean, PU.TARGETS[gate], x)
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
