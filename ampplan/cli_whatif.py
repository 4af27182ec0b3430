"""The what-if commands of ``ampplan``: ``sweep``, ``tolerance`` and ``design``.

::

    ampplan sweep PLAN|--demo --vary ADDRESS=LO..HI[:N][log] [--vary ...] [--grid] [--show ADDRESS ...]
                  [--json|--csv]
    ampplan tolerance PLAN|--demo --samples N [--seed S] [--resistors 5%] [--beta 0.5..2] [--vbe-on 10m]
                      [--temperature 0..50] [--required-amplitude 10m] [--min-yield 0.99] [--json]
    ampplan design PLAN|--demo ADDRESS --target RESULT=VALUE|symmetric_swing [--series E24]
                   [--bounds LO..HI] [-o NEW_PLAN.json] [--json]

All take ``--model`` and ``--set ADDRESS=VALUE`` as ``check`` does, and values in engineering
notation (``1k..10k``, ``10m``), optionally with their unit. Exit statuses as for ``check``:

* 0: ``sweep``: every sample passes the ``check`` rule; ``tolerance``: the yield is at least
  ``--min-yield`` (always, without it); ``design``: the target is reached and the new plan passes;
* 1: otherwise (a sample out of forward-active or with a caution, a yield below ``--min-yield``,
  a target out of reach);
* 2: bad input, with a message naming the culprit and no traceback;
* 130: stopped with Ctrl-C.

Long runs show a progress bar (tqdm) on standard error when it is a terminal, never with
``--json`` or ``--csv``.
"""

from __future__ import annotations

import csv
import json
import math
import re

import numpy as np

from . import eseries
from .analyses.addresses import RESULT_UNITS, WORD_RESULTS, check_result_address
from .analyses.whatif.sweeps import MAX_SAMPLES, check_address
from .cli import EXIT_BAD_INPUT, EXIT_NOT_OK, EXIT_OK, _apply_settings, _BadInput, _fail, _read, _verdict
from .errors import AmpplanError, ConvergenceError, NoConsistentRegionError, PlanFileError, TargetNotReachedError
from .record import save_plan
from .solver import MODELS
from .units import format_quantity, parse_quantity

__all__ = ["add_commands", "parse_range", "EXIT_INTERRUPTED"]

#: Exit status after Ctrl-C (128 + SIGINT, the shell's convention).
EXIT_INTERRUPTED = 130
#: Points of a --vary range without :N.
DEFAULT_POINTS = 11
#: Stops a sweep from asking for more samples than memory holds (the API's own limit).
MAX_SWEEP_SAMPLES = MAX_SAMPLES

_RANGE = re.compile(r"^(?P<lo>.+?)\.\.(?P<hi>.+?)(?::(?P<n>[^:]+?))?(?P<log>log)?$", re.IGNORECASE)


def parse_range(text: str, unit: str = "", what: str = "range") -> tuple:
    """``"1k..10k:20log"`` -> (1000.0, 10000.0, 20, True); N and ``log`` are optional (N None)."""
    match = _RANGE.match(text.strip())
    if "..." in text:
        # "1k...10k" would read as 1k .. .10k (100 Ω): refused rather than guessed.
        raise _BadInput(f"{what} {text!r}: write LO..HI with two dots, e.g. 1k..10k")
    if not match:
        raise _BadInput(f"{what} {text!r}: expected LO..HI[:N][log], e.g. 1k..10k:20log")
    try:
        lo, hi = parse_quantity(match["lo"], unit), parse_quantity(match["hi"], unit)
    except AmpplanError as exc:
        raise _BadInput(f"{what} {text!r}: {exc}") from None
    n = None
    if match["n"] is not None:
        if not match["n"].isdigit() or int(match["n"]) < 1:
            raise _BadInput(f"{what} {text!r}: N must be a whole number >= 1, got {match['n']!r}")
        n = int(match["n"])
    log = match["log"] is not None
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise _BadInput(f"{what} {text!r}: the ends must be finite numbers")
    if log and (lo <= 0 or hi <= 0):
        raise _BadInput(f"{what} {text!r}: a log range needs positive ends")
    return lo, hi, n, log


def _progress(args, err):
    """(callback, close) for a tqdm bar on a terminal; quiet otherwise."""
    quiet = getattr(args, "json", False) or getattr(args, "csv", False) or not err.isatty()
    if quiet:
        return None, lambda: None
    from tqdm import tqdm
    bar = tqdm(total=None, unit="sample", file=err, leave=False, dynamic_ncols=True)

    def update(done, total):
        bar.total = total
        bar.n = done
        bar.refresh()
    return update, bar.close


def _prepare(args):
    plan, label = _read(args)
    _apply_settings(plan, args.set)
    return plan, label


def _json(out, payload, status):
    print(json.dumps({**payload, "exit_status": status}, indent=2, ensure_ascii=False, allow_nan=False), file=out)


def _cell(value, unit: str) -> str:
    if isinstance(value, str):
        return value or "—"
    return format_quantity(float(value), unit)


def _achieved(value: float, unit: str, name: str) -> str:
    """The exact value's target quantity; the symmetric swing's difference, a root-finder's few fV
    about zero, is shown as centred to 1 nV rather than as numerical noise."""
    if name == "symmetric_swing" and abs(value) < 1e-9:
        return "0 V (centred to 1 nV: swing toward saturation − toward cutoff)"
    return format_quantity(value, unit, 6)


# ------------------------------------------------------------------------------------------------
# sweep
# ------------------------------------------------------------------------------------------------

def _sweep_values(plan, varies, grid: bool) -> dict:
    values = {}
    for item in varies or ():
        address, sep, text = item.partition("=")
        address = address.strip()
        if not sep or not address or not text.strip():
            raise _BadInput(f"--vary {item!r}: expected ADDRESS=LO..HI[:N][log], e.g. s1.rc=1k..10k:20log")
        try:
            plan.get(address)       # an unknown address, with the plan's did-you-mean
        except AmpplanError as exc:
            raise _BadInput(f"--vary {item}: {exc}") from None
        try:
            check_address(plan, address, "--vary")   # the API's words for what a batch cannot vary
            unit = plan.unit(address)
        except AmpplanError as exc:
            raise _BadInput(str(exc)) from None
        if address in values:
            raise _BadInput(f"--vary {address}: given twice; give each address one range")
        lo, hi, n, log = parse_range(text, unit, f"--vary {address}")
        n = DEFAULT_POINTS if n is None else n
        if n > MAX_SWEEP_SAMPLES:    # before an array of that size is made
            raise _BadInput(f"--vary {address}: {n} points, more than {MAX_SWEEP_SAMPLES} samples")
        values[address] = np.geomspace(lo, hi, n) if log else np.linspace(lo, hi, n)
    if not values:
        raise _BadInput("give at least one --vary ADDRESS=LO..HI[:N][log]")
    size = math.prod(len(v) for v in values.values()) if grid else len(next(iter(values.values())))
    if size > MAX_SWEEP_SAMPLES:
        raise _BadInput(f"the sweep asks for {size} samples, more than {MAX_SWEEP_SAMPLES}")
    return values


def _shown(plan, show) -> list:
    if not show:
        show = [f"{sid}.{name}" for sid in plan.stage_ids for name in ("region", "vce", "ic")]
        show += ["gain", "max_source_amplitude"]
    for address in show:
        try:
            check_result_address(address, plan.stage_ids)
        except AmpplanError as exc:
            raise _BadInput(f"--show {address}: {exc}") from None
    return list(show)


def _sweep(args, out, err) -> int:
    try:
        plan, label = _prepare(args)
        values = _sweep_values(plan, args.vary, args.grid)
        show = _shown(plan, args.show)
    except (PlanFileError, _BadInput) as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, str(exc))
    try:
        result = plan.sweep(values, model=args.model, grid=args.grid)
    except KeyboardInterrupt:
        return _fail(args, err, out, EXIT_INTERRUPTED, "interrupted")
    except AmpplanError as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, f"{label}: {exc}")
    passed = result.passed()
    status = EXIT_OK if passed.all() else EXIT_NOT_OK
    inputs = list(result.values)
    if args.json:
        _json(out, {**result.to_dict(), "passed": passed.tolist()}, status)
        return status
    columns = [(a, result[a], plan.unit(a)) for a in inputs]
    columns += [(a, result[a], RESULT_UNITS[a.rpartition(".")[2]]) for a in show]
    if args.csv:
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow([a for a, _, _ in columns] + ["passed"])
        for i in range(len(result)):
            writer.writerow([(c[i] if isinstance(c[i], str) else repr(float(c[i]))) for _, c, _ in columns]
                            + [bool(passed[i])])
        return status
    rows = [[a for a, _, _ in columns] + ["check"]]
    for i in range(len(result)):
        rows.append([_cell(c[i], unit) for _, c, unit in columns] + ["ok" if passed[i] else "NOT OK"])
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    print(f"ampplan sweep: {label} ({result.model} model), {len(result)} samples", file=out)
    for k, row in enumerate(rows):
        print("  ".join(c.rjust(w) for c, w in zip(row, widths)).rstrip(), file=out)
        if k == 0:
            print("  ".join("-" * w for w in widths), file=out)
    print(f"\n{int(passed.sum())} of {len(result)} samples pass the check rule (exit status {status})", file=out)
    return status


# ------------------------------------------------------------------------------------------------
# tolerance
# ------------------------------------------------------------------------------------------------

def _fraction(text, what, unit=""):
    """A tolerance: a fraction (5% or 0.05), or with ``unit`` a quantity in it (10m, 10mV)."""
    if text is None or text.strip().lower() in ("none", "0", "0%"):
        return None
    t = text.strip()
    try:
        if unit:
            return parse_quantity(t, unit)
        return parse_quantity(t[:-1]) / 100.0 if t.endswith("%") else parse_quantity(t)
    except AmpplanError as exc:
        raise _BadInput(f"{what} {text!r}: {exc}" + ("" if unit else " (write 5% or 0.05)")) from None


def _pair(text, what, unit=""):
    if text is None or text.strip().lower() == "none":
        return None
    lo, hi, n, log = parse_range(text, unit, what)
    if n is not None or log:
        raise _BadInput(f"{what} {text!r}: expected LO..HI only")
    return lo, hi


def _tolerance(args, out, err) -> int:
    try:
        plan, label = _prepare(args)
        options = dict(samples=args.samples, seed=args.seed, resistors=_fraction(args.resistors, "--resistors"),
                       beta=_pair(args.beta, "--beta"), vbe_on=_fraction(args.vbe_on, "--vbe-on", "V"),
                       temperature=_pair(args.temperature, "--temperature", "°C"), distribution=args.distribution,
                       model=args.model)
        if args.required_amplitude is not None:
            options["required_amplitude"] = parse_quantity(args.required_amplitude, "V")
        if args.min_yield is not None and not 0 <= args.min_yield <= 1:
            raise _BadInput(f"--min-yield {args.min_yield:g}: must be a fraction from 0 to 1")
    except (PlanFileError, _BadInput) as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, str(exc))
    except AmpplanError as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, f"--required-amplitude: {exc}")
    update, close = _progress(args, err)
    try:
        result = plan.tolerance(progress=update, **options)
    except KeyboardInterrupt:
        close()
        return _fail(args, err, out, EXIT_INTERRUPTED, "interrupted")
    except AmpplanError as exc:
        close()
        return _fail(args, err, out, EXIT_BAD_INPUT, f"{label}: {exc}")
    close()
    status = EXIT_NOT_OK if args.min_yield is not None and result.yield_fraction < args.min_yield else EXIT_OK
    if args.json:
        _json(out, {**result.to_dict(), "min_yield": args.min_yield}, status)
        return status
    lines = [f"ampplan tolerance: {label} ({result.model} model, {result.samples} samples, {result.distribution}, "
             f"seed {result.seed})", "varied"]
    lines += [f"  {s.address}: {format_quantity(s.low, plan.unit(s.address))} … "
              f"{format_quantity(s.high, plan.unit(s.address))}" for s in result.spreads] or ["  nothing"]
    handles = (f" and handle {format_quantity(result.required_amplitude, 'V')}" if result.required_amplitude
               else "")
    lines += ["", f"yield {100 * result.yield_fraction:.2f} % ({int(result.passed.sum())} of {result.samples} pass "
                  f"the check rule{handles})", "", "percentiles"]
    for address, p in result.percentiles.items():
        unit = RESULT_UNITS[address.rpartition(".")[2]]
        lines.append(f"  {address:28s} " + "  ".join(f"p{q} {format_quantity(v, unit)}" for q, v in p.items()))
    lines += ["", "most influential (rank correlation)"]
    for address, pairs in result.sensitivity.items():
        if pairs:
            lines.append(f"  {address:28s} " + ", ".join(f"{a} {rho:+.2f}" for a, rho in pairs[:3]))
    lines += ["", "nearest to failing"]
    for sample in result.worst(5):
        lines.append(f"  sample {sample.index}: {'passes' if sample.passed else 'FAILS'}, limited by "
                     f"{sample.limiting}")
    verdict = ("OK" if status == EXIT_OK else "NOT OK") + (f": yield against --min-yield {args.min_yield:g}"
                                                           if args.min_yield is not None else "")
    lines += ["", f"{verdict} (exit status {status})"]
    print("\n".join(lines), file=out)
    return status


# ------------------------------------------------------------------------------------------------
# design
# ------------------------------------------------------------------------------------------------

def _target(plan, address: str, text: str):
    text = text.strip()
    if text.endswith("symmetric_swing"):
        head = text[:-len("symmetric_swing")].rstrip(".")
        if not head:
            head, dot, _ = address.partition(".")
            if not dot or head not in plan.stage_ids:
                raise _BadInput(f"--target {text}: {address} is no stage's value, so name the stage, e.g. "
                                f"{(plan.stage_ids or ('s1',))[0]}.symmetric_swing")
        return f"{head}.symmetric_swing"
    result, sep, value = text.partition("=")
    if not sep or not result.strip() or not value.strip():
        raise _BadInput(f"--target {text!r}: expected RESULT=VALUE (s1.vce=5) or symmetric_swing")
    result = result.strip()
    try:
        check_result_address(result, plan.stage_ids)
    except AmpplanError as exc:
        raise _BadInput(f"--target {text}: {exc}") from None
    name = result.rpartition(".")[2]
    if name in WORD_RESULTS:
        raise _BadInput(f"--target {text}: {result} is a word, not a number to reach")
    try:
        return result, parse_quantity(value.strip(), RESULT_UNITS[name])
    except AmpplanError as exc:
        raise _BadInput(f"--target {text}: {exc}") from None


def _design(args, out, err) -> int:
    try:
        plan, label = _prepare(args)
        target = _target(plan, args.address, args.target)
        bounds = None
        if args.bounds is not None:
            try:
                unit = plan.unit(args.address)
            except AmpplanError as exc:
                raise _BadInput(f"{args.address}: {exc}") from None
            bounds = _pair(args.bounds, "--bounds", unit)
        if args.series is not None and args.series.upper() not in eseries.SERIES_NAMES:
            raise _BadInput(f"--series {args.series}: choose one of {', '.join(eseries.SERIES_NAMES)}")
    except (PlanFileError, _BadInput) as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, str(exc))
    try:
        result = plan.design(args.address, target, series=args.series, bounds=bounds, model=args.model)
    except KeyboardInterrupt:
        return _fail(args, err, out, EXIT_INTERRUPTED, "interrupted")
    except (TargetNotReachedError, NoConsistentRegionError, ConvergenceError) as exc:
        return _fail(args, err, out, EXIT_NOT_OK, f"{label}: {exc}")
    except AmpplanError as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, f"{label}: {exc}")
    status, verdict = _verdict(result.result)
    if args.output:
        try:
            save_plan(result.plan, args.output)
        except (PlanFileError, OSError) as exc:
            return _fail(args, err, out, EXIT_BAD_INPUT, f"-o {args.output}: {exc}")
    if args.json:
        _json(out, {**result.to_dict(), "plan_result": result.result.to_dict(), "saved": args.output}, status)
        return status
    unit = plan.unit(args.address)
    name = result.target.rpartition(".")[2]
    target_unit = "V" if name == "symmetric_swing" else RESULT_UNITS[name]
    lines = [f"ampplan design: {label} ({args.model} model): {args.address} for {result.target} = "
             f"{format_quantity(result.value, target_unit)}",
             f"  exact     {args.address} = {format_quantity(result.exact, unit, 6)}  ->  {result.target} = "
             f"{_achieved(result.achieved, target_unit, name)}"]
    if len(result.roots) > 1:
        lines.append("  note: the target is reached at " + ", ".join(format_quantity(r, unit, 6) for r in result.roots)
                     + "; the one nearest the plan's value is used")
    for value, achieved in result.neighbours:
        mark = "  <- chosen" if value == result.snapped else ""
        lines.append(f"  {result.series:<8s}  {args.address} = {format_quantity(value, unit)}  ->  {result.target} = "
                     f"{format_quantity(achieved, target_unit, 6)}{mark}")
    lines += ["", result.result.table(), "", f"{verdict} (exit status {status})"]
    if args.output:
        lines.append(f"saved {args.output}")
    print("\n".join(lines), file=out)
    return status


# ------------------------------------------------------------------------------------------------
# Registration
# ------------------------------------------------------------------------------------------------

def _common(parser) -> None:
    parser.add_argument("plan", nargs="?", metavar="PLAN.json", help="the plan file")
    parser.add_argument("--demo", action="store_true", help="use the demo plan shipped with ampplan")
    parser.add_argument("--model", choices=MODELS, default=MODELS[0], help=f"device model (default {MODELS[0]})")
    parser.add_argument("--set", action="append", metavar="ADDRESS=VALUE",
                        help="change one value first, as for check (repeatable)")


def add_commands(commands) -> None:
    """Add ``sweep``, ``tolerance`` and ``design`` to the ``ampplan`` subcommands."""
    sweep = commands.add_parser(
        "sweep", help="solve a plan over ranges of its values",
        description="Solve a plan over ranges of plan values in one batched call and print the chosen results "
                    "per sample. Exit status: 0 when every sample passes the check rule, 1 when not, 2 for bad "
                    "input.")
    _common(sweep)
    sweep.add_argument("--vary", action="append", metavar="ADDRESS=LO..HI[:N][log]",
                       help=f"a plan value and its range, N points (default {DEFAULT_POINTS}), log-spaced with "
                            "'log': s1.rc=1k..10k:20log (repeatable; same N unless --grid)")
    sweep.add_argument("--grid", action="store_true", help="every combination of the --vary ranges")
    sweep.add_argument("--show", nargs="+", metavar="ADDRESS",
                       help="result addresses to print (default each stage's region, vce, ic; gain; "
                            "max_source_amplitude)")
    output = sweep.add_mutually_exclusive_group()
    output.add_argument("--json", action="store_true", help="every result of every sample as JSON")
    output.add_argument("--csv", action="store_true", help="the shown columns as CSV")
    sweep.set_defaults(run=_sweep)

    tolerance = commands.add_parser(
        "tolerance", help="Monte Carlo yield of a plan under part tolerances and temperature",
        description="Sample resistor tolerance, beta spread, V_BE(on) spread and ambient temperature, solve every "
                    "sample, and report the yield (samples passing the check rule), percentiles of the margins, "
                    "what drives them, and the samples nearest to failing. Exit status: 1 when the yield is "
                    "below --min-yield, 2 for bad input, else 0.")
    _common(tolerance)
    tolerance.add_argument("--samples", type=int, default=10_000, help="number of samples (default 10000)")
    tolerance.add_argument("--seed", type=int, help="seed, for the same samples again")
    tolerance.add_argument("--resistors", default="5%", help="resistor tolerance: 5%% or 0.05; none (default 5%%)")
    tolerance.add_argument("--beta", default="0.5..2", help="beta factor range LO..HI; none (default 0.5..2)")
    tolerance.add_argument("--vbe-on", default="10m", help="V_BE(on) spread, ± volts; none (default 10m)")
    tolerance.add_argument("--temperature", default="0..50", help="ambient range, °C; none (default 0..50; write --temperature=-20..50 for a negative start)")
    tolerance.add_argument("--distribution", choices=("uniform", "normal"), default="uniform",
                           help="uniform over each range, or normal with the range as ±3 sigma")
    tolerance.add_argument("--required-amplitude", metavar="VOLTS",
                           help="source EMF, volts peak, every passing sample must handle unclipped")
    tolerance.add_argument("--min-yield", type=float, metavar="FRACTION",
                           help="exit 1 when the yield is below this fraction (for CI)")
    tolerance.add_argument("--json", action="store_true", help="the summary as JSON")
    tolerance.set_defaults(run=_tolerance)

    design = commands.add_parser(
        "design", help="solve one plan value for a target result",
        description="Find the value of one plan address that brings a result to a target (or centres a stage's "
                    "Q-point on its AC load line: symmetric_swing), optionally snapped to an IEC 60063 E-series "
                    "value. Exit status: 0 when reached and the new plan passes the check rule, 1 when not, 2 for "
                    "bad input.")
    _common(design)
    design.add_argument("address", metavar="ADDRESS", help="the plan value to solve for, e.g. s1.rc")
    design.add_argument("--target", required=True, metavar="RESULT=VALUE",
                        help="a result address and its value (s1.vce=5, s1.ic=1m, gain=100), or symmetric_swing")
    design.add_argument("--series", metavar="E24", help="snap to an E-series: E6, E12, E24, E48, E96, E192")
    design.add_argument("--bounds", metavar="LO..HI", help="range to search (default value/100 .. value*100)")
    design.add_argument("-o", "--output", metavar="NEW_PLAN.json", help="save the designed plan")
    design.add_argument("--json", action="store_true", help="the design as JSON")
    design.set_defaults(run=_design)

