"""Fitting on a large file: a uniform sample of its rows, drawn in one pass (reservoir sampling).

The same pass computes the file's fingerprint, so the sample can be checked against a plan as
the whole file would be.
"""

from __future__ import annotations

import hashlib
import os

import numpy as np
import pandas as pd
import pyarrow as pa

from imputelab.checks import check_count, check_seed
from imputelab.executors.seeds import derive_seed
from imputelab.fill.chunks import _DECIMAL_ROWS, Progress, _no_rows, _open
from imputelab.fill.frame import FillReport, FittedFill, check_plan, clean_with_plan, fit_plan
from imputelab.io.tables import Table, file_fingerprint
from imputelab.score.plan import Plan

__all__ = ["DEFAULT_FIT_SAMPLE", "fit_sample", "reservoir_sample"]

DEFAULT_FIT_SAMPLE = 200_000


def reservoir_sample(
    path: str | os.PathLike[str],
    n: int,
    *,
    seed: int,
    progress: Progress | None = None,
    option: str = "FILE",
) -> Table:
    """A uniform random sample of ``n`` rows of a file, drawn in one pass.

    Reservoir sampling, Algorithm R (Vitter 1985, "Random sampling with a reservoir", ACM
    Transactions on Mathematical Software 11(1):37-57): the first ``n`` rows fill the
    reservoir; row ``t`` (0-based) after them replaces a uniformly chosen slot with
    probability ``n / (t + 1)``, so every set of ``n`` rows is equally likely. The draws are
    vectorised per batch of rows and do not depend on how the file is split into batches.

    Parameters
    ----------
    path : path-like
        A CSV or Parquet file (by extension).
    n : int
        Rows to keep; a file with fewer rows is returned whole.
    seed : int
        Seed of the draws (the same seed and file give the same sample).
    progress : callable, optional
        ``progress(done, total)`` in bytes (CSV) or rows (Parquet).
    option : str
        How the file is named in error messages.

    Returns
    -------
    Table
        The sampled rows in file order, exactly as :func:`~imputelab.io.tables.read_table` reads
        them (CSV: text, same delimiter and decimal mark), indexed by their 0-based position
        in the file. Its ``fingerprint`` is that of the whole file, so
        :func:`~imputelab.fill.frame.check_plan` can compare it with a plan.

    Raises
    ------
    TableIOError
        As :func:`~imputelab.io.tables.read_table`.
    OptionError
        When ``n`` or ``seed`` is out of range.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = p.write_text("a\\n" + "".join(f"{i}\\n" for i in range(100)))
    >>> sample = reservoir_sample(p, 5, seed=0)
    >>> len(sample.frame), sample.frame.index.is_monotonic_increasing
    (5, True)
    """
    check_count(n, "fit_sample")
    check_seed(seed)
    digest = hashlib.sha256()
    source = _open(path, option, digest=digest)
    reservoir = _Reservoir(n, np.random.default_rng(int(seed)))
    for table in source.tables(max(_DECIMAL_ROWS, min(n, 1 << 16))):
        reservoir.add(table)
        if progress is not None:
            progress(min(source.done, source.total), source.total)
    if reservoir.seen == 0:
        raise _no_rows(source)
    if progress is not None and source.done < source.total:  # blank lines after the rows
        progress(source.total, source.total)
    rows, positions = reservoir.rows()
    frame = source.framer.frame(rows, 0)
    frame.index = pd.Index(positions, dtype="int64")
    fingerprint = digest.hexdigest() if source.format == "csv" else file_fingerprint(source.path)
    return Table(frame, source.path, source.format, source.delimiter, source.decimal,
                 fingerprint)


class _Reservoir:
    """Algorithm R over batches of rows: ``n`` slots, each pointing at one kept row."""

    def __init__(self, n: int, rng: np.random.Generator):
        self.n, self.rng = n, rng
        self.pool: list[pa.Table] = []  # kept rows; slots point into their concatenation
        self.pool_rows = 0
        # slot -> row of the pool, and slot -> position in the file; grown as rows come, so
        # a large n costs nothing on a small file
        self.slot_row = self.slot_pos = np.zeros(0, dtype=np.int64)
        self.filled = self.seen = 0

    def add(self, table: pa.Table) -> None:
        """Offer the next rows of the file to the reservoir."""
        n, m = self.n, table.num_rows
        take = min(m, n - self.filled)
        if self.filled + take > len(self.slot_row):
            size = min(n, max(2 * len(self.slot_row), self.filled + take))
            grow = np.zeros(size - len(self.slot_row), np.int64)
            self.slot_row = np.concatenate([self.slot_row, grow])
            self.slot_pos = np.concatenate([self.slot_pos, grow])
        if take:  # the first n rows fill the reservoir
            self._keep(table.slice(0, take), np.arange(self.filled, self.filled + take),
                       self.seen + np.arange(take))
            self.filled += take
        if m > take:
            t = self.seen + np.arange(take, m)
            j = np.minimum(np.floor(self.rng.random(len(t)) * (t + 1)).astype(np.int64), t)
            hit = np.flatnonzero(j < n)
            if len(hit):
                # Several rows of one batch may land on one slot: the last one wins, as if
                # they had been placed one by one.
                slots, last = np.unique(j[hit][::-1], return_index=True)
                rows = (take + hit)[::-1][last]  # offsets within the batch
                self._keep(table.take(pa.array(rows)), slots, self.seen + rows)
        self.seen += m
        if self.pool_rows > 3 * n:  # drop the rows no slot points to any more
            live = pa.concat_tables(self.pool).take(pa.array(self.slot_row[:self.filled]))
            self.pool, self.pool_rows = [live], self.filled
            self.slot_row[:self.filled] = np.arange(self.filled)

    def _keep(self, rows: pa.Table, slots: np.ndarray, positions: np.ndarray) -> None:
        self.pool.append(rows)
        self.slot_row[slots] = self.pool_rows + np.arange(rows.num_rows)
        self.slot_pos[slots] = positions
        self.pool_rows += rows.num_rows

    def rows(self) -> tuple[pa.Table, np.ndarray]:
        """The kept rows in file order, and their 0-based positions in the file."""
        order = np.argsort(self.slot_pos[:self.filled], kind="stable")
        rows = pa.concat_tables(self.pool).take(pa.array(self.slot_row[:self.filled][order]))
        return rows, self.slot_pos[:self.filled][order]


def fit_sample(
    path: str | os.PathLike[str],
    plan: Plan,
    *,
    n: int = DEFAULT_FIT_SAMPLE,
    seed: int | None = None,
    force: bool = False,
    progress: Progress | None = None,
    option: str = "FILE",
) -> tuple[FittedFill, FillReport]:
    """Fit a plan's methods on a reservoir sample of a file (see :func:`reservoir_sample`).

    The sample is checked against the plan as :func:`~imputelab.fill.frame.fill_table` checks a
    file (fingerprint and columns; ``force`` lets a mismatch through with a warning). A file
    of at most ``n`` rows is fitted whole, so the fill equals the in-memory one.

    Parameters
    ----------
    path : path-like
    plan : Plan
    n : int
        Rows to fit on.
    seed : int, optional
        Seed of the sample; by default derived from the plan's seed.
    force : bool
    progress : callable, optional
        ``progress(done, total)`` of the sampling pass.
    option : str

    Returns
    -------
    fitted : FittedFill
    report : FillReport
        Warnings so far; pass it on to :func:`imputelab.fill.streamed.stream_fill`.
    """
    if seed is None:
        seed = derive_seed(int(plan.settings.get("seed", 0)), "fit-sample")
    sample = reservoir_sample(path, n, seed=seed, progress=progress, option=option)
    report = FillReport()
    report.warnings.extend(check_plan(plan, sample, force=force))
    typed, _ = clean_with_plan(sample, plan)
    planned = [c for c in typed.columns if c in plan.columns]
    return fit_plan(typed[planned], plan, report), report

