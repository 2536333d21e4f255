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


def estimate_row(e: Any) -> list[float]:
    """The numeric columns (all but ``state``) of one Estimate, in :data:`_NUMERIC` order."""
    lo, hi = e.nis_bounds
    # tolist(): the arrays' elements as Python numbers in one call each (element indexing
    # would make numpy scalars one at a time)
    return [e.time, *e.force.tolist(), e.force_along, e.position_along, e.velocity_along,
            e.acceleration_along, *e.parameters.tolist(), *e.parameter_std.tolist(),
            e.converged, e.in_contact, e.level, *e.direction.tolist(),
            e.nis, e.nis_average, lo, hi, e.measurement_std,
            *e.parameter_converged.tolist(), *e.excited.tolist(),
            e.contact_level, e.jacobian_condition, e.bias_age, e.kinematics_lag]


class EstimateTable:
    """Rows of estimates, kept as a growing float array plus the state words.

    ``append(estimate)`` per processed sample; ``columns()`` -> {name: array (N,)} (``state``
    as an array of str). Missing columns (the node's messages do not carry them all) are NaN.
    """

    def __init__(self, capacity: int = 1024):
        self._data = np.empty((max(capacity, 16), len(_NUMERIC)))
        self._states: list[str] = []
        self._n = 0

    def __len__(self) -> int:
        return self._n

    def append(self, e: Any) -> None:
        self.append_values(estimate_row(e), e.state)

    def append_values(self, row: Sequence[float], state: str) -> None:
        if self._n == len(self._data):
            grown = np.empty((2 * len(self._data), self._data.shape[1]))
            grown[:self._n] = self._data
            self._data = grown
        self._data[self._n] = row
        self._states.append(state)
        self._n += 1

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


# 17 significant digits read back bit-identical (IEEE 754 binary64), like repr, at about half
# repr's cost (repr searches for the shortest such text)
_FLOAT_TEXT = "%.17g".__mod__


_INTEGER_TEXT = {float(i): str(i) for i in range(4)}   # flags 0/1 and levels 0-3


def _integer_texts(values: np.ndarray) -> list[str]:
    """Integer column text; NaN (not reported) -> empty field."""
    out = list(map(_INTEGER_TEXT.get, values.tolist()))
    if None in out:   # NaN, or an integer outside 0-3
        out = ["" if v != v else str(int(v)) for v in values.tolist()]
    return out


def _float_texts(values: np.ndarray) -> list[str]:
    """Float column text, each distinct run of equal values formatted once: many columns hold
    still for long stretches (parameters out of contact, the direction, NIS bounds)."""
    n = len(values)
    if n == 0:
        return []
    bits = np.ascontiguousarray(values, dtype=float).view(np.uint64)  # 0.0 and -0.0 differ
    starts = np.flatnonzero(np.concatenate(([True], bits[1:] != bits[:-1])))
    if len(starts) > n // 4:   # mostly changing: format every value
        return list(map(_FLOAT_TEXT, values.tolist()))
    texts = np.array(list(map(_FLOAT_TEXT, values[starts].tolist())), dtype=object)
    return texts.repeat(np.diff(np.append(starts, n))).tolist()


def write_csv(path: Path, cols: Mapping[str, np.ndarray], chunk: int = 20000) -> None:
    """estimates.csv: header of :data:`COLUMN_NAMES`, one row per sample; floats written with
    17 significant digits (they read back bit-identical), flags and levels as integers (empty where a
    source did not report them). Written column-wise in chunks of ``chunk`` rows: each column's
    text is made by one ``map`` over its values (or over its runs of equal values), which is
    several times faster than formatting row by row, and memory stays bounded by the chunk."""
    n = len(cols["time"])
    states = cols["state"]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(COLUMN_NAMES) + "\n")
        for lo in range(0, n, chunk):
            hi = min(lo + chunk, n)
            texts = []
            for c in COLUMN_NAMES:
                if c == "state":
                    texts.append([str(x) for x in states[lo:hi]])
                    continue
                values = np.asarray(cols[c][lo:hi], dtype=float)
                texts.append(_integer_texts(values) if c in _INTEGER_COLUMNS
                             else _float_texts(values))
            fh.write("\n".join(map(",".join, zip(*texts))))
            fh.write("\n")


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
    learning = np.array([s == "learning_bias" for s in cols["state"][rows]], bool)
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
    states = list(cols["state"])
    time_in_state: dict[str, float] = {}
    if n > 1:
        dts = np.diff(t, append=t[-1])
        for s in STATES:
            mask = np.array([x == s for x in states])
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
