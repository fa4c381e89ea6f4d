"""Placing a new-lot file in batches, in bounded memory, with the whole file's results.

A file is read twice, batch by batch (``[place] batch_lots`` rows at a time):

1. :func:`scan_file` reads every batch once and keeps only what the file-level
   checks need: each row's status code, a 128-bit hash of its lot id, and counts
   per analyte. From them come the duplicate lot ids across batches (with the
   first row of each, as :mod:`vinstrata.read.validate` words them within a
   file), the rejection warnings (:func:`file_warnings`, the lines of
   :func:`vinstrata.pipeline.warn_rejections`) and the unit check
   (:func:`check_file_units`, :func:`vinstrata.place.match.judge_units`).
   A median (the unit check's, a unit hint's) is needed only for a file that
   most likely is in another unit; it is then read in one more pass.
2. :func:`place_file` reads the batches again, gives each row its file-level
   status (:func:`with_file_statuses`), places each batch against the prebuilt
   :class:`~vinstrata.place.context.PlacingContext` and hands the placements to
   a sink that appends them to the output files.

A lot's placement depends on the lot and the model only, so the batches put
together give the placements of the whole file, byte for byte; the scan keeps
about 30 bytes per row (the hashes, the status, the unit-check bits), the
placing one batch.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from vinstrata.place.context import PlacingContext
from vinstrata.place.match import judge_units, unit_range, unit_tally
from vinstrata.place.placing import Placements, place_batch
from vinstrata.read import hints, quality
from vinstrata.read.analytes import KINDS_BY_KEY
from vinstrata.read.ingest import Source
from vinstrata.read.lots import USED, AnalyteSpec, LotTable
from vinstrata.read.units import FACTORS
from vinstrata.segment.model import StyleModel

DUPLICATE = "duplicate_lot_id"
# two independent 64-bit hashes of a lot id: a false duplicate among 10^9 ids has odds ~1e-21
_HASH_KEYS = ("vinstrata-lot-id", "lot-id-second-ky")

Batches = Callable[[], Iterator[LotTable]]  # a fresh pass over the file's batches per call


@dataclass
class _HintCounts:
    """One analyte's filled cells for the unit hints: how many, outside its range, and
    inside it under each other unit of its analyte (by the unit's position in FACTORS)."""

    filled: int = 0
    outside: int = 0
    inside: dict[int, int] = field(default_factory=dict)


@dataclass(frozen=True)
class FileScan:
    """What the file-level checks need of a file read in batches.

    Attributes
    ----------
    specs : tuple of AnalyteSpec
    source : Source
    sizes : tuple of int
        Rows per batch.
    status : ndarray of object
        Every row's status with the duplicates across batches applied.
    first_row : ndarray of int
        The file row where each row's lot id first appears (-1 without an id).
    repeated : ndarray of bool
        The row's lot id appears more than once in the file.
    positive, outside : list of ndarray
        Per batch, the unit check's bits per row and model analyte (packed).
    hint_counts : dict
        Analyte -> :class:`_HintCounts`.
    policy : str
        ``ingest.duplicate_ids``.
    """

    specs: tuple[AnalyteSpec, ...]
    source: Source
    sizes: tuple[int, ...]
    status: np.ndarray
    first_row: np.ndarray
    repeated: np.ndarray
    positive: list[np.ndarray]
    outside: list[np.ndarray]
    hint_counts: dict[str, _HintCounts]
    policy: str

    @property
    def n_rows(self) -> int:
        return int(len(self.status))

    @property
    def used(self) -> np.ndarray:
        return self.status == USED

    def surrogate(self) -> LotTable:
        """A lot table holding only the statuses, for the read stage's status-only summaries."""
        empty = pd.DataFrame(index=pd.RangeIndex(self.n_rows))
        return LotTable(ids=pd.DataFrame({"status": self.status}), values=empty, flags=empty,
                        extra=empty, specs=self.specs, source=self.source)


def _hint_spec(spec: AnalyteSpec) -> bool:
    """Whether :func:`vinstrata.read.hints.unit_hints` looks at this analyte."""
    return not (spec.derived or not spec.kind or spec.kind not in KINDS_BY_KEY
                or not spec.bounds)


def _hint_written(batch: LotTable, spec: AnalyteSpec) -> np.ndarray:
    """An analyte's filled cells as written in the file (what the unit hints judge)."""
    filled = batch.flags[spec.name].isin(hints._FILLED).to_numpy()
    values = batch.values[spec.name].to_numpy(dtype=float)
    return values[filled & np.isfinite(values)]


def _count_hints(counts: _HintCounts, batch: LotTable, spec: AnalyteSpec) -> None:
    values = _hint_written(batch, spec)
    counts.filled += int(values.size)
    counts.outside += int(hints._outside(values, spec).sum())
    written = values / spec.factor
    for position, (key, factor) in enumerate(FACTORS.get(spec.kind, {}).items()):
        if not key or math.isclose(factor, spec.factor, rel_tol=1e-9):
            continue
        inside = int((~hints._outside(written * factor, spec)).sum())
        counts.inside[position] = counts.inside.get(position, 0) + inside


def _id_hashes(lot_ids: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return tuple(pd.util.hash_array(lot_ids, hash_key=key, categorize=False)
                 for key in _HASH_KEYS)  # type: ignore[return-value]


def scan_file(batches: Iterable[LotTable], model: StyleModel, policy: str) -> FileScan:
    """Read every batch once and keep what the file-level checks need (see the module).

    Parameters
    ----------
    batches : iterable of LotTable
        The file's batches in order, row numbers going on across them.
    model : StyleModel
        For the unit check's ranges.
    policy : str
        ``ingest.duplicate_ids``: ``keep_first`` or ``reject_all``.

    Returns
    -------
    FileScan
    """
    ranges = {s.name: unit_range(model, s.name)[2:] for s in model.specs}
    statuses, rows, h1, h2, sizes = [], [], [], [], []
    positive, outside = [], []
    first: LotTable | None = None
    counts: dict[str, _HintCounts] = {}
    for batch in batches:
        first = first or batch
        sizes.append(batch.n_rows)
        statuses.append(batch.ids["status"].to_numpy(dtype=object))
        rows.append(batch.ids["row"].to_numpy(dtype=np.int64))
        a, b = _id_hashes(batch.ids["lot_id"].astype(str).to_numpy(dtype=object))
        h1.append(a)
        h2.append(b)
        bits = [unit_tally(batch.values[s.name].to_numpy(dtype=float), *ranges[s.name])
                if s.name in batch.values else (np.zeros(batch.n_rows, bool),) * 2
                for s in model.specs]
        positive.append(np.packbits(np.column_stack([p for p, _ in bits]), axis=1))
        outside.append(np.packbits(np.column_stack([o for _, o in bits]), axis=1))
        for spec in batch.specs:
            if _hint_spec(spec):
                _count_hints(counts.setdefault(spec.name, _HintCounts()), batch, spec)
    if first is None:
        raise ValueError("a file gives at least one batch")
    status = np.concatenate(statuses)
    row = np.concatenate(rows)
    lot_ids_present = status != "missing_lot_id"
    first_row, repeated = _first_rows(np.concatenate(h1), np.concatenate(h2), row,
                                      lot_ids_present)
    dup = lot_ids_present & (repeated if policy == "reject_all" else first_row != row)
    status = status.copy()
    status[dup] = DUPLICATE
    return FileScan(specs=first.specs, source=first.source, sizes=tuple(sizes), status=status,
                    first_row=first_row, repeated=repeated, positive=positive, outside=outside,
                    hint_counts=counts, policy=policy)


def _first_rows(h1: np.ndarray, h2: np.ndarray, row: np.ndarray, present: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
    """Per row, the first file row of its lot id and whether the id repeats (-1, False
    for a row without an id)."""
    first_row = np.full(len(row), -1, dtype=np.int64)
    repeated = np.zeros(len(row), dtype=bool)
    mine = np.flatnonzero(present)
    if not mine.size:
        return first_row, repeated
    order = mine[np.lexsort((row[mine], h2[mine], h1[mine]))]
    new = np.ones(order.size, dtype=bool)
    new[1:] = (h1[order][1:] != h1[order][:-1]) | (h2[order][1:] != h2[order][:-1])
    group = np.cumsum(new) - 1
    starts = np.flatnonzero(new)
    sizes = np.diff(np.append(starts, order.size))
    first_row[order] = row[order][starts][group]
    repeated[order] = sizes[group] > 1
    return first_row, repeated


def with_file_statuses(batch: LotTable, scan: FileScan, start: int) -> LotTable:
    """The batch with the file's duplicate lot ids rejected, worded as within a file.

    Parameters
    ----------
    batch : LotTable
    scan : FileScan
    start : int
        The batch's first row's position in the file.

    Returns
    -------
    LotTable
    """
    stop = start + batch.n_rows
    status = scan.status[start:stop]
    dup = status == DUPLICATE  # every duplicate within the batch is one in the file too
    if not dup.any():
        return batch
    ids = batch.ids.copy()
    rows, lots = ids["row"].to_numpy(), ids["lot_id"].astype(str).to_numpy()
    first = scan.first_row[start:stop]
    detail = ids["detail"].to_numpy(dtype=object).copy()
    for i in np.flatnonzero(dup):
        detail[i] = (f"row {rows[i]}: lot id '{lots[i]}' also on row {first[i]}"
                     if first[i] != rows[i] else
                     f"row {rows[i]}: lot id '{lots[i]}' appears more than once")
    ids["status"] = np.where(dup, DUPLICATE, ids["status"].to_numpy(dtype=object))
    ids["detail"] = detail
    return replace(batch, ids=ids)


def _numbered(batches: Iterable[LotTable]) -> Iterator[tuple[int, LotTable]]:
    """Each batch with its first row's position in the file."""
    start = 0
    for batch in batches:
        yield start, batch
        start += batch.n_rows


def _collect(batches: Batches, pick: Callable[[LotTable, int], dict[str, np.ndarray]]
             ) -> dict[str, np.ndarray]:
    """One more pass, joining what ``pick(batch, start)`` takes of each batch by name."""
    parts: dict[str, list[np.ndarray]] = {}
    for start, batch in _numbered(batches()):
        for name, values in pick(batch, start).items():
            parts.setdefault(name, []).append(values)
    return {name: np.concatenate(values) for name, values in parts.items()}


def file_warnings(scan: FileScan, batches: Batches, where: str) -> list[str]:
    """The rejection warnings of the whole file, as :func:`vinstrata.pipeline.warn_rejections`
    words them: the unit hints, the column rejecting nearly every row, the rejected rows
    by reason.

    Parameters
    ----------
    scan : FileScan
    batches : callable
        A fresh pass over the batches, for the median of a column a hint names.
    where : str
        Where the rejected rows are listed one by one.

    Returns
    -------
    list of str
    """
    candidates = []
    for spec in scan.specs:
        counts = scan.hint_counts.get(spec.name)
        if counts is None or not counts.filled or counts.outside / counts.filled < hints.MOSTLY:
            continue
        scored: dict[float, tuple[float, int, str]] = {}
        for position, (key, factor) in enumerate(FACTORS.get(spec.kind, {}).items()):
            if position not in counts.inside:
                continue
            inside = counts.inside[position] / counts.filled
            if inside >= hints.FITS and factor not in scored:
                scored[factor] = (-inside, position, key)
        units = [hints.display_unit(key) for _, _, key in sorted(scored.values())[:hints.MAX_UNITS]]
        if units:
            candidates.append((spec, units))
    medians = _collect(batches, lambda b, _: {s.name: _hint_written(b, s) / s.factor
                                              for s, _ in candidates}) if candidates else {}
    found = [hints.UnitHint(analyte=s.name, column=s.column, label=s.label, unit=s.unit,
                            bounds=s.bounds, median=float(np.median(medians[s.name])),
                            units=tuple(units)) for s, units in candidates]
    lines = [h.text() for h in found]
    surrogate = scan.surrogate()
    dominant = hints._dominant_rejection(surrogate, {h.analyte for h in found})
    if dominant:
        lines.append(dominant)
    note = quality.rejection_note(surrogate, where)
    if note:
        lines.append(note)
    return lines


def check_file_units(scan: FileScan, model: StyleModel, batches: Batches) -> None:
    """The unit check of the whole file (:func:`vinstrata.place.match.check_units`).

    Raises
    ------
    InputError
        As :func:`~vinstrata.place.match.check_units` for the file read whole.
    """
    names = [s.name for s in model.specs]
    n = len(names)
    used = scan.used
    tallies = np.zeros((2, n), dtype=np.int64)
    for (start, size), pos, out in zip(_starts(scan.sizes), scan.positive, scan.outside):
        mine = used[start:start + size]
        for k, bits in enumerate((pos, out)):
            tallies[k] += np.unpackbits(bits, axis=1, count=n)[mine].sum(axis=0, dtype=np.int64)
    counts = {name: (int(tallies[0, j]), int(tallies[1, j])) for j, name in enumerate(names)}
    cache: dict[str, float] = {}

    def median(name: str) -> float:
        if name not in cache:
            def pick(batch: LotTable, start: int) -> dict[str, np.ndarray]:
                x = batch.values[name].to_numpy(dtype=float)[used[start:start + batch.n_rows]]
                return {name: x[np.isfinite(x) & (x > 0)]}
            cache[name] = float(np.median(_collect(batches, pick)[name]))
        return cache[name]

    judge_units(scan.specs, scan.source.name, model, counts.__getitem__, median)


def _starts(sizes: tuple[int, ...]) -> Iterator[tuple[int, int]]:
    start = 0
    for size in sizes:
        yield start, size
        start += size


# --------------------------------------------------------------------------- placing

Runner = Callable[[Iterator[LotTable]], Iterator[Placements]]  # batches in, placements out


def local_runner(context: PlacingContext) -> Runner:
    """Place the batches one after the other in this process."""
    def run(tables: Iterator[LotTable]) -> Iterator[Placements]:
        for table in tables:
            yield place_batch(table, context)
    return run


def placed_batches(batches: Batches, scan: FileScan, runner: Runner) -> Iterator[Placements]:
    """The placements of every batch, in file order, each row with its file-level status.

    Parameters
    ----------
    batches : callable
        A fresh pass over the file's batches.
    scan : FileScan
        The file's scan (:func:`scan_file`), its checks passed.
    runner : callable
        Places an iterator of batches (:func:`local_runner`, or on a cluster
        :func:`vinstrata.place.cluster.dask_runner`), yielding in order.

    Yields
    ------
    Placements
    """
    tables = (with_file_statuses(batch, scan, start) for start, batch in _numbered(batches()))
    yield from runner(tables)


# --------------------------------------------------------------------------- the results


@dataclass
class PlaceTally:
    """The figures of the terminal summary, over every batch, and the first rows to show.

    Attributes
    ----------
    used, atypical, rejected, sulfite : int
        Lots placed, atypical, rows rejected, lots flagged for a sulfite statement.
    head : Placements or None
        The first batches' rows, until ``limit`` placed and 10 rejected rows are held.
    styles : dict
        Style id -> [lots, atypical].
    """

    limit: int = 60
    used: int = 0
    atypical: int = 0
    rejected: int = 0
    sulfite: int = 0
    head: Placements | None = None
    styles: dict[str, list[int]] = field(default_factory=dict)

    def add(self, placements: Placements) -> None:
        """Count one batch's placements (and keep its rows while the head is short)."""
        lots = placements.lots
        used = lots[lots["status"] == USED]
        atypical = used["atypical"].astype(bool).to_numpy()
        self.used += len(used)
        self.atypical += int(atypical.sum())
        self.rejected += len(lots) - len(used)
        self.sulfite += int(used["flags"].str.contains("sulfite_statement", regex=False).sum())
        for style, flag in zip(used["style"].astype(str), atypical):
            entry = self.styles.setdefault(style, [0, 0])
            entry[0] += 1
            entry[1] += int(flag)
        if self.head is None:
            self.head = placements
        elif self._short():
            h = self.head
            self.head = Placements(
                lots=pd.concat([h.lots, lots], ignore_index=True),
                details=pd.concat([h.details, placements.details], ignore_index=True),
                analytes=h.analytes, neighbours=h.neighbours, settings=h.settings)

    def _short(self) -> bool:
        lots = self.head.lots if self.head is not None else None
        if lots is None:
            return True
        n_used = int((lots["status"] == USED).sum())
        return n_used < self.limit or len(lots) - n_used < 10
