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
from ..core.mechanism import GEOMETRY_WORDS
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
WORD_COLUMNS = ("state", "geometry")   # text columns; the rest are numbers

# The columns a mechanism adds after the default ones (environment.model revolute, prismatic).
_GEOMETRY_WORDS = ", ".join(GEOMETRY_WORDS)
REVOLUTE_COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("axis_x", "1", "hinge axis, unit, world x (opening is a positive turn about it)"),
    ("axis_y", "1", "hinge axis, world y"),
    ("axis_z", "1", "hinge axis, world z"),
    ("axis_point_x", "m", "a point on the hinge axis (the grasp circle's centre), world x"),
    ("axis_point_y", "m", "same, world y"),
    ("axis_point_z", "m", "same, world z"),
    ("radius", "m", "grasp radius about the hinge axis"),
    ("angle", "rad", "hinge angle of the contact point from the contact onset"),
    ("swept_arc", "rad", "arc the contact path has swept about the axis"),
    ("travel", "m", "farthest distance of the contact path from the contact onset"),
    ("path_rms", "m", "RMS distance of the contact path from the fitted circle"),
    ("radius_std", "m", "standard deviation of the radius"),
    ("axis_std", "rad", "standard deviation of the axis direction"),
    ("geometry_converged", "0/1", "axis and radius converged (mechanism.min_arc swept)"),
    ("geometry", "", "the geometry's verdict: " + _GEOMETRY_WORDS),
)
PRISMATIC_COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("axis_x", "1", "slider axis, unit, world x (the opening motion is positive)"),
    ("axis_y", "1", "slider axis, world y"),
    ("axis_z", "1", "slider axis, world z"),
    ("travel", "m", "farthest distance of the contact path from the contact onset"),
    ("path_rms", "m", "RMS distance of the contact path from the fitted line"),
    ("geometry_converged", "0/1", "axis converged (mechanism.converged_travel reached)"),
    ("geometry", "", "the geometry's verdict: " + _GEOMETRY_WORDS),
)


_DEFAULT_PARAMETER_COLUMNS = {f"{p}{suffix}" for p in PARAMETER_NAMES
                              for suffix in ("", "_std", "_converged", "_excited")}


class Layout:
    """The columns of estimates.csv for one object model (``environment.model``): the default
    columns of :data:`COLUMNS` with the model's parameters in place of the four, then a
    mechanism's columns. ``names``, ``units``, ``meanings`` in column order; ``numeric``: all
    but the text columns, in order; ``integers``: the flag and level columns."""

    def __init__(self, model_name: str = "along_direction"):
        from ..core.object_models import model_named
        model = model_named(model_name)
        self.model = model
        names, units = model.parameter_names, model.parameter_units
        plural = "all parameters" if model.size != 4 else "all four parameters"
        columns: list[tuple[str, str, str]] = []
        for c in COLUMNS:
            if c[0] == PARAMETER_NAMES[0]:
                columns += [(p, u, f"estimated {p.replace('_', ' ')}")
                            for p, u in zip(names, units, strict=True)]
            elif c[0] == f"{PARAMETER_NAMES[0]}_std":
                columns += [(f"{p}_std", u, f"standard deviation of {p}")
                            for p, u in zip(names, units, strict=True)]
            elif c[0] == f"{PARAMETER_NAMES[0]}_converged":
                columns += [(f"{p}_converged", "0/1", f"{p} converged") for p in names]
            elif c[0] == f"{PARAMETER_NAMES[0]}_excited":
                columns += [(f"{p}_excited", "0/1", f"{p} excited by the motion")
                            for p in names]
            elif c[0] in _DEFAULT_PARAMETER_COLUMNS:
                continue
            elif c[0] == "converged":
                columns.append(("converged", "0/1", plural + " converged"))
            else:
                columns.append(c)
        columns += {"revolute": REVOLUTE_COLUMNS,
                    "prismatic": PRISMATIC_COLUMNS}.get(model.name, ())
        self.columns = tuple(columns)
        self.names = tuple(c[0] for c in columns)
        self.units = {c[0]: c[1] for c in columns}
        self.numeric = tuple(n for n in self.names if n not in WORD_COLUMNS)
        self.integers = {"converged", "in_contact", "level", "geometry_converged",
                         *(f"{p}_converged" for p in names), *(f"{p}_excited" for p in names)}
        self.row = struct.Struct(f"={len(self.numeric)}d")
        extra = model.name if model.mechanism else ""

        def order(e: Any, spread: Any) -> list[Any]:
            values = [e.time, *spread(e.force), e.force_along, e.position_along,
                      e.velocity_along, e.acceleration_along, *spread(e.parameters),
                      *spread(e.parameter_std), e.converged, e.in_contact, e.level,
                      *spread(e.direction), e.nis, e.nis_average, *e.nis_bounds,
                      e.measurement_std, *spread(e.parameter_converged), *spread(e.excited),
                      e.contact_level, e.jacobian_condition, e.bias_age, e.kinematics_lag]
            if extra == "revolute":
                values += [*spread(e.axis), *spread(e.axis_point), e.radius, e.angle,
                           e.swept_arc, e.travel, e.path_rms, e.radius_std, e.axis_std,
                           e.geometry_converged, e.geometry]
            elif extra == "prismatic":
                values += [*spread(e.axis), e.travel, e.path_rms, e.geometry_converged,
                           e.geometry]
            return values

        self._order = order

    def in_order(self, e: Any, spread: Any) -> list[Any]:
        """The numbers of an Estimate or an EstimateBlock in :attr:`numeric` order, then the
        geometry's code where the model has one (the ``geometry`` word column); ``spread``
        turns a field of several columns into its columns."""
        return self._order(e, spread)

    @property
    def stored(self) -> int:
        """Numbers stored per row: the numeric columns and the geometry code."""
        return len(self.numeric) + (1 if "geometry" in self.names else 0)


_LAYOUTS: dict[str, Layout] = {}


def layout(model_name: str = "along_direction") -> Layout:
    """The (shared) :class:`Layout` of an object model."""
    if model_name not in _LAYOUTS:
        _LAYOUTS[model_name] = Layout(model_name)
    return _LAYOUTS[model_name]


def _in_column_order(e: Any, spread: Any) -> list[Any]:
    """The numeric columns (all but ``state``) of an Estimate or an EstimateBlock of the
    default model, in :data:`_NUMERIC` order; ``spread`` turns a field of several columns into
    its columns."""
    return layout().in_order(e, spread)


def estimate_row(e: Any) -> list[float]:
    """The numbers of one Estimate, in its model's column order (:meth:`Layout.in_order`)."""
    # tolist(): the arrays' elements as Python numbers in one call each (element indexing
    # would make numpy scalars one at a time)
    return layout(getattr(e, "model_name", "along_direction")).in_order(e, np.ndarray.tolist)


class EstimateTable:
    """Rows of estimates, kept as a growing float array plus the state words.

    ``append(estimate)`` per processed sample; ``columns()`` -> {name: array (N,)} (``state``
    as an array of str). Missing columns (the node's messages do not carry them all) are NaN.
    A row is written into the array by one ``struct.pack_into`` of its numbers (half the cost
    of numpy converting the list).
    """

    def __init__(self, capacity: int = 1024, model_name: str = "along_direction"):
        self.layout = layout(model_name)
        self._row = self.layout.row if self.layout.stored == len(self.layout.numeric) \
            else struct.Struct(f"={self.layout.stored}d")
        self._data = np.empty((max(capacity, 16), self.layout.stored))
        self._bytes = memoryview(self._data).cast("B")
        self._states: list[str] = []
        self._n = 0

    def __len__(self) -> int:
        return self._n

    def append(self, e: Any) -> None:
        """One row from an Estimate (:func:`estimate_row`, and its state word)."""
        self.append_values(estimate_row(e), e.state)

    def append_values(self, row: Sequence[float], state: str) -> None:
        """One row: the numeric columns in the layout's order (:attr:`Layout.numeric`, then a
        mechanism's geometry code), and the state word."""
        n = self._n
        if n == len(self._data):
            grown = np.empty((2 * len(self._data), self._data.shape[1]))
            grown[:n] = self._data
            self._data, self._bytes = grown, memoryview(grown).cast("B")
        try:
            self._row.pack_into(self._bytes, n * self._row.size, *row)
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
        self._data[n:n + m] = np.column_stack(self.layout.in_order(block, np.transpose))
        self._states.extend(block.state)
        self._n = n + m

    def columns(self) -> dict[str, np.ndarray]:
        """{name: (N,)} in the layout's order: floats, and the text columns as str arrays."""
        data = self._data[:self._n]
        numbers = {name: data[:, i] for i, name in enumerate(self.layout.numeric)}
        out: dict[str, np.ndarray] = {}
        for name in self.layout.names:
            if name == "state":
                out[name] = np.array(self._states, dtype=object)
            elif name == "geometry":
                codes = data[:, len(self.layout.numeric)]
                words = np.array(GEOMETRY_WORDS + ("",), dtype=object)
                out[name] = words[np.where(np.isfinite(codes), codes, -1).astype(int)]
            else:
                out[name] = numbers[name]
        return out

    @staticmethod
    def from_columns(cols: Mapping[str, Sequence],
                     model_name: str = "along_direction") -> EstimateTable:
        """A table from partial columns (others NaN; state '' when absent)."""
        n = len(cols["time"])
        t = EstimateTable(n, model_name)
        t._data[:n] = np.nan
        for i, name in enumerate(t.layout.numeric):
            if name in cols:
                t._data[:n, i] = np.asarray(cols[name], float)
        if "geometry" in cols:
            index = {w: k for k, w in enumerate(GEOMETRY_WORDS)}
            t._data[:n, len(t.layout.numeric)] = [index.get(str(w), np.nan)
                                                  for w in cols["geometry"]]
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


def _schema(lay: Layout | None = None) -> Any:
    import pyarrow as pa
    lay = layout() if lay is None else lay
    return pa.schema([(name, pa.string() if name in WORD_COLUMNS else
                       pa.int64() if name in lay.integers else pa.float64())
                      for name in lay.names])


def _layout_of(source: EstimateTable | Mapping[str, Any]) -> Layout:
    """The layout of a table, or of columns by their parameter columns."""
    if isinstance(source, EstimateTable):
        return source.layout
    for name in ("mass_xx", "axis_point_x", "axis_x"):
        if name in source:
            return layout({"mass_xx": "cartesian", "axis_point_x": "revolute",
                           "axis_x": "prismatic"}[name])
    return layout()


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
    lay = _layout_of(source)
    if isinstance(source, EstimateTable):
        n = len(source)
        numeric: Mapping[str, Any] = source.columns()
    else:
        missing = [c for c in lay.names if c not in source]
        if missing:
            raise ValueError(f"estimates writer: columns {missing} missing; expected every "
                             f"column of the {lay.model.name} model's layout")
        n = len(source["time"])
        short = {c: len(source[c]) for c in lay.names if len(source[c]) < n}
        if short:
            raise ValueError(f"estimates writer: 'time' has {n} values but these columns "
                             f"fewer: {short}; expected columns of equal length")
        numeric = source
    schema = _schema(lay)
    for lo in range(0, n, int(rows)):
        hi = min(lo + int(rows), n)
        arrays = []
        for name in lay.names:
            if name in WORD_COLUMNS:
                arrays.append(pa.array([str(w) for w in numeric[name][lo:hi]], pa.string()))
                continue
            values = np.ascontiguousarray(numeric[name][lo:hi], dtype=np.float64)
            arrays.append(_integers(values, name, lo) if name in lay.integers
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
    schema = _schema(_layout_of(source))
    with Staged(path) as tmp:
        if file_format == "csv":
            options = pacsv.WriteOptions(quoting_style="none", quoting_header="none")
            with pacsv.CSVWriter(str(tmp), schema, write_options=options) as writer:
                for batch in batches:
                    writer.write_batch(batch)
        else:
            import pyarrow.parquet as pq
            with pq.ParquetWriter(str(tmp), schema) as writer:
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
        types = {name: pa.string() if name in WORD_COLUMNS else pa.float64()
                 for name in header}
        table = pacsv.read_csv(path, convert_options=pacsv.ConvertOptions(
            column_types=types, strings_can_be_null=False, quoted_strings_can_be_null=False))
    out: dict[str, np.ndarray] = {}
    for name in table.column_names:
        column = table.column(name)
        if name in WORD_COLUMNS:
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
              samples_read: int, wall_time: float | None, source: Mapping[str, Any],
              truth_extra: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The one dictionary behind summary.json and the report's table (JSON-ready).

    Per parameter: final value and std (last row), converged at the end, time to convergence
    (s from the first contact to the first row where that parameter is converged; None if it
    never is), truth, error = final - truth and relative error where the truth is known.
    ``force``: :func:`force_errors`. ``run``: samples, duration (s of stamps), wall time (s),
    throughput (samples/s) and real-time factor when the run was timed.
    """
    t = cols["time"]
    n = len(t)
    lay = _layout_of(cols)
    contact_idx = np.flatnonzero(cols["in_contact"] > 0.5)
    t_contact = float(t[contact_idx[0]]) if len(contact_idx) else None
    params: dict[str, Any] = {}
    for p, unit in zip(lay.model.parameter_names, lay.model.parameter_units, strict=True):
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
        "columns": {c: lay.units[c] for c in lay.names},
        **({"model": lay.model.name} if lay.model.name != "along_direction" else {}),
        **model_summary(cols, lay.model.name, truth_extra),
    }


def comparable(summary: Mapping[str, Any]) -> dict[str, Any]:
    """The summary without the wall-clock figures and the source paths (for comparisons)."""
    out = {k: v for k, v in summary.items() if k != "source"}
    out["run"] = {k: v for k, v in summary["run"].items()
                  if k not in ("wall_time_s", "throughput_samples_per_s", "real_time_factor")}
    return out


def iter_parameter_rows(summary: Mapping[str, Any]) -> Iterable[tuple[str, dict[str, Any]]]:
    for p in summary["parameters"]:
        yield p, summary["parameters"][p]


# --------------------------------------------------------------------------------------------
# the models beyond one direction: what summary.json adds


def _last_finite(x: np.ndarray) -> float | None:
    return _finite(float(x[-1])) if len(x) else None


def _angle_deg(a: np.ndarray, b: np.ndarray) -> float:
    """Angle between two directions (unsigned axes), degrees."""
    c = abs(float(np.dot(a, b))) / (np.linalg.norm(a) * np.linalg.norm(b))
    return math.degrees(math.acos(min(c, 1.0)))


def symmetric_matrix(cols: Mapping[str, np.ndarray], prefix: str, row: int = -1) -> np.ndarray:
    """The symmetric 3x3 matrix of columns ``prefix_xx`` ... ``prefix_zz`` at ``row``."""
    axes = "xyz"
    out = np.empty((3, 3))
    for a in range(3):
        for b in range(a, 3):
            out[a, b] = out[b, a] = float(cols[f"{prefix}_{axes[a]}{axes[b]}"][row])
    return out


def principal(matrix: np.ndarray) -> dict[str, Any]:
    """Principal values (descending) and unit axes (rows) of a symmetric 3x3 matrix."""
    w, v = np.linalg.eigh(matrix)
    order = np.argsort(w)[::-1]
    return {"values": [float(w[k]) for k in order],
            "axes": [[float(x) for x in v[:, k]] for k in order]}


def model_summary(cols: Mapping[str, np.ndarray], model_name: str,
                  truth: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """What summary.json adds for the models beyond one direction.

    ``mechanism`` (revolute, prismatic): the geometry at the last row (axis, axis point m,
    radius m, swept arc deg, travel m, path RMS m, verdict), and for a hinge the rotary
    parameters I = mass r^2 kg·m², c = damping r^2 N·m·s/rad, k = stiffness r^2 N·m/rad,
    tau0 = static_force r N·m (their std scaled alike, the radius taken as exact); with the
    truth's ``mechanism`` (``axis``, ``axis_point``, ``radius``) the axis error (deg), the
    distance of the estimated axis from the true axis point (m) and the radius error.
    ``principal`` (cartesian): principal values and axes of the final mass, damping and
    stiffness matrices, with the truth's where the truth has the matrices."""
    n = len(cols["time"])
    if not n:
        return {}
    if model_name == "cartesian":
        out: dict[str, Any] = {}
        for prefix in ("mass", "damping", "stiffness"):
            entry = principal(symmetric_matrix(cols, prefix))
            if truth is not None and f"{prefix}_matrix" in truth:
                true = principal(np.asarray(truth[f"{prefix}_matrix"], float))
                entry["truth_values"] = true["values"]
                entry["truth_axes"] = true["axes"]
                entry["value_errors"] = [(e - tv) / tv if tv else None for e, tv in
                                         zip(entry["values"], true["values"], strict=True)]
                entry["axis_errors_deg"] = [
                    _angle_deg(np.array(a), np.array(b))
                    for a, b in zip(entry["axes"], true["axes"], strict=True)]
            out[prefix] = entry
        return {"principal": out}
    if model_name not in ("revolute", "prismatic"):
        return {}
    axis = np.array([cols[f"axis_{c}"][-1] for c in "xyz"], float)
    mech: dict[str, Any] = {
        "kind": model_name, "geometry": str(cols["geometry"][-1]),
        "converged": bool(cols["geometry_converged"][-1] > 0.5),
        "axis": [float(x) for x in axis], "travel_m": _last_finite(cols["travel"]),
        "path_rms_m": _last_finite(cols["path_rms"]),
    }
    conv = _first_time(cols["geometry_converged"], cols["time"])
    mech["converged_at_s"] = conv
    if model_name == "revolute":
        radius = float(cols["radius"][-1])
        mech.update({
            "axis_point": [float(cols[f"axis_point_{c}"][-1]) for c in "xyz"],
            "radius_m": _finite(radius), "radius_std_m": _last_finite(cols["radius_std"]),
            "axis_std_deg": _finite(math.degrees(float(cols["axis_std"][-1]))),
            "swept_arc_deg": _finite(math.degrees(float(cols["swept_arc"][-1]))),
            "angle_rad": _last_finite(cols["angle"]),
        })
        rotary = {}
        for name, p, unit, power in ROTARY:
            value, std = float(cols[p][-1]), float(cols[f"{p}_std"][-1])
            rotary[name] = {"unit": unit, "final": _finite(value * radius ** power),
                            "std": _finite(std * radius ** power)}
        mech["rotary"] = rotary
    if truth is not None and isinstance(truth.get("mechanism"), Mapping):
        true = truth["mechanism"]
        true_axis = np.asarray(true["axis"], float)
        mech["truth"] = dict(true)
        if np.linalg.norm(axis) > 0:
            mech["axis_error_deg"] = _angle_deg(axis, true_axis)
        if model_name == "revolute" and "axis_point" in true and mech["radius_m"]:
            point = np.asarray(mech["axis_point"]) - np.asarray(true["axis_point"], float)
            unit = true_axis / np.linalg.norm(true_axis)
            mech["axis_offset_m"] = float(np.linalg.norm(point - (point @ unit) * unit))
            mech["radius_error"] = (mech["radius_m"] - float(true["radius"])) / float(
                true["radius"])
    return {"mechanism": mech}


# the hinge's own parameters from those at the grasp: (name, parameter, unit, power of r)
ROTARY = (("inertia", "mass", "kg·m²", 2), ("rotary_damping", "damping", "N·m·s/rad", 2),
          ("rotary_stiffness", "stiffness", "N·m/rad", 2), ("torque", "static_force", "N·m", 1))
