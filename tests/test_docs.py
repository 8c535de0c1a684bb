"""Every Python recipe in the docs runs (issue 14, item 6).

The fenced blocks marked ```python test in docs/*.md are extracted and run,
each in a fresh namespace, in a temporary folder that holds a copy of
sequences/ and the outputs the recipes read, made by the real commands:
a bundle (dotseq compile, also with --raw --hdf5), a report (dotseq simulate) and a sweep table
(dotseq sweep).  A block marked ```python without 'test' is refused, so a
new recipe cannot go untested.
"""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path

import pytest

from compiler.cli import main
from conftest import ROOT

DOCS = sorted((ROOT / "docs").glob("*.md")) + [ROOT / "README.md"]
FENCE = re.compile(r"^```python([^\n]*)\n(.*?)^```", re.S | re.M)


def blocks():
    out = []
    for doc in DOCS:
        text = doc.read_text(encoding="utf-8")
        for m in FENCE.finditer(text):
            line = text[:m.start()].count("\n") + 1
            out.append(pytest.param(doc.name, line, m.group(1).strip(), m.group(2),
                                    id=f"{doc.name}:{line}"))
    return out


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    """A folder with sequences/ and the outputs the recipes read."""
    d = tmp_path_factory.mktemp("docs")
    shutil.copytree(ROOT / "sequences", d / "sequences")
    (d / "out").mkdir()
    old = os.getcwd()
    os.chdir(d)
    try:
        seq = "sequences/ramsey_single.dotseq"
        assert main(["compile", seq, "-o", "out/ramsey"]) == 0
        assert main(["compile", seq, "-o", "out/ramsey-formats", "--raw", "--hdf5"]) == 0
        assert main(["simulate", seq, "-o", "out/ramsey-sim", "--no-budget"]) == 0
        assert main(["sweep", seq, "--vary", "A.t2_star=2us,5us", "--set", "tau=1us",
                     "-o", "out/ramsey-t2star", "--workers", "1", "--quiet", "--nodes", "3"]) == 0
    finally:
        os.chdir(old)
    return d


def test_there_are_recipes():
    marked = [b for b in blocks() if b.values[2] == "test"]
    assert len(marked) >= 6


@pytest.mark.parametrize("doc, line, marker, code", blocks())
def test_recipe_runs(outputs, doc, line, marker, code, monkeypatch, capsys):
    assert marker == "test", (f"{doc}:{line}: a ```python block must be a tested recipe "
                              "(```python test); tests/test_docs.py runs it")
    monkeypatch.chdir(outputs)
    exec(compile(code, f"{doc}:{line}", "exec"), {"__name__": "__doc_recipe__"})
