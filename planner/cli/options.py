"""Helpers shared by the commands: ``--at`` parsing, reading a recipe or a titration schedule, and the
Monte-Carlo progress bar."""

from __future__ import annotations

from .app import UserError, err


def parse_at(items: list[str]) -> dict[str, float]:
    """'ML=4.3' pairs from repeated --at options."""
    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        try:
            if not sep:
                raise ValueError
            out[name.strip()] = float(value)
        except ValueError:
            raise UserError(f"--at {item}: write NAME=LOGBETA, e.g. --at ML=4.3") from None
    return out


def _with_progress(run, trials: int, quiet: bool):
    """Run ``run(progress)`` with a rich progress bar on long Monte-Carlo runs."""
    if quiet or trials < 5000 or not err.is_terminal:
        return run(None)
    from rich.progress import Progress

    with Progress(console=err, transient=True) as bar:
        task = bar.add_task("Monte Carlo", total=trials)
        return run(lambda done, total: bar.update(task, completed=done))


def read_points(path, plan, study, *, readings: bool = False):
    """The recipe of PATH for ``plan``: a tube recipe CSV, or (for a plan with [titration]) a titration
    schedule CSV (step, aliquot_mL[, absorbance]). With ``readings``: a Readings object (absorbance needed)."""
    from ..inputs.readings import Readings, read_readings_csv
    from ..inputs.recipe import read_recipe_csv
    from ..inputs.schedule import read_schedule_csv
    from ..jobs.titrate import schedule_points

    if plan.titration is None:
        return read_readings_csv(path, plan) if readings else read_recipe_csv(path, plan)
    schedule = read_schedule_csv(path, need_absorbance=readings)
    rec = schedule_points(study, schedule)
    return Readings(rec, schedule.absorbance) if readings else rec
