"""The distributed engine (``--engine dask``): the local engine's checks on a dask cluster.

The run is the one :func:`catcheck.engine.run_rules` makes, cut into *parts*: runs of
consecutive Parquet row groups (:meth:`ParquetCatalogue.pieces`), or of whole files for a
hive-partitioned dataset (whose partition keys become columns, as in the local engine),
listed from the files' footers on the driver, so every part knows its first global
``row`` before anything is read.

Pass 1 (only when a group rule runs) sends each part to a worker, which aggregates its
group variables into a :class:`~catcheck.groups.GroupAccumulator`; the driver merges the
partial states in row order, which gives exactly the statistics of one pass over all
rows.  Pass 2 sends each part, with the group statistics, to a worker, which checks its
batches with the same :class:`~catcheck.engine.BatchChecker` on the same
:func:`~catcheck.canonical.canonical_batch` conversion; the driver takes the results in
row order, counts them and streams the flags to the sink as the local engine does.  So
flags, counts and the unmapped phase labels are the local engine's, whatever the number
of workers, parts or batch size.

Why futures over row groups, not ``dask.dataframe``: the rules read Arrow record batches
(dictionary-coded labels, nullable integers, text), which a trip through pandas partitions
would change; a dataframe has no global row position, which the flags need; and
``Client.submit`` in a bounded window lets the driver write flags in row order while
holding only a few parts' results, where a dataframe reduction would gather them all.

Workers need catcheck (the same version) installed and the catalogue at the same path.
Other formats (CSV, FITS, VOTable, ECSV) are refused: convert them to Parquet.
"""

from __future__ import annotations

import asyncio
import copy
import functools
import logging
from collections import Counter, deque
from collections.abc import Callable, Collection, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pyarrow as pa

from catcheck.canonical import Labels, StarBatch, canonical_batch
from catcheck.engine import (
    BatchChecker,
    BatchResult,
    Catalogue,
    FlagSink,
    RunStats,
    group_plan,
    start_run,
)
from catcheck.errors import UsageError
from catcheck.formats import JoinedCatalogue
from catcheck.groups import GroupAccumulator, GroupSummary, GroupVariable
from catcheck.packs import Rule
from catcheck.profile import Profile
from catcheck.reader import ParquetCatalogue, ParquetPiece
from catcheck.tuning import keep_freed_memory

if TYPE_CHECKING:
    from distributed import Client, Future

INSTALL_HINT = 'pip install "catcheck[dask]"'
#: rows per unit of work, about one default batch (whole row groups: a part is larger
#: when a row group is); small enough to spread a million rows over a few workers
PART_ROWS = 1 << 18
#: seconds to wait for a scheduler to answer, then for its first worker
CONNECT_TIMEOUT_SECONDS = 10
WORKER_TIMEOUT_SECONDS = 30


@dataclass(frozen=True)
class FilePiece:
    """One file of a hive-partitioned dataset (a :class:`JoinedCatalogue` of one part),
    whose first row is row ``first_row`` of the whole catalogue."""

    first_row: int
    file: JoinedCatalogue

    @property
    def path(self) -> Path:
        """The file's path, for messages."""
        return self.file.parts[0].catalogue.files[0]

    def batches(self, columns: Sequence[str], batch_rows: int, *,
                dictionary: Collection[str] = ()) -> Iterator[tuple[int, pa.RecordBatch]]:
        """Yield ``(first_row, batch)`` over the file, rows numbered in the catalogue."""
        for first_row, batch in self.file.batches(columns, batch_rows, dictionary=dictionary):
            yield self.first_row + first_row, batch


Piece = ParquetPiece | FilePiece
#: the unit of work: consecutive pieces, in row order
Part = tuple[Piece, ...]


@dataclass(frozen=True)
class _PassInputs:
    """What every task of one pass needs; sent to each worker once."""

    profile: Profile  # the profile to read with (pass 1 reads fewer quantities)
    labels: Labels  # the run's label maps as the pass starts; each task works on a copy
    batch_rows: int
    variables: dict[str, GroupVariable] = field(default_factory=dict)  # pass 1
    checker: BatchChecker | None = None  # pass 2
    group_stats: dict[str, GroupSummary] = field(default_factory=dict)  # pass 2


def run_rules_on_dask(catalogue: Catalogue, profile: Profile, rules: Sequence[Rule],
                      sink: FlagSink, batch_rows: int,
                      progress: Callable[[int], None] | None = None, workers: int = 1, *,
                      scheduler: str | None = None, part_rows: int | None = None) -> RunStats:
    """:func:`catcheck.engine.run_rules` on a dask cluster: same statistics, same flags.

    Runs on the scheduler at ``scheduler`` (``tcp://host:port``), or else on a local
    cluster of ``workers`` single-threaded processes started for this run.  Flags reach
    ``sink`` in row order.  ``part_rows`` sets the rows per task (whole row groups;
    default :data:`PART_ROWS`).
    """
    distributed = _import_distributed()  # before any work: a missing extra fails fast
    parts = catalogue_parts(catalogue, part_rows or PART_ROWS)
    stats, checker, labels = start_run(catalogue, profile, rules)
    with _connect(distributed, scheduler, workers) as client:
        group_stats: dict[str, GroupSummary] = {}
        plan = group_plan(checker.rules, profile)
        if plan is not None:
            variables, reading = plan
            accumulator = GroupAccumulator(variables)
            inputs = _PassInputs(reading, labels, batch_rows, variables=variables)
            for known, partial in _in_order(client, _aggregate_part, parts, inputs):
                accumulator.merge(partial, labels.groups.register(known))
            group_stats = accumulator.finish(len(labels.groups.code_of))
        inputs = _PassInputs(profile, labels, batch_rows, checker=checker,
                             group_stats=group_stats)
        unmapped: Counter[str] = Counter()
        for results, part_unmapped in _in_order(client, _check_part, parts, inputs):
            for result in results:
                stats.add_batch(result, sink)
                if progress:
                    progress(result.rows)
            unmapped.update(part_unmapped)
    stats.unmapped_phase_labels = dict(sorted(unmapped.items()))
    return stats


def catalogue_parts(catalogue: Catalogue, part_rows: int = PART_ROWS) -> list[Part]:
    """The catalogue's pieces, in row order, gathered into parts of at most ``part_rows``.

    Pieces are the row groups of Parquet files, or the files of a hive-partitioned
    dataset; a part never splits a piece (a piece larger than ``part_rows`` is a part).
    Paths are made absolute for the workers.  Other catalogues are a :class:`UsageError`.
    """
    pieces = _pieces(catalogue)
    ends = [piece.first_row for piece in pieces[1:]] + [catalogue.num_rows]
    parts: list[Part] = []
    current: list[Piece] = []
    for piece, end in zip(pieces, ends, strict=True):
        if current and end - current[0].first_row > part_rows:
            parts.append(tuple(current))
            current = []
        current.append(piece)
    if current:
        parts.append(tuple(current))
    return parts


def _pieces(catalogue: Catalogue) -> list[Piece]:
    """Row groups of a Parquet catalogue, or files of a partitioned one; absolute paths."""
    if isinstance(catalogue, ParquetCatalogue):
        return [replace(piece, path=piece.path.absolute()) for piece in catalogue.pieces()]
    if isinstance(catalogue, JoinedCatalogue) and all(
            isinstance(part.catalogue, ParquetCatalogue) for part in catalogue.parts):
        pieces, first_row = [], 0
        for part in catalogue.parts:
            files = tuple(path.absolute() for path in part.catalogue.files)
            readable = replace(part, catalogue=replace(part.catalogue, files=files))
            pieces.append(FilePiece(first_row, JoinedCatalogue.of([readable])))
            first_row += part.catalogue.num_rows
        return pieces
    raise UsageError("the dask engine reads Parquet files and Parquet datasets only",
                     where=catalogue.description,
                     fix="convert the catalogue to Parquet, or use --engine local")


def _star_batches(part: Part, inputs: _PassInputs, labels: Labels) -> Iterator[StarBatch]:
    """The part's rows as canonical batches, read with the pass's profile."""
    columns = inputs.profile.columns
    for piece in part:
        for first_row, batch in piece.batches(columns, inputs.batch_rows,
                                              dictionary=inputs.profile.label_columns):
            yield canonical_batch(inputs.profile, batch, first_row, labels)


@functools.cache
def _tune_worker() -> None:
    """Once per worker process, the command line's memory tuning (:mod:`catcheck.tuning`).

    dask starts workers with glibc told to hand freed memory back at once; then every
    batch's numpy temporaries page-fault afresh, which makes the checks about 3x slower.
    """
    keep_freed_memory()


def _aggregate_part(part: Part, inputs: _PassInputs) -> tuple[list[str], GroupAccumulator]:
    """Pass 1 on a worker: the group labels it knows, in code order, and its statistics."""
    _tune_worker()
    labels = copy.deepcopy(inputs.labels)
    accumulator = GroupAccumulator(inputs.variables)
    for stars in _star_batches(part, inputs, labels):
        accumulator.add(stars)
    return list(labels.groups.code_of), accumulator


def _check_part(part: Part, inputs: _PassInputs) -> tuple[list[BatchResult], Counter[str]]:
    """Pass 2 on a worker: each batch's result, in row order, and the unmapped labels."""
    _tune_worker()
    assert inputs.checker is not None, "pass 2 carries the checker"
    labels = copy.deepcopy(inputs.labels)
    results = []
    for stars in _star_batches(part, inputs, labels):
        stars.group_stats = inputs.group_stats
        results.append(inputs.checker.check(stars))
    return results, labels.phases.unmapped


def _in_order(client: Client, task: Callable[[Part, _PassInputs], Any], parts: list[Part],
              inputs: _PassInputs) -> Iterator[Any]:
    """``task(part, inputs)`` for every part on the cluster, results in part order.

    ``inputs`` goes to every worker once; at most two tasks per worker thread are in
    flight or waiting to be collected, so memory stays bounded on both sides.
    """
    if not parts:
        return
    shared = client.scatter(inputs, broadcast=True, hash=False)
    window = max(2, 2 * sum(client.nthreads().values()))
    pending: deque[tuple[Part, Future]] = deque()
    try:
        for part in parts:
            pending.append((part, client.submit(task, part, shared, pure=False)))
            if len(pending) >= window:
                yield _result(*pending.popleft())
        while pending:
            yield _result(*pending.popleft())
    finally:
        client.cancel([future for _, future in pending] + [shared])


def _result(part: Part, future: Future) -> Any:
    """The task's result; a lost worker or a worker without catcheck is one clear error."""
    from distributed import KilledWorker

    where = f"{part[0].path} (rows from {part[0].first_row})"
    try:
        return future.result()
    except ImportError as exc:
        raise UsageError(f"a dask worker cannot run catcheck: {exc}", where=where,
                         fix="install catcheck, the same version, on every worker"
                         ) from None
    except KilledWorker:
        raise UsageError("the dask workers died while checking this part", where=where,
                         fix="see the worker logs; out of memory? lower --batch-rows or "
                             "give the workers more memory") from None


def _import_distributed() -> Any:
    try:
        import distributed
    except ImportError:
        raise UsageError("--engine dask needs dask.distributed, which is not installed",
                         fix=INSTALL_HINT) from None
    return distributed


@contextmanager
def _connect(distributed: Any, scheduler: str | None, workers: int) -> Iterator[Client]:
    """A client of the scheduler at ``scheduler``, or of a local cluster started here.

    The local cluster logs only critical events: a task's error (an unreadable file)
    reaches the user once, as catcheck's one-line message, never as a worker traceback.
    """
    if scheduler is None:
        with distributed.LocalCluster(n_workers=workers, threads_per_worker=1,
                                      processes=True, dashboard_address=":0",
                                      silence_logs=logging.CRITICAL) as cluster, \
                distributed.Client(cluster, set_as_default=False) as client:
            yield client
        return
    try:
        client = distributed.Client(scheduler, timeout=CONNECT_TIMEOUT_SECONDS,
                                    set_as_default=False)
    except (OSError, TimeoutError, asyncio.TimeoutError, ValueError, TypeError) as exc:
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise UsageError(f"cannot reach the dask scheduler: {reason}", where=scheduler,
                         fix="start one with `dask scheduler` and give its address, "
                             "e.g. --scheduler tcp://HOST:8786") from None
    with client:
        try:
            client.wait_for_workers(1, timeout=WORKER_TIMEOUT_SECONDS)
        except (TimeoutError, asyncio.TimeoutError):  # one class from Python 3.11
            raise UsageError(f"the dask scheduler has no worker after "
                             f"{WORKER_TIMEOUT_SECONDS} s", where=scheduler,
                             fix=f"start workers with `dask worker {scheduler}`") from None
        yield client
