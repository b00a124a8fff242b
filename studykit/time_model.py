"""The ISO 22514-2 time-dependent model of an analysed characteristic (result layer).

:func:`time_model_for` classifies the readings (:func:`studykit.stats.timedep.classify`): every
reading but the recorded removals, so an automatic phase I that trims a trend as special causes
does not hide it from the classification.
and says in a finding what the class means for the capability shown. The verdict itself is not
changed: where the class calls for another computation than the indices shown (C1: the
between-subgroup variance; C3/C4: the travel of a trend), the finding gives that index, and its
confidence bound is not computed yet (so it cannot carry a lower-bound criterion).
"""

from __future__ import annotations

from studykit.errors import StudyInputError
from studykit.stats import timedep
from studykit.stats.capability import Finding

__all__ = ["time_model_for"]


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
    text = {
        "B": "the spread changes between subgroups",
        "C1": "the location moves at random between subgroups",
        "C2": "the location moves at random between subgroups",
        "C3": "the location moves systematically (a trend)",
        "C4": "the location moves systematically (a trend) and at random",
        "D": "location and spread both change between subgroups",
    }[tm.cls]
    return tm, (
        Finding(
            code="time_model",
            severity="warning",
            text=(
                f"Time-dependent model {tm.cls} (ISO 22514-2, from memory): {text}. Cp/Cpk from "
                f"the within-subgroup sigma do not describe this process; the capability uses "
                f"{tm.method}.{index}"
            ),
        ),
    )
