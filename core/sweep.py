"""Tolerance sweeps: every loop's margins over many variants of one axis at once.

Vectorisation
-------------
The transfer functions are not rewritten for variants. :class:`VariantAxis` looks
like an :class:`~core.axis.Axis` to :class:`~core.loops.CascadeModel`, but each of its
numeric fields is a ``(V, 1)`` array (one row per variant). ``FrequencyAlgebra.tf``
evaluates polynomials by Horner's rule, so ``(V, 1)`` coefficients against the
``(N,)`` frequencies broadcast to ``(V, N)`` responses: the same formulas, one numpy
operation per block for all variants. :class:`VariantAlgebra` only adds delays that may
themselves be ``(V, 1)`` arrays.

The margin logic of :func:`core.margins.loop_margins` is then repeated on the
``(V, N)`` arrays: sign changes of log|L|, of Im L (with Re L < 0) and of the
closed-loop -3 dB residual give brackets ``(variant, loop, kind)``; all brackets of all
variants are refined together by the same Illinois steps, evaluating the model at
one point per bracket (the variant arrays gathered to the bracket's row). The
sensitivity peak is the grid maximum refined by a parabola in log(w), as there.

Stability is decided per variant by the same Nyquist count as the scalar analysis
(argument principle on ``1 + L`` along the imaginary axis and a small arc round the
origin, ``Z = P - turns``, ``P`` from the inner loop); the frequency intervals where
any variant's ``arg(1 + L)`` turns by more than 1 rad in one step are subdivided for
all variants, which resolves every variant at least as finely as the scalar count.

Work is done in chunks of variants so that the ``(V, N)`` temporaries stay within
:data:`CHUNK_BYTES`; more than :data:`MAX_VARIANTS` variants are refused.
"""

from __future__ import annotations

import itertools
import math
import time
from dataclasses import dataclass
from types import SimpleNamespace
from typing import Callable

import numpy as np

from core.analysis import default_load_step_nm
from core.axis import Axis
from core.errors import InputError
from core.flags import Flag, Targets
from core.gains import GainSet
from core.loops import CascadeModel, FrequencyAlgebra
# The margin rules are core.margins' own: its constants and row-wise helpers are used as they are,
# so the vectorised sweep stays the scalar analysis applied to many variants.
from core.margins import _CONVERGED as M_CONVERGED
from core.margins import (_DIP_MAX_ROUNDS, _REFINE_MAX_STEPS, LOOPS, dip_probe_points, dip_step, grid_span_hz,
                          log_grid_hz, loop_margins, residuals)
from core.search_kernels import dip_after_probe, falsi_point, falsi_update
from core.responses import response_horizon_s
from core.tolerances import DESCRIPTIONS, PARAMETERS, Tolerances, factor_dict

MODES = ("corners", "grid", "montecarlo")
MAX_VARIANTS = 200_000
"""Largest sweep accepted: beyond it the per-variant results alone pass ~100 MB and the run minutes."""
CHUNK_BYTES = 40e6
"""Budget for the complex (variants x frequencies) temporaries of one chunk, bytes.

Small enough that a chunk's working set stays near the processor caches: measured on the
bench (10,000 variants), 40 MB chunks ran ~20 % faster than 160 MB ones and ~15 % faster than 20 MB."""
_LIVE_ARRAYS = 60          # complex (V, N) arrays alive at once inside one CascadeModel evaluation
_CONVERGED = M_CONVERGED      # |residual| at which core.margins stops refining a crossing
_BRACKET_BLOCK = 16384     # brackets refined per model evaluation (cache-sized blocks)
RESPONSE_SAMPLES = 1024    # FFT length of the swept step responses (half of the single analysis')


# --- variants ------------------------------------------------------------------------------

class VariantAlgebra(FrequencyAlgebra):
    """:class:`FrequencyAlgebra` whose delays may be arrays over variants (``(V, 1)``)."""

    def __init__(self, s):
        self.s = np.asarray(s, dtype=complex)

    def delay(self, delay_s):
        """exp(-s * delay_s), with ``delay_s`` a float or an array that broadcasts against s."""
        if np.ndim(delay_s) == 0:
            if delay_s <= 0:
                return 1.0
            out = self.s * (-delay_s)
        else:
            out = self.s * (-np.asarray(delay_s))
        return np.exp(out, out=out)

    # tf and feedback as FrequencyAlgebra's, but each (V, N) result is built in one buffer
    # (in-place Horner steps and feedback): the sweep is bound by memory traffic, and every
    # temporary it does not allocate is a pass over (V, N) complex values it does not make.
    # The arithmetic, and so every value, is the same.
    def tf(self, num, den):
        """The rational block num(s)/den(s), coefficients highest power first."""
        value = _horner_into(num, self.s)
        d = _horner_into(den, self.s)
        if np.shape(value) == np.shape(d) and isinstance(value, np.ndarray) and value.dtype == complex:
            return np.divide(value, d, out=value)
        return value / d

    @staticmethod
    def feedback(forward, back):
        """forward / (1 + forward * back)."""
        loop = forward * back
        if not isinstance(loop, np.ndarray) or loop.dtype != complex or loop.shape != np.shape(forward):
            return forward / (1.0 + loop)
        loop += 1.0
        return np.divide(forward, loop, out=loop)


def _horner_into(coefficients, s):
    """Horner's rule writing every step into the first full-shape product (see VariantAlgebra.tf)."""
    if len(coefficients) == 1:
        return coefficients[0] + 0.0 * s
    value = coefficients[0] * s
    shape = np.broadcast_shapes(*(np.shape(c) for c in coefficients), np.shape(s))
    for i, c in enumerate(coefficients[1:]):
        if value.shape == shape:
            value += c
            if i + 2 < len(coefficients):
                value *= s
        else:
            value = value + c
            if i + 2 < len(coefficients):
                value = value * s
    return value


class _VariantDrive:
    def __init__(self, drive, delays):
        self._drive, self._delays = drive, delays
        self.current_filter_hz = drive.current_filter_hz

    def loop_delays_s(self):
        return self._delays


class VariantAxis:
    """An axis whose parameters are ``(V, 1)`` arrays, one row per variant.

    Duck-typed to what :class:`core.loops.CascadeModel` and
    :func:`core.loops.mechanics_polynomials` read, with the same meaning as the
    :class:`~core.axis.Axis` properties (motor side, SI). Built from a nominal axis and
    a ``(V, len(PARAMETERS))`` factor array in :data:`core.tolerances.PARAMETERS` order.
    The scalar twin of a row is :func:`core.tolerances.varied_axis`.
    """

    def __init__(self, axis: Axis, factors: np.ndarray):
        f = np.asarray(factors, dtype=float)
        if f.ndim != 2 or f.shape[1] != len(PARAMETERS):
            raise InputError("factors", f.shape, f"an array of shape (variants, {len(PARAMETERS)})")
        self.nominal, self.factors = axis, f
        # A parameter every variant shares stays a float, so blocks it alone feeds stay (N,).
        col = {name: (float(f[0, i]) if np.all(f[:, i] == f[0, i]) else f[:, i:i + 1])
               for i, name in enumerate(PARAMETERS)} if len(f) else {name: f[:, i:i + 1]
                                                                     for i, name in enumerate(PARAMETERS)}
        m, ld = axis.motor, axis.load
        self.motor = SimpleNamespace(
            resistance_ohm=m.resistance_ohm * col["resistance"],
            inductance_h=m.inductance_h * col["inductance"],
            torque_constant_nm_per_a=m.torque_constant_nm_per_a * col["kt"],
            back_emf_v_s_per_rad=m.back_emf_v_s_per_rad * col["kt"],
            inertia_kgm2=m.inertia_kgm2,
            viscous_friction_nm_s_per_rad=m.viscous_friction_nm_s_per_rad * col["friction"])
        self.load = SimpleNamespace(compliant=ld.compliant, ratio=ld.ratio)
        self.load_inertia_kgm2 = axis.load_inertia_kgm2 * col["load_inertia"]
        self.load_viscous_nm_s_per_rad = axis.load_viscous_nm_s_per_rad * col["friction"]
        self.stiffness_nm_per_rad = axis.stiffness_nm_per_rad * col["stiffness"] if ld.compliant else math.inf
        self.damping_nm_s_per_rad = axis.damping_nm_s_per_rad
        self.total_inertia_kgm2 = m.inertia_kgm2 + self.load_inertia_kgm2
        delays = tuple(d * col["delays"] for d in axis.drive.loop_delays_s())
        self.drive = _VariantDrive(axis.drive, delays)

    def __len__(self) -> int:
        return self.factors.shape[0]

    def take(self, rows) -> "VariantAxis":
        """The variants at ``rows`` (an index array; repeats allowed)."""
        return VariantAxis(self.nominal, self.factors[np.asarray(rows)])

    @property
    def inertia_ratio(self) -> np.ndarray:
        """Reflected load over rotor inertia per variant, shape (V,)."""
        return self._rows(self.load_inertia_kgm2 / self.motor.inertia_kgm2)

    def _rows(self, x) -> np.ndarray:
        return np.broadcast_to(np.asarray(x, dtype=float), (len(self), 1))[:, 0].copy()

    @property
    def resonance_hz(self) -> np.ndarray:
        """Two-mass resonance per variant, Hz (NaN when rigid), shape (V,)."""
        if not self.load.compliant:
            return np.full(len(self), math.nan)
        jm, jl = self.motor.inertia_kgm2, self.load_inertia_kgm2
        return self._rows(np.sqrt(self.stiffness_nm_per_rad * (jm + jl) / (jm * jl)) / (2 * math.pi))

    @property
    def antiresonance_hz(self) -> np.ndarray:
        """Two-mass anti-resonance per variant, Hz (NaN when rigid), shape (V,)."""
        if not self.load.compliant:
            return np.full(len(self), math.nan)
        return self._rows(np.sqrt(self.stiffness_nm_per_rad / self.load_inertia_kgm2) / (2 * math.pi))


def variant_factors(tolerances: Tolerances, mode: str = "corners", count: int = 1000, seed: int = 0,
                    levels: int = 3) -> np.ndarray:
    """Factor rows (variants x :data:`PARAMETERS`) for a sweep; row 0 is always nominal.

    Parameters
    ----------
    tolerances : Tolerances
    mode : {"corners", "grid", "montecarlo"}
        ``corners``: every combination of low and high ends (2^k for k varied
        parameters); ``grid``: ``levels`` evenly spaced values per parameter
        (levels^k); ``montecarlo``: ``count`` draws, each parameter uniform over its
        range, from a generator seeded with ``seed`` (the same seed gives the same variants).
    count, seed, levels : int

    Returns
    -------
    ndarray, shape (1 + variants, len(PARAMETERS))

    Raises
    ------
    InputError
        Unknown mode, a count or level outside its range, or more than :data:`MAX_VARIANTS` variants.
    """
    if mode not in MODES:
        raise InputError("mode", mode, "one of " + ", ".join(MODES))
    varied = tolerances.varied
    index = [PARAMETERS.index(t.name) for t in varied]
    nominal = np.ones((1, len(PARAMETERS)))
    if mode == "montecarlo":
        if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 1:
            raise InputError("count", count, "a whole number of variants, at least 1")
        total = int(count)
    elif mode == "grid":
        if isinstance(levels, bool) or not isinstance(levels, (int, np.integer)) or not 2 <= levels <= 50:
            raise InputError("levels", levels, "a whole number from 2 to 50")
        total = int(levels) ** len(varied)
    else:
        total = 2 ** len(varied)
    if total > MAX_VARIANTS:
        raise InputError(mode if mode != "montecarlo" else "count", total,
                         f"at most {MAX_VARIANTS:,} variants (refused, not chunked: the per-variant results "
                         "alone would pass about 100 MB); use fewer levels, fewer tolerances or Monte Carlo")
    if not varied:
        return nominal
    low = np.array([t.low_factor for t in varied])
    high = np.array([t.high_factor for t in varied])
    if mode == "corners":
        combos = np.array(list(itertools.product((0.0, 1.0), repeat=len(varied))))
    elif mode == "grid":
        combos = np.array(list(itertools.product(np.linspace(0.0, 1.0, levels), repeat=len(varied))))
    else:
        combos = np.random.default_rng(seed).random((total, len(varied)))
    rows = np.ones((len(combos), len(PARAMETERS)))
    rows[:, index] = low + combos * (high - low)
    return np.vstack([nominal, rows])


def sweep_grid(axis: Axis, position_kp_per_s: float, factors: np.ndarray | None = None,
               points_per_decade: int = 20) -> np.ndarray:
    """Angular frequencies for a sweep, rad/s.

    The span of :func:`core.margins.frequency_grid` at ``points_per_decade``, with
    100 points per decade packed over the band every variant's anti-resonance and
    resonance can reach (0.85 x the lowest to 1.15 x the highest), since a resonance
    that moves with the tolerances cannot be packed round its nominal frequency alone.
    """
    f_lo, f_hi = grid_span_hz(axis, position_kp_per_s)
    f = log_grid_hz(f_lo, f_hi, points_per_decade)
    if axis.load.compliant:
        va = VariantAxis(axis, np.ones((1, len(PARAMETERS))) if factors is None else factors)
        lo = 0.85 * float(np.min(va.antiresonance_hz))
        hi = 1.15 * float(np.max(va.resonance_hz))
        lo, hi = max(lo, f_lo), min(hi, f_hi)
        if hi > lo:
            f = np.unique(np.concatenate([f, log_grid_hz(lo, hi, 100)]))
    return 2 * math.pi * f


# --- vectorised margins ----------------------------------------------------------------------

@dataclass(frozen=True)
class VariantLoopMargins:
    """One loop's margins for every variant: arrays of shape (V,), fields as :class:`core.margins.LoopMargins`.

    Attributes
    ----------
    crossover_hz, phase_margin_deg, phase_margin_hz, gain_margin_db, gain_margin_hz : ndarray
        Hz, deg, Hz, dB, Hz (inf margins where there is no crossing, NaN frequencies).
    delay_margin_s, sensitivity_peak, sensitivity_peak_hz, bandwidth_hz : ndarray
        s, (ratio), Hz, Hz.
    unstable_poles : ndarray of int
    stable : ndarray of bool
    """

    crossover_hz: np.ndarray
    phase_margin_deg: np.ndarray
    phase_margin_hz: np.ndarray
    gain_margin_db: np.ndarray
    gain_margin_hz: np.ndarray
    delay_margin_s: np.ndarray
    sensitivity_peak: np.ndarray
    sensitivity_peak_hz: np.ndarray
    bandwidth_hz: np.ndarray
    unstable_poles: np.ndarray
    stable: np.ndarray

    def row(self, i: int) -> dict:
        """Variant ``i``'s values as a dict of floats."""
        return {k: (bool(v[i]) if k == "stable" else int(v[i]) if k == "unstable_poles" else float(v[i]))
                for k, v in self.__dict__.items()}


_FIELDS = tuple(VariantLoopMargins.__dataclass_fields__)


def _evaluate(vaxis: VariantAxis, gains: GainSet, s) -> tuple[list, list]:
    model = CascadeModel(vaxis, gains, VariantAlgebra(s))
    return ([model.current_open, model.speed_open, model.position_open],
            [model.current_closed, model.speed_closed, model.position_closed])


def _evaluate_brackets(vaxis: VariantAxis, gains: GainSet, rows, loops, kinds, w) -> tuple:
    """Open (and, for bandwidth brackets, closed) loop at one frequency per bracket, (K,) each.

    Each bracket's model is built only as far as its own loop needs: a current-loop
    bracket never builds the speed and position blocks, and only bandwidth brackets
    (kind 2) form a closed loop -- the same formulas, on fewer blocks. Brackets go in
    blocks of :data:`_BRACKET_BLOCK` so that the temporaries stay in cache.
    """
    ol = np.zeros(len(rows), complex)
    cl = np.ones(len(rows), complex)       # |1| for brackets that need no closed loop
    for li, name in enumerate(LOOPS):
        for closed in (False, True):
            group = np.nonzero((loops == li) & ((kinds == 2) == closed))[0]
            for start in range(0, len(group), _BRACKET_BLOCK):
                sel = group[start:start + _BRACKET_BLOCK]
                model = CascadeModel(vaxis.take(rows[sel]), gains, VariantAlgebra((1j * w[sel])[:, None]))
                ol[sel] = _full(getattr(model, f"{name}_open"), (len(sel), 1))[:, 0]
                if closed:
                    cl[sel] = _full(getattr(model, f"{name}_closed"), (len(sel), 1))[:, 0]
    return ol, cl


def _full(x, shape):
    return np.broadcast_to(np.asarray(x, dtype=complex), shape)


def _group_min(groups: np.ndarray, values: np.ndarray, size: int):
    """Per group: the smallest value and the position (in ``values``) where it was found (-1 for none)."""
    best = np.full(size, np.inf)
    where = np.full(size, -1)
    if len(values):
        order = np.lexsort((values, groups))
        g = groups[order]
        first = np.r_[True, g[1:] != g[:-1]]
        idx = order[first]
        best[groups[idx]] = values[idx]
        where[groups[idx]] = idx
    return best, where


def _dip_brackets(omega: np.ndarray, d: np.ndarray, count: int = 3):
    """Per variant, triples (log w, log d) round the ``count`` deepest local minima of d (V, N).

    Rows with fewer minima repeat their deepest one, which changes no minimum; a row
    with none uses its grid minimum (as :func:`core.search_kernels.grid_dips`).
    """
    v, n = d.shape
    inner = (d[:, 1:-1] <= d[:, :-2]) & (d[:, 1:-1] <= d[:, 2:])
    key = np.where(inner, d[:, 1:-1], np.inf)
    # The `count` smallest keys, in ascending order: a partition then a sort of `count`
    # columns instead of a full sort of every row.
    part = np.argpartition(key, count - 1, axis=1)[:, :count]
    order = np.take_along_axis(part, np.argsort(np.take_along_axis(key, part, axis=1), axis=1, kind="stable"),
                               axis=1) + 1                                        # (V, count)
    valid = np.isfinite(np.take_along_axis(key, order - 1, axis=1))
    fallback = np.clip(np.argmin(d, axis=1), 1, n - 2)
    deepest = np.where(valid[:, 0], order[:, 0], fallback)
    idx = np.where(valid, order, deepest[:, None])
    idx3 = idx[:, :, None] + np.array([-1, 0, 1])
    return np.log(omega[idx3]), np.log(np.take_along_axis(d, idx3.reshape(v, -1), axis=1).reshape(idx3.shape))


@dataclass
class _Stage:
    """What the grid stage of one chunk leaves for the global refinement (variant rows are global)."""

    bv: np.ndarray
    bl: np.ndarray
    bk: np.ndarray
    a: np.ndarray
    b: np.ndarray
    fa: np.ndarray
    fb: np.ndarray
    ref: np.ndarray
    dips: list
    turns: list


_THETA = np.linspace(-0.5 * np.pi, 0.5 * np.pi, 33)


def _grid_stage(vaxis: VariantAxis, gains: GainSet, omega: np.ndarray, tail: np.ndarray, offset: int):
    """One chunk on the grid: brackets of every crossing, dips of |1 + L|, Nyquist turns.

    Returns the stage and the open loops on the grid (V, N) per loop.
    """
    v, n = len(vaxis), len(omega)
    w_all = np.concatenate([omega, tail])
    arc_s = omega[0] * np.exp(1j * _THETA)
    # One evaluation: grid, tail and the Nyquist arc round the origin.
    ols_all, cls_all = _evaluate(vaxis, gains, np.concatenate([1j * w_all, arc_s]))
    m = len(w_all)
    ols_all = [_full(o, (v, m + len(arc_s))) for o in ols_all]
    arc = [o[:, m:] for o in ols_all]
    ols_all = [o[:, :m] for o in ols_all]
    ols = [o[:, :n] for o in ols_all]
    cls = [_full(c, (v, m + len(arc_s)))[:, :n] for c in cls_all]

    bv, bl, bk, wa, wb, ra, rb, rf = ([] for _ in range(8))

    def add(rows, k, loop, kind, r0, r1, ref):
        bv.append(rows); bl.append(np.full(len(rows), loop)); bk.append(np.full(len(rows), kind))
        wa.append(omega[k]); wb.append(omega[k + 1]); ra.append(r0); rb.append(r1); rf.append(ref)

    dips = []
    returns = [1.0 + o for o in ols_all]      # 1 + L on grid and tail, shared by the dips and the Nyquist count
    for li in range(3):
        ol, cl = ols[li], cls[li]
        r_gain = np.log(np.abs(ol))
        rows, k = np.nonzero(np.signbit(r_gain[:, :-1]) != np.signbit(r_gain[:, 1:]))
        add(rows, k, li, 0, r_gain[rows, k], r_gain[rows, k + 1], np.zeros(len(rows)))
        # arg L = -180 deg (mod 360) where L crosses the negative real axis.
        im = ol.imag
        cand = (np.signbit(im[:, :-1]) != np.signbit(im[:, 1:])) & (ol.real[:, :-1] + ol.real[:, 1:] < 0)
        rows, k = np.nonzero(cand)
        r0, r1 = np.angle(-ol[rows, k]), np.angle(-ol[rows, k + 1])
        keep = np.signbit(r0) != np.signbit(r1)
        add(rows[keep], k[keep], li, 1, r0[keep], r1[keep], np.zeros(int(keep.sum())))
        ref = np.log(np.abs(cl[:, 0]) / math.sqrt(2.0))
        r_bw = np.log(np.abs(cl)) - ref[:, None]
        below = r_bw < 0
        first = np.argmax(below, axis=1)
        rows = np.nonzero(below.any(axis=1) & (first > 0))[0]
        k = first[rows] - 1
        add(rows, k, li, 2, r_bw[rows, k], r_bw[rows, k + 1], ref[rows])
        dips.append(_dip_brackets(omega, np.abs(returns[li][:, :n])))
    turns = _nyquist_turns(vaxis, gains, w_all, ols_all, arc, returns)
    cat = np.concatenate
    stage = _Stage(cat(bv) + offset, cat(bl), cat(bk), np.log(cat(wa)), np.log(cat(wb)), cat(ra), cat(rb),
                   cat(rf), dips, turns)
    return stage, ols


def _finish(vaxis: VariantAxis, gains: GainSet, stages: list) -> dict:
    """Refine every bracket and dip of every chunk together, then assemble the margins."""
    v = len(vaxis)
    cat = np.concatenate
    bv, bl, bk = cat([st.bv for st in stages]), cat([st.bl for st in stages]), cat([st.bk for st in stages])
    a, b = cat([st.a for st in stages]), cat([st.b for st in stages])
    fa, fb, ref = cat([st.fa for st in stages]), cat([st.fb for st in stages]), cat([st.ref for st in stages])
    turns = [cat([st.turns[li] for st in stages]) for li in range(3)]
    dips = [(cat([st.dips[li][0] for st in stages]), cat([st.dips[li][1] for st in stages])) for li in range(3)]

    # Every bracket of every variant at once, refined to core.margins' tolerance by
    # bracketed secant / Illinois steps on log(w) from the grid bracket. (core.margins
    # probes each bracket first, which saves rounds where a round's cost is overhead;
    # over many variants a round's cost is the arithmetic, and the probes would add to it.)
    x, at = b.copy(), np.zeros(len(bv), complex)
    prev, fprev = a.copy(), fa.copy()
    active = np.arange(len(bv))
    for step in range(_REFINE_MAX_STEPS):
        if len(active) == 0:
            break
        aa, ba, faa, fba = a[active], b[active], fa[active], fb[active]
        xa = falsi_point(aa, ba, faa, fba, prev[active], fprev[active])
        la, ka = bl[active], bk[active]
        ol_b, cl_b = _evaluate_brackets(vaxis, gains, bv[active], la, ka, np.exp(xa))
        fxa = residuals(ka, ol_b, cl_b, ref[active])
        x[active], at[active] = xa, ol_b
        a[active], b[active], fa[active], fb[active], prev[active], fprev[active] = falsi_update(
            aa, ba, faa, fba, xa, fxa)
        active = active[(np.abs(fxa) > _CONVERGED) & (np.abs(b[active] - a[active]) > 1e-12)]
    w_ref = np.exp(x)

    # Sensitivity peaks (as core.margins): the three deepest local minima of |1 + L| per
    # variant, probed at four points each, then narrowed until each minimum is found.
    def distances(li, variants, points):
        """log |1 + L| of loop ``li`` at (len(variants), k) points, each variant's model
        built only as far as that loop needs."""
        model = CascadeModel(vaxis.take(variants), gains, VariantAlgebra(1j * np.exp(points)))
        return np.log(np.abs(1.0 + _full(getattr(model, f"{LOOPS[li]}_open"), points.shape)))

    everyone = np.arange(v)
    state = []                                                     # (x, y, next point, prediction) per loop
    for li, (dx, dy) in enumerate(dips):
        probes = dip_probe_points(dx.reshape(-1, 3))
        yp = distances(li, everyone, probes.reshape(v, -1)).reshape(-1, 4)
        state.append(dip_after_probe(dx.reshape(-1, 3), dy.reshape(-1, 3), probes, yp))
    open_rows = [np.ones(3 * v, bool) for _ in range(3)]
    for rounds in range(1, _DIP_MAX_ROUNDS + 1):
        for li in range(3):
            rows = np.nonzero(open_rows[li])[0]
            if not len(rows):
                continue
            x_, y_, nxt, pred = state[li]                           # updated in place, row by row
            variants = np.unique(rows // 3)
            dist = np.full((v, 3), np.nan)
            dist[variants] = distances(li, variants, nxt.reshape(v, 3)[variants])
            x_[rows], y_[rows], nxt[rows], pred[rows], done = dip_step(
                x_[rows], y_[rows], nxt[rows], dist.reshape(-1)[rows], pred[rows], rounds)
            open_rows[li][rows[done]] = False
    dips = [(st[0].reshape(v, 3, 3), st[1].reshape(v, 3, 3)) for st in state]

    out = {}
    rows_v = np.arange(v)
    inner = np.zeros(v, dtype=int)
    nan_v = np.full(v, math.nan)
    for li, name in enumerate(LOOPS):
        unstable = np.maximum(np.rint(inner - turns[li]).astype(int), 0)
        inner = unstable
        stable = unstable == 0
        g_sel = np.nonzero((bl == li) & (bk == 0))[0]
        p_sel = np.nonzero((bl == li) & (bk == 1))[0]
        w_sel = np.nonzero((bl == li) & (bk == 2))[0]
        gv = bv[g_sel]
        crossover_w, _ = _group_min(gv, w_ref[g_sel], v)
        # Distance of arg L from -180 deg at each crossover (see core.margins.loop_margins).
        signed = 180.0 - np.mod(180.0 - np.degrees(np.angle(at[g_sel]) + np.pi), 360.0)
        pms = np.where(stable[gv], np.abs(signed), signed)
        pm, pm_at = _group_min(gv, pms, v)
        lag_room = np.radians(np.mod(np.degrees(np.angle(at[g_sel])) + 180.0, 360.0))
        dm, _ = _group_min(gv, lag_room / w_ref[g_sel], v)
        has_g = pm_at >= 0
        pm_w = np.where(has_g, w_ref[g_sel][np.maximum(pm_at, 0)] if len(g_sel) else nan_v, math.nan)
        delay_margin = np.where(has_g, np.where(stable, dm, 0.0), math.inf)
        gms = -20.0 * np.log10(np.abs(at[p_sel]))
        pv = bv[p_sel]
        _, gm_at = _group_min(pv, np.abs(gms), v)
        has_p = gm_at >= 0
        gm = np.where(has_p, gms[np.maximum(gm_at, 0)] if len(p_sel) else nan_v, math.inf)
        gm_w = np.where(has_p, w_ref[p_sel][np.maximum(gm_at, 0)] if len(p_sel) else nan_v, math.nan)
        bw = np.full(v, math.nan)
        bw[bv[w_sel]] = w_ref[w_sel]
        # Ms: the narrowed dips and |1 + L| at every refined crossing of this loop.
        dx, dy = dips[li]
        gp = np.concatenate([g_sel, p_sel])
        near, near_at = _group_min(bv[gp], np.abs(1.0 + at[gp]), v)
        near_w = np.where(near_at >= 0, w_ref[gp][np.maximum(near_at, 0)] if len(gp) else nan_v, math.nan)
        cand_d = np.concatenate([np.exp(dy[:, :, 1]), near[:, None]], axis=1)
        cand_w = np.concatenate([np.exp(dx[:, :, 1]), near_w[:, None]], axis=1)
        j = np.argmin(cand_d, axis=1)
        out[name] = VariantLoopMargins(
            crossover_hz=np.where(np.isfinite(crossover_w), crossover_w, math.nan) / (2 * math.pi),
            phase_margin_deg=pm, phase_margin_hz=pm_w / (2 * math.pi),
            gain_margin_db=gm, gain_margin_hz=gm_w / (2 * math.pi),
            delay_margin_s=delay_margin,
            sensitivity_peak=1.0 / cand_d[rows_v, j], sensitivity_peak_hz=cand_w[rows_v, j] / (2 * math.pi),
            bandwidth_hz=bw / (2 * math.pi), unstable_poles=unstable, stable=stable)
    return out


def _turn_steps(val: np.ndarray) -> np.ndarray:
    """Angle turned by each row of ``val`` between neighbouring columns, rad.

    arg(b/a) = arg(b * conj(a)): |a|^2 > 0 scales without turning, and a product costs
    less than a complex division.
    """
    step = np.conj(val[:, :-1])
    step *= val[:, 1:]
    return np.angle(step)


def _nyquist_turns(vaxis, gains, w, open_loops, arc, returns=None, max_passes: int = 6) -> list[np.ndarray]:
    """Net turns of 1 + L round the Nyquist contour, per loop and variant (see core.margins.nyquist_count).

    ``returns`` may carry 1 + L already formed from ``open_loops``.
    """
    vals = returns if returns is not None else [1.0 + o for o in open_loops]
    steps = [_turn_steps(val) for val in vals]
    for _ in range(max_passes):
        bad = np.zeros(len(w) - 1, dtype=bool)
        for st in steps:
            bad |= (np.abs(st) > 1.0).any(axis=0)
        if not bad.any():
            break
        idx = np.nonzero(bad)[0]
        mids = np.sqrt(w[idx] * w[idx + 1])
        new, _ = _evaluate(vaxis, gains, 1j * mids)
        order = np.argsort(np.concatenate([w, mids]), kind="stable")
        w = np.concatenate([w, mids])[order]
        vals = [np.concatenate([val, 1.0 + _full(nw, (val.shape[0], len(mids)))], axis=1)[:, order]
                for val, nw in zip(vals, new)]
        steps = [_turn_steps(val) for val in vals]
    turns = []
    for st, a in zip(steps, arc):
        around = np.angle((1.0 + a[:, 1:]) / (1.0 + a[:, :-1])).sum(axis=1)
        turns.append((2.0 * st.sum(axis=1) + around) / (2.0 * np.pi))
    return turns


def _chunk_size(n_points: int) -> int:
    return max(16, int(CHUNK_BYTES / (16.0 * _LIVE_ARRAYS * n_points)))


def _tail(omega: np.ndarray) -> np.ndarray:
    # Two decades above the grid for the Nyquist count; the subdivision adds points where needed.
    return omega[-1] * np.logspace(0, 2, 21)[1:]


def variant_margins(axis: Axis, gains: GainSet, factors: np.ndarray, omega: np.ndarray | None = None,
                    progress: Callable[[float], None] | None = None) -> dict[str, VariantLoopMargins]:
    """Margins of the three loops for every row of ``factors``, vectorised.

    Parameters
    ----------
    axis, gains : Axis, GainSet
        The nominal axis and the gains (the same gains for every variant).
    factors : ndarray, shape (V, len(PARAMETERS))
        Multiples of nominal, columns in :data:`core.tolerances.PARAMETERS` order.
    omega : ndarray, optional
        Grid, rad/s; :func:`sweep_grid` by default. With the grid of
        :func:`core.margins.frequency_grid` the results equal :func:`core.margins.loop_margins`
        of each variant (same brackets, same refinement).
    progress : callable, optional
        Called with the fraction done after each chunk.

    Returns
    -------
    dict of str -> VariantLoopMargins
    """
    factors = np.atleast_2d(np.asarray(factors, dtype=float))
    if omega is None:
        omega = sweep_grid(axis, gains.position.kp_per_s, factors)
    omega = np.asarray(omega, dtype=float)
    tail = _tail(omega)
    size = _chunk_size(len(omega) + len(tail))
    stages = []
    for start in range(0, len(factors), size):
        stages.append(_grid_stage(VariantAxis(axis, factors[start:start + size]), gains, omega, tail, start)[0])
        if progress is not None:
            progress(min(1.0, (start + size) / len(factors)))
    return _finish(VariantAxis(axis, factors), gains, stages)


# --- the full sweep ----------------------------------------------------------------------------

@dataclass(frozen=True)
class SweepSettings:
    """Choices of a sweep.

    Attributes
    ----------
    mode : {"corners", "grid", "montecarlo"}
    count : int
        Monte Carlo draws.
    seed : int
        Monte Carlo seed (fixed by default so that runs repeat).
    levels : int
        Values per parameter in grid mode.
    inertia_ratio_max : float
        Load-to-rotor inertia ratio above which the axis is flagged (common practice:
        servo axes are often sized for ratios up to about 10:1).
    points_per_decade : int
        Density of the sweep grid (the resonance band gets 100 per decade). Crossings are
        refined on the model, so the grid only has to bracket them: at 20 per decade the
        margins of 300 wide-tolerance variants of each demo axis equal those on the scalar
        analysis grid to 1e-7 (PM, GM, bandwidth) and 1e-4 (Ms), with the same stability
        (tests/core/test_sweep.py); 30 per decade cost ~25 % more time for no change there.
    """

    mode: str = "corners"
    count: int = 1000
    seed: int = 0
    levels: int = 3
    inertia_ratio_max: float = 10.0
    points_per_decade: int = 20

    def __post_init__(self):
        if self.mode not in MODES:
            raise InputError("mode", self.mode, "one of " + ", ".join(MODES))
        if not (isinstance(self.inertia_ratio_max, (int, float)) and self.inertia_ratio_max > 0):
            raise InputError("inertia_ratio_max", self.inertia_ratio_max, "a positive ratio (e.g. 10)")
        if not isinstance(self.points_per_decade, int) or not 10 <= self.points_per_decade <= 400:
            raise InputError("points_per_decade", self.points_per_decade, "a whole number from 10 to 400")
        if isinstance(self.seed, bool) or not isinstance(self.seed, (int, np.integer)) or self.seed < 0:
            raise InputError("seed", self.seed, "a whole number >= 0")


@dataclass(frozen=True)
class WorstCase:
    """The worst value of one metric over the variants, and where it occurred.

    Attributes
    ----------
    loop : str
        "current", "speed", "position" or "load_step".
    metric : str
        e.g. "phase_margin_deg", "sensitivity_peak", "speed_dip_rad_s".
    value : float
        In the unit named by ``metric``.
    nominal : float
        The nominal variant's value.
    variant : int
        Row of :attr:`SweepResult.factors`.
    factors : dict of str -> float
        The parameter combination (multiples of nominal).
    """

    loop: str
    metric: str
    value: float
    nominal: float
    variant: int
    factors: dict


@dataclass(frozen=True)
class Envelope:
    """Min/max band of a response over the variants (stable variants only).

    Attributes
    ----------
    x : ndarray
        Frequency, Hz (Bode) or time, s (steps).
    low, high : ndarray
        Lower and upper bound at each x (dB, deg, or output per unit step).
    nominal : ndarray
        The nominal variant's curve.
    """

    x: np.ndarray
    low: np.ndarray
    high: np.ndarray
    nominal: np.ndarray


@dataclass(frozen=True)
class SensitivityRow:
    """What one tolerance alone costs (others at nominal): one-at-a-time sensitivity.

    Attributes
    ----------
    parameter : str
    low_factor, high_factor : float
    phase_margin_loss_deg, gain_margin_loss_db, sensitivity_peak_rise : dict of str -> float
        Per loop, nominal minus the worse of the two ends (deg, dB; Ms rise as a ratio).
    worst_loop : str
        The loop whose phase margin this tolerance costs most.
    """

    parameter: str
    low_factor: float
    high_factor: float
    phase_margin_loss_deg: dict
    gain_margin_loss_db: dict
    sensitivity_peak_rise: dict
    worst_loop: str


@dataclass(frozen=True)
class SweepResult:
    """Everything a sweep found.

    Attributes
    ----------
    settings : SweepSettings
    parameters : tuple of str
        The varied parameters.
    factors : ndarray, shape (V, len(PARAMETERS))
        Row 0 nominal.
    margins : dict of str -> VariantLoopMargins
    overshoot_pct : dict of str -> ndarray
        Step overshoot per loop and variant, % (NaN for unstable variants).
    speed_dip_rad_s : ndarray
        Largest motor-speed deviation after the load step, per variant, rad/s (signed).
    load_torque_nm : float
    worst : tuple of WorstCase
    bode_magnitude, bode_phase, steps : dict of str -> Envelope
        Open-loop |L| in dB and arg L in deg per loop; unit-step responses per loop.
    load_step : Envelope
        Motor-speed deviation after the load step, rad/s.
    ranking : tuple of SensitivityRow
        Costliest tolerance first (by phase-margin loss, then gain-margin loss).
    flags : tuple of Flag
    elapsed_s : float
    """

    settings: SweepSettings
    parameters: tuple
    factors: np.ndarray
    margins: dict
    overshoot_pct: dict
    speed_dip_rad_s: np.ndarray
    load_torque_nm: float
    worst: tuple
    bode_magnitude: dict
    bode_phase: dict
    steps: dict
    load_step: Envelope
    ranking: tuple
    flags: tuple
    elapsed_s: float

    @property
    def variant_count(self) -> int:
        """Number of variants including the nominal one."""
        return self.factors.shape[0]

    def worst_of(self, loop: str, metric: str) -> WorstCase:
        """The :class:`WorstCase` of ``metric`` in ``loop``."""
        for w in self.worst:
            if w.loop == loop and w.metric == metric:
                return w
        raise InputError("metric", f"{loop}.{metric}", "a loop and metric the sweep reports")


# (metric, True when larger is worse)
_WORST_METRICS = (("phase_margin_deg", False), ("gain_margin_db", False), ("sensitivity_peak", True),
                  ("bandwidth_hz", False), ("delay_margin_s", False))


def _step_chunk(vaxis, gains, horizons, load_torque, samples):
    """Step responses of each closed loop and the load-step speed, (V, samples/2) each."""
    from core.responses import _Contour

    steps = {}
    v = len(vaxis)
    for key in (*LOOPS, "load"):
        contour = _Contour(horizons[key], samples, 0.0)
        model = CascadeModel(vaxis, gains, VariantAlgebra(contour.s))
        h = model.position_disturbance_speed * load_torque if key == "load" else getattr(model, f"{key}_closed")
        steps[key] = (contour.time_s, contour.invert(_full(h, (v, len(contour.s))), 1))
    return steps


def sweep(axis: Axis, gains: GainSet, tolerances: Tolerances, settings: SweepSettings | None = None,
          targets: Targets | None = None, progress: Callable[[float, str], None] | None = None) -> SweepResult:
    """Sweep ``gains`` on ``axis`` over ``tolerances``: worst cases, envelopes, ranking, flags.

    Parameters
    ----------
    axis, gains : Axis, GainSet
    tolerances : Tolerances
    settings : SweepSettings, optional
    targets : Targets, optional
        For the flags (worst margins against the targets); defaults when omitted.
    progress : callable, optional
        ``progress(fraction, message)`` after each chunk of variants.

    Returns
    -------
    SweepResult
    """
    t0 = time.perf_counter()
    settings = settings or SweepSettings()
    targets = targets or Targets()
    factors = variant_factors(tolerances, settings.mode, settings.count, settings.seed, settings.levels)
    omega = sweep_grid(axis, gains.position.kp_per_s, factors, settings.points_per_decade)
    nominal, _ = loop_margins(axis, gains)
    fallback = 10.0 * axis.mechanical_time_constant_s
    integral = {"current": gains.current.pi.integral_time_s, "speed": gains.speed.pi.integral_time_s,
                "position": gains.position.pi.integral_time_s}
    horizons = {loop: response_horizon_s(nominal[loop].crossover_hz, integral[loop], fallback) for loop in LOOPS}
    horizons["load"] = response_horizon_s(nominal["position"].crossover_hz, integral["speed"], fallback)
    load_torque = targets.load_step_nm if math.isfinite(targets.load_step_nm) else default_load_step_nm(axis)

    tail = _tail(omega)
    size = max(8, _chunk_size(max(len(omega) + len(tail), RESPONSE_SAMPLES // 2 + 1)))
    stages, overshoot, dips = [], {loop: [] for loop in LOOPS}, []
    mag = {loop: [np.full(len(omega), np.inf), np.full(len(omega), -np.inf)] for loop in LOOPS}
    phs = {loop: [np.full(len(omega), np.inf), np.full(len(omega), -np.inf)] for loop in LOOPS}
    stp: dict = {}
    nominal_curves: dict = {}
    total = len(factors)
    for start in range(0, total, size):
        vaxis = VariantAxis(axis, factors[start:start + size])
        stage, ols = _grid_stage(vaxis, gains, omega, tail, start)
        stages.append(stage)
        stable = {}
        inner = np.zeros(len(vaxis), dtype=int)
        for li, loop in enumerate(LOOPS):
            inner = np.maximum(np.rint(inner - stage.turns[li]).astype(int), 0)
            stable[loop] = inner == 0
        for li, loop in enumerate(LOOPS):
            ok = stable[loop]
            db = 20 * np.log10(np.abs(ols[li]))
            ph = np.degrees(np.unwrap(np.angle(ols[li]), axis=1))
            if start == 0:
                nominal_curves[("mag", loop)], nominal_curves[("phase", loop)] = db[0].copy(), ph[0].copy()
            if ok.any():
                mag[loop] = [np.minimum(mag[loop][0], db[ok].min(0)), np.maximum(mag[loop][1], db[ok].max(0))]
                phs[loop] = [np.minimum(phs[loop][0], ph[ok].min(0)), np.maximum(phs[loop][1], ph[ok].max(0))]
        all_stable = stable["position"]      # the position loop's count includes the inner loops
        traces = _step_chunk(vaxis, gains, horizons, load_torque, RESPONSE_SAMPLES)
        for key, (t, y) in traces.items():
            ok = all_stable if key == "load" else stable[key]
            if start == 0:
                nominal_curves[("step", key)] = (t, y[0].copy())
                stp[key] = [np.full(len(t), np.inf), np.full(len(t), -np.inf)]
            if ok.any():
                stp[key] = [np.minimum(stp[key][0], y[ok].min(0)), np.maximum(stp[key][1], y[ok].max(0))]
            if key == "load":
                j = np.argmax(np.abs(y), axis=1)
                dip = y[np.arange(len(y)), j]
                dips.append(np.where(ok, dip, math.nan))
            else:
                tail_n = max(y.shape[1] // 50, 1)
                final = y[:, -tail_n:].mean(axis=1)
                peak = np.where(final > 0, y.max(axis=1), y.min(axis=1))
                with np.errstate(divide="ignore", invalid="ignore"):
                    over = np.maximum(0.0, (peak - final) / final * 100.0)
                overshoot[key].append(np.where(ok & (final != 0), over, math.nan))
        if progress is not None:
            progress(min(1.0, (start + size) / total), f"{min(start + size, total)} of {total} variants")
    margins = _finish(VariantAxis(axis, factors), gains, stages)
    overshoot = {loop: np.concatenate(v) for loop, v in overshoot.items()}
    dips = np.concatenate(dips)

    worst = []
    for loop in LOOPS:
        for metric, larger_worse in _WORST_METRICS:
            worst.append(_worst(loop, metric, getattr(margins[loop], metric), larger_worse, factors))
        worst.append(_worst(loop, "overshoot_pct", overshoot[loop], True, factors))
    worst.append(_worst("load_step", "speed_dip_rad_s", np.abs(dips), True, factors, signed=dips))

    hz = omega / (2 * math.pi)
    bode_m = {loop: Envelope(hz, *mag[loop], nominal_curves[("mag", loop)]) for loop in LOOPS}
    bode_p = {loop: Envelope(hz, *phs[loop], nominal_curves[("phase", loop)]) for loop in LOOPS}
    steps = {loop: Envelope(nominal_curves[("step", loop)][0], *stp[loop], nominal_curves[("step", loop)][1])
             for loop in LOOPS}
    load_env = Envelope(nominal_curves[("step", "load")][0], *stp["load"], nominal_curves[("step", "load")][1])
    ranking = sensitivity_ranking(axis, gains, tolerances, omega)
    flags = _sweep_flags(axis, factors, margins, targets, settings)
    return SweepResult(settings, tuple(t.name for t in tolerances.varied), factors, margins, overshoot, dips,
                       load_torque, tuple(worst), bode_m, bode_p, steps, load_env, ranking, tuple(flags),
                       time.perf_counter() - t0)


def _worst(loop, metric, values, larger_worse, factors, signed=None) -> WorstCase:
    vals = np.asarray(values, dtype=float)
    probe = np.where(np.isnan(vals), -np.inf if larger_worse else np.inf, vals)
    i = int(np.argmax(probe) if larger_worse else np.argmin(probe))
    shown = signed if signed is not None else vals
    return WorstCase(loop, metric, float(shown[i]), float(shown[0]), i, factor_dict(factors[i]))


def sensitivity_ranking(axis: Axis, gains: GainSet, tolerances: Tolerances,
                        omega: np.ndarray | None = None) -> tuple[SensitivityRow, ...]:
    """One-at-a-time sensitivity: each tolerance at its two ends, the others nominal.

    Ranked by the largest phase-margin loss over the loops (deg), then gain-margin loss (dB).
    """
    varied = tolerances.varied
    if not varied:
        return ()
    rows = np.ones((1 + 2 * len(varied), len(PARAMETERS)))
    for i, t in enumerate(varied):
        c = PARAMETERS.index(t.name)
        rows[1 + 2 * i, c], rows[2 + 2 * i, c] = t.low_factor, t.high_factor
    m = variant_margins(axis, gains, rows, omega)
    out = []
    for i, t in enumerate(varied):
        ends = [1 + 2 * i, 2 + 2 * i]
        pm = {loop: float(m[loop].phase_margin_deg[0] - np.min(m[loop].phase_margin_deg[ends])) for loop in LOOPS}
        gm = {loop: float(m[loop].gain_margin_db[0] - np.min(m[loop].gain_margin_db[ends])) for loop in LOOPS}
        ms = {loop: float(np.max(m[loop].sensitivity_peak[ends]) - m[loop].sensitivity_peak[0]) for loop in LOOPS}
        pm = {k: (v if math.isfinite(v) else (math.inf if v > 0 else 0.0)) for k, v in pm.items()}
        gm = {k: (v if math.isfinite(v) else (math.inf if v > 0 else 0.0)) for k, v in gm.items()}
        worst_loop = max(LOOPS, key=lambda loop: pm[loop])
        out.append(SensitivityRow(t.name, t.low_factor, t.high_factor, pm, gm, ms, worst_loop))
    out.sort(key=lambda r: (-max(r.phase_margin_loss_deg.values()), -max(r.gain_margin_loss_db.values())))
    return tuple(out)


def _describe(factors_row) -> str:
    parts = [f"{DESCRIPTIONS[name]} x{f:.3g}" for name, f in zip(PARAMETERS, factors_row) if f != 1.0]
    return ", ".join(parts) if parts else "nominal"


def _sweep_flags(axis, factors, margins, targets: Targets, settings: SweepSettings) -> list[Flag]:
    flags = []
    vaxis = VariantAxis(axis, factors)
    for loop in LOOPS:
        m = margins[loop]
        bad = ~m.stable
        if bad.any():
            i = int(np.argmax(bad))
            flags.append(Flag(loop, "error", f"The {loop} loop is unstable in {int(bad.sum())} of {len(bad)} variants "
                                             f"(e.g. {_describe(factors[i])})."))
            continue
        i = int(np.argmin(m.phase_margin_deg))
        if m.phase_margin_deg[i] < targets.phase_margin_deg(loop):
            flags.append(Flag(loop, "warning", f"Worst-case phase margin {m.phase_margin_deg[i]:.1f} deg is below the "
                                               f"{targets.phase_margin_deg(loop):g} deg target ({_describe(factors[i])})."))
        i = int(np.argmin(m.gain_margin_db))
        if m.gain_margin_db[i] < targets.gain_margin_db(loop):
            flags.append(Flag(loop, "warning", f"Worst-case gain margin {m.gain_margin_db[i]:.1f} dB is below the "
                                               f"{targets.gain_margin_db(loop):g} dB target ({_describe(factors[i])})."))
        i = int(np.argmax(m.sensitivity_peak))
        if m.sensitivity_peak[i] > targets.sensitivity_peak_max:
            flags.append(Flag(loop, "warning", f"Worst-case sensitivity peak Ms = {m.sensitivity_peak[i]:.2f} exceeds "
                                               f"{targets.sensitivity_peak_max:g} ({_describe(factors[i])})."))
    ratio = vaxis.inertia_ratio
    i = int(np.argmax(ratio))
    if ratio[i] > settings.inertia_ratio_max:
        flags.append(Flag("axis", "warning",
                          f"Load-to-motor inertia ratio reaches {ratio[i]:.3g}:1 ({_describe(factors[i])}), above the "
                          f"{settings.inertia_ratio_max:g}:1 sizing limit: the speed loop's bandwidth and the "
                          "resonance behaviour will suffer; consider a larger motor or more reduction."))
    if axis.load.compliant:
        fr = vaxis.resonance_hz
        bw = margins["speed"].bandwidth_hz
        inside = np.isfinite(bw) & (fr <= bw)
        if inside.any():
            i = int(np.argmax(np.where(inside, bw - fr, -np.inf)))
            flags.append(Flag("speed", "warning",
                              f"The load resonance ({fr[i]:.3g} Hz) lies inside the speed-loop bandwidth "
                              f"({bw[i]:.3g} Hz) in {int(inside.sum())} of {len(inside)} variants "
                              f"(e.g. {_describe(factors[i])}); add a notch or lower the speed gain."))
    order = {"error": 0, "warning": 1, "info": 2}
    return sorted(flags, key=lambda f: order.get(f.severity, 3))


def sweep_summary(result: SweepResult) -> dict:
    """The JSON shape of ``loopwright sweep --json`` (SI; non-finite values as null)."""
    def num(x):
        return None if x is None or not math.isfinite(x) else float(x)

    loops = {}
    for loop in LOOPS:
        m = result.margins[loop]
        loops[loop] = {"unstable_variants": int((~m.stable).sum()),
                       **{w.metric: {"worst": num(w.value), "nominal": num(w.nominal), "variant": w.variant,
                                     "factors": w.factors}
                          for w in result.worst if w.loop == loop}}
    dip = result.worst_of("load_step", "speed_dip_rad_s")
    return {
        "mode": result.settings.mode,
        "variants": result.variant_count,
        "parameters": list(result.parameters),
        "loops": loops,
        "load_step": {"load_torque_nm": result.load_torque_nm, "speed_dip_rad_s":
                      {"worst": num(dip.value), "nominal": num(dip.nominal), "variant": dip.variant,
                       "factors": dip.factors}},
        "ranking": [{"parameter": r.parameter, "low_factor": r.low_factor, "high_factor": r.high_factor,
                     "phase_margin_loss_deg": {k: num(v) for k, v in r.phase_margin_loss_deg.items()},
                     "gain_margin_loss_db": {k: num(v) for k, v in r.gain_margin_loss_db.items()},
                     "sensitivity_peak_rise": {k: num(v) for k, v in r.sensitivity_peak_rise.items()},
                     "worst_loop": r.worst_loop} for r in result.ranking],
        "flags": [{"loop": f.loop, "severity": f.severity, "message": f.message} for f in result.flags],
        "elapsed_s": result.elapsed_s,
    }
