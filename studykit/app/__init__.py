"""The browser workbook (ipywidgets + bokeh, served by Voila). No statistics in here.

``build_workbook(study_path=None)`` returns the workbook widget; ``workbook_from_environment()``
is what ``notebooks/workbook.ipynb`` calls under ``studykit serve``.

The names below are imported on first use (PEP 562), so the server process
(:mod:`studykit.app.server`) starts without the widget and statistics stack.
"""

import importlib

_EXPORTS = {
    "Step": "studykit.app.shell",
    "Workbook": "studykit.app.shell",
    "WorkbookContext": "studykit.app.shell",
    "build_workbook": "studykit.app.shell",
    "default_steps": "studykit.app.shell",
    "workbook_from_environment": "studykit.app.shell",
    "MessageArea": "studykit.app.widgets",
    "caution_banner": "studykit.app.widgets",
    "guarded": "studykit.app.widgets",
}

__all__ = list(_EXPORTS)


def __getattr__(name):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'studykit.app' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
