"""The access log ``baulk serve`` writes never holds a credential.

Baulk sends tokens only in the ``Authorization`` header and never logs headers, but a client may still put one
in a URL (``/v1/status?token=...``), and uvicorn's access log writes the path with its query string. The filter
here rewrites each access line's query string first: the value of every parameter whose name says it holds a
secret (``SECRET_NAMES``), and every value shaped like a device token or key (a long run of URL-safe base64),
becomes ``[redacted]``; the rest stays, so the log still says which page was asked for.
"""

from __future__ import annotations

import copy
import logging
import re
from typing import Any
from urllib.parse import unquote_plus

__all__ = ["REDACTED", "SECRET_NAMES", "RedactQuery", "log_config", "redact_target"]

REDACTED = "[redacted]"
# a parameter whose name holds one of these (any case) carries a secret
SECRET_NAMES = ("token", "key", "secret", "pass", "pwd", "auth", "session", "csrf", "cookie", "sig", "credential",
                "bearer")
_TOKEN_SHAPED = re.compile(r"[A-Za-z0-9_\-]{32,}")  # secrets.token_urlsafe(32) is 43 such characters
_UUID = re.compile(r"[0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12}")


def _secret(name: str, value: str) -> bool:
    lowered = unquote_plus(name).lower()
    plain = unquote_plus(value)
    return any(word in lowered for word in SECRET_NAMES) or (
        _TOKEN_SHAPED.fullmatch(plain) is not None and _UUID.fullmatch(plain) is None)


def redact_target(target: str) -> str:
    """``path?query`` with secret values replaced by ``[redacted]`` (a target without a query is unchanged)."""
    path, mark, query = target.partition("?")
    if not mark:
        return target
    parts = []
    for part in query.split("&"):
        name, eq, value = part.partition("=")
        if eq:
            parts.append(f"{name}={REDACTED}" if _secret(name, value) else part)
        else:  # a bare value: ?<token>
            parts.append(REDACTED if _secret("", name) else part)
    return f"{path}?{'&'.join(parts)}"


class RedactQuery(logging.Filter):
    """A filter for the ``uvicorn.access`` logger: every argument holding a request target is redacted."""

    def filter(self, record: logging.LogRecord) -> bool:
        if isinstance(record.args, tuple):
            record.args = tuple(redact_target(a) if isinstance(a, str) and "?" in a else a for a in record.args)
        return True


def log_config() -> dict[str, Any]:
    """uvicorn's own logging set-up with ``RedactQuery`` on its access log (for ``uvicorn.run(log_config=...)``)."""
    from uvicorn.config import LOGGING_CONFIG

    config = copy.deepcopy(LOGGING_CONFIG)
    config.setdefault("filters", {})["redact_query"] = {"()": f"{__name__}.RedactQuery"}
    config["loggers"]["uvicorn.access"]["filters"] = ["redact_query"]
    return config
