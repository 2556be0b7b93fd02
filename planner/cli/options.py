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
    """The recipe (or readings) in PATH for ``plan``: see :func:`planner.jobs.titrate.read_points`."""
    from ..jobs.titrate import read_points as _read

    return _read(path, plan, study, readings=readings)
