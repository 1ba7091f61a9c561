"""Which plot element a finding is about.

Core checks name themselves in :attr:`core.flags.Flag.kind`; findings without one
(from the simulation, say) are recognised from their words.
"""

from __future__ import annotations

KINDS = ("unstable", "phase_margin", "gain_margin", "sensitivity", "no_crossover", "separation",
         "sampling", "resonance", "constants", "other")

_RULES = (
    ("unstable", "unstable"),
    ("Phase margin", "phase_margin"),
    ("Gain margin", "gain_margin"),
    ("Sensitivity peak", "sensitivity"),
    ("never reaches 1", "no_crossover"),
    ("crosses over at", "separation"),
    ("Current crossover", "sampling"),
    ("resonance", "resonance"),
    ("Kt and Ke", "constants"),
)


def flag_kind(flag) -> str:
    """One of :data:`KINDS` for a core flag."""
    if getattr(flag, "kind", "") in KINDS:
        return flag.kind
    for words, kind in _RULES:
        if words in flag.message:
            return kind
    return "other"
