"""The browser workbook (ipywidgets + bokeh, served by Voila). No statistics in here.

``build_workbook(study_path=None)`` returns the workbook widget; ``workbook_from_environment()``
is what ``notebooks/workbook.ipynb`` calls under ``studykit serve``.
"""

from studykit.app.shell import (
    Step,
    Workbook,
    WorkbookContext,
    build_workbook,
    default_steps,
    workbook_from_environment,
)
from studykit.app.widgets import MessageArea, caution_banner, guarded

__all__ = ["Step", "Workbook", "WorkbookContext", "build_workbook", "default_steps",
           "workbook_from_environment", "MessageArea", "caution_banner", "guarded"]
