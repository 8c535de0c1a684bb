"""Writing the data files of a bundle: ``.npy`` arrays and ``samples.csv``.

Every writer hashes the bytes as it writes them and returns the file's
SHA-256 (hex) and size, so no file is read back to be checksummed.  Files
are flushed and fsynced before they are closed.

The ``.npy`` files are written here, not with :func:`numpy.save`, so that a
stacked array can be written row by row without building it in memory; the
bytes are the same as ``numpy.save`` gives for a little-endian, C-ordered
array (format version 1.0 header from :mod:`numpy.lib.format`; the tests
compare the two).
"""

from __future__ import annotations

import hashlib
import io
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np
from numpy.lib import format as npy_format

CHUNK_BYTES = 1 << 22          # 4 MiB per write call
CSV_ROWS_PER_CHUNK = 65536

VOLTS_DTYPE = np.dtype("<f8")  # float64, little-endian
CODES_DTYPE = np.dtype("<i4")  # int32, little-endian

# printf formats of the CSV columns (fixed, so the text is deterministic)
CSV_TIME_FORMAT = "%.6f"       # ns, 1e-6 ns resolution
CSV_VOLTS_FORMAT = "%.9e"      # V, 10 significant digits
CSV_MARKER_FORMAT = "%d"       # 0 or 1


@dataclass(frozen=True)
class Written:
    """What a writer reports about one file it wrote."""

    path: Path
    sha256: str   # hex digest of the file's bytes
    size: int     # bytes


class _HashingFile:
    """A binary file opened for writing that hashes every byte written."""

    def __init__(self, path: Path):
        self.path = path
        self._f = open(path, "xb")  # never overwrite: the temp folder is ours and new
        self._h = hashlib.sha256()
        self.size = 0

    def write(self, data) -> None:
        mv = memoryview(data).cast("B")
        self._h.update(mv)
        self._f.write(mv)
        self.size += mv.nbytes

    def close(self) -> Written:
        """Flush, fsync and close; the file's checksum and size."""
        self._f.flush()
        os.fsync(self._f.fileno())
        self._f.close()
        return Written(self.path, self._h.hexdigest(), self.size)

    def abort(self) -> None:
        self._f.close()


def npy_header(shape: tuple[int, ...], dtype: np.dtype) -> bytes:
    """The ``.npy`` header (magic, version 1.0, padded dict) numpy writes for
    a C-ordered array of this shape and dtype.

    Parameters
    ----------
    shape : tuple of int
        Array shape (samples, or runs x samples).
    dtype : numpy.dtype
        Element type, with its byte order (``<f8``, ``<i4``).

    Returns
    -------
    bytes
        The header; its length is a multiple of 64.
    """
    buf = io.BytesIO()
    npy_format.write_array_header_1_0(
        buf, {"descr": npy_format.dtype_to_descr(np.dtype(dtype)),
              "fortran_order": False, "shape": tuple(int(s) for s in shape)})
    return buf.getvalue()


def npy_bytes(shape: tuple[int, ...], dtype: np.dtype) -> int:
    """Exact size in bytes of the ``.npy`` file for this shape and dtype."""
    n = 1
    for s in shape:
        n *= int(s)
    return len(npy_header(shape, dtype)) + n * np.dtype(dtype).itemsize


def _write_array_bytes(f: _HashingFile, a: np.ndarray) -> None:
    flat = np.ascontiguousarray(a).reshape(-1)
    step = max(CHUNK_BYTES // max(flat.itemsize, 1), 1)
    for i in range(0, flat.size, step):
        f.write(flat[i:i + step])


def checked_cast(a, dtype: np.dtype) -> np.ndarray:
    """``a`` as ``dtype``; a conversion to an integer type that could change
    a value (a uint32 or int64 code beyond int32, a float) is checked first:
    every value must lie in the type's range, otherwise ValueError.  Codes
    are never wrapped on their way into a file."""
    a = np.asarray(a)
    dtype = np.dtype(dtype)
    if dtype.kind in "iu" and a.size and not np.can_cast(a.dtype, dtype, "safe"):
        info = np.iinfo(dtype)
        lo, hi = a.min(), a.max()
        if not (info.min <= lo and hi <= info.max):     # also refuses NaN
            raise ValueError(f"values {lo!r} .. {hi!r} do not fit in {dtype}")
    return np.asarray(a, dtype=dtype)


def write_npy(path: Path, a: np.ndarray, dtype: np.dtype) -> Written:
    """Write one array as ``.npy`` (converted to ``dtype``, C order).

    Parameters
    ----------
    path : Path
        File to create (must not exist).
    a : numpy.ndarray
        The data; volts (V) or DAC codes.
    dtype : numpy.dtype
        ``VOLTS_DTYPE`` or ``CODES_DTYPE``.

    Returns
    -------
    Written
        Path, SHA-256 and size of the file.
    """
    a = checked_cast(a, dtype)
    f = _HashingFile(path)
    try:
        f.write(npy_header(a.shape, dtype))
        _write_array_bytes(f, a)
    except BaseException:
        f.abort()
        raise
    return f.close()


def write_npy_pieces(path: Path, pieces: Iterable[np.ndarray], n: int,
                     dtype: np.dtype) -> Written:
    """Write a 1-D ``.npy`` of ``n`` elements from pieces written one after
    the other (the pools of the segment layout); ValueError when they do not
    add up to ``n``."""
    f = _HashingFile(path)
    try:
        f.write(npy_header((n,), dtype))
        count = 0
        for piece in pieces:
            piece = checked_cast(piece, dtype)
            _write_array_bytes(f, piece)
            count += piece.size
        if count != n:
            raise ValueError(f"{path.name}: wrote {count} elements, expected {n}")
    except BaseException:
        f.abort()
        raise
    return f.close()


def write_npy_rows(path: Path, rows: Iterable[np.ndarray], n_rows: int, n_cols: int,
                   dtype: np.dtype) -> Written:
    """Write a 2-D ``.npy`` of shape ``(n_rows, n_cols)`` one row at a time.

    Each row must already have ``n_cols`` elements (padding is the caller's
    job).  Keeps only one row in memory.
    """
    f = _HashingFile(path)
    try:
        f.write(npy_header((n_rows, n_cols), dtype))
        count = 0
        for row in rows:
            row = checked_cast(row, dtype)
            if row.shape != (n_cols,):  # a bug in the caller, not user input
                raise ValueError(f"row {count} of {path.name} has shape {row.shape}, "
                                 f"expected ({n_cols},)")
            _write_array_bytes(f, row)
            count += 1
        if count != n_rows:
            raise ValueError(f"{path.name}: wrote {count} rows, expected {n_rows}")
    except BaseException:
        f.abort()
        raise
    return f.close()


def csv_header(names: Sequence[str], kinds: Sequence[str]) -> str:
    """First line of ``samples.csv``: ``time (ns)`` then ``NAME (V)`` per
    analog output and ``NAME (0/1)`` per marker."""
    cols = ["time (ns)"] + [f"{n} ({'0/1' if k == 'marker' else 'V'})"
                            for n, k in zip(names, kinds)]
    return ",".join(cols) + "\n"


def write_csv(path: Path, sample_rate: float, n_samples: int, columns: Sequence[np.ndarray],
              names: Sequence[str], kinds: Sequence[str]) -> Written:
    """Write one run's samples as text.

    Parameters
    ----------
    path : Path
        File to create.
    sample_rate : float, Hz
        Sample ``i`` starts at ``i / sample_rate``.
    n_samples : int
        Rows after the header.
    columns : sequence of numpy.ndarray
        One array per output (V, or 0/1 for markers), each ``n_samples`` long.
    names, kinds : sequence of str
        Output names (column headers) and kinds (``"marker"`` prints as an
        integer, anything else as volts).

    Notes
    -----
    Fixed formats: time ``%.6f`` ns, volts ``%.9e``, markers ``%d``; comma
    separated, ``\\n`` line ends, UTF-8.  The same arrays always give the
    same bytes.
    """
    fmt = ",".join([CSV_TIME_FORMAT] + [CSV_MARKER_FORMAT if k == "marker" else CSV_VOLTS_FORMAT
                                        for k in kinds]) + "\n"
    ns_per_sample = 1e9 / sample_rate
    f = _HashingFile(path)
    try:
        f.write(csv_header(names, kinds).encode("utf-8"))
        for lo in range(0, n_samples, CSV_ROWS_PER_CHUNK):
            hi = min(lo + CSV_ROWS_PER_CHUNK, n_samples)
            t = np.arange(lo, hi, dtype=np.float64) * ns_per_sample
            block = np.column_stack([t] + [np.asarray(c[lo:hi], dtype=np.float64)
                                           for c in columns])
            f.write(((fmt * (hi - lo)) % tuple(block.ravel().tolist())).encode("utf-8"))
    except BaseException:
        f.abort()
        raise
    return f.close()


def csv_bytes_bound(sample_rate: float, n_samples: int, kinds: Sequence[str],
                    extreme: Sequence[bool] | None = None, names: Sequence[str] = ()) -> int:
    """An upper bound on the size of ``samples.csv`` in bytes.

    Each volts value takes at most 16 characters (``-d.ddddddddde+XX``), 17
    when its magnitude is beyond 1e+-99 (``extreme``); a marker one; the time
    at most as many as the last sample's time.

    Parameters
    ----------
    sample_rate : float, Hz
    n_samples : int
    kinds : sequence of str
        Kind of each output column.
    extreme : sequence of bool, optional
        Per column, whether any value may need a three-digit exponent.
    names : sequence of str, optional
        Output names, for the header length (a generous guess without them).
    """
    if names:
        header = len(csv_header(names, kinds).encode("utf-8"))
    else:
        header = 16 + 40 * len(kinds)
    if n_samples <= 0:
        return header
    extreme = extreme or [False] * len(kinds)
    t_last = (n_samples - 1) * (1e9 / sample_rate)
    row = len(CSV_TIME_FORMAT % t_last) + 1  # + newline
    for k, x in zip(kinds, extreme):
        row += 1 + (1 if k == "marker" else (17 if x else 16))  # + comma
    return header + n_samples * row


def sha256_file(path: Path) -> tuple[str, int]:
    """SHA-256 (hex) and size in bytes of a file, read in chunks."""
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as f:
        while True:
            b = f.read(CHUNK_BYTES)
            if not b:
                break
            h.update(b)
            size += len(b)
    return h.hexdigest(), size


def fsync_dir(path: Path) -> None:
    """Flush a folder's entries to disk (best effort: not possible on every
    platform, e.g. Windows)."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
