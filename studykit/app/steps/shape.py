"""Workbook step: Shape (panel arrives in a later version)."""

from studykit.app.steps._coming import ComingStep

STEP = ComingStep(
    key="shape",
    title="Shape",
    guidance="Check how the values are distributed and choose the model that describes them.",
    what="Histogram and probability plot, normality tests, Box-Cox and Johnson transformations, and a ranking of fitted distributions.",
)
