from pathlib import Path

import pytest
from compiler.threads import one_thread

# The tests multiply small matrices (reference propagators, pulse design): BLAS
# on one thread, as the dotseq command runs (compiler/threads.py); a second
# thread made a 4x4-heavy test eight times slower on a 2-core machine.  The
# limit applies when made and is kept for the session.
_ONE_THREAD = one_thread()

ROOT = Path(__file__).resolve().parent.parent
SEQUENCES = ROOT / "sequences"


@pytest.fixture
def write(tmp_path):
    """Write a file under tmp_path and return its path."""
    def _write(name: str, text: str) -> Path:
        p = tmp_path / name
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(text, encoding="utf-8")
        return p
    return _write
