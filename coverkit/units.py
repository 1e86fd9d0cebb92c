"""Units by type and staffing: the fleet a department sends, read from a units table and checked against its bases.

A units table has one row per unit: ``unit_id``, ``base_id``, ``type`` (the department's own label: engine,
ladder, medic-als ...) and ``staffing`` (people riding it), with an optional ``hours`` (``07-19``: in service from
07:00 to 19:00 only, a peak-time unit). Without a units table a run keeps its plain bases (one untyped kind of
unit per base) and nothing here is used.

Results are planning estimates, not for live dispatch or routing.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from coverkit.errors import FieldError, InputFileError

#: The columns a units table must hold.
REQUIRED_COLUMNS = ("unit_id", "base_id", "type", "staffing")
#: The optional column of in-service hours (``HH-HH``, local clock hours; ``22-06`` runs past midnight).
HOURS_COLUMN = "hours"
#: Unit types the shipped examples use: the trade's usual words (common practice, no source).
USUAL_TYPES = ("engine", "ladder", "rescue", "medic-als", "ambulance-bls", "tender", "command")
#: Prefix and suffix of the per-point column holding the first arrival of a type (``first_engine_s``).
FIRST_PREFIX, FIRST_SUFFIX = "first_", "_s"

_HOURS = re.compile(r"^\s*(\d{1,2})\s*-\s*(\d{1,2})\s*$")


def type_column(unit_type: str) -> str:
    """The demand column holding the first arrival (s) of ``unit_type``.

    >>> type_column("medic-als"), type_column("Engine")
    ('first_medic_als_s', 'first_engine_s')
    """
    word = re.sub(r"[^0-9a-z]+", "_", unit_type.strip().lower()).strip("_")
    return f"{FIRST_PREFIX}{word}{FIRST_SUFFIX}"


@dataclass(frozen=True)
class Fleet:
    """The units of a run, each at one base.

    Attributes
    ----------
    unit_id
        Unit ids (str), in the order of the table.
    base
        Per unit the index of its base in the bases frame (int64).
    type
        Per unit its type label (str).
    staffing
        Per unit the people riding it (int64, > 0).
    hours
        Per unit its in-service hours as ``(start_h, end_h)``, ``(0, 24)`` for all day.
    source
        The file (or section) the units came from, for messages.
    gone_types
        Types the units table holds but this fleet no longer has (every unit of them left with its base in a
        scenario, :meth:`at_bases`): still judged, and never arriving.
    """

    unit_id: np.ndarray
    base: np.ndarray
    type: np.ndarray
    staffing: np.ndarray
    hours: tuple[tuple[int, int], ...]
    source: str = "units"
    gone_types: tuple[str, ...] = ()

    def __len__(self) -> int:
        return len(self.unit_id)

    @property
    def types(self) -> tuple[str, ...]:
        """The unit types of the fleet (and its :attr:`gone_types`), sorted."""
        return tuple(sorted(set(self.type.tolist()) | set(self.gone_types)))

    def at_bases(self, ids_before: list[str], ids_after: list[str]) -> Fleet:
        """The fleet on the bases after a change of bases: a base that is gone takes its units with it, a base kept
        under its id (moved or not) keeps them, a new base holds none (the units table names none there).

        >>> f = fleet_from_table(pd.DataFrame({"unit_id": ["E1", "L1", "E2"], "base_id": ["A", "A", "B"],
        ...     "type": ["engine", "ladder", "engine"], "staffing": [4, 3, 4]}), ["A", "B"])
        >>> g = f.at_bases(["A", "B"], ["B", "C"])
        >>> g.unit_id.tolist(), g.base.tolist(), g.types, g.count("ladder")
        (['E2'], [0], ('engine', 'ladder'), 0)
        """
        where = {b: i for i, b in enumerate(ids_after)}
        new = np.array([where.get(ids_before[b], -1) for b in self.base.tolist()], dtype=np.int64)
        keep = new >= 0
        kept_types = set(self.type[keep].tolist())
        return Fleet(
            self.unit_id[keep],
            new[keep],
            self.type[keep],
            self.staffing[keep],
            tuple(h for h, k in zip(self.hours, keep.tolist(), strict=True) if k),
            self.source,
            tuple(t for t in self.types if t not in kept_types),
        )

    def type_codes(self) -> np.ndarray:
        """Per unit the position of its type in :attr:`types` (int64)."""
        return np.searchsorted(np.array(self.types, dtype=object), self.type).astype(np.int64)

    def count(self, unit_type: str) -> int:
        """How many units of ``unit_type`` the fleet holds."""
        return int((self.type == unit_type).sum())

    def holds(self, unit_type: str, n_bases: int) -> np.ndarray:
        """Per base whether it holds a unit of ``unit_type`` (bool, shape ``(n_bases,)``).

        Raises
        ------
        FieldError
            No unit has that type.
        """
        if self.count(unit_type) == 0:
            raise FieldError(f"{self.source}: no unit has type '{unit_type}'; its types are {', '.join(self.types)}.")
        return np.bincount(self.base[self.type == unit_type], minlength=n_bases) > 0

    def on_duty(self, hour: float) -> Fleet:
        """The units in service at clock ``hour`` (0..24): a unit with hours ``(a, b)`` serves ``a <= h < b``,
        or, when ``a > b``, past midnight (``h >= a`` or ``h < b``).

        >>> f = fleet_from_table(pd.DataFrame({"unit_id": ["E1", "M9"], "base_id": ["S1", "S1"],
        ...     "type": ["engine", "medic-als"], "staffing": [4, 2], "hours": ["", "07-19"]}), ["S1"])
        >>> f.on_duty(20).unit_id.tolist(), f.on_duty(8).unit_id.tolist()
        (['E1'], ['E1', 'M9'])
        """
        if not 0 <= hour < 24:
            from coverkit.errors import PARAM

            raise FieldError(f"{PARAM} must be a clock hour 0..24 (e.g. 8.5), got {hour}.", param="hour")
        a = np.array([h[0] for h in self.hours], dtype=float)
        b = np.array([h[1] for h in self.hours], dtype=float)
        keep = np.where(a <= b, (hour >= a) & (hour < b), (hour >= a) | (hour < b))
        if not keep.any():
            raise FieldError(f"{self.source}: no unit is in service at hour {hour:g}; check the hours column.")
        return Fleet(
            self.unit_id[keep],
            self.base[keep],
            self.type[keep],
            self.staffing[keep],
            tuple(h for h, k in zip(self.hours, keep, strict=True) if k),
            self.source,
        )


def _hours(value: object, row: int, source: str) -> tuple[int, int]:
    """``"07-19"`` as ``(7, 19)``; empty as all day."""
    if value is None or (isinstance(value, float) and np.isnan(value)) or str(value).strip() == "":
        return (0, 24)
    m = _HOURS.match(str(value))
    if not m or int(m.group(1)) > 24 or int(m.group(2)) > 24 or m.group(1) == m.group(2):
        raise FieldError(
            f"{source}: row {row}: hours '{value}' is not a span of clock hours; write it as e.g. 07-19 "
            "(or leave it empty for all day)."
        )
    return (int(m.group(1)), int(m.group(2)))


def fleet_from_table(table: pd.DataFrame, base_ids: list[str] | np.ndarray | None, *, source: str = "units") -> Fleet:
    """A :class:`Fleet` from a units table, checked against the bases' ids (None: the rows only, bases not known).

    Rows are numbered as a spreadsheet shows a CSV file (the header is row 1).

    Raises
    ------
    FieldError
        A required column is missing, a unit id repeats, a unit stands at an unknown base, a type is empty, or a
        staffing is not a whole number above 0.

    Examples
    --------
    >>> t = pd.DataFrame({"unit_id": ["E1", "L1"], "base_id": ["S2", "S1"], "type": ["engine", "ladder"],
    ...                   "staffing": [4, 3]})
    >>> f = fleet_from_table(t, ["S1", "S2"])
    >>> f.base.tolist(), f.types, f.staffing.sum()
    ([1, 0], ('engine', 'ladder'), np.int64(7))
    """
    missing = [c for c in REQUIRED_COLUMNS if c not in table.columns]
    if missing:
        raise FieldError(
            f"{source}: no column {', '.join(missing)}; a units table needs {', '.join(REQUIRED_COLUMNS)} "
            f"(and optionally {HOURS_COLUMN}); its columns are {', '.join(map(str, table.columns))}."
        )
    if len(table) == 0:
        raise FieldError(f"{source}: the units table has no rows; add one row per unit.")
    ids = table["unit_id"].astype(str).str.strip().to_numpy(dtype=object)
    rows = np.arange(len(table)) + 2
    dup = pd.Series(ids).duplicated().to_numpy()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        raise FieldError(f"{source}: row {rows[i]}: unit_id '{ids[i]}' repeats; give every unit its own id.")
    base_col = table["base_id"].astype(str).str.strip().to_numpy(dtype=object)
    if base_ids is None:  # rows checked before the bases are read: base positions are not known yet
        base_ids = list(pd.unique(base_col))
    known = {str(b): i for i, b in enumerate(base_ids)}
    base = np.array([known.get(b, -1) for b in base_col], dtype=np.int64)
    if (base < 0).any():
        i = int(np.flatnonzero(base < 0)[0])
        raise FieldError(
            f"{source}: row {rows[i]}: unit '{ids[i]}' stands at base '{base_col[i]}', which is not in the bases; "
            f"use one of {', '.join(map(str, list(base_ids)[:12]))}."
        )
    kind = table["type"].fillna("").astype(str).str.strip().to_numpy(dtype=object)
    if (kind == "").any():
        i = int(np.flatnonzero(kind == "")[0])
        raise FieldError(f"{source}: row {rows[i]}: unit '{ids[i]}' has no type; give one, e.g. engine.")
    staff = pd.to_numeric(table["staffing"], errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(staff) | (staff <= 0) | (staff != np.round(staff))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise FieldError(
            f"{source}: row {rows[i]}: staffing of unit '{ids[i]}' is '{table['staffing'].iloc[i]}'; "
            "give the whole number of people riding it (1 or more)."
        )
    hours_col = table[HOURS_COLUMN] if HOURS_COLUMN in table.columns else pd.Series([None] * len(table))
    hours = tuple(_hours(v, int(r), source) for v, r in zip(hours_col.tolist(), rows, strict=True))
    return Fleet(ids, base, kind, staff.astype(np.int64), hours, source)


def parse_assignment(value: str | dict) -> tuple[tuple[str, int], ...]:
    """An assignment as ``((type, count), ...)`` in the order given, from ``"engine=2,ladder=1"`` or a mapping.

    >>> parse_assignment("engine=2, ladder=1,command=1")
    (('engine', 2), ('ladder', 1), ('command', 1))
    >>> parse_assignment({"medic-als": 1})
    (('medic-als', 1),)

    Raises
    ------
    FieldError
        A part is not ``type=count`` with a whole count of 1 or more, or a type repeats.
    """
    from coverkit.errors import PARAM

    items = list(value.items()) if isinstance(value, dict) else [p.partition("=")[::2] for p in str(value).split(",")]
    out: list[tuple[str, int]] = []
    for unit_type, count in items:
        unit_type, text = str(unit_type).strip(), str(count).strip()
        if not unit_type or not text.isdigit() or int(text) < 1:
            raise FieldError(
                f"{PARAM}: '{unit_type}={text}' is not type=count; write e.g. engine=2,ladder=1,command=1.",
                param="assignment",
            )
        if unit_type in dict(out):
            raise FieldError(f"{PARAM}: type '{unit_type}' is named twice; give each type once.", param="assignment")
        out.append((unit_type, int(text)))
    if not out:
        raise FieldError(f"{PARAM}: empty; write e.g. engine=2,ladder=1,command=1.", param="assignment")
    return tuple(out)


def read_units(path: str | Path, base_ids: list[str] | np.ndarray | None, *, layer: str | None = None) -> Fleet:
    """A units table from a CSV file or a layer (GeoPackage, shapefile ...), as a checked :class:`Fleet`.

    Raises
    ------
    InputFileError
        The file is missing or unreadable.
    FieldError
        See :func:`fleet_from_table`.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"units {path}: no such file; give the units table (unit_id, base_id, type, staffing).")
    try:
        if path.suffix.lower() in (".csv", ".txt"):
            table = pd.read_csv(path, dtype={"unit_id": str, "base_id": str, "type": str, HOURS_COLUMN: str})
        else:
            import pyogrio

            table = pd.DataFrame(pyogrio.read_dataframe(path, layer=layer, read_geometry=False))
    except Exception as exc:
        raise InputFileError(f"units {path}: not a readable table ({str(exc)[:60]}).") from None
    return fleet_from_table(table, base_ids, source=path.name)


__all__ = ["Fleet", "fleet_from_table", "parse_assignment", "read_units", "type_column"]
