"""The one error type the core raises for bad input."""

from __future__ import annotations


class InputError(ValueError):
    """A value the user gave cannot be used.

    The message always names the field, the value as given and what was expected,
    so front ends can show it beside the field without a traceback.

    Parameters
    ----------
    field : str
        Dotted name of the offending field, e.g. ``"motor.resistance"``.
    value : object
        The value as the user gave it (text or number).
    expected : str
        What would have been accepted, with its unit or range.
    """

    def __init__(self, field: str, value: object, expected: str):
        self.field = field
        self.value = value
        self.expected = expected
        super().__init__(f"{field}: got {value!r}; expected {expected}")


def require_positive(field: str, value: float, unit: str) -> float:
    """Return ``value`` as float if finite and > 0, else raise :class:`InputError`."""
    v = _finite(field, value, unit)
    if not v > 0.0:
        raise InputError(field, value, f"a positive value in {unit}")
    return v


def require_positive_or_inf(field: str, value: float, unit: str) -> float:
    """Return ``value`` as float if > 0 (inf allowed: "not rated"), else raise :class:`InputError`."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(field, value, f"a number in {unit}") from None
    if not v > 0.0:
        raise InputError(field, value, f"a positive value in {unit} (or leave it out)")
    return v


def require_nonnegative(field: str, value: float, unit: str) -> float:
    """Return ``value`` as float if finite and >= 0, else raise :class:`InputError`."""
    v = _finite(field, value, unit)
    if v < 0.0:
        raise InputError(field, value, f"zero or a positive value in {unit}")
    return v


def require_range(field: str, value: float, low: float, high: float, unit: str) -> float:
    """Return ``value`` as float if finite and within [low, high], else raise."""
    v = _finite(field, value, unit)
    if not (low <= v <= high):
        raise InputError(field, value, f"a value from {low:g} to {high:g} {unit}".rstrip())
    return v


def _finite(field: str, value: float, unit: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(field, value, f"a number in {unit}") from None
    if v != v or v in (float("inf"), float("-inf")):
        raise InputError(field, value, f"a finite number in {unit}")
    return v
