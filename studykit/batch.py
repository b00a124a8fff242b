"""Many characteristics at once: a plant-wide overview in one run.

:func:`run_many` analyses every characteristic of a measurement file (or a chosen subset)
with :func:`studykit.analysis.analyze_characteristic` and returns one overview row per
characteristic (the numbers of :meth:`~studykit.analysis.CharacteristicResult.headline`).
The work runs in parallel on the machine's cores (``concurrent.futures`` worker processes) or,
optionally, on a Dask cluster (``scheduler=ADDRESS``). Each worker receives a chunk of
characteristics as plain numpy arrays and specification dicts and sends back plain row dicts,
so little is pickled and the numbers are identical whichever backend runs them.

One characteristic that cannot be analysed gives a row with its error message; it never
stops the batch. A characteristic with no specification is analysed for stability only and
its row says so.

:class:`BatchResult` writes the overview as JSON lines, CSV or XLSX; CSV and XLSX go through
:mod:`studykit.export`, which neutralises text cells a spreadsheet would run as a formula.
"""

from __future__ import annotations

import json
import math
import os
import time
import warnings
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, fields
from pathlib import Path

import numpy as np

from studykit.errors import StudyInputError
from studykit.runtime import available_cores
from studykit.stats.result import json_float as _f

__all__ = [
    "BATCH_COLUMNS",
    "BatchResult",
    "NO_SPEC_NOTE",
    "run_many",
    "start_workers",
    "stop_workers",
]

#: Columns of the overview, in order (field names defined once for JSON, CSV and XLSX).
BATCH_COLUMNS = (
    "characteristic",
    "verdict",
    "meets",
    "withheld",
    "index",
    "estimate",
    "lower_bound",
    "model",
    "removed",
    "warnings",
    "n",
    "note",
    "error",
)

#: Note on the row of a characteristic analysed without specification limits.
NO_SPEC_NOTE = "no specification limits: stability only (add a row to the specs table)"

#: Chunks per worker: several, so the progress display moves and a slow chunk does not hold
#: back the end of the run (common practice, no source). 8: on the measured work of each
#: characteristic of the 1,000 x 125 benchmark, the later of two workers taking chunks in
#: turn ends 0.10 s after an even split with 4 chunks each, 0.02 s with 8 (16 or 32: no
#: better; sending a chunk costs about a millisecond), and a worker slowed by other load
#: hands over sooner.
CHUNKS_PER_WORKER = 8

#: Seconds to wait for a Dask scheduler to answer.
DASK_CONNECT_TIMEOUT = 10

#: Environment variable naming a folder: when set, every chunk runs under cProfile and its
#: process writes ``chunk-<pid>-<start>.prof`` and a line "start end characteristics" (wall
#: clock, seconds since the epoch) to ``chunks-<pid>.txt`` there (a measurement aid:
#: ``tests/bench/bench_batch.py --profile DIR``); unset, nothing is measured.
PROFILE_ENV = "STUDYKIT_BATCH_PROFILE"

# ----------------------------------------------------------------------------- result


@dataclass(frozen=True)
class BatchResult:
    """The overview of a batch run: one row per characteristic.

    Attributes
    ----------
    rows : tuple of dict
        One dict per characteristic with the keys of :data:`BATCH_COLUMNS`: ``characteristic``,
        ``verdict`` (sentence or None), ``meets`` (True/False/None), ``withheld`` (codes of the
        findings that withhold the verdict, comma-separated, or None), ``index`` (e.g. ``"ppk"``),
        ``estimate`` and ``lower_bound`` of that index, ``model`` (distribution model id),
        ``removed`` (phase-I removals), ``warnings`` (count), ``n`` (values used), ``note`` and
        ``error`` (message, or None when the analysis ran).
    jobs : int
        Worker processes used (1: in this process).
    backend : str
        ``"local"`` (this process), ``"processes"`` or ``"dask"``.
    seconds : float
        Wall time of the analyses (not of reading the file).
    """

    rows: tuple
    jobs: int = 1
    backend: str = "local"
    seconds: float = 0.0

    @property
    def n(self) -> int:
        return len(self.rows)

    @property
    def n_failed(self) -> int:
        """Rows whose analysis raised an error."""
        return sum(1 for r in self.rows if r["error"] is not None)

    @property
    def n_meeting(self) -> int:
        return sum(1 for r in self.rows if r["meets"] is True)

    @property
    def n_not_meeting(self) -> int:
        return sum(1 for r in self.rows if r["meets"] is False)

    def row(self, name: str) -> dict:
        """The row of characteristic ``name``."""
        for r in self.rows:
            if r["characteristic"] == name:
                return r
        raise StudyInputError(f"the batch has no characteristic '{name}'")

    def to_dict(self) -> dict:
        """JSON-safe: counts, backend and every row."""
        return {
            "n": self.n,
            "n_meeting": self.n_meeting,
            "n_not_meeting": self.n_not_meeting,
            "n_failed": self.n_failed,
            "jobs": self.jobs,
            "backend": self.backend,
            "seconds": _f(self.seconds),
            "columns": list(BATCH_COLUMNS),
            "rows": [dict(r) for r in self.rows],
        }

    def to_jsonl(self) -> str:
        """One JSON object per line, one line per characteristic."""
        return "".join(json.dumps(r, allow_nan=False) + "\n" for r in self.rows)

    def to_csv(self) -> str:
        """The overview as CSV text (:func:`studykit.export.csv_text`: header row, formula
        text neutralised)."""
        from studykit.export import csv_text

        return csv_text(self._table(), header=BATCH_COLUMNS)

    def _table(self):
        return [[r[c] for c in BATCH_COLUMNS] for r in self.rows]

    def write(self, path) -> Path:
        """Write the overview; the format follows the suffix: ``.csv``, ``.xlsx`` (sheet
        ``overview``), ``.jsonl`` (or ``.json``/``.ndjson``: JSON lines as well)."""
        from studykit.export import write_csv, write_xlsx

        p = Path(path)
        suffix = p.suffix.lower()
        if suffix == ".csv":
            write_csv(p, self._table(), header=BATCH_COLUMNS)
        elif suffix in (".jsonl", ".json", ".ndjson"):
            p.write_text(self.to_jsonl(), encoding="utf-8")
        elif suffix == ".xlsx":
            write_xlsx(p, self._table(), header=BATCH_COLUMNS, sheet="overview")
        else:
            raise StudyInputError(
                f"the summary file '{p.name}' has suffix '{p.suffix}': use .csv, .xlsx or .jsonl"
            )
        return p


# ----------------------------------------------------------------------------- tasks


@dataclass(frozen=True)
class _Data:
    """The part of CharacteristicData the analysis reads (cheap to rebuild in a worker)."""

    name: str
    unit: str | None
    values: np.ndarray
    subgroups: np.ndarray
    streams: np.ndarray | None = None  # several streams (cavity, spindle...), one per value


@dataclass(frozen=True)
class _Task:
    """One characteristic, as sent to a worker: arrays and plain dicts only."""

    name: str
    unit: str | None = None
    values: np.ndarray | None = None
    subgroups: np.ndarray | None = None
    sizes: np.ndarray | None = None
    spec: dict | None = None
    criteria: dict | None = None
    exclusions: dict | None = None
    note: str | None = None
    error: str | None = None
    streams: np.ndarray | None = None


def _empty_row(name: str) -> dict:
    return dict.fromkeys(BATCH_COLUMNS) | {"characteristic": name}


def _analyse_task(task: _Task, options) -> dict:
    """One row; never raises."""
    from studykit.analysis import analyze_characteristic
    from studykit.study import Characteristic, Criteria

    row = _empty_row(task.name)
    row["note"] = task.note
    if task.error is not None:
        row["error"] = task.error
        return row
    try:
        spec = Characteristic(**task.spec) if task.spec is not None else None
        crit = Criteria(**task.criteria) if task.criteria is not None else None
        data = _Data(task.name, task.unit, task.values, task.subgroups, task.streams)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            res = analyze_characteristic(
                data,
                spec,
                criteria=crit,
                sizes=task.sizes,
                exclusions=task.exclusions,
                options=options,
            )
        row = result_row(res, note=task.note)
        row["characteristic"] = task.name
    except StudyInputError as exc:
        row["error"] = str(exc)
    except Exception as exc:  # noqa: BLE001 - one bad characteristic never stops the batch
        row["error"] = f"could not be analysed ({type(exc).__name__}: {exc})"
    return row


def _run_chunk(tasks: list, options_dict: dict) -> list:
    """Worker entry point: a chunk of tasks -> a list of row dicts (module level: picklable)."""
    folder = os.environ.get(PROFILE_ENV)
    if folder:
        return _profiled_chunk(Path(folder), tasks, options_dict)
    return _analyse_chunk(tasks, options_dict)


def _analyse_chunk(tasks: list, options_dict: dict) -> list:
    from studykit.analysis import AnalysisOptions

    options = AnalysisOptions(**options_dict)
    return [_analyse_task(t, options) for t in tasks]


def _profiled_chunk(folder: Path, tasks: list, options_dict: dict) -> list:
    """:func:`_analyse_chunk` under cProfile, its profile and wall times written to
    ``folder`` (see :data:`PROFILE_ENV`)."""
    import cProfile

    profile = cProfile.Profile()
    start = time.time()
    with profile:
        rows = _analyse_chunk(tasks, options_dict)
    end = time.time()
    pid = os.getpid()
    profile.dump_stats(folder / f"chunk-{pid}-{start:.6f}.prof")
    with (folder / f"chunks-{pid}.txt").open("a", encoding="utf-8") as f:
        f.write(f"{start:.6f} {end:.6f} {len(tasks)}\n")
    return rows


def _chunks(items: list, size: int) -> list:
    return [items[i : i + size] for i in range(0, len(items), size)]


# ----------------------------------------------------------------------------- building tasks


def _spec_map(specs) -> dict:
    if specs is None:
        return {}
    if isinstance(specs, Mapping):
        return dict(specs)
    return {c.name: c for c in specs}


class _Lookup:
    """``names`` and ``get(name)`` of a :class:`~studykit.data.Measurements` through one dict
    built once (its ``get`` scans every characteristic: a thousand look-ups of a thousand
    characteristics were a million comparisons). The same answers: the first characteristic
    whose name or label is ``name``; any other spelling (case) and the error message come
    from the measurements' own ``get``."""

    def __init__(self, measurements):
        self._measurements = measurements
        self.names = tuple(measurements.names)
        self._by_name: dict = {}
        for c in getattr(measurements, "characteristics", ()):
            self._by_name.setdefault(c.name, c)
            self._by_name.setdefault(c.label, c)

    def get(self, name):
        found = self._by_name.get(name) if isinstance(name, str) else None
        return found if found is not None else self._measurements.get(name)


def _build_tasks(
    measurements, specs: dict, criteria: Mapping, exclusions: Mapping, names: Iterable[str] | None
) -> list[_Task]:
    from studykit.study import match_to_data

    measurements = _Lookup(measurements)
    size_columns = {c.size_column for c in specs.values() if c is not None and c.size_column}
    data_names = list(measurements.names)
    # specs are matched to the data's spelling (case, "name [unit]")
    resolved: dict[str, tuple] = {}
    spec_errors: dict[str, str] = {}
    for key, c in specs.items():
        if c is None:
            continue
        try:
            measurements.get(c.name)
        except StudyInputError:
            spec_errors[c.name] = (
                f"the specs table names '{c.name}', which is not in the "
                "data: correct the name or remove the row"
            )
            continue
        try:
            (matched,), crit = match_to_data(
                [c], {c.name: criteria[key]} if key in criteria else {}, measurements
            )
        except StudyInputError as exc:
            spec_errors[c.name] = str(exc)
            continue
        resolved[matched.name] = (matched, crit.get(matched.name))
    if names is None:
        wanted = [n for n in data_names if n not in size_columns]
        wanted += [n for n in spec_errors if n not in wanted]
    else:
        wanted = list(names)
    tasks = []
    for name in wanted:
        if name in spec_errors:
            tasks.append(_Task(name=name, error=spec_errors[name]))
            continue
        try:
            data = measurements.get(name)
        except StudyInputError as exc:
            tasks.append(_Task(name=name, error=str(exc)))
            continue
        spec, crit = resolved.get(data.name, (None, None))
        if crit is None:
            crit = criteria.get(data.name)
        sizes = None
        if spec is not None and spec.size_column:
            try:
                sizes = np.asarray(measurements.get(spec.size_column).values, dtype=float)
            except StudyInputError as exc:
                tasks.append(_Task(name=data.name, error=str(exc)))
                continue
        no_limits = spec is None or (
            spec.lsl is None and spec.usl is None and not spec.is_attribute
        )
        tasks.append(
            _Task(
                name=data.name,
                unit=data.unit,
                values=np.asarray(data.values, dtype=float),
                subgroups=np.asarray(data.subgroups),
                sizes=sizes,
                spec=None if spec is None else spec.to_dict(),
                criteria=None if crit is None else crit.to_dict(),
                exclusions=dict(exclusions.get(data.name, {})) or None,
                note=NO_SPEC_NOTE if no_limits else None,
                streams=getattr(data, "streams", None),
            )
        )
    return tasks


# ----------------------------------------------------------------------------- run


def default_jobs() -> int:
    """Cores this process may use (:func:`studykit.runtime.available_cores`)."""
    return available_cores()


def run_many(
    measurements,
    specs=None,
    criteria: Mapping | None = None,
    *,
    options=None,
    jobs: int | None = None,
    progress: Callable[[int, int, str], None] | None = None,
    scheduler=None,
    names: Iterable[str] | None = None,
    exclusions: Mapping | None = None,
    chunk_size: int | None = None,
    pool=None,
) -> BatchResult:
    """Analyse many characteristics; one overview row each, in the order of the data file.

    Parameters
    ----------
    measurements : studykit.data.Measurements
        The data (``names`` and ``get(name)``).
    specs : iterable of Characteristic or mapping name -> Characteristic, optional
        Specifications (e.g. from :func:`studykit.study.read_specs`). A characteristic without
        one is analysed for stability only (row note :data:`NO_SPEC_NOTE`); a spec naming a
        characteristic that is not in the data gives an error row. Columns named as a
        ``size_column`` are lot sizes, not characteristics, and get no row of their own.
    criteria : mapping name -> Criteria, optional
        Acceptance criteria (default :class:`studykit.study.Criteria`).
    options : AnalysisOptions, optional
        The same options for every characteristic.
    jobs : int, optional
        Worker processes; default: the cores available. ``1`` runs in this process.
    progress : callable, optional
        ``progress(done, total, name)`` after each finished chunk (``name``: its last
        characteristic), in the calling process.
    scheduler : str or distributed.Client, optional
        Address of a Dask scheduler (``tcp://host:8786``) or a client: the same chunks run on
        that cluster instead of local processes. Needs the ``distributed`` package.
    names : iterable of str, optional
        Analyse only these characteristics, in this order.
    exclusions : mapping name -> {subgroup label: (reason, who)}, optional
        Recorded manual exclusions per characteristic.
    chunk_size : int, optional
        Characteristics per task; default total / (jobs x :data:`CHUNKS_PER_WORKER`).
    pool : concurrent.futures.ProcessPoolExecutor, optional
        Worker processes started beforehand by :func:`start_workers` (they prepare while the
        caller reads the data); used when the run goes to local processes, ended by the
        caller (:func:`stop_workers`). Default: a pool of ``jobs`` processes started here.

    Returns
    -------
    BatchResult
        ``rows`` (dicts with the keys of :data:`BATCH_COLUMNS`), ``jobs``, ``backend``,
        ``seconds``; ``n``, ``n_failed``, ``n_meeting``, ``n_not_meeting``; ``to_dict()``,
        ``to_jsonl()``, ``to_csv()``, ``write(path)``.

    Notes
    -----
    Each row holds exactly the numbers of ``analyze_characteristic(...).headline()`` for that
    characteristic, whichever backend computed it: the work is deterministic (the bootstrap
    seed is ``options.random_state``) and no state is shared between characteristics.

    A Dask cluster pays when one machine cannot finish the run in time: at about 12 ms of
    CPU per characteristic (about 50 ms for one with a fitted non-normal model), 100,000
    characteristics take 10-20 minutes on 2 cores and a minute or two on 20-40 cores; on one
    machine, local processes are faster (no scheduler round trips).

    Examples
    --------
    >>> from studykit.data import CharacteristicData, Measurements
    >>> from studykit.study import Characteristic
    >>> x = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    >>> m = Measurements("demo.csv", "", "wide", "none",
    ...                  (CharacteristicData("gap", "mm", x), CharacteristicData("flat", "mm", x)))
    >>> res = run_many(m, [Characteristic("gap", lsl=40, usl=60)], jobs=1)
    >>> [(r["characteristic"], r["meets"], r["n"]) for r in res.rows]
    [('gap', False, 10), ('flat', None, 10)]
    >>> res.rows[1]["note"] == NO_SPEC_NOTE
    True
    """
    from studykit.analysis import AnalysisOptions

    options = options or AnalysisOptions()
    options_dict = {f.name: getattr(options, f.name) for f in fields(options)}
    tasks = _build_tasks(
        measurements, _spec_map(specs), dict(criteria or {}), dict(exclusions or {}), names
    )
    total = len(tasks)
    if jobs is not None and (isinstance(jobs, bool) or int(jobs) < 1):
        raise StudyInputError(f"`jobs` ({jobs!r}) must be a whole number of at least 1")
    jobs = default_jobs() if jobs is None else int(jobs)
    started = time.perf_counter()
    if scheduler is not None:
        rows = _run_dask(tasks, options_dict, scheduler, progress, chunk_size)
        backend = "dask"
    else:
        jobs = max(1, min(jobs, total))
        if chunk_size is None:
            chunk_size = max(1, math.ceil(total / (jobs * CHUNKS_PER_WORKER)))
        chunks = _chunks(tasks, int(chunk_size))
        if jobs == 1 or len(chunks) <= 1:
            rows = []
            for chunk in chunks:
                rows.extend(_run_chunk(chunk, options_dict))
                if progress is not None:
                    progress(len(rows), total, rows[-1]["characteristic"])
            backend, jobs = "local", 1
        else:
            rows = _run_processes(chunks, options_dict, jobs, progress, total, pool)
            backend = "processes"
    return BatchResult(
        rows=tuple(rows), jobs=jobs, backend=backend, seconds=time.perf_counter() - started
    )


def _warm_worker() -> None:
    """Worker start-up: the tables and modules every analysis needs that the parent has not
    loaded, done once per process before its first chunk (the same ones a chunk would load
    itself, so the numbers are unchanged). Not scipy.stats: the fitted families' cdf and sf
    are computed without it (studykit/stats/families/density.py), so a batch of normal and
    fitted characteristics never loads it (about 0.5 s of CPU and 60 MB per worker); a route
    that still needs it loads it on first use."""
    from studykit.stats.constants import gauss_legendre

    gauss_legendre(400)  # the d3 quadrature rule


def start_workers(jobs: int | None = None):
    """Start ``jobs`` worker processes now (default: the cores available) and let each one
    prepare (the d3 quadrature rule) while this process goes on (e.g. reads the
    measurement file): a ``ProcessPoolExecutor`` to pass to :func:`run_many` as ``pool`` and
    to end with :func:`stop_workers` (or use as ``with start_workers(2) as pool:``), or None
    for one job. Forked where the platform can fork (the workers inherit this process's
    modules and settings, e.g. one BLAS thread)."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    jobs = default_jobs() if jobs is None else int(jobs)
    if jobs < 2:
        return None
    # the analysis modules (and studykit.stats, which reading the file needs as well) once
    # here, before the fork, so the workers share them
    import studykit.analysis  # noqa: F401

    methods = multiprocessing.get_all_start_methods()
    ctx = multiprocessing.get_context("fork" if "fork" in methods else None)
    pool = ProcessPoolExecutor(max_workers=jobs, mp_context=ctx, initializer=_warm_worker)
    pool.submit(int)  # the first task starts every (forked) worker, which then warms up
    return pool


def stop_workers(pool, *, wait: bool = True) -> None:
    """End the workers of :func:`start_workers`. ``wait=False`` (a file that could not be
    read): return at once, so the message is shown without waiting for the workers to finish
    preparing (the interpreter still ends them before it exits)."""
    pool.shutdown(wait=wait, cancel_futures=True)


def _run_processes(chunks, options_dict, jobs, progress, total, pool=None) -> list:
    from concurrent.futures import as_completed

    own = pool is None
    if own:
        pool = start_workers(jobs)
    results: list = [None] * len(chunks)
    done = 0
    try:
        futures = {
            pool.submit(_run_chunk, chunk, options_dict): i for i, chunk in enumerate(chunks)
        }
        for fut in as_completed(futures):
            i = futures[fut]
            results[i] = fut.result()
            done += len(results[i])
            if progress is not None:
                progress(done, total, results[i][-1]["characteristic"])
    finally:
        if own:
            stop_workers(pool)
    return [row for chunk in results for row in chunk]


def _run_dask(tasks, options_dict, scheduler, progress, chunk_size) -> list:
    try:
        from distributed import Client, as_completed
    except ImportError:  # pragma: no cover - optional dependency
        raise StudyInputError(
            "`scheduler` needs the Dask 'distributed' package: pip install 'dask[distributed]'"
        ) from None
    own = not isinstance(scheduler, Client)
    try:
        client = (
            Client(scheduler, set_as_default=False, timeout=DASK_CONNECT_TIMEOUT)
            if own
            else scheduler
        )
    except (OSError, TimeoutError, ValueError) as exc:
        raise StudyInputError(
            f"`scheduler` ({scheduler!r}): no Dask scheduler answers at that address ({exc}); "
            "start one (dask scheduler) or leave --scheduler out to run locally"
        ) from None
    try:
        total = len(tasks)
        if chunk_size is None:
            workers = max(1, sum(client.nthreads().values()))
            chunk_size = max(1, math.ceil(total / (workers * CHUNKS_PER_WORKER)))
        chunks = _chunks(tasks, int(chunk_size))
        futures = client.map(_run_chunk, chunks, [options_dict] * len(chunks), pure=False)
        index = {f.key: i for i, f in enumerate(futures)}
        results: list = [None] * len(chunks)
        done = 0
        for fut in as_completed(futures, loop=client.loop):
            i = index[fut.key]
            results[i] = fut.result()
            done += len(results[i])
            if progress is not None:
                progress(done, total, results[i][-1]["characteristic"])
        return [row for chunk in results for row in chunk]
    finally:
        if own:
            client.close()


def result_row(result, *, note: str | None = None) -> dict:
    """The overview row of one :class:`~studykit.analysis.CharacteristicResult`, as a batch
    shows it (``error`` None)."""
    row = _empty_row(result.characteristic)
    row["note"] = note
    head = result.headline()
    for key in BATCH_COLUMNS:
        if key in head:
            row[key] = head[key]
    row["n"] = int(result.n)
    return row
