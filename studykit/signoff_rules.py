"""Sign-off rules: who may sign what, and when an approval may be given.

The rules are recorded in the study file (:meth:`studykit.study.Study.signoff_rules`; all on
unless a ``set_signoff_rules`` decision with a reason switched one off) and are applied the same
way by the workbook and by ``studykit study sign``:

``distinct_signers``
    One person may not hold two roles among the sign-offs that still hold (e.g. sign both
    "reviewed" and "approved"). Names are compared ignoring case and extra spaces.
``approval_needs_verdicts``
    An approval (role ``approved``, decision ``approve``) needs every characteristic to have a
    verdict ("Meets criteria" or "Does not meet criteria"), or a waiver recorded for that
    characteristic with a reason (``waive_verdict``). "Not judged", "More data needed" and a
    characteristic that cannot be analysed have no verdict.
``rejection_needs_reason``
    A rejection records its reason (the sign-off's comment must not be empty).

This module sits beside :mod:`studykit.analysis` (it reads verdicts from result objects); it
computes no statistics.

Examples
--------
>>> from studykit.study import Characteristic, Study
>>> s = Study(title="demo", data=b"subgroup,x\\n1,1.0\\n", data_filename="x.csv",
...           characteristics=[Characteristic("x", lsl=0, usl=2)])
>>> s = s.sign("A. Ruiz", role="reviewed", decision="approve")
>>> signoff = s.sign("a. ruiz", role="approved", decision="approve").signoffs[-1]
>>> try:
...     check_signoff(s, signoff, open_verdicts={})
... except SignOffRefused as exc:
...     print(str(exc)[:45])
A. Ruiz already signed this study as reviewed
"""

from __future__ import annotations

from collections.abc import Callable, Mapping

from studykit import names
from studykit.errors import StudyInputError
from studykit.study import DEFAULT_SIGNOFF_RULES, SignOff, Study

__all__ = [
    "RULE_TEXT",
    "SignOffRefused",
    "check_signoff",
    "make_check",
    "open_verdicts",
    "verdict_word",
]

#: one line per rule, for the page, the terminal and the README
RULE_TEXT = {
    "distinct_signers": "one person may not sign two roles",
    "approval_needs_verdicts": "an approval needs every characteristic to have a verdict, or a "
    "recorded waiver with a reason",
    "rejection_needs_reason": "a rejection records its reason",
}
assert set(RULE_TEXT) == set(DEFAULT_SIGNOFF_RULES)  # noqa: S101 - a programming check


class SignOffRefused(StudyInputError):
    """A sign-off that the study's sign-off rules do not allow (nothing was saved)."""


def verdict_word(result) -> tuple[bool, str]:
    """``(has_verdict, word)`` for an analysis result, or for an error text (str).

    "More data needed": the estimate meets the threshold but its lower bound does not, so the
    data neither demonstrate nor refute the requirement (the workbook's badge of that name).

    Examples
    --------
    >>> verdict_word("no data")
    (False, 'cannot be analysed: no data')
    """
    if isinstance(result, str):
        return False, f"{names.VERDICT_STATES['cannot_analyse'].lower()}: {result}"
    state = names.verdict_state(result)
    return state in ("meets", "does_not_meet"), names.VERDICT_STATES[state]


def open_verdicts(study: Study, results: Mapping[str, object]) -> dict[str, str]:
    """Characteristics without a verdict and without a waiver: ``{name: what it shows}``.

    ``results`` maps each characteristic to its analysis result (or the error text); a
    characteristic missing from it counts as "not analysed".
    """
    waived = study.waivers()
    out = {}
    for name in study.characteristic_names:
        if name in waived:
            continue
        if name not in results:
            out[name] = names.VERDICT_STATES["not_analysed"]
            continue
        has, word = verdict_word(results[name])
        if not has:
            out[name] = word
    return out


def _person(name: str) -> str:
    return " ".join(str(name).split()).casefold()


def check_signoff(study: Study, signoff: SignOff, *, open_verdicts: Mapping[str, str]) -> None:
    """Refuse ``signoff`` on ``study`` when a rule in force forbids it (SignOffRefused).

    ``open_verdicts`` is :func:`open_verdicts` of this study's content (the caller analyses it;
    the store checks in the same transaction that the content is still the one analysed).
    """
    rules = study.signoff_rules()
    if (
        rules.get("rejection_needs_reason")
        and signoff.decision == "reject"
        and not signoff.comment.strip()
    ):
        raise SignOffRefused(
            "a rejection needs its reason: say in the comment what must change (sign-off rule "
            "'rejection_needs_reason')"
        )
    if rules.get("distinct_signers"):
        me = _person(signoff.name)
        for st in study.signoff_state():
            other = st.signoff
            if (
                st.valid
                and _person(other.name) == me
                and other.role.strip().casefold() != signoff.role.strip().casefold()
            ):
                raise SignOffRefused(
                    f"{other.name} already signed this study as {other.role} ({other.when}); "
                    f"one person may not also sign as {signoff.role} (sign-off rule "
                    "'distinct_signers'). Ask another person to sign this role, or record a "
                    "change of the rule with its reason"
                )
    if rules.get("approval_needs_verdicts") and signoff.is_approval and open_verdicts:
        listed = "; ".join(f"{n}: {w}" for n, w in open_verdicts.items())
        raise SignOffRefused(
            f"an approval needs every characteristic to have a verdict, and "
            f"{len(open_verdicts)} {'has' if len(open_verdicts) == 1 else 'have'} none ("
            f"{listed}). Settle them (more data, a recorded decision) or record a waiver with "
            "its reason for each, then approve (sign-off rule 'approval_needs_verdicts')"
        )


def make_check(open_verdicts_: Mapping[str, str]) -> Callable[[Study, SignOff], None]:
    """The ``check`` for :meth:`studykit.store.StudyFile.add_signoff`."""
    found = dict(open_verdicts_)

    def check(study: Study, signoff: SignOff) -> None:
        check_signoff(study, signoff, open_verdicts=found)

    return check


def analyse_for_signoff(
    study: Study, *, gauges: Mapping | None = None, needed: bool = True
) -> dict[str, object]:
    """Every characteristic's result (or error text), for :func:`open_verdicts`.

    Only computed when ``needed`` (an approval under ``approval_needs_verdicts``); else empty.
    """
    if not needed:
        return {}
    from studykit.analysis import NO_GAUGE, analyze_study, read_study_measurements

    measurements = read_study_measurements(study)
    out: dict[str, object] = {}
    for name in study.characteristic_names:
        try:
            out[name] = analyze_study(
                study, name, measurements=measurements, gauge=(gauges or {}).get(name, NO_GAUGE)
            )
        except StudyInputError as exc:
            out[name] = str(exc)
    return out


def rules_text(study: Study) -> list[str]:
    """One line per rule: ``"on: one person may not sign two roles"``."""
    rules = study.signoff_rules()
    return [f"{'on' if rules[k] else 'OFF'}: {RULE_TEXT[k]} ({k})" for k in RULE_TEXT]
