"""Every example in sequences/ parses, expands, checks against its device and
schedules, so the examples never rot."""

import pytest

from compiler import check_file, load
from compiler.device import load_device
from conftest import SEQUENCES

SEQUENCE_FILES = sorted(SEQUENCES.rglob("*.dotseq"))
DEVICE_FILES = sorted((SEQUENCES / "devices").glob("*.yaml"))


@pytest.mark.parametrize("path", SEQUENCE_FILES, ids=lambda p: str(p.relative_to(SEQUENCES)))
def test_sequence_checks(path):
    checked = load(path)
    assert checked.timelines
    summary = check_file(path)
    assert summary.runs == len(checked.expanded.runs)
    for tl in checked.timelines:
        # no step ends after the run, none starts before zero
        assert all(0 <= s.start <= s.end <= tl.total + 1e-15 for s in tl.slots)


@pytest.mark.parametrize("path", DEVICE_FILES, ids=lambda p: p.name)
def test_device_loads(path):
    dev = load_device(path)
    assert dev.dots


def test_every_demo_device_is_used_by_an_example():
    used = {str(load(p).device.path) for p in SEQUENCE_FILES}
    for d in DEVICE_FILES:
        assert any(u.endswith(d.name) for u in used), d.name
