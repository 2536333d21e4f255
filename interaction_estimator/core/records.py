"""Named state: numpy structured dtypes that the compiled arithmetic reads by field name.

Every stage keeps its configuration in a *parameters* record (set at start-up and on a parameter
change) and what it learns in a *state* record, apart, the way Pinocchio keeps Model apart from
Data; per-joint data is an (nv,) array of records, per-parameter data an (m,) array. Numba
compiles these as records (``p.max_gap_s``, ``joints[j].gain``, array fields such as
``s.cov[1, 2]``) at the speed of flat arrays, and mutates them in place.

:class:`Record` declares a record type once, with each field's unit and meaning beside it, so
that a field's name says what it holds and :meth:`Record.describe` says it in words. Integers,
flags and enumerations are integer or boolean fields, never floats; "no value yet" is a boolean
field (``started``, ``has_...``), never a NaN to test.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

# field types
F8, I8, I1, B1 = "f8", "i8", "i1", "?"


@dataclass(frozen=True)
class Field:
    name: str
    kind: str
    unit: str
    meaning: str
    shape: tuple[int, ...] = ()


@dataclass
class Record:
    """A record type: ``Record("observer state", [Field(...), ...])``; :attr:`dtype` is the numpy
    structured dtype, :meth:`one` a 1-element array of it (pass ``array[0]`` to compiled code,
    or the array), :meth:`many` an (n,) array."""

    title: str
    fields: list[Field]
    dtype: np.dtype = field(init=False)

    def __post_init__(self) -> None:
        self.dtype = np.dtype([(f.name, f.kind, f.shape) if f.shape else (f.name, f.kind)
                               for f in self.fields])

    def one(self) -> np.ndarray:
        """A (1,) array of this record, zeroed."""
        return np.zeros(1, self.dtype)

    def many(self, n: int) -> np.ndarray:
        """An (n,) array of this record, zeroed."""
        return np.zeros(n, self.dtype)

    def describe(self) -> str:
        """One line per field: name, unit, meaning."""
        lines = [f"{self.title}:"]
        for f in self.fields:
            shape = f" {f.shape}" if f.shape else ""
            unit = f" [{f.unit}]" if f.unit else ""
            lines.append(f"  {f.name}{shape}{unit}: {f.meaning}")
        return "\n".join(lines)

    def unit(self, name: str) -> str:
        for f in self.fields:
            if f.name == name:
                return f.unit
        raise KeyError(f"{self.title} has no field {name!r}")


def record(title: str, *fields: tuple[Any, ...]) -> Record:
    """``record("title", ("name", F8, "unit", "meaning"), ("cov", F8, (3, 3), "", "..."))``."""
    out = []
    for f in fields:
        if len(f) == 5:
            name, kind, shape, unit, meaning = f
            out.append(Field(name, kind, unit, meaning, tuple(shape)))
        else:
            name, kind, unit, meaning = f
            out.append(Field(name, kind, unit, meaning))
    return Record(title, out)
