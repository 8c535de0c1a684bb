"""The segment layout of a bundle: every distinct stretch of an output stored
once, each run a table of references (pure planning here; the writer and the
reader are in :mod:`.bundle`).

A run's output is cut at the timeline's step boundaries (shifted by the
output's delay alignment), and a piece's constant head and tail (at least
``MIN_RUN`` samples) are cut off it; neighbouring pieces that hold one
constant value are joined.  A constant piece is stored as one sample repeated, any other
piece as its samples; a piece equal, sample for sample, to one stored
before (in any run) refers to that one.  So idle and readout windows, and
gates repeated at the same phase, take a few bytes however often and however
long they are played.

Per output the bundle holds three files (docs/bundle.md):

* ``segments/NAME.npy``: float64 volts of every stored piece, end to end
  (the pool);
* ``segments/NAME.codes.npy``: the int32 DAC codes at the same places
  (analog outputs only);
* ``segments/table/NAME.npy``: int64 rows ``(offset, length, repeats)``,
  the tables of all runs one after the other; run k's rows are
  ``table_rows`` of its manifest entry.  The run's samples are
  ``pool[offset:offset + length]`` repeated ``repeats`` times, row after
  row.

The planning reads codes (or marker values) only: volts are derived per
piece with the same arithmetic as :attr:`compiler.synth.types.Output.volts`,
so no full-length volts array is ever built for writing.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np

from ..synth.types import Output, Waveforms

SEGMENTS_FOLDER = "segments"
TABLE_FOLDER = "segments/table"
TABLE_DTYPE = np.dtype("<i8")      # offset, length, repeats
MIN_RUN = 16   # samples: a constant head or tail of a piece this long is a piece of its own


@dataclass
class Pool:
    """The distinct pieces of one output over all runs, and the tables."""

    name: str
    has_codes: bool
    pieces: list = field(default_factory=list)   # (run position, start, stop) in pool order
    samples: int = 0                              # length of the pool
    tables: list = field(default_factory=list)   # per run position: int64 array (rows, 3)
    ranges: list = field(default_factory=list)   # per run position: [first, stop) of its rows
    _seen: dict = field(default_factory=dict)     # content key -> pool offset (while planning)

    @property
    def rows(self) -> int:
        return sum(len(t) for t in self.tables)

    def row_ranges(self) -> list[tuple[int, int]]:
        """``[first, stop)`` of each run's rows in the joined table."""
        out, at = [], 0
        for t in self.tables:
            out.append((at, at + len(t)))
            at += len(t)
        return out


def _key_array(o: Output) -> np.ndarray:
    """What tells two stretches of an output apart: the codes of an analog
    output, the 0/1 values of a marker."""
    if o.codes is not None:
        return o.codes
    if o.marks is not None:
        return o.marks
    return o.volts


def piece_volts(o: Output, a: int, b: int) -> np.ndarray:
    """Volts of samples [a, b) of an output, as ``Output.volts`` holds them
    (derived from the codes with the same arithmetic, so bit for bit the
    same), without building the whole array."""
    if o.stored_volts is not None:
        return np.asarray(o.stored_volts[a:b], dtype=np.float64)
    if o.codes is None:
        return o.marks[a:b].astype(float)
    v = np.multiply(o.codes[a:b], o.lsb, dtype=float)
    v += o.v_min
    return v


def _cuts(w: Waveforms, o: Output, n: int) -> np.ndarray:
    """Sorted piece boundaries of one output: 0, n and every step's start
    and stop, shifted like the output."""
    if not w.steps:
        return np.array([0, n], dtype=np.int64)
    se = np.fromiter((x for s in w.steps for x in (s.start, s.stop)), dtype=np.int64,
                     count=2 * len(w.steps))
    se += int(o.shift)
    np.clip(se, 0, n, out=se)
    return np.unique(np.concatenate(([0, n], se)))


def _pieces(w: Waveforms, o: Output) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The pieces of one output of one run: starts, stops, and whether each
    is constant; constant neighbours of equal value already joined."""
    n = int(w.n_samples)
    arr = _key_array(o)
    if n == 0:
        z = np.zeros(0, dtype=np.int64)
        return z, z, np.zeros(0, dtype=bool)
    if arr.strides == (0,) or n == 1:          # a constant output (a broadcast view)
        return (np.array([0]), np.array([n]), np.array([True]))
    cuts = _cuts(w, o, n)
    change = np.flatnonzero(arr[1:] != arr[:-1]) + 1       # arr[p] != arr[p - 1]
    starts, stops = cuts[:-1], cuts[1:]
    lo = np.searchsorted(change, starts, "right")           # first change inside a piece
    hi = np.searchsorted(change, stops, "left")             # one past the last
    const = hi == lo
    # a piece that is constant but for its ends (a level changing a sample
    # after its step starts, a burst inside a longer step) also gives its
    # constant head and tail of at least MIN_RUN samples, or all of it when
    # the value changes only once inside
    var = np.flatnonzero(~const)
    if var.size:
        first = change[lo[var]]
        last = change[hi[var] - 1]
        once = first == last
        head = once | (first - starts[var] >= MIN_RUN)
        tail = once | (stops[var] - last >= MIN_RUN)
        extra = np.concatenate((first[head], last[tail]))
        if extra.size:
            cuts = np.unique(np.concatenate((cuts, extra)))
            starts, stops = cuts[:-1], cuts[1:]
            const = (np.searchsorted(change, stops, "left")
                     == np.searchsorted(change, starts, "right"))
    # join a constant piece to the constant piece before it when the value
    # does not change at their boundary
    join = np.zeros(len(starts), dtype=bool)
    join[1:] = const[1:] & const[:-1] & (arr[starts[1:]] == arr[starts[1:] - 1])
    keep = ~join
    new_starts = starts[keep]
    idx = np.flatnonzero(keep)
    new_stops = np.append(starts[idx[1:]], n)
    return new_starts, new_stops, const[keep]


def plan_segments(runs, order) -> dict[str, Pool]:
    """The pools and tables of every output (in ``order``) over ``runs``."""
    pools: dict[str, Pool] = {}
    for name in order:
        first = next(w.outputs[name] for w in runs if name in w.outputs)
        pools[name] = Pool(name, first.codes is not None)
    for pos, w in enumerate(runs):
        for name, pool in pools.items():
            o = w.outputs.get(name)
            if o is None:
                pool.tables.append(np.zeros((0, 3), dtype=TABLE_DTYPE))
                continue
            pool.tables.append(_table(pool, pos, w, o, runs))
    for pool in pools.values():
        pool.ranges = pool.row_ranges()
        pool._seen = {}
    return pools


def _content_key(o: Output, a: int, b: int) -> tuple:
    arr = _key_array(o)
    h = hashlib.blake2b(np.ascontiguousarray(arr[a:b]).tobytes(), digest_size=20)
    if o.stored_volts is not None and o.codes is not None:
        h.update(np.ascontiguousarray(o.stored_volts[a:b]).tobytes())
    return (b - a, h.digest(), float(o.lsb), float(o.v_min), o.stored_volts is None)


def _same(runs, ref: tuple, o: Output, a: int, b: int) -> bool:
    """Whether a stored piece holds exactly the samples [a, b) of ``o``."""
    pos, ra, rb = ref
    other = runs[pos].outputs[o.name]
    if not np.array_equal(_key_array(other)[ra:rb], _key_array(o)[a:b]):
        return False
    return np.array_equal(piece_volts(other, ra, rb), piece_volts(o, a, b))


def _table(pool: Pool, pos: int, w: Waveforms, o: Output, runs) -> np.ndarray:
    starts, stops, const = _pieces(w, o)
    rows = np.empty((len(starts), 3), dtype=TABLE_DTYPE)
    for i, (a, b, c) in enumerate(zip(starts.tolist(), stops.tolist(), const.tolist())):
        if c:
            key = _content_key(o, a, a + 1)
            length, repeats = 1, b - a
            a_stored = a + 1
        else:
            key = _content_key(o, a, b)
            length, repeats = b - a, 1
            a_stored = b
        off = pool._seen.get(key)
        if off is not None:
            ref = pool.pieces[off[1]]
            if not _same(runs, ref, o, a, a_stored):
                off = None             # a hash collision: store it again
        if off is None:
            off = (pool.samples, len(pool.pieces))
            pool._seen.setdefault(key, off)
            pool.pieces.append((pos, a, a_stored))
            pool.samples += a_stored - a
        rows[i] = (off[0], length, repeats)
    return rows


def rebuild(pool: np.ndarray, rows: np.ndarray, n: int) -> np.ndarray:
    """A run's full array from its output's pool and table rows; ValueError
    when the rows do not add up to ``n`` samples or leave the pool."""
    rows = np.asarray(rows, dtype=np.int64).reshape(-1, 3)
    if len(rows) and (rows.min() < 0 or (rows[:, 1] < 1).any()
                      or (rows[:, 0] + rows[:, 1] > len(pool)).any()):
        raise ValueError("a table row points outside the pool")
    total = int((rows[:, 1] * rows[:, 2]).sum()) if len(rows) else 0
    if total != n:
        raise ValueError(f"the table rows give {total} samples, the run has {n}")
    out = np.empty(n, dtype=pool.dtype)
    at = 0
    for off, length, rep in rows.tolist():
        k = length * rep
        if length == 1:
            out[at:at + k] = pool[off]
        else:
            out[at:at + k] = np.tile(pool[off:off + length], rep)
        at += k
    return out
