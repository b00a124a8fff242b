"""Workbook step: Stability (panel arrives in a later version)."""

from studykit.app.steps._coming import ComingStep

STEP = ComingStep(
    key="stability",
    title="Stability",
    guidance="Confirm the process runs in statistical control; every removed subgroup needs a recorded reason.",
    what="Phase-I control charts with run rules, trial limits recomputed after each recorded removal, and the removal log.",
)
