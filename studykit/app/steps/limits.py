"""Workbook step: Limits & targets (panel arrives in a later version)."""

from studykit.app.steps._coming import ComingStep

STEP = ComingStep(
    key="limits",
    title="Limits & targets",
    guidance="Enter the specification limits, the target and the acceptance criteria for each characteristic.",
    what="For each characteristic: lower and upper specification limit, target, whether it is safety-critical, and the capability index and threshold the customer asks for.",
)
