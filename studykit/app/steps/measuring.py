"""Workbook step "Gauge check": the gauge R&R study behind each characteristic.

For the characteristic chosen in the toolbar, the step shows the latest gauge R&R result stored
with the study (kind ``gauge_rr``; :meth:`studykit.store.StudyFile.results`): the verdict in
plain words with its chip, %GRR of the study variation and of the tolerance, the number of
distinct categories, the variance components with their confidence intervals, the ANOVA table
(saying whether the appraiser-by-part interaction was pooled), the average-and-range second
estimate and the six figures of the PDF report (rendered to PNG from
:mod:`studykit.report.gauge_figures`, so the palette is the same).

Below, a new gauge study can be run from an uploaded long table (one row per reading: part,
appraiser, trial, value). The columns are picked with defaults guessed from the headers, the
tolerance defaults to the characteristic's LSL/USL, the result is previewed, and only then is it
attached to the characteristic with the name of the person and a reason
(:meth:`~studykit.store.StudyFile.attach_result`). No statistics are computed here: the numbers
come from :func:`studykit.stats.gauge.gauge_rr`.

The acceptance bands (%GRR below 10 % acceptable, 10-30 % conditionally, above 30 % not; ndc at
least 5) are common practice; the customer's rule governs.

Above the crossed study, the panel "Short gauge study (one reference part)" shows the latest
stored short study (kind ``gauge_short``: Cg, Cgk, bias and its t-test, from
:func:`studykit.stats.gauge_type1.short_gauge_study`) and lets one be run from an uploaded list
of readings and attached; below the crossed study's verdict, the panel "Gauge error taken out"
shows the observed against the process-only indices of the characteristic's analysis result
(its ``measurement_error`` block; nothing is computed here).
"""

from __future__ import annotations

import contextlib
import io
import re
import tempfile
from collections.abc import Callable, Iterator, Mapping
from pathlib import Path

import ipywidgets as widgets

from studykit import names, theme
from studykit.app.overview import fmt, panel, panel_css
from studykit.app.steps.base import StudyStep
from studykit.app.widgets import (
    button,
    esc,
    guarded,
    html_box,
    labelled,
    text_field,
    upload_button,
)
from studykit.errors import DataFileError, StudyInputError
from studykit.report import gauge_figures as _gauge_figures

__all__ = [
    "GaugeStep",
    "GAUGE_KIND",
    "STATUS_KIND",
    "FIGURE_TITLES",
    "gauge_result_from_payload",
    "figure_pngs",
    "guess_columns",
    "read_gauge_upload",
    "verdict_html",
    "components_html",
    "anova_html",
    "range_method_html",
    "SHORT_KIND",
    "short_study_html",
    "measurement_error_html",
    "read_reference_upload",
]

GAUGE_KIND = names.GAUGE_RR_KIND
#: Kind of a stored short gauge study (one reference part measured repeatedly).
SHORT_KIND = names.GAUGE_SHORT_KIND

#: Gauge verdict status -> theme verdict key (colour, symbol) and the word on the chip.
STATUS_KIND = {
    "acceptable": ("pass", "Acceptable"),
    "conditionally acceptable": ("caution", "Conditionally acceptable"),
    "not acceptable": ("fail", "Not acceptable"),
}

#: The figures shown (keys of :func:`studykit.report.gauge_figures.story`), with their titles.
FIGURE_TITLES = {
    key: _gauge_figures.LABELS[key] for key in ("sources", "readings", "repeatability")
}

#: Words of the verdict box's key numbers (the gauge tables' words, for one vocabulary).
_GAUGE_FACTS = {
    "share_study": f"{names.GAUGE_TOTAL}, share of study spread",
    "share_tolerance": f"{names.GAUGE_TOTAL}, share of tolerance",
}
_BANDS_NOTE = (
    f"Bands: {names.GAUGE_TOTAL} below 10 % of the study spread acceptable, 10 to 30 % "
    "conditionally acceptable, above 30 % not acceptable; at least 5 distinct "
    "categories. These are common practice: "
    "the customer's rule governs."
)

#: Header words that suggest each role (lower case, whole words of the header).
_ROLE_WORDS = {
    "part": ("part", "parts", "sample", "item", "specimen", "piece", "serial"),
    "appraiser": ("appraiser", "operator", "inspector", "person", "measurer", "who"),
    "trial": ("trial", "repeat", "replicate", "repetition", "run", "reading"),
    "value": ("value", "measurement", "measured", "result", "y", "reading", "mm"),
}
_NO_TRIAL = "(none: order in the file)"
_UPLOAD_SUFFIXES = (".csv", ".txt", ".tsv", ".xlsx", ".xlsm")


# --- pure helpers (no widgets) -------------------------------------------------------------------


#: Rebuild the stored :class:`~studykit.stats.gauge.GaugeResult` from its payload with
#: :meth:`~studykit.stats.gauge.GaugeResult.from_dict` (nothing computed again); the PDF's
#: figures use the same function.
gauge_result_from_payload = _gauge_figures.result_from_payload


def figure_pngs(result, *, dpi: int = 100, only: tuple[str, ...] | None = None) -> dict:
    """The gauge figures of ``result`` as PNG bytes, in the order of the story.

    Drawn by :mod:`studykit.report.gauge_figures` (the PDF's figures, same palette and order:
    :func:`~studykit.report.gauge_figures.story`).

    Examples
    --------
    >>> from studykit.stats.gauge import gauge_rr
    >>> res = gauge_rr([1.0, 1.1, 1.2, 1.1, 2.0, 2.2, 2.1, 2.1], [1, 1, 1, 1, 2, 2, 2, 2],
    ...                ["A", "A", "B", "B"] * 2)
    >>> figure_pngs(res, only=("sources",))["sources"][:4]
    b'\\x89PNG'
    """
    out = {}
    for key, _title, _caption in _gauge_figures.story(result):
        if only is not None and key not in only:
            continue
        fig = getattr(_gauge_figures, f"{key}_figure")(result)
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=dpi, facecolor="white")
        out[key] = buf.getvalue()
    return out


def _words(header: str) -> list[str]:
    return [w for w in re.split(r"[^a-z0-9]+", header.lower()) if w]


def guess_columns(headers) -> dict:
    """Default column for each role (part, appraiser, trial, value) from the header names.

    A header is taken for a role when one of its words names the role (``Part no``,
    ``Operator``, ``Trial``, ``Value (mm)``); each column serves one role. What is left is
    filled in file order (the usual layout part, appraiser, trial, value); ``trial`` stays
    None when no column is left for it.

    Examples
    --------
    >>> guess_columns(["Operator", "Part no", "Reading", "Thickness (mm)"])
    {'part': 'Part no', 'appraiser': 'Operator', 'trial': 'Reading', 'value': 'Thickness (mm)'}
    >>> guess_columns(["a", "b", "c"])
    {'part': 'a', 'appraiser': 'b', 'trial': None, 'value': 'c'}
    """
    headers = [str(h) for h in headers]
    chosen: dict[str, str | None] = {"part": None, "appraiser": None, "trial": None, "value": None}
    used: set[str] = set()
    # the most specific roles first: "reading" names a trial before a value
    for role in ("part", "appraiser", "trial", "value"):
        for h in headers:
            if h not in used and set(_words(h)) & set(_ROLE_WORDS[role]):
                chosen[role] = h
                used.add(h)
                break
    rest = [h for h in headers if h not in used]
    if chosen["value"] is None and rest:
        chosen["value"] = rest.pop()  # the value is usually the last column
        used.add(chosen["value"])
    for role in ("part", "appraiser"):
        if chosen[role] is None and rest:
            chosen[role] = rest.pop(0)
    if chosen["trial"] is None and len(rest) == 1 and len(headers) >= 4:
        chosen["trial"] = rest.pop(0)
    return chosen


def read_gauge_upload(
    data: bytes,
    filename: str,
    *,
    part: str | None = None,
    appraiser: str | None = None,
    value: str | None = None,
    trial: str | None = None,
) -> dict:
    """Read an uploaded long gauge table (bytes) with :func:`studykit.io.gauge_table.read_gauge_table`.

    Without ``part``/``appraiser``/``value`` only the headers are read:
    ``{"headers": [...]}``. With them: ``{"headers", "values", "parts", "appraisers",
    "trials"}``. Errors are :class:`DataFileError` naming the uploaded file (never a server
    path), the row and the column.

    Examples
    --------
    >>> data = b"part,appraiser,trial,value\\n1,A,1,8.01\\n1,A,2,8.02\\n"
    >>> read_gauge_upload(data, "g.csv")
    {'headers': ['part', 'appraiser', 'trial', 'value']}
    >>> read_gauge_upload(data, "g.csv", part="part", appraiser="appraiser", value="value")["values"]
    [8.01, 8.02]
    """
    upload_as = (
        "the gauge table as CSV (comma, semicolon or tab separated) or as an Excel file (.xlsx)"
    )
    with _upload_on_disk(data, filename, prefix="studykit-gauge-", upload_as=upload_as) as path:
        headers = _headers(path)
        if part is None or appraiser is None or value is None:
            return {"headers": headers}
        from studykit.io.gauge_table import read_gauge_table

        table = read_gauge_table(
            path, part=part, appraiser=appraiser, value=value, trial=trial or None
        )
    return {"headers": headers, **table}


def _in_upload(exc: StudyInputError, file: str, **where) -> StudyInputError:
    """``exc`` again, naming the uploaded ``file`` (never a server path); ``where`` replaces
    its row, column or value."""
    place = {"row": exc.row, "column": exc.column, "value": exc.value, **where}
    return type(exc)(exc.detail, file=file, **place)


@contextlib.contextmanager
def _upload_on_disk(data: bytes, filename: str, *, prefix: str, upload_as: str) -> Iterator[Path]:
    """The uploaded bytes in a temporary file of their suffix, for the table readers.

    A suffix that cannot be read, an empty file and every input error raised while the file is
    read name the uploaded file (``upload_as`` says what to upload instead)."""
    name = Path(str(filename or "upload.csv")).name or "upload.csv"
    suffix = Path(name).suffix.lower()
    if suffix not in _UPLOAD_SUFFIXES:
        raise DataFileError(
            f"'{suffix or name}' files cannot be read here; upload {upload_as}", file=name
        )
    if not data:
        raise DataFileError("the file is empty; choose the file that holds the readings", file=name)
    with tempfile.TemporaryDirectory(prefix=prefix) as tmp:
        path = Path(tmp) / ("upload" + suffix)
        path.write_bytes(bytes(data))
        try:
            yield path
        except StudyInputError as exc:
            raise _in_upload(exc, name) from None


def _headers(path: Path) -> list[str]:
    import pandas as pd

    try:
        if path.suffix.lower() in (".xlsx", ".xlsm"):
            frame = pd.read_excel(path, nrows=0)
        else:
            frame = pd.read_csv(
                path, sep=None, engine="python", nrows=5, dtype=str, encoding="utf-8-sig"
            )
    except (ValueError, OSError, UnicodeDecodeError, ImportError) as exc:
        raise DataFileError(f"cannot read the table: {exc}") from None
    headers = [str(c).strip() for c in frame.columns]
    if len(headers) < 3:
        raise DataFileError(
            f"the table has {len(headers)} column{'s' if len(headers) != 1 else ''} "
            f"({', '.join(repr(h) for h in headers)}); a gauge table needs one row per reading "
            "with at least part, appraiser and value columns (and best a trial column)"
        )
    return headers


def _chip(status: str | None) -> str:
    kind, word = STATUS_KIND.get(status or "", ("pending", names.VERDICT_STATES["no_verdict"]))
    v = theme.VERDICTS[kind]
    return (
        f'<span class="sk-chip" style="color:{v.text_color};background:{v.background};'
        f'border-color:{v.color}">{v.symbol} {esc(word)}</span>'
    )


def _p_clause(p) -> str:
    """``"= 0.046"`` or ``"< 0.001"`` (names.format_p: never "0.000")."""
    text = names.format_p(p)
    return text if text.startswith("<") else "= " + text


def _num(v) -> str:
    """A limit as written (7.9, not 7.9000)."""
    try:
        return f"{float(v):.6g}"
    except (TypeError, ValueError):
        return "—"


def _pct(v) -> str:
    return "—" if v is None else f"{fmt(v, 1)} %"


def verdict_html(
    payload: Mapping,
    *,
    who: str | None = None,
    when: str | None = None,
    title: str = "Measurement system",
) -> str:
    """The verdict box of a gauge payload: chip, plain words, key numbers, where it came from.

    Examples
    --------
    >>> html = verdict_html({"verdict": {"status": "not acceptable", "message": "Too noisy."},
    ...                      "ndc": 2})
    >>> "Not acceptable" in html and "Too noisy." in html
    True
    """
    v = payload.get("verdict") if isinstance(payload.get("verdict"), Mapping) else {}
    status = v.get("status")
    kind = STATUS_KIND.get(status or "", ("pending", ""))[0]
    colour = theme.VERDICTS[kind].color
    ndc = payload.get("ndc")
    ndc_text = "—" if ndc is None else str(ndc)
    if v.get("ndc_ok") is False:
        ndc_text += " (below 5)"
    facts = [
        (_GAUGE_FACTS["share_study"], _pct(v.get("pct_grr_study_variation"))),
        (
            _GAUGE_FACTS["share_tolerance"],
            _pct(v.get("pct_grr_tolerance"))
            if payload.get("tolerance") is not None
            else "no tolerance given",
        ),
        ("Distinct categories (ndc)", ndc_text),
        (
            "Design",
            f"{payload.get('n_parts', '?')} parts × "
            f"{payload.get('n_appraisers', '?')} appraisers × "
            f"{payload.get('n_trials', '?')} trials",
        ),
    ]
    if payload.get("tolerance") is not None:
        facts.append(
            (
                "Tolerance",
                f"{_num(payload.get('lsl'))} to {_num(payload.get('usl'))}"
                f" (width {_num(payload.get('tolerance'))})",
            )
        )
    source = payload.get("source_file") or payload.get("source")
    if source:
        facts.append(("Data file", str(source)))
    if who or when:
        stamp = (when or "").replace("T", " ").rstrip("Z")
        facts.append(("Attached by", f"{who or '—'}" + (f", {stamp} UTC" if stamp else "")))
    if payload.get("reason"):
        facts.append(("Reason", str(payload["reason"])))
    advice = v.get("advice") or ""
    return (
        f'<div class="sk-verdict-box sk-gauge-verdict" style="border-color:{colour}">'
        f'<div style="display:flex;gap:10px;align-items:center;flex-wrap:wrap">'
        f'<span style="font-weight:600">{esc(title)}</span>{_chip(status)}</div>'
        f'<div style="margin-top:6px">{esc(v.get("message") or "No verdict stored.")}</div>'
        + (f'<div style="margin-top:6px">{esc(advice)}</div>' if advice else "")
        + '<table class="sk-kvtable" style="margin-top:8px;font-size:14px">'
        + "".join(f"<tr><td>{esc(k)}</td><td>{esc(val)}</td></tr>" for k, val in facts)
        + "</table></div>"
    )


def components_html(payload: Mapping) -> str:
    """The variance components in words, with the confidence interval on each spread.

    Headers and names come from :mod:`studykit.report.gauge_tables` (the PDF uses the same).
    """
    from studykit.report import gauge_tables as gt

    conf = float(payload.get("confidence") or 0.95) * 100
    tolerance = payload.get("tolerance") is not None
    rows = []
    for c in payload.get("components") or []:
        name = str(c.get("name", ""))
        lo, hi = c.get("sigma_lower"), c.get("sigma_upper")
        ci = "—" if lo is None or hi is None else f"{fmt(lo, 5)} to {fmt(hi, 5)}"
        if c.get("set_to_zero"):
            ci = "estimate negative, set to 0"
        strong = ' style="font-weight:600"' if name in ("gauge_rr", "total") else ""
        cells = [
            fmt(c.get("variance"), 7),
            _pct(c.get("pct_contribution")),
            fmt(c.get("sigma"), 5),
            ci,
            fmt(c.get("study_variation"), 5),
            _pct(c.get("pct_study_variation")),
        ]
        if tolerance:
            cells.append(_pct(c.get("pct_tolerance")))
        rows.append(
            f"<tr{strong}><td>{esc(gt.component_name(name))}</td>"
            + "".join(f'<td class="num">{esc(v)}</td>' for v in cells)
            + "</tr>"
        )
    heads = gt.component_headers(payload.get("study_variation"), tolerance=tolerance)
    heads.insert(4, gt.LABELS["spread_interval"].format(conf=conf))
    return (
        f'<div class="sk-panel-title">{esc(gt.LABELS["components_title"])}</div>'
        '<div class="sk-scroll"><table class="sk-table sk-gauge-components"><thead><tr>'
        + "".join(f"<th>{esc(h)}</th>" for h in heads)
        + f"</tr></thead><tbody>{''.join(rows)}</tbody></table></div>"
        '<div class="sk-small">Spread is the standard deviation σ of each source; the study '
        f"spread is {fmt(payload.get('study_variation'), 2)} σ. Shares of spread do not add "
        "up to 100 % (spreads add as squares; shares of variance do). Intervals bound the "
        "spread of each source (chi-square or Satterthwaite degrees of freedom)."
        + ("" if tolerance else " No tolerance given: no share of tolerance.")
        + "</div>"
    )


def _anova_rows(rows) -> str:
    from studykit.report import gauge_tables as gt

    out = []
    for r in rows or []:
        p = r.get("p")
        p_text = "—" if p is None else names.format_p(p)
        out.append(
            f"<tr><td>{esc(gt.source_name(str(r.get('source', ''))))}</td>"
            f'<td class="num">{esc(r.get("df"))}</td>'
            f'<td class="num">{fmt(r.get("ss"), 6)}</td>'
            f'<td class="num">{fmt(r.get("ms"), 7)}</td>'
            f'<td class="num">{fmt(r.get("f"), 2)}</td><td class="num">{p_text}</td></tr>'
        )
    return "".join(out)


def anova_html(payload: Mapping) -> str:
    """The ANOVA the components come from first; the full model behind a toggle."""
    from studykit.report import gauge_tables as gt

    note = gt.anova_note(payload, fmt)
    head = (
        "<thead><tr>" + "".join(f"<th>{esc(h)}</th>" for h in gt.anova_headers()) + "</tr></thead>"
    )
    out = (
        f'<div class="sk-panel-title">{esc(gt.LABELS["anova_used_title"])}</div>'
        f'<div class="sk-small" style="margin-bottom:4px">{esc(note)}</div>'
        f'<div class="sk-scroll"><table class="sk-table sk-gauge-anova">{head}<tbody>'
        f"{_anova_rows(payload.get('anova_used'))}</tbody></table></div>"
    )
    if gt.show_full_anova(payload):
        out += (
            '<details class="sk-gauge-anova-full"><summary>'
            f"{esc(gt.LABELS['anova_full_toggle'])}</summary>"
            f'<div class="sk-small">{esc(gt.LABELS["anova_full_title"])}</div>'
            f'<div class="sk-scroll"><table class="sk-table">{head}<tbody>'
            f"{_anova_rows(payload.get('anova_full'))}</tbody></table></div></details>"
        )
    return out


def range_method_html(payload: Mapping) -> str:
    """The average-and-range estimate, a second opinion beside the ANOVA."""
    r = payload.get("range_method") or {}
    if not r:
        return ""
    sigmas = [
        ("Repeatability (EV)", r.get("repeatability")),
        ("Reproducibility (AV)", r.get("reproducibility")),
        (names.GAUGE_TOTAL, r.get("gauge_rr")),
        ("Part to part (PV)", r.get("part")),
        ("Total (TV)", r.get("total")),
    ]
    cells = "".join(
        f'<tr><td>{esc(k)}</td><td class="num">{fmt(v, 5)}</td></tr>' for k, v in sigmas
    )
    anova_pct = (payload.get("verdict") or {}).get("pct_grr_study_variation")
    zero = (
        " Reproducibility came out negative and was set to zero."
        if r.get("reproducibility_set_to_zero")
        else ""
    )
    return (
        '<div class="sk-panel-title">Average-and-range estimate (second opinion)</div>'
        '<table class="sk-table sk-gauge-range" style="min-width:0"><thead><tr>'
        f"<th>Spread (σ)</th><th>Estimate</th></tr></thead><tbody>{cells}</tbody></table>"
        f'<div class="sk-small">{esc(names.GAUGE_TOTAL)} share of study spread '
        f"{_pct(r.get('pct_study_variation'))}"
        f" (ANOVA: {_pct(anova_pct)}), of tolerance {_pct(r.get('pct_tolerance'))}, "
        f"ndc {esc(r.get('ndc'))}. K1 = {fmt(r.get('k1'), 4)}, K2 = {fmt(r.get('k2'), 4)}, "
        f"K3 = {fmt(r.get('k3'), 4)}.{zero} The ANOVA figures above decide; this estimate "
        "ignores the interaction.</div>"
    )


# --- short gauge study and gauge error (pure helpers) ----------------------------------------------

_SHORT_CHIP = {"capable": ("pass", "Capable"), "not capable": ("fail", "Not capable")}


def short_study_html(
    payload: Mapping,
    *,
    who: str | None = None,
    when: str | None = None,
    title: str = "Short gauge study (one reference part)",
) -> str:
    """The box of a stored (or previewed) short gauge study: chip, verdict, Cg, Cgk, bias, t-test.

    Examples
    --------
    >>> from studykit.stats.gauge_type1 import short_gauge_study
    >>> p = short_gauge_study([5.001, 5.003, 5.002, 5.002, 5.004, 5.000, 5.002, 5.001, 5.003,
    ...                        5.002], reference=5.0, tolerance=0.1).to_dict()
    >>> html = short_study_html(p)
    >>> "Capable" in html and "2.887" in html
    True
    """
    v = payload.get("verdict") if isinstance(payload.get("verdict"), Mapping) else {}
    kind, word = _SHORT_CHIP.get(
        v.get("status") or "", ("pending", names.VERDICT_STATES["no_verdict"])
    )
    verdict = theme.VERDICTS[kind]
    chip = (
        f'<span class="sk-chip" style="color:{verdict.text_color};background:'
        f'{verdict.background};border-color:{verdict.color}">{verdict.symbol} '
        f"{esc(word)}</span>"
    )
    t = payload.get("t_test") or {}
    p_val = t.get("p_value")
    digits = names.value_digits(payload.get("lsl"), payload.get("usl"))
    facts = [
        (
            "Cg, Cgk",
            f"{fmt(payload.get('cg'), 3)}, {fmt(payload.get('cgk'), 3)} (at least "
            f"{_num(payload.get('minimum'))})",
        ),
        (
            "K, L",
            f"{_num(payload.get('k_percent'))} % of the tolerance, "
            f"{_num(payload.get('l_sigmas'))} sigma",
        ),
        (
            "Readings",
            f"{payload.get('n', '?')} of a part with reference {_num(payload.get('reference'))}",
        ),
        (
            "Mean, s",
            f"{names.format_value(payload.get('mean'), digits=digits)}, "
            f"{names.format_spread(payload.get('sd'), digits=digits)}",
        ),
        (
            "Bias",
            f"{names.format_spread(payload.get('bias'), digits=digits)} "
            f"({fmt(payload.get('bias_pct_tolerance'), 2)} % "
            "of the tolerance)",
        ),
        (
            "Bias t-test",
            f"t = {fmt(t.get('statistic'), 3)}, df = {t.get('df', '—')}, p "
            + ("= —" if p_val is None else _p_clause(p_val)),
        ),
        ("Tolerance", f"{_num(payload.get('lsl'))} to {_num(payload.get('usl'))}"),
    ]
    if payload.get("source_file"):
        facts.append(("Data file", str(payload["source_file"])))
    if who or when:
        stamp = (when or "").replace("T", " ").rstrip("Z")
        facts.append(("Attached by", f"{who or '—'}" + (f", {stamp} UTC" if stamp else "")))
    if payload.get("reason"):
        facts.append(("Reason", str(payload["reason"])))
    notes = "".join(f'<div class="sk-small">{esc(n)}</div>' for n in payload.get("notes") or [])
    return (
        f'<div class="sk-verdict-box sk-gauge-short-verdict" style="border-color:'
        f'{verdict.color}"><div style="display:flex;gap:10px;align-items:center;'
        f'flex-wrap:wrap"><span style="font-weight:600">{esc(title)}</span>{chip}</div>'
        f'<div style="margin-top:6px">{esc(v.get("message") or "No verdict stored.")}</div>'
        '<table class="sk-kvtable" style="margin-top:8px;font-size:14px">'
        + "".join(f"<tr><td>{esc(k)}</td><td>{esc(val)}</td></tr>" for k, val in facts)
        + f"</table>{notes}</div>"
    )


def measurement_error_html(me: Mapping | None) -> str:
    """Observed against process-only indices from a result's ``measurement_error`` block.

    Examples
    --------
    >>> from studykit.stats.measurement_error import remove_gauge_variance
    >>> me = remove_gauge_variance(gauge_sigma=0.3, gauge_df=40.0, mean=10.0, lsl=7.0,
    ...                            usl=13.0, overall_sigma=0.5, n=100).to_dict()
    >>> html = measurement_error_html(me)
    >>> "Process only" in html and "2.500" in html
    True
    """
    if not me:
        return ""
    lvl = f"{100 * float(me.get('level') or 0.95):g} %"
    rows = []
    for basis in ("within", "overall"):
        b = me.get(basis)
        if not b:
            continue
        spread = b.get("spread_interval") or {}
        for k, obs in (b.get("observed") or {}).items():
            iv = spread.get(k)
            rows.append(
                f"<tr><td>{esc(k[0].upper() + k[1:])}</td>"
                f'<td class="num">{fmt(obs, 3)}</td>'
                f'<td class="num">{fmt((b.get("process") or {}).get(k), 3)}</td>'
                f'<td class="num">{"—" if not iv else f"{fmt(iv[0], 3)} to {fmt(iv[1], 3)}"}</td>'
                f'<td class="num">{fmt(b.get("observed_sigma"), 5)}</td>'
                f'<td class="num">{fmt(b.get("process_sigma"), 5)}</td>'
                f'<td class="num">{fmt(100 * (b.get("gauge_share") or 0), 1)} %</td></tr>'
            )
    warn = list(me.get("warnings") or [])
    if me.get("model_note"):
        warn.append(me["model_note"])
    warn_html = "".join(
        f'<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">Caution</span>{esc(w)}</div>'
        for w in warn
    )
    return (
        '<div class="sk-panel-title" style="margin-top:14px">Gauge error taken out</div>'
        '<div class="sk-small" style="margin-bottom:4px">sigma_process² = '
        "sigma_observed² − sigma_gauge², with the gauge sigma "
        f"{fmt(me.get('gauge_sigma'), 5)} of the stored gauge R&amp;R "
        f"({fmt(me.get('gauge_df'), 1)} degrees of freedom). The interval is a modified "
        "large-sample interval (Ting et al. 1990; Burdick, Borror &amp; Montgomery 2005). "
        "The verdict stays on the observed indices.</div>"
        '<table class="sk-table sk-gauge-error"><thead><tr><th>Index</th><th>Observed</th>'
        f"<th>Process only</th><th>Process only, {esc(lvl)} interval</th>"
        "<th>Observed sigma</th><th>Process sigma</th><th>Gauge share of variance</th>"
        f"</tr></thead><tbody>{''.join(rows)}</tbody></table>{warn_html}"
    )


def read_reference_upload(data: bytes, filename: str, *, value: str | None = None) -> dict:
    """Read uploaded readings of one reference part (one reading per row).

    Without ``value`` only the headers: ``{"headers": [...]}``; with it also ``"values"``.
    Errors name the uploaded file (never a server path), the row and the column.

    Examples
    --------
    >>> read_reference_upload(b"reading\\n5.001\\n5.002\\n", "r.csv", value="reading")
    {'headers': ['reading'], 'values': [5.001, 5.002]}
    """
    from studykit.io.gauge_table import read_frame, read_reference_readings

    upload_as = "the readings as CSV or as an Excel file (.xlsx)"
    with _upload_on_disk(data, filename, prefix="studykit-short-", upload_as=upload_as) as path:
        frame, _ = read_frame(path, sheet=None, wanted={})
        headers = [str(c) for c in frame.columns]
        if value is None:
            return {"headers": headers}
        values = read_reference_readings(path, value=value)
    return {"headers": headers, "values": values}


# --- a study computed from an upload, previewed, then attached -------------------------------------


def _limit_text(value) -> str:
    """A specification limit as the text of a field ("" when there is none)."""
    return "" if value is None else f"{value:g}"


class _UploadFlow:
    """Upload a file, compute a study from it, preview it, attach it with a name and a reason.

    One flow for both gauge studies of the step (the crossed study and the short one): the
    widgets (classes ``<css>-upload``, ``-file``, ``-preview``, ``-reason``, ``-attach``), the
    chosen file (``data``, ``name``), the computed result waiting for the reason (``pending``:
    result, payload extras, characteristic) and the checks before it is stored. The step adds
    the fields of its study (``fields``: shown once a file is read, with the ``compute``
    button).
    """

    def __init__(
        self,
        ws,
        messages,
        *,
        css: str,
        what: str,
        example: str,
        choose: str,
        placeholder: str,
        compute: tuple[str, Callable],
        on_upload: Callable,
        on_attach: Callable,
        extra: tuple = (),
    ):
        self.ws, self.what, self.example, self.extra = ws, what, example, extra
        self.data: bytes | None = None
        self.name = ""
        self.pending = None
        self.upload = upload_button(
            accept=",".join(_UPLOAD_SUFFIXES),
            multiple=False,
            description=choose,
            icon="upload",
            layout=widgets.Layout(width="auto"),
        )
        self.upload.add_class(f"{css}-upload")
        self.upload.observe(guarded(on_upload, messages=messages), names="value")
        self.info = html_box("", "sk-small", f"{css}-file")
        self.fields: widgets.Widget = widgets.VBox([])
        self.compute = button(
            compute[0],
            f"{css}-compute",
            icon="calculator",
            primary=True,
            disabled=True,
            on_click=compute[1],
            messages=messages,
        )
        self.preview = html_box("", f"{css}-preview")
        self.reason = text_field(f"{css}-reason", placeholder=placeholder, width="460px")
        self.attach = button(
            "Attach to the characteristic",
            f"{css}-attach",
            icon="paperclip",
            primary=True,
            disabled=True,
            on_click=on_attach,
            messages=messages,
        )
        self.hint = html_box("", "sk-small")
        for w in (self.reason, ws.who):
            w.observe(guarded(lambda _c: self.update(), messages=messages), names="value")
        self.box = widgets.VBox(
            [
                self.preview,
                *extra,
                labelled("Reason for attaching", self.reason),
                self.attach,
                self.hint,
            ],
            layout=widgets.Layout(display="none"),
        )

    def keep(self, name: str, data: bytes, info: str) -> None:
        """The file read: its fields shown with ``info`` (HTML) beside the upload button."""
        self.data, self.name = data, name
        self.fields.layout.display = ""
        self.compute.disabled = False
        self.info.value = info

    def forget_file(self) -> None:
        self.data, self.name = None, ""
        self.fields.layout.display = "none"
        self.info.value = ""

    def take(self, change, *, limit: int) -> tuple[str, bytes] | None:
        """Name and bytes of the file just chosen (None when the widget was emptied).

        The widget lets go of the bytes, the previous file and preview are forgotten, then the
        size is checked: a file above the limit leaves nothing behind.
        """
        from studykit.app.steps.intake import check_upload_size

        files = change["new"]
        if not files:
            return None
        item = files[0]
        name = Path(str(item.get("name", "upload.csv"))).name
        content = item.get("content", b"")
        size = int(item.get("size") or len(content))
        self.upload.value = ()  # release the bytes held by the widget
        self.forget_file()
        self.clear()
        check_upload_size(max(size, len(content)), filename=name, limit=limit)
        return name, bytes(content)

    def clear(self) -> None:
        """Forget the computed result: preview (and its ``extra`` boxes) emptied and hidden."""
        self.pending = None
        self.preview.value = ""
        for w in self.extra:
            w.children = []
        self.box.layout.display = "none"
        self.update()

    def show(self, pending: tuple, html: str) -> None:
        """Preview the computed ``pending`` (result, extras, characteristic) before attaching."""
        self.pending = pending
        self.preview.value = '<div class="sk-panel-title">Preview (not stored yet)</div>' + html
        self.attach.description = f"Attach to {pending[2]}"
        self.box.layout.display = ""
        self.update()

    def update(self) -> None:
        """The attach button is live once the study is computed, a reason and a name given."""
        missing = []
        if self.pending is None:
            missing.append("compute the study")
        if not self.reason.value.strip():
            missing.append("give a reason")
        if not self.ws.who_name:
            missing.append("type your name at the top")
        self.attach.disabled = bool(missing)
        self.hint.value = ("To attach: " + ", ".join(missing) + ".") if missing else ""

    def store(self, kind: str):
        """Attach the previewed result to its characteristic as ``kind``; (result, name)."""
        ws = self.ws
        s = ws.session
        if self.pending is None:
            raise StudyInputError(f"compute the {self.what} first, then attach it")
        result, extras, name = self.pending
        if name != s.current:
            raise StudyInputError(
                f"the preview was computed for '{name}', but '{s.current}' is shown now; "
                "compute it again for this characteristic"
            )
        who = ws.who_name
        reason = self.reason.value.strip()
        if not who:
            raise StudyInputError(
                "`who` is empty: type your name in the 'Your name' field at the top of the panel"
            )
        if not reason:
            raise StudyInputError(
                f"`reason` is empty: say why this {self.what} belongs to the characteristic, "
                f"e.g. '{self.example}'"
            )
        payload = {**result.to_dict(), **extras, "reason": reason}
        s.attach_result(
            kind, name, payload, who=who, reason=reason, override_reason=ws.override_reason or None
        )
        self.reason.value = ""
        self.clear()
        self.forget_file()
        return result, name


# --- the step ------------------------------------------------------------------------------------


class GaugeStep(StudyStep):
    """Step "Gauge check" (key ``measuring``)."""

    key = "measuring"
    title = names.STEP_NAMES[key]
    guidance = (
        "Show that the measuring system can tell parts apart before judging the "
        "process: review the stored gauge R&R study, or run and attach a new one."
    )

    what = "The gauge check"

    def __init__(self):
        self._figures: dict[tuple, dict] = {}

    # --- status -------------------------------------------------------------------------------
    def stored(self, name: str | None = None):
        """Stored gauge results of ``name`` (default: the characteristic shown), oldest first."""
        if self.ws is None:
            return []
        s = self.ws.session
        return s.file.results(GAUGE_KIND, name or s.current)

    def is_done(self, context) -> bool:
        """Every characteristic has a stored gauge study that is at least conditionally
        acceptable."""
        ws = self.opened(context)
        if ws is None:
            return False
        latest = {}
        for r in ws.session.file.results(GAUGE_KIND):
            latest[r.characteristic] = r.payload
        for n in ws.session.names:
            status = ((latest.get(n) or {}).get("verdict") or {}).get("status")
            if status not in ("acceptable", "conditionally acceptable"):
                return False
        return bool(ws.session.names)

    # --- building -----------------------------------------------------------------------------
    def _build(self, ws, context) -> widgets.Widget:
        self.heading = html_box("", "sk-gauge-heading")
        self.verdict = html_box("", "sk-gauge-stored")
        self.components = html_box("", "sk-gauge-components-box")
        self.anova = html_box("", "sk-gauge-anova-box")
        self.range_method = html_box("", "sk-gauge-range-box")
        self.notes = html_box("", "sk-gauge-notes")
        # one column, in the order of the story (not a fixed grid): each figure with its caption
        self.figures = widgets.VBox([], layout=widgets.Layout(width="100%", max_width="860px"))
        self.figures.add_class("sk-gauge-figures")
        tables = widgets.HBox(
            [
                widgets.VBox(
                    [self.components, self.anova],
                    layout=widgets.Layout(flex="2 1 560px", min_width="0"),
                ),
                widgets.VBox(
                    [self.range_method], layout=widgets.Layout(flex="1 1 300px", min_width="0")
                ),
            ],
            layout=widgets.Layout(flex_flow="row wrap", width="100%", align_items="flex-start"),
        )
        self.details = widgets.VBox([self.figures, tables, self.notes])
        self.new_study = self._build_new_study(context)
        self.short_box = html_box("", "sk-gauge-short")
        self.error_box = html_box("", "sk-gauge-error-box")
        self.new_short = self._build_new_short(context)
        self.refresh(context)
        return panel(
            [
                panel_css(),
                ws.toolbar(),
                self.heading,
                self.short_box,
                self.verdict,
                self.error_box,
                self.details,
                self.new_short,
                self.new_study,
            ]
        )

    def _build_new_short(self, context) -> widgets.Widget:
        """Upload readings of one reference part, compute, preview and attach (kind
        ``gauge_short``)."""
        m = context.messages
        flow = self._short = _UploadFlow(
            self.ws,
            m,
            css="sk-short",
            what="short gauge study",
            example="gauge GR-07 on master M-8.000",
            choose="Choose readings",
            placeholder="why, e.g. 'gauge GR-07 on master M-8.000, certificate C-114'",
            compute=("Compute Cg, Cgk", self._on_short_compute),
            on_upload=lambda c: self._on_short_upload(context, c),
            on_attach=self._on_short_attach,
        )
        self.short_upload, self.short_info, self.short_preview = (
            flow.upload,
            flow.info,
            flow.preview,
        )
        self.short_reason, self.short_attach, self.short_hint = flow.reason, flow.attach, flow.hint
        self.short_attach_box, self.short_compute = flow.box, flow.compute
        lay = widgets.Layout(width="130px")
        self.short_value = widgets.Dropdown(options=[], layout=widgets.Layout(width="190px"))
        self.short_reference = widgets.Text(placeholder="e.g. 8.0004", layout=lay)
        self.short_lsl = widgets.Text(placeholder="LSL", layout=lay)
        self.short_usl = widgets.Text(placeholder="USL", layout=lay)
        self.short_k = widgets.Text(value="20", layout=widgets.Layout(width="80px"))
        self.short_l = widgets.Text(value="6", layout=widgets.Layout(width="80px"))
        fields = []
        for text, w, key in (
            ("Reading column", self.short_value, "value"),
            ("Reference value", self.short_reference, "reference"),
            ("Tolerance: LSL", self.short_lsl, "lsl"),
            ("USL", self.short_usl, "usl"),
            ("K (% of tolerance)", self.short_k, "k"),
            ("L (sigmas)", self.short_l, "l"),
        ):
            w.add_class(f"sk-short-{key}")
            fields.append(labelled(text, w))
        self.short_fields = flow.fields = widgets.HBox(
            [*fields, self.short_compute],
            layout=widgets.Layout(flex_flow="row wrap", align_items="flex-end", display="none"),
        )
        intro = html_box(
            '<div class="sk-panel-title" style="margin-top:22px">Run a short gauge study</div>'
            '<div class="sk-muted">One reference part of known value measured repeatedly by one '
            "person at the same place (25 readings at least, 50 usual; common practice): "
            "upload the readings, one per row. Cg and Cgk use K = 20 % of the tolerance and "
            "L = 6 sigma unless changed (common practice, no source); the gauge is called "
            "capable when both are at least 1.33. Nothing is stored until you attach it with "
            "your name and a reason.</div>"
        )
        box = widgets.VBox(
            [
                intro,
                widgets.HBox(
                    [self.short_upload, self.short_info],
                    layout=widgets.Layout(align_items="center"),
                ),
                self.short_fields,
                self.short_attach_box,
            ]
        )
        box.add_class("sk-short-new")
        return box

    def _reset_short(self, name: str) -> None:
        spec = self.ws.session.study.characteristic(name)
        self.short_lsl.value, self.short_usl.value = _limit_text(spec.lsl), _limit_text(spec.usl)
        self._short.clear()

    def _on_short_upload(self, context, change) -> None:
        taken = self._short.take(change, limit=context.max_upload_bytes)
        if taken is None:
            return
        name, data = taken
        headers = read_reference_upload(data, name)["headers"]
        self.short_value.options = headers
        guess = [h for h in headers if set(_words(h)) & set(_ROLE_WORDS["value"])]
        self.short_value.value = guess[0] if guess else headers[-1]
        self._short.keep(
            name,
            data,
            f"<b>{esc(name)}</b> · columns: {', '.join(esc(h) for h in headers)}. Give the "
            "reference value, then compute.",
        )

    def _short_number(self, label: str, w, *, required: bool = True) -> float | None:
        from studykit.errors import SpecError

        text = w.value.strip().replace(",", ".")
        if not text:
            if required:
                raise SpecError(f"the {label} is empty: write it like 8.0004")
            return None
        try:
            return float(text)
        except ValueError:
            raise SpecError(
                f"the {label} ({w.value!r}) is not a number: write it like 8.0004"
            ) from None

    def _on_short_compute(self) -> None:
        from studykit.stats.gauge_type1 import short_gauge_study

        if self._short.data is None:
            raise DataFileError("upload the readings first")
        name = self.ws.session.current
        self._short.clear()
        reference = self._short_number("reference value", self.short_reference)
        lsl = self._short_number("tolerance LSL", self.short_lsl)
        usl = self._short_number("tolerance USL", self.short_usl)
        k = self._short_number("K", self.short_k)
        ell = self._short_number("L", self.short_l)
        values = read_reference_upload(
            self._short.data, self._short.name, value=self.short_value.value
        )["values"]
        try:
            result = short_gauge_study(
                values, reference=reference, lsl=lsl, usl=usl, k_percent=k, l_sigmas=ell
            )
        except StudyInputError as exc:
            if exc.file is not None:
                raise
            raise _in_upload(
                exc, self._short.name, row=None, column=self.short_value.value
            ) from None
        spec = self.ws.session.study.characteristic(name)
        extras = {
            "source_file": self._short.name,
            "limits_from": "study" if (lsl, usl) == (spec.lsl, spec.usl) else "entered",
            "columns": {"value": self.short_value.value},
        }
        self._short.show(
            (result, extras, name),
            short_study_html(
                {**result.to_dict(), **extras}, title=f"New short gauge study for {name}"
            ),
        )
        self.ws.context.messages.info(
            f"Short gauge study computed from '{self._short.name}': check the preview, then "
            f"attach it to {name} with a reason."
        )

    def _on_short_attach(self) -> None:
        result, name = self._short.store(SHORT_KIND)
        self.ws.session.reload()
        self.ws.context.messages.ok(f"Short gauge study attached to {name} ({result.status}).")

    def _show_short_and_error(self, name: str, has_gauge: bool) -> None:
        """The stored short study and the gauge-error panel of ``name`` (nothing computed)."""
        short = self.ws.session.file.results(SHORT_KIND, name)
        if short:
            last = short[-1]
            self.short_box.value = short_study_html(last.payload, who=last.who, when=last.when)
        else:
            self.short_box.value = (
                '<div class="sk-small" style="margin-bottom:8px">No short gauge study (one '
                f"reference part) is attached for {esc(name)}; it qualifies the gauge alone "
                "before the crossed study. Run one below.</div>"
            )
        me = None
        if has_gauge:
            try:
                me = getattr(self.ws.session.result(name), "measurement_error", None)
            except StudyInputError:
                me = None
        self.error_box.value = measurement_error_html(me)

    def _build_new_study(self, context) -> widgets.Widget:
        m = context.messages
        limit_mb = context.max_upload_bytes / 1024 / 1024
        self.preview_figure = widgets.Box([], layout=widgets.Layout(max_width="640px"))
        flow = self._gauge = _UploadFlow(
            self.ws,
            m,
            css="sk-gauge",
            what="gauge study",
            example="gauge GR-07, study GR-2026-14",
            choose="Choose gauge table",
            placeholder="why, e.g. 'gauge GR-07 after recalibration, study GR-2026-14'",
            compute=("Compute the study", self._on_compute),
            on_upload=lambda c: self._on_upload(context, c),
            on_attach=self._on_attach,
            extra=(self.preview_figure,),
        )
        self.upload, self.file_info, self.preview = flow.upload, flow.info, flow.preview
        self.reason, self.attach, self.attach_hint = flow.reason, flow.attach, flow.hint
        self.attach_box, self.compute = flow.box, flow.compute
        lay = widgets.Layout(width="190px")
        self.col_part = widgets.Dropdown(options=[], layout=lay)
        self.col_appraiser = widgets.Dropdown(options=[], layout=lay)
        self.col_trial = widgets.Dropdown(options=[], layout=lay)
        self.col_value = widgets.Dropdown(options=[], layout=lay)
        tl = widgets.Layout(width="130px")
        self.lsl = widgets.Text(placeholder="none", layout=tl)
        self.usl = widgets.Text(placeholder="none", layout=tl)
        columns = []
        for text, w, key in (
            ("Part column", self.col_part, "col-part"),
            ("Appraiser column", self.col_appraiser, "col-appraiser"),
            ("Trial column", self.col_trial, "col-trial"),
            ("Value column", self.col_value, "col-value"),
            ("Tolerance: LSL", self.lsl, "lsl"),
            ("USL", self.usl, "usl"),
        ):
            w.add_class(f"sk-gauge-{key}")
            columns.append(labelled(text, w))
        self.columns_box = flow.fields = widgets.VBox(
            [
                widgets.HBox(columns[:4], layout=widgets.Layout(flex_flow="row wrap")),
                widgets.HBox(
                    [*columns[4:], self.compute],
                    layout=widgets.Layout(flex_flow="row wrap", align_items="flex-end"),
                ),
            ],
            layout=widgets.Layout(display="none"),
        )
        intro = html_box(
            '<div class="sk-panel-title" style="margin-top:22px">Run a new gauge study</div>'
            '<div class="sk-muted">Upload a long table with one row per reading: part, '
            "appraiser, trial and value columns (CSV or .xlsx, at most "
            f"{limit_mb:.0f} MB). studykit computes the study for you to check; nothing is "
            "stored until you attach it with your name and a reason.</div>"
        )
        box = widgets.VBox(
            [
                intro,
                widgets.HBox(
                    [self.upload, self.file_info], layout=widgets.Layout(align_items="center")
                ),
                self.columns_box,
                self.attach_box,
            ]
        )
        box.add_class("sk-gauge-new")
        return box

    # --- drawing ------------------------------------------------------------------------------
    def refresh(self, context) -> None:
        ws = self.ws
        if ws is None or not hasattr(self, "verdict"):
            return
        s = ws.session
        name = s.current
        stored = self.stored(name)
        latest = stored[-1] if stored else None
        short = s.file.results(SHORT_KIND, name)
        key = (
            name,
            None if latest is None else latest.id,
            None if not short else short[-1].id,
            id(s.study),
        )
        if key == self._drawn:
            return
        changed_name = self._drawn is None or self._drawn[0] != name
        self._drawn = key
        if changed_name:
            self._reset_new_study(name)
            self._reset_short(name)
        self._show_short_and_error(name, latest is not None)
        spec = s.study.characteristic(name)
        unit = f" ({spec.unit})" if getattr(spec, "unit", None) else ""
        self.heading.value = (
            f'<div class="sk-panel-title">Gauge study behind {esc(name)}{esc(unit)}</div>'
        )
        if latest is None:
            self.verdict.value = (
                '<div class="sk-verdict-box sk-gauge-verdict" style="border-color:'
                f'{theme.VERDICTS["pending"].color}">{_chip(None)}'
                f'<div style="margin-top:6px">No gauge study is attached for {esc(name)}: the '
                "capability findings report its measurement system as not checked. Run one "
                "below from the readings of the gauge study.</div></div>"
            )
            self.details.layout.display = "none"
            self.figures.children = []
            return
        payload = latest.payload
        self.verdict.value = (
            verdict_html(payload, who=latest.who, when=latest.when)
            + (
                f'<div class="sk-small">{len(stored) - 1} earlier gauge '
                f"stud{'y' if len(stored) == 2 else 'ies'} of {esc(name)} on record; the latest "
                "counts.</div>"
                if len(stored) > 1
                else ""
            )
            + (f'<div class="sk-small" style="margin-bottom:8px">{esc(_BANDS_NOTE)}</div>')
        )
        self.components.value = components_html(payload)
        self.anova.value = anova_html(payload)
        self.range_method.value = range_method_html(payload)
        # the pooling note is already said above the ANOVA table
        notes = [
            n
            for n in payload.get("notes") or []
            if n and not (payload.get("interaction_pooled") and "pooled" in n)
        ]
        self.notes.value = "".join(
            f'<div class="sk-msg sk-msg-info"><span class="sk-msg-kind">Note</span>{esc(n)}</div>'
            for n in notes
        )
        self.details.layout.display = ""
        self._show_figures(latest)

    def _show_figures(self, stored) -> None:
        cache_key = (str(self.ws.session.path), stored.id)
        cached = self._figures.get(cache_key)
        if cached is None:
            try:
                result = gauge_result_from_payload(stored.payload)
            except StudyInputError as exc:
                self.figures.children = [
                    html_box(
                        f'<div class="sk-msg sk-msg-warning"><span class="sk-msg-kind">Caution</span>'
                        f"{esc(exc)}</div>"
                    )
                ]
                return
            cached = (_gauge_figures.story(result), figure_pngs(result))
            self._figures = {cache_key: cached}  # one characteristic's figures at a time
        chapters, pngs = cached
        self.figures.children = [
            self._figure_widget(key, pngs[key], caption) for key, _title, caption in chapters
        ]

    @staticmethod
    def _figure_widget(key: str, png: bytes, caption: str = "") -> widgets.Widget:
        img = widgets.Image(
            value=png, format="png", layout=widgets.Layout(width="100%", height="auto")
        )
        img.add_class("sk-gauge-figure")
        img.add_class(f"sk-gauge-figure-{key}")
        parts = [img]
        if caption:
            parts.append(html_box(f'<div class="sk-small sk-figure-caption">{esc(caption)}</div>'))
        box = widgets.VBox(parts, layout=widgets.Layout(min_width="0", margin="0 0 10px 0"))
        box.add_class("sk-gauge-figure-box")
        return box

    # --- a new study --------------------------------------------------------------------------
    def _reset_new_study(self, name: str) -> None:
        spec = self.ws.session.study.characteristic(name)
        self.lsl.value, self.usl.value = _limit_text(spec.lsl), _limit_text(spec.usl)
        self._gauge.clear()

    def _on_upload(self, context, change) -> None:
        taken = self._gauge.take(change, limit=context.max_upload_bytes)
        if taken is None:
            return
        name, data = taken
        headers = read_gauge_upload(data, name)["headers"]
        guess = guess_columns(headers)
        for w in (self.col_part, self.col_appraiser, self.col_value):
            w.options = headers
        self.col_trial.options = [(_NO_TRIAL, "")] + [(h, h) for h in headers]
        self.col_part.value = guess["part"]
        self.col_appraiser.value = guess["appraiser"]
        self.col_value.value = guess["value"]
        self.col_trial.value = guess["trial"] or ""
        self._gauge.keep(
            name,
            data,
            f"<b>{esc(name)}</b> · {len(headers)} columns: {', '.join(esc(h) for h in headers)}. "
            "Check the columns, then compute.",
        )

    def _tolerance(self) -> tuple[float | None, float | None]:
        from studykit.errors import SpecError

        out = []
        for label, w in (("LSL", self.lsl), ("USL", self.usl)):
            text = w.value.strip().replace(",", ".")
            if not text:
                out.append(None)
                continue
            try:
                out.append(float(text))
            except ValueError:
                raise SpecError(
                    f"the tolerance {label} ({w.value!r}) is not a number: write "
                    "it like 7.9, or leave both limits empty for no %tolerance"
                ) from None
        lsl, usl = out
        if (lsl is None) != (usl is None):
            raise SpecError(
                "give both tolerance limits (LSL and USL) for %GRR of tolerance, "
                "or leave both empty"
            )
        return lsl, usl

    def _on_compute(self) -> None:
        from studykit.stats.gauge import gauge_rr

        if self._gauge.data is None:
            raise DataFileError("upload the gauge table first")
        name = self.ws.session.current
        self._gauge.clear()
        lsl, usl = self._tolerance()
        cols = {
            "part": self.col_part.value,
            "appraiser": self.col_appraiser.value,
            "value": self.col_value.value,
            "trial": self.col_trial.value or None,
        }
        table = read_gauge_upload(self._gauge.data, self._gauge.name, **cols)
        # without the headers, the table is gauge_rr's own arguments: values, parts, appraisers,
        # trials (as the command line passes it)
        del table["headers"]
        try:
            result = gauge_rr(**table, lsl=lsl, usl=usl)
        except StudyInputError as exc:
            if exc.file is not None:
                raise
            raise _in_upload(exc, self._gauge.name) from None
        spec = self.ws.session.study.characteristic(name)
        from_study = (lsl, usl) == (spec.lsl, spec.usl) and lsl is not None
        extras = {
            "source_file": self._gauge.name,
            "limits_from": "study" if from_study else ("entered" if lsl is not None else None),
            "columns": cols,
        }
        payload = {**result.to_dict(), **extras}
        png = figure_pngs(result, only=("sources",))["sources"]
        self.preview_figure.children = [self._figure_widget("preview", png)]
        self._gauge.show(
            (result, extras, name),
            verdict_html(payload, title=f"New study for {name}")
            + f'<div class="sk-small" style="margin-bottom:6px">{esc(_BANDS_NOTE)}</div>',
        )
        self.ws.context.messages.info(
            f"Gauge study computed from '{self._gauge.name}': check the preview, then attach "
            f"it to {name} with a reason."
        )

    def _on_attach(self) -> None:
        result, name = self._gauge.store(GAUGE_KIND)
        self.ws.session.reload()  # the findings and every panel follow the new gauge study
        status = result.verdict.status
        self.ws.context.messages.ok(
            f"Gauge study attached to {name} ({status}); the capability findings now use it."
        )


STEP = GaugeStep()
