"""The table of step kinds (compiler.steps) and every stage's handlers for
them: a kind missing from a stage fails here, by name, not silently later."""

from __future__ import annotations

import dataclasses
import math
import typing

import numpy as np
import pytest

from compiler import program as P
from compiler import steps as K
from compiler.check import CHECKS
from compiler.check.summary import KIND_ORDER
from compiler.parse.parser import KEYWORDS
from compiler.preview.style import LABELS, STEP_STYLE, kind_name, step_labels
from compiler.schedule.timeline import (PLACE, RESOURCES, BurstInfo, ExchangeInfo, FrameInfo,
                                        InsertedInfo, MoveInfo)
from compiler.simulate.fidelity import IDEAL_OPS, exchange_unitary
from compiler.synth.render import SLOT_RENDER

PROGRAM_TYPES = set(typing.get_args(P.Step))


def test_every_program_step_class_has_its_kinds_in_the_table():
    assert set(K.STEP_TYPES) == PROGRAM_TYPES
    for cls, kinds in K.STEP_TYPES.items():
        for k in kinds:
            assert K.KINDS[k].step_type is cls
    # a program step's own kind is in the table
    assert P.Rotation.kind in K.KINDS and P.Parallel.kind in K.KINDS
    with pytest.raises(KeyError, match="unknown step kind 'frobnicate'"):
        K.kind("frobnicate")


@pytest.mark.parametrize("table, name", [
    (RESOURCES, "schedule.timeline.RESOURCES"), (PLACE, "schedule.timeline.PLACE"),
    (CHECKS, "check.CHECKS"), (P.STEP_QUBITS, "program.STEP_QUBITS"),
])
def test_stages_handle_every_program_step_class(table, name):
    missing = PROGRAM_TYPES - set(table)
    extra = set(table) - PROGRAM_TYPES
    assert not missing and not extra, f"{name}: missing {missing}, unknown {extra}"


def test_every_ideal_operation_and_label_style_is_implemented():
    ideals = {k.ideal for k in K.KINDS.values() if k.ideal is not None}
    assert ideals == set(IDEAL_OPS)
    # only what the compiler inserts has no ideal operation of its own
    assert {k.keyword for k in K.KINDS.values() if k.ideal is None} == \
        {k.keyword for k in K.KINDS.values() if k.inserted}
    assert {k.label for k in K.KINDS.values()} == set(LABELS)


def test_synthesis_renders_every_kind_a_timeline_holds():
    # 'together' is opened by the scheduler; 'pad' is added by synthesis itself
    assert set(SLOT_RENDER) == set(K.KINDS) - {"together", "pad"}
    assert set(SLOT_RENDER.values()) == {"burst", "exchange", "readout", "trigger", "frame",
                                         "level", "time"}


def test_preview_and_summary_know_every_kind():
    assert set(STEP_STYLE) == set(K.KINDS)
    assert set(KIND_ORDER) == set(K.KINDS)
    for k in K.KINDS:
        assert step_labels(k, ("A", "B"), {}) and kind_name(k)


def test_exchange_gates_defined_once_and_consistent():
    exchange_kinds = {k for k, v in K.KINDS.items() if v.ideal == "exchange"}
    assert set(K.EXCHANGE_GATES) == exchange_kinds
    assert exchange_kinds <= set(KEYWORDS)
    for g in K.EXCHANGE_GATES.values():
        # exp(−i·2π·x·S1·S2) with x = ∫(J/h)dt is the target up to a global
        # phase: x = 1/4 gives √SWAP, 1/2 SWAP (Loss & DiVincenzo, PRA 57,
        # 120 (1998)); a controlled phase is its own target
        for angle in (math.pi, math.pi / 2, -0.3):
            u = exchange_unitary(g.keyword, 0, 1, 2, angle)
            t = g.target_for(angle)
            overlap = abs(np.trace(t.conj().T @ u)) / 4
            assert overlap == pytest.approx(1.0, abs=1e-12), g.keyword
            assert np.allclose(t @ t.conj().T, np.eye(4), atol=1e-14)
        assert g.regime in ("swap", "phase")
        assert g.aligned == (g.regime == "swap")


def test_controlled_phase_integral_and_target():
    # the conditional phase of an adiabatic exchange pulse is −2π∫(J/h)dt
    # (Meunier, Calado & Vandersypen, PRB 83, 121403 (2011), from memory;
    # Russ et al., PRB 97, 085421 (2018)): CZ needs 1/2, CPHASE(π/2) 3/4
    assert K.EXCHANGE_GATES["cz"].integral_for() == 0.5
    assert K.EXCHANGE_GATES["cz"].integral_for(0.1) == 0.5       # cz ignores a step angle
    assert K.EXCHANGE_GATES["cphase"].integral_for(math.pi / 2) == pytest.approx(0.75)
    assert K.EXCHANGE_GATES["cphase"].integral_for(-math.pi / 2) == pytest.approx(0.25)
    assert K.EXCHANGE_GATES["cphase"].integral_for(2 * math.pi) == 0.0
    assert np.allclose(K.EXCHANGE_GATES["cz"].target_for(), np.diag([1, 1, 1, -1]))


def test_slot_information_is_typed_and_never_changed(tmp_path):
    from compiler import load
    from conftest import SEQUENCES
    checked = load(SEQUENCES / "cnot_pair.dotseq")
    seen = set()
    for tl in checked.timelines:
        for s in tl.slots:
            assert s.info is None or isinstance(
                s.info, (BurstInfo, FrameInfo, ExchangeInfo, InsertedInfo, MoveInfo)), s.kind
            hash(s.info)          # frozen all the way down: no dict to change
            seen.add(type(s.info))
            if s.info is not None:
                with pytest.raises(dataclasses.FrozenInstanceError):
                    setattr(s.info, dataclasses.fields(s.info)[0].name, math.pi)
    assert {BurstInfo, ExchangeInfo} <= seen


# ------------------------------------------------------------ package structure


# The import rules (no circle, no private names across packages) are
# checked once, in tests/test_architecture.py.
