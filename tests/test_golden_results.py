"""The simulated figures of every example stay what they were when recorded
(tests/golden/examples_results.json, made by tests/golden/record_examples.py):
fidelities, populations, per-step fidelities, error-budget lines and
population traces, to 1e-10.  Restructuring code must not move physics; a
change that is meant to move them records them again and says why.
(Regression reference: common practice, no source.)"""

import json

import pytest

from golden.record_examples import CASES, GOLDEN, figures

RECORDED = json.loads(GOLDEN.read_text())


@pytest.mark.parametrize("name", sorted(CASES))
def test_example_figures_unchanged(name):
    want = RECORDED[name]
    got = figures(name)
    missing = sorted(set(want) - set(got))
    assert not missing, f"figures no longer produced: {missing[:5]}"
    moved = {k: (want[k], got[k]) for k in want if abs(got[k] - want[k]) > 1e-10}
    assert not moved, f"{len(moved)} figures moved, e.g. {list(moved.items())[:5]}"
