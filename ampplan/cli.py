"""The ``ampplan`` command line: check a plan file and report every stage's Q-point.

::

    ampplan check PLAN.json [--model constant-drop|ebers-moll] [--json] [--set ADDRESS=VALUE ...]
    ampplan check --demo
    ampplan report PLAN.json|--demo -o report.html [--model ...] [--set ADDRESS=VALUE ...]

``report`` writes one standalone HTML file that reads offline (see :mod:`ampplan.report`); its exit
status follows ``check``'s once the file is written.

Exit status of ``check``:

* 0: every stage is forward-active and no caution fired;
* 1: a stage is out of forward-active, a caution fired, or the solver could not settle the plan;
* 2: bad input: an unreadable or invalid plan file, a bad ``--set``, a bad option (the message
  goes to standard error, without a traceback).

Values are engineering notation at this edge (``--set s1.rc=4.7k``, ``--set s2.c_bypass=100u``),
optionally with the unit the address is declared in (``4.7kΩ``, ``100uF``, ``12V``, ``85°C``; see
:meth:`ampplan.plan.Plan.unit`), read by :func:`ampplan.units.parse_quantity`; the table prints
them the same way.
"""

from __future__ import annotations

import argparse
import importlib.resources
import json
import os
import sys
import textwrap

from . import __version__
from .errors import AmpplanError, ConvergenceError, NoConsistentRegionError, PlanFileError
from .devices import Transistor
from .record import plan_from_dict, read_plan_file
from .solver import MODELS
from .units import format_quantity, parse_quantity
from .validation import MAX_TEXT_LENGTH

__all__ = ["main", "DEMO_PLAN"]

#: The demo plan shipped inside the package (an invented scenario), relative to the package.
DEMO_PLAN = "data/demo_plan.json"

#: Exit statuses of ``check``.
EXIT_OK, EXIT_NOT_OK, EXIT_BAD_INPUT = 0, 1, 2

#: What ``--set name=none`` means: the parameter is not fitted.
_NONE_WORDS = ("none", "null")
#: Longest ``--set`` item read (an address and a value; the description is the long one).
MAX_SETTING_LENGTH = MAX_TEXT_LENGTH + 100


def _printable(text: str) -> str:
    """``text`` with what UTF-8 cannot encode (a lone surrogate from undecodable bytes in the command
    line, say) written as a backslash escape, so that printing it can never fail."""
    return text.encode("utf-8", "backslashreplace").decode("utf-8")


class _BadInput(Exception):
    """Input the user can fix (exit status 2); the message is shown as it is."""


# ------------------------------------------------------------------------------------------------
# Reading the plan
# ------------------------------------------------------------------------------------------------

def _read(args):
    """(plan, label) from the file or the packaged demo; the file is read once."""
    if args.demo and args.plan:
        raise _BadInput("give a plan file or --demo, not both")
    if not args.demo and not args.plan:
        raise _BadInput("give a plan file to check, or --demo for the packaged example")
    if args.demo:
        with importlib.resources.as_file(importlib.resources.files("ampplan").joinpath(DEMO_PLAN)) as path:
            return plan_from_dict(read_plan_file(path), source=os.fspath(path)), "demo plan"
    return plan_from_dict(read_plan_file(args.plan), source=os.fspath(args.plan)), args.plan


def _apply_settings(plan, settings) -> None:
    """Apply ``--set ADDRESS=VALUE`` changes in order, each validated by the plan.

    A number may carry the unit the address is declared in (``s1.rc=4.7kΩ``, ``temperature=85°C``),
    read by :func:`~ampplan.units.parse_quantity`; any other unit is refused.
    """
    for item in settings or ():
        if len(item) > MAX_SETTING_LENGTH:
            raise _BadInput(f"--set {item[:40]}...: {len(item)} characters, more than the {MAX_SETTING_LENGTH} "
                            "a setting may have")
        address, sep, text = item.partition("=")
        address, text = address.strip(), text.strip()
        if not sep or not address or not text:
            raise _BadInput(f"--set {item!r}: expected ADDRESS=VALUE, e.g. s1.rc=4.7k")
        try:
            current = plan.get(address)
            if isinstance(current, Transistor):
                raise _BadInput(f"--set {item}: {address} is a whole transistor; set its parameters one "
                                f"at a time ({address}.beta=..., {address}.vbe_on=...)")
            if isinstance(current, str):
                value = text  # a word: a coupling, a polarity or the description
            elif text.lower() in _NONE_WORDS:
                value = None
            else:
                value = parse_quantity(text, plan.unit(address))
            plan.set(address, value)
        except AmpplanError as exc:
            raise _BadInput(f"--set {item}: {exc}") from None


# ------------------------------------------------------------------------------------------------
# The report
# ------------------------------------------------------------------------------------------------

def _verdict(result) -> tuple[int, str]:
    out_of_region = [s.id for s in result.stages if s.transistor.region != "forward-active"]
    if result.all_forward_active and not result.cautions:
        return EXIT_OK, "OK: every stage forward-active, no cautions"
    reasons = []
    if out_of_region:
        reasons.append(f"not forward-active: {', '.join(out_of_region)}")
    if result.cautions:
        n = len(result.cautions)
        reasons.append(f"{n} caution{'s' if n != 1 else ''}")
    return EXIT_NOT_OK, "NOT OK: " + "; ".join(reasons)


def _report(plan, result, label: str, description: str) -> tuple[int, str]:
    status, verdict = _verdict(result)
    load = ("no load" if plan.load_resistance is None
            else f"load {format_quantity(plan.load_resistance, 'Ω')} ({plan.load_coupling}-coupled)")
    lines = [f"ampplan check: {label} ({result.model} model)"]
    if description:
        lines += textwrap.wrap(description, width=96, initial_indent="  ", subsequent_indent="  ",
                               break_on_hyphens=False)
    lines += [f"  supply {format_quantity(plan.supply, 'V')}, lower rail {format_quantity(plan.negative_supply, 'V')}, "
              f"source {format_quantity(plan.source_resistance, 'Ω')}, {load}, {plan.temperature:g} °C", ""]
    lines += [result.table(), "", "chain", result.summary(), "", "cautions"]
    lines += [f"  - {c}" for c in result.cautions] or ["  none"]
    lines += ["", f"{verdict} (exit status {status})"]
    return status, "\n".join(lines)


# ------------------------------------------------------------------------------------------------
# Commands
# ------------------------------------------------------------------------------------------------

def _check(args, out, err) -> int:
    try:
        plan, label = _read(args)
        _apply_settings(plan, args.set)
    except (PlanFileError, _BadInput) as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, str(exc))
    try:
        result = plan.solve(model=args.model)
    except (NoConsistentRegionError, ConvergenceError) as exc:
        return _fail(args, err, out, EXIT_NOT_OK, f"{label}: the solver could not settle the plan: {exc}")
    except AmpplanError as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, f"{label}: {exc}")
    if args.json:
        status, _ = _verdict(result)
        print(_printable(json.dumps({**result.to_dict(), "exit_status": status}, indent=2, ensure_ascii=False,
                                    allow_nan=False)), file=out)
        return status
    status, text = _report(plan, result, label, plan.description)
    print(_printable(text), file=out)
    return status


def _report_command(args, out, err) -> int:
    try:
        plan, label = _read(args)
        _apply_settings(plan, args.set)
    except (PlanFileError, _BadInput) as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, str(exc))
    try:
        result = plan.solve(model=args.model)
    except (NoConsistentRegionError, ConvergenceError) as exc:
        return _fail(args, err, out, EXIT_NOT_OK, f"{label}: the solver could not settle the plan: {exc}")
    except AmpplanError as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, f"{label}: {exc}")
    from .report import verdict, write_report  # the report draws with matplotlib: load it only here
    try:
        write_report(plan, result, args.output, label)
    except OSError as exc:
        return _fail(args, err, out, EXIT_BAD_INPUT, f"cannot write {args.output}: {exc.strerror or exc}")
    ok, words = verdict(result)
    print(f"ampplan report: wrote {args.output} ({words})", file=out)
    return EXIT_OK if ok else EXIT_NOT_OK


def _fail(args, err, out, status: int, message: str) -> int:
    message = _printable(message)
    print(f"ampplan: {message}", file=err)
    if getattr(args, "json", False):
        print(json.dumps({"error": message, "exit_status": status}, ensure_ascii=False), file=out)
    return status


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="ampplan", description="Plan and check the DC bias of multi-stage bipolar-transistor amplifiers.")
    parser.add_argument("--version", action="version", version=f"ampplan {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    check = commands.add_parser(
        "check", help="solve a plan file and report every stage",
        description="Solve a plan file and report each stage's region, Q-point, margins, swing and gain, "
                    "then the chain figures and cautions. Exit status: 0 when every stage is "
                    "forward-active with no caution, 1 when not, 2 for bad input.")
    check.add_argument("plan", nargs="?", metavar="PLAN.json", help="the plan file to check")
    check.add_argument("--demo", action="store_true", help="check the demo plan shipped with ampplan")
    check.add_argument("--model", choices=MODELS, default=MODELS[0],
                       help=f"device model (default {MODELS[0]})")
    check.add_argument("--json", action="store_true", help="print the result as JSON for machines")
    check.add_argument("--set", action="append", metavar="ADDRESS=VALUE",
                       help="change one value before solving, in engineering notation with or without "
                            "its unit: s1.rc=4.7k, s1.rc=4.7kΩ, supply=15V, s2.device.beta=80, "
                            "s1.rb2=none (repeatable)")
    check.set_defaults(run=_check)
    report = commands.add_parser(
        "report", help="write a standalone HTML report of a plan",
        description="Solve a plan and write one standalone HTML file that reads offline: the tables, the "
                    "canvas picture, the cautions and the safety note. Exit status as for check once the "
                    "file is written; 2 for bad input.")
    report.add_argument("plan", nargs="?", metavar="PLAN.json", help="the plan file to report")
    report.add_argument("--demo", action="store_true", help="report the demo plan shipped with ampplan")
    report.add_argument("-o", "--output", required=True, metavar="REPORT.html", help="the HTML file to write")
    report.add_argument("--model", choices=MODELS, default=MODELS[0], help=f"device model (default {MODELS[0]})")
    report.add_argument("--set", action="append", metavar="ADDRESS=VALUE",
                        help="change one value before solving, as for check (repeatable)")
    report.set_defaults(run=_report_command)
    from .cli_whatif import add_commands  # sweep, tolerance, design (their own module)
    add_commands(commands)
    return parser


def main(argv=None) -> int:
    """Run the command line; returns the exit status.

    Parameters
    ----------
    argv : list of str, optional
        Arguments after the program name (default: ``sys.argv[1:]``).
    """
    parser = _parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse exits on --help, --version and usage errors
        return exc.code if isinstance(exc.code, int) else EXIT_BAD_INPUT
    if args.command is None:
        parser.print_help(sys.stderr)
        return EXIT_BAD_INPUT
    try:
        return args.run(args, sys.stdout, sys.stderr)
    except BrokenPipeError:  # the reader went away (``ampplan check --demo | head``)
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return EXIT_NOT_OK


if __name__ == "__main__":
    sys.exit(main())
