"""The device description: dots, couplings and generator channels of one sample.

>>> from compiler.device import load_device, BUNDLED_DEFAULT
>>> dev = load_device(BUNDLED_DEFAULT)
>>> sorted(dev.dots)
['A', 'B']

Public names
------------
load_device(path) -> Device
    Read and validate a YAML device file.
load_device_text(text, path="<string>") -> Device
    The same from text (``path`` only labels error positions).
device_of(expanded, override=None, confine=False) -> Device
    The device a sequence names (``--device``, its device statement or the
    bundled default).
BUNDLED_DEFAULT : pathlib.Path
    The device file shipped inside the package (a bilayer-graphene pair).
PRESETS : mapping
    Material name -> :class:`~compiler.device.presets.Preset`.
"""

from __future__ import annotations

from pathlib import Path

from ..errors import DeviceError, read_source_line
from ..source import inside
from .loader import load_device, load_device_text
from .model import (Channel, Coupling, Device, Dot, Drive, ExchangeModel, Readout,
                    RotationDefaults)
from .presets import PRESETS, Preset

BUNDLED_DEFAULT: Path = Path(__file__).resolve().parent / "bundled" / "default_pair.yaml"
DEVICE_SUFFIXES = (".yaml", ".yml")


def device_of(expanded, override: str | Path | None = None, *, confine: bool = False) -> Device:
    """Load the device of an expanded sequence: ``override`` (a ``--device``
    path, the user's own choice) if given, else the file named by its
    ``device "..."`` statement, else :data:`BUNDLED_DEFAULT`.

    Errors reading the statement's file point at the statement.  Its
    problems are shown only if its name ends in .yaml or .yml (else one
    problem at the statement says how many it has, not what they are).  With
    ``confine`` the statement's file must lie in the folder tree of the
    sequence file (links resolved)."""
    if override is not None:
        return load_device(override)
    if expanded.device_path is None:
        return load_device(BUNDLED_DEFAULT)
    path, span = expanded.device_path, expanded.device_span
    if confine:
        root = Path(expanded.file).absolute().parent
        if not inside(path, root):
            raise DeviceError(f"device file '{path}' lies outside the sequence's folder {root}",
                              span, "--confine reads only files in the sequence's folder tree: "
                              "move the device file there, or leave out --confine",
                              read_source_line(span.file, span.line) if span else "")
    if path.lower().endswith(DEVICE_SUFFIXES):
        return load_device(path, statement=span)
    try:
        return load_device(path, statement=span)
    except DeviceError as e:
        inner = [q for q in e.problems if q.span is not None and q.span.file == path]
        if not inner:       # not read at all: the error points at the statement
            raise
        # it may be any file (a system file): say nothing of its text
        raise DeviceError(
            f"device file '{path}' does not read as a device description ({len(inner)} "
            f"problem{'s' * (len(inner) != 1)}, the first on line {inner[0].span.line}); its "
            "text is not shown as its name does not end in .yaml or .yml", span,
            "check the path, or name the file *.yaml to see the problems",
            read_source_line(span.file, span.line) if span else "") from None

__all__ = [
    "load_device", "load_device_text", "device_of", "BUNDLED_DEFAULT", "PRESETS", "Preset",
    "Device", "Dot", "Drive", "Coupling", "ExchangeModel", "Channel",
    "RotationDefaults", "Readout",
]
