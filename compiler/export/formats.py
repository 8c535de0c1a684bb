"""Formats a lab's own scripts read without dotseq, written beside the
``.npy`` arrays of a bundle (docs/bundle.md, "Other formats").

* Raw code files: ``raw/run_NNNN/NAME.i32``, the DAC codes of every analog
  output as little-endian int32 with no header, and ``NAME.u8`` for markers
  (one byte 0 or 1 per sample); the manifest gives the scaling
  (volts = ``raw_offset_V`` + code · ``raw_scale_V``, the same arithmetic
  as the ``.npy`` volts, so bit for bit the same numbers).
* HDF5 (h5py, the optional extra ``hdf5``): one file ``bundle.h5`` with a
  group per run (``run_NNNN``) and per output a dataset of volts (float64)
  and, for analog outputs, one of codes (int32), with attributes for the
  unit, the sample rate, the codes' scaling, the delay shift and the SHA-256
  of the dataset's little-endian bytes.  Written without timestamps, so the
  same waveforms give the same bytes.

Both are written from each run's arrays one run at a time, into the
bundle's temporary folder (so atomically with the rest of the bundle).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np

from .errors import BundleError, at
from .files import CODES_DTYPE, VOLTS_DTYPE, Written, _HashingFile, checked_cast, sha256_file
from .manifest import Plan, run_folder

RAW_FOLDER = "raw"
HDF5_NAME = "bundle.h5"
MARKER_DTYPE = np.dtype("u1")
RAW_CODE_SUFFIX = ".i32"
RAW_MARKER_SUFFIX = ".u8"
H5_CHUNK = 1 << 16            # samples per HDF5 chunk (gzip-compressed)


def raw_file(run_index: int, name: str, marker: bool) -> str:
    """Path of one output's raw code file inside the bundle."""
    return (f"{RAW_FOLDER}/{run_folder(run_index)}/{name}"
            + (RAW_MARKER_SUFFIX if marker else RAW_CODE_SUFFIX))


def raw_bytes(n: int, marker: bool) -> int:
    return n * (MARKER_DTYPE.itemsize if marker else CODES_DTYPE.itemsize)


def _raw_values(o) -> tuple[np.ndarray, np.dtype]:
    if o.codes is None:
        v = o.marks if o.marks is not None else o.volts
        return np.asarray(v), MARKER_DTYPE
    return np.asarray(o.codes), CODES_DTYPE


def write_raw(plan: Plan, tmp: Path, put) -> None:
    """Every run's raw code files, chunk by chunk."""
    for w in plan.runs:
        folder = tmp / RAW_FOLDER / run_folder(int(w.run_index))
        folder.mkdir(parents=True)
        for name, o in w.outputs.items():
            marker = o.codes is None
            rel = raw_file(int(w.run_index), name, marker)
            values, dtype = _raw_values(o)
            f = _HashingFile(tmp / rel)
            try:
                step = 1 << 20
                for i in range(0, len(values), step):
                    f.write(checked_cast(values[i:i + step], dtype))
            except BaseException:
                f.abort()
                raise
            put(rel, f.close())


def _h5py():
    try:
        import h5py
    except ImportError:
        raise BundleError(at("<options>", "writing HDF5 needs the h5py package, which is not "
                                          "installed",
                             "pip install 'dotseq[hdf5]' (or h5py), or leave out the HDF5 "
                             "option")) from None
    return h5py


def dataset_sha256(a: np.ndarray, dtype: np.dtype) -> str:
    """SHA-256 of an array's bytes as ``dtype`` (little-endian), C order."""
    return hashlib.sha256(np.ascontiguousarray(checked_cast(a, dtype)).tobytes()).hexdigest()


def write_hdf5(plan: Plan, tmp: Path, put) -> None:
    """One HDF5 file with a dataset per run and output (see the module)."""
    h5py = _h5py()
    path = tmp / HDF5_NAME
    fs = plan.sample_rate
    # libver pinned and no timestamps: the same input gives the same bytes
    with h5py.File(path, "x", libver=("v110", "v110"), track_order=True) as f:
        f.attrs["format"] = "dotseq-bundle-hdf5"
        f.attrs["sample_rate_Hz"] = fs
        f.attrs["n_runs"] = len(plan.runs)
        f.attrs["hold"] = "zero-order: sample i is held on [i/fs, (i+1)/fs)"
        for pos, w in enumerate(plan.runs):
            g = f.create_group(run_folder(int(w.run_index)), track_order=True)
            g.attrs["index"] = int(w.run_index)
            g.attrs["position"] = pos
            g.attrs["n_samples"] = int(w.n_samples)
            g.attrs["sample_rate_Hz"] = fs
            for k, v in w.sweep:
                g.attrs[f"sweep:{k}"] = float(v)
            for name, o in w.outputs.items():
                volts = np.asarray(o.volts)
                _dataset(g, name, volts, VOLTS_DTYPE, {
                    "unit": "0 or 1" if o.kind == "marker" else "V",
                    "kind": str(o.kind), "channel": str(o.channel),
                    "sample_rate_Hz": fs, "dc_level_V": float(o.dc_level),
                    "shift_samples": int(o.shift), "delay_s": float(o.delay)})
                if o.codes is not None:
                    _dataset(g, f"{name}.codes", np.asarray(o.codes), CODES_DTYPE, {
                        "unit": "code", "scale_V": float(o.lsb), "offset_V": float(o.v_min),
                        "volts": "offset_V + code * scale_V", "sample_rate_Hz": fs})
    fh = open(path, "rb+")
    try:
        import os
        os.fsync(fh.fileno())
    finally:
        fh.close()
    sha, size = sha256_file(path)
    put(HDF5_NAME, Written(path, sha, size))


def _dataset(g, name: str, a: np.ndarray, dtype: np.dtype, attrs: dict) -> None:
    data = checked_cast(a, dtype)
    kw = {}
    if data.size > 0:
        kw = dict(chunks=(min(H5_CHUNK, data.size),), compression="gzip", compression_opts=4,
                  shuffle=True)
    d = g.create_dataset(name, data=data, dtype=dtype, track_times=False, **kw)
    for k, v in attrs.items():
        d.attrs[k] = v
    d.attrs["sha256"] = dataset_sha256(data, dtype)


def hdf5_bytes_bound(plan: Plan) -> int:
    """An upper bound on the size of ``bundle.h5`` (bytes): the data
    uncompressed, 2 % for incompressible chunks, and room for the metadata
    of every run and dataset."""
    total = 1 << 16
    for w in plan.runs:
        total += 4096
        for o in w.outputs.values():
            n = int(w.n_samples)
            data = n * 8 + (n * 4 if o.codes is not None else 0)
            total += int(data * 1.02) + 8192 * (2 if o.codes is not None else 1)
    return total
