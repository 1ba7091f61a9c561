"""The cascade written once: current, speed and position loops over any algebra.

The same formulas serve two purposes:

* :class:`FrequencyAlgebra` evaluates every block at complex frequencies with the
  delays exact (``exp(-s Td)``): that is what margins, Bode plots and the linear
  time responses are computed from. Evaluating at ``s = sigma + j w`` also serves
  the Nyquist count and the numerical Laplace inversion in :mod:`core.responses`.
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
from functools import cached_property

import numpy as np

from core.axis import Axis
from core.gains import GainSet


class FrequencyAlgebra:
    """Blocks as complex arrays at ``s = sigma + j*omega``; delays exact.

    Parameters
    ----------
    omega_rad_s : array_like
        Angular frequencies, rad/s.
    sigma_per_s : float
        Real part of s, 1/s (0 for the imaginary axis).
    """

    def __init__(self, omega_rad_s, sigma_per_s: float = 0.0):
        self.s = sigma_per_s + 1j * np.asarray(omega_rad_s, dtype=float)

    def delay(self, delay_s: float):
        """exp(-s * delay_s)."""
        return np.exp(-self.s * delay_s) if delay_s > 0 else 1.0


class ControlAlgebra:
    """Blocks as python-control transfer functions; delays as Pade approximants.

    Parameters
    ----------
    pade_order : int
        Order of the Pade approximant of every delay (numerator and denominator).
    """

    def __init__(self, pade_order: int = 6):
        import control  # interop only: never on the hot path

        self._control = control
        self.pade_order = pade_order
        self.s = control.tf("s")

    def delay(self, delay_s: float):
        """Pade approximant of exp(-s * delay_s)."""
        if delay_s <= 0:
            return self._control.tf([1.0], [1.0])
        num, den = self._control.pade(delay_s, self.pade_order)
        return self._control.tf(num, den)


def lowpass(s, corner_hz: float):
    """First-order low-pass 1/(1 + s/wc); 1 when ``corner_hz`` is 0."""
    return 1.0 if corner_hz <= 0 else 1.0 / (1.0 + s / (2.0 * math.pi * corner_hz))


def notch(s, centre_hz: float, zeta_zero: float, zeta_pole: float):
    """(s^2 + 2 zz wn s + wn^2) / (s^2 + 2 zp wn s + wn^2)."""
    wn = 2.0 * math.pi * centre_hz
    return (s * s + 2.0 * zeta_zero * wn * s + wn * wn) / (s * s + 2.0 * zeta_pole * wn * s + wn * wn)


def pi_controller(s, kp: float, ki: float):
    """kp + ki/s."""
    return kp + ki / s if ki > 0 else kp + 0.0 * s


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
        self.s = algebra.s
        self.delays_s = axis.drive.loop_delays_s()

    # --- mechanics: motor/load speed per motor/load torque -----------------------------
    @cached_property
    def _mech(self):
        a, s = self.axis, self.s
        zm = a.motor.inertia_kgm2 * s + a.motor.viscous_friction_nm_s_per_rad
        zl = a.load_inertia_kgm2 * s + a.load_viscous_nm_s_per_rad
        if not a.load.compliant:
            m = 1.0 / (zm + zl)
            return m, -m, m, -m
        # Multiply the shaft (c + k/s) through by s to keep every term polynomial.
        ks = a.damping_nm_s_per_rad * s + a.stiffness_nm_per_rad
        det = s * zm * zl + ks * (zm + zl)
        return (s * zl + ks) / det, -ks / det, ks / det, -(s * zm + ks) / det

    @property
    def motor_speed_per_torque(self):
        """w_m / T_m, rad/s per N*m."""
        return self._mech[0]

    @property
    def motor_speed_per_load_torque(self):
        """w_m / T_load (load torque reflected to the motor), rad/s per N*m."""
        return self._mech[1]

    # --- current loop ---------------------------------------------------------------
    @cached_property
    def current_controller(self):
        pi = self.gains.current.pi
        return pi_controller(self.s, pi.kp, pi.ki)

    @cached_property
    def current_forward(self):
        """Ci * Di: voltage applied per current error, V/A."""
        return self.current_controller * self.alg.delay(self.delays_s[0])

    @cached_property
    def current_feedback_filter(self):
        return lowpass(self.s, self.axis.drive.current_filter_hz)

    @cached_property
    def armature_impedance(self):
        """Z = R + sL, ohm."""
        m = self.axis.motor
        return m.resistance_ohm + m.inductance_h * self.s

    @cached_property
    def current_plant(self):
        """i / v: 1/Z when back-EMF is decoupled, else 1/(Z + Ke Kt M_mm), A/V."""
        m = self.axis.motor
        if self.gains.current.decouple_back_emf:
            return 1.0 / self.armature_impedance
        return 1.0 / (self.armature_impedance
                      + m.back_emf_v_s_per_rad * m.torque_constant_nm_per_a * self.motor_speed_per_torque)

    @cached_property
    def current_open(self):
        """Current open loop Ci Di G Hi (dimensionless)."""
        return self.current_forward * self.current_plant * self.current_feedback_filter

    @cached_property
    def current_closed(self):
        """i / i* (A/A)."""
        return self.current_forward * self.current_plant / (1.0 + self.current_open)

    @cached_property
    def _electrical(self):
        """(i/i* ignoring back-EMF, A/A; back-EMF admittance Ye = i / -w, A per rad/s)."""
        m = self.axis.motor
        den = self.armature_impedance + self.current_forward * self.current_feedback_filter
        te = self.current_forward / den
        ye = 0.0 if self.gains.current.decouple_back_emf else m.back_emf_v_s_per_rad / den
        return te, ye

    @cached_property
    def _backemf_loop(self):
        te, ye = self._electrical
        return 1.0 + self.motor_speed_per_torque * self.axis.motor.torque_constant_nm_per_a * ye

    @cached_property
    def speed_plant(self):
        """w_m / i* with the current loop closed, rad/s per A."""
        te, _ = self._electrical
        kt = self.axis.motor.torque_constant_nm_per_a
        return self.motor_speed_per_torque * kt * te / self._backemf_loop

    @cached_property
    def load_plant(self):
        """w_m / T_load with the current loop closed and the speed loop open, rad/s per N*m."""
        return self.motor_speed_per_load_torque / self._backemf_loop

    # --- speed loop -----------------------------------------------------------------
    @cached_property
    def speed_controller(self):
        pi = self.gains.speed.pi
        return pi_controller(self.s, pi.kp, pi.ki)

    @cached_property
    def speed_forward(self):
        """Cw Dw, A per rad/s."""
        return self.speed_controller * self.alg.delay(self.delays_s[1])

    @cached_property
    def speed_feedback_filter(self):
        """Low-pass times every feedback notch."""
        g = self.gains.speed
        h = lowpass(self.s, g.feedback_lowpass_hz)
        for n in g.notches:
            if n.place == "feedback":
                h = h * notch(self.s, n.centre_hz, n.zeta_zero, n.zeta_pole)
        return h

    @cached_property
    def speed_command_filter(self):
        """Product of the command notches (1 when none)."""
        f = 1.0
        for n in self.gains.speed.notches:
            if n.place == "command":
                f = f * notch(self.s, n.centre_hz, n.zeta_zero, n.zeta_pole)
        return f

    @cached_property
    def speed_open(self):
        """Speed open loop Cw Dw P Hw (dimensionless)."""
        return self.speed_forward * self.speed_plant * self.speed_feedback_filter

    @cached_property
    def speed_closed(self):
        """w_m / w* including the command filter (rad/s per rad/s)."""
        return self.speed_command_filter * self.speed_forward * self.speed_plant / (1.0 + self.speed_open)

    @cached_property
    def speed_disturbance(self):
        """w_m / T_load with the speed loop closed, position loop open, rad/s per N*m."""
        return self.load_plant / (1.0 + self.speed_open)

    # --- position loop --------------------------------------------------------------
    @cached_property
    def position_forward(self):
        """Cp Dp, (rad/s)/rad."""
        p = self.gains.position
        return pi_controller(self.s, p.kp_per_s, p.ki_per_s2) * self.alg.delay(self.delays_s[2])

    @cached_property
    def position_open(self):
        """Position open loop Cp Dp (w_m/w*) / s (dimensionless)."""
        return self.position_forward * self.speed_closed / self.s

    @cached_property
    def position_closed(self):
        """th_m / th* without feedforward (rad/rad)."""
        return self.position_open / (1.0 + self.position_open)

    @cached_property
    def position_disturbance_speed(self):
        """w_m / T_load with all three loops closed, rad/s per N*m."""
        k = self.speed_forward * (self.speed_feedback_filter
                                  + self.speed_command_filter * self.position_forward / self.s)
        return self.load_plant / (1.0 + self.speed_plant * k)

    @cached_property
    def load_speed_per_load_torque(self):
        """w_load (reflected) / T_load with all loops closed, rad/s per N*m (motor side)."""
        if not self.axis.load.compliant:
            return self.position_disturbance_speed
        te, ye = self._electrical
        kt = self.axis.motor.torque_constant_nm_per_a
        k = self.speed_forward * (self.speed_feedback_filter
                                  + self.speed_command_filter * self.position_forward / self.s)
        wm = self.position_disturbance_speed
        torque = -kt * (te * k + ye) * wm          # motor torque per load torque
        _, _, m_lm, m_ll = self._mech
        return m_lm * torque + m_ll

    @cached_property
    def dynamic_compliance(self):
        """Load-side position per load-side load torque, (rad or m) per (N*m or N)."""
        r = self.axis.load.ratio
        return self.load_speed_per_load_torque / (self.s * r * r)

    @cached_property
    def following_error(self):
        """(th* - th_m)/th* with the velocity and acceleration feedforward (rad/rad)."""
        p = self.gains.position
        a = self.axis
        s = self.s
        dp = self.alg.delay(self.delays_s[2])
        # Velocity FF joins the speed command; acceleration FF joins the current command
        # (J_total / Kt * s^2), both computed in the position loop.
        speed_path = self.speed_closed / s                  # th_m per w*
        accel_gain = a.total_inertia_kgm2 / a.motor.torque_constant_nm_per_a
        current_path = self.speed_plant / (1.0 + self.speed_open) / s   # th_m per i* (speed loop closed)
        ff = dp * (p.velocity_ff * s * speed_path + p.acceleration_ff * accel_gain * s * s * current_path)
        return (1.0 - ff) / (1.0 + self.position_open)


@dataclass(frozen=True)
class LoopTransfer:
    """One loop's open- and closed-loop models as python-control transfer functions.

    Delays are Pade approximants of order :attr:`pade_order`.
    """

    open_loop: object
    closed_loop: object
    pade_order: int


def control_models(axis: Axis, gains: GainSet, pade_order: int = 6) -> dict[str, LoopTransfer]:
    """Every loop as python-control ``TransferFunction`` objects, for the user's own scripts.

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
    import control

    model = CascadeModel(axis, gains, ControlAlgebra(pade_order))
    out = {}
    for name in ("current", "speed", "position"):
        ol = control.minreal(getattr(model, f"{name}_open"), verbose=False)
        cl = control.minreal(getattr(model, f"{name}_closed"), verbose=False)
        out[name] = LoopTransfer(ol, cl, pade_order)
    return out
