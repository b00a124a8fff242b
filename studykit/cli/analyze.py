"""``studykit analyze``: the capability study of one characteristic (or all) in the terminal."""

from __future__ import annotations

import json
import os
import sys

from studykit import names
from studykit.cli.args import (
    add_reading_options,
    analysis_options,
    criteria_from_args,
    jobs_count,
    read_file_measurements,
    spec_from_args,
)
from studykit.errors import StudyInputError
from studykit.runtime import heap_for_large_arrays, one_command_collector


def _chart_arg(text: str) -> str:
    """``--chart``: any accepted spelling (xbar-r, xbar_r, X-bar-R) as the hyphenated id."""
    import argparse

    try:
        return names.chart_kind_id(text).replace("_", "-")
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


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
    add_reading_options(p, subgroups=True)
    p.add_argument(
        "--chart",
        type=_chart_arg,
        metavar="KIND",
        help="chart kind: auto, xbar-r, xbar-s, imr, p, np, c or u (xbar_r and X-bar-R are "
        "accepted too; default: auto, from the subgroup size)",
    )
    p.add_argument("--size-column", metavar="COL", help="attribute data: lot/sample sizes")
    p.add_argument(
        "--stream-column",
        metavar="COL",
        help="column naming the stream of each row (mould cavity, spindle, nest, "
        "fixture, head): per-stream charts, capability and verdicts, tests of "
        "whether the streams differ, the group chart (detected by a header such as "
        "'cavity', 'nest', 'spindle', 'stream' when not given)",
    )
    p.add_argument(
        "--phase1",
        choices=["auto", "off"],
        default=None,
        help="remove out-of-control subgroups automatically: default auto for a data "
        "FILE; off for --study, where only the removals recorded in the study count",
    )
    p.add_argument(
        "--max-auto-removal",
        type=float,
        default=None,
        metavar="SHARE",
        help="automatic phase-I removal of more than this share of the values "
        "withholds the verdict (default 0.10)",
    )
    p.add_argument(
        "--min-kept",
        type=int,
        default=None,
        metavar="N",
        help="automatic phase-I removal that leaves fewer than N values withholds "
        "the verdict (default 20)",
    )
    p.add_argument(
        "--sigma-method",
        choices=["auto", "rbar", "sbar", "pooled"],
        default=None,
        help="within sigma of subgrouped charts: auto (R-bar/d2 or S-bar/c4; unequal "
        "sizes: mean of R_i/d2(n_i) or s_i/c4(n_i)), rbar, sbar, or pooled "
        "(pooled standard deviation / c4(d + 1))",
    )
    p.add_argument(
        "--transform-indices",
        choices=["transformed", "percentile"],
        default="transformed",
        help="capability of a Box-Cox/Johnson model: transformed (limits and values "
        "transformed, normal theory on that scale; default) or percentile (ISO "
        "22514-2 percentile method on the original scale from the back-transformed "
        "0.135 %%, 50 %% and 99.865 %% points)",
    )
    p.add_argument(
        "--mr-removal",
        choices=["later", "both"],
        default="later",
        help="automatic phase I on an individuals chart: a moving-range signal "
        "removes the later reading of the pair (default) or both",
    )
    p.add_argument(
        "--rules",
        default="nelson",
        help="run rules shown: nelson, western_electric, limits_only or a list "
        "such as 1,2,5 (default nelson)",
    )
    p.add_argument("--lsl", type=float, help="lower specification limit")
    p.add_argument("--usl", type=float, help="upper specification limit")
    p.add_argument("--target", type=float, help="target (nominal) value")
    p.add_argument("--model", help="auto, normal, boxcox, johnson or a family id (default auto)")
    p.add_argument(
        "--rank-models",
        action="store_true",
        default=None,
        help="fit and rank every distribution family even when the normal model is "
        "not rejected (JSON `ranking`, `model_band`; default: only when needed, "
        "always with --study)",
    )
    p.add_argument(
        "--confidence",
        type=float,
        default=None,
        help="confidence level of the bounds (default: the study's criterion, else 0.95)",
    )
    p.add_argument(
        "--index", choices=["cp", "cpk", "pp", "ppk", "cpm"], help="acceptance index (default ppk)"
    )
    p.add_argument(
        "--threshold",
        type=float,
        help=f"acceptance threshold (default {names.DEFAULT_CRITERION['threshold']:g})",
    )
    p.add_argument(
        "--basis",
        choices=["lower_bound", "estimate"],
        help="judge the lower bound (default) or the estimate",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument(
        "--jobs", type=jobs_count, default=None, metavar="N", help="--all: worker processes"
    )
    p.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="--all: run on a Dask cluster at ADDRESS (optional backend)",
    )
    p.set_defaults(func=run)


def run(args) -> int:
    if args.all:
        from studykit.cli.batch import run_batch

        return run_batch(args)
    if not args.characteristic:
        raise StudyInputError("name the characteristic with --characteristic NAME (or use --all)")
    heap_for_large_arrays()  # temporaries of 10^6 values reuse memory (studykit/runtime.py)
    with one_command_collector():  # the collector's walks spared (studykit/runtime.py)
        result = analyze_from_args(args, args.characteristic)
        if args.json:
            # a few large writes: the terminal-safety escaping runs once per piece, not per token
            for piece in dumps_result(result.to_dict()):
                sys.stdout.write(piece)
            sys.stdout.write("\n")
        else:
            sys.stdout.write(format_result(result))
    return 0


def dumps_result(out: dict):
    """The result as indented JSON, in pieces, each chart signal on one line.

    ``json`` indents with its pure-Python encoder; the signals of a long chart (10^4 of them on
    10^6 readings) are encoded by the C encoder instead, one line each, 1,000 lines a piece (the
    text is never held whole). Same JSON value.
    """
    chart = out.get("chart")
    signals = chart.get("signals") if isinstance(chart, dict) else None
    if not signals:
        yield json.dumps(out, indent=2)
        return
    # 128 random bits (as uuid4 has; without importing uuid): cannot occur in the data
    marker = json.dumps(f"@@signals-{os.urandom(16).hex()}@@")
    text = json.dumps({**out, "chart": {**chart, "signals": marker[1:-1]}}, indent=2)
    head, tail = text.split(marker, 1)
    yield head + "[\n"
    for i in range(0, len(signals), 1000):
        yield (",\n" if i else "") + ",\n".join(
            "      " + json.dumps(sig) for sig in signals[i : i + 1000]
        )
    yield "\n    ]" + tail


def analyze_from_args(args, name):
    """One characteristic from a FILE or a --study, with the command-line overrides."""
    from studykit.analysis import (
        analyze_characteristic,
        analyze_study,
        read_study_measurements,
        recorded_exclusions,
    )

    options = analysis_options(args)
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
        spec = spec_from_args(args, name, base.unit, base)
        if spec is not base or criteria_from_args(args) is not None:
            measurements = read_study_measurements(study)
            from dataclasses import replace

            if args.size_column is None and base.size_column:
                args.size_column = base.size_column
            data = measurements.get(name)
            sizes = measurements.get(args.size_column) if args.size_column else None
            options = replace(
                options,
                chart=options.chart or study.chart_for(name),
                model=options.model or study.model_for(name),
                rank_models=options.rank_models is not False,
            )  # as analyze_study
            return analyze_characteristic(
                data,
                spec,
                criteria=criteria_from_args(args, study.criteria_for(name)),
                sizes=sizes,
                exclusions=recorded_exclusions(study, name),
                options=options,
                gauge=gauge,
            )
        return analyze_study(study, name, options=options, gauge=gauge)
    if not args.file:
        raise StudyInputError("give a measurement FILE or --study STUDYFILE")
    m = read_file_measurements(args)
    data = m.get(name)
    sizes = None
    if args.size_column:
        if args.size_column not in m.names:
            raise StudyInputError(
                f"--size-column '{args.size_column}' is not a column of the file (its columns: "
                + ", ".join(m.names)
                + ")",
                file=args.file,
            )
        sizes = m.get(args.size_column)
    spec = spec_from_args(args, name, data.unit)
    return analyze_characteristic(
        data, spec, criteria=criteria_from_args(args), sizes=sizes, options=options
    )


def _fmt(v, digits=4):
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.{digits}g}"
    return str(v)


def _pct(v) -> str:
    return "-" if v is None else f"{100 * v:.0f} %"


_PRETTY = names.INDEX_LABELS


def _i3(v) -> str:
    return "-" if v is None else f"{v:.3f}"


def _measurement_error_lines(me: dict) -> list[str]:
    """Observed and process-only indices (the gauge variance removed), one line per index."""
    lvl = f"{100 * (me.get('level') or 0.95):g}%"
    lines = [
        f"gauge error taken out (gauge sigma {_fmt(me.get('gauge_sigma'), 4)} on "
        f"{_fmt(me.get('gauge_df'), 3)} df; {lvl} interval, modified large-sample):"
    ]
    for basis in ("within", "overall"):
        b = me.get(basis)
        if not b:
            continue
        spread = b.get("spread_interval") or {}
        for key, obs in (b.get("observed") or {}).items():
            iv = spread.get(key)
            lines.append(
                f"  {_PRETTY[key]:5s} observed {_i3(obs)}  process only "
                f"{_i3((b.get('process') or {}).get(key))}"
                + (f"  ({_i3(iv[0])} .. {_i3(iv[1])})" if iv else "")
                + (
                    f"  gauge share {100 * b['gauge_share']:.1f}% of the {basis} variance"
                    if key in ("cp", "pp") and b.get("gauge_share") is not None
                    else ""
                )
            )
    lines += [f"  ! {w}" for w in me.get("warnings") or []]
    return lines


def _value(v, lsl, usl) -> str:
    """A value in measured units: enough decimals for 1/100 of the tolerance (names.py rule)."""
    if v is None:
        return "-"
    if lsl is not None and usl is not None:
        return names.format_value(v, lsl, usl)
    return _fmt(v, 6)


def _stream_lines(st: dict, lsl=None, usl=None) -> list[str]:
    """Per-stream table, the two tests and the worst stream."""
    lines = [f"streams ({len(st['names'])}): worst {st['worst'] or '-'}"]
    for row in st["per_stream"]:
        if row.get("error"):
            lines.append(f"  {row['stream']:>8s}  not analysed: {row['error']}")
            continue
        v = row.get("verdict") or {}
        mark = {True: "meets", False: "does not meet", None: "not judged"}[v.get("meets")]
        idx = _PRETTY.get(v.get("index"), v.get("index") or "")
        lines.append(
            f"  {row['stream']:>8s}  n {row['n']:4d}  mean {_value(row['mean'], lsl, usl)}  "
            f"overall sigma {_fmt(row['overall_sigma'], 4)}  {idx} "
            f"{_fmt(v.get('estimate'), 3)} (bound {_fmt(v.get('lower_bound'), 3)})  "
            f"{mark}"
        )
    for key in ("location_test", "spread_test"):
        if st.get(key):
            lines.append(f"  {st[key]['text']}")
    g = st.get("group_chart")
    if g:
        lines.append(
            f"  group chart: centre {_value(g['center'], lsl, usl)}  "
            f"LCL {_value(g['lcl'], lsl, usl)}  UCL {_value(g['ucl'], lsl, usl)}; {len(g['beyond'])} stream mean(s) beyond"
        )
        for r in (g.get("run_rule") or {}).get("signals", []):  # one stream on top (bottom)
            lines.append(
                f"  group chart run rule ({g['run_rule']['length']} in a row): stream "
                f"{r['stream']} {'highest' if r['side'] == 'high' else 'lowest'} in subgroups "
                f"{r['first']} to {r['last']} ({r['length']})"
            )
    return lines


def format_result(res) -> str:
    """A plain terminal report of one characteristic."""
    d = res.to_dict()
    lines = []
    unit = f" [{res.unit}]" if res.unit else ""
    lines.append(f"{res.characteristic}{unit}")
    lines.append("=" * len(lines[0]))
    spec = d["spec"]
    lsl, usl = spec["lsl"], spec["usl"]

    def val(v):  # a value in measured units: enough decimals for 1/100 of the tolerance
        return _value(v, lsl, usl)

    lines.append(f"specification: LSL {_fmt(lsl)}  USL {_fmt(usl)}  target {_fmt(spec['target'])}")
    for c in d["cautions"]:
        lines.append(f"CAUTION: {c}")
    lines += _chart_lines(d, val)
    lines += _phase1_lines(d)
    lines += _shape_lines(d)
    lines += _capability_lines(d)
    lines += _verdict_lines(d)
    if d.get("measurement_error"):
        lines += _measurement_error_lines(d["measurement_error"])
    if d.get("streams"):
        lines += _stream_lines(d["streams"], lsl, usl)
    lines += _time_model_lines(d.get("time_model"))
    if d["model_band"] and d["model_band"].get("warning"):
        lines.append(f"model band: {d['model_band']['warning']}")
    if d["plan"]:
        lines.append(f"planning: {d['plan']['text']}")
    for w in d["warnings"]:
        lines.append(f"warning: {w}")
    return "\n".join(lines) + "\n"


def _chart_lines(d: dict, val) -> list[str]:
    """The chart, its limits, the order check and the sigmas."""
    ch = d["chart"]
    lines = [
        f"chart: {names.chart_kind_label(ch['kind'])} ({ch['reason']}); n = {d['n']} values "
        f"in {d['subgroups']} "
        f"subgroups; missing {d['n_missing']}"
    ]
    loc = ch["location"]
    lines.append(
        f"  {names.chart_part_label(ch['kind'], 'location')}: centre {val(loc['center'])}  "
        f"LCL {val(loc['lcl'])}  UCL {val(loc['ucl'])}"
    )
    if ch["dispersion"]:
        disp = ch["dispersion"]
        lines.append(
            f"  {names.chart_part_label(ch['kind'], 'dispersion')}: centre "
            f"{val(disp['center'])}  LCL {val(disp['lcl'])}  UCL {val(disp['ucl'])}"
        )
    if ch.get("scale_text"):
        lines.append(f"  charted on the model's scale: {ch['scale_text']}")
    if ch.get("probability_limits"):
        pl = ch["probability_limits"]
        lines.append(
            f"  probability limits in measured units: LCL {val(pl['lcl'])}  centre "
            f"{val(pl['center'])}  UCL {val(pl['ucl'])}"
        )
    if d.get("order") and d["order"]["flagged"]:
        lines.append(f"order: {d['order']['status']} - run rules not applied")
    lines.append(
        f"  mean {val(d['mean'])}  within sigma {val(d['within_sigma'])}  "
        f"overall sigma {val(d['overall_sigma'])}"
    )
    return lines


def _phase1_lines(d: dict) -> list[str]:
    """Phase-I removals and the signals left on the final chart."""
    p1, ch = d["phase1"], d["chart"]
    lines = []
    if p1["removals"]:
        lines.append(
            f"phase I: {len(p1['removals'])} subgroup(s) removed ({p1['removed_auto']} value(s) "
            f"automatically, {_pct(p1['removed_share_auto'])}; {p1['removed_recorded']} by "
            "recorded decisions)"
        )
        for r in p1["removals"]:
            lines.append(
                f"  - subgroup {r['label']} ({r['who']}, round {r['iteration']}): {r['reason']}"
            )
    else:
        lines.append("phase I: no subgroup removed")
    if ch["signals"]:
        lines.append(f"signals on the final chart ({ch.get('signals_total', len(ch['signals']))}):")
        for s in ch["signals"][:12]:
            lines.append(f"  - [{names.chart_part_label(ch['kind'], s['chart'])}] {s['text']}")
    return lines


def _shape_lines(d: dict) -> list[str]:
    """The normality tests and the model chosen."""
    lines = []
    if d["normality"]:
        ad, sw = d["normality"]["anderson_darling"], d["normality"]["shapiro_wilk"]
        lines.append(
            f"normality: Anderson-Darling A2 {_fmt(ad['statistic'])} "
            f"(p {names.format_p(ad['p_value'])}); "
            f"Shapiro-Wilk W {_fmt(sw['statistic'])} (p {names.format_p(sw['p_value'])})"
        )
    if d["model"]:
        lines.append(f"model: {d['model']['label']} - {d['model']['reason']}")
    return lines


def _capability_lines(d: dict) -> list[str]:
    """The indices with their lower bounds and PPM, or the attribute rates."""
    from studykit.analysis import capability_method_text

    lines = []
    cap = d["capability"]
    if cap:
        level = cap["level"]
        lines.append(
            f"capability ({names.bound_method_label(cap['method'])}; lower bounds at {level:.0%}):"
        )
        lines.append(f"  convention: {capability_method_text(cap, d['model'])}")
        for key in ("cp", "cpk", "pp", "ppk", "cpm"):
            if cap.get(key) is None:
                continue
            lb = cap["bounds"].get(key, {}).get("lower_bound")
            lines.append(f"  {_PRETTY[key]:5s} {cap[key]:8.3f}   lower bound {_fmt(lb, 4)}")
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
    return lines


def _verdict_lines(d: dict) -> list[str]:
    """The verdict, the tolerance-interval criterion and the findings."""
    lines = []
    if d["verdict"]:
        v = d["verdict"]
        mark = names.verdict_label(d).upper()
        lines.append(f"verdict: {mark} ({names.criterion_text(v['index'], v['threshold'])})")
        lines.append(f"  {d['verdict']['text']}")
    if d.get("tolerance_interval"):  # the tolerance-interval criterion, when set
        ti = d["tolerance_interval"]
        word = {True: "holds", False: "NOT MET", None: "NOT JUDGED"}[ti["meets"]]
        lines.append(f"tolerance interval ({ti['criterion']}): {word}; {ti['statement']}")
    for f in d["findings"]:
        lines.append(f"  * {names.finding_title(f['code'])}: {f['text']}")
    return lines


def _time_model_lines(tm: dict | None) -> list[str]:
    """The ISO 22514-2 class and its indices, when classified."""
    if not tm:
        return []
    lines = [
        f"time-dependent model (ISO 22514-2, from memory): "
        f"{tm['class'] or 'not classified'} - {tm['reason']}"
    ]
    if tm["indices"]:
        lines.append(
            "  by the class's method ("
            + tm["method"]
            + "): "
            + ", ".join(f"{_PRETTY.get(k, k)} {_fmt(v, 4)}" for k, v in tm["indices"].items())
        )
    return lines
