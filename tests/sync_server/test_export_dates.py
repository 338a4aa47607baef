"""Two exports in one server process (two managers pressing Export at once) must not see each other's fixed
dates being restored halfway through a write: the process-wide settings are held by one export at a time."""

from __future__ import annotations

import os
import threading

from sync_server.exports import _fixed_dates


def test_a_second_export_waits_until_the_first_has_restored_the_dates() -> None:
    seen: list[str | None] = []
    first_in = threading.Event()
    release_first = threading.Event()
    second_done = threading.Event()

    def first() -> None:
        with _fixed_dates():
            first_in.set()
            release_first.wait(10)
            seen.append(os.environ.get("SOURCE_DATE_EPOCH"))

    def second() -> None:
        first_in.wait(10)
        with _fixed_dates():
            seen.append(os.environ.get("SOURCE_DATE_EPOCH"))
        second_done.set()

    before = os.environ.get("SOURCE_DATE_EPOCH")
    a = threading.Thread(target=first)
    b = threading.Thread(target=second)
    a.start()
    b.start()
    first_in.wait(10)
    # while the first export holds the settings, the second cannot enter
    assert not second_done.wait(0.3)
    release_first.set()
    a.join(10)
    b.join(10)
    assert second_done.is_set()
    assert seen == ["0", "0"]  # each write saw the fixed date, none saw the other's restore
    assert os.environ.get("SOURCE_DATE_EPOCH") == before
