"""One place that turns any exception into a message and an exit code.

``cli.main`` hands every exception that escapes a command to :func:`describe`, which returns a
:class:`Failure`: one message naming the file, table, column or key where it can, the full cause
(DuckDB's whole explanation, not its first line) and what to do, with the documented exit code —
0 ok, 1 an analysis could not be done, 2 bad config or arguments, 3 bad data. Nothing reaches the
terminal as a traceback (set ``LIFTLAG_DEBUG=1`` to see one).

It also owns the Ctrl-C flag: :func:`interrupt_guard` installs a SIGINT handler that records the
interrupt before raising ``KeyboardInterrupt``, so an interrupt that a library swallows (Python
prints "Exception ignored ..." when one arrives inside a finaliser) still ends the run with
exit 1 and a message.
"""

from __future__ import annotations

import contextlib
import errno
import re
import signal
import threading
import tomllib
from dataclasses import dataclass
from pathlib import Path

from .errors import LiftlagError

INTERRUPTED_MESSAGE = "interrupted; nothing was left half-written"
INTERRUPTED_EXIT = 1


@dataclass(frozen=True)
class Failure:
    """What to tell the user, and the exit status."""

    message: str
    exit_code: int


_interrupted = threading.Event()


def interrupt_requested() -> bool:
    """True once Ctrl-C was pressed during the current command (even if the interrupt was swallowed)."""
    return _interrupted.is_set()


@contextlib.contextmanager
def interrupt_guard():
    """Record SIGINT while a command runs (main thread only), then restore the previous handler."""
    _interrupted.clear()
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def on_sigint(signum, frame):
        _interrupted.set()
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGINT, on_sigint)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


# ---------------------------------------------------------------------------- DuckDB's messages

_OPTION_LINE = re.compile(r"^\s{2}[a-z_]+ = .*")
_LONGEST = 200  # characters of one line of the cause (an "Original Line" may be megabytes)
_IGNORE_ERRORS = re.compile(r"ignore.errors|ignore_errors", re.I)


def duckdb_cause(exc: BaseException) -> str:
    """DuckDB's whole explanation on one line: every line of the cause, without the echoed SQL,
    the reader's option dump (except the file) or advice to skip bad rows (we account for rows)."""
    lines = []
    for line in str(exc).strip().splitlines():
        if line.startswith("LINE ") or set(line.strip()) <= {"^", ""}:
            if line.startswith("LINE "):
                break
            continue
        if _OPTION_LINE.match(line) and not line.strip().startswith("file ="):
            continue
        if (_IGNORE_ERRORS.search(line) or line.startswith(("Possible Solution", "* ", "Possible fixes"))
                or "search space used" in line or line.startswith(("Delimiter Candidates", "Quote/Escape Candidates",
                                                                   "Comment Candidates"))):
            continue  # DuckDB's reader options, which liftlag's config does not expose
        line = line.strip()
        lines.append(line if len(line) <= _LONGEST else line[:_LONGEST] + f"... ({len(line):,} characters)")
    text = "; ".join(part.rstrip(".;") for part in lines if part)
    return text or type(exc).__name__


# ---------------------------------------------------------------------------- which setting

def _setting_for(filename: str | None, args) -> str:
    """Name the argument or config key that chose ``filename`` (best effort), with what to do."""
    if not filename or args is None:
        return "check the path and its permissions"
    target = Path(filename).expanduser().resolve()
    out = getattr(args, "out", None)
    if out:
        out_path = Path(out).expanduser().resolve()
        if target == out_path or out_path in target.parents:
            return f"give --out a folder you can write to (found --out {out})"
    config_path = getattr(args, "config", None)
    if config_path:
        try:
            from . import config

            settings = config.load(config_path)
        except Exception:  # the config itself is what failed; no key to name
            return "check the path and its permissions"
        ws = settings.workspace_dir.resolve()
        if target == ws or ws in target.parents or target in ws.parents:
            return (f"set [workspace] path in {settings.config_path} to a folder you can write to "
                    f"(now {settings.workspace_dir})")
        temp = settings.engine.temp_directory
        if temp is not None:
            tmp = settings.resolve(temp).resolve()
            if target == tmp or tmp in target.parents:
                return f"set [engine] temp_directory in {settings.config_path} to a folder you can write to"
        for name, table in settings.tables.items():
            base = settings.resolve(table.path)
            if target == base.resolve() or str(target).startswith(str(base.parent.resolve())):
                return f"check tables.{name}.path in {settings.config_path} and the file's permissions"
    return "check the path and its permissions"


# ---------------------------------------------------------------------------- the mapping

def describe(exc: BaseException, args=None) -> Failure:
    """Map an exception to a message and an exit code.

    Parameters
    ----------
    exc : BaseException
        What escaped the command.
    args : argparse.Namespace, optional
        The parsed command line; lets the message name ``--out`` or the config key behind a path.
    """
    import duckdb

    if isinstance(exc, LiftlagError):
        return Failure(str(exc), exc.exit_code)
    if isinstance(exc, (KeyboardInterrupt, duckdb.InterruptException)) or (
            isinstance(exc, RuntimeError) and "interrupt" in str(exc).lower()):
        return Failure(INTERRUPTED_MESSAGE, INTERRUPTED_EXIT)
    if isinstance(exc, tomllib.TOMLDecodeError):
        return Failure(f"{getattr(args, 'config', 'the config')}: not valid TOML: {exc}", 2)
    if isinstance(exc, UnicodeDecodeError):
        return Failure(
            f"a text is not UTF-8 ({exc.encoding}: byte 0x{exc.object[exc.start]:02x} at position {exc.start}: "
            f"{exc.reason}); export the file as UTF-8, or set tables.<table>.encoding for a CSV", 3)
    if _is_markup_error(exc):
        return Failure(f"a text could not be printed because it contains [ ] markup ({exc}); "
                       f"this is a liftlag bug: please report it with the command you ran", 1)
    if isinstance(exc, duckdb.Error):
        return _describe_duckdb(exc, args)
    if isinstance(exc, OSError):
        return _describe_os(exc, args)
    if _is_spark_out_of_memory(exc):
        return Failure(
            "Spark ran out of memory; give it more with [engine.spark_conf] \"spark.driver.memory\" (in local mode "
            "the driver does all the work; Spark's default is 1g, and 10M order lines need about 4g), or run on a "
            "cluster", 1)
    if isinstance(exc, MemoryError):
        return Failure("out of memory; set [engine] memory_limit below the machine's memory so DuckDB spills to "
                       "temp_directory, or run on a larger machine", 1)
    return Failure(
        f"internal error ({type(exc).__name__}: {exc}); this is a liftlag bug: please report it with the command "
        f"you ran (LIFTLAG_DEBUG=1 shows the traceback)", 1)


def _is_spark_out_of_memory(exc: BaseException) -> bool:
    """A Spark job that failed for want of memory (py4j's error carries the JVM's error as text)."""
    if type(exc).__name__ not in ("Py4JJavaError", "SparkRuntimeException", "PySparkRuntimeError"):
        return False
    text = str(exc)
    return any(mark in text for mark in ("SparkOutOfMemoryError", "java.lang.OutOfMemoryError",
                                         "UNABLE_TO_ACQUIRE_MEMORY"))


def _is_markup_error(exc: BaseException) -> bool:
    try:
        from rich.errors import MarkupError
    except ImportError:  # pragma: no cover
        return False
    return isinstance(exc, MarkupError)


def _describe_duckdb(exc, args) -> Failure:
    import duckdb

    cause = duckdb_cause(exc)
    lower = cause.lower()
    if isinstance(exc, duckdb.OutOfMemoryException) or "out of memory" in lower:
        return Failure(f"DuckDB ran out of memory: {cause}; set [engine] memory_limit below the machine's memory "
                       f"and temp_directory on a disk with room, so it spills instead", 1)
    if "permission denied" in lower or "read-only file system" in lower or isinstance(exc, duckdb.PermissionException):
        filename = _quoted_path(cause)
        return Failure(f"cannot write: {cause}; {_setting_for(filename, args)}", 2)
    if "no space left" in lower:
        return Failure(f"the disk is full: {cause}; free space, or move [workspace] path / [engine] temp_directory", 1)
    if isinstance(exc, (duckdb.CatalogException, duckdb.BinderException)):
        config = getattr(args, "config", None) or "liftlag.toml"
        return Failure(f"the workspace lacks a table or column this step needs ({cause}); rebuild it with "
                       f"`liftlag build --force -c {config}`", 1)
    located = _locate_unreadable(args)
    if located is not None:
        table, filename, file_cause = located
        return Failure(f"table {table}: {filename} cannot be read ({file_cause}); the file is damaged or not "
                       f"Parquet: export it again (the query failed with: {cause})", 3)
    if (isinstance(exc, (duckdb.InvalidInputException, duckdb.ConversionException, duckdb.IOException))
            or "parquet" in lower or "csv" in lower):
        return Failure(f"a file of the export cannot be read: {cause}; export it again or fix it, "
                       f"then run `liftlag check`", 3)
    return Failure(f"the query engine failed: {cause}; if the message names a file, check it, "
                   f"otherwise please report it with the command you ran", 1)


def _locate_unreadable(args):
    """Name the export file behind a read failure that does not name it (failure path only)."""
    config_path = getattr(args, "config", None)
    if not config_path:
        return None
    try:
        from . import config, sources

        return sources.locate_unreadable(config.load(config_path))
    except Exception:  # noqa: BLE001 - best effort; the original cause is still reported
        return None


def _quoted_path(text: str) -> str | None:
    found = re.search(r"\"([^\"]+)\"|'([^']+)'", text)
    return (found.group(1) or found.group(2)) if found else None


def _describe_os(exc: OSError, args) -> Failure:
    filename = exc.filename if isinstance(exc.filename, str) else (str(exc.filename) if exc.filename else None)
    what = exc.strerror or str(exc)
    where = f"{filename}: " if filename else ""
    todo = _setting_for(filename, args)
    if exc.errno == errno.ENOSPC:
        return Failure(f"{where}the disk is full; free space, or move [workspace] path / [engine] temp_directory", 1)
    if isinstance(exc, PermissionError) or exc.errno == errno.EROFS:
        return Failure(f"{where}{what} (liftlag needs to write or read here); {todo}", 2)
    if isinstance(exc, (NotADirectoryError, FileExistsError)):
        return Failure(f"{where}a part of this path is a file where a folder is needed; {todo}", 2)
    if isinstance(exc, IsADirectoryError):
        return Failure(f"{where}is a folder where a file is needed; {todo}", 2)
    if isinstance(exc, FileNotFoundError):
        return Failure(f"{where}not found ({what}); it may have been moved while liftlag ran; {todo}", 1)
    return Failure(f"{where}{what}; {todo}", 1)
