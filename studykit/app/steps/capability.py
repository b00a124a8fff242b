"""Workbook step: Capability (panel arrives in a later version)."""

from studykit.app.steps._coming import ComingStep

STEP = ComingStep(
    key="capability",
    title="Capability",
    guidance="Compare the process spread with the tolerance and read the verdict with its confidence bound.",
    what="Cp, Cpk, Pp, Ppk and Cpm with lower confidence bounds, expected and observed PPM, and the verdict against the chosen criteria.",
)
