"""A step whose panel arrives in a later version: it says so plainly and what it will do."""

from __future__ import annotations

from dataclasses import dataclass

from studykit.app.widgets import coming_panel


@dataclass
class ComingStep:
    """Placeholder satisfying :class:`studykit.app.shell.Step`."""

    key: str
    title: str
    guidance: str
    what: str

    def build(self, context):
        return coming_panel(self.title, self.what)

    def refresh(self, context) -> None:
        return None
