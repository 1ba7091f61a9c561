"""The cascade recorded once per gain set and replayed by compiled code at any points.

:class:`core.loops.CascadeModel` is written once, over an algebra. Evaluated with
:class:`core.loops.FrequencyAlgebra`, every block is a numpy expression, and each
model evaluation costs some 100 us of Python before any arithmetic — a recompute
evaluates the model about eight times (the grid, the margin rounds, the Nyquist
subdivisions, three inversion contours). :class:`TapeAlgebra` runs the same formulas
on placeholders instead and records each operation (a polynomial in s, a delay, a
sum, product or quotient, or one of these with a constant) on a tape.
:meth:`Tape.evaluate` then computes the requested outputs at any points with numba, a
block of points at a time, so the intermediate values stay in the processor's caches.

The tape holds the very operations numpy would do, in the same order, so its values
match :class:`FrequencyAlgebra`'s to rounding (a few ulp: the compiled complex
division and exponential are not numpy's).

Tape layout: each operation is ``(code, destination, a, b)``; ``a``/``b`` index
values or, for the ``*K`` codes, ``constants``; ``POLY`` reads ``coefficients[a:b]``;
``DELAY`` reads the delay, s, at ``constants[a]``. A replay plan keeps the operations an
output set needs, as an ``(n, 4)`` int64 array over reused registers.
"""

from __future__ import annotations

import itertools
from functools import lru_cache

import numpy as np
from numba import njit

from core.loops import CascadeModel

POLY, DELAY, ADD, SUB, MUL, DIV, ADD_K, MUL_K, K_SUB, K_DIV, DIV_K = range(11)
_BINARY = (ADD, SUB, MUL, DIV)
_WITH_CONSTANT = (ADD_K, MUL_K, K_SUB, K_DIV, DIV_K)
BLOCK = 64
"""Points replayed together: the registers of one block fit in the L1/L2 caches."""


class _Value:
    """A placeholder for one block's values; arithmetic on it is recorded."""

    __slots__ = ("tape", "index")
    __array_ufunc__ = None          # numpy scalars defer to these operators

    def __init__(self, tape, index):
        self.tape, self.index = tape, index

    def __add__(self, other):
        if type(other) is _Value:
            return self.tape.op(ADD, self.index, other.index)
        return self if other == 0.0 else self.tape.op(ADD_K, self.index, self.tape.constant(other))

    __radd__ = __add__

    def __mul__(self, other):
        if type(other) is _Value:
            return self.tape.op(MUL, self.index, other.index)
        return self if other == 1.0 else self.tape.op(MUL_K, self.index, self.tape.constant(other))

    __rmul__ = __mul__

    def __sub__(self, other):
        if type(other) is _Value:
            return self.tape.op(SUB, self.index, other.index)
        return self + (-other)

    def __rsub__(self, other):
        return self.tape.op(K_SUB, self.index, self.tape.constant(other))

    def __truediv__(self, other):
        if type(other) is _Value:
            return self.tape.op(DIV, self.index, other.index)
        return self if other == 1.0 else self.tape.op(DIV_K, self.index, self.tape.constant(other))

    def __rtruediv__(self, other):
        return self.tape.op(K_DIV, self.index, self.tape.constant(other))

    def __neg__(self):
        return self * -1.0


class TapeAlgebra:
    """An algebra that records the blocks it builds (the ``FrequencyAlgebra`` interface).

    Equal polynomials and delays are recorded once, as :class:`FrequencyAlgebra`
    remembers them. A constant operand of 1 (product, quotient) or 0 (sum) is dropped,
    which changes no value. ``ops`` is flat, four entries per operation.
    """

    def __init__(self):
        self.ops = []
        self.coefficients = []
        self.constants = []
        self._memo = {}

    def op(self, code, a, b):
        ops = self.ops
        index = len(ops) >> 2
        ops += (code, index, a, b)
        return _Value(self, index)

    def constant(self, value) -> int:
        self.constants.append(complex(value))
        return len(self.constants) - 1

    def delay(self, delay_s: float):
        """exp(-s * delay_s)."""
        if delay_s <= 0:
            return 1.0
        key = ("delay", delay_s)
        value = self._memo.get(key)
        if value is None:
            value = self._memo[key] = self.op(DELAY, self.constant(delay_s), 0)
        return value

    def tf(self, num, den):
        """num(s)/den(s), coefficients highest power first."""
        return self._polynomial(num) / self._polynomial(den)

    def _polynomial(self, coefficients):
        key = tuple(coefficients)
        value = self._memo.get(key)
        if value is None:
            start = len(self.coefficients)
            self.coefficients += key
            value = self._memo[key] = self.op(POLY, start, len(self.coefficients))
        return value

    @staticmethod
    def feedback(forward, back):
        """forward / (1 + forward * back)."""
        return forward / (1.0 + forward * back)


OUTPUTS = ("current_open", "speed_open", "position_open", "current_closed", "speed_closed",
           "position_closed", "dynamic_compliance", "position_disturbance_speed")
"""What a recompute reads of the cascade (CascadeModel attribute names)."""
LOOP_OUTPUTS = OUTPUTS[:6]
"""The three open loops, then the three closed loops."""

_SHAPES = {}
_SHAPE_NUMBERS = itertools.count()
_PLANS = {}
_PLANS_SIZE = 256
"""Tape shapes and replay plans (per shape and set of outputs) remembered; all forgotten beyond this."""


class Tape:
    """One gain set's cascade, recorded.

    Parameters
    ----------
    axis, gains : Axis, GainSet
    outputs : sequence of str
        The :class:`core.loops.CascadeModel` attributes to record (each must depend on s).
    """

    def __init__(self, axis, gains, outputs=OUTPUTS):
        alg = TapeAlgebra()
        model = CascadeModel(axis, gains, alg)
        values = [getattr(model, name) for name in outputs]
        if not all(isinstance(v, _Value) for v in values):
            raise ValueError("every recorded output must depend on s")
        self.outputs = tuple(outputs)
        self.coefficients = np.array(alg.coefficients, dtype=float)
        self.constants = np.array(alg.constants, dtype=complex)
        self._ops = alg.ops
        self._output_ops = tuple(v.index for v in values)
        # Gain sets of one shape (the same filters, decoupling, integral terms) record the
        # same operations on other constants, so they share their replay plans: the shape
        # is numbered once, and plans are looked up by that number.
        structure = (tuple(self._ops), self._output_ops)
        if len(_SHAPES) >= _PLANS_SIZE:
            _SHAPES.clear()
            _PLANS.clear()
        shape = _SHAPES.get(structure)
        if shape is None:
            shape = _SHAPES[structure] = next(_SHAPE_NUMBERS)   # never reused: old tapes keep theirs
        self._shape = shape

    def evaluate(self, s, outputs=None) -> np.ndarray:
        """The outputs' values at the complex points ``s`` (1/s): one row per output, in the order asked.

        Parameters
        ----------
        s : array_like of complex
        outputs : sequence of str, optional
            A subset of the recorded outputs; all of them by default. Only the
            operations they need are replayed.
        """
        names = self.outputs if outputs is None else tuple(outputs)
        key = (self._shape, names)
        plan = _PLANS.get(key)
        if plan is None:
            if len(_PLANS) >= _PLANS_SIZE:
                _PLANS.clear()
            plan = _PLANS[key] = self._plan(names)
        ops, n_registers, out_registers = plan
        s = np.require(s, complex, ('C', 'W')).ravel()       # one compiled signature: writeable
        out = np.empty((len(names), len(s)), dtype=complex)
        _replay(ops, n_registers, out_registers, self.coefficients, self.constants, s, out)
        return out

    def _plan(self, names):
        ops = np.array(self._ops, dtype=np.int64).reshape(-1, 4)
        roots = np.array([self._output_ops[self.outputs.index(n)] for n in names], dtype=np.int64)
        keep = np.any(_ancestors(ops, roots), axis=0)
        return _allocate(ops[keep], roots)


@lru_cache(maxsize=8)
def cascade_tape(axis, gains) -> Tape:
    """The recorded :data:`OUTPUTS` of ``gains`` on ``axis``, shared by one recompute's
    margins and time responses (and by any later call with the same two)."""
    return Tape(axis, gains)


def _ancestors(ops, output_ops):
    """needs[j, i]: whether output j depends on operation i."""
    n = len(ops)
    needs = np.zeros((len(output_ops), n), dtype=bool)
    for j, root in enumerate(output_ops):
        stack = [int(root)]
        while stack:
            i = stack.pop()
            if needs[j, i]:
                continue
            needs[j, i] = True
            stack += _reads(*ops[i, [0, 2, 3]])
    return needs


def _reads(code, a, b) -> tuple:
    """The registers an operation reads."""
    return (int(a), int(b)) if code in _BINARY else (int(a),) if code in _WITH_CONSTANT else ()


def _allocate(ops, output_ops):
    """Rewrite the kept operations onto as few registers as their lifetimes allow.

    Returns (ops over registers, register count, the outputs' registers).
    """
    last = {}
    for k, (code, _, a, b) in enumerate(ops):
        for r in _reads(code, a, b):
            last[r] = k
    for r in output_ops:
        last[int(r)] = len(ops)
    free, where, n_registers = [], {}, 0
    out = ops.copy()
    for k, (code, dest, a, b) in enumerate(ops):
        operands = _reads(code, a, b)
        mapped = [where[r] for r in operands]
        for r in set(operands):
            if last[r] == k:
                free.append(where[r])
        if free:
            reg = free.pop()
        else:
            reg, n_registers = n_registers, n_registers + 1
        where[int(dest)] = reg
        out[k, 1] = reg
        if len(mapped) >= 1:
            out[k, 2] = mapped[0]
        if len(mapped) == 2:
            out[k, 3] = mapped[1]
    return out, n_registers, np.array([where[int(r)] for r in output_ops], dtype=np.int64)


@njit(cache=True, error_model="numpy")
def _replay(ops, n_registers, out_registers, coefficients, constants, s, out):
    n = len(s)
    reg = np.empty((n_registers, BLOCK), dtype=np.complex128)
    for start in range(0, n, BLOCK):
        m = min(BLOCK, n - start)
        for k in range(len(ops)):
            code, d, a, b = ops[k, 0], ops[k, 1], ops[k, 2], ops[k, 3]
            if code == MUL:
                for i in range(m):
                    reg[d, i] = reg[a, i] * reg[b, i]
            elif code == MUL_K:
                c = constants[b]
                for i in range(m):
                    reg[d, i] = reg[a, i] * c
            elif code == ADD:
                for i in range(m):
                    reg[d, i] = reg[a, i] + reg[b, i]
            elif code == ADD_K:
                c = constants[b]
                for i in range(m):
                    reg[d, i] = reg[a, i] + c
            elif code == DIV:
                for i in range(m):
                    reg[d, i] = reg[a, i] / reg[b, i]
            elif code == K_DIV:
                c = constants[b]
                for i in range(m):
                    reg[d, i] = c / reg[a, i]
            elif code == DIV_K:
                c = constants[b]
                for i in range(m):
                    reg[d, i] = reg[a, i] / c
            elif code == SUB:
                for i in range(m):
                    reg[d, i] = reg[a, i] - reg[b, i]
            elif code == K_SUB:
                c = constants[b]
                for i in range(m):
                    reg[d, i] = c - reg[a, i]
            elif code == POLY:
                for i in range(m):
                    x = s[start + i]
                    v = coefficients[a] + 0j
                    for j in range(a + 1, b):
                        v = v * x + coefficients[j]
                    reg[d, i] = v
            else:  # DELAY
                td = constants[a].real
                for i in range(m):
                    reg[d, i] = np.exp(-s[start + i] * td)
        for j in range(len(out_registers)):
            r = out_registers[j]
            for i in range(m):
                out[j, start + i] = reg[r, i]
