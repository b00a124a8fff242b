"""The study model: characteristics, criteria, decisions, comments, sign-offs.

A :class:`Study` is an immutable value: the raw measurement file (bytes and their SHA-256), the
specification of each characteristic, the acceptance criterion of each, and the ordered record of
what the team decided (exclusions with reasons, chosen models, spec changes), commented and signed.
Every change returns a new :class:`Study`; nothing is mutated in place. The study file
(:mod:`studykit.store`) keeps a study on disk and only ever appends to it.

Decisions are events. The current specification of a characteristic is its first specification
with every later ``set_spec`` decision applied in order; the current exclusions are the latest
``exclude``/``restore`` decision per subgroup. :meth:`Study.content_digest` condenses the data and
the *effect* of the decisions into one SHA-256 so a sign-off can tell whether the study it approved
is still the study on file.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from types import MappingProxyType
from typing import Any, ClassVar, Self

from studykit import names
from studykit.errors import SpecError, StudyFileError, StudyInputError

__all__ = [
    "ACTIONS",
    "ATTRIBUTE_CHARTS",
    "BASES",
    "CHARTS",
    "DEFAULT_SIGNOFF_RULES",
    "DIGEST_NEUTRAL_ACTIONS",
    "KEEP_ORIGINS",
    "SIGNAL_ACTIONS",
    "INDICES",
    "SIGNOFF_DECISIONS",
    "SIGNOFF_ROLES",
    "Characteristic",
    "Comment",
    "Criteria",
    "Decision",
    "SignOff",
    "SignOffState",
    "Study",
    "SPEC_COLUMNS",  # noqa: F822 (served by __getattr__ from studykit.specs)
    "match_to_data",  # noqa: F822
    "now_utc",
    "read_specs",  # noqa: F822
    "read_specs_bytes",  # noqa: F822
]

#: capability indices a criterion may name
INDICES = ("cp", "cpk", "pp", "ppk", "cpm")
#: how a criterion is judged: on the confidence lower bound of the index or on its point estimate
BASES = ("lower_bound", "estimate")
#: control chart choices for a characteristic ("auto" lets the analysis choose from the data)
CHARTS = ("auto", "xbar_r", "xbar_s", "imr", "p", "np", "c", "u")
#: charts for counted (attribute) data; such characteristics need no specification limits
ATTRIBUTE_CHARTS = ("p", "np", "c", "u")
#: decisions on a run-rule signal: "keep, with reason" (the signal is reviewed and not a special
#: cause, or has a known common cause) and its withdrawal; keyed by (subgroup, rule)
SIGNAL_ACTIONS = ("keep_signal", "reopen_signal")
#: decisions that change one characteristic's data, specification, criteria, model or chart
#: (they name the characteristic they apply to)
_CHARACTERISTIC_EDITS = ("exclude", "restore", "set_spec", "set_criteria", "set_model", "set_chart")
#: decision actions studykit itself understands; other lower-case names are kept as settings
ACTIONS = (
    *_CHARACTERISTIC_EDITS,
    "note",
    "void_signoff",
    "set_signoff_rules",
    "waive_verdict",
    *SIGNAL_ACTIONS,
)
#: where a keep decision came from: a person's review of the chart, or a rejected proposal of
#: the automatic phase-I search
KEEP_ORIGINS = ("person", "rejected_proposal")
#: actions that do not change what the study computes (they never void a sign-off)
DIGEST_NEUTRAL_ACTIONS = frozenset({"note", "void_signoff"})
#: the usual roles of a sign-off; any other non-empty text is accepted too
SIGNOFF_ROLES = ("prepared", "reviewed", "approved")
#: what a signer says
SIGNOFF_DECISIONS = ("approve", "reject", "comment")

_ACTION_RE = re.compile(r"^[a-z][a-z0-9_]*$")
_MODEL_RE = re.compile(r"^[a-z][a-z0-9_\-]*$")
_DIGEST_FORMAT = "studykit-content-digest-1"


def now_utc() -> str:
    """The current time as an ISO 8601 UTC string with seconds, e.g. ``2026-03-02T06:00:00Z``.

    Examples
    --------
    >>> now_utc().endswith("Z")
    True
    """
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


# ---------------------------------------------------------------------------------------------
# small checks


def _number(value, *, name: str, error=SpecError) -> float | None:
    """A finite float or None; text such as '12.5' is accepted, bools are not."""
    if value is None:
        return None
    if isinstance(value, str):
        text = value.strip()
        if text == "":
            return None
        try:
            value = float(text)
        except ValueError:
            raise error(
                f"`{name}` ({value!r}) is not a number: write it with a decimal point, e.g. 12.5"
            ) from None
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise error(f"`{name}` ({value!r}) must be a number or empty")
    value = float(value)
    if not math.isfinite(value):
        raise error(f"`{name}` ({value}) must be a finite number")
    return value


def _text(value, *, name: str, error=StudyInputError, required: bool = False) -> str:
    if value is None:
        value = ""
    if not isinstance(value, str):
        raise error(f"`{name}` ({value!r}) must be text")
    if required and not value.strip():
        raise error(f"`{name}` must not be empty")
    return value


def _when(value, *, name: str = "when") -> str:
    """An ISO 8601 time (now when empty); a clear error for anything else."""
    text = _text(value, name=name).strip()
    if not text:
        return now_utc()
    try:
        datetime.fromisoformat(text.replace("Z", "+00:00"))
    except ValueError:
        raise StudyInputError(
            f"`{name}` ({value!r}) is not an ISO 8601 time: write e.g. 2026-03-02T06:00:00Z"
        ) from None
    return text


def known_models() -> tuple[str, ...]:
    """Model names an analysis understands: ``auto``, ``normal``, the transforms, the families."""
    from studykit.stats import fit as fit_module

    names = ["auto", "normal", "boxcox", "johnson"]
    names += [n for n in fit_module.FAMILIES if n not in names]
    return tuple(names)


def check_model(model, *, error=SpecError) -> str:
    """A model name the analysis knows (lower case), else a clear error listing them."""
    text = _text(model, name="model", error=error).strip().lower() or "auto"
    known = known_models()
    if text not in known:
        raise error(
            f"`model` ({model!r}) is not a model studykit knows; use one of {', '.join(known)}"
        )
    return text


def _fmt(x: float | None) -> str:
    return "none" if x is None else f"{x:g}"


def _json_safe(payload, *, name: str) -> dict:
    if payload is None:
        return {}
    if not isinstance(payload, Mapping):
        raise StudyInputError(f"`{name}` must be a mapping (dict), got {type(payload).__name__}")
    try:
        text = json.dumps(dict(payload), sort_keys=True, allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise StudyInputError(
            f"`{name}` must hold only JSON values (text, finite numbers, lists, dicts): {exc}"
        ) from None
    return json.loads(text)


def _canonical(obj) -> str:
    return json.dumps(
        obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False
    )


# ---------------------------------------------------------------------------------------------
# characteristic and criteria


class _StrictRecord:
    """A frozen record whose ``from_dict`` inverts its ``to_dict`` and refuses a key it does not
    know (``_field_kind`` names the kind of field in the message)."""

    _field_kind: ClassVar[str]

    @classmethod
    def from_dict(cls, d: Mapping) -> Self:
        """Inverse of :meth:`to_dict`; unknown keys are an error."""
        known = {f.name for f in dataclasses.fields(cls)}
        extra = sorted(set(d) - known)
        if extra:
            raise SpecError(
                f"unknown {cls._field_kind} field(s) {extra}: known are {sorted(known)}"
            )
        return cls(**dict(d))


@dataclass(frozen=True)
class Characteristic(_StrictRecord):
    """One measured feature of the part, with its specification.

    Parameters
    ----------
    name : str
        The name used in the data file (without the unit in brackets).
    unit : str, optional
        Unit of measure, e.g. ``"mm"``.
    lsl, usl : float, optional
        Lower and upper specification limits. One-sided specifications are allowed; at least one
        limit is required unless ``chart`` is an attribute chart (p, np, c, u).
    target : float, optional
        Nominal value; must lie within [lsl, usl]. Needed for Cpm.
    safety_critical : bool
        Marks a characteristic whose failure affects safety or legal compliance.
    chart : str
        ``"auto"`` or one of ``xbar_r, xbar_s, imr, p, np, c, u``.
    subgroup_size : int, optional
        Fixed subgroup size when the data carry no subgroup column.
    size_column : str, optional
        For attribute data, the column holding each lot's size.
    model : str
        ``"auto"`` or the name of a distribution model (e.g. ``"normal"``, ``"lognormal"``).
    description : str
        Free text (drawing reference, gauge used...).
    source : str, optional
        File name of the data file (within the study) that holds this characteristic; None
        means the study's first data file.

    Raises
    ------
    SpecError
        When the limits are missing or out of order, or the target lies outside them.

    Examples
    --------
    >>> c = Characteristic("bore_diameter", unit="mm", lsl=11.97, usl=12.03, target=12.0)
    >>> c.two_sided, round(c.tolerance, 6)
    (True, 0.06)
    >>> Characteristic("runout", usl=0.05).two_sided
    False
    """

    _field_kind: ClassVar[str] = "specification"

    name: str
    unit: str | None = None
    lsl: float | None = None
    usl: float | None = None
    target: float | None = None
    safety_critical: bool = False
    chart: str = "auto"
    subgroup_size: int | None = None
    size_column: str | None = None
    model: str = "auto"
    description: str = ""
    source: str | None = None

    def __post_init__(self):
        name = _text(self.name, name="name", error=SpecError, required=True).strip()
        set_ = object.__setattr__
        set_(self, "name", name)
        where = f"characteristic '{name}': "
        unit = self.unit
        if unit is not None:
            unit = _text(unit, name="unit", error=SpecError).strip() or None
        set_(self, "unit", unit)
        lsl = _number(self.lsl, name="lsl")
        usl = _number(self.usl, name="usl")
        target = _number(self.target, name="target")
        set_(self, "lsl", lsl)
        set_(self, "usl", usl)
        set_(self, "target", target)
        if not isinstance(self.safety_critical, bool):
            raise SpecError(
                where + f"`safety_critical` ({self.safety_critical!r}) must be True or False"
            )
        chart = _text(self.chart, name="chart", error=SpecError).strip().lower() or "auto"
        if chart not in CHARTS:
            raise SpecError(where + f"`chart` ({self.chart!r}) must be one of {', '.join(CHARTS)}")
        set_(self, "chart", chart)
        if lsl is None and usl is None and chart not in ATTRIBUTE_CHARTS:
            raise SpecError(
                where + "needs at least one specification limit: give `lsl`, `usl` or both"
            )
        if lsl is not None and usl is not None and not lsl < usl:
            raise SpecError(where + f"`usl` ({usl:g}) must be greater than `lsl` ({lsl:g})")
        if target is not None:
            if lsl is not None and target < lsl or usl is not None and target > usl:
                raise SpecError(
                    where + f"`target` ({target:g}) must lie within the limits "
                    f"[lsl {_fmt(lsl)}, usl {_fmt(usl)}]"
                )
        size = self.subgroup_size
        if size is not None:
            if isinstance(size, bool) or not isinstance(size, int) or size < 1:
                if isinstance(size, float) and size.is_integer() and size >= 1:
                    size = int(size)
                else:
                    raise SpecError(
                        where + f"`subgroup_size` ({size!r}) must be a whole number of at least 1"
                    )
        set_(self, "subgroup_size", size)
        size_column = self.size_column
        if size_column is not None:
            size_column = _text(size_column, name="size_column", error=SpecError).strip() or None
        set_(self, "size_column", size_column)
        model = _text(self.model, name="model", error=SpecError).strip().lower() or "auto"
        if not _MODEL_RE.match(model):
            raise SpecError(
                where + f"`model` ({self.model!r}) must be 'auto' or a model name such as 'normal'"
            )
        set_(self, "model", model)
        set_(self, "description", _text(self.description, name="description", error=SpecError))
        source = self.source
        if source is not None:
            source = _text(source, name="source", error=SpecError).strip() or None
        set_(self, "source", source)

    @property
    def two_sided(self) -> bool:
        """Both limits given."""
        return self.lsl is not None and self.usl is not None

    @property
    def tolerance(self) -> float | None:
        """USL - LSL, or None for a one-sided specification."""
        return self.usl - self.lsl if self.two_sided else None

    @property
    def is_attribute(self) -> bool:
        """Counted data (defectives or defects) rather than measured values."""
        return self.chart in ATTRIBUTE_CHARTS

    def to_dict(self) -> dict:
        """JSON-safe dict of every field (``source`` only when set, so single-file studies keep
        the digest they always had)."""
        out = dataclasses.asdict(self)
        if out.get("source") is None:
            out.pop("source", None)
        return out


@dataclass(frozen=True)
class Criteria(_StrictRecord):
    """The acceptance criterion for one characteristic.

    Parameters
    ----------
    index : {"cp", "cpk", "pp", "ppk", "cpm"}
        The capability index judged.
    threshold : float
        The minimum acceptable value.
    basis : {"lower_bound", "estimate"}
        Judge the one-sided lower confidence bound of the index (the cautious reading) or its
        point estimate.
    confidence : float
        Confidence level of the lower bound, in (0, 1).
    interval_coverage, interval_confidence : float, optional
        The tolerance-interval criterion "at least P of parts within specification with
        confidence C" (ISO 16269-6, common in medical-device process validation), judged beside
        the index when set (both or neither; see :mod:`studykit.intervals`).

    Notes
    -----
    The defaults follow common practice, no source: Ppk >= 1.67 for a pre-launch (preliminary)
    study and Cpk >= 1.33 for ongoing production are widely used automotive customer requirements.
    The customer's requirement always governs; set it here.

    Examples
    --------
    >>> Criteria()  # doctest: +NORMALIZE_WHITESPACE
    Criteria(index='ppk', threshold=1.67, basis='lower_bound', confidence=0.95,
             interval_coverage=None, interval_confidence=None)
    >>> Criteria(index="cpk", threshold=1.33).describe()
    'Cpk lower 95% bound >= 1.33'
    """

    _field_kind: ClassVar[str] = "criteria"

    index: str = names.DEFAULT_CRITERION["index"]
    threshold: float = names.DEFAULT_CRITERION["threshold"]
    basis: str = names.DEFAULT_CRITERION["basis"]
    confidence: float = names.DEFAULT_CRITERION["confidence"]
    #: the tolerance-interval criterion "at least P of parts within specification with
    #: confidence C" (ISO 16269-6), judged beside the index when both are set; None: not used
    interval_coverage: float | None = None
    interval_confidence: float | None = None

    def __post_init__(self):
        _check_interval_criterion(self)
        index = _text(self.index, name="index", error=SpecError).strip().lower()
        if index not in INDICES:
            raise SpecError(f"`index` ({self.index!r}) must be one of {', '.join(INDICES)}")
        object.__setattr__(self, "index", index)
        threshold = _number(self.threshold, name="threshold")
        if threshold is None or threshold <= 0:
            raise SpecError(
                f"`threshold` ({self.threshold!r}) must be a positive number, e.g. 1.33"
            )
        object.__setattr__(self, "threshold", threshold)
        basis = _text(self.basis, name="basis", error=SpecError).strip().lower()
        if basis not in BASES:
            raise SpecError(f"`basis` ({self.basis!r}) must be one of {', '.join(BASES)}")
        object.__setattr__(self, "basis", basis)
        conf = _number(self.confidence, name="confidence")
        if conf is None or not 0.5 <= conf < 1:
            # the analysis computes bounds only for levels in [0.5, 1): refuse here, not later
            raise SpecError(
                f"`confidence` ({self.confidence!r}) must lie between 0 and 1, at "
                "0.5 or above (a bound below 50% is no lower bound), e.g. 0.95"
            )
        object.__setattr__(self, "confidence", conf)

    @property
    def has_interval(self) -> bool:
        """The tolerance-interval criterion is set."""
        return self.interval_coverage is not None

    def describe_interval(self) -> str | None:
        """The tolerance-interval criterion in words, or None when it is not set.

        >>> Criteria(interval_coverage=0.99, interval_confidence=0.95).describe_interval()
        'at least 99% of parts within specification with 95% confidence'
        """
        if not self.has_interval:
            return None
        return (
            f"at least {self.interval_coverage * 100:g}% of parts within specification "
            f"with {self.interval_confidence * 100:g}% confidence"
        )

    def describe(self) -> str:
        """One line for a table, e.g. ``Ppk lower 95% bound >= 1.67``."""
        label = names.index_label(self.index)
        if self.basis == "lower_bound":
            text = f"{label} lower {self.confidence * 100:g}% bound >= {self.threshold:g}"
        else:
            text = f"{label} >= {self.threshold:g}"
        if self.has_interval:
            text += f"; and {self.describe_interval()}"
        return text

    def to_dict(self) -> dict:
        """JSON-safe dict of every field (the interval criterion only when set, so studies
        without it keep the digest they always had)."""
        out = dataclasses.asdict(self)
        if not self.has_interval:
            out.pop("interval_coverage")
            out.pop("interval_confidence")
        return out


# ---------------------------------------------------------------------------------------------
# decisions, comments, sign-offs


@dataclass(frozen=True)
class Decision:
    """One recorded decision about a characteristic (or the whole study when it is None).

    Parameters
    ----------
    characteristic : str or None
        The characteristic concerned; None for a study-wide entry (a note, a voided sign-off).
    action : str
        ``exclude``, ``restore``, ``set_spec``, ``set_criteria``, ``set_model``, ``set_chart``,
        ``note``, ``void_signoff``, or another lower-case name (kept as a setting whose latest
        payload wins).
    subgroup : str, optional
        The subgroup label for ``exclude``/``restore`` (stored as text; ``7`` becomes ``"7"``).
    reason : str
        Why. Required for every decision made by a person except ``note``.
    who : str
        Who decided. Required unless ``automatic``; automatic decisions default to ``"studykit"``.
    when : str
        ISO 8601 UTC time; now when empty.
    automatic : bool
        True when studykit made the decision (e.g. a phase-I removal by a run rule).
    payload : dict
        Action details, JSON values only (e.g. ``{"model": "lognormal"}``). Kept read-only.

    Examples
    --------
    >>> d = Decision("flange", "exclude", subgroup=17, reason="insert chipped", who="A. Ruiz")
    >>> d.subgroup, d.automatic
    ('17', False)
    """

    characteristic: str | None
    action: str
    subgroup: str | None = None
    reason: str = ""
    who: str = ""
    when: str = ""
    automatic: bool = False
    payload: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self):
        set_ = object.__setattr__
        ch = self.characteristic
        if ch is not None:
            ch = _text(ch, name="characteristic").strip() or None
        set_(self, "characteristic", ch)
        action = _text(self.action, name="action", required=True).strip().lower()
        if not _ACTION_RE.match(action):
            raise StudyInputError(
                f"`action` ({self.action!r}) must be a lower-case name such as 'exclude' or 'note'"
            )
        set_(self, "action", action)
        if not isinstance(self.automatic, bool):
            raise StudyInputError(f"`automatic` ({self.automatic!r}) must be True or False")
        sub = self.subgroup
        if sub is not None:
            if isinstance(sub, bool) or not isinstance(sub, str | int | float):
                raise StudyInputError(f"`subgroup` ({sub!r}) must be a label (text or number)")
            if isinstance(sub, float) and sub.is_integer():
                sub = int(sub)
            sub = str(sub).strip() or None
        set_(self, "subgroup", sub)
        what = f"{action} decision"
        article = "an" if action[:1] in "aeiou" else "a"
        if action in ("exclude", "restore") + SIGNAL_ACTIONS and sub is None:
            article_ = "an" if action[:1] in "aeiou" else "a"
            raise StudyInputError(f"{article_} {what} needs the `subgroup` it applies to")
        if action in SIGNAL_ACTIONS and not str(dict(self.payload or {}).get("rule", "")).strip():
            raise StudyInputError(
                f"a {what} needs the run rule of the signal in its payload, e.g. "
                "{'rule': 'beyond_limits'}"
            )
        if action in _CHARACTERISTIC_EDITS + SIGNAL_ACTIONS:
            if ch is None:
                raise StudyInputError(f"{article} {what} needs the `characteristic` it applies to")
        reason = _text(self.reason, name="reason")
        who = _text(self.who, name="who").strip()
        if self.automatic:
            who = who or "studykit"
        else:
            if not who:
                raise StudyInputError(
                    f"{article} {what} made by a person needs `who` (the person's name)"
                )
            if action != "note" and not reason.strip():
                raise StudyInputError(
                    f"{article} {what} made by a person needs a non-empty `reason`, e.g. "
                    "'tool change, logged in shift book'"
                )
        set_(self, "reason", reason.strip())
        set_(self, "who", who)
        set_(self, "when", _when(self.when))
        set_(self, "payload", MappingProxyType(_json_safe(self.payload, name="payload")))

    def to_dict(self) -> dict:
        """JSON-safe dict of every field."""
        d = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        d["payload"] = json.loads(json.dumps(dict(self.payload)))
        return d

    @classmethod
    def from_dict(cls, d: Mapping) -> Decision:
        """Inverse of :meth:`to_dict`."""
        return cls(**dict(d))


@dataclass(frozen=True)
class Comment:
    """A comment on the study or one characteristic; it never changes a result.

    Examples
    --------
    >>> Comment("Gauge study attached.", who="L. Okafor", when="2026-03-04T09:00:00Z").text
    'Gauge study attached.'
    """

    text: str
    who: str
    when: str = ""
    characteristic: str | None = None

    def __post_init__(self):
        object.__setattr__(self, "text", _text(self.text, name="text", required=True))
        object.__setattr__(self, "who", _text(self.who, name="who", required=True).strip())
        object.__setattr__(self, "when", _when(self.when))
        ch = self.characteristic
        if ch is not None:
            ch = _text(ch, name="characteristic").strip() or None
        object.__setattr__(self, "characteristic", ch)

    def to_dict(self) -> dict:
        """JSON-safe dict of every field."""
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class SignOff:
    """A person's sign-off on the study as it stood at signing time.

    Parameters
    ----------
    name : str
        The signer.
    role : str
        ``prepared``, ``reviewed``, ``approved`` or other text (e.g. ``customer SQE``).
    decision : {"approve", "reject", "comment"}
    comment : str
    when : str
        ISO 8601 UTC time; now when empty.
    digest : str
        :meth:`Study.content_digest` at signing time (64 hex digits).
    chain_head : str
        The study file's audit chain head when it was signed, ``"<entry id>:<sha256>"``
        (filled in by the study file; empty for a sign-off not yet saved).

    Examples
    --------
    >>> s = SignOff("M. Brandt", "approved", "approve", digest="0" * 64, when="2026-03-05T10:00:00Z")
    >>> s.role, s.decision
    ('approved', 'approve')
    """

    name: str
    role: str
    decision: str
    comment: str = ""
    when: str = ""
    digest: str = ""
    chain_head: str = ""

    def __post_init__(self):
        set_ = object.__setattr__
        head = _text(self.chain_head, name="chain_head").strip().lower()
        if head and not re.fullmatch(r"\d+:[0-9a-f]{64}", head):
            raise StudyInputError(
                f"`chain_head` ({self.chain_head!r}) must be '<entry id>:<sha256>'"
            )
        set_(self, "chain_head", head)
        set_(self, "name", _text(self.name, name="name", required=True).strip())
        set_(self, "role", _text(self.role, name="role", required=True).strip())
        decision = _text(self.decision, name="decision").strip().lower()
        if decision not in SIGNOFF_DECISIONS:
            raise StudyInputError(
                f"`decision` ({self.decision!r}) must be one of {', '.join(SIGNOFF_DECISIONS)}"
            )
        set_(self, "decision", decision)
        set_(self, "comment", _text(self.comment, name="comment"))
        set_(self, "when", _when(self.when))
        digest = _text(self.digest, name="digest").strip().lower()
        if not re.fullmatch(r"[0-9a-f]{64}", digest):
            raise StudyInputError(
                f"`digest` ({self.digest!r}) must be the study's SHA-256 content digest "
                "(64 hex digits)"
            )
        set_(self, "digest", digest)

    @property
    def is_approval(self) -> bool:
        """An ``approve`` by the role ``approved``: the sign-off that locks a study."""
        return self.decision == "approve" and self.role.lower() == "approved"

    def to_dict(self) -> dict:
        """JSON-safe dict of every field."""
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class SignOffState:
    """Whether a sign-off still holds.

    Fields
    ------
    index : int
        Position of the sign-off in :attr:`Study.signoffs`.
    signoff : SignOff
    state : {"valid", "voided"}
    why : str
        Empty when valid; otherwise why it no longer holds.
    """

    index: int
    signoff: SignOff
    state: str
    why: str = ""

    @property
    def valid(self) -> bool:
        return self.state == "valid"

    def to_dict(self) -> dict:
        d = self.signoff.to_dict()
        d.update(index=self.index, state=self.state, why=self.why)
        return d


# ---------------------------------------------------------------------------------------------
# the study


def _verified_sha256(data: bytes, recorded: str, name: str) -> str:
    """The SHA-256 of a data file's stored copy, checked against the ``recorded`` one (when
    given): a mismatch means the copy was altered."""
    actual = hashlib.sha256(data).hexdigest()
    given = (recorded or "").strip().lower()
    if given and given != actual:
        raise StudyFileError(
            f"the stored copy of '{name}' does not match its recorded SHA-256 (recorded "
            f"{given[:12]}..., actual {actual[:12]}...): the data were altered; restore the "
            "file from a backup"
        )
    return actual


def _as_mapping(items, kind, *, key) -> MappingProxyType:
    if items is None:
        return MappingProxyType({})
    if isinstance(items, Mapping):
        out = {}
        for name, item in items.items():
            if not isinstance(item, kind):
                raise StudyInputError(f"{kind.__name__} expected for '{name}', got {item!r}")
            out[name] = item
        return MappingProxyType(out)
    out = {}
    for item in items:
        if not isinstance(item, kind):
            raise StudyInputError(f"{kind.__name__} expected, got {item!r}")
        k = key(item)
        if k in out:
            raise SpecError(f"characteristic '{k}' is given twice: each name must be unique")
        out[k] = item
    return MappingProxyType(out)


@dataclass(frozen=True)
class DataFile:
    """A further measurement file kept in a study (the first one is ``Study.data``).

    Attributes
    ----------
    filename : str
        Its original file name (unique within the study).
    data : bytes
        The file exactly as imported.
    sha256 : str
        SHA-256 of ``data``; computed when empty, checked when given.
    """

    filename: str
    data: bytes
    sha256: str = ""

    def __post_init__(self):
        name = _text(self.filename, name="filename", required=True).strip()
        object.__setattr__(self, "filename", name)
        if not isinstance(self.data, bytes | bytearray | memoryview):
            raise StudyInputError(
                f"`data` of '{name}' must be the raw bytes of the file, got "
                f"{type(self.data).__name__}"
            )
        data = bytes(self.data)
        object.__setattr__(self, "data", data)
        object.__setattr__(self, "sha256", _verified_sha256(data, self.sha256, name))


@dataclass(frozen=True, kw_only=True)
class Study:
    """A capability study: raw data, specifications, criteria, decisions, comments, sign-offs.

    Parameters
    ----------
    title, part, supplier : str
    data : bytes
        The measurement file exactly as imported.
    data_filename : str
        Its original file name.
    data_sha256 : str, optional
        SHA-256 of ``data``; computed when empty, checked when given.
    characteristics : sequence or mapping of Characteristic
        Kept as a read-only mapping name -> Characteristic, in the given order.
    criteria : mapping name -> Criteria
        Characteristics not listed use ``Criteria()``.
    decisions, comments, signoffs : sequences
        In the order they were made.

    Notes
    -----
    The content digest is SHA-256 (FIPS 180-4) over canonical JSON (sorted keys, no spaces,
    ASCII) of: title, part, supplier, the data's SHA-256, every specification, every criterion and
    the *effective* decisions (current exclusions with their reasons, the latest value of each
    setting such as the chosen model). Notes, comments and sign-offs do not enter it, so they
    never void a sign-off.

    Examples
    --------
    >>> s = Study(title="demo", data=b"subgroup,x\\n1,1.0\\n", data_filename="x.csv",
    ...           characteristics=[Characteristic("x", lsl=0, usl=2)])
    >>> s2 = s.exclude("x", 1, reason="setup part", who="A. Ruiz")
    >>> list(s2.excluded_subgroups("x")), list(s.excluded_subgroups("x"))
    (['1'], [])
    >>> s.content_digest() == s2.content_digest()
    False
    """

    title: str
    data: bytes
    data_filename: str
    characteristics: Mapping[str, Characteristic]
    criteria: Mapping[str, Criteria] = field(default_factory=dict)
    part: str = ""
    supplier: str = ""
    data_sha256: str = ""
    decisions: tuple[Decision, ...] = ()
    comments: tuple[Comment, ...] = ()
    signoffs: tuple[SignOff, ...] = ()
    extra_files: tuple[DataFile, ...] = ()

    def __post_init__(self):
        set_ = object.__setattr__
        set_(self, "title", _text(self.title, name="title", required=True).strip())
        set_(self, "part", _text(self.part, name="part").strip())
        set_(self, "supplier", _text(self.supplier, name="supplier").strip())
        self._init_data()
        names = self._init_extra_files()
        chars = self._init_specs(names)
        self._init_records(chars)

    def _init_data(self) -> None:
        """The data as bytes, its name, and its SHA-256 (checked against the one recorded)."""
        set_ = object.__setattr__
        if not isinstance(self.data, bytes | bytearray | memoryview):
            raise StudyInputError(
                f"`data` must be the raw bytes of the file, got {type(self.data).__name__}"
            )
        data = bytes(self.data)
        set_(self, "data", data)
        set_(self, "data_filename", _text(self.data_filename, name="data_filename", required=True))
        set_(self, "data_sha256", _verified_sha256(data, self.data_sha256, self.data_filename))

    def _init_extra_files(self) -> list[str]:
        """The further data files as a tuple; returns the names of all data files."""
        extra = tuple(self.extra_files)
        names = [self.data_filename]
        for f in extra:
            if not isinstance(f, DataFile):
                raise StudyInputError(f"`extra_files` must hold DataFile objects, got {f!r}")
            if f.filename in names:
                raise StudyInputError(
                    f"two data files are named '{f.filename}': give each file of a study its own "
                    "name"
                )
            names.append(f.filename)
        object.__setattr__(self, "extra_files", extra)
        return names

    def _init_specs(self, names: list[str]) -> Mapping[str, Characteristic]:
        """The specifications and criteria as read-only mappings, each checked; returns the
        specifications."""
        set_ = object.__setattr__
        chars = _as_mapping(self.characteristics, Characteristic, key=lambda c: c.name)
        for name, c in chars.items():
            if name != c.name:
                raise SpecError(f"characteristic stored under '{name}' is named '{c.name}'")
            if c.source is not None and c.source not in names:
                raise SpecError(
                    f"characteristic '{name}' names data file '{c.source}', which is not in this "
                    f"study (files: {', '.join(names)})"
                )
        set_(self, "characteristics", chars)
        if self.criteria is not None and not isinstance(self.criteria, Mapping):
            raise StudyInputError(
                "`criteria` must map characteristic names to Criteria, e.g. "
                "{'bore': Criteria(index='cpk', threshold=1.33)}"
            )
        crit = _as_mapping(self.criteria, Criteria, key=None)
        for name, c in crit.items():
            if name not in chars:
                raise SpecError(
                    f"criteria given for '{name}', which is not a characteristic of this study "
                    f"(known: {', '.join(chars) or 'none'})"
                )
            check_criteria_fits(chars[name], c)
        set_(self, "criteria", crit)
        return chars

    def _init_records(self, chars: Mapping[str, Characteristic]) -> None:
        """Decisions, comments and sign-offs as tuples of their classes; every decision names
        a characteristic of the study (or none)."""
        for kind, seq, cls in (
            ("decisions", self.decisions, Decision),
            ("comments", self.comments, Comment),
            ("signoffs", self.signoffs, SignOff),
        ):
            seq = tuple(seq)
            for item in seq:
                if not isinstance(item, cls):
                    raise StudyInputError(
                        f"`{kind}` must hold {cls.__name__} objects, got {item!r}"
                    )
            object.__setattr__(self, kind, seq)
        for d in self.decisions:
            if d.characteristic is not None and d.characteristic not in chars:
                raise StudyInputError(
                    f"{d.action} decision names characteristic '{d.characteristic}', which is not "
                    f"in this study (known: {', '.join(chars) or 'none'})"
                )

    # -- reading -------------------------------------------------------------------------------
    @property
    def characteristic_names(self) -> tuple[str, ...]:
        return tuple(self.characteristics)

    def characteristic(self, name: str) -> Characteristic:
        """The current specification of ``name``; a clear error for an unknown name."""
        try:
            return self.characteristics[name]
        except KeyError:
            raise StudyInputError(
                f"no characteristic '{name}' in this study (known: "
                f"{', '.join(self.characteristics) or 'none'})"
            ) from None

    def criteria_for(self, name: str) -> Criteria:
        """The criterion of ``name``; the default :class:`Criteria` when none was set."""
        self.characteristic(name)
        return self.criteria.get(name, Criteria())

    def excluded_subgroups(self, name: str) -> dict[str, Decision]:
        """Subgroups of ``name`` currently excluded: label -> the exclude decision in force.

        The latest ``exclude`` or ``restore`` for a subgroup wins.
        """
        self.characteristic(name)
        out: dict[str, Decision] = {}
        for d in self.decisions:
            if d.characteristic != name:
                continue
            if d.action == "exclude":
                out[d.subgroup] = d
            elif d.action == "restore":
                out.pop(d.subgroup, None)
        return out

    def kept_signals(self, name: str) -> dict[tuple[str, str], Decision]:
        """Signals of ``name`` kept with a reason: ``(subgroup label, rule id)`` -> the
        ``keep_signal`` decision in force (the latest ``keep_signal``/``reopen_signal`` of that
        subgroup and rule wins).

        Examples
        --------
        >>> d = Decision("x", "keep_signal", subgroup=7, reason="known warm-up, common cause",
        ...              who="A", payload={"rule": "beyond_limits"})
        >>> d.subgroup, dict(d.payload)
        ('7', {'rule': 'beyond_limits'})
        """
        self.characteristic(name)
        out: dict[tuple[str, str], Decision] = {}
        for d in self.decisions:
            if d.characteristic != name or d.action not in SIGNAL_ACTIONS:
                continue
            key = (d.subgroup, str(d.payload.get("rule", "")))
            if d.action == "keep_signal":
                out[key] = d
            else:
                out.pop(key, None)
        return out

    def setting(self, name: str, action: str, default=None):
        """Latest payload of a setting decision (e.g. ``set_model``) for ``name``, else default."""
        self.characteristic(name)
        found = default
        for d in self.decisions:
            if d.characteristic == name and d.action == action:
                found = dict(d.payload)
        return found

    def model_for(self, name: str) -> str:
        """The model chosen for ``name``: the latest ``set_model`` decision, else the spec's."""
        chosen = self.setting(name, "set_model")
        if chosen and chosen.get("model"):
            return str(chosen["model"])
        return self.characteristics[name].model

    def chart_for(self, name: str) -> str:
        """The chart chosen for ``name``: the latest ``set_chart`` decision, else the spec's."""
        chosen = self.setting(name, "set_chart")
        if chosen and chosen.get("chart"):
            return str(chosen["chart"])
        return self.characteristics[name].chart

    def signoff_rules(self) -> dict:
        """The sign-off rules in force: :data:`DEFAULT_SIGNOFF_RULES` updated by every
        ``set_signoff_rules`` decision in order (each carries who, when and why)."""
        rules = dict(DEFAULT_SIGNOFF_RULES)
        for d in self.decisions:
            if d.action == "set_signoff_rules":
                rules.update(dict(d.payload.get("rules", {})))
        return rules

    def waivers(self) -> dict[str, Decision]:
        """Characteristic -> the ``waive_verdict`` decision in force (latest one says waived).

        A waiver lets an approval stand although the characteristic has no verdict; its reason
        is part of the content digest, so adding or withdrawing one voids earlier sign-offs.
        """
        out: dict[str, Decision] = {}
        for d in self.decisions:
            if d.action == "waive_verdict" and d.characteristic is not None:
                if d.payload.get("waived"):
                    out[d.characteristic] = d
                else:
                    out.pop(d.characteristic, None)
        return out

    def _effective_decisions(self) -> dict:
        eff: dict[str, dict] = {}
        for name in sorted(self.characteristics):
            excluded = {
                label: {"reason": d.reason, "automatic": d.automatic, "payload": dict(d.payload)}
                for label, d in self.excluded_subgroups(name).items()
            }
            settings: dict[str, Any] = {}
            for d in self.decisions:
                if d.characteristic != name:
                    continue
                if d.action in ("exclude", "restore", "set_spec", "set_criteria", *SIGNAL_ACTIONS):
                    continue
                if d.action in DIGEST_NEUTRAL_ACTIONS:
                    continue
                settings[d.action] = dict(d.payload)
            eff[name] = {"excluded": excluded, "settings": settings}
            kept = {
                f"{label}|{rule}": {"reason": d.reason, "origin": d.payload.get("origin", "person")}
                for (label, rule), d in self.kept_signals(name).items()
            }
            if kept:  # only then: the digest of a study without kept signals is unchanged
                eff[name]["kept"] = kept
        return eff

    def content_dict(self) -> dict:
        """What the content digest covers, as a JSON-safe dict."""
        return {
            "format": _DIGEST_FORMAT,
            "title": self.title,
            "part": self.part,
            "supplier": self.supplier,
            "data_sha256": self.data_sha256,
            "characteristics": {n: c.to_dict() for n, c in self.characteristics.items()},
            "criteria": {n: self.criteria_for(n).to_dict() for n in self.characteristics},
            "decisions": self._effective_decisions(),
            **(
                {
                    "extra_files": [
                        {"filename": f.filename, "sha256": f.sha256} for f in self.extra_files
                    ]
                }
                if self.extra_files
                else {}
            ),
        }

    @property
    def files(self) -> tuple[tuple[str, bytes], ...]:
        """Every data file of the study as (filename, bytes), the first one first."""
        return ((self.data_filename, self.data), *((f.filename, f.data) for f in self.extra_files))

    def source_of(self, name: str) -> str:
        """File name of the data file that holds characteristic ``name``."""
        return self.characteristic(name).source or self.data_filename

    def content_digest(self) -> str:
        """SHA-256 (hex) of :meth:`content_dict` as canonical JSON; stable across runs."""
        return hashlib.sha256(_canonical(self.content_dict()).encode("ascii")).hexdigest()

    def signoff_state(self) -> tuple[SignOffState, ...]:
        """Each sign-off with ``valid`` or ``voided`` and why.

        A sign-off is voided when the content digest differs from the one it signed (data,
        specifications, criteria or decisions changed after it), or when a ``void_signoff``
        decision voided it (a change forced past the lock). Once voided it stays voided.
        """
        current = self.content_digest()
        voided: dict[int, Decision] = {}
        for d in self.decisions:
            if d.action == "void_signoff":
                idx = d.payload.get("signoff")
                if isinstance(idx, int) and idx not in voided:
                    voided[idx] = d
        out = []
        for i, s in enumerate(self.signoffs):
            if i in voided:
                v = voided[i]
                why = f"voided on {v.when} by {v.who}: {v.reason}"
                out.append(SignOffState(i, s, "voided", why))
            elif s.digest != current:
                out.append(SignOffState(i, s, "voided", "data or decisions changed after signing"))
            else:
                out.append(SignOffState(i, s, "valid", ""))
        return tuple(out)

    @property
    def is_locked(self) -> bool:
        """True while an approval (role ``approved``, decision ``approve``) is still valid."""
        return any(st.valid and st.signoff.is_approval for st in self.signoff_state())

    def lock_holder(self) -> SignOff | None:
        """The valid approval that locks the study, if any."""
        for st in self.signoff_state():
            if st.valid and st.signoff.is_approval:
                return st.signoff
        return None

    # -- changing (each returns a new Study) ---------------------------------------------------
    def _replace(self, **changes) -> Study:
        return dataclasses.replace(self, **changes)

    def _check_lock(
        self, what: str, override_lock: bool, override_reason: str | None, who: str
    ) -> tuple[Decision, ...]:
        """Refuse a change to a locked study, or return the void decisions an override adds."""
        holder = self.lock_holder()
        if holder is None:
            return ()
        if not override_lock:
            raise StudyFileError(
                f"the study is approved (by {holder.name} on {holder.when}) and therefore locked: "
                f"{what} would change it. To change it anyway, run the command again with "
                "--override-lock REASON (in Python: override_lock=True, override_reason=...); "
                "this voids the approval, which stays on record as voided"
            )
        if not (override_reason or "").strip():
            raise StudyFileError(
                f"overriding the lock for {what} needs a non-empty reason (--override-lock REASON)"
            )
        voids = []
        for st in self.signoff_state():
            if st.valid:
                voids.append(
                    Decision(
                        None,
                        "void_signoff",
                        reason=override_reason.strip(),
                        who=who or "unknown",
                        payload={
                            "signoff": st.index,
                            "signer": st.signoff.name,
                            "role": st.signoff.role,
                            "change": what,
                        },
                    )
                )
        return tuple(voids)

    def _apply(self, d: Decision) -> Study:
        """Append ``d`` and apply its effect on specs/criteria, without any lock check."""
        if d.characteristic is not None:
            self.characteristic(d.characteristic)
        chars = dict(self.characteristics)
        crit = dict(self.criteria)
        _apply_effect(chars, crit, len(self.signoffs), d)
        return self._replace(decisions=self.decisions + (d,), characteristics=chars, criteria=crit)

    def with_decision(
        self, decision: Decision, *, override_lock: bool = False, override_reason: str | None = None
    ) -> Study:
        """A new Study with ``decision`` appended (and its effect applied).

        Raises :class:`~studykit.errors.StudyFileError` when the study is locked by an approval,
        unless ``override_lock=True`` and ``override_reason`` are given: then every sign-off still
        valid is voided by a ``void_signoff`` decision recorded just before this one.
        """
        if not isinstance(decision, Decision):
            raise StudyInputError(f"`decision` must be a Decision, got {decision!r}")
        if decision.characteristic is not None:
            self.characteristic(decision.characteristic)
        if decision.action == "set_model":
            check_model(decision.payload.get("model", ""), error=StudyInputError)
        if decision.action == "set_chart":
            check_chart_fits(
                self.characteristics[decision.characteristic],
                str(decision.payload.get("chart", "")).strip().lower(),
            )
        study = self
        if decision.action not in DIGEST_NEUTRAL_ACTIONS:
            what = f"{decision.action} on '{decision.characteristic}'"
            for v in self._check_lock(what, override_lock, override_reason, decision.who):
                study = study._apply(v)
        return study._apply(decision)

    def exclude(self, name: str, subgroup, *, reason: str, **options) -> Study:
        """Exclude ``subgroup`` of ``name`` from the analysis (with the reason on record).

        ``options``: ``who``, ``automatic`` (a removal proposed by the automatic phase I),
        ``when``, ``payload`` (a dict kept with the decision), ``override_lock`` and
        ``override_reason`` (as for :meth:`with_decision`)."""
        return self._subgroup_decision("exclude", name, subgroup, reason=reason, **options)

    def restore(self, name: str, subgroup, *, reason: str, **options) -> Study:
        """Bring an excluded subgroup back (``options`` as for :meth:`exclude`)."""
        return self._subgroup_decision("restore", name, subgroup, reason=reason, **options)

    def _subgroup_decision(
        self,
        action: str,
        name: str,
        subgroup,
        *,
        reason: str,
        who: str = "",
        automatic: bool = False,
        when: str = "",
        payload: Mapping | None = None,
        **lock,
    ) -> Study:
        d = Decision(
            name,
            action,
            subgroup=subgroup,
            reason=reason,
            who=who,
            when=when,
            automatic=automatic,
            payload=payload or {},
        )
        return self.with_decision(d, **lock)

    def keep_signal(
        self,
        name: str,
        subgroup,
        *,
        rule: str,
        reason: str,
        who: str,
        origin: str = "person",
        when: str = "",
        payload: Mapping | None = None,
        **lock,
    ) -> Study:
        """Record that the ``rule`` signal at ``subgroup`` of ``name`` is reviewed and kept:
        not a special cause, or a known common cause ("keep, with reason"). The subgroup stays
        in the analysis; the signal no longer withholds the verdict and is listed as reviewed.
        ``origin`` is ``"person"`` or ``"rejected_proposal"`` (a proposal of the automatic
        phase-I search that a person rejected)."""
        d = Decision(
            name,
            "keep_signal",
            subgroup=subgroup,
            reason=reason,
            who=who,
            when=when,
            payload={**dict(payload or {}), "rule": str(rule), "origin": origin},
        )
        return self.with_decision(d, **lock)

    def reopen_signal(
        self, name: str, subgroup, *, rule: str, reason: str, who: str, when: str = "", **lock
    ) -> Study:
        """Withdraw a ``keep_signal`` decision: the signal counts as open again."""
        if (str(subgroup), str(rule)) not in {(k[0], k[1]) for k in self.kept_signals(name)}:
            kept = ", ".join(f"{s} ({r})" for s, r in self.kept_signals(name)) or "none"
            raise StudyInputError(
                f"no kept signal '{rule}' at subgroup {subgroup} of '{name}' to reopen "
                f"(kept now: {kept})"
            )
        d = Decision(
            name,
            "reopen_signal",
            subgroup=subgroup,
            reason=reason,
            who=who,
            when=when,
            payload={"rule": str(rule)},
        )
        return self.with_decision(d, **lock)

    def with_spec(
        self,
        name: str,
        *,
        who: str,
        reason: str,
        when: str = "",
        override_lock=False,
        override_reason=None,
        **changes,
    ) -> Study:
        """Change fields of a specification (``lsl=``, ``usl=``, ``target=``, ...).

        The change is recorded as a ``set_spec`` decision with the old and new values.
        """
        old = self.characteristic(name)
        known = {f.name for f in dataclasses.fields(Characteristic)} - {"name"}
        unknown = sorted(set(changes) - known)
        if unknown:
            raise SpecError(f"unknown specification field(s) {unknown}: known are {sorted(known)}")
        if not changes:
            raise SpecError("with_spec needs at least one field to change, e.g. usl=12.03")
        if "model" in changes:
            changes = {**changes, "model": check_model(changes["model"])}
        new = dataclasses.replace(old, **changes)  # validates
        fields = {k: getattr(new, k) for k in changes}
        d = Decision(
            name,
            "set_spec",
            reason=reason,
            who=who,
            when=when,
            payload={"changes": fields, "old": {k: getattr(old, k) for k in changes}},
        )
        return self.with_decision(d, override_lock=override_lock, override_reason=override_reason)

    def with_criteria(
        self,
        name: str,
        criteria: Criteria,
        *,
        who: str,
        reason: str,
        when: str = "",
        **lock,
    ) -> Study:
        """Set the acceptance criterion of ``name`` (recorded as a ``set_criteria`` decision;
        ``override_lock``/``override_reason`` as for :meth:`with_decision`)."""
        if not isinstance(criteria, Criteria):
            raise SpecError(f"`criteria` must be a Criteria, got {criteria!r}")
        d = Decision(
            name,
            "set_criteria",
            reason=reason,
            who=who,
            when=when,
            payload={"criteria": criteria.to_dict(), "old": self.criteria_for(name).to_dict()},
        )
        return self.with_decision(d, **lock)

    def with_comment(
        self, text: str, *, who: str, characteristic: str | None = None, when: str = ""
    ) -> Study:
        """Add a comment (never locked, never voids a sign-off)."""
        if characteristic is not None:
            self.characteristic(characteristic)
        c = Comment(text, who=who, when=when, characteristic=characteristic)
        return self._replace(comments=self.comments + (c,))

    def sign(
        self, name: str, *, role: str, decision: str, comment: str = "", when: str = ""
    ) -> Study:
        """Add a sign-off on the study as it stands now (its digest is taken here)."""
        s = SignOff(name, role, decision, comment=comment, when=when, digest=self.content_digest())
        return self._replace(signoffs=self.signoffs + (s,))

    @classmethod
    def replay(
        cls,
        *,
        characteristics,
        criteria=None,
        decisions: Iterable[Decision] = (),
        signoffs: Iterable[SignOff] = (),
        **fields,
    ) -> Study:
        """Rebuild a study from its first specifications and its decisions in order.

        This is how a study file is read: specifications and criteria on file are the first ones;
        ``set_spec``/``set_criteria`` decisions bring them up to date. No lock checks apply to
        history.
        """
        base = cls(characteristics=characteristics, criteria=criteria or {}, **fields)
        chars = dict(base.characteristics)
        crit = dict(base.criteria)
        decisions = tuple(decisions)
        signoffs = tuple(signoffs)
        for d in decisions:
            if not isinstance(d, Decision):
                raise StudyInputError(f"`decisions` must hold Decision objects, got {d!r}")
            _apply_effect(chars, crit, len(signoffs), d)
        return base._replace(
            characteristics=chars, criteria=crit, decisions=decisions, signoffs=signoffs
        )

    # -- output --------------------------------------------------------------------------------
    def to_dict(self) -> dict:
        """JSON-safe summary (the raw data as filename, size and SHA-256, not the bytes)."""
        states = self.signoff_state()
        return {
            "title": self.title,
            "part": self.part,
            "supplier": self.supplier,
            "data": {
                "filename": self.data_filename,
                "bytes": len(self.data),
                "sha256": self.data_sha256,
            },
            "extra_files": [
                {"filename": f.filename, "bytes": len(f.data), "sha256": f.sha256}
                for f in self.extra_files
            ],
            "characteristics": [
                dict(
                    c.to_dict(),
                    criteria=self.criteria_for(n).to_dict(),
                    criteria_text=self.criteria_for(n).describe(),
                    excluded_subgroups=sorted(self.excluded_subgroups(n), key=_label_key),
                    kept_signals=[
                        {
                            "subgroup": lab,
                            "rule": rule,
                            "reason": d.reason,
                            "who": d.who,
                            "when": d.when,
                            "origin": d.payload.get("origin", "person"),
                        }
                        for (lab, rule), d in self.kept_signals(n).items()
                    ],
                    model=self.model_for(n),
                    chart=self.chart_for(n),
                )
                for n, c in self.characteristics.items()
            ],
            "decisions": [d.to_dict() for d in self.decisions],
            "comments": [c.to_dict() for c in self.comments],
            "signoffs": [st.to_dict() for st in states],
            "content_digest": self.content_digest(),
            "locked": any(st.valid and st.signoff.is_approval for st in states),
            "signoff_rules": self.signoff_rules(),
            "waivers": {
                n: {"reason": d.reason, "who": d.who, "when": d.when}
                for n, d in self.waivers().items()
            },
        }


def _label_key(label: str):
    try:
        return (0, float(label), label)
    except ValueError:
        return (1, 0.0, label)


def _apply_effect(chars: dict, crit: dict, n_signoffs: int, d: Decision) -> None:
    """Apply what decision ``d`` changes in the specifications/criteria (in place)."""
    if d.characteristic is not None and d.characteristic not in chars:
        raise StudyInputError(
            f"{d.action} decision names characteristic '{d.characteristic}', which is not in "
            f"this study (known: {', '.join(chars) or 'none'})"
        )
    if d.action == "set_spec":
        _apply_set_spec(chars, crit, d)
    elif d.action == "set_criteria":
        new_crit = Criteria.from_dict(d.payload.get("criteria", {}))
        check_criteria_fits(chars[d.characteristic], new_crit)
        crit[d.characteristic] = new_crit
    elif d.action == "set_model":
        if not str(d.payload.get("model", "")).strip():
            raise StudyInputError("a set_model decision needs payload {'model': <name>}")
    elif d.action == "set_chart":
        chart = str(d.payload.get("chart", "")).lower()
        if chart not in CHARTS:
            raise StudyInputError(
                f"set_chart: `chart` ({chart!r}) must be one of {', '.join(CHARTS)}"
            )
    elif d.action in ("set_signoff_rules", "waive_verdict"):
        _check_signoff_setting(d)
    elif d.action == "keep_signal":
        origin = d.payload.get("origin", "person")
        if origin not in KEEP_ORIGINS:
            raise StudyInputError(
                f"keep_signal: `origin` ({origin!r}) must be one of {', '.join(KEEP_ORIGINS)}"
            )
    elif d.action == "void_signoff":
        idx = d.payload.get("signoff")
        if isinstance(idx, bool) or not isinstance(idx, int) or not 0 <= idx < n_signoffs:
            raise StudyInputError(
                f"void_signoff: `signoff` ({idx!r}) must be the index of an existing sign-off"
            )


def _apply_set_spec(chars: dict, crit: dict, d: Decision) -> None:
    """Apply a ``set_spec`` decision: the changed fields of one specification (in place)."""
    old = chars[d.characteristic]
    new_fields = dict(d.payload.get("changes", {}))
    if "name" in new_fields and new_fields["name"] != old.name:
        raise SpecError("a characteristic cannot be renamed; create a new study instead")
    known = {f.name for f in dataclasses.fields(Characteristic)}
    unknown = sorted(set(new_fields) - known)
    if unknown:
        raise SpecError(
            f"set_spec: unknown specification field(s) {unknown}: known are {sorted(known)}"
        )
    new = dataclasses.replace(old, **new_fields)
    if new.name in crit:
        check_criteria_fits(new, crit[new.name])
    chars[new.name] = new


#: sign-off rules that apply unless the study records others (``set_signoff_rules``)
DEFAULT_SIGNOFF_RULES = {
    # one person may not hold two roles among the sign-offs that still hold
    "distinct_signers": True,
    # an approval needs every characteristic to have a verdict, or a recorded waiver
    "approval_needs_verdicts": True,
    # a rejection records its reason (the sign-off's comment)
    "rejection_needs_reason": True,
}


def _check_signoff_setting(d: Decision) -> None:
    """Validate a ``set_signoff_rules`` (study-wide) or ``waive_verdict`` decision."""
    if d.action == "set_signoff_rules":
        if d.characteristic is not None:
            raise StudyInputError(
                "set_signoff_rules applies to the whole study: leave `characteristic` empty"
            )
        rules = d.payload.get("rules")
        if not isinstance(rules, Mapping) or not rules:
            raise StudyInputError(
                "a set_signoff_rules decision needs payload {'rules': {name: "
                f"true/false}}; names: {', '.join(DEFAULT_SIGNOFF_RULES)}"
            )
        for key, value in rules.items():
            if key not in DEFAULT_SIGNOFF_RULES:
                raise StudyInputError(
                    f"unknown sign-off rule {key!r}; known rules: "
                    f"{', '.join(DEFAULT_SIGNOFF_RULES)}"
                )
            if not isinstance(value, bool):
                raise StudyInputError(f"sign-off rule {key!r} must be true or false, got {value!r}")
    else:
        if d.characteristic is None:
            raise StudyInputError("a waive_verdict decision needs the `characteristic` it waives")
        if not isinstance(d.payload.get("waived"), bool):
            raise StudyInputError(
                "a waive_verdict decision needs payload {'waived': true or false, 'reason': ...}"
            )


def check_chart_fits(c: Characteristic, chart: str) -> None:
    """Refuse a chart the characteristic's kind of data cannot use (checked when set, so that
    no later analysis fails on it)."""
    if chart not in CHARTS:
        raise SpecError(f"`chart` ({chart!r}) must be one of {', '.join(CHARTS)}")
    has_limits = c.lsl is not None or c.usl is not None
    if chart in ATTRIBUTE_CHARTS and has_limits:
        raise SpecError(
            f"'{c.name}' has specification limits, so it holds measured values; the {chart} "
            "chart is for counted data (defectives or defects). Use auto, xbar_r, xbar_s or imr"
        )
    if chart not in ATTRIBUTE_CHARTS and not has_limits:
        raise SpecError(
            f"'{c.name}' has no specification limits, so it holds counted data; use a chart "
            "for counts (p, np, c or u), or give it limits first"
        )
    if chart in ("p", "np", "u") and not c.size_column:
        raise SpecError(
            f"the {chart} chart of '{c.name}' needs the subgroup sizes, and its specification "
            "names no size column (`size_column` in the specifications table); use the c chart "
            "or create the study with a size column"
        )


def _check_interval_criterion(crit: Criteria) -> None:
    """Both or neither of P and C, each strictly between 0 and 1 (P: 0.5 or above)."""
    p = _number(crit.interval_coverage, name="interval_coverage")
    c = _number(crit.interval_confidence, name="interval_confidence")
    object.__setattr__(crit, "interval_coverage", p)
    object.__setattr__(crit, "interval_confidence", c)
    if p is None and c is None:
        return
    if p is None or c is None:
        raise SpecError(
            "the tolerance-interval criterion needs both `interval_coverage` (P, "
            "e.g. 0.99) and `interval_confidence` (C, e.g. 0.95), or neither"
        )
    for key, value in (("interval_coverage", p), ("interval_confidence", c)):
        if not 0.5 <= value < 1:
            raise SpecError(
                f"`{key}` ({value!r}) must lie between 0.5 and 1 (a share, e.g. 0.99 for 99%)"
            )


def check_criteria_fits(c: Characteristic, crit: Criteria) -> None:
    """Refuse a criterion the characteristic cannot be judged on (Cp/Pp need both limits, Cpm a
    target)."""
    if crit.has_interval and c.is_attribute:
        raise SpecError(
            f"characteristic '{c.name}': the tolerance-interval criterion needs measured "
            "values; counted (attribute) data are judged by their defective rate"
        )
    if crit.index in ("cp", "pp") and not c.two_sided:
        raise SpecError(
            f"characteristic '{c.name}': criterion `index` '{crit.index}' needs both limits "
            f"(lsl {_fmt(c.lsl)}, usl {_fmt(c.usl)}); use '{crit.index}k' for a one-sided spec"
        )
    if crit.index == "cpm" and c.target is None:
        raise SpecError(
            f"characteristic '{c.name}': criterion `index` 'cpm' needs a `target`; give one or "
            "use 'ppk'"
        )


# ---------------------------------------------------------------------------------------------
# the specifications table lives in studykit.specs (it builds on this module, so it is imported
# on first use rather than at the top: ``from studykit.study import read_specs`` keeps working)

_SPEC_NAMES = frozenset({"SPEC_COLUMNS", "read_specs", "read_specs_bytes", "match_to_data"})


def __getattr__(name: str):
    if name in _SPEC_NAMES:
        from studykit import specs

        return getattr(specs, name)
    raise AttributeError(f"module 'studykit.study' has no attribute {name!r}")
