"""``scipy.stats``, imported on first use.

Importing ``scipy.stats`` costs about 0.6-0.9 s and 60 MB on this project's machines, and most
runs (the default study of a normal characteristic, the workbook's landing view, ``--help``)
need only ``scipy.special``. Modules that call into ``scipy.stats`` write
``from studykit.stats.lazy import scipy_stats as stats`` and use ``stats.<name>`` as before; the
first attribute read imports the real module (once, through :mod:`importlib`, so the usual
module cache applies).

>>> from studykit.stats.lazy import scipy_stats
>>> float(scipy_stats.norm.cdf(0.0))
0.5
"""

from __future__ import annotations

import importlib
from types import ModuleType
from typing import Any

__all__ = ["LazyModule", "scipy_stats"]


class LazyModule:
    """A stand-in for a module that is imported when one of its attributes is first read."""

    __slots__ = ("_name", "_module")

    def __init__(self, name: str) -> None:
        self._name = name
        self._module: ModuleType | None = None

    def __getattr__(self, attr: str) -> Any:
        module = self._module
        if module is None:
            module = importlib.import_module(self._name)
            self._module = module
        return getattr(module, attr)

    def __repr__(self) -> str:
        state = "imported" if self._module is not None else "not imported yet"
        return f"<lazy module {self._name!r} ({state})>"


#: ``scipy.stats``, imported on first attribute access.
scipy_stats: Any = LazyModule("scipy.stats")
