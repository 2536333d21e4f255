"""Estimate records as columns: what ``estimates.csv`` holds, and the numbers of ``summary.json``.

:class:`EstimateTable` collects one row per processed sample (from :class:`~.pipeline.Estimate`
records in the replay, or from the node's messages in the demo) into numpy columns, writes them
as CSV, and :func:`summarize` turns them, with the ground truth and a reference wrench when there
are some, into the one dictionary that both ``summary.json`` and the report's table are made from.

Columns (SI): see :data:`COLUMNS` (name, unit, meaning). The first ones are fixed by the design
contract: ``time, force_x, force_y, force_z, force_along, position_along, velocity_along,
acceleration_along, mass, damping, stiffness, static_force``, the four ``*_std``, ``converged``.
"""
from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from ..core.compiled import kernel
from ..core.environment import PARAMETER_NAMES, PARAMETER_UNITS

STATES = ("learning_bias", "free_motion", "in_contact", "converged", "contact_lost")
LEVEL_NAMES = ("OK", "WARN", "ERROR", "STALE")
SUMMARY_FORMAT = "interaction_estimator.summary/1"

# (name, unit, meaning); the order is the CSV column order.
COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("time", "s", "message stamp of the joint state"),
    ("force_x", "N", "force the robot applies to the environment, world x"),
    ("force_y", "N", "same, world y"),
    ("force_z", "N", "same, world z"),
    ("force_along", "N", "that force along the manipulation direction u"),
    ("position_along", "m", "contact point displacement along u since contact onset"),
    ("velocity_along", "m/s", "contact point velocity along u"),
    ("acceleration_along", "m/s^2", "contact point acceleration along u (smoothed, lagged)"),
    *((p, u, f"estimated {p.replace('_', ' ')}") for p, u in zip(PARAMETER_NAMES,
                                                                  PARAMETER_UNITS)),
    *((f"{p}_std", u, f"standard deviation of {p}") for p, u in zip(PARAMETER_NAMES,
                                                                     PARAMETER_UNITS)),
    ("converged", "0/1", "all four parameters converged"),
    ("in_contact", "0/1", "the contact monitor reports contact"),
    ("level", "0-3", "health level: 0 OK, 1 WARN, 2 ERROR, 3 STALE"),
    ("state", "", "health state word: " + ", ".join(STATES)),
    ("direction_x", "1", "manipulation direction u, world x"),
    ("direction_y", "1", "u, world y"),
    ("direction_z", "1", "u, world z"),
    ("nis", "1", "normalized innovation squared of this filter update"),
    ("nis_average", "1", "NIS averaged over filter.nis_window updates"),
    ("nis_lower", "1", "lower 95 % chi-square bound of that average"),
    ("nis_upper", "1", "upper bound"),
    ("measurement_std", "N", "adapted measurement noise standard deviation"),
    *((f"{p}_converged", "0/1", f"{p} converged") for p in PARAMETER_NAMES),
    *((f"{p}_excited", "0/1", f"{p} excited by the motion") for p in PARAMETER_NAMES),
    ("contact_level", "1", "residual level in units of its free-motion noise"),
    ("jacobian_condition", "1", "condition number of the contact Jacobian"),
    ("bias_age", "s", "time since the torque bias was last learned"),
    ("kinematics_lag", "s", "lag of the smoothed acceleration"),
)
COLUMN_NAMES = tuple(c[0] for c in COLUMNS)
COLUMN_UNITS = {c[0]: c[1] for c in COLUMNS}
_INTEGER_COLUMNS = {"converged", "in_contact", "level",
                    *(f"{p}_converged" for p in PARAMETER_NAMES),
                    *(f"{p}_excited" for p in PARAMETER_NAMES)}
_NUMERIC = tuple(n for n in COLUMN_NAMES if n != "state")
_STATE_CODE = {s: i for i, s in enumerate(STATES)}


def _in_column_order(e: Any, spread: Any) -> list[Any]:
    """The numeric columns (all but ``state``) of an Estimate or an EstimateBlock, in
    :data:`_NUMERIC` order; ``spread`` turns a field of several columns into its columns."""
    return [e.time, *spread(e.force), e.force_along, e.position_along, e.velocity_along,
            e.acceleration_along, *spread(e.parameters), *spread(e.parameter_std),
            e.converged, e.in_contact, e.level, *spread(e.direction),
            e.nis, e.nis_average, *e.nis_bounds, e.measurement_std,
            *spread(e.parameter_converged), *spread(e.excited),
            e.contact_level, e.jacobian_condition, e.bias_age, e.kinematics_lag]


def estimate_row(e: Any) -> list[float]:
    """The numeric columns (all but ``state``) of one Estimate, in :data:`_NUMERIC` order."""
    # tolist(): the arrays' elements as Python numbers in one call each (element indexing
    # would make numpy scalars one at a time)
    return _in_column_order(e, np.ndarray.tolist)


# one row of the table as bytes: native float64, as numpy stores it
_ROW = struct.Struct(f"={len(_NUMERIC)}d")


class EstimateTable:
    """Rows of estimates, kept as a growing float array plus the state words.

    ``append(estimate)`` per processed sample; ``columns()`` -> {name: array (N,)} (``state``
    as an array of str). Missing columns (the node's messages do not carry them all) are NaN.
    A row is written into the array by one ``struct.pack_into`` of its numbers (half the cost
    of numpy converting the list).
    """

    def __init__(self, capacity: int = 1024):
        self._data = np.empty((max(capacity, 16), len(_NUMERIC)))
        self._bytes = memoryview(self._data).cast("B")
        self._states: list[str] = []
        self._n = 0

    def __len__(self) -> int:
        return self._n

    def append(self, e: Any) -> None:
        """One row from an Estimate (:func:`estimate_row`, and its state word)."""
        self.append_values(estimate_row(e), e.state)

    def append_values(self, row: Sequence[float], state: str) -> None:
        """One row: the numeric columns in :data:`_NUMERIC` order, and the state word."""
        n = self._n
        if n == len(self._data):
            grown = np.empty((2 * len(self._data), self._data.shape[1]))
            grown[:n] = self._data
            self._data, self._bytes = grown, memoryview(grown).cast("B")
        try:
            _ROW.pack_into(self._bytes, n * _ROW.size, *row)
        except struct.error:   # a value that is no Python number: as numpy converts it
            self._data[n] = row
        self._states.append(state)
        self._n = n + 1

    def append_block(self, block: Any) -> None:
        """The rows of an EstimateBlock (:meth:`~.pipeline.Pipeline.process_block`)."""
        m = len(block)
        if not m:
            return
        n = self._n
        if n + m > len(self._data):
            grown = np.empty((max(2 * len(self._data), n + m), self._data.shape[1]))
            grown[:n] = self._data[:n]
            self._data, self._bytes = grown, memoryview(grown).cast("B")
        self._data[n:n + m] = np.column_stack(_in_column_order(block, np.transpose))
        self._states.extend(block.state)
        self._n = n + m

    def columns(self) -> dict[str, np.ndarray]:
        data = self._data[:self._n]
        out = {name: data[:, i] for i, name in enumerate(_NUMERIC)}
        out["state"] = np.array(self._states, dtype=object)
        return out

    @staticmethod
    def from_columns(cols: Mapping[str, Sequence]) -> "EstimateTable":
        """A table from partial columns (others NaN; state '' when absent)."""
        n = len(cols["time"])
        t = EstimateTable(n)
        t._data[:n] = np.nan
        for i, name in enumerate(_NUMERIC):
            if name in cols:
                t._data[:n, i] = np.asarray(cols[name], float)
        t._states = list(cols.get("state", [""] * n))
        t._n = n
        return t


# --------------------------------------------------------------------------------------------
# CSV text
#
# Every float is written as Python's "%.17g" writes it: 17 significant digits, correctly rounded
# (ties to even), which read back bit-identical (IEEE 754 binary64). Python's own conversion
# costs about 1 us per value, so the rows are written by one compiled call per chunk
# (_text_rows) into a byte buffer, with arithmetic that is exact: |x| times the power of ten
# 10**(16 - e) as an error-free product (Dekker 1971, with Veltkamp's split; 10**k is exact in
# binary64 for k <= 22), rounded to an integer of 17 digits, ties to even. What it does not
# cover (|x| < 1e-6 or >= 1e17, a flag or level other than 0-3, a state word not in STATES) is
# not approximated: the kernel stops at that row, Python writes the row with its own formatting,
# and the kernel goes on from the next row. A float equal (bit for bit) to the one above it is
# copied from the row above instead of formatted again (the direction, the NIS bounds and the
# parameters out of contact hold still for long runs).

_SPLIT = 134217729.0                                   # 2**27 + 1, Veltkamp's splitting factor
_POW10 = np.array([float(10 ** k) for k in range(23)])  # exact in binary64 up to 1e22
_POW10_HI = _POW10 * _SPLIT - (_POW10 * _SPLIT - _POW10)
_POW10_LO = _POW10 - _POW10_HI
# 10**q for q = -7..18, for the first guess of a decimal exponent only (the exact product
# decides; below 1 these are rounded)
_DECADES = np.array([10.0 ** q for q in range(-7, 19)])
_E_MIN, _E_MAX = -6, 16       # decimal exponents written by the kernel (10**(16 - e) is exact)
_LOG10_2 = 0.30102999566398120
_PAIRS = np.frombuffer(b"".join(b"%02d" % i for i in range(100)), np.uint8).copy()  # "00".."99"
_PAIR_ZEROS = np.array([2 if i == 0 else int(i % 10 == 0) for i in range(100)], np.int64)
_FLOAT_WIDTH = 24             # longest "%.17g" text: -d.dddddddddddddddde-ddd
_SLACK = 8                    # bytes the kernel may write past a float text (scratch)
_STATE_AT = COLUMN_NAMES.index("state")
# CSV fields in order: the value column of each (an index into _NUMERIC), -1 for the state word
_CSV_ORDER = np.array([-1 if name == "state" else _NUMERIC.index(name) for name in COLUMN_NAMES],
                      np.int64)
_IS_INTEGER = np.array([name in _INTEGER_COLUMNS for name in _NUMERIC])
_WORDS = np.array([list(w.encode().ljust(max(map(len, STATES)), b"\0")) for w in STATES],
                  np.uint8)   # the state words' bytes, zero padded; row = state code
_WORD_LEN = np.array([len(w.encode()) for w in STATES], np.int64)
# most bytes the kernel writes for one row, scratch included
_ROW_BYTES = len(_NUMERIC) * _FLOAT_WIDTH + _WORDS.shape[1] + len(COLUMN_NAMES) + _SLACK


class _StateCodes(dict):
    """State word -> its index in :data:`STATES`; any other word -> -1, which the kernel refuses
    (Python then writes that word as it is)."""

    def __missing__(self, word: Any) -> int:
        return -1


_STATE_CODES = _StateCodes(_STATE_CODE)


@kernel
def _scaled(a, k):
    """(d, off): a * 10**k rounded to an integer, ties to even (a > 0, 0 <= k <= 22), and off
    = -1 where that exact product lies below 1e16, +1 where at or above 1e17 (d is then 0: the
    decimal exponent 16 - k was wrong by one), else 0.

    The product is exact as hi + lo (Dekker's two-product with Veltkamp's split; 10**k is exact
    for k <= 22); hi is a whole number wherever the product is in range (>= 2**53)."""
    ph = _POW10_HI[k]
    pl = _POW10_LO[k]
    hi = a * _POW10[k]
    c = a * _SPLIT
    ah = c - (c - a)
    al = a - ah
    lo = al * pl - (((hi - ah * ph) - al * ph) - ah * pl)
    if hi < 1e16 or (hi == 1e16 and lo < 0.0):
        return 0, -1
    if hi > 1e17 or (hi == 1e17 and lo >= 0.0):
        return 0, 1
    whole = math.floor(lo)
    frac = lo - whole
    d = np.int64(hi) + np.int64(whole)
    d += (np.int64(frac > 0.5) | (np.int64(frac == 0.5) & d)) & 1   # ties to even
    return d, 0


@kernel
def _decimal(a):
    """(d, e): a = d * 10**(e - 16) rounded to 17 significant digits, ties to even
    (10**16 <= d < 10**17), for 1e-6 <= a < 1e17; e = 99 where a is not covered."""
    p = (np.float64(a).view(np.int64) >> 52) - 1023          # 2**p <= a < 2**(p + 1)
    e = int(math.floor(p * _LOG10_2))                         # floor(log10(a)) or one less
    e += np.int64(a >= _DECADES[e + 8])
    e = min(max(e, _E_MIN), _E_MAX)
    d, off = _scaled(a, 16 - e)
    if off != 0:                      # the guess was one off (near a power of ten)
        e += off
        if e < _E_MIN or e > _E_MAX:
            return 0, 99
        d, off = _scaled(a, 16 - e)
        if off != 0:                  # cannot happen; Python writes it if it does
            return 0, 99
    if d == 100_000_000_000_000_000:  # rounded up to the next power of ten
        d = 10_000_000_000_000_000
        e += 1
        if e > _E_MAX:
            return 0, 99
    return d, e


@kernel
def _text_rows(values, order, integer, codes, first, out):
    """Rows first, first + 1, ... of ``values`` (n, m) float64 as text lines into ``out`` (uint8,
    room for :data:`_ROW_BYTES` per row): the fields comma separated in ``order`` ((k,) int64,
    the value column of each field, -1 for the state word STATES[codes[r]]); a value column
    with ``integer[c]`` as one digit 0-3 (NaN: an empty field), any other as ``"%.17g"``.
    Returns (row, end): out[:end] holds the rows before ``row``; row == n when all are written,
    else row ``row`` holds a value or word the kernel does not write exactly (Python does)."""
    n, m = values.shape
    last = len(order) - 1
    text_at = np.empty(m, np.int64)   # where each column's text of the row above starts
    text_len = np.empty(m, np.int64)
    at = 0
    for r in range(first, n):
        start = at
        for j in range(last + 1):
            col = order[j]
            if col < 0:
                w = codes[r]
                if w < 0 or w >= len(_WORD_LEN):
                    return r, start
                for q in range(_WORD_LEN[w]):
                    out[at + q] = _WORDS[w, q]
                at += _WORD_LEN[w]
            elif integer[col]:
                v = values[r, col]
                if v >= 0.0 and v <= 3.0 and v == math.floor(v):
                    out[at] = 48 + int(v)
                    at += 1
                elif v == v:                  # NaN: an empty field
                    return r, start
            elif r > first and (np.float64(values[r, col]).view(np.int64)
                                == np.float64(values[r - 1, col]).view(np.int64)):
                size = text_len[col]          # as in the row above: copied
                above = text_at[col]
                for q in range(size):
                    out[at + q] = out[above + q]
                text_at[col] = at
                at += size
            else:
                text_at[col] = at
                x = values[r, col]
                a = abs(x)
                out[at] = 45                  # "-", kept where x is negative
                if x != x:
                    out[at] = 110             # nan (Python writes NaN without a sign)
                    out[at + 1] = 97
                    out[at + 2] = 110
                    at += 3
                elif a == 0.0 or a == math.inf:
                    at += np.int64(math.copysign(1.0, x) < 0.0)
                    if a == 0.0:
                        out[at] = 48
                        at += 1
                    else:
                        out[at] = 105         # inf
                        out[at + 1] = 110
                        out[at + 2] = 102
                        at += 3
                else:
                    if a < 1e-6 or a >= 1e17:
                        return r, start
                    d, e = _decimal(a)
                    if e == 99:
                        return r, start
                    at += np.int64(x < 0.0)
                    # the "g" layout, chosen by arithmetic rather than branches: e >= 0 ddd.ddd,
                    # -4 <= e < 0 0.000ddd, e < -4 d.ddde-XX (e <= 16 here, always positional);
                    # digit i (0 = first) goes to base + i, one further right where i > split
                    # (after the point); no trailing zeros, no lone point
                    small = np.int64(e < 0) * np.int64(e >= -4)
                    out[at] = 48
                    out[at + 1] = 46
                    out[at + 2] = 48
                    out[at + 3] = 48
                    out[at + 4] = 48
                    base = at + small * (1 - e)
                    split = np.int64(e >= 0) * e + small * 17
                    u = np.uint64(d)
                    top = u // np.uint64(100_000_000)
                    low = np.uint32(u - top * np.uint64(100_000_000))
                    lead = np.uint32(top // np.uint64(100_000_000))
                    mid = np.uint32(top) - lead * np.uint32(100_000_000)
                    out[base] = 48 + lead             # digit 0, never zero
                    zeros = 0                         # trailing zeros of the 17 digits
                    all_zero = 1
                    for h in range(2):                # digits 9-16, then 1-8, two at a time
                        eight = low if h == 0 else mid
                        four_hi = eight // np.uint32(10000)
                        four_lo = eight - four_hi * np.uint32(10000)
                        for g in range(2):
                            four = four_lo if g == 0 else four_hi
                            two_hi = four // np.uint32(100)
                            for s in range(2):
                                pair = four - two_hi * np.uint32(100) if s == 0 else two_hi
                                i = 15 - 2 * s - 4 * g - 8 * h
                                out[base + i + np.int64(i > split)] = _PAIRS[2 * pair]
                                out[base + i + 1 + np.int64(i + 1 > split)] = _PAIRS[2 * pair + 1]
                                zeros += all_zero * _PAIR_ZEROS[pair]
                                all_zero &= np.int64(pair == 0)
                    nd = 17 - zeros
                    out[at + 1 + (1 - small) * split] = 46   # the point (scratch if unused)
                    end = base + max(nd, split + 1) + np.int64(nd > split + 1)
                    end = small * (base + nd) + (1 - small) * end
                    ae = abs(e)
                    out[end] = 101                    # e-XX (scratch unless e < -4)
                    out[end + 1] = 45 if e < 0 else 43
                    out[end + 2] = 48 + ae // 10
                    out[end + 3] = 48 + ae % 10
                    at = end + 4 * np.int64(e < -4)
            if col >= 0 and not integer[col]:
                text_len[col] = at - text_at[col]
            out[at] = 10 if j == last else 44
            at += 1
    return n, at


_ONE_FLOAT_ORDER = np.zeros(1, np.int64)
_ONE_FLOAT_INTEGER = np.zeros(1, np.bool_)
_NO_CODES = np.zeros(0, np.int64)


def float_texts(x: np.ndarray) -> list[str]:
    """``"%.17g" % v`` for each v of x (float64 (n,)), made as the CSV writer makes a float
    field (the compiled formatter; Python's own for the values it does not cover)."""
    x = np.ascontiguousarray(x, dtype=np.float64).reshape(-1, 1)
    out = np.empty(len(x) * (_FLOAT_WIDTH + 1) + _SLACK, np.uint8)
    texts: list[str] = []
    i = 0
    while i < len(x):
        i, end = _text_rows(x, _ONE_FLOAT_ORDER, _ONE_FLOAT_INTEGER, _NO_CODES, i, out)
        texts += out[:end].tobytes().decode().splitlines()
        if i < len(x):
            texts.append("%.17g" % x[i, 0])
            i += 1
    return texts


def _python_row(values: Sequence[float], word: Any, row: int) -> bytes:
    """One CSV row by Python's own formatting (a row the kernel refused); ``values`` in
    :data:`_NUMERIC` order."""
    fields = []
    for name, v in zip(_NUMERIC, values):
        if name not in _INTEGER_COLUMNS:
            fields.append("%.17g" % v)
        elif v != v:
            fields.append("")
        else:
            try:
                fields.append(str(int(v)))
            except OverflowError:
                raise ValueError(f"estimates.csv row {row}: column {name!r} is {v}; expected a "
                                 "whole number (flags 0/1, levels 0-3) or NaN") from None
    fields.insert(_STATE_AT, str(word))
    return (",".join(fields) + "\n").encode()


def _stacked(cols: Mapping[str, Any], lo: int, hi: int) -> np.ndarray:
    """Rows lo..hi-1 of the numeric columns as one (hi - lo, len(_NUMERIC)) float64 array."""
    out = np.empty((hi - lo, len(_NUMERIC)))
    for i, name in enumerate(_NUMERIC):
        out[:, i] = cols[name][lo:hi]
    return out


def write_csv(path: Path, source: "EstimateTable | Mapping[str, Any]", chunk: int = 8192
              ) -> None:
    """estimates.csv: header of :data:`COLUMN_NAMES`, one row per sample; floats as Python's
    ``"%.17g"`` writes them (17 significant digits: they read back bit-identical), flags and
    levels as integers (empty where a source did not report them), the state word as it is.

    ``source``: an :class:`EstimateTable`, or columns {name: (N,)} (``state`` as str). The rows
    are written ``chunk`` at a time by one compiled call each (:func:`_text_rows`): from a
    table's own array (no copy), or from the columns stacked a chunk at a time. Memory stays
    bounded by the chunk (:data:`_ROW_BYTES` bytes of text per row at most)."""
    if isinstance(chunk, bool) or not isinstance(chunk, (int, np.integer)) or chunk < 1:
        raise ValueError(f"write_csv: chunk is {chunk!r}; expected a whole number of rows >= 1")
    chunk = int(chunk)
    if isinstance(source, EstimateTable):
        n = len(source)
        rows: np.ndarray | None = source._data[:n]
        states: Sequence[Any] = source._states
    else:   # stacked a chunk at a time below
        rows = None
        missing = [c for c in COLUMN_NAMES if c not in source]
        if missing:
            raise ValueError(f"write_csv: columns {missing} missing; expected every name of "
                             "COLUMN_NAMES")
        n = len(source["time"])
        short = {c: len(source[c]) for c in COLUMN_NAMES if len(source[c]) < n}
        if short:
            raise ValueError(f"write_csv: 'time' has {n} values but these columns fewer: "
                             f"{short}; expected columns of equal length")
        states = source["state"]
    buf = np.empty(max(min(chunk, n), 1) * _ROW_BYTES, np.uint8)
    with open(path, "wb") as fh:
        fh.write((",".join(COLUMN_NAMES) + "\n").encode())
        for lo in range(0, n, chunk):
            hi = min(lo + chunk, n)
            block = rows[lo:hi] if rows is not None else _stacked(source, lo, hi)
            words = states[lo:hi]
            codes = np.fromiter(map(_STATE_CODES.__getitem__, words), np.int64, hi - lo)
            r = 0
            while r < hi - lo:
                r, end = _text_rows(block, _CSV_ORDER, _IS_INTEGER, codes, r, buf)
                fh.write(buf[:end])
                if r < hi - lo:       # a row the kernel does not write exactly: Python does
                    fh.write(_python_row(block[r].tolist(), words[r], lo + r))
                    r += 1


def read_csv(path: Path) -> dict[str, np.ndarray]:
    """Read estimates.csv back into columns (floats; ``state`` as str)."""
    with open(path, encoding="utf-8") as fh:
        header = fh.readline().strip().split(",")
        rows = [line.rstrip("\n").split(",") for line in fh]
    out: dict[str, np.ndarray] = {}
    for i, name in enumerate(header):
        vals = [r[i] for r in rows]
        out[name] = (np.array(vals, dtype=object) if name == "state"
                     else np.array([float(v) if v else math.nan for v in vals]))
    return out


# --------------------------------------------------------------------------------------------
# summary


@dataclass(frozen=True)
class ForceReference:
    """A reference force series: time (M,) s, force (M, 3) N, world frame; where it came from."""

    source: str
    time: np.ndarray
    force: np.ndarray


def _finite(x: float) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def _first_time(flags: np.ndarray, time: np.ndarray) -> float | None:
    idx = np.flatnonzero(flags > 0.5)
    return float(time[idx[0]]) if len(idx) else None


def match_reference(cols: Mapping[str, np.ndarray], ref: ForceReference
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (estimate row index (K,), reference index (K,)) whose times agree to within half
    the median sample interval of the estimates."""
    t = cols["time"]
    if len(t) == 0 or len(ref.time) == 0:
        return np.zeros(0, int), np.zeros(0, int)
    dt = float(np.median(np.diff(t))) if len(t) > 1 else 1e-3
    j = np.clip(np.searchsorted(t, ref.time), 1, max(len(t) - 1, 1))
    left = np.clip(j - 1, 0, len(t) - 1)
    right = np.clip(j, 0, len(t) - 1)
    pick = np.where(np.abs(t[left] - ref.time) <= np.abs(t[right] - ref.time), left, right)
    ok = np.abs(t[pick] - ref.time) <= 0.5 * dt + 1e-9
    return pick[ok], np.flatnonzero(ok)


def force_errors(cols: Mapping[str, np.ndarray], ref: ForceReference | None) -> dict[str, Any]:
    """RMSE of the estimated force vector against a reference, N: after the startup bias
    learning, and in contact only (the estimator's contact flag)."""
    if ref is None:
        return {"reference": None}
    rows, refs = match_reference(cols, ref)
    est = np.column_stack([cols["force_x"], cols["force_y"], cols["force_z"]])[rows]
    err = np.linalg.norm(est - ref.force[refs], axis=1)
    learning = np.asarray(cols["state"], dtype=object)[rows] == "learning_bias"
    contact = cols["in_contact"][rows] > 0.5
    after = ~learning

    def rmse(mask: np.ndarray) -> float | None:
        return float(np.sqrt(np.mean(err[mask] ** 2))) if mask.any() else None

    return {"reference": ref.source, "matched_samples": int(len(rows)),
            "rmse_N": rmse(after), "rmse_contact_N": rmse(contact & after),
            "max_error_contact_N": float(err[contact & after].max())
            if (contact & after).any() else None}


def summarize(cols: Mapping[str, np.ndarray], *, truth: Mapping[str, float] | None,
              reference: ForceReference | None, rejects: Mapping[str, int] | None,
              samples_read: int, wall_time: float | None, source: Mapping[str, Any]
              ) -> dict[str, Any]:
    """The one dictionary behind summary.json and the report's table (JSON-ready).

    Per parameter: final value and std (last row), converged at the end, time to convergence
    (s from the first contact to the first row where that parameter is converged; None if it
    never is), truth, error = final - truth and relative error where the truth is known.
    ``force``: :func:`force_errors`. ``run``: samples, duration (s of stamps), wall time (s),
    throughput (samples/s) and real-time factor when the run was timed.
    """
    t = cols["time"]
    n = len(t)
    contact_idx = np.flatnonzero(cols["in_contact"] > 0.5)
    t_contact = float(t[contact_idx[0]]) if len(contact_idx) else None
    params: dict[str, Any] = {}
    for p, unit in zip(PARAMETER_NAMES, PARAMETER_UNITS):
        final = _finite(cols[p][-1]) if n else None
        std = _finite(cols[f"{p}_std"][-1]) if n else None
        conv_col = cols.get(f"{p}_converged")
        conv_t = _first_time(conv_col, t) if conv_col is not None and n else None
        entry: dict[str, Any] = {
            "unit": unit, "final": final, "std": std,
            "converged": bool(conv_col[-1] > 0.5) if conv_col is not None and n else None,
            "time_to_convergence_s": (conv_t - t_contact) if conv_t is not None
            and t_contact is not None else None,
            "truth": None, "error": None, "relative_error": None,
        }
        if truth is not None and p in truth:
            tv = float(truth[p])
            entry["truth"] = tv
            if final is not None:
                entry["error"] = final - tv
                entry["relative_error"] = (final - tv) / abs(tv) if tv != 0 else None
        params[p] = entry
    all_t = _first_time(cols["converged"], t) if n else None
    duration = float(t[-1] - t[0]) if n > 1 else 0.0
    states = np.asarray(cols["state"], dtype=object)
    time_in_state: dict[str, float] = {}
    if n > 1:
        dts = np.diff(t, append=t[-1])
        for s in STATES:
            mask = states == s
            if mask.any():
                time_in_state[s] = float(dts[mask].sum())
    run: dict[str, Any] = {
        "samples_read": int(samples_read), "samples_estimated": int(n),
        "samples_rejected": int(sum((rejects or {}).values())),
        "duration_s": duration, "first_stamp_s": float(t[0]) if n else None,
        "wall_time_s": wall_time,
        "throughput_samples_per_s": (samples_read / wall_time) if wall_time else None,
        "real_time_factor": (duration / wall_time) if wall_time else None,
    }
    return {
        "format": SUMMARY_FORMAT,
        "source": dict(source),
        "run": run,
        "rejects": {k: int(v) for k, v in (rejects or {}).items()},
        "first_contact_s": t_contact,
        "converged": bool(cols["converged"][-1] > 0.5) if n else False,
        "time_to_convergence_s": (all_t - t_contact) if all_t is not None
        and t_contact is not None else None,
        "final_state": states[-1] if n else None,
        "final_level": LEVEL_NAMES[int(cols["level"][-1])] if n and
        math.isfinite(cols["level"][-1]) else None,
        "time_in_state_s": time_in_state,
        "parameters": params,
        "force": force_errors(cols, reference),
        "columns": {c: COLUMN_UNITS[c] for c in COLUMN_NAMES},
    }


def comparable(summary: Mapping[str, Any]) -> dict[str, Any]:
    """The summary without the wall-clock figures and the source paths (for comparisons)."""
    out = {k: v for k, v in summary.items() if k != "source"}
    out["run"] = {k: v for k, v in summary["run"].items()
                  if k not in ("wall_time_s", "throughput_samples_per_s", "real_time_factor")}
    return out


def iter_parameter_rows(summary: Mapping[str, Any]) -> Iterable[tuple[str, dict[str, Any]]]:
    for p in PARAMETER_NAMES:
        yield p, summary["parameters"][p]
