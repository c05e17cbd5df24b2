"""The case file as a PDF (reportlab for the document, matplotlib for the charts)."""
from __future__ import annotations

import io
import re
from html import escape

from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.styles import ParagraphStyle, getSampleStyleSheet
from reportlab.lib.units import mm
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen import canvas as pdfcanvas
from reportlab.platypus import (Image, KeepTogether, PageBreak, Paragraph, SimpleDocTemplate,
                                Spacer, Table, TableStyle)

from ..charts import curves_figure, figure_png, path_figure
from .after import pdf_section

_STYLES = getSampleStyleSheet()
BODY = ParagraphStyle("body", parent=_STYLES["BodyText"], fontSize=9.5, leading=12.5)
SMALL = ParagraphStyle("small", parent=BODY, fontSize=7.5, leading=9.5)
H1 = ParagraphStyle("h1", parent=_STYLES["Heading1"], fontSize=16, spaceAfter=6)
H2 = ParagraphStyle("h2", parent=_STYLES["Heading2"], fontSize=12, spaceBefore=8, spaceAfter=4)
CAUTION = ParagraphStyle("caution", parent=BODY, backColor=colors.HexColor("#FFF4E0"),
                         borderColor=colors.HexColor("#D55E00"), borderWidth=1, borderPadding=6,
                         spaceBefore=6, spaceAfter=10)


def _t(value) -> str:
    """Text for a Paragraph: reportlab reads markup, so everything from users is escaped."""
    return "-" if value is None else escape(str(value))


def _p(text: str, style=BODY) -> Paragraph:
    return Paragraph(text, style)


def _fmt(x, digits=4) -> str:
    if x is None:
        return "-"
    if isinstance(x, float):
        return f"{x:.{digits}g}"
    return str(x)


_FRACTION = re.compile(r"(\d{2}:\d{2}:\d{2})\.\d+")


def _when(value) -> str:
    """A timestamp to the second, as plain text: fractions of a second dropped, 'T' spaced."""
    if not value:
        return "-"
    text = _FRACTION.sub(r"\1", str(value))
    text = re.sub(r"^(\d{4}-\d{2}-\d{2})[Tt]", r"\1 ", text)
    return text[:-1] + " UTC" if text.endswith(("Z", "z")) else text


def _ts(value) -> str:
    """:func:`_when`, escaped for a Paragraph."""
    return escape(_when(value))


def _numbered_canvas(marks: list[str]):
    """A canvas class that writes the running header and 'page k of n' once n is known."""

    class NumberedCanvas(pdfcanvas.Canvas):
        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            self._pages = []

        def showPage(self):
            self._pages.append(dict(self.__dict__))
            self._startPage()

        def save(self):
            total = len(self._pages)
            for number, state in enumerate(self._pages, start=1):
                self.__dict__.update(state)
                self._mark(number, total)
                super().showPage()
            super().save()

        def _mark(self, number: int, total: int) -> None:
            width, height = A4
            self.saveState()
            self.setFont("Helvetica", 7.5)
            self.setFillColor(colors.HexColor("#444444"))
            self.drawString(16 * mm, height - 10 * mm, marks[0])
            self.drawRightString(width - 16 * mm, height - 10 * mm, f"page {number} of {total}")
            self.drawString(16 * mm, 9 * mm, marks[1])
            self.drawRightString(width - 16 * mm, 9 * mm, marks[2])
            self.restoreState()

    return NumberedCanvas


def _grid(rows, widths, header=True, font=8):
    table = Table(rows, colWidths=widths, repeatRows=1 if header else 0)
    style = [("FONTSIZE", (0, 0), (-1, -1), font), ("VALIGN", (0, 0), (-1, -1), "TOP"),
             ("GRID", (0, 0), (-1, -1), 0.25, colors.HexColor("#999999")),
             ("LEFTPADDING", (0, 0), (-1, -1), 3), ("RIGHTPADDING", (0, 0), (-1, -1), 3)]
    if header:
        style += [("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#DCE9F5")),
                  ("FONTNAME", (0, 0), (-1, 0), "Helvetica-Bold")]
    table.setStyle(TableStyle(style))
    return table


RECORD_HEADER = ["seq", "record id", "unit", "observed at", "units", "nc", "inspector",
                 "LLR after", "status and note"]
RECORD_WIDTHS = [10 * mm, 26 * mm, 18 * mm, 30 * mm, 10 * mm, 8 * mm, 22 * mm, 15 * mm, 39 * mm]
CHUNK = 200          # records per table: reportlab re-measures a table's rest at each page


def _cell(text: str, width: float):
    """A plain string where it fits its column (cheap: no markup is parsed), else a wrapping
    Paragraph of the escaped text. Plain strings are drawn as they are, never read as markup."""
    if stringWidth(text, SMALL.fontName, SMALL.fontSize) <= width - 6:
        return text
    return _p(_t(text), SMALL)


def _plain(value) -> str:
    return "-" if value is None else str(value)


def record_tables(records: list[dict]) -> list:
    """The evidence and void records as tables of at most CHUNK rows each, so the time to
    lay them out grows linearly with the number of records (one long table costs the
    square of it: reportlab splits it page by page, measuring the whole rest every time).
    Records after the decision are left to :func:`after_summary`."""
    shown = [r for r in records if r["void"] or r["evidence"]]
    out = []
    w = RECORD_WIDTHS
    for start in range(0, max(len(shown), 1), CHUNK):
        rows = [list(RECORD_HEADER)]
        for r in shown[start:start + CHUNK]:
            texts = [str(r["seq"]), _plain(r["record_id"]), _plain(r["unit_ref"]),
                     _when(r["observed_at"]), str(r["units"]), str(r["nonconforming"]),
                     _plain(r["inspector"]), _fmt(r["llr_after"])]
            status = (f"void: {_plain(r['void_reason'])} ({_plain(r['voided_by'])})"
                      if r["void"] else "evidence")
            if r["void"]:
                cells = [_p(f"<strike>{_t(c)}</strike>", SMALL) for c in texts]
            else:
                cells = [_cell(c, w[i]) for i, c in enumerate(texts)]
            if r["note"]:
                cells.append(_p(_t(status) + "<br/>note: " + _t(r["note"]), SMALL))
            elif r["void"]:
                cells.append(_p(_t(status), SMALL))
            else:
                cells.append(_cell(status, w[-1]))
            rows.append(cells)
        out.append(_grid(rows, w, font=SMALL.fontSize))
    return out


def after_summary(records: list[dict]) -> list:
    """One paragraph for the records that came after the decision (they do not move it):
    a cycle with 100,000 of them still makes a short document; the JSON lists each."""
    after = [r for r in records if not r["void"] and not r["evidence"]]
    if not after:
        return []
    return [_p(
        f"After the decision {len(after)} more record(s) arrived (seq {after[0]['seq']} to "
        f"{after[-1]['seq']}, received {_ts(after[0]['received_at'])} to "
        f"{_ts(after[-1]['received_at'])}): {sum(r['units'] for r in after)} units, "
        f"{sum(r['nonconforming'] for r in after)} nonconforming. They are kept but are "
        "not evidence for this cycle's decision; the JSON case file lists each of them.",
        SMALL)]


BLANK = "_" * 38


def _signoff(cf: dict) -> list:
    """Findings and sign-off: the reviewer fills it in (blank lines on a fresh printout)."""
    review = cf.get("review") or {}
    rows = [["reviewer", _t(review.get("reviewer")) if review.get("reviewer") else BLANK],
            ["date of review", _ts(review.get("at")) if review.get("at") else BLANK],
            ["outcome (e.g. no action, advice, re-inspection, formal action)",
             _p(_t(review.get("outcome")), BODY) if review.get("outcome") else BLANK],
            ["findings", _p(_t(review.get("findings")), BODY) if review.get("findings")
             else BLANK + "<br/><br/>" + BLANK + "<br/><br/>" + BLANK],
            ["signature", BLANK]]
    rows = [[_p(a, SMALL), b if not isinstance(b, str) else _p(b, BODY)] for a, b in rows]
    table = Table(rows, colWidths=[58 * mm, 120 * mm])
    table.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "BOTTOM"),
                               ("TOPPADDING", (0, 0), (-1, -1), 7)]))
    return [_p("Findings and sign-off", H2),
            _p("To be completed by the reviewer under the agency's own procedures. The "
               "signal above is not a verdict.", SMALL), table]


def _trail_lines(trail: dict | None) -> list:
    """The chain head at the decision and when the file was made (the JSON case file lists
    every record's entry)."""
    if not trail:
        return []
    d, head = trail.get("decision_entry") or {}, trail["head_when_made"]
    text = (f"Tamper-evident trail: decision entry {_t(d.get('n'))}, SHA-256 "
            f"{_t(d.get('entry_sha256'))}; head when made: entry {_t(head['n'])}, SHA-256 "
            f"{_t(head['entry_sha256'])}. The JSON case file cites each record's entry; "
            f"{_t(trail['how_to_check'])}.")
    return [_p("Trail", H2), _p(text, SMALL)]


def render_pdf(cf: dict) -> bytes:
    buf = io.BytesIO()
    fac = cf["facility"]
    doc = SimpleDocTemplate(buf, pagesize=A4, leftMargin=16 * mm, rightMargin=16 * mm,
                            topMargin=16 * mm, bottomMargin=16 * mm,
                            title=f"Case file {fac['facility_id']} cycle {cf['cycle']}",
                            author="seqaudit", subject="Sequential audit case file")
    plan = cf["plan"]
    story = [
        _p(f"Case file: {_t(fac['name'])} ({_t(fac['facility_id'])}), cycle {cf['cycle']}", H1),
        _p(f"<b>Caution.</b> {_t(cf['caution'])} The test assumes that "
           + "; ".join(_t(a) for a in cf["assumptions"]) + ".", CAUTION),
        _p(f"Document id {_t(cf['document_id'])} (SHA-256 of the case file's canonical "
           f"JSON: sorted keys, no spaces, UTF-8, without document_id and generated_at). "
           f"Made by seqaudit {_t(cf['software_version'])} on {_ts(cf['generated_at'])}.",
           SMALL),
        _p("Decision", H2),
        _grid([["decision", cf["decision"].upper()],
               ["decided after", f"{cf['decided_after_units']} units audited"
                                 + (" (at the cap, by the cut rule)" if cf["decided_at_cap"]
                                    else "")],
               ["decided at (receipt time)", _ts(cf["decided_at"])],
               ["units audited / nonconforming", f"{cf['units']} / {cf['nonconforming']}"],
               ["LLR at the decision", _fmt(cf["llr"])]], [60 * mm, 118 * mm], header=False,
              font=9),
        *pdf_section(cf, _p, _t, _grid, H2, SMALL),
        _p("What the data say about the facility's rate", H2),
        _grid([["quantity", "value", "meaning"],
               ["sequential p-value (H0: rate = p0)", _fmt(cf["p_value"]),
                _p("chance, at the tolerated rate, of an outcome at least as extreme upward",
                   SMALL)],
               [f"{100 * cf['ci_level']:g} % confidence interval",
                f"{cf['ci_low']:.4f} to {cf['ci_high']:.4f}",
                _p("exact, by inverting the stagewise ordering", SMALL)],
               ["median-unbiased estimate", f"{cf['estimate_median_unbiased']:.4f}",
                _p("rate at which the upward chance is one half (one-sided: see the note)",
                   SMALL)],
               ["mid-p estimate", f"{cf['estimate_mid_p']:.4f}",
                _p("the same with the observed outcome counted half (Hirji, Tsiatis and "
                   "Mehta 1989)", SMALL)],
               ["naive d/n (biased)", f"{cf['estimate_naive']:.4f}",
                _p(_t(cf["estimate_naive_note"]), SMALL)]],
              [58 * mm, 40 * mm, 80 * mm], font=8.5),
        _p(_t(cf["estimate_note"]), SMALL),
        *([_p(_t(cf["recheck"]["note"]), SMALL)] if cf["recheck"]["note"] else []),
        *([_p("<b>Looks.</b> " + _t(cf["looks"]["note"]), SMALL)]
          if cf["looks"]["record_sizes_differ"] else []),
        *[_p(f"<b>Plan warning ({_t(w['code'])}).</b> {_t(w['message'])}", SMALL)
          for w in cf["warnings"]],
        _p("The plan and why its numbers mean what they mean", H2),
        _p(f"Plan <b>{_t(plan.get('name'))}</b>: p0 = {plan['p0']:g}, p1 = {plan['p1']:g}, "
           f"alpha = {plan['alpha']:g}, beta = {plan['beta']:g}"
           + (f", cap {plan['max_units']} units" if plan.get("max_units") else "")
           + (" (calibrated boundaries)" if plan.get("calibrate") else " (Wald's boundaries)")
           + f"; flag at LLR &ge; {plan['upper_llr']:.4f}, clear at LLR &le; "
             f"{plan['lower_llr']:.4f}."),
    ]
    story += [_p("&bull; " + _t(text)) for text in cf["plan_explained"].values()]
    story += [_p(f"Exact error rates of this plan: false flag {plan['exact_alpha']:.5f}, "
                 f"missed facility {plan['exact_beta']:.5f}. Expected workload: "
                 f"{plan['asn_p0']:.1f} units at p0, {plan['asn_p1']:.1f} at p1, at most "
                 f"{plan['asn_max']:.1f} at any rate."),
              PageBreak(),
              _p("The path of the evidence", H2),
              Image(io.BytesIO(figure_png(path_figure(cf))), width=178 * mm, height=75 * mm),
              _p("Each step is one record in order of receipt. Void records are not evidence "
                 "and are marked with a cross; records after the decision are kept but do not "
                 "move it.", SMALL),
              _p("Operating characteristic and workload of the plan", H2),
              Image(io.BytesIO(figure_png(curves_figure(
                  cf["curve"], plan["p0"], plan["p1"], cf["estimate_median_unbiased"],
                  "median-unbiased estimate",
                  interval=(cf["ci_low"], cf["ci_high"], cf["ci_level"])))),
                    width=178 * mm, height=71 * mm),
              _p(f"Marked on both charts: p0 = {plan['p0']:g} and p1 = {plan['p1']:g} "
                 f"(dotted), the median-unbiased estimate {cf['estimate_median_unbiased']:.4f} "
                 f"(solid) and its {100 * cf['ci_level']:g} % interval "
                 f"{cf['ci_low']:.4f} to {cf['ci_high']:.4f} (shaded); the rate axis reaches "
                 "all of them.", SMALL),
              PageBreak(),
              _p("The records of the cycle in order of receipt: evidence and voids", H2)]
    story += record_tables(cf["records"])
    story += after_summary(cf["records"])
    from .draws_pdf import draws_story
    story += draws_story(cf.get("draws"))
    story += [_p("Action log of the cycle", H2)]
    if cf["actions"]:
        arows = [["when", "who", "action", "detail"]]
        for a in cf["actions"]:
            detail = ", ".join(f"{k}: {v}" for k, v in a["detail"].items())
            arows.append([_p(_ts(a["at"]), SMALL), _p(_t(a["key_label"]), SMALL),
                          _p(_t(a["action"]), SMALL), _p(_t(detail), SMALL)])
        story.append(_grid(arows, [36 * mm, 30 * mm, 30 * mm, 82 * mm]))
    else:
        story.append(_p("No manual action was taken in this cycle."))
    story += [KeepTogether([
        _p("Cautions", H2),
        _p(_t(cf["caution"]), CAUTION),
        _p("The test's assumptions:"),
        *[_p("&bull; " + _t(a)) for a in cf["assumptions"]],
        _p("What this service did not check:"),
        *[_p("&bull; " + _t(a)) for a in cf["not_checked"]],
        Spacer(1, 4 * mm),
        _p("Method", H2), _p(_t(cf["method"]), SMALL),
        *_trail_lines(cf.get("trail")),
        _p(f"Generated {_ts(cf['generated_at'])} by seqaudit {_t(cf['software_version'])}.",
           SMALL)]), KeepTogether(_signoff(cf))]
    marks = [f"Case file {fac['facility_id']}, cycle {cf['cycle']} - {fac['name']}"[:110],
             f"document id (SHA-256 of its canonical JSON): {cf['document_id']}",
             f"seqaudit {cf['software_version']}"]
    doc.build(story, canvasmaker=_numbered_canvas(marks))
    return buf.getvalue()
