"""The row-by-row steps of the margin searches, compiled with numba.

:mod:`core.margins` (one axis) and :mod:`core.sweep` (many variants) refine every
crossing and every sensitivity dip with the same few steps: a regula-falsi or secant
point, an Illinois update, the seed a probe round gives, a parabola through three
points. Each step is a handful of scalar operations per row; written as numpy
expressions over a dozen rows they cost more in call overhead than in arithmetic, so
they are loops here. Every kernel works on 1-D arrays over rows (triples and probes
as 2-D arrays, one row each) and returns new arrays; all abscissas are log(w).

Compiled on first use and cached on disk (``cache=True``); ``error_model="numpy"``
makes a division by zero give inf or NaN, as the numpy expressions did.
"""

from __future__ import annotations

import cmath
import math

import numpy as np
from numba import njit

PROBES = 4
"""Interior points at which a crossing's bracket is sampled in its probe round."""
PROBE_U = np.linspace(0.0, 1.0, PROBES + 2)
"""Those points and the ends, as fractions of the bracket's width."""
PROBE_FIT = np.linalg.inv(np.vander(PROBE_U, increasing=True))
DIP_FIT = np.linalg.inv(np.vander(np.linspace(0.0, 1.0, 7), increasing=True))
NEWTON_STEPS = 3

_jit = njit(cache=True, error_model="numpy")


@_jit
def _negative(v):
    return math.copysign(1.0, v) < 0.0


@_jit
def _vertex(x0, x1, x2, y0, y1, y2):
    """Abscissa of the parabola through three points, kept inside (x0, x2); the midpoint of
    the wider half when the parabola is flat or convex down."""
    num = (x1 - x0) ** 2 * (y1 - y2) - (x1 - x2) ** 2 * (y1 - y0)
    den = (x1 - x0) * (y1 - y2) - (x1 - x2) * (y1 - y0)
    v = x1 - 0.5 * num / den
    if math.isfinite(v) and x0 < v < x2 and abs(v - x1) > 1e-12:
        return v
    return 0.5 * (x1 + x2) if x2 - x1 > x1 - x0 else 0.5 * (x0 + x1)


@_jit
def _parabola_value(x0, x1, x2, y0, y1, y2, v):
    """Value at ``v`` of the parabola through three points (Lagrange form)."""
    return (y0 * (v - x1) * (v - x2) / ((x0 - x1) * (x0 - x2)) + y1 * (v - x0) * (v - x2) / ((x1 - x0) * (x1 - x2))
            + y2 * (v - x0) * (v - x1) / ((x2 - x0) * (x2 - x1)))


@_jit
def falsi_point(a, b, fa, fb, prev, fprev):
    """Next point of bracketed root searches, over brackets.

    The secant through the two latest points (``prev``, ``b``) when it falls strictly
    inside the bracket [a, b] (superlinear near the root), else the regula-falsi point
    of the bracket with the Illinois-weighted ``fa``.
    """
    out = np.empty(len(a))
    for i in range(len(a)):
        if fb[i] != fa[i]:
            falsi = b[i] - fb[i] * (b[i] - a[i]) / (fb[i] - fa[i])
        else:
            falsi = 0.5 * (a[i] + b[i])
        secant = b[i] - fb[i] * (b[i] - prev[i]) / (fb[i] - fprev[i])
        inside = (math.isfinite(secant) and min(a[i], b[i]) < secant < max(a[i], b[i]) and prev[i] != b[i])
        out[i] = secant if inside else falsi
    return out


@_jit
def falsi_update(a, b, fa, fb, x, fx):
    """(a, b, fa, fb, prev, fprev) after evaluating ``fx`` at ``x`` (Illinois: halve the
    retained end's residual when the same end is kept twice)."""
    n = len(a)
    na, nfa = np.empty(n), np.empty(n)
    for i in range(n):
        same = np.sign(fx[i]) == np.sign(fb[i])
        na[i] = a[i] if same else b[i]
        nfa[i] = fa[i] * 0.5 if same else fb[i]
    return na, x.copy(), nfa, fx.copy(), b.copy(), fb.copy()


@_jit
def probe_seed(a, b, fa, fb, f_probe):
    """A bracket narrowed by its probe round, and a root estimate inside it.

    The residual is known at the ends of [a, b] and at ``f_probe`` (n, PROBES), the
    interior fractions of :data:`PROBE_U`. The sub-interval of the first sign change
    becomes the bracket, and the estimate is the root of the polynomial through all
    these points, by Newton steps from the sub-interval's regula-falsi
    point (a step that would leave the sub-interval is not taken). On a smooth loop the
    estimate is good to about ``(width/2)**(PROBES + 2)``, so one evaluation at it usually ends
    the search.

    Returns
    -------
    (a, b, fa, fb, x) : arrays over brackets
    """
    n, last = len(a), len(PROBE_U) - 1
    out_a, out_b, out_fa, out_fb, out_x = np.empty(n), np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    f = np.empty(last + 1)
    c = np.zeros(last + 1)
    for i in range(n):
        f[0], f[last] = fa[i], fb[i]
        for k in range(last - 1):
            f[k + 1] = f_probe[i, k]
        j = -1
        for k in range(last):
            if _negative(f[k]) != _negative(f[k + 1]) and math.isfinite(f[k]) and math.isfinite(f[k + 1]):
                j = k
                break
        if j >= 0:
            ua, ub, ga, gb = PROBE_U[j], PROBE_U[j + 1], f[j], f[j + 1]
        else:
            ua, ub, ga, gb = 0.0, 1.0, fa[i], fb[i]
        u = ua - ga * (ub - ua) / (gb - ga) if gb != ga else 0.5 * (ua + ub)
        if j >= 0:
            for k in range(last + 1):
                acc = 0.0
                for m in range(last + 1):
                    acc += PROBE_FIT[k, m] * f[m]
                c[k] = acc
            for _ in range(NEWTON_STEPS):
                p, dp = c[last], 0.0
                for k in range(last - 1, -1, -1):
                    dp = dp * u + p
                    p = p * u + c[k]
                step = u - p / dp
                if math.isfinite(step) and ua < step < ub:
                    u = step
        width = b[i] - a[i]
        out_a[i], out_b[i] = a[i] + width * ua, a[i] + width * ub
        out_fa[i], out_fb[i] = ga, gb
        out_x[i] = a[i] + width * u
    return out_a, out_b, out_fa, out_fb, out_x


@_jit
def _solve7(u, y, c):
    """c such that sum_k c_k u_i^k = y_i (the Vandermonde system, partial pivoting)."""
    m = np.empty((7, 8))
    for i in range(7):
        p = 1.0
        for k in range(7):
            m[i, k] = p
            p *= u[i]
        m[i, 7] = y[i]
    for col in range(7):
        piv = col
        for r in range(col + 1, 7):
            if abs(m[r, col]) > abs(m[piv, col]):
                piv = r
        if piv != col:
            for k in range(8):
                m[col, k], m[piv, k] = m[piv, k], m[col, k]
        for r in range(col + 1, 7):
            q = m[r, col] / m[col, col]
            for k in range(col, 8):
                m[r, k] -= q * m[col, k]
    for r in range(6, -1, -1):
        acc = m[r, 7]
        for k in range(r + 1, 7):
            acc -= m[r, k] * c[k]
        c[r] = acc / m[r, r]


@_jit
def dip_after_probe(x, y, xp, yp):
    """Dips after their probe round: the triple round the lowest of each one's seven
    points (its own three, ``x``/``y`` (n, 3), and four probes ``xp``/``yp`` (n, 4)), the
    minimum of the degree-6 polynomial through them, and the value it predicts there.

    The minimum is found by Newton steps on the polynomial's slope, kept between the
    lowest point's neighbours; where that fails (a dip too sharp for the polynomial)
    the triple's parabola vertex is the estimate and the prediction is NaN, so the dip
    is narrowed further by :func:`dip_step`.

    Returns
    -------
    (x, y, estimate, predicted) : triples (n, 3) and arrays (n,), log w and log distance
    """
    n = len(x)
    tx, ty = np.empty((n, 3)), np.empty((n, 3))
    est, pred = np.empty(n), np.empty(n)
    xs, ys, u, c = np.empty(7), np.empty(7), np.empty(7), np.empty(7)
    for i in range(n):
        xs[0], xs[3], xs[6] = x[i, 0], x[i, 1], x[i, 2]
        ys[0], ys[3], ys[6] = y[i, 0], y[i, 1], y[i, 2]
        xs[1], xs[2], xs[4], xs[5] = xp[i, 0], xp[i, 1], xp[i, 2], xp[i, 3]
        ys[1], ys[2], ys[4], ys[5] = yp[i, 0], yp[i, 1], yp[i, 2], yp[i, 3]
        best, m, finite = math.inf, 0, True
        for k in range(7):
            if not math.isfinite(ys[k]):
                finite = False
            if ys[k] < best:
                best, m = ys[k], k
        m = min(max(m, 1), 5)
        for k in range(3):
            tx[i, k], ty[i, k] = xs[m - 1 + k], ys[m - 1 + k]
        vertex = _vertex(tx[i, 0], tx[i, 1], tx[i, 2], ty[i, 0], ty[i, 1], ty[i, 2])
        span = xs[6] - xs[0]
        for k in range(7):
            u[k] = (xs[k] - xs[0]) / span
        ok = finite
        t = (vertex - xs[0]) / span
        if ok:
            if abs(u[3] - 0.5) > 1e-9:
                _solve7(u, ys, c)
            else:                                   # equal halves: the usual case
                for k in range(7):
                    acc = 0.0
                    for j in range(7):
                        acc += DIP_FIT[k, j] * ys[j]
                    c[k] = acc
            lo, hi = (tx[i, 0] - xs[0]) / span, (tx[i, 2] - xs[0]) / span
            for _ in range(NEWTON_STEPS + 1):
                slope, curvature = 6.0 * c[6], 0.0
                for k in range(5, 0, -1):
                    curvature = curvature * t + slope
                    slope = slope * t + k * c[k]
                step = t - slope / curvature
                if not (math.isfinite(step) and curvature > 0.0 and lo < step < hi):
                    ok = False
                    break
                t = step
        if ok:
            p = c[6]
            for k in range(5, -1, -1):
                p = p * t + c[k]
            est[i], pred[i] = xs[0] + span * t, p
        else:
            est[i], pred[i] = vertex, math.nan
    return tx, ty, est, pred


@_jit
def dip_step(x, y, v, yv, predicted, rounds, converged, max_rounds):
    """One step on dips: each triple (n, 3) narrowed by its evaluated point ``(v, yv)``.

    The new point replaces one end, keeping the lowest in the middle. A dip is done
    where ``yv`` met its prediction within ``converged`` (the local model holds there),
    where the triple is narrower than 1e-10, or after ``max_rounds`` steps.

    Returns
    -------
    (x, y, next vertex, the parabola's prediction there, done)
    """
    n = len(x)
    nx, ny = np.empty((n, 3)), np.empty((n, 3))
    nv, npred = np.empty(n), np.empty(n)
    done = np.empty(n, np.bool_)
    for i in range(n):
        x0, x1, x2 = x[i, 0], x[i, 1], x[i, 2]
        y0, y1, y2 = y[i, 0], y[i, 1], y[i, 2]
        left, better = v[i] < x1, yv[i] < y1
        if left:
            if better:
                x0, x1, x2, y0, y1, y2 = x0, v[i], x1, y0, yv[i], y1
            else:
                x0, y0 = v[i], yv[i]
        else:
            if better:
                x0, x1, x2, y0, y1, y2 = x1, v[i], x2, y1, yv[i], y2
            else:
                x2, y2 = v[i], yv[i]
        nx[i, 0], nx[i, 1], nx[i, 2] = x0, x1, x2
        ny[i, 0], ny[i, 1], ny[i, 2] = y0, y1, y2
        done[i] = abs(yv[i] - predicted[i]) <= converged or x2 - x0 < 1e-10 or rounds >= max_rounds
        nv[i] = _vertex(x0, x1, x2, y0, y1, y2)
        npred[i] = _parabola_value(x0, x1, x2, y0, y1, y2, nv[i])
    return nx, ny, nv, npred, done


@_jit
def deepest_minima(d, count, only_above):
    """Indices of the ``count`` deepest local minima of ``d`` (interior points no higher
    than either neighbour), deepest first.

    With ``only_above`` > 0 only minima higher than it are taken (possibly none);
    otherwise, when ``d`` has no interior minimum, the lowest interior point stands in.
    """
    n = len(d)
    found = np.empty(n, np.int64)
    k = 0
    for i in range(1, n - 1):
        if d[i] <= d[i - 1] and d[i] <= d[i + 1] and (only_above <= 0.0 or d[i] > only_above):
            found[k] = i
            k += 1
    if k == 0:
        if only_above > 0.0:
            return found[:0]
        found[0] = min(max(np.argmin(d), 1), n - 2)
        k = 1
    picked = np.empty(min(count, k), np.int64)
    taken = np.zeros(k, np.bool_)
    for p in range(len(picked)):
        best = -1
        for j in range(k):
            if not taken[j] and (best < 0 or d[found[j]] < d[found[best]]):
                best = j
        taken[best] = True
        picked[p] = found[best]
    return picked


# --- the grid scan and the crossing rounds of core.margins ------------------------------

GAIN, PHASE, BANDWIDTH = 0, 1, 2
"""Crossing kinds: log|L| = 0, arg(-L) = 0 (L on the negative real axis), log|T| = ref."""


@_jit
def abs2(z):
    """|z|^2."""
    return z.real * z.real + z.imag * z.imag


@_jit
def residual(kind, ol, cl, ref):
    """A crossing's residual: log|L| (gain), arg(-L) (phase) or log|T| - ref (bandwidth)."""
    if kind == GAIN:
        return math.log(abs(ol))
    if kind == PHASE:
        return cmath.phase(-ol)
    return math.log(abs(cl)) - ref


@_jit
def grid_brackets(omega, ols, cls):
    """Every crossing bracketed by neighbouring grid points, loop by loop: the gain
    crossovers, the crossings of the negative real axis (a jump of arg(-L) through +-pi
    is L passing the positive real axis instead, and is not one), then the first fall of
    |T| 3 dB below its low-frequency value.

    Returns
    -------
    (loop, kind, w_lo, w_hi, r_lo, r_hi, ref) : arrays over brackets, w in rad/s
    """
    n = len(omega)
    cap = 3 * (2 * (n - 1) + 1)
    loop, kind = np.empty(cap, np.int64), np.empty(cap, np.int64)
    w_lo, w_hi, r_lo, r_hi, ref = np.empty(cap), np.empty(cap), np.empty(cap), np.empty(cap), np.zeros(cap)
    m = 0
    for li in range(ols.shape[0]):
        # The sign of log|L| is that of |L|^2 - 1 (the logarithm is taken at brackets only).
        below = abs2(ols[li, 0]) < 1.0
        for k in range(n - 1):
            next_below = abs2(ols[li, k + 1]) < 1.0
            if below != next_below:
                loop[m], kind[m], w_lo[m], w_hi[m] = li, GAIN, omega[k], omega[k + 1]
                r_lo[m], r_hi[m] = math.log(abs(ols[li, k])), math.log(abs(ols[li, k + 1]))
                m += 1
            below = next_below
        for k in range(n - 1):
            z0, z1 = ols[li, k], ols[li, k + 1]
            if _negative(z0.imag) != _negative(z1.imag) and z0.real + z1.real < 0:
                p0, p1 = cmath.phase(-z0), cmath.phase(-z1)
                if _negative(p0) != _negative(p1) and max(abs(p0), abs(p1)) < 0.5 * math.pi:
                    loop[m], kind[m], w_lo[m], w_hi[m], r_lo[m], r_hi[m] = li, PHASE, omega[k], omega[k + 1], p0, p1
                    m += 1
        level = math.log(abs(cls[li, 0]) / math.sqrt(2.0))
        threshold = 0.5 * abs2(cls[li, 0])              # |T|^2 3 dB down
        for k in range(n):
            if abs2(cls[li, k]) < threshold:
                if k > 0:
                    loop[m], kind[m], w_lo[m], w_hi[m] = li, BANDWIDTH, omega[k - 1], omega[k]
                    r_lo[m] = math.log(abs(cls[li, k - 1])) - level
                    r_hi[m] = math.log(abs(cls[li, k])) - level
                    ref[m] = level
                    m += 1
                break
    return loop[:m], kind[:m], w_lo[:m], w_hi[:m], r_lo[:m], r_hi[:m], ref[:m]


@_jit
def grid_dips(omega, ols, count):
    """Triples (log w, log distance) round the ``count`` deepest dips of |1 + L| of each
    loop, then round the highest peaks of |L| above 1 (dips of 1/|L|), loop by loop.

    Returns
    -------
    (x, y, owner, is_peak) : triples (m, 3), the loop of each, and whether it is a peak of |L|
    """
    loops, n = ols.shape
    cap = 2 * loops * count
    x, y = np.empty((cap, 3)), np.empty((cap, 3))
    owner, is_peak = np.empty(cap, np.int64), np.empty(cap, np.bool_)
    distance = np.empty(n)
    m = 0
    for peaks in (False, True):
        for li in range(loops):
            for k in range(n):
                distance[k] = 1.0 / abs(ols[li, k]) if peaks else abs(1.0 + ols[li, k])
            for i in deepest_minima(distance, count, 1.0 if peaks else 0.0):
                for j in range(3):
                    x[m, j], y[m, j] = math.log(omega[i - 1 + j]), math.log(distance[i - 1 + j])
                owner[m], is_peak[m] = li, peaks
                m += 1
    return x[:m], y[:m], owner[:m], is_peak[:m]


@_jit
def crossing_points(a, b, fa, fb, prev, fprev, pending, loop, probing, active):
    """The points of one crossing round, log(rad/s), and the loop of each: ``PROBES``
    interior points of every bracket being probed, then one point per bracket being
    refined (its pending estimate, else the secant / regula-falsi point)."""
    n_probe = PROBES * len(probing)
    x = np.empty(n_probe + len(active))
    owner = np.empty(len(x), np.int64)
    for r in range(len(probing)):
        i = probing[r]
        for k in range(PROBES):
            x[PROBES * r + k] = a[i] + (b[i] - a[i]) * PROBE_U[k + 1]
            owner[PROBES * r + k] = loop[i]
    xi = falsi_point(a[active], b[active], fa[active], fb[active], prev[active], fprev[active])
    for r in range(len(active)):
        i = active[r]
        x[n_probe + r] = xi[r] if math.isnan(pending[i]) else pending[i]
        owner[n_probe + r] = loop[i]
    return x, owner


@_jit
def crossing_update(a, b, fa, fb, prev, fprev, pending, steps, x, kind, ref, probing, active, xs, ol, cl,
                    converged, max_steps):
    """Take one round's values (``ol``/``cl`` of each point's own loop, at the points of
    :func:`crossing_points` ``xs``) into the bracket arrays, in place; returns the brackets
    still to refine (those refined that have not converged, then those just probed)."""
    n_probe = PROBES * len(probing)
    f = np.empty(len(xs))
    for r in range(len(probing)):
        i = probing[r]
        for k in range(PROBES):
            j = PROBES * r + k
            f[j] = residual(kind[i], ol[j], cl[j], ref[i])
    for r in range(len(active)):
        i = active[r]
        j = n_probe + r
        f[j] = residual(kind[i], ol[j], cl[j], ref[i])
    if len(probing):
        na, nb, nfa, nfb, seed = probe_seed(a[probing], b[probing], fa[probing], fb[probing],
                                            f[:n_probe].reshape(-1, PROBES))
        for r in range(len(probing)):
            i = probing[r]
            a[i], b[i], fa[i], fb[i], pending[i] = na[r], nb[r], nfa[r], nfb[r], seed[r]
    xi, fi = xs[n_probe:], f[n_probe:]
    na, nb, nfa, nfb, nprev, nfprev = falsi_update(a[active], b[active], fa[active], fb[active], xi, fi)
    keep = np.empty(len(active) + len(probing), np.int64)
    m = 0
    for r in range(len(active)):
        i = active[r]
        a[i], b[i], fa[i], fb[i], prev[i], fprev[i] = na[r], nb[r], nfa[r], nfb[r], nprev[r], nfprev[r]
        x[i], pending[i] = xi[r], math.nan
        steps[i] += 1
        if abs(fi[r]) > converged and abs(b[i] - a[i]) > 1e-12 and steps[i] < max_steps:
            keep[m] = i
            m += 1
    for r in range(len(probing)):
        keep[m] = probing[r]
        m += 1
    return keep[:m]


@_jit
def arg_steps(values, limit):
    """Increments of arg(values) between neighbours along each row (each in (-pi, pi]):
    whether any row turns by more than ``limit`` rad over each interval, and each row's sum."""
    rows, n = values.shape
    wide = np.zeros(n - 1, np.bool_)
    total = np.zeros(rows)
    for r in range(rows):
        for k in range(n - 1):
            step = cmath.phase(values[r, k + 1] * values[r, k].conjugate())      # arg of the ratio
            total[r] += step
            if abs(step) > limit:
                wide[k] = True
    return wide, total


@_jit
def dip_distances(values, peak, repeat):
    """log distance at evaluated points: -log|L| where the row is a peak of |L|, else
    log|1 + L|; ``peak`` is per row, each row having ``repeat`` consecutive points."""
    out = np.empty(len(values))
    for j in range(len(values)):
        out[j] = -math.log(abs(values[j])) if peak[j // repeat] else math.log(abs(1.0 + values[j]))
    return out
