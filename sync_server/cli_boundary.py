"""The ``baulk`` command's one error boundary: whatever a command lets out, the user reads one line.

    BaulkError                        "Error: <its message>" (it already names the fix), exit 1
    OSError naming a file             the file, what the system said and what to do, exit 1
    SQLite or database error          the database the command used, what it said and what to do, exit 1
    ValueError, TypeError, KeyError, ... while the command reads files the user handed in
                                      those files, what was wrong, and to give the right one or make it again, exit 1
    anything else (a bug in Baulk)    one line naming a report file that holds the traceback, exit 2

``BAULK_DEBUG=1`` raises everything but a ``BaulkError`` as it is, traceback and all. Click's own exceptions
(usage errors, ``--help``, Ctrl+C) pass through untouched. ``sync_server.cli._BaulkGroup`` calls ``boundary``
for every command, so a command added to the group (or to one of its groups) is covered without doing anything.
"""

from __future__ import annotations

import datetime as dt
import errno
import os
import platform
import re
import secrets
import sqlite3
import tempfile
import traceback
from pathlib import Path
from types import TracebackType
from typing import Any

import click

from schema import __version__
from schema.errors import BaulkError

__all__ = ["DEBUG_ENV", "CommandFailed", "boundary", "report_dir"]

DEBUG_ENV = "BAULK_DEBUG"
# What a file the user handed in raises when it is not what the command expects (a list where an object was, a
# word where a number was, a number too large for the database, nesting too deep for the JSON reader, ...).
_DATA_ERRORS = (ValueError, TypeError, KeyError, IndexError, AttributeError, OverflowError, EOFError, RecursionError)
_MAX_DETAIL = 300
_OS_FIXES = {
    errno.EACCES: "this user may not read or write there; give another path, or ask for access",
    errno.EPERM: "this user may not read or write there; give another path, or ask for access",
    errno.ENOSPC: "the disk is full; free some space, or give a path on another disk",
    errno.EDQUOT: "the disk quota is used up; free some space, or give a path on another disk",
    errno.EROFS: "that disk is read-only; give a path on a disk you may write to",
    errno.EISDIR: "it is a folder; give a file path",
    errno.ENOTDIR: "part of the path is a file, not a folder; check the path",
    errno.ENAMETOOLONG: "the name is too long; give a shorter path",
}
_OS_FIX = "check the path, that its folder exists and that you may write there, or give another path"


class CommandFailed(click.ClickException):
    """One line for the user: exit 1 for a problem they can fix, 2 for a problem in Baulk itself."""

    def __init__(self, message: str, exit_code: int = 1):
        super().__init__(message)
        self.exit_code = exit_code


def boundary(exc: Exception) -> BaseException:
    """What the group raises instead of ``exc``: the exception itself when it is Click's own or when
    ``BAULK_DEBUG=1`` asks for tracebacks, otherwise a ``CommandFailed`` with one line."""
    if isinstance(exc, (click.exceptions.ClickException, click.exceptions.Abort, click.exceptions.Exit)):
        return exc
    if isinstance(exc, BaulkError):
        return CommandFailed(str(exc))
    if os.environ.get(DEBUG_ENV) == "1":
        return exc
    ctx = _innermost(exc.__traceback__, click.Context)  # the failed command's (the innermost on the way down)
    try:
        message = _user_problem(exc, ctx)
    except Exception:  # noqa: BLE001 - the boundary itself must not fail: then it is reported as a bug
        message = None
    if message is not None:
        return CommandFailed(message)
    return CommandFailed(_unexpected(exc, ctx), exit_code=2)


# -- problems the user can fix ---------------------------------------------------------------------------------
def _user_problem(exc: Exception, ctx: click.Context | None) -> str | None:
    if isinstance(exc, OSError) and exc.filename is not None:
        return _os_problem(exc)
    if _is_database_problem(exc):
        return _database_problem(exc, ctx)
    if isinstance(exc, _DATA_ERRORS) and (files := _input_files(ctx)):
        shown = files[0] if len(files) == 1 else f"one of {', '.join(files)}"
        return (f"{shown} cannot be read by this command ({_detail(exc)}); check that you gave the right file and "
                "that it was copied whole, and make it again if it was changed or cut short")
    return None


def _os_problem(exc: OSError) -> str:
    fix = _OS_FIXES.get(exc.errno or 0, _OS_FIX)
    return f"cannot use {_shown_path(exc.filename)}: {exc.strerror or exc}; {fix}"


def _shown_path(name: Any) -> str:
    """The path the user gave: Baulk writes each output beside it as ``NAME.part`` and renames it when whole."""
    text = os.fsdecode(name) if isinstance(name, (str, bytes, os.PathLike)) else str(name)
    return text.removesuffix(".part")


def _is_database_problem(exc: Exception) -> bool:
    """A database that cannot be read or written (damaged, not a database, locked, full, unreachable); not a
    statement Baulk got wrong (no such table, a broken constraint), which is a bug."""
    import sqlalchemy as sa

    orig = exc.orig if isinstance(exc, sa.exc.DBAPIError) else exc
    if not isinstance(orig, Exception):
        return False
    if isinstance(orig, sqlite3.OperationalError):
        return not re.match(r"(no such (table|column)|near |.*syntax error)", str(orig))
    if type(orig) is sqlite3.DatabaseError:
        return True
    return isinstance(exc, sa.exc.OperationalError)  # PostgreSQL: refused, gone away, out of space


def _database_problem(exc: Exception, ctx: click.Context | None) -> str:
    said = (str(getattr(exc, "orig", None) or exc).strip().splitlines() or [type(exc).__name__])[0]
    low = said.lower()
    if "locked" in low or "busy" in low:
        fix = "another program is writing to it; wait until it has finished (or stop baulk serve) and try again"
    elif "full" in low:
        fix = "its disk is full; free some space and try again"
    elif "readonly" in low or "read-only" in low:
        fix = "this user may not write it; check its permissions, or work on a copy"
    elif "unable to open" in low or "connect" in low:
        fix = "check the path or URL, that it exists and that this user may open it"
    else:
        fix = ("check that it is the right file; if it is damaged, keep it as it is and use its last good copy (a "
               "backup, or a fresh copy from where it came)")
    return f"{_database_of(exc, ctx)} cannot be used as a database ({said}); {fix}"


def _database_of(exc: Exception, ctx: click.Context | None) -> str:
    """The database the failed statement ran on, as the user named it. SQLAlchemy's frames hold the connection
    (its URL says which file; a temporary copy of a tablet file keeps the file's name); without one, the
    command's own database options and files."""
    candidates = _input_files(ctx) + ([_store_of(ctx)] if ctx is not None and "database_url" in ctx.params else [])
    url = _innermost_url(exc.__traceback__)
    if url is not None:
        if url.get_backend_name() != "sqlite":
            return url.render_as_string(hide_password=True)
        used = Path(url.database or "")
        return next((c for c in candidates if Path(c).name == used.name), str(used))
    if len(candidates) == 1:
        return candidates[0]
    return f"one of {', '.join(candidates)}" if candidates else "the database"


def _innermost_url(tb: TracebackType | None) -> Any:
    import sqlalchemy as sa

    found = _innermost(tb, (sa.engine.Connection, sa.engine.Engine))
    return None if found is None else found.engine.url if isinstance(found, sa.engine.Connection) else found.url


def _store_of(ctx: click.Context) -> str:
    """The server store a ``--db`` option names (the settings' default when it was not given)."""
    import sqlalchemy as sa

    url = ctx.params.get("database_url")
    if url is None:
        from .settings import ServerSettings

        url = ServerSettings().database_url
    parsed = sa.make_url(url)
    return parsed.database or url if parsed.get_backend_name() == "sqlite" else parsed.render_as_string(hide_password=True)


def _input_files(ctx: click.Context | None) -> list[str]:
    """The files the user handed the command to read: its arguments and options that must already exist."""
    if ctx is None:
        return []
    files = []
    for param in ctx.command.params:
        value = ctx.params.get(param.name or "")
        if isinstance(param.type, click.Path) and param.type.exists and value is not None:
            files.extend(str(v) for v in (value if isinstance(value, (tuple, list)) else [value]))
    return files


def _innermost(tb: TracebackType | None, kind: Any) -> Any:
    """The local value of type ``kind`` nearest the error among the frames from the boundary down to it."""
    found = None
    for frame, _line in traceback.walk_tb(tb):
        for value in list(frame.f_locals.values()):
            try:
                if isinstance(value, kind):
                    found = value
            except Exception:  # noqa: BLE001, S112 - a proxy object that cannot say its class is not one
                continue
    return found


def _detail(exc: BaseException) -> str:
    text = (str(exc).strip().splitlines() or [""])[0]
    if len(text) > _MAX_DETAIL:
        text = text[: _MAX_DETAIL - 3] + "..."
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


# -- problems in Baulk itself ----------------------------------------------------------------------------------
def _unexpected(exc: Exception, ctx: click.Context | None) -> str:
    head = f"Baulk hit an unexpected problem ({_detail(exc)}); please report it"
    try:
        path = _write_report(exc, ctx)
    except Exception as why:  # noqa: BLE001 - the line must still be printed
        return f"{head} with the command you ran and this message (the details could not be saved: {why})"
    return f"{head} with the file {path}"


def report_dir() -> Path:
    """Where reports go: the platform's user log folder, else its user cache folder, else the temporary folder."""
    import platformdirs

    for where in (platformdirs.user_log_dir("baulk", appauthor=False),
                  platformdirs.user_cache_dir("baulk", appauthor=False), tempfile.gettempdir()):
        folder = Path(where)
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError:
            continue
        if os.access(folder, os.W_OK):
            return folder
    raise OSError(errno.EACCES, "no folder for the report may be written")


def _write_report(exc: Exception, ctx: click.Context | None) -> Path:
    now = dt.datetime.now(dt.timezone.utc)
    path = report_dir() / f"baulk-error-{now:%Y%m%d-%H%M%S}-{secrets.token_hex(3)}.txt"
    params = {k: _redact(v) for k, v in (ctx.params.items() if ctx is not None else [])}
    lines = [
        f"Baulk {__version__}: unexpected problem, {now.isoformat(timespec='seconds')}",
        f"command: {ctx.command_path if ctx is not None else 'baulk'}",
        f"options: {params}",
        f"python {platform.python_version()} on {platform.platform()}",
        "",
        *traceback.format_exception(exc),
    ]
    path.write_text("\n".join(line.rstrip("\n") for line in lines) + "\n", encoding="utf-8")
    return path


def _redact(value: Any) -> Any:
    """A database URL without its password (a report may be sent to anyone)."""
    if isinstance(value, str):
        return re.sub(r"(://[^:/@]+:)[^@]+@", r"\1***@", value)
    return value
