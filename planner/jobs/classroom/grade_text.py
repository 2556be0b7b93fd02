"""What a grade says beside each student's test: the class's constants against the plan's guess, the
stock bottles the class fitted, the shares of readings inside the key's bands and the class's, and the
sentences about them (``kplan grade`` prints them, the grade book and the class report show them; the JSON
is :func:`planner.paper.json_out.class_grade_json`)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..measure.core import CHI2_TAIL

KEY_NOTE_POINTS = 5.0  # the key's bands are said to be off when they hold this many % fewer readings


@dataclass(frozen=True)
class PooledParameter:
    """One constant or absorptivity of the class's fit beside the plan's guess.

    Attributes
    ----------
    name : e.g. ``log_beta[ML]``.
    estimate, se : the class's value and its SE.
    guess, guess_sd : the plan's guess and its sd (log units for a constant, absolute for ε).
    profile_ci95 : the profile 95 % interval (target only; None: not computed).
    is_target : the plan's target constant.
    """

    name: str
    estimate: float
    se: float
    guess: float
    guess_sd: float
    profile_ci95: tuple[float, float] | None = None
    is_target: bool = False

    @property
    def off_by(self) -> float:
        return self.estimate - self.guess

    @property
    def off_by_sd(self) -> float | None:
        """How many of the guess's sd the class's value lies from it (None when the guess has none)."""
        return (self.estimate - self.guess) / self.guess_sd if self.guess_sd > 0 else None


@dataclass(frozen=True)
class BandShares:
    """Shares of the readings of the students judged ok inside the key's bands and inside the class's
    (None without such readings)."""

    key: float | None
    in_class: float | None
    readings: int


def pretty(name: str) -> str:
    """log_beta[ML] → log β(ML), epsilon[ML] → ε(ML)."""
    return name.replace("log_beta[", "log β(").replace("epsilon[", "ε(").replace("]", ")")


def chi2_verdict(dof: int, p_high: float, p_low: float) -> str:
    if dof < 1 or not np.isfinite(p_high):
        return "no degrees of freedom left: χ² cannot test the fit"
    if p_high < CHI2_TAIL:
        return (
            "the class's readings scatter more than the plan's error model predicts (a noisier instrument or "
            "glassware than planned): the SEs and the interval are widened by √(χ²/dof)"
        )
    if p_low < CHI2_TAIL:
        return (
            "the class's readings scatter less than the plan's error model predicts: it may be too "
            "pessimistic"
        )
    return "the class's readings scatter as the plan's error model predicts"


def pooled_parameters(g) -> tuple[PooledParameter, ...]:
    """The class's fitted parameters beside the plan's guess (empty without a class model)."""
    cm, params = g.pooled, g.study.params
    if cm is None:
        return ()
    return tuple(
        PooledParameter(
            name,
            float(cm.theta[p]),
            float(cm.se[p]),
            float(params.guess[p]),
            float(params.prior_sd[p]),
            ((float(cm.ci[0]), float(cm.ci[1])) if cm.ci is not None else None)
            if p == params.target
            else None,
            p == params.target,
        )
        for p, name in enumerate(params.names)
    )


def stock_factors(g) -> tuple[tuple[str, float, float], ...]:
    """(stock, fitted factor on its label's concentration, its sd) of every stock with an uncertain
    concentration, from the class's fit (empty without one)."""
    cm = g.pooled
    if cm is None:
        return ()
    ids = g.study.model.stock_conc_M.shape[0]
    rsd = g.study.model.stock_conc_rsd
    se_z = np.sqrt(np.maximum(np.diag(cm.cov)[g.study.params.size :], 0.0))
    return tuple(
        (sid, float(1 + rsd[j] * cm.z[j]), float(rsd[j] * se_z[j]))
        for j, sid in enumerate(g.study.bench.stock_ids[:ids])
        if rsd[j] > 0
    )


def guess_note(g) -> str:
    """ "the class measured log β(ML) = 3.452 ± 0.006; the plan guessed 3.30 ± 0.50 (+0.15, 0.3 sd)"…"""
    if g.pooled is None:
        return ""
    parts = []
    for row in pooled_parameters(g):
        nm = pretty(row.name)
        if row.name.startswith("log_beta"):
            parts.append(
                f"{nm} = {row.estimate:.3f} ± {row.se:.2g}; the plan guessed {row.guess:.2f} ± "
                f"{row.guess_sd:.2g} (off by {row.off_by:+.2f}, "
                f"{abs(row.off_by_sd or 0):.1f} of its sd)"
            )
        else:
            rel = row.off_by / row.guess if row.guess else float("nan")
            parts.append(
                f"{nm} = {row.estimate:.4g} ± {row.se:.2g}; the plan guessed {row.guess:.4g} ± "
                f"{row.guess_sd / row.guess:.0%} (off by {rel:+.1%})"
            )
    return "the class measured " + "; ".join(parts)


def band_shares(students) -> BandShares:
    """Shares of the readings of students judged ok inside the key's bands and inside the class's."""
    ok = [s for s in students if s.verdict == "ok"]
    n = sum(int(s.in_band.size) for s in ok)
    if not n:
        return BandShares(None, None, 0)
    in_key = sum(int(np.sum(s.in_band)) for s in ok)
    in_class = sum(int(np.sum(s.in_class_band)) for s in ok)
    return BandShares(in_key / n, in_class / n, n)


def key_note(shares: BandShares) -> str:
    if shares.key is None or shares.in_class is None:
        return ""
    k, c = 100 * shares.key, 100 * shares.in_class
    if c - k < KEY_NOTE_POINTS:
        return ""
    return (
        f"the key's bands were made before the lab at the plan's guess: they hold {k:.0f} % of the readings "
        f"of the students judged ok, the bands at the class's constants {c:.0f} % — the guess was off, not "
        f"the students"
    )
