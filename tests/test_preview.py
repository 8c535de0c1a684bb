"""dotseq preview: the figure of what the generators will play."""

from __future__ import annotations

import math
import struct
from pathlib import Path

import numpy as np
import pytest

from compiler.errors import DotseqError
from compiler.preview import PreviewError, preview, resolve_window
from compiler.preview import figure as figure_mod
from compiler.preview.signal import iq_spectrum, minmax_envelope, time_unit, volt_unit
from compiler.preview.style import step_labels
from compiler.synth.types import Output, StepRecord, Waveforms

FS = 1e9                      # S/s
LO = 14.05e9                  # Hz, LO of line "mw"
LARMOR = {"A": 13.996e9, "B": 14.136e9}   # Hz (invented pair, as the bundled default)
PERIOD = 1600                 # samples of one repetition of the synthetic pattern


def _analog(name: str, channel: str, kind: str, ideal: np.ndarray, bits: int,
            full_scale: float, dc_level: float = 0.0) -> Output:
    lsb = 2 * full_scale / 2 ** bits
    codes = np.round(ideal / lsb).astype(np.int32)
    return Output(name, channel, kind, codes * lsb, codes, ideal, dc_level, lsb)


def make_waveforms(repeats: int = 1) -> Waveforms:
    """A small hand-built run on dots A and B sharing the I/Q line ``mw``.

    One repetition (1.6 µs at 1 GS/s): x 90° on A (burst at A's IF), z 90° on
    A (zero length), y 180° on B at B's IF while A waits, √SWAP A–B (a level
    on the barrier B_AB), an alignment wait, a readout with marker M1 high,
    and end padding.
    """
    n = PERIOD * repeats
    t = np.arange(PERIOD) / FS
    i = np.zeros(PERIOD)
    q = np.zeros(PERIOD)
    barrier = np.zeros(PERIOD)
    marker = np.zeros(PERIOD)
    if_a, if_b = LARMOR["A"] - LO, LARMOR["B"] - LO
    z = np.zeros(PERIOD, complex)
    z[0:128] = 0.2 * np.exp(2j * np.pi * if_a * t[0:128])
    z[128:384] = 0.2 * np.exp(2j * np.pi * if_b * t[128:384] + 1j * np.pi / 2)
    i, q = z.real, z.imag
    barrier[384:484] = 0.25
    marker[500:1500] = 1.0
    steps = []
    pattern = [
        ("rot", ("A",), 0, 128, ("mw",), {"angle_rad": math.pi / 2, "axis_phase_rad": 0.0}),
        ("zrot", ("A",), 128, 128, (), {"angle_rad": math.pi / 2}),
        ("rot", ("B",), 128, 384, ("mw",), {"angle_rad": math.pi, "axis_phase_rad": math.pi / 2}),
        ("wait", ("A",), 128, 384, (), {}),
        ("sqrtswap", ("A", "B"), 384, 484, ("B_AB",), {"level_V": 0.25, "j_Hz": 2.5e6}),
        ("phasewait", ("A", "B"), 484, 500, (), {}),
        ("read", ("A", "B"), 500, 1500, ("M1",), {}),
        ("pad", (), 1500, 1600, (), {}),
    ]
    for r in range(repeats):
        for kind, qubits, a, b, ch, params in pattern:
            k = len(steps)
            pad = kind in ("pad", "phasewait")
            steps.append(StepRecord(k, kind, qubits, a + r * PERIOD, b + r * PERIOD, ch,
                                    "" if pad else f"test.dotseq:{k + 1}:1",
                                    "" if pad else f"{kind} {' '.join(qubits)}", params))
    outputs = {
        "mw.I": _analog("mw.I", "mw", "iq", np.tile(i, repeats), 14, 0.5),
        "mw.Q": _analog("mw.Q", "mw", "iq", np.tile(q, repeats), 14, 0.5),
        "P_A": _analog("P_A", "P_A", "gate", np.zeros(n), 16, 1.0, dc_level=0.05),
        "B_AB": _analog("B_AB", "B_AB", "gate", np.tile(barrier, repeats), 16, 1.0),
        "M1": Output("M1", "M1", "marker", np.tile(marker, repeats), None,
                     np.tile(marker, repeats)),
    }
    return Waveforms(0, (("amp", 0.2),), FS, n, outputs, tuple(steps), {"A": 0.0, "B": 0.0},
                     dict(LARMOR), ("test warning: invented data",))


@pytest.fixture(scope="module")
def wf():
    return make_waveforms()


def png_size(path: Path) -> tuple[int, int]:
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", head[16:24])


# --- writing -----------------------------------------------------------------

@pytest.mark.parametrize("suffix", [".png", ".svg", ".pdf"])
def test_writes_each_format(wf, tmp_path, suffix):
    out = preview(wf, tmp_path / f"run{suffix}", lo={"mw": LO}, title="synthetic pair")
    assert out == tmp_path / f"run{suffix}"
    data = out.read_bytes()
    assert len(data) > 1000
    magic = {".png": b"\x89PNG", ".svg": b"<?xml", ".pdf": b"%PDF"}[suffix]
    assert data.startswith(magic)
    assert [p.name for p in tmp_path.iterdir()] == [out.name]  # no temp file left


def test_new_file_is_readable_by_others(wf, tmp_path):
    out = preview(wf, tmp_path / "mode.png")
    assert out.stat().st_mode & 0o777 == 0o644     # not the 0600 of a private temp file


def test_png_pixel_size(wf, tmp_path):
    out = preview(wf, tmp_path / "a.png")
    assert png_size(out) == (1540, 990)   # 14 x 9 in at 110 dpi


def test_many_outputs_make_the_figure_taller(wf, tmp_path):
    extra = {f"P_{k}": Output(f"P_{k}", f"P_{k}", "gate", np.zeros(wf.n_samples),
                              np.zeros(wf.n_samples, np.int32), np.zeros(wf.n_samples))
             for k in range(8)}
    big = Waveforms(0, (), FS, wf.n_samples, {**wf.outputs, **extra}, wf.steps, {},
                    wf.larmor)
    w, h = png_size(preview(big, tmp_path / "tall.png"))
    assert w == 1540 and h > 990


def test_uppercase_suffix_is_accepted(wf, tmp_path):
    assert preview(wf, tmp_path / "a.PNG").read_bytes().startswith(b"\x89PNG")


def test_atomic_write_leaves_no_file_on_failure(wf, tmp_path, monkeypatch):
    target = tmp_path / "fail.png"

    def broken(self, *args, **kwargs):
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(figure_mod.FigureCanvasAgg, "print_figure", broken)
    with pytest.raises(RuntimeError):
        preview(wf, target)
    assert list(tmp_path.iterdir()) == []


def test_atomic_write_keeps_the_old_file_on_failure(wf, tmp_path, monkeypatch):
    target = tmp_path / "keep.png"
    target.write_bytes(b"old image")

    def broken(self, *args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(figure_mod.FigureCanvasAgg, "print_figure", broken)
    with pytest.raises(PreviewError, match="No space left"):
        preview(wf, target)
    assert target.read_bytes() == b"old image"
    assert [p.name for p in tmp_path.iterdir()] == ["keep.png"]


# --- windows -----------------------------------------------------------------

def test_time_window(wf, tmp_path):
    out = preview(wf, tmp_path / "w.png", start=100e-9, stop=500e-9)
    assert png_size(out) == (1540, 990)
    w = resolve_window(wf, 100e-9, 500e-9)
    assert (w.i0, w.i1) == (100, 500)
    assert (w.start, w.stop) == (100e-9, 500e-9)


def test_open_ended_window(wf):
    w = resolve_window(wf, start=1e-6)
    assert (w.i0, w.i1) == (1000, PERIOD)
    w = resolve_window(wf, stop=wf.duration)
    assert (w.i0, w.i1) == (0, PERIOD)


def test_step_zoom(wf, tmp_path):
    out = preview(wf, tmp_path / "s.png", step=4, lo={"mw": LO})
    assert out.stat().st_size > 1000
    w = resolve_window(wf, step=4)          # √SWAP: samples 384 .. 484
    assert w.step is wf.steps[4]
    assert w.i0 == 384 - 16 and w.i1 == 484 + 16
    w = resolve_window(wf, step=1)          # zero-length frame update still shows something
    assert w.i0 < 128 < w.i1
    w = resolve_window(wf, step=7)          # end padding: clipped to the run
    assert w.i1 == PERIOD


@pytest.mark.parametrize("kwargs, words", [
    pytest.param(dict(start=1e-6, stop=0.5e-6), ["empty", "1 us", "500 ns"], id="reversed"),
    pytest.param(dict(start=1e-6, stop=1e-6), ["empty"], id="zero-length"),
    pytest.param(dict(start=-1e-6, stop=1e-6), ["outside", "-1 us", "1.6 us"], id="before"),
    pytest.param(dict(start=0.0, stop=5e-6), ["outside", "5 us", "1.6 us"], id="after"),
    pytest.param(dict(start=2e-6), ["empty", "2 us", "1.6 us"], id="start-after-end"),
    pytest.param(dict(start=-0.4e-9, stop=-0.1e-9), ["no part", "1.6 us"], id="in-the-slack"),
    pytest.param(dict(start=float("nan")), ["finite"], id="nan"),
    pytest.param(dict(start="1 us"), ["seconds"], id="text"),
    pytest.param(dict(start=0.0, step=2), ["not both"], id="both"),
    pytest.param(dict(step=99), ["99", "0 .. 7"], id="no-such-step"),
    pytest.param(dict(step=-1), ["-1", "0 .. 7"], id="negative-step"),
    pytest.param(dict(step=1.5), ["integer"], id="float-step"),
])
def test_bad_window(wf, tmp_path, kwargs, words):
    with pytest.raises(PreviewError) as info:
        preview(wf, tmp_path / "bad.png", **kwargs)
    err = info.value
    assert isinstance(err, DotseqError) and err.stage == "preview"
    text = err.render()
    for word in words:
        assert word in text, text
    assert not (tmp_path / "bad.png").exists()


@pytest.mark.parametrize("name", ["out.jpg", "out", "out.png.txt"])
def test_bad_suffix(wf, tmp_path, name):
    with pytest.raises(PreviewError) as info:
        preview(wf, tmp_path / name)
    assert ".png, .svg, .pdf" in info.value.render()


def test_missing_folder(wf, tmp_path):
    with pytest.raises(PreviewError, match="does not exist"):
        preview(wf, tmp_path / "nowhere" / "a.png")


def test_bad_lo(wf, tmp_path):
    with pytest.raises(PreviewError, match="(?s)'mw1'.*did you mean 'mw'"):
        preview(wf, tmp_path / "a.png", lo={"mw1": LO})
    with pytest.raises(PreviewError, match="known: mw"):
        preview(wf, tmp_path / "a.png", lo={"P_A": LO})
    with pytest.raises(PreviewError, match="finite frequency"):
        preview(wf, tmp_path / "a.png", lo={"mw": "14 GHz"})


def test_bad_waveforms(wf, tmp_path):
    broken = dict(wf.outputs)
    v = broken["P_A"].volts.copy()
    v[7] = np.nan
    broken["P_A"] = Output("P_A", "P_A", "gate", v, None, v)
    bad = Waveforms(0, (), FS, wf.n_samples, broken, wf.steps, {}, wf.larmor)
    with pytest.raises(PreviewError, match="'P_A'.*sample 7"):
        preview(bad, tmp_path / "a.png")
    empty = Waveforms(0, (), FS, 0, {}, (), {}, {})
    with pytest.raises(PreviewError, match="nothing to preview"):
        preview(empty, tmp_path / "a.png")


# --- size ---------------------------------------------------------------------

def test_two_million_samples_render(tmp_path):
    """The whole figure of 2 million samples and 10 000 steps (about a
    second; its speed against a small figure is measured by
    tests/benchmarks/bench_preview.py, not here)."""
    big = make_waveforms(repeats=1250)          # 2e6 samples, 10 000 steps
    assert big.n_samples == 2_000_000
    out = preview(big, tmp_path / "big.png", lo={"mw": LO})
    assert png_size(out) == (1540, 990)


# --- helpers -----------------------------------------------------------------

def test_minmax_envelope_keeps_every_extreme():
    rng = np.random.default_rng(1)
    x = rng.normal(size=10_001)
    x[5_000] = 40.0                     # a one-sample spike survives decimation
    starts, lows, highs = minmax_envelope(x, 100)
    assert starts[0] == 0 and len(starts) <= 100
    assert highs.max() == 40.0 and lows.min() == x.min()
    bounds = np.append(starts, len(x))
    for k in range(len(starts)):
        seg = x[bounds[k]:bounds[k + 1]]
        assert lows[k] == seg.min() and highs[k] == seg.max()


def test_spectrum_of_a_tone():
    """A steady tone A·exp(2πi f0 t) reads 20·log10(A) dBV at f0 (DFT divided by
    the number of samples; common practice, no source)."""
    n, f0, amp = 4096, 62.5e6, 0.2             # f0 on a bin of the 8192-point FFT
    t = np.arange(n) / FS
    z = amp * np.exp(2j * np.pi * f0 * t)
    f, level = iq_spectrum(z.real, z.imag, FS)
    k = int(np.argmax(level))
    assert f[k] == pytest.approx(f0, abs=FS / 8192)
    assert level[k] == pytest.approx(20 * math.log10(amp), abs=0.1)
    # negative IF lands on the negative side (I + iQ, not I alone)
    f, level = iq_spectrum(z.real, -z.imag, FS)
    assert f[int(np.argmax(level))] == pytest.approx(-f0, abs=FS / 8192)


def test_units():
    assert time_unit(1.5e-6) == (1e9, "ns")
    assert time_unit(1e-4) == (1e6, "µs")
    assert time_unit(5e-3)[1] == "ms"
    assert volt_unit(0.2) == (1e3, "mV")
    assert volt_unit(1.5) == (1.0, "V")


def test_step_labels():
    assert step_labels("rot", ("A",), {"angle_rad": math.pi / 2, "phase_rad": 0})[0] == "x 90°"
    assert step_labels("rot", ("A",), {"angle_rad": math.pi, "axis_phase_rad": math.pi / 2})[0] \
        == "y 180°"
    assert step_labels("rot", ("A",), {"angle_rad": math.pi, "phase_rad": math.pi / 2})[0] \
        == "y 180°"                                 # older key, still read
    assert step_labels("trigger", (), {"label": "scope"})[0] == "trigger scope"
    assert step_labels("rot", ("A",), {"angle_rad": -math.pi / 2, "phase_rad": math.pi})[0] \
        == "−x -90°"
    assert step_labels("sqrtswap", ("A", "B"), {})[:2] == ["√SWAP A–B", "√SWAP"]
    assert step_labels("sqrtswap_inv", ("A", "B"), {})[1] == "√SWAP⁻¹"
    assert "pad" in step_labels("pad", (), {})
    assert step_labels("wait", ("A",), {})[0] == "wait"
    assert step_labels("read", ("A",), {})[0] == "read"


def test_long_spectrum_is_averaged_over_segments(monkeypatch):
    """Past MAX_FFT_POINTS the rms over segments keeps a steady tone at 20·log10(A)."""
    from compiler.preview import signal
    monkeypatch.setattr(signal, "MAX_FFT_POINTS", 4096)
    n, f0, amp = 3 * 4096 + 100, 62.5e6, 0.3
    t = np.arange(n) / FS
    z = amp * np.exp(2j * np.pi * f0 * t)
    f, level = iq_spectrum(z.real, z.imag, FS)
    assert len(f) == 4096 and signal.spectrum_segments(n) == 4
    assert level.max() == pytest.approx(20 * math.log10(amp), abs=0.3)
    assert f[int(np.argmax(level))] == pytest.approx(f0, abs=FS / 4096)


# --- what the figure says ----------------------------------------------------

def _all_text(fig) -> str:
    parts = [t.get_text() for t in fig.texts]
    for ax in fig.axes:
        parts += [t.get_text() for t in ax.texts]
        parts += [ax.get_title(loc) for loc in ("left", "center", "right")]
        parts += [ax.get_xlabel(), ax.get_ylabel()]
        parts += [t.get_text() for t in ax.get_yticklabels()]
        leg = ax.get_legend()
        if leg is not None:
            parts += [t.get_text() for t in leg.get_texts()]
    return "\n".join(parts)


def test_figure_contents(wf):
    from compiler.preview import build_figure
    fig = build_figure(wf, resolve_window(wf), title="my title", lo={"mw": LO})
    text = _all_text(fig)
    for expected in ["my title", "Check voltages and microwave power against your sample's "
                     "and lab's limits before loading.", "x 90°", "y 180°", "z 90°",
                     "√SWAP A–B", "wait", "read", "pad", "time from the start of the run (ns)",
                     "mw\nI/Q (mV)", "B_AB\n(mV)", "M1", "RF frequency (GHz)", "A  13.996 GHz",
                     "B  14.136 GHz", "LO 14.05 GHz", "DC level 50 mV", "test warning", "I", "Q"]:
        assert expected in text, expected
    assert "decimated" not in text


def test_spectrum_marks_the_image_frequencies(wf):
    """An I/Q mixer's image of a tone at LO + IF is at LO − IF (common
    practice, no source): the dotted marks sit at 2·LO − f_L of each dot."""
    from compiler.preview import build_figure
    fig = build_figure(wf, resolve_window(wf), lo={"mw": LO})
    ax = next(a for a in fig.axes if "spectrum" in a.get_title(loc="left"))
    labels = {t.get_text().strip(): t.get_position()[0] for t in ax.texts}
    xs = sorted(line.get_xdata()[0] for line in ax.lines
                if len(line.get_xdata()) == 2 and line.get_linewidth() == 0.8)
    want = sorted((2 * LO - f) / 1e9 for f in wf.larmor.values())
    assert "image of A" in labels and "image of B" in labels
    assert xs == pytest.approx(want)


def test_no_lo_gives_an_if_axis(wf):
    from compiler.preview import build_figure
    text = _all_text(build_figure(wf, resolve_window(wf)))
    assert "IF frequency (MHz)" in text and "give lo=" in text


def test_long_window_says_it_is_decimated():
    from compiler.preview import build_figure
    run = make_waveforms(repeats=125)              # 200 000 samples, 1000 steps
    text = _all_text(build_figure(run, resolve_window(run)))
    assert "time from the start of the run (µs)" in text
    assert "traces decimated: min/max envelope" in text
    assert "share of each kind" in text            # steps merged per pixel column


def test_kind_shares_add_up():
    from compiler.preview.figure import kind_shares
    run = make_waveforms(repeats=10)
    lane_a = [s for s in run.steps if "A" in s.qubits or not s.qubits]
    lane_a = [s for s in lane_a if s.stop > s.start]
    window = resolve_window(run)
    kinds, shares = kind_shares(lane_a, window, 100)
    assert shares.shape == (100, len(kinds))
    # every sample of lane A is covered: x90 (128) zrot(0) wait(256) √SWAP(100) phasewait(16)
    # read(1000) pad(100) = 1600 per period
    assert np.allclose(shares.sum(axis=1), 1.0)
    whole = kind_shares(lane_a, window, 1)[1][0]
    expect = {"rot": 128, "wait": 256, "sqrtswap": 100, "phasewait": 16, "read": 1000, "pad": 100}
    for kind, share in zip(kinds, whole):
        assert share == pytest.approx(expect[kind] / PERIOD)


@pytest.mark.parametrize("case", ["no-outputs", "markers-only", "one-sample", "zero-step"])
def test_sparse_runs_still_draw(wf, tmp_path, case):
    kwargs = {}
    if case == "no-outputs":
        run = Waveforms(0, (), FS, 64, {}, (), {}, {})
    elif case == "markers-only":
        run = Waveforms(0, (), FS, wf.n_samples, {"M1": wf.outputs["M1"]}, wf.steps, {}, {})
    elif case == "one-sample":
        run, kwargs = wf, dict(start=10e-9, stop=10.5e-9)
    else:
        run, kwargs = wf, dict(step=1)
    out = preview(run, tmp_path / "x.png", **kwargs)
    assert png_size(out) == (1540, 990)


# --- any window request: a Window inside the run or the project's own error ---

from hypothesis import HealthCheck, given, settings, strategies as st  # noqa: E402

_times = st.one_of(st.none(), st.floats(allow_nan=True, allow_infinity=True),
                   st.floats(-1e-6, 3e-6), st.integers(-5, 5), st.booleans(), st.text(max_size=3))


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(start=_times, stop=_times, step=st.one_of(st.none(), st.integers(-3, 12), st.floats()))
def test_any_window_request(wf, start, stop, step):
    try:
        w = resolve_window(wf, start, stop, step)
    except PreviewError:
        return
    assert 0 <= w.i0 < w.i1 <= wf.n_samples
    assert 0 <= w.start < w.stop <= wf.duration
    assert w.i0 / FS <= w.start + 1e-15 and w.stop <= w.i1 / FS + 1e-15


def test_occupied_span():
    from compiler.preview.signal import occupied_span
    f = np.linspace(-500e6, 500e6, 10_001)
    level = np.full_like(f, -120.0)
    level[(f > 40e6) & (f < 60e6)] = -20.0
    lo, hi, zoomed = occupied_span(f, level, [], (-500e6, 500e6))
    assert zoomed and lo < 40e6 and hi > 60e6 and hi - lo >= 50e6   # at least band/20
    lo, hi, zoomed = occupied_span(f, level, [-100e6], (-500e6, 500e6))
    assert lo < -100e6 and hi > 60e6                                   # Larmor mark kept
    lo, hi, zoomed = occupied_span(f, level, [-450e6, 450e6], (-500e6, 500e6))
    assert not zoomed and (lo, hi) == (-500e6, 500e6)


def test_inserted_kinds_have_styles_and_labels_of_their_own():
    """The compiler's inserted entries are told apart in the strip: a phase
    wait and a z correction each have a hatched style and a label of their own
    (common practice, no source)."""
    from compiler.preview import style as S
    assert S.step_style("phasewait") != S.OTHER_STEP and S.step_style("zcorrect") != S.OTHER_STEP
    assert S.step_style("phasewait") != S.step_style("zcorrect")
    assert all(S.step_style(k)[1] for k in ("phasewait", "zcorrect", "pad"))   # hatched
    assert S.step_labels("phasewait", ("A", "B"), {})[0].startswith("phase wait")
    assert S.step_labels("zcorrect", ("A",), {})[0].startswith("z-correct")


def test_swept_values_print_with_units_in_the_titles(write):
    # issue 14, item 6: the subtitle said 'tau = 4e-07'
    from compiler import compile_file
    from compiler.preview import resolve_window
    p = write("s.dotseq", "sweep tau over [100 ns, 400 ns]\nrot A x 90 deg\nwait tau on A\n"
              "sweep amp over [20 mV, 30 mV]\nrot A x 90 deg amplitude=amp\n")
    wf = compile_file(p, runs=[1]).waveforms[0]
    assert wf.sweep_text == "tau = 100 ns, amp = 30 mV"
    fig = figure_mod.build_figure(wf, resolve_window(wf))
    texts = [t.get_text() for t in fig.texts]
    assert any("tau = 100 ns, amp = 30 mV" in t for t in texts), texts
    assert not any("e-07" in t or "0.03" in t for t in texts)
