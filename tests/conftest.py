from pathlib import Path

import pytest

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
