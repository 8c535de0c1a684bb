"""The warnings of a sequence's runs, each said once.

The scheduler warns per run: a sweep of 20 runs would otherwise print the
same warning at the same position 20 times (or 20 times with only the
run's own number changed, e.g. a quantisation loss that depends on the
burst's carrier phase).  :func:`merged` keeps one line per position (file,
line, column and the chain of block calls) and subject (the warning's
``key``, its message when it has none), the worst of them (largest
``severity``), and says in how many of the runs it was raised:
``... (in 12 of 20 runs)``, with ``; the worst shown`` when the runs'
messages differ.  ``check``, ``compile``, ``simulate`` and ``run`` print
these lines.
"""

from __future__ import annotations

from typing import Iterable, Sequence


def merged(per_run: Sequence[Iterable]) -> tuple[str, ...]:
    """One rendered warning per (position, call chain, subject), in the
    order first raised; ``per_run`` holds each run's warnings (objects with
    ``span``, ``via``, ``key``, ``message``, ``severity`` and ``render()``,
    as :class:`compiler.schedule.timeline.Warning_`)."""
    n = len(per_run)
    groups: dict[tuple, list] = {}       # -> [worst warning, runs, messages]
    for warnings in per_run:
        here = set()
        for w in warnings:
            g = (w.span, tuple(w.via), w.key or w.message)
            entry = groups.get(g)
            if entry is None:
                entry = groups[g] = [w, 0, set()]
            elif w.severity > entry[0].severity:
                entry[0] = w
            entry[2].add(w.message)
            if g not in here:
                here.add(g)
                entry[1] += 1
    out = []
    for w, runs, messages in groups.values():
        text = w.render()
        if n > 1:
            first, sep, rest = text.partition("\n")
            note = f"in {runs} of {n} runs" + ("; the worst shown" if len(messages) > 1 else "")
            text = f"{first} ({note}){sep}{rest}"
        out.append(text)
    return tuple(out)
