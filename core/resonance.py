"""Resonance filters for a two-mass load: a proposed notch or low-pass, and what it buys.

The notch ``N(s) = (s^2 + 2 zz wn s + wn^2)/(s^2 + 2 zp wn s + wn^2)`` has depth
``zz/zp`` at wn (Ellis, "Control System Design Guide", 4th ed. 2012, from memory).
It is centred on the two-mass resonance ``fr = sqrt(k (JM+JL)/(JM JL)) / 2 pi``
(Saarakkala & Hinkkanen, IEEE Trans. Ind. Appl., 2015); its width (zeta_pole) is
chosen so that the resonance stays within the notch's -3 dB band over the whole
stiffness and inertia tolerance, and its depth so that the loop gain at the
resonance peak falls at least ``gm_target`` below 0 dB.

"Gain margin at the resonance" here is ``-20 log10 max|L_speed|`` over the band
0.8 fr_min .. 1.25 fr_max: how far the resonance peak of the speed open loop stays
below 0 dB (derived; the gain margin that matters for a resonance the phase can
carry anywhere).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from core.axis import Axis
from core.errors import InputError
from core.gains import GainSet, Notch
from core.loops import CascadeModel, notch
from core.margins import loop_margins
from core.sweep import VariantAlgebra, VariantAxis
from core.tolerances import PARAMETERS, Tolerances


def notch_response(centre_hz: float, zeta_zero: float, zeta_pole: float, f_hz) -> np.ndarray:
    """N(j 2 pi f) of the notch (complex, dimensionless)."""
    alg = VariantAlgebra(2j * math.pi * np.asarray(f_hz, dtype=float))
    return notch(alg, centre_hz, zeta_zero, zeta_pole)


@dataclass(frozen=True)
class FilterProposal:
    """A proposed speed-feedback filter and its effect.

    Attributes
    ----------
    kind : {"notch", "lowpass"}
    centre_hz : float
        Notch centre (or low-pass corner), Hz.
    width_hz : float
        Notch -3 dB width ~ 2 zeta_pole fn, Hz (NaN for a low-pass).
    depth_db : float
        Attenuation at the resonance, dB (negative).
    gains : GainSet
        The gain set with the filter added (notch) or the feedback low-pass lowered.
    resonance_margin_before_db, resonance_margin_after_db : float
        Gain margin at the resonance, nominal, dB.
    resonance_margin_worst_before_db, resonance_margin_worst_after_db : float
        The same, worst over the stiffness (and inertia) tolerance, dB.
    phase_cost_deg : float
        Phase the filter adds at the nominal speed crossover, deg (negative = lag).
    gain_margin_before_db, gain_margin_after_db : float
        The speed loop's ordinary gain margin, nominal, dB.
    """

    kind: str
    centre_hz: float
    width_hz: float
    depth_db: float
    gains: GainSet
    resonance_margin_before_db: float
    resonance_margin_after_db: float
    resonance_margin_worst_before_db: float
    resonance_margin_worst_after_db: float
    phase_cost_deg: float
    gain_margin_before_db: float
    gain_margin_after_db: float


def _stiffness_rows(tolerances: Tolerances, n: int = 9) -> np.ndarray:
    ts, tj = tolerances.get("stiffness"), tolerances.get("load_inertia")
    ks = np.linspace(ts.low_factor, ts.high_factor, n)
    js = np.unique([tj.low_factor, 1.0, tj.high_factor])
    rows = np.ones((len(ks) * len(js), len(PARAMETERS)))
    rows[:, PARAMETERS.index("stiffness")] = np.repeat(ks, len(js))
    rows[:, PARAMETERS.index("load_inertia")] = np.tile(js, len(ks))
    return rows


def resonance_margins_db(axis: Axis, gains: GainSet, rows: np.ndarray) -> np.ndarray:
    """Gain margin at the resonance per variant row, dB (see module docstring)."""
    va = VariantAxis(axis, rows)
    fr = va.resonance_hz
    f = np.logspace(math.log10(0.8 * fr.min()), math.log10(1.25 * fr.max()), 400)
    model = CascadeModel(va, gains, VariantAlgebra(2j * math.pi * f))
    mag = np.abs(np.broadcast_to(model.speed_open, (len(rows), len(f))))
    return -20.0 * np.log10(mag.max(axis=1))


def propose_filter(axis: Axis, gains: GainSet, tolerances: Tolerances | None = None, kind: str = "notch",
                   gm_target_db: float = 6.0, min_depth_db: float = -6.0, max_depth_db: float = -40.0
                   ) -> FilterProposal:
    """Propose a speed-feedback notch (or low-pass) for the two-mass resonance.

    Parameters
    ----------
    axis : Axis
        Must have a compliant load.
    gains : GainSet
    tolerances : Tolerances, optional
        Stiffness and load-inertia ranges the filter must cover.
    kind : {"notch", "lowpass"}
    gm_target_db : float
        Wanted gain margin at the resonance, dB.
    min_depth_db, max_depth_db : float
        Shallowest and deepest notch proposed, dB.

    Returns
    -------
    FilterProposal
    """
    if not axis.load.compliant:
        raise InputError("load.compliant", False, "a compliant (two-mass) load for a resonance filter")
    if kind not in ("notch", "lowpass"):
        raise InputError("kind", kind, '"notch" or "lowpass"')
    tolerances = tolerances or Tolerances()
    rows = _stiffness_rows(tolerances)
    va = VariantAxis(axis, rows)
    fr_all = va.resonance_hz
    fr = axis.resonance_hz
    before = resonance_margins_db(axis, gains, rows[:1] * 0 + 1.0)[0]
    before_worst = float(resonance_margins_db(axis, gains, rows).min())
    need_db = -(gm_target_db - before_worst) - 3.0          # 3 dB more than strictly needed
    depth = float(np.clip(min(need_db, min_depth_db), max_depth_db, min_depth_db))
    m0, _ = loop_margins(axis, gains)
    fc = m0["speed"].crossover_hz
    if kind == "notch":
        # -3 dB band of a deep notch ~ fn (1 +- zeta_pole): cover fr_min .. fr_max.
        span = max(fr_all.max() / fr - 1.0, 1.0 - fr_all.min() / fr)
        zeta_pole = float(np.clip(1.2 * span, 0.2, 1.0))
        zeta_zero = zeta_pole * 10 ** (depth / 20.0)
        filt = Notch(fr, zeta_zero, zeta_pole, "feedback")
        new = replace(gains, speed=replace(gains.speed, notches=gains.speed.notches + (filt,)))
        phase = float(np.degrees(np.angle(notch_response(fr, zeta_zero, zeta_pole, fc))))
        centre, width = fr, 2.0 * zeta_pole * fr
    else:
        # First-order |1/(1 + j f/fc)| reaches the depth at fr_min.
        corner = float(fr_all.min() / math.sqrt(10 ** (-depth / 10.0) - 1.0))
        old = gains.speed.feedback_lowpass_hz
        corner = min(corner, old) if old > 0 else corner
        new = replace(gains, speed=replace(gains.speed, feedback_lowpass_hz=corner))
        phase = float(-math.degrees(math.atan(fc / corner)) + (math.degrees(math.atan(fc / old)) if old > 0 else 0.0))
        centre, width = corner, math.nan
    new = new.renamed(f"{gains.name} + {kind}", f"{gains.note} Speed-feedback {kind} proposed at {centre:.4g} Hz "
                      f"for the {fr:.4g} Hz resonance.".strip())
    after = resonance_margins_db(axis, new, rows[:1] * 0 + 1.0)[0]
    after_worst = float(resonance_margins_db(axis, new, rows).min())
    m1, _ = loop_margins(axis, new)
    return FilterProposal(kind, float(centre), float(width), depth, new, float(before), float(after), before_worst,
                          after_worst, phase, m0["speed"].gain_margin_db, m1["speed"].gain_margin_db)
