"""Resonance filters for a two-mass load: a proposed notch or low-pass, and what it buys.

The notch ``N(s) = (s^2 + 2 zz wn s + wn^2)/(s^2 + 2 zp wn s + wn^2)`` has depth
``zz/zp`` at wn (Ellis, "Control System Design Guide", 4th ed. 2012, from memory).
It is centred on the two-mass resonance ``fr = sqrt(k (JM+JL)/(JM JL)) / 2 pi``
(Saarakkala & Hinkkanen, IEEE Trans. Ind. Appl., 2015); its width (zeta_pole) is
and depth are searched on the model (see :func:`propose_filter`) so that the loop
gain at the resonance peak falls at least ``gm_target`` below 0 dB at nominal and at
every stiffness and load-inertia tolerance point, with the least phase lag at the speed
crossover.

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
    gm_target_db : float
        The resonance margin asked for, dB.
    verified : bool
        True when the resonance margin after the filter meets ``gm_target_db`` at nominal
        and at every tolerance point in ``corners``.
    corners : tuple of dict
        Per tolerance point: stiffness and load-inertia factors, resonance (Hz), and the
        resonance margin before and after (dB).
    speed_crossover_hz : float
        Nominal speed crossover where the phase cost is taken, Hz.
    phase_margin_before_deg, phase_margin_after_deg : float
        The speed loop's phase margin, nominal, deg.
    added_notches : int
        How many notches the proposal appended to ``gains.speed.notches`` (0 for a low-pass;
        2 for a staggered pair, whose ``centre_hz`` is their geometric mean and ``width_hz``
        the span of their -3 dB bands).
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
    gm_target_db: float = 6.0
    verified: bool = False
    corners: tuple = ()
    speed_crossover_hz: float = math.nan
    phase_margin_before_deg: float = math.nan
    phase_margin_after_deg: float = math.nan
    added_notches: int = 0


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
    fr = np.broadcast_to(np.asarray(va.resonance_hz, float).reshape(-1, 1), (len(rows), 1))
    # Each row over its own band round its own resonance, so a row's margin does not
    # depend on which other rows are evaluated with it.
    f = fr * np.logspace(math.log10(0.8), math.log10(1.25), 400)[None, :]
    model = CascadeModel(va, gains, VariantAlgebra(2j * math.pi * f))
    mag = np.abs(np.broadcast_to(model.speed_open, f.shape))
    return -20.0 * np.log10(mag.max(axis=1))


def propose_filter(axis: Axis, gains: GainSet, tolerances: Tolerances | None = None, kind: str = "notch",
                   gm_target_db: float = 6.0, min_depth_db: float = -6.0, max_depth_db: float = -40.0
                   ) -> FilterProposal:
    """Propose a speed-feedback notch (or low-pass) for the two-mass resonance, verified on the model.

    Rule. The notch is centred on the resonance (nominal, or the geometric middle of
    the band the tolerances move it over, whichever verifies with less phase cost);
    candidate widths run from just covering the tolerance spread of the resonance
    (zeta_pole ~ relative spread, since a deep notch's -3 dB band is ~ fn (1 +- zeta_pole))
    up to zeta_pole = 1, and candidate depths from ``min_depth_db`` to ``max_depth_db``.
    Every candidate is evaluated with the speed open loop itself at nominal and at every
    stiffness x load-inertia tolerance point (corners included): it verifies when the
    worst resonance margin (module docstring) is at least ``gm_target_db``. Of the
    candidates that verify, the one with the least phase lag at the speed crossover is
    proposed (the notch's price); if none does, the one with the largest worst margin is
    returned with ``verified`` False. A low-pass is searched the same way over its corner.

    Parameters
    ----------
    axis : Axis
        Must have a compliant load.
    gains : GainSet
    tolerances : Tolerances, optional
        Stiffness and load-inertia ranges the filter must cover.
    kind : {"notch", "lowpass"}
    gm_target_db : float
        Wanted gain margin at the resonance at every tolerance point, dB.
    min_depth_db, max_depth_db : float
        Shallowest and deepest notch considered, dB.

    Returns
    -------
    FilterProposal
    """
    if not axis.load.compliant:
        raise InputError("load.compliant", False, "a compliant (two-mass) load for a resonance filter")
    if kind not in ("notch", "lowpass"):
        raise InputError("kind", kind, '"notch" or "lowpass"')
    if not (isinstance(gm_target_db, (int, float)) and math.isfinite(gm_target_db) and 0 <= gm_target_db <= 40):
        raise InputError("gm_target_db", gm_target_db, "a gain margin from 0 to 40 dB")
    tolerances = tolerances or Tolerances()
    rows = _stiffness_rows(tolerances)
    va = VariantAxis(axis, rows)
    fr_all = va.resonance_hz
    fr = axis.resonance_hz
    before_rows = resonance_margins_db(axis, gains, rows)
    before = float(resonance_margins_db(axis, gains, np.ones((1, len(PARAMETERS))))[0])
    before_worst = float(before_rows.min())
    m0, _ = loop_margins(axis, gains)
    fc = m0["speed"].crossover_hz
    candidates = []            # (GainSet, centre, width, depth, phase at fc)
    if kind == "notch":
        lo_f, hi_f = float(fr_all.min()), float(fr_all.max())
        mid = math.sqrt(lo_f * hi_f)
        spread = max(hi_f / fr - 1.0, 1.0 - lo_f / fr)
        depths = np.linspace(min_depth_db, max_depth_db, 8)

        def add(filters, centre, width, depth):
            g = replace(gains, speed=replace(gains.speed, notches=gains.speed.notches + tuple(filters)))
            response = np.prod([notch_response(n.centre_hz, n.zeta_zero, n.zeta_pole, [fc])[0] for n in filters])
            candidates.append((g, centre, width, float(depth), float(np.degrees(np.angle(response)))))

        # One notch on the resonance: widths from the tolerance spread up to zeta_pole = 2.
        for centre in sorted({float(fr), mid}):
            for zp in np.geomspace(max(0.05, spread), 2.0, 10):
                for depth in depths:
                    add([Notch(centre, float(zp * 10 ** (depth / 20.0)), float(zp), "feedback")],
                        centre, 2.0 * zp * centre, depth)
        # Two staggered notches near the ends of the band the tolerances move the resonance
        # over: a wide band of attenuation for less lag at the crossover than one very wide notch.
        if hi_f / lo_f > 1.05:
            for inset in (0.0, 0.03):
                c1, c2 = lo_f * (1 + inset), hi_f * (1 - inset)
                for zp in np.geomspace(0.15, 1.0, 8):
                    for depth in depths:
                        zz = float(zp * 10 ** (depth / 20.0))
                        add([Notch(c1, zz, float(zp), "feedback"), Notch(c2, zz, float(zp), "feedback")],
                            math.sqrt(c1 * c2), c2 * (1 + zp) - c1 * (1 - zp), depth)
    else:
        old = gains.speed.feedback_lowpass_hz
        top = min(old, fr_all.max()) if old > 0 else fr_all.max()
        for corner in np.geomspace(max(3.0 * fc, 0.05 * fr_all.min()), top, 30):
            g = replace(gains, speed=replace(gains.speed, feedback_lowpass_hz=float(corner)))
            phase = float(-math.degrees(math.atan(fc / corner))
                          + (math.degrees(math.atan(fc / old)) if old > 0 else 0.0))
            depth = float(-10 * math.log10(1 + (fr / corner) ** 2) + (10 * math.log10(1 + (fr / old) ** 2)
                                                                         if old > 0 else 0.0))
            candidates.append((g, float(corner), math.nan, depth, phase))
    # Every candidate's worst margin in one evaluation per candidate (rows vectorised).
    scored = [(float(resonance_margins_db(axis, c[0], rows).min()), c) for c in candidates]
    good = [sc for sc in scored if sc[0] >= gm_target_db]
    if good:
        worst_after, (new, centre, width, depth, phase) = max(good, key=lambda sc: (sc[1][4], sc[0]))
    else:
        worst_after, (new, centre, width, depth, phase) = max(scored, key=lambda sc: sc[0])
    new = new.renamed(f"{gains.name} + {kind}", f"{gains.note} Speed-feedback {kind} proposed at {centre:.4g} Hz "
                      f"for the {fr:.4g} Hz resonance.".strip())
    after_rows = resonance_margins_db(axis, new, rows)
    after = float(resonance_margins_db(axis, new, np.ones((1, len(PARAMETERS))))[0])
    m1, _ = loop_margins(axis, new)
    corners = tuple({"stiffness": float(r[PARAMETERS.index("stiffness")]),
                     "load_inertia": float(r[PARAMETERS.index("load_inertia")]),
                     "resonance_hz": float(f), "before_db": float(b), "after_db": float(a)}
                    for r, f, b, a in zip(rows, fr_all, before_rows, after_rows))
    verified = bool(after >= gm_target_db and after_rows.min() >= gm_target_db)
    return FilterProposal(kind, float(centre), float(width), float(depth), new, before, after, before_worst,
                          float(after_rows.min()), phase, m0["speed"].gain_margin_db, m1["speed"].gain_margin_db,
                          float(gm_target_db), verified, corners, float(fc), m0["speed"].phase_margin_deg,
                          m1["speed"].phase_margin_deg, len(new.speed.notches) - len(gains.speed.notches))


def proposal_summary(p: FilterProposal) -> dict:
    """The JSON shape of ``loopwright notch --json`` (SI; non-finite values as null)."""
    def num(x):
        return None if x is None or not math.isfinite(x) else float(x)

    added = p.gains.speed.notches[len(p.gains.speed.notches) - p.added_notches:] if p.kind == "notch" else ()
    return {
        "kind": p.kind, "centre_hz": num(p.centre_hz), "width_hz": num(p.width_hz), "depth_db": num(p.depth_db),
        "notches": [{"centre_hz": n.centre_hz, "zeta_zero": n.zeta_zero, "zeta_pole": n.zeta_pole,
                     "depth_db": 20 * math.log10(n.zeta_zero / n.zeta_pole), "place": n.place} for n in added],
        "gm_target_db": p.gm_target_db, "verified": p.verified,
        "resonance_margin_db": {"nominal_before": num(p.resonance_margin_before_db),
                                "nominal_after": num(p.resonance_margin_after_db),
                                "worst_before": num(p.resonance_margin_worst_before_db),
                                "worst_after": num(p.resonance_margin_worst_after_db)},
        "corners": [{k: num(v) for k, v in c.items()} for c in p.corners],
        "speed_crossover_hz": num(p.speed_crossover_hz),
        "phase_cost_deg": num(p.phase_cost_deg),
        "speed_phase_margin_deg": {"before": num(p.phase_margin_before_deg), "after": num(p.phase_margin_after_deg)},
        "speed_gain_margin_db": {"before": num(p.gain_margin_before_db), "after": num(p.gain_margin_after_db)},
        "gain_set": p.gains.name,
    }
