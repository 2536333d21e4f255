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
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..core.environment import PARAMETER_NAMES, PARAMETER_UNITS
from ..core.health import LEVEL_NAMES, STATE_LEARNING, STATES
from .files import Staged

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
    ("nis_average", "1", "NIS averaged over the last filter.nis_time s"),
    ("nis_lower", "1", "lower 95 % chi-square bound of that average"),
    ("nis_upper", "1", "upper bound"),
    ("measurement_std", "N", "noise std of a block mean, as the filter learned it"),
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
    def from_columns(cols: Mapping[str, Sequence]) -> EstimateTable:
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
# files: CSV (the contract) and Parquet, written through pyarrow
#
# Floats are written as Arrow formats them: the shortest text that reads back to the same
# binary64 value (bit-identical), "nan", "inf" and "-inf" for the non-finite. Flags and levels
# are integers, an empty field where a source did not report them (NaN in the table). The rows
# go out a batch at a time, so memory stays bounded by the batch whatever the length.

FORMATS = ("csv", "parquet")
FILE_NAMES = {"csv": "estimates.csv", "parquet": "estimates.parquet"}


def _schema() -> Any:
    import pyarrow as pa
    return pa.schema([(name, pa.string() if name == "state" else
                       pa.int64() if name in _INTEGER_COLUMNS else pa.float64())
                      for name in COLUMN_NAMES])


def _integers(values: np.ndarray, name: str, first_row: int) -> Any:
    """A flag or level column as int64 with nulls where it is NaN; ValueError for a value that
    is no whole number."""
    import pyarrow as pa
    missing = np.isnan(values)
    bad = ~missing & ((values != np.round(values)) | ~np.isfinite(values)
                      | (np.abs(values) > 2.0 ** 53))
    if bad.any():
        k = int(np.argmax(bad))
        raise ValueError(f"estimates row {first_row + k}: column {name!r} is {values[k]}; "
                         "expected a whole number (flags 0/1, levels 0-3) or NaN")
    return pa.array(np.where(missing, 0.0, values).astype(np.int64), pa.int64(), mask=missing)


def _batches(source: EstimateTable | Mapping[str, Any], rows: int) -> Iterator[Any]:
    """The table as Arrow record batches of ``rows`` rows, columns in :data:`COLUMN_NAMES`
    order (from a table's own array, or from columns {name: (N,)})."""
    import pyarrow as pa
    if isinstance(rows, bool) or not isinstance(rows, (int, np.integer)) or rows < 1:
        raise ValueError(f"estimates writer: chunk is {rows!r}; expected a whole number of "
                         "rows >= 1")
    if isinstance(source, EstimateTable):
        n = len(source)
        data = source._data[:n]
        numeric: Mapping[str, Any] = {name: data[:, i] for i, name in enumerate(_NUMERIC)}
        states: Sequence[Any] = source._states
    else:
        missing = [c for c in COLUMN_NAMES if c not in source]
        if missing:
            raise ValueError(f"estimates writer: columns {missing} missing; expected every "
                             "name of COLUMN_NAMES")
        n = len(source["time"])
        short = {c: len(source[c]) for c in COLUMN_NAMES if len(source[c]) < n}
        if short:
            raise ValueError(f"estimates writer: 'time' has {n} values but these columns "
                             f"fewer: {short}; expected columns of equal length")
        numeric, states = source, source["state"]
    schema = _schema()
    for lo in range(0, n, int(rows)):
        hi = min(lo + int(rows), n)
        arrays = []
        for name in COLUMN_NAMES:
            if name == "state":
                arrays.append(pa.array([str(w) for w in states[lo:hi]], pa.string()))
                continue
            values = np.ascontiguousarray(numeric[name][lo:hi], dtype=np.float64)
            arrays.append(_integers(values, name, lo) if name in _INTEGER_COLUMNS
                          else pa.array(values, pa.float64()))
        yield pa.RecordBatch.from_arrays(arrays, schema=schema)


def write_estimates(path: Path, source: EstimateTable | Mapping[str, Any],
                    file_format: str = "csv", chunk: int = 65536) -> None:
    """The estimates file: one row per sample, columns :data:`COLUMN_NAMES` in order.

    ``file_format``: 'csv' (header of the column names, no quoting, floats as their shortest
    round-trip text) or 'parquet' (the same columns, typed: float64, int64 flags and levels
    with nulls where not reported, the state as a string). ``source``: an
    :class:`EstimateTable`, or columns {name: (N,)} (``state`` as str). Written ``chunk`` rows
    at a time (a Parquet row group each), atomically (:mod:`.files`)."""
    import pyarrow.csv as pacsv
    if file_format not in FORMATS:
        raise ValueError(f"estimates format {file_format!r}; expected one of "
                         f"{', '.join(FORMATS)}")
    batches = _batches(source, chunk)
    with Staged(path) as tmp:
        if file_format == "csv":
            options = pacsv.WriteOptions(quoting_style="none", quoting_header="none")
            with pacsv.CSVWriter(str(tmp), _schema(), write_options=options) as writer:
                for batch in batches:
                    writer.write_batch(batch)
        else:
            import pyarrow.parquet as pq
            with pq.ParquetWriter(str(tmp), _schema()) as writer:
                for batch in batches:
                    writer.write_batch(batch, row_group_size=chunk)


def write_csv(path: Path, source: EstimateTable | Mapping[str, Any], chunk: int = 65536
              ) -> None:
    """estimates.csv (:func:`write_estimates` as CSV)."""
    write_estimates(path, source, "csv", chunk)


def read_estimates(path: Path) -> dict[str, np.ndarray]:
    """An estimates file (CSV or Parquet, by suffix) back into columns: float64 arrays (flags
    and levels not reported: NaN), ``state`` as an array of str."""
    import pyarrow as pa
    path = Path(path)
    if path.suffix == ".parquet":
        import pyarrow.parquet as pq
        table = pq.read_table(path)
    else:
        import pyarrow.csv as pacsv
        with open(path, encoding="utf-8") as fh:
            header = fh.readline().strip().split(",")
        types = {name: pa.string() if name == "state" else pa.float64() for name in header}
        table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(
            column_types=types, strings_can_be_null=False, quoted_strings_can_be_null=False))
    out: dict[str, np.ndarray] = {}
    for name in table.column_names:
        column = table.column(name)
        if name == "state":
            out[name] = np.array(column.to_pylist(), dtype=object)
        else:
            out[name] = column.cast(pa.float64()).to_numpy(zero_copy_only=False)
    return out


def read_csv(path: Path) -> dict[str, np.ndarray]:
    """Read estimates.csv back into columns (:func:`read_estimates`)."""
    return read_estimates(path)


def float_texts(x: np.ndarray) -> list[str]:
    """The text the CSV writer gives each float of ``x`` (shortest round-trip)."""
    import pyarrow as pa
    import pyarrow.compute as pc
    values = pa.array(np.ascontiguousarray(x, dtype=np.float64).ravel(), pa.float64())
    return pc.cast(values, pa.string()).to_pylist()


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
    learning = np.asarray(cols["state"], dtype=object)[rows] == STATES[STATE_LEARNING]
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
