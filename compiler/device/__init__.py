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
BUNDLED_DEFAULT : pathlib.Path
    The device file shipped inside the package (a bilayer-graphene pair).
PRESETS : mapping
    Material name -> :class:`~compiler.device.presets.Preset`.
"""

from __future__ import annotations

from pathlib import Path

from .loader import load_device, load_device_text
from .model import (Channel, Coupling, Device, Dot, Drive, ExchangeModel, Readout,
                    RotationDefaults)
from .presets import PRESETS, Preset

BUNDLED_DEFAULT: Path = Path(__file__).resolve().parent / "bundled" / "default_pair.yaml"

__all__ = [
    "load_device", "load_device_text", "BUNDLED_DEFAULT", "PRESETS", "Preset",
    "Device", "Dot", "Drive", "Coupling", "ExchangeModel", "Channel",
    "RotationDefaults", "Readout",
]
