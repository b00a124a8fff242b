"""Shared test fixtures."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture
def repo_root() -> Path:
    return ROOT


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
