"""The study of a characteristic made by several streams (cavities, spindles, nests, heads).

:func:`analyze_streams` runs the ordinary analysis (:func:`studykit.analysis.analyze_characteristic`)
on the process as a whole and on each stream alone, tests whether the streams differ in location
(one-way ANOVA) and spread (Brown-Forsythe), draws the group chart (largest and smallest stream
mean per subgroup; :mod:`studykit.stats.streams`) and names the worst stream. The result of the
whole process carries it all in ``CharacteristicResult.streams``.

The verdict of the characteristic is the whole process's verdict, with one rule of ours: a part
of every stream must meet the criterion, so when the whole meets it and a stream does not, the
verdict becomes "does not meet" and names that stream (ours, common practice, no source). Where
the streams differ, the verdict text names the worst stream (the lowest judged index).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from studykit.errors import StudyInputError
from studykit.stats import streams as streams_module
from studykit.stats.capability import Finding

__all__ = ["StreamsResult", "analyze_streams"]

#: Keys of each stream's own analysis JSON kept in ``streams.per_stream`` (the same meaning as
#: at the top level of ``analyze --json``).
_STREAM_KEYS = (
    "n",
    "subgroups",
    "subgroup_size",
    "mean",
    "within_sigma",
    "overall_sigma",
    "chart",
    "model",
    "capability",
    "verdict",
    "findings",
    "warnings",
)


@dataclass(frozen=True, eq=False)
class StreamsResult:
    """Streams of one characteristic.

    Attributes
    ----------
    names : tuple of str
        Stream labels in order of first appearance.
    results : dict
        Stream label -> its own CharacteristicResult (chart, capability, verdict).
    location, spread : StreamTest or None
        One-way ANOVA of the stream means; Brown-Forsythe test of the stream spreads (None
        when a stream has fewer than 2 values).
    group : GroupChart or None
    worst : str or None
        The stream with the lowest judged index (lower bound or estimate, as the criterion
        judges).
    differ : bool
        Either test found a difference.
    errors : dict
        Stream label -> why it could not be analysed alone.
    """

    names: tuple
    results: dict
    location: object
    spread: object
    group: object
    worst: str | None
    differ: bool
    errors: dict

    def judged(self, name) -> float | None:
        """The judged value (lower bound or estimate) of stream ``name``."""
        res = self.results.get(name)
        v = None if res is None else res.verdict
        if v is None:
            return None
        return v.lower_bound if v.basis == "lower_bound" else v.estimate

    def to_dict(self) -> dict:
        per = []
        for name in self.names:
            res = self.results.get(name)
            if res is None:
                per.append({"stream": name, "error": self.errors.get(name)})
                continue
            d = res.to_dict()
            per.append({"stream": name, **{k: d.get(k) for k in _STREAM_KEYS}})
        return {
            "names": list(self.names),
            "location_test": None if self.location is None else self.location.to_dict(),
            "spread_test": None if self.spread is None else self.spread.to_dict(),
            "differ": self.differ,
            "worst": self.worst,
            "group_chart": None if self.group is None else self.group.to_dict(),
            "per_stream": per,
        }


def _subset(data, mask):
    from studykit.data import CharacteristicData

    def pick(key):  # the batch's lighter data object has no times, notes or rows
        a = getattr(data, key, None)
        return None if a is None else np.asarray(a)[mask]

    return CharacteristicData(
        name=data.name,
        unit=data.unit,
        values=np.asarray(data.values, dtype=float)[mask],
        subgroups=pick("subgroups"),
        times=pick("times"),
        notes=pick("notes"),
        rows=pick("rows"),
    )


def _fmt(v) -> str:
    return "n/a" if v is None else f"{v:.2f}"


def analyze_streams(data, spec=None, *, analyze, **kwargs):
    """Analyse ``data`` (with ``data.streams``) as a whole and per stream.

    ``analyze`` is :func:`studykit.analysis.analyze_characteristic`; ``kwargs`` are its keyword
    arguments (criteria, sizes, exclusions, options, gauge, kept). Returns the whole process's
    CharacteristicResult with ``streams`` set.
    """
    labels = np.asarray(data.streams).astype(str)
    whole = analyze(replace(data, streams=None), spec, **kwargs)
    if whole.attribute:
        return replace(
            whole,
            warnings=whole.warnings
            + ("the stream column was not used: streams are analysed for measured values only",),
        )
    names = tuple(streams_module.stream_order(labels))
    excl = kwargs.get("exclusions") or {}
    results, errors = {}, {}
    for name in names:
        mask = labels == name
        sub = _subset(data, mask)
        own = set(np.asarray(sub.subgroups).astype(str).tolist())
        kw = dict(
            kwargs,
            gauge=None,
            kept=None,
            exclusions={k: v for k, v in excl.items() if str(k) in own},
        )
        try:
            results[name] = analyze(sub, spec, **kw)
        except StudyInputError as exc:
            errors[name] = str(exc)
    # the tests and the group chart use the readings the whole analysis kept
    removed = [str(r) for r in whole.removed_subgroups]
    values = np.asarray(data.values, dtype=float)
    kept = ~np.isin(np.asarray(data.subgroups).astype(str), removed) & ~np.isnan(values)
    x, sg, st = values[kept], np.asarray(data.subgroups).astype(str)[kept], labels[kept]
    location = spread = group = None
    try:
        location = streams_module.location_test(x, st)
        spread = streams_module.spread_test(x, st)
    except StudyInputError as exc:
        errors["tests"] = str(exc)
    try:
        group = streams_module.group_chart(x, sg, st)
    except StudyInputError as exc:
        errors["group_chart"] = str(exc)
    differ = bool(
        (location is not None and location.differ) or (spread is not None and spread.differ)
    )
    out = StreamsResult(
        names=names,
        results=results,
        location=location,
        spread=spread,
        group=group,
        worst=None,
        differ=differ,
        errors=errors,
    )
    judged = {n: out.judged(n) for n in results}
    judged = {n: v for n, v in judged.items() if v is not None}
    worst = min(judged, key=judged.get) if judged else None
    out = replace(out, worst=worst)
    findings = list(whole.findings)
    verdict = whole.verdict
    failing = [n for n, r in results.items() if r.verdict is not None and r.verdict.meets is False]
    if verdict is not None and worst is not None:
        wv = results[worst].verdict
        basis = "lower bound" if wv.basis == "lower_bound" else "estimate"
        what = f"stream {worst}: {wv.index.capitalize()} {basis} {_fmt(judged[worst])}"
        if verdict.meets is True and failing:
            verdict = replace(
                verdict,
                meets=False,
                text=(
                    f"Does not meet {verdict.criterion} in every stream: {what}; the process "
                    f"as a whole would meet it. {verdict.text}"
                ),
            )
        elif differ or failing:
            verdict = replace(verdict, text=f"{verdict.text} Worst {what}.")
    if differ:
        tests = [t.text for t in (location, spread) if t is not None and t.differ]
        findings.append(
            Finding(
                code="streams_differ",
                severity="warning",
                text=(
                    "The streams differ: "
                    + "; ".join(tests)
                    + (f". Worst stream: {worst}." if worst else ".")
                ),
            )
        )
    return replace(whole, streams=out, verdict=verdict, findings=tuple(findings))
