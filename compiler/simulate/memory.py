"""The refusal of a simulation that would not fit in memory: the fast
engine estimates every exact cluster before any work
(:class:`~compiler.simulate.engines.fast.ClusterTooLarge`); this turns what
it found into the user's error, with units and the fixes.  A sweep refuses
a point the same way (:mod:`compiler.sweep.memory`), naming the point."""

from __future__ import annotations

from ..errors import SimulationError
from ..limits import human
from ..units import FREQUENCY, TIME, VOLTAGE, format_quantity

FIXES = ("close those barriers further at idle (a lower idle_voltage of the couplings)",
         "raise the exchange accuracy tolerance (--exchange-accuracy, default 1e-6) so that "
         "the residual exchange is dropped or treated as weak",
         "use fewer quadrature nodes (--nodes)")


def too_large_error(info: dict, *, subject: str = "the simulation", limit_note: str = "",
                    after: str = "", more_fixes: tuple[str, ...] = (),
                    raise_fix: str = "raise --memory-limit") -> SimulationError:
    """The error for a cluster (``ClusterTooLarge.info``) over the limit.
    A sweep words it for one of its points: ``subject`` (what would need the
    memory), ``limit_note`` (after the limit: how it was shared), ``after``
    (appended to the message), ``more_fixes`` (before the last fix) and
    ``raise_fix`` (the last fix)."""
    why = []
    for p in info["pairs"]:
        text = (f"{p['name']} (J = {format_quantity(p['j_min'], FREQUENCY)} at "
                f"{format_quantity(p['volts'], VOLTAGE)} on its barrier")
        if p["j_max"] > 1.01 * p["j_min"]:
            text += f", up to {format_quantity(p['j_max'], FREQUENCY)}"
        why.append(text + ")")
    k = info["dimension"]
    dots = info["dots"]
    fixes = FIXES + tuple(more_fixes)
    return SimulationError(
        f"{subject} would need about {human(info['bytes'])} of memory, above the limit of "
        f"{human(info['limit'])}{limit_note}: dots {', '.join(dots)} form one cluster of {len(dots)} dots "
        f"(channel {k}×{k}, {human(8 * k * k)} per matrix, {info['variants']} noise "
        f"variant{'s' * (info['variants'] != 1)}) from {format_quantity(info['start_s'], TIME)} to "
        f"{format_quantity(info['end_s'], TIME)}, because the exchange of " + ", ".join(why)
        + (" is" if len(why) == 1 else " are") + " too strong to drop or to treat as weak at "
        "the requested accuracy; nothing was simulated" + after,
        hint=", ".join(fixes) + f", or {raise_fix}")
