"""Tails of the χ² distributions the tests use, from scipy.special (scipy.stats takes about a second to
import; these functions are the same numerics without it)."""

from __future__ import annotations

import numpy as np
from scipy import special


def chi2_sf(x, dof):
    """P(χ²_dof > x)."""
    return special.chdtrc(dof, x)


def chi2_cdf(x, dof):
    """P(χ²_dof ≤ x)."""
    return special.chdtr(dof, x)


def chi2_ppf(q, dof):
    """The x with P(χ²_dof ≤ x) = q."""
    return special.chdtri(dof, 1.0 - np.asarray(q, dtype=float))


def ncx2_sf(x, dof, nc):
    """P(χ²_dof(nc) > x), noncentral χ² with noncentrality nc."""
    return 1.0 - special.chndtr(x, dof, nc)
