"""Compiled inner loops (numba) for the predictive simulation and its summaries.

Each kernel does per-draw work that numpy could only express as many small batched
calls (each with its temporaries and call overhead); compiled, it is one pass with the
draws on the innermost, contiguous axis, so the loops vectorise. The kernels take and
fill plain float64 arrays and never draw random numbers (the caller passes the normals,
so the numpy ``Generator`` stream decides every value). They release the GIL, so
forecasts in several threads run side by side. Machine code is cached on disk (see
:func:`_compiled`): the first use on a machine compiles for a few seconds.

``fastmath`` (without the no-NaN/no-inf assumptions) lets the compiler reorder sums so
the dot products vectorise; results agree with the numpy reference to rounding (tests
compare them), and the same inputs always give the same bits on the same machine.
"""

from __future__ import annotations

from collections.abc import Callable
from math import inf, log, sqrt
from typing import Any

import numpy as np
from numba import njit

__all__ = ["bartlett_roots", "damped_trend_errors", "gram_shock_step", "select_quantiles",
           "tightness_profile", "warm_up"]

#: fastmath without "nnan"/"ninf": sums may be reordered, NaN and inf keep their meaning
_FAST = {"nsz", "arcp", "contract", "afn", "reassoc"}
_OPTIONS = {"fastmath": _FAST, "boundscheck": False, "nogil": True}


def _compiled(fastmath: bool = True) -> Callable[[Callable[..., Any]], Any]:
    """``numba.njit`` with the machine code cached on disk where numba finds a writable
    place (next to this file, ``NUMBA_CACHE_DIR`` or the user's cache folder), and
    compiled once per process where it finds none (a read-only container: numba would
    otherwise refuse at import)."""
    # fastmath=False stated, not left out: an unset flag is inherited from the caller
    options = _OPTIONS if fastmath else {"fastmath": False}

    def decorate(func: Callable[..., Any]) -> Any:
        try:
            return njit(cache=True, **options)(func)
        except RuntimeError:  # "cannot cache function ...: no locator available"
            return njit(cache=False, **options)(func)

    return decorate


@_compiled()
def _dot_rows(V, a, b, acc):  # pragma: no cover - compiled
    """acc[t] += sum_i V[a, i, t] V[b, i, t] for V (h, k, s): four rows of i per pass,
    so the running sums are loaded and stored a quarter as often."""
    k, s_count = V.shape[1], V.shape[2]
    top = k - k % 4
    for i in range(0, top, 4):
        for t in range(s_count):
            acc[t] += (V[a, i, t] * V[b, i, t] + V[a, i + 1, t] * V[b, i + 1, t]
                       + V[a, i + 2, t] * V[b, i + 2, t] + V[a, i + 3, t] * V[b, i + 3, t])
    for i in range(top, k):
        for t in range(s_count):
            acc[t] += V[a, i, t] * V[b, i, t]


@_compiled()
def gram_shock_step(V, L, W, M, G, v_fix, mean_fix, out, step, m, scratch):
    # pragma: no cover - compiled
    """One predictive step for a block of s draws, in place; the draws are the last,
    contiguous axis of every array, so each loop below is a vector loop over draws.

    Shapes: V (h, k, s) the v_g = R^-T x_g of the earlier steps (row ``step`` is
    written here: v_fix (k,) plus the simulated part G[n:] in rows m..k); L (h, h, s)
    the Cholesky factor of the augmented Gram matrix [v_g'v_j + (g == j)] of the
    earlier steps, with the reciprocal of each pivot on the diagonal (row ``step`` is
    written here); W (h, n, s) standard normals; M (n, n, s) roots of Sigma;
    G (n + k - m, s) the simulated parts of B_bar'x_step (first n rows) and of
    R^-T x_step (zero rows when no lag is simulated yet); mean_fix (n,) the shared part
    of B_bar'x_step; out (h, n, s) receives y_step = B_bar'x_step + M u with
    u = sum_g L[step, g] W[g]. scratch: (h + n + 2, s) work space.

    The new row of L solves L[:step, :step] l = (v_g'v_step)_g by forward substitution,
    and its pivot is sqrt(v'v + 1 - l'l). The augmented Gram matrix is positive definite
    with every pivot >= 1, so this never breaks down, even when the v_h are linearly
    dependent (h > k).
    """
    h, k, s_count = V.shape
    n = mean_fix.shape[0]
    has_sim = G.shape[0] > 0
    ell = scratch[:h]
    e = scratch[h : h + n]
    vv = scratch[h + n]
    ss = scratch[h + n + 1]
    for i in range(k):
        x = v_fix[i]
        if has_sim and i >= m:
            for t in range(s_count):
                V[step, i, t] = x + G[n + i - m, t]
        else:
            for t in range(s_count):
                V[step, i, t] = x
    for t in range(s_count):
        vv[t] = 1.0
        ss[t] = 0.0
    _dot_rows(V, step, step, vv)
    for g in range(step):
        for t in range(s_count):
            ell[g, t] = 0.0
        _dot_rows(V, g, step, ell[g])
        for j in range(g):
            for t in range(s_count):
                ell[g, t] -= L[g, j, t] * ell[j, t]
        for t in range(s_count):
            ell[g, t] *= L[g, g, t]
            ss[t] += ell[g, t] * ell[g, t]
            L[step, g, t] = ell[g, t]
    for t in range(s_count):  # reuse vv as the pivot rho
        rho2 = vv[t] - ss[t]
        vv[t] = sqrt(rho2) if rho2 > 1.0 else 1.0  # >= 1 in exact arithmetic
        L[step, step, t] = 1.0 / vv[t]
    for c in range(n):
        for t in range(s_count):
            e[c, t] = vv[t] * W[step, c, t]
        for g in range(step):
            for t in range(s_count):
                e[c, t] += ell[g, t] * W[g, c, t]
    for r in range(n):
        for t in range(s_count):
            out[step, r, t] = mean_fix[r]
        if has_sim:
            for t in range(s_count):
                out[step, r, t] += G[r, t]
        for c in range(n):
            for t in range(s_count):
                out[step, r, t] += M[r, c, t] * e[c, t]


@_compiled()
def bartlett_roots(L_S, diag, below):  # pragma: no cover - compiled
    """M = L_S A^-T for each draw of the Bartlett factor A, stored draws last:
    ``out[:, :, s]`` is M_s, (n, n, S).

    L_S (n, n) lower triangular; diag (S, n) the diagonal of A; below (S, n(n-1)/2) its
    strict lower triangle row by row. Forward substitution, row i of M' at a time.
    """
    size, n = diag.shape
    out = np.empty((n, n, size))
    Mt = np.empty((n, n))
    for s in range(size):
        for i in range(n):
            base = i * (i - 1) // 2
            for c in range(n):
                Mt[i, c] = L_S[c, i]
            for j in range(i):
                a = below[s, base + j]
                for c in range(n):
                    Mt[i, c] -= a * Mt[j, c]
            inv = 1.0 / diag[s, i]
            for c in range(n):
                Mt[i, c] *= inv
        for r in range(n):
            for c in range(n):
                out[r, c, s] = Mt[c, r]
    return out


@_compiled()
def _sift_down(a, lo, root, end):  # pragma: no cover - compiled
    """Restore the max-heap a[lo:lo+end] below position ``root`` (0-based in the heap)."""
    while 2 * root + 1 < end:
        child = 2 * root + 1
        if child + 1 < end and a[lo + child] < a[lo + child + 1]:
            child += 1
        if a[lo + root] < a[lo + child]:
            a[lo + root], a[lo + child] = a[lo + child], a[lo + root]
            root = child
        else:
            return


@_compiled()
def _heapsort(a, lo, hi):  # pragma: no cover - compiled
    """Sort a[lo:hi+1] in place, O(m log m) whatever the data (no NaN: callers check)."""
    count = hi - lo + 1
    for start in range(count // 2 - 1, -1, -1):
        _sift_down(a, lo, start, count)
    for end in range(count - 1, 0, -1):
        a[lo], a[lo + end] = a[lo + end], a[lo]
        _sift_down(a, lo, 0, end)


@_compiled()
def _select(a, lo, hi, kth):  # pragma: no cover - compiled
    """Quickselect on a[lo:hi+1]: afterwards a[kth] is the kth smallest value, with
    nothing larger before it and nothing smaller after it. Returns the end ``top`` of the
    last range searched: the next order statistic is the smallest of a[kth+1:top+1] and
    a[top+1] (when top + 1 <= hi: a pivot of an earlier round, at or below everything
    after it), so the caller need not scan the whole tail.

    Lomuto partition written without a data-dependent branch (the swap always happens
    and the store index advances by the comparison), median-of-three pivot; after 48
    rounds (heavy ties or adversarial data) the rest of the range is sorted instead.
    """
    rounds = 0
    while hi > lo:
        rounds += 1
        if rounds > 48:
            _heapsort(a, lo, hi)
            return hi
        mid = (lo + hi) // 2
        if a[mid] < a[lo]:
            a[mid], a[lo] = a[lo], a[mid]
        if a[hi] < a[lo]:
            a[hi], a[lo] = a[lo], a[hi]
        if a[mid] < a[hi]:
            a[mid], a[hi] = a[hi], a[mid]
        pivot = a[hi]  # the median of the three
        store = lo
        for i in range(lo, hi):
            x = a[i]
            a[i] = a[store]
            a[store] = x
            store += x < pivot
        a[hi] = a[store]
        a[store] = pivot
        if kth == store:
            return hi
        if kth < store:
            hi = store - 1
        else:
            lo = store + 1
    return hi


@_compiled(fastmath=False)
def _lerp(a, b, t):  # pragma: no cover - compiled
    """numpy's quantile interpolation, without contraction to FMA (bit-equal results)."""
    diff = b - a
    return b - diff * (1.0 - t) if t >= 0.5 else a + diff * t


@_compiled()
def select_quantiles(X, levels):  # pragma: no cover - compiled
    """Type-7 quantiles of each row of X (c, S) at sorted ``levels``: (len(levels), c).

    Order statistics by quickselect on a copy of each row, each selection restricted to
    the part at or above the previous one; interpolation as numpy's ``quantile``
    (``_lerp``: a + (b - a) t, or b - (b - a)(1 - t) when t >= 0.5), so the values
    equal ``np.quantile(X, levels, axis=1)`` bit for bit. A row with a NaN gives NaN,
    as in numpy.
    """
    c, size = X.shape
    nq = levels.shape[0]
    out = np.empty((nq, c))
    buf = np.empty(size)
    for r in range(c):
        has_nan = False
        for i in range(size):
            x = X[r, i]
            buf[i] = x
            if x != x:
                has_nan = True
        if has_nan:
            for q in range(nq):
                out[q, r] = np.nan
            continue
        start = 0
        for q in range(nq):
            pos = (size - 1) * levels[q]  # numpy's "linear" virtual index
            lo = min(int(np.floor(pos)), size - 1)
            t = pos - lo
            top = _select(buf, start, size - 1, lo)
            start = lo
            a = buf[lo]
            b = a
            if lo + 1 <= size - 1:  # the next order statistic (see _select)
                b = buf[top + 1] if top + 1 <= size - 1 else np.inf
                for i in range(lo + 1, top + 1):
                    if buf[i] < b:
                        b = buf[i]
            out[q, r] = _lerp(a, b, t)
    return out


@_compiled()
def tightness_profile(lam, e, G1, G2, base, B0WB0, const, df):  # pragma: no cover - compiled
    """log p(Y | tightness) at each tightness in ``lam`` (L,), from the quantities of
    :class:`priors.tuning.TightnessProfile` (see there): with inv = 1 / tightness^2,

        H = G1 + inv G2,  S = base + inv B0WB0 - H' diag(1 / (e + inv)) H,
        value = const - n kl log(tightness) - n/2 sum log(e + inv) - df/2 log|S|,

    e (kl,), G1 and G2 (kl, n), base and B0WB0 (n, n) symmetric. log|S| by Cholesky;
    -inf where S is not positive definite. One compiled pass: the tuner evaluates the
    profile a few dozen times per fit, and as numpy calls on these tiny matrices the
    call overhead was most of the cost.
    """
    size = lam.shape[0]
    kl, n = G1.shape
    out = np.empty(size)
    H = np.empty((kl, n))
    d = np.empty(kl)
    S = np.empty((n, n))
    for q in range(size):
        inv = 1.0 / (lam[q] * lam[q])
        logdet_sc = 0.0
        for i in range(kl):
            ei = e[i] + inv
            d[i] = 1.0 / ei
            logdet_sc += log(ei)
            for c in range(n):
                H[i, c] = G1[i, c] + inv * G2[i, c]
        for r in range(n):
            for c in range(r + 1):
                acc = 0.0
                for i in range(kl):
                    acc += H[i, r] * d[i] * H[i, c]
                v = base[r, c] + inv * B0WB0[r, c] - acc
                S[r, c] = v
                S[c, r] = v
        logdet_s = 0.0
        ok = True
        for j in range(n):  # Cholesky in the lower triangle of S
            piv = S[j, j]
            for t in range(j):
                piv -= S[j, t] * S[j, t]
            if not piv > 0.0:
                ok = False
                break
            root = sqrt(piv)
            logdet_s += 2.0 * log(root)
            S[j, j] = root
            for r in range(j + 1, n):
                v = S[r, j]
                for t in range(j):
                    v -= S[r, t] * S[j, t]
                S[r, j] = v / root
        if ok:
            out[q] = (const - n * kl * log(lam[q]) - 0.5 * n * logdet_sc
                      - 0.5 * df * logdet_s)
        else:
            out[q] = -inf
    return out


@_compiled(fastmath=False)
def damped_trend_errors(y, period, alpha, beta, gamma, phi, state, season, err):
    # pragma: no cover - compiled
    """One-step errors of the damped-trend recursions (:mod:`priors.localtrend`) for y
    (T,) into err (T,); state (2,) level and trend, season (max(m, 1),) with season[i]
    for row i mod m, both updated in place to the states after the last row. Returns the
    sum of squared errors from row ``2 m`` (row 2 without a season) on."""
    level, trend = state[0], state[1]
    burn = 2 * period if period > 0 else 2
    total = 0.0
    for t in range(y.shape[0]):
        seas = season[t % period] if period > 0 else 0.0
        e = y[t] - (level + phi * trend + seas)
        err[t] = e
        if t >= burn:
            total += e * e
        level, trend = level + phi * trend + alpha * e, phi * trend + beta * e
        if period > 0:
            season[t % period] = seas + gamma * e
    state[0], state[1] = level, trend
    return total


def warm_up() -> None:
    """Compile (or load from the disk cache) every kernel for the argument types the
    samplers use, on tiny inputs: a server calls this before it reports ready, so its
    first forecast does not pay for the compilation."""
    h, k, n, s = 2, 3, 2, 4
    gram_shock_step(np.zeros((h, k, s)), np.ones((h, h, s)), np.zeros((h, n, s)),
                    np.zeros((n, n, s)), np.zeros((n + k - 1, s)), np.zeros(k),
                    np.zeros(n), np.zeros((h, n, s)), 1, 1, np.zeros((h + n + 2, s)))
    bartlett_roots(np.eye(n), np.ones((s, n)), np.zeros((s, n * (n - 1) // 2)))
    select_quantiles(np.zeros((n, s)), np.array([0.5]))
    damped_trend_errors(np.zeros(s), 2, 0.5, 0.1, 0.1, 0.9, np.zeros(2), np.zeros(2),
                        np.zeros(s))
    damped_trend_errors(np.zeros(s), 0, 0.5, 0.1, 0.0, 0.9, np.zeros(2), np.zeros(1),
                        np.zeros(s))
    tightness_profile(np.ones(1), np.ones(k), np.zeros((k, n)), np.zeros((k, n)), np.eye(n),
                      np.eye(n), 0.0, 5.0)
