"""The recorded cascade (core.tape) against the numpy evaluation of the same formulas,
and its loops against python-control.

``FrequencyAlgebra`` evaluates :class:`core.loops.CascadeModel` block by block with
numpy; the tape records the same operations and replays them compiled, so the two
must agree to rounding on every output, every gain-set shape and any points of the
s-plane. python-control (an independent implementation, its delays as Pade
approximants of order 5) checks the loops as well, below the frequencies where the
approximants part from the exact delays.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose

from core import tape
from core.gains import PI, Notch
from core.loops import CascadeModel, FrequencyAlgebra, control_models
from core.presets import builtin_preset

PRESETS = ("belt_gantry", "rotary_table", "dc_spindle")


def _shapes(gains):
    """Gain sets of other shapes: P-only loops, back-EMF not decoupled, notches both
    places, a speed filter, a position integral with acceleration feedforward."""
    speed = gains.speed
    yield gains
    yield replace(gains, current=replace(gains.current, decouple_back_emf=not gains.current.decouple_back_emf))
    yield replace(gains, current=replace(gains.current, pi=PI(gains.current.pi.kp)),
                  speed=replace(speed, pi=PI(speed.pi.kp)))
    yield replace(gains, speed=replace(speed, feedback_lowpass_hz=300.0,
                                       notches=(Notch(250.0), Notch(400.0, 0.1, 0.7, "command"))))
    yield replace(gains, position=replace(gains.position, ki_per_s2=0.05 * gains.position.kp_per_s ** 2,
                                          acceleration_ff=1.0))


def _points():
    """The jw axis, a shifted contour and points in the left half-plane, 1/s."""
    w = np.logspace(-1, 5, 300)
    return np.concatenate([1j * w, 40.0 + 1j * w, -3.0 + 1j * w[::7]])


@pytest.mark.parametrize("name", PRESETS)
def test_replay_equals_the_numpy_evaluation(name):
    """Every recorded output of every gain-set shape, to 1e-8 relative: rounding, which
    the load-side compliance's difference of two near-equal terms at the lowest
    frequencies lifts from ~1e-15 to ~1e-9 in both evaluations alike."""
    p = builtin_preset(name)
    s = _points()
    for gains in _shapes(p.active_gain_set):
        numpy_model = CascadeModel(p.axis, gains, FrequencyAlgebra.at(s))
        values = tape.Tape(p.axis, gains).evaluate(s)
        for row, output in zip(values, tape.OUTPUTS):
            expected = getattr(numpy_model, output)
            assert_allclose(row, expected, rtol=1e-8, atol=1e-12 * np.max(np.abs(expected)), err_msg=output)


def test_a_subset_replays_the_same_values_and_shapes_share_plans():
    """Asking for some outputs replays only what they need, with the same values; gain
    sets of one shape (here: other Kp) reuse one replay plan."""
    p = builtin_preset("belt_gantry")
    s = _points()
    full = tape.Tape(p.axis, p.active_gain_set).evaluate(s)
    subset = tape.Tape(p.axis, p.active_gain_set).evaluate(s, ["position_closed", "current_open"])
    assert_allclose(subset[0], full[tape.OUTPUTS.index("position_closed")], rtol=0, atol=0)
    assert_allclose(subset[1], full[0], rtol=0, atol=0)
    tape._PLANS.clear()
    g = p.active_gain_set
    for k in range(5):
        other = replace(g, speed=replace(g.speed, pi=PI(g.speed.pi.kp * (1 + 0.1 * k), g.speed.pi.ki)))
        tape.Tape(p.axis, other).evaluate(s[:10], tape.LOOP_OUTPUTS)
    assert len(tape._PLANS) == 1


def test_registers_are_reused():
    """The replay keeps far fewer values alive than it computes (register allocation)."""
    p = builtin_preset("rotary_table")
    t = tape.Tape(p.axis, p.active_gain_set)
    ops, n_registers, _ = t._plan(tape.OUTPUTS)
    assert n_registers < len(ops) / 2


@pytest.mark.parametrize("name", PRESETS)
def test_loops_match_python_control(name):
    """Open and closed loops against python-control state-space models of the same
    cascade with Pade(5) delays (core.loops.control_models), where w*Td < 1 and the
    approximant holds: rtol 1e-6, as for the numpy evaluation in test_loops."""
    p = builtin_preset(name)
    td_max = max(p.axis.drive.loop_delays_s())
    w = np.logspace(-1, np.log10(1.0 / td_max), 60)[:-1]
    values = tape.Tape(p.axis, p.active_gain_set).evaluate(1j * w, tape.LOOP_OUTPUTS)
    models = control_models(p.axis, p.active_gain_set, pade_order=5)
    for k, loop in enumerate(("current", "speed", "position")):
        assert_allclose(values[k], models[loop].open_loop(1j * w), rtol=1e-6, err_msg=loop)
        assert_allclose(values[3 + k], models[loop].closed_loop(1j * w), rtol=1e-6, err_msg=loop)
