"""Invented workloads for the simulation benchmarks (and the engine tests).

Every number here is invented for a benchmark; the material values come
from the presets in compiler/device/presets.py."""

from __future__ import annotations

from pathlib import Path

CHANNEL = ("{{kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V], rise_time: 2 ns, "
           "min_length: 64, granularity: 16}}")


def line_device(n: int, *, charge_noise: str = "0 uV", long_range: bool = True,
                preset: str = "", zeeman_noise: str = "") -> str:
    """n dots D0..D(n-1) in a line on one microwave line (Larmor frequencies
    28 MHz apart at 1 T), nearest-neighbour exchange through barrier
    gates (closed to well under a millihertz at idle), and, with
    ``long_range``, an exchange between D0 and D2 across a detuned D1.  Without
    ``preset`` the dots are spin-1/2 with the times the bilayer_graphene preset
    had before it became four-level (T1 200 µs, T2 20 µs, T2* 2 µs)."""
    what = (f"preset: {preset}" if preset else
            "t1: 200 us" if zeeman_noise else "t1: 200 us, t2: 20 us, t2_star: 2 us")
    dots = "\n".join(
        f"  D{k}: {{{what}, g: {2.0 + 0.002 * k:.4f}, drive: {{line: mw, "
        f"rabi_per_volt: 40 MHz/V}}, plunger: P{k}"
        + (f", zeeman_noise: {zeeman_noise}" if zeeman_noise else "") + "}" for k in range(n))
    cpl = "\n".join(
        f"  - {{dots: [D{k}, D{k + 1}], barrier: B{k}, exchange: {{model: exponential, j0: 150 MHz, "
        f"v0: 20 mV}}, idle_voltage: -600 mV, pulse_voltage: 0 mV, charge_noise: {charge_noise}}}"
        for k in range(n - 1))
    if long_range and n >= 3:
        cpl += ("\n  - {dots: [D0, D2], barrier: S02, exchange: {model: exponential, j0: 30 MHz, "
                "v0: 20 mV}, idle_voltage: -600 mV, pulse_voltage: 0 mV, detune: {D1: -40 mV}}")
    chans = "\n".join([f"  P{k}: {CHANNEL.format()}" for k in range(n)]
                      + [f"  B{k}: {CHANNEL.format()}" for k in range(n - 1)]
                      + ([f"  S02: {CHANNEL.format()}"] if long_range and n >= 3 else []))
    from scipy.constants import physical_constants, h as planck
    mu_b = physical_constants["Bohr magneton"][0]
    lo_ghz = (2.0 + 0.001 * (n - 1)) * mu_b * 1.0 / planck / 1e9 + 0.03   # centre of the band + 30 MHz
    return f"""name: "benchmark line of {n} dots (invented)"
field: 1 T
temperature: 30 mK
acquisition_time: 600 s
rotation: {{mode: duration, shape: gauss, duration: 100 ns, sigmas: 4}}
readout: {{marker: M1, duration: 1 us}}
dots:
{dots}
couplings:
{cpl}
channels:
  mw: {{kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], rise_time: 1 ns,
       min_length: 64, granularity: 16, lo: {lo_ghz:.6f} GHz, if_band: [-250 MHz, 250 MHz]}}
{chans}
  M1: {{kind: marker, sample_rate: 1 GS/s}}
"""


def line_steps(n: int, steps: int, *, long_range: bool = True) -> list[str]:
    """A deterministic mix on a line of n dots: rotations about x and y,
    two-tone 'together' rotations, square roots of SWAP between neighbours
    (and across D1 when there is a long-range coupling) and short waits,
    walking along the line so that every dot works."""
    out = []
    k = 0
    i = 0
    while len(out) < steps:
        a, b = k % n, (k + 1) % n
        if b == 0:
            b, a = 1, 0
        kind = i % 6
        if kind == 0:
            out.append(f"rot D{a} x 90 deg")
        elif kind == 1:
            out.append(f"rot D{b} y 90 deg")
        elif kind == 2:
            out.append(f"sqrtswap D{a} D{b}")
        elif kind == 3:
            out.append(f"together {{ rot D{a} x 180 deg ; rot D{b} y 90 deg }}")
        elif kind == 4:
            if long_range and n >= 3 and (i // 6) % 3 == 2:
                out.append("sqrtswap D0 D2")
            else:
                out.append(f"sqrtswap_inv D{a} D{b}")
        else:
            out.append(f"wait 40 ns on D{a}")
            k += 1
        i += 1
    return out


def write_case(folder: Path, n: int, steps: int, *, charge_noise: str = "0 uV",
               long_range: bool = True, prepare: str = "down", zeeman_noise: str = "") -> Path:
    """Device and sequence files for a line workload; returns the sequence path."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "device.yaml").write_text(line_device(n, charge_noise=charge_noise,
                                                    long_range=long_range,
                                                    zeeman_noise=zeeman_noise))
    dots = " ".join(f"D{k}" for k in range(n))
    body = "\n".join(line_steps(n, steps, long_range=long_range))
    seq = folder / f"line{n}.dotseq"
    seq.write_text(f'device "device.yaml"\nprepare {dots} {prepare}\n{body}\nread {dots}\n')
    return seq
