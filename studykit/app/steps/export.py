"""Workbook step: Evidence & hand-off (panel arrives in a later version)."""

from studykit.app.steps._coming import ComingStep

STEP = ComingStep(
    key="export",
    title="Evidence & hand-off",
    guidance="Produce the signed PDF evidence and the limits for series production.",
    what="A signed PDF report with data and decision digests, JSON and CSV exports, and the phase-II hand-off file with frozen control limits.",
)
