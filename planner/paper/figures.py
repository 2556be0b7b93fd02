"""Figures of the design report: matplotlib (no display, no pyplot state) drawn to inline SVG text.

What a figure shows is computed in the jobs layer (:mod:`planner.jobs.plan.curves`); the ``*_svg``
functions here only draw it. The SVGs are deterministic (fixed hash salt, no date) and their element ids are
prefixed so that
several can share one HTML page.
"""

from __future__ import annotations

import io
import re

import numpy as np

from ..jobs.plan.checks import SATURATION_WINDOW
from ..jobs.plan.curves import BindingCurve, SeScan
from . import fmt

__all__ = [
    "absorbance_svg",
    "binding_svg",
    "mc_histogram_svg",
    "place_labels",
    "se_scan_svg",
]

WIDTH_IN, HEIGHT_IN = 3.45, 2.45  # two figures side by side on A4 or Letter
INK, ACCENT, BAND, WARN = "#1f2933", "#1d5fa7", "#dbe7f3", "#b42318"
_RC = {
    "svg.fonttype": "none",  # text stays text: small files, searchable PDFs
    "svg.hashsalt": "kplan",  # ids from a fixed salt: same input, same bytes
    "font.family": "DejaVu Sans",
    "font.size": 7.5,
    "axes.titlesize": 8.0,
    "axes.labelsize": 7.5,
    "axes.edgecolor": "#52606d",
    "axes.linewidth": 0.6,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "xtick.labelsize": 6.8,
    "ytick.labelsize": 6.8,
    "legend.fontsize": 6.5,
    "legend.frameon": False,
    "lines.linewidth": 1.2,
}


def _figure():
    from matplotlib.figure import Figure

    fig = Figure(figsize=(WIDTH_IN, HEIGHT_IN))
    ax = fig.add_subplot()
    ax.spines[["top", "right"]].set_visible(False)
    return fig, ax


def _plain(label: str) -> str:
    """A user's label as literal text for matplotlib (no mathtext)."""
    return str(label).replace("$", r"\$")


def _svg(fig, prefix: str) -> str:
    """The figure as an ``<svg>`` element (no XML prolog), element ids prefixed with ``prefix``."""
    import matplotlib

    buf = io.StringIO()
    with matplotlib.rc_context(_RC):
        fig.tight_layout(pad=0.4)
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    text = buf.getvalue()
    text = text[text.index("<svg") :]
    text = re.sub(r'\bid="([^"]+)"', rf'id="{prefix}-\1"', text)
    text = re.sub(r"url\(#([^)]+)\)", rf"url(#{prefix}-\1)", text)
    text = re.sub(r'xlink:href="#([^"]+)"', rf'xlink:href="#{prefix}-\1"', text)
    return text


def _draw(prefix: str, paint) -> str:
    import matplotlib

    with matplotlib.rc_context(_RC):
        fig, ax = _figure()
        paint(fig, ax)
        return _svg(fig, prefix)


# --------------------------------------------------------------------------------------------------
# expected absorbance of each tube in the linear range
# --------------------------------------------------------------------------------------------------
def absorbance_svg(tubes: list[dict], linear_range: tuple[float, float], *, prefix: str = "fa") -> str:
    """Each tube's expected absorbance with a ±2 sd bar, over the linear-range band.

    ``tubes`` are the assessment summary's tube rows (keys "tube", "absorbance", "absorbance_sd").
    """
    labels = [_plain(t["tube"]) for t in tubes]
    a = np.array([t["absorbance"] for t in tubes], dtype=float)
    sd = np.array([t["absorbance_sd"] for t in tubes], dtype=float)
    lo, hi = linear_range
    x = np.arange(len(a))
    inside = (a >= lo) & (a <= hi)

    def paint(fig, ax):
        ax.axhspan(
            lo, hi, color=BAND, lw=0, label=f"linear range {fmt.fixed(lo, 0.01)}–{fmt.fixed(hi, 0.01)}"
        )
        ax.errorbar(
            x[inside],
            a[inside],
            yerr=2 * sd[inside],
            fmt="o",
            ms=3.5,
            color=ACCENT,
            ecolor=ACCENT,
            elinewidth=0.9,
            capsize=2,
            label="expected A ± 2 sd",
        )
        if (~inside).any():
            ax.errorbar(
                x[~inside],
                a[~inside],
                yerr=2 * sd[~inside],
                fmt="s",
                ms=3.5,
                color=WARN,
                ecolor=WARN,
                elinewidth=0.9,
                capsize=2,
                label="outside the range",
            )
        ax.set_xticks(x, labels, rotation=0 if len(x) <= 12 else 90)
        top = max(hi, float(np.max(a + 2 * sd))) if a.size else hi
        ax.set_ylim(0, top * 1.08)
        ax.set_xlim(-0.6, len(x) - 0.4)
        ax.set_xlabel("tube")
        ax.set_ylabel("absorbance")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)


# --------------------------------------------------------------------------------------------------
# binding curve
# --------------------------------------------------------------------------------------------------
def binding_svg(curve: BindingCurve, names: dict[str, str] | None = None, *, prefix: str = "fb") -> str:
    """Saturation against the free reagent in excess (log axis), the 0.2–0.8 window shaded, the tubes on it.

    One curve per distinct limiting total (coinciding ones merged, the legend says at which totals);
    replicate tubes are one point with one label, and labels are placed so they do not overlap.
    ``names`` maps "M" and "L" to the components' labels (e.g. {"M": "Cu2+", "L": "Dy-"}).
    """
    lo, hi = SATURATION_WINDOW
    names = {"M": "metal", "L": "ligand", **(names or {})}
    excess = {("L" if ln.limiting == "M" else "M") for ln in curve.lines}
    styles = ("-", "--", ":", "-.")

    def paint(fig, ax):
        ax.axhspan(lo, hi, color=BAND, lw=0, label=f"window {fmt.sig(lo, 1)}–{fmt.sig(hi, 1)}")
        for k, ln in enumerate(curve.lines):
            ok = ln.free_excess_M > 0
            tots = sorted(ln.totals_M)
            at = fmt.conc(tots[0]) if len(tots) == 1 else f"{fmt.conc(tots[0])}–{fmt.conc(tots[-1])}"
            ax.plot(
                ln.free_excess_M[ok],
                ln.saturation[ok],
                color=INK,
                lw=1.1,
                ls=styles[k % len(styles)],
                label=_plain(f"{names[ln.limiting]} limiting, {at}"),
            )
        points = _replicate_points(curve)
        if points:
            xs = np.array([p[0] for p in points])
            ys = np.array([p[1] for p in points])
            ax.plot(xs, ys, "o", ms=4, color=ACCENT, mec="white", mew=0.5, label="tubes", zorder=3)
        ax.set_xscale("log")
        ax.set_ylim(-0.02, 1.02)
        if points:
            ax.set_xlim(*_log_limits([*(ln.free_excess_M[ln.free_excess_M > 0] for ln in curve.lines), xs]))
            _label_points(fig, ax, points)
        who = names[next(iter(excess))] if len(excess) == 1 else "reagent in excess"
        ax.set_xlabel(_plain(f"free {who} / M"))
        ax.set_ylabel("saturation (limiting reagent bound)")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)


def _replicate_points(curve: BindingCurve) -> list[tuple[float, float, str]]:
    """(x, y, label) per distinct composition with x > 0; replicates share one label ("T1–T3")."""
    where = {t: i for i, t in enumerate(curve.tubes)}
    out = []
    for group in curve.replicates:
        i = where[group[0]]
        x, y = float(curve.tube_free_excess_M[i]), float(curve.tube_saturation[i])
        if x > 0:
            out.append((x, y, _tube_range([where[t] for t in group], curve.tubes)))
    return out


def _tube_range(idx: list[int], labels) -> str:
    """Consecutive runs of tubes written as "T1–T4", others listed: "T1–T3, T6"."""
    runs: list[list[int]] = []
    for i in sorted(idx):
        if runs and i == runs[-1][-1] + 1:
            runs[-1].append(i)
        else:
            runs.append([i])
    parts = []
    for r in runs:
        first, last = _plain(labels[r[0]]), _plain(labels[r[-1]])
        parts.append(first if len(r) == 1 else f"{first}, {last}" if len(r) == 2 else f"{first}–{last}")
    return ", ".join(parts)


def _log_limits(arrays) -> tuple[float, float]:
    vals = np.concatenate([np.asarray(a, dtype=float).ravel() for a in arrays])
    vals = vals[vals > 0]
    return float(vals.min()) / 1.5, float(vals.max()) * 1.5


LABEL_PT = 5.8  # label font size, pt
_OFFSETS = ((5, -10), (5, 4), (-5, 4), (-5, -10), (5, 13), (5, -19), (-5, 13), (-5, -19))
"""Candidate label offsets from a point (points; negative x puts the label to the left)."""


def place_labels(centres_pt: np.ndarray, labels: list[str], width_pt: float, height_pt: float):
    """Offsets (dx, dy) in points and text boxes for labels of points at ``centres_pt`` (n, 2).

    Each label takes the first candidate offset whose box overlaps no earlier label and no other point
    and stays inside the axes (the first candidate when none is free); points are taken left to
    right. Boxes are estimated from the label length (DejaVu Sans averages ≈ 0.6 em per character),
    so the placement is deterministic.
    """
    marks = [(cx - 3, cy - 3, cx + 3, cy + 3) for cx, cy in centres_pt]
    placed: dict[int, tuple] = {}

    def clash(b, others):
        return any(b[0] < o[2] and o[0] < b[2] and b[1] < o[3] and o[1] < b[3] for o in others)

    for i in np.argsort(centres_pt[:, 0], kind="stable"):
        cx, cy = centres_pt[i]
        width = 0.6 * LABEL_PT * len(labels[i])
        choice = None
        for dx, dy in _OFFSETS:
            x0 = cx + dx if dx >= 0 else cx + dx - width
            box = (x0, cy + dy, x0 + width, cy + dy + LABEL_PT)
            inside = box[0] >= 0 and box[2] <= width_pt and box[1] >= 0 and box[3] <= height_pt
            if (
                inside
                and not clash(box, [c[2] for c in placed.values()])
                and not clash(box, marks[:i] + marks[i + 1 :])
            ):
                choice = (dx, dy, box)
                break
        if choice is None:
            dx, dy = _OFFSETS[0]
            choice = (dx, dy, (cx + dx, cy + dy, cx + dx + width, cy + dy + LABEL_PT))
        placed[int(i)] = choice
    return [placed[i] for i in range(len(labels))]


def _label_points(fig, ax, points) -> None:
    """Annotate each point where :func:`place_labels` puts its label."""
    pos = ax.get_position()
    w_pt, h_pt = pos.width * fig.get_figwidth() * 72, pos.height * fig.get_figheight() * 72
    to_axes = ax.transData + ax.transAxes.inverted()
    centres = to_axes.transform(np.array([[x, y] for x, y, _ in points])) * [w_pt, h_pt]  # in points
    for (x, y, label), (dx, dy, _box) in zip(
        points, place_labels(centres, [p[2] for p in points], w_pt, h_pt), strict=True
    ):
        ax.annotate(
            label,
            (x, y),
            xytext=(dx, dy),
            textcoords="offset points",
            fontsize=LABEL_PT,
            color="#52606d",
            ha="left" if dx >= 0 else "right",
            va="bottom",
        )


# --------------------------------------------------------------------------------------------------
# Monte Carlo against Cramér–Rao
# --------------------------------------------------------------------------------------------------
def mc_histogram_svg(
    estimates: np.ndarray, true: float, se: float, *, name: str = "log K", prefix: str = "fm"
) -> str:
    """Histogram of the Monte-Carlo estimates with the Cramér–Rao normal density N(true, se²) over it.

    The Cramér–Rao bound is the asymptotic covariance of an efficient estimator [source: Cramér
    1946, Mathematical Methods of Statistics; Rao 1945, Bull. Calcutta Math. Soc. 37:81]; agreement
    of the two shapes says the asymptotic SE can be trusted.
    """
    est = np.asarray(estimates, dtype=float)
    est = est[np.isfinite(est)]

    def paint(fig, ax):
        if est.size:
            bins = int(np.clip(np.sqrt(est.size), 10, 40))
            ax.hist(
                est,
                bins=bins,
                density=True,
                color=BAND,
                edgecolor=ACCENT,
                lw=0.5,
                label=f"Monte Carlo ({est.size} fits)",
            )
        if np.isfinite(se) and se > 0:
            span = max(4 * se, float(np.max(np.abs(est - true))) if est.size else 0.0)
            x = np.linspace(true - span, true + span, 300)
            ax.plot(
                x,
                np.exp(-0.5 * ((x - true) / se) ** 2) / (se * np.sqrt(2 * np.pi)),
                color=INK,
                label=f"Cramér–Rao, SE {fmt.sig(se, 2)}",
            )
        ax.axvline(true, color=WARN, lw=0.8, ls="--", label="assumed true")
        ax.set_ylim(0, ax.get_ylim()[1] * 1.3)  # headroom for the legend above the bars
        ax.set_xlabel(_plain(name))
        ax.set_ylabel("density")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)


def assessment_mc_figure(assessment, caption: str) -> dict | None:
    """The Monte-Carlo histogram of an assessment's target as a report figure (None without one)."""
    from markupsafe import Markup

    params = assessment.params
    t = params.target if params is not None else -1
    if assessment.mc is None or t < 0 or assessment.cramer_rao is None:
        return None
    svg = mc_histogram_svg(
        assessment.mc.estimates[:, t],
        float(assessment.true_theta[t]),
        float(assessment.cramer_rao.se[t]),
        name=fmt.param_label(params.names[t]),
    )
    return {"svg": Markup(svg), "caption": caption}


# --------------------------------------------------------------------------------------------------
# SE against the true constant
# --------------------------------------------------------------------------------------------------
def se_scan_svg(scan: SeScan, *, prefix: str = "fs") -> str:
    """SE(log β) against the assumed true log β, with the goal and the guess marked."""

    def paint(fig, ax):
        ok = np.isfinite(scan.se)
        ax.plot(scan.log_beta[ok], scan.se[ok], "o-", ms=3.5, color=ACCENT, label="SE (Cramér–Rao)")
        ax.axhline(scan.goal_se, color=WARN, lw=0.8, ls="--", label=f"goal {fmt.sig(scan.goal_se, 2)}")
        ax.axvline(scan.guess, color="#7b8794", lw=0.8, ls=":", label="guess")
        if ok.any() and np.nanmax(scan.se) / max(np.nanmin(scan.se[ok]), 1e-300) > 20:
            ax.set_yscale("log")
        else:
            ax.set_ylim(0, max(float(np.nanmax(scan.se[ok])) if ok.any() else 0.0, scan.goal_se) * 1.15)
        label = _plain(fmt.param_label(f"log_beta[{scan.target}]"))
        ax.set_xlabel(f"assumed true {label}")
        ax.set_ylabel(f"SE of {label}")
        ax.legend(loc="upper left")

    return _draw(prefix, paint)
