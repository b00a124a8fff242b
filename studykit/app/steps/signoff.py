"""Workbook step: Review & sign (panel arrives in a later version)."""

from studykit.app.steps._coming import ComingStep

STEP = ComingStep(
    key="signoff",
    title="Review & sign",
    guidance="The team reviews the evidence and signs; a later change to data or decisions voids the sign-off.",
    what="Comments, named sign-offs with role and decision, and a visible warning when data or decisions changed after approval.",
)
