"""Shared body of ``kplan sheet`` and ``kplan report``: assess the recipe, render, write atomically."""

from __future__ import annotations

import json
from pathlib import Path

from ..inputs.choices import PAPERS
from .app import UserError, out
from .app import safe_text as S
from .options import _with_progress, read_points

MAX_DESIGN_JSON_BYTES = 1_000_000  # a design.json is a few kB
# what the report shows of a design.json, with the JSON types each key may hold
_DESIGN_KEYS = {"criterion": (str,), "efficiency_bound": (int, float), "se_ratio_vs_even": (int, float)}


def read_design_json(path: Path) -> dict:
    """The summary written by ``kplan design --out``, checked for what the report shows of it.

    Raises
    ------
    UserError
        For a file that cannot be read, is not JSON, is not a JSON object, or holds a shown key of the
        wrong type.
    """
    where = f"--design {path}"
    try:
        with Path(path).open("rb") as fh:
            raw = fh.read(MAX_DESIGN_JSON_BYTES + 1)
    except OSError as exc:
        raise UserError(f"{where}: cannot read it ({exc.strerror or exc}): check the path") from None
    if len(raw) > MAX_DESIGN_JSON_BYTES:
        raise UserError(f"{where}: larger than 1 MB, so not a design.json from kplan design")
    try:
        data = json.loads(raw.decode("utf-8-sig"))
    except (UnicodeDecodeError, json.JSONDecodeError, RecursionError) as exc:
        why = f"line {exc.lineno}: {exc.msg}" if isinstance(exc, json.JSONDecodeError) else "not UTF-8 JSON"
        raise UserError(
            f"{where}: not readable as JSON ({why}): give the design.json kplan design wrote"
        ) from None
    if not isinstance(data, dict):
        kinds = {list: "an array", str: "a string", bool: "a boolean", type(None): "null"}
        kind = kinds.get(type(data), "a number")
        raise UserError(
            f"{where}: holds {kind}, not the JSON object kplan design writes: "
            "give the design.json from 'kplan design --out DIR'"
        )
    for key, types in _DESIGN_KEYS.items():
        v = data.get(key)
        if v is not None and (isinstance(v, bool) or not isinstance(v, types)):
            raise UserError(
                f"{where}: key '{key}' holds {json.dumps(v)[:40]}, not a "
                f"{'string' if types == (str,) else 'number'}: "
                "give the design.json kplan design wrote"
            )
    return data


PAPER_CHOICES = tuple(PAPERS)  # the same keys as planner.paper.render.PAPERS (one definition)


def _paper_output(
    kind: str,
    plan: Path,
    recipe: Path,
    out_path: Path,
    html: bool,
    paper: str,
    trials: int,
    seed: int,
    design_json: Path | None = None,
) -> None:
    from ..inputs.files import check_output_file, write_atomic_bytes
    from ..inputs.plan import load_plan
    from ..jobs.compile import compile_study
    from ..jobs.plan.assess import assess_study
    from ..jobs.stocks.needs import stock_needs
    from ..paper.render import PAPERS
    from ..paper.render import prep_sheet as render_sheet
    from ..paper.render import report as render_report
    from ..uncertainty.budget import require_glassware_fits

    if paper not in PAPERS:
        raise UserError(f"--paper {paper}: choose one of {', '.join(PAPERS)}")
    fmt_ = "html" if html else "pdf"
    # every input and the output path are checked before the Monte Carlo, which may take a while
    check_output_file(out_path, inputs=(plan, recipe, design_json))
    design_summary = read_design_json(design_json) if design_json is not None else None
    p = load_plan(plan)
    study = compile_study(p)
    r = read_points(recipe, p, study)
    if kind == "sheet":
        require_glassware_fits(study.bench, r)  # followed at the bench: every volume must be deliverable
    job = assess_study
    if study.spectra is not None:  # the sheet's design check and expected bands come from whole spectra
        from ..jobs.spectra.assess import assess_spectra as job
    a = _with_progress(
        lambda prog: job(study, r, trials=trials, seed=seed, progress=prog),
        trials,
        quiet=False,
        tubes=r.n_tubes,
    )
    if kind == "sheet" and p.titration is not None:
        from ..paper.titration_sheet import titration_sheet

        data = titration_sheet(p, r, a, paper=paper, fmt_=fmt_)
    elif kind == "sheet":
        data = render_sheet(p, r, a, stock_needs(p, r), paper=paper, fmt=fmt_, order=p.glassware.order)
    else:
        data = render_report(p, r, a, design=design_summary, paper=paper, fmt=fmt_)
    write_atomic_bytes(out_path, data)
    out.print(f"wrote {S(out_path)} ({len(data) / 1024:.0f} kB, {paper})")
