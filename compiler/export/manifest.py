"""The manifest of a bundle: checking the waveforms handed to the writer,
naming the files, and building ``manifest.json`` (pure functions, no IO).

The JSON text is deterministic: keys sorted, two-space indent, a trailing
newline, no timestamps, numpy scalars turned into Python numbers, floats
written with ``repr`` (shortest text that reads back to the same float).
"""

from __future__ import annotations

import json
import math
import os
import re
import secrets
from dataclasses import dataclass
from typing import Any, Iterator, Mapping, Sequence

import numpy as np

from ..synth.types import Output, Waveforms
from .errors import BundleError, at
from .segments import SEGMENTS_FOLDER, TABLE_FOLDER, plan_segments

FORMAT_NAME = "dotseq-bundle"
FORMAT_VERSION = 3
MANIFEST_NAME = "manifest.json"
ARRAYS_FOLDER = "arrays"
CSV_NAME = "samples.csv"
CODES_SUFFIX = ".codes"

UNITS = {
    "time": "s",
    "voltage": "V",
    "frequency": "Hz",
    "sample_rate": "Hz",
    "phase": "rad",
    "samples": "count",
    "marker": "0 or 1",
    "csv_time": "ns",
    "csv_voltage": "V",
    "size": "bytes",
}
HOLD = "zero-order: sample i is held on [i/sample_rate_Hz, (i+1)/sample_rate_Hz)"

_NAME_RE = re.compile(r"[A-Za-z0-9_][A-Za-z0-9_.+\-]{0,99}")


def run_folder(run_index: int) -> str:
    """Folder of one run inside the bundle: ``run_0000``, ``run_0001``, ..."""
    return f"run_{run_index:04d}"


def output_file(name: str) -> str:
    """File name of an output's volts (``mw.I`` -> ``mw.I.npy``)."""
    return f"{name}.npy"


def codes_file(name: str) -> str:
    """File name of an output's DAC codes (``mw.I`` -> ``mw.I.codes.npy``)."""
    return f"{name}{CODES_SUFFIX}.npy"


# ---------------------------------------------------------------- checking

@dataclass(frozen=True)
class Plan:
    """The checked runs, ready to be written."""

    runs: tuple[Waveforms, ...]
    sample_rate: float                 # Hz, shared by every run
    order: tuple[str, ...]             # output names in device channel order (union, first seen)
    stacked: bool
    n_max: int                         # longest run, samples (the stacked width)
    pools: dict | None = None          # segment layout: output name -> segments.Pool
    raw: bool = False                  # also raw little-endian code files
    hdf5: bool = False                 # also one HDF5 file

    @property
    def segments(self) -> bool:
        return self.pools is not None


def _where(w: Waveforms, name: str | None = None) -> str:
    return f"<waveforms of run {w.run_index}" + (f", output '{name}'>" if name else ">")


def _check_output(w: Waveforms, key: str, o: Any, problems: list) -> None:
    where = _where(w, key)
    if not isinstance(o, Output):
        problems.append(at(where, f"output '{key}' is a {type(o).__name__}, not an Output",
                           "build outputs with compiler.synth.types.Output"))
        return
    if o.name != key:
        problems.append(at(where, f"output stored under '{key}' is named '{o.name}'",
                           "key the outputs dict by Output.name"))
    if not isinstance(key, str) or not _NAME_RE.fullmatch(key) or key.endswith(CODES_SUFFIX):
        problems.append(at(where, f"output name {key!r} cannot be used as a file name",
                           "use letters, digits and _ . + - (not starting with '.', "
                           f"not ending in '{CODES_SUFFIX}', at most 100 characters)"))
    derived = (o.stored_volts is None and o.codes is not None and "volts" not in o.__dict__
               and o.marks is None)
    if derived:
        # volts = code·LSB + v_min: finite with finite lsb and v_min (checked
        # below) and as long as the codes (checked below); not built here
        v = np.asarray(o.codes)
    elif o.stored_volts is None and o.codes is None and o.marks is not None:
        v = np.asarray(o.marks)        # a marker kept as 0/1 bytes
    else:
        v = np.asarray(o.volts)
    if v.ndim != 1 or v.shape[0] != w.n_samples:
        problems.append(at(where, f"volts has shape {v.shape}, expected ({w.n_samples},)",
                           "every output of a run holds n_samples samples"))
    elif v.dtype.kind not in "fiub":
        problems.append(at(where, f"volts has dtype {v.dtype}, expected float64"))
    else:
        bad = np.flatnonzero(~np.isfinite(v.astype(np.float64, copy=False)))
        if bad.size:
            problems.append(at(where, f"{bad.size} sample(s) are not finite, first at sample "
                                      f"{int(bad[0])} ({float(v[bad[0]])!r})",
                               "the synthesis produced NaN or infinity; nothing is exported"))
        elif o.kind == "marker" and not np.all((v == 0) | (v == 1)):
            i = int(np.flatnonzero((v != 0) & (v != 1))[0])
            problems.append(at(where, f"marker holds {float(v[i])!r} at sample {i}, "
                                      "expected only 0 or 1"))
    if o.codes is not None:
        c = np.asarray(o.codes)
        if c.ndim != 1 or c.shape[0] != w.n_samples:
            problems.append(at(where, f"codes have shape {c.shape}, expected ({w.n_samples},)"))
        elif c.size and c.dtype.kind not in "iu":
            problems.append(at(where, f"codes have dtype {c.dtype}, expected int32"))
        elif c.size and (int(c.min()) < -2**31 or int(c.max()) > 2**31 - 1):
            problems.append(at(where, "codes do not fit in int32"))
    for label, x in (("dc_level", o.dc_level), ("lsb", o.lsb), ("v_min", o.v_min)):
        if not isinstance(x, (int, float, np.integer, np.floating)) or not math.isfinite(x):
            problems.append(at(where, f"{label} is {x!r}, expected a finite number of volts"))


def check_runs(runs: Sequence[Waveforms], *, stacked: bool, segments: bool = False,
               raw: bool = False, hdf5: bool = False) -> Plan:
    """Check the runs handed to the writer; every problem at once.

    Raises
    ------
    BundleError
        No runs, different sample rates, a malformed output (wrong length,
        non-finite samples, a name that cannot be a file name), repeated run
        indices, (stacked) runs whose outputs differ, or both stacked and
        segments asked for.
    """
    if stacked and segments:
        raise BundleError(at("<options>", "a bundle is either stacked or stored as segments, "
                                          "not both", "choose one layout"))
    if isinstance(runs, Waveforms):
        runs = [runs]
    runs = tuple(runs)
    if not runs:
        raise BundleError(at("<waveforms>", "no runs to export",
                             "compile at least one run before writing a bundle"))
    problems: list = []
    for i, w in enumerate(runs):
        if not isinstance(w, Waveforms):
            problems.append(at("<waveforms>", f"item {i} is a {type(w).__name__}, not Waveforms"))
    if problems:
        raise BundleError(problems)

    rates = sorted({float(w.sample_rate) for w in runs})
    if len(rates) > 1:
        problems.append(at("<waveforms>", f"runs use different sample rates: {rates} Hz",
                           "all runs of a bundle share one sample rate"))
    elif not (math.isfinite(rates[0]) and rates[0] > 0):
        problems.append(at("<waveforms>", f"sample rate {rates[0]!r} Hz is not a positive number"))

    seen_index: dict[int, int] = {}
    order: list[str] = []
    for pos, w in enumerate(runs):
        if not isinstance(w.run_index, (int, np.integer)) or w.run_index < 0:
            problems.append(at(_where(w), f"run index {w.run_index!r} is not a whole number >= 0"))
        elif int(w.run_index) in seen_index:
            problems.append(at(_where(w), f"run index {w.run_index} appears twice "
                                          f"(items {seen_index[int(w.run_index)]} and {pos})",
                               "each run of a bundle needs its own index"))
        else:
            seen_index[int(w.run_index)] = pos
        if not isinstance(w.n_samples, (int, np.integer)) or w.n_samples < 0:
            problems.append(at(_where(w), f"n_samples {w.n_samples!r} is not a whole number >= 0"))
            continue
        if not isinstance(w.outputs, Mapping) or not w.outputs:
            problems.append(at(_where(w), "run has no outputs"))
            continue
        folded: dict[str, str] = {}
        for key, o in w.outputs.items():
            _check_output(w, key, o, problems)
            k = str(key).lower()
            if k in folded:
                problems.append(at(_where(w, key), f"outputs '{folded[k]}' and '{key}' differ "
                                                   "only in letter case",
                                   "their files would collide on case-insensitive disks"))
            folded[k] = str(key)
            if key not in order:
                order.append(key)
    if stacked and not problems:
        first = runs[0]
        sig0 = [(k, o.channel, o.kind, o.codes is None) for k, o in first.outputs.items()]
        for w in runs[1:]:
            sig = [(k, o.channel, o.kind, o.codes is None) for k, o in w.outputs.items()]
            if sig != sig0:
                problems.append(at(_where(w), "outputs differ from run "
                                              f"{first.run_index}'s (names, channels, kinds or "
                                              "codes), so the runs cannot be stacked",
                                   "write without stacking (one folder per run)"))
    if problems:
        raise BundleError(problems)
    pools = plan_segments(runs, order) if segments else None
    return Plan(runs, rates[0], tuple(order), stacked, max(int(w.n_samples) for w in runs),
                pools, bool(raw), bool(hdf5))


# ---------------------------------------------------------------- JSON

def plain(x: Any, where: str = "value") -> Any:
    """``x`` as plain JSON data: numpy scalars and arrays to Python numbers
    and lists, tuples to lists, sets to sorted lists, dict keys to str.

    Non-finite floats become the strings ``"nan"``, ``"inf"``, ``"-inf"``
    (JSON has no such numbers); paths become their text.

    Raises
    ------
    BundleError
        For a value of any other type (its text could change between runs).
    """
    if x is None or isinstance(x, (bool, str)):
        return x
    if isinstance(x, os.PathLike):
        return os.fspath(x)
    if isinstance(x, np.bool_):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        f = float(x)
        if math.isfinite(f):
            return f
        return "nan" if math.isnan(f) else ("inf" if f > 0 else "-inf")
    if isinstance(x, np.ndarray):
        return plain(x.tolist(), where)
    if isinstance(x, (dict, Mapping)):   # dict first: the typing ABC check is slow
        out = {}
        for k, v in x.items():
            if not isinstance(k, (str, int, float, bool, np.integer, np.floating)):
                raise BundleError(at("<manifest>", f"{where}: key {k!r} is not a string"))
            out[str(plain(k))] = plain(v, f"{where}.{k}")
        return out
    if isinstance(x, (list, tuple)):
        return [plain(v, f"{where}[{i}]") for i, v in enumerate(x)]
    if isinstance(x, (set, frozenset)):
        return sorted((plain(v, where) for v in x), key=lambda v: json.dumps(v, sort_keys=True))
    raise BundleError(at("<manifest>", f"{where} is a {type(x).__name__}, which the manifest "
                                       "cannot hold",
                         "use numbers, strings, booleans, lists or dicts"))


def dumps(manifest: dict) -> str:
    """The manifest as JSON text: sorted keys, indent 2, trailing newline."""
    return _ENCODER.encode(manifest) + "\n"


_ENCODER = json.JSONEncoder(sort_keys=True, indent=2, ensure_ascii=False, allow_nan=False)
_CHUNK_CHARS = 1 << 20     # text handed out at a time by chunks()


def chunks(plan: "Plan", source: Mapping, checksums: Mapping[str, str],
           sizes: Mapping[str, int], csv: bool) -> Iterator[str]:
    """The text of ``dumps(build(...))`` in pieces, without ever holding the
    timeline entries of all steps (a run of a million steps would otherwise
    take gigabytes as dicts and text): every run's ``steps`` list is encoded
    one entry at a time.  ``"".join(chunks(...)) == dumps(build(...))``.
    """
    mark = f"\x00steps-{secrets.token_hex(8)}-"
    skeleton = dumps(build(plan, source, checksums, sizes, csv, steps_mark=mark))
    quoted = json.dumps(mark)[:-1]            # '"\u0000steps-...-' (opening quote kept)
    pos = 0
    for row, w in enumerate(plan.runs):
        at_ = skeleton.index(f'{quoted}{row}"', pos)
        indent = at_ - skeleton.rindex("\n", 0, at_) - 1 - len('"steps": ')
        yield skeleton[pos:at_]
        yield from _steps_text(w, plan.sample_rate, indent)
        pos = at_ + len(f'{quoted}{row}"')
    yield skeleton[pos:]


def _steps_text(w: Waveforms, fs: float, indent: int) -> Iterator[str]:
    """The JSON list of one run's timeline entries, as nested at ``indent``
    spaces (the same text the encoder gives for the whole manifest)."""
    if not w.steps:
        yield "[]"
        return
    item = "\n" + " " * (indent + 2)
    out = ["["]
    size = 0
    for i, s in enumerate(w.steps):
        text = _step_json(s, fs, indent + 2)
        out.append((item if i == 0 else "," + item) + text)
        size += len(text)
        if size > _CHUNK_CHARS:
            yield "".join(out)
            out, size = [], 0
    out.append("\n" + " " * indent + "]")
    yield "".join(out)


def _step_json(s, fs: float, indent: int) -> str:
    """``format_json(step_entry(s, fs), indent)`` written out key by key
    (sorted), the hot path of a long manifest."""
    p = ",\n" + " " * (indent + 2)
    inner = indent + 2
    start, stop = int(s.start), int(s.stop)
    return ("{\n" + " " * inner
            + '"channels": ' + format_json([str(c) for c in s.channels], inner)
            + p + '"index": ' + int.__repr__(int(s.index))
            + p + '"kind": ' + _ESCAPE(str(s.kind))
            + p + '"params": ' + format_json(plain(dict(s.params), f"step {s.index} params"),
                                             inner)
            + p + '"qubits": ' + format_json([str(q) for q in s.qubits], inner)
            + p + '"source": ' + _ESCAPE(str(s.source))
            + p + '"start_s": ' + format_json(start / fs)
            + p + '"start_sample": ' + int.__repr__(start)
            + p + '"stop_s": ' + format_json(stop / fs)
            + p + '"stop_sample": ' + int.__repr__(stop)
            + p + '"text": ' + _ESCAPE(str(s.text))
            + "\n" + " " * indent + "}")


_ESCAPE = json.encoder.encode_basestring        # the encoder's own, for ensure_ascii=False
_INF = float("inf")


def format_json(v: Any, indent: int = 0) -> str:
    """Plain JSON data as ``json.dumps(v, sort_keys=True, indent=2,
    ensure_ascii=False, allow_nan=False)`` writes it when nested ``indent``
    spaces deep, character for character (tested), but without the
    encoder's generator per value: the manifest of a million steps is
    formatted several times faster."""
    if isinstance(v, str):
        return _ESCAPE(v)
    if v is None:
        return "null"
    if v is True:
        return "true"
    if v is False:
        return "false"
    if isinstance(v, int):
        return int.__repr__(v)
    if isinstance(v, float):
        if v != v or v == _INF or v == -_INF:
            raise ValueError(f"Out of range float values are not JSON compliant: {v!r}")
        return float.__repr__(v)
    inner = indent + 2
    pad = "\n" + " " * inner
    if isinstance(v, dict):
        if not v:
            return "{}"
        parts = []
        for k, x in sorted(v.items()):
            if not isinstance(k, str):
                return _ENCODER.encode(v).replace("\n", "\n" + " " * indent)
            parts.append(pad + _ESCAPE(k) + ": " + format_json(x, inner))
        return "{" + ",".join(parts) + "\n" + " " * indent + "}"
    if isinstance(v, (list, tuple)):
        if not v:
            return "[]"
        return "[" + ",".join(pad + format_json(x, inner) for x in v) + "\n" + " " * indent + "]"
    return _ENCODER.encode(v).replace("\n", "\n" + " " * indent)


# ---------------------------------------------------------------- building

def sweep_axes(runs: Sequence[Waveforms]) -> list[dict]:
    """Each swept name (in the order first seen) and its values (SI, in the
    order first seen)."""
    axes: dict[str, list[float]] = {}
    for w in runs:
        for name, value in w.sweep:
            vals = axes.setdefault(str(name), [])
            v = plain(value, f"sweep {name}")
            if v not in vals:
                vals.append(v)
    return [{"name": n, "values": v} for n, v in axes.items()]


def step_entry(s, sample_rate: float) -> dict:
    """One timeline entry of the manifest, from a ``StepRecord`` (the
    streamed manifest writes the same with :func:`_step_json`)."""
    return {
        "index": int(s.index),
        "kind": str(s.kind),
        "qubits": [str(q) for q in s.qubits],
        "start_sample": int(s.start),
        "stop_sample": int(s.stop),
        "start_s": int(s.start) / sample_rate,
        "stop_s": int(s.stop) / sample_rate,
        "channels": [str(c) for c in s.channels],
        "source": str(s.source),
        "text": str(s.text),
        "params": plain(dict(s.params), f"step {s.index} params"),
    }


def output_entry(o: Output, *, file: str, codes: str | None, shape: list[int],
                 checksums: Mapping[str, str], row: int | None = None,
                 pad_value: float | None = None, pad_code: int | None = None) -> dict:
    """One output of one run in the manifest."""
    e = {
        "file": file,
        "channel": str(o.channel),
        "kind": str(o.kind),
        "unit": UNITS["marker"] if o.kind == "marker" else "V",
        "dtype": "float64",
        "shape": list(shape),
        "lsb_V": float(o.lsb),
        "dc_level_V": float(o.dc_level),
        "sha256": checksums[file],
        "codes_file": codes,
        "codes_dtype": "int32" if codes else None,
        "codes_sha256": checksums[codes] if codes else None,
        "shift_samples": int(o.shift),
        "delay_s": float(o.delay),
    }
    if row is not None:
        e["row"] = row
        e["pad_value"] = plain(pad_value)
        e["pad_code"] = None if pad_code is None else int(pad_code)
    return e


def pad_values(o: Output) -> tuple[float, int | None]:
    """The idle value an output is padded with: its last sample (0 when the
    run is empty), and the matching DAC code (None without codes)."""
    v = np.asarray(o.volts)
    value = float(v[-1]) if v.size else 0.0
    code = None
    if o.codes is not None:
        c = np.asarray(o.codes)
        code = int(c[-1]) if c.size else 0
    return value, code


def build(plan: Plan, source: Mapping, checksums: Mapping[str, str],
          sizes: Mapping[str, int], csv: bool, *, steps_mark: str | None = None) -> dict:
    """The manifest of a bundle (plain data, ready for :func:`dumps`).

    Parameters
    ----------
    plan : Plan
        The checked runs.
    source : mapping
        What the caller says the bundle was made from; copied as given.
    checksums, sizes : mapping
        SHA-256 (hex) and size (bytes) of every data file, by path relative
        to the bundle folder with ``/`` separators.
    csv : bool
        Whether each run has a ``samples.csv``.
    steps_mark : str, optional
        Put ``steps_mark + str(position)`` in place of each run's list of
        timeline entries (used by :func:`chunks`, which streams them).
    """
    fs = plan.sample_rate
    runs_out = []
    for row, w in enumerate(plan.runs):
        folder = run_folder(int(w.run_index))
        n = int(w.n_samples)
        outputs = {}
        for name, o in w.outputs.items():
            if plan.segments:
                f, c, t = segment_files(name, o.codes is not None)
                outputs[name] = output_entry(o, file=f, codes=c, shape=[n], checksums=checksums)
                outputs[name]["table_file"] = t
                outputs[name]["table_sha256"] = checksums[t]
                outputs[name]["table_rows"] = list(plan.pools[name].ranges[row])
            elif plan.stacked:
                f = f"{ARRAYS_FOLDER}/{output_file(name)}"
                c = f"{ARRAYS_FOLDER}/{codes_file(name)}" if o.codes is not None else None
                pv, pc = pad_values(o)
                outputs[name] = output_entry(o, file=f, codes=c,
                                             shape=[len(plan.runs), plan.n_max],
                                             checksums=checksums, row=row,
                                             pad_value=pv, pad_code=pc)
            else:
                f = f"{folder}/{output_file(name)}"
                c = f"{folder}/{codes_file(name)}" if o.codes is not None else None
                outputs[name] = output_entry(o, file=f, codes=c, shape=[n], checksums=checksums)
            if plan.raw:
                marker = o.codes is None
                rel = (f"raw/{folder}/{name}" + (".u8" if marker else ".i32"))
                outputs[name].update({
                    "raw_file": rel, "raw_sha256": checksums[rel],
                    "raw_dtype": "uint8" if marker else "int32",
                    "raw_scale_V": 1.0 if marker else float(o.lsb),
                    "raw_offset_V": 0.0 if marker else float(o.v_min)})
        csv_path = f"{folder}/{CSV_NAME}"
        runs_out.append({
            "index": int(w.run_index),
            "position": row,
            "folder": folder if (csv or not (plan.stacked or plan.segments)) else None,
            "sweep": {str(k): plain(v, f"sweep {k}") for k, v in w.sweep},
            "n_samples": n,
            "duration_s": n / fs,
            "padding_samples": (plan.n_max - n) if plan.stacked else 0,
            "output_order": list(w.outputs),
            "outputs": outputs,
            "csv": ({"file": csv_path, "sha256": checksums[csv_path]} if csv else None),
            "steps": ([step_entry(s, fs) for s in w.steps] if steps_mark is None
                      else f"{steps_mark}{row}"),
            "frames_rad": plain(dict(w.frames), "frames"),
            "larmor_Hz": plain(dict(w.larmor), "larmor"),
            "warnings": [str(x) for x in w.warnings],
        })
    delays: dict[str, float] = {}
    for w in plan.runs:
        for o in w.outputs.values():
            delays.setdefault(str(o.channel), float(o.delay))
    out = {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "layout": "stacked" if plan.stacked else ("segments" if plan.segments else "per-run"),
        "delays_s": delays,
        "source": plain(dict(source), "source"),
        "sample_rate_Hz": fs,
        "hold": HOLD,
        "units": dict(UNITS),
        "n_runs": len(plan.runs),
        "n_samples_max": plan.n_max,
        "output_order": list(plan.order),
        "sweep_axes": sweep_axes(plan.runs),
        "checksum_algorithm": "sha256",
        "files": {p: {"sha256": checksums[p], "bytes": int(sizes[p])} for p in checksums},
        "runs": runs_out,
    }
    out["raw"] = ({"byte_order": "little", "header_bytes": 0,
                   "volts": "raw_offset_V + code * raw_scale_V"} if plan.raw else None)
    out["hdf5"] = {"file": "bundle.h5"} if plan.hdf5 else None
    if plan.segments:
        segs = {}
        for name, pool in plan.pools.items():
            f, c, t = segment_files(name, pool.has_codes)
            segs[name] = {"file": f, "codes_file": c, "table_file": t,
                          "samples": pool.samples, "rows": pool.rows}
        out["segments"] = segs
    return out


def segment_files(name: str, has_codes: bool) -> tuple[str, str | None, str]:
    """The pool of volts, the pool of codes (None for markers) and the table
    of one output in the segment layout (paths relative to the bundle)."""
    return (f"{SEGMENTS_FOLDER}/{output_file(name)}",
            f"{SEGMENTS_FOLDER}/{codes_file(name)}" if has_codes else None,
            f"{TABLE_FOLDER}/{output_file(name)}")
