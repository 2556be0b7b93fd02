"""Shared body of ``kplan sheet`` and ``kplan report``: assess the recipe, render, write atomically."""

from __future__ import annotations

import json
from pathlib import Path

from ..inputs.plan import load_plan
from .app import UserError, out
from .options import _with_progress, read_points

PAPER_CHOICES = ("A4", "Letter")  # the same keys as planner.render.PAPERS (checked in the tests)


def _paper_output(kind: str, plan: Path, recipe: Path, out_path: Path, html: bool, paper: str, trials: int,
                  seed: int, design_json: Path | None = None) -> None:
    from ..inputs.files import write_atomic_bytes
    from ..jobs.assess import assess_study
    from ..jobs.compile import compile_study
    from ..jobs.stock_needs import stock_needs
    from ..paper.render import PAPERS
    from ..paper.render import prep_sheet as render_sheet
    from ..paper.render import report as render_report
    from ..uncertainty.budget import require_glassware_fits

    if paper not in PAPERS:
        raise UserError(f"--paper {paper}: choose one of {', '.join(PAPERS)}")
    fmt_ = "html" if html else "pdf"
    p = load_plan(plan)
    study = compile_study(p)
    r = read_points(recipe, p, study)
    if kind == "sheet":
        require_glassware_fits(study.bench, r)  # followed at the bench: every volume must be deliverable
    a = _with_progress(lambda prog: assess_study(study, r, trials=trials, seed=seed, progress=prog), trials,
                       quiet=False)
    if kind == "sheet" and p.titration is not None:
        from ..paper.titration_sheet import titration_sheet

        data = titration_sheet(p, r, a, paper=paper, fmt_=fmt_)
    elif kind == "sheet":
        data = render_sheet(p, r, a, stock_needs(p, r), paper=paper, fmt=fmt_, order=p.glassware.order)
    else:
        design_summary = None
        if design_json is not None:
            try:
                design_summary = json.loads(design_json.read_text(encoding="utf-8"))
            except (OSError, json.JSONDecodeError) as exc:
                raise UserError(f"--design {design_json}: cannot read it as the JSON from kplan design ({exc})") from None
        data = render_report(p, r, a, design=design_summary, paper=paper, fmt=fmt_)
    write_atomic_bytes(out_path, data)
    out.print(f"wrote {out_path} ({len(data) / 1024:.0f} kB, {paper})")
