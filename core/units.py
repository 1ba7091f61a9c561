"""Quantities as people type them ("2.4 mH", "12 kg*cm^2", "45 V/krpm") to SI floats.

Unit conversion is pint's job; this module only adapts it to the core's rule that
everything inside is a plain float in SI units, and that bad input raises
:class:`core.errors.InputError` naming the field.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
import pint

from core.errors import InputError

_REGISTRY = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
# Engineers write "rev" for a revolution (2*pi rad in pint) and count encoder edges
# as plain numbers: "count" is dimensionless, not a fraction of a turn.
_REGISTRY.define("rev = revolution")
_REGISTRY.define("count = 1 = counts")


@lru_cache(maxsize=4096)
def _parse_text(text: str) -> pint.Quantity:
    return _REGISTRY.Quantity(text)


@lru_cache(maxsize=4096)
def _text_in(text: str, unit: str) -> float:
    """The value of parsed ``text`` in ``unit``; pint's errors pass through (and are not cached).

    Cached because a scenario or preset is parsed again on every run that uses it (a
    conversion costs pint some 50 us). A logarithmic unit of zero ("0 dB" as a ratio) is
    a log of zero inside pint: its -inf is refused by the caller, without numpy's warning.
    """
    q = _parse_text(text)
    if not isinstance(q, pint.Quantity):
        return float(q)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return float(q.to(unit).magnitude)


def parse_quantity(value: object, unit: str, field: str) -> float:
    """Convert a typed quantity to a float in ``unit``.

    Parameters
    ----------
    value : str or float
        Text with a unit ("2.4 mH") or a bare number, which is taken to be in ``unit``.
    unit : str
        The unit the caller wants the value in, as pint spells it ("H", "kg*m^2").
    field : str
        Name of the field, used in the error message.

    Returns
    -------
    float
        The value expressed in ``unit``.

    Raises
    ------
    InputError
        On unknown units, a unit of the wrong dimension, or a non-finite number.
    """
    if isinstance(value, bool):
        raise InputError(field, value, f"a number or a quantity in {unit}")
    if isinstance(value, (int, float)):
        number = float(value)
    elif isinstance(value, str) and value.strip():
        try:
            _parse_text(value.strip())
        except Exception:
            raise InputError(field, value, f"a number or a quantity convertible to {unit}") from None
        try:
            number = _text_in(value.strip(), unit)
        except pint.DimensionalityError:
            raise InputError(field, value, f"a quantity convertible to {unit}") from None
        except Exception:
            raise InputError(field, value, f"a number or a quantity convertible to {unit}") from None
    else:
        raise InputError(field, value, f"a number or a quantity in {unit}")
    if not math.isfinite(number):
        raise InputError(field, value, f"a finite quantity in {unit}")
    return number


def convert(value: float, from_unit: str, to_unit: str) -> float:
    """Convert a float from one unit to another (for display and export edges)."""
    return float(_REGISTRY.Quantity(value, from_unit).to(to_unit).magnitude)


def format_quantity(value: float, unit: str, digits: int = 4) -> str:
    """Text for a value already expressed in ``unit``, e.g. ``"2.4 mH"``-style output."""
    return f"{value:.{digits}g} {unit}"
