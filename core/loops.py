"""The cascade written once: current, speed and position loops over any algebra.

The same formulas serve three purposes:

* :class:`FrequencyAlgebra` evaluates every block at complex frequencies with the
  delays exact (``exp(-s Td)``), as numpy arrays (the tolerance sweep evaluates
  variants this way, and the tests hold the other two against it).
* :class:`core.tape.TapeAlgebra` records the same operations once per gain set and
  replays them compiled at any ``s = sigma + j w``: what the margins, the Bode plots,
  the Nyquist count and the numerical Laplace inversion in :mod:`core.responses` are
  computed from.
* :class:`ControlAlgebra` builds python-control transfer functions with the delays
  replaced by Pade approximants of a stated order, for interop and as a reference.

Structure (motor side, SI; derived from ``L di/dt + R i = v - Ke w``, ``T = Kt i``,
``J dw/dt + B w = T - T_load`` and the two-mass shaft ``T_s = (k/s + c)(w_m - w_l)``)::

    current loop   i*  -> Ci -> Di -> 1/(R + sL) [+ back-EMF]  -> i, feedback Hi
    speed loop     w*  -> Fw -> Cw -> Dw -> current loop -> Kt -> mechanics -> w_m, feedback Hw
    position loop  th* -> Cp -> Dp -> speed loop -> 1/s -> th_m

Each loop's open loop is broken at its own controller output with the inner loops
closed and the outer loops open. Back-EMF decoupling, when chosen, is taken as
perfect (the feedforward cancels ``Ke w`` in the voltage).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from core.axis import Axis
from core.gains import GainSet


class cached_property:
    """A lock-free ``functools.cached_property``: computed on first access, then a plain
    instance attribute (Python 3.11's version takes a lock on every first access, which
    costs more than the arithmetic on a recompute's small arrays)."""

    def __init__(self, func):
        self.func = func
        self.name = func.__name__
        self.__doc__ = func.__doc__

    def __get__(self, instance, owner=None):
        if instance is None:
            return self
        value = instance.__dict__[self.name] = self.func(instance)
        return value


class FrequencyAlgebra:
    """Blocks as complex arrays at ``s = sigma + j*omega``; delays exact.

    Each polynomial and delay is evaluated once per algebra and remembered by its
    coefficients (a cascade meets the same mechanical denominator, the integrator and
    the same delay several times). The values are shared, so they are never written to.

    Parameters
    ----------
    omega_rad_s : array_like
        Angular frequencies, rad/s.
    sigma_per_s : float
        Real part of s, 1/s (0 for the imaginary axis).
    """

    MEMO_SIZE = 64
    """Values remembered at most; a long-lived algebra forgets them all beyond this."""

    def __init__(self, omega_rad_s, sigma_per_s: float = 0.0):
        self.s = sigma_per_s + 1j * np.asarray(omega_rad_s, dtype=float)
        self._memo = {}

    @classmethod
    def at(cls, s) -> "FrequencyAlgebra":
        """The algebra at arbitrary complex points ``s``, 1/s."""
        alg = cls.__new__(cls)
        alg.s = np.asarray(s, dtype=complex)
        alg._memo = {}
        return alg

    def _remember(self, key, value):
        if len(self._memo) >= self.MEMO_SIZE:
            self._memo.clear()
        self._memo[key] = value
        return value

    def delay(self, delay_s: float):
        """exp(-s * delay_s)."""
        if delay_s <= 0:
            return 1.0
        value = self._memo.get(delay_s)
        return self._remember(delay_s, np.exp(-self.s * delay_s)) if value is None else value

    def tf(self, num, den):
        """The rational block num(s)/den(s), coefficients highest power first."""
        return self._polynomial(num) / self._polynomial(den)

    def _polynomial(self, coefficients):
        key = tuple(coefficients)
        value = self._memo.get(key)
        return self._remember(key, _horner(coefficients, self.s)) if value is None else value

    @staticmethod
    def feedback(forward, back):
        """forward / (1 + forward * back)."""
        return forward / (1.0 + forward * back)


def _horner(coefficients, s):
    """Polynomial value by Horner's rule (numpy.polyval's checks cost more than the work here)."""
    value = coefficients[0]
    for c in coefficients[1:]:
        value = value * s + c
    return value if len(coefficients) > 1 else value + 0.0 * s


class ControlAlgebra:
    """Blocks as python-control state-space systems; delays as Pade approximants.

    Composition uses series, parallel and feedback interconnections only, so no
    polynomial division ever inflates the order.

    Parameters
    ----------
    pade_order : int
        Order of the Pade approximant of every delay (numerator and denominator).
    """

    def __init__(self, pade_order: int = 5):
        import control  # interop only: never on the hot path

        self._control = control
        self.pade_order = pade_order
        self.s = None

    def delay(self, delay_s: float):
        """Pade approximant of exp(-s * delay_s)."""
        if delay_s <= 0:
            return 1.0
        num, den = self._control.pade(delay_s, self.pade_order)
        return self.tf(num, den)

    def tf(self, num, den):
        """The rational block num(s)/den(s) as a balanced state-space system.

        Companion forms of Pade approximants span tens of decades; a diagonal
        similarity (LAPACK's balancing, via scipy) keeps the realisation usable.
        """
        from scipy.linalg import matrix_balance
        from scipy.signal import tf2ss

        a, b, c, d = tf2ss(np.asarray(num, float), np.asarray(den, float))
        if a.size:
            _, (scale, _) = matrix_balance(a, permute=False, separate=True)
            a = a * (1.0 / scale)[:, None] * scale[None, :]
            b = b / scale[:, None]
            c = c * scale[None, :]
        return self._control.ss(a, b, c, d)

    def feedback(self, forward, back):
        """forward / (1 + forward * back) as a negative-feedback interconnection."""
        if not isinstance(forward, self._control.StateSpace):
            forward = self._control.ss([], [], [], [[forward]])
        return self._control.feedback(forward, back)


def lowpass(alg, corner_hz: float):
    """First-order low-pass 1/(1 + s/wc); 1 when ``corner_hz`` is 0."""
    return 1.0 if corner_hz <= 0 else alg.tf([1.0], [1.0 / (2.0 * math.pi * corner_hz), 1.0])


def notch(alg, centre_hz: float, zeta_zero: float, zeta_pole: float):
    """(s^2 + 2 zz wn s + wn^2) / (s^2 + 2 zp wn s + wn^2)."""
    wn = 2.0 * math.pi * centre_hz
    return alg.tf([1.0, 2.0 * zeta_zero * wn, wn * wn], [1.0, 2.0 * zeta_pole * wn, wn * wn])


def pi_controller(alg, kp: float, ki: float):
    """kp + ki/s."""
    return alg.tf([kp, ki], [1.0, 0.0]) if ki > 0 else kp


@lru_cache(maxsize=64)
def mechanics_polynomials(axis: Axis) -> tuple:
    """Numerators of w_m/T_m, w_m/T_l, w_l/T_m, w_l/T_l, s*w_m/T_m and their common denominator.

    Coefficients highest power first, motor side, SI. Rigid: 1/((JM+JL) s + B).
    Two-mass (shaft ``Ks = c + k/s``, multiplied through by s)::

        den = s (JM s + BM)(JL s + BL) + (c s + k)((JM + JL) s + BM + BL)
        w_m/T_m = (JL s^2 + (BL + c) s + k) / den

    which is the form in Saarakkala & Hinkkanen, IEEE Trans. Ind. Appl., 2015, when BM = BL = 0.
    """
    jm, bm = axis.motor.inertia_kgm2, axis.motor.viscous_friction_nm_s_per_rad
    jl, bl = axis.load_inertia_kgm2, axis.load_viscous_nm_s_per_rad
    if not axis.load.compliant:
        return (1.0,), (-1.0,), (1.0,), (-1.0,), (1.0, 0.0), (jm + jl, bm + bl)
    c, k = axis.damping_nm_s_per_rad, axis.stiffness_nm_per_rad
    den = (jm * jl, jm * bl + bm * jl + c * (jm + jl), bm * bl + c * (bm + bl) + k * (jm + jl), k * (bm + bl))
    return ((jl, bl + c, k), (-c, -k), (c, k), (-jm, -(bm + c), -k), (jl, bl + c, k, 0.0), den)


class CascadeModel:
    """Every transfer function of the cascade, built lazily over one algebra.

    Attributes are transfer functions (arrays or python-control objects) named
    after what they map; all motor-side SI. See the module docstring.

    Parameters
    ----------
    axis : Axis
    gains : GainSet
    algebra : FrequencyAlgebra or ControlAlgebra
    """

    def __init__(self, axis: Axis, gains: GainSet, algebra):
        self.axis = axis
        self.gains = gains
        self.alg = algebra
        self.delays_s = axis.drive.loop_delays_s()

    # --- mechanics: motor/load speed per motor/load torque -----------------------------
    @cached_property
    def _mechanics(self) -> tuple:
        return mechanics_polynomials(self.axis)

    def _mech(self, index: int):
        p = self._mechanics
        return self.alg.tf(p[index], p[5])

    @cached_property
    def motor_speed_per_torque(self):
        """w_m / T_m, rad/s per N*m."""
        return self._mech(0)

    @cached_property
    def motor_speed_per_load_torque(self):
        """w_m / T_load (load torque reflected to the motor), rad/s per N*m."""
        return self._mech(1)

    @cached_property
    def integrator(self):
        """1/s."""
        return self.alg.tf([1.0], [1.0, 0.0])

    # --- current loop ---------------------------------------------------------------
    @cached_property
    def current_forward(self):
        """Ci * Di: voltage applied per current error, V/A."""
        pi = self.gains.current.pi
        return pi_controller(self.alg, pi.kp, pi.ki) * self.alg.delay(self.delays_s[0])

    @cached_property
    def current_feedback_filter(self):
        return lowpass(self.alg, self.axis.drive.current_filter_hz)

    @cached_property
    def armature_admittance(self):
        """1 / (R + sL), A/V."""
        m = self.axis.motor
        return self.alg.tf([1.0], [m.inductance_h, m.resistance_ohm])

    @cached_property
    def current_plant(self):
        """i / v: 1/Z when back-EMF is decoupled, else 1/(Z + Ke Kt M_mm), A/V."""
        m = self.axis.motor
        if self.gains.current.decouple_back_emf:
            return self.armature_admittance
        kk = m.back_emf_v_s_per_rad * m.torque_constant_nm_per_a
        return self.alg.feedback(self.armature_admittance, kk * self.motor_speed_per_torque)

    @cached_property
    def current_open(self):
        """Current open loop Ci Di G Hi (dimensionless)."""
        return self.current_forward * self.current_plant * self.current_feedback_filter

    @cached_property
    def current_closed(self):
        """i / i* (A/A), back-EMF included unless decoupled."""
        return self.alg.feedback(self.current_forward * self.current_plant, self.current_feedback_filter)

    @cached_property
    def backemf_admittance(self):
        """Ye: current drawn per rad/s of speed through the closed current loop, A*s/rad (0 if decoupled)."""
        if self.gains.current.decouple_back_emf:
            return 0.0
        ke = self.axis.motor.back_emf_v_s_per_rad
        return ke * self.alg.feedback(self.armature_admittance, self.current_forward * self.current_feedback_filter)

    @cached_property
    def speed_plant(self):
        """w_m / i* with the current loop closed, rad/s per A."""
        return self.axis.motor.torque_constant_nm_per_a * self.motor_speed_per_torque * self.current_closed

    @cached_property
    def load_plant(self):
        """w_m / T_load with the current loop closed and the speed loop open, rad/s per N*m."""
        if self.gains.current.decouple_back_emf:
            return self.motor_speed_per_load_torque
        kt = self.axis.motor.torque_constant_nm_per_a
        return self.motor_speed_per_load_torque * self.alg.feedback(
            1.0, kt * self.motor_speed_per_torque * self.backemf_admittance)

    # --- speed loop -----------------------------------------------------------------
    @cached_property
    def speed_forward(self):
        """Cw Dw, A per rad/s."""
        pi = self.gains.speed.pi
        return pi_controller(self.alg, pi.kp, pi.ki) * self.alg.delay(self.delays_s[1])

    @cached_property
    def speed_feedback_filter(self):
        """Low-pass times every feedback notch."""
        g = self.gains.speed
        h = lowpass(self.alg, g.feedback_lowpass_hz)
        for n in g.notches:
            if n.place == "feedback":
                h = h * notch(self.alg, n.centre_hz, n.zeta_zero, n.zeta_pole)
        return h

    @cached_property
    def speed_command_filter(self):
        """Product of the command notches (1 when none)."""
        f = 1.0
        for n in self.gains.speed.notches:
            if n.place == "command":
                f = f * notch(self.alg, n.centre_hz, n.zeta_zero, n.zeta_pole)
        return f

    @cached_property
    def speed_open(self):
        """Speed open loop Cw Dw P Hw (dimensionless)."""
        return self.speed_forward * self.speed_plant * self.speed_feedback_filter

    @cached_property
    def speed_sensitivity(self):
        """1 / (1 + speed open loop)."""
        return self.alg.feedback(1.0, self.speed_open)

    @cached_property
    def speed_closed(self):
        """w_m / w* including the command filter (rad/s per rad/s)."""
        return self.speed_command_filter * self.alg.feedback(
            self.speed_forward * self.speed_plant, self.speed_feedback_filter)

    @cached_property
    def speed_disturbance(self):
        """w_m / T_load with the speed loop closed, position loop open, rad/s per N*m."""
        return self.load_plant * self.speed_sensitivity

    # --- position loop --------------------------------------------------------------
    @cached_property
    def position_forward(self):
        """Cp Dp, (rad/s)/rad."""
        p = self.gains.position
        return pi_controller(self.alg, p.kp_per_s, p.ki_per_s2) * self.alg.delay(self.delays_s[2])

    @cached_property
    def position_open(self):
        """Position open loop Cp Dp (w_m/w*) / s (dimensionless)."""
        return self.position_forward * self.speed_closed * self.integrator

    @cached_property
    def position_closed(self):
        """th_m / th* without feedforward (rad/rad)."""
        return self.alg.feedback(self.position_open, 1.0)

    @cached_property
    def _speed_command_reaction(self):
        """i* per -w_m with speed and position loops closed on motor feedback, A*s/rad."""
        return self.speed_forward * (self.speed_feedback_filter
                                     + self.speed_command_filter * self.position_forward * self.integrator)

    @cached_property
    def position_disturbance_speed(self):
        """w_m / T_load with all three loops closed, rad/s per N*m."""
        return self.load_plant * self.alg.feedback(1.0, self.speed_plant * self._speed_command_reaction)

    @cached_property
    def load_speed_per_load_torque(self):
        """w_load (reflected) / T_load with all loops closed, rad/s per N*m (motor side)."""
        if not self.axis.load.compliant:
            return self.position_disturbance_speed
        kt = self.axis.motor.torque_constant_nm_per_a
        electrical = self.alg.feedback(self.current_forward * self.armature_admittance,
                                       self.current_feedback_filter)
        torque = -kt * (electrical * self._speed_command_reaction + self.backemf_admittance) \
            * self.position_disturbance_speed
        return self._mech(2) * torque + self._mech(3)

    @cached_property
    def dynamic_compliance(self):
        """Load-side position per load-side load torque, (rad or m) per (N*m or N)."""
        r = self.axis.load.ratio
        return self.load_speed_per_load_torque * self.integrator * (1.0 / (r * r))

    @cached_property
    def following_error(self):
        """(th* - th_m)/th* with the velocity and acceleration feedforward (rad/rad).

        Both feedforwards are computed in the position loop (delay Dp); the velocity
        term joins the speed command, the acceleration term ``J_total/Kt * s^2 th*``
        joins the current command after the speed controller.
        """
        p = self.gains.position
        a = self.axis
        dp = self.alg.delay(self.delays_s[2])
        accel_per_current = (a.motor.torque_constant_nm_per_a * self._mech(4) * self.current_closed
                             * self.speed_sensitivity)          # s*w_m per i*, speed loop closed
        ff = dp * (p.velocity_ff * self.speed_closed
                   + p.acceleration_ff * a.total_inertia_kgm2 / a.motor.torque_constant_nm_per_a
                   * accel_per_current)
        return (1.0 - ff) * self.alg.feedback(1.0, self.position_open)


@dataclass(frozen=True)
class LoopTransfer:
    """One loop's open- and closed-loop models as python-control state-space systems.

    Delays are Pade approximants of order :attr:`pade_order`.
    """

    open_loop: object
    closed_loop: object
    pade_order: int


def control_models(axis: Axis, gains: GainSet, pade_order: int = 5) -> dict[str, LoopTransfer]:
    """Every loop as python-control ``StateSpace`` objects, for the user's own scripts.

    Parameters
    ----------
    axis, gains : Axis, GainSet
    pade_order : int
        Order of the Pade approximant replacing each delay.

    Returns
    -------
    dict
        ``{"current": LoopTransfer, "speed": ..., "position": ...}``; open loops are
        dimensionless, closed loops map command to measured value (A/A, (rad/s)/(rad/s), rad/rad).
    """
    model = CascadeModel(axis, gains, ControlAlgebra(pade_order))
    return {name: LoopTransfer(getattr(model, f"{name}_open"), getattr(model, f"{name}_closed"), pade_order)
            for name in ("current", "speed", "position")}
