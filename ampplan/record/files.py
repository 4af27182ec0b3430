"""Plan files on disk: a size limit, :func:`json.loads` only, and atomic writes."""

from __future__ import annotations

import json
import os
import re
import secrets
import stat
import time
from pathlib import Path

try:
    import fcntl
except ImportError:  # not POSIX: stale temporaries are told by age instead of by lock
    fcntl = None

from ..errors import PlanFileError
from ..plan import Plan
from .convert import plan_from_dict, plan_to_dict
from .schema import INFINITY, MAX_NUMBER_LENGTH, LongNumber, validate_plan_dict

__all__ = ["MAX_FILE_BYTES", "parse_plan_text", "read_plan_file", "load_plan", "save_plan"]

#: Larger files are refused before they are parsed (a plan is a few kilobytes).
MAX_FILE_BYTES = 1 << 20
#: Where there are no file locks, a save's leftover temporary is stale after this many seconds
#: (writing a plan takes milliseconds).
STALE_AFTER = 600.0
_LOCKS = fcntl is not None


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


def _parse_int(text: str):
    # Python's int() is slow on thousands of digits and refuses beyond 4300 with a message of its
    # own; a long number is kept as text, and the schema check names its JSON path.
    return LongNumber(text) if len(text) > MAX_NUMBER_LENGTH else int(text)


def _parse_float(text: str):
    return LongNumber(text) if len(text) > MAX_NUMBER_LENGTH else float(text)


def parse_plan_text(text: str, source: str = "<plan>"):
    """Parse plan-file text with :func:`json.loads` only; no other evaluation happens.

    Raises
    ------
    PlanFileError
        Not text, malformed JSON (with line and column), or a ``NaN``/``Infinity`` literal.
    """
    if not isinstance(text, str):
        raise PlanFileError(f"{source}: plan-file text must be a str, got {type(text).__name__}")
    try:
        return json.loads(text, parse_constant=_refuse_constant, object_pairs_hook=_object_pairs,
                          parse_int=_parse_int, parse_float=_parse_float)
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
    source = _source(path)
    try:
        # Opened without blocking, so that a FIFO cannot hold the open forever, then checked to be a
        # regular file before a byte is read (a FIFO, a directory or a device is refused).
        fd = os.open(source, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
    except OSError as exc:
        raise PlanFileError(f"{source}: cannot read the plan file: {exc.strerror or exc}") from None
    info = os.fstat(fd)
    if not stat.S_ISREG(info.st_mode):
        os.close(fd)
        raise PlanFileError(f"{source}: not a regular file ({_file_kind(info.st_mode)}); a plan file is a "
                            "regular file")
    with os.fdopen(fd, "rb") as f:
        if info.st_size > MAX_FILE_BYTES:
            raise PlanFileError(f"{source}: file is {info.st_size} bytes, larger than the {MAX_FILE_BYTES} bytes "
                                "a plan file may be; refusing to read it")
        try:
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
    return plan_from_dict(read_plan_file(path), source=_source(path))


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
    target = Path(_source(path))
    data = plan_to_dict(plan, description)
    # The same checks as loading (the schema, then a dry run through the constructors), and the
    # same size limit, before the temporary file exists: nothing unloadable is ever written.
    plan_from_dict(data, source=f"{target}: not written, the plan would not load back")
    text = json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    size = len(text.encode("utf-8"))
    if size > MAX_FILE_BYTES:
        raise PlanFileError(f"{target}: not written, the plan would not load back: it takes {size} bytes, more "
                            f"than the {MAX_FILE_BYTES} bytes a plan file may be (a long description?)")
    try:
        info = os.stat(target)
    except OSError:
        info = None
    if info is not None and not stat.S_ISREG(info.st_mode):
        raise PlanFileError(f"{target}: not written: it is {_file_kind(info.st_mode)}, not a regular file")
    directory = target.parent
    _remove_stale_temporaries(directory, target.name)
    temporary = directory / f".{target.name}.{secrets.token_hex(6)}.tmp"
    try:
        # 0o666 less the umask, like any new file; an existing file keeps its permissions.
        fd = os.open(temporary, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    except OSError as exc:
        raise PlanFileError(f"{target}: cannot write the plan file: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as f:
            # Held until the file is renamed: a later save takes an unlocked temporary for the
            # leftover of a killed save, and removes it.
            _lock(f.fileno())
            _write(f, text)
            f.flush()
            os.fsync(f.fileno())
            if info is not None:
                os.chmod(temporary, info.st_mode & 0o7777)
            if _LOCKS:  # renamed while still locked (POSIX renames an open file)
                os.replace(temporary, target)
        if not _LOCKS:
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


def _source(path) -> str:
    """A path as text for opening and for messages; anything else is refused by name."""
    try:
        source = os.fspath(path)
    except TypeError:
        raise PlanFileError(f"a plan file path must be text or a path, got {type(path).__name__}") from None
    if isinstance(source, bytes):
        source = os.fsdecode(source)
    if "\0" in source:
        raise PlanFileError(f"{source!r}: a file path cannot hold a NUL character")
    return source


def _file_kind(mode: int) -> str:
    for test, words in ((stat.S_ISDIR, "a directory"), (stat.S_ISFIFO, "a FIFO"), (stat.S_ISCHR, "a character device"),
                        (stat.S_ISBLK, "a block device"), (stat.S_ISSOCK, "a socket")):
        if test(mode):
            return words
    return "not a regular file"


def _write(f, text: str) -> None:
    f.write(text)


def _lock(fd: int) -> None:
    if _LOCKS:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)


def _remove_stale_temporaries(directory: Path, name: str) -> None:
    """Remove the temporary files (``.<name>.<12 hex>.tmp``) that killed saves of ``name`` left behind.

    A save holds a lock on its temporary until it renames it, and a killed process loses its
    locks, so a temporary whose lock can be taken belongs to no running save. Where the platform
    has no such locks (not POSIX), only temporaries older than :data:`STALE_AFTER` seconds go.
    Best effort: whatever cannot be examined or removed stays.
    """
    pattern = re.compile(rf"\.{re.escape(name)}\.[0-9a-f]{{12}}\.tmp")
    try:
        candidates = [entry for entry in os.scandir(directory) if pattern.fullmatch(entry.name)]
    except OSError:
        return
    for entry in candidates:
        try:
            fd = os.open(entry.path, os.O_RDONLY | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_NONBLOCK", 0))
        except OSError:
            continue
        try:
            if not stat.S_ISREG(os.fstat(fd).st_mode):
                continue
            if _LOCKS:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)   # BlockingIOError: a save is writing it
            elif time.time() - os.fstat(fd).st_mtime < STALE_AFTER:
                continue
            os.unlink(entry.path)
        except OSError:
            continue
        finally:
            os.close(fd)


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
