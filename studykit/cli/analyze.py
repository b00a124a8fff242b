"""``studykit analyze``: the capability study of one characteristic (or all) in the terminal."""

from __future__ import annotations

import json
import sys

from studykit.errors import StudyInputError


def register(sub) -> None:
    p = sub.add_parser(
        "analyze",
        help="stability, shape and capability of a characteristic",
        description=(
            "Run the capability study of one characteristic: phase-I control limits with "
            "logged removals, normality, the distribution model, capability indices with "
            "confidence bounds and the verdict. Give a data FILE, or --study for a saved study "
            "(its specs, exclusions and settings apply)."
        ),
    )
    p.add_argument("file", nargs="?", help="measurement file (CSV or XLSX)")
    p.add_argument("--study", metavar="STUDYFILE", help="a saved study file instead of FILE")
    p.add_argument("--characteristic", "-c", metavar="NAME", help="characteristic to analyse")
    p.add_argument("--all", action="store_true", help="analyse every characteristic")
    p.add_argument("--specs", metavar="SPECS", help="specs table (CSV/XLSX) for --all")
    p.add_argument("--out", metavar="SUMMARY", help="with --all: write the summary (.csv/.xlsx)")
    p.add_argument("--sheet", help="XLSX sheet name")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--subgroup-size", type=int, metavar="N", help="subgroups of N values")
    g.add_argument("--subgroup-column", metavar="COL", help="column holding subgroup labels")
    p.add_argument(
        "--chart",
        choices=["auto", "xbar-r", "xbar-s", "imr", "p", "np", "c", "u"],
        help="chart kind (default: auto, from the subgroup size)",
    )
    p.add_argument("--size-column", metavar="COL", help="attribute data: lot/sample sizes")
    p.add_argument("--phase1", choices=["auto", "off"], default=None,
                   help="remove out-of-control subgroups automatically: default auto for a data "
                   "FILE; off for --study, where only the removals recorded in the study count")
    p.add_argument("--max-auto-removal", type=float, default=None, metavar="SHARE",
                   help="automatic phase-I removal of more than this share of the values "
                   "withholds the verdict (default 0.10)")
    p.add_argument("--min-kept", type=int, default=None, metavar="N",
                   help="automatic phase-I removal that leaves fewer than N values withholds "
                   "the verdict (default 20)")
    p.add_argument("--sigma-method", choices=["auto", "rbar", "sbar", "pooled"], default=None,
                   help="within sigma of subgrouped charts: auto (R-bar/d2 or S-bar/c4; unequal "
                   "sizes: mean of R_i/d2(n_i) or s_i/c4(n_i)), rbar, sbar, or pooled "
                   "(pooled standard deviation / c4(d + 1))")
    p.add_argument("--transform-indices", choices=["transformed", "percentile"],
                   default="transformed",
                   help="capability of a Box-Cox/Johnson model: transformed (limits and values "
                   "transformed, normal theory on that scale; default) or percentile (ISO "
                   "22514-2 percentile method on the original scale from the back-transformed "
                   "0.135 %%, 50 %% and 99.865 %% points)")
    p.add_argument("--mr-removal", choices=["later", "both"], default="later",
                   help="automatic phase I on an individuals chart: a moving-range signal "
                   "removes the later reading of the pair (default) or both")
    p.add_argument("--rules", default="nelson",
                   help="run rules shown: nelson, western_electric, limits_only or a list "
                   "such as 1,2,5 (default nelson)")
    p.add_argument("--lsl", type=float, help="lower specification limit")
    p.add_argument("--usl", type=float, help="upper specification limit")
    p.add_argument("--target", type=float, help="target (nominal) value")
    p.add_argument("--model", help="auto, normal, boxcox, johnson or a family id (default auto)")
    p.add_argument("--rank-models", action="store_true", default=None,
                   help="fit and rank every distribution family even when the normal model is "
                   "not rejected (JSON `ranking`, `model_band`; default: only when needed, "
                   "always with --study)")
    p.add_argument("--confidence", type=float, default=None,
                   help="confidence level of the bounds (default: the study's criterion, "
                        "else 0.95)")
    p.add_argument("--index", choices=["cp", "cpk", "pp", "ppk", "cpm"],
                   help="acceptance index (default ppk)")
    p.add_argument("--threshold", type=float, help="acceptance threshold (default 1.67)")
    p.add_argument("--basis", choices=["lower_bound", "estimate"],
                   help="judge the lower bound (default) or the estimate")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--jobs", type=int, default=None, help="--all: worker processes")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="--all: run on a Dask cluster at ADDRESS (optional backend)")
    p.set_defaults(func=run)


def _options(args):
    from studykit.analysis import AnalysisOptions

    return AnalysisOptions(
        chart=args.chart,
        subgroup_size=args.subgroup_size,
        phase1=args.phase1 or ("off" if getattr(args, "study", None) else "auto"),
        rules=args.rules,
        model=args.model,
        confidence=args.confidence,
        **({"max_auto_removed_share": args.max_auto_removal}
           if getattr(args, "max_auto_removal", None) is not None else {}),
        **({"min_kept_values": args.min_kept} if getattr(args, "min_kept", None) is not None
           else {}),
        sigma_method=getattr(args, "sigma_method", None),
        transform_indices=getattr(args, "transform_indices", None) or "transformed",
        mr_removal=getattr(args, "mr_removal", None) or "later",
        rank_models=getattr(args, "rank_models", None),
    )


def _criteria(args, base=None):
    from studykit.study import Criteria

    if args.index is None and args.threshold is None and args.basis is None:
        return base
    base = base or Criteria()
    return Criteria(
        index=args.index or base.index,
        threshold=args.threshold if args.threshold is not None else base.threshold,
        basis=args.basis or base.basis,
        confidence=args.confidence if args.confidence is not None else base.confidence,
    )


def _spec(args, name, unit, base=None):
    from studykit.study import Characteristic

    if args.chart in ("p", "np", "c", "u") and (
        args.lsl is not None or args.usl is not None or args.target is not None
    ):
        raise StudyInputError(
            f"--lsl/--usl/--target do not apply to a {args.chart} chart: counted data are "
            "judged by their defective rate or defects per unit; leave the limits out"
        )

    if base is not None and args.lsl is None and args.usl is None and args.target is None:
        return base
    if args.lsl is None and args.usl is None and args.chart not in ("p", "np", "c", "u"):
        if base is not None:
            return base
        return None
    lsl = args.lsl if args.lsl is not None else (base.lsl if base is not None else None)
    usl = args.usl if args.usl is not None else (base.usl if base is not None else None)
    target = args.target if args.target is not None else (base.target if base else None)
    return Characteristic(
        name,
        unit=unit,
        lsl=lsl,
        usl=usl,
        target=target,
        chart=(args.chart or "auto").replace("-", "_"),
        safety_critical=bool(base.safety_critical) if base is not None else False,
        size_column=args.size_column,
    )


def run(args) -> int:
    if args.all:
        from studykit.cli.batch import run_batch

        return run_batch(args)
    if not args.characteristic:
        raise StudyInputError("name the characteristic with --characteristic NAME (or use --all)")
    result = analyze_from_args(args, args.characteristic)
    if args.json:
        json.dump(result.to_dict(), sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        sys.stdout.write(format_result(result))
    return 0


def analyze_from_args(args, name):
    """One characteristic from a FILE or a --study, with the command-line overrides."""
    from studykit.analysis import analyze_characteristic, analyze_study, read_study_measurements

    options = _options(args)
    if args.study:
        from studykit.analysis import NO_GAUGE, gauge_results
        from studykit.store import StudyFile

        study_file = StudyFile(args.study)
        study = study_file.load()
        gauge = gauge_results(study_file).get(name, NO_GAUGE)
        if name not in study.characteristic_names:
            raise StudyInputError(
                f"the study has no characteristic '{name}' (it has: "
                + ", ".join(study.characteristic_names)
                + ")"
            )
        base = study.characteristic(name)
        spec = _spec(args, name, base.unit, base)
        if spec is not base or _criteria(args) is not None:
            measurements = read_study_measurements(study)
            from dataclasses import replace

            if args.size_column is None and base.size_column:
                args.size_column = base.size_column
            data = measurements.get(name)
            sizes = measurements.get(args.size_column) if args.size_column else None
            from studykit.analysis import _exclusions

            options = replace(options, chart=options.chart or study.chart_for(name),
                              model=options.model or study.model_for(name),
                              rank_models=options.rank_models is not False)  # as analyze_study
            return analyze_characteristic(
                data, spec, criteria=_criteria(args, study.criteria_for(name)), sizes=sizes,
                exclusions=_exclusions(study, name), options=options, gauge=gauge,
            )
        return analyze_study(study, name, options=options, gauge=gauge)
    if not args.file:
        raise StudyInputError("give a measurement FILE or --study STUDYFILE")
    from studykit.data import read_measurements

    read_kw = {}
    if args.subgroup_column:
        read_kw["subgroup_column"] = args.subgroup_column
    if args.subgroup_size:
        read_kw["subgroup_size"] = args.subgroup_size
    if args.sheet:
        read_kw["sheet"] = args.sheet
    m = read_measurements(args.file, **read_kw)
    data = m.get(name)
    sizes = None
    if args.size_column:
        if args.size_column not in m.names:
            raise StudyInputError(
                f"--size-column '{args.size_column}' is not a column of the file (its columns: "
                + ", ".join(m.names) + ")", file=args.file,
            )
        sizes = m.get(args.size_column)
    spec = _spec(args, name, data.unit)
    return analyze_characteristic(
        data, spec, criteria=_criteria(args), sizes=sizes, options=options
    )


def _fmt(v, digits=4):
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.{digits}g}"
    return str(v)


def _pct(v) -> str:
    return "-" if v is None else f"{100 * v:.0f} %"


_PRETTY = {"cp": "Cp", "cpk": "Cpk", "pp": "Pp", "ppk": "Ppk", "cpm": "Cpm"}


def _i3(v) -> str:
    return "-" if v is None else f"{v:.3f}"


def _measurement_error_lines(me: dict) -> list[str]:
    """Observed and process-only indices (the gauge variance removed), one line per index."""
    lvl = f"{100 * (me.get('level') or 0.95):g}%"
    lines = [f"gauge error taken out (gauge sigma {_fmt(me.get('gauge_sigma'), 4)} on "
             f"{_fmt(me.get('gauge_df'), 3)} df; {lvl} interval, modified large-sample):"]
    for basis in ("within", "overall"):
        b = me.get(basis)
        if not b:
            continue
        spread = b.get("spread_interval") or {}
        for key, obs in (b.get("observed") or {}).items():
            iv = spread.get(key)
            lines.append(f"  {_PRETTY[key]:5s} observed {_i3(obs)}  process only "
                         f"{_i3((b.get('process') or {}).get(key))}"
                         + (f"  ({_i3(iv[0])} .. {_i3(iv[1])})" if iv else "")
                         + (f"  gauge share {100 * b['gauge_share']:.1f}% of the {basis} "
                            "variance" if key in ("cp", "pp") and b.get("gauge_share")
                            is not None else ""))
    lines += [f"  ! {w}" for w in me.get("warnings") or []]
    return lines


def format_result(res) -> str:
    """A plain terminal report of one characteristic."""
    from studykit.analysis import capability_method_text

    d = res.to_dict()
    lines = []
    unit = f" [{res.unit}]" if res.unit else ""
    lines.append(f"{res.characteristic}{unit}")
    lines.append("=" * len(lines[0]))
    spec = d["spec"]
    lines.append(
        f"spec: LSL {_fmt(spec['lsl'])}  USL {_fmt(spec['usl'])}  target {_fmt(spec['target'])}"
    )
    for c in d["cautions"]:
        lines.append(f"CAUTION: {c}")
    ch = d["chart"]
    lines.append(
        f"chart: {ch['kind']} ({ch['reason']}); n = {d['n']} values in {d['subgroups']} "
        f"subgroups; missing {d['n_missing']}"
    )
    loc = ch["location"]
    lines.append(
        f"  location: centre {_fmt(loc['center'], 6)}  LCL {_fmt(loc['lcl'], 6)}  "
        f"UCL {_fmt(loc['ucl'], 6)}"
    )
    if ch["dispersion"]:
        disp = ch["dispersion"]
        lines.append(
            f"  dispersion: centre {_fmt(disp['center'], 6)}  LCL {_fmt(disp['lcl'], 6)}  "
            f"UCL {_fmt(disp['ucl'], 6)}"
        )
    if ch.get("scale_text"):
        lines.append(f"  charted on the model's scale: {ch['scale_text']}")
    if ch.get("probability_limits"):
        pl = ch["probability_limits"]
        lines.append(
            f"  probability limits in measured units: LCL {_fmt(pl['lcl'], 6)}  centre "
            f"{_fmt(pl['center'], 6)}  UCL {_fmt(pl['ucl'], 6)}"
        )
    if d.get("order") and d["order"]["flagged"]:
        lines.append(f"order: {d['order']['status']} - run rules not applied")
    lines.append(
        f"  mean {_fmt(d['mean'], 6)}  within sigma {_fmt(d['within_sigma'], 5)}  "
        f"overall sigma {_fmt(d['overall_sigma'], 5)}"
    )
    p1 = d["phase1"]
    if p1["removals"]:
        lines.append(
            f"phase I: {len(p1['removals'])} subgroup(s) removed ({p1['removed_auto']} value(s) "
            f"automatically, {_pct(p1['removed_share_auto'])}; {p1['removed_recorded']} by "
            "recorded decisions)"
        )
        for r in p1["removals"]:
            lines.append(f"  - subgroup {r['label']} ({r['who']}, round {r['iteration']}): "
                         f"{r['reason']}")
    else:
        lines.append("phase I: no subgroup removed")
    if ch["signals"]:
        lines.append(f"signals on the final chart ({len(ch['signals'])}):")
        for s in ch["signals"][:12]:
            lines.append(f"  - [{s['chart']}] {s['text']}")
    if d["normality"]:
        ad, sw = d["normality"]["anderson_darling"], d["normality"]["shapiro_wilk"]
        lines.append(
            f"normality: Anderson-Darling A2 {_fmt(ad['statistic'])} (p {_fmt(ad['p_value'], 3)}); "
            f"Shapiro-Wilk W {_fmt(sw['statistic'])} (p {_fmt(sw['p_value'], 3)})"
        )
    if d["model"]:
        lines.append(f"model: {d['model']['label']} - {d['model']['reason']}")
    cap = d["capability"]
    if cap:
        level = cap["level"]
        lines.append(f"capability ({cap['method']} method; lower bounds at {level:.0%}):")
        lines.append(f"  convention: {capability_method_text(cap, d['model'])}")
        for key in ("cp", "cpk", "pp", "ppk", "cpm"):
            if cap.get(key) is None:
                continue
            lb = cap["bounds"].get(key, {}).get("lower_bound")
            lines.append(f"  {_PRETTY[key]:5s} "
                         f"{cap[key]:8.3f}   lower bound {_fmt(lb, 4)}")
        lines.append(
            f"  PPM expected within {_fmt(cap['ppm_within'], 4)}, overall "
            f"{_fmt(cap['ppm_overall'], 4)}; observed {_fmt(cap['ppm_observed'], 4)}"
        )
    if "defective_rate" in d:
        lines.append(
            f"defective rate {d['defective_rate']:.5f} (upper bound "
            f"{_fmt(d.get('defective_rate_upper_95'), 4)}), PPM {_fmt(d['ppm_defective'], 5)}, "
            f"process Z {_fmt(d['z_process'], 4)} (from the bound "
            f"{_fmt(d.get('z_process_lower_95'), 4)})"
        )
    if d["verdict"]:
        mark = {True: "MEETS", False: "DOES NOT MEET", None: "NOT JUDGED"}[d["verdict"]["meets"]]
        lines.append(f"verdict: {mark} {d['verdict']['criterion']}")
        lines.append(f"  {d['verdict']['text']}")
    for f in d["findings"]:
        lines.append(f"  * {f['text']}")
    if d.get("measurement_error"):
        lines += _measurement_error_lines(d["measurement_error"])
    if d["model_band"] and d["model_band"].get("warning"):
        lines.append(f"model band: {d['model_band']['warning']}")
    if d["plan"]:
        lines.append(f"planning: {d['plan']['text']}")
    for w in d["warnings"]:
        lines.append(f"warning: {w}")
    return "\n".join(lines) + "\n"
