"""Stage 5: scheduled timeline -> the sampled arrays every channel plays.

:func:`synthesize` renders one run; :func:`as_played` gives what the sample
sees after the channel's analog path (shared with the simulator).
"""

from .played import as_played, played_baseband
from .render import synthesize
from .types import Output, StepRecord, Waveforms

__all__ = ["synthesize", "as_played", "played_baseband", "Waveforms", "Output", "StepRecord"]
