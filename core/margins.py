"""Crossovers, margins, sensitivity peak, bandwidth and a Nyquist stability count.

Everything is computed from the exact-delay frequency response of
:class:`core.loops.CascadeModel`: grid values first, then each crossing refined
by a few Illinois (modified regula falsi) steps on the model itself, all loops
and all crossings of one iteration in one vectorised evaluation.

Stability is decided by the argument principle, not from the margins: along the
Nyquist contour (up the imaginary axis, round the origin to the right on a small
arc, closed at infinity where the strictly proper loop vanishes) the number of
closed-loop right-half-plane poles is ``Z = P - (change of arg(1 + L)) / 2 pi``,
with ``P`` the open loop's right-half-plane poles, which are exactly the unstable
closed-loop poles of the inner loop it contains (Nyquist criterion; e.g.
Franklin, Powell & Emami-Naeini, "Feedback Control of Dynamic Systems", from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from core.axis import Axis
from core.gains import GainSet
from core.loops import CascadeModel, FrequencyAlgebra

LOOPS = ("current", "speed", "position")
POINTS_PER_DECADE = 80
_REFINE_STEPS = 3
_REFINE_MAX_STEPS = 30
_DIP_ROUNDS = 3
_TAIL = np.logspace(0, 2, 61)[1:]
"""The Nyquist count's extension above the grid: two decades, relative to its top."""
_CONVERGED = 1e-10
"""|residual| (log-magnitude or rad) below which a crossing counts as found."""


@dataclass(frozen=True)
class LoopMargins:
    """Stability margins of one loop broken at its controller output.

    Attributes
    ----------
    gain_crossovers_hz, phase_crossovers_hz : tuple of float
        Every frequency where |L| = 1, and where arg L = -180 deg (mod 360), Hz.
    crossover_hz : float
        The lowest gain crossover, which sets the loop's bandwidth, Hz (NaN when |L|
        never reaches 1). A resonance can add more crossovers above it.
    phase_margin_deg : float
        Smallest phase margin over the gain crossovers, deg (inf with none): the
        angular distance of arg L from -180 deg; negative only when the loop is unstable.
    phase_margin_hz : float
        Where that margin is taken, Hz.
    gain_margin_db : float
        Gain margin of smallest magnitude over the phase crossovers, dB (inf with none);
        negative means the gain must fall by that much.
    gain_margin_hz : float
    delay_margin_s : float
        Smallest extra loop delay that turns some crossover onto -180 deg, s (0 when unstable).
    sensitivity_peak : float
        Ms = max |1/(1+L)| over the grid (refined at the peak).
    sensitivity_peak_hz : float
    bandwidth_hz : float
        Lowest frequency where |T| falls 3 dB below its low-frequency value, Hz.
    unstable_poles : int
        Closed-loop poles in the right half plane (Nyquist count).
    stable : bool
    """

    gain_crossovers_hz: tuple[float, ...]
    phase_crossovers_hz: tuple[float, ...]
    crossover_hz: float
    phase_margin_deg: float
    phase_margin_hz: float
    gain_margin_db: float
    gain_margin_hz: float
    delay_margin_s: float
    sensitivity_peak: float
    sensitivity_peak_hz: float
    bandwidth_hz: float
    unstable_poles: int
    stable: bool


def frequency_grid(axis: Axis, gains: GainSet) -> np.ndarray:
    """Angular frequencies for the Bode view and the margins, rad/s (read-only, shared).

    From well below the position loop's gain and the mechanical corner up to the
    current loop's Nyquist frequency, ``POINTS_PER_DECADE`` per decade, with extra
    points packed round any two-mass resonance and anti-resonance.
    """
    return _grid(axis, gains.position.kp_per_s)


def grid_span_hz(axis: Axis, position_kp_per_s: float) -> tuple[float, float]:
    """(lowest, highest) frequency the loops are looked at over, Hz.

    Up to the current loop's Nyquist frequency (the continuous model means nothing
    beyond it); down to well below the position loop's gain and the mechanical corner.
    """
    f_hi = 0.5 * axis.drive.current_rate_hz
    mech_corner = axis.total_viscous_nm_s_per_rad / axis.total_inertia_kgm2 / (2 * math.pi)
    f_lo = min(0.01 * position_kp_per_s / (2 * math.pi), 1e-4 * f_hi)
    if mech_corner > 0:
        f_lo = min(f_lo, 0.3 * mech_corner)
    return max(f_lo, 1e-7 * f_hi), f_hi


def log_grid_hz(f_lo: float, f_hi: float, points_per_decade: int) -> np.ndarray:
    """Log-spaced frequencies from ``f_lo`` to ``f_hi``, Hz, both ends included."""
    n = int(math.ceil(points_per_decade * math.log10(f_hi / f_lo))) + 1
    return np.logspace(math.log10(f_lo), math.log10(f_hi), n)


@lru_cache(maxsize=32)
def _grid(axis: Axis, position_kp_per_s: float) -> np.ndarray:
    f_lo, f_hi = grid_span_hz(axis, position_kp_per_s)
    f = log_grid_hz(f_lo, f_hi, POINTS_PER_DECADE)
    extra = []
    for fr in (axis.resonance_hz, axis.antiresonance_hz):
        if math.isfinite(fr) and f_lo < fr < f_hi:
            extra.append(fr * np.linspace(0.9, 1.1, 41))
    if extra:
        f = np.unique(np.concatenate([f, *extra]))
    w = 2 * math.pi * f
    w.setflags(write=False)
    return w


@dataclass(frozen=True)
class FrequencyData:
    """Open- and closed-loop frequency responses on the grid (complex, per loop).

    ``dynamic_compliance`` is load position per load torque at the load, (rad or m)
    per (N*m or N), all loops closed.
    """

    omega_rad_s: np.ndarray
    open_loop: dict
    closed_loop: dict
    dynamic_compliance: np.ndarray


def _loop_arrays(model: CascadeModel) -> tuple[list, list]:
    return ([model.current_open, model.speed_open, model.position_open],
            [model.current_closed, model.speed_closed, model.position_closed])


class _Evaluator:
    """Evaluates all three loops at arbitrary points of the jw axis (or any s)."""

    def __init__(self, axis: Axis, gains: GainSet):
        self.axis, self.gains = axis, gains

    def at_omega(self, omega):
        return _loop_arrays(CascadeModel(self.axis, self.gains, FrequencyAlgebra(omega)))

    def at_s(self, s):
        alg = FrequencyAlgebra(np.zeros(1))
        alg.s = np.asarray(s, dtype=complex)
        return _loop_arrays(CascadeModel(self.axis, self.gains, alg))


def _residual(kind: str, ol, cl, ref):
    if kind == "gain":
        return np.log(np.abs(ol))
    if kind == "phase":
        return np.angle(-ol)
    return np.log(np.abs(cl)) - ref          # bandwidth: |T| against |T0|/sqrt(2)


def falsi_point(a, b, fa, fb, prev, fprev) -> np.ndarray:
    """Next point of bracketed root searches, arrays over brackets.

    The secant through the two latest points (``prev``, ``b``) when it falls strictly
    inside the bracket [a, b] (superlinear near the root), else the regula-falsi point
    of the bracket with the Illinois-weighted ``fa``.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        falsi = np.where(fb != fa, b - fb * (b - a) / (fb - fa), 0.5 * (a + b))
        secant = b - fb * (b - prev) / (fb - fprev)
    inside = np.isfinite(secant) & (secant > np.minimum(a, b)) & (secant < np.maximum(a, b)) & (prev != b)
    return np.where(inside, secant, falsi)


def falsi_update(a, b, fa, fb, x, fx):
    """(a, b, fa, fb, prev, fprev) after evaluating ``fx`` at ``x`` (Illinois: halve the
    retained end's residual when the same end is kept twice)."""
    same = np.sign(fx) == np.sign(fb)
    return (np.where(same, a, b), x, np.where(same, fa * 0.5, fb), fx, b, fb)


class _Crossings:
    """Illinois (modified regula falsi) iterations on log(w) for many brackets at once.

    A bracket is (loop index, kind, w_lo, w_hi, r_lo, r_hi, ref) with residuals of
    opposite sign at its ends; kinds are "gain" (log|L|), "phase" (arg(-L)) and "bw"
    (log|T| - ref). Every bracket takes ``_REFINE_STEPS`` steps, then more until its
    residual is below 1e-8 (sharp resonances), at most ``_REFINE_MAX_STEPS``.
    """

    def __init__(self):
        self.loop = np.zeros(0, int)
        self.kind = np.zeros(0, "<U5")
        self.a = self.b = self.fa = self.fb = self.ref = self.x = self.prev = self.fprev = np.zeros(0)
        self.steps = np.zeros(0, int)
        self.values = np.zeros((3, 0), complex)
        self.active = np.zeros(0, int)

    def add(self, brackets: list) -> None:
        """Start refining more brackets."""
        if not brackets:
            return
        n0 = len(self.loop)
        col = list(zip(*brackets))
        self.loop = np.concatenate([self.loop, np.array(col[0], int)])
        self.kind = np.concatenate([self.kind, np.array(col[1])])
        self.a = np.concatenate([self.a, np.log(np.array(col[2], float))])
        self.b = np.concatenate([self.b, np.log(np.array(col[3], float))])
        self.fa = np.concatenate([self.fa, np.array(col[4], float)])
        self.fb = np.concatenate([self.fb, np.array(col[5], float)])
        self.ref = np.concatenate([self.ref, np.array(col[6], float)])
        self.x = np.concatenate([self.x, self.b[n0:]])
        self.prev = np.concatenate([self.prev, self.a[n0:]])
        self.fprev = np.concatenate([self.fprev, self.fa[n0:]])
        self.steps = np.concatenate([self.steps, np.zeros(len(brackets), int)])
        self.values = np.concatenate([self.values, np.zeros((3, len(brackets)), complex)], axis=1)
        self.active = np.concatenate([self.active, np.arange(n0, len(self.loop))])

    def proposal(self) -> np.ndarray:
        """The next point of every active bracket, log(rad/s)."""
        i = self.active
        return falsi_point(self.a[i], self.b[i], self.fa[i], self.fb[i], self.prev[i], self.fprev[i])

    def update(self, xa: np.ndarray, ol: np.ndarray, cl: np.ndarray, all_ol: np.ndarray) -> None:
        """Take the loops' values at the proposed points (``ol``/``cl`` of each bracket's own
        loop; ``all_ol`` of all three loops, shape (3, n))."""
        i = self.active
        kind = self.kind[i]
        with np.errstate(divide="ignore", invalid="ignore"):
            fx = np.where(kind == "gain", np.log(np.abs(ol)),
                          np.where(kind == "phase", np.angle(-ol), np.log(np.abs(cl)) - self.ref[i]))
        self.values[:, i] = all_ol
        self.x[i] = xa
        (self.a[i], self.b[i], self.fa[i], self.fb[i],
         self.prev[i], self.fprev[i]) = falsi_update(self.a[i], self.b[i], self.fa[i], self.fb[i], xa, fx)
        self.steps[i] += 1
        keep = (self.steps[i] < _REFINE_STEPS) | (
            (np.abs(fx) > _CONVERGED) & (np.abs(self.b[i] - self.a[i]) > 1e-12) & (self.steps[i] < _REFINE_MAX_STEPS))
        self.active = i[keep]


class _Dips:
    """Local minima of a distance on the grid, narrowed by successive parabolic steps in log(w).

    Rows are triples (log w, log distance) with the lowest in the middle; ``owner`` is
    the loop, ``is_peak`` marks rows whose distance is 1/|L| (peaks of |L|) rather than
    |1 + L| (sensitivity peaks).
    """

    def __init__(self, omega: np.ndarray, ols: list):
        triples = [_dip_brackets(omega, np.abs(1.0 + ol)) for ol in ols]
        triples += [_dip_brackets(omega, 1.0 / np.abs(ol), only_above=1.0) for ol in ols]
        self.x = np.concatenate([t[0] for t in triples])
        self.y = np.concatenate([t[1] for t in triples])
        self.owner = np.concatenate([np.full(len(t[0]), k % 3) for k, t in enumerate(triples)])
        self.is_peak = np.concatenate([np.full(len(t[0]), k >= 3) for k, t in enumerate(triples)])
        self.rounds = 0

    def proposal(self) -> np.ndarray:
        """Parabola vertices of every row, log(rad/s) (empty once the rounds are done)."""
        return _parabola_vertex(self.x, self.y) if self.rounds < _DIP_ROUNDS else np.zeros(0)

    def update(self, v: np.ndarray, lv: np.ndarray) -> None:
        """Take L (each row's own loop) at the vertices."""
        with np.errstate(divide="ignore"):
            yv = np.where(self.is_peak, -np.log(np.abs(lv)), np.log(np.abs(1.0 + lv)))
        self.x, self.y = _narrow(self.x, self.y, v, yv)
        self.rounds += 1

    def hidden_crossings(self) -> list:
        """Gain-crossover brackets on both sides of each |L| peak found above 0 dB."""
        out = []
        for r in np.nonzero(self.is_peak & (self.y[:, 1] < 0.0))[0]:
            for lo, hi in ((0, 1), (1, 2)):
                r_lo, r_hi = -self.y[r, lo], -self.y[r, hi]
                if np.signbit(r_lo) != np.signbit(r_hi):
                    out.append((int(self.owner[r]), "gain", math.exp(self.x[r, lo]), math.exp(self.x[r, hi]),
                                r_lo, r_hi, 0.0))
        return out

    def sensitivity_rows(self, loop: int) -> tuple[np.ndarray, np.ndarray]:
        """(w, |1 + L|) at the narrowed sensitivity dips of ``loop``."""
        mine = (self.owner == loop) & ~self.is_peak
        return np.exp(self.x[mine, 1]), np.exp(self.y[mine, 1])


def _dip_brackets(omega: np.ndarray, distance: np.ndarray, count: int = 3, only_above: float = 0.0):
    """Triples (log w, log distance) round the ``count`` deepest local minima of ``distance``.

    With ``only_above``, only minima whose grid value exceeds it are taken (possibly none).
    """
    d = distance
    inner = np.nonzero((d[1:-1] <= d[:-2]) & (d[1:-1] <= d[2:]))[0] + 1
    if only_above:
        inner = inner[d[inner] > only_above]
        if len(inner) == 0:
            return np.zeros((0, 3)), np.zeros((0, 3))
    elif len(inner) == 0:
        inner = np.array([min(max(int(np.argmin(d)), 1), len(d) - 2)])
    inner = inner[np.argsort(d[inner])[:count]]
    idx = inner[:, None] + np.array([-1, 0, 1])[None, :]
    return np.log(omega[idx]), np.log(d[idx])


def _parabola_vertex(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Abscissa of the parabola through each row's three points, kept inside the bracket."""
    x0, x1, x2 = x.T
    y0, y1, y2 = y.T
    num = (x1 - x0) ** 2 * (y1 - y2) - (x1 - x2) ** 2 * (y1 - y0)
    den = (x1 - x0) * (y1 - y2) - (x1 - x2) * (y1 - y0)
    with np.errstate(divide="ignore", invalid="ignore"):
        v = x1 - 0.5 * num / den
    # Fall back to the midpoint of the wider half when the parabola is flat or convex down.
    wide = np.where(x2 - x1 > x1 - x0, 0.5 * (x1 + x2), 0.5 * (x0 + x1))
    v = np.where(np.isfinite(v) & (v > x0) & (v < x2) & (np.abs(v - x1) > 1e-12), v, wide)
    return v


def _narrow(x: np.ndarray, y: np.ndarray, v: np.ndarray, yv: np.ndarray):
    """Replace one end of each bracket by the new point, keeping the lowest in the middle."""
    x0, x1, x2 = x.T
    y0, y1, y2 = y.T
    left, better = v < x1, yv < y1
    nx = np.column_stack([np.where(left, np.where(better, x0, v), np.where(better, x1, x0)),
                          np.where(better, v, x1),
                          np.where(left, np.where(better, x1, x2), np.where(better, x2, v))])
    ny = np.column_stack([np.where(left, np.where(better, y0, yv), np.where(better, y1, y0)),
                          np.where(better, yv, y1),
                          np.where(left, np.where(better, y1, y2), np.where(better, y2, yv))])
    return nx, ny


def _sign_changes(r: np.ndarray) -> np.ndarray:
    return np.nonzero(np.signbit(r[:-1]) != np.signbit(r[1:]))[0]


def _wrap_deg(angle_rad):
    """Angle in degrees wrapped to (-180, 180]."""
    d = np.degrees(angle_rad)
    return 180.0 - np.mod(180.0 - d, 360.0)


def _arg_change(values: np.ndarray) -> np.ndarray:
    """Increments of arg(values) between neighbours, rad, each in (-pi, pi]."""
    return np.angle(values[1:] / values[:-1])


def nyquist_count(ev: _Evaluator, omega: np.ndarray, open_loops: list, arc_open_loops: list,
                  max_passes: int = 6) -> list[float]:
    """Net change of arg(1 + L) round the Nyquist contour divided by 2 pi, per loop.

    The contour runs from ``omega[0]`` upwards (and its mirror image), closes round
    the origin on a right-hand arc of radius ``omega[0]`` (``arc_open_loops`` holds L on
    that arc, from -j omega[0] to +j omega[0]) and is taken as closed at
    the top of the grid, which the caller extends until |L| is small. Wherever one
    step turns arg(1 + L) by more than 1 rad the interval is subdivided.
    """
    w = omega.copy()
    vals = [1.0 + ol for ol in open_loops]
    for _ in range(max_passes):
        bad = np.zeros(len(w) - 1, dtype=bool)
        for v in vals:
            bad |= np.abs(_arg_change(v)) > 1.0
        if not bad.any():
            break
        idx = np.nonzero(bad)[0]
        mids = np.sqrt(w[idx] * w[idx + 1])
        new, _ = ev.at_omega(mids)
        order = np.argsort(np.concatenate([w, mids]), kind="stable")
        w = np.concatenate([w, mids])[order]
        vals = [np.concatenate([v, 1.0 + n])[order] for v, n in zip(vals, new)]
    turns = []
    for v, a in zip(vals, arc_open_loops):
        upper = _arg_change(v).sum()
        around = _arg_change(1.0 + a).sum()
        turns.append((2.0 * upper + around) / (2.0 * np.pi))
    return turns


def loop_margins(axis: Axis, gains: GainSet, omega: np.ndarray | None = None) -> tuple[dict, FrequencyData]:
    """Margins of the current, speed and position loops, and the responses they came from.

    Parameters
    ----------
    axis, gains : Axis, GainSet
    omega : ndarray, optional
        Grid, rad/s; :func:`frequency_grid` by default.

    Returns
    -------
    (dict of str -> LoopMargins, FrequencyData)
    """
    if omega is None:
        omega = frequency_grid(axis, gains)
    ev = _Evaluator(axis, gains)
    # One evaluation: the grid plus a tail to 100x its top for the Nyquist count.
    tail = omega[-1] * _TAIL
    grid_model = CascadeModel(axis, gains, FrequencyAlgebra(np.concatenate([omega, tail])))
    ols_all, cls_all = _loop_arrays(grid_model)
    n = len(omega)
    ols = [o[:n] for o in ols_all]
    cls = [c[:n] for c in cls_all]

    brackets = []
    for li in range(3):
        ol, cl = ols[li], cls[li]
        r_gain = np.log(np.abs(ol))
        for k in _sign_changes(r_gain):
            brackets.append((li, "gain", omega[k], omega[k + 1], r_gain[k], r_gain[k + 1], 0.0))
        # arg L = -180 deg (mod 360) where L crosses the negative real axis.
        im = ol.imag
        for k in np.nonzero((np.signbit(im[:-1]) != np.signbit(im[1:])) & (ol.real[:-1] + ol.real[1:] < 0))[0]:
            r = _residual("phase", ol[k:k + 2], None, 0.0)
            # A true crossing of the negative real axis has arg(-L) near 0 on both sides;
            # a jump through +-pi is L passing the positive real axis instead.
            if np.signbit(r[0]) != np.signbit(r[1]) and max(abs(r[0]), abs(r[1])) < 0.5 * np.pi:
                brackets.append((li, "phase", omega[k], omega[k + 1], r[0], r[1], 0.0))
        ref = math.log(abs(cl[0]) / math.sqrt(2.0))
        r_bw = np.log(np.abs(cl)) - ref
        below = np.nonzero(r_bw < 0)[0]
        if len(below) and below[0] > 0:
            k = below[0] - 1
            brackets.append((li, "bw", omega[k], omega[k + 1], r_bw[k], r_bw[k + 1], ref))
    # Crossings are refined on the model itself; alongside, in the same evaluations, the
    # deepest dips of |1 + L| (sensitivity peaks) and the highest peaks of |L| below 1 (a
    # resonance that may poke through 0 dB between grid points) are narrowed, and the
    # first evaluation also carries the Nyquist arc round the origin.
    theta = np.linspace(-0.5 * np.pi, 0.5 * np.pi, 33)
    arc_s = omega[0] * np.exp(1j * theta)
    crossings = _Crossings()
    crossings.add(brackets)
    dips = _Dips(omega, ols)
    arc = None
    while arc is None or len(crossings.active) or dips.rounds < _DIP_ROUNDS:
        xc, xv = crossings.proposal(), dips.proposal()
        s_all = np.concatenate([1j * np.exp(xc), 1j * np.exp(xv), arc_s if arc is None else []])
        ol_all, cl_all = ev.at_s(s_all)
        ol_all = np.stack(np.broadcast_arrays(*ol_all))
        cl_all = np.stack(np.broadcast_arrays(*cl_all))
        nc, nv = len(xc), len(xv)
        if nc:
            pick = np.arange(nc)
            own = crossings.loop[crossings.active]
            crossings.update(xc, ol_all[own, pick], cl_all[own, pick], ol_all[:, :nc])
        if nv:
            dips.update(xv, ol_all[dips.owner, nc + np.arange(nv)])
            if dips.rounds == _DIP_ROUNDS:
                hidden = dips.hidden_crossings()
                brackets += hidden
                crossings.add(hidden)
        if arc is None:
            arc = list(ol_all[:, nc + nv:])
    refined, refined_ols = np.exp(crossings.x), crossings.values

    turns = nyquist_count(ev, np.concatenate([omega, tail]), ols_all, arc)

    out = {}
    inner_unstable = 0
    for li, name in enumerate(LOOPS):
        sel = [i for i, b in enumerate(brackets) if b[0] == li]
        gw = sorted(refined[i] for i in sel if brackets[i][1] == "gain")
        pw = sorted(refined[i] for i in sel if brackets[i][1] == "phase")
        bw = [refined[i] for i in sel if brackets[i][1] == "bw"]
        g_sel = sorted((i for i in sel if brackets[i][1] == "gain"), key=lambda i: refined[i])
        p_sel = sorted((i for i in sel if brackets[i][1] == "phase"), key=lambda i: refined[i])
        at = refined_ols[li]
        z = inner_unstable - turns[li]
        unstable = max(int(round(z)), 0)
        inner_unstable = unstable
        stable = unstable == 0
        # Distance of arg L from -180 deg at each crossover. Between a two-mass load's
        # anti-resonance and resonance the phase can sit far above -180, and the nearest
        # critical direction is then a phase lead: a stable loop reports that distance.
        signed = _wrap_deg(np.angle(at[g_sel]) + np.pi)
        pms = np.abs(signed) if stable else signed
        lag_room = np.radians(np.mod(np.degrees(np.angle(at[g_sel])) + 180.0, 360.0))
        gms = -20.0 * np.log10(np.abs(at[p_sel]))
        if len(pms):
            j = int(np.argmin(pms))
            pm, pm_w = float(pms[j]), gw[j]
            delay_margin = float(np.min(lag_room / np.array(gw))) if stable else 0.0
        else:
            pm, pm_w, delay_margin = math.inf, math.nan, math.inf
        if len(gms):
            j = int(np.argmin(np.abs(gms)))
            gm, gm_w = float(gms[j]), pw[j]
        else:
            gm, gm_w = math.inf, math.nan
        dip_w, dip_d = dips.sensitivity_rows(li)
        candidates_w = np.concatenate([dip_w, np.array(gw + pw)])
        candidates_d = np.concatenate([dip_d, np.abs(1.0 + at[g_sel + p_sel])])
        j = int(np.argmin(candidates_d))
        ms, ms_w = float(1.0 / candidates_d[j]), float(candidates_w[j])
        out[name] = LoopMargins(
            gain_crossovers_hz=tuple(float(w / (2 * math.pi)) for w in gw),
            phase_crossovers_hz=tuple(float(w / (2 * math.pi)) for w in pw),
            crossover_hz=float(gw[0] / (2 * math.pi)) if gw else math.nan,
            phase_margin_deg=pm,
            phase_margin_hz=float(pm_w / (2 * math.pi)),
            gain_margin_db=gm,
            gain_margin_hz=float(gm_w / (2 * math.pi)),
            delay_margin_s=float(delay_margin),
            sensitivity_peak=ms,
            sensitivity_peak_hz=float(ms_w / (2 * math.pi)),
            bandwidth_hz=float(bw[0] / (2 * math.pi)) if bw else math.nan,
            unstable_poles=unstable,
            stable=stable,
        )
    data = FrequencyData(omega, dict(zip(LOOPS, ols)), dict(zip(LOOPS, cls)),
                         grid_model.dynamic_compliance[:n])
    return out, data
