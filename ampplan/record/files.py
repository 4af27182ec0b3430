"""Plan files on disk: a size limit, :func:`json.loads` only, and atomic writes."""

from __future__ import annotations

import json
import os
import re
import secrets
from pathlib import Path

from ..errors import PlanFileError
from ..plan import Plan
from .convert import plan_from_dict, plan_to_dict
from .schema import INFINITY, validate_plan_dict

__all__ = ["MAX_FILE_BYTES", "parse_plan_text", "read_plan_file", "load_plan", "save_plan"]

#: Larger files are refused before they are parsed (a plan is a few kilobytes).
MAX_FILE_BYTES = 1 << 20


class _Object(dict):
    """A JSON object that remembers keys it saw twice (json.loads would silently keep the last)."""
    duplicates: tuple = ()


def _object_pairs(pairs):
    obj = _Object()
    seen = []
    for key, value in pairs:
        if key in obj:
            seen.append(key)
        obj[key] = value
    obj.duplicates = tuple(dict.fromkeys(seen))
    return obj


class _Constant(ValueError):
    """Raised by the parser on NaN / Infinity literals (internal)."""


def _refuse_constant(name):
    raise _Constant(name)


def _line_column(text: str, index: int) -> tuple[int, int]:
    line = text.count("\n", 0, index) + 1
    return line, index - (text.rfind("\n", 0, index) + 1) + 1


def parse_plan_text(text: str, source: str = "<plan>"):
    """Parse plan-file text with :func:`json.loads` only; no other evaluation happens.

    Raises
    ------
    PlanFileError
        Malformed JSON (with line and column), or a ``NaN``/``Infinity`` literal.
    """
    try:
        return json.loads(text, parse_constant=_refuse_constant, object_pairs_hook=_object_pairs)
    except _Constant as exc:
        # The decoder does not say where; find the literal outside of strings.
        match = next((m for m in re.finditer(r'"(?:[^"\\]|\\.)*"|(-?Infinity|NaN)', text) if m.group(1)), None)
        where = "line {} column {}: ".format(*_line_column(text, match.start(1))) if match else ""
        raise PlanFileError(f"{source}: {where}{exc} is not allowed in a plan file "
                            f"(JSON has no {exc}; write \"{INFINITY}\" for an infinite value)") from None
    except json.JSONDecodeError as exc:
        at_end = exc.pos >= len(text.rstrip())
        hint = " (the file ends too soon: truncated?)" if at_end else ""
        raise PlanFileError(f"{source}: not valid JSON: line {exc.lineno} column {exc.colno}: {exc.msg}{hint}") \
            from None
    except (ValueError, RecursionError) as exc:  # an integer too long to convert, nesting too deep
        raise PlanFileError(f"{source}: not a readable plan file: {exc}") from None


def read_plan_file(path) -> dict:
    """Read, parse and validate a plan file; returns the plain dict (nothing is constructed).

    Raises
    ------
    PlanFileError
        Naming the path: unreadable, larger than :data:`MAX_FILE_BYTES`, not UTF-8, malformed
        JSON, not a plan file, a newer version, or invalid values.
    """
    source = os.fspath(path)
    try:
        with open(source, "rb") as f:
            size = os.fstat(f.fileno()).st_size
            if size > MAX_FILE_BYTES:
                raise PlanFileError(f"{source}: file is {size} bytes, larger than the {MAX_FILE_BYTES} bytes "
                                    "a plan file may be; refusing to read it")
            raw = f.read(MAX_FILE_BYTES + 1)
    except OSError as exc:
        raise PlanFileError(f"{source}: cannot read the plan file: {exc.strerror or exc}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise PlanFileError(f"{source}: file is larger than the {MAX_FILE_BYTES} bytes a plan file may be; "
                            "refusing to read it")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise PlanFileError(f"{source}: not UTF-8 text (byte {exc.start}); a plan file is JSON in UTF-8") from None
    data = parse_plan_text(text, source)
    validate_plan_dict(data, source)
    return data


def load_plan(path) -> Plan:
    """Read a plan file written by :func:`save_plan` (or by hand).

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    Plan

    Raises
    ------
    PlanFileError
        Naming the path and, for bad values, the JSON path of each.
    """
    return plan_from_dict(read_plan_file(path), source=os.fspath(path))


def save_plan(plan: Plan, path, description: str | None = None) -> None:
    """Write ``plan`` to ``path`` as a plan file, atomically.

    The JSON goes to a temporary file in the same directory, which is flushed, synced to disk
    and then renamed over ``path`` (:func:`os.replace`). If anything fails, ``path`` keeps its
    old content (or stays absent) and the temporary file is removed.

    Parameters
    ----------
    plan : Plan
    path : str or os.PathLike
    description : str, optional
        Free text for the file's ``description``.

    Raises
    ------
    PlanFileError
        Naming the path, when the file cannot be written; or naming the path and the JSON path
        of each problem when the plan would not load back (checked as :func:`load_plan` checks a
        file, before anything is written).
    """
    target = Path(os.fspath(path))
    data = plan_to_dict(plan, description)
    # The same checks as loading (the schema, then a dry run through the constructors), before the
    # temporary file exists: nothing unloadable is ever written.
    plan_from_dict(data, source=f"{target}: not written, the plan would not load back")
    directory = target.parent
    temporary = directory / f".{target.name}.{secrets.token_hex(6)}.tmp"
    try:
        # 0o666 less the umask, like any new file; an existing file keeps its permissions.
        fd = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    except OSError as exc:
        raise PlanFileError(f"{target}: cannot write the plan file: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as f:
            json.dump(data, f, indent=2, ensure_ascii=False, allow_nan=False)
            f.write("\n")
            f.flush()
            os.fsync(f.fileno())
        try:
            os.chmod(temporary, os.stat(target).st_mode & 0o7777)
        except FileNotFoundError:
            pass
        os.replace(temporary, target)
    except BaseException as exc:
        try:
            os.unlink(temporary)
        except OSError:
            pass
        if isinstance(exc, Exception):  # an interrupt passes through, after the clean-up
            reason = (exc.strerror if isinstance(exc, OSError) else None) or str(exc) or type(exc).__name__
            raise PlanFileError(f"{target}: cannot write the plan file: {reason}; "
                                "the file was left as it was") from exc
        raise
    _sync_directory(directory)


def _sync_directory(directory: Path) -> None:
    """Make the rename durable where the platform allows (POSIX); best effort."""
    if os.name != "posix":
        return
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
