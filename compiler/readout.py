"""Readout and preparation with their errors: what a lab's measurement records.

Pure functions, SI floats.  The device file gives, per dot (key ``readout``
under the dot) and per coupled pair (key ``readout`` under the coupling),
either the assignment fidelities or the physical parameters they follow from
(docs/device.md, "Readout and preparation").  :func:`dot_fidelities`,
:func:`pair_fidelities` and :func:`preparation_error` turn a device into the
numbers the simulator applies; :func:`recorded` maps a true probability to
the probability the readout records.

Energy-selective single-spin readout (Elzerman et al., Nature 430, 431
(2004)): the dot's levels are placed so that only a spin-up electron can
tunnel out to the reservoir, at rate Γ_out; while it waits it may relax to
spin down at rate 1/T1, after which it stays.  The charge sensor registers a
tunnel event within the integration time t.  With W = 1/T1, the probability
that a spin-up electron has tunnelled out by t follows from
dP_up/dt = −(Γ_out + W)·P_up, dP_out/dt = Γ_out·P_up:

    P_out(t) = Γ_out/(Γ_out + W) · (1 − e^{−(Γ_out + W)·t})

(derived here from the rate model of that paper).  The sensor adds a
symmetric assignment error ε per decision: a Gaussian signal of
signal-to-noise ratio SNR = ΔI/σ thresholded half way,
ε = ½·erfc(SNR/(2√2)) (common practice, no source).  Then

    F_up   = (1 − ε)·P_out + ε·(1 − P_out)
    F_down = 1 − ε

(a spin-down electron cannot tunnel out: only the sensor errs).

Preparation: loading the ground state from a reservoir at temperature T
leaves the excited spin state occupied with the Boltzmann probability
1/(1 + e^{h·f_L/(k_B·T)}) (textbook statistical mechanics).
"""

from __future__ import annotations

import math

from scipy.constants import h as PLANCK, k as BOLTZMANN

# readout kinds: per dot, and per coupled pair
DOT_KINDS = ("energy_selective",)
PAIR_KINDS = ("blockade", "parity")
# what a pair readout records ("yes" outcome) and the file keys of its fidelities
PAIR_RECORDS = {"blockade": ("singlet", "fidelity_singlet", "fidelity_triplet"),
                "parity": ("even", "fidelity_even", "fidelity_odd")}
# observables kinds in results.json
SPIN, SINGLET, PARITY = "spin", "singlet", "parity"
OBSERVABLE_OF = {"blockade": SINGLET, "parity": PARITY}


def tunnel_out_probability(tunnel_out: float, t1: float, window: float) -> float:
    """Probability that a spin-up electron tunnels out within ``window``.

    Parameters
    ----------
    tunnel_out : float, 1/s
        Γ_out, the spin-up tunnel-out rate (a rate, not an angular frequency).
    t1 : float, s
        Spin relaxation time during the readout (``inf``: none).
    window : float, s
        Integration time of the readout.

    Notes
    -----
    P = Γ/(Γ + W)·(1 − e^{−(Γ + W)·t}), W = 1/T1: the rate model of
    energy-selective readout (Elzerman et al., Nature 430, 431 (2004)).
    """
    if not (tunnel_out >= 0 and t1 > 0 and window >= 0):
        raise ValueError(f"need tunnel_out >= 0, t1 > 0, window >= 0; got {tunnel_out}, {t1}, "
                         f"{window}")
    w = 0.0 if math.isinf(t1) else 1.0 / t1
    total = tunnel_out + w
    if total == 0:
        return 0.0
    return tunnel_out / total * -math.expm1(-total * window)


def threshold_error(snr: float) -> float:
    """Assignment error of a Gaussian sensor signal with signal-to-noise
    ratio ``snr`` (step ΔI over the noise σ in the integration time),
    thresholded half way: ε = ½·erfc(SNR/(2√2)) (common practice, no
    source).  0 for an infinite SNR."""
    if not snr > 0:
        raise ValueError(f"snr must be positive, got {snr}")
    if math.isinf(snr):
        return 0.0
    return 0.5 * math.erfc(snr / (2 * math.sqrt(2)))


def energy_selective_fidelities(tunnel_out: float, t1: float, window: float,
                                snr: float = math.inf) -> tuple[float, float]:
    """(F_up, F_down) of energy-selective single-spin readout from its
    physical parameters (module notes; Elzerman et al., Nature 430, 431
    (2004))."""
    p = tunnel_out_probability(tunnel_out, t1, window)
    eps = threshold_error(snr)
    return (1 - eps) * p + eps * (1 - p), 1 - eps


def thermal_excitation(frequency: float, temperature: float) -> float:
    """Boltzmann occupation of the upper of two levels split by
    h·``frequency`` (Hz) at ``temperature`` (K): 1/(1 + e^{hf/k_BT})."""
    if temperature <= 0:
        return 0.0
    x = PLANCK * abs(frequency) / (BOLTZMANN * temperature)
    return 1.0 / (1.0 + math.exp(x)) if x < 700 else 0.0


def recorded(p_true: float, fidelity_yes: float, fidelity_no: float) -> float:
    """The probability a readout records the outcome "yes" (spin up, singlet,
    even) when the state gives it with ``p_true``: F_yes·p + (1 − F_no)·(1 − p)
    (the assignment matrix; common practice, no source)."""
    return fidelity_yes * p_true + (1.0 - fidelity_no) * (1.0 - p_true)


# ------------------------------------------------------------ from a device

def dot_fidelities(device, q: str) -> tuple[float, float]:
    """(F_up, F_down) of dot ``q``'s single-spin readout: as given, derived
    from its physical parameters, or (1, 1) when the dot has no readout."""
    ro = device.dots[q].readout
    if ro is None:
        return 1.0, 1.0
    if ro.tunnel_out is not None:
        t1 = ro.relaxation if ro.relaxation is not None else device.dots[q].t1
        return energy_selective_fidelities(ro.tunnel_out, t1, ro.integration_time, ro.snr)
    return ro.fidelity_up, ro.fidelity_down


def pair_fidelities(coupling) -> tuple[float, float]:
    """(F_yes, F_no) of a coupled pair's readout (singlet/triplet for
    blockade, even/odd for parity)."""
    ro = coupling.readout
    return (1.0, 1.0) if ro is None else (ro.fidelity_yes, ro.fidelity_no)


def preparation_error(device, q: str) -> float:
    """Probability that dot ``q`` starts in the flipped spin state: given,
    thermal (from the device temperature and the dot's Zeeman energy), or 0
    when the dot has no readout block."""
    ro = device.dots[q].readout
    if ro is None:
        return 0.0
    if ro.preparation == "thermal":
        return thermal_excitation(device.larmor(q), device.temperature)
    return ro.preparation_error
