"""``studykit analyze FILE --all``: every characteristic of a file, one overview row each.

Called by :mod:`studykit.cli.analyze` for ``--all``. Specifications come from ``--specs``
(a specs table), from a saved ``--study``, or, for characteristics not in the table, from
``--lsl/--usl/--target`` when given; otherwise the characteristic is analysed for stability
only. The overview goes to the terminal (a table), to stdout as JSON lines (``--json``) or to
a file (``--out summary.csv|.xlsx|.jsonl``). Work runs on ``--jobs N`` local processes
(default: every core) or on a Dask cluster (``--scheduler ADDRESS``).
"""

from __future__ import annotations

import contextlib
import sys

from studykit.cli.args import (
    analysis_options,
    criteria_from_args,
    read_file_measurements,
    spec_from_args,
)
from studykit.errors import StudyInputError


class ProgressBar:
    """A one-line progress bar on a terminal stream (silent when it is not a terminal)."""

    def __init__(self, stream=None, *, width: int = 30, force: bool = False):
        self.stream = stream if stream is not None else sys.stderr
        self.width = width
        self.active = force or bool(getattr(self.stream, "isatty", lambda: False)())
        self._shown = False

    def __call__(self, done: int, total: int, name: str) -> None:
        if not self.active or total <= 0:
            return
        filled = int(self.width * done / total)
        bar = "#" * filled + "-" * (self.width - filled)
        label = str(name)[:30]
        self.stream.write(f"\r[{bar}] {done}/{total} {label:<30}")
        self.stream.flush()
        self._shown = True

    def close(self) -> None:
        if self._shown:
            self.stream.write("\n")
            self.stream.flush()
            self._shown = False


def _inputs(args):
    """(measurements, specs dict, criteria dict, exclusions dict) from the arguments."""
    if args.study:
        from studykit.analysis import read_study_measurements, recorded_exclusions
        from studykit.store import StudyFile

        study = StudyFile(args.study).load()
        measurements = read_study_measurements(study)
        specs, criteria, exclusions = {}, {}, {}
        from dataclasses import replace

        for name in study.characteristic_names:
            base = study.characteristic(name)
            spec = spec_from_args(args, name, base.unit, base)
            specs[name] = replace(
                spec,
                chart=args.chart.replace("-", "_") if args.chart else study.chart_for(name),
                model=args.model or study.model_for(name),
            )
            criteria[name] = criteria_from_args(args, study.criteria_for(name))
            exclusions[name] = recorded_exclusions(study, name)
        return measurements, specs, criteria, exclusions
    if not args.file:
        raise StudyInputError("give a measurement FILE or --study STUDYFILE")
    measurements = read_file_measurements(args)
    specs, criteria = {}, {}
    if args.specs:
        from studykit.study import read_specs

        chars, table_criteria = read_specs(args.specs)
        specs = {c.name: c for c in chars}
        criteria = dict(table_criteria)
    sizes = {c.size_column for c in specs.values() if c.size_column}
    if args.size_column:
        sizes.add(args.size_column)
    for name in measurements.names:
        if name in specs or name in sizes:
            continue
        if any(name.casefold() == k.casefold() for k in specs):
            continue
        spec = spec_from_args(args, name, measurements.get(name).unit)
        if spec is not None:
            specs[name] = spec
    if args.index is not None or args.threshold is not None or args.basis is not None:
        criteria = {name: criteria_from_args(args, criteria.get(name)) for name in specs}
    return measurements, specs, criteria, {}


def format_table(result) -> str:
    """The overview as a plain terminal table."""
    head = ("characteristic", "verdict", "index", "estimate", "lower", "model", "removed", "warn")
    rows = []
    for r in result.rows:
        if r["error"] is not None:
            verdict = "ERROR"
        else:
            verdict = {True: "meets", False: "does not meet", None: "not judged"}[r["meets"]]
            if r.get("withheld"):
                verdict += f" ({r['withheld']})"
        rows.append(
            (
                r["characteristic"],
                verdict,
                r["index"] or "-",
                _num(r["estimate"]),
                _num(r["lower_bound"]),
                r["model"] or "-",
                str(r["removed"] or 0),
                str(r["warnings"] or 0),
            )
        )
    widths = [
        max(len(h), *(len(str(row[i])) for row in rows)) if rows else len(h)
        for i, h in enumerate(head)
    ]
    lines = [
        "  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)),
        "  ".join("-" * w for w in widths),
    ]
    for row in rows:
        lines.append("  ".join(str(c).ljust(w) for c, w in zip(row, widths, strict=True)))
    for r in result.rows:
        if r["error"] is not None:
            lines.append(f"error: {r['characteristic']}: {r['error']}")
        elif r["note"]:
            lines.append(f"note: {r['characteristic']}: {r['note']}")
    lines.append(_summary_line(result))
    return "\n".join(lines) + "\n"


def _summary_line(result) -> str:
    return (
        f"{result.n} characteristic(s): {result.n_meeting} meet, {result.n_not_meeting} do "
        f"not meet, {result.n_failed} could not be analysed ({result.seconds:.1f} s, "
        f"{result.backend}, {result.jobs} job(s))"
    )


def _num(v) -> str:
    return "-" if v is None else f"{v:.3f}"


def one_blas_thread():
    """A context in which the BLAS libraries loaded by numpy and scipy use one thread each
    (``threadpoolctl``; no change where it is not installed).

    The batch's work is element-wise numpy on small arrays, run on one process per core; the
    few BLAS calls (the eigenvalue problem behind the 400-point quadrature of the constant d3)
    gain nothing from a second thread but wait for it when the cores are busy: on a loaded
    2-core machine ``leggauss(400)`` took 0.4-3.4 s on 2 BLAS threads and 0.03 s on one.
    Worker processes forked inside the context inherit the setting. Same numbers (the
    quadrature nodes and weights are bit-identical on 1 and 2 threads; a test checks)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - an optional helper
        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


def run_batch(args) -> int:
    """``studykit analyze ... --all``; exit status 0 when the batch ran (error rows included)."""
    if args.characteristic:
        raise StudyInputError("give either --characteristic NAME or --all, not both")
    with one_blas_thread():
        return _run_batch(args)


def _run_batch(args) -> int:
    from studykit.batch import run_many, start_workers, stop_workers

    # the worker processes start first and load the analysis' libraries while this one reads
    pool = None if args.scheduler or args.jobs == 1 else start_workers(args.jobs)
    bar = ProgressBar()
    ran = False
    try:
        measurements, specs, criteria, exclusions = _inputs(args)
        result = run_many(
            measurements,
            specs,
            criteria,
            options=analysis_options(args),
            jobs=args.jobs,
            progress=bar,
            scheduler=args.scheduler,
            exclusions=exclusions,
            pool=pool,
        )
        ran = True
    finally:
        bar.close()
        if pool is not None:  # on an error: the message first, not after the workers' start
            stop_workers(pool, wait=ran)
    if args.out:
        path = result.write(args.out)
        print(f"{_summary_line(result)}; overview written to {path.name}", file=sys.stderr)
    if args.json:
        sys.stdout.write(result.to_jsonl())
    elif not args.out:
        sys.stdout.write(format_table(result))
    return 0
