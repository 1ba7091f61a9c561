"""The sampled, saturating drive in time: what a move or a load step really does.

Model (all motor side, SI; see :mod:`core.motor` and :mod:`core.axis` for the plant)
----------------------------------------------------------------------------------
Time base
    The simulation steps at the current-loop rate ``fc``. The speed loop runs every
    ``Ns = fc/fw`` samples and the position loop every ``Np = fw/fp`` speed samples;
    both ratios must be whole numbers (an :class:`InputError` on the drive's rate
    says so otherwise). Controller outputs are held between their updates.
Plant
    ``L di/dt = v - R i - Ke w_m``; rigid: ``J w' = Kt i - B w - T_load - T_c``;
    two-mass (compliant load, reflected): shaft torque ``k (th_m - th_l) + c (w_m - w_l)``
    between ``J_m`` and ``J_L``, load torque and load friction on the load mass.
    The linear part is integrated exactly over each sample with the inputs held
    (zero-order hold via ``scipy.linalg.expm`` of the augmented matrix).
Coulomb friction
    An input held over each sample: ``Fc sign(w)`` while moving; a mass at rest
    sticks while the torque driving it is within ``Fc`` (friction then cancels it
    exactly, and the mass's speed and position are held); a mass whose speed would
    change sign inside a sample is stopped at zero at the end of it and the next
    sample decides whether it breaks away (Karnopp 1985, from memory). So speed
    never chatters through zero; the cost is at most one sample of friction
    mis-sign per reversal.
Delays
    A controller computes from samples taken at ``t_k``. The current loop's total
    delay (drive.loop_delays_s: computation 1 + PWM 0.5 samples by default) is
    realised as: the zero-order hold of the applied voltage over each sample (half a
    sample, which is the PWM average voltage) plus ``D = total - 0.5`` samples in a
    buffer; a fractional part ``f`` of ``D`` is realised as the average of the held
    command over the sample, ``(1-f) u[k-n] + f u[k-n-1]`` (exact in volt-seconds per
    sample). Default: ``D = 1``, the command is applied one sample after it was
    computed. The speed estimate is a backward difference of the quantised position
    over one speed sample (its half-sample delay is inherent), and the rest of the
    speed loop's total delay is an output delay rounded to whole current-loop
    samples; the position loop's total delay likewise.
Sensors and filters
    Position is floored to encoder counts. The current feedback low-pass, the speed
    feedback low-pass and the notches are discretised by Tustin with the frequency
    prewarped at the corner or centre (their gain and phase are exact there), at
    their loop's rate. Back-EMF decoupling uses ``Ke`` times the (unfiltered,
    delayed) speed estimate.
Limits
    Current command clamped at ``axis.current_limit_a``, speed command at
    ``motor.max_speed_rad_s``. Voltage: PMSM with ``i_d = 0`` held by an ideal d-axis
    loop which takes the ``v_d = -p w_m L i_q`` it needs first (d-axis priority); the q
    axis gets ``sqrt(Vmax^2 - v_d^2)`` (a DC motor: ``v_d = 0``, so ``|v| <= Vmax``).
Anti-windup (every PI that feeds a limit)
    "clamp": conditional integration, the integrator is frozen while the output is
    saturated and the error pushes further into the limit. "back_calculation": the
    integrator is bled by ``(u_sat - u)/Tt`` with ``Tt = Ti = Kp/Ki``; Astrom &
    Hagglund ("Advanced PID Control", 2006, from memory) put Tt between Td and Ti,
    sqrt(Ti*Td) for a PID; a PI has no Td, and Ti is the common choice. "off":
    the integrator runs free, only the output is clamped.
Divergence
    When a state is non-finite, |i| exceeds 1000x the current limit or |w_m| 1000x
    the larger of the no-load and rated speeds, the run stops; arrays are truncated at
    that sample and an "error" flag says "diverged at t = ... s".
"""

from __future__ import annotations

import csv
import math
import os
import time
from dataclasses import dataclass, fields
from functools import lru_cache

import numpy as np
import scipy.linalg

from core import sim_kernel as K
from core.axis import Axis
from core.errors import InputError
from core.files import atomic_write
from core.gains import GainSet
from core.scenario import MAX_SAMPLES, Scenario, scenario_from_dict

from core.flagtypes import Flag   # the one Flag type (core.flags re-exports it)

STEP_BAND = 0.02
"""Settling band of a current or speed step: 2 % of the step (common practice)."""
MOVE_BAND_FRACTION = 0.001
"""Settling band of a move: 0.1 % of the distance, but at least MOVE_BAND_COUNTS."""
MOVE_BAND_COUNTS = 4.0
RECOVERY_FRACTION = 0.1
"""A load step is recovered when the speed deviation stays below 10 % of the dip."""


# --------------------------------------------------------------------------- plant
def plant_matrices(axis: Axis) -> tuple[np.ndarray, np.ndarray]:
    """Continuous plant ``x' = A x + B u``, motor side, SI.

    Returns
    -------
    A : ndarray
        (3, 3) for a rigid axis, x = [i (A), w_m (rad/s), th_m (rad)]; (5, 5) for a
        compliant one, with w_l, th_l (load reflected to the motor: rad/s, rad).
    B : ndarray
        (nx, 4), u = [v (V), T_load (N*m at the motor, opposing +motion),
        T_fric_motor (N*m), T_fric_load (N*m)].
    """
    m = axis.motor
    r_, l_, kt, ke = m.resistance_ohm, m.inductance_h, m.torque_constant_nm_per_a, m.back_emf_v_s_per_rad
    if not axis.load.compliant:
        j, b = axis.total_inertia_kgm2, axis.total_viscous_nm_s_per_rad
        a = np.array([[-r_ / l_, -ke / l_, 0.0], [kt / j, -b / j, 0.0], [0.0, 1.0, 0.0]])
        bm = np.array([[1.0 / l_, 0.0, 0.0, 0.0], [0.0, -1.0 / j, -1.0 / j, -1.0 / j], [0.0, 0.0, 0.0, 0.0]])
        return a, bm
    jm, jl = m.inertia_kgm2, axis.load_inertia_kgm2
    bmv, blv = m.viscous_friction_nm_s_per_rad, axis.load_viscous_nm_s_per_rad
    k, c = axis.stiffness_nm_per_rad, axis.damping_nm_s_per_rad
    a = np.array([
        [-r_ / l_, -ke / l_, 0.0, 0.0, 0.0],
        [kt / jm, -(bmv + c) / jm, -k / jm, c / jm, k / jm],
        [0.0, 1.0, 0.0, 0.0, 0.0],
        [0.0, c / jl, k / jl, -(blv + c) / jl, -k / jl],
        [0.0, 0.0, 0.0, 1.0, 0.0]])
    bm = np.zeros((5, 4))
    bm[0, 0] = 1.0 / l_
    bm[3, 1] = -1.0 / jl
    bm[1, 2] = -1.0 / jm
    bm[3, 3] = -1.0 / jl
    return a, bm


def discretise_zoh(a: np.ndarray, b: np.ndarray, sample_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact discretisation with the inputs held over ``sample_s`` seconds.

    ``expm([[A, B], [0, 0]] T) = [[Ad, Bd], [0, I]]`` (Van Loan 1978; the same
    identity scipy.signal.cont2discrete uses for "zoh").
    """
    nx, nu = b.shape
    m = np.zeros((nx + nu, nx + nu))
    m[:nx, :nx] = a
    m[:nx, nx:] = b
    e = scipy.linalg.expm(m * sample_s)
    return np.ascontiguousarray(e[:nx, :nx]), np.ascontiguousarray(e[:nx, nx:])


@lru_cache(maxsize=16)
def _discrete_plant(axis: Axis) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(A, B, Ad, Bd): the plant and its discretisation at the current-loop period.

    The axis, not the gains, sets them, so a slider move reuses them (read-only arrays).
    """
    a, b = plant_matrices(axis)
    ad, bd = discretise_zoh(a, b, 1.0 / axis.drive.current_rate_hz)
    for m in (a, b, ad, bd):
        m.setflags(write=False)
    return a, b, ad, bd


# --------------------------------------------------------------------------- filters
def tustin_lowpass(corner_hz: float, sample_s: float) -> np.ndarray:
    """First-order low-pass ``1/(1 + s/wc)`` by Tustin prewarped at wc: one section row.

    Returns [b0, b1, 0, a1, 0]; [1, 0, 0, 0, 0] (pass-through) when ``corner_hz`` is 0.
    """
    if corner_hz <= 0:
        return np.array([1.0, 0.0, 0.0, 0.0, 0.0])
    wc = 2.0 * math.pi * corner_hz
    kk = wc / math.tan(wc * sample_s / 2.0)
    b0 = wc / (kk + wc)
    return np.array([b0, b0, 0.0, (wc - kk) / (kk + wc), 0.0])


def tustin_notch(centre_hz: float, zeta_zero: float, zeta_pole: float, sample_s: float) -> np.ndarray:
    """Notch ``(s^2+2 zz wn s+wn^2)/(s^2+2 zp wn s+wn^2)`` by Tustin prewarped at wn.

    Returns one section row [b0, b1, b2, a1, a2] (a0 normalised to 1).
    """
    wn = 2.0 * math.pi * centre_hz
    kk = wn / math.tan(wn * sample_s / 2.0)
    def poly(z):
        return (kk * kk + 2 * z * wn * kk + wn * wn, 2 * (wn * wn - kk * kk), kk * kk - 2 * z * wn * kk + wn * wn)
    n0, n1, n2 = poly(zeta_zero)
    d0, d1, d2 = poly(zeta_pole)
    return np.array([n0 / d0, n1 / d0, n2 / d0, d1 / d0, d2 / d0])


def _check_filter(field: str, freq_hz: float, rate_hz: float) -> None:
    if freq_hz >= 0.45 * rate_hz:
        raise InputError(field, freq_hz, f"below 0.45 x the {rate_hz:g} Hz rate it is sampled at "
                         f"({0.45 * rate_hz:g} Hz): Tustin cannot place it at or above Nyquist")


def _rate_ratio(field: str, fast_hz: float, slow_hz: float, fast_name: str) -> int:
    ratio = fast_hz / slow_hz
    n = int(round(ratio))
    if n < 1 or abs(ratio - n) > 1e-6 * ratio:
        hint = ", ".join(f"{fast_hz / d:g}" for d in (1, 2, 4, 8))
        raise InputError(field, slow_hz, f"the {fast_name} rate ({fast_hz:g} Hz) divided by a whole number "
                         f"(e.g. {hint} Hz): the simulation runs the slower loop every Nth sample")
    return n


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class SimulationMetrics:
    """Figures of one run (NaN where they do not apply).

    Attributes
    ----------
    peak_voltage_pct : float
        Largest voltage demand |v| (q and d) over the available voltage, %.
    time_voltage_saturated_s, time_current_saturated_s, time_speed_saturated_s : float
        Time the voltage, current and speed commands spent clamped, s.
    peak_current_a, rms_current_a : float
        Largest |i| and the rms over the run, A (model ampere).
    continuous_current_a, current_limit_a : float
        The motor's continuous rating and the peak limit in force, A.
    max_following_error_load, max_following_error_motor_rad : float
        Largest |reference - position| of a move, load units (m or rad) and motor rad.
    settling_time_s : float
        Move: from the end of the profile until the error stays within the move band;
        step: from the step until the response stays within 2 % of it.
    overshoot_pct : float
        Past the target, % of the move distance or of the step.
    overshoot_load : float
        Move overshoot past the target, load units.
    speed_dip_rad_s : float
        Largest drop of motor speed below its reference (profile velocity, speed step,
        or the speed at that moment) after the load step, beyond the lag already there, rad/s.
    load_deflection_load : float
        Largest change of the following error after the load step, load units.
    recovery_time_s : float
        From the load step until the speed deviation stays below 10 % of the dip, s.
    """

    peak_voltage_pct: float
    time_voltage_saturated_s: float
    time_current_saturated_s: float
    time_speed_saturated_s: float
    peak_current_a: float
    rms_current_a: float
    continuous_current_a: float
    current_limit_a: float
    max_following_error_load: float
    max_following_error_motor_rad: float
    settling_time_s: float
    overshoot_pct: float
    overshoot_load: float
    speed_dip_rad_s: float
    load_deflection_load: float
    recovery_time_s: float


@dataclass(frozen=True)
class SimulationResult:
    """Traces (one value per current-loop sample), metrics and flags of one run.

    Arrays have ``len(time_s)`` entries; a diverged run is truncated at the sample
    where it diverged. Position and speed are motor side (rad, rad/s) unless named
    ``load_*`` (load units: m, m/s for linear; rad, rad/s for rotary).

    Attributes
    ----------
    time_s : ndarray
        Sample times, s.
    motor_position_rad, motor_speed_rad_s, load_position, load_speed : ndarray
    position_reference_rad, position_measured_rad : ndarray
        Profile reference and encoder reading, motor rad.
    speed_command_rad_s, speed_feedback_rad_s : ndarray
        Speed loop reference (after limit and command notches) and filtered estimate.
    current_command_a, current_a, current_measured_a : ndarray
        Current reference after the limit, actual current, filtered feedback, A.
    voltage_command_v, voltage_applied_v, voltage_d_v, voltage_demand_v : ndarray
        q-voltage command after the limit, voltage applied over each sample, d-axis
        voltage, and the magnitude of the unclamped demand, V.
    current_error_a, speed_error_rad_s, position_error_rad : ndarray
        Each loop's error as its controller saw it.
    saturated_voltage, saturated_current, saturated_speed : ndarray of bool
        Whether each command was clamped.
    load_torque_motor_nm, friction_power_w : ndarray
        Load torque reflected to the motor, and Coulomb friction power, averaged per sample.
    metrics : SimulationMetrics
    flags : tuple of Flag
    diverged_at_s : float
        NaN unless the run diverged.
    voltage_limit_v : float
    load_unit : str
        "m" or "rad".
    scenario : Scenario
    """

    time_s: np.ndarray
    motor_position_rad: np.ndarray
    motor_speed_rad_s: np.ndarray
    load_position: np.ndarray
    load_speed: np.ndarray
    position_reference_rad: np.ndarray
    position_measured_rad: np.ndarray
    speed_command_rad_s: np.ndarray
    speed_feedback_rad_s: np.ndarray
    current_command_a: np.ndarray
    current_a: np.ndarray
    current_measured_a: np.ndarray
    voltage_command_v: np.ndarray
    voltage_applied_v: np.ndarray
    voltage_d_v: np.ndarray
    voltage_demand_v: np.ndarray
    current_error_a: np.ndarray
    speed_error_rad_s: np.ndarray
    position_error_rad: np.ndarray
    saturated_voltage: np.ndarray
    saturated_current: np.ndarray
    saturated_speed: np.ndarray
    load_torque_motor_nm: np.ndarray
    friction_power_w: np.ndarray
    metrics: SimulationMetrics
    flags: tuple
    diverged_at_s: float
    voltage_limit_v: float
    load_unit: str
    scenario: Scenario


TRACE_UNITS = {
    "time_s": "s", "motor_position_rad": "rad", "motor_speed_rad_s": "rad/s", "load_position": "load",
    "load_speed": "load/s", "position_reference_rad": "rad", "position_measured_rad": "rad",
    "speed_command_rad_s": "rad/s", "speed_feedback_rad_s": "rad/s", "current_command_a": "A",
    "current_a": "A", "current_measured_a": "A", "voltage_command_v": "V", "voltage_applied_v": "V",
    "voltage_d_v": "V", "voltage_demand_v": "V", "current_error_a": "A", "speed_error_rad_s": "rad/s",
    "position_error_rad": "rad", "saturated_voltage": "0/1", "saturated_current": "0/1",
    "saturated_speed": "0/1", "load_torque_motor_nm": "N*m", "friction_power_w": "W",
}
"""Every trace of :class:`SimulationResult` with its unit ("load" = m or rad)."""


# --------------------------------------------------------------------------- setup
@dataclass(frozen=True)
class _Prepared:
    ad: np.ndarray
    bd: np.ndarray
    ac: np.ndarray
    bc: np.ndarray
    fp: np.ndarray
    ip: np.ndarray
    sos_fb: np.ndarray
    sos_cmd: np.ndarray
    ref_a: np.ndarray
    ref_b: np.ndarray
    ref_c: np.ndarray
    t_load: np.ndarray
    n: int
    move_end_s: float


_MODES = {"current_step": K.MODE_CURRENT, "speed_step": K.MODE_SPEED, "voltage_step": K.MODE_VOLTAGE,
          "move": K.MODE_POSITION, "load_step": K.MODE_POSITION}
_AW = {"off": K.AW_OFF, "clamp": K.AW_CLAMP, "back_calculation": K.AW_BACK}


@lru_cache(maxsize=16)
def _references(sc: Scenario, ratio: float, tc: float, n: int):
    """References and load torque per current-loop sample, and the end of the move, s.

    They depend on the scenario and the load's ratio only, not on the gains, so a gain
    being dragged reuses them; the arrays are read-only (shared between runs).
    """
    t = np.arange(n) * tc
    ref_a = np.zeros(n)
    ref_b = np.zeros(n)
    ref_c = np.zeros(n)
    move_end = math.nan
    eps = 1e-9 * tc
    if sc.kind in ("current_step", "speed_step", "voltage_step"):
        ref_a[:] = np.where(t >= sc.step_time_s - eps, sc.step, 0.0)
    elif sc.kind == "move":
        from core.profiles import jerk_limited_profile, trapezoid_profile
        if sc.profile == "jerk_limited":
            prof = jerk_limited_profile(sc.distance_load, sc.speed_load, sc.acceleration_load, sc.jerk_load)
        else:
            prof = trapezoid_profile(sc.distance_load, sc.speed_load, sc.acceleration_load)
        p, v, acc = prof.evaluate(t - sc.start_time_s)
        ref_a[:] = ratio * p
        ref_b[:] = ratio * v
        ref_c[:] = ratio * acc
        move_end = sc.start_time_s + prof.duration_s

    t_load = np.zeros(n)
    if sc.load_step_load != 0.0:
        t_on = sc.load_step_time_s
        t_off = t_on + sc.load_pulse_width_s
        overlap = np.clip(np.minimum(t + tc, t_off) - np.maximum(t, t_on), 0.0, tc) / tc
        t_load[:] = overlap * sc.load_step_load / ratio       # torque reflects with 1/r
    for a in (ref_a, ref_b, ref_c, t_load):
        a.flags.writeable = False
    return ref_a, ref_b, ref_c, t_load, move_end


def _prepare(axis: Axis, gains: GainSet, sc: Scenario) -> _Prepared:
    drive, motor = axis.drive, axis.motor
    fc = drive.current_rate_hz
    ns = _rate_ratio("drive.speed_rate", fc, drive.speed_rate_hz, "current-loop")
    np_ = _rate_ratio("drive.position_rate", drive.speed_rate_hz, drive.position_rate_hz, "speed-loop")
    tc = 1.0 / fc
    tw = tc * ns
    n = int(math.floor(sc.duration_s * fc + 1e-9)) + 1
    if n > MAX_SAMPLES + 1:
        raise InputError("scenario.duration", sc.duration_s,
                         f"at most {MAX_SAMPLES / fc:g} s ({MAX_SAMPLES:.0e} samples at {fc:g} Hz)")
    if sc.kind not in _MODES:
        raise InputError("scenario.kind", sc.kind, " | ".join(_MODES))
    _check_filter("drive.current_filter", drive.current_filter_hz, fc)
    _check_filter("speed.feedback_lowpass", gains.speed.feedback_lowpass_hz, 1.0 / tw)
    for k, nt in enumerate(gains.speed.notches):
        _check_filter(f"speed.notches[{k}].centre", nt.centre_hz, 1.0 / tw)

    a, b, ad, bd = _discrete_plant(axis)

    # delays in current-loop samples (see the module docstring)
    d_cur, d_spd, d_pos = drive.loop_delays_s()
    dv = max(d_cur / tc - 0.5, 0.0)
    dv = round(dv * 1e9) / 1e9
    vdel = int(math.floor(dv))
    vfrac = dv - vdel
    idel = max(int(round((d_spd - 0.5 * tw) / tc)), 0)
    wdel = max(int(round(d_pos / tc)), 0)

    ilp = tustin_lowpass(drive.current_filter_hz, tc)
    sos_fb = [tustin_lowpass(gains.speed.feedback_lowpass_hz, tw)] if gains.speed.feedback_lowpass_hz > 0 else []
    sos_cmd = []
    for nt in gains.speed.notches:
        row = tustin_notch(nt.centre_hz, nt.zeta_zero, nt.zeta_pole, tw)
        (sos_fb if nt.place == "feedback" else sos_cmd).append(row)
    sos_fb = np.ascontiguousarray(np.array(sos_fb, dtype=float).reshape(-1, 5))
    sos_cmd = np.ascontiguousarray(np.array(sos_cmd, dtype=float).reshape(-1, 5))

    ref_a, ref_b, ref_c, t_load, move_end = _references(sc, axis.load.ratio, tc, n)

    fp = np.zeros(K.N_F)
    fp[K.F_TC] = tc
    fp[K.F_KP_I], fp[K.F_KI_I] = gains.current.pi.kp, gains.current.pi.ki
    fp[K.F_KP_W], fp[K.F_KI_W] = gains.speed.pi.kp, gains.speed.pi.ki
    pg = gains.position
    fp[K.F_KP_P], fp[K.F_KI_P] = pg.kp_per_s, pg.ki_per_s2
    fp[K.F_VFF] = pg.velocity_ff
    fp[K.F_AFF] = pg.acceleration_ff * axis.total_inertia_kgm2 / motor.torque_constant_nm_per_a
    fp[K.F_KE_FF] = motor.back_emf_v_s_per_rad if gains.current.decouple_back_emf else 0.0
    fp[K.F_VMAX] = drive.voltage_limit_v
    fp[K.F_IMAX] = axis.current_limit_a
    fp[K.F_WMAX] = motor.max_speed_rad_s
    fp[K.F_CPR] = drive.encoder_counts_per_rev / (2.0 * math.pi)
    fp[K.F_TT_I] = gains.current.pi.integral_time_s        # Tt = Ti (inf: no integrator)
    fp[K.F_TT_W] = gains.speed.pi.integral_time_s
    fp[K.F_TT_P] = pg.pi.integral_time_s
    fp[K.F_VFRAC] = vfrac
    fp[K.F_PL] = motor.pole_pairs * motor.inductance_h if motor.kind == "pmsm" else 0.0
    if axis.load.compliant:
        fp[K.F_FC_M], fp[K.F_FC_L] = motor.coulomb_friction_nm, axis.load_coulomb_nm
    else:
        fp[K.F_FC_M], fp[K.F_FC_L] = motor.coulomb_friction_nm + axis.load_coulomb_nm, 0.0
    i_ref = axis.current_limit_a if math.isfinite(axis.current_limit_a) else 1e3
    fp[K.F_I_DIV] = 1e3 * max(i_ref, abs(sc.step) if sc.kind == "current_step" else 0.0)
    w_ref = max(axis.no_load_speed_rad_s, motor.max_speed_rad_s if math.isfinite(motor.max_speed_rad_s) else 0.0)
    fp[K.F_W_DIV] = 1e3 * max(w_ref, abs(sc.step) if sc.kind == "speed_step" else 0.0)
    fp[K.F_ILP_B0], fp[K.F_ILP_B1], fp[K.F_ILP_A1] = ilp[0], ilp[1], ilp[3]

    ip = np.zeros(K.N_I, dtype=np.int64)
    ip[K.I_MODE] = _MODES[sc.kind]
    ip[K.I_NS], ip[K.I_NP] = ns, np_
    ip[K.I_VDELAY], ip[K.I_IDELAY], ip[K.I_WDELAY], ip[K.I_EDELAY] = vdel, idel, wdel, 0
    ip[K.I_AW] = _AW[sc.anti_windup]
    ip[K.I_LIMITS] = 1 if sc.limits else 0
    ip[K.I_COMPLIANT] = 1 if axis.load.compliant else 0
    ip[K.I_N] = n
    return _Prepared(ad, bd, np.ascontiguousarray(a), np.ascontiguousarray(b), fp, ip, sos_fb, sos_cmd,
                     ref_a, ref_b, ref_c, t_load, n, move_end)


def simulate(axis: Axis, gains: GainSet, scenario: Scenario) -> SimulationResult:
    """Run one scenario on the sampled drive.

    Parameters
    ----------
    axis : Axis
    gains : GainSet
    scenario : Scenario
        Already parsed (see :func:`core.scenario.scenario_from_dict`).

    Returns
    -------
    SimulationResult

    Raises
    ------
    InputError
        Rate ratios that are not whole numbers, filters at or above Nyquist, too many samples.
    """
    pr = _prepare(axis, gains, scenario)
    out = np.zeros((K.N_CH, pr.n))
    done = K.run_kernel(pr.ad, pr.bd, pr.ac, pr.bc, pr.fp, pr.ip, pr.sos_fb, pr.sos_cmd,
                        pr.ref_a, pr.ref_b, pr.ref_c, pr.t_load, out)
    return _result(axis, scenario, pr, out[:, :done], done < pr.n)


def simulate_scenario(axis: Axis, gains: GainSet, scenario, field_prefix: str = "scenario") -> SimulationResult:
    """Parse (when given a dict) and simulate one scenario: the entry point for front ends.

    Parameters
    ----------
    axis : Axis
    gains : GainSet
    scenario : dict or Scenario
        A preset's scenario dict (strings with units) or a parsed :class:`Scenario`.
    field_prefix : str
        Names the fields in errors, e.g. ``"scenarios[1]"``.

    Returns
    -------
    SimulationResult

    Raises
    ------
    InputError
        For every bad input, naming the field.
    """
    sc = scenario if isinstance(scenario, Scenario) else scenario_from_dict(scenario, axis, field_prefix)
    return simulate(axis, gains, sc)


def simulate_preset_scenario(preset, gains: GainSet | None, index: int) -> SimulationResult:
    """Simulate the preset's scenario number ``index`` with ``gains`` on the preset's axis.

    Parameters
    ----------
    preset : core.presets.Preset
        Supplies ``axis`` and ``scenarios`` (dicts of unit strings).
    gains : GainSet or None
        None: the gain set the scenario names in ``gain_set``, else the active one.
    index : int
        Position in ``preset.scenarios``; errors name ``scenarios[index].<field>``.

    Returns
    -------
    SimulationResult
    """
    scenarios = preset.scenarios
    if not isinstance(index, int) or not 0 <= index < len(scenarios):
        raise InputError("scenario", index, f"an index from 0 to {len(scenarios) - 1}")
    if gains is None:
        named = scenarios[index].get("gain_set")
        gains = preset.gain_set(named) if named else preset.active_gain_set
    return simulate_scenario(preset.axis, gains, scenarios[index], f"scenarios[{index}]")


def warm_up() -> float:
    """Compile (or load from cache) the kernel on a tiny problem; returns the seconds it took.

    Call it off the first paint (a background thread), so the first real run is fast.
    """
    t0 = time.perf_counter()
    ad = np.eye(3)
    bd = np.zeros((3, 4))
    fp = np.zeros(K.N_F)
    fp[K.F_TC], fp[K.F_CPR], fp[K.F_I_DIV], fp[K.F_W_DIV], fp[K.F_ILP_B0] = 1e-4, 1.0, 1e9, 1e9, 1.0
    fp[K.F_VMAX] = fp[K.F_IMAX] = fp[K.F_WMAX] = fp[K.F_TT_I] = fp[K.F_TT_W] = fp[K.F_TT_P] = 1.0
    ip = np.zeros(K.N_I, dtype=np.int64)
    ip[K.I_NS] = ip[K.I_NP] = 1
    ip[K.I_N] = 4
    ip[K.I_MODE] = K.MODE_POSITION
    z = np.zeros(4)
    sos = np.zeros((0, 5))
    # The plant matrices and the references are shared between runs and read-only in a
    # real run; numba compiles read-only and writable arrays separately, so these are too.
    plant = (ad, bd, ad.copy(), bd.copy())
    refs = (z, z.copy(), z.copy(), z.copy())
    for a in plant + refs:
        a.flags.writeable = False
    K.run_kernel(*plant, fp, ip, sos, sos.copy(), *refs, np.zeros((K.N_CH, 4)))
    return time.perf_counter() - t0


# --------------------------------------------------------------------------- metrics
def _last_outside(t: np.ndarray, err: np.ndarray, band: float, start_s: float) -> float:
    """Time from ``start_s`` until |err| stays within band (0 if always; NaN if never)."""
    sel = t >= start_s - 1e-12
    if not sel.any():
        return math.nan
    tt, ee = t[sel], np.abs(err[sel])
    out = np.nonzero(ee > band)[0]
    if out.size == 0:
        return 0.0
    if out[-1] == ee.size - 1:
        return math.nan
    return float(tt[out[-1] + 1] - start_s)


def _result(axis: Axis, sc: Scenario, pr: _Prepared, o: np.ndarray, diverged: bool) -> SimulationResult:
    n = o.shape[1]
    tc = float(pr.fp[K.F_TC])
    t = np.arange(n) * tc
    ratio = axis.load.ratio
    vmax = axis.drive.voltage_limit_v
    sat_v, sat_i, sat_w = (o[K.CH_SAT_V] > 0.5, o[K.CH_SAT_I] > 0.5, o[K.CH_SAT_W] > 0.5)
    i, wm, thm = o[K.CH_I], o[K.CH_W_M], o[K.CH_TH_M]
    th_ref = pr.ref_a[:n] if sc.kind in ("move", "load_step") else np.zeros(n)
    fe = th_ref - thm
    nan = math.nan

    peak_v = float(np.max(o[K.CH_V_DEMAND])) / vmax * 100.0 if n else nan
    peak_i = float(np.max(np.abs(i))) if n else nan
    rms_i = float(np.sqrt(np.mean(i * i))) if n else nan
    settle = overshoot = overshoot_load = fe_max = fe_max_m = nan
    counts_rad = 2.0 * math.pi / axis.drive.encoder_counts_per_rev
    if sc.kind in ("move", "load_step") and n:
        fe_max_m = float(np.max(np.abs(fe)))
        fe_max = fe_max_m / ratio
    if sc.kind == "move" and n:
        d_m = sc.distance_load * ratio
        band = max(MOVE_BAND_FRACTION * abs(d_m), MOVE_BAND_COUNTS * counts_rad)
        settle = _last_outside(t, fe, band, pr.move_end_s)
        past = np.sign(d_m) * (thm - d_m)
        overshoot_load = max(float(np.max(past)), 0.0) / ratio
        overshoot = overshoot_load / abs(sc.distance_load) * 100.0
    elif sc.kind in ("current_step", "speed_step") and n and sc.step != 0.0:
        y = i if sc.kind == "current_step" else wm
        r = sc.step
        if sc.limits and sc.kind == "current_step":
            r = math.copysign(min(abs(r), axis.current_limit_a), r)
        if sc.limits and sc.kind == "speed_step":
            r = math.copysign(min(abs(r), axis.motor.max_speed_rad_s), r)
        settle = _last_outside(t, y - r, STEP_BAND * abs(r), sc.step_time_s)
        after = t >= sc.step_time_s
        overshoot = max(float(np.max(np.sign(r) * (y[after] - r))), 0.0) / abs(r) * 100.0
    elif sc.kind == "voltage_step" and n > 1 and sc.step != 0.0:
        final = wm[-1]
        if final != 0.0:
            settle = _last_outside(t, wm - final, STEP_BAND * abs(final), sc.step_time_s)

    dip = deflection = recovery = nan
    if sc.load_step_load != 0.0 and n:
        k0 = int(min(max(math.ceil(sc.load_step_time_s / tc - 1e-9), 0), n - 1))
        if k0 < n - 1:
            sgn = math.copysign(1.0, sc.load_step_load)
            # deviation from the reference speed (profile velocity, or the speed step),
            # relative to the deviation already there when the load arrives
            if sc.kind in ("move", "load_step"):
                lag = pr.ref_b[:n] - wm
            elif sc.kind == "speed_step":
                lag = pr.ref_a[:n] - wm
            else:
                lag = -wm
            dev = sgn * (lag[k0:] - lag[k0])
            dip = max(float(np.max(dev)), 0.0)
            deflection = float(np.max(np.abs(fe[k0:] - fe[k0]))) / ratio
            if dip > 0:
                recovery = _last_outside(t[k0:], dev, RECOVERY_FRACTION * dip, t[k0])

    metrics = SimulationMetrics(
        peak_voltage_pct=peak_v,
        time_voltage_saturated_s=float(np.count_nonzero(sat_v)) * tc,
        time_current_saturated_s=float(np.count_nonzero(sat_i)) * tc,
        time_speed_saturated_s=float(np.count_nonzero(sat_w)) * tc,
        peak_current_a=peak_i, rms_current_a=rms_i,
        continuous_current_a=axis.motor.continuous_current_a, current_limit_a=axis.current_limit_a,
        max_following_error_load=fe_max, max_following_error_motor_rad=fe_max_m,
        settling_time_s=settle, overshoot_pct=overshoot, overshoot_load=overshoot_load,
        speed_dip_rad_s=dip, load_deflection_load=deflection, recovery_time_s=recovery)
    diverged_at = float(t[-1] + tc) if diverged and n else (0.0 if diverged else nan)
    flags = _flags(axis, sc, metrics, t, sat_v, sat_i, sat_w, pr.move_end_s, diverged_at)
    wl, thl = o[K.CH_W_L], o[K.CH_TH_L]
    return SimulationResult(
        time_s=t, motor_position_rad=thm, motor_speed_rad_s=wm,
        load_position=thl / ratio, load_speed=wl / ratio,
        position_reference_rad=th_ref, position_measured_rad=o[K.CH_TH_MEAS],
        speed_command_rad_s=o[K.CH_W_CMD], speed_feedback_rad_s=o[K.CH_W_FB],
        current_command_a=o[K.CH_I_CMD], current_a=i, current_measured_a=o[K.CH_I_MEAS],
        voltage_command_v=o[K.CH_V_CMD], voltage_applied_v=o[K.CH_V_APPLIED],
        voltage_d_v=o[K.CH_V_D], voltage_demand_v=o[K.CH_V_DEMAND],
        current_error_a=o[K.CH_E_I], speed_error_rad_s=o[K.CH_E_W],
        position_error_rad=fe if sc.kind in ("move", "load_step") else o[K.CH_E_P],
        saturated_voltage=sat_v, saturated_current=sat_i, saturated_speed=sat_w,
        load_torque_motor_nm=o[K.CH_T_LOAD], friction_power_w=o[K.CH_P_FRIC],
        metrics=metrics, flags=tuple(flags), diverged_at_s=diverged_at, voltage_limit_v=vmax,
        load_unit=axis.load.position_unit, scenario=sc)


def _during(t: np.ndarray, mask: np.ndarray, sc: Scenario, move_end: float) -> str:
    first = float(t[np.argmax(mask)])
    if sc.kind == "move" and sc.start_time_s <= first <= move_end:
        return " during the move"
    if sc.load_step_load != 0.0 and first >= sc.load_step_time_s:
        return " after the load step"
    if sc.kind in ("current_step", "speed_step", "voltage_step") and first >= sc.step_time_s:
        return " after the step"
    return ""


def _ms(seconds: float) -> str:
    return f"{seconds * 1e3:.3g} ms"


def _flags(axis, sc, m: SimulationMetrics, t, sat_v, sat_i, sat_w, move_end, diverged_at) -> list:
    flags = []
    outer = {"current_step": "current", "voltage_step": "current", "speed_step": "speed"}.get(sc.kind, "position")
    if not math.isnan(diverged_at):
        flags.append(Flag(outer, "error", f"diverged at t = {diverged_at:.4g} s: the {outer} loop is "
                          "unstable (the run was stopped there)"))
    if not sc.limits:
        flags.append(Flag("axis", "info", "limits disabled: voltage, current and speed are unbounded "
                          "(a check of the linear behaviour)"))
    any_sat = False
    if m.time_voltage_saturated_s > 0:
        any_sat = True
        flags.append(Flag("current", "warning", f"voltage command saturated for {_ms(m.time_voltage_saturated_s)}"
                          f"{_during(t, sat_v, sc, move_end)} (demand peaked at {m.peak_voltage_pct:.0f} % "
                          f"of the {axis.drive.voltage_limit_v:.4g} V available)"))
    if m.time_current_saturated_s > 0:
        any_sat = True
        flags.append(Flag("speed", "warning", f"current command saturated for {_ms(m.time_current_saturated_s)}"
                          f"{_during(t, sat_i, sc, move_end)} (limit {axis.current_limit_a:.4g} A)"))
    if m.time_speed_saturated_s > 0:
        any_sat = True
        flags.append(Flag("position", "warning", f"speed command saturated for {_ms(m.time_speed_saturated_s)}"
                          f"{_during(t, sat_w, sc, move_end)} (limit {axis.motor.max_speed_rad_s:.4g} rad/s)"))
    if any_sat and sc.anti_windup == "off":
        flags.append(Flag("axis", "info", "anti-windup is off: the integrators wound up while saturated"))
    if sc.limits and not any_sat and math.isnan(diverged_at):
        flags.append(Flag("axis", "info", f"no limit reached: peak voltage {m.peak_voltage_pct:.0f} % of "
                          f"available, peak current {m.peak_current_a:.3g} A of {axis.current_limit_a:.4g} A"))
    if m.peak_current_a > m.continuous_current_a:
        flags.append(Flag("axis", "info", f"peak current {m.peak_current_a:.3g} A is above the continuous "
                          f"rating {m.continuous_current_a:.3g} A (rms over the run {m.rms_current_a:.3g} A)"))
    if sc.kind == "move" and math.isnan(diverged_at):
        u = axis.load.position_unit
        if math.isnan(m.settling_time_s):
            flags.append(Flag("position", "warning", "position did not settle within the run after the move"))
        if m.overshoot_load > 0 and m.overshoot_pct > 100 * MOVE_BAND_FRACTION:
            flags.append(Flag("position", "warning", f"position overshoots the target by "
                              f"{m.overshoot_load:.3g} {u} ({m.overshoot_pct:.2g} % of the distance)"))
    return flags


# --------------------------------------------------------------------------- export
def _clean(v):
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    return v


def result_to_json(result: SimulationResult, max_points: int = 2000) -> dict:
    """Metrics, flags and traces (decimated to at most ``max_points``) as JSON-ready data.

    Decimation keeps every k-th sample and the last one; NaN and inf become None.
    """
    n = len(result.time_s)
    step = max(1, int(math.ceil(n / max(max_points, 2))))
    idx = np.arange(0, n, step)
    if n and idx[-1] != n - 1:
        idx = np.append(idx, n - 1)
    traces = {}
    for name in TRACE_UNITS:
        arr = getattr(result, name)[idx]
        traces[name] = [None if not math.isfinite(x) else x for x in arr.astype(float).tolist()]
    sc = result.scenario
    return {
        "scenario": {f.name: _clean(getattr(sc, f.name)) for f in fields(sc)},
        "metrics": {f.name: _clean(getattr(result.metrics, f.name)) for f in fields(result.metrics)},
        "flags": [{"loop": f.loop, "severity": f.severity, "message": f.message} for f in result.flags],
        "diverged_at_s": _clean(result.diverged_at_s),
        "voltage_limit_v": result.voltage_limit_v,
        "load_unit": result.load_unit,
        "trace_units": {k: v.replace("load", result.load_unit) for k, v in TRACE_UNITS.items()},
        "decimation": step,
        "traces": traces,
    }


def write_csv(result: SimulationResult, path) -> None:
    """Every trace at full rate as CSV (header: name [unit]); written atomically.

    The file appears complete or not at all: written to a temporary file in the same
    folder, then moved over ``path`` with os.replace.
    """
    path = os.fspath(path)
    names = list(TRACE_UNITS)
    header = [f"{k} [{v.replace('load', result.load_unit)}]" for k, v in TRACE_UNITS.items()]
    cols = np.column_stack([getattr(result, k).astype(float) for k in names]) if len(result.time_s) else \
        np.zeros((0, len(names)))
    def write(tmp):
        with open(tmp, "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(header)
            for row in cols:
                w.writerow([f"{x:.9g}" for x in row])

    atomic_write(path, write, "--csv")
