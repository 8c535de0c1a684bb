"""Readout and preparation with their errors: the device keys, the physics of
:mod:`compiler.readout`, and the observables a simulated run records.

Physics checks name their source beside them, or say "common practice, no
source" / "value from memory".
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants as sc
from scipy.integrate import solve_ivp

from compiler import readout as RO
from compiler.device import load_device_text
from compiler.errors import DeviceError

# A two-dot device; READOUT_* lines are spliced in below the dots / the coupling.
DEVICE = """\
name: "readout test pair"
field: 500 mT
temperature: 40 mK
dots:
  A:
    g: 2.0
    t1: 1 ms
    t2: 20 us
    t2_star: 2 us
    drive: {{line: mw, rabi_per_volt: 10 MHz/V}}
    plunger: P_A
{ra}
  B:
    g: 2.02
    t1: 1 ms
    t2: 20 us
    t2_star: 2 us
    drive: {{line: mw, rabi_per_volt: 10 MHz/V}}
    plunger: P_B
{rb}
couplings:
  - dots: [A, B]
    barrier: B_AB
    exchange: {{model: exponential, j0: 20 kHz, v0: 40 mV}}
    idle_voltage: 0 mV
    pulse_voltage: 250 mV
{rc}
channels:
  mw: {{kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], lo: 14.05 GHz, if_band: [-300 MHz, 300 MHz]}}
  P_A: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  P_B: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  B_AB: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  M1: {{kind: marker, sample_rate: 1 GS/s}}
"""


def device(ra: str = "", rb: str = "", rc: str = ""):
    return load_device_text(DEVICE.format(ra=ra, rb=rb, rc=rc), "ro.yaml")


def problem(text_kw: dict, fragment: str):
    with pytest.raises(DeviceError) as ei:
        device(**text_kw)
    for p in ei.value.problems:
        if fragment in p.message or fragment in p.hint:
            return p
    raise AssertionError(f"no problem mentions {fragment!r}:\n{ei.value}")


# ------------------------------------------------------------ physics

def test_tunnel_out_probability_against_the_rate_equations():
    """P_out(t) = Γ/(Γ+W)·(1 − e^{−(Γ+W)t}) against the rate equations of
    energy-selective readout integrated numerically (dP↑/dt = −(Γ+W)P↑,
    dP_out/dt = ΓP↑; the rate model of Elzerman et al., Nature 430, 431
    (2004), title and authors checked, volume and page from memory)."""
    gamma, t1, t = 2.0e4, 3.0e-4, 2.5e-4

    def rhs(_, y):
        return [-(gamma + 1 / t1) * y[0], gamma * y[0]]

    sol = solve_ivp(rhs, (0, t), [1.0, 0.0], rtol=1e-11, atol=1e-13)
    assert RO.tunnel_out_probability(gamma, t1, t) == pytest.approx(sol.y[1, -1], rel=1e-8)
    # long window, no relaxation: every spin-up electron leaves
    assert RO.tunnel_out_probability(gamma, math.inf, 1.0) == pytest.approx(1.0, abs=1e-12)
    # long window: the branching ratio Γ/(Γ + 1/T1) = 1/(1 + 1/(Γ·T1))
    assert RO.tunnel_out_probability(gamma, t1, 1.0) == pytest.approx(
        1 / (1 + 1 / (gamma * t1)), rel=1e-12)


def test_energy_selective_fidelities_closed_form():
    """F_up = (1−ε)P_out + ε(1−P_out), F_down = 1 − ε with ε = ½erfc(SNR/2√2)
    (Elzerman et al., Nature 430, 431 (2004) for P_out; the threshold error:
    common practice, no source), each written out independently here."""
    gamma, t1, t, snr = 5.0e4, 1.0e-3, 1.0e-4, 6.0
    p = gamma / (gamma + 1 / t1) * (1 - math.exp(-(gamma + 1 / t1) * t))
    eps = 0.5 * math.erfc(snr / (2 * math.sqrt(2)))
    f_up, f_down = RO.energy_selective_fidelities(gamma, t1, t, snr)
    assert f_up == pytest.approx((1 - eps) * p + eps * (1 - p), rel=1e-12)
    assert f_down == pytest.approx(1 - eps, rel=1e-12)
    # the Gaussian threshold error against a direct integral of the noise tail
    from scipy.stats import norm
    assert RO.threshold_error(snr) == pytest.approx(norm.sf(snr / 2), rel=1e-10)


def test_thermal_preparation_error_is_boltzmann():
    """1/(1 + e^{hf/kT}) (textbook Boltzmann statistics), at 14 GHz and 40 mK."""
    f, temp = 14e9, 0.04
    x = sc.h * f / (sc.k * temp)
    assert RO.thermal_excitation(f, temp) == pytest.approx(math.exp(-x) / (1 + math.exp(-x)),
                                                           rel=1e-12)
    assert RO.thermal_excitation(f, 0.0) == 0.0


@pytest.mark.parametrize("p_true", [0.0, 0.25, 1.0])
def test_assignment_mapping_on_known_states(p_true):
    """The assignment matrix [[F_up, 1−F_down], [1−F_up, F_down]] acting on a
    known state's probabilities (common practice, no source): spin up is
    recorded up with F_up, spin down recorded up with 1 − F_down."""
    f_up, f_down = 0.93, 0.72          # Elzerman et al. (2004)'s values, from memory
    m = np.array([[f_up, 1 - f_down], [1 - f_up, f_down]])
    want = (m @ np.array([p_true, 1 - p_true]))[0]
    assert RO.recorded(p_true, f_up, f_down) == pytest.approx(want, abs=1e-15)


# ------------------------------------------------------------ device keys

def test_spin_readout_given_fidelities():
    dev = device(ra="    readout: {fidelity_up: 0.95, fidelity_down: 0.99, preparation: 0.02}")
    ro = dev.dots["A"].readout
    assert (ro.kind, ro.fidelity_up, ro.fidelity_down) == ("energy_selective", 0.95, 0.99)
    assert RO.dot_fidelities(dev, "A") == (0.95, 0.99)
    assert RO.preparation_error(dev, "A") == 0.02
    assert dev.dots["B"].readout is None
    assert RO.dot_fidelities(dev, "B") == (1.0, 1.0)
    assert RO.preparation_error(dev, "B") == 0.0


def test_spin_readout_from_tunnel_rates_and_thermal_preparation():
    dev = device(ra="    readout: {tunnel_out: 20 kHz, integration_time: 200 us, snr: 8}")
    f_up, f_down = RO.dot_fidelities(dev, "A")
    want = RO.energy_selective_fidelities(2e4, 1e-3, 2e-4, 8.0)   # relaxation: the dot's T1
    assert (f_up, f_down) == pytest.approx(want, rel=1e-12)
    assert RO.preparation_error(dev, "A") == pytest.approx(
        RO.thermal_excitation(dev.larmor("A"), 0.04), rel=1e-12)


def test_pair_readout_kinds():
    dev = device(rc="    readout: {kind: parity, fidelity_even: 0.9, fidelity_odd: 0.8}")
    ro = dev.couplings[0].readout
    assert (ro.kind, ro.fidelity_yes, ro.fidelity_no) == ("parity", 0.9, 0.8)
    dev = device(rc="    readout: {fidelity_singlet: 0.98, fidelity_triplet: 0.97}")
    assert dev.couplings[0].readout.kind == "blockade"
    assert RO.pair_fidelities(dev.couplings[0]) == (0.98, 0.97)


@pytest.mark.parametrize("kw, fragment, line", [
    (dict(ra="    readout: {fidelity_up: 1.2, fidelity_down: 0.9}"), "probability from 0 to 1", 12),
    (dict(ra="    readout: {fidelity_up: 0.9}"), "but not 'fidelity_down'", 12),
    (dict(ra="    readout: {fidelity_up: 0.9, fidelity_down: 0.9, tunnel_out: 1 kHz}"),
     "gives both assignment fidelities", 12),
    (dict(ra="    readout: {tunnel_out: 1 kHz}"), "needs 'integration_time'", 12),
    (dict(ra="    readout: {kind: optical, fidelity_up: 0.9, fidelity_down: 0.9}"),
     "must be one of energy_selective", 12),
    (dict(rc="    readout: {kind: blockade, fidelity_even: 0.9, fidelity_triplet: 0.9}"),
     "does not belong to a blockade readout", 27),
    (dict(rc="    readout: {kind: parity, fidelity_even: 0.9}"), "needs 'fidelity_odd'", 27),
])
def test_bad_readout_keys(kw, fragment, line):
    p = problem(kw, fragment)
    assert p.span.file == "ro.yaml" and p.span.line == line
    assert p.hint


def test_readout_without_information_is_a_warning():
    dev = device(ra="    readout: {fidelity_up: 0.5, fidelity_down: 0.4}")
    assert any("records nothing" in w.message for w in dev.warnings)


# ------------------------------------------------------------ what a read records

from compiler.simulate import fidelity as F          # noqa: E402
from compiler.simulate import observe as OB          # noqa: E402

UP, DN = np.array([1, 0], complex), np.array([0, 1], complex)
PAIR_STATES = {
    "singlet": (np.kron(UP, DN) - np.kron(DN, UP)) / math.sqrt(2),
    "T+": np.kron(UP, UP),
    "T0": (np.kron(UP, DN) + np.kron(DN, UP)) / math.sqrt(2),
    "T-": np.kron(DN, DN),
}


def _dm(psi):
    return np.outer(psi, psi.conj())


@pytest.mark.parametrize("state", sorted(PAIR_STATES))
def test_blockade_readout_of_singlet_and_triplets(state):
    """Pauli spin blockade records 'singlet' for the singlet only; the three
    triplets are blocked (Ono et al., Science 297, 1313 (2002), value from
    memory); with assignment fidelities F_S, F_T the singlet is recorded with
    F_S, each triplet with 1 − F_T.  Parity: even for T+ and T−."""
    # a three-dot register: spectator C (spin down) between the pair's dots
    # in register order A, C, B
    dev = device(rc="    readout: {fidelity_singlet: 0.98, fidelity_triplet: 0.95}")
    pair = PAIR_STATES[state]
    full = np.einsum("ab,c->acb", pair.reshape(2, 2), DN).reshape(-1)
    rho = _dm(full)
    p_singlet = OB._probability("blockade", rho, [0, 2], 3)
    assert p_singlet == pytest.approx(1.0 if state == "singlet" else 0.0, abs=1e-14)
    f_s, f_t = RO.pair_fidelities(dev.couplings[0])
    want = 0.98 if state == "singlet" else 1 - 0.95
    assert RO.recorded(p_singlet, f_s, f_t) == pytest.approx(want, abs=1e-14)
    p_even = OB._probability("parity", rho, [0, 2], 3)
    assert p_even == pytest.approx(1.0 if state in ("T+", "T-") else 0.0, abs=1e-14)


def test_a_read_of_a_pair_with_a_readout_is_read_together():
    dev = device(rc="    readout: {kind: parity, fidelity_even: 0.9, fidelity_odd: 0.8}")
    assert OB.readouts(dev, ("A", "B")) == [("parity", ("A", "B"))]
    assert OB.readouts(dev, ("B",)) == [("spin", ("B",))]
    assert OB.readouts(device(), ("A", "B")) == [("spin", ("A",)), ("spin", ("B",))]


def test_partial_trace_and_preparation_error():
    """Tr_B(ρ_A ⊗ ρ_B) = ρ_A, in any order of the kept qubits; the
    preparation error flips a prepared up with probability p (common
    practice, no source)."""
    rng = np.random.default_rng(4)
    mats = []
    for _ in range(3):
        a = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
        r = a @ a.conj().T
        mats.append(r / np.trace(r))
    rho = np.kron(np.kron(mats[0], mats[1]), mats[2])
    assert np.allclose(OB.partial_trace(rho, [1], 3), mats[1])
    assert np.allclose(OB.partial_trace(rho, [2, 0], 3), np.kron(mats[2], mats[0]))
    prepared = OB.prepared_state(_dm(np.kron(UP, DN)), [0.1, 0.0], 2)
    # basis |↑↑⟩, |↑↓⟩, |↓↑⟩, |↓↓⟩: A's up flipped to down with p = 0.1
    assert np.real(np.diag(prepared)) == pytest.approx([0.0, 0.9, 0.0, 0.1])


def test_fidelity_restricted_to_the_acted_qubits():
    """A π/2 rotation on B exactly, while spectators A and C relax: the
    channel restricted to B (spectators in their initial state, traced out)
    is the ideal rotation (fidelity 1), the whole register's is not.
    Amplitude damping as the spectators' error (Nielsen & Chuang, textbook)."""
    n = 3
    u_b = F.rotation(0.0, math.pi / 2)
    U = np.kron(np.kron(np.eye(2), u_b), np.eye(2))
    g = 0.3                                              # damping towards down
    k0 = np.array([[math.sqrt(1 - g), 0], [0, 1]], complex)
    k1 = np.array([[0, 0], [math.sqrt(g), 0]], complex)
    # the superoperator of the product channel, built from the Kraus operators
    kraus = [np.kron(np.kron(a, u_b), c) for a in (k0, k1) for c in (k0, k1)]
    S = sum(np.kron(k.conj(), k) for k in kraus)
    psi0 = np.kron(np.kron(UP, DN), UP)
    rho0 = _dm(psi0)
    rho = (S @ rho0.reshape(-1, order="F")).reshape(8, 8, order="F")
    S_b, U_b, rho_b, ideal_b = OB.restrict(S, U, rho, rho0, [1], n)
    assert np.allclose(U_b, u_b)
    assert F.process_fidelity(S_b, U_b) == pytest.approx(1.0, abs=1e-12)
    assert F.process_fidelity(S, U) < 0.8
    assert np.real(np.trace(ideal_b @ rho_b)) == pytest.approx(1.0, abs=1e-12)


def test_reduced_channel_against_its_definition():
    """E_A(ρ_A) = Tr_B S(ρ_A ⊗ σ_B) by tensor contraction against the
    definition applied to each matrix unit (common practice, no source), for
    a random channel on three qubits and A = the middle and last qubit."""
    rng = np.random.default_rng(7)
    n, d, keep = 3, 8, [1, 2]
    kraus = [rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)) for _ in range(3)]
    norm = np.linalg.cholesky(sum(k.conj().T @ k for k in kraus))
    kraus = [k @ np.linalg.inv(norm.conj().T) for k in kraus]          # Σ K†K = 1
    S = sum(np.kron(k.conj(), k) for k in kraus)
    sigma = _dm(np.array([0.6, 0.8j]))
    E = OB.reduce_channel(S, sigma, keep, n)
    for i in range(4):
        for j in range(4):
            e = np.zeros((4, 4), complex)
            e[i, j] = 1
            full = np.kron(sigma, e)                                    # qubit 0 is B
            out = (S @ full.reshape(-1, order="F")).reshape(d, d, order="F")
            want = OB.partial_trace(out, keep, n)
            got = (E @ e.reshape(-1, order="F")).reshape(4, 4, order="F")
            assert np.allclose(got, want, atol=1e-12)


# ------------------------------------------------------------ simulated runs

from compiler import compile as compile_file, load            # noqa: E402
from compiler.simulate import SimOptions, simulate            # noqa: E402

PAIR_DEVICE = """\
name: readout pair
field: 500 mT
temperature: 10 mK
rotation: {{mode: duration, shape: square, duration: 20 ns}}
readout: {{marker: M1, duration: 1 us}}
dots:
  A: {{g: 2.0, t1: 100 us, t2: 20 us, t2_star: 5 us, drive: {{line: mw, rabi_per_volt: 100 MHz/V}}, plunger: P_A{ra}}}
  B: {{g: 2.02, t1: 20 us, t2: 10 us, t2_star: 5 us, drive: {{line: mw2, rabi_per_volt: 100 MHz/V}}, plunger: P_B}}
channels:
  mw: {{kind: iq, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], lo: 13.996 GHz, if_band: [-300 MHz, 300 MHz]}}
  mw2: {{kind: iq, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], lo: 14.136 GHz, if_band: [-300 MHz, 300 MHz]}}
  P_A: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  P_B: {{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}}
  M1: {{kind: marker, sample_rate: 1 GS/s}}
"""


def simulated(tmp_path, program: str, ra: str = "", **opts):
    (tmp_path / "d.yaml").write_text(PAIR_DEVICE.format(ra=ra))
    (tmp_path / "s.dotseq").write_text('device "d.yaml"\n' + program)
    compiled = compile_file(load(tmp_path / "s.dotseq"))
    return simulate(compiled, SimOptions(nodes=1, budget=False, steps=False, **opts))


RAMSEY = "prepare A B down\nrot A x 90 deg\nwait 2 us on A\nrot A x 60 deg\nread A\n"


def test_measured_spin_follows_the_assignment_fidelities(tmp_path):
    """measured = F_up·P + (1 − F_down)·(1 − P) with P the simulated P(up) at
    the read (the assignment matrix; common practice, no source); no readout
    key: measured = ideal."""
    plain = simulated(tmp_path, RAMSEY).runs[0]
    (o,) = plain.observables
    assert (o.label, o.kind, o.qubits) == ("P(up) A", "spin", ("A",))
    assert o.ideal == pytest.approx(plain.populations["A"], abs=1e-12) and o.measured == o.ideal
    run = simulated(tmp_path, RAMSEY, ra=", readout: {fidelity_up: 0.9, fidelity_down: 0.8, "
                                          "preparation: 0}").runs[0]
    (o,) = run.observables
    assert o.measured == pytest.approx(0.9 * o.ideal + 0.2 * (1 - o.ideal), abs=1e-12)
    # the ideal circuit: x 90 then x 60 from down: P(up) = sin²(150°/2)
    assert o.target == pytest.approx(math.sin(math.radians(75)) ** 2, abs=1e-9)


def test_preparation_error_mixes_the_flipped_start(tmp_path):
    """A preparation error p: the run from (1 − p)·|↓⟩⟨↓| + p·|↑⟩⟨↑|, by
    linearity (1 − p)·P(from down) + p·P(from up) (common practice, no
    source)."""
    from_down = simulated(tmp_path, RAMSEY).runs[0].observables[0].ideal
    from_up = simulated(tmp_path, RAMSEY.replace("prepare A B down",
                                                 "prepare A up\nprepare B down")
                        ).runs[0].observables[0].ideal
    run = simulated(tmp_path, RAMSEY, ra=", readout: {fidelity_up: 1, fidelity_down: 1, "
                                          "preparation: 0.05}").runs[0]
    assert run.observables[0].measured == pytest.approx(0.95 * from_down + 0.05 * from_up,
                                                        abs=1e-10)


def test_shots_give_counts_and_binomial_errors(tmp_path):
    """Binomial statistics of N shots: counts N·p, 1σ √(p(1 − p)/N) (textbook)."""
    run = simulated(tmp_path, RAMSEY, shots=400).runs[0]
    (o,) = run.observables
    assert o.shots == 400 and o.counts == pytest.approx(400 * o.measured)
    assert o.error == pytest.approx(math.sqrt(o.measured * (1 - o.measured) / 400))


def test_fidelity_restricted_to_the_qubits_the_program_acts_on(tmp_path):
    """A Ramsey on A beside an idle B that relaxes (T1 = 20 us): the default
    scores A alone, --whole-register the pair; with B's decay switched off
    (B starting in its ground state, T1 only at 10 mK) both would agree, so
    the restricted number is the one of the one-dot register (common
    practice, no source)."""
    prog = "prepare A down\nprepare B up\nrot A x 90 deg\nwait 2 us on A\nrot A x 90 deg\nread A\n"
    acted = simulated(tmp_path, prog).runs[0]
    whole = simulated(tmp_path, prog, fidelity_scope="register").runs[0]
    assert acted.fidelity_qubits == ("A",) and whole.fidelity_qubits == ("A", "B")
    assert acted.average_fidelity > whole.average_fidelity + 0.01      # B's T1 decay not counted
    assert acted.state_fidelity > whole.state_fidelity + 0.01
    # the same program on a device with dot A alone
    alone = PAIR_DEVICE.replace("  B: {{g: 2.02", "#  B: {{g: 2.02")
    (tmp_path / "one.yaml").write_text(alone.format(ra=""))
    (tmp_path / "one.dotseq").write_text('device "one.yaml"\n' + prog.replace("prepare B up\n", ""))
    one = simulate(compile_file(load(tmp_path / "one.dotseq")),
                   SimOptions(nodes=1, budget=False, steps=False)).runs[0]
    assert acted.average_fidelity == pytest.approx(one.average_fidelity, abs=1e-6)
    assert acted.state_fidelity == pytest.approx(one.state_fidelity, abs=1e-6)


def test_cli_shots_and_scope(tmp_path, capsys):
    """--shots N and --whole-register reach the report; a negative count is
    exit 2 with a hint."""
    import json
    from compiler.cli import main
    (tmp_path / "d.yaml").write_text(PAIR_DEVICE.format(ra=""))
    (tmp_path / "s.dotseq").write_text('device "d.yaml"\n' + RAMSEY)
    out = tmp_path / "rep"
    assert main(["simulate", str(tmp_path / "s.dotseq"), "-o", str(out), "--nodes", "1",
                 "--no-budget", "--no-steps", "--shots", "250", "--whole-register"]) == 0
    run = json.loads((out / "results.json").read_text())["result"]["runs"][0]
    assert run["observables"][0]["shots"] == 250 and run["fidelity_qubits"] == ["A", "B"]
    assert "fidelities of the whole register (A, B)" in capsys.readouterr().out
    assert main(["simulate", str(tmp_path / "s.dotseq"), "-o", str(tmp_path / "r2"),
                 "--shots", "-3"]) == 2
    assert "--shots -3" in capsys.readouterr().err


def test_vary_sweep_records_observables_and_resumes_them(tmp_path):
    """A --vary sweep writes the observables in its table and draws
    observables.png with the shared figure code; a resumed sweep reads them
    back from points.jsonl unchanged."""
    import json
    from compiler.sweep import plan_sweep, run_sweep
    (tmp_path / "d.yaml").write_text(PAIR_DEVICE.format(
        ra=", readout: {fidelity_up: 0.9, fidelity_down: 0.95, preparation: 0}"))
    (tmp_path / "s.dotseq").write_text('device "d.yaml"\n' + RAMSEY)
    plan = plan_sweep(tmp_path / "s.dotseq", ["A.t2_star=1us,4us"],
                      options=SimOptions(nodes=3, budget=False, steps=False, shots=100))
    out = run_sweep(plan, tmp_path / "sw")
    assert (tmp_path / "sw" / "observables.png").exists()
    doc = json.loads((tmp_path / "sw" / "sweep.json").read_text())
    obs = [p["observables"][0] for p in doc["points"]]
    assert [o["label"] for o in obs] == ["P(up) A", "P(up) A"] and obs[0]["shots"] == 100
    for o in obs:
        assert o["measured"] == pytest.approx(0.9 * o["ideal"] + 0.05 * (1 - o["ideal"]),
                                              abs=1e-12)
    assert obs[0]["ideal"] != pytest.approx(obs[1]["ideal"], abs=1e-3)   # T2* matters
    again = run_sweep(plan, tmp_path / "sw", resume=True)
    assert [p.observables for p in again.table.points] == [p.observables for p in out.table.points]
