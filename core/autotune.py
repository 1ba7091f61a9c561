"""Constrained automatic tuning: the stiffest gains that keep their margins at every tolerance corner.

Decision variables (log scale, relative to a starting gain set): the current-loop
gain (Kp and Ki scaled together, so the PI zero stays where the rule put it), the
speed Kp, the speed Ki and the position Kp. Filters, notches and feedforward are kept.

Constraints, each the worst over all tolerance corners (and nominal), computed by
the vectorised :func:`core.sweep.variant_margins`: every loop stable with PM >= target,
GM >= target and Ms <= target; current/speed and speed/position crossover ratios >=
the separation minimum; optionally no current or voltage saturation in a chosen
move scenario (nominal axis, time simulation); optionally gains inside given ranges.

Method (scipy.optimize.minimize, SLSQP): first the smallest normalised constraint
slack is maximised (phase 1). If it stays negative the specification is infeasible
and the constraint with the least slack is reported as binding. Otherwise the
objective (worst case over the corners) is maximised from that feasible point
(phase 2), and the result is pulled back along the line to the phase-1 point until
every constraint holds exactly as re-checked, so nothing infeasible is returned.
An objective still rising at the edge of the search box with no constraint binding
is reported as unbounded.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

from core.axis import Axis
from core.errors import InputError
from core.flags import Targets
from core.gains import PI, GainSet
from core.loops import CascadeModel
from core.margins import LOOPS
from core.sweep import VariantAlgebra, VariantAxis, sweep_grid, variant_factors, variant_margins
from core.tolerances import PARAMETERS, Tolerances, factor_dict

OBJECTIVES = ("speed_bandwidth", "position_gain", "stiffness")
VARIABLES = ("current.scale", "speed.kp", "speed.ki", "position.kp")
SEARCH_DECADES = 1.3
"""Half-width of the search box around the starting gains, decades (x20 either way)."""

# Normalisation of each slack (so SLSQP sees comparable numbers): 10 deg, 3 dB, 0.2 of Ms,
# a factor e^0.5 of separation.
_SCALE = {"pm": 10.0, "gm": 3.0, "ms": 0.2, "sep": 0.5, "sat": 1.0}


@dataclass(frozen=True)
class ConstraintReport:
    """One constraint at the result.

    Attributes
    ----------
    name : str
        e.g. "speed phase margin".
    limit : float
        The target, in ``unit``.
    worst : float
        Worst value over the corners, in ``unit``.
    slack : float
        Margin left (positive = met), in ``unit`` (a log-ratio for separation: worst/limit - 1).
    unit : str
    active : bool
        True when the constraint binds (slack within 5 % of its normalisation scale:
        0.5 deg, 0.15 dB, 0.01 of Ms, 2.5 % of separation).
    corner : dict of str -> float
        The parameter factors where the worst value occurred.
    """

    name: str
    limit: float
    worst: float
    slack: float
    unit: str
    active: bool
    corner: dict


@dataclass(frozen=True)
class AutotuneResult:
    """Outcome of :func:`autotune`.

    Attributes
    ----------
    status : {"optimal", "infeasible", "unbounded", "cancelled"}
    gains : GainSet or None
        The new gain set (None unless status is "optimal" or "unbounded").
    objective : str
    objective_value : float
        Worst case over the corners: Hz (speed bandwidth), 1/s (position gain) or
        N*m/rad or N/m (dynamic stiffness at the load).
    start_value : float
        The same for the starting gains.
    constraints : tuple of ConstraintReport
    binding : str
        Name of the binding (infeasible) or most active constraint ("" when none).
    message : str
    evaluations : int
        Corner sweeps evaluated.
    corners : int
        Variants checked per evaluation (corners plus nominal).
    elapsed_s : float
    """

    status: str
    gains: GainSet | None
    objective: str
    objective_value: float
    start_value: float
    constraints: tuple
    binding: str
    message: str
    evaluations: int
    corners: int
    elapsed_s: float
    position_kp_choice: str = ""
    """How position Kp was chosen, in words (separation rule, objective, or pulled back to hold a constraint)."""


class _Cancelled(Exception):
    pass


def _gains_at(base: GainSet, z: np.ndarray, name: str, note: str) -> GainSet:
    e = np.exp(z)
    c, s, p = base.current, base.speed, base.position
    current = replace(c, pi=PI(c.pi.kp * e[0], c.pi.ki * e[0]))
    speed = replace(s, pi=PI(s.pi.kp * e[1], s.pi.ki * e[2]))
    position = replace(p, kp_per_s=p.kp_per_s * e[3])
    return replace(base, current=current, speed=speed, position=position, name=name, note=note)


def autotune(axis: Axis, base: GainSet, tolerances: Tolerances, targets: Targets | None = None,
             objective: str = "speed_bandwidth", at_hz: float | None = None,
             scenario: dict | None = None, gain_ranges: dict | None = None,
             progress: Callable[[float, str], None] | None = None,
             cancel: Callable[[], bool] | None = None, name: str = "auto-tuned",
             max_iterations: int = 40, speed_to_position_ratio: float | None = None) -> AutotuneResult:
    """Maximise ``objective`` subject to the margins at every tolerance corner.

    Parameters
    ----------
    axis : Axis
        Nominal axis.
    base : GainSet
        Starting gains; filters, notches and feedforward are kept.
    tolerances : Tolerances
        Their corners (2^k) plus nominal are checked at every step.
    targets : Targets, optional
        PM/GM/Ms per loop and the separation minimum; defaults when omitted.
    objective : {"speed_bandwidth", "position_gain", "stiffness"}
        Worst-case speed-loop -3 dB bandwidth (Hz), position gain (1/s), or the
        worst-case dynamic stiffness at the load at ``at_hz``.
    at_hz : float, optional
        Frequency of the stiffness objective, Hz (required for "stiffness").
    scenario : dict, optional
        A preset scenario; the nominal axis must then run it without current or
        voltage saturation.
    gain_ranges : dict, optional
        ``{"current.kp" | "speed.kp" | "speed.ki" | "position.kp": (low, high)}`` in SI
        gain units (e.g. from a drive's export profile).
    progress : callable, optional
        ``progress(fraction, message)``, called from the calling thread.
    cancel : callable, optional
        Polled between evaluations; returning True stops with status "cancelled"
        (nothing is returned half-applied).
    name : str
        Name of the new gain set.
    max_iterations : int
        SLSQP iterations per phase.
    speed_to_position_ratio : float, optional
        Speed crossover over position gain for objectives other than "position_gain"
        (default :class:`core.tuning.TuningSettings`' 4; never below ``targets.separation_min``).
        The speed-loop objectives do not depend on the position gain, so the optimiser
        would leave it wherever its constraints allow; it is set instead as a practitioner
        sets it, from the worst-case speed crossover over the corners divided by this
        ratio (common practice: 3-10), and pulled back only if a constraint needs it.

    Returns
    -------
    AutotuneResult
    """
    t0 = time.perf_counter()
    targets = targets or Targets()
    if objective not in OBJECTIVES:
        raise InputError("objective", objective, "one of " + ", ".join(OBJECTIVES))
    if objective == "stiffness":
        if at_hz is None or not (isinstance(at_hz, (int, float)) and math.isfinite(at_hz) and at_hz > 0):
            raise InputError("at", at_hz, "a positive frequency in Hz for the stiffness objective")
    factors = variant_factors(tolerances, "corners")
    low = np.full(4, -SEARCH_DECADES * math.log(10))
    high = np.full(4, SEARCH_DECADES * math.log(10))
    low[0], high[0] = -math.log(10), math.log(10)
    start_gain = {"current.kp": base.current.pi.kp, "speed.kp": base.speed.pi.kp, "speed.ki": base.speed.pi.ki,
                  "position.kp": base.position.kp_per_s}
    if base.speed.pi.ki <= 0:
        raise InputError("gains.speed.ki", base.speed.pi.ki, "a speed PI with integral action to start from")
    for key, rng in (gain_ranges or {}).items():
        if key not in start_gain:
            raise InputError(f"gain_ranges.{key}", rng, "one of " + ", ".join(start_gain))
        lo, hi = (float(r) for r in rng)
        if not (0 < lo <= hi):
            raise InputError(f"gain_ranges.{key}", rng, "0 < low <= high")
        i = {"current.kp": 0, "speed.kp": 1, "speed.ki": 2, "position.kp": 3}[key]
        low[i] = max(low[i], math.log(lo / start_gain[key]))
        high[i] = min(high[i], math.log(hi / start_gain[key]))
        if low[i] > high[i]:
            raise InputError(f"gain_ranges.{key}", rng, "a range that overlaps the search box round the start")
    z0 = np.clip(np.zeros(4), low, high)
    # One grid for the whole run, wide enough for the lowest position gain in the box.
    omega = sweep_grid(axis, base.position.kp_per_s * math.exp(low[3]), factors)
    s_stiff = None if at_hz is None else np.array([2j * math.pi * at_hz])
    cache: dict = {}
    count = {"n": 0}
    budget = 4 * (max_iterations + 2) * 5

    def evaluate(z):
        key = tuple(np.round(z, 12))
        if key in cache:
            return cache[key]
        if cancel is not None and cancel():
            raise _Cancelled
        g = _gains_at(base, np.asarray(z), name, "")
        m = variant_margins(axis, g, factors, omega)
        slacks, reports = [], []

        def add(label, values, limit, unit, kind, larger_is_better=True):
            vals = np.asarray(values, dtype=float)
            worst_i = int(np.nanargmin(vals) if larger_is_better else np.nanargmax(vals)) \
                if np.isfinite(vals).any() else 0
            worst = float(vals[worst_i])
            if kind == "sep":
                slack = math.log(worst / limit) if worst > 0 and math.isfinite(worst) else -10.0
            else:
                slack = (worst - limit) if larger_is_better else (limit - worst)
            if not math.isfinite(slack):
                slack = 10.0 * _SCALE[kind] if slack > 0 else -10.0 * _SCALE[kind]
            slacks.append(slack / _SCALE[kind])
            reports.append((label, limit, worst, slack, unit, kind, factor_dict(factors[worst_i])))

        for loop in LOOPS:
            lm = m[loop]
            pm = np.where(lm.stable, lm.phase_margin_deg, -90.0 - 10.0 * lm.unstable_poles)
            add(f"{loop} phase margin", pm, targets.phase_margin_deg(loop), "deg", "pm")
            gm = np.where(lm.stable, lm.gain_margin_db, -20.0)
            add(f"{loop} gain margin", gm, targets.gain_margin_db(loop), "dB", "gm")
            add(f"{loop} sensitivity peak", lm.sensitivity_peak, targets.sensitivity_peak_max, "", "ms",
                larger_is_better=False)
        sep_i = m["current"].crossover_hz / m["speed"].crossover_hz
        sep_w = m["speed"].crossover_hz / m["position"].crossover_hz
        add("current/speed separation", np.nan_to_num(sep_i, nan=0.0), targets.separation_min, "x", "sep")
        add("speed/position separation", np.nan_to_num(sep_w, nan=0.0), targets.separation_min, "x", "sep")
        if objective == "speed_bandwidth":
            value = float(np.nanmin(np.where(m["speed"].stable, m["speed"].bandwidth_hz, 0.0)))
        elif objective == "position_gain":
            value = float(g.position.kp_per_s)
        else:
            model = CascadeModel(VariantAxis(axis, factors), g, VariantAlgebra(s_stiff))
            comp = np.broadcast_to(model.dynamic_compliance, (len(factors), 1))[:, 0]
            value = float(np.min(1.0 / np.abs(comp)))
        count["n"] += 1
        if progress is not None:
            progress(min(0.95, count["n"] / budget), f"evaluation {count['n']}: objective {value:.4g}")
        out = (value, np.array(slacks), reports, g)
        cache[key] = out
        return out

    def reports_of(rep):
        out = []
        for label, limit, worst, slack, unit, kind, corner in rep:
            out.append(ConstraintReport(label, float(limit), float(worst), float(slack), unit,
                                        bool(slack <= 0.05 * _SCALE[kind]), corner))
        return tuple(out)

    corners = len(factors)
    try:
        from scipy.optimize import minimize

        v0, c0, rep0, _ = evaluate(z0)
        start_value = v0
        sat_ok = _saturation_check(axis, scenario)
        # Phase 1: most feasible point (maximise the smallest normalised slack).
        z_feas = z0
        if c0.min() < 0:
            def neg_min_slack(zt):
                return -zt[4]

            cons = {"type": "ineq", "fun": lambda zt: evaluate(zt[:4])[1] - zt[4]}
            res = minimize(neg_min_slack, np.r_[z0, c0.min()], method="SLSQP", constraints=[cons],
                           bounds=list(zip(low, high)) + [(-100, 100)],
                           options={"maxiter": max_iterations, "ftol": 1e-6, "eps": 1e-4})
            candidates = [z0, res.x[:4]]
            z_feas = max(candidates, key=lambda z: evaluate(z)[1].min())
            slack = evaluate(z_feas)[1]
            if slack.min() < 0:
                rep = reports_of(evaluate(z_feas)[2])
                worst = min(rep, key=lambda r: r.slack / _SCALE[_kind(r.name)])
                return AutotuneResult("infeasible", None, objective, math.nan, start_value, rep, worst.name,
                                      f"No gains in the search box meet every constraint at every corner; "
                                      f"the binding one is {worst.name} (worst {worst.worst:.4g} {worst.unit} "
                                      f"against {worst.limit:.4g}).",
                                      count["n"], corners, time.perf_counter() - t0)
        # Phase 2: maximise the objective (log scale) from the feasible point.
        v_feas = evaluate(z_feas)[0]
        scale = abs(math.log(max(v_feas, 1e-12)))

        def neg_objective(z):
            v = evaluate(z)[0]
            return -math.log(max(v, 1e-12)) / max(scale, 1.0)

        cons = {"type": "ineq", "fun": lambda z: evaluate(z)[1]}
        res = minimize(neg_objective, z_feas, method="SLSQP", constraints=[cons], bounds=list(zip(low, high)),
                       options={"maxiter": max_iterations, "ftol": 1e-7, "eps": 1e-4})
        z_best = _pull_back(evaluate, z_feas, np.clip(res.x, low, high))
        # The saturation check is a time simulation: pull back further until it passes.
        if scenario is not None:
            if not sat_ok(_gains_at(base, z_feas, name, "")):
                rep = reports_of(evaluate(z_feas)[2])
                return AutotuneResult("infeasible", None, objective, math.nan, start_value, rep,
                                      "no saturation in the scenario",
                                      "Even the most feasible gains saturate the current or voltage in the scenario.",
                                      count["n"], corners, time.perf_counter() - t0)
            z_best = _pull_back(lambda z: (None, np.array([1.0 if sat_ok(_gains_at(base, z, name, "")) else -1.0]),
                                           None, None), z_feas, z_best)
        z_best, kp_choice = _position_kp_by_separation(evaluate, z_best, base, objective, targets,
                                                       speed_to_position_ratio, low[3], high[3], axis, factors,
                                                       omega, name)
        value, slack, rep, g = evaluate(z_best)
        reports = reports_of(rep)
        at_edge = [VARIABLES[i] for i in range(4) if z_best[i] >= high[i] - 1e-3]
        active = [r.name for r in reports if r.active]
        status = "optimal"
        if objective == "position_gain" and z_best[3] >= high[3] - 1e-3 and not active:
            status = "unbounded"
        elif objective != "position_gain" and at_edge and not active:
            status = "unbounded"
        binding = min(reports, key=lambda r: r.slack / _SCALE[_kind(r.name)]).name if reports else ""
        note = (f"Auto-tuned for worst-case {objective.replace('_', ' ')} over {corners} tolerance variants "
                f"(corners and nominal): {value:.4g} against {start_value:.4g} at the start; binding: {binding}. "
                f"{kp_choice}")
        gains = g.renamed(name, note)
        if status == "unbounded":
            message = (f"The objective was still rising at the edge of the search box ({', '.join(at_edge)} at "
                       f"x{10 ** SEARCH_DECADES:.3g} of the start) with no constraint binding: unbounded within the "
                       "model; the gains returned are at the box edge.")
        else:
            message = f"Optimum found; active constraints: {', '.join(active) or 'none'}."
        if progress is not None:
            progress(1.0, "done")
        return AutotuneResult(status, gains, objective, value, start_value, reports, binding, message,
                              count["n"], corners, time.perf_counter() - t0, kp_choice)
    except _Cancelled:
        return AutotuneResult("cancelled", None, objective, math.nan, math.nan, (), "", "Cancelled; nothing was changed.",
                              count["n"], corners, time.perf_counter() - t0)


def _position_kp_by_separation(evaluate, z, base, objective, targets, ratio, low, high, axis, factors,
                               omega, name):
    """Position Kp from the speed->position separation (see :func:`autotune`): (z, words).

    The speed loop does not depend on the position gain (it is broken with the
    position loop open), so changing z[3] moves no speed-loop constraint; only the
    position loop's own margins and the separation can bind, and then the gain is
    bisected (in log) back towards the optimiser's value until every slack holds.
    """
    if objective == "position_gain":
        return z, (f"Position Kp {base.position.kp_per_s * math.exp(z[3]):.4g} 1/s is the objective, "
                   "maximised under the constraints.")
    from core.tuning import TuningSettings

    ratio = max(float(ratio if ratio is not None else TuningSettings().speed_to_position_ratio),
                float(targets.separation_min))
    g = _gains_at(base, z, name, "")
    fc = float(np.nanmin(variant_margins(axis, g, factors, omega)["speed"].crossover_hz))
    kp_rule = 2.0 * math.pi * fc / ratio
    z_rule = z.copy()
    z_rule[3] = float(np.clip(math.log(kp_rule / base.position.kp_per_s), low, high))
    how = (f"Position Kp from the speed->position separation: worst-case speed crossover {fc:.4g} Hz / {ratio:g} "
           f"-> {kp_rule:.4g} 1/s")
    if objective == "stiffness" and z[3] > z_rule[3]:
        return z, (f"Position Kp {base.position.kp_per_s * math.exp(z[3]):.4g} 1/s chosen by the optimiser for "
                   f"stiffness (above the separation rule's {kp_rule:.4g} 1/s).")
    z_new = _pull_back(evaluate, z, z_rule)
    kp = base.position.kp_per_s * math.exp(z_new[3])
    if abs(z_new[3] - z_rule[3]) < 1e-9:
        clipped = abs(z_rule[3] - math.log(kp_rule / base.position.kp_per_s)) > 1e-9
        return z_new, how + (f", clipped to the allowed range: {kp:.4g} 1/s." if clipped else ".")
    return z_new, how + f"; pulled back to {kp:.4g} 1/s so that every corner keeps its margins."


def _kind(name: str) -> str:
    if "phase" in name:
        return "pm"
    if "gain margin" in name:
        return "gm"
    if "sensitivity" in name:
        return "ms"
    if "separation" in name:
        return "sep"
    return "sat"


def _pull_back(evaluate, z_ok: np.ndarray, z_try: np.ndarray, steps: int = 12) -> np.ndarray:
    """The point nearest ``z_try`` on the segment from ``z_ok`` (feasible) where every slack is >= 0."""
    if evaluate(z_try)[1].min() >= 0:
        return z_try
    lo, hi = 0.0, 1.0
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        if evaluate(z_ok + mid * (z_try - z_ok))[1].min() >= 0:
            lo = mid
        else:
            hi = mid
    return z_ok + lo * (z_try - z_ok)


def _saturation_check(axis: Axis, scenario: dict | None):
    """A predicate gains -> True when the scenario runs without current or voltage saturation."""
    if scenario is None:
        return lambda gains: True
    from core.simulate import simulate_scenario

    def ok(gains: GainSet) -> bool:
        m = simulate_scenario(axis, gains, scenario).metrics
        return m.time_current_saturated_s == 0 and m.time_voltage_saturated_s == 0

    return ok


def profile_gain_ranges(preset, gains: GainSet, profile) -> tuple[dict, list[str]]:
    """The export profile's min/max rows as :func:`autotune` ``gain_ranges`` (SI), with notes.

    A parallel-form row's drive value is its SI value times a constant (units, ampere
    convention, per-unit bases, sample time: :func:`core.export.convert_row`), so its
    drive-unit [min, max] divides back to an SI range exactly; the constant is found by
    converting the starting gains. A ``current.ki`` range bounds the current-loop scale
    like a ``current.kp`` range (the tuner scales both together). Rows in series or
    integral-time form bound a ratio of two gains, which a box on each gain cannot
    express; they are skipped and named in the notes, as are rows of gains the tuner
    does not vary. A minimum <= 0 leaves the low side open.

    Returns
    -------
    (dict, list of str)
        ``{"current.kp" | "speed.kp" | "speed.ki" | "position.kp": (low, high)}`` in SI
        gain units, and one note per row used or skipped.
    """
    from core.export import GAINS, convert_row, resolve_bases, sample_time_s

    bases = resolve_bases(profile, preset)
    ranges: dict = {}
    notes: list[str] = []
    tunable = ("current.kp", "current.ki", "speed.kp", "speed.ki", "position.kp")
    for row in profile.rows:
        if not (math.isfinite(row.minimum) or math.isfinite(row.maximum)):
            continue
        if row.gain not in tunable:
            notes.append(f"{row.label} ({row.gain}): not a gain the auto-tuner varies; range not used")
            continue
        if row.form != "parallel":
            notes.append(f"{row.label} ({row.gain}): {row.form.replace('_', ' ')} form bounds a ratio of two "
                         "gains, not one gain; range not used")
            continue
        si, drive, _ = convert_row(row, gains, bases, sample_time_s(preset, GAINS[row.gain].loop))
        if not (math.isfinite(si) and si > 0 and math.isfinite(drive) and drive > 0):
            notes.append(f"{row.label} ({row.gain}): the starting gain is zero or not convertible; range not used")
            continue
        per_si = drive / si
        lo = row.minimum / per_si if row.minimum > 0 else 1e-12 * si
        hi = row.maximum / per_si if math.isfinite(row.maximum) else math.inf
        key = row.gain
        if key == "current.ki":
            # Kp and Ki scale together: a Ki range is the same range of the scale, i.e. of Kp.
            lo, hi, key = lo * gains.current.pi.kp / si, hi * gains.current.pi.kp / si, "current.kp"
        if key in ranges:
            lo, hi = max(lo, ranges[key][0]), min(hi, ranges[key][1])
        ranges[key] = (lo, hi)
        notes.append(f"{row.label} ({row.gain}): [{row.minimum:g}, {row.maximum:g}] {row.unit} -> "
                     f"{key} in [{lo:.4g}, {hi:.4g}] SI")
    return ranges, notes


def autotune_summary(result: AutotuneResult) -> dict:
    """The JSON shape of ``loopwright autotune --json`` (SI; non-finite as null)."""
    def num(x):
        return None if x is None or not math.isfinite(x) else float(x)

    g = result.gains
    return {
        "status": result.status,
        "objective": result.objective,
        "objective_value": num(result.objective_value),
        "start_value": num(result.start_value),
        "binding": result.binding,
        "message": result.message,
        "constraints": [{"name": c.name, "limit": num(c.limit), "worst": num(c.worst), "slack": num(c.slack),
                         "unit": c.unit, "active": c.active, "corner": c.corner} for c in result.constraints],
        "gains": None if g is None else {
            "name": g.name, "note": g.note,
            "current": {"kp_v_per_a": g.current.pi.kp, "ki_v_per_a_s": g.current.pi.ki},
            "speed": {"kp_a_s_per_rad": g.speed.pi.kp, "ki_a_per_rad": g.speed.pi.ki},
            "position": {"kp_per_s": g.position.kp_per_s}},
        "position_kp_choice": result.position_kp_choice,
        "evaluations": result.evaluations,
        "corners": result.corners,
        "elapsed_s": result.elapsed_s,
    }


__all__ = ["OBJECTIVES", "AutotuneResult", "ConstraintReport", "autotune", "autotune_summary", "profile_gain_ranges",
           "PARAMETERS"]
