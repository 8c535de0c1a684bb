"""The package's import structure, read from the source (AST, nothing is
imported): no import circle inside ``compiler/``; the simulation stage
imports no compiler stage (nothing from ``schedule/`` or ``report/``, from
``synth/`` only its data types); no module imports another package's
private (``_name``) definitions; and the command's start-up leaves out
the heavy scipy packages it needs only in places (one subprocess).
(Architecture rules of issue 13; common practice, no source.)"""

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PKG = ROOT / "compiler"


def _modules() -> dict[str, Path]:
    out = {}
    for p in sorted(PKG.rglob("*.py")):
        parts = list(p.relative_to(ROOT).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts.pop()
        out[".".join(parts)] = p
    return out


MODULES = _modules()


def _is_package(name: str) -> bool:
    return MODULES.get(name, Path()).name == "__init__.py"


def _imports(name: str, path: Path):
    """(imported module, imported name or None, line) for every import of a
    ``compiler`` module, relative imports resolved; ``from pkg import sub``
    counts as an import of the submodule ``pkg.sub``."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    base = name if _is_package(name) else name.rpartition(".")[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "compiler":
                    yield a.name, None, node.lineno
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                parts = base.split(".")
                up = parts[:len(parts) - (node.level - 1)]
                mod = ".".join(up + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if mod.split(".")[0] != "compiler":
                continue
            for a in node.names:
                sub = f"{mod}.{a.name}"
                if sub in MODULES:
                    yield sub, None, node.lineno
                else:
                    yield mod, a.name, node.lineno


def _graph() -> dict[str, set[str]]:
    g: dict[str, set[str]] = {}
    for name, path in MODULES.items():
        g[name] = {m for m, _, _ in _imports(name, path) if m in MODULES and m != name}
    return g


def _cycle(g: dict[str, set[str]]) -> list[str] | None:
    """One import circle, or None (depth-first search with colours)."""
    colour = {n: 0 for n in g}
    stack: list[str] = []

    def visit(n):
        colour[n] = 1
        stack.append(n)
        for m in sorted(g[n]):
            if colour[m] == 1:
                return stack[stack.index(m):] + [m]
            if colour[m] == 0:
                found = visit(m)
                if found:
                    return found
        stack.pop()
        colour[n] = 2
        return None

    for n in sorted(g):
        if colour[n] == 0:
            found = visit(n)
            if found:
                return found
    return None


def _package(module: str) -> str:
    parts = module.split(".")
    return ".".join(parts[:2])


def test_the_graph_is_read():
    g = _graph()
    # sanity of the reader itself: known edges are found, relative imports resolved
    assert "compiler.simulate.model" in g["compiler.simulate.build"]
    assert "compiler.synth.types" in g["compiler.simulate.run"]
    assert "compiler.limits" in g["compiler"]


def test_no_import_circle_inside_compiler():
    assert _cycle(_graph()) is None, f"import circle: {' -> '.join(_cycle(_graph()))}"


def test_the_cycle_finder_finds_a_circle():
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None


def test_simulate_imports_no_compiler_stage():
    allowed_synth = {"compiler.synth.types"}
    bad = []
    for name, path in MODULES.items():
        if not name.startswith("compiler.simulate"):
            continue
        for mod, _, line in _imports(name, path):
            top = _package(mod)
            if top in ("compiler.schedule", "compiler.report", "compiler.sweep", "compiler.export",
                       "compiler.preview", "compiler.cli") or mod == "compiler":
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {mod}")
            elif top == "compiler.synth" and mod not in allowed_synth:
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {mod}")
    assert not bad, "\n".join(bad)


@pytest.mark.parametrize("kind", ["private names", "private modules"])
def test_no_private_definitions_of_another_package(kind):
    bad = []
    for name, path in MODULES.items():
        for mod, attr, line in _imports(name, path):
            if _package(mod) == _package(name):
                continue
            dunder = attr is not None and attr.startswith("__") and attr.endswith("__")
            if kind == "private names" and attr is not None and attr.startswith("_") and not dunder:
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {mod}.{attr}")
            if kind == "private modules" and any(p.startswith("_") and p != "__init__"
                                                 for p in mod.split(".")):
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {mod}")
    assert not bad, "\n".join(bad)


def test_engines_read_only_the_model():
    # the engines know nothing of devices, waveforms or noise sources: they
    # import the model and result types, their own modules and shared maths only
    allowed = {"compiler.simulate.model", "compiler.simulate.types", "compiler.pulses",
               "compiler.threads"}
    bad = []
    for name, path in MODULES.items():
        if not name.startswith("compiler.simulate.engines"):
            continue
        for mod, _, line in _imports(name, path):
            if not (mod.startswith("compiler.simulate.engines") or mod in allowed):
                bad.append(f"{path.relative_to(ROOT)}:{line} imports {mod}")
    assert not bad, "\n".join(bad)


def test_the_command_starts_and_checks_bursts_without_the_heavy_scipy_packages():
    """scipy.optimize (with scipy.interpolate, which imports it) and
    scipy.signal cost about 0.4 s and 1 s of every command's start-up and of
    every sweep worker's. Only a root finder (exchange pulse design) and the
    calibration tables' interpolation need the first two, imported where
    used; the RC recursion is numpy's (analog.first_order). Checking a
    sequence of bursts without exchange imports none of them (common
    practice, no source)."""
    import subprocess
    import sys
    code = ("import sys\n"
            "from compiler.cli import main\n"
            "try:\n"
            "    main(['check', 'sequences/gaas_rabi.dotseq'])\n"
            "except SystemExit:\n"
            "    pass\n"
            "print(sorted(m for m in sys.modules if m.startswith(('scipy.optimize', "
            "'scipy.interpolate', 'scipy.signal'))), file=sys.stderr)\n")
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0 and "gaas_rabi.dotseq" in r.stdout, r.stdout + r.stderr
    assert r.stderr.strip().splitlines()[-1] == "[]", r.stderr
