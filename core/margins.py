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
from core.tape import LOOP_OUTPUTS, OUTPUTS, cascade_tape
from core.search_kernels import PROBES, dip_after_probe

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
def _grid_points(axis: Axis, position_kp_per_s: float) -> np.ndarray:
    """s = j w over the default grid and its Nyquist tail, 1/s (read-only, shared)."""
    omega = _grid(axis, position_kp_per_s)
    s = 1j * np.concatenate([omega, omega[-1] * _TAIL])
    s.setflags(write=False)
    return s


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


class _Evaluator:
    """Evaluates all three loops at arbitrary points of the jw axis (or any s), from the
    recorded cascade (:mod:`core.tape`): open loops in rows 0-2, closed loops in rows 3-5."""

    def __init__(self, axis: Axis, gains: GainSet):
        self.tape = cascade_tape(axis, gains)

    def at_omega(self, omega):
        values = self.at_s(1j * np.asarray(omega, dtype=float))
        return values[:3], values[3:]

    def at_s(self, s):
        return self.tape.evaluate(s, LOOP_OUTPUTS)


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
    """Crossing residuals over arrays by kind code (as :func:`core.search_kernels.residual`:
    0 gain: log|L|, 1 phase: arg(-L), 2 bandwidth: log|T| - ref)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(kind == 0, np.log(np.abs(ol)),
                        np.where(kind == 1, np.angle(-ol), np.log(np.abs(cl)) - ref))


class _Crossings:
    """Bracketed root searches on log(w) for many brackets at once.

    Brackets are arrays (loop index, kind, w_lo, w_hi, r_lo, r_hi, ref) with residuals
    of opposite sign at the ends; kinds are :data:`core.search_kernels.GAIN` (log|L|),
    ``PHASE`` (arg(-L)) and ``BANDWIDTH`` (log|T| - ref). A new bracket is first sampled
    at ``PROBES`` interior points, which narrow it and give a root estimate
    (:func:`core.search_kernels.probe_seed`); from then on each round evaluates one point per bracket (the
    estimate, then bracketed secant / Illinois steps) until the residual is below
    ``_CONVERGED``, at most ``_REFINE_MAX_STEPS``.
    """

    def __init__(self):
        self.loop = self.kind = self.steps = self.probing = self.active = np.zeros(0, np.int64)
        self.a = self.b = self.fa = self.fb = self.ref = self.x = self.prev = self.fprev = np.zeros(0)
        self.pending = np.zeros(0)
        self.values = np.zeros((3, 0), complex)
        self._points = None

    @property
    def busy(self) -> bool:
        """Whether any bracket still needs a round."""
        return bool(len(self.active) or len(self.probing))

    def add(self, loop, kind, w_lo, w_hi, r_lo, r_hi, ref) -> None:
        """Start refining more brackets (arrays over brackets, w in rad/s)."""
        n0, n = len(self.loop), len(loop)
        if not n:
            return
        a, b = np.log(w_lo), np.log(w_hi)
        self.loop = np.concatenate([self.loop, loop])
        self.kind = np.concatenate([self.kind, kind])
        self.a, self.b = np.concatenate([self.a, a]), np.concatenate([self.b, b])
        self.fa, self.fb = np.concatenate([self.fa, r_lo]), np.concatenate([self.fb, r_hi])
        self.ref = np.concatenate([self.ref, ref])
        self.x = np.concatenate([self.x, b])
        self.prev, self.fprev = np.concatenate([self.prev, a]), np.concatenate([self.fprev, r_lo])
        self.pending = np.concatenate([self.pending, np.full(n, np.nan)])
        self.steps = np.concatenate([self.steps, np.zeros(n, np.int64)])
        self.values = np.concatenate([self.values, np.zeros((3, n), complex)], axis=1)
        self.probing = np.concatenate([self.probing, np.arange(n0, n0 + n)])

    def proposal(self) -> tuple[np.ndarray, np.ndarray]:
        """(points, log(rad/s); loop of each point): the probes of each new bracket, then
        one point per bracket being refined."""
        x, owner = search_kernels.crossing_points(self.a, self.b, self.fa, self.fb, self.prev, self.fprev,
                                                  self.pending, self.loop, self.probing, self.active)
        self._points = x
        return x, owner

    def update(self, ol: np.ndarray, cl: np.ndarray, all_ol: np.ndarray) -> None:
        """Take the loops' values at the proposed points (``ol``/``cl`` of each point's own
        loop; ``all_ol`` of all three loops, shape (3, n))."""
        n_probe = PROBES * len(self.probing)
        self.values[:, self.active] = all_ol[:, n_probe:]
        self.active = search_kernels.crossing_update(
            self.a, self.b, self.fa, self.fb, self.prev, self.fprev, self.pending, self.steps, self.x,
            self.kind, self.ref, self.probing, self.active, self._points, ol, cl, _CONVERGED, _REFINE_MAX_STEPS)
        self.probing = np.zeros(0, np.int64)


class _Dips:
    """Local minima of a distance on the grid, narrowed in log(w): a probe round
    (:func:`dip_after_probe`), then steps (:func:`dip_step`) until each is found.

    Rows are triples (log w, log distance) with the lowest in the middle; ``owner`` is
    the loop, ``is_peak`` marks rows whose distance is 1/|L| (peaks of |L|) rather than
    |1 + L| (sensitivity peaks).
    """

    def __init__(self, omega: np.ndarray, ols: np.ndarray):
        self.x, self.y, self.owner, self.is_peak = search_kernels.grid_dips(omega, ols, 3)
        self.ends = (self.x[:, [0, 2]], self.y[:, [0, 2]])
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
        yv = search_kernels.dip_distances(lv, self.is_peak[rows], 1 if self.probed else 4)
        if not self.probed:
            self.x, self.y, self.pending, self.predicted = dip_after_probe(
                self.x, self.y, v.reshape(-1, 4), yv.reshape(-1, 4))
            self.probed, self.active = True, rows
            return
        self.rounds += 1
        (self.x[rows], self.y[rows], self.pending[rows], self.predicted[rows],
         done) = dip_step(self.x[rows], self.y[rows], v, yv, self.predicted[rows], self.rounds)
        self.active = rows[~done]

    def hidden_crossings(self) -> tuple:
        """Gain-crossover brackets (as :meth:`_Crossings.add` takes them) on both sides of
        each |L| peak found above 0 dB: from the grid points beside the peak (below 0 dB)
        to its highest point."""
        r = np.nonzero(self.is_peak & (self.y[:, 1] < 0.0))[0]
        if not len(r):
            return ()
        x_ends, y_ends = self.ends
        top, r_top = np.exp(self.x[r, 1]), -self.y[r, 1]
        pair = lambda left, right: np.column_stack([left, right]).ravel()
        return (np.repeat(self.owner[r], 2), np.full(2 * len(r), search_kernels.GAIN),
                pair(np.exp(x_ends[r, 0]), top), pair(top, np.exp(x_ends[r, 1])),
                pair(-y_ends[r, 0], r_top), pair(r_top, -y_ends[r, 1]), np.zeros(2 * len(r)))

    def sensitivity_rows(self, loop: int) -> tuple[np.ndarray, np.ndarray]:
        """(w, |1 + L|) at the narrowed sensitivity dips of ``loop``."""
        mine = (self.owner == loop) & ~self.is_peak
        return np.exp(self.x[mine, 1]), np.exp(self.y[mine, 1])


def _wrap_deg(angle_rad):
    """Angle in degrees wrapped to (-180, 180]."""
    d = np.degrees(angle_rad)
    return 180.0 - np.mod(180.0 - d, 360.0)


def nyquist_count(ev: _Evaluator, omega: np.ndarray, open_loops: np.ndarray, arc_open_loops: np.ndarray,
                  max_passes: int = 6) -> list[float]:
    """Net change of arg(1 + L) round the Nyquist contour divided by 2 pi, per loop.

    The contour runs from ``omega[0]`` upwards (and its mirror image), closes round
    the origin on a right-hand arc of radius ``omega[0]`` (``arc_open_loops`` holds L on
    that arc, from -j omega[0] to +j omega[0]) and is taken as closed at
    the top of the grid, which the caller extends until |L| is small. Wherever one
    step turns arg(1 + L) by more than 1 rad the interval is subdivided.
    """
    w = omega.copy()
    vals = 1.0 + open_loops
    for _ in range(max_passes):
        bad, upper = search_kernels.arg_steps(vals, 1.0)
        if not bad.any():
            break
        idx = np.nonzero(bad)[0]
        mids = np.sqrt(w[idx] * w[idx + 1])
        new, _ = ev.at_omega(mids)
        order = np.argsort(np.concatenate([w, mids]), kind="stable")
        w = np.concatenate([w, mids])[order]
        vals = np.concatenate([vals, 1.0 + new], axis=1)[:, order]
    else:
        _, upper = search_kernels.arg_steps(vals, 1.0)
    _, around = search_kernels.arg_steps(1.0 + arc_open_loops, 1.0)
    return list((2.0 * upper + around) / (2.0 * np.pi))


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
    s_grid = (_grid_points(axis, gains.position.kp_per_s) if default_grid
              else 1j * np.concatenate([omega, tail]))
    grid_values = ev.tape.evaluate(s_grid, OUTPUTS[:7])
    ols_all, compliance = grid_values[:3], grid_values[6]
    n = len(omega)
    ols, cls = grid_values[:3, :n], grid_values[3:6, :n]
    # Crossings are refined on the model itself; alongside, in the same evaluations, the
    # deepest dips of |1 + L| (sensitivity peaks) and the highest peaks of |L| below 1 (a
    # resonance that may poke through 0 dB between grid points) are narrowed, and the
    # first evaluation also carries the Nyquist arc round the origin.
    arc_s = omega[0] * _ARC
    crossings = _Crossings()
    crossings.add(*search_kernels.grid_brackets(omega, ols, cls))
    dips = _Dips(omega, ols)
    arc = None
    while arc is None or crossings.busy or not dips.done:
        (xc, lc), (xv, lv) = crossings.proposal(), dips.proposal()
        s_all = np.concatenate([1j * np.exp(xc), 1j * np.exp(xv), arc_s if arc is None else []])
        values = ev.at_s(s_all)
        ol_all, cl_all = values[:3], values[3:]
        nc, nv = len(xc), len(xv)
        if nc:
            pick = np.arange(nc)
            crossings.update(ol_all[lc, pick], cl_all[lc, pick], ol_all[:, :nc])
        if nv:
            was_done = dips.done
            dips.update(xv, ol_all[lv, nc + np.arange(nv)])
            if dips.done and not was_done and (hidden := dips.hidden_crossings()):
                crossings.add(*hidden)
        if arc is None:
            arc = ol_all[:, nc + nv:]
    refined, refined_ols = np.exp(crossings.x), crossings.values

    turns = nyquist_count(ev, np.concatenate([omega, tail]), ols_all, arc)

    # Each loop's crossings of each kind in order of frequency (a dozen in all: lists).
    by_w = sorted(range(len(refined)), key=refined.__getitem__)
    owner, kinds = crossings.loop.tolist(), crossings.kind.tolist()
    out = {}
    inner_unstable = 0
    for li, name in enumerate(LOOPS):
        g_sel, p_sel, b_sel = (np.array([i for i in by_w if owner[i] == li and kinds[i] == kind], np.int64)
                               for kind in (search_kernels.GAIN, search_kernels.PHASE, search_kernels.BANDWIDTH))
        gw, pw, bw = refined[g_sel], refined[p_sel], refined[b_sel]
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
            delay_margin = float(np.min(lag_room / gw)) if stable else 0.0
        else:
            pm, pm_w, delay_margin = math.inf, math.nan, math.inf
        if len(gms):
            j = int(np.argmin(np.abs(gms)))
            gm, gm_w = float(gms[j]), pw[j]
        else:
            gm, gm_w = math.inf, math.nan
        dip_w, dip_d = dips.sensitivity_rows(li)
        both = np.concatenate([g_sel, p_sel])
        candidates_w = np.concatenate([dip_w, refined[both]])
        candidates_d = np.concatenate([dip_d, np.abs(1.0 + at[both])])
        j = int(np.argmin(candidates_d))
        ms, ms_w = float(1.0 / candidates_d[j]), float(candidates_w[j])
        out[name] = LoopMargins(
            gain_crossovers_hz=tuple((gw / (2 * math.pi)).tolist()),
            phase_crossovers_hz=tuple((pw / (2 * math.pi)).tolist()),
            crossover_hz=float(gw[0] / (2 * math.pi)) if len(gw) else math.nan,
            phase_margin_deg=pm,
            phase_margin_hz=float(pm_w / (2 * math.pi)),
            gain_margin_db=gm,
            gain_margin_hz=float(gm_w / (2 * math.pi)),
            delay_margin_s=float(delay_margin),
            sensitivity_peak=ms,
            sensitivity_peak_hz=float(ms_w / (2 * math.pi)),
            bandwidth_hz=float(bw[0] / (2 * math.pi)) if len(bw) else math.nan,
            unstable_poles=unstable,
            stable=stable,
        )
    data = FrequencyData(omega, dict(zip(LOOPS, ols)), dict(zip(LOOPS, cls)),
                         compliance[:n])
    return out, data
