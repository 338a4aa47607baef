"""Thumbnails made off the UI thread: the find list's rows and Record ask, a worker thread makes, the UI shows.

Making a thumbnail decodes the photo (tens of milliseconds for a phone's JPEG), too long for a frame. A row or
Record asks ``thumbnails().ask(key, make, deliver)`` and shows a neutral placeholder meanwhile; one worker thread
takes the newest request first (the rows just scrolled into view), runs ``make`` (``mobile.photos``'s
``thumbnail_if_kept``), and hands the path back on the UI thread through Kivy's ``Clock.schedule_once`` (the way
Kivy's own ``kivy.clock.mainthread`` brings work from a thread back to the frame loop), where ``deliver`` checks
that its widget still shows that photo before it sets the picture.

The queue stays small: a request is made once per key however many widgets ask, and a widget that is bound to
another find cancels its request (``cancel``), so a row scrolled away costs no decoding. A thumbnail made once is
remembered (its path) and handed over at once, without the worker.
"""

from __future__ import annotations

import contextlib
import threading
from pathlib import Path
from typing import Callable, Hashable, Iterator

__all__ = ["ThumbnailWorker", "Ticket", "thumbnails"]


class Ticket:
    """One widget's request; ``live`` until delivered or cancelled."""

    __slots__ = ("deliver", "key", "live")

    def __init__(self, key: Hashable, deliver: Callable[[str], None]):
        self.key, self.deliver, self.live = key, deliver, True


class ThumbnailWorker:
    """One thread and one queue of thumbnail requests, newest first, one entry per key."""

    def __init__(self) -> None:
        self._cond = threading.Condition()
        self._queue: dict[Hashable, tuple[Callable[[], Path | None], list[Ticket]]] = {}  # oldest first
        self._made: dict[Hashable, str] = {}  # key -> the thumbnail's path, once made
        self._held = False
        self._thread: threading.Thread | None = None

    def ask(self, key: Hashable, make: Callable[[], Path | None], deliver: Callable[[str], None]) -> Ticket | None:
        """Ask for the thumbnail ``key``; ``deliver(path)`` runs on the UI thread ("" when there is none).
        A thumbnail made before is delivered at once (None returned); else the request's ticket, for ``cancel``."""
        known = self._made.get(key)
        if known is not None:
            deliver(known)
            return None
        ticket = Ticket(key, deliver)
        with self._cond:
            entry = self._queue.pop(key, None)
            tickets = entry[1] if entry else []
            tickets.append(ticket)
            self._queue[key] = (make, tickets)  # to the newest end
            self._start()
            self._cond.notify()
        return ticket

    def cancel(self, ticket: Ticket | None) -> None:
        """The widget no longer wants it (bound to another find, or gone); the request goes when none wants it."""
        if ticket is None or not ticket.live:
            return
        ticket.live = False
        with self._cond:
            entry = self._queue.get(ticket.key)
            if entry is not None:
                entry[1][:] = [t for t in entry[1] if t is not ticket]
                if not entry[1]:
                    del self._queue[ticket.key]

    def waiting(self) -> int:
        """Requests not yet taken by the worker."""
        with self._cond:
            return len(self._queue)

    @contextlib.contextmanager
    def held(self) -> Iterator[None]:
        """The worker takes no request while inside (a screen can keep the disk free for a moment; tests use it
        to see the placeholders and a list scrolled before anything is made)."""
        with self._cond:
            self._held = True
        try:
            yield
        finally:
            with self._cond:
                self._held = False
                self._cond.notify()

    def _start(self) -> None:
        if self._thread is None or not self._thread.is_alive():
            self._thread = threading.Thread(target=self._run, name="baulk-thumbnails", daemon=True)
            self._thread.start()

    def _run(self) -> None:
        from kivy.clock import Clock

        while True:
            with self._cond:
                while self._held or not self._queue:
                    self._cond.wait()
                key = next(reversed(self._queue))  # the newest request first
                make, tickets = self._queue.pop(key)
            try:
                made = make()
            except Exception:  # noqa: BLE001 - a photo that cannot be read shows no thumbnail, never a crash
                made = None
            path = str(made) if made is not None else ""
            if path:
                self._made[key] = path
            Clock.schedule_once(lambda _dt, tickets=tickets, path=path: self._deliver(tickets, path))

    @staticmethod
    def _deliver(tickets: list[Ticket], path: str) -> None:
        for ticket in list(tickets):
            if ticket.live:
                ticket.live = False
                ticket.deliver(path)


_WORKER: ThumbnailWorker | None = None


def thumbnails() -> ThumbnailWorker:
    """The app's one thumbnail worker (made on first use)."""
    global _WORKER
    if _WORKER is None:
        _WORKER = ThumbnailWorker()
    return _WORKER
