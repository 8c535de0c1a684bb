"""Stage 2: parsed tree -> expanded runs (see :mod:`compiler.program`).

Evaluates parameters with units, splits sweeps into runs, unrolls repeats and
block calls, inlines includes, and resolves block parameters that stand for
qubits.  Problems are collected and raised as one
:class:`~compiler.errors.SequenceError`.
"""

from .expander import MAX_RUNS, MAX_STEPS, expand

__all__ = ["expand", "MAX_RUNS", "MAX_STEPS"]
