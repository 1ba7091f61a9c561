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
POINTS_PER_DECADE = 100
_REFINE_STEPS = 3
_REFINE_MAX_STEPS = 30
_DIP_ROUNDS = 3


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
    """Angular frequencies for the Bode view and the margins, rad/s (a fresh array).

    From well below the position loop's gain and the mechanical corner up to the
    current loop's Nyquist frequency, ``POINTS_PER_DECADE`` per decade, with extra
    points packed round any two-mass resonance and anti-resonance.
    """
    return _grid(axis, gains.position.kp_per_s).copy()


@lru_cache(maxsize=32)
def _grid(axis: Axis, position_kp_per_s: float) -> np.ndarray:
    f_hi = 0.5 * axis.drive.current_rate_hz
    mech_corner = axis.total_viscous_nm_s_per_rad / axis.total_inertia_kgm2 / (2 * math.pi)
    f_lo = min(0.01 * position_kp_per_s / (2 * math.pi), 1e-4 * f_hi)
    if mech_corner > 0:
        f_lo = min(f_lo, 0.3 * mech_corner)
    f_lo = max(f_lo, 1e-7 * f_hi)
    n = int(math.ceil(POINTS_PER_DECADE * math.log10(f_hi / f_lo))) + 1
    f = np.logspace(math.log10(f_lo), math.log10(f_hi), n)
    extra = []
    for fr in (axis.resonance_hz, axis.antiresonance_hz):
        if math.isfinite(fr) and f_lo < fr < f_hi:
            extra.append(fr * np.linspace(0.9, 1.1, 41))
    if extra:
        f = np.unique(np.concatenate([f, *extra]))
    return 2 * math.pi * f


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


def _refine(ev: _Evaluator, brackets: list) -> np.ndarray:
    """Illinois iterations on log(w) for every bracket at once.

    ``brackets``: (loop index, kind, w_lo, w_hi, r_lo, r_hi, ref) with residuals of
    opposite sign at the ends. Returns the refined w, rad/s.
    """
    if not brackets:
        return np.zeros(0), [np.zeros(0, complex)] * 3
    loop = np.array([b[0] for b in brackets])
    kinds = [b[1] for b in brackets]
    a = np.log(np.array([b[2] for b in brackets]))
    b = np.log(np.array([b[3] for b in brackets]))
    fa = np.array([br[4] for br in brackets])
    fb = np.array([br[5] for br in brackets])
    ref = np.array([br[6] for br in brackets])
    kinds = np.array(kinds)
    x = b.copy()
    fx = fb.copy()
    values = [np.zeros(len(brackets), complex) for _ in range(3)]
    active = np.arange(len(brackets))
    for step in range(_REFINE_MAX_STEPS):
        xa = np.where(fb[active] != fa[active],
                      b[active] - fb[active] * (b[active] - a[active]) / (fb[active] - fa[active]),
                      0.5 * (a[active] + b[active]))
        ols, cls = ev.at_omega(np.exp(xa))
        fxa = np.empty_like(xa)
        for li in range(3):
            for kind in ("gain", "phase", "bw"):
                sel = np.nonzero((loop[active] == li) & (kinds[active] == kind))[0]
                if len(sel):
                    fxa[sel] = _residual(kind, ols[li][sel], cls[li][sel], ref[active][sel])
        for li in range(3):
            values[li][active] = ols[li]
        x[active], fx[active] = xa, fxa
        same = np.sign(fxa) == np.sign(fb[active])
        # Illinois: halve the retained end's residual when the same end is kept twice.
        fa[active] = np.where(same, fa[active] * 0.5, fb[active])
        a[active] = np.where(same, a[active], b[active])
        b[active], fb[active] = xa, fxa
        if step + 1 >= _REFINE_STEPS:
            # Past the usual few steps, go on only with crossings not yet converged
            # (sharp resonances): |residual| is a log-magnitude or an angle in rad.
            active = active[np.abs(fxa) > 1e-9]
            if len(active) == 0:
                break
    return np.exp(x), values


def _dip_brackets(omega: np.ndarray, distance: np.ndarray, count: int = 3):
    """Triples (log w, log |1+L|) round the ``count`` deepest local minima of ``distance``."""
    d = distance
    inner = np.nonzero((d[1:-1] <= d[:-2]) & (d[1:-1] <= d[2:]))[0] + 1
    if len(inner) == 0:
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
    """Replace one end of each bracket by the new point, keeping the minimum in the middle."""
    x, y = x.copy(), y.copy()
    for r in range(len(v)):
        pts = sorted(zip(np.append(x[r], v[r]), np.append(y[r], yv[r])))
        k = min(max(int(np.argmin([p[1] for p in pts])), 1), 2)
        x[r] = [p[0] for p in pts[k - 1:k + 2]]
        y[r] = [p[1] for p in pts[k - 1:k + 2]]
    return x, y


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
    tail = omega[-1] * np.logspace(0, 2, 2 * POINTS_PER_DECADE + 1)[1:]
    grid_model = CascadeModel(axis, gains, FrequencyAlgebra(np.concatenate([omega, tail])))
    ols_all, cls_all = _loop_arrays(grid_model)
    n = len(omega)
    ols = [o[:n] for o in ols_all]
    cls = [c[:n] for c in cls_all]

    brackets, owners = [], []
    for li in range(3):
        ol, cl = ols[li], cls[li]
        r_gain = np.log(np.abs(ol))
        for k in _sign_changes(r_gain):
            brackets.append((li, "gain", omega[k], omega[k + 1], r_gain[k], r_gain[k + 1], 0.0))
        # arg L = -180 deg (mod 360) where L crosses the negative real axis.
        im = ol.imag
        for k in np.nonzero((np.signbit(im[:-1]) != np.signbit(im[1:])) & (ol.real[:-1] + ol.real[1:] < 0))[0]:
            r = _residual("phase", ol[k:k + 2], None, 0.0)
            if np.signbit(r[0]) != np.signbit(r[1]):
                brackets.append((li, "phase", omega[k], omega[k + 1], r[0], r[1], 0.0))
        ref = math.log(abs(cl[0]) / math.sqrt(2.0))
        r_bw = np.log(np.abs(cl)) - ref
        below = np.nonzero(r_bw < 0)[0]
        if len(below) and below[0] > 0:
            k = below[0] - 1
            brackets.append((li, "bw", omega[k], omega[k + 1], r_bw[k], r_bw[k + 1], ref))
    refined, refined_ols = _refine(ev, brackets)

    # Sensitivity peaks: the deepest local minima of |1 + L| on the grid, each narrowed by
    # successive parabolic interpolation in log(w); the refined crossovers count too.
    theta = np.linspace(-0.5 * np.pi, 0.5 * np.pi, 33)
    arc_s = omega[0] * np.exp(1j * theta)
    dips = [_dip_brackets(omega, np.abs(1.0 + ol)) for ol in ols]
    arc = None
    for round_ in range(_DIP_ROUNDS):
        vertices = np.concatenate([_parabola_vertex(x, y) for x, y in dips])
        if round_ == 0:
            # The Nyquist arc round the origin rides along in the first evaluation.
            extra, _ = ev.at_s(np.concatenate([arc_s, 1j * np.exp(vertices)]))
            arc = [e[:len(theta)] for e in extra]
            at_vertex = [e[len(theta):] for e in extra]
        else:
            at_vertex, _ = ev.at_omega(np.exp(vertices))
        start = 0
        for li, (x, y) in enumerate(dips):
            count = len(x)
            values = np.log(np.abs(1.0 + at_vertex[li][start:start + count]))
            dips[li] = _narrow(x, y, vertices[start:start + count], values)
            start += count

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
        x, y = dips[li]
        candidates_w = np.concatenate([np.exp(x[:, 1]), np.array(gw + pw)])
        candidates_d = np.concatenate([np.exp(y[:, 1]), np.abs(1.0 + at[g_sel + p_sel])])
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
