"""Run the camp server's app on a loopback port in a background thread (the demo and tests use it)."""

from __future__ import annotations

import contextlib
import socket
import threading
import time
from typing import Any, Iterator

__all__ = ["free_port", "serve_in_thread"]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextlib.contextmanager
def serve_in_thread(app: Any, *, port: int | None = None, timeout_s: float = 20.0,
                    tls: tuple[str, str] | None = None) -> Iterator[str]:
    """Serve ``app`` with uvicorn on 127.0.0.1 (HTTPS with ``tls=(cert, key)``); yields the base URL; stops
    the server on exit."""
    import uvicorn

    port = port or free_port()
    from .app import KEEP_ALIVE_S

    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning", lifespan="on",
                                           ssl_certfile=tls[0] if tls else None, ssl_keyfile=tls[1] if tls else None,
                                           timeout_keep_alive=KEEP_ALIVE_S))
    thread = threading.Thread(target=server.run, name="baulk-loopback", daemon=True)
    thread.start()
    deadline = time.monotonic() + timeout_s
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            raise RuntimeError(f"the camp server did not start on 127.0.0.1:{port}")
        time.sleep(0.02)
    try:
        yield f"{'https' if tls else 'http'}://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=timeout_s)
