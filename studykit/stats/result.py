"""The base of every result class: JSON-safe ``to_dict``, ``to_frame``, a short repr, an HTML table.

Every result of :mod:`studykit.stats` is a frozen dataclass deriving from :class:`Result`. A class
that writes its own ``to_dict`` keeps it (its JSON fields are documented in the README); the
others get one generated from their fields. Numbers that are not finite become ``None`` (JSON
``null``) by the one helper :func:`json_float`, so ``json.dumps(r.to_dict(), allow_nan=False)``
always works.

In a notebook a result shows as a table (``_repr_html_``) and prints as one short line
(``__repr__``); ``to_frame()`` gives the same quantities as a pandas DataFrame.
"""

from __future__ import annotations

import dataclasses
import html
import math
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["Result", "json_float"]

#: at most this many quantities in the one-line repr
_REPR_ITEMS = 6
#: and at most this many characters
_REPR_CHARS = 200


def json_float(x) -> float | None:
    """A float for JSON: ``None`` for None, NaN and +-inf; otherwise ``float(x)``.

    Examples
    --------
    >>> json_float(1), json_float(float("nan")), json_float(None), json_float(np.float64(2.5))
    (1.0, None, None, 2.5)
    """
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _plain(value: Any) -> Any:
    """``value`` as JSON-safe plain Python (results by their ``to_dict``)."""
    if isinstance(value, Result):
        return value.to_dict()
    if value is None or isinstance(value, str | bool):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        return json_float(value)
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple | set | frozenset):
        return [_plain(v) for v in value]
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    return str(value)


def _flat(d: Mapping, prefix: str = "") -> dict[str, Any]:
    """Nested dicts flattened to dotted keys; lists kept whole."""
    out: dict[str, Any] = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, Mapping):
            out.update(_flat(v, key + "."))
        else:
            out[key] = v
    return out


def _short(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.4g}"
    if isinstance(v, str):
        return repr(v if len(v) <= 30 else v[:27] + "...")
    if isinstance(v, list):
        return f"[{len(v)} items]"
    return repr(v)


class Result:
    """Base of the result classes (frozen dataclasses) of :mod:`studykit.stats`.

    A subclass gets :meth:`to_dict` (generated from its fields unless it writes its own),
    :meth:`to_frame`, a one-line ``repr`` and an HTML table for notebooks.
    """

    def __init_subclass__(cls, **kwargs):
        super().__init_subclass__(**kwargs)
        # Put the short repr into the class itself: @dataclass then keeps it instead of
        # generating one that prints every field (results can hold arrays of a million values).
        if "__repr__" not in cls.__dict__:
            cls.__repr__ = Result.__repr__  # type: ignore[method-assign]

    def to_dict(self) -> dict:
        """The result as JSON-safe plain Python (non-finite numbers as ``None``)."""
        return {f.name: _plain(getattr(self, f.name)) for f in dataclasses.fields(self)}  # type: ignore[arg-type]

    def _items(self) -> dict[str, Any]:
        return {k: v for k, v in _flat(self.to_dict()).items() if not isinstance(v, list)}

    def to_frame(self):
        """The quantities of :meth:`to_dict` as a pandas DataFrame (one row per quantity, nested
        blocks as dotted names; lists left out). pandas is imported on this call only."""
        import pandas as pd

        items = self._items()
        return pd.DataFrame(
            {"value": pd.Series(list(items.values()), index=list(items), dtype=object)}
        ).rename_axis("quantity")

    def __repr__(self) -> str:
        items = [
            (k, v)
            for k, v in _flat(self.to_dict()).items()
            if v is not None and not isinstance(v, list | dict) and k != "kind"
        ]
        items.sort(key=lambda kv: "." in kv[0])  # the result's own quantities before nested ones
        parts, text = [], ""
        for k, v in items[:_REPR_ITEMS]:
            part = f"{k}={_short(v)}"
            if len(text) + len(part) > _REPR_CHARS:
                break
            parts.append(part)
            text = ", ".join(parts)
        more = ", ..." if len(parts) < len(items) else ""
        return f"{type(self).__name__}({text}{more})"

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><th style='text-align:left'>{html.escape(k)}</th>"
            f"<td style='text-align:right'>{html.escape(_short(v) if not isinstance(v, str) else v)}"
            "</td></tr>"
            for k, v in self._items().items()
        )
        return (
            f"<table><caption style='text-align:left'><b>{html.escape(type(self).__name__)}"
            f"</b></caption>{rows}</table>"
        )
