"""The design-review report: one self-contained HTML page, and a PDF of it.

:func:`report_html` turns a :class:`~loopkit.result.LoopResult` into the page a review reads:
the design (stage, ranges, control scheme), the network drawing with its values, the parts
list, the Bode plot of every corner (and a measurement over its corner's prediction), the
margins at every corner before and after E-series snapping, a load step, every finding with
what to change, the model's limits, and the caution at the top and the end.  Sections made
elsewhere (tolerance studies, efficiency) are passed in as :class:`ExtraSection`.
:func:`write_report` writes the page and, through headless Chromium (:mod:`.pdf`), its PDF.

matplotlib and schemdraw are imported only here, when a report is made.
"""

from __future__ import annotations

import datetime
from dataclasses import dataclass, replace

import numpy as np

from .. import __version__
from ..cautions import CAUTION
from ..errors import DesignError
from .content import Table, corner_table, design_tables, findings_table, limits_lines, num, parts_table, step_table
from .html import caution_box, check_self_contained, document, figure, paragraphs, section, table_html
from .pdf import ChromiumMissing, find_chromium, html_to_pdf, html_to_png

__all__ = ["ChromiumMissing", "ExtraSection", "Table", "check_self_contained", "default_load_step", "find_chromium",
           "html_to_pdf", "html_to_png", "report_html", "write_report"]


@dataclass(frozen=True)
class ExtraSection:
    """A section made elsewhere (a tolerance study, efficiency), shown before the findings.

    Attributes
    ----------
    title : str
        The section's heading.
    paragraphs : tuple of str
        Plain text, escaped.
    tables : tuple of Table
        Tables of text cells (:class:`loopkit.report.content.Table`).
    html : str
        A trusted HTML fragment (e.g. an inline SVG plot) placed after the tables; it must not
        refer to other files or addresses (checked: :class:`~loopkit.errors.DesignError`).
    """

    title: str
    paragraphs: tuple = ()
    tables: tuple = ()
    html: str = ""

    def __post_init__(self):
        if not str(self.title).strip():
            raise DesignError("section title", self.title, "must not be empty")
        refs = check_self_contained(self.html)
        if refs:
            raise DesignError(f"section '{self.title}' html", refs[0], "must not refer to other files or addresses"
                              " (the report is one self-contained file: inline the SVG or data)")
        for t in self.tables:
            if not isinstance(t, Table):
                raise DesignError(f"section '{self.title}' tables", type(t).__name__, "must be loopkit.report.Table")


def default_load_step(design) -> tuple[float, float]:
    """The report's load step: from half the largest load to the largest (A)."""
    top = float(max(design.operating.load))
    return 0.5 * top, top


def _load_step(result, load_step):
    """(title, StepResponse, LoopResult of the step's corners) or None when there is no loop."""
    from ..loop import LoopSession, apply_parts
    from ..timeresponse import step_response

    a, b = default_load_step(result.design) if load_step is None else (float(x) for x in load_step)
    if not (np.isfinite(a) and np.isfinite(b) and a >= 0 and b > 0 and a != b):
        raise DesignError("load step", f"{a}:{b}", "must be FROM:TO with currents >= 0 A that differ")
    built = apply_parts(result.design, result)
    moved = replace(built, operating=replace(built.operating, load=(a,)))
    if result.digital is not None:  # keep the designed controller at the step's corners (as the parts are kept)
        from ..digital_step import hold_controller

        step_result = hold_controller(result, moved)
    else:
        step_result = LoopSession(moved).run()
    if not step_result.feasible:
        return None
    title = f"Load step {num(a, 'A')} to {num(b, 'A')} at every input voltage"
    return title, step_response(step_result, "load", b - a), step_result


def _dcm_step_notes(step_result) -> list[str]:
    """A sentence for the step's corners that start in DCM (linearised there, the answer is only indicative)."""
    st = step_result.stage
    dcm = [k for k in range(st.n_corners) if st.dcm[k]]
    if not dcm:
        return []
    return [(f"Corner{'s' if len(dcm) > 1 else ''} {', '.join(f'#{k}' for k in dcm)} start{'' if len(dcm) > 1 else 's'}"
            " the step in DCM, where the loop gain is far lower: the small-signal answer there is only indicative"
            " (a step that takes the stage into CCM is a large-signal event; check it in simulation or on the bench).")]


def _verdict(result) -> str:
    if result.met:
        return '<span class="verdict met">Meets every target at every corner</span>'
    errors = [f for f in result.findings if f.severity == "error"]
    corners = sorted({f.corner for f in errors if f.corner is not None})
    what = (f"{len(corners)} of {result.stage.n_corners} corners miss a target" if corners
            else "the targets cannot be met" if not result.feasible else f"{len(errors)} error finding(s)")
    return f'<span class="verdict missed">Does not meet its targets: {what} (see Findings)</span>'


def _pair(tables) -> str:
    cells = [table_html(t, "kv") for t in tables]
    return '<div class="pair">' + "".join(f"<div>{c}</div>" for c in cells) + "</div>"


def report_html(result, *, path: str = "", overlays=(), load_step=None, extra_sections=(),
                date: str | None = None) -> str:
    """The design-review report of ``result`` as one self-contained HTML document.

    Parameters
    ----------
    result : LoopResult
        The loop to report (from :func:`loopkit.loop.design_loop`).
    path : str
        The design file's name, shown in the header.
    overlays : sequence of Overlay
        Measurements over their corner's prediction (:func:`loopkit.measured_overlay.measured_overlay`).
    load_step : (float, float), optional
        Load step FROM, TO in A (default :func:`default_load_step`).
    extra_sections : sequence of ExtraSection
        Sections made elsewhere, placed before the findings.
    date : str, optional
        The date shown (default today's, UTC, ISO 8601).

    Returns
    -------
    str
        The HTML text.

    Notes
    -----
    Numbers are those of the CLI and its JSON document (same result, same formatting);
    the margins are :func:`loopkit.margins.loop_margins` (Erickson & Maksimovic, Fundamentals of
    Power Electronics, 2nd ed., 2001, sec. 9.4).
    """
    from . import figures

    for s in extra_sections:
        if not isinstance(s, ExtraSection):
            raise DesignError("extra_sections", type(s).__name__, "must be loopkit.report.ExtraSection")
    d = result.design
    title = d.title or (path.rsplit("/", 1)[-1] if path else "loopkit design")
    date = date or datetime.datetime.now(datetime.UTC).date().isoformat()
    head = (f'<header><div class="kicker">Design review · feedback loop</div><h1>{_e(title)}</h1>'
            f'<div class="meta">{_e(path + " · " if path else "")}loopkit {__version__} · {date}</div>'
            f"{_verdict(result)}</header>")
    body = [head, caution_box(CAUTION)]
    tables = design_tables(result, path)
    body.append(section("design", "The design", _pair(tables[:2]) + _pair(tables[2:])))
    if result.feasible:
        from ..loop import network_context
        from ..schematic import network_svg

        svg = network_svg(result.network, result.parts, network_context(d))
        svg = svg[svg.index("<svg"):]
        parts = parts_table(result)
        body.append(section("network", "Compensator network and parts",
                            figure(svg, "The network with the parts to build.", "drawing") + table_html(parts)))
        body.append(section("bode", "Loop gain at every corner", figure(
            figures.bode_svg(result),
            "Loop gain T with the parts to build; colour: input voltage (dark low, light high); line style: load"
            " (solid the highest). Dashed vertical line: the target crossover. Shaded: above fsw/2.")))
        for i, ov in enumerate(overlays):
            text = paragraphs(ov.summary_lines())
            src = f" File: {ov.source}." if ov.source else ""
            body.append(section(f"measured-{i}", f"Measured {ov.kind} against the prediction",
                                text + figure(figures.overlay_svg(ov, f"overlay{i}"), "Measured points over the predicted curve of"
                                              f" the same corner; below, measured / predicted.{src}")))
        body.append(section("corners", "Margins at every corner", table_html(corner_table(result), "corners")))
        step = _load_step(result, load_step)
        if step is not None:
            st_title, sr, st_result = step
            body.append(section("step", "Load step", figure(figures.step_svg(sr, st_result, st_title), st_title)
                                + table_html(step_table(sr, "Step figures per corner"))
                                + paragraphs([f.message for f in sr.findings] + _dcm_step_notes(st_result))))
    else:
        body.append(section("network", "Compensator network and parts",
                            "<p>No parts: the targets cannot be met with this network (see Findings).</p>"))
    for i, s in enumerate(extra_sections):
        inner = paragraphs(s.paragraphs) + "".join(table_html(t) for t in s.tables) + s.html
        body.append(section(f"extra-{i}", s.title, inner))
    ft = findings_table(result.findings)
    if ft.rows:
        sev = {i: row[0] for i, row in enumerate(ft.rows)}
        body.append(section("findings", "Findings", table_html(
            ft, cell_class=lambda i, j: f"sev-{sev[i]}" if j == 0 else "code" if j == 3 else "")))
    else:
        body.append(section("findings", "Findings", "<p>No findings: nothing to change.</p>"))
    limits = "<ul class=\"limits\">" + "".join(f"<li>{_e(x)}</li>" for x in limits_lines(result)) + "</ul>"
    body.append(section("limits", "Limits of the model", limits))
    body.append(f"<footer>{caution_box(CAUTION)}<p class=\"meta\">Made by loopkit {__version__} from "
                f"{_e(path or 'the design')} on {date}.</p></footer>")
    return document(f"Design review: {title}", "\n".join(body))


def _e(text) -> str:
    from html import escape

    return escape(str(text))


def write_report(result, html_path=None, pdf_path=None, **options) -> str:
    """Write the report as HTML and/or PDF (atomically); returns the HTML text.

    ``options`` go to :func:`report_html`.  The PDF is printed by headless Chromium
    (:func:`loopkit.report.pdf.html_to_pdf`); :class:`ChromiumMissing` when it is not installed.
    """
    from ..atomicfile import write_files_atomic

    if html_path is None and pdf_path is None:
        raise DesignError("output", "(none given)", "give an HTML or a PDF file (or both)")
    if pdf_path is not None:
        find_chromium()  # before the work
    text = report_html(result, **options)
    files = [(html_path, text)] if html_path is not None else []
    if pdf_path is not None:
        files.append((pdf_path, html_to_pdf(text)))
    write_files_atomic(files)  # both or neither
    return text
