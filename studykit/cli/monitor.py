"""``studykit monitor``: new production data against frozen phase-II limits."""

from __future__ import annotations

import json
import sys
from pathlib import Path

from studykit.errors import StudyInputError


def register(sub) -> None:
    p = sub.add_parser(
        "monitor",
        help="check new production data against frozen phase-II limits",
        description=(
            "Plot new measurements against the limits frozen at the end of the study (a "
            "phase-II plan JSON from the hand-off pack, or frozen now from --study) and apply "
            "the same run rules. Exit 0 when in control, 1 when a signal is found."
        ),
    )
    p.add_argument("file", help="new measurements (CSV or XLSX)")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--plan", metavar="PLAN.json", help="phase-II plan from the hand-off pack")
    src.add_argument("--study", metavar="STUDYFILE", help="freeze the limits from a saved study")
    p.add_argument(
        "--characteristic",
        "-c",
        metavar="NAME",
        help="column of FILE to check (default: the plan's characteristic)",
    )
    p.add_argument("--subgroup-column", metavar="COL", help="column holding subgroup labels")
    p.add_argument("--size-column", metavar="COL", help="attribute data: lot/sample sizes")
    p.add_argument("--save-plan", metavar="PLAN.json", help="with --study: also write the plan")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=run)


def _plan(args):
    from studykit.stats.phase2 import Phase2Plan, freeze

    if args.plan:
        path = Path(args.plan)
        if not path.is_file():
            raise StudyInputError("the plan file does not exist: check the path", file=args.plan)
        try:
            return Phase2Plan.from_json(path.read_text(encoding="utf-8"))
        except (ValueError, KeyError, TypeError) as exc:
            raise StudyInputError(
                f"this is not a phase-II plan written by studykit ({exc}); use the plan JSON "
                "from the hand-off pack",
                file=args.plan,
            ) from None
    if not args.characteristic:
        raise StudyInputError("with --study, name the characteristic with --characteristic NAME")
    from studykit.analysis import analyze_study
    from studykit.store import StudyFile

    study = StudyFile(args.study).load()
    res = analyze_study(study, args.characteristic)
    plan = freeze(
        res.phase1, characteristic=res.characteristic, unit=res.unit or "", rules=res.options.rules
    )
    if args.save_plan:
        Path(args.save_plan).write_text(plan.to_json(), encoding="utf-8")
    return plan


def run(args) -> int:
    import numpy as np

    from studykit.cli.args import read_file_measurements
    from studykit.stats.phase2 import monitor

    plan = _plan(args)
    name = args.characteristic or plan.characteristic
    m = read_file_measurements(args)
    data = m.get(name)
    sizes = m.get(args.size_column).values if args.size_column else None
    keep = ~np.isnan(data.values)
    values, labels = data.values[keep], data.subgroups[keep]
    if sizes is not None:
        sizes = sizes[keep]
    if plan.kind == "imr" and len(set(labels.tolist())) != labels.size:
        raise StudyInputError(
            f"the plan is for individual values but '{name}' in the file is subgrouped: "
            "give one value per row",
            file=args.file,
            column=name,
        )
    res = monitor(plan, values, labels, sizes=sizes)
    if args.json:
        out = {
            "characteristic": plan.characteristic,
            "kind": plan.kind,
            "in_control": res.in_control,
            "first_signal": res.first_signal_label,
            "signals": res.signal_records(),
            "warnings": list(res.warnings),
            "n_missing": int((~keep).sum()),
        }
        json.dump(out, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        print(
            f"{plan.characteristic}: {len(res.chart.labels)} new subgroup(s) against the "
            f"limits frozen from the study ({plan.kind})"
        )
        if int((~keep).sum()):
            print(f"  {int((~keep).sum())} empty cell(s) left out")
        if res.in_control:
            print("  in control: no rule signals")
        else:
            print(f"  OUT OF CONTROL from subgroup {res.first_signal_label}:")
            for rec in res.signal_records():
                print(f"  - {rec['text']}")
        for w in res.warnings:
            print(f"  warning: {w}")
    return 0 if res.in_control else 1
