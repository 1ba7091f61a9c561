"""The margin searches: the compiled row steps on functions with known roots and minima,
and loop_margins against a brute-force scan of the same model where a resonance is sharp.

The references here are independent of the search: roots and minima in closed form
(derived), scipy's brentq, and the exact-delay model evaluated on two million
log-spaced frequencies (derived: a scan that no refinement step can miss).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import brentq

from core.margins import LOOPS, _Evaluator, frequency_grid, loop_margins, probe_points
from core.presets import builtin_preset
from core.search_kernels import PROBES, deepest_minima, dip_after_probe, dip_step, probe_seed
from core.sweep import variant_factors
from core.tolerances import PARAMETERS, ParameterTolerance, Tolerances, factor_dict, varied_axis


@pytest.mark.parametrize("f", [lambda x: np.tanh(3 * (x - 0.31)), lambda x: np.exp(x) - math.exp(0.3217),
                               lambda x: np.cos(4 * x) - math.cos(1.25)])
def test_probe_seed_estimate_is_the_root_to_1e12(f):
    """On smooth residuals the probe's polynomial root is the root (scipy brentq as reference)."""
    a, b = np.array([0.3]), np.array([0.33])
    fp = f(probe_points(a, b))
    na, nb, fa, fb, x = probe_seed(a, b, f(a), f(b), fp)
    root = brentq(lambda t: float(f(np.array([t]))[0]), 0.3, 0.33, xtol=1e-15)
    assert na[0] <= root <= nb[0]
    assert abs(x[0] - root) < 1e-12
    assert np.sign(fa[0]) != np.sign(fb[0])
    assert fp.shape == (1, PROBES)


def test_probe_seed_without_a_sign_change_keeps_the_bracket():
    """NaN residuals (an overflowed loop): the bracket is kept and the estimate stays inside it."""
    a, b = np.array([1.0]), np.array([2.0])
    na, nb, _, _, x = probe_seed(a, b, np.array([-1.0]), np.array([1.0]), np.full((1, PROBES), np.nan))
    assert (na[0], nb[0]) == (1.0, 2.0) and 1.0 <= x[0] <= 2.0


def test_dip_after_probe_finds_a_smooth_minimum_in_one_step():
    """y = (x - 0.013)^2 + 0.1 (x - 0.013)^3 on a grid triple: the estimate is the minimum
    (derived) and the prediction equals the value there."""
    def y(x):
        return (x - 0.013) ** 2 + 0.1 * (x - 0.013) ** 3
    x = np.array([[-0.03, 0.0, 0.03]])
    xp = np.array([[-0.02, -0.01, 0.01, 0.02]])
    tx, ty, est, pred = dip_after_probe(x, y(x), xp, y(xp))
    assert abs(est[0] - 0.013) < 1e-9
    assert abs(pred[0] - y(est)[0]) < 1e-12
    assert tx[0, 0] < est[0] < tx[0, 2]


def test_dip_step_stops_where_the_prediction_holds_and_narrows_otherwise():
    x = np.array([[0.0, 1.0, 2.0], [0.0, 1.0, 2.0]])
    y = np.array([[1.0, 0.0, 1.0], [1.0, 0.0, 1.0]])
    v, yv = np.array([0.5, 1.5]), np.array([-0.1, 0.2])
    nx, ny, nv, npred, done = dip_step(x, y, v, yv, np.array([-0.1, 0.0]), 1, 1e-7, 12)
    assert list(done) == [True, False]
    assert_allclose(nx[0], [0.0, 0.5, 1.0])            # lower point to the left: it becomes the middle
    assert_allclose(nx[1], [0.0, 1.0, 1.5])            # higher point to the right: it replaces the end
    assert nx[1, 0] < nv[1] < nx[1, 2]


def test_deepest_minima_in_order_and_only_above():
    d = np.array([5.0, 1.0, 4.0, 0.5, 3.0, 2.0, 6.0])
    assert list(deepest_minima(d, 3, 0.0)) == [3, 1, 5]
    assert list(deepest_minima(d, 3, 1.5)) == [5]
    assert list(deepest_minima(np.array([1.0, 2.0, 3.0]), 3, 1.5)) == []
    assert list(deepest_minima(np.array([1.0, 2.0, 3.0]), 3, 0.0)) == [1]


def _sharp_variant(name, gain_set, row):
    """A variant of a demo axis whose resonance pokes through 0 dB between grid points."""
    p = builtin_preset(name)
    tol = Tolerances(tuple(ParameterTolerance(n, 0.6, 1.4) for n in PARAMETERS
                           if n != "stiffness" or p.axis.load.compliant))
    factors = variant_factors(tol, "montecarlo", 150, seed=7)
    gains = next(g for g in p.gain_sets if g.name == gain_set)
    return varied_axis(p.axis, factor_dict(factors[row])), gains


@pytest.mark.parametrize("name, gain_set, row, loop", [
    ("belt_gantry", "production", 36, "position"),
    ("belt_gantry", "production", 9, "position"),
    ("rotary_table", "production", 74, "position"),
    ("rotary_table", "production", 31, "speed"),
])
def test_sharp_resonance_crossings_and_ms_equal_a_dense_scan(name, gain_set, row, loop):
    """Every gain crossover and Ms of a loop with a sharp resonance equal those of the same
    model scanned on 2e6 log-spaced points (derived: brute force)."""
    axis, gains = _sharp_variant(name, gain_set, row)
    w = frequency_grid(axis, gains)
    dense = np.logspace(np.log10(w[0]), np.log10(w[-1]), 2_000_000)
    ol, _ = _Evaluator(axis, gains).at_omega(dense)
    L = ol[LOOPS.index(loop)]
    r = np.log(np.abs(L))
    k = np.nonzero(np.signbit(r[:-1]) != np.signbit(r[1:]))[0]
    m = loop_margins(axis, gains)[0][loop]
    step = dense[1] / dense[0] - 1.0
    assert len(m.gain_crossovers_hz) == len(k)
    assert_allclose(m.gain_crossovers_hz, dense[k] / (2 * math.pi), rtol=2 * step)
    assert_allclose(m.sensitivity_peak, 1.0 / np.min(np.abs(1.0 + L)), rtol=1e-5)
