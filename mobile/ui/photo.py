"""The photo dialog opened by the Photo buttons (Record, Units, Day): on Android the system camera; on a desktop or
Linux tablet a connected camera through Kivy's camera provider when there is one (``camera_provider``), else a
file chooser (or a typed path); then the register entry: caption, facing, scale and north arrow in frame. Keeping
it calls ``PhotoController.keep``; what went wrong is shown in the dialog in the controller's words.

The camera path is ``picture_from_camera``: the live view's current frame written as a JPEG, then kept by hash
like a chosen file (the frame file itself is removed once kept)."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Callable

from kivy.metrics import dp
from kivy.uix.boxlayout import BoxLayout
from kivy.uix.popup import Popup
from kivy.utils import platform

from schema.errors import BaulkError, PhotoError
from schema.wording import error_words

from ..controllers.photos import PhotoController, PhotoTarget
from .widgets import Alarm, Big, Choice, Entry, Pick, Say

__all__ = ["PhotoDialog", "camera_provider", "photo_controller", "picture_from_camera", "usable_camera"]

IMAGE_FILES = ["*.jpg", "*.jpeg", "*.JPG", "*.JPEG", "*.png", "*.PNG"]


def photo_controller(app: Any) -> PhotoController:
    """The app's photo controller, made once over its day."""
    if getattr(app, "_photo_controller", None) is None:
        app._photo_controller = PhotoController(app.days)
    return app._photo_controller  # type: ignore[no-any-return]


def _start_folder() -> str:
    for candidate in (Path.home() / "Pictures", Path.home()):
        if candidate.is_dir():
            return str(candidate)
    return "/"


def usable_camera(provider: str | None, devices: Path = Path("/dev")) -> str | None:
    """``provider`` when a camera can be used through it: on Linux a video device must be connected too (Kivy's
    providers load without one, then show nothing)."""
    if provider is None:
        return None
    if platform == "linux" and not any(devices.glob("video*")):
        return None
    return provider


def camera_provider() -> str | None:
    """The name of Kivy's camera provider class when one is installed and a camera is connected; None sends the
    dialog to the file chooser."""
    from kivy.core.camera import Camera as CoreCamera  # Kivy picks the first provider that imports (gi, opencv...)

    return usable_camera(CoreCamera.__name__ if CoreCamera is not None else None)


def picture_from_camera(texture: Any, folder: Path) -> Path:
    """The camera's current frame (a Kivy texture) as a JPEG in ``folder``, upright; kept by hash afterwards."""
    import uuid

    from PIL import Image

    if texture is None:
        raise PhotoError("the camera has not shown a picture yet; wait for the live view, then take the picture")
    frame = Image.frombytes("RGBA", texture.size, texture.pixels)  # Kivy gives RGBA rows from the bottom up
    if texture.tex_coords[1] <= texture.tex_coords[5]:  # a camera texture drawn flipped holds its rows top down
        frame = frame.transpose(Image.Transpose.FLIP_TOP_BOTTOM)
    folder.mkdir(parents=True, exist_ok=True)
    out = folder / f"camera-{uuid.uuid4().hex}.jpg"
    frame.convert("RGB").save(out, format="JPEG", quality=92)
    return out


class PhotoDialog(Popup):
    """Take or choose one photo of ``target`` and keep it; ``on_kept(photo)`` is called after."""

    def __init__(self, photos: PhotoController, target: PhotoTarget, on_kept: Callable[[Any], Any], **kw: Any):
        super().__init__(title=f"Photo of {target.label}", size_hint=(0.94, 0.94), auto_dismiss=False,
                         title_size="22sp", **kw)
        self.photos, self.target, self.on_kept = photos, target, on_kept
        box = BoxLayout(orientation="vertical", spacing=dp(8), padding=dp(8))
        self.chooser: Any = None
        self.camera_view: Any = None
        self.problem = Alarm(text="", size_hint_y=None, height=dp(72))
        if platform == "android":  # pragma: no cover - no Android here
            box.add_widget(Big(text="Open the camera", on_release=lambda *_: self.camera()))
        elif camera_provider() is not None:  # pragma: no cover - no camera on these machines
            from kivy.uix.camera import Camera

            self.camera_view = Camera(play=True, size_hint_y=1)
            box.add_widget(self.camera_view)
            box.add_widget(Big(text="Take picture", size_hint_y=None, height=dp(64), on_release=lambda *_: self.snap()))
            self.bind(on_dismiss=lambda *_: setattr(self.camera_view, "play", False))
        else:
            from kivy.uix.filechooser import FileChooserListView

            self.chooser = FileChooserListView(path=_start_folder(), filters=IMAGE_FILES, size_hint_y=1)
            self.chooser.bind(selection=lambda _w, sel: self._chosen(sel))
            box.add_widget(self.chooser)
        self.path = Entry(hint_text="the picture's file (chosen above, or typed)", size_hint_y=None, height=dp(56))
        self.path.bind(text=lambda *_: setattr(self.problem, "text", ""))  # a new file: the old problem is gone
        box.add_widget(self.path)
        self.caption = Entry(hint_text="caption: what the photo shows", size_hint_y=None, height=dp(56))
        box.add_widget(self.caption)
        row = BoxLayout(size_hint_y=None, height=dp(60), spacing=dp(8))
        row.add_widget(Say(text="Facing", size_hint_x=0.3))
        self.facing = Pick(text="", values=photos.facings())
        row.add_widget(self.facing)
        box.add_widget(row)
        ticks = BoxLayout(size_hint_y=None, height=dp(60), spacing=dp(8))
        self.scale = Choice(text="Scale in frame")
        self.north = Choice(text="North arrow in frame")
        ticks.add_widget(self.scale)
        ticks.add_widget(self.north)
        box.add_widget(ticks)
        box.add_widget(self.problem)
        buttons = BoxLayout(size_hint_y=None, height=dp(64), spacing=dp(8))
        self.keep_button = Big(text="Keep photo", on_release=lambda *_: self.keep())
        self.cancel_button = Big(text="Cancel", on_release=lambda *_: self.dismiss())
        buttons.add_widget(self.keep_button)
        buttons.add_widget(self.cancel_button)
        box.add_widget(buttons)
        self.content = box

    def _chosen(self, selection: list[str]) -> None:
        if selection:
            self.path.text = selection[0]

    def camera(self) -> None:  # pragma: no cover - Android
        from ..photos import android_camera

        def taken(path: Path | None) -> None:
            if path is not None:
                self.path.text = str(path)

        android_camera(self.photos.folder / "camera", taken)

    def snap(self) -> None:  # pragma: no cover - no camera on these machines
        try:
            self.path.text = str(picture_from_camera(self.camera_view.texture, self.photos.folder / "camera"))
        except BaulkError as exc:
            self.problem.text = f"PROBLEM: {error_words(exc)}"

    def keep(self) -> None:
        if not self.path.text.strip():
            self.problem.text = "PROBLEM: choose the picture's file first (or take one with the camera)"
            return
        try:
            photo = self.photos.keep(self.target, self.path.text.strip(), caption=self.caption.text,
                                     facing=self.facing.text, scale=self.scale.state == "down",
                                     north_arrow=self.north.state == "down")
        except BaulkError as exc:
            self.problem.text = f"PROBLEM: {error_words(exc)}"
            return
        taken = Path(self.path.text.strip())
        if taken.parent == self.photos.folder / "camera":  # a camera's frame: kept by hash now, the frame goes
            taken.unlink(missing_ok=True)
        self.dismiss()
        self.on_kept(photo)
