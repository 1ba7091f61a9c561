"""An axis and gains for the simulation tests (own file, to stay clear of others' conftest).

PMSM 0.5 ohm, 1 mH, Kt 0.45 N*m/A peak, Ke 0.3 V*s/rad (Kt = 1.5 Ke, amplitude-
invariant dq), rotor 2e-4 kg*m^2, rotary load 4e-4 kg*m^2 direct, 325 V bus with
SVPWM, 16 kHz current loop. Current loop by pole-zero cancellation at 1 kHz
(Kp = L*wc, Ki = R*wc; common practice), speed PI at ~150 Hz with Ti = 4/wc,
position P 30 1/s.
"""

from __future__ import annotations

import math
from dataclasses import replace

from core.axis import Axis
from core.drive import Drive
from core.gains import PI, CurrentGains, GainSet, PositionGains, SpeedGains
from core.load import Load
from core.motor import Motor

R, L, KT, KE, JM, JL = 0.5, 1e-3, 0.45, 0.3, 2e-4, 4e-4
B_VISC = 1e-4


def make_motor(**kw) -> Motor:
    base = dict(kind="pmsm", resistance_ohm=R, inductance_h=L, torque_constant_nm_per_a=KT,
                back_emf_v_s_per_rad=KE, inertia_kgm2=JM, viscous_friction_nm_s_per_rad=B_VISC,
                coulomb_friction_nm=0.0, pole_pairs=4, continuous_current_a=4.0, peak_current_a=12.0,
                max_speed_rad_s=500.0)
    base.update(kw)
    return Motor(**base)


def make_drive(**kw) -> Drive:
    base = dict(bus_voltage_v=325.0, current_limit_a=10.0, pwm_frequency_hz=16000.0,
                current_rate_hz=16000.0, speed_rate_hz=16000.0, position_rate_hz=4000.0,
                encoder_counts_per_rev=2.0 ** 20)
    base.update(kw)
    return Drive(**base)


def make_axis(motor: Motor | None = None, load: Load | None = None, drive: Drive | None = None) -> Axis:
    return Axis(motor=motor or make_motor(), load=load or Load(motion="rotary", inertia=JL),
                drive=drive or make_drive(), name="sim test axis")


def make_gains(axis: Axis, *, current_hz: float = 1000.0, speed_hz: float = 150.0, position_per_s: float = 30.0,
               decouple: bool = True, **speed_kw) -> GainSet:
    wc = 2 * math.pi * current_hz
    ws = 2 * math.pi * speed_hz
    kp_w = axis.total_inertia_kgm2 * ws / axis.motor.torque_constant_nm_per_a
    return GainSet(
        current=CurrentGains(PI(axis.motor.inductance_h * wc, axis.motor.resistance_ohm * wc), decouple),
        speed=SpeedGains(PI(kp_w, kp_w * ws / 4.0), **speed_kw),
        position=PositionGains(kp_per_s=position_per_s, velocity_ff=1.0, acceleration_ff=1.0))


def linear_axis() -> Axis:
    """A ball-screw axis: 10 mm lead, 8 kg table, 30 N Coulomb friction."""
    load = Load(motion="linear", gear_ratio=1.0, lead_m=0.01, inertia=8.0, coulomb_friction=30.0)
    return make_axis(load=load)


def compliant_axis() -> Axis:
    """The same motor with the load on a shaft: f_r = sqrt(k (JM+JL)/(JM JL))/2 pi ~ 400 Hz."""
    k = (2 * math.pi * 400.0) ** 2 * JM * JL / (JM + JL)
    return make_axis(load=Load(motion="rotary", inertia=JL, compliant=True, stiffness=k, damping=0.02))


__all__ = ["make_motor", "make_drive", "make_axis", "make_gains", "linear_axis", "compliant_axis", "replace"]
