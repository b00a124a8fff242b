"""The evidence report: one PDF from one study, with every reported number embedded as JSON.

:func:`build_report` analyses every characteristic of a study (exactly as ``studykit analyze``
does, through :func:`studykit.analysis.analyze_study`), draws the figures with matplotlib and lays
the document out with reportlab's platypus. The same :class:`~studykit.analysis.CharacteristicResult`
feeds the printed tables and the embedded JSON (``studykit-evidence.json``, a PDF embedded file), so
:mod:`studykit.report.verify` can recompute the study and compare every number.

The PDF is reproducible: reportlab's invariant mode fixes the creation date and document id, PNG
figures carry no time stamp, and the only date printed is the study's own last recorded time. The
same study therefore gives the same bytes (until someone signs it).

Layout (our own): cover with the verdicts at a glance; one section per characteristic (stability,
shape, model, capability, verdict, findings, planning); gauge R&R where a stored result exists;
decisions, comments and sign-offs with boxes for the digital signatures; an appendix with the
methods, their published sources, the software versions and the digests.
"""

from __future__ import annotations

import contextlib
import functools
import hashlib
import html
import io
import json
import math
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

from studykit import __version__, names, theme
from studykit.errors import StudyFileError, StudyInputError

__all__ = [
    "EVIDENCE_FILENAME",
    "EVIDENCE_FORMAT",
    "SIGNATURE_ROLES",
    "ReportInfo",
    "build_report",
    "collect_evidence",
    "read_evidence",
    "METHODS",
]

#: Name of the embedded JSON file holding every reported number and the digests.
EVIDENCE_FILENAME = "studykit-evidence.json"
#: Format tag inside that file.
EVIDENCE_FORMAT = "studykit-evidence/1"
#: Roles that get a reserved box for a visible digital signature on the sign-off page.
SIGNATURE_ROLES = ("prepared", "reviewed", "approved")
#: Document-information key holding the signature boxes (JSON: role -> [page, x1, y1, x2, y2]).
BOXES_KEY = "/StudykitSignatureBoxes"
#: Gauge results are stored under this kind by ``studykit gauge --study``.
GAUGE_KIND = names.GAUGE_RR_KIND

#: The methods used and their published sources (collected from the docstrings of
#: studykit.stats); printed in the appendix.
METHODS: tuple[tuple[str, str], ...] = (
    (
        "Control charts (X-bar/R, X-bar/S, I-MR, p, np, c, u), phase I and phase II",
        "D. C. Montgomery, Introduction to Statistical Quality Control, chapters 6-7; "
        "NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3.",
    ),
    (
        "Control chart constants d2, d3, c4",
        "Computed exactly by integration; checked against Montgomery, Introduction to "
        "Statistical Quality Control, Appendix VI.",
    ),
    (
        "Run rules (tests 1-8)",
        "L. S. Nelson (1984), The Shewhart control chart - tests for special causes, J. Quality "
        "Technology 16(4); Western Electric Statistical Quality Control Handbook (1956).",
    ),
    (
        "Overdispersed attribute charts (p', u')",
        "D. B. Laney (2002), Improved control charts for attributes, Quality Engineering 14(4).",
    ),
    (
        "Normality: Anderson-Darling and Shapiro-Wilk tests, probability plot",
        "R. B. D'Agostino & M. A. Stephens (1986), Goodness-of-Fit Techniques, chapter 4; "
        "NIST/SEMATECH e-Handbook, sections 1.3.5.14 and 1.3.3.21.",
    ),
    (
        "Box-Cox and Johnson transformations",
        "G. E. P. Box & D. R. Cox (1964), J. Royal Statistical Society B 26; Y.-M. Chou, "
        "A. M. Polansky & R. L. Mason (1998), Transforming non-normal data to normality in "
        "statistical process control, J. Quality Technology 30(2).",
    ),
    (
        "Distribution fitting and ranking (maximum likelihood, AIC)",
        "NIST/SEMATECH e-Handbook, section 1.3.6; K. P. Burnham & D. R. Anderson (2002), Model "
        "Selection and Multimodel Inference.",
    ),
    (
        "Capability indices Cp, Cpk, Pp, Ppk, Cpm; percentile method for non-normal models",
        "ISO 22514-2:2017, Statistical methods in process management - capability and "
        "performance - Part 2; Montgomery, chapter 8.",
    ),
    (
        "Confidence bounds: chi-square (Cp, Pp), Bissell (Cpk, Ppk), Boyles (Cpm)",
        "A. F. Bissell (1990), How reliable is your capability index?, Applied Statistics 39(3); "
        "R. A. Boyles (1991), The Taguchi capability index, J. Quality Technology 23(1).",
    ),
    (
        "Gauge R&R by two-way ANOVA",
        "D. C. Montgomery & G. C. Runger (1993), Gauge capability and designed experiments, "
        "Part II, Quality Engineering 6(2); R. K. Burdick, C. M. Borror & D. C. Montgomery "
        "(2005), Design and Analysis of Gauge R&R Studies; range method: P. B. Patnaik (1950), "
        "Biometrika 37.",
    ),
    (
        "Demonstration planning (parts needed for the bound to clear the requirement)",
        "Inverts the bound formulas above (Bissell 1990; chi-square for Cp/Pp).",
    ),
)


# ---------------------------------------------------------------------------------------------
# result


@dataclass(frozen=True)
class ReportInfo:
    """What :func:`build_report` wrote.

    Attributes
    ----------
    path : str
        The PDF written.
    pages : int
        Number of pages.
    characteristics : tuple of str
        Characteristics reported (in the study's order).
    errors : dict
        Characteristics that could not be analysed -> message (reported in the PDF too).
    verdicts : dict
        name -> True (meets), False (does not), None (no verdict).
    data_sha256, content_digest : str
        Digests of the raw data and of the study content (data + effective decisions).
    evidence_sha256 : str
        SHA-256 of the embedded evidence JSON (also printed in the appendix).
    signature_boxes : dict
        role -> [page index (0-based), x1, y1, x2, y2] in PDF points: where a visible
        digital signature of that role goes.
    seconds : float
        Wall time of the build.
    """

    path: str
    pages: int
    characteristics: tuple
    errors: dict
    verdicts: dict
    data_sha256: str
    content_digest: str
    evidence_sha256: str
    signature_boxes: dict = field(default_factory=dict)
    seconds: float = 0.0

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "pages": self.pages,
            "characteristics": list(self.characteristics),
            "errors": dict(self.errors),
            "verdicts": dict(self.verdicts),
            "data_sha256": self.data_sha256,
            "content_digest": self.content_digest,
            "evidence_sha256": self.evidence_sha256,
            "signature_boxes": {k: list(v) for k, v in self.signature_boxes.items()},
            "seconds": self.seconds,
        }


# ---------------------------------------------------------------------------------------------
# loading and analysing


def load_for_report(study_or_path):
    """(Study, gauges, study_path or None) from a Study or a study-file path."""
    study, gauges, path, _ = _load_with_chain(study_or_path)
    return study, gauges, path


def _load_with_chain(study_or_path):
    """(Study, gauges, study_path or None, chain dict or None) from a Study or a study file.

    A study file must pass its audit-chain check (:meth:`StudyFile.require_intact`): a report
    is never made from a file altered behind studykit. The chain dict (``entries``, ``head``,
    ``rows``) goes into the evidence.
    """
    from studykit.study import Study

    if isinstance(study_or_path, Study):
        return study_or_path, None, None, None
    if isinstance(study_or_path, str | os.PathLike):
        from studykit.store import StudyFile

        path = Path(study_or_path)
        if not path.exists():
            raise StudyFileError(f"study file '{path}' does not exist: check the path")
        sf = StudyFile(path)
        chain = sf.require_intact()
        study = sf.load()
        gauges = {}
        for r in sf.results(GAUGE_KIND):
            if r.characteristic in study.characteristics:
                gauges[r.characteristic] = dict(r.payload)
        return (
            study,
            gauges,
            path,
            {"entries": chain.entries, "head": chain.head, "rows": chain.rows},
        )
    raise StudyInputError(
        f"`study` must be a Study or the path of a study file, got {type(study_or_path).__name__}"
    )


def analyze_for_report(
    study,
    gauges: Mapping | None = None,
    *,
    progress: Callable[[int, int, str], None] | None = None,
    workers: int = 1,
    meanwhile: Callable[[], None] | None = None,
):
    """Analyse every characteristic as the report does: (results, errors, measurements).

    Exactly :func:`studykit.analysis.analyze_all` (with the stored gauge results; ``gauges``
    None means no gauge search was made), so the report, ``studykit analyze`` and ``verify``
    agree. With ``workers`` > 1 the characteristics after the first are analysed by that many
    forked processes (:func:`_analyze_in_workers`): the same calls, the same results; this
    process runs ``meanwhile()`` (if given) while it waits for them.
    """
    from studykit.analysis import analyze_all, read_study_measurements

    measurements = read_study_measurements(study)
    gauges = None if gauges is None else dict(gauges)
    if workers > 1 and len(study.characteristic_names) > 2:
        import multiprocessing

        if "fork" in multiprocessing.get_all_start_methods():
            results, errors = _analyze_in_workers(
                study, measurements, gauges, progress, workers, meanwhile
            )
            return results, errors, measurements
    res = analyze_all(study, measurements=measurements, progress=progress, gauges=gauges)
    return res.results, res.errors, measurements


#: What the forked analysis workers read (set just before they are started).
_ANALYSIS_JOB: tuple | None = None


def _analyze_one(study, name, measurements, gauges):
    """One characteristic as :func:`studykit.analysis.analyze_all` analyses it:
    ("ok", result) or ("error", message)."""
    from studykit.analysis import NO_GAUGE, analyze_study

    try:
        gauge = None if gauges is None else gauges.get(name, NO_GAUGE)
        return "ok", analyze_study(study, name, measurements=measurements, gauge=gauge)
    except StudyInputError as exc:
        return "error", str(exc)


def _analyze_in_worker(name: str):
    """One characteristic in a forked worker. The numbers the pages print from the fitted
    model (the chart's limits in measured units) are computed here, so the pickled result
    carries them and the layout process never needs scipy.stats to print them."""
    study, measurements, gauges = _ANALYSIS_JOB  # type: ignore[misc]
    outcome = _analyze_one(study, name, measurements, gauges)
    if outcome[0] == "ok":
        outcome[1].probability_limits  # noqa: B018 - cached on the result, sent with it
    return outcome


@functools.cache
def _libc():
    """glibc, or None where there is none (then the allocator calls below do nothing); looked
    up once (``find_library`` asks ``ldconfig``)."""
    import ctypes
    import ctypes.util

    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        return libc if hasattr(libc, "mallopt") and hasattr(libc, "malloc_trim") else None
    except OSError:
        return None


def _large_buffers_returned() -> None:
    """Ask glibc's allocator to map every block of 256 KiB or more on its own and return it when
    freed (``mallopt(M_MMAP_THRESHOLD)``, which also stops glibc from raising that threshold
    after such a block is freed). Called before the figure workers are forked, so they inherit
    it: the raw pixels of each picture they draw (2-4 MB) then do not stay in their heaps after
    use. Without glibc nothing happens."""
    libc = _libc()
    if libc is not None:
        libc.mallopt(-3, 256 * 1024)  # M_MMAP_THRESHOLD


def _heap_trimmed() -> None:
    """Give the free memory inside the heap back to the system (glibc ``malloc_trim(0)``): once
    the pages are written, what laying them out held (the document's objects, the compressed
    pictures) is free but lies below blocks still in use, so the heap cannot shrink from its
    top; attaching the evidence then starts from the smaller process. Without glibc nothing
    happens."""
    libc = _libc()
    if libc is not None:
        libc.malloc_trim(0)


def _forked_pool(workers: int):
    """A pool of ``workers`` forked processes. The objects that exist now are frozen out of the
    cyclic garbage collector first, so the workers' collections do not touch (and so copy) every
    page they inherit; this process collects them again afterwards as usual."""
    import gc
    import multiprocessing

    gc.freeze()
    try:
        return multiprocessing.get_context("fork").Pool(workers)
    finally:
        gc.unfreeze()


def _analyze_in_workers(study, measurements, gauges, progress, workers: int, meanwhile=None):
    """(results, errors) of every characteristic, in the study's order: the first analysed
    here (which also loads the statistics modules once, before the fork), the others by
    ``workers`` forked processes; each result comes back pickled (a plain copy). While they
    work, this process runs ``meanwhile()`` (the layout's preparations: a core is free)."""

    global _ANALYSIS_JOB
    names = study.characteristic_names
    results: dict = {}
    errors: dict = {}

    def keep(i, name, outcome):
        kind, value = outcome
        (results if kind == "ok" else errors)[name] = value
        if progress is not None:
            progress(i + 1, len(names), name)

    keep(0, names[0], _analyze_one(study, names[0], measurements, gauges))
    _ANALYSIS_JOB = (study, measurements, gauges)
    try:
        with _forked_pool(min(workers, len(names) - 1)) as pool:
            outcomes = pool.imap(_analyze_in_worker, names[1:])
            if meanwhile is not None:
                meanwhile()
            for i, (name, outcome) in enumerate(zip(names[1:], outcomes, strict=True), start=1):
                keep(i, name, outcome)
    finally:
        _ANALYSIS_JOB = None
    return results, errors


def _canonical(obj) -> str:
    return json.dumps(
        obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False
    )


def collect_evidence(
    study, results: Mapping, errors: Mapping, gauges: Mapping | None, chain: Mapping | None = None
) -> dict:
    """The machine-readable evidence embedded in the PDF (JSON-safe).

    Holds the study content (specifications, criteria, every decision, comments, sign-offs) so
    the study and every page of the report can be rebuilt from the raw data alone, every data
    file's name, size and SHA-256, the study file's audit chain head (``chain``, None for a
    study not read from a file), the gauge results used, every characteristic's ``to_dict()``
    (the JSON of ``studykit analyze --json``) and the digests.
    """
    return {
        "format": EVIDENCE_FORMAT,
        "software": {"studykit": __version__},
        "study": {
            "title": study.title,
            "part": study.part,
            "supplier": study.supplier,
            "data_filename": study.data_filename,
            "data_sha256": study.data_sha256,
            "content_digest": study.content_digest(),
            "characteristic_order": list(study.characteristics),
            "characteristics": {n: c.to_dict() for n, c in study.characteristics.items()},
            "criteria": {n: study.criteria_for(n).to_dict() for n in study.characteristics},
            "decisions": [d.to_dict() for d in study.decisions],
            "signoffs": [s.to_dict() for s in study.signoff_state()],
            "comments": [c.to_dict() for c in study.comments],
            "data_files": [
                {"filename": n, "bytes": len(b), "sha256": hashlib.sha256(b).hexdigest()}
                for n, b in study.files
            ],
            "chain": None if chain is None else dict(chain),
        },
        "gauges": None if gauges is None else {k: gauges[k] for k in sorted(gauges)},
        "results": {n: r.to_dict() for n, r in results.items()},
        "errors": dict(errors),
        "tolerance": {
            "relative": RELATIVE_TOLERANCE,
            "note": "numbers are compared with this relative tolerance "
            "(absolute 1e-12 near zero) to allow for float printing",
        },
    }


#: Relative tolerance verify uses when it compares recomputed with reported numbers.
RELATIVE_TOLERANCE = 1e-9


def read_evidence(pdf) -> dict:
    """The embedded evidence JSON of a report (path, bytes or file object).

    Raises
    ------
    StudyFileError
        When the PDF cannot be read or holds no studykit evidence.
    """
    return json.loads(read_evidence_bytes(pdf).decode("utf-8"))


def read_evidence_bytes(pdf) -> bytes:
    """The embedded evidence file of a report, as stored (checked to be studykit evidence)."""
    from pypdf import PdfReader
    from pypdf.errors import PyPdfError

    if isinstance(pdf, bytes | bytearray):
        pdf = io.BytesIO(bytes(pdf))
    try:
        reader = PdfReader(pdf)
        attachments = reader.attachments
        blobs = attachments.get(EVIDENCE_FILENAME)
    except (PyPdfError, OSError, ValueError, KeyError, TypeError) as exc:
        raise StudyFileError(f"the PDF cannot be read ({exc}); is it a studykit report?") from None
    if not blobs:
        raise StudyFileError(
            f"the PDF holds no embedded '{EVIDENCE_FILENAME}': it was not made by "
            "`studykit report`, or the file was stripped"
        )
    try:
        data = json.loads(blobs[0].decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise StudyFileError(f"the embedded evidence is not valid JSON ({exc})") from None
    if not isinstance(data, dict) or data.get("format") != EVIDENCE_FORMAT:
        raise StudyFileError(f"the embedded evidence is not in format {EVIDENCE_FORMAT}")
    return bytes(blobs[0])


# ---------------------------------------------------------------------------------------------
# formatting helpers


def number_text(v, digits: int = 4) -> str:
    if v is None:
        return "–"
    try:
        v = float(v)
    except (TypeError, ValueError):
        return str(v)
    if not math.isfinite(v):
        return "–"
    return f"{v:.{digits}g}"


def _idx(v) -> str:
    """A capability index as :func:`studykit.names.format_index` writes it (two decimals), with
    the report's dash for a missing one."""
    text = names.format_index(v)
    return "–" if text == "-" else text  # a number always has digits: only "missing" is "-"


def escape_text(text) -> str:
    return html.escape(str(text if text is not None else ""), quote=False)


def _index_name(key: str) -> str:
    return names.index_label(key)


def _verdict_key(res) -> str:
    return names.VERDICT_THEME[names.verdict_state(res)]


# ---------------------------------------------------------------------------------------------
# reportlab document


_FONTS_READY = False


def _register_fonts() -> tuple[str, str]:
    """DejaVu Sans (shipped with matplotlib) so text and figures share one typeface."""
    global _FONTS_READY
    if not _FONTS_READY:
        import matplotlib
        from reportlab.lib.fonts import addMapping
        from reportlab.pdfbase import pdfmetrics
        from reportlab.pdfbase.ttfonts import TTFont

        d = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
        pdfmetrics.registerFont(TTFont("SKSans", str(d / "DejaVuSans.ttf")))
        pdfmetrics.registerFont(TTFont("SKSans-Bold", str(d / "DejaVuSans-Bold.ttf")))
        pdfmetrics.registerFont(TTFont("SKSans-Oblique", str(d / "DejaVuSans-Oblique.ttf")))
        pdfmetrics.registerFont(TTFont("SKSans-BoldOblique", str(d / "DejaVuSans-BoldOblique.ttf")))
        addMapping("SKSans", 0, 0, "SKSans")
        addMapping("SKSans", 1, 0, "SKSans-Bold")
        addMapping("SKSans", 0, 1, "SKSans-Oblique")
        addMapping("SKSans", 1, 1, "SKSans-BoldOblique")
        _FONTS_READY = True
    return "SKSans", "SKSans-Bold"


def prepare_layout() -> None:
    """Load what laying out the report and drawing its figures need: the report's fonts,
    reportlab's layout modules and matplotlib with its fonts (one tiny figure drawn). Done once
    per process, by :func:`build_report` while the analysis workers run (a core is free then),
    so neither the layout nor each forked figure worker pays for it on its own."""
    import reportlab.platypus  # noqa: F401 - loaded now, used by the layout

    from studykit.report.figures import warm_up

    report_styles()
    warm_up()


def report_styles():
    from reportlab.lib import colors
    from reportlab.lib.styles import ParagraphStyle

    regular, bold = _register_fonts()
    ink = colors.HexColor(theme.INK)
    soft = colors.HexColor(theme.INK_SOFT)
    base = ParagraphStyle("body", fontName=regular, fontSize=9, leading=12, textColor=ink)
    return {
        "body": base,
        "small": ParagraphStyle("small", parent=base, fontSize=7.5, leading=9.5, textColor=soft),
        "cell": ParagraphStyle("cell", parent=base, fontSize=8, leading=10),
        "cellb": ParagraphStyle("cellb", parent=base, fontName=bold, fontSize=8, leading=10),
        "title": ParagraphStyle(
            "title", parent=base, fontName=bold, fontSize=22, leading=27, spaceAfter=6
        ),
        "subtitle": ParagraphStyle(
            "subtitle", parent=base, fontSize=12, leading=16, textColor=soft, spaceAfter=14
        ),
        "h1": ParagraphStyle(
            "h1", parent=base, fontName=bold, fontSize=15, leading=19, spaceBefore=2, spaceAfter=8
        ),
        "h2": ParagraphStyle(
            "h2",
            parent=base,
            fontName=bold,
            fontSize=11,
            leading=14,
            spaceBefore=10,
            spaceAfter=5,
            textColor=colors.HexColor(theme.OKABE_ITO["blue"]),
        ),
        "bullet": ParagraphStyle("bullet", parent=base, leftIndent=12, bulletIndent=2),
        "mono": ParagraphStyle("mono", parent=base, fontName=regular, fontSize=7.5, leading=10),
    }


def grid_table(rows, widths, *, header=True, align_right_from=None, zebra=True, styles=None):
    from reportlab.lib import colors
    from reportlab.platypus import Paragraph, Table, TableStyle

    st = styles or report_styles()
    body = []
    for r, row in enumerate(rows):
        cells = []
        for cell in row:
            if isinstance(cell, str):
                cells.append(Paragraph(cell, st["cellb"] if header and r == 0 else st["cell"]))
            else:
                cells.append(cell)
        body.append(cells)
    t = Table(body, colWidths=widths, repeatRows=1 if header else 0, hAlign="LEFT")
    cmds = [
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LEFTPADDING", (0, 0), (-1, -1), 4),
        ("RIGHTPADDING", (0, 0), (-1, -1), 4),
        ("TOPPADDING", (0, 0), (-1, -1), 2.5),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.5),
        ("LINEBELOW", (0, -1), (-1, -1), 0.6, colors.HexColor(theme.RULE)),
    ]
    if header:
        cmds += [
            ("BACKGROUND", (0, 0), (-1, 0), colors.HexColor(theme.PANEL)),
            ("LINEBELOW", (0, 0), (-1, 0), 0.9, colors.HexColor(theme.INK_SOFT)),
        ]
    if zebra:
        for r in range(1 if header else 0, len(rows)):
            if (r % 2 == 0) == header:
                continue
            cmds.append(("BACKGROUND", (0, r), (-1, r), colors.HexColor("#FBFCFD")))
        for r in range(1 if header else 0, len(rows)):
            cmds.append(("LINEBELOW", (0, r), (-1, r), 0.3, colors.HexColor(theme.RULE)))
    t.setStyle(TableStyle(cmds))
    return t


def framed_box(paragraphs, *, background, border, width):
    from reportlab.lib import colors
    from reportlab.platypus import Table, TableStyle

    t = Table([[p] for p in paragraphs], colWidths=[width], hAlign="LEFT")
    t.setStyle(
        TableStyle(
            [
                ("BACKGROUND", (0, 0), (-1, -1), colors.HexColor(background)),
                ("LINEBEFORE", (0, 0), (0, -1), 3, colors.HexColor(border)),
                ("LEFTPADDING", (0, 0), (-1, -1), 8),
                ("RIGHTPADDING", (0, 0), (-1, -1), 8),
                ("TOPPADDING", (0, 0), (-1, -1), 4),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 4),
            ]
        )
    )
    return t


def pdf_image(png, width: float):
    """A platypus Image from PNG bytes or a figure (rendered without a PNG round trip)."""
    from reportlab.lib.utils import ImageReader
    from reportlab.platypus import Image

    if not isinstance(png, bytes | bytearray):
        from studykit.report.figures import figure_image

        return _PixelImage(figure_image(png), width)
    w, h = ImageReader(io.BytesIO(png)).getSize()
    return Image(io.BytesIO(png), width=width, height=width * h / w)


def _PixelImage(pil, width):  # noqa: N802 - a flowable factory
    """A flowable drawing a PIL image at ``width`` (platypus Image wants a file)."""
    from reportlab.lib.utils import ImageReader
    from reportlab.platypus import Flowable

    class PixelImage(Flowable):
        def __init__(self):
            super().__init__()
            w, h = pil.size
            self.reader = ImageReader(pil)
            self.drawWidth, self.drawHeight = width, width * h / w

        def wrap(self, aw, ah):
            return self.drawWidth, self.drawHeight

        def draw(self):
            self.canv.drawImage(self.reader, 0, 0, self.drawWidth, self.drawHeight)

    return PixelImage()


def encode_picture(img) -> tuple:
    """An RGB picture as the PDF image object reportlab makes of it: ((width, height) in
    pixels, the name reportlab gives it, its Flate-compressed pixels). Done in a figure worker,
    so the raw pixels (2-4 MB a picture) never travel to the layout process nor stay there;
    :func:`_draw_encoded` writes exactly what ``canvas.drawImage`` writes for the picture."""
    import zlib

    from reportlab.lib.utils import _digester

    raw = img.tobytes()  # what reportlab's ImageReader.getRGBData gives for an RGB picture
    return img.size, _digester(raw + b"None"), zlib.compress(raw)  # b"None": no mask


def _draw_encoded(canv, encoded: tuple, width: float, height: float) -> None:
    """``canv.drawImage(ImageReader(picture), 0, 0, width, height)`` for a picture made by
    :func:`encode_picture`: the same image object (registered once under the same name, Flate
    only as :func:`render_pages` sets) and the same drawing operators, so the same bytes."""
    from reportlab.pdfbase import pdfdoc

    (px_w, px_h), name, stream = encoded
    canv._currentPageHasImages = 1
    doc = canv._doc
    reg_name = doc.getXObjectName(name)
    if not doc.idToObject.get(reg_name, None):
        spill = _SPILL
        img = (pdfdoc.PDFImageXObject if spill is None else _spilled_image_class())(
            name, None, mask=None
        )
        img.width, img.height = px_w, px_h
        img.colorSpace, img.bitsPerComponent = "DeviceRGB", 8
        img._filters = ("FlateDecode",)
        if spill is None:
            img.streamContent = stream
        else:  # kept on disk until the document is written
            spill.seek(0, os.SEEK_END)
            img.spilled = (spill, spill.tell(), len(stream))
            spill.write(stream)
        canv._setXObjects(img)
        doc.Reference(img, reg_name)
        doc.addForm(name, img)
    canv.saveState()
    canv.translate(0, 0)
    canv.scale(width, height)
    canv._code.append(f"/{reg_name} Do")
    canv.restoreState()
    canv._formsinuse.append(name)


#: The temporary file that holds the pictures' compressed pixels while a document is laid out
#: (see :func:`_pictures_spilled`); None outside :func:`render_pages`.
_SPILL = None


@contextlib.contextmanager
def _pictures_spilled():
    """While the block runs, the pictures drawn by :func:`_draw_encoded` keep their compressed
    pixels in a temporary file, read back one at a time when reportlab writes the document:
    reportlab writes every object only when the document is saved, so the pictures (about
    150 KB per characteristic) would otherwise stay in memory until the end."""
    import tempfile

    global _SPILL
    outer = _SPILL
    with tempfile.TemporaryFile(prefix="studykit-pictures-") as spill:
        _SPILL = spill
        try:
            yield
        finally:
            _SPILL = outer


@functools.cache
def _spilled_image_class():
    """reportlab's image object for a picture whose compressed pixels wait in a file."""
    from reportlab.pdfbase import pdfdoc

    class SpilledImage(pdfdoc.PDFImageXObject):
        def format(self, document):
            spill, offset, length = self.spilled
            spill.seek(offset)
            self.streamContent = spill.read(length)
            try:
                return super().format(document)
            finally:
                self.streamContent = None  # written: not kept

    return SpilledImage


def _EncodedPicture(encoded: tuple, width):  # noqa: N802 - a flowable factory
    """A flowable drawing a picture made by :func:`encode_picture` at ``width``."""
    from reportlab.platypus import Flowable

    class EncodedPicture(Flowable):
        def __init__(self):
            super().__init__()
            w, h = encoded[0]
            self.drawWidth, self.drawHeight = width, width * h / w

        def wrap(self, aw, ah):
            return self.drawWidth, self.drawHeight

        def draw(self):
            _draw_encoded(self.canv, encoded, self.drawWidth, self.drawHeight)

    return EncodedPicture()


def _picture(img, width):
    """The flowable of a section's picture: a PIL image drawn here, or one encoded by a worker."""
    return _EncodedPicture(img, width) if isinstance(img, tuple) else _PixelImage(img, width)


def section_images(res, raw) -> dict:
    """The pictures of one characteristic's section, rendered: ``control`` (the control chart
    of the final limits) and, for measured values with a probability plot, ``shape``."""
    return {key: _LazyImages(res, raw)[key] for key in _image_keys(res)}


def _image_keys(res) -> tuple[str, ...]:
    if res.attribute or res.probability_plot is None:
        return ("control",)
    return ("control", "shape")


class _LazyImages:
    """A section's pictures, each rendered in this process when the layout asks for it."""

    def __init__(self, res, raw):
        self.res, self.raw = res, raw

    def __getitem__(self, key: str):
        from studykit.report import figures

        if key == "control":
            return figures.figure_image(figures.control_chart_figure(self.res, raw=self.raw))
        if key == "shape":
            return figures.figure_image(figures.shape_figure(self.res))
        raise KeyError(key)


#: What the forked figure workers read (set just before they are started, see _FigureFeed).
_FEED_JOB: tuple | None = None


def _raw_values(measurements, name):
    try:
        return measurements.get(name)
    except StudyInputError:
        return None


def _render_in_worker(name: str) -> dict:
    """In a forked worker: the pictures of ``name``'s section, encoded for the PDF
    (:func:`encode_picture`)."""
    results, measurements = _FEED_JOB  # type: ignore[misc]
    images = section_images(results[name], _raw_values(measurements, name))
    return {key: encode_picture(img) for key, img in images.items()}


class _FigureFeed:
    """The sections' pictures, in the order the layout needs them.

    With ``workers`` > 1 (and ``fork`` available) that many forked processes render the
    pictures of the next sections while this process lays out the current one; at most
    ``2 * workers`` sections are ahead, so memory does not grow with the number of
    characteristics. The workers run the same code on the same results and send each picture
    as the PDF image object reportlab would make of it (:func:`encode_picture`, about 76 KB
    instead of 2-4 MB of pixels), so the pixels and the PDF bytes are the same as when
    everything is drawn in this process (``workers`` = 1).
    """

    def __init__(self, results: Mapping, measurements, order):
        self.results, self.measurements = results, measurements
        self.order = list(order)
        self.pool = None
        self.pending: list = []
        self.next = 0

    def start(self, workers: int) -> None:
        """Start the workers (none when ``workers`` <= 1, one section or no ``fork``)."""
        import multiprocessing

        workers = min(int(workers), len(self.order))
        if workers > 1 and "fork" in multiprocessing.get_all_start_methods():
            global _FEED_JOB
            # matplotlib's modules and fonts are loaded here, once, before the fork (done
            # already while the analysis workers ran), instead of once in every worker
            prepare_layout()
            _FEED_JOB = (self.results, self.measurements)
            _large_buffers_returned()
            self.pool = _forked_pool(workers)
            for _ in range(2 * workers):
                self._submit()

    def _submit(self) -> None:
        if self.pool is not None and self.next < len(self.order):
            name = self.order[self.next]
            self.next += 1
            self.pending.append((name, self.pool.apply_async(_render_in_worker, (name,))))

    def take(self, name: str, res, raw):
        """The pictures of ``name``'s section (rendered ahead, or on demand in this process)."""
        if self.pool is None:
            return _LazyImages(res, raw)
        want, job = self.pending.pop(0)
        if want != name:  # sections are laid out in the study's order
            raise RuntimeError(f"figure feed out of order: {name} asked, {want} ready")
        self._submit()
        return job.get()

    def close(self) -> None:
        global _FEED_JOB
        if self.pool is not None:
            self.pool.terminate()
            self.pool.join()
            self.pool = None
        _FEED_JOB = None


class _SignatureBoxes:
    """Factory for a flowable that draws the digital-signature boxes and records where."""

    def __new__(cls, width, record: dict, styles):
        from reportlab.lib import colors
        from reportlab.platypus import Flowable

        class Boxes(Flowable):
            def __init__(self):
                super().__init__()
                self.width = width
                self.box_h = 62
                self.gap = 10
                self.height = len(SIGNATURE_ROLES) * (self.box_h + self.gap)

            def wrap(self, aw, ah):
                return self.width, self.height

            def draw(self):
                c = self.canv
                page = c.getPageNumber() - 1
                for i, role in enumerate(SIGNATURE_ROLES):
                    y = self.height - (i + 1) * (self.box_h + self.gap) + self.gap
                    c.setStrokeColor(colors.HexColor(theme.RULE))
                    c.setLineWidth(0.8)
                    c.setDash(3, 2)
                    c.rect(0, y, self.width, self.box_h)
                    c.setDash()
                    c.setFillColor(colors.HexColor(theme.INK_SOFT))
                    c.setFont(styles["small"].fontName, 7)
                    c.drawString(
                        4, y + self.box_h - 9, f"Digital signature - {names.role_label(role)}"
                    )
                    x1, y1 = c.absolutePosition(0, y)
                    x2, y2 = c.absolutePosition(self.width, y + self.box_h - 12)
                    record[role] = [page, round(x1, 2), round(y1, 2), round(x2, 2), round(y2, 2)]

        return Boxes()


def _pdf_timestamp(when: str):
    """A reportlab time stamp at ``when`` (ISO 8601 UTC) for the PDF's creation date: the
    study's own time (its latest decision, comment or sign-off), so the same study gives the
    same bytes; None when the study records no time (reportlab's fixed date then)."""
    import calendar
    import datetime as dt

    from reportlab.lib.utils import TimeStamp

    try:
        moment = dt.datetime.fromisoformat(str(when).replace("Z", "+00:00"))
    except ValueError:
        return None
    if moment.tzinfo is not None:
        moment = moment.astimezone(dt.UTC)
    stamp = TimeStamp(1)
    stamp.t = calendar.timegm(moment.timetuple())
    stamp.lt = tuple(moment.timetuple())
    stamp.YMDhms = stamp.lt[:6]
    return stamp


class _Deferred:
    """A place in the story filled by ``make()`` (a list of flowables) only when the layout
    reaches it (:class:`_StreamingDoc`): a section's figures are drawn, laid out and freed one
    section at a time, so memory does not grow with the number of characteristics."""

    def __init__(self, make: Callable[[], list]):
        self.make = make

    def getKeepWithNext(self) -> bool:  # noqa: N802 - asked by reportlab's keep-with-next
        return False


def _StreamingDoc(*args, **kwargs):  # noqa: N802 - a document-template factory
    """reportlab's ``SimpleDocTemplate`` that expands :class:`_Deferred` places on arrival."""
    from reportlab.platypus import SimpleDocTemplate

    class StreamingDoc(SimpleDocTemplate):
        def filterFlowables(self, flowables):  # noqa: N802 - reportlab's hook
            while flowables and isinstance(flowables[0], _Deferred):
                flowables[0:1] = flowables[0].make() or [None]  # None: skipped by reportlab
            super().filterFlowables(flowables)

    return StreamingDoc(*args, **kwargs)


def _numbered_canvas(footer_left: str, header: str, when: str = "", record: dict | None = None):
    """The canvas class of the report: every page gets its header and "page N of M" footer
    when the document is saved (M known then); ``record["pages"]`` is set to M."""
    from reportlab.lib import colors
    from reportlab.pdfgen import canvas

    stamp = _pdf_timestamp(when) if when else None

    class NumberedCanvas(canvas.Canvas):
        def __init__(self, *args, **kwargs):
            kwargs["invariant"] = 1
            super().__init__(*args, **kwargs)
            if stamp is not None:  # the study's time, not reportlab's fixed 2000-01-01
                self._doc._timeStamp = stamp
            self._saved = []

        def showPage(self):
            state = dict(self.__dict__)
            if len(self._code) > 1:
                # the page's operators kept as the one text reportlab makes of them when
                # the page is written (joined by newlines), not thousands of small strings
                # until the end: the same bytes in a fraction of the memory
                state["_code"] = ["\n".join(self._code)]
            self._saved.append(state)
            self._startPage()

        def save(self):
            total = len(self._saved)
            if record is not None:
                record["pages"] = total
            for state in self._saved:
                self.__dict__.update(state)
                self._decorate(total)
                super().showPage()
            super().save()

        def _decorate(self, total):
            w, h = self._pagesize
            self.saveState()
            self.setStrokeColor(colors.HexColor(theme.RULE))
            self.setLineWidth(0.6)
            self.line(18 * 2.835, 14 * 2.835, w - 18 * 2.835, 14 * 2.835)
            self.setFont("SKSans", 7.5)
            self.setFillColor(colors.HexColor(theme.INK_SOFT))
            self.drawString(18 * 2.835, 10 * 2.835, footer_left)
            self.drawRightString(w - 18 * 2.835, 10 * 2.835, f"page {self._pageNumber} of {total}")
            if self._pageNumber > 1:
                self.line(18 * 2.835, h - 13 * 2.835, w - 18 * 2.835, h - 13 * 2.835)
                self.drawString(18 * 2.835, h - 11.5 * 2.835, header)
                self.drawRightString(
                    w - 18 * 2.835, h - 11.5 * 2.835, "studykit capability evidence"
                )
            self.restoreState()

    return NumberedCanvas


# ---------------------------------------------------------------------------------------------
# sections


def _data_file_rows(study) -> list[list[str]]:
    """One row per data file of the study: name and size, then its SHA-256."""
    rows = []
    files = study.files
    for i, (name, blob) in enumerate(files, start=1):
        label = "Measurement file" if len(files) == 1 else f"Measurement file {i} of {len(files)}"
        rows.append(
            [
                label,
                f"{escape_text(name)} ({len(blob):,} bytes)<br/><font size=7>SHA-256 "
                f"{hashlib.sha256(blob).hexdigest()}</font>",
            ]
        )
    return rows


def _chain_text(chain) -> str:
    if not chain:
        return "– (not made from a study file)"
    eid, _, h = str(chain.get("head", "")).partition(":")
    return (
        f"entry {escape_text(eid)} of {int(chain.get('entries', 0))}<br/><font size=7>"
        f"{escape_text(h)}</font>"
    )


def _cover(story, study, results, errors, st, width, evidence_sha, chain=None):
    from reportlab.platypus import Paragraph, Spacer

    story.append(Spacer(1, 18))
    story.append(Paragraph("Capability evidence report", st["title"]))
    story.append(Paragraph(escape_text(study.title), st["subtitle"]))
    facts = [
        ["Part", escape_text(study.part or "–")],
        ["Supplier", escape_text(study.supplier or "–")],
        *_data_file_rows(study),
        ["Study content digest", f"<font size=7>{study.content_digest()}</font>"],
        ["Audit chain head", _chain_text(chain)],
        ["Study state as of", escape_text(_last_time(study) or "–")],
        ["Produced by", f"studykit {__version__}"],
    ]
    story.append(
        grid_table(facts, [42 * 2.835, width - 42 * 2.835], header=False, zebra=False, styles=st)
    )
    story.append(Spacer(1, 12))
    critical = [n for n, c in study.characteristics.items() if c.safety_critical]
    if critical:
        from studykit.analysis import SAFETY_CAUTION

        v = theme.VERDICTS["caution"]
        story.append(
            framed_box(
                [
                    Paragraph(
                        f"<b>! Safety-critical:</b> {escape_text(', '.join(critical))}", st["body"]
                    ),
                    Paragraph(escape_text(SAFETY_CAUTION), st["body"]),
                ],
                background=v.background,
                border=v.color,
                width=width,
            )
        )
        story.append(Spacer(1, 10))
    story.append(Paragraph("Verdicts at a glance", st["h2"]))
    head = [
        "Characteristic",
        "Specification",
        "Chart / model",
        "Criterion",
        "Estimate",
        "Lower bound",
        "Verdict",
    ]
    rows = [head]
    verdict_rows = []
    for name, c in study.characteristics.items():
        res = results.get(name)
        spec = _spec_text(c)
        crit = study.criteria_for(name).describe()
        if res is None:
            rows.append(
                [
                    escape_text(name),
                    spec,
                    "–",
                    escape_text(crit),
                    "–",
                    "–",
                    f"<b>{names.verdict_label(None)}</b>",
                ]
            )
            verdict_rows.append("pending")
            continue
        model = res.model.label if res.model is not None else "–"
        chart = names.chart_kind_label(res.chart.kind)
        key = _verdict_key(res)
        v = theme.VERDICTS[key]
        label = names.verdict_label(res)
        if res.attribute and res.verdict is None:
            crit = "rate with upper bound (counted data)"
        elif res.attribute:  # p/np: judged as process Z / 3 from the bound on the rate
            crit = f"{crit}, as Z/3 of the rate bound"
        est = lb = "–"
        if res.verdict is not None:
            est, lb = _idx(res.verdict.estimate), _idx(res.verdict.lower_bound)
        elif res.attribute_capability is not None:
            ac = res.attribute_capability
            if getattr(ac, "defective_rate", None) is not None:
                est = f"{ac.defective_rate * 100:.3g}% defective"
                lb = f"upper {ac.defective_rate_upper_bound * 100:.3g}%"
            elif getattr(ac, "dpu", None) is not None:
                est = f"{ac.dpu:.3g} per unit"
                lb = f"upper {ac.dpu_upper_bound:.3g}"
        caution_colour = theme.VERDICTS["caution"].text_color
        safety = f" <font color='{caution_colour}'>(!)</font>" if c.safety_critical else ""
        rows.append(
            [
                f"<b>{escape_text(name)}</b>{safety}"
                + (f" [{escape_text(res.unit)}]" if res.unit else ""),
                spec,
                f"{chart} / {escape_text(model)}",
                escape_text(crit),
                est,
                lb,
                f"<font color='{v.text_color}'><b>{v.symbol} {label}</b></font>",
            ]
        )
        verdict_rows.append(key)
    t = grid_table(rows, [w * width for w in (0.23, 0.14, 0.14, 0.15, 0.1, 0.1, 0.14)], styles=st)
    from reportlab.lib import colors

    for r, key in enumerate(verdict_rows, start=1):
        v = theme.VERDICTS[key]
        t.setStyle([("BACKGROUND", (6, r), (6, r), colors.HexColor(v.background))])
    story.append(t)
    n_pass = sum(1 for k in verdict_rows if k == "pass")
    story.append(Spacer(1, 6))
    story.append(
        Paragraph(
            f"{n_pass} of {len(verdict_rows)} characteristic(s) meet their criterion. "
            "(!) marks a safety-critical characteristic. Estimates and bounds are printed with two "
            "decimals; the embedded evidence file holds them in full.",
            st["small"],
        )
    )
    if errors:
        story.append(Spacer(1, 6))
        for name, msg in errors.items():
            story.append(
                Paragraph(
                    f"<b>{escape_text(name)}</b> could not be analysed: {escape_text(msg)}",
                    st["body"],
                )
            )
    states = study.signoff_state()
    story.append(Paragraph("Sign-off status", st["h2"]))
    if not states:
        story.append(Paragraph("No one has signed this study yet.", st["body"]))
    else:
        for s in states:
            so = s.signoff
            word = "still valid" if s.valid else f"VOIDED ({escape_text(s.why)})"
            story.append(
                Paragraph(
                    f"{escape_text(names.role_label(so.role))}: {escape_text(so.name)} - "
                    f"{escape_text(names.decision_label(so.decision))} "
                    f"on {escape_text(so.when)}, {word}",
                    st["body"],
                )
            )
    story.append(Spacer(1, 8))
    story.append(
        Paragraph(f"Evidence file SHA-256: <font size=7>{evidence_sha}</font>", st["small"])
    )


def _when(text: str) -> str:
    """ISO time shown compactly (``2026-03-03 09:12:00Z``), so table cells do not wrap."""
    return escape_text(str(text or "").replace("T", " "))


def _last_time(study) -> str:
    times = (
        [d.when for d in study.decisions]
        + [c.when for c in study.comments]
        + [s.when for s in study.signoffs]
    )
    times = [t for t in times if t]
    return max(times) if times else ""


def _spec_text(c) -> str:
    parts = []
    if c.lsl is not None:
        parts.append(f"LSL {c.lsl:g}")
    if c.target is not None:
        parts.append(f"T {c.target:g}")
    if c.usl is not None:
        parts.append(f"USL {c.usl:g}")
    return escape_text(", ".join(parts) or ("attribute" if c.is_attribute else "–"))


def _characteristic_section(story, number, name, res, study, raw, st, width, figures_cache):
    """One characteristic's section: heading and verdict, the facts, stability (phase I), then
    for measured values with a probability plot the shape and model, capability and the
    closing blocks (streams, time model, findings, planning, warnings)."""
    c = study.characteristic(name)
    images = figures_cache if figures_cache is not None else _LazyImages(res, raw)
    _section_heading(story, number, name, res, c, st, width)
    _facts_table(story, name, res, c, study, st, width)
    _stability_block(story, res, c, images["control"], st, width)
    if res.attribute:
        _attribute_block(story, res, st, width)
        _warnings_block(story, res, st)
        return
    if res.probability_plot is None:
        _warnings_block(story, res, st)
        return
    _shape_block(story, res, images["shape"], st, width)
    if res.capability is not None:
        _capability_block(story, res, st, width)
    _closing_blocks(story, res, st, width)


def _section_heading(story, number, name, res, c, st, width) -> None:
    """Heading, the safety caution, the description and the verdict box (the reader's
    question first)."""
    from reportlab.platypus import Paragraph, Spacer

    unit = f" [{escape_text(res.unit)}]" if res.unit else ""
    story.append(Paragraph(f"{number}. {escape_text(name)}{unit}", st["h1"]))
    if res.cautions:
        v = theme.VERDICTS["caution"]
        story.append(
            framed_box(
                [Paragraph("<b>! Safety-critical characteristic</b>", st["body"])]
                + [Paragraph(escape_text(t), st["body"]) for t in res.cautions],
                background=v.background,
                border=v.color,
                width=width,
            )
        )
        story.append(Spacer(1, 6))
    if c.description:
        story.append(Paragraph(escape_text(c.description), st["small"]))
    v = theme.VERDICTS[_verdict_key(res)]
    if res.verdict is not None:
        story.append(
            framed_box(
                [
                    Paragraph(
                        f"<font color='{v.text_color}'><b>{v.symbol} "
                        f"{names.verdict_label(res)}"
                        f"</b></font> - {escape_text(res.verdict.text)}",
                        st["body"],
                    )
                ],
                background=v.background,
                border=v.color,
                width=width,
            )
        )
    story.append(Spacer(1, 6))


def _facts_table(story, name, res, c, study, st, width) -> None:
    """Specification, criterion, values used, removals, centre, chart and the two sigmas."""
    chart = res.chart
    criterion = escape_text(study.criteria_for(name).describe())
    facts = [
        ["Specification", _spec_text(c), "Criterion", criterion],
        [
            "Values used",
            (
                f"{res.n} individual values"
                if chart.kind == "imr"
                else f"{res.n} in {res.subgroups} subgroups"
                + (f" of {res.subgroup_size}" if res.subgroup_size else "")
            ),
            "Removed",
            f"{len(res.phase1.removals)} subgroup(s)"
            + (f", {res.n_missing} empty cell(s)" if res.n_missing else ""),
        ],
        [
            "Centre" if res.attribute else "Mean",
            number_text(res.mean, 6)
            if c.lsl is None or c.usl is None or res.attribute
            else names.format_value(res.mean, c.lsl, c.usl),
            "Chart",
            f"{names.chart_kind_label(chart.kind)} ({escape_text(chart.reason)})",
        ],
    ]
    if not res.attribute:
        sigma_text = (res.phase1.raw_chart or chart).sigma_method_text  # raw values' sigma
        facts.append(
            [
                "Within sigma",
                names.format_spread(res.within_sigma, c.lsl, c.usl)
                + (f" ({escape_text(sigma_text)})" if sigma_text else ""),
                "Overall sigma",
                names.format_spread(res.overall_sigma, c.lsl, c.usl) + " (sample, n - 1)",
            ]
        )
    else:
        facts[0][3] = (
            f"read as process Z / 3 from the exact upper bound on the defective rate ({criterion})"
            if chart.kind in ("p", "np")
            else "not judged by an index (counted data; see the defects per unit below)"
        )
    q = width / 4
    story.append(
        grid_table(
            facts, [0.8 * q, 1.35 * q, 0.7 * q, 1.15 * q], header=False, zebra=False, styles=st
        )
    )


def _stability_block(story, res, c, control_image, st, width) -> None:
    """Phase I: the control chart of the final limits, the model-scale note, the run-rule
    signals, the removal log and the signals kept with a reason."""
    from reportlab.platypus import Paragraph

    story.append(Paragraph("Stability (phase I)", st["h2"]))
    story.append(_picture(control_image, width))
    if res.chart_scale_text:  # phase I judged on the model's scale
        story.append(Paragraph(escape_text(_scale_note(res, c)), st["body"]))
    _signals_block(story, res, st)
    _removal_log(story, res, st, width)
    _kept_signals_block(story, res, st, width)


def _scale_note(res, c) -> str:
    """Phase I charted on the model's scale, with the limits in measured units."""
    note = f"Charted on the model's scale: {res.chart_scale_text}."
    pl = res.probability_limits
    if pl is not None:
        note += (
            f" In measured units the limits are LCL {names.format_value(pl['lcl'], c.lsl, c.usl)}, "
            f"centre {names.format_value(pl['center'], c.lsl, c.usl)}, "
            f"UCL {names.format_value(pl['ucl'], c.lsl, c.usl)}."
        )
    return note


def _signal_lines(chart) -> list[str]:
    """One line per run-rule signal on the final limits (part, test, text, subgroups)."""
    lines = []
    for part, s in (("location", chart.location), ("dispersion", chart.dispersion)):
        if s is None:
            continue
        for sig in s.signals:
            pos = [int(p) for p in sig.points]
            if part == "dispersion" and chart.kind == "imr":
                # a moving range at reading p is |x_p - x_(p-1)|: it points at both readings
                pos = sorted({q for p in pos for q in (p - 1, p) if q >= 0})
            labels = [str(chart.labels[p]) for p in pos]
            lines.append(
                f"{names.chart_part_label(chart.kind, part).capitalize()}, "
                f"Nelson test {sig.number}: {escape_text(sig.text)} "
                f"(subgroup(s) {escape_text(', '.join(labels[:12]))}"
                f"{'...' if len(labels) > 12 else ''})"
            )
    return lines


def _signals_block(story, res, st) -> None:
    """The signals on the final limits (at most 20), or why there are none."""
    from reportlab.platypus import Paragraph

    chart = res.chart
    rule_set = escape_text(names.rule_set_label(chart.location.rules))
    signals = _signal_lines(chart)
    if signals:
        story.append(Paragraph(f"Signals on the final limits ({rule_set}):", st["body"]))
        for s in signals[:20]:
            story.append(Paragraph(s, st["bullet"], bulletText="•"))
    elif res.order is not None and res.order.flagged:
        story.append(
            Paragraph(
                "Run rules not applied: the values are not in production "
                "order, so stability could not be judged from them (see the "
                "findings).",
                st["body"],
            )
        )
    else:
        story.append(Paragraph(f"No run-rule signal on the final limits ({rule_set}).", st["body"]))


def _removal_log(story, res, st, width) -> None:
    """The subgroups phase I removed (who, which rule, why), or a line saying none was."""
    from reportlab.platypus import KeepTogether, Paragraph, Spacer

    if not res.phase1.removals:
        story.append(Paragraph("No subgroup was removed.", st["body"]))
        return
    story.append(Spacer(1, 4))
    rows = [["Subgroup", "Rule", "Round", "Who", "Reason"]]
    for r in res.phase1.removals:
        rows.append(
            [
                escape_text(r.label),
                escape_text(names.rule_label(r.rule)),
                str(r.iteration),
                escape_text(r.who or "–"),
                escape_text(r.reason),
            ]
        )
    story.append(
        KeepTogether(
            [
                Paragraph("Removal log", st["cellb"]),
                grid_table(rows, [w * width for w in (0.12, 0.1, 0.08, 0.15, 0.55)], styles=st),
            ]
        )
    )


def _shape_block(story, res, shape_image, st, width) -> None:
    """Shape and model: the histogram and probability plot, normality tests, the model used
    and why, the model list and the band of the index across the models not rejected."""
    from reportlab.platypus import CondPageBreak, Paragraph, Spacer

    story.append(CondPageBreak(260))
    story.append(Paragraph("Shape and model", st["h2"]))
    story.append(_picture(shape_image, width))
    nm = res.normality or {}
    ad, sw = nm.get("anderson_darling"), nm.get("shapiro_wilk")
    if ad is not None:
        story.append(
            Paragraph(
                f"Normality of the values used: Anderson-Darling A² = {number_text(ad.a2)} "
                f"(A*² = {number_text(ad.a2_star)}, p = {names.format_p(ad.p_value)})"
                + (
                    f"; Shapiro-Wilk W = {number_text(sw.w)} (p = {names.format_p(sw.p_value)})."
                    if sw is not None
                    else "."
                ),
                st["body"],
            )
        )
    if res.model is not None:
        params = ", ".join(
            f"{k} = {number_text(val, 5)}" for k, val in res.model.parameters.items()
        )
        story.append(
            Paragraph(
                f"<b>Model used: {escape_text(res.model.label)}</b>"
                + (f" ({escape_text(params)})" if params else "")
                + f". Why: {escape_text(res.model.reason)}.",
                st["body"],
            )
        )
    if res.ranking is not None:
        _model_list_pdf(story, res, st, width)
    if res.model_band is not None:
        mb = res.model_band
        text = (
            f"{names.MODEL_BAND}: across the models the data do not reject, the judged index "
            f"({mb.quantity}) ranges from {_idx(mb.low)} ({escape_text(names.model_list(mb.low_models))}) to "
            f"{_idx(mb.high)} ({escape_text(names.model_list(mb.high_models))})."
        )
        if mb.warning:
            text += " " + escape_text(mb.warning)
        story.append(Spacer(1, 4))
        story.append(Paragraph(text, st["body"]))


def _capability_rows(res) -> list[list[str]]:
    """The capability table: each index with its estimate, one-sided lower bound, two-sided
    interval and bound method; the judged one marked (a time-dependent class judged on its own
    index gets a row of its own)."""
    cap = res.capability
    level = cap.level
    rows = [
        [
            "Index",
            "Estimate",
            f"Lower {level * 100:g}% bound (one-sided)",
            f"Two-sided {level * 100:g}% interval",
            "Bound method",
        ]
    ]
    judged_key = res.verdict.index if res.verdict is not None else res.criteria.get("index")
    by_class = (res.time_model.judged or {}) if res.time_model is not None else {}
    if by_class.get("basis") == "class_method":
        judged_key = None  # judged on the class's own index: the extra row below
    for k in ("cp", "cpk", "pp", "ppk", "cpm"):
        est = getattr(cap, k)
        b = (cap.bounds or {}).get(k) or {}
        if est is None:
            continue
        judged = " (judged)" if k == judged_key else ""
        rows.append(
            [
                f"<b>{_index_name(k)}</b>{judged}",
                _idx(est),
                _idx(b.get("lower_bound")),
                f"{_idx(b.get('lower'))} to {_idx(b.get('upper'))}"
                if b.get("lower") is not None
                else "–",
                escape_text(names.bound_method_label(b.get("method", "–"))),
            ]
        )
    if by_class.get("basis") == "class_method":
        rows.append(
            [
                f"<b>{_index_name(by_class['index'])}</b> by the time-dependent model "
                f"{escape_text(res.time_model.cls)} (judged)",
                _idx(by_class.get("estimate")),
                _idx(by_class.get("lower_bound")),
                "–",
                "parametric bootstrap of the class model",
            ]
        )
    return rows


def _ppm_text(res) -> str:
    """Expected and observed parts per million outside the specification, the method and the
    convention of the indices."""
    from studykit.analysis import capability_method_text

    cap = res.capability
    ppm = (
        f"Expected parts per million outside the specification: overall "
        f"{number_text(cap.ppm_overall, 3)}"
    )
    if cap.ppm_within is not None:
        ppm += f", within {number_text(cap.ppm_within, 3)}"
    ppm += (
        f"; observed {number_text(cap.ppm_observed, 3)}. Method: "
        f"{escape_text(names.bound_method_label(cap.method))}."
    )
    convention = capability_method_text(
        cap.to_dict(), None if res.model is None else res.model.to_dict()
    )
    return ppm + " Convention: " + escape_text(convention) + "."


def _capability_block(story, res, st, width) -> None:
    """Capability: the index table, the PPM sentence and the interval drawing."""
    from reportlab.platypus import CondPageBreak, Paragraph, Spacer

    story.append(CondPageBreak(220))
    story.append(Paragraph("Capability", st["h2"]))
    story.append(
        grid_table(
            _capability_rows(res), [w * width for w in (0.16, 0.13, 0.25, 0.24, 0.22)], styles=st
        )
    )
    story.append(Spacer(1, 3))
    story.append(Paragraph(_ppm_text(res), st["body"]))
    story.append(Spacer(1, 4))
    story.append(_interval_drawing(res, width, st))


def _closing_blocks(story, res, st, width) -> None:
    """Several streams, the time-dependent class (ISO 22514-2), findings, demonstration
    planning and warnings."""
    from reportlab.platypus import Paragraph

    from studykit.report.streams import streams_block  # several streams (cavities...)
    from studykit.report.time_model import time_model_block  # ISO 22514-2 class

    streams_block(story, res, st, width, table=grid_table, image=pdf_image, esc=escape_text)
    time_model_block(story, res, st, width, table=grid_table, esc=escape_text)
    if res.findings:
        story.append(Paragraph("Findings", st["h2"]))
        for f in res.findings:
            story.append(Paragraph(escape_text(f.text), st["bullet"], bulletText="•"))
    if res.plan is not None:
        story.append(Paragraph("Demonstration planning", st["h2"]))
        story.append(Paragraph(escape_text(res.plan.text), st["body"]))
    _warnings_block(story, res, st)


def _interval_drawing(res, width, st):
    """Each index: estimate (dot), two-sided interval (bar), one-sided lower bound (tick),
    against the required threshold (dash-dot line). Vector graphics, drawn by reportlab (the
    matplotlib version is :func:`studykit.report.figures.interval_figure`)."""
    from reportlab.graphics.shapes import Circle, Drawing, Line, String
    from reportlab.lib import colors

    cap = res.capability
    rows = []
    for key in ("cp", "cpk", "pp", "ppk", "cpm"):
        est = getattr(cap, key, None)
        if est is None or not math.isfinite(est):
            continue
        rows.append((key, float(est), (cap.bounds or {}).get(key) or {}))
    threshold = float(res.criteria.get("threshold", 1.33))
    values = [threshold] + [
        v
        for _, e, b in rows
        for v in (e, b.get("lower"), b.get("upper"), b.get("lower_bound"))
        if v is not None and math.isfinite(v)
    ]
    lo, hi = min(values), max(values)
    pad = 0.06 * (hi - lo or 1.0)
    lo, hi = lo - pad, hi + pad
    row_h, top, bottom, left, right = 17, 22, 24, 78, 12
    height = top + bottom + row_h * max(len(rows), 1)
    d = Drawing(width, height)
    font = st["small"].fontName
    ink, soft, rule = (
        colors.HexColor(theme.INK),
        colors.HexColor(theme.INK_SOFT),
        colors.HexColor(theme.RULE),
    )

    def x(v):
        return left + (v - lo) / (hi - lo) * (width - left - right)

    level = (cap.level or 0.95) * 100
    d.add(
        String(
            0,
            height - 11,
            f"Estimate (dot), two-sided {level:g}% interval (bar), "
            f"one-sided lower {level:g}% bound (tick); required {threshold:g} (dash-dot)",
            fontName=st["cellb"].fontName,
            fontSize=8,
            fillColor=ink,
        )
    )
    # axis with ticks
    y0 = bottom - 6
    d.add(Line(left, y0, width - right, y0, strokeColor=soft, strokeWidth=0.6))
    span = hi - lo
    step = 10 ** math.floor(math.log10(span / 5)) if span > 0 else 1
    for mult in (1, 2, 5, 10):
        if span / (step * mult) <= 7:
            step *= mult
            break
    t = math.ceil(lo / step) * step
    while t <= hi:
        d.add(Line(x(t), y0, x(t), height - top + 4, strokeColor=rule, strokeWidth=0.4))
        d.add(
            String(
                x(t),
                y0 - 10,
                f"{t:.3g}",
                fontName=font,
                fontSize=7,
                fillColor=soft,
                textAnchor="middle",
            )
        )
        t += step
    spec = theme.ROLES["spec_limit"]
    d.add(
        Line(
            x(threshold),
            y0,
            x(threshold),
            height - top + 4,
            strokeColor=colors.HexColor(spec.color),
            strokeWidth=1.4,
            strokeDashArray=[5, 2, 1, 2],
        )
    )
    judged = res.criteria.get("index")
    for i, (key, est, b) in enumerate(rows):
        y = height - top - row_h * (i + 0.5)
        col = colors.HexColor(theme.OKABE_ITO["black" if key == judged else "blue"])
        name = _index_name(key) + (" (judged)" if key == judged else "")
        d.add(
            String(
                left - 6,
                y - 3,
                name,
                fontName=st["cellb"].fontName if key == judged else font,
                fontSize=8,
                fillColor=ink,
                textAnchor="end",
            )
        )
        if b.get("lower") is not None and b.get("upper") is not None:
            d.add(Line(x(b["lower"]), y, x(b["upper"]), y, strokeColor=col, strokeWidth=2.4))
        if b.get("lower_bound") is not None:
            d.add(
                Line(
                    x(b["lower_bound"]),
                    y - 6,
                    x(b["lower_bound"]),
                    y + 6,
                    strokeColor=col,
                    strokeWidth=2.2,
                )
            )
        d.add(Circle(x(est), y, 3.2, fillColor=col, strokeColor=colors.white, strokeWidth=0.6))
    return d


def _attribute_block(story, res, st, width):
    from reportlab.platypus import Paragraph

    ac = res.attribute_capability
    if ac is None:
        return
    story.append(Paragraph("Attribute capability", st["h2"]))
    rows = [["Quantity", "Value"]]
    for k, v in ac.to_dict().items():
        if isinstance(v, int | float) and not isinstance(v, bool):
            rows.append([escape_text(k.replace("_", " ")), number_text(v, 5)])
        elif isinstance(v, str) and len(v) < 120:
            shown = names.bound_method_label(v) if k == "method" else v
            rows.append([escape_text(k.replace("_", " ")), escape_text(shown)])
    story.append(grid_table(rows, [0.4 * width, 0.6 * width], styles=st))


def _kept_signals_block(story, res, st, width) -> None:
    """Signals kept with a reason (reviewed: not a special cause, or a known common cause)."""
    kept = getattr(res, "kept_signals", ()) or ()
    if not kept:
        return
    from reportlab.platypus import KeepTogether, Paragraph, Spacer

    rows = [["Subgroup", "Rule", "From", "Who", "Reason"]]
    for k in kept:
        origin = "rejected proposal" if k["origin"] == "rejected_proposal" else "person"
        rows.append(
            [
                escape_text(k["subgroup"]),
                escape_text(names.rule_label(k["rule"])),
                origin,
                escape_text(k["who"] or "–"),
                escape_text(k["reason"]) + ("" if k["on_chart"] else " (no such signal now)"),
            ]
        )
    story.append(Spacer(1, 4))
    story.append(
        KeepTogether(
            [
                Paragraph(
                    "Signals kept with a reason (reviewed; the subgroups stay in the analysis)",
                    st["cellb"],
                ),
                grid_table(rows, [w * width for w in (0.12, 0.14, 0.14, 0.15, 0.45)], styles=st),
            ]
        )
    )


def _model_list_pdf(story, res, st, width):
    """The fitted families, each once, the threshold variant inside its family's row
    (:mod:`studykit.report.model_list`, the same list as the workbook's shape step)."""
    from reportlab.platypus import KeepTogether, Paragraph, Spacer

    from studykit.report import model_list

    L = model_list.LABELS
    chosen = res.model.name if res.model is not None else None
    lines = model_list.family_lines(res.ranking)

    def aic(row):
        if row is None:
            return "–"
        text = "not fitted" if row.error else number_text(row.aic, 6)
        return text + (f" {L['used']}" if row.id == chosen else "")

    rows = [
        [
            "#",
            L["family"],
            f"{L['aic']}, {L['plain'].lower()}",
            f"{L['aic']}, {L['shifted'].lower()}",
            L["effect"],
        ]
    ]
    for line in lines[:8]:
        rows.append(
            [
                str(line.rank),
                escape_text(line.name),
                escape_text(aic(line.plain)),
                escape_text(aic(line.shifted)),
                escape_text(model_list.threshold_effect(line, _fixed)),
            ]
        )
    story.append(Spacer(1, 4))
    story.append(
        KeepTogether(
            [
                Paragraph(
                    f"{L['title']} (best {len(rows) - 1} of {len(lines)}; "
                    f"{escape_text(L['rule'])} {escape_text(res.ranking.rule)})",
                    st["cellb"],
                ),
                grid_table(rows, [w * width for w in (0.05, 0.22, 0.16, 0.16, 0.41)], styles=st),
                Paragraph(escape_text(model_list.SOURCE), st["small"]),
            ]
        )
    )


def _warnings_block(story, res, st):
    from reportlab.platypus import Paragraph

    if res.warnings:
        story.append(Paragraph("Read with care", st["h2"]))
        for w in res.warnings:
            story.append(Paragraph(escape_text(w), st["bullet"], bulletText="!"))


def _gauge_section(story, number, gauges, study, st, width):
    from reportlab.platypus import CondPageBreak, KeepTogether, Paragraph, Spacer

    story.append(Paragraph(f"{number}. Measurement system (gauge R&amp;R)", st["h1"]))
    for name, payload in gauges.items():
        story.append(CondPageBreak(200))
        story.append(
            Paragraph(
                f"{escape_text(name)}: {payload.get('n_parts')} parts x "
                f"{payload.get('n_appraisers')} appraisers x "
                f"{payload.get('n_trials')} trials"
                + (
                    f" (file {escape_text(payload.get('source_file'))})"
                    if payload.get("source_file")
                    else ""
                ),
                st["h2"],
            )
        )
        verdict = payload.get("verdict") or {}
        if isinstance(verdict, dict) and verdict.get("text"):
            ok = verdict.get("acceptable")
            key = "pass" if ok else ("fail" if ok is False else "caution")
            v = theme.VERDICTS[key]
            story.append(
                framed_box(
                    [Paragraph(escape_text(verdict.get("text")), st["body"])],
                    background=v.background,
                    border=v.color,
                    width=width,
                )
            )
            story.append(Spacer(1, 4))
        _gauge_tables_pdf(story, payload, st, width)
        res = _gauge_result(payload)
        if res is not None:
            from studykit.report import gauge_figures

            # the figures in the order of the verdict's story, each with its caption
            for key, _title, caption in gauge_figures.story(res):
                try:
                    fig = getattr(gauge_figures, f"{key}_figure")(res)
                except Exception:  # noqa: BLE001 - a figure must never stop the report
                    continue
                story.append(
                    KeepTogether(
                        [pdf_image(fig, width * 0.85), Paragraph(escape_text(caption), st["small"])]
                    )
                )
                story.append(Spacer(1, 4))
        _gauge_full_anova_pdf(story, payload, st, width)


def _gauge_tables_pdf(story, payload, st, width):
    """The components in words, then the ANOVA actually used (headers from gauge_tables)."""
    from reportlab.platypus import Paragraph, Spacer

    from studykit.report import gauge_tables as gt

    tolerance = payload.get("tolerance") is not None
    rows = [gt.component_headers(payload.get("study_variation"), tolerance=tolerance)]
    for comp in payload.get("components", []):
        row = [
            escape_text(gt.component_name(str(comp.get("name", "")))),
            number_text(comp.get("variance")),
            _pct_cell(comp.get("pct_contribution")),
            number_text(comp.get("sigma")),
            number_text(comp.get("study_variation")),
            _pct_cell(comp.get("pct_study_variation")),
        ]
        if tolerance:
            row.append(_pct_cell(comp.get("pct_tolerance")))
        rows.append(row)
    widths = (
        (0.25, 0.12, 0.12, 0.12, 0.13, 0.13, 0.13)
        if tolerance
        else (0.28, 0.14, 0.14, 0.14, 0.15, 0.15)
    )
    story.append(Paragraph(gt.LABELS["components_title"], st["cellb"]))
    story.append(grid_table(rows, [w * width for w in widths], styles=st))
    story.append(Spacer(1, 3))
    story.append(
        Paragraph(
            f"Distinct categories (ndc): {payload.get('ndc', '–')}. "
            f"Method: {escape_text(payload.get('method', ''))}.",
            st["body"],
        )
    )
    story.append(Spacer(1, 3))
    story.append(Paragraph(gt.LABELS["anova_used_title"], st["cellb"]))
    story.append(Paragraph(escape_text(gt.anova_note(payload, _fixed)), st["small"]))
    story.append(
        grid_table(
            _gauge_anova_rows(payload.get("anova_used")),
            [w * width for w in (0.3, 0.14, 0.16, 0.16, 0.12, 0.12)],
            styles=st,
        )
    )
    story.append(Spacer(1, 4))


def _gauge_full_anova_pdf(story, payload, st, width):
    """After pooling: the full model, for reference (the components do not come from it)."""
    from reportlab.platypus import KeepTogether, Paragraph

    from studykit.report import gauge_tables as gt

    if not gt.show_full_anova(payload):
        return
    story.append(
        KeepTogether(
            [
                Paragraph(gt.LABELS["anova_full_title"], st["cellb"]),
                grid_table(
                    _gauge_anova_rows(payload.get("anova_full")),
                    [w * width for w in (0.3, 0.14, 0.16, 0.16, 0.12, 0.12)],
                    styles=st,
                ),
            ]
        )
    )


def _gauge_anova_rows(rows_in):
    from studykit.report import gauge_tables as gt

    rows = [gt.anova_headers()]
    for r in rows_in or []:
        p = r.get("p")
        rows.append(
            [
                escape_text(gt.source_name(str(r.get("source", "")))),
                str(r.get("df", "–")),
                number_text(r.get("ss")),
                number_text(r.get("ms")),
                number_text(r.get("f"), 3),
                "–" if p is None else names.format_p(p),
            ]
        )
    return rows


def _fixed(v, digits: int) -> str:
    """``digits`` decimals (the workbook's ``fmt``), for the sentences shared with it."""
    return "–" if v is None else f"{float(v):.{digits}f}"


def _pct_cell(v) -> str:
    return "–" if v is None else f"{number_text(v, 3)} %"


def _gauge_result(payload):
    """Rebuild the stored GaugeResult (for its figures); nothing is computed again."""
    from studykit.stats.gauge import GaugeResult

    try:
        return GaugeResult.from_dict(payload)
    except (KeyError, TypeError, ValueError, IndexError):
        return None


def _signoff_digests(story, study, states, width, st):
    """Which content each sign-off signed (its digest) and whether that is this report's."""
    from reportlab.platypus import Paragraph

    current = study.content_digest()
    rows = [["Role", "Name", "Content digest signed", "Matches this report?"]]
    for s in states:
        so = s.signoff
        rows.append(
            [
                escape_text(names.role_label(so.role)),
                escape_text(so.name),
                f"<font size=6>{so.digest}</font>",
                "yes" if so.digest == current else "<b>no</b> - signed other content",
            ]
        )
    story.append(Paragraph("Content each sign-off signed", st["h2"]))
    story.append(grid_table(rows, [w * width for w in (0.11, 0.15, 0.52, 0.22)], styles=st))


def _signoff_section(story, number, study, st, width, boxes):
    from reportlab.platypus import CondPageBreak, Paragraph, Spacer

    story.append(Paragraph(f"{number}. Decisions and sign-off", st["h1"]))
    story.append(
        Paragraph(
            f"Current study content digest: <font size=7>"
            f"{study.content_digest()}</font>. A sign-off is valid only while "
            "the content it signed is unchanged.",
            st["body"],
        )
    )
    story.append(Paragraph("Recorded decisions", st["h2"]))
    if study.decisions:
        rows = [["When", "Who", "Characteristic", "Decision", "Reason"]]
        for d in study.decisions:
            what = names.action_label(d.action)
            if d.subgroup:
                what += f" subgroup {d.subgroup}"
            if d.payload:
                what += " " + ", ".join(f"{k}={v}" for k, v in d.payload.items())
            rows.append(
                [
                    _when(d.when),
                    escape_text(d.who or ("auto" if d.automatic else "–")),
                    escape_text(d.characteristic or "study"),
                    escape_text(what),
                    escape_text(d.reason),
                ]
            )
        story.append(
            grid_table(rows, [w * width for w in (0.17, 0.13, 0.16, 0.17, 0.37)], styles=st)
        )
    else:
        story.append(Paragraph("No decision recorded.", st["body"]))
    if study.comments:
        story.append(Paragraph("Comments", st["h2"]))
        rows = [["When", "Who", "About", "Comment"]]
        for cm in study.comments:
            rows.append(
                [
                    _when(cm.when),
                    escape_text(cm.who),
                    escape_text(cm.characteristic or "study"),
                    escape_text(cm.text),
                ]
            )
        story.append(grid_table(rows, [w * width for w in (0.17, 0.13, 0.16, 0.54)], styles=st))
    story.append(Paragraph("Sign-offs recorded in the study", st["h2"]))
    states = study.signoff_state()
    if states:
        rows = [["Role", "Name", "Decision", "When", "Comment", "State"]]
        for s in states:
            so = s.signoff
            rows.append(
                [
                    escape_text(names.role_label(so.role)),
                    escape_text(so.name),
                    escape_text(names.decision_label(so.decision)),
                    _when(so.when),
                    escape_text(so.comment or "–"),
                    names.SIGNOFF_VALID
                    if s.valid
                    else f"<b>{names.SIGNOFF_VOIDED}</b> - {escape_text(s.why)}",
                ]
            )
        story.append(
            grid_table(rows, [w * width for w in (0.11, 0.15, 0.11, 0.17, 0.26, 0.2)], styles=st)
        )
        _signoff_digests(story, study, states, width, st)
        heads = [
            f"{escape_text(names.role_label(s.signoff.role))} ({escape_text(s.signoff.name)}): entry "
            f"{escape_text(s.signoff.chain_head.partition(':')[0])} "
            f"<font size=6>{escape_text(s.signoff.chain_head.partition(':')[2])}</font>"
            for s in states
            if getattr(s.signoff, "chain_head", "")
        ]
        if heads:
            story.append(
                Paragraph(
                    "Audit chain head each sign-off signed: " + "; ".join(heads) + ".", st["small"]
                )
            )
    else:
        story.append(Paragraph("No sign-off recorded in the study.", st["body"]))
    story.append(CondPageBreak(280))
    story.append(Paragraph("Digital signatures on this document", st["h2"]))
    story.append(
        Paragraph(
            "Each signer adds a PDF signature (PAdES) with `studykit report "
            "--sign`; it appears in the box of its role. `studykit verify` checks "
            "that every signature is intact and names the certificate.",
            st["small"],
        )
    )
    story.append(Spacer(1, 6))
    story.append(_SignatureBoxes(width, boxes, st))


def _appendix(story, number, study, st, width, evidence_sha, chain=None):
    from reportlab.platypus import Paragraph

    story.append(Paragraph(f"{number}. Methods, sources and digests", st["h1"]))
    rows = [["Method", "Published source"]]
    for m, src in METHODS:
        rows.append([escape_text(m), escape_text(src)])
    story.append(grid_table(rows, [0.36 * width, 0.64 * width], styles=st))
    story.append(Paragraph("Software", st["h2"]))
    story.append(Paragraph(escape_text(_software_versions()), st["body"]))
    story.append(Paragraph("Digests (SHA-256)", st["h2"]))
    rows = [["What", "SHA-256"]]
    for name, blob in study.files:
        rows.append(
            [
                f"Raw data ({escape_text(name)}, {len(blob):,} bytes)",
                f"<font size=7>{hashlib.sha256(blob).hexdigest()}</font>",
            ]
        )
    rows += [
        [
            "Study content (data + effective decisions)",
            f"<font size=7>{study.content_digest()}</font>",
        ],
        [
            "Audit chain head of the study file"
            + (
                f" (entry {escape_text(str(chain.get('head', '')).partition(':')[0])})"
                if chain
                else ""
            ),
            f"<font size=7>{escape_text(str(chain.get('head', '')).partition(':')[2])}</font>"
            if chain
            else "– (not made from a study file)",
        ],
        [f"Embedded evidence ({EVIDENCE_FILENAME})", f"<font size=7>{evidence_sha}</font>"],
    ]
    story.append(grid_table(rows, [0.34 * width, 0.66 * width], styles=st))
    story.append(
        Paragraph(
            f"The file {EVIDENCE_FILENAME} embedded in this PDF holds every number reported here "
            "in full precision, the specifications, criteria and decisions. `studykit verify "
            "REPORT.pdf --data FILE ...` (every data file above, or --study FILE) recomputes the "
            "study, compares the numbers with "
            f"a relative tolerance of {RELATIVE_TOLERANCE:g} and redraws every page to compare it "
            "with this one. The audit chain head names the last entry of the study file's "
            "hash-chained audit log when the report was made.",
            st["small"],
        )
    )


def _software_versions() -> str:
    import matplotlib
    import numpy
    import reportlab
    import scipy

    return (
        f"studykit {__version__}; numpy {numpy.__version__}; scipy {scipy.__version__}; "
        f"matplotlib {matplotlib.__version__}; reportlab {reportlab.Version}."
    )


# ---------------------------------------------------------------------------------------------
# entry point


def render_pages(
    study,
    results: Mapping,
    errors: Mapping,
    measurements,
    gauges,
    *,
    chain: Mapping | None,
    evidence_sha: str,
    short_gauges: Mapping | None = None,
    progress: Callable[[int, int, str], None] | None = None,
    total: int = 0,
    positions: Mapping | None = None,
    out: str | os.PathLike | None = None,
    workers: int = 1,
    layout: dict | None = None,
) -> tuple[bytes | None, dict]:
    """Draw the report's pages (PDF bytes without the embedded evidence) and the signature
    boxes. Deterministic: the same inputs give the same bytes, which is how ``verify`` redraws
    a report from its evidence and compares every page. With ``out`` (a path) the pages are
    written to that file as they are laid out and None is returned instead of the bytes.
    ``workers`` > 1 renders the figures in that many forked processes (see
    :class:`_FigureFeed`); the bytes are the same. ``layout["pages"]`` (when given) receives
    the number of pages."""
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import mm
    from reportlab.platypus import PageBreak

    names = study.characteristic_names
    st = report_styles()
    page_w, page_h = A4
    margin = 18 * mm
    width = page_w - 2 * margin
    story: list = []
    _cover(story, study, results, errors, st, width, evidence_sha, chain)
    feed = _FigureFeed(results, measurements, [n for n in names if results.get(n) is not None])
    section = 1
    for i, name in enumerate(names):
        res = results.get(name)
        if res is None:
            if progress is not None:
                progress(len(names) + i + 1, total, f"skipped {name}")
            continue
        story.append(PageBreak())
        section += 1
        done = len(names) + i + 1

        def draw_section(number=section, name=name, res=res, done=done):
            # made when the layout reaches it, so only one section's figures are in memory
            raw = None if feed.pool is not None else _raw_values(measurements, name)
            images = feed.take(name, res, raw)
            part: list = []
            _characteristic_section(part, number, name, res, study, raw, st, width, images)
            if progress is not None:
                progress(done, total, f"drawn {name}")
            return part

        story.append(_Deferred(draw_section))
    if gauges:
        story.append(PageBreak())
        section += 1
        _gauge_section(story, section, gauges, study, st, width)
    from studykit.report import gauge_error

    if gauge_error.has_content(short_gauges, results):
        story.append(PageBreak())
        section += 1
        gauge_error.gauge_error_section(story, section, short_gauges or {}, results, st, width)
    section = _extra_sections(story, section, results, positions, st, width)
    story.append(PageBreak())
    section += 1
    boxes: dict = {}
    _signoff_section(story, section, study, st, width, boxes)
    story.append(PageBreak())
    section += 1
    _appendix(story, section, study, st, width, evidence_sha, chain)

    footer = f"{study.title[:70]} | content {study.content_digest()[:12]}"
    from reportlab import rl_config

    a85 = rl_config.useA85
    rl_config.useA85 = 0  # binary (Flate only) streams: no pure-Python ASCII85 pass per image
    try:
        with _pdf_target(out) as target, _pictures_spilled():
            doc = _StreamingDoc(
                target,
                pagesize=A4,
                leftMargin=margin,
                rightMargin=margin,
                topMargin=20 * mm,
                bottomMargin=20 * mm,
                title=f"Capability evidence - {study.title}",
                author="studykit",
                subject=f"content digest {study.content_digest()}",
                creator=f"studykit {__version__}",
                invariant=1,
            )
            feed.start(workers)
            doc.build(
                story,
                canvasmaker=_numbered_canvas(
                    footer, study.title[:90], when=_last_time(study), record=layout
                ),
            )
            data = target.getvalue() if out is None else None
    finally:
        rl_config.useA85 = a85
        feed.close()
    return data, boxes


@contextlib.contextmanager
def _pdf_target(out):
    """Where reportlab writes the document: a new ``io.BytesIO`` (``out`` None) or the file
    ``out``. For a file, each object goes to disk as soon as reportlab has formatted it, instead
    of reportlab collecting every formatted object and then joining them into one bytes of the
    whole document (two copies of the file in memory at the end, which grew with the number of
    characteristics). The bytes are the same: reportlab counts the offsets itself. Only the
    first document saved in this thread while the block runs is streamed."""
    if out is None:
        yield io.BytesIO()
        return
    import threading

    from reportlab.pdfbase import pdfdoc

    plain = pdfdoc.PDFFile
    owner = threading.get_ident()
    with open(out, "wb") as handle:

        class StreamedFile(plain):  # type: ignore[misc, valid-type]
            def __init__(self, *args, **kwargs):
                super().__init__(*args, **kwargs)  # the header, in self.strings
                if threading.get_ident() == owner and not handle.closed and handle.tell() == 0:
                    handle.write(b"".join(self.strings))
                    self.strings = []
                    self.write = handle.write

        pdfdoc.PDFFile = StreamedFile
        try:
            yield handle
        finally:
            pdfdoc.PDFFile = plain


def _extra_sections(story, section, results, positions, st, width) -> int:
    """Tolerance intervals and positional tolerances (see :mod:`studykit.report.extras_sections`),
    each only when there is something to show; returns the last section number."""
    from reportlab.platypus import PageBreak

    from studykit.report import extras_sections

    if extras_sections.has_intervals(results):
        story.append(PageBreak())
        section += 1
        extras_sections.interval_section(story, section, results, st, width)
    if positions:
        story.append(PageBreak())
        section += 1
        extras_sections.position_section(story, section, positions, st, width)
    return section


def build_report(
    study_path_or_study,
    out_path,
    *,
    progress: Callable[[int, int, str], None] | None = None,
    gauges: Mapping | None = None,
    workers: int = 1,
) -> ReportInfo:
    r"""Write the evidence PDF of a study.

    Parameters
    ----------
    study_path_or_study : str, PathLike or Study
        A study file (its stored gauge results are reported too) or a loaded study.
    out_path : str or PathLike
        The PDF to write (written under a temporary name and moved into place).
    progress : callable, optional
        ``progress(done, total, text)``: ``total`` is twice the number of characteristics
        plus one; called with "analysed NAME", then "drawn NAME", then "written".
    gauges : mapping, optional
        name -> stored gauge R&R payload (overrides those read from the study file).
    workers : int, optional
        Processes that render the figures ahead of the layout (forked; 1, the default: all in
        this process). The PDF bytes are the same for any number.

    Returns
    -------
    ReportInfo

    Notes
    -----
    Reproducible: reportlab's invariant mode and figures without time stamps mean the same
    study gives the same PDF bytes. Every number printed comes from the
    :class:`~studykit.analysis.CharacteristicResult` whose ``to_dict()`` is embedded.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from studykit.study import Characteristic, Study
    >>> rows = [f"{i // 5 + 1},{10 + 0.01 * ((i * 7) % 11 - 5):.3f}" for i in range(60)]
    >>> study = Study(title="Doctest study", data=("subgroup,bore [mm]\n" + "\n".join(rows))
    ...               .encode(), data_filename="bore.csv",
    ...               characteristics=[Characteristic("bore", unit="mm", lsl=9.8, usl=10.2)])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     info = build_report(study, pathlib.Path(d) / "r.pdf")
    >>> info.characteristics, info.pages >= 4, len(info.evidence_sha256)
    (('bore',), True, 64)
    """
    import time

    t0 = time.perf_counter()
    study, stored_gauges, study_path, chain = _load_with_chain(study_path_or_study)
    if gauges is not None:
        stored_gauges = dict(gauges)
    if stored_gauges is not None:
        stored_gauges = {k: v for k, v in stored_gauges.items() if k in study.characteristics}
    names = study.characteristic_names
    total = 2 * len(names) + 1  # analysed 1..n, drawn n+1..2n, written

    def _analysis_progress(done, _n, name):
        if progress is not None:
            progress(done, total, f"analysed {name}")

    results, errors, measurements = analyze_for_report(
        study,
        stored_gauges,
        progress=_analysis_progress,
        workers=workers,
        meanwhile=prepare_layout if workers > 1 else None,
    )
    evidence = collect_evidence(study, results, errors, stored_gauges, chain)
    # stored short gauge studies (one reference part) go into the evidence when there are any
    from studykit.report import gauge_error

    short_gauges = gauge_error.stored_short_studies(study_path, study)
    if short_gauges:
        evidence["short_gauges"] = short_gauges
    # position studies kept beside the study (their deviations and numbers), when there are any
    from studykit.positions import stored_positions

    positions = stored_positions(study_path)
    if positions:
        evidence["positions"] = positions
    evidence_bytes = json.dumps(
        evidence, sort_keys=True, indent=1, ensure_ascii=False, allow_nan=False
    ).encode("utf-8")
    evidence_sha = hashlib.sha256(evidence_bytes).hexdigest()
    del evidence  # its bytes are what is attached: the objects are not kept through the layout
    out = Path(out_path)
    part = out.with_name(out.name + ".part")
    layout: dict = {}
    try:
        # pages go to disk as they are laid out; the evidence is appended to that file as an
        # incremental update, so the document is never read back nor held in memory as a whole
        _, boxes = render_pages(
            study,
            results,
            errors,
            measurements,
            stored_gauges,
            chain=chain,
            evidence_sha=evidence_sha,
            short_gauges=short_gauges,
            positions=positions,
            progress=progress,
            total=total,
            out=part,
            workers=workers,
            layout=layout,
        )
        _heap_trimmed()
        _attach(part, evidence_bytes, boxes)
        os.replace(part, out)
    finally:
        part.unlink(missing_ok=True)
    if progress is not None:
        progress(total, total, "written")
    pages = layout["pages"]
    return ReportInfo(
        path=str(out),
        pages=pages,
        characteristics=tuple(names),
        errors=dict(errors),
        verdicts={n: (None if r.verdict is None else r.verdict.meets) for n, r in results.items()},
        data_sha256=study.data_sha256,
        content_digest=study.content_digest(),
        evidence_sha256=evidence_sha,
        signature_boxes=boxes,
        seconds=time.perf_counter() - t0,
    )


def _attach(pages: Path, evidence: bytes, boxes: Mapping) -> None:
    """Append to ``pages`` (the PDF reportlab wrote) the evidence JSON as a PDF embedded file and
    the signature boxes as document metadata, as an incremental update (PDF 32000-1, 7.5.6):
    only the trailer, the cross-reference table and the catalog and information dictionaries
    are read back, the pages are neither read nor copied, so memory does not grow with the
    document. Deterministic: the same pages and evidence give the same bytes."""
    with open(pages, "r+b") as f:
        f.seek(0, os.SEEK_END)
        end = f.tell()
        f.seek(max(0, end - 4096))
        tail = f.read()
        trailer = _trailer_of(tail)
        offsets = _xref_offsets(f, trailer["startxref"])
        root, info, size = trailer["Root"], trailer["Info"], trailer["Size"]
        catalog = _object_body(f, offsets[root], root)
        infodict = _object_body(f, offsets[info], info)
        stream, spec, tree, files = size, size + 1, size + 2, size + 3
        objects = {
            root: _dict_plus(catalog, b"/Names %d 0 R" % tree),
            info: _dict_plus(
                infodict, BOXES_KEY.encode() + b" " + _pdf_string(_canonical(dict(boxes)))
            ),
            stream: b"<<\n/Type /EmbeddedFile\n/Length %d\n>>\nstream\n" % len(evidence)
            + evidence
            + b"\nendstream",
            spec: b"<<\n/Type /Filespec\n/F %s\n/EF <<\n/F %d 0 R\n>>\n>>"
            % (_pdf_string(EVIDENCE_FILENAME), stream),
            tree: b"<<\n/EmbeddedFiles %d 0 R\n>>" % files,
            files: b"<<\n/Names [ %s %d 0 R ]\n>>" % (_pdf_string(EVIDENCE_FILENAME), spec),
        }
        f.seek(end)
        if not tail.endswith(b"\n"):
            f.write(b"\n")
        written = {}
        for num in sorted(objects):
            written[num] = f.tell()
            f.write(b"%d 0 obj\n" % num + objects[num] + b"\nendobj\n")
        xref = f.tell()
        f.write(_xref_update(written))
        f.write(
            b"trailer\n<<\n/Size %d\n/Root %d 0 R\n/Info %d 0 R\n/Prev %d\n/ID %s\n>>\n"
            b"startxref\n%d\n%%%%EOF\n"
            % (files + 1, root, info, trailer["startxref"], trailer["ID"], xref)
        )


def _trailer_of(tail: bytes) -> dict:
    """/Root, /Info, /Size, /ID and startxref of the last trailer in ``tail`` (a PDF's end)."""
    import re

    at = tail.rfind(b"trailer")
    m = re.search(rb"startxref\s+(\d+)\s+%%EOF", tail[at:]) if at >= 0 else None
    found = {
        key: re.search(rb"/" + key.encode() + rb"\s+(\d+)", tail[at:])
        for key in ("Root", "Info", "Size")
    }
    ident = re.search(rb"/ID\s*(\[[^\]]*\])", tail[at:])
    if m is None or ident is None or not all(found.values()):
        raise StudyFileError("the pages written by the layout end without a readable trailer")
    out: dict = {key: int(v.group(1)) for key, v in found.items()}  # type: ignore[union-attr]
    out["startxref"], out["ID"] = int(m.group(1)), ident.group(1)
    return out


def _xref_offsets(f, start: int) -> dict:
    """object number -> byte offset, from the cross-reference table at ``start``."""
    f.seek(start)
    if f.readline().strip() != b"xref":
        raise StudyFileError("the pages written by the layout have no cross-reference table")
    offsets = {}
    line = f.readline()
    while line and not line.startswith(b"trailer"):
        first, count = (int(v) for v in line.split())
        for num in range(first, first + count):
            entry = f.read(20)
            if entry[17:18] == b"n":
                offsets[num] = int(entry[:10])
        line = f.readline()
    return offsets


def _object_body(f, offset: int, num: int) -> bytes:
    """The dictionary of the (stream-less) indirect object ``num`` at ``offset``."""
    f.seek(offset)
    head = b"%d 0 obj" % num
    data = b""
    while b"endobj" not in data:
        chunk = f.read(4096)
        if not chunk:
            break
        data += chunk
    if not data.startswith(head) or b"endobj" not in data:
        raise StudyFileError(f"object {num} of the pages written by the layout is not readable")
    return data[len(head) : data.index(b"endobj")].strip()


def _dict_plus(body: bytes, entry: bytes) -> bytes:
    """A dictionary's text ``<< ... >>`` with ``entry`` (a key not in it yet) added at its end."""
    if not body.endswith(b">>") or entry.split(None, 1)[0] + b" " in body:
        raise StudyFileError("a dictionary of the pages written by the layout is not readable")
    return body[:-2].rstrip() + b"\n" + entry + b"\n>>"


def _pdf_string(text: str) -> bytes:
    """``text`` (ASCII) as a PDF literal string."""
    escaped = text.replace("\\", "\\\\").replace("(", "\\(").replace(")", "\\)")
    return b"(" + escaped.encode("ascii") + b")"


def _xref_update(offsets: Mapping[int, int]) -> bytes:
    """The cross-reference section of an update: the head of the free list (object 0, as
    readers expect each section to start), then one subsection per run of numbers."""
    nums = sorted(offsets)
    out = [b"xref\n0 1\n0000000000 65535 f \n"]
    i = 0
    while i < len(nums):
        j = i
        while j + 1 < len(nums) and nums[j + 1] == nums[j] + 1:
            j += 1
        out.append(b"%d %d\n" % (nums[i], j - i + 1))
        out += [b"%010d 00000 n \n" % offsets[n] for n in nums[i : j + 1]]
        i = j + 1
    return b"".join(out)
