"""Export: the compiled waveforms of every run as a bundle folder on disk.

``write_bundle`` writes ``manifest.json`` (sources, sample rate, units,
sweep, per-run timeline, frames, checksums) and one ``.npy`` file per
output (volts as float64, DAC codes as int32), optionally a CSV per run,
atomically (a temporary folder renamed into place); with ``segments=True``
every distinct stretch of an output is stored once and each run is a table
of references to them (``rebuild_segments``).  ``read_bundle`` loads a
bundle back and verifies every checksum.  ``estimate_bundle_bytes`` gives
the size before anything is written.  The format: ``docs/bundle.md``.
"""

from .bundle import RunSize, estimate_bundle_bytes, read_bundle, recover, write_bundle
from .errors import BundleError
from .manifest import FORMAT_NAME, FORMAT_VERSION
from .segments import rebuild as rebuild_segments

__all__ = ["write_bundle", "read_bundle", "estimate_bundle_bytes", "recover", "RunSize",
           "rebuild_segments", "BundleError", "FORMAT_NAME", "FORMAT_VERSION"]
