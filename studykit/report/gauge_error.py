"""The PDF section "Gauge error and short gauge studies", and the stored short studies.

Shows, per characteristic, the stored short gauge study of one reference part (Cg, Cgk, bias
and its t-test) and the observed against the process-only indices (gauge variance removed) from
the ``measurement_error`` block of the analysis. It prints what the results hold; nothing is
computed here. :func:`recheck_short_study` recomputes a stored short study from its readings
(used by ``studykit verify``).
"""

from __future__ import annotations

from collections.abc import Mapping

from studykit import names

#: Kind under which ``studykit gauge --reference ... --study`` stores a short gauge study.
SHORT_KIND = names.GAUGE_SHORT_KIND


def stored_short_studies(study_path, study) -> dict:
    """Latest stored short gauge study per characteristic of a study file ({} without a file)."""
    if study_path is None:
        return {}
    from studykit.store import StudyFile

    out: dict = {}
    for r in StudyFile(study_path).results(SHORT_KIND):
        if r.characteristic in study.characteristics:
            out[r.characteristic] = dict(r.payload)
    return {k: out[k] for k in sorted(out)}


def recheck_short_study(payload: Mapping) -> dict:
    """The short study recomputed from the readings and options stored in ``payload``.

    Returns the fresh ``to_dict()``; raises :class:`~studykit.errors.StudyInputError` (or
    KeyError/TypeError for a payload that is not a short study) when it cannot be rebuilt.
    """
    from studykit.stats.gauge_type1 import short_gauge_study

    res = short_gauge_study(
        payload["values"],
        reference=payload["reference"],
        lsl=payload["lsl"],
        usl=payload["usl"],
        k_percent=payload["k_percent"],
        l_sigmas=payload["l_sigmas"],
        alpha=payload["t_test"]["alpha"],
        minimum=payload["minimum"],
    )
    return res.to_dict()


def has_content(short: Mapping, results: Mapping) -> bool:
    """Whether the section has anything to show."""
    return bool(short) or any(getattr(r, "measurement_error", None) for r in results.values())


def gauge_error_section(story, number, short: Mapping, results: Mapping, st, width) -> None:
    """Append the section to a reportlab ``story`` (helpers of :mod:`studykit.report.pdf`)."""
    from reportlab.platypus import CondPageBreak, Paragraph, Spacer

    from studykit import theme
    from studykit.report.pdf import escape_text, framed_box, grid_table, number_text

    story.append(Paragraph(f"{number}. Gauge error and short gauge studies", st["h1"]))
    story.append(
        Paragraph(
            "The short gauge study qualifies the gauge on one reference part measured repeatedly "
            "(Cg = K/100 T / (L s), Cgk = (K/200 T - |bias|) / (L/2 s); K, L and the limit are "
            "common practice, no source). Where a gauge R&amp;R is stored, the process-only indices "
            "use sigma_process^2 = sigma_observed^2 - sigma_gauge^2 with a modified large-sample "
            "interval (Ting et al. 1990; Burdick, Borror &amp; Montgomery 2005). The verdict stays "
            "on the observed indices.",
            st["body"],
        )
    )
    names = sorted(
        set(short) | {n for n, r in results.items() if getattr(r, "measurement_error", None)}
    )
    for name in names:
        story.append(CondPageBreak(180))
        story.append(Paragraph(escape_text(name), st["h2"]))
        p = short.get(name)
        if p:
            verdict = p.get("verdict") or {}
            ok = verdict.get("status") == "capable"
            v = theme.VERDICTS["pass" if ok else "fail"]
            story.append(
                framed_box(
                    [Paragraph(escape_text(verdict.get("message", "")), st["body"])],
                    background=v.background,
                    border=v.color,
                    width=width,
                )
            )
            story.append(Spacer(1, 3))
            t = p.get("t_test") or {}
            rows = [
                ["Short gauge study", "Value"],
                [
                    "Readings of the reference part",
                    str(p.get("n"))
                    + (
                        f" (file {escape_text(p.get('source_file'))})"
                        if p.get("source_file")
                        else ""
                    ),
                ],
                [
                    "Reference value; tolerance",
                    f"{number_text(p.get('reference'), 8)}; "
                    f"{number_text(p.get('lsl'), 8)} .. {number_text(p.get('usl'), 8)}",
                ],
                [
                    "K (% of tolerance), L (sigmas)",
                    f"{number_text(p.get('k_percent'))} %, {number_text(p.get('l_sigmas'))}",
                ],
                [
                    "Mean, standard deviation s",
                    f"{number_text(p.get('mean'), 8)}, {number_text(p.get('sd'))}",
                ],
                [
                    "Cg, Cgk (limit)",
                    f"{number_text(p.get('cg'), 3)}, {number_text(p.get('cgk'), 3)} "
                    f"({number_text(p.get('minimum'), 3)})",
                ],
                [
                    "Bias (% of tolerance)",
                    f"{number_text(p.get('bias'))} "
                    f"({number_text(p.get('bias_pct_tolerance'), 3)} %)",
                ],
                [
                    "Bias t-test: t, df, p",
                    f"{number_text(t.get('statistic'))}, {t.get('df')}, "
                    f"{number_text(t.get('p_value'), 3)}",
                ],
                [
                    f"Bias interval ({number_text(100 * (1 - (t.get('alpha') or 0.05)), 3)} %)",
                    f"{number_text(t.get('bias_lower'))} .. {number_text(t.get('bias_upper'))}",
                ],
            ]
            story.append(grid_table(rows, [0.45 * width, 0.55 * width], styles=st))
            for note in p.get("notes") or []:
                story.append(Paragraph(escape_text(note), st["small"]))
            story.append(Spacer(1, 4))
        res = results.get(name)
        me = getattr(res, "measurement_error", None) if res is not None else None
        if me:
            lvl = number_text(100 * (me.get("level") or 0.95), 3)
            story.append(
                Paragraph(
                    f"Gauge error taken out: gauge sigma {number_text(me.get('gauge_sigma'))} on "
                    f"{number_text(me.get('gauge_df'), 3)} degrees of freedom (stored gauge R&amp;R).",
                    st["body"],
                )
            )
            rows = [
                [
                    "Sigma",
                    "Observed sigma",
                    "Gauge share",
                    "Process sigma",
                    f"{lvl} % interval",
                    "Index",
                    "Observed",
                    "Process only",
                    f"{lvl} % interval",
                ]
            ]
            for basis in ("within", "overall"):
                b = me.get(basis)
                if not b:
                    continue
                keys = list((b.get("observed") or {}).keys())
                spread = b.get("spread_interval") or {}
                for k in keys:
                    iv = spread.get(k)
                    rows.append(
                        [
                            basis if k == keys[0] else "",
                            number_text(b.get("observed_sigma")) if k == keys[0] else "",
                            (number_text(100 * b["gauge_share"], 3) + " %")
                            if k == keys[0] and b.get("gauge_share") is not None
                            else "",
                            number_text(b.get("process_sigma")) if k == keys[0] else "",
                            (
                                f"{number_text(b.get('sigma_lower'))} .. {number_text(b.get('sigma_upper'))}"
                                if k == keys[0]
                                else ""
                            ),
                            k[0].upper() + k[1:],
                            number_text(b["observed"].get(k), 3),
                            number_text((b.get("process") or {}).get(k), 3),
                            "" if not iv else f"{number_text(iv[0], 3)} .. {number_text(iv[1], 3)}",
                        ]
                    )
            story.append(
                grid_table(
                    rows,
                    [w * width for w in (0.09, 0.11, 0.09, 0.1, 0.16, 0.07, 0.11, 0.1, 0.17)],
                    styles=st,
                )
            )
            warn = list(me.get("warnings") or [])
            if me.get("model_note"):
                warn.append(me["model_note"])
            warn += list(getattr(res, "cautions", ()) or ())  # the safety caution, if any
            if warn:
                v = theme.VERDICTS["caution"]
                story.append(Spacer(1, 3))
                story.append(
                    framed_box(
                        [Paragraph(escape_text(w), st["body"]) for w in warn],
                        background=v.background,
                        border=v.color,
                        width=width,
                    )
                )
        story.append(Spacer(1, 6))
