"""spinc: a pulse-sequence compiler for electron-spin qubits in quantum dots.

The pipeline, one subpackage per stage::

    text --parse--> tree --expand--> runs --check--> (against the device)
         --schedule--> timelines --> (waveforms, simulation: later stages)

The functions here chain the stages; the command line calls only these.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .check import check
from .check.summary import Summary, summarize
from .device import BUNDLED_DEFAULT, load_device
from .device.model import Device
from .errors import SpincError
from .expand import expand
from .parse import parse_path, parse_text
from .program import Expanded
from .schedule import Timeline, schedule

__version__ = "0.1.0"


@dataclass(frozen=True)
class Checked:
    """A sequence file expanded, checked against its device and scheduled."""
    expanded: Expanded
    device: Device
    timelines: tuple[Timeline, ...]


def load(path: str | Path, device: str | Path | None = None) -> Checked:
    """Parse, expand, load the device, check and schedule every run.

    ``device`` overrides the file's device statement.  Raises a
    :class:`~compiler.errors.SpincError` subclass for any bad input.
    """
    tree = parse_path(path)
    expanded = expand(tree)
    dev_path = device or expanded.device_path or BUNDLED_DEFAULT
    dev = load_device(dev_path)
    check(expanded, dev)
    timelines = tuple(schedule(r, dev) for r in expanded.runs)
    return Checked(expanded, dev, timelines)


def check_file(path: str | Path, device: str | Path | None = None) -> Summary:
    """What `spinc check` prints: a :class:`Summary` of the checked file."""
    c = load(path, device)
    return summarize(c.expanded, c.device, list(c.timelines))


__all__ = ["load", "check_file", "parse_path", "parse_text", "expand", "check", "schedule",
           "load_device", "summarize", "SpincError", "Checked", "__version__"]
