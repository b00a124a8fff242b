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


def scipy_stats_compiled(name: str) -> ModuleType | None:
    """The compiled module ``scipy.stats.<name>`` loaded from its file alone, without running
    the ``scipy.stats`` package import (about 0.6 s), or None when it cannot be found or
    loaded (then call the public ``scipy.stats`` function instead). Only for compiled modules
    that import nothing of ``scipy.stats`` themselves (``_ansari_swilk_statistics``, the
    Shapiro-Wilk routine behind ``scipy.stats.shapiro``); loaded once per process.
    """
    import sys

    full = f"scipy.stats.{name}"
    module = sys.modules.get(full) or _COMPILED.get(full)
    if module is not None:
        return module
    try:
        import importlib.machinery
        import importlib.util
        from pathlib import Path

        import scipy

        folder = Path(scipy.__path__[0]) / "stats"
        for suffix in importlib.machinery.EXTENSION_SUFFIXES:
            path = folder / f"{name}{suffix}"
            if path.is_file():
                loader = importlib.machinery.ExtensionFileLoader(full, str(path))
                spec = importlib.util.spec_from_file_location(full, path, loader=loader)
                if spec is None:
                    return None
                module = importlib.util.module_from_spec(spec)
                loader.exec_module(module)
                _COMPILED[full] = module
                return module
    except Exception:  # noqa: BLE001 - any failure: the caller takes the public route
        return None
    return None


_COMPILED: dict[str, ModuleType] = {}
