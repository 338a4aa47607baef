"""The desktop camera path in a real window. These machines have no camera: Kivy finds no camera provider, so the
Photo dialog falls back to the file chooser (checked by touch); the provider rule is checked on a folder of device
files; and the one function the camera path goes through, ``picture_from_camera``, is run on real Kivy textures
(drawn the usual way and flipped, as camera providers draw theirs), its JPEG read back by Pillow."""

from __future__ import annotations

from pathlib import Path

import pytest
from PIL import Image

from schema.errors import PhotoError
from schema.records import Photo
from tests.ui.test_tablet_windows import _start_day

pytestmark = pytest.mark.ui

RED, BLUE = (220, 30, 30), (30, 30, 220)


def test_with_no_camera_the_dialog_offers_the_file_chooser(tablet, run_app, shots) -> None:  # type: ignore[no-untyped-def]
    d = run_app(tablet.path, simulate=True)
    from kivy.core.camera import Camera as CoreCamera

    from mobile.ui.photo import camera_provider

    if CoreCamera is not None or list(Path("/dev").glob("video*")):
        pytest.skip("this machine has a camera provider or a video device; the fallback cannot be seen here")
    assert camera_provider() is None
    _start_day(d)
    units = d.nav("units")
    d.choose(units.ids.chosen, "101")
    d.tap(units.ids.photo)
    d.pump(5)
    dialog = units.dialog
    assert dialog.camera_view is None and dialog.chooser is not None and dialog.chooser.parent is not None
    d.screenshot(shots, "photo-dialog-no-camera")
    d.tap(dialog.cancel_button)


def test_a_camera_counts_only_with_a_provider_and_a_video_device(tmp_path: Path) -> None:
    from kivy.utils import platform

    from mobile.ui.photo import usable_camera

    assert usable_camera(None, tmp_path) is None
    if platform == "linux":
        assert usable_camera("CameraOpenCV", tmp_path) is None  # a provider but nothing plugged in
    (tmp_path / "video0").touch()  # a device file, as udev makes one for a USB camera
    assert usable_camera("CameraOpenCV", tmp_path) == "CameraOpenCV"
    assert usable_camera(None, tmp_path) is None


def _texture(flipped: bool):  # type: ignore[no-untyped-def]
    """A 32 x 32 texture whose upright picture is red above blue."""
    from kivy.graphics.texture import Texture

    top, bottom = bytes(RED) * 32 * 16, bytes(BLUE) * 32 * 16
    texture = Texture.create(size=(32, 32), colorfmt="rgb")
    if flipped:  # how camera providers fill theirs: rows from the top, drawn through flipped coordinates
        texture.blit_buffer(top + bottom, colorfmt="rgb", bufferfmt="ubyte")
        texture.flip_vertical()
    else:  # OpenGL's own order: rows from the bottom
        texture.blit_buffer(bottom + top, colorfmt="rgb", bufferfmt="ubyte")
    return texture


@pytest.mark.parametrize("flipped", [False, True])
def test_the_cameras_frame_is_written_upright(run_app, tablet, tmp_path: Path, flipped: bool) -> None:  # type: ignore[no-untyped-def]
    run_app(tablet.path)  # a GL context for the textures
    from mobile.ui.photo import picture_from_camera

    out = picture_from_camera(_texture(flipped), tmp_path / "camera")
    with Image.open(out) as img:  # Pillow reads the JPEG back
        assert img.format == "JPEG" and img.size == (32, 32)
        rgb = img.convert("RGB")
        for got, want in ((rgb.getpixel((16, 6)), RED), (rgb.getpixel((16, 26)), BLUE)):
            assert max(abs(a - b) for a, b in zip(got, want)) < 30, (got, want)
    with pytest.raises(PhotoError, match="the camera has not shown a picture yet; wait for the live view"):
        picture_from_camera(None, tmp_path / "camera")


def test_a_cameras_frame_is_kept_by_hash_and_the_frame_file_goes(tablet, run_app, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    d = run_app(tablet.path, simulate=True)
    from mobile.ui.photo import photo_controller, picture_from_camera

    _start_day(d)
    units = d.nav("units")
    d.choose(units.ids.chosen, "101")
    frame = picture_from_camera(_texture(True), photo_controller(d.app).folder / "camera")
    d.tap(units.ids.photo)
    d.pump(5)
    d.type(units.dialog.path, str(frame))  # where the camera's Take picture button puts it
    d.tap(units.dialog.keep_button)
    (kept,) = d.app.store.list(Photo)
    assert (kept.subject, kept.width_px, kept.height_px) == ("unit", 32, 32)
    assert not frame.exists() and photo_controller(d.app).file(kept).is_file()
