"""The one shape every finding of the core takes (re-exported by :mod:`core.flags`)."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Flag:
    """A finding in words.

    Attributes
    ----------
    loop : str
        Which loop it concerns: "current", "speed", "position" (or "axis").
    severity : str
        "error" | "warning" | "info".
    message : str
        One sentence for the user, with numbers and units.
    kind : str
        Which check raised it, for front ends that point at the plot element concerned
        ("phase_margin", "gain_margin", "sensitivity", "unstable", "separation",
        "resonance", ...); "" when no particular check applies.
    """

    loop: str
    severity: str  # "error" | "warning" | "info"
    message: str
    kind: str = ""
