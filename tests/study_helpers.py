"""Helpers shared by tests of the study file and the workbook (imported by name; not a
conftest, so that it cannot be confused with tests/browser/conftest.py)."""

from __future__ import annotations


def waive_open_verdicts(path, *, who: str = "Q. Lead") -> list[str]:
    """Record a waiver for every characteristic without a verdict, so that an approval passes
    the sign-off rule 'approval_needs_verdicts' (for tests about locking, not about the gate).
    Returns the names waived."""
    from studykit.app.session import StudySession

    session = StudySession(path)
    names = list(session.open_verdicts())
    for name in names:
        session.waive(name, reason="test: the lock is under test, not the verdict", who=who)
    return names
