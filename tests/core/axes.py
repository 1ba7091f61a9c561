"""Test axes built through the core's public constructors, for the reference tests.

Every axis here is invented for the tests (not a catalogue motor); the values are
round numbers of the size of a small servo motor, so that each closed-form case of
``/work/shared/CHECKS.md`` is reached by choosing the drive's delays and filter and
the gains, not by reaching into the core.
"""

from __future__ import annotations

import math

import control

from core.axis import Axis
from core.drive import Drive
from core.gains import PI, CurrentGains, GainSet, Notch, PositionGains, SpeedGains
from core.load import Load
from core.motor import Motor

# A small brushed-DC servo motor (invented values).
R_OHM = 1.2
L_H = 2.4e-3
KT = 0.5          # N*m/A, = Ke in SI for a DC motor
J_MOTOR = 2.0e-4  # kg*m^2

# Two-mass case of CHECKS.md: JM = JL = 0.005 kg*m^2, k = 700 N*m/rad.
TWO_MASS_J = 0.005
TWO_MASS_K = 700.0


def motor(viscous: float = 0.0, inertia: float = J_MOTOR, resistance: float = R_OHM,
          inductance: float = L_H, kt: float = KT) -> Motor:
    """The test motor; viscous friction 0 unless asked (the SO plant is a pure integrator)."""
    return Motor("dc", resistance, inductance, kt, kt, inertia, viscous_friction_nm_s_per_rad=viscous)


def drive(current_delay_s: float = 0.0, speed_delay_s: float = 0.0, position_delay_s: float = 0.0,
          current_filter_hz: float = 0.0, current_rate_hz: float = 16e3) -> Drive:
    """A drive with the three loop delays given as totals (0 allowed).

    PWM = current rate (one sample per PWM period), speed loop at the current rate,
    position loop at half of it: all within the rate rules of :class:`Drive`.
    """
    return Drive(bus_voltage_v=300.0, current_limit_a=20.0, pwm_frequency_hz=current_rate_hz,
                 current_rate_hz=current_rate_hz, speed_rate_hz=current_rate_hz,
                 position_rate_hz=current_rate_hz / 2,
                 current_delay_s=current_delay_s, speed_delay_s=speed_delay_s,
                 position_delay_s=position_delay_s, current_filter_hz=current_filter_hz)


def rigid_axis(viscous: float = 0.0, load_inertia: float = 0.0, load_viscous: float = 0.0,
               gear_ratio: float = 1.0, **drive_kw) -> Axis:
    """Motor + rigid load + :func:`drive` (keyword arguments go to the drive)."""
    load = Load("rotary", gear_ratio=gear_ratio, inertia=load_inertia, viscous_friction=load_viscous)
    return Axis(motor(viscous), load, drive(**drive_kw), name="test rigid axis")


def two_mass_axis(damping: float = 0.0, viscous: float = 0.0, **drive_kw) -> Axis:
    """CHECKS.md's two-mass case: JM = JL = 0.005 kg*m^2, k = 700 N*m/rad, direct drive."""
    load = Load("rotary", gear_ratio=1.0, inertia=TWO_MASS_J, compliant=True,
                stiffness=TWO_MASS_K, damping=damping)
    return Axis(motor(viscous, inertia=TWO_MASS_J), load, drive(**drive_kw), name="test two-mass axis")


def gains(current: PI, speed: PI, position_kp: float = 50.0, position_ki: float = 0.0,
          decouple: bool = True, speed_lowpass_hz: float = 0.0, notches: tuple[Notch, ...] = ()) -> GainSet:
    """A gain set from the three controllers (feedforward off: the loops alone)."""
    return GainSet(CurrentGains(current, decouple),
                   SpeedGains(speed, speed_lowpass_hz, notches),
                   PositionGains(position_kp, position_ki, 0.0, 0.0), name="test")


def cancelling_current_pi(wc_rad_s: float, resistance: float = R_OHM, inductance: float = L_H) -> PI:
    """Pole-zero cancellation (common practice): Kp = L wc, Ki = R wc."""
    return PI(inductance * wc_rad_s, resistance * wc_rad_s)


def nominal_gains(axis: Axis, current_bw_hz: float = 1000.0, speed_bw_hz: float = 150.0,
                  speed_zero_ratio: float = 4.0, position_ratio: float = 4.0,
                  speed_kp_scale: float = 1.0, **kw) -> GainSet:
    """Separated loops on ``axis``: cancelling current PI, speed PI for ``speed_bw_hz``.

    ``speed_kp_scale`` multiplies the speed Kp (and Ki) to sweep towards instability.
    """
    wc_i = 2 * math.pi * current_bw_hz
    wc_w = 2 * math.pi * speed_bw_hz
    kp_w = axis.total_inertia_kgm2 * wc_w / axis.motor.torque_constant_nm_per_a * speed_kp_scale
    speed = PI(kp_w, kp_w * wc_w / speed_zero_ratio)
    return gains(cancelling_current_pi(wc_i, axis.motor.resistance_ohm, axis.motor.inductance_h), speed,
                 position_kp=wc_w / position_ratio, **kw)


# --- python-control references, written from the physics (not from core.loops) ---------

def reference_loops(axis: Axis, g: GainSet, pade_order: int | None = None,
                    omega_unit_rad_s: float = 1.0) -> dict:
    """The rigid cascade from the physics, with python-control transfer functions.

    Armature 1/(R + sL); mechanics 1/(J s + B); back-EMF Ke w fed back into the voltage
    unless decoupled; T = Kt i; PI controllers Kp + Ki/s; first-order feedback filters
    and feedback notches in the feedback paths; command notches before the speed loop;
    position loop Cp Dp (w/w*) / s; each loop broken at its controller output.

    Parameters
    ----------
    pade_order : int, optional
        None: the delay-free model (delays left out). Otherwise each delay is
        ``control.pade(Td, pade_order)``.
    omega_unit_rad_s : float
        Frequency unit of the returned models' variable: s = omega_unit * p, so that a
        model of order 20 keeps polynomial coefficients python-control can root
        (evaluate at ``1j * omega / omega_unit``; margins' frequencies come out in it).
    """
    u = omega_unit_rad_s
    s = u * control.tf("s")
    one = control.tf([1.0], [1.0])

    def pi_tf(pi: PI):
        return pi.kp + pi.ki / s if pi.ki > 0 else pi.kp * one

    def lowpass_tf(corner_hz):
        return one if corner_hz <= 0 else 1 / (1 + s / (2 * math.pi * corner_hz))

    def notch_tf(n: Notch):
        wn = 2 * math.pi * n.centre_hz
        return (s**2 + 2 * n.zeta_zero * wn * s + wn**2) / (s**2 + 2 * n.zeta_pole * wn * s + wn**2)

    def delay(td):
        if pade_order is None or td <= 0:
            return one
        num, den = control.pade(td * u, pade_order)
        return control.tf(num, den)

    m = axis.motor
    r, l, kt, ke = m.resistance_ohm, m.inductance_h, m.torque_constant_nm_per_a, m.back_emf_v_s_per_rad
    j, b = axis.total_inertia_kgm2, axis.total_viscous_nm_s_per_rad
    td = axis.drive.loop_delays_s()
    admittance = 1 / (r + l * s)
    mech = 1 / (j * s + b)
    plant_i = admittance if g.current.decouple_back_emf else control.feedback(admittance, ke * kt * mech)
    h_i = lowpass_tf(axis.drive.current_filter_hz)
    fwd_i = pi_tf(g.current.pi) * delay(td[0])
    i_open = fwd_i * plant_i * h_i
    i_closed = control.feedback(fwd_i * plant_i, h_i)
    h_w, f_w = lowpass_tf(g.speed.feedback_lowpass_hz), one
    for n in g.speed.notches:
        if n.place == "feedback":
            h_w = h_w * notch_tf(n)
        else:
            f_w = f_w * notch_tf(n)
    fwd_w = pi_tf(g.speed.pi) * delay(td[1])
    plant_w = kt * mech * i_closed
    w_open = fwd_w * plant_w * h_w
    w_closed = f_w * control.feedback(fwd_w * plant_w, h_w)
    p_open = pi_tf(g.position.pi) * delay(td[2]) * w_closed / s
    p_closed = control.feedback(p_open, 1)
    return {"current_open": i_open, "current_closed": i_closed, "speed_open": w_open,
            "speed_closed": w_closed, "position_open": p_open, "position_closed": p_closed}


def reference_axis(delays: bool) -> tuple[Axis, GainSet]:
    """Viscous friction, a reflected load, a current filter, back-EMF not decoupled,
    a speed low-pass, a feedback and a command notch: every block of the rigid cascade."""
    drive_kw = dict(current_filter_hz=8000.0)
    if delays:
        drive_kw.update(current_delay_s=1.5 / 16e3, speed_delay_s=1.5 / 16e3, position_delay_s=1 / 8e3)
    axis = rigid_axis(viscous=1e-4, load_inertia=1.2e-2, load_viscous=8e-3, gear_ratio=5.0, **drive_kw)
    g = nominal_gains(axis, 1000.0, 150.0, decouple=False, speed_lowpass_hz=1500.0,
                      notches=(Notch(400.0, 0.1, 0.5, "feedback"), Notch(300.0, 0.05, 0.4, "command")))
    return axis, g
