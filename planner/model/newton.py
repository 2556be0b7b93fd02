"""The equilibrium solver's engine: Newton's method on the convex formulation, the p ≤ 1 elimination,
the closed-form starting points and the bracketed fallback (see :mod:`planner.model.speciation`).
"""

from __future__ import annotations

import numpy as np

from .closed_forms import EquilibriumError, one_to_one_free

LN10 = float(np.log(10.0))

# ln(0) stand-in for a component whose total is zero: exp() of it, or of any multiple of it, is exactly 0,
# and 0 * LN_ZERO is 0 (with -inf it would be NaN), so species that need that component vanish exactly.
LN_ZERO = -1.0e300
# Newton stops once both |ln(computed/given total)| are below this; the rounding floor of the residual
# is about eps * |ln[s]| ~ 1e-14 (ln[s] is a sum of terms up to ~100), so this is reachable almost always.
_TOL_RES = 2e-14
# A tube whose line search can no longer reduce the residual is accepted when below this (rounding
# limited); otherwise it goes to the bracketed fallback.
_TOL_STALL = 1e-11
# Largest change of ln[M] or ln[L] in one Newton step (a factor of e^6 ~ 400): the exponentials make the
# linear model useless beyond that, and capping saves line-search halvings.
_MAX_STEP = 6.0
_MAX_NEWTON = 60
_MAX_HALVINGS = 40
_ARMIJO = 1e-4
# tubes per block (working arrays of a block fit in a 1 MiB L2 cache)
_BLOCK = 16384


class SolverSystem:
    """Stoichiometry and the weight vectors the solver needs (species-major: arrays are (S, n))."""

    def __init__(self, p, q):
        self.p, self.q = p, q
        self.S = p.size
        self.p2, self.pq, self.q2 = p * p, p * q, q * q
        # pairs of complexes entering the determinant by Lagrange's identity, weight (p_s q_t - p_t q_s)^2
        self.pairs = [
            (s, t, float((p[s] * q[t] - p[t] * q[s]) ** 2))
            for s in range(self.S)
            for t in range(s + 1, self.S)
            if p[s] * q[t] != p[t] * q[s]
        ]
        self.side_M = np.flatnonzero((p == 1) & (q == 0))
        self.side_L = np.flatnonzero((p == 0) & (q == 1))
        self.complexes = np.flatnonzero((p >= 1) & (q >= 1))
        self.poly_M = np.flatnonzero((q == 0) & (p >= 2))
        self.poly_L = np.flatnonzero((p == 0) & (q >= 2))
        # every species has p <= 1: the metal balance is linear in [M] and can be eliminated (_solve_p1)
        self.linear_in_M = bool(np.all(p <= 1))
        self.B = np.flatnonzero(p == 1)  # species holding one M: [s] = [M] w_s, w_s = beta_s [L]^q_s
        self.A = np.flatnonzero(p == 0)  # species without M
        self.qB, self.qA = q[self.B], q[self.A]
        self.qB2, self.qA2 = self.qB**2, self.qA**2
        qB = self.qB
        self.pairs_B = [
            (s, t, float((qB[s] - qB[t]) ** 2))
            for s in range(qB.size)
            for t in range(s + 1, qB.size)
            if qB[s] != qB[t]
        ]
        one_one = np.flatnonzero((p == 1) & (q == 1))
        self.one_one = int(one_one[0]) if one_one.size else None


def solve_free(lb10, p, q, M, L):
    """Free [M], free [L] (n,) and species (n, S) for flat arrays: lb10 (S, n) log10 constants, M, L (n,).

    Tubes are processed in blocks so that the working arrays stay in cache (the solver is memory bound;
    one pass over 1e6 tubes is ~10x slower per element than over 1.6e4).
    """
    sy = SolverSystem(p, q)
    n = M.size
    free_M = np.empty(n)
    free_L = np.empty(n)
    species = np.empty((n, sy.S))
    ok = np.empty(n, dtype=bool)

    def run_block(start):
        sl = slice(start, min(n, start + _BLOCK))
        lnb = lb10[:, sl] * LN10
        Mb, Lb = M[sl], L[sl]
        if sy.linear_in_M:
            okb, c, fm, fl = _solve_p1(lnb, sy, Mb, Lb)
            rest = np.flatnonzero(~okb)
        else:
            okb = np.zeros(Mb.size, dtype=bool)
            c, fm, fl = np.empty((sy.S, Mb.size)), np.empty(Mb.size), np.empty(Mb.size)
            rest = np.arange(Mb.size)
        if rest.size:  # the general two-variable Newton for the rest
            lnr, Mr, Lr = lnb.take(rest, axis=1), Mb[rest], Lb[rest]
            x0, y0 = _initial_guess(lnr, sy, Mr, Lr)
            _, _, okb[rest], cr, fm[rest], fl[rest] = _newton(lnr, sy, Mr, Lr, x0, y0)
            _put(c, rest, cr)
        ok[sl], free_M[sl], free_L[sl] = okb, fm, fl
        species[sl] = c.T

    for start in range(0, n, _BLOCK):  # loop over blocks of tubes, vectorised within each
        run_block(start)
    if not np.all(ok):
        bad = np.flatnonzero(~ok)
        lnb = lb10[:, bad] * LN10
        xb, yb = _nested(lnb, sy, M[bad], L[bad])
        _, _, okb, c, free_M[bad], free_L[bad] = _newton(lnb, sy, M[bad], L[bad], xb, yb)
        species[bad] = c.T
        if not np.all(okb):
            raise EquilibriumError(
                f"mass balances did not converge in tubes {bad[~okb][:10].tolist()} (flattened batch "
                "index); check their totals and constants"
            )
    return free_M, free_L, species


def _solve_p1(lnb, sy, M, L):
    """One-variable solve for systems where every species has p <= 1 (lnb (S, n) natural logs).

    The metal balance is then linear in [M]: [M] = M_tot / alpha, alpha = 1 + sum_B w_s with
    w_s = beta_s [L]^q_s over the species holding one M. What remains is

        TL(y) = [L] + sum_A q_s [s] + M_tot g / alpha = L_tot,   g = sum_B q_s w_s,   y = ln[L],

    increasing in y, with dTL/dy = [L] + sum_A q_s^2 [s] + M_tot (g2 alpha - g^2) / alpha^2 and
    g2 alpha - g^2 = g2 + sum_{s<t in B} w_s w_t (q_s - q_t)^2 (Lagrange's identity: no cancellation).
    Newton on ln(TL / L_tot) safeguarded by bisection inside a bracket that every iterate tightens (the
    "rtsafe" scheme: Press et al. 2007, *Numerical Recipes*, 3rd ed., section 9.4). Bracket: [L] = L_tot
    gives TL >= L_tot; every term of TL at most L_tot/(S+1), using [M] <= M_tot, gives TL <= L_tot. Start:
    the exact 1:1 free ligand when a 1:1 complex is present, else [L] = L_tot.

    Returns a per-tube success flag, species (S, n), free [M] and free [L]; tubes that miss the
    tolerance (rounding-limited) are left to the two-variable solver.
    """
    n = M.size
    S = sy.S
    ok = np.zeros(n, dtype=bool)
    c_out = np.zeros((S, n))
    m_out = np.zeros(n)
    l_out = np.zeros(n)
    lnM, lnL = _ln_totals(M, L)
    live = L > 0.0
    if not np.all(live):
        _no_ligand(lnb, sy, M, ~live, (ok, c_out, m_out))
        idx = np.flatnonzero(live)
        lnb, M, L, lnM, lnL = lnb.take(idx, axis=1), M[idx], L[idx], lnM[idx], lnL[idx]
    else:
        idx = np.arange(n)
    lo, hi = _p1_bracket(lnb, sy, lnM, lnL)
    y = _p1_start(lnb, sy, M, L, lo, hi)
    lnbB = lnb[sy.B]
    lnbA = lnb[sy.A] if sy.A.size else None
    for _ in range(_MAX_NEWTON):
        fl, w, fm, cA, TL, dTL = _p1_balance(y, lnbB, lnbA, M, sy)
        r = np.log(TL / L)
        done = np.abs(r) <= _TOL_RES
        if done.any():
            di = np.flatnonzero(done)
            gone = idx[di]
            ok[gone] = True
            m_out[gone], l_out[gone] = fm[di], fl[di]
            cg = np.zeros((S, di.size))
            cg[sy.B] = w.take(di, axis=1) * fm[di]
            if lnbA is not None:
                cg[sy.A] = cA.take(di, axis=1)
            _put(c_out, gone, cg)
            keep = np.flatnonzero(~done)
            if keep.size == 0:
                break
            idx, y, r, TL, dTL = idx[keep], y[keep], r[keep], TL[keep], dTL[keep]
            lo, hi, M, L = lo[keep], hi[keep], M[keep], L[keep]
            lnbB = lnbB.take(keep, axis=1)
            if lnbA is not None:
                lnbA = lnbA.take(keep, axis=1)
        above = r > 0.0
        hi = np.where(above, y, hi)
        lo = np.where(above, lo, y)
        yn = y - r * TL / dTL
        # outside the bracket (or not a number): bisect instead
        yn = np.where((yn > lo) & (yn < hi), yn, 0.5 * (lo + hi))
        y = yn
    return ok, c_out, m_out, l_out


def _no_ligand(lnb, sy, M, dead_mask, out) -> None:
    """L_tot = 0: no ligand; [M] = M_tot / (1 + sum of (1, 0) side species), solved in closed form and
    written into ``out`` = (ok, species, free [M])."""
    ok, c_out, m_out = out
    dead = np.flatnonzero(dead_mask)
    lnd = lnb.take(dead, axis=1)
    w = np.where((sy.q == 0)[:, None], np.exp(lnd), 0.0)  # only q = 0 species survive without L
    md = M[dead] / (1.0 + (sy.p @ w))
    _put(c_out, dead, w * md)
    m_out[dead] = md
    ok[dead] = True


def _p1_bracket(lnb, sy, lnM, lnL):
    """The bracket on y = ln[L]: [L] = L_tot above, and below the least [L] at which some term of TL
    reaches L_tot/(S+1)."""
    p, q = sy.p, sy.q
    target = lnL - np.log(sy.S + 1.0)
    lo = target
    with np.errstate(over="ignore", invalid="ignore"):
        for s in range(sy.S):  # loop over species, vectorised over tubes
            if q[s] >= 1:
                bound = (target - np.log(q[s]) - lnb[s] - (p[s] * lnM if p[s] else 0.0)) / q[s]
                lo = np.minimum(lo, bound)
    return lo, lnL.copy()


def _p1_start(lnb, sy, M, L, lo, hi):
    """The start: the exact 1:1 free ligand (inside the bracket) when a 1:1 complex is present, else L_tot."""
    if sy.one_one is None:
        return hi.copy()
    with np.errstate(over="ignore"):
        K = np.exp(lnb[sy.one_one])
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.log(one_to_one_free(L, M, K))
    return np.where(np.isfinite(y), np.minimum(np.maximum(y, lo), hi), hi)


def _p1_balance(y, lnbB, lnbA, M, sy):
    """The ligand balance TL(y) and its derivative dTL/dy (Lagrange's identity), with free [L], the
    weights w of the species holding one M, free [M] and the p = 0 species' concentrations (or None)."""
    fl = np.exp(y)
    w = np.exp(lnbB + sy.qB[:, None] * y)
    alpha = 1.0 + w.sum(0)
    g = sy.qB @ w
    lag = sy.qB2 @ w
    for s, t, wt in sy.pairs_B:  # loop over species pairs, vectorised over tubes
        lag += wt * (w[s] * w[t])
    fm = M / alpha
    TL = fl + fm * g
    dTL = fl + fm * lag / alpha
    cA = None
    if lnbA is not None:
        cA = np.exp(lnbA + sy.qA[:, None] * y)
        TL += sy.qA @ cA
        dTL += sy.qA2 @ cA
    return fl, w, fm, cA, TL, dTL


def _ln_totals(M, L):
    with np.errstate(divide="ignore"):
        lnM = np.where(M > 0.0, np.log(M), LN_ZERO)
        lnL = np.where(L > 0.0, np.log(L), LN_ZERO)
    return lnM, lnL


def _initial_guess(lnb, sy, M, L):
    """Best of a few closed-form limiting solutions, judged by the log-ratio merit.

    Candidates: (a) weak binding, free = total; (b) for each complex s (p, q >= 1) taken alone: it holds
    c = min(M/p, L/q); the component in excess keeps the rest (or, near equivalence, what the complex
    releases on dissociation, [L]/[M] = q/p), and the other follows from beta; (c) for each polynuclear
    side species (M_p or L_q alone, p or q >= 2) holding all of its component. First-order side species
    (p, q) = (1, 0) and (0, 1) are folded in as Ringbom alpha coefficients; the merit uses the full
    system.
    """
    p, q = sy.p, sy.q
    n = M.size
    lnM, lnL = _ln_totals(M, L)
    zero = np.zeros(n)
    ln_aM = np.log1p(np.exp(lnb[sy.side_M]).sum(0)) if sy.side_M.size else zero
    ln_aL = np.log1p(np.exp(lnb[sy.side_L]).sum(0)) if sy.side_L.size else zero
    weak_x = np.where(M > 0.0, lnM - ln_aM, LN_ZERO)
    weak_y = np.where(L > 0.0, lnL - ln_aL, LN_ZERO)
    cands = [(weak_x, weak_y)]
    both = (M > 0.0) & (L > 0.0)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        for s in sy.complexes:  # loop over species, vectorised over tubes
            ps, qs = p[s], q[s]
            lnbp = lnb[s] - ps * ln_aM - qs * ln_aL  # alpha-scaled constant
            lnc = np.minimum(lnM - np.log(ps), lnL - np.log(qs))
            c = np.exp(lnc)
            mex = M - ps * c
            lex = L - qs * c
            metal_side = mex * qs >= lex * ps
            # dissociation of the pure complex: [L]/[M] = q/p and beta' [M]^p [L]^q = c
            ln_md = (lnc - lnbp - qs * np.log(qs / ps)) / (ps + qs)
            ln_d = np.where(metal_side, ln_md, ln_md + np.log(qs / ps))
            ln_e = np.maximum(np.log(np.where(metal_side, mex, lex)), ln_d)  # the component in excess
            k = np.where(metal_side, ps, qs)
            j = np.where(metal_side, qs, ps)
            ln_o = (lnc - lnbp - k * ln_e) / j  # the other one, from the constant
            ln_m = np.minimum(np.where(metal_side, ln_e, ln_o), lnM)
            ln_l = np.minimum(np.where(metal_side, ln_o, ln_e), lnL)
            good = both & np.isfinite(ln_m) & np.isfinite(ln_l)
            cands.append((np.where(good, ln_m - ln_aM, weak_x), np.where(good, ln_l - ln_aL, weak_y)))
        for s in sy.poly_M:
            xs = np.minimum(lnM, (lnM - np.log(p[s]) - lnb[s]) / p[s])
            cands.append((np.where((M > 0.0) & np.isfinite(xs), xs, weak_x), weak_y))
        for s in sy.poly_L:
            ys = np.minimum(lnL, (lnL - np.log(q[s]) - lnb[s]) / q[s])
            cands.append((weak_x, np.where((L > 0.0) & np.isfinite(ys), ys, weak_y)))
    if len(cands) == 1:
        return weak_x, weak_y
    fixM, fixL, Mh, Lh = _surrogates(M, L)
    best_x, best_y = cands[0]
    best = None
    for cx, cy in cands:  # a handful of candidates, each vectorised over tubes
        _, _, _, TM, TL = _evaluate(lnb, sy, cx, cy, fixM, fixL)
        merit = np.abs(np.log(TM / Mh)) + np.abs(np.log(TL / Lh))
        if best is None:
            best = merit
            continue
        better = merit < best
        best = np.where(better, merit, best)
        best_x = np.where(better, cx, best_x)
        best_y = np.where(better, cy, best_y)
    return best_x, best_y


def _surrogates(M, L):
    """Zero-total flags (None when there are none) and totals with 0 replaced by the surrogate 1."""
    if np.any(M == 0.0) or np.any(L == 0.0):
        fixM = (M == 0.0).astype(float)
        fixL = (L == 0.0).astype(float)
        return fixM, fixL, M + fixM, L + fixL
    return None, None, M, L


def _evaluate(lnb, sy, x, y, fixM, fixL):
    """Species concentrations (S, n) and computed totals at (x, y) = (ln[M], ln[L]).

    A zero-total component carries fix = 1 in its computed total so that its residual is exactly 0
    against the surrogate total 1 (see _newton); fixM / fixL are None when no tube needs them.
    """
    c = np.exp(lnb + sy.p[:, None] * x + sy.q[:, None] * y)
    m = np.exp(x)
    fl = np.exp(y)
    TM = m + sy.p @ c
    TL = fl + sy.q @ c
    if fixM is not None:
        TM += fixM
        TL += fixL
    return c, m, fl, TM, TL


def _state(lnb, sy, x, y, Mh, Lh, fixM, fixL):
    """Newton state at (x, y): [x, y, c, [M], [L], TM, TL, ln(TM/M), ln(TL/L), psi]; last axis = tubes."""
    c, m, fl, TM, TL = _evaluate(lnb, sy, x, y, fixM, fixL)
    rM = np.log(TM / Mh)
    rL = np.log(TL / Lh)
    return [x, y, c, m, fl, TM, TL, rM, rL, rM * rM + rL * rL]


def balance_jacobian(c, m, fl, fixM, fixL, sy):
    """Entries a, b, d of the symmetric 2x2 Jacobian d(TM, TL)/d(ln[M], ln[L]) and its determinant.

    det = a d - b^2 expanded as m l + m Sum q^2 c + l Sum p^2 c + Sum_{s<t} c_s c_t (p_s q_t - p_t q_s)^2
    (Lagrange's identity): a sum of non-negative terms, so no cancellation when a d ~ b^2 (a strong
    complex near equivalence). A zero-total component's row is replaced by the identity, which keeps its
    logarithm fixed; fixM / fixL may be None when no tube has a zero total.
    """
    ap = sy.p2 @ c
    b = sy.pq @ c
    dq = sy.q2 @ c
    a = m + ap
    d = fl + dq
    det = m * d + fl * ap
    for s, t, w in sy.pairs:  # loop over species pairs, vectorised over tubes
        det += w * (c[s] * c[t])
    if fixM is not None:
        det += fixM * d + fixL * a + fixM * fixL
        a = a + fixM
        d = d + fixL
    return a, b, d, det


def _newton(lnb, sy, M, L, x, y):
    """Damped Newton with Armijo backtracking.

    Returns x, y, a per-tube success flag, and the species (S, n), free [M] and free [L] at (x, y).

    Newton is applied to the log residuals R = (ln(TM/M_tot), ln(TL/L_tot)): each is a log-sum-exp of
    affine functions of (x, y), close to piecewise linear, so the Newton model stays good far from the
    root where the plain residual's (TM - M_tot) does not (that one needs ~1 iteration per e-fold when
    a free concentration is far too high). Step: J d = -diag(TM, TL) R. Merit psi = |R|^2, for which the
    Newton direction has slope exactly -2 psi, so the Armijo test is well defined in every tube.
    """
    n = M.size
    x_out = np.empty(n)
    y_out = np.empty(n)
    c_out = np.empty((sy.S, n))
    m_out = np.empty(n)
    l_out = np.empty(n)
    ok = np.zeros(n, dtype=bool)
    fixM, fixL, Mh, Lh = _surrogates(M, L)
    idx = np.arange(n)
    state = _state(lnb, sy, x, y, Mh, Lh, fixM, fixL)
    stalled = np.zeros(n, dtype=bool)  # indexed like the active set
    for _ in range(_MAX_NEWTON + 1):
        psi = state[9]
        done = psi <= _TOL_RES**2
        leave = done | stalled
        if leave.any():
            out = np.flatnonzero(leave)
            gone = idx[out]
            for dst, v in zip((x_out, y_out, c_out, m_out, l_out), state[:5], strict=True):
                _put(dst, gone, _take(v, out))
            ok[gone] = psi[out] <= np.where(done[out], _TOL_RES**2, _TOL_STALL**2)
            keep = np.flatnonzero(~leave)
            idx = idx[keep]
            if idx.size == 0:
                break
            state = [_take(v, keep) for v in state]
            lnb, Mh, Lh = _take(lnb, keep), Mh[keep], Lh[keep]
            if fixM is not None:
                fixM, fixL = fixM[keep], fixL[keep]
        xa, ya, psi = state[0], state[1], state[9]
        dx, dy, t = _newton_direction(state, sy, fixM, fixL)
        new = _state(lnb, sy, xa + t * dx, ya + t * dy, Mh, Lh, fixM, fixL)
        accept = new[9] <= psi * (1.0 - 2.0 * _ARMIJO * t)  # Armijo, slope -2 psi per unit step
        _backtrack(new, accept, t, psi, (lnb, sy, xa, ya, dx, dy, Mh, Lh, fixM, fixL))
        # a tube whose line search failed keeps its point and leaves at the next check
        stalled = ~accept
        if stalled.any():
            back = np.flatnonzero(stalled)
            for v, w in zip(new, state, strict=True):
                _put(v, back, _take(w, back))
        state = new
    else:
        for dst, v in zip((x_out, y_out, c_out, m_out, l_out), state[:5], strict=True):
            _put(dst, idx, v)
    return x_out, y_out, ok, c_out, m_out, l_out


def _newton_direction(state, sy, fixM, fixL):
    """The Newton step (dx, dy) solving J d = -diag(TM, TL) R, and the step length t capping it at
    _MAX_STEP."""
    _, _, c, m, fl, TM, TL, rM, rL, _ = state
    a, b, d, det = balance_jacobian(c, m, fl, fixM, fixL, sy)
    gM = TM * rM
    gL = TL * rL
    dx = (b * gL - d * gM) / det
    dy = (b * gM - a * gL) / det
    t = _MAX_STEP / np.maximum(np.maximum(np.abs(dx), np.abs(dy)), _MAX_STEP)  # step cap, no 0/0
    return dx, dy, t


def _backtrack(new, accept, t, psi, point) -> None:
    """Halve the step of the tubes that fail the Armijo test until it holds (at most _MAX_HALVINGS times),
    updating ``new`` (the trial state), ``accept`` and ``t`` in place."""
    lnb, sy, xa, ya, dx, dy, Mh, Lh, fixM, fixL = point
    pending = np.flatnonzero(~accept)
    for _ in range(_MAX_HALVINGS):
        if pending.size == 0:
            break
        t[pending] *= 0.5
        tp = t[pending]
        trial = _state(
            _take(lnb, pending),
            sy,
            xa[pending] + tp * dx[pending],
            ya[pending] + tp * dy[pending],
            Mh[pending],
            Lh[pending],
            None if fixM is None else fixM[pending],
            None if fixL is None else fixL[pending],
        )
        good = np.flatnonzero(trial[9] <= psi[pending] * (1.0 - 2.0 * _ARMIJO * tp))
        gi = pending[good]
        for v, w in zip(new, trial, strict=True):
            _put(v, gi, _take(w, good))
        accept[gi] = True
        pending = pending[~accept[pending]]


def _take(v, ix):
    """v[..., ix] for integer ix; ndarray.take is ~10x faster than fancy indexing on 2-D arrays."""
    return v.take(ix, axis=-1)


def _put(dst, ix, src):
    """dst[..., ix] = src, row by row for 2-D dst (much faster than 2-D fancy assignment)."""
    if dst.ndim == 1:
        dst[ix] = src
    else:
        for r in range(dst.shape[0]):  # loop over species rows, vectorised over tubes
            dst[r, ix] = src[r]


def _nested(lnb, sy, M, L):
    """Bracketed nested solve that cannot fail (fallback; lnb is (S, n)).

    Outer: bisection on y = ln[L] for h(y) = TL(x*(y), y) - L_tot, which increases with y
    (dh/dy = det J / J_MM > 0). Inner: x*(y) solves TM(x, y) = M_tot, a sum of exponentials in x with
    non-negative coefficients (convex, increasing), by Newton started at an upper bound, from which the
    iterates decrease monotonically to the root (Fourier's condition; e.g. Ostrowski 1966, *Solution of
    Equations and Systems of Equations*, ch. 7). Brackets: [L] = L_tot gives h >= 0; every term of TL at
    most L_tot/(S+1), using [M] <= M_tot, gives h <= 0.
    """
    p, q = sy.p, sy.q
    S = sy.S
    lnM, lnL = _ln_totals(M, L)
    fixM = M == 0.0
    fixL = L == 0.0
    hasM = (p >= 1)[:, None]
    hasL = (q >= 1)[:, None]
    p_ = np.where(p >= 1, p, 1.0)[:, None]
    q_ = np.where(q >= 1, q, 1.0)[:, None]
    target = lnL - np.log(S + 1.0)
    with np.errstate(invalid="ignore", over="ignore"):
        pl = np.where(hasM, p[:, None] * lnM, 0.0)
        bounds = (target - np.log(q_) - lnb - pl) / q_
        bounds = np.where(hasL & np.isfinite(bounds), bounds, np.inf)
    y_lo = np.minimum(target, bounds.min(0))
    y_hi = lnL.copy()

    def inner_x(y):
        # start where the largest single term of TM equals M_tot: TM >= M_tot there
        with np.errstate(invalid="ignore", over="ignore"):
            ql = np.where(hasL, q[:, None] * y, 0.0)
            ub = (lnM - np.log(p_) - lnb - ql) / p_
            ub = np.where(hasM & np.isfinite(ub), ub, np.inf)
        x = np.minimum(lnM, ub.min(0))
        for _ in range(60):  # quadratic from within ln(S+1) of the root: a handful of steps
            c = np.exp(lnb + p[:, None] * x + q[:, None] * y)
            m = np.exp(x)
            f = m + p @ c - M
            fp = m + sy.p2 @ c
            with np.errstate(invalid="ignore", divide="ignore"):
                step = np.where(fp > 0.0, f / fp, 0.0)
            step = np.where(fixM, 0.0, np.maximum(step, 0.0))  # monotone from above
            x = x - step
            if np.all(step <= 1e-15 * np.maximum(1.0, np.abs(x))):
                break
        return np.where(fixM, LN_ZERO, x)

    for _ in range(120):
        mid = 0.5 * (y_lo + y_hi)
        x = inner_x(mid)
        c = np.exp(lnb + p[:, None] * x + q[:, None] * mid)
        h = np.exp(mid) + q @ c - L
        above = h > 0.0
        y_hi = np.where(above, mid, y_hi)
        y_lo = np.where(above, y_lo, mid)
    y = np.where(fixL, LN_ZERO, 0.5 * (y_lo + y_hi))
    return inner_x(y), y


# ----------------------------------------------------------------------------------------------------
# Sensitivities
