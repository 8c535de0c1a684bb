"""Read a device description (YAML) into a :class:`~compiler.device.model.Device`.

The text is composed with ``yaml.SafeLoader`` into a node tree (no Python
objects are built by YAML itself), so every value keeps its line and column.
The reader walks the tree against the schema below, converts quantities to
SI floats with :func:`compiler.units.parse_quantity`, collects every problem
it finds, builds the :class:`Device` from what it could read, then checks
the physics across sections with :func:`compiler.device.rules.validate`
(coherence times, Larmor frequency against the microwave band, exchange
ranges, ...), placing each finding at the value its key names, and raises
one :class:`~compiler.errors.DeviceError` listing all of them.

The file format is described key by key in ``docs/device.md``.
"""

from __future__ import annotations

import dataclasses
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import yaml
from yaml.constructor import ConstructorError, SafeConstructor
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from .. import physics
from ..errors import DeviceError, Problem, ProblemList, Span, suggest
from .. import spectra
from ..units import (FREQ_NOISE, VOLT_NOISE)
from ..units import (ANGLE, ENERGY, EXAMPLE_UNIT, FIELD, FIELD_PER_VOLT, FREQ_PER_VOLT, FREQUENCY,
                     NONE, TEMPERATURE, TIME, VOLTAGE, Dim, UnitError, format_distinct,
                     format_quantity, parse_quantity)
from . import exchange as xch
from . import levels as lv
from .model import (MAX_BITS, MAX_GRANULARITY, MAX_MEMORY, MAX_MIN_LENGTH, Channel, Coupling,
                    Device, Dot, Drive, ExchangeModel, Mixer, Readout, RotationDefaults,
                    VoltagePoint, granularity_of)
from .model import PairReadout, SpinReadout
from .. import readout as RO
from .presets import PRESETS
from .rules import ERROR, validate

# --------------------------------------------------------------------- schema

TOP_REQUIRED = ("name", "field", "temperature", "dots", "channels")
TOP_OPTIONAL = ("notes", "rotation", "readout", "couplings", "field_tilt", "acquisition_time",
                "points", "zeeman_correlation")

DOT_KEYS = ("preset", "g", "t1", "t2", "t2_star", "drive", "plunger", "zeeman_noise", "readout",
            "spin_orbit", "valley_splitting", "valley_g", "valley_t1", "qubit_levels")
VALLEY_KEYS = ("spin_orbit", "valley_splitting", "valley_g")
# a dot's single-spin readout (docs/device.md, "Readout and preparation")
SPIN_READOUT_KEYS = ("kind", "fidelity_up", "fidelity_down", "tunnel_out", "relaxation",
                     "integration_time", "snr", "preparation")
PAIR_READOUT_KEYS = ("kind", "fidelity_singlet", "fidelity_triplet", "fidelity_even",
                     "fidelity_odd")
DRIVE_KEYS = ("line", "rabi_per_volt", "b1_per_volt", "direction")

CHANNEL_KINDS = ("iq", "gate", "marker")
CHANNEL_KEYS = ("kind", "sample_rate", "bits", "range", "rise_time", "bandwidth",
                "min_length", "granularity", "bias_tee", "lo", "if_band", "memory", "delay",
                "mixer")
CHANNEL_REQUIRED = {
    "iq": ("sample_rate", "bits", "range", "lo", "if_band"),
    "gate": ("sample_rate", "bits", "range"),
    "marker": ("sample_rate",),
}
CHANNEL_ONLY = {"lo": ("iq",), "if_band": ("iq",), "bias_tee": ("iq", "gate"),
                "mixer": ("iq",)}
MIXER_KEYS = ("gain_imbalance", "phase_skew", "offset_i", "offset_q")
# a sample count: a whole number, or with a unit S and an optional prefix
# (k, M, G: powers of 1000; Ki, Mi, Gi: powers of 1024)
_SAMPLES_RE = re.compile(r"\s*(\d+(?:\.\d*)?(?:[eE]\+?\d+)?)\s*(?:(k|M|G|Ki|Mi|Gi)?S)?\s*\Z")
_SAMPLES_SCALE = {None: 1, "k": 10 ** 3, "M": 10 ** 6, "G": 10 ** 9, "Ki": 2 ** 10,
                  "Mi": 2 ** 20, "Gi": 2 ** 30}

COUPLING_KEYS = ("dots", "barrier", "exchange", "idle_voltage", "pulse_voltage",
                 "charge_noise", "detune", "barrier_noise", "readout")
# a noise spectrum S(f) = at_1hz/f^exponent + white on [f_low, f_high] (docs/device.md)
SPECTRUM_KEYS = ("at_1hz", "exponent", "white", "f_low", "f_high")
# every key of every exchange model (xch.MODELS), for the unknown-key check
EXCHANGE_ALL = ("model",) + tuple(dict.fromkeys(
    k for m in xch.MODELS.values() for k in m.REQUIRED + m.OPTIONAL))
# how a model parameter is read: energies (eV or E/h) are listed by the model
EXCHANGE_DIMS = {"j0": FREQUENCY, "v0": VOLTAGE, "vt": VOLTAGE}

ROTATION_KEYS = ("mode", "shape", "amplitude", "duration", "sigmas", "edge")
ROTATION_MODES = ("amplitude", "duration")
ROTATION_SHAPES = ("square", "gauss", "flattop")
READOUT_KEYS = ("marker", "duration", "trigger_marker")

# Example lines for "missing key" hints.
KEY_EXAMPLES = {
    "name": 'name: "my double dot"', "field": "field: 500 mT", "temperature": "temperature: 50 mK",
    "dots": "dots: {A: {preset: bilayer_graphene, drive: {line: mw, rabi_per_volt: 10 MHz/V}, "
            "plunger: P_A}}",
    "channels": "channels: {mw: {kind: iq, ...}, P_A: {kind: gate, ...}}",
    "kind": "kind: gate", "sample_rate": "sample_rate: 1 GS/s", "bits": "bits: 16",
    "range": "range: [-1 V, 1 V]", "lo": "lo: 14 GHz", "if_band": "if_band: [-300 MHz, 300 MHz]",
    "drive": "drive: {line: mw, rabi_per_volt: 10 MHz/V}", "plunger": "plunger: P_A",
    "line": "line: mw", "barrier": "barrier: B_AB", "exchange":
        "exchange: {model: exponential, j0: 20 kHz, v0: 40 mV}",
    "model": "model: exponential", "marker": "marker: M1", "duration": "duration: 2 us",
    "j0": "j0: 20 kHz", "v0": "v0: 40 mV", "t0": "t0: 2 ueV", "vt": "vt: 150 mV", "u": "u: 1 meV",
    "points": "points: [[0 mV, 10 kHz], [100 mV, 200 kHz]]",
    "at_1hz": "at_1hz: 1e6 Hz^2/Hz", "exponent": "exponent: 1",
    "memory": "memory: 64 MS", "delay": "delay: 12 ns",
    "mixer": "mixer: {gain_imbalance: 1.02, phase_skew: 1.5 deg, offset_i: 3 mV, offset_q: -2 mV}",
}
MEMORY_HINT = ("give the generator's waveform memory per channel in samples, a whole number "
               "like 16000000 or with a unit: '64 MS' (10^6 samples), '32 MiS' (2^20)")

_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")

# A device description is a few kilobytes; far larger input is refused before
# the (pure-Python, slow) YAML composer sees it.
MAX_DEVICE_CHARS = 1_000_000

# Why the channel's integers are bounded (model.MAX_BITS etc.; docs/device.md).
BITS_HINT = (f"give the DAC's real width: generators have 8 to 16 bits, precision DC sources up "
             f"to 20; dotseq stores codes of at most {MAX_BITS} bits")
MIN_LENGTH_HINT = ("a generator's minimum waveform length is tens to thousands of samples; to "
                   "make runs longer, end the sequence with a 'wait'")
GRANULARITY_HINT = "a generator's length granularity is a few samples (1 to 64 is typical)"

BANDWIDTH_RISE = 0.35          # t_rise = 0.35/f_3dB (common practice, no source)


class _Skip(Exception):
    """Internal: stop reading one value after its problem has been recorded."""


@dataclass
class _Val:
    """A value read from the file, with the node it came from."""
    value: Any
    node: Node


def _kind_of(node: Node) -> str:
    if isinstance(node, MappingNode):
        return "a mapping"
    if isinstance(node, SequenceNode):
        return "a list"
    if node.tag.endswith(":null"):
        return "nothing"
    return f"'{node.value}'"


class _Reader:
    """Walks one composed YAML tree; collects problems and warnings."""

    def __init__(self, text: str, file: str):
        self.file = file
        self.lines = text.splitlines()
        self.problems = ProblemList()
        self.warnings = ProblemList()
        self._ctor = SafeConstructor()
        # channels declared but unreadable: references to them are not
        # reported again as "not in channels"
        self.broken_channels: set[str] = set()
        # device-file key ("dots.A.t2") -> the node of its value, to place
        # the findings of rules.validate
        self.nodes: dict[str, Node] = {}

    # ---------------------------------------------------------------- report
    def span(self, node: Node) -> Span:
        s, e = node.start_mark, node.end_mark
        if e.line > s.line and e.column == 0:
            # block nodes end at the start of the next token: back up over
            # blank and comment lines to the node's last line of text
            last = min(e.line - 1, len(self.lines) - 1)
            while last > s.line and self.lines[last].strip()[:1] in ("", "#"):
                last -= 1
            return Span(self.file, s.line + 1, s.column + 1, last + 1,
                        len(self.lines[last].rstrip()) + 1)
        return Span(self.file, s.line + 1, s.column + 1, e.line + 1, e.column + 1)

    def _line(self, span: Span) -> str:
        return self.lines[span.line - 1] if 0 < span.line <= len(self.lines) else ""

    def error(self, node: Node, message: str, hint: str = "") -> None:
        sp = self.span(node)
        self.problems.add(message, sp, hint, self._line(sp))

    def warn(self, node: Node, message: str, hint: str = "") -> None:
        sp = self.span(node)
        self.warnings.add(message, sp, hint, self._line(sp))

    def fail(self, node: Node, message: str, hint: str = "") -> None:
        self.error(node, message, hint)
        raise _Skip

    # ------------------------------------------------------------- structure
    def mapping(self, node: Node, path: str, allowed: tuple[str, ...],
                required: tuple[str, ...] = (), anchor: Node | None = None,
                example: str = "") -> dict[str, tuple[Node, Node]]:
        """Check a mapping's keys; return key -> (key node, value node).

        Unknown and duplicate keys are reported; missing required keys are
        reported at ``anchor`` (the key naming this mapping).
        """
        where = anchor if anchor is not None else node
        if not isinstance(node, MappingNode):
            self.fail(node, f"{path} must be a mapping of 'key: value' lines, got {_kind_of(node)}",
                      example)
        out: dict[str, tuple[Node, Node]] = {}
        for knode, vnode in node.value:
            if not isinstance(knode, ScalarNode):
                self.error(knode, f"{path}: a key must be a plain name, got {_kind_of(knode)}")
                continue
            key = knode.value
            if key in out:
                first = out[key][0].start_mark.line + 1
                self.error(knode, f"duplicate key '{key}' in {path} (first given on line {first})",
                           "remove one of the two; YAML would silently keep only the last")
                continue
            if key == "<<":
                self.error(knode, f"{path}: YAML merge keys ('<<') are not supported",
                           "write the keys out in full")
                continue
            if key not in allowed:
                hint = suggest(key, allowed) or ("allowed keys: " + ", ".join(allowed))
                self.error(knode, f"unknown key '{key}' in {path}", hint)
                continue
            out[key] = (knode, vnode)
        for key in required:
            if key not in out:
                ex = KEY_EXAMPLES.get(key, f"{key}: ...")
                self.error(where, f"{path} is missing the required key '{key}'",
                           f"add a line like '{ex}'")
        return out

    def scalar(self, node: Node, path: str, example: str = "") -> Any:
        """The Python value of a scalar node (int, float, str, bool, None)."""
        if not isinstance(node, ScalarNode):
            self.fail(node, f"{path} must be a single value, got {_kind_of(node)}",
                      f"write it like '{example}'" if example else "")
        try:
            value = self._ctor.construct_object(node, deep=True)
        except ConstructorError as exc:
            # e.g. a !!python/... tag: the safe constructor knows no such type
            self.fail(node, f"{path}: cannot read '{node.value}' ({exc.problem})",
                      "write a plain value; YAML tags (!!...) are not allowed in a device file")
        except (ValueError, TypeError, OverflowError) as exc:
            self.fail(node, f"{path}: cannot read '{node.value}' ({exc})")
        if value is None:
            self.fail(node, f"{path} has no value",
                      f"write it like '{path.rsplit('.', 1)[-1]}: {example}'" if example else "")
        return value

    def text(self, node: Node, path: str) -> str:
        self.scalar(node, path, '"some text"')
        return str(node.value)

    def ident(self, node: Node, path: str, what: str) -> str:
        """A name (dot, channel) written as an identifier."""
        if not isinstance(node, ScalarNode) or node.tag.endswith(":null"):
            self.fail(node, f"{path} must be the name of a {what}, got {_kind_of(node)}")
        name = node.value
        if not _IDENT.match(name):
            self.fail(node, f"{path}: '{name}' is not a valid {what} name",
                      "names start with a letter or '_' and contain only letters, digits and '_'")
        return name

    def choice(self, node: Node, path: str, options: tuple[str, ...]) -> str:
        if not isinstance(node, ScalarNode):
            self.fail(node, f"{path} must be one of {', '.join(options)}, got {_kind_of(node)}")
        word = node.value
        if word not in options:
            self.fail(node, f"{path} must be one of {', '.join(options)}, got '{word}'",
                      suggest(word, options))
        return word

    def quantity(self, node: Node, path: str, dim: Dim, *, positive: bool = False,
                 nonnegative: bool = False, bare_zero: bool = False) -> float:
        """A quantity with unit as an SI float; checks its sign when asked."""
        example = EXAMPLE_UNIT.get(dim, "")
        value = self.scalar(node, path, example)
        try:
            x = parse_quantity(value, dim, path, allow_bare_zero=bare_zero)
        except UnitError as exc:
            hint = (f"write it with a unit, like '{example}'"
                    if example and "needs a unit" in str(exc) else "")
            self.fail(node, str(exc), hint)
        if positive and not x > 0:
            self.fail(node, f"{path} must be greater than zero, got '{node.value}'")
        if nonnegative and x < 0:
            self.fail(node, f"{path} must not be negative, got '{node.value}'")
        return x

    def number(self, node: Node, path: str, *, positive: bool = False,
               nonzero: bool = False) -> float:
        """A plain (dimensionless) number."""
        value = self.scalar(node, path, "2.0")
        try:
            x = parse_quantity(value, NONE, path)
        except UnitError as exc:
            self.fail(node, str(exc), "a plain number without unit, e.g. 2.0")
        if positive and not x > 0:
            self.fail(node, f"{path} must be greater than zero, got '{node.value}'")
        if nonzero and x == 0:
            self.fail(node, f"{path} must not be zero")
        return x

    def integer(self, node: Node, path: str, lo: int, hi: int | None = None,
                hint: str = "") -> int:
        value = self.scalar(node, path, str(lo))
        if isinstance(value, bool) or not isinstance(value, (int, float)) or (
                isinstance(value, float) and not (math.isfinite(value) and value.is_integer())):
            self.fail(node, f"{path} must be a whole number, got '{node.value}'")
        n = int(value)
        if n < lo or (hi is not None and n > hi):
            rng = f"from {lo} to {hi:,}" if hi is not None else f"at least {lo}"
            self.fail(node, f"{path} must be {rng}, got {n:,}", hint)
        return n

    def pair(self, node: Node, path: str, dim: Dim, bare_zero: bool = False
             ) -> tuple[_Val, _Val]:
        """A two-element list of quantities [low, high]."""
        ex = EXAMPLE_UNIT.get(dim, "1")
        if not isinstance(node, SequenceNode) or len(node.value) != 2:
            self.fail(node, f"{path} must be a list of two values [low, high], got {_kind_of(node)}",
                      f"e.g. [-{ex}, {ex}]")
        a = self.quantity(node.value[0], f"{path}[0]", dim, bare_zero=bare_zero)
        b = self.quantity(node.value[1], f"{path}[1]", dim, bare_zero=bare_zero)
        if not a < b:
            self.fail(node, f"{path}: the low end must be below the high end, got '{node.value[0].value}'"
                            f" and '{node.value[1].value}'", f"e.g. [-{ex}, {ex}]")
        return _Val(a, node.value[0]), _Val(b, node.value[1])

    def samples(self, node: Node, path: str) -> int:
        """A number of samples: a whole number, or '64 MS', '2 GS', '32 MiS'."""
        value = self.scalar(node, path, "64 MS")
        if isinstance(value, bool):
            self.fail(node, f"{path} must be a number of samples, got '{node.value}'",
                      MEMORY_HINT)
        if isinstance(value, (int, float)):
            x = value
        else:
            mt = _SAMPLES_RE.match(str(value))
            if not mt:
                self.fail(node, f"{path} must be a number of samples, got '{node.value}'",
                          MEMORY_HINT)
            x = float(mt.group(1)) * _SAMPLES_SCALE[mt.group(2)]
        if not (math.isfinite(x) and float(x).is_integer()):
            self.fail(node, f"{path} must be a whole number of samples, got '{node.value}'",
                      MEMORY_HINT)
        n = int(x)
        if not 1 <= n <= MAX_MEMORY:
            self.fail(node, f"{path} must be from 1 to {MAX_MEMORY:,} samples, got {n:,}",
                      MEMORY_HINT)
        return n

    def get(self, m: dict[str, tuple[Node, Node]], key: str, fn, *args, **kw):
        """Read m[key] with ``fn(value_node, *args)``; None when absent or bad."""
        if key not in m:
            return None
        path = next((a for a in args if isinstance(a, str)), None)
        if path is not None:
            self.nodes[path] = m[key][1]
        try:
            return _Val(fn(m[key][1], *args, **kw), m[key][1])
        except _Skip:
            return None


# ------------------------------------------------------------------ sections

def _read_channels(r: _Reader, node: Node, anchor: Node) -> dict[str, tuple[Channel, dict]]:
    out: dict[str, tuple[Channel, dict]] = {}
    if not isinstance(node, MappingNode) or not node.value:
        r.error(node if isinstance(node, MappingNode) else anchor,
                "channels must be a mapping of channel name -> settings with at least one channel",
                "e.g. 'mw: {kind: iq, sample_rate: 1 GS/s, ...}'")
        return out
    names = r.mapping(node, "channels", tuple(k.value for k, _ in node.value
                                             if isinstance(k, ScalarNode)))
    for name, (knode, vnode) in names.items():
        path = f"channels.{name}"
        try:
            r.ident(knode, path, "channel")
            m = r.mapping(vnode, path, CHANNEL_KEYS, ("kind",), anchor=knode)
            if "kind" not in m:
                continue
            kind = r.choice(m["kind"][1], f"{path}.kind", CHANNEL_KINDS)
        except _Skip:
            continue
        n_before = len(r.problems.problems)
        for key, kinds in CHANNEL_ONLY.items():
            if key in m and kind not in kinds:
                r.error(m[key][0], f"{path}.{key} applies only to channels of kind "
                                   f"{' or '.join(kinds)}, and '{name}' is kind '{kind}'")
        for key in CHANNEL_REQUIRED[kind]:
            if key not in m:
                r.error(knode, f"{path} is missing the required key '{key}' "
                               f"(needed by a channel of kind '{kind}')",
                        f"add '{KEY_EXAMPLES.get(key, key + ': ...')}'")
        ch = _read_channel_values(r, m, path, kind)
        if ch is None or len(r.problems.problems) > n_before:
            continue
        ch["name"] = name
        ch["kind"] = kind
        ch["span"] = r.span(knode)
        out[name] = (ch, m)
    r.broken_channels = set(names) - set(out)
    return out


def _read_channel_values(r: _Reader, m, path: str, kind: str) -> dict | None:
    n_before = len(r.problems.problems)
    fs = r.get(m, "sample_rate", r.quantity, f"{path}.sample_rate", FREQUENCY, positive=True)
    bits = r.get(m, "bits", r.integer, f"{path}.bits", 1, MAX_BITS, BITS_HINT)
    rng = r.get(m, "range", r.pair, f"{path}.range", VOLTAGE, True)
    rise = r.get(m, "rise_time", r.quantity, f"{path}.rise_time", TIME, nonnegative=True,
                 bare_zero=True)
    bw = r.get(m, "bandwidth", r.quantity, f"{path}.bandwidth", FREQUENCY, positive=True)
    if "rise_time" in m and "bandwidth" in m:
        r.error(m["bandwidth"][0], f"{path} gives both rise_time and bandwidth",
                "give one: the other follows from t_rise = 0.35/bandwidth")
    minlen = r.get(m, "min_length", r.integer, f"{path}.min_length", 1, MAX_MIN_LENGTH,
                   MIN_LENGTH_HINT)
    gran = r.get(m, "granularity", r.integer, f"{path}.granularity", 1, MAX_GRANULARITY,
                 GRANULARITY_HINT)
    tee = r.get(m, "bias_tee", r.quantity, f"{path}.bias_tee", TIME, nonnegative=True,
                bare_zero=True)
    lo = r.get(m, "lo", r.quantity, f"{path}.lo", FREQUENCY, positive=True)
    band = r.get(m, "if_band", r.pair, f"{path}.if_band", FREQUENCY, True)
    memory = r.get(m, "memory", r.samples, f"{path}.memory")
    delay = r.get(m, "delay", r.quantity, f"{path}.delay", TIME, nonnegative=True,
                  bare_zero=True)
    mixer = r.get(m, "mixer", _read_mixer, r, f"{path}.mixer")
    if fs is not None and band is not None:
        edge = max(abs(band.value[0].value), abs(band.value[1].value))
        if not edge < fs.value / 2:
            shown = format_distinct(edge, fs.value / 2, FREQUENCY)
            r.error(band.node, f"{path}.if_band reaches {shown[0]}, "
                               f"not below the Nyquist frequency {shown[1]} "
                               f"(half of sample_rate {m['sample_rate'][1].value})",
                    "narrow the IF band or raise the sample rate: |IF| < sample_rate/2")
    if len(r.problems.problems) > n_before:
        return None
    ch: dict = {"sample_rate": fs.value if fs else 0.0}
    if bits:
        ch["bits"] = bits.value
    if rng:
        ch["v_min"], ch["v_max"] = rng.value[0].value, rng.value[1].value
    if rise:
        ch["rise_time"] = rise.value
    if bw:
        ch["rise_time"] = BANDWIDTH_RISE / bw.value
    if minlen:
        ch["min_length"] = minlen.value
    if gran:
        ch["granularity"] = gran.value
    if tee:
        ch["bias_tee"] = tee.value
    if lo:
        ch["lo"] = lo.value
    if band:
        ch["if_min"], ch["if_max"] = band.value[0].value, band.value[1].value
    if memory:
        ch["memory"] = memory.value
    if delay:
        ch["delay"] = delay.value
    if mixer:
        ch["mixer"] = mixer.value
    return ch


def _read_mixer(node: Node, r: _Reader, path: str) -> Mixer:
    """The I/Q mixer's calibration: every key optional, ideal by default."""
    m = r.mapping(node, path, MIXER_KEYS, example=KEY_EXAMPLES["mixer"])
    gain = r.get(m, "gain_imbalance", r.number, f"{path}.gain_imbalance", positive=True)
    skew = r.get(m, "phase_skew", r.quantity, f"{path}.phase_skew", ANGLE, bare_zero=True)
    oi = r.get(m, "offset_i", r.quantity, f"{path}.offset_i", VOLTAGE, bare_zero=True)
    oq = r.get(m, "offset_q", r.quantity, f"{path}.offset_q", VOLTAGE, bare_zero=True)
    if any(k in m and v is None for k, v in (("gain_imbalance", gain), ("phase_skew", skew),
                                             ("offset_i", oi), ("offset_q", oq))):
        raise _Skip
    return Mixer(gain.value if gain else 1.0, skew.value if skew else 0.0,
                 oi.value if oi else 0.0, oq.value if oq else 0.0, r.span(node))


def _read_dot(r: _Reader, name: str, knode: Node, vnode: Node) -> dict | None:
    path = f"dots.{name}"
    try:
        r.ident(knode, path, "dot")
        m = r.mapping(vnode, path, DOT_KEYS, ("drive", "plunger"), anchor=knode,
                      example=f"e.g. '{name}: {{preset: gaas, drive: {{line: mw, "
                              f"rabi_per_volt: 10 MHz/V}}, plunger: P_{name}}}'")
    except _Skip:
        return None
    n_before = len(r.problems.problems)
    preset = r.get(m, "preset", r.choice, f"{path}.preset", tuple(PRESETS))
    values: dict[str, _Val] = {}
    sources: list[str] = []
    g = r.get(m, "g", r.number, f"{path}.g", nonzero=True)
    if g is not None:
        values["g"] = g
    for key in ("t1", "t2", "t2_star"):
        v = r.get(m, key, r.quantity, f"{path}.{key}", TIME, positive=True)
        if v is not None:
            values[key] = v
    zeeman = None
    if "zeeman_noise" in m:
        zeeman = _read_spectrum(r, m["zeeman_noise"], f"{path}.zeeman_noise", FREQ_NOISE, "Hz^2/Hz")
        for key in ("t2", "t2_star"):
            if key in m:
                r.error(m[key][0], f"{path} gives both '{key}' and 'zeeman_noise'",
                        f"give the spectrum alone: dotseq check prints the {key} it implies")
    for key in ("g", "t1", "t2", "t2_star"):
        if key in m:
            continue
        if key in ("t2", "t2_star") and "zeeman_noise" in m:
            continue            # implied by the spectrum (set when the device is assembled)
        if preset is not None:
            p = PRESETS[preset.value]
            values[key] = _Val(p.value(key), preset.node)
            sources.append(f"{key}: {p.source(key)}")
        elif "preset" not in m:
            r.error(knode, f"{path} needs '{key}' (or a 'preset' to take it from)",
                    "presets: " + ", ".join(PRESETS))
    # T2* <= T2 <= 2 T1 and the other physical rules: rules.validate
    valley: dict[str, _Val] = {}
    for key in ("spin_orbit", "valley_splitting"):
        v = r.get(m, key, _energy_or_freq, r, f"{path}.{key}")
        if v is not None:
            if v.value < 0:
                r.error(v.node, f"{path}.{key} must not be negative, got '{v.node.value}'",
                        "give the gap as a positive energy, e.g. 60 ueV")
            valley[key] = v
    vg = r.get(m, "valley_g", r.number, f"{path}.valley_g")
    if vg is not None:
        valley["valley_g"] = vg
    vt1 = r.get(m, "valley_t1", r.quantity, f"{path}.valley_t1", TIME, positive=True)
    if vt1 is not None:
        valley["valley_t1"] = vt1
    if preset is not None:
        p = PRESETS[preset.value]
        for key in VALLEY_KEYS + ("valley_t1",):
            if key not in m and p.extra(key) is not None:
                valley[key] = _Val(p.extra(key), preset.node)
                sources.append(f"{key}: {p.source(key)}")
    four = any(k in valley for k in VALLEY_KEYS)
    if four and "g" in values and values["g"].value < 0:
        r.error(values["g"].node, f"{path}.g must be positive for a spin–valley dot, got "
                                  f"{values['g'].value:g}",
                "the levels are ordered by energy; give |g| (graphene, silicon: g ≈ 2)")
    for key in ("valley_t1", "qubit_levels"):
        if key in m and not four:
            r.error(m[key][0], f"{path}.{key} is for a spin–valley dot",
                    "give spin_orbit, valley_splitting or valley_g (or a preset with them), "
                    "or remove this key")
    qlev = None
    if "qubit_levels" in m and four:
        qlev = r.get(m, "qubit_levels", _level_pair, r, f"{path}.qubit_levels")
    drive = None
    if "drive" in m:
        drive = _read_drive(r, m["drive"], f"{path}.drive", values.get("g"))
        if drive is not None and drive.get("direction") is not None and not four:
            r.warn(drive["direction"].node, f"{path}.drive.direction is used only by "
                                            "spin–valley dots",
                   "a spin-1/2's rabi_per_volt already holds its drive calibration")
    plunger = r.get(m, "plunger", r.ident, f"{path}.plunger", "channel")
    spin_ro = _read_spin_readout(r, m["readout"], f"{path}.readout") if "readout" in m else None
    if len(r.problems.problems) > n_before or drive is None or plunger is None:
        return None
    return {"name": name, "values": values, "drive": drive, "plunger": plunger,
            "valley": valley if four else None, "qubit_levels": qlev,
            "zeeman": zeeman, "readout": spin_ro,
            "preset": preset.value if preset else "", "sources": tuple(sources),
            "node": knode, "span": r.span(knode)}


def _probability(r: _Reader, node: Node, path: str) -> float:
    """A probability from 0 to 1 (a plain number)."""
    x = r.number(node, path)
    if not 0.0 <= x <= 1.0:
        r.fail(node, f"{path} must be a probability from 0 to 1, got '{node.value}'",
               "e.g. 0.98 (98 % of the shots record the right outcome)")
    return x


def _read_spin_readout(r: _Reader, kv: tuple[Node, Node], path: str) -> SpinReadout | None:
    """A dot's ``readout``: the assignment fidelities, or the physical
    parameters they follow from (compiler.readout), and the preparation."""
    knode, vnode = kv
    try:
        m = r.mapping(vnode, path, SPIN_READOUT_KEYS, anchor=knode,
                      example=f"e.g. '{knode.value}: {{fidelity_up: 0.95, fidelity_down: 0.99}}'")
    except _Skip:
        return None
    n_before = len(r.problems.problems)
    r.get(m, "kind", r.choice, f"{path}.kind", RO.DOT_KINDS)
    f_up = r.get(m, "fidelity_up", _probability_of(r), f"{path}.fidelity_up")
    f_down = r.get(m, "fidelity_down", _probability_of(r), f"{path}.fidelity_down")
    tun = r.get(m, "tunnel_out", r.quantity, f"{path}.tunnel_out", FREQUENCY, positive=True)
    relax = r.get(m, "relaxation", r.quantity, f"{path}.relaxation", TIME, positive=True)
    tint = r.get(m, "integration_time", r.quantity, f"{path}.integration_time", TIME,
                 positive=True)
    snr = r.get(m, "snr", r.number, f"{path}.snr", positive=True)
    kw: dict = {"span": r.span(knode)}
    given = [k for k in ("fidelity_up", "fidelity_down") if k in m]
    physical = [k for k in ("tunnel_out", "relaxation", "integration_time", "snr") if k in m]
    if given and physical:
        r.error(m[physical[0]][0], f"{path} gives both assignment fidelities ({', '.join(given)}) "
                                   f"and the parameters they follow from ({', '.join(physical)})",
                "give fidelity_up and fidelity_down, or tunnel_out and integration_time "
                "(with relaxation and snr if known)")
    elif physical:
        for k in ("tunnel_out", "integration_time"):
            if k not in m:
                r.error(knode, f"{path} needs '{k}' to derive the fidelities from the tunnel and "
                               "relaxation rates",
                        "e.g. readout: {tunnel_out: 20 kHz, integration_time: 300 us} "
                        "(or give fidelity_up and fidelity_down)")
    elif len(given) == 1:
        missing = "fidelity_down" if given[0] == "fidelity_up" else "fidelity_up"
        r.error(knode, f"{path} gives '{given[0]}' but not '{missing}'",
                f"give both, e.g. 'fidelity_up: 0.95, fidelity_down: 0.99'")
    elif not given:
        r.error(knode, f"{path} needs the assignment fidelities or the tunnel-out rate",
                "e.g. readout: {fidelity_up: 0.95, fidelity_down: 0.99}, or readout: "
                "{tunnel_out: 20 kHz, integration_time: 300 us}")
    if f_up:
        kw["fidelity_up"] = f_up.value
    if f_down:
        kw["fidelity_down"] = f_down.value
    if tun:
        kw["tunnel_out"] = tun.value
    if relax:
        kw["relaxation"] = relax.value
    if tint:
        kw["integration_time"] = tint.value
    if snr:
        kw["snr"] = snr.value
    if "preparation" in m:
        pn = m["preparation"][1]
        if isinstance(pn, ScalarNode) and pn.value == "thermal":
            kw["preparation"] = "thermal"
        else:
            try:
                kw["preparation_error"] = _probability(r, pn, f"{path}.preparation")
                kw["preparation"] = "given"
            except _Skip:
                pass
    if len(r.problems.problems) > n_before:
        return None
    return SpinReadout(**kw)


def _probability_of(r: _Reader):
    return lambda node, path: _probability(r, node, path)


def _read_pair_readout(r: _Reader, kv: tuple[Node, Node], path: str) -> PairReadout | None:
    """A coupling's ``readout``: blockade (singlet or not) or parity."""
    knode, vnode = kv
    try:
        m = r.mapping(vnode, path, PAIR_READOUT_KEYS, anchor=knode,
                      example=f"e.g. '{knode.value}: {{kind: blockade, fidelity_singlet: 0.98, "
                              "fidelity_triplet: 0.97}'")
    except _Skip:
        return None
    n_before = len(r.problems.problems)
    kind = r.get(m, "kind", r.choice, f"{path}.kind", RO.PAIR_KINDS)
    kind = kind.value if kind else ("blockade" if "kind" not in m else None)
    if kind is None:
        return None
    _, yes, no = RO.PAIR_RECORDS[kind]
    values = {}
    for key in PAIR_READOUT_KEYS[1:]:
        if key not in m:
            continue
        if key not in (yes, no):
            r.error(m[key][0], f"{path}.{key} does not belong to a {kind} readout "
                               f"(it takes {yes} and {no})",
                    f"use {yes} and {no}, or set kind to the readout this key belongs to")
            continue
        v = r.get(m, key, _probability_of(r), f"{path}.{key}")
        if v is not None:
            values[key] = v.value
    for key in (yes, no):
        if key not in m:
            r.error(knode, f"{path} needs '{key}' (a {kind} readout's assignment fidelities)",
                    f"e.g. '{yes}: 0.98, {no}: 0.97'")
    if len(r.problems.problems) > n_before:
        return None
    return PairReadout(kind=kind, fidelity_yes=values[yes], fidelity_no=values[no],
                       span=r.span(knode))


def _read_drive(r: _Reader, kv: tuple[Node, Node], path: str, g: _Val | None) -> dict | None:
    knode, vnode = kv
    try:
        m = r.mapping(vnode, path, DRIVE_KEYS, ("line",), anchor=knode,
                      example="e.g. 'drive: {line: mw, rabi_per_volt: 40 MHz/V}'")
    except _Skip:
        return None
    line = r.get(m, "line", r.ident, f"{path}.line", "channel")
    direction = r.get(m, "direction", _direction, r, f"{path}.direction")
    rabi = r.get(m, "rabi_per_volt", r.quantity, f"{path}.rabi_per_volt", FREQ_PER_VOLT,
                 positive=True)
    b1 = r.get(m, "b1_per_volt", r.quantity, f"{path}.b1_per_volt", FIELD_PER_VOLT,
               positive=True)
    if "rabi_per_volt" in m and "b1_per_volt" in m:
        r.error(m["b1_per_volt"][0], f"{path} gives both rabi_per_volt and b1_per_volt",
                "give one: f_Rabi = |g|·μB·B1/(2h)")
        return None
    if "rabi_per_volt" not in m and "b1_per_volt" not in m:
        r.error(knode, f"{path} needs 'rabi_per_volt' (e.g. 40 MHz/V) or 'b1_per_volt' "
                       "(e.g. 1 mT/V)")
        return None
    if line is None:
        return None
    if rabi is not None:
        per_volt = rabi
    elif b1 is not None and g is not None:
        # linear drive, rotating-wave approximation (Abragam 1961)
        per_volt = _Val(physics.rabi_from_b1(g.value, b1.value), b1.node)
    else:
        return None
    return {"line": line, "rabi": per_volt, "span": r.span(knode), "direction": direction}


def _direction(node: Node, r: _Reader, path: str) -> tuple[float, float, float]:
    """A direction [x, y, z] (plain numbers, not all zero; normalised)."""
    if not isinstance(node, SequenceNode) or len(node.value) != 3:
        r.fail(node, f"{path} must be a list of three numbers [x, y, z], got {_kind_of(node)}",
               "x in-plane along the static field's in-plane part, z out of the plane; "
               "e.g. [0, 1, 0] (the default: in-plane, perpendicular to the field)")
    xs = tuple(r.number(v, f"{path}[{i}]") for i, v in enumerate(node.value))
    norm = math.sqrt(sum(x * x for x in xs))
    if not norm > 0 or not math.isfinite(norm):
        r.fail(node, f"{path} must not be the zero vector", "e.g. [0, 1, 0]")
    return tuple(x / norm for x in xs)


def _level_pair(node: Node, r: _Reader, path: str) -> tuple[int, int]:
    """Two distinct level indices 0..3 (0 = ground), lower first."""
    if not isinstance(node, SequenceNode) or len(node.value) != 2:
        r.fail(node, f"{path} must be a list of two level numbers [lower, upper], got "
                     f"{_kind_of(node)}", "levels count from 0 (the ground level); e.g. [0, 2]")
    a = r.integer(node.value[0], f"{path}[0]", 0, lv.LEVELS - 1)
    b = r.integer(node.value[1], f"{path}[1]", 0, lv.LEVELS - 1)
    if not a < b:
        r.fail(node, f"{path}: the lower level must come first and differ from the upper, got "
                     f"[{a}, {b}]", "e.g. [0, 2]")
    return (a, b)


def _read_exchange(r: _Reader, kv: tuple[Node, Node], path: str) -> _Val | None:
    knode, vnode = kv
    try:
        m = r.mapping(vnode, path, EXCHANGE_ALL, ("model",), anchor=knode,
                      example="e.g. 'exchange: {model: exponential, j0: 20 kHz, v0: 40 mV}'")
        if "model" not in m:
            return None
        kind = r.choice(m["model"][1], f"{path}.model", xch.KINDS)
    except _Skip:
        return None
    cls = xch.MODELS[kind]
    allowed = cls.REQUIRED + cls.OPTIONAL
    bad = False
    for key, (kn, _) in m.items():
        if key != "model" and key not in allowed:
            r.error(kn, f"{path}.{key} is not a parameter of the {kind} model "
                        f"(it takes {', '.join(allowed)})")
            bad = True
    for key in cls.REQUIRED:
        if key not in m:
            r.error(knode, f"{path} is missing the required key '{key}' of the {kind} model",
                    f"add '{KEY_EXAMPLES.get(key, key + ': ...')}'")
            bad = True
    params: dict[str, Any] = {}
    for key in allowed:
        if key == "points":
            got = r.get(m, key, _table_points, r, f"{path}.points")
            if got is not None:
                params["volts"], params["joules"] = got.value
        elif key in cls.ENERGIES:
            got = r.get(m, key, _energy_or_freq, r, f"{path}.{key}",
                        positive=key in cls.REQUIRED)
        else:
            got = r.get(m, key, r.quantity, f"{path}.{key}", EXCHANGE_DIMS[key], positive=True)
        if got is None:
            if key in cls.REQUIRED:
                bad = True
        elif key != "points":
            params[key] = got.value
    if bad:
        return None
    model = cls(**params)
    try:
        model.check()
    except ValueError as e:
        if not isinstance(model, xch.Hubbard):
            r.error(knode, f"{path}: {e}")
            return None
        # the one rule a model's parameters can break beyond their own signs
        u, eps = params.get("u"), params.get("detuning")
        node = m["detuning"][1] if "detuning" in m else knode
        shown = format_distinct(abs(eps or 0.0), u or 0.0, FREQUENCY)
        r.error(node, f"{path}.detuning |ε| = {shown[0]}"
                      f" (as ε/h) is not below the charging energy U/h = {shown[1]}",
                "the Hubbard exchange 4t²U/(U²−ε²) needs |ε| < U (otherwise the "
                "charge moves to one dot)")
        return None
    return _Val(model, vnode)


def _energy_or_freq(node: Node, r: _Reader, path: str, positive: bool = False) -> float:
    """An energy (eV units) as E/h in Hz, or a frequency given directly."""
    value = r.scalar(node, path, "10 ueV")
    try:
        x = physics.energy_to_frequency(parse_quantity(value, ENERGY, path,
                                                       allow_bare_zero=not positive))
    except UnitError as exc_e:
        try:
            x = parse_quantity(value, FREQUENCY, path, allow_bare_zero=not positive)
        except UnitError:
            if "finite" in str(exc_e):
                r.fail(node, str(exc_e))
            r.fail(node, f"{path} must be an energy like '10 ueV' or a frequency (E/h) like "
                         f"'2.4 GHz', got '{node.value}'")
    if positive and not x > 0:
        r.fail(node, f"{path} must be greater than zero, got '{node.value}'")
    return x


def _table_points(node: Node, r: _Reader, path: str) -> tuple[tuple[float, ...], tuple[float, ...]]:
    if not isinstance(node, SequenceNode) or len(node.value) < 2:
        r.fail(node, f"{path} must be a list of at least two [voltage, J] points, "
                     f"got {_kind_of(node) if not isinstance(node, SequenceNode) else 'fewer'}",
               "e.g. points: [[0 mV, 10 kHz], [100 mV, 200 kHz]]")
    volts: list[_Val] = []
    joules: list[_Val] = []
    ok = True
    for i, item in enumerate(node.value):
        p = f"{path}[{i}]"
        try:
            if not isinstance(item, SequenceNode) or len(item.value) != 2:
                r.fail(item, f"{p} must be a pair [voltage, J], got {_kind_of(item)}",
                       "e.g. [100 mV, 200 kHz]")
            v = r.quantity(item.value[0], f"{p} voltage", VOLTAGE, bare_zero=True)
            j = r.quantity(item.value[1], f"{p} exchange J", FREQUENCY, positive=True)
            volts.append(_Val(v, item.value[0]))
            joules.append(_Val(j, item.value[1]))
        except _Skip:
            ok = False
    if not ok:
        raise _Skip
    for i in range(1, len(volts)):
        if not volts[i].value > volts[i - 1].value:
            r.error(volts[i].node, f"{path}[{i}]: voltage '{volts[i].node.value}' is not above "
                                   f"the previous point's '{volts[i - 1].node.value}'",
                    "list the calibration points in strictly increasing voltage")
            ok = False
        elif not joules[i].value > joules[i - 1].value:
            r.error(joules[i].node, f"{path}[{i}]: J table is not monotonic: "
                                    f"'{joules[i].node.value}' at '{volts[i].node.value}' is not "
                                    f"above '{joules[i - 1].node.value}' at the previous point",
                    "J must strictly increase with barrier voltage; re-measure or drop the point")
            ok = False
    if not ok:
        raise _Skip
    return tuple(v.value for v in volts), tuple(j.value for j in joules)


def _read_coupling(r: _Reader, i: int, node: Node, dots: dict, dot_names: set) -> dict | None:
    path = f"couplings[{i}]"
    try:
        m = r.mapping(node, path, COUPLING_KEYS, ("dots", "barrier", "exchange"),
                      example="e.g. '- {dots: [A, B], barrier: B_AB, exchange: {...}}'")
    except _Skip:
        return None
    n_before = len(r.problems.problems)
    pair = None
    if "dots" in m:
        dn = m["dots"][1]
        if not isinstance(dn, SequenceNode) or len(dn.value) != 2:
            r.error(dn, f"{path}.dots must list exactly two dots, got {_kind_of(dn)}"
                        if not isinstance(dn, SequenceNode) else
                        f"{path}.dots must list exactly two dots, got {len(dn.value)}",
                    "e.g. dots: [A, B]")
        else:
            names = []
            for j, item in enumerate(dn.value):
                try:
                    nm = r.ident(item, f"{path}.dots[{j}]", "dot")
                except _Skip:
                    continue
                if nm not in dot_names:
                    r.error(item, f"{path}.dots names the dot '{nm}', which is not in dots",
                            suggest(nm, dot_names))
                names.append((nm, item))
            if len(names) == 2 and names[0][0] == names[1][0]:
                r.error(names[1][1], f"{path} couples dot '{names[0][0]}' to itself",
                        "an exchange coupling joins two different dots")
            elif len(names) == 2:
                pair = _Val((names[0][0], names[1][0]), dn)
    barrier = r.get(m, "barrier", r.ident, f"{path}.barrier", "channel")
    model = _read_exchange(r, m["exchange"], f"{path}.exchange") if "exchange" in m else None
    idle = r.get(m, "idle_voltage", r.quantity, f"{path}.idle_voltage", VOLTAGE, bare_zero=True)
    pulse = r.get(m, "pulse_voltage", r.quantity, f"{path}.pulse_voltage", VOLTAGE,
                  bare_zero=True)
    noise = r.get(m, "charge_noise", r.quantity, f"{path}.charge_noise", VOLTAGE,
                  nonnegative=True, bare_zero=True)
    bnoise = None
    if "barrier_noise" in m:
        bnoise = _read_spectrum(r, m["barrier_noise"], f"{path}.barrier_noise", VOLT_NOISE,
                                "V^2/Hz")
        if "charge_noise" in m:
            r.error(m["charge_noise"][0], f"{path} gives both 'charge_noise' and 'barrier_noise'",
                    "give one: the rms of a quasi-static offset, or the spectrum")
    detune: list[tuple[str, float, Node]] = []
    if "detune" in m:
        dk, dv = m["detune"]
        try:
            if not isinstance(dv, MappingNode):
                r.fail(dv, f"{path}.detune must map dot names to plunger offsets, "
                           f"got {_kind_of(dv)}", "e.g. detune: {B: 20 mV}")
            seen = r.mapping(dv, f"{path}.detune",
                             tuple(k.value for k, _ in dv.value if isinstance(k, ScalarNode)))
            for nm, (kn, vn) in seen.items():
                try:
                    r.ident(kn, f"{path}.detune", "dot")
                    off = r.quantity(vn, f"{path}.detune.{nm}", VOLTAGE, bare_zero=True)
                except _Skip:
                    continue
                if nm not in dot_names:
                    r.error(kn, f"{path}.detune names the dot '{nm}', which is not in dots",
                            suggest(nm, dot_names))
                elif pair is not None and nm in pair.value:
                    r.error(kn, f"{path}.detune: '{nm}' is one of the coupled pair itself",
                            "detune lists only the dots in between the pair")
                detune.append((nm, off, kn))
        except _Skip:
            pass
    pair_ro = (_read_pair_readout(r, m["readout"], f"{path}.readout") if "readout" in m
               else None)
    if len(r.problems.problems) > n_before or None in (pair, barrier, model):
        return None
    return {"pair": pair, "barrier": barrier, "model": model, "idle": idle, "pulse": pulse,
            "noise": noise, "detune": detune, "node": node, "span": r.span(node), "index": i,
            "bnoise": bnoise, "readout": pair_ro}


CORRELATION_KEYS = ("dots", "coefficient")


def _read_correlation(r: _Reader, kv: tuple[Node, Node], dots: dict) -> tuple:
    """``zeeman_correlation``: a list of ``{dots: [A, B], coefficient: c}``, the
    correlation coefficient of two dots' Zeeman noises (both given as
    spectra).  Each c in [−1, 1], each pair once; the matrix they form (ones
    on the diagonal, zero for pairs not listed; symmetric by construction)
    must be positive semidefinite.  Returns ((A, B, c), ...)."""
    knode, node = kv
    path = "zeeman_correlation"
    example = "e.g. 'zeeman_correlation: [{dots: [A, B], coefficient: 0.8}]'"
    if not isinstance(node, SequenceNode):
        r.error(node, f"{path} must be a list of '{{dots: [A, B], coefficient: c}}' entries, "
                      f"got {_kind_of(node)}", example)
        return ()
    out, seen = [], {}
    for i, item in enumerate(node.value):
        ipath = f"{path}[{i}]"
        try:
            m = r.mapping(item, ipath, CORRELATION_KEYS, CORRELATION_KEYS, example=example)
        except _Skip:
            continue
        dn = m["dots"][1]
        if not isinstance(dn, SequenceNode) or len(dn.value) != 2:
            r.error(dn, f"{ipath}.dots must list exactly two dots", "e.g. dots: [A, B]")
            continue
        names = []
        for j, d in enumerate(dn.value):
            try:
                nm = r.ident(d, f"{ipath}.dots[{j}]", "dot")
            except _Skip:
                continue
            if nm not in dots:
                r.error(d, f"{ipath}.dots names the dot '{nm}', which is not in dots",
                        suggest(nm, set(dots)))
            elif dots[nm].zeeman_noise is None:
                r.error(d, f"{ipath}: dot '{nm}' has no zeeman_noise spectrum to correlate",
                        f"give dots.{nm}.zeeman_noise (a spectrum), or leave the pair out")
            else:
                names.append(nm)
        c = r.get(m, "coefficient", r.number, f"{ipath}.coefficient")
        if len(names) != 2 or c is None:
            continue
        if names[0] == names[1]:
            r.error(dn, f"{ipath}.dots names '{names[0]}' twice",
                    "a dot's noise is fully correlated with itself; list two different dots")
            continue
        if not -1.0 <= c.value <= 1.0:
            r.error(c.node, f"{ipath}.coefficient {c.value:g} must be from -1 to 1",
                    "a correlation coefficient: 1 common-mode, -1 opposite, 0 independent")
            continue
        key = frozenset(names)
        if key in seen:
            r.error(dn, f"{ipath}: the pair {names[0]}, {names[1]} is already given at "
                        f"{path}[{seen[key]}]", "give each pair once")
            continue
        seen[key] = i
        out.append((names[0], names[1], float(c.value)))
    if out:
        order = [q for q in dots if any(q in (a, b) for a, b, _ in out)]
        C = np.eye(len(order))
        for a, b, c in out:
            C[order.index(a), order.index(b)] = C[order.index(b), order.index(a)] = c
        low = float(np.linalg.eigvalsh(C).min())
        if low < -1e-12:
            r.error(knode, f"{path}: the correlation matrix of {', '.join(order)} is not positive "
                           f"semidefinite (smallest eigenvalue {low:.3g}), so no noise has it",
                    "lower the coefficients: e.g. three dots cannot all be anticorrelated; "
                    "for A, B, C with c_AB = c_BC = c, c_AC must be at least 2c² − 1")
            return ()
    return tuple(out)


def _read_spectrum(r: _Reader, kv: tuple[Node, Node], path: str, dim: Dim,
                   unit: str) -> dict | None:
    """A spectrum mapping (SPECTRUM_KEYS): values in SI; f_low may be left to
    the top-level acquisition_time (resolved by :func:`_make_spectrum`)."""
    knode, vnode = kv
    try:
        m = r.mapping(vnode, path, SPECTRUM_KEYS, ("at_1hz", "exponent"), anchor=knode,
                      example=f"e.g. '{knode.value}: {{at_1hz: 1e6 {unit}, exponent: 1}}'")
    except _Skip:
        return None
    n_before = len(r.problems.problems)
    out: dict = {"node": knode, "path": path}
    for key in ("at_1hz", "white"):
        if key not in m:
            continue
        vn = m[key][1]
        v = r.get(m, key, r.quantity, f"{path}.{key}", dim, nonnegative=True, bare_zero=True)
        if v is None:
            continue
        written = str(vn.value)
        if v.value != 0 and "^2/" not in written:
            r.error(vn, f"{path}.{key} '{written}' must be a spectral density in {unit}",
                    f"write it like '1e6 {unit}' (a squared unit per hertz)")
            continue
        out[key] = v.value
    ex = r.get(m, "exponent", r.number, f"{path}.exponent")
    if ex is not None:
        if not 0 <= ex.value < 4:
            r.error(ex.node, f"{path}.exponent {ex.value:g} must be from 0 (white) to below 4",
                    "1/f noise has exponent 1; measured spin-qubit spectra have 0.5 to 2.6")
        out["beta"] = float(ex.value)
    for key in ("f_low", "f_high"):
        v = r.get(m, key, r.quantity, f"{path}.{key}", FREQUENCY, positive=True)
        if v is not None:
            out[key] = v.value
    if "f_low" in out and "f_high" in out and not out["f_high"] > out["f_low"]:
        r.error(m["f_high"][1], f"{path}.f_high must be above f_low",
                "the spectrum lives on [f_low, f_high]")
    if len(r.problems.problems) > n_before:
        return None
    return out


def _make_spectrum(r: _Reader, raw: dict | None, acq) -> spectra.Spectrum | None:
    """The Spectrum of a read mapping, f_low defaulting to 1/acquisition_time."""
    if raw is None:
        return None
    f_low = raw.get("f_low")
    beta = raw.get("beta", 1.0)
    if f_low is None:
        if acq is not None:
            f_low = 1.0 / acq.value
        elif raw.get("at_1hz", 0.0) > 0 and beta > 0:
            r.error(raw["node"], f"{raw['path']} needs a low cut-off: give 'f_low' or a "
                                 "top-level 'acquisition_time'",
                    "e.g. 'acquisition_time: 600 s' at the top (f_low = 1/acquisition_time: "
                    "under 1/f noise T2* depends on how long a measurement averages)")
            return None
        else:
            f_low = 0.0
    try:
        return spectra.Spectrum(raw.get("at_1hz", 0.0), beta, raw.get("white", 0.0), f_low,
                                raw.get("f_high", math.inf))
    except ValueError as exc:
        r.error(raw["node"], f"{raw['path']}: {exc}")
        return None


def _read_rotation(r: _Reader, kv: tuple[Node, Node]) -> tuple[RotationDefaults, dict] | None:
    knode, vnode = kv
    path = "rotation"
    try:
        m = r.mapping(vnode, path, ROTATION_KEYS, anchor=knode)
    except _Skip:
        return None
    n_before = len(r.problems.problems)
    mode = r.get(m, "mode", r.choice, f"{path}.mode", ROTATION_MODES)
    shape = r.get(m, "shape", r.choice, f"{path}.shape", ROTATION_SHAPES)
    amp = r.get(m, "amplitude", r.quantity, f"{path}.amplitude", VOLTAGE, positive=True)
    dur = r.get(m, "duration", r.quantity, f"{path}.duration", TIME, positive=True)
    sig = r.get(m, "sigmas", r.number, f"{path}.sigmas", positive=True)
    edge = r.get(m, "edge", r.quantity, f"{path}.edge", TIME, positive=True)
    mode_v = mode.value if mode else "amplitude"
    shape_v = shape.value if shape else "square"
    if mode_v == "duration" and "duration" not in m:
        r.error(knode, "rotation.mode is 'duration' but rotation.duration is missing",
                "e.g. 'duration: 40 ns'")
    if shape_v == "flattop" and "edge" not in m:
        r.error(knode, "rotation.shape is 'flattop' but rotation.edge is missing",
                "e.g. 'edge: 5 ns' (length of each rising and falling edge)")
    if len(r.problems.problems) > n_before:
        return None
    kw: dict = {"mode": mode_v, "shape": shape_v}
    if amp:
        kw["amplitude"] = amp.value
    if dur:
        kw["duration"] = dur.value
    if sig:
        kw["sigmas"] = sig.value
    if edge:
        kw["edge"] = edge.value
    return RotationDefaults(**kw), {"amplitude": amp}


def _read_readout(r: _Reader, kv: tuple[Node, Node]) -> tuple[Readout, dict] | None:
    knode, vnode = kv
    try:
        m = r.mapping(vnode, "readout", READOUT_KEYS, ("marker", "duration"), anchor=knode)
    except _Skip:
        return None
    n_before = len(r.problems.problems)
    marker = r.get(m, "marker", r.ident, "readout.marker", "channel")
    dur = r.get(m, "duration", r.quantity, "readout.duration", TIME, positive=True)
    trig = r.get(m, "trigger_marker", r.ident, "readout.trigger_marker", "channel")
    if len(r.problems.problems) > n_before or marker is None or dur is None:
        return None
    return (Readout(marker=marker.value, duration=dur.value,
                    trigger_marker=trig.value if trig else ""),
            {"marker": marker, "trigger_marker": trig})


def _read_points(r: _Reader, kv: tuple[Node, Node], channels: dict) -> dict[str, VoltagePoint]:
    """``points: {NAME: {GATE_CHANNEL: LEVEL, ...}, ...}``: named voltage points
    (charge configurations), each level inside its gate channel's range."""
    knode, vnode = kv
    out: dict[str, VoltagePoint] = {}
    ex = "points: {load: {P_A: 20 mV, P_B: -5 mV}, measure: {P_A: 12 mV}}"
    if not isinstance(vnode, MappingNode) or not vnode.value:
        r.error(vnode if isinstance(vnode, MappingNode) else knode,
                "points must be a mapping of point name -> {gate channel: level, ...} with at "
                "least one point", f"e.g. {ex}")
        return out
    for pk, pv in vnode.value:
        try:
            name = r.ident(pk, "points", "voltage point")
        except _Skip:
            continue
        path = f"points.{name}"
        if name in out:
            r.error(pk, f"duplicate key '{name}' in points", "give each point one entry")
            continue
        if not isinstance(pv, MappingNode) or not pv.value:
            r.error(pv if isinstance(pv, MappingNode) else pk,
                    f"{path} must be a mapping of gate channel -> level with at least one "
                    f"channel, got {_kind_of(pv)}", f"e.g. '{name}: {{P_A: 20 mV}}'")
            continue
        r.nodes[path] = pk
        levels: list[tuple[str, float]] = []
        seen: set[str] = set()
        ok = True
        for ck, cv in pv.value:
            try:
                ch_name = r.ident(ck, path, "channel")
            except _Skip:
                ok = False
                continue
            if ch_name in seen:
                r.error(ck, f"duplicate key '{ch_name}' in {path}", "remove one of the two")
                ok = False
                continue
            seen.add(ch_name)
            ch = _need_channel(r, channels, _Val(ch_name, ck), f"{path}.{ch_name}", "gate")
            try:
                v = r.quantity(cv, f"{path}.{ch_name}", VOLTAGE, bare_zero=True)
            except _Skip:
                ok = False
                continue
            r.nodes[f"{path}.{ch_name}"] = cv
            if ch is None:
                ok = False
                continue
            levels.append((ch_name, v))
        if ok:
            out[name] = VoltagePoint(name, tuple(levels), r.span(pk))
    return out


# ------------------------------------------------------------------ the walk

def _need_channel(r: _Reader, channels: dict, ref: _Val, path: str, kind: str) -> Channel | None:
    name = ref.value
    if name in r.broken_channels:
        return None
    if name not in channels:
        r.error(ref.node, f"{path} names the channel '{name}', which is not in channels",
                suggest(name, channels) or f"add '{name}: {{kind: {kind}, ...}}' to channels")
        return None
    ch = channels[name]
    if ch.kind != kind:
        r.error(ref.node, f"{path} must name a channel of kind '{kind}', but '{name}' is "
                          f"kind '{ch.kind}'")
        return None
    return ch


def _build(r: _Reader, root: Node) -> Device:
    if not isinstance(root, MappingNode):
        # not a device file at all (perhaps some other file): neither its text
        # nor its first line is shown
        got = "plain text" if isinstance(root, ScalarNode) and root.value else _kind_of(root)
        r.problems.add(f"this is not a device file: a device file must be a mapping of "
                       f"'key: value' lines at the top, got {got}", r.span(root),
                       "check the path; a device file starts with 'name: ...', 'field: ...'")
        raise _Skip
    top = r.mapping(root, "the device file", TOP_REQUIRED + TOP_OPTIONAL, TOP_REQUIRED)
    name = r.get(top, "name", r.text, "name")
    notes = r.get(top, "notes", r.text, "notes")
    fld = r.get(top, "field", r.quantity, "field", FIELD, positive=True)
    temp = r.get(top, "temperature", r.quantity, "temperature", TEMPERATURE, positive=True)
    tilt = r.get(top, "field_tilt", r.quantity, "field_tilt", ANGLE, bare_zero=True)
    if tilt is not None and not -math.pi / 2 <= tilt.value <= math.pi / 2:
        r.error(tilt.node, f"field_tilt must be from -90 deg to 90 deg, got '{tilt.node.value}'",
                "the angle of the field from the sample plane: 0 deg in-plane, 90 deg "
                "out of plane")
        tilt = None
    tilt_v = tilt.value if tilt is not None else 0.0
    acq = r.get(top, "acquisition_time", r.quantity, "acquisition_time", TIME, positive=True)

    # channels first: dots and couplings refer to them
    raw_channels = _read_channels(r, top["channels"][1], top["channels"][0]) \
        if "channels" in top else {}
    channels = {nm: Channel(**ch) for nm, (ch, _) in raw_channels.items()}
    # the run length is a multiple of every channel's granularity: their
    # common multiple must stay as bounded as each one
    upto = 1
    for nm, (ch, nodes) in raw_channels.items():
        upto = granularity_of((upto, channels[nm].granularity))
        if "granularity" in nodes:
            if upto > MAX_GRANULARITY:
                r.error(nodes["granularity"][1],
                        f"channels.{nm}.granularity {ch['granularity']:,} with the granularities of "
                        f"the channels before it asks for runs in multiples of {upto:,} samples, "
                        f"above {MAX_GRANULARITY:,}", "give the channels granularities that divide "
                        "one another (e.g. 16 and 32)")
                break
    # one sample grid for the whole device: the compiler places every step on it
    if channels:
        first = next(iter(channels.values()))
        for nm, (ch, nodes) in raw_channels.items():
            if ch["sample_rate"] and first.sample_rate and ch["sample_rate"] != first.sample_rate:
                node = nodes["sample_rate"][1] if "sample_rate" in nodes else nodes.get("kind", (root,))[0]
                shown = format_distinct(ch["sample_rate"], first.sample_rate, FREQUENCY)
                r.error(node, f"channels.{nm}.sample_rate is {shown[0]} "
                              f"but channel '{first.name}' runs at {shown[1]}",
                        "all channels of a device must share one sample rate (mixed rates are not "
                        "supported)")

    raw_dots: dict[str, dict] = {}
    dot_names: set[str] = set()
    if "dots" in top:
        dk, dv = top["dots"]
        if not isinstance(dv, MappingNode) or not dv.value:
            r.error(dv if isinstance(dv, MappingNode) else dk,
                    "dots must be a mapping of dot name -> settings with at least one dot",
                    "e.g. 'A: {preset: bilayer_graphene, drive: {...}, plunger: P_A}'")
        else:
            entries = r.mapping(dv, "dots", tuple(k.value for k, _ in dv.value
                                                  if isinstance(k, ScalarNode)))
            dot_names = set(entries)
            for nm, (kn, vn) in entries.items():
                d = _read_dot(r, nm, kn, vn)
                if d is not None:
                    raw_dots[nm] = d

    raw_couplings: list[dict] = []
    if "couplings" in top:
        ck, cv = top["couplings"]
        if isinstance(cv, ScalarNode) and cv.tag.endswith(":null"):
            pass
        elif not isinstance(cv, SequenceNode):
            r.error(cv, f"couplings must be a list of '- dots: [A, B] ...' items, "
                        f"got {_kind_of(cv)}")
        else:
            seen_pairs: dict[frozenset, int] = {}
            for i, item in enumerate(cv.value):
                c = _read_coupling(r, i, item, raw_dots, dot_names)
                if c is None:
                    continue
                key = frozenset(c["pair"].value)
                if key in seen_pairs:
                    a, b = c["pair"].value
                    r.error(c["pair"].node, f"couplings[{i}] repeats the pair {a}-{b} "
                                            f"(already couplings[{seen_pairs[key]}])",
                            "give each pair of dots one coupling")
                    continue
                seen_pairs[key] = i
                raw_couplings.append(c)

    rotation = _read_rotation(r, top["rotation"]) if "rotation" in top else None
    readout = _read_readout(r, top["readout"]) if "readout" in top else None

    # ------------------------------------------------ cross-section checks
    dots: dict[str, Dot] = {}
    plungers: dict[str, str] = {}
    for nm, d in raw_dots.items():
        path = f"dots.{nm}"
        _need_channel(r, channels, d["drive"]["line"], f"{path}.drive.line", "iq")
        _need_channel(r, channels, d["plunger"], f"{path}.plunger", "gate")
        pl = d["plunger"].value
        if pl in plungers:
            r.error(d["plunger"].node, f"{path}.plunger '{pl}' is already the plunger of "
                                       f"dot '{plungers[pl]}'", "each dot needs its own plunger gate")
        plungers.setdefault(pl, nm)
        g = d["values"]["g"].value
        r.nodes[path] = d["node"]
        v = d["values"]
        valley = d["valley"]
        extra = {}
        if valley is not None:
            extra = {k: valley[k].value for k in valley}
            if d["qubit_levels"] is not None:
                extra["qubit_levels"] = d["qubit_levels"].value
        zn = _make_spectrum(r, d["zeeman"], acq)
        if d["zeeman"] is not None:
            if zn is None:
                continue
            # the T2* and Hahn T2 the spectrum implies (1/e times of the
            # filter-function integrals; compiler/spectra.py)
            t2s_v = spectra.coherence_time(zn, "ramsey")
            t2_v = min(spectra.coherence_time(zn, "hahn"), 2 * v["t1"].value)
            t2s_v = min(t2s_v, t2_v)
        else:
            t2s_v, t2_v = v["t2_star"].value, v["t2"].value
        dots[nm] = Dot(name=nm, g=g, t1=v["t1"].value, t2=t2_v,
                       t2_star=t2s_v, zeeman_noise=zn,
                       drive=Drive(d["drive"]["line"].value, d["drive"]["rabi"].value,
                                   d["drive"]["span"],
                                   d["drive"]["direction"].value if d["drive"]["direction"]
                                   else None),
                       plunger=pl, preset=d["preset"], sources=d["sources"], span=d["span"],
                       readout=d["readout"], **extra)

    couplings: list[Coupling] = []
    for c in raw_couplings:
        cp = _check_coupling(r, c, channels)
        bn = _make_spectrum(r, c["bnoise"], acq)
        if bn is not None:
            cp = dataclasses.replace(cp, barrier_noise=bn)
        couplings.append(cp)

    correlation = (_read_correlation(r, top["zeeman_correlation"], dots)
                   if "zeeman_correlation" in top else ())

    points = _read_points(r, top["points"], channels) if "points" in top else {}
    for pt in points.values():
        # the generator plays the level, or behind a bias tee the level minus
        # the DC level (the rest level comes through the tee): it must fit the
        # channel's range (what synthesis would refuse, said here at the value)
        from ..analog import top_voltage
        for ch_name, v in pt.levels:
            ch = channels[ch_name]
            rest = next((c.idle_voltage for c in couplings if c.barrier == ch_name), 0.0)
            dc = rest if ch.bias_tee > 0 else 0.0
            top = top_voltage(ch.v_min, ch.v_max, ch.bits)
            if not (ch.v_min <= v - dc <= top):
                fq_ = lambda x: format_quantity(x, VOLTAGE)   # noqa: E731
                tee = (f" (the level minus the DC level {fq_(dc)} behind the bias tee)"
                       if dc else "")
                r.error(r.nodes[f"points.{pt.name}.{ch_name}"],
                        f"points.{pt.name}.{ch_name}: the generator would play {fq_(v - dc)}"
                        f"{tee}, outside the range of channel '{ch_name}' ({fq_(ch.v_min)} to "
                        f"{fq_(top)})", "give a level inside the range, or widen the channel's "
                        "range")

    if readout is not None:
        ro, refs = readout
        _need_channel(r, channels, refs["marker"], "readout.marker", "marker")
        if refs["trigger_marker"] is not None:
            _need_channel(r, channels, refs["trigger_marker"], "readout.trigger_marker", "marker")

    # the device as far as it could be read (values not read are NaN and
    # break no rule), checked against the physical rules written once
    device = Device(name=name.value if name else "", path=r.file,
                    field=fld.value if fld else math.nan,
                    temperature=temp.value if temp else math.nan,
                    dots=dots, couplings=tuple(couplings), channels=channels,
                    rotation=rotation[0] if rotation else RotationDefaults(),
                    readout=readout[0] if readout else Readout(),
                    notes=notes.value if notes else "", field_tilt=tilt_v,
                    acquisition_time=acq.value if acq else 0.0, points=points,
                    zeeman_correlation=correlation)
    for f in validate(device):
        node = _locate(r, root, f.key, f.near)
        message = f.message
        if f.key not in r.nodes and f.key.startswith("rotation."):
            message += f" ({f.key} is not in the file: its default applies)"
        (r.error if f.severity == ERROR else r.warn)(node, message, f.hint)
    if r.problems:
        raise _Skip
    return dataclasses.replace(device, warnings=tuple(r.warnings.problems))


def _locate(r: _Reader, root: Node, key: str, near: tuple[str, ...]) -> Node:
    """The node of a finding's key in the file: the key itself, else the
    first of ``near`` found, else the closest enclosing key, else the top."""
    for k in (key,) + near:
        if k in r.nodes:
            return r.nodes[k]
    k = key
    while True:
        parent = re.sub(r"(\.[^.\[]*|\[\d+\])$", "", k)
        if parent == k or not parent:
            return root
        k = parent
        if k in r.nodes:
            return r.nodes[k]


def _check_coupling(r: _Reader, c: dict, channels: dict) -> Coupling:
    a, b = c["pair"].value
    path = f"couplings[{c['index']}]"
    model: ExchangeModel = c["model"].value
    _need_channel(r, channels, c["barrier"], f"{path}.barrier", "gate")
    idle_v = c["idle"].value if c["idle"] else 0.0
    pulse_v = c["pulse"].value if c["pulse"] else None
    r.nodes[path] = c["node"]
    for nm, _, kn in c["detune"]:
        r.nodes[f"{path}.detune.{nm}"] = kn
    return Coupling(dots=(a, b), barrier=c["barrier"].value, exchange=model,
                    idle_voltage=idle_v, pulse_voltage=pulse_v,
                    charge_noise=c["noise"].value if c["noise"] else 0.0,
                    detune=tuple((nm, off) for nm, off, _ in c["detune"]), span=c["span"],
                    readout=c["readout"])


# ------------------------------------------------------------------ entry points

def _yaml_problem(exc: yaml.YAMLError, text: str, file: str) -> Problem:
    lines = text.splitlines()
    mark = getattr(exc, "problem_mark", None)
    if mark is not None:
        line, col = mark.line + 1, mark.column + 1
    elif getattr(exc, "position", None) is not None:  # ReaderError: bad character
        before = text[:exc.position]
        line = before.count("\n") + 1
        col = exc.position - (before.rfind("\n") + 1) + 1
    else:
        line, col = 1, 1
    problem = getattr(exc, "problem", None) or getattr(exc, "reason", None) or str(exc)
    msg = f"YAML syntax error: {problem}"
    ctx_mark = getattr(exc, "context_mark", None)
    context = getattr(exc, "context", None)
    if context:
        msg += f" ({context}" + (f" at line {ctx_mark.line + 1}" if ctx_mark else "") + ")"
    hint = "check indentation (spaces, not tabs), colons and brackets"
    src = lines[line - 1] if 0 < line <= len(lines) else ""
    return Problem(msg, Span(file, line, col, line, col + 1), hint, src)


def _refuse_surrogates(r: _Reader, root: Node) -> None:
    """A YAML escape such as "\\udc80" makes a lone surrogate: no character,
    it cannot be printed or written as UTF-8.  Refused at its position."""
    todo, bad = [root], False
    while todo:             # no recursion: the tree may be deep
        node = todo.pop()
        if isinstance(node, ScalarNode):
            if isinstance(node.value, str) and _SURROGATE.search(node.value):
                r.error(node, "this string holds a lone surrogate escape (\\ud800 to \\udfff): "
                        "not a character, it cannot be printed or saved",
                        "write the character itself, or a \\U escape of a real character")
                bad = True
        elif isinstance(node, SequenceNode):
            todo.extend(reversed(node.value))
        elif isinstance(node, MappingNode):
            for k, v in reversed(node.value):
                todo.extend((v, k))
    if bad:
        raise _Skip


_SURROGATE = re.compile("[\ud800-\udfff]")


def load_device_text(text: str, path: str = "<string>") -> Device:
    """Read a device description from YAML text.

    Parameters
    ----------
    text : str
        The YAML text.
    path : str
        File name used in error positions.

    Returns
    -------
    Device
        All quantities in SI units (Hz, s, V, T, K); exchange as J/h in Hz.

    Raises
    ------
    DeviceError
        With one positioned :class:`~compiler.errors.Problem` per mistake found.
    """
    if not isinstance(text, str):
        raise DeviceError(f"device text must be a string, got {type(text).__name__}",
                          Span(path, 0, 0, 0, 0))
    if text.startswith("\ufeff"):
        text = text[1:]
    if len(text) > MAX_DEVICE_CHARS:
        raise DeviceError(f"the device file holds {len(text):,} characters; a device "
                          f"description is at most {MAX_DEVICE_CHARS:,}", Span(path, 1, 1, 1, 2),
                          "check the path: this does not look like a device file")
    try:
        root = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.YAMLError as exc:
        raise DeviceError(_yaml_problem(exc, text, path)) from None
    except RecursionError:
        raise DeviceError("the device file is nested too deeply to read",
                          Span(path, 1, 1, 1, 2)) from None
    if root is None:
        raise DeviceError("the device file is empty", Span(path, 1, 1, 1, 1),
                          "start with 'name: ...', 'field: ...', 'temperature: ...', "
                          "'dots:', 'channels:'")
    r = _Reader(text, path)
    try:
        _refuse_surrogates(r, root)
        return _build(r, root)
    except _Skip:
        pass
    problems = sorted(r.problems.problems,
                      key=lambda q: (q.span.line, q.span.col) if q.span else (0, 0))
    raise DeviceError(problems)


def load_device(path: str | Path, *, statement: Span | None = None) -> Device:
    """Read a device description file.

    Parameters
    ----------
    path : str or pathlib.Path
        YAML file, UTF-8; a regular file (not a folder, pipe, device or a
        system file under /proc, /sys, /dev) of at most 4 bytes per character
        of ``MAX_DEVICE_CHARS``, read no further than that.
    statement : Span, optional
        The ``device "..."`` statement that named the file: errors reading it
        point there.

    Returns
    -------
    Device

    Raises
    ------
    DeviceError
        The file cannot be read (missing, not a regular file, too large, not
        UTF-8) or its content is wrong; every problem is positioned.
    """
    from ..errors import read_source_line
    from ..source import Oversize, Unreadable, read_capped
    where = statement or Span(str(path), 0, 0, 0, 0)
    shown = read_source_line(where.file, where.line) if statement else ""
    try:
        data = read_capped(path, 4 * MAX_DEVICE_CHARS)   # UTF-8: <= 4 bytes a character
    except Unreadable as exc:
        hint = exc.hint
        if exc.reason == "no such file":
            hint = "check the path; bundled devices live in sequences/devices/"
        raise DeviceError(f"cannot read device file '{path}': {exc.reason}", where, hint,
                          shown) from None
    except Oversize as exc:
        raise DeviceError(f"cannot read device file '{path}': it holds more than "
                          f"{exc.limit:,} bytes; a device description is at most "
                          f"{MAX_DEVICE_CHARS:,} characters", where,
                          "check the path: this does not look like a device file", shown) from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        raise DeviceError(f"device file '{path}' is not UTF-8 text (byte 0x{data[exc.start]:02x} "
                          f"at offset {exc.start})", Span(str(path), line, 1, line, 2),
                          "save the file as UTF-8") from None
    return load_device_text(text, str(path))
