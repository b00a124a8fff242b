"""Every name a person sees, in one place; identifiers stay in the JSON only.

The workbook, the PDF report, the terminal and the glossary in DEVELOPERS.md take their labels
from here: verdict states, capability indices, chart kinds (with the spellings the command line
accepts), run rules, bound methods, model families, sign-off roles and decisions, workbook step
names and the titles of findings. Defaults that several layers share (the default criterion,
the confidence level) are defined here once.

This module imports nothing from studykit, so every layer (stats, analysis, app, report, cli)
may use it. A test (``tests/test_names.py``) renders the demo study on every surface and fails
on any identifier below appearing in human text, and on two names for one thing.

Each label's origin ("trade term", "open standard" or "ours") is recorded in the glossary of
DEVELOPERS.md.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

__all__ = [
    "BOUND_METHODS",
    "CHART_KINDS",
    "CHART_PARTS",
    "DECISIONS",
    "DEFAULT_CONFIDENCE",
    "DEFAULT_CRITERION",
    "DEFAULT_ONGOING_CRITERION",
    "FINDING_TITLES",
    "INDEX_IDS",
    "INDEX_LABELS",
    "MODEL_LABELS",
    "RESULT_KINDS",
    "ROLES",
    "RULE_LABELS",
    "RULE_SETS",
    "STEP_NAMES",
    "VERDICT_STATES",
    "bound_method_label",
    "chart_kind_id",
    "chart_kind_label",
    "chart_part_label",
    "confidence_of",
    "criterion_text",
    "format_index",
    "format_p",
    "format_spread",
    "spec_digits",
    "format_value",
    "index_label",
    "model_label",
    "model_list",
    "raw_ids",
    "rule_label",
    "rule_set_label",
    "role_label",
    "role_id",
    "decision_label",
    "SIGNOFF_VALID",
    "SIGNOFF_VOIDED",
    "GAUGE_RR_KIND",
    "GAUGE_SHORT_KIND",
    "result_kind_label",
    "action_label",
    "ACTIONS",
    "GAUGE_TOTAL",
    "MODEL_BAND",
    "finding_title",
    "value_digits",
    "verdict_label",
    "verdict_state",
]

# ----------------------------------------------------------------------------- defaults

#: Confidence level of the lower bounds when the study and the call give none (common
#: practice, no source). Parameters that take a level are called ``confidence``; ``None``
#: means "not given" (never a number standing for "not given").
DEFAULT_CONFIDENCE = 0.95

#: Default acceptance criterion before launch: Ppk lower 95 % bound >= 1.67 (common practice,
#: no source; the customer's requirement governs).
DEFAULT_CRITERION: Mapping = {
    "index": "ppk",
    "threshold": 1.67,
    "basis": "lower_bound",
    "confidence": DEFAULT_CONFIDENCE,
}
#: Default criterion in series production: Cpk >= 1.33 (common practice, no source).
DEFAULT_ONGOING_CRITERION: Mapping = {
    "index": "cpk",
    "threshold": 1.33,
    "basis": "lower_bound",
    "confidence": DEFAULT_CONFIDENCE,
}


def confidence_of(confidence=None, *, level=None, alpha=None, default=DEFAULT_CONFIDENCE):
    """The confidence level from the one parameter name (``confidence``) or its deprecated
    spellings (``level``; ``alpha`` = 1 - confidence); ``None`` everywhere means "not given"
    and gives ``default``.

    Examples
    --------
    >>> confidence_of(None), confidence_of(0.9), confidence_of(level=0.99), confidence_of(alpha=0.1)
    (0.95, 0.9, 0.99, 0.9)
    """
    given = [
        v
        for v in (confidence, level, None if alpha is None else 1.0 - float(alpha))
        if v is not None
    ]
    if len(given) > 1 and any(abs(float(g) - float(given[0])) > 1e-12 for g in given):
        raise ValueError(
            "give the confidence level once (`confidence`), not also as `level` or `alpha`"
        )
    return float(given[0]) if given else default


# ----------------------------------------------------------------------------- indices

#: Capability index ids in report order (the JSON field names).
INDEX_IDS = ("cp", "cpk", "cpu", "cpl", "cpm", "pp", "ppk", "ppu", "ppl")
#: Trade terms (ISO 22514-2 writes the one-sided ones with capitals: CPU, CPL, PPU, PPL).
INDEX_LABELS: Mapping[str, str] = {
    "cp": "Cp", "cpk": "Cpk", "cpu": "CPU", "cpl": "CPL", "cpm": "Cpm",
    "pp": "Pp", "ppk": "Ppk", "ppu": "PPU", "ppl": "PPL",
}  # fmt: skip


def index_label(index: str) -> str:
    """``"ppk"`` -> ``"Ppk"``; an unknown id is returned unchanged."""
    return INDEX_LABELS.get(str(index).lower(), str(index))


def criterion_text(index: str, threshold: float) -> str:
    """``criterion_text("ppk", 1.67)`` -> ``"Ppk >= 1.67"`` (the JSON keeps ``"ppk >= 1.67"``)."""
    return f"{index_label(index)} >= {float(threshold):g}"


#: Kind id of a result kept beside a study (``studykit gauge --study``) -> its name (ours).
GAUGE_RR_KIND = "gauge_rr"
GAUGE_SHORT_KIND = "gauge_short"
RESULT_KINDS: Mapping[str, str] = {
    GAUGE_RR_KIND: "gauge R&R study",
    GAUGE_SHORT_KIND: "short gauge study",
}


def result_kind_label(kind: str) -> str:
    """``"gauge_rr"`` -> ``"gauge R&R study"``."""
    return RESULT_KINDS.get(kind, f"{str(kind).replace('_', ' ')} result")


# ----------------------------------------------------------------------------- charts

#: Chart kind id -> the name people see (trade terms).
CHART_KINDS: Mapping[str, str] = {
    "xbar_r": "X-bar-R", "xbar_s": "X-bar-S", "imr": "I-MR",
    "p": "p", "np": "np", "c": "c", "u": "u",
}  # fmt: skip
#: The upper part of a chart (JSON ``location``) and the lower part (``dispersion``) by kind.
CHART_PARTS: Mapping[str, Mapping[str, str]] = {
    "xbar_r": {"location": "subgroup mean chart", "dispersion": "range chart"},
    "xbar_s": {"location": "subgroup mean chart", "dispersion": "standard deviation chart"},
    "imr": {"location": "individual value chart", "dispersion": "moving range chart"},
    "p": {"location": "proportion defective chart"},
    "np": {"location": "defectives chart"},
    "c": {"location": "defects chart"},
    "u": {"location": "defects per unit chart"},
}


def chart_kind_id(text: str) -> str:
    """The chart kind id of any accepted spelling: ``xbar_r``, ``xbar-r``, ``X-bar-R``,
    ``xbarr``, ``I-MR``, ``i_mr`` ...; ``auto`` stays ``auto``.

    Raises ValueError naming the accepted spellings for anything else.

    Examples
    --------
    >>> [chart_kind_id(t) for t in ("xbar-r", "xbar_r", "X-bar-R", "I-MR", "auto")]
    ['xbar_r', 'xbar_r', 'xbar_r', 'imr', 'auto']
    """
    key = "".join(ch for ch in str(text).strip().lower() if ch.isalnum())
    if key == "auto":
        return "auto"
    for kid, label in CHART_KINDS.items():
        if key in (kid.replace("_", ""), "".join(c for c in label.lower() if c.isalnum())):
            return kid
    raise ValueError(
        f"chart kind {text!r} is not known; use auto or one of "
        + ", ".join(f"{lab} ({kid.replace('_', '-')})" for kid, lab in CHART_KINDS.items())
    )


def chart_kind_label(kind: str) -> str:
    """``"xbar_r"`` -> ``"X-bar-R"``."""
    return CHART_KINDS.get(kind, kind)


def chart_part_label(kind: str, part: str) -> str:
    """``chart_part_label("xbar_r", "location")`` -> ``"subgroup mean chart"``."""
    return CHART_PARTS.get(kind, {}).get(part) or (
        "upper chart" if part == "location" else "lower chart"
    )


# ----------------------------------------------------------------------------- run rules

#: Run rule id -> what the signal is called (Nelson 1984's tests in our words).
RULE_LABELS: Mapping[str, str] = {
    "beyond_limits": "point beyond the control limits",
    "run": "run on one side of the centre line",
    "trend": "steady rise or fall",
    "alternation": "points alternating up and down",
    "zone_a": "points close to a control limit",
    "zone_b": "points away from the centre line",
    "hugging": "points crowding the centre line",
    "mixture": "points avoiding the centre line",
    "manual": "removed by a recorded decision",
}
#: Rule set id -> name (open standard: Nelson 1984; trade term: Western Electric).
RULE_SETS: Mapping[str, str] = {
    "nelson": "Nelson rules",
    "western_electric": "Western Electric rules",
    "we": "Western Electric rules",
    "basic": "beyond the limits only",
}


def rule_set_label(rules) -> str:
    """The run rules in force, in words: ``"nelson"`` -> ``"Nelson rules"``; any other
    specification (``"1,2,5"``, ``"beyond_limits,run"``) -> ``"run rules: ..."`` in words."""
    text = str(rules)
    if text in RULE_SETS:
        return RULE_SETS[text]
    parts = [RULE_LABELS.get(p.strip(), p.strip()) for p in text.split(",") if p.strip()]
    return "run rules: " + "; ".join(parts)


def rule_label(rule: str) -> str:
    """``"beyond_limits"`` -> ``"point beyond the control limits"``."""
    return RULE_LABELS.get(rule, str(rule).replace("_", " "))


# ----------------------------------------------------------------------------- bounds

#: Method id of a confidence bound -> its name (open standard: the author's name).
BOUND_METHODS: Mapping[str, str] = {
    "bissell": "Bissell's approximation",
    "chi_square": "chi-square",
    "chi_square_boyles": "chi-square (Boyles)",
    "clopper_pearson": "exact binomial (Clopper-Pearson)",
    "poisson_exact": "exact Poisson",
    "parametric_bootstrap_percentile": "parametric bootstrap",
    "normal": "normal-theory method",
    "percentile": "percentile method (ISO 22514-2)",
    "equivalent_ppm": "equivalent-PPM method",
}


def bound_method_label(method: str) -> str:
    """``"clopper_pearson"`` -> ``"exact binomial (Clopper-Pearson)"``."""
    return BOUND_METHODS.get(method, str(method).replace("_", " "))


# ----------------------------------------------------------------------------- models

#: Distribution family id -> name. The threshold variants are the family "with a threshold".
MODEL_LABELS: Mapping[str, str] = {
    "normal": "Normal",
    "lognormal": "Lognormal",
    "lognormal3": "Lognormal with threshold",
    "weibull": "Weibull",
    "weibull3": "Weibull with threshold",
    "gamma": "Gamma",
    "gamma3": "Gamma with threshold",
    "exponential": "Exponential",
    "exponential2": "Exponential with threshold",
    "logistic": "Logistic",
    "loglogistic": "Loglogistic",
    "loglogistic3": "Loglogistic with threshold",
    "sev": "Smallest extreme value",
    "lev": "Largest extreme value",
    "halfnormal": "Half-normal (zero-bounded)",
    "box_cox": "Box-Cox transformation",
    "johnson": "Johnson transformation",
}


def model_label(model: str) -> str:
    """``"weibull3"`` -> ``"Weibull with threshold"``; unknown ids come back unchanged."""
    return MODEL_LABELS.get(model, model)


def model_list(models) -> str:
    """``["sev", "weibull"]`` -> ``"Smallest extreme value, Weibull"``."""
    return ", ".join(model_label(m) for m in models)


# ----------------------------------------------------------------------------- sign-off

#: Sign-off role id -> name (ours).
ROLES: Mapping[str, str] = {"prepared": "Author", "reviewed": "Reviewer", "approved": "Approver"}
#: Sign-off decision id -> name (ours).
DECISIONS: Mapping[str, str] = {"approve": "Approve", "reject": "Reject", "comment": "Comment only"}
#: Whether a sign-off still covers the study as it is now (ours): one word each.
SIGNOFF_VALID, SIGNOFF_VOIDED = "Valid", "Voided"


def role_label(role: str) -> str:
    """``"reviewed"`` -> ``"Reviewer"``; a role typed by a person comes back unchanged."""
    return ROLES.get(role, role)


def role_id(text: str) -> str:
    """The role id of a role name or id as a person types it (any case); other text unchanged.

    Examples
    --------
    >>> role_id("Reviewer"), role_id("approver"), role_id("approved"), role_id("Line lead")
    ('reviewed', 'approved', 'approved', 'Line lead')
    """
    t = str(text or "").strip()
    for rid, label in ROLES.items():
        if t.lower() in (rid, label.lower()):
            return rid
    return t


def decision_label(decision: str) -> str:
    """``"approve"`` -> ``"Approve"``."""
    return DECISIONS.get(decision, decision)


#: Recorded decision (audit) action id -> what it says (ours). One verb for taking a subgroup
#: out of the analysis: "remove" (the removal log; "restore" undoes it).
ACTIONS: Mapping[str, str] = {
    "exclude": "remove",
    "restore": "restore",
    "set_spec": "set specification",
    "set_criteria": "set criterion",
    "set_model": "set model",
    "set_chart": "set chart",
    "keep_signal": "keep signal",
    "reopen_signal": "reopen signal",
    "note": "note",
    "signoff": "sign-off",
    "void_signoff": "void sign-off",
    "waive_verdict": "waive verdict",
    "set_signoff_rules": "change sign-off rules",
}


def action_label(action: str) -> str:
    """``"exclude"`` -> ``"remove subgroup"``."""
    return ACTIONS.get(action, str(action).replace("_", " "))


#: The range of the judged index over the models the data do not reject: one name everywhere.
MODEL_BAND = "Range over plausible models"

#: The gauge total (repeatability and reproducibility together): one name everywhere.
GAUGE_TOTAL = "Gauge R&R"

# ----------------------------------------------------------------------------- workbook

#: Workbook step key -> step name (ours).
STEP_NAMES: Mapping[str, str] = {
    "intake": "Bring in data",
    "limits": "Specification & criterion",
    "measuring": "Gauge check",
    "stability": "Stability",
    "shape": "Shape",
    "capability": "Capability",
    "signoff": "Review & sign",
    "export": "Evidence & hand-off",
}

# ----------------------------------------------------------------------------- findings

#: Finding code -> title (ours); the JSON keeps the code, the text says the rest.
FINDING_TITLES: Mapping[str, str] = {
    "not_in_control": "Not in control",
    "run_rule_signals": "Run-rule signals",
    "signals_kept": "Signals kept with a reason",
    "heavy_auto_removal": "Many values removed automatically",
    "too_few_after_removal": "Too few values left",
    "order_unknown": "Order of the data not known",
    "order_not_in_order": "Data not in production order",
    "within_overall_disagree": "Within and overall spread disagree",
    "few_values": "Few values",
    "few_subgroups": "Few subgroups",
    "model_matters": "The model matters",
    "observed_exceeds_expected": "More out of tolerance than expected",
    "gauge_checked": "Gauge checked",
    "gauge_conditional": "Gauge acceptable with conditions",
    "gauge_failed": "Gauge not acceptable",
    "gauge_not_checked": "Gauge not checked",
    "gauge_error_large": "Gauge error large",
    "moves_by_class": "Signals explained by the time-dependent model",
}


def finding_title(code: str) -> str:
    """``"gauge_not_checked"`` -> ``"Gauge not checked"``."""
    if code in FINDING_TITLES:
        return FINDING_TITLES[code]
    if code.startswith("order_"):
        return "Order of the data"
    return code.replace("_", " ").capitalize()


# ----------------------------------------------------------------------------- verdicts

#: The verdict states, one name each on every surface (ours).
VERDICT_STATES: Mapping[str, str] = {
    "meets": "Meets",
    "not_demonstrated": "More data needed",
    "does_not_meet": "Does not meet",
    "no_verdict_not_in_control": "No verdict: not in control",
    "no_verdict_no_spec": "No verdict: no specification limit",
    "no_verdict": "No verdict",
    "rate_only": "Counted data: rate only",
    "not_analysed": "Not analysed yet",
    "cannot_analyse": "Cannot be analysed",
}
#: The theme colour key of each state (theme.VERDICTS).
VERDICT_THEME: Mapping[str, str] = {
    "meets": "pass", "not_demonstrated": "caution", "does_not_meet": "fail",
    "no_verdict_not_in_control": "withheld", "no_verdict_no_spec": "withheld",
    "no_verdict": "withheld", "rate_only": "withheld", "not_analysed": "pending",
    "cannot_analyse": "fail",
}  # fmt: skip


def _get(obj, key, default=None):
    if obj is None:
        return default
    if isinstance(obj, Mapping):
        return obj.get(key, default)
    return getattr(obj, key, default)


def verdict_state(result) -> str:
    """The verdict state id of an analysis result (object or its ``to_dict()``), of a bare
    verdict, of an error text (str: "cannot be analysed") or of None ("not analysed yet").

    Examples
    --------
    >>> verdict_state(None), verdict_state("no data")
    ('not_analysed', 'cannot_analyse')
    >>> verdict_state({"verdict": {"meets": False, "basis": "lower_bound", "estimate": 1.8,
    ...                            "threshold": 1.67}})
    'not_demonstrated'
    """
    if result is None:
        return "not_analysed"
    if isinstance(result, str):
        return "cannot_analyse"
    verdict = _get(result, "verdict", result) if _get(result, "meets", "x") == "x" else result
    chart = _get(result, "chart")
    kind = _get(chart, "kind") if chart is not None else None
    if verdict is None:
        if kind in ("c", "u"):
            return "rate_only"
        return "no_verdict_no_spec"
    meets = _get(verdict, "meets")
    if meets is True:
        return "meets"
    if meets is False:
        est, thr = _get(verdict, "estimate"), _get(verdict, "threshold")
        if (
            _get(verdict, "basis") == "lower_bound"
            and est is not None
            and thr is not None
            and est >= thr
        ):
            return "not_demonstrated"
        return "does_not_meet"
    codes = [_get(f, "code") for f in (_get(result, "findings") or ())]
    if "not_in_control" in codes:
        return "no_verdict_not_in_control"
    return "no_verdict"


def verdict_label(result_or_state) -> str:
    """The one name of a verdict state (give the state id or anything ``verdict_state`` takes)."""
    if isinstance(result_or_state, str) and result_or_state in VERDICT_STATES:
        return VERDICT_STATES[result_or_state]
    return VERDICT_STATES[verdict_state(result_or_state)]


# ----------------------------------------------------------------------------- numbers


def value_digits(lsl=None, usl=None, *, default: int = 4) -> int:
    """Decimals that resolve 1/100 of the tolerance (ours: one rule on every surface).

    With both limits: ``ceil(-log10(tolerance / 100))``, at least 0. With one or none:
    ``default``.

    Examples
    --------
    >>> value_digits(19.95, 20.05), value_digits(19.99, 20.01), value_digits(0, 100)
    (3, 4, 0)
    >>> value_digits(None, 5)
    4
    """
    try:
        tol = float(usl) - float(lsl)
    except (TypeError, ValueError):
        return default
    if not math.isfinite(tol) or tol <= 0:
        return default
    return max(0, math.ceil(-math.log10(tol / 100.0) - 1e-9))


def format_value(v, lsl=None, usl=None, *, digits: int | None = None) -> str:
    """A measured value, limit or mean with the decimals of :func:`value_digits`; "-" for None.

    Examples
    --------
    >>> format_value(20.00553, 19.99, 20.01), format_value(20.00553, 19.95, 20.05)
    ('20.0055', '20.006')
    >>> format_value(None)
    '-'
    """
    if v is None:
        return "-"
    f = float(v)
    if not math.isfinite(f):
        return "-"
    d = value_digits(lsl, usl) if digits is None else digits
    return f"{f:.{d}f}"


def format_spread(v, lsl=None, usl=None, *, digits: int | None = None) -> str:
    """A spread (sigma, range, standard deviation) in the measured unit: one decimal more than
    :func:`value_digits` (a spread is about a tenth of the tolerance, so it keeps two
    significant digits at the same resolution rule); "-" for None.

    Examples
    --------
    >>> format_spread(0.0021456, 19.99, 20.01), format_spread(None)
    ('0.00215', '-')
    """
    d = value_digits(lsl, usl) if digits is None else digits
    return format_value(v, digits=d + 1)


def spec_digits(spec) -> int:
    """:func:`value_digits` of a specification given as a mapping or an object with
    ``lsl``/``usl`` (None: the default)."""
    return value_digits(_get(spec, "lsl"), _get(spec, "usl"))


def format_index(v) -> str:
    """A capability index in a sentence or table: two decimals, "-" for None."""
    if v is None:
        return "-"
    f = float(v)
    return f"{f:.2f}" if math.isfinite(f) else "-"


def format_p(p) -> str:
    """A p-value: three decimals, never "0.000" ("< 0.001"); "-" for None.

    Examples
    --------
    >>> format_p(0.0000123), format_p(0.0456), format_p(None)
    ('< 0.001', '0.046', '-')
    """
    if p is None:
        return "-"
    f = float(p)
    if not math.isfinite(f):
        return "-"
    if f < 0.0005:
        return "< 0.001"
    return f"{f:.3f}"


# ----------------------------------------------------------------------------- the raw-id list


def raw_ids() -> tuple[str, ...]:
    """Identifiers that must never reach human text (the test of every surface uses this).

    Only ids that are not also ordinary words are listed (``normal``, ``run`` and ``trend`` are
    English; ``weibull`` is a name): those with an underscore, the short family codes and the
    threshold-family codes, and their spellings with the underscore as a space.
    """
    ids = set()
    for table in (
        RULE_LABELS,
        BOUND_METHODS,
        MODEL_LABELS,
        FINDING_TITLES,
        VERDICT_STATES,
        CHART_KINDS,
    ):
        for key in table:
            if "_" in key or key[-1].isdigit() or key in ("sev", "lev", "imr", "halfnormal"):
                ids.add(key)
    for table in (RULE_LABELS, BOUND_METHODS):
        ids.update(key.replace("_", " ") for key in table if "_" in key)
    # spellings of ids seen in earlier versions' text
    ids.update(
        (
            "gauge rr",
            "gauge_rr",
            "location chart",
            "dispersion chart",
            "(nelson rules)",
            "lower_bound",
            "normal_score",
            "part_to_part",
        )
    )
    return tuple(sorted(ids))
