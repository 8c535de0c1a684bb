"""What a generator channel can hold: DAC code widths and padding lengths.

* A code never wraps: widths the bundle cannot hold are refused when the
  device is read (``check`` and ``compile`` alike, at the ``bits`` key), and
  every cast of codes to an integer type is checked (analog.to_codes,
  export.files.checked_cast).
* Padding to a channel's ``min_length`` and ``granularity`` is part of the
  memory estimate made before synthesis, and implausible values are refused
  at the key.

docs/reliability.md lists these guarantees; the random versions are the
padding-key and code-width properties of test_fuzz.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from compiler import analog, load
from compiler.cli import main
from compiler.device import load_device_text
from compiler.device.model import MAX_BITS, MAX_GRANULARITY, MAX_MIN_LENGTH
from compiler.errors import DeviceError
from compiler.export import read_bundle
from compiler.export.files import CODES_DTYPE, checked_cast
from compiler.synth import synthesize
from test_reliability import baseline_rss, no_traceback, run_cli

# One dot, an I/Q line, a ±1 V plunger and a marker; tests edit the channel
# lines (5 to 7), so the expected line numbers refer to this listing.
DEVICE_LINES = [
    'name: "limits"',                                                           # 1
    "field: 500 mT",                                                            # 2
    "temperature: 40 mK",                                                       # 3
    "channels:",                                                                # 4
    "  mw: {kind: iq, sample_rate: 1 GS/s, bits: 14, range: [-500 mV, 500 mV], "
    "lo: 14.05 GHz, if_band: [-250 MHz, 250 MHz]}",                             # 5
    "  P_A: {kind: gate, sample_rate: 1 GS/s, bits: 16, range: [-1 V, 1 V]}",   # 6
    "  M1: {kind: marker, sample_rate: 1 GS/s}",                                # 7
    "dots:",                                                                    # 8
    "  A: {preset: graphene, drive: {line: mw, rabi_per_volt: 60 MHz/V}, plunger: P_A}",
]
SEQUENCE = 'device "dev.yaml"\nrot A x 90 deg\nwait 100 ns on A\n'


def device_text(**replace: str) -> str:
    """DEVICE_LINES with some text replaced in the channel lines:
    device_text(P_A=("bits: 16", "bits: 32"))."""
    lines = list(DEVICE_LINES)
    for name, (old, new) in replace.items():
        i = next(i for i, line in enumerate(lines) if line.startswith(f"  {name}:"))
        assert old in lines[i]
        lines[i] = lines[i].replace(old, new)
    return "\n".join(lines) + "\n"


def write_pair(tmp_path, **replace) -> tuple:
    dev = tmp_path / "dev.yaml"
    dev.write_text(device_text(**replace), encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text(SEQUENCE, encoding="utf-8")
    return seq, dev


def column_of(line: str, text: str) -> int:
    return line.index(text) + 1


# ---------------------------------------------------------------- code widths

@pytest.mark.parametrize("channel, old", [("P_A", "bits: 16"), ("mw", "bits: 14")])
@pytest.mark.parametrize("command", ["check", "compile"])
def test_32_bit_channel_is_refused_at_its_bits_key(channel, old, command, tmp_path, capsys):
    """A 32-bit plunger compiled with exit 0 into codes cast to int32: a 0 V
    level became code -2^31, -2 V on a ±1 V channel, with valid checksums.
    A 32-bit I/Q line passed check and failed compile without a position.
    Now check and compile refuse both at the bits value, the same way."""
    seq, dev = write_pair(tmp_path, **{channel: (old, "bits: 32")})
    args = [command, str(seq)] + (["-o", str(tmp_path / "b")] if command == "compile" else [])
    code = main(args)
    err = capsys.readouterr().err
    line = device_text(**{channel: (old, "bits: 32")}).splitlines()[4 if channel == "mw" else 5]
    assert code == 2, err
    assert f"{dev}:{5 if channel == 'mw' else 6}:{column_of(line, '32')}: error: " \
           f"channels.{channel}.bits must be from 1 to {MAX_BITS}, got 32" in err, err
    assert "generators have 8 to 16 bits" in err
    assert not (tmp_path / "b").exists()
    no_traceback(err)


def test_widest_allowed_gate_plays_zero_volts_as_zero(tmp_path, capsys):
    """The widest width accepted (24 bits), ±1 V, idle 0 V: the bundle's codes
    decode (v_min + code·LSB, LSB = 2 V/2^24) to exactly 0 V and the stored
    volts agree; the code is 2^23, not wrapped."""
    seq, _ = write_pair(tmp_path, P_A=("bits: 16", f"bits: {MAX_BITS}"))
    assert main(["compile", str(seq), "-o", str(tmp_path / "b")]) == 0, capsys.readouterr().err
    b = read_bundle(tmp_path / "b")
    codes, volts = b["runs"][0]["codes"]["P_A"], b["runs"][0]["volts"]["P_A"]
    assert codes.dtype == CODES_DTYPE
    assert np.all(codes == 2 ** (MAX_BITS - 1))
    lsb = b["manifest"]["runs"][0]["outputs"]["P_A"]["lsb_V"]
    assert lsb == 2.0 / 2 ** MAX_BITS
    assert np.all(-1.0 + codes.astype(np.int64) * lsb == 0.0)
    assert np.all(volts == 0.0)


def test_quantise_never_wraps_a_code():
    """The cast that wrapped: 0 V on a ±1 V 32-bit DAC is code 2^31, which
    int32 turned into -2^31.  analog.quantise now keeps it."""
    codes, volts = analog.quantise(np.array([0.0, -1.0, 1.0 - 2.0 / 2 ** 32]), -1.0, 1.0, 32)
    assert codes.dtype == np.uint32
    assert codes.tolist() == [2 ** 31, 0, 2 ** 32 - 1]
    assert volts.tolist() == [0.0, -1.0, 1.0 - 2.0 / 2 ** 32]


@pytest.mark.parametrize("bits, dtype", [(1, np.uint16), (16, np.uint16), (17, np.uint32),
                                         (24, np.uint32), (32, np.uint32)])
def test_code_type_holds_every_code_of_the_width(bits, dtype):
    dt = analog.code_dtype(bits)
    assert dt == dtype and np.iinfo(dt).max >= 2 ** bits - 1
    top = np.array([0.0, 2.0 ** bits - 1])
    assert analog.to_codes(top, bits).astype(np.int64).tolist() == [0, 2 ** bits - 1]


@pytest.mark.parametrize("values, bits", [([2.0 ** 32], 32), ([-1.0], 8), ([256.0], 8),
                                          ([np.nan], 16), ([0.0, np.inf], 24)])
def test_code_cast_refuses_values_outside_the_width(values, bits):
    """The cast is checked before it happens, not its result afterwards."""
    with pytest.raises(ValueError, match="outside"):
        analog.to_codes(np.array(values), bits)


def test_code_cast_refuses_a_target_too_narrow():
    with pytest.raises(ValueError, match="cannot hold"):
        analog.to_codes(np.array([1.0]), 17, out=np.empty(1, dtype=np.uint16))
    with pytest.raises(ValueError, match="cannot hold"):
        analog.to_codes(np.array([1.0]), 8, out=np.empty(1, dtype=np.int32))
    for bits in (0, 33, 64):
        with pytest.raises(ValueError, match="no code type"):
            analog.code_dtype(bits)


def test_export_cast_refuses_codes_beyond_int32():
    """Writing codes into the bundle's int32 files: a uint32 code of 2^31
    would become -2^31; the checked cast refuses it, passes what fits."""
    with pytest.raises(ValueError, match="do not fit in int32"):
        checked_cast(np.array([0, 2 ** 31], dtype=np.uint32), CODES_DTYPE)
    with pytest.raises(ValueError, match="do not fit"):
        checked_cast(np.array([-(2 ** 31) - 1], dtype=np.int64), CODES_DTYPE)
    ok = checked_cast(np.array([0, 2 ** 31 - 1], dtype=np.uint32), CODES_DTYPE)
    assert ok.dtype == CODES_DTYPE and ok.tolist() == [0, 2 ** 31 - 1]


# ---------------------------------------------------------------- padding

@pytest.mark.parametrize("key, value, bound", [
    ("min_length", "100000000", MAX_MIN_LENGTH), ("min_length", "1.0e+9", MAX_MIN_LENGTH),
    ("granularity", "1000000", MAX_GRANULARITY), ("granularity", "9223372036854775808",
                                                  MAX_GRANULARITY),
])
def test_implausible_padding_is_refused_at_its_key(key, value, bound):
    """min_length 10^8 compiled (3.6 GB, a 4.1 GB bundle); 10^9 was killed
    by the kernel.  Such values are refused at the key, with its position."""
    text = device_text(P_A=("range: [-1 V, 1 V]", f"range: [-1 V, 1 V], {key}: {value}"))
    with pytest.raises(DeviceError) as info:
        load_device_text(text, "dev.yaml")
    p = info.value.first
    assert p.message.startswith(f"channels.P_A.{key} must be from 1 to {bound:,}, got ")
    assert (p.span.file, p.span.line) == ("dev.yaml", 6)
    assert p.span.col == column_of(text.splitlines()[5], value)
    assert "generator" in p.hint


def test_granularities_whose_common_multiple_is_implausible_are_refused():
    """Each granularity is plausible, but the run length must be a multiple of
    all of them: 65521 and 65519 (primes) ask for 4.29·10^9 samples."""
    text = device_text(P_A=("range: [-1 V, 1 V]", "range: [-1 V, 1 V], granularity: 65521"),
                       M1=("sample_rate: 1 GS/s", "sample_rate: 1 GS/s, granularity: 65519"))
    with pytest.raises(DeviceError) as info:
        load_device_text(text, "dev.yaml")
    p = info.value.first
    assert "channels.M1.granularity 65,519" in p.message and "4,292,870,399" in p.message
    assert (p.span.line, p.span.col) == (7, column_of(text.splitlines()[6], "65519"))
    # granularities that divide one another are fine
    dev = load_device_text(device_text(
        P_A=("range: [-1 V, 1 V]", "range: [-1 V, 1 V], granularity: 16"),
        M1=("sample_rate: 1 GS/s", "sample_rate: 1 GS/s, granularity: 64")), "dev.yaml")
    assert dev.granularity == 64


def test_padded_length_is_what_synthesis_produces(tmp_path):
    """The length every estimate uses (Device.padded_samples) is the length
    synthesis produces: at least every min_length, a multiple of the common
    multiple of the granularities."""
    seq, _ = write_pair(tmp_path, P_A=("range: [-1 V, 1 V]",
                                       "range: [-1 V, 1 V], min_length: 1000, granularity: 48"),
                        M1=("sample_rate: 1 GS/s", "sample_rate: 1 GS/s, granularity: 32"))
    checked = load(seq)
    dev, tl = checked.device, checked.timelines[0]
    assert (dev.min_length, dev.granularity) == (1000, 96)
    n = dev.padded_samples(tl.n_samples)
    assert n == 1056                                    # 11 x 96, the first multiple >= 1000
    assert synthesize(tl, dev).n_samples == n
    assert [dev.padded_samples(k) for k in (0, 1000, 1056, 1057)] == [1056, 1056, 1056, 1152]


def test_padding_is_in_the_memory_estimate(tmp_path):
    """A 120 ns sequence padded to min_length 10^7 samples (10 ms at 1 GS/s,
    within the bound): 10^7 samples x 4 outputs x 40 B = 1.5 GiB estimated,
    refused under --memory-limit 50MB before any sample is made.  Before,
    the estimate counted the 120 samples only and compile went ahead.  The
    child's peak memory stays within the limit above the interpreter."""
    seq, _ = write_pair(tmp_path, P_A=("range: [-1 V, 1 V]",
                                       "range: [-1 V, 1 V], min_length: 10000000"))
    out = tmp_path / "b"
    code, _, err, rss, _ = run_cli(["compile", seq, "-o", out, "--memory-limit", "50MB"])
    assert code == 2, err[-3000:]
    no_traceback(err)
    assert "would need about 1.49 GiB" in err and "(10000000 samples x 4 outputs)" in err, err
    assert "--memory-limit" in err
    assert not out.exists()
    assert rss - baseline_rss() < 50e6, (rss, baseline_rss())


@pytest.mark.parametrize("command, out", [("preview", "p.png"), ("simulate", "r")])
def test_every_command_counts_the_padding(command, out, tmp_path, capsys):
    seq, _ = write_pair(tmp_path, P_A=("range: [-1 V, 1 V]",
                                       "range: [-1 V, 1 V], min_length: 10000000"))
    code = main([command, str(seq), "-o", str(tmp_path / out), "--memory-limit", "50MB"])
    err = capsys.readouterr().err
    assert code == 2 and "(10000000 samples x 4 outputs)" in err, err
    assert not (tmp_path / out).exists()


# ---------------------------------------------------------------- waveform memory (issue 19)

@pytest.mark.parametrize("text, samples", [("1000", 1000), ("64 MS", 64_000_000),
                                           ("2 GS", 2_000_000_000), ("32 MiS", 32 * 2 ** 20),
                                           ("1.5 kS", 1500), ("4e6", 4_000_000)])
def test_memory_is_read_in_samples(text, samples):
    dev = load_device_text(device_text(P_A=("bits: 16", f"bits: 16, memory: {text}")), "d.yaml")
    assert dev.channels["P_A"].memory == samples
    assert dev.channels["mw"].memory == 0          # not given: not limited


@pytest.mark.parametrize("command", ["check", "compile"])
def test_run_beyond_a_channels_memory_is_refused_with_the_numbers(command, tmp_path, capsys):
    """A sweep whose longest run does not fit the plunger's 600-sample memory:
    refused before anything is synthesised or written, naming the run, its
    sweep point, the channel and both sample counts, at the channel in the
    device file."""
    dev = tmp_path / "dev.yaml"
    dev.write_text(device_text(P_A=("bits: 16", "bits: 16, memory: 600")), encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text('device "dev.yaml"\nsweep tau over [100 ns, 700 ns]\nrot A x 90 deg\n'
                   'wait tau on A\n', encoding="utf-8")
    args = [command, str(seq)] + (["-o", str(tmp_path / "b")] if command == "compile" else [])
    assert main(args) == 2
    err = capsys.readouterr().err
    free = tmp_path / "free.yaml"
    free.write_text(device_text(), encoding="utf-8")
    c = load(seq, free)
    n = c.device.padded_samples(c.timelines[1].n_samples)
    assert c.device.padded_samples(c.timelines[0].n_samples) <= 600 < n
    assert f"run 1 (tau = 700 ns) needs {n:,} samples on channel 'P_A'" in err, err
    assert f"by {n - 600:,}" in err
    assert "above its memory of 600 samples (channels.P_A.memory)" in err
    assert "run 0" not in err
    assert f"{dev}:6:3: error:" in err
    assert not (tmp_path / "b").exists()
    no_traceback(err)


def test_sweep_points_beyond_a_channels_memory_are_refused(tmp_path, capsys):
    """The sweep checks every point up front: the points whose run does not
    fit are named, nothing is written."""
    dev = tmp_path / "dev.yaml"
    dev.write_text(device_text(P_A=("bits: 16", "bits: 16, memory: 600")), encoding="utf-8")
    seq = tmp_path / "s.dotseq"
    seq.write_text('device "dev.yaml"\nlet tau = 100 ns\nrot A x 90 deg\nwait tau on A\n',
                   encoding="utf-8")
    code = main(["sweep", str(seq), "--vary", "tau=100ns,700ns", "-o", str(tmp_path / "w"),
                 "--workers", "1", "--quiet", "--nodes", "1"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "on channel 'P_A'" in err and "above its memory of 600 samples" in err
    assert "tau = 700 ns" in err and "tau = 100 ns" not in err
    assert not (tmp_path / "w").exists()
    no_traceback(err)
