"""Crossovers, margins, sensitivity peak, bandwidth and a Nyquist stability count.

Everything is computed from the exact-delay frequency response of
:class:`core.loops.CascadeModel`: grid values first, then each crossing and each
sensitivity dip refined on the model itself, all loops, crossings and dips of one
round in one vectorised evaluation. A crossing's first round samples its grid
bracket at a few interior points and takes the root of the polynomial through
them; a dip's takes the minimum of its polynomial. Each is then evaluated there and
done when it meets its tolerance (crossings: residual; dips: the predicted value),
else refined further by bracketed secant / Illinois steps or parabolic steps. So a
smooth loop costs two rounds, and a sharp resonance as many as it needs; a peak of
|L| found above 0 dB between grid points adds its two crossings.

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
from core import search_kernels
from core.loops import CascadeModel, FrequencyAlgebra
from core.search_kernels import PROBES, dip_after_probe, falsi_point, falsi_update, probe_seed

LOOPS = ("current", "speed", "position")
POINTS_PER_DECADE = 80
_REFINE_MAX_STEPS = 30
_DIP_MAX_ROUNDS = 12
"""Most steps on a dip after its probe round (sharp resonances; smooth dips take one)."""
_DIP_CONVERGED = 1e-7
"""|log distance| by which a dip's evaluated minimum may miss its prediction and count as found."""
_TAIL = np.logspace(0, 2, 61)[1:]
"""The Nyquist count's extension above the grid: two decades, relative to its top."""
_ARC = np.exp(1j * np.linspace(-0.5 * np.pi, 0.5 * np.pi, 33))
"""The Nyquist contour's right-hand arc round the origin, per unit radius."""
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


@lru_cache(maxsize=32)
def _grid_algebra(axis: Axis, position_kp_per_s: float) -> FrequencyAlgebra:
    """The default grid and its Nyquist tail as one algebra, kept between recomputes so
    that the blocks no gain touches (mechanics, armature, filters, delays) are evaluated once."""
    omega = _grid(axis, position_kp_per_s)
    return FrequencyAlgebra(np.concatenate([omega, omega[-1] * _TAIL]))


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
        return _loop_arrays(CascadeModel(self.axis, self.gains, FrequencyAlgebra.at(s)))


def probe_points(a, b) -> np.ndarray:
    """The interior points at which each bracket [a, b] is sampled first, shape (n, PROBES)."""
    return a[:, None] + (b - a)[:, None] * search_kernels.PROBE_U[1:-1]


def dip_probe_points(x: np.ndarray) -> np.ndarray:
    """Two points in each half of every triple (log w), shape (n, 4)."""
    x0, x1, x2 = x.T
    return np.column_stack([x0 + (x1 - x0) / 3, x0 + 2 * (x1 - x0) / 3, x1 + (x2 - x1) / 3, x1 + 2 * (x2 - x1) / 3])


def dip_step(x, y, v, yv, predicted, rounds: int):
    """One step on dips (:func:`core.search_kernels.dip_step` with this module's limits)."""
    return search_kernels.dip_step(x, y, v, yv, predicted, rounds, _DIP_CONVERGED, _DIP_MAX_ROUNDS)


def residuals(kind, ol, cl, ref):
    """Crossing residuals by kind code (0 gain: log|L|, 1 phase: arg(-L), 2 bandwidth: log|T| - ref)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(kind == 0, np.log(np.abs(ol)),
                        np.where(kind == 1, np.angle(-ol), np.log(np.abs(cl)) - ref))


_KIND_CODES = {"gain": 0, "phase": 1, "bw": 2}


class _Crossings:
    """Bracketed root searches on log(w) for many brackets at once.

    A bracket is (loop index, kind, w_lo, w_hi, r_lo, r_hi, ref) with residuals of
    opposite sign at its ends; kinds are "gain" (log|L|), "phase" (arg(-L)) and "bw"
    (log|T| - ref). A new bracket is first sampled at ``PROBES`` interior points, which
    narrow it and give a root estimate (:func:`probe_seed`); from then on each round
    evaluates one point per bracket (the estimate, then bracketed secant / Illinois
    steps) until the residual is below ``_CONVERGED``, at most ``_REFINE_MAX_STEPS``.
    """

    def __init__(self):
        self.loop = np.zeros(0, int)
        self.kind = np.zeros(0, int)
        self.a = self.b = self.fa = self.fb = self.ref = self.x = self.prev = self.fprev = np.zeros(0)
        self.pending = np.zeros(0)
        self.steps = np.zeros(0, int)
        self.values = np.zeros((3, 0), complex)
        self.probing = np.zeros(0, int)
        self.active = np.zeros(0, int)
        self._round = None

    @property
    def busy(self) -> bool:
        """Whether any bracket still needs a round."""
        return bool(len(self.active) or len(self.probing))

    def add(self, brackets: list) -> None:
        """Start refining more brackets."""
        if not brackets:
            return
        n0 = len(self.loop)
        col = list(zip(*brackets))
        self.loop = np.concatenate([self.loop, np.array(col[0], int)])
        self.kind = np.concatenate([self.kind, np.array([_KIND_CODES[k] for k in col[1]], int)])
        self.a = np.concatenate([self.a, np.log(np.array(col[2], float))])
        self.b = np.concatenate([self.b, np.log(np.array(col[3], float))])
        self.fa = np.concatenate([self.fa, np.array(col[4], float)])
        self.fb = np.concatenate([self.fb, np.array(col[5], float)])
        self.ref = np.concatenate([self.ref, np.array(col[6], float)])
        self.x = np.concatenate([self.x, self.b[n0:]])
        self.prev = np.concatenate([self.prev, self.a[n0:]])
        self.fprev = np.concatenate([self.fprev, self.fa[n0:]])
        self.pending = np.concatenate([self.pending, np.full(len(brackets), np.nan)])
        self.steps = np.concatenate([self.steps, np.zeros(len(brackets), int)])
        self.values = np.concatenate([self.values, np.zeros((3, len(brackets)), complex)], axis=1)
        self.probing = np.concatenate([self.probing, np.arange(n0, len(self.loop))])

    def proposal(self) -> tuple[np.ndarray, np.ndarray]:
        """(points, log(rad/s); loop of each point): the probes of each new bracket, then
        one point per bracket being refined."""
        p, i = self.probing, self.active
        xp = probe_points(self.a[p], self.b[p]).ravel()
        xi = falsi_point(self.a[i], self.b[i], self.fa[i], self.fb[i], self.prev[i], self.fprev[i])
        xi = np.where(np.isnan(self.pending[i]), xi, self.pending[i])
        self._round = (p, i, xi)
        return np.concatenate([xp, xi]), np.concatenate([np.repeat(self.loop[p], PROBES), self.loop[i]])

    def update(self, ol: np.ndarray, cl: np.ndarray, all_ol: np.ndarray) -> None:
        """Take the loops' values at the proposed points (``ol``/``cl`` of each point's own
        loop; ``all_ol`` of all three loops, shape (3, n))."""
        p, i, xi = self._round
        n_probe = PROBES * len(p)
        fx = residuals(np.concatenate([np.repeat(self.kind[p], PROBES), self.kind[i]]), ol, cl,
                       np.concatenate([np.repeat(self.ref[p], PROBES), self.ref[i]]))
        if n_probe:
            (self.a[p], self.b[p], self.fa[p], self.fb[p],
             self.pending[p]) = probe_seed(self.a[p], self.b[p], self.fa[p], self.fb[p], fx[:n_probe].reshape(-1, PROBES))
        fi = fx[n_probe:]
        self.values[:, i] = all_ol[:, n_probe:]
        self.x[i] = xi
        self.pending[i] = np.nan
        (self.a[i], self.b[i], self.fa[i], self.fb[i],
         self.prev[i], self.fprev[i]) = falsi_update(self.a[i], self.b[i], self.fa[i], self.fb[i], xi, fi)
        self.steps[i] += 1
        keep = (np.abs(fi) > _CONVERGED) & (np.abs(self.b[i] - self.a[i]) > 1e-12) & (self.steps[i] < _REFINE_MAX_STEPS)
        self.active = np.concatenate([i[keep], p])
        self.probing = np.zeros(0, int)


class _Dips:
    """Local minima of a distance on the grid, narrowed in log(w): a probe round
    (:func:`dip_after_probe`), then steps (:func:`dip_step`) until each is found.

    Rows are triples (log w, log distance) with the lowest in the middle; ``owner`` is
    the loop, ``is_peak`` marks rows whose distance is 1/|L| (peaks of |L|) rather than
    |1 + L| (sensitivity peaks).
    """

    def __init__(self, omega: np.ndarray, ols: list):
        triples = [_dip_brackets(omega, np.abs(1.0 + ol)) for ol in ols]
        triples += [_dip_brackets(omega, 1.0 / np.abs(ol), only_above=1.0) for ol in ols]
        self.x = np.concatenate([t[0] for t in triples])
        self.y = np.concatenate([t[1] for t in triples])
        self.ends = (self.x[:, [0, 2]], self.y[:, [0, 2]])
        self.owner = np.concatenate([np.full(len(t[0]), k % 3) for k, t in enumerate(triples)])
        self.is_peak = np.concatenate([np.full(len(t[0]), k >= 3) for k, t in enumerate(triples)])
        self.probed = False
        self.rounds = 0
        self.active = np.zeros(0, int)
        self.pending = self.predicted = np.zeros(0)

    @property
    def done(self) -> bool:
        return self.probed and not len(self.active)

    def proposal(self) -> tuple[np.ndarray, np.ndarray]:
        """(points, log(rad/s); loop of each point): the probes first, then one point per
        dip still being narrowed."""
        if not self.probed:
            return dip_probe_points(self.x).ravel(), np.repeat(self.owner, 4)
        return self.pending[self.active], self.owner[self.active]

    def update(self, v: np.ndarray, lv: np.ndarray) -> None:
        """Take L (each point's own loop) at the proposed points."""
        rows = np.arange(len(self.x)) if not self.probed else self.active
        peak = np.repeat(self.is_peak[rows], 1 if self.probed else 4)
        with np.errstate(divide="ignore"):
            yv = np.where(peak, -np.log(np.abs(lv)), np.log(np.abs(1.0 + lv)))
        if not self.probed:
            self.x, self.y, self.pending, self.predicted = dip_after_probe(
                self.x, self.y, v.reshape(-1, 4), yv.reshape(-1, 4))
            self.probed, self.active = True, rows
            return
        self.rounds += 1
        (self.x[rows], self.y[rows], self.pending[rows], self.predicted[rows],
         done) = dip_step(self.x[rows], self.y[rows], v, yv, self.predicted[rows], self.rounds)
        self.active = rows[~done]

    def hidden_crossings(self) -> list:
        """Gain-crossover brackets on both sides of each |L| peak found above 0 dB: from the
        grid points beside the peak (below 0 dB) to its highest point."""
        out = []
        (x_ends, y_ends) = self.ends
        for r in np.nonzero(self.is_peak & (self.y[:, 1] < 0.0))[0]:
            top, r_top = math.exp(self.x[r, 1]), -self.y[r, 1]
            out.append((int(self.owner[r]), "gain", math.exp(x_ends[r, 0]), top, -y_ends[r, 0], r_top, 0.0))
            out.append((int(self.owner[r]), "gain", top, math.exp(x_ends[r, 1]), r_top, -y_ends[r, 1], 0.0))
        return out

    def sensitivity_rows(self, loop: int) -> tuple[np.ndarray, np.ndarray]:
        """(w, |1 + L|) at the narrowed sensitivity dips of ``loop``."""
        mine = (self.owner == loop) & ~self.is_peak
        return np.exp(self.x[mine, 1]), np.exp(self.y[mine, 1])


def _dip_brackets(omega: np.ndarray, distance: np.ndarray, count: int = 3, only_above: float = 0.0):
    """Triples (log w, log distance) round the ``count`` deepest local minima of ``distance``.

    With ``only_above``, only minima whose grid value exceeds it are taken (possibly none).
    """
    inner = search_kernels.deepest_minima(distance, count, only_above)
    if len(inner) == 0:
        return np.zeros((0, 3)), np.zeros((0, 3))
    idx = inner[:, None] + np.array([-1, 0, 1])[None, :]
    return np.log(omega[idx]), np.log(distance[idx])


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
    default_grid = omega is None
    if default_grid:
        omega = frequency_grid(axis, gains)
    ev = _Evaluator(axis, gains)
    # One evaluation: the grid plus a tail to 100x its top for the Nyquist count.
    tail = omega[-1] * _TAIL
    grid_algebra = (_grid_algebra(axis, gains.position.kp_per_s) if default_grid
                    else FrequencyAlgebra(np.concatenate([omega, tail])))
    grid_model = CascadeModel(axis, gains, grid_algebra)
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
        k = np.nonzero((np.signbit(im[:-1]) != np.signbit(im[1:])) & (ol.real[:-1] + ol.real[1:] < 0))[0]
        r0, r1 = np.angle(-ol[k]), np.angle(-ol[k + 1])
        # A true crossing of the negative real axis has arg(-L) near 0 on both sides;
        # a jump through +-pi is L passing the positive real axis instead.
        true = (np.signbit(r0) != np.signbit(r1)) & (np.maximum(np.abs(r0), np.abs(r1)) < 0.5 * np.pi)
        brackets += [(li, "phase", omega[j], omega[j + 1], a, b, 0.0)
                     for j, a, b in zip(k[true].tolist(), r0[true].tolist(), r1[true].tolist())]
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
    arc_s = omega[0] * _ARC
    crossings = _Crossings()
    crossings.add(brackets)
    dips = _Dips(omega, ols)
    arc = None
    while arc is None or crossings.busy or not dips.done:
        (xc, lc), (xv, lv) = crossings.proposal(), dips.proposal()
        s_all = np.concatenate([1j * np.exp(xc), 1j * np.exp(xv), arc_s if arc is None else []])
        ol_all, cl_all = ev.at_s(s_all)
        ol_all = np.stack(np.broadcast_arrays(*ol_all))
        nc, nv = len(xc), len(xv)
        if nc:
            pick = np.arange(nc)
            cl_all = np.stack(np.broadcast_arrays(*cl_all))
            crossings.update(ol_all[lc, pick], cl_all[lc, pick], ol_all[:, :nc])
        if nv:
            was_done = dips.done
            dips.update(xv, ol_all[lv, nc + np.arange(nv)])
            if dips.done and not was_done:
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
