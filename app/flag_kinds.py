"""Which plot element a finding is about, read from the finding's words.

:class:`core.flags.Flag` carries loop, severity and message only; the window maps
the message's opening words to the element to highlight.
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
    for words, kind in _RULES:
        if words in flag.message:
            return kind
    return "other"
