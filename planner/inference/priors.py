"""Quadrature over the guesses' uncertainty, shared by the design (robust criterion, range screen) and
the assessment (linear-range band).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from .precision import Parameters

GH3 = (np.array([-math.sqrt(3.0), 0.0, math.sqrt(3.0)]), np.array([1 / 6, 2 / 3, 1 / 6]))
# source: Gauss–Hermite (probabilists') 3-point rule, nodes 0, ±√3 with weights 2/3, 1/6 — exact to degree 5
GH5 = (
    np.array([-2.856970013872806, -1.355626179974266, 0.0, 1.355626179974266, 2.856970013872806]),
    np.array([0.011257411327721, 0.222075922005613, 0.533333333333333, 0.222075922005613, 0.011257411327721]),
)
# source: Gauss–Hermite (probabilists') 5-point rule (Abramowitz & Stegun 1964, table 25.10, rescaled)


@dataclass(frozen=True)
class Nodes:
    """Quadrature nodes over the guesses' uncertainty: theta (G, P) and weights (G,)."""

    theta: np.ndarray
    weights: np.ndarray


def prior_nodes(params: Parameters, robust: bool) -> Nodes:
    """Nodes over the uncertain log β (ε enters linearly and stays at its guess).

    One uncertain constant: 5-point Gauss–Hermite; two: the 3 × 3 product rule; more: the centre and
    ±√3 sd along each axis (a degree-3 rule, Stroud 1971).
    """
    g = params.guess
    if not robust:
        return Nodes(g[None, :].copy(), np.ones(1))
    axes = [p for p in range(params.size) if params.kind[p] == 0 and params.prior_sd[p] > 0]
    if not axes:
        return Nodes(g[None, :].copy(), np.ones(1))
    if len(axes) == 1:
        x, w = GH5
        th = np.repeat(g[None, :], x.size, axis=0)
        th[:, axes[0]] += x * params.prior_sd[axes[0]]
        return Nodes(th, w)
    if len(axes) == 2:
        x, w = GH3
        rows, ws = [], []
        for (i, xi), (j, xj) in itertools.product(enumerate(x), enumerate(x)):
            t = g.copy()
            t[axes[0]] += xi * params.prior_sd[axes[0]]
            t[axes[1]] += xj * params.prior_sd[axes[1]]
            rows.append(t)
            ws.append(w[i] * w[j])
        return Nodes(np.array(rows), np.array(ws))
    d = len(axes)
    rows, ws = [g.copy()], [1.0 - d / 3.0]
    for a in axes:
        for sgn in (-1.0, 1.0):
            t = g.copy()
            t[a] += sgn * math.sqrt(3.0) * params.prior_sd[a]
            rows.append(t)
            ws.append(1.0 / 6.0)
    w = np.array(ws)
    if w[0] < 0:  # d > 3: keep the weights positive (a slightly less exact, positive rule)
        w[0] = 0.0
    return Nodes(np.array(rows), w / w.sum())
