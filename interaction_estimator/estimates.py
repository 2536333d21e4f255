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

from .environment import PARAMETER_NAMES, PARAMETER_UNITS

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
# (ties to even), which read back bit-identical (IEEE 754 binary64). Python's correctly rounded
# conversion costs about 1 us per value, which made the CSV the largest cost of a replay after
# the pipeline; _g17_bytes makes the same text for a whole column with numpy arithmetic that is
# exact (an error-free product, Dekker 1971), and hands the few values it does not cover (NaN,
# infinities, zeros, |x| < 1e-6 or >= 1e17) to Python's own "%.17g".

_FLOAT_TEXT = "%.17g".__mod__
_SPLIT = 134217729.0                                   # 2**27 + 1, Veltkamp's splitting factor
_POW10 = np.array([float(10 ** k) for k in range(23)])  # exact in binary64 up to 1e22
_POW10_HI = _POW10 * _SPLIT - (_POW10 * _SPLIT - _POW10)
_POW10_LO = _POW10 - _POW10_HI
_E_MIN, _E_MAX = -6, 16       # decimal exponents handled by numpy (10**(16 - e) is exact)
_WIDTH = 24                   # longest "%.17g" text: -d.dddddddddddddddde-ddd
# Each value's characters are gathered from a 32-byte source row: bytes 0-13 the constant
# characters below, byte 14 a zero byte (the padding after a text), byte 15 the first digit,
# bytes 16-31 the other 16 digits (four groups of four, made by table as little-endian 32-bit
# words). Texts are zero padded to a common width; the CSV rows are the fields side by side,
# separators included, with the zero bytes deleted (no text holds one).
_CONST = b"-.e+0123456789"
_PAD = 14
_FIRST = 15
_CONST_WORDS = np.frombuffer(_CONST + b"\0\0", "<u4")            # (4,)
_QUAD = np.frombuffer(b"".join(b"%04d" % i for i in range(10000)), "<u4")
_QUAD_ZEROS = np.array([len(s) - len(s.rstrip("0")) for s in ("%04d" % i for i in range(10000))],
                       np.int64)                                   # trailing zeros per group


def _layout(negative: bool, e: int, nd: int) -> list[int]:
    """Source bytes (see :data:`_CONST`, :data:`_FIRST`) of the "%.17g" text of a
    value with that sign, decimal exponent ``e`` (value = d.ddd... * 10**e) and ``nd``
    significant digits left after dropping trailing zeros (the "g" style: exponent form when
    e < -4 or e >= 17, else positional, no trailing zeros, no lone point)."""
    def c(ch: str) -> int:
        return _CONST.index(ch.encode())

    def digits(a: int, b: int) -> list[int]:
        return list(range(_FIRST + a, _FIRST + b))

    out = [c("-")] if negative else []
    if -4 <= e < 17:
        if e >= 0:
            out += digits(0, e + 1)
            if nd > e + 1:
                out += [c(".")] + digits(e + 1, nd)
        else:
            out += [c("0"), c(".")] + [c("0")] * (-e - 1) + digits(0, nd)
    else:
        out += digits(0, 1) + ([c(".")] + digits(1, nd) if nd > 1 else [])
        out += [c("e"), c("-" if e < 0 else "+")] + [c(ch) for ch in "%02d" % abs(e)]
    return out


def _layouts() -> tuple[np.ndarray, np.ndarray]:
    count = 2 * (_E_MAX - _E_MIN + 1) * 18
    idx = np.full((count, _WIDTH), _PAD, np.int32)
    lens = np.zeros(count, np.intp)
    for neg in (0, 1):
        for e in range(_E_MIN, _E_MAX + 1):
            for nd in range(1, 18):
                code = (neg * (_E_MAX - _E_MIN + 1) + e - _E_MIN) * 18 + nd
                cols = _layout(bool(neg), e, nd)
                idx[code, :len(cols)] = cols
                lens[code] = len(cols)
    return idx, lens


_LAYOUT_IDX, _LAYOUT_LEN = _layouts()


def _scaled(a: np.ndarray, e: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """a * 10**(16 - e) rounded to an integer, ties to even (a > 0, -6 <= e <= 16), and
    whether that exact product lies below 1e16 or at or above 1e17 (e then is wrong by one).

    The product is exact as hi + lo (Dekker's two-product; 10**k is exact for k <= 22); hi is
    a whole number wherever the product is in range (>= 2**53)."""
    k = 16 - e
    ph, pl = _POW10_HI[k], _POW10_LO[k]
    hi = a * _POW10[k]
    c = a * _SPLIT
    ah = c - (c - a)
    al = a - ah
    lo = al * pl - (((hi - ah * ph) - al * ph) - ah * pl)
    low = (hi < 1e16) | ((hi == 1e16) & (lo < 0))
    high = (hi > 1e17) | ((hi == 1e17) & (lo >= 0))
    whole = np.floor(lo)
    frac = lo - whole
    d = hi.astype(np.int64) + whole.astype(np.int64)
    d += (frac > 0.5) | ((frac == 0.5) & ((d & 1) == 1))
    return d, low, high


def _trailing_zeros(groups: Sequence[np.ndarray]) -> np.ndarray:
    """Trailing zeros of the 16 digits held in four groups of four (n,) each."""
    tz = _QUAD_ZEROS[groups[3]]
    more = groups[3] == 0
    for g in (groups[2], groups[1], groups[0]):
        tz += more * _QUAD_ZEROS[g]
        more &= g == 0
    return tz


def _text_bytes(texts: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    """Texts as a (n, w) uint8 matrix (zero padded) and their lengths (n,) in bytes."""
    enc = [t.encode() for t in texts]
    arr = np.array(enc, dtype=bytes) if enc else np.zeros(0, "S1")
    w = max(arr.dtype.itemsize, 1)
    return (arr.view(np.uint8).reshape(len(enc), w),
            np.fromiter(map(len, enc), np.intp, len(enc)))


def _g17_bytes(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The text of ``"%.17g" % v`` for each v of x (float64 (n,)), as a (n, w) uint8 matrix
    (zero padded) and lengths (n,)."""
    n = len(x)
    a = np.abs(x)
    fast = (a >= 1e-6) & (a < 1e17)           # False for NaN
    a[~fast] = 1.0
    e = np.floor(np.log10(a)).astype(np.int64)
    np.clip(e, _E_MIN, _E_MAX, out=e)
    d, low, high = _scaled(a, e)
    wrong = np.flatnonzero(low | high)        # log10 rounded across a power of ten
    if len(wrong):
        e[wrong] += np.where(high[wrong], 1, -1)
        out_of_range = (e[wrong] < _E_MIN) | (e[wrong] > _E_MAX)
        fast[wrong[out_of_range]] = False
        e[wrong[out_of_range]] = 0
        redo = wrong[~out_of_range]
        d[redo], low2, high2 = _scaled(a[redo], e[redo])
        fast[redo[low2 | high2]] = False      # cannot happen; Python formats it if it does
    carry = d == 10 ** 17                     # rounded up to the next power of ten
    if carry.any():
        d[carry] = 10 ** 16
        e[carry] += 1
        over = carry & (e > _E_MAX)
        fast[over] = False
        e[over] = 0
    slow = np.flatnonzero(~fast)
    d[slow] = 10 ** 16
    # the 17 digits: the first, then four groups of four by table
    upper = d // 100_000_000
    lower = (d - upper * 100_000_000).astype(float)
    upper = upper.astype(float)
    first = np.floor(upper / 1e8)
    rest = upper - first * 1e8
    g1 = np.floor(rest / 1e4)
    g3 = np.floor(lower / 1e4)
    groups = [g.astype(np.intp) for g in (g1, rest - g1 * 1e4, g3, lower - g3 * 1e4)]
    src = np.empty((n, 8), "<u4")
    src[:, :4] = _CONST_WORDS
    src[:, 3] |= (first.astype(np.uint32) + 48) << 24
    for j, g in enumerate(groups):
        src[:, 4 + j] = _QUAD[g]
    nd = 17 - _trailing_zeros(groups)         # digits left without trailing zeros
    code = (np.signbit(x) * (_E_MAX - _E_MIN + 1) + (e - _E_MIN)) * 18 + nd
    lens = _LAYOUT_LEN[code]
    width = int(lens.max()) if n else 1
    flat = _LAYOUT_IDX[code, :width]
    flat += (np.arange(n, dtype=np.int32) * 32)[:, None]   # in place: a new array costs more
    out = src.view(np.uint8).ravel().take(flat)
    if len(slow):
        texts, tlens = _text_bytes(list(map(_FLOAT_TEXT, x[slow].tolist())))
        if texts.shape[1] > width:
            out = np.concatenate([out, np.zeros((n, texts.shape[1] - width), np.uint8)], 1)
            width = texts.shape[1]
        out[slow] = 0
        out[slow, :texts.shape[1]] = texts
        lens[slow] = tlens
    return out, lens


def _float_bytes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Float column text (:func:`_g17_bytes`), each run of equal values formatted once when
    runs are long (parameters out of contact, the direction, NIS bounds hold still)."""
    n = len(values)
    bits = values.view(np.uint64)            # compared by bit pattern: 0.0 and -0.0 differ
    starts = np.flatnonzero(np.concatenate(([True], bits[1:] != bits[:-1])))
    if len(starts) > n // 4:
        return _g17_bytes(values)
    out, lens = _g17_bytes(values[starts])
    run = np.repeat(np.arange(len(starts)), np.diff(np.append(starts, n)))
    return out[run], lens[run]


def _integer_bytes(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Integer column text (flags 0/1, levels 0-3); NaN (not reported) -> empty field."""
    small = (values >= 0) & (values <= 3) & (values == np.floor(values))
    nan = np.isnan(values)
    out = (np.where(small, values, 0).astype(np.uint8) + 48)[:, None]
    out[nan] = 0
    lens = np.ones(len(values), np.intp)
    lens[nan] = 0
    other = np.flatnonzero(~small & ~nan)
    if len(other):
        texts, tlens = _text_bytes([str(int(v)) for v in values[other].tolist()])
        out = np.concatenate([out, np.zeros((len(values), texts.shape[1] - 1), np.uint8)], 1)
        out[other, :texts.shape[1]] = texts
        lens[other] = tlens
    return out, lens


def _word_bytes(words: Sequence[Any]) -> tuple[np.ndarray, np.ndarray]:
    """Text column (the state word): each distinct word encoded once."""
    words = list(words)
    code = {w: i for i, w in enumerate(set(words))}
    out, lens = _text_bytes([str(w) for w in code])
    index = np.fromiter(map(code.__getitem__, words), np.intp, len(words))
    return out[index], lens[index]


def _join_fields(fields: Sequence[tuple[np.ndarray, np.ndarray]]) -> bytes:
    """Rows of comma-separated fields, each row ended by a newline, from the fields' zero-padded
    byte matrices: side by side with the separators, then the zero bytes deleted."""
    m = len(fields[0][1])
    total = sum(f.shape[1] + 1 for f, _ in fields)
    text = np.empty((m, total), np.uint8)
    at = 0
    for j, (f, _) in enumerate(fields):
        w = f.shape[1]
        text[:, at:at + w] = f
        text[:, at + w] = ord("\n") if j == len(fields) - 1 else ord(",")
        at += w + 1
    return text.tobytes().translate(None, b"\0")


def write_csv(path: Path, cols: Mapping[str, np.ndarray], chunk: int = 8192) -> None:
    """estimates.csv: header of :data:`COLUMN_NAMES`, one row per sample; floats as Python's
    ``"%.17g"`` writes them (17 significant digits: they read back bit-identical), flags and
    levels as integers (empty where a source did not report them). Written column-wise in
    chunks of ``chunk`` rows, the text of each column made by numpy for all its values at once
    (or for its runs of equal values); memory stays bounded by the chunk."""
    n = len(cols["time"])
    states = cols["state"]
    with open(path, "wb") as fh:
        fh.write((",".join(COLUMN_NAMES) + "\n").encode())
        for lo in range(0, n, chunk):
            hi = min(lo + chunk, n)
            fields = []
            for c in COLUMN_NAMES:
                if c == "state":
                    fields.append(_word_bytes(states[lo:hi]))
                    continue
                values = np.ascontiguousarray(cols[c][lo:hi], dtype=float)
                fields.append(_integer_bytes(values) if c in _INTEGER_COLUMNS
                              else _float_bytes(values))
            fh.write(_join_fields(fields))


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
