"""The `dotseq` command.  Thin: it parses arguments and calls the functions of
:mod:`compiler`; every input error is printed with its position and a hint
and gives exit code 2, never a traceback."""

from __future__ import annotations

import argparse
import json
import sys
import traceback
from contextlib import contextmanager
from pathlib import Path

from . import CompileOptions, __version__, check_file, compile, load
from .check.summary import render_text, summarize, to_dict
from .errors import DotseqError, UsageError
from .runwarnings import merged
from .limits import MAX_SOURCE_CHARS, check_synthesis_size, default_limit, human, parse_size
from .source import Oversize, Unreadable, read_capped
from .units import FREQUENCY, TIME, UnitError, format_quantity, parse_quantity

EXIT_OK, EXIT_INPUT, EXIT_INTERNAL, EXIT_INTERRUPTED = 0, 2, 3, 130
EXIT_PARTIAL = 4   # dotseq sweep: workers lost; the partial table is written, --resume continues

CAUTION = ("Caution: check every compiled voltage and microwave amplitude against the sample's "
           "and the lab's own limits before loading it onto an instrument; dotseq does not "
           "replace instrument-side limits.")


CONFINE_HELP = ("read includes and the file's device statement only from the sequence "
                "file's folder tree (links resolved); for sequence files written by others")


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # argparse would exit itself; report like any input error
        raise UsageError(f"{message} (see: {self.prog} --help)")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="dotseq", description="Pulse-sequence compiler for electron-spin qubits "
                "in gate-defined quantum dots.", epilog=CAUTION)
    p.add_argument("--version", action="version", version=f"dotseq {__version__}")
    p.add_argument("--debug", action="store_true", help="show Python tracebacks of internal errors")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    c = _command(sub, "check", "parse and validate a sequence and its device; print a summary",
                 "Parse a sequence file, load its device description, check both and print qubits, "
                 "Larmor frequencies, duration, step counts, the longest gate and the coherence "
                 "margin.", epilog=None)
    c.add_argument("--device", help=DEVICE_HELP)
    c.add_argument("--json", action="store_true", help=JSON_HELP)
    c.add_argument("--confine", action="store_true", help=CONFINE_HELP)

    k = _command(sub, "compile", "compile a sequence into the sample arrays each channel plays, "
                 "written as a bundle folder",
                 "Check, schedule and synthesise every run of a sequence and write a bundle folder: "
                 "the volts and DAC codes of every output (.npy, each distinct stretch stored once "
                 "unless --full), a JSON manifest with the step timeline, frames and checksums "
                 "(docs/bundle.md). The folder is written atomically.",
                 out="bundle folder to write (replaced if it holds an earlier bundle)")
    _common(k)
    k.add_argument("--csv", action="store_true", help="also write samples.csv per run")
    k.add_argument("--hdf5", action="store_true", help="also write bundle.h5: a dataset per run "
                   "and output with units, sample rate, codes scaling and checksums (needs h5py: "
                   "pip install 'dotseq[hdf5]')")
    k.add_argument("--raw", action="store_true", help="also write raw/run_NNNN/NAME.i32: the DAC "
                   "codes as little-endian int32 without header (markers .u8), the scaling in "
                   "the manifest")
    lay = k.add_mutually_exclusive_group()
    lay.add_argument("--stack", action="store_true", help="stack the runs of a sweep in one array per "
                     "output (shorter runs padded at the end, recorded in the manifest)")
    lay.add_argument("--full", action="store_true", help="one full array per run and output "
                     "(default: every distinct stretch stored once in segments/, each run a "
                     "table of references; docs/bundle.md)")
    k.add_argument("--json", action="store_true", help=JSON_HELP)

    v = _command(sub, "preview", "draw what the generators will play (PNG, SVG or PDF)",
                 "Draw the step timeline, every output against time and the microwave spectrum "
                 "with each dot's Larmor frequency marked.", out="image file: .png, .svg or .pdf")
    _common(v)
    v.add_argument("--run", type=int, default=0, help="which run of a sweep to draw (default 0)")
    v.add_argument("--from", dest="t_from", help="start of the time window, e.g. '1.5 us'")
    v.add_argument("--to", dest="t_to", help="end of the time window, e.g. '3 us'")
    v.add_argument("--step", type=int, help="zoom on one timeline entry (its index in the manifest)")

    m = _command(sub, "simulate", "simulate what the generators play: fidelities and an error "
                 "budget, written as a report folder",
                 "Lindblad simulation of the compiled waveforms (T1 at temperature, T2, "
                 "quasi-static Zeeman noise for T2*, charge noise on exchange, drive crosstalk, rise "
                 "times, quantisation, bias tee): per-step and whole-run fidelities, readout "
                 "populations and an error budget (docs/simulate.md).",
                 out="report folder to write")
    _common(m)
    _sim_flags(m)
    m.add_argument("--json", action="store_true", help=JSON_HELP)

    r = _command(sub, "run", "check, compile, preview and simulate into one folder",
                 "The whole job: check the sequence, write the waveform bundle (DIR/bundle), a "
                 "preview of the detail run (DIR/preview.png) and the simulation report "
                 "(DIR/report).", out="folder for the bundle, preview and report (written as one "
                 "unit; an earlier run's folder is replaced)")
    r.add_argument("--discard-other-files", action="store_true", help="replace the -o folder even "
                   "when it holds files dotseq did not write (they are deleted)")
    _common(r)
    _sim_flags(r)
    _sweep_parser(sub)
    _rb_parser(sub)
    return p


DEVICE_HELP = "device description (YAML) to use instead of the file's own"
JSON_HELP = "print the result as JSON for scripts"


def _command(sub, name: str, summary: str, description: str, *, out: str | None = None,
             epilog: str | None = CAUTION) -> argparse.ArgumentParser:
    """A subcommand that reads a sequence file: its parser with the file and,
    when ``out`` (its help) is given, the required -o/--out."""
    p = sub.add_parser(name, help=summary, description=description, epilog=epilog)
    p.add_argument("file", help="sequence file (.dotseq)")
    if out is not None:
        p.add_argument("-o", "--out", required=True, help=out)
    return p


def _rb_parser(sub) -> None:
    b = sub.add_parser("rb", help="randomized benchmarking of one or two qubits: random Clifford "
                       "sequences written as .dotseq files, simulated, fitted (rb.json, rb.png)",
                       description="Generate random Clifford sequences of the given lengths "
                       "(each ending with the inverting Clifford) in the device's native steps, "
                       "simulate them with the full model on the local cores, fit A·p^m + B and "
                       "report the error per Clifford and per native step with confidence "
                       "intervals, optionally interleaved RB of one step, and compare with the "
                       "simulated per-step fidelities (docs/rb.md). Exit codes: 0 done, 2 bad "
                       "input, 3 internal error, 130 interrupted (finished simulations kept; "
                       "continue with --resume).")
    b.add_argument("source", metavar="FILE_OR_DEVICE", help="device description (.yaml) or a "
                   "sequence file whose device statement names it")
    b.add_argument("-o", "--out", required=True, help="folder for rb.json, rb.png, the sequences "
                   "and the state file survival.jsonl")
    b.add_argument("--qubits", nargs="+", required=True, metavar="Q",
                   help="one qubit (single-qubit RB) or a coupled pair (two-qubit RB)")
    b.add_argument("--lengths", default="1,2,4,8,16,32,64", help="sequence lengths in Cliffords, "
                   "separated by commas (default 1,2,4,8,16,32,64)")
    b.add_argument("--sequences", type=int, default=20, help="random sequences per length "
                   "(default 20)")
    b.add_argument("--seed", type=int, default=0, help="seed of the random sequences (default 0)")
    b.add_argument("--interleave", metavar="STEP", help="interleaved RB of this step: 'rot Q AXIS "
                   "ANGLE' (x, y, -x, -y, z; ±90 or 180) or, on two qubits, 'cz' (two √SWAP "
                   "around a z rotation)")
    b.add_argument("--decomposition", default="virtual-z", help="native decomposition: virtual-z "
                   "(default; z rotations as frame updates) or, on one qubit, xy")
    b.add_argument("--resamples", type=int, default=200, help="bootstrap resamples over the "
                   "sequences for the 95 %% intervals (default 200)")
    b.add_argument("--device", help=DEVICE_HELP)
    _worker_flags(b, "simulate", "the sequences travel with the tasks; ")
    b.add_argument("--resume", action="store_true", help="continue the unfinished run in the -o "
                   "folder (same device and arguments)")
    _model_flags(b)
    b.add_argument("--quiet", action="store_true", help="no progress bar")
    b.add_argument("--json", action="store_true", help="print rb.json on stdout for scripts")


SWEEP_EPILOG = (
    "Names: field, temperature, rotation.amplitude or rotation.duration, DOT.g, DOT.t1, DOT.t2, "
    "DOT.t2_star, DOT.rabi_per_volt, PAIR.j_scale, PAIR.j0 (exponential J(V)), "
    "PAIR.pulse_voltage, PAIR.idle_voltage, PAIR.charge_noise (PAIR as A-B), and the file's own "
    "let and sweep names (docs/sweep.md). Exit codes: 0 complete, 2 bad input, 3 internal "
    "error, 4 workers lost (partial table written), 130 interrupted (partial table written); "
    "continue a partial sweep with the same arguments and --resume. Caution: sweeping drive "
    "amplitudes or gate levels is a simulation only; check the compiled waveforms of the "
    "chosen point against the sample's and the lab's limits before loading anything.")


def _sweep_parser(sub) -> None:
    w = _command(sub, "sweep", "simulate a sweep of one or two device or sequence parameters in "
                 "parallel: a table (CSV, JSON) and a plot",
                 "Whole-run fidelity (and with --budget the largest error sources) at every point "
                 "of a sweep of one or two parameters of the device (field, a dot's g or T2, a "
                 "coupling's J, the drive) or of the sequence (its let and sweep names), on the "
                 "local cores or a Dask cluster. Every point is checked before anything is "
                 "simulated; finished points are kept when the sweep is interrupted "
                 "(docs/sweep.md).", out="folder for sweep.csv, sweep.json, sweep.png and the "
                 "state file points.jsonl", epilog=SWEEP_EPILOG)
    w.add_argument("--vary", action="append", default=[], metavar="NAME=START:STOP:POINTS",
                   help="sweep a parameter: START:STOP:POINTS (even), START:STOP:POINTS:log, or "
                   "V1,V2,...; values with units, e.g. --vary field=0.5T:1.5T:11 (at most two; "
                   "the first is the outer axis and across in the heat map)")
    w.add_argument("--set", dest="fixed", action="append", default=[], metavar="NAME=VALUE",
                   help="hold a parameter at one value, e.g. --set A.t2=40us or --set tau=200ns "
                   "(pins a sweep of the file)")
    w.add_argument("--device", help=DEVICE_HELP)
    w.add_argument("--confine", action="store_true", help=CONFINE_HELP)
    w.add_argument("--budget", action="store_true", help="also compute the error budget of every "
                   "point (about ten more simulations per point)")
    _worker_flags(w, "compute", "")
    w.add_argument("--memory-limit", metavar="SIZE", help="memory the sweep may take, e.g. "
                   "4GiB (default: half the memory available); the points computed at once by the local worker "
                   "processes share it (each gets the limit / --workers; on a --cluster each "
                   "point gets the whole limit): a sweep whose point would not fit is refused "
                   "before any point is simulated")
    w.add_argument("--more-workers-than-cores", action="store_true", help="start as many local "
                   "worker processes as --workers asks even when that is more than the cores "
                   "(otherwise capped at the core count)")
    w.add_argument("--resume", action="store_true", help="continue the unfinished sweep in the -o "
                   "folder (same file, device and arguments): compute only the missing points")
    _model_flags(w)
    _exchange_flag(w)
    _readout_flags(w)
    w.add_argument("--no-rwa", action="store_true", help="keep the counter-rotating drive (needs "
                   "--substeps of 64 or more; slow)")
    w.add_argument("--quiet", action="store_true", help="no progress bar")
    w.add_argument("--json", action="store_true", help="print sweep.json on stdout for scripts")


def _worker_flags(p, verb: str, cluster_note: str) -> None:
    """Where the many simulations of a sweep or an rb run are computed."""
    p.add_argument("--workers", type=int, default=None, help="local worker processes (default: "
                   "the number of cores; 1 computes in this process)")
    p.add_argument("--cluster", metavar="tcp://HOST:PORT", help=f"{verb} on this Dask scheduler "
                   "(default: the DOTSEQ_CLUSTER environment variable; 'local' ignores it); "
                   f"{cluster_note}needs pip install 'dotseq[dask]'")
    p.add_argument("--cluster-timeout", type=float, default=None, metavar="SECONDS",
                   help="give up on a --cluster address that does not answer as a Dask scheduler "
                   "within this time (default 10)")


def _model_flags(p) -> None:
    """The simulation's engine and accuracy (simulate, run, sweep, rb)."""
    from .simulate.engines import ENGINES
    p.add_argument("--engine", choices=tuple(ENGINES), default="fast",
                   help="fast (exact piecewise-constant propagation, default) or reference "
                   "(qutip mesolve, slow; for cross-checks)")
    p.add_argument("--nodes", type=int, default=5, help="quadrature nodes per quasi-static noise "
                   "variable to start from (default 5; 1 switches the averaging off); refined "
                   "until two rules agree within --averaging-tolerance")
    p.add_argument("--averaging-tolerance", type=float, default=1e-4, metavar="FIDELITY",
                   help="every run's average over quasi-static noise is refined until the "
                   "fidelities of two successive quadrature rules agree within this (default "
                   "1e-4); the achieved averaging error is reported per run")
    p.add_argument("--quadrature", choices=("auto", "tensor", "additive"), default="auto",
                   help="full product grid, one noise at a time (exact to second order), or auto")
    p.add_argument("--substeps", type=int, default=2, help="piecewise-constant sub-steps per sample "
                   "(default 2)")


def _exchange_flag(p) -> None:
    """The fast engine's accuracy for residual exchange (simulate, run, sweep)."""
    p.add_argument("--exchange-accuracy", type=float, default=1e-6, metavar="FIDELITY",
                   help="residual exchange of closed barriers is dropped or treated as weak "
                   "within this change of the average gate fidelity (default 1e-6; 0: exact)")


def _readout_flags(p) -> None:
    """What the report counts: the fidelity scope and the shots (simulate,
    run, sweep)."""
    p.add_argument("--whole-register", action="store_true", help="score the whole-run "
                   "fidelities on every dot (default: on the qubits the program acts on, so idle "
                   "spectators do not dominate them)")
    p.add_argument("--shots", type=int, default=0, metavar="N", help="repetitions of the "
                   "experiment: the observables get expected counts and binomial error bars")


def _sim_flags(p) -> None:
    p.add_argument("--run", type=int, default=0, dest="detail_run",
                   help="run of a sweep that gets per-step fidelities, the budget and traces")
    _model_flags(p)
    _exchange_flag(p)
    _readout_flags(p)
    p.add_argument("--no-rwa", action="store_true", help="keep the counter-rotating drive "
                   "(Bloch-Siegert shifts); needs --substeps of 64 or more and is slow")
    p.add_argument("--no-budget", action="store_true", help="skip the error budget")
    p.add_argument("--no-steps", action="store_true", help="skip per-step fidelities")


def _common(p) -> None:
    p.add_argument("--device", help=DEVICE_HELP)
    p.add_argument("--predistort", action="store_true", help="pre-distort gate outputs for their "
                   "bias tee's droop")
    p.add_argument("--no-mixer-correction", action="store_true", help="play I/Q as for an ideal "
                   "mixer even where the device gives a mixer calibration (what-if: the "
                   "uncorrected mixer and its image tone)")
    p.add_argument("--memory-limit", help="refuse to compile above this estimated memory, e.g. 2GiB "
                   "(default: half the memory available)")
    p.add_argument("--confine", action="store_true", help=CONFINE_HELP)


def _make_parent(out: str) -> None:
    """Create the folders above an output path (like mkdir -p), or say why not."""
    from pathlib import Path
    parent = Path(out).expanduser().resolve().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise UsageError(f"cannot create the folder '{parent}' for -o {out}: "
                         f"{e.strerror or e}", hint="choose another -o path") from None


def cmd_check(args) -> int:
    summary = check_file(args.file, args.device, confine=args.confine)
    if args.json:
        print(json.dumps(to_dict(summary), indent=2))
    else:
        print(render_text(summary))
    return EXIT_OK


def _memory_limit(args) -> int:
    """--memory-limit in bytes, or the default (half the memory available);
    an empty value is refused like any other that is not a size."""
    return (parse_size(args.memory_limit, "--memory-limit") if args.memory_limit is not None
            else default_limit())


def _options(args) -> CompileOptions:
    return CompileOptions(predistort=bool(args.predistort),
                          mixer_correction=not getattr(args, "no_mixer_correction", False))


def _synthesised(args, checked=None, runs: list[int] | None = None):
    """Compile the chosen runs (all by default) of the loaded file (loaded
    here unless given), after the memory estimate."""
    limit = _memory_limit(args)
    if checked is None:
        checked = load(args.file, args.device, memory_limit=limit, confine=args.confine)
    chosen = range(len(checked.timelines)) if runs is None else runs
    n_outputs = sum(2 if c.kind == "iq" else 1 for c in checked.device.channels.values())
    # padded to the generators' min_length and granularity, as synthesis will
    total = sum(checked.device.padded_samples(checked.timelines[i].n_samples) for i in chosen)
    need = check_synthesis_size(total, n_outputs, limit, file=args.file)
    return compile(checked, _options(args), runs=runs), need


def _source(args, compiled) -> dict:
    import hashlib
    dev = compiled.checked.device
    files = {}
    for label, path in (("sequence", args.file), ("device", dev.path)):
        try:    # read once already: a regular file within the cap
            files[label] = hashlib.sha256(read_capped(path, 4 * MAX_SOURCE_CHARS)).hexdigest()
        except (Unreadable, Oversize):
            files[label] = ""
    return {"sequence": str(args.file), "device": str(dev.path), "device_name": dev.name,
            "dotseq_version": __version__, "sha256": files,
            "predistort_bias_tee": bool(args.predistort),
            "mixer_correction": not args.no_mixer_correction}


def cmd_compile(args) -> int:
    from .export import write_bundle
    compiled, need = _synthesised(args)
    path = write_bundle(compiled.waveforms, args.out, source=_source(args, compiled),
                        csv=args.csv, stacked=args.stack,
                        segments=not (args.stack or args.full), raw=args.raw,
                        hdf5=args.hdf5)
    wfs = compiled.waveforms
    warnings = sorted(merged([r.timeline.warnings for r in compiled.runs]))
    if args.json:
        print(json.dumps({"ok": True, "bundle": str(path), "runs": len(wfs),
                          "samples": [wf.n_samples for wf in wfs],
                          "sample_rate_Hz": wfs[0].sample_rate if wfs else None,
                          "outputs": list(wfs[0].outputs) if wfs else [],
                          "warnings": warnings}, indent=2))
        return EXIT_OK
    fs = wfs[0].sample_rate
    durs = [wf.n_samples / fs for wf in wfs]
    print(f"compiled  {args.file}: {len(wfs)} run{'s' * (len(wfs) != 1)}, "
          f"{format_quantity(min(durs), TIME)}"
          + (f" .. {format_quantity(max(durs), TIME)}" if max(durs) != min(durs) else "")
          + f", {format_quantity(fs, FREQUENCY).replace('Hz', 'S/s')}")
    print(f"outputs   {', '.join(wfs[0].outputs)}")
    for name, out in wfs[0].outputs.items():
        if out.kind != "marker":
            ranges = [w.outputs[name].volt_range() for w in wfs]   # no full volts arrays
            lo = min(r[0] for r in ranges)
            hi = max(r[1] for r in ranges)
            print(f"  {name:<8} {lo * 1e3:9.3f} mV .. {hi * 1e3:9.3f} mV"
                  + (f"  (+ {out.dc_level * 1e3:.4g} mV DC through the bias tee)" if out.dc_level else ""))
    print(f"bundle    {path}  (manifest.json, checksums; about {human(need)} in memory)")
    for w in warnings:
        print(w)
    print(CAUTION)
    return EXIT_OK


def _time_arg(text: str | None, flag: str) -> float | None:
    if text is None:
        return None
    try:
        return parse_quantity(text, TIME, flag)
    except UnitError as e:
        raise UsageError(str(e), hint=f"e.g. {flag} '1.5 us'") from None


def cmd_preview(args) -> int:
    from .preview import preview
    limit = _memory_limit(args)
    checked = load(args.file, args.device, memory_limit=limit, confine=args.confine)
    n = len(checked.timelines)
    if not 0 <= args.run < n:
        raise UsageError(f"--run {args.run} does not exist: the file has {n} run{'s' * (n != 1)} "
                         f"(0..{n - 1})")
    wf = _synthesised(args, checked, runs=[args.run])[0].waveforms[0]
    lo = {name: c.lo for name, c in checked.device.channels.items() if c.kind == "iq"}
    sweep = checked.timelines[args.run].run.sweep_text()
    title = f"{args.file} (run {args.run}{': ' + sweep if sweep else ''}) on {checked.device.name}"
    out = preview(wf, args.out, start=_time_arg(args.t_from, "--from"),
                  stop=_time_arg(args.t_to, "--to"), step=args.step, title=title, lo=lo)
    print(f"preview   {out}")
    for w in wf.warnings:
        print(w)
    print(CAUTION)
    return EXIT_OK


def _sim_options(args):
    from .simulate import SimOptions
    return SimOptions(engine=args.engine, substeps=args.substeps, nodes=args.nodes, rwa=not args.no_rwa,
                      averaging_tolerance=args.averaging_tolerance,
                      quadrature=args.quadrature, budget=not args.no_budget,
                      steps=not args.no_steps, detail_run=args.detail_run,
                      fidelity_scope="register" if args.whole_register else "program",
                      shots=args.shots, exchange_accuracy=args.exchange_accuracy,
                      memory_limit=_memory_limit(args))


def _simulated(args, compiled):
    """Simulate the compiled runs (what export and preview took)."""
    from .simulate import simulate
    n = len(compiled.runs)
    if not 0 <= args.detail_run < n:
        raise UsageError(f"--run {args.detail_run} does not exist: the file has {n} run"
                         f"{'s' * (n != 1)} (0..{n - 1})")
    def progress(text: str) -> None:
        print(f"simulating: {text}", file=sys.stderr, flush=True)
    return simulate(compiled, _sim_options(args), progress=progress)


def cmd_simulate(args) -> int:
    from .report import summary_text, write_report
    compiled, _ = _synthesised(args)
    result = _simulated(args, compiled)
    path = write_report(result, args.out)
    if args.json:
        from .report.data import results_json
        print(results_json(result))
        return EXIT_OK
    print(summary_text(result), end="")
    print(f"report    {path}")
    return EXIT_OK


def cmd_run(args) -> int:
    """check + compile + export + preview + simulate into one folder, written as one unit
    (compiler/export/runfolder.py): every argument is checked before anything is written."""
    import hashlib
    from .export import write_bundle
    from .export.runfolder import check_run_folder, write_run_folder
    from .preview import preview
    from .report import summary_text, write_report
    out = check_run_folder(args.out, args.discard_other_files)
    _sim_options(args).check()
    # loaded (parsed, checked, scheduled) once and compiled once: export,
    # preview and simulation take the same compiled runs
    checked = load(args.file, args.device, memory_limit=_memory_limit(args), confine=args.confine)
    summary = summarize(checked.expanded, checked.device, list(checked.timelines))
    n = summary.runs
    if not 0 <= args.detail_run < n:
        raise UsageError(f"--run {args.detail_run} does not exist: the file has {n} run"
                         f"{'s' * (n != 1)} (0..{n - 1}); nothing was written")
    print(render_text(summary))
    print()
    compiled, need = _synthesised(args, checked)
    k = args.detail_run
    result = _simulated(args, compiled)
    lo = {name: c.lo for name, c in checked.device.channels.items() if c.kind == "iq"}

    def fill(tmp):
        write_bundle(compiled.waveforms, tmp / "bundle", source=_source(args, compiled),
                     segments=True)
        preview(compiled.waveforms[k], tmp / "preview.png",
                title=f"{args.file} (run {k}) on {checked.device.name}", lo=lo)
        write_report(result, tmp / "report")
        digest = {part: hashlib.sha256((tmp / part).read_bytes()).hexdigest()
                  for part in ("bundle/manifest.json", "report/results.json")}
        return {"sequence": str(args.file), "runs": n, "detail_run": k, "sha256": digest}
    write_run_folder(out, fill, allow_unknown=args.discard_other_files)
    nr = len(compiled.waveforms)
    print(f"bundle    {out / 'bundle'}  ({nr} run{'s' * (nr != 1)})")
    print(f"preview   {out / 'preview.png'}")
    print()
    print(summary_text(result), end="")
    print(f"report    {out / 'report'}")
    print(CAUTION)
    return EXIT_OK


def _where_to_compute(args, goes: str) -> tuple[str | None, float, int]:
    """(Dask scheduler address or None, its timeout in s, local workers) of
    ``sweep`` and ``rb``: --cluster, else the DOTSEQ_CLUSTER variable
    ('local' or empty: this machine).  --workers beside a cluster, a
    timeout outside (0, 3600] s, an address that is not a scheduler's and a
    missing Dask are refused before anything is planned; ``goes`` says what
    would go to the cluster ("the sweep goes")."""
    import os
    from .sweep.execute import (CLUSTER_VARIABLE, DEFAULT_CLUSTER_TIMEOUT, check_address,
                                local_cores, require_dask)
    cluster = args.cluster if args.cluster is not None else os.environ.get(CLUSTER_VARIABLE, "")
    cluster = cluster.strip() or None
    if cluster == "local":
        cluster = None
    if cluster and args.workers is not None:
        raise UsageError(f"--workers sets the local worker processes, but {goes} to the Dask "
                         f"cluster {cluster}" + ("" if args.cluster else
                                                 f" (from {CLUSTER_VARIABLE})"),
                         hint="drop --workers, or give --cluster local to compute here")
    timeout = DEFAULT_CLUSTER_TIMEOUT if args.cluster_timeout is None else args.cluster_timeout
    if not 0 < timeout <= 3600:
        raise UsageError(f"--cluster-timeout {timeout:g}: give from 0 to 3600 seconds",
                         hint="e.g. --cluster-timeout 30")
    if cluster:
        cluster = check_address(cluster)
        require_dask()               # fail now, with the install hint, not after planning
        if not args.debug:           # dotseq reports lost points itself
            import logging
            logging.getLogger("distributed").setLevel(logging.CRITICAL)
    workers = args.workers if args.workers is not None else local_cores()
    if workers < 1:
        raise UsageError(f"--workers {workers}: give at least 1", hint="e.g. --workers 2")
    return cluster, timeout, workers


@contextmanager
def _sigterm_as_interrupt():
    """A batch system's stop (SIGTERM) handled like Ctrl-C inside the block:
    the finished points or simulations are kept."""
    import signal

    def on_term(signum, frame):
        raise KeyboardInterrupt
    old_term = signal.signal(signal.SIGTERM, on_term)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, old_term)


def cmd_sweep(args) -> int:
    import shlex
    from .simulate import SimOptions
    from .sweep import plan_sweep, run_sweep
    from .sweep.execute import local_cores, pool_context
    from .sweep.table import json_text
    from .sweep.text import Progress, outcome_lines, plan_lines, problem_lines

    cluster, timeout, workers = _where_to_compute(args, "the sweep goes")
    limit = _memory_limit(args)
    capped = ""
    if workers > local_cores() and not args.more_workers_than_cores:
        capped = (f" (--workers {workers} capped at the {local_cores()} cores; "
                  "--more-workers-than-cores starts them all)")
        workers = local_cores()
    opts = SimOptions(engine=args.engine, substeps=args.substeps, nodes=args.nodes,
                      rwa=not args.no_rwa, quadrature=args.quadrature, budget=False, steps=False,
                      averaging_tolerance=args.averaging_tolerance,
                      fidelity_scope="register" if args.whole_register else "program",
                      shots=args.shots, exchange_accuracy=args.exchange_accuracy)
    opts.check()
    if not cluster and workers > 1:
        pool_context()               # the workers' server imports the package while we plan
    # every point's simulation estimated against its share of the limit
    # (sweep/memory.py): the local workers' points run at once
    plan = plan_sweep(args.file, args.vary, args.fixed, device=args.device, options=opts,
                      budget=args.budget, confine=args.confine, memory_limit=limit,
                      processes=1 if cluster else workers)
    command = "dotseq " + shlex.join([a for a in args.argv if a != "--resume"] + ["--resume"])
    if not cluster and 1 < plan.n_points < workers:
        capped = (f" (--workers {workers} capped at the {plan.n_points} points)"
                  if args.workers is not None else " (one per point)")
        workers = plan.n_points
    where = (f"Dask cluster {cluster}" if cluster else "this process" + capped if workers == 1
             else f"{workers} local processes" + capped)
    if not args.json:
        print("\n".join(plan_lines(plan, args.file, where)), flush=True)
    with _sigterm_as_interrupt():
        outcome = run_sweep(plan, args.out, workers=workers, cluster=cluster, resume=args.resume,
                            progress=Progress(enabled=not args.quiet), command=command,
                            cluster_timeout=timeout)
    if args.json:
        print(json_text(outcome.table, figure="sweep.png" if "png" in outcome.files else None),
              end="")
    else:
        print("\n".join(outcome_lines(outcome)))
    for line in problem_lines(outcome, command):
        print(line, file=sys.stderr)
    return {"complete": EXIT_OK, "interrupted": EXIT_INTERRUPTED, "workers lost": EXIT_PARTIAL,
            "failed": EXIT_INTERNAL}[outcome.status]


def cmd_rb(args) -> int:
    from .benchmarking.run import Progress, RBSettings, parse_lengths, plan_rb, run_rb, \
        summary_lines
    from .sweep.execute import connect, local_cores, pool_context
    cluster, timeout, workers = _where_to_compute(args, "the simulations go")
    settings = RBSettings(tuple(args.qubits), parse_lengths(args.lengths), args.sequences,
                          args.seed, args.decomposition, args.interleave, args.engine, args.nodes,
                          args.quadrature, args.substeps, args.resamples)
    workers = min(workers, local_cores())
    from .simulate import SimOptions
    SimOptions(engine=args.engine, nodes=args.nodes, quadrature=args.quadrature,
               substeps=args.substeps).check()
    if not cluster and workers > 1:
        pool_context()               # the workers' server imports the package while we plan
    plan = plan_rb(args.source, settings, device=args.device)
    connection = connect(cluster, timeout) if cluster else None
    try:
        with _sigterm_as_interrupt():
            outcome = run_rb(plan, args.out, workers=workers, resume=args.resume,
                             progress=Progress(enabled=not args.quiet), cluster=connection)
    except KeyboardInterrupt:
        print(f"dotseq rb: interrupted; every finished simulation is kept in {args.out}/"
              "survival.jsonl: continue with the same arguments and --resume", file=sys.stderr)
        return EXIT_INTERRUPTED
    if args.json and outcome.data is not None:
        print((outcome.folder / "rb.json").read_text(), end="")
    else:
        print("\n".join(summary_lines(outcome)), file=sys.stderr if args.json else sys.stdout)
    return {"complete": EXIT_OK, "invalid": EXIT_INPUT, "failed": EXIT_INTERNAL}[outcome.status]


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    want_json = "--json" in argv
    debug = "--debug" in argv
    try:
        args = build_parser().parse_args(argv)
        if args.command is None:
            raise UsageError("no command given; try: dotseq check FILE (see: dotseq --help)")
        if getattr(args, "out", None):
            _make_parent(args.out)
        args.argv = argv
        return {"check": cmd_check, "compile": cmd_compile, "preview": cmd_preview,
                "simulate": cmd_simulate, "run": cmd_run, "sweep": cmd_sweep,
                "rb": cmd_rb}[args.command](args)
    except DotseqError as e:
        if want_json:
            print(json.dumps(e.to_dict(), indent=2))
        else:
            print(e.render(), file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("dotseq: interrupted; nothing was written", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return EXIT_OK
    except MemoryError:
        msg = ("dotseq: out of memory (the operating system refused an allocation although "
               "dotseq's own estimate was below its limit); nothing was written. A smaller "
               "--memory-limit makes dotseq refuse with the cause instead; this is worth "
               "reporting with the input files.")
        if want_json:
            print(json.dumps({"ok": False, "stage": "memory", "errors": [{"message": msg}]}))
        else:
            print(msg, file=sys.stderr)
        return EXIT_INTERNAL
    except Exception as e:  # an internal bug, not bad input: say so plainly
        if debug:
            traceback.print_exc()
        msg = f"dotseq: internal error ({type(e).__name__}: {e}). This is a bug in dotseq, not in " \
              "your input; please report it with the input files (rerun with --debug for details)."
        if want_json:
            print(json.dumps({"ok": False, "stage": "internal", "errors": [{"message": msg}]}))
        else:
            print(msg, file=sys.stderr)
        return EXIT_INTERNAL


def entry() -> None:
    # every matrix dotseq multiplies is small or thin: a second BLAS thread only
    # adds synchronisation (30x slower on a batch of 4x4 exponentials, 2 cores)
    from .threads import one_thread
    with one_thread():
        code = main()
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    entry()
