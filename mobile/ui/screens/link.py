"""The camp link: enrol (type the code and address, or paste the scanned line), see what waits, sync with a
progress bar (in the background; the screen stays usable), or with no Wi-Fi write a bundle to a folder on the USB
stick and read the return bundle the camp wrote for this tablet."""

from __future__ import annotations

import threading
from typing import Any

from kivy.clock import Clock
from kivy.properties import BooleanProperty, NumericProperty, StringProperty

from schema.errors import BaulkError
from schema.wording import count_words, error_words

from . import BaulkScreen

__all__ = ["LinkScreen"]


class LinkScreen(BaulkScreen):
    status = StringProperty("")
    progress = NumericProperty(0)
    busy = BooleanProperty(False)
    outcome = StringProperty("")

    def refresh(self) -> None:
        link = self.app.link
        self.status = "\n".join(link.status().lines())
        if not self.ids.server.text:
            self.ids.server.text = self.app.store.setting("link.server") or ""

    def enrol(self) -> None:
        device = self.guard(self.app.link.enrol, self.ids.code.text, server=self.ids.server.text or None)
        if device is not None:
            self.ids.code.text = ""
            self.outcome = f"Enrolled as {device.label}. Tap Sync now to receive the site and your find numbers."
            self.refresh()

    def save_address(self) -> bool:
        typed = self.ids.server.text.strip()
        if not typed or typed.rstrip("/") == (self.app.store.setting("link.server") or ""):
            return True
        address = self.guard(self.app.link.set_server, typed)
        if address is None:
            return False
        self.ids.server.text = address
        self.outcome = f"Camp server address saved: {address}. Sync uses it from now on."
        self.refresh()
        return True

    def sync(self) -> None:
        if self.busy:
            return
        if self.app.store.token() is not None and not self.save_address():  # the address typed is the one used
            return
        self.busy, self.progress, self.outcome, self.problem = True, 0, "Syncing...", ""
        threading.Thread(target=self._sync_in_background, name="baulk-sync", daemon=True).start()

    def _sync_in_background(self) -> None:
        def progress(stage: str, done: int, total: int) -> None:
            share = done / total if total else 1.0
            value = 50 * share if stage == "push" else 50 + 50 * share
            Clock.schedule_once(lambda _dt: setattr(self, "progress", min(100, value)))

        try:
            report: Any = self.app.link.sync(progress)
            text, problem = (f"Sync done: sent {count_words(report.pushed_versions, 'change')}, received "
                             f"{report.applied_versions}."
                             + (f" {count_words(report.conflicts_open, 'conflict waits', 'conflicts wait')} for the data "
                                "manager." if report.conflicts_open else "")), ""
        except BaulkError as exc:
            text, problem = "Sync stopped; nothing sent was lost.", f"PROBLEM: {error_words(exc)}"
        Clock.schedule_once(lambda _dt: self._finished(text, problem))

    def _finished(self, text: str, problem: str) -> None:
        self.busy, self.outcome, self.problem = False, text, problem
        if not problem:
            self.progress = 100
        self.refresh()

    def write_bundle(self) -> None:
        manifest = self.guard(self.app.link.export_bundle, self.ids.bundle_folder.text)
        if manifest is not None:
            self.outcome = f"Bundle written: {manifest['path']}. Give the stick to the data manager."

    def read_bundle(self) -> None:
        self.outcome = ""
        read = self.guard(self.app.link.read_bundle, self.ids.bundle_folder.text)
        if read is not None:
            self.outcome = read.sentence()
            self.refresh()
