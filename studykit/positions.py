"""Position studies kept in a study file: stored, read back and recomputed.

A positional tolerance (a true-position zone of diameter T, judged from the X and Y deviations
of each part) is not one measured column, so it is kept beside the study as an attached result
of kind :data:`POSITION_KIND` (like a gauge study): the deviations themselves, the zone
diameter, the unit, the file and columns they came from, and the numbers of
:func:`studykit.stats.position.position_study` at the time it was stored. Results are evidence,
not decisions: they do not enter the study's content digest.

Everything shown (workbook view, PDF section) and checked (``verify``) is recomputed from the
stored deviations by :func:`position_result`; :func:`recheck_position` compares nothing by
itself, it gives the fresh numbers for the caller to compare.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from studykit.errors import StudyInputError

__all__ = [
    "POSITION_KIND",
    "position_payload",
    "position_result",
    "recheck_position",
    "stored_positions",
]

#: Kind under which a position study is attached to a study file.
POSITION_KIND = "position"


def position_payload(
    name: str,
    dx,
    dy,
    *,
    tolerance: float,
    unit: str | None = None,
    source_file: str | None = None,
    columns: Mapping | None = None,
    safety_critical: bool = False,
    description: str = "",
) -> dict:
    """The JSON payload that keeps a position study in a study file.

    Computes the study once (so a bad input is refused before anything is stored) and keeps
    its inputs beside its numbers.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> p = position_payload("hole", rng.normal(0, 0.02, 40), rng.normal(0, 0.02, 40),
    ...                      tolerance=0.2, unit="mm")
    >>> p["name"], p["result"]["n"], len(p["dx"])
    ('hole', 40, 40)
    """
    from studykit.stats.position import position_study

    name = str(name).strip()
    if not name:
        raise StudyInputError("a position study needs a name, e.g. 'mounting_hole_position'")
    res = position_study(dx, dy, tolerance=tolerance)
    return {
        "name": name,
        "unit": unit,
        "tolerance": float(tolerance),
        "dx": [float(v) for v in res.dx],
        "dy": [float(v) for v in res.dy],
        "source_file": source_file,
        "columns": dict(columns or {}),
        "safety_critical": bool(safety_critical),
        "description": description,
        "result": res.to_dict(),
    }


def position_result(payload: Mapping):
    """The :class:`~studykit.stats.position.PositionResult` recomputed from a payload."""
    from studykit.stats.position import position_study

    return position_study(
        np.asarray(payload["dx"], dtype=float),
        np.asarray(payload["dy"], dtype=float),
        tolerance=payload["tolerance"],
    )


def recheck_position(payload: Mapping) -> dict:
    """The fresh ``to_dict()`` of the stored deviations (for ``verify``)."""
    return position_result(payload).to_dict()


def stored_positions(study_path) -> dict:
    """Latest stored position study per name of a study file ({} without a file), by name."""
    if study_path is None:
        return {}
    from studykit.store import StudyFile

    out: dict = {}
    for r in StudyFile(study_path).results(POSITION_KIND):
        payload = dict(r.payload)
        if "name" in payload:
            out[payload["name"]] = payload
    return {k: out[k] for k in sorted(out)}
