"""Physical constants (CODATA, through scipy.constants) and the closed-form
relations the whole pipeline shares.

Conventions (written once, used everywhere):

* Zeeman: E_z = g·μB·B; the Larmor frequency is f_L = |g|·μB·B/h.  The sign
  of g sets the sense of precession and is kept in :func:`precession_sign`.
* Exchange: H = J·S1·S2 with S = σ/2; J is stored as a frequency J/h in Hz.
  A phase ∫J dt/ħ = 2π∫(J/h) dt of π/2 is a √SWAP, of π a SWAP
  (Loss & DiVincenzo, PRA 57, 120 (1998)).
* Linear ESR drive of amplitude B1 perpendicular to B under the rotating-wave
  approximation: f_Rabi = |g|·μB·B1/(2h) (Abragam, Principles of Nuclear
  Magnetism, 1961; only half of a linear field co-rotates).
"""

from __future__ import annotations

import math

from scipy import constants as _c

H = _c.h                      # J s
HBAR = _c.hbar                # J s
K_B = _c.k                    # J/K
E_CHARGE = _c.e               # C (J per eV)
MU_B = _c.physical_constants["Bohr magneton"][0]            # J/T
G_FREE = _c.physical_constants["electron g factor"][0]      # -2.0023...

# Coherence rule of thumb: coherence time over operation time for fault tolerance.
COHERENCE_RULE = 1e4


def larmor_frequency(g: float, field: float) -> float:
    """Larmor frequency in Hz of a spin with g-factor ``g`` in ``field`` tesla:
    f = |g|·μB·B/h."""
    return abs(g) * MU_B * abs(field) / H


def precession_sign(g: float) -> int:
    """+1 when the spin precesses like a free electron (g > 0 in the
    convention E = g·μB·B·S_z), -1 for negative g (e.g. GaAs)."""
    return 1 if g >= 0 else -1


def rabi_from_b1(g: float, b1_per_volt: float) -> float:
    """Rabi frequency per volt (Hz/V) of a linear drive giving ``b1_per_volt``
    tesla per volt: f_Rabi = |g|·μB·B1/(2h) under the rotating-wave
    approximation."""
    return abs(g) * MU_B * b1_per_volt / (2.0 * H)


def energy_to_frequency(energy_ev: float) -> float:
    """An energy in eV as a frequency E/h in Hz."""
    return energy_ev * E_CHARGE / H


def exchange_phase(j_integral: float) -> float:
    """Exchange phase ∫J dt/ħ in rad from ∫(J/h) dt (dimensionless, Hz·s)."""
    return 2.0 * math.pi * j_integral

