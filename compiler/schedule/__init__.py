"""Stage 4: place each step of a checked run in time.

Durations come from the device calibration (see :mod:`.durations`); steps
are placed as soon as possible on the resources they use: their dots, the
microwave line of a driven dot, the barrier gate of an exchange and the
plungers of dots an exchange detunes.  Bursts on different dots of one line
overlap only inside an explicit ``together`` group (a multi-tone burst).
Times are continuous here; waveform synthesis places them on the sample grid.
"""

from .timeline import Slot, Timeline, schedule

__all__ = ["Slot", "Timeline", "schedule"]
