"""Every distribution family, one module each.

A family is a :class:`~studykit.stats.families.base.Family` subclass; its module lists its
instances in a module-level tuple ``FAMILY_OBJECTS``. This package imports every module in
it and collects them into :data:`FAMILIES` (by id, in the order of the classes' ``order``),
so adding a family is one new module here (plus its test): nothing else names it.
"""

from __future__ import annotations

import importlib
import pkgutil

from studykit.stats.families.base import Family, FittedModel

__all__ = ["FAMILIES", "Family", "FittedModel"]


def _discover() -> dict[str, Family]:
    found: list[Family] = []
    for info in pkgutil.iter_modules(__path__):
        if info.name == "base" or info.name.startswith("_"):
            continue
        module = importlib.import_module(f"{__name__}.{info.name}")
        found.extend(getattr(module, "FAMILY_OBJECTS", ()))
    ids = [f.id for f in found]
    orders = [f.order for f in found]
    if len(set(ids)) != len(ids) or len(set(orders)) != len(orders):
        raise RuntimeError(f"distribution families with the same id or order: {ids} {orders}")
    return {f.id: f for f in sorted(found, key=lambda f: f.order)}


#: Every family by id, in display order.
FAMILIES: dict[str, Family] = _discover()
