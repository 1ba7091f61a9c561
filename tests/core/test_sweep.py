"""The vectorised sweep against the scalar analysis and against python-control."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from numpy.testing import assert_allclose

from core.errors import InputError
from core.flags import targets_from_dict
from core.margins import LOOPS, frequency_grid, loop_margins
from core.presets import builtin_preset
from core.sweep import MAX_VARIANTS, SweepSettings, sweep, variant_factors, variant_margins
from core.tolerances import PARAMETERS, ParameterTolerance, Tolerances, factor_dict, tolerances_from_dict, varied_axis

FIELDS = ("crossover_hz", "phase_margin_deg", "gain_margin_db", "sensitivity_peak", "bandwidth_hz",
          "delay_margin_s", "unstable_poles")


def _wide(axis):
    return Tolerances(tuple(ParameterTolerance(n, 0.7, 1.3) for n in PARAMETERS
                            if n != "stiffness" or axis.load.compliant))


@pytest.mark.parametrize("name", ["belt_gantry", "rotary_table", "dc_spindle"])
def test_vectorised_equals_scalar_variant_by_variant(name):
    """Same grid -> same brackets and refinement: equal to 1e-9 (derived: identical arithmetic)."""
    p = builtin_preset(name)
    axis, g = p.axis, p.active_gain_set
    factors = variant_factors(_wide(axis), "montecarlo", 12, seed=3)
    omega = frequency_grid(axis, g)
    vm = variant_margins(axis, g, factors, omega)
    for i, row in enumerate(factors):
        ref, _ = loop_margins(varied_axis(axis, factor_dict(row)), g, omega)
        for loop in LOOPS:
            for f in FIELDS:
                assert_allclose(getattr(vm[loop], f)[i], getattr(ref[loop], f), rtol=1e-9,
                                err_msg=f"{name} variant {i} {loop}.{f}")
            assert bool(vm[loop].stable[i]) == ref[loop].stable


@pytest.mark.parametrize("name", ["belt_gantry", "rotary_table", "dc_spindle"])
def test_default_sweep_grid_is_close_to_the_scalar_grid(name):
    """Coarser default grid (20/decade), crossings refined on the model: PM/GM/bandwidth within 1e-6,
    Ms within 1e-3, same stability, over 300 wide-tolerance variants (derived: same refinement)."""
    p = builtin_preset(name)
    factors = variant_factors(_wide(p.axis), "montecarlo", 300, seed=1)
    fine = variant_margins(p.axis, p.active_gain_set, factors, frequency_grid(p.axis, p.active_gain_set))
    coarse = variant_margins(p.axis, p.active_gain_set, factors)
    for loop in LOOPS:
        assert_allclose(coarse[loop].phase_margin_deg, fine[loop].phase_margin_deg, rtol=1e-6)
        assert_allclose(coarse[loop].gain_margin_db, fine[loop].gain_margin_db, rtol=1e-6)
        assert_allclose(coarse[loop].bandwidth_hz, fine[loop].bandwidth_hz, rtol=1e-6)
        assert_allclose(coarse[loop].sensitivity_peak, fine[loop].sensitivity_peak, rtol=1e-3)
        assert np.array_equal(coarse[loop].stable, fine[loop].stable)


def _rigid_reference(axis, g, pade_order, u=1e3):
    """Rigid cascade from the physics in python-control (frequency in krad/s), delays as Pade."""
    s = u * control.tf("s")
    one = control.tf([1.0], [1.0])

    def pi_tf(kp, ki):
        return kp + ki / s if ki > 0 else kp * one

    def delay(td):
        num, den = control.pade(td * u, pade_order)
        return control.tf(num, den)

    m = axis.motor
    td = axis.drive.loop_delays_s()
    adm = 1 / (m.resistance_ohm + m.inductance_h * s)
    mech = 1 / (axis.total_inertia_kgm2 * s + axis.total_viscous_nm_s_per_rad)
    h_i = one if axis.drive.current_filter_hz <= 0 else 1 / (1 + s / (2 * math.pi * axis.drive.current_filter_hz))
    fwd_i = pi_tf(g.current.pi.kp, g.current.pi.ki) * delay(td[0])
    plant_i = adm if g.current.decouple_back_emf else control.feedback(
        adm, m.back_emf_v_s_per_rad * m.torque_constant_nm_per_a * mech)
    i_closed = control.feedback(fwd_i * plant_i, h_i)
    lp = g.speed.feedback_lowpass_hz
    h_w = one if lp <= 0 else 1 / (1 + s / (2 * math.pi * lp))
    fwd_w = pi_tf(g.speed.pi.kp, g.speed.pi.ki) * delay(td[1])
    w_open = fwd_w * m.torque_constant_nm_per_a * mech * i_closed * h_w
    return {"current": fwd_i * plant_i * h_i, "speed": w_open}


def test_sample_of_variants_equals_python_control_margins():
    """Rigid DC axis, Pade(5) delays: PM within 0.05 deg, GM within 0.05 dB (python-control stability_margins)."""
    p = builtin_preset("dc_spindle")
    axis, g = p.axis, p.active_gain_set
    tol = Tolerances(tuple(ParameterTolerance(n, 0.8, 1.25) for n in ("load_inertia", "resistance",
                                                                       "inductance", "kt", "delays")))
    factors = variant_factors(tol, "montecarlo", 5, seed=7)
    vm = variant_margins(axis, g, factors, frequency_grid(axis, g))
    for i, row in enumerate(factors):
        ref = _rigid_reference(varied_axis(axis, factor_dict(row)), g, 5)
        for loop in ("current", "speed"):
            gm, pm, _, _, _, _ = control.stability_margins(ref[loop])
            assert_allclose(vm[loop].phase_margin_deg[i], pm, atol=0.05, err_msg=f"{loop} PM variant {i}")
            if math.isfinite(gm):
                assert_allclose(vm[loop].gain_margin_db[i], 20 * math.log10(gm), atol=0.05,
                                err_msg=f"{loop} GM variant {i}")


def test_modes_and_seed():
    tol = tolerances_from_dict(builtin_preset("belt_gantry").tolerances, builtin_preset("belt_gantry").axis)
    k = len(tol.varied)
    assert variant_factors(tol, "corners").shape == (1 + 2 ** k, len(PARAMETERS))   # derived: 2^k + nominal
    assert variant_factors(tol, "grid", levels=2).shape == (1 + 2 ** k, len(PARAMETERS))
    a = variant_factors(tol, "montecarlo", 50, seed=4)
    assert_allclose(a, variant_factors(tol, "montecarlo", 50, seed=4))
    assert_allclose(a[0], 1.0)


@pytest.mark.parametrize("kw", [dict(mode="spiral"), dict(mode="montecarlo", count=0),
                                dict(mode="montecarlo", count=MAX_VARIANTS + 1), dict(mode="grid", levels=1)])
def test_bad_sweep_input(kw):
    p = builtin_preset("belt_gantry")
    with pytest.raises(InputError):
        variant_factors(tolerances_from_dict(p.tolerances, p.axis), **kw)


def test_full_sweep_reports_worst_cases_envelopes_ranking_and_flags():
    p = builtin_preset("belt_gantry")
    tol = tolerances_from_dict(p.tolerances, p.axis)
    r = sweep(p.axis, p.active_gain_set, tol, SweepSettings(inertia_ratio_max=4.0), targets_from_dict(p.targets))
    w = r.worst_of("speed", "phase_margin_deg")
    assert w.value == pytest.approx(np.min(r.margins["speed"].phase_margin_deg))
    assert w.value <= w.nominal
    env = r.bode_magnitude["speed"]
    assert np.all(env.low <= env.nominal + 1e-9) and np.all(env.nominal <= env.high + 1e-9)
    assert len(r.ranking) == len(tol.varied)
    # Inertia ratio 5.36:1 nominal, x1.5 of load at the high end > 4 (the limit set here): flagged.
    assert any("inertia ratio" in f.message for f in r.flags)
