"""Measurement files in, :class:`Measurements` out: kept so ``studykit.data`` imports keep working.

The reader lives in the :mod:`studykit.io` package (source detection, CSV and XLSX reading, cell
parsing, assembly, value objects); this module re-exports its public names (its ``__all__``)
unchanged.
"""

from __future__ import annotations

from studykit.io import *  # noqa: F403 - the public names of studykit.io, listed once there
from studykit.io import __all__  # noqa: F401 - re-exported as this module's list
