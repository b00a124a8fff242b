"""Workbook step: Gauge check (panel arrives in a later version)."""

from studykit.app.steps._coming import ComingStep

STEP = ComingStep(
    key="measuring",
    title="Gauge check",
    guidance="Show that the measuring system can tell parts apart before judging the process.",
    what="A crossed gauge R&R study: repeatability, reproducibility, %GRR of tolerance and of total variation, and the number of distinct categories.",
)
