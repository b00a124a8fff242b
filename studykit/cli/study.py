"""``studykit study``: create a study file, show it, and record decisions and sign-offs.

Subcommands::

    studykit study new STUDYFILE --data FILE --specs SPECS.csv [--title T] [--part P]
    studykit study show STUDYFILE [--json]
    studykit study exclude STUDYFILE CHARACTERISTIC SUBGROUP --reason R [--who W]
    studykit study restore STUDYFILE CHARACTERISTIC SUBGROUP --reason R [--who W]
    studykit study keep STUDYFILE CHARACTERISTIC SUBGROUP --rule RULE --reason R [--who W]
    studykit study reopen STUDYFILE CHARACTERISTIC SUBGROUP --rule RULE --reason R [--who W]
    studykit study set STUDYFILE CHARACTERISTIC [--usl X ...] [--criterion ...] --reason R
    studykit study comment STUDYFILE TEXT [--characteristic C] [--who W]
    studykit study sign STUDYFILE --role ROLE --decision approve|reject|comment [--who W]
                        [--saw DIGEST]
    studykit study rules STUDYFILE [--distinct-signers on|off ...] [--reason R]
    studykit study waive STUDYFILE CHARACTERISTIC --reason R [--withdraw]
    studykit study log STUDYFILE [--json]

A change to an approved study needs ``--override-lock REASON``; it voids the approval, which
stays on record as voided.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

from studykit import names
from studykit.cli._output import write_json
from studykit.cli.args import add_override_lock, add_who, lock_options, login_name, p12_passphrase
from studykit.errors import DataFileError, StudyFileError, StudyInputError
from studykit.specs import match_to_files
from studykit.store import StudyFile
from studykit.study import Study, read_specs


def _who(args) -> str:
    """The person named with --who, else the login name; an explicitly empty --who is refused
    (a decision or signature must not fall back to the login name by accident)."""
    if args.who is None:
        return login_name("unknown")
    if not args.who.strip():
        raise StudyInputError(
            "`--who` is empty: give the name of the person who decides or "
            "signs, e.g. --who 'A. Ruiz' (or leave --who out to use the login "
            "name)"
        )
    return args.who.strip()


_REASON_HELP = "why (kept in the audit log)"


def _add_subject(q, *, subgroup: bool = False) -> None:
    """The positional STUDYFILE CHARACTERISTIC (and SUBGROUP) of a change to one characteristic."""
    q.add_argument("studyfile", metavar="STUDYFILE")
    q.add_argument("characteristic", metavar="CHARACTERISTIC")
    if subgroup:
        q.add_argument("subgroup", metavar="SUBGROUP")


def _add_change_options(
    q, *, reason_help: str = _REASON_HELP, lock_help: str | None = None
) -> None:
    """``--reason``, ``--who`` and ``--override-lock`` of a subcommand that records a change
    (``reason_help`` given: the reason is optional, as for ``rules`` without a change)."""
    q.add_argument("--reason", required=reason_help == _REASON_HELP, help=reason_help)
    add_who(q)
    add_override_lock(q, *([lock_help] if lock_help else []))


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "study",
        help="create a study file, show it, record decisions and sign-offs",
        description="Work with a study file: one file that keeps a copy of the data, the "
        "specifications, every decision with its reason, comments and sign-offs.",
    )
    sub = p.add_subparsers(dest="study_command", metavar="ACTION")
    sub.required = True

    new = sub.add_parser(
        "new",
        help="create a study file from a data file and a specs table",
        description="Create a study file holding a copy of the data file and "
        "the specifications. Spec columns: characteristic, unit, lsl, usl, target, "
        "safety_critical, criterion, threshold, basis (and optionally confidence, "
        "chart, subgroup_size, size_column, model, description).",
    )
    new.add_argument("studyfile", metavar="STUDYFILE", help="the study file to create")
    new.add_argument(
        "--data",
        required=True,
        metavar="FILE",
        action="append",
        help="measurement file (CSV/XLSX); repeat for a study over several files "
        "(each characteristic is taken from the file that holds it)",
    )
    new.add_argument(
        "--specs",
        metavar="SPECS.csv",
        help="specifications table (CSV), required: the study holds the "
        "characteristics listed there",
    )
    new.add_argument("--title", help="study title (default: the data file's name)")
    new.add_argument("--part", default="", help="part number or name")
    new.add_argument("--supplier", default="", help="supplier")
    add_who(new)
    new.add_argument("--force", action="store_true", help="replace an existing study file")
    new.set_defaults(func=run_new)

    show = sub.add_parser("show", help="show specs, criteria, decisions and sign-offs")
    show.add_argument("studyfile", metavar="STUDYFILE")
    show.add_argument("--json", action="store_true", help="print as JSON")
    show.set_defaults(func=run_show)

    for action, aliases in (("exclude", ["remove"]), ("restore", [])):
        q = sub.add_parser(
            action,
            aliases=aliases,
            help=f"{'remove' if action == 'exclude' else action} a subgroup of a "
            "characteristic from the analysis (with a reason)",
        )
        _add_subject(q, subgroup=True)
        _add_change_options(q)
        q.set_defaults(func=run_decision, action=action)

    _register_keep(sub)

    st = sub.add_parser(
        "set",
        help="change a specification, criterion, model or chart",
        description="Change the specification, acceptance criterion, model or "
        "chart of one characteristic. Each change is recorded as a decision with "
        "your reason; write 'none' to clear a limit or the target.",
    )
    _add_subject(st)
    for opt in ("lsl", "usl", "target"):
        st.add_argument(f"--{opt}", metavar="X")
    st.add_argument("--criterion", choices=("cp", "cpk", "pp", "ppk", "cpm"))
    st.add_argument("--threshold", type=float)
    st.add_argument("--basis", choices=("lower_bound", "estimate"))
    st.add_argument("--confidence", type=float)
    st.add_argument(
        "--interval",
        metavar="P,C",
        help="tolerance-interval criterion beside the index: at least P of parts "
        "within specification with confidence C (ISO 16269-6), e.g. 0.99,0.95; "
        "'none' removes it",
    )
    st.add_argument("--model", help="distribution model name, or auto")
    st.add_argument(
        "--chart",
        help="auto, xbar-r, xbar-s, imr, p, np, c, u (xbar_r and X-bar-R are accepted too)",
    )
    _add_change_options(st)
    st.set_defaults(func=run_set)

    com = sub.add_parser("comment", help="add a comment (allowed on an approved study)")
    com.add_argument("studyfile", metavar="STUDYFILE")
    com.add_argument("text", metavar="TEXT")
    com.add_argument("--characteristic", default=None)
    add_who(com)
    com.set_defaults(func=run_comment)

    sign = sub.add_parser("sign", help="sign the study as it stands")
    sign.add_argument("studyfile", metavar="STUDYFILE")
    sign.add_argument(
        "--role",
        required=True,
        type=names.role_id,
        help="Author, Reviewer or Approver (Approver + approve locks the study)",
    )
    sign.add_argument("--decision", required=True, choices=("approve", "reject", "comment"))
    sign.add_argument(
        "--comment", default="", help="comment; for a rejection, its reason (required)"
    )
    add_who(sign)
    sign.add_argument(
        "--p12",
        metavar="P12",
        help="also sign the sign-off with this "
        "certificate's key (PKCS#12 file; it must be valid now)",
    )
    sign.add_argument(
        "--passphrase-env",
        metavar="VAR",
        default="STUDYKIT_P12_PASSPHRASE",
        help="environment variable holding the .p12 passphrase",
    )
    sign.add_argument(
        "--saw",
        metavar="DIGEST",
        help="the content digest you reviewed (from `study show`, at least 12 "
        "characters); the sign-off is refused if the study changed since",
    )
    sign.set_defaults(func=run_sign)

    rules = sub.add_parser(
        "rules",
        help="show or change the study's sign-off rules",
        description="Show the sign-off rules of the study (all on by "
        "default). Changing one needs --reason; the change is recorded "
        "with who, when and why.",
    )
    rules.add_argument("studyfile", metavar="STUDYFILE")
    from studykit.study import DEFAULT_SIGNOFF_RULES

    for key in DEFAULT_SIGNOFF_RULES:
        rules.add_argument(
            f"--{key.replace('_', '-')}", choices=("on", "off"), dest=key, default=None
        )
    _add_change_options(
        rules,
        reason_help="why the rules change (required for a change)",
        lock_help="change the rules of an approved study anyway; voids the approval",
    )
    rules.set_defaults(func=run_rules)

    waive = sub.add_parser(
        "waive",
        help="record that a characteristic may be approved without a verdict (with the reason)",
        description="Record a waiver for one characteristic: an approval "
        "may then stand although it has no verdict. The reason is part of "
        "the study content, so earlier sign-offs no longer hold.",
    )
    _add_subject(waive)
    _add_change_options(waive)
    waive.add_argument("--withdraw", action="store_true", help="withdraw the waiver instead")
    waive.set_defaults(func=run_waive)

    log = sub.add_parser("log", help="print the audit log (who, when, what, why)")
    log.add_argument("studyfile", metavar="STUDYFILE")
    log.add_argument("--json", action="store_true")
    log.set_defaults(func=run_log)


# -- new ----------------------------------------------------------------------------------------


def run_new(args) -> int:
    from studykit.data import read_measurements

    paths = [Path(p) for p in args.data]
    names = [p.name for p in paths]
    for p in paths:
        if not p.is_file():
            raise DataFileError("the data file does not exist: check the path", file=str(p))
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise StudyInputError(f"two data files are named '{dup[0]}': rename one of them")
    readings = [read_measurements(p) for p in paths]
    chars, criteria = ((), {})
    if not args.specs:
        # a study file never gains characteristics later, so one without specs is a dead end
        names_in_data = [n for m in readings for n in m.names]
        raise StudyInputError(
            "give the specifications with --specs SPECS.csv (columns characteristic, unit, lsl, "
            "usl, target, ...): a study holds only the characteristics listed there. The data "
            "have: " + (", ".join(f"'{n}'" for n in names_in_data) or "no characteristics")
        )
    else:
        specs, spec_criteria = read_specs(args.specs)
        spec_rows = _spec_rows(args.specs)
        chars, criteria = match_to_files(
            specs, spec_criteria, readings, names, source=args.specs, rows=spec_rows
        )
    target = Path(args.studyfile)
    if target.exists() and not args.force:
        raise StudyFileError(
            f"'{target}' already exists: choose another name, or pass --force to replace it"
        )
    sf = StudyFile.create(
        target,
        data=paths[0].read_bytes(),
        filename=names[0],
        title=args.title or paths[0].stem,
        part=args.part,
        supplier=args.supplier,
        characteristics=chars,
        criteria=criteria,
        who=_who(args),
        overwrite=args.force,
        extra_files=[(p.name, p.read_bytes()) for p in paths[1:]],
    )
    study = sf.load()
    print(
        f"created {target}: {len(study.characteristics)} characteristic(s) from "
        f"{', '.join(names)} (sha256 {study.data_sha256[:12]}...)"
    )
    taken = set(study.characteristics)
    for c in study.characteristics.values():
        if c.size_column:
            taken.add(c.size_column)
    missing = [n for m in readings for n in m.names if n not in taken]
    if missing:
        print(f"no specification for: {', '.join(missing)} (not part of the study)")
    return 0


def _spec_rows(path) -> list[int]:
    """Spreadsheet row of each characteristic of a specs table, in table order (the table has
    one characteristic per non-blank row under its header, as read_specs reads it)."""
    data = Path(path).read_bytes()
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = data.decode("cp1252", errors="replace")
    return [i for i, ln in enumerate(text.splitlines(), start=1) if ln.strip()][1:]


# -- keep, with reason ---------------------------------------------------------------------------


def _register_keep(sub) -> None:
    keep = sub.add_parser(
        "keep",
        help="keep a signalled subgroup, with the reason it is not a special cause",
        description="Record that a run-rule signal at one subgroup is reviewed and kept: not a "
        "special cause, or a known common cause. The subgroup stays in the analysis; the signal "
        "is listed as reviewed with your reason and no longer withholds the verdict.",
    )
    reopen = sub.add_parser("reopen", help="withdraw a 'keep' decision (the signal is open again)")
    for q in (keep, reopen):
        _add_subject(q, subgroup=True)
        q.add_argument(
            "--rule",
            required=True,
            help="the rule of the signal: beyond_limits, run, trend, alternation, "
            "zone_a, zone_b, hugging, mixture (or its Nelson number 1-8)",
        )
        _add_change_options(q)
    keep.set_defaults(func=run_keep)
    reopen.set_defaults(func=run_reopen)


def _rule_id(text: str) -> str:
    from studykit.stats.rules import RULE_BY_NUMBER, RULE_IDS

    token = (text or "").strip().lower().replace("-", "_")
    if token.isdigit() and int(token) in RULE_BY_NUMBER:
        return RULE_BY_NUMBER[int(token)]
    if token not in RULE_IDS:
        raise StudyInputError(
            f"`--rule` ({text!r}) is not a run rule: use one of "
            f"{', '.join(RULE_IDS)} or a Nelson number 1-8"
        )
    return token


def signals_at(study: Study, name: str, label: str) -> list[str]:
    """The rules signalling at subgroup ``label`` on the final chart of ``name`` (as the
    workbook and ``analyze --study`` draw it)."""
    from studykit.analysis import analyze_study

    res = analyze_study(study, name)
    chart = res.chart
    found = []
    for series in chart.series:
        for sig in series.signals:
            labels = {str(chart.labels[int(p)]) for p in sig.points}
            if label in labels and sig.rule not in found:
                found.append(sig.rule)
    return found


def run_keep(args) -> int:
    sf = StudyFile(args.studyfile)
    who = _who(args)
    rule = _rule_id(args.rule)
    label = args.subgroup.strip()
    study = sf.load()
    name = args.characteristic
    study.characteristic(name)
    if label in study.excluded_subgroups(name):
        raise StudyInputError(
            f"subgroup '{label}' of '{name}' is removed from the analysis; "
            "restore it first if it should stay with a reason"
        )
    labels = _subgroup_labels(study, name)
    if label not in labels:
        shown = ", ".join(labels[:8]) + (", ..." if len(labels) > 8 else "")
        raise StudyInputError(
            f"'{name}' has no subgroup '{label}' (its subgroups are {shown}): "
            "give a label exactly as the data show it"
        )
    rules = signals_at(study, name, label)
    if rule not in rules:
        raise StudyInputError(
            f"subgroup '{label}' of '{name}' shows no '{rule}' signal on the current chart "
            f"(signals there: {', '.join(rules) or 'none'}); `studykit analyze --study` lists "
            "the signals"
        )
    if (label, rule) in study.kept_signals(name):
        d = study.kept_signals(name)[(label, rule)]
        raise StudyInputError(
            f"the '{rule}' signal at subgroup '{label}' of '{name}' is already "
            f"kept (by {d.who} on {d.when}: {d.reason})"
        )
    sf.apply(
        lambda s: s.keep_signal(
            name, label, rule=rule, reason=args.reason, who=who, **lock_options(args)
        )
    )
    print(
        f"kept the signal ({names.rule_label(rule)}) at subgroup {label} of '{name}' (reviewed, "
        "with reason)"
    )
    return 0


def run_reopen(args) -> int:
    sf = StudyFile(args.studyfile)
    who = _who(args)
    rule = _rule_id(args.rule)
    label = args.subgroup.strip()
    name = args.characteristic
    sf.apply(
        lambda s: s.reopen_signal(
            name, label, rule=rule, reason=args.reason, who=who, **lock_options(args)
        )
    )
    print(f"reopened the {rule} signal at subgroup {label} of '{name}'")
    return 0


# -- show ---------------------------------------------------------------------------------------


def _num(x) -> str:
    return "" if x is None else f"{x:g}"


def _table(headers: list[str], rows: list[list[str]]) -> str:
    widths = [
        max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(headers)
    ]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True)).rstrip()]
    lines.append("  ".join("-" * w for w in widths))
    for r in rows:
        lines.append("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip())
    return "\n".join("  " + ln for ln in lines)


def format_study(study: Study, chain=None, signatures=None) -> str:
    """The study as text for a terminal (``chain``: the file's ChainCheck, ``signatures``: the
    sign-offs' certificate signatures; each shown when given)."""
    parts = (
        _study_header(study, chain),
        _characteristics_lines(study),
        _decision_lines(study),
        _comment_lines(study),
        _signoff_lines(study, signatures or {}),
        _rules_and_waiver_lines(study),
    )
    return "\n\n".join("\n".join(lines) for lines in parts) + "\n"


def _study_header(study: Study, chain) -> list[str]:
    out = [f"Study     {study.title}"]
    if study.part:
        out.append(f"Part      {study.part}")
    if study.supplier:
        out.append(f"Supplier  {study.supplier}")
    out.append(
        f"Data      {study.data_filename} ({len(study.data)} bytes, sha256 {study.data_sha256})"
    )
    for f in study.extra_files:
        out.append(f"          {f.filename} ({len(f.data)} bytes, sha256 {f.sha256})")
    out.append(f"Digest    {study.content_digest()}")
    if chain is not None:
        out.append(
            f"Chain     {'intact' if chain.ok else 'BROKEN'}: {chain.entries} audit "
            f"entries over {chain.rows} rows, head {chain.head}"
        )
    holder = study.lock_holder()
    out.append(
        "State     "
        + (f"APPROVED by {holder.name} on {holder.when} (locked)" if holder else "open")
    )
    return out


def _characteristics_lines(study: Study) -> list[str]:
    rows = []
    for name, c in study.characteristics.items():
        excluded = sorted(study.excluded_subgroups(name), key=lambda s: (len(s), s))
        rows.append(
            [
                name,
                c.unit or "",
                _num(c.lsl),
                _num(c.target),
                _num(c.usl),
                "yes" if c.safety_critical else "",
                study.criteria_for(name).describe(),
                names.chart_kind_label(study.chart_for(name)),
                names.model_label(study.model_for(name)),
                ", ".join(excluded),
                ", ".join(
                    f"{lab} ({names.rule_label(rule)})" for lab, rule in study.kept_signals(name)
                ),
            ]
        )
    if not rows:
        return ["Characteristics", "  (none specified)"]
    head = ["name", "unit", "LSL", "target", "USL", "safety", "criterion", "chart", "model"]
    return ["Characteristics", _table([*head, "removed", "kept signals"], rows)]


def _decision_lines(study: Study) -> list[str]:
    out = [f"Decisions ({len(study.decisions)})"]
    for i, d in enumerate(study.decisions, start=1):
        on = f" '{d.characteristic}'" if d.characteristic else ""
        sub = f" subgroup {d.subgroup}" if d.subgroup else ""
        extra = f" {json.dumps(dict(d.payload), sort_keys=True)}" if d.payload else ""
        auto = " [automatic]" if d.automatic else ""
        out.append(
            f"  {i:>3}. {d.when}  {d.who}: {names.action_label(d.action)}{on}{sub}{extra}{auto}"
        )
        if d.reason:
            out.append(f"       reason: {d.reason}")
    return out


def _comment_lines(study: Study) -> list[str]:
    out = [f"Comments ({len(study.comments)})"]
    for c in study.comments:
        on = f" on '{c.characteristic}'" if c.characteristic else ""
        out.append(f"  {c.when}  {c.who}{on}: {c.text}")
    return out


def _signoff_lines(study: Study, signatures) -> list[str]:
    out = [f"Sign-offs ({len(study.signoffs)})"]
    for st in study.signoff_state():
        s = st.signoff
        state = "valid" if st.valid else f"VOIDED ({st.why})"
        out.append(f"  {s.when}  {s.name} ({s.role}): {s.decision} - {state}")
        if s.chain_head:
            out.append(f"       signed chain head {s.chain_head[:28]}...")
        sig = signatures.get(st.index)
        if sig is not None and sig.status != "none":
            out.append(
                f"       certificate signature {sig.status}: {sig.subject}, SHA-256 "
                f"fingerprint {sig.fingerprint_sha256}, valid {sig.not_before} to "
                f"{sig.not_after}" + (f" ({sig.why})" if sig.why else "")
            )
        if s.comment:
            out.append(f"       comment: {s.comment}")
        out.append(f"       signed content {s.digest}")
    return out


def _rules_and_waiver_lines(study: Study) -> list[str]:
    from studykit.signoff_rules import rules_text

    out = ["Sign-off rules", *(f"  {line}" for line in rules_text(study))]
    waivers = study.waivers()
    if waivers:
        out += ["", f"Waivers ({len(waivers)})"]
        out += [f"  {name}: {d.reason} ({d.who}, {d.when})" for name, d in waivers.items()]
    return out


def run_show(args) -> int:
    sf = StudyFile(args.studyfile)
    chain = sf.require_intact()  # a file altered behind studykit is never shown as valid
    study = sf.load()
    signatures = {sg.index: sg for sg in sf.signoff_signatures()}
    if args.json:
        d = study.to_dict()
        for so in d["signoffs"]:
            sg = signatures.get(so["index"])
            so["certificate_signature"] = (
                None if sg is None or sg.status == "none" else sg.to_dict()
            )
        write_json(dict(d, chain=chain.to_dict()))
    else:
        sys.stdout.write(format_study(study, chain, signatures))
    return 0


# -- changes ------------------------------------------------------------------------------------


def _subgroup_labels(study: Study, name: str) -> list[str]:
    """The subgroup labels of ``name`` as the analysis numbers them (from the characteristic's
    own data file of the study, after empty cells and with the spec's subgroup size)."""
    return list(dict.fromkeys(_subgroup_labels_all(study, name)))


def _check_subgroup(study: Study, name: str, label: str, action: str) -> None:
    """Refuse a subgroup label the data do not have, an exclusion already in force, and the
    restore of a subgroup that is not excluded."""
    excluded = study.excluded_subgroups(name)
    if action == "restore":
        if label not in excluded:
            raise StudyInputError(
                f"subgroup '{label}' of '{name}' is not excluded, so there is nothing to restore "
                "(excluded now: " + (", ".join(excluded) or "none") + ")"
            )
        return
    if label in excluded:
        d = excluded[label]
        raise StudyInputError(
            f"subgroup '{label}' of '{name}' is already excluded (by {d.who} on {d.when}: "
            f"{d.reason}); restore it first if the reason has to change"
        )
    labels = _subgroup_labels(study, name)
    if label not in labels:
        shown = ", ".join(labels[:8]) + (", ..." if len(labels) > 8 else "")
        raise StudyInputError(
            f"'{name}' has no subgroup '{label}' in {study.source_of(name)} (its subgroups are "
            f"{shown}): give a label exactly as the data show it"
        )


def run_decision(args) -> int:
    sf = StudyFile(args.studyfile)
    who = _who(args)
    label = args.subgroup.strip()
    _check_subgroup(sf.load(), args.characteristic, label, args.action)
    if args.action == "exclude":
        sf.exclude(args.characteristic, label, reason=args.reason, who=who, **lock_options(args))
    else:
        sf.restore(args.characteristic, label, reason=args.reason, who=who, **lock_options(args))
    done = "removed" if args.action == "exclude" else "restored"
    print(f"{done} subgroup {label} of '{args.characteristic}'")
    return 0


def _check_chart_against_data(study: Study, name: str, chart: str) -> None:
    """Refuse an individuals chart for subgrouped data and a subgroup chart for individuals."""
    if chart not in ("imr", "xbar_r", "xbar_s"):
        return
    labels = _subgroup_labels_all(study, name)
    counts: dict[str, int] = {}
    for lab in labels:
        counts[lab] = counts.get(lab, 0) + 1
    largest = max(counts.values(), default=0)
    if chart == "imr" and largest > 1:
        big = next(k for k, v in counts.items() if v > 1)
        raise StudyInputError(
            f"'{name}' has subgroups of up to {largest} values (subgroup '{big}' has "
            f"{counts[big]}); the individuals chart (imr) needs one value per subgroup. Use "
            "auto, xbar_r or xbar_s"
        )
    if chart in ("xbar_r", "xbar_s") and largest == 1:
        raise StudyInputError(
            f"'{name}' has one value per subgroup (individual values); the {chart} chart needs "
            "subgroups of 2 or more. Use auto or imr, or give the specification a subgroup size"
        )


def _subgroup_labels_all(study: Study, name: str) -> list[str]:
    """The subgroup label of every used value of ``name`` (see :func:`_subgroup_labels`)."""
    import numpy as np

    from studykit.analysis import read_study_measurements

    spec = study.characteristic(name)
    data = read_study_measurements(study).get(name)
    values = np.asarray(data.values, dtype=float)
    labels = [str(x) for x, v in zip(data.subgroups, values, strict=True) if not np.isnan(v)]
    if spec.subgroup_size and not spec.is_attribute and len(set(labels)) == len(labels):
        labels = [str(i // spec.subgroup_size + 1) for i in range(len(labels))]
    return labels


def _limit(text):
    if text is None:
        return None, False
    if text.strip().lower() in ("none", "-", ""):
        return None, True
    return text, True


def run_set(args) -> int:
    from studykit.study import Criteria, Decision

    who = _who(args)
    lock = lock_options(args)
    name = args.characteristic
    spec_changes = {}
    for key in ("lsl", "usl", "target"):
        value, given = _limit(getattr(args, key))
        if given:
            spec_changes[key] = value
    crit_changes = {
        k: v
        for k, v in (
            ("index", args.criterion),
            ("threshold", args.threshold),
            ("basis", args.basis),
            ("confidence", args.confidence),
        )
        if v is not None
    }
    if args.interval is not None:
        crit_changes.update(_interval_option(args.interval))
    if not (spec_changes or crit_changes or args.model or args.chart):
        raise StudyInputError(
            "nothing to change: give --lsl, --usl, --target, --criterion, "
            "--threshold, --basis, --confidence, --interval, --model or "
            "--chart"
        )

    if args.chart:
        try:
            chart = names.chart_kind_id(args.chart)
        except ValueError as exc:
            raise StudyInputError(str(exc)) from None
        current = StudyFile(args.studyfile).load()
        spec = current.characteristic(name)
        measured = spec.lsl is not None or spec.usl is not None  # else the study refuses it
        if chart in ("imr", "xbar_r", "xbar_s") and measured:
            _check_chart_against_data(current, name, chart)

    def change(study: Study) -> Study:
        if spec_changes:
            study = study.with_spec(name, who=who, reason=args.reason, **spec_changes, **lock)
        if crit_changes:
            crit = Criteria(**{**study.criteria_for(name).to_dict(), **crit_changes})
            study = study.with_criteria(name, crit, who=who, reason=args.reason, **lock)
        if args.model:
            study = study.with_decision(
                Decision(
                    name,
                    "set_model",
                    who=who,
                    reason=args.reason,
                    payload={"model": args.model.strip().lower()},
                ),
                **lock,
            )
        if args.chart:
            study = study.with_decision(
                Decision(
                    name,
                    "set_chart",
                    who=who,
                    reason=args.reason,
                    payload={"chart": args.chart.strip().lower().replace("-", "_")},
                ),
                **lock,
            )
        return study

    saved = StudyFile(args.studyfile).apply(change)
    c = saved.characteristics[name]
    print(
        f"'{name}': LSL {_num(c.lsl) or '-'}  target {_num(c.target) or '-'}  USL "
        f"{_num(c.usl) or '-'}; {saved.criteria_for(name).describe()}; model "
        f"{saved.model_for(name)}; chart {saved.chart_for(name)}"
    )
    return 0


def run_comment(args) -> int:
    StudyFile(args.studyfile).add_comment(
        args.text, who=_who(args), characteristic=args.characteristic
    )
    print("comment added")
    return 0


def run_sign(args) -> int:

    from studykit.analysis import gauge_results
    from studykit.signoff_rules import analyse_for_signoff, make_check, open_verdicts
    from studykit.study import SignOff

    certificate = (args.p12, p12_passphrase(args.p12, args.passphrase_env)) if args.p12 else None
    sf = StudyFile(args.studyfile)
    who = _who(args)
    saw = None
    if args.saw is not None:
        saw = args.saw.strip().lower()
        if len(saw) < 12 or any(c not in "0123456789abcdef" for c in saw):
            raise StudyInputError(
                f"`--saw` ({args.saw!r}) must be the content digest shown by "
                "`studykit study show` (at least its first 12 hex digits)"
            )
    study = sf.load()
    probe = SignOff(
        who, args.role, args.decision, comment=args.comment, digest=study.content_digest()
    )
    needed = probe.is_approval and study.signoff_rules().get("approval_needs_verdicts")
    results = analyse_for_signoff(study, gauges=gauge_results(sf), needed=bool(needed))
    missing = open_verdicts(study, results) if needed else {}
    # the verdicts belong to this content: sign only if it is still the content analysed
    expected = saw if saw is not None else study.content_digest()
    s = sf.add_signoff(
        who,
        role=args.role,
        decision=args.decision,
        comment=args.comment,
        expected_digest=expected,
        check=make_check(missing),
        certificate=certificate,
    )
    print(
        f"signed as {s.role} ({s.decision}); study digest {s.digest}; chain head "
        f"{s.chain_head[:28]}..."
    )
    if certificate is not None:
        sig = sf.signoff_signatures()[-1]
        print(
            f"certificate signature: {sig.status} ({sig.subject}, SHA-256 fingerprint "
            f"{sig.fingerprint_sha256})"
        )
    return 0


def run_rules(args) -> int:
    from studykit.signoff_rules import rules_text
    from studykit.study import DEFAULT_SIGNOFF_RULES, Decision

    sf = StudyFile(args.studyfile)
    changes = {
        k: getattr(args, k) == "on" for k in DEFAULT_SIGNOFF_RULES if getattr(args, k) is not None
    }
    if changes:
        if not (args.reason or "").strip():
            raise StudyInputError(
                "changing a sign-off rule needs --reason (it is recorded with who and when)"
            )
        current = sf.load().signoff_rules()
        changes = {k: v for k, v in changes.items() if current[k] != v}
        if changes:
            sf.append_decision(
                Decision(
                    None,
                    "set_signoff_rules",
                    reason=args.reason,
                    who=_who(args),
                    payload={"rules": changes},
                ),
                **lock_options(args),
            )
    for line in rules_text(sf.load()):
        print(line)
    return 0


def run_waive(args) -> int:
    from studykit.study import Decision

    sf = StudyFile(args.studyfile)
    study = sf.load()
    name = args.characteristic
    study.characteristic(name)
    waived = name in study.waivers()
    if args.withdraw and not waived:
        raise StudyInputError(f"'{name}' has no waiver to withdraw")
    if not args.withdraw and waived:
        raise StudyInputError(
            f"'{name}' already has a waiver ({study.waivers()[name].reason}); "
            "withdraw it first to record another reason"
        )
    sf.append_decision(
        Decision(
            name,
            "waive_verdict",
            reason=args.reason,
            who=_who(args),
            payload={"waived": not args.withdraw, "reason": args.reason.strip()},
        ),
        **lock_options(args),
    )
    print(("withdrew the waiver of" if args.withdraw else "recorded a waiver for") + f" '{name}'")
    return 0


def run_log(args) -> int:
    """Print the audit log; every entry that breaks the hash chain is marked beside it and the
    exit status is 2 when the chain is broken."""
    sf = StudyFile(args.studyfile)
    chain = sf.check_chain()
    entries = sf.audit_log()
    if args.json:
        write_json([e.to_dict() for e in entries])
    else:
        by_entry: dict = {}
        for eid, problem in chain.problems:
            by_entry.setdefault(eid, []).append(problem)
        for e in entries:
            why = f"  (why: {e.why})" if e.why else ""
            print(f"{e.id:>4}  {e.when}  {e.who}: {e.what}{why}")
            for problem in by_entry.get(e.id, []):
                print(f"      !! BROKEN: {problem}")
        for problem in by_entry.get(None, []):
            print(f"      !! BROKEN: {problem}")
        print(chain.summary())
    if not chain.ok:
        print(
            f"studykit study log: error: study file '{sf.path}' was altered outside studykit: "
            f"{chain.summary()}",
            file=sys.stderr,
        )
        return 2
    return 0


def _interval_option(text: str) -> dict:
    """``--interval P,C`` (or ``none``) as Criteria fields."""
    t = text.strip().lower()
    if t in ("none", "off", ""):
        return {"interval_coverage": None, "interval_confidence": None}
    parts = [p.strip() for p in t.replace(";", ",").split(",")]
    try:
        p, c = (float(v) for v in parts)
    except ValueError:
        raise StudyInputError(
            f"--interval '{text}': give P and C as shares separated by a "
            "comma, e.g. 0.99,0.95 (or 'none' to remove the criterion)"
        ) from None
    return {"interval_coverage": p, "interval_confidence": c}
