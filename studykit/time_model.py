"""The ISO 22514-2 time-dependent model of an analysed characteristic (result layer).

:func:`time_model_for` classifies the readings (:func:`studykit.stats.timedep.classify`): every
reading but the recorded removals, so an automatic phase I that trims a trend as special causes
does not hide it from the classification.

:func:`time_model_verdict` also makes the class decide the verdict (the hook the analysis
calls). A1, A2 and unclassified data leave the verdict as it is. Where the class calls for
another computation than the usual indices, the verdict is judged on the class's index:

* C1, C3, C4: Pp/Ppk by the class's method (sigma_total with the between-subgroup variance;
  the trend's travel plus the spread about it), with the lower confidence bound of a
  parametric bootstrap of the class model (:func:`studykit.stats.timedep.class_bound`; ours).
* B, C2, D: the combined (overall) distribution, i.e. the Pp/Ppk of the fitted model over all
  the values the analysis used, with their usual bounds; a Cp/Cpk criterion is judged on
  Pp/Ppk instead (the within-subgroup sigma does not describe such a process).

A Cpm criterion is left as it is (no class method gives a Cpm). The usual indices stay in the
capability table; ``time_model.verdict_basis`` says what the verdict used.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from studykit import names
from studykit.errors import StudyInputError
from studykit.stats import timedep
from studykit.stats.capability import Finding, judge

__all__ = ["time_model_for", "time_model_verdict", "signals_explained"]

_TEXT = {
    "B": "the spread changes between subgroups",
    "C1": "the location moves at random between subgroups",
    "C2": "the location moves at random between subgroups",
    "C3": "the location moves systematically (a trend)",
    "C4": "the location moves systematically (a trend) and at random",
    "D": "location and spread both change between subgroups",
}

#: A within-sigma criterion is judged on its overall counterpart under a moving class.
_OVERALL = {"cp": "pp", "cpk": "ppk", "pp": "pp", "ppk": "ppk"}


def time_model_for(values, labels, spec) -> tuple:
    """``(TimeModel or None, findings tuple)`` for the readings used and the specification."""
    lsl = None if spec is None else spec.lsl
    usl = None if spec is None else spec.usl
    try:
        tm = timedep.classify(values, labels, lsl=lsl, usl=usl)
    except StudyInputError:
        return None, ()
    if tm.cls in (None, "A1", "A2"):
        return tm, ()
    ppk = tm.indices.get("ppk")
    index = "" if ppk is None else f" Ppk by that method: {ppk:.2f}."
    return tm, (
        Finding(
            code="time_model",
            severity="warning",
            text=(
                f"Time-dependent model {tm.cls} (ISO 22514-2, from memory): {_TEXT[tm.cls]}. "
                f"Cp/Cpk from the within-subgroup sigma do not describe this process; the "
                f"capability uses {tm.method}.{index}"
            ),
        ),
    )


@dataclass(frozen=True)
class _ClassIndices:
    """What :func:`studykit.stats.capability.judge` reads, for the class's own indices."""

    pp: float | None
    ppk: float | None
    bounds: dict
    level: float
    method: str = "percentile"

    def lower_bound(self, index):
        return self.bounds.get(index)


def time_model_verdict(values, labels, spec, verdict, capability) -> tuple:
    """``(TimeModel or None, findings tuple, verdict)``: the class, its finding, and the verdict
    judged on the class's index where the class calls for it (see the module text)."""
    tm, _ = time_model_for(values, labels, spec)
    if tm is not None and tm.cls in ("C1", "C3", "C4"):
        tm = replace(tm, location_limits=_drawn_limits(values, labels, tm.cls))
    if tm is None or tm.cls in (None, "A1", "A2") or verdict is None:
        return tm, (), verdict
    index = _OVERALL.get(verdict.index)
    if index is None:  # Cpm: no class method gives one
        basis = {"basis": "usual", "index": verdict.index, "text": "no class method gives it"}
        return replace(tm, judged=basis), _finding(tm, None, verdict), verdict
    pretty = names.INDEX_LABELS[index]
    if tm.cls in ("C1", "C3", "C4"):
        b = timedep.class_bound(
            values, labels, tm.cls, lsl=spec.lsl, usl=spec.usl, level=verdict.level
        )
        est = tm.indices.get(index)  # the class's point estimate (classify's numbers)
        ci = _ClassIndices(
            pp=tm.indices.get("pp"),
            ppk=tm.indices.get("ppk"),
            bounds={"pp": b["pp_lower"], "ppk": b["ppk_lower"]},
            level=verdict.level,
        )
        new = judge(ci, index=index, threshold=verdict.threshold, basis=verdict.basis)
        lower = b[f"{index}_lower"]
        basis = {
            "basis": "class_method",
            "index": index,
            "estimate": est,
            "lower_bound": lower,
            "level": verdict.level,
            "bound_method": b["method"],
            "n_boot": b["n_boot"],
            "seed": str(b["seed"]),
            "text": f"{pretty} by the class {tm.cls} method ({tm.method})",
        }
    else:  # B, C2, D: the combined distribution = the overall indices of the fitted model
        new = (
            verdict
            if index == verdict.index
            else judge(capability, index=index, threshold=verdict.threshold, basis=verdict.basis)
        )
        n_used = capability.inputs.get("n") if capability is not None else None
        n_class = len(values)
        basis = {
            "basis": "combined_distribution",
            "index": index,
            "estimate": new.estimate,
            "lower_bound": new.lower_bound,
            "level": new.level,
            "bound_method": "the usual bound of the overall index",
            "text": f"{pretty} of the combined distribution (the overall indices shown)",
        }
        if n_used is not None and n_used != n_class:
            basis["caution"] = (
                f"the indices shown are of the {n_used} values phase I kept, the class was "
                f"found on {n_class} readings: automatic removals may have taken out the "
                "variation the class describes"
            )
    if new is not verdict:
        new = replace(
            new,
            text=new.text
            + f" Judged on {basis['text']}: ISO 22514-2 class {tm.cls} (from memory).",
        )
    return replace(tm, judged=basis), _finding(tm, basis, verdict), new


def _drawn_limits(values, labels, cls) -> dict | None:
    """The class model's limits of each subgroup mean, as lists for the charts."""
    try:
        lim = timedep.class_limits(values, labels, cls)
    except StudyInputError:
        return None
    return {
        "labels": list(lim["labels"]),
        "centre": [float(v) for v in lim["centre"]],
        "half": [float(v) for v in lim["half"]],
    }


def _finding(tm, basis, old) -> tuple:
    head = (
        f"Time-dependent model {tm.cls} (ISO 22514-2, from memory): {_TEXT[tm.cls]}. Cp/Cpk "
        f"from the within-subgroup sigma do not describe this process."
    )
    if basis is None or basis["basis"] == "usual":
        tail = (
            f" The criterion's {names.INDEX_LABELS.get(old.index, old.index)} has no class "
            "method, so the verdict stays on the usual index."
        )
    else:
        est = "-" if basis["estimate"] is None else f"{basis['estimate']:.2f}"
        low = "-" if basis["lower_bound"] is None else f"{basis['lower_bound']:.2f}"
        how = (
            f"a parametric bootstrap of the class model ({basis['n_boot']} samples, seed from "
            "the data; ours)"
            if basis["basis"] == "class_method"
            else "the usual bound"
        )
        tail = (
            f" The verdict is judged on {basis['text']}: {est}, lower {basis['level']:.0%} bound "
            f"{low} ({how}). The capability table keeps the usual indices for comparison."
        )
        if basis.get("caution"):
            tail += f" Caution: {basis['caution']}."
    return (Finding(code="time_model", severity="warning", text=head + tail),)


def signals_explained(
    tm, values, labels, beyond_location, beyond_dispersion, dispersion_name="range chart"
) -> tuple:
    """``(finding or None, explained)``: whether every point beyond the control limits is a
    subgroup mean that the time-dependent class (C1, C3, C4) expects. The location moves as the
    class describes (at random, or along a trend), so such points are not special causes.

    ``explained`` is True when every point beyond the limits is a subgroup mean within the
    class model's limits (:func:`studykit.stats.timedep.class_limits`) and no dispersion point
    is beyond its limits (the class says nothing about the spread); the finding then says so.
    When the location points are within the class's limits but a dispersion point is not, the
    finding says that only the dispersion signal is left (``explained`` False). No finding
    when the class does not move the location or a subgroup mean lies outside the class
    model's limits too.

    ``beyond_location`` and ``beyond_dispersion`` are the subgroup labels (text) of the points
    beyond the limits on the final chart; ``values``/``labels`` every reading but the recorded
    removals (the readings the class was found on); ``dispersion_name`` the dispersion chart's
    name as shown (:func:`studykit.names.chart_part_label`).
    """
    if tm is None or tm.cls not in ("C1", "C3", "C4") or not beyond_location:
        return None, False
    try:
        lim = timedep.class_limits(values, labels, tm.cls)
    except StudyInputError:
        return None, False
    known = set(lim["labels"])
    if not set(beyond_location) <= known or set(beyond_location) & set(lim["beyond"]):
        return None, False
    shown = ", ".join(list(beyond_location)[:8]) + (" ..." if len(beyond_location) > 8 else "")
    how = (
        "the grand mean"
        if tm.cls == "C1"
        else "the least-squares line of the subgroup means (the trend)"
    )
    head = (
        f"The {len(beyond_location)} subgroup mean(s) beyond the control limits (subgroups "
        f"{shown}) lie within the limits of the time-dependent model {tm.cls} (ISO 22514-2, "
        f"from memory): {_TEXT[tm.cls]}, and every subgroup mean is within {how} +/- 3 "
        "sigma of a subgroup mean under that model (ours). They are read as the movement the "
        "class describes, not as special causes."
    )
    if beyond_dispersion:
        tail = (
            f" The {dispersion_name} still has point(s) beyond its limits (subgroups "
            f"{', '.join(beyond_dispersion)}): the class says nothing about those, so the "
            "verdict stays withheld until they are explained and recorded."
        )
        return Finding(code="moves_by_class", severity="warning", text=head + tail), False
    tail = (
        " The verdict is given on the class's index. Confirm that the movement is planned and "
        "controlled (e.g. a tool change interval) and record it."
    )
    return Finding(code="moves_by_class", severity="warning", text=head + tail), True
