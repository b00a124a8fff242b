"""Run rules for control charts: Nelson's eight tests and the Western Electric set.

A control chart's limits catch single wild points; run rules catch the quieter patterns that a
stable process rarely makes by chance (long runs on one side, trends, zigzags, clusters near a
limit, points hugging the centre line). :func:`evaluate` checks a plotted statistic against a set
of :class:`Rule` objects and returns one :class:`Signal` per pattern found.

Rules
-----
Zones are measured from the centre line in units of ``sigma`` (the standard error of the plotted
statistic): zone C within 1 sigma, zone B from 1 to 2 sigma, zone A from 2 to 3 sigma.

Each rule: our id, the Nelson (1984) test it generalises, what it looks for, its parameters with
Nelson's values, and its use in the Western Electric (WE) set.

- ``beyond_limits`` (Nelson 1): one point beyond the control limits, ``center +- sigmas*sigma``
  unless ``lcl``/``ucl`` are given; ``sigmas=3``. WE: same.
- ``run`` (Nelson 2): ``length`` points in a row on the same side of the centre line;
  ``length=9``. WE: ``length=8``.
- ``trend`` (Nelson 3): ``length`` points in a row steadily increasing or steadily decreasing;
  ``length=6``.
- ``alternation`` (Nelson 4): ``length`` points in a row alternating up and down;
  ``length=14``.
- ``zone_a`` (Nelson 5): ``count`` of ``window`` points in a row more than ``sigmas`` sigma from
  the centre line on the same side; ``count=2, window=3, sigmas=2``. WE: same.
- ``zone_b`` (Nelson 6): as zone_a with ``count=4, window=5, sigmas=1``. WE: same.
- ``hugging`` (Nelson 7): ``length`` points in a row within ``sigmas`` sigma of the centre line,
  on either side; ``length=15, sigmas=1``.
- ``mixture`` (Nelson 8): ``length`` points in a row more than ``sigmas`` sigma from the centre
  line, with points on both sides (``both_sides=False`` drops that condition);
  ``length=8, sigmas=1, both_sides=True``.

Rule sets: ``NELSON`` (all eight with Nelson's parameters), ``WESTERN_ELECTRIC`` (beyond_limits,
run with ``length=8``, zone_a, zone_b) and ``LIMITS_ONLY`` (beyond_limits).

Rule text syntax (:func:`parse_rules`)
--------------------------------------
A comma-separated list of items, read left to right (a ``:`` or ``;`` counts as a comma, so
``"nelson:run=8"`` reads naturally). Spaces and letter case do not matter.

``nelson`` | ``western_electric`` | ``limits_only``
    add every rule of that set with the set's parameters.
``run`` or ``2``
    add one rule by its id or Nelson number (Nelson's parameters if it is not in the list yet).
``run=8``
    add the rule and set its main parameter: ``length`` for run, trend, alternation, hugging and
    mixture; ``sigmas`` for beyond_limits; ``count/window`` (or just ``count``) for zone_a/zone_b,
    e.g. ``zone_b=3/4``.
``zone_a.sigmas=2.5``
    add the rule and set any named parameter.
``-alternation`` or ``-4``
    switch the rule off (it stays in the list, with ``enabled=False``, so a view can show it).

Examples: ``"nelson"``, ``"1,2,5"``, ``"beyond_limits,run"``, ``"nelson:run=8,trend=7,-4"``,
``"western_electric, zone_b=3/4"``.

Conventions (decided here; common practice unless a source is named)
--------------------------------------------------------------------
- **Zone boundaries** belong to the inner zone: "beyond k sigma" means strictly more than
  ``center + k*sigma`` (or strictly less than ``center - k*sigma``); a point exactly on a control
  limit is not beyond it. The boundaries are computed as ``center + k*sigma`` -- the same
  numbers a chart draws -- and compared with the raw points, so what is marked matches the plot.
- **Points exactly on the centre line** are on neither side: they break a run (rule ``run``) and
  never count towards a one-sided zone rule; they are inside zone C for ``hugging``.
- **Ties** (two equal consecutive points) break a trend and an alternation.
- **Trends and alternations are counted in points**, as Nelson's tests are worded ("six points
  in a row steadily increasing or decreasing", "fourteen points in a row alternating up and
  down"; Nelson 1984, tests 3 and 4, wording as reproduced in tests/reference/check_values.md): a
  trend of 6 points is 5 increases in a row, an alternation of 14 points is 13 steps, each in the
  opposite direction to the one before.
- **k of m** (zone_a, zone_b): point ``i`` signals when it is itself beyond the zone boundary and
  at least ``count`` of the points ``i-window+1 .. i`` (fewer at the start of the chart) are
  beyond the same boundary on the same side. The trigger is thus always a point in the zone --
  the one that completes the pattern; every pattern that fits in some window of ``window`` points
  is found this way.
- **Missing points** (NaN) are skipped: the rules run on the remaining points in order, as if the
  missing ones were not plotted, so a gap neither breaks a pattern nor counts as one of its
  points. Positions in the result still refer to the original array.
- **One signal per pattern, every completing point marked**: each point that completes a pattern
  is a *trigger*. For the "in a row" rules (run, trend, alternation, hugging, mixture) triggers on
  consecutive points of the same rule and direction (above/below, up/down) merge into one
  :class:`Signal` listing all their points and triggers: a run of 12 points above the centre line
  under ``run=9`` is one signal covering points 1-12 with triggers 9-12, not four signals. For
  zone_a/zone_b, occurrences on the same side whose windows share a point merge (a cluster near
  a limit is one signal). ``beyond_limits`` gives one signal per point.
- **Signal text** numbers points from 1, as a chart's axis does (``Signal.points`` holds 0-based
  positions), or uses the ``labels`` given to :func:`evaluate`.

Notes
-----
"``length`` points in a row" is found for all points at once by window doubling: boolean
windows of 1, 2, 4, ... points are ANDed from shifted copies, and two overlapping power-of-two
windows cover any length. k-of-m counts are a sorted search over the in-zone points (short
charts) or shifted sums (cumulative sums for long windows).
Every rule is O(n log length) numpy work on booleans; only the (few) signals are built in Python.

References
----------
Nelson, L. S. (1984). The Shewhart control chart -- tests for special causes. Journal of Quality
Technology 16(4), 237-239.
Western Electric Company (1956). Statistical Quality Control Handbook. Indianapolis.
Montgomery, D. C. and Runger, G. C. Applied Statistics and Probability for Engineers, ch. 16
(rules as reproduced there; cited from tests/reference/check_values.md).
"""

from __future__ import annotations

import functools
import gc
import math
from collections.abc import Iterable, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from operator import itemgetter
from typing import cast

import numpy as np

from studykit.errors import StudyInputError
from studykit.stats.result import Result

__all__ = [
    "LIMITS_ONLY",
    "NELSON",
    "RULE_IDS",
    "RULE_SETS",
    "WESTERN_ELECTRIC",
    "Rule",
    "Signal",
    "evaluate",
    "parse_rules",
]

RULE_IDS: tuple[str, ...] = (
    "beyond_limits",
    "run",
    "trend",
    "alternation",
    "zone_a",
    "zone_b",
    "hugging",
    "mixture",
)

# id -> (Nelson number, default parameters in display order, main parameter)
_TABLE: dict[str, tuple[int | None, dict[str, float | int | bool], str]] = {
    "beyond_limits": (1, {"sigmas": 3.0}, "sigmas"),
    "run": (2, {"length": 9}, "length"),
    "trend": (3, {"length": 6}, "length"),
    "alternation": (4, {"length": 14}, "length"),
    "zone_a": (5, {"count": 2, "window": 3, "sigmas": 2.0}, "count"),
    "zone_b": (6, {"count": 4, "window": 5, "sigmas": 1.0}, "count"),
    "hugging": (7, {"length": 15, "sigmas": 1.0}, "length"),
    "mixture": (8, {"length": 8, "sigmas": 1.0, "both_sides": True}, "length"),
}
#: rule id of each Nelson (1984) test number, for rules given by number (``--rules 1,2,5``)
RULE_BY_NUMBER = {number: rid for rid, (number, _, _) in _TABLE.items()}
# smallest allowed value for each integer parameter
_MIN_INT = {
    ("run", "length"): 2,
    ("trend", "length"): 3,
    ("alternation", "length"): 3,
    ("hugging", "length"): 2,
    ("mixture", "length"): 2,
}

Number = float | int | bool


def _check_parameter(rid: str, name: str, value) -> Number:
    """Validate one parameter value and return it in its canonical type."""
    default = _TABLE[rid][1][name]
    where = f"rule `{rid}` parameter `{name}`"
    if isinstance(default, bool):
        if isinstance(value, bool | np.bool_):
            return bool(value)
        raise StudyInputError(f"{where} ({value!r}) must be true or false")
    if isinstance(default, int):
        if isinstance(value, bool | np.bool_) or not isinstance(value, int | float | np.number):
            raise StudyInputError(f"{where} ({value!r}) must be a whole number")
        if not float(value).is_integer():
            raise StudyInputError(f"{where} ({value!r}) must be a whole number")
        value = int(value)
        low = _MIN_INT.get((rid, name), 1)
        if value < low:
            raise StudyInputError(f"{where} ({value}) must be at least {low}")
        return value
    if isinstance(value, bool | np.bool_) or not isinstance(value, int | float | np.number):
        raise StudyInputError(f"{where} ({value!r}) must be a number")
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        raise StudyInputError(f"{where} ({value}) must be a positive finite number of sigmas")
    return value


def _describe(rid: str, p: dict) -> str:
    if rid == "beyond_limits":
        return f"1 point beyond the control limits (centre +- {p['sigmas']:g} sigma unless given)"
    if rid == "run":
        return f"{p['length']} points in a row on the same side of the centre line"
    if rid == "trend":
        return f"{p['length']} points in a row steadily increasing or steadily decreasing"
    if rid == "alternation":
        return f"{p['length']} points in a row alternating up and down"
    if rid in ("zone_a", "zone_b"):
        return (
            f"{p['count']} of {p['window']} points in a row more than {p['sigmas']:g} sigma "
            "from the centre line on the same side"
        )
    if rid == "hugging":
        return f"{p['length']} points in a row within {p['sigmas']:g} sigma of the centre line"
    both = " with points on both sides" if p["both_sides"] else ""
    return (
        f"{p['length']} points in a row more than {p['sigmas']:g} sigma from the centre line{both}"
    )


@dataclass(frozen=True)
class Rule(Result):
    """One run rule with its parameters.

    Build rules with the class methods (``Rule.run(length=8)``), from text with
    :func:`parse_rules`, or directly: ``Rule("run", parameters={"length": 8})``. Missing
    parameters take Nelson's values; ``number`` and ``description`` are filled in.

    Attributes
    ----------
    id : str
        One of :data:`RULE_IDS`.
    number : int or None
        The Nelson (1984) test this rule generalises (1-8), None for a rule outside Nelson's set.
    parameters : tuple of (name, value) pairs
        Every parameter of the rule, in a fixed order (see the module docstring).
    enabled : bool
        :func:`evaluate` skips a rule that is switched off.
    description : str
        One line in plain words, with the parameter values.

    Examples
    --------
    >>> Rule.run(8).description
    '8 points in a row on the same side of the centre line'
    >>> Rule("zone_b", parameters={"count": 3}).params
    {'count': 3, 'window': 5, 'sigmas': 1.0}
    >>> Rule.trend().with_parameters(length=7).to_dict()["parameters"]
    {'length': 7}
    """

    id: str
    number: int | None = None
    # given as a mapping or as pairs; stored as sorted-by-definition pairs (__post_init__)
    parameters: tuple[tuple[str, Number], ...] | Mapping[str, Number] = ()
    enabled: bool = True
    description: str = field(default="", compare=False)

    def __post_init__(self):
        if self.id not in _TABLE:
            raise StudyInputError(
                f"rule id {self.id!r} is unknown; use one of {', '.join(RULE_IDS)}"
            )
        number, defaults, _ = _TABLE[self.id]
        if self.number is not None and self.number != number:
            raise StudyInputError(
                f"rule `{self.id}` is Nelson test {number}, not {self.number!r}; leave `number` out"
            )
        given = dict(
            self.parameters.items() if isinstance(self.parameters, dict) else self.parameters
        )
        unknown = sorted(set(given) - set(defaults))
        if unknown:
            raise StudyInputError(
                f"rule `{self.id}` has no parameter {unknown[0]!r}; "
                f"its parameters are {', '.join(defaults)}"
            )
        values = {
            name: _check_parameter(self.id, name, given.get(name, d))
            for name, d in defaults.items()
        }
        if "window" in values and values["count"] > values["window"]:
            raise StudyInputError(
                f"rule `{self.id}` parameter `count` ({values['count']}) must not exceed "
                f"`window` ({values['window']})"
            )
        if not isinstance(self.enabled, bool | np.bool_):
            raise StudyInputError(
                f"rule `{self.id}` `enabled` ({self.enabled!r}) must be true or false"
            )
        object.__setattr__(self, "number", number)
        object.__setattr__(self, "parameters", tuple(values.items()))
        object.__setattr__(self, "enabled", bool(self.enabled))
        object.__setattr__(self, "description", _describe(self.id, values))

    # ---- constructors ---------------------------------------------------------------------
    @classmethod
    def beyond_limits(cls, sigmas: float = 3.0, *, enabled: bool = True) -> Rule:
        """Nelson test 1: one point beyond the control limits (``center +- sigmas*sigma``)."""
        return cls("beyond_limits", parameters={"sigmas": sigmas}, enabled=enabled)

    @classmethod
    def run(cls, length: int = 9, *, enabled: bool = True) -> Rule:
        """Nelson test 2 (9) / Western Electric (8): ``length`` points in a row on one side."""
        return cls("run", parameters={"length": length}, enabled=enabled)

    @classmethod
    def trend(cls, length: int = 6, *, enabled: bool = True) -> Rule:
        """Nelson test 3: ``length`` points (``length-1`` steps) steadily up or down."""
        return cls("trend", parameters={"length": length}, enabled=enabled)

    @classmethod
    def alternation(cls, length: int = 14, *, enabled: bool = True) -> Rule:
        """Nelson test 4: ``length`` points in a row alternating up and down."""
        return cls("alternation", parameters={"length": length}, enabled=enabled)

    @classmethod
    def zone_a(
        cls, count: int = 2, window: int = 3, sigmas: float = 2.0, *, enabled: bool = True
    ) -> Rule:
        """Nelson test 5: ``count`` of ``window`` points beyond ``sigmas`` sigma, same side."""
        return cls(
            "zone_a",
            parameters={"count": count, "window": window, "sigmas": sigmas},
            enabled=enabled,
        )

    @classmethod
    def zone_b(
        cls, count: int = 4, window: int = 5, sigmas: float = 1.0, *, enabled: bool = True
    ) -> Rule:
        """Nelson test 6: ``count`` of ``window`` points beyond ``sigmas`` sigma, same side."""
        return cls(
            "zone_b",
            parameters={"count": count, "window": window, "sigmas": sigmas},
            enabled=enabled,
        )

    @classmethod
    def hugging(cls, length: int = 15, sigmas: float = 1.0, *, enabled: bool = True) -> Rule:
        """Nelson test 7: ``length`` points in a row within ``sigmas`` sigma of the centre."""
        return cls("hugging", parameters={"length": length, "sigmas": sigmas}, enabled=enabled)

    @classmethod
    def mixture(
        cls, length: int = 8, sigmas: float = 1.0, both_sides: bool = True, *, enabled: bool = True
    ) -> Rule:
        """Nelson test 8: ``length`` points in a row outside ``sigmas`` sigma, on both sides."""
        return cls(
            "mixture",
            parameters={"length": length, "sigmas": sigmas, "both_sides": both_sides},
            enabled=enabled,
        )

    # ---- access ---------------------------------------------------------------------------
    @property
    def pairs(self) -> tuple[tuple[str, Number], ...]:
        """The parameters as stored: (name, value) pairs in the rule's order."""
        return cast("tuple[tuple[str, Number], ...]", self.parameters)  # set by __post_init__

    @property
    def params(self) -> dict[str, Number]:
        """The parameters as a new dict."""
        return dict(self.pairs)

    def param(self, name: str) -> Number:
        """One parameter's value by name."""
        for key, value in self.pairs:
            if key == name:
                return value
        raise StudyInputError(
            f"rule `{self.id}` has no parameter {name!r}; its parameters are "
            f"{', '.join(k for k, _ in self.pairs)}"
        )

    def with_parameters(self, **changes: Number) -> Rule:
        """A copy with some parameters changed (validated)."""
        return Rule(self.id, parameters={**self.params, **changes}, enabled=self.enabled)

    def with_enabled(self, enabled: bool) -> Rule:
        """A copy switched on or off."""
        return Rule(self.id, parameters=self.parameters, enabled=enabled)

    def to_dict(self) -> dict:
        """JSON-safe dict: id, number, parameters (dict), enabled, description."""
        return {
            "id": self.id,
            "number": self.number,
            "parameters": self.params,
            "enabled": self.enabled,
            "description": self.description,
        }


NELSON: tuple[Rule, ...] = tuple(Rule(rid) for rid in RULE_IDS)
WESTERN_ELECTRIC: tuple[Rule, ...] = (
    Rule.beyond_limits(3.0),
    Rule.run(8),
    Rule.zone_a(2, 3, 2.0),
    Rule.zone_b(4, 5, 1.0),
)
LIMITS_ONLY: tuple[Rule, ...] = (Rule.beyond_limits(3.0),)
RULE_SETS: dict[str, tuple[Rule, ...]] = {
    "nelson": NELSON,
    "western_electric": WESTERN_ELECTRIC,
    "limits_only": LIMITS_ONLY,
}


@dataclass(frozen=True)
class Signal(Result):
    """One pattern found by a run rule.

    Attributes
    ----------
    rule : str
        The rule id (one of :data:`RULE_IDS`).
    number : int or None
        The Nelson (1984) test number, None for rules outside Nelson's set.
    points : tuple of int
        0-based positions (in the array given to :func:`evaluate`) of every point in the pattern,
        in increasing order.
    trigger : int
        The first position that completed the pattern.
    text : str
        One line in plain words, with point numbers counted from 1 as on a chart's axis (or the
        ``labels`` given to :func:`evaluate`).
    triggers : tuple of int
        Every position that completed the pattern (``trigger`` is the first; filled with
        ``(trigger,)`` when left out).

    Examples
    --------
    >>> (sig,) = evaluate([0.5] * 10, center=0.0, sigma=1.0, rules="run")
    >>> sig.to_dict()
    {'rule': 'run', 'number': 2, 'points': [0, 1, 2, 3, 4, 5, 6, 7, 8, 9], 'trigger': 8, 'triggers': [8, 9], 'text': '10 points in a row above the centre line (points 1-10)'}
    """

    rule: str
    number: int | None
    points: tuple[int, ...]
    trigger: int
    text: str
    triggers: tuple[int, ...] = ()

    def __post_init__(self):
        if not self.triggers:
            object.__setattr__(self, "triggers", (self.trigger,))

    def to_dict(self) -> dict:
        """JSON-safe dict with the fields rule, number, points, trigger, triggers, text."""
        return {
            "rule": self.rule,
            "number": self.number,
            "points": list(self.points),
            "trigger": self.trigger,
            "triggers": list(self.triggers),
            "text": self.text,
        }

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_text"] = self.text  # a pending text is built before pickling
        return state


def _pending_text(template: str, pts: tuple, start: int, end: int, labels) -> str:
    """The text of a signal from what :func:`_group_signals` keeps of it (a tuple of these
    arguments, joined by :class:`_LazyText` when the text is first read: a chart of 10^6 points
    can give 3 * 10^4 signals, of which phase I reads only the positions and the views and the
    JSON the texts of those they show)."""
    count = len(pts)
    if labels is not None:
        where = _where(list(pts), labels)
    elif count == 1:
        where = f"point {start + 1}"
    elif end - start == count - 1 and count > 2:  # every position from start to end
        where = f"points {start + 1}-{end + 1}"
    else:
        where = _where(list(pts), labels)
    if count == 1:
        where = where[0].upper() + where[1:]
    return template.format(n=count, where=where)


class _LazyText:
    """``Signal.text``: a plain string, or the parts of one joined on first read (the
    dataclass's ``__init__``, ``__eq__``, ``__repr__`` and ``to_dict`` all go through here)."""

    def __get__(self, obj, owner=None):
        if obj is None:
            return self
        v = obj.__dict__["_text"]
        if type(v) is tuple:  # (template, pts, start, end, labels): see _pending_text
            v = _pending_text(*v)
            obj.__dict__["_text"] = v
        return v

    def __set__(self, obj, value) -> None:
        obj.__dict__["_text"] = value


Signal.text = _LazyText()  # type: ignore[assignment]


# ---------------------------------------------------------------------------------------------
# parsing


def _rule_ref(token: str, spec: str) -> str:
    if token in _TABLE:
        return token
    if token.isdigit() and int(token) in RULE_BY_NUMBER:
        return RULE_BY_NUMBER[int(token)]
    raise StudyInputError(
        f"`rules` ({spec!r}): {token!r} is not a rule; use a set ({', '.join(RULE_SETS)}), "
        f"a rule id ({', '.join(RULE_IDS)}) or a Nelson number 1-8"
    )


def _parse_value(rid: str, name: str, text: str, spec: str) -> Number:
    default = _TABLE[rid][1][name]
    if isinstance(default, bool):
        low = text.lower()
        if low in ("true", "yes", "on", "1"):
            return True
        if low in ("false", "no", "off", "0"):
            return False
        raise StudyInputError(
            f"`rules` ({spec!r}): rule `{rid}` parameter `{name}` ({text!r}) must be true or false"
        )
    try:
        value = float(text)
    except ValueError:
        raise StudyInputError(
            f"`rules` ({spec!r}): rule `{rid}` parameter `{name}` ({text!r}) must be a number"
        ) from None
    return value


def parse_rules(spec) -> tuple[Rule, ...]:
    """Turn a rule specification into a tuple of :class:`Rule`.

    Parameters
    ----------
    spec : str, Rule or iterable of Rule and str
        A set name, a comma list of rule ids / Nelson numbers with optional parameters (syntax in
        the module docstring), a single rule, or several rules and texts.

    Returns
    -------
    tuple of Rule
        For one text: one rule per id, in the order of :data:`RULE_IDS`; switched-off rules are
        kept with ``enabled=False``. Rule objects are returned as given; an iterable gives its
        items' rules in its own order (an empty one gives no rules).

    Examples
    --------
    >>> [(r.id, r.param("length")) for r in parse_rules("nelson:run=8,-3") if r.id in ("run", "trend")]
    [('run', 8), ('trend', 6)]
    >>> [r.enabled for r in parse_rules("nelson:-3") if r.id == "trend"]
    [False]
    >>> [r.id for r in parse_rules("1,zone_b=3/4")]
    ['beyond_limits', 'zone_b']
    >>> parse_rules("zone_b=3/4")[0].params
    {'count': 3, 'window': 4, 'sigmas': 1.0}
    """
    if isinstance(spec, Rule):
        return (spec,)
    if isinstance(spec, str):
        return _parse_text(spec)  # cached: a chart parses the same few texts again and again
    if isinstance(spec, Iterable):
        rules: list[Rule] = []
        for item in spec:
            if isinstance(item, Rule):
                rules.append(item)
            elif isinstance(item, str):
                rules.extend(_parse_text(item))
            else:
                raise StudyInputError(
                    "`rules` must be a rule text such as 'nelson', Rule objects or rule texts; "
                    f"got {item!r}"
                )
        return tuple(rules)
    raise StudyInputError(
        f"`rules` ({spec!r}) must be a rule text such as 'nelson' or '1,2,5', or Rule objects"
    )


@functools.lru_cache(maxsize=256)
def _parse_text(spec: str) -> tuple[Rule, ...]:
    """The rules of one text (cached by the text: rules are frozen, so the same tuple can be
    handed out again; an invalid text raises every time, as errors are not cached)."""
    text = "".join(spec.lower().split()).replace(":", ",").replace(";", ",")
    tokens = [t for t in text.split(",") if t]
    if not tokens:
        raise StudyInputError(
            f"`rules` ({spec!r}) is empty; give a set such as 'nelson' or rule ids such as 'run'"
        )
    chosen: dict[str, Rule] = {}
    for token in tokens:
        if token in RULE_SETS:
            for rule in RULE_SETS[token]:
                chosen[rule.id] = rule
            continue
        if token.startswith("-"):
            rid = _rule_ref(token[1:], spec)
            chosen[rid] = chosen.get(rid, Rule(rid)).with_enabled(False)
            continue
        ref, eq, value = token.partition("=")
        ref, dot, name = ref.partition(".")
        rid = _rule_ref(ref, spec)
        rule = chosen.get(rid, Rule(rid)).with_enabled(True)
        if eq:
            if not value:
                raise StudyInputError(f"`rules` ({spec!r}): {token!r} needs a value after '='")
            if dot:
                if name not in _TABLE[rid][1]:
                    raise StudyInputError(
                        f"`rules` ({spec!r}): rule `{rid}` has no parameter {name!r}; "
                        f"its parameters are {', '.join(_TABLE[rid][1])}"
                    )
                changes = {name: _parse_value(rid, name, value, spec)}
            elif rid in ("zone_a", "zone_b"):
                count, slash, window = value.partition("/")
                changes = {"count": _parse_value(rid, "count", count, spec)}
                if slash:
                    changes["window"] = _parse_value(rid, "window", window, spec)
            else:
                main = _TABLE[rid][2]
                changes = {main: _parse_value(rid, main, value, spec)}
            rule = rule.with_parameters(**changes)
        elif dot:
            raise StudyInputError(f"`rules` ({spec!r}): {token!r} needs '=value'")
        chosen[rid] = rule
    return tuple(chosen[rid] for rid in RULE_IDS if rid in chosen)


# ---------------------------------------------------------------------------------------------
# vectorised detection (all on the compressed sequence of non-missing points; 1-D masks give
# their positions by ``mask.nonzero()[0]``, np.flatnonzero without its ravel and wrapper)


def _all_in_window(mask: np.ndarray, width: int) -> np.ndarray:
    """``out[i] = mask[i : i + width].all()`` for ``i = 0 .. n - width``, by window doubling.

    Windows of 1, 2, 4, ... points are ANDed from two shifted copies of the previous level; the
    last step covers ``width`` with two overlapping power-of-two windows. O(n log width) on
    booleans, no large index arrays.
    """
    if mask.size < width:
        return np.zeros(0, dtype=bool)
    level, span = mask, 1
    while 2 * span <= width:
        level = level[:-span] & level[span:]
        span *= 2
    if span == width:
        return level
    return level[: level.size - (width - span)] & level[width - span :]


def _count_in_window(mask: np.ndarray, width: int) -> np.ndarray:
    """``out[i]`` = number of True in ``mask[max(0, i-width+1) : i+1]``."""
    if width <= 16:
        small = mask.astype(np.int8)
        for shift in range(1, min(width, mask.size)):
            small[shift:] += mask[:-shift]
        return small
    csum = np.cumsum(mask, dtype=np.int64)
    count = csum.copy()
    count[width:] -= csum[:-width]
    return count


#: Up to this many points, k of m is found by a search over the in-zone points; on a longer
#: chart by shifted sums over the whole mask (measured: the search is faster below about 2,000
#: points, the sums above).
_SHORT_CHART = 1024


def _zone_triggers(zone: np.ndarray, count: int, window: int):
    """The points in the zone with at least ``count`` in-zone points among the ``window``
    points ending there (fewer at the start of the chart), and the sorted in-zone positions
    (None when nothing triggers on a long chart: not needed)."""
    if zone.size <= _SHORT_CHART:
        in_zone = zone.nonzero()[0]
        first = in_zone.searchsorted(in_zone - (window - 1), "left")
        return in_zone[np.arange(in_zone.size) - first + 1 >= count], in_zone
    trig = (zone & (_count_in_window(zone, window) >= count)).nonzero()[0]
    return trig, (zone.nonzero()[0] if trig.size else None)


class _Found:
    """Groups found by one rule in one direction, in positions of the caller's array.

    ``starts``/``ends`` are each group's first and last point; ``triggers`` lists each group's
    completing points; ``members`` lists each group's points, or is None when they are every
    position from start to end.
    """

    __slots__ = ("kind", "starts", "ends", "triggers", "members")

    def __init__(self, kind, starts, ends, triggers, members=None):
        self.kind, self.starts, self.ends = kind, starts, ends
        self.triggers, self.members = triggers, members


def _expand(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Concatenate the integer ranges ``lo[g] .. hi[g]`` (inclusive; empty when hi < lo)."""
    sizes = np.maximum(hi - lo + 1, 0)
    total = int(sizes.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    offsets = np.repeat(lo - (np.cumsum(sizes) - sizes), sizes)
    return np.arange(total) + offsets


def _gather(values: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> list[list[int]]:
    """``[values[lo[g]:hi[g]].tolist() for g]`` with one gather and one conversion."""
    flat = values[_expand(lo, hi - 1)].tolist()
    bounds = np.concatenate(([0], np.cumsum(hi - lo))).tolist()
    return [flat[a:b] for a, b in zip(bounds[:-1], bounds[1:], strict=True)]


def _merge(kind, trig, length, max_gap, positions, in_zone=None):
    """Group sorted triggers (compressed positions) into a :class:`_Found`.

    A new group starts where the gap to the previous trigger exceeds ``max_gap``. Each
    occurrence covers ``[t-length+1, t]``; for zone rules ``in_zone`` (the in-zone positions)
    restricts a group's points to the in-zone ones. ``positions`` maps compressed to original positions
    (None when nothing is missing).
    """
    if trig.size == 0:
        return None
    if trig.size <= _FEW_TRIGGERS:
        return _merge_few(kind, trig, length, max_gap, positions, in_zone)
    breaks = ((trig[1:] - trig[:-1]) > max_gap).nonzero()[0] + 1
    firsts = np.concatenate(([0], breaks))
    lasts = np.concatenate((breaks - 1, [trig.size - 1]))
    starts = np.maximum(trig[firsts] - (length - 1), 0)
    ends = trig[lasts]
    members = None
    if in_zone is not None:
        lo = np.searchsorted(in_zone, starts, "left")
        hi = np.searchsorted(in_zone, ends, "right")
        members = _gather(in_zone if positions is None else positions[in_zone], lo, hi)
    elif positions is not None:
        members = _gather(positions, starts, ends + 1)
    if positions is not None:
        trig, starts, ends = positions[trig], positions[starts], positions[ends]
    trig_list = trig.tolist()
    bounds = firsts.tolist() + [trig.size]
    triggers = [trig_list[a:b] for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
    return _Found(kind, starts.tolist(), ends.tolist(), triggers, members)


#: Up to this many triggers, :func:`_merge` groups them in Python (a short chart's few signals:
#: some twenty numpy calls cost more than the loop); more go through the numpy route.
_FEW_TRIGGERS = 64


def _merge_few(kind, trig, length, max_gap, positions, in_zone):
    """:func:`_merge` for a few triggers: the same groups, built with Python lists."""
    t = trig.tolist()
    firsts = [0] + [i for i in range(1, len(t)) if t[i] - t[i - 1] > max_gap]
    lasts = [f - 1 for f in firsts[1:]] + [len(t) - 1]
    starts = [max(t[f] - (length - 1), 0) for f in firsts]
    ends = [t[g] for g in lasts]
    members = None
    if in_zone is not None:
        lo = in_zone.searchsorted(starts, "left").tolist()
        hi = in_zone.searchsorted(ends, "right").tolist()
        source = in_zone if positions is None else positions[in_zone]
        members = [source[a:b].tolist() for a, b in zip(lo, hi, strict=True)]
    elif positions is not None:
        members = [positions[a : b + 1].tolist() for a, b in zip(starts, ends, strict=True)]
    if positions is not None:
        t = positions[trig].tolist()
        starts, ends = positions[starts].tolist(), positions[ends].tolist()
    triggers = [t[a : b + 1] for a, b in zip(firsts, lasts, strict=True)]
    return _Found(kind, starts, ends, triggers, members)


def _in_a_row(kind: str, mask: np.ndarray, length: int, positions, extra: int = 0):
    """Groups for "``length`` points in a row" rules.

    ``mask[j]`` describes points ``j .. j+extra`` (extra = 0 for a point property, 1 for the step
    between two points, 2 for a pair of steps), so ``length - extra`` True in a row ending at
    ``j`` complete a pattern at point ``j + extra``. Triggers on consecutive points merge.
    """
    width = length - extra
    trig = _all_in_window(mask, width).nonzero()[0] + (width - 1 + extra)
    return _merge(kind, trig, length, 1, positions)


class _Sides:
    """The comparisons of one series with its zone lines, made once per :func:`evaluate` call
    and shared by the rules (zone_b, hugging and mixture all compare with centre +- 1 sigma;
    trend and alternation take the same differences)."""

    __slots__ = ("x", "c", "s", "_made")

    def __init__(self, x, c, s):
        self.x, self.c, self.s = x, c, s
        self._made: dict = {}

    def above(self, k: float | None) -> np.ndarray:
        """``x > c + k * s`` (``k`` None: ``x > c``)."""
        key = ("above", k)
        got = self._made.get(key)
        if got is None:
            got = self.x > (self.c if k is None else self.c + k * self.s)
            self._made[key] = got
        return got

    def below(self, k: float | None) -> np.ndarray:
        """``x < c - k * s`` (``k`` None: ``x < c``)."""
        key = ("below", k)
        got = self._made.get(key)
        if got is None:
            got = self.x < (self.c if k is None else self.c - k * self.s)
            self._made[key] = got
        return got

    def diff(self) -> np.ndarray:
        """Differences of neighbouring points."""
        got = self._made.get("diff")
        if got is None:
            got = self.x[1:] - self.x[:-1]  # what np.diff computes, without its wrapper
            self._made["diff"] = got
        return got


def _detect(rule: Rule, sides: _Sides, lcl, ucl, positions) -> list[_Found]:
    """All groups found by one rule (``sides`` holds the non-missing points only;
    ``positions`` maps them to the caller's positions, None when nothing is missing)."""
    rid, p = rule.id, rule.params
    x, c, s = sides.x, sides.c, sides.s
    found = []
    if rid == "beyond_limits":
        upper = c + p["sigmas"] * s if ucl is None else ucl
        lower = c - p["sigmas"] * s if lcl is None else lcl
        for kind, mask in (("above", x > upper), ("below", x < lower)):
            at = mask.nonzero()[0]
            t = (at if positions is None else positions[at]).tolist()
            if t:
                found.append(_Found(kind, t, t, [[i] for i in t]))
    elif rid == "run":
        for kind, mask in (("above", sides.above(None)), ("below", sides.below(None))):
            found.append(_in_a_row(kind, mask, int(p["length"]), positions))
    elif rid == "trend":
        d = sides.diff()
        for kind, mask in (("up", d > 0), ("down", d < 0)):
            found.append(_in_a_row(kind, mask, int(p["length"]), positions, extra=1))
    elif rid == "alternation":
        sign = np.sign(sides.diff())
        flips = sign[1:] * sign[:-1] < 0
        found.append(_in_a_row("alternating", flips, int(p["length"]), positions, extra=2))
    elif rid in ("zone_a", "zone_b"):
        k, m = int(p["count"]), int(p["window"])
        for kind, zone in (
            ("above", sides.above(p["sigmas"])),
            ("below", sides.below(p["sigmas"])),
        ):
            trig, in_zone = _zone_triggers(zone, k, m)
            found.append(_merge(kind, trig, m, m - 1, positions, in_zone=in_zone))
    elif rid == "hugging":
        # within sigmas of the centre: neither above nor below (x >= lo is not x < lo: no NaN)
        inside = ~(sides.above(p["sigmas"]) | sides.below(p["sigmas"]))
        found.append(_in_a_row("inside", inside, int(p["length"]), positions))
    elif rid == "mixture":
        length = int(p["length"])
        above, below = sides.above(p["sigmas"]), sides.below(p["sigmas"])
        if not p["both_sides"]:
            found.append(_in_a_row("outside", above | below, length, positions))
        else:
            window = _all_in_window(above | below, length)
            window &= ~_all_in_window(above, length)
            window &= ~_all_in_window(below, length)
            trig = window.nonzero()[0] + (length - 1)
            found.append(_merge("both", trig, length, 1, positions))
    return [f for f in found if f is not None]


# ---------------------------------------------------------------------------------------------
# text


def _where(positions: list[int], labels) -> str:
    """'point 4', 'points 4, 6', 'points 12-20, 22' (numbers from 1, or the labels)."""
    # runs of consecutive positions first: a run of 3 or more names only its two ends, so
    # only those labels are read
    runs = []
    i = 0
    while i < len(positions):
        j = i
        while j + 1 < len(positions) and positions[j + 1] == positions[j] + 1:
            j += 1
        runs.append((i, j))
        i = j + 1
    needed = sorted({k for i, j in runs for k in ((i, j) if j - i >= 2 else range(i, j + 1))})
    if labels is None:
        got = {k: str(positions[k] + 1) for k in needed}
        dash = "-"
    else:
        arr = getattr(labels, "array", None)  # studykit.stats.charts.Labels: read in one step
        at = [positions[k] for k in needed]
        vals = arr[at].tolist() if arr is not None else [labels[p] for p in at]
        got = {k: str(v) for k, v in zip(needed, vals, strict=True)}
        dash = " to "
    if len(positions) == 1:
        return f"point {got[0]}"
    parts = []
    for i, j in runs:
        if j - i >= 2:
            parts.append(f"{got[i]}{dash}{got[j]}")
        else:
            parts.extend(got[k] for k in range(i, j + 1))
    return "points " + ", ".join(parts)


def _template(rule: Rule, kind: str, given_limit: bool) -> str:
    """Signal text with ``{n}`` (number of points) and ``{where}`` left to fill."""
    p = rule.params
    if rule.id == "beyond_limits":
        limit = "upper" if kind == "above" else "lower"
        sign = "+" if kind == "above" else "-"
        detail = "" if given_limit else f" (centre {sign} {p['sigmas']:g} sigma)"
        return f"{{where}} {kind} the {limit} control limit{detail}"
    if rule.id == "run":
        return f"{{n}} points in a row {kind} the centre line ({{where}})"
    if rule.id == "trend":
        way = "increasing" if kind == "up" else "decreasing"
        return f"{{n}} points in a row steadily {way} ({{where}})"
    if rule.id == "alternation":
        return "{n} points in a row alternating up and down ({where})"
    if rule.id in ("zone_a", "zone_b"):
        return (
            f"{p['count']} of {p['window']} points in a row more than {p['sigmas']:g} sigma "
            f"{kind} the centre line ({{where}})"
        )
    if rule.id == "hugging":
        return f"{{n}} points in a row within {p['sigmas']:g} sigma of the centre line ({{where}})"
    both = ", on both sides" if kind == "both" else ""
    return f"{{n}} points in a row more than {p['sigmas']:g} sigma from the centre line{both} ({{where}})"


# ---------------------------------------------------------------------------------------------
# evaluate


def _as_points(points) -> tuple[np.ndarray, np.ndarray | None]:
    """The points as a float array and the mask of the non-missing ones (None when every
    point is there)."""
    try:
        x = np.asarray(points, dtype=float)
    except (TypeError, ValueError):
        raise StudyInputError(
            "`points` must be numbers (use NaN for a missing point); "
            f"got values such as {list(points)[:3]!r}"
        ) from None
    if x.ndim != 1:
        raise StudyInputError(
            f"`points` must be one-dimensional (a series in time order); got shape {x.shape}"
        )
    if np.isfinite(x).all():  # (the usual case: one test instead of two)
        return x, None
    bad = np.flatnonzero(np.isinf(x))
    if bad.size:
        raise StudyInputError(
            f"`points` has an infinite value ({x[bad[0]]}) at position {bad[0]}; "
            "use NaN for a missing point"
        )
    return x, ~np.isnan(x)


def _as_level(value, name: str, n: int, keep: np.ndarray | None, *, allow_inf: bool = False):
    """Scalar or per-point array, restricted to the kept (non-missing) points (``keep`` None:
    every point is kept)."""
    if type(value) is float and (not math.isnan(value) if allow_inf else math.isfinite(value)):
        return value  # one valid number (what a chart passes): nothing to convert
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise StudyInputError(
            f"`{name}` ({value!r}) must be a number or one number per point"
        ) from None
    out: float | np.ndarray
    if arr.ndim == 0:
        values = arr.reshape(1)
        out = float(arr)
    elif arr.ndim == 1 and arr.size == n:
        values = arr if keep is None else arr[keep]
        out = values
    else:
        raise StudyInputError(
            f"`{name}` must be a number or one number per point ({n}); got shape {arr.shape}"
        )
    if values.size:
        bad = np.isnan(values) if allow_inf else ~np.isfinite(values)
        if bad.any():
            i = int(np.argmax(bad))
            at = "" if arr.ndim == 0 else f" at position {_position(keep, i)}"
            what = "a number (use -inf/inf for no limit)" if allow_inf else "finite"
            raise StudyInputError(f"`{name}` ({values[i]}){at} must be {what}")
    return out


# long: signature and numpydoc docstring take 60 lines; the body is 28
def evaluate(
    points,
    *,
    center,
    sigma,
    lcl=None,
    ucl=None,
    rules="nelson",
    labels: Sequence | None = None,
) -> tuple[Signal, ...]:
    """Check a control chart's points against run rules.

    Parameters
    ----------
    points : array-like of float, 1-D
        The plotted statistic in time order; NaN marks a missing point (skipped, see Notes).
    center : float or array-like
        The centre line, one value or one per point.
    sigma : float or array-like
        Standard error of the plotted statistic (one value or one per point, > 0); zone ``k``
        is ``center +- k*sigma``.
    lcl, ucl : float or array-like, optional
        Control limits for ``beyond_limits``, replacing ``center -+ sigmas*sigma`` (for example
        an LCL floored at 0). Use ``-inf``/``inf`` for "no limit on this side".
    rules : str, Rule or tuple of Rule
        ``"nelson"`` (default), ``"western_electric"``, ``"limits_only"``, a comma list such as
        ``"1,2,5"`` or ``"nelson:run=8,-4"`` (see :func:`parse_rules`), or Rule objects.
    labels : sequence, optional
        One label per point (e.g. subgroup ids) used in the signal texts instead of the point
        numbers 1, 2, ...

    Returns
    -------
    tuple of Signal
        Sorted by first trigger, then by rule order. Each has ``rule``, ``number``, ``points``
        (0-based positions), ``trigger`` (first completing position), ``triggers`` (all
        completing positions) and ``text``.

    Notes
    -----
    Conventions (boundaries, centre-line points, ties, counting, k of m, missing points,
    merging) are listed in the module docstring. Definitions follow Nelson (1984), tests 1-8,
    with zone C = within 1 sigma, B = 1-2 sigma, A = 2-3 sigma.

    References
    ----------
    Nelson, L. S. (1984). The Shewhart control chart -- tests for special causes. Journal of
    Quality Technology 16(4), 237-239.

    Examples
    --------
    >>> x = [0.5, 0.2, 0.4, 0.9, 0.1, 0.3, 0.6, 0.7, 0.8, 3.4]
    >>> for s in evaluate(x, center=0.0, sigma=1.0, rules="nelson"):
    ...     print(s.rule, s.number, s.trigger, s.triggers, "|", s.text)
    run 2 8 (8, 9) | 10 points in a row above the centre line (points 1-10)
    beyond_limits 1 9 (9,) | Point 10 above the upper control limit (centre + 3 sigma)
    trend 3 9 (9,) | 6 points in a row steadily increasing (points 5-10)
    >>> [s.rule for s in evaluate(x, center=0.0, sigma=1.0, rules="western_electric")]
    ['run', 'beyond_limits']
    """
    x_all, keep = _as_points(points)
    n_all = x_all.size
    rule_list = parse_rules(rules)
    if labels is not None and len(labels) != n_all:
        raise StudyInputError(
            f"`labels` has {len(labels)} entries but `points` has {n_all}; give one label per point"
        )
    x = x_all if keep is None else x_all[keep]
    positions = None if keep is None else keep.nonzero()[0]
    c = _as_level(center, "center", n_all, keep)
    s = _as_level(sigma, "sigma", n_all, keep)
    if (s <= 0) if type(s) is float else np.any(np.asarray(s) <= 0):
        sv = np.asarray(s).reshape(-1)
        raise StudyInputError(f"`sigma` ({sv[np.argmax(sv <= 0)]}) must be greater than 0")
    low, high = _limits(lcl, ucl, n_all, keep, x)

    found: list[Signal] = []
    firsts: list[int] = []  # each signal's first trigger
    orders: list[int] = []  # (rule's place in the list, number of its signals) per group
    sides = _Sides(x, c, s)
    with collector_paused():  # 10^5 new signals hold no reference cycles
        for order, rule in enumerate(rule_list):
            if not rule.enabled:
                continue
            for group in _detect(rule, sides, low, high, positions):
                given = (high if group.kind == "above" else low) is not None
                template = _template(rule, group.kind, given)
                made = _group_signals(rule, group, template, labels)
                found += made
                firsts += [trig[0] for trig in group.triggers]
                orders += [order] * len(made)
        return _by_trigger(found, firsts, orders)


def _by_trigger(found: list, firsts: list[int], orders: list[int]) -> tuple:
    """The signals sorted by first trigger, then by rule order; a stable sort (``np.lexsort``),
    so a group's signals keep their order (as ``sorted`` with the key (trigger, order) gives
    them, in one numpy call instead of a Python sort of 10^4 keyed items)."""
    if len(found) < 2:
        return tuple(found)
    order = np.lexsort((np.array(orders), np.array(firsts)))
    return itemgetter(*order.tolist())(found)


@contextmanager
def collector_paused():
    """Python's cyclic garbage collector paused while the block runs (restored after it).

    A chart of 10^6 points makes about 10^5 small objects (signals, their points) that hold no
    reference cycles; without the pause the collector walks them again and again while they
    are made (about a third of phase I's time on 4.4 * 10^6 points). Reference counting still
    frees everything; cycles made inside are collected after the block.
    """
    was = gc.isenabled()
    if was:
        gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()


def _position(keep: np.ndarray | None, i: int) -> int:
    """The caller's position of the ``i``-th kept point."""
    return i if keep is None else int(np.flatnonzero(keep)[i])


def _limits(lcl, ucl, n_all: int, keep, x):
    """The given control limits at the kept points (None when not given); lcl < ucl."""
    low = None if lcl is None else _as_level(lcl, "lcl", n_all, keep, allow_inf=True)
    high = None if ucl is None else _as_level(ucl, "ucl", n_all, keep, allow_inf=True)
    if low is None or high is None or (type(low) is float and type(high) is float and low < high):
        return low, high
    if np.any(np.asarray(low) >= np.asarray(high)):
        lo_v = np.broadcast_to(low, x.shape) if np.ndim(low) else np.full(max(x.size, 1), low)
        hi_v = np.broadcast_to(high, x.shape) if np.ndim(high) else np.full(max(x.size, 1), high)
        i = int(np.argmax(lo_v >= hi_v))
        raise StudyInputError(f"`lcl` ({lo_v[i]}) must be less than `ucl` ({hi_v[i]})")
    return low, high


def _group_signals(rule, group, template: str, labels) -> list:
    """One Signal per occurrence in a detected group; its text is built when first read."""
    out = []
    members = group.members
    rid, number = rule.id, rule.number
    new, put = object.__new__, object.__setattr__
    for g, (start, end, trig) in enumerate(
        zip(group.starts, group.ends, group.triggers, strict=True)
    ):
        pts = tuple(range(start, end + 1) if members is None else members[g])
        # the triggers are sorted points of the pattern: as many as its points, they are its
        # points (every single-point signal), and the one tuple serves both fields
        triggers = pts if len(trig) == len(pts) else tuple(trig)
        # what Signal(rid, number, pts, trig[0], text, tuple(trig)) stores, without its
        # per-field frozen-dataclass assignments (3 * 10^4 signals on a 10^6-point chart)
        sig = new(Signal)
        put(
            sig,
            "__dict__",
            {
                "rule": rid,
                "number": number,
                "points": pts,
                "trigger": trig[0],
                "_text": (template, pts, start, end, labels),
                "triggers": triggers,
            },
        )
        out.append(sig)
    return out
