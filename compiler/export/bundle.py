"""The export bundle: a folder with ``manifest.json`` and the sampled arrays
of every run, written atomically and read back with every checksum verified.

The format is described in ``docs/bundle.md``.
"""

from __future__ import annotations

import json
import os
import posixpath
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from ..synth.types import Waveforms
from . import atomic, formats
from .errors import BundleError, at, fail
from .files import (CODES_DTYPE, VOLTS_DTYPE, Written, _HashingFile, checked_cast,
                    csv_bytes_bound, npy_bytes, sha256_file, write_csv, write_npy,
                    write_npy_pieces, write_npy_rows)
from .manifest import (ARRAYS_FOLDER, CSV_NAME, FORMAT_NAME, FORMAT_VERSION, MANIFEST_NAME, Plan,
                       build, check_runs, chunks, codes_file, output_file, pad_values,
                       plain, run_folder, segment_files)
from .segments import SEGMENTS_FOLDER, TABLE_DTYPE, TABLE_FOLDER, piece_volts, rebuild


# ---------------------------------------------------------------- writing

VOLTS_CHUNK = 1 << 19      # samples of volts derived and written at a time

def write_bundle(runs: Sequence[Waveforms], out_dir: str | Path, *, source: Mapping,
                 csv: bool = False, stacked: bool = False, overwrite: bool = True,
                 segments: bool = False, raw: bool = False, hdf5: bool = False) -> Path:
    """Write the waveforms of every run as a bundle folder, atomically.

    Parameters
    ----------
    runs : sequence of Waveforms
        The runs, all at one sample rate (Hz).  Volts in V, markers 0/1.
    out_dir : str or Path
        The bundle folder.  Its parent must exist.  It may be absent, an
        empty folder, or a dotseq bundle (replaced when ``overwrite``).
    source : mapping
        What the bundle was made from (sequence path, device path, device
        name, dotseq version, SHA-256 of the input texts); copied into the
        manifest as given (JSON-able values only).
    csv : bool, optional
        Also write ``run_NNNN/samples.csv`` per run (time in ns, volts in V).
    stacked : bool, optional
        One ``arrays/NAME.npy`` of shape (runs, longest run) per output
        instead of one folder per run; shorter runs are padded at the end
        with the output's last sample, recorded in the manifest.
    overwrite : bool, optional
        Replace an existing bundle at ``out_dir`` (default True).
    segments : bool, optional
        Store every distinct stretch of each output once (``segments/``)
        and each run as a table of references to them, instead of one full
        array per run and output; :func:`read_bundle` rebuilds the full
        arrays bit for bit.  Not together with ``stacked``.
    raw : bool, optional
        Also write ``raw/run_NNNN/NAME.i32`` (codes, little-endian int32, no
        header; markers ``NAME.u8``), the scaling in the manifest.
    hdf5 : bool, optional
        Also write ``bundle.h5`` (needs h5py): a dataset per run and output,
        attributes for units, sample rate, codes scaling and checksums.

    Returns
    -------
    Path
        The absolute path of the bundle folder.

    Raises
    ------
    BundleError
        Malformed waveforms, an output folder that is not a dotseq bundle
        (never deleted), a missing parent folder, or an IO error (disk full,
        no permission).  Nothing is left at ``out_dir`` but the previous
        content, and the temporary folder is removed, also on
        KeyboardInterrupt (which is re-raised).

    Notes
    -----
    Everything is written and fsynced into ``.NAME.partial-PID-TOKEN``
    beside the target, then renamed into place; see ``docs/bundle.md`` for
    what a crash at each moment leaves behind.  Folders left by earlier
    exports that were killed are tidied first (:func:`recover`).
    """
    if not isinstance(source, Mapping):
        raise BundleError(at("<source>", f"source is a {type(source).__name__}, expected a dict",
                             "pass source={'sequence': ..., 'device': ..., ...}"))
    plan = check_runs(runs, stacked=stacked, segments=segments, raw=raw, hdf5=hdf5)
    if hdf5:
        formats._h5py()       # refuse before anything is written when h5py is missing
    _check_manifest_values(plan, source)  # refuse unusable values before touching the disk
    target = atomic.resolve_target(out_dir)
    try:
        atomic.recover(target)
    except OSError:
        pass  # tidying is best effort; the checks below still protect the target
    atomic.target_state(target, overwrite)

    def fill(tmp: Path) -> None:
        written = _write_data(plan, tmp, csv)
        checksums = {rel: w.sha256 for rel, w in written.items()}
        sizes = {rel: w.size for rel, w in written.items()}
        f = _HashingFile(tmp / MANIFEST_NAME)
        try:
            for piece in chunks(plan, source, checksums, sizes, csv):
                f.write(piece.encode("utf-8"))
        except BaseException:
            f.abort()
            raise
        f.close()

    return atomic.replace_folder(target, fill, lambda: atomic.target_state(target, overwrite),
                                 fail, "bundle")


def _write_data(plan: Plan, tmp: Path, csv: bool) -> dict[str, Written]:
    """Write every data file into ``tmp``; the files by relative path."""
    written: dict[str, Written] = {}

    def put(rel: str, w: Written) -> None:
        written[rel] = w

    if plan.segments:
        _write_segments(plan, tmp, put)
    if plan.raw:
        formats.write_raw(plan, tmp, put)
    if plan.hdf5:
        formats.write_hdf5(plan, tmp, put)
    if plan.stacked:
        (tmp / ARRAYS_FOLDER).mkdir()
        n_rows, width = len(plan.runs), plan.n_max
        for name in plan.order:
            put(f"{ARRAYS_FOLDER}/{output_file(name)}", write_npy_rows(
                tmp / ARRAYS_FOLDER / output_file(name),
                _padded(plan.runs, name, width, codes=False), n_rows, width, VOLTS_DTYPE))
            if plan.runs[0].outputs[name].codes is not None:
                put(f"{ARRAYS_FOLDER}/{codes_file(name)}", write_npy_rows(
                    tmp / ARRAYS_FOLDER / codes_file(name),
                    _padded(plan.runs, name, width, codes=True), n_rows, width, CODES_DTYPE))
    for w in plan.runs:
        folder = run_folder(int(w.run_index))
        if (plan.stacked or plan.segments) and not csv:
            continue
        (tmp / folder).mkdir()
        if not (plan.stacked or plan.segments):
            for name, o in w.outputs.items():
                # volts derived from the codes a chunk at a time (no full array)
                n = int(w.n_samples)
                put(f"{folder}/{output_file(name)}", write_npy_pieces(
                    tmp / folder / output_file(name),
                    (piece_volts(o, i, min(i + VOLTS_CHUNK, n)) for i in range(0, n, VOLTS_CHUNK)),
                    n, VOLTS_DTYPE))
                if o.codes is not None:
                    put(f"{folder}/{codes_file(name)}",
                        write_npy(tmp / folder / codes_file(name), o.codes, CODES_DTYPE))
        if csv:
            names = list(w.outputs)
            put(f"{folder}/{CSV_NAME}", write_csv(
                tmp / folder / CSV_NAME, plan.sample_rate, int(w.n_samples),
                [w.outputs[n].volts for n in names], names,
                [w.outputs[n].kind for n in names]))
    return written


def _write_segments(plan: Plan, tmp: Path, put) -> None:
    """The pools and tables of the segment layout, written piece by piece
    straight from each run's codes (no full-length array is built)."""
    (tmp / SEGMENTS_FOLDER).mkdir()
    (tmp / TABLE_FOLDER).mkdir(parents=True)
    for name, pool in plan.pools.items():
        f_v, f_c, f_t = segment_files(name, pool.has_codes)

        def volts_pieces(pool=pool, name=name):
            for pos, a, b in pool.pieces:
                yield piece_volts(plan.runs[pos].outputs[name], a, b)

        def code_pieces(pool=pool, name=name):
            for pos, a, b in pool.pieces:
                yield plan.runs[pos].outputs[name].codes[a:b]

        put(f_v, write_npy_pieces(tmp / f_v, volts_pieces(), pool.samples, VOLTS_DTYPE))
        if f_c is not None:
            put(f_c, write_npy_pieces(tmp / f_c, code_pieces(), pool.samples, CODES_DTYPE))
        table = (np.concatenate(pool.tables) if pool.tables
                 else np.zeros((0, 3), dtype=TABLE_DTYPE))
        put(f_t, write_npy(tmp / f_t, table, TABLE_DTYPE))


def _padded(runs: Sequence[Waveforms], name: str, width: int, *, codes: bool):
    """Rows of one stacked output: each run's samples, padded at the end to
    ``width`` with the output's idle value (its last sample)."""
    for w in runs:
        o = w.outputs[name]
        a = checked_cast(o.codes if codes else o.volts, CODES_DTYPE if codes else VOLTS_DTYPE)
        value, code = pad_values(o)
        fill = code if codes else value
        if a.shape[0] == width:
            yield a
        else:
            row = np.empty(width, dtype=CODES_DTYPE if codes else VOLTS_DTYPE)
            row[:a.shape[0]] = a
            row[a.shape[0]:] = fill
            yield row


def recover(out_dir: str | Path) -> list[str]:
    """Tidy what killed exports into ``out_dir`` left beside it (for
    processes that no longer run); one sentence per action.

    :func:`write_bundle` calls this itself; the command line may call it to
    show what was done.
    """
    return atomic.recover(atomic.resolve_target(out_dir))


# ---------------------------------------------------------------- sizes

@dataclass(frozen=True)
class RunSize:
    """The size of one run before its waveforms exist (from the schedule)."""

    n_samples: int      # samples per output
    n_analog: int       # outputs with DAC codes (volts float64 + codes int32)
    n_marker: int = 0   # outputs without codes (0/1 as float64)
    n_steps: int = 0    # timeline entries (for the manifest size)


_MANIFEST_BASE = 2048      # bytes: top-level keys, units, source
_MANIFEST_PER_RUN = 1024   # bytes: run keys, frames, Larmor frequencies
_MANIFEST_PER_OUTPUT = 900  # bytes per output per run
_MANIFEST_PER_STEP = 900   # bytes per timeline entry


def estimate_bundle_bytes(runs: Sequence[Waveforms | RunSize], *, csv: bool = False,
                          stacked: bool = False, sample_rate: float = 1e9,
                          source: Mapping | None = None, segments: bool = False,
                          raw: bool = False, hdf5: bool = False) -> int:
    """Bytes the bundle will take on disk (file contents, not file-system
    blocks), so a caller can refuse before writing.

    Parameters
    ----------
    runs : sequence of Waveforms or RunSize
        The runs, or their sizes when the waveforms are not made yet.
    csv, stacked, segments, raw, hdf5 : bool
        As for :func:`write_bundle` (the HDF5 part is an upper bound: its
        data uncompressed).  With ``segments`` and RunSize entries
        the figure is an upper bound: every run's samples as if none were
        shared, plus the largest tables the steps allow.
    sample_rate : float, Hz, optional
        Used only for :class:`RunSize` entries (the width of the CSV time
        column); Waveforms carry their own.
    source : mapping, optional
        The ``source`` that will be passed to :func:`write_bundle`.

    Returns
    -------
    int
        Bytes.  The ``.npy`` part is exact; the CSV part is an upper bound
        (each value at its widest printed form); the manifest is exact up
        to a few digits for Waveforms and a generous guess for RunSize.  For
        Waveforms the total is never below what :func:`write_bundle` writes.
    """
    runs = list(runs)
    if not runs:
        return 0
    if all(isinstance(r, Waveforms) for r in runs):
        return _estimate_waveforms(runs, csv, stacked, source or {}, segments, raw, hdf5)
    total = _MANIFEST_BASE + (1 << 16 if hdf5 else 0)
    n_max = max(_n_samples(r) for r in runs)
    for r in runs:
        if isinstance(r, Waveforms):
            n_an = sum(o.codes is not None for o in r.outputs.values())
            n_mk = len(r.outputs) - n_an
            kinds = [o.kind for o in r.outputs.values()]
            steps, fs = len(r.steps), r.sample_rate
        elif isinstance(r, RunSize):
            n_an, n_mk, steps, fs = r.n_analog, r.n_marker, r.n_steps, sample_rate
            kinds = ["gate"] * n_an + ["marker"] * n_mk
        else:
            raise BundleError(at("<sizes>", f"cannot size a {type(r).__name__}",
                                 "pass Waveforms or RunSize items"))
        n = _n_samples(r)
        total += (_MANIFEST_PER_RUN + _MANIFEST_PER_OUTPUT * (n_an + n_mk)
                  + _MANIFEST_PER_STEP * steps)
        if not stacked:
            total += (n_an + n_mk) * npy_bytes((n,), VOLTS_DTYPE) + n_an * npy_bytes((n,),
                                                                                   CODES_DTYPE)
        if raw:
            total += n_an * 4 * n + n_mk * n
        if hdf5:
            total += int((n_an * 12 + n_mk * 8) * n * 1.02) + 8192 * (2 * n_an + n_mk) + 4096
        if segments:      # table rows: at most one per piece between step boundaries
            total += (n_an + n_mk) * ((2 * steps + 2) * TABLE_DTYPE.itemsize * 3 + 128)
        if csv:
            total += csv_bytes_bound(fs, n, kinds)
    if stacked:
        first = runs[0]
        if isinstance(first, Waveforms):
            n_an = sum(o.codes is not None for o in first.outputs.values())
            n_mk = len(first.outputs) - n_an
        else:
            n_an, n_mk = first.n_analog, first.n_marker
        shape = (len(runs), n_max)
        total += (n_an + n_mk) * npy_bytes(shape, VOLTS_DTYPE) + n_an * npy_bytes(shape,
                                                                                 CODES_DTYPE)
    return int(total)


def _n_samples(r) -> int:
    n = int(r.n_samples)
    if n < 0:
        raise BundleError(at("<sizes>", f"n_samples {n} is negative"))
    return n


def _file_sizes(plan: Plan, csv: bool) -> dict[str, int]:
    """Every data file the bundle will hold, by relative path: its exact
    size (``.npy``) or an upper bound (``samples.csv``)."""
    sizes: dict[str, int] = {}
    if plan.stacked:
        shape = (len(plan.runs), plan.n_max)
        for name in plan.order:
            sizes[f"{ARRAYS_FOLDER}/{output_file(name)}"] = npy_bytes(shape, VOLTS_DTYPE)
            if plan.runs[0].outputs[name].codes is not None:
                sizes[f"{ARRAYS_FOLDER}/{codes_file(name)}"] = npy_bytes(shape, CODES_DTYPE)
    if plan.raw:
        for w in plan.runs:
            for name, o in w.outputs.items():
                marker = o.codes is None
                sizes[formats.raw_file(int(w.run_index), name, marker)] = formats.raw_bytes(
                    int(w.n_samples), marker)
    if plan.hdf5:
        sizes[formats.HDF5_NAME] = formats.hdf5_bytes_bound(plan)
    if plan.segments:
        for name, pool in plan.pools.items():
            f_v, f_c, f_t = segment_files(name, pool.has_codes)
            sizes[f_v] = npy_bytes((pool.samples,), VOLTS_DTYPE)
            if f_c is not None:
                sizes[f_c] = npy_bytes((pool.samples,), CODES_DTYPE)
            sizes[f_t] = npy_bytes((pool.rows, 3), TABLE_DTYPE)
    for w in plan.runs:
        folder = run_folder(int(w.run_index))
        n = int(w.n_samples)
        if not (plan.stacked or plan.segments):
            for name, o in w.outputs.items():
                sizes[f"{folder}/{output_file(name)}"] = npy_bytes((n,), VOLTS_DTYPE)
                if o.codes is not None:
                    sizes[f"{folder}/{codes_file(name)}"] = npy_bytes((n,), CODES_DTYPE)
        if csv:
            names = list(w.outputs)
            kinds = [w.outputs[k].kind for k in names]
            extreme = [_has_extreme(w.outputs[k].volts) for k in names]
            sizes[f"{folder}/{CSV_NAME}"] = csv_bytes_bound(w.sample_rate, n, kinds, extreme,
                                                            names)
    return sizes


def _dry_manifest(plan: Plan, source: Mapping, csv: bool) -> tuple[dict[str, int], int]:
    """The file sizes and the size of the manifest (bytes) with placeholder
    checksums: encodes everything the real manifest will hold (one piece at
    a time), so a value the manifest cannot hold is refused before anything
    is written."""
    sizes = _file_sizes(plan, csv)
    fake = {rel: "0" * 64 for rel in sizes}
    return sizes, sum(len(p.encode("utf-8")) for p in chunks(plan, source, fake, sizes, csv))


def _check_manifest_values(plan: Plan, source: Mapping) -> None:
    """Turn every value the manifest will hold into plain JSON data (which
    raises BundleError for a value it cannot hold), without encoding it."""
    sizes = _file_sizes(plan, False)
    fake = {rel: "0" * 64 for rel in sizes}
    build(plan, source, fake, sizes, False, steps_mark="")
    for w in plan.runs:
        for s in w.steps:
            plain(dict(s.params), f"step {s.index} params")


def _estimate_waveforms(runs: list[Waveforms], csv: bool, stacked: bool,
                        source: Mapping, segments: bool = False, raw: bool = False,
                        hdf5: bool = False) -> int:
    plan = check_runs(runs, stacked=stacked, segments=segments, raw=raw, hdf5=hdf5)
    sizes, manifest_bytes = _dry_manifest(plan, source, csv)
    return int(sum(sizes.values()) + manifest_bytes + 64)


def _has_extreme(v) -> bool:
    """Whether a value may print with a three-digit exponent in ``%.9e``."""
    a = np.abs(np.asarray(v, dtype=np.float64))
    nz = a[a != 0]
    return bool(nz.size and (nz.max() >= 9.99e99 or nz.min() < 1.01e-99))


# ---------------------------------------------------------------- reading

def read_bundle(out_dir: str | Path) -> dict:
    """Load a bundle and verify every checksum.

    Parameters
    ----------
    out_dir : str or Path
        The bundle folder.

    Returns
    -------
    dict
        ``path`` (Path), ``manifest`` (the parsed JSON), ``runs`` (one dict
        per run in manifest order: ``index``, ``volts`` {output: float64
        array, V or 0/1}, ``codes`` {output: int32 array}, each of the run's
        own length, padding removed) and ``stacked`` (``{"volts": {...},
        "codes": {...}}`` of 2-D arrays, padding included, or None).

    Raises
    ------
    BundleError
        The folder or its manifest is missing or malformed, a listed file is
        missing, or its size or SHA-256 differs from the manifest; every bad
        file is named.  When an interrupted export left the previous bundle
        under an ``.old-`` name, the hint says where.
    """
    try:
        target = Path(os.path.abspath(os.fspath(out_dir)))
    except TypeError:
        raise fail("<bundle>", f"{out_dir!r} is not a path") from None
    if not target.is_dir():
        olds = [p for p, what, _ in atomic.leftovers(target)
                if what == atomic.OLD and atomic.is_bundle(p)]
        if olds:
            hint = (f"an export into this folder was interrupted; the last complete bundle is "
                    f"{olds[0]}: rename it to {target.name}, or export again (which restores "
                    "it first)")
        else:
            hint = "check the path, or export the bundle again"
        what = "is not a folder" if os.path.lexists(target) else "does not exist"
        raise fail(target, f"bundle folder {what}", hint)
    mpath = target / MANIFEST_NAME
    if not mpath.is_file():
        raise fail(mpath, f"no {MANIFEST_NAME}: {target} is not a dotseq bundle",
                   "give the folder that dotseq compile -o wrote")
    try:
        m = json.loads(mpath.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise fail(mpath, "the manifest is not UTF-8 text", _DAMAGED) from None
    except json.JSONDecodeError as e:
        raise BundleError(at(mpath, f"the manifest is not valid JSON (line {e.lineno}, "
                                    f"column {e.colno}: {e.msg})", _DAMAGED)) from None
    except OSError as e:
        raise fail(mpath, f"cannot read the manifest: {e.strerror or e}") from None
    if not isinstance(m, dict) or m.get("format") != FORMAT_NAME:
        raise fail(mpath, f"the manifest does not name the format '{FORMAT_NAME}'",
                   "give the folder that dotseq compile -o wrote")
    version = m.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise fail(mpath, f"format_version {version!r} is not a whole number >= 1", _DAMAGED)
    if version > FORMAT_VERSION:
        raise fail(mpath, f"bundle format version {version} is newer than this dotseq reads "
                          f"({FORMAT_VERSION})", "update dotseq to read it")
    try:
        files = _verify_files(target, m)
        return _load(target, m, files)
    except (KeyError, TypeError, ValueError, AttributeError, IndexError) as e:
        raise fail(mpath, f"the manifest is malformed ({type(e).__name__}: {e})",
                   _DAMAGED) from None


_DAMAGED = "the bundle is damaged; export it again"


def _inside(target: Path, rel: Any) -> Path | None:
    """``target/rel`` when ``rel`` is a plain relative path inside it."""
    if not isinstance(rel, str) or not rel or "\\" in rel or "\x00" in rel:
        return None
    norm = posixpath.normpath(rel)
    if norm != rel or norm.startswith(("/", "../")) or norm in (".", ".."):
        return None
    return target.joinpath(*norm.split("/"))


def _verify_files(target: Path, m: dict) -> dict[str, dict]:
    """Check size and SHA-256 of every listed file; all problems at once."""
    files = m["files"]
    if not isinstance(files, dict):
        raise TypeError("'files' is not an object")
    problems = []
    for rel in sorted(files):
        info = files[rel]
        p = _inside(target, rel)
        if p is None:
            problems.append(at(target / MANIFEST_NAME, f"listed file {rel!r} is not a path "
                                                       "inside the bundle", _DAMAGED))
            continue
        if not p.is_file():
            problems.append(at(p, "file listed in the manifest is missing", _DAMAGED))
            continue
        try:
            sha, size = sha256_file(p)
        except OSError as e:
            problems.append(at(p, f"cannot read: {e.strerror or e}"))
            continue
        if size != info["bytes"]:
            problems.append(at(p, f"file has {size} bytes, the manifest says {info['bytes']}",
                               _DAMAGED))
        elif sha != info["sha256"]:
            problems.append(at(p, "SHA-256 checksum differs from the manifest: the file was "
                                  "changed or damaged", _DAMAGED))
    if problems:
        raise BundleError(problems)
    return files


def _load(target: Path, m: dict, files: dict) -> dict:
    cache: dict[str, np.ndarray] = {}

    def load(rel: str, sha: str, dtype: np.dtype, shape: list) -> np.ndarray:
        p = _inside(target, rel)
        if p is None or rel not in files:
            raise BundleError(at(target / MANIFEST_NAME, f"{rel!r} is not listed in 'files'",
                                 _DAMAGED))
        if files[rel]["sha256"] != sha:
            raise BundleError(at(p, "checksum in the run entry differs from the one in 'files'",
                                 _DAMAGED))
        if rel not in cache:
            try:
                a = np.load(p, allow_pickle=False)
            except (OSError, ValueError) as e:
                raise BundleError(at(p, f"not a readable .npy file ({e})", _DAMAGED)) from None
            if a.dtype != dtype or list(a.shape) != list(shape):
                raise BundleError(at(p, f"holds {a.dtype} {list(a.shape)}, the manifest says "
                                        f"{np.dtype(dtype)} {list(shape)}", _DAMAGED))
            cache[rel] = a
        return cache[rel]

    stacked = m["layout"] == "stacked"
    segmented = m["layout"] == "segments"
    if m["layout"] not in ("per-run", "stacked", "segments"):
        raise ValueError(f"unknown layout {m['layout']!r}")
    runs = []
    st_volts: dict[str, np.ndarray] = {}
    st_codes: dict[str, np.ndarray] = {}
    for r in m["runs"]:
        n = int(r["n_samples"])
        volts, codes = {}, {}
        for name in r["output_order"]:
            e = r["outputs"][name]
            if segmented:
                seg = m["segments"][name]
                lo, hi = (int(x) for x in e["table_rows"])
                rows = load(e["table_file"], e["table_sha256"], TABLE_DTYPE,
                            [seg["rows"], 3])[lo:hi]
                volts[name] = rebuild(load(e["file"], e["sha256"], VOLTS_DTYPE,
                                           [seg["samples"]]), rows, n)
                if e["codes_file"]:
                    codes[name] = rebuild(load(e["codes_file"], e["codes_sha256"], CODES_DTYPE,
                                               [seg["samples"]]), rows, n)
                continue
            a = load(e["file"], e["sha256"], VOLTS_DTYPE, e["shape"])
            c = (load(e["codes_file"], e["codes_sha256"], CODES_DTYPE, e["shape"])
                 if e["codes_file"] else None)
            if stacked:
                st_volts[name] = a
                volts[name] = a[int(e["row"]), :n]
                if c is not None:
                    st_codes[name] = c
                    codes[name] = c[int(e["row"]), :n]
            else:
                volts[name] = a
                if c is not None:
                    codes[name] = c
        runs.append({"index": r["index"], "volts": volts, "codes": codes})
    return {"path": target, "manifest": m, "runs": runs,
            "stacked": {"volts": st_volts, "codes": st_codes} if stacked else None}
