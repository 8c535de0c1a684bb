"""``results.json``: the whole :class:`SimulationResult` as deterministic JSON,
and reading it back.

The text is deterministic: keys sorted, two-space indent, a trailing newline,
no timestamps; numpy arrays become lists and numpy scalars Python numbers;
floats are written with ``repr`` (the shortest text that reads back to the
same float), and non-finite floats as the strings ``"nan"``, ``"inf"`` and
``"-inf"`` (so the file stays strict JSON).  The same result always gives
the same bytes.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from ..jsontext import jsonable
from ..simulate.types import (BudgetLine, Observable, RunResult, SimulationResult, SpectrumBand,
                              SpectrumSummary, StepFidelity)
from .errors import fail

FORMAT_NAME = "dotseq-report"
FORMAT_VERSION = 2
RESULTS_NAME = "results.json"


def results_document(result: SimulationResult, *, figures: tuple[str, ...] = (),
                     detail_run: int | None = None, best_run: int | None = None) -> dict:
    """The content of ``results.json`` as a plain dict.

    Parameters
    ----------
    result : SimulationResult
    figures : tuple of str
        File names of the figures written beside it.
    detail_run, best_run : int, optional
        Position (in ``result.runs``) of the run whose steps and budget the
        report shows, and of the sweep's best run.

    Returns
    -------
    dict
        ``{"format", "format_version", "figures", "detail_run", "best_run",
        "result"}``.
    """
    return {"format": FORMAT_NAME, "format_version": FORMAT_VERSION,
            "figures": list(figures), "detail_run": detail_run, "best_run": best_run,
            "result": jsonable(result)}


def results_json(result: SimulationResult, **kw: Any) -> str:
    """The text of ``results.json`` (see :func:`results_document` for the
    keywords): sorted keys, two-space indent, ``repr`` floats, newline at
    the end."""
    return json.dumps(results_document(result, **kw), sort_keys=True, indent=2,
                      ensure_ascii=False, allow_nan=False) + "\n"


# ---------------------------------------------------------------- reading back

def read_format(folder: Path) -> str | None:
    """The ``format`` recorded in ``folder/results.json``, or None when there
    is no readable JSON object there."""
    try:
        with open(Path(folder) / RESULTS_NAME, encoding="utf-8") as f:
            doc = json.load(f)
    except (OSError, ValueError):
        return None
    fmt = doc.get("format") if isinstance(doc, dict) else None
    return fmt if isinstance(fmt, str) else None


def is_report(folder: Path) -> bool:
    """Whether ``folder`` is a real folder holding a dotseq report."""
    folder = Path(folder)
    return folder.is_dir() and not folder.is_symlink() and read_format(folder) == FORMAT_NAME


def _num(x: Any) -> float:
    return float(x)  # float("nan"), float("inf"), float("-inf") read the strings back


def _opt(x: Any) -> float | None:
    return None if x is None else _num(x)


def _step(d: dict) -> StepFidelity:
    return StepFidelity(index=int(d["index"]), kind=str(d["kind"]),
                        qubits=tuple(d["qubits"]), label=str(d["label"]),
                        source=str(d["source"]), start=_num(d["start"]),
                        duration=_num(d["duration"]), fidelity=_num(d["fidelity"]),
                        leakage=_num(d.get("leakage", 0.0)))


def _run(d: dict) -> RunResult:
    return RunResult(
        run_index=int(d["run_index"]),
        sweep=tuple((str(n), _num(v)) for n, v in d["sweep"]),
        dots=tuple(d["dots"]),
        duration=_num(d["duration"]),
        process_fidelity=_opt(d["process_fidelity"]),
        average_fidelity=_opt(d["average_fidelity"]),
        state_fidelity=_num(d["state_fidelity"]),
        populations={k: _num(v) for k, v in d["populations"].items()},
        steps=tuple(_step(s) for s in d.get("steps", ())),
        budget=tuple(BudgetLine(str(b["source"]), _num(b["infidelity"]), str(b.get("note", "")))
                     for b in d.get("budget", ())),
        budget_total=_num(d.get("budget_total", 0.0)),
        budget_floor=_num(d.get("budget_floor", 0.0)),
        budget_remainder=_num(d.get("budget_remainder", 0.0)),
        traces={k: np.asarray([_num(x) for x in v], dtype=float) if isinstance(v, list) else v
                for k, v in d.get("traces", {}).items()},
        stats=dict(d.get("stats", {})),
        averaging_error=_opt(d.get("averaging_error", 0.0)),
        nodes=int(d.get("nodes", 1)),
        compared_nodes=int(d.get("compared_nodes", max(0, int(d.get("nodes", 1)) - 2))),
        budget_numerical_error=_num(d.get("budget_numerical_error", 0.0)),
        leakage=_num(d.get("leakage", 0.0)),
        observables=tuple(_observable(o) for o in d.get("observables", ())),
        fidelity_qubits=tuple(str(q) for q in d.get("fidelity_qubits", ())),
    )


def _observable(d: dict) -> Observable:
    return Observable(label=str(d["label"]), kind=str(d["kind"]), qubits=tuple(d["qubits"]),
                      ideal=_num(d["ideal"]), measured=_num(d["measured"]),
                      target=_num(d["target"]), shots=int(d.get("shots", 0)),
                      counts=_opt(d.get("counts")), error=_opt(d.get("error")))


def result_from_document(doc: dict) -> SimulationResult:
    """Rebuild the :class:`SimulationResult` held in a ``results.json``
    document (the dict :func:`results_document` made).

    Traces come back as float64 arrays, tuples as tuples; ``settings`` and
    ``stats`` hold what JSON can (lists for tuples and arrays).

    Raises
    ------
    KeyError, TypeError, ValueError
        The document does not hold a result in this format.
    """
    r = doc["result"]
    return SimulationResult(
        sequence=str(r["sequence"]), device_name=str(r["device_name"]), engine=str(r["engine"]),
        rwa=bool(r["rwa"]),
        runs=tuple(_run(x) for x in r["runs"]),
        axes=tuple((str(n), tuple(_num(v) for v in vals), str(u)) for n, vals, u in r["axes"]),
        coherence=tuple((str(q), _num(t2), _num(g), _num(ratio), bool(flag))
                        for q, t2, g, ratio, flag in r["coherence"]),
        settings=dict(r.get("settings", {})),
        warnings=tuple(str(w) for w in r.get("warnings", ())),
        stats=dict(r.get("stats", {})),
        spectra=tuple(_spectrum(x) for x in r.get("spectra", ())),
    )


def _spectrum(d: dict) -> SpectrumSummary:
    return SpectrumSummary(
        target=str(d["target"]), quantity=str(d["quantity"]), unit=str(d["unit"]),
        at_1hz=_num(d["at_1hz"]), exponent=_num(d["exponent"]), white=_num(d["white"]),
        f_low=_num(d["f_low"]), f_high=_num(d["f_high"]), window=_num(d["window"]),
        bands=tuple(SpectrumBand(str(b["name"]), _num(b["f_from"]), _num(b["f_to"]),
                                 _num(b["variance"]), str(b["treatment"]))
                    for b in d.get("bands", ())),
        t2_star_s=_opt(d.get("t2_star_s")), t2_s=_opt(d.get("t2_s")),
        t2_cpmg_s={int(n): _num(t) for n, t in (d.get("t2_cpmg_s") or {}).items()})


def load_results(path: str | Path) -> SimulationResult:
    """Read a report's ``results.json`` back into a :class:`SimulationResult`.

    Parameters
    ----------
    path : str or Path
        The report folder, or its ``results.json``.

    Returns
    -------
    SimulationResult

    Raises
    ------
    ReportError
        Missing or unreadable file, not a dotseq report, or a newer format.
    """
    p = Path(path)
    if p.is_dir():
        p = p / RESULTS_NAME
    try:
        with open(p, encoding="utf-8") as f:
            doc = json.load(f)
    except FileNotFoundError:
        raise fail(p, "no results.json here", "give a folder written by dotseq simulate -o") from None
    except OSError as e:
        raise fail(p, f"cannot read the file: {e.strerror or e}") from None
    except ValueError as e:
        raise fail(p, f"not valid JSON: {e}", "the file is damaged; simulate again") from None
    if not isinstance(doc, dict) or doc.get("format") != FORMAT_NAME:
        raise fail(p, f"not a dotseq report (no format '{FORMAT_NAME}')",
                   "give a folder written by dotseq simulate -o")
    version = doc.get("format_version")
    if not isinstance(version, int) or version > FORMAT_VERSION:
        raise fail(p, f"report format version {version!r} is not one this dotseq reads "
                      f"(up to {FORMAT_VERSION})", "update dotseq")
    try:
        return result_from_document(doc)
    except (KeyError, TypeError, ValueError) as e:
        raise fail(p, f"the result in this file is incomplete or malformed ({e!r})",
                   "the file is damaged; simulate again") from None
