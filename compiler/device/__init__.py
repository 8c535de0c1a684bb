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

    Errors reading the statement's file point at the statement.  Its lines
    are shown in messages only if its name ends in .yaml or .yml.  With
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
    return load_device(path, statement=span, echo=path.lower().endswith(DEVICE_SUFFIXES))

__all__ = [
    "load_device", "load_device_text", "device_of", "BUNDLED_DEFAULT", "PRESETS", "Preset",
    "Device", "Dot", "Drive", "Coupling", "ExchangeModel", "Channel",
    "RotationDefaults", "Readout",
]
