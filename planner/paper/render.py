"""Printed output: the prep sheet and the design report as HTML or PDF.

Jinja2 templates (``templates/*.html.j2``, shipped as the package ``planner.templates``) lay out
the strings :mod:`planner.paper.sheets` prepares; WeasyPrint turns the HTML into PDF. Autoescaping is on,
so a title or label holding markup prints as the characters typed. WeasyPrint gets a URL fetcher
that refuses everything but ``data:`` URLs: the stylesheet is inlined and figures are inline SVG,
so nothing is read from the network or the file system while a sheet is made.
"""

from __future__ import annotations

import base64
import datetime as _dt
import functools
import logging
import urllib.parse
from collections.abc import Mapping, Sequence
from importlib import resources

from ..inputs.errors import KplanError
from . import fmt as _fmt
from .sheets import DesignFacts, RenderError, plan_notes, prep_context, report_context

__all__ = [
    "FORMATS",
    "PAPERS",
    "DataOnlyFetcher",
    "fit_report",
    "FetchRefused",
    "RenderError",
    "html_to_pdf",
    "lay_out_template",
    "prep_sheet",
    "fit_layout",
    "render_html",
    "report",
    "template_macros",
]

from ..inputs.choices import PAPERS  # noqa: E402  (defined once, light for the command line)

FORMATS = ("pdf", "html")

_log = logging.getLogger(__name__)


class FetchRefused(KplanError):
    """A sheet asked for a resource that is not inline data (refused by design)."""


def _fetcher_base():
    from weasyprint.urls import URLFetcher

    return URLFetcher


@functools.lru_cache(maxsize=1)
def _fetcher_class():
    base = _fetcher_base()

    class _DataOnly(base):
        """WeasyPrint URL fetcher that serves ``data:`` URLs and refuses everything else."""

        def fetch(self, url, headers=None):
            return _serve_data_url(url)

    return _DataOnly


def DataOnlyFetcher():  # noqa: N802 - reads as a class at the call site
    """A WeasyPrint URL fetcher that decodes ``data:`` URLs (RFC 2397) and raises on any other URL."""
    return _fetcher_class()()


def _serve_data_url(url: str):
    from weasyprint.urls import URLFetcherResponse

    scheme = url.split(":", 1)[0].lower() if ":" in url else ""
    if scheme != "data":
        _log.warning("refused to fetch %s: sheets use inline data only", url[:200])
        raise FetchRefused(f"refused to fetch {url[:200]!r}: sheets may only use inline data: URLs")
    head, sep, payload = url[5:].partition(",")
    if not sep:
        raise FetchRefused("malformed data: URL (no comma): write data:<type>[;base64],<data>")
    params = head.split(";")
    mime = params[0] or "text/plain"
    body = base64.b64decode(payload) if "base64" in params[1:] else urllib.parse.unquote_to_bytes(payload)
    return URLFetcherResponse(url, body, {"Content-Type": mime})


@functools.lru_cache(maxsize=1)
def _environment():
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.PackageLoader("planner.templates", "."),  # templates/ ships as planner.templates
        autoescape=True,  # every template, whatever its extension: user text is text
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    return env


@functools.lru_cache(maxsize=1)
def _stylesheet() -> str:
    return resources.files("planner.templates").joinpath("style.css").read_text(encoding="utf-8")


def validate_paper_format(paper: str, fmt: str) -> None:
    """Refuse a paper size or an output format the sheets do not know (:class:`RenderError`)."""
    if paper not in PAPERS:
        raise RenderError(f"paper = {paper!r}: choose one of {', '.join(PAPERS)}")
    if fmt not in FORMATS:
        raise RenderError(f"fmt = {fmt!r}: choose one of {', '.join(FORMATS)}")


def date_text(date) -> str:
    """The date a sheet prints: today, a ``datetime.date``, or a text given as is."""
    if date is None:
        date = _dt.date.today()
    if isinstance(date, _dt.date):
        return date.isoformat()
    if isinstance(date, str) and date.strip():
        return date.strip()
    raise RenderError(f"date = {date!r}: pass a datetime.date or a text such as '2026-12-01'")


def render_html(template: str, context: dict) -> str:
    """Render ``template`` (a file in ``templates/``) with the stylesheet and page size added."""
    from markupsafe import Markup

    ctx = dict(context)
    ctx["css"] = Markup(_stylesheet())  # our own file, inlined so WeasyPrint fetches nothing
    ctx["page_size"] = PAPERS[ctx["paper"]]
    return _environment().get_template(template).render(**ctx)


def template_macros(template: str, context: dict):
    """The macros of ``template`` bound to ``context`` (as :func:`render_html` would render it), callable
    from Python: a page made of parts can render each part alone (each returns markup)."""
    from markupsafe import Markup

    ctx = dict(context)
    ctx["css"] = Markup(_stylesheet())
    ctx["page_size"] = PAPERS[ctx["paper"]]
    return _environment().get_template(template).make_module(ctx)


def lay_out_template(template: str, context: dict, fonts=None):
    """``template`` rendered with ``context`` and laid out by WeasyPrint (a document, fetching data: URLs
    only); ``fonts``: a ``FontConfiguration`` shared with other documents whose pages are drawn together."""
    import weasyprint

    html = render_html(template, context)
    doc = weasyprint.HTML(string=html, base_url=None, url_fetcher=DataOnlyFetcher())
    return doc.render(font_config=fonts)


def html_to_pdf(html: str, *, fetcher=None) -> bytes:
    """PDF bytes of ``html``; ``fetcher`` defaults to :func:`DataOnlyFetcher` (data: URLs only)."""
    import weasyprint

    doc = weasyprint.HTML(string=html, base_url=None, url_fetcher=fetcher or DataOnlyFetcher())
    return doc.write_pdf()


def output_bytes(html: str, fmt: str) -> bytes:
    """The bytes of a sheet: its HTML as UTF-8, or the PDF WeasyPrint makes of it."""
    return html.encode("utf-8") if fmt == "html" else html_to_pdf(html)


def prep_sheet(
    plan,
    recipe,
    assessment,
    needs,
    *,
    paper: str = "A4",
    fmt: str = "pdf",
    date=None,
    order: Sequence[str] | None = None,
) -> bytes:
    """The bench sheet: header, stocks and how to make them, tubes, checklist and safety box.

    Parameters
    ----------
    plan, recipe : the validated plan and its recipe.
    assessment : ``planner.jobs.plan.assess.assess(plan, recipe, ...)``: it supplies every number.
    needs : ``planner.jobs.stocks.needs.stock_needs(plan, recipe)``.
    paper : "A4" or "Letter".
    fmt : "pdf" (bytes of the PDF) or "html" (UTF-8 bytes of the HTML).
    date : printed date (datetime.date or text); default today.
    order : stock ids in the order of addition (default: medium, ligand, then metal last).

    Raises
    ------
    RenderError
        For an unknown paper or format, a bad date, or an order that does not list the stocks.
    """
    validate_paper_format(paper, fmt)
    ctx = prep_context(plan, recipe, assessment, needs, date=date_text(date), paper=paper, order=order)
    if fmt == "html":
        return render_html("prep_sheet.html.j2", ctx).encode("utf-8")
    return fit_layout("prep_sheet.html.j2", ctx).write_pdf()


TABLE_FITS = ("", "dense", "wide")  # a table as it is, in smaller type, on a landscape page


def _fits(n_columns: int):
    """The ways of setting a table with a column per stock, tried in turn: as it is, in smaller type, on
    a landscape page, then its stock columns split over 2, 3, … tables (each with the tube column)."""
    for fit in TABLE_FITS:
        yield fit, None
    for k in range(2, n_columns + 1):
        size = -(-n_columns // k)
        yield "split", [list(range(i, min(i + size, n_columns))) for i in range(0, n_columns, size)]


def fit_layout(template: str, ctx: dict):
    """``template`` laid out (a WeasyPrint document) with every column of its tables marked ``data-fit``
    (the prep sheet's tube table, the report's recipe) inside the page: a table wider than the page (many
    stocks) is set in smaller type, then on a landscape page of its own, then split into tables of fewer
    stocks (the template reads ``fit`` and ``parts``)."""
    import weasyprint

    from .boxes import overflowing

    for fit, parts in _fits(len(ctx["columns"])):
        html = render_html(template, {**ctx, "fit": fit, "parts": parts})
        doc = weasyprint.HTML(string=html, base_url=None, url_fetcher=DataOnlyFetcher()).render()
        if not overflowing(doc, "data-fit"):
            break
    return doc


def report(plan, recipe, assessment, *, design=None, paper: str = "A4", fmt: str = "pdf", date=None) -> bytes:
    """The design report: verdict first, recipe, figures, checks, parameters and correlations.

    Parameters
    ----------
    design : optional design behind the recipe: a :class:`~planner.jobs.plan.design.Design`, or a
        ``design.json`` (read as a mapping, or as :class:`~planner.paper.sheets.DesignFacts`); its
        criterion, efficiency bound and SE ratio against the even series are shown.
    paper, fmt, date : as in :func:`prep_sheet`.
    """
    from . import figures as fig

    validate_paper_format(paper, fmt)
    from ..jobs.stocks.needs import stock_needs

    if isinstance(design, Mapping):  # a design.json read back
        design = DesignFacts.from_json(design)
    elif design is not None and not isinstance(design, DesignFacts):
        design = DesignFacts.of(design)
    spectra = assessment.spectra is not None
    if spectra:
        from .spectra_report import report_facts, report_figures

        figs = report_figures(assessment)
    else:
        figs = _report_figures(plan, recipe, assessment, fig)
    notes = plan_notes(plan, stock_needs(plan, recipe))
    ctx = report_context(
        plan, recipe, assessment, date=date_text(date), paper=paper, figures=figs, design=design, notes=notes
    )
    if spectra:
        ctx["facts"] = report_facts(plan, ctx["facts"])
        ctx["a_heading"] = "Highest A in the window (±2 sd)"
    if fmt == "html":
        return render_html("report.html.j2", ctx).encode("utf-8")
    return fit_layout("report.html.j2", ctx).write_pdf()


def fit_report(plan, fit, *, kind: str = "pdf", paper: str = "A4", date=None) -> bytes:
    """The fit report of whole spectra: fitted constants, the fitted spectra with their bands, the
    singular values and each tube's residuals; ``kind`` "pdf" (bytes of the PDF) or "html"."""
    from .spectra_report import fit_context

    validate_paper_format(paper, kind)
    return output_bytes(
        render_html("spectra_fit.html.j2", fit_context(plan, fit, paper=paper, date=date_text(date))), kind
    )


def _report_figures(plan, recipe, assessment, fig) -> list[dict]:
    from markupsafe import Markup

    from ..jobs.compile import compile_study
    from ..jobs.plan import curves

    # the assessment carries the plan compiled for it; compile only for one built elsewhere
    study = assessment.study if assessment.study is not None else compile_study(plan)

    out = [
        {
            "svg": Markup(
                fig.absorbance_svg(
                    assessment.recipe.tubes,
                    assessment.state.absorbance,
                    assessment.absorbance_sd,
                    tuple(plan.optics.linear_range),
                )
            ),
            "caption": "Expected absorbance of each tube (bars: ±2 sd of one reading, every error source) "
            "inside the instrument's linear range.",
        }
    ]
    curve = curves.binding_curve_data(study, assessment)
    names = {"M": _fmt.ion(plan.components.M.label or "M"), "L": _fmt.ion(plan.components.L.label or "L")}
    out.append(
        {
            "svg": Markup(fig.binding_svg(curve, names)),
            "caption": "Tubes on the binding curve: saturation (the fraction of each tube's limiting "
            "reagent bound, as in the recipe table and the saturation check) against the "
            "free reagent in excess; one curve per distinct limiting total.",
        }
    )
    params = assessment.params
    t = params.target if params is not None else -1
    mc = fig.assessment_mc_figure(
        assessment,
        "Monte-Carlo fits of simulated experiments against the Cramér–Rao normal curve: matching shapes "
        "mean the asymptotic SE holds.",
    )
    if mc is not None:
        out.append(mc)
    if t >= 0:
        scan = curves.se_scan_data(study, recipe)
        if scan is not None:
            out.append(
                {
                    "svg": Markup(fig.se_scan_svg(scan)),
                    "caption": "How the SE of the target would change if the true constant were "
                    "elsewhere in the guess's range (±2 sd).",
                }
            )
    return out
